"""Is the energy grid fine enough?  Warnings about unresolved resonances, and adaptive refinement.

A resonance of full width Γ sampled at spacing h > Γ / 3 is aliased: its
height, position and line shape come out wrong, and a thermal average at
k_B T < Γ inherits the error.  Three tools:

* :func:`warn_unresolved_resonances` warns where the grid has fewer than
  :data:`MIN_POINTS_PER_WIDTH` points across a resonance pole of the window
  (the poles from :func:`rgftrans.spectra.poles.window_poles`; run before a sweep);
* :func:`sharp_features` finds, in computed data, samples where T(E) jumps by
  more than :data:`SPIKE_JUMP` to both neighbours: a line the grid does not
  resolve (run on every sweep point);
* :func:`refine` samples a function of energy adaptively: it bisects every
  interval whose midpoint differs from the linear interpolation of its ends
  by more than a tolerance, until none does.  Its result, integrated as a
  piecewise-linear function (as :mod:`rgftrans.analysis.thermal` does), is then
  accurate to about that tolerance between the samples it saw.

A line narrower than the initial spacing that hides between two samples and
their midpoint is invisible to :func:`refine`; the pole-based warning is what
catches it.  Energies in meV.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np

from rgftrans.errors import ResolutionWarning, RgftransError

__all__ = ["MIN_POINTS_PER_WIDTH", "SPIKE_JUMP", "RefinedSampling", "refine", "refined_transmission",
           "sharp_features", "warn_energies_outside_leads", "warn_sharp_features", "warn_unresolved_resonances"]

#: Fewest grid points across a resonance's full width (FWHM) before it counts as resolved.
MIN_POINTS_PER_WIDTH = 3
#: A sample that differs from both neighbours by more than this (in units of T) is an unresolved line: a
#: Lorentzian of unit height sampled at its peak and at +-h drops by 1 - 1/(1 + 4h²/Γ²), which is 0.31 at
#: h = Γ/3, i.e. exactly at MIN_POINTS_PER_WIDTH points per width.
SPIKE_JUMP = 0.3
#: Refinement stops bisecting intervals narrower than this fraction of the window.
_MIN_INTERVAL = 1e-9


def _local_spacing(energies: np.ndarray, e: float) -> float:
    """Grid spacing of the interval holding energy e (meV)."""
    k = int(np.clip(np.searchsorted(energies, e) - 1, 0, energies.size - 2))
    return float(energies[k + 1] - energies[k])


def warn_unresolved_resonances(model, energies, *, poles=None) -> list:
    """Warn (ResolutionWarning) about resonance poles in the grid's window narrower than 3 grid steps.

    ``poles`` is :func:`rgftrans.spectra.poles.window_poles` of the grid's window (computed if not
    given).  Returns the offending poles as ``(energy_meV, width_meV,
    spacing_meV)``, narrowest first.  Grids of fewer than two energies are not
    checked.
    """
    e = np.asarray(energies, dtype=float)
    if e.size < 2 or not model.leads:
        return []
    if poles is None:
        from rgftrans.spectra.poles import window_poles

        poles = window_poles(model, (e[0], e[-1]))
    bad = sorted(((float(en), float(w), _local_spacing(e, en)) for en, w in poles
                  if _local_spacing(e, en) > w / MIN_POINTS_PER_WIDTH), key=lambda x: x[1])
    if bad:
        en, w, h = bad[0]
        warnings.warn(
            f"{len(bad)} resonance(s) in the energy window are narrower than {MIN_POINTS_PER_WIDTH} grid steps, the "
            f"narrowest at E = {en:.6g} meV with width {w:.3g} meV where the spacing is {h:.3g} meV: T(E) will alias "
            f"it -- refine the grid there to <= {w / MIN_POINTS_PER_WIDTH:.3g} meV or set [energy] refine_tolerance",
            ResolutionWarning, stacklevel=2)
    return bad


def warn_energies_outside_leads(model, energies) -> int:
    """Warn in words when grid energies lie below or above every band of a lead (T = 0 there); return how many.

    Below a lead's band bottom no channel is open and nothing is transmitted
    from or into it; above the lattice band's top the same holds, and a
    continuum (effective-mass) model is already far outside its validity
    there.  Either is a grid that wastes its points, usually a sign of an
    energy unit or offset slip.
    """
    from rgftrans.leads.modes import band_edges

    energies = np.asarray(energies, dtype=float)
    dead = np.zeros(energies.shape, dtype=bool)
    for lead in model.leads:
        lo, hi = band_edges(lead.h_cell, lead.h_hop)
        below, above = energies < lo, energies > hi
        if np.any(below) or np.any(above):
            parts = []
            if np.any(below):
                parts.append(f"{np.count_nonzero(below)} below its band bottom {lo:.4g} meV")
            if np.any(above):
                parts.append(f"{np.count_nonzero(above)} above its band top {hi:.4g} meV")
            warnings.warn(
                f"lead '{lead.name}': {' and '.join(parts)} of the {energies.size} energies "
                f"({energies[0]:.4g}..{energies[-1]:.4g} meV); no channel is open there and T = 0"
                + (" -- no energy is in the band: are the energies in meV, measured from the band bottom?"
                   if np.all(below | above) else ""),
                ResolutionWarning, stacklevel=2)
        dead |= below | above
    return int(np.count_nonzero(dead))


def sharp_features(energies, values, *, jump: float = SPIKE_JUMP) -> np.ndarray:
    """Indices of samples that differ from both neighbours, in the same direction, by more than ``jump``.

    ``values`` is (n_E,) or (n_E, ...) (any trailing entry counts).
    """
    v = np.asarray(values, dtype=float).reshape(len(energies), -1)
    if v.shape[0] < 3:
        return np.zeros(0, dtype=int)
    left, right = v[1:-1] - v[:-2], v[1:-1] - v[2:]
    spike = (np.sign(left) == np.sign(right)) & (np.minimum(np.abs(left), np.abs(right)) > jump)
    return np.flatnonzero(np.any(spike, axis=1)) + 1


def warn_sharp_features(energies, values, *, where: str = "") -> None:
    """ResolutionWarning naming the first unresolved line found by :func:`sharp_features`."""
    e = np.asarray(energies, dtype=float)
    hits = sharp_features(e, values)
    if hits.size:
        k = int(hits[0])
        warnings.warn(
            f"{where}T(E) jumps to a sample and back by more than {SPIKE_JUMP:g} at {hits.size} energ(ies), first "
            f"at E = {e[k]:.6g} meV (spacing {min(e[k] - e[k - 1], e[k + 1] - e[k]):.3g} meV): a resonance narrower "
            "than the grid is not resolved -- refine the energy grid there or set [energy] refine_tolerance",
            ResolutionWarning, stacklevel=2)


@dataclass(frozen=True, eq=False)
class RefinedSampling:
    """An adaptively refined sampling of a function of energy.

    Attributes
    ----------
    energies : (n,) float ndarray, meV
        The initial grid with every inserted midpoint, sorted.
    values : (n, ...) ndarray
    converged : bool
        Every interval's midpoint agreed with the linear interpolation of its
        ends to within the tolerance.
    max_error : float
        Largest midpoint deviation among the intervals last tested.
    """

    energies: np.ndarray
    values: np.ndarray
    converged: bool
    max_error: float


def refine(evaluate, energies, *, tolerance: float, max_points: int, values=None) -> RefinedSampling:
    """Bisect intervals until a midpoint agrees with the linear interpolation of its ends to ``tolerance``.

    Parameters
    ----------
    evaluate : callable
        ``evaluate(energies) -> (len(energies), ...)`` array (e.g. transmissions).
    energies : (n_E,) float array, meV
        Initial grid, strictly increasing.
    tolerance : float
        Absolute tolerance on the values (e.g. 1e-3 in units of T).
    max_points : int
        Stop when the sampling would exceed this many energies (``converged`` is then False).
    values : optional
        ``evaluate(energies)`` if already known.

    Examples
    --------
    A Lorentzian of width 0.01 on a grid of spacing 0.25 is refined until the
    linear interpolant is good to 1e-3:

    >>> lorentz = lambda e: 1 / (1 + (2 * np.asarray(e) / 0.01) ** 2)
    >>> s = refine(lorentz, np.linspace(-1, 1, 9), tolerance=1e-3, max_points=5000)
    >>> bool(s.converged), bool(np.interp(0.003, s.energies, s.values) - lorentz(0.003) < 2e-3)
    (True, True)
    """
    e = np.asarray(energies, dtype=float)
    if e.ndim != 1 or e.size < 2 or np.any(np.diff(e) <= 0):
        raise RgftransError("refinement needs at least two strictly increasing energies")
    if not (np.isfinite(tolerance) and tolerance > 0):
        raise RgftransError(f"refine tolerance must be positive, got {tolerance!r}")
    v = np.asarray(evaluate(e) if values is None else values, dtype=float)
    min_width = _MIN_INTERVAL * (e[-1] - e[0])
    todo = np.arange(e.size - 1)  # indices of intervals [e[k], e[k+1]] to test
    max_error = 0.0
    while todo.size:
        if e.size + todo.size > max_points:
            return RefinedSampling(e, v, False, max_error)
        mid = 0.5 * (e[todo] + e[todo + 1])
        v_mid = np.asarray(evaluate(mid), dtype=float)
        linear = 0.5 * (v[todo] + v[todo + 1])
        err = np.abs(v_mid - linear).reshape(todo.size, -1).max(axis=1)
        max_error = float(err.max())
        split = (err > tolerance) & (e[todo + 1] - e[todo] > 2 * min_width)
        # Insert every midpoint (it was paid for); keep testing the halves of intervals that failed.
        e_new = np.concatenate([e, mid])
        v_new = np.concatenate([v, v_mid])
        order = np.argsort(e_new, kind="stable")
        rank = np.empty_like(order)
        rank[order] = np.arange(order.size)
        e, v = e_new[order], v_new[order]
        mids = rank[e.size - mid.size:][split]  # positions of the failed intervals' midpoints
        todo = np.sort(np.concatenate([mids - 1, mids]))
    return RefinedSampling(e, v, True, max_error)


def refined_transmission(model, energies, *, tolerance: float = 1e-3, max_points: int | None = None):
    """Two-terminal transmission on an adaptively refined grid (see :func:`refine`).

    Returns a :class:`rgftrans.transport.rgf.TransmissionResult` on the refined
    energies; a :class:`ResolutionWarning` says if ``max_points`` (default 20x
    the initial grid) stopped the refinement before ``tolerance`` was met.
    """
    from dataclasses import replace

    from rgftrans.transport.rgf import transmission

    e = np.asarray(energies, dtype=float)
    cap = max_points or 20 * e.size
    pieces = []

    def evaluate(x):
        pieces.append(transmission(model, x))
        return pieces[-1].transmission

    sampling = refine(evaluate, e, tolerance=tolerance, max_points=cap)
    if not sampling.converged:
        warnings.warn(f"adaptive refinement stopped at {sampling.energies.size} energies (max_points = {cap}) with "
                      f"midpoint errors up to {sampling.max_error:.3g} > tolerance {tolerance:g}; raise max_points "
                      "or the tolerance", ResolutionWarning, stacklevel=2)
    order = np.argsort(np.concatenate([p.energies for p in pieces]), kind="stable")

    def merged(field):
        return np.concatenate([getattr(p, field) for p in pieces])[order]

    return replace(pieces[0], energies=merged("energies"), transmission=merged("transmission"),
                   n_open=merged("n_open"), at_threshold=merged("at_threshold"))
