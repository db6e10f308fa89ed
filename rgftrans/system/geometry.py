"""Planar regions in nanometres, backed by shapely 2.

A :class:`Region` is the outline of a device (or of a gate, a lead opening,
a dielectric inclusion) in the plane of the 2DEG.  Regions are built from
three primitives, :func:`rectangle`, :func:`disk` and :func:`polygon`, and
combined with the set operators ``|`` (union), ``-`` (difference) and ``&``
(intersection) or the functions :func:`union` and :func:`difference`.  The
discretiser asks a region which lattice sites it holds with
:meth:`Region.contains`, one vectorised call for all sites.

All lengths are in nm and all areas in nm².

The operators are plain set algebra and may give an empty region (test with
:attr:`Region.is_empty`, e.g. ``(a & b).is_empty`` for "do a and b
overlap?").  The functions :func:`union` and :func:`difference` build a shape
that is meant to hold sites, so they raise :class:`~rgftrans.errors.GeometryError`
when the result is empty.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import cached_property

import numpy as np
import shapely
from shapely.geometry import MultiPolygon, Polygon

from rgftrans.errors import GeometryError

__all__ = [
    "BOUNDARY_TOLERANCE_NM",
    "DEFAULT_DISK_SEGMENTS",
    "Region",
    "difference",
    "disk",
    "polygon",
    "rectangle",
    "union",
]

# Points on the boundary count as inside: `Region.contains` tests against the
# region grown outward by this distance, so that lattice sites placed exactly
# on an edge (the usual case for a rectangle whose sides are multiples of the
# lattice constant) are kept despite floating-point round-off.  Far below any
# lattice constant in use (>= 0.1 nm), so no site off the boundary is added.
BOUNDARY_TOLERANCE_NM = 1e-6

# Vertices of the polygon that approximates a circle in `disk`.  The inscribed
# 64-gon has an area 0.16 % below pi r^2 (relative deficit 1 - sin(x)/x with
# x = 2 pi / 64).
DEFAULT_DISK_SEGMENTS = 64

# How many points an error message quotes before it abbreviates.
_MAX_POINTS_QUOTED = 4


def _format_points(points: np.ndarray) -> str:
    """One-line rendering of an (n, 2) point array for error messages."""
    rows = [f"({x:g}, {y:g})" for x, y in points[:_MAX_POINTS_QUOTED]]
    if len(points) > _MAX_POINTS_QUOTED:
        rows.append(f"... {len(points) - _MAX_POINTS_QUOTED} more")
    return "[" + ", ".join(rows) + "]"


def _format_bounds(region: Region) -> str:
    """Bounds of a region as text for messages, 'empty' for an empty one."""
    if region.is_empty:
        return "empty"
    return "({:g}, {:g}, {:g}, {:g}) nm".format(*region.bounds)


def _finite_float(name: str, value: object) -> float:
    """Return ``value`` as a float, or raise GeometryError naming ``name``."""
    try:
        number = float(value)  # type: ignore[arg-type]
    except (TypeError, ValueError):
        raise GeometryError(
            f"{name} must be a number in nm, got {value!r}; pass a finite float"
        ) from None
    if not math.isfinite(number):
        raise GeometryError(f"{name} is not finite: {value!r}; give a finite value in nm")
    return number


def _point_array(name: str, points: object) -> np.ndarray:
    """Return ``points`` as a finite (n, 2) float array, or raise GeometryError."""
    try:
        array = np.asarray(points, dtype=float)
    except (TypeError, ValueError):
        raise GeometryError(
            f"{name} must be an (n, 2) array of numbers in nm, got {points!r}; "
            "pass x, y pairs"
        ) from None
    if array.ndim != 2 or array.shape[1] != 2:
        raise GeometryError(
            f"{name} must have shape (n, 2), got shape {array.shape}; pass one x, y pair per row"
        )
    bad = ~np.isfinite(array).all(axis=1)
    if bad.any():
        row = int(np.argmax(bad))
        raise GeometryError(
            f"{name} has a non-finite coordinate in row {row}: "
            f"({array[row, 0]}, {array[row, 1]}); give finite coordinates in nm"
        )
    return array


def _polygonal_part(geometry: shapely.Geometry) -> Polygon | MultiPolygon:
    """Keep the parts of a set-operation result that have area.

    Overlay operations return lines or points where shapes only touch (two
    rectangles sharing an edge intersect in a segment); such parts hold no
    area and so no lattice sites, and are dropped.
    """
    if isinstance(geometry, (Polygon, MultiPolygon)):
        return geometry
    parts = [
        part
        for part in shapely.get_parts(geometry)
        if isinstance(part, Polygon) and not part.is_empty
    ]
    if not parts:
        return Polygon()
    if len(parts) == 1:
        return parts[0]
    return MultiPolygon(parts)


@dataclass(frozen=True)
class Region:
    """A region of the plane in nm: a shapely Polygon or MultiPolygon.

    Parameters
    ----------
    geometry : shapely.Polygon or shapely.MultiPolygon
        Outline in nm.  Must be valid in the OGC sense (no self-intersection);
        may be empty.  Usually built with :func:`rectangle`, :func:`disk`,
        :func:`polygon` and the set operators rather than directly.

    Notes
    -----
    ``a | b`` is the union, ``a - b`` the difference and ``a & b`` the
    intersection; each returns a new Region, possibly empty.
    """

    geometry: Polygon | MultiPolygon

    def __post_init__(self) -> None:
        if not isinstance(self.geometry, (Polygon, MultiPolygon)):
            raise GeometryError(
                f"a Region needs a shapely Polygon or MultiPolygon, got "
                f"{type(self.geometry).__name__}; build it with rectangle, disk or polygon"
            )
        if not self.geometry.is_valid:
            reason = shapely.is_valid_reason(self.geometry)
            raise GeometryError(
                f"region outline is invalid ({reason}); "
                "reorder its vertices so that no edges cross"
            )

    @cached_property
    def _grown(self) -> shapely.Geometry:
        """The geometry grown by BOUNDARY_TOLERANCE_NM, prepared for fast queries."""
        grown = self.geometry.buffer(BOUNDARY_TOLERANCE_NM)
        shapely.prepare(grown)
        return grown

    def contains(self, xy: object) -> np.ndarray:
        """Which points lie in the region (boundary included).

        Parameters
        ----------
        xy : (n, 2) float array_like, nm
            Point coordinates, one x, y pair per row.

        Returns
        -------
        inside : (n,) bool ndarray
            True where the point lies inside the region or within
            ``BOUNDARY_TOLERANCE_NM`` of its boundary.

        Examples
        --------
        >>> square = rectangle(0.0, 0.0, 10.0, 10.0)
        >>> square.contains([[5.0, 5.0], [10.0, 3.0], [10.1, 3.0]]).tolist()
        [True, True, False]
        """
        points = np.asarray(xy, dtype=float)
        if points.ndim != 2 or points.shape[1] != 2:
            raise GeometryError(
                f"points must have shape (n, 2), got shape {points.shape}; "
                "pass one x, y pair per row (use xy.reshape(-1, 2) for a single point)"
            )
        return np.asarray(
            shapely.contains_xy(self._grown, points[:, 0], points[:, 1]), dtype=bool
        )

    @property
    def bounds(self) -> tuple[float, float, float, float]:
        """Bounding box ``(xmin, ymin, xmax, ymax)`` in nm."""
        if self.geometry.is_empty:
            raise GeometryError(
                "the region is empty, so it has no bounds; check is_empty before asking"
            )
        xmin, ymin, xmax, ymax = self.geometry.bounds
        return (float(xmin), float(ymin), float(xmax), float(ymax))

    @property
    def area(self) -> float:
        """Area in nm² (0 for an empty region)."""
        return float(self.geometry.area)

    @property
    def is_empty(self) -> bool:
        """True if the region holds no area."""
        return bool(self.geometry.is_empty)

    def __or__(self, other: object) -> Region:
        if not isinstance(other, Region):
            return NotImplemented
        return Region(_polygonal_part(shapely.union(self.geometry, other.geometry)))

    def __sub__(self, other: object) -> Region:
        if not isinstance(other, Region):
            return NotImplemented
        return Region(_polygonal_part(shapely.difference(self.geometry, other.geometry)))

    def __and__(self, other: object) -> Region:
        if not isinstance(other, Region):
            return NotImplemented
        return Region(_polygonal_part(shapely.intersection(self.geometry, other.geometry)))


def rectangle(x0: float, y0: float, x1: float, y1: float) -> Region:
    """Axis-aligned rectangle with opposite corners (x0, y0) and (x1, y1).

    Parameters
    ----------
    x0, y0, x1, y1 : float, nm
        Two opposite corners, in any order.

    Returns
    -------
    Region
        The rectangle; its area is ``|x1 - x0| * |y1 - y0|`` nm².

    Examples
    --------
    >>> rectangle(100.0, 0.0, 0.0, 40.0).bounds
    (0.0, 0.0, 100.0, 40.0)
    """
    x0 = _finite_float("rectangle corner x0", x0)
    y0 = _finite_float("rectangle corner y0", y0)
    x1 = _finite_float("rectangle corner x1", x1)
    y1 = _finite_float("rectangle corner y1", y1)
    if x0 == x1:
        raise GeometryError(
            f"rectangle has zero width: x0 = x1 = {x0:g} nm; give two different x coordinates"
        )
    if y0 == y1:
        raise GeometryError(
            f"rectangle has zero height: y0 = y1 = {y0:g} nm; give two different y coordinates"
        )
    return Region(shapely.box(min(x0, x1), min(y0, y1), max(x0, x1), max(y0, y1)))


def disk(
    centre: object, radius: float, *, segments: int = DEFAULT_DISK_SEGMENTS
) -> Region:
    """Disk approximated by a regular polygon inscribed in the circle.

    Parameters
    ----------
    centre : (2,) float array_like, nm
        Centre (x, y).
    radius : float, nm
        Radius of the circle; every polygon vertex lies on it.
    segments : int, keyword-only
        Number of polygon vertices (at least 3).

    Returns
    -------
    Region
        The inscribed ``segments``-gon, of area
        ``(segments / 2) * radius**2 * sin(2 pi / segments)`` nm², which is
        below ``pi * radius**2`` by the relative amount
        ``1 - sin(x) / x <= x**2 / 6`` with ``x = 2 pi / segments``
        (0.16 % for the default 64 vertices).
    """
    try:
        cx, cy = centre  # type: ignore[misc]
    except (TypeError, ValueError):
        raise GeometryError(
            f"disk centre must be an (x, y) pair in nm, got {centre!r}; pass two numbers"
        ) from None
    cx = _finite_float("disk centre x", cx)
    cy = _finite_float("disk centre y", cy)
    radius = _finite_float("disk radius", radius)
    if radius <= 0.0:
        raise GeometryError(f"disk radius must be positive, got {radius:g} nm; give a radius > 0")
    if isinstance(segments, bool) or not isinstance(segments, (int, np.integer)) or segments < 3:
        raise GeometryError(
            f"disk segments must be an integer >= 3, got {segments!r}; "
            f"use the default {DEFAULT_DISK_SEGMENTS} or more for a smoother circle"
        )
    angles = 2.0 * np.pi * np.arange(int(segments)) / int(segments)
    vertices = np.column_stack((cx + radius * np.cos(angles), cy + radius * np.sin(angles)))
    return Region(Polygon(vertices))


def polygon(vertices: object) -> Region:
    """Simple polygon through the given vertices.

    Parameters
    ----------
    vertices : (n, 2) float array_like, nm
        Vertices in order around the outline (either sense), n >= 3.  The
        outline is closed automatically; repeating the first vertex at the
        end is allowed.

    Returns
    -------
    Region
        The polygon.

    Examples
    --------
    >>> polygon([[0.0, 0.0], [30.0, 0.0], [0.0, 40.0]]).area
    600.0
    """
    points = _point_array("polygon vertices", vertices)
    if len(points) > 1 and np.array_equal(points[0], points[-1]):
        points = points[:-1]  # explicitly closed outline
    n_distinct = len(np.unique(points, axis=0))
    if n_distinct < 3:
        raise GeometryError(
            f"polygon needs at least 3 distinct vertices, got {n_distinct}: "
            f"{_format_points(points)}; add vertices to enclose an area"
        )
    # Collinearity first: a bow-tie also has zero signed area, but is a
    # vertex-order mistake, reported below.
    if np.linalg.matrix_rank(points - points[0]) < 2:
        raise GeometryError(
            f"polygon has zero area: vertices {_format_points(points)} are collinear; "
            "give vertices that enclose an area"
        )
    shape = Polygon(points)
    if not shape.is_valid:
        reason = shapely.is_valid_reason(shape)
        raise GeometryError(
            f"polygon outline crosses itself ({reason}) for vertices "
            f"{_format_points(points)}; reorder the vertices so they run around the outline"
        )
    return Region(shape)


def union(*regions: Region) -> Region:
    """Union of one or more regions.

    Parameters
    ----------
    *regions : Region
        Regions to merge; overlapping or disjoint.

    Returns
    -------
    Region
        Their union, which must not be empty.

    Raises
    ------
    GeometryError
        If no region is given, an argument is not a Region, or every region
        is empty.
    """
    if not regions:
        raise GeometryError("union of no regions: got none; pass one or more Regions")
    for index, region in enumerate(regions):
        if not isinstance(region, Region):
            raise GeometryError(
                f"union argument {index} is not a Region: {region!r}; "
                "build it with rectangle, disk or polygon"
            )
    merged = Region(_polygonal_part(shapely.union_all([r.geometry for r in regions])))
    if merged.is_empty:
        raise GeometryError(
            f"union of the regions is empty: all {len(regions)} regions are empty; "
            "give at least one region with area"
        )
    return merged


def difference(a: Region, b: Region) -> Region:
    """Region ``a`` with region ``b`` removed.

    Parameters
    ----------
    a, b : Region
        The region to cut from, and the shape to cut out of it.

    Returns
    -------
    Region
        ``a - b``, which must not be empty.

    Raises
    ------
    GeometryError
        If an argument is not a Region or ``b`` covers all of ``a``.
    """
    for name, region in (("a", a), ("b", b)):
        if not isinstance(region, Region):
            raise GeometryError(
                f"difference argument {name} is not a Region: {region!r}; "
                "build it with rectangle, disk or polygon"
            )
    result = a - b
    if result.is_empty:
        raise GeometryError(
            f"difference of the regions is empty: the subtracted shape (bounds "
            f"{_format_bounds(b)}) covers the whole region (bounds {_format_bounds(a)}); shrink it"
        )
    return result

