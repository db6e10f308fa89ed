"""Disorder ensembles (rgftrans.transport.ensemble): samples equal rebuilt devices, statistics, localisation.

References: scipy's sparse LU (via transmission_direct) for single samples; the Gaussian closed form of the
standard error of a sample variance; Thouless's weak-disorder localisation length of the one-dimensional
Anderson chain, xi = 24 (4t^2 - E^2) / W^2 (D. J. Thouless, in Ill-Condensed Matter, Les Houches 1978,
North-Holland 1979, from memory); the universal conductance fluctuations var G = (2/15) (2e^2/h)^2 of a
quasi-one-dimensional diffusive wire without a field (Lee & Stone, Phys. Rev. Lett. 55, 1622 (1985); the
2/(15 beta) form in Beenakker, Rev. Mod. Phys. 69, 731 (1997), both from memory).
"""

import dataclasses
import warnings

import numpy as np
import pytest
import scipy.constants as sc

from rgftrans.errors import FitFailed, LeadError, PotentialError, ValidityWarning
from rgftrans.system.device import Device, Lead
from rgftrans.system.fields import Disorder, MagneticField
from rgftrans.system.geometry import disk, rectangle
from rgftrans.system.lattices import honeycomb, square, triangular
from rgftrans.transport.direct import transmission_direct
from rgftrans.transport.ensemble import (DisorderSampler, disorder_ensemble, localisation_length,
                                         variance_error)
from rgftrans.transport.rgf import transmission


def _strip(width, length, disorder=1.5, seed=0, **kwargs):
    return Device(rectangle(0, 0, length - 1, width - 1),
                  [Lead("left", "left", (0, width - 1)), Lead("right", "right", (0, width - 1))],
                  lattice=kwargs.pop("lattice", square(1.0)), hopping=1.0, energy_origin="band_centre",
                  disorder=Disorder(disorder, seed), **kwargs)


def _chain(length, disorder, seed=0):
    """A one-dimensional chain of ``length`` sites (spacing 1 nm, t = 1 meV) with chain leads."""
    return Device(rectangle(0, -0.4, length - 1, 0.4),
                  [Lead("left", "left", (-0.4, 0.4)), Lead("right", "right", (-0.4, 0.4))],
                  lattice=square(1.0), hopping=1.0, energy_origin="band_centre", disorder=Disorder(disorder, seed))


DEVICES = {
    "square": lambda: _strip(9, 25),
    "square, field": lambda: _strip(9, 25, field=MagneticField(flux_per_cell=0.03)),
    "square, spin and Rashba": lambda: _strip(6, 14, spin=True, rashba=0.2,
                                              field=MagneticField(tesla=0.0)),
    "honeycomb": lambda: Device(rectangle(0, 0, 14, 8), [Lead("left", "left", (0, 8)), Lead("right", "right", (0, 8))],
                                lattice=honeycomb(1.0), hopping=1.0, energy_origin="band_centre",
                                disorder=Disorder(1.0, 4)),
    "triangular with a hole": lambda: Device(
        rectangle(0, 0, 24, 10) - disk((12, 5), 2.5), [Lead("left", "left", (0, 10)), Lead("right", "right", (0, 10))],
        lattice=triangular(1.0), hopping=1.0, energy_origin="band_centre", disorder=Disorder(1.2, 2)),
}


@pytest.mark.parametrize("name", sorted(DEVICES))
@pytest.mark.parametrize("solver", ["rgf", "dissection"])
def test_each_sample_is_the_rebuilt_device(name, solver):
    """Sample k of an ensemble equals the device rebuilt with Disorder(W, k), and a sparse LU solve of it.

    Tolerance 1e-10 relative: both sides solve the same matrix, so only round-off separates them.
    """
    device = DEVICES[name]()
    energies = [-0.9, 0.35, 1.3]
    sampler = DisorderSampler(device, energies, solver=solver)
    assert sampler.solver == solver
    for seed in (5, 11):
        rebuilt = dataclasses.replace(device, disorder=Disorder(device.disorder.width_meV, seed)).discretise()
        got = sampler.transmission(seed)
        ref = transmission(rebuilt, energies, solver="rgf").transmission
        assert np.allclose(got, ref, rtol=1e-10, atol=1e-12)
        lu = transmission_direct(rebuilt, energies)[:, 1, 0]  # scipy splu, the outside reference
        assert np.allclose(got, lu, rtol=1e-10, atol=1e-12)
        assert np.ptp(got) > 0 or len(energies) == 1


