"""Movement summary: one trial's markers in, scores with notes and plot arrays out.

Pipeline (every parameter is in :data:`MOVEMENT_DEFAULTS`):

1. :func:`measures.preprocess_trial` (spikes on a running median scaled to
   the frame rate and to the marker's own motion, gaps, residual-analysis
   cut-off, zero-lag Butterworth); the flagged-frame fraction is a score and
   a warning above ``flagged_warn_fraction``;
2. the up axis (``up_axis`` or ``up``) is checked against the data (feet
   lowest and still in stance, :func:`measures.check_up_axis`); a
   disagreement is a warning, the declared axis is kept;
3. :func:`measures.gait_parameters` (contacts from ground speed with foot
   skate merged, strides, duty factor, phases; Hildebrand's point only for
   the four limbs LF, RF, LH, RH, NaN with a note for other body plans); the
   heading comes from the body axis, or for an upright body (``heading``
   "auto") from the direction of travel;
4. step-cycle classes: every foot's body-frame trajectory over each stride of
   the reference limb, time-normalised; classes, within-class variability
   (RMS and fraction of variance), class-sequence entropy and entropy rate;
5. the analysis state (``analysis_state``): by default the whole-body state,
   M-SSA of the body-frame trajectories of every role marker
   (:mod:`measures.movement.state`); or ``"single_foot"``, the delay
   embedding of one foot coordinate (``signal_limb``, ``signal_axis``);
6. on that state: RQA at the full frame rate up to ``rqa_max_points`` points
   (10 minutes at 300 Hz; decimated, anti-aliased, beyond), the ordinal
   complexity-entropy plane of its leading component, symbolic entropy rates,
   causal states, effective complexity and total information (two-part code)
   per symbol and per second, and sample entropy; every complexity score
   carries a surrogate z-score (multichannel IAAFT, ``n_surrogates``);
7. interlimb coordination: joint recurrence of every pair of feet, summarised
   as the mean and minimum synchronisation index.

Every NaN score carries a note saying why. Line lengths are in seconds so
they do not depend on decimation.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from numpy.typing import ArrayLike, NDArray

from measures._types import Score
from measures._validation import InsufficientDataError, InvalidParameterError, as_float_array
from measures.defaults import MOVEMENT_DEFAULTS
from measures.dynamics import embedding, recurrence
from measures.information import entropy, ordinal
from measures.movement import state as wb
from measures.movement.bodyframe import AXIS_VECTORS, body_frame, check_up_axis
from measures.movement.gait import GaitParameters, cycle_classes, gait_parameters, step_cycles
from measures.movement.kinematics import (
    FilledGaps,
    PreprocessedTrial,
    SpikeReport,
    preprocess_trial,
)

__all__ = ["MOVEMENT_DEFAULTS", "MovementSummary", "movement_summary"]

_AXES = {"x": 0, "y": 1, "z": 2}
_CHOICES = {
    "delay_method": ("ami", "quarter_stride"),
    "signal_axis": tuple(_AXES),
    "analysis_state": ("whole_body", "single_foot"),
    "heading": ("axis", "velocity", "auto"),
    "up_axis": (None, *AXIS_VECTORS),
}
_HILDEBRAND_LIMBS = {"LF", "RF", "LH", "RH"}


@dataclass(frozen=True)
class MovementSummary:
    """Result of :func:`movement_summary`.

    Attributes
    ----------
    scores : tuple of Score
        Every NaN score has a ``note``; complexity scores carry ``surrogate_z``.
    params : dict
        Every parameter used (defaults merged with the caller's).
    signal : ndarray (n,)
        Leading component of the analysis state (metres) at the frame rate.
    signal_time_s : ndarray (n,)
    recurrence_image : ndarray (size, size)
        Block-averaged recurrence plot of the RQA input.
    ssa_pair : ndarray (n_points, 2)
        The two leading components of the analysis state.
    class_sequence : ndarray of int (n_cycles,)
        Step-cycle class of each reference stride, in time order.
    gait : GaitParameters or None
        None when the trial was too short for preprocessing.
    preprocessed : PreprocessedTrial
    notes : tuple of str
        Stage-level notes (automatic choices, why a stage gave NaN).
    warnings : tuple of str
        Things a reader must know (spike fraction, up axis, short trial).
    plot_arrays : dict of str to ndarray
        Small arrays later views need: ``recurrence_thumbnail``,
        ``state_trajectory`` and ``state_time_s`` (at most ``plot_max_points``
        rows), ``ssa_variance_share``, ``step_cycle_classes``,
        ``step_cycle_centroids``, ``interlimb_synchronisation``.
    """

    scores: tuple[Score, ...]
    params: dict[str, Any]
    signal: NDArray[np.float64]
    signal_time_s: NDArray[np.float64]
    recurrence_image: NDArray[np.float64]
    ssa_pair: NDArray[np.float64]
    class_sequence: NDArray[np.int64]
    gait: GaitParameters | None
    preprocessed: PreprocessedTrial
    notes: tuple[str, ...] = ()
    warnings: tuple[str, ...] = ()
    plot_arrays: dict[str, NDArray[Any]] = field(default_factory=dict)

    def score(self, name: str) -> float:
        """Value of the score called ``name`` (KeyError if absent)."""
        for s in self.scores:
            if s.name == name:
                return s.value
        raise KeyError(name)

    def note(self, name: str) -> str:
        """Note of the score called ``name`` (KeyError if absent)."""
        for s in self.scores:
            if s.name == name:
                return s.note
        raise KeyError(name)


def _merge_params(params: Mapping[str, Any] | None) -> dict[str, Any]:
    merged = dict(MOVEMENT_DEFAULTS)
    for key, value in (params or {}).items():
        if key not in MOVEMENT_DEFAULTS:
            raise InvalidParameterError(
                "params", "movement_summary", f"keys among {sorted(MOVEMENT_DEFAULTS)}", key
            )
        merged[key] = value
    for key, allowed in _CHOICES.items():
        if merged[key] not in allowed:
            raise InvalidParameterError(
                "params", "movement_summary", f"{key} one of {allowed}", merged[key]
            )
    if merged["up_axis"] is not None:
        merged["up"] = tuple(float(v) for v in AXIS_VECTORS[merged["up_axis"]])
    return merged


def _role_indices(
    marker_names: list[str], roles: Mapping[str, Any]
) -> tuple[list[int], list[int], dict[str, int]]:
    fn = "movement_summary"
    lookup = {name: i for i, name in enumerate(marker_names)}

    def find(name: Any) -> int:
        if name not in lookup:
            raise InvalidParameterError("roles", fn, f"marker names among {marker_names}", name)
        return lookup[name]

    def many(value: Any) -> list[int]:
        return [find(v) for v in ([value] if isinstance(value, str) else value)]

    for key in ("anterior", "posterior", "feet"):
        if key not in roles:
            raise InvalidParameterError("roles", fn, f"a mapping with the key {key!r}", roles)
    feet = roles["feet"]
    if not isinstance(feet, Mapping) or not feet:
        raise InvalidParameterError("roles", fn, "a non-empty 'feet' mapping", feet)
    return many(roles["anterior"]), many(roles["posterior"]), {k: find(v) for k, v in feet.items()}


class _Book:
    """Scores with their notes, collected stage by stage."""

    def __init__(self) -> None:
        self.scores: list[Score] = []
        self.notes: list[str] = []
        self.warnings: list[str] = []
        self.plots: dict[str, NDArray[Any]] = {}

    def add(self, name: str, value: Any, unit: str, note: str = "", z: float | None = None) -> None:
        v = float(value) if value is not None else math.nan
        self.scores.append(Score(name, v, unit, surrogate_z=z, note=note))

    def fill(self, units: Mapping[str, str], values: Mapping[str, Any], reason: str) -> None:
        """Scores in the order of ``units``; a missing or NaN value gets ``reason``."""
        for name, unit in units.items():
            v = float(values.get(name, math.nan))
            self.add(name, v, unit, "" if np.isfinite(v) else reason)


def movement_summary(
    markers: ArrayLike,
    *,
    frame_rate_hz: float,
    marker_names: list[str] | tuple[str, ...],
    roles: Mapping[str, Any],
    params: Mapping[str, Any] | None = None,
) -> MovementSummary:
    """Score one trial's movement: gait, whole-body state, RQA, entropies, step classes.

    Parameters
    ----------
    markers : array (n_frames, n_markers, 3), float64, metres, NaN for gaps
        Any frame rate from 30 to 1,000 Hz (spike detection and filters scale
        with it).
    frame_rate_hz : float
    marker_names : sequence of str (n_markers,)
    roles : mapping
        ``{"anterior": name or [names], "posterior": name or [names],
        "feet": {limb: name, ...}}`` with 2, 4 or 6 feet (``LF, RF, LH, RH``
        for a quadruped; any names otherwise).
    params : mapping, optional
        Overrides of :data:`MOVEMENT_DEFAULTS`; unknown keys raise
        :class:`InvalidParameterError`.

    Returns
    -------
    MovementSummary
        Scores are NaN (never 0) where the data do not support a measure, each
        with a note naming the cause; a trial too short for preprocessing
        gives NaN everywhere instead of an error.

    References
    ----------
    D. A. Winter (2009), *Biomechanics and Motor Control of Human Movement*;
    M. Hildebrand (1965), *Science* 150:701; D. S. Broomhead & G. P. King
    (1986), *Physica D* 20:217; M. Ghil et al. (2002), *Rev. Geophys.*
    40:1003; A. M. Fraser & H. L. Swinney (1986), *Phys. Rev. A* 33:1134;
    N. Marwan et al. (2007), *Phys. Rep.* 438:237; M. C. Romano et al.
    (2004), *Phys. Lett. A* 330:214; C. Bandt & B. Pompe (2002), *Phys. Rev.
    Lett.* 88:174102; O. A. Rosso et al. (2007), *Phys. Rev. Lett.*
    99:154102; C. R. Shalizi & K. L. Klinkner (2004), UAI; M. Gell-Mann &
    S. Lloyd (1996), *Complexity* 2:44; T. Schreiber & A. Schmitz (1996),
    *Phys. Rev. Lett.* 77:635; J. S. Richman & J. R. Moorman (2000),
    *Am. J. Physiol.* 278:H2039.
    """
    fn = "movement_summary"
    p = _merge_params(params)
    arr = as_float_array("markers", markers, fn, ndim=3, allow_nan=True)
    names = list(marker_names)
    if len(names) != arr.shape[1]:
        raise InvalidParameterError("marker_names", fn, f"{arr.shape[1]} names", marker_names)
    anterior, posterior, feet = _role_indices(names, roles)
    book = _Book()
    try:
        pre = preprocess_trial(
            arr, frame_rate_hz=frame_rate_hz, max_gap_s=p["max_gap_s"], cutoff_hz=p["cutoff_hz"],
            order=p["filter_order"], remove_spikes=p["remove_spikes"],
            spike_threshold=p["spike_threshold"], min_segment_s=p["min_segment_s"],
            spike_window_s=p["spike_window_s"], flagged_warn_fraction=p["flagged_warn_fraction"],
        )  # fmt: skip
    except InsufficientDataError as err:
        return _too_short(arr, float(frame_rate_hz), feet, p, book, err)
    book.warnings += pre.warnings
    fs = pre.frame_rate_hz
    _check_up(pre, feet, anterior + posterior, p, book)
    gait = gait_parameters(
        pre.markers, frame_rate_hz=fs, feet=feet, anterior=anterior, posterior=posterior,
        up=p["up"], treadmill_speed_m_s=p["treadmill_speed_m_s"],
        reference_limb=p["reference_limb"], low_fraction=p["contact_low_fraction"],
        high_fraction=p["contact_high_fraction"],
        velocity_fraction=p["contact_velocity_fraction"], min_phase_s=p["min_phase_s"],
        min_lift_m=p["contact_min_lift_m"], contact_method=p["contact_method"],
        speed_low_fraction=p["contact_speed_low_fraction"],
        speed_high_fraction=p["contact_speed_high_fraction"], heading=p["heading"],
    )  # fmt: skip
    body = body_frame(
        pre.markers, anterior=anterior, posterior=posterior, up=p["up"], frame_rate_hz=fs,
        heading=p["heading"], heading_window_s=p["heading_window_s"],
    )  # fmt: skip
    if body.heading_source == "velocity":
        book.notes.append("heading from the direction of travel (upright body axis)")
    _gait_scores(gait, pre, feet, book)
    classes, plots = _class_scores(body.markers[:, list(feet.values())], gait, p, book)
    a, b = max(pre.segments, key=lambda s: s[1] - s[0])
    role_idx = list(dict.fromkeys([*feet.values(), *anterior, *posterior]))
    if p["analysis_state"] == "whole_body":
        channels = body.markers[a:b, role_idx].reshape(b - a, -1)
        out = _whole_body_scores(channels, fs, gait.stride_frequency_hz, p, book)
    else:
        limb = p["signal_limb"] or gait.reference_limb
        if limb not in feet:
            raise InvalidParameterError("params", fn, f"signal_limb among {sorted(feet)}", limb)
        signal = body.markers[a:b, feet[limb], _AXES[p["signal_axis"]]]
        out = _single_foot_scores(signal, fs, gait.stride_frequency_hz, p, book)
    state, delay, image = out
    limbs = {k: body.markers[a:b, i] for k, i in feet.items()}
    plots |= _interlimb_scores(limbs, delay, p, book) | book.plots
    return _result(book, p, state, a, fs, image, classes, gait, pre, plots)


def _result(
    book: _Book,
    p: dict[str, Any],
    state: NDArray[np.float64],
    a: int,
    fs: float,
    image: NDArray[np.float64],
    classes: NDArray[np.int64],
    gait: GaitParameters | None,
    pre: PreprocessedTrial,
    plots: dict[str, NDArray[Any]],
) -> MovementSummary:
    lead = state[:, 0] if state.size else np.zeros(0)
    step = max(1, math.ceil(lead.size / p["plot_max_points"]))
    time_s = (a + np.arange(lead.size)) / fs
    plots |= {
        "recurrence_thumbnail": image,
        "state_trajectory": state[::step].copy(),
        "state_time_s": time_s[::step].copy(),
    }
    return MovementSummary(
        scores=tuple(book.scores), params=p, signal=lead, signal_time_s=time_s,
        recurrence_image=image, ssa_pair=state[:, :2] if state.size else np.zeros((0, 2)),
        class_sequence=classes, gait=gait, preprocessed=pre, notes=tuple(book.notes),
        warnings=tuple(book.warnings), plot_arrays=plots,
    )  # fmt: skip


def _check_up(
    pre: PreprocessedTrial,
    feet: Mapping[str, int],
    body_idx: list[int],
    p: dict[str, Any],
    book: _Book,
) -> None:
    try:
        check = check_up_axis(
            pre.markers, feet=list(feet.values()), body=body_idx,
            frame_rate_hz=pre.frame_rate_hz, up=p["up"],
        )  # fmt: skip
    except InsufficientDataError:
        book.add("up_axis_agrees", math.nan, "1", "too few frames to check the up axis")
        return
    book.add("up_axis_agrees", float(check.agrees), "1")
    if not check.agrees:
        book.warnings.append(
            f"the data suggest the up axis is {check.best} (feet lowest and still in stance), "
            f"not the declared {p['up_axis'] or p['up']}: heights, speeds and contacts may be wrong"
        )


def _too_short(
    arr: NDArray[np.float64],
    fs: float,
    feet: Mapping[str, int],
    p: dict[str, Any],
    book: _Book,
    err: Exception,
) -> MovementSummary:
    """NaN scores with the real cause when preprocessing has too little to work on."""
    n = arr.shape[0]
    reason = f"trial too short or too gappy: {n} frames ({n / fs:.3g} s at {fs:g} Hz); {err}"
    book.warnings.append(reason)
    for name, unit in (*_GAIT_UNITS.items(), *_CLASS_UNITS.items(), *_STATE_UNITS.items()):
        book.add(name, math.nan, unit, reason)
    for name, unit in (*wb.COMPLEXITY_UNITS.items(), *_INTERLIMB_UNITS.items()):
        book.add(name, math.nan, unit, reason)
    empty = FilledGaps(np.full_like(arr, np.nan), np.zeros(arr.shape[:2], bool), (), (), 0)
    pre = PreprocessedTrial(
        np.full_like(arr, np.nan), fs, np.full((arr.shape[1], 3), np.nan),
        np.full((arr.shape[1], 3), np.nan), empty, SpikeReport((), (), p["spike_threshold"]),
        (), 0.0, p["filter_order"], 0.0, 0, (reason,),
    )  # fmt: skip
    state = np.zeros((0, 2))
    return _result(book, p, state, 0, fs, np.zeros((0, 0)), np.zeros(0, np.int64), None, pre, {})


_GAIT_UNITS = {
    "stride_frequency_hz": "Hz",
    "stride_length_m": "m",
    "duty_factor": "1",
    "speed_m_s": "m/s",
    "n_strides": "1",
    "hildebrand_hind_duty_factor": "1",
    "hildebrand_fore_hind_phase": "1",
    "valid_fraction": "1",
    "spike_flagged_fraction": "1",
    "noise_floor_m": "m",
    "cutoff_hz": "Hz",
}


def _gait_scores(
    gait: GaitParameters, pre: PreprocessedTrial, feet: Mapping[str, int], book: _Book
) -> None:
    hind_duty, lag = gait.hildebrand
    counts = {k: int(v.contacts.touchdown.size) for k, v in gait.limbs.items()}
    no_stride = (
        "no complete stride: a stride needs two touch-downs of the same foot inside one "
        f"gap-free stretch; touch-downs per foot {counts} in {pre.markers.shape[0]} frames"
    )
    if set(feet) != _HILDEBRAND_LIMBS:
        hild = (
            f"Hildebrand's gait diagram needs the four limbs LF, RF, LH, RH; this body plan has "
            f"{len(feet)} feet ({', '.join(sorted(feet))})"
        )
    else:
        hild = no_stride
    values = {
        "stride_frequency_hz": gait.stride_frequency_hz,
        "stride_length_m": gait.stride_length_m,
        "duty_factor": gait.duty_factor,
        "speed_m_s": gait.speed_m_s,
        "n_strides": float(gait.n_strides),
        "hildebrand_hind_duty_factor": hind_duty,
        "hildebrand_fore_hind_phase": lag,
        "valid_fraction": pre.valid_fraction,
        "spike_flagged_fraction": pre.flagged_fraction,
        "noise_floor_m": float(np.median(pre.noise_floor_m)),
        "cutoff_hz": float(np.median(pre.cutoff_hz)),
    }
    for name, unit in _GAIT_UNITS.items():
        v = float(values[name])
        note = ""
        if not np.isfinite(v):
            note = hild if name.startswith("hildebrand") else no_stride
            if name == "stride_length_m" and gait.n_strides:
                note = "forward speed undefined over every stride (heading or origin missing)"
        if name == "spike_flagged_fraction":
            note = "; ".join(pre.warnings)
        book.add(name, v, unit, note)
    for name, value in sorted(gait.phase.items()):
        if name != gait.reference_limb:
            why = "" if np.isfinite(value) else f"no touch-down of {name} in a reference stride"
            book.add(f"phase_{name.lower()}", value, "1", why)


_CLASS_UNITS = {
    "step_classes_n": "1",
    "step_class_within_rms_m": "m",
    "step_class_within_fraction": "1",
    "step_class_silhouette": "1",
    "step_class_entropy_bits": "bits",
    "step_class_entropy_rate_bits": "bits/symbol",
}


def _class_scores(
    feet_body: NDArray[np.float64], gait: GaitParameters, p: dict[str, Any], book: _Book
) -> tuple[NDArray[np.int64], dict[str, NDArray[Any]]]:
    ref = gait.limbs[gait.reference_limb]
    empty = np.zeros(0, dtype=np.int64)
    cycles = np.zeros((0, 1))
    if ref.start.size >= 1:
        cycles = step_cycles(
            feet_body, start=ref.start, stop=ref.stop, n_samples=p["cycle_samples"]
        )
        cycles = cycles[np.isfinite(cycles).all(axis=1)]
    if cycles.shape[0] < 2:
        reason = f"step-cycle classes need >= 2 complete reference strides; got {cycles.shape[0]}"
        book.fill(_CLASS_UNITS, {}, reason)
        return empty, {}
    cls = cycle_classes(
        cycles, k_max=p["cycle_k_max"], min_silhouette=p["cycle_min_silhouette"], seed=p["seed"]
    )
    total_ss = float(((cycles - cycles.mean(axis=0)) ** 2).sum())
    within_ss = float(((cycles - cls.centroids[cls.labels]) ** 2).sum())
    freq = cls.sizes / cls.sizes.sum()
    values = {
        "step_classes_n": cls.n_classes,
        "step_class_within_rms_m": np.sum(cls.sizes * cls.within_rms_m) / cls.sizes.sum(),
        "step_class_within_fraction": within_ss / total_ss if total_ss > 0 else math.nan,
        "step_class_silhouette": cls.silhouette,
        "step_class_entropy_bits": float(-(freq * np.log2(freq)).sum()) + 0.0,
        # One class: a constant sequence, whose entropy rate is 0 by definition.
        "step_class_entropy_rate_bits": (
            0.0 if cls.n_classes == 1 else wb._or_nan(entropy.entropy_rate, cls.labels)
        ),
    }
    reasons = {
        "step_class_silhouette": "one class: silhouettes need two or more",
        "step_class_within_fraction": "all cycles identical",
        "step_class_entropy_rate_bits": "too few cycles for an entropy-rate estimate",
    }
    for name, unit in _CLASS_UNITS.items():
        v = float(values[name])
        book.add(name, v, unit, "" if np.isfinite(v) else reasons.get(name, "undefined"))
    plots = {"step_cycle_classes": cls.labels.copy(), "step_cycle_centroids": cls.centroids}
    return cls.labels, plots


_STATE_UNITS = {
    "embedding_delay_s": "s",
    "embedding_dimension": "1",
    "state_window_s": "s",
    "state_variance_explained": "1",
    "rqa_rr": "1",
    "rqa_l_mean_s": "s",
    "rqa_l_max_s": "s",
    "rqa_tt_s": "s",
    "rqa_points": "1",
    "causal_states_n": "1",
    "effective_complexity_bits": "bits",
    "effective_complexity_bits_per_second": "bits/s",
    "total_information_bits": "bits",
    "total_information_bits_per_second": "bits/s",
}


def _whole_body_scores(
    channels: NDArray[np.float64], fs: float, stride_hz: float, p: dict[str, Any], book: _Book
) -> tuple[NDArray[np.float64], int, NDArray[np.float64]]:
    window_s = p["ssa_window_s"]
    if window_s is None:
        window_s = 1.0 / stride_hz if np.isfinite(stride_hz) else 0.5
        book.notes.append(f"state window {window_s:.3g} s (one mean stride period or 0.5 s)")
    try:
        st = wb.whole_body_state(
            channels, frame_rate_hz=fs, window_s=window_s, max_lags=p["ssa_max_lags"],
            max_channels=p["ssa_max_channels"], variance_fraction=p["ssa_variance_fraction"],
            max_components=p["ssa_max_components"], max_delay_s=p["max_delay_s"],
            ami_bins=p["ami_bins"],
        )  # fmt: skip
    except InsufficientDataError as err:
        reason = f"the longest gap-free stretch ({channels.shape[0]} frames) is too short: {err}"
        return _nan_state(book, reason)
    delay = st.delay if p["embedding_delay_samples"] is None else int(p["embedding_delay_samples"])
    r = st.state.shape[1]
    extra = {
        "embedding_delay_s": delay / fs,
        "embedding_dimension": r,
        "state_window_s": (st.window_samples - 1) * st.lag_step / fs,
        "state_variance_explained": float(st.variance_share[:r].sum()),
    }
    image = _state_stage(st.state, delay, fs, p, book, extra)
    book.plots["ssa_variance_share"] = st.variance_share[:20].copy()
    return st.state, delay, image


def _nan_state(book: _Book, reason: str) -> tuple[NDArray[np.float64], int, NDArray[np.float64]]:
    book.fill(_STATE_UNITS, {}, reason)
    for name, unit in wb.COMPLEXITY_UNITS.items():
        book.add(name, math.nan, unit, reason)
    return np.zeros((0, 2)), 1, np.zeros((0, 0))


def _state_stage(
    state: NDArray[np.float64],
    delay: int,
    fs: float,
    p: dict[str, Any],
    book: _Book,
    extra: dict[str, float],
) -> NDArray[np.float64]:
    """RQA (full rate up to rqa_max_points), symbols, two-part code, surrogate z-scores."""
    q = max(1, math.ceil(state.shape[0] / p["rqa_max_points"]))
    points = wb.decimate(state, q)
    delay_q = max(1, round(delay / q))
    ord_delay = delay if p["ordinal_delay_samples"] is None else int(p["ordinal_delay_samples"])
    try:
        values = wb.state_scores(points, delay_q, fs / q, p)
    except InsufficientDataError as err:
        return _nan_state(book, f"state too short for RQA: {err}")[2]
    if ord_delay != delay or q > 1:
        plane = wb._or_nan(
            ordinal.complexity_entropy, state[:, 0], order=p["ordinal_order"], delay=ord_delay
        )
        values.pop("permutation_entropy", None)
        values.pop("js_complexity", None)
        if isinstance(plane, tuple):
            values["permutation_entropy"], values["js_complexity"] = plane
    res = values.pop("_res")
    sample_s = q / fs
    values |= extra | {
        "rqa_rr": res.rr,
        "rqa_l_mean_s": res.l_mean * sample_s,
        "rqa_l_max_s": res.l_max * sample_s,
        "rqa_tt_s": res.tt * sample_s,
        "rqa_points": points.shape[0],
    }
    if q > 1:
        book.notes.append(f"RQA on the state decimated by {q} (rqa_max_points)")
    short = "too few symbols for this estimate (or no causal-state model)"
    causal_note = values.pop("_causal_note", None)
    two_part_note = values.pop("_two_part_note", None)
    entropy_note = values.pop("_entropy_note", None)
    n_sym, step = values.pop("_n_symbols", None), values.pop("_symbol_step", None)
    w, hist = values.pop("_word_length", None), values.pop("_history_length", None)
    if n_sym is not None:
        book.notes.append(
            f"symbols: {n_sym}, one every {step} frames ({step * q / fs:.3g} s); supported "
            f"word length {w}, causal-state history {hist} (Marton-Shields rule)"
        )
        if step == 1 and delay_q < int(p["symbols_per_delay"]):
            book.notes.append("symbol step clipped to one frame (frame rate low for the delay)")
    if causal_note:
        book.notes.append(f"causal states: {causal_note}")
    book.fill(_STATE_UNITS, values, causal_note or short)
    sz = wb.surrogate_z(state, delay, fs, p)
    for name, unit in wb.COMPLEXITY_UNITS.items():
        v = float(values.get(name, math.nan))
        z = sz.z.get(name, math.nan) if sz.z else None
        note = sz.note if np.isfinite(v) else short
        if not np.isfinite(v) and causal_note and name.startswith(("statistical", "causal")):
            flagged = causal_note.startswith("machine")
            note = f"causal-state machine flagged: {causal_note}" if flagged else causal_note
        if not np.isfinite(v) and entropy_note and name == "entropy_rate_bits":
            note = entropy_note
        if two_part_note and name.startswith(("effective", "total")):
            note = f"{two_part_note}; {note}"
        if name in ("rqa_det", "rqa_lam") and np.isfinite(v) and v == 0:
            note = "no line reaches the minimum length; " + note
        if name == "rqa_entr" and not np.isfinite(v):
            note = "no diagonal line reaches lmin (ENTR undefined)"
        book.add(name, v, unit, note, z=None if z is None else float(z))
    # A thumbnail of at most plot_max_size blocks needs no more than 16 points
    # per block: the image is taken from the state decimated that far.
    q_img = max(1, math.ceil(points.shape[0] / (16 * p["plot_max_size"])))
    return recurrence.recurrence_plot_image(
        wb.decimate(points, q_img), recurrence_rate=p["rqa_recurrence_rate"],
        max_size=p["plot_max_size"],
        metric=p["rqa_metric"], seed=p["seed"],
    ).image  # fmt: skip


def _single_foot_scores(
    signal: NDArray[np.float64], fs: float, stride_hz: float, p: dict[str, Any], book: _Book
) -> tuple[NDArray[np.float64], int, NDArray[np.float64]]:
    """The delay embedding of one foot coordinate (the earlier analysis signal)."""
    try:
        delay, dim = _embedding_parameters(signal, fs, stride_hz, p)
        state = embedding.delay_embed(signal, dimension=dim, delay=delay)
    except InsufficientDataError as err:
        return _nan_state(book, f"signal too short for the embedding: {err}")
    extra = {
        "embedding_delay_s": delay / fs,
        "embedding_dimension": dim,
        "state_window_s": (dim - 1) * delay / fs,
        "state_variance_explained": 1.0,
    }
    image = _state_stage(state, delay, fs, p, book, extra)
    return state, delay, image


def _embedding_parameters(
    x: NDArray[np.float64], fs: float, stride_hz: float, p: dict[str, Any]
) -> tuple[int, int]:
    """Delay and dimension of the single-foot signal.

    ``delay_method="quarter_stride"`` uses a quarter of the mean stride period
    (the first zero of a sinusoid's autocorrelation): a fallback for signals,
    such as a saw-tooth fore-aft foot excursion, whose histogram AMI stays
    high and has spurious early minima.
    """
    max_delay = max(2, min(round(p["max_delay_s"] * fs), x.size // 10))
    delay = p["embedding_delay_samples"]
    if delay is None and p["delay_method"] == "quarter_stride":
        if not np.isfinite(stride_hz):
            raise InsufficientDataError("markers", "movement_summary", "complete strides", x)
        delay = max(1, round(fs / stride_hz / 4))
    elif delay is None:
        delay = embedding.first_ami_minimum(x, max_lag=max_delay, n_bins=p["ami_bins"])
    dim = p["embedding_dimension"]
    if dim is None:
        dim = embedding.embedding_dimension(
            x, delay=delay, max_dim=p["max_dimension"], method=p["dimension_method"]
        )
    return int(delay), int(dim)


_INTERLIMB_UNITS = {
    "interlimb_synchronisation_mean": "1",
    "interlimb_synchronisation_min": "1",
    "interlimb_joint_recurrence_rate": "1",
}


def _interlimb_scores(
    limbs: Mapping[str, NDArray[np.float64]], delay: int, p: dict[str, Any], book: _Book
) -> dict[str, NDArray[Any]]:
    if len(limbs) < 2:
        book.fill(_INTERLIMB_UNITS, {}, "interlimb coordination needs at least two feet")
        return {}
    try:
        res = wb.interlimb(limbs, delay, p)
    except InsufficientDataError as err:
        book.fill(_INTERLIMB_UNITS, {}, f"too few frames for joint recurrence: {err}")
        return {}
    upper = np.triu_indices(len(res.limbs), 1)
    sync = res.synchronisation[upper]
    values = {
        "interlimb_synchronisation_mean": float(np.nanmean(sync))
        if np.isfinite(sync).any()
        else math.nan,
        "interlimb_synchronisation_min": float(np.nanmin(sync))
        if np.isfinite(sync).any()
        else math.nan,
        "interlimb_joint_recurrence_rate": float(np.nanmean(res.jrr[upper])),
    }
    book.fill(_INTERLIMB_UNITS, values, "a foot that never moves has no recurrence threshold")
    return {"interlimb_synchronisation": res.synchronisation}
