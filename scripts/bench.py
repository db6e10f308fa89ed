"""Benchmark: the package's transmission (RGF or nested dissection, as it chooses) against a careful sparse solve.

Prints tables, asserts nothing.  Every figure is the fastest of a few runs in one
process, so the ratios compare like with like on this machine:

* ours    -- rgftrans.transport.rgf.transmission with solver="auto", seconds per
             energy (energies batched), and the solver the package chose
             ("rgf" or "dissection");
* careful -- the sparse direct solve a careful user writes by hand: H converted
             to CSC once, per energy ``E I - H - Sigma`` with the two
             self-energy blocks added as one sparse COO matrix,
             scipy.sparse.linalg.splu with the best of its column orderings
             (COLAMD, MMD_AT_PLUS_A and MMD_ATA are each timed and the fastest
             is kept, per size), solved for the first lead's interface columns,
             then Caroli's formula (the lead self-energies are computed before
             its timing starts, in its favour; ours computes them inside);
* RGF     -- the package's RGF forced (``solver="rgf"``), for reference where it is
             affordable (predicted under RGF_REFERENCE_MAX_S per energy);
* floor   -- strips only: L back-to-back inversions of a dense W x W complex matrix
             (the irreducible work of one RGF sweep);
* LDOS    -- the LDOS (rgftrans.transport.local.ldos, solver="auto": RGF or the tree's
             selected inversion, as the package chooses) per energy, as a ratio to ours
             (the transmission with its own chosen solver), with the LDOS route's stated
             work memory (squares: the tree's elimination, kept factors and downward stack).

* multi   -- four-terminal squares: the transmission matrix against the careful sparse solve
             for three of the four leads' columns (scripts/bench_multiterminal.py).

Systems: square-lattice strips W x 400 and squares n x n, onsite disorder
uniform in [-t/2, t/2] (seeded), clean leads on the left and right edges,
t = 1, energies in the lower quarter of the band (E = 0.6 t .. 1.0 t above the
band bottom).  The N-exponent is the slope of log(time) against log(N) over
the square devices (N = n^2 sites).

An ordering that lost to the best by more than ORDERING_DROP at one square size
is not tried at the next larger one (it only falls further behind; trying
MMD_AT_PLUS_A at 512^2 would take many minutes).  That can only remove a
losing candidate from the baseline, never a winner at the size where it was
last measured.

Usage: scripts/bench [--quick] [--squares 64 128 ...] [--widths 8 64 ...] [--big] [--calibrate]
                     [--calibrate-ldos] [--part length|memory|ldos-memory|processes|multi]
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

from _timing import best_time  # scripts/ is on sys.path when a script runs
from rgftrans.leads.embedding import lead_self_energies
from rgftrans.leads.modes import clear_lead_cache
from rgftrans.system.device import Device, Lead
from rgftrans.system.fields import Disorder
from rgftrans.system.geometry import rectangle
from rgftrans.system.lattices import square
from rgftrans.transport.choice import choose_ldos_solver, choose_solver
from rgftrans.transport.local import ldos, ldos_result
from rgftrans.transport.rgf import transmission

from bench_multiterminal import table as multi_terminal_table  # noqa: E402  (scripts/ is on sys.path when run)

ENERGIES = np.linspace(0.6, 1.0, 16) + 0.00137  # off the strip thresholds
ORDERINGS = ("COLAMD", "MMD_AT_PLUS_A", "MMD_ATA")
#: An ordering slower than the best by this factor at one square size is not retried at the next.
ORDERING_DROP = 3.0
#: The forced-RGF reference column is measured only where RGF is predicted below this (s per energy).
RGF_REFERENCE_MAX_S = 20.0
#: Above this many sites the careful route runs in a child process whose address space is capped at
#: MEMORY_SHARE of the available memory: SuperLU's fill at 512^2 already peaks at 5 GB, and at 1024^2 it
#: outgrows this 23 GB machine (the kernel's OOM killer would otherwise take this process, or a neighbour's).
CAREFUL_IN_CHILD_ABOVE = 300_000


def strip(width: int, length: int):
    region = rectangle(0, 0, length - 1, width - 1)
    leads = [Lead("left", "left", (0, width - 1)), Lead("right", "right", (0, width - 1))]
    return Device(region, leads, lattice=square(1.0), hopping=1.0, disorder=Disorder(1.0, seed=1)).discretise()



def ours_per_energy(model, repeats, energies=ENERGIES, solver="auto"):
    """Seconds per energy of the package's transmission and the solver it used (plans built before timing)."""
    res = transmission(model, energies[:1], solver=solver)  # compile, plan, warm the lead cache
    return best_time(lambda: transmission(model, energies, solver=solver), repeats) / len(energies), res.solver


