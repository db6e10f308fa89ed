"""Shared builders for the transport tests (imported as `builders`): random devices, strips, alternative slicings.

Every random device comes from a seeded ``numpy.random.Generator``, so a test
parametrized over seeds names its case and reproduces it exactly.  Candidates
that legitimately fail to discretise (a hole that cuts the device in two, a
notch that makes a lead's edge ragged, two leads that touch) raise
``GeometryError`` / ``LeadError``; the builder then draws the next candidate
from the *same* generator instead of skipping the test, so a seed always
yields a device and no failure is hidden.

All devices here are in tight-binding units: ``square(1.0)`` (a = 1 nm) with
``hopping=1.0`` (t = 1 meV), so the onsite energy is ``4 + U`` and the bulk
band is ``[0, 8]`` meV.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from hypothesis import strategies as st

from rgftrans.system.device import Device, Lead, TightBindingModel
from rgftrans.errors import GeometryError, LeadError
from rgftrans.system.geometry import disk, rectangle
from rgftrans.system.lattices import square
from rgftrans.transport.slicing import Slicing, slice_layers

#: Hopping of the tight-binding-unit devices (meV); the 2D band is [0, 8 T_HOP].
T_HOP = 1.0
#: Candidates drawn before the builder gives up (a failure, never a skip).
MAX_CANDIDATES = 200

#: Lead placements: opposite sides and adjacent sides.
OPPOSITE = (("left", "right"), ("right", "left"), ("bottom", "top"), ("top", "bottom"))
ADJACENT = (("left", "top"), ("left", "bottom"), ("right", "top"), ("bottom", "right"), ("top", "left"))


@dataclass(frozen=True)
class RandomDevice:
    """A discretised random device and how it was drawn (for failure messages)."""

    device: Device
    model: TightBindingModel
    description: str
    candidates: int  # how many candidates were drawn before this one discretised

    def __repr__(self) -> str:  # shows up in assertion messages
        return f"RandomDevice({self.description}, after {self.candidates} candidate(s))"


def strip_device(width: int, length: int, *, sides=("left", "right"), potential=0.0,
                 names=("source", "drain")) -> Device:
    """A straight ``width``-row x ``length``-column strip with full-width leads on two opposite sides.

    With ``sides=("left", "right")`` the strip runs along x (``length`` columns
    of ``width`` sites); with ``("bottom", "top")`` it runs along y.
    """
    # Padded by 0.4 a so that one-row or one-column strips are still rectangles.
    pad = 0.4
    if sides[0] in ("left", "right"):
        region = rectangle(-pad, -pad, length - 1.0 + pad, width - 1.0 + pad)
    else:
        region = rectangle(-pad, -pad, width - 1.0 + pad, length - 1.0 + pad)
    span = (0.0, width - 1.0)
    leads = [Lead(names[0], sides[0], span), Lead(names[1], sides[1], span)]
    return Device(region, leads, lattice=square(1.0), hopping=T_HOP, potential=potential)


def _smooth_potential(rng: np.random.Generator, amplitude: float):
    """A random smooth potential energy U(x, y) (meV): a few long-wavelength plane waves."""
    n_waves = int(rng.integers(1, 4))
    amps = amplitude * rng.uniform(-1.0, 1.0, n_waves)
    kx, ky = rng.uniform(-0.8, 0.8, (2, n_waves))
    phases = rng.uniform(0.0, 2 * np.pi, n_waves)
    offset = float(rng.uniform(-0.3, 0.3))

    def potential(x, y):
        x = np.asarray(x)[..., None]
        y = np.asarray(y)[..., None]
        return offset + np.sum(amps * np.cos(kx * x + ky * y + phases), axis=-1)

    return potential


def _span(rng: np.random.Generator, length: float, *, lo_max: float | None = None, hi_min: float | None = None):
    """A random span (lo, hi) in [0, length] holding at least one lattice line.

    Endpoints are random reals (not on the lattice), which exercises the
    rounding of the span to lattice lines.
    """
    lo_lim = 0.0 if hi_min is None else hi_min
    hi_lim = length if lo_max is None else lo_max
    first = int(rng.integers(int(np.ceil(lo_lim)), int(np.floor(hi_lim)) + 1))
    n_lines = int(rng.integers(1, int(np.floor(hi_lim)) - first + 2))
    lo = first - rng.uniform(0.0, 0.45)
    hi = first + n_lines - 1 + rng.uniform(0.0, 0.45)
    return (max(lo, -0.45), hi)


def _draw_candidate(rng: np.random.Generator, *, max_len: int, max_wid: int, holes: bool, placement: str | None):
    lx = int(rng.integers(3, max_len + 1))  # x extent in lattice spacings
    ly = int(rng.integers(2, max_wid + 1))
    region = rectangle(0.0, 0.0, float(lx), float(ly))
    if placement is None:
        placement = "opposite" if rng.random() < 0.5 else "adjacent"
    pairs = {"opposite": OPPOSITE, "adjacent": ADJACENT}[placement]
    pair = pairs[rng.integers(len(pairs))]
    extent = {"left": ly, "right": ly, "bottom": lx, "top": lx}
    leads = []
    for name, side in zip(("source", "drain"), pair):
        potential = float(rng.uniform(-0.3, 0.3)) if rng.random() < 0.3 else 0.0
        leads.append(Lead(name, side, _span(rng, extent[side]), potential=potential))
    parts = [f"rect {lx}x{ly}", f"{placement} leads {pair[0]}{leads[0].span!r}/{pair[1]}{leads[1].span!r}"]
    if holes:
        for _ in range(int(rng.integers(0, 3))):  # holes: disks strictly inside
            radius = float(rng.uniform(0.6, 0.25 * min(lx, ly) + 0.7))
            centre = (float(rng.uniform(0.0, lx)), float(rng.uniform(0.0, ly)))
            region = region - disk(centre, radius, segments=24)
            parts.append(f"hole r={radius:.2f} at ({centre[0]:.2f}, {centre[1]:.2f})")
        for _ in range(int(rng.integers(0, 3))):  # notches: rectangles cut from an edge
            side = ("left", "right", "bottom", "top")[rng.integers(4)]
            depth = float(rng.uniform(0.5, 2.5))
            if side in ("left", "right"):
                a, b = sorted(rng.uniform(-0.5, ly + 0.5, 2))
                x0 = -1.0 if side == "left" else lx - depth
                notch = rectangle(x0, a, x0 + depth + 1.0, b + 0.3)
            else:
                a, b = sorted(rng.uniform(-0.5, lx + 0.5, 2))
                y0 = -1.0 if side == "bottom" else ly - depth
                notch = rectangle(a, y0, b + 0.3, y0 + depth + 1.0)
            region = region - notch
            parts.append(f"notch {side} depth {depth:.2f}")
    potential = _smooth_potential(rng, float(rng.uniform(0.0, 1.0)))
    device = Device(region, leads, lattice=square(1.0), hopping=T_HOP, potential=potential)
    return device, ", ".join(parts)


def random_device(seed: int, *, placement: str | None = None, max_len: int = 12, max_wid: int = 9,
                  holes: bool = True) -> RandomDevice:
    """A random two-terminal device from ``numpy.random.default_rng(seed)``.

    ``placement`` is ``"opposite"`` (leads on opposite sides), ``"adjacent"``
    (on two sides that meet at a corner) or None (either, at random).  With
    ``holes`` the rectangle loses up to two disks and up to two edge notches.

    Draws candidates until one discretises; GeometryError and LeadError are
    the legitimate rejections (disconnected pieces, ragged lead edge, touching
    leads, ...).  Anything else propagates and fails the test.
    """
    rng = np.random.default_rng(seed)
    for attempt in range(1, MAX_CANDIDATES + 1):
        device, description = _draw_candidate(rng, max_len=max_len, max_wid=max_wid, holes=holes,
                                              placement=placement)
        try:
            model = device.discretise()
        except (GeometryError, LeadError):
            continue
        return RandomDevice(device, model, f"seed {seed}: {description}", attempt)
    raise RuntimeError(f"seed {seed}: no valid device in {MAX_CANDIDATES} candidates; the generator is broken")


def in_band_energies(rng: np.random.Generator, n: int, *, band=(0.05, 7.95)) -> np.ndarray:
    """``n`` random energies inside the 2D band of the t = 1 devices (meV)."""
    return np.sort(rng.uniform(*band, n))


def default_slicing(model: TightBindingModel) -> Slicing:
    return slice_layers(model.hamiltonian, [lead.interface for lead in model.leads])


def one_layer_slicing(model: TightBindingModel) -> Slicing:
    """Everything in a single layer: RGF degenerates to one dense inversion."""
    return Slicing(layers=(np.arange(model.n_sites),), lead_layer=(0, 0))


def merged_pairs_slicing(model: TightBindingModel) -> Slicing:
    """The default layers merged two by two: still block-tridiagonal, half as many layers."""
    base = default_slicing(model)
    layers = tuple(np.concatenate(base.layers[k:k + 2]) for k in range(0, base.n_layers, 2))
    return Slicing(layers=layers, lead_layer=(0, len(layers) - 1))


def swapped_leads(model: TightBindingModel) -> TightBindingModel:
    """The same model with the two leads in the other order (source <-> drain)."""
    return TightBindingModel(
        hamiltonian=model.hamiltonian, positions=model.positions, leads=tuple(reversed(model.leads)),
        energy_scale=model.energy_scale,
    )


# --- hypothesis: small devices that are valid by construction ----------------------------------


@st.composite
def small_devices(draw, *, max_len: int = 7, max_wid: int = 6):
    """A small random device that must discretise (no rejection needed).

    A full ``lx`` x ``ly`` rectangle keeps all four edges straight, so a lead
    may sit anywhere along any side; two leads on different sides never share
    a lattice row.  An optional hole is a disk kept at least 0.3 spacings
    away from every edge: it removes only interior sites, so the edges stay
    straight, and (being convex) it cannot cut the device in two -- from any
    remaining site, walking away from the disk's centre along x reaches the
    edge without entering it.  A smooth potential (two cosines) and a lead
    band offset complete it.  Returns the Device; the caller discretises it,
    so a LeadError or GeometryError here is a real failure.
    """
    lx = draw(st.integers(2, max_len), label="lx")
    ly = draw(st.integers(1, max_wid), label="ly")
    pair = draw(st.sampled_from(OPPOSITE + ADJACENT), label="sides")
    region = rectangle(0.0, 0.0, float(lx), float(ly))
    extent = {"left": ly, "right": ly, "bottom": lx, "top": lx}
    leads = []
    for name, side in zip(("source", "drain"), pair):
        first = draw(st.integers(0, extent[side]), label=f"{name} first line")
        last = draw(st.integers(first, extent[side]), label=f"{name} last line")
        pad = draw(st.floats(0.0, 0.4), label=f"{name} span padding")
        offset = draw(st.sampled_from([0.0, 0.0, 0.25, -0.2]), label=f"{name} band offset")
        leads.append(Lead(name, side, (max(first - pad, -0.4), last + pad), potential=offset))
    if min(lx, ly) >= 3 and draw(st.booleans(), label="hole"):
        r_max = (min(lx, ly) - 0.6) / 2
        radius = draw(st.floats(0.5, r_max), label="hole radius")
        # max(...) guards against round-off making the interval empty when radius == r_max.
        cx = draw(st.floats(radius + 0.3, max(radius + 0.3, lx - radius - 0.3)), label="hole x")
        cy = draw(st.floats(radius + 0.3, max(radius + 0.3, ly - radius - 0.3)), label="hole y")
        region = region - disk((cx, cy), radius, segments=16)
    amp_x, amp_y = draw(st.tuples(st.floats(-1.0, 1.0), st.floats(-1.0, 1.0)), label="potential amplitudes")
    k_x, k_y = draw(st.tuples(st.floats(0.1, 1.0), st.floats(0.1, 1.0)), label="potential wave numbers")

    def potential(x, y):
        return amp_x * np.cos(k_x * x) + amp_y * np.sin(k_y * y + 0.3)

    return Device(region, leads, lattice=square(1.0), hopping=T_HOP, potential=potential)


def lead_thresholds(model: TightBindingModel) -> np.ndarray:
    """Channel thresholds (meV) of the model's leads, all straight strips with h_hop = -t 1.

    For such a lead the subbands are ``eps_n + 2t cos k`` with ``eps_n`` the
    eigenvalues of ``h_cell`` (a separable strip), so the thresholds are
    ``eps_n +- 2t``.
    """
    out = []
    for lead in model.leads:
        assert np.allclose(lead.h_hop, -T_HOP * np.eye(len(lead.h_hop))), "not a straight strip lead"
        eps = np.linalg.eigvalsh(lead.h_cell)
        out.extend([eps - 2 * T_HOP, eps + 2 * T_HOP])
    return np.concatenate(out)
