"""Expected movement on a ground: prediction from the arena-level fit.

For one terrain measure, the study's arenas give points ``(t_a, ybar_a)``: the arena's
terrain value and its subject-adjusted mean movement
(:func:`measures.correspondence.arena.arena_movement_means`). A new arena with terrain
``t0`` gets the OLS prediction and the classical prediction interval for one new
observation at ``t0``:

    yhat0 +- t_{n-2, 0.975} s sqrt(1 + 1/n + (t0 - tbar)^2 / Sxx)

(Draper & Smith 1998, sec. 3.1; exact under normal, equal-variance arena means, which
include the arena-to-arena variation terrain does not explain). The comparison model
ignores terrain: ``ybar +- t_{n-1, 0.975} s_y sqrt(1 + 1/n)``.

What is predicted is the arena mean movement of a subject typical of the study, not one
trial. Validation: :func:`leave_one_arena_out` predicts each arena from the others;
coverage and error against the terrain-ignoring model are checked in
``tests/correspondence/test_predict.py`` and printed by ``bench/bench_prediction.py``.

References
----------
Draper, N. R. & Smith, H. (1998). Applied Regression Analysis, 3rd ed. Wiley.
Stone, M. (1974). Cross-validatory choice and assessment of statistical predictions.
J. R. Stat. Soc. B 36, 111-147 (leave-one-out assessment).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy import stats

from measures._validation import InvalidParameterError, as_float_array
from measures.correspondence.arena import arena_movement_means

__all__ = [
    "MIN_PREDICTION_ARENAS",
    "ArenaPrediction",
    "LeaveOneOut",
    "arena_means_by_measure",
    "held_out_arena_mean",
    "leave_one_arena_out",
    "predict_arena_movement",
]

#: Fewest arenas with values (the predicted arena excluded) for a prediction: with 4 the
#: interval has 2 degrees of freedom and t = 4.3, wider than most effects (our own rule).
MIN_PREDICTION_ARENAS = 5


@dataclass(frozen=True)
class ArenaPrediction:
    """Prediction of each movement measure at one terrain value.

    Attributes
    ----------
    predicted, pi_low, pi_high : ndarray, shape (n_movement,)
        From the terrain fit; NaN where not predicted.
    baseline, baseline_low, baseline_high : ndarray, shape (n_movement,)
        The terrain-ignoring model (mean of the arenas).
    n_arenas : ndarray of int, shape (n_movement,)
        Arenas the fit of each measure used.
    note : tuple of str
        Empty, or why the measure was not predicted.
    """

    predicted: NDArray[np.float64]
    pi_low: NDArray[np.float64]
    pi_high: NDArray[np.float64]
    baseline: NDArray[np.float64]
    baseline_low: NDArray[np.float64]
    baseline_high: NDArray[np.float64]
    n_arenas: NDArray[np.int64]
    note: tuple[str, ...]
    level: float


def predict_arena_movement(
    terrain: ArrayLike,
    arena_movement: ArrayLike,
    terrain_new: float,
    *,
    level: float = 0.95,
    min_arenas: int = MIN_PREDICTION_ARENAS,
) -> ArenaPrediction:
    """Predict arena mean movement at ``terrain_new`` from the arenas' points.

    Parameters
    ----------
    terrain : array_like, shape (n_arenas,)
        Terrain value of each study arena (NaN: arena left out).
    arena_movement : array_like, shape (n_arenas,) or (n_arenas, n_movement)
        Subject-adjusted arena means (NaN allowed per measure).
    terrain_new : float
        Terrain value of the arena to predict.
    level : float, default 0.95
    min_arenas : int, default 5

    Returns
    -------
    ArenaPrediction

    Examples
    --------
    >>> p = predict_arena_movement([0, 1, 2, 3, 4, 5], [0.1, 1.0, 2.1, 2.9, 4.0, 5.1], 2.5)
    >>> round(float(p.predicted[0]), 2), p.note
    (2.53, ('',))
    """
    fn = "predict_arena_movement"
    t = as_float_array("terrain", terrain, fn, ndim=1, allow_nan=True)
    y = as_float_array("arena_movement", arena_movement, fn, ndim=(1, 2), allow_nan=True)
    y = y.reshape(y.shape[0], -1)
    if y.shape[0] != t.size:
        raise InvalidParameterError("arena_movement", fn, f"{t.size} rows", y)
    if not math.isfinite(terrain_new):
        raise InvalidParameterError("terrain_new", fn, "a finite terrain value", terrain_new)
    k = y.shape[1]
    out = {name: np.full(k, np.nan) for name in ("pred", "lo", "hi", "base", "blo", "bhi")}
    n_used = np.zeros(k, dtype=np.int64)
    notes = []
    q = 0.5 + level / 2
    for j in range(k):
        ok = np.isfinite(t) & np.isfinite(y[:, j])
        x, v = t[ok], y[ok, j]
        n = int(ok.sum())
        n_used[j] = n
        if n < min_arenas:
            notes.append(
                f"only {n} arena(s) with values; at least {min_arenas} are needed to predict"
            )
            continue
        sxx = float(np.sum((x - x.mean()) ** 2))
        if sxx <= 0:
            notes.append("the terrain measure is the same in every arena")
            continue
        slope = float(np.sum((x - x.mean()) * (v - v.mean())) / sxx)
        intercept = float(v.mean() - slope * x.mean())
        s = math.sqrt(float(np.sum((v - intercept - slope * x) ** 2)) / (n - 2))
        pred = intercept + slope * terrain_new
        half = (
            stats.t.ppf(q, n - 2) * s * math.sqrt(1 + 1 / n + (terrain_new - x.mean()) ** 2 / sxx)
        )
        out["pred"][j], out["lo"][j], out["hi"][j] = pred, pred - half, pred + half
        b_half = stats.t.ppf(q, n - 1) * float(v.std(ddof=1)) * math.sqrt(1 + 1 / n)
        out["base"][j] = float(v.mean())
        out["blo"][j], out["bhi"][j] = v.mean() - b_half, v.mean() + b_half
        if terrain_new < x.min() or terrain_new > x.max():
            notes.append(
                f"terrain value {terrain_new:.4g} lies outside the study's range "
                f"[{x.min():.4g}, {x.max():.4g}]: an extrapolation"
            )
        else:
            notes.append("")
    return ArenaPrediction(
        out["pred"],
        out["lo"],
        out["hi"],
        out["base"],
        out["blo"],
        out["bhi"],
        n_used,
        tuple(notes),
        level,
    )


def arena_means_by_measure(
    movement: ArrayLike,
    arena_index: ArrayLike,
    subject_index: ArrayLike,
    n_arenas: int,
) -> NDArray[np.float64]:
    """Subject-adjusted arena means, each measure over its own finite trials.

    The points a prediction is fitted to (:func:`arena_movement_means` per measure, so a
    NaN in one measure does not drop the trial from the others). The expected-movement
    endpoint and :func:`leave_one_arena_out` both call this, then
    :func:`predict_arena_movement`: one code path.

    Parameters
    ----------
    movement : array_like, shape (n_trials,) or (n_trials, n_movement)
        NaN where a trial has no value.
    arena_index : array_like of int, shape (n_trials,)
        Arena code in ``0 .. n_arenas - 1``.
    subject_index : array_like, shape (n_trials,)
    n_arenas : int

    Returns
    -------
    ndarray, shape (n_arenas, n_movement)
        NaN for an arena without values of the measure.
    """
    m = np.asarray(movement, dtype=np.float64)
    m = m.reshape(m.shape[0], -1)
    arena = np.asarray(arena_index, dtype=np.intp)
    subject = np.asarray(subject_index)
    out = np.full((int(n_arenas), m.shape[1]), np.nan)
    for j in range(m.shape[1]):
        ok = np.isfinite(m[:, j])
        if ok.sum() < 2:
            continue
        present = np.unique(arena[ok])
        codes = np.searchsorted(present, arena[ok])
        means = arena_movement_means(m[ok, j], codes, subject[ok], n_arenas=present.size)
        out[present, j] = means.mean[:, 0]
    return out


def held_out_arena_mean(
    movement: ArrayLike,
    arena_index: ArrayLike,
    subject_index: ArrayLike,
    held_out: int,
) -> NDArray[np.float64]:
    """The held-out arena's observed mean, adjusted by subject offsets from the others.

    Mean over the arena's subjects of (their trial mean there minus their offset), the
    offset being the subject's mean over the other arenas minus the other arenas' grand
    mean (0 for a subject seen only here). Per measure over finite values, so nothing of
    the held-out arena enters the fit it is compared with (Stone 1974).

    Returns
    -------
    ndarray, shape (n_movement,)
    """
    m = np.asarray(movement, dtype=np.float64)
    m = m.reshape(m.shape[0], -1)
    arena = np.asarray(arena_index, dtype=np.intp)
    subject = np.asarray(subject_index)
    out = np.full(m.shape[1], np.nan)
    train = arena != held_out
    for j in range(m.shape[1]):
        ok = np.isfinite(m[:, j])
        here = ok & ~train
        if not here.any():
            continue
        grand = m[ok & train, j].mean() if (ok & train).any() else 0.0
        held = []
        for s in np.unique(subject[here]):
            in_train = ok & train & (subject == s)
            offset = m[in_train, j].mean() - grand if in_train.any() else 0.0
            held.append(m[here & (subject == s), j].mean() - offset)
        out[j] = float(np.mean(held))
    return out


@dataclass(frozen=True)
class LeaveOneOut:
    """Leave-one-arena-out predictions of a study.

    Attributes
    ----------
    observed, predicted, pi_low, pi_high, baseline : ndarray, shape (n_arenas, n_movement)
        The held-out arena's observed mean (subject-adjusted with the other arenas'
        subject offsets, so nothing of it enters its own prediction) and its predictions.
    covered : ndarray of bool, shape (n_arenas, n_movement)
    """

    observed: NDArray[np.float64]
    predicted: NDArray[np.float64]
    pi_low: NDArray[np.float64]
    pi_high: NDArray[np.float64]
    baseline: NDArray[np.float64]
    covered: NDArray[np.bool_]


def leave_one_arena_out(
    terrain: ArrayLike,
    movement: ArrayLike,
    arena_index: ArrayLike,
    subject_index: ArrayLike,
    *,
    level: float = 0.95,
    min_arenas: int = MIN_PREDICTION_ARENAS,
) -> LeaveOneOut:
    """Predict every arena from the others (trials of the held-out arena unseen).

    The arena means of the remaining arenas are recomputed without the held-out arena's
    trials; the held-out arena's observed value is the mean over its subjects of their
    trial means minus their offsets estimated from the other arenas (Stone 1974).

    Parameters
    ----------
    terrain : array_like, shape (n_arenas,)
    movement : array_like, shape (n_trials,) or (n_trials, n_movement)
        NaN where a trial has no value (each measure uses its own finite trials).
    arena_index, subject_index : array_like of int, shape (n_trials,)
    level : float, default 0.95
    min_arenas : int, default 5

    Returns
    -------
    LeaveOneOut
    """
    t = np.asarray(terrain, dtype=np.float64).ravel()
    m = np.asarray(movement, dtype=np.float64)
    m = m.reshape(m.shape[0], -1)
    arena = np.asarray(arena_index, dtype=np.intp)
    subject = np.asarray(subject_index)
    n_a, k = t.size, m.shape[1]
    shape = (n_a, k)
    obs, pred, lo, hi, base = (np.full(shape, np.nan) for _ in range(5))
    for a in range(n_a):
        train = arena != a
        # The fit: the other arenas' points (row ``a`` stays NaN, so it is not used).
        means = arena_means_by_measure(m[train], arena[train], subject[train], n_a)
        if not math.isfinite(t[a]):
            continue
        p = predict_arena_movement(t, means, float(t[a]), level=level, min_arenas=min_arenas)
        pred[a], lo[a], hi[a], base[a] = p.predicted, p.pi_low, p.pi_high, p.baseline
        obs[a] = held_out_arena_mean(m, arena, subject, a)
    with np.errstate(invalid="ignore"):
        covered = (lo <= obs) & (obs <= hi)
    return LeaveOneOut(obs, pred, lo, hi, base, covered)
