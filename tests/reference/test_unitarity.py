"""Fisher-Lee S matrix, Landauer/Caroli formula, unitarity and Onsager-Buttiker reciprocity.

Sources (all recalled, not read: "from memory"):

* [Fisher-Lee] D. S. Fisher & P. A. Lee, PRB 23, 6851 (1981): t and r from the
  Green's function and the lead modes, S unitary.
* [Caroli] C. Caroli, R. Combescot, P. Nozieres, D. Saint-James, J. Phys. C 4,
  916 (1971): T = Tr[Gamma_L G Gamma_R G^dag]; also Y. Meir & N. S. Wingreen,
  PRL 68, 2512 (1992).
* [Landauer] R. Landauer, IBM J. Res. Dev. 1, 223 (1957).
* [Buttiker] M. Buttiker, PRL 57, 1761 (1986) (multi-terminal formula, sum
  rules, reciprocity T_ij(B) = T_ji(-B)) and IBM J. Res. Dev. 32, 317 (1988)
  (S(B) = S(-B)^T).
* [Datta] S. Datta, *Electronic Transport in Mesoscopic Systems* (CUP 1995),
  ch. 3: hard-wall strip modes, the Ward identity i(G - G^dag) = G Gamma G^dag
  (no eta inside the device).
* Peierls phase: R. Peierls, Z. Phys. 80, 763 (1933).
* The numbers of cases 4a-4c (|S_ij|^2 table, two-terminal T = 0.76634633534715)
  are our own computation by dense linear algebra with exact lead
  self-energies, reproduced independently; they are regression numbers, not
  published.  The random seeds are ours.

Conventions: t = 1, a = 1, onsite 0; Peierls
phase in the Landau gauge A = (-B y, 0): <x+1, y|H|x, y> = -t exp(-2 pi i phi y),
phi the flux per plaquette in flux quanta.  ``Device`` models carry onsite 4t
and are called at E + ``ONSITE_SHIFT``; hand-built models (Peierls phase,
chain leads) use onsite 0 and no shift.

The magnetic field is not a ``Device`` option yet, so every field-dependent
check uses a hand-built ``TightBindingModel``.

Tolerance: 1e-10 for dense/direct solves and short RGF (our independent
calculation shows residuals of 1e-16 to 2e-12; 1e-10 is that with margin for
the eigen-solves of multichannel leads); 1e-9 would be the choice for RGF on
long systems, where round-off accumulates slice by slice.
"""

import numpy as np
import pytest

from _systems import (
    ONSITE_SHIFT,
    chain_lead,
    hand_model,
    peierls_grid_hamiltonian,
    peierls_strip_model,
    site_table_potential,
    strip_device,
)
from rgftrans.system.device import Device, Lead
from rgftrans.transport.direct import interface_green, scattering_matrix, transmission_direct
from rgftrans.errors import RgftransError, ThresholdWarning
from rgftrans.system.geometry import rectangle
from rgftrans.system.lattices import square
from rgftrans.transport.rgf import transmission

#: Dense/direct solves and short RGF: observed residuals <= 2e-12, 1e-10 with margin (see module docstring).
TOL = 1e-10
#: Tables quoted to 10 decimals (case 4a |S|^2): rounding 5e-11, inside TOL.
TOL_TABLE_10 = TOL


def unitarity_residual(s):
    return np.abs(s.conj().T @ s - np.eye(len(s))).max()


# --- Case 4a: 3-terminal 3x3 cluster with a Peierls phase ------------------------------------

CLUSTER_ONSITE = np.array([0.477, -0.12, 0.423, -0.238, -0.181, -0.382, -0.258, -0.181, 0.464]).reshape(3, 3)
CLUSTER_LEAD_SITES = (0, 5, 7)  # (x, y) = (0, 0), (2, 1), (1, 2); site index s = 3y + x
CLUSTER_PHI, CLUSTER_E = 0.13, 0.37

# Case 4a, our own dense computation (10 decimals): |S_ij|^2, row = outgoing lead, column = incoming lead.
CLUSTER_S2 = np.array([
    [0.0283154686, 0.4622597161, 0.5094248153],
    [0.4884683117, 0.3412756090, 0.1702560793],
    [0.4832162196, 0.1964646749, 0.3203191055],
])


def cluster_model(phi, onsite=CLUSTER_ONSITE, lead_sites=CLUSTER_LEAD_SITES):
    """Grid of onsite[y, x] with the Peierls phase, one onsite-0 chain lead (hopping -1) per lead site."""
    h, positions = peierls_grid_hamiltonian(onsite, phi)
    return hand_model(h, positions, [chain_lead(f"lead{i}", s) for i, s in enumerate(lead_sites)])


