"""Bravais lattices with a basis, in nm.

A :class:`Lattice` carries its lattice vectors ``a1, a2``, the positions of the sites
of one unit cell (the basis) and the list of nearest-neighbour bonds, each
written once as ``(sublattice_from, sublattice_to, (n1, n2))``: the bond joins
site ``sublattice_from`` of cell ``R`` to site ``sublattice_to`` of cell
``R + n1 a1 + n2 a2``.  Everything that builds Hamiltonians (devices, leads)
works from these three pieces, so new lattices slot in without touching the
builders.

A site is named by three integers ``(n1, n2, b)``: its cell ``n1 a1 + n2 a2``
and its place ``b`` in the basis.  An ``(n, 3)`` int array of such rows is
called ``cells`` throughout the package (``Lattice.cells_in_box``,
``Lattice.positions(cells)``, ``Disorder.values(cells)``).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from rgftrans.errors import LatticeError

__all__ = ["Lattice", "square", "honeycomb", "triangular"]


@dataclass(frozen=True, eq=False)
class Lattice:
    """A two-dimensional lattice with a basis.

    Parameters
    ----------
    name : str
        Short name, e.g. ``"square"``.
    vectors : (2, 2) float ndarray, nm
        The lattice vectors ``a1, a2`` (primitive: they span one cell) as rows.
    basis : (n_b, 2) float ndarray, nm
        Positions of the sites of one cell, relative to the cell origin.
    bonds : tuple of (int, int, (int, int))
        Nearest-neighbour bonds, each listed once (the reverse is implied).
    coordination : int
        Number of nearest neighbours of a bulk site.
    origin : (2,) float ndarray, nm
        Position of the cell ``(n1, n2) = (0, 0)``.
    onsite_in_t : float
        Onsite energy in units of the hopping: ``coordination`` for the
        effective-mass lattices (band bottom at zero), 0 for honeycomb (Dirac
        point at zero).
    mass_factor : float or None
        ``t = mass_factor * hbar^2 / (2 m* a^2)`` reproduces the effective
        mass at the band bottom (1 on the square, 2/3 on the triangular
        lattice); None where the lattice has no effective-mass meaning.
    """

    name: str
    vectors: np.ndarray
    basis: np.ndarray
    bonds: tuple
    coordination: int
    origin: np.ndarray
    onsite_in_t: float = 0.0
    mass_factor: float | None = None

    def __post_init__(self):
        vecs = np.asarray(self.vectors, dtype=float)
        if vecs.shape != (2, 2) or not np.all(np.isfinite(vecs)):
            raise LatticeError(f"primitive vectors must be a finite 2x2 array in nm, got {self.vectors!r}")
        if np.abs(vecs).max() == 0 or abs(np.linalg.det(vecs)) < 1e-12 * np.abs(vecs).max() ** 2:
            raise LatticeError(f"primitive vectors {vecs.tolist()} nm are parallel; give two independent vectors")
        object.__setattr__(self, "vectors", vecs)
        object.__setattr__(self, "basis", np.atleast_2d(np.asarray(self.basis, dtype=float)))
        object.__setattr__(self, "origin", np.asarray(self.origin, dtype=float).reshape(2))

    @property
    def n_basis(self) -> int:
        return len(self.basis)

    @property
    def spacing(self) -> float:
        """Nearest-neighbour distance in nm."""
        b1, b2, (n1, n2) = self.bonds[0]
        d = self.basis[b2] - self.basis[b1] + n1 * self.vectors[0] + n2 * self.vectors[1]
        return float(np.hypot(*d))

    def positions(self, cells: np.ndarray) -> np.ndarray:
        """Positions in nm of sites given by their cells, an (n, 3) int array of rows ``(n1, n2, b)``."""
        cells = np.asarray(cells, dtype=np.int64).reshape(-1, 3)
        return self.origin + cells[:, :2] @ self.vectors + self.basis[cells[:, 2]]

    def cell_coordinates(self, xy: np.ndarray) -> np.ndarray:
        """Fractional cell coordinates (n1, n2) of points given in nm."""
        return (np.atleast_2d(xy) - self.origin) @ np.linalg.inv(self.vectors)

    def bond_vectors(self) -> np.ndarray:
        """(n_bonds, 2) nm: the vector of each listed bond, from ``b_from`` to ``b_to``."""
        return np.array([self.basis[b2] - self.basis[b1] + n1 * self.vectors[0] + n2 * self.vectors[1]
                         for b1, b2, (n1, n2) in self.bonds])

    def period_along(self, direction) -> tuple[np.ndarray, tuple[int, int]]:
        """Shortest lattice vector parallel to ``direction`` (nm) and its integer coordinates.

        Used for the translation of a lead running in that direction.
        """
        d = np.asarray(direction, dtype=float)
        d = d / np.linalg.norm(d)
        best = None
        for n1 in range(-6, 7):
            for n2 in range(-6, 7):
                if n1 == 0 and n2 == 0:
                    continue
                v = n1 * self.vectors[0] + n2 * self.vectors[1]
                length = np.linalg.norm(v)
                if abs(v @ d - length) < 1e-9 * length and (best is None or length < best[0] - 1e-12):
                    best = (length, v, (n1, n2))
        if best is None:
            raise LatticeError(f"the {self.name} lattice has no short lattice vector along {d.tolist()}; "
                               "leads must run along a lattice direction")
        return best[1], best[2]

    def cells_in_box(self, xmin: float, ymin: float, xmax: float, ymax: float) -> np.ndarray:
        """Cells ``(n1, n2, b)`` of all sites in the box (plus a margin of one cell), as an (n, 3) int array."""
        corners = np.array([[xmin, ymin], [xmin, ymax], [xmax, ymin], [xmax, ymax]])
        frac = self.cell_coordinates(corners)
        lo = np.floor(frac.min(axis=0)).astype(int) - 1
        hi = np.ceil(frac.max(axis=0)).astype(int) + 1
        n1, n2, b = np.meshgrid(
            np.arange(lo[0], hi[0] + 1), np.arange(lo[1], hi[1] + 1), np.arange(self.n_basis), indexing="ij"
        )
        return np.stack([n1.ravel(), n2.ravel(), b.ravel()], axis=1)


def square(a: float, *, origin=(0.0, 0.0)) -> Lattice:
    """Square lattice of spacing ``a`` (nm), one site per cell.

    Examples
    --------
    >>> lat = square(5.0)
    >>> lat.spacing, lat.coordination
    (5.0, 4)
    """
    a = _check_spacing(a)
    return Lattice(
        name="square",
        vectors=np.array([[a, 0.0], [0.0, a]]),
        basis=np.zeros((1, 2)),
        bonds=((0, 0, (1, 0)), (0, 0, (0, 1))),
        coordination=4,
        origin=np.asarray(origin, dtype=float),
        onsite_in_t=4.0,
        mass_factor=1.0,
    )


#: Smallest lattice spacing accepted (nm): below a thousandth of a nanometre no lattice of atoms or grid of a
#: continuum model makes sense; such a value is a unit slip (metres typed as nm).
MIN_SPACING_NM = 1e-3


def _check_spacing(a) -> float:
    try:
        a = float(a)
    except (TypeError, ValueError):
        raise LatticeError(f"lattice spacing must be a number in nm, got {a!r}") from None
    if not np.isfinite(a) or a <= 0:
        raise LatticeError(f"lattice spacing must be positive and finite, got a = {a} nm; use e.g. a = 5 nm")
    if a < MIN_SPACING_NM:
        raise LatticeError(f"lattice spacing {a:g} nm is below {MIN_SPACING_NM:g} nm; lengths are in nm "
                           "(use e.g. a = 5 nm)")
    return a


def honeycomb(a: float, *, origin=(0.0, 0.0)) -> Lattice:
    """Honeycomb lattice with carbon-carbon distance ``a`` (nm); zigzag chains run along x.

    Primitive vectors ``a1 = sqrt(3) a (1, 0)`` and ``a2 = sqrt(3) a (1/2, sqrt(3)/2)``;
    sublattice A at the cell origin, B at ``(0, a)``; three bonds per cell.
    Graphene has ``a = 0.142 nm`` (Castro Neto et al., Rev. Mod. Phys. 81, 109
    (2009), from memory).  Left/right leads are zigzag ribbons, top/bottom
    leads armchair ribbons.

    Examples
    --------
    >>> lat = honeycomb(0.142)
    >>> round(lat.spacing, 6), lat.coordination, lat.n_basis
    (0.142, 3, 2)
    """
    a = _check_spacing(a)
    r3 = np.sqrt(3.0)
    return Lattice(
        name="honeycomb",
        vectors=np.array([[r3 * a, 0.0], [r3 * a / 2, 1.5 * a]]),
        basis=np.array([[0.0, 0.0], [0.0, a]]),
        bonds=((0, 1, (0, 0)), (0, 1, (1, -1)), (0, 1, (0, -1))),
        coordination=3,
        origin=np.asarray(origin, dtype=float),
    )


def triangular(a: float, *, origin=(0.0, 0.0)) -> Lattice:
    """Triangular lattice of spacing ``a`` (nm), six nearest neighbours.

    Examples
    --------
    >>> lat = triangular(2.0)
    >>> lat.spacing, lat.coordination
    (2.0, 6)
    """
    a = _check_spacing(a)
    return Lattice(
        name="triangular",
        vectors=np.array([[a, 0.0], [a / 2, np.sqrt(3.0) * a / 2]]),
        basis=np.zeros((1, 2)),
        bonds=((0, 0, (1, 0)), (0, 0, (0, 1)), (0, 0, (-1, 1))),
        coordination=6,
        origin=np.asarray(origin, dtype=float),
        onsite_in_t=6.0,
        # E(k) = 2t [3 - sum_bonds cos(k.d)] ~ (3/2) t a^2 k^2, so t = (2/3) hbar^2/(2 m* a^2).
        mass_factor=2.0 / 3.0,
    )
