"""Stored quantities as flat tables, for spreadsheets and lab software (``rgftrans export``).

A quantity of a result file has the dimensions ``(*sweep axes, energy,
*trailing)``; a selection fixes some of them to one value.  :func:`quantity_table`
turns what is left into a "long" table: one row per remaining element, one
column per dimension (its values, with units, or lead names) and one column
for the quantity in the file's own units.  Points of the sweep that are not
computed yet are left out.  Header cells read ``name [units]``, the form
:func:`rgftrans.io.traces.read_trace` reads back.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from rgftrans.errors import ExportError
from rgftrans.io.store import ResultData

__all__ = [ "Table", "quantity_table"]

#: Relative tolerance for matching a selected value to a stored one.
_MATCH_RTOL = 1e-9


@dataclass(frozen=True)
class Table:
    """A flat table: ``header[j]`` names column ``columns[j]`` (all of one length).

    Attributes
    ----------
    header : list of str
        ``"name [units]"`` per column (lead columns carry no units).
    columns : list of (n_rows,) ndarray
        Floats, or strings for lead names.
    skipped_points : int
        Sweep points inside the selection that are not computed and were left out.
    """

    header: list
    columns: list
    skipped_points: int

    @property
    def n_rows(self) -> int:
        return len(self.columns[0]) if self.columns else 0


def _dims(data: ResultData, quantity: str):
    """(name, coordinate values or None for lead dims, units) of every dimension of a quantity."""
    spec = data.quantity_specs[quantity]
    dims = [(a.name, a.values, a.units) for a in data.axes]
    dims.append(("energy", data.energies_meV, "meV"))
    for dim, size in spec.shape_tail:
        if dim in data.coordinates:
            c = data.coordinates[dim]
            dims.append((dim, c.values, c.units))
        elif dim == "lead" or dim.startswith("lead_"):
            dims.append((dim, None, ""))
        else:
            dims.append((dim, np.arange(size, dtype=float), "1"))
    return dims


def _match(data, name, values, units, wanted) -> int:
    where = data.path
    if values is None:  # a lead dimension: by name or index
        names = list(data.lead_names)
        if isinstance(wanted, str) and wanted in names:
            return names.index(wanted)
        raise ExportError(f"{where}: no lead {wanted!r} for {name}; the leads are {names}")
    try:
        value = float(wanted)
    except (TypeError, ValueError):
        raise ExportError(f"{where}: {name} = {wanted!r}; give a number in {units}") from None
    hit = np.flatnonzero(np.isclose(values, value, rtol=_MATCH_RTOL, atol=1e-12 * max(1.0, abs(value))))
    if not np.isfinite(value) or hit.size == 0:
        shown = np.array2string(np.asarray(values), threshold=8, precision=6)
        raise ExportError(f"{where}: {name} has no value {wanted!r} {units}; it holds {shown} {units}")
    return int(hit[0])


def quantity_table(data: ResultData, quantity: str, select: dict | None = None) -> Table:
    """A stored quantity, narrowed by ``select``, as a long table.

    Parameters
    ----------
    data : ResultData
    quantity : str
        A quantity of the file (e.g. ``"conductance"``, ``"transmission"``).
    select : dict, optional
        ``{dimension: value}``: a sweep axis, ``energy`` (meV), ``temperature``
        (K) or a lead dimension (``lead_in``, ``lead_out``, ``lead``: a lead
        name).  Each value must be one the file holds.

    Returns
    -------
    Table
    """
    if quantity not in data.quantities:
        raise ExportError(f"{data.path}: no quantity {quantity!r}; it holds {sorted(data.quantities)}")
    dims = _dims(data, quantity)
    names = [d[0] for d in dims]
    select = dict(select or {})
    unknown = [k for k in select if k not in names]
    if unknown:
        raise ExportError(f"{data.path}: {quantity} has no dimension {unknown[0]!r}; its dimensions are {names}")
    index = tuple(_match(data, name, values, units, select[name]) if name in select else slice(None)
                  for name, values, units in dims)
    array = np.asarray(data.quantities[quantity][index])
    kept = [d for d, i in zip(dims, index) if isinstance(i, slice)]
    # Sweep points not computed: drop their rows.
    n_axes = len(data.axes)
    done = np.asarray(data.completed[index[:n_axes]], dtype=bool)
    kept_axes = sum(isinstance(i, slice) for i in index[:n_axes])
    done_full = done.reshape(done.shape + (1,) * (array.ndim - kept_axes))
    mask = np.broadcast_to(done_full, array.shape).ravel()
    grids = np.meshgrid(*[np.arange(len(v) if v is not None else len(data.lead_names)) for _, v, _ in kept],
                        indexing="ij")
    header, columns = [], []
    for (name, values, units), grid in zip(kept, grids):
        flat = grid.ravel()[mask]
        if values is None:
            header.append(name)
            columns.append(np.asarray(data.lead_names, dtype=object)[flat])
        else:
            header.append(f"{name} [{units}]")
            columns.append(np.asarray(values, dtype=float)[flat])
    units = data.quantity_specs[quantity].units
    header.append(f"{quantity} [{units}]")
    columns.append(array.ravel()[mask])
    return Table(header=header, columns=columns, skipped_points=int(done.size - np.count_nonzero(done)))
