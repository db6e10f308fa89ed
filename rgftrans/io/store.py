"""The result file: one self-describing HDF5 file per sweep.

* :class:`ResultFile` — the writer, used by the driving process only (workers
  compute and hand arrays back; they never open the file):
  :meth:`ResultFile.create` lays out an empty file, :meth:`ResultFile.open_for_resume`
  reopens an interrupted sweep, :meth:`ResultFile.write_point` stores one
  parameter point and marks it completed;
* :func:`read_result` loads a file into a :class:`ResultData`;
* :func:`validate` checks a file and raises :class:`StoreError` with one line;
* :func:`summary` is the human description shown by ``rgftrans info``.
* :func:`write_group` writes a named group of other modules (dark-state
  searches, trace fits) into an rgftrans file or a new file of its own, and
  :func:`write_file` a whole file of another kind (the waveguide run): with
  :func:`ResultFile.create` the package's only ways to write HDF5 (besides the
  sweep driver).  One policy: an existing group or file is refused unless
  ``overwrite``; foreign files and files a running sweep holds are never written.

Layout (schema version 2)
-------------------------
::

    /                       attrs: format="rgftrans-result", schema_version, created, config_hash, plus
                            the writer's own scalar attributes (e.g. spin_degeneracy, fermi_energy_meV)
    ├── config              scalar UTF-8 string, the TOML text of the sweep
    ├── provenance/         attrs: rgftrans, numpy, scipy, numba, h5py, hdf5, python, hostname, platform
    ├── results/            attrs: parameter_axes, quantities (space-separated names), coordinates="lead_name"
    │   ├── <axis> ...      (n_axis,) float64, dimension scale, one per parameter axis
    │   ├── energy          (n_E,) float64 meV, dimension scale, always the last sweep axis
    │   ├── lead            (n_leads,) int64 lead index, dimension scale
    │   ├── lead_name       (n_leads,) UTF-8 string on dim ``lead``
    │   ├── <tail dim> ...  (size,) int64 index, dimension scale (e.g. lead_out, lead_in), or the
    │   │                   dimension's own values with units (e.g. temperature in K), listed in
    │   │                   the attribute ``tail_coordinates`` of /results
    │   ├── <quantity> ...  (*axis sizes, n_E, *tail sizes), one parameter point per chunk,
    │   │                   NaN (floats, complex) or -1 (ints) until written
    │   └── completed       (*axis sizes,) bool, False until the point is written
    └── extras/<group>/     optional per-point arrays (e.g. extras/ldos), self-contained:
        ├── <axis> ...      copies of the parameter axis scales
        ├── <dim> ...       scales of the extra's own dims (energy, coordinates or indices)
        └── <name> ...      (*axis sizes, *array shape), one parameter point per chunk

Every dataset carries ``units`` (CF style: ``"1"`` dimensionless, ``""`` for
text) and ``long_name`` attributes, and every dimension of every array has a
dimension scale with the dimension's name, so plain h5py and xarray
(``xr.open_dataset(path, engine="h5netcdf", group="results")``) see named
dimensions and coordinates without this module.

Lead dimensions: a quantity's trailing dimension named ``lead`` or
``lead_<something>`` (``lead_out``, ``lead_in``) counts leads; its size must
equal the number of leads and its index scale points into ``lead_name``.

Integrity: every array of more than one element is stored in chunks with
HDF5's Fletcher-32 checksum filter, so a byte damaged on disk is reported when
it is read (one-line "damaged" error) instead of handing back wrong numbers;
the config text carries its SHA-256 (root attribute ``config_sha256``).

Crash safety: :meth:`ResultFile.write_point` writes and flushes the data, then
sets and flushes the ``completed`` flag, so an interrupted point is recomputed
on resume rather than trusted.  HDF5 keeps no journal: a kill in the middle of
a flush can still damage the file, which :func:`validate` then reports.  The
empty layout is built under a temporary name and renamed into place, so an
interrupted ``create`` leaves no half-built file at the output path.
"""

from __future__ import annotations

import hashlib
import operator
import os
import platform
import re
import socket
from contextlib import contextmanager, nullcontext
from dataclasses import dataclass, field
from datetime import datetime, timezone
from importlib import metadata
from pathlib import Path
from typing import Mapping, Sequence

import h5py
import numpy as np

from rgftrans import __version__
from rgftrans.errors import StoreError


__all__ = ["FORMAT_NAME", "GROUPS_FORMAT", "SCHEMA_VERSION", "Axis", "QuantitySpec", "ResultData", "ResultFile",
           "StoredArray", "StoredGroup", "OutputLock", "check_file_writable", "check_group_writable", "dataset_name", "is_own_file",
           "lock_owner", "printable", "read_result", "summary", "validate", "write_file", "write_group"]


def dataset_name(parameter: str) -> str:
    """HDF5 name of a sweep axis: the parameter path with '.' as '__' and '-' as '_'.

    ``gates.plunger.voltage_V`` is stored as ``gates__plunger__voltage_V``.  Two
    parameters that map to one name (gates ``a-b`` and ``a_b``) are refused by the
    config before a run.
    """
    return parameter.replace(".", "__").replace("-", "_")


#: Value of the root ``format`` attribute that marks a file as ours.
FORMAT_NAME = "rgftrans-result"
#: Layout version written by this module; files of any other version are refused.
SCHEMA_VERSION = 2  # 2: writer attributes (spin degeneracy) and valued trailing dimensions

#: Name, units and long name of the energy axis, always the last sweep axis.
ENERGY_NAME = "energy"
ENERGY_UNITS = "meV"
#: Group holding axes, quantities and the completed mask; group of the per-point extras.
RESULTS_GROUP = "results"
EXTRAS_GROUP = "extras"
#: Names of the lead index scale and of the string dataset of lead names on it.
LEAD_DIM = "lead"
LEAD_NAME = "lead_name"
COMPLETED = "completed"
#: Names a user axis, dimension, quantity or extra may not take.
_RESERVED = frozenset({ENERGY_NAME, LEAD_DIM, LEAD_NAME, COMPLETED})
#: Root attributes the layout itself writes; the writer's own attributes may not take these names.
_ROOT_ATTRS = frozenset({"format", "schema_version", "created", "config_hash", "config_sha256"})
#: Identifiers: usable as HDF5 names, netCDF dimensions and xarray attribute access.
_NAME_RE = re.compile(r"^[A-Za-z][A-Za-z0-9_]*$")
#: Units of dimensionless numbers (CF convention) and of text.
_UNITLESS = "1"
_TEXT_UNITS = ""
#: The fix every "damaged file" message ends with.
_DAMAGED_FIX = "restore a copy, or compute it again with 'rgftrans run CONFIG --overwrite'"
#: Packages whose versions go into /provenance (read from metadata: numba is not imported).
_PROVENANCE_PACKAGES = ("numpy", "scipy", "numba", "h5py")


# --- specifications ------------------------------------------------------------------------


def _check_name(name, what: str) -> str:
    if not isinstance(name, str) or not _NAME_RE.match(name):
        raise StoreError(
            f"{what} name {name!r} is not usable; use a letter followed by letters, digits or underscores"
        )
    return name


def _check_text(value, what: str) -> str:
    if not isinstance(value, str):
        raise StoreError(f"{what} must be a str, got {type(value).__name__}; pass a string")
    return value


@dataclass(frozen=True, eq=False)
class Axis:
    """One axis with values and units: a sweep parameter, or the values of a trailing dimension.

    The one axis type of the package: the run config's sweep axes
    (:meth:`rgftrans.io.config.RunConfig.axes`) are these, stored as they are.
    The energy axis of a result is handled separately, always last.

    Attributes
    ----------
    name : str
        Dimension name, an identifier (``gates__plunger__voltage_V``); not ``energy``.
    values : (n,) float ndarray
        Finite axis values, stored read-only as float64.
    units : str
        Units of the values (``"V"``, ``"T"``; ``"1"`` when dimensionless).
    long_name : str
        Human description (``"plunger gate voltage"``).
    parameter : str
        The config path the axis sweeps (``gates.plunger.voltage_V``; then ``name``
        is ``dataset_name(parameter)``), or ``""`` for an axis of no config
        parameter.  Stored as the axis dataset's ``parameter`` attribute.
    """

    name: str
    values: np.ndarray
    units: str
    long_name: str
    parameter: str = ""

    @classmethod
    def of_parameter(cls, parameter: str, values, units: str, long_name: str) -> "Axis":
        """The axis sweeping config path ``parameter``, named ``dataset_name(parameter)``."""
        _check_text(parameter, "parameter of an axis")
        return cls(dataset_name(parameter), values, units, long_name, parameter)

    def __post_init__(self):
        _check_name(self.name, "axis")
        _check_text(self.units, f"units of axis {self.name!r}")
        _check_text(self.long_name, f"long_name of axis {self.name!r}")
        _check_text(self.parameter, f"parameter of axis {self.name!r}")
        if self.parameter and dataset_name(self.parameter) != self.name:
            raise StoreError(f"axis {self.name!r} sweeps parameter {self.parameter!r}, which is stored as "
                             f"{dataset_name(self.parameter)!r}; build it with Axis.of_parameter")
        try:
            values = np.array(self.values, dtype=np.float64)
        except (TypeError, ValueError) as exc:
            raise StoreError(
                f"axis {self.name!r}: values must be real numbers ({exc}); pass a 1D float array"
            ) from exc
        if values.ndim != 1 or values.size == 0:
            raise StoreError(f"axis {self.name!r}: values have shape {values.shape}; pass a non-empty 1D array")
        if not np.all(np.isfinite(values)):
            raise StoreError(f"axis {self.name!r}: values contain NaN or infinity; pass finite values")
        values.setflags(write=False)
        object.__setattr__(self, "values", values)

    def __eq__(self, other):
        if not isinstance(other, Axis):
            return NotImplemented
        return (
            (self.name, self.units, self.long_name, self.parameter)
            == (other.name, other.units, other.long_name, other.parameter)
            and np.array_equal(self.values, other.values)
        )

    __hash__ = None  # holds an array: equal by value, not hashable

    @property
    def size(self) -> int:
        return self.values.size


