"""Dark-state searches on realistic leads: channel counts, the stored energy window, values not computed, progress."""

from __future__ import annotations

import shutil
from dataclasses import replace

import h5py
import numpy as np
import pytest

from rgftrans.analysis.bic2d import search_grid

from rgftrans.io.searches import single_channel_energies, write_grid_search
from rgftrans.cli import main
from rgftrans.analysis.darkstates import track_resonance
from rgftrans.errors import SearchFailed
from rgftrans.io.store import read_result

from test_bic2d import E_STAR as E_STAR_2D, KAPPA_STAR as KAPPA_STAR_2D, V_AR_STAR, two_levels
from test_darkstates import E_STAR, side_coupled

# --- The asymmetric dot of test_bic2d (tight-binding units, hopping 1) over a small plane of two gate voltages ----
# Straight strip leads of W sites have subband thresholds 2 - 2 cos(n pi / (W + 1)) (common practice, no source):
# source (rows 1-5, W = 5): 0.268, 1.000, 2.000, 3.000; drain (rows 5-8, W = 4): 0.382, 1.382, 2.618.
# Both leads have one open channel exactly for 0.382 < E < 1.000.
SOURCE_THRESHOLDS = 2 - 2 * np.cos(np.arange(1, 6) * np.pi / 6)
DRAIN_THRESHOLDS = 2 - 2 * np.cos(np.arange(1, 5) * np.pi / 5)

PLANE = """
# invented: an asymmetric dot (tight-binding units) tuned by two gates over opposite corners
[lattice]
kind = "square"
spacing_nm = 1.0
hopping_meV = 1.0
[geometry]
rectangle_nm = [0.0, 0.0, 16.0, 10.0]
[gates]
depth_nm = 2.0
[[gates.gate]]
name = "a"
rectangle_nm = [3.0, 5.0, 8.0, 9.0]
voltage_V = 0.0
[[gates.gate]]
name = "b"
rectangle_nm = [9.0, 1.0, 14.0, 5.0]
voltage_V = 0.0
[[leads]]
name = "source"
side = "left"
span_nm = [1.0, 5.0]
[[leads]]
name = "drain"
side = "right"
span_nm = [5.0, 8.0]
[energy]
start_meV = {e0}
stop_meV = {e1}
points = {n_e}
[[sweep.axis]]
parameter = "gates.a.voltage_V"
start = -0.0004
stop = 0.0004
points = {n_p}
[[sweep.axis]]
parameter = "gates.b.voltage_V"
start = -0.0004
stop = 0.0004
points = {n_p}
[output]
path = "{path}"
"""


def _run(tmp_path, name, text):
    cfg = tmp_path / f"{name}.toml"
    cfg.write_text(text.format(path=tmp_path / f"{name}.h5") if "{path}" in text else text)
    assert main(["run", str(cfg), "--quiet", "--workers", "1"]) == 0
    return tmp_path / f"{name}.h5"


@pytest.fixture(scope="module")
def wide_window(tmp_path_factory):
    """A 2 x 2 plane stored from 0.83 to 2.53 meV (no energy on a threshold): one to three channels per lead."""
    tmp = tmp_path_factory.mktemp("wide")
    return _run(tmp, "wide", PLANE.format(e0=0.83, e1=2.53, n_e=18, n_p=2, path="{path}"))


def _groups(path):
    with h5py.File(path, "r") as f:
        return set(f)


def test_stored_single_channel_energies_match_the_lead_thresholds(wide_window):
    data = read_result(wide_window)
    e = data.energies_meV
    expected = (e > DRAIN_THRESHOLDS[0]) & (e < SOURCE_THRESHOLDS[1])
    assert expected.any() and not expected.all()
    assert np.array_equal(single_channel_energies(data), expected)


def test_many_channel_window_is_refused_with_the_counts(tmp_path, capsys):
    """Stored only where each lead has two or three channels: exit 2, one line with each lead's count."""
    path = _run(tmp_path, "many", PLANE.format(e0=1.53, e1=2.53, n_e=11, n_p=2, path="{path}"))
    capsys.readouterr()  # the sweep's own warnings
    assert main(["darkstates", str(path), "--quiet", "--out-prefix", str(tmp_path / "ds")]) == 2
    err = capsys.readouterr().err.strip()
    assert "\n" not in err and "needs one open channel per lead" in err
    # source: 2 channels below 2.0, 3 above; drain: 2 throughout (1.382 < E < 2.618)
    assert "the window 1.53..2.53 meV has 2-3 (lead source) and 2 (lead drain)" in err
    assert "no stored energy has one" in err
    assert "darkstates" not in _groups(path)


