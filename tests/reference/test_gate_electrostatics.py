"""Surface-gate electrostatics in the frozen-surface model against reference values and limits.

Sources (recalled, not read: "from memory"):

* [DLS] J. H. Davies, I. A. Larkin, E. V. Sukhorukov, "Modeling the patterned
  two-dimensional electron gas: Electrostatics", J. Appl. Phys. 77, 4504
  (1995): pinned-surface model; potential at depth d of a rectangular gate,
  phi = V [g(x-L, y-B) + g(x-L, T-y) + g(R-x, y-B) + g(R-x, T-y)],
  g(u, v) = arctan(u v/(d R))/(2 pi), R = sqrt(u^2 + v^2 + d^2); the same
  model in J. H. Davies, *The Physics of Low-Dimensional Semiconductors* (CUP
  1998).  We confirmed the recalled formula by our own integration of the
  half-space kernel (below), so the tests do not rest on memory alone.
* Half-space Dirichlet (Poisson) kernel d/(2 pi (rho^2 + d^2)^{3/2}): method of
  images for a plane, J. D. Jackson, *Classical Electrodynamics*, 3rd ed.
  (Wiley 1999).  The integral of the kernel over a polygon is its solid angle
  over 2 pi (common practice); the triangle formula is A. van Oosterom &
  J. Strackee, IEEE Trans. Biomed. Eng. BME-30, 125 (1983).
* The limits (infinite gate V, quadrant corner V/4, infinite strip
  (V/pi)[arctan((x-L)/d) + arctan((R-x)/d)], far field V A d/(2 pi (rho^2 +
  d^2)^{3/2})) follow from that kernel by elementary integration (our own
  evaluation; common practice).
* Tabulated values (12 decimals) and far-field ratios (6 decimals) are our own
  evaluation of the closed form, each confirmed by scipy dblquad of the kernel;
  they are not quoted from a paper.

The last group integrates the kernel independently with scipy's dblquad.

All potentials are per volt of gate voltage (V = 1), d = 50 nm throughout.
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

D = 50.0  # nm, the 2DEG depth used throughout (our choice)

#: 1e-12 against the closed form (four arctans, round-off ~1e-16 with margin);
#: the table is quoted to 12 decimals, so its own rounding (<= 5e-13) fits inside.
TOL_TABLE = 1e-12
#: Triangulated path against the closed form: a handful of arctan2 terms, each
#: good to ~1e-16 relative; 1e-10 leaves room for cancellation between triangles.
TOL_POLYGON = 1e-10
#: The finite stand-ins for infinite gates (extent 1e9 nm) miss ~d/extent ~ 1e-8
#: of the limit, and our reference evaluation quotes those results to 8 decimals: 1e-7.
TOL_HUGE = 1e-7
#: Our far-field ratios are quoted to 6 decimals: 1e-6 (half a unit is 5e-7).
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


# --- closed-form table (Davies, Larkin & Sukhorukov 1995, from memory) -----------------------------

# Our 12-decimal evaluation of the DLS closed form, confirmed by dblquad: (point, gate (L, B, R, T), phi per volt).
TABLE = [
    ((0.0, 0.0), (-50.0, -100.0, 50.0, 100.0), 0.435905783151),
    ((80.0, 30.0), (-50.0, -100.0, 50.0, 100.0), 0.157115445509),
    ((25.0, -40.0), (10.0, 20.0, 30.0, 45.0), 0.005897535562),
]


@pytest.mark.parametrize("point, bounds, expected", TABLE)
def test_closed_form_table(point, bounds, expected):
    # Davies, Larkin & Sukhorukov 1995 closed form (from memory), our table; tolerance TOL_TABLE (1e-12).
    assert abs(phi(rectangle_gate(bounds, path="closed"), *point) - expected) <= TOL_TABLE


@pytest.mark.parametrize("point, bounds, expected", TABLE)
def test_polygon_gate_matches_closed_form(point, bounds, expected):
    # DLS 1995 closed form (from memory), our table; tolerance TOL_POLYGON (1e-10): a Gate on the general-polygon path.
    closed = phi(rectangle_gate(bounds, path="closed"), *point)
    general = phi(rectangle_gate(bounds, path="polygon"), *point)
    assert abs(general - closed) <= TOL_POLYGON
    assert abs(general - expected) <= TOL_POLYGON


@pytest.mark.parametrize("method", POLYGON_METHODS)
@pytest.mark.parametrize("point, bounds, expected", TABLE)
def test_polygon_methods_match_table(point, bounds, expected, method):
    # DLS 1995 closed form (from memory), our table; solid angle / (2 pi) with the van Oosterom-Strackee
    # triangle formula (1983, from memory) or the edge sum; tolerance TOL_POLYGON (1e-10), 5-vertex outline.
    shape = rectangle_gate(bounds, path="polygon").shape
    omega = solid_angle_polygon(*point, shape=shape, depth_nm=D, method=method)
    assert abs(omega / (2 * np.pi) - expected) <= TOL_POLYGON


@pytest.mark.parametrize("angle_deg", [17.0, 90.0, 211.0])
@pytest.mark.parametrize("point, bounds, expected", TABLE)
def test_rotated_rectangle_matches_table(point, bounds, expected, angle_deg):
    # DLS 1995 closed form (from memory), our table; the potential is invariant under a rotation of
    # gate and point together (the kernel depends on distances only).  A rotated
    # rectangle is not axis-aligned, so the triangulated path is used: TOL_POLYGON.
    c, s = np.cos(np.radians(angle_deg)), np.sin(np.radians(angle_deg))
    rot = np.array([[c, -s], [s, c]])
    left, bottom, right, top = bounds
    corners = np.array([[left, bottom], [right, bottom], [right, top], [left, top]]) @ rot.T
    px, py = rot @ np.asarray(point)
    gate = Gate("g", polygon(corners), 1.0)
    assert abs(phi(gate, px, py) - expected) <= TOL_POLYGON


# --- limits of the Poisson-kernel integral (our elementary integration; common practice) ----------------


@pytest.mark.parametrize("path", ["closed", "polygon"])
@pytest.mark.parametrize("voltage", [1.0, -0.35])
def test_infinite_gate_gives_gate_voltage(path, voltage):
    # Infinite gate: phi = V (the kernel integrates to 1; Jackson 1999, from memory); with a 1e9 extent our
    # evaluation gives 0.99999995 V per volt.  TOL_HUGE.
    gate = rectangle_gate((-HUGE, -HUGE, HUGE, HUGE), path=path, voltage=voltage)
    value = phi(gate, 0.0, 0.0)
    assert abs(value / voltage - 0.99999995) <= TOL_HUGE
    assert abs(value - voltage) <= TOL_HUGE * abs(voltage)


@pytest.mark.parametrize("path", ["closed", "polygon"])
def test_quadrant_corner_gives_quarter(path):
    # Under the corner of a quadrant gate: V/4 by symmetry (common practice); 0.24999999 with a 1e9 extent.
    # TOL_HUGE.
    gate = rectangle_gate((0.0, 0.0, HUGE, HUGE), path=path)
    assert abs(phi(gate, 0.0, 0.0) - 0.25) <= TOL_HUGE


@pytest.mark.parametrize("path", ["closed", "polygon"])
def test_strip_of_width_2d_gives_half_at_centre(path):
    # Infinite strip, w = 2d at the centre: (2V/pi) arctan(1) = V/2 exactly (strip formula below, our
    # integration of the kernel).
    # The strip is 2e9 nm long: the missing ends contribute ~ d^2/(pi 1e18) ~ 1e-15, far below 1e-12.
    gate = rectangle_gate((-D, -HUGE, D, HUGE), path=path)
    assert abs(phi(gate, 0.0, 0.0) - 0.5) <= TOL_TABLE


@pytest.mark.parametrize("x", [0.0, 30.0, 75.0, -220.0])
def test_strip_profile(x):
    # Infinite strip of width w: phi(x) = (V/pi)[arctan((x-L)/d) + arctan((R-x)/d)] (our integration of the
    # half-space kernel; also the y -> infinity limit of DLS 1995, from memory),
    # evaluated here; TOL_TABLE (the strip's finite length adds ~1e-15).
    left, right = -D, D
    expected = (np.arctan((x - left) / D) + np.arctan((right - x) / D)) / np.pi
    gate = rectangle_gate((left, -HUGE, right, HUGE), path="closed")
    assert abs(phi(gate, x, 0.0) - expected) <= TOL_TABLE


# Far field of a small gate (the kernel times the area, common practice): our evaluation of (rho / d, ratio of
# the DLS closed form to V A d / (2 pi (rho^2 + d^2)^{3/2})), 10 x 10 gate, point on the x axis through its centre.
FAR_FIELD = [(4.0, 1.000796), (10.0, 1.000146), (40.0, 1.000009)]


@pytest.mark.parametrize("path", ["closed", "polygon"])
@pytest.mark.parametrize("rho_over_d, ratio", FAR_FIELD)
def test_far_field_ratio(rho_over_d, ratio, path):
    # Our far-field ratios (see FAR_FIELD), tolerance TOL_FAR (1e-6, the table's last digit).
    rho = rho_over_d * D
    gate = rectangle_gate((-5.0, -5.0, 5.0, 5.0), path=path)
    estimate = 100.0 * D / (2 * np.pi * (rho**2 + D**2) ** 1.5)
    assert abs(phi(gate, rho, 0.0) / estimate - ratio) <= TOL_FAR


# --- independent quadrature of the Poisson kernel ---------------------------------------------------


def kernel(xp, yp, x, y):
    """Half-space Poisson kernel d / (2 pi ((x-x')^2 + (y-y')^2 + d^2)^{3/2}) (images for a plane, Jackson 1999, from memory)."""
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
    # Independent check (half-space kernel, Jackson 1999, from memory; our dblquad), tolerance TOL_QUAD (1e-9).
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
    # Independent check (half-space kernel, Jackson 1999, from memory; our dblquad), tolerance TOL_QUAD (1e-9).
    omega = solid_angle_polygon(*point, shape=polygon(L_SHAPE), depth_nm=D, method=method)
    assert abs(omega / (2 * np.pi) - l_shape_quadrature[point]) <= TOL_QUAD


@pytest.mark.parametrize("point", L_POINTS, ids=["inside", "in-notch", "re-entrant-corner"])
def test_l_shape_gate_against_quadrature(point, l_shape_quadrature):
    # Independent check (half-space kernel, our dblquad), tolerance TOL_QUAD (1e-9): through Gate.
    gate = Gate("L", polygon(L_SHAPE), 1.0)
    assert not gate.is_rectangle
    assert abs(phi(gate, *point) - l_shape_quadrature[point]) <= TOL_QUAD


@pytest.mark.parametrize("point, bounds, expected", TABLE)
def test_quadrature_reproduces_table(point, bounds, expected):
    # Our dblquad of the kernel equals the DLS 1995 closed form (from memory): validates quad_rectangle itself.
    # Tolerance TOL_TABLE (1e-12): dblquad at 1e-13 plus the table's 12-decimal rounding.
    assert abs(quad_rectangle(bounds, *point) - expected) <= TOL_TABLE
