"""Comparison of a measured conductance trace with a stored sweep: read, correct, model, fit, plot.

* :func:`read_trace` (from :mod:`rgftrans.io.traces`) reads a measured trace (CSV with a header row, or plain
  two-column text) into a :class:`MeasuredTrace` in siemens;
* :func:`remove_series_resistance` and :func:`add_series_resistance` convert
  between the measured two-terminal conductance and the device's own;
* :func:`model_conductance` is the conductance a stored sweep predicts at given
  gate voltages;
* :func:`fit_trace` fits lever arm, offset, series resistance and temperature
  by least squares and returns a :class:`TraceFit` (values, standard errors,
  correlations, reduced chi-square, residuals), which writes itself into an
  HDF5 group (:meth:`TraceFit.to_hdf5`, read back with :func:`read_fit`);
* :func:`rgftrans.plots.fits.plot_fit` overlays measurement and model, with the residuals below.

Gate-voltage convention
-----------------------
A stored sweep gives T(E) on an energy axis E (meV) whose zero is arbitrary
(the band edge of the leads, the bottom of a potential).  A plunger gate at
voltage V_g lowers every level of the dot by alpha * e * (V_g - V_0); seen from
the levels, the chemical potential of the leads therefore rises, and the
conductance measured at V_g is the thermal conductance at

    mu(V_g) = mu_ref + alpha * (V_g - V_0),

    G_model(V_g) = G(mu(V_g), T) = G0 ∫ T(E) (-df/dE)(E - mu(V_g)) dE,

with alpha the lever arm in meV/V (positive for a gate that attracts
electrons), V_0 the offset in V (the gate voltage at which mu = mu_ref) and
mu_ref a fixed reference on the stored energy axis (default: the sweep's
stored Fermi energy, file attribute ``fermi_energy_meV``, where its config
gives a density, else 0 meV; it only relabels V_0).  A sweep whose parameter axis already is a gate voltage (units
V or mV) is compared directly: G_j = G(mu_ref, T) is computed at each stored
gate value g_j from that point's T(E), interpolated (monotone cubic, PCHIP) and
evaluated at V_g - V_0, so only the offset (no lever arm) can be fitted.

What is measured is the device in series with a resistance R_s (contacts,
lines, the amplifier's input): G_meas = 1 / (1/G_dev + R_s).  The fit runs on
the measured quantity: residual = G_meas - add_series_resistance(G_model, R_s).

Noise model: every point has the same Gaussian noise sigma, either given
(``noise_S``; then the reduced chi-square tests the model) or estimated from
the residual rms with n_points - n_fitted degrees of freedom (then the reduced
chi-square is 1 by construction and the standard errors are scaled by the
estimate).  Standard errors and correlations come from the covariance
(J^T J)^-1 of the whitened residuals at the optimum (Gauss-Newton; Press et
al., Numerical Recipes, 3rd ed. (2007), sec. 15.5).

Failure
-------
A fit is only returned when it is worth reporting.  :func:`fit_trace` raises
:class:`TraceFitFailed` (a :class:`~rgftrans.errors.FitFailed`, command-line
exit status 1) when the optimiser did not move from its start, when a fitted
parameter ended at a bound of its range, when it ran out of evaluations, or
when the model does not describe the trace: reduced chi-square above
:data:`MAX_REDUCED_CHI_SQUARE` with a given noise, or (noise estimated) an rms
residual above :data:`MAX_RESIDUAL_SPREAD` of the trace's own spread.  The
exception carries the flags (:class:`FitProblem`) and the failed attempt.

References
----------
S. Datta, *Electronic Transport in Mesoscopic Systems* (Cambridge, 1995), ch. 2
(thermal conductance); L. P. Kouwenhoven et al., in *Mesoscopic Electron
Transport* (Kluwer, 1997) (lever arm of a gate-defined dot).
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass
from pathlib import Path
from typing import Mapping

import h5py
import numpy as np
from scipy.interpolate import PchipInterpolator
from scipy.optimize import least_squares

from rgftrans.errors import FitWarning, ResolutionWarning, TraceFitFailed
from rgftrans.system.materials import CONDUCTANCE_QUANTUM_S
from rgftrans.io.store import ResultData, StoredArray, StoredGroup, read_result, write_group
from rgftrans.analysis.thermal import BOLTZMANN_MEV_PER_K, thermal_average
from rgftrans.io.traces import _GATE_UNITS, MeasuredTrace, _arg, _unit_key, argument_names, read_trace
from rgftrans.errors import CompareError

__all__ = [
    "PARAMETER_UNITS",
    "MAX_REDUCED_CHI_SQUARE",
    "MAX_RESIDUAL_SPREAD",
    "FitProblem",
    "MeasuredTrace",
    "TraceFit",
    "argument_names",
    "add_series_resistance",
    "fit_trace",
    "model_conductance",
    "predicted_lever_arm",
    "read_fit",
    "read_trace",
    "remove_series_resistance",
]


# --- named constants --------------------------------------------------------------------------
#: Largest energy step, in k_B T, that one measured gate step may map to: the
#: thermal window (FWHM 3.5 k_B T) is then sampled by >= 7 points.
MAX_GATE_STEP_KT = 0.5
#: Largest stored energy spacing, in k_B T, inside the mapped window (as in rgftrans.analysis.thermal).
MAX_ENERGY_SPACING_KT = 0.5
#: Half-width, in k_B T, around the mapped chemical potentials that the energy grid must cover:
#: the weight of -df/dE beyond it is 2/(1 + e^20) = 4e-9.
COVERAGE_KT = 20.0
#: Points of the dense model curve per measured point, and its bounds.
_CURVE_DENSITY, _CURVE_MIN, _CURVE_MAX = 4, 200, 2000
#: Lowest temperature a fitted temperature may reach (K); it must stay positive.
_MIN_FIT_TEMPERATURE_K = 1e-4
#: Default range of a fitted lever arm: the start's sign, |alpha| within this factor of the start either way.
#: A lever arm does not change sign (the gate would repel instead of attract), and the start, from the peak
#: spacing, is known to better than a factor of a few; a fit that wants to leave this range has locked onto
#: the wrong feature.
LEVER_ARM_RANGE_FACTOR = 10.0
#: With the noise given, a reduced chi-square above this fails the fit: a model that describes the trace
#: gives 1 +- sqrt(2/dof); 10 is beyond any statistical spread and beyond a noise misjudged by a factor of 3.
MAX_REDUCED_CHI_SQUARE = 10.0
#: With the noise estimated, the fit fails when the rms residual exceeds this fraction of the trace's own
#: standard deviation about its mean (explained variance below 75 %); see :func:`_residual_problem`.
MAX_RESIDUAL_SPREAD = 0.5
#: A fitted parameter "did not move" when it changed by less than this fraction of its scale (see
#: :func:`_parameter_scales`); an optimiser that takes any step at all moves far more than this.
_UNMOVED_FRACTION = 1e-6

#: Units of the fit parameters.
PARAMETER_UNITS = {"lever_arm": "meV/V", "offset": "V", "r_series": "ohm", "temperature": "K"}
#: Names of the parameters in failure messages.
_PARAMETER_LABELS = {"lever_arm": "lever arm", "offset": "offset", "r_series": "series resistance",
                     "temperature": "temperature"}
#: The argument that sets each parameter's start (or fixed) value (spelled by :func:`rgftrans.io.traces._arg`).
_START_ARGUMENT = {"lever_arm": "lever_arm", "offset": "offset", "r_series": "r_series_ohm",
                   "temperature": "temperature_K"}
_PARAMETER_LONG_NAMES = {
    "lever_arm": "lever arm alpha in mu = mu_ref + alpha (V_g - V_0)",
    "offset": "gate-voltage offset V_0 (mu = mu_ref at V_g = V_0)",
    "r_series": "series resistance R_s, G_meas = 1/(1/G_dev + R_s)",
    "temperature": "electron temperature",
}

_HDF5_FORMAT = "rgftrans-trace-fit"


@dataclass(frozen=True)
class FitProblem:
    """One reason a trace fit failed.

    Attributes
    ----------
    kind : {"not_moved", "at_bound", "not_converged", "chi_square", "residual"}
        The optimiser did not move from its start; a parameter ended at a
        bound of its range; the optimiser ran out of evaluations; reduced
        chi-square above :data:`MAX_REDUCED_CHI_SQUARE` (noise given); rms
        residual above :data:`MAX_RESIDUAL_SPREAD` of the trace's spread
        (noise estimated).
    parameter : str
        The parameter concerned ("at_bound"), or "" for the whole fit.
    side : {"lower", "upper", ""}
        Which bound ("at_bound" only).
    bound : float
        The bound's value in the parameter's units (NaN unless "at_bound").
    value : float
        The parameter's final value ("at_bound"); the reduced chi-square
        ("chi_square"); rms residual over the trace's spread ("residual");
        model evaluations ("not_converged"); NaN otherwise.
    limit : float
        The threshold that ``value`` crossed (NaN where none applies).
    text : str
        One clause saying what happened and what to try.
    """

    kind: str
    parameter: str
    side: str
    bound: float
    value: float
    limit: float
    text: str


# --- series resistance --------------------------------------------------------------------------


def _check_resistance(r_series_ohm) -> float:
    try:
        r = float(r_series_ohm)
    except (TypeError, ValueError):
        raise CompareError(f"{_arg('r_series_ohm')} must be a number in ohm, got {r_series_ohm!r}") from None
    if not math.isfinite(r) or r < 0.0:
        raise CompareError(f"{_arg('r_series_ohm')} = {r!r}; pass a finite series resistance >= 0 ohm")
    return r


def remove_series_resistance(g_meas_S, r_series_ohm):
    """Device conductance from the measured one, G_dev = 1 / (1/G_meas - R_s).

    Evaluated as G_meas / (1 - R_s G_meas), which is the same and finite at
    G_meas = 0.

    Parameters
    ----------
    g_meas_S : float or ndarray, S
        Measured two-terminal conductance.
    r_series_ohm : float, ohm
        Series resistance, >= 0.

    Raises
    ------
    CompareError
        If some G_meas >= 1/R_s: the device would need an infinite or negative
        resistance (the correction diverges); the message names the first such point.

    Examples
    --------
    >>> float(remove_series_resistance(100e-6, 5e3))  # 1/(10 kOhm - 5 kOhm)
    0.0002
    """
    r = _check_resistance(r_series_ohm)
    g = np.asarray(g_meas_S, dtype=float)
    denominator = 1.0 - r * g
    bad = denominator <= 0.0
    if np.any(bad):
        k = np.unravel_index(np.flatnonzero(bad)[0], g.shape) if g.ndim else ()
        where = f"point {tuple(int(i) for i in k) if len(k) > 1 else int(k[0])}" if g.ndim else "the value"
        raise CompareError(
            f"G_meas = {float(g[k]):.6g} S at {where} ({np.count_nonzero(bad)} point(s) in all) is >= 1/R_s = "
            f"{1.0 / r:.6g} S, so removing R_s = {r:g} ohm diverges; the series resistance must be smaller "
            f"than 1/max(G_meas) = {1.0 / float(np.max(g)):.6g} ohm"
        )
    return g / denominator


def add_series_resistance(g_dev_S, r_series_ohm):
    """Measured conductance of a device in series with R_s, G_meas = 1 / (1/G_dev + R_s).

    Evaluated as G_dev / (1 + R_s G_dev); the inverse of
    :func:`remove_series_resistance`.

    Parameters
    ----------
    g_dev_S : float or ndarray, S
        Device conductance, > -1/R_s (a physical one is >= 0).
    r_series_ohm : float, ohm

    Examples
    --------
    >>> float(add_series_resistance(200e-6, 5e3))  # 1/(5 kOhm + 5 kOhm)
    0.0001
    """
    r = _check_resistance(r_series_ohm)
    g = np.asarray(g_dev_S, dtype=float)
    denominator = 1.0 + r * g
    if np.any(denominator <= 0.0):
        k = int(np.flatnonzero(np.ravel(denominator) <= 0.0)[0])
        raise CompareError(
            f"G_dev = {float(np.ravel(g)[k]):.6g} S at flat index {k} is <= -1/R_s; a device conductance "
            f"must be > -1/R_s = {-1.0 / r:.6g} S"
        )
    return g / denominator


# --- the stored sweep and its model ---------------------------------------------------------------


class _Sweep:
    """The slice of a stored sweep a trace is compared with: T(E) in energy mode, or T_j(E) on a gate axis."""

    def __init__(self, result, *, leads=None, gate_axis=None, select=None):
        data = result if isinstance(result, ResultData) else read_result(result)
        self.path = str(data.path)
        where = self.path
        if "transmission" not in data.quantities:
            raise CompareError(
                f"{where}: holds no 'transmission' quantity (has {sorted(data.quantities)}); compare with a "
                f"transport sweep"
            )
        names = tuple(data.lead_names)
        if len(names) < 2:
            raise CompareError(f"{where}: has {len(names)} lead(s); a conductance needs two")
        self.lead_in, self.lead_out = self._leads(leads, names, where)
        i_in, i_out = names.index(self.lead_in), names.index(self.lead_out)
        axis_names = [a.name for a in data.axes]
        # A sweep axis may be named by its config path (gates.plunger.voltage_V) or by its stored name
        # (gates__plunger__voltage_V).
        from rgftrans.io.sweeps import axis_dataset_name

        def stored(name):
            return name if name in axis_names else axis_dataset_name(name) if isinstance(name, str) else name

        select = {stored(k): v for k, v in (select or {}).items()}
        gate_axis = stored(gate_axis) if gate_axis is not None else None
        unknown = sorted(set(select) - set(axis_names))
        if unknown:
            raise CompareError(f"{where}: {_arg('select')} names axes {unknown} the sweep lacks; its axes are {axis_names}")
        if gate_axis is not None and gate_axis not in axis_names:
            raise CompareError(
                f"{where}: no axis {gate_axis!r} for {_arg('gate_axis')}; its axes are {axis_names or 'none (energy only)'}"
            )
        if gate_axis is not None and gate_axis in select:
            raise CompareError(f"{where}: axis {gate_axis!r} is the gate axis; remove it from {_arg('select')}")
        missing = [n for n in axis_names if n != gate_axis and n not in select]
        if missing:
            hint = f"{_arg('gate_axis')} {missing[0]!r} to compare along it" if gate_axis is None else ""
            raise CompareError(
                f"{where}: axes {missing} are not fixed; pass {_arg('select')} {missing[0]!r} with a value"
                + (f" or {hint}" if hint else "")
            )
        index: list = []
        for axis in data.axes:
            if axis.name == gate_axis:
                index.append(slice(None))
                continue
            value = select[axis.name]
            try:
                hit = np.flatnonzero(np.isclose(axis.values, float(value), rtol=1e-9, atol=1e-12))
            except (TypeError, ValueError):
                raise CompareError(f"{where}: {_arg('select')} {axis.name!r} = {value!r}; pass a number in {axis.units}") from None
            if hit.size == 0:
                raise CompareError(
                    f"{where}: axis {axis.name!r} has no value {value!r}; it holds "
                    f"{np.array2string(axis.values, threshold=8, precision=6)} {axis.units}"
                )
            index.append(int(hit[0]))
        index = tuple(index)
        done = np.asarray(data.completed[index])
        if not np.all(done):
            raise CompareError(
                f"{where}: {np.size(done) - np.count_nonzero(done)} selected parameter point(s) are not computed yet; "
                f"resume the sweep or select computed points"
            )
        # In units of 2e²/h at zero temperature: (g_s / 2) T, g_s = 1 when the spin orbitals are explicit.
        t = np.asarray(data.quantities["transmission"][index][..., i_out, i_in], dtype=float)
        t = t * (0.5 * data.require_attr("spin_degeneracy", "whether the transmission is per spin"))
        if not np.all(np.isfinite(t)):
            raise CompareError(f"{where}: the selected transmission contains NaN; recompute those energies")
        self.energies = np.asarray(data.energies_meV, dtype=float)
        self.gate_axis = gate_axis
        fermi = data.attrs.get("fermi_energy_meV")
        try:
            fermi = float(fermi)
        except (TypeError, ValueError):
            fermi = float("nan")
        #: The Fermi energy of the swept device (meV) where its config gave a density, else NaN.
        self.fermi_energy_meV = fermi
        if gate_axis is None:
            self.transmission = t
            self.gate_values = None
        else:
            axis = data.axes[axis_names.index(gate_axis)]
            key = _unit_key(axis.units)
            if key not in _GATE_UNITS:
                raise CompareError(
                    f"{where}: axis {gate_axis!r} is in {axis.units!r}, not a gate voltage; use the energy axis "
                    f"with a lever arm instead (no {_arg('gate_axis')})"
                )
            if axis.size < 2:
                raise CompareError(f"{where}: gate axis {gate_axis!r} has one value; direct comparison needs two or more")
            values = axis.values * _GATE_UNITS[key]
            order = np.argsort(values)
            self.gate_values = values[order]
            self.transmission = t[order]
        self._cache: dict = {}

    @staticmethod
    def _leads(leads, names, where):
        if leads is None:
            return names[0], names[1]
        try:
            pair = list(leads)
        except TypeError:
            pair = []
        if len(pair) != 2:
            raise CompareError(f"{where}: {_arg('leads')} must be a pair (from, to), got {leads!r}; leads are {list(names)}")
        out = []
        for lead in pair:
            if isinstance(lead, (int, np.integer)) and 0 <= lead < len(names):
                out.append(names[int(lead)])
            elif isinstance(lead, str) and lead in names:
                out.append(lead)
            else:
                raise CompareError(f"{where}: no lead {lead!r}; leads are {list(names)} (or their 0-based indices)")
        if out[0] == out[1]:
            raise CompareError(f"{where}: leads ({out[0]!r}, {out[1]!r}) name one lead twice; pass two different leads")
        return tuple(out)

    @property
    def mode(self) -> str:
        return "energy" if self.gate_axis is None else "gate"

    @property
    def parameter_names(self) -> tuple:
        if self.mode == "energy":
            return ("lever_arm", "offset", "r_series", "temperature")
        return ("offset", "r_series", "temperature")

    def mu(self, gate_V, p, mu_ref):
        """Chemical potential (meV) on the stored energy axis at the gate voltages (energy mode)."""
        return mu_ref + p["lever_arm"] * (np.asarray(gate_V, dtype=float) - p["offset"])

    def device_g0(self, gate_V, p, mu_ref):
        """Model device conductance in 2e²/h at the gate voltages, for parameters p."""
        kT = BOLTZMANN_MEV_PER_K * p["temperature"]
        if self.mode == "energy":
            return thermal_average(self.energies, self.transmission, self.mu(gate_V, p, mu_ref), kT)
        key = (kT, mu_ref)
        if key not in self._cache:
            g = np.array([thermal_average(self.energies, row, np.array([mu_ref]), kT)[0] for row in self.transmission])
            self._cache = {key: PchipInterpolator(self.gate_values, g, extrapolate=False)}
        shifted = np.clip(np.asarray(gate_V, dtype=float) - p["offset"], self.gate_values[0], self.gate_values[-1])
        return self._cache[key](shifted)

    def check_resolution(self, gate_V, p, mu_ref, stacklevel=3):
        """ResolutionWarning where the comparison under-resolves or leaves the stored grid."""
        kT = BOLTZMANN_MEV_PER_K * p["temperature"]
        e = self.energies
        if kT == 0.0:
            return
        gate_V = np.asarray(gate_V, dtype=float)
        if self.mode == "energy":
            alpha = p["lever_arm"]
            if gate_V.size > 1:
                step = abs(alpha) * float(np.max(np.diff(gate_V)))
                if step > MAX_GATE_STEP_KT * kT:
                    warnings.warn(
                        f"the measured gate step reaches {np.max(np.diff(gate_V)) * 1e3:.4g} mV, i.e. {step:.4g} meV "
                        f"at lever arm {alpha:.4g} meV/V, coarser than kT/2 = {MAX_GATE_STEP_KT * kT:.4g} meV at "
                        f"{p['temperature']:.4g} K: thermally broadened features are under-sampled; measure with "
                        f"gate steps <= {MAX_GATE_STEP_KT * kT / abs(alpha) * 1e3:.4g} mV",
                        ResolutionWarning, stacklevel=stacklevel,
                    )
            mu = self.mu(gate_V, p, mu_ref)
        else:
            shifted = gate_V - p["offset"]
            lo, hi = self.gate_values[0], self.gate_values[-1]
            if shifted.min() < lo - 1e-12 * max(1.0, abs(lo)) or shifted.max() > hi + 1e-12 * max(1.0, abs(hi)):
                warnings.warn(
                    f"{self.path}: the measured gate range minus the offset, [{shifted.min():.6g}, {shifted.max():.6g}] V, "
                    f"leaves the stored gate axis {self.gate_axis!r} [{lo:.6g}, {hi:.6g}] V (the model is held "
                    f"constant beyond it); extend the sweep or restrict the trace",
                    ResolutionWarning, stacklevel=stacklevel,
                )
            mu = np.array([mu_ref])
        window = (float(mu.min()) - COVERAGE_KT * kT, float(mu.max()) + COVERAGE_KT * kT)
        if e[0] > window[0] or e[-1] < window[1]:
            warnings.warn(
                f"{self.path}: the mapped chemical potentials ± {COVERAGE_KT:g} kT span [{window[0]:.6g}, "
                f"{window[1]:.6g}] meV but the stored energy grid covers [{e[0]:.6g}, {e[-1]:.6g}] meV (T = 0 "
                f"beyond it); extend the energy grid or restrict the trace's gate range",
                ResolutionWarning, stacklevel=stacklevel,
            )
        inside = (e[1:] > window[0]) & (e[:-1] < window[1])
        if np.any(inside):
            spacing = float(np.max(np.diff(e)[inside]))
            if spacing > MAX_ENERGY_SPACING_KT * kT:
                warnings.warn(
                    f"{self.path}: the stored energy spacing reaches {spacing:.4g} meV inside the mapped window, "
                    f"coarser than kT/2 = {MAX_ENERGY_SPACING_KT * kT:.4g} meV at {p['temperature']:.4g} K; "
                    f"refine the energy grid there",
                    ResolutionWarning, stacklevel=stacklevel,
                )


def _check_temperature(temperature_K, *, positive: bool) -> float:
    try:
        value = float(temperature_K)
    except (TypeError, ValueError):
        raise CompareError(f"{_arg('temperature_K')} must be a number in K, got {temperature_K!r}") from None
    if not math.isfinite(value) or value < 0.0 or (positive and value == 0.0):
        bound = "> 0" if positive else ">= 0"
        raise CompareError(f"{_arg('temperature_K')} = {value!r}; pass a finite electron temperature {bound} K")
    return value


def model_conductance(result, gate_V, *, temperature_K, lever_arm_meV_per_V=None, offset_V=0.0,
                      r_series_ohm=0.0, mu_ref_meV=None, leads=None, gate_axis=None, select=None,
                      check: bool = True):
    """Conductance a stored sweep predicts at the given gate voltages, as measured through R_s.

    Energy mode (``gate_axis=None``): G(V) = G0 ∫ T(E) (-df/dE)(E - mu(V)) dE with
    mu(V) = mu_ref + alpha (V - V_0) (module docstring).  Gate mode: the
    thermal conductance at mu_ref of each stored gate point, interpolated
    (PCHIP) at V - V_0.  In both, the result is passed through
    :func:`add_series_resistance`.

    Parameters
    ----------
    result : str, os.PathLike or ResultData
        A stored sweep with a ``transmission`` quantity.
    gate_V : (n,) float ndarray, V
    temperature_K : float, K, keyword-only
    lever_arm_meV_per_V : float, meV/V, keyword-only
        alpha; required in energy mode, refused in gate mode.
    offset_V : float, V, keyword-only
    r_series_ohm : float, ohm, keyword-only
    mu_ref_meV : float, meV, keyword-only
        The chemical potential on the stored energy axis at V = V_0.  Default
        (None): the sweep's stored Fermi energy (file attribute
        ``fermi_energy_meV``) where its config gave a density, else 0 meV.
    leads : (from, to) pair of lead names or indices, keyword-only
        Transmission from the first into the second; default the first two leads.
    gate_axis : str, keyword-only
        Name of a parameter axis in V or mV for direct comparison.
    select : dict of str to float, keyword-only
        A value for every other parameter axis of the sweep.
    check : bool, keyword-only
        Warn (:class:`~rgftrans.errors.ResolutionWarning`) about coarse
        sampling or an energy grid that does not cover the mapped window.

    Returns
    -------
    (n,) float ndarray, S
    """
    sweep = _Sweep(result, leads=leads, gate_axis=gate_axis, select=select)
    gate = np.asarray(gate_V, dtype=float)
    p = {"offset": float(offset_V), "r_series": _check_resistance(r_series_ohm),
         "temperature": _check_temperature(temperature_K, positive=False)}
    if sweep.mode == "energy":
        if lever_arm_meV_per_V is None:
            raise CompareError(f"{sweep.path}: an energy sweep needs lever_arm_meV_per_V to map gate voltage to energy")
        p["lever_arm"] = float(lever_arm_meV_per_V)
    elif lever_arm_meV_per_V is not None:
        raise CompareError(f"{sweep.path}: axis {gate_axis!r} already is a gate voltage; drop lever_arm_meV_per_V")
    mu_ref, _ = _reference_potential(sweep, mu_ref_meV)
    if check:
        sweep.check_resolution(gate, p, mu_ref)
    return add_series_resistance(sweep.device_g0(gate, p, mu_ref) * CONDUCTANCE_QUANTUM_S, p["r_series"])


def _reference_potential(sweep, mu_ref_meV) -> tuple[float, str]:
    """mu_ref (meV) and where it came from: given, the stored Fermi energy, or 0 meV for want of one."""
    if mu_ref_meV is not None:
        try:
            value = float(mu_ref_meV)
        except (TypeError, ValueError):
            value = float("nan")
        if not math.isfinite(value):
            raise CompareError(f"{_arg('mu_ref_meV')} = {mu_ref_meV!r}; pass a finite chemical potential in meV on "
                               f"the stored energy axis, or leave it out for the stored Fermi energy")
        return value, f"given with {_arg('mu_ref_meV')}"
    if math.isfinite(sweep.fermi_energy_meV):
        return sweep.fermi_energy_meV, "the sweep's stored Fermi energy (file attribute fermi_energy_meV)"
    return 0.0, (f"0 meV because the sweep stores no Fermi energy (its config gives no density); "
                 f"set {_arg('mu_ref_meV')} to choose another")


# --- the fit --------------------------------------------------------------------------------------


@dataclass(frozen=True, eq=False)
class TraceFit:
    """Least-squares comparison of a measured trace with a stored sweep.

    Attributes
    ----------
    source, description : str
        The trace's source (path) and description.
    result_path : str
        The stored sweep.
    mode : {"energy", "gate"}
        Energy axis mapped by a lever arm, or a stored gate axis compared directly.
    gate_axis : str
        Name of the stored gate axis ("" in energy mode).
    lead_in, lead_out : str
        Transmission from ``lead_in`` into ``lead_out``.
    mu_ref_meV : float, meV
        The chemical potential at V_g = V_0 (energy mode) or at which the
        stored gate points are evaluated (gate mode).
    parameter_names : tuple of str
        All model parameters, fitted or fixed (units in :data:`PARAMETER_UNITS`).
    fitted : tuple of str
        The fitted ones, in the order of ``covariance`` and ``correlation``.
    values, stderr : dict of str to float
        Value of every parameter; standard error (NaN for fixed parameters).
    covariance, correlation : (k, k) float ndarray
        Over the fitted parameters.
    chi_square, reduced_chi_square : float
        Sum of squared residuals over sigma²; divided by ``dof``.
    dof : int
        n_points - k.
    n_points : int
    noise_S : float, S
        The sigma used: given, or estimated from the residual rms.
    noise_source : {"given", "estimated"}
    gate_V, measured_S, model_S, model_device_S, residuals_S : (n,) float ndarray
        Gate voltage (V); measured conductance; model as measured (with R_s);
        model of the device alone; residual measured - model (all S).
    curve_gate_V, curve_S : (m,) float ndarray
        The model (with R_s) on a dense gate grid, for plots.
    success : bool
        True for a returned fit; False only for the failed attempt carried
        by :class:`TraceFitFailed`.
    message : str
    n_evaluations : int
    mu_ref_source : str
        Where ``mu_ref_meV`` came from (given, the stored Fermi energy, or 0 meV for want of one).
    bounds : dict of str to (float, float)
        The range each fitted parameter was allowed (its units).
    predicted_lever_arm : float, meV/V
        The lever arm the layout's electrostatics predict (NaN if none was given); the summary reports the
        fitted value's distance from it.
    predicted_from : str
        Where the prediction came from (e.g. "region 'dot', gate 'plunger' of result.h5").
    """

    source: str
    description: str
    result_path: str
    mode: str
    gate_axis: str
    lead_in: str
    lead_out: str
    mu_ref_meV: float
    parameter_names: tuple
    fitted: tuple
    values: dict
    stderr: dict
    covariance: np.ndarray
    correlation: np.ndarray
    chi_square: float
    reduced_chi_square: float
    dof: int
    n_points: int
    noise_S: float
    noise_source: str
    gate_V: np.ndarray
    measured_S: np.ndarray
    model_S: np.ndarray
    model_device_S: np.ndarray
    residuals_S: np.ndarray
    curve_gate_V: np.ndarray
    curve_S: np.ndarray
    success: bool
    message: str
    n_evaluations: int
    mu_ref_source: str = ""
    bounds: dict = None
    predicted_lever_arm: float = float("nan")
    predicted_from: str = ""

    def summary(self) -> str:
        """Multi-line human description: data, noise model, parameters with errors, strong correlations."""
        how = ("energy axis mapped by mu = mu_ref + alpha (V_g - V_0)" if self.mode == "energy"
               else f"stored gate axis {self.gate_axis!r} compared at V_g - V_0")
        lines = [
            f"trace fit: {self.source or 'trace'} ({self.description}) against {self.result_path}",
            f"  {how}; transmission {self.lead_in!r} -> {self.lead_out!r}",
            f"  mu_ref = {self.mu_ref_meV:.6g} meV: {self.mu_ref_source or 'as given'}",
            f"  {self.n_points} points, {len(self.fitted)} fitted parameter(s), {self.dof} degrees of freedom",
        ]
        if self.noise_source == "given":
            lines.append(f"  noise sigma = {self.noise_S * 1e6:.4g} uS (given): chi-square {self.chi_square:.4g}, "
                         f"reduced chi-square {self.reduced_chi_square:.4g}")
        else:
            lines.append(f"  noise sigma = {self.noise_S * 1e6:.4g} uS estimated from the residual rms: reduced "
                         f"chi-square is 1 by construction (give noise_S to test the model)")
        width = max(len(n) for n in self.parameter_names)
        for name in self.parameter_names:
            value, err, unit = self.values[name], self.stderr[name], PARAMETER_UNITS[name]
            if name in self.fitted:
                lines.append(f"  {name:<{width}} = {value:.6g} ± {err:.2g} {unit}")
            else:
                lines.append(f"  {name:<{width}} = {value:.6g} {unit} (fixed)")
        predicted = self.predicted_lever_arm
        if math.isfinite(predicted) and "lever_arm" in self.values:
            fitted, err = self.values["lever_arm"], self.stderr["lever_arm"]
            apart = (f", {abs(fitted - predicted) / err:.1f} standard errors apart" if math.isfinite(err) and err > 0
                     else "")
            lines.append(f"  lever arm predicted from the layout ({self.predicted_from}): {predicted:.4g} meV/V; "
                         f"fitted / predicted = {fitted / predicted:.3g}{apart}")
        strong = [f"{a}/{b} {self.correlation[i, j]:+.3f}"
                  for i, a in enumerate(self.fitted) for j, b in enumerate(self.fitted)
                  if j > i and abs(self.correlation[i, j]) > 0.9]
        if strong:
            lines.append(f"  strong correlations: {', '.join(strong)}")
        lines.append(f"  optimiser: {'converged' if self.success else 'NOT converged'} after {self.n_evaluations} "
                     f"evaluations ({self.message})")
        return "\n".join(lines)

    def to_hdf5(self, path, group: str = "compare", *, overwrite: bool = False) -> None:
        """Write the fit into ``/<group>`` of an rgftrans HDF5 file (the result file, or a new file).

        Layout: group attributes hold the scalars and texts (``format =
        "rgftrans-trace-fit"``); datasets ``gate_voltage`` (dimension scale),
        ``measured_conductance``, ``model_conductance``,
        ``model_device_conductance``, ``residual`` on it; ``curve_gate_voltage``
        and ``model_curve``; ``parameters/<name>`` scalars with ``stderr`` and
        ``fitted`` attributes; ``covariance`` and ``correlation`` over the
        string scales ``fitted_parameter`` and ``fitted_parameter_2``.  Every
        dataset has ``units`` and ``long_name``.  Written by
        :func:`rgftrans.io.store.write_group`.

        Raises
        ------
        CompareError
            This is a failed fit attempt (never stored).
        StoreError
            The group exists and ``overwrite`` is False; the file is not an
            rgftrans HDF5 file; a running sweep is writing it.
        """
        path = Path(path)
        if not self.success:
            raise CompareError(f"{path}: this is a failed fit attempt ({self.message}); it is not stored as a result")
        attrs = {
            "format": _HDF5_FORMAT, "source": self.source, "description": self.description,
            "result_path": self.result_path, "mode": self.mode, "gate_axis": self.gate_axis,
            "lead_in": self.lead_in, "lead_out": self.lead_out, "mu_ref_meV": self.mu_ref_meV,
            "parameter_names": " ".join(self.parameter_names), "fitted": " ".join(self.fitted),
            "chi_square": self.chi_square, "reduced_chi_square": self.reduced_chi_square, "dof": self.dof,
            "n_points": self.n_points, "noise_S": self.noise_S, "noise_source": self.noise_source,
            "success": self.success, "message": self.message, "n_evaluations": self.n_evaluations,
            "mu_ref_source": self.mu_ref_source, "predicted_lever_arm_meV_per_V": self.predicted_lever_arm,
            "predicted_from": self.predicted_from,
        }
        gate = ("gate_voltage",)
        items = {"gate_voltage": StoredArray(self.gate_V, "V", "measured gate voltage", scale=True)}
        for name, data, long_name in (
            ("measured_conductance", self.measured_S, "measured two-terminal conductance"),
            ("model_conductance", self.model_S, "model conductance as measured (with series resistance)"),
            ("model_device_conductance", self.model_device_S, "model conductance of the device alone"),
            ("residual", self.residuals_S, "residual: measured minus model conductance"),
        ):
            items[name] = StoredArray(data, "S", long_name, dims=gate)
        items["curve_gate_voltage"] = StoredArray(self.curve_gate_V, "V", "gate voltage of the dense model curve",
                                                  scale=True)
        items["model_curve"] = StoredArray(self.curve_S, "S", "model conductance as measured, dense curve",
                                           dims=("curve_gate_voltage",))
        params = {}
        for name in self.parameter_names:
            extra = {"stderr": self.stderr[name], "fitted": name in self.fitted}
            if name in (self.bounds or {}):
                extra["bounds"] = np.asarray(self.bounds[name], dtype=float)
            params[name] = StoredArray(self.values[name], PARAMETER_UNITS[name], _PARAMETER_LONG_NAMES[name],
                                       attrs=extra)
        items["parameters"] = StoredGroup(params)
        labels = np.array(self.fitted, dtype=object)
        items["fitted_parameter"] = StoredArray(labels, "", "fitted parameter (rows)", scale=True)
        items["fitted_parameter_2"] = StoredArray(labels, "", "fitted parameter (columns)", scale=True)
        units = " ".join(f"[{PARAMETER_UNITS[n]}]" for n in self.fitted)
        matrix = ("fitted_parameter", "fitted_parameter_2")
        items["covariance"] = StoredArray(self.covariance, f"products of the parameter units {units}",
                                          "covariance of the fitted parameters", dims=matrix)
        items["correlation"] = StoredArray(self.correlation, "1", "correlation of the fitted parameters", dims=matrix)
        write_group(path, group, items, attrs=attrs, overwrite=overwrite)


def _text(value) -> str:
    return value.decode("utf-8") if isinstance(value, bytes) else str(value)


def read_fit(path, group: str = "compare") -> TraceFit:
    """Read a :class:`TraceFit` written by :meth:`TraceFit.to_hdf5`."""
    path = Path(path)
    try:
        f = h5py.File(path, "r")
    except (OSError, FileNotFoundError) as exc:
        raise CompareError(f"{path}: cannot be opened as HDF5 ({' '.join(str(exc).split())}); check the path") from None
    with f:
        if group not in f or _text(f[group].attrs.get("format", "")) != _HDF5_FORMAT:
            raise CompareError(f"{path}: no trace fit in /{group}; pass the group given to TraceFit.to_hdf5")
        g = f[group]
        a = g.attrs
        names = tuple(_text(a["parameter_names"]).split())
        fitted = tuple(_text(a["fitted"]).split())
        return TraceFit(
            source=_text(a["source"]), description=_text(a["description"]), result_path=_text(a["result_path"]),
            mode=_text(a["mode"]), gate_axis=_text(a["gate_axis"]), lead_in=_text(a["lead_in"]),
            lead_out=_text(a["lead_out"]), mu_ref_meV=float(a["mu_ref_meV"]), parameter_names=names,
            fitted=fitted,
            values={n: float(g["parameters"][n][()]) for n in names},
            stderr={n: float(g["parameters"][n].attrs["stderr"]) for n in names},
            covariance=g["covariance"][()], correlation=g["correlation"][()],
            chi_square=float(a["chi_square"]), reduced_chi_square=float(a["reduced_chi_square"]),
            dof=int(a["dof"]), n_points=int(a["n_points"]), noise_S=float(a["noise_S"]),
            noise_source=_text(a["noise_source"]),
            gate_V=g["gate_voltage"][()], measured_S=g["measured_conductance"][()],
            model_S=g["model_conductance"][()], model_device_S=g["model_device_conductance"][()],
            residuals_S=g["residual"][()], curve_gate_V=g["curve_gate_voltage"][()], curve_S=g["model_curve"][()],
            success=bool(a["success"]), message=_text(a["message"]), n_evaluations=int(a["n_evaluations"]),
            mu_ref_source=_text(a.get("mu_ref_source", "")),
            bounds={n: tuple(float(v) for v in g["parameters"][n].attrs["bounds"]) for n in names
                    if "bounds" in g["parameters"][n].attrs},
            predicted_lever_arm=float(a.get("predicted_lever_arm_meV_per_V", float("nan"))),
            predicted_from=_text(a.get("predicted_from", "")),
        )


def _covariance(jac: np.ndarray) -> tuple[np.ndarray, bool]:
    """(J^T J)^-1 by SVD, dropping singular values below rounding; flag rank deficiency."""
    _, s, vt = np.linalg.svd(jac, full_matrices=False)
    threshold = np.finfo(float).eps * max(jac.shape) * (s[0] if s.size else 0.0)
    keep = s > threshold
    vt = vt[keep]
    cov = (vt.T / s[keep] ** 2) @ vt
    return cov, bool(np.count_nonzero(keep) == s.size)


def _parameter_bounds(fitted, p0, bounds, where, *, user_given) -> dict:
    """The range of each fitted parameter: the caller's, else the default (see :data:`LEVER_ARM_RANGE_FACTOR`)."""
    alpha = p0.get("lever_arm", 1.0)
    default = {
        "lever_arm": tuple(sorted((alpha / LEVER_ARM_RANGE_FACTOR, alpha * LEVER_ARM_RANGE_FACTOR))),
        "offset": (-np.inf, np.inf),
        "r_series": (0.0, np.inf),
        "temperature": (_MIN_FIT_TEMPERATURE_K, np.inf),
    }
    floor = {"r_series": (0.0, "0 ohm"), "temperature": (_MIN_FIT_TEMPERATURE_K, f"{_MIN_FIT_TEMPERATURE_K:g} K")}
    out = {}
    for name in fitted:
        if name not in bounds:
            out[name] = default[name]
            continue
        flag, unit = _arg(f"bounds.{name}"), PARAMETER_UNITS[name]
        try:
            lo, hi = (float(v) for v in bounds[name])
        except (TypeError, ValueError):
            raise CompareError(f"{where}: {flag} = {bounds[name]!r}; give two numbers MIN,MAX in {unit}") from None
        if math.isnan(lo) or math.isnan(hi) or not lo < hi:
            raise CompareError(f"{where}: {flag} = ({lo:g}, {hi:g}) {unit} is empty; give MIN < MAX")
        if name in floor and lo < floor[name][0]:
            raise CompareError(f"{where}: {flag} starts at {lo:g} {unit}, below {floor[name][1]}; raise MIN")
        if name == "lever_arm" and lo < 0.0 < hi:
            raise CompareError(f"{where}: {flag} = ({lo:g}, {hi:g}) {unit} contains 0 (no gate effect at all); give "
                               f"a range of one sign")
        if not lo <= p0[name] <= hi:
            raise CompareError(f"{where}: the start {_arg(_START_ARGUMENT[name])} = {p0[name]:g} {unit} lies outside "
                               f"{flag} ({lo:g}, {hi:g}); start inside the range or widen it")
        out[name] = (lo, hi)
    unknown = sorted(set(bounds) - set(fitted))
    if unknown and user_given:
        flags = ", ".join(_arg(f"bounds.{n}") for n in unknown)
        raise CompareError(f"{where}: {flags} given for {unknown}, which are not fitted (fitted: {list(fitted)}); "
                           f"fit them or drop the range")
    return out


