"""Magnetic field, spin and disorder terms of the tight-binding Hamiltonian.

* Orbital field: Peierls phases.  A bond from site j to site i carries
  ``<i|H|j> = -t exp(i (e/hbar) int_j^i A . dl)`` (Peierls 1933, from memory;
  the flux per plaquette in flux quanta is ``phi = B a^2 / (h/e)``).  The
  vector potential is the Landau gauge ``A1 = (-B y, 0)`` plus the gradient
  of ``chi = B x y f(r)``: with ``f = 1`` the sum is ``A2 = (0, B x)``.
  ``f`` is 0 on the sites of leads running along x, 1 on leads running
  along y, and in the device whichever of the two the site is nearer to.  On
  a lattice a gradient term is an exact gauge transformation
  (``psi_i -> exp(i e chi_i / hbar) psi_i``), so no observable depends on
  ``f``, while every lead sees a vector potential that does not change along
  it -- the lead stays periodic.
* Zeeman: ``(g/2) mu_B B sigma_z`` on spinful sites.
* Rashba spin-orbit ``alpha (sigma_x k_y - sigma_y k_x)`` (Bychkov & Rashba,
  JETP Lett. 39, 78 (1984), from memory), discretised with central
  differences: the bond ``d`` (from j to i, length a) carries the extra
  matrix ``i alpha / (2 a^2) (d_x sigma_y - d_y sigma_x)``, which gives the
  bulk bands ``E = 2t (2 - cos k_x a - cos k_y a) +- (alpha/a) sqrt(sin^2 k_x a
  + sin^2 k_y a)`` on the square lattice.
* Anderson disorder: onsite energies uniform in ``[-W/2, W/2)``, drawn from
  numpy's counter-based Philox generator (Salmon et al., SC'11, "Parallel
  random numbers: as easy as 1, 2, 3", from memory) keyed by the seed and
  counting over the site's cell ``(n1, n2, b)``, so a site keeps its value
  when the region around it changes (see :class:`Disorder`).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import constants

from rgftrans.constants import BOHR_MAGNETON_MEV_PER_T
from rgftrans.errors import PotentialError

__all__ = [
    "MagneticField", "Disorder", "FLUX_PHASE_PER_T_NM2", "FLUX_QUANTUM_T_NM2", "BOHR_MAGNETON_MEV_PER_T",
    "peierls_phase", "gauge_weight", "zeeman_matrix", "rashba_matrix", "PAULI",
]

#: e / hbar in rad per (T nm^2): the Peierls phase of a flux of 1 T through 1 nm^2.
FLUX_PHASE_PER_T_NM2 = constants.e / constants.hbar * 1e-18

#: h / e in T nm^2 (CODATA via scipy.constants): 4135.67 T nm^2.
FLUX_QUANTUM_T_NM2 = constants.h / constants.e * 1e18

PAULI = {
    "0": np.eye(2, dtype=complex),
    "x": np.array([[0, 1], [1, 0]], dtype=complex),
    "y": np.array([[0, -1j], [1j, 0]], dtype=complex),
    "z": np.array([[1, 0], [0, -1]], dtype=complex),
}


#: Largest field accepted (T): pulsed laboratory magnets reach about 100 T; beyond 1000 T is a unit slip
#: (common practice, no source).  (A lattice model at flux 0.05 per 1 nm^2 plaquette needs 207 T.)
MAX_FIELD_T = 1000.0


@dataclass(frozen=True)
class MagneticField:
    """A uniform perpendicular magnetic field.

    Parameters
    ----------
    tesla : float
        B_z in T.
    flux_per_cell : float, optional
        The field as flux through one unit cell of the lattice, in flux quanta h/e (the tight-binding
        convention): a plaquette of the square lattice, a hexagon of the honeycomb, two triangles of the
        triangular lattice.  Give this or ``tesla``, not both; :meth:`tesla_on` converts, B = phi (h/e) / A_cell.
    orbital : bool
        Include the Peierls phases.
    zeeman : bool or None
        Include the Zeeman term.  None (default): on for devices with spin
        orbitals, absent otherwise; True on a device without spin orbitals is
        an error (a spinless model has no Zeeman term to add).
    """

    tesla: float = 0.0
    orbital: bool = True
    zeeman: bool | None = None
    flux_per_cell: float | None = None

    def __post_init__(self):
        if self.flux_per_cell is not None:
            phi = self.flux_per_cell
            if not (isinstance(phi, (int, float)) and np.isfinite(phi) and abs(phi) <= 1.0):
                raise PotentialError(f"flux per cell must be a finite number of flux quanta in [-1, 1], got {phi!r}; "
                                     "the spectrum is periodic in it with period 1")
            if self.tesla != 0.0:
                raise PotentialError(f"the field is given twice ({self.tesla:g} T and {phi:g} flux quanta per cell); "
                                     "give tesla or flux_per_cell")
        if not np.isfinite(self.tesla):
            raise PotentialError(f"magnetic field must be finite, got B = {self.tesla} T; give a number in tesla")
        if abs(self.tesla) > MAX_FIELD_T:
            raise PotentialError(f"magnetic field {self.tesla:g} T is beyond +-{MAX_FIELD_T:g} T, more than any "
                                 "laboratory magnet gives; the field is in tesla")


    def tesla_on(self, lattice) -> float:
        """B in T on a lattice: ``tesla``, or ``flux_per_cell * (h/e) / A_cell`` with A_cell = |a1 x a2|."""
        if self.flux_per_cell is None:
            return float(self.tesla)
        area_nm2 = abs(float(np.linalg.det(np.asarray(lattice.vectors, dtype=float))))
        return float(self.flux_per_cell) * FLUX_QUANTUM_T_NM2 / area_nm2


@dataclass(frozen=True)
class Disorder:
    """Anderson disorder: onsite energies uniform in [-width/2, width/2) meV, reproducible from ``seed``.

    Reproducibility guarantee: the value of a site depends only on ``seed``,
    ``width_meV`` and the site's cell ``(n1, n2, b)`` -- not on the device's
    shape, its slicing, the order of the sites or which other sites are
    asked for, and not on the numpy version as long as numpy's ``Philox`` and
    ``SeedSequence`` keep their documented streams.  Explicitly, with
    ``key = np.random.SeedSequence(seed).generate_state(2, np.uint64)``, the
    site ``(n1, n2, b)`` gets ``width_meV * (u - 1/2)`` where ::

        u = np.random.Generator(np.random.Philox(
                key=key, counter=[n1 + 2**63 - 1, n2 + 2**63, b, 0])).random()

    (Philox produces the block of counter + 1 first, hence the ``- 1``; the
    offset ``2**63`` keeps negative cell indices from wrapping.)  The words
    are computed for all sites at once by a compiled Philox4x64-10
    (:func:`uniform_draws`), checked word for word against numpy's: about
    10 ns per site, so a disorder ensemble redraws its potential cheaply.

    Parameters
    ----------
    width_meV : float, meV
        W, the full width of the box distribution (>= 0).
    seed : int
        Whole number >= 0.
    """

    width_meV: float
    seed: int = 0

    def __post_init__(self):
        if not np.isfinite(self.width_meV) or self.width_meV < 0:
            raise PotentialError(
                f"disorder width must be a finite non-negative energy, got {self.width_meV} meV; e.g. width_meV = 1.0"
            )
        if isinstance(self.seed, (bool, np.bool_)) or not isinstance(self.seed, (int, np.integer)) or self.seed < 0:
            raise PotentialError(f"disorder seed must be a whole number >= 0, got {self.seed!r}; e.g. seed = 1")

    def values(self, cells: np.ndarray) -> np.ndarray:
        """Onsite disorder (meV) of the sites with the given cells, an (n, 3) int array of rows ``(n1, n2, b)``."""
        return self.width_meV * (uniform_draws(self.seed, cells) - 0.5)


def uniform_draws(seed: int, cells: np.ndarray) -> np.ndarray:
    """The uniform numbers in [0, 1) of :class:`Disorder` for ``seed`` at the given cells (n, 3), one per cell.

    Evaluates the documented Philox stream of :class:`Disorder` for all cells at once with the compiled
    kernel of :mod:`rgftrans.system._philox` (the first word of the block at counter
    ``(n1 + 2**63, n2 + 2**63, b, 0)``), as ``Generator.random()`` turns a word into a float.  ``cells`` may
    also be the counters of :func:`philox_counters`, computed once for many seeds.
    """
    from rgftrans.system._philox import first_words

    counters = cells if isinstance(cells, tuple) else philox_counters(cells)
    key = np.random.SeedSequence(int(seed)).generate_state(2, np.uint64)
    raw = np.empty(len(counters[0]), dtype=np.uint64)
    first_words(*counters, np.uint64(0), key[0], key[1], raw)
    out = (raw >> np.uint64(11)).astype(np.float64)
    out *= 2.0 ** -53
    return out


def philox_counters(cells: np.ndarray) -> tuple:
    """The first three Philox counter words ``(n1 + 2**63, n2 + 2**63, b)`` of the cells (n, 3), as uint64 arrays."""
    cells = np.asarray(cells, dtype=np.int64).reshape(-1, 3)
    offset = np.uint64(_CELL_OFFSET)
    return (cells[:, 0].view(np.uint64) + offset, cells[:, 1].view(np.uint64) + offset,
            np.ascontiguousarray(cells[:, 2]).view(np.uint64))


#: Added to the cell indices n1, n2 in the Philox counter so negative cells do not wrap (uint64 words).
_CELL_OFFSET = 1 << 63


def gauge_weight(points: np.ndarray, along_x: list[np.ndarray], along_y: list[np.ndarray]) -> np.ndarray:
    """The gauge switch ``f``: 0 near leads running along x, 1 near leads running along y.

    Parameters
    ----------
    points : (n, 2) nm
    along_x, along_y : lists of (k, 2) arrays
        Positions of the cells of leads that run along x (left/right) and
        along y (bottom/top).
    """
    n = len(points)
    if not along_y:
        return np.zeros(n)
    if not along_x:
        return np.ones(n)
    from scipy.spatial import cKDTree

    dx = cKDTree(np.vstack(along_x)).query(points)[0]
    dy = cKDTree(np.vstack(along_y)).query(points)[0]
    return (dy < dx).astype(float)


def peierls_phase(r_from: np.ndarray, r_to: np.ndarray, f_from: np.ndarray, f_to: np.ndarray,
                  tesla: float) -> np.ndarray:
    """Phase (rad) of the hop from ``r_from`` to ``r_to``: ``(e/hbar) int A . dl`` in the switched gauge.

    ``A1 = (-B y, 0)`` integrated along the straight bond gives
    ``-B (y_from + y_to)/2 (x_to - x_from)``; the gauge term adds
    ``chi(r_to) - chi(r_from)`` with ``chi = B x y f``.
    """
    r_from = np.atleast_2d(r_from)
    r_to = np.atleast_2d(r_to)
    landau = -0.5 * (r_from[:, 1] + r_to[:, 1]) * (r_to[:, 0] - r_from[:, 0])
    chi = r_to[:, 0] * r_to[:, 1] * f_to - r_from[:, 0] * r_from[:, 1] * f_from
    return FLUX_PHASE_PER_T_NM2 * tesla * (landau + chi)


def zeeman_matrix(g_factor: float, tesla: float) -> np.ndarray:
    """``(g/2) mu_B B sigma_z`` in meV (2x2)."""
    return 0.5 * g_factor * BOHR_MAGNETON_MEV_PER_T * tesla * PAULI["z"]


def rashba_matrix(alpha_meV_nm: float, bond: np.ndarray, spacing_nm: float) -> np.ndarray:
    """Rashba part of the hop along ``bond`` (nm, from j to i): ``i alpha/(2 a^2) (d_x sigma_y - d_y sigma_x)``.

    Returns (n_bonds, 2, 2) complex, meV.
    """
    bond = np.atleast_2d(bond)
    pref = 1j * alpha_meV_nm / (2 * spacing_nm**2)
    return pref * (bond[:, 0, None, None] * PAULI["y"] - bond[:, 1, None, None] * PAULI["x"])
