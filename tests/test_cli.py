"""The rgftrans command: bad input gives one line and exit status 2, never a traceback; happy paths work."""

from __future__ import annotations

import pytest

from rgftrans.cli import EXIT_BAD_INPUT, EXIT_OK, main

GOOD = """
[lattice]
kind = "square"
spacing_nm = 5.0

[geometry]
rectangle_nm = [0.0, 0.0, 100.0, 60.0]

[[leads]]
name = "source"
side = "left"
span_nm = [10.0, 50.0]

[[leads]]
name = "drain"
side = "right"
span_nm = [0.0, 30.0]

[energy]
start_meV = 2.0
stop_meV = 5.0
points = 7

[output]
path = "{out}"
"""

# (name, replacement (old -> new) applied to GOOD, or extra text appended, expected fragment of the message)
BAD = [
    ("misspelled section", ("[lattice]", "[latice]"), "did you mean 'lattice'"),
    ("misspelled key", ("spacing_nm = 5.0", "spacing = 5.0"), "spacing"),
    ("negative spacing", ("spacing_nm = 5.0", "spacing_nm = -5.0"), "spacing_nm"),
    ("zero spacing", ("spacing_nm = 5.0", "spacing_nm = 0.0"), "spacing_nm"),
    ("string spacing", ("spacing_nm = 5.0", 'spacing_nm = "five"'), "spacing_nm"),
    ("unknown lattice", ('kind = "square"', 'kind = "hexagonal"'), "kind"),
    ("no geometry", ("[geometry]\nrectangle_nm = [0.0, 0.0, 100.0, 60.0]", ""), "geometry"),
    ("short rectangle", ("[0.0, 0.0, 100.0, 60.0]", "[0.0, 0.0, 100.0]"), "rectangle_nm"),
    ("two base shapes", ("rectangle_nm = [0.0, 0.0, 100.0, 60.0]",
                         "rectangle_nm = [0.0, 0.0, 100.0, 60.0]\ndisk_nm = [50.0, 30.0, 20.0]"), "geometry"),
    ("bad lead side", ('side = "left"', 'side = "west"'), "side"),
    ("reversed span", ("span_nm = [10.0, 50.0]", "span_nm = [50.0, 10.0]"), "span_nm"),
    ("duplicate lead names", ('name = "drain"', 'name = "source"'), "source"),
    ("lead misses the device", ("span_nm = [0.0, 30.0]", "span_nm = [200.0, 230.0]"), "misses the device"),
    ("lead wider than its side", ("span_nm = [0.0, 30.0]", "span_nm = [-40.0, 30.0]"), "drain"),
    ("zero energy points", ("points = 7", "points = 0"), "points"),
    ("energy stop below start", ("stop_meV = 5.0", "stop_meV = 1.0"), "stop_meV"),
    ("incomplete energy grid", ("points = 7\n", ""), "points"),
    ("NaN energy", ("start_meV = 2.0", "start_meV = nan"), "start_meV"),
    ("infinite field", None, "tesla", "\n[field]\ntesla = inf\n"),
    ("negative temperature", None, "kelvin", "\n[temperature]\nkelvin = [-1.0]\n"),
    ("unknown material", None, "material", '\n[material]\nname = "Unobtainium"\n'),
    ("rashba without spin", None, "rashba", "\n[spin]\nrashba_meV_nm = 10.0\n"),
    ("unknown sweep parameter", None, "parameter",
     '\n[[sweep.axis]]\nparameter = "gates.nosuch.voltage_V"\nvalues = [0.0, 1.0]\n'),
    ("sweep axis with no values", None, "sweep", '\n[[sweep.axis]]\nparameter = "field.tesla"\n'),
    ("bad output suffix", ('path = "{out}"', 'path = "result.txt"'), "path"),
    ("bad cluster address", None, "address", '\n[cluster]\nexecutor = "dask"\naddress = "not an address"\n'),
    ("zero workers", None, "workers", "\n[cluster]\nworkers = 0\n"),
    ("negative disorder", None, "width_meV", "\n[disorder]\nwidth_meV = -1.0\n"),
    ("TOML syntax", ("points = 7", "points = = 7"), "line"),
    ("gate without depth", None, "depth_nm",
     '\n[gates]\n[[gates.gate]]\nname = "g"\nrectangle_nm = [0.0, 0.0, 1.0, 1.0]\nvoltage_V = -0.1\n'),
    # Refuse before allocating: absurd sizes end in one line before any array is made.
    ("1e20 energy points", ("points = 7", "points = 99999999999999999999"), "points"),
    ("1e12 energy points", ("points = 7", "points = 1000000000000"), "points"),
    ("1e12 sweep points", None, "points",
     '\n[[sweep.axis]]\nparameter = "field.tesla"\nstart = 0.0\nstop = 1.0\npoints = 1000000000000\n'),
    ("1e8 sweep grid", None, "sweep grid",
     '\n[[sweep.axis]]\nparameter = "field.tesla"\nstart = 0.0\nstop = 1.0\npoints = 10000\n'
     '\n[[sweep.axis]]\nparameter = "potential.constant_meV"\nstart = 0.0\nstop = 1.0\npoints = 10000\n'),
    ("1e6 nm device at 1 nm", (("spacing_nm = 5.0\n\n[geometry]\nrectangle_nm = [0.0, 0.0, 100.0, 60.0]",
                                "spacing_nm = 1.0\n\n[geometry]\nrectangle_nm = [0.0, 0.0, 1000000.0, 60.0]")),
     "memory"),
    ("4e8-site device", (("spacing_nm = 5.0\n\n[geometry]\nrectangle_nm = [0.0, 0.0, 100.0, 60.0]",
                          "spacing_nm = 1.0\n\n[geometry]\nrectangle_nm = [0.0, 0.0, 20000.0, 20000.0]")),
     "memory"),
    # check finds what run would refuse: names colliding in the file, a lead pushed off at a later point.
    ("names collide after mangling", None, "stored as",
     '\n[gates]\ndepth_nm = 50.0\n[[gates.gate]]\nname = "a-b"\nrectangle_nm = [0.0, 70.0, 10.0, 80.0]\n'
     'voltage_V = -0.1\n[[gates.gate]]\nname = "a_b"\nrectangle_nm = [20.0, 70.0, 30.0, 80.0]\nvoltage_V = -0.1\n'
     '\n[[sweep.axis]]\nparameter = "gates.a-b.voltage_V"\nvalues = [-0.1, -0.2]\n'
     '\n[[sweep.axis]]\nparameter = "gates.a_b.voltage_V"\nvalues = [-0.1, -0.2]\n'),
    ("lead moved off the device later", None, "at sweep point",
     '\n[[sweep.axis]]\nparameter = "leads.drain.offset_nm"\nvalues = [0.0, 10.0, 40.0]\n'),
]


