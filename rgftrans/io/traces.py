"""Measured gate-voltage traces: reading CSV or plain-text files into a :class:`MeasuredTrace` (siemens).

Split from :mod:`rgftrans.io.compare`, which fits stored sweeps to these traces
and re-exports everything here.
"""

from __future__ import annotations

import csv
import math
import re
from contextlib import contextmanager
from contextvars import ContextVar
from dataclasses import dataclass
from pathlib import Path
from typing import Mapping

import numpy as np

from rgftrans.errors import CompareError
from rgftrans.system.materials import CONDUCTANCE_QUANTUM_S

__all__ = [ "MeasuredTrace", "argument_names", "read_trace", "MIN_TRACE_POINTS"]

#: Fewest data rows a trace may have (a fit needs more rows than fitted parameters, too).
MIN_TRACE_POINTS = 3
_CONDUCTANCE_UNITS = {"S": 1.0, "mS": 1e-3, "uS": 1e-6, "nS": 1e-9, "2e2/h": CONDUCTANCE_QUANTUM_S, "2e^2/h": CONDUCTANCE_QUANTUM_S, "G0": CONDUCTANCE_QUANTUM_S}
_CURRENT_UNITS = {"A": 1.0, "mA": 1e-3, "uA": 1e-6, "nA": 1e-9, "pA": 1e-12}
_GATE_UNITS = {"V": 1.0, "mV": 1e-3}
_KINDS = ("conductance", "current")
#: A header cell "name [unit]" or "name (unit)".
_HEADER_UNIT = re.compile(r"^(?P<name>.*?)\s*[\[(]\s*(?P<unit>[^\])]*?)\s*[\])]\s*$")


# --- how messages name the caller's arguments ----------------------------------------------------

#: The Python spelling of every argument a message of this module or :mod:`rgftrans.io.compare` may name
#: (keys not listed are spelled as the key itself).
_PYTHON_NAMES = {
    "lever_arm": "initial['lever_arm']",
    "offset": "initial['offset']",
    "bounds.lever_arm": "bounds['lever_arm']",
    "bounds.offset": "bounds['offset']",
    "bounds.r_series": "bounds['r_series']",
    "bounds.temperature": "bounds['temperature']",
}
_ARGUMENT_NAMES: ContextVar[Mapping[str, str]] = ContextVar("rgftrans_compare_argument_names", default={})


@contextmanager
def argument_names(names: Mapping[str, str]):
    """Within the block, error and failure messages name arguments as ``names`` says.

    The command line maps the Python keywords (``"noise_S"``, ``"bias_V"``,
    ``"lever_arm"`` for ``initial['lever_arm']``, ``"bounds.lever_arm"``, …) to
    its flags (``"--noise"``, ``"--bias"``, ``"--lever-arm"``,
    ``"--lever-arm-range"``), so a user of the command line reads the flag
    they can change.  Keys not given keep their Python spelling.
    """
    token = _ARGUMENT_NAMES.set(dict(names))
    try:
        yield
    finally:
        _ARGUMENT_NAMES.reset(token)


def _arg(key: str) -> str:
    """How messages name the argument ``key`` in the current context (see :func:`argument_names`)."""
    return _ARGUMENT_NAMES.get().get(key, _PYTHON_NAMES.get(key, key))


def _unit_key(unit: str) -> str:
    """Normalise the spelling of a unit: µ/μ -> u, ² -> ^2, no spaces."""
    return unit.strip().replace("µ", "u").replace("μ", "u").replace("²", "^2").replace(" ", "")


# --- the measured trace ---------------------------------------------------------------------


