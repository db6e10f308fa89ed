"""What the computed transport means: temperature, regime, resolution, resonances and dark states.

Thermal averages and bias currents, the regime estimate (coherent or Coulomb
blockade), energy-grid resolution checks and refinement, Fano fits, the
search for bound states in the continuum along one parameter or over a
plane, and the data of a Fano line closing at one (``fano_collapse``).  Everything takes models or builders of models
and returns results; nothing here opens a file (reading and writing stored
sweeps is ``io``).  Builds on ``spectra`` (the poles) and ``transport``.
"""

from rgftrans._lazy import lazy_exports

#: Public name -> module of this subpackage that defines it.
_EXPORTS = {
    "ChargingDot": "charging",
    "DoubleDot": "charging",
    "SequentialResult": "charging",
    "steady_state": "charging",
    "stability_map": "charging",
    "sequential_current": "charging",
    "sequential_conductance": "charging",
    "blockade_regime": "charging",
    "CouplingResiduals": "bic2d",
    "coupling_residuals": "bic2d",
    "Bic2D": "bic2d",
    "locate_bic_2d": "bic2d",
    "explain": "bic2d",
    "GridSearch": "bic2d",
    "search_grid": "bic2d",
    "plane_seeds": "bic2d",
    "CouplingDiagnostics": "darkstates",
    "coupling_diagnostics": "darkstates",
    "FanoFit": "darkstates",
    "fano_profile": "darkstates",
    "fit_fano": "darkstates",
    "find_resonances": "darkstates",
    "Track": "darkstates",
    "track_resonance": "darkstates",
    "BicLocation": "darkstates",
    "locate_bic": "darkstates",
    "BIC_RTOL_FLOOR": "darkstates",
    "inside_window": "darkstates",
    "follow_at": "darkstates",
    "progress_bar": "darkstates",
    "report_beside": "darkstates",
    "FanoCollapse": "darkstates",
    "fano_collapse": "darkstates",
    "Spectrum": "light",
    "FieldMap": "light",
    "PhotonicResonance": "light",
    "SpectralLine": "light",
    "DarkMode": "light",
    "waveguide_spectrum": "light",
    "waveguide_field": "light",
    "waveguide_resonances": "light",
    "RegimeEstimate": "regime",
    "level_spacing_meV": "regime",
    "disk_charging_energy_meV": "regime",
    "dot_area_nm2": "regime",
    "typical_level_width_meV": "regime",
    "mean_conductance_g0": "regime",
    "regime_estimate": "regime",
    "MIN_POINTS_PER_WIDTH": "resolution",
    "SPIKE_JUMP": "resolution",
    "RefinedSampling": "resolution",
    "refine": "resolution",
    "refined_transmission": "resolution",
    "sharp_features": "resolution",
    "warn_energies_outside_leads": "resolution",
    "warn_sharp_features": "resolution",
    "warn_unresolved_resonances": "resolution",
    "thermal_average": "thermal",
    "BOLTZMANN_MEV_PER_K": "thermal",
    "CurrentResult": "thermal",
    "ThermalConductanceResult": "thermal",
    "conductance_on_grid": "thermal",
    "warn_grid_for_temperatures": "thermal",
    "fermi": "thermal",
    "fermi_window": "thermal",
    "landauer_current": "thermal",
    "thermal_conductance": "thermal",
    "thermal_energy_meV": "thermal",
}
__all__ = list(_EXPORTS)
__getattr__, __dir__ = lazy_exports(__name__, _EXPORTS)
