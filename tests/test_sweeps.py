"""Sweeps: executors agree, results land in HDF5, interrupted sweeps resume without loss or duplication."""

from __future__ import annotations

import os
import random
import signal
import subprocess
import sys
import time
from pathlib import Path

import h5py
import numpy as np
import pytest

from rgftrans.io.config import parse_config
from rgftrans.errors import RgftransError
from rgftrans.transport.rgf import transmission
from rgftrans.io.store import read_result
from rgftrans.errors import StoreError
from rgftrans.io.sweeps import axis_dataset_name, compute_point, grid_points, run_sweep

CONFIG = """
[lattice]
kind = "square"
spacing_nm = 5.0

[geometry]
rectangle_nm = [0.0, 0.0, 150.0, 90.0]

[gates]
depth_nm = 50.0

[[gates.gate]]
name = "plunger"
rectangle_nm = [55.0, 65.0, 95.0, 300.0]
voltage_V = -0.01

[[leads]]
name = "source"
side = "left"
span_nm = [20.0, 70.0]

[[leads]]
name = "drain"
side = "right"
span_nm = [10.0, 45.0]

[energy]
start_meV = 2.0
stop_meV = 6.0
points = {n_e}

[[sweep.axis]]
parameter = "gates.plunger.voltage_V"
start = -0.03
stop = 0.0
points = {n_v}

[[sweep.axis]]
parameter = "field.tesla"
values = [0.0, 0.4]

[output]
path = "{path}"
"""


def config(tmp_path, name="sweep.h5", n_v=4, n_e=12, extra=""):
    return parse_config(CONFIG.format(path=tmp_path / name, n_v=n_v, n_e=n_e) + extra, source="test.toml")


def test_grid_point_values_match_direct_transmission(tmp_path):
    """A stored point equals the transmission of the device built for that point (no shuffling of the grid)."""
    cfg = config(tmp_path)
    report = run_sweep(cfg, quiet=True, workers=1)
    data = read_result(report.path)
    assert data.completed.all() and report.n_computed == 8
    assert [ax.name for ax in data.axes] == [axis_dataset_name("gates.plunger.voltage_V"), "field__tesla"]
    for index, point in list(grid_points(cfg))[::3]:
        direct = transmission(cfg.build_device(point).discretise(), cfg.energies()).transmission
        assert np.allclose(data.quantities["transmission"][index][:, 1, 0], direct, atol=1e-12)
        # two terminals: R + T = N in the stored matrix
        t = data.quantities["transmission"][index]
        n = data.quantities["n_open"][index]
        assert np.allclose(t[:, 0, 0] + t[:, 1, 0], n[:, 0], atol=1e-9)


def test_stored_conductance_per_temperature_and_spin(tmp_path):
    """Stored G(mu = E, T) in 2e^2/h and S: the same for a spinless model and one with explicit spin orbitals.

    Landauer-Büttiker (common practice, no source): G = (2e^2/h) T for a spinless model, (e^2/h) T when T
    counts both spins; without Zeeman the two models describe the same wire.
    """
    from rgftrans.system.materials import CONDUCTANCE_QUANTUM_S
    from rgftrans.analysis.thermal import thermal_conductance

    temps = "[temperature]\nkelvin = [0.0, 0.5]\n"
    plain = read_result(run_sweep(config(tmp_path, "plain.h5", n_e=40, extra=temps), quiet=True, workers=1).path)
    spinful = read_result(run_sweep(config(tmp_path, "spin.h5", n_e=40, extra=temps
                                           + "[spin]\nenabled = true\n[field]\nzeeman = false\n"),
                                    quiet=True, workers=1).path)
    assert (plain.attrs["spin_degeneracy"], spinful.attrs["spin_degeneracy"]) == (2, 1)
    temp = plain.coordinates["temperature"]
    assert list(temp.values) == [0.0, 0.5] and temp.units == "K"
    g, g_spin = plain.quantities["conductance"], spinful.quantities["conductance"]
    assert g.shape == (4, 2, 40, 2, 2, 2)  # (plunger, field, energy, temperature, lead_out, lead_in)
    assert np.allclose(g_spin, g, rtol=0, atol=1e-9, equal_nan=True)
    assert np.allclose(plain.quantities["conductance_S"], g * CONDUCTANCE_QUANTUM_S, rtol=1e-14, equal_nan=True)
    t = plain.quantities["transmission"]
    assert np.allclose(g[..., 0, 1, 0], t[..., 1, 0], atol=1e-12)  # 0 K: G = T (spinless)
    assert np.allclose(g_spin[..., 0, 1, 0], spinful.quantities["transmission"][..., 1, 0] / 2, atol=1e-12)
    # 0.5 K: the thermal average at the grid energies where the window fits, NaN near the grid's ends.
    finite = np.isfinite(g[0, 0, :, 1, 1, 0])
    assert finite[20] and not finite[0] and not finite[-1]
    e = plain.energies_meV
    ref = thermal_conductance(e, t[0, 0, :, 1, 0], e[finite], 0.5, check=False).conductance_g0
    assert np.allclose(g[0, 0, finite, 1, 1, 0], ref, rtol=1e-12)


