"""Closed-system levels (rgftrans.spectra.closed): the model's H without its leads, or a region of it.

References and tolerances
-------------------------
* scipy.linalg.eigh on the dense matrix (reference library): levels to 1e-10 t and the spanned subspaces to 1e-8.
  Both routes are backward stable; shift-invert adds the round-off of one sparse LU (1e-14 t here), 1e-10 leaves
  room for other BLAS builds.  Eigenvectors of a level are defined up to a phase (and, in a degenerate cluster,
  up to a rotation), so states are compared through the projector onto the cluster's span; its error is the
  eigenvalue error over the gap to the next level (Davis-Kahan, from memory), 1e-8 for gaps above 1e-3 t.
* A hard-wall Nx x Ny box on the square lattice (onsite 4t, hopping -t) has the exact levels
  E = 4t - 2t cos(pi m / (Nx + 1)) - 2t cos(pi n / (Ny + 1)), m = 1..Nx, n = 1..Ny (common practice, exact for the
  lattice: the product of the chains' standing waves sin(pi m x / (Nx + 1)) sin(pi n y / (Ny + 1))).  Tolerance
  1e-10 t, round-off as above.
"""

from __future__ import annotations

import numpy as np
import pytest
import scipy.linalg as sla
import scipy.sparse as sp

from rgftrans.errors import GeometryError, RgftransError
from rgftrans.spectra.closed import closed_levels
from rgftrans.spectra.eigen import DENSE_BELOW
from rgftrans.spectra.poles import resonances
from rgftrans.system.device import Device, Lead, TightBindingModel
from rgftrans.system.geometry import disk, rectangle
from rgftrans.system.lattices import square

#: Hopping of the boxes (meV).
T = 1.0
#: Agreement with the dense decomposition and with the closed form (in units of t; see the module docstring).
LEVEL_TOL = 1e-10
SUBSPACE_TOL = 1e-8


def box(nx: int, ny: int, potential=0.0) -> TightBindingModel:
    """An nx x ny square-lattice box (a = 1 nm, t = 1 meV) with two leads; closed_levels cuts the leads off."""
    dev = Device(rectangle(0, 0, nx - 1, ny - 1), [Lead("left", "left", (0, ny - 1)),
                                                    Lead("right", "right", (0, ny - 1))],
                 lattice=square(1.0), hopping=T, potential=potential)
    return dev.discretise()


def box_levels(nx: int, ny: int) -> np.ndarray:
    """Sorted exact levels of the hard-wall nx x ny box (module docstring)."""
    m = np.arange(1, nx + 1)[:, None]
    n = np.arange(1, ny + 1)[None, :]
    return np.sort((4 * T - 2 * T * np.cos(np.pi * m / (nx + 1)) - 2 * T * np.cos(np.pi * n / (ny + 1))).ravel())


def _bumpy(x, y):
    """A smooth invented potential (meV) that lifts every degeneracy of the box."""
    return 0.3 * np.sin(0.37 * x + 0.11) * np.cos(0.23 * y) + 0.05 * x / 20


@pytest.mark.parametrize("nx, ny", [(7, 5), (23, 17)], ids=["dense-route", "shift-invert-route"])
def test_lowest_levels_of_a_box_are_the_closed_form(nx, ny):
    model = box(nx, ny)
    assert (model.n_orbitals < DENSE_BELOW) == (nx * ny < DENSE_BELOW)
    found = closed_levels(model, count=8)
    assert np.abs(found.energies_meV - box_levels(nx, ny)[:8]).max() <= LEVEL_TOL * T
    assert np.isnan(found.target_meV) and found.count == 8


def test_levels_near_a_target_in_a_box_are_the_closed_form():
    nx, ny = 23, 17
    exact = box_levels(nx, ny)
    target = 2.3  # inside the dense part of the spectrum, not on a level
    near = np.sort(exact[np.argsort(np.abs(exact - target))[:6]])
    found = closed_levels(box(nx, ny), count=6, target=target)
    assert np.abs(found.energies_meV - near).max() <= LEVEL_TOL * T
    assert found.target_meV == target


