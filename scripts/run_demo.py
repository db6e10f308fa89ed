"""Main demo: invented devices from configs/, end to end.

1. configs/asymmetric_dot.toml -- an asymmetric GaAs dot: the discretised
   device, G(E) = (2e^2/h) T(E), and at its sharpest resonance the LDOS, the
   density injected from the source and the current pattern.
2. configs/three_terminal_dot.toml -- a dot with a side probe: all T_pq(E).
3. configs/hall_cross.toml -- a four-lead Hall cross: T_pq(E) and the
   four-terminal resistances from the Büttiker conductance matrix.
4. configs/gated_dot.toml -- a dot defined by four surface gates over a GaAs
   2DEG: the gate potential map and G(V_plunger) at 0.1 K and 1 K.
   Then a synthetic "measured" trace (made from the model, labelled
   synthetic everywhere) is fitted back with `rgftrans compare`.
5. configs/asymmetric_dot_gates.toml -- a small asymmetric dot tuned by two
   gates: a stored sweep over the plane of the two gate voltages, then the
   command `rgftrans darkstates` searches it for bound states in the
   continuum (the dark-state search of the package).
6. configs/disordered_wire.toml -- a disordered GaAs wire: 300 samples of its
   Anderson disorder (`rgftrans ensemble`), the conductance fluctuations with
   and without a field beside the universal values, and the localisation
   length of a disordered chain from ensembles at four lengths.
7. configs/microwave_cavity.toml -- the same engine for light: a metal-walled
   microwave cavity with a ceramic puck and offset inlet/outlet guides;
   transmission over 21-26 GHz, the field at the sharpest resonance, and the
   dark modes found by sliding and retuning the puck.

All scenarios are invented for the demo; none is a measured device.
Figures and tables go to out/.
"""

from __future__ import annotations

import argparse
import sys
import time
import tomllib
from pathlib import Path

import matplotlib

matplotlib.use("Agg")

import numpy as np  # noqa: E402

from rgftrans.system.device import Device, Lead  # noqa: E402
from rgftrans.errors import RgftransError  # noqa: E402
from rgftrans.io.config import load_config  # noqa: E402
from rgftrans.system.geometry import disk, rectangle  # noqa: E402
from rgftrans.system.lattices import square  # noqa: E402
from rgftrans.transport.local import bond_currents, local_quantities, scattering_states  # noqa: E402
from rgftrans.system.materials import CONDUCTANCE_QUANTUM_S  # noqa: E402
from rgftrans.plots.figures import plot_currents, plot_device, plot_gate_potential, plot_map, plot_transmission  # noqa: E402
from rgftrans.transport.rgf import four_terminal_resistance, transmission, transmission_matrix  # noqa: E402
from rgftrans.transport.slicing import slice_layers  # noqa: E402
from rgftrans.io.store import read_result  # noqa: E402
from rgftrans.io.sweeps import run_sweep  # noqa: E402

ROOT = Path(__file__).resolve().parent.parent


def _shape(entry: dict):
    if "rectangle_nm" in entry:
        return rectangle(*entry["rectangle_nm"])
    cx, cy, r = entry["disk_nm"]
    return disk((cx, cy), r)


def build(path: Path) -> tuple[Device, np.ndarray]:
    """Device and energy grid from one of the demo TOML files."""
    cfg = tomllib.loads(path.read_text())
    geo = cfg["geometry"]
    region = _shape(geo)
    for extra in geo.get("add", []):
        region = region | _shape(extra)
    for hole in geo.get("remove", []):
        region = region - _shape(hole)
    leads = [Lead(lead["name"], lead["side"], tuple(lead["span_nm"])) for lead in cfg["leads"]]
    device = Device(region, leads, lattice=square(cfg["lattice"]["spacing_nm"]), material=cfg["material"]["name"])
    e = cfg["energy"]
    return device, np.linspace(e["start_meV"], e["stop_meV"], e["points"])


