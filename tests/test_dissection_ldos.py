"""The LDOS by selected inversion on the nested-dissection tree (rgftrans.transport.dissection.dissection_diagonal).

Outside references (none of them written by this project):

* the diagonal of ``G = (z - H - Sigma)^-1`` from a dense inverse (numpy.linalg.inv: LAPACK getrf/getri with
  partial pivoting over the whole matrix, no tree, no Schur complements), ``LDOS_i = -Im G_ii / pi``;
* the trace of G from the eigenvalues of the non-Hermitian effective Hamiltonian (scipy.linalg.eigvals, LAPACK
  geev): ``Tr (z - H - Sigma)^-1 = sum_i 1 / (z - lambda_i)``, so the LDOS summed over the device is
  ``-Im sum_i 1/(z - lambda_i) / pi`` -- no inverse is formed at all;
* RGF's LDOS (``ldos(..., solver="rgf")``), the package's other route, which shares nothing with the tree but
  the lead self-energies.

The self-energies ``Sigma_p`` (lead_self_energies) are inputs to all routes alike; what is checked here is the
inversion.  Selected inversion on an elimination tree: K. Takahashi, J. Fagan & M.-S. Chin (1973); A. M.
Erisman & W. F. Tinney, Commun. ACM 18, 177 (1975); the FIND scheme of S. Li, S. Ahmed, G. Klimeck &
E. Darve, J. Comput. Phys. 227, 9408 (2008) (all from memory).

Tolerance: ``REL = 1e-10`` of the largest LDOS on the device at that energy (max over sites of |reference|).
All routes are exact up to round-off.  Measured over the 160 comparisons of this file (150-1300 orbitals;
square, honeycomb, triangular lattices; fields; spin with Rashba and Zeeman; 1-4 leads; closed subdomains at
and near their eigenvalues): worst 2.3e-12; on disordered squares of 64^2-256^2 sites across the band (against
RGF, itself checked against splu columns; outside this file) up to 1.2e-11.  The tree has no pivoting across
fronts, and G inside a nearly singular front is a difference of large terms; the stricter delays of the diagonal
(``dissection.PIVOT_DELAY_DIAGONAL``) keep that at round-off (with the transmission's threshold the same
squares lose up to 7e-9).  1e-10 leaves a margin of ten and still catches a misplaced entry, a wrong sign or a
lost delayed unknown, which move the LDOS by 1e-3 or more.
"""

from __future__ import annotations

import numpy as np
import pytest
import scipy.linalg as sla
import scipy.sparse as sp

from builders import in_band_energies, random_device, strip_device
from rgftrans.errors import LeadError, RgftransError
from rgftrans.leads.embedding import device_energy, lead_self_energies
from rgftrans.system.device import Device, Lead, TightBindingModel
from rgftrans.system.fields import Disorder, MagneticField
from rgftrans.system.geometry import disk, rectangle
from rgftrans.system.lattices import honeycomb, square, triangular
from rgftrans.transport import dissection as nd
from rgftrans.transport.choice import choose_ldos_solver
from rgftrans.transport.local import ldos, ldos_result

#: Relative to the largest LDOS at that energy (module docstring).
REL = 1e-10
#: Small leaves make trees of many levels on these small devices (the default leaf is tested too).
SMALL_LEAF = 8

SIDES = ("left", "right", "top", "bottom")


def _dense_matrix(model: TightBindingModel, energy: float, eta: float = 0.0) -> np.ndarray:
    """``z - H - sum_p Sigma_p`` as a dense array."""
    sigmas, modes = lead_self_energies(model, energy, warn=False)
    a = device_energy(energy, modes, eta) * np.eye(model.n_orbitals) - model.hamiltonian.toarray()
    for sigma, lead in zip(sigmas, model.leads):
        a[np.ix_(lead.interface, lead.interface)] -= sigma
    return a


def _dense_ldos(model, energy, eta=0.0) -> np.ndarray:
    g = np.linalg.inv(_dense_matrix(model, energy, eta))
    return model.per_site(-np.diag(g).imag / np.pi)


def _tree_ldos(model, energies, *, leaf=SMALL_LEAF, eta=0.0):
    plan = nd.dissection_plan(model, nd.dissection_tree(model, leaf_orbitals=leaf))
    res = nd.dissection_diagonal(model, energies, eta, plan=plan)
    rho = np.array([model.per_site(-row.imag / np.pi) for row in res.diagonal])
    return rho, res


