"""Figures.  matplotlib is imported lazily; every function returns ``(fig, ax)``."""

from __future__ import annotations

from pathlib import Path

import numpy as np

__all__ = ["plot_device", "plot_transmission", "plot_map", "plot_currents", "site_current_vectors", "plot_result",
           "plot_width_track", "plot_track_on_map"]

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


def _triangulation(xy: np.ndarray):
    """Delaunay triangulation of the sites with triangles across holes and notches masked."""
    from matplotlib.tri import Triangulation
    from scipy.spatial import cKDTree

    tri = Triangulation(xy[:, 0], xy[:, 1])
    nearest = cKDTree(xy).query(xy, k=2)[0][:, 1].min()
    p = xy[tri.triangles]
    edges = np.linalg.norm(p - np.roll(p, 1, axis=1), axis=2)
    tri.set_mask(edges.max(axis=1) > 1.5 * nearest)
    return tri


def plot_map(model, values, *, ax=None, cmap: str = "magma", label: str = "LDOS (1/meV)",
             log: bool = False, title: str | None = None):
    """Colour map of a per-site quantity over the device (equal aspect, colour bar).

    Parameters
    ----------
    model : TightBindingModel
    values : (n_sites,) float ndarray
    log : bool
        Logarithmic colour scale (for densities spanning decades).
    """
    from matplotlib.colors import LogNorm

    fig, ax = _axes(ax)
    values = np.asarray(values, dtype=float)
    norm = None
    if log:
        positive = values[values > 0]
        vmin = positive.max() * 1e-4 if positive.size else 1e-12
        values = np.clip(values, vmin, None)
        norm = LogNorm(vmin=vmin, vmax=values.max())
    art = ax.tripcolor(_triangulation(model.positions), values, shading="gouraud", cmap=cmap, norm=norm,
                       rasterized=True)
    fig.colorbar(art, ax=ax, label=label, shrink=0.85)
    for k, lead in enumerate(model.leads):
        cell = lead.cell_positions
        ax.plot(cell[:, 0], cell[:, 1], lw=3, color=_LEAD_COLOURS[k % len(_LEAD_COLOURS)], label=f"lead '{lead.name}'",
                solid_capstyle="butt")
    ax.set_aspect("equal")
    ax.set_xlabel("x (nm)")
    ax.set_ylabel("y (nm)")
    if title:
        ax.set_title(title)
    ax.legend(loc="upper center", bbox_to_anchor=(0.5, -0.15), ncol=4, fontsize="small", frameon=False)
    return fig, ax


def site_current_vectors(model, currents) -> np.ndarray:
    """Current density vector at each site from bond currents: ``J_i = sum_j I_ij (r_j - r_i) / 2``.

    Parameters
    ----------
    currents : (n_sites, n_sites) sparse matrix from :func:`rgftrans.local.bond_currents`

    Returns
    -------
    (n_sites, 2) float ndarray (current times nm)
    """
    coo = currents.tocoo()
    d = model.positions[coo.col] - model.positions[coo.row]
    out = np.zeros((model.n_sites, 2))
    np.add.at(out, coo.row, 0.5 * coo.data[:, None] * d)
    return out


def plot_currents(model, currents, *, ax=None, background=None, max_arrows: int = 900,
                  background_label: str = "density (1/meV)"):
    """Arrows of the local current over the device, optionally over a density map."""
    if background is not None:
        fig, ax = plot_map(model, background, ax=ax, cmap="Greys", label=background_label)
    else:
        fig, ax = _axes(ax)
        ax.set_aspect("equal")
        ax.set_xlabel("x (nm)")
        ax.set_ylabel("y (nm)")
    vec = site_current_vectors(model, currents)
    xy = model.positions
    stride = max(1, int(np.ceil(np.sqrt(len(xy) / max_arrows))))
    spacing = np.min(np.ptp(xy, axis=0)[np.ptp(xy, axis=0) > 0]) / max(1, np.sqrt(len(xy)))
    # Keep arrows on a coarse sub-grid so the map stays readable.
    grid = np.round(xy / (spacing * stride)).astype(int)
    _, pick = np.unique(grid, axis=0, return_index=True)
    mag = np.linalg.norm(vec[pick], axis=1)
    ax.quiver(xy[pick, 0], xy[pick, 1], vec[pick, 0], vec[pick, 1], mag, cmap="viridis", pivot="middle",
              angles="xy", scale_units="xy", scale=mag.max() / (spacing * stride * 1.2) if mag.max() > 0 else 1.0,
              width=0.003)
    return fig, ax


