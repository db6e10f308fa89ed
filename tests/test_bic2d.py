"""Accidental bound states in the continuum that need two parameters (one open channel in each of two leads)."""

from __future__ import annotations

import numpy as np
import pytest
import scipy.sparse as sp

from rgftrans.analysis.bic2d import coupling_residuals, locate_bic_2d, search_grid
from rgftrans.spectra.poles import resonances
from rgftrans.system.device import Device, Lead, LeadModel, TightBindingModel
from rgftrans.errors import RgftransError
from rgftrans.system.fields import MagneticField
from rgftrans.system.geometry import rectangle
from rgftrans.system.lattices import square
from rgftrans.transport.rgf import transmission

# --- Closed form: two levels a, b (coupled by kappa) attached to two different one-dimensional chains ------------
# Chain L couples to the levels with (V_AL, V_BL), chain R with (v_aR, V_BR); each chain has one channel in (-2, 2).
# Gamma = g_L V_L V_L^T + g_R V_R V_R^T, so a dark vector x needs x . V_L = x . V_R = 0: V_L and V_R parallel
# (proportionate coupling), v_aR* = V_AL V_BR / V_BL.  Then Lambda x = 0 too, and x = (V_BL, -V_AL) must be an
# eigenvector of [[e_a, kappa], [kappa, e_b]]: the Friedrich-Wintgen condition (H. Friedrich & D. Wintgen,
# Phys. Rev. A 32, 3231 (1985), from memory) kappa* = V_AL V_BL (e_a - e_b) / (V_AL^2 - V_BL^2), at energy
# E* = e_a - kappa* V_AL / V_BL.  (Our derivation for this model.)
E_A, E_B, V_AL, V_BL, V_BR = 0.5, 0.2, 0.3, 0.2, 0.25
KAPPA_STAR = V_AL * V_BL * (E_A - E_B) / (V_AL**2 - V_BL**2)
V_AR_STAR = V_AL * V_BR / V_BL
E_STAR = E_A - KAPPA_STAR * V_AL / V_BL


def _chain(name, v_a, v_b, side):
    return LeadModel(name, np.zeros((1, 1)), -np.ones((1, 1)), np.array([0, 1]), np.array([[v_a], [v_b]]),
                     np.array([[side, 0.5]]), np.array([side, 0.0]))


def two_levels(kappa, v_ar):
    ham = sp.csr_matrix(np.array([[E_A, kappa], [kappa, E_B]]))
    return TightBindingModel(ham, np.array([[0.0, 0.0], [0.0, 1.0]]),
                             (_chain("L", V_AL, V_BL, -1.0), _chain("R", v_ar, V_BR, 1.0)))


def test_closed_form_lies_in_the_band():
    assert -2 < E_STAR < 2 and KAPPA_STAR == pytest.approx(0.36) and V_AR_STAR == pytest.approx(0.375)


def test_two_level_bic_found_to_1e6():
    """Newton on the two signed couplings finds both closed-form parameters to the default 1e-6 relative."""
    bic = locate_bic_2d(two_levels, (0.30, 0.30), (0.05, 0.05), E_STAR + 0.05)
    assert abs(bic.parameter[0] - KAPPA_STAR) <= 1e-6 * KAPPA_STAR
    assert abs(bic.parameter[1] - V_AR_STAR) <= 1e-6 * V_AR_STAR
    assert bic.energy_meV == pytest.approx(E_STAR, abs=1e-9)
    assert bic.n_open == (1, 1) and bic.kind == "accidental"
    assert bic.orders_of_magnitude >= 6  # the pole solver, independently, sees the width collapse
    assert bic.exponent == pytest.approx(2.0, abs=0.1)  # Gamma ~ (p - p*)^2 (a simple zero of each coupling)
    assert bic.solves <= 40


