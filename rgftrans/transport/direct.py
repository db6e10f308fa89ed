"""Direct sparse solves: the reference path, and the scattering matrix.

These routines factorise ``E - H - sum_p Sigma_p`` with
``scipy.sparse.linalg.splu`` and solve for the columns at the lead
interfaces.  They are slower than RGF but share none of its recursion, so the
tests hold RGF against them; the benchmark uses them as the baseline a user
would write by hand.

:func:`scattering_matrix` builds the full S matrix between the open channels
of all leads by the Fisher-Lee relation (Fisher & Lee, Phys. Rev. B 23, 6851
(1981), from memory) written for general leads: an incoming Bloch mode
``phi_in`` of lead q drives the device through the source
``V_q (phi_in - g_q h_hop_q^dag phi_in / bloch_in)``; the outgoing wave in lead
p at its cell 0 is ``g_p V_p^dag psi`` (minus the incoming part when p = q),
expanded in lead p's outgoing modes; amplitudes are flux-normalised by
``sqrt(|v_out| / |v_in|)``.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as spla

from rgftrans.system.device import TightBindingModel, lead_index
from rgftrans.leads.modes import incoming_sources, outgoing_amplitudes, require_off_threshold
from rgftrans.system.inputs import check_energies, check_eta, check_model
from rgftrans.leads.embedding import device_energy, embedded_self_energy, lead_self_energies

__all__ = ["interface_green", "transmission_direct", "ScatteringMatrix", "LeadAmplitudes", "scattering_matrix"]


def interface_green(model: TightBindingModel, energy: float, *, eta: float = 0.0, warn: bool = True):
    """Retarded Green's function between all lead interface sites, by sparse LU.

    Returns
    -------
    g_iface : (k, k) complex ndarray, 1/meV
        Rows and columns ordered lead by lead (lead 0's interface first).
    sigmas, modes : lists from :func:`rgftrans.transport.rgf.lead_self_energies`
    """
    sigmas, modes = lead_self_energies(model, energy, warn=warn)
    z = device_energy(energy, modes, eta)
    n = model.n_orbitals
    mat = z * sp.identity(n, dtype=complex, format="csc") - model.hamiltonian - embedded_self_energy(model, sigmas)
    lu = spla.splu(sp.csc_matrix(mat))
    iface = np.concatenate([lead.interface for lead in model.leads])
    rhs = np.zeros((n, len(iface)), dtype=complex)
    rhs[iface, np.arange(len(iface))] = 1.0
    cols = lu.solve(rhs)
    return cols[iface], sigmas, modes


def _lead_ranges(model):
    sizes = [len(lead.interface) for lead in model.leads]
    edges = np.concatenate([[0], np.cumsum(sizes)])
    return [slice(edges[p], edges[p + 1]) for p in range(len(sizes))]


def transmission_direct(model: TightBindingModel, energies, *, eta: float = 0.0) -> np.ndarray:
    """Transmission matrix ``T[E, p, q]`` (from lead q into lead p) by sparse LU and Caroli's formula."""
    check_model(model)
    energies = check_energies(energies, model)
    eta = check_eta(eta)
    n_leads = len(model.leads)
    out = np.zeros((len(energies), n_leads, n_leads))
    ranges = _lead_ranges(model)
    for k, energy in enumerate(energies):
        g, sigmas, _ = interface_green(model, energy, eta=eta)
        gammas = [1j * (s - s.conj().T) for s in sigmas]
        for p in range(n_leads):
            for q in range(n_leads):
                if p == q:
                    continue
                gpq = g[ranges[p], ranges[q]]
                out[k, p, q] = np.trace(gammas[p] @ gpq @ gammas[q] @ gpq.conj().T).real
    return out


@dataclass(frozen=True, eq=False)
class LeadAmplitudes:
    """Scattering amplitudes from the open channels of one lead into those of another, at one energy.

    Attributes
    ----------
    source, drain : str
        Lead names: the wave comes in from ``source`` and goes out into
        ``drain`` (the same lead for reflection).
    matrix : (n_drain, n_source) complex ndarray
        ``matrix[a, b]``: flux-normalised amplitude into outgoing channel a of
        the drain from incoming channel b of the source.
    """

    source: str
    drain: str
    matrix: np.ndarray

    @property
    def transmission(self) -> float:
        """``T = sum |matrix|^2``, from source into drain (the reflection ``R`` when they are one lead)."""
        return float(np.sum(np.abs(self.matrix) ** 2))


@dataclass(frozen=True, eq=False)
class ScatteringMatrix:
    """Scattering matrix between the open channels of all leads at one energy.

    Ask for a part of it by lead name (or index): ``s.amplitudes(source="left",
    drain="right")``, ``s.transmission(source="left", drain="right")``.

    Attributes
    ----------
    energy : float, meV
    s : (N, N) complex ndarray
        ``s[a, b]``: amplitude into outgoing channel a from incoming channel b,
        flux-normalised, so that ``s`` is unitary.
    channel_lead : (N,) int ndarray
        Lead index of each channel (same ordering for rows and columns).
    lead_names : tuple of str
        Name of each lead, in the model's order.
    """

    energy: float
    s: np.ndarray
    channel_lead: np.ndarray
    lead_names: tuple

    def amplitudes(self, *, source, drain) -> LeadAmplitudes:
        """Amplitudes from lead ``source`` into lead ``drain`` (names, or indices in the model's order)."""
        q = lead_index(self.lead_names, source, role="source", owner="the scattering matrix")
        p = lead_index(self.lead_names, drain, role="drain", owner="the scattering matrix")
        block = self.s[np.ix_(self.channel_lead == p, self.channel_lead == q)]
        return LeadAmplitudes(source=self.lead_names[q], drain=self.lead_names[p], matrix=block)

    def transmission(self, *, source, drain) -> float:
        """``T = sum |s_{drain<-source}|^2`` (for source = drain this is the reflection ``R``)."""
        return self.amplitudes(source=source, drain=drain).transmission


def scattering_matrix(model: TightBindingModel, energy: float) -> ScatteringMatrix:
    """Flux-normalised scattering matrix by the Fisher-Lee relation (sparse LU for G)."""
    g, _, modes = interface_green(model, energy)
    require_off_threshold(modes, energy, "the scattering matrix")
    ranges = _lead_ranges(model)
    return _assemble_smatrix(model, modes, lambda p, q: g[ranges[p], ranges[q]], energy)


def _assemble_smatrix(model, modes, g_block, energy) -> ScatteringMatrix:
    """S from the interface blocks ``g_block(p, q)`` of the retarded Green's function."""
    n_ch = [m.n_open for m in modes]
    channel_lead = np.repeat(np.arange(len(modes)), n_ch)
    offs = np.concatenate([[0], np.cumsum(n_ch)])
    s = np.zeros((offs[-1], offs[-1]), dtype=complex)
    for q, (lead_q, mq) in enumerate(zip(model.leads, modes)):
        sources, back = incoming_sources(lead_q.h_hop, lead_q.coupling, mq)
        for p, (lead_p, mp) in enumerate(zip(model.leads, modes)):
            psi = g_block(p, q) @ sources
            amp = outgoing_amplitudes(lead_p.coupling, mp, psi, back if p == q else None)
            s[offs[p]:offs[p + 1], offs[q]:offs[q + 1]] = amp
    return ScatteringMatrix(energy=float(energy), s=s, channel_lead=channel_lead,
                            lead_names=tuple(lead.name for lead in model.leads))
