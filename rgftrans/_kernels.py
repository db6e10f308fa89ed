"""numba-compiled RGF kernels over flat, preallocated layer buffers.

The layer Hamiltonians ``H_i`` and couplings ``V_i = <i|H|i+1>`` are stored
contiguously in flat complex buffers with integer offsets, so every block is
a contiguous view and no Python runs inside the slice loop.  Couplings that
are diagonal (the column slicing of a square-lattice device, with or without
a field) are flagged; their Schur complement ``V^dag g V`` is then an
elementwise scaling instead of two matrix products.

Only the columns ``G_{i0} W_0`` are propagated, where ``Gamma_0 = W_0 W_0^dag``
has one column per open channel of the first lead; the transmission is
``T = sum |Gamma_K^{1/2} G_{K0} W_0|^2 = Tr[W_0^dag G^dag Gamma_K G W_0]``.
"""

from __future__ import annotations

import numpy as np
from numba import njit

#: Below this layer width the kernels invert with their own Gauss-Jordan
#: elimination (partial pivoting), which beats a LAPACK call's fixed overhead.
SMALL_BLOCK = 12


#: A pivot below this fraction of the largest entry marks a (numerically) singular block.
SINGULAR_PIVOT = 1e-13


@njit(cache=True)
def _inv_small(a):
    """Inverse of a small complex matrix by Gauss-Jordan elimination with partial pivoting.

    Returns the inverse and False, or (garbage, True) if a pivot vanished.
    """
    n = a.shape[0]
    m = a.copy()
    inv = np.eye(n, dtype=np.complex128)
    scale = 0.0
    for r in range(n):
        for c in range(n):
            scale = max(scale, abs(a[r, c]))
    for col in range(n):
        piv = col
        best = abs(m[col, col])
        for r in range(col + 1, n):
            val = abs(m[r, col])
            if val > best:
                best = val
                piv = r
        if piv != col:
            for c in range(n):
                tmp = m[col, c]
                m[col, c] = m[piv, c]
                m[piv, c] = tmp
                tmp = inv[col, c]
                inv[col, c] = inv[piv, c]
                inv[piv, c] = tmp
        if best <= SINGULAR_PIVOT * scale:
            return inv, True
        d = 1.0 / m[col, col]
        for c in range(n):
            m[col, c] *= d
            inv[col, c] *= d
        for r in range(n):
            if r != col:
                f = m[r, col]
                if f != 0:
                    for c in range(n):
                        m[r, c] -= f * m[col, c]
                        inv[r, c] -= f * inv[col, c]
    return inv, False


@njit(cache=True)
def _inv(a):
    """Inverse and a singular flag.  Large blocks go to LAPACK, which raises on an exactly singular block."""
    if a.shape[0] <= SMALL_BLOCK:
        inv, bad = _inv_small(a)
        return np.ascontiguousarray(inv), bad
    return np.ascontiguousarray(np.linalg.inv(a)), False


@njit(cache=True)
def two_terminal(z_all, h_flat, h_off, sizes, v_flat, v_off, v_diag, sig0_all, sigk_all, w0_all, gk_all):
    """Two-terminal transmission at many energies.

    Parameters
    ----------
    z_all : (n_E,) complex
        Device energies (meV).
    h_flat, h_off, sizes : layer Hamiltonians, flat; block i is
        ``h_flat[h_off[i]: h_off[i] + m_i^2].reshape(m_i, m_i)``.
    v_flat, v_off, v_diag : couplings ``V_i`` (m_i x m_{i+1}), flat; ``v_diag[i]``
        if ``V_i`` is square and diagonal.
    sig0_all : (n_E, m_0, m_0) complex
        Self-energy of the first lead embedded in layer 0.
    sigk_all : (n_E, m_K, m_K) complex
        Self-energy of the last lead embedded in the last layer.
    w0_all : (n_E, m_0, n_ch) complex
        ``Gamma_0 = W_0 W_0^dag`` (zero-padded columns allowed).
    gk_all : (n_E, m_K, m_K) complex
        ``Gamma_K`` embedded in the last layer.

    Returns
    -------
    (n_E,) float
        NaN where an intermediate block was singular (the caller falls back
        to a direct solve there).
    """
    n_e = z_all.shape[0]
    n_layers = sizes.shape[0]
    out = np.empty(n_e)
    for e in range(n_e):
        z = z_all[e]
        m0 = sizes[0]
        a = -h_flat[h_off[0]:h_off[0] + m0 * m0].reshape(m0, m0).copy()
        for k in range(m0):
            a[k, k] += z
        a -= sig0_all[e]
        if n_layers == 1:
            a -= sigk_all[e]
        g, bad = _inv(a)
        x = g @ w0_all[e]
        for i in range(1, n_layers):
            mp = sizes[i - 1]
            mi = sizes[i]
            a = -h_flat[h_off[i]:h_off[i] + mi * mi].reshape(mi, mi).copy()
            for k in range(mi):
                a[k, k] += z
            v = v_flat[v_off[i - 1]:v_off[i - 1] + mp * mi].reshape(mp, mi)
            if v_diag[i - 1]:
                for r in range(mi):
                    cr = np.conj(v[r, r])
                    for c in range(mi):
                        a[r, c] -= cr * g[r, c] * v[c, c]
                vx = np.empty_like(x)
                for r in range(mi):
                    cr = np.conj(v[r, r])
                    for c in range(x.shape[1]):
                        vx[r, c] = cr * x[r, c]
            else:
                vh = np.ascontiguousarray(v.conj().T)
                a -= vh @ (g @ v)
                vx = vh @ x
            if i == n_layers - 1:
                a -= sigk_all[e]
            g, singular = _inv(a)
            bad = bad or singular
            x = g @ vx
        # T = Tr[x^dag Gamma_K x]
        gx = gk_all[e] @ x
        acc = 0.0
        for r in range(x.shape[0]):
            for c in range(x.shape[1]):
                acc += (np.conj(x[r, c]) * gx[r, c]).real
        out[e] = np.nan if bad else acc
    return out


