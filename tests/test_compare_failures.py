"""Tests of how rgftrans.io.compare fails: fits that must not be reported, the stored Fermi energy as mu_ref,
command-line messages that name flags, and the figure's fitted values.

The stored sweep is the analytic two-peak Breit-Wigner transmission of
tests/test_compare.py (Breit & Wigner, Phys. Rev. 49, 519 (1936)), written
directly (no RGF run), here with a stored Fermi energy.  Synthetic traces are
made from the stored sweep itself (rgftrans.io.compare.model_conductance) at a
known lever arm, offset, series resistance and temperature, plus Gaussian noise
from a fixed seed.  The failure thresholds are the module's named constants
(MAX_REDUCED_CHI_SQUARE = 10, MAX_RESIDUAL_SPREAD = 0.5).
"""

import hashlib
import shutil
import warnings

import numpy as np
import pytest

from rgftrans.io.compare import MAX_REDUCED_CHI_SQUARE, MAX_RESIDUAL_SPREAD, MeasuredTrace, _residual_problem, fit_trace, model_conductance
from rgftrans.errors import CompareError, TraceFitFailed
from rgftrans.plots.fits import plot_fit
from rgftrans.errors import FitFailed
from rgftrans.io.store import ResultFile
from test_compare import LEADS, PEAKS, SPEC, breit_wigner, two_lead_matrix

#: Stored Fermi energy of the synthetic sweep (meV), as a sweep writes it when its config gives a density.
FERMI_MEV = 0.7
#: Energy grid (meV), spacing 0.005 meV = kT/4.3 at 0.25 K.
ENERGIES = np.linspace(-1.0, 3.0, 801)
#: The synthetic measurement's truth; mu = E_F + alpha (V - V_0).
ALPHA, V0, R_S, TEMPERATURE = 80.0, -0.1, 5e3, 0.25
NOISE_S = 0.2e-6
#: Gate voltages mapping to mu = 0.2 .. 1.8 meV around both peaks (300 points, step 5.3 µeV < kT/2).
GATE_V = V0 + (np.linspace(0.2, 1.8, 300) - FERMI_MEV) / ALPHA
#: A good start: 6 % off in lever arm, one kT off in offset.
GOOD_START = {"lever_arm": 75.0, "offset": V0 + 0.0215 / ALPHA}
FIXED = dict(temperature_K=TEMPERATURE, r_series_ohm=R_S)


def _write_sweep(path, fermi_meV):
    with ResultFile.create(path, config_text="# synthetic sweep\n", config_hash=f"synthetic-bw-{fermi_meV}", axes=[],
                           energies_meV=ENERGIES, lead_names=LEADS, quantities=SPEC,
                           attrs={"spin_degeneracy": 2, "fermi_energy_meV": fermi_meV}) as rf:
        rf.write_point((), {"transmission": two_lead_matrix(breit_wigner(ENERGIES))})
    return path


@pytest.fixture(scope="module")
def sweep(tmp_path_factory):
    """The stored two-peak sweep with a stored Fermi energy."""
    return _write_sweep(tmp_path_factory.mktemp("sweep") / "bw_ef.h5", FERMI_MEV)


def make_trace(sweep, *, noise=NOISE_S, seed=0, gate=GATE_V):
    g = model_conductance(sweep, gate, temperature_K=TEMPERATURE, lever_arm_meV_per_V=ALPHA, offset_V=V0,
                          r_series_ohm=R_S, mu_ref_meV=FERMI_MEV, check=False)
    if noise:
        g = g + np.random.default_rng(seed).normal(0.0, noise, gate.size)
    return MeasuredTrace(gate, g, source="synthetic", description=f"synthetic trace, seed {seed}")


@pytest.fixture(scope="module")
def trace(sweep):
    return make_trace(sweep)


# --- a good fit ------------------------------------------------------------------------------------------


