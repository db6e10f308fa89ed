"""Run configuration: the TOML schema, its loader, and the builders it feeds.

A run is described by one TOML file.  :func:`load_config` (or
:func:`parse_config` for text) reads it with :mod:`tomllib` -- nothing in a
config is ever executed -- and validates it up front against the pydantic
schema below, :class:`RunConfig`.  Every problem becomes a
:class:`ConfigError` with a one-line message of the form::

    <file>: <key.path>: <what is wrong>, got <value>; <what is allowed / how to fix>

The validated config then builds what a run needs, with no I/O besides
reading a GDSII gate layout if one is named:

* :meth:`RunConfig.energies` -- the energy grid (meV, absolute);
* :meth:`RunConfig.axes` -- the sweep axes, each with units and a long name;
* :meth:`RunConfig.build_device` -- the :class:`~rgftrans.system.device.Device` at
  one point of the sweep (a mapping parameter -> value on top of the file);
* :meth:`RunConfig.geometry_key` -- the geometry-changing part of a point, so
  a sweep can reuse a discretisation;
* :meth:`RunConfig.canonical_json` and :meth:`RunConfig.config_hash` -- a
  normalised record of the run and its content hash (comments, whitespace,
  key order and ``4`` versus ``4.0`` do not change it).

Sections (``*`` required): material, lattice*, geometry*, gates, leads*,
potential, field, spin, disorder, temperature, energy*, sweep, output,
cluster.  Units are in the key names (``_nm``, ``_meV``, ``_V``, ...) except
``field.tesla`` and ``temperature.kelvin``.

Sweep parameters are dotted paths into the config: ``field.tesla``,
``potential.constant_meV``, ``spin.rashba_meV_nm``, ``disorder.width_meV``,
``disorder.seed``, ``gates.<gate>.voltage_V``, ``leads.<lead>.potential_meV``
and ``leads.<lead>.offset_nm`` (a shift of that lead's span along its side;
the only parameter that changes the discretised geometry).

Examples
--------
>>> cfg = parse_config('''
... [lattice]
... kind = "square"
... spacing_nm = 4.0
... [geometry]
... rectangle_nm = [0.0, 0.0, 40.0, 20.0]
... [[leads]]
... name = "source"
... side = "left"
... span_nm = [0.0, 20.0]
... [energy]
... values_meV = [1.0, 2.0]
... [[sweep.axis]]
... parameter = "leads.source.offset_nm"
... values = [0.0, 4.0]
... ''')
>>> cfg.energies().tolist()
[1.0, 2.0]
>>> cfg.build_device({"leads.source.offset_nm": 4.0}).leads[0].span
(4.0, 24.0)
>>> parse_config('[lattice]\\nspacing = 4.0')
Traceback (most recent call last):
...
rgftrans.errors.ConfigError: <string>: lattice.spacing: unknown key 'spacing'; did you mean 'spacing_nm'? (+5 more)
"""

from __future__ import annotations

import hashlib
import json
import math
import re
import tomllib
from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Annotated, Any, ClassVar, Literal

import numpy as np
from pydantic import (
    BaseModel,
    ConfigDict,
    Field,
    PrivateAttr,
    StringConstraints,
    ValidationError,
    ValidationInfo,
    model_validator,
)

from rgftrans.system.device import Device, Lead
from rgftrans.errors import GeometryError
from rgftrans.system.fields import Disorder, MagneticField
from rgftrans.electrostatics.gates import MAX_GATE_VOLTAGE_V, Gate, GateLayout, gates_from_gds
from rgftrans.system.geometry import Region, disk, polygon, rectangle
from rgftrans.system.lattices import Lattice, honeycomb, square, triangular
from rgftrans.system.materials import MATERIALS, Material, fermi_energy_meV

from rgftrans.errors import ConfigError
from rgftrans.io.store import Axis, dataset_name
from rgftrans.io.config_messages import (  # noqa: F401  (the helpers are part of this module's interface)
    RUN_ADVICE,
    _did_you_mean,
    _problem,
    _quoted,
    _show,
    _toml_message,
    _translate,
    _with_value,
)


__all__ = [
    "Parameter",
    "RunConfig",
    "load_config",
    "parse_config",
    "validate_config",
]

# Lead and gate names appear inside dotted sweep paths, so they hold no dots or spaces.
_NAME_PATTERN = r"^[A-Za-z][A-Za-z0-9_\-]*$"

# A Dask scheduler address: protocol, host, port.
_ADDRESS_PATTERN = re.compile(r"^(tcp|tls|ucx)://[A-Za-z0-9.\-\[\]:]+:\d{1,5}$")


def is_scheduler_address(text: str) -> bool:
    """True for ``protocol://host:port`` with protocol tcp, tls or ucx and a port below 65536."""
    match = _ADDRESS_PATTERN.match(text)
    return bool(match) and int(text.rsplit(":", 1)[1]) < 65536

_LAYER_MAX = 65535  # GDSII layer numbers are 16-bit


# --- schema --------------------------------------------------------------------------------------

PositiveFloat = Annotated[float, Field(gt=0)]
NonNegativeFloat = Annotated[float, Field(ge=0)]
Pair = Annotated[list[float], Field(min_length=2, max_length=2)]
Name = Annotated[str, StringConstraints(pattern=_NAME_PATTERN)]
NonEmptyString = Annotated[str, StringConstraints(min_length=1)]

# Coordinate a lead's span runs along, for each side.
_SPAN_COORDINATE = {"left": "y", "right": "y", "bottom": "x", "top": "x"}


class _Table(BaseModel):
    """A TOML table: no unknown keys, no type coercion, no NaN or infinity."""

    model_config = ConfigDict(extra="forbid", strict=True, frozen=True, allow_inf_nan=False)

    # Extra advice for an unknown key in this table (see _translate).
    unknown_key_advice: ClassVar[str] = ""


class ShapeSpec(_Table):
    """One shape in nm: exactly one of ``rectangle_nm``, ``polygon_nm``, ``disk_nm``."""

    rectangle_nm: Annotated[list[float], Field(min_length=4, max_length=4)] | None = None
    polygon_nm: Annotated[list[Pair], Field(min_length=3)] | None = None
    disk_nm: Annotated[list[float], Field(min_length=3, max_length=3)] | None = None

    _region: Region | None = PrivateAttr(default=None)
    # Said when more than one shape is given.
    _several_advice: ClassVar[str] = "give exactly one shape per table"

    @model_validator(mode="after")
    def _check_shape(self):
        self._region = _one_shape(self, self._several_advice)
        return self

    def region(self) -> Region:
        """The shape as a :class:`~rgftrans.system.geometry.Region` (nm)."""
        assert self._region is not None  # set by validation
        return self._region


def _one_shape(spec: BaseModel, several_advice: str, *, suffix: str = "_nm", unit: str = "nm") -> Region:
    """The one shape a table gives among ``rectangle<suffix>``, ``polygon<suffix>``, ``disk<suffix>``."""
    rect, poly, circle = (f"{name}{suffix}" for name in ("rectangle", "polygon", "disk"))
    given = [key for key in (rect, poly, circle) if getattr(spec, key) is not None]
    if len(given) > 1:
        raise _problem(f"more than one shape, got {' and '.join(given)}; {several_advice}")
    if not given:
        raise _problem(
            f"no shape, got none; give one of {rect} = [x0, y0, x1, y1], "
            f"{poly} = [[x, y], ...] or {circle} = [cx, cy, r] ({unit})"
        )
    key = given[0]
    value = getattr(spec, key)
    try:
        if key == rect:
            return rectangle(*value)
        if key == poly:
            return polygon(value)
        return disk(value[:2], value[2])
    except GeometryError as error:
        raise _problem(_with_value(str(error), value), key) from None


