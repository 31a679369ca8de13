"""Tests for measures.movement.summary: the whole movement summary on a synthetic walker.

The walker is the analytic one of tests/test_gait.py (known stride frequency,
duty factor, phases); the checks below are what must hold whatever the
estimators inside: recovered gait values, invariances (rigid motion about the
vertical, marker order), the periodic-signal RQA limit, the one-class entropy
rate, and the bounded RQA cost.
"""

from __future__ import annotations

import re

import numpy as np
import pytest
from _testing import assert_allclose
from scipy.spatial.transform import Rotation
from test_gait import FEET, FS, TROT, WALK, synthetic_walker

from measures import MOVEMENT_DEFAULTS, InvalidParameterError, movement_summary

NAMES = ["nose", "tail", "lf", "rf", "lh", "rh"]
ROLES = {"anterior": "nose", "posterior": "tail", "feet": {k: NAMES[v] for k, v in FEET.items()}}
# A fixed cut-off makes preprocessing linear, hence exactly equivariant under
# rigid motions (residual analysis is per axis and would not be).
FIXED = {"cutoff_hz": 30.0}


def _summary(markers, names=NAMES, roles=ROLES, **params):
    return movement_summary(
        markers, frame_rate_hz=FS, marker_names=names, roles=roles, params=params or None
    )


@pytest.fixture(scope="module")
def walk_summary():
    return _summary(synthetic_walker(phases=WALK, duty=0.7), **FIXED)


def test_gait_scores_recovered(walk_summary) -> None:
    s = walk_summary
    assert_allclose(s.score("stride_frequency_hz"), 4.0, rtol=1e-2)  # by construction
    assert abs(s.score("duty_factor") - 0.7) < 0.03  # contact refinement, see test_gait
    assert_allclose(s.score("speed_m_s"), 0.2, rtol=1e-3)
    assert_allclose(s.score("stride_length_m"), 0.05, rtol=1e-2)
    # Hildebrand (1965/1976, from memory): lateral-sequence walk, fore lags hind ~25 %.
    assert abs(s.score("hildebrand_fore_hind_phase") - 0.25) < 0.02
    assert s.score("valid_fraction") == 1.0


def test_score_records_are_well_formed(walk_summary) -> None:
    names = [sc.name for sc in walk_summary.scores]
    assert len(names) == len(set(names))
    assert all(re.fullmatch(r"[a-z][a-z0-9_]*", n) for n in names)
    for needed in (
        "stride_frequency_hz", "duty_factor", "speed_m_s", "rqa_det", "rqa_lam",
        "entropy_rate_bits", "permutation_entropy", "js_complexity",
        "statistical_complexity_bits", "step_class_entropy_rate_bits", "sample_entropy",
    ):  # fmt: skip
        assert needed in names
    assert all(sc.unit for sc in walk_summary.scores)
    assert set(walk_summary.params) == set(MOVEMENT_DEFAULTS)


def test_periodic_walker_is_deterministic(walk_summary) -> None:
    """Marwan et al. (2007) / CHECKS D4: a periodic orbit's recurrences lie on
    diagonal lines, so DET -> 1; a noise-free walker is strictly periodic."""
    assert walk_summary.score("rqa_det") > 0.95
    assert 0 <= walk_summary.score("permutation_entropy") < 1


def test_one_step_class_has_zero_class_entropy(walk_summary) -> None:
    """Identical strides form one class; a constant sequence has entropy rate 0
    (Crutchfield & Feldman 2003, definition of h_mu)."""
    assert walk_summary.score("step_classes_n") == 1
    assert walk_summary.score("step_class_entropy_rate_bits") == 0.0
    assert np.all(walk_summary.class_sequence == 0)


# QC scores estimated per arena axis (residual-analysis intercept) legitimately
# change when the trial is rotated; every other score is a body-frame or
# height-relative quantity and must not.
PER_AXIS_QC = {"noise_floor_m"}
# Scores of the whole-body state go through an eigendecomposition, so rotating
# the trial changes them at round-off; on a strictly periodic walker many pair
# distances tie at the recurrence threshold and round-off moves a few pairs
# across it (RR 0.05 +- 3e-6, ENTR +- 0.3 %). Counting scores get 1 %.
STATE_PREFIXES = ("rqa_", "interlimb_", "permutation", "js_", "entropy_rate", "lz76", "sample_")


