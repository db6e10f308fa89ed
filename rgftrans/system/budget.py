"""What a device or a sweep will cost (sites, memory, time, disk), estimated before anything is built.

A config or a device that asks for more than the machine has (a 10^6 nm
device at 1 nm spacing, 4x10^8 sites, 10^12 energies) must be refused in
one line with the numbers and the fix, not end in numpy's memory error
after minutes of growing.  The estimates here use only the region's area
and extent, the lattice and the lead sides: no site is generated.

The constants below were measured on this project's own machine (2 cores,
numpy with OpenBLAS; see DEVELOPERS.md); they are order-of-magnitude
figures, good for refusing the impossible and for telling a user that a
sweep takes minutes or days, not for a schedule:

* building a device peaks at about 600 bytes per site for one orbital
  (1.0e6 sites: 600 MB above the interpreter, 8 s); Hamiltonian entries grow
  as the square of the orbitals per site;
* RGF costs about ``L (4e-10 W^3 + 2e-8 W^2 + 3e-6)`` seconds per energy for
  L layers of W orbitals (clean strips from 10 x 100 to 200 x 200 sites, one
  BLAS thread: within a factor 1.5) and holds up to three W x W complex
  blocks per layer; a sweep point costs about three times that (irregular
  slicings, the full transmission matrix, thermal averages);
* nested dissection (``rgftrans.transport.dissection``) costs about
  ``1.2e-8 N W + 2e-7 N`` seconds per energy for N orbitals and a cross-section of W
  (squares 128^2 to 512^2 and strips W x 400, one BLAS thread: within a
  factor 2) and holds about ``1700 W^2`` bytes of fronts, update stack and
  root matrix plus ``150`` bytes per orbital of index arrays; the estimate
  takes whichever of the two routes is faster (and fits).
"""

from __future__ import annotations

import math
import os
import shutil
from dataclasses import dataclass
from pathlib import Path

from rgftrans.errors import ResourceError

__all__ = [ "DeviceSize", "device_size", "available_memory_bytes", "free_disk_bytes",
           "RunEstimate", "run_estimate", "human_bytes", "human_seconds", "refuse_oversized_device"]

#: Peak bytes per site while a one-orbital device is built (sites, bonds, sparse Hamiltonian, leads).
BUILD_BYTES_PER_SITE = 700.0
#: Seconds per site to build a device (lattice fill, bonds, Hamiltonian), gates not included.
BUILD_SECONDS_PER_SITE = 8e-6
#: RGF seconds per layer and energy: a W^3 + b W^2 + c (W orbitals per layer); bare transmission of clean
#: strips (within 1.5x of 10x100 to 200x200 sites).  Devices sliced from leads on adjacent or partial sides,
#: and a sweep's full transmission matrix, cost up to about 4x that; :data:`SWEEP_OVERHEAD` covers it.
RGF_SECONDS = (4e-10, 2e-8, 3e-6)
SWEEP_OVERHEAD = 3.0
#: Bytes held per layer by RGF: three W x W complex blocks.
RGF_BYTES_PER_LAYER_W2 = 3 * 16
#: Nested dissection seconds per energy per (orbital x cross-section orbital): 512^2 square 1.45 s, 256^2
#: 0.25 s, 128 x 400 strip 0.17 s (see DEVELOPERS.md, benchmark record).
TREE_SECONDS_PER_N_W = 1.2e-8
#: ... plus this per orbital: the many small fronts of narrow devices (per-front calls and assembly).
TREE_SECONDS_PER_ORBITAL = 2e-7
#: Nested dissection bytes: the buffers the kernel reserves (two fronts, the update stack with its headroom
#: for delayed pivots, the root matrix) per squared cross-section, and the tree's index arrays per orbital.
TREE_BYTES_PER_W2 = 1700.0
TREE_BYTES_PER_ORBITAL = 150.0
#: Above this share of the available memory a run is refused (the rest is the interpreter, plots, the OS).
MEMORY_SHARE = 0.8


def human_bytes(n: float) -> str:
    """``1.5 GB`` style (powers of 1000, as disks are sold)."""
    for unit in ("B", "kB", "MB", "GB", "TB", "PB"):
        if abs(n) < 1000 or unit == "PB":
            return f"{n:.3g} {unit}"
        n /= 1000.0
    return f"{n:.3g} PB"  # pragma: no cover


