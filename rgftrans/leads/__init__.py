"""Semi-infinite leads: their modes, surface Green's functions and self-energies.

:func:`lead_modes` (propagating and evanescent modes, cached), the Sancho-Rubio
decimation as an independent check, and the embedding of the leads into a
device (self-energies Σ(E) on the interface, the device energy with the
threshold shift) that both transport solvers use, and each lead's band
structure E_n(k) with its channel thresholds, group velocities and open
channels (module ``bands``).  Builds on ``system``.
"""

from rgftrans._lazy import lazy_exports

#: Public name -> module of this subpackage that defines it.
_EXPORTS = {
    "lead_self_energies": "embedding",
    "embedded_self_energy": "embedding",
    "device_energy": "embedding",
    "broadening": "embedding",
    "gamma_columns": "embedding",
    "warn_thresholds": "embedding",
    "LeadModes": "modes",
    "lead_modes": "modes",
    "surface_green_modes": "modes",
    "surface_green_decimation": "modes",
    "clear_lead_cache": "modes",
    "incoming_sources": "modes",
    "require_off_threshold": "modes",
    "outgoing_amplitudes": "modes",
    "LeadBands": "bands",
    "BandExtremum": "bands",
    "OpenChannels": "bands",
    "lead_bands": "bands",
    "channel_count": "bands",
    "open_channels": "bands",
}
__all__ = list(_EXPORTS)
__getattr__, __dir__ = lazy_exports(__name__, _EXPORTS)
