"""The 2DEG screens the gates: Thomas-Fermi electrostatics of a gated heterostructure, self-consistent.

The gates alone (:mod:`rgftrans.electrostatics.gates`) give the bare electron
potential energy ``U_gates(r)`` in the plane of the 2DEG.  The electrons move
in it and screen it: with the chemical potential ``mu`` fixed by the leads
(the ungated 2DEG of density ``n0``), the local density follows the local
band bottom,

    n(r) = D (mu - U(r))   where positive, 0 where depleted  (Thomas-Fermi, T = 0),
    n(r) = D kT ln(1 + exp((mu - U(r)) / kT))                 (T > 0, Fermi-Dirac),

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
memory).  Their **frozen surface** (the exposed surface's charge held, the
gates' charges unknown) is the other choice (``Heterostructure(surface=
"frozen")``); its kernels are in :mod:`~rgftrans.electrostatics.surface`.

The equations are the stationarity conditions of a convex energy in the
density (and, frozen surface, the gates' extra charge ``s``),

    F[n, s] = sum_r A [ f_T(n) + (U_ext - mu) n ] + (1/2) A^2 (dn, s) C K (dn, s) - A sum_gates U_gate s,

with ``f_T(n) = n^2 / (2 D)`` at T = 0 and the Fermi-Dirac free energy
``D (kT)^2 [x^2/2 - pi^2/6 + Li2(e^-x)]``, ``x = n / (D kT)``, above
(whose derivative inverts ``n = D kT ln(1 + e^((mu - U)/kT))``).  The
Coulomb energy is positive definite (pinned: the Fourier transform
``2 pi (1 - exp(-2 q d)) / q`` is positive; frozen: the electrostatic
energy of charges between two dielectrics is positive for any charges), so
the solution is the minimum of ``F``: at T = 0 over ``n >= 0``, depleted
regions coming out of the bound, not of a guess.  The minimum is found by
L-BFGS-B (scipy) with the convolutions done by FFT on a zero-padded grid
(scipy.fft), N log N per step; a previous solution is a warm start along a
sweep.  Above T = 0 the variables are the local chemical potentials instead
(a density's curvature kT / n diverges as a node empties), started from the
T = 0 solution.  Stopping: the projected gradient, in units of the energy
scale ``n0 / D``, below ``tolerance`` (1e-6 by default), which bounds the
relative error of the density by about the same.

Units: nm, meV, V, densities in cm^-2 at the interface (``density_cm2``)
and nm^-2 inside.  The ungated band bottom is the zero of energy, as in a
device built with ``potential=``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace

import numpy as np
from scipy import constants as _codata

from rgftrans.errors import ComputationFailed, RgftransError
from rgftrans.electrostatics.surface import (COULOMB_MEV_NM, SELF_TERM, SURFACES, SurfaceKernels,
                                             coulomb_constant_meV_nm, frozen_gate_potential, gate_nodes)
from rgftrans.system.materials import Material, material as lookup_material

__all__ = ["Heterostructure", "ScreenedPotential", "screen", "coulomb_constant_meV_nm", "SELF_TERM",
           "DEPLETED_FRACTION"]

#: Smallest stopping tolerance: the minimised energy is a sum of O(N) terms of order one, so its round-off
#: (~1e-16 N) stops progress near a relative gradient of 1e-8 (seen on 10^3-10^5 node grids).
MIN_TOLERANCE = 1e-8
#: A node counts as depleted below this fraction of n0 (at T = 0 the density there is exactly 0; above,
#: it falls off as exp(-(U - mu) / kT) and this is where the device's conduction effectively stops).
DEPLETED_FRACTION = 1e-3
#: Finite temperature: the smallest occupation a node's variable is scaled for (see screen()).
OCCUPATION_FLOOR = 1e-6
#: Fresh minimiser runs from the last point when one stalls above the tolerance (its line search at round-off).
RESTARTS = 4
#: Pinning of a GaAs surface: its conduction band about 0.7 eV above the Fermi level (typical; from memory).
TYPICAL_SURFACE_BARRIER_MEV = 700.0
#: Conduction-band offset of Al0.3Ga0.7As on GaAs, about 0.23 eV (typical; from memory).
TYPICAL_BAND_OFFSET_MEV = 230.0
#: Densities: 1 cm^-2 = 1e-14 nm^-2.
NM2_PER_CM2 = 1e-14


def _expit(x):
    from scipy.special import expit

    return expit(x)


def _log_expm1(x):
    """ln(exp(x) - 1), accurate for small and large x."""
    x = np.asarray(x, float)
    with np.errstate(divide="ignore"):
        return np.where(x > 30.0, x + np.log1p(-np.exp(-np.minimum(x, 700.0))), np.log(np.expm1(np.minimum(x, 30.0))))[()]


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
    surface : {"pinned", "frozen"}
        Boundary condition at the exposed surface (:mod:`rgftrans.electrostatics.surface`).
    temperature_K : float
        Electron temperature of the 2DEG, K; 0 gives the Thomas-Fermi step occupation, above 0 the
        Fermi-Dirac one (the chemical potential then follows from n0 at that temperature).
    """

    depth_nm: float
    density_cm2: float
    material: Material | str = "GaAs"
    spin_degeneracy: int = 2
    valley_degeneracy: int = 1
    surface: str = "pinned"
    temperature_K: float = 0.0

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
        if self.surface not in SURFACES:
            raise RgftransError(f"surface {self.surface!r} is not one of 'pinned' (exposed surface at a fixed "
                                "potential) or 'frozen' (exposed surface charge fixed)")
        t = self.temperature_K
        if not (isinstance(t, (int, float)) and math.isfinite(t) and 0.0 <= t <= 400.0):
            raise RgftransError(f"heterostructure temperature_K = {t!r} is outside 0..400 K; give the electron "
                                "temperature in kelvin")

    @classmethod
    def from_doping(cls, *, depth_nm: float, donor_density_cm2: float, setback_nm: float,
                    surface_barrier_meV: float = TYPICAL_SURFACE_BARRIER_MEV,
                    band_offset_meV: float = TYPICAL_BAND_OFFSET_MEV, **kwargs) -> "Heterostructure":
        """The heterostructure whose ungated density follows from a delta-doping layer, as on a grower's sheet.

        Donors (sheet density N_d, all ionised) sit ``setback_nm`` above the 2DEG, inside the barrier whose
        conduction band lies ``band_offset_meV`` above the 2DEG's; the surface's band is pinned
        ``surface_barrier_meV`` above the Fermi level.  Gauss's law across the two sheets and the 2DEG's
        Thomas-Fermi filling (``E_F = n / D``) give, with ``a = e^2 / (eps eps0)``,

            n0 = [a N_d (d - s) - (e phi_s - Delta E_c)] / (a d + 1 / D)

        (the modulation-doping balance; e.g. J. H. Davies, The Physics of Low-Dimensional Semiconductors, CUP
        1998, chapter 9, from memory).  Other keywords as for the class (material, degeneracies, surface,
        temperature).
        """
        probe = cls(depth_nm=depth_nm, density_cm2=1e11, **kwargs)
        d, s = float(depth_nm), float(setback_nm)
        if not (0 < s < d):
            raise RgftransError(f"setback {setback_nm!r} nm must lie between 0 and the depth {depth_nm!r} nm: the "
                                "donors sit between the surface and the 2DEG")
        if not (math.isfinite(donor_density_cm2) and donor_density_cm2 > 0):
            raise RgftransError(f"donor_density_cm2 = {donor_density_cm2!r} must be a positive sheet density in cm^-2")
        a = 4 * math.pi * coulomb_constant_meV_nm(probe.eps_r)  # e^2 / (eps eps0), meV nm
        numerator = a * donor_density_cm2 * NM2_PER_CM2 * (d - s) - (surface_barrier_meV - band_offset_meV)
        n0 = numerator / (a * d + 1.0 / probe.dos_per_meV_nm2) / NM2_PER_CM2
        if n0 <= 1e8:
            raise RgftransError(f"{donor_density_cm2:.3g} cm^-2 donors {setback_nm:g} nm above a 2DEG {depth_nm:g} nm "
                                "deep do not fill it: the surface takes them all; more donors or a deeper 2DEG")
        return cls(depth_nm=depth_nm, density_cm2=n0, **kwargs)

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
    def thermal_energy_meV(self) -> float:
        """k_B T, meV."""
        return _codata.k * self.temperature_K / _codata.e * 1e3

    @property
    def fermi_energy_meV(self) -> float:
        """Chemical potential mu above the ungated band bottom: n0 / D at T = 0, kT ln(exp(n0 / (D kT)) - 1) above."""
        kt = self.thermal_energy_meV
        x = self.density_nm2 / self.dos_per_meV_nm2
        if kt == 0.0:
            return x
        return kt * _log_expm1(x / kt)

    def density_of(self, chemical_potential_meV):
        """Sheet density (nm^-2) of a 2DEG whose band bottom lies ``chemical_potential_meV`` below mu.

        ``D (mu - U)`` where positive at T = 0; ``D kT ln(1 + exp((mu - U) / kT))`` above (the Fermi-Dirac
        integral of a constant 2D density of states).
        """
        x = np.asarray(chemical_potential_meV, float)
        kt = self.thermal_energy_meV
        if kt == 0.0:
            return self.dos_per_meV_nm2 * np.maximum(x, 0.0)
        return self.dos_per_meV_nm2 * kt * np.logaddexp(0.0, x / kt)

    def quantum_capacitance_per_nm2(self) -> float:
        """e^2 dn/dmu of the ungated 2DEG in electrons per meV per nm^2: D at T = 0, D (1 - exp(-n0 / (D kT))) above."""
        kt = self.thermal_energy_meV
        dos = self.dos_per_meV_nm2
        return dos if kt == 0.0 else -dos * math.expm1(-self.density_nm2 / (dos * kt))

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

    def _kinetic(self, n: np.ndarray) -> tuple[float, np.ndarray]:
        """The electrons' free energy per area summed over nodes (meV nm^-2) and its derivative mu_local(n) (meV).

        T = 0: n^2 / (2 D) and n / D.  T > 0: D (kT)^2 [x^2/2 - pi^2/6 + Li2(exp(-x))] with x = n / (D kT), whose
        derivative kT ln(exp(x) - 1) inverts the Fermi-Dirac density of :meth:`density_of` (the dilogarithm from
        the integral of ln(1 - exp(-t)); scipy.special.spence(1 - z) = Li2(z)).
        """
        dos, kt = self.dos_per_meV_nm2, self.thermal_energy_meV
        if kt == 0.0:
            return float(np.sum(n * n)) / (2 * dos), n / dos
        from scipy.special import spence

        x = n / (dos * kt)
        free = dos * kt * kt * (0.5 * x * x - math.pi**2 / 6 + spence(-np.expm1(-x)))
        return float(np.sum(free)), kt * _log_expm1(x)


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
    gate_charge_cm2 : (ny, nx) float ndarray or None
        Frozen surface: the extra electrons per cm^2 the gates carry (0 on the exposed surface); None for a
        pinned surface, whose gate potential is a closed form.
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
    gate_charge_cm2: np.ndarray | None
    iterations: int
    gradient: float
    structure: Heterostructure

    @property
    def depleted(self) -> np.ndarray:
        """Boolean map of the depleted nodes: density below DEPLETED_FRACTION of n0."""
        return self.density_cm2 <= DEPLETED_FRACTION * self.structure.density_cm2

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


