"""Tests of rgftrans.io.compare: reading traces, series resistance, the gate-voltage model, fits, HDF5, plots.

Every measurement here is synthetic: a stored sweep is written directly (no
RGF run) with an analytic transmission, two Breit-Wigner peaks of known
widths, T(E) = sum_n (Γ_n/2)² / ((E - E_n)² + (Γ_n/2)²) (symmetric coupling,
peak height 1; Breit & Wigner, Phys. Rev. 49, 519 (1936)); a synthetic trace is
made from it at a known temperature, lever arm, offset and series resistance,
with Gaussian noise from a fixed seed.

Sources named beside the assertions: "closed form" (the series-resistance
formulas), "common practice" (a correct least-squares fit with the correct
noise model covers the truth within 2 standard errors at ~95 %, and its
chi-square over dof has mean 1 and standard deviation sqrt(2/dof)), "module
convention" (mu = mu_ref + alpha (V_g - V_0), documented in rgftrans/compare.py).
"""

import warnings
from pathlib import Path

import numpy as np
import pytest

from rgftrans.analysis.thermal import thermal_average
from rgftrans.io.compare import MeasuredTrace, add_series_resistance, fit_trace, model_conductance, read_fit, read_trace, remove_series_resistance
from rgftrans.errors import CompareError
from rgftrans.plots.fits import plot_fit
from rgftrans.errors import ResolutionWarning, RgftransError, StoreError
from rgftrans.system.materials import CONDUCTANCE_QUANTUM_S as G0
from rgftrans.io.store import Axis, QuantitySpec, ResultFile, read_result, validate
from rgftrans.analysis.thermal import BOLTZMANN_MEV_PER_K, thermal_conductance

DATA = Path(__file__).parent / "data"

#: Breit-Wigner peaks (E_n, Γ_n) in meV: one narrower than kT at 0.25 K (kT = 0.0215 meV), one wider.
PEAKS = ((0.5, 0.02), (1.5, 0.06))
#: Energy grid, meV: spacing 0.005 meV = kT/4.3 at 0.25 K.
ENERGIES = np.linspace(-1.0, 3.0, 801)
#: The synthetic measurement's truth.
TRUTH = {"lever_arm": 80.0, "offset": -0.1, "r_series": 5e3, "temperature": 0.25}
NOISE_S = 0.2e-6  # 0.2 µS, about 0.5 % of the highest measured peak
#: Gate voltages mapping to mu = 0.2 .. 1.8 meV: 300 points, gate step 5.3 µeV < kT/2.
GATE_V = np.linspace(-0.0975, -0.0775, 300)
#: Start values of the fits: 6 % off in lever arm, 2 kT off in offset, 40 % off in R_s, 20 % in T.
START = {"initial": {"lever_arm": 75.0, "offset": -0.1005}, "r_series_ohm": 3e3, "temperature_K": 0.3}
LEADS = ["source", "drain"]
SPEC = {"transmission": QuantitySpec(shape_tail=(("lead_out", 2), ("lead_in", 2)), units="1",
                                     long_name="transmission from lead_in into lead_out")}
#: What a sweep writes beside the arrays: a spinless model (T per spin) and no Fermi energy.
SWEEP_ATTRS = {"spin_degeneracy": 2, "fermi_energy_meV": float("nan")}


def breit_wigner(e):
    return sum((w / 2) ** 2 / ((e - e0) ** 2 + (w / 2) ** 2) for e0, w in PEAKS)


def two_lead_matrix(t):
    """(n_E, 2, 2) [out, in] matrix of a two-terminal device: T off the diagonal, R = 1 - T on it."""
    m = np.empty((t.size, 2, 2))
    m[:, 1, 0] = m[:, 0, 1] = t
    m[:, 0, 0] = m[:, 1, 1] = 1.0 - t
    return m


@pytest.fixture(scope="module")
def energy_sweep(tmp_path_factory):
    """A stored energy sweep (no parameter axes) of the two Breit-Wigner peaks."""
    path = tmp_path_factory.mktemp("sweep") / "bw.h5"
    with ResultFile.create(path, config_text="# synthetic sweep\n", config_hash="synthetic-bw", axes=[],
                           energies_meV=ENERGIES, lead_names=LEADS, quantities=SPEC,
                           attrs=SWEEP_ATTRS) as rf:
        rf.write_point((), {"transmission": two_lead_matrix(breit_wigner(ENERGIES))})
    return path


