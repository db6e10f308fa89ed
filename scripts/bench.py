"""Benchmark: RGF transmission against a sparse direct solve and the LAPACK floor.

Prints tables, asserts nothing.  Every figure is a median over repeats, all in
one process, so the ratios compare like with like on this machine:

* ours    -- rgftrans.transport.rgf.transmission, seconds per energy (energies batched);
* sparse  -- scipy.sparse.linalg.splu of (E - H - Sigma_L - Sigma_R), solved for
             the columns of the first interface, then Caroli's formula: the
             route a user would write by hand (same lead self-energies);
* floor   -- L back-to-back inversions of a dense W x W complex matrix, the
             faster of numpy.linalg.inv on a stack and a compiled loop of
             LAPACK inverses: the irreducible work of one RGF sweep;
* LDOS    -- the full diagonal of G per energy (rgftrans.transport.local.ldos), as a ratio to ours.

System: a square-lattice strip, W x L sites, onsite disorder uniform in
[-t/2, t/2] (seeded), clean leads, t = 1, energies in the lower quarter of the
band where a semiconductor device works (E = 0.6 t .. 1.0 t above the band
bottom: about W/6 open channels).

Usage: scripts/bench [--quick]
"""

from __future__ import annotations

import argparse
import os
import subprocess
import sys
import time
from concurrent.futures import ProcessPoolExecutor

import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as spla
from numba import njit

from rgftrans.system.device import Device, Lead
from rgftrans.system.fields import Disorder
from rgftrans.system.geometry import rectangle
from rgftrans.system.lattices import square
from rgftrans.leads.modes import clear_lead_cache
from rgftrans.transport.local import ldos
from rgftrans.transport.rgf import transmission
from rgftrans.leads.embedding import lead_self_energies

ENERGIES = np.linspace(0.6, 1.0, 16) + 0.00137  # off the strip thresholds


def strip(width: int, length: int):
    region = rectangle(0, 0, length - 1, width - 1)
    leads = [Lead("left", "left", (0, width - 1)), Lead("right", "right", (0, width - 1))]
    return Device(region, leads, lattice=square(1.0), hopping=1.0, disorder=Disorder(1.0, seed=1)).discretise()


def median_time(fn, repeats: int) -> float:
    times = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return float(np.median(times))


def ours_per_energy(model, repeats, energies=ENERGIES):
    transmission(model, energies[:2])  # compile / warm the lead cache
    return median_time(lambda: transmission(model, energies), repeats) / len(energies)


def sparse_per_energy(model, energies, repeats):
    lead0, lead1 = model.leads
    n = model.n_orbitals
    cache = [lead_self_energies(model, e, warn=False)[0] for e in energies]

    def run():
        out = []
        for e, (s0, s1) in zip(energies, cache):
            a = (e * sp.identity(n, dtype=complex, format="csc") - model.hamiltonian).tolil()
            a[np.ix_(lead0.interface, lead0.interface)] = a[np.ix_(lead0.interface, lead0.interface)].toarray() - s0
            a[np.ix_(lead1.interface, lead1.interface)] = a[np.ix_(lead1.interface, lead1.interface)].toarray() - s1
            lu = spla.splu(a.tocsc())
            rhs = np.zeros((n, len(lead0.interface)), dtype=complex)
            rhs[lead0.interface, np.arange(len(lead0.interface))] = 1
            g10 = lu.solve(rhs)[lead1.interface]
            gam0, gam1 = 1j * (s0 - s0.conj().T), 1j * (s1 - s1.conj().T)
            out.append(np.trace(gam1 @ g10 @ gam0 @ g10.conj().T).real)
        return out

    return median_time(run, repeats) / len(energies)


@njit(cache=True)
def _inv_each(stack):
    out = np.empty_like(stack)
    for i in range(stack.shape[0]):
        out[i] = np.linalg.inv(stack[i])
    return out


def floor_per_sweep(width, length, repeats):
    """The faster of numpy's batched inverse and a compiled loop of LAPACK inverses (getrf + getri)."""
    rng = np.random.default_rng(0)
    stack = rng.normal(size=(length, width, width)) + 1j * rng.normal(size=(length, width, width))
    stack += 4 * width * np.eye(width)
    _inv_each(stack[:2])
    return min(median_time(lambda: np.linalg.inv(stack), repeats), median_time(lambda: _inv_each(stack), repeats))


def ldos_per_energy(model, repeats, energies=ENERGIES):
    ldos(model, energies[:2])
    return median_time(lambda: ldos(model, energies), repeats) / len(energies)


def blas_threads() -> str:
    try:
        from threadpoolctl import threadpool_info

        return ", ".join(f"{d['internal_api']} {d['num_threads']} thread(s)" for d in threadpool_info())
    except ImportError:
        return (f"OPENBLAS_NUM_THREADS={os.environ.get('OPENBLAS_NUM_THREADS', 'unset')}, "
                f"OMP_NUM_THREADS={os.environ.get('OMP_NUM_THREADS', 'unset')} (threadpoolctl not installed)")


