"""Unit tests of rgftrans.analysis.thermal: Fermi functions, thermal conductance, Landauer current, warnings, errors.

Sources named beside the assertions: "Landauer" is the finite-bias Landauer
formula I = (2e/h) ∫ T (f_L - f_R) dE (Datta 1995 ch. 2, from memory; common
practice); "quadrature" marks properties of the package's own integration
scheme (T(E) taken piecewise linear between samples, integrated exactly
against the Fermi functions), derived in rgftrans/thermal.py.
"""

import warnings

import numpy as np
import pytest
from scipy.integrate import quad

from rgftrans.errors import EnergyError, ResolutionWarning, RgftransError
from rgftrans.system.materials import CONDUCTANCE_QUANTUM_S
from rgftrans.analysis.thermal import (
    BOLTZMANN_MEV_PER_K,
    fermi,
    fermi_window,
    landauer_current,
    thermal_conductance,
    thermal_energy_meV,
)

G0 = CONDUCTANCE_QUANTUM_S
T_K = 0.5  # a dilution-to-pumped-helium temperature: kT = 0.0431 meV
KT = T_K * BOLTZMANN_MEV_PER_K


def smooth_transmission(e):
    """A transmission with structure on the scale of kT: a resonance on a smooth background."""
    return 0.3 + 0.5 / (1 + ((e - 0.1) / 0.05) ** 2) + 0.2 * np.tanh(e / 0.2)


#: Uniform grid over ±3 meV (±70 kT at 0.5 K), spacing 1e-3 meV = kT/43.
GRID = np.linspace(-3.0, 3.0, 6001)
TRANS = smooth_transmission(GRID)


@pytest.fixture
def no_warnings():
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        yield


# --- Fermi function and window ----------------------------------------------------------------


@pytest.mark.parametrize("energy, expected", [(-1e-9, 1.0), (0.0, 0.5), (1e-9, 0.0), (-5.0, 1.0), (5.0, 0.0)])
def test_fermi_zero_temperature_step(energy, expected):
    assert fermi(energy, 0.0, 0.0) == expected  # definition: T = 0 step, 1/2 at the edge (exact)


@pytest.mark.parametrize("temperature_K", [0.01, 1.0, 300.0])
def test_fermi_particle_hole_symmetry(temperature_K):
    e = np.linspace(-3.0, 3.0, 61)
    # f(mu + x) + f(mu - x) = 1 (definition); rounding only.
    np.testing.assert_allclose(fermi(0.2 + e, 0.2, temperature_K) + fermi(0.2 - e, 0.2, temperature_K), 1.0,
                               rtol=0, atol=4.5e-16)  # 2 ulp


def test_fermi_and_window_extreme_arguments(no_warnings):
    # |E - mu|/kT up to 1e8: no overflow warnings, exact limits (definition).
    e = np.array([-1e3, -50.0, 50.0, 1e3])
    np.testing.assert_array_equal(fermi(e, 0.0, 0.001), [1.0, 1.0, 0.0, 0.0])
    np.testing.assert_array_equal(fermi_window(e, 0.0, 0.001), 0.0)


@pytest.mark.parametrize("x", [0.0, 0.3, -2.0, 10.0, -35.0, 200.0])
def test_fermi_window_is_cosh_form_and_derivative(x):
    kT = thermal_energy_meV(1.0)
    e = x * kT
    w = fermi_window(e, 0.0, 1.0)
    # -f' = 1/(4 kT cosh²(x/2)) (Datta 1995 ch. 2, from memory): rounding of the two forms (cosh is finite for these x).
    assert w == pytest.approx(1.0 / (4 * kT * np.cosh(x / 2) ** 2), rel=1e-14, abs=0)
    # -df/dE by a central difference (step 1e-4 kT: truncation (1e-4)²/6 * |f'''|/|f'| <~ 1e-8 relative,
    # rounding 1e-16/1e-4 = 1e-12 absolute in units of 1/kT).
    h = 1e-4 * kT
    derivative = -(fermi(e + h, 0.0, 1.0) - fermi(e - h, 0.0, 1.0)) / (2 * h)
    assert w == pytest.approx(derivative, rel=1e-7, abs=1e-11 / kT)


