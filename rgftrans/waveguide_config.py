"""TOML files for photonic waveguides (``rgftrans waveguide CONFIG``), and running them.

Layout (lengths in the ``unit`` of ``[waveguide]``, mm or um; frequencies in GHz)::

    [waveguide]
    unit = "mm"
    spacing = 0.4                       # grid spacing
    background_permittivity = 1.0       # filling outside the dielectric pieces
    enclosure = { rectangle = [0.0, 0.0, 30.0, 16.0] }   # inside of the metal walls

    [[waveguide.dielectric]]            # any number; later ones cover earlier ones
    name = "insert"
    disk = [15.0, 8.0, 4.0]             # or rectangle = [x0, y0, x1, y1], polygon = [[x, y], ...]
    permittivity = 6.0
    loss_tangent = 0.0                  # optional

    [[waveguide.port]]                  # two or more
    name = "inlet"
    side = "left"
    span = [9.0, 16.0]                  # the port's two walls along that side
    permittivity = 1.0                  # optional filling (lossless)

    [frequency]                         # or start_um / stop_um: vacuum wavelengths
    start_GHz = 21.0
    stop_GHz = 26.0
    points = 501

    [[search.axis]]                     # optional, exactly two: the plane of a dark-state search
    parameter = "dielectric.insert.permittivity"   # or dielectric.<name>.shift_x / shift_y (unit)
    start = 5.0
    stop = 7.0
    points = 7

    [output]
    path = "out/guide.h5"
"""

from __future__ import annotations

import os
import tomllib
from pathlib import Path
from typing import Annotated, Literal

import numpy as np
import scipy.constants as const
import shapely.affinity
from pydantic import Field, PrivateAttr, ValidationError, model_validator

from .config import ConfigError, Pair, _one_shape, _problem, _Table, _toml_message, _translate
from .geometry import Region
from .photonic import Dielectric, Port, Waveguide

__all__ = ["WaveguideConfig", "load_waveguide", "parse_waveguide", "is_waveguide_config", "run_waveguide"]

class _Shape(_Table):
    rectangle: Annotated[list[float], Field(min_length=4, max_length=4)] | None = None
    polygon: Annotated[list[Pair], Field(min_length=3)] | None = None
    disk: Annotated[list[float], Field(min_length=3, max_length=3)] | None = None

    _region: Region | None = PrivateAttr(default=None)

    @model_validator(mode="after")
    def _one(self):
        self._region = _one_shape(self, "give exactly one shape per table", suffix="",
                                  unit="in the [waveguide] unit")
        return self

    def region(self) -> Region:
        assert self._region is not None  # set by validation
        return self._region


class _DielectricSpec(_Shape):
    name: str
    permittivity: Annotated[float, Field(gt=0)]
    loss_tangent: Annotated[float, Field(ge=0)] = 0.0


class _PortSpec(_Table):
    name: str
    side: Literal["left", "right", "bottom", "top"]
    span: Annotated[list[float], Field(min_length=2, max_length=2)]
    permittivity: Annotated[float, Field(gt=0)] = 1.0


class _WaveguideSpec(_Table):
    unit: Literal["mm", "um"] = "mm"
    spacing: Annotated[float, Field(gt=0)]
    background_permittivity: Annotated[float, Field(gt=0)] = 1.0
    enclosure: _Shape
    dielectric: list[_DielectricSpec] = []
    port: Annotated[list[_PortSpec], Field(min_length=2)]

    @model_validator(mode="after")
    def _names(self):
        for kind, items in (("port", self.port), ("dielectric", self.dielectric)):
            names = [x.name for x in items]
            dup = sorted({n for n in names if names.count(n) > 1})
            if dup:
                raise _problem(f"{kind} names must be unique, got {dup[0]!r} twice; rename one")
        return self


class _FrequencySpec(_Table):
    """The band: frequencies in GHz, or vacuum wavelengths in um (points evenly spaced in what is given)."""

    start_GHz: Annotated[float, Field(gt=0)] | None = None
    stop_GHz: Annotated[float, Field(gt=0)] | None = None
    start_um: Annotated[float, Field(gt=0)] | None = None
    stop_um: Annotated[float, Field(gt=0)] | None = None
    points: Annotated[int, Field(ge=2)]

    @model_validator(mode="after")
    def _order(self):
        ghz = (self.start_GHz, self.stop_GHz)
        um = (self.start_um, self.stop_um)
        if (None in ghz) == (None in um) or (any(v is not None for v in ghz) and any(v is not None for v in um)):
            raise _problem("give the band either as start_GHz and stop_GHz or as start_um and stop_um (vacuum "
                           "wavelengths), not both and not half of one")
        lo, hi = ghz if None not in ghz else um
        if hi <= lo:
            raise _problem(f"the band's stop must exceed its start, got {lo} and {hi}; swap them")
        return self

    def values_GHz(self) -> np.ndarray:
        if self.start_GHz is not None:
            return np.linspace(self.start_GHz, self.stop_GHz, self.points)
        wavelengths_m = np.linspace(self.start_um, self.stop_um, self.points) * 1e-6
        return np.sort(const.c / wavelengths_m / 1e9)


