"""Tight-binding units: energy zero at the band centre and the field as flux quanta per lattice cell.

Sources:
* A W-site hard-wall strip of the square lattice has subbands E_n(k) = eps0 - 2t cos(ka) - 2t cos(n pi / (W + 1)),
  n = 1..W, so with the band centre at zero (eps0 = 0) the clean strip's transmission steps up by one at
  E_n = -2t - 2t cos(n pi / (W + 1)) (common practice, exact on the lattice).
* Peierls phases of a flux phi per plaquette enter as exp(2 pi i phi m) with integer m: every observable is
  periodic in phi with period 1 (D. R. Hofstadter, Phys. Rev. B 14, 2239 (1976), from memory), and phi
  flux quanta through a cell of area A is B = phi h / (e A) (h/e from scipy.constants, CODATA).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import constants

from rgftrans.errors import PotentialError
from rgftrans.system.device import Device, Lead
from rgftrans.system.fields import MagneticField
from rgftrans.system.geometry import rectangle
from rgftrans.system.lattices import honeycomb, square
from rgftrans.transport.rgf import transmission

W, L = 6, 12


def _strip(**kwargs):
    region = rectangle(0.0, 0.0, L - 1.0, W - 1.0)
    leads = [Lead("left", "left", (0.0, W - 1.0)), Lead("right", "right", (0.0, W - 1.0))]
    return Device(region, leads, lattice=square(1.0), hopping=1.0, **kwargs)


def test_band_centre_moves_every_energy_by_the_onsite_term():
    energies = np.linspace(-3.7, 3.7, 23)
    centred = transmission(_strip(energy_origin="band_centre").discretise(), energies).transmission
    bottom = transmission(_strip().discretise(), energies + 4.0).transmission
    assert np.allclose(centred, bottom, atol=1e-12)


def test_band_centre_staircase_is_the_strip_closed_form():
    thresholds = -2.0 - 2.0 * np.cos(np.arange(1, W + 1) * np.pi / (W + 1))
    between = 0.5 * (thresholds[:-1] + thresholds[1:])
    t = transmission(_strip(energy_origin="band_centre").discretise(), between).transmission
    # A clean strip transmits every open channel perfectly (1e-10: the solver's rounding).
    assert np.allclose(t, np.arange(1, W), atol=1e-10)


def test_flux_per_cell_is_tesla_through_the_cell():
    phi = 0.05
    assert MagneticField(flux_per_cell=phi).tesla_on(square(1.0)) == pytest.approx(
        phi * constants.h / constants.e / 1e-18, rel=1e-14)  # 206.8 T on a 1 nm plaquette
    hexagon = 3 * math.sqrt(3) / 2 * 0.142**2  # graphene's cell: one hexagon of side a_cc = 0.142 nm
    assert MagneticField(flux_per_cell=phi).tesla_on(honeycomb(0.142)) == pytest.approx(
        phi * constants.h / constants.e / (hexagon * 1e-18), rel=1e-3)
    by_flux = _strip(field=MagneticField(flux_per_cell=phi)).discretise().hamiltonian
    by_tesla = _strip(field=MagneticField(phi * constants.h / constants.e / 1e-18)).discretise().hamiltonian
    assert abs(by_flux - by_tesla).max() < 1e-12


def test_one_flux_quantum_per_plaquette_is_no_field():
    energies = np.linspace(0.3, 3.5, 9)
    zero = transmission(_strip().discretise(), energies).transmission
    one = transmission(_strip(field=MagneticField(flux_per_cell=1.0)).discretise(), energies).transmission
    half = transmission(_strip(field=MagneticField(flux_per_cell=0.3)).discretise(), energies).transmission
    assert np.allclose(one, zero, atol=1e-9)
    assert not np.allclose(half, zero, atol=1e-3)  # the check can fail: a generic flux does change T


@pytest.mark.parametrize("kwargs, fragment", [
    (dict(flux_per_cell=1.5), "[-1, 1]"),
    (dict(flux_per_cell=0.1, tesla=2.0), "given twice"),
])
def test_bad_fields_are_one_line(kwargs, fragment):
    with pytest.raises(PotentialError) as err:
        MagneticField(**kwargs)
    assert fragment in str(err.value) and "\n" not in str(err.value)


def test_unknown_energy_origin_is_refused():
    with pytest.raises(PotentialError, match="energy_origin"):
        _strip(energy_origin="middle")


CONFIG = """
[material]
name = "GaAs"

[lattice]
kind = "square"
spacing_nm = 1.0
hopping_meV = 1.0
energy_origin = "band_centre"

[geometry]
rectangle_nm = [0.0, 0.0, 11.0, 5.0]

[field]
flux_per_cell = 0.05

[[leads]]
name = "left"
side = "left"
span_nm = [0.0, 5.0]

[[leads]]
name = "right"
side = "right"
span_nm = [0.0, 5.0]

[energy]
start_meV = -3.5
stop_meV = -0.5
points = 4

[[sweep.axis]]
parameter = "field.flux_per_cell"
start = 0.0
stop = 1.0
points = 3

[output]
path = "{out}"
"""


def test_a_config_in_tight_binding_units(tmp_path):
    from rgftrans.io.config import parse_config

    cfg = parse_config(CONFIG.format(out=tmp_path / "tb.h5"), source="tb.toml")
    device = cfg.build_device()
    assert device.energy_origin == "band_centre" and device.field.flux_per_cell == 0.05
    assert [a.parameter for a in cfg.axes()] == ["field.flux_per_cell"]
    e = [-3.0, -1.0]
    zero = transmission(cfg.build_device({"field.flux_per_cell": 0.0}).discretise(), e).transmission
    one = transmission(cfg.build_device({"field.flux_per_cell": 1.0}).discretise(), e).transmission
    assert np.allclose(zero, one, atol=1e-9)
    assert np.allclose(zero, transmission(_strip(energy_origin="band_centre").discretise(), e).transmission)


@pytest.mark.parametrize("change, fragment", [
    (("flux_per_cell = 0.05", "flux_per_cell = 0.05\ntesla = 1.0"), "given twice"),
    (("flux_per_cell = 0.05", "flux_per_cell = 3.0"), "flux_per_cell"),
    (('energy_origin = "band_centre"', 'energy_origin = "middle"'), "energy_origin"),
    (("[energy]\n", "[energy]\nrelative_to_fermi = true\n"), "band centre"),
])
def test_bad_tight_binding_configs_are_one_line(tmp_path, change, fragment):
    from rgftrans.errors import ConfigError
    from rgftrans.io.config import parse_config

    text = CONFIG.format(out=tmp_path / "tb.h5").replace(*change)
    if "relative_to_fermi" in text:
        text = text.replace('name = "GaAs"', 'name = "GaAs"\ndensity_cm2 = 2e11')
    with pytest.raises(ConfigError) as err:
        parse_config(text, source="tb.toml")
    assert fragment in str(err.value) and "\n" not in str(err.value)