def human_seconds(s: float) -> str:
    """``40 s``, ``12 min``, ``3.5 h``, ``2.1 days``."""
    if s < 90:
        return f"{s:.2g} s"
    if s < 5400:
        return f"{s / 60:.2g} min"
    if s < 2 * 86400:
        return f"{s / 3600:.2g} h"
    return f"{s / 86400:.3g} days"


def available_memory_bytes() -> float:
    """Memory the kernel says can be given to new work (Linux MemAvailable), else the physical memory."""
    try:
        with open("/proc/meminfo") as fh:
            for line in fh:
                if line.startswith("MemAvailable:"):
                    return float(line.split()[1]) * 1024.0
    except OSError:
        pass
    try:
        return float(os.sysconf("SC_PAGE_SIZE") * os.sysconf("SC_PHYS_PAGES"))
    except (ValueError, OSError, AttributeError):  # pragma: no cover - non-POSIX
        return math.inf


def free_disk_bytes(path: str | Path) -> float:
    """Free bytes on the file system that holds ``path`` (or its nearest existing parent)."""
    p = Path(path).resolve()
    while not p.exists() and p != p.parent:
        p = p.parent
    try:
        return float(shutil.disk_usage(p).free)
    except OSError:  # pragma: no cover
        return math.inf


@dataclass(frozen=True)
class DeviceSize:
    """Estimated size of a discretised device (from area and extent alone).

    Attributes
    ----------
    sites : float
        Lattice sites in the region (area x site density).
    orbitals_per_site : int
    layer_orbitals : float
        Orbitals in one RGF layer (the region's extent across the transport direction).
    layers : float
        Number of RGF layers.
    build_bytes, build_seconds : float
        Peak memory and time to build the device.
    solve_bytes, seconds_per_energy : float
        Memory held by one solve, and its time per energy, for the route in ``solver``.
    solver : {"rgf", "dissection"}
        The route the estimate assumes: the faster one, unless its memory would not fit.
    """

    sites: float
    orbitals_per_site: int
    layer_orbitals: float
    layers: float
    build_bytes: float
    build_seconds: float
    solve_bytes: float
    seconds_per_energy: float
    solver: str = "rgf"

    @property
    def peak_bytes(self) -> float:
        """Memory of one process holding the device and solving it."""
        return self.build_bytes + self.solve_bytes


def device_size(region, lattice, lead_sides, orbitals_per_site: int) -> DeviceSize:
    """Estimate the size and cost of a device from its region, lattice and the sides its leads sit on.

    ``region`` needs ``area`` (nm^2) and ``bounds`` (nm); ``lattice`` needs
    ``vectors`` (nm) and ``n_basis``.  Layers run across the transport
    direction: leads only on left/right give layers of the region's height,
    only on bottom/top of its width, and leads on adjacent sides diagonal
    layers up to the sum of both.
    """
    import numpy as np

    cell = abs(float(np.linalg.det(np.asarray(lattice.vectors, dtype=float))))
    density = lattice.n_basis / cell  # sites per nm^2
    sites = max(float(region.area) * density, 1.0)
    xmin, ymin, xmax, ymax = region.bounds
    sides = set(lead_sides)
    along_x = sides <= {"left", "right"}
    along_y = sides <= {"bottom", "top"}
    across_nm = (ymax - ymin) if along_x else (xmax - xmin) if along_y else (xmax - xmin) + (ymax - ymin)
    per_nm = math.sqrt(density)
    norbs = int(orbitals_per_site)
    width = max(1.0, min(across_nm * per_nm, sites)) * norbs
    layers = max(1.0, sites * norbs / width)
    a, b, c = RGF_SECONDS
    orbitals = sites * norbs
    rgf = (RGF_BYTES_PER_LAYER_W2 * width ** 2 * layers, layers * (a * width ** 3 + b * width ** 2 + c))
    # The tree's cost follows the narrower extent (its separators), not the layer width of RGF.
    cross = min(width, max(1.0, math.sqrt(orbitals * norbs)), max(1.0, norbs * orbitals / width))
    tree = (TREE_BYTES_PER_W2 * cross ** 2 + TREE_BYTES_PER_ORBITAL * orbitals * norbs,
            TREE_SECONDS_PER_N_W * orbitals * cross + TREE_SECONDS_PER_ORBITAL * orbitals)
    pick, name = (tree, "dissection") if tree[1] < rgf[1] else (rgf, "rgf")
    if pick[0] > MEMORY_SHARE * available_memory_bytes():
        pick, name = min((tree, "dissection"), (rgf, "rgf"), key=lambda r: r[0][0])
    return DeviceSize(
        sites=sites,
        orbitals_per_site=norbs,
        layer_orbitals=width,
        layers=layers,
        build_bytes=BUILD_BYTES_PER_SITE * sites * norbs ** 2,
        build_seconds=BUILD_SECONDS_PER_SITE * sites * norbs ** 2,
        solve_bytes=pick[0],
        seconds_per_energy=pick[1],
        solver=name,
    )


