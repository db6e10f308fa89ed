"""Figures of a fit of a stored sweep to a measured trace (:mod:`rgftrans.io.compare`)."""

from __future__ import annotations

import numpy as np

from rgftrans.constants import CONDUCTANCE_QUANTUM_S as G0_S
from rgftrans.io.compare import TraceFit

__all__ = ["plot_fit"]

#: Fraction of the overlay's height one line of the value box takes (small font, default figure size).
_TEXT_LINE_FRACTION = 0.05


def plot_fit(fit: TraceFit, *, ax=None):
    """Measured and modelled conductance against gate voltage, residuals below.

    The fitted values with their standard errors (and the fixed ones) stand
    in a text box on the overlay.  A failed attempt (``fit.success`` False,
    from :attr:`TraceFitFailed.attempt`) is titled "FAILED FIT - not a
    result" with the reason, and its model curve is dashed grey.

    Parameters
    ----------
    fit : TraceFit
    ax : matplotlib Axes or pair of Axes, optional, keyword-only
        A pair (overlay, residuals) is drawn into; a single Axes is split
        into the two panels; None makes a new figure.

    Returns
    -------
    fig : matplotlib Figure
    axes : tuple (overlay Axes, right-hand µS axis, residual Axes)
    """
    import matplotlib.pyplot as plt

    if ax is None:
        fig, (top, bottom) = plt.subplots(2, 1, sharex=True, figsize=(6.5, 5.5), layout="constrained",
                                          gridspec_kw={"height_ratios": (3, 1)})
    elif isinstance(ax, (tuple, list)):
        top, bottom = ax
        fig = top.figure
    else:
        fig = ax.figure
        spec = ax.get_subplotspec().subgridspec(2, 1, height_ratios=(3, 1), hspace=0.05)
        ax.remove()
        top = fig.add_subplot(spec[0])
        bottom = fig.add_subplot(spec[1], sharex=top)
    mv = 1e3  # gate voltages drawn in mV
    label = fit.description or fit.source or "measured"
    top.plot(fit.gate_V * mv, fit.measured_S / G0_S, ".", ms=3, color="0.3", label=f"measured: {label}")
    if fit.success:
        top.plot(fit.curve_gate_V * mv, fit.curve_S / G0_S, "-", color="tab:red", lw=1.5,
                 label=f"model ({', '.join(fit.fitted)} fitted)")
    else:
        top.plot(fit.curve_gate_V * mv, fit.curve_S / G0_S, "--", color="0.5", lw=1.2,
                 label="model at the failed attempt's parameters")
    top.set_ylabel("conductance (2e²/h)")
    right = top.secondary_yaxis("right", functions=(lambda g: g * G0_S * 1e6, lambda u: u / (G0_S * 1e6)))
    right.set_ylabel("conductance (µS)")
    lines = _value_lines(fit)
    # Headroom above the data for the legend and the value box (about 5 % of the height per text line), so
    # neither hides a peak.
    lo, hi = top.get_ylim()
    top.set_ylim(lo, lo + (hi - lo) / max(1.0 - _TEXT_LINE_FRACTION * len(lines), 0.3))
    top.legend(loc="upper left", fontsize="small")
    top.text(0.98, 0.97, "\n".join(lines), transform=top.transAxes, ha="right", va="top",
             fontsize="small", bbox=dict(boxstyle="round", facecolor="white", edgecolor="0.7", alpha=0.9))
    if fit.success:
        top.set_title(f"{fit.n_points} points, {', '.join(fit.fitted)} fitted", fontsize="medium")
    else:
        reason = fit.message if len(fit.message) <= 90 else fit.message[:87] + "..."
        top.set_title(f"FAILED FIT - not a result\n{reason}", fontsize="small", color="tab:red")
    bottom.axhspan(-fit.noise_S / G0_S, fit.noise_S / G0_S, color="tab:blue", alpha=0.15, lw=0, label="± σ")
    bottom.axhline(0.0, color="0.5", lw=0.8)
    bottom.plot(fit.gate_V * mv, fit.residuals_S / G0_S, ".", ms=3, color="tab:blue", label="measured − model")
    if fit.gate_axis:  # the sweep's own gate: its physical name ("plunger gate voltage (mV)")
        from rgftrans.plots.style import axis_display

        gate_label = axis_display(fit.gate_axis, "V", np.array([0.0, 1e-3]))[0]
    else:
        gate_label = "gate voltage (mV)"
    bottom.set_xlabel(gate_label)
    bottom.set_ylabel("residual (2e²/h)")
    bottom.legend(loc="best", fontsize="small")
    if top is not bottom:
        top.tick_params(labelbottom=False)
    return fig, (top, right, bottom)


def _value_lines(fit: TraceFit) -> list:
    """One line per parameter for the figure: fitted ones as value ± standard error, fixed ones marked."""
    symbols = {"lever_arm": "α", "offset": "V₀", "r_series": "R_s", "temperature": "T"}
    units = {"lever_arm": "meV/V", "offset": "mV", "r_series": "kΩ", "temperature": "K"}
    factor = {"lever_arm": 1.0, "offset": 1e3, "r_series": 1e-3, "temperature": 1.0}
    lines = []
    for name in fit.parameter_names:
        v, e = fit.values[name] * factor[name], fit.stderr[name] * factor[name]
        if name in fit.fitted:
            lines.append(f"{symbols[name]} = {v:.5g} ± {e:.2g} {units[name]}")
        else:
            lines.append(f"{symbols[name]} = {v:.5g} {units[name]} (fixed)")
    lines.append(f"μ_ref = {fit.mu_ref_meV:.4g} meV")
    if fit.noise_source == "given":
        lines.append(f"reduced χ² = {fit.reduced_chi_square:.3g}")
    else:
        lines.append(f"σ estimated = {fit.noise_S * 1e6:.3g} µS")
    return lines