@pytest.fixture(scope="module")
def gate_sweep(tmp_path_factory):
    """A stored sweep along a plunger-gate axis: at gate g the levels sit lower by alpha g (module convention)."""
    path = tmp_path_factory.mktemp("sweep") / "gate.h5"
    gates = np.linspace(0.0, 0.025, 321)  # V; alpha g spans 0 .. 2 meV in steps of kT/4
    energies = np.linspace(-0.6, 0.6, 241)
    axis = Axis("vg_plunger", gates, "V", "plunger gate voltage")
    with ResultFile.create(path, config_text="# synthetic gate sweep\n", config_hash="synthetic-gate", axes=[axis],
                           energies_meV=energies, lead_names=LEADS, quantities=SPEC,
                           attrs=SWEEP_ATTRS) as rf:
        for j, g in enumerate(gates):
            rf.write_point((j,), {"transmission": two_lead_matrix(breit_wigner(energies + TRUTH["lever_arm"] * g))})
    return path


def synthetic_trace(sweep, seed=0, gate=GATE_V, noise=NOISE_S):
    g = model_conductance(sweep, gate, temperature_K=TRUTH["temperature"], lever_arm_meV_per_V=TRUTH["lever_arm"],
                          offset_V=TRUTH["offset"], r_series_ohm=TRUTH["r_series"], check=False)
    rng = np.random.default_rng(seed)
    return MeasuredTrace(gate, g + rng.normal(0.0, noise, gate.size), source="synthetic",
                         description=f"synthetic trace, seed {seed}")


#: Fit configurations: everything free with the true sigma given; lever arm and offset with sigma estimated.
FITS = {
    "all four, sigma given": dict(fit_series=True, fit_temperature=True, noise_S=NOISE_S, **START),
    "lever arm and offset, sigma estimated": dict(initial=START["initial"], r_series_ohm=TRUTH["r_series"],
                                                  temperature_K=TRUTH["temperature"]),
}


@pytest.fixture(scope="module")
def fits(energy_sweep):
    trace = synthetic_trace(energy_sweep)
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # a well-sampled trace on a covering grid: no warning
        return {name: fit_trace(energy_sweep, trace, **kwargs) for name, kwargs in FITS.items()}


# --- the thermal integral and the gate-voltage convention ------------------------------------------


@pytest.mark.parametrize("temperature_K", [0.0, 0.05, 0.25, 4.0])
def test_vectorised_thermal_integral_matches_thermal_conductance(temperature_K):
    # Same integral (T_lin against -df/dE, zero off the grid) by two routes; non-uniform grid, mu off the grid too.
    e = np.sort(np.random.default_rng(1).uniform(-1.0, 3.0, 500))
    t = breit_wigner(e)
    mu = np.linspace(-1.5, 3.5, 211)
    fast = thermal_average(e, t, mu, BOLTZMANN_MEV_PER_K * temperature_K)
    reference = thermal_conductance(e, t, mu, temperature_K, check=False).conductance_g0
    np.testing.assert_allclose(fast, reference, rtol=0, atol=1e-12)


@pytest.mark.parametrize("lever_arm, offset, mu_ref", [(80.0, -0.1, 0.0), (-60.0, 0.2, 0.3), (120.0, 0.0, -0.5)])
@pytest.mark.parametrize("peak", [0.5, 1.5])
def test_model_is_thermal_conductance_at_mapped_mu(energy_sweep, lever_arm, offset, mu_ref, peak):
    # Module convention: at V = V_0 + (E - mu_ref)/alpha the model is G(mu = E, T).
    gate = np.array([offset + (peak - mu_ref) / lever_arm])
    g = model_conductance(energy_sweep, gate, temperature_K=0.25, lever_arm_meV_per_V=lever_arm, offset_V=offset,
                          mu_ref_meV=mu_ref, check=False)
    expected = thermal_conductance(ENERGIES, breit_wigner(ENERGIES), peak, 0.25, check=False).conductance_g0 * G0
    assert g[0] == pytest.approx(expected, rel=1e-12)


