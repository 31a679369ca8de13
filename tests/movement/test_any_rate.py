"""Preprocessing and gait at any capture rate and body plan (30-1,000 Hz; 2, 4, 6 feet).

References: analytic walkers of tests/movement/test_gait.py (known stride
frequency, stance timing, speed); Winter (2009) ch. 3 for residual analysis;
scipy's filtfilt as the reference of the FFT cut-off search.
"""

from __future__ import annotations

import itertools

import numpy as np
import pytest
from _testing import assert_allclose
from test_gait import FEET, FS, WALK, synthetic_walker

from measures import (
    body_frame,
    check_up_axis,
    detect_spikes,
    foot_contacts_from_speed,
    movement_summary,
    preprocess_trial,
    residual_analysis,
    spike_window_frames,
)

NAMES = ["nose", "tail", "lf", "rf", "lh", "rh"]
ROLES = {"anterior": "nose", "posterior": "tail", "feet": {k: NAMES[v] for k, v in FEET.items()}}
QUICK = {"n_surrogates": 2, "cutoff_hz": 30.0}


def _fast_walker(rate_hz: float, rng, seconds: float = 6.0) -> np.ndarray:
    """A human-scale walk (1 Hz strides, 1.2 m/s, 10 cm foot lift) sampled at rate_hz."""
    m = synthetic_walker(
        phases=WALK, duty=0.6, stride_hz=1.0, speed=1.2, duration_s=seconds, lift_m=0.1
    )
    step = FS / rate_hz
    keep = np.round(np.arange(0, m.shape[0] - 1, step)).astype(int)
    return m[keep] + rng.normal(0.0, 2e-4, m[keep].shape)


def test_spike_window_scales_with_rate() -> None:
    assert [spike_window_frames(f) for f in (30.0, 60.0, 300.0, 1000.0)] == [3, 3, 5, 17]


@pytest.mark.parametrize("rate", [30.0, 60.0, 150.0, 300.0])
def test_fast_motion_is_not_a_spike(rate, rng) -> None:
    # A smooth walk has no spikes: at 30 Hz a noise-only scale (0.2 mm floor)
    # flagged most swing frames; the motion-scaled detector flags none.
    m = _fast_walker(rate, rng)
    pre = preprocess_trial(m, frame_rate_hz=rate, cutoff_hz=min(6.0, rate / 4))
    assert pre.flagged_fraction < 0.01 and not pre.warnings
    assert pre.valid_fraction >= 0.95
    if rate == 30.0:
        old = detect_spikes(m, window_samples=5, motion_scaled=False)
        flagged = np.unique(np.concatenate(old.spike_frames)).size / m.shape[0]
        assert flagged > 0.1  # the failure the motion scale removes


@pytest.mark.parametrize("rate", [30.0, 300.0])
def test_injected_spikes_are_found(rate, rng) -> None:
    m = _fast_walker(rate, rng)
    frames = np.array([20, 70, 130])
    m[frames, 2, 1] += 0.08  # 8 cm one-frame excursions of one foot marker
    found = detect_spikes(m, window_samples=spike_window_frames(rate)).spike_frames[2]
    assert set(frames) <= set(found.tolist())


