"""Tests of rgftrans.system.materials against handbook constants.

Sources of the pinned numbers:

* hbar, e, h, m_e: CODATA recommended values as shipped by scipy.constants
  (CODATA 2022 m_e; e and h exact since the 2019 revision of the SI, BIPM,
  *The International System of Units*, 9th ed. (2019), from memory).  The
  2018 set is E. Tiesinga et al., Rev. Mod. Phys. 93, 025010 (2021) (from
  memory); m_e moved between 2018 and 2022 only at ~1e-9 relative, far inside
  the tolerances below.
* t = hbar^2/(2 m* a^2): finite-difference discretisation of the effective-mass
  Hamiltonian, S. Datta, *Electronic Transport in Mesoscopic Systems* (CUP
  1995), ch. 3 (from memory); common practice.
* GaAs m* = 0.067 m_e: I. Vurgaftman, J. R. Meyer, L. R. Ram-Mohan, J. Appl.
  Phys. 89, 5815 (2001) (from memory).  m* = 0.063 m_e is the room-temperature
  value of the Ioffe NSM semiconductor database (from memory).
* 2D density of states m*/(pi hbar^2) (spin-degenerate), E_F = pi hbar^2 n/m*
  and lambda_F = sqrt(2 pi/n): J. H. Davies, *The Physics of Low-Dimensional
  Semiconductors* (CUP 1998) (from memory); textbook facts.
* The numbers themselves (t = 22.746162 meV etc.) are our own evaluation of
  those formulas with scipy.constants, checked by a second independent
  calculation; they are not quoted from a publication.

Tolerances.  The table quotes most values to 7-8 significant digits, so its
rounding alone is up to ~1e-7 relative (56.0499 nm: 9e-7); we compare at
REL_TABLE = 1e-6.  k_F = 0.112100 nm^-1 is quoted too coarsely for that and is
compared to half a unit in its last digit instead.  The conductance quantum and its inverse are quoted to 13
digits and depend only on the exact e and h, so they are compared at
REL_EXACT = 1e-12.
"""

import math

import numpy as np
import pytest

from rgftrans.errors import LatticeError, MaterialError
from rgftrans.system.materials import (
    CONDUCTANCE_QUANTUM_S,
    MATERIALS,
    Material,
    conductance_S,
    fermi_energy_meV,
    fermi_wavelength_nm,
    hopping_meV,
    material,
)

REL_TABLE = 1e-6  # table values quoted to 7-8 significant digits
REL_EXACT = 1e-12  # 13-digit values fixed by the exact SI e and h

GAAS_M_EFF = 0.067


# --- hopping t = hbar^2 / (2 m* a^2) ---------------------------------------


@pytest.mark.parametrize(
    ("m_eff", "a_nm", "t_expected_meV"),
    [
        # t = hbar^2/(2 m* a^2) (Datta 1995 ch. 3, from memory) with CODATA constants, m* = 0.067 for GaAs
        # (Vurgaftman et al. 2001, from memory); our evaluation, 8 digits -> REL_TABLE.  GaAs, a = 5 nm:
        (0.067, 5.0, 22.746162),
        # GaAs, a = 10 nm (same formula and constants):
        (0.067, 10.0, 5.686540),
        # m* = 0.067, a = 2 nm and 1 nm:
        (0.067, 2.0, 142.163512),
        (0.067, 1.0, 568.654046),
        # Ioffe NSM database room-temperature m* = 0.063 (from memory), a = 5 and 10 nm:
        (0.063, 5.0, 24.190363),
        (0.063, 10.0, 6.047591),
    ],
)
def test_hopping_matches_reference_table(m_eff, a_nm, t_expected_meV):
    assert hopping_meV(m_eff, a_nm) == pytest.approx(t_expected_meV, rel=REL_TABLE)


def test_hopping_free_electron_prefactor():
    # hbar^2 / (2 m_e) = 0.038099821 eV nm^2 from CODATA (scipy.constants; our evaluation, 8 digits),
    # i.e. t(m* = 1, a = 1 nm) = 38.099821 meV; REL_TABLE for the 8-digit rounding.
    assert hopping_meV(1.0, 1.0) == pytest.approx(38.099821, rel=REL_TABLE)


