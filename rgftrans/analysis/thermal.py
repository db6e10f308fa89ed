"""Temperature: the Fermi window, thermally averaged conductance and the Landauer current.

* :func:`thermal_energy_meV`: k_B T in meV;
* :func:`fermi` and :func:`fermi_window`: f(E) and the thermal window -df/dE;
* :func:`thermal_conductance`: G(mu, T) = (g_s / 2) ∫ T(E) (-df/dE) dE in units
  of 2e²/h, returned as a :class:`ThermalConductanceResult`;
* :func:`landauer_current`: I = (g_s e/h) ∫ T(E) [f_source(E) - f_drain(E)] dE in
  amperes at finite bias, returned as a :class:`CurrentResult`.

g_s is the spin degeneracy of the model: 2 for a spinless model (T per spin),
1 when the spin orbitals are explicit (T counts both spins).

How the integrals are done
--------------------------
The transmission is known only at the grid energies.  Both integrals take it
as the piecewise-linear interpolant T_lin(E) of those samples (and as zero
outside the grid) and integrate T_lin against the *exact* Fermi functions:

* the conductance in closed form, cell by cell (the zeroth and first moments
  of -df/dE over a cell are elementary: logistic and softplus functions);
* the current by Gauss-Legendre quadrature on pieces no longer than k_B T
  between the grid nodes, applied only to the thermal correction f - Θ near
  each contact's chemical potential; the zero-temperature part (an integral of
  T_lin between the two chemical potentials) is done exactly.

The only quadrature error left is therefore the interpolation error of
T(E) between the samples, |T - T_lin| <= h² max|T''| / 8 on a cell of width h:
the Fermi window itself is never under-resolved, k_B T may be far below the
grid spacing, and T -> 0 goes continuously to T_lin(mu).  Constant or linear
transmission is integrated exactly.

Units: energies and chemical potentials in meV, temperature in K, bias in V,
current in A, conductance in 2e²/h and S.  k_B, e and h come
from :mod:`scipy.constants` (CODATA; e and h exact in the 2019 SI).

References
----------
S. Datta, *Electronic Transport in Mesoscopic Systems* (Cambridge, 1995),
ch. 2: the Landauer formula at finite temperature and bias.
"""

from __future__ import annotations

import reprlib
import warnings
from dataclasses import dataclass

import numpy as np
from scipy.special import expit

from rgftrans.constants import BOLTZMANN_MEV_PER_K, THERMAL_CUTOFF_KT
from rgftrans.errors import EnergyError, ResolutionWarning, RgftransError
from rgftrans.system.materials import CONDUCTANCE_QUANTUM_S, conductance_g0

__all__ = [
    "thermal_average",
    "BOLTZMANN_MEV_PER_K",
    "CurrentResult",
    "ThermalConductanceResult",
    "conductance_on_grid",
    "warn_grid_for_temperatures",
    "fermi",
    "fermi_window",
    "landauer_current",
    "thermal_conductance",
    "thermal_energy_meV",
]


# --- resolution thresholds (ResolutionWarning) -----------------------------------------------
# Half-width of the thermal window, in k_B T, that the grid must cover.  The
# weight of -df/dE beyond |E - mu| > n k_B T is 2 / (1 + e^n): 4e-9 at n = 20,
# below the 1e-8 to which transmissions are usually trusted; at 40 k_B T it is
# 8e-18, which is where the integrals below stop evaluating the window.
WINDOW_HALF_WIDTH_KT = 20.0
# Largest grid spacing, in k_B T, accepted inside that window.  The window is
# integrated exactly, so this is about sampling T(E): thermal smearing removes
# structure narrower than ~k_B T but keeps what is wider, and the linear
# interpolant of a feature as sharp as the window itself (height 1/(4 kT),
# curvature 1/(8 kT³) at its peak) is off by (h / kT)² / 16 of its height --
# 1.6 % at h = kT/2, 6 % at h = kT.  Coarser grids therefore miss structure
# that survives at this temperature.  (A plain trapezoid rule on T (-f') would
# need h <= kT/2 for the window alone: on a uniform grid it errs by
# 8π² (kT/h) exp(-2π² kT/h) -- poles of -f' at ±iπ kT, Poisson summation --
# i.e. 1e-15 at kT/2, 2e-7 at kT, 2e-3 at 2 kT, and on a non-uniform grid it is
# only second order; integrating the window exactly removes that error.)
MAX_SPACING_KT = 0.5
# Current: Gauss-Legendre nodes per piece and the longest piece, in k_B T.  f - Θ
# is analytic on each piece with poles at distance π k_B T, so an 8-point rule
# on a piece of length k_B T errs by ~ρ^-16 with ρ ≈ 2π + sqrt(4π² + 1) ≈ 12.6,
# i.e. ~1e-18.
_GAUSS_NODES = 8
_PIECE_KT = 1.0
# Cells narrower than this many k_B T use the product form of the window
# weight, wider ones the difference of two Fermi functions (both exact; each is
# free of cancellation on its side of the switch).
_NARROW_CELL_KT = 2.0

