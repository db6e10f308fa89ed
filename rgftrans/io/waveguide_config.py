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

import tomllib
from pathlib import Path
from dataclasses import dataclass
from dataclasses import field as dc_field
from typing import Annotated, Literal

import numpy as np
import scipy.constants as const
import shapely.affinity
from pydantic import Field, PrivateAttr, ValidationError, model_validator

from rgftrans.io.config import Pair, _one_shape, _problem, _Table, _toml_message, _translate
from rgftrans.errors import ConfigError
from rgftrans.system.geometry import Region
from rgftrans.analysis.light import (DarkMode, FieldMap, PhotonicResonance, SpectralLine, Spectrum, waveguide_field,
                                    waveguide_resonances, waveguide_spectrum)
from rgftrans.system.photonic import Dielectric, PhotonicModel, Port, Waveguide

__all__ = ["WaveguideConfig", "WaveguideRun", "load_waveguide", "parse_waveguide", "is_waveguide_config",
           "run_waveguide", "write_waveguide", "WAVEGUIDE_FORMAT"]

#: Root ``format`` attribute of the file :func:`write_waveguide` writes.
WAVEGUIDE_FORMAT = "rgftrans-waveguide"


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


@dataclass(frozen=True, eq=False)
class WaveguideRun:
    """Everything ``rgftrans waveguide CONFIG`` computes, in frequency and length units (GHz, the waveguide's unit).

    Attributes
    ----------
    config_text : str
    model : PhotonicModel
    spectrum : Spectrum
        Power transmission, reflection and absorption over ``frequencies_GHz``.
    lines : list of SpectralLine
        Lines fitted in T(f) from the first port into the second.
    sharpest : PhotonicResonance or None
        The pole behind the narrowest line (lossless waveguides only).
    field_map : FieldMap or None
        ``E_z`` at that pole's frequency, sent in from the first port.
    search : GridSearch or None
        The plane search (its energies are k0a_squared = (k0 a)^2, dimensionless; use ``dark_modes`` for frequencies).
    seeds : int
        Cavity modes followed over the plane.
    dark_modes : list of DarkMode
    """

    config_text: str
    model: PhotonicModel
    spectrum: Spectrum
    lines: list
    sharpest: PhotonicResonance | None = None
    field_map: FieldMap | None = None
    search: object = None
    seeds: int = 0
    dark_modes: list = dc_field(default_factory=list)


def run_waveguide(config_path, *, progress: bool = True) -> WaveguideRun:
    """Compute what ``rgftrans waveguide CONFIG`` reports: spectrum, field at the sharpest line, dark modes.

    Nothing is printed, drawn or written here (the command line does that);
    a line narrower than three frequency steps is reported as a ResolutionWarning.
    """
    import warnings

    from rgftrans.analysis.darkstates import find_resonances
    from rgftrans.errors import ResolutionWarning

    cfg, text = load_waveguide(config_path)
    freqs = cfg.frequencies_GHz()
    pm = cfg.build().discretise()
    spectrum = waveguide_spectrum(pm, freqs)
    t = spectrum.matrix[:, 1, 0]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ResolutionWarning)
        fits = find_resonances(freqs, t)  # unit-agnostic: its "energies" are frequencies here
    lines = [SpectralLine(frequency_GHz=fit.energy_meV, width_GHz=fit.width_meV,
                          q_factor=fit.energy_meV / fit.width_meV if fit.width_meV > 0 else np.inf, fano_q=fit.q)
             for fit in fits]
    sharpest = field_map = None
    if lines and not pm.is_lossy:
        line = min(lines, key=lambda x: x.width_GHz)
        sharpest = min(waveguide_resonances(pm, line.frequency_GHz, count=3),
                       key=lambda r: abs(r.frequency_GHz - line.frequency_GHz))
        spacing = float(np.median(np.diff(freqs)))
        if sharpest.width_GHz < 3 * spacing:
            warnings.warn(f"the line at {sharpest.frequency_GHz:.6g} GHz is {sharpest.width_GHz:.2g} GHz wide but the "
                          f"frequency grid spacing is {spacing:.2g} GHz: T(f) does not resolve it (its Q comes from "
                          "the pole); add points around it to see its shape", ResolutionWarning, stacklevel=2)
        field_map = waveguide_field(pm, sharpest.frequency_GHz, 0, 0)
    search, seeds, dark = None, 0, []
    if cfg.search is not None:
        search, seeds = _search(cfg, pm, freqs, progress=progress)
        dark = [_dark_mode(cfg, pm, search, bic) for bic in search.bics]
    return WaveguideRun(config_text=text, model=pm, spectrum=spectrum, lines=lines, sharpest=sharpest,
                        field_map=field_map, search=search, seeds=seeds, dark_modes=dark)


