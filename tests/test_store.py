"""The HDF5 result file (rgftrans.io.store): layout, round trips, resume, and refusal of bad files.

Expectations come from the file layout documented in rgftrans/store.py and
from the conventions other readers rely on: HDF5 dimension scales (h5py
``Dataset.dims``) and the netCDF-4 data model as read by xarray/h5netcdf.
"""

import os
import subprocess
import sys

import h5py
import numpy as np
import pytest

from rgftrans import __version__
from rgftrans.errors import RgftransError
from rgftrans.io.store import FORMAT_NAME, SCHEMA_VERSION, Axis, QuantitySpec, ResultFile, OutputLock, lock_owner, read_result, summary, validate
from rgftrans.errors import StoreError

LEADS = ["source", "drain"]
ENERGIES = np.linspace(0.5, 2.5, 7)  # meV
CONFIG = '[sweep]\nenergies_meV = [0.5, 2.5, 7]\nname = "dot µ-test"\n'
HASH = "3f9a0c1d2e4b5a6978" * 2

#: Parameter axes for 0, 1 and 2 outer sweep dimensions.
AXES = {
    0: [],
    1: [Axis("vg_plunger", np.linspace(-0.3, 0.1, 5), "V", "plunger gate voltage")],
    2: [
        Axis("vg_plunger", np.linspace(-0.3, 0.1, 4), "V", "plunger gate voltage"),
        Axis("bfield", [0.0, 0.5, 1.0], "T", "perpendicular magnetic field"),
    ],
}
QUANTITIES = {
    "transmission": QuantitySpec(
        shape_tail=(("lead_out", 2), ("lead_in", 2)), units="1", long_name="transmission matrix T_pq"
    ),
    "conductance": QuantitySpec(units="2e^2/h", long_name="two-terminal conductance"),
    "n_open": QuantitySpec(shape_tail=(("lead", 2),), dtype="int32", units="1", long_name="open channels per lead"),
    "s_phase": QuantitySpec(dtype="complex128", units="1", long_name="reflection amplitude r_00"),
}


def point_values(index, seed=0):
    """Deterministic, index-dependent values for one parameter point."""
    rng = np.random.default_rng(abs(hash((index, seed))) % 2**32)
    n_e = ENERGIES.size
    return {
        "transmission": rng.uniform(0, 1, (n_e, 2, 2)),
        "conductance": rng.uniform(0, 3, n_e),
        "n_open": rng.integers(0, 5, (n_e, 2)).astype(np.int32),
        "s_phase": rng.normal(size=n_e) + 1j * rng.normal(size=n_e),
    }


def make_file(path, n_axes, *, points=(), config_hash=HASH, **kwargs):
    with ResultFile.create(path, config_text=CONFIG, config_hash=config_hash, axes=AXES[n_axes],
                           energies_meV=ENERGIES, lead_names=LEADS, quantities=QUANTITIES, **kwargs) as rf:
        for index in points:
            rf.write_point(index, point_values(index))
    return path


def sweep_shape(n_axes):
    return tuple(axis.size for axis in AXES[n_axes])


def all_points(n_axes):
    return list(np.ndindex(sweep_shape(n_axes)))


#: Parameter points written in the partial-sweep tests (every other point of the sweep).
def some_points(n_axes):
    return all_points(n_axes)[::2]


def assert_one_line(exc: BaseException, *fragments):
    message = str(exc)
    # One line for the CLI to print: no newline, no traceback text, names the problem.
    assert "\n" not in message and "Traceback" not in message
    for fragment in fragments:
        assert fragment in message, message


# --- round trip ---------------------------------------------------------------------------------


