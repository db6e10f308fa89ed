"""The store as the only HDF5 writer: every writer of a group or file goes through store.write_group/write_file.

Catalogue: each writer refuses an existing group (or file) without overwrite in one line naming --overwrite and
replaces it with overwrite; refuses a foreign HDF5 file and a file a running sweep holds; a killed write leaves no
half group under the real name.  An AST scan of the package finds no h5py.File opened for writing outside
io/store.py and io/sweeps.py.  Source: our own requirements (common practice, no published source).
"""

from __future__ import annotations

import ast
import subprocess
import sys
from pathlib import Path
from types import SimpleNamespace

import h5py
import numpy as np
import pytest

import rgftrans
from rgftrans.analysis.bic2d import GridSearch
from rgftrans.analysis.darkstates import Track
from rgftrans.errors import StoreError
from rgftrans.io import store
from rgftrans.io.compare import TraceFit, read_fit
from rgftrans.io.config import parse_config
from rgftrans.io.searches import SweepSearch, write_grid_search, write_search
from rgftrans.io.store import (GROUPS_FORMAT, Axis, OutputLock, QuantitySpec, ResultFile, StoredArray, StoredGroup,
                               read_result, validate, write_file, write_group)
from rgftrans.io.waveguide_config import WAVEGUIDE_FORMAT, write_waveguide

PACKAGE = Path(rgftrans.__file__).parent
#: Modules allowed to open HDF5 files for writing.
WRITERS_ALLOWED = {"io/store.py", "io/sweeps.py"}


# --- what each writer writes ----------------------------------------------------------------------------------------

def _search():
    n = 4
    track = Track(parameters=np.linspace(0.0, 0.3, n), energies_meV=np.array([0.6, 0.61, np.nan, np.nan]),
                  widths_meV=np.array([1e-3, 1e-5, np.nan, np.nan]), q_factors=np.array([600.0, 6e4, np.nan, np.nan]),
                  in_continuum=np.ones(n, bool), stopped_at=((0.2, 0.66),))
    return SweepSearch(axis_name="gates.plunger.voltage_V", track=track, bics=[], diagnostics=[], nearby_q=[],
                       energy_window=(0.55, 0.65), left_window=[(0.2, 0.66)], axis_units="V")


def _grid_search():
    return GridSearch(names=("gates.a.voltage_V", "gates.b.voltage_V"), p1=np.linspace(0, 1, 3), p2=np.linspace(0, 1, 2),
                      seeds_meV=np.array([0.7]), residuals=np.zeros((1, 3, 2, 2)), energies_meV=np.full((1, 3, 2), 0.7),
                      channels=(("source", 1), ("drain", 1)), bics=[], seed_of_bic=[], candidates=0,
                      energy_window=(0.6, 0.9), notes=("a note",))


def _fit():
    gate = np.linspace(-0.05, -0.04, 5)
    g = np.linspace(1e-6, 2e-6, 5)
    return TraceFit(source="trace.csv", description="synthetic", result_path="sweep.h5", mode="energy", gate_axis="",
                    lead_in="source", lead_out="drain", mu_ref_meV=1.0, parameter_names=("lever_arm", "offset"),
                    fitted=("lever_arm",), values={"lever_arm": 80.0, "offset": -0.04},
                    stderr={"lever_arm": 0.5, "offset": 0.0}, covariance=np.array([[0.25]]),
                    correlation=np.array([[1.0]]), chi_square=3.0, reduced_chi_square=0.75, dof=4, n_points=5,
                    noise_S=1e-8, noise_source="given", gate_V=gate, measured_S=g, model_S=g, model_device_S=g,
                    residuals_S=np.zeros(5), curve_gate_V=np.linspace(-0.05, -0.04, 9), curve_S=np.linspace(1e-6, 2e-6, 9),
                    success=True, message="converged", n_evaluations=12, mu_ref_source="given",
                    bounds={"lever_arm": (8.0, 800.0)})


def _waveguide_run():
    """Stands in for a WaveguideRun: what write_waveguide reads of it (the storage is under test, not the physics)."""
    freqs = np.linspace(5.0, 6.0, 4)
    spectrum = SimpleNamespace(frequencies_GHz=freqs, matrix=np.zeros((4, 2, 2)), n_open=np.ones((4, 2), int),
                               absorption=np.zeros((4, 2)), port_names=("in", "out"))
    model = SimpleNamespace(spacing=1.0, unit="mm", cutoffs_GHz=lambda k, n: np.arange(1.0, n + 1.0))
    return SimpleNamespace(model=model, spectrum=spectrum, search=None, dark_modes=[], config_text="[waveguide]\n")


