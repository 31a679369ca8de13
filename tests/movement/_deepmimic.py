"""3D joint positions of the DeepMimic humanoid clips shipped in the pybullet wheel.

Real retargeted human motion capture (``pybullet_data/data/motions``), 30 Hz,
Y up. Each frame holds the frame duration, the root position, the root
quaternion and per-joint rotations (quaternions w, x, y, z; knees and elbows
one angle about z), in the order chest, neck, right hip, knee, ankle,
shoulder, elbow, left hip, knee, ankle, shoulder, elbow. Forward kinematics
uses the joint offsets of ``pybullet_data/humanoid/humanoid.urdf`` scaled by
0.25 (the scale at which the clips are played back). The loop is tiled with
the root displacement of one loop added per repeat; the root motion gives
the truth: one loop is one stride.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
from scipy.interpolate import CubicSpline
from scipy.spatial.transform import Rotation

SCALE = 0.25
# Offsets (URDF units) of each joint in its parent's frame.
HIP = {"right": np.array([0.0, 0.0, 0.339548]), "left": np.array([0.0, 0.0, -0.339548])}
KNEE = np.array([0.0, -1.686184, 0.0])
ANKLE = np.array([0.0, -1.639480, 0.0])
FOOT = np.array([0.18, -0.09, 0.0])  # centre of the foot box in the ankle frame
CHEST = np.array([0.0, 0.944604, 0.0])
NECK = np.array([0.0, 0.895576, 0.0])
MARKERS = ("neck", "pelvis", "foot_L", "foot_R")
ROLES = {"anterior": "neck", "posterior": "pelvis", "feet": {"L": "foot_L", "R": "foot_R"}}


def _quat(q: np.ndarray) -> Rotation:
    return Rotation.from_quat(np.column_stack([q[:, 1], q[:, 2], q[:, 3], q[:, 0]]))


def _path(name: str) -> Path:
    import pybullet_data

    return Path(pybullet_data.getDataPath()) / "data" / "motions" / f"humanoid3d_{name}.txt"


def clip(name: str, *, loops: int = 12) -> tuple[np.ndarray, float, float, float]:
    """(markers (n, 4, 3) in metres, frame rate, stride frequency truth, speed truth)."""
    frames = np.array(json.loads(_path(name).read_text())["Frames"], dtype=float)
    dt = float(frames[0, 0])
    shift = frames[-1, 1:4] - frames[0, 1:4]
    one = frames[:-1]  # the last frame repeats the first, displaced
    tiled = np.concatenate([one + np.r_[0, shift, np.zeros(40)] * c for c in range(loops)])
    root = tiled[:, 1:4]
    r_root = _quat(tiled[:, 4:8])
    chest = root + r_root.apply(CHEST * SCALE)
    r_chest = r_root * _quat(tiled[:, 8:12])
    neck = chest + r_chest.apply(NECK * SCALE)
    feet = {}
    for side, base in (("right", 16), ("left", 30)):
        hip = root + r_root.apply(HIP[side] * SCALE)
        r_hip = r_root * _quat(tiled[:, base : base + 4])
        knee = hip + r_hip.apply(KNEE * SCALE)
        r_knee = r_hip * Rotation.from_rotvec(np.outer(tiled[:, base + 4], [0, 0, 1]))
        ankle = knee + r_knee.apply(ANKLE * SCALE)
        r_ankle = r_knee * _quat(tiled[:, base + 5 : base + 9])
        feet[side] = ankle + r_ankle.apply(FOOT * SCALE)
    markers = np.stack([neck, root, feet["left"], feet["right"]], axis=1)
    period = one.shape[0] * dt
    return markers, 1.0 / dt, 1.0 / period, float(np.linalg.norm(shift[[0, 2]]) / period)


def resample(markers: np.ndarray, rate_hz: float, new_rate_hz: float) -> np.ndarray:
    """Cubic-spline resampling of every coordinate to another frame rate."""
    t = np.arange(markers.shape[0]) / rate_hz
    new_t = np.arange(0.0, t[-1], 1.0 / new_rate_hz)
    return CubicSpline(t, markers, axis=0)(new_t)