@pytest.mark.parametrize("n_axes", [0, 1, 2])
def test_round_trip_all_points(tmp_path, n_axes):
    path = make_file(tmp_path / "r.h5", n_axes, points=all_points(n_axes))
    data = read_result(path)
    # Every array comes back bit for bit, at its own index, with the declared dtype.
    assert data.axes == tuple(AXES[n_axes])
    np.testing.assert_array_equal(data.energies_meV, ENERGIES)
    assert data.lead_names == tuple(LEADS)
    assert data.quantity_specs == QUANTITIES
    for name, spec in QUANTITIES.items():
        assert data.quantities[name].shape == (*sweep_shape(n_axes), ENERGIES.size, *spec.tail_shape)
        assert data.quantities[name].dtype == spec.dtype
    for index in all_points(n_axes):
        for name, expected in point_values(index).items():
            np.testing.assert_array_equal(data.quantities[name][index], expected)
    assert data.completed.shape == sweep_shape(n_axes) and data.completed.all()
    # Config text (non-ASCII included), hash and schema survive unchanged.
    assert data.config_text == CONFIG and data.config_hash == HASH
    assert data.schema_version == SCHEMA_VERSION
    validate(path)  # a complete file is valid: no exception


@pytest.mark.parametrize("n_axes", [1, 2])
def test_partial_sweep_completed_mask_and_fill(tmp_path, n_axes):
    path = tmp_path / "p.h5"
    written = some_points(n_axes)
    make_file(path, n_axes, points=written)
    data = read_result(path)
    expected = np.zeros(sweep_shape(n_axes), bool)
    for index in written:
        expected[index] = True
    # completed is True exactly at the written points.
    np.testing.assert_array_equal(data.completed, expected)
    # Unwritten points read as the missing-value markers: NaN for floats and complex, -1 for ints.
    pending = ~expected
    assert np.isnan(data.quantities["transmission"][pending]).all()
    assert np.isnan(data.quantities["conductance"][pending]).all()
    assert np.isnan(data.quantities["s_phase"][pending].real).all()
    assert (data.quantities["n_open"][pending] == -1).all()
    # Written points hold no marker.
    assert not np.isnan(data.quantities["transmission"][expected]).any()
    validate(path)  # a partial file is valid too


def test_completed_is_set_by_write_point_only(tmp_path):
    with ResultFile.create(tmp_path / "c.h5", config_text=CONFIG, config_hash=HASH, axes=AXES[2],
                           energies_meV=ENERGIES, lead_names=LEADS, quantities=QUANTITIES) as rf:
        # A new file has every point pending.
        assert rf.completed.shape == (4, 3) and not rf.completed.any()
        rf.write_extra("ldos", (1, 2), "map", np.ones((3, 4)), units="1/meV", long_name="LDOS map")
        assert not rf.completed.any()  # an extra alone does not complete a point
        rf.write_point((1, 2), point_values((1, 2)))
        assert rf.completed[1, 2] and rf.completed.sum() == 1
        # A rejected point (shape error) leaves the mask untouched.
        bad = point_values((0, 0)) | {"conductance": np.zeros(ENERGIES.size + 1)}
        with pytest.raises(StoreError) as err:
            rf.write_point((0, 0), bad)
        assert_one_line(err.value, "conductance", "shape")
        assert rf.completed.sum() == 1


def test_pure_energy_sweep_completed_is_scalar(tmp_path):
    with ResultFile.create(tmp_path / "e.h5", config_text=CONFIG, config_hash=HASH, axes=[],
                           energies_meV=ENERGIES, lead_names=LEADS, quantities=QUANTITIES) as rf:
        # No parameter axes: the mask is a 0-d array, the only index is ().
        assert rf.completed.shape == () and not rf.completed
        rf.write_point((), point_values(()))
        assert rf.completed


@pytest.mark.parametrize(
    "index, change, fragment",
    [
        ((4, 0), lambda v: v, "does not address"),  # out of range on the first axis
        ((0,), lambda v: v, "does not address"),  # too few indices
        ((0.5, 1), lambda v: v, "not a tuple of integers"),
        ((0, 0), lambda v: {"conductance": v["conductance"]}, "missing"),
        ((0, 0), lambda v: v | {"extra": v["conductance"]}, "unknown ['extra']"),
        ((0, 0), lambda v: v | {"transmission": v["transmission"] + 0j}, "dtype complex128"),
    ],
)
def test_write_point_rejects_bad_input(tmp_path, index, change, fragment):
    with ResultFile.create(tmp_path / "w.h5", config_text=CONFIG, config_hash=HASH, axes=AXES[2],
                           energies_meV=ENERGIES, lead_names=LEADS, quantities=QUANTITIES) as rf:
        with pytest.raises(StoreError) as err:
            rf.write_point(index, change(point_values((0, 0))))
        assert_one_line(err.value, fragment)
        assert not rf.completed.any()  # nothing was marked