def test_hopping_scales_as_inverse_square_of_spacing():
    # Invariant of t = hbar^2 / (2 m* a^2) (common practice, no source): halving a quadruples t;
    # 1e-14 relative = a few roundings of one division.
    assert hopping_meV(GAAS_M_EFF, 5.0) / hopping_meV(GAAS_M_EFF, 10.0) == pytest.approx(
        4.0, rel=1e-14
    )


@pytest.mark.parametrize("a_nm", [0.0, -5.0, math.nan, math.inf, "five"])
def test_hopping_rejects_bad_lattice_constant(a_nm):
    with pytest.raises(LatticeError, match=r"lattice constant must be .*; pass e\.g\. 5\.0"):
        hopping_meV(GAAS_M_EFF, a_nm)


@pytest.mark.parametrize("m_eff", [0.0, -0.067, math.nan, math.inf, None])
def test_hopping_rejects_bad_effective_mass(m_eff):
    with pytest.raises(MaterialError, match=r"effective mass must be .*0\.067 for GaAs"):
        hopping_meV(m_eff, 5.0)


# --- conductance quantum -----------------------------------------------------


def test_conductance_quantum():
    # 2e^2/h = 7.748091729864e-5 S, fixed by the exact e and h of the 2019 SI (BIPM SI Brochure, 9th ed.
    # 2019, from memory); 13 digits -> REL_EXACT.
    assert CONDUCTANCE_QUANTUM_S == pytest.approx(7.748091729864e-5, rel=REL_EXACT)


def test_resistance_quantum():
    # h/(2e^2) = 12906.403729652 ohm, exact e and h of the 2019 SI (from memory); 14 digits -> REL_EXACT.
    assert 1.0 / CONDUCTANCE_QUANTUM_S == pytest.approx(12906.403729652, rel=REL_EXACT)


def test_conductance_siemens_of_scalar_and_array():
    # G = (2e^2/h) T (Landauer, IBM J. Res. Dev. 1, 223 (1957), from memory) with 2e^2/h exact in the
    # 2019 SI = 7.748091729864e-5 S per unit transmission; REL_EXACT.
    assert conductance_S(3.0) == pytest.approx(3 * 7.748091729864e-5, rel=REL_EXACT)
    transmission = np.array([0.0, 0.5, 2.0])
    conductance = conductance_S(transmission)
    assert conductance.shape == transmission.shape
    np.testing.assert_allclose(conductance, transmission * 7.748091729864e-5, rtol=REL_EXACT)


# --- 2DEG Fermi energy and wavelength -----------------------------------------


def test_fermi_energy_gaas():
    # E_F = pi hbar^2 n / m* (Davies 1998, from memory) at n = 2e11 cm^-2, m* = 0.067 (Vurgaftman
    # et al. 2001, from memory): 7.145917 meV, our evaluation with CODATA constants; 7 digits -> REL_TABLE.
    assert fermi_energy_meV(2e11, GAAS_M_EFF) == pytest.approx(7.145917, rel=REL_TABLE)


def test_fermi_energy_follows_gaas_density_of_states():
    # GaAs 2D DOS m*/(pi hbar^2), spin-degenerate (Davies 1998, from memory), = 2.798801e10
    # cm^-2 meV^-1 (our evaluation, CODATA), so n / E_F must equal it; 7 digits -> REL_TABLE.
    dos = 2e11 / fermi_energy_meV(2e11, GAAS_M_EFF)
    assert dos == pytest.approx(2.798801e10, rel=REL_TABLE)


def test_fermi_wavelength():
    # lambda_F = sqrt(2 pi / n) for a spin-degenerate 2DEG (Davies 1998, from memory);
    # n = 2e11 cm^-2 -> 56.0499 nm (our evaluation)
    # (quoted to 6 digits: its rounding is 9e-7 relative, inside REL_TABLE).
    assert fermi_wavelength_nm(2e11) == pytest.approx(56.0499, rel=REL_TABLE)


def test_fermi_wavevector():
    # k_F = sqrt(2 pi n) (Davies 1998, from memory); n = 2e11 cm^-2 -> 0.112100 nm^-1 (our evaluation).
    # Quoted to 6 decimals only (rounding up to 4.5e-6 relative, above REL_TABLE),
    # so compared to half a unit in its last digit.
    assert 2 * math.pi / fermi_wavelength_nm(2e11) == pytest.approx(0.112100, abs=0.5e-6)


