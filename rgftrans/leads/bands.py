"""Band structures of the leads: E_n(k), channel thresholds and group velocities.

A lead is periodic with cells ``h_cell`` coupled by ``h_hop`` (to the next cell outward).  Its bands are the
eigenvalues of the Bloch Hamiltonian

    H(k) = h_cell + h_hop e^{i k a} + h_hop^dag e^{-i k a},     k in [-pi/a, pi/a]

(Ashcroft & Mermin, Solid State Physics, 1976, ch. 8-10, from memory), with ``a`` the lead's period.  The
group velocity follows from the Hellmann-Feynman theorem, ``hbar v = dE/dk = psi^dag (i a h_hop e^{ika} - i a
h_hop^dag e^{-ika}) psi``; positive k runs away from the device.  A channel opens at every band minimum and
closes at every band maximum: the thresholds a user checks before trusting a conductance staircase.
Energies in meV, k in 1/nm, velocities in m/s.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import constants as _codata

from rgftrans.errors import LeadError

__all__ = ["LeadBands", "lead_bands"]

#: Bloch phases sampled over the zone by default; thresholds are refined by a parabola through the three
#: samples around each extremum (exact for bands whose extrema are at k = 0 or pi/a, as on a strip).
K_POINTS = 401
#: hbar in meV s.
HBAR_MEV_S = _codata.hbar / _codata.e * 1e3


@dataclass(frozen=True, eq=False)
class LeadBands:
    """Bands of one lead.

    Attributes
    ----------
    lead : str
    period_nm : float
        The lead's period a (nm).
    k_per_nm : (n_k,) float ndarray, 1/nm
        Wave numbers over the Brillouin zone [-pi/a, pi/a]; positive: away from the device.
    energies_meV : (n_k, n_bands) float ndarray, meV
        E_n(k), bands sorted at each k.
    velocity_m_per_s : (n_k, n_bands) float ndarray, m/s
        Group velocity (1/hbar) dE/dk.
    minima_meV, maxima_meV : (n,) float ndarray, meV
        Where channels open (band minima) and close (band maxima), sorted.
    """

    lead: str
    period_nm: float
    k_per_nm: np.ndarray
    energies_meV: np.ndarray
    velocity_m_per_s: np.ndarray
    minima_meV: np.ndarray
    maxima_meV: np.ndarray

    @property
    def thresholds_meV(self) -> np.ndarray:
        """Every energy where the channel count changes, sorted."""
        return np.sort(np.concatenate([self.minima_meV, self.maxima_meV]))

    def channel_count(self, energy_meV: float) -> int:
        """Open channels (right-moving solutions) at an energy: minima below it minus maxima below it."""
        e = float(energy_meV)
        return int(np.sum(self.minima_meV < e) - np.sum(self.maxima_meV < e))


def _bloch(h_cell, h_hop, phases):
    e = np.exp(1j * phases)[:, None, None]
    return h_cell[None] + h_hop[None] * e + h_hop.conj().T[None] * e.conj()


def _extrema(phases: np.ndarray, bands: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Local minima and maxima of each sampled band over the periodic zone, refined by a parabola."""
    minima, maxima = [], []
    n = phases.size - 1  # the last sample repeats the first (k = -pi and pi)
    for band in bands[:-1].T:
        left, right = np.roll(band[:n], 1), np.roll(band[:n], -1)
        centre = band[:n]
        for kind, mask in (("min", (centre <= left) & (centre < right)), ("max", (centre >= left) & (centre > right))):
            for i in np.flatnonzero(mask):
                a, b, c = left[i], centre[i], right[i]
                curvature = a - 2 * b + c
                shift = 0.5 * (a - c) / curvature if curvature != 0 else 0.0
                value = b - 0.25 * (a - c) * shift
                (minima if kind == "min" else maxima).append(value)
    return np.sort(np.array(minima)), np.sort(np.array(maxima))


def lead_bands(model, lead, *, k_points: int = K_POINTS) -> LeadBands:
    """E_n(k), velocities and thresholds of one lead of a :class:`~rgftrans.system.device.TightBindingModel`.

    Parameters
    ----------
    model : TightBindingModel
    lead : str or int
        The lead's name or index.
    k_points : int
        Samples over the zone (odd, so that k = 0 is one).

    Returns
    -------
    LeadBands
    """
    names = [ld.name for ld in model.leads]
    if isinstance(lead, str):
        if lead not in names:
            raise LeadError(f"no lead {lead!r}; the model's leads are {', '.join(map(repr, names)) or 'none'}")
        lead = names.index(lead)
    if not (0 <= int(lead) < len(names)):
        raise LeadError(f"lead index {lead!r} is out of range; the model has {len(names)} lead(s)")
    if k_points < 5 or k_points % 2 == 0:
        raise LeadError(f"k_points = {k_points!r} must be an odd number >= 5 (so that k = 0 is sampled)")
    ld = model.leads[int(lead)]
    h_cell = np.asarray(ld.h_cell, dtype=complex)
    h_hop = np.asarray(ld.h_hop, dtype=complex)
    a = float(np.linalg.norm(ld.period))
    phases = np.linspace(-np.pi, np.pi, k_points)
    energies, states = np.linalg.eigh(_bloch(h_cell, h_hop, phases))
    e = np.exp(1j * phases)[:, None, None]
    d_h = 1j * (h_hop[None] * e - h_hop.conj().T[None] * e.conj())  # dH/d(phase), meV per radian
    slope = np.real(np.einsum("kin,kij,kjn->kn", states.conj(), d_h, states))  # meV per radian
    velocity = slope * 1e-3 * _codata.e * (a * 1e-9) / _codata.hbar  # m/s
    minima, maxima = _extrema(phases, energies)
    return LeadBands(lead=ld.name, period_nm=a, k_per_nm=phases / a, energies_meV=energies,
                     velocity_m_per_s=velocity, minima_meV=minima, maxima_meV=maxima)
