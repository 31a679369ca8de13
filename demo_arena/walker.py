"""A synthetic small quadruped walking over a heightmap (invented data).

Four limb oscillators are coupled towards the phase offsets of a gait mode
(lateral-sequence walk or trot, after the footfall patterns in Hildebrand's
gait diagrams); each limb is in stance while its phase is below the duty
factor. Touch-down points are placed ahead of the hip and perturbed by the
ground under the foot: taller ground gives higher foot clearance and lower
speed, and, apart from its height, ground that is irregular at the foot's
scale gives noisier timing and placement. Markers carry 0.2 mm noise (common
practice for small-animal marker capture), occasional short dropouts, and
optionally one long gap.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

__all__ = ["FEET", "GAITS", "MARKERS", "SubjectSpec", "WalkRecording", "walk_over"]

FEET = ("LF", "RF", "LH", "RH")
MARKERS = ("snout", "neck", "spine", "tailbase", "foot_LF", "foot_RF", "foot_LH", "foot_RH")
# Phase of each foot relative to LH (fraction of a stride) and the duty factor.
GAITS = {
    "walk": ({"LH": 0.0, "LF": 0.25, "RH": 0.5, "RF": 0.75}, 0.65),
    "trot": ({"LH": 0.0, "RF": 0.0, "RH": 0.5, "LF": 0.5}, 0.5),
}
_HIP = {"LF": (0.5, 1), "RF": (0.5, -1), "LH": (-0.5, 1), "RH": (-0.5, -1)}


@dataclass(frozen=True)
class SubjectSpec:
    """An invented animal: body length and preferred speed in SI units."""

    label: str
    body_length_m: float
    mass_kg: float
    preferred_speed_m_s: float
    seed: int


@dataclass(frozen=True)
class WalkRecording:
    """Marker trajectories ``(n_frames, n_markers, 3)`` in metres, NaN in gaps."""

    markers: NDArray[np.float64]
    marker_names: tuple[str, ...]
    frame_rate_hz: float
    gait: str
    mean_speed_m_s: float
    stride_frequency_hz: float
    stance: NDArray[np.bool_]  # (n_frames, 4) ground truth, feet in FEET order


def _local_roughness(z: NDArray, dx_m: float, x: float, y: float, r_m: float = 0.01) -> float:
    i, j = int(y / dx_m), int(x / dx_m)
    h = max(int(r_m / dx_m), 1)
    patch = z[max(i - h, 0) : i + h + 1, max(j - h, 0) : j + h + 1]
    return float(patch.std()) if patch.size else 0.0


def _roughness_map(z: NDArray, dx_m: float, r_m: float = 0.01) -> NDArray:
    """``_local_roughness`` at every cell: the standard deviation of the same clipped patch.

    Window means of z and z^2 by a box filter with zero padding (a sum over the window cut
    at the edge, divided by the cells it kept), heights centred first so the variance does
    not come from the difference of two large numbers: the walker looks the value up
    instead of taking ``np.std`` of a patch every frame. Equal to the per-patch value to
    about 1e-9 relative.
    """
    from scipy.ndimage import uniform_filter

    size = 2 * max(int(r_m / dx_m), 1) + 1
    zc = z - z.mean()

    def box(a: NDArray) -> NDArray:
        return uniform_filter(a, size=size, mode="constant", cval=0.0)

    count = box(np.ones_like(zc))
    mean = box(zc) / count
    var = box(zc * zc) / count - mean * mean
    return np.sqrt(np.clip(var, 0.0, None))


def _fine_structure(z: NDArray, dx_m: float) -> NDArray:
    """Height left after a 4 mm Gaussian smoothing: the foot-scale irregular part."""
    from scipy.ndimage import gaussian_filter

    return z - gaussian_filter(z, sigma=max(0.004 / dx_m, 1.0), mode="nearest")


_GROUND_CACHE: list[tuple[float, NDArray, tuple[float, float, NDArray]]] = []


def _ground_terms(z: NDArray, dx_m: float) -> tuple[float, float, NDArray]:
    """RMS slope along travel, irregularity at the foot's scale and the roughness map.

    They depend on the ground alone; the demo walks every tray eight times, so the last
    ground's terms are kept (with a copy of it, compared in full: a caller may change
    its array in place between walks).
    """
    for cached_dx, cached_z, terms in _GROUND_CACHE:
        if cached_dx == dx_m and cached_z.shape == z.shape and np.array_equal(cached_z, z):
            return terms
    ground_rough = float(np.std(np.diff(z, axis=1))) / dx_m  # RMS slope along travel
    fine = _fine_structure(z, dx_m)
    tray_irregularity = float(fine.std() / (z.std() + 1e-9))
    terms = (ground_rough, tray_irregularity, _roughness_map(z, dx_m))
    _GROUND_CACHE[:] = [(dx_m, np.array(z, copy=True), terms)]
    return terms


class _Draws:
    """Standard normals from ``rng`` in buffered blocks, consumed in order.

    ``settle()`` winds ``rng`` to where drawing the consumed values one call at a time would
    have left it (the state is saved before each block and the used part drawn again).
    """

    def __init__(self, rng: np.random.Generator, block: int = 4096) -> None:
        self.rng = rng
        self.block = block
        self._state = rng.bit_generator.state
        self._buf: list[float] = rng.standard_normal(block).tolist()
        self._pos = 0

    def take(self, k: int) -> list[float]:
        if self._pos + k > len(self._buf):
            used = self._pos
            self.rng.bit_generator.state = self._state
            self.rng.standard_normal(used)  # wind to the first value not consumed
            self._state = self.rng.bit_generator.state
            self._buf = self.rng.standard_normal(self.block).tolist()
            self._pos = 0
        out = self._buf[self._pos : self._pos + k]
        self._pos += k
        return out

    def settle(self) -> None:
        self.rng.bit_generator.state = self._state
        self.rng.standard_normal(self._pos)


def walk_over(
    z: NDArray[np.float64],
    dx_m: float,
    subject: SubjectSpec,
    *,
    duration_s: float,
    frame_rate_hz: float = 300.0,
    treadmill_speed_m_s: float | None = None,
    long_gap: bool = False,
    stop_at_x_m: float | None = None,
    seed: int,
) -> WalkRecording:
    """Simulate one trial of ``subject`` over ground ``z`` (heights in m, spacing ``dx_m``).

    Overground, the trial ends when the body passes ``stop_at_x_m`` (one pass
    along the runway) or after ``duration_s``, whichever comes first.
    """
    rng = np.random.default_rng(seed)
    rng_ground = np.random.default_rng([seed, 1])
    n = round(duration_s * frame_rate_hz)
    dt = 1.0 / frame_rate_hz
    ground_rough, tray_irregularity, rough_map = _ground_terms(z, dx_m)
    stumble = 0.15 * min(max(tray_irregularity - 0.35, 0.0) / 0.2, 1.0)
    # Rough ground slows the animal (the demo's built-in confound, see issue on covariates).
    speed = subject.preferred_speed_m_s / (1.0 + 1.5 * ground_rough) * rng.uniform(0.9, 1.1)
    on_belt = treadmill_speed_m_s is not None
    if on_belt:
        speed = float(treadmill_speed_m_s)
    gait = "trot" if speed > 0.9 * subject.preferred_speed_m_s else "walk"
    offsets, duty = GAITS[gait]
    stride_hz = float(2.2 * np.sqrt(speed / subject.body_length_m) / 3.0)
    half_len = subject.body_length_m / 2
    # A foot that touches down a fraction d of a stride after LH runs d behind it.
    target = [-offsets[f] for f in FEET]
    phase: list[float] = (np.array(target) + rng.normal(0, 0.02, 4)).tolist()
    # The frame loop below works on plain floats (four feet, two coordinates): small numpy
    # arrays cost a microsecond an operation, which over 94,000 frames was most of the
    # demo's generation time. The random draws are the same standard normals in the same
    # order as drawing them one call at a time (numpy's Generator gives the same stream
    # either way), from buffers; the generators are wound to where one call at a time would
    # have left them, so the noise and gaps drawn after the loop are the same too.
    ground_draws = _Draws(rng_ground) if stumble else None
    draws = _Draws(rng)
    ny, nx = z.shape
    z_at, rough_at = z.item, rough_map.item  # plain floats, no numpy scalars in the loop

    def height(px: float, py: float) -> float:
        i = min(max(round(py / dx_m), 0), ny - 1)
        j = min(max(round(px / dx_m), 0), nx - 1)
        return z_at(i, j)

    wander = [0.0] * 4
    x = nx * dx_m / 2 if on_belt else 0.08
    y = ny * dx_m / 2
    heading = 0.0
    foot = [[0.0, 0.0, 0.0] for _ in FEET]
    lift = [[0.0, 0.0, 0.0] for _ in FEET]
    stance = [False] * 4
    out = np.empty((n, len(MARKERS), 3))
    stance_log = np.zeros((n, 4), bool)
    relax = dt / 0.1
    kick = float(np.sqrt(2 * dt / 0.1))
    turn = float(0.3 * np.sqrt(dt))
    couple = 0.8 * stride_hz
    floor_rate = 0.2 * stride_hz
    reach = 0.5 * speed * duty / stride_hz
    rel = [target[f] - target[2] for f in range(4)]
    two_pi = 2 * math.pi
    spine = [(0.55, 0.002), (0.35, 0.006), (0.0, 0.008), (-0.5, 0.0)]
    for k in range(n):
        if not on_belt and stop_at_x_m is not None and x > stop_at_x_m:
            n = k
            break
        i, j = int(y / dx_m), int(x / dx_m)
        # Off the tray: the patch as it was cut there (empty or partial).
        on_tray = 0 <= i < ny and 0 <= j < nx
        rough = rough_at(i, j) if on_tray else _local_roughness(z, dx_m, x, y)
        # Each limb's frequency wanders (Ornstein-Uhlenbeck, 0.1 s memory) with a spread
        # that grows with the local amplitude and, apart from it, with how irregular the
        # ground is at the foot's scale (invented laws for the demo: tall regular ripples
        # raise the feet but keep the rhythm; low scree leaves the feet low but breaks it).
        spread = 0.03 + 60.0 * rough
        g = draws.take(4)
        wander = [w + (-w * relax + spread * kick * e) for w, e in zip(wander, g, strict=True)]
        # Irregular trays (scree, crust: over a third of their height spread at the foot's
        # scale; not ripples, nor boulders whose height is mostly at larger scales) add a
        # wander of their own, from a separate stream so everything else stays as it was.
        if ground_draws is not None:
            g = ground_draws.take(4)
            wander = [w + stumble * kick * e for w, e in zip(wander, g, strict=True)]
        p2 = phase[2]
        phase = [
            p
            + dt
            * max(
                stride_hz * (1.0 + w) + couple * math.sin(two_pi * (r - (p - p2))),
                floor_rate,
            )  # phases never run backwards
            for p, w, r in zip(phase, wander, rel, strict=True)
        ]
        heading += turn * draws.take(1)[0] - 2.0 * heading * dt
        dcos, dsin = math.cos(heading), math.sin(heading)
        if not on_belt:
            x, y = x + speed * dt * dcos, y + speed * dt * dsin
        body_z = height(x, y) + 0.25 * subject.body_length_m
        for f, name in enumerate(FEET):
            fore, side = _HIP[name]
            hx = x + fore * half_len * dcos + side * 0.012 * -dsin
            hy = y + fore * half_len * dsin + side * 0.012 * dcos
            psi = phase[f] % 1.0
            now_stance = psi < duty
            ft = foot[f]
            if now_stance and not stance[f]:  # touch-down ahead of the hip
                scatter = 0.002 + 2.0 * rough
                e = draws.take(2)
                sx = hx + reach * dcos + scatter * e[0]
                sy = hy + reach * dsin + scatter * e[1]
                ft[0], ft[1], ft[2] = sx, sy, height(sx, sy)
            elif not now_stance and stance[f]:
                lift[f][:] = ft
            if not now_stance:
                s = (psi - duty) / (1.0 - duty)
                # Overground the hip keeps moving during the rest of the swing.
                ahead = 0.0 if on_belt else speed * (1.0 - s) * (1.0 - duty) / stride_hz
                ax = hx + (reach + ahead) * dcos
                ay = hy + (reach + ahead) * dsin
                blend = (1.0 - math.cos(math.pi * s)) / 2.0
                lx, ly = lift[f][0], lift[f][1]
                px, py = lx + (ax - lx) * blend, ly + (ay - ly) * blend
                clearance = 0.004 + 3.0 * rough
                ft[0], ft[1], ft[2] = px, py, height(px, py) + clearance * math.sin(math.pi * s)
            if on_belt and now_stance:
                ft[0] -= speed * dt  # the belt carries the planted foot back
            stance[f] = now_stance
        stance_log[k] = stance
        bob = 0.002 * math.cos(2 * two_pi * phase[2])
        sway = 0.0015 * math.sin(two_pi * phase[2])
        cx, cy = x + sway * -dsin, y + sway * dcos
        frame = out[k]
        for m, (along, up) in enumerate(spine):
            a = along * subject.body_length_m
            frame[m] = (cx + a * dcos, cy + a * dsin, body_z + up + bob)
        frame[4:] = foot
    draws.settle()
    if ground_draws is not None:
        ground_draws.settle()
    out, stance_log = out[:n], stance_log[:n]
    out += rng.normal(0, 0.0002, out.shape)  # 0.2 mm marker noise (common practice)
    _drop(out, rng, frame_rate_hz, long_gap)
    return WalkRecording(out, MARKERS, frame_rate_hz, gait, speed, stride_hz, stance_log)


def _drop(out: NDArray, rng: np.random.Generator, frame_rate_hz: float, long_gap: bool) -> None:
    n = out.shape[0]
    for _ in range(rng.poisson(2)):  # short occlusions, 3-10 frames
        m = rng.integers(4, out.shape[1])
        start = rng.integers(0, n - 12)
        out[start : start + rng.integers(3, 11), m] = np.nan
    if long_gap:  # one long occlusion of a hind foot, 0.2 s
        start = n // 3
        out[start : start + int(0.2 * frame_rate_hz), MARKERS.index("foot_LH")] = np.nan