def _write(tmp_path, case) -> str:
    text = GOOD.format(out=tmp_path / "out.h5")
    if case[1] is not None:
        old, new = case[1]
        old = old.replace("{out}", str(tmp_path / "out.h5"))
        assert old in text, case[0]
        text = text.replace(old, new)
    if len(case) > 3:
        text += case[3]
    path = tmp_path / "bad.toml"
    path.write_text(text)
    return str(path)


def test_catalogue_is_large_enough():
    assert len(BAD) >= 25


@pytest.mark.parametrize("case", BAD, ids=[c[0] for c in BAD])
@pytest.mark.parametrize("command", ["check", "run"])
def test_bad_config_one_line_exit_2(tmp_path, capsys, case, command):
    status = main([command, _write(tmp_path, case)] + (["--quiet"] if command == "run" else []))
    err = capsys.readouterr().err.strip()
    assert status == EXIT_BAD_INPUT
    assert "Traceback" not in err
    lines = [line for line in err.splitlines() if not line.startswith("rgftrans: warning:")]
    assert len(lines) == 1 and lines[0].startswith("rgftrans: error:"), err
    assert case[2].lower() in lines[0].lower(), lines[0]
    assert not (tmp_path / "out.h5").exists()  # nothing written for a config that does not validate


def test_missing_config_file(tmp_path, capsys):
    assert main(["check", str(tmp_path / "nope.toml")]) == EXIT_BAD_INPUT
    assert capsys.readouterr().err.count("\n") == 1


def test_argument_errors_exit_2(capsys):
    with pytest.raises(SystemExit) as exc:
        main(["frobnicate"])
    assert exc.value.code == EXIT_BAD_INPUT


@pytest.mark.parametrize("args, fragment", [
    (["run", "{cfg}", "--workers", "-2"], "--workers"),
    (["run", "{cfg}", "--workers", "0"], "--workers"),
    (["run", "{cfg}", "--workers", "two"], "--workers"),
    (["run", "{cfg}", "--cluster", "not-an-address"], "scheduler address"),
    (["run", "{cfg}", "--cluster", "tcp://10.0.0.5:99999"], "scheduler address"),
    (["run", "{cfg}", "--output", "{tmp}/x.txt"], "HDF5"),
    (["check", "{cfg}", "--draw", "{tmp}/dev.xyz"], ".xyz"),
], ids=["workers-negative", "workers-zero", "workers-word", "cluster-word", "cluster-port", "output-suffix",
        "draw-suffix"])
