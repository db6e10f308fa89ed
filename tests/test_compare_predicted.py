"""compare starts from the lever arm the layout predicts and reports the distance (rgftrans.io.compare).

The stored sweep and trace are the synthetic Breit-Wigner ones of test_compare (invented); the predicted lever
arm is written into the file's electrostatics/capacitance group by hand here, as `rgftrans run` writes it from
the capacitance matrix (alpha dimensionless; 1000 alpha meV/V).  Source of the expectations: module convention
(mu = mu_ref + alpha (V_g - V_0)) and common practice (a correct fit covers the truth within 2 standard errors).
"""

from __future__ import annotations

import shutil

import numpy as np
import pytest

from rgftrans.cli import main
from rgftrans.errors import CompareError
from rgftrans.io.compare import fit_trace, predicted_lever_arm, read_fit
from rgftrans.io.store import StoredArray, StoredGroup, write_group

from test_compare import TRUTH, _write_csv, energy_sweep, synthetic_trace  # noqa: F401  (fixture)

#: The layout's prediction: 20 % above the truth (80 meV/V), i.e. alpha = 0.096.
ALPHA = 0.096


@pytest.fixture()
def predicted_sweep(energy_sweep, tmp_path):  # noqa: F811
    path = tmp_path / "bw.h5"
    shutil.copy(energy_sweep, path)
    write_group(path, "electrostatics", {"capacitance": StoredGroup({
        "region": StoredArray(np.array(["dot", "lead"], dtype=object), "", "charge region"),
        "gate": StoredArray(np.array(["plunger", "barrier"], dtype=object), "", "gate"),
        "lever_arm": StoredArray(np.array([[ALPHA, 0.03], [0.01, 0.0]]), "1", "lever arm", dims=("", "")),
    })})
    return path


def test_predicted_lever_arm_is_read_and_reported(predicted_sweep):
    value, where = predicted_lever_arm(predicted_sweep, region="dot", gate="plunger")
    assert value == pytest.approx(1000 * ALPHA) and "dot" in where and "plunger" in where
    trace = synthetic_trace(predicted_sweep)
    fit = fit_trace(predicted_sweep, trace, temperature_K=TRUTH["temperature"], r_series_ohm=TRUTH["r_series"],
                    initial={"offset": -0.1005}, predicted_lever_arm=(value, where))
    # Started 20 % off, the fit still finds the truth (2 standard errors, common practice) ...
    assert abs(fit.values["lever_arm"] - TRUTH["lever_arm"]) < 2 * fit.stderr["lever_arm"]
    # ... and says how far the layout's prediction was.
    assert fit.predicted_lever_arm == pytest.approx(96.0)
    ratio = fit.values["lever_arm"] / 96.0
    assert f"fitted / predicted = {ratio:.3g}" in fit.summary()


def test_command_line_lever_arm_from_the_layout(predicted_sweep, tmp_path, capsys):
    csv_path = tmp_path / "trace.csv"
    _write_csv(csv_path, synthetic_trace(predicted_sweep))
    args = ["compare", str(predicted_sweep), str(csv_path), "--temperature", str(TRUTH["temperature"]),
            "--r-series", str(TRUTH["r_series"]), "--offset", "-0.1005", "--lever-arm-from", "dot:plunger"]
    assert main(args) == 0
    assert "lever arm predicted from the layout" in capsys.readouterr().out
    stored = read_fit(predicted_sweep)
    assert stored.predicted_lever_arm == pytest.approx(96.0) and "plunger" in stored.predicted_from


@pytest.mark.parametrize("flag, fragment", [
    ("dot", "REGION:GATE"),
    ("island:plunger", "no region 'island'"),
    ("dot:top", "no gate 'top'"),
    ("lead:barrier", "depleted or uncoupled"),
])
def test_bad_lever_arm_requests_are_one_line(predicted_sweep, tmp_path, capsys, flag, fragment):
    csv_path = tmp_path / "trace.csv"
    _write_csv(csv_path, synthetic_trace(predicted_sweep))
    status = main(["compare", str(predicted_sweep), str(csv_path), "--temperature", "0.25", "--lever-arm-from",
                   flag, "--save", str(tmp_path / "fit.h5"), "--out-prefix", str(tmp_path / "x")])
    err = capsys.readouterr().err
    assert status == 2 and fragment in err and err.count("\n") == 1


def test_a_file_without_predictions_says_how_to_get_them(energy_sweep):  # noqa: F811
    with pytest.raises(CompareError, match="gates.region"):
        predicted_lever_arm(energy_sweep, region="dot", gate="plunger")
