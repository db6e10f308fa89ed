"""Block-tridiagonal partition of a device's sites into layers.

Recursive Green's functions need the sites grouped into layers ``0 .. K`` that
couple only to their neighbours, with the first lead's interface in layer 0
and the last lead's interface in layer ``K``.

Two terminals (our own construction, in the spirit of Wimmer & Richter,
J. Comput. Phys. 228, 8548 (2009), from memory): let ``d_first(s)`` and
``d_last(s)`` be the graph distances of site ``s`` from the two interfaces.
The level ``h(s) = floor((d_first(s) - d_last(s)) / 2)`` changes by at most
one across any bond (each distance changes by at most one), and so does its
clip to ``[max h(first interface), min h(last interface)]``.  The clipped
level is therefore a valid layer index with each interface in one end layer.
For a straight strip it gives the columns.  If the two interfaces cannot be
separated (they share or neighbour sites) everything is one layer.

The same clip works for any level function that changes by at most one
across a bond.  When site positions are known, projections
``floor(r . u / bond_length)`` onto a fan of directions ``u`` are such
functions too (no bond is longer than ``bond_length``); every candidate is
scored by the RGF cost ``sum_i m_i^3`` of its layers and the cheapest wins.
On a rectangle with leads on opposite sides that is the plain column
slicing even when the leads sit at different heights, where the graph
distances alone would give wider, diagonal layers.

Any number of terminals: all interfaces form layer 0 and the layers are the
breadth-first shells around them.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp

__all__ = ["Slicing", "slice_layers", "default_slicing"]


@dataclass(frozen=True, eq=False)
class Slicing:
    """A partition of the sites into block-tridiagonal layers.

    Attributes
    ----------
    layers : tuple of (m_i,) int ndarray
        Site indices of each layer, in order.
    lead_layer : tuple of int
        Layer index of each lead's interface (same order as the model's leads).
    """

    layers: tuple
    lead_layer: tuple

    @property
    def n_layers(self) -> int:
        return len(self.layers)

    @property
    def max_width(self) -> int:
        """Largest number of sites in one layer."""
        return max(len(layer) for layer in self.layers)

    def layer_of_sites(self, n_sites: int) -> np.ndarray:
        """(n_sites,) int array: the layer each site belongs to."""
        out = np.empty(n_sites, dtype=np.int64)
        for k, layer in enumerate(self.layers):
            out[layer] = k
        return out


def _bfs_distance(adj: sp.csr_matrix, sources: np.ndarray) -> np.ndarray:
    """Graph distance of every site from a set of source sites (-1 if unreachable)."""
    dist = np.full(adj.shape[0], -1, dtype=np.int64)
    frontier = np.unique(sources)
    dist[frontier] = 0
    level = 0
    indptr, indices = adj.indptr, adj.indices
    while frontier.size:
        level += 1
        starts, stops = indptr[frontier], indptr[frontier + 1]
        nbrs = np.concatenate([indices[a:b] for a, b in zip(starts, stops)]) if frontier.size else np.zeros(0, int)
        nbrs = np.unique(nbrs)
        nbrs = nbrs[dist[nbrs] < 0]
        dist[nbrs] = level
        frontier = nbrs
    return dist


def _adjacency(hamiltonian: sp.spmatrix) -> sp.csr_matrix:
    adj = sp.csr_matrix(hamiltonian, copy=True)
    adj.setdiag(0)
    adj.eliminate_zeros()
    adj = (abs(adj) + abs(adj).T).tocsr()
    adj.sort_indices()
    return adj


#: Directions tried for projection slicings (degrees, half circle each way).
_FAN_DEGREES = np.arange(0.0, 360.0, 7.5)


def _clipped(level: np.ndarray, first: np.ndarray, last: np.ndarray):
    """Clip a 1-Lipschitz level so each interface sits in an end layer; None if impossible."""
    lo = level[first].max()
    hi = level[last].min()
    if hi <= lo:
        return None
    return np.clip(level, lo, hi) - lo


def _lipschitz_below(adj: sp.csr_matrix, target: np.ndarray) -> np.ndarray:
    """Largest function below ``target`` that changes by at most one across a bond.

    ``F(s) = min_t [target(t) + d(s, t)]``: a shortest-path problem from a
    virtual source joined to every site ``t`` by an edge of length
    ``target(t)`` (shifted to be positive), solved by scipy's Dijkstra.
    """
    from scipy.sparse.csgraph import dijkstra

    n = adj.shape[0]
    shift = 1.0 - target.min()
    graph = sp.bmat([[adj.astype(bool).astype(float), sp.csr_matrix((n, 1))],
                     [sp.csr_matrix((target + shift)[None, :]), sp.csr_matrix((1, 1))]], format="csr")
    return dijkstra(graph, directed=True, indices=n)[:n] - shift


def _cost(level: np.ndarray) -> float:
    sizes = np.bincount(level).astype(float)
    return float(np.sum(sizes**3))


def slice_layers(hamiltonian: sp.spmatrix, interfaces: list[np.ndarray], *,
                 positions: np.ndarray | None = None) -> Slicing:
    """Partition sites into layers for RGF.

    Parameters
    ----------
    hamiltonian : (n, n) sparse matrix
        Only its sparsity pattern (off-diagonal) is used.
    interfaces : list of (k_p,) int ndarray
        Interface sites of each lead.  With two leads the first lands in layer
        0 and the second in the last layer; with one or more than two, all
        interfaces land in layer 0.
    positions : (n, 2) float ndarray, optional
        Site positions; with two leads, projection slicings are tried too and
        the cheapest valid one is used.

    Returns
    -------
    Slicing
    """
    adj = _adjacency(hamiltonian)
    n = adj.shape[0]
    if len(interfaces) == 2:
        first, last = (np.asarray(i, dtype=np.int64) for i in interfaces)
        d_first = _bfs_distance(adj, first)
        d_last = _bfs_distance(adj, last)
        candidates = [_clipped(np.floor_divide(d_first - d_last, 2), first, last)]
        # Equipotential-like levels: K d_first / (d_first + d_last), made 1-Lipschitz.
        k_max = d_first[last].min()
        if k_max > 1:
            ratio = k_max * d_first / np.maximum(d_first + d_last, 1)
            candidates.append(_clipped(np.floor(_lipschitz_below(adj, ratio)).astype(np.int64), first, last))
        if positions is not None:
            coo = adj.tocoo()
            bond = np.linalg.norm(positions[coo.row] - positions[coo.col], axis=1).max() if coo.nnz else 1.0
            for deg in _FAN_DEGREES:
                u = np.array([np.cos(np.radians(deg)), np.sin(np.radians(deg))])
                # A hair above the longest bond so that round-off never lets a bond skip a layer.
                proj = np.floor(positions @ u / (bond * (1 + 1e-9))).astype(np.int64)
                candidates.append(_clipped(proj, first, last))
        candidates = [c for c in candidates if c is not None]
        if not candidates:
            level = np.zeros(n, dtype=np.int64)
            lead_layer = (0, 0)
        else:
            level = min(candidates, key=_cost)
            lead_layer = (0, int(level.max()))
    else:
        # A closed system (no leads) is sliced from its first site.
        sources = (np.concatenate([np.asarray(i, dtype=np.int64) for i in interfaces]) if interfaces
                   else np.zeros(1, dtype=np.int64))
        level = _bfs_distance(adj, sources)
        lead_layer = tuple(0 for _ in interfaces)
    order = np.argsort(level, kind="stable")
    bounds = np.searchsorted(level[order], np.arange(level.max() + 2))
    layers = tuple(order[bounds[k]:bounds[k + 1]] for k in range(len(bounds) - 1))
    return Slicing(layers=layers, lead_layer=lead_layer)


def default_slicing(model) -> Slicing:
    """The model's own slicing (from its leads and site positions), computed once and kept in
    ``model.cache.slicing``: RGF's layers, and what the solver choice costs RGF by."""
    if model.cache.slicing is None:
        model.cache.slicing = slice_layers(model.hamiltonian, [lead.interface for lead in model.leads],
                                           positions=model.orbital_positions())
    return model.cache.slicing
