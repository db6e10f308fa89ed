"""Closed dots: the constant-interaction model and sequential tunnelling (Coulomb peaks and diamonds).

When a dot's barriers are closed, charging dominates: transport is a sequence of single-electron tunnelling
events, each changing the dot's charge by one, at rates set by the barriers and the leads' Fermi functions
(the "orthodox" picture).  This module solves it:

* :class:`ChargingDot` -- the constant-interaction model of one dot (e.g. W. G. van der Wiel et al., Rev. Mod.
  Phys. 75, 1 (2002); C. W. J. Beenakker, Phys. Rev. B 44, 1646 (1991); both from memory): the energy of an
  occupation {n_k} of single-particle spin-orbitals is

      E = sum_k eps_k n_k + E_C N^2 / 2 - N (e alpha V_g + mu_0),      N = sum_k n_k,

  so the electrochemical potential of the N-th electron in orbital k is ``eps_k + E_C (N - 1/2) - e alpha V_g
  - mu_0`` (V_g the plunger voltage, alpha its lever arm, mu_0 an offset).  Orbitals come from the dot's
  spectrum (with spin: each twice, split by the Zeeman energy g mu_B B), or -- a metallic dot -- from a
  continuum of levels with spacing Delta much below kT, where only the charge N matters.
* :func:`steady_state`, :func:`sequential_current`, :func:`sequential_conductance`, :func:`stability_map` -- the master equation
  over the dot's states: rate ``Gamma_k^r f_r(dE)`` for an electron entering orbital k from lead r with
  energy dE, ``Gamma_k^r (1 - f_r(dE))`` for one leaving; its steady state (the rate matrix's null vector,
  dense linear algebra, one small system per gate and bias point, batched); the current from the source;
  G = dI/dV and the diamond map dI/dV(V_g, V_sd).
* :class:`DoubleDot` -- two dots in series with a 2x2 capacitance matrix and their gates: the
  constant-interaction energy U(N1, N2) = 1/2 (eN - C_g V)^T C^-1 (eN - C_g V), the ground-state charge map
  (the honeycomb), a charge sensor's signal and the current through the series at small bias.

Valid when the level widths are far below kT (hbar Gamma << kT, no cotunnelling); :func:`blockade_regime` says so in
words from the numbers (:func:`blockade_regime`).  Units: meV, V, K, tunnel rates in s^-1 (Gamma/hbar), current in A, conductance in
S and in 2e^2/h.
"""

from __future__ import annotations

import itertools
import math
import warnings
from dataclasses import dataclass, field

import numpy as np
from scipy import constants as _codata
from scipy.special import expit

from rgftrans.constants import BOHR_MAGNETON_MEV_PER_T, BOLTZMANN_MEV_PER_K, CONDUCTANCE_QUANTUM_S
from rgftrans.errors import RgftransError

__all__ = ["ChargingDot", "DoubleDot", "SequentialResult", "steady_state", "sequential_current",
           "sequential_conductance", "stability_map", "blockade_regime", "HBAR_MEV_S", "MAX_STATES"]

#: hbar in meV s (CODATA via scipy.constants): a rate Gamma (s^-1) is a width hbar Gamma in meV.
HBAR_MEV_S = _codata.hbar / _codata.e * 1e3
#: Most many-body states the master equation takes (2^12 occupations of 12 spin-orbitals).
MAX_STATES = 4096
#: Sequential tunnelling needs hbar Gamma << kT; above this ratio a warning says so.
MAX_WIDTH_OVER_KT = 0.1
#: Entries of the rate matrices built at once (points x states^2): 1.2e7 doubles, about 100 MB per array.
CHUNK_ENTRIES = 12_000_000
#: Bias step of the numerical dI/dV, in units of kT: small enough that the second-order error (step^2 / 24 of
#: the curvature, ~1e-6 relative) is below the tests' tolerances, large against the solve's round-off.
DIFFERENTIAL_STEP_KT = 5e-3


def _fermi(energy_meV, kt_meV):
    return expit(-np.asarray(energy_meV, float) / kt_meV)


