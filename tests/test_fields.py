"""Field, spin and disorder terms: gauge invariance, Onsager reciprocity, Zeeman, spin degeneracy, disorder.

Sources (from memory where recalled): Peierls phase, R. Peierls, Z. Phys. 80, 763 (1933); reciprocity
T_pq(B) = T_qp(-B), M. Buttiker, PRL 57, 1761 (1986); gauge invariance of observables and independent spin
copies without spin-dependent terms are common practice, no source; mu_B is CODATA via scipy.constants; GaAs
g = -0.44 is the preset's handbook value (see rgftrans.system.materials).

Tolerances: two independent solves (RGF against sparse LU, or two gauges/orientations of the same device)
agree to round-off (double precision; a few-hundred-site device accumulates far less than 1e-10); 1e-10 (1e-9 for the larger
multi-terminal and disordered cases, where several leads' eigen-solves add up) is that with margin.
"""

import numpy as np
import pytest

from rgftrans.system.device import Device, Lead
from rgftrans.transport.direct import transmission_direct
from rgftrans.errors import PotentialError
from rgftrans.system.fields import BOHR_MAGNETON_MEV_PER_T, Disorder, MagneticField, uniform_draws
from rgftrans.system.geometry import disk, rectangle
from rgftrans.system.lattices import square, triangular
from rgftrans.transport.rgf import transmission, transmission_matrix

A = 4.0  # nm
ENERGIES = [2.5, 4.0, 6.5]  # meV, GaAs at a = 4 nm


def pot(x, y):
    return 0.4 * np.sin(0.11 * x) * np.cos(0.07 * y + 0.3)


def dot(field=0.0, **kw):
    region = rectangle(0, 0, 120, 80) - disk((60, 40), 15)
    leads = [Lead("a", "left", (20, 60)), Lead("b", "top", (60, 100))]
    return Device(region, leads, lattice=square(A), field=field, potential=pot, **kw)


def rotated_dot(field):
    """The same dot turned by +90 degrees: (x, y) -> (-y, x); left -> bottom, top -> left."""
    region = rectangle(-80, 0, 0, 120) - disk((-40, 60), 15)
    leads = [Lead("a", "bottom", (-60, -20)), Lead("b", "left", (60, 100))]
    return Device(region, leads, lattice=square(A), field=field, potential=lambda x, y: pot(y, -x))


@pytest.mark.parametrize("tesla", [0.7, -1.9])
def test_gauge_choice_does_not_change_transmission(tesla):
    """A rotation moves each lead to the other kind of gauge region; T must not notice (gauge invariance)."""
    t_a = transmission(dot(tesla).discretise(), ENERGIES).transmission
    t_b = transmission(rotated_dot(tesla).discretise(), ENERGIES).transmission
    assert np.allclose(t_a, t_b, atol=1e-10)  # round-off of two independent solves (module docstring)
    # and the field does something: the check is not comparing zero-field copies (1e-3: our choice, far above
    # round-off)
    assert np.abs(t_a - transmission(dot(0.0).discretise(), ENERGIES).transmission).max() > 1e-3


def test_two_terminal_onsager():
    """G(B) = G(-B) for two terminals (Onsager; Büttiker, PRL 57, 1761 (1986), from memory)."""
    t_p = transmission(dot(1.3).discretise(), ENERGIES).transmission
    t_m = transmission(dot(-1.3).discretise(), ENERGIES).transmission
    assert np.allclose(t_p, t_m, atol=1e-10)  # round-off (module docstring)


def test_multiterminal_reciprocity_and_its_breaking():
    """T_pq(B) = T_qp(-B), while T_pq(B) != T_pq(-B) in general (Büttiker 1986, from memory)."""
    region = rectangle(0, 0, 100, 80) - disk((45, 40), 12)
    leads = [Lead("a", "left", (10, 50)), Lead("b", "right", (30, 70)), Lead("c", "top", (20, 60))]

    def tm(b):
        dev = Device(region, leads, lattice=square(A), field=b, potential=pot)
        return transmission_matrix(dev.discretise(), [3.0, 5.5]).matrix

    t_p, t_m = tm(1.1), tm(-1.1)
    assert np.allclose(t_p, np.swapaxes(t_m, 1, 2), atol=1e-9)  # round-off, three leads (module docstring)
    off = ~np.eye(3, dtype=bool)
    # Reciprocity can be broken for three terminals (Buttiker 1986): 1e-3 shows the check above is not empty.
    assert np.abs(t_p[:, off] - t_m[:, off]).max() > 1e-3