def test_good_fit_recovers_lever_arm_and_offset_within_three_standard_errors(sweep, trace):
    # Common practice: a correct model with the correct noise model lands within 3 standard errors of the
    # truth in 99.7 % of noise draws; the seed is fixed, so this is deterministic.
    fit = fit_trace(sweep, trace, initial=GOOD_START, noise_S=NOISE_S, **FIXED)
    assert fit.success and fit.fitted == ("lever_arm", "offset")
    for name, truth in (("lever_arm", ALPHA), ("offset", V0)):
        assert abs(fit.values[name] - truth) < 3.0 * fit.stderr[name], name
    # ... and the errors are small enough to mean something: below 1 % of alpha, below a tenth of a gate step.
    assert fit.stderr["lever_arm"] < 0.01 * ALPHA
    assert fit.stderr["offset"] < 0.1 * (GATE_V[1] - GATE_V[0])


def test_noise_free_fit_recovers_the_truth_to_optimiser_tolerance(sweep):
    # The trace is the model itself, so chi-square is zero at the truth; the optimiser stops when a step
    # changes the parameters by < 1e-8 relative (scipy's xtol): 1e-6 relative leaves two orders of margin.
    # The residual criterion is the failure test here (no noise given); a perfect fit must pass it.
    fit = fit_trace(sweep, make_trace(sweep, noise=0.0), initial=GOOD_START, **FIXED)
    assert fit.values["lever_arm"] == pytest.approx(ALPHA, rel=1e-6)
    assert fit.values["offset"] == pytest.approx(V0, rel=1e-6)


# --- the stored Fermi energy as mu_ref ------------------------------------------------------------------


def test_default_mu_ref_is_the_stored_fermi_energy(sweep, trace):
    fit = fit_trace(sweep, trace, initial=GOOD_START, noise_S=NOISE_S, **FIXED)
    assert fit.mu_ref_meV == FERMI_MEV
    assert "stored Fermi energy" in fit.mu_ref_source and "fermi_energy_meV" in fit.mu_ref_source
    assert f"mu_ref = {FERMI_MEV:g} meV: the sweep's stored Fermi energy" in fit.summary()
    # model_conductance takes the same default
    v = GATE_V[::30]
    np.testing.assert_array_equal(
        model_conductance(sweep, v, temperature_K=TEMPERATURE, lever_arm_meV_per_V=ALPHA, offset_V=V0, check=False),
        model_conductance(sweep, v, temperature_K=TEMPERATURE, lever_arm_meV_per_V=ALPHA, offset_V=V0,
                          mu_ref_meV=FERMI_MEV, check=False))


def test_given_mu_ref_overrides_and_is_said(sweep, trace):
    # Module convention: mu_ref only relabels V_0, so mu_ref = E_F - alpha dV moves the fitted offset by -dV
    # (to the optimiser's tolerance, far below the offset's standard error).
    shift_V = 1e-3
    fit = fit_trace(sweep, trace, initial={"lever_arm": 75.0, "offset": GOOD_START["offset"] - shift_V},
                    noise_S=NOISE_S, mu_ref_meV=FERMI_MEV - ALPHA * shift_V, **FIXED)
    ref = fit_trace(sweep, trace, initial=GOOD_START, noise_S=NOISE_S, **FIXED)
    assert fit.mu_ref_source.startswith("given")
    assert fit.values["offset"] == pytest.approx(ref.values["offset"] - shift_V * ref.values["lever_arm"] / ALPHA,
                                                 abs=0.01 * ref.stderr["offset"] + 1e-3 * shift_V)


