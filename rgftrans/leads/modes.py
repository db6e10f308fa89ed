"""Semi-infinite leads: Bloch modes, surface Green's functions, self-energies.

A lead is a periodic strip of cells numbered ``j = 0, 1, 2, ...`` away from the
device.  ``h_cell`` is the Hamiltonian of one cell and ``h_hop`` the hopping
``<j| H |j+1>`` from a cell to the next one *outward*.  Cell 0 couples to the
device through ``coupling = <device interface| H |cell 0>``.

Two independent routes give the retarded surface Green's function ``g_surface``
of cell 0 (the lead on its own):

* :func:`lead_modes` / :func:`surface_green_modes` -- the mode method.  Bloch
  solutions ``psi_j = bloch**j phi`` solve the quadratic eigenproblem
  ``h_hop^dag phi + (h_cell - E) bloch phi + h_hop bloch^2 phi = 0``, linearised
  as a generalised eigenproblem so that a singular ``h_hop`` (zero and
  infinite ``bloch``) is handled.  The outgoing solutions (``|bloch| < 1``, or
  ``|bloch| = 1`` with positive velocity) give the transfer matrix
  ``F = Phi Lam Phi^-1`` and ``g_surface = (E - h_cell - h_hop F)^-1``.
  This is the default: it is exact at real energies and it also classifies the
  open channels (count, velocities, wave functions) that the Fisher-Lee
  relation needs.
* :func:`surface_green_decimation` -- Sancho-Rubio decimation
  (M. P. Lopez Sancho, J. M. Lopez Sancho, J. Rubio, J. Phys. F 15, 851 (1985),
  from memory).  It needs a small imaginary part ``eta`` and, in double
  precision, fails when the energy equals an eigenvalue of the isolated cell
  (an observation of ours: the renormalised cell Green's function loses all
  digits there).  It is kept as an independent check of the mode method.

The self-energy of the device interface is ``sigma = V g_surface V^dag`` and
the broadening ``gamma = i (sigma - sigma^dag)``.
"""

from __future__ import annotations

import hashlib
import warnings
from collections import OrderedDict
from dataclasses import dataclass

import numpy as np
import scipy.linalg as sla

from rgftrans.errors import EnergyError, ThresholdWarning

__all__ = [
    "LeadModes",
    "lead_modes",
    "surface_green_modes",
    "surface_green_decimation",
    "clear_lead_cache",
    "incoming_sources",
    "require_off_threshold",
    "outgoing_amplitudes",
]

#: A Bloch factor with ``| |bloch| - 1 | <`` this counts as propagating (at real energy).
#: The eigen-solver resolves a double root near a band edge only to about
#: sqrt(machine epsilon) ~ 1e-8, so the window must be wider than that.
PROPAGATING_TOL = 1e-6
#: A propagating mode whose velocity is below this fraction of the hopping scale
#: sits on a channel threshold (band edge); the energy is then shifted into the
#: upper half plane by ``THRESHOLD_ETA`` times the hopping scale.
THRESHOLD_VELOCITY = 1e-5
THRESHOLD_ETA = 1e-8
#: Generalised eigenvalues with ``|beta| <`` this times ``|alpha|`` are infinite.
_INFINITE_TOL = 1e-13
#: Propagating Bloch factors closer than this are one degenerate group.  Truly
#: degenerate (non-defective) factors split only by round-off (~1e-15); merging
#: near-degenerate ones of opposite velocity would mix them and cost accuracy.
_DEGENERATE_TOL = 1e-10
#: A degenerate group whose (unit) wave functions have a singular value below
#: this is defective -- two solutions merging at a band edge, not two channels.
_DEFECTIVE_TOL = 1e-5


