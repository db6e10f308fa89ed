"""Nested dissection with multifrontal elimination: transmission of large devices in about N^1.5 operations.

RGF inverts one layer block per layer, ``sum_i m_i^3`` operations: ``L W^3``
for a W x L device, ``N^2`` for a square one.  Nested dissection (George, SIAM
J. Numer. Anal. 10, 345 (1973), from memory) cuts the device's site graph in
two by a small vertex *separator*, recursively, and eliminates the sites
bottom-up: each subdomain's interior is folded into a dense Schur complement
on its boundary (the separators of its ancestors and the lead interfaces it
touches), the two halves' complements are added into their parent's front,
and so on up the tree (the multifrontal method, Duff & Reid, ACM TOMS 9, 302
(1983), from memory).  On a square device the separators are ``~sqrt(N)``
sites and the work is dominated by the top few fronts: ``O(N^1.5)``
operations and ``O(N)`` work memory per energy.

Here the lead interface orbitals ``I`` are kept out of the partition and never
eliminated: they are the root's unknowns.  What reaches the root is

    S_II(z) = (z - H)_II - H_IX (z - H_XX)^-1 H_XI          (X: every other orbital),

and since the leads' self-energies touch only ``I``, the interface block of the
open device's Green's function is ``G_II = (S_II - sum_p Sigma_p)^-1``.  With
``Gamma_p = W_p W_p^dag`` (one column per open channel), ``M = W^dag G_II W``
gives every transmission of the Caroli / Fisher-Lee formula,
``T_pq = Tr[Gamma_p G_pq Gamma_q G_pq^dag] = ||M_pq||_F^2``, and the reflection
``R_pp = N_p + 2 Im Tr M_pp + ||M_pp||_F^2`` (from ``r = -1 + i W^dag G W``;
Fisher & Lee, Phys. Rev. B 23, 6851 (1981); Caroli et al., J. Phys. C 4, 916
(1971); both from memory).

The partition is geometric (recursive coordinate bisection): a set of sites is
split at the median of its longer extent, and the separator is the sites of
one side (the side giving fewer) with a neighbour on the other.  The tree, its
index arrays and the scatter maps that assemble every front are built once per
geometry (:func:`dissection_tree`, kept in a small cache keyed by the site
graph, positions and lead interfaces, so sweep points that change only
potentials or the field share it); the Hamiltonian's values are scattered into
it once per model (:func:`dissection_plan`, cached on the model).  Per energy
only the compiled elimination runs (:mod:`rgftrans.transport._frontal`).

The diagonal of G (the LDOS) comes from the same tree by selected inversion
(:func:`dissection_diagonal`): the elimination keeps every front's factors, the
root is inverted with the self-energies, and G on each front follows from its
parent's in a downward pass (the FIND scheme of Li, Ahmed, Klimeck & Darve,
J. Comput. Phys. 227, 9408 (2008), from memory), about twice the transmission's
time and ``O(N log N)`` memory.

Accuracy: a subdomain is a *closed* system, singular at its own eigenvalues
(a clean square has them at the band centre and at 4t +- t, among others; a
disordered one at the energies of states localised inside it).  A front
whose pivot falls below ``PIVOT_DELAY`` delays the unknowns that carry its
near-null directions to its parent, and eliminates the rest
(:mod:`rgftrans.transport._frontal`); at the root the leads open the system.
An energy where the delays exceed their cap, or the growth or the root's
pivot is out of bounds, is reported untrusted and the callers redo it by
another route.  The symmetric update, the delays and the leaf size change
nothing but round-off (tests/test_dissection.py).
"""

from __future__ import annotations

import hashlib
from collections import OrderedDict
from dataclasses import dataclass

import numpy as np
from scipy.linalg import lapack
import scipy.sparse as sp

from rgftrans.leads.embedding import broadening, device_energy, gamma_factor, lead_self_energies
from rgftrans.system.device import TightBindingModel

__all__ = ["DissectionTree", "DissectionPlan", "dissection_tree", "dissection_plan", "root_schur",
           "DissectionSolve", "dissection_solve", "DissectionDiagonal", "dissection_diagonal", "clear_tree_cache"]