_MEV_PER_EV = 1e3  # e * 1 V = 1000 meV


# --- validation ----------------------------------------------------------------------------


def _brief(value) -> str:
    """A short one-line repr of a bad argument, for error messages."""
    return " ".join(reprlib.repr(value).split())


def _check_temperature(temperature_K) -> float:
    """A finite, non-negative temperature in K, or RgftransError."""
    try:
        value = float(temperature_K)
    except (TypeError, ValueError):
        raise RgftransError(
            f"temperature_K must be a single number in kelvin, got {_brief(temperature_K)}; pass e.g. 4.2"
        ) from None
    if not np.isfinite(value) or value < 0.0:
        raise RgftransError(
            f"temperature_K must be finite and >= 0 K, got {value!r}; pass the absolute temperature in kelvin"
        )
    return value


def _check_grid(energies, transmission) -> tuple[np.ndarray, np.ndarray]:
    """Energies (strictly increasing, finite, >= 2 points) and a matching finite transmission."""
    try:
        e = np.asarray(energies, dtype=float)
    except (TypeError, ValueError):
        raise EnergyError(f"energies must be a 1D array of numbers in meV, got {_brief(energies)}") from None
    if e.ndim != 1 or e.size < 2:
        raise EnergyError(
            f"energies must be a 1D array of at least 2 energies in meV, got shape {e.shape}; "
            "give the grid on which the transmission was computed"
        )
    bad = ~np.isfinite(e)
    if np.any(bad):
        k = int(np.flatnonzero(bad)[0])
        raise EnergyError(
            f"energies contain {np.count_nonzero(bad)} NaN or infinite value(s), first energies[{k}] = "
            f"{float(e[k])!r}; give finite energies in meV"
        )
    step = np.diff(e)
    if np.any(step == 0.0):
        k = int(np.flatnonzero(step == 0.0)[0])
        raise EnergyError(
            f"energies repeat a value: energies[{k}] = energies[{k + 1}] = {float(e[k])!r} meV; "
            "remove the duplicate (and its transmission)"
        )
    if np.any(step < 0.0):
        k = int(np.flatnonzero(step < 0.0)[0])
        raise EnergyError(
            f"energies must increase, but energies[{k}] = {float(e[k])!r} > energies[{k + 1}] = "
            f"{float(e[k + 1])!r} meV; sort them with order = np.argsort(energies) and reorder the "
            "transmission the same way"
        )
    if np.iscomplexobj(transmission):
        raise RgftransError("transmission must be real, got a complex array; pass its real part (T is real)")
    try:
        t = np.asarray(transmission, dtype=float)
    except (TypeError, ValueError):
        raise RgftransError(f"transmission must be an array of numbers, got {_brief(transmission)}") from None
    if t.shape != e.shape:
        raise RgftransError(
            f"transmission has shape {t.shape} but energies has shape {e.shape}; "
            "give one transmission value per energy"
        )
    bad = ~np.isfinite(t)
    if np.any(bad):
        k = int(np.flatnonzero(bad)[0])
        raise RgftransError(
            f"transmission contains {np.count_nonzero(bad)} NaN or infinite value(s), first at energy "
            f"{float(e[k])!r} meV (index {k}); recompute those points or drop them together with their energies"
        )
    return e, t


def _check_mu(mu) -> np.ndarray:
    try:
        m = np.asarray(mu, dtype=float)
    except (TypeError, ValueError):
        raise EnergyError(
            f"mu must be a number or an array of chemical potentials in meV, got {_brief(mu)}"
        ) from None
    bad = ~np.isfinite(m)
    if np.any(bad):
        raise EnergyError(
            f"mu contains {np.count_nonzero(bad)} NaN or infinite value(s), e.g. {float(m[bad].flat[0])!r}; "
            "give finite chemical potentials in meV"
        )
    return m


# --- the Fermi function and its window ------------------------------------------------------


def thermal_energy_meV(temperature_K) -> float:
    """k_B T in meV (k_B from scipy.constants).

    >>> round(thermal_energy_meV(1.0) * 1e3, 6)   # µeV at 1 K
    86.173333
    """
    return BOLTZMANN_MEV_PER_K * _check_temperature(temperature_K)


def fermi(energy, mu, temperature_K):
    """Fermi-Dirac occupation f(E) = 1 / (1 + exp((E - mu) / k_B T)).

    Parameters
    ----------
    energy, mu : float or ndarray, meV
        Broadcast against each other.
    temperature_K : float, K
        At 0 K, f is the step Θ(mu - E) with f = 1/2 at E = mu.

    Returns
    -------
    f : float or ndarray
        Between 0 and 1, never overflowing (evaluated as a logistic function).

    >>> float(fermi(0.0, 0.0, 4.2)), float(fermi(1.0, 0.0, 0.0))
    (0.5, 0.0)
    """
    kT = thermal_energy_meV(temperature_K)
    de = np.subtract(energy, mu, dtype=float)
    if kT == 0.0:
        return 0.5 * (1.0 - np.sign(de))
    return expit(-de / kT)


