"""Dark states: poles, Fano fits, BIC location and the reasons a state is dark."""

from __future__ import annotations

import numpy as np
import pytest
import scipy.sparse as sp

from rgftrans.analysis.darkstates import coupling_diagnostics, find_resonances, fit_fano, locate_bic, track_resonance
from rgftrans.spectra.poles import resonances
from rgftrans.system.device import Device, Lead, LeadModel, TightBindingModel
from rgftrans.errors import RgftransError
from rgftrans.system.geometry import rectangle
from rgftrans.system.lattices import square
from rgftrans.transport.rgf import transmission

# Two dot levels a, b side-coupled (v_a, v_b) to site c of an infinite chain (hopping -1), coupled to each other
# by kappa.  Through the single site c the dot sees ONE continuum.  Friedrich & Wintgen, Phys. Rev. A 32, 3231
# (1985) (from memory): a bound state in the continuum exists when kappa (v_a^2 - v_b^2) = v_a v_b (e_a - e_b).
# Our derivation for this model: the dark combination is x = (v_b, -v_a) (it has no amplitude on c), and x is an
# eigenvector of [[e_a, kappa], [kappa, e_b]] exactly at kappa* = v_a v_b (e_a - e_b) / (v_a^2 - v_b^2), with
# energy E* = e_a - kappa* v_a / v_b.
V_A, V_B, E_A, E_B = 0.3, 0.2, 0.5, 0.2
KAPPA_STAR = V_A * V_B * (E_A - E_B) / (V_A**2 - V_B**2)
E_STAR = E_A - KAPPA_STAR * V_A / V_B


def _chain_lead(name):
    return LeadModel(name, np.zeros((1, 1)), -np.ones((1, 1)), np.array([0]), -np.ones((1, 1)), np.zeros((1, 2)),
                     np.array([1.0, 0.0]))


def side_coupled(kappa):
    ham = np.array([[0.0, V_A, V_B], [V_A, E_A, kappa], [V_B, kappa, E_B]], dtype=complex)
    return TightBindingModel(sp.csr_matrix(ham), np.array([[0.0, 0.0], [0.0, 1.0], [0.0, 2.0]]),
                             (_chain_lead("left"), _chain_lead("right")))


def test_closed_form_is_inside_the_band():
    assert KAPPA_STAR == pytest.approx(0.36) and -2 < E_STAR < 2  # the BIC sits in the continuum [-2, 2]


def test_friedrich_wintgen_bic_found_to_1e6():
    loc = locate_bic(side_coupled, 0.25, 0.5, E_STAR + 0.02, rtol=1e-6)
    assert loc.kind == "accidental"
    assert abs(loc.parameter - KAPPA_STAR) <= 1e-6 * KAPPA_STAR  # the required precision
    assert loc.energy_meV == pytest.approx(E_STAR, abs=1e-6)
    assert loc.orders_of_magnitude >= 6  # the width collapses by six decades or more
    assert loc.exponent == pytest.approx(2.0, abs=0.1)  # Gamma ~ (kappa - kappa*)^2 on both sides
    assert loc.solves <= 120 and loc.resonance.in_continuum


def test_rtol_below_the_quadratic_floor_is_clamped_with_a_warning_and_never_worse():
    """A width vanishing as (kappa - kappa*)^2 and known to round-off eps t pins kappa* to about sqrt(eps) = 1.5e-8
    relative (Brent 1973, from memory; see locate_bic).  Asking for 1e-10 warns, runs at the floor and lands at
    least as close to the closed-form kappa* (Friedrich & Wintgen 1985, above) as the default 1e-6 does, and within
    the floor itself (1.5e-8 relative: the tolerance the search promises)."""
    from rgftrans.analysis.darkstates import BIC_RTOL_FLOOR
    from rgftrans.errors import PrecisionWarning

    default = locate_bic(side_coupled, 0.25, 0.5, E_STAR + 0.02)
    with pytest.warns(PrecisionWarning, match=r"rtol = 1e-10 is below what this search can deliver \(1\.5e-08: .*"
                                              r"sqrt\(eps\).*using rtol = 1\.5e-08") as record:
        fine = locate_bic(side_coupled, 0.25, 0.5, E_STAR + 0.02, rtol=1e-10)
    assert len(record) == 1 and "\n" not in str(record[0].message)
    assert abs(fine.parameter - KAPPA_STAR) <= abs(default.parameter - KAPPA_STAR)
    assert abs(fine.parameter - KAPPA_STAR) <= BIC_RTOL_FLOOR * KAPPA_STAR
    assert fine.width_meV <= default.width_meV and fine.solves <= 120


