"""Recurrence quantification analysis (RQA), streaming and dense.

Definitions follow N. Marwan, M. C. Romano, M. Thiel & J. Kurths (2007),
"Recurrence plots for the analysis of complex systems", Physics Reports
438:237-329, with the conventions fixed in gaitscape's contract:

* R_ij = 1 when ||x_i - x_j|| <= eps and |i - j| >= theiler; the matrix is
  taken whole (both triangles).
* RR = sum R / number of admissible pairs (cells with |i - j| >= theiler).
* Diagonal lines are maximal runs of ones along i - j = const, vertical lines
  maximal runs down a column; the excluded band cuts both.
* DET, L, Lmax, ENTR (natural log) from diagonal lines >= lmin; LAM, TT,
  Vmax from vertical lines >= vmin. DET and LAM are 0, and L, TT, ENTR are
  NaN, when no line reaches the minimum.

With ``theiler=0`` the line of identity belongs to the matrix, so it is a
diagonal line of length N: Lmax = N and it enters DET, L and ENTR (the
contract taken literally). Use ``theiler >= 1`` for the usual Lmax.

Distances are compared as squared Euclidean distances against eps**2 (or as
maximum-norm distances against eps), with one per-pair formula shared by the
streaming kernel, the dense reference and the threshold search.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import overload

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
from measures.dynamics import _rqa_kernels as _k

__all__ = [
    "JointRecurrence",
    "RQAResult",
    "RecurrencePlotImage",
    "WindowedRQA",
    "joint_recurrence",
    "recurrence_plot_image",
    "recurrence_rate_at",
    "recurrence_threshold",
    "rqa",
    "rqa_dense",
    "windowed_rqa",
]

_METRICS = {"euclidean": 0, "maximum": 1, "chebyshev": 1}
_THRESHOLD_METHODS = ("sampled", "exact")
#: Recurrence rate used when neither ``threshold`` nor ``recurrence_rate`` is given.
DEFAULT_RECURRENCE_RATE = 0.05
#: Number of random admissible pairs behind the sampled quantile.
SAMPLE_PAIRS = 1_000_000
_N_STRIPS = 16


@dataclass(frozen=True)
class RQAResult:
    """Recurrence quantification measures of one recurrence matrix.

    Attributes
    ----------
    rr, det, l_mean, l_max, entr, lam, tt, v_max : float
        RR, DET, L, Lmax, ENTR (nats), LAM, TT and Vmax (lengths in samples).
    threshold : float
        The distance eps actually used (same unit as the points).
    n : int
        Number of points N.
    metric, theiler, lmin, vmin :
        Parameters used.
    n_recurrences, n_admissible : int
        sum R and the number of admissible cells (whole matrix).
    diagonal_lengths, vertical_lengths : ndarray of int64
        ``h[l]`` is the number of lines of length l (index 0 unused),
        trimmed after the longest line.
    threshold_method : str
        How eps was chosen: "given", "sampled" or "exact".
    """

    rr: float
    det: float
    l_mean: float
    l_max: int
    entr: float
    lam: float
    tt: float
    v_max: int
    threshold: float
    n: int
    metric: str
    theiler: int
    lmin: int
    vmin: int
    n_recurrences: int
    n_admissible: int
    diagonal_lengths: NDArray[np.int64]
    vertical_lengths: NDArray[np.int64]
    threshold_method: str


def _line_stats(hist: NDArray[np.int64], lmin: int) -> tuple[float, float, float, int]:
    """(fraction numerator, mean length, entropy in nats, longest) of lines >= lmin."""
    lengths = np.arange(hist.shape[0], dtype=np.int64)
    nonzero = np.flatnonzero(hist)
    longest = int(nonzero[-1]) if nonzero.size else 0
    sel = hist[lmin:]
    n_lines = int(sel.sum())
    points = int((lengths[lmin:] * sel).sum())
    if n_lines == 0:
        return 0.0, math.nan, math.nan, longest
    p = sel[sel > 0] / n_lines
    entropy = float(-(p * np.log(p)).sum())
    return float(points), points / n_lines, entropy, longest


def _summarise(
    diag: NDArray[np.int64],
    vert: NDArray[np.int64],
    *,
    n: int,
    theiler: int,
    lmin: int,
    vmin: int,
    threshold: float,
    metric: str,
    method: str,
) -> RQAResult:
    lengths = np.arange(diag.shape[0], dtype=np.int64)
    n_rec = int((lengths * diag).sum())
    n_adm = n * n if theiler == 0 else (n - theiler) * (n - theiler + 1)
    det_pts, l_mean, entr, l_max = _line_stats(diag, lmin)
    lam_pts, tt, _, v_max = _line_stats(vert, vmin)
    last_d = max(l_max, 1) + 1
    last_v = max(v_max, 1) + 1
    return RQAResult(
        rr=n_rec / n_adm,
        det=det_pts / n_rec if n_rec else 0.0,
        l_mean=l_mean,
        l_max=l_max,
        entr=entr,
        lam=lam_pts / n_rec if n_rec else 0.0,
        tt=tt,
        v_max=v_max,
        threshold=threshold,
        n=n,
        metric=metric,
        theiler=theiler,
        lmin=lmin,
        vmin=vmin,
        n_recurrences=n_rec,
        n_admissible=n_adm,
        diagonal_lengths=diag[:last_d].copy(),
        vertical_lengths=vert[:last_v].copy(),
        threshold_method=method,
    )


def _prepare(
    points: ArrayLike, function: str, theiler: int, lmin: int, vmin: int, metric: str
) -> tuple[NDArray[np.float64], int, int, int]:
    x = as_float_array("points", points, function, ndim=(1, 2), min_length=2)
    if x.ndim == 1:
        x = x[:, None]
    if x.shape[1] == 0:
        raise InvalidParameterError("points", function, "an array with >= 1 column", x)
    theiler = check_positive_int("theiler", theiler, function, minimum=0)
    lmin = check_positive_int("lmin", lmin, function, minimum=1)
    vmin = check_positive_int("vmin", vmin, function, minimum=1)
    check_choice("metric", metric, function, tuple(_METRICS))
    if theiler >= x.shape[0]:
        raise InsufficientDataError("points", function, f"more than theiler={theiler} points", x)
    return np.ascontiguousarray(x.T), theiler, lmin, vmin


def _target_rank(recurrence_rate: float, n: int, theiler: int) -> int:
    """Rank K (1-based) of eps among the admissible distances of the whole matrix.

    eps is the K-th smallest admissible distance with K = rr * P rounded to
    the nearest integer (at least 1), P the number of admissible cells.
    """
    n_adm = n * n if theiler == 0 else (n - theiler) * (n - theiler + 1)
    return max(1, round(recurrence_rate * n_adm))


def _lower_rank(rank: int, n: int, theiler: int) -> int:
    """Rank among strict-lower-triangle distances matching whole-matrix rank, or 0.

    The whole matrix holds N zeros on the line of identity (theiler = 0)
    followed by every lower-triangle distance twice.
    """
    zeros = n if theiler == 0 else 0
    return 0 if rank <= zeros else (rank - zeros + 1) // 2


def _n_lower(n: int, theiler: int) -> int:
    we = max(theiler, 1)
    return (n - we) * (n - we + 1) // 2


def _all_lower_distances(
    xt: NDArray[np.float64], metric_code: int, theiler: int
) -> NDArray[np.float64]:
    # Every lower-triangle pair in np.tril_indices order, computed without index arrays.
    return _k.lower_distances(xt, max(theiler, 1), metric_code)


def _sample_lower_pairs(
    n: int, theiler: int, n_pairs: int, seed: int
) -> tuple[NDArray[np.int64], NDArray[np.int64]]:
    """Uniform random pairs (i > j, i - j >= max(theiler, 1)), seeded."""
    rng = np.random.default_rng(seed)
    we = max(theiler, 1)
    rows = np.empty(n_pairs, dtype=np.int64)
    cols = np.empty(n_pairs, dtype=np.int64)
    filled = 0
    while filled < n_pairs:
        # The draws of every round are made in full, as they always were, so the stream
        # (and so each sampled threshold) does not change; one compiled pass keeps pairs.
        a = rng.integers(0, n, size=2 * n_pairs)
        b = rng.integers(0, n, size=2 * n_pairs)
        filled = _k.keep_lower_pairs(a, b, we, rows, cols, filled)
    return rows, cols


def _sample_quantile(
    xt: NDArray[np.float64],
    metric_code: int,
    theiler: int,
    lower_rank: int,
    seed: int,
    *,
    ordered: bool = True,
) -> tuple[NDArray[np.float64], float]:
    """Distances of the seeded sample of pairs (sorted unless ``ordered=False``) and the
    rank's fraction of all lower-triangle pairs."""
    n = xt.shape[1]
    rows, cols = _sample_lower_pairs(n, theiler, SAMPLE_PAIRS, seed)
    d = _k.pair_distances(xt, rows, cols, metric_code)
    frac = lower_rank / _n_lower(n, theiler)
    return (np.sort(d) if ordered else d), frac


