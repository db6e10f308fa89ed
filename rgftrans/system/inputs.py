"""Checks of what the public entry points are given: the package's own one-line errors, never numpy's.

Every function that takes a model and energies from a user (transmission,
transmission matrix, LDOS, local quantities, scattering states, sweeps) runs
its arguments through these checks first:

* :func:`check_model`: a :class:`~rgftrans.system.device.TightBindingModel`, not
  something else that fails later with an AttributeError;
* :func:`check_energies`: real numbers in meV (not strings, complex numbers,
  sets or booleans), finite, and not absurdly far outside the model's
  spectrum (a unit slip: eV or J typed as meV);
* :func:`check_eta`: a finite broadening >= 0 (a negative one turns the
  retarded Green's function into the advanced one and gives T > N).
"""

from __future__ import annotations

import numbers

import numpy as np

from rgftrans.errors import EnergyError, RgftransError

__all__ = ["check_model", "check_energies", "check_energy", "check_eta", "spectral_bounds"]

#: Energies farther outside the model's spectrum than this many spectral widths are refused: no physics lives
#: there, and the lead solvers lose all precision (a unit slip, not a question).
FAR_OUTSIDE_WIDTHS = 1000.0


def _brief(value) -> str:
    text = repr(value)
    return text if len(text) <= 60 else text[:57] + "..."


def check_model(model, what: str = "model"):
    """``model`` if it is a TightBindingModel, else a one-line error saying where one comes from."""
    from rgftrans.system.device import TightBindingModel

    if not isinstance(model, TightBindingModel):
        raise RgftransError(f"{what} must be a TightBindingModel (from Device(...).discretise()), got "
                            f"{type(model).__name__}")
    return model


def spectral_bounds(model) -> tuple[float, float]:
    """An interval (meV) holding the spectrum of the device and of every lead (Gershgorin discs).

    Cached on the model.
    """
    cached = model.cache.spectral_bounds
    if cached is not None:
        return cached
    ham = model.hamiltonian
    centre = ham.diagonal().real
    radius = np.asarray(abs(ham).sum(axis=1)).ravel() - np.abs(ham.diagonal())
    lo, hi = float(np.min(centre - radius)), float(np.max(centre + radius))
    for lead in model.leads:
        c = np.real(np.diag(lead.h_cell))
        r = np.abs(lead.h_cell).sum(axis=1) - np.abs(np.diag(lead.h_cell)) + 2 * np.abs(lead.h_hop).sum(axis=1)
        lo, hi = min(lo, float(np.min(c - r))), max(hi, float(np.max(c + r)))
    model.cache.spectral_bounds = (lo, hi)
    return lo, hi


def check_energies(energies, model=None, *, what: str = "energies") -> np.ndarray:
    """Energies as a 1D float array (meV); one-line errors for anything else.

    Refused: strings, complex numbers, booleans, sets and other non-sequences,
    NaN or infinite values, an empty array, more than one dimension, and (with
    a model) energies more than :data:`FAR_OUTSIDE_WIDTHS` spectral widths
    outside the model's spectrum.
    """
    if isinstance(energies, (str, bytes, set, frozenset, dict)) or energies is None:
        raise EnergyError(f"{what} must be a number or a 1D sequence of numbers in meV, got "
                          f"{type(energies).__name__} {_brief(energies)}")
    try:
        arr = np.asarray(energies)
    except (TypeError, ValueError):
        raise EnergyError(f"{what} must be a number or a 1D sequence of numbers in meV, got "
                          f"{_brief(energies)}") from None
    if arr.dtype.kind == "c" or isinstance(energies, complex):
        raise EnergyError(f"{what} must be real (meV), got complex values such as {_brief(arr.ravel()[:1])}; "
                          "for a broadening use eta=")
    if arr.dtype.kind not in "iuf":
        raise EnergyError(f"{what} must be numbers in meV, got {arr.dtype.kind == 'b' and 'booleans' or 'values'} "
                          f"like {_brief(arr.ravel()[:1].tolist())}")
    arr = np.atleast_1d(arr.astype(float))
    if arr.ndim != 1 or arr.size == 0:
        raise EnergyError(f"{what} must be a non-empty 1D array in meV, got shape {arr.shape}")
    bad = ~np.isfinite(arr)
    if np.any(bad):
        raise EnergyError(
            f"{what} contain {np.count_nonzero(bad)} NaN or infinite value(s), first at index "
            f"{np.flatnonzero(bad)[0]}; give finite energies in meV"
        )
    if model is not None:
        lo, hi = spectral_bounds(model)
        width = max(hi - lo, model.energy_scale, 1e-12)
        far = (arr < lo - FAR_OUTSIDE_WIDTHS * width) | (arr > hi + FAR_OUTSIDE_WIDTHS * width)
        if np.any(far):
            e = arr[far][0]
            raise EnergyError(f"energy {e:.6g} meV lies far outside the model's spectrum [{lo:.6g}, {hi:.6g}] meV; "
                              "energies are in meV")
    return arr


def check_energy(energy, model=None) -> float:
    """One energy (meV) as a float, checked like :func:`check_energies`."""
    if np.ndim(energy) != 0:
        raise EnergyError(f"energy must be one number in meV, got {_brief(energy)}; loop over several")
    return float(check_energies(energy, model, what="energy")[0])


def check_eta(eta) -> float:
    """A broadening eta >= 0 (meV) as a float."""
    if isinstance(eta, bool) or not isinstance(eta, numbers.Real):
        raise EnergyError(f"eta must be a real number >= 0 in meV, got {_brief(eta)}")
    value = float(eta)
    if not np.isfinite(value) or value < 0:
        raise EnergyError(f"eta must be finite and >= 0 meV (a negative one gives the advanced Green's function), "
                          f"got {value!r}")
    return value
