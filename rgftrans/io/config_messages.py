"""One-line messages for configuration errors: the error class, value rendering, pydantic-error translation.

Split from :mod:`rgftrans.io.config`; shared with :mod:`rgftrans.io.waveguide_config`.
"""

from __future__ import annotations

import difflib
import math
import re
import tomllib
import types
import typing
from collections.abc import Mapping
from typing import Annotated, Any, Union

import numpy as np
from pydantic import BaseModel
from pydantic_core import PydanticCustomError


# Longest rendering of a bad value in an error message before it is cut.
_MAX_VALUE_CHARS = 60

# Error type of the problems raised by the validators.
_PROBLEM = "rgftrans_config"


# --- small helpers -------------------------------------------------------------------------------


def _one_line(text: str) -> str:
    return text.replace("\r\n", " ").replace("\n", " ").replace("\r", " ")


def _show(value: Any) -> str:
    """A bad value as TOML-like text for messages, cut to _MAX_VALUE_CHARS."""

    def render(v: Any) -> str:
        if isinstance(v, bool):
            return "true" if v else "false"
        if isinstance(v, str):
            return repr(v)
        if isinstance(v, float):
            if v != 0 and math.isfinite(v) and not 1e-4 <= abs(v) < 1e6:
                return np.format_float_scientific(v, trim="-")  # 2e+11 rather than 200000000000.0
            return repr(v)
        if isinstance(v, Mapping):
            return "{" + ", ".join(f"{k} = {render(x)}" for k, x in v.items()) + "}"
        if isinstance(v, (list, tuple)):
            return "[" + ", ".join(render(x) for x in v) + "]"
        return repr(v)

    text = render(value)
    return text if len(text) <= _MAX_VALUE_CHARS else text[: _MAX_VALUE_CHARS - 3] + "..."


def _with_value(message: str, value: Any) -> str:
    """A library error message ('what; fix') with ', got <value>' after the 'what', unless it quotes one."""
    what, sep, fix = message.partition("; ")
    if "got" in what:
        return message
    return f"{what}, got {_show(value)}{sep}{fix}"


def _problem(message: str, key: str = "") -> PydanticCustomError:
    """A validation problem; ``key`` is the path below the validated table."""
    return PydanticCustomError(_PROBLEM, "{message}", {"message": message, "key": key})


def _quoted(names) -> str:
    return ", ".join(repr(n) for n in names)


def _did_you_mean(word: str, choices) -> str:
    close = difflib.get_close_matches(word, list(choices), n=1)
    return f"did you mean {close[0]!r}? " if close else ""


def _toml_message(source: str, text: str, error: tomllib.TOMLDecodeError) -> str:
    """A TOML syntax error as one line, with the line number and the line's text."""
    message = str(error)
    lines = text.splitlines() or [""]
    where = re.search(r"\(at line (\d+), column (\d+)\)", message)
    if where:
        number = int(where.group(1))
        place = f"line {number}, column {where.group(2)}"
    else:  # "(at end of document)"
        number = len(lines)
        place = f"line {number} (end of file)"
    reason = re.sub(r"\s*\(at [^)]*\)\s*$", "", message)
    line = lines[number - 1].strip() if 0 < number <= len(lines) else ""
    return (f"{source}: {place}: invalid TOML ({reason}), got {_show(line)}; "
            "fix the syntax there: quote strings, close arrays and [table] headers")


# --- ValidationError -> one line -----------------------------------------------------------------

