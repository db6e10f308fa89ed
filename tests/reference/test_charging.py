"""Sequential tunnelling through closed dots (rgftrans.analysis.charging) against closed forms.

Sources:
* C. W. J. Beenakker, Phys. Rev. B 44, 1646 (1991), from memory:
  - one spinless level, hbar Gamma << kT << Delta: G = (e^2 / 4kT) Gamma_L Gamma_R / (Gamma_L + Gamma_R)
    cosh^-2(delta / 2kT), delta the level's addition energy from E_F (FWHM 2 ln(3 + 2 sqrt 2) kT = 3.525 kT);
  - classical regime kT >> Delta: peak G_inf / 2, G_inf the series conductance of the two barriers
    (G_r = e^2 Gamma_r / Delta), with the line shape (x/2) / sinh(x), x = delta / kT: FWHM 4.36 kT.
* Spin-degenerate level with double occupancy blocked (derived here from the same master equation: states
  0, up, down; P_sigma = a P0 / (Gamma - a), a = Gamma_L f_L + Gamma_R f_R):
  I = 2 e Gamma_L Gamma_R (f_L - f_R) / (Gamma + a), so G = (2 e^2 / kT) (Gamma_L Gamma_R / Gamma) f(1 - f)/(1 + f).
  Its maximum sits at delta = (kT/2) ln 2 above E_F, with height 2 sqrt2 / (4 + 3 sqrt 2) = 0.3431 in units
  of (e^2/kT) Gamma_L Gamma_R / Gamma (the spinless peak is 1/4).
* Coulomb diamond of a metallic dot with the bias split symmetrically: at the centre of a diamond current
  starts at |e V_sd| = E_C; the edges have slopes +-2 alpha (common practice, constant-interaction model).
* Double dot (W. G. van der Wiel et al., Rev. Mod. Phys. 75, 1 (2002), from memory): the honeycomb repeats
  every e / C_g1 along V_1 and e / C_g2 along V_2 (no cross capacitances); the two triple points of a cell
  are separated along V_1 by e C_m (C_1 - C_m) / (C_g1 (C_1 C_2 - C_m^2)) (derived from the same energies:
  mu_1(1,1) - mu_1(1,0) = E_Cm on both dots' lines).
* Master equation: probabilities sum to 1; at zero bias detailed balance gives Boltzmann occupations and no
  current (common practice).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import constants
from scipy.optimize import minimize_scalar

from rgftrans.analysis.charging import (ChargingDot, DoubleDot, HBAR_MEV_S, blockade_regime, stability_map,
                                        steady_state)
from rgftrans.analysis.charging import sequential_conductance as conductance
from rgftrans.analysis.charging import sequential_current as current
from rgftrans.constants import BOLTZMANN_MEV_PER_K, CONDUCTANCE_QUANTUM_S
from rgftrans.errors import RgftransError

T = 0.1
KT = BOLTZMANN_MEV_PER_K * T
G_L, G_R = 1e8, 3e8  # s^-1: hbar Gamma = 2.6e-4 meV << kT = 8.6e-3 meV
ALPHA = 0.1
V0 = 0.5 / (1000 * ALPHA)  # the first electron's addition energy (E_C / 2 with E_C = 1 meV) crosses E_F here


def _single(spin=False):
    return ChargingDot(charging_energy_meV=1.0, lever_arm=ALPHA, levels_meV=[0.0], rates_per_s=[G_L, G_R],
                       spin=spin, field_T=0.0)


def _delta_meV(gate_V):
    return -1000 * ALPHA * (np.asarray(gate_V) - V0)


def test_spinless_peak_is_the_cosh_law():
    gate = V0 + np.linspace(-10, 10, 81) * KT / (1000 * ALPHA)
    g_s, g_2e2h = conductance(_single(), gate, T)
    scale = constants.e**2 / (KT * 1e-3 * constants.e) * G_L * G_R / (G_L + G_R)  # e^2/kT Gamma_L Gamma_R / Gamma
    expected = scale / 4 / np.cosh(_delta_meV(gate) / (2 * KT)) ** 2
    # The bias difference is second order in its step (5e-3 kT): 1e-5 relative leaves room.
    assert np.allclose(g_s, expected, rtol=1e-5, atol=1e-9 * expected.max())
    assert np.allclose(g_2e2h, g_s / CONDUCTANCE_QUANTUM_S, rtol=1e-14)


def test_spin_degenerate_peak_is_higher_and_shifted():
    dot = _single(spin=True)
    scale = constants.e**2 / (KT * 1e-3 * constants.e) * G_L * G_R / (G_L + G_R)

    def minus_g(delta_kt):
        return -conductance(dot, [V0 - delta_kt * KT / (1000 * ALPHA)], T)[0][0]

    best = minimize_scalar(minus_g, bounds=(-2, 2), method="bounded", options={"xatol": 1e-6})
    assert best.x == pytest.approx(0.5 * math.log(2), abs=1e-4)
    assert -best.fun / scale == pytest.approx(2 * math.sqrt(2) / (4 + 3 * math.sqrt(2)), rel=1e-5)
    delta = np.linspace(-6, 6, 25)
    f = 1 / (1 + np.exp(delta))
    g = conductance(dot, V0 - delta * KT / (1000 * ALPHA), T)[0]
    assert np.allclose(g, scale * 2 * f * (1 - f) / (1 + f), rtol=1e-5, atol=1e-9 * scale)


def test_classical_peak_is_half_the_series_conductance():
    t_hot, delta = 1.0, 1e-3  # kT = 0.086 meV >> Delta = 1 ueV
    kt = BOLTZMANN_MEV_PER_K * t_hot
    dot = ChargingDot(charging_energy_meV=2.0, lever_arm=ALPHA, level_spacing_meV=delta, rates_per_s=[1e8, 2e8])
    centre = 1.5 * 2.0 / (1000 * ALPHA)  # mu(2) = 1.5 E_C crosses E_F
    x = np.linspace(-6, 6, 61)
    g = conductance(dot, centre - x * kt / (1000 * ALPHA), t_hot)[0]
    g_l, g_r = (constants.e * rate * 1e3 / delta for rate in (1e8, 2e8))  # e^2 Gamma / Delta, Delta in meV
    g_inf = g_l * g_r / (g_l + g_r)
    shape = np.where(x == 0, 1.0, x / np.where(x == 0, 1.0, np.sinh(x)))  # G / G_inf = (x/2)/sinh(x) x 2
    # Neighbouring charge states add exp(-E_C / kT) ~ 1e-10: the orthodox line shape to 1e-5.
    assert np.allclose(g, 0.5 * g_inf * shape, rtol=1e-5)
    half = minimize_scalar(lambda y: (y / math.sinh(y) - 0.5) ** 2, bounds=(1, 3), method="bounded").x
    assert 2 * half == pytest.approx(4.36, abs=0.01)  # Beenakker's 4.35 kT


def test_diamond_opens_at_the_charging_energy():
    dot = ChargingDot(charging_energy_meV=2.0, lever_arm=ALPHA, level_spacing_meV=1e-3, rates_per_s=[1e8, 1e8])
    bias = np.linspace(-3e-3, 3e-3, 241)
    centre = 1.0 * 2.0 / (1000 * ALPHA)  # mid-way between mu(1) and mu(2): the N = 1 diamond's centre
    result = current(dot, [centre], bias, 0.05)
    conducting = np.abs(result.current_A[:, 0]) > 1e-3 * np.abs(result.current_A).max()
    onset = np.abs(bias[conducting]).min()
    # Current sets in at |e V| = E_C = 2 meV (to the bias step 25 uV plus a few kT = 4 ueV of smearing).
    assert onset == pytest.approx(2.0e-3, abs=3e-5)
    didv, _ = stability_map(dot, np.linspace(0.0, 0.04, 81), np.linspace(-3e-3, 3e-3, 61), 0.05)
    assert didv.shape == (61, 81) and np.isfinite(didv).all()


def test_master_equation_invariants():
    dot = ChargingDot(charging_energy_meV=0.8, lever_arm=ALPHA, levels_meV=[0.0, 0.15, 0.4],
                      rates_per_s=[[1e8, 2e8], [3e8, 1e8], [2e8, 2e8]], spin=True, field_T=1.0)
    gate = np.linspace(0.0, 0.03, 7)
    prob, charge = steady_state(dot, gate, 0.0, T)
    assert np.allclose(prob.sum(axis=1), 1.0, atol=1e-12) and prob.min() >= 0
    # Zero bias: Boltzmann weights of the many-body energies (detailed balance), no current.
    res = current(dot, gate, [0.0], T)
    assert np.abs(res.current_A).max() < 1e-25
    energies, _ = dot.orbitals()
    occ = np.array(list(__import__("itertools").product((0, 1), repeat=energies.size)))
    for p_row, vg in zip(prob, gate):
        n = occ.sum(axis=1)
        e = occ @ energies + 0.5 * dot.charging_energy_meV * n**2 - n * 1000 * ALPHA * vg
        boltzmann = np.exp(-(e - e.min()) / KT)
        assert np.allclose(p_row, boltzmann / boltzmann.sum(), atol=1e-10)
    # Finite bias: what enters from the source leaves to the drain (current conservation): the source current
    # computed with the leads swapped (and the bias reversed) is the same.
    fwd = current(dot, gate, [3e-4], T).current_A
    swapped = ChargingDot(charging_energy_meV=0.8, lever_arm=ALPHA, levels_meV=[0.0, 0.15, 0.4],
                          rates_per_s=[[2e8, 1e8], [1e8, 3e8], [2e8, 2e8]], spin=True, field_T=1.0)
    back = current(swapped, gate, [-3e-4], T).current_A
    assert np.allclose(fwd, -back, rtol=1e-9, atol=1e-20)


def _double():
    c1, c2, cm = 200.0, 250.0, 40.0
    return DoubleDot(capacitance_aF=[[c1, -cm], [-cm, c2]], gate_capacitance_aF=[[20.0, 0.0], [0.0, 25.0]]), \
        (c1, c2, cm)


def test_honeycomb_periods_and_triple_points():
    dd, (c1, c2, cm) = _double()
    e_af = constants.e / 1e-18  # aF V
    period1, period2 = e_af / 20.0, e_af / 25.0  # e / C_g: 8.0 and 6.4 mV
    v1 = np.linspace(0.0, 3 * period1, 601)
    n1, _ = dd.charge_map(v1, [0.5 * period2])
    steps = v1[1:][np.diff(n1[0]) != 0]
    assert np.allclose(np.diff(steps), period1, atol=2 * (v1[1] - v1[0]))
    v2 = np.linspace(0.0, 3 * period2, 601)
    _, n2 = dd.charge_map([0.5 * period1], v2)
    steps = v2[1:][np.diff(n2[:, 0]) != 0]
    assert np.allclose(np.diff(steps), period2, atol=2 * (v2[1] - v2[0]))
    # Triple points: where (0,0), (1,0), (0,1) meet and where (1,0), (0,1), (1,1) meet.
    def triple(a, b, c):
        from scipy.optimize import fsolve
        return fsolve(lambda v: [dd.energy_meV(*a, *v) - dd.energy_meV(*b, *v),
                                 dd.energy_meV(*a, *v) - dd.energy_meV(*c, *v)], [period1 / 2, period2 / 2])
    t1 = triple((0, 0), (1, 0), (0, 1))
    t2 = triple((1, 1), (1, 0), (0, 1))
    expected = e_af * cm * (c1 - cm) / (20.0 * (c1 * c2 - cm**2))
    assert abs(t2[0] - t1[0]) == pytest.approx(expected, rel=1e-9)
    sensor = dd.sensor_signal(v1, v2[:3], coupling_meV=(1.0, 0.5))
    assert sensor.shape == (3, v1.size) and sensor.max() > sensor.min()


@pytest.mark.parametrize("kwargs, fragment", [
    (dict(charging_energy_meV=1.0, lever_arm=0.1), "one of the two"),
    (dict(charging_energy_meV=-1.0, lever_arm=0.1, levels_meV=[0.0]), "charging_energy_meV"),
    (dict(charging_energy_meV=1.0, lever_arm=0.1, levels_meV=[0.0], rates_per_s=[1e8]), "rates_per_s"),
    (dict(charging_energy_meV=1.0, lever_arm=0.1, levels_meV=list(range(8)), spin=True), "states"),
])
def test_bad_dots_are_one_line(kwargs, fragment):
    with pytest.raises(RgftransError) as err:
        ChargingDot(**kwargs)
    assert fragment in str(err.value) and "\n" not in str(err.value)


def test_temperature_and_validity_are_checked():
    with pytest.raises(RgftransError, match="temperature"):
        conductance(_single(), [V0], 0.0)
    broad = ChargingDot(charging_energy_meV=1.0, lever_arm=ALPHA, levels_meV=[0.0], rates_per_s=[1e11, 1e11])
    with pytest.warns(UserWarning, match="hbar Gamma"):
        conductance(broad, [V0], T)
    width = HBAR_MEV_S * 2e11
    assert "coherent" in blockade_regime(charging_energy_meV=0.05, level_spacing_meV=0.02, width_meV=0.1, temperature_K=T)
    assert "sequential tunnelling, quantum" in blockade_regime(charging_energy_meV=1.0, level_spacing_meV=0.1,
                                                      width_meV=1e-4, temperature_K=T)
    assert "classical" in blockade_regime(charging_energy_meV=1.0, level_spacing_meV=1e-3, width_meV=1e-5,
                                 temperature_K=1.0)
    assert "intermediate" in blockade_regime(charging_energy_meV=1.0, level_spacing_meV=0.1, width_meV=width,
                                    temperature_K=0.5)


def test_double_dot_current_flows_at_the_triple_points_only():
    """Small bias: the series conducts only where three charge states are degenerate (van der Wiel et al. 2002,
    from memory); no bias, no current (detailed balance of every rate, the interdot ones included)."""
    dd, _ = _double()
    dd = DoubleDot(capacitance_aF=dd.capacitance_aF, gate_capacitance_aF=dd.gate_capacitance_aF,
                   tunnel_coupling_meV=0.02, source_rate_per_s=1e9, drain_rate_per_s=1e9)
    e_af = constants.e / 1e-18
    v1 = np.linspace(0.0, e_af / 20.0, 121)
    v2 = np.linspace(0.0, e_af / 25.0, 121)
    current_map = dd.current(v1, v2, 20e-6, 0.05)
    assert np.abs(dd.current(v1[::10], v2[::10], 0.0, 0.05)).max() < 1e-25
    from scipy.optimize import fsolve

    def triple(a, b, c):
        return fsolve(lambda v: [dd.energy_meV(*a, *v) - dd.energy_meV(*b, *v),
                                 dd.energy_meV(*a, *v) - dd.energy_meV(*c, *v)], [v1[60], v2[60]])

    points = [triple((0, 0), (1, 0), (0, 1)), triple((1, 1), (1, 0), (0, 1))]
    strong = current_map > 0.05 * current_map.max()
    g1, g2 = np.meshgrid(v1, v2)
    # Every point carrying more than 5 % of the peak current lies at a triple point, within the bias triangle
    # (e V_sd / (e alpha) ~ 0.2 mV here) plus kT: far inside a tenth of the cell (e / C_g1 = 8 mV).
    near = np.min([np.hypot(g1 - p[0], g2 - p[1]) for p in points], axis=0)
    assert strong.sum() > 2 and near[strong].max() < 0.1 * e_af / 20.0


def test_diamond_edges_have_slopes_two_alpha():
    """Constant-interaction model with the bias split symmetrically and no capacitance to the leads: current
    starts where a lead's chemical potential reaches the nearer addition energy, |e V_sd| / 2 = e alpha |V_g -
    V_k|, so the diamond's edges are the lines |V_sd| = 2 alpha |V_g - V_k| (common practice, closed form)."""
    dot = ChargingDot(charging_energy_meV=2.0, lever_arm=ALPHA, level_spacing_meV=1e-3, rates_per_s=[1e8, 1e8])
    bias = np.linspace(0.0, 3e-3, 601)
    v_k = 1.5 * 2.0 / (1000 * ALPHA)  # mu(2) = 1.5 E_C crosses E_F here
    for distance in (1e-3, 3e-3, 6e-3):  # V, inside the N = 1 diamond (its half-width is E_C / (2 e alpha) = 10 mV)
        res = current(dot, [v_k - distance], bias, 0.02)
        conducting = np.abs(res.current_A[:, 0]) > 1e-3 * np.abs(res.current_A).max()
        onset = bias[np.argmax(conducting)]
        # To the bias step (5 uV) plus a few kT (1.7 ueV at 20 mK) of thermal onset.
        assert onset == pytest.approx(2 * ALPHA * distance, abs=2e-5)
