"""Poles and eigenstates: the one "eigenvalues near a target" helper and the pole solver on a model without leads.

The helper is checked against a full LAPACK decomposition (scipy.linalg.eig/eigh, common practice, no source) on
random matrices below and above the dense threshold, given dense and sparse.  Tolerance: 1e-10 of the matrix's
largest entry; both routes are backward stable, so they differ by round-off of the shift-invert solve (the LU of
A - sigma and the Arnoldi/Lanczos iterations), at most 1e-14 here (eigenvalues and eigenvector residuals) for
random matrices whose eigenvalues are well conditioned; 1e-10 leaves room for less favourable seeds and BLAS builds.
"""

from __future__ import annotations

import numpy as np
import pytest
import scipy.linalg as sla
import scipy.sparse as sp
import scipy.sparse.linalg as spla

from rgftrans.errors import EigenSolveFailed, RgftransError
from rgftrans.spectra.eigen import DENSE_BELOW, eigenvalues_near
from rgftrans.spectra.poles import effective_hamiltonian, follow_pole, resonances, window_poles
from rgftrans.system.device import TightBindingModel

#: Agreement with the dense reference, relative to the largest matrix entry (see the module docstring).
RTOL = 1e-10
COUNT = 6


def _random_matrix(n: int, hermitian: bool, seed: int) -> sp.csr_matrix:
    """A sparse random matrix (about 8 entries a row plus the diagonal), complex; Hermitian if asked."""
    rng = np.random.default_rng(seed)
    a = sp.random(n, n, density=min(1.0, 8.0 / n), random_state=rng, format="csr")
    a = a + 1j * sp.random(n, n, density=min(1.0, 8.0 / n), random_state=rng, format="csr")
    a = a + sp.diags(rng.uniform(-4.0, 4.0, n))
    if hermitian:
        a = 0.5 * (a + a.conj().T)
    return a.tocsr()