def _assert_close(got, want, what):
    got, want = np.asarray(got), np.asarray(want)
    scale = np.abs(want).max()
    assert scale > 1e-6, f"{what}: the reference vanishes, the check would compare 0 with 0"
    err = np.abs(got - want).max() / (REL * scale)
    assert err <= 1.0, f"{what}: worst |diff| = {err:.2g} x tolerance (scale {scale:.3g})"


def _random_lattice_device(kind: str, seed: int) -> tuple[TightBindingModel, np.ndarray]:
    """A device of the named lattice drawn from ``seed``: size, smooth potential, disorder, field, 2-4 leads on
    distinct sides; and three in-band energies (meV; t = 1 meV).  Draws again (same generator) when a draw
    does not discretise (leads touching each other), so every seed gives a device."""
    rng = np.random.default_rng(seed)
    for _ in range(50):
        lx, ly = rng.uniform(10, 17), rng.uniform(8, 13)
        n_leads = int(rng.integers(2, 5))
        sides = rng.permutation(SIDES)[:n_leads]
        leads = []
        for i, side in enumerate(sides):
            extent = ly if side in ("left", "right") else lx
            lo = rng.uniform(0.0, 0.3 * extent)
            leads.append(Lead(f"l{i}", str(side), (lo, lo + rng.uniform(0.4, 0.65) * extent)))
        amp, kx, ky = rng.uniform(0.2, 0.8), rng.uniform(0.2, 0.9), rng.uniform(0.2, 0.9)
        lattice = {"square": square, "honeycomb": honeycomb, "triangular": triangular}[kind](1.0)
        flux = rng.choice([0.0, rng.uniform(0.02, 0.08)])
        try:
            model = Device(rectangle(0, 0, lx, ly) - disk((lx / 2, ly / 2), rng.uniform(0.5, 2.0)), leads,
                           lattice=lattice, hopping=1.0,
                           potential=lambda x, y, a=amp, p=kx, q=ky: a * np.sin(p * x) * np.cos(q * y),
                           disorder=Disorder(rng.uniform(0.5, 1.5), seed=seed),
                           field=MagneticField(flux_per_cell=flux) if flux else 0.0).discretise()
        except RgftransError:
            continue
        band = {"square": (0.3, 7.7), "honeycomb": (-2.7, 2.7), "triangular": (0.5, 8.5)}[kind]
        return model, np.sort(rng.uniform(*band, 3))
    raise AssertionError(f"no {kind} device discretised from seed {seed}")


# --- the same numbers as a dense inverse and as RGF ------------------------------------------------------------


@pytest.mark.parametrize("seed", range(6))
def test_random_square_devices_match_dense_inverse_and_rgf(seed):
    case = random_device(seed, max_len=24, max_wid=18)
    # Inside (2, 6) t every lead, however narrow, has an open channel: the device has states there.
    energies = in_band_energies(np.random.default_rng(40_000 + seed), 3, band=(2.05, 5.95))
    rho, res = _tree_ldos(case.model, energies)
    assert res.trusted.all(), f"{case}: {res.reason}"
    by_rgf = ldos(case.model, energies, solver="rgf")
    for k, energy in enumerate(energies):
        _assert_close(rho[k], _dense_ldos(case.model, energy), f"{case}, E = {energy} vs dense inverse")
        _assert_close(rho[k], by_rgf[k], f"{case}, E = {energy} vs RGF")


@pytest.mark.parametrize("kind", ["square", "honeycomb", "triangular"])
@pytest.mark.parametrize("seed", range(3))
def test_every_lattice_with_fields_and_many_leads_matches_dense_inverse_and_rgf(kind, seed):
    model, energies = _random_lattice_device(kind, 100 * seed + len(kind))
    rho, res = _tree_ldos(model, energies)
    assert res.trusted.all(), res.reason
    by_rgf = ldos(model, energies, solver="rgf")
    for k, energy in enumerate(energies):
        ref = _dense_ldos(model, energy)
        _assert_close(rho[k], ref, f"{kind} seed {seed}, {len(model.leads)} leads, E = {energy} vs dense")
        _assert_close(rho[k], by_rgf[k], f"{kind} seed {seed}, E = {energy} vs RGF")
        # Not 0 = 0: the device has states at this energy (1e-3 per meV: our choice, far above round-off).
        assert ref.max() > 1e-3


def _spin_device(n_leads: int) -> TightBindingModel:
    leads = [Lead("a", "left", (8, 36)), Lead("b", "top", (20, 52)), Lead("c", "right", (4, 30)),
             Lead("d", "bottom", (10, 40))][:n_leads]
    return Device(rectangle(0, 0, 60, 44) - disk((30, 22), 8), leads, lattice=square(4.0), field=1.2, spin=True,
                  rashba=15.0, potential=lambda x, y: 0.3 * np.sin(x / 9), disorder=Disorder(2.0, seed=5)).discretise()