@pytest.fixture(scope="module")
def cluster_s():
    """S at +phi and -phi for case 4a."""
    return {sign: scattering_matrix(cluster_model(sign * CLUSTER_PHI), CLUSTER_E) for sign in (+1, -1)}


def test_cluster_s_matrix_table(cluster_s):
    smat = cluster_s[+1]
    assert list(smat.channel_lead) == [0, 1, 2]  # one open channel per chain lead
    # Our |S_ij|^2 table (10 decimals, unpublished regression); S by Fisher & Lee 1981 / Buttiker 1986
    # (from memory); TOL_TABLE_10.
    assert np.abs(np.abs(smat.s) ** 2 - CLUSTER_S2).max() < TOL_TABLE_10


@pytest.mark.parametrize("sign", [+1, -1])
def test_cluster_unitarity(cluster_s, sign):
    smat = cluster_s[sign]
    s2 = np.abs(smat.s) ** 2
    # Unitarity (Fisher & Lee 1981; Buttiker 1986; from memory): rows and columns sum to 1 (1e-15 in our
    # dense check), S^dag S = 1 (3e-16 there); TOL.
    assert np.abs(s2.sum(axis=0) - 1).max() < TOL
    assert np.abs(s2.sum(axis=1) - 1).max() < TOL
    assert unitarity_residual(smat.s) < TOL


def test_cluster_reciprocity_and_asymmetry(cluster_s):
    s_plus, s_minus = cluster_s[+1].s, cluster_s[-1].s
    # Onsager-Buttiker S(phi) = S(-phi)^T (Buttiker, IBM J. Res. Dev. 32, 317 (1988), from memory);
    # 4e-16 in our dense check, TOL.  Identical chain leads, so the channel phases match at +-phi.
    assert np.abs(s_plus - s_minus.T).max() < TOL
    # Our case-4a values T_21(phi) = 0.4884683117, T_12(phi) = 0.4622597161, swapped under phi -> -phi
    # (Buttiker 1986, from memory); 10 decimals -> TOL_TABLE_10.
    t21_plus, t12_plus = abs(s_plus[1, 0]) ** 2, abs(s_plus[0, 1]) ** 2
    t21_minus, t12_minus = abs(s_minus[1, 0]) ** 2, abs(s_minus[0, 1]) ** 2
    assert abs(t21_plus - 0.4884683117) < TOL_TABLE_10 and abs(t12_plus - 0.4622597161) < TOL_TABLE_10
    assert abs(t21_minus - 0.4622597161) < TOL_TABLE_10 and abs(t12_minus - 0.4884683117) < TOL_TABLE_10
    # A nonzero asymmetry T_ij(phi) != T_ij(-phi) for three terminals (allowed by Buttiker 1986, from
    # memory), so the reciprocity check above can detect a broken field; our table gives 0.0262, we
    # require > 0.01 (our choice, no source).
    assert abs(t21_plus - t21_minus) > 0.01


def test_cluster_caroli_equals_s_matrix(cluster_s):
    t_caroli = transmission_direct(cluster_model(CLUSTER_PHI), [CLUSTER_E])[0]
    smat = cluster_s[+1]
    for p in range(3):
        for q in range(3):
            if p != q:
                # Caroli T_pq = Tr[Gamma_p G Gamma_q G^dag] (Caroli et al. 1971) equals sum |S_pq|^2 (Fisher
                # & Lee 1981), both from memory; TOL.
                assert abs(t_caroli[p, q] - smat.transmission(source=q, drain=p)) < TOL


@pytest.mark.parametrize("sign", [+1, -1])
def test_cluster_two_terminal_onsager(sign):
    # Two-terminal T(phi) = T(-phi) (Buttiker 1986, from memory); value 0.76634633534715 (lead 3 removed)
    # from our own dense computation (14 digits); TOL.
    model = cluster_model(sign * CLUSTER_PHI, lead_sites=CLUSTER_LEAD_SITES[:2])
    assert abs(transmission(model, [CLUSTER_E]).transmission[0] - 0.76634633534715) < TOL
    assert abs(transmission_direct(model, [CLUSTER_E])[0, 1, 0] - 0.76634633534715) < TOL