@njit(cache=True)
def _schur(g, v, diag, forward):
    """``V^dag g V`` (forward: V = <i-1|H|i>) or ``V g V^dag`` (backward: V = <i|H|i+1>)."""
    if diag:
        n = g.shape[0]
        out = np.empty_like(g)
        for r in range(n):
            for c in range(n):
                if forward:
                    out[r, c] = np.conj(v[r, r]) * g[r, c] * v[c, c]
                else:
                    out[r, c] = v[r, r] * g[r, c] * np.conj(v[c, c])
        return out
    if forward:
        return np.ascontiguousarray(v.conj().T) @ (g @ v)
    return v @ (g @ np.ascontiguousarray(v.conj().T))


@njit(cache=True)
def diagonal_two_terminal(z_all, h_flat, h_off, sizes, v_flat, v_off, v_diag, sig0_all, sigk_all, out):
    """Diagonal of G at many energies, leads in the first and last layer.

    ``G_ii = (A_i - V_{i-1}^dag gL_{i-1} V_{i-1} - V_i gR_{i+1} V_i^dag)^-1``
    with left- and right-connected functions from a forward and a backward
    sweep; both ends carry a lead, so every inverted block is an open
    system.  ``out`` is (n_E, n_orbitals) in layer order; rows where a block
    was singular are set to NaN.
    """
    n_e = z_all.shape[0]
    n_layers = sizes.shape[0]
    for e in range(n_e):
        z = z_all[e]
        bad = False
        a_list = []
        for i in range(n_layers):
            mi = sizes[i]
            a = -h_flat[h_off[i]:h_off[i] + mi * mi].reshape(mi, mi).copy()
            for k in range(mi):
                a[k, k] += z
            if i == 0:
                a -= sig0_all[e]
            if i == n_layers - 1:
                a -= sigk_all[e]
            a_list.append(a)
        # left self-energies sl[i] = V_{i-1}^dag gL_{i-1} V_{i-1}
        sl = []
        g = a_list[0]
        for i in range(n_layers):
            if i == 0:
                sl.append(np.zeros_like(a_list[0]))
                g, singular = _inv(a_list[0])
            else:
                mp, mi = sizes[i - 1], sizes[i]
                v = v_flat[v_off[i - 1]:v_off[i - 1] + mp * mi].reshape(mp, mi)
                s = _schur(g, v, v_diag[i - 1], True)
                sl.append(s)
                g, singular = _inv(a_list[i] - s)
            bad = bad or singular
        # backward: right self-energy, and G_ii
        pos = out.shape[1]
        sr = np.zeros_like(a_list[n_layers - 1])
        for i in range(n_layers - 1, -1, -1):
            mi = sizes[i]
            gii, singular = _inv(a_list[i] - sl[i] - sr)
            bad = bad or singular
            pos -= mi
            for k in range(mi):
                out[e, pos + k] = gii[k, k]
            if i > 0:
                gr, singular = _inv(a_list[i] - sr)
                bad = bad or singular
                mp = sizes[i - 1]
                v = v_flat[v_off[i - 1]:v_off[i - 1] + mp * mi].reshape(mp, mi)
                sr = _schur(gr, v, v_diag[i - 1], False)
        if bad:
            for k in range(out.shape[1]):
                out[e, k] = np.nan