def fermi_window(energy, mu, temperature_K):
    """Thermal window -df/dE = 1 / (4 k_B T cosh²((E - mu) / 2 k_B T)) in 1/meV.

    Evaluated as e^{-|x|} / (k_B T (1 + e^{-|x|})²) with x = (E - mu)/k_B T, which
    neither overflows nor loses precision for large |x|.  It integrates to 1,
    peaks at 1/(4 k_B T) and has full width 4 ln(1 + √2) k_B T at half maximum.

    Parameters
    ----------
    energy, mu : float or ndarray, meV
    temperature_K : float, K
        Must be positive: at 0 K the window is a delta function.

    Returns
    -------
    window : float or ndarray, 1/meV
    """
    kT = thermal_energy_meV(temperature_K)
    if kT == 0.0:
        raise RgftransError(
            "fermi_window needs temperature_K > 0, got 0.0: at zero temperature -df/dE is a delta function; "
            "evaluate the transmission at mu instead"
        )
    x = np.abs(np.subtract(energy, mu, dtype=float)) / kT
    q = np.exp(-x)
    return q / (kT * (1.0 + q) ** 2)


# --- closed-form cell integrals of the window ---------------------------------------------------


def _sech_half(x):
    """sech(x/2) = 2 e^{-|x|/2} / (1 + e^{-|x|}), finite for any x."""
    q = np.exp(-0.5 * np.abs(x))
    return 2.0 * q / (1.0 + q * q)


def _softplus(x):
    """log(1 + e^x) without overflow."""
    return np.logaddexp(0.0, x)


def _cell_weight(u, v, d):
    """W = ∫_u^v w(x) dx = f(u) - f(v) for the window w(x) = 1/(4 cosh²(x/2)), f(x) = 1/(1 + e^x).

    u < v are the cell ends in units of k_B T measured from mu, d = v - u
    (passed separately, computed from the energy difference, so that it keeps
    full relative precision).  Narrow cells use sinh(d/2) / (2 cosh(u/2) cosh(v/2)),
    which has no cancellation; wide ones the difference of the two occupations
    taken on the side of mu where both are small.
    """
    narrow = d <= _NARROW_CELL_KT
    dn = np.where(narrow, d, 0.0)
    w_narrow = 0.5 * np.sinh(0.5 * dn) * _sech_half(u) * _sech_half(v)
    below = u + v < 0.0
    w_wide = np.where(below, expit(v) - expit(u), expit(-u) - expit(-v))
    return np.where(narrow, w_narrow, w_wide)


def _cell_rising_moment(u, v, d):
    """b = ∫_u^v ((x - u)/d) w(x) dx for a cell below mu (u + v <= 0).

    By parts, b = expit(v) - S/d with S = ∫_u^v expit(x) dx = softplus(v) - softplus(u).
    For narrow cells S = log1p(expit(u) expm1(d)), exact without cancellation;
    deep below mu both terms are of order e^v, so the difference stays
    accurate in absolute terms.
    """
    narrow = d <= 1.0
    dn = np.where(narrow, d, 0.0)
    s_narrow = np.log1p(expit(u) * np.expm1(dn))
    s_wide = _softplus(v) - _softplus(u)
    s = np.where(narrow, s_narrow, s_wide)
    return expit(v) - s / d


def _window_weights(energies, mu, kT):
    """Per-cell weights (W_i, b_i) of the window centred at mu on the grid cells.

    ∫_{E_i}^{E_i+1} T_lin (-f') dE = T_i W_i + (T_{i+1} - T_i) b_i, where
    W_i = ∫ (-f') over the cell and b_i = ∫ ((E - E_i)/h_i) (-f') over the
    cell.  Cells above mu use the reflection x -> -x of the window:
    b(u, v) = W(u, v) - b(-v, -u).
    """
    u = (energies[:-1] - mu) / kT
    v = (energies[1:] - mu) / kT
    d = np.diff(energies) / kT
    weight = _cell_weight(u, v, d)
    below = u + v <= 0.0
    # Evaluate the rising moment only where it is accurate: below mu directly,
    # above mu through the mirrored cell.
    uu = np.where(below, u, -v)
    vv = np.where(below, v, -u)
    b = _cell_rising_moment(uu, vv, d)
    rising = np.where(below, b, weight - b)
    return weight, rising


def _window_slice(energies, mu, kT, half_width_kt):
    """Cell indices [i0, i1) of the cells that overlap mu ± half_width_kt k_B T."""
    i0 = max(int(np.searchsorted(energies, mu - half_width_kt * kT, side="right")) - 1, 0)
    i1 = min(int(np.searchsorted(energies, mu + half_width_kt * kT, side="left")), energies.size - 1)
    return i0, max(i1, i0)


# --- warnings ----------------------------------------------------------------------------------


def _weight_outside(energies, mu, kT):
    """Weight of -df/dE (centred at each mu) lying outside [E_0, E_N]: 1 - f(E_0) + f(E_N)."""
    return expit((energies[0] - mu) / kT) + expit(-(energies[-1] - mu) / kT)


