"""numba-compiled multifrontal elimination over a dissection tree (the kernel behind :mod:`.dissection`).

Every node of the tree owns a dense *front*: its ``k`` fully summed unknowns
(the sites it eliminates: a leaf's interior, an inner node's separator) followed
by its ``b`` boundary unknowns (sites of ancestor separators and lead
interfaces that its subtree touches).  In postorder, each front is assembled
from ``z - H`` (the entries whose first-eliminated end lies in this node) and
the update matrices of its children (extend-add), and partially factorised:

    F = [[F11, F12], [F21, F22]],   F11 = P L U,   F12 <- F11^-1 F12   (LAPACK zgesv),
    update = F22 - F21 F12                                          (zgemm),

the Schur complement of the subtree onto its boundary, which is pushed on a
stack until the parent pops it.  The root's front holds the lead interface
unknowns; it is returned assembled and not factorised (the caller adds the
self-energies, which make it an open system, and solves it).  Multifrontal
method: Duff & Reid, ACM TOMS 9, 302 (1983); nested dissection: George, SIAM
J. Numer. Anal. 10, 345 (1973) (both from memory).

Delayed pivots.  A subtree is a closed system: ``F11`` is singular when the
energy is an eigenvalue of the subtree (clean rectangles have them at simple
energies: the band centre, 4t +- t, ...; a disordered device at the energy of
a state localised inside the subtree), and nearly so close to one, where the
update grows like ``1/delta`` and its round-off reaches the result.  When
``F11``'s smallest relative pivot falls below ``pivot_delay``, its near-null
space is found by two steps of block inverse iteration with the LU just
computed (8 starting vectors, Rayleigh-Ritz on the result); for each
near-null direction the unknown carrying most of it is *delayed*: left out of
this front's elimination and passed to the parent with the boundary, where it
joins the parent's fully summed block (delayed pivoting, as in
threshold-pivoting multifrontal solvers; Duff & Reid 1983).  What remains is
eliminated with a regular pivot block; the singular direction travels up as a
small diagonal entry instead of a ``1/delta`` update, and at the root the
leads' self-energies open the system.  If that does not give a regular block
(more near-null directions than starting vectors) the whole front is
delayed.  Delays are capped (``delay_max`` extra unknowns per front, the
stack's headroom); an energy that exceeds a cap is reported as failed and the
caller redoes it by another route.

Fronts are stored column-major (Fortran) in one flat work buffer, so the
blocks ``F11``, ``F12``, ``F21``, ``F22`` are LAPACK submatrices with leading
dimension ``f`` and nothing is copied for a BLAS call.  LAPACK and BLAS are
scipy's, through numba's own bindings (resolved by name when a compiled
function loads, so the kernel caches like any other); one compiled loop runs
the whole tree with no Python and no allocation per node.
"""

from __future__ import annotations

import numpy as np
from numba import njit, types
from numba.np.linalg import ensure_blas, ensure_lapack

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

#: Column panel width of the lower-triangle update of symmetric fronts (see :func:`_update`).
SYMMETRIC_PANEL = 32
#: Status codes per energy (``out_status``).
OK, TOO_MANY_DELAYS, STACK_FULL = 0, 1, 2


@njit(cache=True)
def _factor(front, f, k, b, ipiv):
    """``F11 = P L U`` and ``F12 <- F11^-1 F12`` in place (zgesv); the smallest relative pivot of ``U``.

    Returns ``min |U_jj| / max |U_jj|`` (1.0 when ``k = 0``, 0.0 when F11 is exactly singular).
    """
    if k == 0:
        return 1.0
    info = _xgesv(_KIND, k, b, front.ctypes, f, ipiv.ctypes, front[k * f:].ctypes, f)
    if info != 0:
        return 0.0
    small = np.inf
    large = 0.0
    for j in range(k):
        u = abs(front[j * f + j])
        small = min(small, u)
        large = max(large, u)
    return small / large if large > 0 else 0.0


@njit(cache=True)
def _update(front, f, k, b, scal, symmetric):
    """``F22 <- F22 - F21 F12`` (zgemm); with ``symmetric`` (``F = F^T``: real H) only the lower triangle,
    column panel by column panel: about half of the ``k b^2`` multiply-adds."""
    if b == 0 or k == 0:
        return
    if not symmetric:
        _xxgemm(_KIND, _NOTRANS, _NOTRANS, b, b, k, scal.ctypes, front[k:].ctypes, f, front[k * f:].ctypes, f,
                scal[1:].ctypes, front[k * f + k:].ctypes, f)
        return
    for j0 in range(0, b, SYMMETRIC_PANEL):
        w = min(SYMMETRIC_PANEL, b - j0)
        # F22[j0:, j0:j0+w] -= F21[j0:, :] F12[:, j0:j0+w]
        _xxgemm(_KIND, _NOTRANS, _NOTRANS, b - j0, w, k, scal.ctypes, front[k + j0:].ctypes, f,
                front[(k + j0) * f:].ctypes, f, scal[1:].ctypes, front[(k + j0) * f + k + j0:].ctypes, f)


