"""Partial widths of resonances (rgftrans.spectra.widths): Gamma_p = <psi|Gamma_p(Re z)|psi>, rates Gamma_p / hbar.

References and tolerances
-------------------------
* Sum rule: sum_p Gamma_p + absorption = -2 Im z exactly for every eigenpair of H_eff (derivation in the module
  docstring; common practice, no source): checked to 1e-12 t absolute (round-off of one eigen-solve, about
  eps ||H_eff|| = 2e-15 t; measured 2e-15 t).
* One level eps0 coupled by v_p to semi-infinite chains (hopping -t, onsite e_p):
  Gamma_p(E) = (2 v_p^2 / t) sin(ka), E - e_p = -2t cos(ka) (our derivation from the chain's surface Green's
  function g = -e^{ika}/t, E. N. Economou, Green's Functions in Quantum Physics, 2006, from memory), at the pole's
  own Re z.  Exact for a one-site device (psi = 1): 1e-12.
* Mirror symmetry x -> L - x: the pole's state has definite parity, so Gamma_L = Gamma_R (common practice, no
  source); 1e-8 relative (eigenvector round-off over the level spacing: measured 3e-13).
* Breit-Wigner: an isolated resonance with one channel in each of two leads has peak transmission
  4 Gamma_L Gamma_R / (Gamma_L + Gamma_R)^2 (G. Breit & E. Wigner, Phys. Rev. 49, 519 (1936), from memory).
  Corrections are first order in Gamma over the level spacing and the energy dependence of Sigma; measured 2e-4
  relative on these double-barrier chains, tested to 2e-3.
* The biorthogonal alternative -2 Im(psi^T Sigma_p psi / psi^T psi) (complex-symmetric H_eff) agrees with ours to
  first order in Gamma / level spacing for a level attached directly to its leads: tested to (Gamma / spacing)
  relative (measured 0.03 of that).
"""

from __future__ import annotations

import numpy as np
import pytest
import scipy.sparse as sp

from rgftrans.constants import HBAR_MEV_S
from rgftrans.errors import RgftransError
from rgftrans.leads.embedding import lead_self_energies
from rgftrans.spectra.closed import closed_levels
from rgftrans.spectra.poles import effective_hamiltonian, resonances
from rgftrans.spectra.widths import partial_widths, tunnel_rate_per_s, tunnel_rates_per_s
from rgftrans.system.device import Device, Lead, LeadModel, TightBindingModel
from rgftrans.system.geometry import rectangle
from rgftrans.system.lattices import square
from rgftrans.transport.rgf import transmission

T = 1.0  # hopping (meV)
#: 1D effective-mass convention of the package: onsite 2t, band [0, 4t] (tests/reference/_systems.py).
ONSITE_1D = 2.0 * T


def chain_lead(name: str, v: float, x: float, site: int, onsite: float = ONSITE_1D) -> LeadModel:
    """A semi-infinite chain (hopping -t, onsite e) coupled by -v to device site ``site``."""
    return LeadModel(name, np.full((1, 1), onsite), -T * np.ones((1, 1)), np.array([site]), -v * np.ones((1, 1)),
                     np.array([[x, 0.0]]), np.array([np.sign(x), 0.0]))


def one_level(eps0: float, v_l: float, v_r: float, *, loss: float = 0.0) -> TightBindingModel:
    return TightBindingModel(sp.csr_matrix([[eps0 - 1j * loss]]), np.zeros((1, 2)),
                             (chain_lead("L", v_l, -1.0, 0), chain_lead("R", v_r, 1.0, 0)))


def weak_dot(n: int, v_l: float, v_r: float) -> TightBindingModel:
    """An n-site chain (onsite 2t) whose end sites couple weakly (v_l, v_r) to the two chain leads."""
    ham = sp.diags([-T * np.ones(n - 1), ONSITE_1D * np.ones(n), -T * np.ones(n - 1)], [-1, 0, 1]).tocsr()
    positions = np.column_stack([np.arange(n, dtype=float), np.zeros(n)])
    return TightBindingModel(ham, positions, (chain_lead("L", v_l, -1.0, 0), chain_lead("R", v_r, float(n), n - 1)))


