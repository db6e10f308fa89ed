"""Figures of closed dots: Coulomb peaks, the diamond map and a double dot's stability diagram.

Each takes a result of :mod:`rgftrans.io.blockade` and returns ``(fig, ax)`` (or ``(fig, axes)``); every axis
carries a physical name and unit.  matplotlib is imported lazily.
"""

from __future__ import annotations

import numpy as np

from rgftrans.constants import CONDUCTANCE_QUANTUM_S

__all__ = ["plot_coulomb_peaks", "plot_diamonds", "plot_stability"]


def _axes(ax, figsize=(6.5, 4.2)):
    import matplotlib.pyplot as plt

    if ax is None:
        fig, ax = plt.subplots(figsize=figsize, layout="constrained")
        return fig, ax
    return ax.figure, ax


def plot_coulomb_peaks(result, *, ax=None):
    """G(V_plunger) at every temperature of a single-dot result, in 2e^2/h (left) and nS (right axis)."""
    fig, ax = _axes(ax)
    volts = result.plunger_V * 1e3
    for t, g in zip(result.temperatures_K, result.conductance_S):
        ax.plot(volts, g / CONDUCTANCE_QUANTUM_S, lw=1.2, label=f"T = {t:g} K")
    ax.set_xlabel(f"plunger gate voltage, '{result.plunger}' (mV)")
    ax.set_ylabel("conductance G (2e²/h)")
    right = ax.secondary_yaxis("right", functions=(lambda g: g * CONDUCTANCE_QUANTUM_S * 1e9,
                                                   lambda s: s / CONDUCTANCE_QUANTUM_S / 1e9))
    right.set_ylabel("conductance G (nS)")
    ax.legend(frameon=False, fontsize="small")
    ax.set_title(f"Coulomb peaks of dot '{result.dot}' (sequential tunnelling; E_C = "
                 f"{result.charging_energy_meV:.3g} meV, α = {result.lever_arm:.3g})", fontsize="medium")
    return fig, ax


def plot_diamonds(result, *, ax=None):
    """dI/dV(V_plunger, V_sd) of a single-dot result at its lowest temperature: the Coulomb diamonds."""
    from matplotlib.colors import SymLogNorm

    fig, ax = _axes(ax)
    didv = result.differential_S
    scale = float(np.abs(didv).max()) or 1.0
    mesh = ax.pcolormesh(result.diamond_plunger_V * 1e3, result.bias_V * 1e3, didv, shading="auto", cmap="RdBu_r",
                         norm=SymLogNorm(linthresh=1e-3 * scale, vmin=-scale, vmax=scale), rasterized=True)
    fig.colorbar(mesh, ax=ax, label="differential conductance dI/dV (S)", shrink=0.85)
    ax.set_xlabel(f"plunger gate voltage, '{result.plunger}' (mV)")
    ax.set_ylabel("source-drain bias V_sd (mV)")
    ax.set_title(f"Coulomb diamonds at {result.temperatures_K.min():g} K (dot '{result.dot}')", fontsize="medium")
    return fig, ax


def plot_stability(result, *, axes=None):
    """A double dot's charge-stability diagram: (N1, N2) with the triple-point current, and the sensor signal."""
    import matplotlib.pyplot as plt

    if axes is None:
        fig, axes = plt.subplots(1, 2, figsize=(11, 4.5), layout="constrained")
    else:
        fig = axes[0].figure
    v1, v2 = result.plunger1_V * 1e3, result.plunger2_V * 1e3
    ax = axes[0]
    # Charge-state boundaries as lines (where N1 or N2 changes), the current where it flows.
    ax.contour(v1, v2, result.charge1, levels=np.arange(result.charge1.min(), result.charge1.max()) + 0.5,
               colors="0.35", linewidths=0.9)
    ax.contour(v1, v2, result.charge2, levels=np.arange(result.charge2.min(), result.charge2.max()) + 0.5,
               colors="0.35", linewidths=0.9)
    current = np.abs(result.current_A)
    if current.max() > 0:
        mesh = ax.pcolormesh(v1, v2, np.ma.masked_less(current * 1e12, 1e-3 * current.max() * 1e12),
                             shading="auto", cmap="inferno", rasterized=True)
        fig.colorbar(mesh, ax=ax, label=f"current at V_sd = {result.bias_V * 1e3:g} mV (pA)", shrink=0.85)
    for n1 in np.unique(result.charge1):
        for n2 in np.unique(result.charge2):
            where = (result.charge1 == n1) & (result.charge2 == n2)
            if where.sum() > 0.01 * where.size:
                rows, cols = np.nonzero(where)
                ax.annotate(f"({n1},{n2})", (v1[int(cols.mean())], v2[int(rows.mean())]), ha="center",
                            va="center", fontsize="small")
    ax.set_xlabel(f"plunger voltage, '{result.plungers[0]}' (mV)")
    ax.set_ylabel(f"plunger voltage, '{result.plungers[1]}' (mV)")
    ax.set_title("charge states (N1, N2) and the triple-point current", fontsize="medium")
    ax = axes[1]
    mesh = ax.pcolormesh(v1, v2, result.sensor_meV, shading="auto", cmap="viridis", rasterized=True)
    fig.colorbar(mesh, ax=ax, label="sensor potential shift (meV)", shrink=0.85)
    ax.set_xlabel(f"plunger voltage, '{result.plungers[0]}' (mV)")
    ax.set_ylabel(f"plunger voltage, '{result.plungers[1]}' (mV)")
    ax.set_title("charge-sensor signal", fontsize="medium")
    return fig, axes