def test_refined_sweep_conductance_matches_a_dense_grid(tmp_path):
    """[energy] refine_tolerance: the stored G(mu, T) on a coarse grid equals that of a 40x denser grid.

    Reference: the same thermal integral (rgftrans.analysis.thermal, checked against closed forms in its own tests) on
    a dense grid, whose interpolation error h^2 max|T''| / 8 is far below the tolerance; the refined result
    must agree to about the refinement tolerance (2e-3 here), the unrefined coarse grid must not.
    """
    temps = "[temperature]\nkelvin = [0.3]\n"
    coarse = config(tmp_path, "coarse.h5", n_v=2, n_e=41, extra=temps)
    refined = parse_config(CONFIG.format(path=tmp_path / "refined.h5", n_v=2, n_e=41).replace(
        "points = 41", "points = 41\nrefine_tolerance = 2e-4\nrefine_max_points = 20000") + temps, source="t.toml")
    dense = config(tmp_path, "dense.h5", n_v=2, n_e=1601, extra=temps)
    g = {name: read_result(run_sweep(cfg, quiet=True, workers=1).path).quantities["conductance"][..., 0, 1, 0]
         for name, cfg in (("coarse", coarse), ("refined", refined), ("dense", dense))}
    # the coarse energies are every 40th dense energy
    on_coarse = g["dense"][..., ::40]
    ok = np.isfinite(on_coarse) & np.isfinite(g["refined"])
    assert np.count_nonzero(ok) > 40
    assert np.max(np.abs(g["refined"][ok] - on_coarse[ok])) < 2e-3
    assert np.max(np.abs(g["coarse"][ok] - on_coarse[ok])) > 1e-2


def test_two_local_processes_give_the_same_file(tmp_path):
    one = read_result(run_sweep(config(tmp_path, "one.h5"), quiet=True, workers=1).path)
    two = read_result(run_sweep(config(tmp_path, "two.h5"), quiet=True, workers=2).path)
    assert np.array_equal(one.quantities["transmission"], two.quantities["transmission"])
    assert np.array_equal(one.quantities["n_open"], two.quantities["n_open"])


@pytest.mark.slow
def test_dask_local_cluster_on_loopback_matches_local(tmp_path):
    import dask.distributed  # noqa: F401  (a test dependency: the check must run, not skip)
    local = read_result(run_sweep(config(tmp_path, "local.h5"), quiet=True, workers=1).path)
    dask = read_result(run_sweep(config(tmp_path, "dask.h5"), quiet=True, workers=2, executor="dask").path)
    assert np.array_equal(local.quantities["transmission"], dask.quantities["transmission"])


def test_rerun_resumes_and_another_config_is_refused(tmp_path):
    cfg = config(tmp_path)
    first = run_sweep(cfg, quiet=True, workers=1)
    again = run_sweep(cfg, quiet=True, workers=1)
    assert (again.n_computed, again.n_resumed) == (0, first.n_points)
    other = config(tmp_path, n_e=13)
    with pytest.raises(StoreError, match="--overwrite") as err:
        run_sweep(other, quiet=True, workers=1)
    assert "\n" not in str(err.value)
    replaced = run_sweep(other, quiet=True, workers=1, overwrite=True)
    assert replaced.n_computed == replaced.n_points
    assert read_result(replaced.path).energies_meV.size == 13


def test_partial_file_resumes_only_missing_points(tmp_path):
    cfg = config(tmp_path)
    ref = read_result(run_sweep(cfg, quiet=True, workers=1, path=tmp_path / "ref.h5").path)
    path = tmp_path / "sweep.h5"
    run_sweep(cfg, quiet=True, workers=1)
    with h5py.File(path, "r+") as f:  # forget three points, as if the run had stopped there
        done = f["results/completed"][...]
        done[1, 1] = done[3, 0] = done[0, 0] = False
        f["results/completed"][...] = done
    report = run_sweep(cfg, quiet=True, workers=1)
    assert report.n_computed == 3
    assert np.array_equal(read_result(path).quantities["transmission"], ref.quantities["transmission"])