@njit(cache=True)
def _assemble(front, f, d, k, z, v, entry_ptr, entry_row, entry_col, entry_val, child_ptr, children, map_ptr,
              parent_pos, d_out, sq_out, upd_off, stack, pos_buf, symmetric):
    """Front of node v: ``z - H`` entries, then every child's pushed square (update, or a whole delayed front).

    The front is ``[delayed-in (d), eliminated (k), boundary]``; a child's first ``d_out[c]`` unknowns are
    delayed ones and take the next delayed slots, its others map through ``parent_pos`` (shifted by d).
    """
    front[:f * f] = 0.0
    for t in range(entry_ptr[v], entry_ptr[v + 1]):
        front[(entry_col[t] + d) * f + entry_row[t] + d] += entry_val[t]
    for i in range(k):
        front[(d + i) * f + d + i] += z
    slot = 0
    for ci in range(child_ptr[v], child_ptr[v + 1]):
        c = children[ci]
        s = sq_out[c]
        dc = d_out[c]
        for i in range(dc):
            pos_buf[i] = slot + i
        slot += dc
        m0 = map_ptr[c]
        for i in range(s - dc):
            pos_buf[dc + i] = d + parent_pos[m0 + i]
        src = upd_off[c]
        if symmetric:  # the pushed square holds its lower triangle
            for j in range(s):
                pj = pos_buf[j]
                front[pj * f + pj] += stack[src + j]
                for i in range(j + 1, s):
                    pi = pos_buf[i]
                    val = stack[src + i]
                    front[pj * f + pi] += val
                    front[pi * f + pj] += val
                src += s
        else:
            for j in range(s):
                col = pos_buf[j] * f
                for i in range(s):
                    front[col + pos_buf[i]] += stack[src + i]
                src += s


@njit(cache=True)
def _push(front, f, first, size, stack, sp, symmetric):
    """Copy the square ``front[first:first+size, first:first+size]`` onto the stack at ``sp`` (lower triangle
    only when symmetric); returns the largest ``|re| + |im|`` copied."""
    growth = 0.0
    for j in range(size):
        src = (first + j) * f + first
        for i in range(j if symmetric else 0, size):
            val = front[src + i]
            stack[sp + j * size + i] = val
            growth = max(growth, abs(val.real) + abs(val.imag))
    return growth


#: Starting vectors of the block inverse iteration that finds a front's near-null space.
NULL_BLOCK = 8
#: A Ritz direction whose residual ``||F11 q||`` is below this fraction of ``max |U_jj|`` counts as near-null
#: (ten times the delay threshold's scale, so that removing it lifts the pivots above that threshold).
NULL_RESIDUAL = 1e-4


@njit(cache=True)
def _lu_solve(lu, f, n, ipiv, x, m):
    """``x <- F11^-1 x`` for ``m`` columns (``x`` column-major, leading dimension n) with F11 = P L U
    stored in ``lu`` (leading dimension f, LAPACK getrf layout).  An exactly zero pivot is replaced by
    ``1e-14 max |U_jj|``: the solve then amplifies that null direction, which is what it is used for."""
    tiny = 0.0
    for j in range(n):
        tiny = max(tiny, abs(lu[j * f + j]))
    tiny = max(tiny * 1e-14, 1e-300)
    for i in range(n):
        p = ipiv[i] - 1
        if p != i:
            for c in range(m):
                tmp = x[c * n + i]
                x[c * n + i] = x[c * n + p]
                x[c * n + p] = tmp
    for c in range(m):
        o = c * n
        for j in range(n):
            xj = x[o + j]
            if xj != 0:
                for i in range(j + 1, n):
                    x[o + i] -= lu[j * f + i] * xj
        for j in range(n - 1, -1, -1):
            u = lu[j * f + j]
            x[o + j] /= u if u != 0 else tiny
            xj = x[o + j]
            for i in range(j):
                x[o + i] -= lu[j * f + i] * xj


@njit(cache=True)
def _lu_apply(lu, f, n, ipiv, x, y, m):
    """``y <- F11 x`` from the factors: ``P (L (U x))``."""
    for c in range(m):
        o = c * n
        for i in range(n):
            acc = 0j
            for j in range(i, n):
                acc += lu[j * f + i] * x[o + j]
            y[o + i] = acc
        for i in range(n - 1, -1, -1):
            acc = y[o + i]
            for j in range(i):
                acc += lu[j * f + i] * y[o + j]
            y[o + i] = acc
    for i in range(n - 1, -1, -1):
        p = ipiv[i] - 1
        if p != i:
            for c in range(m):
                tmp = y[c * n + i]
                y[c * n + i] = y[c * n + p]
                y[c * n + p] = tmp