def test_start_energy_with_many_channels_is_refused_naming_the_single_channel_energies(wide_window, tmp_path,
                                                                                       capsys):
    assert main(["darkstates", str(wide_window), "--energy", "2.2", "--quiet",
                 "--out-prefix", str(tmp_path / "ds")]) == 2
    err = capsys.readouterr().err
    assert "at 2.23 meV (the stored energy nearest --energy 2.2) the leads have 3 (lead source) and 2 (lead drain)" \
        in err
    assert "the stored energies 0.83..0.93 meV have one" in err  # 0.382 < E < 1.000 on the stored grid
    assert "darkstates" not in _groups(wide_window)


def test_partly_many_channel_window_is_searched_where_single_and_says_so(wide_window, tmp_path, capsys):
    work = tmp_path / "wide.h5"
    shutil.copy(wide_window, work)
    assert main(["darkstates", str(work), "--quiet", "--out-prefix", str(tmp_path / "ds")]) == 0
    out = capsys.readouterr().out
    assert "note: the stored energies 1.03..2.53 meV have more than one open channel" in out
    assert "were left out" in out
    with h5py.File(work, "r") as f:
        g = f["darkstates"]
        seeds = g["seed_energy"][()]
        assert seeds.size and np.all((seeds > DRAIN_THRESHOLDS[0]) & (seeds < SOURCE_THRESHOLDS[1]))
        assert "left out" in g.attrs["notes"]
        assert g["p1"].attrs["units"] == "V" and g["energy"].attrs["units"] == "meV"


# --- Values not computed --------------------------------------------------------------------------------------------

def _closed_right_lead_above(v_limit):
    """two_levels, but the right chain's band is moved to [3, 7] for v_aR > v_limit: no open channel there."""
    def build(kappa, v_ar):
        model = two_levels(kappa, v_ar)
        if v_ar <= v_limit:
            return model
        left, right = model.leads
        return type(model)(model.hamiltonian, model.positions, (left, replace(right, h_cell=right.h_cell + 5.0)))
    return build


def test_grid_points_without_two_channels_count_as_not_computed():
    p = np.linspace(0.2, 0.5, 7)
    messages = []
    g = search_grid(_closed_right_lead_above(0.45), p, p, [E_STAR_2D + 0.05], report=messages.append,
                    progress=False)
    assert np.isnan(g.residuals[0, :, p > 0.45]).all()
    assert g.valid_points.tolist() == [7 * 6]
    assert "followed over 42 of 49 grid points" in messages[0]


def test_all_nan_plane_exits_1_and_writes_no_group(wide_window, tmp_path, capsys):
    work = tmp_path / "nan.h5"
    shutil.copy(wide_window, work)
    with h5py.File(work, "r+") as f:  # every point as if its workers had failed
        f["results/n_open"][...] = -1
        f["results/transmission"][...] = np.nan
    assert main(["darkstates", str(work), "--quiet", "--out-prefix", str(tmp_path / "ds")]) == 1
    err = capsys.readouterr().err
    assert err.startswith("rgftrans: failed:") and "nothing to search" in err
    assert "darkstates" not in _groups(work)


# --- The stored energy window ---------------------------------------------------------------------------------------

def test_bic_outside_the_stored_energies_is_flagged(tmp_path):
    """The closed-form two-level BIC (test_bic2d) found with a window that ends below E*: flagged, and stored so."""
    p = np.linspace(0.2, 0.5, 7)
    inside = search_grid(two_levels, p, p, [E_STAR_2D + 0.05], progress=False, energy_window=(-2.0, 2.0))
    outside = search_grid(two_levels, p, p, [E_STAR_2D + 0.05], progress=False,
                          energy_window=(-2.0, E_STAR_2D - 0.01))
    for g in (inside, outside):
        assert len(g.bics) == 1 and g.bics[0].parameter == pytest.approx([KAPPA_STAR_2D, V_AR_STAR], rel=1e-6)
    assert not inside.bics[0].outside_stored_energies
    assert outside.bics[0].outside_stored_energies
    write_grid_search(outside, tmp_path / "s.h5")
    with h5py.File(tmp_path / "s.h5", "r") as f:
        assert bool(f["darkstates/bic_0"].attrs["outside_stored_energies"])


