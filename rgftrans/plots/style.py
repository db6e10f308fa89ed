"""How figures name and scale their axes: physical names with units, never raw config keys.

Every figure that shows a sweep parameter goes through :func:`axis_display`,
which turns a parameter (its config path ``gates.upper.voltage_V``, its stored
name ``gates__upper__voltage_V``, or a plain name) and its unit into a label
such as ``"upper gate voltage (mV)"`` and rescales the values into the unit
shown.  No matplotlib import here: these are plain string and array helpers.
"""

from __future__ import annotations

import re

import numpy as np

#: Label of the conductance axis and colour bars, and of the secondary axis in microsiemens.
CONDUCTANCE_LABEL = "conductance (2e²/h)"
CONDUCTANCE_SIEMENS_LABEL = "conductance (µS)"
#: Labels of the plane of a device (lengths in nm unless a model says otherwise).
X_LABEL = "x position ({unit})"
Y_LABEL = "y position ({unit})"
POTENTIAL_LABEL = "potential energy (meV)"

#: Smaller display units: (stored unit, shown unit, factor, used when max |value| is below this, in stored units).
#: A 20 mV gate sweep reads better as -10 ... 10 mV than as -0.01 ... 0.01 V.
_SMALLER_UNITS = {
    "V": ("mV", 1e3, 1.0),
    "T": ("mT", 1e3, 0.1),
    "K": ("mK", 1e3, 0.1),
    "meV": ("µeV", 1e3, 0.1),
    "GHz": ("MHz", 1e3, 0.1),
}
#: How stored unit strings are written on a figure.
_UNIT_TEXT = {"1": "", "": "", "um": "µm", "uS": "µS", "meV nm": "meV·nm", "2e^2/h": "2e²/h", "1/meV": "1/meV"}

# Parameter paths (dots) or stored names (double underscores) -> physical names.
_SEP = r"(?:\.|__)"
_PARAMETER_NAMES = (
    (re.compile(rf"^gates{_SEP}(?P<n>.+?){_SEP}voltage_V$"), "{n} gate voltage"),
    (re.compile(rf"^leads{_SEP}(?P<n>.+?){_SEP}potential_meV$"), "band offset of lead {n}"),
    (re.compile(rf"^leads{_SEP}(?P<n>.+?){_SEP}offset_nm$"), "position of lead {n}"),
    (re.compile(rf"^dielectric{_SEP}(?P<n>.+?){_SEP}permittivity$"), "relative permittivity of {n}"),
    (re.compile(rf"^dielectric{_SEP}(?P<n>.+?){_SEP}shift_x$"), "x shift of {n}"),
    (re.compile(rf"^dielectric{_SEP}(?P<n>.+?){_SEP}shift_y$"), "y shift of {n}"),
    (re.compile(rf"^field{_SEP}tesla$"), "magnetic field B"),
    (re.compile(rf"^potential{_SEP}constant_meV$"), "constant potential energy"),
    (re.compile(rf"^spin{_SEP}rashba_meV_nm$"), "Rashba coupling α"),
    (re.compile(rf"^disorder{_SEP}width_meV$"), "disorder width W"),
    (re.compile(rf"^disorder{_SEP}seed$"), "disorder seed"),
    (re.compile(r"^energy$"), "energy E"),
    (re.compile(r"^temperature$"), "temperature"),
)
#: Unit suffixes of config keys (``voltage_V``), stripped from names no pattern knows.
_KEY_SUFFIX = re.compile(r"_(?:V|mV|meV|meV_nm|nm|um|mm|T|K|GHz|S)$")


def unit_text(unit: str) -> str:
    """A stored unit string as shown on a figure (``"um"`` -> ``"µm"``, ``"1"`` -> ``""``)."""
    unit = str(unit).strip()
    return _UNIT_TEXT.get(unit, unit)


def parameter_name(name: str, long_name: str | None = None) -> str:
    """Physical name of a sweep parameter: ``gates.upper.voltage_V`` -> ``"upper gate voltage"``.

    Known parameter paths (dotted, or stored with ``__``) get their physical
    name; otherwise the stored ``long_name`` if given, else the name with its
    unit suffix dropped and underscores as spaces.
    """
    text = str(name).strip()
    for pattern, template in _PARAMETER_NAMES:
        hit = pattern.match(text)
        if hit:
            return template.format(**{k: v.replace("_", " ") for k, v in hit.groupdict().items()})
    if long_name:
        return str(long_name)
    last = re.split(_SEP, text)[-1]
    return _KEY_SUFFIX.sub("", last).replace("_", " ")


