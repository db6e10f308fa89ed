"""Recursive Green's functions: transmission through a sliced device.

With the sites split into layers ``0 .. K`` (:mod:`rgftrans.slicing`), the
left-connected Green's functions obey the forward recursion

    g_0 = (E - H_0 - Sigma_0)^-1
    g_i = (E - H_i - Sigma_i - V_{i,i-1} g_{i-1} V_{i-1,i})^-1
    G_{i,0} = g_i V_{i,i-1} G_{i-1,0}

and at the last layer ``G_{K,0}`` is the full propagator between the two
interfaces.  The transmission is the Caroli / Fisher-Lee formula
``T = Tr[Gamma_K G_{K0} Gamma_0 G_{K0}^dag]`` (Fisher & Lee, Phys. Rev. B 23,
6851 (1981); Caroli et al., J. Phys. C 4, 916 (1971), both from memory).
Only the columns of ``G_{i,0}`` at the first lead's interface are carried.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np

from .device import TightBindingModel
from .errors import EnergyError, LeadError, ThresholdWarning
from .leads import lead_modes
from .materials import CONDUCTANCE_QUANTUM_S
from .slicing import Slicing, slice_layers

__all__ = ["TransmissionResult", "transmission", "layer_blocks", "lead_self_energies"]


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
    """

    energies: np.ndarray
    transmission: np.ndarray
    n_open: np.ndarray
    at_threshold: np.ndarray
    lead_names: tuple

    @property
    def conductance_g0(self) -> np.ndarray:
        """Zero-temperature conductance in units of 2e^2/h (spin-degenerate)."""
        return self.transmission

    @property
    def conductance_siemens(self) -> np.ndarray:
        """Zero-temperature conductance in siemens (spin-degenerate), 2e^2/h from scipy.constants."""
        return self.transmission * CONDUCTANCE_QUANTUM_S


def check_energies(energies) -> np.ndarray:
    """Energies as a 1D float array (meV); one-line errors for NaN, inf, or empty input."""
    arr = np.atleast_1d(np.asarray(energies, dtype=float))
    if arr.ndim != 1 or arr.size == 0:
        raise EnergyError(f"energies must be a non-empty 1D array in meV, got shape {arr.shape}")
    bad = ~np.isfinite(arr)
    if np.any(bad):
        raise EnergyError(
            f"energies contain {np.count_nonzero(bad)} NaN or infinite value(s), first at index "
            f"{np.flatnonzero(bad)[0]}; give finite energies in meV"
        )
    return arr


@dataclass(frozen=True, eq=False)
class LayerBlocks:
    """Dense blocks of a sliced Hamiltonian.

    ``h_layers[i]`` is ``<layer i|H|layer i>``; ``v_next[i]`` is
    ``<layer i|H|layer i+1>``; ``lead_slots[p]`` are the positions of lead
    ``p``'s interface sites inside its layer.
    """

    slicing: Slicing
    h_layers: tuple
    v_next: tuple
    lead_slots: tuple


def layer_blocks(model: TightBindingModel, slicing: Slicing | None = None) -> LayerBlocks:
    """Cut the model's Hamiltonian into dense layer blocks (slicing it first if needed)."""
    if slicing is None:
        slicing = slice_layers(model.hamiltonian, [lead.interface for lead in model.leads])
    ham = model.hamiltonian.tocsr()
    layer_of = slicing.layer_of_sites(model.n_sites)
    coo = ham.tocoo()
    jump = np.abs(layer_of[coo.row] - layer_of[coo.col])
    if np.any(jump > 1):
        raise ValueError("slicing is not block-tridiagonal: a bond skips a layer")
    h_layers, v_next = [], []
    for k, layer in enumerate(slicing.layers):
        h_layers.append(ham[layer][:, layer].toarray())
        if k + 1 < slicing.n_layers:
            v_next.append(ham[layer][:, slicing.layers[k + 1]].toarray())
    slots = []
    for p, lead in enumerate(model.leads):
        layer = slicing.layers[slicing.lead_layer[p]]
        pos = np.searchsorted(layer, lead.interface, sorter=np.argsort(layer))
        pos = np.argsort(layer)[pos]
        if not np.array_equal(layer[pos], lead.interface):
            raise ValueError(f"lead {lead.name!r}: interface not inside its layer")
        slots.append(pos)
    return LayerBlocks(slicing=slicing, h_layers=tuple(h_layers), v_next=tuple(v_next), lead_slots=tuple(slots))