def screen(layout, structure: Heterostructure, *, extent_nm, spacing_nm: float, tolerance: float = 1e-6,
           max_iterations: int = 5000, initial: ScreenedPotential | None = None, periodic: bool = False,
           bare=None, extra_meV=None) -> ScreenedPotential:
    """Self-consistent Thomas-Fermi screening of a gate layout by the 2DEG.

    The surface condition (pinned or frozen) and the temperature are the heterostructure's.

    Parameters
    ----------
    layout : GateLayout or None
        The gates (its depth must be the heterostructure's); None with ``bare`` given (pinned surface) or for
        an ungated 2DEG.
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
        Periodic boundary conditions (pinned surface; for checks against infinite-system closed forms).
    bare : (ny, nx) float ndarray, optional
        Pinned surface: a bare potential energy (meV) on the grid instead of the layout's.
    extra_meV : (ny, nx) float ndarray, optional
        A potential energy (meV) added to the gates' in the 2DEG (e.g. a probe shift of one region).

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
    frozen = structure.surface == "frozen"
    kernels = SurfaceKernels(nx, ny, h, d, structure.eps_r, structure.surface, periodic)
    target = np.full((ny, nx), np.nan)
    s_start = np.zeros((ny, nx))
    if frozen:
        if bare is not None:
            raise RgftransError("bare= replaces a pinned surface's closed-form gate potential; with a frozen surface "
                                "the gates enter through their charges: pass them as layout (and any other "
                                "potential as extra_meV)")
        bare = np.zeros((ny, nx))
        if layout is not None:
            bare, s_start = frozen_gate_potential(layout, eps_r=structure.eps_r, x_nm=xs, y_nm=ys)
            target = gate_nodes(layout, xs, ys)
    elif bare is None:
        if layout is None:
            bare = np.zeros((ny, nx))
        else:
            gx, gy = np.meshgrid(xs, ys)
            bare = np.asarray(layout.potential_energy_meV(gx, gy), dtype=float)
    bare = np.asarray(bare, dtype=float)
    if bare.shape != (ny, nx) or not np.all(np.isfinite(bare)):
        raise RgftransError(f"bare potential must be a finite ({ny}, {nx}) array in meV")
    extra = None
    if extra_meV is not None:
        extra = np.asarray(extra_meV, dtype=float)
        if extra.shape != (ny, nx) or not np.all(np.isfinite(extra)):
            raise RgftransError(f"extra_meV must be a finite ({ny}, {nx}) array in meV")
        bare = bare + extra
    # The potential the minimiser adds to the electrons' own: the gates' (pinned) or none (frozen: the gates
    # enter through their charges, started from the unscreened solution's), plus any extra.
    external = bare
    if frozen:
        external = np.zeros((ny, nx)) if extra is None else extra
    mask = np.isfinite(target)
    u_gates = target[mask]
    dos = structure.dos_per_meV_nm2
    n0 = structure.density_nm2
    mu = structure.fermi_energy_meV
    kt = structure.thermal_energy_meV
    scale = n0 / dos  # the energy scale (E_F at T = 0)
    nn = nx * ny
    # Gate charges enter the minimiser as s = stretch * t, so that t's curvature matches the density's and the
    # minimiser's scalar initial Hessian fits both (the diagonal of each block, self-terms of the kernels).
    kt = structure.thermal_energy_meV
    stretch = 1.0
    if frozen:
        diag_n = 1.0 / dos + kernels.coulomb * SELF_TERM * h
        diag_s = COULOMB_MEV_NM / ((structure.eps_r + 1) / 2) * SELF_TERM * h
        stretch = math.sqrt(diag_n / diag_s)
        if kt > 0.0:
            stretch *= n0  # the chemical-potential variables' curvature is that of the densities times n0^2
    s_full = np.zeros((ny, nx))

    # At T = 0 the variables are the densities, bounded below by 0 (depletion is the bound).  Above, the
    # free energy's curvature kT / n diverges as a node empties, which stalls a bounded minimiser; there the
    # variables are the local chemical potentials xi (in units of the energy scale), n = D kT ln(1 + e^(xi/kT)),
    # unbounded, and a depleted node simply has xi far below 0.
    stretch_n = np.ones((ny, nx))

    def densities(w):
        if kt == 0.0:
            return w.reshape(ny, nx), None
        xi = scale * stretch_n * w.reshape(ny, nx)
        return structure.density_of(xi), n0 * stretch_n * _expit(xi / kt)  # n and dn/dw

    def potentials(n, t):
        if not frozen:
            return kernels.electrons(n - n0), None
        s_full[mask] = stretch * t
        return kernels.both(n - n0, s_full)

    # The energy is evaluated relative to a reference point (the start of each minimiser run): with q = (dn, s)
    # and the symmetric kernel, 1/2 q.Kq - 1/2 q0.Kq0 = 1/2 (q - q0).(Kq + Kq0), so every term carries a factor
    # q - q0 and the round-off scales with the change, not with the energy itself -- which would otherwise
    # (large potentials times n0 under the gates) stall the line search near a tight tolerance.
    reference = {}

    def set_reference(v):
        n, _ = densities(v[:nn])
        u_n, u_s = potentials(n, v[nn:])
        reference.update(n=n, u_n=u_n, u_s=u_s, s=stretch * v[nn:], kinetic=structure._kinetic(n)[0])

    def energy_and_gradient(v):
        n, slope = densities(v[:nn])
        t = v[nn:]
        u_n, u_s = potentials(n, t)
        kinetic, mu_local = structure._kinetic(n)
        if slope is not None:
            mu_local = scale * stretch_n * v[:nn].reshape(ny, nx)  # exactly, where ln(exp(x) - 1) of an underflowed n is not
        change = n - reference["n"]
        if slope is None:  # n^2/2D - n'^2/2D = (n - n')(n + n')/2D
            f = np.sum(change * ((n + reference["n"]) / (2 * dos) + external - mu + 0.5 * (u_n + reference["u_n"])))
        else:
            f = kinetic - reference["kinetic"] + np.sum(change * (external - mu + 0.5 * (u_n + reference["u_n"])))
        grad_n = (mu_local + external - mu + u_n) / (scale * n0)
        if slope is not None:
            grad_n = grad_n * slope
        if not frozen:
            return f / (scale * n0), grad_n.ravel()
        s = stretch * t
        on_gates = u_s[mask]
        f += np.sum((s - reference["s"]) * (0.5 * (on_gates + reference["u_s"][mask]) - u_gates))
        grad_t = stretch * (on_gates - u_gates) / (scale * n0)
        return f / (scale * n0), np.concatenate([grad_n.ravel(), grad_t])

    if kt > 0.0:
        # Always through the T = 0 solution at these voltages (cheap, bounded, robust), warm-started if possible.
        usable = initial is not None and initial.potential_meV.shape == (ny, nx)
        initial = screen(layout, replace(structure, temperature_K=0.0), extent_nm=extent_nm, spacing_nm=spacing_nm,
                         tolerance=max(tolerance, 1e-6), max_iterations=max_iterations, periodic=periodic,
                         bare=None if frozen else bare, extra_meV=extra if frozen else None,
                         initial=initial if usable else None)
    if initial is not None and initial.density_cm2.shape == (ny, nx):
        n_start = initial.density_cm2 * NM2_PER_CM2
        if frozen and initial.gate_charge_cm2 is not None:
            s_start = np.where(mask, initial.gate_charge_cm2 * NM2_PER_CM2, 0.0)
    else:
        n_start = structure.density_of(mu - bare)
    if kt == 0.0:
        w_start, bounds_n = np.clip(n_start, 0.0, None).ravel(), [(0.0, None)] * nn
    else:
        # A node whose start lies many kT below mu has no gradient to climb back by, so the start must already
        # put every node on the right side: the local chemical potential mu - U of the T = 0 solution (only
        # nodes within a few kT of the depletion edge move).
        xi_start = mu - initial.potential_meV
        # Each node's variable is stretched by 1 / sqrt(occupation) at the start, which evens out the curvature
        # D f (1 + D f K) of nodes near and far from depletion for the minimiser (capped for empty nodes).
        stretch_n[...] = 1.0 / np.sqrt(np.maximum(_expit(xi_start / kt), OCCUPATION_FLOOR))
        w_start, bounds_n = (xi_start / (scale * stretch_n)).ravel(), [(None, None)] * nn
    start = np.concatenate([w_start, s_start[mask] / stretch])
    bounds = bounds_n + [(None, None)] * int(mask.sum())
    # L-BFGS-B's projected-gradient test ("pgtol") is on the raw gradient: with densities as variables it is
    # (local mu - mu) / (scale * n0) (the tolerance is relative to E_F per n0); with chemical potentials,
    # (local mu - mu) / scale times the occupation (the relative density error).
    gtol = tolerance / n0 if kt == 0.0 else tolerance
    iterations = 0
    for _ in range(RESTARTS):
        set_reference(start)
        result = minimize(energy_and_gradient, start, jac=True, method="L-BFGS-B", bounds=bounds,
                          options={"maxiter": max_iterations - iterations, "gtol": gtol, "ftol": 0.0, "maxcor": 20})
        iterations += int(result.nit)
        n = densities(result.x[:nn])[0]
        u, u_s = potentials(n, result.x[nn:])
        u = external + u
        if kt == 0.0:
            local = n / dos + u - mu  # zero where occupied; >= 0 where depleted (U above mu)
            violation = np.where(n > 0, np.abs(local), np.maximum(-local, 0.0)) / scale
        else:
            violation = np.abs(n - structure.density_of(mu - u)) / n0  # the relative density error
        gradient = float(violation.max())
        if frozen and mask.any():
            gradient = max(gradient, float(np.abs(u_s[mask] - u_gates).max() / scale))
        if gradient <= tolerance or iterations >= max_iterations:
            break
        start = result.x  # stalled (line search at round-off): a fresh run from here, with a new reference
    if gradient > 10 * tolerance:
        raise ComputationFailed(f"screening did not converge: the local chemical potential is off by "
                                f"{gradient:.2g} of E_F after {iterations} iterations ({result.message}); use a "
                                "coarser grid, a larger tolerance or more iterations")
    gate_charge = None
    if frozen:
        gate_charge = np.where(mask, s_full, 0.0) / NM2_PER_CM2
    return ScreenedPotential(x_nm=xs, y_nm=ys, potential_meV=u, bare_potential_meV=bare,
                             density_cm2=n / NM2_PER_CM2, fermi_energy_meV=mu, gate_charge_cm2=gate_charge,
                             iterations=iterations, gradient=gradient, structure=structure)


#: How far past the wide-gate depletion voltage (as a multiple) :func:`depletion_voltage` looks for a gate's own:
#: narrow fingers deplete their 2DEG at 1.5-3 times it (fringing fields), so 6 leaves room.
DEPLETION_SEARCH_FACTOR = 6.0


def depletion_voltage(layout, structure: Heterostructure, gate: str, *, extent_nm, spacing_nm: float,
                      at=None, tolerance_V: float = 2e-3, initial: ScreenedPotential | None = None) -> float:
    """The voltage on one gate at which the band bottom under it reaches mu (the 2DEG there empties).

    The other gates keep their voltages.  The local chemical potential ``mu - U`` at the point is continuous and
    decreasing in the gate's voltage, so its zero is found by Brent's method (scipy.optimize.brentq) to
    ``tolerance_V``, each step a warm-started :func:`screen`.

    Parameters
    ----------
    layout : GateLayout
    structure : Heterostructure
    gate : str
        The gate's name.
    extent_nm, spacing_nm
        The screening grid, as in :func:`screen`.
    at : (x, y) nm, optional
        Where the 2DEG is watched; default a point inside the gate's outline (shapely's representative point).
    tolerance_V : float
    initial : ScreenedPotential, optional
        A solution on the same grid to start from.

    Returns
    -------
    float, V
        The depletion voltage; ``-inf`` when the 2DEG there does not empty down to
        ``DEPLETION_SEARCH_FACTOR`` times the wide-gate value, ``+inf`` when it is empty even at the opposite
        voltage (its neighbours deplete it).
    """
    from scipy.optimize import brentq

    names = layout.names
    if gate not in names:
        raise RgftransError(f"no gate {gate!r} in the layout; its gates are {', '.join(map(repr, names))}")
    shape = layout.gates[names.index(gate)].shape.geometry
    x, y = shape.representative_point().coords[0] if at is None else (float(at[0]), float(at[1]))
    mu = structure.fermi_energy_meV
    last = [initial]

    def margin(volts):
        sol = screen(layout.with_voltages({gate: float(volts)}), structure, extent_nm=extent_nm,
                     spacing_nm=spacing_nm, initial=last[0])
        last[0] = sol
        return mu - float(sol(x, y))

    limit = DEPLETION_SEARCH_FACTOR * structure.depletion_voltage_V()  # negative
    low = margin(limit)
    if low > 0:
        return float("-inf")
    high = margin(-limit)
    if high <= 0:
        return float("inf")
    return float(brentq(margin, limit, -limit, xtol=tolerance_V, rtol=1e-6))
