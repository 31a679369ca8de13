"""Foot contacts, strides, gait parameters, Hildebrand coordinates, cycle classes.

Limbs are named by side and girdle: ``LF``, ``RF`` (left/right fore), ``LH``,
``RH`` (left/right hind); other names are accepted, but Hildebrand's
coordinates need the four standard ones. A stride of a limb runs from one
touch-down to the next; its stance from the touch-down to the lift-off.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import cast

import numpy as np
from numpy.typing import ArrayLike, NDArray

from measures._validation import (
    InsufficientDataError,
    InvalidParameterError,
    as_float_array,
    check_choice,
    check_positive_float,
    check_positive_int,
)
from measures.movement.bodyframe import BodyFrame, body_frame

__all__ = [
    "CycleClasses",
    "FootContacts",
    "GaitParameters",
    "LimbStrides",
    "circular_mean_phase",
    "cycle_classes",
    "foot_contacts",
    "foot_contacts_from_speed",
    "gait_parameters",
    "hildebrand_coordinates",
    "limb_phase",
    "step_cycles",
]


@dataclass(frozen=True)
class FootContacts:
    """Complete stance phases of one foot.

    Attributes
    ----------
    touchdown, liftoff : ndarray of int (n_stances,)
        Frames; stance ``i`` covers ``touchdown[i] <= frame < liftoff[i]``.
        Stances cut by the trial's ends or by a gap are left out.
    low_m, high_m : float
        Hysteresis thresholds on the foot height used (metres, arena frame).
    velocity_threshold_m_s : float
        Vertical speed below which the foot counts as settled.
    """

    touchdown: NDArray[np.int64]
    liftoff: NDArray[np.int64]
    low_m: float
    high_m: float
    velocity_threshold_m_s: float


@dataclass(frozen=True)
class LimbStrides:
    """Strides of one limb (touch-down to next touch-down, gap-free).

    Attributes
    ----------
    contacts : FootContacts
    start, stop : ndarray of int (n_strides,)
        Touch-down frames opening and closing each stride.
    period_s, duty_factor, stride_length_m : ndarray (n_strides,)
        Stride length is the mean forward speed over the stride times its
        period, so it is the same on a treadmill and overground.
    """

    contacts: FootContacts
    start: NDArray[np.int64]
    stop: NDArray[np.int64]
    period_s: NDArray[np.float64]
    duty_factor: NDArray[np.float64]
    stride_length_m: NDArray[np.float64]


@dataclass(frozen=True)
class GaitParameters:
    """Result of :func:`gait_parameters`.

    Attributes
    ----------
    limbs : dict of str to LimbStrides
    reference_limb : str
    phase : dict of str to float
        Circular-mean touch-down phase of each limb in the reference limb's
        stride, in [0, 1) (the reference limb itself is 0).
    stride_frequency_hz, duty_factor, stride_length_m, speed_m_s : float
        Means over every stride of every limb (speed over valid frames).
    hildebrand : tuple of (float, float)
        (hind-limb duty factor, fore-limb touch-down lag behind the hind limb
        of the same side as a fraction of the hind stride), sides averaged;
        NaN when the four standard limbs are not all present.
    n_strides : int
    """

    limbs: dict[str, LimbStrides]
    reference_limb: str
    phase: dict[str, float]
    stride_frequency_hz: float
    duty_factor: float
    stride_length_m: float
    speed_m_s: float
    hildebrand: tuple[float, float]
    n_strides: int


@dataclass(frozen=True)
class CycleClasses:
    """Result of :func:`cycle_classes`.

    Attributes
    ----------
    labels : ndarray of int (n_cycles,)
        Class of each cycle in time order, numbered by first appearance.
    n_classes : int
    sizes : ndarray of int (n_classes,)
    within_rms_m : ndarray (n_classes,)
        RMS deviation of a class's cycles from its mean cycle, per sample.
    silhouette : float
        Mean silhouette of the chosen partition (NaN for one class).
    silhouette_by_k : dict of int to float
        Mean silhouette of every k tried (k >= 2).
    centroids : ndarray (n_classes, n_features)
    """

    labels: NDArray[np.int64]
    n_classes: int
    sizes: NDArray[np.int64]
    within_rms_m: NDArray[np.float64]
    silhouette: float
    silhouette_by_k: dict[int, float]
    centroids: NDArray[np.float64]


# ---------------------------------------------------------------- contacts
def _hysteresis(h: NDArray[np.float64], low: float, high: float) -> NDArray[np.int8]:
    """+1 stance, -1 swing, 0 undecided (before the first threshold crossing)."""
    s = np.where(h < low, 1, np.where(h > high, -1, 0)).astype(np.int8)
    last = np.maximum.accumulate(np.where(s != 0, np.arange(s.size), 0))
    state = s[last]
    state[: np.argmax(s != 0)] = 0  # frames before the first crossing stay undecided
    return state


def _check_hysteresis(low_fraction: float, high_fraction: float, fn: str) -> None:
    # Both contact detectors enter stance below the low level and leave above the high one.
    if not 0 < low_fraction < high_fraction < 1:
        allowed = "0 < low_fraction < high_fraction < 1"
        raise InvalidParameterError("low_fraction", fn, allowed, (low_fraction, high_fraction))


def foot_contacts(
    height: ArrayLike,
    *,
    frame_rate_hz: float,
    low_fraction: float = 0.2,
    high_fraction: float = 0.4,
    velocity_fraction: float = 0.1,
    min_phase_s: float = 0.01,
    min_lift_m: float = 1e-3,
) -> FootContacts:
    """Touch-down and lift-off frames of one foot from its height and velocity.

    Thresholds are relative to the trial's own height distribution: with
    ``lo`` and ``hi`` the 5th and 95th percentiles of the foot height, the
    foot enters stance when it drops below ``lo + low_fraction (hi - lo)``
    and leaves it when it rises above ``lo + high_fraction (hi - lo)``
    (hysteresis, so noise near one level cannot chatter). The height
    crossings come late at touch-down and early at lift-off, so each event
    is then moved to where the vertical velocity settles: touch-down forward
    to the first frame whose downward speed is below ``velocity_fraction``
    times the 95th percentile of |v_z|, lift-off back to the first frame of
    the final rise above that speed. Stances or swings shorter than
    ``min_phase_s`` are merged away. A foot whose 5-95 % height range is below
    ``min_lift_m`` never steps (relative thresholds would otherwise turn
    marker noise into contacts).

    Parameters
    ----------
    height : array (n_frames,)
        Foot height along the vertical (metres); NaN splits the trial.
    frame_rate_hz : float
    low_fraction, high_fraction : float, defaults 0.2 and 0.4
    velocity_fraction : float, default 0.1
    min_phase_s : float, default 0.01
    min_lift_m : float, default 1e-3
        Five times the 0.2 mm resolution of small-animal marker capture
        (common practice).

    Returns
    -------
    FootContacts

    References
    ----------
    Height-threshold contact detection with hysteresis is common practice in
    marker-based gait analysis; thresholds here are our own choice.
    """
    fn = "foot_contacts"
    h = as_float_array("height", height, fn, ndim=1, min_length=4, allow_nan=True)
    fs = check_positive_float("frame_rate_hz", frame_rate_hz, fn)
    _check_hysteresis(low_fraction, high_fraction, fn)
    vfrac = check_positive_float("velocity_fraction", velocity_fraction, fn)
    min_phase = round(check_positive_float("min_phase_s", min_phase_s, fn, allow_zero=True) * fs)
    min_lift = check_positive_float("min_lift_m", min_lift_m, fn, allow_zero=True)
    finite = np.isfinite(h)
    if finite.sum() < 4:
        raise InsufficientDataError("height", fn, "at least 4 finite frames", h)
    lo, hi = np.percentile(h[finite], [5, 95])
    if hi - lo < min_lift:
        hi = lo  # no step: no events below
    low, high = lo + low_fraction * (hi - lo), lo + high_fraction * (hi - lo)
    v = _velocity(h, fs)
    v_thr = vfrac * float(np.percentile(np.abs(v[np.isfinite(v)]), 95)) if hi > lo else 0.0
    tds: list[int] = []
    los: list[int] = []
    if hi > lo:
        for a, b in _true_runs(finite):
            for td, lo_ in _run_stances(h[a:b], v[a:b], low, high, v_thr, min_phase):
                tds.append(a + td)
                los.append(a + lo_)
    return FootContacts(
        np.asarray(tds, dtype=np.int64), np.asarray(los, dtype=np.int64), low, high, v_thr
    )


def foot_contacts_from_speed(
    speed: ArrayLike,
    *,
    frame_rate_hz: float,
    low_fraction: float = 0.1,
    high_fraction: float = 0.2,
    min_phase_s: float = 0.01,
    min_speed_m_s: float = 0.05,
    height: ArrayLike | None = None,
    min_swing_fraction: float = 0.5,
    min_lift_fraction: float = 0.25,
) -> FootContacts:
    """Touch-down and lift-off frames of one foot from its speed over the ground.

    A planted foot does not move over the ground (on a treadmill: relative to
    the belt), whatever the height of the ground under it, so on rough
    terrain the foot's ground speed separates stance from swing where its
    height cannot (stones lift a planted foot by more than its swing
    clearance). With ``hi`` the 95th percentile of the speed, the foot enters
    stance when it slows below ``low_fraction * hi`` and leaves it when it
    speeds up past ``high_fraction * hi`` (hysteresis). Stances or swings
    shorter than ``min_phase_s`` are merged away; a foot whose 95th-percentile
    speed is below ``min_speed_m_s`` never steps.

    Parameters
    ----------
    speed : array (n_frames,)
        Horizontal foot speed over the ground, m/s; NaN splits the trial.
    frame_rate_hz : float
    low_fraction, high_fraction : float, defaults 0.1 and 0.2
    min_phase_s : float, default 0.01
    min_speed_m_s : float, default 0.05
    height : array (n_frames,), optional
        Foot height (m). A "swing" shorter than ``min_swing_fraction`` of
        the upper quartile of the foot's swing durations that lifts the foot
        by less than ``min_lift_fraction`` of the upper quartile of its swing
        lifts is foot skate (a
        planted foot sliding at touch-down, common in retargeted capture):
        the stances on either side are merged, so a stride is never split
        there. Without ``height`` the duration rule alone decides.
    min_swing_fraction, min_lift_fraction : float, defaults 0.5 and 0.25
        Our choice: a real swing of a steady gait lasts close to the median
        swing and lifts the foot close to the median lift.

    Returns
    -------
    FootContacts
        ``low_m``/``high_m`` hold the speed thresholds (m/s) here.

    References
    ----------
    Velocity-threshold contact detection is common practice in kinematic gait
    analysis of marker data; the thresholds are our own choice, checked on
    walkers with known stance timing in ``tests/test_gait.py``.
    """
    fn = "foot_contacts_from_speed"
    v = as_float_array("speed", speed, fn, ndim=1, min_length=4, allow_nan=True)
    fs = check_positive_float("frame_rate_hz", frame_rate_hz, fn)
    _check_hysteresis(low_fraction, high_fraction, fn)
    min_phase = round(check_positive_float("min_phase_s", min_phase_s, fn, allow_zero=True) * fs)
    finite = np.isfinite(v)
    if finite.sum() < 4:
        raise InsufficientDataError("speed", fn, "at least 4 finite frames", v)
    hi = float(np.percentile(v[finite], 95))
    low, high = low_fraction * hi, high_fraction * hi
    tds: list[int] = []
    los: list[int] = []
    if hi >= check_positive_float("min_speed_m_s", min_speed_m_s, fn, allow_zero=True):
        still = np.zeros_like(v)  # no settling refinement: the speed crossing is the event
        for a, b in _true_runs(finite):
            for td, lo_ in _run_stances(v[a:b], still[a:b], low, high, np.inf, min_phase):
                tds.append(a + td)
                los.append(a + lo_)
    h = None if height is None else as_float_array("height", height, fn, ndim=1, allow_nan=True)
    tds, los = _merge_skates(tds, los, h, min_swing_fraction, min_lift_fraction)
    return FootContacts(
        np.asarray(tds, dtype=np.int64), np.asarray(los, dtype=np.int64), low, high, 0.0
    )


def _merge_skates(
    tds: list[int],
    los: list[int],
    height: NDArray[np.float64] | None,
    min_swing_fraction: float,
    min_lift_fraction: float,
) -> tuple[list[int], list[int]]:
    """Merge stances separated by a short swing that does not lift the foot (skate)."""
    if len(tds) < 3:
        return tds, los
    swings = [(lo, td) for lo, td in zip(los[:-1], tds[1:], strict=True)]
    dur = np.array([td - lo for lo, td in swings], dtype=float)
    # Upper quartiles as references: at most one skate per stride, so at least
    # half the "swings" are real ones even when every stance skates.
    short = dur < min_swing_fraction * np.percentile(dur, 75)
    skate = short
    if height is not None:
        lift = np.array(
            [
                np.nanmax(height[lo : td + 1]) - 0.5 * (height[lo] + height[td]) if td > lo else 0.0
                for lo, td in swings
            ]
        )
        ref = np.nanpercentile(lift, 75)
        if ref > 0:
            skate = short & ~(lift >= min_lift_fraction * ref)
    out_td, out_lo = [tds[0]], []
    for i, is_skate in enumerate(skate):
        if not is_skate:
            out_lo.append(los[i])
            out_td.append(tds[i + 1])
    out_lo.append(los[-1])
    return out_td, out_lo


def _ground_speed(
    foot: NDArray[np.float64], body: BodyFrame, fs: float, belt_m_s: float | None
) -> NDArray[np.float64]:
    # Horizontal velocity by central differences within finite runs; on a
    # treadmill the planted foot moves back with the belt, so add the belt's
    # velocity (forward x belt speed) to get the speed relative to the belt.
    vel = np.full_like(foot, np.nan)
    # numpy's stubs type .all(axis=...) as scalar-or-array; with an axis it is an array.
    for a, b in _true_runs(cast(NDArray[np.bool_], np.isfinite(foot).all(axis=1))):
        if b - a >= 2:
            vel[a:b] = np.gradient(foot[a:b], axis=0) * fs
    if belt_m_s:
        vel = vel + belt_m_s * body.forward
    vel = vel - np.outer(vel @ body.up, body.up)
    return np.linalg.norm(vel, axis=1)


def _velocity(h: NDArray[np.float64], fs: float) -> NDArray[np.float64]:
    v = np.full_like(h, np.nan)
    for a, b in _true_runs(np.isfinite(h)):
        if b - a >= 2:
            v[a:b] = np.gradient(h[a:b]) * fs
    return v


def _true_runs(flags: NDArray[np.bool_]) -> list[tuple[int, int]]:
    padded = np.concatenate(([False], flags, [False])).astype(np.int8)
    edges = np.flatnonzero(np.diff(padded))
    return [(int(a), int(b)) for a, b in zip(edges[::2], edges[1::2], strict=True)]


def _run_stances(
    h: NDArray[np.float64],
    v: NDArray[np.float64],
    low: float,
    high: float,
    v_thr: float,
    min_phase: int,
) -> list[tuple[int, int]]:
    state = _hysteresis(h, low, high)
    stances = [(a, b) for a, b in _true_runs(state == 1) if a > 0 and b < h.size]
    # A stance must follow and precede a swing (state -1), not an undecided start.
    stances = [(a, b) for a, b in stances if state[a - 1] == -1 and state[b] == -1]
    merged: list[tuple[int, int]] = []
    for a, b in stances:
        if merged and a - merged[-1][1] < min_phase:
            merged[-1] = (merged[-1][0], b)
        else:
            merged.append((a, b))
    out = []
    for a, b in merged:
        if b - a < min_phase:
            continue
        td = a
        while td < b - 1 and v[td] < -v_thr:
            td += 1
        lo = b
        while lo - 1 > td and v[lo - 1] > v_thr:
            lo -= 1
        out.append((td, lo))
    return out


# ------------------------------------------------------------------ strides
def _limb_strides(
    contacts: FootContacts, finite: NDArray[np.bool_], speed: NDArray[np.float64], fs: float
) -> LimbStrides:
    td, lo = contacts.touchdown, contacts.liftoff
    bad = np.concatenate(([0], np.cumsum(~finite)))
    start, stop = td[:-1], td[1:]
    # A stride must be gap-free (no unfilled frame between its touch-downs).
    keep = bad[stop + 1] - bad[start] == 0 if start.size else np.zeros(0, dtype=bool)
    start, stop, stance_end = start[keep], stop[keep], lo[:-1][keep]
    period = (stop - start) / fs
    duty = (stance_end - start) / (stop - start)
    length = np.array(
        [
            np.nanmean(speed[a:b]) if np.isfinite(speed[a:b]).any() else np.nan
            for a, b in zip(start, stop, strict=True)
        ]
    )
    return LimbStrides(contacts, start, stop, period, duty, length * period)


def circular_mean_phase(phases: ArrayLike) -> float:
    """Circular mean of phases in cycles (fractions of a period), in [0, 1).

    Examples
    --------
    >>> round(circular_mean_phase([0.95, 0.05]), 6)
    0.0
    """
    p = np.asarray(phases, dtype=np.float64)
    p = p[np.isfinite(p)]
    if p.size == 0:
        return float("nan")
    z = np.exp(2j * np.pi * p).mean()
    if abs(z) < 1e-12:
        return float("nan")
    return float(np.round(np.angle(z) / (2 * np.pi), 12) % 1.0)


def limb_phase(
    touchdowns: ArrayLike, *, reference_start: ArrayLike, reference_stop: ArrayLike
) -> NDArray[np.float64]:
    """Touch-down phase of a limb within each reference stride, in [0, 1).

    For each reference stride [start, stop) the first touch-down of the limb
    in it gives ``(t - start) / (stop - start)``; NaN when there is none.
    """
    t = np.sort(np.asarray(touchdowns, dtype=np.float64))
    s0 = np.asarray(reference_start, dtype=np.float64)
    s1 = np.asarray(reference_stop, dtype=np.float64)
    out = np.full(s0.shape, np.nan)
    if t.size == 0:
        return out
    pos = np.searchsorted(t, s0, side="left")
    has = pos < t.size
    cand = np.where(has, t[np.minimum(pos, t.size - 1)], np.inf)
    inside = cand < s1
    out[inside] = (cand[inside] - s0[inside]) / (s1[inside] - s0[inside])
    return out


def hildebrand_coordinates(limbs: Mapping[str, LimbStrides]) -> tuple[float, float]:
    """Hildebrand's gait-diagram point: (hind duty factor, fore-hind phase lag).

    The phase lag is the fore limb's touch-down in the stride of the hind limb
    of the same side, as a fraction of that stride (lateral-sequence walk
    near 0.25, trot near 0.5, pace near 0 or 1); each side is computed and the
    two are averaged (circularly for the phase).

    References
    ----------
    M. Hildebrand (1965), "Symmetrical gaits of horses", *Science* 150:701-708;
    M. Hildebrand (1976), "Analysis of tetrapod gaits", in *Neural Control of
    Locomotion*, Plenum (axes: hind-limb duty factor, fore-hind lag; from
    memory).
    """
    phases: list[float] = []
    duties: list[float] = []
    for side in ("L", "R"):
        hind, fore = limbs.get(side + "H"), limbs.get(side + "F")
        if hind is None or fore is None or hind.start.size == 0:
            continue
        phases.extend(
            limb_phase(
                fore.contacts.touchdown, reference_start=hind.start, reference_stop=hind.stop
            )
        )
        duties.extend(hind.duty_factor)
    if not duties:
        return (float("nan"), float("nan"))
    return (float(np.nanmean(duties)), circular_mean_phase(phases))


def _limb_index(feet: Mapping[str, int], n_markers: int, fn: str) -> dict[str, int]:
    if not isinstance(feet, Mapping) or not feet:
        raise InvalidParameterError("feet", fn, "a non-empty mapping of limb name to index", feet)
    out = {}
    for name, idx in feet.items():
        if (
            isinstance(idx, bool)
            or not isinstance(idx, (int, np.integer))
            or not 0 <= idx < n_markers
        ):
            raise InvalidParameterError("feet", fn, f"marker indices in [0, {n_markers})", feet)
        out[str(name)] = int(idx)
    return out


def gait_parameters(
    markers: ArrayLike,
    *,
    frame_rate_hz: float,
    feet: Mapping[str, int],
    anterior: int | Sequence[int],
    posterior: int | Sequence[int],
    up: ArrayLike = (0.0, 0.0, 1.0),
    treadmill_speed_m_s: float | None = None,
    reference_limb: str = "LH",
    low_fraction: float = 0.2,
    high_fraction: float = 0.4,
    velocity_fraction: float = 0.1,
    min_phase_s: float = 0.01,
    min_lift_m: float = 1e-3,
    contact_method: str = "speed",
    speed_low_fraction: float = 0.1,
    speed_high_fraction: float = 0.2,
    heading: str = "axis",
) -> GaitParameters:
    """Strides, stride frequency and length, duty factor, interlimb phase.

    Parameters
    ----------
    markers : array (n_frames, n_markers, 3), metres, arena frame, NaN outside
        valid segments (strides never span a NaN frame of their foot).
    frame_rate_hz : float
    feet : mapping of limb name to marker index, e.g. ``{"LF": 2, ...}``
    anterior, posterior, up, treadmill_speed_m_s
        As in :func:`measures.body_frame` (speed and stride length).
    reference_limb : str, default "LH"
        Limb whose stride defines phase 0; the first limb in sorted order
        when absent.
    low_fraction, high_fraction, velocity_fraction, min_phase_s, min_lift_m
        Height-based contact detection, see :func:`foot_contacts`.
    contact_method : {"speed", "height"}, default "speed"
        Detect stance from the foot's ground speed
        (:func:`foot_contacts_from_speed`, robust on rough ground) or from its
        height (:func:`foot_contacts`, for flat ground and slow feet).
    speed_low_fraction, speed_high_fraction : float, defaults 0.1 and 0.2
        Hysteresis of the speed-based detector.
    heading : {"axis", "velocity", "auto"}, default "axis"
        Heading source of the body frame (see :func:`measures.body_frame`).

    Returns
    -------
    GaitParameters

    References
    ----------
    Duty factor (stance fraction of the stride) and interlimb phase follow
    M. Hildebrand (1965), *Science* 150:701; R. McN. Alexander (1984),
    "The gaits of bipedal and quadrupedal animals", *Int. J. Robot. Res.*
    3:49 (from memory).
    """
    fn = "gait_parameters"
    arr = as_float_array("markers", markers, fn, ndim=3, allow_nan=True)
    fs = check_positive_float("frame_rate_hz", frame_rate_hz, fn)
    index = _limb_index(feet, arr.shape[1], fn)
    method = check_choice("contact_method", contact_method, fn, ("speed", "height"))
    body = body_frame(
        arr,
        anterior=anterior,
        posterior=posterior,
        up=up,
        frame_rate_hz=fs,
        treadmill_speed_m_s=treadmill_speed_m_s,
        heading=heading,
    )
    ref = reference_limb if reference_limb in index else sorted(index)[0]
    limbs: dict[str, LimbStrides] = {}
    for name, k in index.items():
        height = arr[:, k] @ body.up
        if method == "speed":
            contacts = foot_contacts_from_speed(
                _ground_speed(arr[:, k], body, fs, treadmill_speed_m_s),
                frame_rate_hz=fs,
                low_fraction=speed_low_fraction,
                high_fraction=speed_high_fraction,
                min_phase_s=min_phase_s,
                height=height,
            )
        else:
            contacts = foot_contacts(
                height,
                frame_rate_hz=fs,
                low_fraction=low_fraction,
                high_fraction=high_fraction,
                velocity_fraction=velocity_fraction,
                min_phase_s=min_phase_s,
                min_lift_m=min_lift_m,
            )
        limbs[name] = _limb_strides(contacts, np.isfinite(height), body.forward_speed_m_s, fs)
    r = limbs[ref]
    phase = {
        name: circular_mean_phase(
            limb_phase(s.contacts.touchdown, reference_start=r.start, reference_stop=r.stop)
        )
        for name, s in limbs.items()
    }
    periods = np.concatenate([s.period_s for s in limbs.values()])
    duty = np.concatenate([s.duty_factor for s in limbs.values()])
    lengths = np.concatenate([s.stride_length_m for s in limbs.values()])
    nan = float("nan")
    return GaitParameters(
        limbs=limbs,
        reference_limb=ref,
        phase=phase,
        stride_frequency_hz=float(1.0 / periods.mean()) if periods.size else nan,
        duty_factor=float(duty.mean()) if duty.size else nan,
        stride_length_m=float(np.nanmean(lengths)) if np.isfinite(lengths).any() else nan,
        speed_m_s=body.mean_speed_m_s,
        hildebrand=hildebrand_coordinates(limbs),
        n_strides=int(periods.size),
    )


# -------------------------------------------------------------- cycle classes
def step_cycles(
    signals: ArrayLike, *, start: ArrayLike, stop: ArrayLike, n_samples: int = 101
) -> NDArray[np.float64]:
    """Time-normalise each stride of ``signals`` to ``n_samples`` points.

    Parameters
    ----------
    signals : array (n_frames, ...)
        E.g. body-frame foot trajectories ``(n_frames, n_feet, 3)``.
    start, stop : array of int (n_cycles,)
        Stride bounds in frames (stop inclusive: the next touch-down).
    n_samples : int, default 101
        Samples per cycle (0 %, 1 %, ..., 100 % of the stride).

    Returns
    -------
    ndarray (n_cycles, n_samples * prod(signals.shape[1:]))
        Linear interpolation in time; rows with any NaN are NaN.

    Examples
    --------
    >>> step_cycles(np.arange(11.0), start=[0], stop=[10], n_samples=3).tolist()
    [[0.0, 5.0, 10.0]]
    """
    fn = "step_cycles"
    x = as_float_array("signals", signals, fn, allow_nan=True)
    flat = x.reshape(x.shape[0], -1)
    n = check_positive_int("n_samples", n_samples, fn, minimum=2)
    a = np.asarray(start, dtype=np.int64)
    b = np.asarray(stop, dtype=np.int64)
    if a.shape != b.shape or (b <= a).any() or (a < 0).any() or (b >= x.shape[0]).any():
        raise InvalidParameterError(
            "stop", fn, "stride bounds with 0 <= start < stop < n_frames", b
        )
    out = np.empty((a.size, n * flat.shape[1]))
    for i, (s0, s1) in enumerate(zip(a, b, strict=True)):
        t = np.linspace(s0, s1, n)
        lo = np.minimum(np.floor(t).astype(np.int64), s1 - 1)
        w = (t - lo)[:, None]
        # Sample-major layout: all channels at 0 %, then at 1 %, ...
        out[i] = ((1 - w) * flat[lo] + w * flat[lo + 1]).ravel()
    return out


def _kmeans_labels(x: NDArray[np.float64], k: int, seed: int) -> NDArray[np.int64] | None:
    from scipy.cluster.vq import ClusterError, kmeans2

    rng = np.random.default_rng(seed)
    best, best_cost = np.zeros(x.shape[0], dtype=np.int64), np.inf
    for _ in range(10):
        try:
            centres, labels = kmeans2(x, k, minit="++", seed=rng, missing="raise")
        except ClusterError:  # a class emptied during the iterations: next restart
            continue
        cost = float(((x - centres[labels]) ** 2).sum())
        if cost < best_cost and np.unique(labels).size == k:
            best, best_cost = labels.astype(np.int64), cost
    return best if np.isfinite(best_cost) else None


def cycle_classes(
    cycles: ArrayLike, *, k_max: int = 6, min_silhouette: float = 0.5, seed: int = 0
) -> CycleClasses:
    """Cluster time-normalised cycles into classes (k-means, k by silhouette).

    k-means (scipy's ``kmeans2`` with k-means++ seeding, best of 10 seeded
    restarts by within-class sum of squares) is run for k = 2 ..
    min(k_max, n_cycles - 1); the k with the highest mean silhouette wins,
    unless that silhouette is below ``min_silhouette``, in which case the
    cycles form one class (k = 1: silhouettes are undefined for one cluster,
    so k = 1 is the answer whenever no split shows at least "reasonable"
    structure). Fewer than 3 cycles, or identical cycles, give one class.

    Parameters
    ----------
    cycles : array (n_cycles, n_features), finite, time order
    k_max : int, default 6
    min_silhouette : float, default 0.5
        Kaufman & Rousseeuw's band for a "reasonable structure" starts at
        0.51 (from memory).
    seed : int, default 0

    Returns
    -------
    CycleClasses
        Labels renumbered by first appearance, so the sequence is
        deterministic.

    References
    ----------
    P. J. Rousseeuw (1987), "Silhouettes: a graphical aid to the
    interpretation and validation of cluster analysis", *J. Comput. Appl.
    Math.* 20:53-65; L. Kaufman & P. J. Rousseeuw (1990), *Finding Groups in
    Data*, Wiley.
    """
    from sklearn.metrics import silhouette_score

    fn = "cycle_classes"
    x = as_float_array("cycles", cycles, fn, ndim=2)
    kmax = check_positive_int("k_max", k_max, fn)
    labels = np.zeros(x.shape[0], dtype=np.int64)
    by_k: dict[int, float] = {}
    fits: dict[int, NDArray[np.int64]] = {}
    # Cycles equal to round-off count once: k-means cannot split them.
    scale = float(np.abs(x).max()) or 1.0
    distinct = np.unique(np.round(x / scale, 9), axis=0).shape[0]
    for k in range(2, min(kmax, x.shape[0] - 1, distinct) + 1):
        found = _kmeans_labels(x, k, seed)
        if found is not None:
            fits[k] = found
            by_k[k] = float(silhouette_score(x, found))
    best_k, best_s = 1, float("nan")
    if by_k:
        k = max(by_k, key=lambda kk: (by_k[kk], -kk))  # ties go to the smaller k
        if by_k[k] >= min_silhouette:
            best_k, best_s, labels = k, by_k[k], fits[k]
    _, first = np.unique(labels, return_index=True)
    order = np.argsort(first)
    relabel = np.empty_like(order)
    relabel[np.unique(labels)[order]] = np.arange(order.size)
    labels = relabel[labels]
    centroids = np.stack([x[labels == c].mean(axis=0) for c in range(best_k)])
    within = np.array(
        [np.sqrt(((x[labels == c] - centroids[c]) ** 2).mean()) for c in range(best_k)]
    )
    sizes = np.bincount(labels, minlength=best_k).astype(np.int64)
    return CycleClasses(labels, best_k, sizes, within, best_s, by_k, centroids)
