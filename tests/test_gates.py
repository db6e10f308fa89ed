"""Gates: superposition, sign, layouts and sweeps, GDSII input, errors and the plot.

Reference values of the electrostatics live in tests/reference/test_gate_electrostatics.py
(sources named there); here the checks are invariants of the model (linearity
in V and superposition over gates, which follow from phi = V Omega / 2 pi,
J. H. Davies, I. A. Larkin, E. V. Sukhorukov, J. Appl. Phys. 77, 4504 (1995),
from memory), the sign convention U = -e phi for the electron's potential
energy (common practice, no source), and the behaviour of the API.  GDSII fixtures are
invented layouts written with gdstk into pytest's tmp_path.
"""

import math
import os

import numpy as np
import pytest
import shapely

import rgftrans.electrostatics.gates as gates_module
from rgftrans.system.device import Device, Lead
from rgftrans.errors import GeometryError, PotentialError
from rgftrans.electrostatics.gates import (
    POLYGON_METHODS,
    Gate,
    GateLayout,
    gate_potential,
    gates_from_gds,
    solid_angle_polygon,
)
from rgftrans.system.geometry import disk, polygon, rectangle
from rgftrans.system.lattices import square

import gdstk  # a core dependency: a missing install must fail, not skip

D = 60.0  # nm, depth of the 2DEG in these invented devices

#: Sums of a few potentials of size <= 1 V, each good to ~1e-16: 1e-14 absolute.
TOL_SUM = 1e-14
#: Two independent polygon evaluations, gates <= 40 d across: 1e-10 absolute
#: (the triangle formula's error ~1e-16 (L/d)^2 is far below this).
TOL_METHODS = 1e-10
#: GDSII round trip: coordinates pass through integer database units and a
#: float user-unit scale (e.g. 1e-6 m * 1e9), a relative change of ~1e-16:
#: 1e-12 relative on the potential.
TOL_GDS = 1e-12

# Points in and around the invented gates (nm).
XS = np.array([0.0, 35.0, -120.0, 250.0, 400.0, -10.0])
YS = np.array([0.0, -20.0, 60.0, 140.0, -300.0, 95.0])


def one_line(error: pytest.ExceptionInfo) -> str:
    """The error's message, asserted to be one line (the project's error convention, see errors.py)."""
    message = str(error.value)
    assert "\n" not in message and message.strip() == message and message
    return message


def split_gate_with_plunger(v_split=-0.4, v_plunger=0.15):
    """Invented layout: two split-gate fingers and an L-shaped plunger above them."""
    return GateLayout(
        (
            Gate("left", rectangle(-300.0, -150.0, -50.0, 0.0), v_split),
            Gate("right", rectangle(50.0, -150.0, 300.0, 0.0), v_split),
            Gate("plunger", polygon([[-40, 80], [200, 80], [200, 120], [0, 120], [0, 260], [-40, 260]]), v_plunger),
        ),
        depth_nm=D,
    )


# --- invariants -------------------------------------------------------------------------------


@pytest.mark.parametrize("k", range(len(XS)))
def test_superposition_two_gates(k):
    # phi is linear in the gate charges: the layout equals the sum of its gates.  TOL_SUM.
    layout = split_gate_with_plunger()
    total = layout.potential_V(XS[k], YS[k])
    parts = sum(gate_potential([g], XS[k], YS[k], depth_nm=D) for g in layout.gates)
    assert abs(total - parts) <= TOL_SUM


def test_overlapping_gates_add():
    # The frozen-surface model superposes even overlapping gates: two coincident
    # gates at V1 and V2 act as one at V1 + V2.  TOL_SUM.
    shape = polygon([[0, 0], [90, 10], [40, 70]])
    pair = GateLayout((Gate("a", shape, 0.3), Gate("b", shape, -0.05)), depth_nm=D)
    single = GateLayout((Gate("ab", shape, 0.25),), depth_nm=D)
    np.testing.assert_allclose(pair.potential_V(XS, YS), single.potential_V(XS, YS), rtol=0, atol=TOL_SUM)


