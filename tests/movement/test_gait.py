"""Tests for measures.movement.gait: contacts, strides, phases, Hildebrand point, cycle classes.

The synthetic quadruped below is built analytically in the test: every foot
touches down at t = (phase + n) / stride_frequency, stays planted for
``duty`` of the stride and swings forward on a smooth sin^2 height arc, while
the body moves at constant speed along a fixed heading. Its stride frequency,
duty factor, phases and stride length (= speed / frequency) are known exactly.
"""

from __future__ import annotations

import numpy as np
import pytest
from _testing import assert_allclose

from measures import (
    InvalidParameterError,
    body_frame,
    circular_mean_phase,
    cycle_classes,
    foot_contacts,
    gait_parameters,
    limb_phase,
    step_cycles,
)

FS = 300.0  # common practice: small-animal marker capture at 300 Hz
LIMBS = ("LF", "RF", "LH", "RH")
# Footfall phases relative to LH touch-down. Lateral-sequence walk LH, LF, RH, RF
# at quarter-stride spacing; trot pairs diagonals LH+RF and RH+LF half a stride
# apart (Hildebrand 1965 / 1976, from memory).
WALK = {"LH": 0.0, "LF": 0.25, "RH": 0.5, "RF": 0.75}
TROT = {"LH": 0.0, "RF": 0.0, "RH": 0.5, "LF": 0.5}
FEET = {"LF": 2, "RF": 3, "LH": 4, "RH": 5}


def synthetic_walker(
    *,
    phases: dict[str, float],
    duty: float,
    stride_hz: float = 4.0,
    speed: float = 0.2,
    duration_s: float = 3.0,
    heading: float = 0.7,
    lift_m: float = 0.005,
    noise_m: float = 0.0,
    rng: np.random.Generator | None = None,
    lift_scale: np.ndarray | None = None,
) -> np.ndarray:
    """Markers (n, 6, 3): anterior, posterior, LF, RF, LH, RH in metres."""
    t = np.arange(round(duration_s * FS)) / FS
    f = np.array([np.cos(heading), np.sin(heading), 0.0])
    left = np.array([-np.sin(heading), np.cos(heading), 0.0])
    body_x = speed * t
    origin = np.array([0.1, -0.2, 0.03]) + body_x[:, None] * f
    stride = speed / stride_hz
    half_len, half_width = 0.04, 0.015
    out = np.empty((t.size, 6, 3))
    out[:, 0] = origin + half_len * f
    out[:, 1] = origin - half_len * f
    nominal = {"LF": (half_len, half_width), "RF": (half_len, -half_width)}
    nominal |= {"LH": (-half_len, half_width), "RH": (-half_len, -half_width)}
    for name in LIMBS:
        p = (stride_hz * t - phases[name]) % 1.0
        stance = p < duty
        s = np.clip((p - duty) / (1 - duty), 0, 1)
        rel = np.where(
            stance,
            stride * duty / 2 - stride * p,
            -stride * duty / 2 + stride * duty * (1 - np.cos(np.pi * s)) / 2,
        )
        height = np.where(stance, 0.0, lift_m * np.sin(np.pi * s) ** 2)
        if lift_scale is not None:
            height = (
                height
                * lift_scale[np.floor(stride_hz * t - phases[name]).astype(int) % lift_scale.size]
            )
        x0, y0 = nominal[name]
        pos = origin + (x0 + rel)[:, None] * f + y0 * left
        pos[:, 2] = 0.001 + height  # marker 1 mm above the sole
        out[:, FEET[name]] = pos
    if noise_m:
        out = out + rng.normal(0.0, noise_m, out.shape)
    return out


def _params(markers: np.ndarray, **kw: object):
    return gait_parameters(markers, frame_rate_hz=FS, feet=FEET, anterior=0, posterior=1, **kw)


