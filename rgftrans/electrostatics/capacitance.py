"""Capacitances, lever arms and charging energies of 2DEG regions, from the self-consistent screening solution.

The numbers an experimentalist reads off Coulomb diamonds, predicted from the layout.  The named regions of
the 2DEG (dots; anything not named is the grounded reservoir) are treated as the conductors of the
constant-interaction model (W. G. van der Wiel et al., Rev. Mod. Phys. 75, 1 (2002), from memory):

    Q = C phi - C_g V,      C: the (n, n) Maxwell capacitance matrix of the regions (C_ii = C_Sigma,i, the
                            total capacitance; C_ik = -C_m,ik, minus the mutual one), C_g: (n, n_gates) the
                            gate capacitances, Q the regions' charges, phi their electrostatic potentials.

The Thomas-Fermi solution keeps every region at the reservoir's electrochemical potential, so what it gives
directly are responses at fixed electrochemical potential, where each region's quantum capacitance
C_Q,i = e^2 (dn/dmu) A_i is in series with the geometry.  Two finite differences of the self-consistent
solution measure them:

* a shift dU of the potential energy inside region i only (``extra_meV``):  M_ki = -e^2 dN_k / dU_i,
* a change dV_j of gate j:                                                  G_ij = e dN_i / dV_j,

and the constant-interaction quantities follow in closed form (eliminating phi with Q_i = -C_Q,i (phi_i -
dU_i / e); the matrix form of capacitors in series, by the Woodbury identity):

    M = (C^-1 + C_Q^-1)^-1,   so   C = (M^-1 - C_Q^-1)^-1,
    lever arms  alpha = C^-1 C_g = M^-1 G        (alpha_ij = d phi_i / d V_j at fixed charges),
    C_g = (1 + C C_Q^-1) G,
    charging energies  E_C,i = e^2 (C^-1)_ii,  mutual  E_m,ik = e^2 (C^-1)_ik.

The lever arms need no quantum capacitance at all.  Signs: C_Sigma, C_g, C_m, alpha and E_C are positive for
an ordinary layout (a more positive gate attracts electrons into the dot).  Central differences with steps of
:data:`GATE_STEP_V` and :data:`REGION_STEP_MEV`, each solve warm-started from the base solution at the
solver tolerance :data:`SOLVE_TOLERANCE`, so that the finite-difference error (depletion edges moving) and the
solver's error are both below about 1e-3 of the results for regions of more than a few electrons.

Units: aF (1e-18 F), meV, V, nm; electron numbers are counts.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass
from typing import Mapping

import numpy as np
import shapely
from scipy import constants as _codata

from rgftrans.errors import RgftransError
from rgftrans.electrostatics.screening import NM2_PER_CM2, Heterostructure, ScreenedPotential, screen

__all__ = ["CapacitanceResult", "cell_weights", "electron_number", "gate_capacitances", "island_weights", "GATE_STEP_V",
           "REGION_STEP_MEV"]

#: Gate step of the central differences, V: 2 mV moves a dot's charge by about a tenth of an electron, far
#: above the solver's round-off and small against the voltages over which a depletion edge moves a node.
GATE_STEP_V = 2e-3
#: Potential-energy step inside a region, meV: a fraction of E_F (7-9 meV in GaAs 2DEGs), same reasoning.
REGION_STEP_MEV = 0.5
#: Solver tolerance of every solve (relative gradient): a dot of 10^4 nm^2 in a 2.5e11 cm^-2 2DEG then holds
#: its electron number to about 1e-5 electrons, against responses of 0.05-0.5 electrons per step.
SOLVE_TOLERANCE = 1e-7
#: e^2 / (1 aF) in meV: 160.2 meV (CODATA via scipy.constants).
E2_OVER_AF_MEV = _codata.e**2 / 1e-18 / _codata.e * 1e3
#: Below this fraction of n0 a saddle between a dot and a reservoir counts as pinched off (tunnelling only).
PINCH_FRACTION = 0.1
#: Depleted nodes this close (in nodes) to a closed island count as part of it in the finite differences.
ISLAND_MARGIN = 3
#: Fewer electrons than this in a region: its capacitances come from a fraction of an electron's response.
FEW_ELECTRONS = 2.0


def cell_weights(region, x_nm, y_nm) -> np.ndarray:
    """Fraction of each grid node's square cell (centred on the node, side = the spacing) inside ``region``.

    Parameters
    ----------
    region : Region
    x_nm, y_nm : (nx,), (ny,) float array_like, nm
        Equally spaced grid nodes.

    Returns
    -------
    (ny, nx) float ndarray in [0, 1]
    """
    x_nm, y_nm = np.asarray(x_nm, float), np.asarray(y_nm, float)
    h = float(x_nm[1] - x_nm[0])
    geometry = region.geometry
    x0, y0, x1, y1 = geometry.bounds
    ix = np.flatnonzero((x_nm + h / 2 > x0) & (x_nm - h / 2 < x1))
    iy = np.flatnonzero((y_nm + h / 2 > y0) & (y_nm - h / 2 < y1))
    weights = np.zeros((y_nm.size, x_nm.size))
    if ix.size == 0 or iy.size == 0:
        raise RgftransError(f"the region with bounds ({x0:g}, {y0:g}, {x1:g}, {y1:g}) nm lies outside the "
                            f"screening grid ({x_nm[0]:g}..{x_nm[-1]:g}, {y_nm[0]:g}..{y_nm[-1]:g} nm); move it "
                            "onto the device or widen the grid")
    gx, gy = np.meshgrid(x_nm[ix], y_nm[iy])
    boxes = shapely.box(gx - h / 2, gy - h / 2, gx + h / 2, gy + h / 2)
    weights[np.ix_(iy, ix)] = shapely.area(shapely.intersection(boxes, geometry)) / (h * h)
    if not weights.any():
        raise RgftransError(f"the region with bounds ({x0:g}, {y0:g}, {x1:g}, {y1:g}) nm covers no grid cell; "
                            "draw it with an area")
    return weights


def electron_number(solution: ScreenedPotential, region, *, weights: np.ndarray | None = None) -> float:
    """Electrons in ``region``: the integral of the solution's density over it."""
    if weights is None:
        weights = cell_weights(region, solution.x_nm, solution.y_nm)
    h = float(solution.x_nm[1] - solution.x_nm[0])
    return float(np.sum(solution.density_cm2 * weights) * NM2_PER_CM2 * h * h)