def test_every_argument_gives_one_line(tmp_path, capsys, args, fragment):
    cfg = tmp_path / "good.toml"
    cfg.write_text(GOOD.format(out=tmp_path / "out.h5"))
    argv = [a.format(cfg=cfg, tmp=tmp_path) for a in args]
    try:
        status = main(argv)
    except SystemExit as exc:  # argparse's own refusal: usage line and exit 2
        status = exc.code
    err = capsys.readouterr().err.strip().splitlines()
    assert status == EXIT_BAD_INPUT
    assert len([line for line in err if "error" in line]) == 1 and fragment in err[-1], err
    assert not any(tmp_path.glob("*.h5")) and not any(tmp_path.glob("*.png"))


def test_check_prints_the_estimate_and_where_it_writes(tmp_path, capsys):
    cfg = tmp_path / "cfg" / "good.toml"
    cfg.parent.mkdir()
    cfg.write_text(GOOD.format(out=tmp_path / "elsewhere" / "out.h5"))
    assert main(["check", str(cfg)]) == EXIT_OK
    out = capsys.readouterr().out
    assert "estimate: about" in out and "memory about" in out and "time about" in out
    assert "writing outside the config's folder" in out


def test_a_device_of_one_site_is_questioned(tmp_path, capsys):
    text = GOOD.format(out=tmp_path / "out.h5").replace("[0.0, 0.0, 100.0, 60.0]", "[0.0, 0.0, 6.0, 6.0]")
    text = text.replace("span_nm = [10.0, 50.0]", "span_nm = [0.0, 6.0]").replace("span_nm = [0.0, 30.0]",
                                                                                "span_nm = [0.0, 6.0]")
    (tmp_path / "tiny.toml").write_text(text)
    main(["check", str(tmp_path / "tiny.toml")])
    err = capsys.readouterr().err
    assert "are the lengths in nm?" in err and err.count("are the lengths in nm?") == 1


@pytest.mark.parametrize("command", ["check", "run", "info", "plot"])
def test_help_for_every_command(command, capsys):
    with pytest.raises(SystemExit) as exc:
        main([command, "--help"])
    assert exc.value.code == 0
    assert "usage: rgftrans " + command in capsys.readouterr().out


def test_check_run_info_plot(tmp_path, capsys):
    cfg = tmp_path / "good.toml"
    cfg.write_text(GOOD.format(out=tmp_path / "out.h5"))
    assert main(["check", str(cfg), "--draw", str(tmp_path / "device.png")]) == EXIT_OK
    assert main(["run", str(cfg), "--quiet", "--workers", "1"]) == EXIT_OK
    assert main(["info", str(tmp_path / "out.h5")]) == EXIT_OK
    assert "completed: 1/1" in capsys.readouterr().out
    assert main(["plot", str(tmp_path / "out.h5"), "--out", str(tmp_path / "g.png")]) == EXIT_OK
    assert (tmp_path / "g.png").stat().st_size > 0 and (tmp_path / "device.png").stat().st_size > 0


@pytest.mark.parametrize("content", [b"", b"not an hdf5 file at all\n"])
def test_info_on_a_bad_file(tmp_path, capsys, content):
    bad = tmp_path / "bad.h5"
    bad.write_bytes(content)
    assert main(["info", str(bad)]) == EXIT_BAD_INPUT
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "Traceback" not in err


def test_worker_warnings_reach_the_driver_once(tmp_path, capsys):
    """A warning raised in every worker process (lattice too coarse) is printed once, as one line."""
    text = GOOD.format(out=tmp_path / "coarse.h5").replace("spacing_nm = 5.0", "spacing_nm = 10.0").replace(
        "stop_meV = 5.0", "stop_meV = 9.0") + '\n[[sweep.axis]]\nparameter = "field.tesla"\nvalues = [0.0, 0.1, 0.2]\n'
    path = tmp_path / "coarse.toml"
    path.write_text(text)
    assert main(["run", str(path), "--workers", "2", "--quiet"]) == EXIT_OK
    err = capsys.readouterr().err
    coarse = [line for line in err.splitlines() if "lattice is too coarse" in line]
    assert len(coarse) == 1, err
    assert all(line.startswith("rgftrans: warning: ") for line in err.splitlines()), err