# Our own random clusters (seeded): reciprocity and unitarity for other sizes, fluxes and energies.
RANDOM_CLUSTERS = [
    # (seed, ny, nx, lead sites, phi, E)
    (11, 4, 4, (0, 7, 13), 0.21, -0.8),
    (12, 3, 5, (0, 9, 12), -0.37, 1.3),
    (13, 4, 4, (4, 3, 14, 11), 0.09, 0.15),
]


@pytest.mark.parametrize("seed, ny, nx, lead_sites, phi, energy", RANDOM_CLUSTERS)
def test_random_cluster_reciprocity(seed, ny, nx, lead_sites, phi, energy):
    onsite = np.random.default_rng(seed).uniform(-1.0, 1.0, (ny, nx))
    s_plus = scattering_matrix(cluster_model(phi, onsite, lead_sites), energy).s
    s_minus = scattering_matrix(cluster_model(-phi, onsite, lead_sites), energy).s
    # S unitary (Fisher & Lee 1981) and S(phi) = S(-phi)^T (Buttiker 1988), both from memory; TOL.
    assert unitarity_residual(s_plus) < TOL
    assert unitarity_residual(s_minus) < TOL
    assert np.abs(s_plus - s_minus.T).max() < TOL


# --- Case 4b: disordered strip, Fisher-Lee from analytic hard-wall modes ------------------------

STRIP_W, STRIP_L = 4, 6
STRIP_ONSITE = np.random.default_rng(46).uniform(-1.5, 1.5, (STRIP_L, STRIP_W))  # our seed; indexed [x, y]


@pytest.fixture(scope="module")
def disordered_strip():
    return strip_device(STRIP_W, STRIP_L, site_table_potential(STRIP_ONSITE))


def hard_wall_modes(energy, width, y_index):
    """Open modes of a hard-wall strip lead at reference energy E (onsite 0) (Datta 1995 ch. 3, from memory).

    chi_{y,m} = sqrt(2/(W+1)) sin(pi m y/(W+1)) (y = 1..W), eps_m = -2 cos(m pi/(W+1)),
    E - eps_m = -2 cos k_m, v_m = 2 sin k_m.  Returns (chi at the given rows, v) for the open m.
    """
    m = np.arange(1, width + 1)
    eps_m = -2 * np.cos(m * np.pi / (width + 1))
    is_open = np.abs(energy - eps_m) < 2
    m, eps_m = m[is_open], eps_m[is_open]
    k_m = np.arccos(-(energy - eps_m) / 2)
    chi = np.sqrt(2 / (width + 1)) * np.sin(np.pi * np.outer(y_index, m) / (width + 1))
    return chi, 2 * np.sin(k_m)


def fisher_lee(model, energy_ref, width):
    """t and r of lead 0 -> lead 1 from the package's interface Green's function and analytic modes.

    t_nm = i sqrt(v_n v_m) chi_n^T G_RL chi_m, r_nm = -delta_nm + i sqrt(v_n v_m) chi_n^T G_LL chi_m
    (Fisher & Lee 1981, from memory), up to lead-dependent phases.
    """
    g, sigmas, _ = interface_green(model, energy_ref + ONSITE_SHIFT)
    left, right = model.leads
    k = len(left.interface)
    rows = [model.positions[lead.interface, 1] + 1 for lead in (left, right)]  # y = 0..W-1 -> 1..W
    chi_l, v = hard_wall_modes(energy_ref, width, rows[0])
    chi_r, _ = hard_wall_modes(energy_ref, width, rows[1])
    sq = np.sqrt(np.outer(v, v))
    t = 1j * sq * (chi_r.T @ g[k:, :k] @ chi_l)
    r = -np.eye(len(v)) + 1j * sq * (chi_l.T @ g[:k, :k] @ chi_l)
    return t, r, g, sigmas


