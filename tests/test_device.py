"""Tests of rgftrans.system.device: discretisation facts and the bad-input catalogue.

Outside sources:

* Effective-mass discretisation on a square lattice (common practice): hopping
  t = hbar^2 / (2 m* a^2), onsite 4t + U so the band bottom sits at zero.
  GaAs m* = 0.067 m_e (Vurgaftman, Meyer & Ram-Mohan, J. Appl. Phys. 89,
  5815 (2001), from memory) gives t = 22.746162 meV at a = 5 nm and
  5.686540 meV at a = 10 nm (our own evaluation with scipy.constants,
  CODATA 2022).  These values quote six decimals, so they are
  matched to their own rounding, ABS_TABLE; the formula itself is recomputed
  from scipy.constants and matched to REL_ROUNDOFF.
* Counting lattice points: a closed interval [x0, x1] holds
  floor(x1/a) - ceil(x0/a) + 1 points of the lattice a Z (boundary included).

Every input error is one line (the command line prints it and exits), so the
catalogue checks the class, a phrase of the message, and that it has no
newline.
"""

from __future__ import annotations

import math
import warnings

import numpy as np
import pytest
from scipy import constants

from rgftrans.system.device import Device, Lead
from rgftrans.system.fields import MagneticField
from rgftrans.errors import GeometryError, LatticeError, LeadError, PotentialError
from rgftrans.system.geometry import disk, rectangle
from rgftrans.system.lattices import square

#: The table's values have six decimals (meV): half a unit in the last place.
ABS_TABLE = 0.5e-6
#: The same formula evaluated twice in double precision.
REL_ROUNDOFF = 1e-12


def two_leads(height: float):
    """Full-height source (left) and drain (right) for a device spanning y in [0, height]."""
    return [Lead("source", "left", (0.0, height)), Lead("drain", "right", (0.0, height))]


def lattice_count(lo: float, hi: float, a: float) -> int:
    """Points of the lattice a Z in the closed interval [lo, hi]."""
    return math.floor(hi / a + 1e-9) - math.ceil(lo / a - 1e-9) + 1


def two_leads_for(x0, y0, x1, y1, a):
    """Full-height leads on the lattice rows inside [y0, y1]."""
    lo, hi = a * math.ceil(y0 / a), a * math.floor(y1 / a)
    return [Lead("source", "left", (lo, hi)), Lead("drain", "right", (lo, hi))]


# --- sites ---------------------------------------------------------------------------------------


@pytest.mark.parametrize(
    "x0, y0, x1, y1, a",
    [
        (0.0, 0.0, 50.0, 30.0, 5.0),     # sides multiples of a: boundary rows included
        (0.0, 0.0, 49.0, 31.0, 5.0),     # not multiples: floor
        (3.0, 2.0, 28.0, 17.0, 5.0),     # corner off the lattice
        (-20.0, -10.0, 20.0, 10.0, 10.0),
        (0.0, 0.0, 7.0, 3.0, 1.0),
    ],
)
def test_rectangle_site_count(x0, y0, x1, y1, a):
    model = Device(rectangle(x0, y0, x1, y1), two_leads_for(x0, y0, x1, y1, a), lattice=square(a)).discretise()
    expected = lattice_count(x0, x1, a) * lattice_count(y0, y1, a)
    assert model.n_sites == expected
    # Every site inside (boundary included) and on the lattice.
    xy = model.positions
    assert np.all((xy[:, 0] >= x0 - 1e-9) & (xy[:, 0] <= x1 + 1e-9))
    assert np.all((xy[:, 1] >= y0 - 1e-9) & (xy[:, 1] <= y1 + 1e-9))
    np.testing.assert_allclose(xy / a, np.round(xy / a), atol=1e-9)
    assert len(np.unique(np.round(xy / a), axis=0)) == model.n_sites  # no duplicates