@dataclass(frozen=True, eq=False)
class MeasuredTrace:
    """A measured (or synthetic) conductance trace against gate voltage.

    Attributes
    ----------
    gate_V : (n,) float ndarray, V
        Strictly increasing gate voltages.
    conductance_S : (n,) float ndarray, S
        Measured two-terminal conductance (series resistance not removed);
        for a current measurement, current / bias.
    source : str
        Where the trace came from (file path, or e.g. ``"synthetic"``).
    description : str
        Human description (columns, units, bias).
    second_values : (n,) float ndarray or None
        Values of an optional second column (e.g. a field stepped along), in
        the file's units, reordered with the gate voltages.
    second_name : str
        Header text of that column ("" when there is none).
    """

    gate_V: np.ndarray
    conductance_S: np.ndarray
    source: str = ""
    description: str = ""
    second_values: np.ndarray | None = None
    second_name: str = ""

    def __post_init__(self):
        where = self.source or "trace"
        gate = np.array(self.gate_V, dtype=float)
        g = np.array(self.conductance_S, dtype=float)
        if gate.ndim != 1 or g.shape != gate.shape:
            raise CompareError(
                f"{where}: gate_V has shape {gate.shape} and conductance_S {g.shape}; pass two 1D arrays of equal length"
            )
        if gate.size < MIN_TRACE_POINTS:
            raise CompareError(f"{where}: {gate.size} point(s), need at least {MIN_TRACE_POINTS}; pass the whole trace")
        for name, arr in (("gate_V", gate), ("conductance_S", g)):
            bad = np.flatnonzero(~np.isfinite(arr))
            if bad.size:
                raise CompareError(f"{where}: {name}[{bad[0]}] = {float(arr[bad[0]])!r}; remove non-finite points")
        step = np.diff(gate)
        if np.any(step <= 0.0):
            k = int(np.flatnonzero(step <= 0.0)[0])
            raise CompareError(
                f"{where}: gate_V must increase strictly, but gate_V[{k}] = {float(gate[k])!r} >= gate_V[{k + 1}] = "
                f"{float(gate[k + 1])!r}; sort the points and drop repeated gate voltages"
            )
        second = self.second_values
        if second is not None:
            second = np.array(second, dtype=float)
            if second.shape != gate.shape:
                raise CompareError(f"{where}: second_values has shape {second.shape}, expected {gate.shape}")
            second.setflags(write=False)
        for arr in (gate, g):
            arr.setflags(write=False)
        object.__setattr__(self, "gate_V", gate)
        object.__setattr__(self, "conductance_S", g)
        object.__setattr__(self, "second_values", second)

    @property
    def n_points(self) -> int:
        return self.gate_V.size


def _delimiter(line: str) -> str | None:
    """The delimiter of a data file from its first line: comma, semicolon, tab, or whitespace (None)."""
    for d in (",", ";", "\t"):
        if d in line:
            return d
    return None


def _cells(line: str, delimiter: str | None) -> list[str]:
    if delimiter is None:
        return line.split()
    return [c.strip() for c in next(csv.reader([line], delimiter=delimiter))]


def _is_number(cell: str) -> bool:
    try:
        float(cell)
    except ValueError:
        return False
    return True


def _split_header(cell: str) -> tuple[str, str | None]:
    m = _HEADER_UNIT.match(cell)
    if m and m.group("name"):
        return m.group("name").strip(), m.group("unit")
    return cell.strip(), None


def _read_text(path: Path) -> str:
    try:
        return path.read_text(encoding="utf-8-sig")
    except FileNotFoundError:
        raise CompareError(f"{path}: no such file; check the path of the measured trace") from None
    except IsADirectoryError:
        raise CompareError(f"{path}: is a directory; pass the CSV or text file of the trace") from None
    except UnicodeDecodeError as exc:
        raise CompareError(
            f"{path}: not UTF-8 text ({exc.reason} at byte {exc.start}); export the trace as CSV or plain text"
        ) from None
    except OSError as exc:
        raise CompareError(f"{path}: cannot be read ({exc.strerror}); check the path and its permissions") from None


