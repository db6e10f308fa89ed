"""The exposed surface of a gated heterostructure: pinned or frozen, as Coulomb kernels on a grid.

Surface gates sit on the semiconductor surface (permittivity ``eps`` below,
vacuum above); the 2DEG is a sheet at depth ``d``.  What the exposed surface
between the gates does when a gate voltage changes decides every potential
(J. H. Davies, I. A. Larkin and E. V. Sukhorukov, J. Appl. Phys. 77, 4504
(1995), from memory):

* **pinned**: its Fermi level is pinned by surface states, so the whole
  surface is an equipotential at the ungated value; only the gates differ.
  The gates' potential in the 2DEG is the half-space Dirichlet integral
  (:mod:`~rgftrans.electrostatics.gates`), and a charge ``q`` in the 2DEG
  sees an image ``-q`` at height ``d`` above the surface:

      K_pinned(rho) = 1/rho - 1/sqrt(rho^2 + 4 d^2)    (times e^2 / (4 pi eps eps0)).

* **frozen**: the surface states cannot follow (low temperature), so the
  surface charge stays at its ungated value; the exposed surface is a plain
  dielectric interface and the gates are metal at their voltages.  The
  unknown is the extra charge ``s`` on the gates, fixed by the gates'
  potential; with the interface kernels (point charges in a plane between
  two dielectrics; e.g. J. D. Jackson, Classical Electrodynamics, 3rd ed.,
  section 4.4, from memory)

      surface-surface  1 / (eps_avg rho),            eps_avg = (eps + 1) / 2,
      surface-2DEG     1 / (eps_avg sqrt(rho^2 + d^2)),
      2DEG-2DEG        (1/rho + beta / sqrt(rho^2 + 4 d^2)) / eps,   beta = (eps - 1) / (eps + 1),

  (all times e^2 / (4 pi eps0)) and the condition ``U = -e V`` on each
  gate's nodes.  Gate charge outside the grid is neglected, so the grid must
  hold the gates near the device (it does: the screening grid reaches a few
  depths past every gate in the configs).

Both are exact for infinitely thin gates; on the grid the kernels are
point-sampled with the singular self-term replaced by its cell average
(:data:`SELF_TERM`), and convolved by FFT on a zero-padded grid (linear, not
circular, convolution).  Energies in meV, lengths in nm, sheet densities in
electrons per nm^2.
"""

from __future__ import annotations

import math

import numpy as np
from scipy import constants as _codata
from scipy import fft as _fft

from rgftrans.errors import ComputationFailed, RgftransError

__all__ = ["COULOMB_MEV_NM", "SELF_TERM", "SURFACES", "coulomb_constant_meV_nm", "gate_nodes",
           "frozen_gate_potential", "SurfaceKernels"]

#: e^2 / (4 pi eps0) in meV nm (CODATA via scipy.constants): 1439.96 meV nm.
COULOMB_MEV_NM = _codata.e / (4 * math.pi * _codata.epsilon_0) * 1e3 * 1e9
#: The integral of 1/rho over a square cell of side a centred on rho = 0, in units of a:
#: 4 ln(1 + sqrt 2) (elementary integral; the self-term of the point-sampled kernel).
SELF_TERM = 4.0 * math.log1p(math.sqrt(2.0))
#: The two boundary conditions of the exposed surface.
SURFACES = ("pinned", "frozen")
#: Relative residual of the gates' potential at which the unscreened frozen-surface solve stops (conjugate
#: gradients); the potential in the 2DEG is then good to about the same relative accuracy.
FROZEN_CG_TOLERANCE = 1e-10


def coulomb_constant_meV_nm(eps_r: float) -> float:
    """``e^2 / (4 pi eps_r eps0)`` in meV nm."""
    return COULOMB_MEV_NM / float(eps_r)


def gate_nodes(layout, x_nm: np.ndarray, y_nm: np.ndarray) -> np.ndarray:
    """The gates' potential energy ``-e V`` (meV) on the grid nodes they cover, NaN on the exposed surface.

    A node belongs to a gate if it lies inside the outline (boundary included).  Overlapping gates must agree
    on the voltage where they overlap.
    """
    gx, gy = np.meshgrid(x_nm, y_nm)
    points = np.column_stack([gx.ravel(), gy.ravel()])
    target = np.full(gx.size, np.nan)
    for gate in layout.gates:
        inside = gate.shape.contains(points)
        volts = -1000.0 * gate.voltage
        clash = inside & np.isfinite(target) & (target != volts)
        if np.any(clash):
            raise RgftransError(f"gate {gate.name!r} overlaps another gate at a different voltage; with a frozen "
                                "surface every metal node needs one voltage: separate the outlines")
        target[inside] = volts
    return target.reshape(gx.shape)