@dataclass(frozen=True, kw_only=True)
class QuantitySpec:
    """What one stored quantity looks like at one parameter point: ``(n_E, *tail)``.

    Attributes
    ----------
    shape_tail : tuple of (str, int)
        Names and sizes of the dimensions after the energy, e.g.
        ``(("lead_out", 2), ("lead_in", 2))`` for a transmission matrix; ``()``
        for a scalar per energy.
    dtype : numpy dtype
        Floating, complex or signed integer (unwritten entries read NaN or -1).
    units, long_name : str
        Written as the dataset's attributes.
    """

    shape_tail: tuple = ()
    dtype: np.dtype = np.dtype(np.float64)
    units: str
    long_name: str

    def __post_init__(self):
        _check_text(self.units, "units of a quantity")
        _check_text(self.long_name, "long_name of a quantity")
        try:
            tail = tuple((str(dim), int(size)) for dim, size in self.shape_tail)
        except (TypeError, ValueError) as exc:
            raise StoreError(
                f"shape_tail {self.shape_tail!r} is malformed; pass a tuple of (name, size) pairs"
            ) from exc
        for dim, size in tail:
            _check_name(dim, "dimension")
            if size < 1:
                raise StoreError(f"dimension {dim!r} has size {size}; dimensions need at least one entry")
        try:
            dtype = np.dtype(self.dtype)
        except TypeError as exc:
            raise StoreError(f"dtype {self.dtype!r} is not a numpy dtype; pass e.g. 'float64'") from exc
        if dtype.kind not in "fci":
            raise StoreError(
                f"dtype {dtype} cannot be stored with a missing-value marker; "
                f"use a float, complex or signed int dtype"
            )
        object.__setattr__(self, "shape_tail", tail)
        object.__setattr__(self, "dtype", dtype)

    @property
    def tail_shape(self) -> tuple[int, ...]:
        return tuple(size for _, size in self.shape_tail)


def _is_lead_dim(dim: str) -> bool:
    return dim == LEAD_DIM or dim.startswith(LEAD_DIM + "_")


def _fill_value(dtype: np.dtype):
    if dtype.kind == "i":
        return -1
    if dtype.kind == "c":
        return complex(np.nan, np.nan)
    return np.nan


# --- the layout, as found in a file ----------------------------------------------------------


@dataclass(frozen=True, eq=False)
class _Layout:
    axes: tuple
    energies_meV: np.ndarray
    lead_names: tuple
    specs: dict
    extras: dict  # group -> tuple of dataset names
    config_hash: str
    coordinates: dict  # trailing dimension name -> Axis of its values

    @property
    def shape(self) -> tuple[int, ...]:
        return tuple(axis.size for axis in self.axes)


def _attr_text(obj, key: str):
    value = obj.attrs.get(key)
    if isinstance(value, bytes):
        return value.decode("utf-8", "replace")
    if isinstance(value, np.ndarray) and value.shape == ():
        value = value[()]
    return value if isinstance(value, str) else None


def _rebuilt(path, cls, *args, **kwargs):
    """``cls(*args, **kwargs)`` from file content; a rejection means the file is damaged."""
    try:
        return cls(*args, **kwargs)
    except StoreError as exc:
        reason = str(exc).split(";")[0]
        raise StoreError(f"{path}: damaged rgftrans result file ({reason}); {_DAMAGED_FIX}") from None


def _read_layout(f: h5py.File, path) -> _Layout:
    """Check that ``f`` is one of our files of this schema and return what it holds."""
    fmt = _attr_text(f, "format")
    if fmt != FORMAT_NAME:
        found = "no 'format' attribute" if fmt is None else f"format {fmt!r}"
        raise StoreError(f"{path}: not an rgftrans result file ({found}); pass a file written by an rgftrans sweep")
    version = f.attrs.get("schema_version")
    try:
        version = int(version)
    except (TypeError, ValueError):
        raise StoreError(
            f"{path}: damaged rgftrans result file, schema_version is {version!r}; {_DAMAGED_FIX}"
        ) from None
    if version != SCHEMA_VERSION:
        newer = "upgrade rgftrans" if version > SCHEMA_VERSION else "read it with an older rgftrans"
        raise StoreError(
            f"{path}: written by schema version {version}; this rgftrans reads version {SCHEMA_VERSION}; "
            f"{newer} or rerun the sweep"
        )

    def missing(what: str):
        return StoreError(f"{path}: damaged rgftrans result file, {what} is missing; {_DAMAGED_FIX}")

    for key in ("created", "config_hash"):
        if _attr_text(f, key) is None:
            raise missing(f"root attribute {key!r}")
    for name in ("config", "provenance", RESULTS_GROUP):
        if name not in f:
            raise missing(f"/{name}")
    text = f["config"][()]
    text = text if isinstance(text, bytes) else str(text).encode("utf-8")
    if _attr_text(f, "config_sha256") != hashlib.sha256(text).hexdigest():
        raise StoreError(f"{path}: damaged rgftrans result file, the stored config text does not match its "
                         f"checksum; {_DAMAGED_FIX}")
    g = f[RESULTS_GROUP]
    axis_names = _attr_text(g, "parameter_axes")
    quantity_names = _attr_text(g, "quantities")
    if axis_names is None or quantity_names is None:
        raise missing("attribute 'parameter_axes' or 'quantities' of /results")
    axis_names, quantity_names = axis_names.split(), quantity_names.split()
    for name in [*axis_names, ENERGY_NAME, LEAD_NAME, COMPLETED, *quantity_names]:
        if name not in g or not isinstance(g[name], h5py.Dataset):
            raise missing(f"dataset /{RESULTS_GROUP}/{name}")

    def text(ds, key):
        return _attr_text(ds, key) or ""
    axes = tuple(
        _rebuilt(path, Axis, name, g[name][()], text(g[name], "units"), text(g[name], "long_name"),
                 text(g[name], "parameter"))
        for name in axis_names
    )
    energies = np.asarray(g[ENERGY_NAME][()], dtype=np.float64)
    lead_names = tuple(s.decode() if isinstance(s, bytes) else str(s) for s in g[LEAD_NAME][()])
    shape = tuple(axis.size for axis in axes)
    if g[COMPLETED].shape != shape:
        raise StoreError(
            f"{path}: damaged rgftrans result file, /results/completed has shape {g[COMPLETED].shape}, "
            f"expected {shape}; {_DAMAGED_FIX}"
        )
    specs = {}
    for name in quantity_names:
        ds = g[name]
        n_lead = len(shape) + 1
        dims = tuple(dim.label for dim in ds.dims)
        if ds.shape[:n_lead] != (*shape, energies.size) or len(dims) != ds.ndim:
            raise StoreError(
                f"{path}: damaged rgftrans result file, /results/{name} has shape {ds.shape}, "
                f"expected {(*shape, energies.size)} first; {_DAMAGED_FIX}"
            )
        specs[name] = _rebuilt(path, QuantitySpec, shape_tail=tuple(zip(dims[n_lead:], ds.shape[n_lead:])),
                               dtype=ds.dtype, units=text(ds, "units"), long_name=text(ds, "long_name"))
    coordinates = {}
    for name in (_attr_text(g, "tail_coordinates") or "").split():
        if name not in g or not isinstance(g[name], h5py.Dataset):
            raise missing(f"dataset /{RESULTS_GROUP}/{name} (values of a trailing dimension)")
        coordinates[name] = _rebuilt(path, Axis, name, g[name][()], text(g[name], "units"),
                                     text(g[name], "long_name"))
    extras = {}
    if EXTRAS_GROUP in f:
        for group_name, grp in f[EXTRAS_GROUP].items():
            names = _attr_text(grp, "extras")
            extras[group_name] = tuple(names.split()) if names else ()
            for name in extras[group_name]:
                if name not in grp or grp[name].shape[: len(shape)] != shape:
                    raise missing(f"extra /{EXTRAS_GROUP}/{group_name}/{name} (or it has the wrong shape)")
    return _Layout(axes, energies, lead_names, specs, extras, _attr_text(f, "config_hash"), coordinates)