def read_trace(path, *, gate_column=None, value_column=None, kind: str = "conductance", units: str | None = None,
               bias_V: float | None = None, second_column=None, description: str | None = None) -> MeasuredTrace:
    """Read a measured gate-voltage trace of conductance or current.

    Two formats: CSV (comma, semicolon or tab separated) whose first
    non-comment line is a header naming the columns, optionally with units in
    brackets (``Vg [V], G [uS]`` or ``Vg (mV)``); or plain whitespace-separated
    columns without a header (columns are then addressed by index).  Lines
    starting with ``#`` and blank lines are skipped.  A trace recorded with
    decreasing gate voltage is reversed, so ``gate_V`` always increases.

    Parameters
    ----------
    path : str or os.PathLike
    gate_column, value_column, second_column : str or int, optional, keyword-only
        Column by header name (with or without its unit, case-insensitive) or
        by 0-based index.  Defaults: the gate voltage is the first column; the
        value is the one column left over (it must be unambiguous).  The
        optional second column is carried along (e.g. a field stepped with the
        gate).
    kind : {"conductance", "current"}, keyword-only
    units : str, optional, keyword-only
        Units of the value column: S, mS, uS, nS or 2e2/h (also ``2e^2/h``,
        ``G0``) for a conductance; A, mA, uA, nA, pA for a current.  Taken from
        the header's brackets when not given; if both are given they must
        agree.  The gate column is in V unless its header says ``[mV]``.
    bias_V : float, keyword-only
        Source-drain bias of a current trace (required for ``kind="current"``):
        the conductance is current / bias.
    description : str, optional, keyword-only
        Replaces the generated description (say "synthetic" for invented data).

    Returns
    -------
    MeasuredTrace

    Raises
    ------
    CompareError
        One line naming the file (and the line number where one applies):
        missing column (with the columns present), non-numeric cell, NaN or
        infinite value, a row of the wrong length, a gate voltage that repeats
        or turns back, a current without a bias, unknown or conflicting units,
        too few rows.
    """
    path = Path(path)
    bias = _check_bias(path, kind, bias_V)
    table = _split_table(path, _read_text(path))
    i_gate, i_value, i_second = _pick_columns(table, kind, gate_column, value_column, second_column)
    value_scale, unit = _value_unit(table, kind, i_value, units)
    gate_unit = table.units[i_gate] or "V"
    if _unit_key(gate_unit) not in _GATE_UNITS:
        raise CompareError(f"{path}: gate column {table.header[i_gate]!r} is in {gate_unit!r}; give the gate voltage "
                           "in V or mV")
    columns = [i_gate, i_value] + ([i_second] if i_second is not None else [])
    data, line_nos = _numbers(table, columns)
    gate = data[:, 0] * _GATE_UNITS[_unit_key(gate_unit)]
    order = _gate_order(path, gate, data[:, 0], line_nos)
    value = data[:, 1] * value_scale
    if kind == "current":
        value = value / bias
    if description is None:
        description = (f"{kind} column {table.names[i_value]!r} [{unit}] against gate column "
                       f"{table.names[i_gate]!r} [{gate_unit}]")
        if kind == "current":
            description += f", divided by the bias {bias:g} V"
        description += f", read from {path.name}"
    return MeasuredTrace(
        gate_V=gate[order],
        conductance_S=value[order],
        source=str(path),
        description=description,
        second_values=None if i_second is None else data[order, 2],
        second_name="" if i_second is None else (table.header[i_second] if table.has_header else f"column {i_second}"),
    )


