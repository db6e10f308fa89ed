"""Lead band structures (rgftrans.leads.bands): E_n(k), thresholds, velocities and open channels.

References and tolerances
-------------------------
* A hard-wall strip of W sites on the square lattice (onsite 4t, hopping -t, period a) has the subbands
  E_n(k) = 4t - 2t cos(ka) - 2t cos(n pi / (W + 1)), n = 1..W (common practice, exact for the lattice), so the
  thresholds are 2t - 2t cos(n pi/(W+1)) (k = 0) and 6t - 2t cos(n pi/(W+1)) (zone boundary) and the velocities
  v = 2 t a sin(ka) / hbar.  Tolerance 1e-12 t for energies (eigvalsh round-off of a W x W matrix, ~1e-15 t) and
  1e-10 relative for velocities in m/s (the same round-off; CODATA hbar exact).
* The lead-mode solver (rgftrans.leads.modes.lead_modes, an independent route: the quadratic eigenproblem of the
  transfer relation) at energies across the band: number of open channels equal, and the k and velocity of every
  open channel to 1e-8 t (the generalised eigenproblem's Bloch factors are accurate to ~1e-12 away from band
  edges; 1e-8 leaves room, and is the brief's agreement).  Separable strip, a strip in a strong field (interior
  extrema, generalised path), a Rashba strip with spin, honeycomb ribbons (singular h_hop).
* Armchair graphene ribbons with N dimer lines are metallic iff N = 3M - 1 (L. Brey & H. A. Fertig, PRB 73,
  235411 (2006), from memory): one channel at E = 0.01 t, no threshold at the Dirac point (the bands cross there
  with non-zero velocity); otherwise a gap with thresholds at +-E_gap/2 and no channel at 0.01 t.
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest

from rgftrans.constants import HBAR_MEV_S
from rgftrans.errors import EnergyError, LeadError, RgftransError
from rgftrans.leads.bands import channel_count, lead_bands, open_channels
from rgftrans.leads.modes import lead_modes
from rgftrans.system.device import Device, Lead
from rgftrans.system.geometry import rectangle
from rgftrans.system.lattices import honeycomb, square

T = 1.0  # meV


def strip(width: int, *, a: float = 1.0, **kwargs):
    """A straight W-site strip (lattice constant a nm, t = 1 meV) with leads left and right."""
    top = a * (width - 1)
    pad = 0.4 * a  # a one-row strip is still a rectangle
    leads = [Lead("left", "left", (0, top)), Lead("right", "right", (0, top))]
    return Device(rectangle(0, -pad, 6 * a, top + pad), leads, lattice=square(a), hopping=T, **kwargs).discretise()


def armchair(width_nm: float):
    return Device(rectangle(0, 0, width_nm, 20), [Lead("b", "bottom", (0, width_nm)), Lead("t", "top", (0, width_nm))],
                  lattice=honeycomb(1.0), hopping=T).discretise()


def zigzag(chains: int):
    lo, hi = 0.9, 1.5 * chains + 0.1
    return Device(rectangle(0, lo, 15, hi), [Lead("l", "left", (lo, hi)), Lead("r", "right", (lo, hi))],
                  lattice=honeycomb(1.0), hopping=T).discretise()


def strip_subbands(width: int, ka: np.ndarray) -> np.ndarray:
    n = np.arange(1, width + 1)
    return np.sort(4 * T - 2 * T * np.cos(ka)[:, None] - 2 * T * np.cos(n * np.pi / (width + 1))[None, :], axis=1)


@pytest.mark.parametrize("width", [1, 4, 9])
def test_strip_subbands_and_thresholds_are_the_closed_form(width):
    bands = lead_bands(strip(width, a=5.0), "right", k_points=101)
    ka = bands.k_per_nm * bands.lattice_constant_nm
    assert bands.lattice_constant_nm == pytest.approx(5.0) and ka[0] == pytest.approx(-np.pi)
    assert ka[-1] == pytest.approx(np.pi) and bands.energies_meV.shape == (101, width)
    assert np.abs(bands.energies_meV - strip_subbands(width, ka)).max() <= 1e-12 * T
    c = np.cos(np.arange(1, width + 1) * np.pi / (width + 1))
    expected = np.sort(np.concatenate([2 * T - 2 * T * c, 6 * T - 2 * T * c]))
    assert np.abs(bands.thresholds_meV - expected).max() <= 1e-12 * T
    assert not any(x.crossing for x in bands.extrema)


def test_strip_velocities_in_metres_per_second_and_hopping_units():
    """v = 2 t a sin(ka) / hbar for every subband (module docstring); in units of t a / hbar it is 2 sin(ka)."""
    a = 5.0
    bands = lead_bands(strip(3, a=a), "left", k_points=64)
    ka = bands.k_per_nm * a
    expected = (2 * T * a * np.sin(ka) * 1e-9 / HBAR_MEV_S)[:, None] * np.ones(3)
    assert np.abs(bands.velocities_m_per_s - expected).max() <= 1e-10 * np.abs(expected).max()
    assert np.abs(bands.velocities_in_hopping_units - 2 * np.sin(ka)[:, None]).max() <= 1e-12


def _modes(lead, energy):
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # no energy of these grids may sit on a threshold
        return lead_modes(lead.h_cell, lead.h_hop, energy, warn=True)


CASES = {
    # name: (model builder, lead, energies)
    "strip": (lambda: strip(7), "right", np.linspace(-0.3, 8.3, 47)),
    "strip-in-field": (lambda: strip(12, a=10.0, field=4.0), "left", np.linspace(0.3, 7.7, 61)),
    "rashba-spin": (lambda: strip(6, a=10.0, spin=True, rashba=8.0, field=2.0), "right", np.linspace(0.1, 7.9, 47)),
    "zigzag": (lambda: zigzag(4), "r", np.linspace(-3.05, 3.05, 40)),
    "armchair": (lambda: armchair(7.0), "t", np.linspace(-3.05, 3.05, 40)),
}


@pytest.mark.parametrize("name", list(CASES))
def test_open_channels_agree_with_the_lead_mode_solver(name):
    build, lead_name, energies = CASES[name]
    model = build()
    lead = model.lead(lead_name)
    bands = lead_bands(model, lead_name)
    a = bands.lattice_constant_nm
    for energy in energies:
        modes = _modes(lead, energy)
        found = open_channels(bands, energy)
        assert found.count == modes.n_open == channel_count(bands, energy), energy
        if not found.count:
            continue
        v_modes = modes.velocity_out[modes.propagating_out]  # dE/d(ka), meV
        k_modes = np.angle(modes.bloch_out[modes.propagating_out]) / a
        order_m = np.lexsort((k_modes, np.round(v_modes, 6)))
        order_b = np.lexsort((found.k_per_nm, np.round(found.slopes_meV_nm / a, 6)))
        assert np.abs(found.slopes_meV_nm[order_b] / a - v_modes[order_m]).max() <= 1e-8 * T, energy
        dk = np.angle(np.exp(1j * (found.k_per_nm[order_b] - k_modes[order_m]) * a))
        assert np.abs(dk).max() <= 1e-8, energy
        assert np.all(found.velocities_m_per_s > 0)


@pytest.mark.parametrize("name", ["strip-in-field", "rashba-spin"])
def test_interior_thresholds_are_where_the_mode_solver_opens_and_closes_channels(name):
    """Fields and spin-orbit coupling put band extrema between k = 0 and the zone boundary (refined by Brent's
    method).  Just below and just above every threshold (1e-7 t away) the mode solver's channel count must equal
    channel_count: an extremum misplaced by more than 1e-7 t would show as a mismatch."""
    build, lead_name, _ = CASES[name]
    model = build()
    lead = model.lead(lead_name)
    bands = lead_bands(model, lead_name)
    interior = [x for x in bands.extrema if not x.crossing
                and 1e-3 < abs(x.k_per_nm * bands.lattice_constant_nm) < np.pi - 1e-3]
    assert interior  # the case does exercise the refinement
    gaps = np.diff(bands.thresholds_meV)
    for e in bands.thresholds_meV:
        for d in (-1e-7 * T, 1e-7 * T):
            if np.min(np.abs(bands.thresholds_meV - (e + d))) < 0.5e-7 * T:
                continue  # another threshold as close as the probe: not a clean test point
            assert _modes(lead, e + d).n_open == channel_count(bands, e + d), (e, d)
    assert gaps.min() >= 0


@pytest.mark.parametrize("width_nm", [4.3, 5.2, 6.1, 7.0, 7.8])
def test_armchair_ribbon_is_metallic_for_3m_minus_1_dimer_lines(width_nm):
    model = armchair(width_nm)
    n_dimer = len(np.unique(np.round(model.leads[1].cell_positions[:, 0], 6)))
    bands = lead_bands(model, "t")
    metallic = n_dimer % 3 == 2  # N = 3M - 1 (Brey & Fertig 2006, from memory)
    assert channel_count(bands, 0.01 * T) == (1 if metallic else 0)
    near_zero = np.min(np.abs(bands.thresholds_meV))
    if metallic:
        assert near_zero > 0.1 * T  # no threshold at the Dirac point: the bands cross there
        assert any(x.crossing and abs(x.energy_meV) < 1e-10 * T for x in bands.extrema)
    else:
        assert 1e-3 * T < near_zero < 1.0 * T  # the gap's edges


def test_channel_count_takes_arrays_and_closes_a_channel_at_its_threshold():
    """At a threshold the channel has zero velocity and counts as closed (the lead-mode solver's convention)."""
    bands = lead_bands(strip(1), "right", k_points=33)
    counts = channel_count(bands, np.array([1.0, 2.0, 2.0 + 1e-9, 5.0, 6.0, 6.5]))
    assert counts.tolist() == [0, 0, 1, 1, 0, 0] and counts.dtype.kind == "i"
    assert isinstance(channel_count(bands, 3.0), int)
    assert open_channels(bands, 2.0).count == 0 and open_channels(bands, 6.0).count == 0


def test_unknown_lead_and_bad_inputs_are_one_line_errors():
    model = strip(3)
    with pytest.raises(LeadError, match=r"no lead named 'drain'.*\['left', 'right'\]"):
        lead_bands(model, "drain")
    for bad in (3, 2.5, True):
        with pytest.raises(RgftransError, match=r"k_points must be an integer in 9\.\.1000000, got"):
            lead_bands(model, "left", k_points=bad)
    bands = lead_bands(model, "left", k_points=33)
    for bad in (float("nan"), "3", 1j):
        with pytest.raises(EnergyError, match="energy must be"):
            channel_count(bands, bad)
