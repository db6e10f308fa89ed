"""Gate electrostatics: the potential energy a layout of surface gates puts on the 2DEG.

:class:`GateLayout` (gates as polygons in nm with voltages in V, depth of the
2DEG) is callable as ``U(x, y)`` in meV and is given to a device as its
potential; GDSII layouts are read by :func:`gates_from_gds`.  The 2DEG's
screening of the gates (:func:`screen`, :class:`Heterostructure`; pinned or
frozen surface, T = 0 or Fermi-Dirac) gives the self-consistent potential
and density.  Builds on
``system`` (regions).
"""

from rgftrans._lazy import lazy_exports

#: Public name -> module of this subpackage that defines it.
_EXPORTS = {
    "Gate": "gates",
    "GateLayout": "gates",
    "gate_potential": "gates",
    "gates_from_gds": "gates",
    "POLYGON_METHODS": "gates",
    "solid_angle_polygon": "gates",
    "solid_angle_rectangle": "gates",
    "Heterostructure": "screening",
    "ScreenedPotential": "screening",
    "screen": "screening",
    "coulomb_constant_meV_nm": "screening",
    "SELF_TERM": "screening",
    "DEPLETED_FRACTION": "screening",
    "SurfaceKernels": "surface",
    "CapacitanceResult": "capacitance",
    "cell_weights": "capacitance",
    "electron_number": "capacitance",
    "gate_capacitances": "capacitance",
    "depletion_voltage": "screening",
    "frozen_gate_potential": "surface",
    "gate_nodes": "surface",
}
__all__ = list(_EXPORTS)
__getattr__, __dir__ = lazy_exports(__name__, _EXPORTS)