def _parameter_scales(fitted, p0, trace) -> np.ndarray:
    """The size of a real step of each fitted parameter, for the "did not move" test.

    Lever arm and temperature: their start values.  Offset: the mean gate
    step of the trace (a shift by one step is a visible change).  Series
    resistance: its start or the resistance at the trace's peak, 1/max(G),
    whichever is larger.
    """
    gate = trace.gate_V
    g_max = float(np.max(np.abs(trace.conductance_S)))
    scale = {
        "lever_arm": abs(p0["lever_arm"]) if "lever_arm" in p0 else 1.0,
        "offset": abs(float(gate[-1] - gate[0])) / max(gate.size - 1, 1),
        "r_series": max(abs(p0["r_series"]), 1.0 / g_max if g_max > 0.0 else 1.0),
        "temperature": abs(p0["temperature"]),
    }
    return np.array([scale[name] for name in fitted])


def _residual_problem(residuals_S, measured_S) -> tuple[float, float]:
    """rms residual over the trace's standard deviation, and that deviation (S); the noise-free failure test.

    Without a given noise the reduced chi-square is 1 by construction and
    tests nothing, so the fit is judged against the trace itself: it fails
    when the rms residual exceeds :data:`MAX_RESIDUAL_SPREAD` (0.5) of the
    trace's standard deviation about its mean, i.e. when the model explains
    less than 75 % of the trace's variance.  The trace's spread is used rather
    than its range because Coulomb peaks are narrow: a model that misses
    every peak leaves residuals of order the spread (ratio >= 1) but only a
    small fraction of the range.  A correct model leaves the noise sigma,
    and sigma^2 = s^2 (signal) + sigma^2 gives ratio sigma / sqrt(s^2 + sigma^2),
    above 0.5 only when the noise exceeds s / sqrt(3) ~ 0.58 of the signal's
    own spread, a trace too noisy to fix a lever arm unless the noise is
    given (then the chi-square test applies instead).
    """
    spread = float(np.std(measured_S))
    rms = float(np.sqrt(np.mean(np.square(residuals_S))))
    if spread == 0.0:
        return (0.0 if rms == 0.0 else math.inf), spread
    return rms / spread, spread