#: Writers of a group: (write(path, overwrite), group written, check of what was read back).
GROUP_WRITERS = {
    "write_group": (lambda path, ow: write_group(path, "extra", {"x": StoredArray([1.0, 2.0], "nm", "position")},
                                                 attrs={"note": "n"}, overwrite=ow), "extra"),
    "write_search": (lambda path, ow: write_search(_search(), path, overwrite=ow), "darkstates"),
    "write_grid_search": (lambda path, ow: write_grid_search(_grid_search(), path, overwrite=ow), "darkstates"),
    "TraceFit.to_hdf5": (lambda path, ow: _fit().to_hdf5(path, "compare", overwrite=ow), "compare"),
}
#: Writers of a whole file of their own.
FILE_WRITERS = {
    "write_waveguide": lambda path, ow: write_waveguide(_waveguide_run(), path, overwrite=ow),
    "write_file": lambda path, ow: write_file(path, StoredGroup({"x": StoredArray(np.arange(3.0), "1", "x")}),
                                              kind=GROUPS_FORMAT, overwrite=ow),
}
ALL_WRITERS = {**{k: v[0] for k, v in GROUP_WRITERS.items()}, **FILE_WRITERS}


def _result_file(path):
    with ResultFile.create(path, config_text="x = 1\n", config_hash="h" * 16,
                           axes=[Axis("vg", [0.0, 1.0], "V", "gate voltage")], energies_meV=[0.5, 0.6],
                           lead_names=["source", "drain"],
                           quantities={"transmission": QuantitySpec(units="1", long_name="transmission")}) as rf:
        rf.write_point((0,), {"transmission": np.array([0.1, 0.2])})
    return path


def assert_one_line(exc, *fragments):
    message = str(exc)
    assert "\n" not in message
    for fragment in fragments:
        assert fragment in message, message


# --- overwrite policy -----------------------------------------------------------------------------------------------

@pytest.mark.parametrize("writer", GROUP_WRITERS)
def test_group_writer_refuses_an_existing_group_and_replaces_it_with_overwrite(writer, tmp_path):
    write, group = GROUP_WRITERS[writer]
    path = _result_file(tmp_path / "sweep.h5")
    write(path, False)
    with h5py.File(path, "r") as f:
        first = f[group].id.get_info().addr if hasattr(f[group].id, "get_info") else None
        assert group in f and not [k for k in f if k.startswith(".")]
    with pytest.raises(StoreError) as err:
        write(path, False)
    assert_one_line(err.value, "sweep.h5", f"group /{group} exists", "--overwrite")
    write(path, True)
    with h5py.File(path, "r") as f:
        assert group in f and not [k for k in f if k.startswith(".")]  # no partial group left behind
        assert first is None or f[group].id.get_info().addr != first  # a new group, not the old one
    validate(path)  # the result file is intact and every added dataset has units and long_name
    assert read_result(path).completed.tolist() == [True, False]


@pytest.mark.parametrize("writer", FILE_WRITERS)
def test_file_writer_refuses_an_existing_file_and_replaces_it_with_overwrite(writer, tmp_path):
    write = FILE_WRITERS[writer]
    path = tmp_path / "own.h5"
    write(path, False)
    with pytest.raises(StoreError) as err:
        write(path, False)
    assert_one_line(err.value, "own.h5", "exists", "--overwrite")
    write(path, True)
    with h5py.File(path, "r") as f:
        assert f.attrs["format"].startswith("rgftrans-")
    assert not list(tmp_path.glob(".*partial*"))


@pytest.mark.parametrize("writer", GROUP_WRITERS)
def test_group_writer_makes_a_file_of_its_own_when_saved_elsewhere(writer, tmp_path):
    write, group = GROUP_WRITERS[writer]
    path = tmp_path / "saved.h5"
    write(path, False)
    with h5py.File(path, "r") as f:
        assert f.attrs["format"] == GROUPS_FORMAT and group in f and "provenance" in f
    write(path, True)  # and the same policy applies to it


def test_trace_fit_reads_back_after_the_move(tmp_path):
    fit = _fit()
    path = _result_file(tmp_path / "sweep.h5")
    fit.to_hdf5(path)
    back = read_fit(path)
    assert back.values == fit.values and back.bounds == fit.bounds and back.fitted == fit.fitted
    np.testing.assert_array_equal(back.covariance, fit.covariance)
    with h5py.File(path, "r") as f:  # dimension scales survive the move of the group into place
        assert f["compare/residual"].dims[0][0].name == "/compare/gate_voltage"
        assert f["compare/covariance"].dims[1][0].name == "/compare/fitted_parameter_2"


# --- foreign files and running sweeps -------------------------------------------------------------------------------

