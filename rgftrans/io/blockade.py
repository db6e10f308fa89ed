"""From a gate layout to Coulomb peaks, diamonds and stability diagrams: the config's ``[blockade]`` section.

Every number comes from the same layout:

* charging energies, lever arms and the dots' capacitance matrix from the self-consistent electrostatics
  (:meth:`RunConfig.capacitances`, ``[[gates.region]]``);
* single-particle levels from the closed spectrum of the dot's region (:func:`rgftrans.spectra.closed.
  closed_levels`, the device's Hamiltonian with its screened potential, hard walls at the region's outline);
* tunnel rates per level and lead from the open device's resonance poles nearest those levels
  (:func:`rgftrans.spectra.poles.partial_widths`, the first two leads as source and drain);

and the master equation of :mod:`rgftrans.analysis.charging` turns them into G(V_plunger) at every configured
temperature and the diamond map (one dot), or the charge-stability diagram with a sensor signal and the
triple-point current (two dots in series).  Conventions (stated in the result): the plunger axes are absolute
voltages centred on the configured ones; a single dot's electrons are counted in the window of levels nearest
E_F, half of which are filled at the configured plunger voltage (the Thomas-Fermi electron number fixes the
peak series only to within a charging energy); a double dot's charges count from the whole electrons the
electrostatics puts on each dot.  The interdot tunnel coupling is half the bonding-antibonding splitting of
the closed double dot's levels near E_F (or the config's ``tunnel_coupling_meV``).
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np

from rgftrans.analysis.charging import (ChargingDot, DoubleDot, HBAR_MEV_S, blockade_regime, sequential_conductance,
                                        stability_map)
from rgftrans.constants import CONDUCTANCE_QUANTUM_S
from rgftrans.electrostatics.capacitance import E2_OVER_AF_MEV
from rgftrans.errors import RgftransError

__all__ = ["SingleDotBlockade", "DoubleDotBlockade", "blockade_from_config", "write_blockade", "interdot_coupling"]


@dataclass(frozen=True, eq=False)
class SingleDotBlockade:
    """Coulomb peaks and diamonds of one dot, with everything they were computed from.

    Attributes
    ----------
    dot, plunger : str
    model : ChargingDot
    plunger_V : (n,) float ndarray, V
    diamond_plunger_V : (n_d,) float ndarray, V
        The plunger values of the diamond map (at most DIAMOND_GATE_POINTS of the same span).
    temperatures_K : (n_T,) float ndarray, K
    conductance_S : (n_T, n) float ndarray, S
    bias_V : (m,) float ndarray, V
    current_A, differential_S : (m, n_d) float ndarray
        Current and dI/dV at the lowest temperature (the diamond map).
    levels_meV : (M,) float ndarray
        The closed levels used, relative to E_F.
    rates_per_s : (M, 2) float ndarray
        Their tunnel rates into source and drain.
    charging_energy_meV, lever_arm, total_capacitance_aF : float
    closed : bool
        Whether the electrostatics found the dot a closed island.
    regime : str
        Which picture holds, in words with the numbers.
    """

    dot: str
    plunger: str
    model: ChargingDot
    plunger_V: np.ndarray
    diamond_plunger_V: np.ndarray
    temperatures_K: np.ndarray
    conductance_S: np.ndarray
    bias_V: np.ndarray
    current_A: np.ndarray
    differential_S: np.ndarray
    levels_meV: np.ndarray
    rates_per_s: np.ndarray
    charging_energy_meV: float
    lever_arm: float
    total_capacitance_aF: float
    closed: bool
    regime: str

    def summary(self) -> str:
        rates = ", ".join(f"{e:+.3f} meV: {r[0]:.3g} / {r[1]:.3g} s^-1" for e, r in zip(self.levels_meV,
                                                                                  self.rates_per_s))
        return (f"dot {self.dot!r} (plunger {self.plunger!r}; {'closed island' if self.closed else 'OPEN'}): "
                f"E_C = {self.charging_energy_meV:.3g} meV (C_Sigma = {self.total_capacitance_aF:.3g} aF), lever "
                f"arm {self.lever_arm:.3g}; levels relative to E_F with source / drain tunnel rates: {rates}\n"
                f"  regime: {self.regime}")


@dataclass(frozen=True, eq=False)
class DoubleDotBlockade:
    """Charge-stability diagram of two dots in series.

    Attributes
    ----------
    dots, plungers : (2,) tuple of str
    model : DoubleDot
    plunger1_V, plunger2_V : (n1,), (n2,) float ndarray, V
    charge1, charge2 : (n2, n1) int ndarray
        Ground-state electrons on each dot (absolute: the electrostatics' whole electrons plus the change).
    sensor_meV : (n2, n1) float ndarray
        A nearby sensor's potential shift.
    current_A : (n2, n1) float ndarray
        Current at ``bias_V`` and the lowest temperature.
    bias_V, temperature_K : float
    capacitance_aF, gate_capacitance_aF : (2, 2) float ndarray
    charging_energy_meV : (2,) float ndarray
    mutual_energy_meV : float
    """

    dots: tuple
    plungers: tuple
    model: DoubleDot
    plunger1_V: np.ndarray
    plunger2_V: np.ndarray
    charge1: np.ndarray
    charge2: np.ndarray
    sensor_meV: np.ndarray
    current_A: np.ndarray
    bias_V: float
    temperature_K: float
    capacitance_aF: np.ndarray
    gate_capacitance_aF: np.ndarray
    charging_energy_meV: np.ndarray
    mutual_energy_meV: float
    coupling_source: str = ""

    def summary(self) -> str:
        c = self.capacitance_aF
        g = self.gate_capacitance_aF
        return (f"double dot {self.dots[0]!r}-{self.dots[1]!r} (plungers {self.plungers[0]!r}, {self.plungers[1]!r}): "
                f"C_Sigma = {c[0, 0]:.3g} / {c[1, 1]:.3g} aF, mutual {-c[0, 1]:.3g} aF; plunger capacitances "
                f"{g[0, 0]:.3g} / {g[1, 1]:.3g} aF (cross {g[0, 1]:.3g} / {g[1, 0]:.3g} aF); E_C = "
                f"{self.charging_energy_meV[0]:.3g} / {self.charging_energy_meV[1]:.3g} meV, mutual "
                f"{self.mutual_energy_meV:.3g} meV; tunnel rates source {self.model.source_rate_per_s:.3g}, drain "
                f"{self.model.drain_rate_per_s:.3g} s^-1, interdot coupling t_c = {self.model.tunnel_coupling_meV:.3g} meV "
                f"({self.coupling_source})")


def _level_rates(model, levels):
    """Source and drain tunnel rates (s^-1) of each closed level: from the open device's pole nearest in energy
    among those whose state lies mostly on the dot (the same sites), within half a level spacing."""
    from rgftrans.spectra.poles import resonances
    from rgftrans.spectra.widths import partial_widths

    names = [lead.name for lead in model.leads][:2]
    orbitals = (levels.site_indices[:, None] * levels.norbs + np.arange(levels.norbs)[None, :]).ravel()
    e_all = levels.energies_meV
    spacing = float(np.mean(np.diff(e_all))) if e_all.size > 1 else np.inf
    rates = np.zeros((levels.energies_meV.size, 2))
    for k, e in enumerate(levels.energies_meV):
        candidates = resonances(model, float(e), count=CANDIDATE_POLES)
        on_dot = [p for p in candidates
                  if np.linalg.norm(p.state[orbitals]) ** 2 / np.linalg.norm(p.state) ** 2 > MIN_WEIGHT_ON_DOT]
        best = min(on_dot, key=lambda p: abs(p.energy_meV - e), default=None)
        if best is None or abs(best.energy_meV - e) > 0.5 * min(spacing, 1.0):
            warnings.warn(f"no pole of the open device on the dot within half a level spacing of the closed level at "
                          f"{e:.4g} meV; its tunnel rates are set to 0", stacklevel=3)
            continue
        # Degenerate partners (the mirror dot of a symmetric double dot) mix freely with the level: summed, their
        # rates into each lead are those of the level itself.
        group = [p for p in candidates if abs(p.energy_meV - best.energy_meV) < DEGENERATE_MEV]
        for pole in group:
            per_lead = partial_widths(model, pole).rate_by_lead
            rates[k] += [per_lead[names[0]], per_lead[names[1]]]
    return rates


#: Levels of the closed double dot examined for the bonding-antibonding pair.
COUPLING_LEVELS = 6
#: Most plunger values of a diamond map.
DIAMOND_GATE_POINTS = 301
#: Poles of the open device examined per closed level, and the share of a pole's weight that must lie on the
#: dot's sites for it to be the dot's level (the others live in the reservoirs between the leads and barriers).
CANDIDATE_POLES = 8
MIN_WEIGHT_ON_DOT = 0.3
#: Poles closer than this (meV) are one degenerate level.
DEGENERATE_MEV = 1e-6


def _without(model, remove):
    """The model with the sites ``remove`` (bool mask) taken out (hard walls): e.g. one dot of a pair, so that the
    other's levels have no degenerate partner."""
    from dataclasses import replace

    keep_sites = ~np.asarray(remove, dtype=bool)
    norbs = int(model.norbs)
    keep = np.repeat(keep_sites, norbs)
    new_index = np.cumsum(keep) - 1
    leads = []
    for lead in model.leads:
        if not np.all(keep[lead.interface]):
            raise RgftransError(f"lead {lead.name!r} touches the removed sites; draw the dot regions away from the leads")
        leads.append(replace(lead, interface=new_index[lead.interface]))
    ham = model.hamiltonian.tocsr()[keep][:, keep]
    from rgftrans.system.device import TightBindingModel

    return TightBindingModel(ham, model.positions[keep_sites], tuple(leads), energy_scale=model.energy_scale,
                             norbs=norbs, spin_degeneracy=model.spin_degeneracy)


def _dot_sites(cfg, model, name):
    """The device's sites on a dot's island as the electrostatics finds it (its closed 2DEG plus a depleted rim),
    else inside the drawn region: hard walls there leave the levels of the real dot."""
    from rgftrans.electrostatics.capacitance import cell_weights, island_weights

    region = cfg.charge_regions()[name]
    sol = cfg.screened(cfg.gate_layout().with_voltages(cfg.gates.voltages()))
    island = island_weights(sol, cell_weights(region, sol.x_nm, sol.y_nm))
    if island is None:
        return region.contains(model.positions)
    h = float(sol.x_nm[1] - sol.x_nm[0])
    ix = np.clip(np.rint((model.positions[:, 0] - sol.x_nm[0]) / h).astype(int), 0, sol.x_nm.size - 1)
    iy = np.clip(np.rint((model.positions[:, 1] - sol.y_nm[0]) / h).astype(int), 0, sol.y_nm.size - 1)
    return island[iy, ix] > 0


def _single(cfg) -> SingleDotBlockade:
    from rgftrans.spectra.closed import closed_levels

    spec = cfg.blockade
    dot, plunger = spec.dots[0], spec.plungers[0]
    caps = cfg.capacitances()
    i = caps.region_names.index(dot)
    e_c = float(caps.charging_energy_meV[i])
    alpha = caps.lever_arm(dot, plunger)
    model = cfg.build_device().discretise()
    e_f = cfg.fermi_energy_meV
    levels = closed_levels(model, count=spec.levels, target=e_f, sites=_dot_sites(cfg, model, dot))
    spacing = float(np.mean(np.diff(levels.energies_meV))) if spec.levels > 1 else e_c
    rates = _level_rates(model, levels)
    orbitals = spec.levels * (2 if spec.spin else 1)
    charging = ChargingDot(charging_energy_meV=e_c, lever_arm=alpha, levels_meV=levels.energies_meV - e_f,
                           rates_per_s=rates, spin=spec.spin, g_factor=cfg.material.material().g_factor,
                           field_T=cfg.field.tesla, offset_meV=e_c * orbitals / 2)
    base = cfg.gates.voltages()[plunger]
    offsets = np.linspace(-0.5, 0.5, spec.plunger_points) * spec.plunger_span_V
    temps = cfg.temperatures()
    g = np.array([sequential_conductance(charging, offsets, t)[0] for t in temps])
    bias = np.linspace(-0.5, 0.5, spec.bias_points) * spec.bias_span_mV * 1e-3
    # The diamond map on at most DIAMOND_GATE_POINTS plunger values (its cost is gate x bias master equations).
    diamond = np.linspace(-0.5, 0.5, min(spec.plunger_points, DIAMOND_GATE_POINTS)) * spec.plunger_span_V
    didv, result = stability_map(charging, diamond, bias, float(temps.min()))
    width = HBAR_MEV_S * float(np.max(rates.sum(axis=1))) if rates.size else 0.0
    regime = blockade_regime(charging_energy_meV=e_c, level_spacing_meV=spacing, width_meV=width,
                             temperature_K=float(temps.min()))
    return SingleDotBlockade(dot=dot, plunger=plunger, model=charging, plunger_V=base + offsets,
                             diamond_plunger_V=base + diamond,
                             temperatures_K=temps, conductance_S=g, bias_V=bias, current_A=result.current_A,
                             differential_S=didv, levels_meV=levels.energies_meV - e_f, rates_per_s=rates,
                             charging_energy_meV=e_c, lever_arm=alpha, total_capacitance_aF=float(caps.total_aF[i]),
                             closed=bool(caps.closed[i]), regime=regime)


def interdot_coupling(model, first, second, *, target: float, count: int = 6) -> float | None:
    """t_c of two dots (boolean site masks ``first`` and ``second`` of ``model``): half the bonding-antibonding
    splitting of the closed double dot's levels nearest ``target`` (meV).

    The closed system of both dots' sites; a level shared about equally by the two (a quarter to three
    quarters of its weight on the first) belongs to a bonding-antibonding pair, split by 2 t_c for aligned dots
    (degenerate perturbation theory; common practice).  Of the adjacent shared pairs, the one whose mean lies
    nearest ``target``.  None when every level sits on one dot (coupling below resolution, or dots detuned).
    """
    from rgftrans.spectra.closed import closed_levels

    levels = closed_levels(model, count=count, target=target, sites=np.asarray(first) | np.asarray(second))
    on_first = np.isin(levels.site_indices, np.flatnonzero(first))
    weight = np.sum(np.abs(levels.states.reshape(levels.site_indices.size, levels.norbs, -1)[on_first]) ** 2,
                    axis=(0, 1))
    shared = (weight > 0.25) & (weight < 0.75)
    e = levels.energies_meV
    pairs = [k for k in range(e.size - 1) if shared[k] and shared[k + 1]]
    if not pairs:
        return None
    k = min(pairs, key=lambda j: abs(0.5 * (e[j] + e[j + 1]) - target))
    return 0.5 * float(e[k + 1] - e[k])


def _tunnel_coupling(cfg, model, masks, e_f) -> tuple[float, str]:
    """The interdot coupling: the config's value if it gives one, else :func:`interdot_coupling`."""
    if cfg.blockade.tunnel_coupling_meV is not None:
        return float(cfg.blockade.tunnel_coupling_meV), "given"
    t_c = interdot_coupling(model, masks[0], masks[1], target=e_f, count=COUPLING_LEVELS)
    if t_c is None:
        warnings.warn("the closed double dot's levels near E_F are each on one dot (the interdot barrier is too "
                      "opaque to split them measurably); the interdot coupling is taken as 0 -- give "
                      "tunnel_coupling_meV in [blockade] to override", stacklevel=3)
        return 0.0, "below resolution"
    return t_c, "half the bonding-antibonding splitting"


def _double(cfg) -> DoubleDotBlockade:
    from rgftrans.spectra.closed import closed_levels

    spec = cfg.blockade
    caps = cfg.capacitances()
    rows = [caps.region_names.index(d) for d in spec.dots]
    cols = [caps.gate_names.index(p) for p in spec.plungers]
    c = caps.capacitance_matrix_aF[np.ix_(rows, rows)]
    c_g = caps.gate_matrix_aF[np.ix_(rows, cols)]
    model = cfg.build_device().discretise()
    e_f = cfg.fermi_energy_meV
    lead_rates = []
    masks = [_dot_sites(cfg, model, name) for name in spec.dots]
    for k, name in enumerate(spec.dots):
        alone = _without(model, masks[1 - k])  # the other dot walled off: no degenerate partner
        lv = closed_levels(alone, count=1, target=e_f, sites=masks[k][~masks[1 - k]])
        lead_rates.append(_level_rates(alone, lv)[0, k])  # dot 1 to the source, dot 2 to the drain
    t_c, t_c_source = _tunnel_coupling(cfg, model, masks, e_f)
    n_tf = caps.electron_number[rows]
    background = tuple(float(np.floor(n) - n) for n in n_tf)  # the configured point sits at N_TF on each dot
    dd = DoubleDot(capacitance_aF=c, gate_capacitance_aF=c_g, source_rate_per_s=max(lead_rates[0], 1.0),
                   drain_rate_per_s=max(lead_rates[1], 1.0), tunnel_coupling_meV=t_c,
                   background_charge=background)
    volts = cfg.gates.voltages()
    base = np.array([volts[p] for p in spec.plungers])
    offsets = np.linspace(-0.5, 0.5, spec.plunger_points) * spec.plunger_span_V
    n1, n2 = dd.charge_map(offsets, offsets)
    n1, n2 = n1 + int(np.floor(n_tf[0])), n2 + int(np.floor(n_tf[1]))
    sensor = dd.sensor_signal(offsets, offsets, coupling_meV=tuple(spec.sensor_coupling_meV))
    temperature = float(cfg.temperatures().min())
    current = dd.current(offsets, offsets, spec.stability_bias_mV * 1e-3, temperature)
    inv = np.linalg.inv(c) * E2_OVER_AF_MEV  # e^2 C^-1 in meV
    return DoubleDotBlockade(dots=tuple(spec.dots), plungers=tuple(spec.plungers), model=dd,
                             plunger1_V=base[0] + offsets, plunger2_V=base[1] + offsets, charge1=n1, charge2=n2,
                             sensor_meV=sensor, current_A=current, bias_V=spec.stability_bias_mV * 1e-3,
                             temperature_K=temperature, capacitance_aF=c, gate_capacitance_aF=c_g,
                             charging_energy_meV=np.diag(inv).copy(), mutual_energy_meV=float(inv[0, 1]),
                             coupling_source=t_c_source)


def blockade_from_config(cfg):
    """The ``[blockade]`` computation of a config: a SingleDotBlockade or a DoubleDotBlockade."""
    if cfg.blockade is None:
        raise RgftransError(f"{cfg.source}: no [blockade] table; name the dot region(s) and plunger(s) there")
    if cfg.gates is None or cfg.gates.screening != "thomas-fermi":
        raise RgftransError(f"{cfg.source}: charging energies come from the screened electrostatics; set [gates] "
                            "screening = \"thomas-fermi\"")
    return _single(cfg) if len(cfg.blockade.dots) == 1 else _double(cfg)


def write_blockade(result, path, *, overwrite: bool = False) -> None:
    """Store a blockade result as the group ``blockade`` (beside a sweep, or in a new file of its own)."""
    from rgftrans.io.store import StoredArray, write_group

    if isinstance(result, SingleDotBlockade):
        items = {
            "plunger_voltage": StoredArray(result.plunger_V, "V", f"voltage on gate '{result.plunger}'", scale=True),
            "temperature": StoredArray(result.temperatures_K, "K", "electron temperature", scale=True),
            "bias": StoredArray(result.bias_V, "V", "source-drain bias (split symmetrically)", scale=True),
            "diamond_plunger_voltage": StoredArray(result.diamond_plunger_V, "V", "plunger voltage of the diamond map",
                                                   scale=True),
            "conductance": StoredArray(result.conductance_S, "S", "linear conductance, sequential tunnelling",
                                       dims=("temperature", "plunger_voltage")),
            "conductance_2e2h": StoredArray(result.conductance_S / CONDUCTANCE_QUANTUM_S, "2e^2/h",
                                            "linear conductance in units of 2e^2/h",
                                            dims=("temperature", "plunger_voltage")),
            "current": StoredArray(result.current_A, "A", "current at the lowest temperature",
                                   dims=("bias", "diamond_plunger_voltage")),
            "differential_conductance": StoredArray(result.differential_S, "S", "dI/dV at the lowest temperature",
                                                    dims=("bias", "diamond_plunger_voltage")),
            "levels": StoredArray(result.levels_meV, "meV", "closed levels relative to E_F"),
            "tunnel_rates": StoredArray(result.rates_per_s, "s^-1", "tunnel rates of each level to source, drain"),
        }
        attrs = {"kind": "single dot", "dot": result.dot, "plunger": result.plunger,
                 "charging_energy_meV": result.charging_energy_meV, "lever_arm": result.lever_arm,
                 "total_capacitance_aF": result.total_capacitance_aF, "closed": result.closed, "regime": result.regime,
                 "spin": bool(result.model.spin)}
    else:
        grid = ("plunger2_voltage", "plunger1_voltage")
        items = {
            "plunger1_voltage": StoredArray(result.plunger1_V, "V", f"voltage on gate '{result.plungers[0]}'",
                                            scale=True),
            "plunger2_voltage": StoredArray(result.plunger2_V, "V", f"voltage on gate '{result.plungers[1]}'",
                                            scale=True),
            "charge1": StoredArray(result.charge1, "1", f"electrons on dot '{result.dots[0]}'", dims=grid),
            "charge2": StoredArray(result.charge2, "1", f"electrons on dot '{result.dots[1]}'", dims=grid),
            "sensor": StoredArray(result.sensor_meV, "meV", "charge-sensor potential shift", dims=grid),
            "current": StoredArray(result.current_A, "A", "sequential current through the series", dims=grid),
            "capacitance_matrix": StoredArray(result.capacitance_aF, "aF", "Maxwell capacitance matrix of the dots"),
            "gate_capacitance": StoredArray(result.gate_capacitance_aF, "aF", "plunger capacitances (dot, plunger)"),
        }
        attrs = {"kind": "double dot", "dots": " ".join(result.dots), "plungers": " ".join(result.plungers),
                 "bias_V": result.bias_V, "temperature_K": result.temperature_K,
                 "tunnel_coupling_meV": result.model.tunnel_coupling_meV, "coupling_source": result.coupling_source,
                 "source_rate_per_s": result.model.source_rate_per_s,
                 "drain_rate_per_s": result.model.drain_rate_per_s}
    write_group(path, "blockade", items, attrs=attrs, overwrite=overwrite)