def _comparison_threshold(
    xt: NDArray[np.float64],
    metric_code: int,
    theiler: int,
    recurrence_rate: float,
    method: str,
    seed: int,
) -> float:
    """Threshold in comparison units (squared for Euclidean) for a recurrence rate."""
    n = xt.shape[1]
    lower_rank = _lower_rank(_target_rank(recurrence_rate, n, theiler), n, theiler)
    if lower_rank == 0:
        return 0.0
    n_lower = _n_lower(n, theiler)
    if method == "sampled" and n_lower > SAMPLE_PAIRS:
        # One order statistic of the sample: a selection, not a sort (same value).
        d, frac = _sample_quantile(xt, metric_code, theiler, lower_rank, seed, ordered=False)
        idx = min(max(math.ceil(frac * d.size) - 1, 0), d.size - 1)
        return float(np.partition(d, idx)[idx])
    if n_lower <= 4 * SAMPLE_PAIRS:
        d = _all_lower_distances(xt, metric_code, theiler)
        return float(np.partition(d, lower_rank - 1)[lower_rank - 1])
    return _exact_by_bracket(xt, metric_code, theiler, lower_rank, seed)


def _exact_by_bracket(
    xt: NDArray[np.float64], metric_code: int, theiler: int, lower_rank: int, seed: int
) -> float:
    """Exact order statistic with one pass over all pairs.

    A sampled quantile brackets the rank (5 standard errors either side); one
    pass counts the distances below the bracket and keeps those inside it,
    and a selection inside the bracket gives the exact value. If the rank
    falls outside (probability ~1e-6) the bracket is widened and the pass
    repeated.
    """
    n_lower = _n_lower(xt.shape[1], theiler)
    d, frac = _sample_quantile(xt, metric_code, theiler, lower_rank, seed)
    ns = d.size
    z = 5.0
    for _ in range(6):
        half = z * math.sqrt(max(frac * (1 - frac), 1.0 / ns) / ns)
        lo_i = math.floor((frac - half) * ns)
        hi_i = math.ceil((frac + half) * ns)
        lo = float(d[lo_i]) if lo_i >= 0 else -1.0
        hi = float(d[hi_i]) if hi_i < ns else math.inf
        expected = (min(hi_i, ns) - max(lo_i, 0)) / ns * n_lower
        below, cand = _k.bracket_pass(xt, lo, hi, metric_code, theiler, int(1.5 * expected))
        if cand is not None and below < lower_rank <= below + cand.size:
            r = lower_rank - below - 1
            cand.partition(r)  # in place: the candidates can be ~100 MB
            return float(cand[r])
        z *= 2.0
    raise RuntimeError("exact threshold selection did not converge")  # pragma: no cover


