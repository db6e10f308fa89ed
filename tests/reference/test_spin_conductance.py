"""Conductance units with and without explicit spin orbitals.

Landauer-Büttiker: a spinless model's transmission T is per spin and each of
its channels stands for both spins, G = (2e^2/h) T; a model with two spin
orbitals per site counts both spins in T, G = (e^2/h) T.  A clean wire at
B = 0 therefore has the same conductance either way, and a Zeeman-split wire
steps by e^2/h, i.e. by 1/2 in units of 2e^2/h (half-integer plateaus;
common practice, no source; e.g. Datta, Electronic Transport in Mesoscopic
Systems, 1995, ch. 2, from memory).  The strip's subband thresholds are
eps_n -/+ 2t with eps_n = -2t cos(n pi / (W + 1)) (tight-binding strip
spectrum, common practice, no source), shifted by +/- (g/2) mu_B B for the two
spins; mu_B is CODATA from scipy.constants.

Tight-binding units: a = 1 nm, t = 1 meV; ``Device`` puts the band bottom at
0 (onsite 4t), so a reference energy E (onsite 0) is E + 4 for the package.
"""

import numpy as np
import pytest
from scipy import constants

from rgftrans.system.device import Device, Lead
from rgftrans.system.fields import Disorder, MagneticField
from rgftrans.system.geometry import rectangle
from rgftrans.system.lattices import square
from rgftrans.system.materials import CONDUCTANCE_QUANTUM_S, Material
from rgftrans.transport.rgf import four_terminal_resistance, transmission, transmission_matrix
from rgftrans.analysis.thermal import conductance_on_grid, landauer_current, thermal_conductance

#: Device onsite 4t against the onsite-0 reference spectrum.
ONSITE_SHIFT = 4.0
#: Strip width (rows) and length (columns).
WIDTH, LENGTH = 6, 5
#: The two models differ only in roundoff: a spinful H at B = 0 is two copies of the spinless one.
TOL_SAME = 1e-9
#: Away from thresholds a clean strip transmits its channel count to 1e-8 (reference tests of the staircase).
TOL_PLATEAU = 1e-8
#: Energies closer than this to a threshold are not used (the count is ambiguous there).
THRESHOLD_GAP = 1e-3
#: e^2/h in S from scipy.constants (CODATA; e and h exact in the 2019 SI).
E2_OVER_H_S = constants.e**2 / constants.h
#: mu_B in meV/T (CODATA).
MU_B_MEV_PER_T = constants.physical_constants["Bohr magneton in eV/T"][0] * 1e3
#: A large g-factor so that a moderate field splits the subbands visibly (material invented for the test).
G_FACTOR = -20.0
B_TESLA = 0.3 / (abs(G_FACTOR) * MU_B_MEV_PER_T)  # Zeeman splitting |g| mu_B B = 0.3 t
TEST_MATERIAL = Material("test-large-g", m_eff=0.067, g_factor=G_FACTOR, eps_r=12.9,
                         source="invented for a unit test")


def strip(*, spin, field=0.0, potential=0.0):
    region = rectangle(-0.4, -0.4, LENGTH - 1 + 0.4, WIDTH - 1 + 0.4)
    leads = [Lead("L", "left", (0, WIDTH - 1)), Lead("R", "right", (0, WIDTH - 1))]
    return Device(region, leads, lattice=square(1.0), hopping=1.0, spin=spin, field=field,
                  material=TEST_MATERIAL, potential=potential).discretise()


def levels():
    return -2.0 * np.cos(np.arange(1, WIDTH + 1) * np.pi / (WIDTH + 1))


def spin_resolved_count(energy, splitting):
    """Open channels summed over both spins: spin s sees the subbands shifted by s * splitting / 2."""
    eps = levels()
    return sum(int(np.count_nonzero(np.abs(energy - s * splitting / 2 - eps) < 2.0)) for s in (-1, 1))


def energies_off_thresholds(splitting):
    eps = levels()
    edges = np.concatenate([eps - 2 + s * splitting / 2 for s in (-1, 1)] + [eps + 2 + s * splitting / 2
                                                                           for s in (-1, 1)])
    grid = np.linspace(-3.99, 3.99, 400)
    keep = np.min(np.abs(grid[:, None] - edges[None, :]), axis=1) > THRESHOLD_GAP
    return grid[keep]


def test_model_records_its_spin_degeneracy():
    assert strip(spin=False).spin_degeneracy == 2
    assert strip(spin=True).spin_degeneracy == 1


