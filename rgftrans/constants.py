"""Physical constants and numerical thresholds shared by several modules, each defined once.

Physical constants come from CODATA through :mod:`scipy.constants`, in the
package's units (meV, K, T, S).
"""

from scipy import constants as _codata

__all__ = ["CONDUCTANCE_QUANTUM_S", "BOLTZMANN_MEV_PER_K", "BOHR_MAGNETON_MEV_PER_T", "HBAR_MEV_S",
           "THERMAL_CUTOFF_KT", "SINGULAR_ETA"]

#: Conductance quantum 2e²/h in siemens (CODATA, exact since the 2019 SI).
CONDUCTANCE_QUANTUM_S = 2.0 * _codata.e**2 / _codata.h
#: Boltzmann constant in meV/K.
BOLTZMANN_MEV_PER_K = _codata.k / _codata.e * 1e3
#: Bohr magneton in meV/T.
BOHR_MAGNETON_MEV_PER_T = _codata.physical_constants["Bohr magneton in eV/T"][0] * 1e3
#: Reduced Planck constant in meV s (CODATA, exact since the 2019 SI): a width Gamma (meV) is a rate Gamma / hbar
#: (1/s), a slope dE/dk (meV nm) a velocity dE/dk / hbar (1e-9 m/s per meV nm / (meV s)).
HBAR_MEV_S = _codata.hbar / _codata.e * 1e3
#: Thermal windows -df/dE are cut at |E - mu| = THERMAL_CUTOFF_KT k_B T: the tail beyond holds
#: 1/(1 + e^40) ~ 4e-18 of the weight, far below double precision relative to the integral.
THERMAL_CUTOFF_KT = 40.0
#: Imaginary part (in units of the model's energy scale) added to an energy where the device's Green's function is
#: singular on the real axis (a bound state exactly at the sampled energy): small against every width the package
#: resolves, large against round-off.
SINGULAR_ETA = 1e-10
