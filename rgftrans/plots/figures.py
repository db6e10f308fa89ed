"""Figures.  matplotlib is imported lazily; every function returns ``(fig, ax)``.

Every axis carries a physical name and its unit; sweep parameters are named
and scaled by :func:`rgftrans.plots.style.axis_display` ("upper gate voltage
(mV)", never the config key).  Figures use constrained layout so titles and
colour bars are not cut off.
"""

from __future__ import annotations


import numpy as np

__all__ = ["plot_device", "plot_density", "plot_transmission", "plot_map", "plot_currents", "site_current_vectors", "plot_result",
           "plot_gate_potential", "plot_width_track", "plot_track_on_map", "plot_bic_plane", "plot_fano_collapse",
           "plot_spectrum", "plot_waveguide_field", "DEVICE_SITES_SHOWN"]

_LEAD_COLOURS = ("tab:red", "tab:blue", "tab:green", "tab:purple", "tab:orange", "tab:brown")


def _axes(ax):
    import matplotlib.pyplot as plt

    if ax is None:
        fig, ax = plt.subplots(figsize=(6, 4), layout="constrained")
    else:
        fig = ax.figure
    return fig, ax


#: Devices with at most this many sites show their lattice sites; larger ones show them in a zoomed inset.
DEVICE_SITES_SHOWN = 2000
#: Colours of the device region and of the gates on the device figure.
_DEVICE_FILL, _DEVICE_EDGE = "0.86", "0.25"
_GATE_FILL, _GATE_EDGE = (0.85, 0.65, 0.13, 0.35), "darkgoldenrod"


def _site_spacing(positions: np.ndarray) -> float:
    """Nearest-neighbour distance between sites (the drawing scale of a lattice site)."""
    from scipy.spatial import cKDTree

    if len(positions) < 2:
        return 1.0
    return float(cKDTree(positions).query(positions, k=2)[0][:, 1].min())


def _sites_outline(positions: np.ndarray, spacing: float):
    """The area the sites cover (each site a cell of size ``spacing``), when no region is given."""
    import shapely

    h = 0.5 * spacing
    cells = shapely.box(positions[:, 0] - h, positions[:, 1] - h, positions[:, 0] + h, positions[:, 1] + h)
    return shapely.union_all(cells).buffer(0.05 * spacing, join_style="mitre").buffer(-0.05 * spacing,
                                                                                      join_style="mitre")


def _draw_geometry(ax, geometry, **style):
    """Fill a shapely (multi)polygon, holes included, as one patch; returns the patch."""
    import shapely
    from matplotlib.patches import PathPatch
    from matplotlib.path import Path as MplPath

    verts, codes = [], []
    for part in shapely.get_parts(geometry):
        if part.geom_type != "Polygon" or part.is_empty:
            continue
        for ring in (part.exterior, *part.interiors):
            xy = np.asarray(ring.coords)[:, :2]
            verts.extend(xy)
            codes.extend([MplPath.MOVETO] + [MplPath.LINETO] * (len(xy) - 2) + [MplPath.CLOSEPOLY])
    if not verts:
        return None
    patch = PathPatch(MplPath(np.asarray(verts), codes), **style)
    ax.add_patch(patch)
    return patch


def _gate_layout_of(device):
    """The gate layout behind a device's potential, if it has one (plain or shifted by a constant)."""
    from rgftrans.electrostatics.gates import GateLayout

    potential = getattr(device, "potential", None)
    for candidate in (potential, getattr(potential, "layout", None)):
        if isinstance(candidate, GateLayout):
            return candidate
    return None


def _label_gates(ax, layout, *, box: bool = True) -> None:
    """Name each gate (and its voltage) at a point inside its outline."""
    from rgftrans.plots.style import format_value

    for gate in layout.gates:
        at = gate.shape.geometry.representative_point()
        ax.annotate(f"{gate.name}\n{format_value(gate.voltage, 'V')}", (at.x, at.y), ha="center", va="center",
                    fontsize="small", annotation_clip=True, zorder=5,
                    bbox=dict(boxstyle="round,pad=0.2", fc="w", ec="none", alpha=0.75) if box else None)


def _lead_band(lead, device_xy: np.ndarray, spacing: float, length: float):
    """Where a lead leaves the device: the band's corners, its outward unit vector, width and start point."""
    period = np.asarray(lead.period, dtype=float)
    u = period / np.linalg.norm(period)
    w = np.array([-u[1], u[0]])
    cell = np.asarray(lead.cell_positions, dtype=float)
    across = cell @ w
    lo, hi = across.min() - 0.5 * spacing, across.max() + 0.5 * spacing
    start = float((device_xy[lead.interface] @ u).max()) + 0.5 * spacing if len(lead.interface) else \
        float((cell @ u).min()) - 0.5 * spacing
    corners = np.array([start * u + lo * w, (start + length) * u + lo * w, (start + length) * u + hi * w,
                        start * u + hi * w])
    return corners, u, hi - lo, start * u + 0.5 * (lo + hi) * w