def careful_sparse_solver(model):
    """The careful by-hand sparse route: returns ``run(energies, ordering) -> T`` (see the module docstring)."""
    lead0, lead1 = model.leads
    n = model.n_orbitals
    h = sp.csc_matrix(model.hamiltonian)
    eye = sp.identity(n, dtype=complex, format="csc")
    r0, c0 = (a.ravel() for a in np.meshgrid(lead0.interface, lead0.interface, indexing="ij"))
    r1, c1 = (a.ravel() for a in np.meshgrid(lead1.interface, lead1.interface, indexing="ij"))
    rows, cols = np.concatenate([r0, r1]), np.concatenate([c0, c1])
    rhs = np.zeros((n, len(lead0.interface)), dtype=complex)
    rhs[lead0.interface, np.arange(len(lead0.interface))] = 1.0
    sigma = {}

    def run(energies, ordering):
        out = []
        for e in energies:
            s0, s1 = sigma[e]
            sig = sp.coo_matrix((np.concatenate([s0.ravel(), s1.ravel()]), (rows, cols)), shape=(n, n))
            lu = spla.splu((e * eye - h - sig).tocsc(), permc_spec=ordering)
            g10 = lu.solve(rhs)[lead1.interface]
            gam0, gam1 = 1j * (s0 - s0.conj().T), 1j * (s1 - s1.conj().T)
            out.append(np.trace(gam1 @ g10 @ gam0 @ g10.conj().T).real)
        return np.array(out)

    def prepare(energies):
        for e in energies:
            sigma[e] = lead_self_energies(model, e, warn=False)[0]

    return run, prepare


def careful_per_energy(model, energies, repeats, orderings=ORDERINGS, *, side=None):
    """Seconds per energy of the careful sparse route with its best ordering: (best, ordering, all timings).

    Large squares (``side`` given, more than CAREFUL_IN_CHILD_ABOVE sites) run in a memory-capped child;
    an ordering that runs out of memory there gets an infinite time (and the best may be None).
    """
    if side is not None and model.n_sites > CAREFUL_IN_CHILD_ABOVE:
        return _careful_in_child(side, energies, orderings)
    run, prepare = careful_sparse_solver(model)
    prepare(energies)  # the self-energies outside the timing (in the baseline's favour)
    timings = {}
    for ordering in orderings:
        timings[ordering] = best_time(lambda: run(energies, ordering), repeats) / len(energies)
    best = min(timings, key=timings.get)
    return timings[best], best, timings


def _careful_in_child(side, energies, orderings):
    from rgftrans.system.budget import MEMORY_SHARE, available_memory_bytes

    limit = int(MEMORY_SHARE * available_memory_bytes())
    here = os.path.dirname(os.path.abspath(__file__))
    code = (
        "import sys, time\n"
        f"sys.path.insert(0, {here!r})\n"
        "import numpy as np\n"
        "from bench import strip, careful_sparse_solver\n"
        "side, order = int(sys.argv[1]), sys.argv[2]\n"
        "energies = np.array([float(x) for x in sys.argv[3:]])\n"
        "run, prepare = careful_sparse_solver(strip(side, side))\n"
        "prepare(energies)\n"
        "t0 = time.perf_counter()\n"
        "try:\n"
        "    run(energies, order)\n"
        "    print('seconds', (time.perf_counter() - t0) / len(energies))\n"
        "except MemoryError:\n"
        "    print('memory')\n"
    )

    def cap():
        import resource

        resource.setrlimit(resource.RLIMIT_AS, (limit, limit))

    timings = {}
    for ordering in orderings:
        out = subprocess.run([sys.executable, "-c", code, str(side), ordering, *map(repr, map(float, energies))],
                             capture_output=True, text=True, preexec_fn=cap)
        words = (out.stdout.strip().splitlines() or ["failed"])[-1].split()
        timings[ordering] = float(words[1]) if words[0] == "seconds" else float("inf")
        if not np.isfinite(timings[ordering]):
            print(f"  careful sparse, {ordering}: does not fit in {limit / 2**30:.1f} GiB at {side}^2 "
                  f"({'MemoryError' if words[0] == 'memory' else 'child failed: ' + out.stderr.strip()[-120:]})",
                  flush=True)
    best = min(timings, key=timings.get)
    return timings[best], (best if np.isfinite(timings[best]) else None), timings


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
    return min(best_time(lambda: np.linalg.inv(stack), repeats), best_time(lambda: _inv_each(stack), repeats))