@overload
def _check_threshold_args(
    function: str, threshold: None, recurrence_rate: float | None, method: str
) -> tuple[None, float]: ...
@overload
def _check_threshold_args(
    function: str, threshold: float | None, recurrence_rate: float | None, method: str
) -> tuple[float | None, float | None]: ...
def _check_threshold_args(
    function: str, threshold: float | None, recurrence_rate: float | None, method: str
) -> tuple[float | None, float | None]:
    """Validate the threshold arguments; return (eps or None, rate or None)."""
    if threshold is not None and recurrence_rate is not None:
        raise InvalidParameterError(
            "threshold", function, "None when recurrence_rate is given (pass one of them)",
            threshold,
        )  # fmt: skip
    if threshold is not None:
        return check_positive_float("threshold", threshold, function, allow_zero=True), None
    if recurrence_rate is None:
        recurrence_rate = DEFAULT_RECURRENCE_RATE
    rate = check_positive_float("recurrence_rate", recurrence_rate, function)
    if rate > 1:
        raise InvalidParameterError("recurrence_rate", function, "in (0, 1]", recurrence_rate)
    check_choice("threshold_method", method, function, _THRESHOLD_METHODS)
    return None, rate


def _resolve_threshold(
    xt: NDArray[np.float64],
    function: str,
    metric: str,
    theiler: int,
    threshold: float | None,
    recurrence_rate: float | None,
    method: str,
    seed: int,
) -> tuple[float, float, str]:
    """Return (comparison threshold, reported eps, method label)."""
    code = _METRICS[metric]
    eps, rate = _check_threshold_args(function, threshold, recurrence_rate, method)
    if eps is not None:
        return (eps * eps if code == 0 else eps), eps, "given"
    assert rate is not None  # for mypy: without a threshold a rate is always resolved
    thr = _comparison_threshold(xt, code, theiler, rate, method, seed)
    return thr, (math.sqrt(thr) if code == 0 else thr), method


