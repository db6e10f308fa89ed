"""Temperature broadening: the Fermi window, a thermally smeared step and Breit-Wigner resonance, k_B T.

Sources (recalled, not read: "from memory"):

* Fermi window -f' = 1/(4 k_BT cosh²((E - mu)/2k_BT)), its normalisation, peak
  1/(4 k_BT) and second moment π²(k_BT)²/3: standard statistical mechanics,
  S. Datta, *Electronic Transport in Mesoscopic Systems* (CUP 1995), ch. 2;
  Sommerfeld expansion: N. W. Ashcroft & N. D. Mermin, *Solid State Physics*
  (1976), ch. 2 (both from memory).
* G(mu, T) = ∫ T(E) (-f') dE: Datta 1995 ch. 2; U. Sivan & Y. Imry, PRB 33, 551
  (1986) (both from memory).
* Thermally broadened resonance, peak ∝ Γ/k_BT for k_BT >> Γ: C. W. J.
  Beenakker, PRB 44, 1646 (1991) (from memory).  The trigamma closed form
  G = (Γ/(4π kT)) Re ψ'(1/2 + (Γ/2 + i(E0 - mu))/(2π kT)), its Taylor and
  Sommerfeld limits, and FWHM = 4 ln(1 + √2) k_BT are our own evaluations,
  checked numerically (adaptive quadrature to 1e-12); not published.
* k_B and e exact since the 2019 SI (BIPM SI Brochure, 9th ed. 2019, from
  memory), via scipy.constants.
* Tabulated values (12 decimals) are our own evaluation of these closed forms,
  confirmed by adaptive quadrature; regression numbers, not quoted from a paper.

How the package integrates: T(E) is taken as the piecewise-linear interpolant
of its samples and integrated exactly against -df/dE (rgftrans.analysis.thermal), so
its only quadrature error is the interpolation error, whose leading term on a
cell [a, b] of width h is (h²/12) ∫ T'' (-f') dE.  The Breit-Wigner tests
evaluate that term for their grid and set the tolerance from it.
"""

import numpy as np
import pytest
from scipy.integrate import quad
from scipy.optimize import brentq
from scipy.special import expit, polygamma, psi, zeta

from rgftrans.analysis.thermal import BOLTZMANN_MEV_PER_K, fermi, fermi_window, thermal_conductance, thermal_energy_meV

#: Values quoted to 12 decimals: half a unit of the last digit.
HALF_ULP_12 = 5e-13
#: scipy quad of the smooth window to epsabs 1e-13 over ±60 kT (the tails beyond weigh 2e-26).
TOL_QUAD = 1e-12
#: Temperatures (K) for the window checks: sub-kelvin to room temperature.
TEMPERATURES = [0.05, 1.0, 4.2, 300.0]


def kelvin(kT_meV):
    """Temperature in K giving k_B T = kT_meV."""
    return kT_meV / BOLTZMANN_MEV_PER_K


# --- k_B T (k_B and e exact in the 2019 SI) ------------------------------------------------


@pytest.mark.parametrize("temperature_K, kT_table_meV", [
    (1.0, 86.173333e-3),   # k_B/e x 1 K = 86.173333 µeV (our evaluation, exact 2019 SI constants)
    (4.2, 0.361928),       # k_B/e x 4.2 K = 0.361928 meV (same)
])
def test_thermal_energy_table(temperature_K, kT_table_meV):
    # k_B, e exact (2019 SI) via scipy.constants; the values quote 6 decimals (of µeV at 1 K, of meV at 4.2 K), so the
    # tolerance is half a unit of the last quoted digit (5e-10 meV and 5e-7 meV: 6e-9 and 1.4e-6 relative).
    half_unit = 5e-10 if temperature_K == 1.0 else 5e-7
    assert abs(thermal_energy_meV(temperature_K) - kT_table_meV) <= half_unit


# --- the Fermi window (Datta 1995 ch. 2, from memory) ---------------------------------------------


@pytest.mark.parametrize("temperature_K", TEMPERATURES)
def test_window_normalised(temperature_K):
    kT = thermal_energy_meV(temperature_K)
    total, _ = quad(fermi_window, -60 * kT, 60 * kT, args=(0.0, temperature_K), epsabs=1e-13, epsrel=1e-13,
                    points=[0.0])
    assert abs(total - 1.0) <= TOL_QUAD  # ∫(-f')dE = 1 (Datta 1995 ch. 2, from memory); quad tolerance