def test_gate_axis_model_matches_energy_mapping(energy_sweep, gate_sweep):
    # The stored gate axis holds the same physics as the lever-arm mapping (fixture construction); PCHIP on a
    # gate step of kT/4 interpolates a peak of the thermal conductance to better than 1e-3 of G0.
    gate = np.linspace(0.004, 0.021, 171) + TRUTH["offset"]
    kwargs = dict(temperature_K=0.25, offset_V=TRUTH["offset"], r_series_ohm=TRUTH["r_series"])
    mapped = model_conductance(energy_sweep, gate, lever_arm_meV_per_V=TRUTH["lever_arm"], **kwargs)
    direct = model_conductance(gate_sweep, gate, gate_axis="vg_plunger", **kwargs)
    np.testing.assert_allclose(direct / G0, mapped / G0, rtol=0, atol=1e-3)


# --- series resistance -------------------------------------------------------------------------------


@pytest.mark.parametrize("g_meas, r_series, g_dev", [
    (100e-6, 5e3, 200e-6),      # 1/(10 kOhm - 5 kOhm)
    (0.0, 5e3, 0.0),            # an open device stays open
    (50e-6, 0.0, 50e-6),        # no series resistance: no change
    (1 / 3e4, 1e4, 1 / 2e4),    # 30 kOhm measured, 10 kOhm in series
])
def test_remove_series_resistance_closed_form(g_meas, r_series, g_dev):
    # closed form: G_dev = 1/(1/G_meas - R_s), and back G_meas = 1/(1/G_dev + R_s)
    assert remove_series_resistance(g_meas, r_series) == pytest.approx(g_dev, rel=1e-14, abs=1e-20)
    assert add_series_resistance(g_dev, r_series) == pytest.approx(g_meas, rel=1e-14, abs=1e-20)


@pytest.mark.parametrize("r_series", [0.0, 1e3, 5e3, 2e4])
def test_series_resistance_round_trip(r_series):
    g_dev = np.linspace(0.0, 5.0, 101) * G0  # up to five open channels
    back = remove_series_resistance(add_series_resistance(g_dev, r_series), r_series)
    np.testing.assert_allclose(back, g_dev, rtol=1e-12, atol=1e-20)  # closed form: exact inverses


def test_series_resistance_divergence_names_the_point():
    g = np.array([50e-6, 150e-6, 250e-6, 100e-6])  # 1/R_s = 200 µS at 5 kOhm
    with pytest.raises(CompareError, match=r"point 2 .*1 point.* diverges") as info:
        remove_series_resistance(g, 5e3)
    assert "\n" not in str(info.value)


# --- fitting ------------------------------------------------------------------------------------------


@pytest.mark.parametrize("config, name", [
    *[("all four, sigma given", n) for n in TRUTH],
    *[("lever arm and offset, sigma estimated", n) for n in ("lever_arm", "offset")],
])
def test_fit_recovers_truth_within_two_standard_errors(fits, config, name):
    # common practice: a correct model with the correct noise model covers the truth at ~95 % within 2 sigma
    # (a 100-seed run of "all four" gave 94-96 % per parameter and z-scores of unit spread).
    fit = fits[config]
    assert fit.success
    assert abs(fit.values[name] - TRUTH[name]) < 2.0 * fit.stderr[name]


def test_reduced_chi_square_near_one_with_true_sigma(fits):
    fit = fits["all four, sigma given"]
    # common practice: chi²/dof of a correct fit has mean 1 and standard deviation sqrt(2/dof)
    assert fit.noise_source == "given" and fit.dof == GATE_V.size - 4
    assert abs(fit.reduced_chi_square - 1.0) < 3.0 * np.sqrt(2.0 / fit.dof)


def test_estimated_noise_near_true_sigma(fits):
    fit = fits["lever arm and offset, sigma estimated"]
    # common practice: the rms estimate of sigma has relative spread 1/sqrt(2 dof)
    assert fit.noise_source == "estimated" and fit.reduced_chi_square == 1.0
    assert abs(fit.noise_S / NOISE_S - 1.0) < 3.0 / np.sqrt(2.0 * fit.dof)


