"""Fitting Coulomb peaks (rgftrans.analysis.peakfit) against synthetic traces of the master equation.

Source: the synthetic traces come from rgftrans.analysis.charging's master equation (itself checked against
Beenakker, Phys. Rev. B 44, 1646 (1991), from memory, in test_charging.py) with invented parameters and seeded
Gaussian noise; a correct least-squares fit with the right noise covers the truth within about 2 standard
errors (common practice).
"""

from __future__ import annotations

import numpy as np
import pytest

from rgftrans.analysis.charging import ChargingDot, sequential_conductance
from rgftrans.analysis.peakfit import coulomb_peaks_model, fit_coulomb_peaks
from rgftrans.errors import TraceFitFailed

ALPHA, T = 0.08, 0.1
RATES = np.array([[2e8, 1e8], [3e8, 3e8], [1e8, 4e8]])


def _trace(spin, noise_fraction=0.01, seed=3):
    dot = ChargingDot(charging_energy_meV=0.6, lever_arm=ALPHA, levels_meV=[0.0, 0.25, 0.45], rates_per_s=RATES,
                      spin=spin, field_T=0.0, offset_meV=0.0, max_electrons=6)
    gate = np.linspace(0.0, 0.06 if spin else 0.04, 1201)
    g = sequential_conductance(dot, gate, T)[0]
    noise = noise_fraction * g.max()
    return gate, g + np.random.default_rng(seed).normal(0.0, noise, gate.size), noise


@pytest.mark.parametrize("spin", [False, True])
def test_fit_recovers_the_lever_arm_and_rates(spin):
    gate, g, noise = _trace(spin)
    fit = fit_coulomb_peaks(gate, g, temperature_K=T, spin=spin, noise_S=noise, lever_arm=0.06)
    assert abs(fit.lever_arm - ALPHA) < 2.5 * fit.lever_arm_err
    series = RATES[:, 0] * RATES[:, 1] / RATES.sum(axis=1)
    expected = np.repeat(series, 2) if spin else series
    assert fit.positions_V.size == expected.size
    # The master equation's trace, fitted with its own line shapes: the lever arm within 2.5 standard errors
    # (checked above) and each peak's series rate within 3 (the errors a few per cent at 1 % noise).
    assert np.all(np.abs(fit.rates_per_s - expected) < 3 * fit.rates_err_per_s + 1e-3 * expected)
    assert 0.7 < fit.reduced_chi_square < 1.4


def test_temperature_from_a_known_lever_arm():
    gate, g, noise = _trace(False)
    fit = fit_coulomb_peaks(gate, g, temperature_K=0.15, lever_arm=ALPHA, fit_temperature=True, noise_S=noise)
    assert abs(fit.temperature_K - T) < 2.5 * fit.temperature_err_K


def test_a_wrong_line_shape_fails_loudly():
    gate = np.linspace(-1, 1, 401) * 1e-2
    lorentz = 1e-8 / (1 + (gate / 2e-3) ** 2)  # a broad Lorentzian, not a thermal peak at this lever arm
    with pytest.raises(TraceFitFailed):
        fit_coulomb_peaks(gate, lorentz, temperature_K=T, lever_arm=ALPHA, fit_temperature=True,
                          noise_S=1e-11)


def test_model_is_the_closed_form_peak():
    gate = np.linspace(-2e-3, 2e-3, 101)
    g = coulomb_peaks_model(gate, [0.0], [1e8], ALPHA, T)
    from scipy import constants
    kt = constants.k * T
    x = constants.e * ALPHA * gate / kt
    assert np.allclose(g, constants.e**2 / (4 * kt) * 1e8 / np.cosh(x / 2) ** 2, rtol=1e-12)
    # With spin, the pair of one orbital: the first peak's maximum sits where the level is (kT/2) ln 2 above E_F,
    # i.e. at a less positive gate voltage than the crossing; the second's mirrored (test_charging.py's derivation).
    fine = np.linspace(-1e-3, 1e-3, 20001)
    first = coulomb_peaks_model(fine, [0.0], [1e8], ALPHA, T, spin=True, first_fills_empty=True)
    second = coulomb_peaks_model(fine, [0.0], [1e8], ALPHA, T, spin=True, first_fills_empty=False)
    shift = 0.5 * np.log(2) * kt / (constants.e * ALPHA)
    assert fine[np.argmax(first)] == pytest.approx(-shift, abs=2 * (fine[1] - fine[0]))
    assert fine[np.argmax(second)] == pytest.approx(shift, abs=2 * (fine[1] - fine[0]))
