"""Dark states: Fano fits, width tracking, BIC location, coupling diagnostics and the Fano line's collapse.

The poles themselves come from :mod:`rgftrans.spectra.poles`: a resonance is
an eigenvalue ``z`` of ``H_eff(E) = H + sum_p Sigma_p(E)`` self-consistent in
``E = Re z``, of width ``Gamma = -2 Im z`` and quality factor
``Q = Re z / Gamma``.  A bound state in the continuum (BIC) is a pole whose
width vanishes while open channels exist at its energy.

Why a state is dark is read off a two-level picture built from two closed-dot
eigenstates ``psi_1, psi_2`` near the energy: ``H0 = Psi^dag (H + Re Sigma) Psi``
and the coupling matrix ``A`` (one row per open lead channel,
``Gamma_p = W_p W_p^dag``, ``A = [W_p^dag psi_n]``), so that
``H_eff = H0 - (i/2) A^dag A`` in that subspace.  A real eigenvalue needs a
vector ``x`` with ``A x = 0`` (the *coupling condition*: with one channel in
each of two leads, the two states' coupling ratios must agree in both leads)
that is also an eigenvector of ``H0`` (the *degeneracy condition*).  With a
single continuum the first holds trivially and the second is the
Friedrich-Wintgen condition (H. Friedrich & D. Wintgen, Phys. Rev. A 32,
3231 (1985), from memory): ``kappa (v_1^2 - v_2^2) = v_1 v_2 (e_1 - e_2)``.
A single state with no coupling to any lead is dark by symmetry.  The two-level
picture explains; it is not exact.  The exact two-condition search for
asymmetric layouts (one channel in each of two leads) is in :mod:`rgftrans.analysis.bic2d`.

Fano profiles: ``T(E) = a (q + eps)^2 / (1 + eps^2) + b`` with
``eps = 2 (E - E_0) / Gamma`` (U. Fano, Phys. Rev. 124, 1866 (1961), from memory).
"""

from __future__ import annotations

import sys
import warnings
from collections.abc import Callable
from dataclasses import dataclass, field

import numpy as np
import scipy.optimize as sopt

from rgftrans.errors import EigenSolveFailed, PrecisionWarning, ResolutionWarning, RgftransError
from rgftrans.leads.embedding import gamma_columns, lead_self_energies
from rgftrans.spectra.eigen import eigenvalues_near
from rgftrans.spectra.poles import Resonance, follow_pole
from rgftrans.system.device import TightBindingModel
from rgftrans.transport.rgf import transmission

__all__ = [
    "CouplingDiagnostics", "coupling_diagnostics", "FanoFit", "fano_profile", "fit_fano", "find_resonances",
    "Track", "track_resonance", "BicLocation", "locate_bic", "inside_window", "follow_at", "progress_bar",
    "report_beside", "FanoCollapse", "fano_collapse", "BIC_RTOL_FLOOR", "clamp_rtol",
]

#: A coupling below this fraction of the largest one counts as zero (a symmetry-protected dark state).
DECOUPLED = 1e-6
#: A width below this fraction of the hopping at both ends of a search interval means the resonance is
#: dark throughout: protected by a symmetry, not tuned.
PROTECTED_WIDTH = 1e-12
#: Widths are only known to about round-off of the energy scale: the decade count uses this floor.
WIDTH_FLOOR = 1e-14
#: Fewest grid points across a resonance's full width before a ResolutionWarning.
MIN_POINTS_PER_WIDTH = 3
#: A search's progress bar (standard error) appears only once it has run this long (s): short searches stay quiet.
PROGRESS_DELAY_S = 3.0
#: Finest relative precision of a parameter located by minimising a width that vanishes quadratically:
#: sqrt(machine epsilon) = 1.5e-8 (see locate_bic).  A finer rtol is clamped to it with a PrecisionWarning.
BIC_RTOL_FLOOR = float(np.sqrt(np.finfo(float).eps))