@njit(cache=True)
def _near_null_unknowns(lu, f, n, ipiv, chosen, residual=NULL_RESIDUAL):
    """Unknowns to delay: one per near-null direction of F11 (factored in ``lu``); returns their count.

    Block inverse iteration (two solves on ``NULL_BLOCK`` fixed pseudo-random vectors), Rayleigh-Ritz on
    the result, the directions with residual below ``residual max |U_jj|`` (default ``NULL_RESIDUAL``), then
    greedy selection (QR with column pivoting on the transposed basis): the unknown with the largest weight
    in what is left of the near-null space, deflated, and again.  At least one unknown is chosen.
    """
    m = min(n, NULL_BLOCK)
    x = np.empty(n * m, dtype=np.complex128)
    seed = 12345
    for i in range(n * m):  # fixed linear congruential sequence: reproducible results
        seed = (seed * 1103515245 + 12345) % 2147483648
        re = seed / 2147483648.0 - 0.5
        seed = (seed * 1103515245 + 12345) % 2147483648
        x[i] = re + 1j * (seed / 2147483648.0 - 0.5)
    _lu_solve(lu, f, n, ipiv, x, m)
    for c in range(m):  # normalise between the two solves (the amplification can reach 1/delta^2)
        nrm = np.sqrt(np.sum(np.abs(x[c * n:(c + 1) * n]) ** 2))
        if nrm > 0:
            x[c * n:(c + 1) * n] /= nrm
    _lu_solve(lu, f, n, ipiv, x, m)
    q = x.reshape(m, n).T.copy()  # (n, m)
    q, _ = np.linalg.qr(q)
    y = np.empty(n * m, dtype=np.complex128)
    qf = q.T.copy().reshape(n * m)
    _lu_apply(lu, f, n, ipiv, qf, y, m)
    ym = y.reshape(m, n).T.copy()
    gram = ym.conj().T @ ym
    lam, z = np.linalg.eigh(gram)  # ascending: the smallest residuals first
    scale = 0.0
    for j in range(n):
        scale = max(scale, abs(lu[j * f + j]))
    r = 0
    for j in range(m):
        if np.sqrt(max(lam[j], 0.0)) < residual * scale:
            r += 1
    r = max(r, 1)
    basis = np.ascontiguousarray(q) @ np.ascontiguousarray(z[:, :r])  # (n, r) near-null directions
    weight = np.zeros(n)
    for i in range(n):
        weight[i] = np.sum(np.abs(basis[i, :]) ** 2)
    for t in range(r):
        best = np.argmax(weight)
        chosen[t] = best
        row = basis[best, :].copy()
        nrm = np.sqrt(np.sum(np.abs(row) ** 2))
        if nrm == 0:
            return t
        row /= nrm
        for i in range(n):  # deflate: remove that direction from every unknown's row
            proj = np.sum(basis[i, :] * np.conj(row))
            basis[i, :] -= proj * row
            weight[i] = np.sum(np.abs(basis[i, :]) ** 2)
        weight[best] = -1.0
    return r


@njit(cache=True)
def _permute(src, dst, f, perm):
    """``dst[i, j] = src[perm[i], perm[j]]`` for f x f column-major squares."""
    for j in range(f):
        cj = perm[j] * f
        for i in range(f):
            dst[j * f + i] = src[cj + perm[i]]


