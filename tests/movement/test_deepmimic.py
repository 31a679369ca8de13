"""Real data: the DeepMimic walk and run clips shipped in the pybullet wheel.

Source: ``pybullet_data/data/motions/humanoid3d_{walk,run}.txt`` (retargeted
human motion capture, 30 Hz, Y up), joint positions by forward kinematics of
``pybullet_data/humanoid/humanoid.urdf`` (tests/movement/_deepmimic.py). Truth
from the root motion: one loop is one stride (stride frequency = 1 / loop
duration: walk 0.790 Hz, run 1.250 Hz) and the root's displacement per loop
gives the speed (walk 0.978 m/s, run 3.557 m/s). Expected (issue on real lab
data): stride frequency within 3 % of the truth at 30 Hz and resampled to
60-250 Hz, valid fraction >= 0.95, an upright two-footed body handled.
"""

from __future__ import annotations

import numpy as np
import pytest
from _deepmimic import MARKERS, ROLES, clip, resample

from measures import movement_summary

pytestmark = pytest.mark.slow  # forward kinematics and eight summaries: ~1 min loaded

PARAMS = {"up_axis": "y", "n_surrogates": 2}


@pytest.mark.parametrize("name", ["walk", "run"])
@pytest.mark.parametrize("rate", [30.0, 60.0, 120.0, 250.0])
def test_stride_frequency_and_speed_from_root_motion(name, rate) -> None:
    markers, fs, f_true, v_true = clip(name)
    if rate != 30.0:
        markers = resample(markers, fs, rate)
    s = movement_summary(
        markers, frame_rate_hz=rate, marker_names=list(MARKERS), roles=ROLES, params=PARAMS
    )
    assert abs(s.score("stride_frequency_hz") / f_true - 1) <= 0.03
    assert abs(s.score("speed_m_s") / v_true - 1) <= 0.03
    assert s.score("valid_fraction") >= 0.95
    assert s.score("spike_flagged_fraction") <= 0.02 and not s.warnings
    assert np.isnan(s.score("hildebrand_hind_duty_factor"))  # two feet: NaN with a note
    assert "2 feet" in s.note("hildebrand_hind_duty_factor")


def test_walk_and_run_separate() -> None:
    # Duty factor: walking keeps each foot on the ground for more than half
    # the stride, running for less (common practice; Alexander 1984, from
    # memory). The foot-centre point used here rolls during heel-off, which
    # shortens the measured stance (walk 0.50, run 0.33), so the check is the
    # ordering with a margin.
    duty = {}
    for name in ("walk", "run"):
        markers, fs, _, _ = clip(name)
        s = movement_summary(
            markers, frame_rate_hz=fs, marker_names=list(MARKERS), roles=ROLES, params=PARAMS
        )
        duty[name] = s.score("duty_factor")
    assert duty["run"] < duty["walk"] - 0.1
