"""LDOS, lead-resolved densities, scattering states and bond currents (rgftrans.transport.local).

References are scipy dense linear algebra (an outside library) and the
invariants of Landauer-Büttiker scattering theory.
"""

import numpy as np
import pytest
import scipy.linalg as sla
import scipy.sparse as sp

from rgftrans.system.device import Device, Lead, LeadModel, TightBindingModel
from rgftrans.transport.direct import scattering_matrix
from rgftrans.errors import LeadError
from rgftrans.system.geometry import disk, rectangle
from rgftrans.system.lattices import square
from rgftrans.transport.local import bond_currents, ldos, local_quantities, scattering_states
from rgftrans.transport.rgf import four_terminal_resistance, transmission, transmission_matrix
from rgftrans.leads.embedding import lead_self_energies

SIDES = ("left", "right", "bottom", "top")


def random_device(seed: int, n_leads: int):
    """A random rectangle with a hole and a smooth random potential, with 2-4 leads on distinct sides."""
    rng = np.random.default_rng(seed)
    lx, ly = rng.integers(9, 16), rng.integers(7, 13)
    region = rectangle(0, 0, lx, ly) - disk((rng.uniform(3, lx - 3), rng.uniform(3, ly - 3)), rng.uniform(1.0, 2.2))
    amp, kx, ky = rng.uniform(0.2, 1.0), rng.uniform(0.2, 1.2), rng.uniform(0.2, 1.2)
    leads = []
    for side in rng.permutation(SIDES)[:n_leads]:
        extent = ly if side in ("left", "right") else lx
        lo = int(rng.integers(0, extent - 3))
        hi = int(rng.integers(lo + 2, extent + 1))
        leads.append(Lead(f"lead_{side}", str(side), (lo, hi)))
    device = Device(region, leads, lattice=square(1.0), hopping=1.0,
                    potential=lambda x, y: amp * np.sin(kx * x) * np.cos(ky * y))
    return device.discretise(), rng.uniform(0.4, 3.5)


def dense_green(model, energy):
    """Reference: dense inverse of E - H - sum Sigma (scipy.linalg)."""
    sigmas, _ = lead_self_energies(model, energy)
    a = energy * np.eye(model.n_sites) - model.hamiltonian.toarray()
    for lead, sigma in zip(model.leads, sigmas):
        a[np.ix_(lead.interface, lead.interface)] -= sigma
    return sla.inv(a), sigmas


CASES = [(seed, n) for n in (2, 3, 4) for seed in range(4)]


@pytest.mark.parametrize("seed,n_leads", CASES)
def test_ldos_and_lead_densities_match_dense_inverse(seed, n_leads):
    model, energy = random_device(seed, n_leads)
    g, sigmas = dense_green(model, energy)
    loc = local_quantities(model, energy)
    # Reference: scipy dense inverse.  Tolerance 1e-10 relative: both exact up to round-off.
    scale = np.abs(np.diag(g).imag).max() / np.pi
    assert np.abs(loc.ldos - (-np.diag(g).imag / np.pi)).max() < 1e-10 * scale
    for p, sigma in enumerate(sigmas):
        gamma = 1j * (sigma - sigma.conj().T)
        cols = g[:, model.leads[p].interface]
        ref = np.einsum("ik,kl,il->i", cols, gamma, cols.conj()).real / (2 * np.pi)
        assert np.abs(loc.lead_density[p] - ref).max() < 1e-10 * scale
    # Ward identity without absorption: sum_p G Gamma_p G^dag = i (G - G^dag), so the
    # lead densities add up to the LDOS (Datta 1995, ch. 3, from memory).
    assert np.abs(loc.lead_density.sum(axis=0) - loc.ldos).max() < 1e-10 * scale
    assert loc.ldos.min() > -1e-12 * scale  # LDOS >= 0
    # The compiled two-lead diagonal (forward + backward sweeps) against the same dense reference.
    assert np.abs(ldos(model, energy) - (-np.diag(g).imag / np.pi)).max() < 1e-10 * scale