def plot_device(model, *, device=None, gates=None, ax=None, length_unit: str = "nm",
                max_sites: int = DEVICE_SITES_SHOWN, lead_length: float | None = None):
    """Draw a device: its region, its gates, its leads as labelled bands, and its lattice sites.

    The region is filled (from ``device.region``, else the area its sites
    cover); gate outlines are drawn and named when a gate layout is given (or
    ``device`` is gated); each lead is a band as wide as the lead, leaving the
    device with an arrow pointing away from it, labelled ``"lead NAME (WIDTH nm)"``
    (width: the sites across the lead, each one lattice cell wide).  Sites
    are dotted when there are at most ``max_sites``; otherwise a zoomed inset
    at the first lead's mouth shows them.

    Parameters
    ----------
    model : TightBindingModel
    device : Device, optional
        Gives the exact region outline and, if gated, the gates.
    gates : GateLayout, optional
        Gates to outline (overrides the device's).
    length_unit : str
        Unit of the model's positions (``"nm"``; ``"mm"`` for a waveguide grid).
    max_sites : int
        Largest device whose sites are drawn on the main axes.
    lead_length : float, optional
        Length of the lead bands, in ``length_unit`` (default: 30 % of the device's size).

    Returns
    -------
    fig, ax
    """
    from matplotlib.lines import Line2D
    from matplotlib.patches import Patch, Polygon

    from rgftrans.plots.style import position_labels, unit_text

    own_figure = ax is None
    fig, ax = _axes(ax)
    xy = np.asarray(model.positions, dtype=float)
    a = _site_spacing(xy)
    unit = unit_text(length_unit)
    region = device.region.geometry if device is not None else _sites_outline(xy, a)
    handles = [Patch(fc=_DEVICE_FILL, ec=_DEVICE_EDGE, label=f"device ({model.n_sites} sites, {a:.3g} {unit} apart)")]
    _draw_geometry(ax, region, fc=_DEVICE_FILL, ec=_DEVICE_EDGE, lw=1.2, zorder=1)
    layout = gates if gates is not None else _gate_layout_of(device)
    if layout is not None:
        for gate in layout.gates:
            _draw_geometry(ax, gate.shape.geometry, fc=_GATE_FILL, ec=_GATE_EDGE, lw=1.2, zorder=2)
        _label_gates(ax, layout)
        handles.append(Patch(fc=_GATE_FILL, ec=_GATE_EDGE, label="surface gate"))
    xmin, ymin, xmax, ymax = region.bounds
    length = lead_length if lead_length is not None else 0.3 * max(xmax - xmin, ymax - ymin)
    corners_all = [np.array([[xmin, ymin], [xmax, ymax]])]
    labels = []
    for k, lead in enumerate(model.leads):
        colour = _LEAD_COLOURS[k % len(_LEAD_COLOURS)]
        corners, u, width, mouth = _lead_band(lead, xy, a, length)
        corners_all.append(corners)
        ax.add_patch(Polygon(corners, closed=True, fc=colour, ec=colour, alpha=0.3, lw=1.0, zorder=1))
        ax.annotate("", xy=mouth + 0.95 * length * u, xytext=mouth + 0.25 * length * u, zorder=3,
                    arrowprops=dict(arrowstyle="-|>", color=colour, lw=1.6, mutation_scale=14))
        tip = mouth + 1.02 * length * u
        ha = "left" if u[0] > 0.5 else "right" if u[0] < -0.5 else "center"
        va = "bottom" if u[1] > 0.5 else "top" if u[1] < -0.5 else "center"
        labels.append(ax.text(tip[0], tip[1], f"lead {lead.name}\n({width:.3g} {unit})", color=colour, ha=ha,
                              va=va, fontsize="small", fontweight="bold"))
    if model.n_sites <= max_sites:
        size = max(0.3, min(10.0, 3000.0 / max(model.n_sites, 1)))
        ax.scatter(xy[:, 0], xy[:, 1], s=size, c="0.3", linewidths=0, zorder=4)
        handles.append(Line2D([], [], ls="none", marker="o", ms=3, color="0.3", label="lattice site"))
    pts = np.vstack(corners_all)
    pad = 0.05 * np.ptp(pts, axis=0).max()
    ax.set_xlim(pts[:, 0].min() - pad, pts[:, 0].max() + pad)
    ax.set_ylim(pts[:, 1].min() - pad, pts[:, 1].max() + pad)
    ax.set_aspect("equal")
    if own_figure:  # a figure shaped like the drawing: no band of white above and below a wide device
        span = np.ptp(pts, axis=0) + 2 * pad
        fig.set_size_inches(6.5, float(np.clip(5.2 * span[1] / span[0] + 1.6, 2.8, 8.0)))
    _make_room_for(ax, labels, pad)
    if model.n_sites > max_sites:  # after the limits are final: the inset picks a free corner
        _site_inset(ax, model, xy, a, unit)
    xlabel, ylabel = position_labels(length_unit)
    ax.set_xlabel(xlabel)
    ax.set_ylabel(ylabel)
    fig.legend(handles=handles, loc="outside lower center", ncol=3, fontsize="small", frameon=False)
    return fig, ax


def _make_room_for(ax, texts, pad: float) -> None:
    """Widen the data limits so the given texts (lead labels beyond the bands' ends) sit inside the axes."""
    if not texts:
        return
    renderer = ax.figure.canvas.get_renderer()
    to_data = ax.transData.inverted()
    (x0, x1), (y0, y1) = ax.get_xlim(), ax.get_ylim()
    for _ in range(2):  # the text's size in data units shrinks as the limits grow: settle it in two passes
        for t in texts:
            box = t.get_window_extent(renderer).transformed(to_data)
            x0, x1 = min(x0, box.x0 - 0.3 * pad), max(x1, box.x1 + 0.3 * pad)
            y0, y1 = min(y0, box.y0 - 0.3 * pad), max(y1, box.y1 + 0.3 * pad)
        ax.set_xlim(x0, x1)
        ax.set_ylim(y0, y1)
        ax.apply_aspect()
        to_data = ax.transData.inverted()


