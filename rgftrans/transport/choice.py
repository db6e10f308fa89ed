"""Which solver runs a transport call: RGF or nested dissection, from their predicted cost per energy.

RGF (:mod:`rgftrans.transport.rgf`) costs one dense inversion per layer, about
``sum_i m_i^3`` for layers of ``m_i`` orbitals; nested dissection
(:mod:`rgftrans.transport.dissection`) costs its fronts' partial factorisations,
about ``sum (k^3/3 + k^2 b + k b^2)`` over fronts eliminating ``k`` of ``k + b``
unknowns, plus the root's LU.  Long narrow strips favour RGF (its layers are
small and it carries no boundary), square devices favour the tree (``N^1.5``
against RGF's ``N^2``).  Each route's time per energy is predicted from its own
structure with constants measured on this project's machine (AMD EPYC, 2 cores,
OpenBLAS, one BLAS thread; ``scripts/bench.py --calibrate`` refits them and
DEVELOPERS.md records the fit):

* RGF: ``RGF_SECONDS = (a, b, c)`` per layer, ``a m^3 + b m^2 + c``, plus ``RGF_PER_ENERGY``
  (lead terms);
* the tree: ``DISSECTION_SECONDS = (a, b, c)``: ``a`` per complex multiply-add of the fronts,
  ``b`` per front entry assembled (zeroing, extend-add, copies), ``c`` per front (calls), plus
  ``DISSECTION_ROOT`` per ``k^3/3`` of the root's k unknowns and ``DISSECTION_PER_ENERGY``.

The LDOS (the diagonal of G, :func:`rgftrans.transport.local.ldos`) has its own choice,
:func:`choose_ldos_solver`: RGF's diagonal costs a fixed multiple of its
transmission (forward, backward and diagonal-block inversions per layer,
``LDOS_RGF_FACTOR``; ``LDOS_RGF_FACTOR_MANY`` for more than two leads, where
full sweeps with lead columns run per energy), the tree's adds the downward
pass of selected inversion (``LDOS_TREE_SECONDS``: per multiply-add of
:meth:`DissectionTree.selection_flops` and per front).

The prediction only has to rank the two near their crossover; away from it one
route wins by far.  Devices whose RGF is predicted below ``RGF_ALWAYS_BELOW``
seconds per energy run RGF without building the tree at all: there nothing
worth the planning can be gained.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from rgftrans.errors import RgftransError
from rgftrans.system.budget import MEMORY_SHARE, available_memory_bytes
from rgftrans.system.device import TightBindingModel
from rgftrans.transport.slicing import Slicing, default_slicing

__all__ = ["SOLVERS", "SolverChoice", "choose_solver", "rgf_seconds", "rgf_bytes", "dissection_seconds",
           "choose_ldos_solver", "ldos_rgf_seconds", "ldos_dissection_seconds"]

#: Solver names a transport call accepts.
SOLVERS = ("auto", "rgf", "dissection")

#: RGF seconds per layer of m orbitals: a m^3 + b m^2 + c.  Fitted by ``scripts/bench.py --calibrate``
#: (non-negative least squares on the relative error) to forced RGF on strips W x 400 (W = 4..128) and
#: squares n x n (n = 24..256), one BLAS thread, 2026-12-04: worst prediction off by a factor 1.4.
RGF_SECONDS = (2.3e-10, 1.9e-8, 4.9e-7)
#: RGF seconds per energy besides the layers (lead self-energies and broadening, kernel call).
RGF_PER_ENERGY = 2.7e-4
#: Tree seconds: per complex multiply-add of the fronts, per front entry assembled, per front; same fit on
#: the same devices, worst prediction off by a factor 1.25.
DISSECTION_SECONDS = (9.0e-11, 4.0e-9, 2.2e-6)
#: Tree seconds per ``k^3/3`` of the root's k unknowns (its LU, and the leads' self-energies and broadenings,
#: which grow with the interfaces alike), and per energy besides (lead look-ups, the kernel call).
DISSECTION_ROOT = 1.6e-9
DISSECTION_PER_ENERGY = 3.5e-4
#: Below this predicted RGF time per energy (s) RGF runs without the tree being built or costed.
RGF_ALWAYS_BELOW = 1.0e-3


@dataclass(frozen=True)
class SolverChoice:
    """The solver a transport call uses, and why.

    Attributes
    ----------
    solver : {"rgf", "dissection"}
    rgf_seconds, dissection_seconds : float
        Predicted time per energy of each route (s); NaN where it was not costed.
    rgf_bytes, dissection_bytes : float
        Work memory each route needs (bytes; RGF's layer blocks, the tree's fronts, stack and index
        arrays); NaN where not costed.
    reason : str
        One line: "asked for", "explicit slicing", "cheaper (predicted ...)", ...
    """

    solver: str
    rgf_seconds: float
    dissection_seconds: float
    rgf_bytes: float
    dissection_bytes: float
    reason: str


def rgf_seconds(sizes) -> float:
    """Predicted RGF time per energy (s) for layers of ``sizes`` orbitals (see :data:`RGF_SECONDS`)."""
    m = np.asarray(sizes, dtype=float)
    a, b, c = RGF_SECONDS
    return float(np.sum(a * m**3 + b * m**2 + c) + RGF_PER_ENERGY)


def rgf_bytes(sizes, n_leads: int = 2) -> float:
    """Memory of RGF's layer blocks (bytes): the diagonal blocks and couplings, three times that for the
    full Green's-function sweeps of more than two leads (left-connected and diagonal blocks kept)."""
    m = np.asarray(sizes, dtype=float)
    blocks = 16.0 * (np.sum(m**2) + np.sum(m[:-1] * m[1:]))
    return blocks * (1 if n_leads == 2 else 3)