def clamp_rtol(rtol, floor: float, why: str) -> float:
    """``rtol`` checked (a finite number in (0, 1)) and raised to ``floor`` with a PrecisionWarning saying ``why``."""
    if isinstance(rtol, (bool, np.bool_, str, bytes)) or not np.isscalar(rtol) or not np.isreal(rtol) or not (
            np.isfinite(rtol) and 0 < float(rtol) < 1):
        raise RgftransError(f"rtol must be a relative precision between 0 and 1 (e.g. 1e-6), got {rtol!r}")
    rtol = float(rtol)
    if rtol < floor:
        warnings.warn(f"rtol = {rtol:.3g} is below what this search can deliver ({floor:.2g}: {why}); using "
                      f"rtol = {floor:.2g} -- the result is as good as the numbers allow, not worse",
                      PrecisionWarning, stacklevel=3)
        return floor
    return rtol


def stderr_is_terminal() -> bool:
    """Whether standard error is a terminal (a bar drawn into a log file is a wall of carriage returns)."""
    try:
        return sys.stderr.isatty()
    except (AttributeError, ValueError):
        return False


def progress_bar(total, desc: str, unit: str, enabled: bool):
    """A tqdm bar on standard error that shows after PROGRESS_DELAY_S and vanishes when done.

    Off when not enabled, and when standard error is not a terminal (a log file gets no bar).
    """
    from tqdm import tqdm

    return tqdm(total=total, desc=desc, unit=unit, disable=not (enabled and stderr_is_terminal()), file=sys.stderr,
                leave=False,
                delay=PROGRESS_DELAY_S, dynamic_ncols=True)


def report_beside(bar, report, message: str) -> None:
    """Pass ``message`` to ``report`` with the progress bar cleared first and redrawn after (no torn lines)."""
    if report is None:
        return
    if bar is None or bar.disable:
        report(message)
        return
    with bar.external_write_mode(file=sys.stderr):
        report(message)


def inside_window(energy: float, window) -> bool:
    """Whether ``energy`` lies in the closed interval ``window`` (None: no window, everything is inside)."""
    return window is None or (window[0] <= energy <= window[1])


# --------------------------------------------------------------------------
# Coupling diagnostics
# --------------------------------------------------------------------------

@dataclass(frozen=True, eq=False)
class CouplingDiagnostics:
    """Why a pair of dot states does (or does not) form a dark state.

    Attributes
    ----------
    energy_meV : float
        Energy at which the leads are evaluated.
    state_energies_meV : (2,) float
        Closed-dot eigenvalues of the two states.
    h0 : (2, 2) complex
        ``Psi^dag (H + Re Sigma) Psi`` (meV).
    couplings : list (per lead) of (n_open_p, 2) complex
        ``W_p^dag psi_n``: coupling amplitudes of the two states to each open channel (sqrt(meV)).
    decoupled : (2,) bool
        Which states couple to no open channel at all (dark by symmetry).
    coupling_mismatch : float
        Smallest over largest singular value of the stacked coupling matrix:
        0 when some combination of the two states couples to nothing (for two
        single-channel leads: ``|a_L1 a_R2 - a_L2 a_R1| / ...``, proportionate coupling).
    degeneracy_residual : float
        How far the uncoupled combination is from an eigenvector of ``h0``,
        relative to the coupling strength (0 at the Friedrich-Wintgen condition).
    verdict : str
        One sentence in words.
    """

    energy_meV: float
    state_energies_meV: np.ndarray
    h0: np.ndarray
    couplings: list
    decoupled: np.ndarray
    coupling_mismatch: float
    degeneracy_residual: float
    verdict: str