#: Subdomains of at most this many orbitals are leaves (eliminated densely in one front).  Measured on
#: squares 64^2..256^2 and strips 16 x 400, 64 x 400 (one BLAS thread): leaves of 8-16 orbitals are fastest
#: and within 5 % of each other, 32 costs 5-25 % more, 96 up to 3x (a leaf's dense LU grows as its cube).
LEAF_ORBITALS = 16
#: A front whose ``F11`` has a relative pivot ``min |U_jj| / max |U_jj|`` below this delays its near-null
#: unknowns to its parent (:mod:`rgftrans.transport._frontal`).  Eliminated anyway, clean devices near an
#: energy where nested subdomains are singular at once lose ~eps / pivot^3 of T (measured on clean 8..24-site
#: squares: pivots of 2e-6 cost 1e-10, pivots of 2e-5 nothing above round-off), disordered ones
#: ~eps / pivot; 1e-5 keeps both at round-off.  A delay moves one unknown per near-null direction, so it
#: costs next to nothing even where it happens at every level (a localised state).
PIVOT_DELAY = 1e-5
#: The same threshold for the diagonal of G (:func:`dissection_diagonal`), applied to the smaller of the relative
#: pivot and ``1 / max |F11^-1 F12|``.  G inside a front, ``S_KK^-1 - X G_BK``, cancels most of itself near a
#: subdomain eigenvalue and its errors pass down the tree multiplied by ``X``, so the LDOS needs far better
#: pivots than the transmission (which sees only the root's Schur complement).  Measured against RGF and splu
#: (disordered squares, 40 energies across the band): with 1e-5 the LDOS is off by up to 7e-9 at 64^2; with
#: 1e-2 by 5e-11 at 128^2 and 1.7e-10 at 256^2; with 3e-2 by 5e-12 (64^2), 1.2e-11 (128^2), 8e-12 (256^2), at
#: 20-660 delayed unknowns per energy and no measurable cost.  On the clean 16^2 square, pivots of 2e-4 cost
#: 1e-8, 2e-3 cost 4e-11.
PIVOT_DELAY_DIAGONAL = 3e-2
#: Near-null directions of such a front: Ritz residual below this fraction of its largest pivot.  Several rounds
#: of up to ``NULL_BLOCK`` delays are taken while the rest is still below the threshold
#: (:data:`rgftrans.transport._frontal.DELAY_ROUNDS`): large subdomains have many levels near E.
NULL_RESIDUAL_DIAGONAL = 1e-1
#: Delayed unknowns one front may receive, as a fraction of the largest planned front (and at least
#: ``DELAY_MIN``): more means whole regions are singular at this energy, and the energy is redone by RGF or
#: a sparse direct solve.
DELAY_FRACTION = 0.5
DELAY_MIN = 64
#: An energy is trusted only if the elimination's growth (largest update entry over the largest entry of
#: ``z - H``) stays below this and the root's LU (which includes the leads) has a relative pivot above
#: ``ROOT_PIVOT_MIN``; round-off then stays below ~1e-6 relative even in the worst case.
GROWTH_MAX = 1e10
ROOT_PIVOT_MIN = 1e-13
#: Use the symmetric update for real Hamiltonians (see :func:`rgftrans.transport._frontal._update`): 15-25 %
#: faster from 128^2 up, the same below (measured, one BLAS thread).
SYMMETRIC_FRONTS = True
#: Geometries whose trees are kept (sweeps revisit a few geometries; each tree holds O(N log N) integers).
TREE_CACHE_SIZE = 4


# --------------------------------------------------------------------------
# The tree: structure only, once per geometry
# --------------------------------------------------------------------------