# --- thermal conductance -----------------------------------------------------------------------------


@pytest.mark.parametrize("mu", [0.1, 0.1234567, GRID[3100], -2.0])
def test_conductance_zero_temperature_is_interpolation(mu, no_warnings):
    g = thermal_conductance(GRID, TRANS, mu, 0.0).conductance_g0
    assert g == np.interp(mu, GRID, TRANS)  # design: T = 0 returns T_lin(mu) (exact)


@pytest.mark.parametrize("mu", [0.1, 0.1234567, GRID[3100]])
def test_conductance_low_temperature_limit(mu):
    # T -> 0: G(mu, T) -> T_lin(mu).  At kT = 8.6e-11 meV the window is far narrower than the grid
    # spacing; inside one cell T_lin is linear and ∫(E - mu)(-f') = 0, so only a node within the window
    # (mu on GRID[3100]) leaves a kink term kT |ΔT'| ln 2 ~ 1e-11 (quadrature); 1e-9 bounds it.
    with pytest.warns(ResolutionWarning, match="coarser than kT/2"):
        g = thermal_conductance(GRID, TRANS, mu, 1e-9).conductance_g0
    assert g == pytest.approx(np.interp(mu, GRID, TRANS), abs=1e-9)


@pytest.mark.parametrize("temperature_K", [0.05, 0.5, 4.2])
def test_conductance_constant_and_linear_transmission_exact(temperature_K, no_warnings):
    e = np.linspace(-50.0, 50.0, 200001)  # ±50 meV covers ±130 kT at 4.2 K; spacing 5e-4 meV < kT/2
    mu = np.array([-1.0, 0.0, 0.37])
    # constant T: G = T times the window weight, which is 1 (quadrature: exact for piecewise-linear T)
    g = thermal_conductance(e, np.full(e.size, 0.7), mu, temperature_K)
    np.testing.assert_allclose(g.window_weight, 1.0, rtol=0, atol=1e-15)
    np.testing.assert_allclose(g.conductance_g0, 0.7, rtol=2e-14)
    # linear T: ∫ (a + bE)(-f') dE = a + b mu, since -f' is even about mu (quadrature: exact)
    g = thermal_conductance(e, 0.4 + 0.01 * e, mu, temperature_K).conductance_g0
    np.testing.assert_allclose(g, 0.4 + 0.01 * mu, rtol=2e-14)


@pytest.mark.parametrize("h_over_kT", [0.4, 0.1, 0.02])
def test_conductance_error_is_interpolation_error(h_over_kT):
    # T = (E - mu)²: exact G = π² kT²/3 (second moment of -f', Sommerfeld expansion, Ashcroft & Mermin 1976 ch. 2, from memory).  T_lin - T = (E - a)(b - E) on each cell, whose
    # window-weighted integral is h²/6 up to O(h⁴/kT²) (quadrature), so G = π²kT²/3 + h²/6 + O(h⁴/kT²).
    kT = KT
    h = h_over_kT * kT
    e = np.arange(-45 * kT, 45 * kT + h / 2, h) + 0.3 * h  # nodes not aligned with mu = 0
    g = float(thermal_conductance(e, e**2, 0.0, T_K).conductance_g0)
    assert g == pytest.approx(np.pi**2 * kT**2 / 3 + h**2 / 6, rel=0.02 * h_over_kT**4 + 1e-12)


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_conductance_unchanged_by_points_on_linear_pieces(seed, no_warnings):
    # Adding grid points where T is already linear leaves T_lin, hence G, unchanged (quadrature); the
    # grids differ only in rounding, so 1e-13.
    rng = np.random.default_rng(seed)
    coarse = np.linspace(-2.0, 2.0, 8001)
    t_coarse = smooth_transmission(coarse)
    extra = np.sort(rng.uniform(-2.0, 2.0, 5000))
    fine = np.union1d(coarse, extra)
    t_fine = np.interp(fine, coarse, t_coarse)
    mu = rng.uniform(-1.0, 1.0, 7)
    g_coarse = thermal_conductance(coarse, t_coarse, mu, T_K).conductance_g0
    g_fine = thermal_conductance(fine, t_fine, mu, T_K).conductance_g0
    np.testing.assert_allclose(g_fine, g_coarse, rtol=1e-13)


