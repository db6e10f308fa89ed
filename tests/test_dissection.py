"""Nested dissection (rgftrans.transport.dissection): the same transmissions as RGF and as a sparse direct solve.

Outside sources (all from memory):

* Caroli / Fisher-Lee: T_pq = Tr[Gamma_p G_pq Gamma_q G_pq^dag] (C. Caroli et al., J. Phys. C 4, 916
  (1971); D. S. Fisher & P. A. Lee, Phys. Rev. B 23, 6851 (1981)).  The outside reference is
  ``transmission_direct``: G from scipy.sparse.linalg.splu (SuperLU) of the whole E - H - Sigma, which
  shares nothing with the tree (no separators, no Schur complements, its own pivoting).
* Unitarity of S: sum_q T_qp = N_p and sum_q T_pq = N_p with T_pp = R_pp (M. Buttiker, Phys. Rev. Lett.
  57, 1761 (1986)).
* Reciprocity in a field: T_pq(B) = T_qp(-B) (Buttiker 1986; Onsager 1931).
* Nested dissection and the multifrontal method: A. George, SIAM J. Numer. Anal. 10, 345 (1973); I. S.
  Duff & J. K. Reid, ACM TOMS 9, 302 (1983).  Separators of a square grid grow like sqrt(N).

Tolerance: ``REL = 1e-10`` relative to max(|T|, 1) (T is in units of one channel).  The three solvers are
exact up to round-off: on these devices of 150-1500 orbitals the worst disagreement we measured was
8e-13 (tree against splu and against RGF, four leads with disorder and a field; the sum rules hold to
4e-13); 1e-10 leaves two orders of margin and still
catches any wrong sign, missing term or misplaced entry, which moves T at 1e-3 or more.
"""

from __future__ import annotations

import numpy as np
import pytest
import scipy.sparse as sp

from builders import in_band_energies, random_device, strip_device
from rgftrans.errors import RgftransError
from rgftrans.system.device import Device, Lead, TightBindingModel
from rgftrans.system.fields import Disorder, MagneticField
from rgftrans.system.geometry import disk, rectangle
from rgftrans.system.lattices import honeycomb, square, triangular
from rgftrans.transport import dissection as nd
from rgftrans.transport.choice import choose_solver
from rgftrans.transport.direct import transmission_direct
from rgftrans.transport.rgf import transmission, transmission_matrix

#: Tree against RGF and against scipy's sparse LU, relative to max(|T|, 1) (module docstring).
REL = 1e-10
#: A small leaf makes trees of many levels on these small devices (the default leaf is tested too).
SMALL_LEAF = 8


def _wave(x, y):
    return 0.4 * np.sin(0.9 * x + 0.3) * np.cos(0.7 * y) + 0.2 * np.cos(0.4 * x * y / 7.0)


def _lattice_case(name: str) -> tuple[TightBindingModel, np.ndarray]:
    """A device of the named kind and three in-band energies (meV), all in tight-binding units (t = 1 meV)."""
    if name == "honeycomb":
        dev = Device(rectangle(0, 0.9, 16, 12.1), [Lead("l", "left", (0.9, 12.1)), Lead("r", "right", (0.9, 12.1))],
                     lattice=honeycomb(1.0), hopping=1.0, potential=_wave, disorder=Disorder(0.8, seed=3))
        return dev.discretise(), np.array([-1.37, 0.41, 1.93])
    if name == "triangular field":
        dev = Device(rectangle(0, 0, 16, 12), [Lead("l", "left", (0, 12)), Lead("b", "bottom", (3, 11))],
                     lattice=triangular(1.0), hopping=1.0, potential=_wave,
                     field=MagneticField(flux_per_cell=0.06))
        return dev.discretise(), np.array([1.53, 4.21, 7.08])
    if name == "square field disorder":
        dev = Device(rectangle(0, 0, 22, 17) - disk((11, 8), 3.2), [Lead("l", "left", (2, 14)), Lead("r", "right", (0, 17))],
                     lattice=square(1.0), hopping=1.0, potential=_wave, disorder=Disorder(1.5, seed=7),
                     field=MagneticField(flux_per_cell=0.04))
        return dev.discretise(), np.array([0.83, 2.71, 5.36])
    if name == "spin rashba zeeman":
        dev = Device(rectangle(0, 0, 60, 44) - disk((30, 22), 8), [Lead("a", "left", (8, 36)), Lead("b", "top", (20, 52))],
                     lattice=square(4.0), field=1.2, spin=True, rashba=15.0, potential=lambda x, y: 0.3 * np.sin(x / 9),
                     disorder=Disorder(2.0, seed=5))
        return dev.discretise(), np.array([2.3, 4.1, 6.7])
    if name == "three leads field":
        dev = Device(rectangle(0, 0, 18, 15) - disk((9, 7), 2.5),
                     [Lead("w", "left", (2, 9)), Lead("e", "right", (5, 14)), Lead("n", "top", (3, 12))],
                     lattice=square(1.0), hopping=1.0, potential=_wave, field=MagneticField(flux_per_cell=0.05))
        return dev.discretise(), np.array([0.91, 2.47, 3.88])
    if name == "four leads disorder":
        dev = Device(rectangle(0, 0, 20, 20),
                     [Lead("w", "left", (4, 15)), Lead("e", "right", (2, 12)), Lead("n", "top", (6, 16)),
                      Lead("s", "bottom", (3, 9))],
                     lattice=square(1.0), hopping=1.0, disorder=Disorder(2.0, seed=11),
                     field=MagneticField(flux_per_cell=0.03))
        return dev.discretise(), np.array([1.17, 3.02, 4.64])
    if name == "absorbing":
        base = random_device(5, max_len=20, max_wid=16).model
        lossy = base.hamiltonian - 0.05j * sp.identity(base.n_orbitals, format="csr")
        model = TightBindingModel(hamiltonian=lossy, positions=base.positions, leads=base.leads, energy_scale=1.0)
        return model, np.array([1.11, 3.33, 5.55])
    raise KeyError(name)