def test_disk_site_count():
    # A disk of radius 5.2 a centred on a site holds the lattice points with
    # i^2 + j^2 < 5.2^2 (the inscribed 64-gon is within 5.2 (1 - cos(pi/64)) = 0.006 a
    # of the circle, and no point has 5.19 a < r < 5.2 a): counted directly.
    a = 5.0
    ij = np.arange(-6, 7)
    i, j = np.meshgrid(ij, ij)
    r = np.hypot(i, j)
    assert not np.any((r > 5.19) & (r < 5.2))
    expected = int(np.count_nonzero(r < 5.2))
    region = disk((0.0, 0.0), 5.2 * a)
    model = Device(region, [Lead("s", "left", (-5.0, 5.0)), Lead("d", "right", (-5.0, 5.0))],
                   lattice=square(a)).discretise()
    assert model.n_sites == expected


# --- hopping and onsite energies -----------------------------------------------------------------


@pytest.mark.parametrize("a, t_table", [(5.0, 22.746162), (10.0, 5.686540)])
def test_gaas_hopping(a, t_table):
    device = Device(rectangle(0.0, 0.0, 4 * a, 2 * a), two_leads(2 * a), lattice=square(a))
    assert device.t == pytest.approx(t_table, rel=0, abs=ABS_TABLE)
    # From the constants: hbar^2 / (2 m* a^2) in meV.
    t_formula = constants.hbar**2 / (2 * 0.067 * constants.m_e * (a * 1e-9) ** 2) / (1e-3 * constants.e)
    assert device.t == pytest.approx(t_formula, rel=REL_ROUNDOFF)
    # The hopping scales as 1/a^2.
    coarse = Device(device.region, device.leads, lattice=square(2 * a))
    assert coarse.t == pytest.approx(device.t / 4, rel=REL_ROUNDOFF)


def test_hamiltonian_entries_gaas():
    # Onsite 4t + U(x, y); nearest-neighbour hopping -t; nothing else; Hermitian.
    a = 5.0
    t = 22.746162

    def potential(x, y):
        return 3.0 * np.sin(x / 17.0) + 0.05 * y

    device = Device(rectangle(0.0, 0.0, 40.0, 25.0) - disk((20.0, 12.5), 6.0), two_leads(25.0),
                    lattice=square(a), potential=potential)
    model = device.discretise()
    ham = model.hamiltonian.toarray()
    xy = model.positions
    np.testing.assert_allclose(np.diag(ham).real, 4 * device.t + potential(xy[:, 0], xy[:, 1]), rtol=1e-14)
    assert device.t == pytest.approx(t, rel=0, abs=ABS_TABLE)
    distance = np.hypot(*(xy[:, None, :] - xy[None, :, :]).transpose(2, 0, 1))
    neighbours = np.isclose(distance, a)
    off = ~np.eye(len(xy), dtype=bool)
    np.testing.assert_array_equal(ham[neighbours], -device.t)
    np.testing.assert_array_equal(ham[off & ~neighbours], 0.0)
    np.testing.assert_array_equal(ham, ham.conj().T)
    assert model.energy_scale == device.t


def test_tight_binding_units():
    # hopping=1.0 with square(1.0): onsite 4 + U, hopping -1.
    device = Device(rectangle(0.0, 0.0, 3.0, 2.0), two_leads(2.0), lattice=square(1.0), hopping=1.0, potential=0.25)
    ham = device.discretise().hamiltonian.toarray()
    np.testing.assert_array_equal(np.diag(ham), 4.25)
    assert set(np.unique(ham[~np.eye(len(ham), dtype=bool)]).real) == {-1.0, 0.0}