@njit(cache=True)
def schur_onto_root(z_all, n_elim, n_bound, child_ptr, children, map_ptr, parent_pos, entry_ptr, entry_row,
                    entry_col, entry_val, front_max, stack_max, symmetric, pivot_delay, delay_max,
                    out_root, out_delayed, out_pivot, out_growth, out_status, out_delays):
    """Eliminate every non-root unknown and return the root's front, for many energies.

    Parameters
    ----------
    z_all : (n_E,) complex
        Device energies (meV).
    n_elim, n_bound : (n_nodes,) int64
        Fully summed and boundary unknowns of each node, postorder (root last, ``n_bound = 0`` there).
    child_ptr, children : int64
        Children of node v are ``children[child_ptr[v]:child_ptr[v + 1]]``, in the order they were
        processed (so their pushed squares lie on the stack in that order).
    map_ptr, parent_pos : int64
        Positions of node v's boundary unknowns in its parent's (undelayed) front:
        ``parent_pos[map_ptr[v]:map_ptr[v + 1]]``.
    entry_ptr, entry_row, entry_col, entry_val
        Entries of ``-H`` assembled into node v's front (undelayed row and column, value in meV):
        ``[entry_ptr[v]:entry_ptr[v + 1]]``; ``z`` is added on the diagonal of the eliminated block (of every
        root unknown at the root).
    front_max, stack_max : int
        Largest front (rows) and the peak of the update stack (entries) without delays, from the plan.
    symmetric : bool
        ``z - H`` is complex symmetric (real H): pushed squares are formed and read as lower triangles.
    pivot_delay : float
        A front whose ``F11`` has a relative pivot below this is delayed instead of eliminated.
    delay_max : int
        Most delayed unknowns one front (the root included) may receive.
    out_root : (n_E, m, m) complex, m >= k_root + delay_max
        Filled with the root's front: ``[delayed (out_delayed[e]), root unknowns]`` square, the Schur
        complement of everything else, ``(z - H)_II - H_IX (z - H_XX)^-1 H_XI`` when nothing was delayed.
    out_delayed : (n_E,) int64
        Delayed unknowns that reached the root.
    out_pivot : (n_E,) float
        Smallest relative pivot of the eliminations that were accepted.
    out_growth : (n_E,) float
        Largest ``|re| + |im|`` of any pushed update entry (meV): the elimination's growth.
    out_status : (n_E,) int64
        ``OK``, or why the energy was abandoned (``TOO_MANY_DELAYS``, ``STACK_FULL``).
    out_delays : (n_E,) int64
        Unknowns delayed, summed over all fronts (0 unless the energy met a near-singular subdomain).
    """
    n_nodes = n_elim.shape[0]
    f_cap = front_max + delay_max
    front = np.empty(max(f_cap * f_cap, 1), dtype=np.complex128)
    spare = np.empty(max(f_cap * f_cap, 1), dtype=np.complex128)
    perm = np.empty(max(f_cap, 1), dtype=np.int64)
    chosen = np.empty(NULL_BLOCK, dtype=np.int64)
    stack_cap = stack_max + 2 * f_cap * f_cap
    stack = np.empty(max(stack_cap, 1), dtype=np.complex128)
    upd_off = np.zeros(n_nodes, dtype=np.int64)
    d_out = np.zeros(n_nodes, dtype=np.int64)
    sq_out = np.zeros(n_nodes, dtype=np.int64)
    ipiv = np.empty(max(f_cap, 1), dtype=np.int32)
    pos_buf = np.empty(max(f_cap, 1), dtype=np.int64)
    scal = np.array([-1.0 + 0j, 1.0 + 0j])
    root = n_nodes - 1
    for e in range(z_all.shape[0]):
        z = z_all[e]
        sp = 0
        worst = 1.0
        growth = 0.0
        status = OK
        delays = 0
        out_delayed[e] = 0
        for v in range(n_nodes):
            k = n_elim[v]
            b = n_bound[v]
            d = 0
            c0 = child_ptr[v]
            c1 = child_ptr[v + 1]
            for ci in range(c0, c1):
                d += d_out[children[ci]]
            if d > delay_max:
                status = TOO_MANY_DELAYS
                break
            f = d + k + b
            _assemble(front, f, d, k, z, v, entry_ptr, entry_row, entry_col, entry_val, child_ptr, children,
                      map_ptr, parent_pos, d_out, sq_out, upd_off, stack, pos_buf, symmetric)
            base = upd_off[children[c0]] if c1 > c0 else sp  # pop the children: they are the stack's top
            if v == root:
                for j in range(f):
                    for i in range(f):
                        out_root[e, i, j] = front[j * f + i]
                out_delayed[e] = d
                break
            kk = d + k
            pivot = _factor(front, f, kk, b, ipiv)
            r = 0
            if pivot < pivot_delay:
                # Partial delay: the unknowns carrying F11's near-null directions go to the parent.
                r = _near_null_unknowns(front, f, kk, ipiv, chosen)
                _assemble(front, f, d, k, z, v, entry_ptr, entry_row, entry_col, entry_val, child_ptr, children,
                          map_ptr, parent_pos, d_out, sq_out, upd_off, stack, pos_buf, symmetric)
                n_keep = 0
                for i in range(kk):
                    keep = True
                    for t in range(r):
                        if chosen[t] == i:
                            keep = False
                    if keep:
                        perm[n_keep] = i
                        n_keep += 1
                for t in range(r):
                    perm[n_keep + t] = chosen[t]
                for i in range(kk, f):
                    perm[i] = i
                _permute(front, spare, f, perm)
                front, spare = spare, front
                pivot = _factor(front, f, kk - r, b + r, ipiv)
            if pivot >= pivot_delay:
                worst = min(worst, pivot)
                _update(front, f, kk - r, b + r, scal, symmetric)
                sq = b + r
                if base + sq * sq > stack_cap:
                    status = STACK_FULL
                    break
                growth = max(growth, _push(front, f, kk - r, sq, stack, base, symmetric))
                d_out[v] = r
                delays += r
                sq_out[v] = sq
                upd_off[v] = base
                sp = base + sq * sq
            else:  # delay everything: re-assemble (the children's squares are still on the stack), push whole
                if base + f * f > stack_cap:
                    status = STACK_FULL
                    break
                _assemble(front, f, d, k, z, v, entry_ptr, entry_row, entry_col, entry_val, child_ptr, children,
                          map_ptr, parent_pos, d_out, sq_out, upd_off, stack, pos_buf, symmetric)
                _push(front, f, 0, f, stack, base, symmetric)
                d_out[v] = kk
                delays += kk
                sq_out[v] = f
                upd_off[v] = base
                sp = base + f * f
        out_pivot[e] = worst
        out_growth[e] = growth
        out_status[e] = status
        out_delays[e] = delays


