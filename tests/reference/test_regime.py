"""The regime estimate of a dot: level spacing, disk charging energy, area, verdict.

Closed forms (each evaluated here with scipy.constants, CODATA):
* mean level spacing of a 2D dot, Δ = 2π ħ² / (g_s m* A): the inverse of the
  2D density of states g_s m* / (2π ħ²) times the area (common textbook
  result, no source);
* self-capacitance of a thin conducting disk of radius r in a dielectric,
  C = 8 ε ε_0 r, and E_C = e² / C (common textbook estimate, no source);
* Coulomb blockade needs E_C above k_B T and contacts conducting below e²/h
  (L. P. Kouwenhoven et al., Mesoscopic Electron Transport, Kluwer 1997, from
  memory).
"""

import math
import warnings

import numpy as np
import pytest
from scipy import constants

from rgftrans.system.device import Device, Lead
from rgftrans.errors import ValidityWarning
from rgftrans.system.geometry import rectangle
from rgftrans.system.lattices import square
from rgftrans.analysis.regime import disk_charging_energy_meV, dot_area_nm2, level_spacing_meV, regime_estimate

MEV = 1e-3 * constants.e
NM = 1e-9


@pytest.mark.parametrize("area, m_eff, g_s", [(4e4, 0.067, 2), (1e4, 0.19, 2), (2.5e5, 0.026, 1)])
def test_level_spacing_closed_form(area, m_eff, g_s):
    expected = 2 * math.pi * constants.hbar**2 / (g_s * m_eff * constants.m_e * area * NM**2) / MEV
    # Same formula, independent arithmetic: agreement to rounding.
    assert level_spacing_meV(area, m_eff, spin_degeneracy=g_s) == pytest.approx(expected, rel=1e-12)


@pytest.mark.parametrize("radius_nm, eps_r", [(100.0, 12.9), (50.0, 11.7), (300.0, 15.15)])
def test_disk_charging_energy_closed_form(radius_nm, eps_r):
    e_c, capacitance = disk_charging_energy_meV(math.pi * radius_nm**2, eps_r)
    c_ref = 8 * eps_r * constants.epsilon_0 * radius_nm * NM
    assert capacitance == pytest.approx(c_ref, rel=1e-12)
    assert e_c == pytest.approx(constants.e**2 / c_ref / MEV, rel=1e-12)


def test_gaas_disk_numbers():
    """GaAs disk of radius 100 nm: C = 91.4 aF and E_C = 1.75 meV (the closed forms, 3 digits)."""
    e_c, capacitance = disk_charging_energy_meV(math.pi * 100.0**2, 12.9)
    assert capacitance * 1e18 == pytest.approx(91.37, rel=1e-3)
    assert e_c == pytest.approx(1.7535, rel=1e-3)


def well_device(radius_nm, *, barrier_meV=30.0, lead_potential=0.0, spacing=5.0):
    """A 300 x 200 nm GaAs region, potential 0 inside a disk at its centre and barrier_meV outside."""
    def potential(x, y):
        return np.where(np.hypot(x - 150.0, y - 100.0) < radius_nm, 0.0, barrier_meV)

    leads = [Lead("source", "left", (60.0, 140.0), potential=lead_potential),
             Lead("drain", "right", (60.0, 140.0), potential=lead_potential)]
    return Device(rectangle(0, 0, 300, 200), leads, lattice=square(spacing), potential=potential)


def test_closed_dot_area_is_the_well():
    radius = 60.0
    device = well_device(radius, lead_potential=30.0)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ValidityWarning)
        model = device.discretise()
    area, source = dot_area_nm2(model, site_area_nm2=25.0, fermi_energy=7.0)
    assert source.startswith("closed dot")
    # Lattice points inside a disk: their cells cover the disk up to the cells the rim crosses, at most
    # 2 pi r a of area (Gauss circle problem bound).
    assert abs(area - math.pi * radius**2) <= 2 * math.pi * radius * 5.0


def test_open_device_uses_the_allowed_region():
    device = well_device(60.0, barrier_meV=0.0)
    model = device.discretise()
    area, source = dot_area_nm2(model, site_area_nm2=25.0, fermi_energy=7.0)
    assert source == "device region"  # no potential: the whole device
    assert area == pytest.approx(model.n_sites * 25.0)


def test_closed_dot_is_in_coulomb_blockade():
    device = well_device(60.0, lead_potential=30.0)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ValidityWarning)
        model = device.discretise()
    with pytest.warns(ValidityWarning, match="Coulomb blockade would dominate"):
        est = regime_estimate(device, model, fermi_energy=7.0, temperature_K=0.1,
                              energy_window=(5.0, 9.0))
    assert est.coulomb_blockade
    assert est.mean_conductance_g0 == pytest.approx(0.0, abs=1e-12)  # closed leads carry nothing
    e_c, _ = disk_charging_energy_meV(est.area_nm2, 12.9)
    assert est.charging_energy_meV == e_c


def test_open_wire_is_coherent():
    wire = Device(rectangle(0, 0, 200, 100), [Lead("s", "left", (0, 100)), Lead("d", "right", (0, 100))],
                  lattice=square(5.0))
    with warnings.catch_warnings():
        warnings.simplefilter("error", ValidityWarning)  # no blockade warning may come
        est = regime_estimate(wire, fermi_energy=6.0, temperature_K=0.1, energy_window=(4.0, 8.0))
    assert not est.coulomb_blockade
    assert est.mean_conductance_g0 > 3  # a clean 100 nm GaAs wire at 4-8 meV has several open channels
    assert "coherent regime" in est.verdict