@dataclass(frozen=True)
class LeadModes:
    """Bloch modes of a lead at one energy.

    Attributes
    ----------
    energy : complex
        Energy used (meV); it has an imaginary part if the requested energy sat
        on a channel threshold.
    bloch_out, phi_out : (m,) complex, (m_cell, m) complex
        Bloch factors and cell wave functions of the ``m`` outgoing solutions
        (propagating away from the device, or decaying away from it).
    velocity_out : (m,) float
        Group velocity along the lead (meV per cell, hbar = 1) of each outgoing
        solution; zero for evanescent ones.
    propagating_out : (m,) bool
        Which outgoing solutions are open channels.
    bloch_in, phi_in, velocity_in : arrays
        The incoming open channels (propagating towards the device); the
        velocity is negative.  Same count as open outgoing channels.
    g_surface : (m_cell, m_cell) complex
        Retarded surface Green's function of cell 0 (1/meV).
    n_open : int
        Number of open channels at the real part of the energy.  A channel
        exactly at its threshold carries no current and is counted as closed.
    at_threshold : bool
        True if the requested energy was on a channel threshold.
    """

    energy: complex
    bloch_out: np.ndarray
    phi_out: np.ndarray
    velocity_out: np.ndarray
    propagating_out: np.ndarray
    bloch_in: np.ndarray
    phi_in: np.ndarray
    velocity_in: np.ndarray
    g_surface: np.ndarray
    n_open: int
    at_threshold: bool


def hopping_scale(h_cell: np.ndarray, h_hop: np.ndarray) -> float:
    """A typical energy scale of a lead (meV), used for relative tolerances."""
    scale = max(np.abs(h_hop).max(initial=0.0), np.abs(h_cell - np.diag(np.diag(h_cell))).max(initial=0.0))
    return float(scale) if scale > 0 else 1.0


#: Lead results kept for reuse (a gate or geometry sweep meets the same leads at
#: the same energies again and again); bounded by the bytes they hold.
LEAD_CACHE_BYTES = 256 * 2**20
_cache: "OrderedDict[tuple, LeadModes]" = OrderedDict()
_cache_bytes = 0
_eigh_cache: "OrderedDict[bytes, tuple]" = OrderedDict()


def _digest(*arrays: np.ndarray) -> bytes:
    h = hashlib.blake2b(digest_size=16)
    for a in arrays:
        h.update(str(a.shape).encode())
        h.update(np.ascontiguousarray(a).tobytes())
    return h.digest()


def _nbytes(modes: LeadModes) -> int:
    return sum(getattr(modes, f).nbytes for f in ("phi_out", "phi_in", "g_surface", "bloch_out", "bloch_in"))


def clear_lead_cache() -> None:
    """Forget all cached lead solutions."""
    global _cache_bytes
    _cache.clear()
    _eigh_cache.clear()
    _cache_bytes = 0


def lead_modes(h_cell, h_hop, energy, *, warn: bool = True) -> LeadModes:
    """Bloch modes and surface Green's function of a lead (mode method), cached.

    Results are kept (up to :data:`LEAD_CACHE_BYTES`) keyed by the lead's
    matrices and the energy, so sweeps that leave the leads alone pay for
    each lead energy once.  A threshold warning is repeated on every call.
    """
    global _cache_bytes
    h_cell = np.asarray(h_cell, dtype=complex)
    h_hop = np.asarray(h_hop, dtype=complex)
    energy = complex(energy)
    key = (_digest(h_cell, h_hop), energy)
    modes = _cache.get(key)
    if modes is None:
        modes = _lead_modes_uncached(h_cell, h_hop, energy)
        _cache[key] = modes
        _cache_bytes += _nbytes(modes)
        while _cache_bytes > LEAD_CACHE_BYTES and len(_cache) > 1:
            _, old = _cache.popitem(last=False)
            _cache_bytes -= _nbytes(old)
    else:
        _cache.move_to_end(key)
    if modes.at_threshold and warn:
        warnings.warn(
            f"energy {energy.real:.10g} meV sits on a lead channel threshold (group velocity zero); "
            f"computed at E + {modes.energy.imag:.1e}i meV instead -- shift the energy grid slightly "
            "to avoid the band edge",
            ThresholdWarning,
            stacklevel=2,
        )
    return modes