def _check_temperature(temperature_K) -> float:
    t = float(temperature_K)
    if not (math.isfinite(t) and t > 0):
        raise RgftransError(f"temperature {temperature_K!r} K must be positive and finite; sequential tunnelling "
                            "needs kT > 0 (give the electron temperature in kelvin)")
    return t


@dataclass(frozen=True, eq=False)
class ChargingDot:
    """The constant-interaction model of one dot between a source and a drain.

    Parameters
    ----------
    charging_energy_meV : float
        E_C = e^2 / C_Sigma.
    lever_arm : float
        alpha of the swept (plunger) gate: the dot's levels move by -e alpha per volt on it.
    levels_meV : (M,) float array_like, optional
        Single-particle (orbital) energies.  Omit for a metallic dot (``level_spacing_meV`` instead).
    rates_per_s : (M, 2) or (2,) float array_like
        Tunnel rates Gamma / hbar of each orbital into the source and the drain (columns); one pair for all.
        For a metallic dot: the rates per level.
    spin : bool
        Each orbital holds two spin states (Zeeman split by ``g_factor mu_B field_T``).
    g_factor, field_T : float
    level_spacing_meV : float, optional
        Metallic dot: mean spacing Delta of a continuum of levels (Delta << kT); the tunnelling conductance of
        lead r is then e^2 Gamma_r / Delta.
    offset_meV : float
        mu_0, shifting every addition energy.
    max_electrons : int
        Metallic dot: charge states 0..max_electrons are kept.
    """

    charging_energy_meV: float
    lever_arm: float
    levels_meV: np.ndarray | None = None
    rates_per_s: np.ndarray = field(default_factory=lambda: np.array([1e9, 1e9]))
    spin: bool = False
    g_factor: float = -0.44
    field_T: float = 0.0
    level_spacing_meV: float | None = None
    offset_meV: float = 0.0
    max_electrons: int = 6

    def __post_init__(self):
        for name in ("charging_energy_meV", "lever_arm"):
            value = getattr(self, name)
            if not (isinstance(value, (int, float)) and math.isfinite(value) and value >= 0):
                raise RgftransError(f"{name} = {value!r} must be a finite number >= 0")
        metallic = self.level_spacing_meV is not None
        if metallic == (self.levels_meV is not None):
            raise RgftransError("give the dot's levels (levels_meV) or, for a metallic dot, its level spacing "
                                "(level_spacing_meV) -- one of the two")
        rates = np.asarray(self.rates_per_s, float)
        if not (np.all(np.isfinite(rates)) and np.all(rates >= 0)):
            raise RgftransError(f"tunnel rates must be finite and >= 0 (s^-1), got {rates!r}")
        if metallic:
            if not (self.level_spacing_meV > 0 and rates.shape == (2,)):
                raise RgftransError("a metallic dot needs level_spacing_meV > 0 and one (source, drain) rate pair")
        else:
            levels = np.atleast_1d(np.asarray(self.levels_meV, float))
            if levels.size == 0 or not np.all(np.isfinite(levels)):
                raise RgftransError(f"levels_meV must be a non-empty list of finite energies, got {self.levels_meV!r}")
            object.__setattr__(self, "levels_meV", levels)
            if rates.shape == (2,):
                rates = np.tile(rates, (levels.size, 1))
            if rates.shape != (levels.size, 2):
                raise RgftransError(f"rates_per_s must be one (source, drain) pair or one per level, shape "
                                    f"({levels.size}, 2); got shape {rates.shape}")
            if 2 ** (levels.size * (2 if self.spin else 1)) > MAX_STATES:
                raise RgftransError(f"{levels.size} levels{' with spin' if self.spin else ''} make more than "
                                    f"{MAX_STATES} states; keep the levels within a few kT and E_C of the "
                                    "window of interest")
        object.__setattr__(self, "rates_per_s", rates)

    @property
    def metallic(self) -> bool:
        return self.level_spacing_meV is not None

    def orbitals(self) -> tuple[np.ndarray, np.ndarray]:
        """Spin-orbital energies (meV) and their (source, drain) rates (s^-1)."""
        if not self.spin:
            return self.levels_meV, self.rates_per_s
        zeeman = 0.5 * self.g_factor * BOHR_MAGNETON_MEV_PER_T * self.field_T
        energies = np.concatenate([self.levels_meV - zeeman, self.levels_meV + zeeman])
        return energies, np.concatenate([self.rates_per_s, self.rates_per_s])

    def addition_energy_meV(self, n: int, gate_V: float = 0.0) -> float:
        """mu(N) for the metallic model: E_C (N - 1/2) - e alpha V_g - mu_0 (meV)."""
        return self.charging_energy_meV * (n - 0.5) - 1000.0 * self.lever_arm * gate_V - self.offset_meV