def sharpest_resonance(energies: np.ndarray, trans: np.ndarray) -> float:
    """Energy of the sharpest feature of T(E): the largest |d^2T/dE^2| at an extremum."""
    d2 = np.abs(np.gradient(np.gradient(trans, energies), energies))
    d1 = np.gradient(trans, energies)
    extremum = np.flatnonzero(np.sign(d1[1:]) != np.sign(d1[:-1]))
    k = extremum[np.argmax(d2[extremum])] if extremum.size else int(np.argmax(d2))
    return float(energies[k])


def asymmetric_dot(out: Path) -> None:
    device, energies = build(ROOT / "configs" / "asymmetric_dot.toml")
    model = device.discretise()
    slicing = slice_layers(model.hamiltonian, [lead.interface for lead in model.leads],
                           positions=model.positions)
    t0 = time.perf_counter()
    result = transmission(model, energies, slicing=slicing)
    elapsed = time.perf_counter() - t0
    print(f"[asymmetric dot] invented scenario: {model.n_sites} sites, t = {device.t:.4f} meV, "
          f"{slicing.n_layers} layers (largest {slicing.max_width} sites); {len(energies)} energies in {elapsed:.2f} s")
    stem = out / "asymmetric_dot"
    header = ("invented scenario, not a measurement: asymmetric GaAs dot (configs/asymmetric_dot.toml)\n"
              "energy_meV, transmission, conductance_2e2_over_h, conductance_S, open_channels_source, "
              "open_channels_drain")
    table = np.column_stack([result.energies, result.transmission, result.conductance_g0,
                             result.conductance_S, result.n_open])
    np.savetxt(f"{stem}_transmission.csv", table, delimiter=",", header=header,
               fmt=["%.6f", "%.10f", "%.10f", "%.6e", "%d", "%d"])
    fig, ax = plot_device(model, device=device)
    ax.set_title("Invented asymmetric GaAs dot, a = %.0f nm" % device.lattice.spacing)
    fig.savefig(f"{stem}_device.png", dpi=150)

    e_res = sharpest_resonance(result.energies, result.transmission)
    fig, ax = plot_transmission(result)
    ax.axvline(e_res, color="0.6", lw=0.8, ls=":")
    ax.set_title("Invented asymmetric GaAs dot: conductance at zero temperature")
    fig.savefig(f"{stem}_transmission.png", dpi=150)

    local = local_quantities(model, e_res)
    states = scattering_states(model, e_res, "source")
    fig, ax = plot_map(model, local.lead_density[0], label="density from source (1/meV per site)",
                       title=f"Resonance at {e_res:.3f} meV: density from the source")
    fig.savefig(f"{stem}_resonance_density.png", dpi=150)
    fig, ax = plot_currents(model, bond_currents(model, states.wavefunctions), background=local.ldos,
                            background_label="LDOS (1/meV per site)")
    ax.set_title(f"Resonance at {e_res:.3f} meV: source current over the LDOS", fontsize="medium")
    fig.savefig(f"{stem}_resonance_current.png", dpi=150)
    print(f"[asymmetric dot] sharpest resonance at E = {e_res:.4f} meV; T = "
          f"{np.interp(e_res, result.energies, result.transmission):.4f}; maps written")


