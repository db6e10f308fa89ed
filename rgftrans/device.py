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

from collections.abc import Callable, Sequence
from dataclasses import dataclass, field

import numpy as np
import scipy.sparse as sp
from scipy.sparse.csgraph import connected_components

from .errors import GeometryError, LeadError, PotentialError
from .geometry import Region
from .lattices import Lattice, square
from .materials import Material, hopping_meV, material as lookup_material

__all__ = ["Lead", "Device", "LeadModel", "TightBindingModel", "discretise"]

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
        lo, hi = (float(v) for v in self.span)
        if not (np.isfinite(lo) and np.isfinite(hi)) or hi < lo:
            raise LeadError(f"lead '{self.name}': span {self.span!r} nm must be two finite numbers (lo, hi) with lo <= hi")
        if not np.isfinite(self.potential):
            raise LeadError(f"lead '{self.name}': potential {self.potential!r} meV is not finite; give a number")
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

    Models built by hand are validated on creation: matrix shapes, Hermitian
    Hamiltonians, interface indices in range and on the device's boundary.
    """

    hamiltonian: sp.csr_matrix
    positions: np.ndarray
    leads: tuple
    energy_scale: float = 1.0
    coordination: int | None = None

    def __post_init__(self):
        ham = sp.csr_matrix(self.hamiltonian, dtype=complex)
        object.__setattr__(self, "hamiltonian", ham)
        n = ham.shape[0]
        if ham.shape != (n, n) or n == 0:
            raise GeometryError(f"the Hamiltonian must be a non-empty square matrix, got shape {ham.shape}")
        if not np.all(np.isfinite(ham.data)):
            raise PotentialError("the Hamiltonian contains NaN or infinite entries; check the potential and hoppings")
        if abs(ham - ham.conj().T).max() > 1e-10 * max(1.0, abs(ham).max()):
            raise GeometryError("the device Hamiltonian is not Hermitian; check the hoppings (each bond needs its conjugate)")
        degree = np.diff(ham.indptr) - (ham.diagonal() != 0)
        for lead in self.leads:
            _validate_lead(lead, n, degree, self.coordination)

    @property
    def n_sites(self) -> int:
        return self.hamiltonian.shape[0]

    def lead(self, name: str) -> LeadModel:
        for lead in self.leads:
            if lead.name == name:
                return lead
        raise LeadError(f"no lead named {name!r}; the model has {[l.name for l in self.leads]}")


def _validate_lead(lead: LeadModel, n_sites: int, degree: np.ndarray, coordination: int | None) -> None:
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
        inner = iface[degree[iface] >= coordination]
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
        Sets the effective mass, hence the hopping.  Default GaAs.
    potential : float or callable, meV
        Potential energy ``U(x, y)``; a callable receives arrays of x and y in
        nm and returns meV.
    hopping : float, meV, optional
        Overrides ``t = hbar^2/(2 m* a^2)`` (e.g. ``1.0`` for tight-binding units).
    """

    region: Region
    leads: Sequence[Lead]
    lattice: Lattice = field(default_factory=lambda: square(5.0))
    material: str | Material = "GaAs"
    potential: PotentialLike = 0.0
    hopping: float | None = None

    def discretise(self) -> "TightBindingModel":
        """Return the tight-binding model of this device (see :func:`discretise`)."""
        return discretise(self)

    @property
    def t(self) -> float:
        """Nearest-neighbour hopping (meV)."""
        if self.hopping is not None:
            return float(self.hopping)
        mat = self.material if isinstance(self.material, Material) else lookup_material(self.material)
        return hopping_meV(mat.m_eff, self.lattice.spacing)


class _TagIndex:
    """Vectorised lookup of site tags (n1, n2, b) -> row index (or -1)."""

    _OFF = 1 << 20

    def __init__(self, tags: np.ndarray):
        self.keys = self._encode(tags)
        self.order = np.argsort(self.keys, kind="stable")
        self.sorted = self.keys[self.order]

    @classmethod
    def _encode(cls, tags: np.ndarray) -> np.ndarray:
        tags = np.asarray(tags, dtype=np.int64).reshape(-1, 3)
        return (((tags[:, 0] + cls._OFF) << 21) + (tags[:, 1] + cls._OFF)) * 16 + tags[:, 2]

    def find(self, tags: np.ndarray) -> np.ndarray:
        keys = self._encode(tags)
        pos = np.searchsorted(self.sorted, keys)
        pos = np.minimum(pos, len(self.sorted) - 1)
        found = len(self.sorted) > 0
        hit = found & (self.sorted[pos] == keys) if found else np.zeros(len(keys), bool)
        return np.where(hit, self.order[pos], -1)