LATTICE_CASES = ["honeycomb", "triangular field", "square field disorder", "spin rashba zeeman",
                 "three leads field", "four leads disorder", "absorbing"]


def _assert_close(got, want, what):
    got, want = np.asarray(got), np.asarray(want)
    ratio = np.abs(got - want) / (REL * np.maximum(np.abs(want), 1.0))
    assert np.all(ratio <= 1.0), f"{what}: worst |diff| = {ratio.max():.2g} x tolerance\n{got}\n{want}"


def _off_diagonal(matrix):
    n = matrix.shape[-1]
    return matrix[..., ~np.eye(n, dtype=bool)]


def _solve(model, energies, *, leaf=SMALL_LEAF, eta=0.0):
    plan = nd.dissection_plan(model, nd.dissection_tree(model, leaf_orbitals=leaf))
    return nd.dissection_solve(model, energies, eta, plan=plan)


# --- the same numbers as RGF and as scipy's sparse LU -----------------------------------------------------------


@pytest.mark.parametrize("seed", range(8))
def test_random_square_devices_match_rgf_and_sparse_lu(seed):
    case = random_device(seed, max_len=24, max_wid=18)
    energies = in_band_energies(np.random.default_rng(30_000 + seed), 3)
    res = _solve(case.model, energies)
    assert res.trusted.all(), f"{case}: untrusted energies {energies[~res.trusted]}"
    _assert_close(res.matrix[:, 1, 0], transmission_direct(case.model, energies)[:, 1, 0], f"{case} vs splu")
    _assert_close(res.matrix, transmission_matrix(case.model, energies, solver="rgf").matrix, f"{case} vs RGF")


@pytest.mark.parametrize("name", LATTICE_CASES)
def test_lattices_fields_spin_and_many_leads_match_rgf_and_sparse_lu(name):
    model, energies = _lattice_case(name)
    res = _solve(model, energies)
    assert res.trusted.all()
    # T_pq (p != q) against splu (outside reference), and the whole matrix with R_pp against RGF.
    _assert_close(_off_diagonal(res.matrix), _off_diagonal(transmission_direct(model, energies)), f"{name} vs splu")
    _assert_close(res.matrix, transmission_matrix(model, energies, solver="rgf").matrix, f"{name} vs RGF")
    # The cases transmit: the comparison is not 0 = 0 (1e-2: our choice, far above round-off).
    assert _off_diagonal(res.matrix).max() > 1e-2


def test_default_leaf_and_eta_match_sparse_lu():
    model, energies = _lattice_case("square field disorder")
    res = nd.dissection_solve(model, energies, 0.07)
    _assert_close(res.matrix[:, 1, 0], transmission_direct(model, energies, eta=0.07)[:, 1, 0], "eta = 0.07 meV")


@pytest.mark.parametrize("leaf", [1, 4, 16, 64, 10**6])
def test_leaf_size_does_not_change_the_result(leaf):
    # 10**6: one front holding every eliminated orbital (a dense Schur complement); 1: single-site leaves.
    model, energies = _lattice_case("three leads field")
    _assert_close(_solve(model, energies, leaf=leaf).matrix, _solve(model, energies, leaf=SMALL_LEAF).matrix,
                  f"leaf {leaf}")


