"""Closed levels, lead bands and partial widths (rgftrans.spectra.closed, rgftrans.leads.bands, spectra.poles).

Sources:
* A rectangular hard-wall box of Nx x Ny sites on the square lattice (hopping t, onsite 4t) has the levels
  E = 4t - 2t cos(pi m / (Nx + 1)) - 2t cos(pi n / (Ny + 1)) (common practice; exact on the lattice).
* A W-site hard-wall strip has the subbands E_n(k) = 4t - 2t cos(ka) - 2t cos(n pi / (W + 1)); each opens a
  channel at its minimum (k = 0) and closes it at its maximum (k = pi/a); group velocity 2ta sin(ka)/hbar
  (common practice; exact).
* One site of energy e0 coupled by v_p to semi-infinite chains (onsite 0, hopping -1, band [-2, 2]):
  Sigma_p(E) = v_p^2 g(E), Im g = -sqrt(4 - E^2)/2, so Gamma_p(E) = v_p^2 sqrt(4 - E^2) (S. Datta,
  Electronic Transport in Mesoscopic Systems, 1995, ch. 3, from memory).
* scipy.linalg.eigh on the dense Hamiltonian (reference library).
"""

from __future__ import annotations

import numpy as np
import pytest
import scipy.linalg as sla
import scipy.sparse as sp
from scipy import constants

from rgftrans.errors import LeadError, RgftransError
from rgftrans.leads.bands import lead_bands
from rgftrans.leads.modes import lead_modes
from rgftrans.spectra.closed import closed_levels
from rgftrans.spectra.poles import partial_widths, resonances, tunnel_rates_per_s
from rgftrans.system.device import Device, Lead, LeadModel, TightBindingModel
from rgftrans.system.geometry import rectangle
from rgftrans.system.lattices import square


def _box(nx=9, ny=6, leads=True):
    region = rectangle(0.0, 0.0, nx - 1.0, ny - 1.0)
    lds = [Lead("left", "left", (0.0, ny - 1.0)), Lead("right", "right", (0.0, ny - 1.0))]
    model = Device(region, lds, lattice=square(1.0), hopping=1.0).discretise()
    return model if leads else TightBindingModel(model.hamiltonian, model.positions, ())


def test_closed_box_levels_are_the_lattice_closed_form():
    nx, ny = 9, 6
    levels = closed_levels(_box(nx, ny), count=12)
    m, n = np.meshgrid(np.arange(1, nx + 1), np.arange(1, ny + 1))
    exact = np.sort((4 - 2 * np.cos(np.pi * m / (nx + 1)) - 2 * np.cos(np.pi * n / (ny + 1))).ravel())[:12]
    assert np.allclose(levels.energies_meV, exact, atol=1e-12)
    # near a target: the same as the dense decomposition's nearest ones
    dense = sla.eigvalsh(_box(nx, ny).hamiltonian.toarray())
    near = closed_levels(_box(nx, ny), count=4, target=3.1)
    assert np.allclose(near.energies_meV, np.sort(dense[np.argsort(np.abs(dense - 3.1))[:4]]), atol=1e-12)
    assert near.density(0).sum() == pytest.approx(1.0, abs=1e-12)


def test_closed_levels_of_a_region_and_of_a_model_without_leads():
    model = _box(9, 6, leads=False)
    sub = closed_levels(model, count=3, region=rectangle(-0.5, -0.5, 3.5, 5.5))  # a 4 x 6 box inside
    m, n = np.meshgrid(np.arange(1, 5), np.arange(1, 7))
    exact = np.sort((4 - 2 * np.cos(np.pi * m / 5) - 2 * np.cos(np.pi * n / 7)).ravel())[:3]
    assert np.allclose(sub.energies_meV, exact, atol=1e-12) and sub.sites.size == 24
    poles = resonances(model, 1.0, count=2)  # no leads: the closed levels, zero width, no bare error
    assert all(p.width_meV == 0.0 and p.n_open == () for p in poles)
    with pytest.raises(RgftransError, match="no site"):
        closed_levels(model, region=rectangle(100, 100, 101, 101))


