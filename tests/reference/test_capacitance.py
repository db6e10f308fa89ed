"""Capacitances, lever arms and charging energies of 2DEG regions (rgftrans.electrostatics.capacitance).

Sources:
* Deep under a wide gate the 2DEG is a parallel-plate capacitor in series with its quantum capacitance:
  e dN/dV per area = (d / (eps eps0) + 1 / (e^2 D))^-1 (J. H. Davies, The Physics of Low-Dimensional
  Semiconductors, CUP 1998, from memory).
* Neutrality: with a frozen surface the gates' charges are explicit, and on a grid that holds the field lines
  the charge a gate voltage induces in the 2DEG is the opposite of what it puts on the gates (Gauss; common
  practice).
* Constant-interaction model (W. G. van der Wiel et al., Rev. Mod. Phys. 75, 1 (2002), from memory): lever arm
  alpha_j = C_j / C_Sigma, E_C = e^2 / C_Sigma; mirror-symmetric gates have equal lever arms.
* A gate-defined GaAs dot of a few hundred nm has E_C of order 0.3-3 meV and plunger lever arms of order
  0.02-0.2 (common practice, no source): a loose plausibility check, not a precise one.
"""

from __future__ import annotations

import math
import warnings

import numpy as np
import pytest
from scipy import constants

from rgftrans.electrostatics.capacitance import cell_weights, electron_number, gate_capacitances
from rgftrans.electrostatics.gates import Gate, GateLayout
from rgftrans.electrostatics.screening import Heterostructure, screen
from rgftrans.errors import RgftransError
from rgftrans.system.geometry import disk, rectangle

GAAS = Heterostructure(depth_nm=60.0, density_cm2=2e11)


@pytest.mark.parametrize("offset", [0.0, 0.5])
def test_cell_weights_are_the_overlap_areas(offset):
    h = 10.0
    xs = np.arange(-100.0, 100.1, h) + offset * h
    square = rectangle(-33.0, -21.0, 47.0, 52.0)
    w = cell_weights(square, xs, xs)
    assert w.min() >= 0 and w.max() <= 1
    assert np.sum(w) * h * h == pytest.approx(80.0 * 73.0, rel=1e-12)  # exact: cells tile the plane
    circle = disk((3.0, -4.0), 40.0, segments=512)
    assert np.sum(cell_weights(circle, xs, xs)) * h * h == pytest.approx(math.pi * 40.0**2, rel=1e-4)


def test_region_off_the_grid_is_one_line():
    xs = np.arange(0.0, 100.1, 10.0)
    with pytest.raises(RgftransError, match="outside the screening grid") as err:
        cell_weights(rectangle(500, 500, 600, 600), xs, xs)
    assert "\n" not in str(err.value)


def _plate_error(spacing):
    gate = Gate("wide", rectangle(-900, -900, 900, 900), -0.05)
    layout = GateLayout((gate,), depth_nm=60.0)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # the region is open: it is part of the 2DEG sheet under the gate
        result = gate_capacitances(layout, GAAS, {"sheet": rectangle(-150, -150, 150, 150)},
                                   extent_nm=(-1140, -1140, 1140, 1140), spacing_nm=spacing)
    geometric = 4 * math.pi * 1439.96 / GAAS.eps_r * GAAS.depth_nm  # meV nm^2 per electron per nm^2
    per_area_aF = constants.e / 1e-18 * 1e3 / (geometric + 1.0 / GAAS.dos_per_meV_nm2)  # aF per nm^2
    return result.gate_response_aF[0, 0] / (per_area_aF * 300.0 * 300.0) - 1


def test_under_a_wide_gate_the_gate_capacitance_is_the_series_plate():
    coarse, fine = _plate_error(20.0), _plate_error(10.0)
    # The sampled Coulomb kernel converges at first order in h / d (measured on a larger gate: 1.35, 0.85 and
    # 0.35 % at h = 30, 20, 10 nm for d = 60 nm); the gate's edges are 12 depths away (fringe below 1e-3).
    assert abs(fine) < 6e-3 and abs(coarse) < 1.2e-2
    assert abs(fine) < 0.6 * abs(coarse)


def test_induced_charge_is_opposite_to_the_gates_charge():
    """Frozen surface: a gate's voltage step puts charge on the gates and the opposite into the 2DEG."""
    structure = Heterostructure(depth_nm=50.0, density_cm2=3e11, surface="frozen")
    layout = GateLayout((Gate("g", rectangle(-100, -100, 100, 100), -0.1),), depth_nm=50.0)
    extent, h = (-900, -900, 900, 900), 15.0
    step = 2e-3
    up = screen(layout.with_voltages({"g": -0.1 + step}), structure, extent_nm=extent, spacing_nm=h,
                tolerance=1e-7)
    down = screen(layout.with_voltages({"g": -0.1 - step}), structure, extent_nm=extent, spacing_nm=h,
                  tolerance=1e-7)
    d_2deg = np.sum(up.density_cm2 - down.density_cm2)
    d_gates = np.sum(up.gate_charge_cm2 - down.gate_charge_cm2)
    # Electrons: the 2DEG gains what the gate loses.  The grid reaches 16 depths past the gate; the field lines
    # that end on the 2DEG beyond it are a few per cent (measured 0.6 %).
    assert d_2deg > 0 and d_gates < 0
    assert d_2deg / -d_gates == pytest.approx(1.0, abs=0.02)