def multi_terminal(out: Path, name: str, title: str) -> None:
    import matplotlib.pyplot as plt

    device, energies = build(ROOT / "configs" / f"{name}.toml")
    model = device.discretise()
    t0 = time.perf_counter()
    res = transmission_matrix(model, energies)
    elapsed = time.perf_counter() - t0
    n = len(model.leads)
    names = res.lead_names
    # Unitarity: every column of [R; T] sums to the open channels of the source lead.
    col_err = np.abs(res.matrix.sum(axis=1) - res.n_open).max()
    print(f"[{name}] invented example: {model.n_sites} sites, {n} leads, {len(energies)} energies in "
          f"{elapsed:.2f} s; max |sum_p T_pq - N_q| = {col_err:.1e}")
    fig, ax = plt.subplots(figsize=(6.5, 4), layout="constrained")
    # Pairs related by the device's symmetry coincide: wide solid lines under narrow dashed ones keep both visible.
    styles = [("-", 3.0), ("--", 2.2), (":", 2.2), ("-.", 1.6), ((0, (6, 2)), 1.2), ((0, (1, 1)), 1.0)]
    pairs = [(p, q) for q in range(n) for p in range(q + 1, n)]
    for k, (p, q) in enumerate(pairs):
        ls, lw = styles[k % len(styles)]
        ax.plot(res.energies, res.matrix[:, p, q], ls=ls, lw=lw, label=f"T {names[q]} → {names[p]}")
    ax.set_xlabel("energy E (meV)")
    ax.set_ylabel("transmission T")
    ax.set_title(title)
    ax.legend(fontsize="small", frameon=False, ncol=2)
    fig.savefig(out / f"{name}_transmission.png", dpi=150)
    fig, ax = plot_device(model, device=device)
    ax.set_title(title)
    fig.savefig(out / f"{name}_device.png", dpi=150)
    if n == 4:
        g = res.conductance_matrix()
        k = len(energies) // 2
        r_h = four_terminal_resistance(g[k], current=(0, 1), voltage=(2, 3))
        r_2t = four_terminal_resistance(g[k], current=(0, 1), voltage=(0, 1))
        print(f"[{name}] at E = {energies[k]:.2f} meV, B = 0: two-terminal R = {r_2t:.1f} ohm, "
              f"Hall R = {r_h:.2e} ohm (zero by the cross's mirror symmetry)")


def gated_dot(out: Path) -> None:
    """The gated dot through the sweep engine: config -> local processes -> HDF5 -> thermal conductance."""
    import matplotlib.pyplot as plt

    from rgftrans.plots.figures import plot_density

    cfg = load_config(ROOT / "configs" / "gated_dot.toml")
    report = run_sweep(cfg, quiet=True, path=out / "gated_dot.h5")
    data = read_result(report.path)
    (axis,) = data.axes
    e_fermi = cfg.fermi_energy_meV
    # The file holds G(mu, T) at every stored energy as mu and every configured temperature (source -> drain);
    # E_F lies between two stored energies, where G(mu) is smooth at these temperatures: interpolate.
    temps = data.coordinates["temperature"].values
    g_stored = data.quantities["conductance"][..., 1, 0]  # (plunger, energy, temperature), 2e²/h
    g_t = {temp: np.array([np.interp(e_fermi, data.energies_meV, row[:, j]) for row in g_stored])
           for j, temp in enumerate(temps)}
    print(f"[gated dot] invented example: E_F = {e_fermi:.3f} meV, {report.n_points} plunger voltages x "
          f"{len(data.energies_meV)} energies ({report.n_computed} points computed on 2 processes, "
          f"{report.n_resumed} found in the file) in {report.seconds:.1f} s -> {report.path}")
    for temp in temps:
        print(f"[gated dot]   T = {temp:g} K: G from {g_t[temp].min():.3f} to {g_t[temp].max():.3f} 2e²/h")
    layout = cfg.gate_layout().with_voltages(cfg.gates.voltages())
    screened = cfg.screened(layout)
    fig, ax = plot_gate_potential(layout, extent_nm=cfg.build_device().region.bounds, potential=screened)
    ax.set_title("Invented gated dot: 2DEG potential energy, screened (plunger at -0.60 V)", fontsize="medium")
    fig.savefig(out / "gated_dot_potential.png", dpi=150)
    fig, ax = plot_density(screened, layout=layout)
    ax.set_title("Invented gated dot: screened electron density (plunger at -0.60 V)", fontsize="medium")
    fig.savefig(out / "gated_dot_density.png", dpi=150)
    fig, ax = plt.subplots(figsize=(6.5, 4), layout="constrained")
    volts = axis.values
    for temp, style in zip(temps, ("-", "--", ":")):
        ax.plot(volts * 1e3, g_t[temp], style, lw=1.3, label=f"T = {temp:g} K")
    ax.set_xlabel("plunger gate voltage (mV)")
    ax.set_ylabel("conductance G (2e²/h)")
    ax.set_title("Invented gated dot: conductance at the Fermi energy")
    ax.legend(frameon=False)
    fig.savefig(out / "gated_dot_conductance.png", dpi=150)
    header = "invented scenario, not a measurement: gated GaAs dot (configs/gated_dot.toml)\nplunger_V, " + \
        ", ".join(f"G_2e2_over_h_at_{t:g}K" for t in temps)
    np.savetxt(out / "gated_dot_conductance.csv", np.column_stack([volts] + [g_t[t] for t in temps]),
               delimiter=",", header=header, fmt="%.8g")
    from rgftrans.cli import main as rgftrans_main

    status = rgftrans_main(["export", str(report.path), "--quantity", "conductance_S", "--leads", "source,drain",
                            "--out", str(out / "gated_dot_conductance_S_all.csv"), "--overwrite"])
    if status != 0:
        raise RgftransError(f"rgftrans export failed (exit status {status})")


