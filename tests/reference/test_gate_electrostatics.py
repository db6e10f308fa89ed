"""Surface-gate electrostatics in the frozen-surface model against reference values and limits.

Source of every expectation: /work/shared/reference-checks.md, section 11
("Surface-gate electrostatics (Davies, Larkin & Sukhorukov 1995)"): the table
of closed-form values, the four limits (infinite gate, quadrant corner,
infinite strip, far field) and the Poisson-kernel integral they come from.
The last group integrates that kernel independently with scipy's dblquad.

All potentials are per volt of gate voltage (V = 1), d = 50 nm as in §11.
"Closed form" is a Gate whose outline is an axis-aligned 4-corner rectangle;
"polygon" is the same outline drawn with an extra vertex on an edge, which
forces the general-polygon path (the edge sum, a Gate's default).  The table
and the quadrature checks also run the triangulation + Van Oosterom-Strackee
evaluation (``method="triangles"``).
"""

import numpy as np
import pytest
from scipy.integrate import dblquad

from rgftrans.electrostatics.gates import POLYGON_METHODS, Gate, gate_potential, solid_angle_polygon
from rgftrans.system.geometry import polygon, rectangle

D = 50.0  # nm, the 2DEG depth used throughout §11

#: §11 "Tolerance": 1e-12 against the closed form; the table is quoted to 12
#: decimals, so its own rounding (<= 5e-13) fits inside.
TOL_TABLE = 1e-12
#: Triangulated path against the closed form: a handful of arctan2 terms, each
#: good to ~1e-16 relative; 1e-10 leaves room for cancellation between triangles.
TOL_POLYGON = 1e-10
#: The finite stand-ins for infinite gates (extent 1e9 nm) miss ~d/extent ~ 1e-8
#: of the limit, and §11 quotes those results to 8 decimals: 1e-7.
TOL_HUGE = 1e-7
#: §11 far-field ratios are quoted to 6 decimals: 1e-6 (half a unit is 5e-7).
TOL_FAR = 1e-6
#: dblquad asked for 1e-13 absolute and relative error on integrands of size
#: <= 1/(2 pi d) ~ 3e-3 per nm^2 over ~1e4 nm^2: 1e-9 is a safe margin.
TOL_QUAD = 1e-9

HUGE = 1e9  # nm, "infinite" extent


def rectangle_gate(bounds, *, path, voltage=1.0):
    """Gate on [L, R] x [B, T]; path 'closed' (4 corners) or 'polygon' (extra vertex on the bottom edge)."""
    left, bottom, right, top = bounds
    if path == "closed":
        gate = Gate("g", rectangle(left, bottom, right, top), voltage)
        assert gate.is_rectangle
    else:
        mid = left + 0.37 * (right - left)  # off-centre, so no symmetry hides an error
        gate = Gate("g", polygon([[left, bottom], [mid, bottom], [right, bottom], [right, top], [left, top]]),
                    voltage)
        assert not gate.is_rectangle
    return gate


def phi(gate, x, y):
    return float(gate_potential([gate], x, y, depth_nm=D))


# --- §11 table ------------------------------------------------------------------------------------

# §11 "Computed" table: (point, gate (L, B, R, T), phi per volt).
TABLE = [
    ((0.0, 0.0), (-50.0, -100.0, 50.0, 100.0), 0.435905783151),
    ((80.0, 30.0), (-50.0, -100.0, 50.0, 100.0), 0.157115445509),
    ((25.0, -40.0), (10.0, 20.0, 30.0, 45.0), 0.005897535562),
]


@pytest.mark.parametrize("point, bounds, expected", TABLE)
def test_closed_form_table(point, bounds, expected):
    # reference-checks §11 table, tolerance TOL_TABLE (1e-12).
    assert abs(phi(rectangle_gate(bounds, path="closed"), *point) - expected) <= TOL_TABLE


@pytest.mark.parametrize("point, bounds, expected", TABLE)
def test_polygon_gate_matches_closed_form(point, bounds, expected):
    # reference-checks §11 table (closed form), tolerance TOL_POLYGON (1e-10): a Gate on the general-polygon path.
    closed = phi(rectangle_gate(bounds, path="closed"), *point)
    general = phi(rectangle_gate(bounds, path="polygon"), *point)
    assert abs(general - closed) <= TOL_POLYGON
    assert abs(general - expected) <= TOL_POLYGON


