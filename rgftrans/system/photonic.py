"""Light between metal plates: the TM scalar Helmholtz problem on the same RGF engine.

A TM field ``E_z(x, y)`` between perfectly conducting walls obeys
``nabla^2 E + k0^2 eps(r) E = 0`` with ``E = 0`` on the metal.  On a square
grid of spacing ``a`` (five-point Laplacian, common practice, no source)

    (4 E_i - sum_{j nn i} E_j) = k0a_squared eps_i E_i,      k0a_squared = (k0 a)^2,

i.e. ``H0 E = k0a_squared M E`` with ``H0`` the tight-binding Hamiltonian of
hopping 1 and onsite 4 (nodes on the metal are simply absent: Dirichlet walls)
and ``M = diag(eps)``.  With ``D = M^(-1/2)`` (real part of eps) the problem
becomes an ordinary one, ``k0a_squared phi = D H0 D phi`` with ``phi = M^(1/2) E``:
a frequency-independent tight-binding model whose "energy" is ``k0a_squared``.
Port waveguides filled with ``eps_p`` become leads with cell Hamiltonians
``h / eps_p``.  Everything the electron engine does (transmission, reflection,
scattering states, poles, dark-state search) then works unchanged in k0a_squared;
this module converts to and from frequency:

    f = c sqrt(k0a_squared) / (2 pi a).

The bond flux ``2 Im(phi_i^* H_ij phi_j)`` equals ``2 Im(E_i^* H0_ij E_j)``, so
transmissions are power transmissions.  A lossy dielectric
``eps = eps' (1 + i tan delta)`` (time dependence exp(-i omega t)) adds the
onsite term ``-i k0a_squared tan delta`` -- an absorbing, frequency-dependent
diagonal; the absorbed fraction of the incident power is
``A = 2 k0a_squared sum_i tan(delta_i) |phi_i|^2`` for unit incident flux.

Permittivity on the grid: each node takes the area-weighted mean of eps over
its cell (sub-cell averaging; for E parallel to every interface, as E_z is
here, the arithmetic mean is the right effective medium -- common practice, no
source).  It also makes eps, and hence every result, continuous in the size and
position of a dielectric, which the dark-state search needs.
"""

from __future__ import annotations

import warnings
from collections.abc import Sequence
from dataclasses import dataclass, replace

import numpy as np
import scipy.constants as const
import scipy.sparse as sp
import shapely

from rgftrans.system.device import Device, Lead, TightBindingModel, lead_index
from rgftrans.errors import GeometryError, LeadError, PotentialError, ResolutionWarning
from rgftrans.system.geometry import Region
from rgftrans.system.lattices import square

__all__ = ["LENGTH_UNITS", "Dielectric", "Port", "Waveguide", "PhotonicModel", "MIN_POINTS_PER_WAVELENGTH"]

#: Metres per length unit.
LENGTH_UNITS = {"mm": 1e-3, "um": 1e-6}
#: Fewest grid points per wavelength in the densest dielectric before a ResolutionWarning.  At 10 points the
#: five-point Laplacian's dispersion is 3.3 % below k^2 (k a = 0.63, error (k a)^2 / 12; common practice, no source).
MIN_POINTS_PER_WAVELENGTH = 10.0


@dataclass(frozen=True)
class Dielectric:
    """A dielectric piece: a region (in the waveguide's length unit) and its relative permittivity.

    ``loss_tangent`` makes it lossy: ``eps = permittivity (1 + i loss_tangent)``.
    Later pieces cover earlier ones where they overlap.
    """

    region: Region
    permittivity: float
    loss_tangent: float = 0.0
    name: str = ""

    def __post_init__(self):
        eps, tan = float(self.permittivity), float(self.loss_tangent)
        if not np.isfinite(eps) or eps <= 0:
            raise PotentialError(f"dielectric {self.name!r}: permittivity must be a positive finite number, got "
                                 f"{self.permittivity!r}")
        if not np.isfinite(tan) or tan < 0:
            raise PotentialError(f"dielectric {self.name!r}: loss_tangent must be >= 0 and finite, got "
                                 f"{self.loss_tangent!r} (a negative one would be gain)")


@dataclass(frozen=True)
class Port:
    """An input or output waveguide: it leaves the enclosure from ``side``; ``span`` are its two walls.

    The port is filled with a lossless dielectric of relative permittivity ``permittivity`` (1 = empty).
    """

    name: str
    side: str
    span: tuple[float, float]
    permittivity: float = 1.0

    def __post_init__(self):
        eps = self.permittivity
        if isinstance(eps, complex) or not np.isfinite(float(eps)) or float(eps) <= 0:
            raise LeadError(f"port {self.name!r}: permittivity must be a real positive number (ports are lossless), "
                            f"got {eps!r}")


