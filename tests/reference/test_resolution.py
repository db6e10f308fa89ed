"""Energy-grid resolution: unresolved-line warnings and adaptive refinement, on an exact Breit-Wigner line.

System: one dot site (onsite eps_d) between two semi-infinite chains (hopping -t, t = 1), coupled by t'.
Its transmission is exactly (lattice Breit-Wigner; standard lattice scattering, e.g. Datta, Electronic
Transport in Mesoscopic Systems, 1995, from memory)

    T(E) = t'^4 (4 - E^2) / [(E (1 - t'^2) - eps_d)^2 + t'^4 (4 - E^2)],

a line at E_res = eps_d / (1 - t'^2) with full width close to 2 t'^2 sqrt(4 - E_res^2) / (1 - t'^2).
"""

import math
import warnings

import numpy as np
import pytest

from _systems import chain_lead, hand_model
from rgftrans.errors import ResolutionWarning
from rgftrans.analysis.resolution import refine, refined_transmission, sharp_features, warn_unresolved_resonances
from rgftrans.transport.rgf import transmission
from rgftrans.analysis.thermal import conductance_on_grid

EPS_D, T_LINK = 0.33, 0.1
E_RES = EPS_D / (1 - T_LINK**2)
WIDTH = 2 * T_LINK**2 * math.sqrt(4 - E_RES**2) / (1 - T_LINK**2)  # ~0.039 (t = 1)


def exact(e):
    e = np.asarray(e, dtype=float)
    num = T_LINK**4 * (4 - e**2)
    return num / ((e * (1 - T_LINK**2) - EPS_D) ** 2 + num)


@pytest.fixture(scope="module")
def dot():
    return hand_model([[EPS_D]], [[0.0, 0.0]], [chain_lead("L", 0, link=T_LINK, direction=(-1.0, 0.0)),
                                               chain_lead("R", 0, link=T_LINK)])


def test_model_is_the_closed_form(dot):
    e = np.linspace(-1.5, 1.5, 301)
    # Exact lattice Breit-Wigner (module docstring; our own derivation of the closed form); one-site solve,
    # round-off only, 1e-12.
    assert np.allclose(transmission(dot, e).transmission, exact(e), atol=1e-12)


def test_refined_sampling_meets_its_tolerance(dot):
    tol = 1e-4
    with warnings.catch_warnings():
        warnings.simplefilter("error", ResolutionWarning)  # the refinement must converge, not be capped
        res = refined_transmission(dot, np.linspace(-1.0, 1.0, 11), tolerance=tol, max_points=5000)
    probe = np.random.default_rng(1).uniform(-1.0, 1.0, 4000)
    err = np.abs(np.interp(probe, res.energies, res.transmission) - exact(probe))
    # Midpoint test at tol bounds the piecewise-linear error by about tol on each final interval (it is the
    # maximum of the error for a locally quadratic function); allow 3 tol for the line's non-quadratic flanks.
    assert err.max() < 3 * tol
    assert res.energies.size < 2000  # refinement concentrates on the line, it does not fill the window


def test_refined_thermal_conductance_matches_a_dense_grid(dot):
    tol, kT_K = 1e-4, 0.5  # k_B T = 0.043 meV (t = 1 meV): the line (width 0.039 meV) survives the smearing
    coarse = np.linspace(-1.5, 1.5, 31)
    s = refine(lambda x: exact(x), coarse, tolerance=tol, max_points=10000)
    assert s.converged
    dense = np.linspace(-1.5, 1.5, 300001)
    mu = np.linspace(-0.2, 0.8, 11)  # the window (14 k_B T each side) stays on the grid
    g_refined = conductance_on_grid(s.energies, s.values, [kT_K], mu=mu)[:, 0]
    g_dense = conductance_on_grid(dense, exact(dense), [kT_K], mu=mu)[:, 0]
    # The thermal average of an error bounded by ~tol is bounded by ~tol; the dense grid's own error is
    # h^2 max|T''| / 8 < 1e-8 at h = 1e-5.
    assert np.max(np.abs(g_refined - g_dense)) < 3 * tol
    g_coarse = conductance_on_grid(coarse, exact(coarse), [kT_K], mu=mu)[:, 0]
    assert np.max(np.abs(g_coarse - g_dense)) > 100 * tol  # the unrefined grid really aliases the line


def test_refinement_reports_when_capped():
    s = refine(exact, np.linspace(-1.0, 1.0, 11), tolerance=1e-6, max_points=40)
    assert not s.converged and s.energies.size <= 40 and s.max_error > 1e-6


def test_sharp_feature_found_on_a_coarse_grid_only():
    coarse = np.array([0.0, 0.1, 0.2, 0.3, E_RES, 0.4, 0.5])
    assert list(sharp_features(coarse, exact(coarse))) == [4]
    fine = np.linspace(0.0, 0.7, 701)  # 56 points per width: no sample jumps by 0.3
    assert sharp_features(fine, exact(fine)).size == 0


def test_pole_based_warning(dot):
    with pytest.warns(ResolutionWarning, match="narrower than 3 grid steps") as rec:
        bad = warn_unresolved_resonances(dot, np.linspace(-1.0, 1.0, 21))
    assert len(rec) == 1
    (e_pole, width, spacing), = bad
    # The pole sits on the line, to first order: the self-energy is taken at a sub-window centre up to 1/3
    # away, and Re Sigma = t'^2 E of the two chains shifts the pole by at most t'^2 / 3 = 3.3e-3 for that.
    assert e_pole == pytest.approx(E_RES, abs=T_LINK**2 / 3 * 1.01)
    # pole width vs the closed form's FWHM estimate, which is approximate (the lattice self-energy varies
    # across the line; 0.1-0.3 % in our chain-scattering checks) and the pole uses a sub-window's Sigma: 5 %.
    assert width == pytest.approx(WIDTH, rel=0.05)
    assert spacing == pytest.approx(0.1)
    with warnings.catch_warnings():
        warnings.simplefilter("error", ResolutionWarning)
        assert warn_unresolved_resonances(dot, np.linspace(-1.0, 1.0, 401)) == []