# --- self-description ---------------------------------------------------------------------------


def test_root_attributes_config_and_provenance(tmp_path):
    path = make_file(tmp_path / "a.h5", 1)
    with h5py.File(path, "r") as f:
        assert f.attrs["format"] == FORMAT_NAME
        assert f.attrs["schema_version"] == SCHEMA_VERSION == 2
        assert f.attrs["config_hash"] == HASH
        assert f.attrs["created"].endswith("+00:00")  # ISO 8601 in UTC
        assert f["config"][()].decode("utf-8") == CONFIG  # variable-length UTF-8 string
        prov = dict(f["provenance"].attrs)
    assert prov["rgftrans"] == __version__
    for key in ("numpy", "scipy", "numba", "h5py", "python", "hostname", "platform"):
        assert isinstance(prov[key], str) and prov[key], key
    assert prov["numpy"] == np.__version__ and prov["h5py"] == h5py.__version__


def test_every_dataset_has_units_and_long_name(tmp_path):
    path = make_file(tmp_path / "u.h5", 2, points=[(0, 0)])
    with ResultFile.open_for_resume(path, config_hash=HASH) as rf:
        rf.write_extra("ldos", (0, 0), "map", np.ones((ENERGIES.size, 3)), units="1/meV", long_name="LDOS",
                       dims=["energy", Axis("x", [0.0, 5.0, 10.0], "nm", "position along the wire")])
    datasets = []
    with h5py.File(path, "r") as f:
        f.visititems(lambda name, obj: datasets.append((name, dict(obj.attrs)))
                     if isinstance(obj, h5py.Dataset) else None)
    # File layout documented in the store module: every array carries units and long_name (and there are many arrays to check).
    assert len(datasets) >= 15
    for name, attrs in datasets:
        assert isinstance(attrs.get("units"), str), name
        assert isinstance(attrs.get("long_name"), str) and attrs["long_name"], name


@pytest.mark.parametrize("n_axes", [0, 1, 2])
def test_h5py_sees_dimension_scales(tmp_path, n_axes):
    path = make_file(tmp_path / "d.h5", n_axes, points=all_points(n_axes)[:1])
    with h5py.File(path, "r") as f:
        g = f["results"]
        t = g["transmission"]
        expected = [a.name for a in AXES[n_axes]] + ["energy", "lead_out", "lead_in"]
        # Each dimension has one attached scale, named like the dimension, and a matching label.
        assert [dim.label for dim in t.dims] == expected
        for dim, name in zip(t.dims, expected):
            assert len(dim) == 1 and dim[0].name == f"/results/{name}" and dim[0].is_scale
        np.testing.assert_array_equal(t.dims[n_axes][0][()], ENERGIES)
        for i, axis in enumerate(AXES[n_axes]):
            np.testing.assert_array_equal(t.dims[i][0][()], axis.values)
            assert t.dims[i][0].attrs["units"] == axis.units
        assert g["energy"].attrs["units"] == "meV"
        # Lead dims carry index scales 0..n-1; the names sit on dim 'lead'.
        np.testing.assert_array_equal(g["lead_out"][()], [0, 1])
        assert [s.decode() for s in g["lead_name"][()]] == LEADS
        assert g["lead_name"].dims[0][0].name == "/results/lead"
        # One parameter point per chunk.
        assert t.chunks == (1,) * n_axes + (ENERGIES.size, 2, 2)