@pytest.mark.parametrize("form", ["sparse", "dense"])
@pytest.mark.parametrize("hermitian", [False, True], ids=["general", "hermitian"])
@pytest.mark.parametrize("n", [DENSE_BELOW // 4, DENSE_BELOW + 100], ids=["below-threshold", "above-threshold"])
def test_agrees_with_a_full_dense_decomposition(n, hermitian, form):
    a = _random_matrix(n, hermitian, seed=n + hermitian)
    target = 0.37 if hermitian else 0.37 + 0.05j
    matrix = a if form == "sparse" else a.toarray()
    w, v = eigenvalues_near(matrix, target, COUNT, hermitian=hermitian)
    full = sla.eigvalsh(a.toarray()) if hermitian else sla.eigvals(a.toarray())
    reference = full[np.argsort(np.abs(full - target))[:COUNT]]
    scale = abs(a).max()
    assert w.shape == (COUNT,) and v.shape == (n, COUNT)
    assert np.all(np.diff(np.abs(w - target)) >= 0)  # nearest first
    assert np.abs(w - reference).max() <= RTOL * scale
    if hermitian:
        assert np.isrealobj(w)
    assert np.linalg.norm(a @ v - v * w, axis=0).max() <= RTOL * scale  # each column is an eigenvector
    assert np.allclose(np.linalg.norm(v, axis=0), 1.0, atol=1e-12)
    w_only, none = eigenvalues_near(matrix, target, COUNT, hermitian=hermitian, vectors=False)
    assert none is None and np.abs(w_only - w).max() <= RTOL * scale


def test_target_exactly_on_an_eigenvalue_above_the_threshold():
    """The shifted matrix is singular there; the helper moves the shift a hair and still returns that level."""
    levels = np.arange(DENSE_BELOW + 50, dtype=float)
    w, v = eigenvalues_near(sp.diags(levels).tocsr(), 120.0, 3, hermitian=True)
    assert w[0] == pytest.approx(120.0, abs=1e-9) and sorted(w[1:]) == pytest.approx([119.0, 121.0], abs=1e-9)
    assert abs(v[120, 0]) == pytest.approx(1.0, abs=1e-9)


@pytest.mark.parametrize("hermitian, solver", [(False, "eigs"), (True, "eigsh")])
def test_arpack_failure_is_one_line_with_advice(monkeypatch, hermitian, solver):
    def no_convergence(*args, **kwargs):
        raise spla.ArpackNoConvergence("ARPACK error -1: No convergence (1201 iterations, 2/6 eigenvectors "
                                       "converged)", np.zeros(2), np.zeros((10, 2)))

    monkeypatch.setattr(spla, solver, no_convergence)
    a = _random_matrix(DENSE_BELOW + 20, hermitian, seed=3)
    with pytest.raises(EigenSolveFailed) as info:
        eigenvalues_near(a, 0.5, COUNT, hermitian=hermitian)
    message = str(info.value)
    assert "\n" not in message
    assert "did not converge" in message and f"{a.shape[0]} x {a.shape[0]}" in message
    assert "2 of 6 eigenvalues found" in message and "ask for fewer or more eigenvalues" in message
    assert "dense=True" in message


@pytest.mark.parametrize("hermitian", [False, True], ids=["general", "hermitian"])
def test_arpack_that_really_does_not_converge_is_one_line(hermitian):
    """No mock: one restart (maxiter=1) is too few for twelve shift-invert eigenvalues of this random 320 x 320
    matrix, so ARPACK itself raises ArpackNoConvergence (20 of 20 repeated runs failed, whatever ARPACK's random
    start vector; common practice, no source); the helper turns it into one EigenSolveFailed line with the advice,
    and the dense route gives the answer."""
    a = _random_matrix(DENSE_BELOW + 20, hermitian, seed=6)
    target = 0.37 if hermitian else 0.37 + 0.05j
    with pytest.raises(EigenSolveFailed) as info:
        eigenvalues_near(a, target, 2 * COUNT, hermitian=hermitian, maxiter=1)
    message = str(info.value)
    assert "\n" not in message and "did not converge" in message and "in 1 restarts" in message
    assert "raise maxiter" in message and "dense=True" in message and "degenerate" in message
    w, _ = eigenvalues_near(a, target, COUNT, hermitian=hermitian, dense=True, vectors=False)
    full = sla.eigvalsh(a.toarray()) if hermitian else sla.eigvals(a.toarray())
    assert np.abs(w - full[np.argsort(np.abs(full - target))[:COUNT]]).max() <= RTOL * abs(a).max()


@pytest.mark.parametrize("maxiter", [0, -3, 2.5, True])
def test_bad_maxiter_is_refused(maxiter):
    with pytest.raises(RgftransError, match="maxiter of the eigenvalue search must be a positive integer"):
        eigenvalues_near(np.eye(3), 0.0, 1, maxiter=maxiter)


def test_arpack_breakdown_is_one_line(monkeypatch):
    def breakdown(*args, **kwargs):
        raise spla.ArpackError(-9999)

    monkeypatch.setattr(spla, "eigs", breakdown)
    with pytest.raises(EigenSolveFailed, match=r"broke down .*; move the target slightly") as info:
        eigenvalues_near(_random_matrix(DENSE_BELOW + 20, False, seed=4), 0.5, 2)
    assert "\n" not in str(info.value)


@pytest.mark.parametrize("count, target, match", [(0, 0.0, "count of eigenvalues must be at least 1, got 0"),
                                                  (2, np.nan, "must be a finite number, got nan")])
def test_bad_requests_are_refused(count, target, match):
    with pytest.raises(RgftransError, match=match):
        eigenvalues_near(np.eye(3), target, count)


# --- A model without leads: its poles are its closed levels (documented in rgftrans.spectra.poles) -------------

def _closed_chain(n: int = 12) -> TightBindingModel:
    """An open-ended tight-binding chain of n sites, hopping -1, no leads: levels -2 cos(k pi / (n + 1))."""
    ham = sp.diags([-np.ones(n - 1), -np.ones(n - 1)], [-1, 1]).tocsr()
    return TightBindingModel(ham, np.column_stack([np.arange(n, dtype=float), np.zeros(n)]), ())


def test_no_leads_gives_the_closed_levels_as_zero_width_poles():
    model = _closed_chain()
    levels = -2 * np.cos(np.arange(1, 13) * np.pi / 13)  # the chain's closed form (common practice, no source)
    found = resonances(model, 0.3, count=3)
    expected = levels[np.argsort(np.abs(levels - 0.3))[:3]]
    assert [r.energy_meV for r in found] == pytest.approx(sorted(expected, key=lambda e: abs(e - 0.3)), abs=1e-12)
    for r in found:
        assert r.width_meV == 0.0 and r.q_factor == np.inf
        assert r.n_open == () and not r.in_continuum and r.converged and r.iterations == 0
        h = model.hamiltonian
        assert np.linalg.norm(h @ r.state - r.energy_meV * r.state) < 1e-12
    assert abs(effective_hamiltonian(model, 0.3) - model.hamiltonian).max() == 0
    followed = follow_pole(model, found[1].energy_meV, found[1].state)
    assert followed.energy_meV == pytest.approx(found[1].energy_meV, abs=1e-12) and followed.width_meV == 0.0
    assert window_poles(model, (-2.0, 2.0)).shape == (0, 2)  # only poles of non-zero width are listed


def _square_box_laplacian(n: int) -> sp.csr_matrix:
    """The n x n hard-wall square-lattice box, hopping -1, onsite 4: levels (m, k) and (k, m) are equal."""
    chain = sp.diags([-np.ones(n - 1), -np.ones(n - 1)], [-1, 1])
    eye = sp.eye(n)
    return (sp.kron(chain, eye) + sp.kron(eye, chain) + 4 * sp.eye(n * n)).tocsr()


def test_degenerate_levels_come_back_orthonormal_from_shift_invert():
    """ARPACK's two copies of a doubly degenerate level need not be orthogonal; the helper re-diagonalises the
    cluster in an orthonormal basis of its span.  Reference: the dense decomposition (projector onto the pair,
    1e-10: round-off over the gap 0.08 to the next level, Davis-Kahan, from memory)."""
    a = _square_box_laplacian(18)  # 324 rows: shift-invert route
    w, v = eigenvalues_near(a, 0.0, 6, hermitian=True)
    assert np.abs(v.conj().T @ v - np.eye(6)).max() <= 1e-12
    assert np.linalg.norm(a @ v - v * w, axis=0).max() <= RTOL * 8
    full_w, full_v = sla.eigh(a.toarray())
    pair = np.flatnonzero(np.abs(w - full_w[1]) < 1e-9)
    assert len(pair) == 2
    projector = v[:, pair] @ v[:, pair].conj().T
    assert np.abs(projector - full_v[:, 1:3] @ full_v[:, 1:3].T).max() <= RTOL


def test_a_degenerate_copy_returned_twice_is_one_line(monkeypatch):
    """If ARPACK hands back the same vector twice for a degenerate level, nothing spans the second direction: a
    one-line EigenSolveFailed advising dense=True instead of a silently missing state."""
    a = _square_box_laplacian(18)
    real_eigsh = spla.eigsh

    def duplicate(*args, **kwargs):
        w, v = real_eigsh(*args, **kwargs)
        order = np.argsort(w)
        w, v = w[order], v[:, order]
        v[:, 2] = v[:, 1]  # the second member of the first degenerate pair replaced by the first
        return w, v

    monkeypatch.setattr(spla, "eigsh", duplicate)
    with pytest.raises(EigenSolveFailed, match=r"returned 2 vectors for the degenerate level .* span only 1 "
                                               r"directions; pass dense=True") as info:
        eigenvalues_near(a, 0.0, 4, hermitian=True)
    assert "\n" not in str(info.value)