def coupling_diagnostics(model: TightBindingModel, energy: float, *, tolerance: float = 1e-4
                         ) -> CouplingDiagnostics:
    """Two-level analysis of the closed-dot states nearest ``energy`` (see the module docstring)."""
    ham = model.hamiltonian
    evals, psi = eigenvalues_near(ham, energy, 2, hermitian=True)
    order = np.argsort(evals)
    evals, psi = evals[order], psi[:, order]
    sigmas, _ = lead_self_energies(model, energy, warn=False)
    h0 = psi.conj().T @ (ham @ psi)
    couplings = []
    for lead, sigma in zip(model.leads, sigmas):
        herm = 0.5 * (sigma + sigma.conj().T)
        sub = psi[lead.interface]
        h0 = h0 + sub.conj().T @ herm @ sub
        wmat = gamma_columns(1j * (sigma - sigma.conj().T))
        couplings.append(wmat.conj().T @ sub)
    stacked = np.vstack(couplings) if couplings else np.zeros((0, 2))
    strength = np.sqrt(np.sum(np.abs(stacked) ** 2, axis=0)) if stacked.size else np.zeros(2)
    ref = max(strength.max(initial=0.0), 1e-300)
    decoupled = strength < DECOUPLED * ref if stacked.size else np.ones(2, bool)
    if stacked.shape[0] == 0:
        mismatch, dark = 0.0, np.array([1.0, 0.0])
    else:
        _, s, vh = np.linalg.svd(stacked)
        s_full = np.concatenate([s, np.zeros(max(0, 2 - len(s)))])
        mismatch = float(s_full[1] / s_full[0]) if s_full[0] > 0 else 0.0
        dark = vh.conj().T[:, -1]
    hx = h0 @ dark
    e_dark = np.vdot(dark, hx).real
    residual = float(np.linalg.norm(hx - e_dark * dark) / max(ref**2, 1e-300))
    if np.any(decoupled):
        k = int(np.flatnonzero(decoupled)[0])
        verdict = (f"the closed-dot state at {evals[k]:.6g} meV couples to no open lead channel: it is dark on its "
                   "own (symmetry-protected if it stays dark when parameters change)")
    elif mismatch < tolerance and residual < tolerance:
        verdict = ("coupling condition met (one combination couples to no channel, mismatch "
                   f"{mismatch:.1e}) and degeneracy condition met (residual {residual:.1e}): accidental BIC")
    else:
        parts = []
        parts.append("coupling condition " + ("met" if mismatch < tolerance else "not met") + f" (mismatch {mismatch:.1e})")
        parts.append("degeneracy condition " + ("met" if residual < tolerance else "not met") +
                     f" (residual {residual:.1e})")
        verdict = "; ".join(parts) + ": no BIC here"
    return CouplingDiagnostics(energy_meV=float(energy), state_energies_meV=evals, h0=h0, couplings=couplings,
                               decoupled=decoupled, coupling_mismatch=mismatch, degeneracy_residual=residual,
                               verdict=verdict)


# --------------------------------------------------------------------------
# Fano profiles
# --------------------------------------------------------------------------

def fano_profile(energy, e0, width, q, amplitude, background):
    """``a (q + eps)^2 / (1 + eps^2) + b`` with ``eps = 2 (E - E_0) / Gamma`` (Fano 1961)."""
    eps = 2.0 * (np.asarray(energy) - e0) / width
    return amplitude * (q + eps) ** 2 / (1.0 + eps**2) + background


@dataclass(frozen=True)
class FanoFit:
    """Fitted Fano profile with one-sigma uncertainties (from the least-squares covariance).

    Attributes
    ----------
    energy_meV, width_meV, q, amplitude, background : float
    errors : dict of float
        Standard errors of the five parameters.
    points_per_width : float
        Grid points across one width (a warning is issued below MIN_POINTS_PER_WIDTH).
    """

    energy_meV: float
    width_meV: float
    q: float
    amplitude: float
    background: float
    errors: dict
    points_per_width: float