def _warn_coverage(energies, centres, kT, temperature_K, what):
    """ResolutionWarning if the grid misses part of mu ± 20 k_B T for any of the window centres."""
    half = WINDOW_HALF_WIDTH_KT * kT
    short = (energies[0] > centres - half) | (energies[-1] < centres + half)
    if not np.any(short):
        return
    missing = _weight_outside(energies, centres[short], kT)
    worst = int(np.argmax(missing))
    warnings.warn(
        f"energy grid [{energies[0]:.6g}, {energies[-1]:.6g}] meV does not cover {what} ± 20 kT "
        f"(kT = {kT:.6g} meV at {temperature_K:.6g} K) for {np.count_nonzero(short)} of {centres.size} value(s), "
        f"e.g. {centres[short][worst]:.6g} meV: up to {missing[worst]:.3g} of the Fermi window's weight lies "
        f"outside the grid and is dropped (transmission taken as 0 there); extend the grid to "
        f"[{centres.min() - half:.6g}, {centres.max() + half:.6g}] meV",
        ResolutionWarning,
        stacklevel=3,
    )


def _warn_spacing(energies, centres, kT, temperature_K, what):
    """ResolutionWarning if a cell wider than kT/2 overlaps mu ± 20 k_B T for any window centre."""
    h = np.diff(energies)
    limit = MAX_SPACING_KT * kT
    coarse = h > limit
    if not np.any(coarse):
        return
    # Count coarse cells in each window's cell range with a cumulative sum.
    n_coarse = np.concatenate([[0], np.cumsum(coarse)])
    half = WINDOW_HALF_WIDTH_KT * kT
    i0 = np.clip(np.searchsorted(energies, centres - half, side="right") - 1, 0, h.size)
    i1 = np.clip(np.searchsorted(energies, centres + half, side="left"), 0, h.size)
    i1 = np.maximum(i1, i0)
    hit = n_coarse[i1] > n_coarse[i0]
    if not np.any(hit):
        return
    worst = max(float(h[a:b][coarse[a:b]].max()) for a, b in zip(i0[hit], i1[hit]))
    warnings.warn(
        f"energy grid spacing reaches {worst:.3g} meV inside the thermal window {what} ± 20 kT "
        f"(kT = {kT:.6g} meV at {temperature_K:.6g} K) for {np.count_nonzero(hit)} of {centres.size} value(s), "
        f"coarser than kT/2 = {limit:.3g} meV, so transmission structure that survives thermal smearing is not "
        f"resolved; refine the grid to spacing <= {limit:.3g} meV there",
        ResolutionWarning,
        stacklevel=3,
    )


# --- thermal conductance --------------------------------------------------------------------------


@dataclass(frozen=True, eq=False)
class ThermalConductanceResult:
    """Thermally averaged linear-response conductance G(mu, T).

    Attributes
    ----------
    mu : ndarray, meV
        Chemical potentials, in the shape they were given.
    temperature_K : float, K
    conductance_g0 : ndarray
        G = (g_s / 2) ∫ T(E) (-df/dE) dE in units of 2e²/h, same shape as ``mu``.
    window_weight : ndarray
        Weight of -df/dE inside the energy grid, same shape as ``mu``: 1 when the
        grid covers the window (to 8e-18 at ± 40 k_B T), less when part of it was
        cut off.  At 0 K it is 1 for mu on the grid and 0 off it.
    """

    mu: np.ndarray
    temperature_K: float
    conductance_g0: np.ndarray
    window_weight: np.ndarray

    @property
    def kT_meV(self) -> float:
        """k_B T in meV."""
        return BOLTZMANN_MEV_PER_K * self.temperature_K

    @property
    def conductance_S(self) -> np.ndarray:
        """G in siemens (2e²/h from scipy.constants)."""
        return self.conductance_g0 * CONDUCTANCE_QUANTUM_S


