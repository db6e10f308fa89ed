"""Local quantities on the device: LDOS, lead-resolved densities, scattering states, currents.

All come from one forward and one backward RGF sweep
(:func:`rgftrans.transport.rgf.green_blocks`) at a single energy, except the
LDOS of wide devices, which :func:`ldos` takes from the nested-dissection
tree by selected inversion when that is predicted faster
(:func:`rgftrans.transport.dissection.dissection_diagonal`,
:func:`rgftrans.transport.choice.choose_ldos_solver`):

* LDOS ``rho_i = -Im G_ii / pi`` (states per meV per site), summed over the
  orbitals of a site;
* the density injected by lead p, ``n_p(i) = [G Gamma_p G^dag]_ii / 2 pi``
  (Datta 1995, ch. 3, from memory); ``sum_p n_p = rho`` when the device has
  no absorption;
* scattering states for each incoming open channel of a lead, normalised to
  unit incoming flux (see :func:`rgftrans.leads.modes.incoming_sources`);
* bond currents ``I_{i->j} = -2 Im(psi_i^* H_ij psi_j)`` (hbar = 1, in units
  of the incoming flux: the current of a unit-flux channel is 1).
"""

from __future__ import annotations

from dataclasses import dataclass

import warnings

import numpy as np
import scipy.sparse as sp

from rgftrans.constants import SINGULAR_ETA
from rgftrans.system.device import TightBindingModel
from rgftrans.errors import RgftransWarning, ThresholdWarning
from rgftrans.system.inputs import check_energies, check_energy, check_eta, check_model
from rgftrans.leads.modes import incoming_sources, outgoing_amplitudes, require_off_threshold
from rgftrans.transport.rgf import LayerBlocks, end_self_energies, green_blocks, layer_blocks
from rgftrans.leads.embedding import device_energy, lead_self_energies
from rgftrans.transport.slicing import Slicing


__all__ = ["LocalResult", "local_quantities", "LdosResult", "ldos", "ldos_result", "ScatteringStates",
           "scattering_states", "bond_currents"]


@dataclass(frozen=True, eq=False)
class LocalResult:
    """Site-resolved quantities at one energy.

    Attributes
    ----------
    energy : float, meV
    ldos : (n_sites,) float ndarray, 1/meV
        Local density of states per site.
    lead_density : (n_leads, n_sites) float ndarray, 1/meV
        Density injected by each lead, ``[G Gamma_p G^dag]_ii / 2 pi``.
    positions : (n_sites, 2) float ndarray, nm
    lead_names : tuple of str
    """

    energy: float
    ldos: np.ndarray
    lead_density: np.ndarray
    positions: np.ndarray
    lead_names: tuple


def _site_order(blocks: LayerBlocks) -> np.ndarray:
    return np.concatenate(blocks.slicing.layers)


def local_quantities(model: TightBindingModel, energy: float, *, eta: float = 0.0,
                     slicing: Slicing | None = None) -> LocalResult:
    """LDOS and lead-resolved densities at one energy (meV) by RGF.

    If a partial system of the recursion has a bound state at exactly this
    energy (a singular block), the energy is moved by
    ``SINGULAR_ETA * energy_scale`` into the upper half plane and a
    ThresholdWarning says so.
    """
    check_model(model)
    energy = check_energy(energy, model)
    eta = check_eta(eta)
    blocks = layer_blocks(model, slicing)
    sigmas, modes = lead_self_energies(model, energy)
    try:
        gb = green_blocks(device_energy(energy, modes, eta), blocks, sigmas)
    except np.linalg.LinAlgError:
        shift = SINGULAR_ETA * model.energy_scale
        warnings.warn(
            f"E = {energy:.10g} meV is an exact eigenvalue of a part of the device seen by the recursion; the local "
            f"quantities were computed at E + {shift:.1e}i meV -- shift the energy slightly for exact values",
            ThresholdWarning, stacklevel=2,
        )
        gb = green_blocks(device_energy(energy, modes, eta + shift), blocks, sigmas)
    order = _site_order(blocks)
    n = model.n_orbitals
    ldos = np.empty(n)
    ldos[order] = np.concatenate([-np.diag(g).imag / np.pi for g in gb.diagonal])
    dens = np.empty((n, len(model.leads)))
    for p, sigma in enumerate(sigmas):
        gamma = 1j * (sigma - sigma.conj().T)
        per_layer = [np.einsum("ik,kl,il->i", c, gamma, c.conj()).real / (2 * np.pi) for c in gb.columns[p]]
        dens[order, p] = np.concatenate(per_layer)
    return LocalResult(energy=float(energy), ldos=model.per_site(ldos), lead_density=model.per_site(dens).T,
                       positions=model.positions,
                       lead_names=tuple(l.name for l in model.leads))