# --------------------------------------------------------------------------
# Selected inversion: the diagonal of G = (z - H - Sigma)^-1 on the same tree
# --------------------------------------------------------------------------
#
# The upward pass is the elimination above with every front's factors kept: the LU of its pivot block
# ``S_KK`` (K: the unknowns the front eliminates, after delays), ``X = S_KK^-1 S_KB`` (what zgesv leaves in
# F12; B: the rest of the front) and, unless the front is complex symmetric, ``S_BK`` (F21).  The root adds
# the self-energies and is inverted whole: ``G`` on the root's front.  The downward pass visits the fronts
# parents first; with ``G_BB`` (the front's B block of G, cut from its parent's front of G) the
# block-elimination identities
#
#     G_KB = -X G_BB,   G_BK = -G_BB Y  (Y = S_BK S_KK^-1;  Y = X^T and G_BK = G_KB^T when symmetric),
#     G_KK = S_KK^-1 - X G_BK
#
# give G on the whole front (Takahashi, Fagan & Chin 1973; Erisman & Tinney, Commun. ACM 18, 177 (1975);
# on nested-dissection trees: the FIND scheme of Li, Ahmed, Klimeck & Darve, J. Comput. Phys. 227, 9408
# (2008); all from memory), and each child's ``G_BB`` is cut from it.  A delayed unknown is one more row of
# B in the front that delayed it and one more row of K where it is finally eliminated (or of the root), so
# the identities hold unchanged: the kernel only follows each unknown's position from front to front.

_xxgetrf = types.ExternalFunction("numba_xxgetrf", types.intc(
    types.char, types.intp, types.intp, _C, types.intp, types.CPointer(types.int32)))
_xxgetri = types.ExternalFunction("numba_ez_xxgetri", types.intc(
    types.char, types.intp, _C, types.intp, types.CPointer(types.int32)))

#: Rounds of partial delays one front of :func:`select_diagonal` may take (up to ``NULL_BLOCK`` unknowns each)
#: before it is delayed whole.
DELAY_ROUNDS = 8
#: Further status codes of :func:`select_diagonal`: a store passed in is too small (the caller enlarges it
#: to the size returned and calls again), or the root (with the leads) is exactly singular.
FACTORS_FULL, DOWN_STACK_FULL, ROOT_SINGULAR = 3, 4, 5


@njit(cache=True)
def _grow(a, need):
    """``a``, or a copy of it with room for at least ``need`` entries."""
    if need <= a.shape[0]:
        return a
    out = np.empty(max(need, 2 * a.shape[0]), dtype=a.dtype)
    out[:a.shape[0]] = a
    return out


@njit(cache=True)
def _gemm(m, n, k, alpha, a, lda, b, ldb, beta, c, ldc):
    """``C <- alpha A B + beta C`` (column-major, complex); ``alpha``/``beta`` are one-element arrays."""
    if m == 0 or n == 0:
        return
    if k == 0:
        if beta[0] == 0:
            for j in range(n):
                for i in range(m):
                    c[j * ldc + i] = 0.0
        return
    _xxgemm(_KIND, _NOTRANS, _NOTRANS, m, n, k, alpha.ctypes, a.ctypes, lda, b.ctypes, ldb, beta.ctypes, c.ctypes,
            ldc)


@njit(cache=True)
def _conditioned(pivot, front, f, k, b):
    """The pivot measure of the diagonal of G: the smaller of the LU's relative pivot and ``1 / max |X|``,
    ``X = F11^-1 F12`` (dimensionless).  A partially pivoted LU can look regular while F11 is nearly singular
    (the clean square just off 4t: pivots of 0.04, ``X`` of 1e8); ``X`` shows it, and G inside the front,
    ``S_KK^-1 - X G_BK``, loses ``~eps max|X|^2`` to cancellation."""
    big = 0.0
    for j in range(b):
        col = (k + j) * f
        for i in range(k):
            val = front[col + i]
            big = max(big, abs(val.real) + abs(val.imag))
    return min(pivot, 1.0 / big) if big > 0 else pivot