def blas_threads() -> str:
    try:
        from threadpoolctl import threadpool_info

        return ", ".join(f"{d['internal_api']} {d['num_threads']} thread(s)" for d in threadpool_info())
    except ImportError:
        return (f"OPENBLAS_NUM_THREADS={os.environ.get('OPENBLAS_NUM_THREADS', 'unset')}, "
                f"OMP_NUM_THREADS={os.environ.get('OMP_NUM_THREADS', 'unset')} (threadpoolctl not installed)")


def _energies_for(sites: int) -> np.ndarray:
    """Fewer energies for larger devices, so a run stays in minutes."""
    if sites > 500_000:
        return ENERGIES[:1]
    if sites > 100_000:
        return ENERGIES[:2]
    if sites > 20_000:
        return ENERGIES[::4]
    return ENERGIES


def ldos_per_energy(model, repeats, energies):
    """Seconds per energy of the package's LDOS (solver="auto") and the route it took (plans built before)."""
    route = ldos_result(model, energies[:1]).solver  # compile, plan, warm the lead cache
    return best_time(lambda: ldos(model, energies), repeats) / len(energies), route


def width_table(widths, length, repeats):
    print(f"\nTransmission per energy, strip W x {length}; fastest of {repeats} runs (1 from 20 000 sites)")
    print(f"{'W':>5} {'ours (ms)':>10} {'solver':>11} {'careful (ms)':>13} {'ordering':>14} {'careful/ours':>13} "
          f"{'RGF (ms)':>9} {'floor (ms)':>11} {'LDOS':>11} {'LDOS/ours':>10}")
    rows = []
    for w in widths:
        model = strip(w, length)
        energies = _energies_for(model.n_sites)
        reps = 1 if model.n_sites > 20_000 else repeats
        ours, solver = ours_per_energy(model, reps, energies)
        careful, ordering, _ = careful_per_energy(model, energies[:4], 1)
        rgf = ours if solver == "rgf" else ours_per_energy(model, reps, energies, solver="rgf")[0]
        floor = floor_per_sweep(w, length, reps)
        ldos_t, ldos_route = ldos_per_energy(model, reps, energies)
        rows.append((w, ours, solver, careful, ordering))
        print(f"{w:>5} {ours * 1e3:>10.2f} {solver:>11} {careful * 1e3:>13.1f} {ordering:>14} {careful / ours:>13.2f} "
              f"{rgf * 1e3:>9.2f} {floor * 1e3:>11.2f} {ldos_route:>11} {ldos_t / ours:>10.2f}", flush=True)
        clear_lead_cache()
    return rows


