"""Devices: a declarative description, and its discretisation on a lattice.

A :class:`Device` says *what* the device is -- a region in nm, a lattice, a
material, an onsite potential energy and the leads.  :func:`discretise` turns
it into a :class:`TightBindingModel`: the sparse device Hamiltonian (meV), the
site positions (nm) and, for every lead, its cell Hamiltonian ``h_cell``, its
outward hopping ``h_hop`` and its coupling to the device's interface sites.

Effective-mass discretisation (common practice, no source): the hopping is
``t = hbar^2 / (2 m* a^2)`` and the onsite term ``z t`` (``z`` the coordination
number, 4 on the square lattice), which puts the band bottom at zero energy;
the potential energy ``U(x, y)`` (meV) is added on top.
"""

from __future__ import annotations

import warnings
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from dataclasses import field as dc_field

import numpy as np
import scipy.sparse as sp
from scipy.sparse.csgraph import connected_components

from rgftrans.system.budget import device_size, refuse_oversized_device
from rgftrans.errors import GeometryError, LatticeError, LeadError, PotentialError, ResolutionWarning, ValidityWarning
from rgftrans.system.fields import Disorder, MagneticField, gauge_weight, peierls_phase, rashba_matrix, zeeman_matrix
from rgftrans.system.geometry import Region
from rgftrans.system.lattices import Lattice, square
from rgftrans.system.materials import Material, hopping_meV, material as lookup_material

__all__ = ["Lead", "Device", "LeadModel", "TightBindingModel", "ModelCache", "discretise", "check_resolution", "lead_index"]

_SIDES = {"left": (-1, 0), "right": (1, 0), "bottom": (0, -1), "top": (0, 1)}
#: Positions closer than this fraction of the lattice spacing count as equal.
_POSITION_TOL = 1e-6


@dataclass(frozen=True)
class Lead:
    """A semi-infinite lead attached to one side of the device.

    Parameters
    ----------
    name : str
        Label used in results (e.g. ``"source"``).
    side : {"left", "right", "bottom", "top"}
        Side of the device the lead leaves from; the lead runs to infinity in
        that direction.
    span : (float, float), nm
        Interval of the cross-section along that side: the y range for a left
        or right lead, the x range for a bottom or top lead.  Every lattice row
        (column) inside the interval belongs to the lead.
    potential : float, meV
        Constant potential energy of the lead (band offset), default 0.
    """

    name: str
    side: str
    span: tuple[float, float]
    potential: float = 0.0

    def __post_init__(self):
        if self.side not in _SIDES:
            raise LeadError(f"lead '{self.name}': side {self.side!r} is not one of {sorted(_SIDES)}")
        try:
            lo, hi = (float(v) for v in self.span)
        except (TypeError, ValueError):
            raise LeadError(f"lead '{self.name}': span {self.span!r} must be two numbers (lo, hi) in nm") from None
        if not (np.isfinite(lo) and np.isfinite(hi)) or hi < lo:
            raise LeadError(f"lead '{self.name}': span {self.span!r} nm must be two finite numbers (lo, hi) with lo <= hi")
        if not np.isfinite(self.potential):
            raise LeadError(f"lead '{self.name}': potential {self.potential!r} meV is not finite; give a number")
        if abs(self.potential) > MAX_POTENTIAL_MEV:
            raise LeadError(f"lead '{self.name}': potential {self.potential:g} meV is beyond +-{MAX_POTENTIAL_MEV:g} "
                            "meV, implausible; it is in meV")
        object.__setattr__(self, "span", (lo, hi))


@dataclass(frozen=True, eq=False)
class LeadModel:
    """A discretised lead.

    Attributes
    ----------
    name : str
    h_cell : (m, m) complex ndarray, meV
        Hamiltonian of one lead cell.
    h_hop : (m, m) complex ndarray, meV
        Hopping ``<j|H|j+1>`` from a cell to the next one away from the device.
    interface : (k,) int ndarray
        Indices of the device sites that couple to cell 0.
    coupling : (k, m) complex ndarray, meV
        ``<interface|H|cell 0>``.
    cell_positions : (m, 2) float ndarray, nm
        Positions of the sites of cell 0.
    period : (2,) float ndarray, nm
        Translation from cell j to cell j + 1.
    """

    name: str
    h_cell: np.ndarray
    h_hop: np.ndarray
    interface: np.ndarray
    coupling: np.ndarray
    cell_positions: np.ndarray
    period: np.ndarray


class ModelCache:
    """What is derived once from a :class:`TightBindingModel` and reused by every call on it.

    Attributes
    ----------
    layer_blocks : LayerBlocks or None
        The default slicing of the model cut into dense layer blocks (:func:`rgftrans.transport.rgf.layer_blocks`).
    spectral_bounds : (float, float) or None
        An interval holding the spectrum, meV (:func:`rgftrans.system.inputs.spectral_bounds`).
    slicing : Slicing or None
        The default RGF slicing alone (:func:`rgftrans.transport.slicing.default_slicing`): what the solver
        choice needs, without cutting the layer blocks.
    dissection : DissectionPlan or None
        The nested-dissection tree with this model's matrix values (:func:`rgftrans.transport.dissection.dissection_plan`).
    """

    __slots__ = ("layer_blocks", "spectral_bounds", "slicing", "dissection")

    def __init__(self):
        self.layer_blocks = None
        self.spectral_bounds = None
        self.slicing = None
        self.dissection = None