def test_rgf_matches_sparse_lu_with_field_spin_rashba_and_disorder():
    # Two independent solvers of the same Caroli formula (Caroli et al., J. Phys. C 4, 916 (1971), from
    # memory); round-off, 1e-9 (module docstring).
    model = dot(0.6, spin=True, rashba=15.0, disorder=Disorder(3.0, seed=5)).discretise()
    assert np.allclose(transmission(model, ENERGIES).transmission, transmission_direct(model, ENERGIES)[:, 1, 0],
                       atol=1e-9)


def test_spin_degenerate_transmission_doubles():
    """No Zeeman, no Rashba: the two spins are independent copies (common practice, no source)."""
    t1 = transmission(dot(MagneticField(0.8, zeeman=False)).discretise(), ENERGIES).transmission
    t2 = transmission(dot(MagneticField(0.8, zeeman=False), spin=True).discretise(), ENERGIES).transmission
    assert np.allclose(t2, 2 * t1, atol=1e-10)  # round-off (module docstring)


def test_zeeman_splits_the_spins_rigidly():
    """T(E) = T0(E - E_z) + T0(E + E_z), E_z = (g/2) mu_B B with mu_B from scipy.constants (CODATA)."""
    tesla = 2.0
    e_z = 0.5 * (-0.44) * BOHR_MAGNETON_MEV_PER_T * tesla  # GaAs g = -0.44
    assert BOHR_MAGNETON_MEV_PER_T == pytest.approx(5.7883817982e-2, rel=1e-9)  # CODATA 2022 mu_B = 5.7883817982e-5 eV/T
    spinful = transmission(dot(tesla, spin=True).discretise(), ENERGIES).transmission
    orbital = dot(tesla).discretise()
    e = np.array(ENERGIES)
    expected = transmission(orbital, e - e_z).transmission + transmission(orbital, e + e_z).transmission
    assert np.allclose(spinful, expected, atol=1e-10)  # exact decoupling, round-off only


def test_disorder_is_reproducible_per_site():
    dis = Disorder(4.0, seed=12)
    cells = np.array([[i, j, b] for i in range(-50, 50) for j in range(-50, 50) for b in (0, 1)])
    v = dis.values(cells)
    assert np.array_equal(v, Disorder(4.0, seed=12).values(cells))            # same seed, same values
    assert np.array_equal(v[5000:5100], dis.values(cells[5000:5100]))        # keyed by site, not by order
    shuffled = np.random.default_rng(0).permutation(len(cells))
    assert np.array_equal(v[shuffled], dis.values(cells[shuffled]))
    assert not np.allclose(v, Disorder(4.0, seed=13).values(cells))          # another seed differs
    assert v.min() >= -2.0 and v.max() < 2.0


@pytest.mark.parametrize("cell", [(0, 0, 0), (-7, 3, 1), (12, -40, 0), (-(2**40), 2**40, 1)])
def test_disorder_is_numpy_philox_as_documented(cell):
    """The guarantee in the Disorder docstring, spelled out with numpy's own generator (exact)."""
    n1, n2, b = cell
    key = np.random.SeedSequence(5).generate_state(2, np.uint64)
    counter = np.array([n1 + 2**63 - 1, n2 + 2**63, b, 0], dtype=np.uint64)
    u = np.random.Generator(np.random.Philox(key=key, counter=counter)).random()
    assert Disorder(3.0, seed=5).values(np.array([cell]))[0] == 3.0 * (u - 0.5)


@pytest.mark.parametrize("seed", [0, 7, 2**40 + 3])
def test_compiled_philox_equals_numpy_word_for_word(seed):
    """The compiled draw of Disorder is numpy's Philox4x64-10 (the reference) at 300 random cells, exactly."""
    rng = np.random.default_rng(seed % 1000)
    cells = np.column_stack([rng.integers(-2**50, 2**50, 300), rng.integers(-2**50, 2**50, 300),
                             rng.integers(0, 4, 300)])
    cells[:100, :2] = rng.integers(-60, 60, (100, 2))  # and small cells, as devices have
    key = np.random.SeedSequence(seed).generate_state(2, np.uint64)
    expected = [np.random.Generator(np.random.Philox(
        key=key, counter=np.array([n1 + 2**63 - 1, n2 + 2**63, b, 0], dtype=np.uint64))).random()
        for n1, n2, b in cells.tolist()]
    assert np.array_equal(uniform_draws(seed, cells), expected)


