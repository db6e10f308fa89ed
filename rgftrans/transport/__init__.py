"""Transport solvers: slicing into layers, recursive Green's functions, nested dissection, the sparse direct reference.

:func:`transmission` and :func:`transmission_matrix` (RGF over the layers of
:func:`slice_layers`, numba kernels; or nested dissection with multifrontal
elimination for wide devices, :func:`dissection_tree`; :func:`choose_solver`
picks the route predicted faster), :func:`transmission_direct` and
:func:`scattering_matrix` (sparse LU, the independent reference), and local
quantities (LDOS, lead-resolved densities, scattering states, bond currents), and disorder
ensembles (:func:`disorder_ensemble`, :func:`localisation_length`).
Builds on ``leads`` and ``system``.
"""

from rgftrans._lazy import lazy_exports

#: Public name -> module of this subpackage that defines it.
_EXPORTS = {
    "LayerBuffers": "buffers",
    "EndTerms": "buffers",
    "interface_green": "direct",
    "transmission_direct": "direct",
    "ScatteringMatrix": "direct",
    "LeadAmplitudes": "direct",
    "scattering_matrix": "direct",
    "LocalResult": "local",
    "local_quantities": "local",
    "ldos": "local",
    "ldos_result": "local",
    "LdosResult": "local",
    "ScatteringStates": "local",
    "scattering_states": "local",
    "bond_currents": "local",
    "TransmissionResult": "rgf",
    "transmission": "rgf",
    "layer_blocks": "rgf",
    "GreenBlocks": "rgf",
    "green_blocks": "rgf",
    "TransmissionMatrixResult": "rgf",
    "transmission_matrix": "rgf",
    "four_terminal_resistance": "rgf",
    "Slicing": "slicing",
    "slice_layers": "slicing",
    "default_slicing": "slicing",
    "SolverChoice": "choice",
    "choose_solver": "choice",
    "choose_ldos_solver": "choice",
    "DisorderSampler": "ensemble",
    "EnsembleResult": "ensemble",
    "disorder_ensemble": "ensemble",
    "localisation_length": "ensemble",
    "LocalisationFit": "ensemble",
    "DissectionTree": "dissection",
    "DissectionPlan": "dissection",
    "dissection_tree": "dissection",
    "dissection_plan": "dissection",
}
__all__ = list(_EXPORTS)
__getattr__, __dir__ = lazy_exports(__name__, _EXPORTS)