@dataclass(frozen=True, eq=False)
class SequentialResult:
    """Sequential tunnelling at a set of gate voltages and biases.

    Attributes
    ----------
    gate_V : (n_g,) float ndarray, V
    bias_V : (n_b,) float ndarray, V
    current_A : (n_b, n_g) float ndarray, A
        Current from the source into the dot.
    mean_charge : (n_b, n_g) float ndarray
        <N>.
    temperature_K : float
    """

    gate_V: np.ndarray
    bias_V: np.ndarray
    current_A: np.ndarray
    mean_charge: np.ndarray
    temperature_K: float


def _states(dot: ChargingDot):
    """Many-body states and their transitions: (N of each state, transitions list of (from, to, orbital, +1/-1))."""
    if dot.metallic:
        charges = np.arange(dot.max_electrons + 1)
        return charges, None
    energies, _ = dot.orbitals()
    m = energies.size
    occupations = np.array(list(itertools.product((0, 1), repeat=m)), dtype=np.int8)
    return occupations, energies


def _rate_matrices(dot: ChargingDot, gate_V, mu_source, mu_drain, kt):
    """Rate matrices (P, S, S) and the source-current weights (P, S, S) for P points of (gate, mu_s, mu_d)."""
    gate_V = np.asarray(gate_V, float)
    p = gate_V.size
    ea = 1000.0 * dot.lever_arm * gate_V + dot.offset_meV  # e alpha V_g + mu_0 per point
    if dot.metallic:
        charges = np.arange(dot.max_electrons + 1)
        s = charges.size
        w = np.zeros((p, s, s))
        into = np.zeros((p, s, s))  # net electrons from the source per transition (+1 in, -1 out)
        g_s, g_d = dot.rates_per_s
        delta = dot.level_spacing_meV
        for n in range(s - 1):
            mu = dot.charging_energy_meV * (n + 0.5) - ea  # energy to add electron n+1
            for rate, lead_mu, sign in ((g_s, mu_source, 1.0), (g_d, mu_drain, 0.0)):
                # A continuum of levels (spacing delta): the orthodox rate (Gamma/delta) x / (1 - e^-x) integrated.
                x_in = (lead_mu - mu) / kt
                x_out = -x_in
                rin = rate * kt / delta * _x_over_expm1(x_in)
                rout = rate * kt / delta * _x_over_expm1(x_out)
                w[:, n + 1, n] += rin
                w[:, n, n + 1] += rout
                if sign:
                    into[:, n + 1, n] += rin
                    into[:, n, n + 1] -= rout
        return w, into, charges.astype(float)
    occupations, energies = _states(dot)
    _, rates = dot.orbitals()
    s, m = occupations.shape
    charge = occupations.sum(axis=1)
    index = {tuple(o): i for i, o in enumerate(occupations)}
    w = np.zeros((p, s, s))
    into = np.zeros((p, s, s))
    e_c = dot.charging_energy_meV
    for a, occ in enumerate(occupations):
        n = int(charge[a])
        for k in np.flatnonzero(occ == 0):
            target = list(occ)
            target[k] = 1
            b = index[tuple(target)]
            d_e = energies[k] + e_c * (n + 0.5) - ea  # E_b - E_a: energy the electron brings in
            for r, lead_mu in ((0, mu_source), (1, mu_drain)):
                # f and 1 - f each from its own logistic: 1 - f computed by subtraction would round to 0 (or 1)
                # far from E_F and break detailed balance between tiny rates.
                f, empty = _fermi(d_e - lead_mu, kt), _fermi(lead_mu - d_e, kt)
                rin, rout = rates[k, r] * f, rates[k, r] * empty
                w[:, b, a] += rin
                w[:, a, b] += rout
                if r == 0:
                    into[:, b, a] += rin
                    into[:, a, b] -= rout
    return w, into, charge.astype(float)