# Advice for a key of the run schema (rgftrans.io.config.RunConfig), by its pattern ("[]" stands for any index).
RUN_ADVICE = {
    "lattice": 'add a [lattice] table, e.g. kind = "square", spacing_nm = 4.0',
    "lattice.spacing_nm": "give the nearest-neighbour distance in nm, e.g. spacing_nm = 4.0",
    "lattice.hopping_meV": "give the hopping in meV, > 0, or leave it out for the effective-mass value",
    "geometry": "add a [geometry] table with one of rectangle_nm = [x0, y0, x1, y1], "
                "polygon_nm = [[x, y], ...] or disk_nm = [cx, cy, r] (nm)",
    "geometry.rectangle_nm": "give the corners [x0, y0, x1, y1] in nm",
    "geometry.disk_nm": "give [cx, cy, r] in nm, r > 0",
    "geometry.polygon_nm": "give the vertices [[x, y], ...] in nm, at least 3",
    "leads": "give one [[leads]] table per lead (double brackets) with name, side and span_nm",
    "leads[].span_nm": "give [lo, hi] in nm along the lead's side",
    "leads[].name": "lead names go into sweep paths such as leads.<name>.offset_nm; rename it, e.g. 'source_1'",
    "leads[].side": "the lead leaves the device on this side and runs to infinity",
    "gates.gate[].name": "gate names go into sweep paths such as gates.<name>.voltage_V; rename it, e.g. 'plunger_1'",
    "gates.gate[].voltage_V": "give the gate voltage in V, e.g. voltage_V = -0.05",
    "gates.depth_nm": "give the depth of the 2DEG below the surface gates in nm, > 0",
    "gates.gate": "give one [[gates.gate]] table per gate (double brackets)",
    "energy": "add an [energy] table with start_meV, stop_meV and points, or values_meV = [...]",
    "energy.points": "give the number of energies, a whole number >= 1",
    "material.density_cm2": "give the 2DEG sheet density in cm^-2, e.g. 2.0e11",
    "material.eps_r": "give the static relative permittivity, >= 1 (e.g. 12.9)",
    "temperature.kelvin": "give temperatures in K, e.g. kelvin = [0.1, 1.0]",
    "temperature.kelvin[]": "temperatures are absolute, in K",
    "sweep.axis": "give one [[sweep.axis]] table per axis, with parameter and start, stop, points or values",
    "sweep.axis[].points": "give the number of values, a whole number >= 1",
    "disorder.width_meV": "give the full width W of the uniform distribution in meV, >= 0",
    "disorder.seed": "give a whole number >= 0",
    "output.path": 'name an HDF5 file ending in .h5, e.g. path = "out/run.h5"',
    "cluster.workers": "give the number of worker processes, a whole number >= 1",
}

_GENERIC_ADVICE = {
    "float_type": "write a number without quotes",
    "float_parsing": "write a number without quotes",
    "int_type": "write a whole number without quotes or decimal point",
    "int_from_float": "write a whole number without a decimal point",
    "bool_type": "write true or false",
    "string_type": "write a quoted string",
    "list_type": "write an array [a, b, ...]",
    "model_type": "write a table",
    "dict_type": "write a table",
    "finite_number": "nan and inf are not allowed; give a finite number",
    "literal_error": "pick one of these",
    "string_pattern_mismatch": "fix the spelling",
    "string_too_short": "give a non-empty string",
    "missing": "add it",
}


def _strip(annotation: Any) -> Any:
    """Remove Annotated[...] and Optional from a type annotation."""
    while True:
        origin = typing.get_origin(annotation)
        if origin is Annotated:
            annotation = typing.get_args(annotation)[0]
        elif origin in (Union, types.UnionType):
            args = [a for a in typing.get_args(annotation) if a is not type(None)]
            if len(args) != 1:
                return annotation
            annotation = args[0]
        else:
            return annotation


def _walk(loc: tuple, root: Any) -> tuple[Any, str, list]:
    """Follow an error location through the schema.

    Returns the annotation reached, the pattern of the key (indices as
    ``[]``, mapping keys as ``*``) and the constraints on the value there.
    """
    node: Any = root
    pattern = ""
    metadata: list = []
    for segment in loc:
        node = _strip(node)
        origin = typing.get_origin(node)
        metadata = []
        if isinstance(node, type) and issubclass(node, BaseModel) and isinstance(segment, str):
            field = node.model_fields.get(segment)
            pattern += ("." if pattern else "") + segment
            node = field.annotation if field is not None else None
            metadata = list(field.metadata) if field is not None else []
        elif origin is list and isinstance(segment, int):
            pattern += "[]"
            node = typing.get_args(node)[0]
        elif origin is dict:
            pattern += ".*"
            node = typing.get_args(node)[1]
        else:
            pattern += ("." if pattern else "") + str(segment)
            node = None
    # Constraints written as Annotated[...] inside an Optional stay in the annotation.
    inner = node
    while inner is not None:
        origin = typing.get_origin(inner)
        if origin is Annotated:
            args = typing.get_args(inner)
            for item in args[1:]:
                metadata.extend(getattr(item, "metadata", [item]))
            inner = args[0]
        elif origin in (Union, types.UnionType):
            args = [a for a in typing.get_args(inner) if a is not type(None)]
            inner = args[0] if len(args) == 1 else None
        else:
            break
    return node, pattern, metadata