def test_conductance_vectorised_over_mu(no_warnings):
    mu = np.linspace(-0.5, 0.5, 12).reshape(3, 4)
    result = thermal_conductance(GRID, TRANS, mu, T_K)
    assert result.conductance_g0.shape == (3, 4) and result.window_weight.shape == (3, 4)
    singles = [float(thermal_conductance(GRID, TRANS, m, T_K).conductance_g0) for m in mu.ravel()]
    np.testing.assert_array_equal(result.conductance_g0.ravel(), singles)  # same arithmetic, exact
    # siemens: G0 = 2e²/h from materials (definition, exact multiplication)
    np.testing.assert_array_equal(result.conductance_S, result.conductance_g0 * G0)
    assert result.kT_meV == pytest.approx(KT, rel=1e-15)


def test_conductance_matches_independent_quadrature(no_warnings):
    # Cross-check of the closed-form cell weights against scipy quad of T_lin(E) (-f'(E)) (quad to 1e-13).
    mu = 0.083
    g = float(thermal_conductance(GRID, TRANS, mu, T_K).conductance_g0)
    nodes = GRID[np.abs(GRID - mu) < 40 * KT]
    ref, _ = quad(lambda x: np.interp(x, GRID, TRANS) * fermi_window(x, mu, T_K), mu - 40 * KT, mu + 40 * KT,
                  points=nodes[::8], limit=2000, epsabs=1e-13, epsrel=1e-13)
    assert g == pytest.approx(ref, abs=1e-11)  # quad's accuracy across 400 kinks; window cut at 40 kT (8e-18)


# --- Landauer current ----------------------------------------------------------------------------------


def second_derivative_bound():
    """max|G''(mu)| <= max|T| ∫|w''| dE = max|T| (2/(3√3)) / kT² (∫|w''| = 4 max|w'| for the bell-shaped w)."""
    return np.max(np.abs(TRANS)) * 2 / (3 * np.sqrt(3)) / KT**2


@pytest.mark.parametrize("bias_V", [1e-6, 5e-6, 2e-5])
def test_current_linear_response_symmetric(bias_V, no_warnings):
    mu = 0.05
    i = float(landauer_current(GRID, TRANS, mu, bias_V, T_K).current_A)
    g = float(thermal_conductance(GRID, TRANS, mu, T_K).conductance_S)
    # Landauer: I = (G0/e) ∫_{mu-eV/2}^{mu+eV/2} G(m) dm = G0 V [G(mu) + (eV)²/24 G''(ξ)] (midpoint rule
    # remainder), so the linear-response error is bounded by (eV)²/24 max|G''|, plus rounding.
    ev = bias_V * 1e3
    assert abs(i / bias_V - g) <= G0 * ev**2 / 24 * second_derivative_bound() + 1e-12 * abs(g)


@pytest.mark.parametrize("bias_V", [1e-6, 5e-6])
def test_current_linear_response_source(bias_V, no_warnings):
    mu = 0.05
    i = float(landauer_current(GRID, TRANS, mu, bias_V, T_K, drop="source").current_A)
    g = float(thermal_conductance(GRID, TRANS, mu, T_K).conductance_S)
    # Landauer, one-sided: I/V = G0 [G(mu) + (eV/2) G'(ξ)], |G'| <= max|T| ∫|w'| = max|T|/(2kT).
    ev = bias_V * 1e3
    assert abs(i / bias_V - g) <= G0 * ev / 2 * np.max(TRANS) / (2 * KT) + 1e-12 * abs(g)