def test_sample_model_and_onsite_values_are_the_devices():
    device = _strip(7, 18, disorder=2.0, seed=3)
    sampler = DisorderSampler(device, [0.4])
    rebuilt = dataclasses.replace(device, disorder=Disorder(2.0, 9)).discretise()
    model = sampler.model_of(9)
    assert abs(model.hamiltonian - rebuilt.hamiltonian).max() < 1e-12
    assert np.ptp(sampler.onsite(9)) > 1.5  # W = 2 over 126 sites: the disorder is there
    assert np.all(np.abs(sampler.onsite(9)) <= 1.0)
    # a width given per call scales the same draws
    assert np.allclose(sampler.onsite(9, width_meV=4.0), 2 * sampler.onsite(9), rtol=0, atol=1e-15)


@pytest.mark.filterwarnings("ignore:3 disorder samples")
def test_ensemble_seeds_and_reproducibility():
    device = _strip(6, 12, seed=40)
    res = disorder_ensemble(device, [0.2, 0.7], samples=60)
    assert list(res.seeds) == list(range(40, 100))
    again = disorder_ensemble(device, [0.2, 0.7], seeds=res.seeds[10:13])
    assert np.array_equal(again.transmission, res.transmission[10:13])
    assert res.transmission.shape == (60, 2)
    assert np.all(res.transmission > 0) and np.all(res.transmission <= res.n_open.min(axis=1) + 1e-9)


@pytest.mark.filterwarnings("ignore:4 disorder samples")
def test_conductance_units_spinless_and_explicit_spin():
    """G in 2e^2/h is T for a spinless model and T/2 with explicit spin; siemens from CODATA constants."""
    energies = [0.3]
    spinless = disorder_ensemble(_strip(6, 14), energies, seeds=range(4))
    spinful = disorder_ensemble(_strip(6, 14, spin=True, field=MagneticField(tesla=0.0)), energies, seeds=range(4))
    # without Zeeman or spin-orbit the two spins are identical copies: same G, T counted twice
    assert np.allclose(spinful.transmission, 2 * spinless.transmission, rtol=1e-10)
    assert np.allclose(spinful.conductance_g0, spinless.conductance_g0, rtol=1e-10)
    assert np.allclose(spinless.conductance_g0, spinless.transmission)
    g0 = 2 * sc.e**2 / sc.h
    assert np.allclose(spinless.conductance_S, spinless.transmission * g0, rtol=1e-12)


def test_variance_error_is_the_gaussian_closed_form():
    """For Gaussian samples the standard error of s^2 is sigma^2 sqrt(2/(n-1)) (closed form).

    Tolerance 5 %: the estimate from m4 fluctuates by about sqrt(8/n) relative ... here n = 20000, ~2 %.
    """
    rng = np.random.default_rng(1)
    x = rng.normal(0.0, 1.7, size=(20000, 3))
    se = variance_error(x)
    assert np.allclose(se, 1.7**2 * np.sqrt(2 / (len(x) - 1)), rtol=0.05)
    # and the mean's error of an ensemble is s / sqrt(n)
    res = disorder_ensemble(_strip(6, 12), [0.5], samples=50)
    g = res.conductance_g0[:, 0]
    assert res.mean_error_g0[0] == pytest.approx(g.std(ddof=1) / np.sqrt(50), rel=1e-12)