def _lead_modes_uncached(h_cell, h_hop, energy) -> LeadModes:
    """Bloch modes and surface Green's function of a lead (mode method).

    Parameters
    ----------
    h_cell : (m, m) complex ndarray, meV
        Hamiltonian of one lead cell.
    h_hop : (m, m) complex ndarray, meV
        Hopping ``<j|H|j+1>`` to the next cell away from the device; may be
        singular.
    energy : float or complex, meV
        Energy.  A real energy on a channel threshold is moved to
        ``energy + i THRESHOLD_ETA * scale``; the result records it
        (``at_threshold``) and :func:`lead_modes` warns.

    Leads whose outward hopping is a multiple of the identity (every lead
    without a magnetic field or spin-orbit coupling) separate into
    independent transverse channels; they are solved in closed form from one
    (cached) diagonalisation of ``h_cell`` instead of the ``2m x 2m``
    generalised eigenproblem.

    Returns
    -------
    LeadModes
    """
    if not np.isfinite(energy):
        raise EnergyError(f"energy must be finite, got {energy}; remove NaN or infinite values from the energies")
    scale = hopping_scale(h_cell, h_hop)
    if energy.imag != 0.0:
        # Channels are counted on the real axis; the modes themselves at the complex energy.
        n_open = _count_open(h_cell, h_hop, energy.real, scale)
        modes = _modes_at(h_cell, h_hop, energy, scale)
        return LeadModes(**{**modes.__dict__, "n_open": n_open})
    try:
        return _modes_at(h_cell, h_hop, energy, scale)
    except _OnThreshold as edge:  # on a threshold: step off it into the upper half plane
        shifted = energy + 1j * THRESHOLD_ETA * scale
        modes = _modes_at(h_cell, h_hop, shifted, scale)
        return LeadModes(**{**modes.__dict__, "n_open": edge.n_open, "at_threshold": True})


def _count_open(h_cell, h_hop, energy: float, scale: float) -> int:
    """Open channels at a real energy (on a threshold: those with a nonzero velocity)."""
    try:
        return _modes_at(h_cell, h_hop, complex(energy), scale).n_open
    except _OnThreshold as edge:
        return edge.n_open


def surface_green_modes(h_cell, h_hop, energy) -> np.ndarray:
    """Retarded surface Green's function of a semi-infinite lead by the mode method.

    See :func:`lead_modes`; this returns only ``g_surface`` (1/meV).

    Examples
    --------
    A chain with hopping -1 at E = 0 has g = -i (Economou, from memory):

    >>> import numpy as np
    >>> g = surface_green_modes(np.zeros((1, 1)), -np.ones((1, 1)), 0.0)
    >>> complex(np.round(g[0, 0], 12))
    -1j
    """
    return lead_modes(h_cell, h_hop, energy).g_surface


class _OnThreshold(Exception):
    """Raised by the mode solvers at a real energy where a propagating mode has zero velocity.

    Carries ``n_open``, the channels with a nonzero velocity there (the closing or opening channel
    carries no current and is counted as closed).
    """

    def __init__(self, n_open: int):
        super().__init__(n_open)
        self.n_open = int(n_open)


def _modes_at(h_cell, h_hop, energy, scale) -> LeadModes:
    """Solve the lead's quadratic eigenproblem.

    Raises :class:`_OnThreshold` if a propagating mode has zero velocity (a channel threshold).
    """
    tau = h_hop[0, 0]
    if np.array_equal(h_hop, tau * np.eye(len(h_hop))) and tau != 0:
        return _modes_separable(h_cell, tau, energy, scale)
    return _modes_generalised(h_cell, h_hop, energy, scale)


