"""Dark-state searches of stored sweeps: from a result file to builders, and search results back into it.

The searches themselves (:mod:`rgftrans.analysis.darkstates` along one
parameter, :mod:`rgftrans.analysis.bic2d` over a plane) take builders of
models and know nothing of files.  Here a stored sweep becomes such a builder
(its config text rebuilds the device at any parameter value), its stored
energies and open-channel counts decide where a search may look, and the
searches' results are written back as groups of the result file.
"""

from __future__ import annotations

import warnings
from collections.abc import Callable
from dataclasses import dataclass, field, replace

import numpy as np

from rgftrans.analysis.bic2d import GridSearch, plane_seeds, search_grid
from rgftrans.analysis.darkstates import (Track, coupling_diagnostics, find_resonances, follow_at, inside_window,
                                          locate_bic, progress_bar, track_resonance)
from rgftrans.errors import ResolutionWarning, RgftransError, SearchFailed
from rgftrans.io.config import parse_config
from rgftrans.io.store import StoredArray, StoredGroup, read_result, write_group

__all__ = ["stored_model", "SweepSearch", "search_sweep", "write_search", "stored_energy_window", "stored_plane_builder",
           "single_channel_energies", "search_sweep_plane", "write_grid_search"]

def stored_model(data, point: dict[str, float]):
    """The discretised device of a stored sweep at one parameter point (config paths to values; others as stored).

    The result file's own config text rebuilds the device, so a figure or a check at a found parameter value
    uses exactly the model the sweep computed.
    """
    cfg = parse_config(data.config_text, source=str(data.path))
    return cfg.build_device({**cfg.base_point(), **point}).discretise()


def stored_energy_window(data) -> tuple[float, float]:
    """``(lo, hi)`` meV: the stored energies of a result (a search trusts nothing outside them)."""
    e = np.asarray(data.energies_meV, float)
    return float(e.min()), float(e.max())


def _stored_points(data, quantity: str) -> np.ndarray:
    """(*axis sizes) bool: completed points whose ``quantity`` holds any computed (finite, non-negative) value."""
    q = np.asarray(data.quantities[quantity])
    per_point = q.reshape(*data.completed.shape, -1)
    ok = np.isfinite(per_point) if q.dtype.kind in "fc" else per_point >= 0
    return np.asarray(data.completed, bool) & ok.any(axis=-1)


@dataclass(frozen=True, eq=False)
class SweepSearch:
    """Dark-state search over one axis of a stored sweep.

    Attributes
    ----------
    axis_name : str
        Sweep parameter (dotted config path).
    track : Track
        The followed resonance at the stored parameter values (NaN where not computed).
    bics : list of BicLocation
        Located width zeros (refined between stored points); those outside the
        stored energies carry ``outside_stored_energies``.
    diagnostics : list of CouplingDiagnostics
        One per BIC, at its parameter and energy.
    nearby_q : list of (3,) float
        Q factors at p* - d, p* + d and p* + 2d (d = stored step / 20): how Q falls away from the BIC.
    energy_window : (float, float)
        The stored energies (meV) the pole was followed in.
    left_window : list of (float, float)
        ``(parameter, Re z)`` where the pole left the stored energies and following stopped
        (the same as ``track.stopped_at``).
    axis_units : str
        Units of the sweep parameter.
    """

    axis_name: str
    track: Track
    bics: list
    diagnostics: list
    nearby_q: list
    energy_window: tuple = (-np.inf, np.inf)
    left_window: list = field(default_factory=list)
    axis_units: str = ""

    @property
    def valid_points(self) -> int:
        """Parameter values where the pole was computed (NaN values do not count)."""
        return int(np.count_nonzero(self.track.valid))


