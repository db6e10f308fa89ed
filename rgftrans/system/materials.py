"""Semiconductor material parameters and the effective-mass constants built on them.

A :class:`Material` holds the conduction-band effective mass, the electron
g-factor and the static relative permittivity of a host semiconductor.
Presets for the usual 2DEG hosts live in :data:`MATERIALS` and are looked up
by :func:`material`.  The functions below turn them into the numbers a
tight-binding model needs:

* :func:`hopping_meV`: t = ħ² / (2 m* a²), the hopping of the effective-mass
  discretisation on a lattice of spacing a;
* :func:`fermi_energy_meV` and :func:`fermi_wavelength_nm` for a
  spin-degenerate 2DEG of given sheet density;
* :data:`CONDUCTANCE_QUANTUM_S`, :func:`conductance_g0` and
  :func:`conductance_S`: G = (g_s e²/h) T with g_s = 2 for a spinless
  model and 1 when the spin orbitals are explicit.

All physical constants come from :mod:`scipy.constants` (CODATA; e and h are
exact in the 2019 SI).  Units: masses in units of the free-electron mass
m_e, lengths in nm, energies in meV, sheet densities in cm⁻², conductances
in S.
"""

from __future__ import annotations

import difflib
import math
from dataclasses import dataclass

import numpy as np
from scipy import constants

from rgftrans.constants import CONDUCTANCE_QUANTUM_S
from rgftrans.errors import LatticeError, MaterialError

__all__ = [
    "CONDUCTANCE_QUANTUM_S",
    "MATERIALS",
    "Material",
    "conductance_g0",
    "conductance_S",
    "fermi_energy_meV",
    "fermi_wavelength_nm",
    "hopping_meV",
    "material",
]


_NM = 1e-9  # metres per nanometre
_MEV = 1e-3 * constants.e  # joules per meV
_PER_CM2_IN_PER_M2 = 1e4  # 1 cm⁻² = 1e4 m⁻²


#: Effective masses accepted (units of m_e): the lightest conduction bands are near 0.01 m_e (InSb 0.0135),
#: heavy-fermion bands reach about 100 m_e; outside is a unit slip (common practice, no source).
M_EFF_RANGE = (1e-3, 1e2)


def _check_m_eff(m_eff: float) -> float:
    """Return a positive finite effective mass, or raise MaterialError."""
    try:
        value = float(m_eff)
    except (TypeError, ValueError):
        raise MaterialError(
            f"effective mass must be a number in units of m_e, got {m_eff!r}; "
            "pass e.g. 0.067 for GaAs"
        ) from None
    if not (math.isfinite(value) and value > 0.0):
        raise MaterialError(
            f"effective mass must be positive and finite, got m_eff = {m_eff!r} m_e; "
            "pass e.g. 0.067 for GaAs"
        )
    if not M_EFF_RANGE[0] <= value <= M_EFF_RANGE[1]:
        raise MaterialError(
            f"effective mass {value:g} m_e is outside {M_EFF_RANGE[0]:g}..{M_EFF_RANGE[1]:g} m_e, implausible for a "
            "conduction band; it is in units of the free-electron mass (e.g. 0.067 for GaAs)"
        )
    return value


def _check_density(density_cm2: float) -> float:
    """Return a positive finite sheet density in cm⁻², or raise MaterialError."""
    try:
        value = float(density_cm2)
    except (TypeError, ValueError):
        raise MaterialError(
            f"2DEG density must be a number in cm^-2, got {density_cm2!r}; pass e.g. 2e11"
        ) from None
    if not (math.isfinite(value) and value > 0.0):
        raise MaterialError(
            f"2DEG density must be positive and finite, got {density_cm2!r} cm^-2; "
            "pass e.g. 2e11"
        )
    return value