def _modes_separable(h_cell, tau: complex, energy: complex, scale: float):
    """Closed-form modes of a lead with ``h_hop = tau * 1``.

    In the eigenbasis ``h_cell U = U diag(eps)`` every transverse channel is a
    chain with onsite ``eps_n`` and hopping ``tau``: its Bloch factors solve
    ``tau^* + (eps_n - E) bloch + tau bloch^2 = 0``, its velocity is
    ``-2 Im(bloch tau)``, and ``g_surface = U diag(1 / (E - eps_n - tau bloch_n)) U^dag``
    with ``bloch_n`` the outgoing root (Datta 1995, ch. 3, from memory, for the
    strip; the closed form of reference-checks §1 channel by channel).
    """
    key = _digest(h_cell)
    hit = _eigh_cache.get(key)
    if hit is None:
        hit = np.linalg.eigh(h_cell)
        _eigh_cache[key] = hit
        if len(_eigh_cache) > 64:
            _eigh_cache.popitem(last=False)
    eps, u = hit
    z = energy - eps
    root = np.sqrt(z * z - 4 * abs(tau) ** 2 + 0j)
    bloch_a = (z + root) / (2 * tau)
    bloch_b = (z - root) / (2 * tau)
    real_energy = energy.imag == 0.0
    if real_energy:
        inside = np.abs(z.real) < 2 * abs(tau)
        vel_a = -2 * np.imag(bloch_a * tau)
        if np.any(inside & (np.abs(vel_a) < THRESHOLD_VELOCITY * scale)) or np.any(
                np.abs(np.abs(z.real) - 2 * abs(tau)) < 1e-14 * scale):
            raise _OnThreshold(int(np.count_nonzero(inside & (np.abs(vel_a) >= THRESHOLD_VELOCITY * scale))))
        # Inside the band the roots are conj pairs on the unit circle; pick the positive velocity.
        out_is_a = np.where(inside, vel_a > 0, np.abs(bloch_a) < 1)
    else:
        inside = np.zeros(len(eps), dtype=bool)
        out_is_a = np.abs(bloch_a) < np.abs(bloch_b)
    bloch_out = np.where(out_is_a, bloch_a, bloch_b)
    bloch_in = np.where(out_is_a, bloch_b, bloch_a)
    if real_energy:
        bloch_out[inside] /= np.abs(bloch_out[inside])
        bloch_in[inside] /= np.abs(bloch_in[inside])
    vel_out = np.where(inside, -2 * np.imag(bloch_out * tau), 0.0)
    g_surface = (u / (energy - eps - tau * bloch_out)) @ u.conj().T
    return LeadModes(
        energy=energy,
        bloch_out=bloch_out,
        phi_out=u,
        velocity_out=vel_out,
        propagating_out=inside.copy(),
        bloch_in=bloch_in[inside],
        phi_in=u[:, inside],
        velocity_in=-2 * np.imag(bloch_in[inside] * tau),
        g_surface=g_surface,
        n_open=int(np.count_nonzero(inside)),
        at_threshold=False,
    )


def _modes_generalised(h_cell, h_hop, energy, scale):
    """Modes from the linearised ``2m x 2m`` generalised eigenproblem (any ``h_hop``)."""
    m = h_cell.shape[0]
    eye = np.eye(m)
    zero = np.zeros((m, m))
    # Linearisation with x = [phi; bloch phi]:  A x = bloch B x.
    a_mat = np.block([[zero, eye], [-h_hop.conj().T, energy * eye - h_cell]])
    b_mat = np.block([[eye, zero], [zero, h_hop]])
    (alpha, beta), vecs = sla.eig(a_mat, b_mat, homogeneous_eigvals=True)
    finite = np.abs(beta) > _INFINITE_TOL * np.abs(alpha)
    bloch = np.full(alpha.shape, np.inf, dtype=complex)
    bloch[finite] = alpha[finite] / beta[finite]
    phi = vecs[:m]
    # Normalise the cell part; for infinite bloch the lower block carries the vector.
    norms = np.linalg.norm(phi, axis=0)
    norms[norms == 0] = 1.0
    phi = phi / norms

    real_energy = abs(energy.imag) == 0.0
    absl = np.abs(bloch)
    if real_energy:
        prop = finite & (np.abs(absl - 1.0) < PROPAGATING_TOL)
    else:
        prop = np.zeros(bloch.shape, dtype=bool)
    decaying = finite & ~prop & (absl < 1.0)

    out_idx = list(np.flatnonzero(decaying))
    in_idx: list[int] = []
    velocities = {}
    on_threshold = False
    bloch = bloch.copy()
    if np.any(prop):
        idx = np.flatnonzero(prop)
        bloch[idx] = bloch[idx] / absl[idx]  # put them exactly on the unit circle
        for group in _degenerate_groups(bloch[idx]):
            members = idx[group]
            if len(members) > 1 and np.linalg.svd(phi[:, members], compute_uv=False)[-1] < _DEFECTIVE_TOL:
                # Two Bloch solutions merging into one (a Jordan block): a band edge.
                on_threshold = True
                continue
            new_phi, vel = _velocity_basis(phi[:, members], bloch[members[0]], h_hop)
            if np.any(np.abs(vel) < THRESHOLD_VELOCITY * scale):
                on_threshold = True
            phi[:, members] = new_phi
            for k, v in zip(members, vel):
                velocities[k] = v
                (out_idx if v > 0 else in_idx).append(k)
    if on_threshold:
        raise _OnThreshold(sum(1 for v in velocities.values() if v > THRESHOLD_VELOCITY * scale))
    out_idx = np.array(out_idx, dtype=int)
    in_idx = np.array(in_idx, dtype=int)
    bloch_out = bloch[out_idx]
    phi_out = phi[:, out_idx]
    vel_out = np.array([velocities.get(k, 0.0) for k in out_idx])
    prop_out = np.array([k in velocities for k in out_idx], dtype=bool)

    # g_s = (E - h_cell - h_hop F)^-1 with F = Phi Lam Phi^-1 (outgoing transfer matrix).
    # Phi may be rectangular if h_hop is singular and modes are missing; lstsq copes.
    if phi_out.shape[1] == m:
        h_f = h_hop @ np.linalg.solve(phi_out.T, (phi_out * bloch_out).T).T
    else:  # pragma: no cover - defensive; a well-posed lead has m outgoing solutions
        h_f = h_hop @ (phi_out * bloch_out) @ np.linalg.pinv(phi_out)
    g_surface = np.linalg.inv(energy * np.eye(m) - h_cell - h_f)
    return LeadModes(
        energy=energy,
        bloch_out=bloch_out,
        phi_out=phi_out,
        velocity_out=vel_out,
        propagating_out=prop_out,
        bloch_in=bloch[in_idx],
        phi_in=phi[:, in_idx],
        velocity_in=np.array([velocities[k] for k in in_idx]),
        g_surface=g_surface,
        n_open=int(np.count_nonzero(prop_out)),
        at_threshold=False,
    )