def square_table(sides, repeats):
    print(f"\nTransmission per energy, square n x n; fastest of {repeats} runs below 20 000 sites, else one run")
    print(f"{'n':>5} {'N':>8} {'ours (ms)':>10} {'solver':>11} {'careful (ms)':>13} {'ordering':>14} "
          f"{'careful/ours':>13} {'RGF (ms)':>10} {'tree work (MiB)':>16} {'LDOS (ms)':>10} {'LDOS route':>11} "
          f"{'LDOS/ours':>10} {'LDOS work (MiB)':>16}")
    sites, ours_t, careful_t = [], [], []
    orderings = list(ORDERINGS)
    for n in sides:
        model = strip(n, n)
        energies = _energies_for(model.n_sites)
        reps = 1 if model.n_sites > 20_000 else repeats
        ours, solver = ours_per_energy(model, reps, energies)
        careful, ordering, timings = careful_per_energy(model, energies[:2], 1, tuple(orderings), side=n)
        choice = choose_solver(model)
        rgf = ours if solver == "rgf" else (ours_per_energy(model, 1, energies[:1], solver="rgf")[0]
                                             if choice.rgf_seconds < RGF_REFERENCE_MAX_S else float("nan"))
        work = choice.dissection_bytes / 2**20
        ldos_t, ldos_route = ldos_per_energy(model, reps, energies)
        l_choice = choose_ldos_solver(model)
        ldos_work = (l_choice.dissection_bytes if ldos_route == "dissection" else l_choice.rgf_bytes) / 2**20
        dropped = [o for o in orderings if timings[o] > ORDERING_DROP * careful] if ordering else []
        orderings = [o for o in orderings if o not in dropped]
        sites.append(model.n_sites)
        ours_t.append(ours)
        careful_t.append(careful)
        rgf_text = f"{rgf * 1e3:>10.1f}" if np.isfinite(rgf) else f"{'-':>10}"
        note = f"   (dropped next: {', '.join(dropped)})" if dropped else ""
        if ordering is None:
            careful_text, ratio_text = f"{'no memory':>13} {'-':>14}", f"{'-':>13}"
        else:
            careful_text, ratio_text = f"{careful * 1e3:>13.1f} {ordering:>14}", f"{careful / ours:>13.2f}"
        print(f"{n:>5} {model.n_sites:>8} {ours * 1e3:>10.1f} {solver:>11} {careful_text} {ratio_text} {rgf_text} "
              f"{work:>16.1f} {ldos_t * 1e3:>10.1f} {ldos_route:>11} {ldos_t / ours:>10.2f} {ldos_work:>16.1f}{note}",
              flush=True)
        clear_lead_cache()
    if len(sites) >= 2:
        from rgftrans.transport.dissection import dissection_tree

        slope = np.polyfit(np.log(sites), np.log(ours_t), 1)[0]
        fits = np.isfinite(careful_t)
        slope_c = np.polyfit(np.log(np.array(sites)[fits]), np.log(np.array(careful_t)[fits]), 1)[0] \
            if fits.sum() >= 2 else float("nan")
        print(f"  fitted exponent of time vs N over n = {sides[0]}..{sides[-1]}: ours {slope:.3f}, careful sparse "
              f"{slope_c:.3f} (where it ran)")
        if len(sites) >= 3:
            tail = np.polyfit(np.log(sites[-2:]), np.log(ours_t[-2:]), 1)[0]
            print(f"  ours between the two largest: {tail:.3f}")
        flops = [dissection_tree(strip(n, n)).flops for n in sides]
        print(f"  the tree's operation count (complex multiply-adds of the fronts) grows like N^"
              f"{np.polyfit(np.log(sites), np.log(flops), 1)[0]:.3f}")
        if not fits.all() and fits.sum() >= 2:
            for n, s_, ok, t in zip(sides, sites, fits, ours_t):
                if not ok:
                    guess = np.exp(np.polyval(np.polyfit(np.log(np.array(sites)[fits]),
                                                         np.log(np.array(careful_t)[fits]), 1), np.log(s_)))
                    print(f"  n = {n}: careful sparse extrapolated along its own exponent: {guess:.0f} s per energy "
                          f"(~{guess / t:.0f} x ours; not measured: it does not fit in memory)")
    return sites, ours_t, careful_t


def length_scan(width, lengths, repeats):
    print(f"\nTime against length, W = {width}")
    times = []
    for length in lengths:
        t, solver = ours_per_energy(strip(width, length), repeats)
        times.append(t)
        print(f"  L = {length:>5}: {t * 1e3:8.3f} ms per energy ({solver})", flush=True)
    slope = np.polyfit(np.log(lengths), np.log(times), 1)[0]
    print(f"  fitted exponent of time vs L: {slope:.3f}")