@dataclass(frozen=True)
class Waveguide:
    """A metal enclosure with dielectric pieces and port waveguides.

    Parameters
    ----------
    region : Region
        The inside of the metal walls, in ``unit``; the field vanishes outside.
    ports : sequence of Port
    spacing : float
        Grid spacing in ``unit``.
    unit : {"mm", "um"}
    dielectrics : sequence of Dielectric
    background : float
        Relative permittivity of the filling outside the dielectrics (1 = vacuum).
    """

    region: Region
    ports: Sequence[Port]
    spacing: float
    unit: str = "mm"
    dielectrics: Sequence[Dielectric] = ()
    background: float = 1.0

    def __post_init__(self):
        if self.unit not in LENGTH_UNITS:
            raise GeometryError(f"length unit must be one of {sorted(LENGTH_UNITS)}, got {self.unit!r}")
        a = float(self.spacing)
        if not np.isfinite(a) or a <= 0:
            raise GeometryError(f"grid spacing must be a positive length in {self.unit}, got {self.spacing!r}")
        if not np.isfinite(float(self.background)) or float(self.background) <= 0:
            raise PotentialError(f"background permittivity must be positive and finite, got {self.background!r}")

    def discretise(self) -> "PhotonicModel":
        """Grid the enclosure: nodes strictly inside the walls, permittivity averaged over each node's cell."""
        a = float(self.spacing)
        inside = Region(self.region.geometry.buffer(-0.25 * a, join_style="mitre"))  # nodes on the metal drop out
        if inside.is_empty:
            raise GeometryError(f"the enclosure is thinner than the grid spacing {a} {self.unit}; refine the grid")
        leads = [Lead(p.name, p.side, (min(p.span) + 0.25 * a, max(p.span) - 0.25 * a)) for p in self.ports]
        base = Device(inside, leads, lattice=square(a), hopping=1.0).discretise()
        eps = cell_permittivity(base.positions, a, self.dielectrics, float(self.background))
        scale = 1.0 / np.sqrt(eps.real)
        d = sp.diags(scale)
        ham = d @ base.hamiltonian @ d
        new_leads = []
        for lead, port in zip(base.leads, self.ports):
            width = (len(lead.interface) + 1) * a  # nodes strictly between the walls, walls one spacing beyond
            given = abs(port.span[1] - port.span[0])
            if abs(width - given) > 0.01 * a:
                warnings.warn(
                    f"port {port.name!r}: its walls ({port.span[0]:g}, {port.span[1]:g} {self.unit}) fall between "
                    f"grid lines, so on this grid the guide is {width:.4g} {self.unit} wide instead of {given:.4g} "
                    f"(cutoffs shift by {100 * abs(given / width - 1):.1f} %); put the walls on multiples of the "
                    f"spacing {a:g} {self.unit}", ResolutionWarning, stacklevel=2)
            e_p = float(port.permittivity)
            new_leads.append(replace(lead, h_cell=lead.h_cell / e_p, h_hop=lead.h_hop / e_p,
                                     coupling=scale[lead.interface][:, None] * lead.coupling / np.sqrt(e_p)))
        model = TightBindingModel(ham, base.positions, tuple(new_leads), energy_scale=1.0,
                                  coordination=base.coordination, norbs=1, spacing_nm=None)
        return PhotonicModel(model=model, permittivity=eps, spacing=a, unit=self.unit,
                             port_permittivity=np.array([float(p.permittivity) for p in self.ports]))


def cell_permittivity(positions: np.ndarray, spacing: float, dielectrics: Sequence[Dielectric],
                      background: float) -> np.ndarray:
    """Area-weighted mean permittivity over the square cell of each node (complex with losses)."""
    h = 0.5 * spacing
    cells = shapely.box(positions[:, 0] - h, positions[:, 1] - h, positions[:, 0] + h, positions[:, 1] + h)
    eps = np.full(len(positions), complex(background))
    covered = np.zeros(len(positions))
    # Later pieces cover earlier ones: walk backwards, each piece taking what is not yet covered.
    taken = None
    for piece in reversed(list(dielectrics)):
        geom = piece.region.geometry if taken is None else piece.region.geometry.difference(taken)
        frac = shapely.area(shapely.intersection(cells, geom)) / spacing**2
        value = float(piece.permittivity) * (1 + 1j * float(piece.loss_tangent))
        eps += frac * (value - background)
        covered += frac
        taken = piece.region.geometry if taken is None else taken.union(piece.region.geometry)
    if np.any(covered > 1 + 1e-9):
        raise GeometryError("dielectric pieces cover a cell more than once; this is a bug in the overlap handling")
    return eps


