"""numba-compiled multifrontal elimination over a dissection tree (the kernel behind :mod:`.dissection`).

Every node of the tree owns a dense *front*: its ``k`` fully summed unknowns
(the sites it eliminates: a leaf's interior, an inner node's separator) followed
by its ``b`` boundary unknowns (sites of ancestor separators and lead
interfaces that its subtree touches).  In postorder, each front is assembled
from ``z - H`` (the entries whose first-eliminated end lies in this node) and
the update matrices of its children (extend-add), and partially factorised:

    F = [[F11, F12], [F21, F22]],   F11 = P L U (LAPACK zgetrf),
    update = F22 - F21 F11^-1 F12   (zgesv, then zgemm),

the Schur complement of the subtree onto its boundary, which is pushed on a
stack until the parent pops it.  The root's front holds the lead interface
unknowns only; it is returned assembled and not factorised (the caller adds
the self-energies and inverts it).  Multifrontal method: Duff & Reid, ACM
TOMS 9, 302 (1983); nested dissection: George, SIAM J. Numer. Anal. 10, 345
(1973) (both from memory).

Fronts are stored column-major (Fortran) in one flat work buffer, so the
blocks ``F11``, ``F12``, ``F21``, ``F22`` are LAPACK submatrices with leading
dimension ``f = k + b`` and nothing is copied for a BLAS call.  LAPACK and BLAS
are scipy's (``scipy.linalg.cython_lapack`` / ``cython_blas``), called through
their C addresses, so one compiled loop runs the whole tree with no Python
and no allocation per node.
"""

from __future__ import annotations

import numpy as np
from numba import njit, types
from numba.np.linalg import ensure_blas, ensure_lapack

# numba's own bindings to scipy's LAPACK and BLAS (resolved by name when a compiled function loads, so the
# kernel caches like any other): zgesv = zgetrf + zgetrs in one call, and zgemm.
ensure_blas()
ensure_lapack()
_C = types.CPointer(types.complex128)
_xgesv = types.ExternalFunction("numba_xgesv", types.intc(
    types.char, types.intp, types.intp, _C, types.intp, types.CPointer(types.int32), _C, types.intp))
_xxgemm = types.ExternalFunction("numba_xxgemm", types.intc(
    types.char, types.char, types.char, types.intp, types.intp, types.intp, _C, _C, types.intp, _C, types.intp,
    _C, _C, types.intp))
_KIND = ord("z")  # complex128
_NOTRANS = ord("N")


#: Column panel width of the lower-triangle update of symmetric fronts (see :func:`_eliminate`).
SYMMETRIC_PANEL = 32


@njit(cache=True)
def _eliminate(front, f, k, b, ipiv, scal, symmetric):
    """Partial factorisation of one front: ``F22 <- F22 - F21 F11^-1 F12`` in place.

    With ``symmetric`` (a complex symmetric front, ``F = F^T``: real H, no field) the update is symmetric
    too and only its lower triangle is formed, panel by panel: about half the ``k b^2`` of the product.

    Returns the smallest ``|U_jj|`` over the largest (1.0 when nothing is
    eliminated); 0.0 when F11 is exactly singular.
    """
    if k == 0:
        return 1.0
    # F11 = P L U and F12 <- F11^-1 F12 (zgesv), then F22 -= F21 F12 (zgemm).
    info = _xgesv(_KIND, k, b, front.ctypes, f, ipiv.ctypes, front[k * f:].ctypes, f)
    if info != 0:
        return 0.0
    small = np.inf
    large = 0.0
    for j in range(k):
        u = abs(front[j * f + j])
        small = min(small, u)
        large = max(large, u)
    if b > 0 and not symmetric:
        _xxgemm(_KIND, _NOTRANS, _NOTRANS, b, b, k, scal.ctypes, front[k:].ctypes, f, front[k * f:].ctypes, f,
                scal[1:].ctypes, front[k * f + k:].ctypes, f)
    elif b > 0:
        for j0 in range(0, b, SYMMETRIC_PANEL):
            w = min(SYMMETRIC_PANEL, b - j0)
            # F22[j0:, j0:j0+w] -= F21[j0:, :] X[:, j0:j0+w]
            _xxgemm(_KIND, _NOTRANS, _NOTRANS, b - j0, w, k, scal.ctypes, front[k + j0:].ctypes, f,
                    front[(k + j0) * f:].ctypes, f, scal[1:].ctypes, front[(k + j0) * f + k + j0:].ctypes, f)
    return small / large if large > 0 else 0.0


