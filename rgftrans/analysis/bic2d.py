"""Accidental bound states in the continuum that need two parameters.

With time-reversal symmetry (no magnetic field) the lead self-energies are
complex symmetric, ``Sigma_p(E) = Lambda_p(E) - (i/2) Gamma_p(E)`` with real
symmetric ``Lambda_p`` and ``Gamma_p = sum_c gamma_c w_c w_c^T`` (one real unit
vector ``w_c`` per open channel, ``gamma_c > 0``).  A real unit vector ``psi``
is a bound state in the continuum at energy ``E`` exactly when

* ``(H + Lambda(E)) psi = E psi`` (an eigenstate of the real part of the
  effective Hamiltonian, self-consistent in E), and
* ``w_c^T psi = 0`` for every open channel c of every lead

(then ``Gamma psi = 0`` and ``H_eff psi = E psi`` with real E).  Each open
channel adds one real condition, so with one channel in each of two leads
a BIC is a point of a two-parameter plane: the common zero of two signed
*coupling residuals* ``r_c = w_c^T psi``.  Because ``w_c`` has unit length,
``r_c`` does not vanish at a channel threshold the way the width does (there
``gamma_c -> 0`` with the channel's velocity); a root of the residuals is a
genuine dark state, never a threshold artefact.

The residuals are smooth with simple zeros, so the search is Newton's
method with a finite-difference Jacobian; on a stored grid, candidate cells
are those around which the residual vector winds once about the origin.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field, replace

import numpy as np

from rgftrans.analysis.darkstates import (PROTECTED_WIDTH, WIDTH_FLOOR, clamp_rtol, inside_window, progress_bar,
                                          report_beside)
from rgftrans.errors import EigenSolveFailed, RgftransError
from rgftrans.leads.embedding import embedded_self_energy, lead_self_energies
from rgftrans.spectra.eigen import eigenvalues_near
from rgftrans.spectra.poles import follow_pole
from rgftrans.system.device import TightBindingModel

__all__ = ["CouplingResiduals", "coupling_residuals", "Bic2D", "locate_bic_2d", "explain", "GridSearch", "search_grid",
           "plane_seeds"]

#: Self-consistency of E: stop when it moves less than this fraction of the energy scale.
ENERGY_TOL = 1e-13
#: The tracked state must overlap the reference by at least this much, else the identity is lost.
MIN_OVERLAP = 0.5
#: A residual vector shorter than this is zero to round-off (the couplings are unit-normalised).
ZERO_RESIDUAL = 1e-12
#: Finite-difference step of the Jacobian, as a fraction of the user's parameter step.
JACOBIAN_STEP = 1e-4
#: Closed-dot levels nearest a dark state among which `explain` names its two largest parts.
EXPLAIN_LEVELS = 8
#: Closed-dot levels nearest the window's centre that `plane_seeds` looks at (a window holding more keeps these).
SEED_LEVELS = 60
#: Finest relative precision of the Newton search: ten units of round-off (eps = 2.2e-16).  The residuals vanish
#: linearly, so the zero is pinned to round-off of the parameters themselves (unlike a quadratic width zero, see
#: darkstates.locate_bic); below a few ulps the step test |dp| <= rtol |p| can be met only by an exactly zero step,
#: and the search would spend its solves in vain (common practice, no source).  A finer rtol is clamped.
RTOL_FLOOR_2D = 10 * float(np.finfo(float).eps)


@dataclass(frozen=True, eq=False)
class CouplingResiduals:
    """The signed couplings of one state of ``H + Lambda(E)`` to every open lead channel.

    Attributes
    ----------
    energy_meV : float
        Self-consistent eigenvalue: ``E`` with ``(H + Lambda(E)) psi = E psi``.
    residuals : (n_channels,) float
        ``w_c^T psi`` for every open channel (unit ``w_c``), lead by lead; all zero at a BIC.
    channels : tuple of (str, int)
        (lead name, channel index) of each residual.
    n_open : tuple of int
        Open channels of each lead at ``energy_meV``.
    gammas_meV : (n_channels,) float
        ``gamma_c``: the channel's weight in ``Gamma_p`` (vanishes at its threshold).
    overlap : float
        ``|psi . reference|`` (1.0 without a reference).
    state : (n_orbitals,) float
        ``psi``: real, unit norm, sign aligned with the reference.
    """

    energy_meV: float
    residuals: np.ndarray
    channels: tuple
    n_open: tuple
    gammas_meV: np.ndarray
    overlap: float
    state: np.ndarray = field(repr=False)

    @property
    def norm(self) -> float:
        """Length of the residual vector (0 at a BIC)."""
        return float(np.linalg.norm(self.residuals))

def _require_time_reversal(model: TightBindingModel) -> None:
    ham = model.hamiltonian
    if ham.dtype.kind == "c" and np.any(ham.data.imag != 0):
        raise RgftransError(
            "the two-parameter BIC search needs time-reversal symmetry (a real Hamiltonian: no magnetic field, "
            "no spin-orbit term); with a field, follow the width with locate_bic instead")


def _channel_vectors(gamma: np.ndarray):
    """``gamma_c`` and unit vectors ``w_c`` of ``Gamma = sum gamma_c w_c w_c^T``, each signed so that a fixed
    positive weighting of its components is > 0 (a sign convention that does not jump with the parameters)."""
    w, u = np.linalg.eigh(gamma.real)
    keep = w > 1e-10 * max(w.max(initial=0.0), 1e-300)
    vecs = u[:, keep]
    weights = 1.0 + np.arange(len(gamma)) / max(len(gamma), 1)
    signs = np.sign(weights @ vecs)
    signs[signs == 0] = 1.0
    return w[keep], vecs * signs


def _real_part(model: TightBindingModel, energy: float):
    """``H + Lambda(E)`` (sparse, real) and the channel vectors embedded in the device (one column each)."""
    sigmas, modes = lead_self_energies(model, energy, warn=False)
    n = model.hamiltonian.shape[0]
    chans, names, gammas = [], [], []
    for lead, sigma in zip(model.leads, sigmas):
        gam, vecs = _channel_vectors(1j * (sigma - sigma.conj().T))
        gammas.extend(gam)
        for k in range(vecs.shape[1]):
            full = np.zeros(n)
            full[lead.interface] = vecs[:, k]
            chans.append(full)
            names.append((lead.name, k))
    # Lambda: the real symmetric part of each Sigma (time-reversal symmetric leads: Sigma = Sigma^T).
    sigma_hermitian = embedded_self_energy(model, [(0.5 * (sigma + sigma.T)).real for sigma in sigmas]).real
    h_real = (model.hamiltonian.real + sigma_hermitian).tocsr()
    w_mat = np.array(chans).T if chans else np.zeros((n, 0))
    return h_real, w_mat, tuple(names), tuple(int(m.n_open) for m in modes), np.array(gammas)


def coupling_residuals(model: TightBindingModel, energy_guess: float, *, reference: np.ndarray | None = None,
                       max_iter: int = 80) -> CouplingResiduals:
    """Signed couplings of the state of ``H + Lambda(E)`` near ``energy_guess`` (or continuing ``reference``).

    The state is chosen by the largest overlap with ``reference`` when one is
    given, else as the eigenvalue nearest ``energy_guess``; ``E`` is then
    iterated to self-consistency.  Requires a real Hamiltonian.
    """
    _require_time_reversal(model)
    scale = model.energy_scale
    energy = float(energy_guess)
    ref = None if reference is None else np.asarray(reference, float)
    prev = None  # (E, lambda(E) - E) of the previous step, for secant steps
    for _ in range(max_iter):
        h_real, w_mat, names, n_open, gammas = _real_part(model, energy)
        w, v = eigenvalues_near(h_real, energy, 4, hermitian=True)
        if ref is not None and ref.shape[0] == v.shape[0]:
            k = int(np.argmax(np.abs(ref @ v)))
        else:
            k = 0
        level, psi = float(w[k]), v[:, k].real
        if ref is None:
            ref = psi  # later iterations follow this state, not merely the nearest eigenvalue
        gap = level - energy
        if abs(gap) < ENERGY_TOL * scale:
            break  # w_mat, names, n_open belong to an energy within ENERGY_TOL of the final one
        # Secant on level(E) - E = 0 (plain iteration E <- level(E) stalls where Lambda(E) is steep, near a
        # threshold); the first step is a plain iteration.
        step = gap
        if prev is not None and gap != prev[1]:
            step = -gap * (energy - prev[0]) / (gap - prev[1])
        prev = (energy, gap)
        energy = energy + step
    else:
        raise RgftransError(f"the state near {energy_guess:.6g} meV did not settle to a self-consistent energy in "
                            f"{max_iter} iterations; start nearer to it")
    energy = level
    overlap = 1.0
    if reference is not None and len(reference) == len(psi):
        dot = float(np.asarray(reference, float) @ psi)
        overlap = abs(dot) / max(np.linalg.norm(reference), 1e-300)
        if dot < 0:
            psi = -psi
    else:
        big = int(np.argmax(np.abs(psi)))
        psi = psi * np.sign(psi[big])
    return CouplingResiduals(energy_meV=energy, residuals=w_mat.T @ psi, channels=names, n_open=n_open,
                             gammas_meV=gammas, overlap=overlap, state=psi)


@dataclass(frozen=True, eq=False)
class Bic2D:
    """An accidental BIC located in a two-parameter plane.

    Attributes
    ----------
    parameter : (2,) float
        ``(p1*, p2*)``.
    energy_meV : float
        Energy of the dark state.
    residual : float
        Length of the coupling-residual vector there (dimensionless; 0 at a BIC).
    width_meV : float
        Width of the pole found there by the pole solver (an independent check).
    typical_width_meV : float
        Median pole width one user step away from ``p*`` in each of four directions.
    orders_of_magnitude : float
        ``log10(typical / width)`` (width floored at round-off of the energy scale).
    n_open : tuple of int
        Open channels per lead at the BIC energy.
    exponent : float
        Power of ``Gamma ~ |p1 - p1*|^n`` (from steps of 0.01 and 0.02 user steps; 2 at a BIC).
    nearby_q : (4,) float
        Q factors of the pole one user step away from ``p*`` (+p1, -p1, +p2, -p2).
    kind : str
        ``"accidental"``, or ``"symmetry-protected"`` when the couplings vanish one step away as well.
    solves : int
        Self-consistent eigen-solves used by the Newton iteration.
    explanation : str
        Why the state is dark, in words.
    state : (n_orbitals,) float
        The dark state (real, unit norm).
    outside_stored_energies : bool
        The BIC lies outside the stored energies of the sweep it was searched in
        (not confirmed by anything stored; set by the grid searches).
    """

    parameter: np.ndarray
    energy_meV: float
    residual: float
    width_meV: float
    typical_width_meV: float
    orders_of_magnitude: float
    n_open: tuple
    exponent: float
    nearby_q: np.ndarray
    kind: str
    solves: int
    explanation: str
    state: np.ndarray = field(repr=False)
    outside_stored_energies: bool = False


def _newton(build, x0, step, energy, reference, rtol, max_solves):
    """Newton iteration on the two coupling residuals; returns (x, CouplingResiduals, solves)."""
    step = np.asarray(step, float)
    x = np.asarray(x0, float)
    solves = 0

    def evaluate(p, e, ref):
        nonlocal solves
        if solves >= max_solves:
            raise RgftransError(f"the two-parameter BIC search used its {max_solves} solves without converging; "
                                "start nearer (a grid search proposes starting cells) or raise max_solves")
        solves += 1
        res = coupling_residuals(build(*p), e, reference=ref)
        if len(res.residuals) != 2:
            raise RgftransError(
                f"at p = ({p[0]:.6g}, {p[1]:.6g}), E = {res.energy_meV:.6g} meV the leads have {res.n_open} open "
                "channels; two parameters meet two conditions only with one open channel in each of two leads "
                "(or two in one) -- choose an energy window with exactly two open channels")
        if ref is not None and res.overlap < MIN_OVERLAP:
            raise RgftransError(f"the dark-state candidate lost its identity near p = ({p[0]:.6g}, {p[1]:.6g}) "
                                f"(overlap {res.overlap:.2f} with the previous state); use a smaller step")
        return res

    cur = evaluate(x, energy, reference)
    scale = np.maximum(np.abs(x), np.abs(step))
    if cur.norm < ZERO_RESIDUAL:
        return x, cur, solves  # dark already (a protected state, or started on the BIC)
    for _ in range(max_solves):
        h = JACOBIAN_STEP * step
        jac = np.empty((2, 2))
        for k in range(2):
            dx = np.zeros(2)
            dx[k] = h[k]
            jac[:, k] = (evaluate(x + dx, cur.energy_meV, cur.state).residuals - cur.residuals) / h[k]
        try:
            delta = -np.linalg.solve(jac, cur.residuals)
        except np.linalg.LinAlgError:
            raise RgftransError(f"the coupling residuals do not depend on both parameters near p = ({x[0]:.6g}, "
                                f"{x[1]:.6g}); choose two parameters that act differently on the dot") from None
        # Trust region: no Newton step longer than two user steps in either parameter.
        shrink = max(1.0, float(np.max(np.abs(delta) / (2.0 * np.abs(step)))))
        delta = delta / shrink
        x = x + delta
        cur = evaluate(x, cur.energy_meV, cur.state)
        if np.all(np.abs(delta) <= rtol * scale) and shrink == 1.0:
            return x, cur, solves
    raise RgftransError("the two-parameter BIC search did not converge; start nearer or raise max_solves")


def locate_bic_2d(build: Callable[[float, float], TightBindingModel], start, step, energy_guess: float, *,
                  rtol: float = 1e-6, max_solves: int = 60, reference: np.ndarray | None = None) -> Bic2D:
    """Locate an accidental BIC in a plane of two parameters, to relative precision ``rtol``.

    Newton's method on the two signed coupling residuals (module docstring),
    from ``start`` with finite-difference steps ``JACOBIAN_STEP * step`` and
    steps no longer than ``2 * step``.  The result is checked independently:
    the pole solver gives the width at ``p*`` and one ``step`` away in four
    directions.

    Parameters
    ----------
    build : callable (p1, p2) -> TightBindingModel
    start, step : (2,) float
        Starting point and the scale of each parameter (e.g. a grid spacing).
    energy_guess : float
        Energy of the candidate state (meV).
    rtol : float
        Relative precision of each parameter (relative to ``max(|p|, step)``); below :data:`RTOL_FLOOR_2D` it is
        clamped to it with a PrecisionWarning.
    reference : optional state to follow (from a grid search).
    """
    rtol = clamp_rtol(rtol, RTOL_FLOOR_2D, "the parameters are doubles, known to a few units of round-off")
    step = np.asarray(step, float)
    x, res, solves = _newton(build, start, step, energy_guess, reference, rtol, max_solves)
    seed = res.state.astype(complex)

    def pole(p):
        return follow_pole(build(*p), res.energy_meV, seed)

    model = build(*x)
    at = follow_pole(model, res.energy_meV, seed)
    away = [pole(x + np.array(d) * step) for d in ((1, 0), (-1, 0), (0, 1), (0, -1))]
    typical = float(np.median([r.width_meV for r in away]))
    w1, w2 = (pole(x + np.array([f * step[0], 0.0])).width_meV for f in (0.01, 0.02))
    exponent = float(np.log(max(w2, 1e-300) / max(w1, 1e-300)) / np.log(2.0))
    floor = WIDTH_FLOOR * model.energy_scale
    kind = "symmetry-protected" if typical < PROTECTED_WIDTH * model.energy_scale else "accidental"
    return Bic2D(parameter=x, energy_meV=res.energy_meV, residual=res.norm, width_meV=at.width_meV,
                 typical_width_meV=typical,
                 orders_of_magnitude=float(np.log10(max(typical, floor) / max(abs(at.width_meV), floor))),
                 n_open=res.n_open, exponent=exponent, nearby_q=np.array([r.q_factor for r in away]), kind=kind,
                 solves=solves, explanation=explain(model, res, kind), state=res.state)


def explain(model: TightBindingModel, res: CouplingResiduals, kind: str = "accidental") -> str:
    """Why ``res.state`` is dark, in words: its make-up from closed-dot levels and its coupling to each channel."""
    evals, evecs = eigenvalues_near(model.hamiltonian.real, res.energy_meV, EXPLAIN_LEVELS, hermitian=True)
    weights = (evecs.T @ res.state) ** 2
    top = np.argsort(-weights)[:2]
    makeup = " + ".join(f"{100 * weights[k]:.1f} % of the closed-dot level at {evals[k]:.5g} meV" for k in top)
    couplings = ", ".join(f"{lead} channel {c}: {r:+.1e}" for (lead, c), r in zip(res.channels, res.residuals))
    if kind == "symmetry-protected":
        why = "it stays uncoupled one step away in both parameters, so a symmetry of the layout protects it"
    else:
        why = ("each coupling vanishes on its own curve of the parameter plane and the curves cross here: the "
               "coupling condition (the same combination of levels is invisible to every lead) and the degeneracy "
               "condition (that combination is an eigenstate of H + Re Sigma) are both met; no symmetry is needed")
    return (f"dark state = {makeup}; unit-normalised couplings ({couplings}); {why}")


# --------------------------------------------------------------------------
# Search of a parameter grid
# --------------------------------------------------------------------------

@dataclass(frozen=True, eq=False)
class GridSearch:
    """Coupling residuals of followed states over a grid of two parameters, and the BICs located from them.

    Attributes
    ----------
    names : (str, str)
        Parameter names.
    p1, p2 : (n1,), (n2,) float
        Grid values.
    seeds_meV : (n_seeds,) float
        Starting energy of each followed state (at the grid's start point).
    residuals : (n_seeds, n1, n2, 2) float
        Signed couplings (signs consistent along the following path); NaN where
        the state was not two-channel or could not be followed (not computed).
    energies_meV : (n_seeds, n1, n2) float
        NaN where not computed.
    channels : tuple of (str, int)
        Channel of each residual.
    bics : list of Bic2D
        Located BICs; those outside ``energy_window`` carry ``outside_stored_energies``.
    seed_of_bic : list of int
    candidates : int
        Grid cells around which the residual vector winds once (each refined by Newton's method).
    energy_window : (float, float) or None
        The stored energies (meV, or the caller's energy unit) the search was asked about.
    notes : tuple of str
        What the search left out or could not check, in words (e.g. energies with several open channels).
    """

    names: tuple
    p1: np.ndarray
    p2: np.ndarray
    seeds_meV: np.ndarray
    residuals: np.ndarray
    energies_meV: np.ndarray
    channels: tuple
    bics: list
    seed_of_bic: list
    candidates: int
    energy_window: tuple | None = None
    notes: tuple = ()

    @property
    def valid_points(self) -> np.ndarray:
        """(n_seeds,) int: grid points where each state's two residuals were computed (NaN points do not count)."""
        return np.isfinite(self.residuals).all(axis=-1).sum(axis=(1, 2))


def _walk(n1: int, n2: int, start: tuple[int, int]):
    """Grid points in an order where each one (but the start) follows an already visited neighbour.

    Along the start row first, then outwards column by column: a tree, so the
    sign of a followed real state is defined without going round a loop.
    """
    i0, j0 = start
    order = [((i0, j0), None)]
    for j in list(range(j0 + 1, n2)):
        order.append(((i0, j), (i0, j - 1)))
    for j in list(range(j0 - 1, -1, -1)):
        order.append(((i0, j), (i0, j + 1)))
    for j in range(n2):
        for i in range(i0 + 1, n1):
            order.append(((i, j), (i - 1, j)))
        for i in range(i0 - 1, -1, -1):
            order.append(((i, j), (i + 1, j)))
    return order


def _winding(corners: np.ndarray) -> float:
    """Turns of the 2-vector around the origin along the closed path of the corners (in order)."""
    ang = np.angle(corners[:, 0] + 1j * corners[:, 1])
    d = np.diff(np.concatenate([ang, ang[:1]]))
    d = (d + np.pi) % (2 * np.pi) - np.pi
    return float(d.sum() / (2 * np.pi))


def search_grid(build: Callable[[float, float], TightBindingModel], p1, p2, energy_guesses, *,
                names=("p1", "p2"), start: tuple[int, int] | None = None, rtol: float = 1e-6,
                report: Callable[[str], None] | None = None, progress: bool = True,
                energy_window: tuple[float, float] | None = None) -> GridSearch:
    """Follow states over a grid of two parameters, find the cells holding a BIC and refine each.

    Parameters
    ----------
    build : callable (p1, p2) -> TightBindingModel
    p1, p2 : 1D arrays of parameter values
    energy_guesses : floats
        One state is followed per energy (meV), starting at grid point ``start`` (default: the centre).
    rtol : float
        Relative precision of the refined parameters.
    report : callable (str), optional
        Receives a one-line summary per followed state and per BIC (the caller prints them).
    progress : bool
        A progress bar on standard error for searches longer than PROGRESS_DELAY_S.
    energy_window : (lo, hi), optional
        The energies the caller has data for (a stored sweep): a BIC outside
        them is flagged ``outside_stored_energies``.

    A grid point counts as computed only where the state was followed and has
    exactly two finite residuals; elsewhere the residuals are NaN.
    """
    rtol = clamp_rtol(rtol, RTOL_FLOOR_2D, "the parameters are doubles, known to a few units of round-off")
    p1, p2 = np.asarray(p1, float), np.asarray(p2, float)
    n1, n2 = len(p1), len(p2)
    if n1 < 2 or n2 < 2:
        raise RgftransError(f"a grid search needs at least 2 values of each parameter, got {n1} x {n2}")
    start = start if start is not None else (n1 // 2, n2 // 2)
    seeds = np.atleast_1d(np.asarray(energy_guesses, float))
    res_all = np.full((len(seeds), n1, n2, 2), np.nan)
    e_all = np.full((len(seeds), n1, n2), np.nan)
    step = np.array([np.median(np.diff(p1)), np.median(np.diff(p2))])
    bics, seed_of, candidates, channels = [], [], 0, ()
    bar = progress_bar(len(seeds) * n1 * n2, "following dot states", "point", progress)
    try:
        for s, seed in enumerate(seeds):
            states = {}
            for (i, j), prev in _walk(n1, n2, start):
                bar.update()
                energy, ref = (seed, None) if prev is None else states.get(prev, (seed, None))[:2]
                try:
                    r = coupling_residuals(build(p1[i], p2[j]), energy, reference=ref)
                except (RgftransError, np.linalg.LinAlgError, EigenSolveFailed):
                    continue
                if ref is not None and r.overlap < MIN_OVERLAP:
                    continue  # identity lost: NaN here; points beyond restart from the seed energy (new signs,
                    # so cells that mix the two are refused by the overlap test below)
                if not np.isfinite(r.energy_meV):
                    continue
                states[i, j] = (r.energy_meV, r.state, r)
                e_all[s, i, j] = r.energy_meV
                if len(r.residuals) == 2 and np.all(np.isfinite(r.residuals)):
                    res_all[s, i, j] = r.residuals
                    channels = r.channels
            if report:
                valid = int(np.isfinite(res_all[s]).all(axis=-1).sum())
                report_beside(bar, report, f"state from {seed:.5g} meV followed over {valid} of {n1 * n2} grid points")
            bar.set_description("refining BIC candidates")
            for i in range(n1 - 1):
                for j in range(n2 - 1):
                    cell = [(i, j), (i + 1, j), (i + 1, j + 1), (i, j + 1)]
                    if not all(c in states for c in cell) or np.isnan(res_all[s, i:i + 2, j:j + 2]).any():
                        continue
                    base = states[i, j][1]
                    dots = np.array([base @ states[c][1] for c in cell])
                    if np.abs(dots).min() < MIN_OVERLAP:
                        continue
                    corners = np.array([np.sign(d) * res_all[s][c] for d, c in zip(dots, cell)])
                    if abs(_winding(corners)) < 0.5:
                        continue
                    candidates += 1
                    centre = np.array([(p1[i] + p1[i + 1]) / 2, (p2[j] + p2[j + 1]) / 2])
                    try:
                        bic = locate_bic_2d(build, centre, step, float(np.mean(e_all[s, i:i + 2, j:j + 2])),
                                            rtol=rtol, reference=base)
                    except RgftransError:
                        continue
                    bic = replace(bic, outside_stored_energies=not inside_window(bic.energy_meV, energy_window))
                    inside = np.all(np.abs(bic.parameter - centre) <= 1.5 * np.abs(step))
                    same = any(np.all(np.abs(b.parameter - bic.parameter) <= 1e-3 * np.abs(step)) and
                               abs(b.energy_meV - bic.energy_meV) < 1e-6 * build(*bic.parameter).energy_scale
                               for b in bics)
                    if inside and not same:
                        bics.append(bic)
                        seed_of.append(s)
                        if report:
                            flag = (" -- OUTSIDE the stored energies, unconfirmed"
                                    if bic.outside_stored_energies else "")
                            report_beside(bar, report, f"BIC at {names[0]} = {bic.parameter[0]:.9g}, {names[1]} = "
                                                       f"{bic.parameter[1]:.9g}, E = {bic.energy_meV:.6f} meV{flag}")
            bar.set_description("following dot states")
    finally:
        bar.close()
    return GridSearch(names=tuple(names), p1=p1, p2=p2, seeds_meV=seeds, residuals=res_all, energies_meV=e_all,
                      channels=channels, bics=bics, seed_of_bic=seed_of, candidates=candidates,
                      energy_window=None if energy_window is None else tuple(float(e) for e in energy_window))


def plane_seeds(model: TightBindingModel, e_lo: float, e_hi: float) -> np.ndarray:
    """Closed-dot levels in [e_lo, e_hi] at which every lead has exactly one open channel: the candidate states."""
    evals, _ = eigenvalues_near(model.hamiltonian.real, 0.5 * (e_lo + e_hi), SEED_LEVELS, hermitian=True,
                                vectors=False)
    keep = []
    for e in np.sort(evals[(evals >= e_lo) & (evals <= e_hi)]):
        _, modes = lead_self_energies(model, float(e), warn=False)
        if all(int(m.n_open) == 1 for m in modes) and len(modes) == 2:
            keep.append(e)
    return np.array(keep)