def _one_line(exc: BaseException) -> str:
    return " ".join(str(exc).split()) or type(exc).__name__


# --- the writer's lock --------------------------------------------------------------------------


#: Lock files held by this process (its own reads must not take its own lock for another writer's).
_HELD_LOCKS: set = set()


class OutputLock:
    """Exclusive right to write one result file: ``<file>.lock`` beside it, held with ``flock``.

    The lock file records the owner (host, PID, start time).  The kernel drops
    the lock when the owner exits, however it exits, so a crashed run never
    leaves a stale lock; the file that remains is harmless.  Readers take no
    lock.  Use as a context manager.
    """

    def __init__(self, path):
        self.path = Path(path)
        self.lock_path = self.path.with_name(self.path.name + ".lock")
        self._fd = None

    def __enter__(self):
        import fcntl

        while True:
            fd = os.open(self.lock_path, os.O_RDWR | os.O_CREAT, 0o644)
            try:
                fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
            except OSError:
                os.close(fd)
                raise StoreError(f"{self.path}: is being written by {lock_owner(self.path) or 'another run'}; "
                                 "wait for that run to finish, or choose another output path") from None
            # The lock file may have been replaced between open and flock: then lock the new one.
            if os.path.exists(self.lock_path) and os.stat(self.lock_path).st_ino == os.fstat(fd).st_ino:
                break
            os.close(fd)
        started = datetime.now(timezone.utc).isoformat(timespec="seconds")
        os.ftruncate(fd, 0)
        os.write(fd, f"rgftrans run, PID {os.getpid()} on host {socket.gethostname()}, started {started}\n"
                 .encode())
        self._fd = fd
        _HELD_LOCKS.add(os.path.abspath(self.lock_path))
        return self

    def __exit__(self, *exc):
        if self._fd is not None:
            _HELD_LOCKS.discard(os.path.abspath(self.lock_path))
            os.close(self._fd)  # releases the lock
            self._fd = None


def lock_owner(path) -> str | None:
    """Who holds the write lock of a result file (``"PID ... on host ..."``), or None if nobody does."""
    import fcntl

    lock_path = Path(path).with_name(Path(path).name + ".lock")
    if os.path.abspath(lock_path) in _HELD_LOCKS:
        return None  # held by this process: not another writer
    try:
        fd = os.open(lock_path, os.O_RDONLY)
    except OSError:
        return None
    try:
        try:
            fcntl.flock(fd, fcntl.LOCK_SH | fcntl.LOCK_NB)
        except OSError:
            text = os.read(fd, 4096).decode("utf-8", "replace").strip()
            return printable(text.removeprefix("rgftrans run, ")) or "another run"
        fcntl.flock(fd, fcntl.LOCK_UN)
        return None
    finally:
        os.close(fd)


def printable(text: str) -> str:
    """``text`` with terminal control characters (and other non-printables) shown as ``\\xNN`` escapes."""
    return "".join(ch if ch.isprintable() or ch == " " else f"\\x{ord(ch):02x}" for ch in str(text))


def _open_h5(path: Path, mode: str) -> h5py.File:
    """Open an existing file, turning every way it can fail into one StoreError line.

    Read-only opens skip HDF5's own file locking, so ``info`` and ``plot`` work
    while a sweep writes the file (what they read is guarded by ``completed``).
    """
    if not path.exists():
        raise StoreError(f"{path}: no such file; check the path (run a sweep to create it)")
    if path.is_dir():
        raise StoreError(f"{path}: is a directory, not a result file; pass the path of an .h5 file")
    if path.stat().st_size == 0:
        raise StoreError(f"{path}: empty file (0 bytes), not an rgftrans result file; rerun the sweep")
    if not h5py.is_hdf5(path):
        raise StoreError(f"{path}: not an HDF5 file; pass a result file written by an rgftrans sweep")
    try:
        return h5py.File(path, mode, locking=False) if mode == "r" else h5py.File(path, mode)
    except OSError as exc:
        reason = _one_line(exc)
        owner = lock_owner(path)
        if owner:
            raise StoreError(f"{path}: is being written by {owner} and could not be read just now ({reason}); "
                             "try again in a moment") from exc
        if "unable to lock file" in reason.lower():
            raise StoreError(
                f"{path}: locked by another process (a sweep still writing it?) ({reason}); "
                f"wait for it to finish or read a copy"
            ) from exc
        raise StoreError(f"{path}: damaged or truncated HDF5 file ({reason}); {_DAMAGED_FIX}") from exc


#: What h5py raises when it meets damaged content (bad object headers, missing links, odd types, a failed
#: Fletcher-32 checksum, a damaged heap).
_READ_ERRORS = (OSError, KeyError, TypeError, RuntimeError, ValueError)


def _damaged(path, exc: BaseException) -> StoreError:
    return StoreError(f"{path}: damaged rgftrans result file ({_one_line(exc)}); {_DAMAGED_FIX}")


@contextmanager
def _reading(path):
    """Open ``path`` read-only and check its layout; every failure inside becomes one StoreError line."""
    path = Path(path)
    with _open_h5(path, "r") as f:
        try:
            yield f, _read_layout(f, path)
        except StoreError:
            raise
        except _READ_ERRORS as exc:
            owner = lock_owner(path)
            if owner:  # a write in progress, not damage
                raise StoreError(f"{path}: is being written by {owner} and could not be read just now "
                                 f"({_one_line(exc)}); try again in a moment") from exc
            raise _damaged(path, exc) from exc


# --- writing ---------------------------------------------------------------------------------


def _annotate(ds, units: str, long_name: str):
    ds.attrs["units"] = units
    ds.attrs["long_name"] = long_name


def _scale(group, name: str, values, units: str, long_name: str):
    """Create (or reuse, if equal) a 1D dimension-scale dataset ``name`` in ``group``."""
    values = np.asarray(values)
    if name in group:
        ds = group[name]
        if ds.shape != values.shape or not np.array_equal(ds[()], values):
            raise StoreError(
                f"{group.file.filename}: dimension {name!r} already exists in {group.name} with other "
                f"values ({ds.shape[0]} entries, now {values.size}); give the dimension another name"
            )
        return ds
    ds = group.create_dataset(name, data=values, **_checksummed(values.shape))
    ds.make_scale(name)
    _annotate(ds, units, long_name)
    return ds


def _index_scale(group, name: str, size: int):
    long_name = f"{name} index" + (f" (into {LEAD_NAME})" if _is_lead_dim(name) else "")
    return _scale(group, name, np.arange(size, dtype=np.int64), _UNITLESS, long_name)


def _attach(ds, scales):
    for i, scale in enumerate(scales):
        ds.dims[i].attach_scale(scale)
        ds.dims[i].label = scale.name.rsplit("/", 1)[-1]


def _point_chunks(n_axes: int, point_shape: tuple[int, ...]):
    """Chunk shape of one parameter point; None (contiguous) for scalar datasets."""
    chunks = (1,) * n_axes + tuple(point_shape)
    return chunks or None


def _checksummed(shape, chunks=None) -> dict:
    """Dataset options for Fletcher-32 checksums: chunked storage (scalars cannot be chunked, so go without)."""
    if not shape:
        return {}
    return {"chunks": chunks or True, "fletcher32": True}


def _provenance() -> dict[str, str]:
    info = {"rgftrans": __version__}
    for package in _PROVENANCE_PACKAGES:
        try:
            info[package] = metadata.version(package)
        except metadata.PackageNotFoundError:
            info[package] = "not installed"
    info["hdf5"] = h5py.version.hdf5_version
    info["python"] = platform.python_version()
    info["hostname"] = socket.gethostname()
    info["platform"] = platform.platform()
    return info


def _check_attrs(attrs) -> dict:
    """The writer's own root attributes: identifiers mapped to a str, bool, int or finite float."""
    out = {}
    for key, value in dict(attrs or {}).items():
        _check_name(key, "attribute")
        if key in _ROOT_ATTRS:
            raise StoreError(f"attribute {key!r} is written by the file layout itself; choose another name")
        if isinstance(value, (bool, np.bool_)):
            value = bool(value)
        elif isinstance(value, (int, np.integer)):
            value = np.int64(value)
        elif isinstance(value, (float, np.floating)):
            value = float(value)  # NaN allowed: "not known"
        elif not isinstance(value, str):
            raise StoreError(f"attribute {key!r} = {value!r} must be a str, bool, int or float")
        out[key] = value
    return out