def double_barrier(u_left: float, u_right: float, *, length: int = 30, width: int = 1) -> TightBindingModel:
    """A strip (a = 1 nm, t = 1 meV, onsite 4t) with one-site-thick barriers at x = 3 and x = length - 3."""
    def potential(x, y):
        return np.where(np.abs(x - 3) < 0.5, u_left, 0.0) + np.where(np.abs(x - (length - 3)) < 0.5, u_right, 0.0)

    top = width - 1
    return Device(rectangle(0, -0.4, length, top + 0.4), [Lead("L", "left", (0, top)), Lead("R", "right", (0, top))],
                  lattice=square(1.0), hopping=T, potential=potential).discretise()


def chain_width(v: float, energy: float, onsite: float = ONSITE_1D) -> float:
    """Gamma_p(E) = (2 v^2 / t) sin(ka) with E - e = -2t cos(ka) (module docstring)."""
    cos_ka = (onsite - energy) / (2 * T)
    return 2 * v**2 / T * np.sqrt(1 - cos_ka**2)


@pytest.mark.parametrize("eps0, v_l, v_r", [(1.3, 0.3, 0.2), (0.4, 0.5, 0.1), (3.2, 0.25, 0.25)])
def test_one_level_between_two_chains_has_the_closed_form_widths(eps0, v_l, v_r):
    model = one_level(eps0, v_l, v_r)
    pole = resonances(model, eps0, count=1)[0]
    split = partial_widths(model, pole)
    e = split.energy_meV
    assert split.widths_meV == pytest.approx([chain_width(v_l, e), chain_width(v_r, e)], rel=1e-12)
    assert split.widths_meV[0] / split.widths_meV[1] == pytest.approx((v_l / v_r) ** 2, rel=1e-12)
    # and the pole sits where the level, shifted by Re Sigma = (v^2 / 2t^2)(E - e) per chain, meets E
    shift = (v_l**2 + v_r**2) / (2 * T**2) * (e - ONSITE_1D)
    assert e == pytest.approx(eps0 + shift, abs=1e-12)
    assert split.lead_names == ("L", "R") and split.width_by_lead["R"] == split.widths_meV[1]


@pytest.mark.parametrize("u_left, u_right, width", [(3.0, 3.0, 1), (5.0, 5.0, 1), (3.0, 3.0, 3)])
def test_a_mirror_symmetric_device_splits_its_widths_equally(u_left, u_right, width):
    model = double_barrier(u_left, u_right, width=width)
    energy = 2.3 if width == 1 else 1.0  # first subband, one channel per lead
    for pole in resonances(model, energy, count=2):
        split = partial_widths(model, pole)
        assert pole.n_open == (1, 1)
        assert split.widths_meV[0] == pytest.approx(split.widths_meV[1], rel=1e-8)
        assert abs(split.sum_rule_residual_meV) <= 1e-12 * T
        assert split.pole_width_meV == pytest.approx(pole.width_meV, rel=1e-10)


@pytest.mark.parametrize("u_left, u_right, width", [(3.0, 4.0, 1), (2.5, 3.5, 3)])
def test_peak_transmission_is_the_breit_wigner_value_of_the_partial_widths(u_left, u_right, width):
    model = double_barrier(u_left, u_right, width=width)
    pole = resonances(model, 2.3 if width == 1 else 1.0, count=1)[0]
    split = partial_widths(model, pole)
    g_l, g_r = split.widths_meV
    assert g_l > 1.5 * g_r  # the lower barrier lets the state out faster
    energies = pole.energy_meV + np.linspace(-2, 2, 4001) * pole.width_meV
    peak = transmission(model, energies).transmission.max()
    assert peak == pytest.approx(4 * g_l * g_r / (g_l + g_r) ** 2, rel=2e-3)
    assert abs(split.sum_rule_residual_meV) <= 1e-12 * T


