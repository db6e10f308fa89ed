"""The 2DEG screens the gates: Thomas-Fermi electrostatics of a gated heterostructure, self-consistent.

The gates alone (:mod:`rgftrans.electrostatics.gates`) give the bare electron
potential energy ``U_gates(r)`` in the plane of the 2DEG.  The electrons move
in it and screen it: with the chemical potential ``mu`` fixed by the leads
(the ungated 2DEG of density ``n0``), the local density follows the local
band bottom,

    n(r) = D (mu - U(r))   where positive, 0 where depleted  (Thomas-Fermi, T = 0),

with ``D = g_s g_v m* / (2 pi hbar^2)`` the 2D density of states, and the
potential energy holds the electrons' own field,

    U(r) = U_gates(r) + (e^2 / (4 pi eps eps0)) sum_r' A dn(r') K(r - r'),
    K(rho) = 1/rho - 1/sqrt(rho^2 + 4 d^2),

``dn = n - n0`` measured from the neutral ungated background.  ``K`` is a
sheet charge at depth ``d`` under a **pinned surface**: the exposed surface
is an equipotential (its Fermi level pinned, the gates at their voltages), so
every charge in the 2DEG has an image of opposite sign at height ``d`` above
the surface -- the same boundary condition under which the gate potential
of :mod:`~rgftrans.electrostatics.gates` is the half-space Dirichlet
integral (Davies, Larkin & Sukhorukov, J. Appl. Phys. 77, 4504 (1995), from
memory, call this the pinned surface; their frozen surface, where the
surface charge rather than its potential is held, is not implemented here).

The two equations are the stationarity conditions of a convex energy in the
density,

    F[n] = sum_r A [ n^2 / (2 D) + (U_gates - mu) n ] + (1/2) sum_{r, r'} A^2 dn C K dn,

(``C = e^2 / (4 pi eps eps0)``; K is positive definite: its 2D Fourier
transform ``2 pi (1 - exp(-2 q d)) / q`` is positive), so the solution is
the minimum of ``F`` over ``n >= 0``: depleted regions come out of the bound,
not of a guess.  The minimum is found by L-BFGS-B (scipy) with the
convolution done by FFT on a zero-padded grid (scipy.fft), N log N per step;
a previous solution is a warm start along a sweep.  Stopping: the projected
gradient, in units of the energy scale ``n0 / D``, below ``tolerance`` (1e-6
by default), which bounds the relative error of the density by about the same.

Units: nm, meV, V, densities in cm^-2 at the interface (``density_cm2``)
and nm^-2 inside.  The ungated band bottom is the zero of energy, as in a
device built with ``potential=``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import constants as _codata
from scipy import fft as _fft

from rgftrans.errors import ComputationFailed, RgftransError
from rgftrans.system.materials import Material, material as lookup_material

__all__ = ["Heterostructure", "ScreenedPotential", "screen", "coulomb_constant_meV_nm", "SELF_TERM"]

#: e^2 / (4 pi eps0) in meV nm (CODATA via scipy.constants): 1439.96 meV nm.
COULOMB_MEV_NM = _codata.e / (4 * math.pi * _codata.epsilon_0) * 1e3 * 1e9
#: The integral of 1/rho over a square cell of side a centred on rho = 0, in units of a:
#: 4 ln(1 + sqrt 2) (elementary integral; the self-term of the point-sampled kernel).
SELF_TERM = 4.0 * math.log1p(math.sqrt(2.0))
#: Smallest stopping tolerance: the minimised energy is a sum of O(N) terms of order one, so its round-off
#: (~1e-16 N) stops progress near a relative gradient of 1e-8 (seen on 10^3-10^5 node grids).
MIN_TOLERANCE = 1e-8
#: Densities: 1 cm^-2 = 1e-14 nm^-2.
NM2_PER_CM2 = 1e-14


def coulomb_constant_meV_nm(eps_r: float) -> float:
    """``e^2 / (4 pi eps_r eps0)`` in meV nm."""
    return COULOMB_MEV_NM / float(eps_r)


@dataclass(frozen=True)
class Heterostructure:
    """What a grower's sheet says about a 2DEG: depth, density, material, degeneracies.

    Parameters
    ----------
    depth_nm : float
        Depth of the 2DEG below the surface (the gates' plane), nm.
    density_cm2 : float
        Ungated density n0, cm^-2.
    material : str or Material
        Effective mass and dielectric constant (e.g. GaAs: 0.067 m_e, 12.9).
    spin_degeneracy, valley_degeneracy : int
        g_s (2) and g_v (1 for GaAs, 2 for Si (001)).
    surface : {"pinned"}
        Boundary condition at the exposed surface (see the module docstring).
    """

    depth_nm: float
    density_cm2: float
    material: Material | str = "GaAs"
    spin_degeneracy: int = 2
    valley_degeneracy: int = 1
    surface: str = "pinned"

    def __post_init__(self):
        mat = self.material if isinstance(self.material, Material) else lookup_material(str(self.material))
        object.__setattr__(self, "material", mat)
        for name, value, lo, hi in (("depth_nm", self.depth_nm, 1.0, 1e4),
                                    ("density_cm2", self.density_cm2, 1e8, 1e14)):
            if not (isinstance(value, (int, float)) and math.isfinite(value) and lo <= value <= hi):
                raise RgftransError(f"heterostructure {name} = {value!r} is outside {lo:g}..{hi:g}; give the grower's "
                                    f"value ({'nm' if name == 'depth_nm' else 'cm^-2'})")
        if self.spin_degeneracy not in (1, 2) or self.valley_degeneracy not in (1, 2, 4, 6):
            raise RgftransError(f"degeneracies must be spin 1 or 2 and valley 1, 2, 4 or 6, got "
                                f"{self.spin_degeneracy} and {self.valley_degeneracy}")
        if self.surface != "pinned":
            raise RgftransError(f"surface {self.surface!r} is not implemented; only 'pinned' (exposed surface at a fixed "
                                "potential) is")

    @property
    def eps_r(self) -> float:
        return float(self.material.eps_r)

    @property
    def dos_per_meV_nm2(self) -> float:
        """D = g_s g_v m* / (2 pi hbar^2), states per meV per nm^2."""
        m = self.material.m_eff * _codata.m_e
        per_joule_m2 = self.spin_degeneracy * self.valley_degeneracy * m / (2 * math.pi * _codata.hbar**2)
        return per_joule_m2 * (1e-3 * _codata.e) * 1e-18

    @property
    def density_nm2(self) -> float:
        return self.density_cm2 * NM2_PER_CM2

    @property
    def fermi_energy_meV(self) -> float:
        """mu = n0 / D above the ungated band bottom (T = 0)."""
        return self.density_nm2 / self.dos_per_meV_nm2

    @property
    def screening_wavevector_per_nm(self) -> float:
        """2D Thomas-Fermi wave vector q_TF = e^2 D / (2 eps eps0), 1/nm."""
        return 2 * math.pi * coulomb_constant_meV_nm(self.eps_r) * self.dos_per_meV_nm2

    def depletion_voltage_V(self) -> float:
        """Voltage on a wide gate that empties the 2DEG under it: V = -e n0 (d / (eps eps0) + 1 / (e^2 D)).

        Parallel-plate electrostatics in series with the 2DEG's quantum capacitance (e.g. J. H. Davies, The
        Physics of Low-Dimensional Semiconductors, CUP 1998, from memory).
        """
        geometric = 4 * math.pi * coulomb_constant_meV_nm(self.eps_r) * self.depth_nm  # meV nm^2 per electron/nm^2
        return -self.density_nm2 * (geometric + 1.0 / self.dos_per_meV_nm2) / 1e3


@dataclass(frozen=True, eq=False)
class ScreenedPotential:
    """A self-consistent solution on a grid; callable as ``U(x, y)`` (meV) for a device's ``potential=``.

    Attributes
    ----------
    x_nm, y_nm : (nx,), (ny,) float ndarray
        Grid nodes, nm.
    potential_meV : (ny, nx) float ndarray
        Screened electron potential energy U, meV (ungated band bottom = 0).
    bare_potential_meV : (ny, nx) float ndarray
        The gates' potential alone.
    density_cm2 : (ny, nx) float ndarray
        Electron density, cm^-2 (0 where depleted).
    fermi_energy_meV : float
        The chemical potential mu above the ungated band bottom.
    iterations : int
    gradient : float
        Final projected gradient in units of the energy scale (the stopping measure).
    structure : Heterostructure
    """

    x_nm: np.ndarray
    y_nm: np.ndarray
    potential_meV: np.ndarray
    bare_potential_meV: np.ndarray
    density_cm2: np.ndarray
    fermi_energy_meV: float
    iterations: int
    gradient: float
    structure: Heterostructure

    @property
    def depleted(self) -> np.ndarray:
        """Boolean map of the depleted nodes."""
        return self.density_cm2 <= 0.0

    def __call__(self, x, y):
        """U (meV) at positions (nm) by bilinear interpolation; outside the grid, the nearest edge value."""
        from scipy.interpolate import RegularGridInterpolator

        interp = self.__dict__.get("_interp")
        if interp is None:
            interp = RegularGridInterpolator((self.y_nm, self.x_nm), self.potential_meV, bounds_error=False,
                                             fill_value=None)
            object.__setattr__(self, "_interp", interp)
        x, y = np.broadcast_arrays(np.asarray(x, float), np.asarray(y, float))
        xc = np.clip(x, self.x_nm[0], self.x_nm[-1])
        yc = np.clip(y, self.y_nm[0], self.y_nm[-1])
        return interp(np.stack([yc.ravel(), xc.ravel()], axis=1)).reshape(x.shape)


def _kernel_fft(nx: int, ny: int, spacing: float, depth: float, periodic: bool):
    """FFT of ``A K(r)`` (nm) on the grid: zero-padded (linear convolution) or periodic.

    Zero-padded: K sampled at the nodes, the singular self-term replaced by its cell average
    (:data:`SELF_TERM`), on a grid twice the size so the circular convolution is a linear one.  Periodic:
    the continuum transform ``K(q) = 2 pi (1 - exp(-2 q d)) / q`` (``4 pi d`` at q = 0) on the grid's
    wave vectors, which sums all periodic images exactly.
    """
    if periodic:
        qx = 2 * np.pi * np.fft.rfftfreq(nx, d=spacing)
        qy = 2 * np.pi * np.fft.fftfreq(ny, d=spacing)
        q = np.hypot(qx[None, :], qy[:, None])
        with np.errstate(divide="ignore", invalid="ignore"):
            kq = np.where(q > 0, 2 * np.pi * -np.expm1(-2 * q * depth) / q, 4 * np.pi * depth)
        return kq, (ny, nx)
    px, py = 2 * nx, 2 * ny
    ix = np.minimum(np.arange(px), px - np.arange(px))
    iy = np.minimum(np.arange(py), py - np.arange(py))
    area = spacing * spacing
    rho = np.hypot(ix[None, :] * spacing, iy[:, None] * spacing)
    with np.errstate(divide="ignore"):
        kernel = area * (1.0 / rho - 1.0 / np.sqrt(rho**2 + 4 * depth**2))
    kernel[0, 0] = SELF_TERM * spacing - area / (2 * depth)
    return _fft.rfft2(kernel), (py, px)


def screen(layout, structure: Heterostructure, *, extent_nm, spacing_nm: float, tolerance: float = 1e-6,
           max_iterations: int = 5000, initial: ScreenedPotential | None = None, periodic: bool = False,
           bare=None) -> ScreenedPotential:
    """Self-consistent Thomas-Fermi screening of a gate layout by the 2DEG (pinned surface, T = 0).

    Parameters
    ----------
    layout : GateLayout or None
        The gates (its depth must be the heterostructure's); None with ``bare`` given.
    structure : Heterostructure
    extent_nm : (x0, y0, x1, y1)
        The grid's rectangle, nm: it should reach well past the device, to where the gates' potential has
        decayed (a few depths), since the induced charge outside it is neglected (or, with ``periodic``,
        repeated).
    spacing_nm : float
        Grid spacing, nm; below about d / 3 the kernel's near field is resolved.
    tolerance : float
        Stop when the projected gradient, relative to the energy scale n0 / D, is below this.
    initial : ScreenedPotential, optional
        A previous solution on the same grid (warm start along a sweep).
    periodic : bool
        Periodic boundary conditions (for checks against infinite-system closed forms).
    bare : (ny, nx) float ndarray, optional
        A bare potential energy (meV) on the grid instead of the layout's.

    Returns
    -------
    ScreenedPotential
    """
    from scipy.optimize import minimize

    if not (isinstance(tolerance, (int, float)) and MIN_TOLERANCE <= tolerance < 1):
        raise RgftransError(f"screening tolerance {tolerance!r} must be in [{MIN_TOLERANCE:g}, 1): below about "
                            f"{MIN_TOLERANCE:g} the energy's round-off hides further progress")
    x0, y0, x1, y1 = (float(v) for v in extent_nm)
    h = float(spacing_nm)
    if not (math.isfinite(h) and h > 0) or not (x1 > x0 and y1 > y0):
        raise RgftransError(f"screening grid: extent {extent_nm!r} nm and spacing {spacing_nm!r} nm must describe a "
                            "rectangle with a positive spacing")
    d = structure.depth_nm
    if layout is not None and abs(layout.depth_nm - d) > 1e-9 * d:
        raise RgftransError(f"the gates sit {layout.depth_nm:g} nm above the 2DEG but the heterostructure says "
                            f"{d:g} nm; give one depth")
    xs = x0 + h * np.arange(int(math.floor((x1 - x0) / h + 1e-9)) + 1)
    ys = y0 + h * np.arange(int(math.floor((y1 - y0) / h + 1e-9)) + 1)
    nx, ny = len(xs), len(ys)
    if nx * ny > 4_000_000:
        raise RgftransError(f"screening grid of {nx} x {ny} nodes is too large; use a coarser spacing_nm")
    if bare is None:
        gx, gy = np.meshgrid(xs, ys)
        bare = np.asarray(layout.potential_energy_meV(gx, gy), dtype=float)
    bare = np.asarray(bare, dtype=float)
    if bare.shape != (ny, nx) or not np.all(np.isfinite(bare)):
        raise RgftransError(f"bare potential must be a finite ({ny}, {nx}) array in meV")
    dos = structure.dos_per_meV_nm2
    n0 = structure.density_nm2
    mu = structure.fermi_energy_meV
    coulomb = coulomb_constant_meV_nm(structure.eps_r)
    kfft, shape = _kernel_fft(nx, ny, h, d, periodic)

    def induced(dn):
        pad = np.zeros(shape)
        pad[:ny, :nx] = dn
        return coulomb * _fft.irfft2(_fft.rfft2(pad, workers=-1) * kfft, s=shape, workers=-1)[:ny, :nx]

    scale = mu  # energy scale n0 / D

    def energy_and_gradient(n_flat):
        n = n_flat.reshape(ny, nx)
        dn = n - n0
        u_ind = induced(dn)
        # per-node energy in units of scale * n0 (dimensionless, O(1) per node)
        f = np.sum(n * n / (2 * dos) + (bare - mu) * n + 0.5 * dn * u_ind) / (scale * n0)
        grad = (n / dos + bare - mu + u_ind) / (scale * n0) * 1.0
        return f, grad.ravel()

    start = (np.clip(initial.density_cm2 * NM2_PER_CM2, 0, None).ravel() if initial is not None
             and initial.density_cm2.shape == (ny, nx) else np.clip(dos * (mu - bare), 0, None).ravel())
    # L-BFGS-B's projected-gradient test ("pgtol") is on the raw gradient: ours is (local mu - mu) / (scale * n0).
    result = minimize(energy_and_gradient, start, jac=True, method="L-BFGS-B", bounds=[(0.0, None)] * start.size,
                      options={"maxiter": max_iterations, "gtol": tolerance / n0, "ftol": 0.0, "maxcor": 20})
    n = result.x.reshape(ny, nx)
    u = bare + induced(n - n0)
    local = n / dos + u - mu  # zero where occupied; >= 0 where depleted (U above mu)
    violation = np.where(n > 0, np.abs(local), np.maximum(-local, 0.0))
    gradient = float(violation.max() / scale)
    if gradient > 10 * tolerance:
        raise ComputationFailed(f"screening did not converge: the local chemical potential is off by "
                                f"{gradient:.2g} of E_F after {result.nit} iterations ({result.message}); use a "
                                "coarser grid, a larger tolerance or more iterations")
    return ScreenedPotential(x_nm=xs, y_nm=ys, potential_meV=u, bare_potential_meV=bare,
                             density_cm2=n / NM2_PER_CM2, fermi_energy_meV=mu, iterations=int(result.nit),
                             gradient=gradient, structure=structure)
