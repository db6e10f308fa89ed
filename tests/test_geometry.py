"""Tests of rgftrans.system.geometry: areas against closed forms, boundary handling, errors.

Outside sources: elementary plane geometry.  Rectangle area |dx| |dy|; the
area of a regular N-gon inscribed in a circle of radius r is
(N/2) r^2 sin(2 pi / N); inclusion-exclusion |A u B| = |A| + |B| - |A n B|.
Areas are sums of a few products of nm-scale coordinates, so they are
compared at REL_AREA = 1e-12 (a few hundred ulp).
"""

import math
import operator

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from rgftrans.errors import GeometryError
from rgftrans.system.geometry import (
    BOUNDARY_TOLERANCE_NM,
    DEFAULT_DISK_SEGMENTS,
    Region,
    difference,
    disk,
    polygon,
    rectangle,
    union,
)

REL_AREA = 1e-12  # floating-point round-off of shapely's shoelace sums


# --- areas against closed forms ---------------------------------------------


@pytest.mark.parametrize(
    "corners",
    [(0.0, 0.0, 100.0, 40.0), (100.0, 40.0, 0.0, 0.0), (100.0, 0.0, 0.0, 40.0), (0.0, 40.0, 100.0, 0.0)],
)
def test_rectangle_corners_in_any_order(corners):
    region = rectangle(*corners)
    assert region.bounds == (0.0, 0.0, 100.0, 40.0)
    assert region.area == pytest.approx(100.0 * 40.0, rel=REL_AREA)


@pytest.mark.parametrize("segments", [3, 4, 16, DEFAULT_DISK_SEGMENTS, 1000])
def test_disk_area_is_inscribed_polygon(segments):
    # Closed form of the inscribed regular N-gon: (N/2) r^2 sin(2 pi / N).
    radius = 30.0
    region = disk((5.0, -2.0), radius, segments=segments)
    expected = 0.5 * segments * radius**2 * math.sin(2 * math.pi / segments)
    assert region.area == pytest.approx(expected, rel=REL_AREA)


@pytest.mark.parametrize("segments", [16, DEFAULT_DISK_SEGMENTS, 1000])
def test_disk_area_approaches_circle(segments):
    # Polygon-approximation error: the inscribed N-gon falls short of pi r^2 by
    # the relative amount 1 - sin(x)/x <= x^2/6, x = 2 pi / N
    # (2.6e-2 for N = 16, 1.6e-3 for N = 64, 6.6e-6 for N = 1000).
    radius = 30.0
    circle = math.pi * radius**2
    bound = (2 * math.pi / segments) ** 2 / 6
    shortfall = (circle - disk((0.0, 0.0), radius, segments=segments).area) / circle
    assert 0.0 < shortfall <= bound


def test_disk_bounds():
    region = disk((10.0, 20.0), 5.0, segments=4)  # vertices at 0, 90, 180, 270 degrees
    np.testing.assert_allclose(region.bounds, (5.0, 15.0, 15.0, 25.0), atol=1e-12)


def test_polygon_triangle_area():
    # Right triangle with legs 30 and 40 nm: area 600 nm^2.
    triangle = polygon([[0.0, 0.0], [30.0, 0.0], [0.0, 40.0]])
    assert triangle.area == pytest.approx(600.0, rel=REL_AREA)


@pytest.mark.parametrize(
    "vertices",
    [
        [[0.0, 0.0], [10.0, 0.0], [10.0, 10.0], [0.0, 10.0]],  # anticlockwise
        [[0.0, 0.0], [0.0, 10.0], [10.0, 10.0], [10.0, 0.0]],  # clockwise
        [[0.0, 0.0], [10.0, 0.0], [10.0, 10.0], [0.0, 10.0], [0.0, 0.0]],  # explicitly closed
    ],
)
def test_polygon_square_any_orientation(vertices):
    assert polygon(vertices).area == pytest.approx(100.0, rel=REL_AREA)


