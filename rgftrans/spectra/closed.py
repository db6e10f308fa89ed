"""Levels and wavefunctions of the closed system: ``H psi = E psi`` without the leads.

The closed device is the model's Hamiltonian ``H`` alone, the leads cut off
(hard walls where they attached), or ``H`` restricted to the sites inside a
region ``R``: ``H_RR psi = E psi`` with every bond leaving ``R`` cut (a dot cut
out of a larger device, hard walls at the region's edge).  ``H`` is Hermitian,
so the levels are real and the states orthonormal.

Two ways to ask:

* near a target energy: the ``count`` levels nearest it, by shift-invert
  (:func:`rgftrans.spectra.eigen.eigenvalues_near`, Hermitian route);
* the lowest ``count`` levels: shift-invert with the shift placed below the
  whole spectrum, at the Gershgorin lower bound ``min_i (H_ii - sum_j |H_ij|)``
  minus :data:`BELOW_SPECTRUM` of the energy scale.  ``H - sigma`` is then
  positive definite (never singular) and the eigenvalues of ``(H - sigma)^-1``
  of largest magnitude are exactly the lowest levels of ``H``.  (The
  alternative, Lanczos for the smallest algebraic eigenvalues without a shift,
  converges slowly at the bottom of a dense spectrum, common practice, no
  source.)

Either way the levels come back sorted by energy.  Small systems (below
:data:`rgftrans.spectra.eigen.DENSE_BELOW` orbitals) are decomposed densely;
``dense=True`` forces that for larger ones (shift-invert Lanczos may return
fewer copies of an exactly degenerate level than exist, see
:mod:`rgftrans.spectra.eigen`).

Checked against scipy.linalg.eigh (dense, to 1e-10 of t) and against the
exact levels of a hard-wall box on the square lattice,
``E = 4t - 2t cos(pi m / (Nx + 1)) - 2t cos(pi n / (Ny + 1))`` (common
practice, exact for the lattice) in ``tests/test_closed_levels.py``.
Energies in meV, positions in nm.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import scipy.sparse as sp

from rgftrans.errors import GeometryError, RgftransError
from rgftrans.spectra.eigen import eigenvalues_near
from rgftrans.system.device import TightBindingModel
from rgftrans.system.geometry import Region

__all__ = ["ClosedLevels", "closed_levels", "BELOW_SPECTRUM"]

#: The shift for the lowest levels sits this fraction of the model's energy scale below the Gershgorin lower
#: bound: strictly below every eigenvalue (so H - sigma is positive definite), and not so far below that the
#: lowest levels crowd together as seen from the shift (their ratios set the shift-invert convergence rate).
BELOW_SPECTRUM = 1e-2


@dataclass(frozen=True, eq=False)
class ClosedLevels:
    """Levels and states of the closed system (no leads), sorted by energy.

    Attributes
    ----------
    energies_meV : (k,) float ndarray, meV
        Eigenvalues of ``H`` (or of ``H`` restricted to ``region_name``'s sites), ascending.
    states : (n_orbitals, k) complex ndarray
        Eigenvectors as columns, each of unit norm (``sum |psi|^2 = 1``), on the kept sites' orbitals
        (``site * norbs + orbital`` in the order of ``site_indices``); n_orbitals = n_sites x norbs.
    positions_nm : (n_sites, 2) float ndarray, nm
        Positions of the kept sites.
    site_indices : (n_sites,) int ndarray
        Index of every kept site in the model (all sites when no region restricts the system).
    norbs : int
        Orbitals per site (2 with spin).
    weights_inside : (k,) float ndarray
        Probability ``sum_{i in R_w} |psi_i|^2`` of each level on the sites inside the weighing region
        (``weigh_in``; 1 for every level when none was given).
    target_meV : float
        Where the levels were looked for (meV); NaN when the lowest levels were asked for.
    region_name : str
        Name of the region the system was restricted to ("" for the whole device).
    """

    energies_meV: np.ndarray
    states: np.ndarray = field(repr=False)
    positions_nm: np.ndarray = field(repr=False)
    site_indices: np.ndarray = field(repr=False)
    norbs: int
    weights_inside: np.ndarray
    target_meV: float
    region_name: str = ""

    @property
    def count(self) -> int:
        """Number of levels."""
        return len(self.energies_meV)

    @property
    def densities(self) -> np.ndarray:
        """(n_sites, k) float: ``|psi|^2`` of every level on every kept site (orbitals summed); columns sum to 1."""
        prob = np.abs(self.states) ** 2
        return prob.reshape(len(self.positions_nm), self.norbs, -1).sum(axis=1)

    def density(self, level: int) -> np.ndarray:
        """(n_sites,) float: ``|psi|^2`` of one level on the kept sites (orbitals summed), for a map."""
        if isinstance(level, (bool, np.bool_)) or not isinstance(level, (int, np.integer)) or not (
                -self.count <= level < self.count):
            raise RgftransError(f"level {level!r} is not one of the {self.count} levels found; give an index "
                                f"0..{self.count - 1}")
        return self.densities[:, level]


def _check_count(count, n: int) -> int:
    if isinstance(count, (bool, np.bool_)) or not isinstance(count, (int, np.integer)) or count < 1:
        raise RgftransError(f"count of closed levels must be a positive integer, got {count!r}")
    if count > n:
        raise RgftransError(f"count = {count} closed levels asked for, but the closed system has only {n} "
                            f"orbitals; ask for at most {n}")
    return int(count)


def _kept_sites(model: TightBindingModel, within: Region | None) -> np.ndarray:
    if within is None:
        return np.arange(model.n_sites)
    if not isinstance(within, Region):
        raise GeometryError(f"within must be a Region (rectangle(...), disk(...), polygon(...) in nm), got "
                            f"{type(within).__name__}")
    keep = np.flatnonzero(within.contains(model.positions))
    if keep.size == 0:
        xmin, ymin, xmax, ymax = model.positions.min(0).tolist() + model.positions.max(0).tolist()
        raise GeometryError(f"the region within= (bounds {tuple(round(b, 4) for b in within.bounds)} nm) holds none "
                            f"of the model's sites (they span x = {xmin:.4g}..{xmax:.4g}, y = {ymin:.4g}..{ymax:.4g} "
                            "nm); move or enlarge the region")
    return keep


def _gershgorin_lower(ham: sp.csr_matrix) -> float:
    """``min_i (H_ii - sum_{j != i} |H_ij|)``: no eigenvalue of the Hermitian ``ham`` lies below it."""
    diag = ham.diagonal().real
    radius = np.asarray(abs(ham).sum(axis=1)).ravel() - np.abs(ham.diagonal())
    return float(np.min(diag - radius))


def closed_levels(model: TightBindingModel, *, count: int = 6, target: float | None = None,
                  within: Region | None = None, region_name: str = "", weigh_in: Region | None = None,
                  dense: bool | None = None, sites=None) -> ClosedLevels:
    """Levels and normalised states of the model without its leads, near a target or the lowest ones.

    Parameters
    ----------
    model : TightBindingModel
        Its leads are ignored (cut off: hard walls where they attached); ``H`` must be Hermitian.
    count : int
        Number of levels.
    target : float, meV, optional
        Return the ``count`` levels nearest this energy; None (default) returns the lowest ``count``.
    within : Region, optional
        Restrict the system to the sites inside this region (nm), every bond leaving it cut: the levels of a dot
        cut out of the device.
    region_name : str
        A name for ``within`` carried to the result (figure titles).
    weigh_in : Region, optional
        Report each level's probability on the sites inside this region (nm), e.g. the dot of an open device.
    dense : bool, optional
        Force the full decomposition (True) or shift-invert (False); default by size
        (:func:`rgftrans.spectra.eigen.eigenvalues_near`).
    sites : (n_sites,) bool array_like, optional
        Instead of ``within``: keep exactly these sites (e.g. a dot's island as the electrostatics finds it).

    Returns
    -------
    ClosedLevels
        Sorted by energy.

    Raises
    ------
    RgftransError
        A bad count or target, or a non-Hermitian (absorbing) model.
    GeometryError
        A region that holds no site.
    EigenSolveFailed
        The shift-invert iterations did not converge (one line, with advice).

    Examples
    --------
    A hard-wall chain of 4 sites with hopping -1 meV (onsite 0) has levels ``-2 cos(pi m / 5)``:

    >>> import numpy as np, scipy.sparse as sp
    >>> ham = sp.diags([-np.ones(3), -np.ones(3)], [-1, 1])
    >>> chain = TightBindingModel(ham, np.column_stack([np.arange(4.0), np.zeros(4)]), ())
    >>> np.round(closed_levels(chain, count=2).energies_meV, 6).tolist()
    [-1.618034, -0.618034]
    """
    if not isinstance(model, TightBindingModel):
        raise RgftransError(f"closed_levels needs a TightBindingModel (Device.discretise()), got "
                            f"{type(model).__name__}")
    if model.is_lossy:
        raise RgftransError("the model has absorbing onsite energies (negative imaginary parts), so H is not "
                            "Hermitian and has no closed levels; use spectra.resonances for its complex poles")
    if target is not None:
        if isinstance(target, (bool, np.bool_, complex, np.complexfloating, str)) or not np.isfinite(
                np.real(target)):
            raise RgftransError(f"target of closed_levels must be a finite real energy in meV, got {target!r}")
        target = float(target)
    if sites is not None:
        if within is not None:
            raise RgftransError("give within= (a region) or sites= (a mask), not both")
        mask = np.asarray(sites, dtype=bool)
        if mask.shape != (model.n_sites,) or not mask.any():
            raise GeometryError(f"sites must be a non-empty boolean mask of the model's {model.n_sites} sites, got "
                                f"shape {mask.shape} with {int(mask.sum()) if mask.ndim == 1 else 0} kept")
        sites = np.flatnonzero(mask)
    else:
        sites = _kept_sites(model, within)
    norbs = model.norbs
    orbitals = (sites[:, None] * norbs + np.arange(norbs)).ravel()
    ham = model.hamiltonian
    if len(sites) < model.n_sites:
        ham = ham[orbitals][:, orbitals]
    ham = sp.csr_matrix(ham)
    k = _check_count(count, ham.shape[0])
    shift = target if target is not None else _gershgorin_lower(ham) - BELOW_SPECTRUM * model.energy_scale
    w, v = eigenvalues_near(ham, shift, k, hermitian=True, dense=dense)
    order = np.argsort(w, kind="stable")
    w, v = np.asarray(w, float)[order], v[:, order]
    v = v / np.linalg.norm(v, axis=0)
    prob = (np.abs(v) ** 2).reshape(len(sites), norbs, -1).sum(axis=1)
    if weigh_in is None:
        weights = np.ones(len(w))
    else:
        if not isinstance(weigh_in, Region):
            raise GeometryError(f"weigh_in must be a Region (rectangle(...), disk(...), polygon(...) in nm), got "
                                f"{type(weigh_in).__name__}")
        inside = weigh_in.contains(model.positions[sites])
        weights = prob[inside].sum(axis=0)
    return ClosedLevels(energies_meV=w, states=v, positions_nm=model.positions[sites].copy(), site_indices=sites,
                        norbs=norbs, weights_inside=weights, target_meV=np.nan if target is None else target,
                        region_name=str(region_name))
