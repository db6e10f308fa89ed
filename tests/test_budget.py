"""Size estimates made before anything is built (rgftrans.system.budget): checked against the discretised device.

The estimate uses only the region's area and extent; the device it is held
against is the real discretisation.  Tolerances: a rectangle of n_x x n_y
cells holds (n_x + 1)(n_y + 1) sites against the estimate's n_x n_y, a
relative excess of about 1/n_x + 1/n_y (5 % for the 50 x 30 cells below),
so 10 % leaves room and still catches a wrong density or a spin factor of 2.
"""

from __future__ import annotations

import pytest

from rgftrans.system.budget import device_size, human_bytes, human_seconds, refuse_oversized_device
from rgftrans.errors import ResourceError
from rgftrans.system.device import Device, Lead, estimate_size
from rgftrans.system.geometry import disk, rectangle
from rgftrans.system.lattices import honeycomb, square
from rgftrans.system.materials import material
from rgftrans.transport.rgf import layer_blocks


def _strip(lattice, spin=False, region=None, leads=None):
    region = region or rectangle(0, 0, 100, 60)
    leads = leads or [Lead("L", "left", (0, 60)), Lead("R", "right", (0, 60))]
    return Device(region, leads, lattice=lattice, material=material("GaAs"), spin=spin)


@pytest.mark.parametrize("lattice, spin", [(square(2.0), False), (square(2.0), True), (square(1.0), False)],
                         ids=["square-2nm", "square-2nm-spin", "square-1nm"])
def test_site_and_layer_estimates_match_the_discretised_strip(lattice, spin):
    device = _strip(lattice, spin)
    model = device.discretise()
    est = estimate_size(device)
    assert est.sites == pytest.approx(model.n_sites, rel=0.1)
    assert est.orbitals_per_site == model.norbs
    assert est.layer_orbitals == pytest.approx(layer_blocks(model).slicing.max_width, rel=0.1)


def test_honeycomb_density_counts_both_sublattices():
    # Graphene: 2 atoms per cell of area (3 sqrt(3)/2) a_cc^2 = 0.0524 nm^2 -> 38.2 atoms per nm^2 (a_cc = 0.142 nm).
    lattice = honeycomb(0.142)
    size = device_size(rectangle(0, 0, 10, 10), lattice, ["left", "right"], 1)
    assert size.sites == pytest.approx(100 * 38.2, rel=0.02)


def test_disk_area_enters_not_its_bounding_box():
    region, lattice = disk((50, 50), 40), square(2.0)
    cells = lattice.cells_in_box(*region.bounds)
    n_sites = int(region.contains(lattice.positions(cells)).sum())  # the lattice fill discretise does
    assert device_size(region, lattice, ["left"], 1).sites == pytest.approx(n_sites, rel=0.1)


def test_refusal_names_the_numbers_and_the_fix():
    size = device_size(rectangle(0, 0, 1e4, 1e4), square(1.0), ["left", "right"], 1)
    with pytest.raises(ResourceError) as err:
        refuse_oversized_device(size, available=16e9)
    text = str(err.value)
    assert "\n" not in text and "1e+08 sites" in text and "16 GB available" in text and "spacing" in text
    refuse_oversized_device(device_size(rectangle(0, 0, 100, 100), square(1.0), ["left"], 1), available=16e9)


def test_workers_multiply_the_memory():
    size = device_size(rectangle(0, 0, 2000, 2000), square(1.0), ["left", "right"], 1)
    refuse_oversized_device(size, processes=1, available=size.peak_bytes * 2)
    with pytest.raises(ResourceError, match="fewer workers"):
        refuse_oversized_device(size, processes=4, available=size.peak_bytes * 2)


def test_huge_device_is_refused_before_any_site_exists():
    import time

    device = _strip(square(1.0), region=rectangle(0, 0, 2e4, 2e4), leads=[Lead("L", "left", (0, 2e4))])
    t0 = time.perf_counter()
    with pytest.raises(ResourceError, match="memory"):
        device.discretise()
    assert time.perf_counter() - t0 < 1.0  # refused from arithmetic, not after filling 4e8 sites


@pytest.mark.parametrize("value, text", [(999, "999 B"), (1.5e9, "1.5 GB"), (3.2e13, "32 TB")])
def test_human_bytes(value, text):
    assert human_bytes(value) == text


@pytest.mark.parametrize("value, text", [(40, "40 s"), (600, "10 min"), (3 * 3600, "3 h"), (5 * 86400, "5 days")])
def test_human_seconds(value, text):
    assert human_seconds(value) == text