def peak_memory(cases):
    """Peak resident memory added by one transmission call (fresh process each; model and plans built before).

    numba's allocations do not show in tracemalloc, so the measure is the process's peak RSS (getrusage)
    before and after the timed call; the tree's own statement of its work memory is printed beside it.
    """
    print("\nPeak work memory of transmission (fresh process each, 2 energies; model, slicing, tree and lead modes "
          "built before; the first call also loads the compiled kernel)")
    here = os.path.dirname(os.path.abspath(__file__))
    code = (
        "import sys, resource\n"
        f"sys.path.insert(0, {here!r})\n"
        "from bench import strip, ENERGIES\n"
        "from rgftrans.transport.rgf import transmission\n"
        "from rgftrans.transport.choice import choose_solver\n"
        "from rgftrans.transport.dissection import dissection_plan\n"
        "from rgftrans.leads.embedding import lead_self_energies\n"
        "model = strip(int(sys.argv[1]), int(sys.argv[2]))\n"
        "c = choose_solver(model)\n"
        "dissection_plan(model) if c.solver == 'dissection' else None\n"
        "[lead_self_energies(model, e) for e in ENERGIES[:3]]\n"
        "before = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss\n"
        "r = transmission(model, ENERGIES[1:3])\n"
        "after = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss\n"
        "work = c.dissection_bytes if r.solver == 'dissection' else c.rgf_bytes\n"
        "print(r.solver, (after - before) * 1024, work, model.n_sites)\n"
    )
    rows = []
    for w, l in cases:
        out = subprocess.run([sys.executable, "-c", code, str(w), str(l)], capture_output=True, text=True, check=True)
        solver, grown, stated, n = out.stdout.strip().splitlines()[-1].split()
        rows.append((int(n), float(grown), float(stated)))
        print(f"  {w} x {l} ({solver}): peak RSS +{float(grown) / 2**20:.1f} MiB during the call; stated work "
              f"{float(stated) / 2**20:.1f} MiB ({float(stated) / int(n):.0f} bytes per site)")
    squares = [r for (w, l), r in zip(cases, rows) if w == l]
    if len(squares) >= 2:
        n = np.log([r[0] for r in squares])
        print(f"  over the squares, stated work memory grows like N^{np.polyfit(n, np.log([r[2] for r in squares]), 1)[0]:.2f}"
              f", the measured peak like N^{np.polyfit(n, np.log([max(r[1], 1.0) for r in squares]), 1)[0]:.2f}")


def ldos_peak_memory(sides):
    """Peak resident memory added by one LDOS call on n x n squares (fresh process each; model, plans and lead
    modes built and the kernel compiled before), beside the route's stated work memory."""
    print("\nPeak work memory of ldos (fresh process each, 1 energy; model, tree and lead modes built and the kernel "
          "loaded before)")
    here = os.path.dirname(os.path.abspath(__file__))
    code = (
        "import sys, resource\n"
        f"sys.path.insert(0, {here!r})\n"
        "from bench import strip, ENERGIES\n"
        "from rgftrans.transport.local import ldos_result\n"
        "from rgftrans.transport.choice import choose_ldos_solver\n"
        "small = strip(8, 8)\n"
        "ldos_result(small, ENERGIES[:1], solver='dissection')\n"
        "model = strip(int(sys.argv[1]), int(sys.argv[1]))\n"
        "c = choose_ldos_solver(model)\n"
        "from rgftrans.transport.dissection import dissection_plan\n"
        "dissection_plan(model) if c.solver == 'dissection' else None\n"
        "from rgftrans.leads.embedding import lead_self_energies\n"
        "lead_self_energies(model, ENERGIES[1])\n"
        "before = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss\n"
        "r = ldos_result(model, ENERGIES[1:2])\n"
        "after = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss\n"
        "work = c.dissection_bytes if r.solver == 'dissection' else c.rgf_bytes\n"
        "print(r.solver, (after - before) * 1024, work, model.n_sites)\n"
    )
    for n in sides:
        out = subprocess.run([sys.executable, "-c", code, str(n)], capture_output=True, text=True, check=True)
        solver, grown, stated, sites = out.stdout.strip().splitlines()[-1].split()
        print(f"  {n} x {n} ({solver}): peak RSS +{float(grown) / 2**20:.1f} MiB during the call; stated work "
              f"{float(stated) / 2**20:.1f} MiB ({float(stated) / int(sites):.0f} bytes per site)", flush=True)


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