@njit(cache=True)
def _gauss_jordan_into(m, inv):
    """Invert ``m`` (destroyed) into ``inv`` by Gauss-Jordan with partial pivoting; True if singular."""
    n = m.shape[0]
    scale = 0.0
    for r in range(n):
        for c in range(n):
            inv[r, c] = 1.0 if r == c else 0.0
            scale = max(scale, abs(m[r, c]))
    for col in range(n):
        piv = col
        best = abs(m[col, col])
        for r in range(col + 1, n):
            val = abs(m[r, col])
            if val > best:
                best = val
                piv = r
        if best <= SINGULAR_PIVOT * scale:
            return True
        if piv != col:
            for c in range(n):
                tmp = m[col, c]
                m[col, c] = m[piv, c]
                m[piv, c] = tmp
                tmp = inv[col, c]
                inv[col, c] = inv[piv, c]
                inv[piv, c] = tmp
        d = 1.0 / m[col, col]
        for c in range(n):
            m[col, c] *= d
            inv[col, c] *= d
        for r in range(n):
            if r != col:
                f = m[r, col]
                if f != 0:
                    for c in range(n):
                        m[r, c] -= f * m[col, c]
                        inv[r, c] -= f * inv[col, c]
    return False


@njit(cache=True)
def two_terminal_small(z_all, h_flat, h_off, sizes, v_flat, v_off, v_diag, sig0_all, sigk_all, w0_all, gk_all):
    """:func:`two_terminal` for narrow devices (every layer at most SMALL_BLOCK wide).

    Same arguments and result; all products are explicit loops over
    preallocated work buffers, so a layer costs no allocation and no BLAS
    call overhead -- at widths of a few sites that overhead would exceed the
    arithmetic.
    """
    n_e = z_all.shape[0]
    n_layers = sizes.shape[0]
    mmax = 0
    for i in range(n_layers):
        mmax = max(mmax, sizes[i])
    n_ch = w0_all.shape[2]
    out = np.empty(n_e)
    work = np.empty(mmax * mmax, dtype=np.complex128)
    g_buf = np.empty(mmax * mmax, dtype=np.complex128)
    x_buf = np.empty(mmax * n_ch, dtype=np.complex128)
    y_buf = np.empty(mmax * n_ch, dtype=np.complex128)
    for e in range(n_e):
        z = z_all[e]
        bad = False
        m_prev = 0
        for i in range(n_layers):
            mi = sizes[i]
            a = work[:mi * mi].reshape(mi, mi)
            h = h_flat[h_off[i]:h_off[i] + mi * mi].reshape(mi, mi)
            for r in range(mi):
                for c in range(mi):
                    a[r, c] = -h[r, c]
                a[r, r] += z
            if i == 0:
                for r in range(mi):
                    for c in range(mi):
                        a[r, c] -= sig0_all[e, r, c]
            if i == n_layers - 1:
                for r in range(mi):
                    for c in range(mi):
                        a[r, c] -= sigk_all[e, r, c]
            x = x_buf[:mi * n_ch].reshape(mi, n_ch)
            y = y_buf[:mi * n_ch].reshape(mi, n_ch)
            if i == 0:
                for r in range(mi):
                    for c in range(n_ch):
                        y[r, c] = w0_all[e, r, c]
            else:
                g = g_buf[:m_prev * m_prev].reshape(m_prev, m_prev)
                v = v_flat[v_off[i - 1]:v_off[i - 1] + m_prev * mi].reshape(m_prev, mi)
                xp = x_buf[:m_prev * n_ch].reshape(m_prev, n_ch)
                if v_diag[i - 1]:
                    for r in range(mi):
                        cr = np.conj(v[r, r])
                        for c in range(mi):
                            a[r, c] -= cr * g[r, c] * v[c, c]
                        for c in range(n_ch):
                            y[r, c] = cr * xp[r, c]
                else:
                    for r in range(mi):
                        for c in range(mi):
                            acc = 0j
                            for p in range(m_prev):
                                vpr = np.conj(v[p, r])
                                if vpr != 0:
                                    for q in range(m_prev):
                                        acc += vpr * g[p, q] * v[q, c]
                            a[r, c] -= acc
                        for c in range(n_ch):
                            acc = 0j
                            for p in range(m_prev):
                                acc += np.conj(v[p, r]) * xp[p, c]
                            y[r, c] = acc
            g = g_buf[:mi * mi].reshape(mi, mi)
            if _gauss_jordan_into(a, g):
                bad = True
            x = x_buf[:mi * n_ch].reshape(mi, n_ch)
            for r in range(mi):
                for c in range(n_ch):
                    acc = 0j
                    for q in range(mi):
                        acc += g[r, q] * y[q, c]
                    x[r, c] = acc
            m_prev = mi
        mk = sizes[n_layers - 1]
        x = x_buf[:mk * n_ch].reshape(mk, n_ch)
        total = 0.0
        for c in range(n_ch):
            for r in range(mk):
                acc = 0j
                for q in range(mk):
                    acc += gk_all[e, r, q] * x[q, c]
                total += (np.conj(x[r, c]) * acc).real
        out[e] = np.nan if bad else total
    return out