@dataclass(frozen=True, eq=False)
class DissectionTree:
    """The elimination tree of a device: which orbitals each front eliminates and where everything goes.

    Nodes are numbered in postorder (children before parents); the root is the last node, its unknowns
    are the lead interface orbitals.  All counts and positions are in orbitals.

    Attributes
    ----------
    n_orbitals : int
    root_orbitals : (k,) int ndarray
        The root's unknowns (every orbital of every lead interface site), ascending.
    lead_slots : tuple of (k_p,) int ndarray
        Positions of lead p's interface orbitals in ``root_orbitals``.
    n_elim, n_bound : (n_nodes,) int64 ndarray
        Fully summed and boundary unknowns of each front.
    child_ptr, children : int64 ndarray
        Children of node v: ``children[child_ptr[v]:child_ptr[v + 1]]``, in processing order.
    map_ptr, parent_pos : int64 ndarray
        Positions of node v's boundary unknowns in its parent's front.
    entry_ptr : int64 ndarray
        Entries assembled into node v: ``[entry_ptr[v]:entry_ptr[v + 1]]``.
    entry_row, entry_col : int32 ndarray
        Row and column of each assembled Hamiltonian entry in its node's front.
    entry_key : (n_entries,) int64 ndarray
        ``row * n_orbitals + col`` of each assembled entry (the plan looks the values up by it).
    front_max, stack_max : int
        Largest front (rows) and peak of the update stack (complex entries).
    elim_orbitals : (n_orbitals - k,) int64 ndarray
        Orbitals in elimination order (node by node), for maps of per-node quantities.
    """

    n_orbitals: int
    root_orbitals: np.ndarray
    lead_slots: tuple
    n_elim: np.ndarray
    n_bound: np.ndarray
    child_ptr: np.ndarray
    children: np.ndarray
    map_ptr: np.ndarray
    parent_pos: np.ndarray
    entry_ptr: np.ndarray
    entry_row: np.ndarray
    entry_col: np.ndarray
    entry_key: np.ndarray
    front_max: int
    stack_max: int
    elim_orbitals: np.ndarray
    _key_order: np.ndarray  # argsort of entry_key (value lookup)

    @property
    def n_nodes(self) -> int:
        return len(self.n_elim)

    @property
    def flops(self) -> float:
        """Complex multiply-adds of one elimination: ``sum k^3/3 + k^2 b + k b^2`` over the fronts."""
        k = self.n_elim[:-1].astype(float)
        b = self.n_bound[:-1].astype(float)
        return float(np.sum(k**3 / 3 + k * k * b + k * b * b))

    @property
    def assembly(self) -> float:
        """Front entries touched per elimination (zeroing, extend-add, copy): ``sum (k + b)^2``."""
        return float(np.sum((self.n_elim + self.n_bound).astype(float) ** 2))

    @property
    def root_size(self) -> int:
        return len(self.root_orbitals)

    @property
    def work_bytes(self) -> int:
        """Work memory one elimination reserves (bytes): two front buffers and the update stack with room for
        delayed pivots (``front_max + delay`` squared each), and the root matrix handed back.  Without delays
        only one front buffer and the planned stack (``stack_max``) are touched, about a third of it."""
        cap = self.front_max + delay_max(self)
        return 16 * (4 * cap**2 + self.stack_max + (self.root_size + delay_max(self))**2)

    def factor_entries(self, symmetric: bool) -> int:
        """Complex entries of the factors the diagonal of G keeps from one elimination (without delays):
        ``sum k^2 + k b`` over the fronts (the LU of the pivot block and ``F11^-1 F12``), ``+ b k`` more
        (``F21``) when the fronts are not complex symmetric."""
        k = self.n_elim[:-1].astype(np.int64)
        b = self.n_bound[:-1].astype(np.int64)
        return int(np.sum(k * k + k * b * (1 if symmetric else 2)))

    def down_entries(self) -> int:
        """Peak of the downward pass's stack of ``G_BB`` blocks (complex entries, without delays): a parent
        pushes every child's ``b^2``, a child pops its own."""
        peak = held = 0
        for v in range(self.n_nodes - 1, -1, -1):
            if v != self.n_nodes - 1:
                held -= int(self.n_bound[v]) ** 2
            kids = self.children[self.child_ptr[v]:self.child_ptr[v + 1]]
            held += int(np.sum(self.n_bound[kids].astype(np.int64) ** 2))
            peak = max(peak, held)
        return peak

    def selection_flops(self, symmetric: bool) -> float:
        """Complex multiply-adds of the downward pass of the diagonal of G (without delays): per front the
        inverse of the pivot block (``2k^3/3``) and ``G_KB = -X G_BB`` (``k b^2``; ``G_BK = -G_BB Y`` when the
        fronts are not symmetric, with ``Y``, ``b k^2``, besides), and where a front has children the whole
        ``G_KK`` (``k^2 b``; and ``G_KB``, ``k b^2``, when not symmetric); the root's inverse (``2 m^3/3``
        more than its LU)."""
        k = self.n_elim[:-1].astype(float)
        b = self.n_bound[:-1].astype(float)
        inner = np.diff(self.child_ptr)[:-1] > 0
        per = 2 * k**3 / 3 + k * b * b + inner * k * k * b
        if not symmetric:
            per += k * k * b + inner * k * b * b
        return float(np.sum(per) + 2 * float(self.root_size) ** 3 / 3)

    def diagonal_bytes(self, symmetric: bool) -> int:
        """Work memory of one diagonal-of-G call (bytes): the elimination's (:attr:`work_bytes`), the factors
        kept and the downward stack, each with room for delays (a quarter more), the pivots, the maps of
        unknowns from front to front and the result."""
        keep = 16 * (self.factor_entries(symmetric) + self.down_entries()) * 5 // 4
        index = 4 * self.n_orbitals + 8 * (3 * self.n_orbitals + int(np.sum(self.n_bound)))
        return int(self.work_bytes + keep + index + 16 * self.n_orbitals)

    @property
    def nbytes(self) -> int:
        """Memory held by the tree's index arrays (bytes)."""
        return sum(getattr(self, name).nbytes for name in (
            "root_orbitals", "n_elim", "n_bound", "child_ptr", "children", "map_ptr", "parent_pos", "entry_ptr",
            "entry_row", "entry_col", "entry_key", "elim_orbitals", "_key_order"))


def _site_graph(model: TightBindingModel) -> sp.csr_matrix:
    """Symmetric site adjacency (no diagonal) from the Hamiltonian's pattern."""
    coo = model.hamiltonian.tocoo()
    rows, cols = coo.row // model.norbs, coo.col // model.norbs
    off = rows != cols
    n = model.n_sites
    adj = sp.coo_matrix((np.ones(np.count_nonzero(off), dtype=np.int8), (rows[off], cols[off])), shape=(n, n))
    adj = (adj + adj.T).tocsr()
    adj.sum_duplicates()
    adj.sort_indices()
    return adj


def _neighbours(adj: sp.csr_matrix, sites: np.ndarray):
    """Concatenated neighbour lists of ``sites`` and the index (into ``sites``) each one came from."""
    starts = adj.indptr[sites]
    counts = adj.indptr[sites + 1] - starts
    total = int(counts.sum())
    owner = np.repeat(np.arange(len(sites)), counts)
    offsets = np.arange(total) - np.repeat(np.cumsum(counts) - counts, counts) + np.repeat(starts, counts)
    return adj.indices[offsets], owner


def _touching(adj, sites, mark) -> np.ndarray:
    """Boolean mask: which of ``sites`` have a neighbour with ``mark`` set."""
    nbrs, owner = _neighbours(adj, sites)
    return np.bincount(owner, weights=mark[nbrs], minlength=len(sites)) > 0


class _Node:
    __slots__ = ("sites", "children", "bound", "peak", "update", "index")

    def __init__(self, sites, children):
        self.sites = sites
        self.children = children