def _check_coordinates(coordinates, tail_sizes) -> dict:
    """Values of trailing dimensions: each an Axis named like the dimension and of its size."""
    out = {}
    for dim, axis in dict(coordinates or {}).items():
        if not isinstance(axis, Axis) or axis.name != dim:
            raise StoreError(f"coordinates[{dim!r}] must be an Axis named {dim!r}; wrap the values in store.Axis")
        if dim not in tail_sizes:
            raise StoreError(f"coordinates name a dimension {dim!r} no quantity has; drop it or add the quantity")
        if _is_lead_dim(dim):
            raise StoreError(f"dimension {dim!r} counts leads and takes no values; drop it from coordinates")
        if axis.size != tail_sizes[dim]:
            raise StoreError(f"coordinates[{dim!r}] has {axis.size} values but the dimension has size "
                             f"{tail_sizes[dim]}; give one value per entry")
        out[dim] = axis
    return out


def _check_sweep(axes, energies_meV, lead_names, quantities):
    axes = list(axes)
    for axis in axes:
        if not isinstance(axis, Axis):
            raise StoreError(f"axes must be Axis objects, got {type(axis).__name__}; wrap them in store.Axis")
    energies = np.array(energies_meV, dtype=np.float64)
    if energies.ndim != 1 or energies.size == 0 or not np.all(np.isfinite(energies)):
        raise StoreError(
            f"energies_meV must be a non-empty 1D array of finite values, got shape {energies.shape}; "
            f"fix the energy grid"
        )
    lead_names = tuple(lead_names)
    names_ok = all(isinstance(n, str) and n for n in lead_names) and len(set(lead_names)) == len(lead_names)
    if not lead_names or not names_ok:
        raise StoreError(f"lead_names {list(lead_names)!r} must be distinct non-empty strings; name every lead once")
    if not quantities:
        raise StoreError("quantities is empty; give at least one QuantitySpec to store")
    used: dict[str, str] = {}

    def claim(name: str, what: str):
        if name in _RESERVED or name in used:
            taken = used.get(name, "reserved by the file layout")
            raise StoreError(f"{what} name {name!r} clashes with {taken}; rename it")
        used[name] = what

    for axis in axes:
        claim(axis.name, "axis")
    tail_sizes: dict[str, int] = {}
    for qname, spec in quantities.items():
        _check_name(qname, "quantity")
        if not isinstance(spec, QuantitySpec):
            raise StoreError(f"quantity {qname!r}: expected a QuantitySpec, got {type(spec).__name__}")
        claim(qname, "quantity")
        for dim, size in spec.shape_tail:
            if _is_lead_dim(dim) and size != len(lead_names):
                raise StoreError(
                    f"quantity {qname!r}: lead dimension {dim!r} has size {size} but there are "
                    f"{len(lead_names)} leads; make it {len(lead_names)} or rename the dimension"
                )
            if tail_sizes.setdefault(dim, size) != size:
                raise StoreError(
                    f"quantity {qname!r}: dimension {dim!r} has size {size}, another quantity gives it "
                    f"{tail_sizes[dim]}; use one size or two names"
                )
    for dim in tail_sizes:
        if dim != LEAD_DIM and (dim in _RESERVED or dim in used):
            raise StoreError(f"dimension name {dim!r} clashes with {used.get(dim, 'the file layout')}; rename it")
    return axes, energies, lead_names, tail_sizes


def _build(path: Path, *, config_text, config_hash, axes, energies, lead_names, quantities, tail_sizes,
           attrs, coordinates):
    with h5py.File(path, "w") as f:
        f.attrs["format"] = FORMAT_NAME
        f.attrs["schema_version"] = np.int64(SCHEMA_VERSION)
        f.attrs["created"] = datetime.now(timezone.utc).isoformat(timespec="seconds")
        f.attrs["config_hash"] = config_hash
        f.attrs["config_sha256"] = hashlib.sha256(config_text.encode("utf-8")).hexdigest()
        for key, value in attrs.items():
            f.attrs[key] = value
        cfg = f.create_dataset("config", data=config_text, dtype=h5py.string_dtype("utf-8"))
        _annotate(cfg, _TEXT_UNITS, "sweep configuration (TOML)")
        cfg.attrs["media_type"] = "application/toml"
        prov = f.create_group("provenance")
        for key, value in _provenance().items():
            prov.attrs[key] = value

        g = f.create_group(RESULTS_GROUP)
        g.attrs["parameter_axes"] = " ".join(axis.name for axis in axes)
        g.attrs["quantities"] = " ".join(quantities)
        g.attrs["coordinates"] = LEAD_NAME  # xarray: lead_name is a coordinate, not a data variable
        axis_scales = [_scale(g, a.name, a.values, a.units, a.long_name) for a in axes]
        for scale, axis in zip(axis_scales, axes):
            if axis.parameter:
                scale.attrs["parameter"] = axis.parameter
        energy = _scale(g, ENERGY_NAME, energies, ENERGY_UNITS, "energy")
        lead = _index_scale(g, LEAD_DIM, len(lead_names))
        # (variable-length strings take no filters: the lead names go without a checksum)
        names = g.create_dataset(LEAD_NAME, data=list(lead_names), dtype=h5py.string_dtype("utf-8"))
        _annotate(names, _TEXT_UNITS, "lead name")
        _attach(names, [lead])
        tail_scales = {dim: (_scale(g, dim, coordinates[dim].values, coordinates[dim].units,
                                    coordinates[dim].long_name) if dim in coordinates else _index_scale(g, dim, size))
                       for dim, size in tail_sizes.items()}
        g.attrs["tail_coordinates"] = " ".join(coordinates)

        shape = tuple(axis.size for axis in axes)
        for qname, spec in quantities.items():
            point = (energies.size, *spec.tail_shape)
            ds = g.create_dataset(qname, shape=(*shape, *point), dtype=spec.dtype, fillvalue=_fill_value(spec.dtype),
                                  **_checksummed((*shape, *point), _point_chunks(len(shape), point)))
            _annotate(ds, spec.units, spec.long_name)
            _attach(ds, [*axis_scales, energy, *(tail_scales[d] for d, _ in spec.shape_tail)])
        done = g.create_dataset(COMPLETED, shape=shape, dtype=bool, fillvalue=False, **_checksummed(shape))
        _annotate(done, _UNITLESS, "parameter point written (all quantities stored)")
        _attach(done, axis_scales)


