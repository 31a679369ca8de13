"""Whole-body state of a trial and the complexity scores computed on it.

The state is the multichannel singular spectrum analysis (M-SSA) of the
body-frame 3D trajectories of every marker with a role (each foot and the
body reference markers): windowed PCA over all channels (Broomhead & King
1986; multichannel form after Ghil et al. 2002). Steps:

1. channels: the body-frame x, y, z of each role marker (metres, not
   rescaled: each channel weighs by its own variance, so a swinging foot
   counts more than a nearly fixed body marker);
2. channel compression: when there are more than ``max_channels`` channels
   they are replaced by their leading principal components (the usual
   pre-filtering of M-SSA, Ghil et al. 2002; from memory), because the
   lag-covariance matrix grows as (channels x lags)^2;
3. window: ``window_s`` of data (default one mean stride period) in at most
   ``max_lags`` lags, the lag step ``s`` chosen so the lags span the window;
4. state: the projections on the leading eigenvectors, r of them: the
   smallest r holding ``variance_fraction`` of the variance, clipped to
   ``[2, max_components]``.

Symbols of the state (the default symbolisation): the state is read every
``delay / symbols_per_delay`` frames (the delay is the first zero of the
autocorrelation of its leading component, a quarter stride for an oscillating
gait; default 4 readings per delay, 16 per stride), and each of the leading
``symbol_channels`` components gives an ordinal pattern of order
``symbol_order`` between consecutive readings (up/down for order 2); the
joint pattern of those channels is the symbol (multichannel ordinal patterns,
after Keller & Lauffer 2003; from memory). Tying the step to the delay makes
the symbol rate a property of the movement, not of the frame rate (at a low
frame rate the step is clipped to one frame, noted). Reading the state more
than once per delay gives short trials enough symbols: a 4 s pass of five
strides gives about 80, where one per delay gave 20.

Word and history lengths follow the sample size
(:func:`measures.information.symbolic.supported_word_length`, after Marton &
Shields 1994): the block entropy rate uses the longest supported word length
w (at least 2, so that h = H(w) - H(w-1) conditions on one symbol or more),
causal states histories of length w - 1 (at least 1; the machine is read off
(L+1)-words) with the default family-wise level of
:func:`measures.information.causal.causal_states`. When the word counts
saturate (W(d + 1) = W(d): a periodic sequence, the last d symbols fix the
next) at a length the rule does not reach, both use the longer
:func:`measures.information.causal.determining_history` (causal_states'
own default rule), where every word is well supported. A sequence too short for
w = 2 gives NaN with a note naming N and w.

Statistical complexity is withheld when the history length set it
(:func:`history_bound_note`): if the reconstructed states are fixed by the last
j symbols and every j-word is a state of its own (C_mu within
``causal_ceiling_fraction`` of log2 of their number), C_mu is only the entropy
of the last j symbols and a lower bound of the process's; it goes into the
note and the score is NaN (periodic machines, whose states cannot split, are
exempt, and so are machines whose longer histories were tested with about 50 counts
per cell and merged into the j-symbol states). On demo-length passes (55-155
symbols, histories of 1-2) this is the usual case: the four joint up/down
symbols, read 16 times a stride, are their own states and C = log2 4 on every
trial.

Surrogate z-scores: each complexity score is recomputed on
``n_surrogates`` multichannel IAAFT surrogates of the state (Schreiber &
Schmitz 1996, 2000: same amplitude distribution per component, same auto-
and cross-spectra). To bound the cost the data and its surrogates are both
evaluated on the state decimated (anti-aliased) to about
``max(2, symbols_per_delay)`` points per delay (so symbols are read at the
data's step), first ``surrogate_max_points`` points, with the exact recurrence
threshold; the z-score compares like with like. A |z| below 2 says the
score does not tell this movement apart from a linear Gaussian process with
the same spectra.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np
from numpy.typing import NDArray
from scipy.signal import resample_poly

from measures._validation import InsufficientDataError
from measures.dynamics import embedding, recurrence
from measures.information import causal, entropy, ordinal, sampen, surrogates, symbolic, two_part

__all__ = ["WholeBodyState", "history_bound_note", "state_scores", "whole_body_state"]


@dataclass(frozen=True)
class WholeBodyState:
    """Result of :func:`whole_body_state`.

    Attributes
    ----------
    state : ndarray (K, r)
        M-SSA principal components (metres), one row per window start.
    delay : int
        Decorrelation delay (frames): first zero of the autocorrelation of the
        leading component (a quarter stride for an oscillating gait).
    window_samples : int
        Lags L.
    lag_step : int
        Frames between lags.
    n_channels : int
        Channels after compression.
    variance_share : ndarray
        Variance share of every M-SSA component (descending).
    """

    state: NDArray[np.float64]
    delay: int
    window_samples: int
    lag_step: int
    n_channels: int
    variance_share: NDArray[np.float64]


def whole_body_state(
    channels: NDArray[np.float64],
    *,
    frame_rate_hz: float,
    window_s: float,
    max_lags: int = 32,
    max_channels: int = 8,
    variance_fraction: float = 0.9,
    max_components: int = 6,
    max_delay_s: float = 0.5,
    ami_bins: int = 32,
) -> WholeBodyState:
    """M-SSA state of ``channels (N, c)`` (see the module notes for the rule)."""
    x = channels - channels.mean(axis=0)
    if x.shape[1] > max_channels:
        # Spatial PCA first: the leading max_channels components of the channels.
        _, vecs = np.linalg.eigh(x.T @ x)
        x = x @ vecs[:, ::-1][:, :max_channels]
    span = max(2, round(window_s * frame_rate_hz))
    lags = int(min(max_lags, span + 1))
    step = max(1, round(span / (lags - 1)))
    ssa = embedding.multichannel_ssa(
        x, window_samples=lags, lag_step=step, variance_fraction=variance_fraction,
        max_components=max_components,
    )  # fmt: skip
    lead = ssa.state[:, 0]
    max_lag = max(2, min(round(max_delay_s * frame_rate_hz), lead.size // 10))
    delay = _acf_zero(lead, max_lag)
    return WholeBodyState(ssa.state, int(delay), lags, step, x.shape[1], ssa.variance_share)


def _acf_zero(x: NDArray[np.float64], max_lag: int) -> int:
    """First lag where the autocorrelation falls to 0 (1/e if it never does by max_lag).

    The first zero of the autocorrelation is a common-practice delay; for the
    oscillating leading component of a gait it is a quarter of the stride. The
    histogram AMI of that smooth full-rate component has spurious early minima
    (a few frames at 300 Hz), so it is not used here.
    """
    xc = x - x.mean()
    n = xc.size
    spec = np.fft.rfft(xc, 2 * n)
    acf = np.fft.irfft(spec * np.conj(spec))[: max_lag + 1]
    acf = acf / acf[0] if acf[0] > 0 else acf
    below = np.flatnonzero(acf[1:] <= 0.0)
    if below.size:
        return int(below[0]) + 1
    below = np.flatnonzero(acf[1:] <= 1 / np.e)
    return int(below[0]) + 1 if below.size else int(max_lag)


def decimate(x: NDArray[np.float64], q: int) -> NDArray[np.float64]:
    """Anti-aliased decimation by an integer factor along axis 0 (identity for q = 1)."""
    return resample_poly(x, 1, q, axis=0) if q > 1 else x


def symbol_step(delay: int, per_delay: int) -> int:
    """Frames between symbol readings: ``delay / per_delay``, rounded, at least 1."""
    return max(1, round(delay / max(1, int(per_delay))))


def state_symbols(
    state: NDArray[np.float64], delay: int, *, order: int, channels: int, per_delay: int = 1
) -> NDArray[np.int64]:
    """Joint ordinal symbols of the leading components, read every ``symbol_step`` frames."""
    coarse = state[:: symbol_step(delay, per_delay), : max(1, min(channels, state.shape[1]))]
    codes = [
        symbolic.ordinal_patterns(coarse[:, i], order=order, delay=1)
        for i in range(coarse.shape[1])
    ]
    return symbolic.joint_symbols(codes)


#: Complexity scores (and units) computed on the state; each gets a surrogate z.
COMPLEXITY_UNITS = {
    "rqa_det": "1",
    "rqa_lam": "1",
    "rqa_entr": "nats",
    "permutation_entropy": "1",
    "js_complexity": "1",
    "entropy_rate_bits": "bits/symbol",
    "lz76_entropy_rate_bits": "bits/symbol",
    "statistical_complexity_bits": "bits",
    "causal_entropy_rate_bits": "bits/symbol",
    "sample_entropy": "nats",
    "effective_complexity_bits_per_symbol": "bits/symbol",
    "total_information_bits_per_symbol": "bits/symbol",
}


def _or_nan(func: Callable[..., Any], *args: Any, **kwargs: Any) -> Any:
    try:
        return func(*args, **kwargs)
    except InsufficientDataError:
        return math.nan


def symbolic_values(
    symbols: NDArray[np.int64], symbol_rate_hz: float, p: Mapping[str, Any]
) -> dict[str, float]:
    """Entropy rates, causal states and the two-part code of a symbol sequence."""
    n = int(symbols.size)
    k = max(2, int(np.unique(symbols).size))
    # Saturating word counts (the last d symbols fix the next) support longer words.
    determined = causal.determining_history(symbols)
    w = max(symbolic.supported_word_length(symbols), determined)
    # Histories of length L are read off (L+1)-words; causal_states refuses k**(L+1) > N.
    history = w - 1
    while history >= 1 and k ** (history + 1) > n:
        history -= 1
    values: dict[str, Any] = {
        "lz76_entropy_rate_bits": _or_nan(entropy.entropy_rate, symbols, method="lz76"),
        "_word_length": w,
        "_history_length": history,
    }
    if p["entropy_method"] != "block":
        values["entropy_rate_bits"] = _or_nan(
            entropy.entropy_rate, symbols, method=p["entropy_method"]
        )
    elif w >= 2:
        values["entropy_rate_bits"] = _or_nan(entropy.entropy_rate, symbols, max_length=w)
    else:
        values["_entropy_note"] = (
            f"{n} symbols support words of length {w} (< 2; Marton-Shields rule, "
            "supported_word_length): no entropy rate"
        )
    model = math.nan
    if determined > max(history, 0):
        # The words saturate (a periodic stretch: the last d symbols fix the next) at a
        # length the rule above does not reach; causal_states' own default takes it.
        model = _or_nan(causal.causal_states, symbols)
        if not isinstance(model, float):
            values["_history_length"] = model.max_history
    elif history >= 1:
        model = _or_nan(causal.causal_states, symbols, max_history=history)
    else:
        values["_causal_note"] = (
            f"{n} symbols support histories of length {history} (< 1; Marton-Shields rule, "
            "supported_word_length): no causal states"
        )
    if not isinstance(model, float):
        if model.reliable:
            values["causal_entropy_rate_bits"] = model.entropy_rate
            values["causal_states_n"] = model.n_states
            bound = history_bound_note(model, symbols, float(p["causal_ceiling_fraction"]))
            if bound:
                values["_causal_note"] = bound
            else:
                values["statistical_complexity_bits"] = model.statistical_complexity
        else:
            # A machine that explains too little of the sequence is never reported as if
            # it were right (Shalizi & Klinkner 2004 reconstruct a synchronised machine).
            values["_causal_note"] = model.note
    # The two-part code over context models, coded in fixed windows so that trials of
    # different length compare (Gell-Mann & Lloyd 1996; measures.information.two_part).
    code = _or_nan(two_part.two_part_code, symbols, sample_rate_hz=symbol_rate_hz)
    if not isinstance(code, float):
        values["effective_complexity_bits"] = code.effective_complexity_bits
        values["effective_complexity_bits_per_symbol"] = code.effective_complexity_bits_per_symbol
        values["effective_complexity_bits_per_second"] = float(
            code.effective_complexity_bits_per_second
        )
        values["total_information_bits"] = code.total_information_bits
        values["total_information_bits_per_symbol"] = code.total_information_bits_per_symbol
        values["total_information_bits_per_second"] = float(code.total_information_bits_per_second)
        if not code.comparable:
            values["_two_part_note"] = code.note
    return values


def history_bound_note(
    model: causal.CausalStateModel, symbols: NDArray[np.int64], ceiling_fraction: float
) -> str:
    """Why C_mu is withheld when the history length, not the data, set it ("" if not).

    A machine whose states are fixed by the last j symbols
    (``model.effective_history``) has at most as many states as distinct j-words
    (``model.history_ceiling_bits``). When its C_mu reaches ``ceiling_fraction``
    of that ceiling every j-word is a state of its own, evenly occupied, and
    C_mu is the entropy of the last j symbols. It is withheld unless

    * every state's next symbol is certain (a periodic machine: its states
      cannot split, the value is exact), or
    * histories longer than j were tested with support
      (:func:`measures.information.causal.longer_histories_supported`: about 50
      counts per observed cell) and merged into the j-symbol states.

    Otherwise longer or better-supported histories could split those states,
    and splitting can only raise the entropy of the state distribution
    (refinement), so the value is a lower bound of the process's C_mu set by j
    and the alphabet: a finely read rhythm with one-symbol states gives log2 k
    on every short trial, whatever the movement.
    """
    ceiling = model.history_ceiling_bits
    c = model.statistical_complexity
    if model.deterministic or ceiling <= 0 or c < ceiling_fraction * ceiling:
        return ""
    if causal.longer_histories_supported(model, symbols):
        return ""
    j = model.effective_history
    longer = (
        f"{model.n_symbols} symbols support no longer history"
        if model.max_history <= j
        else f"histories up to {model.max_history} had too few counts to split them"
    )
    return (
        f"history-bound: the causal states are fixed by the last {j} symbol(s) ({longer}) "
        f"and every {j}-word is a state of its own, so "
        f"C = {c:.3f} bits sits at its ceiling log2 {round(2**ceiling)} = {ceiling:.3f} bits, "
        "set by the history length and the alphabet, not measured; the statistical "
        f"complexity is at least {c:.3f} bits (lower bound, not reported as a score)"
    )


def _rqa_values(
    points: NDArray[np.float64], delay: int, p: Mapping[str, Any], threshold_method: str
) -> dict[str, Any]:
    theiler = delay if p["rqa_theiler_samples"] is None else int(p["rqa_theiler_samples"])
    res = recurrence.rqa(
        points, recurrence_rate=p["rqa_recurrence_rate"], theiler=theiler, lmin=p["rqa_lmin"],
        vmin=p["rqa_vmin"], metric=p["rqa_metric"], seed=p["seed"],
        threshold_method=threshold_method,
    )  # fmt: skip
    return {"rqa_det": res.det, "rqa_lam": res.lam, "rqa_entr": res.entr, "_res": res}


def state_scores(
    state: NDArray[np.float64],
    delay: int,
    frame_rate_hz: float,
    p: Mapping[str, Any],
    *,
    threshold_method: str = "sampled",
) -> dict[str, Any]:
    """Every complexity score of a state sampled at ``frame_rate_hz`` (values, no z)."""
    values: dict[str, Any] = _rqa_values(state, delay, p, threshold_method)
    lead = state[:, 0]
    plane = _or_nan(ordinal.complexity_entropy, lead, order=p["ordinal_order"], delay=delay)
    if isinstance(plane, tuple):
        values["permutation_entropy"], values["js_complexity"] = plane
    per_delay = int(p["symbols_per_delay"])
    symbols = _or_nan(
        state_symbols, state, delay, order=p["symbol_order"], channels=p["symbol_channels"],
        per_delay=per_delay,
    )  # fmt: skip
    if isinstance(symbols, np.ndarray):
        values |= symbolic_values(symbols, frame_rate_hz / symbol_step(delay, per_delay), p)
        values["_n_symbols"] = symbols.size
        values["_symbol_step"] = symbol_step(delay, per_delay)
    values["sample_entropy"] = _or_nan(
        sampen.sample_entropy, lead[::delay], m=p["sampen_m"], r=p["sampen_r"]
    )
    return values


#: Surrogates read the state at about this many points per delay: enough for
#: RQA lines and ordinal patterns, few enough that a stretch of
#: ``surrogate_max_points`` covers many strides.
SURROGATE_POINTS_PER_DELAY = 2


@dataclass(frozen=True)
class SurrogateZ:
    """z-scores of the complexity scores against multichannel IAAFT surrogates."""

    z: dict[str, float]
    n_surrogates: int
    decimation: int
    note: str


def surrogate_z(
    state: NDArray[np.float64], delay: int, frame_rate_hz: float, p: Mapping[str, Any]
) -> SurrogateZ:
    """z = (value - mean) / SD of each complexity score over IAAFT surrogates of the state."""
    n_sur = int(p["n_surrogates"])
    if n_sur < 2:
        return SurrogateZ({}, n_sur, 1, "surrogates switched off (n_surrogates < 2)")
    # At least symbols_per_delay points per delay, so that surrogate symbols are read
    # at the data's symbol step (the decimated delay divided by symbols_per_delay).
    q = max(1, delay // max(SURROGATE_POINTS_PER_DELAY, int(p["symbols_per_delay"])))
    small = decimate(state, q)[: int(p["surrogate_max_points"])]
    d = max(1, round(delay / q))
    rate = frame_rate_hz / q
    base = _numbers(state_scores(small, d, rate, p, threshold_method="exact"))
    rng = np.random.default_rng(p["seed"])
    rows = []
    for _ in range(n_sur):
        sur = surrogates.iaaft_surrogate(
            small, rng=rng, multichannel=True, max_iter=int(p["surrogate_max_iter"])
        )
        scores = state_scores(np.asarray(sur), d, rate, p, threshold_method="exact")
        rows.append(_numbers(scores))
    z = {}
    for name in COMPLEXITY_UNITS:
        vals = np.array([r.get(name, math.nan) for r in rows], dtype=float)
        vals = vals[np.isfinite(vals)]
        v = base.get(name, math.nan)
        sd = float(vals.std(ddof=1)) if vals.size > 1 else math.nan
        z[name] = (v - float(vals.mean())) / sd if np.isfinite(v) and sd > 0 else math.nan
    note = (
        f"surrogate z from {n_sur} multichannel IAAFT surrogates of the state; data and "
        f"surrogates decimated by {q}, first {small.shape[0]} points"
    )
    return SurrogateZ(z, n_sur, q, note)


def _numbers(values: Mapping[str, Any]) -> dict[str, float]:
    return {k: float(v) for k, v in values.items() if not k.startswith("_")}


@dataclass(frozen=True)
class Interlimb:
    """Joint recurrence of every pair of feet."""

    limbs: tuple[str, ...]
    synchronisation: NDArray[np.float64]  # (n, n), NaN on the diagonal
    jrr: NDArray[np.float64]
    decimation: int


def interlimb(
    feet: Mapping[str, NDArray[np.float64]], delay: int, p: Mapping[str, Any]
) -> Interlimb:
    """Joint recurrence (Romano et al. 2004) of each pair of body-frame foot trajectories."""
    names = tuple(feet)
    n = next(iter(feet.values())).shape[0]
    # Anti-aliased decimation to at most interlimb_max_points (the joint count is
    # quadratic in the points; 8,000 over 5 minutes still give ~20 points a stride).
    q = max(1, math.ceil(n / p["interlimb_max_points"]))
    small = {k: decimate(v, q) for k, v in feet.items()}
    theiler = max(1, round(delay / q))
    rate = p["rqa_recurrence_rate"]
    eps = {
        k: recurrence.recurrence_threshold(
            v, recurrence_rate=rate, theiler=theiler, metric="maximum", seed=p["seed"]
        )
        for k, v in small.items()
    }
    rr = {
        k: recurrence.joint_recurrence(
            v, v, theiler=theiler, threshold_x=eps[k], threshold_y=eps[k]
        ).rr_x
        for k, v in small.items()
    }
    sync = np.full((len(names), len(names)), np.nan)
    jrr = np.full_like(sync, np.nan)
    for i, a in enumerate(names):
        for j in range(i + 1, len(names)):
            b = names[j]
            res = recurrence.joint_recurrence(
                small[a], small[b], recurrence_rate=rate, theiler=theiler,
                threshold_x=eps[a], threshold_y=eps[b], rates=(rr[a], rr[b]),
            )  # fmt: skip
            sync[i, j] = sync[j, i] = res.synchronisation
            jrr[i, j] = jrr[j, i] = res.jrr
    return Interlimb(names, sync, jrr, q)