def _x_over_expm1(x):
    """y / (1 - e^-y): the orthodox rate of a continuum of levels in units of (Gamma / Delta) kT, y the energy
    the tunnelling electron gains over kT (the integral of f_from (1 - f_to) over the levels)."""
    x = np.asarray(x, float)
    with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
        out = np.where(np.abs(x) < 1e-8, 1.0 + 0.5 * x, x / -np.expm1(-x))
    return out


def _steady(w):
    """Null vectors (P, S) of the rate matrices, normalised (the master equation's steady state)."""
    p, s, _ = w.shape
    outflow = np.einsum("pij->pj", w)
    # Solve for the fluxes q_j = outflow_j P_j: the generator's columns divided by their outflow have a unit
    # diagonal, which tames rates spanning tens of orders of magnitude (Fermi factors e^(-E/kT)).
    scale = np.maximum(outflow, np.finfo(float).tiny * 1e10)
    gen = w / scale[:, None, :] - np.eye(s)[None]  # d P / dt = gen q; columns sum to 0
    # One balance equation is redundant; drop that of the state with the smallest outflow (the most stable,
    # usually the most probable) and fix the scale by the normalisation sum_j q_j / outflow_j = 1.
    drop = np.argmin(outflow, axis=1)
    rows = np.arange(p)
    gen[rows, drop, :] = 1.0 / scale
    norm = gen[rows, drop, :].max(axis=1)
    gen[rows, drop, :] /= norm[:, None]
    rhs = np.zeros((p, s))
    rhs[rows, drop] = 1.0 / norm
    flux = np.linalg.solve(gen, rhs[..., None])[..., 0]
    prob = np.clip(flux / scale, 0.0, None)
    return prob / prob.sum(axis=1, keepdims=True)


def steady_state(dot: ChargingDot, gate_V, bias_V, temperature_K, *, drop: str = "symmetric"):
    """Occupation probabilities (P, S) of the dot's states at each (gate, bias) point, and the states' charges.

    ``drop``: "symmetric" puts the source at +eV/2 and the drain at -eV/2; "drain" keeps the drain at 0.
    """
    kt = BOLTZMANN_MEV_PER_K * _check_temperature(temperature_K)
    gate_V, bias_V = np.broadcast_arrays(np.asarray(gate_V, float), np.asarray(bias_V, float))
    if not (np.all(np.isfinite(gate_V)) and np.all(np.isfinite(bias_V))):
        raise RgftransError("gate and bias voltages must be finite numbers (V)")
    mu_s, mu_d = _contacts(bias_V.ravel(), drop)
    w, into, charge = _rate_matrices(dot, gate_V.ravel(), mu_s, mu_d, kt)
    return _steady(w), charge


def _contacts(bias_V, drop):
    if drop == "symmetric":
        return 500.0 * bias_V, -500.0 * bias_V
    if drop == "drain":
        return 1000.0 * bias_V, np.zeros_like(bias_V)
    raise RgftransError(f"drop must be 'symmetric' or 'drain', got {drop!r}")