def _dissect(sites, positions, adj, mark, leaf_sites) -> _Node:
    """Recursive coordinate bisection with one-sided vertex separators (explicit stack, no recursion limit)."""
    root = _Node(None, [])
    todo = [(sites, root)]
    while todo:
        part, parent = todo.pop()
        if len(part) <= leaf_sites:
            parent.children.append(_Node(part, []))
            continue
        pos = positions[part]
        axis = int(np.argmax(np.ptp(pos, axis=0)))
        coord = pos[:, axis]
        median = np.sort(coord)[len(coord) // 2]
        left = coord < median
        if not left.any():
            left = coord <= median
        if left.all():  # every site at one point along the longer extent: nothing to cut
            parent.children.append(_Node(part, []))
            continue
        side_a, side_b = part[left], part[~left]
        mark[side_b] = 1
        a_touch = _touching(adj, side_a, mark)
        mark[side_b] = 0
        mark[side_a] = 1
        b_touch = _touching(adj, side_b, mark)
        mark[side_a] = 0
        if np.count_nonzero(a_touch) <= np.count_nonzero(b_touch):
            sep, rest = side_a[a_touch], (side_a[~a_touch], side_b)
        else:
            sep, rest = side_b[b_touch], (side_a, side_b[~b_touch])
        node = _Node(sep, [])
        parent.children.append(node)
        for piece in rest:
            if len(piece):
                todo.append((piece, node))
    return root


def _postorder(root: _Node) -> list:
    out, stack = [], [(root, False)]
    while stack:
        node, done = stack.pop()
        if done:
            out.append(node)
            continue
        stack.append((node, True))
        for child in reversed(node.children):
            stack.append((child, False))
    return out


def _fingerprint(model: TightBindingModel, adj: sp.csr_matrix) -> bytes:
    """Digest of what the tree depends on: site graph, positions, orbitals per site, lead interfaces."""
    h = hashlib.blake2b(digest_size=20)
    for arr in (adj.indptr, adj.indices, model.positions, *[lead.interface for lead in model.leads]):
        a = np.ascontiguousarray(arr)
        h.update(str((a.dtype, a.shape)).encode())
        h.update(a.tobytes())
    h.update(str((model.norbs, len(model.leads))).encode())
    return h.digest()


_TREES: OrderedDict = OrderedDict()


def clear_tree_cache() -> None:
    """Forget every cached dissection tree."""
    _TREES.clear()


def dissection_tree(model: TightBindingModel, *, leaf_orbitals: int | None = None) -> DissectionTree:
    """The elimination tree of the model's geometry (cached by site graph, positions and lead interfaces).

    Parameters
    ----------
    model : TightBindingModel
    leaf_orbitals : int, optional
        Largest subdomain eliminated densely in one front (orbitals); default :data:`LEAF_ORBITALS`.

    Returns
    -------
    DissectionTree
    """
    if leaf_orbitals is None and model.cache.dissection is not None:
        return model.cache.dissection.tree  # the model's own plan already holds its default tree
    leaf_orbitals = LEAF_ORBITALS if leaf_orbitals is None else int(leaf_orbitals)
    adj = _site_graph(model)
    key = (_fingerprint(model, adj), leaf_orbitals)
    tree = _TREES.get(key)
    if tree is None:
        tree = _build_tree(model, adj, max(1, leaf_orbitals // model.norbs))
        _TREES[key] = tree
        while len(_TREES) > TREE_CACHE_SIZE:
            _TREES.popitem(last=False)
    else:
        _TREES.move_to_end(key)
    return tree


def _build_tree(model: TightBindingModel, adj: sp.csr_matrix, leaf_sites: int) -> DissectionTree:
    n_sites, norbs = model.n_sites, model.norbs
    n_orb = n_sites * norbs
    lead_sites = np.unique(np.concatenate([np.asarray(lead.interface) // norbs for lead in model.leads]))
    free = np.ones(n_sites, dtype=bool)
    free[lead_sites] = False
    mark = np.zeros(n_sites, dtype=np.int8)
    top = _dissect(np.flatnonzero(free), model.positions, adj, mark, leaf_sites) if free.any() else _Node(None, [])
    top.sites = lead_sites  # the root: lead interface sites, never eliminated

    # Boundaries (sets, independent of the children's order): bound(v) = neighbours of v's subtree outside it.
    first = _postorder(top)
    node_of = np.empty(n_sites, dtype=np.int64)
    for i, node in enumerate(first):
        node_of[node.sites] = i
    for i, node in enumerate(first):
        nbrs, _ = _neighbours(adj, node.sites)
        cand = np.unique(np.concatenate([nbrs] + [child.bound for child in node.children]))
        node.bound = cand[node_of[cand] > i]  # later in postorder and adjacent to the subtree: an ancestor
    # Children order that keeps the update stack low (largest peak-minus-update first; Liu, ACM TOMS 12,
    # 127 (1986), from memory); peaks in complex entries.
    for node in first:
        node.update = (len(node.bound) * norbs) ** 2
        node.children.sort(key=lambda c: c.peak - c.update, reverse=True)
        peak, held = node.update, 0
        for child in node.children:
            peak = max(peak, held + child.peak)
            held += child.update
        node.peak = max(peak, held)
    order = _postorder(top)
    for i, node in enumerate(order):
        node.index = i
        node_of[node.sites] = i
    n_nodes = len(order)

    # Fronts: [eliminated sites, boundary sites sorted by (node, site)]; positions via a scratch array.
    where = np.full(n_sites, -1, dtype=np.int64)
    n_elim = np.array([len(node.sites) for node in order], dtype=np.int64) * norbs
    for node in order:
        node.bound = node.bound[np.lexsort((node.bound, node_of[node.bound]))]
    n_bound = np.array([len(node.bound) for node in order], dtype=np.int64) * norbs
    n_bound[-1] = 0

    # Site pairs (s, t) carrying matrix entries: every bond and every site's own block; each goes to the
    # front of whichever end is eliminated first.
    coo = adj.tocoo()
    pair_s = np.concatenate([coo.row, np.arange(n_sites)]).astype(np.int64)
    pair_t = np.concatenate([coo.col, np.arange(n_sites)]).astype(np.int64)
    pair_node = np.minimum(node_of[pair_s], node_of[pair_t])
    by_node = np.argsort(pair_node, kind="stable")
    pair_bounds = np.searchsorted(pair_node[by_node], np.arange(n_nodes + 1))

    o = np.arange(norbs)
    child_ptr = np.zeros(n_nodes + 1, dtype=np.int64)
    children, parent_pos, map_len = [], [], np.zeros(n_nodes, dtype=np.int64)
    entry_row, entry_col, entry_key = [], [], []
    for node in order:
        v = node.index
        front_sites = np.concatenate([node.sites, node.bound])
        f = len(front_sites) * norbs
        where[front_sites] = np.arange(len(front_sites))
        child_ptr[v + 1] = child_ptr[v] + len(node.children)
        for child in node.children:
            children.append(child.index)
            pos = (where[child.bound][:, None] * norbs + o).ravel()
            parent_pos.append((child.index, pos))
            map_len[child.index] = len(pos)
        sel = by_node[pair_bounds[v]:pair_bounds[v + 1]]
        s, t = pair_s[sel], pair_t[sel]
        rows = (where[s][:, None, None] * norbs + o[None, :, None])  # (n_pairs, norbs, 1)
        cols = (where[t][:, None, None] * norbs + o[None, None, :])  # (n_pairs, 1, norbs)
        rows, cols = np.broadcast_arrays(rows, cols)
        entry_row.append(rows.ravel())
        entry_col.append(cols.ravel())
        orb_s = (s[:, None, None] * norbs + o[None, :, None])
        orb_t = (t[:, None, None] * norbs + o[None, None, :])
        entry_key.append((orb_s * n_orb + orb_t).ravel())
        where[front_sites] = -1
    map_ptr = np.concatenate([[0], np.cumsum(map_len)]).astype(np.int64)
    flat_pos = np.zeros(map_ptr[-1], dtype=np.int64)
    for index, pos in parent_pos:
        flat_pos[map_ptr[index]:map_ptr[index + 1]] = pos
    entry_ptr = np.concatenate([[0], np.cumsum([len(p) for p in entry_row])]).astype(np.int64)
    entry_row = np.concatenate(entry_row).astype(np.int32)
    entry_col = np.concatenate(entry_col).astype(np.int32)
    entry_key = np.concatenate(entry_key).astype(np.int64)

    root_orbitals = (lead_sites[:, None] * norbs + o).ravel()
    lead_slots = tuple(np.searchsorted(root_orbitals, np.asarray(lead.interface)) for lead in model.leads)
    elim_sites = np.concatenate([node.sites for node in order[:-1]] or [np.zeros(0, dtype=np.int64)])
    return DissectionTree(
        n_orbitals=n_orb, root_orbitals=root_orbitals, lead_slots=lead_slots, n_elim=n_elim, n_bound=n_bound,
        child_ptr=child_ptr, children=np.array(children, dtype=np.int64), map_ptr=map_ptr, parent_pos=flat_pos,
        entry_ptr=entry_ptr, entry_row=entry_row, entry_col=entry_col, entry_key=entry_key,
        front_max=int(np.max(n_elim + n_bound)), stack_max=int(top.peak),
        elim_orbitals=(elim_sites[:, None] * norbs + o).ravel().astype(np.int64),
        _key_order=np.argsort(entry_key, kind="stable"),
    )


# --------------------------------------------------------------------------
# The plan: the tree with this model's matrix values
# --------------------------------------------------------------------------

@dataclass(frozen=True, eq=False)
class DissectionPlan:
    """A :class:`DissectionTree` with the model's ``-H`` entries in assembly order (``entry_val``, meV).

    ``symmetric``: H is real (no field, no spin-orbit), so every front is complex symmetric and the kernel
    forms only the lower triangles of the update matrices.
    """

    tree: DissectionTree
    entry_val: np.ndarray
    symmetric: bool


def dissection_plan(model: TightBindingModel, tree: DissectionTree | None = None) -> DissectionPlan:
    """The model's dissection tree and assembly values.

    Without ``tree`` the default tree is used and the plan is computed once and kept in
    ``model.cache.dissection``; with one (e.g. another leaf size) the plan is built for it and not kept.
    """
    plan = model.cache.dissection if tree is None else None
    if plan is None:
        keep = tree is None
        tree = dissection_tree(model) if tree is None else tree
        coo = model.hamiltonian.tocoo()
        keys = coo.row.astype(np.int64) * tree.n_orbitals + coo.col
        sorted_keys = tree.entry_key[tree._key_order]
        at = np.minimum(np.searchsorted(sorted_keys, keys), len(sorted_keys) - 1)
        if not np.array_equal(sorted_keys[at], keys):  # pragma: no cover - the tree is keyed by the site graph
            raise RuntimeError("dissection tree does not cover the Hamiltonian's pattern")
        values = np.zeros(len(sorted_keys), dtype=complex)
        np.add.at(values, tree._key_order[at], -coo.data)
        plan = DissectionPlan(tree=tree, entry_val=values,
                              symmetric=bool(SYMMETRIC_FRONTS and not np.any(coo.data.imag)))
        if keep:
            model.cache.dissection = plan
    return plan


#: Root matrices handed back per kernel call are limited to this many bytes (energies are chunked).
ROOT_CHUNK_BYTES = 64 * 2**20


def delay_max(tree: DissectionTree) -> int:
    """Most delayed unknowns one front may receive (see :data:`DELAY_FRACTION`)."""
    return max(DELAY_MIN, int(DELAY_FRACTION * tree.front_max))


def root_schur(plan: DissectionPlan, z_all):
    """The root's front after eliminating everything else, at each energy.

    Parameters
    ----------
    plan : DissectionPlan
    z_all : (n_E,) complex array_like, meV

    Returns
    -------
    root : (n_E, m, m) complex ndarray, meV
        ``root[e, :d+k, :d+k]`` with ``d = delayed[e]``: the ``d`` delayed unknowns first, then the root
        unknowns in the order of ``plan.tree.root_orbitals``.  With ``d = 0`` it is the Schur complement
        ``S_II(z) = (z - H)_II - H_IX (z - H_XX)^-1 H_XI``.
    delayed, pivot, growth, status, delays : (n_E,) ndarrays
        See :func:`rgftrans.transport._frontal.schur_onto_root`.
    """
    from rgftrans.transport._frontal import schur_onto_root

    t = plan.tree
    z_all = np.atleast_1d(np.asarray(z_all, dtype=complex))
    n_e = len(z_all)
    cap = delay_max(t)
    m = t.root_size + cap
    root = np.empty((n_e, m, m), dtype=complex)
    delayed = np.zeros(n_e, dtype=np.int64)
    pivot, growth = np.empty(n_e), np.empty(n_e)
    status = np.zeros(n_e, dtype=np.int64)
    delays = np.zeros(n_e, dtype=np.int64)
    schur_onto_root(z_all, t.n_elim, t.n_bound, t.child_ptr, t.children, t.map_ptr, t.parent_pos, t.entry_ptr,
                    t.entry_row, t.entry_col, plan.entry_val, t.front_max, t.stack_max, plan.symmetric, PIVOT_DELAY,
                    cap, root, delayed, pivot, growth, status, delays)
    return root, delayed, pivot, growth, status, delays


# --------------------------------------------------------------------------
# Transmissions from the root
# --------------------------------------------------------------------------

@dataclass(frozen=True, eq=False)
class DissectionSolve:
    """Transmission matrices from the dissection at a set of energies.

    Attributes
    ----------
    matrix : (n_E, n_leads, n_leads) float ndarray
        ``matrix[k, p, q]``: transmission from lead q into lead p, ``R_pp`` on the diagonal; NaN where
        ``trusted`` is False.
    n_open : (n_E, n_leads) int ndarray
    at_threshold : (n_E,) bool ndarray
    trusted : (n_E,) bool ndarray
        False where the delays exceeded their cap, the growth exceeded :data:`GROWTH_MAX` or the root's
        pivot fell below :data:`ROOT_PIVOT_MIN`: the caller redoes those energies.
    pivot : (n_E,) float ndarray
        Smallest relative pivot of the eliminations that were accepted.
    delayed : (n_E,) int ndarray
        Delayed unknowns that reached the root (0 unless a large region is singular at that energy).
    delays : (n_E,) int ndarray
        Unknowns delayed over all fronts.
    growth : (n_E,) float ndarray
        Largest update-matrix entry over the largest entry of ``z - H`` (the elimination's growth factor).
    """

    matrix: np.ndarray
    n_open: np.ndarray
    at_threshold: np.ndarray
    trusted: np.ndarray
    pivot: np.ndarray
    growth: np.ndarray
    delayed: np.ndarray
    delays: np.ndarray


def dissection_solve(model: TightBindingModel, energies: np.ndarray, eta: float = 0.0, *,
                     plan: DissectionPlan | None = None, lead_terms: list | None = None) -> DissectionSolve:
    """All ``T_pq`` and ``R_pp`` by nested dissection (energies and eta in meV, checked by the caller).

    ``plan`` defaults to the model's own (:func:`dissection_plan`); ``lead_terms`` (one
    :func:`lead_self_energies` result per energy) to a fresh computation -- a disorder ensemble passes the
    ones it computed once.
    """
    energies = np.atleast_1d(np.asarray(energies, dtype=float))
    plan = dissection_plan(model) if plan is None else plan
    tree = plan.tree
    n_e, n_leads = len(energies), len(model.leads)
    m = tree.root_size + delay_max(tree)
    chunk = max(1, min(64, ROOT_CHUNK_BYTES // (16 * m * m)))
    matrix = np.full((n_e, n_leads, n_leads), np.nan)
    n_open = np.zeros((n_e, n_leads), dtype=np.int64)
    at_threshold = np.zeros(n_e, dtype=bool)
    pivot = np.zeros(n_e)
    growth = np.zeros(n_e)
    delayed = np.zeros(n_e, dtype=np.int64)
    delays = np.zeros(n_e, dtype=np.int64)
    ok = np.zeros(n_e, dtype=bool)
    h_max = float(np.abs(plan.entry_val).max(initial=0.0))
    for start in range(0, n_e, chunk):
        sel = range(start, min(start + chunk, n_e))
        terms = ([lead_self_energies(model, energies[i], warn=False) for i in sel] if lead_terms is None
                 else [lead_terms[i] for i in sel])
        z_all = [device_energy(energies[i], modes, eta) for i, (_, modes) in zip(sel, terms)]
        root, dly, piv, grow, status, n_dl = root_schur(plan, z_all)
        for j, i in enumerate(sel):
            sigmas, modes = terms[j]
            at_threshold[i] = any(m.at_threshold for m in modes)
            n_open[i] = [m.n_open for m in modes]
            delayed[i] = dly[j]
            delays[i] = n_dl[j]
            growth[i] = grow[j] / (h_max + abs(z_all[j]))
            pivot[i] = piv[j]
            if status[j] != 0:
                continue
            size = dly[j] + tree.root_size
            matrix[i], root_pivot = _lead_matrix(root[j, :size, :size], sigmas, n_open[i],
                                                 [dly[j] + slots for slots in tree.lead_slots])
            ok[i] = root_pivot >= ROOT_PIVOT_MIN
    trusted = ok & (growth <= GROWTH_MAX) & np.all(np.isfinite(matrix), axis=(1, 2))
    matrix[~trusted] = np.nan
    return DissectionSolve(matrix=matrix, n_open=n_open, at_threshold=at_threshold, trusted=trusted, pivot=pivot,
                           growth=growth, delayed=delayed, delays=delays)


def _lead_matrix(schur: np.ndarray, sigmas, n_open, lead_slots) -> tuple[np.ndarray, float]:
    """``T_pq`` and ``R_pp`` from the root's front: ``G = (S - Sigma)^-1`` on it, ``M = W^dag G W``.

    ``schur`` (the root front, delayed unknowns first) is overwritten; ``lead_slots`` are the leads' rows in
    it.  Returns the matrix and the smallest relative pivot of the LU.
    """
    a = schur
    n_leads = len(sigmas)
    w_all = []
    for sigma, slots in zip(sigmas, lead_slots):
        a[np.ix_(slots, slots)] -= sigma
        w = gamma_factor(broadening(sigma))
        full = np.zeros((len(a), w.shape[1]), dtype=complex)
        full[slots] = w
        w_all.append(full)
    edges = np.cumsum([0] + [w.shape[1] for w in w_all])
    w_all = np.hstack(w_all)
    lu, piv, info = lapack.zgetrf(a, overwrite_a=True)
    diag = np.abs(np.diag(lu))
    pivot = float(diag.min() / diag.max()) if info == 0 and diag.max() > 0 else 0.0
    if pivot == 0.0:
        return np.full((n_leads, n_leads), np.nan), pivot
    x, _ = lapack.zgetrs(lu, piv, w_all)
    m = w_all.conj().T @ x
    out = np.empty((n_leads, n_leads))
    for p in range(n_leads):
        rp = slice(edges[p], edges[p + 1])
        for q in range(n_leads):
            block = m[rp, edges[q]:edges[q + 1]]
            out[p, q] = np.sum(block.real**2 + block.imag**2)
        out[p, p] += n_open[p] + 2 * np.trace(m[rp, rp]).imag
    return out, pivot


# --------------------------------------------------------------------------
# The diagonal of G: selected inversion down the same tree
# --------------------------------------------------------------------------

@dataclass(frozen=True, eq=False)
class DissectionDiagonal:
    """The diagonal of the open device's Green's function ``G = (E + i eta - H - Sigma)^-1`` from the tree.

    Attributes
    ----------
    diagonal : (n_E, n_orbitals) complex ndarray, 1/meV
        ``G_ii``; NaN where ``trusted`` is False.
    trusted : (n_E,) bool ndarray
        As in :class:`DissectionSolve`; an untrusted energy names its cause in ``reason``.
    reason : tuple of str
        Per energy: "" when trusted, else one line ("delays over the cap", "growth 3e+11 above 1e+10", ...).
    pivot, growth, delayed, delays : (n_E,) ndarrays
        As in :class:`DissectionSolve`.
    at_threshold : (n_E,) bool ndarray
        A lead sat on a channel threshold: the energy was moved slightly above the real axis.
    work_bytes : int
        Largest work memory one energy used: elimination buffers, kept factors, downward stack (bytes).
    """

    diagonal: np.ndarray
    trusted: np.ndarray
    reason: tuple
    pivot: np.ndarray
    growth: np.ndarray
    delayed: np.ndarray
    delays: np.ndarray
    at_threshold: np.ndarray
    work_bytes: int


def dissection_diagonal(model: TightBindingModel, energies, eta: float = 0.0, *,
                        plan: DissectionPlan | None = None) -> DissectionDiagonal:
    """``G_ii`` of every orbital by nested dissection and selected inversion (energies and eta in meV,
    checked by the caller).

    The elimination of :func:`root_schur` keeps every front's factors; the root, with the leads'
    self-energies, is inverted; a downward pass gives G on every front from its parent's (the FIND scheme of
    Li, Ahmed, Klimeck & Darve, J. Comput. Phys. 227, 9408 (2008), i.e. the Takahashi / Erisman-Tinney
    recurrences on the elimination tree; from memory; see :func:`rgftrans.transport._frontal.select_diagonal`).
    Delayed unknowns are followed to the front that eliminates them.  Operations: the elimination's
    (:attr:`DissectionTree.flops`) plus :meth:`DissectionTree.selection_flops`, about 1.3x (complex
    symmetric fronts, real H) to 2x (a field or spin-orbit) more; measured 1.9-2.2x the transmission's time
    on squares of 64^2-512^2 sites.  Work memory: the factors kept, :meth:`DissectionTree.factor_entries`
    complex entries (16 bytes x ``sum k^2 + k b`` over the fronts, ``+ k b`` more for complex H: ``O(N log N)``
    on a square device; 54 MiB at 256^2, 250 MiB at 512^2 for real H, about 1 kB per site), the downward stack
    (:meth:`DissectionTree.down_entries`: 9 and 38 MiB), besides the elimination's;
    :meth:`DissectionTree.diagonal_bytes` states the whole with room for delays (195 and 825 MiB; the call's
    peak resident memory grew by 83 and 345 MiB).  The stores grow and the energy is redone if delays
    outgrow them.
    """
    from rgftrans.transport._frontal import OK, FACTORS_FULL, DOWN_STACK_FULL, ROOT_SINGULAR, select_diagonal, \
        TOO_MANY_DELAYS, STACK_FULL

    energies = np.atleast_1d(np.asarray(energies, dtype=float))
    if not model.leads:
        from rgftrans.errors import LeadError

        raise LeadError("the diagonal of G by nested dissection needs at least one lead (the tree's root is the "
                        "lead interfaces); use solver='rgf' for a closed system")
    plan = dissection_plan(model) if plan is None else plan
    t = plan.tree
    sym = plan.symmetric
    n_e, n = len(energies), t.n_orbitals
    cap = delay_max(t)
    factors = np.empty(t.factor_entries(sym) * 5 // 4 + 16 * cap * cap, dtype=complex)
    down = np.empty(t.down_entries() * 5 // 4 + 4 * cap * cap + 16, dtype=complex)
    diag = np.full((n_e, n), complex(np.nan, np.nan))
    trusted = np.zeros(n_e, dtype=bool)
    reason = [""] * n_e
    pivot, growth = np.zeros(n_e), np.zeros(n_e)
    delayed = np.zeros(n_e, dtype=np.int64)
    delays = np.zeros(n_e, dtype=np.int64)
    at_threshold = np.zeros(n_e, dtype=bool)
    h_max = float(np.abs(plan.entry_val).max(initial=0.0))
    slots = t.lead_slots
    out = np.empty(n, dtype=complex)
    for i, energy in enumerate(energies):
        sigmas, modes = lead_self_energies(model, energy)
        at_threshold[i] = any(m.at_threshold for m in modes)
        z = device_energy(energy, modes, eta)
        sigma_root = np.zeros((t.root_size, t.root_size), dtype=complex)
        for sigma, slot in zip(sigmas, slots):
            sigma_root[np.ix_(slot, slot)] += sigma
        while True:
            status, piv, grow, n_dl, dly, root_pivot, need_f, need_d = select_diagonal(
                z, sigma_root, t.n_elim, t.n_bound, t.child_ptr, t.children, t.map_ptr, t.parent_pos, t.entry_ptr,
                t.entry_row, t.entry_col, plan.entry_val, t.elim_orbitals, t.root_orbitals.astype(np.int64),
                t.front_max, t.stack_max, sym, PIVOT_DELAY_DIAGONAL, NULL_RESIDUAL_DIAGONAL, cap, factors, down, out)
            if status == FACTORS_FULL:
                factors = np.empty(need_f + need_f // 4, dtype=complex)
            elif status == DOWN_STACK_FULL:
                down = np.empty(need_d + need_d // 4, dtype=complex)
            else:
                break
        pivot[i], delays[i], delayed[i] = piv, n_dl, dly
        growth[i] = grow / (h_max + abs(z))
        if status == TOO_MANY_DELAYS:
            reason[i] = f"more than {cap} delayed unknowns in one front (a large region singular at this energy)"
        elif status == STACK_FULL:
            reason[i] = "delayed unknowns overflowed the update stack"
        elif status == ROOT_SINGULAR:
            reason[i] = "the root (lead interfaces with their self-energies) is exactly singular"
        elif growth[i] > GROWTH_MAX:
            reason[i] = f"elimination growth {growth[i]:.1e} above {GROWTH_MAX:.0e}"
        elif root_pivot < ROOT_PIVOT_MIN:
            reason[i] = f"root pivot {root_pivot:.1e} below {ROOT_PIVOT_MIN:.0e}"
        elif not np.all(np.isfinite(out)):
            reason[i] = "non-finite entries in G"
        else:
            assert status == OK
            trusted[i] = True
            diag[i] = out
    work = t.work_bytes + 16 * (len(factors) + len(down)) + 4 * n + 8 * (3 * n + int(np.sum(t.n_bound)))
    return DissectionDiagonal(diagonal=diag, trusted=trusted, reason=tuple(reason), pivot=pivot, growth=growth,
                              delayed=delayed, delays=delays, at_threshold=at_threshold, work_bytes=int(work))
