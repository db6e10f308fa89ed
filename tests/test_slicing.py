"""Tests of rgftrans.transport.slicing: the block-tridiagonal partition RGF relies on.

What a valid two-terminal slicing is (the RGF recursion's preconditions; see
e.g. Wimmer & Richter, J. Comput. Phys. 228, 8548 (2009), from memory):

* a partition: every site in exactly one layer;
* block-tridiagonal: no nonzero Hamiltonian element joins layers more than
  one apart;
* the first lead's interface lies in layer 0 and the second's in the last.

And the obvious case: a straight W x L strip between full-width leads slices
into its L columns of W sites.  All checks are exact (integer bookkeeping).
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings

from builders import random_device, small_devices, strip_device
from rgftrans.transport.rgf import layer_blocks
from rgftrans.transport.slicing import Slicing, slice_layers


def _slicing(model) -> Slicing:
    return slice_layers(model.hamiltonian, [lead.interface for lead in model.leads])


def assert_valid_two_terminal_slicing(model, slicing: Slicing) -> None:
    n = model.n_sites
    # A partition of 0 .. n-1.
    every = np.concatenate(slicing.layers)
    assert len(every) == n, f"{len(every)} entries in the layers for {n} sites"
    assert np.array_equal(np.sort(every), np.arange(n)), "a site is missing or appears twice"
    assert all(len(layer) > 0 for layer in slicing.layers), "an empty layer"
    # Block-tridiagonal: every nonzero H_ij joins layers at most one apart.
    layer_of = np.empty(n, dtype=np.int64)
    for k, layer in enumerate(slicing.layers):
        layer_of[layer] = k
    coo = model.hamiltonian.tocoo()
    nonzero = coo.data != 0
    jump = np.abs(layer_of[coo.row[nonzero]] - layer_of[coo.col[nonzero]])
    assert jump.max(initial=0) <= 1, f"a bond skips {jump.max() - 1} layer(s)"
    # Lead 0's interface in layer 0, lead 1's in the last layer.
    assert slicing.lead_layer == (0, slicing.n_layers - 1)
    assert np.all(layer_of[model.leads[0].interface] == 0)
    assert np.all(layer_of[model.leads[1].interface] == slicing.n_layers - 1)
    assert slicing.max_width == max(len(layer) for layer in slicing.layers)


# --- the straight strip -------------------------------------------------------------------------


@pytest.mark.parametrize("width, length", [(1, 1), (1, 5), (3, 1), (2, 2), (4, 6), (7, 3), (5, 12)])
@pytest.mark.parametrize("sides, along", [(("left", "right"), 0), (("bottom", "top"), 1), (("right", "left"), 0)],
                         ids=["left-right", "bottom-top", "right-left"])
def test_straight_strip_slices_into_its_columns(width, length, sides, along):
    model = strip_device(width, length, sides=sides).discretise()
    slicing = _slicing(model)
    assert slicing.n_layers == length
    assert slicing.max_width == width
    assert_valid_two_terminal_slicing(model, slicing)
    # Layer k is exactly the k-th column (row) counted from the first lead's side.
    coordinate = model.positions[:, along]
    order = np.sort(np.unique(coordinate))
    if sides[0] in ("right", "top"):
        order = order[::-1]
    for k, layer in enumerate(slicing.layers):
        expected = np.flatnonzero(np.isclose(coordinate, order[k]))
        assert np.array_equal(np.sort(layer), expected), f"layer {k} is not column {k}"


# --- random devices -----------------------------------------------------------------------------


@pytest.mark.parametrize("seed", range(30))
def test_random_device_slicing_is_valid(seed):
    placement = ("opposite", "adjacent")[seed % 2]
    case = random_device(200 + seed, placement=placement)
    assert_valid_two_terminal_slicing(case.model, _slicing(case.model))


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(device=small_devices())
def test_small_device_slicing_is_valid(device):
    model = device.discretise()
    assert_valid_two_terminal_slicing(model, _slicing(model))


@pytest.mark.parametrize("seed", range(8))
def test_layer_blocks_reassemble_the_hamiltonian(seed):
    # The dense blocks cut by layer_blocks, put back in place, give H exactly.
    case = random_device(300 + seed)
    model = case.model
    blocks = layer_blocks(model)
    layers = blocks.slicing.layers
    rebuilt = np.zeros((model.n_sites, model.n_sites), dtype=complex)
    for k, layer in enumerate(layers):
        rebuilt[np.ix_(layer, layer)] = blocks.h_layers[k]
        if k + 1 < len(layers):
            rebuilt[np.ix_(layer, layers[k + 1])] = blocks.v_next[k]
            rebuilt[np.ix_(layers[k + 1], layer)] = blocks.v_next[k].conj().T
    np.testing.assert_array_equal(rebuilt, model.hamiltonian.toarray())
    for p, lead in enumerate(model.leads):
        layer = layers[blocks.slicing.lead_layer[p]]
        assert np.array_equal(layer[blocks.lead_slots[p]], lead.interface)


def test_touching_interfaces_give_one_layer():
    # A one-column strip: both leads couple to the same column, which cannot be
    # split, so everything is one layer holding both interfaces.
    model = strip_device(4, 1).discretise()
    slicing = _slicing(model)
    assert slicing.n_layers == 1 and slicing.lead_layer == (0, 0)
    assert np.array_equal(np.sort(slicing.layers[0]), np.arange(model.n_sites))


def test_three_interfaces_share_layer_zero():
    # More than two terminals: all interfaces in layer 0, shells around them after.
    model = strip_device(3, 6).discretise()
    ham = model.hamiltonian
    columns = [np.flatnonzero(np.isclose(model.positions[:, 0], x)) for x in range(6)]
    interfaces = [columns[0], columns[5], columns[2][:1]]
    slicing = slice_layers(ham, interfaces)
    assert slicing.lead_layer == (0, 0, 0)
    layer_of = slicing.layer_of_sites(model.n_sites)
    for iface in interfaces:
        assert np.all(layer_of[iface] == 0)
    coo = ham.tocoo()
    assert np.abs(layer_of[coo.row] - layer_of[coo.col]).max() <= 1
    assert np.array_equal(np.sort(np.concatenate(slicing.layers)), np.arange(model.n_sites))


def _valid(model, slicing):
    """Block-tridiagonal, every site once, interfaces in their layers."""
    layer_of = slicing.layer_of_sites(model.n_orbitals)
    coo = model.hamiltonian.tocoo()
    assert np.abs(layer_of[coo.row] - layer_of[coo.col]).max() <= 1
    assert sorted(np.concatenate(slicing.layers).tolist()) == list(range(model.n_orbitals))
    for lead, layer in zip(model.leads, slicing.lead_layer):
        assert set(lead.interface.tolist()) <= set(slicing.layers[layer].tolist())


@pytest.mark.parametrize("sides", [("left", "left"), ("top", "top"), ("left", "top"), ("bottom", "right")])
def test_two_leads_on_the_same_or_adjacent_sides_slice_validly_and_compactly(sides):
    """Leads on one side or on adjacent sides: a valid slicing whose widest layer stays well below the site count."""
    from rgftrans.system.device import Device, Lead
    from rgftrans.system.geometry import rectangle
    from rgftrans.system.lattices import square
    from rgftrans.transport.rgf import transmission
    from rgftrans.transport.direct import transmission_direct

    spans = {"left": [(2, 10), (22, 30)], "top": [(3, 12), (30, 40)], "bottom": [(3, 12)], "right": [(20, 30)]}
    leads = [Lead("a", sides[0], spans[sides[0]][0]),
             Lead("b", sides[1], spans[sides[1]][-1])]
    model = Device(rectangle(0, 0, 44, 32), leads, lattice=square(1.0), hopping=1.0).discretise()
    slicing = slice_layers(model.hamiltonian, [l.interface for l in model.leads], positions=model.positions)
    _valid(model, slicing)
    assert slicing.lead_layer == (0, slicing.n_layers - 1)
    assert slicing.max_width < model.n_sites / 4  # the whole device in one layer would be a failure of the method
    e = [1.3, 3.1]
    assert np.allclose(transmission(model, e, slicing=slicing).transmission,
                       transmission_direct(model, e)[:, 1, 0], atol=1e-9)