def calibrate():
    """Fit the solver-choice constants of rgftrans.transport.choice to this machine (prints them).

    Both routes are forced on strips W x 400 and squares n x n; RGF's time per energy is fitted to
    ``a sum m^3 + b sum m^2 + c L + d`` and the tree's to ``a flops + b assembly + c fronts + r k^3/3 + d``
    (k the root's unknowns), by non-negative least squares on the relative error.
    """
    from scipy.optimize import nnls

    from rgftrans.transport.choice import rgf_seconds
    from rgftrans.transport.dissection import dissection_tree
    from rgftrans.transport.slicing import default_slicing

    cases = [(w, 400) for w in (4, 8, 16, 32, 64, 128)] + [(n, n) for n in (24, 32, 48, 64, 96, 128, 192, 256)]
    rgf_rows, tree_rows = [], []
    print("\nCalibration: forced RGF and forced tree, seconds per energy")
    for w, l in cases:
        model = strip(w, l)
        energies = _energies_for(model.n_sites)[:4]
        t_rgf = ours_per_energy(model, 3, energies, solver="rgf")[0]
        t_tree = ours_per_energy(model, 3, energies, solver="dissection")[0]
        m = np.array([len(layer) for layer in default_slicing(model).layers], dtype=float)
        tree = dissection_tree(model)
        rgf_rows.append(([np.sum(m**3), np.sum(m**2), len(m), 1.0], t_rgf))
        tree_rows.append(([tree.flops, tree.assembly, tree.n_nodes, tree.root_size**3 / 3, 1.0], t_tree))
        print(f"  {w:>4} x {l:<4} RGF {t_rgf * 1e3:9.2f} ms   tree {t_tree * 1e3:9.2f} ms   (RGF predicted now "
              f"{rgf_seconds(m) * 1e3:.2f} ms)", flush=True)
        clear_lead_cache()
    for name, rows in (("RGF: a sum m^3, b sum m^2, c per layer, d per energy", rgf_rows),
                       ("tree: a per flop, b per assembled entry, c per front, r per root k^3/3, d per energy",
                        tree_rows)):
        a = np.array([r[0] for r in rows])
        t = np.array([r[1] for r in rows])
        coef, _ = nnls(a / t[:, None], np.ones(len(t)))
        pred = a @ coef
        print(f"  {name}: {', '.join(f'{c:.3g}' for c in coef)}; worst prediction off by a factor "
              f"{np.max(np.maximum(pred / t, t / pred)):.2f}")


