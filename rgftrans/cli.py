"""The ``rgftrans`` command line.

Subcommands::

    rgftrans check CONFIG [--draw PNG]      validate a config, discretise it, report (and draw) the device
    rgftrans run CONFIG [options]           run or resume the config's sweep into its HDF5 file
    rgftrans info RESULT                    summary of a result file
    rgftrans plot RESULT [--out PNG]        conductance lines or maps from a result file
    rgftrans export RESULT [options]        a stored quantity as CSV (spreadsheets, lab software)
    rgftrans darkstates RESULT              locate bound states in the continuum in a stored sweep
    rgftrans compare RESULT TRACE [options] fit a stored sweep to a measured conductance trace
    rgftrans waveguide CONFIG               light in a metal-walled waveguide: spectrum, field, dark modes

Exit status: 0 success; 1 the computation failed or was interrupted (finished
points are kept; rerun to resume); 2 bad input (config, file, arguments),
reported in one line on standard error.
"""

from __future__ import annotations

import argparse
import re
import sys
from contextlib import contextmanager
import warnings
from pathlib import Path

from rgftrans import __version__

EXIT_OK, EXIT_FAILED, EXIT_BAD_INPUT = 0, 1, 2


class _Parser(argparse.ArgumentParser):
    def error(self, message):  # argparse's own errors: one line, exit status 2
        self.exit(EXIT_BAD_INPUT, f"{self.prog}: error: {message} (see --help)\n")


class _WarningPrinter:
    """Each distinct warning once, as one line on standard error (no source lines).

    Warnings that differ only in their numbers (the same problem at another
    sweep point or energy) count as one: the first is printed, the rest are
    counted and summarised when the command ends.
    """

    _NUMBER = re.compile(r"[-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?")

    def __init__(self):
        self.seen: dict = {}

    def show(self, message, category, filename, lineno, file=None, line=None):
        key = (category, self._NUMBER.sub("#", " ".join(str(message).split())))
        if key in self.seen:
            self.seen[key] += 1
            return
        self.seen[key] = 0
        print(f"rgftrans: warning: {' '.join(str(message).split())}", file=sys.stderr)

    def summary(self) -> None:
        repeats = sum(self.seen.values())
        if repeats:
            print(f"rgftrans: warning: {repeats} more warning(s) like those above (other points or energies) "
                  "were not repeated", file=sys.stderr)


@contextmanager
def one_line_warnings():
    """Within the block, every warning prints as one line, each distinct one once (see :class:`_WarningPrinter`).

    The command line runs every command inside it; scripts that drive rgftrans can do the same.
    """
    with warnings.catch_warnings():
        printer = _WarningPrinter()
        warnings.simplefilter("always")  # the printer dedupes; Python's registry would hide repeats from it
        warnings.showwarning = printer.show
        try:
            yield printer
        finally:
            printer.summary()


def _refuse_waveguide(path) -> None:
    from rgftrans.errors import ConfigError
    from rgftrans.io.waveguide_config import is_waveguide_config

    if is_waveguide_config(path):
        raise ConfigError(f"{path}: this is a waveguide config ([waveguide] table); run it with "
                          f"'rgftrans waveguide {path}'")


def _window_poles(cfg, model):
    """The model's resonance poles in the config's energy window (None for a single energy)."""
    from rgftrans.spectra.poles import window_poles

    energies = cfg.energies()
    return window_poles(model, (energies[0], energies[-1])) if energies.size > 1 else None


def _check_grid(cfg, model, poles) -> None:
    """Warnings about an energy grid too coarse for the configured temperatures or the model's resonances."""
    from rgftrans.analysis.resolution import warn_energies_outside_leads, warn_unresolved_resonances
    from rgftrans.analysis.thermal import warn_grid_for_temperatures

    energies = cfg.energies()
    warn_energies_outside_leads(model, energies)
    warn_grid_for_temperatures(energies, cfg.temperatures())
    if cfg.energy.refine_tolerance is None and poles is not None:
        warn_unresolved_resonances(model, energies, poles=poles)


def _print_regime(cfg, device, model, poles) -> None:
    """The dot's regime (coherent or Coulomb blockade) in words, for continuum models with a material."""
    from rgftrans.analysis.regime import regime_estimate

    if model.spacing_nm is None:  # lattice models in their own units: no charging-energy estimate
        return
    energies = cfg.energies()
    temps = cfg.temperatures()
    layout_e_c = None
    if cfg.gates is not None and cfg.charge_regions():
        import warnings

        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # an open region is reported with the capacitances below
            caps = cfg.capacitances()
        layout_e_c = (float(caps.charging_energy_meV[0]), float(caps.total_aF[0]),
                      f"region {caps.region_names[0]!r} from the layout's electrostatics")
    est = regime_estimate(device, model, fermi_energy=cfg.fermi_energy_meV,
                          temperature_K=float(temps.min()) if temps.size else 0.0,
                          energy_window=(float(energies[0]), float(energies[-1])), poles=poles, warn=False,
                          charging_energy=layout_e_c)
    lines = est.lines()
    print(f"  regime: {lines[0]}")
    for line in lines[1:-1]:
        print(f"    {line}")
    print(f"    {'WARNING: ' if est.coulomb_blockade else ''}{est.verdict}")


def _check_figure_suffix(path: str) -> None:
    """One-line error for a figure file name whose suffix matplotlib cannot write, before any computing."""
    from rgftrans.errors import RgftransError

    suffix = Path(path).suffix.lower().lstrip(".")
    if suffix not in _FIGURE_SUFFIXES:
        raise RgftransError(f"{path}: cannot draw a figure to a '.{suffix}' file; end the name in one of "
                            f"{', '.join('.' + s for s in sorted(_FIGURE_SUFFIXES))}")


#: Figure formats matplotlib's Agg and vector back-ends write.
_FIGURE_SUFFIXES = frozenset({"png", "pdf", "svg", "svgz", "eps", "ps", "jpg", "jpeg", "tif", "tiff", "webp"})


def _say_where_written(config: str, output: str | Path) -> None:
    """Print where a config makes us write when that is outside the config's own folder."""
    base = Path(config).resolve().parent
    target = Path(output)
    target = (target if target.is_absolute() else Path.cwd() / target).resolve()
    if base != target.parent and base not in target.parents:
        print(f"  note: writing outside the config's folder: {target}")


def _save(fig, path, **kwargs) -> None:
    """Write a figure and close it (commands run in one process, e.g. from the demo, must not pile up figures)."""
    import matplotlib.pyplot as plt

    fig.savefig(path, **kwargs)
    plt.close(fig)


def _positive_int(text: str) -> int:
    """argparse type: a whole number >= 1."""
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"must be a whole number >= 1, got {text!r}") from None
    if value < 1:
        raise argparse.ArgumentTypeError(f"must be a whole number >= 1, got {value}")
    return value


def _scheduler_address(text: str) -> str:
    """argparse type: a Dask scheduler address protocol://host:port."""
    from rgftrans.io.config import is_scheduler_address

    if not is_scheduler_address(text):
        raise argparse.ArgumentTypeError(f"not a scheduler address, got {text!r}; write protocol://host:port, "
                                         "e.g. tcp://127.0.0.1:8786")
    return text


