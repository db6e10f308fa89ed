"""Catalogue: what the public Python entry points are given (issue: reliability, Python API class).

Every bad argument at a public entry point (transmission, transmission
matrix, direct solver, LDOS, local quantities, scattering states) and every
implausible physical input when a device is built ends in one of the
package's own errors (a subclass of RgftransError) with a one-line message,
never in numpy's, scipy's or Python's own exception, and never in a number.
"""

from __future__ import annotations

import numpy as np
import pytest

from builders import strip_device
from rgftrans.system.device import Device, Lead
from rgftrans.transport.direct import transmission_direct
from rgftrans.errors import RgftransError
from rgftrans.system.fields import MagneticField
from rgftrans.system.geometry import rectangle
from rgftrans.system.lattices import square
from rgftrans.transport.local import ldos, local_quantities, scattering_states
from rgftrans.system.materials import Material, material
from rgftrans.transport.rgf import transmission, transmission_matrix


def _model():
    return strip_device(3, 4).discretise()


ENTRY_POINTS = {
    "transmission": lambda m, e, **kw: transmission(m, e, **kw),
    "transmission_matrix": lambda m, e, **kw: transmission_matrix(m, e, **kw),
    "direct": lambda m, e, **kw: transmission_direct(m, e, **kw),
    "ldos": lambda m, e, **kw: ldos(m, e, **kw),
    "local_quantities": lambda m, e, **kw: local_quantities(m, e, **kw),
    "scattering_states": lambda m, e, **kw: scattering_states(m, e),
}
SCALAR_ONLY = {"local_quantities", "scattering_states"}

BAD_ENERGIES = {
    "string": ("6.0", "number"),
    "complex-array": (np.array([2.0 + 0.1j]), "real"),
    "python-complex": (2.0 + 0.1j, "real"),
    "set": ({1.0, 2.0}, "number"),
    "bool": (True, "number"),
    "nan": (np.nan, "NaN"),
    "far-outside": (1e300, "far outside"),
    "none": (None, "number"),
}


def _assert_one_line(err):
    assert isinstance(err.value, RgftransError), type(err.value)
    assert "\n" not in str(err.value)


@pytest.mark.parametrize("entry", sorted(ENTRY_POINTS))
@pytest.mark.parametrize("case", sorted(BAD_ENERGIES))
def test_bad_energies_give_one_line_errors(entry, case):
    value, match = BAD_ENERGIES[case]
    if entry in SCALAR_ONLY and np.ndim(value) > 0 and not isinstance(value, (set, str)):
        match = "one number"
    with pytest.raises(RgftransError, match=match) as err:
        ENTRY_POINTS[entry](_model(), value)
    _assert_one_line(err)


@pytest.mark.parametrize("entry", sorted(set(ENTRY_POINTS) - {"scattering_states"}))
@pytest.mark.parametrize("eta", [-1.0, np.nan, np.inf, "0.1", 1j])
def test_bad_eta_is_refused(entry, eta):
    # eta = -1 once gave T = 2.36 with one open channel (the advanced Green's function).
    with pytest.raises(RgftransError, match="eta") as err:
        ENTRY_POINTS[entry](_model(), 2.3, eta=eta)
    _assert_one_line(err)


@pytest.mark.parametrize("entry", sorted(ENTRY_POINTS))
@pytest.mark.parametrize("model", [None, "model", object()], ids=["none", "str", "object"])
def test_wrong_object_as_model(entry, model):
    with pytest.raises(RgftransError, match="TightBindingModel") as err:
        ENTRY_POINTS[entry](model, 2.3)
    _assert_one_line(err)


def test_valid_inputs_still_pass_through():
    # The checks must not refuse what is fine: an int, a list, a numpy scalar, a zero eta.
    model = _model()
    t_int = transmission(model, 3).transmission
    t_np = transmission(model, np.float32(3.0)).transmission
    t_list = transmission(model, [3.0], eta=0).transmission
    assert np.allclose(t_int, t_list) and np.allclose(t_np, t_list)


# --- implausible physical inputs when a device is built ------------------------------------------------

def _device(**kw):
    base = dict(region=rectangle(0, 0, 20, 10), lattice=square(1.0), material=material("GaAs"),
                leads=[Lead("L", "left", (0, 10)), Lead("R", "right", (0, 10))])
    base.update(kw)
    return Device(**base)


@pytest.mark.parametrize(
    "build, match",
    [
        (lambda: _device(region="rect"), "Region"),
        (lambda: _device(lattice=1.0), "Lattice"),
        (lambda: _device(leads=["L", "R"]), "Lead"),
        (lambda: Lead("L", "left", (0, 5, 10)), "two numbers"),
        (lambda: Lead("L", "left", "0-10"), "two numbers"),
        (lambda: Lead("L", "left", (0, 10), potential=1e308), "implausible"),
        (lambda: square(5e-9), "nm"),
        (lambda: Material("X", m_eff=1e-40, g_factor=-0.44, eps_r=12.9, source="test"), "implausible"),
        (lambda: MagneticField(1e300), "tesla"),
        (lambda: _device(potential=lambda x, y: 1e308 + 0 * x).discretise(), "implausible"),
        (lambda: _device(material=None, hopping=1e-300).discretise(), "implausible"),
    ],
    ids=["region-str", "lattice-number", "leads-str", "span-3", "span-str", "lead-U-1e308", "spacing-5e-9",
         "mass-1e-40", "field-1e300", "potential-1e308", "hopping-1e-300"],
)
def test_implausible_device_inputs_are_refused(build, match):
    with pytest.raises(RgftransError, match=match) as err:
        build()
    _assert_one_line(err)


def test_plausible_extremes_are_accepted():
    # The bounds must leave room for real devices: graphene's 2.7 eV hopping, InSb's 0.0135 m_e, 45 T.
    assert Material("X", m_eff=0.0135, g_factor=-51, eps_r=16.8, source="test").m_eff == pytest.approx(0.0135)
    MagneticField(45.0)
    square(0.142)
    model = _device(material=None, hopping=2700.0).discretise()
    assert model.energy_scale > 0