@dataclass(frozen=True, eq=False)
class TightBindingModel:
    """A device Hamiltonian with its leads, ready for transport.

    Attributes
    ----------
    hamiltonian : (n, n) scipy.sparse.csr_matrix, complex, meV
    positions : (n, 2) float ndarray, nm
    leads : tuple of LeadModel
    energy_scale : float, meV
        Typical hopping, for relative tolerances (the hopping ``t``).
    coordination : int or None
        Neighbours of a bulk site, if the model comes from a lattice; used to
        refuse leads attached to interior sites.
    spacing_nm : float or None
        Lattice spacing of a model that discretises a continuum effective-mass
        material (band bottom at zero, hopping from the material), for the
        resolution check of :func:`check_resolution`; None for lattice models
        with a given hopping.
    norbs : int
        Orbitals per site (2 with spin).  Hamiltonian rows are orbitals,
        ``site * norbs + orbital``; ``positions`` has one row per site, and
        lead interfaces and couplings are in orbitals.
    spin_degeneracy : {1, 2}
        How many spin copies each channel of the model stands for: 2 for a
        spinless model (every channel carries both spins, G = (2e^2/h) T),
        1 when the spin is explicit in the orbitals (T counts both spins,
        G = (e^2/h) T).  Default: 2 if ``norbs == 1``, else 1.
    potential_meV : (n_sites,) float ndarray or None
        The potential energy U(x, y) of each site (meV) as the device gave it,
        without the band offset, disorder or Zeeman term; None for models built
        by hand.  Used for diagnostics (dot area, lead-interface steps) and maps.

    Models built by hand are validated on creation: matrix shapes, Hermitian
    Hamiltonians, interface indices in range and on the device's boundary.
    """

    hamiltonian: sp.csr_matrix
    positions: np.ndarray
    leads: tuple
    energy_scale: float = 1.0
    coordination: int | None = None
    norbs: int = 1
    spacing_nm: float | None = None
    spin_degeneracy: int | None = None
    potential_meV: np.ndarray | None = None
    #: Work derived from this model and reused by every call on it (layer slicing and blocks, spectral bounds).
    #: Not an input: ``dataclasses.replace`` gives the new model an empty cache of its own.
    cache: "ModelCache" = dc_field(default_factory=lambda: ModelCache(), init=False, repr=False, compare=False)

    def __post_init__(self):
        if self.spin_degeneracy is None:
            object.__setattr__(self, "spin_degeneracy", 2 if self.norbs == 1 else 1)
        if self.spin_degeneracy not in (1, 2):
            raise GeometryError(
                f"spin_degeneracy must be 1 (explicit spin orbitals) or 2 (spinless model), got "
                f"{self.spin_degeneracy!r}"
            )
        ham = sp.csr_matrix(self.hamiltonian, dtype=complex)
        object.__setattr__(self, "hamiltonian", ham)
        object.__setattr__(self, "positions", np.asarray(self.positions, dtype=float).reshape(-1, 2))
        if self.potential_meV is not None:
            u = np.asarray(self.potential_meV, dtype=float)
            if u.shape != (len(self.positions),):
                raise PotentialError(f"potential_meV has shape {u.shape}; give one value per site "
                                     f"({len(self.positions)})")
            object.__setattr__(self, "potential_meV", u)
        n = ham.shape[0]
        if ham.shape != (n, n) or n == 0:
            raise GeometryError(f"the Hamiltonian must be a non-empty square matrix, got shape {ham.shape}")
        if n != len(self.positions) * self.norbs:
            raise GeometryError(
                f"the Hamiltonian has {n} rows but {len(self.positions)} site positions x {self.norbs} orbitals; "
                "give one position per site"
            )
        if not np.all(np.isfinite(ham.data)):
            raise PotentialError("the Hamiltonian contains NaN or infinite entries; check the potential and hoppings")
        scale = 1e-10 * max(1.0, abs(ham).max())
        diag = ham.diagonal()
        if abs(ham - ham.conj().T - sp.diags(2j * diag.imag)).max() > scale:
            raise GeometryError("the device Hamiltonian is not Hermitian; check the hoppings (each bond needs its conjugate)")
        if np.any(diag.imag > scale):
            raise PotentialError("an onsite energy has a positive imaginary part (gain); absorption needs Im <= 0")
        coo = ham.tocoo()
        off = coo.row // self.norbs != coo.col // self.norbs
        bonds = np.unique(np.column_stack([coo.row[off] // self.norbs, coo.col[off] // self.norbs]), axis=0)
        degree = np.bincount(bonds[:, 0], minlength=len(self.positions)) if len(bonds) else np.zeros(len(self.positions), int)
        for lead in self.leads:
            _validate_lead(lead, n, degree, self.coordination, self.norbs)

    @property
    def is_lossy(self) -> bool:
        """Whether some onsite energy has a negative imaginary part (absorption; H is then not Hermitian)."""
        return bool(np.any(self.hamiltonian.diagonal().imag < 0))

    @property
    def n_sites(self) -> int:
        """Number of sites (positions)."""
        return len(self.positions)

    @property
    def n_orbitals(self) -> int:
        """Size of the Hamiltonian: sites times orbitals per site."""
        return self.hamiltonian.shape[0]

    def orbital_positions(self) -> np.ndarray:
        """(n_orbitals, 2) nm: the position of every Hamiltonian row."""
        return np.repeat(self.positions, self.norbs, axis=0)

    def per_site(self, values: np.ndarray) -> np.ndarray:
        """Sum an orbital-resolved array (first axis n_orbitals) over the orbitals of each site."""
        values = np.asarray(values)
        return values.reshape(self.n_sites, self.norbs, *values.shape[1:]).sum(axis=1)

    def lead_index(self, lead: int | str) -> int:
        """Position of a lead given by name or index; one-line LeadError for anything else."""
        return lead_index([lead.name for lead in self.leads], lead)

    def lead(self, name: int | str) -> LeadModel:
        """The lead given by name or index."""
        return self.leads[self.lead_index(name)]


def lead_index(names, lead, *, noun: str = "lead", owner: str = "the model", role: str | None = None) -> int:
    """Position of ``lead`` (a name, or an index) among ``names``, or a one-line LeadError saying what there is.

    The one lookup behind every place a lead is named: models, local quantities, scattering matrices,
    waveguide ports, result files and figures.  ``noun`` ("port"), ``owner`` ("the waveguide") and ``role``
    (the keyword the caller was given, e.g. "source") change only the message; a misspelt name gets the
    nearest one suggested.
    """
    import difflib

    names = list(names)
    said = f"{role}={lead!r}: " if role else ""
    listing = f"{owner} has {names}"
    if isinstance(lead, str):
        if lead in names:
            return names.index(lead)
        close = difflib.get_close_matches(lead, names, n=1)
        hint = f"did you mean {close[0]!r}? " if close else ""
        raise LeadError(f"{said}no {noun} named {lead!r}; {hint}{listing} (names or indices 0..{len(names) - 1})")
    if isinstance(lead, (bool, np.bool_)) or not isinstance(lead, (int, np.integer)):
        raise LeadError(f"{said}a {noun} is given by name or index, got {lead!r}; {listing}")
    if not 0 <= int(lead) < len(names):
        raise LeadError(f"{said}{noun} index {lead} is out of range; {listing} (indices 0..{len(names) - 1})")
    return int(lead)


#: Fewest lattice sites per wavelength before a warning.  At 10 sites per
#: wavelength ka = 0.63 and the lattice dispersion 2t(1 - cos ka) falls short of
#: the effective-mass parabola t (ka)^2 by (ka)^2/12 = 3.3 %; coarser grids
#: shift levels and thresholds visibly (common practice, no source).
MIN_SITES_PER_WAVELENGTH = 10.0


def check_resolution(model: "TightBindingModel", energies) -> None:
    """Warn (ResolutionWarning) if the lattice is too coarse for the highest energy.

    Only for effective-mass models (band bottom at zero): the wavelength at
    energy E above the band bottom is ``2 pi a sqrt(t / E)``.
    """
    if model.spacing_nm is None:
        return
    e_max = float(np.max(energies))
    if e_max <= 0:
        return
    sites = 2 * np.pi * np.sqrt(model.energy_scale / e_max)
    if sites < MIN_SITES_PER_WAVELENGTH:
        warnings.warn(
            f"the lattice is too coarse for E = {e_max:.4g} meV: the wavelength there is {sites:.1f} sites "
            f"({sites * model.spacing_nm:.3g} nm at a = {model.spacing_nm:.3g} nm), fewer than "
            f"{MIN_SITES_PER_WAVELENGTH:.0f}; levels and thresholds will be shifted -- use a spacing of at most "
            f"{sites * model.spacing_nm / MIN_SITES_PER_WAVELENGTH:.3g} nm",
            ResolutionWarning,
            stacklevel=3,
        )


def _validate_lead(lead: LeadModel, n_sites: int, degree: np.ndarray, coordination: int | None,
                   norbs: int = 1) -> None:
    m = np.shape(lead.h_cell)[0] if np.ndim(lead.h_cell) == 2 else -1
    if np.shape(lead.h_cell) != (m, m) or np.shape(lead.h_hop) != (m, m):
        raise LeadError(
            f"lead '{lead.name}': h_cell {np.shape(lead.h_cell)} and h_hop {np.shape(lead.h_hop)} must be square and "
            "of the same size (sites per lead cell)"
        )
    if np.abs(np.asarray(lead.h_cell) - np.asarray(lead.h_cell).conj().T).max() > 1e-10 * max(1.0, np.abs(lead.h_cell).max()):
        raise LeadError(f"lead '{lead.name}': h_cell is not Hermitian; fix the lead cell Hamiltonian")
    iface = np.asarray(lead.interface)
    if iface.ndim != 1 or iface.size == 0 or iface.min() < 0 or iface.max() >= n_sites or len(np.unique(iface)) != iface.size:
        raise LeadError(
            f"lead '{lead.name}': interface {iface.tolist()} must list distinct device sites 0..{n_sites - 1}"
        )
    if np.shape(lead.coupling) != (iface.size, m):
        raise LeadError(
            f"lead '{lead.name}': coupling has shape {np.shape(lead.coupling)}, expected ({iface.size}, {m}) "
            "= (interface sites, lead cell sites)"
        )
    if coordination is not None:
        sites = np.unique(iface // norbs)
        inner = sites[degree[sites] >= coordination]
        if inner.size:
            raise LeadError(
                f"lead '{lead.name}' is attached to interior site(s) {inner[:5].tolist()} that already have all "
                f"{coordination} neighbours inside the device; attach leads on the device's edge"
            )


PotentialLike = float | Callable[[np.ndarray, np.ndarray], np.ndarray] | None


@dataclass(frozen=True, eq=False)
class Device:
    """Declarative description of a two-dimensional device.

    Parameters
    ----------
    region : Region
        Where the device is, in nm.
    leads : sequence of Lead
    lattice : Lattice, optional
        Default: square lattice with ``a = 5 nm``.
    material : str or Material
        Sets the effective mass (hence the hopping) and the g-factor.  Default GaAs.
    potential : float or callable, meV
        Potential energy ``U(x, y)``; a callable receives arrays of x and y in
        nm and returns meV (e.g. :meth:`rgftrans.electrostatics.gates.GateLayout.potential_energy_meV`).
    hopping : float, meV, optional
        Overrides ``t = hbar^2/(2 m* a^2)`` (e.g. ``1.0`` for tight-binding
        units).  Required on the honeycomb lattice.
    field : float or MagneticField or None
        Perpendicular magnetic field (T), orbital (Peierls) and, on spinful
        devices, Zeeman.  None means no field (0 T).
    spin : bool
        Two orbitals (spin up, down along z) per site.
    rashba : float, meV nm
        Rashba spin-orbit strength alpha (needs ``spin=True``).
    disorder : Disorder, optional
        Anderson disorder inside the device (not in the leads).
    energy_origin : {"band_bottom", "band_centre"}
        Where energy zero lies: at the bottom of the clean lattice's band (the onsite term ``z t`` of the
        effective-mass discretisation; energies then compare with E = hbar^2 k^2 / 2m*), or at its centre (no
        onsite term; the tight-binding convention).  Tight-binding units: ``hopping=1.0``,
        ``energy_origin="band_centre"``, a lattice of spacing 1 (lengths in lattice constants) and the field
        as ``MagneticField(flux_per_cell=...)``; every energy (labelled meV) is then in units of t.
    """

    region: Region
    leads: Sequence[Lead]
    lattice: Lattice = dc_field(default_factory=lambda: square(5.0))
    material: str | Material = "GaAs"
    potential: PotentialLike = 0.0
    hopping: float | None = None
    field: float | MagneticField = 0.0
    spin: bool = False
    rashba: float = 0.0
    disorder: Disorder | None = None
    energy_origin: str = "band_bottom"

    def __post_init__(self):
        if self.energy_origin not in ENERGY_ORIGINS:
            raise PotentialError(f"energy_origin must be one of {', '.join(map(repr, ENERGY_ORIGINS))}, got "
                                 f"{self.energy_origin!r}")
        if not isinstance(self.region, Region):
            raise GeometryError(f"region must be a Region (rectangle(...), disk(...), polygon(...) in nm), got "
                                f"{type(self.region).__name__}")
        if isinstance(self.leads, (str, bytes)) or not all(isinstance(lead, Lead) for lead in self.leads):
            raise LeadError("leads must be a list of Lead(name, side, span) objects, got "
                            f"{[type(lead).__name__ for lead in self.leads][:4] if not isinstance(self.leads, (str, bytes)) else type(self.leads).__name__}")
        if not isinstance(self.lattice, Lattice):
            raise LatticeError(f"lattice must be a Lattice (square(a_nm), honeycomb(...), ...), got "
                               f"{type(self.lattice).__name__}")
        if self.field is None:  # no field
            object.__setattr__(self, "field", 0.0)
        if not isinstance(self.field, (MagneticField, int, float, np.integer, np.floating)) or isinstance(
                self.field, (bool, np.bool_)):
            raise PotentialError(f"field must be a number of tesla or a MagneticField(...), got {self.field!r}; "
                                 "e.g. field=0.5 or field=MagneticField(flux_per_cell=0.05)")

    def discretise(self) -> "TightBindingModel":
        """Return the tight-binding model of this device (see :func:`discretise`)."""
        return discretise(self)

    @property
    def material_data(self) -> Material:
        return self.material if isinstance(self.material, Material) else lookup_material(self.material)

    @property
    def magnetic_field(self) -> MagneticField:
        return self.field if isinstance(self.field, MagneticField) else MagneticField(float(self.field))

    @property
    def t(self) -> float:
        """Nearest-neighbour hopping (meV)."""
        if self.hopping is not None:
            t = float(self.hopping)
            if not np.isfinite(t) or t <= 0:
                raise PotentialError(f"hopping must be a positive finite energy, got {self.hopping!r} meV")
            if not HOPPING_RANGE_MEV[0] <= t <= HOPPING_RANGE_MEV[1]:
                raise PotentialError(f"hopping {t:g} meV is outside {HOPPING_RANGE_MEV[0]:g}..{HOPPING_RANGE_MEV[1]:g} "
                                     "meV, implausible; it is in meV (e.g. 2700 for graphene)")
            return t
        if self.lattice.mass_factor is None:
            raise LatticeError(
                f"the {self.lattice.name} lattice has no effective-mass hopping; give hopping= in meV "
                "(e.g. 2700 for graphene)"
            )
        return self.lattice.mass_factor * hopping_meV(self.material_data.m_eff, self.lattice.spacing)


class _CellIndex:
    """Vectorised lookup of sites by their cells (n1, n2, b) -> row index (or -1)."""

    _OFF = 1 << 20

    def __init__(self, cells: np.ndarray):
        self.keys = self._encode(cells)
        self.order = np.argsort(self.keys, kind="stable")
        self.sorted = self.keys[self.order]

    @classmethod
    def _encode(cls, cells: np.ndarray) -> np.ndarray:
        cells = np.asarray(cells, dtype=np.int64).reshape(-1, 3)
        return (((cells[:, 0] + cls._OFF) << 21) + (cells[:, 1] + cls._OFF)) * 16 + cells[:, 2]

    def find(self, cells: np.ndarray) -> np.ndarray:
        keys = self._encode(cells)
        if len(self.sorted) == 0:
            return np.full(len(keys), -1)
        pos = np.minimum(np.searchsorted(self.sorted, keys), len(self.sorted) - 1)
        return np.where(self.sorted[pos] == keys, self.order[pos], -1)


def _bond_pairs(lattice: Lattice, cells_a: np.ndarray, index_b: _CellIndex):
    """All (i, j) with site i of set A bonded to site j of set B (both directions)."""
    rows, cols = [], []
    for b_from, b_to, (n1, n2) in lattice.bonds:
        for sign, (src, dst) in ((1, (b_from, b_to)), (-1, (b_to, b_from))):
            sel = np.flatnonzero(cells_a[:, 2] == src)
            if sel.size == 0:
                continue
            target = cells_a[sel].copy()
            target[:, 0] += sign * n1
            target[:, 1] += sign * n2
            target[:, 2] = dst
            j = index_b.find(target)
            ok = j >= 0
            rows.append(sel[ok])
            cols.append(j[ok])
    if not rows:
        return np.zeros(0, int), np.zeros(0, int)
    return np.concatenate(rows), np.concatenate(cols)


def _evaluate_potential(potential: PotentialLike, xy: np.ndarray) -> np.ndarray:
    if potential is None:
        values = np.zeros(len(xy))
    elif callable(potential):
        values = np.asarray(potential(xy[:, 0], xy[:, 1]), dtype=float)
        values = np.broadcast_to(values, (len(xy),)).astype(float) if values.ndim == 0 else values
        if values.shape != (len(xy),):
            raise PotentialError(
                f"potential function returned shape {values.shape} for {len(xy)} sites; "
                "it must return one value (meV) per (x, y) point"
            )
    else:
        try:
            values = np.full(len(xy), float(potential))
        except (TypeError, ValueError):
            raise PotentialError(f"potential must be a number (meV) or a function U(x, y), got {potential!r}") from None
    bad = ~np.isfinite(values)
    if np.any(bad):
        x, y = xy[np.flatnonzero(bad)[0]]
        raise PotentialError(
            f"potential energy is NaN or infinite at {np.count_nonzero(bad)} site(s), first at "
            f"(x, y) = ({x:.3g}, {y:.3g}) nm; make the potential finite everywhere in the region"
        )
    huge = np.abs(values) > MAX_POTENTIAL_MEV
    if np.any(huge):
        k = np.flatnonzero(huge)[0]
        raise PotentialError(
            f"potential energy {values[k]:.3g} meV at (x, y) = ({xy[k, 0]:.3g}, {xy[k, 1]:.3g}) nm is beyond "
            f"+-{MAX_POTENTIAL_MEV:g} meV, implausible in a device; potentials are in meV"
        )
    return values


#: Largest potential energy accepted (meV): 10 eV is past every band offset and gate potential of a
#: semiconductor or graphene device; a larger value is a unit slip (common practice, no source).
MAX_POTENTIAL_MEV = 1e4
#: Hoppings accepted (meV): graphene's 2.7 eV is the largest in use, and below a microelectronvolt no
#: band is worth the name (common practice, no source).
HOPPING_RANGE_MEV = (1e-3, 1e5)
#: Where energy zero lies: the clean band's bottom (effective-mass convention) or its centre (tight binding).
ENERGY_ORIGINS = ("band_bottom", "band_centre")


class _Terms:
    """Matrix elements of one device: hopping blocks and onsite blocks (meV)."""

    def __init__(self, device: Device):
        self.lattice = device.lattice
        self.t = device.t
        # The onsite z t of the effective-mass discretisation puts energy zero at the clean band's bottom.
        self.band_offset = device.lattice.onsite_in_t * self.t if device.energy_origin == "band_bottom" else 0.0
        self.norbs = 2 if device.spin else 1
        field_ = device.magnetic_field
        tesla = field_.tesla_on(device.lattice)
        self.tesla = tesla if field_.orbital else 0.0
        self.rashba = float(device.rashba)
        if not np.isfinite(self.rashba):
            raise PotentialError(f"Rashba strength must be finite, got {device.rashba!r} meV nm")
        if self.rashba != 0.0 and not device.spin:
            raise PotentialError(
                f"a Rashba strength of {self.rashba} meV nm needs spinful sites; set spin=True on the device"
            )
        if field_.zeeman and not device.spin:
            raise PotentialError(
                "a Zeeman term was requested (zeeman=True) on a device without spin orbitals, where it would do "
                "nothing; set spin=True on the device, or leave zeeman at None"
            )
        self.zeeman = None
        if device.spin and field_.zeeman is not False and tesla != 0.0:
            self.zeeman = zeeman_matrix(device.material_data.g_factor, tesla)

    def onsite(self, scalar: np.ndarray) -> np.ndarray:
        """(n, norbs, norbs) onsite blocks from scalar onsite energies."""
        blocks = scalar[:, None, None] * np.eye(self.norbs)
        if self.zeeman is not None:
            blocks = blocks + self.zeeman
        return blocks

    def hop(self, r_row, r_col, f_row, f_col) -> np.ndarray:
        """(n, norbs, norbs) blocks <row|H|col> of bonds, with Peierls phase and Rashba term."""
        n = len(r_row)
        blocks = np.broadcast_to(-self.t * np.eye(self.norbs, dtype=complex), (n, self.norbs, self.norbs)).copy()
        if self.rashba:
            blocks += rashba_matrix(self.rashba, r_col - r_row, self.lattice.spacing)
        if self.tesla:
            blocks *= np.exp(1j * peierls_phase(r_col, r_row, f_col, f_row, self.tesla))[:, None, None]
        return blocks

    def expand(self, rows, cols, blocks, shape) -> sp.csr_matrix:
        """Sparse orbital matrix from site-level blocks."""
        no = self.norbs
        o = np.arange(no)
        r = (rows[:, None, None] * no + o[None, :, None]).repeat(no, axis=2)
        c = (cols[:, None, None] * no + o[None, None, :]).repeat(no, axis=1)
        return sp.coo_matrix((blocks.ravel(), (r.ravel(), c.ravel())), shape=(shape[0] * no, shape[1] * no)).tocsr()

    def dense(self, rows, cols, blocks, shape) -> np.ndarray:
        return self.expand(rows, cols, blocks, shape).toarray()

    def orbitals(self, sites: np.ndarray) -> np.ndarray:
        return (np.asarray(sites)[:, None] * self.norbs + np.arange(self.norbs)).ravel()


@dataclass
class _LeadGeometry:
    lead: Lead
    cell_sites: np.ndarray      # cells (n1, n2, b) of the sites of lead cell 0
    shift: np.ndarray           # cell shift from lead cell j to j+1 (n1, n2, 0)
    period: np.ndarray          # nm
    along_x: bool

    def cell(self, j: int) -> np.ndarray:
        return self.cell_sites + j * self.shift


def discretise(device: Device) -> TightBindingModel:
    """Discretise a :class:`Device` into a :class:`TightBindingModel`.

    Sites are the lattice points inside the region (boundary included).  A
    lead's cell 0 is the slab of lattice sites, one lead period thick, just
    outside the device's edge within the lead's span.

    Raises
    ------
    GeometryError
        Empty region, or a region that falls apart into disconnected pieces.
    LeadError
        A lead that misses the device, is wider than the side it sits on,
        meets a ragged edge, runs alongside the device, or overlaps another lead.
    PotentialError
        A NaN or infinite potential energy, or spin-orbit without spin.
    """
    lattice = device.lattice
    terms = _Terms(device)
    t = terms.t
    refuse_oversized_device(estimate_size(device))
    cells, xy, index, rows, cols = _sites(device)
    geoms = _lead_geometries(device, cells, xy, index)
    n = len(cells)
    potential = _evaluate_potential(device.potential, xy)
    scalar_onsite = terms.band_offset + potential
    if device.disorder is not None:
        scalar_onsite = scalar_onsite + device.disorder.values(cells)

    # Gauge switch f: 0 on leads along x, 1 on leads along y (see rgftrans.system.fields).
    cells_x = [lattice.positions(np.vstack([g.cell(j) for j in range(3)])) for g in geoms if g.along_x]
    cells_y = [lattice.positions(np.vstack([g.cell(j) for j in range(3)])) for g in geoms if not g.along_x]
    f_dev = gauge_weight(xy, cells_x, cells_y) if terms.tesla else np.zeros(n)

    ham = terms.expand(rows, cols, terms.hop(xy[rows], xy[cols], f_dev[rows], f_dev[cols]), (n, n))
    ham = ham + terms.expand(np.arange(n), np.arange(n), terms.onsite(scalar_onsite), (n, n))
    leads = [_lead_model(geo, terms, lattice, xy, f_dev, index) for geo in geoms]
    if device.hopping is None:  # continuum models: a lattice model's steps are the user's intent
        _warn_lead_steps(device.leads, leads, potential, terms.norbs, xy)
    return TightBindingModel(hamiltonian=ham.tocsr(), positions=xy, leads=tuple(leads), energy_scale=t,
                             coordination=lattice.coordination, norbs=terms.norbs,
                             spacing_nm=(lattice.spacing if device.hopping is None
                                         and device.energy_origin == "band_bottom" else None),
                             potential_meV=potential)


def estimate_size(device: Device):
    """Sites, layer widths, memory and time of a device from its area alone (see :mod:`rgftrans.system.budget`)."""
    norbs = 2 if device.spin else 1
    return device_size(device.region, device.lattice, [lead.side for lead in device.leads], norbs)


def check_geometry(device: Device) -> int:
    """Check the region and every lead without building the Hamiltonian; return the number of sites.

    The cheap part of :func:`discretise` (lattice fill, connectivity, lead
    placement): a sweep checks every geometry it will visit with it before
    computing anything.  Raises what :func:`discretise` raises for geometry.
    """
    refuse_oversized_device(estimate_size(device))
    cells, xy, index, _, _ = _sites(device)
    _lead_geometries(device, cells, xy, index)
    return len(cells)


def _sites(device: Device):
    """Lattice sites of the region (cells, positions, index) and their bonds; one connected piece."""
    lattice = device.lattice
    region = device.region
    all_cells = lattice.cells_in_box(*region.bounds)
    xy_all = lattice.positions(all_cells)
    inside = region.contains(xy_all)
    cells = all_cells[inside]
    xy = xy_all[inside]
    if len(cells) == 0:
        xmin, ymin, xmax, ymax = region.bounds
        raise GeometryError(
            f"the region ({xmax - xmin:.3g} x {ymax - ymin:.3g} nm) holds no lattice site at spacing "
            f"a = {lattice.spacing:.3g} nm; enlarge the region or refine the lattice (lengths are in nm)"
        )
    index = _CellIndex(cells)
    rows, cols = _bond_pairs(lattice, cells, index)
    n = len(cells)
    pattern = sp.coo_matrix((np.ones(len(rows), bool), (rows, cols)), shape=(n, n)).tocsr()
    n_pieces, labels = connected_components(pattern, directed=False)
    if n_pieces > 1:
        sizes = np.bincount(labels)
        small = np.argmin(sizes)
        x, y = xy[np.flatnonzero(labels == small)[0]]
        raise GeometryError(
            f"the region discretises into {n_pieces} disconnected pieces (sizes {sorted(sizes.tolist(), reverse=True)} "
            f"sites; the smallest near (x, y) = ({x:.3g}, {y:.3g}) nm); join them or remove the stray parts"
        )
    if device.hopping is None and n < FEW_SITES:
        warnings.warn(
            f"the device has {n} site(s) at spacing a = {lattice.spacing:.3g} nm: are the lengths in nm? A "
            "continuum model needs many sites per Fermi wavelength", ValidityWarning, stacklevel=4)
    return cells, xy, index, rows, cols


#: Fewer sites than this in a continuum (effective-mass) device earn a warning: a real dot or wire
#: discretised at a few nm has hundreds of sites; a handful means lengths typed in the wrong unit.
FEW_SITES = 10


def _lead_geometries(device: Device, cells, xy, index) -> list:
    """Where each lead attaches; one-line LeadErrors for leads that miss, overlap or run alongside the device."""
    lattice = device.lattice
    if not device.leads:
        raise LeadError("the device has no leads; add at least one Lead")
    names = [lead.name for lead in device.leads]
    dup = {nm for nm in names if names.count(nm) > 1}
    if dup:
        raise LeadError(f"lead names must be unique, {sorted(dup)} appear more than once; rename them")
    bounds = np.array(device.region.bounds)
    extent = max(bounds[2] - bounds[0], bounds[3] - bounds[1], np.ptp(xy[:, 0]), np.ptp(xy[:, 1]))
    geoms = [_lead_geometry(lead, lattice, cells, xy, index) for lead in device.leads]
    deep_sites = []
    for geo in geoms:
        period_len = np.linalg.norm(geo.period)
        depth = int(np.ceil(extent / period_len)) + 3
        deep = np.vstack([geo.cell(j) for j in range(depth)])
        _check_lead_clear(geo, lattice, deep, index, len(geo.cell_sites))
        deep_sites.append(deep)
    _check_leads_apart(device.leads, lattice, deep_sites)
    return geoms


#: Largest potential-energy step (meV) between a lead and the device sites it touches before a warning.
#: A lead is a uniform semi-infinite strip; a gate potential that has not decayed at the device's edge meets
#: it as a step and reflects electrons that the real, smoothly continuing 2DEG would let through.  A step of
#: 2 meV reflects |r|^2 = ((k - k')/(k + k'))^2 = 1.1 % of a plane wave at E_F = 7 meV (GaAs at 2e11 cm^-2;
#: abrupt step, textbook plane-wave matching, common practice, no source) -- small against a measured
#: conductance, and growing fast with the step.
LEAD_STEP_WARN_MEV = 2.0


def _warn_lead_steps(specs, leads, potential, norbs, xy) -> None:
    """ValidityWarning where the potential at a lead's interface differs from the lead's own by a step."""
    for spec, lead in zip(specs, leads):
        sites = np.unique(np.asarray(lead.interface) // norbs)
        step = potential[sites] - spec.potential
        worst = int(np.argmax(np.abs(step)))
        if abs(step[worst]) > LEAD_STEP_WARN_MEV:
            x, y = xy[sites[worst]]
            warnings.warn(
                f"lead '{spec.name}': the device potential at its interface differs from the lead's by up to "
                f"{step[worst]:+.3g} meV (at x, y = {x:.4g}, {y:.4g} nm), more than {LEAD_STEP_WARN_MEV:g} meV; the "
                "step reflects electrons spuriously -- extend the device until gate potentials have decayed, or "
                "set the lead's potential offset to the edge potential",
                ValidityWarning, stacklevel=4,
            )


def _lead_geometry(lead: Lead, lattice: Lattice, cells, xy, index: _CellIndex) -> _LeadGeometry:
    direction = np.array(_SIDES[lead.side], dtype=float)
    along_x = lead.side in ("left", "right")
    across = 1 if along_x else 0
    period, (p1, p2) = lattice.period_along(direction)
    length = np.linalg.norm(period)
    tol = _POSITION_TOL * lattice.spacing
    coord = "y" if across == 1 else "x"
    lo, hi = lead.span
    c_dev = xy[:, across]
    in_span = (c_dev >= lo - tol) & (c_dev <= hi + tol)
    if not np.any(in_span):
        raise LeadError(
            f"lead '{lead.name}' does not touch the device: no device site lies in its span {coord} = "
            f"[{lo:.4g}, {hi:.4g}] nm (the device covers {coord} = [{c_dev.min():.4g}, {c_dev.max():.4g}] nm); "
            "move the span inside that range"
        )
    s_dev = xy @ direction
    s_edge = s_dev[in_span].max()
    # Lattice sites near the edge, inside the span.
    box_lo = np.minimum(xy[in_span].min(axis=0), xy[in_span].min(axis=0) + 2 * period) - 2 * length
    box_hi = np.maximum(xy[in_span].max(axis=0), xy[in_span].max(axis=0) + 2 * period) + 2 * length
    box_lo[across], box_hi[across] = lo - lattice.spacing, hi + lattice.spacing
    cand = lattice.cells_in_box(box_lo[0], box_lo[1], box_hi[0], box_hi[1])
    cxy = lattice.positions(cand)
    cand_in = (cxy[:, across] >= lo - tol) & (cxy[:, across] <= hi + tol)
    cand, cxy = cand[cand_in], cxy[cand_in]
    s_c = cxy @ direction
    cell0 = cand[(s_c > s_edge + tol) & (s_c <= s_edge + length + tol)]
    last_slab = (s_c > s_edge - length + tol) & (s_c <= s_edge + tol)
    missing = last_slab & (index.find(cand) < 0)
    if np.any(missing):
        miss_c = cxy[missing, across]
        lines_with_sites = np.array([np.any(np.abs(c_dev - c) < tol) for c in miss_c])
        if not np.all(lines_with_sites):
            c = miss_c[~lines_with_sites][0]
            raise LeadError(
                f"lead '{lead.name}' is wider than the device's {lead.side} side: no device site at "
                f"{coord} = {c:.4g} nm inside its span [{lo:.4g}, {hi:.4g}] nm; narrow the span"
            )
        # Outermost device site on each line of the span, for the message.
        ends = [s_dev[in_span & (np.abs(c_dev - c) < tol)].max() for c in np.unique(np.round(c_dev[in_span], 9))]
        along = 1 - across
        coords = (-np.array(ends) if direction[along] < 0 else np.array(ends)) + 0.0  # no "-0"
        raise LeadError(
            f"lead '{lead.name}' meets a ragged {lead.side} edge: within its span the device ends at "
            f"{'xy'[along]} = {coords.min():.4g} to {coords.max():.4g} nm; straighten the edge there or narrow the span"
        )
    if len(cell0) == 0:  # pragma: no cover - a non-empty span always has a slab
        raise LeadError(f"lead '{lead.name}': no lattice site in its cross-section; widen the span")
    return _LeadGeometry(lead=lead, cell_sites=cell0, shift=np.array([p1, p2, 0]), period=period, along_x=along_x)


def _check_lead_clear(geo: _LeadGeometry, lattice, deep, index: _CellIndex, m: int) -> None:
    """Only cell 0 may touch the device: deeper cells must not neighbour or overlap it."""
    overlap = index.find(deep) >= 0
    r_deep, _ = _bond_pairs(lattice, deep[m:], index)
    if np.any(overlap) or len(r_deep):
        k = np.flatnonzero(overlap)[0] if np.any(overlap) else m + r_deep[0]
        x, y = lattice.positions(deep[k])[0]
        raise LeadError(
            f"lead '{geo.lead.name}' runs alongside or into the device near (x, y) = ({x:.4g}, {y:.4g}) nm: the "
            f"device reaches past its {geo.lead.side} edge beside the lead; narrow the span or reshape the region"
        )


def _lead_model(geo: _LeadGeometry, terms: _Terms, lattice: Lattice, xy, f_dev, index) -> LeadModel:
    t = terms.t
    cell0, cell1 = geo.cell(0), geo.cell(1)
    m = len(cell0)
    pos0, pos1 = lattice.positions(cell0), lattice.positions(cell1)
    f_lead = np.full(m, 0.0 if geo.along_x else 1.0)
    idx0 = _CellIndex(cell0)
    r, c = _bond_pairs(lattice, cell0, idx0)
    h_cell = terms.dense(r, c, terms.hop(pos0[r], pos0[c], f_lead[r], f_lead[c]), (m, m))
    onsite = np.full(m, terms.band_offset + geo.lead.potential)
    h_cell += terms.dense(np.arange(m), np.arange(m), terms.onsite(onsite), (m, m))
    r, c = _bond_pairs(lattice, cell0, _CellIndex(cell1))
    h_hop = terms.dense(r, c, terms.hop(pos0[r], pos1[c], f_lead[r], f_lead[c]), (m, m))
    # Device sites bonded to cell 0 form the interface: <interface|H|cell 0>.
    r, c = _bond_pairs(lattice, cell0, index)
    iface_sites = np.unique(c)
    k = len(iface_sites)
    local = np.searchsorted(iface_sites, c)
    coupling = terms.dense(local, r, terms.hop(xy[c], pos0[r], f_dev[c], f_lead[r]), (k, m))
    return LeadModel(
        name=geo.lead.name,
        h_cell=h_cell,
        h_hop=h_hop,
        interface=terms.orbitals(iface_sites),
        coupling=coupling,
        cell_positions=pos0,
        period=geo.period,
    )


def _check_leads_apart(leads: Sequence[Lead], lattice: Lattice, lead_sites: list[np.ndarray]) -> None:
    for i in range(len(leads)):
        index = _CellIndex(lead_sites[i])
        for j in range(i + 1, len(leads)):
            hit = index.find(lead_sites[j]) >= 0
            r, _ = _bond_pairs(lattice, lead_sites[j], index)
            if np.any(hit) or len(r):
                k = np.flatnonzero(hit)[0] if np.any(hit) else r[0]
                x, y = lattice.positions(lead_sites[j][k])[0]
                raise LeadError(
                    f"leads '{leads[i].name}' and '{leads[j].name}' overlap or touch near (x, y) = ({x:.4g}, {y:.4g}) nm; "
                    "keep at least one empty lattice row between them"
                )