@pytest.mark.parametrize("seed,n_leads", CASES)
def test_multiterminal_sum_rules(seed, n_leads):
    """R_pp + sum_{q!=p} T_qp = N_p and R_qq + sum_{p!=q} T_pq = N_q (Büttiker, PRL 57, 1761 (1986), from memory)."""
    model, energy = random_device(seed, n_leads)
    res = transmission_matrix(model, [energy])
    t = res.matrix[0]
    n_open = res.n_open[0]
    # 1e-9: sums of O(10) terms, each exact to round-off of an RGF sweep.
    assert np.allclose(t.sum(axis=0), n_open, atol=1e-9)  # columns: everything sent from q ends somewhere
    assert np.allclose(t.sum(axis=1), n_open, atol=1e-9)  # rows: everything arriving in p came from somewhere
    # Reflection independently from the flux-normalised Fisher-Lee S matrix (sparse LU).
    smat = scattering_matrix(model, energy)
    for p in range(n_leads):
        assert t[p, p] == pytest.approx(smat.transmission(source=p, drain=p), abs=1e-9)


@pytest.mark.parametrize("seed,n_leads", CASES[::2])
def test_scattering_states_carry_the_transmission(seed, n_leads):
    """sum |amplitude|^2 into lead p from the RGF scattering states equals T_p0 (Fisher & Lee, PRB 23, 6851 (1981), from memory)."""
    model, energy = random_device(seed, n_leads)
    res = transmission_matrix(model, [energy]).matrix[0]
    states = scattering_states(model, energy, 0)
    for p in range(n_leads):
        assert states.transmission_into(p) == pytest.approx(res[p, 0], abs=1e-9)
    # Bond currents: divergence-free at every site not on a lead interface (current conservation),
    # and the current leaving through each interface is the transmission (unit incoming flux).
    cur = bond_currents(model, states.wavefunctions).tocsr()
    assert abs(cur + cur.T).max() < 1e-12  # antisymmetric by construction of I_ij
    divergence = np.asarray(cur.sum(axis=1)).ravel()
    on_iface = np.zeros(model.n_sites, bool)
    for lead in model.leads:
        on_iface[lead.interface] = True
    assert np.abs(divergence[~on_iface]).max() < 1e-10
    for p in range(1, n_leads):
        assert -divergence[model.leads[p].interface].sum() == pytest.approx(res[p, 0], abs=1e-9)


def chain_model(n: int, onsite=None, leads=()):
    onsite = np.zeros(n) if onsite is None else np.asarray(onsite, float)
    ham = sp.diags([onsite, -np.ones(n - 1), -np.ones(n - 1)], [0, 1, -1], format="csr", dtype=complex)
    return TightBindingModel(ham, np.column_stack([np.arange(n), np.zeros(n)]), tuple(leads))


def chain_lead(name, site):
    return LeadModel(name, np.zeros((1, 1)), -np.ones((1, 1)), np.array([site]), -np.ones((1, 1)),
                     np.zeros((1, 2)), np.array([1.0, 0.0]))


def test_closed_chain_ldos_against_exact_diagonalisation():
    """Open chain N = 5, site n = 1, E = 0.3, eta = 0.1 gives 0.128627837464 (our own evaluation, both ways).

    Closed form: rho_n = sum_j |psi_j(n)|^2 (eta/pi) / ((E - E_j)^2 + eta^2) with
    E_j = -2 cos(j pi/(N+1)) (Economou, Green's Functions in Quantum Physics, from memory).
    """
    n_sites, e, eta = 5, 0.3, 0.1
    model = chain_model(n_sites)
    rho = ldos(model, e, eta=eta)
    j = np.arange(1, n_sites + 1)
    levels = -2 * np.cos(j * np.pi / (n_sites + 1))
    psi1 = np.sqrt(2 / (n_sites + 1)) * np.sin(j * np.pi / (n_sites + 1))
    closed = np.sum(psi1**2 * (eta / np.pi) / ((e - levels) ** 2 + eta**2))
    assert closed == pytest.approx(0.128627837464, abs=1e-12)  # our 12-decimal value (transcription check)
    assert rho[0] == pytest.approx(closed, abs=1e-12)  # 1e-12: exact up to round-off


@pytest.mark.parametrize("energy,expected", [(0.0, (1 / np.pi, 0.0, 1 / np.pi)),
                                             (0.7, (0.298176690313, 0.146106578253, 0.077555757150))])