def _path(loc: tuple) -> str:
    text = ""
    for segment in loc:
        if isinstance(segment, int):
            text += f"[{segment}]"
        elif segment:
            text += ("." if text else "") + segment
    return text


def _translate(error: dict, root: Any, advice: Mapping[str, str] | None = None) -> str:
    """One pydantic error of the schema ``root`` as ``<key.path>: <what>, got <value>; <fix>``.

    ``advice`` maps key patterns of that schema (indices as ``[]``) to a fix.
    """
    kind, loc, ctx = error["type"], tuple(error["loc"]), error.get("ctx") or {}
    path = _path(loc)
    if kind == _PROBLEM:
        key = ctx.get("key", "")
        where = f"{path}.{key}" if path and key else path or key or "config"
        return f"{where}: {ctx['message']}"
    path = path or "config"
    if kind == "extra_forbidden":
        parent, _, _ = _walk(loc[:-1], root)
        parent = _strip(parent)
        allowed = list(parent.model_fields) if isinstance(parent, type) and issubclass(parent, BaseModel) else []
        key = str(loc[-1])
        close = difflib.get_close_matches(key, allowed, n=1)
        advice = getattr(parent, "unknown_key_advice", "")
        if close:
            hint = f"did you mean {close[0]!r}?"
        else:
            hint = advice or f"allowed keys here: {', '.join(allowed)}"
        return f"{path}: unknown key {key!r}; {hint}"
    _, pattern, metadata = _walk(loc, root)
    if kind in ("too_short", "too_long"):
        for item in metadata:
            for name in ("min_length", "max_length"):
                if getattr(item, name, None) is not None:
                    ctx = {**ctx, name: getattr(item, name)}
    section = f"[{loc[0]}]" if loc else root.__name__
    fix = (advice or {}).get(pattern) or _GENERIC_ADVICE.get(kind) or \
        f"see the schema of {section} in {root.__module__}"
    if kind == "missing":
        what = f"missing required section [{loc[0]}]" if len(loc) == 1 else f"missing required key {loc[-1]!r}"
        return f"{path}: {what}, got nothing; {fix}"
    return f"{path}: {_describe(kind, ctx, error['msg'])}, got {_show(error['input'])}; {fix}"


def _describe(kind: str, ctx: dict, msg: str) -> str:
    """What is wrong, for a pydantic error type."""
    fixed = {
        "float_type": "must be a number",
        "float_parsing": "must be a number",
        "int_type": "must be an integer",
        "int_from_float": "must be a whole number",
        "bool_type": "must be true or false",
        "string_type": "must be a string",
        "list_type": "must be an array",
        "model_type": "must be a table",
        "dict_type": "must be a table",
        "finite_number": "must be finite",
        "string_too_short": "must not be empty",
    }
    if kind in fixed:
        return fixed[kind]
    if kind == "greater_than":
        return f"must be > {ctx['gt']:g}"
    if kind == "greater_than_equal":
        return f"must be >= {ctx['ge']:g}"
    if kind == "literal_error":
        return f"must be one of {ctx['expected']}"
    if kind == "string_pattern_mismatch":
        return "must start with a letter and hold only letters, digits, '_' and '-'"
    if kind in ("too_short", "too_long"):
        low, high = ctx.get("min_length"), ctx.get("max_length")
        if low is not None and low == high:
            return f"needs exactly {low} item(s)"
        if kind == "too_short":
            return f"needs at least {low} item(s)"
        return f"takes at most {high} item(s)"
    return msg[:1].lower() + msg[1:]
