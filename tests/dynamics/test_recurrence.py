"""Tests for measures.dynamics.recurrence (CHECKS.md D2, D4, D5; Marwan et al. 2007)."""

from __future__ import annotations

import math

import numpy as np
import pytest

# The dense reference shares no code with the streaming kernels (issue: independent oracles).
from _dense_rqa import dense_rqa as rqa_dense
from _testing import assert_allclose
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.integrate import solve_ivp
from scipy.spatial.distance import pdist

from measures import (
    InsufficientDataError,
    InvalidParameterError,
    delay_embed,
    recurrence_plot_image,
    rqa,
    windowed_rqa,
)
from measures.dynamics.recurrence import _prepare, _resolve_threshold, _rqa_from_comparison

FIELDS = ("rr", "det", "l_mean", "l_max", "entr", "lam", "tt", "v_max", "threshold", "n",
          "n_recurrences", "n_admissible")  # fmt: skip


COUNTS = ("l_max", "v_max", "n", "n_recurrences", "n_admissible")


def _trim(h):
    nz = np.flatnonzero(h)
    return h[: (nz[-1] + 1 if nz.size else 1)]


def assert_same(a, b):
    """Counts and line histograms exactly; ratios to 1e-12 (the oracle sums in
    its own order), NaN equal to NaN."""
    for name in FIELDS:
        x, y = getattr(a, name), getattr(b, name)
        if name in COUNTS:
            assert x == y, (name, x, y)
        else:
            assert (math.isnan(x) and math.isnan(y)) or math.isclose(x, y, rel_tol=1e-12), (
                name, x, y,
            )  # fmt: skip
    assert np.array_equal(_trim(a.diagonal_lengths)[1:], _trim(b.diagonal_lengths)[1:])
    assert np.array_equal(_trim(a.vertical_lengths)[1:], _trim(b.vertical_lengths)[1:])


def _signals(n, rng):
    t = np.arange(n)

    def lorenz(_t, s):
        x, y, z = s
        return [10.0 * (y - x), x * (28.0 - z) - y, x * y - 8.0 / 3.0 * z]

    sol = solve_ivp(lorenz, (0, 10 + 0.02 * n), [1.0, 1.0, 1.0], method="DOP853",
                    t_eval=10 + 0.02 * t, rtol=1e-9, atol=1e-9)  # fmt: skip
    ar = np.zeros(n)
    e = rng.normal(size=n)
    for i in range(1, n):
        ar[i] = 0.9 * ar[i - 1] + e[i]
    return {
        "lorenz": sol.y.T,
        "noisy_sine": delay_embed(
            np.sin(2 * np.pi * np.arange(n + 4) / 17) + 0.1 * rng.normal(size=n + 4),
            dimension=3,
            delay=2,
        ),
        "ar1": ar,
        "random_walk": np.cumsum(rng.normal(size=(n, 2)), axis=0),
        "ties": np.round(np.sin(0.3 * t), 1),  # many equal distances at the threshold
    }


@pytest.mark.parametrize("n", [2, 7, 50, 129])
def test_streaming_equals_dense(n, rng):
    # Reference: the dense matrix read literally (Marwan et al. 2007 definitions).
    for name, x in _signals(n, rng).items():
        for metric in ("euclidean", "maximum"):
            for theiler in (0, 1, 5):
                if theiler >= len(x):
                    continue
                for lmin, rate in ((2, 0.1), (3, 0.3)):
                    kw = dict(theiler=theiler, lmin=lmin, vmin=5 - lmin, metric=metric)
                    dense = rqa_dense(x, recurrence_rate=rate, **kw)  # exact rank
                    assert_same(rqa(x, recurrence_rate=rate, threshold_method="exact", **kw),
                                dense)  # fmt: skip
                    eps = dense.threshold * 1.5
                    assert_same(rqa(x, threshold=eps, **kw), rqa_dense(x, threshold=eps, **kw))
                    assert name