def thermal_conductance(energies, transmission, mu, temperature_K, *, spin_degeneracy: int = 2,
                        check: bool = True):
    """Linear-response conductance at temperature T, G(mu, T) = (g_s e²/h) ∫ T(E) (-df/dE) dE.

    The transmission is taken as the piecewise-linear interpolant of its
    samples (zero outside the grid) and integrated in closed form against the
    exact window -df/dE: on a cell [E_i, E_i+1] of width h_i,
    ∫ T_lin (-f') dE = T_i W_i + (T_i+1 - T_i) b_i with
    W_i = f(E_i) - f(E_i+1) and b_i = ∫ ((E - E_i)/h_i)(-f') dE, elementary in
    logistic and softplus functions.  The error is that of the linear
    interpolation of T(E) alone, whatever k_B T is relative to the grid.

    Parameters
    ----------
    energies : (n_E,) float ndarray, meV
        Strictly increasing; any spacing.
    transmission : (n_E,) float ndarray
        Total transmission at those energies (per spin for a spinless model).
    mu : float or ndarray, meV
        Chemical potential(s); the result has the same shape.
    temperature_K : float, K
        At 0 K the result is T_lin(mu) (0 off the grid), the limit T -> 0.
    spin_degeneracy : {1, 2}, keyword-only
        2 (default) for a spinless model, whose T is per spin; 1 for a model
        with explicit spin orbitals, whose T counts both spins
        (:attr:`rgftrans.system.device.TightBindingModel.spin_degeneracy`).
    check : bool, keyword-only
        Warn (:class:`~rgftrans.errors.ResolutionWarning`) if the grid does not
        cover mu ± 20 k_B T or is coarser than k_B T / 2 inside that window.

    Returns
    -------
    ThermalConductanceResult

    References
    ----------
    S. Datta, Electronic Transport in Mesoscopic Systems (1995), ch. 2.

    Examples
    --------
    A transmission step at E = 0 seen from mu = 0 gives 1/2 at any temperature
    (here the interpolant ramps across [-0.0025, 0.0025] meV, odd about 1/2):

    >>> e = np.linspace(-4.9975, 4.9975, 2000)
    >>> g = thermal_conductance(e, (e > 0).astype(float), 0.0, 1.0)
    >>> round(float(g.conductance_g0), 12)
    0.5
    """
    e, t = _check_grid(energies, transmission)
    t = conductance_g0(t, spin_degeneracy)  # from here on in units of 2e²/h
    m = _check_mu(mu)
    temperature_K = _check_temperature(temperature_K)
    kT = BOLTZMANN_MEV_PER_K * temperature_K
    flat = m.ravel()

    if kT == 0.0:
        on_grid = (flat >= e[0]) & (flat <= e[-1])
        if check and not np.all(on_grid):
            bad = flat[~on_grid]
            warnings.warn(
                f"mu = {bad[0]:.6g} meV ({bad.size} of {flat.size} value(s)) lies outside the energy grid "
                f"[{e[0]:.6g}, {e[-1]:.6g}] meV; the conductance there is returned as 0 -- extend the grid",
                ResolutionWarning,
                stacklevel=2,
            )
        g = np.interp(flat, e, t, left=0.0, right=0.0)
        covered = on_grid.astype(float)
    else:
        if check:
            _warn_coverage(e, flat, kT, temperature_K, "mu")
            _warn_spacing(e, flat, kT, temperature_K, "mu")
        g = np.empty(flat.size)
        dt = np.diff(t)
        for k, mu_k in enumerate(flat):
            i0, i1 = _window_slice(e, mu_k, kT, THERMAL_CUTOFF_KT)
            weight, rising = _window_weights(e[i0:i1 + 1], mu_k, kT)
            g[k] = t[i0:i1] @ weight + dt[i0:i1] @ rising
        covered = 1.0 - _weight_outside(e, flat, kT)
    return ThermalConductanceResult(
        mu=m, temperature_K=temperature_K, conductance_g0=g.reshape(m.shape),
        window_weight=covered.reshape(m.shape),
    )


#: Stored finite-temperature conductances need the energy grid to hold all but this fraction of the
#: window -df/dE (about 14 k_B T on each side of mu); elsewhere they are NaN rather than a truncated
#: integral.  The missing weight bounds the relative error of G by N_max / G, i.e. 1e-6 per open channel.
GRID_WINDOW_TOL = 1e-6


def conductance_on_grid(energies, transmission, temperatures_K, *, spin_degeneracy: int = 2, mu=None):
    """Thermally averaged conductances G(mu, T) at every grid energy (or at ``mu``) as the chemical potential.

    For each temperature and each ``mu = energies[k]``, the same exact
    integral of the piecewise-linear T(E) against -df/dE as
    :func:`thermal_conductance`, for every trailing entry of
    ``transmission`` at once (e.g. a transmission matrix).  Where the grid
    holds less than ``1 - GRID_WINDOW_TOL`` of the thermal window the result
    is NaN: a value there would be an integral cut off by the grid's end.

    Parameters
    ----------
    energies : (n_E,) float ndarray, meV
        Strictly increasing.
    transmission : (n_E, ...) float ndarray
    temperatures_K : (n_T,) float array_like, K
        0 gives ``(g_s / 2) T(E)`` itself.
    spin_degeneracy : {1, 2}, keyword-only
        As in :func:`thermal_conductance`.
    mu : (n_mu,) float array_like, meV, keyword-only
        Chemical potentials (default: ``energies``), e.g. a coarse stored grid
        when ``energies`` is a refined sampling.

    Returns
    -------
    (n_mu, n_T, ...) float ndarray, 2e²/h
        Multiply by :data:`rgftrans.system.materials.CONDUCTANCE_QUANTUM_S` for S.

    Examples
    --------
    A constant transmission of 3 (spinless) gives 3 wherever the window fits
    on the grid, and NaN near its ends:

    >>> e = np.linspace(-1.0, 1.0, 201)
    >>> g = conductance_on_grid(e, np.full(e.size, 3.0), [0.3])
    >>> round(float(g[100, 0]), 12), bool(np.isnan(g[0, 0]))
    (3.0, True)
    """
    e = np.asarray(energies, dtype=float)
    t = np.asarray(transmission, dtype=float)
    if e.ndim != 1 or t.shape[:1] != e.shape:
        raise RgftransError(f"transmission has shape {t.shape}; its first axis must match the {e.size} energies")
    _check_grid(e, t.reshape(e.size, -1)[:, 0])
    temps = [_check_temperature(v) for v in np.atleast_1d(temperatures_K)]
    m = e if mu is None else np.atleast_1d(np.asarray(mu, dtype=float))
    flat = conductance_g0(t.reshape(e.size, -1), spin_degeneracy)
    out = np.full((m.size, len(temps), flat.shape[1]), np.nan)
    dt = np.diff(flat, axis=0)
    for j, temperature in enumerate(temps):
        kT = BOLTZMANN_MEV_PER_K * temperature
        if kT == 0.0:
            inside = (m >= e[0]) & (m <= e[-1])
            out[inside, j] = np.stack([np.interp(m[inside], e, col) for col in flat.T], axis=-1)
            continue
        covered = _weight_outside(e, m, kT) <= GRID_WINDOW_TOL
        for k in np.flatnonzero(covered):
            i0, i1 = _window_slice(e, m[k], kT, THERMAL_CUTOFF_KT)
            weight, rising = _window_weights(e[i0:i1 + 1], m[k], kT)
            out[k, j] = weight @ flat[i0:i1] + rising @ dt[i0:i1]
    return out.reshape(m.size, len(temps), *t.shape[1:])


