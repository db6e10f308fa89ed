"""Named bundles of the arrays the compiled RGF kernels read (no numba here: importing them is free).

numba passes named tuples of arrays into compiled functions like plain tuples,
so the kernels take two named arguments instead of a dozen positional arrays.
"""

from collections import namedtuple

__all__ = ["LayerBuffers", "EndTerms"]

#: The sliced Hamiltonian as flat buffers: layer blocks ``H_i`` are
#: ``h_flat[h_off[i]: h_off[i] + m_i^2].reshape(m_i, m_i)`` with ``m_i = sizes[i]``; couplings
#: ``V_i = <i|H|i+1>`` (m_i x m_{i+1}) likewise in ``v_flat``/``v_off``; ``v_diag[i]`` marks a
#: square diagonal ``V_i``.  Built once per slicing by :func:`rgftrans.transport.rgf.layer_blocks`.
LayerBuffers = namedtuple("LayerBuffers", "h_flat h_off sizes v_flat v_off v_diag")
#: Per-energy lead terms of a two-terminal device (n_E leading axis): the self-energies of the first and
#: last lead embedded in the first and last layer (``sig_first``, ``sig_last``), ``w_first`` with
#: ``Gamma_first = W W^dag`` (zero-padded columns allowed) and ``gamma_last`` embedded in the last layer.
EndTerms = namedtuple("EndTerms", "sig_first sig_last w_first gamma_last")