class _AxisSpec(_Table):
    parameter: str
    start: float
    stop: float
    points: Annotated[int, Field(ge=2)]


class _SearchSpec(_Table):
    axis: Annotated[list[_AxisSpec], Field(min_length=2, max_length=2)]


class _OutputSpec(_Table):
    path: str


class WaveguideConfig(_Table):
    """A validated waveguide TOML file (see the module docstring)."""

    waveguide: _WaveguideSpec
    frequency: _FrequencySpec
    search: _SearchSpec | None = None
    output: _OutputSpec | None = None

    @model_validator(mode="after")
    def _parameters(self):
        if self.search is not None:
            names = {d.name for d in self.waveguide.dielectric}
            for ax in self.search.axis:
                parts = ax.parameter.split(".")
                if len(parts) != 3 or parts[0] != "dielectric" or parts[2] not in (
                        "permittivity", "shift_x", "shift_y"):
                    raise _problem(f"search parameter {ax.parameter!r} is not one of dielectric.<name>.permittivity,"
                                   " dielectric.<name>.shift_x, dielectric.<name>.shift_y")
                if parts[1] not in names:
                    raise _problem(f"search parameter {ax.parameter!r} names no dielectric; the dielectrics are "
                                   f"{sorted(names)}")
        return self

    def frequencies_GHz(self) -> np.ndarray:
        return self.frequency.values_GHz()

    def axes(self) -> list[tuple[str, np.ndarray]]:
        return [] if self.search is None else [(a.parameter, np.linspace(a.start, a.stop, a.points))
                                               for a in self.search.axis]

    def build(self, point: dict[str, float] | None = None) -> Waveguide:
        """The waveguide, with search parameters set from ``point`` (name -> value)."""
        point = point or {}
        w = self.waveguide
        pieces = []
        for d in w.dielectric:
            region = d.region()
            eps = point.get(f"dielectric.{d.name}.permittivity", d.permittivity)
            dx, dy = point.get(f"dielectric.{d.name}.shift_x", 0.0), point.get(f"dielectric.{d.name}.shift_y", 0.0)
            if dx or dy:
                region = Region(shapely.affinity.translate(region.geometry, dx, dy))
            pieces.append(Dielectric(region, eps, d.loss_tangent, d.name))
        ports = [Port(p.name, p.side, tuple(p.span), p.permittivity) for p in w.port]
        return Waveguide(w.enclosure.region(), ports, w.spacing, w.unit, pieces, w.background_permittivity)


def is_waveguide_config(path) -> bool:
    """Whether a TOML file describes a waveguide (has a [waveguide] table)."""
    try:
        return "waveguide" in tomllib.loads(Path(path).read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, tomllib.TOMLDecodeError):
        return False


def parse_waveguide(text: str, *, source: str = "<string>") -> WaveguideConfig:
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as error:
        raise ConfigError(_toml_message(source, text, error)) from None
    try:
        cfg = WaveguideConfig.model_validate(data)
    except ValidationError as error:
        errors = sorted(error.errors(include_url=False), key=lambda e: e["type"] != "extra_forbidden")
        problems = tuple(_translate(e, WaveguideConfig) for e in errors)
        more = f" (+{len(problems) - 1} more)" if len(problems) > 1 else ""
        raise ConfigError(f"{source}: {problems[0]}{more}", problems=tuple(f"{source}: {p}" for p in problems)) from None
    return cfg


def load_waveguide(path) -> tuple[WaveguideConfig, str]:
    """Read and validate a waveguide TOML file; returns the config and its text."""
    file = Path(path)
    try:
        text = file.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as error:
        reason = getattr(error, "strerror", None) or type(error).__name__
        raise ConfigError(f"{file}: cannot read the config ({reason}); give a readable UTF-8 TOML file") from None
    return parse_waveguide(text, source=str(file)), text


