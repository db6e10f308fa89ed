"""Benchmark of the Thomas-Fermi screening solver (prints times and ratios; asserts nothing).

An invented split gate over a GaAs 2DEG (60 nm deep, 2e11 cm^-2) on grids of 10^3.5 to 10^5.5 nodes, solved
to a relative gradient of 1e-6, for the pinned surface at T = 0, at 4 K (Fermi-Dirac) and the frozen surface
(whose gate charges are unknowns too: two forward and two inverse transforms per iteration).  Baseline, measured in the same process: one application of the Coulomb
kernel (a zero-padded FFT convolution), the unit of work of every iteration.  Printed: the solve time, the
solve time in kernel applications, and the growth exponent of the solve time against N (N log N is about 1.1
over this range).
"""

from __future__ import annotations

import math
import time

import numpy as np

from rgftrans.electrostatics.gates import Gate, GateLayout
from rgftrans.electrostatics.screening import Heterostructure, screen
from rgftrans.electrostatics.surface import SurfaceKernels
from rgftrans.system.geometry import rectangle


def _best(f, repeat=3):
    times = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        f()
        times.append(time.perf_counter() - t0)
    return min(times)


def main():
    layout = GateLayout((Gate("left", rectangle(-800, -300, -150, 300), -0.35),
                         Gate("right", rectangle(150, -300, 800, 300), -0.35)), depth_nm=60.0)
    for surface, temperature in (("pinned", 0.0), ("pinned", 4.0), ("frozen", 0.0)):
        structure = Heterostructure(depth_nm=60.0, density_cm2=2e11, surface=surface, temperature_K=temperature)
        print(f"Thomas-Fermi screening, {surface} surface, T = {temperature:g} K, split gate at -0.35 V, "
              "tolerance 1e-6 (one process)")
        print(f"{'nodes':>9} {'solve (s)':>10} {'kernel (ms)':>12} {'solve/kernel':>13} {'iterations':>11}")
        rows = []
        for spacing in (40.0, 20.0, 10.0, 5.0):
            extent = (-1260.0, -1260.0, 1260.0, 1260.0)
            sol = screen(layout, structure, extent_nm=extent, spacing_nm=spacing)  # warm-up (FFT plans)
            t_solve = _best(lambda: screen(layout, structure, extent_nm=extent, spacing_nm=spacing), repeat=2)
            ny, nx = sol.density_cm2.shape
            kernels = SurfaceKernels(nx, ny, spacing, structure.depth_nm, structure.eps_r, "pinned")
            zeros = np.zeros((ny, nx))
            t_kernel = _best(lambda: kernels.electrons(zeros), repeat=5)
            rows.append((nx * ny, t_solve))
            print(f"{nx * ny:>9} {t_solve:>10.3f} {1e3 * t_kernel:>12.2f} {t_solve / t_kernel:>13.0f} "
                  f"{sol.iterations:>11}")
        (n1, t1), (n2, t2) = rows[1], rows[-1]
        print(f"growth exponent of the solve time from {n1} to {n2} nodes: "
              f"{math.log(t2 / t1) / math.log(n2 / n1):.2f}\n")


if __name__ == "__main__":
    main()