def _degenerate_groups(factors: np.ndarray) -> list[np.ndarray]:
    """Group indices of (unit-modulus) Bloch factors that coincide."""
    remaining = list(range(len(factors)))
    groups = []
    while remaining:
        k = remaining.pop(0)
        same = [j for j in remaining if abs(factors[j] - factors[k]) < _DEGENERATE_TOL]
        for j in same:
            remaining.remove(j)
        groups.append(np.array([k] + same))
    return groups


def _velocity_basis(phis: np.ndarray, bloch: complex, h_hop: np.ndarray):
    """Orthonormal basis of a degenerate propagating group diagonalising the current.

    The current carried from cell j to j+1 by ``psi_j = bloch**j phi`` is
    ``v = -2 Im(bloch phi^dag h_hop phi)`` (hbar = 1, one cell per unit length);
    within a degenerate group the current operator
    ``J = i (bloch Phi^dag h_hop Phi - conj(bloch) Phi^dag h_hop^dag Phi)`` is
    diagonalised so that every mode has a definite velocity.
    """
    q, _ = np.linalg.qr(phis)
    j_mat = 1j * (bloch * q.conj().T @ h_hop @ q - np.conj(bloch) * q.conj().T @ h_hop.conj().T @ q)
    vel, u = np.linalg.eigh(0.5 * (j_mat + j_mat.conj().T))
    return q @ u, vel


def band_edges(h_cell, h_hop, *, k_points: int = 129) -> tuple[float, float]:
    """Lowest and highest energy (meV) of a lead's bands E_n(k), sampled at ``k_points`` Bloch phases.

    Bands of the Bloch Hamiltonian ``h_cell + h_hop e^{ik} + h_hop^dag e^{-ik}``
    over k in [-pi, pi] (Ashcroft & Mermin, Solid State Physics, 1976, ch. 10,
    from memory).  A sampled extremum lies within ``(pi/k_points)^2 / 2`` of
    the true one in units of the band curvature: ample for saying that an
    energy is outside every band.
    """
    h_cell = np.asarray(h_cell, dtype=complex)
    h_hop = np.asarray(h_hop, dtype=complex)
    k = np.linspace(-np.pi, np.pi, k_points)
    phase = np.exp(1j * k)[:, None, None]
    bloch = h_cell[None] + h_hop[None] * phase + h_hop.conj().T[None] * phase.conj()
    bands = np.linalg.eigvalsh(bloch)
    return float(bands.min()), float(bands.max())


def require_off_threshold(modes: list, energy: float, what: str) -> None:
    """Refuse flux-normalised quantities at a channel threshold, where a channel has zero velocity."""
    if any(m.at_threshold for m in modes):
        raise EnergyError(
            f"{what} at E = {float(np.real(energy)):.10g} meV is undefined: a lead channel sits exactly at its "
            "threshold (zero velocity); shift the energy slightly"
        )


