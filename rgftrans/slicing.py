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

Any number of terminals: all interfaces form layer 0 and the layers are the
breadth-first shells around them.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp

__all__ = ["Slicing", "slice_layers"]


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


def slice_layers(hamiltonian: sp.spmatrix, interfaces: list[np.ndarray]) -> Slicing:
    """Partition sites into layers for RGF.

    Parameters
    ----------
    hamiltonian : (n, n) sparse matrix
        Only its sparsity pattern (off-diagonal) is used.
    interfaces : list of (k_p,) int ndarray
        Interface sites of each lead.  With two leads the first lands in layer
        0 and the second in the last layer; with one or more than two, all
        interfaces land in layer 0.

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
        level = np.floor_divide(d_first - d_last, 2)
        lo = level[first].max()
        hi = level[last].min()
        if hi <= lo:
            level = np.zeros(n, dtype=np.int64)
            lead_layer = (0, 0)
        else:
            level = np.clip(level, lo, hi) - lo
            lead_layer = (0, int(hi - lo))
    else:
        sources = np.concatenate([np.asarray(i, dtype=np.int64) for i in interfaces])
        level = _bfs_distance(adj, sources)
        lead_layer = tuple(0 for _ in interfaces)
    order = np.argsort(level, kind="stable")
    bounds = np.searchsorted(level[order], np.arange(level.max() + 2))
    layers = tuple(order[bounds[k]:bounds[k + 1]] for k in range(len(bounds) - 1))
    return Slicing(layers=layers, lead_layer=lead_layer)