class ResultFile:
    """The open result file of a running sweep; the driving process is its only writer.

    Make one with :meth:`create` or :meth:`open_for_resume`; use it as a context
    manager or call :meth:`close`.

    Attributes
    ----------
    path : pathlib.Path
    axes : tuple of Axis
        Parameter axes (outer); ``shape`` gives their sizes.
    energies_meV : (n_E,) float ndarray, meV
    lead_names : tuple of str
    quantities : dict of str to QuantitySpec
    config_hash : str
    """

    def __init__(self, f: h5py.File, path: Path):
        """Internal: wrap an open h5py file; use :meth:`create` or :meth:`open_for_resume`."""
        try:
            layout = _read_layout(f, path)
        except StoreError:
            f.close()
            raise
        except _READ_ERRORS as exc:
            f.close()
            raise _damaged(path, exc) from exc
        self._f = f
        self.path = path
        self.axes = layout.axes
        self.energies_meV = layout.energies_meV
        self.lead_names = layout.lead_names
        self.quantities = layout.specs
        self.coordinates = layout.coordinates
        self.config_hash = layout.config_hash
        self.shape = layout.shape

    @classmethod
    def create(
        cls,
        path,
        *,
        config_text: str,
        config_hash: str,
        axes: Sequence[Axis],
        energies_meV,
        lead_names: Sequence[str],
        quantities: Mapping[str, QuantitySpec],
        coordinates: Mapping[str, Axis] | None = None,
        attrs: Mapping[str, object] | None = None,
        overwrite: bool = False,
    ) -> ResultFile:
        """Lay out a new result file with every point pending and open it for writing.

        Parameters
        ----------
        path : str or os.PathLike
        config_text : str
            The TOML text of the sweep, stored verbatim in ``/config``.
        config_hash : str
            Content hash of the config; :meth:`open_for_resume` compares it.
        axes : list of Axis
            Parameter axes, outermost first; ``[]`` for a pure energy sweep.
        energies_meV : (n_E,) float ndarray, meV
            The energy axis, always the last sweep dimension.
        lead_names : list of str
        quantities : dict of str to QuantitySpec
            Stored per point with shape ``(n_E, *tail)``.
        coordinates : dict of str to Axis, optional
            Values (with units) of trailing dimensions that are not mere
            indices, e.g. ``{"temperature": Axis("temperature", [0.1, 1.0], "K", ...)}``.
        attrs : dict of str to str, bool, int or float, optional
            The writer's own scalar root attributes (e.g. ``spin_degeneracy``).
        overwrite : bool
            Replace an existing rgftrans result file at ``path`` (never a file
            of another kind); otherwise an existing file is an error.
        """
        path = Path(path)
        try:
            _check_text(config_text, "config_text")
            if not isinstance(config_hash, str) or not config_hash:
                raise StoreError(f"config_hash {config_hash!r} must be a non-empty string; pass the config's hash")
            axes, energies, lead_names, tail_sizes = _check_sweep(axes, energies_meV, lead_names, quantities)
            coordinates = _check_coordinates(coordinates, tail_sizes)
            attrs = _check_attrs(attrs)
        except StoreError as exc:  # name the file the sweep was going to write
            raise StoreError(f"{path}: {exc}") from None
        if not path.parent.is_dir():
            raise StoreError(
                f"{path}: directory {path.parent} does not exist; create it or choose another output path"
            )
        if path.is_dir():
            raise StoreError(f"{path}: is a directory; choose a file name for the output")
        if path.exists() and (not overwrite or not is_own_file(path)):
            raise StoreError(f"{path}: {_describe_existing(path, config_hash)}")
        # Build under a temporary name in the same directory, then rename: never a half-built file at path.
        tmp = path.with_name(f".{path.name}.{os.getpid()}.partial")
        try:
            _build(tmp, config_text=config_text, config_hash=config_hash, axes=axes, energies=energies,
                   lead_names=lead_names, quantities=dict(quantities), tail_sizes=tail_sizes, attrs=attrs,
                   coordinates=coordinates)
            os.replace(tmp, path)
        finally:
            tmp.unlink(missing_ok=True)
        return cls(h5py.File(path, "r+"), path)

    @classmethod
    def open_for_resume(cls, path, *, config_hash: str) -> ResultFile:
        """Reopen the result file of an interrupted sweep for writing its pending points.

        Raises :class:`StoreError` if the file is missing, not ours, of another
        schema version, damaged, or was written for another config (hash differs).
        """
        path = Path(path)
        rf = cls(_open_h5(path, "r+"), path)
        if rf.config_hash != config_hash:
            rf.close()
            raise StoreError(
                f"{path}: holds a different sweep (config hash {rf.config_hash[:12]}, this config "
                f"{str(config_hash)[:12]}); pass --overwrite to replace it, or choose another output path"
            )
        return rf

    # -- writing ---------------------------------------------------------------------------

    def _file(self) -> h5py.File:
        if self._f is None or not self._f.id.valid:
            raise StoreError(f"{self.path}: result file is closed; open it again with ResultFile.open_for_resume")
        return self._f

    def _check_index(self, index) -> tuple[int, ...]:
        try:
            index = tuple(operator.index(i) for i in index)
        except TypeError:
            raise StoreError(
                f"{self.path}: index {index!r} is not a tuple of integers; pass one integer per parameter axis"
            ) from None
        if len(index) != len(self.shape) or not all(0 <= i < n for i, n in zip(index, self.shape)):
            raise StoreError(
                f"{self.path}: index {index} does not address a parameter point of the sweep shape {self.shape}; "
                f"pass one index 0 <= i < size per axis"
            )
        return index

    def write_point(self, index, values: Mapping[str, np.ndarray]) -> None:
        """Store every quantity of one parameter point, flush, mark it completed, flush.

        Parameters
        ----------
        index : tuple of int
            Position on the parameter axes (``()`` for a pure energy sweep).
        values : dict of str to ndarray
            One array per quantity, shaped ``(n_E, *tail)``; all are checked
            before anything is written.
        """
        f = self._file()
        index = self._check_index(index)
        if set(values) != set(self.quantities):
            missing = sorted(set(self.quantities) - set(values))
            extra = sorted(set(values) - set(self.quantities))
            raise StoreError(
                f"{self.path}: point {index} gives quantities {sorted(values)} (missing {missing}, unknown {extra}); "
                f"pass exactly {sorted(self.quantities)}"
            )
        arrays = {}
        for name, spec in self.quantities.items():
            arr = np.asarray(values[name])
            expected = (self.energies_meV.size, *spec.tail_shape)
            if arr.shape != expected:
                raise StoreError(
                    f"{self.path}: quantity {name!r} at point {index} has shape {arr.shape}; "
                    f"pass shape {expected} (n_E, *tail)"
                )
            if not np.can_cast(arr.dtype, spec.dtype, casting="same_kind"):
                raise StoreError(
                    f"{self.path}: quantity {name!r} at point {index} has dtype {arr.dtype}, the file stores "
                    f"{spec.dtype}; convert it or declare the quantity with that dtype"
                )
            arrays[name] = arr
        g = f[RESULTS_GROUP]
        for name, arr in arrays.items():
            g[name][index] = arr
        f.flush()  # the data reach the file before the flag: HDF5 caches may write them in any order
        g[COMPLETED][index] = True
        f.flush()

    def write_extra(self, group: str, index, name: str, array, *, units: str, long_name: str,
                    dims: Sequence[str | Axis] | None = None) -> None:
        """Store an optional per-point array in ``/extras/<group>/<name>`` (e.g. LDOS maps).

        The dataset ``(*axis sizes, *array.shape)`` is made on the first call
        (unwritten points NaN, or -1 for integers) and later calls must give the
        same shape.  Not flushed by itself: write the extras of a point before
        :meth:`write_point`, whose flush commits them together with the point.

        Parameters
        ----------
        group : str
            Group name (``"ldos"``; ``"/extras/ldos"`` is accepted too).
        index : tuple of int
        name : str
        array : ndarray
        units, long_name : str
        dims : sequence of str or Axis, optional
            One per array dimension: a name (``"energy"`` reuses the energy
            axis, other names get an integer index scale) or an Axis with
            coordinate values.  Default ``<name>_0, <name>_1, ...``.
        """
        f = self._file()
        index = self._check_index(index)
        if isinstance(group, str) and group.startswith(f"/{EXTRAS_GROUP}/"):
            group = group[len(EXTRAS_GROUP) + 2:]
        try:
            _check_name(group, "extras group")
            _check_name(name, "extra")
            _check_text(units, f"units of extra {name!r}")
            _check_text(long_name, f"long_name of extra {name!r}")
        except StoreError as exc:
            raise StoreError(f"{self.path}: {exc}") from None
        arr = np.asarray(array)
        if arr.dtype.kind not in "fci" or 0 in arr.shape:
            raise StoreError(
                f"{self.path}: extra {group}/{name} has dtype {arr.dtype} and shape {arr.shape}; "
                f"pass a non-empty float, complex or signed int array"
            )
        dims = [f"{name}_{i}" for i in range(arr.ndim)] if dims is None else list(dims)
        grp = f.get(f"{EXTRAS_GROUP}/{group}")
        listed = (_attr_text(grp, "extras") or "").split() if grp is not None else []
        if name not in listed:
            self._check_extra_dims(group, name, arr.shape, dims, listed, grp)
            grp = f.require_group(f"{EXTRAS_GROUP}/{group}")
            scales = [_scale(grp, a.name, a.values, a.units, a.long_name) for a in self.axes]
            for dim, size in zip(dims, arr.shape):
                if isinstance(dim, Axis):
                    scales.append(_scale(grp, dim.name, dim.values, dim.units, dim.long_name))
                elif dim == ENERGY_NAME:
                    scales.append(_scale(grp, ENERGY_NAME, self.energies_meV, ENERGY_UNITS, "energy"))
                else:
                    scales.append(_index_scale(grp, dim, size))
            ds = grp.create_dataset(name, shape=(*self.shape, *arr.shape), dtype=arr.dtype,
                                    fillvalue=_fill_value(arr.dtype),
                                    **_checksummed((*self.shape, *arr.shape),
                                                   _point_chunks(len(self.shape), arr.shape)))
            _annotate(ds, units, long_name)
            _attach(ds, scales)
            grp.attrs["extras"] = " ".join([*listed, name])
        ds = grp[name]
        if ds.shape[len(self.shape):] != arr.shape or not np.can_cast(arr.dtype, ds.dtype, casting="same_kind"):
            raise StoreError(
                f"{self.path}: extra {group}/{name} is stored as {ds.shape[len(self.shape):]} {ds.dtype}, "
                f"got {arr.shape} {arr.dtype}; pass the same shape and kind every time"
            )
        ds[index] = arr

    def _check_extra_dims(self, group, name, shape, dims, listed, grp):
        where = f"{self.path}: extra {group}/{name}"
        if len(dims) != len(shape):
            raise StoreError(f"{where} has {len(shape)} dims but {len(dims)} dim names; give one per dimension")
        if (grp is not None and name in grp) or name in {a.name for a in self.axes}:
            raise StoreError(f"{where}: the name is taken by a dimension of the group; rename the extra")
        taken = {a.name for a in self.axes} | set(listed) | {name}
        seen = set()
        for dim, size in zip(dims, shape):
            dim_name = dim.name if isinstance(dim, Axis) else dim
            if not isinstance(dim_name, str) or not _NAME_RE.match(dim_name):
                raise StoreError(f"{where}: dimension name {dim_name!r} is not usable; pass an identifier or an Axis")
            if dim_name in taken or dim_name in seen:
                raise StoreError(f"{where}: dimension name {dim_name!r} is taken or repeated; rename it")
            seen.add(dim_name)
            if isinstance(dim, Axis) and dim.size != size:
                raise StoreError(
                    f"{where}: axis {dim.name!r} has {dim.size} values for a dimension of size {size}; "
                    f"pass matching coordinates"
                )
            if dim_name == ENERGY_NAME and not isinstance(dim, Axis) and size != self.energies_meV.size:
                raise StoreError(
                    f"{where}: dimension 'energy' has size {size}, the sweep has {self.energies_meV.size} "
                    f"energies; rename the dimension or pass all energies"
                )

    @property
    def completed(self) -> np.ndarray:
        """(*axis sizes) bool ndarray: True where the point has been written."""
        return np.asarray(self._file()[RESULTS_GROUP][COMPLETED][()], dtype=bool)

    def close(self) -> None:
        """Flush and close; closing twice is harmless."""
        if self._f is not None:
            if self._f.id.valid:
                self._f.close()
            self._f = None

    def __enter__(self):
        return self

    def __exit__(self, exc_type, exc, tb):
        self.close()

    def __repr__(self):
        state = "closed" if self._f is None else "open"
        return f"<ResultFile {str(self.path)!r} shape={self.shape} n_E={self.energies_meV.size} {state}>"