@pytest.mark.parametrize("method", POLYGON_METHODS)
@pytest.mark.parametrize("point, bounds, expected", TABLE)
def test_polygon_methods_match_table(point, bounds, expected, method):
    # reference-checks §11 table, tolerance TOL_POLYGON (1e-10): both polygon evaluations, 5-vertex outline.
    shape = rectangle_gate(bounds, path="polygon").shape
    omega = solid_angle_polygon(*point, shape=shape, depth_nm=D, method=method)
    assert abs(omega / (2 * np.pi) - expected) <= TOL_POLYGON


@pytest.mark.parametrize("angle_deg", [17.0, 90.0, 211.0])
@pytest.mark.parametrize("point, bounds, expected", TABLE)
def test_rotated_rectangle_matches_table(point, bounds, expected, angle_deg):
    # reference-checks §11 table; the potential is invariant under a rotation of
    # gate and point together (the kernel depends on distances only).  A rotated
    # rectangle is not axis-aligned, so the triangulated path is used: TOL_POLYGON.
    c, s = np.cos(np.radians(angle_deg)), np.sin(np.radians(angle_deg))
    rot = np.array([[c, -s], [s, c]])
    left, bottom, right, top = bounds
    corners = np.array([[left, bottom], [right, bottom], [right, top], [left, top]]) @ rot.T
    px, py = rot @ np.asarray(point)
    gate = Gate("g", polygon(corners), 1.0)
    assert abs(phi(gate, px, py) - expected) <= TOL_POLYGON


# --- §11 limits -----------------------------------------------------------------------------------


@pytest.mark.parametrize("path", ["closed", "polygon"])
@pytest.mark.parametrize("voltage", [1.0, -0.35])
def test_infinite_gate_gives_gate_voltage(path, voltage):
    # reference-checks §11 "Infinite gate": phi = V; with a 1e9 extent 0.99999995 V per volt.  TOL_HUGE.
    gate = rectangle_gate((-HUGE, -HUGE, HUGE, HUGE), path=path, voltage=voltage)
    value = phi(gate, 0.0, 0.0)
    assert abs(value / voltage - 0.99999995) <= TOL_HUGE
    assert abs(value - voltage) <= TOL_HUGE * abs(voltage)


@pytest.mark.parametrize("path", ["closed", "polygon"])
def test_quadrant_corner_gives_quarter(path):
    # reference-checks §11 "Under the corner of a quadrant gate": V/4 (0.24999999 with a 1e9 extent).  TOL_HUGE.
    gate = rectangle_gate((0.0, 0.0, HUGE, HUGE), path=path)
    assert abs(phi(gate, 0.0, 0.0) - 0.25) <= TOL_HUGE


@pytest.mark.parametrize("path", ["closed", "polygon"])
def test_strip_of_width_2d_gives_half_at_centre(path):
    # reference-checks §11 "Infinite strip", w = 2d at the centre: V/2 exactly (0.500000000000).
    # The strip is 2e9 nm long: the missing ends contribute ~ d^2/(pi 1e18) ~ 1e-15, far below 1e-12.
    gate = rectangle_gate((-D, -HUGE, D, HUGE), path=path)
    assert abs(phi(gate, 0.0, 0.0) - 0.5) <= TOL_TABLE


@pytest.mark.parametrize("x", [0.0, 30.0, 75.0, -220.0])
def test_strip_profile(x):
    # reference-checks §11 "Infinite strip of width w": phi(x) = (V/pi)[arctan((x-L)/d) + arctan((R-x)/d)],
    # evaluated here; TOL_TABLE (the strip's finite length adds ~1e-15).
    left, right = -D, D
    expected = (np.arctan((x - left) / D) + np.arctan((right - x) / D)) / np.pi
    gate = rectangle_gate((left, -HUGE, right, HUGE), path="closed")
    assert abs(phi(gate, x, 0.0) - expected) <= TOL_TABLE


# §11 "Far field of a small gate": (rho / d, ratio of the closed form to V A d / (2 pi (rho^2 + d^2)^{3/2})),
# 10 x 10 gate, point on the x axis through the gate's centre.
FAR_FIELD = [(4.0, 1.000796), (10.0, 1.000146), (40.0, 1.000009)]


@pytest.mark.parametrize("path", ["closed", "polygon"])
@pytest.mark.parametrize("rho_over_d, ratio", FAR_FIELD)
def test_far_field_ratio(rho_over_d, ratio, path):
    # reference-checks §11 far-field table, tolerance TOL_FAR (1e-6, the table's last digit).
    rho = rho_over_d * D
    gate = rectangle_gate((-5.0, -5.0, 5.0, 5.0), path=path)
    estimate = 100.0 * D / (2 * np.pi * (rho**2 + D**2) ** 1.5)
    assert abs(phi(gate, rho, 0.0) / estimate - ratio) <= TOL_FAR