def test_rtol_below_round_off_is_clamped_with_a_warning_and_never_worse():
    """The couplings vanish linearly, so Newton reaches round-off of the parameters; an rtol below 10 eps could
    only be met by an exactly zero step (the search used all its solves and failed before the clamp).  Asking for
    1e-17 warns, runs at 10 eps and lands at least as close to the closed form (Friedrich & Wintgen 1985, above)
    as the default does: within 1e-14 relative (a few ulps of round-off in the residuals and the Jacobian solve)."""
    from rgftrans.analysis.bic2d import RTOL_FLOOR_2D
    from rgftrans.errors import PrecisionWarning

    default = locate_bic_2d(two_levels, (0.30, 0.30), (0.05, 0.05), E_STAR + 0.05)
    with pytest.warns(PrecisionWarning, match=r"rtol = 1e-17 is below what this search can deliver"):
        fine = locate_bic_2d(two_levels, (0.30, 0.30), (0.05, 0.05), E_STAR + 0.05, rtol=1e-17)
    exact = np.array([KAPPA_STAR, V_AR_STAR])
    err_fine = np.abs(fine.parameter - exact) / exact
    err_default = np.abs(default.parameter - exact) / exact
    assert np.all(err_fine <= np.maximum(err_default, 1e-14)) and err_fine.max() <= 1e-14
    assert RTOL_FLOOR_2D == pytest.approx(2.2e-15, rel=0.01)


def test_fano_collapse_data_on_the_two_level_bic():
    """The data behind the fano-collapse figure: the width closes as |p - p*|^2 (a simple zero of the coupling, see
    locate_bic_2d; Gamma / d^2 tends to a constant, 0.139 meV per unit kappa^2 here, and the three nearest distances
    agree to 1e-3 relative: the quartic correction is 2e-4 of it at d = 1e-4), the lines beside the BIC have a
    Fano zero and the BIC itself shows no line.  Each number is the one the figure used to compute itself (same
    recipe, same floating-point operations), so the figure is unchanged."""
    from rgftrans.analysis.darkstates import fano_collapse
    from rgftrans.spectra.poles import follow_pole

    bic = locate_bic_2d(two_levels, (0.30, 0.30), (0.05, 0.05), E_STAR + 0.05)
    step = 0.04
    c = fano_collapse(two_levels, bic, step, parameter_unit="meV")
    assert c.shifts.tolist() == [0.04, 0.02, 0.01, 0.0] and c.parameter_unit == "meV"
    assert c.transmissions.shape == (4, 800) and c.distances == pytest.approx(step * np.geomspace(1e-3, 1.0, 13))
    ratio = c.widths_meV / c.distances**2
    assert np.ptp(ratio[:3]) <= 1e-3 * ratio[0]
    near = c.distances <= 0.1 * step
    assert np.polyfit(np.log(c.distances[near]), np.log(c.widths_meV[near]), 1)[0] == pytest.approx(2.0, abs=0.01)
    # The old figure's recipe, step by step.
    p1, p2 = bic.parameter
    seed = bic.state.astype(complex)
    poles = [follow_pole(two_levels(p1 + f * step, p2), bic.energy_meV, seed) for f in (1.0, 0.5, 0.25)]
    assert c.line_widths_meV[:3].tolist() == [r.width_meV for r in poles]
    assert c.centres_meV.tolist() == [r.energy_meV for r in poles] + [bic.energy_meV]
    half = 6 * max(r.width_meV for r in poles)
    assert np.array_equal(c.offsets_meV, np.linspace(-half, half, 800))
    for k, x in enumerate(c.shifts):
        t = transmission(two_levels(p1 + x, p2), c.centres_meV[k] + c.offsets_meV).transmission
        assert np.array_equal(c.transmissions[k], t), k
    x = c.distances[4]
    assert c.widths_meV[4] == follow_pole(two_levels(p1 + x, p2), bic.energy_meV, seed).width_meV
    # The physics the figure shows: a Fano zero beside the BIC (exact for real single-channel transport), none at it.
    assert c.transmissions[:3].min(axis=1).max() < 1e-5 and c.transmissions[:3].max(axis=1).min() > 0.9
    e, t_bic = c.offsets_meV, c.transmissions[-1]
    assert np.abs(t_bic - np.polyval(np.polyfit(e, t_bic, 2), e)).max() < 1e-9  # smooth background only


def test_grid_search_finds_the_closed_form_bic_once():
    g = search_grid(two_levels, np.linspace(0.2, 0.5, 7), np.linspace(0.2, 0.5, 7), [E_STAR + 0.05])
    assert len(g.bics) == 1 and g.candidates >= 1
    assert g.bics[0].parameter == pytest.approx([KAPPA_STAR, V_AR_STAR], rel=1e-6)
    # signs follow the state: the residual of lead R changes sign across v_aR* at fixed kappa
    col = g.residuals[0, 3, :, 1]
    assert np.all(np.isfinite(col)) and np.sign(col[0]) != np.sign(col[-1])