def _check_bias(path: Path, kind: str, bias_V) -> float | None:
    """The source-drain bias (V) a current trace needs, or None for a conductance trace."""
    if kind not in _KINDS:
        raise CompareError(f"{path}: {_arg('kind')} must be 'conductance' or 'current', got {kind!r}")
    if kind == "conductance":
        if bias_V is not None:
            raise CompareError(f"{path}: {_arg('bias_V')} applies to {_arg('kind')} 'current' only; drop it or pass "
                               f"{_arg('kind')} 'current'")
        return None
    if bias_V is None:
        raise CompareError(
            f"{path}: a current trace needs the source-drain bias to become a conductance; pass {_arg('bias_V')} "
            f"(volts)"
        )
    try:
        bias = float(bias_V)
    except (TypeError, ValueError):
        raise CompareError(f"{path}: {_arg('bias_V')} must be a number in V, got {bias_V!r}") from None
    if not math.isfinite(bias) or bias == 0.0:
        raise CompareError(f"{path}: {_arg('bias_V')} = {bias!r} V; pass the finite, non-zero bias of the measurement")
    return bias


@dataclass(frozen=True)
class _TextTable:
    """A trace file split into cells: the header (if any), column names and units, and the data rows."""

    path: Path
    header: tuple
    names: tuple
    units: tuple
    rows: list  # (line number, cells)
    has_header: bool

    @property
    def n_columns(self) -> int:
        return len(self.names)

    def present(self) -> str:
        if self.has_header:
            return ", ".join(repr(c) for c in self.header)
        return ", ".join(self.names) + " (no header row: address columns by index)"


def _split_table(path: Path, text: str) -> _TextTable:
    """Cells of every non-comment line; the first line is a header when none of its cells is a number."""
    lines = [(no, line.strip()) for no, line in enumerate(text.splitlines(), start=1)]
    lines = [(no, line) for no, line in lines if line and not line.startswith("#")]
    if not lines:
        raise CompareError(f"{path}: no data rows, need at least {MIN_TRACE_POINTS}; check that this is the trace file")
    delimiter = _delimiter(lines[0][1])  # the first line fixes the separator for the whole file
    cells = [(no, _cells(line, delimiter)) for no, line in lines]
    has_header = not any(_is_number(c) for c in cells[0][1])
    if has_header:
        header = tuple(cells[0][1])
        names, units = zip(*(_split_header(c) for c in header)) if header else ((), ())
        rows = cells[1:]
    else:
        rows = cells
        header = ()
        names, units = tuple(str(i) for i in range(len(rows[0][1]))), (None,) * len(rows[0][1])
    if not names:
        raise CompareError(f"{path}: no data rows, need at least {MIN_TRACE_POINTS}; check that this is the trace file")
    return _TextTable(path=path, header=header, names=tuple(names), units=tuple(units), rows=rows,
                      has_header=has_header)


def _pick_columns(table: _TextTable, kind: str, gate_column, value_column, second_column):
    """Indices of the gate, value and optional second column, from names or indices (defaults documented above)."""
    path, n_cols = table.path, table.n_columns

    def resolve(spec, what: str, keyword: str) -> int:
        if isinstance(spec, (int, np.integer)) and not isinstance(spec, bool):
            if 0 <= spec < n_cols:
                return int(spec)
        elif isinstance(spec, str):
            wanted = spec.strip().lower()
            for i in range(n_cols):
                if table.has_header and wanted in (table.header[i].lower(), table.names[i].lower()):
                    return i
        raise CompareError(f"{path}: no column {spec!r} for the {what}; columns present: {table.present()}; pass "
                           f"{_arg(keyword)} one of them")

    i_gate = 0 if gate_column is None else resolve(gate_column, "gate voltage", "gate_column")
    i_second = None if second_column is None else resolve(second_column, "second column", "second_column")
    if value_column is None:
        left = [i for i in range(n_cols) if i not in (i_gate, i_second)]
        if len(left) != 1:
            raise CompareError(f"{path}: cannot tell which column holds the {kind}: columns present: "
                               f"{table.present()}; pass {_arg('value_column')}")
        i_value = left[0]
    else:
        i_value = resolve(value_column, kind, "value_column")
    if i_value == i_gate:
        raise CompareError(f"{path}: {_arg('gate_column')} and {_arg('value_column')} both select column "
                           f"{table.names[i_gate]!r}; pick two columns")
    return i_gate, i_value, i_second