def _site_inset(ax, model, xy: np.ndarray, spacing: float, unit: str = "nm", half_cells: int = 6) -> None:
    """A zoomed inset at the first lead's mouth with the lattice sites (for devices too large to dot)."""
    lead = model.leads[0] if model.leads else None
    centre = xy[lead.interface].mean(axis=0) if lead is not None and len(lead.interface) else xy.mean(axis=0)
    half = half_cells * spacing
    # The corner of the axes farthest from every lead's mouth, so the inset hides no lead band or label.
    to_axes = (ax.transData + ax.transAxes.inverted()).transform
    mouths = np.array([to_axes(xy[ld.interface].mean(axis=0)) for ld in model.leads if len(ld.interface)])
    corners = {(0.02, 0.64): (0.19, 0.81), (0.64, 0.64): (0.81, 0.81), (0.02, 0.02): (0.19, 0.19),
               (0.64, 0.02): (0.81, 0.19)}
    where = max(corners, key=lambda c: np.min(np.linalg.norm(mouths - corners[c], axis=1)) if len(mouths) else 0)
    inset = ax.inset_axes([where[0], where[1], 0.34, 0.34])
    near = np.all(np.abs(xy - centre) <= half, axis=1)
    inset.scatter(xy[near, 0], xy[near, 1], s=10, c="0.2", linewidths=0)
    if lead is not None:
        cell = np.asarray(lead.cell_positions)
        inset.scatter(cell[:, 0], cell[:, 1], s=10, facecolors="none", edgecolors=_LEAD_COLOURS[0], linewidths=0.8)
    inset.set_xlim(centre[0] - half, centre[0] + half)
    inset.set_ylim(centre[1] - half, centre[1] + half)
    inset.set_aspect("equal")
    inset.set_xticks([])
    inset.set_yticks([])
    inset.set_title(f"lattice sites, {spacing:.3g} {unit} apart", fontsize="x-small")
    ax.indicate_inset_zoom(inset, edgecolor="0.3")


def plot_gate_potential(layout, *, extent_nm: tuple[float, float, float, float], ax=None, resolution: int = 200,
                        cmap: str | None = None, potential=None):
    """Colour map of the electron potential energy U (meV) of a gate layout, with each gate outlined and named.

    Parameters
    ----------
    layout : GateLayout
    extent_nm : (4,) tuple of float, nm, keyword-only
        ``(xmin, ymin, xmax, ymax)`` of the window, the order of :attr:`Region.bounds`.
    ax : matplotlib Axes, optional
    resolution : int, keyword-only
        Grid points along each axis (>= 2).
    cmap : str, optional
        Colour map.  Default: sequential when U has one sign over the window
        (all repulsive or all attractive), diverging and centred on U = 0 when
        it changes sign.
    potential : callable, optional
        ``U(x, y)`` in meV to draw instead of the layout's bare potential, e.g. the 2DEG-screened
        :class:`~rgftrans.electrostatics.screening.ScreenedPotential` of these gates (the title says which).

    Returns
    -------
    fig, ax
    """
    import math

    import shapely
    from matplotlib.colors import CenteredNorm

    from rgftrans.plots.style import POTENTIAL_LABEL, position_labels, signed_colour_scale
    from rgftrans.errors import GeometryError
    from rgftrans.electrostatics.gates import GateLayout

    if not isinstance(layout, GateLayout):
        raise GeometryError(f"layout must be a GateLayout, got {type(layout).__name__}; build one with "
                            "GateLayout(gates, depth_nm)")
    try:
        xmin, ymin, xmax, ymax = (float(v) for v in extent_nm)
    except (TypeError, ValueError):
        raise GeometryError(f"extent_nm must be (xmin, ymin, xmax, ymax) in nm, got {extent_nm!r}; pass four "
                            "numbers") from None
    if not (xmin < xmax and ymin < ymax) or not all(map(math.isfinite, (xmin, ymin, xmax, ymax))):
        raise GeometryError(f"extent_nm must be finite with xmin < xmax and ymin < ymax, got {extent_nm!r}; "
                            "order it (xmin, ymin, xmax, ymax)")
    if isinstance(resolution, bool) or not isinstance(resolution, (int, np.integer)) or resolution < 2:
        raise GeometryError(f"resolution must be an integer >= 2, got {resolution!r}; e.g. 200")

    fig, ax = _axes(ax)
    which = "screened by the 2DEG" if potential is not None else "bare, unscreened"
    ax.set_title(f"gates over a 2DEG at depth {layout.depth_nm:g} nm ({which})", fontsize="medium")
    xs = np.linspace(xmin, xmax, int(resolution))
    ys = np.linspace(ymin, ymax, int(resolution))
    gx, gy = np.meshgrid(xs, ys)
    energy = np.asarray((potential or layout.potential_energy_meV)(gx, gy), dtype=float)
    auto_cmap, diverging = signed_colour_scale(energy)
    norm = CenteredNorm(vcenter=0.0) if diverging else None
    mesh = ax.pcolormesh(xs, ys, energy, shading="auto", cmap=cmap or auto_cmap, norm=norm, rasterized=True)
    fig.colorbar(mesh, ax=ax, label=POTENTIAL_LABEL, shrink=0.85)
    for gate in layout.gates:
        for part in shapely.get_parts(gate.shape.geometry):
            for ring in (part.exterior, *part.interiors):
                rx, ry = np.asarray(ring.coords).T
                ax.plot(rx, ry, color="k" if diverging else "w", lw=1.0)
    _label_gates(ax, layout)
    ax.set_xlim(xmin, xmax)
    ax.set_ylim(ymin, ymax)
    ax.set_aspect("equal")
    xlabel, ylabel = position_labels("nm")
    ax.set_xlabel(xlabel)
    ax.set_ylabel(ylabel)
    return fig, ax