class GeometrySpec(ShapeSpec):
    """The device region: one base shape, plus ``add`` shapes, minus ``remove`` shapes."""

    add: list[ShapeSpec] = []
    remove: list[ShapeSpec] = []

    _several_advice: ClassVar[str] = "give exactly one base shape and put the others in [[geometry.add]] tables"

    @model_validator(mode="after")
    def _check_shape(self):
        region = _one_shape(self, self._several_advice)
        for extra in self.add:
            region = region | extra.region()
        for k, hole in enumerate(self.remove):
            region = region - hole.region()
            if region.is_empty:
                raise _problem(
                    f"the shape removes the whole device, got bounds {hole.region().bounds} nm; "
                    "shrink or move it",
                    f"remove[{k}]",
                )
        self._region = region
        return self


class MaterialSpec(_Table):
    """A preset by ``name``, or a custom material with all of m_eff, g_factor, eps_r."""

    name: NonEmptyString
    m_eff: PositiveFloat | None = None
    g_factor: float | None = None
    eps_r: Annotated[float, Field(ge=1)] | None = None
    density_cm2: PositiveFloat | None = None

    @model_validator(mode="before")
    @classmethod
    def _default_name(cls, data: Any) -> Any:
        # A preset's name is written in its canonical case; a table of values
        # without a name is called "custom"; an empty table means GaAs.
        if not isinstance(data, Mapping):
            return data
        data = dict(data)
        explicit = any(key in data for key in ("m_eff", "g_factor", "eps_r"))
        name = data.get("name")
        if name is None:
            data["name"] = "custom" if explicit else "GaAs"
        elif isinstance(name, str):
            presets = {key.lower(): key for key in MATERIALS}
            data["name"] = presets.get(name.strip().lower(), name)
        return data

    @model_validator(mode="after")
    def _check_values(self):
        values = {"m_eff": self.m_eff, "g_factor": self.g_factor, "eps_r": self.eps_r}
        given = [key for key, v in values.items() if v is not None]
        if not given:
            if self.name not in MATERIALS:
                raise _problem(
                    f"unknown material, got {self.name!r}; {_did_you_mean(self.name, MATERIALS)}"
                    f"pick one of {_quoted(MATERIALS)}, or give m_eff, g_factor and eps_r for another one",
                    "name",
                )
            return self
        if self.name in MATERIALS:
            raise _problem(
                f"{self.name!r} is a preset, got it with explicit {', '.join(given)}; drop the values, "
                f"or rename the material (e.g. name = \"{self.name}-custom\") and give m_eff, g_factor and eps_r",
                "name",
            )
        missing = [key for key, v in values.items() if v is None]
        if missing:
            raise _problem(
                f"a custom material needs m_eff, g_factor and eps_r, got only {', '.join(given)}; "
                f"add {', '.join(missing)}",
                missing[0],
            )
        return self

    def material(self) -> Material:
        """The :class:`~rgftrans.system.materials.Material` this table describes."""
        if self.m_eff is None:
            return MATERIALS[self.name]
        return Material(self.name, self.m_eff, self.g_factor, self.eps_r, source="run configuration")


_LATTICES = {"square": square, "honeycomb": honeycomb, "triangular": triangular}


class LatticeSpec(_Table):
    """Lattice kind, nearest-neighbour spacing (nm) and an optional hopping override (meV)."""

    kind: Literal["square", "honeycomb", "triangular"]
    spacing_nm: PositiveFloat
    hopping_meV: PositiveFloat | None = None
    #: Energy zero at the clean band's bottom (effective mass) or its centre (tight-binding units: with
    #: hopping_meV = 1 and spacing_nm = 1 every energy is in units of t and every length in lattice constants).
    energy_origin: Literal["band_bottom", "band_centre"] = "band_bottom"

    @model_validator(mode="after")
    def _check_hopping(self):
        if self.kind == "honeycomb" and self.hopping_meV is None:
            raise _problem(
                "the honeycomb lattice has no effective-mass hopping, got none; "
                "give hopping_meV (e.g. 2700.0 for graphene)",
                "hopping_meV",
            )
        return self

    def lattice(self) -> Lattice:
        """The :class:`~rgftrans.system.lattices.Lattice`."""
        return _LATTICES[self.kind](self.spacing_nm)


def _implausible_voltage(name: str, volts: float) -> str:
    return (f"gate {name!r} at {volts:g} V is outside +-{MAX_GATE_VOLTAGE_V:g} V, implausible for a surface gate; "
            "voltages are in volts (write -0.5 for -500 mV)")


class GateSpec(ShapeSpec):
    """One surface gate: a name, an outline in nm and a voltage in V."""

    name: Name
    voltage_V: float

    _several_advice: ClassVar[str] = "a gate has one outline: split it into two gates or draw one polygon"


class ChargeRegionSpec(ShapeSpec):
    """A named part of the 2DEG (a dot, a reservoir) whose charge, capacitances and lever arms are reported."""

    name: Name

    _several_advice: ClassVar[str] = "a region has one outline: split it into two regions or draw one polygon"


class GdsSpec(_Table):
    """Gates read from a GDSII layout: one gate per layer."""

    path: NonEmptyString
    layers: Annotated[dict[str, Name], Field(min_length=1)]
    voltages: dict[str, float]
    cell: NonEmptyString | None = None

    @model_validator(mode="after")
    def _check_layers(self):
        for key in self.layers:
            if not (key.isdigit() and int(key) <= _LAYER_MAX):
                raise _problem(
                    f"a GDS layer number must be an integer 0..{_LAYER_MAX}, got {key!r}; "
                    'write layers = {"1" = "plunger"}',
                    f"layers.{key}",
                )
        names = list(self.layers.values())
        for name in names:
            if names.count(name) > 1:
                raise _problem(f"two layers are the same gate, got {name!r} twice; give each gate its own name",
                               "layers")
        missing = [n for n in names if n not in self.voltages]
        extra = [n for n in self.voltages if n not in names]
        if missing:
            raise _problem(f"no voltage for gate {missing[0]!r}, got {_show(self.voltages)}; "
                           f"give a voltage (V) for each of {_quoted(names)}", "voltages")
        if extra:
            raise _problem(f"voltage for a gate that no layer defines, got {extra[0]!r}; "
                           f"the layers define {_quoted(names)}", f"voltages.{extra[0]}")
        return self

    def layer_names(self) -> dict[int, str]:
        return {int(key): name for key, name in self.layers.items()}