def test_current_antisymmetric_for_symmetric_drop(no_warnings):
    bias = np.array([1e-5, 3e-4, 1e-3])
    i_plus = landauer_current(GRID, TRANS, 0.05, bias, T_K).current_A
    i_minus = landauer_current(GRID, TRANS, 0.05, -bias, T_K).current_A
    np.testing.assert_array_equal(i_minus, -i_plus)  # Landauer: f_L <-> f_R swaps sign; same arithmetic
    assert np.all(i_plus > 0)


def test_current_source_drop_is_shifted_symmetric_drop(no_warnings):
    bias = np.array([1e-4, -5e-4, 1e-3])
    i_source = landauer_current(GRID, TRANS, 0.05, bias, T_K, drop="source")
    i_sym = landauer_current(GRID, TRANS, 0.05 + 0.5e3 * bias, bias, T_K)
    # definition of the drops: (mu + eV, mu) = (mu' + eV/2, mu' - eV/2) with mu' = mu + eV/2; rounding only
    np.testing.assert_allclose(i_source.current_A, i_sym.current_A, rtol=1e-12)
    np.testing.assert_allclose(i_source.mu_source - i_source.mu_drain, 1e3 * bias, rtol=1e-14)


@pytest.mark.parametrize("drop", ["symmetric", "source"])
@pytest.mark.parametrize("temperature_K", [0.0, 0.5, 4.2])
def test_current_constant_transmission_ohmic(drop, temperature_K, no_warnings):
    e = np.linspace(-40.0, 40.0, 160001)  # ±40 meV: > ±90 kT beyond the bias window at 4.2 K
    bias = np.array([1e-6, -2e-4, 3e-3, -1e-2])
    result = landauer_current(e, np.full(e.size, 0.6), 0.2, bias, temperature_K, drop=drop)
    # Landauer with energy-independent T: I = (2e²/h) T V exactly (common practice); rounding only.
    np.testing.assert_allclose(result.current_A, G0 * 0.6 * bias, rtol=1e-13)
    np.testing.assert_allclose(result.conductance_S, G0 * 0.6, rtol=1e-13)


@pytest.mark.parametrize("drop", ["symmetric", "source"])
def test_current_is_integral_of_conductance(drop, no_warnings):
    # Landauer: f_L - f_R = ∫_{mu_R}^{mu_L} (-f'(E - m)) dm, so I = (G0/e) ∫ G(m, T) dm.  Cross-check of the
    # two independent integrators (closed-form cells vs Gauss-Legendre pieces); quad to 1e-13 relative.
    result = landauer_current(GRID, TRANS, 0.05, 4e-4, T_K, drop=drop)
    lo, hi = float(result.mu_drain), float(result.mu_source)

    def g(m):
        return float(thermal_conductance(GRID, TRANS, m, T_K, check=False).conductance_g0)

    integral, _ = quad(g, lo, hi, epsabs=0, epsrel=1e-13)
    assert float(result.current_A) == pytest.approx(G0 * 1e-3 * integral, rel=1e-12)


def test_current_zero_temperature_and_limit(no_warnings):
    # T = 0: I = (G0/e) ∫_{mu_R}^{mu_L} T_lin dE, exact for a piecewise-linear T: a ramp T = E on [0, 1]
    # meV and flat 1 above gives (1/2)(b² - a²) on the ramp (Landauer; exact up to rounding).
    e = np.array([-1.0, 0.0, 1.0, 3.0])
    t = np.array([0.0, 0.0, 1.0, 1.0])
    result = landauer_current(e, t, 0.5, 4e-4, 0.0)
    a, b = 0.5 - 0.2, 0.5 + 0.2
    assert float(result.current_A) == pytest.approx(G0 * 1e-3 * 0.5 * (b**2 - a**2), rel=1e-14)
    # T -> 0 on the smooth case: the thermal correction is O(kT² T'') (Sommerfeld), 1e-12 relative at 1e-6 K.
    i0 = float(landauer_current(GRID, TRANS, 0.05, 2e-4, 0.0).current_A)
    with pytest.warns(ResolutionWarning):
        i_small = float(landauer_current(GRID, TRANS, 0.05, 2e-4, 1e-6).current_A)
    assert i_small == pytest.approx(i0, rel=1e-11)