@dataclass(frozen=True)
class Material:
    """Conduction-band parameters of a semiconductor.

    Parameters
    ----------
    name : str
        Display name, e.g. ``"GaAs"``.
    m_eff : float
        Conduction-band effective mass in units of the free-electron mass
        m_e (in-plane mass for a 2DEG).
    g_factor : float
        Electron g-factor (dimensionless; negative in GaAs, InAs, InSb).
    eps_r : float
        Static relative permittivity (dimensionless, >= 1).
    source : str
        Where the numbers come from, with a note on how well they are checked.
    """

    name: str
    m_eff: float
    g_factor: float
    eps_r: float
    source: str

    def __post_init__(self) -> None:
        _check_m_eff(self.m_eff)
        if not math.isfinite(self.g_factor):
            raise MaterialError(
                f"material {self.name!r}: g-factor is not finite ({self.g_factor!r}); "
                "give a finite number"
            )
        if not (math.isfinite(self.eps_r) and self.eps_r >= 1.0):
            raise MaterialError(
                f"material {self.name!r}: relative permittivity must be finite and >= 1, "
                f"got eps_r = {self.eps_r!r}; give the static dielectric constant"
            )


# Handbook values.  The citations were written from memory: check volume,
# page and table before quoting them elsewhere.
_VMR = "I. Vurgaftman, J. R. Meyer, L. R. Ram-Mohan, J. Appl. Phys. 89, 5815 (2001)"

MATERIALS: dict[str, Material] = {
    m.name: m
    for m in (
        Material(
            name="GaAs",
            m_eff=0.067,
            g_factor=-0.44,
            eps_r=12.9,
            source=(
                f"m* = 0.067 m_e, low-temperature recommended value: {_VMR} (from memory); "
                "g = -0.44 and eps_r = 12.9 are the standard low-temperature handbook values "
                "(from memory). The Ioffe NSM room-temperature database lists m* = 0.063 m_e "
                "(from memory); rgftrans uses 0.067."
            ),
        ),
        Material(
            name="InAs",
            m_eff=0.026,
            g_factor=-14.9,
            eps_r=15.15,
            source=(
                f"m* = 0.026 m_e: {_VMR} (from memory); g = -14.9 and eps_r = 15.15 are "
                "standard handbook values (from memory)."
            ),
        ),
        Material(
            name="InSb",
            m_eff=0.0135,
            g_factor=-51.0,
            eps_r=16.8,
            source=(
                f"m* = 0.0135 m_e: {_VMR} (from memory); g = -51 and eps_r = 16.8 are "
                "standard handbook values (from memory)."
            ),
        ),
        Material(
            name="Si",
            m_eff=0.19,
            g_factor=2.0,
            eps_r=11.7,
            source=(
                "(001) Si 2DEG: in-plane (transverse) mass 0.19 m_e of the two valleys with "
                "heavy mass along the growth axis, g = 2.0, eps_r = 11.7: T. Ando, "
                "A. B. Fowler, F. Stern, Rev. Mod. Phys. 54, 437 (1982) (from memory)."
            ),
        ),
    )
}


def material(name: str) -> Material:
    """Look up a preset material by name, ignoring case.

    Parameters
    ----------
    name : str
        One of the keys of :data:`MATERIALS` (``"GaAs"``, ``"InAs"``,
        ``"InSb"``, ``"Si"``), in any case.

    Returns
    -------
    Material

    Examples
    --------
    >>> material("gaas").m_eff
    0.067
    """
    known = ", ".join(MATERIALS)
    if not isinstance(name, str):
        raise MaterialError(
            f"material name must be a string, got {name!r}; pick one of {known}"
        )
    by_lower = {key.lower(): preset for key, preset in MATERIALS.items()}
    key = name.strip().lower()
    if key in by_lower:
        return by_lower[key]
    close = difflib.get_close_matches(key, list(by_lower), n=1)
    hint = f"did you mean {by_lower[close[0]].name!r}? " if close else ""
    raise MaterialError(
        f"unknown material {name!r}; {hint}known materials: {known}; "
        "pick one of these or build a Material(...) with your own values"
    )