def _value_unit(table: _TextTable, kind: str, i_value: int, units) -> tuple[float, str]:
    """The value column's scale to S (or A) and its unit, from the argument and/or the header."""
    path = table.path
    known, other = (_CONDUCTANCE_UNITS, _CURRENT_UNITS) if kind == "conductance" else (_CURRENT_UNITS, _CONDUCTANCE_UNITS)
    head_unit = table.units[i_value]
    if units is not None and head_unit is not None and _unit_key(units) != _unit_key(head_unit):
        raise CompareError(f"{path}: column {table.header[i_value]!r} says [{head_unit}] but {_arg('units')} "
                           f"{units!r} was passed; drop one of them")
    unit = units if units is not None else head_unit
    if unit is None:
        raise CompareError(
            f"{path}: the units of the {kind} column {table.names[i_value]!r} are not known; pass {_arg('units')} "
            f"(one of {', '.join(known)}) or write them in the header as '{table.names[i_value]} [unit]'"
        )
    key = _unit_key(unit)
    if key not in known:
        if key in other:
            hint = (f"{_arg('kind')} 'current' and {_arg('bias_V')}" if kind == "conductance"
                    else f"{_arg('kind')} 'conductance'")
            raise CompareError(f"{path}: the value column is in {unit!r}, which is not a {kind}; pass {hint}")
        raise CompareError(f"{path}: unknown {kind} unit {unit!r}; use one of {', '.join(known)}")
    return known[key], unit


def _numbers(table: _TextTable, columns: list) -> tuple[np.ndarray, np.ndarray]:
    """The chosen columns of every row as floats (rows x columns) and the rows' line numbers."""
    path, n_cols = table.path, table.n_columns
    data = np.empty((len(table.rows), len(columns)))
    for r, (line_no, cells) in enumerate(table.rows):
        if len(cells) != n_cols:
            raise CompareError(f"{path}, line {line_no}: {len(cells)} cell(s), expected {n_cols} "
                               f"({table.present()}); fix or remove the row")
        for c, i in enumerate(columns):
            cell = cells[i]
            try:
                value = float(cell)
            except ValueError:
                raise CompareError(f"{path}, line {line_no}: cell {cell!r} in column {table.names[i]!r} is not a "
                                   "number; fix or remove the row") from None
            if not math.isfinite(value):
                what = "NaN" if math.isnan(value) else "infinite"
                raise CompareError(f"{path}, line {line_no}: column {table.names[i]!r} is {what} ({cell!r}); remove "
                                   "the row or fill in the value")
            data[r, c] = value
    if len(table.rows) < MIN_TRACE_POINTS:
        raise CompareError(f"{path}: {len(table.rows)} data row(s), need at least {MIN_TRACE_POINTS}; check that the "
                           "file holds the whole trace")
    return data, np.array([no for no, _ in table.rows], dtype=int)


def _gate_order(path: Path, gate: np.ndarray, written, line_nos) -> slice:
    """The slice that makes the gate voltage increase; one-line errors for a repeated or turning gate voltage."""
    step = np.diff(gate)
    if np.any(step == 0.0):
        k = int(np.flatnonzero(step == 0.0)[0])
        raise CompareError(
            f"{path}, line {line_nos[k + 1]}: gate voltage {float(written[k + 1])!r} repeats line {line_nos[k]}; "
            f"average or remove repeated points (a trace must not revisit a gate voltage)"
        )
    direction = np.sign(step[0])
    turns = np.flatnonzero(np.sign(step) != direction)
    if turns.size:
        k = int(turns[0])
        sense = "rising" if direction > 0 else "falling"
        raise CompareError(
            f"{path}, line {line_nos[k + 1]}: gate voltage turns back ({float(written[k])!r} -> "
            f"{float(written[k + 1])!r} after {sense} from line {line_nos[0]}); split up and down sweeps into "
            "separate files"
        )
    return slice(None) if direction > 0 else slice(None, None, -1)