#: HDF5's file signature (the first 8 bytes of every HDF5 file).
_HDF5_SIGNATURE = b"\x89HDF\r\n\x1a\n"
#: Bytes scanned for our format marker in a file h5py cannot open (a truncated file of ours).
_MARKER_SCAN_BYTES = 1 << 20


def is_own_file(path) -> bool:
    """Whether ``path`` is an rgftrans result file, readable or damaged (the only kind rgftrans replaces).

    A readable file is ours when its ``format`` attribute says so; one that h5py
    cannot open (truncated by a crash) when it is HDF5 and the format marker
    stands in its first MiB, where the root attributes live.
    """
    path = Path(path)
    if not path.is_file():
        return False
    try:
        with h5py.File(path, "r", locking=False) as f:
            return _attr_text(f, "format") == FORMAT_NAME
    except (OSError, *_READ_ERRORS):
        pass
    with open(path, "rb") as fh:
        head = fh.read(_MARKER_SCAN_BYTES)
    return head.startswith(_HDF5_SIGNATURE) and FORMAT_NAME.encode() in head


def _describe_existing(path: Path, config_hash: str) -> str:
    """Why an existing file blocks :meth:`ResultFile.create`, ending in the fix."""
    fix = "pass overwrite=True / --overwrite to replace it, or choose another output path"
    if not is_own_file(path):
        return ("exists and is not an rgftrans result file; rgftrans replaces only its own files -- choose another "
                "output path or move the file away")
    try:
        with _open_h5(path, "r") as f:
            fmt, old = _attr_text(f, "format"), _attr_text(f, "config_hash")
    except StoreError:
        return f"exists and is a damaged rgftrans result file; {fix}"
    if old == config_hash:
        return (f"exists and holds this sweep (config hash {str(old)[:12]}); resume it with "
                f"ResultFile.open_for_resume, or {fix}")
    return f"exists and holds a different sweep (config hash {str(old)[:12]}); {fix}"


# --- groups of other writers (searches, fits) and whole files of other kinds -------------------


#: Prefix of the root ``format`` attribute of every file rgftrans writes (result files, standalone groups,
#: waveguide runs); the only files :func:`write_group` writes into.
OWN_FORMAT_PREFIX = "rgftrans-"
#: Root ``format`` of a file made by :func:`write_group` to hold groups saved away from a result file.
GROUPS_FORMAT = "rgftrans-groups"
#: Suffix of the name a group is built under before it is moved into place (hidden: leading dot).
_PARTIAL_GROUP = ".partial"
#: The fix every refused overwrite ends with.
_OVERWRITE_FIX = "pass --overwrite (overwrite=True) to replace it, or write elsewhere (--save NEW.h5)"


@dataclass(frozen=True, eq=False)
class StoredArray:
    """One dataset of a group written by :func:`write_group`: values with their units and description.

    Attributes
    ----------
    values : array_like or str
        Numbers (any shape; stored as given), booleans, or text (a str or an
        array of str, stored as UTF-8 strings).
    units : str
        CF style: ``"1"`` dimensionless, ``""`` for text.
    long_name : str
    dims : tuple of str, optional
        For each dimension, the key of a dataset of the same group that is a
        dimension scale (``scale=True``), or ``""`` for none.
    scale : bool
        Make this 1D dataset a dimension scale named by its key.
    attrs : dict of str to str, bool, int, float or 1D float array, optional
        Further attributes of the dataset.
    """

    values: object
    units: str
    long_name: str
    dims: tuple = ()
    scale: bool = False
    attrs: Mapping = field(default_factory=dict)

    def __post_init__(self):
        _check_text(self.units, "units of a dataset")
        _check_text(self.long_name, "long_name of a dataset")
        values = self.values
        if isinstance(values, str):
            values = np.array(values, dtype=object)
        else:
            values = np.asarray(values)
            if values.dtype.kind in "USO":
                if not all(isinstance(v, (str, np.str_)) for v in values.flat):
                    raise StoreError(f"dataset {self.long_name!r}: values of dtype {values.dtype} are neither numbers "
                                     "nor text; pass numbers or strings")
                values = np.array([str(v) for v in values.flat], dtype=object).reshape(values.shape)
            elif values.dtype.kind not in "biufc":
                raise StoreError(f"dataset {self.long_name!r}: values of dtype {values.dtype} cannot be stored; "
                                 "pass numbers, booleans or strings")
        dims = tuple(self.dims)
        if dims and len(dims) != values.ndim:
            raise StoreError(f"dataset {self.long_name!r}: {len(dims)} dims for {values.ndim} dimension(s); "
                             "give one scale name (or '') per dimension")
        if self.scale and values.ndim != 1:
            raise StoreError(f"dataset {self.long_name!r}: a dimension scale must be 1D, got shape {values.shape}")
        object.__setattr__(self, "values", values)
        object.__setattr__(self, "dims", dims)
        object.__setattr__(self, "attrs", _check_group_attrs(self.attrs, f"dataset {self.long_name!r}"))


@dataclass(frozen=True, eq=False)
class StoredGroup:
    """A group of :class:`StoredArray` (and nested :class:`StoredGroup`) keyed by name, with its attributes."""

    items: Mapping
    attrs: Mapping = field(default_factory=dict)

    def __post_init__(self):
        items = dict(self.items)
        for key, item in items.items():
            _check_key(key)
            if not isinstance(item, (StoredArray, StoredGroup)):
                raise StoreError(f"{key!r}: expected a StoredArray or StoredGroup, got {type(item).__name__}")
            if isinstance(item, StoredArray):
                for dim in item.dims:
                    scale = items.get(dim)
                    if dim and not (isinstance(scale, StoredArray) and scale.scale):
                        raise StoreError(f"dataset {key!r}: dimension scale {dim!r} is not a dataset of the same "
                                         "group made with scale=True; add it or drop the dim")
                    if dim and scale.values.shape[0] != item.values.shape[item.dims.index(dim)]:
                        raise StoreError(f"dataset {key!r}: scale {dim!r} has {scale.values.shape[0]} values for a "
                                         f"dimension of size {item.values.shape[item.dims.index(dim)]}")
        object.__setattr__(self, "items", items)
        object.__setattr__(self, "attrs", _check_group_attrs(self.attrs, "group"))


def _check_key(key) -> str:
    """An HDF5 link name of our own: non-empty text, no '/', not hidden (a leading '.' marks partial groups)."""
    if not isinstance(key, str) or not key or "/" in key or key.startswith(".") or not key.isprintable():
        raise StoreError(f"name {key!r} is not usable in a file; use printable text without '/' or a leading '.'")
    return key