def _write_h5(path: Path, text: str, pm, spectrum, search=None) -> None:
    """Everything into one HDF5 file, written beside the target and renamed over it (never half-written)."""
    import h5py

    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_name(path.name + ".partial")
    with h5py.File(tmp, "w") as f:
        f.attrs["format"] = "rgftrans-waveguide"
        f.create_dataset("config", data=text)
        g = f.create_group("waveguide")
        g.attrs["ports"] = " ".join(spectrum.port_names)
        g.attrs["spacing"], g.attrs["unit"] = pm.spacing, pm.unit
        freq = g.create_dataset("frequency", data=spectrum.frequencies_GHz)
        freq.attrs["units"], freq.attrs["long_name"] = "GHz", "frequency"
        freq.make_scale("frequency")
        for key, data, units, long in (
                ("transmission", spectrum.transmission, "1",
                 "power transmission [frequency, port_out, port_in]; diagonal: reflection"),
                ("n_open", spectrum.n_open, "1", "propagating modes of each port"),
                ("absorption", spectrum.absorption, "1", "absorbed fraction per input port: N - sum_out T")):
            ds = g.create_dataset(key, data=data)
            ds.attrs["units"], ds.attrs["long_name"] = units, long
            ds.dims[0].attach_scale(freq)
        for k, name in enumerate(spectrum.port_names):
            ds = g.create_dataset(f"cutoffs/{name}", data=pm.cutoffs_GHz(k, 4))
            ds.attrs["units"], ds.attrs["long_name"] = "GHz", f"cutoff frequencies of port {name} on this grid"
    if search is not None:
        from .bic2d import write_grid_search

        write_grid_search(search, tmp, group="waveguide/darkstates", energy_units="1",
                          energy_name="eigenvalue lambda = (k0 a)^2",
                          parameter_units=tuple("1" if n.endswith("permittivity") else pm.unit for n in search.names))
    os.replace(tmp, path)


def run_waveguide(config_path, *, out_prefix=None, output=None, quiet=False) -> int:
    """``rgftrans waveguide CONFIG``: spectrum, field map at the sharpest resonance, dark-state search."""
    import matplotlib

    matplotlib.use("Agg")
    from .darkstates import find_resonances
    from .errors import ResolutionWarning
    from .plots import plot_bic_plane, plot_map

    say = (lambda *a: None) if quiet else print
    cfg, text = load_waveguide(config_path)
    freqs = cfg.frequencies_GHz()
    pm = cfg.build().discretise()
    say(f"{config_path}: {pm.model.n_sites} grid nodes, spacing {pm.spacing} {pm.unit}; "
        + "; ".join(f"port {lead.name!r} cutoffs " + ", ".join(f"{f:.4g}" for f in pm.cutoffs_GHz(k, 2)) + " GHz"
                    for k, lead in enumerate(pm.model.leads)))
    spectrum = pm.spectrum(freqs)
    t = spectrum.transmission[:, 1, 0]
    say(f"  T from {spectrum.port_names[0]!r} to {spectrum.port_names[1]!r}: {len(freqs)} frequencies "
        f"{freqs[0]:g}-{freqs[-1]:g} GHz, T between {t.min():.3g} and {t.max():.3g}; "
        f"max absorption {spectrum.absorption.max():.3g}")
    prefix = Path(out_prefix or Path(config_path).with_suffix(""))
    prefix.parent.mkdir(parents=True, exist_ok=True)
    fig, ax = _plot_spectrum(pm, spectrum)
    fig.savefig(f"{prefix}_spectrum.png", dpi=150)
    import warnings

    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ResolutionWarning)
        lines = find_resonances(freqs, t)
    if lines and not pm.is_lossy:
        sharp = min(lines, key=lambda fit: fit.width_meV)
        res = min(pm.resonances(sharp.energy_meV, count=3), key=lambda r: abs(r.frequency_GHz - sharp.energy_meV))
        spacing = float(np.median(np.diff(freqs)))
        if res.width_GHz < 3 * spacing:
            warnings.warn(f"the line at {res.frequency_GHz:.6g} GHz is {res.width_GHz:.2g} GHz wide but the frequency "
                          f"grid spacing is {spacing:.2g} GHz: T(f) does not resolve it (its Q comes from the pole); "
                          "add points around it to see its shape", ResolutionWarning, stacklevel=2)
        fm = pm.field_map(res.frequency_GHz, 0, 0)
        say(f"  sharpest line in T(f) near {sharp.energy_meV:.5g} GHz: pole at {res.frequency_GHz:.6g} GHz, "
            f"Q = {res.q_factor:.4g}; field enhancement {fm.enhancement:.3g} x the incident peak")
        fig, ax = plot_map(pm.model, np.abs(fm.field), label="|E_z| / incident peak", cmap="inferno",
                           title=f"|E_z| at {res.frequency_GHz:.5g} GHz (Q = {res.q_factor:.3g}), "
                                 f"from port {spectrum.port_names[0]!r}")
        ax.set_xlabel(f"x ({pm.unit})")
        ax.set_ylabel(f"y ({pm.unit})")
        fig.savefig(f"{prefix}_field.png", dpi=150)
    search = None
    if cfg.search is not None:
        search = _search(cfg, pm, freqs, say, progress=not quiet)
        if search.bics:
            fig, _ = plot_bic_plane(search)
            fig.savefig(f"{prefix}_plane.png", dpi=150)
            bic = search.bics[0]
            pmb = cfg.build(dict(zip(search.names, bic.parameter))).discretise()
            e_z = bic.state / np.sqrt(pmb.permittivity.real)
            fig, ax = plot_map(pmb.model, np.abs(e_z) / np.abs(e_z).max(), label="|E_z| (normalised)",
                               cmap="inferno", title=f"dark mode at {float(pm.frequency_GHz(bic.energy_meV)):.6g} GHz")
            ax.set_xlabel(f"x ({pm.unit})")
            ax.set_ylabel(f"y ({pm.unit})")
            fig.savefig(f"{prefix}_dark_mode.png", dpi=150)
    target = Path(output or (cfg.output.path if cfg.output else f"{prefix}.h5"))
    _write_h5(target, text, pm, spectrum, search)
    say(f"  written: {target}; figures {prefix}_*.png")
    return 0