def dissection_seconds(tree) -> float:
    """Predicted tree time per energy (s) from a :class:`~rgftrans.transport.dissection.DissectionTree`."""
    a, b, c = DISSECTION_SECONDS
    k = float(tree.root_size)
    return float(a * tree.flops + b * tree.assembly + c * tree.n_nodes + DISSECTION_ROOT * k**3 / 3
                 + DISSECTION_PER_ENERGY)


def choose_solver(model: TightBindingModel, *, solver: str = "auto", slicing: Slicing | None = None) -> SolverChoice:
    """Pick RGF or nested dissection for ``model`` by predicted time per energy.

    Parameters
    ----------
    model : TightBindingModel
    solver : {"auto", "rgf", "dissection"}
        "auto" compares the predictions; the others force a route (and still report the predictions
        that were cheap to make).
    slicing : Slicing, optional
        The layers RGF would use (default: the model's own slicing).

    Returns
    -------
    SolverChoice
        RGF is taken when it is predicted faster, or when it is predicted below
        :data:`RGF_ALWAYS_BELOW` (the tree is then not built); the tree when it is faster or RGF's
        layer blocks would not fit in memory.
    """
    if solver not in SOLVERS:
        raise RgftransError(f"solver={solver!r} is not one of {', '.join(map(repr, SOLVERS))}; use 'auto' to let "
                            "the package choose from the predicted cost")
    from rgftrans.transport.dissection import dissection_tree

    layers = slicing if slicing is not None else default_slicing(model)
    sizes = [len(layer) for layer in layers.layers]
    t_rgf, m_rgf = rgf_seconds(sizes), rgf_bytes(sizes, len(model.leads))
    nan = float("nan")
    if solver == "rgf":
        return SolverChoice("rgf", t_rgf, nan, m_rgf, nan, "asked for")
    if solver == "auto" and t_rgf < RGF_ALWAYS_BELOW:
        return SolverChoice("rgf", t_rgf, nan, m_rgf, nan,
                            f"RGF predicted at {t_rgf * 1e3:.2g} ms per energy: too small to plan a tree for")
    tree = dissection_tree(model)
    t_tree, m_tree = dissection_seconds(tree), float(tree.work_bytes + tree.nbytes)
    return _cheaper(solver, t_rgf, t_tree, m_rgf, m_tree)


#: RGF's LDOS time per energy over its predicted transmission time (:func:`rgf_seconds`), two leads at the two
#: ends of the slicing (the compiled diagonal kernel).  Fitted by ``scripts/bench.py --calibrate-ldos`` on
#: 2026-12-04 (strips W x 400, W = 4..64, squares n = 24..192, one BLAS thread): median 2.6, range 1.7-3.0;
#: applied to the layer part only (the lead terms are paid once either way).
LDOS_RGF_FACTOR = 2.6
#: The same for any other lead layout (one lead, three or more, or two in one layer: full sweeps with lead
#: columns, one energy at a time): measured 2.5 (24^2, three leads) to 11.5 (48^2) times the two-lead square's
#: transmission, 2026-12-04.
LDOS_RGF_FACTOR_MANY = 6.0
#: Tree LDOS seconds beyond its elimination (:func:`dissection_seconds`): per complex multiply-add of the
#: downward pass (:meth:`DissectionTree.selection_flops`) and per front (the pivot block's inverse call, the
#: cut of each child's block, the kept factors' copies).  Same fit, worst prediction off by a factor 1.23.
LDOS_TREE_SECONDS = (4.0e-10, 2.7e-6)