def search_sweep(path, *, energy_guess: float | None = None, axis: int = 0, min_drop_orders: float = 2.0,
                 rtol: float = 1e-6, progress: bool = True) -> SweepSearch:
    """Find bound states in the continuum along one axis of a stored sweep.

    The narrowest resonance seen in the stored T(E) (Fano fits) seeds a pole
    track across the stored parameter values; every interior minimum of its
    width at least ``min_drop_orders`` decades below the median width is
    refined with :func:`locate_bic` and explained with
    :func:`coupling_diagnostics`.

    The pole is followed only inside the stored energies: where it leaves
    them following stops (``left_window``), and a BIC located outside them
    is flagged (``outside_stored_energies``), never reported as an ordinary
    find.  ``progress`` shows a progress bar on standard error for searches
    longer than PROGRESS_DELAY_S.

    Raises
    ------
    RgftransError
        No sweep axis, or ``energy_guess`` outside the stored energies.
    SearchFailed
        Nothing valid: no stored point holds a computed transmission, or the
        pole could not be computed at any parameter value.
    """

    data = read_result(path)
    if not data.axes:
        raise RgftransError(f"{path}: the result has no sweep axis; a dark-state search follows a resonance along one")
    if not _stored_points(data, "transmission").any():
        raise SearchFailed(f"{path}: no sweep point holds a computed transmission (every stored value is NaN or "
                           "not written); nothing to search -- run or resume the sweep first")
    cfg = parse_config(data.config_text, source=str(path))
    cfg_axes = cfg.axes()
    if isinstance(axis, bool) or not isinstance(axis, (int, np.integer)) or not 0 <= axis < len(cfg_axes):
        raise RgftransError(f"{path}: axis {axis!r} does not exist; the sweep has {len(cfg_axes)} axis(es), "
                            f"0..{len(cfg_axes) - 1} ({', '.join(a.parameter for a in cfg_axes)})")
    name = cfg_axes[axis].parameter
    values = np.asarray(cfg_axes[axis].values, float)
    base = cfg.base_point()
    window = stored_energy_window(data)

    def build(p):
        return cfg.build_device({**base, name: float(p)}).discretise()

    trans = np.moveaxis(data.quantities["transmission"][..., 1, 0], axis, 0)
    trans = trans.reshape(len(values), -1, trans.shape[-1])[:, 0, :]
    energies = data.energies_meV
    if energy_guess is None:
        best = None
        for k, row in enumerate(trans):
            if not np.all(np.isfinite(row)):
                continue
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", ResolutionWarning)
                for fit in find_resonances(energies, row):
                    if best is None or fit.width_meV < best[1].width_meV:
                        best = (k, fit)
        if best is None:
            raise RgftransError(f"{path}: no resonance found in the stored T(E); give --energy to start the search")
        k0, energy_guess = best[0], best[1].energy_meV
    else:
        if not inside_window(energy_guess, window):
            raise RgftransError(f"{path}: the start energy {energy_guess:.6g} meV is outside the stored energies "
                                f"{window[0]:.6g}..{window[1]:.6g} meV; give --energy inside them or sweep a wider "
                                "energy window")
        k0 = 0
    # Track from the seed outwards in both directions, so the identity is kept from a well-defined start.
    with progress_bar(len(values) + 1, "following the pole", "value", progress) as bar:
        fwd = track_resonance(build, values[k0:], energy_guess, energy_window=window, on_step=bar.update)
        bwd = track_resonance(build, values[:k0 + 1][::-1], energy_guess, energy_window=window, on_step=bar.update)
    order = np.concatenate([np.arange(k0 + 1)[::-1], np.arange(k0 + 1, len(values))])
    joined = {f: np.concatenate([getattr(bwd, f), getattr(fwd, f)[1:]]) for f in
              ("parameters", "energies_meV", "widths_meV", "q_factors", "in_continuum")}
    sort = np.argsort(order)
    stopped = sorted(set(bwd.stopped_at + fwd.stopped_at))
    track = Track(**{f: v[sort] for f, v in joined.items()}, stopped_at=tuple(stopped))
    if not track.valid.any():
        where = (f"; the pole left the stored energies {window[0]:.6g}..{window[1]:.6g} meV at once"
                 if stopped else "")
        raise SearchFailed(f"{path}: the resonance near {energy_guess:.6g} meV could not be computed at any of the "
                           f"{len(values)} values of {name}{where}; give --energy near another resonance")
    left = list(stopped)
    widths = track.widths_meV
    valid = track.valid
    floor = np.median(widths[valid & (widths > 0)]) if np.any(valid & (widths > 0)) else 0.0
    bics, diags, nearby = [], [], []
    candidates = [k for k in range(1, len(values) - 1)
                  if valid[k - 1:k + 2].all() and widths[k] <= widths[k - 1] and widths[k] <= widths[k + 1]
                  and track.in_continuum[k] and widths[k] < floor * 10 ** (-min_drop_orders)]
    with progress_bar(None, "refining width zeros", "solve", progress and bool(candidates)) as bar:
        for k in candidates:
            loc = locate_bic(build, values[k - 1], values[k + 1], track.energies_meV[k], rtol=rtol,
                             on_solve=bar.update)
            loc = replace(loc, outside_stored_energies=not inside_window(loc.energy_meV, window))
            p_star = loc.parameter if np.ndim(loc.parameter) == 0 else values[k]
            bics.append(loc)
            diags.append(coupling_diagnostics(build(p_star), loc.energy_meV))
            d = (values[k + 1] - values[k]) / 20
            nearby.append(np.array([follow_at(build, p_star + s * d, loc.energy_meV).q_factor for s in (-1, 1, 2)]))
    return SweepSearch(axis_name=name, track=track, bics=bics, diagnostics=diags, nearby_q=nearby,
                       energy_window=window, left_window=left, axis_units=str(data.axes[axis].units or ""))


