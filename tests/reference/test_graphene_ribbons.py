"""Graphene nanoribbons on the honeycomb lattice (nearest-neighbour hopping t, Dirac point at E = 0).

* Zigzag ribbons carry exactly one channel near the Dirac point, from the
  edge-state band (K. Nakada et al., PRB 54, 17954 (1996); L. Brey &
  H. A. Fertig, PRB 73, 235411 (2006); both from memory).
* Armchair ribbons with N dimer lines are metallic if and only if
  N = 3M - 1 (Brey & Fertig 2006; Y.-W. Son, M. L. Cohen, S. G. Louie,
  PRL 97, 216803 (2006), gap-opening aside; both from memory): then T = 1 at
  small |E|, otherwise T = 0 in the gap.
"""

import numpy as np
import pytest

from rgftrans.system.device import Device, Lead
from rgftrans.transport.direct import transmission_direct
from rgftrans.system.geometry import rectangle
from rgftrans.system.lattices import honeycomb
from rgftrans.transport.rgf import transmission


@pytest.mark.parametrize("chains", [3, 5, 8])
@pytest.mark.parametrize("energy", [0.02, 0.2, -0.2])
def test_zigzag_ribbon_has_one_channel_near_the_dirac_point(chains, energy):
    # Zigzag chain k holds A sites at y = 1.5k and B sites at y = 1.5k - 0.5 (a = 1); y in [1, 1.5 N]
    # takes whole chains 1..N, so both edges are zigzag (not bearded).
    lo, hi = 0.9, 1.5 * chains + 0.1
    dev = Device(rectangle(0, lo, 15, hi), [Lead("l", "left", (lo, hi)), Lead("r", "right", (lo, hi))],
                 lattice=honeycomb(1.0), hopping=1.0)
    res = transmission(dev.discretise(), [energy])
    assert res.n_open[0, 0] == 1
    # clean ribbon: T = N (ballistic conductor, Datta 1995 ch. 2, from memory) to round-off; 1e-9 leaves
    # margin for the eigen-solve of the ribbon's unit cell near the flat edge-state band.
    assert res.transmission[0] == pytest.approx(1.0, abs=1e-9)


@pytest.mark.parametrize("width", [4.3, 5.2, 6.1, 7.0, 7.8, 9.6])
def test_armchair_ribbon_metallic_rule(width):
    dev = Device(rectangle(0, 0, width, 20), [Lead("b", "bottom", (0, width)), Lead("t", "top", (0, width))],
                 lattice=honeycomb(1.0), hopping=1.0)
    model = dev.discretise()
    n_dimer = len(np.unique(np.round(model.leads[0].cell_positions[:, 0], 6)))  # distinct x lines of the cell
    metallic = n_dimer % 3 == 2
    t_low = transmission(model, [0.01]).transmission[0]
    # N = 3M - 1 rule (Brey & Fertig 2006; Son, Cohen & Louie 2006; from memory); clean ribbon T = N, so
    # round-off only, 1e-9 as above.
    assert t_low == pytest.approx(1.0 if metallic else 0.0, abs=1e-9)
    # and the sparse-LU reference agrees inside the first subband (independent solver, round-off)
    assert transmission_direct(model, [0.01])[0, 1, 0] == pytest.approx(t_low, abs=1e-9)


def test_honeycomb_needs_an_explicit_hopping():
    from rgftrans.errors import LatticeError

    dev = Device(rectangle(0, 0, 5, 5), [Lead("l", "left", (0, 5)), Lead("r", "right", (0, 5))], lattice=honeycomb(1.0))
    with pytest.raises(LatticeError, match="give hopping= in meV"):
        dev.discretise()