@pytest.mark.parametrize("n_axes", [0, 1, 2])
def test_xarray_reads_results_group(tmp_path, n_axes):
    import xarray as xr  # a test dependency (extra "test"); h5netcdf is the engine
    path = make_file(tmp_path / "x.h5", n_axes, points=all_points(n_axes))
    with xr.open_dataset(path, engine="h5netcdf", group="results") as ds:
        axis_names = [a.name for a in AXES[n_axes]]
        # Named dims and coordinates equal to the axes, with their units, read without our code.
        assert ds["transmission"].dims == (*axis_names, "energy", "lead_out", "lead_in")
        for axis in AXES[n_axes]:
            np.testing.assert_array_equal(ds[axis.name].values, axis.values)
            assert ds[axis.name].attrs["units"] == axis.units
        np.testing.assert_array_equal(ds["energy"].values, ENERGIES)
        assert ds["energy"].attrs["units"] == "meV"
        assert "lead_name" in ds.coords and list(ds["lead_name"].values) == LEADS
        assert ds["conductance"].attrs["long_name"] == "two-terminal conductance"
        assert ds["completed"].dtype == bool and bool(ds["completed"].all())
        index = all_points(n_axes)[-1]
        np.testing.assert_array_equal(ds["transmission"].values[index], point_values(index)["transmission"])
        np.testing.assert_array_equal(ds["s_phase"].values[index], point_values(index)["s_phase"])


def test_xarray_reads_extras_group(tmp_path):
    import xarray as xr  # a test dependency (extra "test"); h5netcdf is the engine
    path = make_file(tmp_path / "xe.h5", 1)
    x = Axis("x", np.arange(3) * 5.0, "nm", "position along the wire")
    with ResultFile.open_for_resume(path, config_hash=HASH) as rf:
        rf.write_extra("/extras/ldos", (2,), "map", np.ones((ENERGIES.size, 3)), units="1/meV",
                       long_name="LDOS", dims=["energy", x])
    with xr.open_dataset(path, engine="h5netcdf", group="extras/ldos") as ds:
        # The extras group is self-contained: its own copies of the axis scales.
        assert ds["map"].dims == ("vg_plunger", "energy", "x")
        np.testing.assert_array_equal(ds["x"].values, x.values)
        assert ds["x"].attrs["units"] == "nm"
        assert float(ds["map"].sel(vg_plunger=AXES[1][0].values[2]).sum()) == ENERGIES.size * 3


# --- resume -------------------------------------------------------------------------------------


def test_resume_with_same_hash_appends(tmp_path):
    path = make_file(tmp_path / "s.h5", 2, points=[(0, 0), (3, 2)])
    with ResultFile.open_for_resume(path, config_hash=HASH) as rf:
        # The reopened file knows the sweep and what is done.
        assert rf.shape == (4, 3) and rf.axes == tuple(AXES[2]) and rf.quantities == QUANTITIES
        assert rf.completed.sum() == 2 and rf.completed[0, 0] and rf.completed[3, 2]
        rf.write_point((1, 1), point_values((1, 1)))
    data = read_result(path)
    assert data.completed.sum() == 3
    # Earlier points are kept, the new one is added.
    for index in [(0, 0), (3, 2), (1, 1)]:
        np.testing.assert_array_equal(data.quantities["transmission"][index], point_values(index)["transmission"])


def test_resume_with_other_hash_refused(tmp_path):
    path = make_file(tmp_path / "s.h5", 1, points=[(0,)])
    with pytest.raises(StoreError) as err:
        ResultFile.open_for_resume(path, config_hash="0" * 36)
    assert_one_line(err.value, str(path), "different sweep", "--overwrite", "another output path")
    # The refused file is untouched and still readable.
    assert read_result(path).completed.sum() == 1


@pytest.mark.parametrize("same_hash, fragment", [(True, "holds this sweep"), (False, "different sweep")])
def test_create_refuses_existing_file(tmp_path, same_hash, fragment):
    path = make_file(tmp_path / "o.h5", 1, points=[(0,)])
    with pytest.raises(StoreError) as err:
        make_file(path, 1, config_hash=HASH if same_hash else "other")
    assert_one_line(err.value, str(path), fragment, "overwrite=True")
    assert read_result(path).completed.sum() == 1  # the old file survives