def rqa(
    points: ArrayLike,
    *,
    threshold: float | None = None,
    recurrence_rate: float | None = None,
    theiler: int = 1,
    lmin: int = 2,
    vmin: int = 2,
    metric: str = "euclidean",
    threshold_method: str = "sampled",
    seed: int = 0,
) -> RQAResult:
    """Recurrence quantification of a trajectory, without storing the matrix.

    Parameters
    ----------
    points : array_like, shape (N, m) or (N,), float
        States (e.g. delay vectors), one per row.
    threshold : float, optional
        Recurrence distance eps (same unit as ``points``).
    recurrence_rate : float in (0, 1], optional
        Choose eps so that this fraction of admissible pairs recur: eps is the
        K-th smallest admissible distance, K = round(rate * P) (at least 1).
        Give ``threshold`` or ``recurrence_rate``, not both; with neither,
        ``recurrence_rate=0.05``.
    theiler : int, default 1
        Theiler window w: cells with |i - j| < w are excluded (w = 0 keeps
        the line of identity, see the module notes on Lmax).
    lmin, vmin : int, default 2
        Minimum diagonal / vertical line length.
    metric : {"euclidean", "maximum"}, default "euclidean"
        "chebyshev" is accepted as an alias of "maximum".
    threshold_method : {"sampled", "exact"}, default "sampled"
        For ``recurrence_rate``: "sampled" takes the quantile of 10**6 seeded
        random admissible pairs (exact below that many pairs); the achieved
        RR then has a standard error of about sqrt(rate (1 - rate) / 10**6),
        2.2e-4 at rate 0.05. "exact" costs one more pass over all pairs.
    seed : int, default 0
        Seed of the pair sample.

    Returns
    -------
    RQAResult

    Notes
    -----
    Memory is O(N); work is N**2 / 2 distance evaluations, on all cores.

    References
    ----------
    N. Marwan, M. C. Romano, M. Thiel & J. Kurths (2007), Physics Reports
    438:237-329. J. Theiler (1986), Phys. Rev. A 34:2427 (the window).

    Examples
    --------
    >>> t = np.arange(400)
    >>> x = np.column_stack([np.sin(2 * np.pi * t / 20), np.cos(2 * np.pi * t / 20)])
    >>> res = rqa(x, threshold=0.1)
    >>> round(res.det, 6)
    1.0
    """
    fn = "rqa"
    xt, theiler, lmin, vmin = _prepare(points, fn, theiler, lmin, vmin, metric)
    thr, eps, method = _resolve_threshold(
        xt, fn, metric, theiler, threshold, recurrence_rate, threshold_method, seed
    )
    return _rqa_from_comparison(xt, thr, eps, metric, theiler, lmin, vmin, method)


