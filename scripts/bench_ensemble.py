"""Benchmark of disorder ensembles: per-sample overhead against the solve, and against rebuilding (prints only).

Devices: square-lattice strips (t = 1 meV, box disorder W = 1 meV, one BLAS
thread) and a square, at one energy and at eight.  For each:

* solve     -- ``DisorderSampler.transmission_of(v)`` for a fixed onsite vector: the numerical solve of one
               sample (RGF or the dissection tree, lead terms precomputed) and the O(N) scatter of the diagonal;
* draw      -- ``DisorderSampler.onsite(seed)``: the disorder of every site from its documented Philox stream;
* sample    -- ``DisorderSampler.transmission(seed)``: what an ensemble spends per sample (draw + solve);
* rebuild   -- what a sweep over ``disorder.seed`` does: a new Device, ``discretise()``, ``transmission()``
               (a new slicing or tree, new lead self-energies, the blocks cut again).

Last: an ensemble on one process and on two (``workers=2``), wall time.

overhead = draw / solve (the only work a sample adds to its solve; measured directly rather than as the
difference of two noisy totals, which is printed too); rebuild / sample = what the ensemble saves.
Timings are the fastest of several runs (the least disturbed on a shared machine).
"""

from __future__ import annotations

import argparse
import dataclasses
import time

import numpy as np

from _timing import best_time  # scripts/ is on sys.path when a script runs
from rgftrans.system.device import Device, Lead
from rgftrans.system.fields import Disorder
from rgftrans.system.geometry import rectangle
from rgftrans.system.lattices import square
from rgftrans.transport.ensemble import DisorderSampler, disorder_ensemble
from rgftrans.transport.rgf import transmission


def device(width: int, length: int) -> Device:
    return Device(rectangle(0, 0, length - 1, width - 1),
                  [Lead("left", "left", (0, width - 1)), Lead("right", "right", (0, width - 1))],
                  lattice=square(1.0), hopping=1.0, energy_origin="band_centre", disorder=Disorder(1.0, seed=0))



def main(argv=None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="smaller devices and fewer repeats")
    args = parser.parse_args(argv)
    sizes = [(16, 400), (32, 1000)] if args.quick else [(16, 400), (32, 1000), (64, 1000), (128, 128)]
    repeats = 3 if args.quick else 7
    print(f"{'device':>10} {'n_E':>4} {'solver':>10} {'solve (ms)':>11} {'draw (ms)':>10} {'sample (ms)':>12} "
          f"{'draw/solve':>11} {'(sample-solve)/solve':>21} {'rebuild (ms)':>13} {'rebuild/sample':>15}")
    for width, length in sizes:
        dev = device(width, length)
        for energies in ([0.5], list(np.linspace(-1.3, 1.3, 8) + 0.0137)):
            sampler = DisorderSampler(dev, energies)
            v = sampler.onsite(0)
            sampler.transmission(0)  # compile and warm
            solve = best_time(lambda: sampler.transmission_of(v), repeats)
            draw = best_time(lambda: sampler.onsite(3), repeats)
            seeds = iter(range(1, 10_000))
            sample = best_time(lambda: sampler.transmission(next(seeds)), repeats)

            def rebuild():
                model = dataclasses.replace(dev, disorder=Disorder(1.0, next(seeds))).discretise()
                transmission(model, energies)

            rebuilt = best_time(rebuild, max(2, repeats // 2))
            print(f"{f'{width}x{length}':>10} {len(energies):>4} {sampler.solver:>10} {solve * 1e3:>11.2f} "
                  f"{draw * 1e3:>10.3f} {sample * 1e3:>12.2f} {draw / solve:>11.3f} "
                  f"{(sample - solve) / solve:>21.3f} {rebuilt * 1e3:>13.1f} {rebuilt / sample:>15.1f}", flush=True)

    samples = 100 if args.quick else 600
    dev = device(32, 400)
    times = {}
    for workers in (1, 2):
        t0 = time.perf_counter()
        disorder_ensemble(dev, [0.5, 0.9], samples=samples, workers=workers)
        times[workers] = time.perf_counter() - t0
    print(f"\n{samples} samples of 32x400 at 2 energies: 1 process {times[1]:.2f} s, 2 processes {times[2]:.2f} s "
          f"(speed-up {times[1] / times[2]:.2f}; spawning and preparing the second process's sampler included)")


if __name__ == "__main__":
    main()