def display_unit(unit: str, values) -> tuple[str, float]:
    """The unit to show and the factor that converts stored values into it.

    ``V`` becomes ``mV`` when every finite value is below 1 V in magnitude
    (likewise T -> mT and K -> mK below 0.1, meV -> µeV below 0.1).
    """
    unit = str(unit).strip()
    values = np.asarray(values, dtype=float)
    finite = values[np.isfinite(values)]
    if unit in _SMALLER_UNITS and finite.size:
        shown, factor, below = _SMALLER_UNITS[unit]
        biggest = float(np.max(np.abs(finite)))
        if 0 < biggest < below:
            return shown, factor
    return unit_text(unit), 1.0


def axis_display(name: str, unit: str, values, *, long_name: str | None = None) -> tuple[str, np.ndarray]:
    """Label and rescaled values for an axis showing a sweep parameter.

    Parameters
    ----------
    name : str
        Parameter path (``gates.upper.voltage_V``), stored axis name
        (``gates__upper__voltage_V``) or a plain physical name.
    unit : str
        Unit of ``values`` as stored (``"V"``, ``"meV"``, ``"1"`` for none).
    values : (n,) float array_like
    long_name : str, optional
        The stored description, used when ``name`` is not a known parameter.

    Returns
    -------
    label : str
        ``"upper gate voltage (mV)"``; no parentheses for a dimensionless axis.
    values : (n,) float ndarray
        ``values`` converted into the unit of the label.

    Examples
    --------
    >>> axis_display("gates.upper.voltage_V", "V", [-0.01, 0.01])
    ('upper gate voltage (mV)', array([-10.,  10.]))
    >>> axis_display("field__tesla", "T", [0.5, 2.0])[0]
    'magnetic field B (T)'
    """
    label, factor = axis_scale(name, unit, values, long_name=long_name)
    return label, np.asarray(values, dtype=float) * factor


def axis_scale(name: str, unit: str, values, *, long_name: str | None = None) -> tuple[str, float]:
    """Like :func:`axis_display`, but returns the factor from stored to shown units instead of the values
    (for marking further points, e.g. a located BIC, on the same axis)."""
    shown, factor = display_unit(unit, values)
    label = parameter_name(name, long_name)
    if shown:
        label = f"{label} ({shown})"
    return label, factor


def position_labels(unit: str = "nm") -> tuple[str, str]:
    """Labels of the x and y axes of a map of the device plane."""
    shown = unit_text(unit)
    return X_LABEL.format(unit=shown), Y_LABEL.format(unit=shown)


def format_value(value: float, unit: str) -> str:
    """One value with the unit a figure would show it in: ``(-0.004, "V")`` -> ``"-4 mV"``."""
    shown, factor = display_unit(unit, [value])
    return f"{value * factor:.4g} {shown}".rstrip()


#: Colour maps: sequential for a one-signed quantity, diverging (centred on zero) when it changes sign.
SEQUENTIAL_POSITIVE = "magma"   # repulsive potential, densities
SEQUENTIAL_NEGATIVE = "viridis"  # attractive potential (all values <= 0)
DIVERGING = "RdBu_r"


def signed_colour_scale(values) -> tuple[str, bool]:
    """Colour map name for a map of ``values``, and whether it is diverging (centre it on zero).

    One-signed values (all >= 0 or all <= 0) get a sequential scale, values of
    both signs a diverging one.
    """
    values = np.asarray(values, dtype=float)
    finite = values[np.isfinite(values)]
    if finite.size == 0 or finite.min() >= 0:
        return SEQUENTIAL_POSITIVE, False
    if finite.max() <= 0:
        return SEQUENTIAL_NEGATIVE, False
    return DIVERGING, True


def readable_ticks(ax) -> None:
    """Plain tick labels on linear axes: no offset (``+1.2e3``) and no scientific multiplier."""
    for axis in (ax.xaxis, ax.yaxis):
        if axis.get_scale() == "linear":
            try:
                axis.get_major_formatter().set_useOffset(False)
            except AttributeError:  # a categorical or custom formatter
                pass


#: Units of sweep parameters, from the unit suffix of their config key (``voltage_V`` -> V).
_PARAMETER_UNITS = (("_meV_nm", "meV nm"), ("_meV", "meV"), ("_mV", "mV"), ("_V", "V"), ("_nm", "nm"),
                    ("tesla", "T"), ("_K", "K"), ("_GHz", "GHz"), ("permittivity", "1"), ("seed", "1"))


def parameter_unit(name: str, default: str = "") -> str:
    """Unit of a sweep parameter read from its key (``gates.upper.voltage_V`` -> ``"V"``); ``default`` if unknown."""
    text = str(name).strip()
    for suffix, unit in _PARAMETER_UNITS:
        if text.endswith(suffix):
            return unit
    return default