def sequential_current(dot: ChargingDot, gate_V, bias_V, temperature_K, *, drop: str = "symmetric") -> SequentialResult:
    """Current (A) and mean charge on the grid of ``bias_V`` (rows) x ``gate_V`` (columns)."""
    t = _check_temperature(temperature_K)
    gate_V = np.atleast_1d(np.asarray(gate_V, float))
    bias_V = np.atleast_1d(np.asarray(bias_V, float))
    kt = BOLTZMANN_MEV_PER_K * t
    _warn_validity(dot, kt)
    gg, bb = np.meshgrid(gate_V, bias_V)
    mu_s, mu_d = _contacts(bb.ravel(), drop)
    states = (dot.max_electrons + 1) if dot.metallic else 2 ** dot.orbitals()[0].size
    chunk = max(1, CHUNK_ENTRIES // (states * states))  # points per batch: the rate matrices stay ~100 MB
    flow = np.empty(gg.size)
    mean = np.empty(gg.size)
    for start in range(0, gg.size, chunk):
        part = slice(start, start + chunk)
        w, into, charge = _rate_matrices(dot, gg.ravel()[part], mu_s[part], mu_d[part], kt)
        prob = _steady(w)
        flow[part] = np.einsum("pij,pj->p", into, prob)  # electrons per second from the source into the dot
        mean[part] = prob @ charge
    # Sign: positive when electrons flow from the source (at +eV/2) into the dot, i.e. I > 0 for V > 0.
    return SequentialResult(gate_V=gate_V, bias_V=bias_V, current_A=(_codata.e * flow).reshape(bb.shape),
                            mean_charge=mean.reshape(bb.shape), temperature_K=t)


def sequential_conductance(dot: ChargingDot, gate_V, temperature_K) -> tuple[np.ndarray, np.ndarray]:
    """Linear-response conductance at each gate voltage: (G in S, G in 2e^2/h), by a central difference in bias."""
    t = _check_temperature(temperature_K)
    step = DIFFERENTIAL_STEP_KT * BOLTZMANN_MEV_PER_K * t / 1000.0  # V
    result = sequential_current(dot, gate_V, [-step, step], t)
    g = (result.current_A[1] - result.current_A[0]) / (2 * step)
    return g, g / CONDUCTANCE_QUANTUM_S


def stability_map(dot: ChargingDot, gate_V, bias_V, temperature_K, *, drop: str = "symmetric"):
    """Differential conductance dI/dV (S) on the (bias, gate) grid: the Coulomb-diamond map.

    Returns (dI/dV (n_b, n_g) in S, the SequentialResult of the current).
    """
    result = sequential_current(dot, gate_V, bias_V, temperature_K, drop=drop)
    bias = result.bias_V
    if bias.size < 3:
        raise RgftransError("a diamond map needs at least three bias values")
    return np.gradient(result.current_A, bias, axis=0), result


def _warn_validity(dot: ChargingDot, kt: float) -> None:
    width = HBAR_MEV_S * float(np.max(np.sum(dot.rates_per_s, axis=-1)))
    if width > MAX_WIDTH_OVER_KT * kt:
        warnings.warn(f"the levels' width hbar Gamma = {width:.3g} meV is not far below kT = {kt:.3g} meV: "
                      "sequential tunnelling misses the broadening and cotunnelling of such levels; trust it only "
                      "for hbar Gamma << kT", stacklevel=3)


def blockade_regime(*, charging_energy_meV: float, level_spacing_meV: float, width_meV: float, temperature_K: float) -> str:
    """Which picture describes a dot, in words with the numbers.

    Sequential tunnelling (this module) needs hbar Gamma << kT and E_C >> kT; coherent transmission (the
    RGF results) needs E_C << hbar Gamma; kT < Delta is quantum (single-level) blockade, kT >> Delta classical.
    """
    kt = BOLTZMANN_MEV_PER_K * _check_temperature(temperature_K)
    e_c, delta, width = float(charging_energy_meV), float(level_spacing_meV), float(width_meV)
    numbers = (f"E_C = {e_c:.3g} meV, level spacing {delta:.3g} meV, level width {width:.3g} meV, "
               f"kT = {kt:.3g} meV")
    if e_c <= width:
        return (f"coherent: the charging energy is below the level width ({numbers}); trust the coherent "
                "transmission (RGF), not the sequential picture")
    if e_c <= kt:
        return f"thermally smeared: kT exceeds E_C ({numbers}); neither blockade nor single levels are resolved"
    if width >= kt:
        return (f"intermediate: blockaded (E_C above the width) but the levels are as broad as kT or broader "
                f"({numbers}); sequential tunnelling underestimates the widths (cotunnelling, Kondo); "
                "neither picture is quantitative")
    kind = "quantum (single-level)" if kt < delta else "classical (many levels)"
    return f"sequential tunnelling, {kind} Coulomb blockade ({numbers}); trust the master-equation results"


@dataclass(frozen=True, eq=False)
class DoubleDot:
    """Two dots in series: their Maxwell capacitance matrix and gates (constant-interaction model).

    Parameters
    ----------
    capacitance_aF : (2, 2) float array_like, aF
        C_Sigma of each dot on the diagonal, minus the mutual capacitance off it (as
        :class:`rgftrans.electrostatics.capacitance.CapacitanceResult.capacitance_matrix_aF`).
    gate_capacitance_aF : (2, 2) float array_like, aF
        C_g[i, j]: gate j on dot i (gate 0 the plunger of dot 1, gate 1 of dot 2).
    offset_meV : (2,) float
        Constant shifts of each dot's electrochemical potential.
    background_charge : (2,) float
        Electrons already on each dot at zero gate voltage (N counts from there): q_i = e (N_i + n_i) - (C_g V)_i.
    source_rate_per_s, drain_rate_per_s : float
        Tunnel rates of dot 1 to the source and dot 2 to the drain (s^-1).
    tunnel_coupling_meV : float
        Interdot tunnel coupling t_c (half the bonding-antibonding splitting of the two dots' levels).
    """

    capacitance_aF: np.ndarray
    gate_capacitance_aF: np.ndarray
    offset_meV: tuple = (0.0, 0.0)
    source_rate_per_s: float = 1e9
    drain_rate_per_s: float = 1e9
    tunnel_coupling_meV: float = 0.01
    background_charge: tuple = (0.0, 0.0)

    def __post_init__(self):
        c = np.asarray(self.capacitance_aF, float)
        g = np.asarray(self.gate_capacitance_aF, float)
        if c.shape != (2, 2) or g.shape != (2, 2) or not np.allclose(c, c.T) or np.any(np.linalg.eigvalsh(c) <= 0):
            raise RgftransError("a double dot needs a symmetric positive-definite 2x2 capacitance matrix and a 2x2 "
                                "gate-capacitance matrix (aF)")
        object.__setattr__(self, "capacitance_aF", c)
        object.__setattr__(self, "gate_capacitance_aF", g)

    def energy_meV(self, n1, n2, v1, v2):
        """U(N1, N2) = 1/2 (eN - C_g V)^T C^-1 (eN - C_g V) - sum_i N_i offset_i (meV), broadcast."""
        e_af = _codata.e / 1e-18  # e in aF V
        inv = np.linalg.inv(self.capacitance_aF)
        b1, b2 = self.background_charge
        q1 = e_af * (np.asarray(n1, float) + b1) - (self.gate_capacitance_aF[0, 0] * v1
                                                    + self.gate_capacitance_aF[0, 1] * v2)
        q2 = e_af * (np.asarray(n2, float) + b2) - (self.gate_capacitance_aF[1, 0] * v1
                                                    + self.gate_capacitance_aF[1, 1] * v2)
        joules_per_af_v2 = 1e-18  # (aF V)^2 / aF = 1e-18 J
        u = 0.5 * (inv[0, 0] * q1 * q1 + 2 * inv[0, 1] * q1 * q2 + inv[1, 1] * q2 * q2) * joules_per_af_v2
        return u / _codata.e * 1e3 - np.asarray(n1) * self.offset_meV[0] - np.asarray(n2) * self.offset_meV[1]

    def charge_map(self, v1, v2, *, max_electrons: int = 6) -> tuple[np.ndarray, np.ndarray]:
        """Ground-state (N1, N2) over the grid of plunger voltages (rows v2, columns v1), N_i in
        -max_electrons..max_electrons (counted from the background charge)."""
        v1, v2 = np.asarray(v1, float), np.asarray(v2, float)
        g1, g2 = np.meshgrid(v1, v2)
        best = np.full(g1.shape, np.inf)
        n1_map = np.zeros(g1.shape, dtype=int)
        n2_map = np.zeros(g1.shape, dtype=int)
        for n1 in range(-max_electrons, max_electrons + 1):
            for n2 in range(-max_electrons, max_electrons + 1):
                u = self.energy_meV(n1, n2, g1, g2)
                better = u < best
                best = np.where(better, u, best)
                n1_map[better], n2_map[better] = n1, n2
        return n1_map, n2_map

    def current(self, v1, v2, bias_V: float, temperature_K: float, *, max_electrons: int = 3) -> np.ndarray:
        """Sequential current (A) through the series (source - dot 1 - dot 2 - drain) on the (v2, v1) grid.

        Rates: source into dot 1 ``Gamma_S f_S(mu_1)`` (out ``Gamma_S (1 - f_S)``), dot 2 into the drain
        likewise, and interdot tunnelling ``(t_c^2 / hbar) hbar Gamma / (eps^2 + (hbar Gamma / 2)^2)`` at
        detuning eps (Gamma = Gamma_S + Gamma_D, the broadening of the two charge states by the leads; the
        sequential limit of coherent interdot tunnelling, e.g. van der Wiel et al. 2002, from memory), its uphill
        direction weighted by exp(-eps/kT) (detailed balance with the environment at T).  The bias drops symmetrically.  Current flows only near
        the triple points, where three charge states are degenerate within the bias window.
        """
        kt = BOLTZMANN_MEV_PER_K * _check_temperature(temperature_K)
        g1, g2 = np.meshgrid(np.asarray(v1, float), np.asarray(v2, float))
        pts = g1.size
        states = [(a, b) for a in range(-max_electrons, max_electrons + 1)
                  for b in range(-max_electrons, max_electrons + 1)]
        index = {st: i for i, st in enumerate(states)}
        s = len(states)
        energy = np.array([self.energy_meV(a, b, g1.ravel(), g2.ravel()) for a, b in states])  # (s, pts)
        mu_s, mu_d = 500.0 * bias_V, -500.0 * bias_V
        w = np.zeros((pts, s, s))
        into = np.zeros((pts, s, s))
        hbar_gamma = HBAR_MEV_S * (self.source_rate_per_s + self.drain_rate_per_s)
        for (a, b), i in index.items():
            if (a + 1, b) in index:  # source <-> dot 1
                j = index[(a + 1, b)]
                d_e = energy[j] - energy[i]
                rin = self.source_rate_per_s * _fermi(d_e - mu_s, kt)
                rout = self.source_rate_per_s * _fermi(mu_s - d_e, kt)
                w[:, j, i] += rin
                w[:, i, j] += rout
                into[:, j, i] += rin
                into[:, i, j] -= rout
            if (a, b + 1) in index:  # drain <-> dot 2
                j = index[(a, b + 1)]
                d_e = energy[j] - energy[i]
                w[:, j, i] += self.drain_rate_per_s * _fermi(d_e - mu_d, kt)
                w[:, i, j] += self.drain_rate_per_s * _fermi(mu_d - d_e, kt)
            if (a - 1, b + 1) in index:  # dot 1 <-> dot 2
                j = index[(a - 1, b + 1)]
                eps = energy[j] - energy[i]  # what the move from i to j costs
                rate = (self.tunnel_coupling_meV**2 / HBAR_MEV_S) * hbar_gamma / (eps**2 + (hbar_gamma / 2) ** 2)
                # The uphill direction takes its energy from the environment at T: Boltzmann-weighted, so that
                # the rates obey detailed balance and no current flows without bias.
                w[:, j, i] += rate * np.exp(-np.clip(eps, 0.0, None) / kt)
                w[:, i, j] += rate * np.exp(-np.clip(-eps, 0.0, None) / kt)
        prob = _steady(w)
        flow = np.einsum("pij,pj->p", into, prob)
        return (_codata.e * flow).reshape(g1.shape)

    def sensor_signal(self, v1, v2, coupling_meV=(1.0, 0.5), *, max_electrons: int = 6) -> np.ndarray:
        """A nearby charge sensor's potential shift (meV): sum_i kappa_i N_i of the ground state."""
        n1, n2 = self.charge_map(v1, v2, max_electrons=max_electrons)
        return coupling_meV[0] * n1 + coupling_meV[1] * n2