def test_clean_wire_same_conductance_with_and_without_spin_orbitals():
    e = energies_off_thresholds(0.0) + ONSITE_SHIFT
    plain = transmission(strip(spin=False), e)
    spinful = transmission(strip(spin=True), e)
    # T counts both spins with explicit spin orbitals: twice the spinless T (exact up to roundoff).
    assert np.allclose(spinful.transmission, 2 * plain.transmission, rtol=0, atol=TOL_SAME)
    assert np.allclose(spinful.conductance_g0, plain.conductance_g0, rtol=0, atol=TOL_SAME)
    assert np.allclose(spinful.conductance_S, plain.conductance_S, rtol=0,
                       atol=TOL_SAME * CONDUCTANCE_QUANTUM_S)
    # Both equal the channel count N(E) in units of 2e^2/h, i.e. 2 N e^2/h in siemens.
    n = np.array([spin_resolved_count(x - ONSITE_SHIFT, 0.0) for x in e]) / 2
    assert np.allclose(plain.conductance_g0, n, rtol=0, atol=TOL_PLATEAU)
    assert np.allclose(spinful.conductance_S, 2 * n * E2_OVER_H_S, rtol=1e-12, atol=TOL_PLATEAU * 1e-4)


def test_zeeman_split_wire_steps_by_half_a_quantum():
    splitting = abs(G_FACTOR) * MU_B_MEV_PER_T * B_TESLA
    e = energies_off_thresholds(splitting)
    res = transmission(strip(spin=True, field=MagneticField(B_TESLA, orbital=False)), e + ONSITE_SHIFT)
    expected = np.array([spin_resolved_count(x, splitting) for x in e]) / 2
    assert np.allclose(res.conductance_g0, expected, rtol=0, atol=TOL_PLATEAU)
    # The half-integer plateaus are there (each spin's subband opens on its own) ...
    half = np.isclose(expected % 1.0, 0.5)
    assert np.count_nonzero(half) > 20
    # ... and neighbouring plateaus differ by exactly 1/2 in units of 2e^2/h.
    steps = np.diff(np.unique(np.round(res.conductance_g0, 6)))
    assert np.allclose(steps, 0.5, atol=1e-6)  # conductances rounded to 6 decimals above: 1e-6


def cross(*, spin):
    arm = 6
    region = rectangle(-0.4, arm - 0.4, 3 * arm - 0.6, 2 * arm - 0.6) | rectangle(arm - 0.4, -0.4, 2 * arm - 0.6,
                                                                                 3 * arm - 0.6)
    span = (arm, 2 * arm - 1)
    leads = [Lead("w", "left", span), Lead("e", "right", span), Lead("n", "top", span), Lead("s", "bottom", span)]
    return Device(region, leads, lattice=square(1.0), hopping=1.0, spin=spin,
                  field=MagneticField(2.0, orbital=True, zeeman=False),
                  disorder=Disorder(0.5, seed=3)).discretise()


def test_multi_terminal_conductance_and_resistances_agree():
    e = [ONSITE_SHIFT - 2.7, ONSITE_SHIFT - 1.3]
    plain = transmission_matrix(cross(spin=False), e)
    spinful = transmission_matrix(cross(spin=True), e)
    g_plain, g_spin = plain.conductance_matrix(), spinful.conductance_matrix()
    assert np.allclose(g_spin, g_plain, rtol=0, atol=TOL_SAME)
    for k in range(len(e)):
        for current, voltage in (((0, 1), (2, 3)), ((0, 1), (0, 1)), ((2, 3), (0, 1))):
            r_plain = four_terminal_resistance(g_plain[k], current, voltage)
            r_spin = four_terminal_resistance(g_spin[k], current, voltage)
            assert r_spin == pytest.approx(r_plain, rel=1e-8, abs=1e-6)  # ohms


def test_temperature_and_bias_agree():
    e = np.linspace(-2.2, 5.0, 1201)  # package energies, band bottom at 0; spacing 0.006 meV < kT/2
    plain = transmission(strip(spin=False, potential=0.3), e)
    spinful = transmission(strip(spin=True, potential=0.3), e)
    mu, temp = 1.4, 2.0  # meV, K (kT = 0.17 meV; the grid covers mu +/- 20 kT)
    g_plain = thermal_conductance(e, plain.transmission, mu, temp).conductance_g0
    g_spin = thermal_conductance(e, spinful.transmission, mu, temp, spin_degeneracy=1).conductance_g0
    assert g_spin == pytest.approx(g_plain, abs=TOL_SAME)
    i_plain = landauer_current(e, plain.transmission, mu, 2e-4, temp).current_A
    i_spin = landauer_current(e, spinful.transmission, mu, 2e-4, temp, spin_degeneracy=1).current_A
    assert i_spin == pytest.approx(i_plain, rel=1e-9)
    grid_plain = conductance_on_grid(e, plain.transmission, [0.0, temp])
    grid_spin = conductance_on_grid(e, spinful.transmission, [0.0, temp], spin_degeneracy=1)
    assert np.allclose(grid_spin, grid_plain, rtol=0, atol=TOL_SAME, equal_nan=True)


def test_wrong_spin_degeneracy_is_refused():
    from rgftrans.errors import RgftransError
    from rgftrans.system.materials import conductance_g0

    with pytest.raises(RgftransError, match="spin_degeneracy must be 1"):
        conductance_g0(1.0, 4)