def _bond_pairs(lattice: Lattice, tags_a: np.ndarray, index_b: _TagIndex):
    """All (i, j) with site i of set A bonded to site j of set B (both directions)."""
    rows, cols = [], []
    for b_from, b_to, (n1, n2) in lattice.bonds:
        for sign, (src, dst) in ((1, (b_from, b_to)), (-1, (b_to, b_from))):
            sel = np.flatnonzero(tags_a[:, 2] == src)
            if sel.size == 0:
                continue
            target = tags_a[sel].copy()
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


def _block(lattice, tags_a, tags_b, t, onsite=None):
    """Dense Hamiltonian block <A|H|B> with hopping -t (and onsite on the diagonal if A is B)."""
    rows, cols = _bond_pairs(lattice, tags_a, _TagIndex(tags_b))
    mat = np.zeros((len(tags_a), len(tags_b)), dtype=complex)
    mat[rows, cols] = -t
    if onsite is not None:
        mat[np.diag_indices(len(tags_a))] += onsite
    return mat


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
    return values


def discretise(device: Device) -> TightBindingModel:
    """Discretise a :class:`Device` into a :class:`TightBindingModel`.

    Sites are the lattice points inside the region (boundary included).  Each
    lead's cell 0 is the row (column) of lattice sites just outside the
    device's edge within the lead's span.

    Raises
    ------
    GeometryError
        Empty region, or a region that falls apart into disconnected pieces.
    LeadError
        A lead that misses the device, is wider than the side it sits on,
        meets a ragged edge, runs alongside the device, or overlaps another lead.
    PotentialError
        A NaN or infinite potential energy.
    """
    lattice = device.lattice
    t = device.t
    region = device.region
    all_tags = lattice.tags_in_box(*region.bounds)
    xy_all = lattice.positions(all_tags)
    inside = region.contains(xy_all)
    tags = all_tags[inside]
    xy = xy_all[inside]
    if len(tags) == 0:
        xmin, ymin, xmax, ymax = region.bounds
        raise GeometryError(
            f"the region ({xmax - xmin:.3g} x {ymax - ymin:.3g} nm) holds no lattice site at spacing "
            f"a = {lattice.spacing:.3g} nm; enlarge the region or refine the lattice"
        )
    index = _TagIndex(tags)
    onsite = lattice.coordination * t + _evaluate_potential(device.potential, xy)
    rows, cols = _bond_pairs(lattice, tags, index)
    n = len(tags)
    ham = sp.coo_matrix((np.full(len(rows), -t, dtype=complex), (rows, cols)), shape=(n, n)).tocsr()
    ham = (ham + sp.diags(onsite.astype(complex))).tocsr()

    n_pieces, labels = connected_components(ham.astype(bool), directed=False)
    if n_pieces > 1:
        sizes = np.bincount(labels)
        small = np.argmin(sizes)
        x, y = xy[np.flatnonzero(labels == small)[0]]
        raise GeometryError(
            f"the region discretises into {n_pieces} disconnected pieces (sizes {sorted(sizes.tolist(), reverse=True)} "
            f"sites; the smallest near (x, y) = ({x:.3g}, {y:.3g}) nm); join them or remove the stray parts"
        )
    if not device.leads:
        raise LeadError("the device has no leads; add at least one Lead")
    names = [lead.name for lead in device.leads]
    dup = {nm for nm in names if names.count(nm) > 1}
    if dup:
        raise LeadError(f"lead names must be unique, {sorted(dup)} appear more than once; rename them")

    extent = np.ptp(np.vstack([xy, [[region.bounds[0], region.bounds[1]], [region.bounds[2], region.bounds[3]]]]), axis=0)
    depth = int(np.ceil(extent.max() / lattice.spacing)) + 3
    leads, lead_sites = [], []
    for lead in device.leads:
        model, deep_tags = _discretise_lead(lead, lattice, t, tags, xy, index, depth)
        leads.append(model)
        lead_sites.append(deep_tags)
    _check_leads_apart(device.leads, lattice, lead_sites)
    return TightBindingModel(hamiltonian=ham, positions=xy, leads=tuple(leads), energy_scale=t,
                             coordination=lattice.coordination)


