"""The device and its model: lattices, regions, materials, fields, devices, the photonic model.

A :class:`Device` (a region in nm, leads, a lattice, a material, a potential,
a field) is discretised into a :class:`TightBindingModel` (sparse Hamiltonian in
meV, lead cells and hoppings).  Everything here is pure description: no
transport is computed, no file is opened.  Layer: lowest but for ``errors``
and ``constants``.
"""

from rgftrans._lazy import lazy_exports

#: Public name -> module of this subpackage that defines it.
_EXPORTS = {
    "DeviceSize": "budget",
    "device_size": "budget",
    "available_memory_bytes": "budget",
    "free_disk_bytes": "budget",
    "RunEstimate": "budget",
    "run_estimate": "budget",
    "human_bytes": "budget",
    "human_seconds": "budget",
    "refuse_oversized_device": "budget",
    "Lead": "device",
    "Device": "device",
    "LeadModel": "device",
    "TightBindingModel": "device",
    "ModelCache": "device",
    "discretise": "device",
    "check_resolution": "device",
    "lead_index": "device",
    "MagneticField": "fields",
    "Disorder": "fields",
    "FLUX_PHASE_PER_T_NM2": "fields",
    "BOHR_MAGNETON_MEV_PER_T": "fields",
    "peierls_phase": "fields",
    "gauge_weight": "fields",
    "zeeman_matrix": "fields",
    "rashba_matrix": "fields",
    "PAULI": "fields",
    "BOUNDARY_TOLERANCE_NM": "geometry",
    "DEFAULT_DISK_SEGMENTS": "geometry",
    "Region": "geometry",
    "difference": "geometry",
    "disk": "geometry",
    "polygon": "geometry",
    "rectangle": "geometry",
    "union": "geometry",
    "check_model": "inputs",
    "check_energies": "inputs",
    "check_energy": "inputs",
    "check_eta": "inputs",
    "spectral_bounds": "inputs",
    "Lattice": "lattices",
    "square": "lattices",
    "honeycomb": "lattices",
    "triangular": "lattices",
    "CONDUCTANCE_QUANTUM_S": "materials",
    "MATERIALS": "materials",
    "Material": "materials",
    "conductance_g0": "materials",
    "conductance_S": "materials",
    "fermi_energy_meV": "materials",
    "fermi_wavelength_nm": "materials",
    "hopping_meV": "materials",
    "material": "materials",
    "LENGTH_UNITS": "photonic",
    "Dielectric": "photonic",
    "Port": "photonic",
    "Waveguide": "photonic",
    "PhotonicModel": "photonic",
    "MIN_POINTS_PER_WAVELENGTH": "photonic",
}
__all__ = list(_EXPORTS)
__getattr__, __dir__ = lazy_exports(__name__, _EXPORTS)
