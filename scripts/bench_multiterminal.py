"""Benchmark part "multi": the transmission matrix of a four-terminal square against a careful sparse solve.

Prints a table, asserts nothing (``scripts/bench --part multi`` runs it, or this file directly).

Device: an n x n square (t = 1, onsite disorder uniform in [-t/2, t/2], seeded) with four clean leads, one
in the middle half of each edge (a Hall-bar cross section).  Eight energies 0.6-1.0 t above the band bottom.

* ours    -- ``transmission_matrix(model, energies)`` (the package chooses RGF or the tree), per energy;
* careful -- what a careful user writes: H in CSC once, per energy ``E I - H - Sigma`` with the four
             self-energy blocks as one COO matrix, ``splu`` with the best of COLAMD, MMD_AT_PLUS_A and MMD_ATA
             (an ordering more than ORDERING_DROP slower is not retried at the next size), solved for the
             interface columns of three of the four leads only (the fourth column of T follows from current
             conservation, so a careful user skips it), then ``T_pq = Tr[Gamma_p G_pq Gamma_q G_pq^dag]``.  The
             self-energies are computed before its clock starts (in its favour).

The two agree to round-off on the columns both compute (printed as max |dT|).
"""

from __future__ import annotations

import argparse

import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as spla

from _timing import best_time  # scripts/ is on sys.path when a script runs
from rgftrans.leads.embedding import lead_self_energies
from rgftrans.system.device import Device, Lead
from rgftrans.system.fields import Disorder
from rgftrans.system.geometry import rectangle
from rgftrans.system.lattices import square
from rgftrans.transport.rgf import transmission_matrix

ENERGIES = np.linspace(0.6, 1.0, 8) + 0.00137
ORDERINGS = ("COLAMD", "MMD_AT_PLUS_A", "MMD_ATA")
ORDERING_DROP = 3.0


def cross(n: int):
    """The four-terminal n x n square (band bottom at 0: onsite 4t)."""
    q = (n - 1) / 4
    leads = [Lead("left", "left", (q, 3 * q)), Lead("right", "right", (q, 3 * q)),
             Lead("bottom", "bottom", (q, 3 * q)), Lead("top", "top", (q, 3 * q))]
    return Device(rectangle(0, 0, n - 1, n - 1), leads, lattice=square(1.0), hopping=1.0,
                  disorder=Disorder(1.0, seed=1)).discretise()



def careful_solver(model, energies):
    """The careful sparse route: ``run(ordering) -> T`` of shape (n_E, n_leads, n_leads - 1) (columns 0..n-2)."""
    n = model.n_orbitals
    h = sp.csc_matrix(model.hamiltonian)
    eye = sp.identity(n, dtype=complex, format="csc")
    faces = [lead.interface for lead in model.leads]
    rows = np.concatenate([np.repeat(f, len(f)) for f in faces])
    cols = np.concatenate([np.tile(f, len(f)) for f in faces])
    solved = faces[:-1]
    rhs = np.zeros((n, sum(len(f) for f in solved)), dtype=complex)
    rhs[np.concatenate(solved), np.arange(rhs.shape[1])] = 1.0
    edges = np.cumsum([0] + [len(f) for f in solved])
    sigmas = {e: lead_self_energies(model, e, warn=False)[0] for e in energies}

    def run(ordering):
        out = np.zeros((len(energies), len(faces), len(solved)))
        for k, e in enumerate(energies):
            s = sigmas[e]
            sig = sp.coo_matrix((np.concatenate([x.ravel() for x in s]), (rows, cols)), shape=(n, n))
            lu = spla.splu((e * eye - h - sig).tocsc(), permc_spec=ordering)
            x = lu.solve(rhs)
            gam = [1j * (x_ - x_.conj().T) for x_ in s]
            for p, face in enumerate(faces):
                for q in range(len(solved)):
                    if p != q:
                        g = x[face, edges[q]:edges[q + 1]]
                        out[k, p, q] = np.trace(gam[p] @ g @ gam[q] @ g.conj().T).real
        return out

    return run


def table(sizes, repeats: int) -> None:
    print("four-terminal squares: transmission matrix per energy (ours) against careful splu (3 of 4 lead columns)")
    print(f"{'n':>6} {'sites':>8} {'ours (ms)':>10} {'solver':>11} {'careful (ms)':>13} {'ordering':>14} "
          f"{'careful/ours':>13} {'max |dT|':>9}", flush=True)
    orderings = list(ORDERINGS)
    for n in sizes:
        model = cross(n)
        transmission_matrix(model, ENERGIES[:1])  # compile, tree, lead cache
        ours = best_time(lambda: transmission_matrix(model, ENERGIES), repeats) / len(ENERGIES)
        res = transmission_matrix(model, ENERGIES)
        run = careful_solver(model, ENERGIES)
        timings = {o: best_time(lambda: run(o), max(1, repeats // 2)) / len(ENERGIES) for o in orderings}
        best = min(timings, key=timings.get)
        ref = run(best)
        n_cols = ref.shape[2]
        off = ~np.eye(len(model.leads), n_cols, dtype=bool)
        err = float(np.abs(res.matrix[:, :, :n_cols][:, off] - ref[:, off]).max())
        print(f"{n:>6} {model.n_sites:>8} {ours * 1e3:>10.2f} {res.solver:>11} {timings[best] * 1e3:>13.1f} "
              f"{best:>14} {timings[best] / ours:>13.1f} {err:>9.1e}", flush=True)
        orderings = [o for o in orderings if timings[o] <= ORDERING_DROP * timings[best]]


def main(argv=None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes", type=int, nargs="+", default=[64, 128, 256])
    parser.add_argument("--repeats", type=int, default=3)
    args = parser.parse_args(argv)
    table(args.sizes, args.repeats)


if __name__ == "__main__":
    main()