def _discretise_lead(lead: Lead, lattice: Lattice, t: float, tags, xy, index: _TagIndex, depth: int):
    if lattice.name != "square":
        raise LeadError(f"lead '{lead.name}': leads on a {lattice.name} lattice are not supported yet; use a square lattice")
    direction = np.array(_SIDES[lead.side])
    across = 1 if lead.side in ("left", "right") else 0  # lattice axis along the cross-section
    along = 1 - across
    a = lattice.spacing
    coord_name = "y" if across == 1 else "x"
    tol = _POSITION_TOL * a
    lo, hi = lead.span
    dev_lo, dev_hi = xy[:, across].min(), xy[:, across].max()
    in_span = (xy[:, across] >= lo - tol) & (xy[:, across] <= hi + tol)
    if not np.any(in_span):
        raise LeadError(
            f"lead '{lead.name}' does not touch the device: no device site lies in its span {coord_name} = "
            f"[{lo:.4g}, {hi:.4g}] nm (the device covers {coord_name} = [{dev_lo:.4g}, {dev_hi:.4g}] nm); "
            "move the span inside that range"
        )
    # Lattice lines (rows or columns) whose coordinate lies in the span.
    origin = lattice.origin[across]
    first = int(np.ceil((lo - tol - origin) / a))
    last = int(np.floor((hi + tol - origin) / a))
    lines = np.arange(first, last + 1)
    edge = np.empty(len(lines), dtype=np.int64)
    for k, line in enumerate(lines):
        on_line = tags[:, across] == line
        if not np.any(on_line):
            raise LeadError(
                f"lead '{lead.name}' is wider than the device's {lead.side} side: no device site at "
                f"{coord_name} = {origin + line * a:.4g} nm inside its span [{lo:.4g}, {hi:.4g}] nm; narrow the span"
            )
        pos = tags[on_line, along]
        edge[k] = pos.max() if direction[along] > 0 else pos.min()
    if np.any(edge != edge[0]):
        coords = origin * 0 + lattice.origin[along] + edge * a
        raise LeadError(
            f"lead '{lead.name}' meets a ragged {lead.side} edge: within its span the device ends at "
            f"{'xy'[along]} = {coords.min():.4g} to {coords.max():.4g} nm; straighten the edge there or narrow the span"
        )
    step = direction[along]

    def cell_tags(j):
        cell = np.zeros((len(lines), 3), dtype=np.int64)
        cell[:, across] = lines
        cell[:, along] = edge[0] + step * (j + 1)
        return cell

    cell0, cell1 = cell_tags(0), cell_tags(1)
    onsite = lattice.coordination * t + lead.potential
    h_cell = _block(lattice, cell0, cell0, t, onsite=onsite)
    h_hop = _block(lattice, cell0, cell1, t)
    # Device sites bonded to cell 0 form the interface.
    r, c = _bond_pairs(lattice, cell0, index)
    interface = np.unique(c)
    coupling = np.zeros((len(interface), len(cell0)), dtype=complex)
    coupling[np.searchsorted(interface, c), r] = -t
    # Only cell 0 may touch the device: deeper cells must not neighbour or overlap it.
    deep = np.vstack([cell_tags(j) for j in range(depth)])
    overlap = index.find(deep) >= 0
    r_deep, c_deep = _bond_pairs(lattice, deep[len(lines):], index)
    if np.any(overlap) or len(r_deep):
        k = np.flatnonzero(overlap)[0] if np.any(overlap) else len(lines) + r_deep[0]
        x, y = lattice.positions(deep[k])[0]
        raise LeadError(
            f"lead '{lead.name}' runs alongside or into the device near (x, y) = ({x:.4g}, {y:.4g}) nm: the device "
            f"reaches past its {lead.side} edge beside the lead; narrow the span or reshape the region"
        )
    model = LeadModel(
        name=lead.name,
        h_cell=h_cell,
        h_hop=h_hop,
        interface=interface,
        coupling=coupling,
        cell_positions=lattice.positions(cell0),
        period=step * lattice.prim_vecs[along],
    )
    return model, deep


def _check_leads_apart(leads: Sequence[Lead], lattice: Lattice, lead_sites: list[np.ndarray]) -> None:
    for i in range(len(leads)):
        index = _TagIndex(lead_sites[i])
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