@pytest.mark.parametrize("voltage", [-0.7, 0.02, 1.3])
def test_linear_in_voltage(voltage):
    # phi = V Omega / 2 pi: phi(V) = V phi(1 V).  Relative 1e-15 (one multiplication).
    shape = polygon([[0, 0], [90, 10], [40, 70]])
    unit = gate_potential([Gate("g", shape, 1.0)], XS, YS, depth_nm=D)
    scaled = gate_potential([Gate("g", shape, voltage)], XS, YS, depth_nm=D)
    np.testing.assert_allclose(scaled, voltage * unit, rtol=1e-15, atol=0)


@pytest.mark.parametrize("voltage, sign", [(0.3, -1.0), (-0.3, 1.0)])
def test_sign_of_energy(voltage, sign):
    # U = -e phi (electron potential energy, common practice), in meV U = -1000 phi_V.  A positive gate lowers the
    # electron energy everywhere (Omega > 0), a negative one raises it.  Exact (one product).
    layout = GateLayout((Gate("g", rectangle(-100, -100, 100, 100), voltage),), depth_nm=D)
    energy = layout.potential_energy_meV(XS, YS)
    np.testing.assert_array_equal(energy, -1000.0 * layout.potential_V(XS, YS))
    assert np.all(np.sign(energy) == sign)
    np.testing.assert_array_equal(layout(XS, YS), energy)  # the layout is callable as U(x, y)


def test_shapes_and_scalars():
    # Vectorised over any broadcast shape; a scalar point gives a scalar.
    layout = split_gate_with_plunger()
    gx, gy = np.meshgrid(np.linspace(-200, 200, 7), np.linspace(-100, 300, 5))
    grid = layout.potential_energy_meV(gx, gy)
    assert grid.shape == (5, 7)
    assert np.ndim(layout.potential_energy_meV(10.0, 20.0)) == 0
    row = layout.potential_energy_meV(np.linspace(-200, 200, 7), 20.0)  # y broadcast
    pointwise = [layout.potential_energy_meV(x, 20.0) for x in np.linspace(-200, 200, 7)]
    np.testing.assert_allclose(row, pointwise, rtol=0, atol=1000.0 * TOL_SUM)  # meV = 1000 x V