@pytest.mark.parametrize("n_strips", [1, 2, 3, 40])
def test_strip_count_does_not_matter(n_strips, rng):
    # Stitching runs across strips must give the dense answer for any split.
    x = np.cumsum(rng.normal(size=(97, 2)), axis=0)
    for theiler in (0, 1, 5):
        dense = rqa_dense(x, recurrence_rate=0.2, theiler=theiler)
        xt, *_ = _prepare(x, "t", theiler, 2, 2, "euclidean")
        thr, _, _ = _resolve_threshold(xt, "t", "euclidean", theiler, None, 0.2, "exact", 0)
        got = _rqa_from_comparison(xt, thr, dense.threshold, "euclidean", theiler, 2, 2,
                                   "exact", n_strips=n_strips)  # fmt: skip
        assert_same(got, dense)


@settings(max_examples=60, deadline=None)
@given(
    values=st.lists(st.integers(-3, 3), min_size=2, max_size=40),
    theiler=st.integers(0, 4),
    eps=st.sampled_from([0.0, 1.0, 1.5, 2.0]),
    lmin=st.integers(1, 3),
)
def test_property_streaming_equals_dense(values, theiler, eps, lmin):
    # Property (no published value exists): integer data make ties at eps common.
    x = np.array(values, dtype=float)
    if theiler >= x.size:
        return
    kw = dict(threshold=eps, theiler=theiler, lmin=lmin, vmin=lmin)
    assert_same(rqa(x, **kw), rqa_dense(x, **kw))


def test_periodic_signal_d4():
    # CHECKS D4 (Marwan et al. 2007): x_t = sin(2 pi t / 20), m = 2, delay 1,
    # maximum norm. CHECKS states eps = 0.05, but there the delay vectors of
    # phases 4 and 5 (of 20) are 1 - sin(0.4 pi) = 0.0489 apart (coordinates
    # swapped), which adds isolated recurrences (DET = 0.83 measured, RR
    # 0.058, close to the listed oracle RR 0.0595). We use eps = 0.04, below
    # that gap, where the analytic argument holds: recurrences lie only on the diagonals
    # k = 20, 40, ... (analytic), so DET = 1 and Lmax = (N - 1) - 20 for the
    # N - 1 delay vectors; RR = 2 sum_k (M - k) / (M (M - 1)) with M = N - 1.
    lengths = []
    for n in (400, 800):
        x = delay_embed(np.sin(2 * np.pi * np.arange(n) / 20), dimension=2, delay=1)
        m = x.shape[0]
        res = rqa(x, threshold=0.04, metric="maximum")
        assert res.det == 1.0
        assert res.l_max == m - 20
        expected_rr = 2 * sum(m - k for k in range(20, m, 20)) / (m * (m - 1))
        assert_allclose(res.rr, expected_rr, rtol=1e-12)
        lengths.append(res.l_mean)
    # L grows in proportion to N (CHECKS D4): L = mean of (M - k), k = 20, 40, ...
    assert_allclose(lengths[1] / lengths[0], 799 / 399, rtol=0.05)  # edge terms


@pytest.mark.parametrize("dim", [1, 2, 3])
def test_iid_noise_det_d2(dim, rng):
    # CHECKS D2 [ANALYTIC]: i.i.d. uniform noise, eps = 0.1 (maximum norm),
    # lmin = 2: DET = 1 - (1 - p1)^2, p1 = 2 eps - eps^2, for every m (delay 1).
    p1 = 2 * 0.1 - 0.1**2
    x = delay_embed(rng.random(2500 + dim), dimension=dim, delay=1)
    res = rqa(x, threshold=0.1, metric="maximum", theiler=1)
    assert abs(res.det - (1 - (1 - p1) ** 2)) < 0.008  # N = 2500 (CHECKS: 0.005 at 3000)
    assert abs(res.rr - p1**dim) < 0.05 * p1**dim


def test_theiler_bookkeeping_d5(rng):
    # CHECKS D5 (Theiler 1986 [MEMORY]): w = 0 -> 1 removes exactly N
    # recurrences; 0 -> w removes N + 2 sum_{k<w} R_k (R_k counted directly).
    x = np.cumsum(rng.normal(size=(300, 2)), axis=0)
    eps = 2.0
    base = rqa(x, threshold=eps, theiler=0)
    assert base.n_recurrences - rqa(x, threshold=eps, theiler=1).n_recurrences == 300
    assert base.l_max == 300  # the line of identity is a diagonal line (contract, literally)
    for w in (3, 7):
        r_k = [np.sum(np.sum((x[k:] - x[:-k]) ** 2, axis=1) <= eps**2) for k in range(1, w)]
        got = rqa(x, threshold=eps, theiler=w)
        assert base.n_recurrences - got.n_recurrences == 300 + 2 * sum(r_k)
        assert got.n_admissible == (300 - w) * (300 - w + 1)