def warn_grid_for_temperatures(energies, temperatures_K) -> None:
    """ResolutionWarning for each temperature whose stored conductance the energy grid cannot support.

    Per temperature T > 0: if no grid energy has the thermal window inside the
    grid (see :data:`GRID_WINDOW_TOL`), nothing finite can be stored at T; else
    the grid must be no coarser than k_B T / 2 around those energies
    (:data:`MAX_SPACING_KT`).
    """
    e = np.asarray(energies, dtype=float)
    for temperature in np.atleast_1d(temperatures_K):
        temperature = _check_temperature(temperature)
        kT = BOLTZMANN_MEV_PER_K * temperature
        if kT == 0.0:
            continue
        covered = _weight_outside(e, e, kT) <= GRID_WINDOW_TOL
        if not np.any(covered):
            need = 2 * np.log(2 / GRID_WINDOW_TOL) * kT
            warnings.warn(
                f"at {temperature:g} K the energy grid [{e[0]:.6g}, {e[-1]:.6g}] meV is narrower than the thermal "
                f"window ({need:.3g} meV = {need / kT:.0f} kT), so no conductance at that temperature can be "
                f"computed; widen the grid around the chemical potentials of interest",
                ResolutionWarning, stacklevel=2)
            continue
        _warn_spacing(e, e[covered], kT, temperature, "mu")


# --- Landauer current --------------------------------------------------------------------------------


_DROPS = ("symmetric", "source")


@dataclass(frozen=True, eq=False)
class CurrentResult:
    """Landauer current through a two-terminal device at finite bias.

    Attributes
    ----------
    bias_V : ndarray, V
        Bias V = (mu_source - mu_drain)/e, broadcast with ``mu``.
    mu : ndarray, meV
        Equilibrium chemical potential, same shape as ``bias_V``.
    mu_source, mu_drain : ndarray, meV
        Contact chemical potentials, same shape.
    temperature_K : float, K
    drop : str
        "symmetric" (mu ± eV/2) or "source" (source lifted by eV, drain at mu).
    current_A : ndarray, A
        I = (g_s e/h) ∫ T(E) [f_source - f_drain] dE, same shape; positive when
        electrons flow from source to drain at positive bias and T > 0.
    """

    bias_V: np.ndarray
    mu: np.ndarray
    mu_source: np.ndarray
    mu_drain: np.ndarray
    temperature_K: float
    drop: str
    current_A: np.ndarray

    @property
    def conductance_S(self) -> np.ndarray:
        """Chord conductance I/V in siemens (NaN at zero bias)."""
        with np.errstate(divide="ignore", invalid="ignore"):
            return np.where(self.bias_V != 0.0, self.current_A / self.bias_V, np.nan)


def _band_integral(energies, transmission, a, b):
    """∫_a^b T_lin dE in meV (signed), exact for the piecewise-linear interpolant, zero off the grid.

    Summed over the nodes between a and b only (not as a difference of
    running integrals from the grid's start), so a small bias window keeps
    full relative precision.
    """
    lo, hi = np.clip(sorted((a, b)), energies[0], energies[-1])
    if lo == hi:
        return 0.0
    inner = (energies > lo) & (energies < hi)
    x = np.concatenate([[lo], energies[inner], [hi]])
    y = np.interp(x, energies, transmission)
    value = float(np.sum(0.5 * np.diff(x) * (y[:-1] + y[1:])))
    return value if a <= b else -value