class GatesSpec(_Table):
    """Surface gates over the 2DEG (pinned or frozen surface, optionally screened by the 2DEG)."""

    depth_nm: PositiveFloat
    gate: list[GateSpec] = []
    gds: GdsSpec | None = None
    #: "none": the gates' bare potential (no 2DEG screening); "thomas-fermi": screened self-consistently by
    #: the 2DEG of density [material] density_cm2 (rgftrans.electrostatics.screening).
    screening: Literal["none", "thomas-fermi"] = "none"
    #: The exposed surface between the gates: "pinned" (at a fixed potential) or "frozen" (its charge fixed);
    #: see rgftrans.electrostatics.surface.  "frozen" needs screening = "thomas-fermi".
    surface: Literal["pinned", "frozen"] = "pinned"
    #: Electron temperature of the screening solution (K); 0: Thomas-Fermi at T = 0, above: Fermi-Dirac.
    screening_temperature_K: Annotated[float, Field(ge=0.0, le=400.0)] = 0.0
    valley_degeneracy: Annotated[int, Field(ge=1, le=6)] = 1
    #: Grid of the screening solution (nm); default: the smaller of depth / 4 and 10 nm.
    screening_grid_nm: PositiveFloat | None = None
    #: How far the screening grid reaches past the device and the gates (nm); default: 4 depths.
    screening_margin_nm: PositiveFloat | None = None
    #: Named parts of the 2DEG (dots, reservoirs): their electron number, capacitance matrix to the gates and
    #: to each other, lever arms and charging energy (needs screening = "thomas-fermi").
    region: list[ChargeRegionSpec] = []

    @model_validator(mode="after")
    def _check_gates(self):
        if not self.gate and self.gds is None:
            raise _problem("no gates, got none; add [[gates.gate]] tables or a [gates.gds] table, "
                           "or remove [gates]", "gate")
        seen: set[str] = set()
        for k, spec in enumerate(self.gate):
            if spec.name in seen:
                raise _problem(f"duplicate gate name, got {spec.name!r}; give every gate its own name",
                               f"gate[{k}].name")
            seen.add(spec.name)
        if self.gds is not None:
            for layer, name in self.gds.layers.items():
                if name in seen:
                    raise _problem(f"duplicate gate name, got {name!r} (also a [[gates.gate]]); "
                                   "give every gate its own name", f"gds.layers.{layer}")
        for k, spec in enumerate(self.region):
            if spec.name in self.names() or spec.name in [r.name for r in self.region[:k]]:
                raise _problem(f"duplicate name, got region {spec.name!r}; give every gate and region its own name",
                               f"region[{k}].name")
        if self.region and self.screening != "thomas-fermi":
            raise _problem("charge regions need the 2DEG's charge, got screening = \"none\"; set screening = "
                           "\"thomas-fermi\" or remove the [[gates.region]] tables", "region")
        where = {spec.name: f"gate[{k}].voltage_V" for k, spec in enumerate(self.gate)}
        for name, volts in self.voltages().items():
            if abs(volts) > MAX_GATE_VOLTAGE_V:
                raise _problem(_implausible_voltage(name, volts), where.get(name, f"gds.voltages.{name}"))
        return self

    def names(self) -> list[str]:
        """Gate names, inline gates first, then the GDS layers."""
        return [g.name for g in self.gate] + (list(self.gds.layers.values()) if self.gds else [])

    def voltages(self) -> dict[str, float]:
        """Gate voltages (V) as written in the config."""
        return {g.name: g.voltage_V for g in self.gate} | (dict(self.gds.voltages) if self.gds else {})


class LeadSpec(_Table):
    """A semi-infinite lead on one side of the device."""

    name: Name
    side: Literal["left", "right", "bottom", "top"]
    span_nm: Pair
    potential_meV: float = 0.0

    @model_validator(mode="after")
    def _check_span(self):
        lo, hi = self.span_nm
        if not lo < hi:
            raise _problem(f"span must be [lo, hi] with lo < hi, got {_show(self.span_nm)}; "
                           f"give the {_SPAN_COORDINATE[self.side]} range of the lead (nm), lower end first",
                           "span_nm")
        return self


class PotentialSpec(_Table):
    """A constant potential energy (meV) added everywhere in the device (not the leads)."""

    constant_meV: float = 0.0


class FieldSpec(_Table):
    """Perpendicular magnetic field (T), orbital (Peierls) and Zeeman parts (Zeeman: default on with spin)."""

    tesla: float = 0.0
    orbital: bool = True
    zeeman: bool | None = None
    #: The field as flux quanta h/e through one lattice cell, instead of tesla (tight-binding convention).
    flux_per_cell: Annotated[float, Field(ge=-1.0, le=1.0)] | None = None

    @model_validator(mode="after")
    def _check_one_field(self):
        if self.flux_per_cell is not None and self.tesla != 0.0:
            raise _problem(f"the field is given twice, got tesla = {self.tesla!r} and flux_per_cell = "
                           f"{self.flux_per_cell!r}; keep one", "flux_per_cell")
        return self


class SpinSpec(_Table):
    """Two spin orbitals per site, and the Rashba coupling alpha (meV nm)."""

    enabled: bool = False
    rashba_meV_nm: float = 0.0

    @model_validator(mode="after")
    def _check_rashba(self):
        if self.rashba_meV_nm != 0.0 and not self.enabled:
            raise _problem(f"Rashba coupling needs spin, got {self.rashba_meV_nm!r} with enabled = false; "
                           "set enabled = true", "rashba_meV_nm")
        return self


class DisorderSpec(_Table):
    """Anderson disorder: onsite energies uniform in [-W/2, W/2] meV, reproducible from the seed."""

    width_meV: NonNegativeFloat
    seed: Annotated[int, Field(ge=0)] = 0


class BlockadeSpec(_Table):
    """Closed dots by sequential tunnelling: which regions are the dots, which gates their plungers, the sweep.

    One dot: Coulomb peaks G(V_plunger) at every configured temperature and the diamond map dI/dV(V_plunger,
    V_sd).  Two dots (in series, the first touching the source): the charge-stability diagram over both
    plungers, its sensor signal and the current at the triple points.  Charging energies, lever arms and
    capacitances come from the layout's electrostatics ([[gates.region]]); single-dot levels from the region's
    closed spectrum and tunnel rates from the open device's poles.
    """

    dots: Annotated[list[Name], Field(min_length=1, max_length=2)]
    plungers: Annotated[list[Name], Field(min_length=1, max_length=2)]
    #: Closed-system levels per dot kept in the constant-interaction model (spin doubles them).
    levels: Annotated[int, Field(ge=1, le=8)] = 4
    spin: bool = True
    #: Plunger sweep: this span (V) centred on the configured voltage, with this many points.
    plunger_span_V: PositiveFloat = 0.02
    plunger_points: Annotated[int, Field(ge=3, le=4001)] = 201
    #: Diamond map: source-drain bias from -bias_span_mV/2 to +bias_span_mV/2.
    bias_span_mV: PositiveFloat = 3.0
    bias_points: Annotated[int, Field(ge=3, le=1001)] = 81
    #: Double dot: interdot tunnel coupling (meV; default: half the closed double dot's bonding-antibonding
    #: splitting), the bias of the current map (mV) and the sensor's coupling to each dot (meV per electron).
    tunnel_coupling_meV: PositiveFloat | None = None
    stability_bias_mV: float = 0.02
    sensor_coupling_meV: Annotated[list[float], Field(min_length=2, max_length=2)] = [1.0, 0.5]

    @model_validator(mode="after")
    def _check_pairs(self):
        if len(self.dots) != len(self.plungers):
            raise _problem(f"one plunger per dot, got {len(self.dots)} dot(s) and {len(self.plungers)} plunger(s); "
                           "list the gate that tunes each dot", "plungers")
        return self