def test_the_box_ground_state_is_the_product_of_standing_waves():
    """psi(x, y) = sin(pi x' / (Nx + 1)) sin(pi y' / (Ny + 1)), x' = 1..Nx (exact, module docstring):
    |<exact|psi>| = 1 to 1e-8 (the ground state is non-degenerate, gap 0.02 t)."""
    nx, ny = 23, 17
    found = closed_levels(box(nx, ny), count=1)
    x, y = found.positions_nm.T
    exact = np.sin(np.pi * (x + 1) / (nx + 1)) * np.sin(np.pi * (y + 1) / (ny + 1))
    exact /= np.linalg.norm(exact)
    assert abs(abs(np.vdot(exact, found.states[:, 0])) - 1) <= SUBSPACE_TOL
    assert found.densities[:, 0].sum() == pytest.approx(1.0, abs=1e-12)


@pytest.mark.parametrize("target", [None, 3.1], ids=["lowest", "near-target"])
def test_agrees_with_the_dense_decomposition(target):
    """A 24 x 15 box (360 sites, shift-invert route) with a potential: levels and states against scipy eigh."""
    model = box(24, 15, potential=_bumpy)
    assert model.n_orbitals >= DENSE_BELOW
    found = closed_levels(model, count=7, target=target)
    w, v = sla.eigh(model.hamiltonian.toarray())
    pick = np.arange(7) if target is None else np.sort(np.argsort(np.abs(w - target))[:7])
    assert np.abs(found.energies_meV - w[pick]).max() <= LEVEL_TOL * T
    for k, j in enumerate(pick):
        gap = min(abs(w[j] - w[i]) for i in range(len(w)) if i != j)
        assert gap > 1e-3 * T  # the potential lifted the degeneracies, so each state is defined up to a phase
        assert abs(abs(np.vdot(v[:, j], found.states[:, k])) - 1) <= SUBSPACE_TOL
    assert np.allclose(np.linalg.norm(found.states, axis=0), 1.0, atol=1e-12)


def test_forced_dense_and_forced_shift_invert_agree_on_a_degenerate_box():
    """A square box has pairs (m, n), (n, m) of equal levels; both routes find both members (exact levels) as
    orthonormal states spanning the same plane (ARPACK alone returned the pair with overlap 0.96 before the
    eigen helper re-orthonormalised degenerate clusters)."""
    model = box(18, 18)
    dense = closed_levels(model, count=6, dense=True)
    sparse = closed_levels(model, count=6, dense=False)
    exact = box_levels(18, 18)[:6]
    assert np.abs(dense.energies_meV - exact).max() <= LEVEL_TOL * T
    assert np.abs(sparse.energies_meV - exact).max() <= LEVEL_TOL * T
    for found in (dense, sparse):
        assert np.abs(found.states.conj().T @ found.states - np.eye(6)).max() <= 1e-12
    # the degenerate pair spans the same plane either way
    pair = slice(1, 3)
    p_dense = dense.states[:, pair] @ dense.states[:, pair].conj().T
    p_sparse = sparse.states[:, pair] @ sparse.states[:, pair].conj().T
    assert np.abs(p_dense - p_sparse).max() <= SUBSPACE_TOL


def test_a_region_cut_out_of_the_device_has_the_levels_of_the_smaller_box():
    """Restricting a 30 x 12 strip to x in [5, 14] leaves a hard-wall 10 x 12 box: its exact levels."""
    model = box(30, 12)
    found = closed_levels(model, count=5, within=rectangle(5, 0, 14, 11), region_name="dot")
    assert np.abs(found.energies_meV - box_levels(10, 12)[:5]).max() <= LEVEL_TOL * T
    assert len(found.site_indices) == 120 and found.positions_nm[:, 0].min() == 5 and found.region_name == "dot"
    assert found.states.shape == (120, 5)