@dataclass(frozen=True, eq=False)
class LdosResult:
    """Local density of states at a set of energies, and the route that computed it.

    Attributes
    ----------
    energies : (n_E,) float ndarray, meV
    ldos : (n_E, n_sites) float ndarray, 1/meV
        ``-Im G_ii / pi`` summed over the orbitals of each site.
    solver : {"rgf", "dissection"}
        The route chosen for the call (:func:`rgftrans.transport.choice.choose_ldos_solver`).
    reason : str
        Why that route (one line, from the choice).
    redone : (n_E,) bool ndarray
        Energies the tree did not trust, computed again by RGF (``solver`` stays "dissection").
    notes : tuple of str
        Per energy: "" or why it was redone.
    """

    energies: np.ndarray
    ldos: np.ndarray
    solver: str
    reason: str
    redone: np.ndarray
    notes: tuple


def ldos(model: TightBindingModel, energies, *, eta: float = 0.0, solver: str = "auto") -> np.ndarray:
    """Local density of states ``-Im G_ii / pi`` per site (1/meV), summed over orbitals.

    Parameters
    ----------
    energies : float or (n_E,) array, meV
    eta : float, meV
        Imaginary part added to the device energies (the leads are evaluated exactly).
    solver : {"auto", "rgf", "dissection"}
        "auto" (default) takes the route predicted faster for this model
        (:func:`rgftrans.transport.choice.choose_ldos_solver`): RGF for narrow devices,
        selected inversion on the nested-dissection tree for wide ones.  Both give the same
        LDOS to round-off; :func:`ldos_result` says which ran.

    Returns
    -------
    (n_sites,) or (n_E, n_sites) float ndarray

    By RGF, with two leads (one at each end of the slicing) the diagonal comes
    from the compiled kernel: forward and backward sweeps, both starting at a
    lead, and one more inversion per layer; otherwise (one lead, three or
    more, or a closed system) from :func:`local_quantities`.  By the tree:
    :func:`rgftrans.transport.dissection.dissection_diagonal`.
    """
    res = ldos_result(model, energies, eta=eta, solver=solver)
    return res.ldos[0] if np.ndim(energies) == 0 else res.ldos


def ldos_result(model: TightBindingModel, energies, *, eta: float = 0.0, solver: str = "auto") -> LdosResult:
    """:func:`ldos` with the route it took: an :class:`LdosResult` (energies as an (n_E,) array).

    On the tree, an energy it does not trust (delayed unknowns over their cap, growth or the root's pivot out
    of bounds: :class:`rgftrans.transport.dissection.DissectionDiagonal`) is redone by RGF and marked in
    ``redone`` with the tree's reason; if RGF's layer blocks would not fit in memory either, its LDOS is NaN
    and a warning says so.
    """
    from rgftrans.transport.choice import choose_ldos_solver

    check_model(model)
    energies = np.atleast_1d(check_energies(energies, model))
    eta = check_eta(eta)
    choice = choose_ldos_solver(model, solver=solver)
    n_e = len(energies)
    redone = np.zeros(n_e, dtype=bool)
    notes = [""] * n_e
    if choice.solver == "rgf":
        out = _ldos_rgf(model, energies, eta)
    else:
        from rgftrans.transport.dissection import dissection_diagonal

        res = dissection_diagonal(model, energies, eta)
        out = np.array([model.per_site(row) for row in -res.diagonal.imag / np.pi]).reshape(n_e, model.n_sites)
        redo = np.flatnonzero(~res.trusted)
        if len(redo):
            from rgftrans.system.budget import MEMORY_SHARE, available_memory_bytes

            redone[redo] = True
            if model.cache.layer_blocks is not None or choice.rgf_bytes < MEMORY_SHARE * available_memory_bytes():
                out[redo] = _ldos_rgf(model, energies[redo], eta)
                for k in redo:
                    notes[k] = f"redone by RGF: {res.reason[k]}"
            else:
                for k in redo:
                    notes[k] = f"not computed: {res.reason[k]}, and RGF would not fit in memory"
                warnings.warn(
                    f"{len(redo)} LDOS energy point(s) (e.g. E = {energies[redo[0]]:.10g} meV) are NaN: the tree did "
                    f"not trust them ({res.reason[redo[0]]}) and RGF's layer blocks ({choice.rgf_bytes / 1e9:.3g} GB) "
                    "would not fit in memory -- shift those energies slightly",
                    RgftransWarning, stacklevel=2,
                )
    return LdosResult(energies=energies, ldos=out, solver=choice.solver, reason=choice.reason, redone=redone,
                      notes=tuple(notes))