@pytest.mark.parametrize("v", [0.1, 0.03])
def test_the_biorthogonal_definition_agrees_to_first_order_for_an_isolated_level(v):
    model = weak_dot(12, v, 1.5 * v)
    pole = resonances(model, 1.8, count=1)[0]
    split = partial_widths(model, pole)
    heff = effective_hamiltonian(model, split.energy_meV).toarray()
    w, vecs = np.linalg.eig(heff)
    psi = vecs[:, np.argmin(np.abs(w - (split.energy_meV - 0.5j * split.pole_width_meV)))]
    sigmas, _ = lead_self_energies(model, split.energy_meV, warn=False)
    bi = np.array([-2 * np.imag(psi[lead.interface] @ s @ psi[lead.interface] / (psi @ psi))
                   for lead, s in zip(model.leads, sigmas)])
    levels = np.sort(closed_levels(model, count=3, target=pole.energy_meV).energies_meV)
    ratio = pole.width_meV / np.diff(levels).min()
    assert ratio < 0.05  # an isolated level
    assert np.abs(bi - split.widths_meV).max() <= ratio * split.widths_meV.min()


def test_absorption_takes_its_share_of_the_width():
    """An absorbing onsite -i eta/2 adds eta to the width of a one-site level (its state is the site itself)."""
    model = one_level(1.3, 0.3, 0.2, loss=0.01)
    split = partial_widths(model, resonances(model, 1.3, count=1)[0])
    assert split.absorption_width_meV == pytest.approx(0.02, rel=1e-12)
    assert abs(split.sum_rule_residual_meV) <= 1e-12 * T
    assert split.widths_meV == pytest.approx([chain_width(0.3, split.energy_meV), chain_width(0.2, split.energy_meV)],
                                             rel=1e-12)


def test_tunnel_rates_are_widths_over_hbar():
    """hbar = 6.582119569e-13 meV s (CODATA 2018, exact): a width of hbar / (1 ns) is 1e9 per second."""
    assert HBAR_MEV_S == pytest.approx(6.582119569e-13, rel=1e-10)
    assert tunnel_rate_per_s(HBAR_MEV_S * 1e9) == pytest.approx(1e9, rel=1e-14)
    assert tunnel_rate_per_s(np.array([1e-3, 2e-3])) == pytest.approx([1.519267e9, 3.038534e9], rel=1e-6)
    model = one_level(1.3, 0.3, 0.2)
    split = partial_widths(model, resonances(model, 1.3, count=1)[0])
    rates = tunnel_rates_per_s(split)
    assert list(rates) == ["L", "R"] and rates["L"] == pytest.approx(split.widths_meV[0] / HBAR_MEV_S, rel=1e-14)
    assert split.rates_per_s == pytest.approx(split.widths_meV / HBAR_MEV_S, rel=1e-14)


def test_a_model_without_leads_has_no_partial_widths():
    model = one_level(1.3, 0.3, 0.2)
    closed = TightBindingModel(model.hamiltonian, model.positions, ())
    split = partial_widths(closed, resonances(closed, 1.3, count=1)[0])
    assert split.lead_names == () and split.widths_meV.shape == (0,) and split.pole_width_meV == 0.0


def test_a_resonance_of_another_model_is_refused():
    pole = resonances(double_barrier(3.0, 3.0), 2.3, count=1)[0]
    with pytest.raises(RgftransError, match=r"the resonance's state has 31 entries but the model has 1 orbitals: it "
                                            r"was found on another model") as info:
        partial_widths(one_level(1.3, 0.3, 0.2), pole)
    assert "\n" not in str(info.value)
    with pytest.raises(RgftransError, match="partial_widths needs a Resonance"):
        partial_widths(one_level(1.3, 0.3, 0.2), 1.3)
