"""Surface-gate electrostatics: gate polygons to a potential-energy map of the 2DEG.

Pinned-surface model of Davies, Larkin & Sukhorukov [1]_ (their name for it): the
exposed semiconductor surface is held at 0 V (its Fermi level pinned), each
metal gate at its voltage V, the dielectric is uniform and the 2DEG does not
screen (its screening, with the same surface condition, is
:mod:`rgftrans.electrostatics.screening`).  Their frozen surface, where the
surface charge rather than its potential stays at its ungated value, gives a
different potential and is not implemented.  The potential in
the plane of a 2DEG at depth d below the surface is then the half-space
Dirichlet (Poisson-kernel) integral over the gate,

.. math::

    \\phi(x, y) = \\int_\\mathrm{gate} \\frac{V\\, d}
        {2\\pi\\,[(x - x')^2 + (y - y')^2 + d^2]^{3/2}}\\, dx'\\, dy'
      = \\frac{V\\, \\Omega(x, y)}{2\\pi},

where :math:`\\Omega` is the solid angle the gate subtends from the point
(x, y, -d).  The electron potential energy is :math:`U = -e\\phi`; in the
units of this package, ``U_meV = -1000 * phi_V``.

Two ways to evaluate :math:`\\Omega`:

* an axis-aligned rectangle [L, R] x [B, T] has the closed form
  :math:`\\Omega = \\sum_\\mathrm{corners} \\arctan[u v / (d \\sqrt{u^2 + v^2 + d^2})]`
  with (u, v) = (x - L or R - x, y - B or T - y) (:func:`solid_angle_rectangle`);
* any other polygon (holes and several parts allowed) by
  :func:`solid_angle_polygon`: by default a sum over its edges of the exact
  solid angles of the triangles they form with the point's foot on the gate
  plane (stable for any gate size); alternatively, as a cross-check, a
  constrained Delaunay triangulation with each triangle's solid angle from
  the formula of Van Oosterom & Strackee [2]_, which loses accuracy as
  1e-16 (L/d)^2 for gates of size L much larger than the depth d.

A :class:`Gate` picks the closed form by itself when its outline is an
axis-aligned rectangle with exactly four corners.  A :class:`GateLayout`
(gates plus the 2DEG depth) is the object a device uses: it is callable as
``U(x, y)`` in meV, so ``Device(..., potential=layout)`` works, and
:meth:`GateLayout.with_voltages` makes the copies a gate sweep needs.
:func:`gates_from_gds` reads the gates from a GDSII layout;
:func:`rgftrans.plots.figures.plot_gate_potential` draws the map.

All lengths are in nm, voltages in V, potentials in V, energies in meV.

References
----------
.. [1] J. H. Davies, I. A. Larkin and E. V. Sukhorukov, "Modeling the
   patterned two-dimensional electron gas: Electrostatics", J. Appl. Phys.
   77, 4504 (1995), doi:10.1063/1.359446 (from memory).
.. [2] A. van Oosterom and J. Strackee, "The solid angle of a plane
   triangle", IEEE Trans. Biomed. Eng. BME-30, 125 (1983),
   doi:10.1109/TBME.1983.325207 (from memory).

Examples
--------
A 100 nm x 200 nm gate at +1 V, 50 nm above the 2DEG, seen from below its
centre (reference value 0.435905783151 V):

>>> from rgftrans.system.geometry import rectangle
>>> layout = GateLayout((Gate("top", rectangle(-50, -100, 50, 100), 1.0),), depth_nm=50.0)
>>> round(float(layout.potential_V(0.0, 0.0)), 12)
0.435905783151
>>> round(float(layout(0.0, 0.0)), 6)  # U = -e phi, meV
-435.905783
"""

from __future__ import annotations

import dataclasses
import math
import os
from collections.abc import Iterable, Mapping
from contextlib import contextmanager
from dataclasses import dataclass
from functools import cached_property

import numpy as np
import shapely
from shapely.geometry import MultiPolygon, Polygon

from rgftrans.errors import GeometryError, PotentialError
from rgftrans.system.geometry import Region, _format_points, union

__all__ = [
    "Gate",
    "GateLayout",
    "gate_potential",
    "gates_from_gds",
    "POLYGON_METHODS",
    "solid_angle_polygon",
    "solid_angle_rectangle",
]

# meV of electron potential energy per volt of electrostatic potential: U = -e phi.
MEV_PER_VOLT = 1000.0

# Elements of one (n_edges or n_triangles, n_points) work array: points are
# processed in blocks so that each temporary stays near 8 MB, however many
# points and edges there are.
_WORK_ELEMENTS = 2**20

# First four bytes of every GDSII stream: the HEADER record (length 6,
# record type 0x00, data type 0x02 = 2-byte integer).
_GDS_MAGIC = b"\x00\x06\x00\x02"

# How many vertices or names an error message quotes before it abbreviates.
_MAX_QUOTED = 4


# --- small validators ----------------------------------------------------------------------------