def test_symmetric_update_equals_the_general_one(monkeypatch):
    # Real H: the fronts are complex symmetric and only lower triangles are formed; the general path
    # forms everything.  Same numbers to round-off (REL).
    case = random_device(3, max_len=24, max_wid=18)
    energies = in_band_energies(np.random.default_rng(3), 3)
    sym = _solve(case.model, energies)
    assert nd.dissection_plan(case.model).symmetric
    monkeypatch.setattr(nd, "SYMMETRIC_FRONTS", False)
    fresh = TightBindingModel(case.model.hamiltonian, case.model.positions, case.model.leads, 1.0)
    assert not nd.dissection_plan(fresh).symmetric
    _assert_close(_solve(fresh, energies).matrix, sym.matrix, "general update")
    # A field makes H complex: the symmetric update must not be used.
    assert not nd.dissection_plan(_lattice_case("triangular field")[0]).symmetric


# --- invariants -------------------------------------------------------------------------------------------------


@pytest.mark.parametrize("name", ["three leads field", "four leads disorder", "spin rashba zeeman"])
def test_unitarity_sum_rules(name):
    model, energies = _lattice_case(name)
    res = _solve(model, energies)
    n_open = res.n_open.astype(float)
    # sum_q T_qp = N_p (columns, R on the diagonal) and sum_q T_pq = N_p (rows): unitarity of S (Buttiker
    # 1986); round-off, REL relative to the channel count.
    _assert_close(res.matrix.sum(axis=1), n_open, f"{name}: column sums")
    _assert_close(res.matrix.sum(axis=2), n_open, f"{name}: row sums")


@pytest.mark.parametrize("n_leads", [3, 4])
def test_reciprocity_in_a_field(n_leads):
    def build(flux):
        leads = [Lead("w", "left", (4, 15)), Lead("e", "right", (2, 12)), Lead("n", "top", (6, 16)),
                 Lead("s", "bottom", (3, 9))][:n_leads]
        return Device(rectangle(0, 0, 20, 20) - disk((10, 10), 3.0), leads, lattice=square(1.0), hopping=1.0,
                      potential=_wave, field=MagneticField(flux_per_cell=flux)).discretise()

    energies = np.array([1.21, 2.86])
    plus, minus = _solve(build(0.05), energies).matrix, _solve(build(-0.05), energies).matrix
    # T_pq(B) = T_qp(-B) (Buttiker 1986); round-off, REL.
    _assert_close(plus, np.swapaxes(minus, 1, 2), "reciprocity")
    # The field breaks T_pq(B) = T_pq(-B) here, so the check above is not comparing symmetric matrices
    # (1e-3: our choice, far above round-off).
    assert np.abs(_off_diagonal(plus) - _off_diagonal(minus)).max() > 1e-3


# --- the tree is built once and reused ---------------------------------------------------------------------------


def test_tree_reused_across_energies_gives_identical_results():
    model, energies = _lattice_case("four leads disorder")
    batch = nd.dissection_solve(model, energies)  # one plan (cached on the model), all energies in one call
    for k, energy in enumerate(energies):
        nd.clear_tree_cache()
        fresh = nd.dissection_plan(model, nd.dissection_tree(model))  # a new tree, built from scratch
        single = nd.dissection_solve(model, [energy], plan=fresh)
        # The same arithmetic on the same inputs: identical to the last bit.
        np.testing.assert_array_equal(single.matrix[0], batch.matrix[k])


def test_tree_shared_by_models_of_one_geometry():
    # Sweep points: another potential, the same sites and bonds -> the same tree object, and the same numbers
    # as a tree built afresh for that model.
    first = Device(rectangle(0, 0, 18, 14), [Lead("l", "left", (0, 14)), Lead("r", "right", (2, 9))],
                   lattice=square(1.0), hopping=1.0, potential=0.0).discretise()
    second = Device(rectangle(0, 0, 18, 14), [Lead("l", "left", (0, 14)), Lead("r", "right", (2, 9))],
                    lattice=square(1.0), hopping=1.0, potential=_wave).discretise()
    assert nd.dissection_tree(first) is nd.dissection_tree(second)
    energies = np.array([0.77, 2.9])
    shared = nd.dissection_solve(second, energies)
    nd.clear_tree_cache()
    fresh = nd.dissection_solve(second, energies, plan=nd.dissection_plan(second, nd.dissection_tree(second)))
    np.testing.assert_array_equal(shared.matrix, fresh.matrix)
    _assert_close(shared.matrix[:, 1, 0], transmission_direct(second, energies)[:, 1, 0], "shared tree vs splu")