@dataclass(frozen=True, eq=False)
class PhotonicModel:
    """The gridded waveguide: a tight-binding model in ``k0a_squared = (k0 a)^2`` plus what converts it back."""

    model: TightBindingModel
    permittivity: np.ndarray
    spacing: float
    unit: str
    port_permittivity: np.ndarray

    # --- units --------------------------------------------------------------------------------------
    @property
    def spacing_m(self) -> float:
        return self.spacing * LENGTH_UNITS[self.unit]

    def k0a_squared(self, frequency_GHz):
        """``(k0 a)^2`` at the given frequencies (GHz); k0 = 2 pi f / c with c from scipy.constants."""
        k0a = 2 * np.pi * np.asarray(frequency_GHz, dtype=float) * 1e9 * self.spacing_m / const.c
        return k0a**2

    def frequency_GHz(self, k0a_squared):
        """Inverse of :meth:`k0a_squared` (a complex value gives a complex frequency)."""
        return const.c * np.sqrt(np.asarray(k0a_squared)) / (2 * np.pi * self.spacing_m) / 1e9

    def width_GHz(self, k0a_squared, width):
        """A width in ``(k0 a)^2`` (dimensionless) as a width in frequency: ``df = f dK / (2 K)``, ``K = (k0 a)^2``."""
        k0a_squared = np.asarray(k0a_squared, dtype=float)
        return self.frequency_GHz(k0a_squared) * np.asarray(width, dtype=float) / (2 * k0a_squared)

    @property
    def loss_tangent(self) -> np.ndarray:
        return self.permittivity.imag / self.permittivity.real

    @property
    def is_lossy(self) -> bool:
        return bool(np.any(self.loss_tangent > 0))

    def model_at(self, k0a_squared: float) -> TightBindingModel:
        """The model at one ``k0a_squared``: with losses, the absorbing diagonal ``-i k0a_squared tan(delta)`` is added."""
        if not self.is_lossy:
            return self.model
        return replace(self.model, hamiltonian=self.model.hamiltonian - sp.diags(1j * k0a_squared * self.loss_tangent))

    # --- checks ---------------------------------------------------------------------------------------
    def check_resolution(self, frequencies_GHz) -> None:
        """Warn when the grid has fewer than MIN_POINTS_PER_WAVELENGTH nodes per wavelength in the densest medium."""
        f_max = float(np.max(frequencies_GHz))
        eps_max = max(float(self.permittivity.real.max()), float(self.port_permittivity.max()))
        wavelength = const.c / (f_max * 1e9 * np.sqrt(eps_max)) / LENGTH_UNITS[self.unit]
        points = wavelength / self.spacing
        if points < MIN_POINTS_PER_WAVELENGTH:
            warnings.warn(
                f"the grid has {points:.1f} points per wavelength at {f_max:g} GHz in the densest medium "
                f"(eps = {eps_max:g}, wavelength {wavelength:.4g} {self.unit}); below "
                f"{MIN_POINTS_PER_WAVELENGTH:g} the cutoffs and resonances shift by several per cent -- use a "
                f"spacing of at most {wavelength / MIN_POINTS_PER_WAVELENGTH:.3g} {self.unit}",
                ResolutionWarning, stacklevel=3)

    # --- spectra --------------------------------------------------------------------------------------
    def cutoffs_GHz(self, port: int | str = 0, count: int | None = None) -> np.ndarray:
        """Cutoff frequencies of a port's modes on this grid (band bottoms of its lead: ``h_cell + h_hop + h_hop^T``)."""
        lead = self.model.leads[self.port_index(port)]
        cutoffs = np.sort(np.linalg.eigvalsh(lead.h_cell + lead.h_hop + lead.h_hop.conj().T))
        f = self.frequency_GHz(np.maximum(cutoffs, 0.0))
        return f if count is None else f[:count]

    def port_index(self, port) -> int:
        """Position of a port given by name or index."""
        return lead_index([lead.name for lead in self.model.leads], port, noun="port", owner="the waveguide")