# --- independent quadrature of the Poisson kernel ---------------------------------------------------


def kernel(xp, yp, x, y):
    """Half-space Poisson kernel d / (2 pi ((x-x')^2 + (y-y')^2 + d^2)^{3/2}) (reference-checks §11)."""
    return D / (2 * np.pi * ((x - xp) ** 2 + (y - yp) ** 2 + D**2) ** 1.5)


def quad_triangle(vertices, x, y):
    """Kernel integrated over a triangle, mapped affinely onto the unit triangle s, t >= 0, s + t <= 1."""
    a, b, c = (np.asarray(v, dtype=float) for v in vertices)
    jac = abs((b[0] - a[0]) * (c[1] - a[1]) - (c[0] - a[0]) * (b[1] - a[1]))

    def integrand(t, s):
        p = a + s * (b - a) + t * (c - a)
        return kernel(p[0], p[1], x, y) * jac

    value, _ = dblquad(integrand, 0.0, 1.0, 0.0, lambda s: 1.0 - s, epsabs=1e-13, epsrel=1e-13)
    return value


def quad_rectangle(bounds, x, y):
    left, bottom, right, top = bounds
    value, _ = dblquad(lambda yp, xp: kernel(xp, yp, x, y), left, right, bottom, top, epsabs=1e-13, epsrel=1e-13)
    return value


TRIANGLE = [(-30.0, -20.0), (90.0, 10.0), (10.0, 80.0)]
# L shape = [0, 120] x [0, 40] plus [0, 40] x [40, 100].
L_SHAPE = [(0.0, 0.0), (120.0, 0.0), (120.0, 40.0), (40.0, 40.0), (40.0, 100.0), (0.0, 100.0)]
L_PIECES = [(0.0, 0.0, 120.0, 40.0), (0.0, 40.0, 40.0, 100.0)]


@pytest.mark.parametrize("method", POLYGON_METHODS)
@pytest.mark.parametrize("point", [(20.0, 20.0), (150.0, -60.0), (90.0, 10.0)], ids=["inside", "outside", "vertex"])
def test_triangle_against_quadrature(point, method):
    # Independent check (reference-checks §11 kernel, our dblquad), tolerance TOL_QUAD (1e-9).
    omega = solid_angle_polygon(*point, shape=polygon(TRIANGLE), depth_nm=D, method=method)
    assert abs(omega / (2 * np.pi) - quad_triangle(TRIANGLE, *point)) <= TOL_QUAD


@pytest.fixture(scope="module")
def l_shape_quadrature():
    """dblquad of the kernel over the L shape, by point (computed once, used by both methods)."""
    return {point: sum(quad_rectangle(piece, *point) for piece in L_PIECES) for point in L_POINTS}


L_POINTS = [(20.0, 20.0), (80.0, 70.0), (40.0, 40.0)]


@pytest.mark.parametrize("method", POLYGON_METHODS)
@pytest.mark.parametrize("point", L_POINTS, ids=["inside", "in-notch", "re-entrant-corner"])
def test_l_shape_against_quadrature(point, method, l_shape_quadrature):
    # Independent check (reference-checks §11 kernel, our dblquad), tolerance TOL_QUAD (1e-9).
    omega = solid_angle_polygon(*point, shape=polygon(L_SHAPE), depth_nm=D, method=method)
    assert abs(omega / (2 * np.pi) - l_shape_quadrature[point]) <= TOL_QUAD


@pytest.mark.parametrize("point", L_POINTS, ids=["inside", "in-notch", "re-entrant-corner"])
def test_l_shape_gate_against_quadrature(point, l_shape_quadrature):
    # Independent check (reference-checks §11 kernel, our dblquad), tolerance TOL_QUAD (1e-9): through Gate.
    gate = Gate("L", polygon(L_SHAPE), 1.0)
    assert not gate.is_rectangle
    assert abs(phi(gate, *point) - l_shape_quadrature[point]) <= TOL_QUAD


@pytest.mark.parametrize("point, bounds, expected", TABLE)
def test_quadrature_reproduces_table(point, bounds, expected):
    # reference-checks §11 "quadrature" column equals the closed form: validates quad_rectangle itself.
    # Tolerance TOL_TABLE (1e-12): dblquad at 1e-13 plus the table's 12-decimal rounding.
    assert abs(quad_rectangle(bounds, *point) - expected) <= TOL_TABLE