def _search(cfg, pm, freqs, progress=True):
    from rgftrans.analysis.bic2d import plane_seeds, search_grid

    (n1, v1), (n2, v2) = cfg.axes()

    def build(a, b):
        return cfg.build({n1: a, n2: b}).discretise().model

    centre = cfg.build({n1: v1[len(v1) // 2], n2: v2[len(v2) // 2]}).discretise()
    seeds = plane_seeds(centre.model, float(pm.k0a_squared(freqs[0])), float(pm.k0a_squared(freqs[-1])))
    return search_grid(build, v1, v2, seeds, names=(n1, n2), progress=progress), len(seeds)


def _dark_mode(cfg, pm, search, bic) -> DarkMode:
    """A BIC of the plane search in the waveguide's own units (GHz; Q of the frequency)."""
    k0a_squared = float(bic.energy_meV)  # the engine's energy variable is (k0 a)^2 here
    pmb = cfg.build(dict(zip(search.names, bic.parameter))).discretise()
    e_z = np.abs(bic.state / np.sqrt(pmb.permittivity.real))
    return DarkMode(parameter=np.asarray(bic.parameter, float), names=tuple(search.names),
                    frequency_GHz=float(pm.frequency_GHz(k0a_squared)), k0a_squared=k0a_squared,
                    width_GHz=float(pm.width_GHz(k0a_squared, bic.width_meV)),
                    orders_of_magnitude=float(bic.orders_of_magnitude), exponent=float(bic.exponent),
                    nearby_q=2 * np.asarray(bic.nearby_q, float),  # Q in f = 2 Q in (k0 a)^2 (f ~ k0 a)
                    kind=bic.kind, explanation=bic.explanation, mode_field=e_z / e_z.max(), model=pmb)


def parameter_units(names, unit: str) -> tuple[str, ...]:
    """Units of waveguide search parameters: permittivity dimensionless, shifts in the waveguide's length unit."""
    return tuple("1" if n.endswith("permittivity") else unit for n in names)


def write_waveguide(run: WaveguideRun, path, *, overwrite: bool = False) -> None:
    """Everything into one HDF5 file (root ``format = "rgftrans-waveguide"``), written beside the target and
    renamed over it (never half-written) by :func:`rgftrans.io.store.write_file`; an existing file is refused
    unless ``overwrite``.

    Layout: ``/config`` (TOML text); ``/waveguide`` with ``frequency`` (GHz, dimension scale),
    ``transmission``, ``n_open``, ``absorption`` and ``cutoffs/<port>`` (GHz); with a search,
    ``/waveguide/darkstates`` with ``p1``, ``p2`` (their units), ``seed_frequency`` and ``frequency`` (GHz) of the
    followed modes, the coupling ``residuals``, and per BIC ``bic_<k>/``: ``parameter``, ``frequency`` (GHz),
    ``k0a_squared`` ((k0 a)^2), ``width`` (GHz), ``nearby_q``, ``orders_of_magnitude``, ``exponent``, ``state``.
    """
    from rgftrans.io.store import StoredArray, StoredGroup, write_file

    path = Path(path)
    pm, spectrum = run.model, run.spectrum
    path.parent.mkdir(parents=True, exist_ok=True)
    freq = ("frequency",)
    g = {"frequency": StoredArray(spectrum.frequencies_GHz, "GHz", "frequency", scale=True)}
    for key, data, long in (
            ("transmission", spectrum.matrix,
             "power transmission [frequency, port_out, port_in]; diagonal: reflection"),
            ("n_open", spectrum.n_open, "propagating modes of each port"),
            ("absorption", spectrum.absorption, "absorbed fraction per input port: N - sum_out T")):
        data = np.asarray(data)
        g[key] = StoredArray(data, "1", long, dims=freq + ("",) * (data.ndim - 1))
    g["cutoffs"] = StoredGroup({name: StoredArray(pm.cutoffs_GHz(k, 4), "GHz",
                                                  f"cutoff frequencies of port {name} on this grid")
                                for k, name in enumerate(spectrum.port_names)})
    if run.search is not None:
        s = run.search
        u1, u2 = parameter_units(s.names, pm.unit)
        d = {"p1": StoredArray(s.p1, u1, f"search parameter {s.names[0]}"),
             "p2": StoredArray(s.p2, u2, f"search parameter {s.names[1]}"),
             "seed_frequency": StoredArray(pm.frequency_GHz(np.maximum(s.seeds_meV, 0.0)), "GHz",
                                           "frequency of each followed cavity mode at the grid centre"),
             "frequency": StoredArray(pm.frequency_GHz(np.abs(s.energies_meV)), "GHz",
                                      "self-consistent frequency of the followed mode (seed, p1, p2)"),
             "residuals": StoredArray(s.residuals, "1", "signed unit-normalised coupling of the followed mode to "
                                                        "each open channel (seed, p1, p2, channel)")}
        for i, (mode, seed) in enumerate(zip(run.dark_modes, s.seed_of_bic)):
            d[f"bic_{i}"] = StoredGroup(
                {key: StoredArray(np.asarray(val, float), units, long) for key, val, units, long in (
                    ("parameter", mode.parameter, "", f"({s.names[0]}, {s.names[1]}) at the BIC"),
                    ("frequency", mode.frequency_GHz, "GHz", "frequency of the dark mode"),
                    ("k0a_squared", mode.k0a_squared, "1", "(k0 a)^2 of the dark mode"),
                    ("width", mode.width_GHz, "GHz", "width of the pole at the BIC"),
                    ("orders_of_magnitude", mode.orders_of_magnitude, "1",
                     "log10(width one grid step away / width at the BIC)"),
                    ("exponent", mode.exponent, "1", "n in width ~ |p - p*|^n"),
                    ("nearby_q", mode.nearby_q, "1", "Q = f / width one grid step away (+p1, -p1, +p2, -p2)"),
                    ("state", s.bics[i].state, "1", "the dark mode, phi = sqrt(eps) E_z, unit norm"))},
                attrs={"kind": mode.kind, "seed": int(seed), "explanation": mode.explanation})
        g["darkstates"] = StoredGroup(d, attrs={
            "kind": "plane", "axes": " ".join(s.names),
            "long_name": "dark-mode (BIC) search over a plane of two dielectric parameters",
            "channels": " ".join(f"{lead}:{c}" for lead, c in s.channels)})
    contents = StoredGroup({
        "config": StoredArray(run.config_text, "", "waveguide configuration (TOML)", attrs={"media_type": "application/toml"}),
        "waveguide": StoredGroup(g, attrs={"ports": " ".join(spectrum.port_names), "spacing": pm.spacing,
                                           "unit": pm.unit})})
    write_file(path, contents, kind=WAVEGUIDE_FORMAT, overwrite=overwrite)