@pytest.mark.parametrize("rtol", [0.0, -1e-6, 1.0, float("nan"), "1e-6"])
def test_rtol_that_is_not_a_relative_precision_is_refused(rtol):
    with pytest.raises(RgftransError, match=r"rtol must be a relative precision between 0 and 1 \(e\.g\. 1e-6\), got"):
        locate_bic(side_coupled, 0.25, 0.5, E_STAR, rtol=rtol)


def test_a_model_without_leads_has_no_bic_to_locate():
    bare = side_coupled(0.3)
    closed = TightBindingModel(bare.hamiltonian, bare.positions, ())
    with pytest.raises(RgftransError, match=r"has no leads: its levels are bound states of zero width, not bound "
                                            r"states in the continuum; .*spectra\.closed_levels"):
        locate_bic(lambda kappa: closed, 0.25, 0.5, E_STAR)


def test_diagnostics_see_the_degeneracy_condition():
    """One continuum: the coupling condition holds trivially; the FW residual is what vanishes at kappa*."""
    off = coupling_diagnostics(side_coupled(0.2), E_STAR)
    assert off.coupling_mismatch < 1e-12 and off.degeneracy_residual > 1e-3
    assert "degeneracy condition not met" in off.verdict
    near = coupling_diagnostics(side_coupled(KAPPA_STAR * (1 + 1e-4)), E_STAR)
    assert near.degeneracy_residual < off.degeneracy_residual * 1e-2


def test_pole_width_matches_the_fano_fit_of_an_isolated_resonance():
    """Away from the BIC the resonance is isolated and narrow: the width of the pole and the width fitted to T(E)
    with a Fano profile (Fano, Phys. Rev. 124, 1866 (1961), from memory) agree to 2 % (the self-energy varies
    slightly across the line, which a fixed-parameter Fano profile ignores)."""
    model = side_coupled(0.30)
    pole = resonances(model, E_STAR, count=1)[0]
    e = np.linspace(pole.energy_meV - 8 * pole.width_meV, pole.energy_meV + 8 * pole.width_meV, 401)
    fit = fit_fano(e, transmission(model, e).transmission, energy_guess=pole.energy_meV,
                   width_guess=pole.width_meV)
    assert fit.width_meV == pytest.approx(pole.width_meV, rel=0.02)
    assert fit.energy_meV == pytest.approx(pole.energy_meV, abs=0.05 * pole.width_meV)
    found = find_resonances(e, transmission(model, e).transmission)
    assert any(abs(f.energy_meV - pole.energy_meV) < pole.width_meV for f in found)


def test_coarse_grid_warns():
    from rgftrans.errors import ResolutionWarning

    model = side_coupled(0.30)
    pole = resonances(model, E_STAR, count=1)[0]
    e = np.linspace(pole.energy_meV - 0.2, pole.energy_meV + 0.2, 41)  # spacing 0.01 meV, far above the width
    assert pole.width_meV < 0.01 / 3
    with pytest.warns(ResolutionWarning, match="not resolved"):
        try:
            fit_fano(e, transmission(model, e).transmission, energy_guess=pole.energy_meV,
                     width_guess=pole.width_meV)
        except RgftransError:
            pass  # an unresolved line may also defeat the fit; the warning must come first either way


def symmetric_dot(length=19, potential=0.0):
    """A mirror-symmetric dot (11 rows, mirror line y = 5) with centred, equal leads of 5 rows (tight-binding units)."""
    region = rectangle(0, 0, length, 10)
    leads = [Lead("left", "left", (3, 7)), Lead("right", "right", (3, 7))]
    return Device(region, leads, lattice=square(1.0), hopping=1.0, potential=potential).discretise()


