"""Benchmark of the sweep machinery: parallel speed-up and per-point overhead (prints, asserts nothing).

Device: a 40-site wide, 100-site long GaAs strip (a = 5 nm) with a gate, 64
energies per point; the sweep axis is the gate voltage.

* compute  -- compute_point() for every point in this process, no files: the physics alone;
* 1 worker -- run_sweep(workers=1): the same points plus the journal and HDF5 writes;
* 2 workers-- run_sweep(workers=2): two spawned processes, results shipped back and written here.

Overhead of the machinery = (1-worker time - compute time) / compute time;
speed-up = 1-worker time / 2-worker time.
"""

from __future__ import annotations

import argparse
import os
import tempfile
import time
from pathlib import Path

from rgftrans.io.config import parse_config
from rgftrans.io.sweeps import compute_point, grid_points, run_sweep

CONFIG = """
[lattice]
kind = "square"
spacing_nm = 5.0

[geometry]
rectangle_nm = [0.0, 0.0, 495.0, 195.0]     # 100 x 40 sites

[gates]
depth_nm = 50.0

[[gates.gate]]
name = "finger"
rectangle_nm = [230.0, 120.0, 270.0, 400.0]
voltage_V = -0.02

[[leads]]
name = "source"
side = "left"
span_nm = [0.0, 195.0]

[[leads]]
name = "drain"
side = "right"
span_nm = [0.0, 195.0]

[energy]
start_meV = 1.0
stop_meV = 4.0
points = 64

[[sweep.axis]]
parameter = "gates.finger.voltage_V"
start = -0.06
stop = 0.0
points = {points}

[output]
path = "{path}"
"""


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--points", type=int, default=200)
    args = parser.parse_args(argv)
    with tempfile.TemporaryDirectory() as tmp:
        cfg = parse_config(CONFIG.format(points=args.points, path=Path(tmp) / "bench.h5"))
        points = list(grid_points(cfg))
        compute_point(cfg, points[0][1])  # load the compiled kernels
        t0 = time.perf_counter()
        for _, point in points:
            compute_point(cfg, point)
        t_compute = time.perf_counter() - t0
        t_one = run_sweep(cfg, quiet=True, workers=1, overwrite=True).seconds
        t_two = run_sweep(cfg, quiet=True, workers=2, overwrite=True).seconds
    n = len(points)
    print(f"sweep benchmark: {n} points x 64 energies, 40 x 100 sites; "
          f"BLAS threads: OPENBLAS_NUM_THREADS={os.environ.get('OPENBLAS_NUM_THREADS', 'unset')} (workers: 1 each)")
    print(f"  compute only     {t_compute:8.2f} s  ({t_compute / n * 1e3:.1f} ms per point)")
    print(f"  sweep, 1 worker  {t_one:8.2f} s  overhead {100 * (t_one - t_compute) / t_compute:+.1f} % of compute "
          f"({(t_one - t_compute) / n * 1e3:.2f} ms per point: journal, HDF5 write, bookkeeping)")
    print(f"  sweep, 2 workers {t_two:8.2f} s  speed-up {t_one / t_two:.2f} over 1 worker "
          f"(includes process start-up and shipping results back)")


if __name__ == "__main__":
    main()
