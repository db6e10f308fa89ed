"""Quantised conductance of a clean hard-wall strip.

Sources (recalled, not read: "from memory"):

* Conductance quantisation, experimental discovery: B. J. van Wees et al.,
  PRL 60, 848 (1988) and D. A. Wharam et al., J. Phys. C 21, L209 (1988).
* Tight-binding strip spectrum eps_n and the clean-strip T = N(E): S. Datta,
  *Electronic Transport in Mesoscopic Systems* (CUP 1995), ch. 1 and 3.
* Conductance quantum 2e^2/h: exact from the fixed e and h of the 2019 SI
  (BIPM SI Brochure, 9th ed. 2019), evaluated with scipy.constants;
  G = (2e^2/h) T per R. Landauer, IBM J. Res. Dev. 1, 223 (1957).
* The staircase and threshold tables are our own evaluation of those formulas
  (thresholds to 10 decimals), with T confirmed independently by dense Caroli
  and by slice RGF; the regression at E = eps_m is our own observation of a
  decimation round-off pitfall (not published).

Tolerance: |T - N| < 1e-8 at least 1e-6 away from a threshold: the package's
eta and round-off give ~1e-10 there, and near a threshold the vanishing group
velocity amplifies errors, so points closer than 1e-6 are not checked.
Exactly at a threshold T is ill-defined (group velocity 0).

Conventions: t = 1, a = 1.  The reference states energies with onsite 0
(band [-4t, 4t]); the strips are built with ``Device`` (onsite 4t), so the
package is called at E + ``ONSITE_SHIFT``.  Transverse levels
eps_n = -2t cos(n pi/(W+1)); a clean strip transmits T = N(E) =
#{n : |E - eps_n| < 2t}.
"""

import numpy as np
import pytest

from _systems import ONSITE_SHIFT, strip_device
from rgftrans.transport.direct import transmission_direct
from rgftrans.errors import ThresholdWarning
from rgftrans.leads.modes import lead_modes
from rgftrans.transport.rgf import transmission

#: |T - N| < 1e-8 at least 1e-6 away from the thresholds (see module docstring for why).
TOL_T = 1e-8
#: ... and that minimum distance from a threshold.
THRESHOLD_GAP = 1e-6
#: 2e^2/h in siemens (13 significant digits, exact e and h of the 2019 SI; our evaluation with scipy.constants).
CONDUCTANCE_QUANTUM_S = 7.748091729864e-5


def eps_levels(width):
    return -2 * np.cos(np.arange(1, width + 1) * np.pi / (width + 1))


def n_channels(energy, width):
    """N(E) = #{n : |E - eps_n| < 2t} (Datta 1995 ch. 1 and 3, from memory)."""
    return int(np.count_nonzero(np.abs(energy - eps_levels(width)) < 2))


def thresholds(width):
    """All subband bottoms and tops eps_n -/+ 2t (Datta 1995, from memory)."""
    eps = eps_levels(width)
    return np.concatenate([eps - 2, eps + 2])


# Staircase, W = 10: N(E) by the channel count (Datta 1995, from memory), our evaluation, confirmed by dense
# Caroli and slice RGF: (E, N = T).
STAIRCASE_W10 = [
    (-3.95, 0), (-3.8, 1), (-3.5, 2), (-3.0, 3), (-2.5, 4), (-2.0, 5), (-1.0, 7),
    (-0.1, 9), (0.0, 10), (0.5, 8), (2.5, 4), (3.5, 2), (3.9, 1),
]


@pytest.fixture(scope="module")
def strip_w10():
    return strip_device(10, 4)


@pytest.mark.parametrize("energy, n_table", STAIRCASE_W10)
def test_w10_staircase_table(strip_w10, energy, n_table):
    e_pkg = energy + ONSITE_SHIFT
    result = transmission(strip_w10, [e_pkg])
    # Clean strip T = N (van Wees 1988 / Wharam 1988; Datta 1995; from memory); |T - N| < TOL_T.
    assert abs(result.transmission[0] - n_table) < TOL_T
    assert list(result.n_open[0]) == [n_table, n_table]  # both leads count N open channels (exact)
    # The sparse-LU path gives the same T (independent solver, same closed form); TOL_T.
    assert abs(transmission_direct(strip_w10, [e_pkg])[0, 1, 0] - n_table) < TOL_T


# W = 10 thresholds eps_n -/+ 2t (Datta 1995, from memory), our 10-decimal evaluation (bottom, top of subband
# n = 1..5; 6..10 by the mirror symmetry eps_{W+1-n} = -eps_n).
W10_THRESHOLDS = [
    (-3.9189859472, 0.0810140528),
    (-3.6825070657, 0.3174929343),
    (-3.3097214679, 0.6902785321),
    (-2.8308300260, 1.1691699740),
    (-2.2846296765, 1.7153703235),
]


