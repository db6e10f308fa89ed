"""Partial widths of a resonance: how fast its quasi-bound state leaks into each lead.

A resonance is an eigenpair of ``H_eff(E) = H + sum_p Sigma_p(E)`` with the
self-energies at the pole's own real energy ``E = Re z``
(:mod:`rgftrans.spectra.poles`).  Its partial width into lead p is the
expectation value of that lead's broadening ``Gamma_p = i (Sigma_p - Sigma_p^dag)``
in the (right) eigenvector ``psi`` of unit norm::

    Gamma_p = <psi| Gamma_p(E) |psi>,        rate_p = Gamma_p / hbar  (1/s).

Why this definition.  ``Gamma_p / hbar`` is the rate at which probability
inside the device flows out into lead p (S. Datta, Electronic Transport in
Mesoscopic Systems, CUP 1995, ch. 3, from memory): for the decaying state
``psi e^{-i z t / hbar}``, ``hbar d<psi|psi>/dt = 2 Im z <psi|psi>``, and
since ``H_eff - H_eff^dag = (H - H^dag) - i sum_p Gamma_p``,

    -2 Im z = sum_p <psi|Gamma_p|psi> + <psi| -2 Im H |psi>

*exactly*, for every eigenpair (the last term is the absorption width of
absorbing onsite energies, zero for a Hermitian H).  The partial widths are
therefore each >= 0 (``Gamma_p`` is positive semidefinite) and add up to the
pole width to round-off.

The alternative, ``-2 Im <psi~|Sigma_p|psi>`` with the biorthonormal left
eigenvector (``psi~ = conj(psi) / (psi^T psi)`` for the complex-symmetric
``H_eff`` of a time-reversal symmetric device), sums to ``-2 Im z`` only up
to the remainder ``2 Im <psi~|H|psi>``, second order in Gamma over the level
spacing for a level attached directly to its leads; there the two agree to
first order (checked in ``tests/test_partial_widths.py``).  Where the state
propagates as an outgoing wave between its barrier and the lead interface,
``psi^T Sigma_p psi`` picks up the wave's phase ``e^{2ikx}`` at the
interface and the biorthogonal value is meaningless (a factor 2.4 off the
Breit-Wigner-confirmed widths on a double-barrier chain with three free sites
outside each barrier, our observation), while ``<psi|Gamma_p|psi>`` only sees
``|psi|^2``.

Checks: a single level ``eps0`` coupled by ``v_p`` to semi-infinite chains
(hopping -t, onsite ``e_p``) has ``Gamma_p(E) = (2 v_p^2 / t) sin(ka)`` with
``E - e_p = -2t cos(ka)`` (our derivation from the chain's surface Green's
function ``g = -e^{ika} / t``, Economou 2006, from memory); the package's
effective-mass convention puts ``e_p = 2t`` in 1D (band [0, 4t]) and 4t on the
square lattice.  An isolated resonance with one channel in each of two leads
has peak transmission ``4 Gamma_L Gamma_R / (Gamma_L + Gamma_R)^2``
(Breit & Wigner 1936, from memory).  Energies in meV.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from rgftrans.constants import HBAR_MEV_S
from rgftrans.errors import RgftransError
from rgftrans.leads.embedding import broadening, lead_self_energies
from rgftrans.spectra.eigen import eigenvalues_near
from rgftrans.spectra.poles import Resonance, effective_hamiltonian
from rgftrans.system.device import TightBindingModel

__all__ = ["PartialWidths", "partial_widths", "tunnel_rates_per_s", "tunnel_rate_per_s"]

#: Eigenpairs of H_eff near the resonance among which the one continuing its state is chosen.
_CANDIDATES = 4


def tunnel_rate_per_s(width_meV):
    """Rate ``Gamma / hbar`` in 1/s of a width in meV (float, or array of any shape): 1 ueV is 1.52e9 /s."""
    if np.ndim(width_meV):
        return np.asarray(width_meV, dtype=float) / HBAR_MEV_S
    return float(width_meV) / HBAR_MEV_S


@dataclass(frozen=True, eq=False)
class PartialWidths:
    """How a resonance's width splits between the leads (and absorption).

    Attributes
    ----------
    energy_meV : float, meV
        ``Re z``, where the self-energies are evaluated.
    pole_width_meV : float, meV
        ``-2 Im z`` of the eigenpair of ``H_eff(Re z)`` used.
    lead_names : tuple of str
    widths_meV : (n_leads,) float ndarray, meV
        ``Gamma_p = <psi|Gamma_p|psi>`` (unit ``psi``), each >= 0.
    absorption_width_meV : float, meV
        ``<psi| -2 Im H |psi>``: the part lost to absorbing onsite energies (0 for a Hermitian H).
    rates_per_s : (n_leads,) float ndarray, 1/s
        Tunnel rates ``Gamma_p / hbar``.
    """

    energy_meV: float
    pole_width_meV: float
    lead_names: tuple
    widths_meV: np.ndarray
    absorption_width_meV: float
    rates_per_s: np.ndarray

    @property
    def width_by_lead(self) -> dict:
        """Lead name -> partial width (meV)."""
        return {name: float(w) for name, w in zip(self.lead_names, self.widths_meV)}

    @property
    def rate_by_lead(self) -> dict:
        """Lead name -> tunnel rate (1/s)."""
        return {name: float(r) for name, r in zip(self.lead_names, self.rates_per_s)}

    @property
    def sum_rule_residual_meV(self) -> float:
        """``pole width - (sum of partial widths + absorption width)``: zero to round-off (module docstring)."""
        return float(self.pole_width_meV - self.widths_meV.sum() - self.absorption_width_meV)


def partial_widths(model: TightBindingModel, resonance: Resonance) -> PartialWidths:
    """Partial widths ``Gamma_p = <psi|Gamma_p(Re z)|psi>`` of a resonance into each lead, and tunnel rates.

    The eigenpair is recomputed from ``H_eff(Re z)`` (the candidate continuing ``resonance.state``), so that the
    partial widths and the absorption width add up to its ``-2 Im z`` to round-off.

    Parameters
    ----------
    model : TightBindingModel
        The model the resonance was found on.
    resonance : Resonance
        From :func:`rgftrans.spectra.poles.resonances` or :func:`~rgftrans.spectra.poles.follow_pole`.

    Returns
    -------
    PartialWidths
        For a model without leads: no lead widths, only absorption.

    Raises
    ------
    RgftransError
        A resonance that does not belong to the model (its state has another length).

    Examples
    --------
    A level at 0.5 meV coupled by 0.3 and 0.2 meV to two chains (hopping -1 meV, onsite 0): Gamma_p is
    2 v_p^2 sin(ka) / t, so Gamma_L / Gamma_R = (0.3 / 0.2)^2.

    >>> import numpy as np, scipy.sparse as sp
    >>> from rgftrans.system.device import LeadModel
    >>> def chain(name, v, x):
    ...     return LeadModel(name, np.zeros((1, 1)), -np.ones((1, 1)), np.array([0]), -v * np.ones((1, 1)),
    ...                      np.array([[x, 0.0]]), np.array([x, 0.0]))
    >>> leads = (chain("L", 0.3, -1), chain("R", 0.2, 1))
    >>> model = TightBindingModel(sp.csr_matrix([[0.5]]), np.zeros((1, 2)), leads)
    >>> from rgftrans.spectra.poles import resonances
    >>> split = partial_widths(model, resonances(model, 0.5, count=1)[0])
    >>> round(float(split.widths_meV[0] / split.widths_meV[1]), 12)
    2.25
    """
    if not isinstance(model, TightBindingModel):
        raise RgftransError(f"partial_widths needs a TightBindingModel, got {type(model).__name__}")
    if not isinstance(resonance, Resonance):
        raise RgftransError(f"partial_widths needs a Resonance (spectra.resonances), got {type(resonance).__name__}")
    state = np.asarray(resonance.state)
    n = model.n_orbitals
    if state.shape != (n,):
        raise RgftransError(f"the resonance's state has {state.size} entries but the model has {n} orbitals: it was "
                            "found on another model; pass the model the resonance came from")
    energy = float(resonance.energy_meV)
    z0 = complex(energy, -0.5 * resonance.width_meV)
    w, v = eigenvalues_near(effective_hamiltonian(model, energy), z0, min(_CANDIDATES, n))
    overlaps = np.abs(state.conj() @ v) / np.linalg.norm(v, axis=0)
    pick = int(np.argmax(overlaps))
    z, psi = complex(w[pick]), v[:, pick] / np.linalg.norm(v[:, pick])
    widths = []
    if model.leads:
        sigmas, _ = lead_self_energies(model, energy, warn=False)
        for lead, sigma in zip(model.leads, sigmas):
            sub = psi[lead.interface]
            widths.append(float(np.real(np.vdot(sub, broadening(sigma) @ sub))))
    absorption = float(np.sum(np.abs(psi) ** 2 * (-2.0 * model.hamiltonian.diagonal().imag)))
    widths = np.array(widths, dtype=float)
    return PartialWidths(energy_meV=energy, pole_width_meV=-2.0 * z.imag,
                         lead_names=tuple(lead.name for lead in model.leads), widths_meV=widths,
                         absorption_width_meV=absorption, rates_per_s=widths / HBAR_MEV_S)


def tunnel_rates_per_s(widths: PartialWidths) -> dict:
    """Lead name -> tunnel rate ``Gamma_p / hbar`` (1/s) of a :class:`PartialWidths`."""
    return widths.rate_by_lead
