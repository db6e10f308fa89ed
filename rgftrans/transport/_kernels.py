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

# Kernels take the sliced Hamiltonian as a LayerBuffers and the lead terms as an EndTerms (rgftrans.transport.buffers):
# named tuples of arrays, which numba unpacks like any tuple.


#: Up to this layer width the kernels use explicit loops over preallocated
#: buffers for everything but the inversion (LAPACK), so a layer costs no
#: allocation and no BLAS call overhead beyond the inverse itself.
SMALL_BLOCK = 24


#: ``max|A| max|A^-1|`` above this marks a block as numerically singular (a crude,
#: O(m^2) condition estimate): the energy is then redone by the caller.
ILL_CONDITIONED = 1e11


@njit(cache=True)
def _ill(a, g):
    # |re| + |im| is within sqrt(2) of |z| and avoids a hypot per entry.
    big_a = 0.0
    big_g = 0.0
    for r in range(a.shape[0]):
        for c in range(a.shape[1]):
            big_a = max(big_a, abs(a[r, c].real) + abs(a[r, c].imag))
            big_g = max(big_g, abs(g[r, c].real) + abs(g[r, c].imag))
    return big_a * big_g > ILL_CONDITIONED


@njit(cache=True)
def _inv(a):
    """LAPACK inverse (getrf + getri) and whether the block is numerically singular.

    An exactly singular block raises LinAlgError, which the caller handles.
    """
    g = np.ascontiguousarray(np.linalg.inv(a))
    return g, _ill(a, g)


@njit(cache=True)
def two_terminal(z_all, layers, ends, ward=False):
    """Two-terminal transmission at many energies.

    Parameters
    ----------
    z_all : (n_E,) complex
        Device energies (meV).
    layers : LayerBuffers
        The sliced Hamiltonian.
    ends : EndTerms
        ``sig_first`` (n_E, m_0, m_0), ``sig_last`` (n_E, m_K, m_K), ``w_first``
        (n_E, m_0, n_ch), ``gamma_last`` (n_E, m_K, m_K), complex.
    ward : bool
        Skip the column propagation and use the Ward identity on the last
        layer, ``T = i Tr[Gamma_K (G_KK - G_KK^dag)] - Tr[Gamma_K G_KK Gamma_K G_KK^dag]``
        (valid for real energies and a Hermitian device; loses relative
        accuracy when T is tiny -- the caller checks).

    Returns
    -------
    (n_E,) float
        NaN where an intermediate block is numerically singular (a bound
        state of a partial system, or of the whole open device, at this
        energy); an exactly singular one raises LinAlgError.  The caller
        redoes those energies.
    """
    h_flat, h_off, sizes, v_flat, v_off, v_diag = layers
    sig0_all, sigk_all, w0_all, gk_all = ends
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
        x = g @ w0_all[e] if not ward else w0_all[e]
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
                if not ward:
                    vx = np.empty((mi, x.shape[1]), dtype=np.complex128)
                    for r in range(mi):
                        cr = np.conj(v[r, r])
                        for c in range(x.shape[1]):
                            vx[r, c] = cr * x[r, c]
            else:
                vh = np.ascontiguousarray(v.conj().T)
                a -= vh @ (g @ v)
                if not ward:
                    vx = vh @ x
            if i == n_layers - 1:
                a -= sigk_all[e]
            g, singular = _inv(a)
            bad = bad or singular
            if not ward:
                x = g @ vx
        if ward:
            gam = gk_all[e]
            gg = gam @ g
            acc = 0.0
            for r in range(g.shape[0]):
                for c in range(g.shape[0]):
                    # i Tr[Gamma (g - g^dag)] - Tr[Gamma g Gamma g^dag]
                    acc += (1j * gam[r, c] * (g[c, r] - np.conj(g[r, c]))).real
            gg2 = gg @ gam
            for r in range(g.shape[0]):
                for c in range(g.shape[0]):
                    acc -= (gg2[r, c] * np.conj(g[r, c])).real
            out[e] = np.nan if bad else acc
            continue
        # T = Tr[x^dag Gamma_K x]
        gx = gk_all[e] @ x
        acc = 0.0
        for r in range(x.shape[0]):
            for c in range(x.shape[1]):
                acc += (np.conj(x[r, c]) * gx[r, c]).real
        out[e] = np.nan if bad else acc
    return out


@njit(cache=True)
def _schur_into(out, g, v, diag, forward):
    """Write ``V^dag g V`` (forward: V = <i-1|H|i>) or ``V g V^dag`` (backward: V = <i|H|i+1>) into ``out``.

    Explicit loops, no allocation: a diagonal V is an elementwise scaling, a
    general V a sparse-aware triple loop (for narrow layers).
    """
    n = out.shape[0]
    k = g.shape[0]
    for r in range(n):
        for c in range(n):
            if diag:
                if forward:
                    out[r, c] = np.conj(v[r, r]) * g[r, c] * v[c, c]
                else:
                    out[r, c] = v[r, r] * g[r, c] * np.conj(v[c, c])
                continue
            acc = 0j
            for p in range(k):
                vp = np.conj(v[p, r]) if forward else v[r, p]
                if vp != 0:
                    for q in range(k):
                        acc += vp * g[p, q] * (v[q, c] if forward else np.conj(v[c, q]))
            out[r, c] = acc


@njit(cache=True)
def _schur(g, v, diag, forward):
    """``V^dag g V`` (forward) or ``V g V^dag`` (backward) as a new array; BLAS for a general V."""
    if diag:
        out = np.empty_like(g)
        _schur_into(out, g, v, True, forward)
        return out
    if forward:
        return np.ascontiguousarray(v.conj().T) @ (g @ v)
    return v @ (g @ np.ascontiguousarray(v.conj().T))