def plot_transmission(result, *, ax=None, label: str | None = None, siemens_axis: bool = True):
    """Conductance G = (2e^2/h) T against energy, with the open channels of each lead.

    Parameters
    ----------
    result : TransmissionResult
    siemens_axis : bool
        Add a right-hand axis in microsiemens.
    """
    from rgftrans.plots.style import CONDUCTANCE_LABEL

    fig, ax = _axes(ax)
    ax.plot(result.energies, result.conductance_g0, lw=1.2, color="k", label=label or "G = (2e²/h) T")
    for k, name in enumerate(result.lead_names):
        ax.step(result.energies, result.n_open[:, k], where="mid", lw=0.8, ls="--",
                color=_LEAD_COLOURS[k % len(_LEAD_COLOURS)], label=f"open channels, '{name}'")
    ax.set_xlabel("energy E (meV)")
    ax.set_ylabel(CONDUCTANCE_LABEL)  # open-channel counts share the scale: G <= N in units of 2e²/h
    ax.set_ylim(bottom=0)
    ax.set_xlim(result.energies.min(), result.energies.max())
    if siemens_axis:
        _siemens_axis(ax)
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
             log: bool = False, title: str | None = None, length_unit: str = "nm", lead_word: str = "lead"):
    """Colour map of a per-site quantity over the device (equal aspect, colour bar).

    Parameters
    ----------
    model : TightBindingModel
    values : (n_sites,) float ndarray
    label : str
        Colour-bar label: the quantity and its unit in parentheses.
    log : bool
        Logarithmic colour scale (for densities spanning decades).
    length_unit : str
        Unit of the model's positions (``"mm"`` for a waveguide grid).
    """
    from matplotlib.colors import LogNorm

    from rgftrans.plots.style import position_labels

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
        ax.plot(cell[:, 0], cell[:, 1], lw=3, color=_LEAD_COLOURS[k % len(_LEAD_COLOURS)], label=f"{lead_word} '{lead.name}'",
                solid_capstyle="butt")
    ax.set_aspect("equal")
    xlabel, ylabel = position_labels(length_unit)
    ax.set_xlabel(xlabel)
    ax.set_ylabel(ylabel)
    if title:
        ax.set_title(_wrap(title, 60), fontsize="medium")
    ax.legend(loc="upper center", bbox_to_anchor=(0.5, -0.15), ncol=4, fontsize="small", frameon=False)
    return fig, ax


