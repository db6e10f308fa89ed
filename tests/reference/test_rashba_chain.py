"""Rashba spin-orbit coupling on a one-row wire.

Bychkov-Rashba: a Rashba term shifts the two spin parabolas sideways,
E = hbar^2 (k -+ k_so)^2 / 2m - Delta (Yu. A. Bychkov & E. I. Rashba, JETP
Lett. 39, 78 (1984), from memory).  On the lattice, with the central
difference the package uses, the wire along x has
E(k) = 4t - 2t cos k +- (alpha/a) sin k = 4t - 2t' cos(k -+ theta),
t' = sqrt(t^2 + (alpha/2a)^2), tan theta = alpha / (2 a t) (our derivation).
The open channels at energy E therefore have Bloch phases
k = +-arccos((4t - E)/(2t')) +- theta.
"""

import numpy as np
import pytest

from rgftrans.system.device import Device, Lead
from rgftrans.system.geometry import rectangle
from rgftrans.system.lattices import square
from rgftrans.leads.modes import lead_modes
from rgftrans.transport.rgf import transmission


def wire(alpha, potential=0.0):
    region = rectangle(0, -0.4, 10, 0.4)
    return Device(region, [Lead("l", "left", (0, 0)), Lead("r", "right", (0, 0))], lattice=square(1.0),
                  hopping=1.0, spin=True, rashba=alpha, potential=potential).discretise()


@pytest.mark.parametrize("alpha", [0.3, 1.0])
@pytest.mark.parametrize("energy", [2.5, 3.7, 5.0])
def test_bloch_phases_of_the_rashba_wire(alpha, energy):
    lead = wire(alpha).leads[1]
    modes = lead_modes(lead.h_cell, lead.h_hop, energy)
    t_prime = np.hypot(1.0, alpha / 2)
    theta = np.arctan(alpha / 2)
    k0 = np.arccos((4 - energy) / (2 * t_prime))
    expected = np.sort(np.mod([k0 + theta, k0 - theta, -k0 + theta, -k0 - theta], 2 * np.pi))
    got = np.sort(np.mod(np.angle(np.concatenate([modes.bloch_out[modes.propagating_out], modes.bloch_in])), 2 * np.pi))
    assert modes.n_open == 2
    assert np.allclose(got, expected, atol=1e-10)  # eigen-solver round-off only


def test_rashba_wire_with_a_barrier_conserves_flux_and_needs_spin():
    """A barrier in a Rashba wire: T stays within [0, 2] and equals the sparse-LU value (scipy)."""
    from rgftrans.transport.direct import scattering_matrix, transmission_direct

    model = wire(0.8, potential=lambda x, y: np.where((x > 3) & (x < 6), 0.7, 0.0))
    e = [3.2, 4.4]
    t_rgf = transmission(model, e).transmission
    assert np.allclose(t_rgf, transmission_direct(model, e)[:, 1, 0], atol=1e-10)
    smat = scattering_matrix(model, 3.2)
    assert np.abs(smat.s.conj().T @ smat.s - np.eye(len(smat.s))).max() < 1e-10  # unitarity
    assert 0.0 < t_rgf[0] < 2.0