def lead_self_energies(model: TightBindingModel, energy: float, *, warn: bool = True):
    """Self-energies ``Sigma_p = V g_surface V^dag`` on each lead's interface sites.

    Returns
    -------
    sigmas : list of (k_p, k_p) complex ndarray, meV
    modes : list of LeadModes
    """
    sigmas, modes = [], []
    for lead in model.leads:
        m = lead_modes(lead.h_cell, lead.h_hop, energy, warn=warn)
        v = lead.coupling
        sigmas.append(v @ m.g_surface @ v.conj().T)
        modes.append(m)
    return sigmas, modes


def device_energy(energy: float, modes, eta: float = 0.0) -> complex:
    """Complex energy for the device: ``E + i eta``, or the shifted energy of a lead on a threshold."""
    shifted = [m.energy for m in modes if m.at_threshold]
    return (complex(shifted[0]) if shifted else complex(energy)) + 1j * eta


def _gamma(sigma: np.ndarray) -> np.ndarray:
    return 1j * (sigma - sigma.conj().T)


def transmission(model: TightBindingModel, energies, *, eta: float = 0.0,
                 slicing: Slicing | None = None) -> TransmissionResult:
    """Two-terminal transmission T(E) by recursive Green's functions.

    Parameters
    ----------
    model : TightBindingModel
        Must have exactly two leads.
    energies : (n_E,) float array_like, meV
    eta : float, meV
        Optional imaginary part added to the device energies (broadening);
        the leads are always evaluated exactly.  Default 0.
    slicing : Slicing, optional
        Layers to use; computed from the leads if not given.

    Returns
    -------
    TransmissionResult
        Energies on a channel threshold are moved into the upper half plane by
        a tiny amount and flagged; one :class:`ThresholdWarning` names them.
    """
    energies = check_energies(energies)
    if len(model.leads) != 2:
        raise LeadError(f"transmission() needs exactly two leads, the model has {len(model.leads)}")
    blocks = layer_blocks(model, slicing)
    n_e = len(energies)
    trans = np.empty(n_e)
    n_open = np.zeros((n_e, 2), dtype=np.int64)
    flagged = np.zeros(n_e, dtype=bool)
    for k, energy in enumerate(energies):
        sigmas, modes = lead_self_energies(model, energy, warn=False)
        flagged[k] = any(m.at_threshold for m in modes)
        n_open[k] = [m.n_open for m in modes]
        trans[k] = _transmission_one(device_energy(energy, modes, eta), blocks, sigmas)
    if np.any(flagged):
        warnings.warn(
            f"{np.count_nonzero(flagged)} energy point(s) sit on a lead channel threshold (e.g. E = "
            f"{energies[flagged][0]:.10g} meV); they were computed slightly above the real axis -- shift the "
            "energy grid to avoid band edges",
            ThresholdWarning,
            stacklevel=2,
        )
    return TransmissionResult(
        energies=energies,
        transmission=trans,
        n_open=n_open,
        at_threshold=flagged,
        lead_names=tuple(lead.name for lead in model.leads),
    )


def _transmission_one(z: complex, blocks: LayerBlocks, sigmas) -> float:
    """T at one (complex) energy: forward sweep carrying the first interface's columns."""
    h_layers, v_next = blocks.h_layers, blocks.v_next
    slots0, slots1 = blocks.lead_slots
    n_layers = len(h_layers)
    sig0, sig1 = sigmas
    a = z * np.eye(len(h_layers[0])) - h_layers[0]
    a[np.ix_(slots0, slots0)] -= sig0
    if n_layers == 1:
        a[np.ix_(slots1, slots1)] -= sig1
        g = np.linalg.inv(a)
        g10 = g[np.ix_(slots1, slots0)]
    else:
        g = np.linalg.inv(a)
        prop = g[:, slots0]
        for i in range(1, n_layers):
            v = v_next[i - 1]
            a = z * np.eye(len(h_layers[i])) - h_layers[i] - v.conj().T @ g @ v
            if i == n_layers - 1:
                a[np.ix_(slots1, slots1)] -= sig1
            g = np.linalg.inv(a)
            prop = g @ (v.conj().T @ prop)
        g10 = prop[slots1]
    t_mat = _gamma(sig1) @ g10 @ _gamma(sig0) @ g10.conj().T
    return float(np.trace(t_mat).real)