def hopping_meV(m_eff: float, a_nm: float) -> float:
    """Hopping energy of the effective-mass discretisation, t = ħ² / (2 m* a²).

    Discretising -ħ²∇²/(2m*) by central differences on a lattice of spacing
    a gives nearest-neighbour hopping -t and onsite energy 2 d t in d
    dimensions, so that the band bottom sits at zero energy.

    Parameters
    ----------
    m_eff : float
        Effective mass in units of the free-electron mass m_e, > 0.
    a_nm : float
        Lattice constant in nm, > 0.

    Returns
    -------
    t : float, meV

    Examples
    --------
    >>> round(hopping_meV(0.067, 5.0), 6)
    22.746162
    """
    m_eff = _check_m_eff(m_eff)
    try:
        a = float(a_nm)
    except (TypeError, ValueError):
        raise LatticeError(
            f"lattice constant must be a number in nm, got {a_nm!r}; pass e.g. 5.0"
        ) from None
    if not (math.isfinite(a) and a > 0.0):
        raise LatticeError(
            f"lattice constant must be positive and finite, got a = {a_nm!r} nm; pass e.g. 5.0"
        )
    t_joule = constants.hbar**2 / (2.0 * m_eff * constants.m_e * (a * _NM) ** 2)
    return t_joule / _MEV


def _check_spin_degeneracy(spin_degeneracy) -> int:
    if spin_degeneracy not in (1, 2) or isinstance(spin_degeneracy, bool):
        raise MaterialError(
            f"spin_degeneracy must be 1 (explicit spin orbitals, T counts both spins) or 2 (spinless model, "
            f"T per spin), got {spin_degeneracy!r}"
        )
    return int(spin_degeneracy)


def conductance_g0(transmission, spin_degeneracy: int = 2):
    """Landauer conductance in units of 2e²/h: G / (2e²/h) = (g_s / 2) T.

    A spinless model's transmission is per spin and stands for both spins
    (g_s = 2, G = (2e²/h) T); with explicit spin orbitals the transmission
    already counts both spins (g_s = 1, G = (e²/h) T), so a clean wire gives
    the same conductance either way (Landauer-Büttiker; common practice, no
    source).

    Parameters
    ----------
    transmission : float or ndarray
        Total transmission T summed over channels.
    spin_degeneracy : {1, 2}
        :attr:`rgftrans.system.device.TightBindingModel.spin_degeneracy`.

    Returns
    -------
    G : float or ndarray, 2e²/h

    Examples
    --------
    >>> float(conductance_g0(2.0, 1)), float(conductance_g0(2.0, 2))
    (1.0, 2.0)
    """
    return np.multiply(transmission, 0.5 * _check_spin_degeneracy(spin_degeneracy))


def conductance_S(transmission: float | np.ndarray, spin_degeneracy: int = 2) -> float | np.ndarray:
    """Landauer conductance G = (g_s e²/h) T in siemens (see :func:`conductance_g0`).

    Parameters
    ----------
    transmission : float or ndarray
        Total transmission T summed over channels.
    spin_degeneracy : {1, 2}
        2 for a spinless model (T per spin), 1 with explicit spin orbitals.

    Returns
    -------
    G : float or ndarray, S
        Same shape as ``transmission``.
    """
    return conductance_g0(transmission, spin_degeneracy) * CONDUCTANCE_QUANTUM_S


def fermi_energy_meV(density_cm2: float, m_eff: float) -> float:
    """Fermi energy of a spin-degenerate 2DEG, E_F = π ħ² n / m*.

    Follows from n = E_F m* / (π ħ²), the constant density of states
    m* / (π ħ²) of a parabolic band with two spin directions, measured from
    the band bottom.

    Parameters
    ----------
    density_cm2 : float
        Sheet density n in cm⁻², > 0.
    m_eff : float
        Effective mass in units of the free-electron mass m_e, > 0.

    Returns
    -------
    E_F : float, meV
    """
    n = _check_density(density_cm2) * _PER_CM2_IN_PER_M2
    m_eff = _check_m_eff(m_eff)
    e_fermi_joule = math.pi * constants.hbar**2 * n / (m_eff * constants.m_e)
    return e_fermi_joule / _MEV


def fermi_wavelength_nm(density_cm2: float) -> float:
    """Fermi wavelength of a spin-degenerate 2DEG, λ_F = 2π / k_F = sqrt(2π / n).

    With two spin directions k_F = sqrt(2π n), independent of the mass.

    Parameters
    ----------
    density_cm2 : float
        Sheet density n in cm⁻², > 0.

    Returns
    -------
    lambda_F : float, nm
    """
    n_per_m2 = _check_density(density_cm2) * _PER_CM2_IN_PER_M2
    return math.sqrt(2.0 * math.pi / n_per_m2) / _NM
