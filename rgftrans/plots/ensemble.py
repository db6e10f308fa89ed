"""Figures of disorder ensembles: conductance fluctuations and the localisation length.

Each returns ``(fig, axes)``; every axis carries a physical name and unit.  matplotlib is imported lazily.
"""

from __future__ import annotations

import numpy as np

__all__ = ["plot_fluctuations", "plot_localisation", "UCF_VARIANCE"]

#: Universal conductance fluctuations of a quasi-one-dimensional diffusive wire, var G in (2e^2/h)^2 for a
#: spin-degenerate conductor: 2/15 with time-reversal symmetry, 1/15 without (Lee & Stone, Phys. Rev. Lett. 55,
#: 1622 (1985); Beenakker, Rev. Mod. Phys. 69, 731 (1997), both from memory).
UCF_VARIANCE = {"time-reversal symmetric": 2 / 15, "field (broken time reversal)": 1 / 15}


def plot_fluctuations(results, labels=None, *, axes=None):
    """Conductance fluctuations of one or more ensembles of the same device.

    Left: the distribution of ``G - <G>(E)`` pooled over the energies (2e^2/h).  Right: var G at each energy
    with its standard error, beside the universal values of a quasi-one-dimensional diffusive wire.
    """
    import matplotlib.pyplot as plt

    results = list(results) if isinstance(results, (list, tuple)) else [results]
    labels = labels or [f"W = {r.width_meV:.3g} meV" for r in results]
    if axes is None:
        fig, axes = plt.subplots(1, 2, figsize=(10.5, 4.2), layout="constrained")
    fig = axes[0].figure
    spread = max(float(np.abs(r.conductance_g0 - r.mean_g0).max()) for r in results)
    bins = np.linspace(-spread, spread, 41)
    for r, label in zip(results, labels):
        deviation = (r.conductance_g0 - r.mean_g0).ravel()
        axes[0].hist(deviation, bins=bins, histtype="step", lw=1.4, density=True,
                     label=f"{label}: var G = {r.variance_g0.mean():.3f} (2e²/h)²")
        axes[1].errorbar(r.energies, r.variance_g0, yerr=r.variance_error_g0, fmt="o", ms=4, capsize=3, label=label)
    axes[0].set_xlabel("conductance deviation G − ⟨G⟩ (2e²/h)")
    axes[0].set_ylabel("probability density (per 2e²/h)")
    axes[0].set_ylim(0, 1.3 * axes[0].get_ylim()[1])  # room for the legend above the tallest bin
    axes[0].legend(frameon=False, fontsize="small", loc="upper left")
    axes[0].set_title(f"{results[0].n_samples} disorder samples per ensemble", fontsize="medium")
    for (name, value), style in zip(UCF_VARIANCE.items(), ("--", ":")):
        axes[1].axhline(value, color="0.4", ls=style, lw=1, label=f"UCF, diffusive wire, {name}: {value:.3f}")
    axes[1].set_xlabel("energy E (meV)")
    axes[1].set_ylabel("conductance variance var G ((2e²/h)²)")
    axes[1].set_ylim(bottom=0)
    axes[1].legend(frameon=False, fontsize="small")
    regimes = sorted({str(x) for r in results for x in r.regime})
    axes[1].set_title(f"var G with standard errors (regime: {', '.join(regimes)})", fontsize="medium")
    return fig, axes


def plot_localisation(fit, *, reference_nm=None, reference_label: str = "", ax=None):
    """<ln T> against device length with the fitted ``c - 2L/xi`` at each energy.

    ``reference_nm`` (one value per energy) is drawn as the slope ``-2/xi_ref`` through the fitted intercept.
    """
    import matplotlib.pyplot as plt

    if ax is None:
        fig, ax = plt.subplots(figsize=(6.5, 4.4), layout="constrained")
    fig = ax.figure
    lengths = np.linspace(0, fit.lengths_nm.max() * 1.05, 50)
    for k, e in enumerate(fit.energies):
        points = ax.errorbar(fit.lengths_nm, fit.mean_log[:, k], yerr=fit.mean_log_error[:, k], fmt="o", ms=4,
                             capsize=3)
        colour = points[0].get_color()
        ax.plot(lengths, fit.intercept[k] - 2 * lengths / fit.xi_nm[k], color=colour, lw=1.2,
                label=f"E = {e:.3g} meV: ξ = {fit.xi_nm[k]:.1f} ± {fit.xi_error_nm[k]:.1f} nm")
        if reference_nm is not None:
            ax.plot(lengths, fit.intercept[k] - 2 * lengths / reference_nm[k], color=colour, lw=1, ls="--",
                    label=f"{reference_label}: ξ = {reference_nm[k]:.1f} nm" if reference_label else None)
    ax.set_xlabel("device length L (nm)")
    ax.set_ylabel("⟨ln T⟩ (T: transmission per spin)")
    ax.legend(frameon=False, fontsize="small")
    ax.set_title("Anderson localisation: ⟨ln T⟩ = c − 2L/ξ", fontsize="medium")
    return fig, ax
