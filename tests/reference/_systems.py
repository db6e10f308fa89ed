"""Model builders for the reference tests (tight-binding units: t = 1 meV, a = 1 nm).

Energy conventions
------------------
The reference tests state their closed forms with onsite energy 0 (1D band
[-2t, 2t], square-lattice band [-4t, 4t]), as in E. N. Economou, *Green's
Functions in Quantum Physics* (Springer, 3rd ed. 2006) and S. Datta,
*Electronic Transport in Mesoscopic Systems* (CUP 1995) (both from memory),
unless they say "effective-mass convention" (onsite +4t in 2D, +2t in 1D,
band bottom at 0; common practice).  A model discretised by :class:`rgftrans.system.device.Device` always has
the effective-mass onsite ``4t + U(x, y)`` (coordination 4 on the square
lattice), also for a one-row chain.  Hence, for a model built by ``Device``:

* onsite-0 checks (surface Green's function, chain scattering, strip staircase,
  unitarity, potential step): ``E_package = E_reference + ONSITE_SHIFT``;
* 1D effective-mass checks (onsite ``2t``, continuum-limit barriers):
  ``E_package = E_reference + CHAIN_EFFECTIVE_MASS_SHIFT``.

Hand-built models (``TightBindingModel`` directly) use onsite 0 as given and
need no shift.
"""

import numpy as np
import scipy.sparse as sp

from builders import strip_device as _strip
from rgftrans.system.device import Device, Lead, LeadModel, TightBindingModel
from rgftrans.system.geometry import rectangle
from rgftrans.system.lattices import square

#: Device onsite 4t (t = 1) against the reference's onsite 0.
ONSITE_SHIFT = 4.0
#: Device onsite 4t against the 1D effective-mass onsite 2t.
CHAIN_EFFECTIVE_MASS_SHIFT = 2.0


def chain_device(x_lo, x_hi, potential=0.0, *, left_potential=0.0, right_potential=0.0):
    """One-row chain with sites x = x_lo .. x_hi (integers) and two chain leads."""
    return Device(
        rectangle(x_lo, -0.4, x_hi, 0.4),
        [Lead("L", "left", (0, 0), potential=left_potential),
         Lead("R", "right", (0, 0), potential=right_potential)],
        lattice=square(1.0),
        hopping=1.0,
        potential=potential,
    ).discretise()


def strip_device(width, length, potential=0.0, *, orientation="horizontal"):
    """Hard-wall strip ``width`` rows across and ``length`` columns long, leads at both ends, discretised.

    ``orientation="vertical"`` runs the strip along y, with bottom and top leads.  The strip itself is the
    suite's one strip builder (:func:`builders.strip_device`).
    """
    sides, names = (("left", "right"), ("L", "R")) if orientation == "horizontal" else (("bottom", "top"), ("B", "T"))
    return _strip(width, length, sides=sides, potential=potential, names=names).discretise()


def site_table_potential(table):
    """Potential U(x, y) = table[x, y] on integer lattice sites (a = 1 nm)."""
    table = np.asarray(table, dtype=float)

    def potential(x, y):
        return table[np.rint(x).astype(int), np.rint(y).astype(int)]

    return potential


def chain_lead(name, site, *, hopping=1.0, link=None, onsite=0.0, direction=(1.0, 0.0)):
    """Hand-built semi-infinite chain lead (hopping -t, onsite as given) attached to ``site``.

    ``link`` is the hopping t' of the bond between the device site and cell 0
    (default: the lead's own hopping).
    """
    link = hopping if link is None else link
    return LeadModel(
        name=name,
        h_cell=np.array([[onsite]], dtype=complex),
        h_hop=np.array([[-hopping]], dtype=complex),
        interface=np.array([site]),
        coupling=np.array([[-link]], dtype=complex),
        cell_positions=np.zeros((1, 2)),
        period=np.asarray(direction, dtype=float),
    )


def hand_model(h_dense, positions, leads):
    """TightBindingModel from a dense Hamiltonian and hand-built leads."""
    return TightBindingModel(
        hamiltonian=sp.csr_matrix(np.asarray(h_dense, dtype=complex)),
        positions=np.asarray(positions, dtype=float),
        leads=tuple(leads),
        energy_scale=1.0,
    )


def peierls_grid_hamiltonian(onsite, phi):
    """Square-grid Hamiltonian with the Peierls phase (R. Peierls, Z. Phys. 80, 763 (1933), from memory).

    ``onsite`` is an (ny, nx) array indexed [y, x]; site index s = nx*y + x.
    Landau gauge A = (-B y, 0): <x+1, y|H|x, y> = -t exp(-2 pi i phi y), t = 1;
    vertical hops are -1.
    """
    onsite = np.asarray(onsite, dtype=float)
    ny, nx = onsite.shape
    n = nx * ny
    h = np.diag(onsite.ravel().astype(complex))
    for y in range(ny):
        for x in range(nx):
            s = nx * y + x
            if x + 1 < nx:
                h[s + 1, s] = -np.exp(-2j * np.pi * phi * y)
                h[s, s + 1] = np.conj(h[s + 1, s])
            if y + 1 < ny:
                h[s + nx, s] = h[s, s + nx] = -1.0
    positions = np.array([[s % nx, s // nx] for s in range(n)], dtype=float)
    return h, positions


def peierls_strip_model(onsite, phi):
    """W x L strip (onsite[y, x]) in the Landau gauge, with the field in the leads too.

    Left lead: cell j at x = -1 - j, so h_hop = <j|H|j+1> = <x|H|x-1> =
    -exp(-2 pi i phi y) and the coupling <x=0|H|x=-1> is the same.  Right
    lead: cell j at x = L + j, h_hop = <x|H|x+1> = -exp(+2 pi i phi y).
    The gauge is translation invariant along x, so both leads are periodic.
    """
    h, positions = peierls_grid_hamiltonian(onsite, phi)
    ny, nx = np.asarray(onsite).shape
    y = np.arange(ny)
    cell = -(np.eye(ny, k=1) + np.eye(ny, k=-1)).astype(complex)
    hop_left = -np.diag(np.exp(-2j * np.pi * phi * y))
    hop_right = -np.diag(np.exp(+2j * np.pi * phi * y))
    left = LeadModel("L", cell, hop_left, nx * y, hop_left.copy(),
                     np.column_stack([np.full(ny, -1.0), y]), np.array([-1.0, 0.0]))
    right = LeadModel("R", cell.copy(), hop_right, nx * y + nx - 1, hop_right.copy(),
                      np.column_stack([np.full(ny, float(nx)), y]), np.array([1.0, 0.0]))
    return hand_model(h, positions, [left, right])