class TemperatureSpec(_Table):
    """Temperatures (K) at which conductances are thermally averaged."""

    kelvin: Annotated[list[NonNegativeFloat], Field(min_length=1)]


#: Most values on one energy grid or sweep axis, and most points of a whole sweep grid: a million energies
#: resolve a 10 meV window to 10 neV, far below any temperature; beyond that a number is a typing slip.
MAX_GRID_POINTS = 1_000_000
MAX_SWEEP_POINTS = 10_000_000


class EnergyRange(_Table):
    """One uniform piece of a composite energy grid."""

    start_meV: float
    stop_meV: float
    points: Annotated[int, Field(ge=1, le=MAX_GRID_POINTS)]

    @model_validator(mode="after")
    def _check(self):
        _check_range(self.start_meV, self.stop_meV, self.points, "start_meV", "stop_meV", ascending=True)
        return self


class EnergySpec(_Table):
    """Energy grid: ``start_meV``, ``stop_meV``, ``points``; or ``values_meV``; or a list of ``range`` tables
    (merged, sorted, duplicates dropped: a fine grid around E_F inside a coarse one); optionally offsets from E_F."""

    start_meV: float | None = None
    stop_meV: float | None = None
    points: Annotated[int, Field(ge=1, le=MAX_GRID_POINTS)] | None = None
    values_meV: Annotated[list[float], Field(min_length=1)] | None = None
    range: Annotated[list[EnergyRange], Field(min_length=1)] | None = None
    relative_to_fermi: bool = False
    #: Adaptive refinement of T(E) for the stored conductances (absolute tolerance in units of T); the
    #: transmission is still stored on the grid as written.
    refine_tolerance: PositiveFloat | None = None
    #: Most energies a refined point may use (default 20 x the grid).
    refine_max_points: Annotated[int, Field(ge=2, le=MAX_GRID_POINTS)] | None = None

    @model_validator(mode="after")
    def _check_grid(self):
        if self.refine_max_points is not None and self.refine_tolerance is None:
            raise _problem("refine_max_points needs refine_tolerance, got no refine_tolerance; add e.g. "
                           "refine_tolerance = 1e-3", "refine_max_points")
        span = {"start_meV": self.start_meV, "stop_meV": self.stop_meV, "points": self.points}
        given = [key for key, v in span.items() if v is not None]
        if self.range is not None:
            if given or self.values_meV is not None:
                others = given + (["values_meV"] if self.values_meV is not None else [])
                raise _problem(f"two energy grids, got [[energy.range]] and {', '.join(others)}; "
                               "give either ranges, start_meV/stop_meV/points or values_meV")
            return self
        if self.values_meV is not None:
            if given:
                raise _problem(f"two energy grids, got values_meV and {', '.join(given)}; "
                               "give either start_meV, stop_meV, points or values_meV")
            _check_increasing(self.values_meV, "values_meV", "energies")
            return self
        if len(given) < 3:
            missing = [key for key, v in span.items() if v is None]
            raise _problem(f"incomplete energy grid, got {', '.join(given) or 'no keys'}; "
                           f"add {', '.join(missing)} (or give values_meV = [...])", missing[0])
        _check_range(self.start_meV, self.stop_meV, self.points, "start_meV", "stop_meV", ascending=True)
        return self

    def offsets(self) -> np.ndarray:
        """The grid as written (meV; offsets from E_F when relative_to_fermi)."""
        if self.range is not None:
            parts = np.concatenate([np.linspace(r.start_meV, r.stop_meV, r.points) for r in self.range])
            return np.unique(np.round(parts, 12))
        if self.values_meV is not None:
            return np.array(self.values_meV, dtype=float)
        return np.linspace(self.start_meV, self.stop_meV, self.points)


def _check_increasing(values: list[float], key: str, what: str) -> None:
    steps = np.diff(values)
    if np.any(steps <= 0):
        k = int(np.argmax(steps <= 0))
        raise _problem(f"{what} must increase strictly, got {values[k]!r} then {values[k + 1]!r}; "
                       "sort them and drop repeats", f"{key}[{k + 1}]")


def _check_range(start, stop, points, start_key, stop_key, *, ascending: bool) -> None:
    if points == 1 and start != stop:
        raise _problem(f"one point takes only {start_key}, got points = 1 with {stop_key} = {stop!r}; "
                       f"set {stop_key} = {start_key} or give more points", "points")
    if points > 1 and start == stop:
        raise _problem(f"{stop_key} equals {start_key}, got {stop!r} with {points} points; "
                       f"widen the range or set points = 1", stop_key)
    if ascending and stop < start:
        raise _problem(f"{stop_key} is below {start_key}, got {stop!r} < {start!r}; swap them", stop_key)


class SweepAxisSpec(_Table):
    """One sweep axis: a parameter path and ``start``, ``stop``, ``points`` or ``values``."""

    parameter: NonEmptyString
    start: float | None = None
    stop: float | None = None
    points: Annotated[int, Field(ge=1, le=MAX_GRID_POINTS)] | None = None
    values: Annotated[list[float], Field(min_length=1)] | None = None

    @model_validator(mode="after")
    def _check_values(self):
        span = {"start": self.start, "stop": self.stop, "points": self.points}
        given = [key for key, v in span.items() if v is not None]
        if self.values is not None:
            if given:
                raise _problem(f"two ways to give the values, got values and {', '.join(given)}; "
                               "give either start, stop, points or values")
            repeated = [v for v in self.values if self.values.count(v) > 1]
            if repeated:
                raise _problem(f"values repeat, got {repeated[0]!r} twice; give each value once", "values")
            return self
        if len(given) < 3:
            missing = [key for key, v in span.items() if v is None]
            raise _problem(f"incomplete axis, got {', '.join(given) or 'no values'}; "
                           f"add {', '.join(missing)} (or give values = [...])", missing[0])
        _check_range(self.start, self.stop, self.points, "start", "stop", ascending=False)
        return self

    def array(self) -> np.ndarray:
        """The axis values, in the units of the parameter."""
        if self.values is not None:
            return np.array(self.values, dtype=float)
        return np.linspace(self.start, self.stop, self.points)


class SweepSpec(_Table):
    """The sweep: a list of axes, the first outermost."""

    axis: Annotated[list[SweepAxisSpec], Field(min_length=1)]

    unknown_key_advice: ClassVar[str] = (
        'a sweep is a list of [[sweep.axis]] tables, e.g. parameter = "gates.plunger.voltage_V", '
        "start = -0.056, stop = -0.036, points = 41; temperatures go in [temperature] kelvin = [...]"
    )


class OutputSpec(_Table):
    """Result file (HDF5), overwrite policy and optional LDOS maps."""

    path: NonEmptyString
    overwrite: bool = False
    ldos_at_meV: list[float] = []

    @model_validator(mode="after")
    def _check_suffix(self):
        if Path(self.path).suffix not in (".h5", ".hdf5"):
            raise _problem(f"the result file is HDF5, got {self.path!r}; "
                           f"end the name in .h5, e.g. path = \"{Path(self.path).with_suffix('.h5')}\"", "path")
        return self