# --- ResolutionWarning -------------------------------------------------------------------------


def test_warns_when_window_not_resolved():
    coarse = np.linspace(-3.0, 3.0, 61)  # spacing 0.1 meV = 2.3 kT at 0.5 K
    with pytest.warns(ResolutionWarning, match=r"coarser than kT/2 = 0\.0215 meV") as record:
        thermal_conductance(coarse, smooth_transmission(coarse), 0.0, T_K)
    assert len(record) == 1 and "\n" not in str(record[0].message)
    with pytest.warns(ResolutionWarning, match="coarser than kT/2"):
        landauer_current(coarse, smooth_transmission(coarse), 0.0, 1e-4, T_K)


def test_spacing_warning_only_counts_the_window(no_warnings):
    # Coarse far away (beyond mu ± 20 kT), fine inside: no warning.
    e = np.concatenate([np.linspace(-3.0, -1.01, 20), np.linspace(-1.0, 1.0, 2001), np.linspace(1.01, 3.0, 20)])
    thermal_conductance(e, smooth_transmission(e), 0.0, T_K)


def test_warns_when_window_cut_off():
    e = np.linspace(-0.5, 0.5, 1001)  # ±0.5 meV = ±11.6 kT at 0.5 K
    mu = 0.2
    missing = 1 - fermi(e[0], mu, T_K) + fermi(e[-1], mu, T_K)  # window weight beyond the grid (∫ -f' = f difference)
    with pytest.warns(ResolutionWarning, match=r"does not cover mu ± 20 kT") as record:
        result = thermal_conductance(e, np.ones(e.size), mu, T_K)
    assert f"up to {missing:.3g} of the Fermi window's weight" in str(record[0].message)
    assert "\n" not in str(record[0].message)
    # the result reports the weight kept, and for T = 1 the conductance equals it (quadrature: exact)
    assert float(result.window_weight) == pytest.approx(1 - missing, rel=1e-14)
    assert float(result.conductance_g0) == pytest.approx(1 - missing, rel=1e-14)


def test_warns_when_bias_window_cut_off():
    with pytest.warns(ResolutionWarning, match=r"does not cover mu_source/mu_drain ± 20 kT"):
        landauer_current(GRID, TRANS, 2.5, 1e-3, T_K)
    with pytest.warns(ResolutionWarning, match="outside the energy grid"):
        landauer_current(GRID, TRANS, 2.9, 0.5, 0.0)


def test_warns_zero_temperature_mu_off_grid():
    with pytest.warns(ResolutionWarning, match="outside the energy grid"):
        g = thermal_conductance(GRID, TRANS, [0.0, 3.5], 0.0)
    np.testing.assert_array_equal(g.window_weight, [1.0, 0.0])
    assert g.conductance_g0[1] == 0.0


def test_check_false_silences(no_warnings):
    coarse = np.linspace(-0.5, 0.5, 11)
    thermal_conductance(coarse, np.ones(11), 0.4, T_K, check=False)
    landauer_current(coarse, np.ones(11), 0.4, 1e-3, T_K, check=False)


# --- bad input: one-line errors -----------------------------------------------------------------


E5 = np.array([0.0, 0.1, 0.2, 0.3, 0.4])
T5 = np.array([0.1, 0.2, 0.3, 0.4, 0.5])