@pytest.mark.parametrize("temperature_K", TEMPERATURES)
def test_window_peak_height(temperature_K):
    kT = thermal_energy_meV(temperature_K)
    # Peak 1/(4 k_B T) at E = mu (Datta 1995 ch. 2, from memory); a few roundings of exp and division: 1e-15 (~4.5 ulp).
    assert fermi_window(1.5, 1.5, temperature_K) == pytest.approx(1.0 / (4.0 * kT), rel=1e-15)


@pytest.mark.parametrize("temperature_K", TEMPERATURES)
def test_window_second_moment(temperature_K):
    kT = thermal_energy_meV(temperature_K)

    def integrand(e):
        return e * e * fermi_window(e, 0.0, temperature_K) / kT**2

    moment, _ = quad(integrand, -60 * kT, 60 * kT, epsabs=1e-13, epsrel=1e-13, points=[0.0])
    # Second moment π²(k_BT)²/3 = 3.289868133696 (k_BT)² (Sommerfeld expansion, Ashcroft & Mermin 1976
    # ch. 2, from memory); quad tolerance, in units of (k_BT)².
    assert abs(moment - np.pi**2 / 3) <= TOL_QUAD
    assert abs(np.pi**2 / 3 - 3.289868133696) <= HALF_ULP_12  # our 12-decimal value of π²/3


@pytest.mark.parametrize("temperature_K", TEMPERATURES)
def test_window_fwhm(temperature_K):
    kT = thermal_energy_meV(temperature_K)
    half = 0.5 * fermi_window(0.0, 0.0, temperature_K)
    edge = brentq(lambda e: fermi_window(e, 0.0, temperature_K) - half, 0.0, 10 * kT, xtol=1e-15 * kT,
                  rtol=1e-15)
    fwhm = 2 * edge / kT
    # FWHM = 3.525494348 k_BT (our evaluation), quoted to 9 decimals (half unit 5e-10); brentq solves to ~1e-15.
    assert abs(fwhm - 3.525494348) <= 5e-10 + 1e-13
    # FWHM = 4 arccosh(√2) k_BT = 4 ln(1 + √2) k_BT (own evaluation: cosh² = 2 at half maximum);
    # root-finding and rounding tolerance.
    assert fwhm == pytest.approx(4 * np.log1p(np.sqrt(2.0)), rel=1e-13)


# --- a transmission step: G = f(E0 - mu) (elementary integral of -f', common practice) -----------------


#: Width (meV) of the ramp the piecewise-linear interpolant puts in place of the step: its error is at
#: most RAMP * max(-f')/2 = RAMP / (8 kT) = 6e-13 at kT = 0.2 meV.
RAMP = 1e-12


def step_grid(e0, kT):
    """A grid over e0 ± 60 kT, spacing kT/100, with the step Θ(E - e0) between e0 - RAMP and e0."""
    below = np.linspace(e0 - 60 * kT, e0 - RAMP, 6001)
    above = np.linspace(e0, e0 + 60 * kT, 6001)
    e = np.concatenate([below, above])
    return e, (e >= e0).astype(float)


def test_step_table():
    e0, mu, kT = 1.0, 1.3, 0.2  # mu - E0 = 0.3, k_BT = 0.2 (our case)
    e, t = step_grid(e0, kT)
    g = float(thermal_conductance(e, t, mu, kelvin(kT)).conductance_g0)
    # G = f(E0 - mu) = 0.817574476194 (our 12-decimal evaluation); tolerance: ramp error (6e-13) + table half unit (5e-13).
    assert abs(g - 0.817574476194) <= RAMP / (8 * kT) + HALF_ULP_12
    # The same number is the Fermi function itself at E0 - mu (half a unit of the 12th decimal).
    assert abs(fermi(e0, mu, kelvin(kT)) - 0.817574476194) <= HALF_ULP_12


@pytest.mark.parametrize("mu_minus_e0, kT", [(0.3, 0.2), (-0.05, 0.01), (0.0, 0.1), (2.0, 0.5), (-1.0, 0.3)])
def test_step_closed_form(mu_minus_e0, kT):
    e0 = -0.4
    e, t = step_grid(e0, kT)
    g = float(thermal_conductance(e, t, e0 + mu_minus_e0, kelvin(kT)).conductance_g0)
    # G = f(E0 - mu) = 1/(1 + exp(-(mu - E0)/kT)) (∫_E0^∞ (-f') dE, common practice); tolerance: ramp error RAMP/(8 kT) plus rounding.
    assert abs(g - expit(mu_minus_e0 / kT)) <= RAMP / (8 * kT) + 1e-14


# --- thermally broadened Breit-Wigner resonance (Beenakker 1991, from memory; own trigamma form) ---------