def test_invariant_to_rigid_motion_about_vertical(walk_summary) -> None:
    """Property: rotating about the vertical and translating changes no score."""
    m = synthetic_walker(phases=WALK, duty=0.7)
    rot = Rotation.from_euler("z", -2.3).as_matrix()
    moved = _summary(m @ rot.T + np.array([3.0, -1.0, 0.2]), **FIXED)
    for a, b in zip(walk_summary.scores, moved.scores, strict=True):
        assert a.name == b.name
        if a.name in PER_AXIS_QC:
            continue
        loose = a.name.startswith(STATE_PREFIXES) or a.surrogate_z is not None
        tol = {"rtol": 1e-2, "atol": 1e-3} if loose else {"rtol": 1e-6, "atol": 1e-9}
        assert_allclose(b.value, a.value, err_msg=a.name, **tol)


def test_invariant_to_marker_order(walk_summary) -> None:
    m = synthetic_walker(phases=WALK, duty=0.7)
    perm = [3, 0, 5, 1, 4, 2]
    out = _summary(m[:, perm], names=[NAMES[i] for i in perm], **FIXED)
    for a, b in zip(walk_summary.scores, out.scores, strict=True):
        assert_allclose(b.value, a.value, rtol=1e-9, atol=1e-12, err_msg=a.name)


def test_trot_lands_at_half_phase() -> None:
    """Hildebrand (1965/1976, from memory): trot ~ 50 % fore-hind lag, duty < 0.5 running."""
    s = _summary(synthetic_walker(phases=TROT, duty=0.4, duration_s=1.5), **FIXED)
    assert abs(s.score("hildebrand_fore_hind_phase") - 0.5) < 0.02
    assert s.score("hildebrand_hind_duty_factor") < 0.5


def test_rqa_cost_is_bounded(walk_summary) -> None:
    """With more samples than rqa_max_points the RQA input is decimated below it;
    line lengths are reported in seconds, so the longest diagonal line (about the
    trial length for a periodic orbit, Marwan et al. 2007) keeps its value."""
    s = _summary(synthetic_walker(phases=WALK, duty=0.7), rqa_max_points=300, **FIXED)
    assert s.score("rqa_points") <= 300 < walk_summary.score("rqa_points")
    assert_allclose(s.score("rqa_l_max_s"), walk_summary.score("rqa_l_max_s"), rtol=0.02)
    assert_allclose(s.score("rqa_rr"), 0.05, rtol=0.05)  # the requested rate


def test_unknown_parameter_rejected() -> None:
    m = synthetic_walker(phases=WALK, duty=0.7, duration_s=1.0)
    with pytest.raises(InvalidParameterError, match="params"):
        _summary(m, no_such_option=1)
    with pytest.raises(InvalidParameterError, match="roles"):
        _summary(m, roles={"anterior": "nose", "posterior": "nope", "feet": ROLES["feet"]})


def test_trial_without_gait_gives_nan_not_errors(walk_summary, rng) -> None:
    """Markers that never step: every score is present, unsupported ones are NaN
    (never 0), and the noise floor matches the injected 0.2 mm noise (common
    practice resolution; residual analysis, Winter 2009 ch. 3)."""
    still = np.tile(
        np.array([[0.04, 0, 0.03], [-0.04, 0, 0.03]] + [[0.0, 0.0, 0.001]] * 4), (600, 1, 1)
    )
    noisy = still + rng.normal(0.0, 2e-4, still.shape)
    s = _summary(noisy)
    assert [sc.name for sc in s.scores] == [sc.name for sc in walk_summary.scores]
    assert np.isnan(s.score("stride_frequency_hz")) and np.isnan(s.score("duty_factor"))
    # CHECKS I2 allows 10 %; 5 % more for the median over 18 short axes.
    assert_allclose(s.score("noise_floor_m"), 2e-4, rtol=0.15)