def five_gate_dot(out: Path) -> None:
    """A five-gate dot at lab-notebook voltages: the gates screened by the 2DEG, a plunger sweep, the density map."""
    import matplotlib.pyplot as plt

    from rgftrans.plots.figures import plot_density

    cfg = load_config(ROOT / "configs" / "five_gate_dot.toml")
    report = run_sweep(cfg, quiet=True, path=out / "five_gate_dot.h5")
    data = read_result(report.path)
    (axis,) = data.axes
    hs = cfg.heterostructure()
    sol = cfg.screened(cfg.gate_layout().with_voltages(cfg.gates.voltages()))
    g = data.quantities["conductance"][..., 0, 1, 0]  # (plunger, energy) at 0.1 K, source -> drain
    g_f = np.array([np.interp(cfg.fermi_energy_meV, data.energies_meV, row) for row in g])
    print(f"[five-gate dot] invented example: GaAs 2DEG {hs.depth_nm:g} nm deep, n0 = {hs.density_cm2:.3g} cm^-2, "
          f"gates screened by the 2DEG (Thomas-Fermi; a wide gate depletes at {hs.depletion_voltage_V():.3f} V); "
          f"{report.n_points} plunger voltages in {report.seconds:.1f} s; G(E_F, 0.1 K) from {g_f.min():.3f} to "
          f"{g_f.max():.3f} 2e²/h; depleted fraction of the grid {sol.depleted.mean():.2f}")
    # The dot's constant-interaction numbers: at the config's voltages (open barriers: rough, flagged) and with
    # both barriers closed at -1.0 V, the Coulomb-blockade regime of the same layout.
    import warnings

    from rgftrans.electrostatics.capacitance import gate_capacitances

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # the open dot's note is part of its summary line
        open_dot = cfg.capacitances()
    print("[five-gate dot] at the config's voltages: " + open_dot.summary())
    closed_volts = {**cfg.gates.voltages(), "left_barrier": -1.0, "right_barrier": -1.0}
    extent, spacing = cfg.screening_grid()
    closed_dot = gate_capacitances(cfg.gate_layout().with_voltages(closed_volts), hs, cfg.charge_regions(),
                                   extent_nm=extent, spacing_nm=spacing)
    print("[five-gate dot] barriers closed at -1.0 V: " + closed_dot.summary())
    fig, ax = plot_density(sol, layout=cfg.gate_layout(), regions=cfg.charge_regions())
    ax.set_title("Invented five-gate dot: screened electron density", fontsize="medium")
    fig.savefig(out / "five_gate_dot_density.png", dpi=150)
    fig, ax = plt.subplots(figsize=(6.5, 4), layout="constrained")
    ax.plot(axis.values * 1e3, g_f, "o-", ms=3, lw=1.2)
    ax.set_xlabel("plunger gate voltage (mV)")
    ax.set_ylabel("conductance G (2e²/h)")
    ax.set_title("Invented five-gate dot (screened gates): G at the Fermi energy, 0.1 K", fontsize="medium")
    fig.savefig(out / "five_gate_dot_conductance.png", dpi=150)


