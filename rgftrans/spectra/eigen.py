"""Eigenvalues of a matrix nearest a target: the one helper every pole and level search goes through.

Small matrices are decomposed densely (LAPACK ``geev``/``heevr`` through
:func:`scipy.linalg.eig`/:func:`scipy.linalg.eigh`): every eigenvalue, then
the ``count`` nearest the target are kept.  Large sparse ones use
shift-invert Arnoldi/Lanczos iterations (ARPACK through
:func:`scipy.sparse.linalg.eigs`/:func:`~scipy.sparse.linalg.eigsh` with
``sigma = target``): the eigenvalues of ``(A - sigma)^-1`` of largest
magnitude are those of ``A`` nearest ``sigma``.  Either way the result is the
same ``count`` eigenvalues, ordered by distance from the target, so callers
never see which route was taken; the two agree to round-off of the shift-invert
solve (about 1e-10 relative to the matrix's largest entry for well separated
eigenvalues).

A target that is exactly an eigenvalue makes the shifted matrix singular; the
shift is then moved by :data:`SHIFT_NUDGE` of the matrix scale (far below any
tolerance of the callers) and the solve repeated.  An ARPACK run that does not
converge becomes one line, :class:`rgftrans.errors.EigenSolveFailed`, with
advice: move the target off a cluster of (nearly) degenerate levels, ask for
fewer or more eigenvalues (the Krylov space grows with ``count``), or decompose
densely (``dense=True``; a full decomposition cannot fail to converge and costs
O(n^3), seconds for a few thousand rows).  ``maxiter`` caps ARPACK's restarts
(scipy's default, 10 n, when None).

Shift-invert Lanczos (ARPACK) resolves an exactly degenerate cluster only
through round-off: it may return fewer copies than exist, and the copies it
returns need not be orthogonal (two unit eigenvectors of a doubly degenerate
level of a square box came back with overlap 0.96).  On the Hermitian route
every cluster of eigenvalues equal to :data:`CLUSTER_TOL` of the matrix scale
is therefore orthonormalised and re-diagonalised inside its span
(Rayleigh-Ritz, common practice, no source); a cluster whose vectors span fewer
directions than its size (a copy returned twice) is an
:class:`~rgftrans.errors.EigenSolveFailed` advising ``dense=True``.
"""

from __future__ import annotations

import numpy as np
import scipy.linalg as sla
import scipy.sparse as sp
import scipy.sparse.linalg as spla

from rgftrans.errors import EigenSolveFailed, RgftransError

__all__ = ["DENSE_BELOW", "eigenvalues_near"]

#: Matrices with fewer rows than this are decomposed densely: below it a full LAPACK decomposition costs about
#: as much as one sparse LU factorisation plus the Arnoldi iterations, and it cannot fail to converge.
DENSE_BELOW = 300
#: A target exactly on an eigenvalue (singular shifted matrix) is moved by this fraction of the matrix scale.
SHIFT_NUDGE = 1e-9
#: Hermitian shift-invert eigenvalues closer than this fraction of the matrix scale form one (degenerate)
#: cluster, re-orthonormalised together: far above the 1e-14 round-off of the solve, far below any level spacing
#: the callers resolve.
CLUSTER_TOL = 1e-9
#: Inside a cluster, directions whose singular value (of unit columns) falls below this are copies of others.
_COPY_TOL = 1e-6


def eigenvalues_near(matrix, target, count: int, *, hermitian: bool = False, vectors: bool = True,
                     dense: bool | None = None, maxiter: int | None = None):
    """The ``count`` eigenvalues of ``matrix`` nearest ``target``, nearest first, with their eigenvectors.

    Parameters
    ----------
    matrix : (n, n) sparse matrix or ndarray
        Any square matrix (``hermitian=False``) or a Hermitian one.
    target : complex (float if ``hermitian``)
        Where to look, in the matrix's units.
    count : int
        How many eigenvalues (at most ``n``; above :data:`DENSE_BELOW` rows at most ``n - 2``, ARPACK's limit).
    hermitian : bool
        Use the Hermitian solvers (real eigenvalues, orthonormal eigenvectors).
    vectors : bool
        Compute the eigenvectors too.
    dense : bool or None
        Force the full LAPACK decomposition (True) or shift-invert ARPACK (False); None chooses by size
        (dense below :data:`DENSE_BELOW` rows).
    maxiter : int or None
        Cap on ARPACK's restarts (shift-invert route only); None is scipy's default, 10 n.

    Returns
    -------
    w : (count,) ndarray
        Eigenvalues sorted by ``|w - target|`` (real if ``hermitian``, else complex).
    v : (n, count) ndarray or None
        Eigenvectors as columns (unit norm), None when ``vectors`` is false.

    Raises
    ------
    RgftransError
        ``count`` below 1 or a non-finite target.
    EigenSolveFailed
        The shift-invert iterations did not converge (large matrices only).

    Examples
    --------
    >>> import numpy as np
    >>> w, _ = eigenvalues_near(np.diag([0.0, 1.0, 2.0, 3.0]), 1.9, 2, hermitian=True, vectors=False)
    >>> w.tolist()
    [2.0, 1.0]
    """
    n = matrix.shape[0]
    if count < 1:
        raise RgftransError(f"count of eigenvalues must be at least 1, got {count}")
    if not np.isfinite(target):
        raise RgftransError(f"target of the eigenvalue search must be a finite number, got {target}")
    if maxiter is not None and (isinstance(maxiter, bool) or not isinstance(maxiter, (int, np.integer))
                                or maxiter < 1):
        raise RgftransError(f"maxiter of the eigenvalue search must be a positive integer, got {maxiter!r}")
    target = float(np.real(target)) if hermitian else complex(target)
    use_dense = n < DENSE_BELOW if dense is None else bool(dense)
    if use_dense:
        full = matrix.toarray() if sp.issparse(matrix) else np.asarray(matrix)
        if hermitian:
            w, v = sla.eigh(full, eigvals_only=False) if vectors else (sla.eigvalsh(full), None)
        else:
            w, v = sla.eig(full) if vectors else (sla.eigvals(full), None)
    else:
        w, v = _shift_invert(sp.csc_matrix(matrix), target, min(count, n - 2), hermitian, vectors, maxiter)
    order = np.argsort(np.abs(w - target), kind="stable")[:count]
    return w[order], (None if v is None else v[:, order])