def _check_group_path(group) -> tuple[str, ...]:
    if not isinstance(group, str) or not group.strip("/"):
        raise StoreError(f"group {group!r} is not usable; pass a name such as 'darkstates'")
    return tuple(_check_key(part) for part in group.strip("/").split("/"))


def _check_group_attrs(attrs, what: str) -> dict:
    """Attributes of a group or dataset: str, bool, int, float (NaN allowed) or a 1D float array."""
    out = {}
    for key, value in dict(attrs or {}).items():
        if not isinstance(key, str) or not key:
            raise StoreError(f"{what}: attribute name {key!r} must be a non-empty str")
        if isinstance(value, (bool, np.bool_)):
            value = bool(value)
        elif isinstance(value, (int, np.integer)):
            value = np.int64(value)
        elif isinstance(value, (float, np.floating)):
            value = float(value)
        elif isinstance(value, (list, tuple, np.ndarray)):
            try:
                value = np.asarray(value, dtype=np.float64)
            except (TypeError, ValueError):
                raise StoreError(f"{what}: attribute {key!r} = {value!r} is not a list of numbers") from None
            if value.ndim != 1:
                raise StoreError(f"{what}: attribute {key!r} has shape {value.shape}; pass a 1D list of numbers")
        elif not isinstance(value, str):
            raise StoreError(f"{what}: attribute {key!r} = {value!r} must be a str, bool, int, float or list of floats")
        out[key] = value
    return out


def _write_items(g, contents: StoredGroup) -> None:
    """Fill the empty h5py group ``g``: attributes, datasets (checksummed when chunked), scales, subgroups."""
    for key, value in contents.attrs.items():
        g.attrs[key] = value
    made = {}
    for key, item in contents.items.items():
        if isinstance(item, StoredGroup):
            _write_items(g.create_group(key), item)
            continue
        values = item.values
        if values.dtype == object:  # text: variable-length strings take no filters, so no checksum
            ds = g.create_dataset(key, data=values, dtype=h5py.string_dtype("utf-8"))
        else:
            ds = g.create_dataset(key, data=values, **_checksummed(values.shape))
        _annotate(ds, item.units, item.long_name)
        for name, value in item.attrs.items():
            ds.attrs[name] = value
        if item.scale:
            ds.make_scale(key)
        made[key] = ds
    for key, item in contents.items.items():
        if isinstance(item, StoredArray):
            for i, dim in enumerate(item.dims):
                if dim:
                    made[key].dims[i].attach_scale(made[dim])
                    made[key].dims[i].label = dim


def _root_format(path: Path) -> str | None:
    """The root ``format`` attribute of an HDF5 file h5py can open, else None (one StoreError if not HDF5)."""
    if path.is_dir():
        raise StoreError(f"{path}: is a directory; pass the path of an .h5 file")
    if path.stat().st_size == 0 or not h5py.is_hdf5(path):
        raise StoreError(f"{path}: exists and is not an HDF5 file; rgftrans writes only into its own files -- "
                         "choose another path or move the file away")
    with _open_h5(path, "r") as f:
        return _attr_text(f, "format")


def _check_own(path: Path) -> None:
    fmt = _root_format(path)
    if fmt is None or not fmt.startswith(OWN_FORMAT_PREFIX):
        found = "no 'format' attribute" if fmt is None else f"format {printable(fmt)!r}"
        raise StoreError(f"{path}: is not a file written by rgftrans ({found}); rgftrans writes only into its own "
                         "files -- write elsewhere (--save NEW.h5) or move the file away")


@contextmanager
def _no_other_writer(path: Path):
    """Hold the output lock of ``path`` while writing, if a sweep ever wrote it; refuse if a run holds it now."""
    lock_path = path.with_name(path.name + ".lock")
    if os.path.abspath(lock_path) in _HELD_LOCKS:
        raise StoreError(f"{path}: this process is writing it as a sweep; write the group after the sweep ends")
    if not lock_path.exists():
        yield
        return
    with OutputLock(path):  # one line naming the running sweep if it holds the lock
        yield


def check_group_writable(path, group: str, *, overwrite: bool = False) -> None:
    """Refuse now what :func:`write_group` would refuse later (before a long computation): one StoreError line.

    A missing file is fine (it will be made); an existing one must be an
    rgftrans file, not written by a running sweep, and without ``group`` unless
    ``overwrite``.
    """
    path = Path(path)
    parts = _check_group_path(group)
    if not path.exists():
        if not path.parent.is_dir():
            raise StoreError(f"{path}: directory {path.parent} does not exist; create it or choose another path")
        return
    _check_own(path)
    owner = lock_owner(path)
    if owner:
        raise StoreError(f"{path}: is being written by {owner}; wait for that run to finish, or write elsewhere")
    if not overwrite:
        with _open_h5(path, "r") as f:
            if "/".join(parts) in f:
                raise StoreError(f"{path}: group /{'/'.join(parts)} exists; {_OVERWRITE_FIX}")


def check_file_writable(path, *, overwrite: bool = False) -> None:
    """Refuse now what :func:`write_file` would refuse later (before a long computation): one StoreError line."""
    path = Path(path)
    if path.is_dir():
        raise StoreError(f"{path}: is a directory; choose a file name for the output")
    if not path.exists():
        return
    _check_own(path)
    if not overwrite:
        raise StoreError(f"{path}: exists; pass --overwrite (overwrite=True) to replace it, or choose another path")
    owner = lock_owner(path)
    if owner:
        raise StoreError(f"{path}: is being written by {owner}; wait for that run to finish, or choose another path")


def write_group(path, group: str, datasets: Mapping, *, attrs: Mapping | None = None,
                overwrite: bool = False) -> None:
    """Write a named group of datasets into an rgftrans HDF5 file, or into a new file of its own.

    The one way rgftrans writes a group beside a result's own layout (dark-state
    searches, trace fits).  Into an existing file: the group is built under a
    hidden temporary name (``.<group>.partial``) and moved into place when
    complete, so a killed write never leaves a half group under the real name
    (a stale partial group is removed by the next write).  Into a new path: a
    file with root ``format = "rgftrans-groups"``, ``created`` and
    ``/provenance``, built beside the target and renamed.

    Parameters
    ----------
    path : str or os.PathLike
    group : str
        Group path in the file (``"darkstates"``, ``"fits/compare"``).
    datasets : dict of str to StoredArray or StoredGroup
    attrs : dict, optional
        Attributes of the group (str, bool, int, float or 1D float list).
    overwrite : bool
        Replace an existing group of that name; otherwise it is refused.

    Raises
    ------
    StoreError
        One line: the group exists (and ``overwrite`` is False); the file is
        not HDF5 or not written by rgftrans; a running sweep holds its output
        lock; the file cannot be opened for writing.
    """
    path = Path(path)
    parts = _check_group_path(group)
    contents = StoredGroup(datasets, attrs or {})
    if not path.exists():
        nested = contents
        for part in reversed(parts[1:]):
            nested = StoredGroup({part: nested})
        write_file(path, StoredGroup({parts[0]: nested}), kind=GROUPS_FORMAT)
        return
    _check_own(path)
    name = "/".join(parts)
    with _no_other_writer(path), _open_h5(path, "r+") as f:
        parent = f.require_group("/".join(parts[:-1])) if len(parts) > 1 else f
        leaf = parts[-1]
        if leaf in parent and not overwrite:
            raise StoreError(f"{path}: group /{name} exists; {_OVERWRITE_FIX}")
        partial = f".{leaf}{_PARTIAL_GROUP}"
        if partial in parent:  # left by a killed write
            del parent[partial]
        _write_items(parent.create_group(partial), contents)
        f.flush()  # the whole group reaches the file before it takes the real name
        if leaf in parent:
            del parent[leaf]
        parent.move(partial, leaf)
        f.flush()