def test_localisation_length_of_the_anderson_chain():
    """The fitted xi of a 1D chain against Thouless's xi = 24 (4t^2 - E^2) / W^2 (t = 1 meV, W = 1 meV).

    Tolerance: 3 standard errors of the fit (about 2.5 % each here, from 400 samples per length) plus 3 % for
    the formula's own error, the next order in W^2 of the weak-disorder expansion.  Energies away from the
    band centre and E = +-t, where the expansion has anomalies (Kappus & Wegner, Z. Phys. B 45, 15 (1981),
    from memory).
    """
    energies = np.array([-1.2, 0.5])
    lengths = [100, 200, 300, 400]
    results = [disorder_ensemble(_chain(n, 1.0), energies, samples=400) for n in lengths]
    fit = localisation_length(lengths, results)
    thouless = 24 * (4 - energies**2)
    assert np.all(np.abs(fit.xi_nm - thouless) < 3 * fit.xi_error_nm + 0.03 * thouless)
    assert np.all(fit.xi_error_nm < 0.05 * fit.xi_nm)


def test_universal_conductance_fluctuations_without_field():
    """var G of a diffusive wire, averaged over four energies, against 2/15 (2e^2/h)^2.

    The wire: 24 x 100 sites, W = 1.2 t, 300 samples; <G> is 3-4 (2e^2/h) with 16-20 channels, so
    1 << <G> << N.  Tolerance 15 %: the standard error of the energy-averaged variance is about 4 % and
    finite wires approach the universal value with corrections of order l/L and 1/<G> (a few per cent here).
    """
    energies = [-1.0, 0.3, 0.6, 1.1]
    res = disorder_ensemble(_strip(24, 100, disorder=1.2), energies, samples=300)
    assert np.all(res.mean_g0 > 2) and np.all(res.mean_g0 < res.n_open[:, 0] / 3)  # diffusive
    assert res.variance_g0.mean() == pytest.approx(2 / 15, rel=0.15)


def test_localisation_fit_fails_loudly_on_a_clean_wire():
    weak = [disorder_ensemble(_strip(8, n, disorder=1e-3), [0.5], samples=50) for n in (10, 20, 30)]
    with pytest.raises(FitFailed, match="not localised"):
        localisation_length([10, 20, 30], weak)
    with pytest.raises(FitFailed, match="not localised"):  # no decay at all: lengths given in the wrong order
        localisation_length([30, 20, 10], weak)
    with pytest.raises(FitFailed, match="three or more"):
        localisation_length([10, 20], weak[:2])


def test_bad_input_is_refused_in_one_line():
    clean = dataclasses.replace(_strip(6, 10), disorder=None)
    with pytest.raises(PotentialError, match="has no disorder"):
        DisorderSampler(clean, [0.3])
    three = Device(rectangle(0, 0, 10, 10), [Lead("a", "left", (0, 10)), Lead("b", "right", (0, 10)),
                                             Lead("c", "top", (2, 8))],
                   lattice=square(1.0), hopping=1.0, energy_origin="band_centre", disorder=Disorder(1.0))
    with pytest.raises(LeadError, match="two-terminal"):
        DisorderSampler(three, [0.3])
    with pytest.raises(ValueError, match="samples must be a whole number"):
        disorder_ensemble(_strip(6, 10), [0.3], samples=1)
    with pytest.raises(ValueError, match="either samples"):
        disorder_ensemble(_strip(6, 10), [0.3])
    sampler = DisorderSampler(_strip(6, 10), [0.3])
    with pytest.raises(PotentialError, match="seed must be a whole number"):
        sampler.transmission(-3)
    with pytest.raises(PotentialError, match="one finite onsite energy"):
        sampler.transmission_of(np.full(sampler.model.n_sites, np.nan))
    with pytest.warns(ValidityWarning, match="standard errors of the variance"):
        disorder_ensemble(_strip(6, 10), [0.3], samples=10)


def test_two_processes_give_the_same_samples_bit_for_bit():
    device = _strip(8, 30, seed=2)
    one = disorder_ensemble(device, [0.3, 0.9], samples=60)
    two = disorder_ensemble(device, [0.3, 0.9], samples=60, workers=2)
    assert np.array_equal(one.transmission, two.transmission) and np.array_equal(one.seeds, two.seeds)
    with pytest.raises(ValueError, match="workers must be"):
        disorder_ensemble(device, [0.3], samples=60, workers=0)