@pytest.mark.parametrize("writer", ALL_WRITERS)
def test_writer_refuses_a_foreign_hdf5_file(writer, tmp_path):
    path = tmp_path / "theirs.h5"
    with h5py.File(path, "w") as f:
        f.attrs["format"] = "someone-else"
        f["data"] = np.arange(3)
    before = path.read_bytes()
    with pytest.raises(StoreError) as err:
        ALL_WRITERS[writer](path, True)  # not even with overwrite
    assert_one_line(err.value, "theirs.h5", "not a file written by rgftrans", "format 'someone-else'")
    assert path.read_bytes() == before


@pytest.mark.parametrize("writer", ALL_WRITERS)
def test_writer_refuses_a_file_that_is_not_hdf5(writer, tmp_path):
    path = tmp_path / "notes.h5"
    path.write_text("not HDF5\n")
    with pytest.raises(StoreError) as err:
        ALL_WRITERS[writer](path, True)
    assert_one_line(err.value, "notes.h5", "not an HDF5 file")
    assert path.read_text() == "not HDF5\n"


@pytest.fixture(scope="module")
def held_file(tmp_path_factory):
    """A result file whose output lock another process holds, as a running sweep does."""
    path = _result_file(tmp_path_factory.mktemp("held") / "running.h5")
    holder = subprocess.Popen(
        [sys.executable, "-c", "import sys; from rgftrans.io.store import OutputLock; "
         "lock = OutputLock(sys.argv[1]).__enter__(); print('held', flush=True); sys.stdin.read()", str(path)],
        stdin=subprocess.PIPE, stdout=subprocess.PIPE, text=True)
    assert holder.stdout.readline().strip() == "held"
    yield path, holder.pid
    holder.communicate("", timeout=30)


@pytest.mark.parametrize("writer", ALL_WRITERS)
def test_writer_refuses_a_file_a_running_sweep_holds(writer, held_file):
    path, pid = held_file
    before = path.read_bytes()
    with pytest.raises(StoreError) as err:
        ALL_WRITERS[writer](path, True)
    assert_one_line(err.value, "running.h5", f"is being written by PID {pid}")
    assert path.read_bytes() == before


def test_preflight_checks_refuse_what_the_writers_would(held_file, tmp_path):
    path, pid = held_file
    with pytest.raises(StoreError, match=f"being written by PID {pid}"):
        store.check_group_writable(path, "darkstates", overwrite=True)
    with pytest.raises(StoreError, match=f"being written by PID {pid}"):
        store.check_file_writable(path, overwrite=True)
    own = _result_file(tmp_path / "own.h5")
    write_group(own, "g", {"x": StoredArray(1.0, "1", "x")})
    with pytest.raises(StoreError, match="group /g exists; pass --overwrite"):
        store.check_group_writable(own, "g")
    store.check_group_writable(own, "g", overwrite=True)
    store.check_group_writable(tmp_path / "new.h5", "g")
    with pytest.raises(StoreError, match="exists; pass --overwrite"):
        store.check_file_writable(own)


def test_writing_a_group_while_this_process_writes_the_sweep_is_refused(tmp_path):
    path = _result_file(tmp_path / "sweep.h5")
    with OutputLock(path):
        with pytest.raises(StoreError, match="this process is writing it as a sweep"):
            write_group(path, "g", {"x": StoredArray(1.0, "1", "x")})


# --- crash safety ---------------------------------------------------------------------------------------------------

def test_a_write_killed_midway_leaves_the_old_group_and_no_half_group(tmp_path, monkeypatch):
    path = _result_file(tmp_path / "sweep.h5")
    write_group(path, "g", {"x": StoredArray([1.0, 2.0], "nm", "old")})
    real = store._write_items

    def dies_after_first_dataset(g, contents):
        real(g, StoredGroup(dict(list(contents.items.items())[:1])))
        raise KeyboardInterrupt  # as if killed in the middle of the group

    monkeypatch.setattr(store, "_write_items", dies_after_first_dataset)
    with pytest.raises(KeyboardInterrupt):
        write_group(path, "g", {"x": StoredArray([3.0], "nm", "new"), "y": StoredArray([4.0], "nm", "new")},
                    overwrite=True)
    with h5py.File(path, "r") as f:
        assert f["g/x"].attrs["long_name"] == "old" and "y" not in f["g"]
        assert ".g.partial" in f  # the half group is only under its hidden name
    monkeypatch.setattr(store, "_write_items", real)
    write_group(path, "g", {"x": StoredArray([3.0], "nm", "new")}, overwrite=True)
    with h5py.File(path, "r") as f:
        assert ".g.partial" not in f and f["g/x"][()].tolist() == [3.0]  # the next write removes the leftover