def test_weight_inside_a_region_follows_the_standing_wave():
    """Weight of the exact ground state of a 20 x 9 box on its left half x' <= 10: 1/2 by mirror symmetry, and the
    second level (one node across x) likewise; on the left quarter the closed form sum of sin^2 (exact, 1e-12)."""
    nx, ny = 20, 9
    found = closed_levels(box(nx, ny), count=2, weigh_in=rectangle(-0.5, -1, 9.5, ny))
    assert found.weights_inside == pytest.approx([0.5, 0.5], abs=1e-12)
    quarter = closed_levels(box(nx, ny), count=1, weigh_in=rectangle(-0.5, -1, 4.5, ny))
    xs = np.arange(1, nx + 1)
    s2 = np.sin(np.pi * xs / (nx + 1)) ** 2
    assert quarter.weights_inside[0] == pytest.approx(s2[:5].sum() / s2.sum(), abs=1e-12)
    assert closed_levels(box(nx, ny), count=2).weights_inside.tolist() == [1.0, 1.0]


def test_spin_orbitals_double_every_level():
    """With spin orbitals and no field each level appears twice; densities are per site, summed over spin."""
    dev = Device(rectangle(0, 0, 6, 4), [Lead("l", "left", (0, 4)), Lead("r", "right", (0, 4))],
                 lattice=square(1.0), hopping=T, spin=True)
    found = closed_levels(dev.discretise(), count=4)
    assert np.abs(found.energies_meV - np.repeat(box_levels(7, 5)[:2], 2)).max() <= LEVEL_TOL * T
    assert found.states.shape == (70, 4) and found.densities.shape == (35, 4)
    assert found.densities.sum(axis=0) == pytest.approx(np.ones(4), abs=1e-12)


def test_resonances_of_a_model_without_leads_are_its_closed_levels():
    """The pole solver on a model stripped of its leads (400 sites: the shift-invert route) returns the closed
    levels as zero-width poles rather than failing on an empty list of self-energies."""
    model = box(20, 20, potential=_bumpy)
    bare = TightBindingModel(model.hamiltonian, model.positions, ())
    poles = resonances(bare, 2.0, count=3)
    levels = closed_levels(model, count=3, target=2.0)
    assert sorted(r.energy_meV for r in poles) == pytest.approx(levels.energies_meV.tolist(), abs=LEVEL_TOL)
    assert all(r.width_meV == 0.0 and r.n_open == () and not r.in_continuum for r in poles)


@pytest.mark.parametrize("kwargs, match", [
    (dict(count=0), "count of closed levels must be a positive integer, got 0"),
    (dict(count=2.5), "count of closed levels must be a positive integer, got 2.5"),
    (dict(count=100), "count = 100 closed levels asked for, but the closed system has only 35 orbitals"),
    (dict(target=float("nan")), "target of closed_levels must be a finite real energy in meV, got nan"),
    (dict(target=1j), "target of closed_levels must be a finite real energy in meV"),
])
def test_bad_requests_are_one_line_errors(kwargs, match):
    with pytest.raises(RgftransError, match=match) as info:
        closed_levels(box(7, 5), **kwargs)
    assert "\n" not in str(info.value)


def test_a_region_without_sites_is_refused():
    with pytest.raises(GeometryError, match=r"holds none of the model's sites .*; move or enlarge the region"):
        closed_levels(box(7, 5), within=disk((50.0, 50.0), 3.0))


def test_an_absorbing_model_is_refused():
    model = box(7, 5)
    lossy = TightBindingModel(model.hamiltonian - 0.01j * sp.eye(35), model.positions, ())
    with pytest.raises(RgftransError, match="not Hermitian and has no closed levels; use spectra.resonances"):
        closed_levels(lossy)


def test_level_index_out_of_range_is_one_line():
    found = closed_levels(box(7, 5), count=2)
    assert found.density(-1).shape == (35,)
    with pytest.raises(RgftransError, match=r"level 5 is not one of the 2 levels found; give an index 0..1"):
        found.density(5)