class SurfaceKernels:
    """FFTs of the grid's Coulomb kernels for one surface condition, and their application.

    Parameters
    ----------
    nx, ny : int
        Grid size.
    spacing_nm, depth_nm, eps_r : float
    surface : {"pinned", "frozen"}
    periodic : bool
        Pinned only: the continuum transform on a periodic grid (sums all images exactly).

    Notes
    -----
    :meth:`electrons` gives the potential energy in the 2DEG of a density change ``dn`` (and of gate
    charge ``s`` with a frozen surface); :meth:`gates` the potential energy on the surface.  Both in meV for
    densities in electrons per nm^2.
    """

    def __init__(self, nx: int, ny: int, spacing_nm: float, depth_nm: float, eps_r: float, surface: str,
                 periodic: bool = False):
        if surface not in SURFACES:
            raise RgftransError(f"surface {surface!r} is not one of {', '.join(SURFACES)}")
        if periodic and surface != "pinned":
            raise RgftransError("periodic screening grids are for the pinned surface only (the frozen surface's "
                                "kernels have no finite q = 0 limit); use a zero-padded grid")
        self.nx, self.ny, self.surface = nx, ny, surface
        h, d = float(spacing_nm), float(depth_nm)
        self.coulomb = coulomb_constant_meV_nm(eps_r)
        if periodic:
            qx = 2 * np.pi * _fft.rfftfreq(nx, d=h)
            qy = 2 * np.pi * _fft.fftfreq(ny, d=h)
            q = np.hypot(qx[None, :], qy[:, None])
            with np.errstate(divide="ignore", invalid="ignore"):
                self.k_nn = self.coulomb * np.where(q > 0, 2 * np.pi * -np.expm1(-2 * q * d) / q, 4 * np.pi * d)
            self.shape = (ny, nx)
            return
        self.shape = (2 * ny, 2 * nx)
        py, px = self.shape
        ix = np.minimum(np.arange(px), px - np.arange(px))
        iy = np.minimum(np.arange(py), py - np.arange(py))
        area = h * h
        rho = np.hypot(ix[None, :] * h, iy[:, None] * h)
        with np.errstate(divide="ignore"):
            inverse = area / rho
        inverse[0, 0] = SELF_TERM * h
        image = area / np.sqrt(rho**2 + 4 * d**2)
        if surface == "pinned":
            self.k_nn = self.coulomb * _fft.rfft2(inverse - image)
            return
        beta = (eps_r - 1.0) / (eps_r + 1.0)
        interface = COULOMB_MEV_NM / ((eps_r + 1.0) / 2.0)
        self.k_nn = self.coulomb * _fft.rfft2(inverse + beta * image)
        self.k_ss = interface * _fft.rfft2(inverse)
        self.k_sn = interface * _fft.rfft2(area / np.sqrt(rho**2 + d**2))

    def _pad(self, a: np.ndarray) -> np.ndarray:
        pad = np.zeros(self.shape)
        pad[: self.ny, : self.nx] = a
        return _fft.rfft2(pad, workers=-1)

    def _back(self, a: np.ndarray) -> np.ndarray:
        return _fft.irfft2(a, s=self.shape, workers=-1)[: self.ny, : self.nx]

    def electrons(self, dn: np.ndarray, s: np.ndarray | None = None) -> np.ndarray:
        """Potential energy (meV) in the 2DEG of a density change ``dn`` and, frozen surface, gate charge ``s``."""
        spectrum = self.k_nn * self._pad(dn)
        if s is not None:
            spectrum = spectrum + self.k_sn * self._pad(s)
        return self._back(spectrum)

    def both(self, dn: np.ndarray, s: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Frozen surface: potential energy in the 2DEG and on the surface, sharing the forward transforms."""
        fn, fs = self._pad(dn), self._pad(s)
        return self._back(self.k_nn * fn + self.k_sn * fs), self._back(self.k_ss * fs + self.k_sn * fn)

    def gates(self, s: np.ndarray) -> np.ndarray:
        """Frozen surface: potential energy on the surface of gate charge ``s`` alone."""
        return self._back(self.k_ss * self._pad(s))


def frozen_gate_potential(layout, *, eps_r: float, x_nm: np.ndarray, y_nm: np.ndarray,
                          tolerance: float = FROZEN_CG_TOLERANCE) -> tuple[np.ndarray, np.ndarray]:
    """The gates' potential energy in the 2DEG with a frozen surface and no screening, on a grid.

    Solves for the gates' charge ``s`` (on the gate nodes) that puts every gate at its voltage, by conjugate
    gradients (the surface kernel is symmetric positive definite), then ``U = K_sn s``.

    Returns
    -------
    potential_meV : (ny, nx) float ndarray
        Electron potential energy in the 2DEG, meV.
    gate_charge_nm2 : (ny, nx) float ndarray
        Extra electrons per nm^2 on the gates (0 on the exposed surface).
    """
    from scipy.sparse.linalg import LinearOperator, cg

    x_nm, y_nm = np.asarray(x_nm, float), np.asarray(y_nm, float)
    h = float(x_nm[1] - x_nm[0])
    target = gate_nodes(layout, x_nm, y_nm)
    mask = np.isfinite(target)
    if not mask.any():
        raise RgftransError("no gate covers a node of the screening grid; widen the grid or check the gates")
    kernels = SurfaceKernels(len(x_nm), len(y_nm), h, layout.depth_nm, eps_r, "frozen")
    full = np.zeros(mask.shape)

    def apply(v):
        full[mask] = v
        return kernels.gates(full)[mask]

    operator = LinearOperator((int(mask.sum()),) * 2, matvec=apply, dtype=float)
    rhs = target[mask]
    solution, info = cg(operator, rhs, rtol=tolerance, atol=0.0, maxiter=20 * int(math.sqrt(rhs.size)) + 200)
    if info != 0:
        raise ComputationFailed(f"frozen-surface gate charges did not converge in {info} iterations; use a coarser "
                                "grid")
    s = np.zeros(mask.shape)
    s[mask] = solution
    return kernels.electrons(np.zeros(mask.shape), s), s
