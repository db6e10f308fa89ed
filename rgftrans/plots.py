"""Figures.  matplotlib is imported lazily; every function returns ``(fig, ax)``."""

from __future__ import annotations

import numpy as np

__all__ = ["plot_device", "plot_transmission"]

_LEAD_COLOURS = ("tab:red", "tab:blue", "tab:green", "tab:purple", "tab:orange", "tab:brown")


def _axes(ax):
    import matplotlib.pyplot as plt

    if ax is None:
        fig, ax = plt.subplots(figsize=(6, 4), layout="constrained")
    else:
        fig = ax.figure
    return fig, ax


def plot_device(model, *, ax=None, lead_cells: int = 4, site_size: float | None = None):
    """Draw the discretised device: its sites, and a few cells of each lead.

    Parameters
    ----------
    model : TightBindingModel
    lead_cells : int
        How many cells of each (semi-infinite) lead to draw.
    """
    fig, ax = _axes(ax)
    xy = model.positions
    size = site_size if site_size is not None else max(0.5, min(12.0, 4000.0 / max(len(xy), 1)))
    ax.scatter(xy[:, 0], xy[:, 1], s=size, c="0.35", linewidths=0, label=f"device ({len(xy)} sites)")
    for k, lead in enumerate(model.leads):
        colour = _LEAD_COLOURS[k % len(_LEAD_COLOURS)]
        cells = np.vstack([lead.cell_positions + j * lead.period for j in range(lead_cells)])
        ax.scatter(cells[:, 0], cells[:, 1], s=size, c=colour, linewidths=0,
                   label=f"lead '{lead.name}' ({len(lead.cell_positions)} sites across)")
        iface = xy[lead.interface]
        ax.scatter(iface[:, 0], iface[:, 1], s=size * 2.5, facecolors="none", edgecolors=colour, linewidths=0.6)
        tip = lead.cell_positions.mean(axis=0) + lead_cells * lead.period
        ax.annotate("", xy=tip + 2 * lead.period, xytext=tip,
                    arrowprops=dict(arrowstyle="->", color=colour, lw=1.2))
    ax.set_aspect("equal")
    ax.set_xlabel("x (nm)")
    ax.set_ylabel("y (nm)")
    ax.legend(loc="upper center", bbox_to_anchor=(0.5, -0.15), ncol=2, fontsize="small", frameon=False)
    return fig, ax


def plot_transmission(result, *, ax=None, label: str | None = None, siemens_axis: bool = True):
    """Conductance G = (2e^2/h) T against energy, with the open channels of each lead.

    Parameters
    ----------
    result : TransmissionResult
    siemens_axis : bool
        Add a right-hand axis in microsiemens.
    """
    from .materials import CONDUCTANCE_QUANTUM_S

    fig, ax = _axes(ax)
    ax.plot(result.energies, result.conductance_g0, lw=1.2, color="k", label=label or "G = (2e²/h) T")
    for k, name in enumerate(result.lead_names):
        ax.step(result.energies, result.n_open[:, k], where="mid", lw=0.8, ls="--",
                color=_LEAD_COLOURS[k % len(_LEAD_COLOURS)], label=f"open channels, '{name}'")
    ax.set_xlabel("energy E (meV)")
    ax.set_ylabel("conductance G (2e²/h)")
    ax.set_ylim(bottom=0)
    ax.set_xlim(result.energies.min(), result.energies.max())
    if siemens_axis:
        scale = CONDUCTANCE_QUANTUM_S * 1e6
        sec = ax.secondary_yaxis("right", functions=(lambda g: g * scale, lambda s: s / scale))
        sec.set_ylabel("conductance G (µS)")
    ax.legend(loc="upper center", bbox_to_anchor=(0.5, -0.15), ncol=3, fontsize="small", frameon=False)
    return fig, ax