def test_mu_ref_without_stored_fermi_energy_is_zero_and_says_why(tmp_path):
    path = _write_sweep(tmp_path / "no_ef.h5", float("nan"))
    gate = np.linspace(0.0025, 0.0225, 300)  # mu = 0.2 .. 1.8 meV at alpha = 80 meV/V, V_0 = 0
    g = model_conductance(path, gate, temperature_K=TEMPERATURE, lever_arm_meV_per_V=ALPHA, r_series_ohm=R_S,
                          check=False)
    trace = MeasuredTrace(gate, g + np.random.default_rng(1).normal(0.0, NOISE_S, gate.size), source="synthetic")
    fit = fit_trace(path, trace, initial={"lever_arm": 75.0, "offset": 2e-4}, noise_S=NOISE_S, **FIXED)
    assert fit.mu_ref_meV == 0.0 and "no Fermi energy" in fit.mu_ref_source


# --- failures -------------------------------------------------------------------------------------------


@pytest.mark.parametrize("name, start, bounds, side, bound", [
    # the truth (80 meV/V, -0.1 V) lies below each range, so the optimum is pinned to its lower end
    ("lever_arm", {"lever_arm": 100.0, "offset": V0}, {"lever_arm": (90.0, 200.0)}, "lower", 90.0),
    ("offset", {"lever_arm": 80.0, "offset": -0.0990}, {"offset": (-0.0995, -0.09)}, "lower", -0.0995),
    # a start 6.7x too small with the default range (a factor 10 either side, 1.2 .. 120 meV/V): the fit runs
    # down, away from the truth, and ends at the range's lower end
    ("lever_arm", {"lever_arm": 12.0, "offset": V0}, None, "lower", 1.2),
])
def test_fit_ending_at_a_bound_fails_and_names_it(sweep, trace, name, start, bounds, side, bound):
    with pytest.raises(TraceFitFailed) as info:
        fit_trace(sweep, trace, initial=start, bounds=bounds, noise_S=NOISE_S, **FIXED)
    err = info.value
    assert isinstance(err, FitFailed) and "\n" not in str(err)
    at_bound = [p for p in err.problems if p.kind == "at_bound"]
    assert [(p.parameter, p.side) for p in at_bound] == [(name, side)]
    assert at_bound[0].bound == pytest.approx(bound, rel=1e-12) and at_bound[0].value == pytest.approx(bound, rel=1e-6)
    assert f"stuck at its {side} bound {bound:g}" in str(err) and f"bounds['{name}']" in str(err)
    assert err.attempt is not None and not err.attempt.success


def test_fit_that_cannot_move_from_its_start_fails(sweep, trace):
    # Offset 0.1 V too high: the trace maps to mu = 8.7 .. 10.3 meV, beyond the stored grid (T = 0 there), so
    # the model is flat in both parameters and the optimiser has no direction to go.
    start = {"lever_arm": 80.0, "offset": -0.2}
    with pytest.raises(TraceFitFailed) as info:
        fit_trace(sweep, trace, initial=start, **FIXED)
    err = info.value
    assert err.kinds == ("not_moved",)
    assert err.attempt.values["lever_arm"] == start["lever_arm"] and err.attempt.values["offset"] == start["offset"]
    assert "did not move from its start" in str(err) and "outside the stored energies" in str(err)
    assert "\n" not in str(err)


@pytest.mark.parametrize("noise_factor, fails", [(1.0, False), (0.1, True)])
def test_reduced_chi_square_above_ten_with_given_noise_fails(sweep, trace, noise_factor, fails):
    # With the true sigma, reduced chi-square is 1 +- sqrt(2/298) (passes); with sigma claimed 10x too small it
    # is ~100 (fails).  The same fit both ways, so the test can fail.
    kwargs = dict(initial=GOOD_START, noise_S=NOISE_S * noise_factor, **FIXED)
    if not fails:
        assert fit_trace(sweep, trace, **kwargs).reduced_chi_square < 2.0
        return
    with pytest.raises(TraceFitFailed) as info:
        fit_trace(sweep, trace, **kwargs)
    (problem,) = info.value.problems
    assert problem.kind == "chi_square" and problem.limit == MAX_REDUCED_CHI_SQUARE
    assert problem.value == pytest.approx(100.0, rel=0.3)  # chi²/dof scales as 1/sigma²
    assert "reduced chi-square" in str(info.value) and "> 10" in str(info.value)