def _print_screening(cfg) -> None:
    """The gates' electrostatics in words: which model, and with screening the grid, the 2DEG under each gate
    and the voltage at which it depletes there (at the config's voltages)."""
    if cfg.gates is None:
        return
    if cfg.gates.screening != "thomas-fermi":
        print("  gates: bare potential of the gates, not screened by the 2DEG (screening = \"none\"); a real device "
              "needs larger voltages for the same barriers")
        return
    hs = cfg.heterostructure()
    layout = cfg.gate_layout().with_voltages(cfg.gates.voltages())
    import math

    from rgftrans.electrostatics.screening import DEPLETED_FRACTION, DEPLETION_SEARCH_FACTOR, depletion_voltage

    sol = cfg.screened(layout)
    _, h = cfg.screening_grid()
    statistics = "T = 0" if hs.temperature_K == 0 else f"Fermi-Dirac at {hs.temperature_K:g} K"
    print(f"  gates: screened by the 2DEG (Thomas-Fermi, {statistics}, {hs.surface} surface; "
          f"n0 = {hs.density_cm2:.3g} cm^-2, mu = {hs.fermi_energy_meV:.3g} meV), grid {sol.x_nm.size} x "
          f"{sol.y_nm.size} at {h:g} nm, "
          f"{sol.iterations} iterations; a wide gate would deplete the 2DEG at {hs.depletion_voltage_V():.3f} V")
    extent, _ = cfg.screening_grid()
    wide = hs.depletion_voltage_V()
    for gate in layout.gates:
        px, py = gate.shape.geometry.representative_point().coords[0]
        n_here = _density_at(sol, px, py)
        state = "depleted" if n_here <= DEPLETED_FRACTION * hs.density_cm2 else f"{n_here:.3g} cm^-2"
        v_dep = depletion_voltage(layout, hs, gate.name, extent_nm=extent, spacing_nm=h, initial=sol)
        if math.isinf(v_dep):
            where = ("not depleted down to " if v_dep < 0 else "depleted by its neighbours even at ") + \
                f"{DEPLETION_SEARCH_FACTOR * wide:+.3f} V"
        else:
            where = f"depletes at {v_dep:+.3f} V ({v_dep / wide:.2f} x the wide-gate value)"
        print(f"    gate {gate.name!r} at {gate.voltage:+.3f} V: 2DEG under it {state}; {where}")


def _print_capacitances(cfg) -> None:
    """The named regions' capacitance matrix, lever arms and charging energies (config voltages)."""
    import warnings

    if cfg.gates is None or not cfg.charge_regions():
        return
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # said below, from the result (it may come from the cache)
        result = cfg.capacitances()
    print("  capacitances at these voltages (Thomas-Fermi response; constant-interaction model):")
    for line in result.summary().splitlines():
        print(f"    {line}")
    names = result.region_names
    print("    capacitance matrix C (aF), rows and columns " + ", ".join(map(repr, names)) + ": " +
          "; ".join(" ".join(f"{v:.4g}" for v in row) for row in result.capacitance_matrix_aF))
    for name, closed, n in zip(result.region_names, result.closed, result.electron_number):
        if not closed:
            print(f"    note: region {name!r} is open: its 2DEG connects to the reservoirs through undepleted 2DEG, "
                  "so its charge is not quantised and a charging energy describes it only roughly; close its "
                  "barriers (more negative voltages) for the numbers of a Coulomb-blockaded dot")
        if n < 2.0:
            print(f"    note: region {name!r} holds only {n:.2g} electrons: a continuum (Thomas-Fermi) description "
                  "of so few is rough, and its capacitances are too")


def _density_at(solution, x, y) -> float:
    """Density (cm^-2) at the grid node nearest (x, y) nm."""
    import numpy as np

    i = int(np.argmin(np.abs(solution.y_nm - y)))
    j = int(np.argmin(np.abs(solution.x_nm - x)))
    return float(solution.density_cm2[i, j])


