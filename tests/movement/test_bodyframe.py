"""Tests for measures.movement.bodyframe: invariances (hypothesis) and closed-form cases."""

from __future__ import annotations

import numpy as np
import pytest
from _testing import assert_allclose
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.spatial.transform import Rotation

from measures import InvalidParameterError, body_frame

# Rigid motions are applied in float64; body coordinates of ~0.1-1 m trials then
# agree to ~1e-12 m, so atol 1e-9 m leaves room for the rotation's round-off.
ATOL = 1e-9


def _trial(seed: int, n_frames: int = 6, n_markers: int = 5) -> np.ndarray:
    rng = np.random.default_rng(seed)
    x = rng.uniform(-0.5, 0.5, (n_frames, n_markers, 3))
    # Anterior (0) ahead of posterior (1) by at least 2 cm horizontally.
    x[:, 0, :2] = x[:, 1, :2] + rng.uniform(0.02, 0.1, (n_frames, 1)) * np.array([1.0, 0.3])
    return x


@settings(max_examples=40, deadline=None)
@given(
    seed=st.integers(0, 2**31),
    angle=st.floats(-np.pi, np.pi),
    shift=st.tuples(*[st.floats(-10, 10)] * 3),
)
def test_invariant_to_rotation_about_vertical_and_translation(seed, angle, shift) -> None:
    """Property: body coordinates do not change under a rigid motion that keeps up."""
    x = _trial(seed)
    rot = Rotation.from_euler("z", angle).as_matrix()
    y = x @ rot.T + np.asarray(shift)
    a = body_frame(x, anterior=0, posterior=1, frame_rate_hz=300.0)
    b = body_frame(y, anterior=0, posterior=1, frame_rate_hz=300.0)
    assert_allclose(b.markers, a.markers, atol=ATOL)
    assert_allclose(b.forward_speed_m_s, a.forward_speed_m_s, atol=1e-6)  # x 300 Hz
    dh = (b.heading_rad - a.heading_rad - angle + np.pi) % (2 * np.pi) - np.pi
    assert_allclose(dh, 0.0, atol=1e-9)
    assert_allclose(b.origin, a.origin @ rot.T + np.asarray(shift), atol=ATOL)


@settings(max_examples=30, deadline=None)
@given(seed=st.integers(0, 2**31), rotvec=st.tuples(*[st.floats(-3, 3)] * 3))
def test_invariant_to_any_rotation_with_rotated_up(seed, rotvec) -> None:
    """Property: rotating the trial and the ground normal together changes nothing."""
    x = _trial(seed)
    rot = Rotation.from_rotvec(rotvec).as_matrix()
    a = body_frame(x, anterior=0, posterior=1)
    b = body_frame(x @ rot.T, anterior=0, posterior=1, up=rot @ np.array([0.0, 0.0, 1.0]))
    assert_allclose(b.markers, a.markers, atol=ATOL)


@settings(max_examples=30, deadline=None)
@given(seed=st.integers(0, 2**31), perm_seed=st.integers(0, 2**31))
def test_permutation_of_marker_order(seed, perm_seed) -> None:
    """Property: permuting markers (and their role indices) permutes the output."""
    x = _trial(seed)
    perm = np.random.default_rng(perm_seed).permutation(x.shape[1])
    inv = np.argsort(perm)  # new position of old marker k is inv[k]
    a = body_frame(x, anterior=[0, 2], posterior=1)
    b = body_frame(x[:, perm], anterior=[inv[0], inv[2]], posterior=inv[1])
    assert_allclose(b.markers[:, inv], a.markers, atol=ATOL)


def test_closed_form_axes() -> None:
    """Nose along +y: forward is +y, left is -x (right-handed, z up)."""
    m = np.array([[[0.0, 0.1, 0.05], [0.0, -0.1, 0.05], [-0.03, 0.0, 0.0]]])
    bf = body_frame(m, anterior=0, posterior=1)
    assert_allclose(bf.heading_rad, [np.pi / 2])
    assert_allclose(bf.markers[0, 2], [0.0, 0.03, -0.05], atol=1e-15)


def test_forward_speed_overground_and_treadmill() -> None:
    """Constant 0.3 m/s walk: speed 0.3; on a 0.25 m/s belt with 0.05 m/s drift: 0.3."""
    t = np.arange(100) / 100.0
    path = np.stack([0.3 * t, 0 * t, 0 * t], 1)
    m = np.stack([path + np.array([0.05, 0, 0.02]), path - np.array([0.05, 0, -0.02])], 1)
    assert_allclose(
        body_frame(m, anterior=0, posterior=1, frame_rate_hz=100.0).forward_speed_m_s, 0.3
    )
    drift = m * np.array([1 / 6, 1, 1])  # 0.05 m/s along x in the lab
    drift[:, 0, 0] += 0.05 - 0.05 / 6
    drift[:, 1, 0] += -0.05 + 0.05 / 6
    bf = body_frame(drift, anterior=0, posterior=1, frame_rate_hz=100.0, treadmill_speed_m_s=0.25)
    assert_allclose(bf.forward_speed_m_s, 0.3)
    assert bf.mean_speed_m_s == pytest.approx(0.3)


def test_missing_reference_and_vertical_axis_give_nan() -> None:
    m = np.zeros((3, 2, 3))
    m[:, 0, 0] = 0.1
    m[1, 0] = np.nan
    m[2, 0] = [0.0, 0.0, 0.1]  # anterior straight above posterior: heading undefined
    bf = body_frame(m, anterior=0, posterior=1)
    assert np.isfinite(bf.markers[0]).all()
    assert np.isnan(bf.markers[1:]).all() and np.isnan(bf.heading_rad[1:]).all()


def test_bad_arguments() -> None:
    m = np.zeros((3, 2, 3))
    with pytest.raises(InvalidParameterError):
        body_frame(m, anterior=5, posterior=1)
    with pytest.raises(InvalidParameterError):
        body_frame(m, anterior=0, posterior=1, up=(0, 0, 0))
