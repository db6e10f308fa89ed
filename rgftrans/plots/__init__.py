"""Figures: every function draws what it is handed and returns ``(fig, ax)``.

Axis labels are physical names with units (:func:`rgftrans.plots.style.axis_display`),
never config keys.  Reads result files through ``io``; computes no physics
itself (a contract in pyproject.toml forbids importing ``transport``,
``spectra`` or ``leads``): the dark-state figures draw results computed in
``analysis``.
"""

from rgftrans._lazy import lazy_exports

#: Public name -> module of this subpackage that defines it.
_EXPORTS = {
    "plot_device": "figures",
    "plot_transmission": "figures",
    "plot_map": "figures",
    "plot_currents": "figures",
    "site_current_vectors": "figures",
    "plot_result": "figures",
    "plot_gate_potential": "figures",
    "plot_width_track": "figures",
    "plot_track_on_map": "figures",
    "plot_bic_plane": "figures",
    "plot_fano_collapse": "figures",
    "plot_spectrum": "figures",
    "plot_waveguide_field": "figures",
    "DEVICE_SITES_SHOWN": "figures",
    "plot_fit": "fits",
    "plot_level_density": "spectra",
    "plot_lead_bands": "spectra",
}
__all__ = list(_EXPORTS)
__getattr__, __dir__ = lazy_exports(__name__, _EXPORTS)