def test_chunked_datasets_carry_checksums_and_text_and_scalars_are_stored(tmp_path):
    path = tmp_path / "g.h5"
    write_group(path, "g", {"e": StoredArray([0.1, 0.2, 0.3], "meV", "energy", scale=True),
                            "t": StoredArray(np.ones((3, 2)), "1", "transmission", dims=("e", "")),
                            "s": StoredArray(2.5, "K", "temperature"),
                            "names": StoredArray(["a", "b"], "", "names"),
                            "sub": StoredGroup({"z": StoredArray([1, 2], "1", "z")}, attrs={"kind": "k"})})
    with h5py.File(path, "r") as f:
        g = f["g"]
        assert g["t"].fletcher32 and g["e"].fletcher32 and g["sub/z"].fletcher32
        assert g["t"].dims[0][0].name == "/g/e" and g["t"].dims[0].label == "e"
        assert g["s"][()] == 2.5 and [v.decode() for v in g["names"][()]] == ["a", "b"]
        assert g["sub"].attrs["kind"] == "k" and g["t"].attrs["units"] == "1"


@pytest.mark.parametrize("datasets, fragment", [
    ({"x": StoredArray([1.0, 2.0], "1", "x", dims=("missing",))}, "dimension scale 'missing'"),
    ({"a/b": StoredArray(1.0, "1", "x")}, "not usable"),
    ({".hidden": StoredArray(1.0, "1", "x")}, "not usable"),
    ({"x": [1.0, 2.0]}, "expected a StoredArray"),
])
def test_malformed_groups_are_refused_in_one_line(datasets, fragment, tmp_path):
    with pytest.raises(StoreError) as err:
        write_group(tmp_path / "g.h5", "g", datasets)
    assert_one_line(err.value, fragment)
    assert not (tmp_path / "g.h5").exists()


# --- one Axis type --------------------------------------------------------------------------------------------------

def test_config_axes_are_the_store_axis_and_keep_their_parameter_through_a_file(tmp_path):
    path = PACKAGE.parent / "configs" / "gated_dot.toml"
    cfg = parse_config(path.read_text(), source=str(path))
    (ax,) = cfg.axes()
    assert type(ax) is Axis and ax.name == "gates__plunger__voltage_V" and ax.parameter == "gates.plunger.voltage_V"
    path = tmp_path / "r.h5"
    with ResultFile.create(path, config_text="x", config_hash="h" * 16, axes=[ax], energies_meV=[1.0],
                           lead_names=["a", "b"], quantities={"q": QuantitySpec(units="1", long_name="q")}):
        pass
    assert read_result(path).axes == (ax,)
    with pytest.raises(StoreError, match="build it with Axis.of_parameter"):
        Axis("tesla", [0.0], "T", "field", parameter="field.tesla")


# --- no writer outside the store ------------------------------------------------------------------------------------

#: h5py modes that write (h5py's default mode is "r").
WRITE_MODES = {"a", "w", "w-", "x", "r+"}


def h5py_writers(source: str) -> list[int]:
    """Lines where ``source`` opens an HDF5 file for writing (``h5py.File`` or a bare ``File`` from h5py)."""
    lines = []
    for node in ast.walk(ast.parse(source)):
        if not isinstance(node, ast.Call):
            continue
        func = node.func
        is_file = (isinstance(func, ast.Attribute) and func.attr == "File"
                   and isinstance(func.value, ast.Name) and func.value.id == "h5py") \
            or (isinstance(func, ast.Name) and func.id == "File")
        if not is_file:
            continue
        mode = node.args[1] if len(node.args) > 1 else next((k.value for k in node.keywords if k.arg == "mode"), None)
        if mode is None:
            continue  # read-only by default
        if not isinstance(mode, ast.Constant) or mode.value in WRITE_MODES:
            lines.append(node.lineno)  # a computed mode may write: counted as a writer
    return lines


@pytest.mark.parametrize("source, expected", [
    ('import h5py\nf = h5py.File(p, "a")\n', [2]),
    ('import h5py\nwith h5py.File(p, mode="w") as f: pass\n', [2]),
    ('from h5py import File\nFile(p, "r+")\n', [2]),
    ('import h5py\nh5py.File(p, m)\n', [2]),
    ('import h5py\nh5py.File(p, "r")\nh5py.File(p)\n', []),
])
def test_the_writer_scan_finds_writers(source, expected):
    assert h5py_writers(source) == expected


def test_no_module_outside_the_store_opens_hdf5_for_writing():
    found = {}
    for module in sorted(PACKAGE.rglob("*.py")):
        rel = module.relative_to(PACKAGE).as_posix()
        if rel in WRITERS_ALLOWED:
            continue
        lines = h5py_writers(module.read_text(encoding="utf-8"))
        if lines:
            found[rel] = lines
    assert len(list(PACKAGE.rglob("*.py"))) > 20  # the scan saw the package
    assert found == {}, f"HDF5 opened for writing outside the store: {found}; write through store.write_group"