def island_weights(solution: ScreenedPotential, weights: np.ndarray) -> np.ndarray | None:
    """The closed island(s) of 2DEG under a region, as weights, or None if that 2DEG reaches the grid's edge.

    A dot is closed when the 2DEG under it is surrounded by depleted or pinched-off 2DEG (density below
    :data:`PINCH_FRACTION` of n0): a connected component (4-neighbour, scipy.ndimage.label) of the denser
    nodes that does not touch the grid's border (the reservoirs reach it).  Its charge is then the whole island's, wherever the region was drawn on it; the weights also
    take in the depleted nodes within ISLAND_MARGIN nodes of it, where a finite difference may add electrons.
    """
    from scipy import ndimage

    # A saddle this dilute passes no propagating mode (at 2e11 cm^-2, 0.1 n0 has k_F = 0.035 / nm: under one
    # transverse mode in a 50 nm constriction): the dot behind it is closed, connected only by tunnelling.
    occupied = solution.density_cm2 > PINCH_FRACTION * solution.structure.density_cm2
    labels, _ = ndimage.label(occupied)
    ids = np.unique(labels[(weights > 0) & occupied])
    ids = ids[ids > 0]
    if ids.size == 0:
        return None
    border = np.unique(np.concatenate([labels[0], labels[-1], labels[:, 0], labels[:, -1]]))
    if np.isin(ids, border).any():
        return None
    island = np.isin(labels, ids)
    grown = ndimage.binary_dilation(island, iterations=ISLAND_MARGIN) & (island | ~occupied)
    return grown.astype(float)


def _local_dos_per_meV_nm2(solution: ScreenedPotential) -> np.ndarray:
    """dn/dmu at each node (states per meV per nm^2): D where occupied at T = 0, D (1 - e^(-n / D kT)) above."""
    structure = solution.structure
    dos, kt = structure.dos_per_meV_nm2, structure.thermal_energy_meV
    n = solution.density_cm2 * NM2_PER_CM2
    if kt == 0.0:
        return np.where(n > 0, dos, 0.0)
    return -dos * np.expm1(-n / (dos * kt))