def test_damaged_file_is_rebuilt_from_the_journal(tmp_path):
    cfg = config(tmp_path)
    ref = read_result(run_sweep(cfg, quiet=True, workers=1, path=tmp_path / "ref.h5").path)
    path = tmp_path / "sweep.h5"
    run_sweep(cfg, quiet=True, workers=1)
    # Simulate a crash in the middle of a write: a journal of finished points, and a truncated HDF5 file.
    journal = path.with_name(path.name + ".journal")
    journal.mkdir()
    (journal / ".rgftrans-journal").write_text(cfg.config_hash())  # the marker of a journal of ours
    for index, point in list(grid_points(cfg))[:5]:
        np.savez(journal / ("p_" + "_".join(map(str, index)) + ".npz"), **compute_point(cfg, point))
    data = path.read_bytes()
    path.write_bytes(data[: len(data) // 2])
    report = run_sweep(cfg, quiet=True, workers=1)
    assert report.n_computed == report.n_points - 5  # the journal's points are not recomputed
    assert np.array_equal(read_result(path).quantities["transmission"], ref.quantities["transmission"])
    assert not journal.exists()


def test_result_reads_with_xarray(tmp_path):
    import xarray as xr  # a test dependency (extra "test")
    path = run_sweep(config(tmp_path), quiet=True, workers=1).path
    ds = xr.open_dataset(path, engine="h5netcdf", group="results")
    assert ds["transmission"].dims == ("gates__plunger__voltage_V", "field__tesla", "energy", "lead_out", "lead_in")
    assert ds["energy"].attrs["units"] == "meV"
    np.testing.assert_allclose(ds["field__tesla"].values, [0.0, 0.4])
    ds.close()


_RUNNER = """
import sys
from rgftrans.cli import main
sys.exit(main(["run", sys.argv[1], "--quiet", "--workers", "1"]))
"""


@pytest.mark.slow
def test_sigkill_at_random_moments_then_resume_equals_uninterrupted(tmp_path):
    """Kill the sweep with SIGKILL several times at random moments; the final file equals an uninterrupted run.

    Nothing finished may be lost or duplicated: every point equals the reference bit for bit.
    """
    rng = random.Random(20261202)
    text = CONFIG.format(path=tmp_path / "killed.h5", n_v=20, n_e=60)
    (tmp_path / "killed.toml").write_text(text)
    ref = read_result(run_sweep(parse_config(text), quiet=True, workers=1, path=tmp_path / "ref.h5").path)
    env = {**os.environ, "OPENBLAS_NUM_THREADS": "1"}
    kills = 0
    partial = []  # completed fractions seen after each kill (if the file was readable)
    for _ in range(4):
        proc = subprocess.Popen([sys.executable, "-c", _RUNNER, str(tmp_path / "killed.toml")], env=env,
                                stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
        time.sleep(rng.uniform(1.0, 3.0))
        if proc.poll() is None:
            proc.send_signal(signal.SIGKILL)
            kills += 1
        proc.wait()
        try:
            partial.append(read_result(tmp_path / "killed.h5").completed.mean())
        except StoreError:
            pass  # killed before the file existed, or mid-write: the journal covers it
    assert kills >= 2  # the test really interrupted the sweep
    assert any(0 < f < 1 for f in partial), partial  # ... in the middle, with points done and points to do
    done = subprocess.run([sys.executable, "-c", _RUNNER, str(tmp_path / "killed.toml")], env=env,
                          capture_output=True, text=True)
    assert done.returncode == 0, done.stderr
    final = read_result(tmp_path / "killed.h5")
    assert final.completed.all()
    assert np.array_equal(final.quantities["transmission"], ref.quantities["transmission"])
    assert np.array_equal(final.quantities["n_open"], ref.quantities["n_open"])
    assert not Path(str(tmp_path / "killed.h5") + ".journal").exists()


# --- what a sweep may touch, and what it survives -------------------------------------------------


def test_overwrite_replaces_only_rgftrans_files(tmp_path):
    cfg = config(tmp_path)
    foreign_h5 = tmp_path / "sweep.h5"
    with h5py.File(foreign_h5, "w") as f:
        f["precious"] = np.arange(3)
    with pytest.raises(StoreError, match="not an rgftrans result file; rgftrans replaces only its own files"):
        run_sweep(cfg, quiet=True, workers=1, overwrite=True)
    with h5py.File(foreign_h5, "r") as f:
        assert list(f["precious"][()]) == [0, 1, 2]
    foreign_h5.write_text("lab notebook\n")
    with pytest.raises(StoreError, match="rgftrans replaces only its own files"):
        run_sweep(cfg, quiet=True, workers=1, overwrite=True)
    assert foreign_h5.read_text() == "lab notebook\n"


def test_truncated_own_file_is_replaced_with_overwrite_and_the_advice_says_so(tmp_path):
    cfg = config(tmp_path)
    path = run_sweep(cfg, quiet=True, workers=1).path
    data = path.read_bytes()
    path.write_bytes(data[: len(data) // 3])
    with pytest.raises(StoreError, match="--overwrite") as err:  # no journal: the advice must be one that works
        run_sweep(cfg, quiet=True, workers=1)
    assert "\n" not in str(err.value)
    report = run_sweep(cfg, quiet=True, workers=1, overwrite=True)
    assert report.n_computed == report.n_points and read_result(path).completed.all()


@pytest.mark.parametrize("kind", ["file", "folder"])
def test_something_foreign_at_the_journal_path_is_never_deleted(tmp_path, kind):
    cfg = config(tmp_path)
    journal = tmp_path / "sweep.h5.journal"
    if kind == "file":
        journal.write_text("not ours\n")
    else:
        journal.mkdir()
        (journal / "notes.txt").write_text("not ours\n")
    for overwrite in (False, True):
        with pytest.raises(StoreError, match="rgftrans did not create") as err:
            run_sweep(cfg, quiet=True, workers=1, overwrite=overwrite)
        assert "\n" not in str(err.value)
    assert (journal.read_text() if kind == "file" else (journal / "notes.txt").read_text()) == "not ours\n"


def test_damaged_journal_entries_count_as_missing(tmp_path):
    cfg = config(tmp_path)
    ref = read_result(run_sweep(cfg, quiet=True, workers=1, path=tmp_path / "ref.h5").path)
    path = tmp_path / "sweep.h5"
    run_sweep(cfg, quiet=True, workers=1)
    with h5py.File(path, "r+") as f:  # forget two points ...
        done = f["results/completed"][...]
        done[0, 0] = done[1, 1] = False
        f["results/completed"][...] = done
    journal = path.with_name(path.name + ".journal")  # ... whose journal entries are damaged
    journal.mkdir()
    (journal / ".rgftrans-journal").write_text(cfg.config_hash())
    (journal / "p_0_0.npz").write_bytes(b"PK\x03\x04 truncated")
    (journal / "p_1_1.npz").write_bytes(b"")
    with pytest.warns(UserWarning, match="journal entry p_\\d_\\d.npz is unreadable"):
        report = run_sweep(cfg, quiet=True, workers=1)
    assert report.n_computed == 2
    assert np.array_equal(read_result(path).quantities["transmission"], ref.quantities["transmission"])


def test_stale_partial_files_are_cleaned_up(tmp_path):
    cfg = config(tmp_path)
    stale = tmp_path / ".sweep.h5.99999.partial"
    stale.write_bytes(b"\x89HDF half-built")
    run_sweep(cfg, quiet=True, workers=1)
    assert not stale.exists()


def test_a_second_writer_is_refused_while_the_first_runs(tmp_path):
    cfg = config(tmp_path)
    path = tmp_path / "sweep.h5"
    holder = subprocess.Popen(
        [sys.executable, "-c", "import sys; from rgftrans.io.store import OutputLock; "
         "lock = OutputLock(sys.argv[1]).__enter__(); print('locked', flush=True); sys.stdin.read()", str(path)],
        stdin=subprocess.PIPE, stdout=subprocess.PIPE, text=True)
    try:
        assert holder.stdout.readline().strip() == "locked"
        with pytest.raises(StoreError, match=f"is being written by PID {holder.pid} on host") as err:
            run_sweep(cfg, quiet=True, workers=1)
        assert "\n" not in str(err.value)
        assert not path.exists()  # nothing was created or touched
    finally:
        holder.communicate("", timeout=30)
    assert run_sweep(cfg, quiet=True, workers=1).n_computed == 8  # after the first exits, the run goes ahead


@pytest.mark.parametrize("kwargs, fragment", [
    ({"path": "sweep.txt"}, "end its name in .h5"),
    ({"workers": 0}, "workers must be a whole number >= 1, got 0"),
    ({"workers": -2}, "workers must be a whole number >= 1, got -2"),
])
def test_bad_run_arguments(tmp_path, kwargs, fragment):
    if "path" in kwargs:
        kwargs = {"path": tmp_path / kwargs["path"]}
    with pytest.raises(RgftransError, match=fragment):
        run_sweep(config(tmp_path), quiet=True, **kwargs)