def test_bic_outside_the_stored_energies_is_flagged_by_the_command(tmp_path, capsys):
    """The plane of test_bic2d holds a BIC near 0.589 meV reached from the dot state near 0.616 meV; stored only from
    0.60 meV up, the state starts inside the stored energies and its BIC lies outside: reported as unconfirmed,
    never as an ordinary BIC, and stored with the flag."""
    path = _run(tmp_path, "upper", PLANE.format(e0=0.60, e1=0.98, n_e=20, n_p=5, path="{path}"))
    capsys.readouterr()
    assert main(["darkstates", str(path), "--energy", "0.61617", "--quiet", "--out-prefix", str(tmp_path / "ds")]) == 0
    out = capsys.readouterr().out
    assert "0 BIC(s) located, 1 more OUTSIDE the stored energies (unconfirmed)" in out
    assert "UNCONFIRMED candidate 0, OUTSIDE the stored energies" in out and "BIC 0 (" not in out
    with h5py.File(path, "r") as f:
        b = f["darkstates/bic_0"]
        assert bool(b.attrs["outside_stored_energies"]) and float(b["energy"][()]) < 0.60
        assert list(f["darkstates"].attrs["stored_energy_window"]) == pytest.approx([0.60, 0.98])


def test_track_stops_where_the_pole_leaves_the_window():
    """side_coupled (test_darkstates): the narrow pole moves down in energy as kappa grows; a window whose lower edge
    lies between two of its values stops the track there, the rest not computed."""
    kappas = np.linspace(0.30, 0.42, 13)
    full = track_resonance(side_coupled, kappas, E_STAR)
    assert full.valid.all() and np.all(np.diff(full.energies_meV) < 0)
    edge = 0.5 * (full.energies_meV[6] + full.energies_meV[7])
    cut = track_resonance(side_coupled, kappas, E_STAR, energy_window=(edge, 2.0))
    assert cut.valid.tolist() == [True] * 7 + [False] * 6
    np.testing.assert_allclose(cut.energies_meV[:7], full.energies_meV[:7], rtol=1e-10)
    (p, e), = cut.stopped_at
    assert p == kappas[7] and e < edge


SYMMETRIC_DOT = """
# invented: a mirror-symmetric dot (tight-binding units) whose levels a constant potential shifts rigidly
[lattice]
kind = "square"
spacing_nm = 1.0
hopping_meV = 1.0
[geometry]
rectangle_nm = [0.0, 0.0, 19.0, 10.0]
[[leads]]
name = "left"
side = "left"
span_nm = [3.0, 7.0]
[[leads]]
name = "right"
side = "right"
span_nm = [3.0, 7.0]
[energy]
start_meV = 0.55
stop_meV = 0.65
points = 11
[[sweep.axis]]
parameter = "potential.constant_meV"
start = 0.0
stop = 0.08
points = 5
[output]
path = "{path}"
"""


@pytest.fixture(scope="module")
def shifted_levels(tmp_path_factory):
    return _run(tmp_path_factory.mktemp("shift"), "shift", SYMMETRIC_DOT)


def _narrow_resonance(path):
    """The narrow (not protected) resonance of the unshifted dot near 0.61 meV."""
    from rgftrans.io.config import parse_config
    from rgftrans.spectra.poles import resonances

    cfg = parse_config(read_result(path).config_text)
    model = cfg.build_device({**cfg.base_point(), "potential.constant_meV": 0.0}).discretise()
    pole = min(resonances(model, 0.6, count=6), key=lambda r: abs(r.energy_meV - 0.61) + (r.width_meV < 1e-12))
    assert 1e-7 < pole.width_meV < 1e-3 and 0.55 < pole.energy_meV < 0.65
    return pole


def test_pole_leaving_the_stored_energies_stops_and_says_so(shifted_levels, tmp_path, capsys):
    """A constant potential U moves the level to about E(0) + U (the leads stay put): at U = 0.06 it is above the
    stored 0.65 meV, so following stops there and U = 0.08 is not computed."""
    work = tmp_path / "shift.h5"
    shutil.copy(shifted_levels, work)
    pole = _narrow_resonance(work)
    assert pole.energy_meV + 0.04 < 0.65 - 1e-3 and pole.energy_meV + 0.06 > 0.65 + 1e-3
    assert main(["darkstates", str(work), "--energy", f"{pole.energy_meV:.9f}", "--quiet",
                 "--out-prefix", str(tmp_path / "ds")]) == 0
    out = capsys.readouterr().out
    assert "over 3 of 5 values" in out
    assert "pole left the stored energies at p = 0.06 " in out and "following stopped" in out
    with h5py.File(work, "r") as f:
        g = f["darkstates"]
        assert g.attrs["valid_points"] == 3 and list(g.attrs["stopped_at"]) == [pytest.approx(0.06)]
        e = g["track/energy"][()]
        assert np.isnan(e[3:]).all()
        np.testing.assert_allclose(e[:3], pole.energy_meV + np.array([0.0, 0.02, 0.04]), atol=2e-3)


