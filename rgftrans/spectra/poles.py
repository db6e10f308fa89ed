"""Resonance poles of an open device: eigenvalues of ``H + Sigma(E)``, self-consistent in ``Re z``.

A resonance is a pole ``z`` of the device Green's function ``G(E) = (E - H - sum_p Sigma_p(E))^-1``:
an eigenvalue of the non-Hermitian effective Hamiltonian
``H_eff(E) = H + sum_p Sigma_p(E)`` with the leads evaluated at ``E = Re z``,
which is iterated to self-consistency.  Its width is ``Gamma = -2 Im z`` and
its quality factor ``Q = Re z / Gamma`` (energies from the band bottom).

* :func:`resonances` — the poles nearest a target energy;
* :func:`follow_pole` — the pole continuing a tracked one (eigenvector overlap);
* :func:`window_poles` — a cheap list of the poles in an energy window (no
  self-consistency), shared by the resolution and regime checks.

Every eigenvalue solve goes through :func:`rgftrans.spectra.eigen.eigenvalues_near`.

A model without leads has no self-energy: its "poles" are the closed
system's levels, the eigenvalues of ``H`` itself (zero width for a Hermitian
``H``; absorbing onsite energies give a width of their own).  :func:`resonances`
and :func:`follow_pole` return those as :class:`Resonance` objects with
``n_open = ()`` and ``in_continuum = False``; :func:`window_poles` returns none
(it lists only poles of non-zero width).  Energies in meV.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import scipy.sparse as sp

from rgftrans.leads.embedding import embedded_self_energy, lead_self_energies
from rgftrans.spectra.eigen import eigenvalues_near
from rgftrans.system.device import TightBindingModel

__all__ = ["Resonance", "effective_hamiltonian", "resonances", "follow_pole", "window_poles", "POLE_TOL"]

#: Self-consistency: stop when the pole moves less than this fraction of the energy scale.
POLE_TOL = 1e-12
#: Self-consistency iterations per pole unless the caller says otherwise.
MAX_ITERATIONS = 60
#: Sub-windows of :func:`window_poles`' energy window, each with its own self-energy, and poles asked for in each.
POLE_TARGETS = 3
POLES_PER_TARGET = 8


@dataclass(frozen=True, eq=False)
class Resonance:
    """A pole of the open device's Green's function.

    Attributes
    ----------
    energy_meV : float
        ``Re z``.
    width_meV : float
        ``Gamma = -2 Im z``.
    q_factor : float
        ``Re z / Gamma`` (inf for a vanishing width).
    n_open : tuple of int
        Open channels of each lead at ``Re z`` (empty for a model without leads).
    in_continuum : bool
        Whether any lead has an open channel at ``Re z`` (a zero-width pole
        outside the continuum is an ordinary bound state, not a BIC).
    state : (n_orbitals,) complex ndarray
        Right eigenvector of ``H_eff`` (unit norm).
    converged : bool
    iterations : int
        Self-consistency iterations (0 for a model without leads: nothing to iterate).
    """

    energy_meV: float
    width_meV: float
    q_factor: float
    n_open: tuple
    in_continuum: bool
    state: np.ndarray = field(repr=False)
    converged: bool
    iterations: int


def effective_hamiltonian(model: TightBindingModel, energy: float) -> sp.csr_matrix:
    """``H + sum_p Sigma_p(E)`` as a sparse complex matrix (meV), leads evaluated at real ``energy``.

    A model without leads gives ``H`` itself (as complex).
    """
    h = model.hamiltonian.astype(complex)
    if not model.leads:
        return h.tocsr()
    sigmas, _ = lead_self_energies(model, float(energy), warn=False)
    return (h + embedded_self_energy(model, sigmas)).tocsr()


def _closed_hermitian(model: TightBindingModel) -> bool:
    """No leads and no absorption: the poles are the real eigenvalues of a Hermitian H."""
    return not model.leads and not model.is_lossy


def _poles_near(model: TightBindingModel, energy: float, z: complex, count: int):
    """Eigenpairs of ``H_eff(energy)`` nearest ``z`` (the Hermitian solver for a closed lossless model)."""
    if _closed_hermitian(model):
        w, v = eigenvalues_near(model.hamiltonian, z.real, count, hermitian=True)
        return w.astype(complex), v
    return eigenvalues_near(effective_hamiltonian(model, energy), z, count)


def resonances(model: TightBindingModel, target: float, *, count: int = 3,
               max_iter: int = MAX_ITERATIONS) -> list[Resonance]:
    """Resonance poles nearest to a target energy, each self-consistent in ``Re z``.

    Parameters
    ----------
    model : TightBindingModel
        With or without leads (without: the closed system's levels, zero width when H is Hermitian).
    target : float
        Where to look (meV).
    count : int
        How many poles to return (nearest first).
    max_iter : int
        Self-consistency iterations per pole.

    Returns
    -------
    list of Resonance, sorted by distance of ``Re z`` from the target.

    Raises
    ------
    rgftrans.errors.EigenSolveFailed
        The shift-invert solve of a large model did not converge.
    """
    w, v = _poles_near(model, target, complex(target), count)
    if not model.leads:
        out = [_level(model, complex(z), v[:, k]) for k, z in enumerate(w)]
    else:
        out = [_refine_pole(model, complex(z0), model.energy_scale, max_iter) for z0 in w]
    out.sort(key=lambda r: abs(r.energy_meV - target))
    return out


def _level(model: TightBindingModel, z: complex, vec: np.ndarray) -> Resonance:
    """A level of a model without leads: nothing to iterate, no channel; width from absorption only."""
    width = 0.0 if _closed_hermitian(model) else -2.0 * z.imag
    q = z.real / width if width > 0 else np.inf
    return Resonance(energy_meV=z.real, width_meV=width, q_factor=q, n_open=(), in_continuum=False,
                     state=vec / np.linalg.norm(vec), converged=True, iterations=0)


def _refine_pole(model: TightBindingModel, z: complex, scale: float, max_iter: int) -> Resonance:
    """Iterate ``z <- eigenvalue of H_eff(Re z)`` nearest ``z`` until it moves less than POLE_TOL * scale."""
    converged = False
    vec = None
    it = 0
    for it in range(1, max_iter + 1):
        w, v = eigenvalues_near(effective_hamiltonian(model, z.real), z, 1)
        z_new, vec = complex(w[0]), v[:, 0]
        if abs(z_new - z) < POLE_TOL * scale:
            z = z_new
            converged = True
            break
        z = z_new
    _, modes = lead_self_energies(model, z.real, warn=False)
    n_open = tuple(int(m.n_open) for m in modes)
    width = -2.0 * z.imag
    q = z.real / width if width > 0 else np.inf
    vec = vec / np.linalg.norm(vec)
    return Resonance(energy_meV=z.real, width_meV=width, q_factor=q, n_open=n_open, in_continuum=sum(n_open) > 0,
                     state=vec, converged=converged, iterations=it)


def follow_pole(model: TightBindingModel, energy: float, state=None, count: int = 4) -> Resonance:
    """The pole of ``model`` that continues a tracked one (best overlap with ``state``, else nearest energy).

    The candidates come from one eigen-decomposition at the previous energy; only the chosen one is
    refined to self-consistency.
    """
    w, v = _poles_near(model, energy, complex(energy), count)
    pick = 0  # sorted by distance in the complex plane: a broad pole is far even if Re z is close
    if state is not None and v.shape[0] == state.shape[0]:
        overlaps = np.abs(state.conj() @ v) / np.linalg.norm(v, axis=0)
        if overlaps.max() > 0.5:
            pick = int(np.argmax(overlaps))
    if not model.leads:
        return _level(model, complex(w[pick]), v[:, pick])
    return _refine_pole(model, complex(w[pick]), model.energy_scale, MAX_ITERATIONS)


def window_poles(model: TightBindingModel, window, *, targets: int = POLE_TARGETS,
                 count: int = POLES_PER_TARGET) -> np.ndarray:
    """Resonance poles ``(energy_meV, width_meV)`` of an open model with real parts in a window, by energy.

    The window is cut into ``targets`` equal sub-windows; in each, the
    ``count`` eigenvalues z of H + Σ(E_c) nearest its centre E_c are found and
    those with Re z inside it kept (the self-energy taken at the centre: first
    order in the distance to it, which is ample for telling resolved from
    aliased lines).  Widths are Γ = -2 Im z; bound states (Γ = 0) are left out,
    so a model without leads has none.

    Returns
    -------
    (n_poles, 2) float ndarray
        Rows ``(Re z, Γ)`` in meV, sorted by energy.
    """
    lo, hi = float(window[0]), float(window[1])
    edges = np.linspace(lo, hi, targets + 1)
    found = []
    for k, (a, b) in enumerate(zip(edges[:-1], edges[1:])):
        centre = 0.5 * (a + b)
        last = k == targets - 1
        z, _ = eigenvalues_near(effective_hamiltonian(model, centre), complex(centre), count, vectors=False)
        # Half-open sub-windows (the last one closed), so a pole on a shared edge counts once.
        keep = (z.real >= a) & ((z.real < b) | (last & (z.real <= b))) & (-2 * z.imag > 0)
        found.extend(zip(z.real[keep], -2 * z.imag[keep], [k] * int(np.count_nonzero(keep))))
    # A pole near a shared edge can be seen from both sides (each with its own first-order shift): poles of
    # neighbouring sub-windows closer than half the smaller width are one line, kept once.
    found.sort()
    poles = []
    for e, w, k in found:
        if poles and k != poles[-1][2] and e - poles[-1][0] < 0.5 * min(w, poles[-1][1]):
            continue
        poles.append((e, w, k))
    return np.array([(e, w) for e, w, _ in poles], dtype=float).reshape(-1, 2)

