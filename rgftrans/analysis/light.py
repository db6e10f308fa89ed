"""Light in metal-walled waveguides: spectra, field maps and resonances, in GHz.

The waveguide is gridded into a tight-binding model in ``k0a_squared = (k0 a)^2`` by
:class:`rgftrans.system.photonic.PhotonicModel`; here the transport engine runs
on it and its results are converted back to the waveguide's own quantities:
frequencies and widths in GHz, Q factors, fields normalised to the incident
wave.  None of these result types says meV.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from rgftrans.spectra.poles import resonances
from rgftrans.errors import RgftransError
from rgftrans.system.photonic import PhotonicModel
from rgftrans.transport.local import scattering_states
from rgftrans.transport.rgf import transmission_matrix
from rgftrans.leads.embedding import lead_self_energies

__all__ = ["Spectrum", "FieldMap", "PhotonicResonance", "SpectralLine", "DarkMode", "waveguide_spectrum",
           "waveguide_field", "waveguide_resonances"]


@dataclass(frozen=True)
class Spectrum:
    """Power transmission and reflection of a waveguide over frequency.

    Attributes
    ----------
    frequencies_GHz : (n_f,) float
    matrix : (n_f, n_ports, n_ports) float
        ``matrix[f, out, in]``: power carried into port ``out`` per unit power sent
        in all open modes of port ``in``, summed over modes; the diagonal holds
        the reflection.
    n_open : (n_f, n_ports) int
        Propagating modes of each port.
    absorption : (n_f, n_ports) float
        Per input port: ``N_in - sum_out matrix[out, in]`` (zero without losses).
    port_names : tuple of str
    """

    frequencies_GHz: np.ndarray
    matrix: np.ndarray
    n_open: np.ndarray
    absorption: np.ndarray
    port_names: tuple


@dataclass(frozen=True, eq=False)
class FieldMap:
    """``E_z`` at the grid nodes for one incident mode, in units of the incident wave's peak amplitude.

    Attributes
    ----------
    frequency_GHz : float
    port, mode : int
        Where the wave comes from.
    field : (n_nodes,) complex
        ``E_z / max|E_z,incident|``.
    enhancement : float
        ``max |E_z|`` over the dielectric pieces (or the whole enclosure without any) over the incident peak.
    absorbed : float
        Fraction of the incident power absorbed (``2 k0a_squared sum tan(delta) |phi|^2``).
    """

    frequency_GHz: float
    port: int
    mode: int
    field: np.ndarray = field(repr=False)
    enhancement: float
    absorbed: float


@dataclass(frozen=True)
class PhotonicResonance:
    """A resonance of the open waveguide: complex frequency ``f = f' - i f''`` with ``Q = f' / (2 f'')``."""

    frequency_GHz: float
    width_GHz: float
    q_factor: float
    n_open: tuple
    k0a_squared: complex


@dataclass(frozen=True)
class SpectralLine:
    """A line seen in T(f): a Fano profile fitted over frequency.

    Attributes
    ----------
    frequency_GHz, width_GHz : float
        Centre and full width of the line.
    q_factor : float
        ``frequency / width``.
    fano_q : float
        Fano asymmetry parameter (dimensionless).
    """

    frequency_GHz: float
    width_GHz: float
    q_factor: float
    fano_q: float


@dataclass(frozen=True, eq=False)
class DarkMode:
    """A bound state in the continuum of a waveguide, found over a plane of two dielectric parameters.

    Attributes
    ----------
    parameter : (2,) float
        The two search parameters at the BIC (their own units: permittivity 1, shifts in the waveguide's unit).
    names : (str, str)
        Their parameter paths (``dielectric.<name>.permittivity`` / ``shift_x`` / ``shift_y``).
    frequency_GHz : float
        Frequency of the dark mode.
    k0a_squared : float
        The same as ``(k0 a)^2`` (dimensionless), the engine's energy variable.
    width_GHz : float
        Width of the pole found there (zero to round-off at a BIC).
    orders_of_magnitude : float
        ``log10`` of (typical width one grid step away / width at the BIC).
    exponent : float
        Power of ``width ~ |p - p*|^n`` (2 at a BIC).
    nearby_q : (4,) float
        Q factors (``f / width``) one grid step away (+p1, -p1, +p2, -p2).
    kind, explanation : str
        ``"accidental"`` or ``"symmetry-protected"``, and why it is dark, in words.
    mode_field : (n_nodes,) float
        ``|E_z|`` of the mode normalised to its maximum, on the grid of the waveguide rebuilt at ``parameter``.
    model : PhotonicModel
        That rebuilt waveguide.
    """

    parameter: np.ndarray
    names: tuple
    frequency_GHz: float
    k0a_squared: float
    width_GHz: float
    orders_of_magnitude: float
    exponent: float
    nearby_q: np.ndarray
    kind: str
    explanation: str
    mode_field: np.ndarray = field(repr=False)
    model: "PhotonicModel" = field(repr=False)




def waveguide_spectrum(pm: PhotonicModel, frequencies_GHz) -> Spectrum:
    """Power transmission, reflection, open modes and absorption of a waveguide at each frequency (RGF)."""
    freqs = np.atleast_1d(np.asarray(frequencies_GHz, dtype=float))
    if not np.all(np.isfinite(freqs)) or np.any(freqs <= 0):
        raise RgftransError("frequencies must be positive finite numbers in GHz")
    pm.check_resolution(freqs)
    values = pm.k0a_squared(freqs)
    if pm.is_lossy:
        parts = [transmission_matrix(pm.model_at(k), [k]) for k in values]
        tmat = np.concatenate([p.matrix for p in parts])
        n_open = np.concatenate([p.n_open for p in parts])
    else:
        res = transmission_matrix(pm.model, values)
        tmat, n_open = res.matrix, res.n_open
    absorption = n_open - tmat.sum(axis=1)
    names = tuple(lead.name for lead in pm.model.leads)
    return Spectrum(frequencies_GHz=freqs, matrix=tmat, n_open=n_open, absorption=absorption,
                    port_names=names)


def waveguide_field(pm: PhotonicModel, frequency_GHz: float, port: int | str = 0, mode: int = 0) -> FieldMap:
    """``E_z`` of the scattering state of one incident mode, normalised to the incident wave's peak."""
    q = pm.port_index(port)
    k0a_squared = float(pm.k0a_squared(frequency_GHz))
    model = pm.model_at(k0a_squared)
    states = scattering_states(model, k0a_squared, q)
    if mode >= states.wavefunctions.shape[1]:
        raise RgftransError(f"port {q} has {states.wavefunctions.shape[1]} open mode(s) at {frequency_GHz:g} "
                            f"GHz; mode {mode} is not one of them")
    phi = states.wavefunctions[:, mode]
    _, modes = lead_self_energies(model, k0a_squared, warn=False)
    m = modes[q]
    incident = np.abs(m.phi_in[:, mode]).max() / np.sqrt(abs(m.velocity_in[mode]))
    incident /= np.sqrt(pm.port_permittivity[q])  # phi = sqrt(eps) E in the port
    e_z = phi / np.sqrt(pm.permittivity.real) / incident
    inside = pm.permittivity.real > pm.permittivity.real.min() + 1e-12
    region = inside if inside.any() else np.ones(len(e_z), bool)
    absorbed = float(2 * k0a_squared * np.sum(pm.loss_tangent * np.abs(phi) ** 2))
    return FieldMap(frequency_GHz=float(frequency_GHz), port=q, mode=mode, field=e_z,
                    enhancement=float(np.abs(e_z[region]).max()), absorbed=absorbed)


def waveguide_resonances(pm: PhotonicModel, target_GHz: float, count: int = 3) -> list[PhotonicResonance]:
    """Poles of the open waveguide nearest ``target_GHz``, as complex frequencies with their Q."""
    if pm.is_lossy:
        raise RgftransError("resonances are computed for lossless dielectrics (set loss_tangent = 0); with "
                            "losses the Q of a mode is limited by absorption as well")
    out = []
    for r in resonances(pm.model, float(pm.k0a_squared(target_GHz)), count=count):
        z = complex(r.energy_meV, -0.5 * r.width_meV)
        f = complex(pm.frequency_GHz(z))
        width = -2 * f.imag
        out.append(PhotonicResonance(frequency_GHz=f.real, width_GHz=width,
                                     q_factor=f.real / width if width > 0 else np.inf, n_open=r.n_open, k0a_squared=z))
    return out