def write_search(search: SweepSearch, path, *, group: str = "darkstates", overwrite: bool = False) -> None:
    """Store a search in its own group of an rgftrans HDF5 file (the result file, or a new file).

    Track values that were not computed are NaN; the group's attributes say
    over how many values the pole was computed, the stored energy window and
    where following stopped.  A BIC outside the stored energies has
    ``outside_stored_energies = True``.  Written by :func:`rgftrans.io.store.write_group`:
    an existing group is refused unless ``overwrite``.
    """
    t = search.track
    track = {key: StoredArray(arr, units, long) for key, arr, units, long in (
        ("parameter", t.parameters, search.axis_units, f"sweep parameter {search.axis_name}"),
        ("energy", t.energies_meV, "meV", "resonance energy Re z (NaN: not computed)"),
        ("width", t.widths_meV, "meV", "resonance width -2 Im z (NaN: not computed)"),
        ("q_factor", t.q_factors, "1", "quality factor Re z / width"))}
    items = {"track": StoredGroup(track)}
    for i, (loc, diag, q) in enumerate(zip(search.bics, search.diagnostics, search.nearby_q)):
        items[f"bic_{i}"] = StoredGroup(
            {key: StoredArray(np.asarray(val, float), units, key.replace("_", " ")) for key, val, units in (
                ("parameter", loc.parameter, search.axis_units), ("energy", loc.energy_meV, "meV"),
                ("width", loc.width_meV, "meV"), ("typical_width", loc.typical_width_meV, "meV"),
                ("orders_of_magnitude", loc.orders_of_magnitude, "1"), ("exponent", loc.exponent, "1"),
                ("nearby_q", q, "1"), ("coupling_mismatch", diag.coupling_mismatch, "1"),
                ("degeneracy_residual", diag.degeneracy_residual, "1"))},
            attrs={"kind": loc.kind, "verdict": diag.verdict,
                   "outside_stored_energies": bool(loc.outside_stored_energies)})
    attrs = {"axis": search.axis_name, "long_name": "dark-state (BIC) search along one sweep axis",
             "valid_points": search.valid_points, "total_points": len(search.track.parameters),
             "stored_energy_window_meV": np.asarray(search.energy_window, float),
             "stopped_at": np.asarray([p for p, _ in search.left_window], float)}
    write_group(path, group, items, attrs=attrs, overwrite=overwrite)


def stored_plane_builder(path, data=None):
    """(result data, build(p1, p2), axis names, axis values) of a stored sweep over two parameters.

    ``data`` is the already-read result of ``path`` (read here when not given).
    """

    data = read_result(path) if data is None else data
    if len(data.axes) != 2:
        raise RgftransError(f"{path}: the result has {len(data.axes)} sweep axes; a plane search needs exactly two "
                            "(sweep two gate voltages, say, or use the search along one axis)")
    cfg = parse_config(data.config_text, source=str(path))
    axes = cfg.axes()
    names = (axes[0].parameter, axes[1].parameter)
    base = cfg.base_point()

    def build(a, b):
        return cfg.build_device({**base, names[0]: float(a), names[1]: float(b)}).discretise()

    return data, build, names, (np.asarray(axes[0].values, float), np.asarray(axes[1].values, float))


def single_channel_energies(data) -> np.ndarray:
    """(n_E,) bool: stored energies at which every lead has exactly one open channel at every computed point.

    ``data`` is a :class:`~rgftrans.io.store.ResultData` with the ``n_open``
    quantity (open channels per lead, per point and energy, -1 where not written).
    """
    n_open = np.asarray(data.quantities["n_open"])
    per = n_open[_stored_points(data, "n_open")]  # (n_points, n_E, n_leads)
    if per.shape[0] == 0:
        return np.zeros(len(data.energies_meV), bool)
    return (per == 1).all(axis=(0, 2))


def _energy_runs(energies: np.ndarray, mask: np.ndarray) -> str:
    """The energies selected by ``mask`` as contiguous ranges of the stored grid, e.g. '0.4..0.98 meV'."""
    runs, k = [], 0
    while k < len(mask):
        if mask[k]:
            j = k
            while j + 1 < len(mask) and mask[j + 1]:
                j += 1
            runs.append(f"{energies[k]:.4g}" if j == k else f"{energies[k]:.4g}..{energies[j]:.4g}")
            k = j + 1
        else:
            k += 1
    return ", ".join(runs) + " meV"