@pytest.mark.parametrize("energy, n_expected", [(-3.0, 1), (-1.0, 3), (0.1, 4), (2.2, 2)])
def test_strip_fisher_lee(disordered_strip, energy, n_expected):
    model = disordered_strip
    t, r, _, _ = fisher_lee(model, energy, STRIP_W)
    n = t.shape[0]
    assert n == n_expected  # open channels N(E) = #{m : |E - eps_m| < 2} (Datta 1995, from memory); integer
    e_pkg = energy + ONSITE_SHIFT
    t_fl = float(np.sum(np.abs(t) ** 2))
    # Caroli T (RGF and sparse LU; Caroli et al. 1971) equals the Fisher-Lee sum |t_nm|^2 from analytic
    # modes (Fisher & Lee 1981), both from memory; TOL.
    assert abs(transmission(model, [e_pkg]).transmission[0] - t_fl) < TOL
    assert abs(transmission_direct(model, [e_pkg])[0, 1, 0] - t_fl) < TOL
    # Unitarity t^dag t + r^dag r = 1 (2e-12 in our dense check) and T + R = N (Fisher & Lee 1981; Buttiker
    # 1986; from memory); TOL.
    assert np.abs(t.conj().T @ t + r.conj().T @ r - np.eye(n)).max() < TOL
    assert abs(t_fl + np.sum(np.abs(r) ** 2) - n) < TOL
    # The package's own S: unitary, its t-block carries the same transmission eigenvalues (these are
    # independent of the lead-dependent phases and of the channel basis), and T + R = N (Fisher & Lee 1981,
    # from memory); TOL.
    smat = scattering_matrix(model, e_pkg)
    assert unitarity_residual(smat.s) < TOL
    t_pkg = smat.amplitudes(source="L", drain="R").matrix
    assert t_pkg.shape == (n, n)
    tau_pkg = np.sort(np.linalg.eigvalsh(t_pkg.conj().T @ t_pkg))
    tau_fl = np.sort(np.linalg.eigvalsh(t.conj().T @ t))
    assert np.abs(tau_pkg - tau_fl).max() < TOL
    assert abs(smat.transmission(source="L", drain="R") + smat.transmission(source="L", drain="L") - n) < TOL
    assert abs(smat.transmission(source="R", drain="L") + smat.transmission(source="R", drain="R") - n) < TOL


@pytest.mark.parametrize("energy", [-3.0, -1.0, 0.1, 2.2])
def test_strip_ward_identity(disordered_strip, energy):
    _, _, g, sigmas = fisher_lee(disordered_strip, energy, STRIP_W)
    k = len(sigmas[0])
    gamma = np.zeros_like(g)
    gamma[:k, :k] = 1j * (sigmas[0] - sigmas[0].conj().T)
    gamma[k:, k:] = 1j * (sigmas[1] - sigmas[1].conj().T)
    # Ward identity with no eta in the device: i(G - G^dag) = G (Gamma_L + Gamma_R) G^dag (follows from
    # G^-1 - G^-dag = Sigma^dag - Sigma; Datta 1995 ch. 3, from memory; 9e-16 in our dense check).
    # Gamma lives on the interface sites only, so the identity holds within the interface block; 1e-10.
    residual = np.abs(1j * (g - g.conj().T) - g @ gamma @ g.conj().T).max()
    assert residual < TOL


# --- Case 4c: two-terminal Onsager with the field in the leads too --------------------------------

ONSAGER_W, ONSAGER_L, ONSAGER_PHI = 5, 4, 0.07
ONSAGER_ONSITE = np.random.default_rng(47).uniform(-1.0, 1.0, (ONSAGER_W, ONSAGER_L))  # our seed; [y, x]


@pytest.mark.parametrize("energy", [-3.1, -1.2, 0.4])
def test_two_terminal_onsager_with_field_in_leads(energy):
    plus = peierls_strip_model(ONSAGER_ONSITE, +ONSAGER_PHI)
    minus = peierls_strip_model(ONSAGER_ONSITE, -ONSAGER_PHI)
    t_plus = transmission(plus, [energy]).transmission[0]
    t_minus = transmission(minus, [energy]).transmission[0]
    # Two-terminal Onsager symmetry T(+phi) = T(-phi) (Buttiker 1986, from memory); our dense check gave
    # <= 6e-13 at E = -3.1, -1.2, 0.4 (W = 5, L = 4, phi = 0.07). Tolerance TOL.
    assert abs(t_plus - t_minus) < TOL
    assert abs(transmission_direct(plus, [energy])[0, 1, 0] - t_plus) < TOL
    assert abs(transmission_direct(minus, [energy])[0, 0, 1] - t_minus) < TOL
    # The field does enter: T(phi) differs from T(0) (otherwise the check above would be empty); 1e-4 is
    # our choice, far above round-off and far below the observed change.
    t_zero = transmission(peierls_strip_model(ONSAGER_ONSITE, 0.0), [energy]).transmission[0]
    assert abs(t_plus - t_zero) > 1e-4