def test_flagged_fraction_warns(rng) -> None:
    m = _fast_walker(300.0, rng)
    bad = rng.choice(m.shape[0], size=m.shape[0] // 20, replace=False)
    m[bad, 3, 0] += 0.1
    pre = preprocess_trial(m, frame_rate_hz=300.0, cutoff_hz=6.0)
    assert pre.flagged_fraction > 0.02 and "flagged" in pre.warnings[0]


def test_fft_cutoff_search_matches_filtfilt(rng) -> None:
    # Reference: the filtfilt loop (one zero-lag filter per candidate).
    t = np.arange(2400) / 300.0
    cols = []
    for f in rng.uniform(0.8, 8.0, 9):
        cols.append(0.01 * np.sin(2 * np.pi * f * t + rng.uniform(0, 6)) + 0.3 * t)
    x = np.column_stack(cols) + rng.normal(0.0, 2e-4, (t.size, 9))
    segs = ((0, 1300), (1400, 2400))
    fast = residual_analysis(x, frame_rate_hz=300.0, segments=segs)
    ref = residual_analysis(x, frame_rate_hz=300.0, segments=segs, method="filtfilt")
    step = fast.candidates_hz[1] - fast.candidates_hz[0]
    assert np.all(np.abs(fast.cutoff_hz - ref.cutoff_hz) <= step + 1e-9)
    assert_allclose(fast.intercept, ref.intercept, rtol=0.05)  # noise RMS within 5 %
    assert_allclose(fast.residual[40:], ref.residual[40:], rtol=0.05)


def test_upright_heading_from_travel(rng) -> None:
    # An upright biped: neck 0.5 m above the pelvis, leaning +-0.1 m side to side
    # at the step frequency while walking straight along 0.3 rad.
    t = np.arange(1200) / 120.0
    d = np.array([np.cos(0.3), np.sin(0.3), 0.0])
    side = np.array([-np.sin(0.3), np.cos(0.3), 0.0])
    pelvis = 1.2 * t[:, None] * d + 0.02 * np.sin(2 * np.pi * t)[:, None] * side
    pelvis[:, 2] = 1.0
    neck = pelvis + 0.1 * np.sin(2 * np.pi * t)[:, None] * side + 0.05 * d + [0, 0, 0.5]
    m = np.stack([neck, pelvis], axis=1) + rng.normal(0, 2e-4, (t.size, 2, 3))
    axis = body_frame(m, anterior=0, posterior=1, frame_rate_hz=120.0)
    auto = body_frame(m, anterior=0, posterior=1, frame_rate_hz=120.0, heading="auto")
    inner = slice(120, -120)
    assert np.ptp(axis.heading_rad[inner]) > np.deg2rad(40)  # the failure
    assert auto.heading_source == "velocity"
    assert np.abs(auto.heading_rad[inner] - 0.3).max() < np.deg2rad(2)


def test_up_axis_checked_against_the_data() -> None:
    m = synthetic_walker(phases=WALK, duty=0.7)
    feet, body = list(FEET.values()), [0, 1]
    assert check_up_axis(m, feet=feet, body=body, frame_rate_hz=FS).best == "+z"
    y_up = m[:, :, [0, 2, 1]]
    check = check_up_axis(y_up, feet=feet, body=body, frame_rate_hz=FS)
    assert check.best == "+y" and not check.agrees
    wrong = movement_summary(y_up, frame_rate_hz=FS, marker_names=NAMES, roles=ROLES,
                             params=QUICK)  # fmt: skip
    assert any("up axis" in w for w in wrong.warnings)
    right = movement_summary(y_up, frame_rate_hz=FS, marker_names=NAMES, roles=ROLES,
                             params=QUICK | {"up_axis": "y"})  # fmt: skip
    assert not right.warnings and right.score("up_axis_agrees") == 1.0
    assert_allclose(right.score("speed_m_s"), 0.2, rtol=1e-3)  # walker speed by construction


def _skating(m: np.ndarray) -> np.ndarray:
    """Each planted foot slides 6 mm forward over 4 frames (0.45 m/s) 6 frames after
    touch-down, keeps the offset through stance and loses it smoothly over the swing."""
    out = m.copy()
    v = np.diff(m[:, 0, :2], axis=0).mean(axis=0)
    fwd = v / np.linalg.norm(v)
    for k in FEET.values():
        planted = m[:, k, 2] <= 0.001 + 1e-12
        tds = np.flatnonzero(planted[1:] & ~planted[:-1]) + 1
        los = np.flatnonzero(~planted[1:] & planted[:-1]) + 1
        offset = np.zeros(m.shape[0])
        for td, nxt in itertools.pairwise(tds):
            lo = los[(los > td) & (los < nxt)][0]
            offset[td:lo] = 0.006 * np.clip((np.arange(lo - td) - 6) / 4, 0, 1)
            offset[lo:nxt] = 0.006 * (1 - np.arange(nxt - lo) / (nxt - lo))
        out[:, k, :2] += offset[:, None] * fwd
    return out


def test_touchdown_skate_does_not_split_strides() -> None:
    m = _skating(synthetic_walker(phases=WALK, duty=0.7))
    s = movement_summary(m, frame_rate_hz=FS, marker_names=NAMES, roles=ROLES, params=QUICK)
    assert_allclose(s.score("stride_frequency_hz"), 4.0, rtol=0.01)  # by construction
    speed = np.linalg.norm(np.gradient(s.preprocessed.markers[:, 4, :2], axis=0), axis=1) * FS
    split = foot_contacts_from_speed(speed, frame_rate_hz=FS, min_swing_fraction=0.0)
    merged = foot_contacts_from_speed(speed, frame_rate_hz=FS)
    assert split.touchdown.size > merged.touchdown.size  # the skate would split strides


def _all_nan_have_notes(summary) -> None:
    missing = [s.name for s in summary.scores if not np.isfinite(s.value) and not s.note]
    assert not missing, missing


def test_short_trials_name_the_cause() -> None:
    m = synthetic_walker(phases=WALK, duty=0.7, duration_s=1.0)
    tiny = movement_summary(m[:25], frame_rate_hz=FS, marker_names=NAMES, roles=ROLES,
                            params=QUICK)  # fmt: skip
    assert np.isnan(tiny.score("stride_frequency_hz"))
    assert "25 frames" in tiny.note("stride_frequency_hz")
    _all_nan_have_notes(tiny)
    one = movement_summary(m[:60], frame_rate_hz=FS, marker_names=NAMES, roles=ROLES,
                           params=QUICK)  # fmt: skip
    assert np.isnan(one.score("stride_frequency_hz"))
    assert "two touch-downs of the same foot" in one.note("stride_frequency_hz")
    _all_nan_have_notes(one)


@pytest.mark.parametrize("n_feet", [2, 6])
def test_body_plans_other_than_four_feet(n_feet) -> None:
    m = synthetic_walker(phases=WALK, duty=0.7, duration_s=2.0)
    if n_feet == 2:
        names, feet = NAMES, {"L": "lh", "R": "rh"}
    else:  # a hexapod: a middle pair placed between fore and hind feet
        mid = 0.5 * (m[:, [2, 3]] + m[:, [4, 5]])
        m = np.concatenate([m, mid], axis=1)
        names = [*NAMES, "lm", "rm"]
        feet = {"L1": "lf", "R1": "rf", "L2": "lm", "R2": "rm", "L3": "lh", "R3": "rh"}
    roles = {"anterior": "nose", "posterior": "tail", "feet": feet}
    s = movement_summary(m, frame_rate_hz=FS, marker_names=names, roles=roles, params=QUICK)
    assert_allclose(s.score("stride_frequency_hz"), 4.0, rtol=0.01)
    assert np.isnan(s.score("hildebrand_hind_duty_factor"))
    assert f"{n_feet} feet" in s.note("hildebrand_hind_duty_factor")
    _all_nan_have_notes(s)
