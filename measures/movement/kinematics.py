"""Marker-trajectory preprocessing: gaps, spikes, zero-lag low-pass, cut-off choice.

Input everywhere is ``markers (n_frames, n_markers, 3)`` float64 in metres with
NaN for gaps, plus ``frame_rate_hz``. The steps, in the order
:func:`preprocess_trial` runs them:

1. spike detection (robust deviation from a running median, MAD scale) and,
   optionally, removal of the spike frames (set to NaN);
2. gap filling by cubic spline across gaps up to ``max_gap_s``; longer gaps
   split the trial into valid segments that every later step respects;
3. Winter's residual analysis per marker and axis for the cut-off (unless one
   is given) and the noise floor;
4. a zero-lag Butterworth low-pass (forward-backward, two passes) whose design
   frequency is corrected so that the two-pass gain at the target cut-off is
   exactly 1/sqrt(2).

Defaults follow marker-based capture of small animals (common practice: a few
hundred frames per second, 300 Hz typical, about 0.2 mm resolution).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import cast

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy.interpolate import CubicSpline
from scipy.ndimage import median_filter
from scipy.signal import butter, filtfilt

from measures._validation import (
    InsufficientDataError,
    InvalidParameterError,
    as_float_array,
    check_choice,
    check_positive_float,
    check_positive_int,
)
from measures.defaults import FLAGGED_WARN_FRACTION, SPIKE_WINDOW_S

__all__ = [
    "FilledGaps",
    "PreprocessedTrial",
    "ResidualAnalysis",
    "SpikeReport",
    "butterworth_design_cutoff_hz",
    "detect_spikes",
    "fill_gaps",
    "lowpass_filter",
    "preprocess_trial",
    "residual_analysis",
    "spike_window_frames",
    "valid_segments",
]

#: Marker resolution of small-animal capture (common practice: about 0.2 mm).
MARKER_RESOLUTION_M = 2e-4
# SPIKE_WINDOW_S and FLAGGED_WARN_FRACTION live with the other defaults (measures/defaults.py).


@dataclass(frozen=True)
class FilledGaps:
    """Result of :func:`fill_gaps`.

    Attributes
    ----------
    markers : ndarray (n_frames, n_markers, 3)
        Input with short gaps filled; long gaps stay NaN.
    filled_mask : ndarray of bool (n_frames, n_markers)
        True where a sample was interpolated.
    long_gaps : tuple of tuple of (int, int)
        Per marker, the ``(start, stop)`` frames (stop exclusive) of gaps left
        unfilled: longer than ``max_gap_s`` or touching the trial's ends.
    segments : tuple of (int, int)
        Maximal runs ``(start, stop)`` of frames where every marker is finite.
    max_gap_frames : int
        Longest gap, in frames, that was filled.
    """

    markers: NDArray[np.float64]
    filled_mask: NDArray[np.bool_]
    long_gaps: tuple[tuple[tuple[int, int], ...], ...]
    segments: tuple[tuple[int, int], ...]
    max_gap_frames: int


@dataclass(frozen=True)
class SpikeReport:
    """Result of :func:`detect_spikes`: per marker, the flagged frames.

    Attributes
    ----------
    spike_frames : tuple of ndarray of int
        Frames whose position departs from the running median by more than
        ``threshold`` robust standard deviations (isolated outliers).
    jump_frames : tuple of ndarray of int
        First frames after a step change that the running median follows
        (a marker swap or relabelling, reported only).
    threshold : float
        Robust z threshold used.
    """

    spike_frames: tuple[NDArray[np.int64], ...]
    jump_frames: tuple[NDArray[np.int64], ...]
    threshold: float


@dataclass(frozen=True)
class ResidualAnalysis:
    """Result of :func:`residual_analysis` for one or more signals.

    Attributes
    ----------
    candidates_hz : ndarray (n_candidates,)
        Cut-off frequencies tried.
    residual : ndarray (n_candidates, n_signals)
        RMS of ``x - lowpass(x, f_c)`` for each candidate, in signal units.
    intercept : ndarray (n_signals,)
        Intercept at f = 0 of the line fitted to the noise tail: the noise RMS.
    cutoff_hz : ndarray (n_signals,)
        First candidate where the residual falls to the intercept.
    fit_from_hz : float
        Lower end of the tail used for the line fit.
    """

    candidates_hz: NDArray[np.float64]
    residual: NDArray[np.float64]
    intercept: NDArray[np.float64]
    cutoff_hz: NDArray[np.float64]
    fit_from_hz: float


@dataclass(frozen=True)
class PreprocessedTrial:
    """Result of :func:`preprocess_trial`.

    Attributes
    ----------
    markers : ndarray (n_frames, n_markers, 3)
        Filtered trajectories in metres; NaN outside the valid segments.
    frame_rate_hz : float
    cutoff_hz : ndarray (n_markers, 3)
        Low-pass cut-off used per marker and axis (target, not design value).
    noise_floor_m : ndarray (n_markers, 3)
        Noise RMS per marker and axis (residual-analysis intercept).
    gaps : FilledGaps
        Gap report (the ``markers`` there are unfiltered).
    spikes : SpikeReport
    segments : tuple of (int, int)
        Valid segments kept (at least ``min_segment_s`` long).
    valid_fraction : float
        Fraction of frames inside kept segments.
    filter_order : int
    flagged_fraction : float
        Fraction of frames in which at least one marker was flagged as a spike.
    spike_window_samples : int
        Running-median length (frames) used by the spike detector.
    warnings : tuple of str
        Plain-language warnings (flagged fraction above
        :data:`FLAGGED_WARN_FRACTION`).
    """

    markers: NDArray[np.float64]
    frame_rate_hz: float
    cutoff_hz: NDArray[np.float64]
    noise_floor_m: NDArray[np.float64]
    gaps: FilledGaps
    spikes: SpikeReport
    segments: tuple[tuple[int, int], ...]
    valid_fraction: float
    filter_order: int
    flagged_fraction: float = 0.0
    spike_window_samples: int = 5
    warnings: tuple[str, ...] = ()


# --------------------------------------------------------------------- helpers
def _check_markers(markers: ArrayLike, function: str) -> NDArray[np.float64]:
    arr = as_float_array("markers", markers, function, ndim=3, allow_nan=True)
    if arr.shape[2] != 3:
        raise InvalidParameterError("markers", function, "of shape (n_frames, n_markers, 3)", arr)
    return arr


def _runs(flags: NDArray[np.bool_]) -> list[tuple[int, int]]:
    """Maximal runs of True as (start, stop) with stop exclusive."""
    padded = np.concatenate(([False], flags, [False])).astype(np.int8)
    edges = np.flatnonzero(np.diff(padded))
    return [(int(a), int(b)) for a, b in zip(edges[::2], edges[1::2], strict=True)]


def valid_segments(
    markers: ArrayLike, *, min_length: int = 1, marker_indices: ArrayLike | None = None
) -> tuple[tuple[int, int], ...]:
    """Maximal runs of frames where the chosen markers are all finite.

    Parameters
    ----------
    markers : array (n_frames, n_markers, 3)
    min_length : int, default 1
        Runs shorter than this (frames) are dropped.
    marker_indices : array of int, optional
        Markers that must be finite (default: all).

    Returns
    -------
    tuple of (int, int)
        ``(start, stop)`` frame pairs, stop exclusive.

    Examples
    --------
    >>> x = np.zeros((6, 1, 3)); x[2] = np.nan
    >>> valid_segments(x)
    ((0, 2), (3, 6))
    """
    arr = _check_markers(markers, "valid_segments")
    if marker_indices is not None:
        arr = arr[:, np.asarray(marker_indices, dtype=int)]
    # numpy's stubs type .all(axis=...) as scalar-or-array; with an axis it is an array.
    ok = cast(NDArray[np.bool_], np.isfinite(arr).all(axis=(1, 2)))
    return tuple(r for r in _runs(ok) if r[1] - r[0] >= min_length)


# ------------------------------------------------------------------ gap filling
def fill_gaps(markers: ArrayLike, *, frame_rate_hz: float, max_gap_s: float = 0.05) -> FilledGaps:
    """Fill short gaps by cubic spline; report the long ones.

    A marker's frame is missing when any of its coordinates is NaN. Gaps of
    at most ``round(max_gap_s * frame_rate_hz)`` frames with data on both
    sides are filled by a not-a-knot cubic spline through the marker's valid
    frames of the same stretch (the stretch between long gaps), which passes
    through every measured sample and leaves it unchanged. Longer gaps and
    gaps at either end stay NaN and split the trial into segments.

    Parameters
    ----------
    markers : array (n_frames, n_markers, 3), float64, metres, NaN for gaps
    frame_rate_hz : float
    max_gap_s : float, default 0.05
        Longest gap filled, in seconds (15 frames at 300 Hz).

    Returns
    -------
    FilledGaps

    References
    ----------
    D. A. Winter (2009), *Biomechanics and Motor Control of Human Movement*,
    4th ed., Wiley, ch. 3 (interpolation of short marker dropouts).

    Examples
    --------
    >>> t = np.arange(50) / 100.0
    >>> x = np.stack([np.sin(t), t, 0 * t], axis=1)[:, None, :]
    >>> x[20:23] = np.nan
    >>> out = fill_gaps(x, frame_rate_hz=100.0)
    >>> int(out.filled_mask.sum()), out.segments
    (3, ((0, 50),))
    """
    fn = "fill_gaps"
    arr = _check_markers(markers, fn)
    fs = check_positive_float("frame_rate_hz", frame_rate_hz, fn)
    max_gap = round(check_positive_float("max_gap_s", max_gap_s, fn, allow_zero=True) * fs)
    out = arr.copy()
    n_frames, n_markers, _ = arr.shape
    mask = np.zeros((n_frames, n_markers), dtype=bool)
    long_gaps: list[tuple[tuple[int, int], ...]] = []
    for k in range(n_markers):
        missing = cast(NDArray[np.bool_], ~np.isfinite(arr[:, k]).all(axis=1))
        out[missing, k] = np.nan
        gaps = _runs(missing)
        unfilled = [g for g in gaps if g[1] - g[0] > max_gap or g[0] == 0 or g[1] == n_frames]
        long_gaps.append(tuple(unfilled))
        short = [g for g in gaps if g not in unfilled]
        if not short:
            continue
        # Stretches between long gaps are interpolated separately so that no
        # spline bridges a gap that is reported as unfilled.
        stretch_ok = np.ones(n_frames, dtype=bool)
        for a, b in unfilled:
            stretch_ok[a:b] = False
        for a, b in _runs(stretch_ok):
            frames = np.arange(a, b)
            good = frames[~missing[a:b]]
            holes = frames[missing[a:b]]
            if holes.size == 0:
                continue
            if good.size < 4:  # a cubic needs four knots; leave it as a gap
                continue
            spline = CubicSpline(good, arr[good, k], axis=0)
            out[holes, k] = spline(holes)
            mask[holes, k] = True
    segments = tuple(_runs(cast(NDArray[np.bool_], np.isfinite(out).all(axis=(1, 2)))))
    return FilledGaps(out, mask, tuple(long_gaps), segments, max_gap)


# ------------------------------------------------------------- spike detection
def spike_window_frames(frame_rate_hz: float, window_s: float = SPIKE_WINDOW_S) -> int:
    """Odd running-median length in frames spanning ``window_s`` (at least 3).

    Examples
    --------
    >>> spike_window_frames(300.0), spike_window_frames(30.0), spike_window_frames(1000.0)
    (5, 3, 17)
    """
    w = max(3, round(window_s * frame_rate_hz))
    return w if w % 2 else w + 1


def detect_spikes(
    markers: ArrayLike,
    *,
    threshold: float = 8.0,
    window_samples: int = 5,
    resolution_m: float = MARKER_RESOLUTION_M,
    motion_scaled: bool = True,
) -> SpikeReport:
    """Flag isolated outliers (spikes) and step changes (jumps) per marker.

    Spikes: the distance of each sample from a running median of ``window_samples``
    frames (per axis) exceeds ``threshold`` times a scale. A running median
    follows smooth motion to second order but not a one- or two-frame
    excursion. The scale at frame t is the largest of

    * ``1.4826 * MAD`` of the deviations (the noise),
    * ``resolution_m``, the capture resolution,
    * with ``motion_scaled``, the marker's own motion there: the running
      median, over three windows, of the second difference
      ``|m[t-1] - 2 m[t] + m[t+1]|`` of the running median. Smooth motion
      departs from its running median by about half its second difference,
      so fast curved motion (a foot at the top of its swing at 30 Hz,
      centimetres per frame) is not a spike, while an excursion the median
      does not follow still is.

    Jumps: steps of the running-median trajectory itself whose robust z
    exceeds ``threshold``; they are reported, never altered.

    Parameters
    ----------
    markers : array (n_frames, n_markers, 3)
    threshold : float, default 8.0
        Robust z threshold (1.4826 MAD is the normal-consistent SD).
    window_samples : int, default 5
        Odd running-median length in frames; :func:`spike_window_frames`
        scales it to the frame rate (5 frames at 300 Hz, 3 at 30 Hz).
    resolution_m : float, default 2e-4
        Floor on the robust scale (common practice: about 0.2 mm for
        small-animal marker capture).
    motion_scaled : bool, default True
        False gives the noise-and-resolution scale alone.

    Returns
    -------
    SpikeReport

    References
    ----------
    P. J. Rousseeuw & C. Croux (1993), "Alternatives to the median absolute
    deviation", *J. Am. Stat. Assoc.* 88:1273 (the 1.4826 consistency factor).
    """
    fn = "detect_spikes"
    arr = _check_markers(markers, fn)
    thr = check_positive_float("threshold", threshold, fn)
    win = check_positive_int("window_samples", window_samples, fn, minimum=3)
    floor = check_positive_float("resolution_m", resolution_m, fn)
    spikes, jumps = [], []
    for k in range(arr.shape[1]):
        x = arr[:, k]
        ok = np.isfinite(x).all(axis=1)
        idx = np.flatnonzero(ok)
        if idx.size < win + 2:
            spikes.append(np.zeros(0, dtype=np.int64))
            jumps.append(np.zeros(0, dtype=np.int64))
            continue
        xs = x[idx]
        med = median_filter(xs, size=(win, 1), mode="nearest")
        dev = np.linalg.norm(xs - med, axis=1)
        scale: float | NDArray[np.float64] = floor
        if motion_scaled:
            curv = np.zeros(dev.size)
            curv[1:-1] = np.linalg.norm(med[:-2] - 2 * med[1:-1] + med[2:], axis=1)
            # A running median over three windows: a spike bends the running
            # median for a frame or two, which must not raise its own scale.
            local = median_filter(curv, size=3 * win, mode="nearest")
            scale = np.maximum(local, floor)
        spikes.append(idx[_robust_outliers(dev, thr, scale)].astype(np.int64))
        step = np.linalg.norm(np.diff(med, axis=0), axis=1)
        # The step into frame j+1 marks the jump; the median's other steps are
        # smooth motion and set the scale.
        jumps.append(idx[1:][_robust_outliers(step, thr, floor)].astype(np.int64))
    return SpikeReport(tuple(spikes), tuple(jumps), thr)


def _robust_outliers(
    values: NDArray[np.float64], thr: float, floor: float | NDArray[np.float64]
) -> NDArray[np.bool_]:
    centre = np.median(values)
    scale = np.maximum(1.4826 * np.median(np.abs(values - centre)), floor)
    return (values - centre) / scale > thr


# -------------------------------------------------------------- Butterworth
def butterworth_design_cutoff_hz(
    cutoff_hz: float, *, frame_rate_hz: float, order: int = 2, n_passes: int = 2
) -> float:
    """Design frequency that gives gain 1/sqrt(2) at ``cutoff_hz`` after ``n_passes``.

    Each pass of a digital Butterworth filter of order N (bilinear transform)
    has ``|H|^2 = 1 / (1 + (tan(pi f / fs) / tan(pi f_d / fs))^(2N))``. After n
    passes the gain at the target f_c is 1/sqrt(2) when
    ``tan(pi f_d / fs) = tan(pi f_c / fs) / C`` with
    ``C = (2^(1/n) - 1)^(1/(2N))``. For N = 2 this is Winter's correction
    factor C = (2^(1/n) - 1)^(1/4) = 0.802243 for a forward-backward pair;
    the correction is applied to the pre-warped frequency, not to f_c itself
    (dividing f_c by 0.802 is off by about 0.8 % at f_c/fs = 0.06).

    Parameters
    ----------
    cutoff_hz : float
        Target -3 dB frequency of the whole filter, 0 < cutoff_hz < fs/2.
    frame_rate_hz : float
    order : int, default 2
        Order of one pass.
    n_passes : int, default 2
        2 for filtfilt.

    Returns
    -------
    float
        Frequency to give ``scipy.signal.butter``, in Hz.

    References
    ----------
    D. A. Winter (2009), *Biomechanics and Motor Control of Human Movement*,
    4th ed., Wiley, p. 69; D. G. E. Robertson et al. (2014), *Research Methods
    in Biomechanics*, 2nd ed., p. 288.

    Examples
    --------
    >>> round(butterworth_design_cutoff_hz(6.0, frame_rate_hz=100.0), 4)
    7.4309
    """
    fn = "butterworth_design_cutoff_hz"
    fs = check_positive_float("frame_rate_hz", frame_rate_hz, fn)
    fc = check_positive_float("cutoff_hz", cutoff_hz, fn)
    n = check_positive_int("order", order, fn)
    passes = check_positive_int("n_passes", n_passes, fn)
    if fc >= fs / 2:
        raise InvalidParameterError("cutoff_hz", fn, f"below the Nyquist frequency {fs / 2}", fc)
    c = (2.0 ** (1.0 / passes) - 1.0) ** (1.0 / (2 * n))
    return float(fs / np.pi * np.arctan(np.tan(np.pi * fc / fs) / c))


def lowpass_filter(
    x: ArrayLike, *, frame_rate_hz: float, cutoff_hz: float, order: int = 2
) -> NDArray[np.float64]:
    """Zero-lag Butterworth low-pass along axis 0 (forward-backward, corrected).

    The design frequency comes from :func:`butterworth_design_cutoff_hz`
    with two passes, so the whole filter has gain 1/sqrt(2) at ``cutoff_hz``
    and zero phase lag. Edges are padded by odd reflection (scipy's default).

    Parameters
    ----------
    x : array (n_samples, ...), finite
    frame_rate_hz, cutoff_hz : float
    order : int, default 2
        Order of each pass (the result has twice the roll-off).

    Returns
    -------
    ndarray, same shape as ``x``

    References
    ----------
    D. A. Winter (2009), *Biomechanics and Motor Control of Human Movement*,
    4th ed., Wiley, pp. 68-70.
    """
    fn = "lowpass_filter"
    arr = as_float_array("x", x, fn)
    fd = butterworth_design_cutoff_hz(cutoff_hz, frame_rate_hz=frame_rate_hz, order=order)
    b, a = butter(order, fd, btype="low", fs=frame_rate_hz)
    if arr.shape[0] <= 3 * max(len(a), len(b)):
        raise InsufficientDataError("x", fn, f"more than {3 * max(len(a), len(b))} samples", arr)
    return filtfilt(b, a, arr, axis=0)


# -------------------------------------------------------- residual analysis
def residual_analysis(
    x: ArrayLike,
    *,
    frame_rate_hz: float,
    candidates_hz: ArrayLike | None = None,
    fit_from_hz: float | None = None,
    order: int = 2,
    segments: tuple[tuple[int, int], ...] | None = None,
    method: str = "fft",
) -> ResidualAnalysis:
    """Winter's residual analysis: cut-off and noise RMS per signal.

    R(f_c) = sqrt(mean((x - x_fc)^2)) over the candidates. A straight line is
    fitted to R over the noise-dominated tail (f_c >= ``fit_from_hz``); its
    intercept at f = 0 estimates the noise RMS, and the cut-off is the first
    candidate where R falls to the intercept. When R never reaches it (no
    measurable noise) the highest candidate is returned.

    Parameters
    ----------
    x : array (n_samples,) or (n_samples, n_signals), finite inside segments
    frame_rate_hz : float
    candidates_hz : array, optional
        Default: fs/200 to 0.4 fs in steps of fs/200 (1-40 Hz by 0.5 Hz at
        100 Hz, the grid of the CHECKS I2 example).
    fit_from_hz : float, optional
        Default 0.2 fs (20 Hz at 100 Hz).
    order : int, default 2
    segments : tuple of (int, int), optional
        Filter each segment separately and pool the residuals (default: one).
    method : {"fft", "filtfilt"}, default "fft"
        ``"filtfilt"`` filters every segment once per candidate.
        ``"fft"`` takes one FFT per channel and segment and gets every
        candidate's residual power by Parseval: the zero-lag filter's gain
        is ``|H(f)|^2``, so the residual spectrum is ``X(f) (1 - |H(f)|^2)``.
        The segment has its end-to-end line removed (a low-pass passes a
        line unchanged, so the residual does not contain it) and is extended
        oddly to twice its length, which makes it continuous when taken as
        periodic. Edges are handled differently from filtfilt's padding, so
        residuals differ slightly near the tail; the cut-offs agree within
        one candidate step (tested).

    Returns
    -------
    ResidualAnalysis

    References
    ----------
    D. A. Winter (2009), *Biomechanics and Motor Control of Human Movement*,
    4th ed., Wiley, ch. 3 (residual analysis).
    """
    fn = "residual_analysis"
    arr = as_float_array("x", x, fn, ndim=(1, 2), allow_nan=True)
    signals = arr.reshape(arr.shape[0], -1)
    fs = check_positive_float("frame_rate_hz", frame_rate_hz, fn)
    if candidates_hz is None:
        cand = np.arange(1, 81, dtype=np.float64) * fs / 200.0  # integers: exact either way
    else:
        cand = as_float_array("candidates_hz", candidates_hz, fn, ndim=1, min_length=3)
    fit_from = (
        0.2 * fs if fit_from_hz is None else check_positive_float("fit_from_hz", fit_from_hz, fn)
    )
    tail = cand >= fit_from
    if tail.sum() < 2:
        raise InvalidParameterError(
            "fit_from_hz", fn, "leaving >= 2 candidates in the tail", fit_from
        )
    segs = segments if segments is not None else ((0, signals.shape[0]),)
    if not segs:
        raise InsufficientDataError("segments", fn, "at least one segment", segs)
    check_choice("method", method, fn, ("fft", "filtfilt"))
    if method == "fft":
        resid = _residuals_fft(signals, segs, cand, fs, order)
    else:
        resid = _residuals_filtfilt(signals, segs, cand, fs, order)
    slope_int = np.polyfit(cand[tail], resid[tail], 1)
    intercept = slope_int[1]
    below = resid <= intercept[None, :]
    first = np.where(below.any(axis=0), below.argmax(axis=0), cand.size - 1)
    return ResidualAnalysis(cand, resid, intercept, cand[first], float(fit_from))


def _residuals_filtfilt(
    signals: NDArray[np.float64],
    segs: Sequence[tuple[int, int]],
    cand: NDArray[np.float64],
    fs: float,
    order: int,
) -> NDArray[np.float64]:
    resid = np.empty((cand.size, signals.shape[1]))
    count = sum(b - a for a, b in segs)
    for i, fc in enumerate(cand):
        sq = np.zeros(signals.shape[1])
        for a, b in segs:
            part = signals[a:b]
            sq += (
                (part - lowpass_filter(part, frame_rate_hz=fs, cutoff_hz=fc, order=order)) ** 2
            ).sum(axis=0)
        resid[i] = np.sqrt(sq / count)
    return resid


def _residuals_fft(
    signals: NDArray[np.float64],
    segs: Sequence[tuple[int, int]],
    cand: NDArray[np.float64],
    fs: float,
    order: int,
) -> NDArray[np.float64]:
    """Residual RMS per candidate by Parseval on the odd extension of each segment."""
    sq = np.zeros((cand.size, signals.shape[1]))
    count = 0
    for a, b in segs:
        part = signals[a:b]
        n = part.shape[0]
        if n <= 3 * (order + 1):  # as lowpass_filter: too short to filter
            raise InsufficientDataError(
                "x", "residual_analysis", f"segments > {3 * (order + 1)}", n
            )
        ramp = np.linspace(0.0, 1.0, n)[:, None]
        detr = part - (part[:1] + ramp * (part[-1:] - part[:1]))
        ext = np.concatenate((detr, -detr[::-1]), axis=0)  # length 2n, odd about both ends
        power = np.abs(np.fft.rfft(ext, axis=0)) ** 2
        # rfft of a real length-2n series: interior bins count twice in Parseval.
        weight = np.full(power.shape[0], 2.0)
        weight[0] = 1.0
        weight[-1] = 1.0
        freqs = np.fft.rfftfreq(2 * n, d=1.0 / fs)
        # One pass of a bilinear-transform Butterworth has |H|^2 = 1 / (1 +
        # (tan(pi f / fs) / tan(pi f_d / fs))^(2N)) (see
        # butterworth_design_cutoff_hz); filtfilt's gain is that |H|^2.
        c = (2.0**0.5 - 1.0) ** (1.0 / (2 * order))
        warped = np.tan(np.pi * np.minimum(freqs, 0.5 * fs * (1 - 1e-12)) / fs)
        ratio = warped[None, :] * c / np.tan(np.pi * cand / fs)[:, None]
        gains = 1.0 / (1.0 + ratio ** (2 * order))
        # Energy of the residual of the extension, half of which is the segment's.
        sq += ((1.0 - gains) ** 2 * weight) @ power / (2 * n) / 2.0
        count += n
    return np.sqrt(sq / count)


# ------------------------------------------------------------------ pipeline
def _cutoff_table(
    cutoff_hz: float | ArrayLike | None, n_markers: int, fs: float, fn: str
) -> NDArray[np.float64] | None:
    if cutoff_hz is None:
        return None
    table = np.broadcast_to(np.asarray(cutoff_hz, dtype=np.float64), (n_markers, 3)).copy()
    if not (np.isfinite(table).all() and (table > 0).all() and (table < fs / 2).all()):
        raise InvalidParameterError(
            "cutoff_hz",
            fn,
            f"None or values in (0, {fs / 2}) broadcastable to (n_markers, 3)",
            cutoff_hz,
        )
    return table


def preprocess_trial(
    markers: ArrayLike,
    *,
    frame_rate_hz: float,
    max_gap_s: float = 0.05,
    cutoff_hz: float | ArrayLike | None = None,
    order: int = 2,
    remove_spikes: bool = True,
    spike_threshold: float = 8.0,
    min_segment_s: float = 0.1,
    spike_window_s: float = SPIKE_WINDOW_S,
    flagged_warn_fraction: float = FLAGGED_WARN_FRACTION,
) -> PreprocessedTrial:
    """Spike removal, gap filling, residual analysis and zero-lag low-pass.

    Parameters
    ----------
    markers : array (n_frames, n_markers, 3), float64, metres, NaN for gaps
    frame_rate_hz : float
    max_gap_s : float, default 0.05
        Longest gap filled by cubic spline (see :func:`fill_gaps`).
    cutoff_hz : float or array (n_markers, 3), optional
        Target cut-off; default: Winter's residual analysis per marker and
        axis (see :func:`residual_analysis`).
    order : int, default 2
        Butterworth order per pass.
    remove_spikes : bool, default True
        Set frames flagged by :func:`detect_spikes` to NaN before filling.
    spike_threshold : float, default 8.0
    min_segment_s : float, default 0.1
        Valid segments shorter than this are dropped (set to NaN): they are
        too short for the filter's edge padding and for any cycle measure.
    spike_window_s : float, default 5/300 s
        Span of the spike detector's running median (see
        :func:`spike_window_frames`): 5 frames at 300 Hz, 3 at 30 Hz.
    flagged_warn_fraction : float, default 0.02
        A warning is added when more than this fraction of the frames holds
        a flagged marker.

    Returns
    -------
    PreprocessedTrial
        The noise floor per marker and axis is the residual-analysis
        intercept (clipped at 0), computed even when ``cutoff_hz`` is given.

    References
    ----------
    D. A. Winter (2009), *Biomechanics and Motor Control of Human Movement*,
    4th ed., Wiley, ch. 3.

    Examples
    --------
    >>> t = np.arange(600) / 300.0
    >>> x = np.stack([np.sin(2 * np.pi * t), np.cos(2 * np.pi * t), t], axis=1)[:, None, :]
    >>> out = preprocess_trial(x, frame_rate_hz=300.0, cutoff_hz=10.0)
    >>> out.segments, out.valid_fraction
    (((0, 600),), 1.0)
    """
    fn = "preprocess_trial"
    arr = _check_markers(markers, fn)
    fs = check_positive_float("frame_rate_hz", frame_rate_hz, fn)
    table = _cutoff_table(cutoff_hz, arr.shape[1], fs, fn)
    min_len = max(round(check_positive_float("min_segment_s", min_segment_s, fn) * fs), 16)
    window = spike_window_frames(fs, check_positive_float("spike_window_s", spike_window_s, fn))
    spikes = detect_spikes(arr, threshold=spike_threshold, window_samples=window)
    flagged = np.zeros(arr.shape[0], dtype=bool)
    for frames in spikes.spike_frames:
        flagged[frames] = True
    flagged_fraction = float(flagged.mean()) if flagged.size else 0.0
    warn = []
    if flagged_fraction > check_positive_float("flagged_warn_fraction", flagged_warn_fraction, fn):
        warn.append(
            f"spike detector flagged {100 * flagged_fraction:.1f} % of frames "
            f"(> {100 * flagged_warn_fraction:.1f} %): check for marker swaps or noisy capture"
        )
    work = arr.copy()
    if remove_spikes:
        for k, frames in enumerate(spikes.spike_frames):
            work[frames, k] = np.nan
    gaps = fill_gaps(work, frame_rate_hz=fs, max_gap_s=max_gap_s)
    segments = tuple(s for s in gaps.segments if s[1] - s[0] >= min_len)
    if not segments:
        longest = max((b - a for a, b in gaps.segments), default=0)
        raise InsufficientDataError(
            "markers", fn,
            f"a gap-free stretch of at least {min_len} frames ({min_len / fs:.3g} s); "
            f"the longest has {longest} of {arr.shape[0]} frames",
            arr,
        )  # fmt: skip
    flat = gaps.markers.reshape(arr.shape[0], -1)
    analysis = residual_analysis(flat, frame_rate_hz=fs, order=order, segments=segments)
    noise = np.clip(analysis.intercept, 0.0, None).reshape(arr.shape[1], 3)
    if table is None:
        table = analysis.cutoff_hz.reshape(arr.shape[1], 3)
    out = np.full_like(arr, np.nan)
    for a, b in segments:
        part = gaps.markers[a:b]
        # One filtfilt call per distinct cut-off keeps the work vectorised.
        for fc in np.unique(table):
            sel = table == fc
            out[a:b][:, sel] = lowpass_filter(
                part[:, sel], frame_rate_hz=fs, cutoff_hz=fc, order=order
            )
    valid = sum(b - a for a, b in segments) / arr.shape[0]
    return PreprocessedTrial(
        out, fs, table, noise, gaps, spikes, segments, float(valid), order,
        flagged_fraction, window, tuple(warn),
    )  # fmt: skip
