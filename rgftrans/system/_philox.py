"""Philox4x64-10 counter-based random words, compiled, one counter per site.

The Anderson disorder of :class:`rgftrans.system.fields.Disorder` is defined by
numpy's ``Philox`` bit generator (the first 64-bit word of the block at a
counter built from the site's cell).  Constructing one numpy generator per
lattice row costs about 30 us, which made a 32 x 1000 device's draw take
7-34 ms depending on its orientation -- more than the transport solve of a
disorder ensemble.  This kernel evaluates the same function for every site
at once.

The algorithm is Philox4x64 with 10 rounds of Salmon, Moraes, Dror & Shaw,
"Parallel random numbers: as easy as 1, 2, 3", SC'11 (2011) (from memory):
each round multiplies two counter words by the constants ``M0``, ``M1`` into
128-bit products, mixes their high halves with the other words and the key,
and the key is bumped by the Weyl constants ``W0``, ``W1`` between rounds.
It is checked word for word against ``numpy.random.Philox`` in
``tests/test_fields.py`` -- the reference, since that is what the disorder's
documented stream is.
"""

from __future__ import annotations

import numpy as np
from llvmlite import ir
from numba import njit, types
from numba.extending import intrinsic

_M0 = np.uint64(0xD2E7470EE14C6C93)
_M1 = np.uint64(0xCA5A826395121157)
_W0 = np.uint64(0x9E3779B97F4A7C15)
_W1 = np.uint64(0xBB67AE8584CAA73B)


@intrinsic
def _mulhilo(typingctx, a, b):
    """High and low 64-bit halves of the 128-bit product a * b (unsigned): one widening multiply."""
    if a != types.uint64 or b != types.uint64:
        return None
    sig = types.UniTuple(types.uint64, 2)(types.uint64, types.uint64)

    def codegen(context, builder, signature, args):
        wide = ir.IntType(128)
        prod = builder.mul(builder.zext(args[0], wide), builder.zext(args[1], wide))
        lo = builder.trunc(prod, ir.IntType(64))
        hi = builder.trunc(builder.lshr(prod, ir.Constant(wide, 64)), ir.IntType(64))
        return context.make_tuple(builder, signature.return_type, (hi, lo))

    return sig, codegen


@njit(cache=True)
def first_words(c0, c1, c2, c3, key0, key1, out):
    """``out[i]``: the first word of the Philox4x64-10 block of counter ``(c0[i], c1[i], c2[i], c3)`` under the key."""
    for i in range(len(out)):
        x0, x1, x2, x3 = c0[i], c1[i], c2[i], c3
        k0, k1 = key0, key1
        for r in range(10):
            if r > 0:
                k0 = k0 + _W0
                k1 = k1 + _W1
            hi0, lo0 = _mulhilo(_M0, x0)
            hi1, lo1 = _mulhilo(_M1, x2)
            x0, x1, x2, x3 = hi1 ^ x1 ^ k0, lo1, hi0 ^ x3 ^ k1, lo0
        out[i] = x0