@pytest.mark.parametrize("energy", [-3.1, -1.2, 0.4])
def test_unitarity_in_field(energy):
    s_plus = scattering_matrix(peierls_strip_model(ONSAGER_ONSITE, +ONSAGER_PHI), energy)
    s_minus = scattering_matrix(peierls_strip_model(ONSAGER_ONSITE, -ONSAGER_PHI), energy)
    # S unitary with magnetic leads (Fisher & Lee 1981, from memory); TOL.
    assert unitarity_residual(s_plus.s) < TOL
    n_left = int(np.count_nonzero(s_plus.channel_lead == 0))
    t_plus, r_plus = s_plus.transmission(source="L", drain="R"), s_plus.transmission(source="L", drain="L")
    assert abs(t_plus + r_plus - n_left) < TOL  # T + R = N (unitarity)
    # Reciprocity S(phi) = S(-phi)^T (Buttiker 1988, from memory) in a form free of the leads' mode phases
    # and channel order (TOL):
    # t_{RL}(phi) and t_{LR}(-phi) have the same singular values, R_LL(phi) = R_LL(-phi) by the same token.
    sv_plus = np.linalg.svd(s_plus.amplitudes(source="L", drain="R").matrix, compute_uv=False)
    sv_minus = np.linalg.svd(s_minus.amplitudes(source="R", drain="L").matrix, compute_uv=False)
    assert np.abs(np.sort(sv_plus) - np.sort(sv_minus)).max() < TOL
    assert abs(s_plus.transmission(source="L", drain="L") - s_minus.transmission(source="L", drain="L")) < TOL


# --- Multi-terminal device with multichannel leads (zero field) -------------------------------------

MT_ONSITE = np.random.default_rng(48).uniform(-1.0, 1.0, (8, 8))  # our seed; indexed [x, y]


@pytest.fixture(scope="module")
def three_lead_device():
    device = Device(
        rectangle(0, 0, 7, 7),
        [Lead("west", "left", (1, 4)), Lead("east", "right", (2, 6)), Lead("north", "top", (2, 5))],
        lattice=square(1.0),
        hopping=1.0,
        potential=site_table_potential(MT_ONSITE),
    )
    return device.discretise()


@pytest.mark.parametrize("energy", [-3.1, -2.3, -1.1, 0.35])
def test_multiterminal_sum_rules(three_lead_device, energy):
    e_pkg = energy + ONSITE_SHIFT
    smat = scattering_matrix(three_lead_device, e_pkg)
    n_open = np.bincount(smat.channel_lead, minlength=3)
    t_caroli = transmission_direct(three_lead_device, [e_pkg])[0]
    # S unitary (Fisher & Lee 1981, from memory); TOL.
    assert unitarity_residual(smat.s) < TOL
    for p in range(3):
        # Sum rules from unitarity: sum_q T_pq = N_p and sum_q T_qp = N_p (R included) (Buttiker 1986, from
        # memory); TOL.
        assert abs(sum(smat.transmission(source=q, drain=p) for q in range(3)) - n_open[p]) < TOL
        assert abs(sum(smat.transmission(source=p, drain=q) for q in range(3)) - n_open[p]) < TOL
        for q in range(3):
            if p != q:
                # Caroli equals sum |S_pq|^2 (Caroli et al. 1971; Fisher & Lee 1981), and at zero field
                # T_pq = T_qp (Buttiker 1986), all from memory; TOL.
                assert abs(t_caroli[p, q] - smat.transmission(source=q, drain=p)) < TOL
                assert abs(smat.transmission(source=q, drain=p) - smat.transmission(source=p, drain=q)) < TOL


def test_scattering_matrix_on_a_channel_threshold():
    # W = 2 strip: subband 2 opens at E_ref = -2 - 2cos(2 pi/3) = -1 (hard-wall levels, Datta 1995, from
    # memory), where subband 1 is open.  Exactly at a threshold the group velocity is 0 and T is ill-defined
    # (common practice, no source); transmission() steps off it, flags the point
    # and reports N = 1 open channel per lead (the opening channel carries no current).  scattering_matrix()
    # at the same energy must either refuse with a clear RgftransError, or return an S whose channels are
    # those open channels -- not fail with an internal error.
    model = strip_device(2, 1)
    e_pkg = -2 - 2 * np.cos(2 * np.pi / 3) + ONSITE_SHIFT
    with pytest.warns(ThresholdWarning):
        result = transmission(model, [e_pkg])
    assert result.at_threshold[0]
    try:
        smat = scattering_matrix(model, e_pkg)
    except RgftransError:
        return
    assert list(np.bincount(smat.channel_lead, minlength=2)) == list(result.n_open[0])
    assert np.all(np.isfinite(smat.s))