@njit(cache=True)
def select_diagonal(z, sigma_root, n_elim, n_bound, child_ptr, children, map_ptr, parent_pos, entry_ptr, entry_row,
                    entry_col, entry_val, elim_orbitals, root_orbitals, front_max, stack_max, symmetric, pivot_delay,
                    null_residual, delay_max, factors, down, out_diag):
    """The diagonal of ``G = (z - H - Sigma)^-1`` at one energy: the elimination with its factors kept, then
    the selected inversion down the tree (see the comment above).

    Parameters
    ----------
    z : complex
        Device energy (meV).
    sigma_root : (k, k) complex
        Sum of the leads' self-energies on the root's unknowns (order of ``root_orbitals``).
    n_elim ... entry_val, front_max, stack_max, symmetric, pivot_delay, delay_max
        As in :func:`schur_onto_root` (``pivot_delay`` applied to :func:`_conditioned`).
    null_residual : float
        Ritz directions with residual below this fraction of ``max |U_jj|`` are delayed (see
        :func:`_near_null_unknowns`).
    elim_orbitals : (n_orbitals - k,) int64
        Orbital of each eliminated unknown, node by node in tree order.
    root_orbitals : (k,) int64
    factors : (n_factor,) complex
        Store for the kept factors (``sum_v k_v^2 + k_v b_v`` entries when symmetric, ``+ b_v k_v`` more when
        not, with room for delays); a work array.
    down : (n_down,) complex
        Stack of the children's ``G_BB`` blocks during the downward pass; a work array.
    out_diag : (n_orbitals,) complex
        Filled with ``G_ii`` (meV^-1) where the status is ``OK``.

    Returns
    -------
    status, pivot, growth, delays, delayed, root_pivot, need_factors, need_down
        ``status``: ``OK`` or why the energy was abandoned (``FACTORS_FULL`` / ``DOWN_STACK_FULL``: call
        again with stores of ``need_factors`` / ``need_down`` entries).  The others as in
        :func:`schur_onto_root`; ``root_pivot`` is the smallest relative pivot of the root's LU.
    """
    n_nodes = n_elim.shape[0]
    root = n_nodes - 1
    f_cap = front_max + delay_max
    front = np.empty(max(f_cap * f_cap, 1), dtype=np.complex128)
    spare = np.empty(max(f_cap * f_cap, 1), dtype=np.complex128)
    perm = np.empty(max(f_cap, 1), dtype=np.int64)
    inv = np.empty(max(f_cap, 1), dtype=np.int64)
    ids = np.empty(max(f_cap, 1), dtype=np.int64)
    ids_pre = np.empty(max(f_cap, 1), dtype=np.int64)
    chosen = np.empty(NULL_BLOCK, dtype=np.int64)
    stack_cap = stack_max + 2 * f_cap * f_cap
    stack = np.empty(max(stack_cap, 1), dtype=np.complex128)
    upd_off = np.zeros(n_nodes, dtype=np.int64)
    d_out = np.zeros(n_nodes, dtype=np.int64)
    sq_out = np.zeros(n_nodes, dtype=np.int64)
    ipiv = np.empty(max(f_cap, 1), dtype=np.int32)
    pos_buf = np.empty(max(f_cap, 1), dtype=np.int64)
    scal = np.array([-1.0 + 0j, 1.0 + 0j])
    # What the downward pass needs of each front: eliminated count, front size, where its factors, pivots,
    # eliminated orbitals and its children's positions are kept.
    n_keep = np.zeros(n_nodes, dtype=np.int64)
    n_front = np.zeros(n_nodes, dtype=np.int64)
    fac_off = np.zeros(n_nodes, dtype=np.int64)
    piv_off = np.zeros(n_nodes, dtype=np.int64)
    eid_off = np.zeros(n_nodes + 1, dtype=np.int64)
    pos_off = np.zeros(n_nodes, dtype=np.int64)
    n_orb_all = elim_orbitals.shape[0] + root_orbitals.shape[0]
    pivots = np.empty(max(n_orb_all, 1), dtype=np.int32)
    elim_ids = np.empty(max(n_orb_all, 1), dtype=np.int64)
    child_pos = np.empty(max(2 * n_orb_all, 16), dtype=np.int64)
    delay_ids = np.empty(64, dtype=np.int64)
    did_off = np.zeros(n_nodes, dtype=np.int64)
    elim_start = np.zeros(n_nodes + 1, dtype=np.int64)
    for v in range(n_nodes - 1):
        elim_start[v + 1] = elim_start[v] + n_elim[v]

    fsp = 0  # factors used
    psp = 0  # child positions used
    dsp = 0  # delay ids used
    esp = 0  # eliminated ids / pivots used
    sp = 0
    worst = 1.0
    growth = 0.0
    delays = 0
    short = False
    status = OK
    f_root = 0
    pivot = 1.0
    for v in range(n_nodes):
        k = n_elim[v]
        b = n_bound[v]
        d = 0
        c0 = child_ptr[v]
        c1 = child_ptr[v + 1]
        for ci in range(c0, c1):
            d += d_out[children[ci]]
        if d > delay_max:
            status = TOO_MANY_DELAYS
            break
        f = d + k + b
        _assemble(front, f, d, k, z, v, entry_ptr, entry_row, entry_col, entry_val, child_ptr, children,
                  map_ptr, parent_pos, d_out, sq_out, upd_off, stack, pos_buf, symmetric)
        base = upd_off[children[c0]] if c1 > c0 else sp
        # The front's orbitals before any permutation: delayed ones (children's, in order), own, boundary.
        slot = 0
        for ci in range(c0, c1):
            c = children[ci]
            for i in range(d_out[c]):
                ids_pre[slot + i] = delay_ids[did_off[c] + i]
            slot += d_out[c]
        if v == root:
            for i in range(k):
                ids_pre[d + i] = root_orbitals[i]
        else:
            for i in range(k):
                ids_pre[d + i] = elim_orbitals[elim_start[v] + i]
        for i in range(d + k, f):
            ids_pre[i] = -1
        for i in range(f):
            perm[i] = i
        kk = d + k
        r = 0
        full_delay = False
        if v != root:
            pivot = _conditioned(_factor(front, f, kk, b, ipiv), front, f, kk, b)
            rounds = 0
            while pivot < pivot_delay and rounds < DELAY_ROUNDS and kk - r > 1:
                # Delay the unknowns of the near-null directions found in what is still eliminated, and again
                # while the rest is still near-singular (large subdomains have many levels close to E).
                n_k = kk - r
                r_new = _near_null_unknowns(front, f, n_k, ipiv, chosen, null_residual)
                m_k = 0
                for i in range(n_k):
                    keep = True
                    for t in range(r_new):
                        if chosen[t] == i:
                            keep = False
                    if keep:
                        inv[m_k] = perm[i]
                        m_k += 1
                for t in range(r_new):
                    inv[m_k + t] = perm[chosen[t]]
                for i in range(n_k, f):
                    inv[i] = perm[i]
                for i in range(f):
                    perm[i] = inv[i]
                r += r_new
                rounds += 1
                _assemble(front, f, d, k, z, v, entry_ptr, entry_row, entry_col, entry_val, child_ptr, children,
                          map_ptr, parent_pos, d_out, sq_out, upd_off, stack, pos_buf, symmetric)
                _permute(front, spare, f, perm)
                front, spare = spare, front
                pivot = _conditioned(_factor(front, f, kk - r, b + r, ipiv), front, f, kk - r, b + r)
            if pivot < pivot_delay:
                full_delay = True
                for i in range(f):
                    perm[i] = i
        for i in range(f):
            inv[perm[i]] = i
            ids[i] = ids_pre[perm[i]]
        # Where each child's pushed unknowns sit in this front (after the permutation).
        slot = 0
        for ci in range(c0, c1):
            c = children[ci]
            s = sq_out[c]
            dc = d_out[c]
            child_pos = _grow(child_pos, psp + s)
            pos_off[c] = psp
            m0 = map_ptr[c]
            for i in range(s):
                pre = slot + i if i < dc else d + parent_pos[m0 + i - dc]
                child_pos[psp + i] = inv[pre]
            slot += dc
            psp += s
        n_front[v] = f
        if v == root:
            f_root = f
            break
        if not full_delay:
            ke = kk - r
            s = f - ke
            worst = min(worst, pivot)
            need = ke * ke + ke * s + (0 if symmetric else s * ke)
            if fsp + need > factors.shape[0]:
                short = True  # count on, to return the size the store needs
            else:
                o = fsp
                for j in range(ke):
                    for i in range(ke):
                        factors[o + j * ke + i] = front[j * f + i]
                o += ke * ke
                for j in range(s):
                    for i in range(ke):
                        factors[o + j * ke + i] = front[(ke + j) * f + i]
                o += ke * s
                if not symmetric:
                    for j in range(ke):
                        for i in range(s):
                            factors[o + j * s + i] = front[j * f + ke + i]
                fac_off[v] = fsp
            fsp += need
            for i in range(ke):
                pivots[esp + i] = ipiv[i]
            _update(front, f, ke, s, scal, symmetric)
            sq = s
            if base + sq * sq > stack_cap:
                status = STACK_FULL
                break
            growth = max(growth, _push(front, f, ke, sq, stack, base, symmetric))
            d_out[v] = r
            delays += r
            n_keep[v] = ke
            first_out = ke
        else:
            if base + f * f > stack_cap:
                status = STACK_FULL
                break
            _assemble(front, f, d, k, z, v, entry_ptr, entry_row, entry_col, entry_val, child_ptr, children,
                      map_ptr, parent_pos, d_out, sq_out, upd_off, stack, pos_buf, symmetric)
            _push(front, f, 0, f, stack, base, symmetric)
            d_out[v] = kk
            delays += kk
            n_keep[v] = 0
            sq = f
            first_out = 0
        piv_off[v] = esp
        for i in range(n_keep[v]):
            elim_ids[esp + i] = ids[i]
        esp += n_keep[v]
        delay_ids = _grow(delay_ids, dsp + d_out[v])
        did_off[v] = dsp
        for i in range(d_out[v]):
            delay_ids[dsp + i] = ids[first_out + i]
        dsp += d_out[v]
        sq_out[v] = sq
        upd_off[v] = base
        sp = base + sq * sq
    if status != OK:
        return status, worst, growth, delays, 0, 0.0, 0, 0
    if short:
        return FACTORS_FULL, worst, growth, delays, 0, 0.0, fsp, 0
    delayed = 0
    for ci in range(child_ptr[root], child_ptr[root + 1]):
        delayed += d_out[children[ci]]

    # Root: G = (S - Sigma)^-1 on its whole front.
    f = f_root
    k = f - delayed
    for j in range(k):
        for i in range(k):
            front[(delayed + j) * f + delayed + i] -= sigma_root[i, j]
    info = _xxgetrf(_KIND, f, f, front.ctypes, f, ipiv.ctypes)
    small = np.inf
    large = 0.0
    for j in range(f):
        u = abs(front[j * f + j])
        small = min(small, u)
        large = max(large, u)
    root_pivot = small / large if large > 0 and info == 0 else 0.0
    if root_pivot == 0.0:
        return ROOT_SINGULAR, worst, growth, delays, delayed, root_pivot, 0, 0
    if f > 0:
        _xxgetri(_KIND, f, front.ctypes, f, ipiv.ctypes)
    if symmetric:  # G = G^T: the mean of the two computed triangles (round-off differs between them)
        for j in range(f):
            for i in range(j):
                avg = 0.5 * (front[j * f + i] + front[i * f + j])
                front[j * f + i] = avg
                front[i * f + j] = avg
    for i in range(f):
        out_diag[ids[i]] = front[i * f + i]

    # Room for the downward stack: parents push every child's G_BB, children pop their own.
    gsp = 0
    peak = 0
    for v in range(n_nodes - 1, -1, -1):
        if v != root:
            s = n_front[v] - n_keep[v]
            gsp -= s * s
        for ci in range(child_ptr[v], child_ptr[v + 1]):
            s = sq_out[children[ci]]
            gsp += s * s
        peak = max(peak, gsp)
    if peak > down.shape[0]:
        return DOWN_STACK_FULL, worst, growth, delays, delayed, root_pivot, 0, peak

    tmp = np.empty(0, dtype=np.complex128) if symmetric else np.empty(max(f_cap * f_cap, 1), dtype=np.complex128)
    m1 = np.array([-1.0 + 0j])
    zero = np.array([0.0 + 0j])
    one = np.array([1.0 + 0j])
    gsp = 0
    g = front  # G on the current front, column-major, leading dimension f
    for v in range(n_nodes - 1, -1, -1):
        f = n_front[v]
        if v != root:
            g = spare
            ke = n_keep[v]
            s = f - ke
            gsp -= s * s
            for j in range(s):  # G_BB, cut from the parent
                for i in range(s):
                    g[(ke + j) * f + ke + i] = down[gsp + j * s + i]
            if ke > 0:
                o = fac_off[v]
                for j in range(ke):  # S_KK^-1 from its LU
                    for i in range(ke):
                        g[j * f + i] = factors[o + j * ke + i]
                for i in range(ke):
                    ipiv[i] = pivots[piv_off[v] + i]
                _xxgetri(_KIND, ke, g.ctypes, f, ipiv.ctypes)
                x = factors[o + ke * ke:]
                leaf = child_ptr[v + 1] == child_ptr[v]  # nothing below: only the diagonal of G_KK is needed
                if symmetric:
                    # G_KB = -X G_BB;  G_BK = G_KB^T;  G_KK = S_KK^-1 - X G_BK
                    _gemm(ke, s, s, m1, x, ke, g[ke * f + ke:], f, zero, g[ke * f:], f)
                    if leaf:
                        for i in range(ke):
                            acc = g[i * f + i]
                            for j in range(s):
                                acc -= x[j * ke + i] * g[(ke + j) * f + i]
                            out_diag[elim_ids[piv_off[v] + i]] = acc
                    else:
                        for j in range(s):
                            for i in range(ke):
                                g[i * f + ke + j] = g[(ke + j) * f + i]
                        _gemm(ke, ke, s, m1, x, ke, g[ke:], f, one, g, f)
                        for j in range(ke):
                            for i in range(j):
                                avg = 0.5 * (g[j * f + i] + g[i * f + j])
                                g[j * f + i] = avg
                                g[i * f + j] = avg
                else:
                    # Y = S_BK S_KK^-1;  G_BK = -G_BB Y;  G_KB = -X G_BB;  G_KK = S_KK^-1 - X G_BK
                    _gemm(s, ke, ke, one, factors[o + ke * ke + ke * s:], s, g, f, zero, tmp, s)
                    _gemm(s, ke, s, m1, g[ke * f + ke:], f, tmp, s, zero, g[ke:], f)
                    if leaf:
                        for i in range(ke):
                            acc = g[i * f + i]
                            for j in range(s):
                                acc -= x[j * ke + i] * g[i * f + ke + j]
                            out_diag[elim_ids[piv_off[v] + i]] = acc
                    else:
                        _gemm(ke, s, s, m1, x, ke, g[ke * f + ke:], f, zero, g[ke * f:], f)
                        _gemm(ke, ke, s, m1, x, ke, g[ke:], f, one, g, f)
                if not leaf:
                    for i in range(ke):
                        out_diag[elim_ids[piv_off[v] + i]] = g[i * f + i]
        for ci in range(child_ptr[v], child_ptr[v + 1]):  # each child's G_BB, first child deepest
            c = children[ci]
            s = sq_out[c]
            p0 = pos_off[c]
            for j in range(s):
                col = child_pos[p0 + j] * f
                for i in range(s):
                    down[gsp + j * s + i] = g[col + child_pos[p0 + i]]
            gsp += s * s
    return OK, worst, growth, delays, delayed, root_pivot, 0, 0