def _problems(*, sweep, trace, fitted, p0, x0, sol, ranges, scales, reduced_chi2, noise_given, sigma, residuals,
              mu_ref, max_evaluations) -> list:
    """Every reason this fit is not worth reporting (empty list for a good fit); clauses name arguments by _arg."""
    problems = []
    starts = ", ".join(f"{_arg(_START_ARGUMENT[n])} {p0[n]:g} {PARAMETER_UNITS[n]}" for n in fitted)
    nearer = ", ".join(_arg(_START_ARGUMENT[n]) for n in fitted if n in ("lever_arm", "offset")) or starts
    moved = np.abs(sol.x - x0) > _UNMOVED_FRACTION * scales
    if not np.any(moved):
        why = ""
        if sweep.mode == "energy":
            mu = sweep.mu(trace.gate_V, p0, mu_ref)
            lo, hi = float(mu.min()), float(mu.max())
            e0, e1 = float(sweep.energies[0]), float(sweep.energies[-1])
            if hi < e0 or lo > e1:
                why = (f" (the trace maps to mu = {lo:.4g}..{hi:.4g} meV, outside the stored energies "
                       f"{e0:.4g}..{e1:.4g} meV)")
            else:
                why = f" (the trace maps to mu = {lo:.4g}..{hi:.4g} meV, where the stored transmission is flat)"
        problems.append(FitProblem(
            "not_moved", "", "", math.nan, math.nan, math.nan,
            f"the fit did not move from its start ({starts}): the model does not change with its parameters "
            f"there{why}; start nearer ({nearer})"))
    for name, xi, (lo, hi), active in zip(fitted, sol.x, (ranges[n] for n in fitted), sol.active_mask):
        tol = 1e-9 * max(abs(lo) if math.isfinite(lo) else 0.0, abs(hi) if math.isfinite(hi) else 0.0, 1e-300)
        side = "lower" if (active < 0 or xi - lo <= tol) else "upper" if (active > 0 or hi - xi <= tol) else ""
        if not side:
            continue
        bound = lo if side == "lower" else hi
        unit = PARAMETER_UNITS[name]
        advice = (f"widen {_arg(f'bounds.{name}')} or start nearer ({_arg(_START_ARGUMENT[name])})"
                  if name in ("lever_arm", "offset") else
                  f"fix it instead (set {_arg(_START_ARGUMENT[name])} and do not fit it) or widen "
                  f"{_arg(f'bounds.{name}')}")
        problems.append(FitProblem(
            "at_bound", name, side, float(bound), float(xi), math.nan,
            f"{_PARAMETER_LABELS[name]} stuck at its {side} bound {bound:g} {unit}; {advice}"))
    if sol.status == 0:
        problems.append(FitProblem(
            "not_converged", "", "", math.nan, float(sol.nfev), float(max_evaluations),
            f"no convergence after {sol.nfev} model evaluations; start nearer ({nearer})"))
    if problems and problems[0].kind == "not_moved":
        return problems  # a bad chi-square or residual then only restates that the start is wrong
    if noise_given:
        if reduced_chi2 > MAX_REDUCED_CHI_SQUARE:
            problems.append(FitProblem(
                "chi_square", "", "", math.nan, float(reduced_chi2), MAX_REDUCED_CHI_SQUARE,
                f"reduced chi-square {reduced_chi2:.3g} > {MAX_REDUCED_CHI_SQUARE:g} with the given noise "
                f"{_arg('noise_S')} {sigma * 1e6:.3g} uS: the model does not describe the trace; start nearer "
                f"({nearer}), check the noise, or also fit the series resistance or temperature "
                f"({_arg('fit_series')}, {_arg('fit_temperature')})"))
    else:
        ratio, spread = _residual_problem(residuals, trace.conductance_S)
        if ratio > MAX_RESIDUAL_SPREAD:
            rms = ratio * spread if math.isfinite(ratio) else float(np.sqrt(np.mean(np.square(residuals))))
            problems.append(FitProblem(
                "residual", "", "", math.nan, float(ratio), MAX_RESIDUAL_SPREAD,
                f"rms residual {rms * 1e6:.3g} uS is {ratio:.3g} of the trace's spread {spread * 1e6:.3g} uS "
                f"(limit {MAX_RESIDUAL_SPREAD:g}): the model does not describe the trace; start nearer ({nearer}) "
                f"or give the noise ({_arg('noise_S')}) to judge the fit by chi-square"))
    return problems