def plot_result(path, *, lead_out: str | None = None, lead_in: str | None = None, energy: float | None = None,
                ax=None):
    """Conductance from a result file: lines, a map over (axis, energy), or a map over two axes at one energy.

    Points not yet computed are left blank.  Conductance at zero temperature
    is ``(g_s e^2/h) T`` (g_s = 2 spinless, 1 with spin orbitals) from ``lead_in`` (default: the first lead) into ``lead_out`` (default:
    the second).
    """
    from .errors import RgftransError
    from .store import read_result

    data = read_result(path)
    names = list(data.lead_names)

    def pick(name, default):
        if name is None:
            return default
        if name not in names:
            raise RgftransError(f"{path}: no lead named {name!r}; the file has leads {names}")
        return names.index(name)

    q_in = pick(lead_in, 0)
    p_out = pick(lead_out, 1 if len(names) > 1 else 0)
    trans = data.quantities["transmission"][..., p_out, q_in] * (0.5 * data.require_attr("spin_degeneracy", "whether the transmission is per spin"))
    label = f"G ({names[q_in]} → {names[p_out]}) (2e²/h)"
    energies = data.energies_meV
    axes = list(data.axes)
    extra = ""
    while len(axes) > 2:  # show the first value of further axes
        extra += f", {axes[-1].name} = {axes[-1].values[0]:g} {axes[-1].units}"
        trans = trans[..., 0, :] if trans.ndim > 2 else trans
        axes.pop()
    fig, ax = _axes(ax)
    if not axes:
        ax.plot(energies, trans, color="k", lw=1.2)
        ax.set_xlabel("energy E (meV)")
        ax.set_ylabel(label)
        ax.set_ylim(bottom=0)
    elif len(axes) == 1:
        a = axes[0]
        mesh = ax.pcolormesh(energies, a.values, np.ma.masked_invalid(trans), shading="nearest", cmap="viridis")
        fig.colorbar(mesh, ax=ax, label=label)
        ax.set_xlabel("energy E (meV)")
        ax.set_ylabel(f"{a.long_name} ({a.units})")
    else:
        k = int(np.argmin(np.abs(energies - (energy if energy is not None else energies[len(energies) // 2]))))
        a0, a1 = axes
        mesh = ax.pcolormesh(a1.values, a0.values, np.ma.masked_invalid(trans[..., k]), shading="nearest",
                             cmap="viridis")
        fig.colorbar(mesh, ax=ax, label=label)
        ax.set_xlabel(f"{a1.long_name} ({a1.units})")
        ax.set_ylabel(f"{a0.long_name} ({a0.units})")
        extra = f", E = {energies[k]:.4g} meV" + extra
    done = int(np.count_nonzero(data.completed))
    total = int(np.size(data.completed))
    ax.set_title(f"{Path(str(path)).name}: {done}/{total} points{extra}", fontsize="medium")
    return fig, ax


def plot_width_track(search, *, ax=None):
    """Resonance width against the sweep parameter on a log scale, located BICs marked."""
    fig, ax = _axes(ax)
    t = search.track
    ax.semilogy(t.parameters, np.maximum(t.widths_meV, 1e-300), "o-", ms=3, lw=1, color="k", label="width Γ")
    for loc in search.bics:
        if np.ndim(loc.parameter) == 0:
            ax.axvline(loc.parameter, color="tab:red", lw=0.8, ls="--")
            ax.plot([loc.parameter], [max(loc.width_meV, 1e-300)], "v", color="tab:red",
                    label=f"BIC at {loc.parameter:.6g} ({loc.kind})")
    ax.set_xlabel(f"{search.axis_name}")
    ax.tick_params(axis="x", labelrotation=30)
    ax.set_ylabel("resonance width Γ (meV)")
    ax.legend(fontsize="small", frameon=False)
    return fig, ax


def plot_track_on_map(path, search, *, ax=None):
    """T(E, parameter) from a result file with the tracked resonance energy drawn over it."""
    from .store import read_result

    data = read_result(path)
    fig, ax = _axes(ax)
    trans = data.quantities["transmission"][..., 1, 0]
    trans = trans.reshape(len(data.axes[0].values), -1, trans.shape[-1])[:, 0, :]
    mesh = ax.pcolormesh(data.axes[0].values, data.energies_meV, np.ma.masked_invalid(trans.T), shading="nearest",
                         cmap="viridis")
    fig.colorbar(mesh, ax=ax, label="transmission T")
    ax.plot(search.track.parameters, search.track.energies_meV, color="w", lw=1.2, ls="--", label="tracked pole")
    for loc in search.bics:
        if np.ndim(loc.parameter) == 0:
            ax.plot([loc.parameter], [loc.energy_meV], "o", mfc="none", mec="tab:red", ms=9, label="BIC")
    ax.set_xlabel(f"{search.axis_name}")
    ax.tick_params(axis="x", labelrotation=30)
    ax.set_ylabel("energy E (meV)")
    ax.legend(fontsize="small", loc="upper right")
    return fig, ax


def plot_bic_plane(search, *, seed: int | None = None, ax=None):
    """Coupling of a followed state over the parameter plane: where each lead's coupling vanishes, and the BICs.

    Colour: log10 of the residual length |r| (unit-normalised couplings, 0 at a
    BIC); solid and dashed lines: the zero lines of the first and second
    channel's coupling; stars: located BICs of that state.
    """
    fig, ax = _axes(ax)
    if seed is None:
        seed = search.seed_of_bic[0] if search.bics else 0
    res = search.residuals[seed]
    norm = np.linalg.norm(res, axis=-1)
    mesh = ax.pcolormesh(search.p1, search.p2, np.ma.masked_invalid(np.log10(np.maximum(norm, 1e-16))).T,
                         shading="nearest", cmap="cividis")
    fig.colorbar(mesh, ax=ax, label="log10 |coupling residual|")
    handles = []
    for k, ls in ((0, "-"), (1, "--")):
        if np.isfinite(res[..., k]).sum() >= 4:
            ax.contour(search.p1, search.p2, np.ma.masked_invalid(res[..., k]).T, levels=[0.0], colors="w",
                            linestyles=ls, linewidths=1.2)
            lead, c = search.channels[k] if search.channels else ("lead", k)
            handles.append(_legend_line(ls, f"no coupling to {lead} (channel {c})"))
    for bic, s in zip(search.bics, search.seed_of_bic):
        if s == seed:
            ax.plot([bic.parameter[0]], [bic.parameter[1]], "*", ms=14, mfc="tab:red", mec="w",
                    label=f"BIC, E = {bic.energy_meV:.4f} meV")
    ax.set_xlabel(search.names[0])
    ax.set_ylabel(search.names[1])
    ax.tick_params(axis="x", labelrotation=30)
    ax.legend(handles=handles + ax.get_legend_handles_labels()[0], fontsize="small", loc="upper right")
    ax.set_title(f"state followed from {search.seeds_meV[seed]:.4f} meV")
    return fig, ax


def _legend_line(ls: str, label: str):
    """A legend entry for a white contour line (drawn dark so it shows on the legend's white background)."""
    from matplotlib.lines import Line2D

    return Line2D([], [], color="k", ls=ls, label=label)


def plot_fano_collapse(build, bic, step: float, *, name: str = "p1", axes=None, fractions=(1.0, 0.5, 0.25)):
    """T(E) beside a BIC (p1 = p1* + f * step) and at it, and the pole width against the distance.

    Left: the Fano line narrows as ``(p - p*)^2`` and is gone at ``p*``.
    Right: pole width against ``|p - p*|`` on log-log axes with a slope-2 guide.
    """
    import matplotlib.pyplot as plt

    from .darkstates import follow_pole
    from .rgf import transmission

    if axes is None:
        fig, axes = plt.subplots(1, 2, figsize=(10, 4), layout="constrained")
    else:
        fig = axes[0].figure
    p1, p2 = bic.parameter
    seed = bic.state.astype(complex)
    poles = [follow_pole(build(p1 + f * step, p2), bic.energy_meV, seed) for f in fractions]
    half = 6 * max(r.width_meV for r in poles)
    offsets = np.linspace(-half, half, 800)  # even count: the centre (a real pole at p*) is not sampled
    for f, r in zip(list(fractions) + [0.0], poles + [None]):
        centre = r.energy_meV if r is not None else bic.energy_meV  # each line in its own window: it moves with p
        t = transmission(build(p1 + f * step, p2), centre + offsets).transmission
        label = (f"p* + {f * step:.3g}: Γ = {r.width_meV:.2e} meV" if r is not None else "p* (BIC): no line")
        axes[0].plot(offsets * 1e3, t, lw=1.2, label=label)
    axes[0].set_xlabel("E − Re z (µeV), z the pole at each parameter")
    axes[0].set_title(f"T(E) as {name} approaches the BIC", fontsize="medium")
    axes[0].set_ylabel("transmission T")
    axes[0].set_ylim(-0.02, 1.02)
    axes[0].legend(fontsize="small", frameon=False)
    d = np.abs(step) * np.geomspace(1e-3, 1.0, 13)
    widths = np.array([follow_pole(build(p1 + x, p2), bic.energy_meV, seed).width_meV for x in d])
    axes[1].loglog(d, np.maximum(widths, 1e-300), "o", color="k", ms=4, label="pole width")
    axes[1].loglog(d, widths[-1] * (d / d[-1]) ** 2, color="tab:red", lw=0.8, ls="--", label="∝ |p − p*|²")
    axes[1].set_xlabel(f"|{name} − p*|")
    axes[1].set_ylabel("resonance width Γ (meV)")
    axes[1].legend(fontsize="small", frameon=False)
    return fig, axes