def ldos_rgf_seconds(sizes, n_leads: int = 2, *, two_ended: bool = True) -> float:
    """Predicted RGF LDOS time per energy (s): the layer part of :func:`rgf_seconds` times ``LDOS_RGF_FACTOR``
    (two leads at the two ends of the slicing) or ``LDOS_RGF_FACTOR_MANY``, and the lead terms once."""
    factor = LDOS_RGF_FACTOR if (n_leads == 2 and two_ended) else LDOS_RGF_FACTOR_MANY
    return factor * (rgf_seconds(sizes) - RGF_PER_ENERGY) + RGF_PER_ENERGY


def ldos_dissection_seconds(tree, symmetric: bool) -> float:
    """Predicted tree LDOS time per energy (s): the elimination (:func:`dissection_seconds`) and the downward
    pass (:data:`LDOS_TREE_SECONDS` per multiply-add of :meth:`DissectionTree.selection_flops` and per front)."""
    a, c = LDOS_TREE_SECONDS
    return float(dissection_seconds(tree) + a * tree.selection_flops(symmetric) + c * tree.n_nodes)


def choose_ldos_solver(model: TightBindingModel, *, solver: str = "auto") -> SolverChoice:
    """Pick RGF or the tree's selected inversion for the LDOS of ``model``, by predicted time per energy.

    Parameters
    ----------
    model : TightBindingModel
    solver : {"auto", "rgf", "dissection"}
        "auto" compares the predictions (:func:`ldos_rgf_seconds`, :func:`ldos_dissection_seconds`); the others
        force a route.

    Returns
    -------
    SolverChoice
        Predicted seconds and work bytes of both routes for the LDOS (RGF: its layer blocks and the kept
        sweeps, :func:`rgf_bytes` with the full-sweep factor; the tree: the elimination, the kept factors and
        the downward stack, :meth:`DissectionTree.diagonal_bytes`, and its index arrays).  RGF is taken when it
        is predicted faster, below :data:`RGF_ALWAYS_BELOW`, or when the model has no lead (the tree's root is
        the lead interfaces); the tree when it is faster or RGF would not fit in memory.
    """
    if solver not in SOLVERS:
        raise RgftransError(f"solver={solver!r} is not one of {', '.join(map(repr, SOLVERS))}; use 'auto' to let "
                            "the package choose from the predicted cost")
    from rgftrans.errors import LeadError
    from rgftrans.transport.dissection import SYMMETRIC_FRONTS, dissection_tree

    layers = default_slicing(model)
    sizes = [len(layer) for layer in layers.layers]
    lead_layer = layers.lead_layer
    two_ended = len(model.leads) == 2 and lead_layer[0] != lead_layer[1]
    t_rgf = ldos_rgf_seconds(sizes, len(model.leads), two_ended=two_ended)
    m_rgf = rgf_bytes(sizes, 3)
    nan = float("nan")
    if solver == "rgf":
        return SolverChoice("rgf", t_rgf, nan, m_rgf, nan, "asked for")
    if not model.leads:
        if solver == "dissection":
            raise LeadError("solver='dissection' needs at least one lead (the tree's root is the lead interfaces); "
                            "use solver='rgf' or 'auto' for a closed system")
        return SolverChoice("rgf", t_rgf, nan, m_rgf, nan, "no lead: the tree needs lead interfaces at its root")
    if solver == "auto" and t_rgf < RGF_ALWAYS_BELOW:
        return SolverChoice("rgf", t_rgf, nan, m_rgf, nan,
                            f"RGF predicted at {t_rgf * 1e3:.2g} ms per energy: too small to plan a tree for")
    tree = dissection_tree(model)
    symmetric = bool(SYMMETRIC_FRONTS and not np.any(model.hamiltonian.data.imag))
    t_tree = ldos_dissection_seconds(tree, symmetric)
    m_tree = float(tree.diagonal_bytes(symmetric) + tree.nbytes)
    return _cheaper(solver, t_rgf, t_tree, m_rgf, m_tree)


def _cheaper(solver: str, t_rgf: float, t_tree: float, m_rgf: float, m_tree: float) -> SolverChoice:
    """The route asked for, else the one predicted faster; the tree whenever RGF's blocks would not fit."""
    if solver == "dissection":
        return SolverChoice("dissection", t_rgf, t_tree, m_rgf, m_tree, "asked for")
    fits = m_rgf < MEMORY_SHARE * available_memory_bytes()
    if t_tree < t_rgf or not fits:
        why = (f"predicted {t_tree:.3g} s per energy against RGF's {t_rgf:.3g} s" if fits else
               f"RGF's layer blocks ({m_rgf / 1e9:.3g} GB) would not fit in memory")
        return SolverChoice("dissection", t_rgf, t_tree, m_rgf, m_tree, why)
    return SolverChoice("rgf", t_rgf, t_tree, m_rgf, m_tree,
                        f"predicted {t_rgf:.3g} s per energy against the tree's {t_tree:.3g} s")