def test_create_overwrite_replaces_file(tmp_path):
    path = make_file(tmp_path / "o.h5", 1, points=[(0,)])
    make_file(path, 2, config_hash="new", overwrite=True)
    data = read_result(path)
    # A fresh sweep: new hash, new shape, nothing completed; no temporary files left behind.
    assert data.config_hash == "new" and data.completed.shape == (4, 3) and not data.completed.any()
    assert sorted(p.name for p in tmp_path.iterdir()) == ["o.h5"]


@pytest.mark.parametrize(
    "axes, quantities, lead_names, fragment",
    [
        ([Axis("energy", [1.0], "meV", "e")], QUANTITIES, LEADS, "clashes"),
        (AXES[1], {"vg_plunger": QUANTITIES["conductance"]}, LEADS, "clashes"),
        (AXES[1], {"t": QuantitySpec(shape_tail=(("lead_out", 3),), units="1", long_name="t")}, LEADS,
         "size 3 but there are 2 leads"),
        (AXES[1], QUANTITIES, ["source", "source"], "distinct"),
        (AXES[1], {}, LEADS, "at least one"),
    ],
)
def test_create_rejects_inconsistent_sweep(tmp_path, axes, quantities, lead_names, fragment):
    with pytest.raises(StoreError) as err:
        ResultFile.create(tmp_path / "bad.h5", config_text=CONFIG, config_hash=HASH, axes=axes,
                          energies_meV=ENERGIES, lead_names=lead_names, quantities=quantities)
    assert_one_line(err.value, "bad.h5", fragment)
    assert not (tmp_path / "bad.h5").exists()


# --- extras -------------------------------------------------------------------------------------


def test_write_extra_round_trip(tmp_path):
    path = make_file(tmp_path / "x.h5", 2)
    maps = {(0, 1): np.arange(12.0).reshape(3, 4), (2, 2): -np.ones((3, 4))}
    with ResultFile.open_for_resume(path, config_hash=HASH) as rf:
        for index, array in maps.items():
            rf.write_extra("ldos", index, "map", array, units="1/meV", long_name="LDOS map", dims=["x", "y"])
            rf.write_extra("ldos", index, "n_sites", np.array([12]), units="1", long_name="sites")
            rf.write_point(index, point_values(index))
        # Later calls must match the first one's shape.
        with pytest.raises(StoreError) as err:
            rf.write_extra("ldos", (1, 1), "map", np.ones((4, 3)), units="1/meV", long_name="LDOS map")
        assert_one_line(err.value, "ldos/map", "same shape")
    data = read_result(path)
    stored = data.extras["ldos"]["map"]
    # Written maps come back at their index; others read NaN (ints: -1).
    assert stored.shape == (4, 3, 3, 4)
    for index, array in maps.items():
        np.testing.assert_array_equal(stored[index], array)
    assert np.isnan(stored[1, 1]).all()
    assert data.extras["ldos"]["n_sites"][0, 1, 0] == 12 and data.extras["ldos"]["n_sites"][1, 1, 0] == -1
    with h5py.File(path, "r") as f:
        assert f["extras/ldos/map"].attrs["units"] == "1/meV"
        assert [d.label for d in f["extras/ldos/map"].dims] == ["vg_plunger", "bfield", "x", "y"]
    validate(path)


# --- bad files ----------------------------------------------------------------------------------


def _missing(path):
    return path.parent / "nowhere.h5"


def _text(path):
    path.write_text("energy,transmission\n0.1,0.5\n")
    return path


def _empty(path):
    path.write_bytes(b"")
    return path


def _foreign_hdf5(path):
    with h5py.File(path, "w") as f:
        f["data"] = np.arange(3)
    return path


def _unknown_format(path):
    make_file(path, 1)
    with h5py.File(path, "r+") as f:
        f.attrs["format"] = "someone-elses-format"
    return path


def _future_schema(path):
    make_file(path, 1)
    with h5py.File(path, "r+") as f:
        f.attrs["schema_version"] = 7
    return path