def _rqa_from_comparison(
    xt: NDArray[np.float64],
    thr: float,
    eps: float,
    metric: str,
    theiler: int,
    lmin: int,
    vmin: int,
    method: str,
    n_strips: int = _N_STRIPS,
) -> RQAResult:
    diag, vert = _k.line_histograms(xt, thr, _METRICS[metric], theiler, n_strips)
    return _summarise(
        diag, vert, n=xt.shape[1], theiler=theiler, lmin=lmin, vmin=vmin,
        threshold=eps, metric=metric, method=method,
    )  # fmt: skip


def _runs(values: NDArray[np.bool_]) -> NDArray[np.int64]:
    """Lengths of the maximal runs of True in a 1-D boolean array."""
    padded = np.concatenate(([False], values, [False])).astype(np.int8)
    change = np.flatnonzero(np.diff(padded))
    return change[1::2] - change[0::2]


def rqa_dense(
    points: ArrayLike,
    *,
    threshold: float | None = None,
    recurrence_rate: float | None = None,
    theiler: int = 1,
    lmin: int = 2,
    vmin: int = 2,
    metric: str = "euclidean",
    threshold_method: str = "sampled",
    seed: int = 0,
) -> RQAResult:
    """Reference RQA that builds the whole N x N matrix (small N only).

    Same parameters and result as :func:`rqa`. The recurrence-rate
    threshold is the exact order statistic of all admissible distances of
    the whole matrix (or the same pair sample as :func:`rqa` for
    ``threshold_method="sampled"`` above 10**6 pairs). Lines are read
    straight off the matrix with ``numpy.diagonal`` and column slices.

    References
    ----------
    N. Marwan, M. C. Romano, M. Thiel & J. Kurths (2007), Physics Reports 438.
    """
    fn = "rqa_dense"
    xt, theiler, lmin, vmin = _prepare(points, fn, theiler, lmin, vmin, metric)
    n = xt.shape[1]
    code = _METRICS[metric]
    dist = np.zeros((n, n))
    for c in range(xt.shape[0]):
        diff = xt[c][:, None] - xt[c][None, :]
        if code == 0:
            dist += diff * diff
        else:
            np.maximum(dist, np.abs(diff), out=dist)
    offset = np.abs(np.subtract.outer(np.arange(n), np.arange(n)))
    admissible = offset >= theiler
    eps, rate = _check_threshold_args(fn, threshold, recurrence_rate, threshold_method)
    method = threshold_method if eps is None else "given"
    if eps is not None:
        thr = eps * eps if code == 0 else eps
    elif threshold_method == "exact" or _n_lower(n, theiler) <= SAMPLE_PAIRS:
        assert rate is not None  # for mypy: without a threshold a rate is always resolved
        # The definition read literally: K-th smallest of all admissible cells.
        rank = _target_rank(rate, n, theiler)
        thr = float(np.partition(dist[admissible], rank - 1)[rank - 1])
    else:
        assert rate is not None  # for mypy: as above
        thr = _comparison_threshold(xt, code, theiler, rate, "sampled", seed)
    if eps is None:
        eps = math.sqrt(thr) if code == 0 else thr
    rec = (dist <= thr) & admissible
    diag = np.zeros(n + 1, dtype=np.int64)
    vert = np.zeros(n + 1, dtype=np.int64)
    for k in range(-(n - 1), n):
        np.add.at(diag, _runs(np.diagonal(rec, k)), 1)
    for j in range(n):
        np.add.at(vert, _runs(rec[:, j]), 1)
    return _summarise(
        diag, vert, n=n, theiler=theiler, lmin=lmin, vmin=vmin,
        threshold=eps, metric=metric, method=method,
    )  # fmt: skip