class ClusterSpec(_Table):
    """Where sweep points are computed: local processes or a Dask scheduler."""

    executor: Literal["local", "dask"] = "local"
    workers: Annotated[int, Field(ge=1)] = 2
    address: NonEmptyString | None = None

    @model_validator(mode="after")
    def _check_address(self):
        if self.address is None:
            return self
        if self.executor != "dask":
            raise _problem(f"an address needs executor = \"dask\", got {self.address!r} with executor = "
                           f"{self.executor!r}; set executor = \"dask\" or drop the address", "address")
        if not is_scheduler_address(self.address):
            raise _problem(f"not a scheduler address, got {self.address!r}; "
                           "write protocol://host:port, e.g. \"tcp://127.0.0.1:8786\"", "address")
        return self


# --- sweep parameters ----------------------------------------------------------------------------


@dataclass(frozen=True)
class Parameter:
    """A device parameter a sweep may vary.

    Attributes
    ----------
    name : str
        Dotted path, e.g. ``"gates.plunger.voltage_V"``.
    units : str
        Units of its values (``"1"`` for dimensionless).
    long_name : str
        Description for axis labels and result files.
    changes_geometry : bool
        True if a new value changes the discretised sites (lead offsets).
    """

    name: str
    units: str
    long_name: str
    changes_geometry: bool = False


@dataclass(frozen=True)
class _ShiftedPotential:
    """Gate potential plus a constant (meV), picklable for worker processes."""

    layout: GateLayout
    constant_meV: float

    def __call__(self, x, y):
        return self.layout(x, y) + self.constant_meV