_GL_X, _GL_W = np.polynomial.legendre.leggauss(_GAUSS_NODES)


def _thermal_tail(energies, transmission, mu, kT):
    """∫ T_lin(E) [f(E - mu) - Θ(mu - E)] dE in meV: the finite-temperature correction of one contact.

    The integrand is confined to mu ± 40 k_B T (beyond, |f - Θ| < 4e-18) and
    jumps at mu; it is integrated by Gauss-Legendre on pieces of at most
    k_B T between the grid nodes, mu and the window ends, so T_lin is linear
    and f - Θ analytic on every piece.
    """
    lo = max(energies[0], mu - THERMAL_CUTOFF_KT * kT)
    hi = min(energies[-1], mu + THERMAL_CUTOFF_KT * kT)
    if lo >= hi:
        return 0.0
    inner = energies[(energies > lo) & (energies < hi)]
    cuts = [[lo], inner, [hi]]
    if lo < mu < hi:
        cuts.append([mu])
    breaks = np.unique(np.concatenate(cuts))
    length = np.diff(breaks)
    n_pieces = np.maximum(np.ceil(length / (_PIECE_KT * kT)).astype(int), 1)
    start = np.repeat(breaks[:-1], n_pieces)
    piece = np.repeat(length / n_pieces, n_pieces)
    index = np.arange(start.size) - np.repeat(np.cumsum(n_pieces) - n_pieces, n_pieces)
    start = start + index * piece
    e_nodes = (start[:, None] + 0.5 * piece[:, None] * (_GL_X + 1.0)).ravel()
    w_nodes = (0.5 * piece[:, None] * _GL_W).ravel()
    x = (e_nodes - mu) / kT
    # f - Θ(mu - E) = sign(x) expit(-|x|): minus the empty fraction below mu, the filled one above.
    excess = np.sign(x) * expit(-np.abs(x))
    return float(np.sum(w_nodes * np.interp(e_nodes, energies, transmission) * excess))


def landauer_current(energies, transmission, mu, bias_V, temperature_K, *, drop: str = "symmetric",
                     spin_degeneracy: int = 2, check: bool = True):
    """Landauer current I = (g_s e/h) ∫ T(E) [f_source(E) - f_drain(E)] dE at finite bias.

    The bias V moves the contacts to mu_source = mu + eV/2, mu_drain = mu - eV/2
    (``drop="symmetric"``) or mu_source = mu + eV, mu_drain = mu
    (``drop="source"``).  T(E) is a fixed input: the bias does not change it
    (no self-consistent potential).  As in :func:`thermal_conductance`, T is the
    piecewise-linear interpolant of its samples (zero outside the grid).  The
    integral splits into ∫_{mu_drain}^{mu_source} T_lin dE, done exactly, and
    the thermal corrections ∫ T_lin (f - Θ) dE of the two contacts, done by
    Gauss-Legendre on pieces no longer than k_B T.  For small V,
    I/V -> (2e²/h) G(mu, T).

    Parameters
    ----------
    energies : (n_E,) float ndarray, meV
    transmission : (n_E,) float ndarray
    mu : float or ndarray, meV
        Equilibrium chemical potential; broadcast against ``bias_V``.
    bias_V : float or ndarray, V
    temperature_K : float, K
    drop : {"symmetric", "source"}, keyword-only
    spin_degeneracy : {1, 2}, keyword-only
        2 (default) for a spinless model (T per spin, I = (2e/h) ∫ ...), 1
        for explicit spin orbitals (T counts both spins, I = (e/h) ∫ ...).
    check : bool, keyword-only
        Warn (:class:`~rgftrans.errors.ResolutionWarning`) if the grid does not
        cover both contact windows ± 20 k_B T (at 0 K: the bias window), or is
        coarser than k_B T / 2 within 20 k_B T of either contact's chemical potential.

    Returns
    -------
    CurrentResult

    References
    ----------
    S. Datta, Electronic Transport in Mesoscopic Systems (1995), ch. 2.

    Examples
    --------
    An energy-independent transmission T gives the ohmic I = (2e²/h) T V:

    >>> e = np.linspace(-5.0, 5.0, 401)
    >>> r = landauer_current(e, np.full(e.size, 0.5), 0.0, 1e-3, 1.0)
    >>> bool(np.isclose(r.current_A, 0.5 * 7.748091729864e-5 * 1e-3, rtol=1e-12))
    True
    """
    e, t = _check_grid(energies, transmission)
    t = conductance_g0(t, spin_degeneracy)  # from here on in units of 2e²/h
    m = _check_mu(mu)
    temperature_K = _check_temperature(temperature_K)
    try:
        v = np.asarray(bias_V, dtype=float)
    except (TypeError, ValueError):
        raise RgftransError(f"bias_V must be a number or an array of biases in volts, got {_brief(bias_V)}") from None
    if not np.all(np.isfinite(v)):
        raise RgftransError(
            f"bias_V contains NaN or infinite value(s), e.g. {float(v[~np.isfinite(v)].flat[0])!r}; "
            "give finite biases in V"
        )
    if drop not in _DROPS:
        raise RgftransError(
            f"drop must be 'symmetric' (mu ± eV/2) or 'source' (source at mu + eV, drain at mu), got {drop!r}"
        )
    m, v = np.broadcast_arrays(m, v)
    ev = v * _MEV_PER_EV
    if drop == "symmetric":
        mu_s, mu_d = m + 0.5 * ev, m - 0.5 * ev
    else:
        mu_s, mu_d = m + ev, m.copy()
    kT = BOLTZMANN_MEV_PER_K * temperature_K

    if check:
        centres = np.concatenate([mu_s.ravel(), mu_d.ravel()])
        if kT == 0.0:
            off = (centres < e[0]) | (centres > e[-1])
            if np.any(off):
                warnings.warn(
                    f"contact chemical potential {centres[off][0]:.6g} meV lies outside the energy grid "
                    f"[{e[0]:.6g}, {e[-1]:.6g}] meV; the transmission is taken as 0 beyond the grid -- "
                    f"extend it to cover [{centres.min():.6g}, {centres.max():.6g}] meV",
                    ResolutionWarning,
                    stacklevel=2,
                )
        else:
            _warn_coverage(e, centres, kT, temperature_K, "mu_source/mu_drain")
            _warn_spacing(e, centres, kT, temperature_K, "mu_source/mu_drain")

    # Zero-temperature part ∫_{mu_drain}^{mu_source} T_lin dE, exact, plus the
    # thermal corrections of the two contacts (cached: a symmetric sweep
    # reuses each contact potential with the opposite sign).
    integral = np.empty(m.size)
    tails = {}
    for k, (a, b) in enumerate(zip(mu_s.ravel(), mu_d.ravel())):
        integral[k] = _band_integral(e, t, b, a)
        if kT > 0.0:
            for centre in (a, b):
                if centre not in tails:
                    tails[centre] = _thermal_tail(e, t, centre, kT)
            integral[k] += tails[a] - tails[b]
    # I = (2e/h) ∫ ... dE with dE in J = (2e²/h) * (∫ ... dE in meV) * 1e-3 V/meV.
    current = CONDUCTANCE_QUANTUM_S * integral / _MEV_PER_EV
    shape = m.shape
    return CurrentResult(
        bias_V=v.copy(), mu=m.copy(), mu_source=mu_s, mu_drain=mu_d, temperature_K=temperature_K,
        drop=drop, current_A=current.reshape(shape),
    )