def _channel_counts(per: np.ndarray, lead_names) -> str:
    """Open channels of each lead over the given points and energies, e.g. '4 (lead L) and 3-4 (lead R)'."""
    parts = []
    for k, name in enumerate(lead_names):
        vals = per[..., k][per[..., k] >= 0]
        lo, hi = (int(vals.min()), int(vals.max())) if vals.size else (-1, -1)
        parts.append(f"{lo if lo == hi else f'{lo}-{hi}'} (lead {name})")
    return ", ".join(parts[:-1]) + " and " + parts[-1] if len(parts) > 1 else parts[0]


def _check_channels(path, data, energy_guess):
    """Refuse a stored window without one open channel per lead (RgftransError); return the energies to search
    (a (n_E,) bool mask) and notes on what was left out."""
    e = np.asarray(data.energies_meV, float)
    lo, hi = stored_energy_window(data)
    names = tuple(data.lead_names)
    if len(names) != 2:
        raise RgftransError(f"{path}: the two-parameter search needs two leads with one open channel each; this "
                            f"sweep has {len(names)} lead(s) ({', '.join(names)}); use the search along one axis")
    if "n_open" not in data.quantities:
        return np.ones(len(e), bool), ("the file stores no open-channel counts: the channel count is checked "
                                       "only while following",)
    per = np.asarray(data.quantities["n_open"])[_stored_points(data, "n_open")]
    one = single_channel_energies(data)
    which = (f"the stored energies {_energy_runs(e, one)} have one" if one.any() else
             "no stored energy has one (sweep energies between the first and second channel thresholds of both "
             "leads)")
    need = "the two-parameter search needs one open channel per lead"
    if energy_guess is not None:
        if not lo <= energy_guess <= hi:
            return one, (f"the start energy {energy_guess:.6g} meV is outside the stored energies {lo:.6g}..{hi:.6g}"
                         " meV: its channel count is checked only while following, and BICs outside the stored "
                         "energies are flagged",)
        k = int(np.argmin(np.abs(e - energy_guess)))
        if not one[k]:
            raise RgftransError(f"{path}: {need}; at {e[k]:.6g} meV (the stored energy nearest --energy "
                                f"{energy_guess:.6g}) the leads have {_channel_counts(per[:, k], names)}; {which}")
        return one, ()
    if not one.any():
        raise RgftransError(f"{path}: {need}; the window {lo:.6g}..{hi:.6g} meV has {_channel_counts(per, names)}; "
                            f"{which}")
    if one.all():
        return one, ()
    many = ~one
    return one, (f"the stored energies {_energy_runs(e, many)} have more than one open channel in some lead "
                 f"({_channel_counts(per[:, many], names)}) and were left out; {which}",)


