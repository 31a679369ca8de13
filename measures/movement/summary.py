"""Movement summary: one trial's markers in, a list of scores (and plot arrays) out.

Pipeline (every parameter is in :data:`MOVEMENT_DEFAULTS`):

1. :func:`measures.preprocess_trial` (spikes, gaps, residual-analysis cut-off,
   zero-lag Butterworth);
2. :func:`measures.gait_parameters` (contacts, strides, duty factor, phases,
   Hildebrand point) and step-cycle classes from the reference limb's strides
   (body-frame trajectories of every foot, time-normalised);
3. the *analysis signal*: the body-frame height (or another chosen axis) of
   the ``signal_limb`` foot over the longest valid segment (nonlinear measures
   need contiguous samples, so segments are never spliced);
4. delay (first AMI minimum) and dimension (FNN or Cao) of that signal, its delay
   embedding, RQA, ordinal complexity-entropy, symbolic entropy rate and
   causal states, sample entropy, and an SSA pair for plots.

RQA cost is bounded: when the signal has more than ``rqa_max_points``
samples it is decimated (``scipy.signal.resample_poly``, anti-aliased) by the
smallest integer factor q that brings it under the bound, and embedded with
delay ``max(1, round(delay / q))`` so the embedding window spans the same
time. Line lengths are reported in seconds so they do not depend on q.

Symbolic measures (entropy rate, LZ76, causal states) use ordinal symbols of
order ``symbol_order`` with the embedding delay, one per frame. Sample
entropy uses the *coarse series*, the signal taken once per embedding delay:
its templates are runs of consecutive samples, so this makes a template span
the same stretch of movement as a delay vector whatever the frame rate.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy.signal import resample_poly

from measures._types import Score
from measures._validation import InsufficientDataError, InvalidParameterError, as_float_array
from measures.dynamics import embedding, recurrence
from measures.information import causal, entropy, ordinal, sampen, symbolic
from measures.movement.bodyframe import body_frame
from measures.movement.gait import GaitParameters, cycle_classes, gait_parameters, step_cycles
from measures.movement.kinematics import PreprocessedTrial, preprocess_trial

__all__ = ["MOVEMENT_DEFAULTS", "MovementSummary", "movement_summary"]

#: Every parameter of :func:`movement_summary` with its default.
MOVEMENT_DEFAULTS: dict[str, Any] = {
    # preprocessing (measures.movement.kinematics)
    "max_gap_s": 0.05,
    "cutoff_hz": None,  # None: Winter's residual analysis per marker and axis
    "filter_order": 2,
    "remove_spikes": True,
    "spike_threshold": 8.0,
    "min_segment_s": 0.1,
    # body frame (measures.movement.bodyframe)
    "up": (0.0, 0.0, 1.0),
    "treadmill_speed_m_s": None,
    # contacts and strides (measures.movement.gait)
    "reference_limb": "LH",
    "contact_low_fraction": 0.2,
    "contact_high_fraction": 0.4,
    "contact_velocity_fraction": 0.1,
    "min_phase_s": 0.01,
    "contact_min_lift_m": 1e-3,  # 5 x the 0.2 mm capture resolution (common practice)
    "contact_method": "speed",  # ground speed: robust where stones lift a planted foot
    "contact_speed_low_fraction": 0.1,
    "contact_speed_high_fraction": 0.2,
    # step-cycle classes
    "cycle_samples": 101,
    "cycle_k_max": 6,
    "cycle_min_silhouette": 0.5,
    "seed": 0,
    # analysis signal
    "signal_limb": None,  # None: the reference limb
    "signal_axis": "z",  # body frame: x forward, y left, z up (foot height)
    # embedding
    "embedding_delay": None,  # samples at the frame rate; None: from delay_method
    "delay_method": "ami",  # "ami" (first AMI minimum) or "quarter_stride"
    "embedding_dimension": None,  # None: from dimension_method
    "dimension_method": "fnn",  # "fnn" (Kennel et al. 1992) or "cao" (Cao 1997)
    "ami_bins": 32,
    "max_delay_s": 0.5,
    "max_dimension": 8,
    "ssa_window": None,  # samples; None: one mean stride period
    # recurrence quantification
    "rqa_recurrence_rate": 0.05,
    "rqa_theiler": None,  # None: the (decimated) embedding delay
    "rqa_lmin": 2,
    "rqa_vmin": 2,
    "rqa_metric": "euclidean",
    "rqa_max_points": 10_000,
    "plot_max_size": 256,
    # ordinal patterns (complexity-entropy plane)
    "ordinal_order": 4,
    "ordinal_delay": None,  # None: the embedding delay
    # symbolic dynamics on the coarse series
    "symbol_order": 2,  # ordinal symbols of this order at the embedding delay (2: up/down)
    "entropy_method": "block",
    # sample entropy on the coarse series
    "sampen_m": 2,
    "sampen_r": 0.2,
}

_AXES = {"x": 0, "y": 1, "z": 2}


@dataclass(frozen=True)
class MovementSummary:
    """Result of :func:`movement_summary`.

    Attributes
    ----------
    scores : tuple of Score
    params : dict
        Every parameter used (defaults merged with the caller's).
    signal : ndarray (n,)
        Analysis signal (body-frame foot coordinate, metres) at the frame rate.
    signal_time_s : ndarray (n,)
    recurrence_image : ndarray (size, size)
        Block-averaged recurrence plot of the RQA input.
    ssa_pair : ndarray (n_points, 2)
        The two leading SSA components of the analysis signal.
    class_sequence : ndarray of int (n_cycles,)
        Step-cycle class of each reference stride, in time order.
    gait : GaitParameters
    preprocessed : PreprocessedTrial
    """

    scores: tuple[Score, ...]
    params: dict[str, Any]
    signal: NDArray[np.float64]
    signal_time_s: NDArray[np.float64]
    recurrence_image: NDArray[np.float64]
    ssa_pair: NDArray[np.float64]
    class_sequence: NDArray[np.int64]
    gait: GaitParameters
    preprocessed: PreprocessedTrial

    def score(self, name: str) -> float:
        """Value of the score called ``name`` (KeyError if absent)."""
        for s in self.scores:
            if s.name == name:
                return s.value
        raise KeyError(name)


def _merge_params(params: Mapping[str, Any] | None) -> dict[str, Any]:
    merged = dict(MOVEMENT_DEFAULTS)
    for key, value in (params or {}).items():
        if key not in MOVEMENT_DEFAULTS:
            raise InvalidParameterError(
                "params", "movement_summary", f"keys among {sorted(MOVEMENT_DEFAULTS)}", key
            )
        merged[key] = value
    if merged["delay_method"] not in ("ami", "quarter_stride"):
        raise InvalidParameterError(
            "params",
            "movement_summary",
            "delay_method 'ami' or 'quarter_stride'",
            merged["delay_method"],
        )
    if merged["signal_axis"] not in _AXES:
        raise InvalidParameterError(
            "params", "movement_summary", "signal_axis one of 'x', 'y', 'z'", merged["signal_axis"]
        )
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


def movement_summary(
    markers: ArrayLike,
    *,
    frame_rate_hz: float,
    marker_names: list[str] | tuple[str, ...],
    roles: Mapping[str, Any],
    params: Mapping[str, Any] | None = None,
) -> MovementSummary:
    """Score one trial's movement: gait, embedding, RQA, entropies, step classes.

    Parameters
    ----------
    markers : array (n_frames, n_markers, 3), float64, metres, NaN for gaps
    frame_rate_hz : float
    marker_names : sequence of str (n_markers,)
    roles : mapping
        ``{"anterior": name or [names], "posterior": name or [names],
        "feet": {"LF": name, "RF": name, "LH": name, "RH": name}}``.
    params : mapping, optional
        Overrides of :data:`MOVEMENT_DEFAULTS`; unknown keys raise
        :class:`InvalidParameterError`.

    Returns
    -------
    MovementSummary
        Scores are NaN (never 0) where the data do not support a measure
        (too few strides or symbols).

    References
    ----------
    D. A. Winter (2009), *Biomechanics and Motor Control of Human Movement*;
    M. Hildebrand (1965), *Science* 150:701; A. M. Fraser & H. L. Swinney
    (1986), *Phys. Rev. A* 33:1134; M. B. Kennel, R. Brown & H. D. I.
    Abarbanel (1992), *Phys. Rev. A* 45:3403; N. Marwan et al. (2007),
    *Phys. Rep.* 438:237; C. Bandt & B. Pompe (2002), *Phys. Rev. Lett.*
    88:174102; O. A. Rosso et al. (2007), *Phys. Rev. Lett.* 99:154102;
    C. R. Shalizi & K. L. Klinkner (2004), UAI; J. S. Richman & J. R.
    Moorman (2000), *Am. J. Physiol.* 278:H2039.
    """
    fn = "movement_summary"
    p = _merge_params(params)
    arr = as_float_array("markers", markers, fn, ndim=3, allow_nan=True)
    names = list(marker_names)
    if len(names) != arr.shape[1]:
        raise InvalidParameterError("marker_names", fn, f"{arr.shape[1]} names", marker_names)
    anterior, posterior, feet = _role_indices(names, roles)
    pre = preprocess_trial(
        arr, frame_rate_hz=frame_rate_hz, max_gap_s=p["max_gap_s"], cutoff_hz=p["cutoff_hz"],
        order=p["filter_order"], remove_spikes=p["remove_spikes"],
        spike_threshold=p["spike_threshold"], min_segment_s=p["min_segment_s"],
    )  # fmt: skip
    fs = pre.frame_rate_hz
    gait = gait_parameters(
        pre.markers, frame_rate_hz=fs, feet=feet, anterior=anterior, posterior=posterior,
        up=p["up"], treadmill_speed_m_s=p["treadmill_speed_m_s"],
        reference_limb=p["reference_limb"], low_fraction=p["contact_low_fraction"],
        high_fraction=p["contact_high_fraction"],
        velocity_fraction=p["contact_velocity_fraction"], min_phase_s=p["min_phase_s"],
        min_lift_m=p["contact_min_lift_m"], contact_method=p["contact_method"],
        speed_low_fraction=p["contact_speed_low_fraction"],
        speed_high_fraction=p["contact_speed_high_fraction"],
    )  # fmt: skip
    body = body_frame(pre.markers, anterior=anterior, posterior=posterior, up=p["up"])
    scores = _gait_scores(gait, pre)
    classes, class_scores = _class_scores(body.markers[:, list(feet.values())], gait, p)
    scores += class_scores
    limb = p["signal_limb"] or gait.reference_limb
    if limb not in feet:
        raise InvalidParameterError("params", fn, f"signal_limb among {sorted(feet)}", limb)
    a, b = max(pre.segments, key=lambda s: s[1] - s[0])
    signal = body.markers[a:b, feet[limb], _AXES[p["signal_axis"]]]
    nonlinear, image, ssa_pair = _nonlinear_scores(signal, fs, gait.stride_frequency_hz, p)
    scores += nonlinear
    return MovementSummary(
        scores=tuple(scores),
        params=p,
        signal=signal,
        signal_time_s=np.arange(a, b) / fs,
        recurrence_image=image,
        ssa_pair=ssa_pair,
        class_sequence=classes,
        gait=gait,
        preprocessed=pre,
    )


def _gait_scores(gait: GaitParameters, pre: PreprocessedTrial) -> list[Score]:
    hind_duty, lag = gait.hildebrand
    out = [
        Score("stride_frequency_hz", gait.stride_frequency_hz, "Hz"),
        Score("stride_length_m", gait.stride_length_m, "m"),
        Score("duty_factor", gait.duty_factor, "1"),
        Score("speed_m_s", gait.speed_m_s, "m/s"),
        Score("n_strides", float(gait.n_strides), "1"),
        Score("hildebrand_hind_duty_factor", hind_duty, "1"),
        Score("hildebrand_fore_hind_phase", lag, "1"),
    ]
    out += [
        Score(f"phase_{name.lower()}", value, "1")
        for name, value in sorted(gait.phase.items())
        if name != gait.reference_limb
    ]
    out += [
        Score("valid_fraction", pre.valid_fraction, "1"),
        Score("noise_floor_m", float(np.median(pre.noise_floor_m)), "m"),
        Score("cutoff_hz", float(np.median(pre.cutoff_hz)), "Hz"),
    ]
    return out


def _or_nan(func: Any, *args: Any, **kwargs: Any) -> Any:
    """Call a measure; NaN when the data are too short for it (never 0)."""
    try:
        return func(*args, **kwargs)
    except InsufficientDataError:
        return float("nan")


#: Scores of the step-class and nonlinear stages, in order, with their units.
_CLASS_UNITS = {
    "step_classes_n": "1",
    "step_class_within_rms_m": "m",
    "step_class_entropy_rate_bits": "bits/symbol",
}
_NONLINEAR_UNITS = {
    "embedding_delay_s": "s",
    "embedding_dimension": "1",
    "rqa_rr": "1",
    "rqa_det": "1",
    "rqa_lam": "1",
    "rqa_l_mean_s": "s",
    "rqa_l_max_s": "s",
    "rqa_entr": "nats",
    "rqa_tt_s": "s",
    "rqa_points": "1",
    "permutation_entropy": "1",
    "js_complexity": "1",
    "entropy_rate_bits": "bits/symbol",
    "lz76_entropy_rate_bits": "bits/symbol",
    "statistical_complexity_bits": "bits",
    "causal_entropy_rate_bits": "bits/symbol",
    "causal_states_n": "1",
    "sample_entropy": "nats",
}


def _as_scores(values: Mapping[str, float], units: Mapping[str, str]) -> list[Score]:
    """Scores in the order of ``units``; a value the data did not support is NaN."""
    return [Score(name, float(values.get(name, np.nan)), unit) for name, unit in units.items()]


def _class_scores(
    feet_body: NDArray[np.float64], gait: GaitParameters, p: dict[str, Any]
) -> tuple[NDArray[np.int64], list[Score]]:
    ref = gait.limbs[gait.reference_limb]
    if ref.start.size < 2:
        return np.zeros(0, dtype=np.int64), _as_scores({}, _CLASS_UNITS)
    cycles = step_cycles(feet_body, start=ref.start, stop=ref.stop, n_samples=p["cycle_samples"])
    cycles = cycles[np.isfinite(cycles).all(axis=1)]
    if cycles.shape[0] < 2:
        return np.zeros(0, dtype=np.int64), _as_scores({}, _CLASS_UNITS)
    cls = cycle_classes(
        cycles, k_max=p["cycle_k_max"], min_silhouette=p["cycle_min_silhouette"], seed=p["seed"]
    )
    values = {
        "step_classes_n": cls.n_classes,
        "step_class_within_rms_m": np.sum(cls.sizes * cls.within_rms_m) / cls.sizes.sum(),
        # One class: a constant sequence, whose entropy rate is 0 by definition.
        "step_class_entropy_rate_bits": (
            0.0 if cls.n_classes == 1 else _or_nan(entropy.entropy_rate, cls.labels)
        ),
    }
    return cls.labels, _as_scores(values, _CLASS_UNITS)


def _embedding_parameters(
    x: NDArray[np.float64], fs: float, stride_hz: float, p: dict[str, Any]
) -> tuple[int, int]:
    """Delay and dimension of the analysis signal.

    ``delay_method="quarter_stride"`` uses a quarter of the mean stride period
    (the first zero of a sinusoid's autocorrelation): a fallback for signals,
    such as a saw-tooth fore-aft foot excursion, whose histogram AMI stays
    high and has spurious early minima.
    """
    max_delay = max(2, min(round(p["max_delay_s"] * fs), x.size // 10))
    delay = p["embedding_delay"]
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


def _nonlinear_scores(
    signal: NDArray[np.float64], fs: float, stride_hz: float, p: dict[str, Any]
) -> tuple[list[Score], NDArray[np.float64], NDArray[np.float64]]:
    """Embedding, RQA, ordinal, symbolic and sample-entropy scores of the signal.

    A signal too short for the embedding gives NaN for every score here, so
    the gait scores of a short or gappy trial survive.
    """
    try:
        delay, dim = _embedding_parameters(signal, fs, stride_hz, p)
        points, q, delay_q = _rqa_points(signal, delay, dim, p)
        values: dict[str, float] = {"embedding_delay_s": delay / fs, "embedding_dimension": dim}
        values |= _rqa_values(points, delay_q, p, sample_s=q / fs)
        image = recurrence.recurrence_plot_image(
            points, recurrence_rate=p["rqa_recurrence_rate"], max_size=p["plot_max_size"],
            metric=p["rqa_metric"], seed=p["seed"],
        ).image  # fmt: skip
    except InsufficientDataError:
        return _as_scores({}, _NONLINEAR_UNITS), np.zeros((0, 0)), np.zeros((0, 2))
    ord_delay = delay if p["ordinal_delay"] is None else int(p["ordinal_delay"])
    plane = _or_nan(ordinal.complexity_entropy, signal, order=p["ordinal_order"], delay=ord_delay)
    if isinstance(plane, tuple):
        values["permutation_entropy"], values["js_complexity"] = plane
    values |= _symbolic_values(signal, delay, p)
    values["sample_entropy"] = _or_nan(
        sampen.sample_entropy, signal[::delay], m=p["sampen_m"], r=p["sampen_r"]
    )
    # One stride period lets the leading pair capture the step oscillation;
    # singular_spectrum reconstructs every component, so the window is also
    # what bounds its cost.
    period = round(fs / stride_hz) if np.isfinite(stride_hz) else 2 * dim * delay
    window = p["ssa_window"] or int(np.clip(period, 2, signal.size // 2))
    pair = _or_nan(embedding.singular_spectrum, signal, window=window)
    pair = np.zeros((0, 2)) if isinstance(pair, float) else pair.components[:2].T
    return _as_scores(values, _NONLINEAR_UNITS), image, pair


def _rqa_points(
    signal: NDArray[np.float64], delay: int, dim: int, p: dict[str, Any]
) -> tuple[NDArray[np.float64], int, int]:
    """Delay vectors for RQA, decimated so that at most ``rqa_max_points`` remain.

    The smallest integer factor q that fits is used, with an anti-aliasing
    polyphase filter, and the delay becomes ``max(1, round(delay / q))`` so
    the embedding window spans the same time. Returns (points, q, delay_q).
    """
    q = max(1, math.ceil(signal.size / p["rqa_max_points"]))
    x = resample_poly(signal, 1, q) if q > 1 else signal
    delay_q = max(1, round(delay / q))
    return embedding.delay_embed(x, dimension=dim, delay=delay_q), q, delay_q


def _rqa_values(
    points: NDArray[np.float64], delay_q: int, p: dict[str, Any], *, sample_s: float
) -> dict[str, float]:
    theiler = delay_q if p["rqa_theiler"] is None else int(p["rqa_theiler"])
    res = recurrence.rqa(
        points, recurrence_rate=p["rqa_recurrence_rate"], theiler=theiler, lmin=p["rqa_lmin"],
        vmin=p["rqa_vmin"], metric=p["rqa_metric"], seed=p["seed"],
    )  # fmt: skip
    return {
        "rqa_rr": res.rr,
        "rqa_det": res.det,
        "rqa_lam": res.lam,
        "rqa_l_mean_s": res.l_mean * sample_s,
        "rqa_l_max_s": res.l_max * sample_s,
        "rqa_entr": res.entr,
        "rqa_tt_s": res.tt * sample_s,
        "rqa_points": points.shape[0],
    }


def _symbolic_values(
    signal: NDArray[np.float64], delay: int, p: dict[str, Any]
) -> dict[str, float]:
    symbols = _or_nan(symbolic.ordinal_patterns, signal, order=p["symbol_order"], delay=delay)
    if not isinstance(symbols, np.ndarray):
        return {}
    values = {
        "entropy_rate_bits": _or_nan(entropy.entropy_rate, symbols, method=p["entropy_method"]),
        "lz76_entropy_rate_bits": _or_nan(entropy.entropy_rate, symbols, method="lz76"),
    }
    model = _or_nan(causal.causal_states, symbols)
    if not isinstance(model, float):
        values["statistical_complexity_bits"] = model.statistical_complexity
        values["causal_entropy_rate_bits"] = model.entropy_rate
        values["causal_states_n"] = model.n_states
    return values
