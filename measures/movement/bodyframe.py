"""Animal-centric (body) frame from a marker set.

Per frame: the origin is the midpoint of the anterior and posterior reference
points (each the centroid of one or more markers); the vertical is gravity's
opposite (``up``, +z by default) or a given ground normal; the heading is the
posterior-to-anterior vector projected on the ground plane. Axes: x forward
(heading), y to the animal's left (up x forward), z up. Body-frame
coordinates are therefore invariant to any rigid translation of the trial
and to any rotation about the vertical, and do not depend on marker order.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import cast

import numpy as np
from numpy.typing import ArrayLike, NDArray

from measures._validation import (
    InvalidParameterError,
    as_float_array,
    check_choice,
    check_positive_float,
)

__all__ = ["AXIS_VECTORS", "BodyFrame", "UpAxisCheck", "body_frame", "check_up_axis"]

# Heading is undefined when the anterior-posterior vector is (nearly) vertical;
# relative to body length this fraction is treated as degenerate.
_MIN_HORIZONTAL_FRACTION = 1e-6
#: With heading="auto", the body axis is used when its horizontal part is at
#: least this fraction of its length (an axis within 60 degrees of vertical
#: is an upright body: a biped's neck-pelvis axis; our choice).
_AUTO_HORIZONTAL_FRACTION = 0.5
_HEADINGS = ("axis", "velocity", "auto")

#: Signed arena axes by name.
AXIS_VECTORS = {
    name: sign * np.eye(3)[i]
    for i, axis in enumerate("xyz")
    for name, sign in ((axis, 1.0), ("+" + axis, 1.0), ("-" + axis, -1.0))
}


@dataclass(frozen=True)
class BodyFrame:
    """Result of :func:`body_frame`.

    Attributes
    ----------
    markers : ndarray (n_frames, n_markers, 3)
        Marker positions in the body frame (x forward, y left, z up), metres.
    origin : ndarray (n_frames, 3)
        Body-frame origin in the arena frame (kept for mapping onto terrain).
    heading_rad : ndarray (n_frames,)
        Heading angle in the ground plane, unwrapped, measured from the
        ground-plane axis ``ground_axes[0]`` towards ``ground_axes[1]``.
    forward : ndarray (n_frames, 3)
        Unit heading vector in the arena frame.
    forward_speed_m_s : ndarray (n_frames,)
        Speed along the heading relative to the ground (belt speed plus the
        residual drift on a treadmill).
    up : ndarray (3,)
        Unit vertical used.
    ground_axes : ndarray (2, 3)
        Orthonormal basis of the ground plane in the arena frame.
    treadmill_speed_m_s : float or None
    """

    markers: NDArray[np.float64]
    origin: NDArray[np.float64]
    heading_rad: NDArray[np.float64]
    forward: NDArray[np.float64]
    forward_speed_m_s: NDArray[np.float64]
    up: NDArray[np.float64]
    ground_axes: NDArray[np.float64]
    treadmill_speed_m_s: float | None
    heading_source: str = "axis"

    @property
    def mean_speed_m_s(self) -> float:
        """Mean forward speed over finite frames (NaN when none)."""
        v = self.forward_speed_m_s[np.isfinite(self.forward_speed_m_s)]
        return float(v.mean()) if v.size else float("nan")


def _indices(value: int | Sequence[int], name: str, n_markers: int) -> NDArray[np.intp]:
    idx = np.atleast_1d(np.asarray(value))
    if idx.ndim != 1 or idx.size == 0 or not np.issubdtype(idx.dtype, np.integer):
        raise InvalidParameterError(name, "body_frame", "a marker index or list of indices", value)
    if (idx < 0).any() or (idx >= n_markers).any():
        raise InvalidParameterError(name, "body_frame", f"indices in [0, {n_markers})", value)
    return idx.astype(np.intp)


def _ground_axes(up: NDArray[np.float64]) -> NDArray[np.float64]:
    # Project the arena x axis (or y when x is nearly vertical) on the plane.
    seed = np.eye(3)[0] if abs(up[0]) < 0.9 else np.eye(3)[1]
    e1 = seed - (seed @ up) * up
    e1 /= np.linalg.norm(e1)
    return np.stack([e1, np.cross(up, e1)])


def body_frame(
    markers: ArrayLike,
    *,
    anterior: int | Sequence[int],
    posterior: int | Sequence[int],
    up: ArrayLike = (0.0, 0.0, 1.0),
    frame_rate_hz: float | None = None,
    treadmill_speed_m_s: float | None = None,
    heading: str = "axis",
    heading_window_s: float = 1.0,
) -> BodyFrame:
    """Express every marker in a per-frame animal-centric frame.

    Parameters
    ----------
    markers : array (n_frames, n_markers, 3), float64, metres, NaN for gaps
    anterior, posterior : int or sequence of int
        Marker indices of the front and rear reference points (centroid).
    up : array (3,), default (0, 0, 1)
        Vertical (opposite to gravity) or the ground normal; normalised here.
    frame_rate_hz : float, optional
        Needed for the forward speed; without it the speed is NaN.
    treadmill_speed_m_s : float, optional
        Belt speed. The animal's speed relative to the ground is then the
        belt speed plus the origin's drift along the heading (positive when
        it creeps forward on the belt).

    Returns
    -------
    BodyFrame
        Frames where a reference point is missing, or where the heading is
        vertical, are NaN.

    References
    ----------
    Axis convention x forward, y left, z up, right-handed: common practice
    (ISO 8855 vehicle axes use the same directions; from memory).

    Examples
    --------
    >>> m = np.array([[[1.0, 1.0, 0.1], [0.0, 1.0, 0.1]]])  # nose at +x
    >>> bf = body_frame(m, anterior=0, posterior=1)
    >>> bf.markers[0].round(3).tolist()
    [[0.5, 0.0, 0.0], [-0.5, 0.0, 0.0]]
    """
    fn = "body_frame"
    arr = as_float_array("markers", markers, fn, ndim=3, allow_nan=True)
    if arr.shape[2] != 3:
        raise InvalidParameterError("markers", fn, "of shape (n_frames, n_markers, 3)", arr)
    ant = _indices(anterior, "anterior", arr.shape[1])
    post = _indices(posterior, "posterior", arr.shape[1])
    u = np.asarray(up, dtype=np.float64)
    if u.shape != (3,) or not np.isfinite(u).all() or np.linalg.norm(u) == 0:
        raise InvalidParameterError("up", fn, "a non-zero finite 3-vector", up)
    u = u / np.linalg.norm(u)
    check_choice("heading", heading, fn, _HEADINGS)
    front = arr[:, ant].mean(axis=1)
    rear = arr[:, post].mean(axis=1)
    origin = 0.5 * (front + rear)
    axis = front - rear
    horizontal = axis - (axis @ u)[:, None] * u
    norm = np.linalg.norm(horizontal, axis=1)
    length = np.linalg.norm(axis, axis=1)
    source = heading
    if heading == "auto":
        with np.errstate(invalid="ignore", divide="ignore"):
            frac = np.nanmedian(norm / length) if np.isfinite(norm / length).any() else 1.0
        source = (
            "axis" if frac >= _AUTO_HORIZONTAL_FRACTION or frame_rate_hz is None else "velocity"
        )
    if source == "velocity":
        if frame_rate_hz is None:
            raise InvalidParameterError("frame_rate_hz", fn, "given for heading='velocity'", None)
        fs = check_positive_float("frame_rate_hz", frame_rate_hz, fn)
        horizontal = _travel_direction(origin, u, fs, heading_window_s, fn)
        norm = np.linalg.norm(horizontal, axis=1)
        length = np.where(np.isfinite(norm), norm, np.nan)
    with np.errstate(invalid="ignore", divide="ignore"):
        bad = ~(norm > _MIN_HORIZONTAL_FRACTION * length)
        forward = horizontal / norm[:, None]
    forward[bad] = np.nan
    origin[bad] = np.nan
    left = np.cross(u, forward)
    rel = arr - origin[:, None, :]
    body = np.stack(
        [
            np.einsum("fmk,fk->fm", rel, forward),
            np.einsum("fmk,fk->fm", rel, left),
            rel @ u,
        ],
        axis=-1,
    )
    axes = _ground_axes(u)
    heading_rad = np.arctan2(forward @ axes[1], forward @ axes[0])
    ok = np.isfinite(heading_rad)
    heading_rad[ok] = np.unwrap(heading_rad[ok])
    speed = _forward_speed(origin, forward, frame_rate_hz, treadmill_speed_m_s, fn)
    belt = None if treadmill_speed_m_s is None else float(treadmill_speed_m_s)
    return BodyFrame(body, origin, heading_rad, forward, speed, u, axes, belt, source)


def _forward_speed(
    origin: NDArray[np.float64],
    forward: NDArray[np.float64],
    frame_rate_hz: float | None,
    treadmill_speed_m_s: float | None,
    fn: str,
) -> NDArray[np.float64]:
    if frame_rate_hz is None:
        return np.full(origin.shape[0], np.nan)
    fs = check_positive_float("frame_rate_hz", frame_rate_hz, fn)
    if origin.shape[0] < 2:
        return np.full(origin.shape[0], np.nan)
    # Central differences; NaN neighbours make the speed NaN there only.
    velocity = np.gradient(origin, axis=0) * fs
    drift = np.einsum("fk,fk->f", velocity, forward)
    if treadmill_speed_m_s is None:
        return drift
    belt = check_positive_float("treadmill_speed_m_s", treadmill_speed_m_s, fn, allow_zero=True)
    return belt + drift


def _travel_direction(
    origin: NDArray[np.float64], up: NDArray[np.float64], fs: float, window_s: float, fn: str
) -> NDArray[np.float64]:
    """Ground-plane velocity of the origin, moving-averaged; slow frames borrow a heading."""
    win = max(1, round(check_positive_float("heading_window_s", window_s, fn) * fs))
    n = origin.shape[0]
    vel = np.full_like(origin, np.nan)
    if n >= 2:
        vel = np.gradient(origin, axis=0)
    vel = vel - np.outer(vel @ up, up)
    # numpy's stubs type .all(axis=...) as scalar-or-array; with an axis it is an array.
    ok = cast(NDArray[np.bool_], np.isfinite(vel).all(axis=1))
    filled = np.where(ok[:, None], vel, 0.0)
    kernel = np.ones(win)
    sums = np.stack([np.convolve(filled[:, i], kernel, mode="same") for i in range(3)], axis=1)
    counts = np.convolve(ok.astype(float), kernel, mode="same")
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = sums / counts[:, None]
    mean[~ok] = np.nan
    speed = np.linalg.norm(mean, axis=1)
    finite = np.isfinite(speed)
    if not finite.any():
        return mean
    moving = finite & (speed > 0.1 * np.median(speed[finite]))
    if moving.any() and not moving.all():
        # Standing still has no direction of travel: take the nearest moving frame's.
        idx = np.flatnonzero(moving)
        frames = np.arange(n)
        pos = np.clip(np.searchsorted(idx, frames), 0, idx.size - 1)
        prev = idx[np.maximum(pos - 1, 0)]
        nxt = idx[pos]
        near = np.where(np.abs(frames - prev) <= np.abs(nxt - frames), prev, nxt)
        fill = finite & ~moving
        mean[fill] = mean[near[fill]]
    return mean


@dataclass(frozen=True)
class UpAxisCheck:
    """Result of :func:`check_up_axis`.

    Attributes
    ----------
    best : str
        Signed arena axis ("+z", "-y", ...) along which the feet are lowest
        while they are still.
    scores : dict of str to float
        Per signed axis, the median height of still feet as a fraction of the
        feet's 5-95 % height range (0: still feet at the bottom), plus 1 when
        the body reference points are not above the feet.
    agrees : bool
        Whether ``best`` is the declared up direction.
    """

    best: str
    scores: dict[str, float]
    agrees: bool


def check_up_axis(
    markers: ArrayLike,
    *,
    feet: Sequence[int],
    body: Sequence[int],
    frame_rate_hz: float,
    up: ArrayLike = (0.0, 0.0, 1.0),
) -> UpAxisCheck:
    """Which arena axis is up, judged from the data: feet lowest and still in stance.

    For each signed axis, the foot coordinate along it is expressed as a
    fraction of the foot's 5-95 % range; the still frames (foot speed below
    its 20th percentile) should sit near 0 on the true up axis (a planted foot
    is at the bottom of its excursion), near 1 on the down axis and in between
    on horizontal axes. The body markers must also be above the feet on
    average. The axis with the lowest score is ``best``.

    Parameters
    ----------
    markers : array (n_frames, n_markers, 3)
    feet, body : sequences of marker indices
    frame_rate_hz : float
    up : array (3,), default (0, 0, 1)
        The declared up direction.

    Returns
    -------
    UpAxisCheck

    References
    ----------
    Stance as the still, lowest phase of a foot's cycle is common practice
    in kinematic gait analysis.
    """
    fn = "check_up_axis"
    arr = as_float_array("markers", markers, fn, ndim=3, allow_nan=True)
    fs = check_positive_float("frame_rate_hz", frame_rate_hz, fn)
    f_idx = _indices(list(feet), "feet", arr.shape[1])
    b_idx = _indices(list(body), "body", arr.shape[1])
    declared = np.asarray(up, dtype=np.float64)
    declared = declared / np.linalg.norm(declared)
    scores: dict[str, float] = {}
    for name in ("+x", "-x", "+y", "-y", "+z", "-z"):
        axis = AXIS_VECTORS[name]
        fracs = []
        for k in f_idx:
            foot = arr[:, k]
            ok = np.isfinite(foot).all(axis=1)
            if ok.sum() < 8:
                continue
            speed = np.full(arr.shape[0], np.nan)
            speed[1:-1] = np.linalg.norm(foot[2:] - foot[:-2], axis=1) * fs / 2
            h = foot @ axis
            lo, hi = np.nanpercentile(h, [5, 95])
            still = np.isfinite(speed) & (speed <= np.nanpercentile(speed, 20))
            if hi > lo and still.any():
                fracs.append((np.median(h[still]) - lo) / (hi - lo))
        feet_h = np.nanmean(arr[:, f_idx] @ axis)
        body_h = np.nanmean(arr[:, b_idx] @ axis)
        penalty = 0.0 if body_h > feet_h else 1.0
        scores[name] = float(np.mean(fracs)) + penalty if fracs else float("nan")
    finite = {k: v for k, v in scores.items() if np.isfinite(v)}
    best = min(finite, key=finite.__getitem__) if finite else "+z"
    return UpAxisCheck(best, scores, bool(AXIS_VECTORS[best] @ declared > 0.99))