BAD_CONDUCTANCE_INPUT = [
    pytest.param(dict(temperature_K=-1.0), RgftransError, r"temperature_K must be finite and >= 0 K, got -1\.0",
                 id="negative temperature"),
    pytest.param(dict(temperature_K=float("nan")), RgftransError, "temperature_K must be finite", id="NaN temperature"),
    pytest.param(dict(temperature_K=[1.0, 2.0]), RgftransError, "temperature_K must be a single number",
                 id="array temperature"),
    pytest.param(dict(transmission=[0.1, np.nan, 0.3, 0.4, 0.5]), RgftransError,
                 r"transmission contains 1 NaN .* energy 0\.1 meV \(index 1\)", id="NaN transmission"),
    pytest.param(dict(energies=[0.0, 0.1, np.nan, 0.3, 0.4]), EnergyError, r"energies\[2\] = nan",
                 id="NaN energy"),
    pytest.param(dict(energies=[0.0, 0.2, 0.1, 0.3, 0.4]), EnergyError,
                 r"energies must increase, but energies\[1\] = 0\.2 > energies\[2\] = 0\.1 .* np\.argsort",
                 id="unsorted energies"),
    pytest.param(dict(energies=[0.0, 0.1, 0.1, 0.3, 0.4]), EnergyError,
                 r"energies repeat a value: energies\[1\] = energies\[2\] = 0\.1 meV", id="duplicate energy"),
    pytest.param(dict(transmission=[0.1, 0.2, 0.3]), RgftransError,
                 r"transmission has shape \(3,\) but energies has shape \(5,\)", id="length mismatch"),
    pytest.param(dict(energies=[0.0], transmission=[1.0]), EnergyError, "at least 2 energies", id="one energy"),
    pytest.param(dict(energies=np.zeros((2, 3)), transmission=np.zeros((2, 3))), EnergyError,
                 r"1D array .* shape \(2, 3\)", id="2D energies"),
    pytest.param(dict(transmission=T5 + 0j), RgftransError, "transmission must be real", id="complex transmission"),
    pytest.param(dict(mu=[0.1, np.nan]), EnergyError, "mu contains 1 NaN", id="NaN mu"),
]


@pytest.mark.parametrize("override, error, message", BAD_CONDUCTANCE_INPUT)
def test_conductance_bad_input(override, error, message):
    kwargs = dict(energies=E5, transmission=T5, mu=0.2, temperature_K=1.0) | override
    with pytest.raises(error, match=message) as info:
        thermal_conductance(**kwargs)
    assert "\n" not in str(info.value)


BAD_CURRENT_INPUT = [
    pytest.param(dict(bias_V=np.nan), "bias_V contains NaN", id="NaN bias"),
    pytest.param(dict(drop="drain"), r"drop must be 'symmetric' .* or 'source' .* got 'drain'", id="unknown drop"),
    pytest.param(dict(temperature_K=-0.1), "temperature_K must be finite and >= 0 K", id="negative temperature"),
    pytest.param(dict(transmission=[0.1, 0.2, 0.3, np.inf, 0.5]), "transmission contains 1 NaN or infinite",
                 id="infinite transmission"),
    pytest.param(dict(energies=[0.4, 0.3, 0.2, 0.1, 0.0]), "energies must increase", id="descending energies"),
]


@pytest.mark.parametrize("override, message", BAD_CURRENT_INPUT)
def test_current_bad_input(override, message):
    kwargs = dict(energies=E5, transmission=T5, mu=0.2, bias_V=1e-4, temperature_K=1.0) | override
    drop = kwargs.pop("drop", "symmetric")
    with pytest.raises(RgftransError, match=message) as info:
        landauer_current(**kwargs, drop=drop)
    assert "\n" not in str(info.value)


@pytest.mark.parametrize("call, message", [
    pytest.param(lambda: fermi(0.0, 0.0, -4.2), "temperature_K must be finite and >= 0 K, got -4.2", id="fermi"),
    pytest.param(lambda: fermi_window(0.0, 0.0, 0.0), "needs temperature_K > 0, got 0.0", id="window at 0 K"),
    pytest.param(lambda: thermal_energy_meV("warm"), "temperature_K must be a single number", id="not a number"),
])
def test_fermi_bad_temperature(call, message):
    with pytest.raises(RgftransError, match=message) as info:
        call()
    assert "\n" not in str(info.value)
