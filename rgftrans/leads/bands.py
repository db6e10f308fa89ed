"""Band structures of the leads: E_n(k), channel thresholds, group velocities and open channels.

A lead is periodic with period ``a`` (nm) along its axis, cells ``j = 0, 1, ...``
outward, ``h_cell`` one cell's Hamiltonian and ``h_hop = <j|H|j+1>``.  A Bloch
wave ``psi_j = e^{i k a j} u`` solves ``H psi = E psi`` when ``u`` is an
eigenvector of the Bloch Hamiltonian (Ashcroft & Mermin, Solid State Physics,
1976, ch. 10, from memory)::

    H(k) = h_cell + h_hop e^{i k a} + h_hop^dag e^{-i k a},   k in [-pi/a, pi/a].

``k > 0`` with ``dE/dk > 0`` moves *away from the device* (the convention of
:mod:`rgftrans.leads.modes`, whose Bloch factor is ``e^{i k a}``).

* **Bands** ``E_n(k)``: the eigenvalues of ``H(k)`` in ascending order at every
  k of a uniform grid (band index n counts from the bottom; two bands that
  cross exchange indices there, so the sorted bands have kinks).
* **Group velocities** ``v = (1/hbar) dE/dk`` by the Hellmann-Feynman theorem,
  ``dE_n/dk = <u_n| dH/dk |u_n>`` with ``dH/dk = i a (h_hop e^{ika} - h_hop^dag
  e^{-ika})`` (exact, no finite differences; inside a degenerate cluster the
  projected ``dH/dk`` is diagonalised).  Stored as ``slopes_meV_nm`` =
  ``dE/dk`` = ``hbar v`` (meV nm); :attr:`LeadBands.velocities_m_per_s` is v in
  m/s and :attr:`LeadBands.velocities_in_hopping_units` is v in units of
  ``t a / hbar`` (t = the model's hopping, a = the lead period), where a chain's
  band ``-2t cos(ka)`` has velocities up to 2.
* **Thresholds**: the band extrema, where a channel opens (minimum, as E rises)
  or closes (maximum) with zero velocity -- subband bottoms at k = 0 or the
  zone boundary and interior extrema (magnetic or spin-orbit bands).  Each
  turning point of a sampled band is refined to the true extremum by bounded
  Brent minimisation of ``E_n(k)`` (xatol 1e-10 in ka; the energy error is then
  round-off, since E is stationary there).  A kink where two sorted bands
  cross with non-zero velocities is a turning point of the sorted bands but
  not a threshold; it is kept (``BandExtremum.crossing``) for counting only.
* **Open channels** at an energy: the right-moving solutions ``E_n(k) = E``,
  ``dE/dk > 0``.  On a circle the minima and maxima of a band alternate, so
  the number of up-crossings of E is ``#(minima below E) - #(maxima below E)``:
  :func:`channel_count` counts that way (exact once the extrema are found);
  :func:`open_channels` finds each crossing by Brent's root finding on the
  monotonic piece between two extrema.  A channel exactly at its threshold is
  closed, as in :func:`rgftrans.leads.modes.lead_modes`; both are checked
  against it (count, k and velocity to 1e-8) in ``tests/test_lead_bands.py``.

Resolution: extrema closer together than about two grid steps can be missed
by the sampling (a band wiggle smaller than the grid); raise ``k_points`` for
leads with many nearly flat bands (strong fields).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import scipy.linalg as sla
import scipy.optimize as sopt

from rgftrans.constants import HBAR_MEV_S
from rgftrans.errors import EnergyError, RgftransError
from rgftrans.system.device import TightBindingModel

__all__ = ["LeadBands", "BandExtremum", "OpenChannels", "lead_bands", "channel_count", "open_channels",
           "DEFAULT_K_POINTS"]

#: Grid of k over the Brillouin zone (both ends included): 401 points resolve turning points more than two
#: steps (0.03 pi/a) apart, ample for subbands of strips hundreds of sites wide.
DEFAULT_K_POINTS = 401
#: Fewest and most k points accepted.
MIN_K_POINTS, MAX_K_POINTS = 9, 10**6
#: Sampled energy differences below this fraction of the lead's energy scale are flat (round-off, not slope).
_FLAT_TOL = 1e-12
#: Eigenvalues within this fraction of the energy scale form a degenerate cluster (velocities diagonalised in it;
#: an extremum refined onto a band crossing lies within ~1e-9 of it in energy).
_CLUSTER_TOL = 1e-7
#: A velocity |dE/d(ka)| below this fraction of the energy scale is zero: the threshold criterion of leads.modes.
_ZERO_VELOCITY = 1e-5
#: Extrema are refined to this precision in k a (radians).
_K_XATOL = 1e-10


@dataclass(frozen=True)
class BandExtremum:
    """A turning point of one (sorted) band.

    Attributes
    ----------
    band : int
        Band index (0 = lowest).
    k_per_nm : float, 1/nm
        Where, in [-pi/a, pi/a).
    energy_meV : float, meV
    minimum : bool
        True for a band minimum (a channel opens as E rises), False for a maximum (it closes).
    crossing : bool
        True for a kink where two sorted bands cross with non-zero velocities: a turning point of the sorted
        band, not a channel threshold.
    """

    band: int
    k_per_nm: float
    energy_meV: float
    minimum: bool
    crossing: bool = False


@dataclass(frozen=True, eq=False)
class LeadBands:
    """Band structure of one lead.

    Attributes
    ----------
    lead_name : str
    lattice_constant_nm : float, nm
        The lead period ``a`` (length of the translation between cells).
    hopping_meV : float, meV
        The model's hopping t, the unit of :attr:`velocities_in_hopping_units`.
    k_per_nm : (n_k,) float ndarray, 1/nm
        Uniform grid over [-pi/a, pi/a], both ends included.
    energies_meV : (n_k, n_bands) float ndarray, meV
        ``E_n(k)``, ascending in n at every k.
    slopes_meV_nm : (n_k, n_bands) float ndarray, meV nm
        ``dE_n/dk = hbar v_n`` (Hellmann-Feynman).
    thresholds_meV : (n_thr,) float ndarray, meV
        Channel thresholds (band extrema that are not crossings), ascending.
    extrema : tuple of BandExtremum
        Every turning point of every band (thresholds and crossings), by band then k.
    h_cell, h_hop : (m, m) complex ndarray, meV
        The lead's matrices (for :func:`open_channels`).
    """

    lead_name: str
    lattice_constant_nm: float
    hopping_meV: float
    k_per_nm: np.ndarray
    energies_meV: np.ndarray
    slopes_meV_nm: np.ndarray
    thresholds_meV: np.ndarray
    extrema: tuple = field(repr=False)
    h_cell: np.ndarray = field(repr=False)
    h_hop: np.ndarray = field(repr=False)

    @property
    def n_bands(self) -> int:
        """Number of bands (orbitals per lead cell)."""
        return self.energies_meV.shape[1]

    @property
    def velocities_m_per_s(self) -> np.ndarray:
        """(n_k, n_bands) float: group velocities ``v = (1/hbar) dE/dk`` in m/s."""
        return self.slopes_meV_nm * 1e-9 / HBAR_MEV_S

    @property
    def velocities_in_hopping_units(self) -> np.ndarray:
        """(n_k, n_bands) float: group velocities in units of ``t a / hbar`` (dimensionless, ``dE/d(ka) / t``)."""
        return self.slopes_meV_nm / (self.hopping_meV * self.lattice_constant_nm)

    @property
    def band_bottom_meV(self) -> float:
        """Lowest energy of any band (meV)."""
        return float(self.energies_meV.min())

    @property
    def band_top_meV(self) -> float:
        """Highest energy of any band (meV)."""
        return float(self.energies_meV.max())


@dataclass(frozen=True, eq=False)
class OpenChannels:
    """The open (right-moving, outward) channels of a lead at one energy.

    Attributes
    ----------
    energy_meV : float, meV
    k_per_nm : (n_open,) float ndarray, 1/nm
        Wave number of each channel in [-pi/a, pi/a).
    slopes_meV_nm : (n_open,) float ndarray, meV nm
        ``dE/dk = hbar v`` (> 0).
    velocities_m_per_s : (n_open,) float ndarray, m/s
    bands : (n_open,) int ndarray
        Band each channel belongs to.
    """

    energy_meV: float
    k_per_nm: np.ndarray
    slopes_meV_nm: np.ndarray
    velocities_m_per_s: np.ndarray
    bands: np.ndarray

    @property
    def count(self) -> int:
        """Number of open channels."""
        return len(self.k_per_nm)


# --- The Bloch Hamiltonian and its k-derivative (ka in radians, energies in meV) --------------------------------

def _bloch(h_cell, h_hop, ka: float) -> np.ndarray:
    phase = np.exp(1j * ka)
    return h_cell + h_hop * phase + h_hop.conj().T * np.conj(phase)


def _d_bloch(h_hop, ka: float) -> np.ndarray:
    """``dH/d(ka)`` (meV)."""
    phase = np.exp(1j * ka)
    return 1j * (h_hop * phase - h_hop.conj().T * np.conj(phase))


def _clusters(w: np.ndarray, tol: float):
    """Index ranges [start, stop) of eigenvalues (ascending) closer than ``tol`` to their neighbour."""
    start = 0
    for k in range(1, len(w) + 1):
        if k == len(w) or w[k] - w[k - 1] > tol:
            yield start, k
            start = k


def _bands_and_slopes(h_cell, h_hop, ka: float, tol: float):
    """Eigenvalues (ascending) and ``dE/d(ka)`` of every band at one k; clusters get the projected ``dH/dk``
    diagonalised (its eigenvalues, ascending, are the cluster's velocities)."""
    w, u = np.linalg.eigh(_bloch(h_cell, h_hop, ka))
    dh = _d_bloch(h_hop, ka)
    proj = u.conj().T @ dh @ u
    slopes = np.real(np.diag(proj)).copy()
    for a, b in _clusters(w, tol):
        if b - a > 1:
            slopes[a:b] = np.linalg.eigvalsh(0.5 * (proj[a:b, a:b] + proj[a:b, a:b].conj().T))
    return w, slopes


def _band_energy(h_cell, h_hop, n: int, ka: float) -> float:
    return float(sla.eigvalsh(_bloch(h_cell, h_hop, ka), subset_by_index=[n, n])[0])


def _cluster_slopes(h_cell, h_hop, n: int, ka: float, tol: float) -> np.ndarray:
    """``dE/d(ka)`` of the degenerate cluster holding band n at ka (one value if band n is alone)."""
    w, u = np.linalg.eigh(_bloch(h_cell, h_hop, ka))
    members = np.flatnonzero(np.abs(w - w[n]) <= tol)
    sub = u[:, members]
    proj = sub.conj().T @ _d_bloch(h_hop, ka) @ sub
    return np.linalg.eigvalsh(0.5 * (proj + proj.conj().T))


def _wrap(ka: float) -> float:
    """ka into [-pi, pi)."""
    return float((ka + np.pi) % (2 * np.pi) - np.pi)


# --- Turning points of a sampled periodic band ----------------------------------------------------------------

def _turning_points(e: np.ndarray, noise: float):
    """Turning points of a periodic sampled band ``e`` (length N, sample N would repeat sample 0).

    Returns a list of ``(sample, lo, hi, minimum)``: the extreme sample of each turning run and the bracketing
    sample indices ``lo < sample < hi`` (unwrapped, may leave 0..N-1), minima and maxima alternating.  An
    entirely flat band (no difference above ``noise``) gives none.
    """
    n = len(e)
    d = np.roll(e, -1) - e  # d_i = e_{i+1} - e_i
    sign = np.where(d > noise, 1, np.where(d < -noise, -1, 0))
    nonzero = np.flatnonzero(sign)
    out = []
    if nonzero.size == 0:
        return out
    for j, j1 in enumerate(nonzero):
        j2 = nonzero[(j + 1) % len(nonzero)]
        if j2 <= j1:
            j2 += n  # wrap around the zone
        if sign[j1] == sign[j2 % n]:
            continue
        samples = np.arange(j1 + 1, j2 + 1)  # the run between a descent and an ascent (or vice versa)
        values = e[samples % n]
        minimum = sign[j1] < 0
        pick = samples[np.argmin(values) if minimum else np.argmax(values)]
        out.append((int(pick), int(j1), int(j2 + 1), bool(minimum)))
    return out


def lead_bands(model: TightBindingModel, lead, *, k_points: int = DEFAULT_K_POINTS) -> LeadBands:
    """Band structure ``E_n(k)`` of one lead, with its thresholds and group velocities.

    Parameters
    ----------
    model : TightBindingModel
    lead : str or int
        The lead's name or index.
    k_points : int
        Points of the uniform k grid over [-pi/a, pi/a] (both ends included).

    Returns
    -------
    LeadBands

    Raises
    ------
    LeadError
        An unknown lead (the message lists the model's leads).
    RgftransError
        A k_points outside 9..10^6.

    Examples
    --------
    A one-row chain (a = 1 nm, t = 1 meV, onsite 4t) has the band ``4 - 2 cos(ka)`` meV: its channel opens at
    2 meV (k = 0) and closes at 6 meV (zone boundary).

    >>> from rgftrans.system.device import Device, Lead
    >>> from rgftrans.system.geometry import rectangle
    >>> from rgftrans.system.lattices import square
    >>> chain = Device(rectangle(0, -0.4, 5, 0.4), [Lead("l", "left", (0, 0)), Lead("r", "right", (0, 0))],
    ...                lattice=square(1.0), hopping=1.0).discretise()
    >>> bands = lead_bands(chain, "r", k_points=65)
    >>> np.round(bands.thresholds_meV, 12).tolist()
    [2.0, 6.0]
    >>> int(channel_count(bands, 3.0)), int(channel_count(bands, 7.0))
    (1, 0)
    """
    if not isinstance(model, TightBindingModel):
        raise RgftransError(f"lead_bands needs a TightBindingModel (Device.discretise()), got {type(model).__name__}")
    if isinstance(k_points, (bool, np.bool_)) or not isinstance(k_points, (int, np.integer)) or not (
            MIN_K_POINTS <= k_points <= MAX_K_POINTS):
        raise RgftransError(f"k_points must be an integer in {MIN_K_POINTS}..{MAX_K_POINTS}, got {k_points!r}")
    spec = model.lead(lead)
    h_cell = np.asarray(spec.h_cell, dtype=complex)
    h_hop = np.asarray(spec.h_hop, dtype=complex)
    a = float(np.linalg.norm(spec.period))
    scale = max(float(np.abs(h_hop).max(initial=0.0)), float(np.abs(h_cell - np.diag(np.diag(h_cell))).max(
        initial=0.0)), float(model.energy_scale))
    ka = np.linspace(-np.pi, np.pi, int(k_points))
    m = h_cell.shape[0]
    energies = np.empty((len(ka), m))
    slopes = np.empty((len(ka), m))
    for i, x in enumerate(ka[:-1]):
        energies[i], slopes[i] = _bands_and_slopes(h_cell, h_hop, x, _CLUSTER_TOL * scale)
    energies[-1], slopes[-1] = energies[0], slopes[0]  # k = pi/a is k = -pi/a

    extrema = []
    periodic = ka[:-1]
    step = periodic[1] - periodic[0]
    for n in range(m):
        turns = _turning_points(energies[:-1, n], _FLAT_TOL * scale)
        if not turns:  # a flat band: one level, a threshold from both sides
            e_flat = float(np.mean(energies[:-1, n]))
            extrema += [BandExtremum(n, 0.0, e_flat, True), BandExtremum(n, 0.0, e_flat, False)]
            continue
        for sample, lo, hi, minimum in turns:
            x0 = periodic[0] + sample * step
            if abs(slopes[sample % len(periodic), n]) < _ZERO_VELOCITY * scale:
                x_star, e_star = x0, energies[sample % len(periodic), n]  # on the grid (k = 0, zone boundary)
            else:
                sign = 1.0 if minimum else -1.0
                res = sopt.minimize_scalar(lambda x: sign * _band_energy(h_cell, h_hop, n, x),
                                           bounds=(periodic[0] + lo * step, periodic[0] + hi * step),
                                           method="bounded", options={"xatol": _K_XATOL})
                x_star, e_star = float(res.x), sign * float(res.fun)
            velocities = _cluster_slopes(h_cell, h_hop, n, x_star, _CLUSTER_TOL * scale)
            crossing = len(velocities) > 1 and np.abs(velocities).max() > _ZERO_VELOCITY * scale
            extrema.append(BandExtremum(n, _wrap(x_star) / a, float(e_star), minimum, bool(crossing)))
    thresholds = np.sort([x.energy_meV for x in extrema if not x.crossing])
    return LeadBands(lead_name=spec.name, lattice_constant_nm=a, hopping_meV=float(model.energy_scale),
                     k_per_nm=ka / a, energies_meV=energies, slopes_meV_nm=slopes * a,
                     thresholds_meV=np.asarray(thresholds, float), extrema=tuple(extrema), h_cell=h_cell,
                     h_hop=h_hop)


def _check_energy(energy) -> np.ndarray:
    if isinstance(energy, (str, bytes, bool, np.bool_)) or np.iscomplexobj(energy):
        raise EnergyError(f"energy must be a real number or array in meV, got {energy!r}")
    e = np.asarray(energy, dtype=float)
    if not np.all(np.isfinite(e)):
        raise EnergyError(f"energy must be finite (meV), got {energy!r}; remove NaN or infinite values")
    return e


def channel_count(bands: LeadBands, energy):
    """Open channels of the lead at ``energy`` (meV): right-moving Bloch waves ``E_n(k) = E``.

    ``#(band minima below E) - #(band maxima at or below E)``, summed over bands (minima and maxima of a band
    alternate around the zone, so this is its number of up-crossings of E); a channel exactly at its threshold
    is closed, as in :func:`rgftrans.leads.modes.lead_modes`.  Crossings count strictly on both sides so that
    the crossing channel stays open there.

    Parameters
    ----------
    bands : LeadBands
    energy : float or ndarray, meV

    Returns
    -------
    int or ndarray of int, shaped like ``energy``
    """
    e = _check_energy(energy)
    count = np.zeros(e.shape, dtype=int)
    for x in bands.extrema:
        if x.minimum:
            count += (x.energy_meV < e)
        elif x.crossing:
            count -= (x.energy_meV < e)
        else:
            count -= (x.energy_meV <= e)
    return count if e.ndim else int(count)


def open_channels(bands: LeadBands, energy: float) -> OpenChannels:
    """The open channels at one energy (meV): wave number, slope ``dE/dk`` and velocity of each right-mover.

    Each crossing ``E_n(k) = E`` with ``dE/dk > 0`` is found by Brent's root finding (xtol 1e-14 in ka) on the
    monotonic piece of band n between a minimum and the next maximum; the slope is the Hellmann-Feynman
    ``<u| dH/dk |u>`` there.  The count equals :func:`channel_count`.  Sorted by band, then k.
    """
    e = float(_check_energy(energy))
    a = bands.lattice_constant_nm
    scale = max(float(np.abs(bands.h_hop).max(initial=0.0)), bands.hopping_meV)
    ks, slopes, which = [], [], []
    for n in range(bands.n_bands):
        ext = sorted((x for x in bands.extrema if x.band == n), key=lambda x: x.k_per_nm)
        for j, lo in enumerate(ext):  # a flat band's minimum and maximum share one energy: no piece holds E
            hi = ext[(j + 1) % len(ext)]
            if not lo.minimum or hi.minimum:
                continue
            upper_ok = e <= hi.energy_meV if hi.crossing else e < hi.energy_meV
            if not (lo.energy_meV < e and upper_ok):
                continue
            x_lo = lo.k_per_nm * a
            x_hi = hi.k_per_nm * a
            if x_hi <= x_lo:
                x_hi += 2 * np.pi
            f = lambda x: _band_energy(bands.h_cell, bands.h_hop, n, x) - e  # noqa: E731
            f_lo, f_hi = f(x_lo), f(x_hi)
            if f_lo >= 0.0 or f_hi < 0.0:
                continue  # E within round-off of the threshold: the channel has (numerically) zero velocity
            x_root = x_hi if f_hi == 0.0 else sopt.brentq(f, x_lo, x_hi, xtol=1e-14, rtol=4 * np.finfo(float).eps)
            v = _cluster_slopes(bands.h_cell, bands.h_hop, n, x_root, _CLUSTER_TOL * scale)
            ks.append(_wrap(x_root) / a)
            slopes.append(float(v.max()) * a)
            which.append(n)
    slopes = np.array(slopes, dtype=float)
    return OpenChannels(energy_meV=e, k_per_nm=np.array(ks, dtype=float), slopes_meV_nm=slopes,
                        velocities_m_per_s=slopes * 1e-9 / HBAR_MEV_S, bands=np.array(which, dtype=int))