def _truncated(path):
    # The first half of a real result file, copied to a new file.
    full = make_file(path.parent / "full.h5", 2, points=all_points(2))
    blob = full.read_bytes()
    path.write_bytes(blob[: len(blob) // 2])
    return path


def _missing_dataset(path):
    make_file(path, 1, points=[(0,)])
    with h5py.File(path, "r+") as f:
        del f["results/completed"]
    return path


def _directory(path):
    path.mkdir()
    return path


@pytest.mark.parametrize(
    "spoil, fragment",
    [
        (_missing, "no such file"),
        (_directory, "directory"),
        (_text, "not an HDF5 file"),
        (_empty, "empty file"),
        (_foreign_hdf5, "not an rgftrans result file (no 'format' attribute)"),
        (_unknown_format, "format 'someone-elses-format'"),
        (_future_schema, f"written by schema version 7; this rgftrans reads version {SCHEMA_VERSION}"),
        (_truncated, "damaged or truncated"),
        (_missing_dataset, "/results/completed is missing"),
    ],
)
@pytest.mark.parametrize("reader", [read_result, validate, summary,
                                    lambda p: ResultFile.open_for_resume(p, config_hash=HASH)],
                         ids=["read_result", "validate", "summary", "open_for_resume"])
def test_bad_file_gives_one_line_store_error(tmp_path, spoil, fragment, reader):
    path = spoil(tmp_path / "bad.h5")
    with pytest.raises(StoreError) as err:
        reader(path)
    # One line naming the file and the problem; a StoreError is an RgftransError for the CLI.
    assert_one_line(err.value, path.name, fragment)
    assert isinstance(err.value, RgftransError)


def test_validate_checks_units_of_every_dataset(tmp_path):
    path = make_file(tmp_path / "nu.h5", 1, points=[(0,)])
    with h5py.File(path, "r+") as f:
        del f["results/energy"].attrs["units"]
    read_result(path)  # reading tolerates it: the data are intact
    with pytest.raises(StoreError) as err:
        validate(path)  # validation insists on the self-description
    assert_one_line(err.value, "nu.h5", "/results/energy lacks units or long_name")


def test_closed_file_refuses_writes(tmp_path):
    rf = ResultFile.create(tmp_path / "closed.h5", config_text=CONFIG, config_hash=HASH, axes=AXES[1],
                           energies_meV=ENERGIES, lead_names=LEADS, quantities=QUANTITIES)
    rf.close()
    rf.close()  # closing twice is harmless
    with pytest.raises(StoreError) as err:
        rf.write_point((0,), point_values((0,)))
    assert_one_line(err.value, "closed.h5", "closed", "open_for_resume")


@pytest.mark.parametrize(
    "values, fragment",
    [([0.0, np.nan], "NaN or infinity"), ([], "non-empty 1D"), ([[0.0, 1.0]], "non-empty 1D"), (["a"], "real numbers")],
)
def test_axis_rejects_bad_values(values, fragment):
    with pytest.raises(StoreError) as err:
        Axis("vg", values, "V", "gate voltage")
    assert_one_line(err.value, "axis 'vg'", fragment)


# --- summary ------------------------------------------------------------------------------------


def test_summary_lists_axes_quantities_and_progress(tmp_path):
    path = make_file(tmp_path / "s.h5", 2, points=[(0, 0), (1, 0), (2, 2)])
    text = summary(path)
    # Multi-line, with ranges and units of every axis, quantity shapes, n/N completed and provenance.
    assert len(text.splitlines()) > 8
    assert "vg_plunger" in text and "-0.3 .. 0.1 V" in text
    assert "bfield" in text and "0 .. 1 T" in text
    assert "energy" in text and "0.5 .. 2.5 meV" in text
    assert "(4, 3, 7, 2, 2)" in text and "lead_out" in text
    assert "completed: 3/12" in text
    assert HASH in text and f"rgftrans {__version__}" in text and "source, drain" in text


@pytest.mark.skipif(os.environ.get("HDF5_USE_FILE_LOCKING", "").upper() == "FALSE", reason="HDF5 file locking off")
def test_readers_work_while_a_writer_holds_the_file_and_a_second_writer_is_refused(tmp_path):
    path = make_file(tmp_path / "running.h5", 1, points=[(0,)])
    # Another process holds the write lock and the file open for writing, as a running sweep does.
    holder = subprocess.Popen(
        [sys.executable, "-c", "import h5py, sys; from rgftrans.io.store import OutputLock; "
         "lock = OutputLock(sys.argv[1]).__enter__(); f = h5py.File(sys.argv[1], 'r+'); print('open', flush=True); "
         "sys.stdin.read()", str(path)],
        stdin=subprocess.PIPE, stdout=subprocess.PIPE, text=True,
    )
    try:
        assert holder.stdout.readline().strip() == "open"
        text = summary(path)  # readers keep working
        data = read_result(path)
        with pytest.raises(StoreError) as err:
            with OutputLock(path):
                pass
    finally:
        holder.communicate("", timeout=30)
    assert f"being written now by PID {holder.pid} on host" in text
    assert data.completed[0] and not data.completed[1]
    assert_one_line(err.value, "running.h5", f"is being written by PID {holder.pid}", "wait for that run")
    with OutputLock(path):  # the writer exited: the kernel released its lock, nothing stale remains
        assert lock_owner(path) is None  # held by this process, which is no other writer
    assert lock_owner(path) is None


def test_info_prints_no_terminal_control_characters(tmp_path):
    axis = Axis("vg", [0.0, 1.0], "V\x1b[2J", "gate \x1b]0;pwned\x07 voltage")
    path = make_file(tmp_path / "esc.h5", 0, points=all_points(0))
    with ResultFile.create(tmp_path / "esc2.h5", config_text=CONFIG, config_hash=HASH, axes=[axis],
                           energies_meV=ENERGIES, lead_names=["s\x1b[31m", "d"], quantities=QUANTITIES,
                           attrs={"note": "bell\x07"}):
        pass
    for p in (path, tmp_path / "esc2.h5"):
        text = summary(p)
        assert not any(ord(c) < 32 and c != "\n" or ord(c) == 127 for c in text), repr(text)
    assert "\\x1b[2J" in summary(tmp_path / "esc2.h5")


# --- integrity: checksums -----------------------------------------------------------------------


def _flip_byte_in_chunk(path, dataset, chunk=0, at=5):
    """Flip one byte inside the stored bytes of a dataset's chunk (as a disk error would)."""
    with h5py.File(path, "r") as f:
        info = f[dataset].id.get_chunk_info(chunk)
    with open(path, "r+b") as fh:
        fh.seek(info.byte_offset + at)
        byte = fh.read(1)
        fh.seek(info.byte_offset + at)
        fh.write(bytes([byte[0] ^ 0x5A]))


@pytest.mark.parametrize("dataset", ["results/transmission", "results/conductance", "results/vg_plunger",
                                     "results/completed"])
def test_flipped_byte_in_stored_data_is_reported_not_returned(tmp_path, dataset):
    """Fletcher-32 on every chunked dataset: a damaged byte gives the one-line 'damaged' error, never numbers."""
    path = make_file(tmp_path / "c.h5", 1, points=all_points(1))
    read_result(path)  # intact: reads fine
    _flip_byte_in_chunk(path, dataset, at=1)
    with pytest.raises(StoreError) as err:
        read_result(path)
    assert_one_line(err.value, "damaged")
    with pytest.raises(StoreError):
        validate(path)


def test_damaged_config_text_is_reported(tmp_path):
    path = make_file(tmp_path / "t.h5", 0, points=all_points(0))
    with h5py.File(path, "r+") as f:
        del f["config"]
        f.create_dataset("config", data=CONFIG.replace("dot", "dog"), dtype=h5py.string_dtype("utf-8"))
    with pytest.raises(StoreError) as err:
        read_result(path)
    assert_one_line(err.value, "config text does not match its checksum")