def test_fit_locked_on_the_wrong_peak_fails_by_the_residual_criterion(sweep, trace):
    # Offset shifted by 1 meV / alpha: the narrow peak's model sits on the wide measured one; no noise given.
    start = {"lever_arm": 80.0, "offset": V0 + 1.0 / ALPHA}
    with pytest.raises(TraceFitFailed) as info:
        fit_trace(sweep, trace, initial=start, **FIXED)
    (problem,) = info.value.problems
    assert problem.kind == "residual" and problem.value > MAX_RESIDUAL_SPREAD
    assert "of the trace's spread" in str(info.value) and "noise_S" in str(info.value)


@pytest.mark.parametrize("noise_over_signal", [0.1, 0.5, 1.0])
def test_residual_criterion_is_noise_over_total_spread(noise_over_signal):
    # _residual_problem docstring: residuals of pure noise sigma on a signal of spread s give
    # sigma / sqrt(s² + sigma²); 20000 samples give it to ~1 % (relative spread of an rms, 1/sqrt(2n)).
    rng = np.random.default_rng(2)
    signal = np.sin(np.linspace(0.0, 40.0 * np.pi, 20000))  # spread s = 1/sqrt(2)
    s = signal.std()
    noise = rng.normal(0.0, noise_over_signal * s, signal.size)
    ratio, _ = _residual_problem(noise, signal + noise)
    expected = noise_over_signal / np.sqrt(1.0 + noise_over_signal**2)
    assert ratio == pytest.approx(expected, rel=0.03)


def test_failed_attempt_is_never_stored(sweep, trace, tmp_path):
    with pytest.raises(TraceFitFailed) as info:
        fit_trace(sweep, trace, initial={"lever_arm": 80.0, "offset": -0.2}, **FIXED)
    with pytest.raises(CompareError, match="failed fit attempt"):
        info.value.attempt.to_hdf5(tmp_path / "fit.h5")


# --- the figure -----------------------------------------------------------------------------------------


def _texts(ax):
    return "\n".join(t.get_text() for t in ax.texts) + "\n" + ax.get_title()


def test_figure_shows_values_with_errors_and_units(sweep, trace):
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    fit = fit_trace(sweep, trace, initial=GOOD_START, noise_S=NOISE_S, **FIXED)
    fig, (top, _, bottom) = plot_fit(fit)
    text = _texts(top)
    assert f"α = {fit.values['lever_arm']:.5g} ± {fit.stderr['lever_arm']:.2g} meV/V" in text
    assert f"V₀ = {fit.values['offset'] * 1e3:.5g} ± {fit.stderr['offset'] * 1e3:.2g} mV" in text
    assert "(fixed)" in text and "FAILED" not in text
    assert bottom.get_xlabel() == "gate voltage (mV)" and top.get_ylabel() == "conductance (2e²/h)"
    # the axis is in mV: the plotted points are the gate voltages times 1000
    np.testing.assert_allclose(top.lines[0].get_xdata(), trace.gate_V * 1e3)
    plt.close(fig)


def test_figure_of_a_failed_attempt_is_titled_failed(sweep, trace):
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    with pytest.raises(TraceFitFailed) as info:
        fit_trace(sweep, trace, initial={"lever_arm": 80.0, "offset": -0.2}, **FIXED)
    fig, (top, _, _) = plot_fit(info.value.attempt)
    assert top.get_title().startswith("FAILED FIT - not a result")
    plt.close(fig)


# --- the command line -----------------------------------------------------------------------------------


def _write_csv(path, trace):
    lines = ["# synthetic trace (invented), not a measurement", "Vg [V],G [uS]"]
    lines += [f"{v:.12g},{g * 1e6:.12g}" for v, g in zip(trace.gate_V, trace.conductance_S)]
    path.write_text("\n".join(lines) + "\n")