def test_tree_structure():
    model, _ = _lattice_case("spin rashba zeeman")
    tree = nd.dissection_tree(model, leaf_orbitals=SMALL_LEAF)
    n = model.n_orbitals
    # Every orbital is eliminated exactly once or is a root (lead interface) unknown.
    assert np.array_equal(np.sort(np.concatenate([tree.elim_orbitals, tree.root_orbitals])), np.arange(n))
    iface = np.unique(np.concatenate([lead.interface for lead in model.leads]))
    assert np.array_equal(tree.root_orbitals, iface)
    assert np.all(tree.n_elim % model.norbs == 0) and tree.n_bound[-1] == 0
    # Vertex separators: every Hamiltonian entry joins two orbitals eliminated at the same node or at a node
    # and one of its ancestors (else the fronts could not hold it).
    node = np.full(n, tree.n_nodes - 1)
    node[tree.elim_orbitals] = np.repeat(np.arange(tree.n_nodes - 1), tree.n_elim[:-1])
    parent = np.full(tree.n_nodes, -1)
    for v in range(tree.n_nodes):
        parent[tree.children[tree.child_ptr[v]:tree.child_ptr[v + 1]]] = v
    depth_first = np.zeros(tree.n_nodes, dtype=int)  # first descendant in postorder
    for v in range(tree.n_nodes):
        kids = tree.children[tree.child_ptr[v]:tree.child_ptr[v + 1]]
        depth_first[v] = depth_first[kids].min() if len(kids) else v
    coo = model.hamiltonian.tocoo()
    lo, hi = np.minimum(node[coo.row], node[coo.col]), np.maximum(node[coo.row], node[coo.col])
    assert np.all(depth_first[hi] <= lo)  # lo lies in hi's subtree
    # Boundary unknowns land inside the parent's front.
    f = tree.n_elim + tree.n_bound
    for v in range(tree.n_nodes - 1):
        pos = tree.parent_pos[tree.map_ptr[v]:tree.map_ptr[v + 1]]
        assert len(pos) == tree.n_bound[v] and (pos.size == 0 or (pos.min() >= 0 and pos.max() < f[parent[v]]))


def test_separators_grow_like_the_square_root_of_the_size():
    # Nested dissection of an n x n grid: the largest front holds the top separator (n sites) and the lead
    # interfaces (2n), so it doubles when n doubles (George 1973).  Work memory (fronts and stack) then grows
    # like n^2 = N, not N^2.  Ratios between 1.8 and 2.2 (fronts) and 3.5 and 4.5 (memory): our bounds around
    # the exact 2 and 4, leaving room for the lattice's odd sizes.
    def tree(side):
        return nd.dissection_tree(strip_device(side, side).discretise())

    small, large = tree(48), tree(96)
    assert 1.8 < large.front_max / small.front_max < 2.2
    assert 3.5 < large.work_bytes / small.work_bytes < 4.5


# --- closed subdomains at one of their eigenvalues -----------------------------------------------------------------


@pytest.mark.parametrize("energy", [4.0, 3.0, 5.0])
def test_clean_square_at_a_subdomain_eigenvalue(energy, monkeypatch):
    # A clean 16 x 16 square with the band bottom at 0 (t = 1): rectangles of the partition have eigenvalues
    # exactly at the band centre 4 and at 4 -+ 1 (4 - 2 cos(pi i/(a+1)) - 2 cos(pi j/(b+1)); Economou,
    # Green's Functions in Quantum Physics, from memory), so some fronts are exactly singular.  Their near-null
    # unknowns are delayed, and the result is still splu's to REL.
    model = strip_device(16, 16).discretise()
    res = _solve(model, [energy])
    assert res.delays[0] > 0 and res.trusted[0]
    _assert_close(res.matrix[0, 1, 0], transmission_direct(model, [energy])[0, 1, 0], f"E = {energy}")
    # Without delays the same energy is either refused or wrong: the mechanism is what makes it right.
    monkeypatch.setattr(nd, "PIVOT_DELAY", 0.0)
    bare = _solve(model, [energy])
    wrong = abs(bare.matrix[0, 1, 0] - res.matrix[0, 1, 0]) > 1e-6 if bare.trusted[0] else True
    assert wrong