class RunConfig(_Table):
    """A validated run configuration; build it with :func:`load_config` or :func:`parse_config`.

    The fields are the TOML sections.  Builders: :meth:`energies`,
    :meth:`axes`, :meth:`build_device`, :meth:`geometry_key`; records:
    :meth:`canonical_json`, :meth:`config_hash`.
    """

    material: MaterialSpec = MaterialSpec(name="GaAs")
    lattice: LatticeSpec
    geometry: GeometrySpec
    gates: GatesSpec | None = None
    leads: Annotated[list[LeadSpec], Field(min_length=1)]
    potential: PotentialSpec = PotentialSpec()
    field: FieldSpec = FieldSpec()
    spin: SpinSpec = SpinSpec()
    disorder: DisorderSpec | None = None
    temperature: TemperatureSpec | None = None
    energy: EnergySpec
    sweep: SweepSpec | None = None
    blockade: BlockadeSpec | None = None
    output: OutputSpec
    cluster: ClusterSpec = ClusterSpec()

    _source: str = PrivateAttr(default="<dict>")
    _base_dir: Path | None = PrivateAttr(default=None)
    _text: str | None = PrivateAttr(default=None)
    _layout: GateLayout | None = PrivateAttr(default=None)
    _screen_cache: dict = PrivateAttr(default_factory=dict)
    _capacitance: object = PrivateAttr(default=None)

    @model_validator(mode="before")
    @classmethod
    def _default_output(cls, data: Any, info: ValidationInfo) -> Any:
        # The default result file is named after the config file.
        if not isinstance(data, Mapping):
            return data
        output = data.get("output", {})
        if isinstance(output, Mapping) and "path" not in output:
            stem = (info.context or {}).get("stem", "run")
            data = {**data, "output": {**output, "path": f"out/{stem}.h5"}}
        return data

    @model_validator(mode="after")
    def _check_cross_references(self):
        names = [lead.name for lead in self.leads]
        for k, name in enumerate(names):
            if name in names[:k]:
                raise _problem(f"duplicate lead name, got {name!r}; give every lead its own name",
                               f"leads[{k}].name")
        xmin, ymin, xmax, ymax = self.geometry.region().bounds
        extent = {"x": (xmin, xmax), "y": (ymin, ymax)}
        for k, lead in enumerate(self.leads):
            coord = _SPAN_COORDINATE[lead.side]
            lo, hi = extent[coord]
            if lead.span_nm[1] < lo or lead.span_nm[0] > hi:
                raise _problem(f"the lead misses the device, got {_show(lead.span_nm)}; the device covers "
                               f"{coord} = [{lo:g}, {hi:g}] nm, so move the span into that range", f"leads[{k}].span_nm")
        if self.gates is not None and self.gates.screening == "thomas-fermi" and self.material.density_cm2 is None:
            raise _problem("Thomas-Fermi screening needs the ungated density, got no material.density_cm2; add "
                           "density_cm2 to [material] (the grower's sheet value) or set screening = \"none\"",
                           "gates.screening")
        if self.gates is not None and self.gates.surface == "frozen" and self.gates.screening != "thomas-fermi":
            raise _problem("a frozen surface is solved with the 2DEG's screening, got screening = \"none\"; set "
                           "screening = \"thomas-fermi\" (the unscreened model is the pinned surface's closed form)",
                           "gates.surface")
        if self.lattice.energy_origin == "band_centre" and (self.energy.relative_to_fermi or (
                self.gates is not None and self.gates.screening == "thomas-fermi")):
            raise _problem("energies from the band centre cannot be measured from a Fermi energy or screened by a "
                           "2DEG, got energy_origin = \"band_centre\" with relative_to_fermi or Thomas-Fermi "
                           "screening; both count energy from the band bottom, so use energy_origin = "
                           "\"band_bottom\"", "lattice.energy_origin")
        if self.blockade is not None:
            regions = [r.name for r in self.gates.region] if self.gates else []
            gates = self.gates.names() if self.gates else []
            for k, name in enumerate(self.blockade.dots):
                if name not in regions:
                    raise _problem(f"no [[gates.region]] named {name!r}, got regions {regions}; name each dot "
                                   "as a region of the 2DEG", f"blockade.dots[{k}]")
            for k, name in enumerate(self.blockade.plungers):
                if name not in gates:
                    raise _problem(f"no gate named {name!r}, got gates {gates}; name the gate that tunes the dot",
                                   f"blockade.plungers[{k}]")
            if not self.temperature or min(self.temperature.kelvin) <= 0:
                raise _problem("sequential tunnelling needs the measurement temperature above 0 K, got "
                               f"{self.temperature.kelvin if self.temperature else 'no [temperature] table'}; give "
                               "kelvin = [...] with positive values", "blockade")
        if self.field.zeeman and not self.spin.enabled:
            raise _problem("a Zeeman term needs spin orbitals, got field.zeeman = true with spin.enabled = false; "
                           "set enabled = true in [spin], or remove zeeman (it defaults to on with spin)",
                           "field.zeeman")
        if self.energy.relative_to_fermi and self.material.density_cm2 is None:
            raise _problem("energies relative to the Fermi energy need a density, got no material.density_cm2; "
                           "add density_cm2 to [material] or set relative_to_fermi = false",
                           "energy.relative_to_fermi")
        if self.sweep is not None:
            self._check_axes()
        return self

    def _check_axes(self) -> None:
        catalogue = self.parameters()
        seen: set[str] = set()
        stored: dict[str, str] = {}
        total = math.prod(axis.points if axis.points is not None else len(axis.values) for axis in self.sweep.axis)
        if total > MAX_SWEEP_POINTS:
            raise _problem(f"the sweep grid has {total:.3g} points, more than {MAX_SWEEP_POINTS:.0e}; "
                           "use fewer points per axis or split the sweep", "sweep.axis")
        for k, axis in enumerate(self.sweep.axis):
            key = f"sweep.axis[{k}]"
            if axis.parameter not in catalogue:
                raise _problem(f"unknown sweep parameter, got {axis.parameter!r}; "
                               f"{_did_you_mean(axis.parameter, catalogue)}"
                               f"allowed here: {', '.join(catalogue)}", f"{key}.parameter")
            if axis.parameter in seen:
                raise _problem(f"parameter swept twice, got {axis.parameter!r} again; "
                               "merge the two axes into one", f"{key}.parameter")
            seen.add(axis.parameter)
            name = dataset_name(axis.parameter)
            if name in stored:
                raise _problem(f"{axis.parameter!r} and {stored[name]!r} would both be stored as {name!r} in the "
                               "result file; rename one of the gates or leads", f"{key}.parameter")
            stored[name] = axis.parameter
            for value in axis.array():
                message = self._bad_value(axis.parameter, float(value))
                if message:
                    raise _problem(message, f"{key}.values" if axis.values is not None else key)

    def _bad_value(self, name: str, value: float) -> str:
        """Why ``value`` is not allowed for parameter ``name`` ('' if it is)."""
        if not math.isfinite(value):
            return f"{name} must be finite, got {value!r}; give a finite number"
        if name == "disorder.seed" and (value != int(value) or value < 0):
            return f"disorder.seed must be a whole number >= 0, got {value!r}; give integer seeds"
        if name == "disorder.width_meV" and value < 0:
            return f"disorder.width_meV must be >= 0, got {value!r}; give non-negative widths"
        if name.startswith("gates.") and name.endswith(".voltage_V") and abs(value) > MAX_GATE_VOLTAGE_V:
            return _implausible_voltage(name.split(".")[1], value)
        if name == "spin.rashba_meV_nm" and value != 0 and not self.spin.enabled:
            return (f"Rashba coupling needs spin, got spin.rashba_meV_nm = {value!r} with spin.enabled = false; "
                    "set enabled = true in [spin]")
        return ""

    # --- properties of the run ---

    @property
    def source(self) -> str:
        """Where the config came from (file path, or ``"<string>"``)."""
        return self._source

    @property
    def source_text(self) -> str | None:
        """The TOML text as read (None if built from a dict), for result files."""
        return self._text

    @property
    def fermi_energy_meV(self) -> float | None:
        """Fermi energy E_F = pi hbar^2 n / m* (meV) from material.density_cm2; None without a density."""
        if self.material.density_cm2 is None:
            return None
        return fermi_energy_meV(self.material.density_cm2, self.material.material().m_eff)

    def energies(self) -> np.ndarray:
        """Energy grid (n_E,) float ndarray, meV, absolute (E_F added when relative_to_fermi)."""
        return self._absolute(self.energy.offsets())

    def ldos_energies(self) -> np.ndarray:
        """Energies (meV, absolute) of the optional LDOS maps; read like the [energy] values."""
        return self._absolute(np.array(self.output.ldos_at_meV, dtype=float))

    def _absolute(self, offsets: np.ndarray) -> np.ndarray:
        return offsets + self.fermi_energy_meV if self.energy.relative_to_fermi else offsets

    def temperatures(self) -> np.ndarray:
        """Temperatures (n_T,) float ndarray, K; empty without a [temperature] table."""
        return np.array(self.temperature.kelvin if self.temperature else [], dtype=float)

    def parameters(self) -> dict[str, Parameter]:
        """Every parameter a sweep of this config may vary, by dotted path."""
        out = [
            Parameter("field.tesla", "T", "perpendicular magnetic field B"),
            Parameter("field.flux_per_cell", "1", "flux through one lattice cell in flux quanta h/e"),
            Parameter("potential.constant_meV", "meV", "constant potential energy in the device"),
            Parameter("spin.rashba_meV_nm", "meV nm", "Rashba spin-orbit coupling alpha"),
            Parameter("disorder.width_meV", "meV", "Anderson disorder width W"),
            Parameter("disorder.seed", "1", "Anderson disorder seed"),
        ]
        for name in self.gates.names() if self.gates else []:
            out.append(Parameter(f"gates.{name}.voltage_V", "V", f"voltage on gate '{name}'"))
        for lead in self.leads:
            out.append(Parameter(f"leads.{lead.name}.potential_meV", "meV", f"band offset of lead '{lead.name}'"))
            out.append(Parameter(f"leads.{lead.name}.offset_nm", "nm",
                                 f"shift of lead '{lead.name}' along {_SPAN_COORDINATE[lead.side]} "
                                 f"(its {lead.side} side)", changes_geometry=True))
        return {p.name: p for p in out}

    def base_point(self) -> dict[str, float]:
        """The value of every sweep parameter as the config writes it (offsets 0)."""
        point = {
            "field.tesla": self.field.tesla,
            "field.flux_per_cell": self.field.flux_per_cell or 0.0,
            "potential.constant_meV": self.potential.constant_meV,
            "spin.rashba_meV_nm": self.spin.rashba_meV_nm,
            "disorder.width_meV": self.disorder.width_meV if self.disorder else 0.0,
            "disorder.seed": float(self.disorder.seed) if self.disorder else 0.0,
        }
        for name, volts in (self.gates.voltages() if self.gates else {}).items():
            point[f"gates.{name}.voltage_V"] = volts
        for lead in self.leads:
            point[f"leads.{lead.name}.potential_meV"] = lead.potential_meV
            point[f"leads.{lead.name}.offset_nm"] = 0.0
        return point

    def axes(self) -> list[Axis]:
        """The sweep axes, outermost first, as the result file stores them; [] without a sweep.

        Each :class:`rgftrans.io.store.Axis` carries the config path it sweeps
        (``parameter``, the key of :meth:`build_device` points) and its stored
        name (``name = dataset_name(parameter)``).
        """
        if self.sweep is None:
            return []
        catalogue = self.parameters()
        return [Axis.of_parameter(a.parameter, a.array(), catalogue[a.parameter].units,
                                  catalogue[a.parameter].long_name)
                for a in self.sweep.axis]

    # --- builders ---

    def _point(self, point: Mapping[str, float] | None) -> dict[str, float]:
        """The base point with ``point`` applied, every value checked."""
        values = self.base_point()
        if point is None:
            return values
        if not isinstance(point, Mapping):
            raise ConfigError(f"{self._source}: point: must be a mapping parameter -> value, got {_show(point)}; "
                              'pass e.g. {"field.tesla": 1.0}')
        for name, value in point.items():
            if name not in values:
                raise ConfigError(f"{self._source}: point: unknown parameter, got {name!r}; "
                                  f"{_did_you_mean(str(name), values)}allowed here: {', '.join(values)}")
            if isinstance(value, bool) or not isinstance(value, (int, float, np.integer, np.floating)):
                raise ConfigError(f"{self._source}: point.{name}: must be a number, got {_show(value)}; "
                                  "give a float")
            message = self._bad_value(name, float(value))
            if message:
                raise ConfigError(f"{self._source}: point.{name}: {message}")
            values[name] = float(value)
        return values

    def _gds_path(self) -> Path:
        """The GDS file of [gates.gds], relative paths taken from the config's folder."""
        path = Path(self.gates.gds.path)
        if not path.is_absolute() and self._base_dir is not None:
            path = self._base_dir / path
        return path

    def input_files(self) -> dict[str, Path]:
        """Files the config reads besides itself, by role (``{"gates.gds.path": Path}``)."""
        if self.gates is not None and self.gates.gds is not None:
            return {"gates.gds.path": self._gds_path()}
        return {}

    def gate_layout(self) -> GateLayout | None:
        """The gates as written in the config (reads the GDS file once), or None without gates."""
        if self.gates is None:
            return None
        if self._layout is None:
            gates = [Gate(spec.name, spec.region(), spec.voltage_V) for spec in self.gates.gate]
            if self.gates.gds is not None:
                gds = self.gates.gds
                path = self._gds_path()
                try:
                    read = gates_from_gds(path, layers=gds.layer_names(), voltages=gds.voltages,
                                          depth_nm=self.gates.depth_nm, cell=gds.cell)
                except GeometryError as error:
                    raise ConfigError(f"{self._source}: gates.gds: {error}") from None
                gates.extend(read.gates)
            self._layout = GateLayout(tuple(gates), self.gates.depth_nm)
        return self._layout

    def capacitances(self):
        """Capacitances, lever arms and charging energies of the ``[[gates.region]]`` regions at the config's
        voltages (:func:`rgftrans.electrostatics.capacitance.gate_capacitances`), computed once; None without
        regions."""
        if not self.charge_regions():
            return None
        if self._capacitance is None:
            from rgftrans.electrostatics.capacitance import gate_capacitances

            layout = self.gate_layout().with_voltages(self.gates.voltages())
            extent, spacing = self.screening_grid()
            self._capacitance = gate_capacitances(
                layout, self.heterostructure(), self.charge_regions(), extent_nm=extent, spacing_nm=spacing,
                base=self.screened(layout))
        return self._capacitance

    def charge_regions(self) -> dict[str, Region]:
        """The named 2DEG regions of ``[[gates.region]]`` (nm), in config order; empty without any."""
        if self.gates is None:
            return {}
        return {spec.name: spec.region() for spec in self.gates.region}

    def build_device(self, point: Mapping[str, float] | None = None) -> Device:
        """The device at one point of the sweep.

        Parameters
        ----------
        point : mapping of str to float, optional
            Parameter path -> value (units of the parameter, see
            :meth:`parameters`), applied on top of the config; parameters
            not named keep their config values.  Any parameter of
            :meth:`parameters` may be given, swept or not.

        Returns
        -------
        Device
            Not yet discretised.

        Raises
        ------
        ConfigError
            If a parameter is unknown or its value not allowed, or the GDS
            layout cannot be read.
        """
        p = self._point(point)
        leads = []
        for lead in self.leads:
            offset = p[f"leads.{lead.name}.offset_nm"]
            leads.append(Lead(lead.name, lead.side, (lead.span_nm[0] + offset, lead.span_nm[1] + offset),
                              potential=p[f"leads.{lead.name}.potential_meV"]))
        potential = p["potential.constant_meV"]
        layout = self.gate_layout()
        if layout is not None:
            layout = layout.with_voltages({name: p[f"gates.{name}.voltage_V"] for name in layout.names})
            gates = self.screened(layout) if self.gates.screening == "thomas-fermi" else layout
            potential = gates if potential == 0.0 else _ShiftedPotential(gates, potential)
        width = p["disorder.width_meV"]
        return Device(
            self.geometry.region(),
            leads,
            lattice=self.lattice.lattice(),
            material=self.material.material(),
            potential=potential,
            hopping=self.lattice.hopping_meV,
            energy_origin=self.lattice.energy_origin,
            field=MagneticField(p["field.tesla"], orbital=self.field.orbital, zeeman=self.field.zeeman,
                                flux_per_cell=p["field.flux_per_cell"] or None),
            spin=self.spin.enabled,
            rashba=p["spin.rashba_meV_nm"],
            disorder=Disorder(width, int(p["disorder.seed"])) if width > 0.0 else None,
        )

    def heterostructure(self):
        """The 2DEG under the gates as a :class:`~rgftrans.electrostatics.screening.Heterostructure`."""
        from rgftrans.electrostatics.screening import Heterostructure

        if self.gates is None or self.material.density_cm2 is None:
            raise ConfigError(f"{self._source}: a heterostructure needs [gates] depth_nm and [material] density_cm2")
        return Heterostructure(depth_nm=self.gates.depth_nm, density_cm2=self.material.density_cm2,
                               material=self.material.material(), valley_degeneracy=self.gates.valley_degeneracy,
                               spin_degeneracy=2, surface=self.gates.surface,
                               temperature_K=self.gates.screening_temperature_K)

    def screening_grid(self) -> tuple[tuple[float, float, float, float], float]:
        """The screening grid: its rectangle (nm; the device and every gate plus the margin) and spacing (nm)."""
        depth = self.gates.depth_nm
        spacing = self.gates.screening_grid_nm or min(depth / 4.0, 10.0)
        margin = self.gates.screening_margin_nm or 4.0 * depth
        boxes = [self.geometry.region().bounds] + [g.shape.bounds for g in self.gate_layout().gates]
        x0, y0 = min(b[0] for b in boxes) - margin, min(b[1] for b in boxes) - margin
        x1, y1 = max(b[2] for b in boxes) + margin, max(b[3] for b in boxes) + margin
        return (x0, y0, x1, y1), spacing

    def screened(self, layout):
        """The gates' potential screened by the 2DEG (Thomas-Fermi, self-consistent), cached by voltages.

        Points of a sweep that differ only in non-gate parameters share one solution; a new set of voltages
        starts from the last solution (warm start).
        """
        from rgftrans.electrostatics.screening import screen

        key = tuple(sorted((g.name, float(g.voltage)) for g in layout.gates))
        cache = self._screen_cache
        if key not in cache:
            extent, spacing = self.screening_grid()
            last = next(reversed(cache.values()), None) if cache else None
            cache[key] = screen(layout, self.heterostructure(), extent_nm=extent, spacing_nm=spacing, initial=last)
            while len(cache) > 4:  # a sweep walks its grid: a few recent solutions are all that is reused
                cache.pop(next(iter(cache)))
        return cache[key]

    def geometry_key(self, point: Mapping[str, float] | None = None) -> tuple[float, ...]:
        """The geometry-changing values of a point: every lead's offset (nm), in lead order.

        Two points with equal keys discretise to the same sites, leads and
        slicing, so a sweep may cache that work under this key.
        """
        p = self._point(point)
        return tuple(p[f"leads.{lead.name}.offset_nm"] for lead in self.leads)

    def estimate(self, workers: int | None = None):
        """What the sweep will cost, from the base point's region alone (:class:`rgftrans.system.budget.RunEstimate`)."""
        from rgftrans.system.budget import run_estimate
        from rgftrans.system.device import estimate_size

        axes = self.axes()
        return run_estimate(
            estimate_size(self.build_device(self.base_point())),
            n_points=math.prod(len(ax.values) for ax in axes),
            n_energies=len(self.energies()),
            n_leads=len(self.leads),
            n_temperatures=max(len(self.temperatures()), 1),
            n_ldos_energies=len(self.output.ldos_at_meV),
            workers=workers or self.cluster.workers,
        )

    def sweep_geometries(self) -> list[dict[str, float]]:
        """One sweep point (a parameter mapping) for each distinct geometry the sweep visits, base point first."""
        from itertools import product

        axes = [ax for ax in self.axes() if self.parameters()[ax.parameter].changes_geometry]
        points = [{}]
        for values in product(*(ax.values for ax in axes)) if axes else []:
            points.append({ax.parameter: float(v) for ax, v in zip(axes, values)})
        seen, out = set(), []
        for point in points:
            key = self.geometry_key(point)
            if key not in seen:
                seen.add(key)
                out.append(point)
        return out

    def check_geometries(self) -> int:
        """Check every geometry the sweep visits (lattice fill and leads only, no Hamiltonian).

        Returns the number of distinct geometries.  Raises ConfigError naming
        the first sweep point whose lead misses or overlaps the device, so
        ``rgftrans check`` finds what ``run`` would refuse at a later point.
        """
        from rgftrans.system.device import check_geometry
        from rgftrans.errors import GeometryError, LeadError

        points = self.sweep_geometries()
        for point in points[1:]:
            try:
                check_geometry(self.build_device(point))
            except (GeometryError, LeadError) as error:
                where = ", ".join(f"{k} = {v:g}" for k, v in point.items())
                raise ConfigError(f"{self._source}: at sweep point {where}: {error}") from None
        return len(points)

    # --- records ---

    def canonical_json(self, *, run_settings: bool = True) -> str:
        """The whole config, defaults filled in, as compact JSON with sorted keys.

        Parameters
        ----------
        run_settings : bool, keyword-only
            Include ``output.path``, ``output.overwrite`` and ``[cluster]``,
            which say where and how a run goes but not what it computes.
        """
        data = self.model_dump(mode="json", exclude_none=True)
        if not run_settings:
            del data["cluster"]
            del data["output"]["path"], data["output"]["overwrite"]
        return json.dumps(data, sort_keys=True, separators=(",", ":"), ensure_ascii=False, allow_nan=False)

    def config_hash(self) -> str:
        """sha256 (hex) of :meth:`canonical_json` without the run settings.

        Equal for configs that compute the same results: comments,
        whitespace, key order, ``4`` versus ``4.0``, the output path and the
        cluster do not change it.  Every file the config reads (a GDS
        layout) enters by its content: editing the layout between a killed
        run and its resume makes another sweep, not a mixed file.
        """
        digest = hashlib.sha256(self.canonical_json(run_settings=False).encode())
        for key, path in sorted(self.input_files().items()):
            digest.update(f"\n{key}:".encode())
            digest.update(_file_digest(path, f"{self._source}: {key}").encode())
        return digest.hexdigest()