# --- An invented asymmetric dot: no symmetry, leads of different widths at different heights ------------------
def asymmetric_dot(v1, v2):
    """17 x 11 sites (tight-binding units, hopping 1); source rows 1-5 on the left, drain rows 5-8 on the right;
    two Gaussian gate bumps of heights v1, v2 at different places (an invented layout)."""
    def potential(x, y):
        return v1 * np.exp(-((x - 5) ** 2 + (y - 7) ** 2) / 8) + v2 * np.exp(-((x - 11) ** 2 + (y - 3) ** 2) / 8)
    leads = [Lead("source", "left", (1, 5)), Lead("drain", "right", (5, 8))]
    return Device(rectangle(0, 0, 16, 10), leads, lattice=square(1.0), hopping=1.0,
                  potential=potential).discretise()


@pytest.fixture(scope="module")
def dot_bic():
    return locate_bic_2d(asymmetric_dot, (-0.05, -0.25), (0.1, 0.1), 0.648)


def test_asymmetric_dot_has_an_accidental_bic(dot_bic):
    """Both leads open (one channel each, 0.382 < E < 1 in units of the hopping), width down >= 6 decades."""
    b = dot_bic
    assert b.n_open == (1, 1) and 2 - 2 * np.cos(np.pi / 5) < b.energy_meV < 1.0
    assert b.kind == "accidental" and b.orders_of_magnitude >= 6
    assert b.exponent == pytest.approx(2.0, abs=0.1)
    assert abs(b.width_meV) < 1e-12  # the independent pole solver: zero width to round-off
    assert "no symmetry is needed" in b.explanation


def test_asymmetric_dot_bic_is_reproducible_to_1e6(dot_bic):
    """Started elsewhere, Newton lands on the same point to the requested relative precision."""
    other = locate_bic_2d(asymmetric_dot, (-0.12, -0.20), (0.1, 0.1), 0.648)
    assert np.all(np.abs(other.parameter - dot_bic.parameter) <= 1e-6 * np.abs(dot_bic.parameter))


def test_fano_resonance_collapses_at_the_bic(dot_bic):
    """Beside the BIC the resonance shows in T(E) as a Fano line whose zero (exact: time-reversal symmetric single-
    channel transport has real transmission zeros, common practice, no source) and maximum merge as the width
    closes like delta^2; at the BIC T(E) shows no line at all."""
    import scipy.optimize as so

    p1, p2 = dot_bic.parameter
    seps = []
    for delta in (0.02, 0.01, 0.005):
        model = asymmetric_dot(p1 + delta, p2)
        pole = resonances(model, dot_bic.energy_meV, count=1)[0]
        w = pole.width_meV

        def t_of(e):
            return transmission(model, [e]).transmission[0]

        lo = so.minimize_scalar(t_of, bracket=(pole.energy_meV - 3 * w, pole.energy_meV + 3 * w), tol=1e-12)
        hi = so.minimize_scalar(lambda e: -t_of(e), bracket=(pole.energy_meV - 3 * w, pole.energy_meV + 3 * w),
                                tol=1e-12)
        assert lo.fun < 1e-9  # the zero of the Fano line
        assert -hi.fun > 0.95  # its maximum (0.992 here: below 1 because nothing makes the reflection vanish)
        seps.append(abs(hi.x - lo.x))
    assert seps[0] / seps[1] == pytest.approx(4.0, rel=0.1) and seps[1] / seps[2] == pytest.approx(4.0, rel=0.1)
    at = asymmetric_dot(p1, p2)
    e = dot_bic.energy_meV + np.linspace(-1e-5, 1e-5, 40)  # even count: E* itself (a real pole) is not sampled
    t = transmission(at, e).transmission
    assert t.min() > 0.9  # the zero has gone with the line
    smooth = np.polyval(np.polyfit(e - e.mean(), t, 2), e - e.mean())
    assert np.abs(t - smooth).max() < 1e-9  # smooth background only; the 4e-7 meV wide line at delta = 0.005
    # would leave residuals of order 1 in this window