@dataclass(frozen=True, eq=False)
class CapacitanceResult:
    """Constant-interaction parameters of the named 2DEG regions (module docstring for the definitions).

    Attributes
    ----------
    region_names, gate_names : tuple of str
    capacitance_matrix_aF : (n, n) float ndarray, aF
        Maxwell matrix C of the regions: C_Sigma on the diagonal, minus the mutual capacitances off it.
    gate_matrix_aF : (n, n_gates) float ndarray, aF
        Gate capacitances C_g.
    total_aF : (n,) float ndarray, aF
        C_Sigma of each region (the diagonal of ``capacitance_matrix_aF``).
    remainder_aF : (n,) float ndarray, aF
        C_Sigma minus every gate and mutual capacitance: what couples the region to the grounded reservoir.
    quantum_aF : (n,) float ndarray, aF
        C_Q = e^2 (dn/dmu) A of each region.
    lever_arms : (n, n_gates) float ndarray
        alpha = C^-1 C_g (dimensionless; times 1000 meV/V for e alpha).
    charging_energy_meV : (n,) float ndarray, meV
        E_C = e^2 (C^-1)_ii.
    interaction_meV : (n, n) float ndarray, meV
        e^2 C^-1 (its off-diagonal: the mutual charging energies of a multi-dot).
    electron_number : (n,) float ndarray
        Electrons in each region at the base voltages.
    response_aF, gate_response_aF : (n, n), (n, n_gates) float ndarray, aF
        The measured responses at fixed electrochemical potential, M and G.
    closed : (n,) bool ndarray
        Whether each region's 2DEG is a closed island (its charge then counted over the whole island); an open
        region exchanges electrons with the reservoirs through undepleted 2DEG.
    gate_step_V, region_step_meV : float
        The finite-difference steps.
    """

    region_names: tuple
    gate_names: tuple
    capacitance_matrix_aF: np.ndarray
    gate_matrix_aF: np.ndarray
    total_aF: np.ndarray
    remainder_aF: np.ndarray
    quantum_aF: np.ndarray
    lever_arms: np.ndarray
    charging_energy_meV: np.ndarray
    interaction_meV: np.ndarray
    electron_number: np.ndarray
    response_aF: np.ndarray
    gate_response_aF: np.ndarray
    closed: np.ndarray
    gate_step_V: float
    region_step_meV: float

    def lever_arm(self, region: str, gate: str) -> float:
        """alpha of one gate on one region."""
        return float(self.lever_arms[self._region(region), self._gate(gate)])

    def _region(self, name: str) -> int:
        if name not in self.region_names:
            raise RgftransError(f"no region {name!r}; the regions are {', '.join(map(repr, self.region_names))}")
        return self.region_names.index(name)

    def _gate(self, name: str) -> int:
        if name not in self.gate_names:
            raise RgftransError(f"no gate {name!r}; the gates are {', '.join(map(repr, self.gate_names))}")
        return self.gate_names.index(name)

    def summary(self) -> str:
        """Lines of text: per region N, C_Sigma, E_C and the lever arm of every gate."""
        lines = []
        for i, name in enumerate(self.region_names):
            arms = ", ".join(f"{g} {a:.3g}" for g, a in zip(self.gate_names, self.lever_arms[i]))
            state = "closed island" if self.closed[i] else "OPEN to the reservoirs"
            lines.append(f"region {name!r} ({state}): N = {self.electron_number[i]:.1f} electrons, C_Sigma = "
                         f"{self.total_aF[i]:.3g} aF (to the reservoir {self.remainder_aF[i]:.3g} aF, quantum "
                         f"{self.quantum_aF[i]:.3g} aF), E_C = e^2/C_Sigma = {self.charging_energy_meV[i]:.3g} meV; "
                         f"lever arms: {arms}")
        for i in range(len(self.region_names)):
            for k in range(i + 1, len(self.region_names)):
                lines.append(f"regions {self.region_names[i]!r}-{self.region_names[k]!r}: mutual capacitance "
                             f"{-self.capacitance_matrix_aF[i, k]:.3g} aF, mutual charging energy "
                             f"{self.interaction_meV[i, k]:.3g} meV")
        return "\n".join(lines)


