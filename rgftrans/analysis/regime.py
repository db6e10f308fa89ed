"""Which regime a dot is in: is the coherent single-particle result the one a measurement will show?

rgftrans computes coherent, single-particle transport (Landauer): it has no
charging energy.  A dot whose charging energy exceeds both the width of its
levels and the thermal energy is in Coulomb blockade, and a measured trace is
a row of Coulomb peaks, not the transmission computed here.  This module
estimates the three energies from the layout and says which regime applies:

* mean level spacing of a 2D dot of area A,
  Δ = 2π ħ² / (g_s m* A) (the inverse of the 2D density of states
  g_s m* / (2π ħ²) times A; common textbook result, no source);
* charging energy of a conducting disk of the same area, E_C = e² / C with
  C = 8 ε ε_0 r, r = sqrt(A / π) (self-capacitance of an isolated thin disk in
  a uniform dielectric; common textbook estimate, no source; gates and
  reservoirs nearby raise C and lower E_C, so this is an upper bound);
* the typical level width Γ: the median width of the resonance poles of the
  open device in the energy window (:func:`rgftrans.spectra.poles.window_poles`).

Coulomb blockade dominates when E_C > Γ and E_C > k_B T, and only if the dot
is separated from its leads by tunnel contacts: a contact conducting more than
e²/h (resistance below h/e²) does not quantise the charge (e.g. L. P.
Kouwenhoven et al., in *Mesoscopic Electron Transport*, Kluwer 1997, from
memory).  The mean computed conductance between the first two leads over the
energy window tests the second condition: two contacts in series conduct less
than either, so a mean above e²/h means both are open.  Where blockade would
dominate, the coherent result describes an open dot only.

The dot's area is the device region's, or, for a device with a potential and
a Fermi energy, the area where the potential energy lies below E_F: the part
of it that no lead reaches if there is one (a closed dot), otherwise all of it
(an open dot: an upper bound on A, so Δ and E_C are lower bounds).
Energies in meV, lengths in nm, temperatures in K.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp
from scipy import constants
from scipy.sparse.csgraph import connected_components

from rgftrans.errors import RgftransError, ValidityWarning

__all__ = ["RegimeEstimate", "level_spacing_meV", "disk_charging_energy_meV", "dot_area_nm2",
           "typical_level_width_meV", "mean_conductance_g0", "regime_estimate"]

_MEV = 1e-3 * constants.e  # J per meV
_NM = 1e-9  # m per nm
#: Energies across the window at which the mean conductance between the first two leads is computed.
CONDUCTANCE_SAMPLES = 9
#: e²/h in units of 2e²/h: contacts conducting more than this do not quantise the dot's charge.
OPEN_CONTACT_G0 = 0.5


def _positive(value, what: str) -> float:
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise RgftransError(f"{what} must be a number, got {value!r}") from None
    if not (math.isfinite(v) and v > 0):
        raise RgftransError(f"{what} must be positive and finite, got {value!r}")
    return v


def level_spacing_meV(area_nm2: float, m_eff: float, *, spin_degeneracy: int = 2) -> float:
    """Mean level spacing Δ = 2π ħ² / (g_s m* A) of a 2D dot, meV.

    Examples
    --------
    GaAs, a 200 nm x 200 nm dot with spin-degenerate levels: π ħ² / (m* A).

    >>> round(level_spacing_meV(4e4, 0.067), 4)
    0.0893
    """
    area = _positive(area_nm2, "area_nm2") * _NM**2
    m = _positive(m_eff, "m_eff") * constants.m_e
    if spin_degeneracy not in (1, 2):
        raise RgftransError(f"spin_degeneracy must be 1 or 2, got {spin_degeneracy!r}")
    return 2 * math.pi * constants.hbar**2 / (spin_degeneracy * m * area) / _MEV


def disk_charging_energy_meV(area_nm2: float, eps_r: float) -> tuple[float, float]:
    """Charging energy e²/C of a disk of area A in a dielectric, with C = 8 ε ε_0 r.

    Returns
    -------
    (E_C in meV, C in F)
    """
    radius = math.sqrt(_positive(area_nm2, "area_nm2") / math.pi) * _NM
    capacitance = 8 * _positive(eps_r, "eps_r") * constants.epsilon_0 * radius
    return constants.e**2 / capacitance / _MEV, capacitance


def dot_area_nm2(model, *, site_area_nm2: float, fermi_energy: float | None = None) -> tuple[float, str]:
    """Area of the dot (nm²) and how it was found (see the module docstring).

    Parameters
    ----------
    model : TightBindingModel
        With ``potential_meV`` (models from :meth:`Device.discretise`).
    site_area_nm2 : float
        Area per lattice site (the unit cell's area over its basis sites).
    fermi_energy : float, optional, meV
        Without it, or without a potential, the whole device counts.
    """
    site_area = _positive(site_area_nm2, "site_area_nm2")
    u = model.potential_meV
    if fermi_energy is None or u is None or np.ptp(u) == 0.0:
        return model.n_sites * site_area, "device region"
    allowed = u < fermi_energy
    if not np.any(allowed):
        return model.n_sites * site_area, "device region (the whole device lies above E_F)"
    coo = model.hamiltonian.tocoo()
    rows, cols = coo.row // model.norbs, coo.col // model.norbs
    keep = (rows != cols) & allowed[rows] & allowed[cols]
    graph = sp.coo_matrix((np.ones(np.count_nonzero(keep)), (rows[keep], cols[keep])),
                          shape=(model.n_sites, model.n_sites))
    _, label = connected_components(graph, directed=False)
    label = np.where(allowed, label, -1)
    touched = {int(label[s]) for lead in model.leads for s in np.asarray(lead.interface) // model.norbs}
    closed = [c for c in np.unique(label[allowed]) if int(c) not in touched]
    if closed:
        sizes = [np.count_nonzero(label == c) for c in closed]
        return max(sizes) * site_area, "closed dot: the region below E_F that no lead reaches"
    return np.count_nonzero(allowed) * site_area, "open dot: all of the region below E_F (an upper bound)"


def typical_level_width_meV(poles) -> tuple[float | None, int]:
    """Median width (meV) of resonance poles ``(energy_meV, width_meV)``, and how many there were.

    Returns ``(None, 0)`` for no poles.
    """
    poles = np.asarray(poles, dtype=float).reshape(-1, 2)
    if not len(poles):
        return None, 0
    return float(np.median(poles[:, 1])), len(poles)


@dataclass(frozen=True)
class RegimeEstimate:
    """Energies that decide between coherent transport and Coulomb blockade, and the verdict in words.

    Attributes
    ----------
    area_nm2 : float, nm²
    area_source : str
        How the area was found.
    level_spacing_meV : float, meV
    charging_energy_meV : float, meV
        e²/C of a disk of the same area (an upper bound).
    capacitance_F : float, F
    level_width_meV : float or None, meV
        Median width of the resonances near the Fermi energy; None if not computed.
    n_widths : int
        Poles the width is the median of.
    temperature_K : float, K
        Lowest temperature of the run (0 without one).
    mean_conductance_g0 : float or None, 2e²/h
        Mean zero-temperature conductance between the first two leads over the
        energy window; None if not computed.
    coulomb_blockade : bool
        E_C exceeds Γ (when known) and k_B T, and the mean conductance (when
        known) is below e²/h.
    verdict : str
        One sentence saying which result to trust.
    """

    area_nm2: float
    area_source: str
    level_spacing_meV: float
    charging_energy_meV: float
    capacitance_F: float
    level_width_meV: float | None
    n_widths: int
    temperature_K: float
    mean_conductance_g0: float | None
    coulomb_blockade: bool
    verdict: str
    charging_source: str = "disk"

    def lines(self) -> list[str]:
        """Human-readable lines for ``rgftrans check`` and ``run``."""
        width = (f"{self.level_width_meV:.3g} meV (median of {self.n_widths} resonance(s) in the window)"
                 if self.level_width_meV is not None else "not computed")
        kT = constants.k * self.temperature_K / _MEV
        g = "" if self.mean_conductance_g0 is None else (f", mean conductance {self.mean_conductance_g0:.3g} "
                                                          "x 2e^2/h over the energy window")
        return [
            f"dot area {self.area_nm2:.4g} nm^2 ({self.area_source})",
            f"level spacing {self.level_spacing_meV:.3g} meV, charging energy "
            f"{'<= ' if self.charging_source == 'disk' else ''}{self.charging_energy_meV:.3g} meV "
            f"({self.charging_source}, C = {self.capacitance_F * 1e18:.3g} aF), level width {width}, kT = {kT:.3g} meV "
            f"at {self.temperature_K:g} K{g}",
            self.verdict,
        ]


def regime_estimate(device, model=None, *, fermi_energy: float | None = None, temperature_K: float = 0.0,
                    widths: bool = True, energy_window: tuple[float, float] | None = None,
                    area_nm2: float | None = None, poles=None, warn: bool = True,
                    charging_energy: tuple[float, float, str] | None = None) -> RegimeEstimate:
    """Estimate Δ, E_C and Γ of a dot and say whether Coulomb blockade would dominate a measurement.

    Parameters
    ----------
    device : Device
        Gives the material (m*, ε) and the lattice (area per site).
    model : TightBindingModel, optional
        ``device.discretise()`` if not given.
    fermi_energy : float, optional, meV
        Where the dot's region ends (the potential below E_F); without it the
        dot is the whole device.
    temperature_K : float
        Lowest temperature of interest (K).
    widths : bool
        Compute the typical level width from the resonance poles in the window
        (a few eigenvalue solves) and the mean conductance over the window
        (:data:`CONDUCTANCE_SAMPLES` energies).
    energy_window : (float, float), optional
        The energies of interest (meV); without it neither is computed.
    poles : (n, 2) array_like, optional
        :func:`rgftrans.spectra.poles.window_poles` of the window, if already at hand.
    area_nm2 : float, optional
        The dot's area if you know it better; overrides the estimate.
    warn : bool
        Issue the ValidityWarning below (the command line prints the verdict itself).
    charging_energy : (float, float, str), optional
        E_C (meV), C_Sigma (aF) and where they come from (e.g. the layout's electrostatics), instead of the
        disk's upper bound.

    Warns
    -----
    ValidityWarning
        When Coulomb blockade would dominate.
    """
    model = device.discretise() if model is None else model
    material = device.material_data
    lattice = device.lattice
    site_area = abs(float(np.linalg.det(lattice.vectors))) / len(lattice.basis)
    if area_nm2 is None:
        area, source = dot_area_nm2(model, site_area_nm2=site_area, fermi_energy=fermi_energy)
    else:
        area, source = _positive(area_nm2, "area_nm2"), "given"
    spacing = level_spacing_meV(area, material.m_eff)
    e_c, capacitance = disk_charging_energy_meV(area, material.eps_r)
    e_c_source = "disk"
    if charging_energy is not None:
        e_c, capacitance, e_c_source = float(charging_energy[0]), float(charging_energy[1]) * 1e-18, charging_energy[2]
    gamma, n_widths = (None, 0)
    if widths and energy_window is not None:
        if poles is None:
            from rgftrans.spectra.poles import window_poles

            poles = window_poles(model, energy_window)
        gamma, n_widths = typical_level_width_meV(poles)
    g_mean = None
    if widths and energy_window is not None and len(model.leads) >= 2:
        g_mean = mean_conductance_g0(model, energy_window)
    temp = float(temperature_K)
    kT = constants.k * temp / _MEV
    open_contacts = g_mean is not None and g_mean >= OPEN_CONTACT_G0
    blockade = e_c > kT and (gamma is None or e_c > gamma) and not open_contacts
    bound = "<= " if e_c_source == "disk" else "= "
    if blockade:
        against = f"the level width ({gamma:.3g} meV) and " if gamma is not None else ""
        verdict = (f"Coulomb blockade would dominate a measured trace: E_C {bound}{e_c:.3g} meV exceeds {against}kT "
                   f"({kT:.3g} meV at {temp:g} K) and the contacts conduct less than e^2/h; this coherent, "
                   "single-particle result describes the dot only when it is open (E_C << level width)")
        if warn:
            warnings.warn(verdict, ValidityWarning, stacklevel=2)
    elif open_contacts:
        verdict = (f"coherent regime: the mean conductance {g_mean:.3g} x 2e^2/h exceeds e^2/h, so the contacts are "
                   "open and the charge is not quantised; the coherent result applies")
    else:
        why = f"the level width {gamma:.3g} meV" if gamma is not None and gamma >= e_c else f"kT = {kT:.3g} meV"
        verdict = (f"coherent regime: {why} exceeds the charging energy ({bound}{e_c:.3g} meV), so charging "
                   "smears out and the coherent result applies")
    return RegimeEstimate(area_nm2=area, area_source=source, level_spacing_meV=spacing,
                          charging_energy_meV=e_c, capacitance_F=capacitance, level_width_meV=gamma,
                          n_widths=n_widths, temperature_K=temp, mean_conductance_g0=g_mean,
                          coulomb_blockade=blockade, verdict=verdict, charging_source=e_c_source)


def mean_conductance_g0(model, energy_window, *, samples: int = CONDUCTANCE_SAMPLES) -> float:
    """Mean zero-temperature conductance (2e²/h) from the first lead into the second over an energy window."""
    from rgftrans.transport.rgf import transmission_matrix

    energies = np.linspace(float(energy_window[0]), float(energy_window[1]), samples)
    with warnings.catch_warnings():  # threshold and resolution warnings belong to the real run, not this probe
        warnings.simplefilter("ignore")
        res = transmission_matrix(model, energies)
    return float(np.mean(res.conductance_matrix()[:, 1, 0] * -1.0))