def fit_fano(energies, trans, *, energy_guess: float | None = None, width_guess: float | None = None) -> FanoFit:
    """Fit a Fano profile to T(E) around one resonance (scipy.optimize.curve_fit)."""
    e = np.asarray(energies, float)
    t = np.asarray(trans, float)
    if e.size < 6:
        raise RgftransError(f"a Fano fit needs at least 6 energy points, got {e.size}; widen the window")
    spacing = float(np.median(np.diff(e)))
    if width_guess is not None and width_guess < MIN_POINTS_PER_WIDTH * spacing:
        warnings.warn(
            f"the expected width {width_guess:.3g} meV spans fewer than {MIN_POINTS_PER_WIDTH} points of the "
            f"{spacing:.3g} meV energy grid; the resonance is not resolved -- refine the grid around it or use the "
            "pole solver", ResolutionWarning, stacklevel=2,
        )
    k0 = int(np.argmax(np.abs(t - np.median(t)))) if energy_guess is None else int(np.argmin(np.abs(e - energy_guess)))
    e0 = e[k0]
    span = e[-1] - e[0]
    w0 = width_guess if width_guess is not None else span / 10
    best = None
    for q0 in (0.0, 1.0, -1.0, 5.0, -5.0):
        amp0 = (t.max() - t.min()) / (1 + q0 * q0) if q0 else t.max() - t.min()
        try:
            popt, pcov = sopt.curve_fit(fano_profile, e, t, p0=[e0, w0, q0, amp0, t.min()],
                                        bounds=([e[0], 1e-15 * max(span, 1e-300), -1e6, 0.0, -1.0],
                                                [e[-1], 10 * span, 1e6, 10.0, 10.0]), maxfev=2000)
        except (RuntimeError, ValueError):
            continue
        cost = float(np.sum((fano_profile(e, *popt) - t) ** 2))
        if best is None or cost < best[0]:
            best = (cost, popt, pcov)
    if best is None:
        raise RgftransError("the Fano fit did not converge; give energy_guess and width_guess near the resonance")
    _, popt, pcov = best
    errs = np.sqrt(np.clip(np.diag(pcov), 0, None))
    ppw = float(abs(popt[1]) / spacing)
    if ppw < MIN_POINTS_PER_WIDTH and (width_guess is None or width_guess >= MIN_POINTS_PER_WIDTH * spacing):
        warnings.warn(
            f"the resonance at {popt[0]:.6g} meV is {abs(popt[1]):.3g} meV wide but the energy grid spacing is "
            f"{spacing:.3g} meV ({ppw:.1f} points per width); its width and shape are not resolved -- refine the "
            "grid around it or use the pole solver",
            ResolutionWarning, stacklevel=2,
        )
    names = ("energy_meV", "width_meV", "q", "amplitude", "background")
    return FanoFit(energy_meV=float(popt[0]), width_meV=float(abs(popt[1])), q=float(popt[2]),
                   amplitude=float(popt[3]), background=float(popt[4]),
                   errors={k: float(v) for k, v in zip(names, errs)}, points_per_width=ppw)


def find_resonances(energies, trans, *, prominence: float = 0.05, window: int = 12) -> list[FanoFit]:
    """Detect resonances in a stored T(E) (peaks and dips) and fit each with a Fano profile."""
    from scipy.signal import find_peaks

    e = np.asarray(energies, float)
    t = np.asarray(trans, float)
    scale = max(t.max() - t.min(), 1e-300)
    idx = set()
    for sign in (1.0, -1.0):
        peaks, _ = find_peaks(sign * t, prominence=prominence * scale)
        idx.update(int(p) for p in peaks)
    fits = []
    for k in sorted(idx):
        lo, hi = max(0, k - window), min(len(e), k + window + 1)
        if hi - lo < 6:
            continue
        try:
            fits.append(fit_fano(e[lo:hi], t[lo:hi], energy_guess=e[k], width_guess=(e[hi - 1] - e[lo]) / 6))
        except RgftransError:
            continue
    return fits


# --------------------------------------------------------------------------
# Width tracking and BIC location
# --------------------------------------------------------------------------

@dataclass(frozen=True, eq=False)
class Track:
    """One resonance followed across a parameter.

    Attributes
    ----------
    parameters : (n,) float
    energies_meV, widths_meV, q_factors : (n,) float
        NaN where the pole was not computed (following stopped, or the pole solve failed or did not converge).
    in_continuum : (n,) bool
    stopped_at : tuple of (float, float)
        ``(parameter, Re z)`` where the pole left the energy window and following stopped (at most one per
        direction).
    """

    parameters: np.ndarray
    energies_meV: np.ndarray
    widths_meV: np.ndarray
    q_factors: np.ndarray
    in_continuum: np.ndarray
    stopped_at: tuple = ()

    @property
    def valid(self) -> np.ndarray:
        """(n,) bool: where the pole was computed (finite energy and width)."""
        return np.isfinite(self.widths_meV) & np.isfinite(self.energies_meV)


def follow_at(build, p, energy, state=None, count=4):
    """:func:`follow_pole` on the model ``build(p)``."""
    return follow_pole(build(p), energy, state, count)


#: Failures of one pole solve that leave that parameter value not computed (the track goes on).
_SOLVE_FAILURES = (np.linalg.LinAlgError, EigenSolveFailed, RgftransError)


