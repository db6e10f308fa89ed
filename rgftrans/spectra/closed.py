"""Levels and wavefunctions of a closed system: a device without its leads, or a named region of it.

The Hamiltonian ``H`` of the device's sites alone (hard walls where the leads would attach), or of the sites
inside a region (hard walls at its outline), diagonalised near a target energy or from the bottom of its
spectrum by :func:`rgftrans.spectra.eigen.eigenvalues_near` (dense below a few hundred orbitals, shift-invert
Lanczos above).  These are the single-particle levels of a closed dot -- the input of the constant-interaction
model -- and, for two coupled dots, the bonding-antibonding splitting 2 t_c.  Energies in meV, positions in nm.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp

from rgftrans.errors import RgftransError
from rgftrans.spectra.eigen import eigenvalues_near

__all__ = ["ClosedLevels", "closed_levels"]


@dataclass(frozen=True, eq=False)
class ClosedLevels:
    """Levels of a closed system.

    Attributes
    ----------
    energies_meV : (k,) float ndarray, meV
        Sorted ascending.
    states : (n_orbitals, k) complex ndarray
        Normalised eigenvectors (rows: the orbitals of ``sites``).
    sites : (n_sites,) int ndarray
        The model's site indices the closed system consists of.
    positions_nm : (n_sites, 2) float ndarray, nm
    norbs : int
    """

    energies_meV: np.ndarray
    states: np.ndarray
    sites: np.ndarray
    positions_nm: np.ndarray
    norbs: int

    def density(self, level: int) -> np.ndarray:
        """|psi|^2 of one level on each site (summed over orbitals), (n_sites,)."""
        psi = self.states[:, level].reshape(-1, self.norbs)
        return np.sum(np.abs(psi) ** 2, axis=1)

    @property
    def spacing_meV(self) -> float:
        """Mean spacing of the levels found (meV); NaN for fewer than two."""
        e = self.energies_meV
        return float(np.mean(np.diff(e))) if e.size > 1 else float("nan")


def closed_levels(model, *, count: int = 6, target: float | None = None, region=None,
                  sites=None) -> ClosedLevels:
    """The ``count`` levels of the device (or of ``region`` in it) nearest ``target``, or the lowest ones.

    Parameters
    ----------
    model : TightBindingModel
        Its leads are ignored (hard walls).
    count : int
    target : float, meV, optional
        Default: the bottom of the spectrum (the lowest ``count`` levels).
    region : Region, optional
        Keep only the sites inside it (e.g. a dot between its barriers).
    sites : (n_sites,) bool array_like, optional
        Keep only these sites (e.g. a dot's island found by the electrostatics); not with ``region``.

    Returns
    -------
    ClosedLevels
    """
    ham = sp.csr_matrix(model.hamiltonian)
    norbs = int(model.norbs)
    n_sites = model.positions.shape[0]
    if region is not None and sites is not None:
        raise RgftransError("give a region or a site mask, not both")
    keep = None
    if region is not None:
        keep = np.flatnonzero(region.contains(model.positions))
    elif sites is not None:
        mask = np.asarray(sites, dtype=bool)
        if mask.shape != (n_sites,):
            raise RgftransError(f"sites must be a boolean mask of the model's {n_sites} sites, got shape {mask.shape}")
        keep = np.flatnonzero(mask)
    sites = np.arange(n_sites)
    if keep is not None:
        sites = keep
        if sites.size == 0:
            raise RgftransError("the region contains no site of the device; draw it over the device")
        orbitals = (sites[:, None] * norbs + np.arange(norbs)[None, :]).ravel()
        ham = ham[orbitals][:, orbitals]
    size = ham.shape[0]
    if not (isinstance(count, (int, np.integer)) and 1 <= count <= size):
        raise RgftransError(f"count = {count!r} levels must be between 1 and the {size} orbitals of the system")
    if abs(ham - ham.getH()).max() > 1e-12 * max(1.0, abs(ham).max()):
        raise RgftransError("the closed system's Hamiltonian is not Hermitian (absorbing onsite energies?); "
                            "closed levels need a Hermitian H")
    if target is None:
        # Below the spectrum (Gershgorin): the levels nearest it are the lowest ones.
        radius = np.asarray(abs(ham).sum(axis=1)).ravel() - np.abs(ham.diagonal())
        target = float(np.min(ham.diagonal().real - radius)) - 1e-3 * model.energy_scale
    if not np.isfinite(target):
        raise RgftransError(f"target {target!r} meV must be a finite energy")
    w, v = eigenvalues_near(ham, float(target), int(count), hermitian=True)
    order = np.argsort(w)
    return ClosedLevels(energies_meV=np.asarray(w)[order], states=v[:, order], sites=sites,
                        positions_nm=model.positions[sites], norbs=norbs)