def recurrence_threshold(
    points: ArrayLike,
    *,
    recurrence_rate: float = DEFAULT_RECURRENCE_RATE,
    theiler: int = 1,
    metric: str = "euclidean",
    threshold_method: str = "sampled",
    seed: int = 0,
) -> float:
    """The distance eps that :func:`rqa` would use for ``recurrence_rate``.

    Examples
    --------
    Ten points on a line: of the 90 admissible ordered pairs (Theiler 1), 18 lie at
    distance 1, so a 20 % recurrence rate needs eps = 1.

    >>> round(recurrence_threshold(np.arange(10.0), recurrence_rate=0.2), 6)
    1.0
    """
    fn = "recurrence_threshold"
    xt, theiler, _, _ = _prepare(points, fn, theiler, 1, 1, metric)
    _, eps, _ = _resolve_threshold(
        xt, fn, metric, theiler, None, recurrence_rate, threshold_method, seed
    )
    return float(eps)


def recurrence_rate_at(
    points: ArrayLike, *, threshold: float, theiler: int = 1, metric: str = "euclidean"
) -> float:
    """Recurrence rate of ``points`` at a given distance ``threshold`` (one counting pass).

    Examples
    --------
    >>> recurrence_rate_at(np.arange(5.0), threshold=1.0)
    0.4
    """
    fn = "recurrence_rate_at"
    xt, theiler, _, _ = _prepare(points, fn, theiler, 1, 1, metric)
    eps = check_positive_float("threshold", threshold, fn, allow_zero=True)
    code = _METRICS[metric]
    theiler = max(theiler, 1)
    count = _k.count_recurrences(xt, eps * eps if code == 0 else eps, code, theiler)
    return count / _n_lower(xt.shape[1], theiler)


@dataclass(frozen=True)
class JointRecurrence:
    """Result of :func:`joint_recurrence`.

    Attributes
    ----------
    jrr : float
        Joint recurrence rate: share of admissible pairs recurrent in both.
    rr_x, rr_y : float
        Recurrence rates of each system at its own threshold.
    synchronisation : float
        ``(S - RR) / (1 - RR)`` with ``S = JRR / RR`` and RR the mean of the
        two rates: 0 for independent systems (JRR = RR^2), 1 when every
        recurrence of one is a recurrence of the other.
    threshold_x, threshold_y : float
        Maximum-norm thresholds used.
    n : int
    """

    jrr: float
    rr_x: float
    rr_y: float
    synchronisation: float
    threshold_x: float
    threshold_y: float
    n: int


