"""Tests of rgftrans.transport.rgf: RGF transmission against a direct solve, invariants, energy handling.

Outside sources (all from memory):

* Caroli / Fisher-Lee: T = Tr[Gamma_R G_RL Gamma_L G_RL^dag] (C. Caroli et al.,
  J. Phys. C 4, 916 (1971); D. S. Fisher & P. A. Lee, Phys. Rev. B 23, 6851
  (1981)).  The reference path ``rgftrans.transport.direct.transmission_direct``
  evaluates it from the interface block of G = (E - H - Sigma)^-1 obtained by
  scipy.sparse.linalg.splu (SuperLU), sharing none of the recursion.
* Landauer-Buettiker unitarity: the flux-normalised S matrix is unitary, so
  the reflection and transmission out of lead L add up to its channel count,
  T_RL + R_LL = N_L, and 0 <= T <= min(N_L, N_R)
  (M. Buettiker, Phys. Rev. Lett. 57, 1761 (1986)).
* Onsager reciprocity: without a magnetic field H is real symmetric, so
  T_RL = T_LR (L. Onsager, Phys. Rev. 38, 2265 (1931); Buettiker 1986).
* A clean straight strip between leads of its own width transmits every open
  channel perfectly, T = N (ballistic conductor, S. Datta, "Electronic
  Transport in Mesoscopic Systems", CUP 1995, ch. 2).
* Channel thresholds of a W-row strip (onsite 4t, hopping -t): subband
  bottoms E_n = 2t - 2t cos(n pi / (W + 1)) (Datta 1995).
* 2e^2/h from scipy.constants (CODATA; e and h exact in the 2019 SI),
  7.748091729864e-5 S (our evaluation; exact since the 2019 SI, BIPM SI
  Brochure, 9th ed. 2019, from memory).
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest
from hypothesis import HealthCheck, assume, given, settings
from hypothesis import strategies as st
from scipy import constants

from builders import (
    T_HOP,
    default_slicing,
    in_band_energies,
    lead_thresholds,
    merged_pairs_slicing,
    one_layer_slicing,
    random_device,
    small_devices,
    strip_device,
    swapped_leads,
)
from rgftrans.transport.direct import scattering_matrix, transmission_direct
from rgftrans.errors import EnergyError, LeadError, ThresholdWarning
from rgftrans.transport.rgf import layer_blocks, transmission

#: RGF vs direct LU.  Both are exact up to round-off: RGF inverts ~L dense
#: layer blocks in sequence, SuperLU factorises the whole matrix once.  For
#: devices of <= 150 sites at in-band energies the round-off is ~1e-14
#: (observed <= 3e-14); 1e-9 leaves five orders of margin yet catches any
#: wrong coupling, sign or missing term, which shifts T at order 1e-2 or more.
#: Relative to max(T, 1): T is in units of one channel, and tunnelling
#: devices with T ~ 1e-30 are compared against the channel scale.
REL_RGF_DIRECT = 1e-9
#: Unitarity / reciprocity / bounds: same round-off argument (S from one LU
#: solve and a least-squares mode expansion, observed <= 1e-14).
TOL_INVARIANT = 1e-9
#: Energies closer than this (meV, t = 1) to a lead threshold are excluded
#: from the invariant tests: the channel count is ambiguous there, and the
#: threshold case has its own test below.
THRESHOLD_MARGIN = 1e-6

N_RANDOM_DEVICES = 24
HYPOTHESIS = settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.too_slow])


def _close(a, b, rel):
    """|a - b| <= rel * max(|b|, 1), elementwise; returns the worst ratio for the message."""
    a, b = np.asarray(a), np.asarray(b)
    ratio = np.abs(a - b) / (rel * np.maximum(np.abs(b), 1.0))
    return bool(np.all(ratio <= 1.0)), float(ratio.max(initial=0.0))


def _off_threshold(model, energy) -> bool:
    return bool(np.min(np.abs(lead_thresholds(model) - energy)) > THRESHOLD_MARGIN)


# --- (a) RGF against the direct sparse-LU reference --------------------------------------------


@pytest.mark.parametrize("seed", range(N_RANDOM_DEVICES))
def test_rgf_matches_direct_lu(seed):
    # Even seeds: leads on opposite sides; odd seeds: on adjacent sides.
    placement = "opposite" if seed % 2 == 0 else "adjacent"
    case = random_device(seed, placement=placement)
    energies = in_band_energies(np.random.default_rng(10_000 + seed), 5)
    t_rgf = transmission(case.model, energies).transmission
    t_direct = transmission_direct(case.model, energies)[:, 1, 0]
    ok, worst = _close(t_rgf, t_direct, REL_RGF_DIRECT)
    assert ok, f"{case}: RGF {t_rgf} vs direct {t_direct}, worst |diff| = {worst:.2g} x tolerance"


def test_random_devices_cover_the_cases():
    # Guards the generator behind the test above: the seeds must include leads on
    # opposite and adjacent sides, holes, notches, and devices that transmit.
    cases = [random_device(seed, placement="opposite" if seed % 2 == 0 else "adjacent")
             for seed in range(N_RANDOM_DEVICES)]
    text = " ".join(case.description for case in cases)
    for feature in ("opposite", "adjacent", "hole", "notch"):
        assert feature in text, f"no random device has a {feature}"
    assert any(case.candidates > 1 for case in cases), "no candidate was ever rejected"
    assert all(case.model.n_sites >= 4 for case in cases)


@pytest.mark.parametrize("width, length", [(1, 1), (1, 6), (3, 2), (4, 7), (6, 5)])
@pytest.mark.parametrize("sides", [("left", "right"), ("bottom", "top")])
def test_clean_strip_transmits_every_open_channel(width, length, sides):
    # Ballistic strip (Datta 1995): T = N exactly, N the open channels of either lead.
    model = strip_device(width, length, sides=sides).discretise()
    energies = np.linspace(0.05, 7.95, 23) + 1e-3  # off the thresholds of every width used
    result = transmission(model, energies)
    n_open = result.n_open[:, 0]
    assert np.array_equal(n_open, result.n_open[:, 1])
    np.testing.assert_allclose(result.transmission, n_open, rtol=0, atol=TOL_INVARIANT)
    # n_open against the closed form: subband n is open for |E - (4 - 2 cos(n pi/(W+1)))| < 2.
    eps = 4 * T_HOP - 2 * T_HOP * np.cos(np.arange(1, width + 1) * np.pi / (width + 1))
    expected = np.sum(np.abs(energies[:, None] - eps[None, :]) < 2 * T_HOP, axis=1)
    assert np.array_equal(n_open, expected)


# --- (b) invariants on random small devices (hypothesis) ---------------------------------------


@HYPOTHESIS
@given(device=small_devices(), energy=st.floats(0.05, 7.95))
def test_unitarity_t_plus_r_equals_channels(device, energy):
    # Landauer-Buettiker (Buettiker 1986): sum over outgoing channels of |S|^2 = 1 per
    # incoming channel, so T_RL + R_LL = N_L.
    model = device.discretise()
    assume(_off_threshold(model, energy))
    n_left = transmission(model, [energy]).n_open[0, 0]
    smat = scattering_matrix(model, energy)
    t_direct = transmission_direct(model, [energy])[0, 1, 0]
    reflection = smat.transmission(source=0, drain=0)
    assert abs(t_direct + reflection - n_left) <= TOL_INVARIANT * max(n_left, 1)
    # The S-matrix transmission block agrees with Caroli's trace formula.
    assert abs(smat.transmission(source=0, drain=1) - t_direct) <= TOL_INVARIANT * max(t_direct, 1)
    # And the S matrix is unitary as a whole.
    if smat.s.size:
        np.testing.assert_allclose(smat.s.conj().T @ smat.s, np.eye(len(smat.s)), atol=TOL_INVARIANT)


@HYPOTHESIS
@given(device=small_devices(), energy=st.floats(0.05, 7.95))
def test_reciprocity_at_zero_field(device, energy):
    # Onsager: H real symmetric (no field) => T_RL = T_LR.
    model = device.discretise()
    assume(_off_threshold(model, energy))
    t_matrix = transmission_direct(model, [energy])[0]
    t_forward = transmission(model, [energy]).transmission[0]
    t_backward = transmission(swapped_leads(model), [energy]).transmission[0]
    scale = max(t_forward, 1.0)
    assert abs(t_matrix[1, 0] - t_matrix[0, 1]) <= TOL_INVARIANT * scale
    assert abs(t_forward - t_backward) <= TOL_INVARIANT * scale
    assert abs(t_forward - t_matrix[1, 0]) <= REL_RGF_DIRECT * scale


@HYPOTHESIS
@given(device=small_devices(), energy=st.floats(0.05, 7.95))
def test_transmission_bounded_by_open_channels(device, energy):
    # Unitarity (Buettiker 1986): 0 <= T <= min(N_L, N_R).
    model = device.discretise()
    assume(_off_threshold(model, energy))
    result = transmission(model, [energy])
    t_value = result.transmission[0]
    n_min = result.n_open[0].min()
    assert -TOL_INVARIANT <= t_value <= n_min + TOL_INVARIANT, (t_value, result.n_open[0])


@HYPOTHESIS
@given(device=small_devices(), energy=st.floats(0.05, 7.95),
       which=st.sampled_from(["one layer", "merged pairs", "default"]))
def test_transmission_independent_of_slicing(device, energy, which):
    # The layers are bookkeeping: any block-tridiagonal partition with lead 0 in the
    # first and lead 1 in the last layer inverts the same matrix.
    model = device.discretise()
    assume(_off_threshold(model, energy))
    slicing = {"one layer": one_layer_slicing, "merged pairs": merged_pairs_slicing,
               "default": default_slicing}[which](model)
    t_default = transmission(model, [energy]).transmission[0]
    t_other = transmission(model, [energy], slicing=slicing).transmission[0]
    assert abs(t_other - t_default) <= REL_RGF_DIRECT * max(t_default, 1.0)


@pytest.mark.parametrize("seed", range(6))
def test_slicing_independence_on_larger_devices(seed):
    # Same invariant on the seeded random devices (holes, notches, both placements).
    case = random_device(100 + seed)
    energies = in_band_energies(np.random.default_rng(20_000 + seed), 3)
    reference = transmission(case.model, energies).transmission
    for make in (one_layer_slicing, merged_pairs_slicing):
        other = transmission(case.model, energies, slicing=make(case.model)).transmission
        ok, worst = _close(other, reference, REL_RGF_DIRECT)
        assert ok, f"{case}, {make.__name__}: {other} vs {reference} ({worst:.2g} x tolerance)"


def test_layer_blocks_rejects_a_slicing_that_skips_a_layer():
    # A bond between layers 0 and 2 breaks block-tridiagonality; refuse, do not compute.
    from rgftrans.transport.slicing import Slicing

    model = strip_device(2, 3).discretise()
    columns = default_slicing(model).layers
    bad = Slicing(layers=(columns[0], columns[2], columns[1]), lead_layer=(0, 2))
    with pytest.raises(ValueError, match="block-tridiagonal"):
        layer_blocks(model, bad)


# --- (c) energies: bad values, thresholds, units ------------------------------------------------


@pytest.mark.parametrize("solver", [transmission, transmission_direct], ids=["rgf", "direct"])
@pytest.mark.parametrize(
    "energies, match",
    [([np.nan], "NaN"), ([1.0, np.nan, 2.0], "NaN"), ([np.inf], "infinite"), ([], "non-empty")],
    ids=["nan", "nan-inside", "inf", "empty"],
)
def test_bad_energies_raise_one_line_energy_error(solver, energies, match):
    model = strip_device(2, 3).discretise()
    with pytest.raises(EnergyError, match=match) as err:
        solver(model, energies)
    assert "\n" not in str(err.value)


def test_transmission_needs_two_leads():
    from rgftrans.system.device import TightBindingModel

    model = strip_device(2, 3).discretise()
    one_lead = TightBindingModel(model.hamiltonian, model.positions, model.leads[:1], model.energy_scale)
    with pytest.raises(LeadError, match="exactly two leads") as err:
        transmission(one_lead, [1.0])
    assert "\n" not in str(err.value)


@pytest.mark.parametrize("width, subband", [(1, 1), (2, 1), (3, 1), (3, 2), (5, 1), (5, 3)])
def test_energy_on_a_threshold_warns_and_stays_finite(width, subband):
    # Subband bottom of a W-row strip with onsite 4t: E_n = 2t - 2t cos(n pi / (W + 1)).
    e_threshold = 2 * T_HOP - 2 * T_HOP * np.cos(subband * np.pi / (width + 1))
    model = strip_device(width, 4).discretise()
    energies = [e_threshold - 0.1, e_threshold, e_threshold + 0.1]
    with pytest.warns(ThresholdWarning, match="threshold") as record:
        result = transmission(model, energies)
    assert len([w for w in record if issubclass(w.category, ThresholdWarning)]) == 1  # one warning per sweep
    assert result.at_threshold.tolist() == [False, True, False]
    assert np.all(np.isfinite(result.transmission))
    # The channel at its own threshold carries no current and is counted closed.
    assert result.n_open[1].tolist() == [subband - 1, subband - 1]
    # On the threshold T lies between its limits from below (n - 1) and above (n).
    assert subband - 1 - TOL_INVARIANT <= result.transmission[1] <= subband + TOL_INVARIANT
    # Off the threshold the clean strip is ballistic again.
    np.testing.assert_allclose(result.transmission[[0, 2]], [subband - 1, subband], atol=TOL_INVARIANT)


def test_threshold_warning_is_not_raised_off_threshold():
    model = strip_device(3, 4).discretise()
    with warnings.catch_warnings():
        warnings.simplefilter("error", ThresholdWarning)
        result = transmission(model, np.linspace(0.1, 7.9, 9))
    assert not result.at_threshold.any()


def test_conductance_in_siemens_uses_codata_quantum():
    g0 = 2 * constants.e**2 / constants.h
    assert g0 == pytest.approx(7.748091729864e-5, rel=1e-12)  # exact 2019 SI e and h; 13 digits -> 1e-12
    case = random_device(7)
    result = transmission(case.model, in_band_energies(np.random.default_rng(7), 6))
    np.testing.assert_allclose(result.conductance_S, result.transmission * g0, rtol=1e-15, atol=0)
    np.testing.assert_array_equal(result.conductance_g0, result.transmission)


def test_singular_partial_system_falls_back_to_a_direct_solve():
    """A 3x2 patch with one-row leads at E = onsite: the left-connected block of the first two columns is exactly
    singular (a bound state of that partial system), while the whole open system is regular.  The recursion must
    not crash and must give the sparse-LU value (scipy), here and just beside it."""
    from rgftrans.system.device import Device, Lead
    from rgftrans.system.geometry import rectangle
    from rgftrans.system.lattices import square
    from rgftrans.transport.rgf import transmission_matrix

    model = Device(rectangle(0, 0, 2, 1), [Lead("s", "left", (0, 0)), Lead("d", "right", (0, 0))],
                   lattice=square(1.0), hopping=1.0).discretise()
    energies = [4.0, 3.9]
    ref = transmission_direct(model, energies)[:, 1, 0]
    assert ref[1] > 0.01  # the neighbouring energy transmits: the comparison is not 0 = 0 everywhere
    assert np.allclose(transmission(model, energies).transmission, ref, atol=1e-12)
    assert np.allclose(transmission_matrix(model, energies).matrix[:, 1, 0], ref, atol=1e-9)


def test_energy_exactly_on_a_bound_state_in_the_continuum():
    """A 3x3 patch with one-row leads on rows 0 and 1 has a bound state in the continuum at E = onsite = 4t:
    E - H - Sigma is exactly singular there (scipy's splu refuses it).  T is continuous across it, so the value
    at E (computed just above the axis, with a warning) must match the average of its neighbours E +- 1e-6 to
    1e-5 (T varies by O(1e-6) over that step away from a resonance of finite width)."""
    from rgftrans.system.device import Device, Lead
    from rgftrans.errors import ThresholdWarning
    from rgftrans.system.geometry import rectangle
    from rgftrans.system.lattices import square

    model = Device(rectangle(0, 0, 2, 2), [Lead("s", "left", (0, 0)), Lead("d", "right", (1, 1))],
                   lattice=square(1.0), hopping=1.0).discretise()
    with pytest.raises(RuntimeError, match="singular"):
        transmission_direct(model, [4.0])
    with pytest.warns(ThresholdWarning, match="bound state in the continuum"):
        t_on = transmission(model, [4.0]).transmission[0]
    beside = transmission_direct(model, [4.0 - 1e-6, 4.0 + 1e-6])[:, 1, 0]
    assert t_on == pytest.approx(beside.mean(), abs=1e-5)