def test_start_energy_outside_the_stored_energies_is_refused(shifted_levels, tmp_path, capsys):
    assert main(["darkstates", str(shifted_levels), "--energy", "1.5", "--quiet",
                 "--out-prefix", str(tmp_path / "ds")]) == 2
    assert "outside the stored energies 0.55..0.65 meV" in capsys.readouterr().err


def test_all_nan_line_exits_1_and_writes_no_group(shifted_levels, tmp_path, capsys):
    work = tmp_path / "nan.h5"
    shutil.copy(shifted_levels, work)
    with h5py.File(work, "r+") as f:
        f["results/transmission"][...] = np.nan
    assert main(["darkstates", str(work), "--energy", "0.6", "--quiet", "--out-prefix", str(tmp_path / "ds")]) == 1
    assert "nothing to search" in capsys.readouterr().err
    assert "darkstates" not in _groups(work)


def test_search_api_fails_when_nothing_is_computed(shifted_levels, tmp_path):
    from rgftrans.io.searches import search_sweep

    work = tmp_path / "nan.h5"
    shutil.copy(shifted_levels, work)
    with h5py.File(work, "r+") as f:
        f["results/completed"][...] = False
    with pytest.raises(SearchFailed, match="no sweep point holds a computed transmission"):
        search_sweep(work, energy_guess=0.6, progress=False)


# --- Progress bar ---------------------------------------------------------------------------------------------------

@pytest.mark.parametrize("quiet", [False, True])
def test_progress_bar_on_stderr_unless_quiet(shifted_levels, tmp_path, capsys, monkeypatch, quiet):
    import rgftrans.analysis.darkstates as ds

    monkeypatch.setattr(ds, "PROGRESS_DELAY_S", 0.0)  # show at once (the bar normally waits a few seconds)
    monkeypatch.setattr(ds, "stderr_is_terminal", lambda: True)  # as on a terminal: pytest captures stderr
    work = tmp_path / "shift.h5"
    shutil.copy(shifted_levels, work)
    argv = ["darkstates", str(work), "--energy", f"{_narrow_resonance(work).energy_meV:.9f}",
            "--out-prefix", str(tmp_path / "ds")]
    assert main(argv + (["--quiet"] if quiet else [])) == 0
    captured = capsys.readouterr()
    assert ("following the pole" in captured.err) is not quiet
    assert "following the pole" not in captured.out  # the bar never goes to standard output


def test_no_progress_bar_into_a_log_file(shifted_levels, tmp_path, capsys, monkeypatch):
    import rgftrans.analysis.darkstates as ds

    monkeypatch.setattr(ds, "PROGRESS_DELAY_S", 0.0)
    monkeypatch.setattr(ds, "stderr_is_terminal", lambda: False)
    work = tmp_path / "shift.h5"
    shutil.copy(shifted_levels, work)
    argv = ["darkstates", str(work), "--energy", f"{_narrow_resonance(work).energy_meV:.9f}",
            "--out-prefix", str(tmp_path / "ds")]
    assert main(argv) == 0
    assert "following the pole" not in capsys.readouterr().err


def test_plane_writer_takes_the_units_from_the_caller(tmp_path):
    """A waveguide's eigenvalue lambda = (k0 a)^2 is dimensionless and its parameters are a permittivity and a length:
    the writer labels them as the caller says, and meV only by default (electronic devices)."""
    p = np.linspace(0.2, 0.5, 4)
    g = search_grid(two_levels, p, p, [E_STAR_2D + 0.05], progress=False)
    write_grid_search(g, tmp_path / "a.h5")
    write_grid_search(g, tmp_path / "b.h5", energy_units="1", energy_name="eigenvalue lambda = (k0 a)^2",
                      parameter_units=("1", "mm"))
    with h5py.File(tmp_path / "a.h5", "r") as fa, h5py.File(tmp_path / "b.h5", "r") as fb:
        assert fa["darkstates/energy"].attrs["units"] == "meV" and fa["darkstates/seed_energy"].attrs["units"] == "meV"
        for key in ("energy", "seed_energy"):
            assert fb[f"darkstates/{key}"].attrs["units"] == "1"
            assert "lambda" in fb[f"darkstates/{key}"].attrs["long_name"]
        assert fb["darkstates/p1"].attrs["units"] == "1" and fb["darkstates/p2"].attrs["units"] == "mm"