def test_fit_invariants(fits):
    fit = fits["all four, sigma given"]
    np.testing.assert_allclose(fit.residuals_S, fit.measured_S - fit.model_S, rtol=0, atol=0)
    np.testing.assert_allclose(fit.model_S, add_series_resistance(fit.model_device_S, fit.values["r_series"]))
    corr = fit.correlation
    assert corr.shape == (4, 4)
    np.testing.assert_allclose(np.diag(corr), 1.0, rtol=1e-12)
    np.testing.assert_allclose(corr, corr.T, rtol=1e-12)
    assert np.all(np.abs(corr) <= 1.0 + 1e-12)
    assert "± " in fit.summary() and "(given)" in fit.summary()


def test_gate_axis_fit_recovers_offset(energy_sweep, gate_sweep):
    trace = synthetic_trace(energy_sweep, seed=3, gate=np.linspace(0.003, 0.022, 200) + TRUTH["offset"])
    fit = fit_trace(gate_sweep, trace, gate_axis="vg_plunger", temperature_K=TRUTH["temperature"],
                    r_series_ohm=TRUTH["r_series"], noise_S=NOISE_S, initial={"offset": TRUTH["offset"] + 4e-4})
    assert fit.mode == "gate" and fit.fitted == ("offset",)
    # common practice (2 standard errors), plus the PCHIP interpolation error of the stored gate axis
    assert abs(fit.values["offset"] - TRUTH["offset"]) < 2.0 * fit.stderr["offset"] + 1e-6
    assert abs(fit.reduced_chi_square - 1.0) < 3.0 * np.sqrt(2.0 / fit.dof)


@pytest.mark.parametrize("kwargs, fragment", [
    (dict(temperature_K=0.25), "the lever arm initial['lever_arm']"),
    (dict(temperature_K=0.25, initial={"lever_arm": 80.0}, fit=("gain",)), "cannot fit ['gain']"),
    (dict(temperature_K=0.0, initial={"lever_arm": 80.0}), "temperature_K = 0.0"),
    (dict(temperature_K=0.25, initial={"lever_arm": 80.0}, noise_S=-1.0), "noise_S = -1.0"),
    (dict(temperature_K=0.25, initial={"lever_arm": 80.0}, leads=("source", "gate")), "no lead 'gate'"),
    (dict(temperature_K=0.25, initial={"lever_arm": 80.0, "slope": 1.0}), "initial names ['slope']"),
])
def test_fit_request_errors(energy_sweep, kwargs, fragment):
    trace = MeasuredTrace(GATE_V[:20], np.ones(20) * 1e-6, source="synthetic")
    with pytest.raises(CompareError) as info:
        fit_trace(energy_sweep, trace, **kwargs)
    assert fragment in str(info.value) and "\n" not in str(info.value)


@pytest.mark.parametrize("kwargs, fragment", [
    (dict(), "pass select 'vg_plunger'"),
    (dict(gate_axis="vg_plunger", fit=("lever_arm", "offset")), "needs no lever arm"),
    (dict(gate_axis="bias"), "no axis 'bias'"),
])
def test_gate_sweep_request_errors(gate_sweep, kwargs, fragment):
    trace = MeasuredTrace(GATE_V[:20], np.ones(20) * 1e-6, source="synthetic")
    with pytest.raises(CompareError) as info:
        fit_trace(gate_sweep, trace, temperature_K=0.25, **kwargs)
    assert fragment in str(info.value)


# --- resolution warnings ------------------------------------------------------------------------------


@pytest.mark.parametrize("gate, fragment", [
    (np.linspace(-0.0975, -0.0775, 30), "gate step"),                    # 55 µeV per step > kT/2 = 10.8 µeV
    (np.linspace(-0.075, -0.065, 300), "stored energy grid covers"),     # mu up to 2.8 meV + 20 kT > 3 meV
    (np.linspace(-0.1175, -0.1, 300), "stored energy grid covers"),      # mu down to -1.4 meV < -1 meV
])
def test_resolution_warnings(energy_sweep, gate, fragment):
    with pytest.warns(ResolutionWarning, match=fragment):
        model_conductance(energy_sweep, gate, temperature_K=0.25, lever_arm_meV_per_V=80.0, offset_V=-0.1)


def test_no_resolution_warning_for_a_covered_fine_trace(energy_sweep):
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        model_conductance(energy_sweep, GATE_V, temperature_K=0.25, lever_arm_meV_per_V=80.0, offset_V=-0.1)