@pytest.fixture(scope="module")
def swept_result(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("export")
    text = GOOD.format(out=tmp / "swept.h5").replace("points = 7", "points = 41") + (
        "\n[temperature]\nkelvin = [0.0, 1.0]\n"
        '\n[[sweep.axis]]\nparameter = "potential.constant_meV"\nvalues = [0.0, 0.25]\n')
    path = tmp / "swept.toml"
    path.write_text(text)
    assert main(["run", str(path), "--quiet", "--workers", "1"]) == EXIT_OK
    return tmp / "swept.h5"


def test_export_writes_a_selection_as_csv(swept_result, tmp_path, capsys):
    import csv

    import numpy as np

    from rgftrans.io.store import read_result

    out = tmp_path / "g.csv"
    assert main(["export", str(swept_result), "--temperature", "1", "--leads", "source,drain",
                 "--select", "potential.constant_meV=0.25", "--out", str(out)]) == EXIT_OK
    rows = list(csv.reader(out.open()))
    assert rows[0] == ["energy [meV]", "conductance [2e^2/h]"]
    data = read_result(swept_result)
    expected = data.quantities["conductance"][1, :, 1, 1, 0]  # second potential, T = 1 K, source -> drain
    got = np.array([float(r[1]) for r in rows[1:]])
    assert np.array_equal(np.isnan(got), np.isnan(expected))
    assert np.allclose(got, expected, equal_nan=True, rtol=0, atol=0)  # the file's numbers, written exactly
    assert np.allclose([float(r[0]) for r in rows[1:]], data.energies_meV, rtol=0, atol=0)
    # everything, in siemens: one row per stored value, lead names spelled out
    out_s = tmp_path / "all.csv"
    assert main(["export", str(swept_result), "--quantity", "conductance_S", "--out", str(out_s)]) == EXIT_OK
    rows = list(csv.reader(out_s.open()))
    assert rows[0] == ["potential__constant_meV [meV]", "energy [meV]", "temperature [K]", "lead_out", "lead_in",
                       "conductance_S [S]"]
    assert len(rows) - 1 == 2 * 41 * 2 * 2 * 2 and {r[3] for r in rows[1:]} == {"source", "drain"}


@pytest.mark.parametrize("extra, fragment", [
    (["--temperature", "3"], "temperature has no value 3.0 K"),
    (["--quantity", "nope"], "no quantity 'nope'"),
    (["--select", "field.tesla=1"], "has no dimension 'field__tesla'"),
    (["--leads", "source"], "give two lead names"),
    (["--leads", "source,sink"], "no lead 'sink'"),
    (["--out", "x.txt"], "end the file name in .csv"),
])
def test_export_bad_requests_are_one_line(swept_result, tmp_path, capsys, extra, fragment):
    argv = ["export", str(swept_result), *extra]
    if "--out" not in extra:
        argv += ["--out", str(tmp_path / "x.csv")]
    assert main(argv) == EXIT_BAD_INPUT
    err = capsys.readouterr().err.strip()
    assert err.startswith("rgftrans: error: ") and "\n" not in err and fragment in err, err
    assert not (tmp_path / "x.csv").exists()


def test_export_does_not_overwrite_without_asking(swept_result, tmp_path, capsys):
    out = tmp_path / "keep.csv"
    out.write_text("precious\n")
    assert main(["export", str(swept_result), "--out", str(out)]) == EXIT_BAD_INPUT
    assert out.read_text() == "precious\n"
    assert main(["export", str(swept_result), "--out", str(out), "--overwrite"]) == EXIT_OK
    assert out.read_text().startswith("potential__constant_meV [meV],")


@pytest.mark.parametrize("args, fragment", [
    (["darkstates", "{res}", "--axis", "5"], "axis 5 does not exist"),
    (["darkstates", "{res}", "--axis", "-1"], "axis -1 does not exist"),
    (["plot", "{res}", "--energy", "inf"], "outside the stored energies"),
    (["plot", "{res}", "--energy", "1e9"], "outside the stored energies"),
], ids=["darkstates-axis-5", "darkstates-axis-negative", "plot-energy-inf", "plot-energy-far"])
def test_result_commands_give_one_line(swept_result, tmp_path, capsys, args, fragment):
    status = main([a.format(res=swept_result) for a in args] + (["--out", str(tmp_path / "x.png")]
                                                                 if args[0] == "plot" else []))
    err = capsys.readouterr().err.strip().splitlines()
    assert status == EXIT_BAD_INPUT
    assert len(err) == 1 and err[0].startswith("rgftrans: error:") and fragment in err[0], err
    assert not (tmp_path / "x.png").exists()
