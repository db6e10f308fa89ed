"""rgftrans: tight-binding quantum transport by recursive Green's functions.

The pipeline, one subpackage per step; each imports only from those above it
in this list (a contract checked by the test suite):

``rgftrans.system``
    Describe a device: :func:`rectangle`, :func:`disk`, :func:`polygon` (regions
    in nm), :func:`square`, :func:`honeycomb` (lattices), :func:`material`
    (GaAs, InAs, ...), :class:`Lead`, :class:`Device`, and ``Device.discretise()``
    giving a :class:`TightBindingModel` (meV).  Also the waveguide model for light.
``rgftrans.electrostatics``
    Surface gates: :class:`GateLayout` (voltages in V) as a device's potential.
``rgftrans.leads``
    Lead modes, surface Green's functions and self-energies; band structures
    (:func:`lead_bands`).
``rgftrans.transport``
    :func:`transmission`, :func:`transmission_matrix` (RGF for narrow devices,
    nested dissection for wide ones; :func:`choose_solver` says which and why),
    :func:`ldos` and the other local quantities, and the sparse direct reference solver.
``rgftrans.spectra``
    Resonance poles (:func:`resonances`) and their widths per lead
    (:func:`partial_widths`), closed-system levels (:func:`closed_levels`) and
    eigenvalues near an energy.
``rgftrans.analysis``
    Temperature (:func:`thermal_conductance`), the regime estimate, resolution
    checks, Fano fits and the search for bound states in the continuum.
``rgftrans.io``
    Files: TOML run configs (:func:`load_config`), HDF5 result files
    (:func:`read_result`), sweeps (:func:`run_sweep`), measured traces and fits.
``rgftrans.plots``
    Figures with physical axis labels.
``rgftrans.cli``
    The ``rgftrans`` command (check, run, info, plot, export, darkstates, compare, waveguide).

Everyday names are available here directly::

    import numpy as np
    import rgftrans as rt

    device = rt.Device(rt.rectangle(0, 0, 300, 200),
                       [rt.Lead("source", "left", (120, 180)), rt.Lead("drain", "right", (24, 60))],
                       lattice=rt.square(4.0), material="GaAs")
    result = rt.transmission(device.discretise(), np.linspace(2, 10, 401))

Units everywhere: nm, meV, T, K, V; conductance in 2e²/h and in S.  Errors
are one-line :class:`RgftransError` subclasses (:mod:`rgftrans.errors`);
constants come from CODATA (:mod:`rgftrans.constants`).
"""

__version__ = "0.1.0"

from rgftrans._lazy import lazy_exports  # noqa: E402  (after __version__, which the store imports)

#: Everyday name -> the module that defines it (imported on first use).
_EXPORTS = {
    # system
    "rectangle": "system.geometry", "disk": "system.geometry", "polygon": "system.geometry",
    "Region": "system.geometry",
    "square": "system.lattices", "honeycomb": "system.lattices", "triangular": "system.lattices",
    "material": "system.materials", "Material": "system.materials",
    "MagneticField": "system.fields", "Disorder": "system.fields",
    "Lead": "system.device", "Device": "system.device", "TightBindingModel": "system.device",
    # electrostatics
    "Gate": "electrostatics.gates", "GateLayout": "electrostatics.gates",
    # transport
    "transmission": "transport.rgf", "transmission_matrix": "transport.rgf",
    "four_terminal_resistance": "transport.rgf", "choose_solver": "transport.choice",
    "ldos": "transport.local", "local_quantities": "transport.local", "scattering_states": "transport.local",
    "bond_currents": "transport.local",
    "transmission_direct": "transport.direct", "scattering_matrix": "transport.direct",
    "disorder_ensemble": "transport.ensemble", "DisorderSampler": "transport.ensemble",
    "localisation_length": "transport.ensemble",
    # analysis
    "thermal_conductance": "analysis.thermal", "landauer_current": "analysis.thermal",
    "regime_estimate": "analysis.regime", "resonances": "spectra.poles",
    # spectra and leads
    "closed_levels": "spectra.closed", "partial_widths": "spectra.widths", "lead_bands": "leads.bands",
    # io
    "load_config": "io.config", "read_result": "io.store", "run_sweep": "io.sweeps",
    # errors
    "RgftransError": "errors", "ComputationFailed": "errors",
}
__all__ = ["__version__", *_EXPORTS]
__getattr__, __dir__ = lazy_exports(__name__, _EXPORTS)