def _fitted_names(sweep, fit, fit_series: bool, fit_temperature: bool, where: str) -> tuple:
    """The fitted parameters in canonical order (default: lever arm and offset, or the offset on a gate axis)."""
    names = sweep.parameter_names
    if fit is None:
        fit = ("lever_arm", "offset") if sweep.mode == "energy" else ("offset",)
    if isinstance(fit, str):
        fit = (fit,)
    fitted = list(dict.fromkeys(fit))
    if fit_series and "r_series" not in fitted:
        fitted.append("r_series")
    if fit_temperature and "temperature" not in fitted:
        fitted.append("temperature")
    bad = [n for n in fitted if n not in names]
    if bad:
        extra = " (a stored gate axis needs no lever arm)" if "lever_arm" in bad and sweep.mode == "gate" else ""
        raise CompareError(f"{where}: cannot fit {bad}{extra} ({_arg('fit')}); fit names are {list(names)}")
    if not fitted:
        raise CompareError(f"{where}: nothing to fit; pass {_arg('fit')} with at least one of {list(names)}")
    return tuple(n for n in names if n in fitted)


def _start_values(sweep, trace, initial: dict, r_series_ohm, temperature_K, fitted, mu_ref: float, where: str) -> dict:
    """Start (or fixed) values of every parameter.

    In energy mode the offset defaults to the gate voltage that puts the trace's middle on the middle of the
    stored energies; on a stored gate axis the offset defaults to 0 V and a lever arm is refused.
    """
    unknown = sorted(set(initial) - {"lever_arm", "offset"})
    if unknown:
        raise CompareError(
            f"{where}: initial names {unknown}; it takes 'lever_arm' and 'offset' (r_series_ohm and temperature_K "
            f"are keywords of their own)"
        )
    p0 = {"r_series": _check_resistance(r_series_ohm), "temperature": _check_temperature(temperature_K, positive=True)}
    if sweep.mode == "energy":
        if "lever_arm" not in initial:
            raise CompareError(
                f"{where}: give the lever arm {_arg('lever_arm')} in meV/V (e.g. the energy spacing of two stored "
                f"peaks over the gate spacing of the measured ones)"
            )
        p0["lever_arm"] = float(initial["lever_arm"])
        if not math.isfinite(p0["lever_arm"]) or p0["lever_arm"] == 0.0:
            raise CompareError(f"{where}: {_arg('lever_arm')} = {p0['lever_arm']!r}; pass a finite, non-zero meV/V")
        e = sweep.energies
        default_offset = 0.5 * (trace.gate_V[0] + trace.gate_V[-1]) - (0.5 * (e[0] + e[-1]) - mu_ref) / p0["lever_arm"]
        p0["offset"] = float(initial.get("offset", default_offset))
    else:
        if "lever_arm" in initial:
            raise CompareError(f"{where}: axis {sweep.gate_axis!r} already is a gate voltage; drop {_arg('lever_arm')}")
        p0["offset"] = float(initial.get("offset", 0.0))
    if not math.isfinite(p0["offset"]):
        raise CompareError(f"{where}: {_arg('offset')} = {p0['offset']!r}; pass a finite gate voltage in V")
    if "temperature" in fitted:
        p0["temperature"] = max(p0["temperature"], _MIN_FIT_TEMPERATURE_K)
    return p0