def calibrate_ldos():
    """Fit the LDOS constants of rgftrans.transport.choice to this machine (prints them).

    Both LDOS routes are forced on strips W x 400 and squares n x n.  RGF's LDOS time is fitted as a multiple of
    its predicted transmission time (``LDOS_RGF_FACTOR``); the tree's as its predicted elimination time plus
    ``a`` per multiply-add of the downward pass and ``c`` per front, by non-negative least squares on the relative
    error.
    """
    from scipy.optimize import nnls

    from rgftrans.transport.choice import dissection_seconds, rgf_seconds
    from rgftrans.transport.dissection import dissection_tree
    from rgftrans.transport.slicing import default_slicing

    cases = [(w, 400) for w in (4, 8, 16, 32, 64)] + [(n, n) for n in (24, 32, 48, 64, 96, 128, 192)]
    rgf_ratio, tree_rows = [], []
    print("\nCalibration of the LDOS routes: forced RGF and forced tree, seconds per energy")
    for w, l in cases:
        model = strip(w, l)
        energies = _energies_for(model.n_sites)[:4]
        times = {}
        for solver in ("rgf", "dissection"):
            ldos(model, energies[:1], solver=solver)
            times[solver] = best_time(lambda: ldos(model, energies, solver=solver), 3) / len(energies)
        m = np.array([len(layer) for layer in default_slicing(model).layers], dtype=float)
        tree = dissection_tree(model)
        rgf_ratio.append(times["rgf"] / rgf_seconds(m))
        tree_rows.append(([tree.selection_flops(True), tree.n_nodes], times["dissection"] - dissection_seconds(tree),
                          times["dissection"]))
        print(f"  {w:>4} x {l:<4} RGF {times['rgf'] * 1e3:9.2f} ms ({rgf_ratio[-1]:.2f} x its transmission "
              f"prediction)   tree {times['dissection'] * 1e3:9.2f} ms", flush=True)
        clear_lead_cache()
    ratio = np.array(rgf_ratio)
    print(f"  RGF LDOS over predicted RGF transmission: median {np.median(ratio):.2f}, range {ratio.min():.2f}.."
          f"{ratio.max():.2f}")
    a = np.array([r[0] for r in tree_rows])
    extra = np.array([r[1] for r in tree_rows])
    total = np.array([r[2] for r in tree_rows])
    coef, _ = nnls(a / total[:, None], extra / total)
    pred = total - extra + a @ coef
    print(f"  tree LDOS: a = {coef[0]:.3g} s per multiply-add of the downward pass, c = {coef[1]:.3g} s per front; "
          f"worst prediction off by a factor {np.max(np.maximum(pred / total, total / pred)):.2f}")


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="small sizes and few repeats (a smoke run)")
    parser.add_argument("--widths", type=int, nargs="*", help="only the strip table, for these widths")
    parser.add_argument("--squares", type=int, nargs="*", help="only the square table, for these sides")
    parser.add_argument("--big", action="store_true", help="add the 1024 x 1024 square (10^6 sites; long)")
    parser.add_argument("--calibrate", action="store_true", help="refit the solver-choice constants")
    parser.add_argument("--calibrate-ldos", action="store_true", help="refit the LDOS solver-choice constants")
    parser.add_argument("--part", choices=["length", "memory", "ldos-memory", "processes", "multi"],
                        help="only one of the other parts")
    args = parser.parse_args(argv)
    for var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
        os.environ.setdefault(var, "1")  # children inherit it; this process was started with it by scripts/bench
    print("rgftrans benchmark; BLAS:", blas_threads(), f"; cores: {os.cpu_count()}")
    if args.quick:
        width_table([8, 32], 100, 2)
        square_table([32, 64], 2)
        multi_terminal_table([32, 64], 2)
        return
    if args.calibrate:
        calibrate()
        return
    if args.calibrate_ldos:
        calibrate_ldos()
        return
    if args.widths or args.squares:
        if args.widths:
            width_table(args.widths, 400, 5)
        if args.squares:
            square_table(args.squares, 5)
        return
    if args.part:
        {"length": lambda: length_scan(32, [100, 200, 400, 800, 1600], 5),
         "memory": lambda: peak_memory([(64, 1600), (128, 128), (256, 256), (512, 512), (1024, 1024)] if args.big else [(64, 1600), (128, 128), (256, 256), (512, 512)]),
         "ldos-memory": lambda: ldos_peak_memory([128, 256, 512] + ([1024] if args.big else [])),
         "processes": lambda: process_scaling(64, 200, 256),
         "multi": lambda: multi_terminal_table([64, 128, 256, 512], 3)}[args.part]()
        return
    width_table([16, 64, 128], 400, 5)
    square_table([64, 128, 256, 512] + ([1024] if args.big else []), 5)
    length_scan(32, [100, 200, 400, 800, 1600], 5)
    peak_memory([(64, 1600), (128, 128), (256, 256), (512, 512), (1024, 1024)] if args.big else [(64, 1600), (128, 128), (256, 256), (512, 512)])
    ldos_peak_memory([128, 256, 512] + ([1024] if args.big else []))
    process_scaling(64, 200, 256)
    multi_terminal_table([64, 128, 256, 512], 3)


if __name__ == "__main__":
    main()