def _cmd_check(args) -> int:
    import numpy as np

    from rgftrans.io.config import load_config
    from rgftrans.system.device import check_resolution
    from rgftrans.transport.rgf import layer_blocks
    from rgftrans.leads.embedding import lead_self_energies

    _refuse_waveguide(args.config)
    if args.draw:
        _check_figure_suffix(args.draw)
    cfg = load_config(args.config)
    estimate = cfg.estimate()
    estimate.refuse_if_too_big(cfg.output.path)
    n_geometries = cfg.check_geometries()
    device = cfg.build_device(cfg.base_point())
    model = device.discretise()
    check_resolution(model, cfg.energies())  # the warning run would give, here before any computing
    poles = _window_poles(cfg, model)
    _check_grid(cfg, model, poles)
    blocks = layer_blocks(model)
    energies = cfg.energies()
    axes = cfg.axes()
    n_points = int(np.prod([len(ax.values) for ax in axes])) if axes else 1
    print(f"{args.config}: valid")
    print(f"  device: {model.n_sites} sites ({model.norbs} orbital(s) each), lattice {cfg.lattice.kind} "
          f"a = {cfg.lattice.spacing_nm:g} nm, t = {device.t:.5g} meV")
    print(f"  slicing: {blocks.slicing.n_layers} layers, largest {blocks.slicing.max_width} orbitals")
    _, modes = lead_self_energies(model, float(energies[len(energies) // 2]), warn=False)
    for lead, m in zip(model.leads, modes):
        print(f"  lead {lead.name!r}: {len(lead.cell_positions)} sites across, {m.n_open} open channel(s) at "
              f"E = {energies[len(energies) // 2]:.4g} meV")
    if cfg.fermi_energy_meV is not None:
        print(f"  Fermi energy {cfg.fermi_energy_meV:.4f} meV")
    print(f"  energies: {len(energies)} from {energies[0]:.4g} to {energies[-1]:.4g} meV")
    for ax in axes:
        print(f"  sweep axis {ax.name}: {len(ax.values)} values from {ax.values[0]:.4g} to {ax.values[-1]:.4g} "
              f"{ax.units}")
    print(f"  {n_points} parameter point(s) x {len(energies)} energies -> {cfg.output.path}")
    if n_geometries > 1:
        print(f"  {n_geometries} distinct geometries along the sweep, each checked")
    for line in estimate.lines():
        print(f"  estimate: {line}")
    _say_where_written(args.config, cfg.output.path)
    _print_regime(cfg, device, model, poles)
    _print_screening(cfg)
    _print_capacitances(cfg)
    if args.draw:
        import matplotlib

        matplotlib.use("Agg")
        from rgftrans.plots.figures import plot_device

        fig, ax = plot_device(model, device=device)
        ax.set_title(Path(args.config).name)
        Path(args.draw).parent.mkdir(parents=True, exist_ok=True)
        _save(fig, args.draw, dpi=150)
        print(f"  drawn to {args.draw}")
    return EXIT_OK


def _cmd_run(args) -> int:
    from rgftrans.io.config import load_config
    from rgftrans.io.sweeps import run_sweep

    _refuse_waveguide(args.config)
    cfg = load_config(args.config)
    output = args.output or cfg.output.path
    if Path(output).suffix.lower() not in (".h5", ".hdf5"):
        from rgftrans.errors import StoreError

        raise StoreError(f"{output}: the result file is HDF5; end its name in .h5")
    cfg.estimate(args.workers).refuse_if_too_big(output)
    cfg.check_geometries()
    device = cfg.build_device(cfg.base_point())
    model = device.discretise()
    _say_where_written(args.config, output)
    print(f"{args.config}: coherent single-particle transport (Landauer); no charging energy")
    poles = _window_poles(cfg, model)
    _check_grid(cfg, model, poles)
    _print_regime(cfg, device, model, poles)
    report = run_sweep(cfg, overwrite=args.overwrite or None, quiet=args.quiet, workers=args.workers,
                       address=args.cluster, path=args.output)
    print(f"{report.path}: {report.n_points} point(s), {report.n_computed} computed now, "
          f"{report.n_resumed} already done, {report.seconds:.1f} s")
    return EXIT_OK


def _cmd_info(args) -> int:
    from rgftrans.io.store import summary

    print(summary(args.result))
    return EXIT_OK


def _cmd_plot(args) -> int:
    import matplotlib

    matplotlib.use("Agg")
    from rgftrans.plots.figures import plot_result

    fig, _ = plot_result(args.result, lead_out=args.lead_out, lead_in=args.lead_in, energy=args.energy,
                         temperature_K=args.temperature, over_energy=args.over_energy)
    out = Path(args.out or Path(args.result).with_suffix(".png"))
    out.parent.mkdir(parents=True, exist_ok=True)
    _save(fig, out, dpi=150, bbox_inches="tight")
    print(f"wrote {out}")
    return EXIT_OK


def _cmd_export(args) -> int:
    import csv
    import math
    import os

    from rgftrans.io.store import read_result
    from rgftrans.io.sweeps import axis_dataset_name
    from rgftrans.io.tables import quantity_table
    from rgftrans.errors import ExportError

    data = read_result(args.result)
    select = {}
    for item in args.select or ():
        name, sep, value = item.partition("=")
        if not sep or not name.strip():
            raise ExportError(f"--select {item!r}: write NAME=VALUE, e.g. --select gates.plunger.voltage_V=-0.05")
        name = name.strip()
        stored = name if name in {a.name for a in data.axes} else axis_dataset_name(name)
        select[stored] = value.strip()
    if args.energy is not None:
        select["energy"] = args.energy
    if args.temperature is not None:
        select["temperature"] = args.temperature
    if args.leads:
        pair = [x.strip() for x in args.leads.split(",")]
        if len(pair) != 2:
            raise ExportError(f"--leads {args.leads!r}: give two lead names, FROM,TO")
        select["lead_in"], select["lead_out"] = pair
    table = quantity_table(data, args.quantity, select)
    if table.n_rows == 0:
        raise ExportError(f"{args.result}: nothing to export for this selection ({table.skipped_points} sweep "
                          "point(s) not computed yet); run or resume the sweep first")
    out = Path(args.out or Path(args.result).with_name(f"{Path(args.result).stem}_{args.quantity}.csv"))
    if out.suffix.lower() != ".csv":
        raise ExportError(f"--out {out}: the export is CSV; end the file name in .csv")
    if out.exists() and not args.overwrite:
        raise ExportError(f"{out}: exists; pass --overwrite to replace it, or choose another --out")
    out.parent.mkdir(parents=True, exist_ok=True)

    def cell(v):
        if isinstance(v, str):
            return v
        v = float(v)
        return "NaN" if math.isnan(v) else repr(v)

    tmp = out.with_name(f".{out.name}.{os.getpid()}.partial")
    try:  # written beside the target and renamed over it: never a half-written CSV at the path
        with open(tmp, "w", newline="", encoding="utf-8") as fh:
            writer = csv.writer(fh)
            writer.writerow(table.header)
            for row in zip(*table.columns):
                writer.writerow([cell(v) for v in row])
        os.replace(tmp, out)
    finally:
        tmp.unlink(missing_ok=True)
    skipped = f"; {table.skipped_points} sweep point(s) not computed yet were left out" if table.skipped_points else ""
    print(f"wrote {out}: {table.n_rows} row(s), columns {', '.join(table.header)}{skipped}")
    return EXIT_OK


def _cmd_darkstates(args) -> int:
    import matplotlib

    matplotlib.use("Agg")
    from dataclasses import replace

    import numpy as np

    from rgftrans.io.searches import search_sweep, write_search
    from rgftrans.plots.figures import plot_map, plot_track_on_map, plot_width_track
    from rgftrans.io.store import check_group_writable, read_result

    data = read_result(args.result)
    check_group_writable(args.save or args.result, "darkstates", overwrite=args.overwrite)  # before the search
    if len(data.axes) == 2:
        return _darkstates_plane(args, data)
    search = search_sweep(args.result, energy_guess=args.energy, axis=args.axis, progress=not args.quiet)
    t = search.track
    lo, hi = search.energy_window
    widths = t.widths_meV[t.valid]
    print(f"{args.result}: resonance followed along {search.axis_name} over {search.valid_points} of "
          f"{len(t.parameters)} values (stored energies {lo:.6g}..{hi:.6g} meV); width from "
          f"{widths.min():.3g} to {widths.max():.3g} meV")
    for p, e in search.left_window:
        print(f"  pole left the stored energies at p = {p:.9g} (Re z = {e:.6g} meV), following stopped")
    inside = [loc for loc in search.bics if not loc.outside_stored_energies]
    if len(inside) < len(search.bics):
        print("  a width zero below lies OUTSIDE the stored energies and is unconfirmed: rerun the sweep with an "
              "energy window around it to confirm")
    elif not inside:
        print("  no width zero found along this axis (two conditions must be met in an asymmetric layout: "
              "try a second parameter, or give --energy near another resonance)")
    for loc, diag, q in zip(search.bics, search.diagnostics, search.nearby_q):
        label = "BIC" if not loc.outside_stored_energies else "UNCONFIRMED width zero OUTSIDE the stored energies"
        print(f"  {label} ({loc.kind}) at {search.axis_name} = {loc.parameter:.9g}, E = {loc.energy_meV:.6f} meV, "
              f"width {loc.width_meV:.2e} meV ({loc.orders_of_magnitude:.1f} decades below {loc.typical_width_meV:.2e}),"
              f" Gamma ~ |p - p*|^{loc.exponent:.2f}")
        print(f"    Q nearby: {', '.join(f'{v:.3g}' for v in q)}")
        print(f"    {diag.verdict}")
    write_search(search, args.save or args.result, overwrite=args.overwrite)
    prefix = Path(args.out_prefix or Path(args.result).with_suffix(""))
    prefix.parent.mkdir(parents=True, exist_ok=True)
    # The figures mark only BICs inside the stored energies (flagged ones are in the text and the file).
    keep = [k for k, loc in enumerate(search.bics) if not loc.outside_stored_energies]
    shown = replace(search, bics=[search.bics[k] for k in keep], diagnostics=[search.diagnostics[k] for k in keep],
                    nearby_q=[search.nearby_q[k] for k in keep])
    fig, ax = plot_width_track(shown)
    _save(fig, f"{prefix}_width.png", dpi=150)
    fig, ax = plot_track_on_map(args.result, shown)
    _save(fig, f"{prefix}_track.png", dpi=150)
    if inside and np.ndim(inside[0].parameter) == 0:
        from rgftrans.io.searches import stored_model

        loc = inside[0]
        model = stored_model(data, {search.axis_name: float(loc.parameter)})
        density = model.per_site(np.abs(loc.resonance.state) ** 2)
        q_near = search.nearby_q[search.bics.index(loc)][0]
        fig, ax = plot_map(model, density, label="|ψ|² (per site)",
                           title=f"dark state at E = {loc.energy_meV:.4f} meV; Q = {q_near:.3g} just beside it")
        _save(fig, f"{prefix}_dark_state.png", dpi=150)
    print(f"  written: group 'darkstates' in {args.save or args.result}; figures {prefix}_*.png")
    return EXIT_OK


def _darkstates_plane(args, data) -> int:
    """The dark-state search over a stored sweep of two parameters (an accidental BIC needs two)."""
    from dataclasses import replace

    import numpy as np

    from rgftrans.analysis.darkstates import fano_collapse
    from rgftrans.io.searches import stored_plane_builder, search_sweep_plane, write_grid_search
    from rgftrans.plots.figures import plot_bic_plane, plot_fano_collapse, plot_map

    stored = stored_plane_builder(args.result, data)
    search = search_sweep_plane(args.result, energy_guess=args.energy, report=lambda m: print(f"  {m}"),
                                progress=not args.quiet, stored=stored)
    n1, n2 = search.names
    total = len(search.p1) * len(search.p2)
    inside = [b for b in search.bics if not b.outside_stored_energies]
    outside = len(search.bics) - len(inside)
    print(f"{args.result}: {len(search.seeds_meV)} dot state(s) followed over {len(search.p1)} x {len(search.p2)} "
          f"values of {n1}, {n2} (computed at {', '.join(f'{v} of {total}' for v in search.valid_points)} grid "
          f"points); {search.candidates} candidate cell(s), {len(inside)} BIC(s) located"
          + (f", {outside} more OUTSIDE the stored energies (unconfirmed)" if outside else ""))
    for note in search.notes:
        print(f"  note: {note}")
    if outside:
        print(f"  {'no BIC' if not inside else 'no other BIC'} inside the stored energies; the unconfirmed "
              "candidate(s) below lie outside them: rerun the sweep with an energy window around them to confirm")
    elif not inside:
        print("  no BIC in this plane: no cell where both couplings change sign together; widen the parameter "
              "ranges or give --energy near another state")
    for k, bic in enumerate(search.bics):
        label = f"BIC {k}" if not bic.outside_stored_energies else \
            f"UNCONFIRMED candidate {k}, OUTSIDE the stored energies"
        print(f"  {label} ({bic.kind}) at {n1} = {bic.parameter[0]:.9g}, {n2} = {bic.parameter[1]:.9g}: "
              f"E = {bic.energy_meV:.6f} meV, open channels {bic.n_open}, width {abs(bic.width_meV):.1e} meV "
              f"({bic.orders_of_magnitude:.1f} decades below {bic.typical_width_meV:.2e} meV one grid step away), "
              f"Gamma ~ |p - p*|^{bic.exponent:.2f}")
        print(f"    Q one grid step away (+{n1}, -{n1}, +{n2}, -{n2}): "
              + ", ".join(f"{q:.3g}" for q in bic.nearby_q))
        print(f"    why: {bic.explanation}")
    write_grid_search(search, args.save or args.result, parameter_units=tuple(a.units for a in data.axes),
                      overwrite=args.overwrite)
    prefix = Path(args.out_prefix or Path(args.result).with_suffix(""))
    prefix.parent.mkdir(parents=True, exist_ok=True)
    keep = [k for k, b in enumerate(search.bics) if not b.outside_stored_energies]  # figures: inside ones only
    fig, _ = plot_bic_plane(replace(search, bics=inside, seed_of_bic=[search.seed_of_bic[k] for k in keep]))
    _save(fig, f"{prefix}_plane.png", dpi=150)
    if inside:
        build = stored[1]
        bic = inside[0]
        step = float(np.median(np.diff(search.p1)))
        collapse = fano_collapse(build, bic, step / 4, parameter_unit=data.axes[0].units)
        fig, _ = plot_fano_collapse(collapse, name=n1)
        _save(fig, f"{prefix}_fano_collapse.png", dpi=150)
        model = build(*bic.parameter)
        fig, _ = plot_map(model, model.per_site(bic.state**2), label="|ψ|² (per site)",
                          title=f"dark state at E = {bic.energy_meV:.4f} meV; Q = {bic.nearby_q.min():.3g} one "
                                "step away")
        _save(fig, f"{prefix}_dark_state.png", dpi=150)
    print(f"  written: group 'darkstates' in {args.save or args.result}; figures {prefix}_*.png")
    return EXIT_OK


def _column(text):
    """A column given on the command line: a 0-based index if it is a whole number, else a header name."""
    return int(text) if text is not None and text.isdigit() else text


def _compare_peaks(args) -> int:
    """compare --coulomb-peaks: fit the trace with sequential-tunnelling peaks, starting from the layout's lever arm."""
    import h5py
    import matplotlib.pyplot as plt
    import numpy as np

    from rgftrans.analysis.peakfit import fit_coulomb_peaks
    from rgftrans.io.compare import read_trace
    from rgftrans.io.store import StoredArray, check_group_writable, write_group

    check_group_writable(args.save or args.result, args.group, overwrite=args.overwrite)
    predicted = None
    with h5py.File(args.result, "r") as f:
        if "blockade" in f and "lever_arm" in f["blockade"].attrs:
            predicted = float(f["blockade"].attrs["lever_arm"])
    trace = read_trace(args.trace, gate_column=_column(args.gate_column), value_column=_column(args.value_column),
                       kind=args.kind, units=args.units, bias_V=args.bias, description=args.description)
    alpha = None if args.lever_arm is None else args.lever_arm / 1000.0  # --lever-arm is in meV/V, as elsewhere
    fit = fit_coulomb_peaks(trace.gate_V, trace.conductance_S, temperature_K=args.temperature,
                            lever_arm=alpha, fit_temperature=args.fit_temperature, spin=args.spin,
                            count=args.peaks, noise_S=args.noise, predicted_lever_arm=predicted)
    text = f"trace {args.trace} ({trace.description}) against {args.result}\n" + fit.summary()
    print(text)
    base = Path(args.out_prefix or Path(args.result).with_suffix(""))
    prefix = base.with_name(f"{base.name}_{args.group}")
    target = args.save or args.result
    items = {
        "gate_voltage": StoredArray(fit.gate_V, "V", "measured gate voltage", scale=True),
        "measured_conductance": StoredArray(fit.measured_S, "S", "measured conductance", dims=("gate_voltage",)),
        "model_conductance": StoredArray(fit.model_S, "S", "fitted sequential-tunnelling peaks",
                                         dims=("gate_voltage",)),
        "peak_position": StoredArray(fit.positions_V, "V", "fitted peak positions",
                                     attrs={"stderr": fit.positions_err_V}),
        "tunnel_rate": StoredArray(fit.rates_per_s, "s^-1", "series tunnel rate of each peak",
                                   attrs={"stderr": fit.rates_err_per_s}),
    }
    attrs = {"lever_arm": fit.lever_arm, "lever_arm_stderr": fit.lever_arm_err, "temperature_K": fit.temperature_K,
             "temperature_stderr_K": fit.temperature_err_K, "spin": fit.spin,
             "reduced_chi_square": fit.reduced_chi_square, "noise_S": fit.noise_S,
             "predicted_lever_arm": fit.predicted_lever_arm, "source": str(args.trace)}
    write_group(target, args.group, items, attrs=attrs, overwrite=args.overwrite)
    prefix.parent.mkdir(parents=True, exist_ok=True)
    Path(f"{prefix}.txt").write_text(text + "\n", encoding="utf-8")
    fig, (ax, res) = plt.subplots(2, 1, figsize=(6.5, 5), sharex=True, height_ratios=(3, 1), layout="constrained")
    ax.plot(fit.gate_V * 1e3, fit.measured_S * 1e9, ".", ms=2, color="0.4", label=trace.description or "measured")
    ax.plot(fit.gate_V * 1e3, fit.model_S * 1e9, lw=1.2, color="tab:red", label="sequential-tunnelling fit")
    ax.set_ylabel("conductance G (nS)")
    ax.legend(frameon=False, fontsize="small")
    ax.set_title(f"Coulomb peaks: lever arm {fit.lever_arm:.4g}, T = {fit.temperature_K:.3g} K", fontsize="medium")
    res.plot(fit.gate_V * 1e3, (fit.measured_S - fit.model_S) * 1e9, lw=0.8, color="0.3")
    res.set_xlabel("gate voltage (mV)")
    res.set_ylabel("residual (nS)")
    _save(fig, f"{prefix}.png", dpi=150)
    print(f"  written: group '{args.group}' in {target}; {prefix}.txt; {prefix}.png")
    return EXIT_OK


def _cmd_compare(args) -> int:
    if args.coulomb_peaks:
        return _compare_peaks(args)
    import matplotlib

    matplotlib.use("Agg")
    from rgftrans.io.compare import argument_names, fit_trace, predicted_lever_arm, read_trace
    from rgftrans.errors import CompareError
    from rgftrans.plots.fits import plot_fit

    # How compare's messages name its arguments on the command line (rgftrans.io.compare.argument_names).
    flags = {
        "gate_column": "--gate-column", "value_column": "--value-column", "kind": "--kind", "units": "--units",
        "bias_V": "--bias", "lever_arm": "--lever-arm", "offset": "--offset", "r_series_ohm": "--r-series",
        "temperature_K": "--temperature", "noise_S": "--noise", "mu_ref_meV": "--mu-ref", "fit": "--fit",
        "fit_series": "--fit-series", "fit_temperature": "--fit-temperature", "leads": "--leads",
        "gate_axis": "--gate-axis", "select": "--select", "bounds.lever_arm": "--lever-arm-range",
        "predicted_lever_arm": "--lever-arm-from",
        "bounds.offset": "--offset-range", "bounds.r_series": "--r-series-range",
        "bounds.temperature": "--temperature-range",
    }
    # The parameter each range flag bounds, with the argparse attribute that holds it.
    ranges = {"lever_arm": "lever_arm_range", "offset": "offset_range", "r_series": "r_series_range",
                       "temperature": "temperature_range"}

    select = {}
    for item in args.select or ():
        name, sep, value = item.partition("=")
        try:
            select[name.strip()] = float(value)
        except ValueError:
            sep = ""
        if not sep:
            raise CompareError(f"--select {item!r}: write NAME=VALUE with a number, e.g. "
                               "--select gates.plunger.voltage_V=-0.05")
    leads = None
    if args.leads:
        leads = tuple(x.strip() for x in args.leads.split(","))
        if len(leads) != 2:
            raise CompareError(f"--leads {args.leads!r}: give two lead names, FROM,TO")
    bounds = {}
    for name, attr in ranges.items():
        text = getattr(args, attr)
        if text is None:
            continue
        try:
            lo, hi = (float(x) for x in text.split(","))
        except ValueError:
            raise CompareError(f"{flags['bounds.' + name]} {text!r}: write MIN,MAX, e.g. "
                               f"{flags['bounds.' + name]}=10,200") from None
        bounds[name] = (lo, hi)
    fit = [x.strip() for x in args.fit.split(",") if x.strip()] if args.fit else None
    initial = {}
    if args.lever_arm is not None:
        initial["lever_arm"] = args.lever_arm
    if args.offset is not None:
        initial["offset"] = args.offset
    from rgftrans.io.store import check_group_writable

    check_group_writable(args.save or args.result, args.group, overwrite=args.overwrite)  # before the fit
    predicted = None
    if args.lever_arm_from:
        region, sep, gate = args.lever_arm_from.partition(":")
        if not (sep and region.strip() and gate.strip()):
            raise CompareError(f"--lever-arm-from {args.lever_arm_from!r}: write REGION:GATE, e.g. "
                               "--lever-arm-from dot:plunger")
        predicted = predicted_lever_arm(args.result, region=region.strip(), gate=gate.strip())
    with argument_names(flags):  # messages name our flags, not Python keywords
        trace = read_trace(args.trace, gate_column=_column(args.gate_column),
                           value_column=_column(args.value_column), kind=args.kind, units=args.units,
                           bias_V=args.bias, description=args.description)
        result = fit_trace(args.result, trace, temperature_K=args.temperature, fit=fit, r_series_ohm=args.r_series,
                           fit_series=args.fit_series, fit_temperature=args.fit_temperature, noise_S=args.noise,
                           initial=initial or None, bounds=bounds or None, mu_ref_meV=args.mu_ref, leads=leads,
                           gate_axis=args.gate_axis, select=select or None, predicted_lever_arm=predicted)
    # Only a fit worth reporting gets here (a failed one raised TraceFitFailed: exit 1, nothing written).
    text = result.summary()
    print(text)
    base = Path(args.out_prefix or Path(args.result).with_suffix(""))
    prefix = base.with_name(f"{base.name}_{args.group}")
    target = args.save or args.result
    result.to_hdf5(target, args.group, overwrite=args.overwrite)  # first: a refused group leaves no other file
    prefix.parent.mkdir(parents=True, exist_ok=True)
    Path(f"{prefix}.txt").write_text(text + "\n", encoding="utf-8")
    fig, _ = plot_fit(result)
    _save(fig, f"{prefix}.png", dpi=150)
    print(f"  written: group '{args.group}' in {target}; {prefix}.txt; {prefix}.png")
    return EXIT_OK


def _cmd_blockade(args) -> int:
    import matplotlib

    matplotlib.use("Agg")
    from rgftrans.io.blockade import SingleDotBlockade, blockade_from_config, write_blockade
    from rgftrans.io.config import load_config
    from rgftrans.io.store import check_group_writable
    from rgftrans.constants import CONDUCTANCE_QUANTUM_S
    from rgftrans.plots.charging import plot_coulomb_peaks, plot_diamonds, plot_stability

    cfg = load_config(args.config)
    target = Path(args.output or cfg.output.path)
    if target.exists():
        check_group_writable(target, "blockade", overwrite=args.overwrite)  # refused now, not after the work
    caps = cfg.capacitances()
    print(f"{args.config}: constant-interaction model from the layout (Thomas-Fermi electrostatics)")
    for line in caps.summary().splitlines():
        print(f"  {line}")
    result = blockade_from_config(cfg)
    for line in result.summary().splitlines():
        print(f"  {line}")
    prefix = Path(args.out_prefix or Path(args.config).with_suffix(""))
    prefix.parent.mkdir(parents=True, exist_ok=True)
    target.parent.mkdir(parents=True, exist_ok=True)
    write_blockade(result, target, overwrite=args.overwrite)
    if isinstance(result, SingleDotBlockade):
        for t, g in zip(result.temperatures_K, result.conductance_S):
            print(f"  T = {t:g} K: peak conductance {g.max():.3g} S ({g.max() / CONDUCTANCE_QUANTUM_S:.3g} x 2e^2/h)")
        fig, _ = plot_coulomb_peaks(result)
        _save(fig, f"{prefix}_peaks.png", dpi=150)
        fig, _ = plot_diamonds(result)
        _save(fig, f"{prefix}_diamonds.png", dpi=150)
        written = f"{prefix}_peaks.png, {prefix}_diamonds.png"
    else:
        print(f"  triple-point current up to {abs(result.current_A).max():.3g} A at V_sd = {result.bias_V * 1e3:g} "
              f"mV, {result.temperature_K:g} K")
        fig, _ = plot_stability(result)
        _save(fig, f"{prefix}_stability.png", dpi=150)
        written = f"{prefix}_stability.png"
    print(f"  written: group 'blockade' in {target}; {written}")
    return EXIT_OK


def _cmd_ensemble(args) -> int:
    import matplotlib

    matplotlib.use("Agg")
    from rgftrans.io.config import load_config
    from rgftrans.io.ensemble import GROUP, ensemble_from_config, require_disorder, write_ensemble
    from rgftrans.io.store import check_group_writable
    from rgftrans.plots.ensemble import plot_fluctuations

    _refuse_waveguide(args.config)
    cfg = load_config(args.config)
    require_disorder(cfg)
    target = Path(args.output or cfg.output.path)
    check_group_writable(target, GROUP, overwrite=args.overwrite)  # refused now, not after the work
    print(f"{args.config}: {args.samples} disorder samples of the device at its base point")
    result = ensemble_from_config(cfg, args.samples, width_meV=args.width_meV, progress=not args.quiet,
                                  workers=args.workers)
    for line in result.summary().splitlines():
        print(f"  {line}")
    prefix = Path(args.out_prefix or Path(args.config).with_suffix(""))
    prefix.parent.mkdir(parents=True, exist_ok=True)
    write_ensemble(result, target, overwrite=args.overwrite)
    fig, _ = plot_fluctuations(result)
    _save(fig, f"{prefix}_fluctuations.png", dpi=150)
    print(f"  written: group '{GROUP}' in {target}; {prefix}_fluctuations.png")
    return EXIT_OK


def _cmd_waveguide(args) -> int:
    import matplotlib
    import numpy as np

    matplotlib.use("Agg")
    from rgftrans.plots.style import format_value, parameter_name
    from rgftrans.plots.figures import plot_bic_plane, plot_spectrum, plot_waveguide_field
    from rgftrans.io.waveguide_config import load_waveguide, parameter_units, run_waveguide, write_waveguide

    say = (lambda *a: None) if args.quiet else print
    from rgftrans.io.store import check_file_writable

    cfg, _ = load_waveguide(args.config)  # validate before any work
    prefix = Path(args.out_prefix or Path(args.config).with_suffix(""))
    target = Path(args.output or (cfg.output.path if cfg.output else f"{prefix}.h5"))
    check_file_writable(target, overwrite=args.overwrite)  # refused now, not after the computation
    run = run_waveguide(args.config, progress=not args.quiet)
    pm, spectrum = run.model, run.spectrum
    freqs = spectrum.frequencies_GHz
    say(f"{args.config}: {pm.model.n_sites} grid nodes, spacing {pm.spacing} {pm.unit}; "
        + "; ".join(f"port {lead.name!r} cutoffs " + ", ".join(f"{f:.4g}" for f in pm.cutoffs_GHz(k, 2)) + " GHz"
                    for k, lead in enumerate(pm.model.leads)))
    t = spectrum.matrix[:, 1, 0]
    say(f"  T from {spectrum.port_names[0]!r} to {spectrum.port_names[1]!r}: {len(freqs)} frequencies "
        f"{freqs[0]:g}-{freqs[-1]:g} GHz, T between {t.min():.3g} and {t.max():.3g}; "
        f"max absorption {spectrum.absorption.max():.3g}")
    prefix.parent.mkdir(parents=True, exist_ok=True)
    cutoffs = [f for k in range(min(2, len(spectrum.port_names))) for f in pm.cutoffs_GHz(k, 3)]
    fig, _ = plot_spectrum(spectrum, cutoffs_GHz=cutoffs, title=f"grid {pm.spacing:g} {pm.unit}")
    _save(fig, f"{prefix}_spectrum.png", dpi=150, bbox_inches="tight")
    if run.sharpest is not None:
        res, fm = run.sharpest, run.field_map
        line = min(run.lines, key=lambda x: x.width_GHz)
        say(f"  sharpest line in T(f) near {line.frequency_GHz:.5g} GHz: pole at {res.frequency_GHz:.6g} GHz, "
            f"Q = {res.q_factor:.4g}; field enhancement {fm.enhancement:.3g} x the incident peak")
        fig, _ = plot_waveguide_field(pm, np.abs(fm.field), label="|E_z| / incident peak (1)",
                                      title=f"|E_z| at {res.frequency_GHz:.5g} GHz (Q = {res.q_factor:.3g}), "
                                            f"from port {spectrum.port_names[0]!r}")
        _save(fig, f"{prefix}_field.png", dpi=150, bbox_inches="tight")
    if run.search is not None:
        s = run.search
        (n1, v1), (n2, v2) = cfg.axes()
        units = parameter_units(s.names, pm.unit)
        say(f"  dark-state search over {parameter_name(n1)} x {parameter_name(n2)} ({len(v1)} x {len(v2)}): "
            f"{run.seeds} cavity mode(s) in the band where each port has one mode")
        for k, mode in enumerate(run.dark_modes):
            p1, p2 = (format_value(v, u) for v, u in zip(mode.parameter, units))
            say(f"  BIC {k} ({mode.kind}) at {parameter_name(n1)} = {p1}, {parameter_name(n2)} = {p2}: "
                f"f = {mode.frequency_GHz:.7g} GHz, {mode.orders_of_magnitude:.1f} decades below the width one "
                f"grid step away, width ~ |p - p*|^{mode.exponent:.2f}")
            say("    Q one grid step away (+p1, -p1, +p2, -p2): " + ", ".join(f"{q:.3g}" for q in mode.nearby_q))
        if not run.dark_modes:
            say("  no BIC in this plane (no cell where both port couplings vanish together); widen the ranges")
        else:
            fig, _ = plot_bic_plane(
                s, units=units,
                state_text=lambda k0a_squared: f"f = {float(pm.frequency_GHz(max(k0a_squared, 0.0))):.6g} GHz")
            _save(fig, f"{prefix}_plane.png", dpi=150, bbox_inches="tight")
            mode = run.dark_modes[0]
            fig, _ = plot_waveguide_field(mode.model, mode.mode_field, label="|E_z| / its maximum (1)",
                                          title=f"dark mode at {mode.frequency_GHz:.6g} GHz")
            _save(fig, f"{prefix}_dark_mode.png", dpi=150, bbox_inches="tight")
    write_waveguide(run, target, overwrite=args.overwrite)
    say(f"  written: {target}; figures {prefix}_*.png")
    return EXIT_OK


def _at_least_two(text: str) -> int:
    try:
        value = int(text)
    except ValueError:
        value = 0
    if value < 2:
        raise argparse.ArgumentTypeError(f"{text!r} is not a whole number >= 2; e.g. --samples 200")
    return value


def build_parser() -> argparse.ArgumentParser:
    parser = _Parser(prog="rgftrans", description="Tight-binding quantum transport by recursive Green's functions.",
                     epilog="Exit status: 0 success, 1 computation failed or interrupted (rerun resumes), "
                            "2 bad input.")
    parser.add_argument("--version", action="version", version=f"rgftrans {__version__}")
    sub = parser.add_subparsers(dest="command", required=True, parser_class=_Parser)

    p = sub.add_parser("check", help="validate a config and report the discretised device",
                       description="Validate a TOML config, discretise its device and report sites, layers, "
                                   "open channels and the sweep size.")
    p.add_argument("config", help="TOML config file")
    p.add_argument("--draw", metavar="PNG", help="also draw the discretised device to this PNG file")
    p.set_defaults(func=_cmd_check)

    p = sub.add_parser("run", help="run or resume a sweep into its HDF5 file",
                       description="Run the config's sweep.  An existing result file of the same config is "
                                   "resumed (only missing points are computed); one of another config is refused "
                                   "unless --overwrite is given.")
    p.add_argument("config", help="TOML config file")
    p.add_argument("--overwrite", action="store_true", help="replace an existing result file of another sweep")
    p.add_argument("--quiet", action="store_true", help="no progress bar")
    p.add_argument("--workers", type=_positive_int, metavar="N", help="worker processes (default: [cluster] workers, 2)")
    p.add_argument("--cluster", type=_scheduler_address, metavar="ADDRESS", help="Dask scheduler address, e.g. tcp://10.0.0.5:8786")
    p.add_argument("--output", metavar="H5", help="result file (default: [output] path)")
    p.set_defaults(func=_cmd_run)

    p = sub.add_parser("info", help="summarise a result file", description="Print axes, quantities, progress "
                                                                          "and provenance of a result file.")
    p.add_argument("result", help="HDF5 result file")
    p.set_defaults(func=_cmd_info)

    p = sub.add_parser("plot", help="plot the stored conductance of a result file",
                       description="The stored conductance G(mu, T) in 2e^2/h: against energy without a sweep "
                                   "axis; against the swept parameter at one energy for one axis (--over-energy: "
                                   "a map over energy and the parameter); for two or more axes the map "
                                   "G(p1, p2) at one energy and temperature, first parameter on x.  Lines are "
                                   "drawn at every stored temperature, maps at the lowest unless --temperature "
                                   "picks one.")
    p.add_argument("result", help="HDF5 result file")
    p.add_argument("--out", metavar="PNG", help="output file (default: the result file with .png)")
    p.add_argument("--lead-out", help="receiving lead (default: the second lead)")
    p.add_argument("--lead-in", help="sending lead (default: the first lead)")
    p.add_argument("--energy", type=float, metavar="MEV",
                   help="chemical potential of cuts over sweep parameters, within the stored energies (default: "
                        "the Fermi energy when the file has one, else the middle of the grid)")
    p.add_argument("--temperature", type=float, metavar="K",
                   help="one stored temperature (default: all for lines, the lowest for maps)")
    p.add_argument("--over-energy", action="store_true", help="plot against energy instead of the parameters")
    p.set_defaults(func=_cmd_plot)

    p = sub.add_parser("export", help="write a stored quantity to a CSV file",
                       description="Write one quantity of a result file (default: conductance in 2e^2/h; "
                                   "conductance_S for siemens, transmission, n_open) as a CSV table for a "
                                   "spreadsheet or lab software: one row per stored value, one column per "
                                   "dimension left after the selection, headers 'name [units]', values in the "
                                   "file's units.  Points not yet computed are left out.")
    p.add_argument("result", help="HDF5 result file")
    p.add_argument("--quantity", default="conductance", help="stored quantity (default: conductance)")
    p.add_argument("--select", action="append", metavar="NAME=VALUE",
                   help="fix a sweep axis to one of its values (repeat for each), e.g. gates.plunger.voltage_V=-0.05")
    p.add_argument("--energy", type=float, metavar="MEV", help="one stored energy (chemical potential)")
    p.add_argument("--temperature", type=float, metavar="K", help="one stored temperature")
    p.add_argument("--leads", metavar="FROM,TO", help="one lead pair (conductance, transmission)")
    p.add_argument("--out", metavar="CSV", help="output file (default: RESULT_QUANTITY.csv beside the result)")
    p.add_argument("--overwrite", action="store_true", help="replace an existing CSV file")
    p.set_defaults(func=_cmd_export)

    p = sub.add_parser("darkstates", help="search a stored sweep for bound states in the continuum",
                       description="Along one sweep axis: follow the narrowest resonance, locate where its width "
                                   "vanishes and explain why.  Over two sweep axes: follow every dot state of the "
                                   "energy window over the plane and locate the points where its couplings to both "
                                   "leads vanish together (accidental BICs); this needs one open channel per lead, "
                                   "read from the stored channel counts.  Poles are followed only inside the stored "
                                   "energies; a find outside them is flagged as unconfirmed.  The search is stored "
                                   "in the file and drawn.")
    p.add_argument("result", help="HDF5 result file of a sweep")
    p.add_argument("--energy", type=float, metavar="MEV", help="start near this resonance energy")
    p.add_argument("--axis", type=int, default=0, help="which sweep axis to follow (default 0; one-axis sweeps)")
    p.add_argument("--save", metavar="H5", help="write the search here instead of into the result file")
    p.add_argument("--overwrite", action="store_true", help="replace an existing 'darkstates' group")
    p.add_argument("--out-prefix", metavar="PATH", help="figure file prefix (default: the result path)")
    p.add_argument("--quiet", action="store_true", help="no progress bar")
    p.set_defaults(func=_cmd_darkstates)

    p = sub.add_parser("compare", help="fit a stored sweep to a measured conductance trace",
                       description="Read a measured trace (CSV with a header, or two plain columns), fit the stored "
                                   "sweep to it at the measurement temperature (lever arm and offset by default; "
                                   "series resistance and temperature on request) and write the fitted parameters "
                                   "as text, into the HDF5 file and as an overlay figure with residuals.  A fit "
                                   "that does not move from its start, ends at the edge of a parameter's range or "
                                   "does not describe the trace (reduced chi-square > 10 with --noise; without it, "
                                   "an rms residual above half the trace's standard deviation) is reported in one "
                                   "line with exit status 1 and nothing is written.")
    p.add_argument("result", help="HDF5 result file with a transmission quantity")
    p.add_argument("trace", help="measured trace: CSV or two-column text")
    p.add_argument("--temperature", type=float, required=True, metavar="K",
                   help="electron temperature of the measurement (start value with --fit-temperature)")
    p.add_argument("--gate-column", metavar="NAME|INDEX", help="gate-voltage column (default: the first)")
    p.add_argument("--value-column", metavar="NAME|INDEX", help="conductance or current column")
    p.add_argument("--kind", choices=("conductance", "current"), default="conductance")
    p.add_argument("--units", help="units of the value column (S, mS, uS, nS, 2e2/h; A, mA, uA, nA, pA) when the "
                                   "header does not say")
    p.add_argument("--bias", type=float, metavar="V", help="source-drain bias of a current trace")
    p.add_argument("--description", metavar="TEXT", help="how the trace is labelled (say 'synthetic' for made-up "
                                                         "data)")
    p.add_argument("--gate-axis", metavar="NAME", help="compare directly with this stored gate-voltage axis "
                                                       "(default: map the energy axis with a lever arm)")
    p.add_argument("--select", action="append", metavar="NAME=VALUE",
                   help="value of another sweep axis (repeat for each)")
    p.add_argument("--lever-arm", type=float, metavar="MEV_PER_V", help="lever arm (start value, or fixed)")
    p.add_argument("--coulomb-peaks", action="store_true",
                   help="fit the trace with sequential-tunnelling Coulomb peaks (closed dots), starting from the "
                        "lever arm stored by `rgftrans blockade` in RESULT; --lever-arm, --fit-temperature, --noise "
                        "apply; the fitted peaks, rates and lever arm go to the group")
    p.add_argument("--spin", action="store_true", help="with --coulomb-peaks: spin-degenerate levels")
    p.add_argument("--peaks", type=int, metavar="N", help="with --coulomb-peaks: fit the N highest peaks")
    p.add_argument("--lever-arm-from", metavar="REGION:GATE", help="start from the lever arm of GATE on dot "
                                                                    "REGION that the run predicted from the layout "
                                                                    "([[gates.region]]), and report the distance")
    p.add_argument("--lever-arm-range", metavar="MIN,MAX", help="range of the fitted lever arm in meV/V (default: "
                                                                "the start's sign, a factor 10 either way)")
    p.add_argument("--offset", type=float, metavar="V", help="gate-voltage offset V_0 (start value, or fixed)")
    p.add_argument("--offset-range", metavar="MIN,MAX", help="range of the fitted offset in V (default: free; "
                                                             "write --offset-range=-0.2,0.1 for a negative MIN)")
    p.add_argument("--r-series", type=float, default=0.0, metavar="OHM", help="series resistance (default 0)")
    p.add_argument("--r-series-range", metavar="MIN,MAX", help="range of the fitted series resistance in ohm "
                                                               "(default: >= 0)")
    p.add_argument("--fit", metavar="LIST", help="fitted parameters, comma-separated among lever_arm, offset, "
                                                 "r_series, temperature")
    p.add_argument("--fit-series", action="store_true", help="also fit the series resistance")
    p.add_argument("--fit-temperature", action="store_true", help="also fit the temperature")
    p.add_argument("--temperature-range", metavar="MIN,MAX", help="range of the fitted temperature in K "
                                                                  "(default: >= 1e-4 K)")
    p.add_argument("--noise", type=float, metavar="S", help="noise sigma of the measurement (default: estimated)")
    p.add_argument("--mu-ref", type=float, metavar="MEV", help="chemical potential on the stored energy axis at "
                                                              "V_g = V_0 (default: the sweep's stored Fermi "
                                                              "energy, else 0 meV)")
    p.add_argument("--leads", metavar="FROM,TO", help="transmission from one lead into another (default: first two)")
    p.add_argument("--group", default="compare", help="HDF5 group and file-name suffix (default: compare)")
    p.add_argument("--save", metavar="H5", help="write the fit here instead of into the result file")
    p.add_argument("--overwrite", action="store_true", help="replace an existing group of that name")
    p.add_argument("--out-prefix", metavar="PATH", help="prefix of the .txt and .png files (default: the result path)")
    p.set_defaults(func=_cmd_compare)

    p = sub.add_parser("blockade", help="Coulomb peaks, diamonds or a double dot's stability diagram",
                       description="Closed dots by sequential tunnelling ([blockade] table): charging energies and "
                                   "lever arms from the screened electrostatics, levels from the dot's closed "
                                   "spectrum, tunnel rates from the open device's poles; Coulomb peaks at every "
                                   "configured temperature and the diamond map (one dot) or the charge-stability "
                                   "diagram with a sensor signal and the triple-point current (two dots).")
    p.add_argument("config", help="run config with [blockade] and [[gates.region]]")
    p.add_argument("--out-prefix", metavar="PATH", help="figure prefix (default: the config path without .toml)")
    p.add_argument("--output", metavar="H5", help="file for the group 'blockade' (default: [output] path)")
    p.add_argument("--overwrite", action="store_true", help="replace an existing group 'blockade'")
    p.set_defaults(func=_cmd_blockade)

    p = sub.add_parser("ensemble", help="conductance statistics of many disorder samples of a device",
                       description="Redraw the Anderson disorder of the config's device (its [disorder] table gives "
                                   "the width W and the first seed) for N samples and compute T(E) of each at the "
                                   "config's energies, reusing the clean device's slicing or dissection tree and "
                                   "lead self-energies; print <G> and var G with standard errors and the regime, "
                                   "write the group 'ensemble' and a figure of the fluctuations.")
    p.add_argument("config", help="run config with a [disorder] table")
    p.add_argument("--samples", type=_at_least_two, required=True, help="number of samples (seeds seed, seed+1, ...)")
    p.add_argument("--width-meV", type=float, metavar="W", help="disorder width W in meV instead of [disorder]'s")
    p.add_argument("--out-prefix", metavar="PATH", help="figure prefix (default: the config path without .toml)")
    p.add_argument("--output", metavar="H5", help="file for the group 'ensemble' (default: [output] path)")
    p.add_argument("--overwrite", action="store_true", help="replace an existing group 'ensemble'")
    p.add_argument("--workers", type=_positive_int, default=2, metavar="N",
                   help="local processes, one BLAS thread each (default 2); the samples do not depend on it")
    p.add_argument("--quiet", action="store_true", help="no progress bar")
    p.set_defaults(func=_cmd_ensemble)

    p = sub.add_parser("waveguide", help="TM light in a metal-walled waveguide with dielectrics",
                       description="Grid a waveguide config ([waveguide], [frequency], optional [[search.axis]]), "
                                   "compute power transmission, reflection and absorption over the band, draw the "
                                   "field at the sharpest resonance with its Q, search the plane of two dielectric "
                                   "parameters for bound states in the continuum, and write everything to HDF5.")
    p.add_argument("config", help="waveguide TOML file")
    p.add_argument("--out-prefix", metavar="PATH", help="figure prefix (default: the config path without .toml)")
    p.add_argument("--output", metavar="H5", help="result file (default: [output] path, else PREFIX.h5)")
    p.add_argument("--overwrite", action="store_true", help="replace an existing result file of a waveguide run")
    p.add_argument("--quiet", action="store_true")
    p.set_defaults(func=_cmd_waveguide)
    return parser


def main(argv=None) -> int:
    """Entry point of the ``rgftrans`` command."""
    args = build_parser().parse_args(argv)
    with one_line_warnings():  # for this command only
        return _run(args)


def _run(args) -> int:
    """Run a parsed command; every expected failure becomes one line and an exit status."""
    from rgftrans.errors import ComputationFailed, RgftransError

    try:
        return args.func(args)
    except RgftransError as err:
        print(f"rgftrans: error: {err}", file=sys.stderr)
        return EXIT_BAD_INPUT
    except ComputationFailed as err:
        print(f"rgftrans: failed: {err}", file=sys.stderr)
        return EXIT_FAILED
    except KeyboardInterrupt:
        print("rgftrans: interrupted; finished points are saved, run the same command again to resume",
              file=sys.stderr)
        return EXIT_FAILED
    except OSError as err:
        print(f"rgftrans: error: {err.strerror or err} ({getattr(err, 'filename', '')})", file=sys.stderr)
        return EXIT_BAD_INPUT


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