def refuse_oversized_device(size: DeviceSize, *, processes: int = 1, what: str = "the device",
                            available: float | None = None) -> None:
    """ResourceError (with the numbers and the fix) if ``processes`` copies of the device exceed the memory."""
    available = available_memory_bytes() if available is None else available
    need = processes * size.peak_bytes
    if need > MEMORY_SHARE * available:
        copies = f" in each of {processes} processes" if processes > 1 else ""
        raise ResourceError(
            f"{what} needs about {human_bytes(need)} of memory ({size.sites:.3g} sites, layers of "
            f"{size.layer_orbitals:.3g} orbitals{copies}) but the machine has {human_bytes(available)} available; "
            "coarsen the lattice (larger spacing), shrink the region"
            + (", or use fewer workers" if processes > 1 else "")
            + " -- are the lengths in nm?"
        )


@dataclass(frozen=True)
class RunEstimate:
    """What a sweep will cost: the device, the grid, memory, time and the result file's size."""

    size: DeviceSize
    n_points: int
    n_energies: int
    workers: int
    result_bytes: float
    seconds: float
    memory_bytes: float

    def lines(self) -> list[str]:
        s = self.size
        return [
            f"about {s.sites:.3g} sites ({s.orbitals_per_site} orbital(s) each), {s.layers:.3g} layers of about "
            f"{s.layer_orbitals:.3g} orbitals; expected solver: "
            f"{'nested dissection' if s.solver == 'dissection' else 'RGF'} (the run chooses per geometry)",
            f"memory about {human_bytes(self.memory_bytes)} with {self.workers} worker(s) "
            f"(available {human_bytes(available_memory_bytes())}); result file about {human_bytes(self.result_bytes)}",
            f"time about {human_seconds(self.seconds)} for {self.n_points} point(s) x {self.n_energies} energies "
            f"with {self.workers} worker(s) (order of magnitude)",
        ]

    def refuse_if_too_big(self, output: str | Path) -> None:
        """ResourceError when the memory or the disk at ``output`` is short."""
        refuse_oversized_device(self.size, processes=self.workers + 1, what="the sweep")
        free = free_disk_bytes(output)
        if self.result_bytes > free:
            raise ResourceError(
                f"the result file would take about {human_bytes(self.result_bytes)} ({self.n_points} points x "
                f"{self.n_energies} energies) but {Path(output).parent} has {human_bytes(free)} free; "
                "fewer points or energies, or another [output] path"
            )


def run_estimate(size: DeviceSize, *, n_points: int, n_energies: int, n_leads: int, n_temperatures: int,
                 n_ldos_energies: int, workers: int) -> RunEstimate:
    """Memory, time and file size of a sweep of ``n_points`` x ``n_energies`` on ``workers`` processes."""
    per_point = 8.0 * n_energies * (n_leads ** 2 * (1 + 2 * n_temperatures) + n_leads)
    per_point += 8.0 * n_ldos_energies * size.sites
    seconds = n_points * (size.build_seconds + SWEEP_OVERHEAD * n_energies * size.seconds_per_energy) / max(workers, 1)
    return RunEstimate(size=size, n_points=n_points, n_energies=n_energies, workers=workers,
                       result_bytes=per_point * n_points, seconds=seconds,
                       memory_bytes=(workers + 1) * size.peak_bytes)