def test_union_of_overlapping_rectangles():
    # Two 100 x 40 bars crossing in a 40 x 40 square: 4000 + 4000 - 1600.
    horizontal = rectangle(0.0, 30.0, 100.0, 70.0)
    vertical = rectangle(30.0, 0.0, 70.0, 100.0)
    expected = 4000.0 + 4000.0 - 1600.0
    assert (horizontal | vertical).area == pytest.approx(expected, rel=REL_AREA)
    assert union(horizontal, vertical).area == pytest.approx(expected, rel=REL_AREA)
    assert (horizontal & vertical).area == pytest.approx(1600.0, rel=REL_AREA)


def test_union_of_disjoint_regions_adds_areas():
    parts = [rectangle(0.0, 0.0, 10.0, 10.0), rectangle(20.0, 0.0, 30.0, 5.0), rectangle(40.0, 0.0, 41.0, 1.0)]
    merged = union(*parts)
    assert merged.area == pytest.approx(100.0 + 50.0 + 1.0, rel=REL_AREA)
    assert merged.bounds == (0.0, 0.0, 41.0, 10.0)


def test_difference_cuts_a_hole():
    # Ring: 100 x 100 square with a 20 x 20 hole in the middle.
    outer = rectangle(0.0, 0.0, 100.0, 100.0)
    hole = rectangle(40.0, 40.0, 60.0, 60.0)
    ring = difference(outer, hole)
    assert ring.area == pytest.approx(10000.0 - 400.0, rel=REL_AREA)
    assert (outer - hole).area == pytest.approx(10000.0 - 400.0, rel=REL_AREA)
    assert ring.contains(np.array([[50.0, 50.0], [10.0, 10.0]])).tolist() == [False, True]


def test_disk_minus_square_area():
    # Square of side 10 inside a 64-gon of radius 30: polygon area minus 100.
    region = disk((0.0, 0.0), 30.0) - rectangle(-5.0, -5.0, 5.0, 5.0)
    n = DEFAULT_DISK_SEGMENTS
    expected = 0.5 * n * 30.0**2 * math.sin(2 * math.pi / n) - 100.0
    assert region.area == pytest.approx(expected, rel=REL_AREA)


coordinate = st.floats(min_value=-100.0, max_value=100.0, allow_nan=False)
extent = st.floats(min_value=0.5, max_value=100.0, allow_nan=False)


@settings(max_examples=50, deadline=None)
@given(x0=coordinate, y0=coordinate, w0=extent, h0=extent, x1=coordinate, y1=coordinate, w1=extent, h1=extent)
def test_inclusion_exclusion(x0, y0, w0, h0, x1, y1, w1, h1):
    # |A u B| + |A n B| = |A| + |B|, and A - B, A n B partition A.
    a = rectangle(x0, y0, x0 + w0, y0 + h0)
    b = rectangle(x1, y1, x1 + w1, y1 + h1)
    scale = a.area + b.area
    assert (a | b).area + (a & b).area == pytest.approx(scale, rel=1e-9)
    assert (a - b).area + (a & b).area == pytest.approx(a.area, rel=1e-9, abs=1e-9 * scale)


# --- operators and emptiness ------------------------------------------------------


@pytest.mark.parametrize(
    ("operation", "area"),
    [(operator.or_, 7.0), (operator.sub, 3.0), (operator.and_, 1.0)],
    ids=["union", "difference", "intersection"],
)
def test_operators_return_regions(operation, area):
    # Two 2 x 2 squares overlapping in a 1 x 1 square.
    result = operation(rectangle(0.0, 0.0, 2.0, 2.0), rectangle(1.0, 1.0, 3.0, 3.0))
    assert isinstance(result, Region)
    assert not result.is_empty
    assert result.area == pytest.approx(area, rel=REL_AREA)