def test_search_needs_time_reversal_symmetry():
    field = MagneticField(0.5)
    model = Device(rectangle(0, 0, 10, 6), [Lead("a", "left", (1, 3)), Lead("b", "right", (2, 5))],
                   lattice=square(1.0), hopping=1.0, field=field).discretise()
    with pytest.raises(RgftransError, match="time-reversal"):
        coupling_residuals(model, 0.6)


def test_wrong_channel_count_is_one_line():
    with pytest.raises(RgftransError, match="one open channel in each of two leads") as err:
        locate_bic_2d(asymmetric_dot, (0.0, 0.0), (0.1, 0.1), 1.5)  # both leads have two channels at 1.5
    assert "\n" not in str(err.value)


# --- Search of a stored sweep over two gate voltages, from the command line ----------------------------------------
GATED_PLANE = """
# invented: the asymmetric dot above (tight-binding units) tuned by two gates over opposite corners
[lattice]
kind = "square"
spacing_nm = 1.0
hopping_meV = 1.0
[geometry]
rectangle_nm = [0.0, 0.0, 16.0, 10.0]
[gates]
depth_nm = 2.0
[[gates.gate]]
name = "a"
rectangle_nm = [3.0, 5.0, 8.0, 9.0]
voltage_V = 0.0
[[gates.gate]]
name = "b"
rectangle_nm = [9.0, 1.0, 14.0, 5.0]
voltage_V = 0.0
[[leads]]
name = "source"
side = "left"
span_nm = [1.0, 5.0]
[[leads]]
name = "drain"
side = "right"
span_nm = [5.0, 8.0]
[energy]
start_meV = 0.40
stop_meV = 0.98
points = 30
[[sweep.axis]]
parameter = "gates.a.voltage_V"
start = -0.0004
stop = 0.0004
points = 5
[[sweep.axis]]
parameter = "gates.b.voltage_V"
start = -0.0004
stop = 0.0004
points = 5
[output]
path = "{path}"
"""


def test_command_line_plane_search(tmp_path, capsys):
    """One command searches the stored plane, prints and stores each BIC; every BIC it reports is checked
    independently with the pole solver on the rebuilt device (zero width to round-off, both leads open)."""
    import h5py

    from rgftrans.cli import main
    from rgftrans.io.config import load_config

    cfg_path = tmp_path / "plane.toml"
    cfg_path.write_text(GATED_PLANE.format(path=tmp_path / "plane.h5"))
    assert main(["run", str(cfg_path), "--quiet", "--workers", "1"]) == 0
    assert main(["darkstates", str(tmp_path / "plane.h5"), "--out-prefix", str(tmp_path / "ds")]) == 0
    out = capsys.readouterr().out
    assert "BIC 0 (accidental)" in out and "Q one grid step away" in out and "why: dark state" in out
    cfg = load_config(cfg_path)
    with h5py.File(tmp_path / "plane.h5", "r") as f:
        g = f["darkstates"]
        assert g.attrs["kind"] == "plane" and g["residuals"].shape[1:] == (5, 5, 2)
        bics = [g[k] for k in g if k.startswith("bic_")]
        assert bics
        for b in bics:
            v_a, v_b = b["parameter"][()]
            assert abs(v_a) <= 4e-4 and abs(v_b) <= 4e-4 and b["orders_of_magnitude"][()] >= 6
            model = cfg.build_device({"gates.a.voltage_V": v_a, "gates.b.voltage_V": v_b}).discretise()
            pole = resonances(model, float(b["energy"][()]), count=1)[0]
            assert abs(pole.width_meV) < 1e-12 and pole.n_open == (1, 1)
    for name in ("plane", "fano_collapse", "dark_state"):
        assert (tmp_path / f"ds_{name}.png").stat().st_size > 0


def test_plane_search_refuses_a_one_axis_sweep(tmp_path):
    from rgftrans.io.searches import search_sweep_plane
    from rgftrans.cli import main

    text = GATED_PLANE.format(path=tmp_path / "line.h5")
    text = text[:text.index('[[sweep.axis]]\nparameter = "gates.b')] + f'[output]\npath = "{tmp_path / "line.h5"}"\n'
    (tmp_path / "line.toml").write_text(text)
    assert main(["run", str(tmp_path / "line.toml"), "--quiet", "--workers", "1"]) == 0
    with pytest.raises(RgftransError, match="needs exactly two"):
        search_sweep_plane(tmp_path / "line.h5")