def test_fermi_energy_is_parabolic_band_at_fermi_wavevector():
    # Invariant: E_F = hbar^2 k_F^2 / (2 m*) = t (k_F a)^2 for any lattice constant a (parabolic band,
    # common practice, no source); 1e-13 relative = rounding of a few products.
    a_nm = 5.0
    k_fermi = 2 * math.pi / fermi_wavelength_nm(2e11)
    expected = hopping_meV(GAAS_M_EFF, a_nm) * (k_fermi * a_nm) ** 2
    assert fermi_energy_meV(2e11, GAAS_M_EFF) == pytest.approx(expected, rel=1e-13)


@pytest.mark.parametrize("density_cm2", [0.0, -2e11, math.nan, math.inf, "high"])
def test_fermi_functions_reject_bad_density(density_cm2):
    with pytest.raises(MaterialError, match=r"2DEG density must be .*; pass e\.g\. 2e11"):
        fermi_energy_meV(density_cm2, GAAS_M_EFF)
    with pytest.raises(MaterialError, match=r"2DEG density must be .*; pass e\.g\. 2e11"):
        fermi_wavelength_nm(density_cm2)


def test_fermi_energy_rejects_bad_mass():
    with pytest.raises(MaterialError, match=r"effective mass must be positive and finite"):
        fermi_energy_meV(2e11, -0.067)


# --- presets and lookup ---------------------------------------------------------


@pytest.mark.parametrize(
    ("name", "m_eff", "g_factor", "eps_r"),
    [
        # Values as specified for the presets; each preset's .source string names its handbook source
        # (from memory), asserted below.  Exact equality: the presets are stored constants.
        ("GaAs", 0.067, -0.44, 12.9),
        ("InAs", 0.026, -14.9, 15.15),
        ("InSb", 0.0135, -51.0, 16.8),
        ("Si", 0.19, 2.0, 11.7),
    ],
)
def test_presets(name, m_eff, g_factor, eps_r):
    preset = MATERIALS[name]
    assert (preset.name, preset.m_eff, preset.g_factor, preset.eps_r) == (
        name,
        m_eff,
        g_factor,
        eps_r,
    )
    assert "(from memory)" in preset.source


def test_gaas_source_names_handbook_and_room_temperature_value():
    source = MATERIALS["GaAs"].source
    assert "J. Appl. Phys. 89, 5815 (2001)" in source
    assert "0.063" in source


@pytest.mark.parametrize(("query", "name"), [("GaAs", "GaAs"), ("gaas", "GaAs"), ("INSB", "InSb"), (" si ", "Si")])
def test_lookup_ignores_case(query, name):
    assert material(query) is MATERIALS[name]


@pytest.mark.parametrize(("query", "suggestion"), [("GaSb", "GaAs"), ("InAz", "InAs"), ("InSbb", "InSb")])
def test_lookup_suggests_close_name(query, suggestion):
    with pytest.raises(
        MaterialError,
        match=rf"unknown material '{query}'; did you mean '{suggestion}'\? known materials: GaAs, InAs, InSb, Si",
    ):
        material(query)


def test_lookup_without_close_name_lists_known():
    with pytest.raises(MaterialError, match=r"unknown material 'diamond'; known materials: GaAs"):
        material("diamond")


def test_lookup_rejects_non_string():
    with pytest.raises(MaterialError, match=r"material name must be a string, got 3"):
        material(3)


@pytest.mark.parametrize(
    ("field", "value", "pattern"),
    [
        ("m_eff", 0.0, r"effective mass must be positive and finite"),
        ("g_factor", math.nan, r"g-factor is not finite"),
        ("eps_r", 0.5, r"relative permittivity must be finite and >= 1, got eps_r = 0\.5"),
    ],
)
def test_material_rejects_unphysical_parameters(field, value, pattern):
    params = dict(name="X", m_eff=0.067, g_factor=-0.44, eps_r=12.9, source="test")
    params[field] = value
    with pytest.raises(MaterialError, match=pattern):
        Material(**params)


def test_material_is_frozen():
    with pytest.raises(AttributeError):
        MATERIALS["GaAs"].m_eff = 0.063  # type: ignore[misc]