def closed_dots(out: Path) -> None:
    """Closed dots by sequential tunnelling: an invented single dot (Coulomb peaks at two temperatures, diamonds)
    and an invented double dot (stability diagram, sensor, triple-point current), both from their layouts."""
    import h5py

    from rgftrans.cli import main as rgftrans_main

    for name in ("closed_dot", "double_dot"):
        print(f"[{name.replace('_', ' ')}] invented example: sequential tunnelling from the layout "
              f"(configs/{name}.toml)")
        status = rgftrans_main(["blockade", str(ROOT / "configs" / f"{name}.toml"), "--out-prefix", str(out / name),
                                "--output", str(out / f"{name}.h5"), "--overwrite"])
        if status != 0:
            raise RgftransError(f"rgftrans blockade {name} failed (exit status {status})")
    # A SYNTHETIC measured trace of the closed dot (invented: the model at 0.1 K, shifted by +1.5 mV, 1 % noise),
    # fitted back with the sequential-tunnelling line shape, starting from the layout's lever arm.
    from rgftrans.analysis.charging import ChargingDot, sequential_conductance

    with h5py.File(out / "closed_dot.h5", "r") as f:
        group = f["blockade"]
        volts = group["plunger_voltage"][()]
        levels, rates = group["levels"][()], group["tunnel_rates"][()]
        e_c, alpha = float(group.attrs["charging_energy_meV"]), float(group.attrs["lever_arm"])
    # The same constant-interaction model the blockade run used (window half filled at the configured voltage),
    # evaluated exactly on the trace's own gate values.
    dot = ChargingDot(charging_energy_meV=e_c, lever_arm=alpha, levels_meV=levels, rates_per_s=rates, spin=True,
                      offset_meV=e_c * levels.size)
    centre = 0.5 * (volts[0] + volts[-1])
    g = sequential_conductance(dot, volts - centre - 1.5e-3, 0.1)[0]
    rng = np.random.default_rng(20261204)
    noise = 0.01 * g.max()
    measured = g + rng.normal(0.0, noise, volts.size)
    csv_path = out / "synthetic_coulomb_peaks.csv"
    np.savetxt(csv_path, np.column_stack([volts, measured * 1e9]), delimiter=",", fmt="%.9g",
               header="# SYNTHETIC trace, not a measurement: the invented closed dot at 0.1 K, shifted +1.5 mV, "
                      "1 % noise\nVg [V],G [nS]", comments="")
    print("[closed dot] synthetic_coulomb_peaks.csv: SYNTHETIC (made from the model); fitting it back:")
    status = rgftrans_main(["compare", str(out / "closed_dot.h5"), str(csv_path), "--coulomb-peaks", "--spin",
                            "--temperature", "0.1", "--noise", f"{noise:.6g}", "--group", "compare_peaks",
                            "--description", "synthetic trace (invented)", "--overwrite",
                            "--out-prefix", str(out / "synthetic_peaks")])
    if status != 0:
        raise RgftransError(f"the Coulomb-peak fit failed (exit status {status})")