def _ldos_rgf(model: TightBindingModel, energies: np.ndarray, eta: float) -> np.ndarray:
    """LDOS (n_E, n_sites) by RGF (energies and eta checked by the caller)."""
    blocks = layer_blocks(model)
    lead_layers = blocks.slicing.lead_layer
    if len(model.leads) != 2 or lead_layers[0] == lead_layers[1]:
        return np.array([local_quantities(model, e, eta=eta).ldos for e in energies]).reshape(-1, model.n_sites)
    from rgftrans.transport._kernels import SMALL_BLOCK, diagonal_two_terminal, diagonal_two_terminal_small

    n_e = len(energies)
    z_all, sig_first, sig_last, _ = end_self_energies(model, blocks, energies, eta)
    diag = np.empty((n_e, model.n_orbitals), dtype=complex)
    layers = blocks.buffers
    kernel = diagonal_two_terminal_small if layers.sizes.max() <= SMALL_BLOCK else diagonal_two_terminal
    try:
        kernel(z_all, layers, sig_first, sig_last, diag)
    except np.linalg.LinAlgError:  # a singular partial system at one energy: those energies take full sweeps
        for k in range(n_e):
            try:
                kernel(z_all[k:k + 1], layers, sig_first[k:k + 1], sig_last[k:k + 1], diag[k:k + 1])
            except np.linalg.LinAlgError:
                diag[k] = np.nan
    order = _site_order(blocks)
    out = np.empty((n_e, model.n_orbitals))
    out[:, order] = -diag.imag / np.pi
    result = np.array([model.per_site(row) for row in out]).reshape(n_e, model.n_sites)
    bad = ~np.all(np.isfinite(result), axis=1)
    for k in np.flatnonzero(bad):  # a singular partial system at exactly this energy: the other sweep order
        result[k] = local_quantities(model, energies[k], eta=eta).ldos
    return result


@dataclass(frozen=True, eq=False)
class ScatteringStates:
    """Scattering states entering from one lead, at one energy.

    Attributes
    ----------
    energy : float, meV
    lead : int
        Index of the lead the waves come in from.
    wavefunctions : (n_orbitals, n_channels) complex ndarray
        One column per incoming open channel, unit incoming flux; rows are
        orbitals (``site * norbs + orbital``).
    amplitudes : list (per lead) of (n_open_p, n_channels) complex ndarray
        Outgoing flux amplitudes into every lead's open channels (a column
        of the S matrix); for the source lead these are reflections.
    """

    energy: float
    lead: int
    wavefunctions: np.ndarray
    amplitudes: list

    def transmission_into(self, p: int) -> float:
        """``sum |amplitude|^2`` into lead p (reflection if p is the source)."""
        return float(np.sum(np.abs(self.amplitudes[p]) ** 2))


def scattering_states(model: TightBindingModel, energy: float, lead: int | str = 0, *,
                      slicing: Slicing | None = None) -> ScatteringStates:
    """Scattering states of all open channels incoming from ``lead`` (RGF)."""
    check_model(model)
    energy = check_energy(energy, model)
    q = model.lead_index(lead)
    blocks = layer_blocks(model, slicing)
    sigmas, modes = lead_self_energies(model, energy)
    require_off_threshold(modes, energy, "a scattering state")
    gb = green_blocks(device_energy(energy, modes), blocks, sigmas)
    sources, back = incoming_sources(model.leads[q].h_hop, model.leads[q].coupling, modes[q])
    order = _site_order(blocks)
    psi = np.empty((model.n_orbitals, sources.shape[1]), dtype=complex)
    psi[order] = np.vstack([c @ sources for c in gb.columns[q]])
    amplitudes = []
    for p, (lead_p, mp) in enumerate(zip(model.leads, modes)):
        amplitudes.append(outgoing_amplitudes(lead_p.coupling, mp, psi[lead_p.interface], back if p == q else None))
    return ScatteringStates(energy=float(energy), lead=q, wavefunctions=psi, amplitudes=amplitudes)


def bond_currents(model: TightBindingModel, psi: np.ndarray) -> sp.csr_matrix:
    """Bond currents between sites of one or more states.

    Parameters
    ----------
    psi : (n_orbitals,) or (n_orbitals, n_states) complex ndarray
        States; currents of several columns are summed.

    Returns
    -------
    (n_sites, n_sites) scipy.sparse.csr_matrix
        Entry (i, j) is the current from site i to site j,
        ``-2 Im(sum_{states, orbitals} psi_i^* H_ij psi_j)`` (hbar = 1), summed
        over the orbitals of the two sites; antisymmetric.  Terms inside one
        site (spin flips) carry no current between sites and are left out.
    """
    psi = np.asarray(psi).reshape(model.n_orbitals, -1)
    ham = model.hamiltonian.tocoo()
    no = model.norbs
    si, sj = ham.row // no, ham.col // no
    off = si != sj
    i, j, h = ham.row[off], ham.col[off], ham.data[off]
    current = -2.0 * np.imag(np.sum(psi[i].conj() * psi[j], axis=1) * h)
    return sp.coo_matrix((current, (si[off], sj[off])), shape=(model.n_sites, model.n_sites)).tocsr()