def track_resonance(build: Callable[[float], TightBindingModel], parameters, energy_guess: float, *,
                    energy_window: tuple[float, float] | None = None,
                    on_step: Callable[[], None] | None = None) -> Track:
    """Follow one resonance through a list of parameter values, keeping its identity across crossings.

    ``build(p)`` returns the model at parameter p.  Identity: the pole whose
    eigenvector overlaps most with the previous one (same geometry), else the
    nearest in energy.

    Parameters
    ----------
    energy_window : (lo, hi) meV, optional
        Stop following when ``Re z`` leaves it (e.g. the stored energies of a
        sweep, outside which nothing is known about the channels or the data);
        that value and the rest are left NaN, and the value with the pole's
        ``Re z`` there is in ``stopped_at``.
    on_step : callable, optional
        Called once per parameter value (a progress bar).

    A value whose pole solve fails or does not converge is NaN (not computed);
    following goes on from the last computed pole.
    """
    ps = np.asarray(parameters, float)
    n = len(ps)
    energies, widths, qs = np.full(n, np.nan), np.full(n, np.nan), np.full(n, np.nan)
    cont = np.zeros(n, bool)
    stopped = ()
    energy, state = energy_guess, None
    for k, p in enumerate(ps):
        try:
            r = follow_at(build, p, energy, state)
        except _SOLVE_FAILURES:
            r = None
        if on_step is not None:
            on_step()
        if r is None or not np.isfinite(r.width_meV):
            continue
        if not inside_window(r.energy_meV, energy_window):
            stopped = ((float(p), float(r.energy_meV)),)
            break
        energy, state = r.energy_meV, r.state
        if not r.converged:
            continue  # followed on from, but not reported as computed
        energies[k], widths[k], qs[k], cont[k] = r.energy_meV, r.width_meV, r.q_factor, r.in_continuum
    return Track(parameters=ps, energies_meV=energies, widths_meV=widths, q_factors=qs, in_continuum=cont,
                 stopped_at=stopped)


@dataclass(frozen=True, eq=False)
class BicLocation:
    """A located zero of a resonance width.

    Attributes
    ----------
    parameter : float or (2,) float
    energy_meV : float
        Resonance energy there.
    width_meV : float
        Residual width at the located parameter.
    typical_width_meV : float
        Width at the ends of the search interval (the "typical" width).
    orders_of_magnitude : float
        ``log10(typical / residual)``.
    exponent : float
        Fitted power of ``Gamma ~ |p - p*|^n`` on both sides (2 for a BIC).
    solves : int
        Pole solves used.
    kind : str
        ``"accidental"`` (the width vanishes at an isolated parameter) or
        ``"symmetry-protected"`` (it is zero across the whole interval).
    resonance : Resonance
    outside_stored_energies : bool
        The BIC lies outside the stored energies of the sweep it was searched
        in (nothing stored confirms it; the channel count there is unchecked).
    """

    parameter: object
    energy_meV: float
    width_meV: float
    typical_width_meV: float
    orders_of_magnitude: float
    exponent: float
    solves: int
    kind: str
    resonance: Resonance = field(repr=False)
    outside_stored_energies: bool = False