def test_many_points_are_blocked_consistently():
    # More points than one work block (gates._WORK_ELEMENTS / n_edges): blocking must not change values.
    layout = GateLayout((Gate("disk", disk((0.0, 0.0), 80.0), 0.2),), depth_nm=D)
    n = gates_module._WORK_ELEMENTS // 64 * 2 + 17
    x = np.linspace(-500.0, 500.0, n)
    y = 0.3 * x
    picks = [0, n // 3, n - 1]
    full = layout.potential_V(x, y)
    # Same terms, summed in a different order by numpy (SIMD): TOL_SUM, not bit equality.
    np.testing.assert_allclose(full[picks], [layout.potential_V(x[k], y[k]) for k in picks], rtol=0, atol=TOL_SUM)


# --- the polygon evaluations agree -------------------------------------------------------------------

SHAPES = {
    "concave": polygon([[-40, 80], [200, 80], [200, 120], [0, 120], [0, 260], [-40, 260]]),
    "holed": rectangle(-150.0, -150.0, 150.0, 150.0) - disk((20.0, -10.0), 60.0, segments=24),
    "two-parts": rectangle(-300.0, -150.0, -50.0, 0.0) | polygon([[60, 0], [300, -40], [180, 90]]),
    "disk": disk((30.0, 40.0), 90.0, segments=40),
}


@pytest.mark.parametrize("method", POLYGON_METHODS)
@pytest.mark.parametrize("name", SHAPES)
def test_polygon_methods_agree(name, method):
    # Edge sum vs triangulation + Van Oosterom-Strackee, two independent evaluations.  TOL_METHODS.
    shape = SHAPES[name]
    reference = solid_angle_polygon(XS, YS, shape=shape, depth_nm=D, method="edges")
    np.testing.assert_allclose(solid_angle_polygon(XS, YS, shape=shape, depth_nm=D, method=method),
                               reference, rtol=0, atol=TOL_METHODS)


@pytest.mark.parametrize("name", SHAPES)
def test_triangulation_fallback_without_constrained_delaunay(name, monkeypatch):
    # shapely < 2.1 has no constrained_delaunay_triangles: the signed fan must give the same.  TOL_METHODS.
    shape = SHAPES[name]
    expected = solid_angle_polygon(XS, YS, shape=shape, depth_nm=D, method="edges")
    monkeypatch.delattr(shapely, "constrained_delaunay_triangles", raising=False)
    fallback = solid_angle_polygon(XS, YS, shape=shape, depth_nm=D, method="triangles")
    np.testing.assert_allclose(fallback, expected, rtol=0, atol=TOL_METHODS)


def test_holed_gate_is_outer_minus_hole():
    # Superposition on shapes: a plate with a hole = plate minus a gate on the hole.  TOL_METHODS.
    outer = polygon([[-150, -150], [150, -150], [150, 150], [-150, 150], [-150, 0]])  # 5 vertices: general path
    hole = disk((20.0, -10.0), 60.0, segments=24)
    holed = Gate("h", outer - hole, 1.0)
    phi = gate_potential([holed], XS, YS, depth_nm=D)
    expected = gate_potential([Gate("o", outer, 1.0), Gate("x", hole, -1.0)], XS, YS, depth_nm=D)
    np.testing.assert_allclose(phi, expected, rtol=0, atol=TOL_METHODS)


# --- layouts and sweeps -----------------------------------------------------------------------------


def test_with_voltages_returns_new_layout():
    layout = split_gate_with_plunger(v_split=-0.4)
    swept = layout.with_voltages(left=-0.6, plunger=0.3)
    assert swept.voltages == {"left": -0.6, "right": -0.4, "plunger": 0.3}
    assert layout.voltages == {"left": -0.4, "right": -0.4, "plunger": 0.15}  # unchanged: frozen
    assert swept.depth_nm == layout.depth_nm and swept.names == layout.names
    # Only the changed gates move the potential: linearity again.  TOL_SUM.
    change = swept.potential_V(XS, YS) - layout.potential_V(XS, YS)
    left, plunger = layout.gates[0], layout.gates[2]
    expected = (-0.2 * gate_potential([left], XS, YS, depth_nm=D) / left.voltage
                + 0.15 * gate_potential([plunger], XS, YS, depth_nm=D) / plunger.voltage)
    np.testing.assert_allclose(change, expected, rtol=0, atol=TOL_SUM)


def test_with_voltages_mapping_for_any_name():
    layout = GateLayout((Gate("plunger-1", rectangle(0, 0, 50, 50), 0.1),), depth_nm=D)
    assert layout.with_voltages({"plunger-1": 0.25}).voltages == {"plunger-1": 0.25}


def test_layout_as_device_potential():
    # A layout is a Device potential: onsite = 4t + U(x, y) on the square lattice (effective-mass
    # discretisation, Datta 1995 ch. 3, from memory).
    layout = split_gate_with_plunger()
    leads = [Lead("source", "left", (-40.0, 40.0)), Lead("drain", "right", (-40.0, 40.0))]
    device = Device(rectangle(-100.0, -40.0, 100.0, 40.0), leads, lattice=square(20.0), hopping=1.0,
                    potential=layout)
    model = device.discretise()
    onsite = model.hamiltonian.diagonal().real
    expected = 4.0 + layout(model.positions[:, 0], model.positions[:, 1])
    np.testing.assert_allclose(onsite, expected, rtol=0, atol=1e-12)


def test_gate_accepts_shapely_polygon_and_flags_rectangles():
    gate = Gate("g", shapely.box(0, 0, 10, 20), 0.1)
    assert gate.is_rectangle and gate.shape.area == 200.0
    assert not Gate("tilted", polygon([[0, 0], [10, 1], [9, 11], [-1, 10]]), 0.1).is_rectangle


# --- GDSII -----------------------------------------------------------------------------------------

# The invented layout, in nm: layer 1 a rectangle (split finger), layer 2 an L
# drawn as two abutting polygons (merged into one gate), layer 3 a triangle in
# a sub-cell placed at (100, -50), layer 4 a 20 nm wide path from (-200, 200)
# to (100, 200).  Datatype 7 on layer 1 holds a marker that datatype=0 ignores.
FINGER = (-300.0, -150.0, -50.0, 0.0)
L_PARTS = ([(-40, 80), (200, 80), (200, 120), (-40, 120)], [(-40, 120), (0, 120), (0, 260), (-40, 260)])
TRIANGLE = [(0, 0), (80, 0), (30, 60)]
TRIANGLE_OFFSET = (100.0, -50.0)
PATH = ([(-200.0, 200.0), (100.0, 200.0)], 20.0)
MARKER = (500.0, 500.0, 600.0, 600.0)


def write_layout(path, *, nm_per_unit):
    """Write the invented layout with user unit nm_per_unit nm (database unit 1e-3 user units)."""
    unit_m = nm_per_unit * 1e-9
    library = gdstk.Library(unit=unit_m, precision=unit_m * 1e-3)
    s = 1.0 / nm_per_unit
    sub = library.new_cell("PLUNGER_TIP")
    sub.add(gdstk.Polygon([(x * s, y * s) for x, y in TRIANGLE], layer=3))
    top = library.new_cell("DOT")
    top.add(gdstk.rectangle((FINGER[0] * s, FINGER[1] * s), (FINGER[2] * s, FINGER[3] * s), layer=1))
    top.add(gdstk.rectangle((MARKER[0] * s, MARKER[1] * s), (MARKER[2] * s, MARKER[3] * s), layer=1, datatype=7))
    for part in L_PARTS:
        top.add(gdstk.Polygon([(x * s, y * s) for x, y in part], layer=2))
    top.add(gdstk.Reference(sub, origin=(TRIANGLE_OFFSET[0] * s, TRIANGLE_OFFSET[1] * s)))
    points, width = PATH
    top.add(gdstk.FlexPath([(x * s, y * s) for x, y in points], width * s, layer=4))
    library.write_gds(str(path))
    return path


VOLTAGES = {"finger": -0.5, "plunger": 0.2, "tip": 0.1, "wire": -0.05}
LAYERS = {1: "finger", 2: "plunger", 3: "tip", 4: "wire"}


def expected_layout():
    """The same gates built directly in nm."""
    ox, oy = TRIANGLE_OFFSET
    (x0, y0), (x1, y1) = PATH[0]
    half = PATH[1] / 2
    return GateLayout((
        Gate("finger", rectangle(*FINGER), VOLTAGES["finger"]),
        Gate("plunger", polygon(L_PARTS[0]) | polygon(L_PARTS[1]), VOLTAGES["plunger"]),
        Gate("tip", polygon([(x + ox, y + oy) for x, y in TRIANGLE]), VOLTAGES["tip"]),
        Gate("wire", rectangle(x0, y0 - half, x1, y1 + half), VOLTAGES["wire"]),
    ), depth_nm=D)


@pytest.mark.parametrize("nm_per_unit", [1.0, 1000.0], ids=["nm", "um"])
def test_gds_round_trip(tmp_path, nm_per_unit):
    # Same layout drawn in nm and in µm user units gives the directly built potential.  TOL_GDS.
    path = write_layout(tmp_path / "dot.gds", nm_per_unit=nm_per_unit)
    layout = gates_from_gds(path, layers=LAYERS, voltages=VOLTAGES, depth_nm=D, datatype=0)
    assert layout.names == ("finger", "plunger", "tip", "wire")
    reference = expected_layout()
    for got, want in zip(layout.gates, reference.gates):
        assert got.shape.geometry.symmetric_difference(want.shape.geometry).area <= 1e-9 * want.shape.area
    np.testing.assert_allclose(layout.potential_V(XS, YS), reference.potential_V(XS, YS), rtol=TOL_GDS, atol=0)


def test_gds_datatype_any_includes_marker(tmp_path):
    # Default datatype=None reads every datatype: the finger gate gains the marker square.
    path = write_layout(tmp_path / "dot.gds", nm_per_unit=1.0)
    layout = gates_from_gds(path, layers={1: "finger"}, voltages={"finger": 1.0}, depth_nm=D)
    assert layout.gates[0].shape.area == pytest.approx(250.0 * 150.0 + 100.0 * 100.0, rel=1e-12)


def test_gds_unit_override_and_layer_list(tmp_path):
    # unit_nm overrides the file's unit; a list of layers names the gates "layer<n>".  TOL_GDS.
    path = write_layout(tmp_path / "dot_um.gds", nm_per_unit=1000.0)
    layout = gates_from_gds(path, layers=[1, 3], voltages={"layer1": -0.5, "layer3": 0.1}, depth_nm=D,
                            cell="DOT", unit_nm=1000.0, datatype=0)
    reference = expected_layout()
    expected = gate_potential([reference.gates[0], reference.gates[2]], XS, YS, depth_nm=D)
    np.testing.assert_allclose(layout.potential_V(XS, YS), expected, rtol=TOL_GDS, atol=0)


# --- errors: one line each, naming the value and the fix -----------------------------------------------------


BOWTIE = [(0, 0), (100, 100), (100, 0), (0, 100)]


def test_self_intersecting_gate():
    with pytest.raises(GeometryError) as error:
        Gate("bowtie", shapely.Polygon(BOWTIE), 0.1)
    message = one_line(error)
    assert "gate 'bowtie'" in message and "Self-intersection" in message and "reorder" in message


def test_self_intersecting_gds_polygon(tmp_path):
    library = gdstk.Library(unit=1e-9, precision=1e-12)
    library.new_cell("TOP").add(gdstk.Polygon(BOWTIE, layer=5))
    path = tmp_path / "bowtie.gds"
    library.write_gds(str(path))
    with pytest.raises(GeometryError) as error:
        gates_from_gds(path, layers={5: "g"}, voltages={"g": 0.1}, depth_nm=D)
    message = one_line(error)
    assert "layer 5" in message and "Self-intersection" in message and "redraw" in message


def test_gds_missing_layer_lists_present_layers(tmp_path):
    path = write_layout(tmp_path / "dot.gds", nm_per_unit=1.0)
    with pytest.raises(GeometryError) as error:
        gates_from_gds(path, layers={9: "ghost"}, voltages={"ghost": 0.1}, depth_nm=D)
    message = one_line(error)
    assert "layer 9" in message and "layers present are 1, 2, 3, 4" in message and "layers=" in message


def test_gds_missing_layer_with_datatype_lists_pairs(tmp_path):
    path = write_layout(tmp_path / "dot.gds", nm_per_unit=1.0)
    with pytest.raises(GeometryError) as error:
        gates_from_gds(path, layers={3: "tip"}, voltages={"tip": 0.1}, depth_nm=D, datatype=7)
    assert "layers present are 1/0, 1/7, 2/0, 3/0, 4/0" in one_line(error)


def test_not_a_gds_file(tmp_path):
    path = tmp_path / "notes.gds"
    path.write_text("gate layout, to be drawn\n")
    with pytest.raises(GeometryError) as error:
        gates_from_gds(path, layers=[1], voltages={"layer1": 0.1}, depth_nm=D)
    message = one_line(error)
    assert "is not a GDSII stream file" in message and "export the layout as GDSII" in message


def test_truncated_gds_file(tmp_path):
    good = write_layout(tmp_path / "dot.gds", nm_per_unit=1.0)
    path = tmp_path / "cut.gds"
    path.write_bytes(good.read_bytes()[:40])
    with pytest.raises(GeometryError) as error:
        gates_from_gds(path, layers=[1], voltages={"layer1": 0.1}, depth_nm=D)
    assert "cannot read GDSII file" in one_line(error)


def test_truncated_gds_prints_nothing_of_its_own(tmp_path, capfd):
    """The reader library's complaint goes into our one-line error, not onto the terminal before it."""
    good = write_layout(tmp_path / "dot.gds", nm_per_unit=1.0)
    path = tmp_path / "half.gds"
    path.write_bytes(good.read_bytes()[: len(good.read_bytes()) // 2])
    with pytest.raises(GeometryError) as error:
        gates_from_gds(path, layers=[1], voltages={"layer1": 0.1}, depth_nm=D)
    out, err = capfd.readouterr()
    assert (out, err) == ("", "")
    assert "End of file" in one_line(error)


def test_not_a_gds_file_quotes_none_of_its_bytes(tmp_path):
    path = tmp_path / "secret.gds"
    path.write_bytes(b"password=hunter2\n")
    with pytest.raises(GeometryError) as error:
        gates_from_gds(path, layers=[1], voltages={"layer1": 0.1}, depth_nm=D)
    assert "hunter2" not in str(error.value) and "password" not in str(error.value)


@pytest.mark.parametrize("make, fragment", [
    (lambda p: p.mkdir(), "is a directory"),
    (lambda p: os.mkfifo(p), "is not a regular file"),
])
def test_gds_path_that_is_not_a_file(tmp_path, make, fragment):
    path = tmp_path / "layout.gds"
    make(path)
    with pytest.raises(GeometryError) as error:
        gates_from_gds(path, layers=[1], voltages={"layer1": 0.1}, depth_nm=D)
    assert fragment in one_line(error)


def test_missing_gds_file(tmp_path):
    with pytest.raises(GeometryError) as error:
        gates_from_gds(tmp_path / "nowhere.gds", layers=[1], voltages={"layer1": 0.1}, depth_nm=D)
    assert "does not exist" in one_line(error)


def test_gds_voltages_must_match_gates(tmp_path):
    path = write_layout(tmp_path / "dot.gds", nm_per_unit=1.0)
    with pytest.raises(GeometryError) as error:
        gates_from_gds(path, layers={1: "finger", 2: "plunger"}, voltages={"finger": 0.1}, depth_nm=D)
    message = one_line(error)
    assert "no voltage for 'plunger'" in message


def test_gds_unknown_cell_and_several_tops(tmp_path):
    library = gdstk.Library(unit=1e-9, precision=1e-12)
    library.new_cell("A").add(gdstk.rectangle((0, 0), (10, 10), layer=1))
    library.new_cell("B").add(gdstk.rectangle((0, 0), (10, 10), layer=1))
    path = tmp_path / "two.gds"
    library.write_gds(str(path))
    with pytest.raises(GeometryError) as error:
        gates_from_gds(path, layers=[1], voltages={"layer1": 0.1}, depth_nm=D)
    assert "2 top-level cells" in one_line(error) and "cell=" in str(error.value)
    with pytest.raises(GeometryError) as error:
        gates_from_gds(path, layers=[1], voltages={"layer1": 0.1}, depth_nm=D, cell="C")
    assert "cells present are 'A', 'B'" in one_line(error)


@pytest.mark.parametrize("voltage", [math.nan, math.inf, "high", -10.5, 55.0])
def test_bad_voltage(voltage):
    with pytest.raises(PotentialError) as error:
        Gate("plunger", rectangle(0, 0, 10, 10), voltage)
    message = one_line(error)
    assert "gate 'plunger'" in message and repr(voltage) in message


def test_bad_voltage_in_sweep():
    layout = split_gate_with_plunger()
    with pytest.raises(PotentialError) as error:
        layout.with_voltages(plunger=math.nan)
    assert "gate 'plunger'" in one_line(error) and "nan" in str(error.value)


@pytest.mark.parametrize("depth", [0.0, -40.0, math.nan, math.inf])
def test_bad_depth(depth):
    gate = Gate("g", rectangle(0, 0, 10, 10), 0.1)
    with pytest.raises(GeometryError) as error:
        GateLayout((gate,), depth_nm=depth)
    message = one_line(error)
    assert "depth_nm" in message and repr(depth) in message and "> 0" in message
    with pytest.raises(GeometryError):
        gate_potential([gate], 0.0, 0.0, depth_nm=depth)


def test_duplicate_gate_names():
    gate = Gate("g", rectangle(0, 0, 10, 10), 0.1)
    with pytest.raises(GeometryError) as error:
        GateLayout((gate, gate), depth_nm=D)
    assert "'g'" in one_line(error) and "unique" in str(error.value)


def test_unknown_gate_in_sweep():
    with pytest.raises(GeometryError) as error:
        split_gate_with_plunger().with_voltages(plunjer=0.2)
    message = one_line(error)
    assert "'plunjer'" in message and "'plunger'" in message


def test_non_finite_point():
    with pytest.raises(GeometryError) as error:
        split_gate_with_plunger().potential_V(np.array([0.0, np.nan]), 0.0)
    assert "point 1" in one_line(error)


def test_unknown_polygon_method():
    with pytest.raises(GeometryError) as error:
        solid_angle_polygon(0.0, 0.0, shape=rectangle(0, 0, 1, 1), depth_nm=D, method="fan")
    assert "'fan'" in one_line(error)


# --- plot ----------------------------------------------------------------------------------------