@pytest.mark.parametrize("kind", ["bottom", "top"])
@pytest.mark.parametrize("n", range(1, 11))
def test_w10_subband_thresholds(strip_w10, n, kind):
    # Subband n: bottoms/tops tabulated for n <= 5, mirrored (bottom_n = -top_{11-n}).
    bottom, top = W10_THRESHOLDS[n - 1] if n <= 5 else (-W10_THRESHOLDS[10 - n][1], -W10_THRESHOLDS[10 - n][0])
    edge, opens = (bottom, +1) if kind == "bottom" else (top, -1)
    lead = strip_w10.leads[0]
    e_pkg = edge + ONSITE_SHIFT
    below = lead_modes(lead.h_cell, lead.h_hop, e_pkg - THRESHOLD_GAP).n_open
    above = lead_modes(lead.h_cell, lead.h_hop, e_pkg + THRESHOLD_GAP).n_open
    # Exactly one channel opens at a bottom and closes at a top (Datta 1995, from memory; table quoted to
    # 1e-10 << 1e-6 gap, so the sides are unambiguous); integer counts, exact.
    assert above - below == opens
    assert above == n_channels(edge + THRESHOLD_GAP, 10)


@pytest.mark.parametrize("edge", thresholds(10), ids=lambda e: f"{e:.4f}")
def test_w10_threshold_is_detected(strip_w10, edge):
    # At a channel threshold the group velocity is zero and T is ill-defined (common practice, no source);
    # the package must recognise the closed-form threshold (Datta 1995, from memory) as one.
    lead = strip_w10.leads[0]
    with pytest.warns(ThresholdWarning):
        modes = lead_modes(lead.h_cell, lead.h_hop, edge + ONSITE_SHIFT)
    assert modes.at_threshold


@pytest.mark.parametrize("m", range(1, 11))
def test_w10_at_transverse_levels(strip_w10, m):
    # Regression for our own observation (decimation round-off at an eigenvalue of h_cell, unpublished): at
    # E = eps_m exactly the answer must still be N (Datta 1995, from memory); TOL_T.
    eps_m = eps_levels(10)[m - 1]
    expected = n_channels(eps_m, 10)
    result = transmission(strip_w10, [eps_m + ONSITE_SHIFT])
    assert abs(result.transmission[0] - expected) < TOL_T
    assert list(result.n_open[0]) == [expected, expected]


def test_w11_at_zero():
    # For odd W, eps_{(W+1)/2} = 0 (hard-wall levels, Datta 1995, from memory); W = 11 gives N(0) = 11; TOL_T.
    result = transmission(strip_device(11, 3), [ONSITE_SHIFT])
    assert abs(result.transmission[0] - 11) < TOL_T


@pytest.mark.parametrize("width, length", [(1, 1), (2, 5), (3, 2), (5, 6), (7, 3), (12, 2)])
@pytest.mark.parametrize("orientation", ["horizontal", "vertical"])
def test_staircase_other_widths(width, length, orientation):
    energies = np.linspace(-3.97, 3.97, 41)
    gap = np.abs(energies[:, None] - thresholds(width)[None, :]).min(axis=1)
    energies = energies[gap > THRESHOLD_GAP]  # TOL_T applies only away from the thresholds
    expected = np.array([n_channels(e, width) for e in energies])
    model = strip_device(width, length, orientation=orientation)
    result = transmission(model, energies + ONSITE_SHIFT)
    # T = N(E) for every width and length, with left/right or bottom/top leads (Datta 1995; van Wees 1988;
    # from memory); |T - N| < TOL_T.
    assert np.abs(result.transmission - expected).max() < TOL_T
    assert np.array_equal(result.n_open[:, 0], expected)
    assert np.array_equal(result.n_open[:, 1], expected)


@pytest.mark.parametrize("energy, n_table", [(-3.0, 3), (0.0, 10), (3.9, 1)])
def test_conductance_on_a_plateau(strip_w10, energy, n_table):
    result = transmission(strip_w10, [energy + ONSITE_SHIFT])
    # G = (2e^2/h) T with spin degeneracy (Landauer 1957, from memory) and 2e^2/h = 7.748091729864e-5 S
    # (exact 2019 SI e and h, 13 digits).
    # Relative tolerance: 1e-8 from T (|T - N| < 1e-8 over N >= 1) plus the table's rounding (7e-14).
    assert result.conductance_S[0] == pytest.approx(n_table * CONDUCTANCE_QUANTUM_S, rel=1e-8)
    assert result.conductance_g0[0] == pytest.approx(n_table, abs=TOL_T)