#: Asymptotic coefficients B_2k of the trigamma expansion ψ'(w) ~ 1/w + 1/(2w²) + Σ B_2k / w^(2k+1).
_BERNOULLI = (1 / 6, -1 / 30, 1 / 42, -1 / 30, 5 / 66, -691 / 2730, 7 / 6)
#: Recurrence shift: ψ'(z) = Σ_{n<N} 1/(z+n)² + ψ'(z+N); at |z + N| >= 20 the first omitted asymptotic
#: term (3617/510)/|w|^17 is below 1e-21.
_SHIFT = 20


def trigamma(z):
    """ψ'(z) for complex z with Re z > 0 (scipy's polygamma is real-only): recurrence, then asymptotics."""
    z = np.asarray(z, dtype=complex)
    total = sum(1.0 / (z + n) ** 2 for n in range(_SHIFT))
    w = z + _SHIFT
    tail = 1.0 / w + 0.5 / w**2 + sum(b / w ** (2 * k + 1) for k, b in enumerate(_BERNOULLI, 1))
    return total + tail


@pytest.mark.parametrize("x", [0.5, 0.5079577, 1.3, 8.45, 40.0])
def test_trigamma_real_axis(x):
    # Our complex trigamma against scipy.special.polygamma(1, x) on the real axis; rounding tolerance.
    assert trigamma(x).real == pytest.approx(polygamma(1, x), rel=1e-14)


@pytest.mark.parametrize("z", [0.5 + 0.3183j, 0.6 - 2.0j, 1.3 + 0.01j, 3.0 + 7.0j])
def test_trigamma_complex(z):
    # Our complex trigamma against a five-point derivative of scipy.special.psi (complex digamma): the
    # stencil errs by h^4 |ψ^(5)|/30 <= 1e-11 at h = 1e-3 plus rounding 1e-16/h, so 1e-10.
    h = 1e-3
    derivative = (-psi(z + 2 * h) + 8 * psi(z + h) - 8 * psi(z - h) + psi(z - 2 * h)) / (12 * h)
    assert abs(trigamma(z) - derivative) <= 1e-10


def breit_wigner(e, e0, gamma):
    """Unit-peak resonance of FWHM gamma at e0: T = (Γ/2)² / ((E - E0)² + (Γ/2)²) (Breit & Wigner, Phys. Rev. 49, 519 (1936), from memory)."""
    half = 0.5 * gamma
    return half**2 / ((e - e0) ** 2 + half**2)


def breit_wigner_thermal(e0_minus_mu, gamma, kT):
    """Own closed form (checked by quadrature): G = (Γ/(4π kT)) Re ψ'(1/2 + (Γ/2 + i (E0 - mu)) / (2π kT))."""
    return gamma / (4 * np.pi * kT) * trigamma(0.5 + (0.5 * gamma + 1j * e0_minus_mu) / (2 * np.pi * kT)).real


# Our 12-decimal evaluation of the trigamma form, confirmed by adaptive quadrature: (E0 - mu, Γ, k_BT) -> G.
BREIT_WIGNER_TABLE = [
    (0.0, 0.01, 0.01, 0.306375128353),
    (0.0, 0.01, 0.1, 0.038228250279),
    (0.02, 0.01, 0.01, 0.162695104529),
    (0.0, 0.001, 0.1, 0.003916358349),
    (0.0, 0.1, 0.001, 0.998691237116),
]
#: Grid: E = E0 + (Γ/2) sinh(s), s uniform over mu ± 50 kT (window weight outside 4e-22).  The
#: interpolant's error is second order in the s-step: (h²/12) ∫ T''(-f') with h ≈ (Γ/2) cosh(s) ds, i.e.
#: ~ ds²/6 times the window weight inside the resonance core, min(1, ~Γ/kT).  A step DS where kT >= Γ
#: and DS sqrt(kT/Γ) where kT < Γ keeps it below 3e-10 (the test computes it); the spacing stays below
#: kT/100, so no ResolutionWarning.
DS = 1e-4
#: Accepted difference from table and closed form: the leading interpolation error (<= 3e-10) bounds the
#: package's quadrature error; 1e-9 leaves room for its next order and the table's rounding.
TOL_BW = 1e-9


def breit_wigner_grid(e0, gamma, kT, mu=0.0):
    half = 50 * kT
    ds = DS * min(1.0, np.sqrt(kT / gamma))
    s = np.arange(np.arcsinh((mu - half - e0) / (0.5 * gamma)), np.arcsinh((mu + half - e0) / (0.5 * gamma)), ds)
    return e0 + 0.5 * gamma * np.sinh(s)