# --- reading traces -------------------------------------------------------------------------------------


GOOD_FILES = [
    # (file text, read_trace keywords, expected gate_V, expected conductance in S)
    ("Vg [V],G [uS]\n0.1,1.0\n0.2,2.0\n0.3,3.0\n", {}, [0.1, 0.2, 0.3], [1e-6, 2e-6, 3e-6]),
    ("Vg [V],G [2e2/h]\n0.1,0.5\n0.2,1.0\n0.3,0.25\n", {}, [0.1, 0.2, 0.3], [0.5 * G0, G0, 0.25 * G0]),
    ("gate;I [nA]\n0.1;1.0\n0.2;2.0\n0.3;4.0\n", dict(kind="current", bias_V=1e-4),
     [0.1, 0.2, 0.3], [1e-5, 2e-5, 4e-5]),
    ("# synthetic\n0.1 1e-6\n0.2   2e-6\n\n0.3\t3e-6\n", dict(units="S"), [0.1, 0.2, 0.3], [1e-6, 2e-6, 3e-6]),
    ("Vg [mV]\tG [µS]\n30\t3\n20\t2\n10\t1\n", {}, [0.01, 0.02, 0.03], [1e-6, 2e-6, 3e-6]),  # recorded downwards
    ("t [s],Vg [V],G [nS]\n0,0.1,1\n1,0.2,2\n2,0.3,3\n", dict(gate_column="vg", value_column=2),
     [0.1, 0.2, 0.3], [1e-9, 2e-9, 3e-9]),
]


@pytest.mark.parametrize("text, kwargs, gate, conductance", GOOD_FILES)
def test_read_trace_formats_and_units(tmp_path, text, kwargs, gate, conductance):
    path = tmp_path / "trace.csv"
    path.write_text(text, encoding="utf-8")
    trace = read_trace(path, **kwargs)
    np.testing.assert_allclose(trace.gate_V, gate, rtol=1e-12)
    np.testing.assert_allclose(trace.conductance_S, conductance, rtol=1e-12)
    assert trace.source == str(path)


def test_read_trace_fixture_with_second_column():
    trace = read_trace(DATA / "synthetic_trace.csv", second_column="B")
    np.testing.assert_allclose(trace.gate_V, [-0.082, -0.0815, -0.081, -0.0805, -0.080])  # mV, reversed
    np.testing.assert_allclose(trace.conductance_S * 1e6, [1.25, 11.75, 30.0, 12.25, 1.5])
    np.testing.assert_allclose(trace.second_values, 0.1)
    assert trace.second_name == "B [T]" and "'G' [uS]" in trace.description


BAD_FILES = [
    # (id, file text, read_trace keywords, fragments every message must contain)
    ("missing column", "Vg [V],G [uS]\n0.1,1\n0.2,2\n0.3,3\n", dict(gate_column="Vgate"),
     ["no column 'Vgate'", "'Vg [V]', 'G [uS]'"]),
    ("non-numeric cell", "Vg [V],G [uS]\n0.1,1\n0.2,abc\n0.3,3\n", {}, ["line 3", "'abc'"]),
    ("NaN", "# synthetic\nVg [V],G [uS]\n0.1,1\n0.2,2\n0.3,nan\n", {}, ["line 5", "NaN"]),
    ("infinite", "Vg [V],G [uS]\n0.1,1\ninf,2\n0.3,3\n", {}, ["line 3", "infinite"]),
    ("turns back", "Vg [V],G [uS]\n0.1,1\n0.2,2\n0.15,3\n0.3,4\n", {}, ["line 4", "turns back"]),
    ("repeated gate", "Vg [V],G [uS]\n0.1,1\n0.2,2\n0.2,3\n0.3,4\n", {}, ["line 4", "repeats line 3"]),
    ("current without bias", "Vg [V],I [nA]\n0.1,1\n0.2,2\n0.3,3\n", dict(kind="current"), ["bias_V"]),
    ("conductance given as current", "Vg [V],I [nA]\n0.1,1\n0.2,2\n0.3,3\n", {}, ["kind 'current'"]),
    ("too few points", "Vg [V],G [uS]\n0.1,1\n0.2,2\n", {}, ["2 data row(s)", "at least 3"]),
    ("short row", "Vg [V],G [uS]\n0.1,1\n0.2\n0.3,3\n", {}, ["line 3", "1 cell(s), expected 2"]),
    ("unknown unit", "Vg [V],G [furlong]\n0.1,1\n0.2,2\n0.3,3\n", {}, ["unknown conductance unit 'furlong'"]),
    ("conflicting units", "Vg [V],G [uS]\n0.1,1\n0.2,2\n0.3,3\n", dict(units="S"), ["says [uS]", "units 'S'"]),
    ("no units", "0.1 1\n0.2 2\n0.3 3\n", {}, ["units of the conductance column", "pass units (one of"]),
    ("ambiguous value", "Vg [V],G [uS],I [nA]\n0.1,1,2\n0.2,2,3\n0.3,3,4\n", {}, ["cannot tell", "'I [nA]'"]),
]