# --- loading -------------------------------------------------------------------------------------

#: Largest config file read (bytes): a run config is a few kB; anything larger is not one.
MAX_CONFIG_BYTES = 1 << 20
#: Largest input file (GDS layout) hashed or read (bytes).
MAX_INPUT_BYTES = 1 << 30


def regular_file(path: Path, what: str, limit: int) -> Path:
    """``path`` if it is an existing regular file of at most ``limit`` bytes, else a one-line ConfigError.

    Refuses directories, FIFOs and devices (which would hang or never end) before opening them.
    """
    import stat

    try:
        info = path.stat()
    except FileNotFoundError:
        raise ConfigError(f"{what}: {path} does not exist; check the path") from None
    except OSError as error:
        raise ConfigError(f"{what}: cannot read {path} ({error.strerror or type(error).__name__})") from None
    if stat.S_ISDIR(info.st_mode):
        raise ConfigError(f"{what}: {path} is a directory; give the path of a file")
    if not stat.S_ISREG(info.st_mode):
        raise ConfigError(f"{what}: {path} is not a regular file (a pipe or device?); give the path of a file")
    if info.st_size > limit:
        raise ConfigError(f"{what}: {path} has {info.st_size} bytes, more than the {limit} a file of this kind "
                          "may have; check the path")
    return path