def joint_recurrence(
    x: ArrayLike,
    y: ArrayLike,
    *,
    recurrence_rate: float = DEFAULT_RECURRENCE_RATE,
    theiler: int = 1,
    seed: int = 0,
    threshold_x: float | None = None,
    threshold_y: float | None = None,
    rates: tuple[float, float] | None = None,
) -> JointRecurrence:
    """Joint recurrence of two simultaneous trajectories (maximum norm), streamed.

    JR_ij = R^x_ij R^y_ij, each system at the threshold that gives it the
    recurrence rate ``recurrence_rate`` (sampled quantile as in :func:`rqa`).
    With the maximum norm, "both recur" is one recurrence of the stacked
    state ``(x / eps_x, y / eps_y)`` at threshold 1, so the joint count is one
    streaming pass and no matrix is stored.

    Parameters
    ----------
    x, y : array_like (N,) or (N, m), same N
    recurrence_rate : float in (0, 1), default 0.05
    theiler : int, default 1
    seed : int, default 0
    threshold_x, threshold_y : float, optional
        Maximum-norm thresholds to use instead of the recurrence-rate
        quantile (e.g. computed once per system with
        :func:`recurrence_threshold` when one system enters several pairs).
    rates : (float, float), optional
        The recurrence rates those thresholds give (saves two passes when
        known; otherwise counted).

    Returns
    -------
    JointRecurrence

    References
    ----------
    M. C. Romano, M. Thiel, J. Kurths & W. von Bloh (2004), "Multivariate
    recurrence plots", Phys. Lett. A 330:214-223; M. C. Romano et al. (2005),
    Europhys. Lett. 71:466 (the joint probability of recurrence index);
    Marwan et al. (2007), Phys. Rep. 438, sec. 3.7.
    """
    fn = "joint_recurrence"
    xt, theiler, _, _ = _prepare(x, fn, theiler, 1, 1, "maximum")
    yt, _, _, _ = _prepare(y, fn, theiler, 1, 1, "maximum")
    n = xt.shape[1]
    if yt.shape[1] != n:
        raise InvalidParameterError("y", fn, f"{n} points, as x", yt.T)
    _, rate = _check_threshold_args(fn, None, recurrence_rate, "sampled")
    theiler = max(theiler, 1)
    eps_x = threshold_x
    if eps_x is None:
        eps_x = _comparison_threshold(xt, 1, theiler, rate, "sampled", seed)
    eps_y = threshold_y
    if eps_y is None:
        eps_y = _comparison_threshold(yt, 1, theiler, rate, "sampled", seed)
    pairs = _n_lower(n, theiler)
    count_x: float
    count_y: float
    if rates is None:
        count_x = _k.count_recurrences(xt, eps_x, 1, theiler)
        count_y = _k.count_recurrences(yt, eps_y, 1, theiler)
    else:
        count_x, count_y = rates[0] * pairs, rates[1] * pairs
    nan = math.nan
    if eps_x <= 0 or eps_y <= 0 or pairs == 0:
        return JointRecurrence(nan, count_x / max(pairs, 1), count_y / max(pairs, 1), nan,
                               eps_x, eps_y, n)  # fmt: skip
    stacked = np.ascontiguousarray(np.concatenate((xt / eps_x, yt / eps_y)))
    joint = _k.count_recurrences(stacked, 1.0, 1, theiler)
    rr_x, rr_y, jrr = count_x / pairs, count_y / pairs, joint / pairs
    rr = 0.5 * (rr_x + rr_y)
    sync = ((jrr / rr) - rr) / (1 - rr) if 0 < rr < 1 else nan
    return JointRecurrence(jrr, rr_x, rr_y, float(sync), eps_x, eps_y, n)


@dataclass(frozen=True)
class WindowedRQA:
    """RQA measures in sliding windows.

    Attributes
    ----------
    time_s : ndarray, shape (n_windows,)
        Window centre times in seconds (first sample at t = 0).
    rr, det, l_mean, l_max, entr, lam, tt, v_max, threshold : ndarray
        One value per window (see :class:`RQAResult`).
    window_samples, step_samples : int
        Window length and step in samples.
    """

    time_s: NDArray[np.float64]
    rr: NDArray[np.float64]
    det: NDArray[np.float64]
    l_mean: NDArray[np.float64]
    l_max: NDArray[np.float64]
    entr: NDArray[np.float64]
    lam: NDArray[np.float64]
    tt: NDArray[np.float64]
    v_max: NDArray[np.float64]
    threshold: NDArray[np.float64]
    window_samples: int
    step_samples: int


_WINDOW_FIELDS = ("rr", "det", "l_mean", "l_max", "entr", "lam", "tt", "v_max", "threshold")