def test_disorder_of_a_site_does_not_depend_on_the_device_shape():
    """The same lattice site gets the same onsite energy in two different regions (and sets of leads)."""
    dis = Disorder(2.0, seed=3)
    small = Device(rectangle(0, 0, 60, 40), [Lead("a", "left", (0, 40)), Lead("b", "right", (0, 40))],
                   lattice=square(A), disorder=dis).discretise()
    large = Device(rectangle(-40, -20, 120, 60) - disk((90, 20), 12),
                   [Lead("a", "bottom", (-40, 120)), Lead("b", "top", (-40, 120))],
                   lattice=square(A), disorder=dis).discretise()

    def onsite_by_position(model):
        diag = model.hamiltonian.diagonal().real
        return {tuple(np.round(p, 6)): e for p, e in zip(model.positions, diag)}

    a, b = onsite_by_position(small), onsite_by_position(large)
    common = set(a) & set(b)
    assert len(common) == len(a)  # the small region lies inside the large one
    assert all(a[p] == b[p] for p in common)  # same onsite term 4t + disorder, exactly
    assert np.ptp([a[p] for p in common]) > 1.0  # and the disorder is there (W = 2 meV over ~170 sites)


def test_disorder_is_box_distributed():
    """Box distribution of width W: mean 0, variance W^2/12 (common practice, no source).

    Tolerance: 5 standard errors for N = 10^5 sites (a false failure about once in 10^6 seeds; the values
    are fixed by the seed, so the test is deterministic): SE(mean) = W / sqrt(12 N) and, with the fourth
    central moment W^4/80 of the box, SE(variance) = W^2 sqrt((1/80 - 1/144) / N) = W^2 / sqrt(180 N).
    """
    width, n_side = 4.0, 316
    cells = np.array([[i, j, 0] for i in range(n_side) for j in range(n_side)])
    v = Disorder(width, seed=21).values(cells)
    n = len(v)
    assert abs(v.mean()) < 5 * width / np.sqrt(12 * n)
    assert abs(v.var() - width**2 / 12) < 5 * width**2 / np.sqrt(180 * n)


@pytest.mark.parametrize("seed", [-1, 1.5, True, "3"])
def test_bad_disorder_seed_is_refused(seed):
    with pytest.raises(PotentialError, match="seed must be a whole number") as err:
        Disorder(1.0, seed=seed)
    assert "\n" not in str(err.value)


@pytest.mark.parametrize("bad, match", [
    (dict(rashba=10.0), "needs spinful sites"),
    (dict(rashba=float("nan"), spin=True), "Rashba strength must be finite"),
    (dict(field=float("inf")), "magnetic field must be finite"),
    (dict(disorder="x"), None),
])
def test_bad_field_and_spin_input(bad, match):
    if match is None:
        with pytest.raises(Exception):
            dot(**bad).discretise()
        return
    with pytest.raises(PotentialError, match=match) as err:
        dot(**bad).discretise()
    assert "\n" not in str(err.value)


def test_negative_disorder_width_is_refused():
    with pytest.raises(PotentialError, match="non-negative"):
        Disorder(-1.0)


def test_triangular_lattice_device_matches_sparse_lu():
    dev = Device(rectangle(0, 0, 12, 8), [Lead("l", "left", (0, 8)), Lead("r", "bottom", (2, 9))],
                 lattice=triangular(1.0), hopping=1.0, potential=lambda x, y: 0.5 * np.sin(x), field=50.0)
    model = dev.discretise()
    e = [1.5, 4.2, 7.7]
    # RGF against sparse LU (independent solvers of the Caroli formula); round-off, 1e-9 (module docstring).
    assert np.allclose(transmission(model, e).transmission, transmission_direct(model, e)[:, 1, 0], atol=1e-9)


def test_triangular_effective_mass():
    """t = (2/3) hbar^2/(2 m* a^2) on the triangular lattice reproduces the band-bottom curvature.

    E(k) = 2t [3 - cos(k.a1) - cos(k.a2) - cos(k.(a2 - a1))] ~ (3/2) t a^2 k^2 (our derivation).
    """
    from rgftrans.system.materials import hopping_meV

    dev = Device(rectangle(0, 0, 10, 10), [Lead("l", "left", (0, 10)), Lead("r", "right", (0, 10))],
                 lattice=triangular(2.0))
    assert dev.t == pytest.approx(2 / 3 * hopping_meV(0.067, 2.0), rel=1e-12)  # same formula, rounding only


def test_field_none_is_no_field_and_junk_is_one_line():
    leads = [Lead("a", "left", (0, 10)), Lead("b", "right", (0, 10))]
    none = Device(rectangle(0, 0, 10, 10), leads, lattice=square(1.0), hopping=1.0, field=None)
    zero = Device(rectangle(0, 0, 10, 10), leads, lattice=square(1.0), hopping=1.0, field=0.0)
    assert abs(none.discretise().hamiltonian - zero.discretise().hamiltonian).max() == 0
    for bad in ("1 T", [0.1, 0.2], 1j, True):
        with pytest.raises(PotentialError, match="field must be a number of tesla"):
            Device(rectangle(0, 0, 10, 10), leads, lattice=square(1.0), hopping=1.0, field=bad)