def _file_digest(path: Path, what: str) -> str:
    """sha256 (hex) of a regular file's content, read in blocks."""
    digest = hashlib.sha256()
    with open(regular_file(path, what, MAX_INPUT_BYTES), "rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            digest.update(block)
    return digest.hexdigest()


def load_config(path: str | Path) -> RunConfig:
    """Read and validate a TOML run configuration.

    Parameters
    ----------
    path : str or path-like
        The TOML file.  A GDS path inside it is relative to the file's folder.

    Returns
    -------
    RunConfig

    Raises
    ------
    ConfigError
        One line naming the file, the key, the bad value and the fix.
    """
    file = Path(path)
    if not file.exists():
        raise ConfigError(f"{file}: cannot read the config, got a path that does not exist; check the path")
    regular_file(file, f"{file}: the config", MAX_CONFIG_BYTES)
    try:
        text = file.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as error:
        reason = getattr(error, "strerror", None) or type(error).__name__
        raise ConfigError(f"{file}: cannot read the config ({reason}); give a readable UTF-8 TOML file") from None
    return parse_config(text, source=str(file), base_dir=file.parent)


def parse_config(text: str, *, source: str = "<string>", base_dir: str | Path | None = None) -> RunConfig:
    """Validate a TOML run configuration given as text.

    Parameters
    ----------
    text : str
        TOML.
    source : str, keyword-only
        Name used in error messages and for the default output file
        (``out/<stem of source>.h5``; ``out/run.h5`` for ``"<...>"`` names).
    base_dir : str or path-like, optional, keyword-only
        Folder a relative GDS path is taken from (default: the working directory).

    Returns
    -------
    RunConfig
    """
    if not isinstance(text, str):
        raise ConfigError(f"{source}: the config must be TOML text, got {type(text).__name__}; pass a str")
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as error:
        raise ConfigError(_toml_message(source, text, error)) from None
    config = validate_config(data, source=source, base_dir=base_dir)
    config._text = text
    return config


def validate_config(data: Mapping[str, Any], *, source: str = "<dict>",
                    base_dir: str | Path | None = None) -> RunConfig:
    """Validate a config already parsed into a dict (TOML types: str, int, float, bool, list, dict)."""
    stem = "run" if source.startswith("<") else Path(source).stem
    try:
        config = RunConfig.model_validate(data, context={"stem": stem})
    except ValidationError as error:
        # Unknown keys first: a misspelled key also shows up as a missing one.
        errors = sorted(error.errors(include_url=False), key=lambda e: e["type"] != "extra_forbidden")
        problems = tuple(_translate(e, RunConfig, RUN_ADVICE) for e in errors)
        more = f" (+{len(problems) - 1} more)" if len(problems) > 1 else ""
        raise ConfigError(f"{source}: {problems[0]}{more}", problems=tuple(f"{source}: {p}" for p in problems)) from None
    config._source = source
    config._base_dir = Path(base_dir) if base_dir is not None else None
    return config