def _two_dots_layout():
    """Invented double dot: a top gate, three fingers from below and two plungers, mirror-symmetric in x."""
    gates = (
        Gate("top", rectangle(-600, 330, 600, 800), -0.5),
        Gate("outer_left", rectangle(-560, -600, -480, 230), -0.8),
        Gate("middle", rectangle(-40, -600, 40, 250), -0.8),
        Gate("outer_right", rectangle(480, -600, 560, 230), -0.8),
        Gate("plunger_left", rectangle(-470, -600, -50, -60), -0.3),
        Gate("plunger_right", rectangle(50, -600, 470, -60), -0.3),
    )
    return GateLayout(gates, depth_nm=60.0)


@pytest.fixture(scope="module")
def double_dot():
    regions = {"left": rectangle(-400, 0, -120, 200), "right": rectangle(120, 0, 400, 200)}
    return gate_capacitances(_two_dots_layout(), GAAS, regions, extent_nm=(-800, -800, 800, 1000), spacing_nm=10.0)


def test_double_dot_is_two_closed_islands_with_mirror_lever_arms(double_dot):
    r = double_dot
    assert r.closed.all()
    i_left, i_right = r.region_names.index("left"), r.region_names.index("right")
    # Mirror symmetry of the layout: the left plunger on the left dot = the right plunger on the right dot
    # (to the finite differences' accuracy, 1e-3; the grid is itself mirror-symmetric).
    assert r.lever_arm("left", "plunger_left") == pytest.approx(r.lever_arm("right", "plunger_right"), rel=1e-3)
    assert r.lever_arm("left", "plunger_right") == pytest.approx(r.lever_arm("right", "plunger_left"), rel=1e-2)
    # Each plunger acts more on its own dot; the mutual capacitance is positive and reciprocal.
    assert r.lever_arm("left", "plunger_left") > 3 * r.lever_arm("left", "plunger_right")
    mutual = -r.capacitance_matrix_aF[i_left, i_right]
    assert mutual > 0 and mutual == pytest.approx(-r.capacitance_matrix_aF[i_right, i_left])
    assert np.all(r.total_aF > 0) and np.all(r.remainder_aF > 0)


def test_constant_interaction_identities(double_dot):
    r = double_dot
    # alpha = C^-1 C_g and E = e^2 C^-1 (module definitions) -- and e^2/aF = 160.2 meV (CODATA).
    assert np.allclose(np.linalg.solve(r.capacitance_matrix_aF, r.gate_matrix_aF), r.lever_arms, rtol=1e-10)
    e2_af = constants.e / 1e-18 * 1e3
    assert np.allclose(r.interaction_meV, e2_af * np.linalg.inv(r.capacitance_matrix_aF), rtol=1e-12)
    # Sum rule of the definitions: C_Sigma = sum of gates + mutual + remainder.
    for i in range(2):
        others = -np.sum(r.capacitance_matrix_aF[i]) + 2 * r.capacitance_matrix_aF[i, i]
        assert r.total_aF[i] == pytest.approx(r.gate_matrix_aF[i].sum() + (others - r.total_aF[i])
                                              + r.remainder_aF[i], rel=1e-12)


def test_a_gate_defined_dot_has_plausible_numbers(double_dot):
    r = double_dot
    for name in r.region_names:
        i = r.region_names.index(name)
        assert 0.3 < r.charging_energy_meV[i] < 3.0, r.summary()
        assert 0.02 < r.lever_arm(name, f"plunger_{name}") < 0.2, r.summary()
        assert 5 < r.electron_number[i] < 500


def test_open_regions_warn_and_empty_ones_refuse():
    layout = GateLayout((Gate("g", rectangle(-100, -100, 100, 100), -0.6),), depth_nm=60.0)
    kwargs = dict(extent_nm=(-500, -500, 500, 500), spacing_nm=20.0)
    with pytest.warns(UserWarning, match="is open"):
        gate_capacitances(layout, GAAS, {"beside": rectangle(150, -50, 250, 50)}, **kwargs)
    with pytest.raises(RgftransError, match="no electrons") as err:
        gate_capacitances(layout, GAAS, {"under": rectangle(-20, -20, 20, 20)}, **kwargs)
    assert "\n" not in str(err.value)
    with pytest.raises(RgftransError, match="gate_step_V"):
        gate_capacitances(layout, GAAS, {"beside": rectangle(150, -50, 250, 50)}, gate_step_V=0.0, **kwargs)


def test_electron_number_integrates_the_density():
    sol = screen(None, GAAS, extent_nm=(0, 0, 200, 200), spacing_nm=10.0, bare=np.zeros((21, 21)))
    n = electron_number(sol, rectangle(50, 50, 150, 150))
    assert n == pytest.approx(GAAS.density_nm2 * 100 * 100, rel=1e-6)  # ungated: n0 times the area