def test_friedel_oscillation_near_the_end_of_a_lead(energy, expected):
    """rho_n = sin^2(k n) / (pi t sin k) at site n from the end of a semi-infinite chain.

    Friedel-type oscillation near the end of a chain: standing wave sin(kn) of the semi-infinite chain
    (Economou, Green's Functions in Quantum Physics, 3rd ed. 2006, from memory; common practice); the
    tabulated numbers are our own evaluation.  The first sites of the chain are the device; the rest
    is one lead.
    """
    model = chain_model(6, leads=[chain_lead("rest", 5)])
    rho = ldos(model, energy)
    k = np.arccos(-energy / 2)
    closed = np.sin(k * np.arange(1, 4)) ** 2 / (np.pi * np.sin(k))
    assert np.allclose(closed, expected, atol=1e-12)
    assert np.allclose(rho[:3], expected, atol=1e-12)  # 1e-12: exact lead self-energy, round-off only


def test_four_terminal_reciprocity_and_two_terminal_limit():
    """R_{pq,rs} = R_{rs,pq} at B = 0 (Büttiker, IBM J. Res. Dev. 32, 317 (1988), from memory).

    With current and voltage on the same two leads of a two-terminal device the
    four-terminal formula must give 1/G (Landauer).
    """
    model, energy = random_device(11, 4)
    g = transmission_matrix(model, [energy]).conductance_matrix()[0]
    r_a = four_terminal_resistance(g, current=(0, 1), voltage=(2, 3))
    r_b = four_terminal_resistance(g, current=(2, 3), voltage=(0, 1))
    assert r_a == pytest.approx(r_b, rel=1e-9)
    assert abs(r_a) > 1.0  # a generic device: the check is not 0 = 0
    two, e2 = random_device(3, 2)
    g2 = transmission_matrix(two, [e2]).conductance_matrix()[0]
    t = transmission(two, [e2]).transmission[0]
    from rgftrans.system.materials import CONDUCTANCE_QUANTUM_S
    assert four_terminal_resistance(g2, (0, 1), (0, 1)) == pytest.approx(1 / (t * CONDUCTANCE_QUANTUM_S), rel=1e-9)


def test_lead_on_an_interior_site_is_refused():
    """A hand-built lead coupled to the centre of a 3x3 square cluster (all 4 neighbours inside)."""
    dev = Device(rectangle(0, 0, 2, 2), [Lead("a", "left", (0, 2)), Lead("b", "right", (0, 2))],
                 lattice=square(1.0), hopping=1.0).discretise()
    centre = int(np.flatnonzero((dev.positions == [1.0, 1.0]).all(axis=1))[0])
    bad = LeadModel("probe", np.zeros((1, 1)), -np.ones((1, 1)), np.array([centre]), -np.ones((1, 1)),
                    np.zeros((1, 2)), np.array([0.0, 1.0]))
    with pytest.raises(LeadError, match="interior site") as err:
        TightBindingModel(dev.hamiltonian, dev.positions, dev.leads + (bad,), coordination=4)
    assert "\n" not in str(err.value)


def test_unknown_lead_name_for_scattering_states():
    model, energy = random_device(0, 2)
    with pytest.raises(LeadError, match="no lead named 'gate'"):
        scattering_states(model, energy, "gate")


def test_ldos_on_narrow_layers_with_non_diagonal_couplings():
    """A narrow triangular-lattice strip: layers of a few sites joined by non-diagonal couplings, the loop
    kernel's general Schur path.  Reference: the diagonal of a dense scipy inverse, to 1e-10 relative."""
    from rgftrans.system.lattices import triangular
    from rgftrans.transport.rgf import layer_blocks

    model = Device(rectangle(0, 0, 14, 4), [Lead("l", "left", (0, 4)), Lead("r", "right", (0, 4))],
                   lattice=triangular(1.0), hopping=1.0, potential=lambda x, y: 0.5 * np.sin(x)).discretise()
    layers = layer_blocks(model).buffers
    assert not layers.v_diag.all() and layers.sizes.max() <= 24  # the path under test is really taken
    for energy in (2.3, 4.1):
        g, _ = dense_green(model, energy)
        ref = -np.diag(g).imag / np.pi
        assert np.abs(ldos(model, energy) - ref).max() < 1e-10 * np.abs(ref).max()