@pytest.mark.parametrize("side, span, direction", [
    ("left", (5.0, 15.0), (-1, 0)), ("right", (0.0, 20.0), (1, 0)),
    ("bottom", (10.0, 25.0), (0, -1)), ("top", (5.0, 5.0), (0, 1)),
])
def test_lead_cell_and_coupling(side, span, direction):
    # The lead's cell 0 is the lattice row (column) just outside the edge within the
    # span; h_cell = onsite 4t + offset with -t along the cross-section; h_hop = -t 1;
    # the interface is the edge sites in the span, each coupled by -t to its partner.
    a, offset = 5.0, 1.5
    region = rectangle(0.0, 0.0, 40.0, 20.0)
    drain = Lead("drain", "left" if side == "right" else "right", (0.0, 20.0))
    device = Device(region, [Lead("source", side, span, potential=offset), drain], lattice=square(a))
    model = device.discretise()
    lead = model.lead("source")
    t = device.t
    m = round((span[1] - span[0]) / a) + 1
    expected_cell = (4 * t + offset) * np.eye(m) - t * (np.eye(m, k=1) + np.eye(m, k=-1))
    np.testing.assert_allclose(lead.h_cell, expected_cell, rtol=1e-14)
    np.testing.assert_allclose(lead.h_hop, -t * np.eye(m), rtol=1e-14)
    np.testing.assert_allclose(lead.period, a * np.array(direction))
    # Cell 0 sits one spacing outside the device's edge.
    iface_xy = model.positions[lead.interface]
    assert len(lead.interface) == m
    across = 1 if side in ("left", "right") else 0
    assert np.all((iface_xy[:, across] >= span[0] - 1e-9) & (iface_xy[:, across] <= span[1] + 1e-9))
    nearest = np.hypot(*(lead.cell_positions[:, None, :] - iface_xy[None, :, :]).transpose(2, 0, 1))
    np.testing.assert_allclose(nearest.min(axis=1), a)
    np.testing.assert_allclose(np.abs(lead.coupling).sum(axis=0), t)  # one bond per cell site


# --- the bad-input catalogue ---------------------------------------------------------------------


R = rectangle(0.0, 0.0, 50.0, 30.0)  # 11 x 7 sites at a = 5 nm


def _device(region=R, leads=None, **kw):
    return Device(region, two_leads(30.0) if leads is None else leads, lattice=kw.pop("lattice", square(5.0)), **kw)


BAD_INPUTS = {
    "lead misses the device": (
        lambda: _device(leads=[Lead("s", "left", (0.0, 30.0)), Lead("d", "right", (100.0, 120.0))]),
        LeadError, r"lead 'd' does not touch the device.*y = \[100, 120\] nm"),
    "lead misses the device (top)": (
        lambda: _device(leads=[Lead("s", "left", (0.0, 30.0)), Lead("d", "top", (-40.0, -20.0))]),
        LeadError, r"lead 'd' does not touch the device.*x = \[-40, -20\] nm"),
    "disconnected pieces": (
        lambda: _device(region=rectangle(0, 0, 20, 20) | rectangle(100, 0, 120, 20),
                        leads=[Lead("s", "left", (0.0, 20.0)), Lead("d", "right", (0.0, 20.0))]),
        GeometryError, r"2 disconnected pieces"),
    "lead wider than its side": (
        lambda: _device(leads=[Lead("s", "left", (-10.0, 40.0)), Lead("d", "right", (0.0, 30.0))]),
        LeadError, r"lead 's' is wider than the device's left side"),
    "NaN potential": (
        lambda: _device(potential=float("nan")), PotentialError, r"NaN or infinite at 77 site"),
    "NaN in a potential function": (
        lambda: _device(potential=lambda x, y: np.where(x > 22.0, np.nan, 0.0)),
        PotentialError, r"NaN or infinite at 42 site\(s\), first at \(x, y\) = \(25, 0\) nm"),
    "infinite potential": (
        lambda: _device(potential=np.inf), PotentialError, r"NaN or infinite"),
    "potential function of the wrong shape": (
        lambda: _device(potential=lambda x, y: np.zeros(3)), PotentialError, r"returned shape \(3,\) for 77 sites"),
    "empty region": (
        lambda: _device(region=rectangle(1.0, 1.0, 2.0, 2.0)), GeometryError, r"holds no lattice site at spacing a = 5 nm"),
    "zero lattice spacing": (lambda: square(0), LatticeError, r"positive and finite, got a = 0.0 nm"),
    "negative lattice spacing": (lambda: square(-1), LatticeError, r"positive and finite, got a = -1.0 nm"),
    "NaN lattice spacing": (lambda: square(float("nan")), LatticeError, r"positive and finite"),
    "overlapping leads": (
        lambda: _device(leads=[Lead("s", "left", (0.0, 15.0)), Lead("d", "left", (10.0, 30.0))]),
        LeadError, r"leads 's' and 'd' overlap or touch"),
    "touching leads": (
        lambda: _device(leads=[Lead("s", "left", (0.0, 10.0)), Lead("d", "left", (15.0, 30.0))]),
        LeadError, r"leads 's' and 'd' overlap or touch near \(x, y\) = \(-5, 15\) nm"),
    "ragged edge": (
        lambda: _device(region=R - rectangle(-1.0, -1.0, 10.0, 10.0)),
        LeadError, r"lead 'source' meets a ragged left edge.*x = 0 to 10 nm"),
    "lead runs alongside the device": (
        lambda: _device(region=R | rectangle(0.0, 30.0, 20.0, 60.0),
                        leads=[Lead("s", "left", (0.0, 30.0)), Lead("d", "top", (25.0, 50.0))]),
        LeadError, r"lead 'd' runs alongside or into the device"),
    "duplicate lead names": (
        lambda: _device(leads=[Lead("s", "left", (0.0, 30.0)), Lead("s", "right", (0.0, 30.0))]),
        LeadError, r"lead names must be unique, \['s'\]"),
    "no leads": (lambda: _device(leads=[]), LeadError, r"no leads"),
    "unknown side": (lambda: Lead("s", "north", (0.0, 1.0)), LeadError, r"side 'north' is not one of"),
    "reversed span": (lambda: Lead("s", "left", (10.0, 0.0)), LeadError, r"lo <= hi"),
    "NaN span": (lambda: Lead("s", "left", (0.0, float("nan"))), LeadError, r"two finite numbers"),
    "NaN lead potential": (lambda: Lead("s", "left", (0.0, 1.0), potential=float("nan")), LeadError,
                           r"potential nan meV is not finite"),
    "Zeeman without spin orbitals": (lambda: _device(field=MagneticField(1.0, zeeman=True)), PotentialError,
                                     r"Zeeman term was requested \(zeeman=True\) on a device without spin orbitals"),
}