def windowed_rqa(
    points: ArrayLike,
    *,
    frame_rate_hz: float,
    window_s: float,
    step_s: float,
    threshold: float | None = None,
    recurrence_rate: float | None = None,
    theiler: int = 1,
    lmin: int = 2,
    vmin: int = 2,
    metric: str = "euclidean",
    threshold_method: str = "sampled",
    seed: int = 0,
) -> WindowedRQA:
    """RQA of consecutive windows of a trajectory.

    Parameters
    ----------
    points : array_like, shape (N, m) or (N,)
        States sampled at ``frame_rate_hz``.
    frame_rate_hz, window_s, step_s : float
        Sampling rate (Hz), window length and step (s); both are rounded to
        whole samples.
    threshold, recurrence_rate, theiler, lmin, vmin, metric, threshold_method, seed
        As in :func:`rqa`, applied to each window (a recurrence rate gives a
        threshold per window).

    Returns
    -------
    WindowedRQA

    References
    ----------
    N. Marwan et al. (2007), Physics Reports 438, section on windowed
    (epoch-wise) RQA.
    """
    fn = "windowed_rqa"
    x = as_float_array("points", points, fn, ndim=(1, 2), min_length=2)
    fs = check_positive_float("frame_rate_hz", frame_rate_hz, fn)
    win = round(check_positive_float("window_s", window_s, fn) * fs)
    step = round(check_positive_float("step_s", step_s, fn) * fs)
    if win < 2 or win > x.shape[0]:
        raise InvalidParameterError(
            "window_s", fn, f"between 2 samples and the series length ({x.shape[0]})", window_s
        )
    if step < 1:
        raise InvalidParameterError("step_s", fn, "at least one sample", step_s)
    starts = np.arange(0, x.shape[0] - win + 1, step)
    values = {name: np.empty(starts.size) for name in _WINDOW_FIELDS}
    for w, a in enumerate(starts):
        res = rqa(
            x[a : a + win], threshold=threshold, recurrence_rate=recurrence_rate,
            theiler=theiler, lmin=lmin, vmin=vmin, metric=metric,
            threshold_method=threshold_method, seed=seed,
        )  # fmt: skip
        for name in _WINDOW_FIELDS:
            values[name][w] = getattr(res, name)
    centres = (starts + (win - 1) / 2.0) / fs
    return WindowedRQA(time_s=centres, window_samples=win, step_samples=step, **values)


@dataclass(frozen=True)
class RecurrencePlotImage:
    """A block-averaged recurrence plot for display.

    Attributes
    ----------
    image : ndarray, shape (size, size), float64
        Fraction of recurrent cells among the admissible cells of each
        block (NaN where a block holds none); row 0 is i = 0.
    block : int
        Block edge in samples.
    threshold : float
        eps used.
    """

    image: NDArray[np.float64]
    block: int
    threshold: float


def recurrence_plot_image(
    points: ArrayLike,
    *,
    threshold: float | None = None,
    recurrence_rate: float | None = None,
    max_size: int = 512,
    theiler: int = 0,
    metric: str = "euclidean",
    threshold_method: str = "sampled",
    seed: int = 0,
) -> RecurrencePlotImage:
    """Recurrence plot downsampled to at most ``max_size`` x ``max_size`` blocks.

    The full matrix is never built: one pass over the lower triangle counts
    recurrent and admissible cells per block, mirrored for the upper half.
    Blocks are ``ceil(N / max_size)`` samples wide. Parameters as in
    :func:`rqa`; ``theiler`` defaults to 0 so the line of identity shows.

    References
    ----------
    J.-P. Eckmann, S. O. Kamphorst & D. Ruelle (1987), "Recurrence plots of
    dynamical systems", Europhys. Lett. 4:973.
    """
    fn = "recurrence_plot_image"
    max_size = check_positive_int("max_size", max_size, fn)
    xt, theiler, _, _ = _prepare(points, fn, theiler, 2, 2, metric)
    thr, eps, _ = _resolve_threshold(
        xt, fn, metric, theiler, threshold, recurrence_rate, threshold_method, seed
    )
    n = xt.shape[1]
    block = -(-n // max_size)
    size = -(-n // block)
    counts, adm = _k.image_counts(xt, thr, _METRICS[metric], theiler, block, size)
    on_diag = np.zeros(size, dtype=np.int64)
    if theiler == 0:
        on_diag = np.minimum(block, n - block * np.arange(size))
    counts = counts + counts.T - np.diag(on_diag)
    adm = adm + adm.T - np.diag(on_diag)
    with np.errstate(invalid="ignore", divide="ignore"):
        image = np.where(adm > 0, counts / np.maximum(adm, 1), np.nan)
    return RecurrencePlotImage(image=image, block=block, threshold=eps)