def search_sweep_plane(path, *, energy_guess: float | None = None, rtol: float = 1e-6,
                       report: Callable[[str], None] | None = None, progress: bool = True,
                       stored=None) -> GridSearch:
    """Search a stored sweep over two parameters for accidental BICs.

    Every closed-dot level at the centre of the grid inside the stored
    energies where both leads have one open channel (the stored ``n_open``,
    at every computed point) is followed over the grid (or only the one
    nearest ``energy_guess``); cells around which its two coupling residuals
    wind once are refined with :func:`locate_bic_2d`.  ``stored`` is the
    result of :func:`stored_plane_builder` for ``path``, if the caller has it;
    ``report`` and ``progress`` as in :func:`search_grid`.

    Raises
    ------
    RgftransError
        Not two leads, or the stored window (or the stored energy nearest
        ``energy_guess``) has more than one open channel in a lead: the message
        gives the channel counts and the stored energies that have one.
    SearchFailed
        Nothing valid: no computed sweep point is stored, or no grid point gave
        two computed residuals.
    """
    data, build, names, (p1, p2) = stored if stored is not None else stored_plane_builder(path)
    key = "n_open" if "n_open" in data.quantities else "transmission"
    if not _stored_points(data, key).any():
        raise SearchFailed(f"{path}: no sweep point holds computed values (every stored {key} is missing or NaN); "
                           "nothing to search -- run or resume the sweep first")
    one, notes = _check_channels(path, data, energy_guess)
    window = stored_energy_window(data)
    centre = build(p1[len(p1) // 2], p2[len(p2) // 2])
    if energy_guess is not None:
        seeds = np.array([float(energy_guess)])
    else:
        e = np.asarray(data.energies_meV, float)
        seeds, k = [], 0
        while k < len(one):  # each run of single-channel stored energies
            if one[k]:
                j = k
                while j + 1 < len(one) and one[j + 1]:
                    j += 1
                seeds.extend(plane_seeds(centre, float(e[k]), float(e[j])))
                k = j + 1
            else:
                k += 1
        seeds = np.array(seeds)
        if seeds.size == 0:
            raise RgftransError(f"{path}: no dot level in the stored energy window has one open channel in each of "
                                "the two leads; widen the window or give --energy")
    if report:
        report(f"following {len(seeds)} dot state(s) over the {len(p1)} x {len(p2)} grid of {names[0]}, {names[1]}")
    search = search_grid(build, p1, p2, seeds, names=names, rtol=rtol, report=report, progress=progress,
                         energy_window=window)
    if not search.valid_points.any():
        raise SearchFailed(f"{path}: no grid point gave two computed coupling residuals for the {len(seeds)} "
                           f"followed state(s) (every value NaN: the state was lost or not in a one-channel "
                           "window); nothing found -- give --energy near another dot state")
    return replace(search, notes=tuple(notes))


def write_grid_search(search: GridSearch, path, *, group: str = "darkstates", energy_units: str = "meV",
                      energy_name: str = "energy", parameter_units: tuple[str, str] = ("", ""),
                      overwrite: bool = False) -> None:
    """Store a plane search in its own group of an rgftrans HDF5 file (the result file, or a new file).

    ``energy_units`` and ``energy_name`` label the eigenvalue axis (energies,
    widths) and ``parameter_units`` the two parameters; they come from the
    caller: meV for an electronic device, ``"1"`` for the dimensionless
    ``lambda = (k0 a)^2`` of a waveguide.  Residuals not computed are NaN;
    ``valid_points`` (per seed) counts the rest.  A BIC outside the stored
    energies has ``outside_stored_energies = True``.  Written by
    :func:`rgftrans.io.store.write_group`: an existing group is refused unless ``overwrite``.
    """
    attrs = {"kind": "plane", "axes": " ".join(search.names),
             "long_name": "dark-state (BIC) search over a plane of two sweep parameters",
             "channels": " ".join(f"{lead}:{c}" for lead, c in search.channels),
             "notes": " | ".join(search.notes)}
    if search.energy_window is not None:
        attrs["stored_energy_window"] = np.asarray(search.energy_window, float)
    items = {key: StoredArray(arr, units, long) for key, arr, units, long in (
        ("p1", search.p1, parameter_units[0], f"sweep parameter {search.names[0]}"),
        ("p2", search.p2, parameter_units[1], f"sweep parameter {search.names[1]}"),
        ("seed_energy", search.seeds_meV, energy_units, f"{energy_name} of each followed dot state at the grid centre"),
        ("residuals", search.residuals, "1",
         "signed unit-normalised coupling of the followed state to each open channel (seed, p1, p2, channel);"
         " NaN: not computed"),
        ("valid_points", search.valid_points, "1", "grid points with computed residuals, per seed"),
        ("energy", search.energies_meV, energy_units,
         f"self-consistent {energy_name} of the followed state (seed, p1, p2)"))}
    p_units = parameter_units[0] if parameter_units[0] == parameter_units[1] else ", ".join(parameter_units)
    for i, (bic, seed) in enumerate(zip(search.bics, search.seed_of_bic)):
        items[f"bic_{i}"] = StoredGroup(
            {key: StoredArray(np.asarray(val, float), units, long) for key, val, units, long in (
                ("parameter", bic.parameter, p_units, f"({search.names[0]}, {search.names[1]})"),
                ("energy", bic.energy_meV, energy_units, energy_name),
                ("width", bic.width_meV, energy_units, f"pole width (in {energy_name})"),
                ("typical_width", bic.typical_width_meV, energy_units, "typical width one grid step away"),
                ("orders_of_magnitude", bic.orders_of_magnitude, "1", "orders of magnitude"),
                ("exponent", bic.exponent, "1", "exponent"), ("nearby_q", bic.nearby_q, "1", "nearby q"),
                ("residual", bic.residual, "1", "residual"), ("state", bic.state, "1", "state"))},
            attrs={"kind": bic.kind, "seed": int(seed), "explanation": bic.explanation,
                   "outside_stored_energies": bool(bic.outside_stored_energies)})
    write_group(path, group, items, attrs=attrs, overwrite=overwrite)