@pytest.mark.parametrize("text, kwargs, fragments", [case[1:] for case in BAD_FILES], ids=[c[0] for c in BAD_FILES])
def test_read_trace_errors_are_one_line(tmp_path, text, kwargs, fragments):
    path = tmp_path / "bad.csv"
    path.write_text(text, encoding="utf-8")
    with pytest.raises(CompareError) as info:
        read_trace(path, **kwargs)
    message = str(info.value)
    assert "\n" not in message and str(path) in message
    for fragment in fragments:
        assert fragment in message
    assert isinstance(info.value, RgftransError)


def test_measured_trace_refuses_unsorted_gate():
    with pytest.raises(CompareError, match="increase strictly"):
        MeasuredTrace([0.1, 0.3, 0.2], [1.0, 2.0, 3.0], source="synthetic")


# --- HDF5 and plots -------------------------------------------------------------------------------------


def assert_same_fit(a, b):
    for name in a.__dataclass_fields__:
        x, y = getattr(a, name), getattr(b, name)
        if isinstance(x, np.ndarray):
            np.testing.assert_array_equal(x, y)
        elif isinstance(x, dict):
            assert x.keys() == y.keys()
            np.testing.assert_array_equal(list(x.values()), list(y.values()))
        elif isinstance(x, float) and np.isnan(x):  # e.g. no predicted lever arm: NaN both ways
            assert np.isnan(y), name
        else:
            assert x == y, name


@pytest.mark.parametrize("target", ["new file", "result file"])
def test_to_hdf5_round_trip(fits, energy_sweep, tmp_path, target):
    fit = fits["all four, sigma given"]
    if target == "new file":
        path = tmp_path / "fit.h5"
    else:
        path = tmp_path / "sweep_copy.h5"
        path.write_bytes(Path(energy_sweep).read_bytes())
    fit.to_hdf5(path, group="compare")
    assert_same_fit(read_fit(path, "compare"), fit)
    with pytest.raises(StoreError, match="group /compare exists; pass --overwrite"):
        fit.to_hdf5(path, group="compare")
    fit.to_hdf5(path, group="compare", overwrite=True)
    if target == "result file":
        validate(path)  # every added dataset carries units and long_name, as the result file requires
        assert read_result(path).lead_names == tuple(LEADS)


@pytest.mark.parametrize("given_ax", [False, True])
def test_plot_fit_labels(fits, given_ax):
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    ax = plt.subplots()[1] if given_ax else None
    fig, (top, right, bottom) = plot_fit(fits["all four, sigma given"], ax=ax)
    assert "2e²/h" in top.get_ylabel() and "µS" in right.get_ylabel()
    assert "gate voltage (mV)" in bottom.get_xlabel() and "2e²/h" in bottom.get_ylabel()
    assert top.get_legend() is not None
    plt.close(fig)


# --- the command line -------------------------------------------------------------------------------


def _write_csv(path, trace):
    lines = ["# synthetic trace (invented), not a measurement", "Vg [V],G [uS]"]
    lines += [f"{v:.12g},{g * 1e6:.12g}" for v, g in zip(trace.gate_V, trace.conductance_S)]
    path.write_text("\n".join(lines) + "\n")