def interpolation_error(e, e0, gamma, kT):
    """Leading error of the package's G for this grid: Σ_cells h³ T''(mid) (-f'(mid)) / 12 (mu = 0)."""
    h = np.diff(e)
    x = 0.5 * (e[1:] + e[:-1]) - e0
    c = 0.5 * gamma
    t2 = c**2 * (6 * x**2 - 2 * c**2) / (x**2 + c**2) ** 3  # d²T/dE² of the Lorentzian
    return float(np.sum(h**3 * t2 * fermi_window(x + e0, 0.0, kelvin(kT))) / 12)


@pytest.mark.parametrize("e0_minus_mu, gamma, kT, g_table", BREIT_WIGNER_TABLE)
def test_breit_wigner_table(e0_minus_mu, gamma, kT, g_table):
    e = breit_wigner_grid(e0_minus_mu, gamma, kT)
    result = thermal_conductance(e, breit_wigner(e, e0_minus_mu, gamma), 0.0, kelvin(kT))
    g = float(result.conductance_g0)
    leading = interpolation_error(e, e0_minus_mu, gamma, kT)
    assert abs(leading) <= 3e-10  # the grid resolves min(Γ, kT) (our choice of grid, see DS)
    # Our table; tolerance TOL_BW set by the grid's interpolation error (above).
    assert abs(g - g_table) <= TOL_BW
    # Trigamma closed form (our own evaluation); same tolerance.
    closed = breit_wigner_thermal(e0_minus_mu, gamma, kT)
    assert abs(g - closed) <= TOL_BW
    # The package's error *is* its leading interpolation term: after removing it what is left is the
    # next order (~DS^4) and rounding; 1e-12 (10 cells' worth of rounding on ~1e5 cells is far less).
    assert abs(g - leading - closed) <= 1e-12
    # Our table against our closed form: the table's rounding.
    assert abs(closed - g_table) <= HALF_ULP_12 + 1e-14


@pytest.mark.parametrize("gamma_over_kT", [1e-3, 1e-2, 0.05])
def test_breit_wigner_wide_window_limit(gamma_over_kT):
    # Beenakker PRB 44, 1646 (1991), from memory: for k_BT >> Γ the peak is πΓ/(8 k_BT).  With
    # ε = Γ/(4π kT), G = ε Σ_n ψ^(n+1)(1/2) ε^n / n! = (π²/2) ε - 14 ζ(3) ε² + (π⁴/2) ε³ - ... (our Taylor
    # expansion of the trigamma closed form; alternating with decreasing terms), so
    # G = πΓ/(8kT) (1 - 7ζ(3) Γ/(π³ kT)) to within the first omitted term (π⁴/2) ε³.
    kT = 0.1
    gamma = gamma_over_kT * kT
    e = breit_wigner_grid(0.0, gamma, kT)
    g = float(thermal_conductance(e, breit_wigner(e, 0.0, gamma), 0.0, kelvin(kT)).conductance_g0)
    eps = gamma / (4 * np.pi * kT)
    two_terms = np.pi * gamma / (8 * kT) * (1 - 7 * zeta(3) * gamma / (np.pi**3 * kT))
    assert abs(g - two_terms) <= np.pi**4 / 2 * eps**3 + TOL_BW
    # and the leading scaling alone, to its first correction 14 ζ(3) ε²
    assert abs(g - np.pi * gamma / (8 * kT)) <= 14 * zeta(3) * eps**2 + np.pi**4 / 2 * eps**3 + TOL_BW


@pytest.mark.parametrize("kT_over_gamma", [1e-3, 1e-2, 0.03])
def test_breit_wigner_narrow_window_limit(kT_over_gamma):
    # For k_BT << Γ, G -> 1.  Sommerfeld expansion (Ashcroft & Mermin 1976 ch. 2, from memory) (from the second moment π²(kT)²/3 and fourth
    # moment 7π⁴(kT)⁴/15 of -f'): G = 1 + T''(E0) π² kT²/6 + T''''(E0) 7π⁴ kT⁴/360 + ... with
    # T'' = -8/Γ², T'''' = 384/Γ⁴; tolerance: twice the next term (31π⁶/15120)(46080) r⁶ (asymptotic series).
    gamma = 0.1
    kT = kT_over_gamma * gamma
    e = breit_wigner_grid(0.0, gamma, kT)
    g = float(thermal_conductance(e, breit_wigner(e, 0.0, gamma), 0.0, kelvin(kT)).conductance_g0)
    r = kT_over_gamma
    sommerfeld = 1 - (4 * np.pi**2 / 3) * r**2 + (7 * np.pi**4 / 360) * 384 * r**4
    next_term = (31 * np.pi**6 / 15120) * 46080 * r**6
    assert abs(g - sommerfeld) <= 2 * next_term + TOL_BW