def locate_bic(build: Callable[[float], TightBindingModel], p_lo: float, p_hi: float, energy_guess: float, *,
               rtol: float = 1e-6, max_solves: int = 120, on_solve: Callable[[], None] | None = None) -> BicLocation:
    """Find the parameter in [p_lo, p_hi] where a resonance's width vanishes, to relative precision ``rtol``.

    Minimises ``Gamma(p)`` with bounded Brent steps, each a self-consistent pole
    solve that follows the resonance from the previous step; then checks the
    quadratic vanishing ``Gamma ~ (p - p*)^2`` on both sides.  ``on_solve`` is
    called after every pole solve (a progress bar).

    Precision.  Near an accidental BIC the width vanishes quadratically,
    ``Gamma(p) = c (p - p*)^2``, but it is computed as ``-2 Im z`` of an
    eigenvalue, with an absolute round-off ``delta ~ eps t`` (eps = 2.2e-16,
    t the energy scale).  Widths below delta are indistinguishable, so the
    minimum is pinned only to ``|p - p*| ~ sqrt(delta / c)``: about
    ``sqrt(eps) = 1.5e-8`` relative at best (when ``c p^2 ~ t``), worse for
    weakly coupled levels.  Brent's minimiser itself never resolves a minimum
    below ``sqrt(eps)`` relative, for the same reason (R. P. Brent, Algorithms
    for Minimization without Derivatives, Prentice-Hall 1973, ch. 5, from
    memory).  An ``rtol`` below :data:`BIC_RTOL_FLOOR` is therefore clamped to
    it with a :class:`~rgftrans.errors.PrecisionWarning`; the location is then
    as good as the default's or better.  (The two-parameter search of
    :mod:`rgftrans.analysis.bic2d` finds simple zeros of signed couplings,
    linear in ``p - p*``, and reaches machine precision instead.)

    Raises
    ------
    RgftransError
        An rtol that is not a number in (0, 1); a model without leads (its levels have no width to lose: they are
        bound states, not BICs); more than ``max_solves`` pole solves.
    """
    rtol = clamp_rtol(rtol, BIC_RTOL_FLOOR, "a width that vanishes quadratically, computed with round-off eps t, "
                                            "pins its zero to sqrt(eps) relative")
    model_lo = build(p_lo)
    if not model_lo.leads:
        raise RgftransError(f"the model built at p = {p_lo:.6g} has no leads: its levels are bound states of zero "
                            "width, not bound states in the continuum; attach leads, or use "
                            "spectra.closed_levels for the closed system's levels")
    state = {"energy": energy_guess, "vec": None, "solves": 0}
    cache = {}

    def width(p):
        if p in cache:
            return cache[p].width_meV
        if state["solves"] >= max_solves:
            raise RgftransError(f"BIC search used its {max_solves} pole solves without converging; "
                                "narrow the interval or raise max_solves")
        r = follow_at(build, p, state["energy"], state["vec"])
        state["solves"] += 1
        if on_solve is not None:
            on_solve()
        state["energy"], state["vec"] = r.energy_meV, r.state
        cache[p] = r
        return r.width_meV

    typical = max(width(p_lo), width(p_hi))
    scale = model_lo.energy_scale
    if typical < PROTECTED_WIDTH * scale:
        r = cache[p_lo]
        return BicLocation(parameter=(p_lo, p_hi), energy_meV=r.energy_meV, width_meV=typical, typical_width_meV=typical,
                           orders_of_magnitude=np.inf, exponent=np.nan, solves=state["solves"],
                           kind="symmetry-protected", resonance=r)
    xatol = rtol * max(abs(p_lo), abs(p_hi), 1e-300) * 0.5
    opt = sopt.minimize_scalar(width, bounds=(p_lo, p_hi), method="bounded",
                               options={"xatol": xatol, "maxiter": max_solves})
    p_star = float(opt.x)
    width(p_star)
    best = cache[p_star]
    delta = 1e-3 * (p_hi - p_lo)
    exps = []
    for sgn in (-1, 1):
        w1, w2 = width(p_star + sgn * delta), width(p_star + 2 * sgn * delta)
        exps.append(np.log(max(w2, 1e-300) / max(w1, 1e-300)) / np.log(2.0))
    floor = WIDTH_FLOOR * scale  # widths below round-off are reported as that floor in the decade count
    return BicLocation(parameter=p_star, energy_meV=best.energy_meV, width_meV=best.width_meV,
                       typical_width_meV=typical,
                       orders_of_magnitude=float(np.log10(typical / max(abs(best.width_meV), floor))),
                       exponent=float(np.mean(exps)), solves=state["solves"], kind="accidental", resonance=best)


# --------------------------------------------------------------------------
# The Fano line closing at a BIC
# --------------------------------------------------------------------------

#: Distances from the BIC at which the width is sampled: this many, log-spaced from 1e-3 to 1 times the step.
COLLAPSE_DISTANCES = 13
#: Each line's T(E) is sampled at this many energies (even: the centre, a real pole at p*, is not sampled) ...
COLLAPSE_ENERGIES = 800
#: ... across +- this many times the widest line's width around the line's own pole.
COLLAPSE_HALF_WIDTHS = 6.0