def width_table(widths, length, repeats):
    print(f"\nTransmission per energy, strip W x {length}, {len(ENERGIES)} energies per call (4 from W = 128), "
          f"median of {repeats} (3 from W = 128)")
    print(f"{'W':>5} {'ours (ms)':>10} {'sparse (ms)':>12} {'floor (ms)':>11} {'sparse/ours':>12} "
          f"{'ours/floor':>11} {'LDOS/ours':>10}")
    rows = []
    for w in widths:
        model = strip(w, length)
        wide = w >= 128  # keep the run in minutes: fewer energies and repeats for the widest strips
        energies = ENERGIES[::4] if wide else ENERGIES
        reps = 3 if wide else repeats
        ours = ours_per_energy(model, reps, energies)
        sparse = sparse_per_energy(model, ENERGIES[:2] if wide else ENERGIES[:4], 1 if wide else max(1, repeats // 2))
        floor = floor_per_sweep(w, length, reps)
        ldos_t = ldos_per_energy(model, 1 if wide else max(1, repeats // 2), energies)
        rows.append((w, ours, sparse, floor))
        print(f"{w:>5} {ours * 1e3:>10.3f} {sparse * 1e3:>12.3f} {floor * 1e3:>11.3f} {sparse / ours:>12.2f} "
              f"{ours / floor:>11.2f} {ldos_t / ours:>10.2f}", flush=True)
        clear_lead_cache()
    return rows


def length_scan(width, lengths, repeats):
    print(f"\nTime against length, W = {width}")
    times = []
    for length in lengths:
        t = ours_per_energy(strip(width, length), repeats)
        times.append(t)
        print(f"  L = {length:>5}: {t * 1e3:8.3f} ms per energy", flush=True)
    slope = np.polyfit(np.log(lengths), np.log(times), 1)[0]
    print(f"  fitted exponent of time vs L: {slope:.3f}")


def peak_memory(width, lengths):
    """Peak Python-tracked memory (tracemalloc: numpy buffers) of the transmission call, fresh process each.

    The model and its cut layer blocks (the Hamiltonian itself, which grows with L) are built before the
    measurement starts; what is measured is the work memory of the sweep over the layers.
    """
    print(f"\nPeak work memory of transmission (fresh process each, W = {width}, 16 energies; model and layer "
          "blocks built before)")
    here = os.path.dirname(os.path.abspath(__file__))
    code = (
        "import sys, tracemalloc\n"
        f"sys.path.insert(0, {here!r})\n"
        "from bench import strip, ENERGIES\n"
        "from rgftrans.transport.rgf import transmission, layer_blocks\n"
        "model = strip(int(sys.argv[1]), int(sys.argv[2]))\n"
        "layer_blocks(model)\n"
        "transmission(model, ENERGIES[:1])\n"
        "tracemalloc.start()\n"
        "transmission(model, ENERGIES)\n"
        "print(tracemalloc.get_traced_memory()[1])\n"
    )
    peaks = []
    for length in lengths:
        out = subprocess.run([sys.executable, "-c", code, str(width), str(length)], capture_output=True, text=True,
                             check=True)
        peaks.append(int(out.stdout.strip().splitlines()[-1]))
        print(f"  L = {length:>5}: {peaks[-1] / 2**20:.2f} MiB")
    print(f"  ratio L = {lengths[-1]} / L = {lengths[0]}: {peaks[-1] / max(peaks[0], 1):.2f}")


def _sweep_point(args):
    width, length, energy = args
    return transmission(_sweep_point.model, [energy]).transmission[0]


def _init_worker(width, length):
    _sweep_point.model = strip(width, length)
    transmission(_sweep_point.model, ENERGIES[:1])


def process_scaling(width, length, n_energies):
    print(f"\nEnergy sweep of {n_energies} energies, W = {width}, L = {length}, one BLAS thread per process")
    energies = np.linspace(0.3, 1.5, n_energies)
    times = {}
    for workers in (1, 2):
        import multiprocessing

        ctx = multiprocessing.get_context("spawn")
        with ProcessPoolExecutor(workers, mp_context=ctx, initializer=_init_worker,
                                 initargs=(width, length)) as pool:
            list(pool.map(_sweep_point, [(width, length, e) for e in energies[:workers * 2]]))  # warm up
            t0 = time.perf_counter()
            list(pool.map(_sweep_point, [(width, length, e) for e in energies], chunksize=8))
            times[workers] = time.perf_counter() - t0
        print(f"  {workers} process(es): {times[workers]:.2f} s")
    print(f"  speed-up 2 vs 1: {times[1] / times[2]:.2f}")


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="fewer widths and repeats (a smoke run)")
    parser.add_argument("--widths", type=int, nargs="*", help="only the width table, for these widths")
    parser.add_argument("--part", choices=["length", "memory", "processes"], help="only one of the other parts")
    args = parser.parse_args(argv)
    for var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
        os.environ.setdefault(var, "1")  # children inherit it; this process was started with it by scripts/bench
    print("rgftrans benchmark; BLAS:", blas_threads(), f"; cores: {os.cpu_count()}")
    if args.quick:
        width_table([8, 32], 100, 3)
        return
    if args.widths:
        width_table(args.widths, 400, 5)
        return
    if args.part:
        {"length": lambda: length_scan(32, [100, 200, 400, 800, 1600], 5),
         "memory": lambda: peak_memory(64, [100, 1600]),
         "processes": lambda: process_scaling(64, 200, 256)}[args.part]()
        return
    width_table([8, 16, 32, 64, 128, 256], 400, 5)
    length_scan(32, [100, 200, 400, 800, 1600], 5)
    peak_memory(64, [100, 1600])
    process_scaling(64, 200, 256)


if __name__ == "__main__":
    main()