def test_regions_touching_along_an_edge_have_empty_intersection():
    # The shared edge is a line with no area: it is dropped, leaving an empty Region.
    left = rectangle(0.0, 0.0, 1.0, 1.0)
    right = rectangle(1.0, 0.0, 2.0, 1.0)
    overlap = left & right
    assert overlap.is_empty
    assert overlap.area == 0.0
    assert not overlap.contains(np.array([[1.0, 0.5]])).any()


def test_operator_with_non_region_is_type_error():
    with pytest.raises(TypeError):
        rectangle(0.0, 0.0, 1.0, 1.0) | 3


def test_region_is_frozen():
    region = rectangle(0.0, 0.0, 1.0, 1.0)
    with pytest.raises(AttributeError):
        region.geometry = None  # type: ignore[misc]


# --- contains: vectorised, boundary inside ------------------------------------------


def test_contains_returns_bool_array_of_length_n():
    region = rectangle(0.0, 0.0, 10.0, 10.0)
    points = np.array([[5.0, 5.0], [15.0, 5.0], [-1.0, -1.0]])
    inside = region.contains(points)
    assert inside.dtype == bool
    assert inside.shape == (3,)
    assert inside.tolist() == [True, False, False]


def test_contains_no_points():
    assert rectangle(0.0, 0.0, 1.0, 1.0).contains(np.empty((0, 2))).shape == (0,)


@pytest.mark.parametrize(
    "point",
    [(0.0, 0.0), (10.0, 0.0), (10.0, 10.0), (0.0, 10.0), (5.0, 0.0), (10.0, 5.0), (5.0, 10.0), (0.0, 5.0)],
)
def test_rectangle_boundary_points_are_inside(point):
    assert rectangle(0.0, 0.0, 10.0, 10.0).contains(np.array([point])).tolist() == [True]


def test_disk_vertices_are_inside():
    # Every vertex of the inscribed polygon lies on the circle, i.e. on the boundary.
    segments, radius = 32, 7.0
    angles = 2 * math.pi * np.arange(segments) / segments
    vertices = np.column_stack((1.0 + radius * np.cos(angles), 2.0 + radius * np.sin(angles)))
    assert disk((1.0, 2.0), radius, segments=segments).contains(vertices).all()


@pytest.mark.parametrize(
    ("point", "inside"),
    [
        ((10.0 + 0.5 * BOUNDARY_TOLERANCE_NM, 5.0), True),  # within tolerance of the edge
        ((10.0 + 100 * BOUNDARY_TOLERANCE_NM, 5.0), False),  # clearly outside
        ((10.0 - 100 * BOUNDARY_TOLERANCE_NM, 5.0), True),  # clearly inside
    ],
)
def test_boundary_tolerance(point, inside):
    assert rectangle(0.0, 0.0, 10.0, 10.0).contains(np.array([point])).tolist() == [inside]


def test_boundary_tolerance_is_far_below_lattice_spacing():
    # Sites one lattice constant (>= 0.1 nm) outside must never be picked up.
    assert BOUNDARY_TOLERANCE_NM < 1e-3


# --- errors: one line, names the problem, quotes the value, says the fix --------------