def test_synthetic_walker_recovered() -> None:
    """Stride frequency, duty factor, phases, speed and stride length of a known walker."""
    m = synthetic_walker(phases=WALK, duty=0.7)
    g = _params(m)
    # Exact by construction: 300 Hz / 4 Hz = 75 frames per stride.
    assert_allclose(g.stride_frequency_hz, 4.0, rtol=1e-3)
    # Velocity refinement leaves ~1.5 % of the swing on each side in stance
    # (10 % of the peak vertical speed on a sin^2 arc), plus one frame: 0.03.
    assert abs(g.duty_factor - 0.7) < 0.03
    assert_allclose(g.speed_m_s, 0.2, rtol=1e-9)
    assert_allclose(g.stride_length_m, 0.05, rtol=1e-6)
    for name, expected in WALK.items():
        d = (g.phase[name] - expected + 0.5) % 1.0 - 0.5
        assert abs(d) < 0.02, (name, g.phase[name])
    assert g.n_strides >= 4 * 10  # 12 strides per limb, minus the cut ends


def test_noisy_walker_still_recovered(rng: np.random.Generator) -> None:
    """Marker noise of 0.05 mm (a quarter of the 0.2 mm resolution, common practice)."""
    m = synthetic_walker(phases=WALK, duty=0.7, noise_m=5e-5, rng=rng)
    g = _params(m)
    assert_allclose(g.stride_frequency_hz, 4.0, rtol=0.01)
    assert abs(g.duty_factor - 0.7) < 0.04  # noise moves events by a frame or two
    assert_allclose(g.stride_length_m, 0.05, rtol=0.02)


@pytest.mark.parametrize(
    ("phases", "duty", "expected_lag", "walking"),
    [
        # Hildebrand (1965, 1976; from memory): lateral-sequence walk lags ~25 %,
        # trot ~50 %; duty factor > 0.5 is a walk, < 0.5 a run.
        (WALK, 0.75, 0.25, True),
        (TROT, 0.4, 0.5, False),
    ],
)
def test_hildebrand_point(phases, duty, expected_lag, walking) -> None:
    g = _params(synthetic_walker(phases=phases, duty=duty))
    hind_duty, lag = g.hildebrand
    assert abs(lag - expected_lag) < 0.02
    assert (hind_duty > 0.5) is walking
    assert abs(hind_duty - duty) < 0.03


def test_gap_splits_strides() -> None:
    """A stride may not span unfilled frames: the gap removes the strides it cuts."""
    m = synthetic_walker(phases=WALK, duty=0.7)
    full = _params(m).limbs["LH"].start.size
    m[400:460, FEET["LH"]] = np.nan
    g = _params(m).limbs["LH"]
    assert g.start.size < full
    assert not np.any((g.start < 460) & (g.stop >= 400))


def test_treadmill_stride_length() -> None:
    """On a belt the foot plants move backward; stride length = belt speed / frequency."""
    m = synthetic_walker(phases=WALK, duty=0.7)
    origin = 0.5 * (m[:, 0] + m[:, 1])
    drift = origin - origin[:1]
    belt = m - drift[:, None, :]  # body held in place, ground moving back
    g = _params(belt, treadmill_speed_m_s=0.2)
    assert_allclose(g.stride_length_m, 0.05, rtol=1e-6)
    assert_allclose(g.stride_frequency_hz, 4.0, rtol=1e-3)


def test_foot_contacts_flat_foot_has_no_events() -> None:
    c = foot_contacts(np.full(100, 0.01), frame_rate_hz=FS)
    assert c.touchdown.size == 0 and c.liftoff.size == 0


def test_foot_contacts_rejects_bad_thresholds() -> None:
    with pytest.raises(InvalidParameterError):
        foot_contacts(np.zeros(10), frame_rate_hz=FS, low_fraction=0.5, high_fraction=0.4)


def test_limb_phase_and_circular_mean() -> None:
    """Phase is (t - start) / (stop - start); circular mean wraps (definition)."""
    ph = limb_phase([5, 130, 300], reference_start=[0, 100, 200], reference_stop=[100, 200, 300])
    assert_allclose(ph[:2], [0.05, 0.3])
    assert np.isnan(ph[2])  # 300 is the next stride's start, outside [200, 300)
    assert_allclose(circular_mean_phase([0.9, 0.1]), 0.0, atol=1e-12)
    assert_allclose(circular_mean_phase([0.2, 0.3]), 0.25)


def test_step_cycles_linear_signal() -> None:
    """Linear interpolation reproduces a linear ramp exactly (analytic)."""
    x = np.arange(200.0)[:, None] * np.array([1.0, -2.0])
    c = step_cycles(x, start=[10, 50], stop=[50, 130], n_samples=5)
    assert c.shape == (2, 10)
    assert_allclose(c[0, 0::2], np.linspace(10, 50, 5))
    assert_allclose(c[1, 1::2], -2 * np.linspace(50, 130, 5))