def odd_state_energy(model):
    """A closed-dot eigenstate odd under y -> 10 - y with energy in the one-channel window (0.27, 1.0)."""
    w, v = np.linalg.eigh(model.hamiltonian.toarray())
    mirror = np.array([np.flatnonzero((model.positions == [x, 10 - y]).all(axis=1))[0] for x, y in model.positions])
    for e, psi in zip(w, v.T):
        if 0.35 < e < 0.95 and np.allclose(psi[mirror], -psi, atol=1e-8):
            return e
    raise AssertionError("no odd state in the window")


@pytest.mark.parametrize("length", [17, 19, 21])
def test_symmetry_protected_bic_at_every_length(length):
    """Odd dot states cannot couple to the even single lead channel: their width is zero at every length
    (common practice, no source: parity selection rule)."""
    model = symmetric_dot(length)
    e_odd = odd_state_energy(model)
    pole = resonances(model, e_odd, count=1)[0]
    assert pole.in_continuum and pole.n_open == (1, 1)
    assert pole.width_meV < 1e-12
    assert coupling_diagnostics(model, e_odd).decoupled.any()


def test_search_reports_symmetry_protection():
    """Sweeping a symmetric parameter (a uniform potential) the dark state stays dark: reported as protected."""
    e_odd = odd_state_energy(symmetric_dot())
    loc = locate_bic(lambda u: symmetric_dot(potential=u), 0.0, 0.05, e_odd)
    assert loc.kind == "symmetry-protected"


def test_track_keeps_identity_through_the_bic():
    kappas = np.linspace(0.30, 0.42, 13)
    track = track_resonance(side_coupled, kappas, E_STAR)
    k = int(np.argmin(track.widths_meV))
    assert abs(kappas[k] - KAPPA_STAR) < 0.011  # the minimum of the tracked width is at the closed-form kappa*
    assert np.all(np.abs(np.diff(track.energies_meV)) < 0.05)  # no jump to the other, broad resonance


SIDE_GATE = """
# invented: a mirror-symmetric dot (tight-binding units) with a side gate that breaks the mirror symmetry
[lattice]
kind = "square"
spacing_nm = 1.0
hopping_meV = 1.0
[geometry]
rectangle_nm = [0.0, 0.0, 19.0, 10.0]
[gates]
depth_nm = 3.0
[[gates.gate]]
name = "side"
rectangle_nm = [6.0, 12.0, 13.0, 30.0]
voltage_V = 0.0
[[leads]]
name = "left"
side = "left"
span_nm = [3.0, 7.0]
[[leads]]
name = "right"
side = "right"
span_nm = [3.0, 7.0]
[energy]
start_meV = 0.35
stop_meV = 0.95
points = 61
[[sweep.axis]]
parameter = "gates.side.voltage_V"
start = -0.0002
stop = 0.0002
points = 5
[output]
path = "{path}"
"""


def test_command_line_search_of_a_stored_sweep(tmp_path, capsys):
    """A side gate breaks the mirror symmetry linearly in its voltage, so the odd state's width grows as V^2 and
    vanishes at V = 0: the search over the stored sweep must find the zero there, quadratic on both sides, store
    it in the file and draw it."""
    import h5py

    from rgftrans.cli import main

    cfg = tmp_path / "side_gate.toml"
    cfg.write_text(SIDE_GATE.format(path=tmp_path / "side_gate.h5"))
    assert main(["run", str(cfg), "--quiet", "--workers", "1"]) == 0
    e_odd = odd_state_energy(symmetric_dot(19))
    assert main(["darkstates", str(tmp_path / "side_gate.h5"), "--energy", str(e_odd),
                 "--out-prefix", str(tmp_path / "ds")]) == 0
    out = capsys.readouterr().out
    assert "BIC" in out and "Gamma ~ |p - p*|^2.0" in out
    with h5py.File(tmp_path / "side_gate.h5", "r") as f:
        p_star = float(f["darkstates/bic_0/parameter"][()])
        assert abs(p_star) < 1e-6 * 0.0004  # V = 0 to the search's relative precision of the interval
        assert f["darkstates/bic_0/orders_of_magnitude"][()] >= 6
        assert f["darkstates/track/width"].attrs["units"] == "meV"
    for name in ("width", "track", "dark_state"):
        assert (tmp_path / f"ds_{name}.png").stat().st_size > 0