def site_current_vectors(model, currents) -> np.ndarray:
    """Current density vector at each site from bond currents: ``J_i = sum_j I_ij (r_j - r_i) / 2``.

    Parameters
    ----------
    currents : (n_sites, n_sites) sparse matrix from :func:`rgftrans.transport.local.bond_currents`

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
                  background_label: str = "density (1/meV)", current_unit: str = "incident flux",
                  length_unit: str = "nm"):
    """Arrows of the local current density over the device, with a key giving the arrow scale.

    The current density at a site is ``j_i = J_i / a^2`` with ``J_i`` from
    :func:`site_current_vectors` and ``a`` the nearest-site distance: for a
    uniform flow it is the current per unit width of the cross-section.

    Parameters
    ----------
    currents : (n_sites, n_sites) sparse matrix from :func:`rgftrans.transport.local.bond_currents`
    background : (n_sites,) float ndarray, optional
        A density to draw beneath the arrows (grey scale).
    current_unit : str
        What the bond currents are measured in: scattering states normalised to
        unit incoming flux give currents in units of the incident flux.
    length_unit : str
        Unit of the model's positions.

    Returns
    -------
    fig, ax
    """
    from rgftrans.plots.style import position_labels, unit_text

    if background is not None:
        fig, ax = plot_map(model, background, ax=ax, cmap="Greys", label=background_label, length_unit=length_unit)
    else:
        fig, ax = _axes(ax)
        ax.set_aspect("equal")
        xlabel, ylabel = position_labels(length_unit)
        ax.set_xlabel(xlabel)
        ax.set_ylabel(ylabel)
    xy = model.positions
    a = _site_spacing(xy)
    vec = site_current_vectors(model, currents) / a**2
    stride = max(1, int(np.ceil(np.sqrt(len(xy) / max_arrows))))
    # Keep arrows on a coarse sub-grid so the map stays readable.
    grid = np.round(xy / (a * stride)).astype(int)
    _, pick = np.unique(grid, axis=0, return_index=True)
    mag = np.linalg.norm(vec[pick], axis=1)
    top = float(mag.max()) if mag.size else 0.0
    arrows = ax.quiver(xy[pick, 0], xy[pick, 1], vec[pick, 0], vec[pick, 1], mag, cmap="viridis", pivot="middle",
                       angles="xy", scale_units="xy", scale=top / (a * stride * 1.2) if top > 0 else 1.0,
                       width=0.003)
    if top > 0:
        ref = _round_down(top)
        # Below the axes at the right, clear of the title, the x label and the legend.
        ax.quiverkey(arrows, 0.78, -0.13, ref, f"{ref:.2g} {current_unit}/{unit_text(length_unit)}",
                     labelpos="E", coordinates="axes", fontproperties={"size": "small"})
    return fig, ax


def _round_down(value: float) -> float:
    """The largest 1, 2 or 5 times a power of ten not above ``value`` (a readable key length)."""
    exp = np.floor(np.log10(value))
    for m in (5.0, 2.0, 1.0):
        if m * 10**exp <= value:
            return float(m * 10**exp)
    return float(10**exp)


def _stored_conductance(data, p_out: int, q_in: int):
    """G(*axes, mu, temperature) in 2e^2/h from lead q_in into lead p_out, and the temperatures (K).

    Files with stored finite-temperature conductances give them directly;
    files holding only the transmission give G = (g_s/2) T at 0 K.
    """
    if "conductance" in data.quantities and "temperature" in data.coordinates:
        g = data.quantities["conductance"][..., p_out, q_in]
        return np.asarray(g, dtype=float), np.asarray(data.coordinates["temperature"].values, dtype=float)
    g_s = data.require_attr("spin_degeneracy", "whether the transmission is per spin")
    g = data.quantities["transmission"][..., p_out, q_in] * (0.5 * g_s)
    return np.asarray(g, dtype=float)[..., None], np.zeros(1)


def _pick_temperatures(path, temps: np.ndarray, wanted) -> list[int]:
    """Indices of the stored temperatures to draw; ``wanted`` None means all of them."""
    from rgftrans.errors import StoreError

    if wanted is None:
        return list(range(len(temps)))
    out = []
    for value in np.atleast_1d(np.asarray(wanted, dtype=float)):
        hit = np.flatnonzero(np.isclose(temps, value, rtol=1e-6, atol=1e-9))
        if not np.isfinite(value) or hit.size == 0:
            held = ", ".join(f"{t:g}" for t in temps)
            raise StoreError(f"{path}: no conductance stored at temperature {value:g} K; it holds {held} K "
                             "(add the temperature to [temperature] kelvin and run again)")
        out.append(int(hit[0]))
    return out


def _pick_energy(path, data, energy) -> int:
    """Index of the stored energy nearest ``energy`` (meV); default: the Fermi energy if stored, else the middle."""
    from rgftrans.errors import EnergyError

    energies = data.energies_meV
    lo, hi = float(energies.min()), float(energies.max())
    if energy is None:
        e_f = data.attrs.get("fermi_energy_meV", float("nan"))
        energy = e_f if isinstance(e_f, (int, float)) and np.isfinite(e_f) and lo <= e_f <= hi else \
            float(energies[len(energies) // 2])
    try:
        value = float(energy)
    except (TypeError, ValueError):
        raise EnergyError(f"energy must be a number in meV, got {energy!r}") from None
    step = float(np.min(np.abs(np.diff(energies)))) if len(energies) > 1 else 0.0
    if not np.isfinite(value) or not lo - 0.5 * step <= value <= hi + 0.5 * step:
        raise EnergyError(f"energy {value:g} meV is outside the stored energies of {path} ({lo:g} to {hi:g} meV, "
                          f"{len(energies)} points); pick one in that range")
    return int(np.argmin(np.abs(energies - value)))


def plot_result(path, *, lead_out: str | None = None, lead_in: str | None = None, energy: float | None = None,
                temperature_K=None, over_energy: bool = False, ax=None):
    """Stored conductance of a result file, as lines or maps, at the stored temperatures.

    What is drawn (points not yet computed are blank):

    * no sweep axis: G against the chemical potential mu, one line per temperature;
    * one sweep axis: G against the swept parameter at one energy, one line per
      temperature; with ``over_energy``, a map of G over (mu, parameter);
    * two or more sweep axes: the map G(p1, p2) at one energy and one
      temperature, first parameter on x (the map measured in the lab); with
      ``over_energy``, a map over (mu, p1).  Further axes are shown at their
      first value.

    G is the stored finite-temperature conductance G(mu, T) from ``lead_in``
    (default the first lead) into ``lead_out`` (default the second), in 2e²/h.

    Parameters
    ----------
    path : str or os.PathLike
    energy : float, optional, meV
        Chemical potential for plots over sweep parameters (nearest stored
        energy; default: the Fermi energy when stored, else the middle of the
        grid).  Must lie in the stored range.
    temperature_K : float or sequence of float, optional
        Stored temperature(s) to draw; default all of them for lines and the
        lowest for maps.
    over_energy : bool
        Plot against energy (chemical potential) instead of the parameters.

    Returns
    -------
    fig, ax
    """
    from rgftrans.plots.style import CONDUCTANCE_LABEL, axis_display, format_value, readable_ticks
    from rgftrans.errors import EnergyError, StoreError
    from rgftrans.io.store import read_result
    from rgftrans.system.device import lead_index

    data = read_result(path)
    if not np.any(data.completed):
        raise StoreError(f"no completed sweep point in {path}; run `rgftrans run CONFIG` first")
    names = list(data.lead_names)

    def pick(name, default):
        return default if name is None else lead_index(names, name, owner=f"{path}")

    q_in = pick(lead_in, 0)
    p_out = pick(lead_out, 1 if len(names) > 1 else 0)
    g, temps = _stored_conductance(data, p_out, q_in)
    g = np.where(np.asarray(data.completed)[(...,) + (None,) * 2], g, np.nan)  # blank what is not computed
    axes = list(data.axes)
    n_plot = min(len(axes), 1 if over_energy else 2)
    notes = [f"{names[q_in]} → {names[p_out]}"]
    fixed = [axis_display(a.name, a.units, a.values[:1], long_name=a.long_name) for a in axes[n_plot:]]
    for a, (label, value) in zip(axes[n_plot:], fixed):
        notes.append(f"{label.split(' (')[0]} = {format_value(a.values[0], a.units)}")
    g = g[(slice(None),) * n_plot + (0,) * (len(axes) - n_plot)]
    axes = axes[:n_plot]
    if over_energy and energy is not None:
        raise EnergyError("give either an energy (a cut at one chemical potential) or over_energy (plot against "
                          "energy), not both")
    t_idx = _pick_temperatures(path, temps, temperature_K)
    is_map = (over_energy and n_plot == 1) or (not over_energy and n_plot == 2)
    if is_map:
        t_idx = t_idx[:1] if temperature_K is not None else [int(np.argmin(temps))]
    mu_label = "chemical potential μ (meV)"
    energies = data.energies_meV
    fig, ax = _axes(ax)
    if not is_map:
        if n_plot == 0 or over_energy:
            x, xlabel, curves = energies, mu_label, g
        else:
            k = _pick_energy(path, data, energy)
            xlabel, x = axis_display(axes[0].name, axes[0].units, axes[0].values, long_name=axes[0].long_name)
            curves = g[:, k, :]
            notes.append(f"μ = {energies[k]:.4g} meV")
        for j, style in zip(t_idx, _LINE_STYLES * (len(t_idx) // len(_LINE_STYLES) + 1)):
            ax.plot(x, curves[:, j], ls=style, marker="o" if len(x) < 30 else None, ms=3, lw=1.3,
                    color=_temperature_colour(j, len(temps)), label=f"{temps[j]:g} K")
        top = np.nanmax(curves[:, t_idx]) if np.isfinite(curves[:, t_idx]).any() else 1.0
        ax.set_xlabel(xlabel)
        ax.set_ylabel(CONDUCTANCE_LABEL)
        ax.set_ylim(0, 1.12 * top if top > 0 else 1.0)  # headroom for the legend
        ax.set_xlim(np.nanmin(x), np.nanmax(x))
        ax.legend(title="temperature", fontsize="small", frameon=False)
        _siemens_axis(ax)
    else:
        j = t_idx[0]
        notes.append(f"T = {temps[j]:g} K")
        if over_energy:
            ylabel, y = axis_display(axes[0].name, axes[0].units, axes[0].values, long_name=axes[0].long_name)
            x, xlabel, z = energies, mu_label, g[..., j]
        else:
            k = _pick_energy(path, data, energy)
            xlabel, x = axis_display(axes[0].name, axes[0].units, axes[0].values, long_name=axes[0].long_name)
            ylabel, y = axis_display(axes[1].name, axes[1].units, axes[1].values, long_name=axes[1].long_name)
            z = g[:, :, k, j].T  # rows: second parameter (y), columns: first parameter (x)
            notes.append(f"μ = {energies[k]:.4g} meV")
        mesh = ax.pcolormesh(x, y, np.ma.masked_invalid(z), shading="nearest", cmap="viridis", rasterized=True)
        fig.colorbar(mesh, ax=ax, label=CONDUCTANCE_LABEL)
        ax.set_xlabel(xlabel)
        ax.set_ylabel(ylabel)
    readable_ticks(ax)
    done, total = int(np.count_nonzero(data.completed)), int(np.size(data.completed))
    if done < total:
        notes.append(f"{done}/{total} points computed")
    ax.set_title(_wrap(", ".join(notes)), fontsize="medium")
    return fig, ax


#: Line styles of successive temperatures (colour changes too, so they read in grey print).
_LINE_STYLES = ("-", "--", "-.", ":")


def _temperature_colour(j: int, n: int):
    import matplotlib

    return matplotlib.colormaps["plasma"](0.85 * j / max(n - 1, 1))


def _wrap(text: str, width: int = 70) -> str:
    import textwrap

    return "\n".join(textwrap.wrap(text, width)) or text


def _siemens_axis(ax) -> None:
    """A right-hand axis in microsiemens beside an axis in 2e²/h."""
    from rgftrans.plots.style import CONDUCTANCE_SIEMENS_LABEL
    from rgftrans.system.materials import CONDUCTANCE_QUANTUM_S

    scale = CONDUCTANCE_QUANTUM_S * 1e6
    sec = ax.secondary_yaxis("right", functions=(lambda g: g * scale, lambda s: s / scale))
    sec.set_ylabel(CONDUCTANCE_SIEMENS_LABEL)


def plot_width_track(search, *, ax=None):
    """Resonance width against the sweep parameter on a log scale, located BICs marked."""
    from rgftrans.plots.style import axis_scale, parameter_unit

    fig, ax = _axes(ax)
    t = search.track
    xlabel, factor = axis_scale(search.axis_name, parameter_unit(search.axis_name), t.parameters)
    x = np.asarray(t.parameters, dtype=float) * factor
    ax.semilogy(x, np.maximum(t.widths_meV, 1e-300), "o-", ms=3, lw=1, color="k", label="width Γ")
    for loc in search.bics:
        if np.ndim(loc.parameter) == 0:
            p = loc.parameter * factor
            ax.axvline(p, color="tab:red", lw=0.8, ls="--")
            ax.plot([p], [max(loc.width_meV, 1e-300)], "v", color="tab:red",
                    label=f"BIC at {p:.6g} ({loc.kind})")
    ax.set_xlabel(xlabel)
    ax.set_ylabel("resonance width Γ (meV)")
    ax.legend(fontsize="small", frameon=False)
    return fig, ax


def plot_track_on_map(path, search, *, ax=None):
    """T(E, parameter) from a result file with the tracked resonance energy drawn over it."""
    from rgftrans.plots.style import axis_scale
    from rgftrans.io.store import read_result

    data = read_result(path)
    fig, ax = _axes(ax)
    trans = data.quantities["transmission"][..., 1, 0]
    trans = trans.reshape(len(data.axes[0].values), -1, trans.shape[-1])[:, 0, :]
    a0 = data.axes[0]
    xlabel, factor = axis_scale(a0.name, a0.units, a0.values, long_name=a0.long_name)
    x = a0.values * factor
    mesh = ax.pcolormesh(x, data.energies_meV, np.ma.masked_invalid(trans.T), shading="nearest", cmap="viridis")
    fig.colorbar(mesh, ax=ax, label="transmission T (1)")
    ax.plot(np.asarray(search.track.parameters) * factor, search.track.energies_meV, color="w", lw=1.2, ls="--",
            label="tracked pole")
    for loc in search.bics:
        if np.ndim(loc.parameter) == 0:
            ax.plot([loc.parameter * factor], [loc.energy_meV], "o", mfc="none", mec="tab:red", ms=9, label="BIC")
    ax.set_xlabel(xlabel)
    ax.set_ylabel("energy E (meV)")
    ax.legend(fontsize="small", loc="upper right")
    return fig, ax


def plot_bic_plane(search, *, seed: int | None = None, ax=None, units: tuple[str, str] | None = None,
                   state_text=None):
    """Coupling of a followed state over the parameter plane: where each lead's coupling vanishes, and the BICs.

    Colour: log10 of the residual length |r| (unit-normalised couplings, 0 at a
    BIC); solid and dashed lines: the zero lines of the first and second
    channel's coupling; stars: located BICs of that state.

    Parameters
    ----------
    units : (str, str), optional
        Units of the two parameters (default: read from their config keys).
    state_text : callable, optional
        ``state_text(value)`` describes a state's stored energy-like value in
        words with its unit (default: ``"E = ... meV"``; the waveguide passes
        a frequency in GHz).
    """
    from rgftrans.plots.style import axis_scale, parameter_unit

    fig, ax = _axes(ax)
    if seed is None:
        seed = search.seed_of_bic[0] if search.bics else 0
    if state_text is None:
        state_text = lambda e: f"E = {e:.4f} meV"  # noqa: E731
    units = units or (parameter_unit(search.names[0]), parameter_unit(search.names[1]))
    xlabel, f1 = axis_scale(search.names[0], units[0], search.p1)
    ylabel, f2 = axis_scale(search.names[1], units[1], search.p2)
    p1, p2 = np.asarray(search.p1) * f1, np.asarray(search.p2) * f2
    res = search.residuals[seed]
    norm = np.linalg.norm(res, axis=-1)
    mesh = ax.pcolormesh(p1, p2, np.ma.masked_invalid(np.log10(np.maximum(norm, 1e-16))).T,
                         shading="nearest", cmap="cividis")
    fig.colorbar(mesh, ax=ax, label="log10 |coupling residual| (1)")
    handles = []
    for k, ls in ((0, "-"), (1, "--")):
        if np.isfinite(res[..., k]).sum() >= 4:
            ax.contour(p1, p2, np.ma.masked_invalid(res[..., k]).T, levels=[0.0], colors="w",
                            linestyles=ls, linewidths=1.2)
            lead, c = search.channels[k] if search.channels else ("lead", k)
            handles.append(_legend_line(ls, f"no coupling to {lead} (channel {c})"))
    for bic, s in zip(search.bics, search.seed_of_bic):
        if s == seed:
            ax.plot([bic.parameter[0] * f1], [bic.parameter[1] * f2], "*", ms=14, mfc="tab:red", mec="w",
                    label=f"BIC, {state_text(bic.energy_meV)}")
    ax.set_xlabel(xlabel)
    ax.set_ylabel(ylabel)
    ax.legend(handles=handles + ax.get_legend_handles_labels()[0], fontsize="small", loc="upper right")
    ax.set_title(f"state followed from {state_text(search.seeds_meV[seed])}", fontsize="medium")
    return fig, ax


def _legend_line(ls: str, label: str):
    """A legend entry for a white contour line (drawn dark so it shows on the legend's white background)."""
    from matplotlib.lines import Line2D

    return Line2D([], [], color="k", ls=ls, label=label)


def plot_fano_collapse(collapse, *, name: str = "p1", axes=None):
    """T(E) beside a BIC and at it, and the pole width against the distance: draws a computed collapse.

    Left: the Fano line narrows as ``(p - p*)^2`` and is gone at ``p*``.
    Right: pole width against ``|p - p*|`` on log-log axes with a slope-2 guide.

    Parameters
    ----------
    collapse : rgftrans.analysis.darkstates.FanoCollapse
        From :func:`rgftrans.analysis.darkstates.fano_collapse`.
    name : str
        The first parameter's sweep key (its physical name and, if the collapse carries none, its unit).

    Returns
    -------
    fig, axes
    """
    import matplotlib.pyplot as plt

    from rgftrans.plots.style import parameter_name, parameter_unit, unit_text

    shown = unit_text(collapse.parameter_unit or parameter_unit(name))
    long_name = parameter_name(name)
    if axes is None:
        fig, axes = plt.subplots(1, 2, figsize=(10, 4), layout="constrained")
    else:
        fig = axes[0].figure
    for shift, width, t in zip(collapse.shifts, collapse.line_widths_meV, collapse.transmissions):
        label = (f"p* + {shift:.3g}{' ' + shown if shown else ''}: Γ = {width:.2e} meV" if shift != 0
                 else "p* (BIC): no line")
        axes[0].plot(collapse.offsets_meV * 1e3, t, lw=1.2, label=label)
    axes[0].set_xlabel("E − Re z (µeV), z the pole at each parameter")
    axes[0].set_title(f"T(E) as the {long_name} p approaches its value p* at the BIC", fontsize="medium")
    axes[0].set_ylabel("transmission T")
    axes[0].set_ylim(-0.02, 1.02)
    axes[0].legend(fontsize="small", frameon=False)
    d, widths = collapse.distances, collapse.widths_meV
    axes[1].loglog(d, np.maximum(widths, 1e-300), "o", color="k", ms=4, label="pole width")
    axes[1].loglog(d, widths[-1] * (d / d[-1]) ** 2, color="tab:red", lw=0.8, ls="--", label="∝ |p − p*|²")
    axes[1].set_xlabel(f"distance from the BIC |p − p*|, p = {long_name}" + (f" ({shown})" if shown else ""))
    axes[1].set_ylabel("resonance width Γ (meV)")
    axes[1].legend(fontsize="small", frameon=False)
    return fig, axes


def plot_density(solution, *, layout=None, regions=None, ax=None):
    """Electron density of a screened 2DEG (10^11 cm^-2) with the depletion boundary and the gates' outlines.

    ``solution`` is a :class:`rgftrans.electrostatics.screening.ScreenedPotential`; ``layout`` the gates;
    ``regions`` an optional mapping of name to Region (e.g. the config's dots), drawn dashed and named.
    """
    own_figure = ax is None
    fig, ax = _axes(ax)
    if own_figure:  # shaped like the map, with room for the colour bar and the gate key
        aspect = np.ptp(solution.x_nm) / max(np.ptp(solution.y_nm), 1e-9)
        fig.set_size_inches(float(np.clip(4.6 * aspect + 2.0, 5.0, 10.0)), 6.0)
    density = np.asarray(solution.density_cm2) / 1e11
    mesh = ax.pcolormesh(solution.x_nm, solution.y_nm, density, shading="nearest", cmap="viridis", vmin=0.0,
                         rasterized=True)
    fig.colorbar(mesh, ax=ax, label="electron density (10¹¹ cm⁻²)", shrink=0.85)
    depleted = np.asarray(solution.depleted)
    if depleted.any() and not depleted.all():
        ax.contour(solution.x_nm, solution.y_nm, (~depleted).astype(float), levels=[0.5], colors="w",
                   linewidths=1.0)
    for name, region in (regions or {}).items():
        _draw_geometry(ax, region.geometry, fc="none", ec="tab:orange", lw=1.1, ls="--", zorder=4)
        x0, y0, x1, y1 = region.geometry.bounds
        ax.annotate(name, (0.5 * (x0 + x1), y1), ha="center", va="bottom", fontsize="small", color="tab:orange",
                    zorder=5, annotation_clip=True)
    if layout is not None:  # numbered outlines, names and voltages in a key beside the map (narrow fingers)
        from rgftrans.plots.style import format_value

        key = []
        for k, gate in enumerate(layout.gates, start=1):
            _draw_geometry(ax, gate.shape.geometry, fc="none", ec="0.85", lw=0.9, zorder=3)
            at = gate.shape.geometry.representative_point()
            ax.annotate(str(k), (at.x, at.y), ha="center", va="center", fontsize="small", color="k", zorder=5,
                        annotation_clip=True, bbox=dict(boxstyle="circle,pad=0.15", fc="w", ec="none", alpha=0.8))
            key.append(f"{k} {gate.name} {format_value(gate.voltage, 'V')}")
        from matplotlib.lines import Line2D

        handles = [Line2D([], [], ls="none", marker=f"${k}$", ms=7, color="k", label=text.split(" ", 1)[1])
                   for k, text in enumerate(key, start=1)]
        fig.legend(handles=handles, loc="outside lower center", ncol=3, fontsize="small", frameon=False,
                   title="gates", title_fontsize="small")
    ax.set_xlim(solution.x_nm[0], solution.x_nm[-1])
    ax.set_ylim(solution.y_nm[0], solution.y_nm[-1])
    ax.set_aspect("equal")
    ax.set_xlabel("x position (nm)")
    ax.set_ylabel("y position (nm)")
    return fig, ax


def plot_spectrum(spectrum, *, cutoffs_GHz=(), ax=None, title: str | None = None):
    """Power transmission, reflection and absorption of a waveguide against frequency (GHz).

    Parameters
    ----------
    spectrum : rgftrans.analysis.light.Spectrum
    cutoffs_GHz : sequence of float
        Port cutoff frequencies to mark (dash-dot lines) where they fall in the band.

    Returns
    -------
    fig, ax
    """
    fig, ax = _axes(ax)
    f = spectrum.frequencies_GHz
    names = spectrum.port_names
    ax.plot(f, spectrum.matrix[:, 1, 0], lw=1.2, label=f"transmitted, {names[0]} → {names[1]}")
    ax.plot(f, spectrum.matrix[:, 0, 0], lw=1.0, ls="--", label=f"reflected at {names[0]}")
    if np.abs(spectrum.absorption).max() > 1e-9:
        ax.plot(f, spectrum.absorption[:, 0], lw=1.0, ls=":", label="absorbed")
    marked = False
    for fc in cutoffs_GHz:
        if f[0] <= fc <= f[-1]:
            ax.axvline(fc, color="0.6", lw=0.8, ls="-.", label=None if marked else "port cutoff")
            marked = True
    ax.set_xlabel("frequency (GHz)")
    ax.set_ylabel("power fraction (1)")
    ax.set_xlim(f[0], f[-1])
    if title:
        ax.set_title(_wrap(title, 60), fontsize="medium")
    ax.legend(frameon=False, fontsize="small")
    return fig, ax


def plot_waveguide_field(model, magnitude, *, label: str, title: str | None = None, ax=None):
    """``|E_z|`` over a waveguide grid: positions in the waveguide's own length unit (mm or µm).

    Parameters
    ----------
    model : rgftrans.system.photonic.PhotonicModel
    magnitude : (n_nodes,) float ndarray
    label : str
        Colour-bar label with its unit, e.g. ``"|E_z| / incident peak (1)"``.
    """
    return plot_map(model.model, magnitude, label=label, cmap="inferno", title=title, length_unit=model.unit, ax=ax,
                    lead_word="port")