@pytest.mark.parametrize("energy, n_root", [(2.0, 1), (4.0, 2), (6.0, 1)])
def test_delayed_unknowns_reach_the_root(energy, n_root):
    # A clean 2 x 4 strip: its four inner sites form one closed 2 x 2 block with eigenvalues 4 + {-2, 0, 0, 2}
    # (onsite 4, t = 1), the only front below the root.  At E = 2, 4, 6 it is singular (twice at 4), nothing
    # above it is closed, so its near-null unknowns (one, two, one) are solved at the root together with the
    # leads -- and the result is still splu's (REL).
    model = strip_device(2, 4).discretise()
    res = _solve(model, [energy])
    assert res.delayed[0] == n_root and res.trusted[0]
    _assert_close(res.matrix[0, 1, 0], transmission_direct(model, [energy])[0, 1, 0], f"E = {energy}")
    assert res.matrix[0, 1, 0] > 0.1  # it transmits: not 0 = 0 (our choice, far above round-off)


@pytest.mark.parametrize("rgf_bytes", [2**30, 0], ids=["redo by RGF", "redo by splu"])
def test_untrusted_energies_are_redone(rgf_bytes, monkeypatch):
    # With no room for delays, the band-centre energy of the clean square is abandoned by the tree; the public
    # entry points redo it (by RGF, or by a sparse direct solve when RGF's blocks would be too large) and still
    # report the tree as the solver.
    from rgftrans.transport import rgf

    model = strip_device(16, 16).discretise()
    monkeypatch.setattr(nd, "DELAY_MIN", 0)
    monkeypatch.setattr(nd, "DELAY_FRACTION", 0.0)
    monkeypatch.setattr(rgf, "FALLBACK_RGF_BYTES", rgf_bytes)
    energies = [4.0, 4.3]
    assert _solve(model, energies).trusted.tolist() == [False, True]
    ref = transmission_direct(model, energies)
    two = transmission(model, energies, solver="dissection")
    full = transmission_matrix(model, energies, solver="dissection")
    assert two.solver == full.solver == "dissection"
    _assert_close(two.transmission, ref[:, 1, 0], "transmission")
    _assert_close(_off_diagonal(full.matrix), _off_diagonal(ref), "transmission_matrix")


# --- the choice of solver ----------------------------------------------------------------------------------------


def test_forced_solvers_agree_and_say_which_ran():
    model = random_device(11, max_len=24, max_wid=18).model
    energies = in_band_energies(np.random.default_rng(11), 4)
    by_rgf = transmission(model, energies, solver="rgf")
    by_tree = transmission(model, energies, solver="dissection")
    assert (by_rgf.solver, by_tree.solver) == ("rgf", "dissection")
    _assert_close(by_tree.transmission, by_rgf.transmission, "transmission")
    assert np.array_equal(by_tree.n_open, by_rgf.n_open)
    m_tree = transmission_matrix(model, energies, solver="dissection")
    assert m_tree.solver == "dissection"
    _assert_close(m_tree.matrix, transmission_matrix(model, energies, solver="rgf").matrix, "matrix")


def test_automatic_choice_follows_the_predicted_cost():
    # A long narrow strip: RGF's layers are tiny and the tree carries twice the width as boundary -> RGF.
    # A wide square: RGF pays n^3 per layer, the tree n^3 in total -> the tree.  Tiny devices are not planned.
    narrow = strip_device(6, 400).discretise()
    wide = Device(rectangle(0, 0, 95, 95), [Lead("l", "left", (0, 95)), Lead("r", "right", (0, 95))],
                  lattice=square(1.0), hopping=1.0, disorder=Disorder(1.0, seed=1)).discretise()
    tiny = strip_device(3, 5).discretise()
    assert choose_solver(narrow).solver == "rgf"
    choice = choose_solver(wide)
    assert choice.solver == "dissection" and choice.dissection_seconds < choice.rgf_seconds
    assert choose_solver(tiny).solver == "rgf" and np.isnan(choose_solver(tiny).dissection_seconds)
    energies = np.array([0.71, 1.13])
    assert transmission(wide, energies).solver == "dissection"
    assert transmission(narrow, energies).solver == "rgf"


def test_explicit_slicing_asks_for_rgf():
    from builders import merged_pairs_slicing

    model = Device(rectangle(0, 0, 95, 95), [Lead("l", "left", (0, 95)), Lead("r", "right", (0, 95))],
                   lattice=square(1.0), hopping=1.0).discretise()
    assert transmission(model, [0.9], slicing=merged_pairs_slicing(model)).solver == "rgf"


def test_unknown_solver_is_a_one_line_error():
    model = strip_device(3, 4).discretise()
    with pytest.raises(RgftransError, match="solver='lu' is not one of 'auto', 'rgf', 'dissection'") as err:
        transmission(model, [1.0], solver="lu")
    assert "\n" not in str(err.value)