@njit(cache=True)
def diagonal_two_terminal(z_all, layers, sig_first, sig_last, out):
    """Diagonal of G at many energies, leads in the first and last layer.

    ``G_ii = (A_i - V_{i-1}^dag gL_{i-1} V_{i-1} - V_i gR_{i+1} V_i^dag)^-1``
    with left- and right-connected functions from a forward and a backward
    sweep; both ends carry a lead, so every inverted block is an open
    system.  ``out`` is (n_E, n_orbitals) in layer order.  An exactly
    singular block raises LinAlgError (the caller falls back).
    """
    h_flat, h_off, sizes, v_flat, v_off, v_diag = layers
    sig0_all, sigk_all = sig_first, sig_last
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
def two_terminal_small(z_all, layers, ends):
    """:func:`two_terminal` for narrow devices (every layer at most SMALL_BLOCK wide).

    Same arguments and result; all products are explicit loops over
    preallocated work buffers, so a layer costs no allocation and no BLAS
    call overhead -- at widths of a few sites that overhead would exceed the
    arithmetic.
    """
    h_flat, h_off, sizes, v_flat, v_off, v_diag = layers
    sig0_all, sigk_all, w0_all, gk_all = ends
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
            g[:, :] = np.linalg.inv(a)
            bad = bad or _ill(a, g)
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


@njit(cache=True)
def diagonal_two_terminal_small(z_all, layers, sig_first, sig_last, out):
    """:func:`diagonal_two_terminal` for narrow devices: loops over preallocated buffers, no BLAS calls."""
    h_flat, h_off, sizes, v_flat, v_off, v_diag = layers
    sig0_all, sigk_all = sig_first, sig_last
    n_e = z_all.shape[0]
    n_layers = sizes.shape[0]
    mmax = 0
    for i in range(n_layers):
        mmax = max(mmax, sizes[i])
    sl_flat = np.zeros(h_off[n_layers], dtype=np.complex128)  # left self-energies, layer by layer
    work = np.empty(mmax * mmax, dtype=np.complex128)
    g_buf = np.empty(mmax * mmax, dtype=np.complex128)
    sr_buf = np.zeros(mmax * mmax, dtype=np.complex128)
    for e in range(n_e):
        z = z_all[e]
        bad = False
        # forward sweep: sl[i] = V_{i-1}^dag gL_{i-1} V_{i-1}
        for i in range(n_layers):
            mi = sizes[i]
            a = work[:mi * mi].reshape(mi, mi)
            h = h_flat[h_off[i]:h_off[i] + mi * mi].reshape(mi, mi)
            sl = sl_flat[h_off[i]:h_off[i] + mi * mi].reshape(mi, mi)
            if i == 0:
                sl[:, :] = 0
            else:
                mp = sizes[i - 1]
                g = g_buf[:mp * mp].reshape(mp, mp)
                v = v_flat[v_off[i - 1]:v_off[i - 1] + mp * mi].reshape(mp, mi)
                _schur_into(sl, g, v, v_diag[i - 1], True)
            for r in range(mi):
                for c in range(mi):
                    a[r, c] = -h[r, c] - sl[r, c]
                    if i == 0:
                        a[r, c] -= sig0_all[e, r, c]
                    if i == n_layers - 1:
                        a[r, c] -= sigk_all[e, r, c]
                a[r, r] += z
            g = g_buf[:mi * mi].reshape(mi, mi)
            g[:, :] = np.linalg.inv(a)
            bad = bad or _ill(a, g)
        # backward sweep: G_ii = (A_i - sl_i - sr_i)^-1, then the right self-energy for layer i-1
        pos = out.shape[1]
        for i in range(n_layers - 1, -1, -1):
            mi = sizes[i]
            h = h_flat[h_off[i]:h_off[i] + mi * mi].reshape(mi, mi)
            sl = sl_flat[h_off[i]:h_off[i] + mi * mi].reshape(mi, mi)
            sr = sr_buf[:mi * mi].reshape(mi, mi)
            if i == n_layers - 1:
                sr[:, :] = 0
            a = work[:mi * mi].reshape(mi, mi)
            for r in range(mi):
                for c in range(mi):
                    a[r, c] = -h[r, c] - sl[r, c] - sr[r, c]
                    if i == 0:
                        a[r, c] -= sig0_all[e, r, c]
                    if i == n_layers - 1:
                        a[r, c] -= sigk_all[e, r, c]
                a[r, r] += z
            g = g_buf[:mi * mi].reshape(mi, mi)
            g[:, :] = np.linalg.inv(a)
            bad = bad or _ill(a, g)
            pos -= mi
            for k in range(mi):
                out[e, pos + k] = g[k, k]
            if i > 0:
                # right-connected gR_i = (A_i - sr_i)^-1, then sr_{i-1} = V_{i-1} gR_i V_{i-1}^dag
                for r in range(mi):
                    for c in range(mi):
                        a[r, c] = -h[r, c] - sr[r, c]
                        if i == n_layers - 1:
                            a[r, c] -= sigk_all[e, r, c]
                    a[r, r] += z
                g[:, :] = np.linalg.inv(a)
                bad = bad or _ill(a, g)
                mp = sizes[i - 1]
                v = v_flat[v_off[i - 1]:v_off[i - 1] + mp * mi].reshape(mp, mi)
                srp = sr_buf[:mp * mp].reshape(mp, mp)
                _schur_into(srp, g, v, v_diag[i - 1], False)
        if bad:
            for k in range(out.shape[1]):
                out[e, k] = np.nan