def test_command_line_fit_writes_text_hdf5_and_figure(energy_sweep, fits, tmp_path, capsys):
    """One command: stored sweep + measured CSV -> fitted values (text and HDF5) and the overlay figure; the values
    are those of the Python fit of the same trace (to the 12 digits the CSV keeps), which covers the truth within
    2 standard errors (test_fit_recovers_truth_within_two_standard_errors)."""
    import shutil

    from rgftrans.cli import main

    result = tmp_path / "bw.h5"
    shutil.copy(energy_sweep, result)
    csv_path = tmp_path / "trace.csv"
    _write_csv(csv_path, synthetic_trace(energy_sweep))
    args = ["compare", str(result), str(csv_path), "--temperature", "0.3", "--lever-arm", "75", "--offset",
            "-0.1005", "--r-series", "3000", "--fit-series", "--fit-temperature", "--noise", str(NOISE_S),
            "--description", "synthetic trace (invented)"]
    assert main(args) == 0
    out = capsys.readouterr().out
    assert "reduced chi-square" in out and "synthetic" in out
    fit, ref = read_fit(result), fits["all four, sigma given"]
    for name in TRUTH:
        assert fit.values[name] == pytest.approx(ref.values[name], rel=1e-6), name
        assert fit.stderr[name] == pytest.approx(ref.stderr[name], rel=1e-4), name
    text = (tmp_path / "bw_compare.txt").read_text()
    assert "lever_arm" in text and "± " in text
    assert (tmp_path / "bw_compare.png").stat().st_size > 0
    # a second run refuses to replace the stored fit unless asked
    assert main(args) == 2
    assert "exists" in capsys.readouterr().err
    assert main(args + ["--overwrite"]) == 0


@pytest.mark.parametrize("extra, fragment", [
    (["--select", "nonsense"], "NAME=VALUE"),
    (["--leads", "source"], "two lead names"),
    (["--fit", "lever_arm,colour"], "colour"),
    (["--gate-axis", "nope"], "no axis 'nope'"),
])
def test_command_line_bad_requests_are_one_line(energy_sweep, tmp_path, capsys, extra, fragment):
    from rgftrans.cli import main

    csv_path = tmp_path / "trace.csv"
    _write_csv(csv_path, synthetic_trace(energy_sweep))
    status = main(["compare", str(energy_sweep), str(csv_path), "--temperature", "0.25", "--lever-arm", "80",
                   "--save", str(tmp_path / "fit.h5"), "--out-prefix", str(tmp_path / "x")] + extra)
    err = capsys.readouterr().err
    assert status == 2 and fragment in err and err.count("\n") == 1


def test_command_line_bad_csv_names_the_line(energy_sweep, tmp_path, capsys):
    from rgftrans.cli import main

    csv_path = tmp_path / "bad.csv"
    csv_path.write_text("Vg [V],G [uS]\n-0.09,1.0\n-0.08,abc\n")
    assert main(["compare", str(energy_sweep), str(csv_path), "--temperature", "0.25", "--lever-arm", "80",
                 "--save", str(tmp_path / "fit.h5")]) == 2
    err = capsys.readouterr().err
    assert "line 3" in err and err.count("\n") == 1


def test_axis_named_by_its_config_path(tmp_path):
    """Sweeps store `gates.p.voltage_V` as `gates__p__voltage_V`; either name selects the axis."""
    path = tmp_path / "dotted.h5"
    gates = np.linspace(0.0, 0.01, 21)
    energies = np.linspace(-0.6, 0.6, 241)
    axis = Axis("gates__p__voltage_V", gates, "V", "plunger gate voltage")
    with ResultFile.create(path, config_text="# synthetic\n", config_hash="dotted", axes=[axis],
                           energies_meV=energies, lead_names=LEADS, quantities=SPEC,
                           attrs=SWEEP_ATTRS) as rf:
        for j, g in enumerate(gates):
            rf.write_point((j,), {"transmission": two_lead_matrix(breit_wigner(energies + 80.0 * g))})
    v = np.linspace(0.001, 0.009, 5)
    a = model_conductance(path, v, temperature_K=1.0, gate_axis="gates.p.voltage_V", check=False)
    b = model_conductance(path, v, temperature_K=1.0, gate_axis="gates__p__voltage_V", check=False)
    assert np.array_equal(a, b) and np.all(a > 0)