@njit(cache=True)
def schur_onto_root(z_all, n_elim, n_bound, child_ptr, children, map_ptr, parent_pos, entry_ptr, entry_pos,
                    entry_val, front_max, stack_max, symmetric, out_root, out_pivot):
    """Eliminate every non-root unknown and return the root's Schur complement, for many energies.

    Parameters
    ----------
    z_all : (n_E,) complex
        Device energies (meV).
    n_elim, n_bound : (n_nodes,) int64
        Fully summed and boundary unknowns of each node, postorder (root last, ``n_bound = 0`` there).
    child_ptr, children : int64
        Children of node v are ``children[child_ptr[v]:child_ptr[v + 1]]``, in the order they were
        processed (so their update matrices lie on the stack in that order).
    map_ptr, parent_pos : int64
        Positions of node v's boundary unknowns in its parent's front: ``parent_pos[map_ptr[v]:map_ptr[v+1]]``.
    entry_ptr, entry_pos, entry_val
        Matrix entries ``-H`` assembled into node v's front at flat column-major positions
        ``entry_pos[entry_ptr[v]:entry_ptr[v+1]]`` (values ``entry_val``, complex, meV); ``z`` is added on
        the diagonal of the fully summed block (of every root unknown at the root).
    front_max, stack_max : int
        Largest front (rows) and the peak of the update stack (entries), from the plan.
    symmetric : bool
        The matrix ``z - H`` is complex symmetric (real H): update matrices are formed and read as their
        lower triangles only.
    out_root : (n_E, k_root, k_root) complex
        Filled with ``(z - H)_II - H_IX (z - H_XX)^-1 H_XI`` on the root unknowns I.
    out_pivot : (n_E,) float
        Filled with the smallest relative pivot ``min |U_jj| / max |U_jj|`` met in any front (0 if one was
        exactly singular): a small value marks an energy near an eigenvalue of a closed subdomain, where
        the elimination loses accuracy.
    """
    n_nodes = n_elim.shape[0]
    front = np.empty(max(front_max * front_max, 1), dtype=np.complex128)
    stack = np.empty(max(stack_max, 1), dtype=np.complex128)
    upd_off = np.zeros(n_nodes, dtype=np.int64)
    ipiv = np.empty(max(front_max, 1), dtype=np.int32)
    scal = np.array([-1.0 + 0j, 1.0 + 0j])
    root = n_nodes - 1
    for e in range(z_all.shape[0]):
        z = z_all[e]
        sp = 0
        worst = 1.0
        for v in range(n_nodes):
            k = n_elim[v]
            b = n_bound[v]
            f = k + b
            front[:f * f] = 0.0
            for t in range(entry_ptr[v], entry_ptr[v + 1]):
                front[entry_pos[t]] += entry_val[t]
            for i in range(k):
                front[i * f + i] += z
            c0 = child_ptr[v]
            c1 = child_ptr[v + 1]
            for ci in range(c0, c1):  # extend-add of the children's update matrices
                c = children[ci]
                bc = n_bound[c]
                src = upd_off[c]
                m0 = map_ptr[c]
                if symmetric:
                    for j in range(bc):
                        pj = parent_pos[m0 + j]
                        front[pj * f + pj] += stack[src + j]
                        for i in range(j + 1, bc):
                            pi = parent_pos[m0 + i]
                            val = stack[src + i]
                            front[pj * f + pi] += val
                            front[pi * f + pj] += val
                        src += bc
                else:
                    for j in range(bc):
                        col = parent_pos[m0 + j] * f
                        for i in range(bc):
                            front[col + parent_pos[m0 + i]] += stack[src + i]
                        src += bc
            if c1 > c0:
                sp = upd_off[children[c0]]  # pop them all: they were the top of the stack
            if v == root:
                for j in range(k):
                    for i in range(k):
                        out_root[e, i, j] = front[j * f + i]
                break
            worst = min(worst, _eliminate(front, f, k, b, ipiv, scal, symmetric))
            upd_off[v] = sp
            for j in range(b):  # push the update matrix F22 (b x b, column-major)
                src = (k + j) * f + k
                for i in range(b):
                    stack[sp + i] = front[src + i]
                sp += b
        out_pivot[e] = worst
