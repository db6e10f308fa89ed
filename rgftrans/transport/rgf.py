"""Recursive Green's functions: transmission through a sliced device.

With the sites split into layers ``0 .. K`` (:mod:`rgftrans.transport.slicing`), the
left-connected Green's functions obey the forward recursion

    g_0 = (E - H_0 - Sigma_0)^-1
    g_i = (E - H_i - Sigma_i - V_{i,i-1} g_{i-1} V_{i-1,i})^-1
    G_{i,0} = g_i V_{i,i-1} G_{i-1,0}

and at the last layer ``G_{K,0}`` is the full propagator between the two
interfaces.  The transmission is the Caroli / Fisher-Lee formula
``T = Tr[Gamma_K G_{K0} Gamma_0 G_{K0}^dag]`` (Fisher & Lee, Phys. Rev. B 23,
6851 (1981); Caroli et al., J. Phys. C 4, 916 (1971), both from memory).
Only ``G_{i,0} W_0`` is carried, with ``Gamma_0 = W_0 W_0^dag`` (one column per
open channel of the first lead); the slice loop runs compiled (:mod:`rgftrans.transport._kernels`).

The public :func:`transmission` and :func:`transmission_matrix` are also the
entry points of nested dissection (:mod:`rgftrans.transport.dissection`): with
``solver="auto"`` they take whichever route :func:`rgftrans.transport.choice.choose_solver`
predicts faster for the model, and say which in the result's ``solver``.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np

from rgftrans.constants import SINGULAR_ETA
from rgftrans.system.device import TightBindingModel, check_resolution
from rgftrans.errors import LeadError, ThresholdWarning
from rgftrans.system.inputs import check_energies, check_eta, check_model
from rgftrans.leads.embedding import (broadening, device_energy, gamma_factor, lead_self_energies,
                                      warn_thresholds)
from rgftrans.system.materials import CONDUCTANCE_QUANTUM_S, conductance_g0
from rgftrans.transport.buffers import EndTerms, LayerBuffers
from rgftrans.transport.slicing import Slicing, default_slicing

__all__ = [
    "TransmissionResult", "transmission", "layer_blocks", "GreenBlocks", "green_blocks",
    "TransmissionMatrixResult", "transmission_matrix", "four_terminal_resistance",
]


@dataclass(frozen=True, eq=False)
class TransmissionResult:
    """Two-terminal transmission over a set of energies.

    Attributes
    ----------
    energies : (n_E,) float ndarray, meV
    transmission : (n_E,) float ndarray
        Transmission per spin from the first lead to the second.
    n_open : (n_E, n_leads) int ndarray
        Open channels of each lead.
    at_threshold : (n_E,) bool ndarray
        Energies that sat on a channel threshold and were moved off it.
    lead_names : tuple of str
    spin_degeneracy : {1, 2}
        2 for a spinless model (each channel stands for both spins), 1 when
        the model has explicit spin orbitals (``transmission`` then counts
        both spins); see :attr:`TightBindingModel.spin_degeneracy`.
    solver : {"rgf", "dissection"}
        The route that computed it (:func:`rgftrans.transport.choice.choose_solver`).
    """

    energies: np.ndarray
    transmission: np.ndarray
    n_open: np.ndarray
    at_threshold: np.ndarray
    lead_names: tuple
    spin_degeneracy: int = 2
    solver: str = "rgf"

    @property
    def conductance_g0(self) -> np.ndarray:
        """Zero-temperature conductance in units of 2e^2/h: ``(g_s / 2) T`` (Landauer-Büttiker).

        A spinless model's T is per spin (G = (2e^2/h) T); with explicit spin
        orbitals T counts both spins (G = (e^2/h) T), so a clean wire gives the
        same G either way (common practice, no source).
        """
        return conductance_g0(self.transmission, self.spin_degeneracy)

    @property
    def conductance_S(self) -> np.ndarray:
        """Zero-temperature conductance in siemens, ``(g_s e^2/h) T`` (e, h from scipy.constants)."""
        return self.conductance_g0 * CONDUCTANCE_QUANTUM_S


@dataclass(frozen=True, eq=False)
class LayerBlocks:
    """Dense blocks of a sliced Hamiltonian.

    ``h_layers[i]`` is ``<layer i|H|layer i>``; ``v_next[i]`` is
    ``<layer i|H|layer i+1>``; ``lead_slots[p]`` are the positions of lead
    ``p``'s interface sites inside its layer; ``buffers`` holds the same
    blocks as the flat arrays the compiled kernels read (the blocks above are
    views into them).
    """

    slicing: Slicing
    h_layers: tuple
    v_next: tuple
    lead_slots: tuple
    buffers: LayerBuffers


def layer_blocks(model: TightBindingModel, slicing: Slicing | None = None) -> LayerBlocks:
    """Cut the model's Hamiltonian into dense layer blocks (slicing it first if needed).

    The default slicing and its blocks are computed once per model and kept
    in its cache (``model.cache.layer_blocks``), so repeated calls (energy
    batches, sweeps over energies) pay nothing; an explicit ``slicing`` is
    cut afresh.
    """
    if slicing is None:
        if model.cache.layer_blocks is None:
            model.cache.layer_blocks = _cut_blocks(model, default_slicing(model))
        return model.cache.layer_blocks
    return _cut_blocks(model, slicing)


def _cut_blocks(model: TightBindingModel, slicing: Slicing) -> LayerBlocks:
    """Scatter the nonzeros of H into flat layer buffers in one vectorised pass."""
    coo = model.hamiltonian.tocoo()
    n = model.n_orbitals
    layer_of = slicing.layer_of_sites(n)
    pos_in = np.empty(n, dtype=np.int64)
    for layer in slicing.layers:
        pos_in[layer] = np.arange(len(layer))
    lr, lc = layer_of[coo.row], layer_of[coo.col]
    if np.any(np.abs(lr - lc) > 1):
        raise ValueError("slicing is not block-tridiagonal: a bond skips a layer")
    sizes = np.array([len(layer) for layer in slicing.layers], dtype=np.int64)
    h_off = np.concatenate([[0], np.cumsum(sizes**2)]).astype(np.int64)
    v_sizes = sizes[:-1] * sizes[1:]
    v_off = np.concatenate([[0], np.cumsum(v_sizes)]).astype(np.int64)
    h_flat = np.zeros(h_off[-1], dtype=complex)
    v_flat = np.zeros(max(int(v_off[-1]), 1), dtype=complex)
    same = lr == lc
    np.add.at(h_flat, h_off[lr[same]] + pos_in[coo.row[same]] * sizes[lr[same]] + pos_in[coo.col[same]],
              coo.data[same])
    up = lc == lr + 1  # <i|H|i+1>
    np.add.at(v_flat, v_off[lr[up]] + pos_in[coo.row[up]] * sizes[lc[up]] + pos_in[coo.col[up]], coo.data[up])
    h_layers = tuple(h_flat[h_off[i]:h_off[i + 1]].reshape(sizes[i], sizes[i]) for i in range(len(sizes)))
    v_next = tuple(v_flat[v_off[i]:v_off[i + 1]].reshape(sizes[i], sizes[i + 1]) for i in range(len(sizes) - 1))
    slots = []
    for p, lead in enumerate(model.leads):
        if np.any(layer_of[lead.interface] != slicing.lead_layer[p]):
            raise ValueError(f"lead {lead.name!r}: interface not inside its layer")
        slots.append(pos_in[lead.interface])
    v_diag = np.array([v.shape[0] == v.shape[1] and np.count_nonzero(v - np.diag(np.diag(v))) == 0
                       for v in v_next] or [False], dtype=np.bool_)
    buffers = LayerBuffers(h_flat=h_flat, h_off=h_off, sizes=sizes, v_flat=v_flat, v_off=v_off, v_diag=v_diag)
    return LayerBlocks(slicing=slicing, h_layers=h_layers, v_next=v_next, lead_slots=tuple(slots), buffers=buffers)


def transmission(model: TightBindingModel, energies, *, eta: float = 0.0,
                 slicing: Slicing | None = None, solver: str = "auto") -> TransmissionResult:
    """Two-terminal transmission T(E) by recursive Green's functions or nested dissection.

    Parameters
    ----------
    model : TightBindingModel
        Must have exactly two leads.
    energies : (n_E,) float array_like, meV
    eta : float, meV
        Optional imaginary part added to the device energies (broadening);
        the leads are always evaluated exactly.  Default 0.
    slicing : Slicing, optional
        Layers for RGF; computed from the leads if not given.  Giving one asks for RGF.
    solver : {"auto", "rgf", "dissection"}
        "auto" (default) takes the route predicted faster for this model
        (:func:`rgftrans.transport.choice.choose_solver`): RGF for narrow
        devices, nested dissection (:mod:`rgftrans.transport.dissection`) for
        wide ones.  Both give the same T to round-off.

    Returns
    -------
    TransmissionResult
        ``solver`` says which route ran.  Energies on a channel threshold are
        moved into the upper half plane by a tiny amount and flagged; one
        :class:`ThresholdWarning` names them.
    """
    check_model(model)
    energies = check_energies(energies, model)
    eta = check_eta(eta)
    if len(model.leads) != 2:
        raise LeadError(
            f"transmission() needs exactly two leads, the model has {len(model.leads)}; use transmission_matrix()"
        )
    check_resolution(model, energies)
    choice = _choose(model, solver, slicing)
    n_e = len(energies)
    if choice.solver == "dissection":
        trans, n_open, flagged = _two_terminal_dissection(model, energies, eta, choice)
    else:
        blocks = layer_blocks(model, slicing)
        trans = np.empty(n_e)
        n_open = np.zeros((n_e, 2), dtype=np.int64)
        flagged = np.zeros(n_e, dtype=bool)
        for start in range(0, n_e, ENERGY_CHUNK):
            chunk = slice(start, min(start + ENERGY_CHUNK, n_e))
            trans[chunk], n_open[chunk], flagged[chunk] = _two_terminal_chunk(model, blocks, energies[chunk], eta)
    warn_thresholds(energies, flagged)
    return TransmissionResult(
        energies=energies,
        transmission=trans,
        n_open=n_open,
        at_threshold=flagged,
        lead_names=tuple(lead.name for lead in model.leads),
        spin_degeneracy=model.spin_degeneracy,
        solver=choice.solver,
    )


def _choose(model, solver: str, slicing):
    """The solver choice of a transport call: an explicit slicing asks for RGF (unless the tree is forced)."""
    from rgftrans.transport.choice import SolverChoice, choose_solver

    if slicing is not None and solver == "auto":
        nan = float("nan")
        return SolverChoice("rgf", nan, nan, nan, nan, "explicit slicing")
    return choose_solver(model, solver=solver, slicing=slicing)


#: Energies the tree could not trust (a front pivot below its tolerance: the energy sits near an eigenvalue of a
#: closed subdomain) are redone by RGF when its layer blocks take at most this many bytes, else by a sparse
#: direct solve (both are unaffected by closed subdomains: RGF's left-connected blocks contain a lead).
FALLBACK_RGF_BYTES = 2**30


def _rgf_affordable(model, choice) -> bool:
    from rgftrans.transport.choice import rgf_bytes

    need = choice.rgf_bytes
    if not np.isfinite(need):
        need = rgf_bytes([len(layer) for layer in default_slicing(model).layers], len(model.leads))
    return model.cache.layer_blocks is not None or need <= FALLBACK_RGF_BYTES


def _two_terminal_dissection(model, energies, eta, choice):
    """T, open channels and threshold flags by nested dissection; untrusted energies redone by RGF or directly."""
    from rgftrans.transport.dissection import dissection_solve

    res = dissection_solve(model, energies, eta)
    trans = res.matrix[:, 1, 0].copy()
    redo = np.flatnonzero(~res.trusted)
    if len(redo):
        if _rgf_affordable(model, choice):
            trans[redo] = _two_terminal_chunk(model, layer_blocks(model), energies[redo], eta)[0]
        else:
            trans[redo] = [_direct_fallback(model, energies[k], eta) for k in redo]
    return trans, res.n_open, res.at_threshold


#: Below this transmission (per open channel) the Ward-identity shortcut of wide devices is replaced by the
#: column propagation: T = N - R there is a difference of nearly equal numbers.
WARD_MIN_T = 1e-3
#: Energies handed to the compiled kernel at once (bounds the self-energy buffers).
ENERGY_CHUNK = 64


def end_self_energies(model, blocks: LayerBlocks, energies, eta: float = 0.0, *, warn: bool = True):
    """Device energies and the two leads' self-energies embedded in the first and last layer.

    Returns ``z_all`` (n_E,), ``sig_first`` (n_E, m_0, m_0), ``sig_last`` (n_E, m_K, m_K)
    and, per energy, the ``(sigmas, modes)`` of :func:`lead_self_energies` --
    the inputs of the compiled two-lead kernels.
    """
    n_e = len(energies)
    m_first, m_last = len(blocks.h_layers[0]), len(blocks.h_layers[-1])
    slots_first, slots_last = blocks.lead_slots
    sig_first = np.zeros((n_e, m_first, m_first), dtype=complex)
    sig_last = np.zeros((n_e, m_last, m_last), dtype=complex)
    z_all = np.empty(n_e, dtype=complex)
    per_energy = []
    for k, energy in enumerate(energies):
        sigmas, modes = lead_self_energies(model, energy, warn=warn)
        z_all[k] = device_energy(energy, modes, eta)
        sig_first[k][np.ix_(slots_first, slots_first)] = sigmas[0]
        sig_last[k][np.ix_(slots_last, slots_last)] = sigmas[1]
        per_energy.append((sigmas, modes))
    return z_all, sig_first, sig_last, per_energy


def _end_terms(model, blocks: LayerBlocks, energies, eta):
    """The compiled kernels' lead inputs at each energy, with the open channels and threshold flags.

    Returns ``z_all``, an :class:`EndTerms` (self-energies of both ends, ``W`` of the first lead with
    ``Gamma = W W^dag`` zero-padded to the most open channels, ``Gamma`` of the last lead), ``n_open``
    (n_E, 2) and ``at_threshold`` (n_E,).
    """
    n_e = len(energies)
    m_first, m_last = len(blocks.h_layers[0]), len(blocks.h_layers[-1])
    slots_first, slots_last = blocks.lead_slots
    z_all, sig_first, sig_last, per_energy = end_self_energies(model, blocks, energies, eta, warn=False)
    gamma_last = np.zeros((n_e, m_last, m_last), dtype=complex)
    n_open = np.zeros((n_e, 2), dtype=np.int64)
    at_threshold = np.zeros(n_e, dtype=bool)
    w_each = []
    for k, (sigmas, modes) in enumerate(per_energy):
        at_threshold[k] = any(m.at_threshold for m in modes)
        n_open[k] = [m.n_open for m in modes]
        gamma_last[k][np.ix_(slots_last, slots_last)] = broadening(sigmas[1])
        w_each.append(gamma_factor(broadening(sigmas[0])))
    n_channels = max(1, max(w.shape[1] for w in w_each))
    w_first = np.zeros((n_e, m_first, n_channels), dtype=complex)
    for k, w in enumerate(w_each):
        w_first[k][slots_first, :w.shape[1]] = w
    return z_all, EndTerms(sig_first, sig_last, w_first, gamma_last), n_open, at_threshold


def _run_kernel(kernel, z_all, layers: LayerBuffers, ends: EndTerms, select, **options) -> np.ndarray:
    """Transmissions at the energies ``select`` from a compiled kernel; NaN where a block is exactly singular.

    An exactly singular block raises LinAlgError for the whole batch: the energies are then redone one by one.
    """
    def at(sel):
        return kernel(z_all[sel], layers, EndTerms(*(term[sel] for term in ends)), **options)

    try:
        return at(select)
    except np.linalg.LinAlgError:
        out = np.full(len(select), np.nan)
        for j, k in enumerate(select):
            try:
                out[j] = at(np.array([k]))[0]
            except np.linalg.LinAlgError:
                pass
        return out


def _direct_fallback(model, energy: float, eta: float) -> float:
    """T at one energy where the recursion broke down: a sparse direct solve, just above the axis if need be.

    A singular intermediate block (a bound state of a partial system at exactly this energy) breaks the
    recursion, not the physics: sparse LU solves the whole device.  If the open device itself is singular
    there (a bound state in the continuum sitting exactly on the energy), T is taken just above the real
    axis, where it is continuous, and the user is told.
    """
    from rgftrans.transport.direct import transmission_direct

    try:
        return float(transmission_direct(model, [energy], eta=eta)[0, 1, 0])
    except RuntimeError:  # splu: "Factor is exactly singular"
        pass
    shift = SINGULAR_ETA * model.energy_scale
    warnings.warn(
        f"E = {energy:.10g} meV is an eigenvalue of the open device (a bound state in the continuum sits "
        f"exactly there); T was computed at E + {shift:.1e}i meV",
        ThresholdWarning, stacklevel=4,
    )
    return float(transmission_direct(model, [energy], eta=eta + shift)[0, 1, 0])


def _two_terminal_chunk(model, blocks: LayerBlocks, energies, eta, *, terms=None, layers: LayerBuffers | None = None,
                        fallback=None):
    """Transmission at a batch of energies: lead terms in Python (cached), the slice loop compiled.

    Wide layers use the Ward identity on the last layer (no column propagation) at real energies of a
    Hermitian device; where T comes out below ``WARD_MIN_T`` per channel it has lost relative accuracy and
    is redone with columns.  Energies where the recursion breaks down take :func:`_direct_fallback`.

    A disorder ensemble (:mod:`rgftrans.transport.ensemble`) passes the lead ``terms`` of
    :func:`_end_terms` it computed once, its own ``layers`` (the blocks with a sample's onsite values) and a
    ``fallback(energy) -> T`` for the sample.
    """
    from rgftrans.transport._kernels import SMALL_BLOCK, two_terminal, two_terminal_small

    z_all, ends, n_open, at_threshold = _end_terms(model, blocks, energies, eta) if terms is None else terms
    layers = blocks.buffers if layers is None else layers
    wide = layers.sizes.max() > SMALL_BLOCK
    columns = two_terminal if wide else two_terminal_small
    trans = np.full(len(energies), np.nan)
    real = z_all.imag == 0
    if wide and np.any(real) and not model.is_lossy:  # the identity needs a Hermitian device
        sel = np.flatnonzero(real)
        trans[sel] = _run_kernel(two_terminal, z_all, layers, ends, sel, ward=True)
        trans[sel[trans[sel] < WARD_MIN_T * np.maximum(n_open[sel].min(axis=1), 1)]] = np.nan
    redo = np.flatnonzero(~np.isfinite(trans))
    if len(redo):
        trans[redo] = _run_kernel(columns, z_all, layers, ends, redo)
    for k in np.flatnonzero(~np.isfinite(trans)):
        trans[k] = _direct_fallback(model, energies[k], eta) if fallback is None else fallback(energies[k])
    return trans, n_open, at_threshold


# --------------------------------------------------------------------------
# Full sweeps: diagonal blocks and lead columns of G (any number of leads)
# --------------------------------------------------------------------------

@dataclass(frozen=True, eq=False)
class GreenBlocks:
    """Blocks of the retarded Green's function of the open device at one energy.

    Attributes
    ----------
    diagonal : list of (m_i, m_i) complex ndarray
        ``G_ii`` for every layer (1/meV).
    columns : list (per lead q) of list (per layer i) of (m_i, k_q) complex ndarray
        ``G_{i, interface q}``: the columns of G at lead q's interface.
    """

    diagonal: list
    columns: list


def _interface_block(gb: GreenBlocks, blocks: LayerBlocks, p: int, q: int) -> np.ndarray:
    """``G`` between lead p's and lead q's interface sites (leads in the same or in the end layers)."""
    lp, lq = blocks.slicing.lead_layer[p], blocks.slicing.lead_layer[q]
    sp_, sq = blocks.lead_slots[p], blocks.lead_slots[q]
    if gb.columns:
        return gb.columns[q][lp][sp_]
    if lp != lq:
        raise ValueError("leads in different layers need the lead columns of G")
    return gb.diagonal[lp][np.ix_(sp_, sq)]


def _embedded_sigmas(blocks: LayerBlocks, sigmas) -> list:
    extra = [None] * len(blocks.h_layers)
    for p, sigma in enumerate(sigmas):
        layer = blocks.slicing.lead_layer[p]
        if extra[layer] is None:
            extra[layer] = np.zeros_like(blocks.h_layers[layer])
        slots = blocks.lead_slots[p]
        extra[layer][np.ix_(slots, slots)] += sigma
    return extra


def green_blocks(z: complex, blocks: LayerBlocks, sigmas, *, columns: bool = True) -> GreenBlocks:
    """Diagonal blocks of G and its columns at every lead interface, from left-connected functions only.

    With ``A_i = z - H_i - Sigma_i`` (leads attached to layer i) and
    ``V_i = <i|H|i+1>``, the forward sweep gives the left-connected
    ``gL_i = (A_i - V_{i-1}^dag gL_{i-1} V_{i-1})^-1``.  Then, backwards,
    ``G_KK = gL_K`` and ``G_ii = gL_i + gL_i V_i G_{i+1,i+1} V_i^dag gL_i``;
    the columns at a lead in layer l are ``G_{i,l} = gL_i V_i G_{i+1,l}``
    (i < l) and ``G_{i,l} = G_ii V_{i-1}^dag P_{i-1}`` (i > l), with the
    left-connected column ``P_l = gL_l``, ``P_i = gL_i V_{i-1}^dag P_{i-1}``
    (Dyson's equation cut between two layers; e.g. Datta, Electronic
    Transport in Mesoscopic Systems, 1995, ch. 3, from memory).

    Only left-connected functions are inverted.  They contain the leads of
    layer 0, so no closed sub-system (which has real poles, e.g. a dead-end
    layer at an eigenvalue of its own) is ever inverted on the real axis.
    """
    h_layers, v_next = blocks.h_layers, blocks.v_next
    n = len(h_layers)
    extra = _embedded_sigmas(blocks, sigmas)
    g_left = [None] * n
    for i in range(n):
        a = z * np.eye(len(h_layers[i])) - h_layers[i]
        if extra[i] is not None:
            a -= extra[i]
        if i > 0:
            v = v_next[i - 1]
            a -= v.conj().T @ g_left[i - 1] @ v
        g_left[i] = np.linalg.inv(a)
    diag = [None] * n
    diag[n - 1] = g_left[n - 1]
    for i in range(n - 2, -1, -1):
        diag[i] = g_left[i] + (g_left[i] @ v_next[i]) @ diag[i + 1] @ (v_next[i].conj().T @ g_left[i])
    cols_all = []
    if columns:
        for p in range(len(sigmas)):
            layer = blocks.slicing.lead_layer[p]
            slots = blocks.lead_slots[p]
            cols = [None] * n
            cols[layer] = diag[layer][:, slots]
            for i in range(layer - 1, -1, -1):
                cols[i] = g_left[i] @ (v_next[i] @ cols[i + 1])
            prop = g_left[layer][:, slots]
            for i in range(layer + 1, n):
                vdag = v_next[i - 1].conj().T
                cols[i] = diag[i] @ (vdag @ prop)
                prop = g_left[i] @ (vdag @ prop)
            cols_all.append(cols)
    return GreenBlocks(diagonal=diag, columns=cols_all)


@dataclass(frozen=True, eq=False)
class TransmissionMatrixResult:
    """Transmissions between all pairs of leads over a set of energies.

    Attributes
    ----------
    energies : (n_E,) float ndarray, meV
    matrix : (n_E, n_leads, n_leads) float ndarray
        ``matrix[k, p, q]``: transmission from lead q into lead p; the
        diagonal holds the reflection ``R_pp``.  (A result's ``transmission``
        is always one number per energy, as in :class:`TransmissionResult`;
        the matrix has its own name.)
    n_open : (n_E, n_leads) int ndarray
    at_threshold : (n_E,) bool ndarray
    lead_names : tuple of str
    spin_degeneracy : {1, 2}
        As in :class:`TransmissionResult`.
    solver : {"rgf", "dissection"}
        As in :class:`TransmissionResult`.
    """

    energies: np.ndarray
    matrix: np.ndarray
    n_open: np.ndarray
    at_threshold: np.ndarray
    lead_names: tuple
    spin_degeneracy: int = 2
    solver: str = "rgf"

    def conductance_matrix(self) -> np.ndarray:
        """Büttiker conductance matrix in units of 2e^2/h, shape (n_E, n_leads, n_leads).

        ``I_p = (g_s e^2/h) sum_q (N_p delta_pq - T_pq) V_q`` (M. Büttiker,
        Phys. Rev. Lett. 57, 1761 (1986), from memory), with ``T_pp = R_pp``
        and ``g_s`` the spin degeneracy (2 spinless, 1 with spin orbitals).
        Multiply by :data:`rgftrans.system.materials.CONDUCTANCE_QUANTUM_S` for siemens.
        """
        eye = np.eye(len(self.lead_names))
        return conductance_g0(self.n_open[:, :, None] * eye - self.matrix, self.spin_degeneracy)


def transmission_matrix(model: TightBindingModel, energies, *, eta: float = 0.0,
                        slicing: Slicing | None = None, solver: str = "auto") -> TransmissionMatrixResult:
    """Transmissions ``T_pq(E)`` between all leads (any number) by RGF or nested dissection.

    ``T_pq = Tr[Gamma_p G_pq Gamma_q G_pq^dag]`` for p != q, and the
    reflection from the Fisher-Lee form ``r = -1 + i W^dag G W``
    (``Gamma = W W^dag``): ``R_pp = N_p - i Tr[Gamma_p (G_pp - G_pp^dag)]
    + Tr[Gamma_p G_pp Gamma_p G_pp^dag]``.  ``slicing`` and ``solver`` as in
    :func:`transmission`; the result's ``solver`` says which route ran.
    """
    check_model(model)
    energies = check_energies(energies, model)
    eta = check_eta(eta)
    check_resolution(model, energies)
    choice = _choose(model, solver, slicing)
    n_leads = len(model.leads)
    n_e = len(energies)
    if choice.solver == "dissection":
        from rgftrans.transport.dissection import dissection_solve

        res = dissection_solve(model, energies, eta)
        trans, n_open, flagged = res.matrix, res.n_open, res.at_threshold
        redo = np.flatnonzero(~res.trusted)
        blocks = layer_blocks(model) if len(redo) and _rgf_affordable(model, choice) else None
        for k in redo:
            trans[k] = _matrix_at(model, blocks, energies[k], eta)[0]
    else:
        blocks = layer_blocks(model, slicing)
        trans = np.zeros((n_e, n_leads, n_leads))
        n_open = np.zeros((n_e, n_leads), dtype=np.int64)
        flagged = np.zeros(n_e, dtype=bool)
        for k, energy in enumerate(energies):
            trans[k], n_open[k], flagged[k] = _matrix_at(model, blocks, energy, eta)
    warn_thresholds(energies, flagged)
    return TransmissionMatrixResult(energies=energies, matrix=trans, n_open=n_open,
                                    at_threshold=flagged, lead_names=tuple(l.name for l in model.leads),
                                    spin_degeneracy=model.spin_degeneracy, solver=choice.solver)


def _matrix_at(model, blocks, energy, eta):
    """``T_pq`` and ``R_pp`` at one energy by RGF (``blocks``), or by a sparse direct solve when ``blocks`` is
    None or a partial system of the recursion is singular there; with the open channels and threshold flag."""
    n_leads = len(model.leads)
    sigmas, modes = lead_self_energies(model, energy, warn=False)
    flagged = any(m.at_threshold for m in modes)
    n_open = np.array([m.n_open for m in modes], dtype=np.int64)
    trans = np.zeros((n_leads, n_leads))
    try:
        if blocks is None:
            raise np.linalg.LinAlgError
        need_columns = len(set(blocks.slicing.lead_layer)) > 1
        gb = green_blocks(device_energy(energy, modes, eta), blocks, sigmas, columns=need_columns)
    except np.linalg.LinAlgError:  # singular partial system at exactly this energy: solve directly
        from rgftrans.transport.direct import transmission_direct

        trans[:] = transmission_direct(model, [energy], eta=eta)[0]
        for p in range(n_leads):
            trans[p, p] = n_open[p] - (trans[:, p].sum() - trans[p, p])
        return trans, n_open, flagged
    gammas = [broadening(s) for s in sigmas]
    for p in range(n_leads):
        for q in range(n_leads):
            g_pq = _interface_block(gb, blocks, p, q)
            t = np.trace(gammas[p] @ g_pq @ gammas[q] @ g_pq.conj().T).real
            if p == q:
                t += n_open[p] - np.trace(1j * gammas[p] @ (g_pq - g_pq.conj().T)).real
            trans[p, q] = t
    return trans, n_open, flagged


def four_terminal_resistance(conductance: np.ndarray, current: tuple[int, int], voltage: tuple[int, int]) -> float:
    """Resistance ``(V_r - V_s) / I`` for current I driven from lead p to lead q, in ohms.

    Parameters
    ----------
    conductance : (n_leads, n_leads) float ndarray
        Büttiker conductance matrix in units of 2e^2/h at one energy.
    current : (p, q)
        Current enters at lead p and leaves at lead q.
    voltage : (r, s)
        Voltage probes.

    Notes
    -----
    Lead q is the voltage reference; the remaining rows and columns of the
    conductance matrix are inverted (Büttiker 1986, from memory).  With
    ``r, s = p, q`` this is the two-terminal resistance.
    """
    g = np.asarray(conductance, dtype=float)
    n = g.shape[0]
    p, q = current
    r, s = voltage
    keep = [k for k in range(n) if k != q]
    resist = np.linalg.inv(g[np.ix_(keep, keep)])  # V = R I on the kept leads (units h/2e^2)
    current_vec = np.zeros(n)
    current_vec[p], current_vec[q] = 1.0, -1.0
    volts = np.zeros(n)
    volts[keep] = resist @ current_vec[keep]
    return float((volts[r] - volts[s]) / CONDUCTANCE_QUANTUM_S)