@pytest.fixture
def cli_files(sweep, trace, tmp_path):
    result = tmp_path / "bw.h5"
    shutil.copy(sweep, result)
    csv_path = tmp_path / "trace.csv"
    _write_csv(csv_path, trace)
    return result, csv_path


def _digest(path):
    return hashlib.sha256(path.read_bytes()).hexdigest()


@pytest.mark.parametrize("extra, fragments", [
    (["--lever-arm", "100", "--lever-arm-range", "90,200", "--offset", str(V0)],
     ["lever arm stuck at its lower bound 90 meV/V", "widen --lever-arm-range", "(--lever-arm)"]),
    (["--lever-arm", "80", "--offset", "-0.2"], ["did not move from its start", "--lever-arm 80 meV/V"]),
    (["--lever-arm", "75", "--offset", str(GOOD_START["offset"]), "--noise", str(NOISE_S / 10)],
     ["reduced chi-square", "--noise 0.02 uS", "--fit-series"]),
])
def test_command_line_failed_fit_exits_1_in_one_line_and_writes_nothing(cli_files, capsys, extra, fragments):
    from rgftrans.cli import main

    result, csv_path = cli_files
    before = _digest(result)
    files_before = sorted(p.name for p in result.parent.iterdir())
    status = main(["compare", str(result), str(csv_path), "--temperature", str(TEMPERATURE), "--r-series",
                   str(R_S)] + extra)
    captured = capsys.readouterr()
    assert status == 1
    assert captured.err.count("\n") == 1 and captured.err.startswith("rgftrans: failed: ")
    for fragment in fragments:
        assert fragment in captured.err, fragment
    assert "initial[" not in captured.err and "noise_S" not in captured.err and "bounds[" not in captured.err
    assert captured.out == ""
    assert _digest(result) == before  # no fit group added
    assert sorted(p.name for p in result.parent.iterdir()) == files_before  # no text, no figure


def test_command_line_fit_says_which_mu_ref_it_used(cli_files, capsys):
    from rgftrans.cli import main

    result, csv_path = cli_files
    args = ["compare", str(result), str(csv_path), "--temperature", str(TEMPERATURE), "--r-series", str(R_S),
            "--lever-arm", "75", "--offset", str(GOOD_START["offset"]), "--noise", str(NOISE_S)]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        assert main(args) == 0
    out = capsys.readouterr().out
    assert f"mu_ref = {FERMI_MEV:g} meV: the sweep's stored Fermi energy" in out
    # mu_ref 0.2 meV lower relabels V_0 by -0.2 meV / alpha (module convention): start there
    args[args.index("--offset") + 1] = str(GOOD_START["offset"] - 0.2 / ALPHA)
    assert main(args + ["--mu-ref", "0.5", "--overwrite"]) == 0
    assert "mu_ref = 0.5 meV: given with --mu-ref" in capsys.readouterr().out


@pytest.mark.parametrize("extra, flag, python_name", [
    (["--lever-arm", "80", "--noise", "-1"], "--noise", "noise_S"),
    ([], "--lever-arm", "initial["),
    (["--lever-arm", "80", "--lever-arm-range", "90,200"], "--lever-arm-range", "bounds["),
    (["--lever-arm", "80", "--lever-arm-range", "nine"], "--lever-arm-range", "bounds["),
    (["--lever-arm", "80", "--r-series-range", "0,1e4"], "--r-series-range", "bounds["),
    (["--lever-arm", "80", "--kind", "current"], "--bias", "bias_V"),
])
def test_command_line_input_errors_name_the_flag(cli_files, capsys, extra, flag, python_name):
    from rgftrans.cli import main

    result, csv_path = cli_files
    status = main(["compare", str(result), str(csv_path), "--temperature", str(TEMPERATURE)] + extra)
    err = capsys.readouterr().err
    assert status == 2 and err.count("\n") == 1
    assert flag in err and python_name not in err