def predicted_lever_arm(path, *, region: str, gate: str) -> tuple[float, str]:
    """The lever arm (meV/V) of ``gate`` on dot ``region`` that a run stored from the layout's electrostatics.

    Reads ``electrostatics/capacitance`` of a result file (written by ``rgftrans run`` for configs with
    ``[[gates.region]]``): alpha = C_region,gate / C_total, times 1000 meV/V (the energy an electron's level
    moves per volt on the gate, e alpha).

    Returns
    -------
    (float, str)
        The lever arm in meV/V and a description of where it came from, for :func:`fit_trace`.
    """
    path = Path(path)
    try:
        f = h5py.File(path, "r")
    except (OSError, FileNotFoundError) as exc:
        raise CompareError(f"{path}: cannot be opened as HDF5 ({' '.join(str(exc).split())}); check the path") from None
    with f:
        if "electrostatics/capacitance" not in f:
            raise CompareError(f"{path}: no predicted lever arms (group electrostatics/capacitance); run a config "
                               "with screening = \"thomas-fermi\" and a [[gates.region]] for the dot")
        g = f["electrostatics/capacitance"]
        regions = [_text(v) for v in g["region"][()]]
        gates = [_text(v) for v in g["gate"][()]]
        if region not in regions:
            raise CompareError(f"{path}: no region {region!r} among the stored {regions}; name one of them")
        if gate not in gates:
            raise CompareError(f"{path}: no gate {gate!r} among the stored {gates}; name one of them")
        alpha = float(g["lever_arm"][regions.index(region), gates.index(gate)])
    if not math.isfinite(alpha) or alpha == 0.0:
        raise CompareError(f"{path}: the stored lever arm of gate {gate!r} on region {region!r} is {alpha!r} (a "
                           "depleted or uncoupled region); choose another region or gate")
    return 1000.0 * alpha, f"region {region!r}, gate {gate!r} of {path.name}"