@dataclass(frozen=True, eq=False)
class FanoCollapse:
    """T(E) beside a two-parameter BIC and at it, and the pole width against the distance from it.

    The first parameter is moved, ``p = p1* + shift`` with the second held at ``p2*``.

    Attributes
    ----------
    bic_parameter : (2,) float
        ``(p1*, p2*)``, in the caller's parameter units.
    bic_energy_meV : float
        Energy of the BIC.
    shifts : (n_lines,) float
        ``p - p1*`` of each line (parameter units); the last is 0, the BIC itself.
    centres_meV : (n_lines,) float
        ``Re z`` of the pole followed to each line's parameter (the BIC's energy for the last).
    line_widths_meV : (n_lines,) float
        Width ``Gamma = -2 Im z`` of that pole (the BIC's residual width for the last).
    offsets_meV : (n_E,) float
        ``E - Re z``: the energies of every line, each around its own pole.
    transmissions : (n_lines, n_E) float
        T(E) from the first lead to the second at ``centres_meV[k] + offsets_meV``.
    distances : (n_d,) float
        ``|p - p1*|`` (parameter units) at which the width was followed.
    widths_meV : (n_d,) float
        Pole width there; ``Gamma ~ |p - p1*|^2`` at an accidental BIC.
    parameter_unit : str
        Unit of ``bic_parameter[0]``, ``shifts`` and ``distances`` ("" if not given).
    """

    bic_parameter: np.ndarray
    bic_energy_meV: float
    shifts: np.ndarray
    centres_meV: np.ndarray
    line_widths_meV: np.ndarray
    offsets_meV: np.ndarray
    transmissions: np.ndarray
    distances: np.ndarray
    widths_meV: np.ndarray
    parameter_unit: str = ""


def fano_collapse(build: Callable[[float, float], TightBindingModel], bic, step: float,
                  fractions=(1.0, 0.5, 0.25), *, parameter_unit: str = "") -> FanoCollapse:
    """The Fano line narrowing as the first parameter approaches a BIC, and its width against the distance.

    Parameters
    ----------
    build : callable ``(p1, p2) -> TightBindingModel``
    bic : object with ``parameter`` ((2,) float), ``energy_meV``, ``width_meV`` and ``state``
        A located two-parameter BIC (:class:`rgftrans.analysis.bic2d.Bic2D`).
    step : float
        Largest shift of the first parameter (its units).
    fractions : sequence of float
        Lines at ``p1* + f * step``; the BIC itself (``f = 0``) is added last.
    parameter_unit : str
        Unit of the first parameter, carried to the result for its figure.

    Each pole is followed from the BIC's state (:func:`rgftrans.spectra.poles.follow_pole`);
    T(E) comes from :func:`rgftrans.transport.rgf.transmission`.
    """
    p1, p2 = (float(x) for x in bic.parameter)
    seed = np.asarray(bic.state).astype(complex)
    fractions = [float(f) for f in fractions]
    if not fractions or any(f == 0 for f in fractions):
        raise RgftransError(f"fractions of the step must be non-zero (the BIC itself is added), got {fractions}")
    poles = [follow_pole(build(p1 + f * step, p2), bic.energy_meV, seed) for f in fractions]
    half = COLLAPSE_HALF_WIDTHS * max(r.width_meV for r in poles)
    offsets = np.linspace(-half, half, COLLAPSE_ENERGIES)
    shifts = np.array([f * step for f in fractions] + [0.0])
    centres = np.array([r.energy_meV for r in poles] + [bic.energy_meV])  # each line in its own window
    line_widths = np.array([r.width_meV for r in poles] + [bic.width_meV])
    trans = np.array([transmission(build(p1 + x, p2), c + offsets).transmission for x, c in zip(shifts, centres)])
    distances = abs(step) * np.geomspace(1e-3, 1.0, COLLAPSE_DISTANCES)
    widths = np.array([follow_pole(build(p1 + x, p2), bic.energy_meV, seed).width_meV for x in distances])
    return FanoCollapse(bic_parameter=np.array([p1, p2]), bic_energy_meV=float(bic.energy_meV), shifts=shifts,
                        centres_meV=centres, line_widths_meV=line_widths, offsets_meV=offsets, transmissions=trans,
                        distances=distances, widths_meV=widths, parameter_unit=parameter_unit)