@pytest.mark.parametrize("name", list(BAD_INPUTS))
def test_bad_input_raises_one_line_error(name):
    build, error, match = BAD_INPUTS[name]
    with pytest.raises(error, match=match) as err:
        obj = build()
        if isinstance(obj, Device):
            obj.discretise()
    message = str(err.value)
    assert "\n" not in message
    assert len(message) < 400


def test_unknown_lead_name_lookup():
    model = _device().discretise()
    with pytest.raises(LeadError, match=r"no lead named 'gate'; the model has \['source', 'drain'\]"):
        model.lead("gate")


def test_adjacent_leads_may_share_a_corner_site():
    # Full-width left and top leads both couple to the corner site (0, 30); their
    # cells are diagonal neighbours, not bonded, so this is a legal device.
    model = _device(leads=[Lead("s", "left", (0.0, 30.0)), Lead("d", "top", (0.0, 50.0))]).discretise()
    corner = np.flatnonzero(np.all(np.isclose(model.positions, [0.0, 30.0]), axis=1))
    for lead in model.leads:
        assert np.isin(corner, lead.interface).all()


def test_potential_step_at_a_lead_interface_is_warned():
    """A gate potential that has not decayed at the device's edge meets the lead as a step (ValidityWarning)."""
    from rgftrans.system.device import LEAD_STEP_WARN_MEV
    from rgftrans.errors import ValidityWarning

    leads = [Lead("source", "left", (0.0, 30.0)), Lead("drain", "right", (0.0, 30.0))]
    with pytest.warns(ValidityWarning, match=r"lead 'source': .* differs from the lead's by up to \+3 meV"):
        Device(R, leads, potential=lambda x, y: np.where(x < 10.0, 3.0, 0.0)).discretise()
    with warnings.catch_warnings():
        warnings.simplefilter("error", ValidityWarning)
        Device(R, leads, potential=LEAD_STEP_WARN_MEV * 0.9).discretise()  # a step below the threshold is fine
        # the lead's own offset matched to the edge potential removes the step
        matched = [Lead("source", "left", (0.0, 30.0), potential=3.0), Lead("drain", "right", (0.0, 30.0))]
        Device(R, matched, potential=lambda x, y: np.where(x < 10.0, 3.0, 0.0)).discretise()