#: Chemical potentials evaluated together in one vectorised block of :func:`thermal_average` (memory: block x
#: window nodes).
_MU_BLOCK = 64


def thermal_average(energies, transmission, mu, kT):
    """``∫ T_lin(E) (-df/dE)(E - mu) dE`` for many chemical potentials ``mu`` (meV) at one ``kT`` (meV), vectorised.

    The same integral as :func:`thermal_conductance` (T_lin
    the piecewise-linear interpolant of the samples, zero off the grid),
    evaluated here by parts so that a whole block of chemical potentials costs
    one array operation:

        G = T_0 f(E_0 - mu) - T_N f(E_N - mu) + sum_i s_i [F(E_i+1 - mu) - F(E_i - mu)],

    with s_i the slope of T_lin on cell i and F(x) = -k_B T ln(1 + e^{-x/k_B T})
    the antiderivative of f.  Cells more than 40 k_B T below every mu of a block
    contribute their whole rise s_i h_i (to 1e-17) and are summed by
    telescoping; cells as far above contribute nothing.  The fitting loop calls
    this many times (a trace fit evaluates it hundreds of times); the test suite checks it against
    thermal_conductance.  Units: those of ``transmission`` (spinless T gives G in 2e²/h).
    """
    e, t = energies, transmission
    mu = np.asarray(mu, dtype=float)
    if kT == 0.0:
        return np.interp(mu, e, t, left=0.0, right=0.0)
    flat = mu.ravel()
    out = np.empty(flat.size)
    slope = np.diff(t) / np.diff(e)
    order = np.argsort(flat)
    for start in range(0, flat.size, _MU_BLOCK):
        idx = order[start:start + _MU_BLOCK]
        m = flat[idx]
        lo = max(int(np.searchsorted(e, m[0] - THERMAL_CUTOFF_KT * kT, side="right")) - 1, 0)
        hi = min(int(np.searchsorted(e, m[-1] + THERMAL_CUTOFF_KT * kT, side="left")), e.size - 1)
        edge = t[0] * expit((m - e[0]) / kT) - t[-1] * expit((m - e[-1]) / kT) + (t[lo] - t[0])
        if hi > lo:
            x = (e[lo:hi + 1][None, :] - m[:, None]) / kT
            anti = -np.logaddexp(0.0, -x)  # F / kT
            edge = edge + kT * (np.diff(anti, axis=1) @ slope[lo:hi])
        out[idx] = edge
    return out.reshape(mu.shape)