def _ring_vertices(geometry: Polygon | MultiPolygon) -> np.ndarray:
    """Vertices of the first exterior ring, without the repeated closing vertex (for messages)."""
    parts = shapely.get_parts(geometry)
    if len(parts) == 0 or parts[0].is_empty:
        return np.empty((0, 2))
    return np.asarray(parts[0].exterior.coords)[:-1]


def _check_depth(depth_nm: object) -> float:
    """Return the 2DEG depth as a float, or raise GeometryError."""
    try:
        depth = float(depth_nm)  # type: ignore[arg-type]
    except (TypeError, ValueError):
        raise GeometryError(
            f"depth_nm must be a number (nm), got {depth_nm!r}; give the 2DEG depth below the surface"
        ) from None
    if not math.isfinite(depth) or depth <= 0.0:
        raise GeometryError(
            f"depth_nm must be positive and finite, got {depth_nm!r} nm; "
            "give the distance from the surface gates down to the 2DEG (> 0)"
        )
    return depth


#: Largest gate voltage magnitude accepted (V).  Surface gates on GaAs, Si/SiGe and InAs heterostructures are
#: operated within a few volts (beyond, the Schottky barrier leaks or the dielectric breaks down); a value
#: past 10 V is a unit slip (mV typed as V) far more often than a real setting (common practice, no source).
MAX_GATE_VOLTAGE_V = 10.0


class _Captured:
    text = ""


@contextmanager
def _captured_c_stderr():
    """Capture what C code writes to file descriptor 2 inside the block (the GDSII reader reports there)."""
    import sys
    import tempfile

    captured = _Captured()
    sys.stderr.flush()
    saved = os.dup(2)
    with tempfile.TemporaryFile() as tmp:
        os.dup2(tmp.fileno(), 2)
        try:
            yield captured
        finally:
            os.dup2(saved, 2)
            os.close(saved)
            tmp.seek(0)
            captured.text = tmp.read(4096).decode("utf-8", "replace")


def _check_voltage(owner: str, voltage: object) -> float:
    """Return a gate voltage as a float, or raise PotentialError naming ``owner``."""
    if isinstance(voltage, bool):
        raise PotentialError(f"{owner}: voltage must be a number (V), got {voltage!r}; give a finite float")
    try:
        value = float(voltage)  # type: ignore[arg-type]
    except (TypeError, ValueError):
        raise PotentialError(f"{owner}: voltage must be a number (V), got {voltage!r}; give a finite float") from None
    if not math.isfinite(value):
        raise PotentialError(f"{owner}: voltage is not finite: {voltage!r} V; give a finite gate voltage")
    if abs(value) > MAX_GATE_VOLTAGE_V:
        raise PotentialError(
            f"{owner}: voltage {value!r} V is outside +-{MAX_GATE_VOLTAGE_V:g} V, implausible for a surface gate; "
            f"gate voltages are in volts (write -0.5 for -500 mV)"
        )
    return value


def _points(x: object, y: object) -> tuple[np.ndarray, np.ndarray]:
    """Broadcast x, y (nm) to float arrays of one shape; raise GeometryError if not finite."""
    try:
        xa, ya = np.broadcast_arrays(np.asarray(x, dtype=float), np.asarray(y, dtype=float))
    except (TypeError, ValueError):
        raise GeometryError(
            f"x and y must be numbers or arrays of one shape (nm), got shapes "
            f"{np.shape(x)} and {np.shape(y)}; pass matching arrays"
        ) from None
    bad = ~(np.isfinite(xa) & np.isfinite(ya))
    if bad.any():
        k = int(np.argmax(bad.ravel()))
        raise GeometryError(
            f"point {k} is not finite: (x, y) = ({xa.ravel()[k]}, {ya.ravel()[k]}) nm; "
            "evaluate the gate potential at finite positions only"
        )
    return xa, ya


# --- kernels: solid angles ----------------------------------------------------------------------


def solid_angle_rectangle(x: object, y: object, *, bounds: tuple[float, float, float, float],
                          depth_nm: float) -> np.ndarray:
    """Solid angle of an axis-aligned rectangle seen from below, closed form.

    .. math::

        \\Omega(x, y) = \\sum_{(u, v)} \\arctan\\frac{u v}{d \\sqrt{u^2 + v^2 + d^2}},
        \\quad u \\in \\{x - L, R - x\\},\\ v \\in \\{y - B, T - y\\},

    the four signed quadrants meeting at (x, y) (Davies, Larkin & Sukhorukov
    1995, from memory).  Valid inside and outside the rectangle.

    Parameters
    ----------
    x, y : float or ndarray, nm
        Positions in the 2DEG plane; broadcast against each other.
    bounds : (4,) tuple of float, nm, keyword-only
        ``(L, B, R, T)`` = ``(xmin, ymin, xmax, ymax)``, as :attr:`Region.bounds`.
    depth_nm : float, nm, keyword-only
        Depth d of the 2DEG below the surface (> 0).

    Returns
    -------
    omega : ndarray or float, sr
        Solid angle, of the broadcast shape of x and y; 0 < omega < 2 pi.
        The potential of a gate at voltage V is ``V * omega / (2 pi)``.

    Examples
    --------
    >>> omega = solid_angle_rectangle(0.0, 0.0, bounds=(-50, -100, 50, 100), depth_nm=50.0)
    >>> round(float(omega / (2 * np.pi)), 12)
    0.435905783151
    """
    d = _check_depth(depth_nm)
    xa, ya = _points(x, y)
    left, bottom, right, top = (float(b) for b in bounds)
    if not (left < right and bottom < top):
        raise GeometryError(
            f"rectangle bounds must be (xmin, ymin, xmax, ymax) with xmin < xmax and ymin < ymax, "
            f"got {tuple(bounds)!r} nm; reorder them"
        )
    omega = np.zeros(xa.shape)
    for u in (xa - left, right - xa):
        for v in (ya - bottom, top - ya):
            omega += np.arctan(u * v / (d * np.sqrt(u * u + v * v + d * d)))
    return omega[()]