def _search(cfg, pm, freqs, say, progress=True):
    from .bic2d import plane_seeds, search_grid

    (n1, v1), (n2, v2) = cfg.axes()

    def build(a, b):
        return cfg.build({n1: a, n2: b}).discretise().model

    centre = cfg.build({n1: v1[len(v1) // 2], n2: v2[len(v2) // 2]}).discretise()
    seeds = plane_seeds(centre.model, float(pm.lam(freqs[0])), float(pm.lam(freqs[-1])))
    say(f"  dark-state search over {n1} x {n2} ({len(v1)} x {len(v2)}): {len(seeds)} cavity mode(s) in the band "
        "where each port has one mode")
    search = search_grid(build, v1, v2, seeds, names=(n1, n2), progress=progress)
    for k, bic in enumerate(search.bics):
        f_bic = float(pm.frequency_GHz(bic.energy_meV))
        say(f"  BIC {k} ({bic.kind}) at {n1} = {bic.parameter[0]:.8g}, {n2} = {bic.parameter[1]:.8g}: "
            f"f = {f_bic:.7g} GHz, {bic.orders_of_magnitude:.1f} decades below the width one grid step away, "
            f"Gamma ~ |p - p*|^{bic.exponent:.2f}")
        say("    Q one grid step away (+p1, -p1, +p2, -p2): " + ", ".join(f"{2 * q:.3g}" for q in bic.nearby_q))
    if not search.bics:
        say("  no BIC in this plane (no cell where both port couplings vanish together); widen the ranges")
    return search


def _plot_spectrum(pm, spectrum):
    import matplotlib.pyplot as plt

    fig, ax = plt.subplots(figsize=(7, 4), layout="constrained")
    f = spectrum.frequencies_GHz
    names = spectrum.port_names
    ax.plot(f, spectrum.transmission[:, 1, 0], lw=1.2, label=f"T {names[0]} → {names[1]}")
    ax.plot(f, spectrum.transmission[:, 0, 0], lw=1.0, ls="--", label=f"R at {names[0]}")
    if np.abs(spectrum.absorption).max() > 1e-9:
        ax.plot(f, spectrum.absorption[:, 0], lw=1.0, ls=":", label="absorbed")
    for k, name in enumerate(names[:2]):
        for fc in pm.cutoffs_GHz(k, 3):
            if f[0] <= fc <= f[-1]:
                ax.axvline(fc, color="0.6", lw=0.8, ls="-.")
    ax.set_xlabel("frequency (GHz)")
    ax.set_ylabel("power fraction")
    ax.set_title(f"grid {pm.spacing:g} {pm.unit}; dash-dot lines: port cutoffs", fontsize="medium")
    ax.legend(frameon=False, fontsize="small")
    return fig, ax