def _shift_invert(matrix: sp.csc_matrix, target, k: int, hermitian: bool, vectors: bool, maxiter: int | None):
    """ARPACK in shift-invert mode, the shift nudged once if it sits exactly on an eigenvalue."""
    solve = spla.eigsh if hermitian else spla.eigs
    scale = max(abs(target), float(abs(matrix).max()) if matrix.nnz else 0.0, 1e-300)
    n = matrix.shape[0]
    try:
        try:
            out = solve(matrix, k=k, sigma=target, which="LM", return_eigenvectors=vectors, maxiter=maxiter)
        except RuntimeError as err:  # an exactly singular factor of matrix - target (ArpackError is not one)
            if isinstance(err, spla.ArpackError):
                raise
            out = solve(matrix, k=k, sigma=target + SHIFT_NUDGE * scale, which="LM", return_eigenvectors=vectors,
                        maxiter=maxiter)
    except spla.ArpackNoConvergence as err:
        raise EigenSolveFailed(
            f"the shift-invert eigenvalue solve near {target:.6g} did not converge for the {n} x {n} matrix "
            f"({len(err.eigenvalues)} of {k} eigenvalues found{'' if maxiter is None else f' in {maxiter} restarts'}); "
            "move the target off a cluster of (nearly) degenerate levels, ask for fewer or more eigenvalues, "
            f"{'raise maxiter, ' if maxiter is not None else ''}or pass dense=True (a full decomposition, "
            "seconds up to a few thousand rows)") from None
    except (spla.ArpackError, RuntimeError) as err:
        reason = str(err).splitlines()[0] if str(err) else type(err).__name__
        raise EigenSolveFailed(
            f"the shift-invert eigenvalue solve near {target:.6g} broke down for the {n} x {n} matrix ({reason}); "
            "move the target slightly, ask for fewer eigenvalues or pass dense=True") from None
    w, v = out if vectors else (out, None)
    if hermitian:
        w = np.real(w)
        if vectors:
            w, v = _orthonormal_clusters(matrix, w, v, scale, target)
    return w, v


def _orthonormal_clusters(matrix, w: np.ndarray, v: np.ndarray, scale: float, target):
    """Rayleigh-Ritz inside every cluster of (nearly) equal eigenvalues of a Hermitian ``matrix``.

    ARPACK's copies of a degenerate level are eigenvectors but not necessarily orthogonal; an orthonormal basis
    of their span, with ``matrix`` diagonalised in it, gives orthonormal eigenvectors of the same accuracy.
    """
    order = np.argsort(w, kind="stable")
    w, v = w[order], v[:, order]
    start = 0
    while start < len(w):
        stop = start + 1
        while stop < len(w) and w[stop] - w[stop - 1] <= CLUSTER_TOL * scale:
            stop += 1
        if stop - start > 1:
            u, sv, _ = np.linalg.svd(v[:, start:stop], full_matrices=False)
            if sv[-1] < _COPY_TOL * sv[0]:
                raise EigenSolveFailed(
                    f"the shift-invert eigenvalue solve near {target:.6g} returned {stop - start} vectors for the "
                    f"degenerate level at {w[start]:.10g} that span only {int(np.sum(sv >= _COPY_TOL * sv[0]))} "
                    "directions; pass dense=True (a full decomposition) for this degenerate spectrum") from None
            h_small = u.conj().T @ (matrix @ u)
            w_c, y = np.linalg.eigh(0.5 * (h_small + h_small.conj().T))
            w[start:stop], v[:, start:stop] = w_c, u @ y
        start = stop
    return w, v