def fit_trace(result, trace: MeasuredTrace, *, temperature_K, fit=None, r_series_ohm=0.0, fit_series: bool = False,
              fit_temperature: bool = False, noise_S=None, initial: Mapping[str, float] | None = None,
              bounds: Mapping[str, tuple] | None = None, mu_ref_meV: float | None = None, leads=None,
              gate_axis=None, select=None, max_evaluations: int = 2000, predicted_lever_arm=None) -> TraceFit:
    """Fit a stored sweep to a measured trace by least squares, or fail loudly.

    Minimises sum_i ((G_meas,i - G_model,i) / sigma)² over the fitted
    parameters, with G_model = add_series_resistance(G(mu(V_i), T), R_s) (the
    model is brought to the measured quantity, so the data are never
    corrected).  Trust-region reflective least squares
    (:func:`scipy.optimize.least_squares`, scaled by the Jacobian) within the
    parameters' ranges (``bounds``).

    A fit is returned only when it is worth reporting; otherwise
    :class:`TraceFitFailed` is raised (module docstring, "Failure").

    Parameters
    ----------
    result : str, os.PathLike or ResultData
    trace : MeasuredTrace
    temperature_K : float, K, keyword-only
        Electron temperature (start value if ``fit_temperature``).
    fit : iterable of str, keyword-only
        Names of the fitted parameters among "lever_arm", "offset",
        "r_series", "temperature".  Default ("lever_arm", "offset") in energy
        mode, ("offset",) in gate mode.
    r_series_ohm : float, ohm, keyword-only
        Series resistance (start value if fitted).
    fit_series, fit_temperature : bool, keyword-only
        Add "r_series" / "temperature" to ``fit``.
    noise_S : float, S, keyword-only
        The measurement's noise sigma.  None: estimated from the residual rms
        (reduced chi-square then 1 by construction; the fit is judged by its
        residual against the trace's spread instead, see :func:`_residual_problem`).
    initial : dict, keyword-only
        "lever_arm" (meV/V; required in energy mode, start value or fixed
        value, e.g. ΔE between two stored peaks / ΔV_g between the measured
        ones) and "offset" (V; default: the centre of the trace maps to the
        centre of the stored energy grid, or 0 in gate mode).
    bounds : dict of str to (float, float), keyword-only
        Range of a fitted parameter, in its units.  Defaults: lever arm of the
        start's sign within a factor :data:`LEVER_ARM_RANGE_FACTOR` of it;
        offset free; series resistance >= 0; temperature >= 1e-4 K.  A start
        outside a given range is refused.
    mu_ref_meV : float, meV, keyword-only
        The chemical potential at V_g = V_0.  Default: the sweep's stored
        Fermi energy (file attribute ``fermi_energy_meV``) where it has one,
        else 0 meV; :attr:`TraceFit.mu_ref_source` says which.
    leads, gate_axis, select
        As in :func:`model_conductance`.
    max_evaluations : int, keyword-only
        Cap on model evaluations.
    predicted_lever_arm : (float, str), keyword-only
        The layout's prediction of the lever arm (meV/V) and where it came from (see
        :func:`predicted_lever_arm`).  Energy mode: the start value unless ``initial`` gives one; the result
        reports the fitted value's distance from it.

    Returns
    -------
    TraceFit

    Raises
    ------
    CompareError
        Bad input (one line, naming the argument; within
        :func:`argument_names` the caller's spelling, e.g. command-line flags).
    TraceFitFailed
        The optimiser did not move from its start, a fitted parameter ended
        at a bound, no convergence within ``max_evaluations``, reduced
        chi-square above :data:`MAX_REDUCED_CHI_SQUARE` (noise given) or rms
        residual above :data:`MAX_RESIDUAL_SPREAD` of the trace's spread
        (noise estimated).  One line naming each problem and what to try;
        ``problems`` and ``attempt`` carry the details.

    Warns
    -----
    ResolutionWarning
        At the fitted parameters: a gate step mapping to more than kT/2; an
        energy grid not covering the mapped window ± 20 kT or coarser than kT/2 in it.
    FitWarning
        Singular covariance (a parameter not determined).
    """
    if not isinstance(trace, MeasuredTrace):
        raise CompareError(f"trace must be a MeasuredTrace (from read_trace), got {type(trace).__name__}")
    sweep = _Sweep(result, leads=leads, gate_axis=gate_axis, select=select)
    where = f"{trace.source or 'trace'} vs {sweep.path}"
    names = sweep.parameter_names
    fitted = _fitted_names(sweep, fit, fit_series, fit_temperature, where)
    n, k = trace.n_points, len(fitted)
    if n <= k:
        raise CompareError(f"{where}: {n} points cannot determine {k} parameters; measure more points or fit fewer")
    mu_ref, mu_ref_source = _reference_potential(sweep, mu_ref_meV)
    predicted, predicted_from = float("nan"), ""
    if predicted_lever_arm is not None:
        if sweep.mode != "energy":
            raise CompareError(f"{where}: axis {sweep.gate_axis!r} already is a gate voltage, so no lever arm is "
                               "fitted; drop the predicted lever arm")
        predicted, predicted_from = float(predicted_lever_arm[0]), str(predicted_lever_arm[1])
        if not math.isfinite(predicted) or predicted == 0.0:
            raise CompareError(f"{where}: predicted lever arm {predicted!r} meV/V is not a finite, non-zero number")
        initial = dict(initial or {})
        initial.setdefault("lever_arm", predicted)
    p0 = _start_values(sweep, trace, dict(initial or {}), r_series_ohm, temperature_K, fitted, mu_ref, where)
    if noise_S is not None:
        sigma = float(noise_S)
        if not math.isfinite(sigma) or sigma <= 0.0:
            raise CompareError(f"{where}: {_arg('noise_S')} = {noise_S!r}; pass the positive noise sigma in S, or "
                               f"leave it out to estimate it")
    ranges = _parameter_bounds(fitted, p0, dict(bounds or {}), where, user_given=bounds is not None)

    gate = trace.gate_V
    g_meas = trace.conductance_S
    scale = sigma if noise_S is not None else CONDUCTANCE_QUANTUM_S  # whitening: residuals in sigma (or in 2e²/h until estimated)

    def params(x):
        p = dict(p0)
        p.update(zip(fitted, x))
        return p

    def model(p, v):
        return add_series_resistance(sweep.device_g0(v, p, mu_ref) * CONDUCTANCE_QUANTUM_S, p["r_series"])

    def residual(x):
        return (g_meas - model(params(x), gate)) / scale

    x0 = np.array([p0[name] for name in fitted])
    lb = np.array([ranges[name][0] for name in fitted])
    ub = np.array([ranges[name][1] for name in fitted])
    sol = least_squares(residual, x0, bounds=(lb, ub), x_scale="jac", max_nfev=max_evaluations)
    p = params(sol.x)
    whitened = sol.fun
    chi2 = float(whitened @ whitened)
    dof = n - k
    cov, full_rank = _covariance(sol.jac)
    if noise_S is None:
        s2 = chi2 / dof  # estimated sigma², in units of scale²
        sigma = math.sqrt(s2) * scale
        cov = cov * s2
        chi2, noise_source = float(dof), "estimated"
    else:
        noise_source = "given"
    err = np.sqrt(np.clip(np.diag(cov), 0.0, None))
    with np.errstate(invalid="ignore", divide="ignore"):
        corr = cov / np.outer(err, err)
    stderr = {name: float("nan") for name in names}
    stderr.update(zip(fitted, (float(v) for v in err)))

    device = sweep.device_g0(gate, p, mu_ref) * CONDUCTANCE_QUANTUM_S
    model_S = add_series_resistance(device, p["r_series"])
    m = int(np.clip(_CURVE_DENSITY * n, _CURVE_MIN, _CURVE_MAX))
    curve_gate = np.linspace(gate[0], gate[-1], m)
    for arr in (device, model_S):
        arr.setflags(write=False)
    residuals = g_meas - model_S
    problems = _problems(sweep=sweep, trace=trace, fitted=fitted, p0=p0, x0=x0, sol=sol, ranges=ranges,
                         scales=_parameter_scales(fitted, p0, trace), reduced_chi2=chi2 / dof,
                         noise_given=noise_S is not None, sigma=sigma, residuals=residuals, mu_ref=mu_ref,
                         max_evaluations=max_evaluations)
    message = "; ".join(pr.text for pr in problems) if problems else sol.message
    if not full_rank:
        message += "; singular covariance"
    outcome = TraceFit(
        source=trace.source, description=trace.description, result_path=sweep.path, mode=sweep.mode,
        gate_axis=sweep.gate_axis or "", lead_in=sweep.lead_in, lead_out=sweep.lead_out, mu_ref_meV=mu_ref,
        parameter_names=names, fitted=fitted, values={name: float(p[name]) for name in names}, stderr=stderr,
        covariance=cov, correlation=corr, chi_square=chi2, reduced_chi_square=chi2 / dof, dof=dof, n_points=n,
        noise_S=float(sigma), noise_source=noise_source, gate_V=gate, measured_S=g_meas, model_S=model_S,
        model_device_S=device, residuals_S=residuals, curve_gate_V=curve_gate,
        curve_S=model(p, curve_gate), success=not problems, message=message, n_evaluations=int(sol.nfev),
        mu_ref_source=mu_ref_source, bounds={name: tuple(float(v) for v in ranges[name]) for name in fitted},
        predicted_lever_arm=predicted, predicted_from=predicted_from,
    )
    if problems:
        # No warnings about resolution or covariance at parameters nobody should use: the one line says it all.
        raise TraceFitFailed(f"{where}: {message}", problems, outcome)
    if not full_rank:
        warnings.warn(f"{where}: the fit does not determine every parameter of {list(fitted)} (singular covariance); "
                      f"fix some of them or measure a wider gate range", FitWarning, stacklevel=2)
    sweep.check_resolution(gate, p, mu_ref, stacklevel=3)
    return outcome