def test_strip_lead_bands_are_the_subband_closed_form():
    w = 6
    model = _box(9, w)
    bands = lead_bands(model, "right")
    n = np.arange(1, w + 1)
    bottoms = np.sort(2 - 2 * np.cos(n * np.pi / (w + 1)))
    tops = np.sort(6 - 2 * np.cos(n * np.pi / (w + 1)))
    assert np.allclose(bands.minima_meV, bottoms, atol=1e-12)
    assert np.allclose(bands.maxima_meV, tops, atol=1e-12)
    ka = bands.k_per_nm * bands.period_nm
    exact = np.sort(4 - 2 * np.cos(ka)[:, None] - 2 * np.cos(n * np.pi / (w + 1))[None, :], axis=1)
    assert np.allclose(bands.energies_meV, exact, atol=1e-12)
    # velocity of the lowest band: 2 t a sin(ka) / hbar (t = 1 meV, a = 1 nm)
    v_exact = 2 * 1e-3 * constants.e * 1e-9 * np.sin(ka) / constants.hbar
    assert np.allclose(bands.velocity_m_per_s[:, 0], v_exact, rtol=1e-9, atol=1e-6)
    for energy in (0.7, 1.9, 3.3, 5.2):
        modes = lead_modes(model.leads[1].h_cell, model.leads[1].h_hop, energy)
        assert bands.channel_count(energy) == modes.n_open
        # the mode solver's velocities (meV per cell, hbar = 1) are the band velocities at the crossings
        v_bands = []
        for col in range(w):
            e_n, v_n = bands.energies_meV[:, col], bands.velocity_m_per_s[:, col]
            ka_n = np.arccos(np.clip((4 - energy - 2 * np.cos((col + 1) * np.pi / (w + 1))) / 2, -1, 1))
            if abs((4 - energy - 2 * np.cos((col + 1) * np.pi / (w + 1))) / 2) < 1:
                v_bands.append(2 * np.sin(ka_n))
        assert np.allclose(np.sort(modes.velocity_out[modes.propagating_out]), np.sort(v_bands), atol=1e-8)
    with pytest.raises(LeadError, match="no lead 'top'"):
        lead_bands(model, "top")


def _chain_lead(name):
    return LeadModel(name, np.zeros((1, 1)), -np.ones((1, 1)), np.array([0]), -np.ones((1, 1)), np.zeros((1, 2)),
                     np.array([1.0, 0.0]))


def test_partial_widths_of_one_site_are_the_golden_rule():
    e0, v_left, v_right = 0.3, 0.4, 0.25
    ham = sp.csr_matrix(np.array([[e0]], dtype=complex))
    leads = (LeadModel("left", np.zeros((1, 1)), -np.ones((1, 1)), np.array([0]), -v_left * np.ones((1, 1)),
                       np.zeros((1, 2)), np.array([-1.0, 0.0])),
             LeadModel("right", np.zeros((1, 1)), -np.ones((1, 1)), np.array([0]), -v_right * np.ones((1, 1)),
                       np.zeros((1, 2)), np.array([1.0, 0.0])))
    model = TightBindingModel(ham, np.zeros((1, 2)), leads)
    (pole,) = resonances(model, e0, count=1)
    parts = partial_widths(model, pole)
    e = pole.energy_meV
    assert parts["left"] == pytest.approx(v_left**2 * np.sqrt(4 - e**2), rel=1e-10)
    assert parts["right"] == pytest.approx(v_right**2 * np.sqrt(4 - e**2), rel=1e-10)
    assert parts["left"] + parts["right"] == pytest.approx(pole.width_meV, rel=1e-10)  # exact for one site
    rates = tunnel_rates_per_s(model, pole)
    assert rates["left"] == pytest.approx(parts["left"] * 1e-3 * constants.e / constants.hbar, rel=1e-12)


def test_partial_widths_of_a_symmetric_dot_are_equal_and_add_up():
    """A 13 x 7 dot closed by two barrier columns (3t high): narrow, well separated levels."""
    nx, ny = 15, 7

    def barriers(x, y):
        return np.where((np.abs(x - 1.0) < 0.5) | (np.abs(x - (nx - 2.0)) < 0.5), 3.0, 0.0)

    region = rectangle(0.0, 0.0, nx - 1.0, ny - 1.0)
    leads = [Lead("left", "left", (0.0, ny - 1.0)), Lead("right", "right", (0.0, ny - 1.0))]
    model = Device(region, leads, lattice=square(1.0), hopping=1.0, potential=barriers).discretise()
    for pole in resonances(model, 0.8, count=3):
        parts = partial_widths(model, pole)
        assert pole.width_meV < 0.05  # narrow against the spacing (about 0.2 t here)
        assert parts["left"] == pytest.approx(parts["right"], rel=1e-8)  # mirror symmetry
        # psi is a normalised right eigenvector of H + Sigma(Re z): Im z = -1/2 sum_p psi^dag Gamma_p psi exactly
        # (spectra.poles.partial_widths); 1e-9 for the self-consistency tolerance of the pole.
        assert sum(parts.values()) == pytest.approx(pole.width_meV, rel=1e-9)