def disorder_ensembles(out: Path) -> None:
    """Disorder ensembles: conductance fluctuations of an invented GaAs wire with and without a field, and the
    localisation length of an invented tight-binding chain against Thouless's weak-disorder formula."""
    import dataclasses

    import matplotlib.pyplot as plt

    from rgftrans.cli import main as rgftrans_main
    from rgftrans.io.ensemble import read_ensemble
    from rgftrans.plots.ensemble import plot_fluctuations, plot_localisation
    from rgftrans.system.fields import Disorder, MagneticField
    from rgftrans.transport.ensemble import disorder_ensemble, localisation_length

    print("[disordered wire] invented example: 300 disorder samples of a GaAs wire (configs/disordered_wire.toml)")
    status = rgftrans_main(["ensemble", str(ROOT / "configs" / "disordered_wire.toml"), "--samples", "300",
                            "--output", str(out / "disordered_wire.h5"), "--out-prefix", str(out / "disordered_wire"),
                            "--overwrite", "--quiet"])
    if status != 0:
        raise RgftransError(f"rgftrans ensemble failed (exit status {status})")
    no_field = read_ensemble(out / "disordered_wire.h5")
    device = load_config(ROOT / "configs" / "disordered_wire.toml").build_device()
    with_field = disorder_ensemble(dataclasses.replace(device, field=MagneticField(tesla=0.1)), no_field.energies,
                                   seeds=no_field.seeds)
    print(f"[disordered wire] var G averaged over the energies: {no_field.variance_g0.mean():.3f} (2e^2/h)^2 at B = 0 "
          f"(universal 2/15 = 0.133), {with_field.variance_g0.mean():.3f} at B = 0.1 T (universal 1/15 = 0.067); "
          f"standard error of each average {no_field.variance_error_g0.mean() / np.sqrt(no_field.energies.size):.3f} "
          "if the five energies fluctuate independently (more if they are correlated)")
    fig, _ = plot_fluctuations([no_field, with_field], ["B = 0", "B = 0.1 T"])
    fig.suptitle("Invented GaAs wire 300 nm x 900 nm, W = 12 meV disorder: conductance fluctuations",
                 fontsize="medium")
    fig.savefig(out / "disordered_wire_field.png", dpi=150)
    plt.close(fig)

    # An invented tight-binding chain (t = 1 meV, a = 1 nm, W = 1 meV) at four lengths, 400 samples each.
    energies = np.array([-1.2, 0.5])
    lengths = [100, 200, 300, 400]
    ensembles = []
    for n in lengths:
        chain = Device(rectangle(0, -0.4, n - 1, 0.4), [Lead("left", "left", (-0.4, 0.4)),
                                                        Lead("right", "right", (-0.4, 0.4))],
                       lattice=square(1.0), hopping=1.0, energy_origin="band_centre", disorder=Disorder(1.0, 0))
        ensembles.append(disorder_ensemble(chain, energies, samples=400))
    fit = localisation_length(lengths, ensembles)
    thouless = 24 * (4 - energies**2)  # xi = 24 (4t^2 - E^2) / W^2 in sites (Thouless 1979, from memory)
    for e, xi, err, ref in zip(energies, fit.xi_nm, fit.xi_error_nm, thouless):
        print(f"[localisation] chain at E = {e:+.1f} meV: xi = {xi:.1f} +- {err:.1f} nm fitted, "
              f"{ref:.1f} nm from Thouless's weak-disorder formula")
    fig, ax = plot_localisation(fit, reference_nm=thouless, reference_label="Thouless, weak disorder")
    ax.set_title("Invented chain, t = 1 meV, a = 1 nm, W = 1 meV: 400 disorder samples per length",
                 fontsize="medium")
    fig.savefig(out / "localisation_chain.png", dpi=150)
    plt.close(fig)


