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


def _fine_structure(z: NDArray, dx_m: float) -> NDArray:
    """Height left after a 4 mm Gaussian smoothing: the foot-scale irregular part."""
    from scipy.ndimage import gaussian_filter

    return z - gaussian_filter(z, sigma=max(0.004 / dx_m, 1.0), mode="nearest")


def _height(z: NDArray, dx_m: float, x: float, y: float) -> float:
    i = min(max(round(y / dx_m), 0), z.shape[0] - 1)
    j = min(max(round(x / dx_m), 0), z.shape[1] - 1)
    return float(z[i, j])


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
    ground_rough = float(np.std(np.diff(z, axis=1))) / dx_m  # RMS slope along travel
    fine = _fine_structure(z, dx_m)
    tray_irregularity = float(fine.std() / (z.std() + 1e-9))
    stumble = 0.15 * min(max(tray_irregularity - 0.35, 0.0) / 0.2, 1.0)
    # Rough ground slows the animal (the demo's built-in confound, see issue on covariates).
    speed = subject.preferred_speed_m_s / (1.0 + 1.5 * ground_rough) * rng.uniform(0.9, 1.1)
    on_belt = treadmill_speed_m_s is not None
    if on_belt:
        speed = float(treadmill_speed_m_s)
    gait = "trot" if speed > 0.9 * subject.preferred_speed_m_s else "walk"
    offsets, duty = GAITS[gait]
    stride_hz = 2.2 * np.sqrt(speed / subject.body_length_m) / 3.0
    half_len = subject.body_length_m / 2
    # A foot that touches down a fraction d of a stride after LH runs d behind it.
    target = -np.array([offsets[f] for f in FEET])
    phase = target + rng.normal(0, 0.02, 4)
    wander = np.zeros(4)
    x = z.shape[1] * dx_m / 2 if on_belt else 0.08
    y = z.shape[0] * dx_m / 2
    heading = 0.0
    foot = np.zeros((4, 3))
    stance = np.zeros(4, bool)
    lift = np.zeros((4, 3))
    out = np.empty((n, len(MARKERS), 3))
    stance_log = np.zeros((n, 4), bool)
    for k in range(n):
        if not on_belt and stop_at_x_m is not None and x > stop_at_x_m:
            n = k
            break
        rough = _local_roughness(z, dx_m, x, y)
        # Each limb's frequency wanders (Ornstein-Uhlenbeck, 0.1 s memory) with a spread
        # that grows with the local amplitude and, apart from it, with how irregular the
        # ground is at the foot's scale (invented laws for the demo: tall regular ripples
        # raise the feet but keep the rhythm; low scree leaves the feet low but breaks it).
        spread = 0.03 + 60.0 * rough
        wander += -wander * dt / 0.1 + spread * np.sqrt(2 * dt / 0.1) * rng.normal(size=4)
        # Irregular trays (scree, crust: over a third of their height spread at the foot's
        # scale; not ripples, nor boulders whose height is mostly at larger scales) add a
        # wander of their own, from a separate stream so everything else stays as it was.
        if stumble:
            wander += stumble * np.sqrt(2 * dt / 0.1) * rng_ground.normal(size=4)
        coupling = 0.8 * stride_hz * np.sin(2 * np.pi * ((target - target[2]) - (phase - phase[2])))
        rate = stride_hz * (1.0 + wander) + coupling
        phase = phase + dt * np.maximum(rate, 0.2 * stride_hz)  # phases never run backwards
        heading += rng.normal(0, 0.3 * np.sqrt(dt)) - 2.0 * heading * dt
        direction = np.array([np.cos(heading), np.sin(heading)])
        if not on_belt:
            x, y = np.array([x, y]) + speed * dt * direction
        body_z = _height(z, dx_m, x, y) + 0.25 * subject.body_length_m
        for f, name in enumerate(FEET):
            fore, side = _HIP[name]
            hip = (
                np.array([x, y])
                + fore * half_len * direction
                + side * 0.012 * np.array([-direction[1], direction[0]])
            )
            psi = phase[f] % 1.0
            now_stance = psi < duty
            if now_stance and not stance[f]:  # touch-down ahead of the hip
                reach = 0.5 * speed * duty / stride_hz
                scatter = 0.002 + 2.0 * rough
                spot = hip + reach * direction + rng.normal(0, scatter, 2)
                foot[f] = [spot[0], spot[1], _height(z, dx_m, *spot)]
            elif not now_stance and stance[f]:
                lift[f] = foot[f]
            if not now_stance:
                s = (psi - duty) / (1.0 - duty)
                reach = 0.5 * speed * duty / stride_hz
                # Overground the hip keeps moving during the rest of the swing.
                ahead = 0.0 if on_belt else speed * (1.0 - s) * (1.0 - duty) / stride_hz
                aim = hip + (reach + ahead) * direction
                blend = (1.0 - np.cos(np.pi * s)) / 2.0
                xy = lift[f][:2] + (aim - lift[f][:2]) * blend
                clearance = 0.004 + 3.0 * rough
                foot[f] = [xy[0], xy[1], _height(z, dx_m, *xy) + clearance * np.sin(np.pi * s)]
            if on_belt and now_stance:
                foot[f, 0] -= speed * dt  # the belt carries the planted foot back
            stance[f] = now_stance
        stance_log[k] = stance
        bob = 0.002 * np.cos(4 * np.pi * phase[2])
        sway = 0.0015 * np.sin(2 * np.pi * phase[2])
        lateral = np.array([-direction[1], direction[0]])
        centre = np.array([x, y]) + sway * lateral
        spine = [(0.55, 0.002), (0.35, 0.006), (0.0, 0.008), (-0.5, 0.0)]
        for m, (along, up) in enumerate(spine):
            pos = centre + along * subject.body_length_m * direction
            out[k, m] = [pos[0], pos[1], body_z + up + bob]
        out[k, 4:] = foot
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