def _blocks(n_points: int, n_terms: int):
    """Slices of the point set such that (n_terms, block) work arrays stay near _WORK_ELEMENTS."""
    block = max(1, _WORK_ELEMENTS // max(n_terms, 1))
    for start in range(0, n_points, block):
        yield slice(start, start + block)


def _boundary_edges(geometry: Polygon | MultiPolygon) -> np.ndarray:
    """Directed boundary edges (n, 2, 2) of a geometry: exteriors counter-clockwise, holes clockwise."""
    edges = []
    for part in shapely.get_parts(geometry):
        rings = [part.exterior, *part.interiors]
        for k, ring in enumerate(rings):
            coords = np.asarray(ring.coords)  # closed: last == first
            counter_clockwise = shapely.is_ccw(ring)
            if counter_clockwise != (k == 0):
                coords = coords[::-1]
            edges.append(np.stack([coords[:-1], coords[1:]], axis=1))
    return np.concatenate(edges)


def _edge_solid_angles(edges: np.ndarray, xa: np.ndarray, ya: np.ndarray, d: float) -> np.ndarray:
    """Solid angle of the region bounded by ``edges`` at points (x, y, -d); flat point arrays.

    Exact integral of the Poisson kernel, edge by edge.  Let F = (x, y) be the
    foot of the point in the gate plane.  An edge P -> Q on a line at signed
    distance h from F (positive if F is on its left), with P and Q at
    positions s1 < s2 along the line measured from the foot of the
    perpendicular, closes with F a triangle whose solid angle is
    sign(h) [f(s2) - f(s1)], where, integrating d rho dtheta d/(rho^2 +
    d^2)^{3/2} in polar coordinates about F over the right triangle with legs
    |h| and s,

        f(s) = arctan(s/|h|) - arctan(d s / (|h| R)),   R = sqrt(h^2 + s^2 + d^2)
             = arctan2(s |h| (h^2 + s^2), (R + d)(h^2 R + d s^2)).

    The second form has no cancellation (R - d = (h^2 + s^2)/(R + d)).
    Summed over a closed boundary the triangles outside the region cancel
    (the fan of signed triangles from F).  Every term is an angle below pi/2
    evaluated to rounding, so the sum is good to ~1e-16 absolute whatever the
    aspect ratio of the gate: unlike the triangle formula, whose denominator
    cancels when the point lies below a long thin triangle.
    """
    p, q = edges[:, 0], edges[:, 1]
    length = np.hypot(q[:, 0] - p[:, 0], q[:, 1] - p[:, 1])
    keep = length > 0.0
    p, q, length = p[keep], q[keep], length[keep]
    tx = ((q[:, 0] - p[:, 0]) / length)[:, None]
    ty = ((q[:, 1] - p[:, 1]) / length)[:, None]
    d2 = d * d
    omega = np.empty(xa.shape)
    for block in _blocks(xa.size, len(p)):
        fx = xa[block][None, :]
        fy = ya[block][None, :]
        px, py = p[:, 0:1] - fx, p[:, 1:2] - fy  # P - F
        qx, qy = q[:, 0:1] - fx, q[:, 1:2] - fy  # Q - F
        h = px * ty - py * tx  # cross(P - F, t): > 0 when F lies left of P -> Q
        s1 = px * tx + py * ty
        s2 = qx * tx + qy * ty
        ah, h2 = np.abs(h), h * h
        total = 0.0
        for s, sign in ((s2, 1.0), (s1, -1.0)):
            rho2 = h2 + s * s
            big_r = np.sqrt(rho2 + d2)
            total = total + sign * np.arctan2(s * ah * rho2, (big_r + d) * (h2 * big_r + d * s * s))
        omega[block] = (np.sign(h) * total).sum(axis=0)
    return omega


def _triangle_solid_angles(triangles: np.ndarray, xa: np.ndarray, ya: np.ndarray, d: float) -> np.ndarray:
    """Sum of signed triangle solid angles at points (x, y, -d); flat point arrays.

    Van Oosterom & Strackee (1983): with r_i the vectors from the point to
    the vertices, tan(Omega/2) = r1 . (r2 x r3) / (r1 r2 r3 + (r1.r2) r3 +
    (r1.r3) r2 + (r2.r3) r1).  All vertices lie in the plane z = 0, a height d
    above the point, so the triple product is d times twice the triangle's
    signed area, independent of the point: computed once, exactly, per
    triangle.  arctan2 keeps Omega/2 in the right branch when the denominator
    is negative (Omega > pi).  Counter-clockwise triangles count positive.

    The denominator cancels when the point lies below a long edge far from
    its ends; the relative error grows like 1e-16 (L/d)^2 for a triangle of
    size L (1e-12 at L/d = 1e4).
    """
    a, b, c = triangles[:, 0], triangles[:, 1], triangles[:, 2]
    twice_area = (b[:, 0] - a[:, 0]) * (c[:, 1] - a[:, 1]) - (c[:, 0] - a[:, 0]) * (b[:, 1] - a[:, 1])
    triple = (d * twice_area)[:, None]
    d2 = d * d
    omega = np.empty(xa.shape)
    for block in _blocks(xa.size, len(triangles)):
        px = xa[block][None, :]
        py = ya[block][None, :]
        r1x, r1y = a[:, 0:1] - px, a[:, 1:2] - py
        r2x, r2y = b[:, 0:1] - px, b[:, 1:2] - py
        r3x, r3y = c[:, 0:1] - px, c[:, 1:2] - py
        n1 = np.sqrt(r1x * r1x + r1y * r1y + d2)
        n2 = np.sqrt(r2x * r2x + r2y * r2y + d2)
        n3 = np.sqrt(r3x * r3x + r3y * r3y + d2)
        denom = (n1 * n2 * n3
                 + (r1x * r2x + r1y * r2y + d2) * n3
                 + (r1x * r3x + r1y * r3y + d2) * n2
                 + (r2x * r3x + r2y * r3y + d2) * n1)
        omega[block] = 2.0 * np.arctan2(triple, denom).sum(axis=0)
    return omega


def _delaunay_triangles(geometry: Polygon | MultiPolygon) -> np.ndarray:
    """Constrained Delaunay triangles of a polygonal geometry, (n, 3, 2), counter-clockwise."""
    collection = shapely.constrained_delaunay_triangles(geometry)
    triangles = np.array([np.asarray(t.exterior.coords)[:3] for t in shapely.get_parts(collection)])
    a, b, c = triangles[:, 0], triangles[:, 1], triangles[:, 2]
    clockwise = ((b[:, 0] - a[:, 0]) * (c[:, 1] - a[:, 1]) - (c[:, 0] - a[:, 0]) * (b[:, 1] - a[:, 1])) < 0
    triangles[clockwise] = triangles[clockwise][:, ::-1]
    return triangles


def _fan_triangles(geometry: Polygon | MultiPolygon) -> np.ndarray:
    """Signed fan of a polygonal geometry, (n, 3, 2), for shapely without constrained Delaunay.

    Every boundary edge (p, q), exteriors counter-clockwise and holes
    clockwise, forms the triangle (apex, p, q) with one common apex.  Summing
    their *signed* solid angles gives the geometry's solid angle for any
    polygon, convex or not, with or without holes: the parts of the fan
    outside the outline cancel in pairs.  The apex is the centre of the
    bounding box, which makes every triangle positive for a convex outline.
    """
    edges = _boundary_edges(geometry)
    xmin, ymin, xmax, ymax = geometry.bounds
    apex = np.broadcast_to([0.5 * (xmin + xmax), 0.5 * (ymin + ymax)], (len(edges), 2))
    return np.stack([apex, edges[:, 0], edges[:, 1]], axis=1)


def _triangulate(geometry: Polygon | MultiPolygon) -> np.ndarray:
    """Triangles (n, 3, 2) whose signed solid angles sum to the geometry's."""
    if hasattr(shapely, "constrained_delaunay_triangles"):  # shapely >= 2.1
        return _delaunay_triangles(geometry)
    return _fan_triangles(geometry)


#: Ways :func:`solid_angle_polygon` can evaluate a polygon's solid angle.
POLYGON_METHODS = ("edges", "triangles")


def solid_angle_polygon(x: object, y: object, *, shape: Region, depth_nm: float,
                        method: str = "edges") -> np.ndarray:
    """Solid angle of a planar region seen from below: any polygon, holes allowed.

    Two independent evaluations of :math:`\\Omega = \\int d\\, dA / \\rho^3`
    over the region (:math:`\\rho` the distance from the point):

    ``"edges"`` (default)
        Sum over the boundary edges of the exact solid angle of the triangle
        each edge forms with the foot F of the point (the point's projection
        on the gate plane), from the right-triangle integral
        :math:`f(s) = \\arctan(s/h) - \\arctan(d s / (h R))`,
        :math:`R = \\sqrt{h^2 + s^2 + d^2}` (h the edge's distance from F, s
        the position along it; our derivation, by polar integration of the
        Poisson kernel about F).  The rectangle closed form is the special
        case of four edges.  Accurate to rounding for any gate size.
    ``"triangles"``
        Constrained Delaunay triangulation (shapely >= 2.1; a signed fan of
        the edges otherwise), each triangle by Van Oosterom & Strackee (IEEE
        Trans. Biomed. Eng. 30, 125 (1983), from memory),

        .. math::

            \\tan\\frac{\\Omega}{2} = \\frac{|\\mathbf r_1 \\cdot (\\mathbf r_2 \\times \\mathbf r_3)|}
            {r_1 r_2 r_3 + (\\mathbf r_1 \\cdot \\mathbf r_2) r_3 + (\\mathbf r_1 \\cdot \\mathbf r_3) r_2
             + (\\mathbf r_2 \\cdot \\mathbf r_3) r_1},

        with r_i the vectors from (x, y, -d) to the triangle's vertices.
        Its denominator cancels below long thin triangles: relative error
        about 1e-16 (L/d)^2 for a gate of size L (1e-12 at L = 1e4 d, 1e-2
        at L = 1e7 d).  Kept as a cross-check of ``"edges"``.

    Parameters
    ----------
    x, y : float or ndarray, nm
        Positions in the 2DEG plane; broadcast against each other.
    shape : Region, keyword-only
        Gate outline in nm: any valid polygon or multipolygon, holes allowed.
    depth_nm : float, nm, keyword-only
        Depth d of the 2DEG below the surface (> 0).
    method : {"edges", "triangles"}, keyword-only
        Evaluation, see above.

    Returns
    -------
    omega : ndarray or float, sr
        Solid angle, of the broadcast shape of x and y.

    Examples
    --------
    A right triangle seen from below its right-angle corner, both ways:

    >>> from rgftrans.system.geometry import polygon
    >>> tri = polygon([[0, 0], [100, 0], [0, 100]])
    >>> round(float(solid_angle_polygon(0.0, 0.0, shape=tri, depth_nm=50.0)), 12)
    0.729727656227
    >>> round(float(solid_angle_polygon(0.0, 0.0, shape=tri, depth_nm=50.0, method="triangles")), 12)
    0.729727656227
    """
    d = _check_depth(depth_nm)
    xa, ya = _points(x, y)
    if not isinstance(shape, Region) or shape.is_empty:
        raise GeometryError(f"shape must be a non-empty Region, got {shape!r}; build it with rectangle or polygon")
    if method == "edges":
        omega = _edge_solid_angles(_boundary_edges(shape.geometry), xa.ravel(), ya.ravel(), d)
    elif method == "triangles":
        omega = _triangle_solid_angles(_triangulate(shape.geometry), xa.ravel(), ya.ravel(), d)
    else:
        raise GeometryError(f"method must be one of {POLYGON_METHODS}, got {method!r}; use 'edges'")
    return omega.reshape(xa.shape)[()]


# --- gates and layouts ---------------------------------------------------------------------------


def _rectangle_bounds(geometry: Polygon | MultiPolygon) -> tuple[float, float, float, float] | None:
    """(xmin, ymin, xmax, ymax) if the geometry is an axis-aligned rectangle with four corners, else None."""
    if not isinstance(geometry, Polygon) or len(geometry.interiors) > 0:
        return None
    corners = np.unique(np.asarray(geometry.exterior.coords), axis=0)
    xs, ys = np.unique(corners[:, 0]), np.unique(corners[:, 1])
    if len(corners) != 4 or len(xs) != 2 or len(ys) != 2:
        return None
    return (float(xs[0]), float(ys[0]), float(xs[1]), float(ys[1]))


@dataclass(frozen=True)
class Gate:
    """One metal surface gate: a name, an outline in the surface plane and a voltage.

    Parameters
    ----------
    name : str
        Non-empty name, unique within a :class:`GateLayout` (used by
        :meth:`GateLayout.with_voltages`).
    shape : Region
        Outline in nm, in the same (x, y) frame as the device.  A shapely
        Polygon or MultiPolygon is accepted and stored as a Region.
    voltage : float, V
        Gate voltage relative to the pinned surface.  Positive voltages
        attract electrons (lower U).

    Notes
    -----
    :attr:`is_rectangle` tells which formula is used: an axis-aligned
    rectangle with exactly four distinct corners uses the closed form, every
    other outline (including a rectangle drawn with an extra vertex on an
    edge) the edge sum of :func:`solid_angle_polygon`.  Both agree to
    rounding error.
    """

    name: str
    shape: Region
    voltage: float

    def __post_init__(self) -> None:
        if not isinstance(self.name, str) or not self.name.strip():
            raise GeometryError(f"gate name must be a non-empty string, got {self.name!r}; give it a name")
        shape = self.shape
        if isinstance(shape, (Polygon, MultiPolygon)):
            if not shape.is_valid:
                raise GeometryError(
                    f"gate '{self.name}': outline is invalid ({shapely.is_valid_reason(shape)}) for vertices "
                    f"{_format_points(_ring_vertices(shape))}; reorder the vertices so that no edges cross"
                )
            shape = Region(shape)
        if not isinstance(shape, Region):
            raise GeometryError(
                f"gate '{self.name}': shape must be a Region, got {type(shape).__name__}; "
                "build it with rgftrans.system.geometry.rectangle or polygon"
            )
        if shape.is_empty:
            raise GeometryError(f"gate '{self.name}': shape is empty; give the gate an outline with area")
        object.__setattr__(self, "shape", shape)
        object.__setattr__(self, "voltage", _check_voltage(f"gate '{self.name}'", self.voltage))

    @cached_property
    def _bounds_if_rectangle(self) -> tuple[float, float, float, float] | None:
        return _rectangle_bounds(self.shape.geometry)

    @cached_property
    def _edges(self) -> np.ndarray:
        return _boundary_edges(self.shape.geometry)

    @property
    def is_rectangle(self) -> bool:
        """True if the closed rectangle formula is used (axis-aligned, four corners)."""
        return self._bounds_if_rectangle is not None

    def solid_angle(self, x: object, y: object, *, depth_nm: float) -> np.ndarray:
        """Solid angle Omega (sr) the gate subtends from (x, y, -depth_nm); see the module docstring."""
        d = _check_depth(depth_nm)
        bounds = self._bounds_if_rectangle
        if bounds is not None:
            return solid_angle_rectangle(x, y, bounds=bounds, depth_nm=d)
        xa, ya = _points(x, y)
        return _edge_solid_angles(self._edges, xa.ravel(), ya.ravel(), d).reshape(xa.shape)[()]

    def potential_V(self, x: object, y: object, *, depth_nm: float) -> np.ndarray:
        """Potential phi = V Omega / (2 pi) (V) of this gate alone in the 2DEG plane."""
        return self.voltage * self.solid_angle(x, y, depth_nm=depth_nm) / (2.0 * np.pi)


def gate_potential(gates: Iterable[Gate], x: object, y: object, *, depth_nm: float) -> np.ndarray:
    """Electrostatic potential of surface gates in the 2DEG plane (pinned surface).

    .. math::

        \\phi(x, y) = \\sum_i \\frac{V_i\\, \\Omega_i(x, y)}{2 \\pi}

    (Davies, Larkin & Sukhorukov, J. Appl. Phys. 77, 4504 (1995), from
    memory): superposition of the gates, each with the solid angle it
    subtends from (x, y, -d).

    Parameters
    ----------
    gates : iterable of Gate
        The gates; overlapping gates simply add (the model has no notion of
        one gate screening another).
    x, y : float or ndarray, nm
        Positions in the 2DEG plane; broadcast against each other.
    depth_nm : float, nm, keyword-only
        Depth d of the 2DEG below the surface (> 0).

    Returns
    -------
    phi : ndarray or float, V
        Potential, of the broadcast shape of x and y.  The electron potential
        energy is ``-1000 * phi`` meV.

    Examples
    --------
    >>> from rgftrans.system.geometry import rectangle
    >>> g = Gate("g", rectangle(10, 20, 30, 45), 1.0)
    >>> round(float(gate_potential([g], 25.0, -40.0, depth_nm=50.0)), 12)
    0.005897535562
    """
    d = _check_depth(depth_nm)
    xa, ya = _points(x, y)
    phi = np.zeros(xa.shape)
    for gate in gates:
        if not isinstance(gate, Gate):
            raise GeometryError(f"gates must hold Gate objects, got {gate!r}; build each with Gate(name, shape, voltage)")
        phi += gate.potential_V(xa, ya, depth_nm=d)
    return phi[()]


@dataclass(frozen=True)
class GateLayout:
    """Surface gates over a 2DEG at a given depth: the gate-defined potential of a device.

    Parameters
    ----------
    gates : tuple of Gate
        The gates, with unique names (a list is accepted and stored as a tuple).
    depth_nm : float, nm
        Depth of the 2DEG below the surface (the gate plane), > 0.

    Notes
    -----
    A layout is callable: ``layout(x, y)`` is :meth:`potential_energy_meV`,
    so it can be passed as ``Device(..., potential=layout)``.

    Examples
    --------
    A split gate at -0.5 V, swept to -0.7 V:

    >>> from rgftrans.system.geometry import rectangle
    >>> split = GateLayout(
    ...     (Gate("left", rectangle(-300, -100, -40, 100), -0.5),
    ...      Gate("right", rectangle(40, -100, 300, 100), -0.5)), depth_nm=60.0)
    >>> pinched = split.with_voltages(left=-0.7, right=-0.7)
    >>> bool(pinched(0.0, 0.0) > split(0.0, 0.0) > 0.0)  # a barrier for electrons, higher when pinched
    True
    """

    gates: tuple[Gate, ...]
    depth_nm: float

    def __post_init__(self) -> None:
        gates = tuple(self.gates) if isinstance(self.gates, (list, tuple)) else self.gates
        if not isinstance(gates, tuple):
            raise GeometryError(f"gates must be a tuple of Gate, got {type(self.gates).__name__}; pass (gate1, gate2, ...)")
        if not gates:
            raise GeometryError("a gate layout needs at least one gate, got none; pass (Gate(...), ...)")
        for gate in gates:
            if not isinstance(gate, Gate):
                raise GeometryError(f"gates must hold Gate objects, got {gate!r}; build each with Gate(name, shape, voltage)")
        names = [g.name for g in gates]
        repeated = sorted({n for n in names if names.count(n) > 1})
        if repeated:
            raise GeometryError(
                f"gate names must be unique, got {', '.join(repr(n) for n in repeated)} more than once; "
                "rename the gates (a gate may have several disjoint parts: use one Region for them)"
            )
        object.__setattr__(self, "gates", gates)
        object.__setattr__(self, "depth_nm", _check_depth(self.depth_nm))

    @property
    def names(self) -> tuple[str, ...]:
        """Gate names, in order."""
        return tuple(g.name for g in self.gates)

    @property
    def voltages(self) -> dict[str, float]:
        """Gate voltages (V) by name."""
        return {g.name: g.voltage for g in self.gates}

    def potential_V(self, x: object, y: object) -> np.ndarray:
        """Electrostatic potential phi (V) in the 2DEG plane at (x, y) nm; see :func:`gate_potential`."""
        return gate_potential(self.gates, x, y, depth_nm=self.depth_nm)

    def potential_energy_meV(self, x: object, y: object) -> np.ndarray:
        """Electron potential energy U = -e phi (meV) at (x, y) nm.

        Parameters
        ----------
        x, y : float or ndarray, nm
            Positions in the 2DEG plane; broadcast against each other.

        Returns
        -------
        U : ndarray or float, meV
            ``-1000 * phi``: positive gate voltages lower the electron energy.
        """
        return -MEV_PER_VOLT * self.potential_V(x, y)

    __call__ = potential_energy_meV

    def with_voltages(self, voltages: Mapping[str, float] | None = None, /, **named: float) -> GateLayout:
        """A copy with some gate voltages changed (for sweeps).

        Parameters
        ----------
        voltages : mapping of str to float, V, optional
            New voltages by gate name (handy for names that are not Python
            identifiers, e.g. ``{"plunger-1": 0.2}``).
        **named : float, V
            New voltages by gate name; override ``voltages``.

        Returns
        -------
        GateLayout
            The same gates and depth with the given voltages; gates not
            named keep theirs.
        """
        new = {**(dict(voltages) if voltages is not None else {}), **named}
        unknown = sorted(set(new) - set(self.names))
        if unknown:
            raise GeometryError(
                f"no gate named {', '.join(repr(n) for n in unknown)} in the layout; "
                f"gates are {', '.join(repr(n) for n in self.names)}"
            )
        gates = tuple(dataclasses.replace(g, voltage=new[g.name]) if g.name in new else g for g in self.gates)
        return GateLayout(gates, self.depth_nm)


# --- GDSII ---------------------------------------------------------------------------------------


def _layer_names(layers: object) -> dict[int, str]:
    """Normalise ``layers`` (dict layer -> name, or list of layers) to a dict."""
    if isinstance(layers, Mapping):
        pairs = list(layers.items())
    elif isinstance(layers, (list, tuple)):
        pairs = [(layer, f"layer{layer}") for layer in layers]
    else:
        raise GeometryError(
            f"layers must be a dict {{layer: gate name}} or a list of layer numbers, got {layers!r}; "
            "e.g. layers={5: 'plunger', 6: 'barrier'}"
        )
    if not pairs:
        raise GeometryError("layers is empty; name at least one GDS layer that holds a gate")
    out: dict[int, str] = {}
    for layer, name in pairs:
        if isinstance(layer, bool) or not isinstance(layer, (int, np.integer)) or not 0 <= layer <= 65535:
            raise GeometryError(f"GDS layer numbers must be integers in 0..65535, got {layer!r}; fix layers=")
        if int(layer) in out:
            raise GeometryError(f"GDS layer {layer} is listed twice in layers; give each layer once")
        out[int(layer)] = name
    return out


def gates_from_gds(path: str | os.PathLike, *, layers: Mapping[int, str] | list[int],
                   voltages: Mapping[str, float], depth_nm: float, cell: str | None = None,
                   unit_nm: float | None = None, datatype: int | None = None) -> GateLayout:
    """Read surface gates from a GDSII layout: one gate per layer.

    All polygons (and paths, as polygons) of a layer in ``cell`` and the
    cells it references are merged into one gate outline, in nm.

    Parameters
    ----------
    path : str or path-like
        GDSII stream file.
    layers : dict of int to str, or list of int, keyword-only
        GDS layer numbers to read, with the gate name of each; a list names
        the gates ``"layer<n>"``.
    voltages : dict of str to float, V, keyword-only
        Voltage of every gate, by gate name; exactly the gates read.
    depth_nm : float, nm, keyword-only
        Depth of the 2DEG below the surface (> 0).
    cell : str, optional, keyword-only
        Cell to read; default the file's only top-level cell.
    unit_nm : float, nm, optional, keyword-only
        Length of one user unit in nm.  Default: the file's own user unit
        (gdstk's ``Library.unit``, in metres, times 1e9), so a layout drawn
        in µm and one drawn in nm give the same gates.  Set it only when the
        file's unit is wrong.
    datatype : int, optional, keyword-only
        Read only this GDS datatype; default any datatype.

    Returns
    -------
    GateLayout
        The gates in the order of ``layers``.

    Raises
    ------
    GeometryError
        If the file is missing or not GDSII, the cell or a layer is missing
        (the message lists those present), a polygon crosses itself, or the
        voltages do not name exactly the gates read.
    PotentialError
        If a voltage is not finite.

    Notes
    -----
    Needs the optional dependency gdstk (``pip install rgftrans[layout]``).
    """
    import gdstk

    d = _check_depth(depth_nm)
    names = _layer_names(layers)
    if not isinstance(voltages, Mapping):
        raise GeometryError(f"voltages must be a dict {{gate name: V}}, got {voltages!r}; e.g. {{'plunger': 0.2}}")
    missing = [n for n in names.values() if n not in voltages]
    extra = sorted(set(voltages) - set(names.values()))
    if missing or extra:
        what = " and ".join(
            ([f"no voltage for {', '.join(map(repr, missing))}"] if missing else [])
            + ([f"a voltage for unknown {', '.join(map(repr, extra))}"] if extra else [])
        )
        raise GeometryError(
            f"voltages do not match the gates read: {what}; "
            f"give exactly the gates {', '.join(map(repr, names.values()))}"
        )
    file = os.fspath(path)
    if not os.path.exists(file):
        raise GeometryError(f"GDSII file {file!r} does not exist; check the path")
    if os.path.isdir(file):
        raise GeometryError(f"GDSII path {file!r} is a directory; give the path of a .gds file")
    if not os.path.isfile(file):
        raise GeometryError(f"GDSII path {file!r} is not a regular file (a pipe or device?); give a .gds file")
    with open(file, "rb") as stream:
        head = stream.read(len(_GDS_MAGIC))
    if head != _GDS_MAGIC:  # (the message quotes none of the file's bytes: it may be anything)
        raise GeometryError(
            f"{file!r} is not a GDSII stream file (it does not start with the GDSII HEADER record); "
            "export the layout as GDSII"
        )
    with _captured_c_stderr() as said:
        try:
            library = gdstk.read_gds(file)
        except OSError:
            library = None
    if library is None:  # the reader's own complaint goes into our one line instead of onto the terminal
        reason = " ".join(said.text.replace("[GDSTK]", "").split()) or "unreadable"
        raise GeometryError(f"cannot read GDSII file {file!r} ({reason}); re-export it") from None
    if unit_nm is None:
        scale = float(library.unit) * 1e9
    else:
        try:
            scale = float(unit_nm)
        except (TypeError, ValueError):
            scale = math.nan
        if not math.isfinite(scale) or scale <= 0.0:
            raise GeometryError(f"unit_nm must be a positive number of nm per user unit, got {unit_nm!r}; e.g. 1000.0 for µm")

    cells = {c.name: c for c in library.cells}
    if cell is None:
        top = library.top_level()
        if len(top) != 1:
            listed = ", ".join(repr(c.name) for c in top[:_MAX_QUOTED * 2]) or "none"
            raise GeometryError(f"{file!r} has {len(top)} top-level cells ({listed}); pick one with cell=")
        chosen = top[0]
    elif cell in cells:
        chosen = cells[cell]
    else:
        raise GeometryError(
            f"cell {cell!r} is not in {file!r}: cells present are {', '.join(map(repr, sorted(cells)))}; fix cell="
        )

    found: dict[int, list[np.ndarray]] = {}
    present: set[tuple[int, int]] = set()
    for poly in chosen.get_polygons(apply_repetitions=True, include_paths=True, depth=None):
        present.add((poly.layer, poly.datatype))
        if poly.layer in names and (datatype is None or poly.datatype == datatype):
            found.setdefault(poly.layer, []).append(np.asarray(poly.points, dtype=float) * scale)

    gates = []
    for layer, name in names.items():
        if layer not in found:
            shown = sorted(present) if datatype is not None else sorted({lay for lay, _ in present})
            listed = ", ".join(f"{p[0]}/{p[1]}" if isinstance(p, tuple) else str(p) for p in shown) or "none"
            which = f"layer {layer}/{datatype}" if datatype is not None else f"layer {layer}"
            raise GeometryError(
                f"GDS {which} (gate {name!r}) has no polygons in cell {chosen.name!r} of {file!r}: "
                f"layers present are {listed}; fix layers="
            )
        parts = []
        for k, points in enumerate(found[layer]):
            outline = Polygon(points)
            if not outline.is_valid:
                raise GeometryError(
                    f"polygon {k} on GDS layer {layer} (gate {name!r}) of {file!r} is invalid "
                    f"({shapely.is_valid_reason(outline)}), vertices in nm {_format_points(points)}; "
                    "redraw it in the layout so that its edges do not cross"
                )
            parts.append(Region(outline))
        gates.append(Gate(name, union(*parts), voltages[name]))
    return GateLayout(tuple(gates), d)