def gate_capacitances(layout, structure: Heterostructure, regions: Mapping[str, object], *, extent_nm,
                      spacing_nm: float, gate_step_V: float = GATE_STEP_V, region_step_meV: float = REGION_STEP_MEV,
                      base: ScreenedPotential | None = None) -> CapacitanceResult:
    """Capacitance matrix, gate capacitances, lever arms and charging energies of named 2DEG regions.

    Parameters
    ----------
    layout : GateLayout
        The gates at their base voltages.
    structure : Heterostructure
    regions : mapping of str to Region
        The dots (and any other region whose charge matters); at least one.
    extent_nm, spacing_nm
        The screening grid, as in :func:`~rgftrans.electrostatics.screening.screen`.
    gate_step_V, region_step_meV : float
        Central-difference steps.
    base : ScreenedPotential, optional
        The solution at the base voltages on the same grid (warm start; solved again to the finite
        differences' tolerance).

    Returns
    -------
    CapacitanceResult

    Raises
    ------
    RgftransError
        No region, a region off the grid, a non-positive step, or a region that is empty (depleted) or
        uncoupled, where a capacitance is undefined.
    """
    if not regions:
        raise RgftransError("no regions: name at least one part of the 2DEG (a dot) to compute its capacitances")
    for name, value in (("gate_step_V", gate_step_V), ("region_step_meV", region_step_meV)):
        if not (isinstance(value, (int, float)) and math.isfinite(value) and value > 0):
            raise RgftransError(f"{name} = {value!r} must be a positive step; e.g. {GATE_STEP_V if 'V' in name else 0.5}")
    names = tuple(regions)
    gates = tuple(layout.names)

    def solve(lay, extra=None, initial=None):
        return screen(lay, structure, extent_nm=extent_nm, spacing_nm=spacing_nm, tolerance=SOLVE_TOLERANCE,
                      initial=initial, extra_meV=extra)

    base = solve(layout, initial=base)
    drawn = [cell_weights(regions[n], base.x_nm, base.y_nm) for n in names]
    weights, closed = [], []
    for name, w in zip(names, drawn):
        if electron_number(base, None, weights=w) <= 0.0:
            raise RgftransError(f"region {name!r} holds no electrons at these voltages (depleted); its capacitance "
                                "is undefined: make the gates less negative or move the region onto the 2DEG")
        island = island_weights(base, w)
        closed.append(island is not None)
        if island is None:
            warnings.warn(f"region {name!r} is open: its 2DEG connects to the reservoirs through undepleted 2DEG, "
                          "so its charge is not quantised and a charging energy describes it only roughly; close "
                          "its barriers (more negative voltages) for the numbers of a Coulomb-blockaded dot",
                          stacklevel=2)
        for other, w_other in zip(names, weights):
            if island is not None and np.array_equal(island, w_other):
                raise RgftransError(f"regions {other!r} and {name!r} lie on one island of 2DEG; draw one region "
                                    "there, or close the barrier between them (more negative gates)")
        weights.append(drawn[len(weights)] if island is None else island)
    area = float(base.x_nm[1] - base.x_nm[0]) ** 2

    def counts(sol):
        return np.array([electron_number(sol, None, weights=w) for w in weights])

    n_base = counts(base)
    for name, n in zip(names, n_base):
        if n < FEW_ELECTRONS:
            warnings.warn(f"region {name!r} holds only {n:.2g} electrons: a continuum (Thomas-Fermi) description "
                          "of so few is rough, and its capacitances are too", stacklevel=2)
    volts = layout.voltages
    e_over_af = _codata.e / 1e-18  # aF per electron per volt
    g_resp = np.empty((len(names), len(gates)))
    for j, gate in enumerate(gates):
        up = counts(solve(layout.with_voltages({gate: volts[gate] + gate_step_V}), initial=base))
        down = counts(solve(layout.with_voltages({gate: volts[gate] - gate_step_V}), initial=base))
        g_resp[:, j] = e_over_af * (up - down) / (2 * gate_step_V)
    m_resp = np.empty((len(names), len(names)))
    for i, w in enumerate(weights):
        up = counts(solve(layout, extra=region_step_meV * w, initial=base))
        down = counts(solve(layout, extra=-region_step_meV * w, initial=base))
        # dN / dU (per meV) -> e^2 dN/dU in aF: e^2 / (1 meV) = e / 1e-3 V.
        m_resp[:, i] = -e_over_af * 1e3 * (up - down) / (2 * region_step_meV)
    m_resp = 0.5 * (m_resp + m_resp.T)  # reciprocal up to the finite differences' error
    if np.any(np.diag(m_resp) <= 0):
        bad = names[int(np.argmin(np.diag(m_resp)))]
        raise RgftransError(f"region {bad!r} does not respond to its own potential (no electrons near the Fermi "
                            "level); its capacitance is undefined")
    dos = _local_dos_per_meV_nm2(base)
    quantum = np.array([e_over_af * 1e3 * float(np.sum(dos * w)) * area for w in weights])  # e^2 D A in aF
    inv_m = np.linalg.inv(m_resp)
    with np.errstate(divide="ignore"):
        c_matrix = np.linalg.inv(inv_m - np.diag(1.0 / quantum))
    c_matrix = 0.5 * (c_matrix + c_matrix.T)
    lever = inv_m @ g_resp
    c_gates = c_matrix @ lever
    interaction = E2_OVER_AF_MEV * np.linalg.inv(c_matrix)
    total = np.diag(c_matrix).copy()
    mutual = -(c_matrix - np.diag(total))
    remainder = total - c_gates.sum(axis=1) - mutual.sum(axis=1)
    return CapacitanceResult(
        region_names=names, gate_names=gates, capacitance_matrix_aF=c_matrix, gate_matrix_aF=c_gates,
        total_aF=total, remainder_aF=remainder, quantum_aF=quantum, lever_arms=lever,
        charging_energy_meV=np.diag(interaction).copy(), interaction_meV=interaction, electron_number=n_base,
        response_aF=m_resp, gate_response_aF=g_resp, closed=np.array(closed), gate_step_V=float(gate_step_V),
        region_step_meV=float(region_step_meV))