def write_file(path, contents: StoredGroup, *, kind: str, overwrite: bool = False) -> None:
    """Write a whole HDF5 file of ``contents`` (its root), atomically: built beside ``path``, then renamed.

    The root gets ``format = kind`` (which must start with ``"rgftrans-"``),
    ``created`` and ``/provenance`` besides ``contents.attrs``.  An existing
    file is refused unless ``overwrite``; a file not written by rgftrans is never
    replaced; nor one a running sweep holds.
    """
    path = Path(path)
    if not isinstance(contents, StoredGroup):
        raise StoreError(f"{path}: contents must be a StoredGroup, got {type(contents).__name__}")
    if not isinstance(kind, str) or not kind.startswith(OWN_FORMAT_PREFIX):
        raise StoreError(f"{path}: file kind {kind!r} must start with {OWN_FORMAT_PREFIX!r}")
    for key in ("format", "created"):
        if key in contents.attrs or key in contents.items:
            raise StoreError(f"{path}: {key!r} is written by the file layout itself; choose another name")
    if "provenance" in contents.items:
        raise StoreError(f"{path}: 'provenance' is written by the file layout itself; choose another name")
    if not path.parent.is_dir():
        raise StoreError(f"{path}: directory {path.parent} does not exist; create it or choose another path")
    if path.is_dir():
        raise StoreError(f"{path}: is a directory; choose a file name for the output")
    lock = nullcontext()
    if path.exists():
        _check_own(path)
        if not overwrite:
            raise StoreError(f"{path}: exists; pass --overwrite (overwrite=True) to replace it, or choose another "
                             "path")
        lock = _no_other_writer(path)
    tmp = path.with_name(f".{path.name}.{os.getpid()}.partial")
    try:
        with lock:
            with h5py.File(tmp, "w") as f:
                f.attrs["format"] = kind
                f.attrs["created"] = datetime.now(timezone.utc).isoformat(timespec="seconds")
                prov = f.create_group("provenance")
                for key, value in _provenance().items():
                    prov.attrs[key] = value
                _write_items(f, contents)
            os.replace(tmp, path)
    finally:
        tmp.unlink(missing_ok=True)


# --- reading ---------------------------------------------------------------------------------


@dataclass(frozen=True, eq=False)
class ResultData:
    """Everything in a result file, loaded into memory.

    Attributes
    ----------
    path : str
    axes : tuple of Axis
        Parameter axes, outermost first (empty for a pure energy sweep).
    energies_meV : (n_E,) float ndarray, meV
    lead_names : tuple of str
    quantities : dict of str to ndarray
        ``(*axis sizes, n_E, *tail)``; NaN (or -1) where not yet written.
    quantity_specs : dict of str to QuantitySpec
    coordinates : dict of str to Axis
        Values of the trailing dimensions that have them (e.g. ``temperature``, K).
    completed : (*axis sizes) bool ndarray
    extras : dict of str to dict of str to ndarray
        ``extras[group][name]``, shaped ``(*axis sizes, *per-point shape)``.
    config_text, config_hash, created : str
    schema_version : int
    attrs : dict
        Root attributes, with the writer's own (a sweep writes ``spin_degeneracy``:
        2 for a spinless model, 1 with explicit spin orbitals; and
        ``fermi_energy_meV``, NaN when the config gives no density).
    provenance : dict of str to str
        Versions, host and platform of the writing process.
    """

    path: str
    axes: tuple
    energies_meV: np.ndarray
    lead_names: tuple
    quantities: dict
    quantity_specs: dict
    completed: np.ndarray
    extras: dict
    config_text: str
    config_hash: str
    created: str
    schema_version: int
    coordinates: dict = field(default_factory=dict)
    attrs: dict = field(default_factory=dict)
    provenance: dict = field(default_factory=dict)

    @property
    def shape(self) -> tuple[int, ...]:
        return tuple(axis.size for axis in self.axes)

    def require_attr(self, name: str, what: str):
        """The root attribute ``name``; a one-line StoreError saying ``what`` it is for if the file lacks it."""
        if name not in self.attrs:
            raise StoreError(f"{self.path}: has no attribute {name!r} ({what}); it was not written by an rgftrans "
                             f"sweep of this version -- rerun the sweep with --overwrite")
        return self.attrs[name]


def _plain(value):
    if isinstance(value, bytes):
        return value.decode("utf-8", "replace")
    if isinstance(value, np.generic):
        return value.item()
    return value


def read_result(path) -> ResultData:
    """Load a result file written by :class:`ResultFile`.

    Raises :class:`StoreError` (one line) if the file is missing, not HDF5, not
    ours, of another schema version, truncated or damaged.
    """
    with _reading(path) as (f, layout):
        g = f[RESULTS_GROUP]
        config = f["config"][()]
        return ResultData(
            path=str(path),
            axes=layout.axes,
            energies_meV=layout.energies_meV,
            lead_names=layout.lead_names,
            quantities={name: g[name][()] for name in layout.specs},
            quantity_specs=layout.specs,
            completed=np.asarray(g[COMPLETED][()], dtype=bool),
            extras={grp: {name: f[EXTRAS_GROUP][grp][name][()] for name in names}
                    for grp, names in layout.extras.items()},
            config_text=config.decode("utf-8") if isinstance(config, bytes) else str(config),
            config_hash=layout.config_hash,
            created=_attr_text(f, "created"),
            schema_version=SCHEMA_VERSION,
            coordinates=layout.coordinates,
            attrs={k: _plain(v) for k, v in f.attrs.items()},
            provenance={k: _plain(v) for k, v in f["provenance"].attrs.items()},
        )


def validate(path) -> None:
    """Check a result file thoroughly: layout, ``units``/``long_name`` of every dataset, every stored chunk.

    Returns None for a good file; raises :class:`StoreError` with a one-line
    message naming the file, the problem and the fix otherwise.
    """

    def check(name, obj):
        if not isinstance(obj, h5py.Dataset):
            return
        if "units" not in obj.attrs or "long_name" not in obj.attrs:
            raise StoreError(f"{path}: damaged rgftrans result file, /{name} lacks units or long_name; "
                             f"{_DAMAGED_FIX}")
        for sel in obj.iter_chunks() if obj.chunks else [()]:
            obj[sel]  # raises on unreadable chunks

    with _reading(path) as (f, _):
        f.visititems(check)


def _range(values: np.ndarray) -> str:
    if values.size == 1:
        return f"{values[0]:g}"
    return f"{values.min():g} .. {values.max():g}"


def summary(path) -> str:
    """Multi-line human description of a result file, for ``rgftrans info``.

    Reads only the layout, attributes and the completed mask, not the data.
    """
    with _reading(path) as (f, layout):
        completed = np.asarray(f[RESULTS_GROUP][COMPLETED][()], dtype=bool)
        prov = {k: _plain(v) for k, v in f["provenance"].attrs.items()}
        own = {k: _plain(v) for k, v in f.attrs.items() if k not in _ROOT_ATTRS}
        created = _attr_text(f, "created")
        shapes = {name: f[RESULTS_GROUP][name].shape for name in layout.specs}
        extras = [(f"{grp}/{name}", f[EXTRAS_GROUP][grp][name].shape, f[EXTRAS_GROUP][grp][name].dtype,
                   _attr_text(f[EXTRAS_GROUP][grp][name], "units") or "")
                  for grp, names in layout.extras.items() for name in names]
    n_done, n_total = int(np.count_nonzero(completed)), int(np.prod(layout.shape, dtype=np.int64))
    versions = ", ".join(f"{key} {prov.get(key, '?')}" for key in (*_PROVENANCE_PACKAGES, "hdf5", "python"))
    lines = [
        f"rgftrans result file {path}",
        f"  created {created}, schema version {SCHEMA_VERSION}, config hash {layout.config_hash}",
        f"  written by rgftrans {prov.get('rgftrans', '?')} ({versions}) "
        f"on {prov.get('hostname', '?')} ({prov.get('platform', '?')})",
        "  axes:",
    ]
    rows = [(a.name, a.size, _range(a.values), a.units, a.long_name) for a in layout.axes]
    rows.append((ENERGY_NAME, layout.energies_meV.size, _range(layout.energies_meV), ENERGY_UNITS, "energy"))
    width = max(len(row[0]) for row in rows)
    for name, size, span, units, long_name in rows:
        lines.append(f"    {name:<{width}}  {size:>6} points  {span} {units}  ({long_name})")
    lines.append(f"  leads: {', '.join(layout.lead_names)}")
    for name, axis in layout.coordinates.items():
        lines.append(f"  {name}: {', '.join(f'{v:g}' for v in axis.values)} {axis.units}  ({axis.long_name})")
    if own:
        lines.append("  attributes: " + ", ".join(f"{k} = {v:g}" if isinstance(v, float) else f"{k} = {v}"
                                                  for k, v in own.items()))
    lines.append("  quantities:")
    width = max(len(name) for name in layout.specs)
    for name, spec in layout.specs.items():
        dims = [a.name for a in layout.axes] + [ENERGY_NAME] + [d for d, _ in spec.shape_tail]
        lines.append(
            f"    {name:<{width}}  {shapes[name]} ({', '.join(dims)}) {spec.dtype} [{spec.units}]  ({spec.long_name})"
        )
    for key, shape, dtype, units in extras:
        lines.append(f"  extra {key}: {shape} {dtype} [{units}]")
    lines.append(f"  completed: {n_done}/{n_total} parameter points ({100.0 * n_done / n_total:.1f} %)")
    owner = lock_owner(path)
    if owner:
        lines.append(f"  being written now by {owner}")
    # Names, units and attributes come from the file: no terminal control sequences get through.
    return "\n".join(printable(line) for line in lines)