@pytest.mark.parametrize("n_leads", [2, 3, 4])
def test_spin_orbitals_with_rashba_zeeman_and_field(n_leads):
    # Two orbitals per site, complex H (the general, non-symmetric downward pass); meV units of GaAs.
    model = _spin_device(n_leads)
    assert model.norbs == 2 and not nd.dissection_plan(model).symmetric
    energies = np.array([4.1, 6.7, 8.9])  # above the leads' first threshold (GaAs, a = 4 nm)
    rho, res = _tree_ldos(model, energies)
    assert res.trusted.all(), res.reason
    by_rgf = ldos(model, energies, solver="rgf")
    for k, energy in enumerate(energies):
        _assert_close(rho[k], _dense_ldos(model, energy), f"spin, {n_leads} leads, E = {energy} vs dense")
        _assert_close(rho[k], by_rgf[k], f"spin, {n_leads} leads, E = {energy} vs RGF")


@pytest.mark.parametrize("leaf", [1, 4, 16, 64, 10**6])
def test_leaf_size_default_tree_and_eta(leaf):
    # 10**6: one front eliminates everything (the root's children only); 1: single-site leaves.  eta > 0 on top.
    model, energies = _random_lattice_device("square", 7)
    rho, res = _tree_ldos(model, energies, leaf=leaf, eta=0.05)
    assert res.trusted.all()
    for k, energy in enumerate(energies):
        _assert_close(rho[k], _dense_ldos(model, energy, eta=0.05), f"leaf {leaf}, E = {energy}, eta 0.05")
    # The model's default tree (cached plan), through the public entry point.
    _assert_close(ldos(model, energies[0], eta=0.05, solver="dissection"), _dense_ldos(model, energies[0], 0.05),
                  "default tree")


def test_symmetric_downward_pass_equals_the_general_one(monkeypatch):
    # Real H: the tree uses G = G^T (Y = X^T, G_BK = G_KB^T); the general pass forms Y and G_BK itself.
    case = random_device(2, max_len=24, max_wid=18)
    energies = in_band_energies(np.random.default_rng(2), 3, band=(2.05, 5.95))
    assert nd.dissection_plan(case.model).symmetric
    sym, _ = _tree_ldos(case.model, energies)
    monkeypatch.setattr(nd, "SYMMETRIC_FRONTS", False)
    fresh = TightBindingModel(case.model.hamiltonian, case.model.positions, case.model.leads, 1.0)
    assert not nd.dissection_plan(fresh).symmetric
    general, _ = _tree_ldos(fresh, energies)
    for k in range(len(energies)):
        _assert_close(general[k], sym[k], "general pass")


def test_one_lead():
    # One lead: the root holds only its interface; every other site is closed off but by that lead.
    model = Device(rectangle(0, 0, 14, 11), [Lead("a", "left", (2, 8))], lattice=square(1.0), hopping=1.0,
                   disorder=Disorder(1.0, seed=2)).discretise()
    energies = np.array([1.3, 3.7, 5.2])
    rho, res = _tree_ldos(model, energies)
    assert res.trusted.all()
    by_rgf = ldos(model, energies, solver="rgf")
    for k, energy in enumerate(energies):
        _assert_close(rho[k], _dense_ldos(model, energy), f"one lead, E = {energy} vs dense")
        _assert_close(rho[k], by_rgf[k], f"one lead, E = {energy} vs RGF")


def test_absorbing_device():
    # A complex onsite energy (-0.05i meV everywhere): not Hermitian, the general pass; LDOS = -Im G_ii / pi still.
    base = random_device(5, max_len=20, max_wid=16).model
    lossy = base.hamiltonian - 0.05j * sp.identity(base.n_orbitals, format="csr")
    model = TightBindingModel(hamiltonian=lossy, positions=base.positions, leads=base.leads, energy_scale=1.0)
    energies = np.array([1.11, 3.33, 5.55])
    rho, res = _tree_ldos(model, energies)
    assert res.trusted.all()
    for k, energy in enumerate(energies):
        _assert_close(rho[k], _dense_ldos(model, energy), f"absorbing, E = {energy}")


# --- sum rule -----------------------------------------------------------------------------------------------------