def test_exact_threshold_matches_pdist(rng):
    # Reference: scipy.spatial.distance.pdist (all pairs); eps is the K-th
    # smallest admissible distance, K = round(rate * P). N = 3100 takes the
    # one-pass bracket route (more than 4e6 pairs).
    x = rng.normal(size=(3100, 3))
    res = rqa(x, recurrence_rate=0.05, threshold_method="exact")
    d = np.sort(pdist(x))
    k_lower = (round(0.05 * 3100 * 3099) + 1) // 2
    assert_allclose(res.threshold, d[k_lower - 1], rtol=1e-12)  # pdist rounds differently
    assert res.n_recurrences == 2 * k_lower


def test_sampled_threshold_error(rng):
    # Sampled quantile of 1e6 pairs: RR standard error sqrt(p (1-p) / 1e6)
    # = 2.2e-4 at p = 0.05 (binomial); assert within 5 standard errors.
    x = rng.normal(size=(2000, 2))
    res = rqa(x, recurrence_rate=0.05)
    assert abs(res.rr - 0.05) < 5 * math.sqrt(0.05 * 0.95 / 1e6)


def _plain_lower_pairs(n, theiler, n_pairs, seed):
    # The sampling rule written with numpy alone (the first release's code): seeded draws of
    # 2 x n_pairs row and column indices a round, pairs at least max(theiler, 1) apart.
    rng = np.random.default_rng(seed)
    we = max(theiler, 1)
    rows = np.empty(0, dtype=np.int64)
    cols = np.empty(0, dtype=np.int64)
    while rows.size < n_pairs:
        a = rng.integers(0, n, size=2 * n_pairs)
        b = rng.integers(0, n, size=2 * n_pairs)
        keep = np.abs(a - b) >= we
        rows = np.concatenate((rows, np.maximum(a, b)[keep]))
        cols = np.concatenate((cols, np.minimum(a, b)[keep]))
    return rows[:n_pairs], cols[:n_pairs]


@settings(max_examples=40, deadline=None)
@given(
    n=st.integers(2, 400),
    theiler=st.integers(0, 60),
    n_pairs=st.integers(1, 3000),
    seed=st.integers(0, 2**32 - 1),
)
def test_sampled_pairs_are_the_plain_rule(n, theiler, n_pairs, seed):
    # The compiled pass keeps the same pairs in the same order as the numpy rule, so every
    # sampled threshold is what it was; the sampled order statistic is a selection now.
    from measures.dynamics.recurrence import _sample_lower_pairs

    if n - max(theiler, 1) < 1:
        return  # no admissible pair: the rule would draw for ever (callers never ask)
    rows, cols = _sample_lower_pairs(n, theiler, n_pairs, seed)
    r0, c0 = _plain_lower_pairs(n, theiler, n_pairs, seed)
    assert np.array_equal(rows, r0) and np.array_equal(cols, c0)


def test_sampled_threshold_is_the_order_statistic_of_the_sample(rng):
    # The threshold for RR 5 % on a 1,600-point series (1.28 M lower pairs > 1e6 sampled):
    # the ceil(frac x 1e6)-th smallest squared distance of the seeded sample, by np.sort.
    from measures.dynamics.recurrence import SAMPLE_PAIRS, _sample_lower_pairs

    x = rng.normal(size=(1600, 2))
    xt, theiler, *_ = _prepare(x, "t", 0, 2, 2, "euclidean")
    thr, _, _ = _resolve_threshold(xt, "t", "euclidean", theiler, None, 0.05, "sampled", 11)
    rows, cols = _plain_lower_pairs(1600, theiler, SAMPLE_PAIRS, 11)
    d = np.sort(((x[rows] - x[cols]) ** 2).sum(axis=1))
    n_lower = 1599 * 1600 // 2  # theiler 0: the lower triangle, diagonal aside
    k_lower = (round(0.05 * 1600 * 1600) - 1600 + 1) // 2  # N zeros on the diagonal first
    idx = math.ceil(k_lower / n_lower * d.size) - 1
    assert thr == pytest.approx(d[idx], rel=1e-12)
    assert _sample_lower_pairs(1600, theiler, 10, 11)[0].dtype == np.int64


