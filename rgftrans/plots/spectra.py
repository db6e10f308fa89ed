"""Figures of spectra: a closed level's density on the sites, and a lead's band structure.

Both draw what they are handed (a :class:`rgftrans.spectra.closed.ClosedLevels`
or a :class:`rgftrans.leads.bands.LeadBands`, read by attribute: this module
imports neither solver) and return ``(fig, ax)``; matplotlib is imported lazily.
"""

from __future__ import annotations

import numpy as np

from rgftrans.errors import EnergyError, RgftransError

__all__ = ["plot_level_density", "plot_lead_bands"]


def _axes(ax, figsize=(6, 4)):
    import matplotlib.pyplot as plt

    if ax is None:
        fig, ax = plt.subplots(figsize=figsize, layout="constrained")
    else:
        fig = ax.figure
    return fig, ax


def plot_level_density(levels, level: int = 0, *, ax=None, cmap: str = "magma", title: str | None = None):
    """``|psi|^2`` of one closed level on the sites (colour map, equal aspect, positions in nm).

    Parameters
    ----------
    levels : ClosedLevels
        From :func:`rgftrans.spectra.closed.closed_levels`.
    level : int
        Which level (index into ``levels.energies_meV``, ascending energy).
    title : str, optional
        Default: the level's energy (meV), its index and its weight in the weighing region.

    Returns
    -------
    fig, ax
    """
    from rgftrans.plots.figures import _triangulation
    from rgftrans.plots.style import position_labels

    density = levels.density(level)  # one-line error for a bad index
    fig, ax = _axes(ax)
    xy = np.asarray(levels.positions_nm, dtype=float)
    if len(xy) >= 3 and np.linalg.matrix_rank(xy - xy.mean(axis=0)) == 2:
        art = ax.tripcolor(_triangulation(xy), density, shading="gouraud", cmap=cmap, rasterized=True)
    else:  # a chain: no area to fill
        art = ax.scatter(xy[:, 0], xy[:, 1], c=density, cmap=cmap, s=30)
    fig.colorbar(art, ax=ax, label="|ψ|² per site (1)", shrink=0.85)
    ax.set_aspect("equal")
    xlabel, ylabel = position_labels("nm")
    ax.set_xlabel(xlabel)
    ax.set_ylabel(ylabel)
    if title is None:
        where = f" of {levels.region_name}" if levels.region_name else ""
        title = f"closed level {level % levels.count}{where}: E = {levels.energies_meV[level]:.4g} meV"
        weight = float(levels.weights_inside[level])
        if weight < 1.0:
            title += f", {100 * weight:.1f} % in the region"
    ax.set_title(title, fontsize="medium")
    return fig, ax


def _energy_pair(value, what: str) -> tuple[float, float]:
    try:
        lo, hi = (float(w) for w in value)
    except (TypeError, ValueError):
        raise EnergyError(f"{what} must be two energies (lo, hi) in meV, got {value!r}") from None
    if not (np.isfinite(lo) and np.isfinite(hi)) or hi <= lo:
        raise EnergyError(f"{what} {value!r} meV must be two finite energies with lo < hi")
    return lo, hi


def plot_lead_bands(bands, *, window=None, energy_range=None, ax=None, max_bands: int | None = None):
    """Band structure E(k) of a lead (meV against 1/nm), thresholds marked, a sweep's energy window shaded.

    Parameters
    ----------
    bands : LeadBands
        From :func:`rgftrans.leads.bands.lead_bands`.
    window : (float, float), meV, optional
        Energy window of a sweep, shaded (the channels open there are those whose bands cross it).
    energy_range : (float, float), meV, optional
        Energies shown (default: all drawn bands), e.g. a few meV around the window of a continuum lead whose
        bands reach hundreds of meV.
    max_bands : int, optional
        Draw only the lowest this many bands (wide leads have hundreds).

    Returns
    -------
    fig, ax
    """
    fig, ax = _axes(ax, figsize=(5, 4.5))
    k = np.asarray(bands.k_per_nm)
    e = np.asarray(bands.energies_meV)
    n_drawn = e.shape[1]
    if max_bands is not None:
        if isinstance(max_bands, (bool, np.bool_)) or not isinstance(max_bands, (int, np.integer)) or max_bands < 1:
            raise RgftransError(f"max_bands must be a positive integer, got {max_bands!r}")
        n_drawn = min(n_drawn, int(max_bands))
        e = e[:, :n_drawn]
    lo_hi = (float(e.min()), float(e.max())) if energy_range is None else _energy_pair(energy_range, "energy_range")
    ax.plot(k, e, color="tab:blue", lw=1.0)
    thresholds = [x for x in bands.extrema
                  if not x.crossing and x.band < n_drawn and lo_hi[0] <= x.energy_meV <= lo_hi[1]]
    for x in thresholds:
        ax.axhline(x.energy_meV, color="0.75", lw=0.5, ls=":", zorder=0)
    if thresholds:
        ax.plot([x.k_per_nm for x in thresholds], [x.energy_meV for x in thresholds], ls="none", marker="o", ms=3,
                mfc="white", mec="tab:red", label="channel threshold (band extremum)")
    if window is not None:
        lo, hi = _energy_pair(window, "window")
        ax.axhspan(lo, hi, color="tab:orange", alpha=0.2, lw=0, label="energy window of the sweep")
    ax.set_xlim(k[0], k[-1])
    if energy_range is not None:
        ax.set_ylim(*lo_hi)
    ax.set_xlabel("wave number k along the lead (1/nm)")
    ax.set_ylabel("energy E (meV)")
    ax.set_title(f"bands of lead '{bands.lead_name}' (a = {bands.lattice_constant_nm:.4g} nm)", fontsize="medium")
    if thresholds or window is not None:
        ax.legend(loc="upper center", bbox_to_anchor=(0.5, -0.15), ncol=2, fontsize="small", frameon=False)
    return fig, ax