def incoming_sources(h_hop, coupling, modes: LeadModes) -> tuple[np.ndarray, np.ndarray]:
    """Device sources of the lead's incoming open channels (flux-normalised).

    An incoming Bloch wave ``psi_j = bloch_in**j phi_in`` drives the device
    through the interface with the source
    ``coupling (phi_in - g_surface h_hop^dag phi_in / bloch_in)``; the
    scattering state inside the device is ``G_{device, interface} @ source``
    (our derivation from the Dyson equation; it reproduces the Fisher-Lee
    relation, Phys. Rev. B 23, 6851 (1981), from memory).  Dividing by
    ``sqrt(|v|)`` gives every channel unit incoming flux.

    Returns
    -------
    sources : (k, n_in) complex ndarray
        One column per incoming channel, on the device interface sites.
    back : (m, n_in) complex ndarray
        ``g_surface h_hop^dag phi_in / bloch_in`` on cell 0, needed to separate
        the reflected wave from the incoming one.
    """
    phi = modes.phi_in / np.sqrt(np.abs(modes.velocity_in))
    back = modes.g_surface @ (h_hop.conj().T @ phi) / modes.bloch_in
    return coupling @ (phi - back), back


def outgoing_amplitudes(coupling, modes: LeadModes, psi_interface: np.ndarray,
                        back: np.ndarray | None = None) -> np.ndarray:
    """Flux-normalised amplitudes in the lead's open outgoing channels.

    The outgoing wave on cell 0 is ``g_surface coupling^dag psi_interface``
    (minus ``back`` when this lead is also the source), expanded in the
    outgoing Bloch modes; the open channels' coefficients times
    ``sqrt(v_out)`` are returned, shape ``(n_open, n_states)``.
    """
    psi0 = modes.g_surface @ (coupling.conj().T @ psi_interface)
    if back is not None:
        psi0 = psi0 - back
    coeff = np.linalg.lstsq(modes.phi_out, psi0, rcond=None)[0]
    open_ = modes.propagating_out
    return coeff[open_] * np.sqrt(modes.velocity_out[open_])[:, None]


#: Decimation stops when the renormalised hoppings fall below this (relative).
DECIMATION_TOL = 1e-14
DECIMATION_MAX_ITER = 200


def surface_green_decimation(h_cell, h_hop, energy, *, eta: float = 1e-12, tol: float = DECIMATION_TOL,
                             max_iter: int = DECIMATION_MAX_ITER) -> np.ndarray:
    """Surface Green's function by Sancho-Rubio decimation.

    Iterates (Lopez Sancho, Lopez Sancho & Rubio, J. Phys. F 15, 851 (1985),
    from memory), with ``alpha = h_hop``, ``beta = h_hop^dag`` and
    ``eps_s = eps = h_cell``::

        g = (E + i eta - eps)^-1
        eps_s += alpha g beta ;  eps += alpha g beta + beta g alpha
        alpha <- alpha g alpha ;  beta <- beta g beta

    until ``|alpha|, |beta| < tol * scale``; then
    ``g_surface = (E + i eta - eps_s)^-1``.  Each step doubles the range of
    the renormalised coupling, so the error falls like ``|bloch|^(2^n)``; inside
    the band that needs about ``log2(1/eta)`` steps.

    The result is the surface Green's function at the complex energy
    ``E + i eta``.  It is unreliable (round-off) at energies equal to an
    eigenvalue of ``h_cell``; use :func:`surface_green_modes` there.

    Parameters
    ----------
    h_cell, h_hop : (m, m) complex ndarray, meV
    energy : float or complex, meV
    eta : float, meV
        Imaginary part added to the energy.
    """
    h_cell = np.asarray(h_cell, dtype=complex)
    alpha = np.asarray(h_hop, dtype=complex).copy()
    beta = alpha.conj().T.copy()
    eps_s = h_cell.copy()
    eps = h_cell.copy()
    z = (complex(energy) + 1j * eta) * np.eye(h_cell.shape[0])
    scale = hopping_scale(h_cell, h_hop)
    for _ in range(max_iter):
        g = np.linalg.inv(z - eps)
        agb = alpha @ g @ beta
        eps_s = eps_s + agb
        eps = eps + agb + beta @ g @ alpha
        alpha = alpha @ g @ alpha
        beta = beta @ g @ beta
        if max(np.abs(alpha).max(), np.abs(beta).max()) < tol * scale:
            break
    else:
        raise EnergyError(
            f"Sancho-Rubio decimation did not converge in {max_iter} steps at E = {energy} meV with "
            f"eta = {eta} meV; increase eta or use surface_green_modes"
        )
    return np.linalg.inv(z - eps_s)
