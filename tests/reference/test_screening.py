"""Thomas-Fermi screening of gates by the 2DEG (rgftrans.electrostatics.screening) against closed forms.

Sources:
* Uniform gate: the induced density is the gate voltage over the series combination of the geometric and
  the quantum capacitance, e dn = V / (d / (eps eps0) + 1 / (e^2 D)), and the 2DEG depletes at
  V_dep = -e n0 (d / (eps eps0) + 1 / (e^2 D)) (parallel-plate electrostatics with the 2DEG's density of
  states; e.g. J. H. Davies, The Physics of Low-Dimensional Semiconductors, CUP 1998, from memory).
* Weak modulation of wave vector q: screened / bare = 1 / eps(q), eps(q) = 1 + (q_TF / q)(1 - exp(-2 q d)),
  q_TF = e^2 D / (2 eps eps0) (2D Thomas-Fermi screening with a metal plane at distance d; standard result,
  from memory).
* D -> 0: no screening, U -> U_gates, the deviation 1 - 1/eps(q) -> 0 with q_TF proportional to D.
Both closed forms describe infinite systems: the checks use the solver's periodic grid, where the kernel is
the exact continuum transform, so they hold to the solver's stopping tolerance (1e-8 relative gradient),
and the tolerances below (1e-6) leave room for the round-off of an FFT of a few thousand nodes.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from rgftrans.electrostatics.gates import Gate, GateLayout
from rgftrans.electrostatics.screening import Heterostructure, coulomb_constant_meV_nm, screen
from rgftrans.errors import RgftransError
from rgftrans.system.geometry import rectangle
from rgftrans.system.materials import Material

GAAS = Heterostructure(depth_nm=60.0, density_cm2=2e11)


def _uniform(structure, volts, n=16, h=10.0):
    bare = np.full((n, n), -1000.0 * volts)  # U = -e V, meV
    return screen(None, structure, extent_nm=(0, 0, h * (n - 1), h * (n - 1)), spacing_nm=h, periodic=True,
                  bare=bare, tolerance=1e-8)


def _series_dn(structure, volts):
    geometric = 4 * math.pi * coulomb_constant_meV_nm(structure.eps_r) * structure.depth_nm  # meV nm^2
    return 1000.0 * volts / (1.0 / structure.dos_per_meV_nm2 + geometric)  # electrons per nm^2


@pytest.mark.parametrize("volts", [-0.05, -0.15, 0.1])
def test_uniform_gate_is_the_series_capacitance(volts):
    sol = _uniform(GAAS, volts)
    dn = sol.density_cm2.mean() * 1e-14 - GAAS.density_nm2
    assert dn == pytest.approx(_series_dn(GAAS, volts), rel=1e-6)
    assert np.ptp(sol.density_cm2) <= 1e-9 * GAAS.density_cm2  # uniform gate, uniform answer


def test_depletion_voltage_of_a_wide_gate():
    v_dep = GAAS.depletion_voltage_V()
    # GaAs, 2e11 cm^-2, 60 nm: about -0.17 V (the parallel-plate estimate e n d / eps is -0.168 V).
    assert -0.19 < v_dep < -0.16
    assert _uniform(GAAS, 0.98 * v_dep).density_cm2.min() > 0
    assert _uniform(GAAS, 1.02 * v_dep).density_cm2.max() == 0.0


@pytest.mark.parametrize("modes", [1, 2, 4, 8, 16])
def test_linear_response_is_one_over_eps_of_q(modes):
    n, h = 128, 5.0
    q = 2 * math.pi * modes / (n * h)
    x = h * np.arange(n)
    bare = np.tile(0.5 * np.cos(q * x), (4, 1))  # 0.5 meV: far below E_F = 7.1 meV, no depletion
    sol = screen(None, GAAS, extent_nm=(0, 0, h * (n - 1), 3 * h), spacing_nm=h, periodic=True, bare=bare,
                 tolerance=1e-8)
    ratio = 2 * np.mean(sol.potential_meV[0] * np.cos(q * x)) / 0.5
    eps_q = 1 + GAAS.screening_wavevector_per_nm / q * (1 - math.exp(-2 * q * GAAS.depth_nm))
    assert ratio == pytest.approx(1 / eps_q, rel=1e-5)


def test_screening_vanishes_as_the_density_of_states_goes_to_zero():
    n, h = 64, 10.0
    q = 2 * math.pi * 3 / (n * h)
    x = h * np.arange(n)
    bare = np.tile(2.0 * np.cos(q * x), (4, 1))
    deviations, expected = [], []
    for m_eff, g_s in ((2e-3, 2), (1e-3, 2), (1e-3, 1)):  # E_F >= 2.4 meV > 2 meV: no depletion, linear
        light = Heterostructure(depth_nm=60.0, density_cm2=2e9, spin_degeneracy=g_s,
                                material=Material("light", m_eff=m_eff, g_factor=2.0, eps_r=12.9, source="test"))
        sol = screen(None, light, extent_nm=(0, 0, h * (n - 1), 3 * h), spacing_nm=h, periodic=True, bare=bare,
                     tolerance=1e-8)
        deviations.append(np.abs(sol.potential_meV - bare).max() / np.abs(bare).max())
        x_q = light.screening_wavevector_per_nm / q * (1 - math.exp(-2 * q * light.depth_nm))
        expected.append(x_q / (1 + x_q))  # 1 - 1/eps(q)
    # Each halving of D roughly halves the deviation, which follows 1 - 1/eps(q) -> 0 (to the solver's 1e-6).
    assert np.allclose(deviations, expected, rtol=1e-5)
    assert all(b < 0.6 * a for a, b in zip(deviations, deviations[1:]))
    assert deviations[-1] < 0.05


def test_far_from_the_gates_the_density_returns_to_n0():
    layout = GateLayout((Gate("left", rectangle(-300, -200, -100, 200), -0.4),
                         Gate("right", rectangle(100, -200, 300, 200), -0.4)), depth_nm=60.0)
    sol = screen(layout, GAAS, extent_nm=(-1500, -1500, 1500, 1500), spacing_nm=15.0)
    corner = sol.density_cm2[0, 0]
    # 1.2 um from the nearest gate the induced charge of a dipole-like layout is below 2 % (common practice).
    assert abs(corner / GAAS.density_cm2 - 1) < 0.02
    assert sol.depleted[sol.y_nm.size // 2, np.argmin(np.abs(sol.x_nm + 200))]  # under a gate: empty
    assert sol.gradient < 1e-5


def test_the_solution_is_a_device_potential():
    layout = GateLayout((Gate("g", rectangle(-100, -100, 100, 100), -0.1),), depth_nm=60.0)
    sol = screen(layout, GAAS, extent_nm=(-600, -600, 600, 600), spacing_nm=20.0)
    # On the nodes the callable gives the stored values; between them, values in their range.
    assert sol(sol.x_nm[3], sol.y_nm[5]) == pytest.approx(sol.potential_meV[5, 3], abs=1e-12)
    mid = sol(0.5 * (sol.x_nm[3] + sol.x_nm[4]), sol.y_nm[5])
    lo, hi = sorted(sol.potential_meV[5, 3:5])
    assert lo - 1e-12 <= mid <= hi + 1e-12
    # Screening reduces the gate's effect: |U| under the gate's centre is below the bare value.
    c = sol.y_nm.size // 2
    assert 0 < sol.potential_meV[c, c] < sol.bare_potential_meV[c, c]


@pytest.mark.parametrize("kwargs, match", [
    (dict(depth_nm=-5.0, density_cm2=2e11), "depth_nm"),
    (dict(depth_nm=60.0, density_cm2=2e20), "density_cm2"),
    (dict(depth_nm=60.0, density_cm2=2e11, surface="mirror"), "pinned.*frozen"),
    (dict(depth_nm=60.0, density_cm2=2e11, temperature_K=-1.0), "temperature_K"),
    (dict(depth_nm=60.0, density_cm2=2e11, valley_degeneracy=3), "valley"),
])
def test_bad_heterostructures_are_one_line_errors(kwargs, match):
    with pytest.raises(RgftransError, match=match) as err:
        Heterostructure(**kwargs)
    assert "\n" not in str(err.value)


def test_gate_depth_must_match_and_tolerance_is_bounded():
    layout = GateLayout((Gate("g", rectangle(-100, -100, 100, 100), -0.1),), depth_nm=80.0)
    with pytest.raises(RgftransError, match="one depth"):
        screen(layout, GAAS, extent_nm=(-300, -300, 300, 300), spacing_nm=20.0)
    with pytest.raises(RgftransError, match="tolerance"):
        screen(None, GAAS, extent_nm=(0, 0, 100, 100), spacing_nm=10.0, bare=np.zeros((11, 11)), tolerance=1e-12)