@pytest.mark.parametrize("kind", ["square", "honeycomb", "triangular"])
def test_ldos_summed_over_the_device_is_the_trace_from_the_eigenvalues(kind):
    # Tr (z - H_eff)^-1 = sum_i 1/(z - lambda_i), lambda_i the eigenvalues of H + Sigma(E) (scipy eigvals, no
    # inverse formed), so sum_sites LDOS = -Im sum_i 1/(z - lambda_i) / pi.  REL of the sum: the eigenvalue
    # route's own round-off (~eps cond(V) of the eigenvector matrix) stays far below it on these devices.
    model, energies = _random_lattice_device(kind, 11)
    rho, res = _tree_ldos(model, energies)
    for k, energy in enumerate(energies):
        lam = sla.eigvals(np.diag(np.full(model.n_orbitals, energy)) - _dense_matrix(model, energy))  # H + Sigma
        trace = -np.sum(1.0 / (energy - lam)).imag / np.pi
        assert abs(rho[k].sum() - trace) <= REL * abs(trace), f"{kind}, E = {energy}: {rho[k].sum()} vs {trace}"
        assert rho[k].min() >= -REL * rho[k].max()  # LDOS >= 0 (no absorption)


# --- closed subdomains at one of their eigenvalues: delayed unknowns -------------------------------------------


@pytest.mark.parametrize("energy, needs_delays", [(3.0, True), (4.0, True), (5.0, True), (4.0 + 1e-9, True),
                                                  (4.0 - 1e-6, True), (4.0 + 1e-4, True), (3.0 + 1e-3, False)])
def test_clean_square_at_and_near_a_subdomain_eigenvalue(energy, needs_delays, monkeypatch):
    # A clean 16 x 16 square (onsite 4, t = 1): rectangles of the partition have eigenvalues exactly at 4 and at
    # 4 -+ 1 (4 - 2 cos(pi i/(a+1)) - 2 cos(pi j/(b+1)); Economou, Green's Functions in Quantum Physics, from
    # memory).  Fronts there are (nearly) singular; their near-null unknowns are delayed to the parent and
    # eliminated there, and the downward pass must follow them.  Still the dense inverse's LDOS to REL.
    model = strip_device(16, 16).discretise()
    rho, res = _tree_ldos(model, [energy])
    assert res.delays[0] > 0 and res.trusted[0]
    _assert_close(rho[0], _dense_ldos(model, energy), f"E = {energy}")
    # Without delays the same energy is refused or wrong: the mechanism is what makes it right.  (At 3 + 1e-3
    # the fronts' pivots, 2e-3, are delayed only for margin: without delays the LDOS loses ~4e-11, inside REL.)
    monkeypatch.setattr(nd, "PIVOT_DELAY_DIAGONAL", 0.0)
    bare, res_bare = _tree_ldos(model, [energy])
    if needs_delays and res_bare.trusted[0]:
        assert np.abs(bare[0] - rho[0]).max() > REL * np.abs(rho[0]).max()


@pytest.mark.parametrize("energy, n_root", [(2.0, 1), (4.0, 2), (6.0, 1)])
def test_delayed_unknowns_solved_at_the_root(energy, n_root):
    # A clean 2 x 4 strip: its four inner sites form one closed 2 x 2 block with eigenvalues 4 + {-2, 0, 0, 2},
    # the only front below the root.  At E = 2, 4, 6 its near-null unknowns reach the root, where G is taken
    # with the leads: their LDOS comes from the root's inverse.
    model = strip_device(2, 4).discretise()
    rho, res = _tree_ldos(model, [energy])
    assert res.delayed[0] == n_root and res.trusted[0]
    _assert_close(rho[0], _dense_ldos(model, energy), f"E = {energy}")


def test_disordered_square_with_delays_matches_dense_inverse():
    # A disordered square at energies picked where its fronts delay (localised states inside subdomains).
    model = Device(rectangle(0, 0, 31, 31), [Lead("l", "left", (0, 31)), Lead("r", "right", (0, 31))],
                   lattice=square(1.0), hopping=1.0, disorder=Disorder(3.0, seed=4)).discretise()
    energies = np.linspace(0.5, 7.5, 61)
    plan = nd.dissection_plan(model, nd.dissection_tree(model, leaf_orbitals=SMALL_LEAF))
    scan = nd.dissection_diagonal(model, energies, plan=plan)
    assert scan.trusted.all()
    picked = energies[scan.delays > 0][:3]
    if len(picked) == 0:  # none on this grid: a clean subdomain eigenvalue instead (the test must not pass empty)
        pytest.fail("no energy of the scan delayed an unknown; pick another grid")
    rho, _ = _tree_ldos(model, picked)
    for k, energy in enumerate(picked):
        _assert_close(rho[k], _dense_ldos(model, energy), f"E = {energy}")