ERROR_CASES = {
    "rectangle zero width": (lambda: rectangle(3.0, 0.0, 3.0, 5.0), r"rectangle has zero width: x0 = x1 = 3 nm; give two different x"),
    "rectangle zero height": (lambda: rectangle(0.0, 2.0, 5.0, 2.0), r"rectangle has zero height: y0 = y1 = 2 nm; give two different y"),
    "rectangle nan": (lambda: rectangle(math.nan, 0.0, 1.0, 1.0), r"rectangle corner x0 is not finite: nan; give a finite value in nm"),
    "rectangle inf": (lambda: rectangle(0.0, 0.0, 1.0, math.inf), r"rectangle corner y1 is not finite: inf; give a finite value"),
    "rectangle not a number": (lambda: rectangle("a", 0.0, 1.0, 1.0), r"rectangle corner x0 must be a number in nm, got 'a'"),
    "disk zero radius": (lambda: disk((0.0, 0.0), 0.0), r"disk radius must be positive, got 0 nm; give a radius > 0"),
    "disk negative radius": (lambda: disk((0.0, 0.0), -2.5), r"disk radius must be positive, got -2\.5 nm"),
    "disk nan radius": (lambda: disk((0.0, 0.0), math.nan), r"disk radius is not finite: nan"),
    "disk inf centre": (lambda: disk((math.inf, 0.0), 1.0), r"disk centre x is not finite: inf"),
    "disk centre not a pair": (lambda: disk(3.0, 1.0), r"disk centre must be an \(x, y\) pair in nm, got 3\.0; pass two numbers"),
    "disk too few segments": (lambda: disk((0.0, 0.0), 1.0, segments=2), r"disk segments must be an integer >= 3, got 2; use the default 64"),
    "polygon two vertices": (lambda: polygon([[0.0, 0.0], [1.0, 1.0]]), r"polygon needs at least 3 distinct vertices, got 2: \[\(0, 0\), \(1, 1\)\]; add vertices"),
    "polygon repeated vertex": (lambda: polygon([[0.0, 0.0], [1.0, 1.0], [1.0, 1.0]]), r"polygon needs at least 3 distinct vertices, got 2"),
    "polygon nan vertex": (lambda: polygon([[0.0, 0.0], [1.0, math.nan], [0.0, 1.0]]), r"polygon vertices has a non-finite coordinate in row 1: \(1\.0, nan\)"),
    "polygon wrong shape": (lambda: polygon([0.0, 1.0, 2.0]), r"polygon vertices must have shape \(n, 2\), got shape \(3,\)"),
    "polygon collinear": (lambda: polygon([[0.0, 0.0], [1.0, 0.0], [2.0, 0.0]]), r"polygon has zero area: vertices \[\(0, 0\), \(1, 0\), \(2, 0\)\] are collinear"),
    "polygon bow-tie": (
        lambda: polygon([[0.0, 0.0], [1.0, 1.0], [1.0, 0.0], [0.0, 1.0]]),
        r"polygon outline crosses itself \(Self-intersection\[0\.5 0\.5\]\) .*; reorder the vertices",
    ),
    "difference empty": (
        lambda: difference(rectangle(0.0, 0.0, 10.0, 5.0), rectangle(-1.0, -1.0, 11.0, 6.0)),
        r"difference of the regions is empty: the subtracted shape .* covers the whole region .*; shrink it",
    ),
    "union of nothing": (lambda: union(), r"union of no regions: got none; pass one or more Regions"),
    "union of empty regions": (
        lambda: union(rectangle(0.0, 0.0, 1.0, 1.0) & rectangle(2.0, 2.0, 3.0, 3.0)),
        r"union of the regions is empty: all 1 regions are empty",
    ),
    "union of non-region": (lambda: union(rectangle(0.0, 0.0, 1.0, 1.0), "disk"), r"union argument 1 is not a Region: 'disk'"),
    "contains wrong shape": (lambda: rectangle(0.0, 0.0, 1.0, 1.0).contains(np.array([0.5, 0.5])), r"points must have shape \(n, 2\), got shape \(2,\)"),
    "bounds of empty": (lambda: (rectangle(0.0, 0.0, 1.0, 1.0) - rectangle(0.0, 0.0, 1.0, 1.0)).bounds, r"the region is empty, so it has no bounds"),
    "region of a line": (lambda: Region(rectangle(0.0, 0.0, 1.0, 1.0).geometry.boundary), r"a Region needs a shapely Polygon or MultiPolygon, got LineString"),
}


@pytest.mark.parametrize(("call", "pattern"), ERROR_CASES.values(), ids=ERROR_CASES.keys())
def test_geometry_errors(call, pattern):
    with pytest.raises(GeometryError, match=pattern) as excinfo:
        call()
    assert "\n" not in str(excinfo.value)  # one-line messages