def test_cycle_classes_two_kinds_of_step() -> None:
    """Strides alternating high and low foot lift give two classes, in time order."""
    # Low steps lift 0.6 of the high ones: above the 0.4 swing threshold, so
    # every step is still detected (a lift below it would merge two stances).
    pattern = np.array([1.0, 1.0, 0.6, 1.0, 0.6, 0.6, 1.0, 0.6, 1.0, 1.0, 0.6, 0.6])
    m = synthetic_walker(phases=WALK, duty=0.7, lift_scale=pattern, lift_m=0.008)
    g = _params(m)
    lh = g.limbs["LH"]
    body = body_frame(m, anterior=0, posterior=1).markers
    cycles = step_cycles(body[:, FEET["LH"]], start=lh.start, stop=lh.stop)
    cls = cycle_classes(cycles, seed=0)
    assert cls.n_classes == 2
    first = int(np.floor(4.0 * lh.start[0] / FS + 1e-9))
    expected = pattern[first : first + lh.start.size] < 1.0
    labels = cls.labels.astype(bool)
    assert np.array_equal(labels, expected) or np.array_equal(labels, ~expected)
    assert cls.sizes.sum() == lh.start.size
    assert cls.silhouette >= 0.5


def test_cycle_classes_one_kind(rng: np.random.Generator) -> None:
    """Gaussian scatter around one mean cycle: no split reaches silhouette 0.5 -> k = 1."""
    cycles = np.sin(np.linspace(0, 2 * np.pi, 101))[None, :] + rng.normal(0, 0.05, (30, 101))
    cls = cycle_classes(cycles, seed=0)
    assert cls.n_classes == 1
    assert np.all(cls.labels == 0)
    assert_allclose(cls.within_rms_m[0], 0.05, rtol=0.1)  # sample SD of the scatter
    assert max(cls.silhouette_by_k.values()) < 0.5


def test_marker_noise_is_not_a_step(rng) -> None:
    """A planted foot with 0.2 mm noise (common practice resolution) has no contacts:
    its height range is below min_lift_m (5 x resolution)."""
    c = foot_contacts(0.001 + rng.normal(0, 2e-4, 900), frame_rate_hz=FS)
    assert c.touchdown.size == 0


def _true_touchdowns(stance):
    return [np.flatnonzero(stance[1:, f] & ~stance[:-1, f]) + 1 for f in range(stance.shape[1])]


@pytest.mark.parametrize("tray", ["tray-e-coarse-scree", "tray-f-boulders", "treadmill-belt"])
def test_speed_contacts_recover_known_stance_on_rough_ground(tray):
    # Known-parameter check: the demo walker logs its true stance phases. On
    # scree a planted foot sits on stones higher than its swing clearance, so
    # height thresholds miss strides; ground speed (relative to the belt on a
    # treadmill) does not depend on the ground's height.
    from demo_arena import FEET, MARKERS, SUBJECTS, TRAYS, make_tray, walk_over
    from measures import preprocess_trial

    spec = next(t for t in TRAYS if t.key == tray)
    belt = 0.25 if spec.kind == "treadmill" else None
    z = make_tray(spec, seed=7)
    rec = walk_over(z, 0.001, SUBJECTS[1], duration_s=6, seed=3, treadmill_speed_m_s=belt)
    pre = preprocess_trial(rec.markers, frame_rate_hz=300)
    feet = {f: MARKERS.index(f"foot_{f}") for f in FEET}
    kw = dict(frame_rate_hz=300, feet=feet, anterior=0, posterior=3, treadmill_speed_m_s=belt)
    by_speed = gait_parameters(pre.markers, contact_method="speed", **kw)
    by_height = gait_parameters(pre.markers, contact_method="height", **kw)
    true_duty = rec.stance.mean()
    tds = _true_touchdowns(rec.stance)
    true_freq = np.mean([(len(t) - 1) / ((t[-1] - t[0]) / 300) for t in tds])
    assert abs(by_speed.duty_factor - true_duty) < 0.03
    assert by_speed.stride_frequency_hz == pytest.approx(true_freq, rel=0.08)
    assert abs(by_speed.duty_factor - true_duty) <= abs(by_height.duty_factor - true_duty) + 0.01