def synthetic_trace(out: Path) -> None:
    """A synthetic measured plunger trace made from the gated-dot sweep, then fitted back with `rgftrans compare`.

    Invented truth: 1 K, gate offset +8 mV, series resistance 3 kOhm, Gaussian noise 0.3 % of 2e²/h (seeded).
    """
    from rgftrans.cli import main as rgftrans_main
    from rgftrans.io.compare import model_conductance

    cfg = load_config(ROOT / "configs" / "gated_dot.toml")
    result = out / "gated_dot.h5"
    truth = {"temperature_K": 1.0, "offset_V": 8e-3, "r_series_ohm": 3000.0}
    gate = np.linspace(-0.73, -0.47, 301)
    g_model = model_conductance(result, gate, mu_ref_meV=cfg.fermi_energy_meV, gate_axis="gates.plunger.voltage_V",
                                **truth)
    noise = 0.003 * CONDUCTANCE_QUANTUM_S
    g_meas = g_model + np.random.default_rng(20261202).normal(0.0, noise, gate.size)
    csv_path = out / "synthetic_plunger_trace.csv"
    np.savetxt(csv_path, np.column_stack([gate, g_meas * 1e6]), delimiter=",", fmt="%.9g",
               header="# SYNTHETIC trace, not a measurement: made from the invented gated dot at 1 K, offset +8 mV, "
                      "R_s = 3 kOhm, noise 0.3 % of 2e2/h\nVg [V],G [uS]", comments="")
    print(f"[measured trace] {csv_path.name}: SYNTHETIC (made from the model with invented temperature, offset, R_s "
          "and noise); fitting it back:")
    status = rgftrans_main(["compare", str(result), str(csv_path), "--gate-axis", "gates.plunger.voltage_V",
                            "--mu-ref", f"{cfg.fermi_energy_meV:.9g}", "--temperature", "0.6", "--fit-series",
                            "--fit-temperature", "--r-series", "1000", "--noise", f"{noise:.6g}",
                            "--description", "synthetic trace (invented)", "--overwrite",
                            "--out-prefix", str(out / "synthetic_trace")])
    if status != 0:
        raise RgftransError(f"the trace fit failed (exit status {status})")


def dark_states(out: Path) -> None:
    """The two-gate asymmetric dot: run the plane sweep, then search it for BICs with the command line."""
    from rgftrans.cli import main as rgftrans_main

    result = out / "asymmetric_dot_gates.h5"
    print("[dark states] invented scenario: asymmetric GaAs dot, two gates; sweep of both gate voltages")
    start = time.perf_counter()
    status = rgftrans_main(["run", str(ROOT / "configs" / "asymmetric_dot_gates.toml"), "--quiet",
                            "--output", str(result)])
    if status != 0:
        raise RgftransError(f"the plane sweep failed (exit status {status})")
    print(f"[dark states] sweep stored in {result} ({time.perf_counter() - start:.1f} s); "
          f"now: rgftrans darkstates {result.relative_to(ROOT) if result.is_relative_to(ROOT) else result}")
    status = rgftrans_main(["darkstates", str(result), "--out-prefix", str(out / "dark_states"), "--overwrite"])
    if status != 0:
        raise RgftransError(f"the dark-state search failed (exit status {status})")


def microwave_cavity(out: Path) -> None:
    """The photonic example through `rgftrans waveguide`."""
    from rgftrans.cli import main as rgftrans_main

    print("[microwave cavity] invented example: TM light between metal plates, ceramic puck, offset guides")
    status = rgftrans_main(["waveguide", str(ROOT / "configs" / "microwave_cavity.toml"),
                            "--out-prefix", str(out / "microwave_cavity"), "--output", str(out / "microwave_cavity.h5"),
                            "--overwrite"])
    if status != 0:
        raise RgftransError(f"the waveguide example failed (exit status {status})")


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--out", type=Path, default=ROOT / "out")
    args = parser.parse_args(argv)
    args.out.mkdir(parents=True, exist_ok=True)
    from rgftrans.cli import one_line_warnings

    try:
        with one_line_warnings():  # as on the command line: one line per distinct warning
            asymmetric_dot(args.out)
            multi_terminal(args.out, "three_terminal_dot", "Invented three-terminal dot with an antidot")
            multi_terminal(args.out, "hall_cross", "Invented four-lead GaAs Hall cross")
            gated_dot(args.out)
            five_gate_dot(args.out)
            closed_dots(args.out)
            disorder_ensembles(args.out)
            synthetic_trace(args.out)
            dark_states(args.out)
            microwave_cavity(args.out)
    except (RgftransError, KeyError, tomllib.TOMLDecodeError) as err:
        print(f"demo: {err}", file=sys.stderr)
        return 2
    print(f"figures and tables in {args.out}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