@pytest.mark.parametrize("rgf_fits", [True, False])
def test_untrusted_energies_are_redone_by_rgf_or_reported(rgf_fits, monkeypatch):
    # No room for delays: the band-centre energy of the clean square is abandoned by the tree.  The public entry
    # point redoes it by RGF and says so; if RGF would not fit in memory either, the LDOS is NaN with a warning.
    from rgftrans.system import budget
    from rgftrans.errors import RgftransWarning

    model = strip_device(16, 16).discretise()
    monkeypatch.setattr(nd, "DELAY_MIN", 0)
    monkeypatch.setattr(nd, "DELAY_FRACTION", 0.0)
    energies = [4.0, 4.3]
    _, res = _tree_ldos(model, energies)
    assert res.trusted.tolist() == [False, True] and "delayed unknowns" in res.reason[0]
    if not rgf_fits:
        monkeypatch.setattr(budget, "available_memory_bytes", lambda: 0.0)
        with pytest.warns(RgftransWarning, match="NaN"):
            out = ldos_result(model, energies, solver="dissection")
        assert np.isnan(out.ldos[0]).all() and out.redone.tolist() == [True, False]
        assert out.notes[0].startswith("not computed")
        _assert_close(out.ldos[1], _dense_ldos(model, 4.3), "trusted energy")
        return
    out = ldos_result(model, energies, solver="dissection")
    assert out.solver == "dissection" and out.redone.tolist() == [True, False]
    assert out.notes[0].startswith("redone by RGF") and out.notes[1] == ""
    for k, energy in enumerate(energies):
        _assert_close(out.ldos[k], _dense_ldos(model, energy), f"E = {energy}")


# --- the choice of route --------------------------------------------------------------------------------------


def test_forced_routes_agree_and_say_which_ran():
    model = random_device(11, max_len=24, max_wid=18).model
    energies = in_band_energies(np.random.default_rng(11), 3, band=(2.05, 5.95))
    by_rgf, by_tree = (ldos_result(model, energies, solver=s) for s in ("rgf", "dissection"))
    assert (by_rgf.solver, by_tree.solver) == ("rgf", "dissection")
    assert not by_tree.redone.any() and by_tree.reason == "asked for"
    for k in range(len(energies)):
        _assert_close(by_tree.ldos[k], by_rgf.ldos[k], "forced routes")
    # The signature of before: a scalar energy gives one row, no solver keyword needed.
    one = ldos(model, float(energies[0]))
    assert one.shape == (model.n_sites,)
    _assert_close(one, by_rgf.ldos[0], "scalar energy")


def test_automatic_choice_follows_the_predicted_cost():
    # A long narrow strip: RGF's diagonal is cheap -> RGF, today's route.  A wide square: RGF's n^3 per layer
    # against the tree's n^3 in all -> the tree.  Tiny devices are not planned.
    narrow = strip_device(6, 400).discretise()
    wide = Device(rectangle(0, 0, 95, 95), [Lead("l", "left", (0, 95)), Lead("r", "right", (0, 95))],
                  lattice=square(1.0), hopping=1.0, disorder=Disorder(1.0, seed=1)).discretise()
    tiny = strip_device(3, 5).discretise()
    assert choose_ldos_solver(narrow).solver == "rgf"
    choice = choose_ldos_solver(wide)
    assert choice.solver == "dissection" and choice.dissection_seconds < choice.rgf_seconds
    assert choose_ldos_solver(tiny).solver == "rgf" and np.isnan(choose_ldos_solver(tiny).dissection_seconds)
    assert ldos_result(wide, [0.71]).solver == "dissection"
    assert ldos_result(narrow, [0.71]).solver == "rgf"
    assert ldos_result(tiny, [0.71]).solver == "rgf"


def test_bad_solver_and_closed_system_are_one_line_errors():
    model = strip_device(3, 4).discretise()
    with pytest.raises(RgftransError, match="solver='lu' is not one of 'auto', 'rgf', 'dissection'") as err:
        ldos(model, [1.0], solver="lu")
    assert "\n" not in str(err.value)
    closed = TightBindingModel(model.hamiltonian, model.positions, [], 1.0)
    with pytest.raises(LeadError, match="needs at least one lead") as err:
        ldos(closed, [1.0], solver="dissection")
    assert "\n" not in str(err.value)
    # "auto" keeps a closed system on RGF.
    assert ldos_result(closed, [1.3]).solver == "rgf"
