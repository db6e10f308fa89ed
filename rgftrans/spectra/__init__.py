"""Poles and eigenstates: resonance poles of the open device and eigenvalues of any matrix near a target.

One helper, :func:`eigenvalues_near` (module ``eigen``), answers "the eigenvalues
nearest E" for every caller: dense below :data:`DENSE_BELOW` rows, shift-invert
ARPACK above, the same answer either way, and a one-line
:class:`rgftrans.errors.EigenSolveFailed` when the iterations do not converge.
On it, the pole solver (module ``poles``): :class:`Resonance`,
:func:`effective_hamiltonian` (``H + Sigma(E)``), :func:`resonances`
(self-consistent in ``Re z``; a model without leads gives its closed levels),
:func:`follow_pole` and :func:`window_poles`.  Sits between ``transport``
and ``analysis`` and uses only the layers below (``leads`` for the
self-energies, ``system`` for the model); the searches that use these poles
(dark states, BICs, resolution checks) are ``analysis``.

The closed system (module ``closed``): :func:`closed_levels` gives the levels
and normalised states of ``H`` without its leads, or of a region cut out of
it, near a target or the lowest ones, as :class:`ClosedLevels`.  How a
resonance's width splits between the leads (module ``widths``):
:func:`partial_widths` (``Gamma_p = <psi|Gamma_p|psi>``, adding up to the pole
width) as :class:`PartialWidths`, with tunnel rates ``Gamma_p / hbar``
(:func:`tunnel_rates_per_s`, :func:`tunnel_rate_per_s`).
"""

from rgftrans._lazy import lazy_exports

#: Public name -> module of this subpackage that defines it.
_EXPORTS = {
    "DENSE_BELOW": "eigen",
    "eigenvalues_near": "eigen",
    "Resonance": "poles",
    "effective_hamiltonian": "poles",
    "resonances": "poles",
    "follow_pole": "poles",
    "window_poles": "poles",
    "POLE_TOL": "poles",
    "ClosedLevels": "closed",
    "closed_levels": "closed",
    "PartialWidths": "widths",
    "partial_widths": "widths",
    "tunnel_rates_per_s": "widths",
    "tunnel_rate_per_s": "widths",
}
__all__ = list(_EXPORTS)
__getattr__, __dir__ = lazy_exports(__name__, _EXPORTS)
