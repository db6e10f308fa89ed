"""Fitting measured Coulomb peaks with the sequential-tunnelling line shape, several peaks at once.

For a level far narrower than kT (hbar Gamma << kT) and spaced by more than kT from the next, each peak of
G(V_g) is the master equation's closed form (C. W. J. Beenakker, Phys. Rev. B 44, 1646 (1991), from memory):

    spinless          G = (e^2 / kT) Gamma_k f(1 - f),               f = 1 / (1 + exp(e alpha (V_k - V_g) / kT)),
    spin-degenerate   G = (2 e^2 / kT) Gamma_k f(1 - f) / (1 + f)    (an electron into an empty orbital; derived in
                                                                     tests/reference/test_charging.py), and its
                      G = (2 e^2 / kT) Gamma_k f(1 - f) / (2 - f)    mirror image for the electron filling it,

with Gamma_k = Gamma_L Gamma_R / (Gamma_L + Gamma_R) the peak's series tunnel rate.  The single-level shape
assumes the next orbital many kT away: with a spacing of only ~7 kT and a faster excited orbital, thermally
excited transport biases the lever arm at the per-cent level (2.3 % in the closed-dot demo), beyond the quoted
statistical error.  The shape depends on
alpha / T only: a fit at a known temperature gives the lever arm (or, the lever arm given, the temperature),
and each peak's position V_k and rate Gamma_k.  Least squares (scipy.optimize.least_squares) with standard
errors from the Jacobian; a fit that did not converge, ended at a bound or leaves residuals far above the
noise raises :class:`rgftrans.errors.TraceFitFailed` (exit status 1 on the command line), never a result.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import constants as _codata
from scipy.optimize import least_squares
from scipy.special import expit

from rgftrans.constants import BOLTZMANN_MEV_PER_K
from rgftrans.errors import RgftransError, TraceFitFailed

__all__ = ["CoulombPeakFit", "fit_coulomb_peaks", "coulomb_peaks_model"]

#: A fit whose reduced chi-square exceeds this (noise given) or whose rms residual exceeds this fraction of the
#: largest peak (noise estimated) describes the trace badly and is refused.
MAX_REDUCED_CHI_SQUARE = 4.0
MAX_RESIDUAL_FRACTION = 0.05
#: Peaks lower than this fraction of the highest are not started (noise).
MIN_PEAK_FRACTION = 0.1


def coulomb_peaks_model(gate_V, positions_V, rates_per_s, lever_arm, temperature_K, *, spin=False,
                        first_fills_empty=True):
    """G(V_g) in S of a row of sequential-tunnelling peaks (module docstring).

    A more positive gate lowers the dot's levels: at peak k the addition energy crosses E_F at V_k, and
    f = 1 / (1 + exp(-e alpha (V_g - V_k) / kT)) is the Fermi factor of the level.  With spin, the peaks of one
    orbital come in pairs: the first adds an electron to the empty orbital (2 f (1 - f) / (1 + f): two ways in,
    one out), the second fills it (2 f (1 - f) / (2 - f), the mirror image); ``first_fills_empty`` says whether the
    lowest-voltage peak is of the first kind.
    """
    kt_j = BOLTZMANN_MEV_PER_K * float(temperature_K) * 1e-3 * _codata.e
    gate = np.asarray(gate_V, float)
    g = np.zeros_like(gate)
    order = np.argsort(positions_V)
    for rank, k in enumerate(order):
        f = expit(_codata.e * lever_arm * (gate - positions_V[k]) / kt_j)
        if spin:
            empties = (rank % 2 == 0) == bool(first_fills_empty)
            g = g + 2 * _codata.e**2 / kt_j * rates_per_s[k] * f * (1 - f) / ((1 + f) if empties else (2 - f))
        else:
            g = g + _codata.e**2 / kt_j * rates_per_s[k] * f * (1 - f)
    return g


@dataclass(frozen=True, eq=False)
class CoulombPeakFit:
    """A fitted row of Coulomb peaks.

    Attributes
    ----------
    positions_V, positions_err_V : (n,) float ndarray, V
    rates_per_s, rates_err_per_s : (n,) float ndarray, s^-1
        Gamma_L Gamma_R / (Gamma_L + Gamma_R) of each peak.
    lever_arm, lever_arm_err : float
    temperature_K, temperature_err_K : float
        One of the pair (lever arm, temperature) is fitted, the other fixed (its error NaN).
    spin : bool
    reduced_chi_square : float
    noise_S : float
    gate_V, measured_S, model_S : (m,) float ndarray
    predicted_lever_arm : float
        The layout's prediction (NaN if none).
    """

    positions_V: np.ndarray
    positions_err_V: np.ndarray
    rates_per_s: np.ndarray
    rates_err_per_s: np.ndarray
    lever_arm: float
    lever_arm_err: float
    temperature_K: float
    temperature_err_K: float
    spin: bool
    reduced_chi_square: float
    noise_S: float
    gate_V: np.ndarray
    measured_S: np.ndarray
    model_S: np.ndarray
    predicted_lever_arm: float = float("nan")

    def summary(self) -> str:
        lines = [f"Coulomb-peak fit ({'spin-degenerate' if self.spin else 'spinless'} levels, sequential "
                 f"tunnelling): {self.positions_V.size} peaks, reduced chi-square {self.reduced_chi_square:.3g}"]
        if math.isnan(self.lever_arm_err):
            lines.append(f"  lever arm {self.lever_arm:.4g} (fixed); temperature {self.temperature_K:.4g} +- "
                         f"{self.temperature_err_K:.2g} K")
        else:
            lines.append(f"  lever arm {self.lever_arm:.4g} +- {self.lever_arm_err:.2g} at {self.temperature_K:g} K "
                         "(given)")
        if math.isfinite(self.predicted_lever_arm):
            lines.append(f"  lever arm predicted from the layout {self.predicted_lever_arm:.4g}: fitted / predicted = "
                         f"{self.lever_arm / self.predicted_lever_arm:.3g}")
        for v, dv, r, dr in zip(self.positions_V, self.positions_err_V, self.rates_per_s, self.rates_err_per_s):
            lines.append(f"  peak at {v * 1e3:.4f} +- {dv * 1e3:.2g} mV: tunnel rate {r:.4g} +- {dr:.2g} s^-1")
        return "\n".join(lines)


def _start_positions(gate, g, count):
    from scipy.signal import find_peaks

    # Prominence, not just height: noise on a peak's flank makes a second local maximum that is not a peak.
    peaks, props = find_peaks(g, height=MIN_PEAK_FRACTION * g.max(), prominence=MIN_PEAK_FRACTION * g.max())
    order = np.argsort(props["peak_heights"])[::-1][:count] if count else np.arange(peaks.size)
    return np.sort(gate[peaks[order]])


def fit_coulomb_peaks(gate_V, conductance_S, *, temperature_K, lever_arm=None, fit_temperature=False,
                      spin=False, count=None, noise_S=None, predicted_lever_arm=None) -> CoulombPeakFit:
    """Fit a measured trace with a row of sequential-tunnelling peaks (module docstring).

    Parameters
    ----------
    gate_V, conductance_S : (m,) float array_like
    temperature_K : float
        The measurement temperature (fixed), or the start value with ``fit_temperature``.
    lever_arm : float, optional
        Start value of the fitted lever arm; or its fixed value with ``fit_temperature``.  Default: the
        layout's prediction if given, else from the narrowest peak's width.
    fit_temperature : bool
        Fit the temperature with the lever arm fixed (alpha / T is all the shape knows).
    spin : bool
        Spin-degenerate levels (each peak the spinful line shape).
    count : int, optional
        Number of peaks (the highest ones); default every peak above a tenth of the highest.
    noise_S : float, optional
        The measurement's noise; default estimated from the residuals.
    predicted_lever_arm : float, optional
        The layout's lever arm, reported beside the fitted one.
    """
    gate = np.asarray(gate_V, float)
    g = np.asarray(conductance_S, float)
    if gate.shape != g.shape or gate.ndim != 1 or gate.size < 5 or not (np.all(np.isfinite(gate))
                                                                         and np.all(np.isfinite(g))):
        raise RgftransError("a Coulomb-peak fit needs equal-length finite arrays of gate voltages and conductances "
                            "(at least 5 points)")
    t = float(temperature_K)
    if not (math.isfinite(t) and t > 0):
        raise RgftransError(f"temperature {temperature_K!r} K must be positive")
    starts = _start_positions(gate, g, count)
    if starts.size == 0:
        raise TraceFitFailed("no Coulomb peak found in the trace (none above a tenth of its maximum); check the "
                             "trace and its units")
    kt_j = BOLTZMANN_MEV_PER_K * t * 1e-3 * _codata.e
    alpha0 = lever_arm if lever_arm is not None else predicted_lever_arm
    if alpha0 is None:  # from the narrowest peak: FWHM = 3.53 kT / (e alpha) (Beenakker 1991, from memory)
        half = g > 0.5 * g.max()
        width = np.diff(gate)[0] * max(np.min(np.diff(np.flatnonzero(~half))[np.diff(np.flatnonzero(~half)) > 1],
                                              initial=5), 2)
        alpha0 = 3.53 * kt_j / (_codata.e * width)
    heights = np.interp(starts, gate, g)
    rate0 = heights * (4 if not spin else 1 / 0.3431) * kt_j / _codata.e**2
    n = starts.size
    span = gate[-1] - gate[0]

    def unpack(p):
        pos, logr, last = p[:n], p[n:2 * n], p[2 * n]
        if fit_temperature:
            return pos, np.exp(logr), float(alpha0), float(last)
        return pos, np.exp(logr), float(last), t

    scale = noise_S if noise_S is not None else float(np.max(np.abs(g)))
    last0 = t if fit_temperature else float(alpha0)
    p0 = np.concatenate([starts, np.log(rate0), [last0]])
    lo = np.concatenate([starts - 0.05 * span, np.log(rate0) - 10, [1e-3 * last0]])
    hi = np.concatenate([starts + 0.05 * span, np.log(rate0) + 10, [1e3 * last0]])
    best = None
    # With spin, whether the first peak fills an empty orbital is not known from the trace: fit both, keep the
    # better (the two differ in the asymmetry of every peak).
    for first in ((True, False) if spin else (True,)):
        def residual(p, first=first):
            pos, rates, a, temp = unpack(p)
            return (coulomb_peaks_model(gate, pos, rates, a, temp, spin=spin, first_fills_empty=first) - g) / scale

        trial = least_squares(residual, p0, bounds=(lo, hi), x_scale="jac", max_nfev=4000)
        if best is None or trial.cost < best[0].cost:
            best = (trial, first)
    sol, first = best
    pos, rates, a, temp = unpack(sol.x)
    model = coulomb_peaks_model(gate, pos, rates, a, temp, spin=spin, first_fills_empty=first)
    dof = max(gate.size - p0.size, 1)
    chi2 = float(np.sum(((model - g) / scale) ** 2))
    noise = noise_S if noise_S is not None else math.sqrt(chi2 / dof) * scale
    red = chi2 / dof if noise_S is not None else 1.0
    jac = sol.jac * scale / noise
    try:
        cov = np.linalg.inv(jac.T @ jac)
        err = np.sqrt(np.clip(np.diag(cov), 0.0, None))
    except np.linalg.LinAlgError:
        err = np.full(p0.size, np.nan)
    problems = []
    if not sol.success:
        problems.append(f"the optimiser did not converge ({sol.message})")
    at_bound = np.isclose(sol.x, lo, rtol=0, atol=1e-9 * np.abs(lo) + 1e-30) | np.isclose(
        sol.x, hi, rtol=0, atol=1e-9 * np.abs(hi) + 1e-30)
    if np.any(at_bound):
        problems.append("a parameter ended at its bound (a peak wandered off or a rate collapsed)")
    if noise_S is not None and red > MAX_REDUCED_CHI_SQUARE:
        problems.append(f"reduced chi-square {red:.3g} exceeds {MAX_REDUCED_CHI_SQUARE:g} with the given noise")
    if noise_S is None and noise > MAX_RESIDUAL_FRACTION * np.max(np.abs(g)):
        problems.append(f"the rms residual is {noise / np.max(np.abs(g)):.2g} of the highest peak (limit "
                        f"{MAX_RESIDUAL_FRACTION:g}): the line shape does not describe the trace")
    if problems:
        raise TraceFitFailed("Coulomb-peak fit failed: " + "; ".join(problems) + "; give start values "
                             "(lever arm, peak count) or check the temperature and that hbar Gamma << kT")
    return CoulombPeakFit(
        positions_V=pos, positions_err_V=err[:n], rates_per_s=rates, rates_err_per_s=rates * err[n:2 * n],
        lever_arm=a, lever_arm_err=float("nan") if fit_temperature else float(err[2 * n]),
        temperature_K=temp, temperature_err_K=float(err[2 * n]) if fit_temperature else float("nan"),
        spin=bool(spin), reduced_chi_square=red, noise_S=float(noise), gate_V=gate, measured_S=g, model_S=model,
        predicted_lever_arm=float("nan") if predicted_lever_arm is None else float(predicted_lever_arm))