def test_empty_lines_give_zero_and_nan():
    # Contract: DET and LAM are 0 and L, TT, ENTR NaN when no line reaches lmin.
    res = rqa(np.array([0.0, 10.0, 20.0, 30.0]), threshold=1.0)
    assert res.rr == 0 and res.det == 0 and res.lam == 0
    assert math.isnan(res.l_mean) and math.isnan(res.tt) and math.isnan(res.entr)


def test_recurrence_plot_image_block_means(rng):
    # Reference: block means of the dense matrix (admissible cells only).
    x = np.cumsum(rng.normal(size=(100, 2)), axis=0)
    img = recurrence_plot_image(x, threshold=3.0, max_size=32, theiler=0)
    assert img.block == 4 and img.image.shape == (25, 25)
    dist = np.sqrt(((x[:, None] - x[None]) ** 2).sum(-1))
    dense = (dist <= 3.0).astype(float).reshape(25, 4, 25, 4).mean(axis=(1, 3))
    assert_allclose(img.image, dense, rtol=0, atol=1e-12)


def test_windowed_rqa_matches_slices(rng):
    x = np.cumsum(rng.normal(size=300))
    win = windowed_rqa(x, frame_rate_hz=100.0, window_s=1.0, step_s=0.5, threshold=1.0)
    assert_allclose(win.time_s, [0.495, 0.995, 1.495, 1.995, 2.495])  # (start + 49.5) / 100
    assert win.det[1] == rqa(x[50:150], threshold=1.0).det


def test_parameter_errors():
    x = np.arange(10.0)
    with pytest.raises(InvalidParameterError):
        rqa(x, threshold=1.0, recurrence_rate=0.1)
    with pytest.raises(InvalidParameterError):
        rqa(x, metric="manhattan")
    with pytest.raises(InsufficientDataError):
        rqa(x, theiler=10)


@pytest.mark.slow
def test_streaming_equals_dense_large(rng):
    # Same reference as above at a size spanning many strips and rows.
    x = _signals(2001, rng)["lorenz"]
    for theiler in (0, 1, 5):
        assert_same(rqa(x, recurrence_rate=0.05, threshold_method="exact", theiler=theiler),
                    rqa_dense(x, recurrence_rate=0.05, theiler=theiler))  # fmt: skip


def test_resolve_threshold_rate_one():
    # rate = 1: eps is the largest admissible distance, every pair recurs.
    x = np.array([0.0, 1.0, 3.0])
    xt, *_ = _prepare(x, "t", 1, 2, 2, "euclidean")
    _, eps, _ = _resolve_threshold(xt, "t", "euclidean", 1, None, 1.0, "exact", 0)
    assert eps == 3.0 and rqa(x, recurrence_rate=1.0).rr == 1.0


@pytest.mark.parametrize("metric", ["euclidean", "chebyshev"])
@pytest.mark.parametrize("theiler", [0, 1, 7])
def test_all_lower_distances_follow_tril_indices(rng, metric, theiler):
    # Reference: numpy's tril_indices order and plain numpy distances (squared Euclidean,
    # as the comparisons use them), for every pair at least max(theiler, 1) apart.
    from measures.dynamics.recurrence import _METRICS, _all_lower_distances

    x = rng.normal(size=(60, 3))
    rows, cols = np.tril_indices(60, -max(theiler, 1))
    diff = x[rows] - x[cols]
    expected = {
        "euclidean": (diff**2).sum(axis=1),
        "chebyshev": np.abs(diff).max(axis=1),
    }[metric]
    got = _all_lower_distances(np.ascontiguousarray(x.T), _METRICS[metric], theiler)
    assert_allclose(got, expected, rtol=1e-13, atol=0)
