"""Tests for measures.information.symbolic: ordinal codes, binning, partitions, joint alphabets."""

from __future__ import annotations

import itertools
import math

import numpy as np
import ordpy
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays

from measures import (
    InsufficientDataError,
    InvalidParameterError,
    joint_symbols,
    ordinal_patterns,
    quantile_symbols,
    state_symbols,
    supported_word_length,
    threshold_symbols,
)


def _lexicographic_rank(perms: np.ndarray) -> np.ndarray:
    """Reference: rank of each permutation (last axis) among itertools.permutations.

    itertools yields permutations in lexicographic order (Python docs), so this
    is an obviously correct, slow implementation of the documented code.
    """
    d = perms.shape[-1]
    table = {p: i for i, p in enumerate(itertools.permutations(range(d)))}
    flat = perms.reshape(-1, d)
    return np.array([table[tuple(int(v) for v in row)] for row in flat]).reshape(perms.shape[:-1])


# ---------------------------------------------------------------- ordinal codes


def test_ordinal_docstring_examples_of_ordpy():
    # Source: ordpy 1.2.3 docstring of ordinal_sequence (general-purpose PyPI
    # library): [4,7,9,10,6,11,3], dx=2 gives (0,1),(0,1),(0,1),(1,0),(0,1),(1,0);
    # with taux=2: (0,1),(0,1),(1,0),(0,1),(1,0).
    x = [4, 7, 9, 10, 6, 11, 3]
    np.testing.assert_array_equal(
        ordinal_patterns(x, order=2, min_windows_per_pattern=0), [0, 0, 0, 1, 0, 1]
    )
    np.testing.assert_array_equal(
        ordinal_patterns(x, order=2, delay=2, min_windows_per_pattern=0), [0, 0, 1, 0, 1]
    )
    # Same docstring, 2D: [[1,2,1,4],[8,3,4,5],[6,7,5,6]], dx=dy=2.
    field = [[1, 2, 1, 4], [8, 3, 4, 5], [6, 7, 5, 6]]
    expected = _lexicographic_rank(
        np.array(
            [
                [[0, 1, 3, 2], [1, 0, 2, 3], [0, 1, 2, 3]],
                [[1, 2, 3, 0], [0, 1, 3, 2], [0, 1, 2, 3]],
            ]
        )
    )
    np.testing.assert_array_equal(
        ordinal_patterns(field, order=(2, 2), min_windows_per_pattern=0), expected
    )


@pytest.mark.parametrize("order", [3, 4, 5])
@pytest.mark.parametrize("delay", [1, 2, 3])
def test_ordinal_codes_match_ordpy_1d_with_ties(rng, order, delay):
    # Reference: ordpy.ordinal_sequence (stable argsort), ranked lexicographically.
    # Integer-valued data make ties frequent, so the tie rule is exercised.
    x = rng.integers(0, 3, size=400).astype(float)
    ours = ordinal_patterns(x, order=order, delay=delay, min_windows_per_pattern=0)
    ref = _lexicographic_rank(ordpy.ordinal_sequence(x, dx=order, taux=delay))
    np.testing.assert_array_equal(ours, ref)


@pytest.mark.parametrize("order", [(2, 2), (3, 2), (2, 3), (1, 3), (4, 1)])
@pytest.mark.parametrize("delay", [1, 2, (1, 2)])
def test_ordinal_codes_match_ordpy_2d(rng, order, delay):
    # Reference: ordpy.ordinal_sequence on images (windows read row by row).
    z = rng.normal(size=(30, 37))
    z[::4, ::3] = 0.0  # some ties
    tx, ty = delay if isinstance(delay, tuple) else (delay, delay)
    ours = ordinal_patterns(z, order=order, delay=delay, min_windows_per_pattern=0)
    ref = _lexicographic_rank(ordpy.ordinal_sequence(z, dx=order[0], dy=order[1], taux=tx, tauy=ty))
    np.testing.assert_array_equal(ours, ref)


def test_monotone_and_reversed_series_codes():
    # Analytic (module convention): increasing windows are the identity
    # permutation, code 0; decreasing windows are the reversal, code D! - 1.
    up = np.arange(300.0)
    assert set(ordinal_patterns(up, order=4).tolist()) == {0}
    assert set(ordinal_patterns(up[::-1], order=4).tolist()) == {math.factorial(4) - 1}


def test_too_few_windows_rejected():
    # CHECKS B5 pitfall [ORACLE]: 3 x 3 patches on 512 x 512 noise give 260,100
    # windows for 9! = 362,880 patterns; the estimate is biased (H = 0.94), so
    # the default rule (>= 10 windows per pattern) must refuse it.
    z = np.random.default_rng(12345).normal(size=(512, 512))
    with pytest.raises(InsufficientDataError):
        ordinal_patterns(z, order=(3, 3))
    with pytest.raises(InsufficientDataError):
        ordinal_patterns(np.arange(50.0), order=4)  # 47 windows < 240


def test_ordinal_bad_parameters():
    with pytest.raises(InvalidParameterError):
        ordinal_patterns(np.arange(100.0), order=1)
    with pytest.raises(InvalidParameterError):
        ordinal_patterns(np.ones((10, 10)), order=3)  # a field needs (dx, dy)
    with pytest.raises(InvalidParameterError):
        ordinal_patterns([1.0, np.nan, 2.0, 3.0], order=2, min_windows_per_pattern=0)


@settings(max_examples=40, deadline=None)
@given(arrays(np.int64, st.integers(30, 120), elements=st.integers(-20, 20)))
def test_ordinal_codes_invariant_under_increasing_maps(x):
    # Property (Bandt & Pompe 2002: patterns depend only on order relations):
    # a strictly increasing map, here 2 x^3 + 5 (exact in float64 for these
    # integers, so ties are preserved), leaves every code unchanged.
    xf = x.astype(float)
    a = ordinal_patterns(xf, order=3, min_windows_per_pattern=0)
    b = ordinal_patterns(2.0 * xf**3 + 5.0, order=3, min_windows_per_pattern=0)
    np.testing.assert_array_equal(a, b)


# ---------------------------------------------------------------- binning


def test_quantile_symbols_equiprobable(rng):
    # Definition (equiprobable partition, common practice): each of n_bins
    # symbols takes N / n_bins of the samples, to within one sample for
    # continuous data.
    x = rng.normal(size=10_000)
    for n_bins in (2, 3, 7):
        counts = np.bincount(quantile_symbols(x, n_bins=n_bins))
        assert len(counts) == n_bins
        assert counts.max() - counts.min() <= 2
    z = rng.normal(size=(64, 50))
    s = quantile_symbols(z, n_bins=4)
    assert s.shape == z.shape
    assert np.bincount(s.ravel()).min() >= 800 - 2


def test_quantile_symbols_order_and_ties():
    # Equal values share a symbol, and symbols increase with the value.
    x = np.array([3.0, 1.0, 2.0, 2.0, 2.0, 5.0])
    s = quantile_symbols(x, n_bins=3)
    assert len(set(s[[2, 3, 4]].tolist())) == 1
    assert np.all(np.diff(s[np.argsort(x, kind="stable")]) >= 0)


def test_threshold_symbols_generating_partition():
    # Crutchfield & Feldman 2003 (CHECKS A7): symbol = [x >= 0.5] for the
    # logistic map.
    x = np.array([0.1, 0.5, 0.49, 0.99])
    np.testing.assert_array_equal(threshold_symbols(x, thresholds=0.5), [0, 1, 0, 1])
    np.testing.assert_array_equal(threshold_symbols(x, thresholds=[0.2, 0.6]), [0, 1, 1, 2])
    with pytest.raises(InvalidParameterError):
        threshold_symbols(x, thresholds=[0.6, 0.2])


def test_joint_symbols_product_alphabet(rng):
    a = rng.integers(0, 3, size=5000)
    b = rng.integers(10, 14, size=5000)
    j = joint_symbols([a, b])
    # Bijection with the observed pairs (definition of a joint alphabet).
    pairs = set(zip(a.tolist(), b.tolist(), strict=True))
    assert j.max() + 1 == len(pairs) == 12
    mapping = {}
    for pair, code in zip(zip(a.tolist(), b.tolist(), strict=True), j.tolist(), strict=True):
        assert mapping.setdefault(pair, code) == code
    np.testing.assert_array_equal(joint_symbols(np.stack([a, b])), j)
    with pytest.raises(InvalidParameterError):
        joint_symbols([a, b[:-1]])


# ---------------------------------------------------------------- multichannel state


def _circle(n: int, period: int) -> np.ndarray:
    # An exactly periodic orbit: one period, tiled (so equal phases give
    # bit-identical states and hence identical cells).
    t = np.arange(period)
    one = np.column_stack(
        [np.cos(2 * np.pi * t / period + 0.1), np.sin(2 * np.pi * t / period + 0.1)]
    )
    return np.tile(one, (n // period, 1))


@pytest.mark.parametrize("method", ["quantile", "ordinal"])
def test_state_symbols_periodic_orbit_has_log2_period_states(method):
    # CHECKS A3 (general period p): a periodic orbit of period 40 samples gives
    # a period-40 symbol sequence, so C_mu = log2 40 and h = 0 [ANALYTIC].
    from measures import causal_states

    out = state_symbols(_circle(40_000, 40), method=method)
    m = causal_states(out.symbols)
    assert m.reliable
    assert m.n_states == 40
    assert abs(m.statistical_complexity - math.log2(40)) < 1e-9
    assert m.entropy_rate == 0.0


@pytest.mark.parametrize("method", ["quantile", "ordinal"])
def test_state_symbols_separate_a_noisy_orbit(method):
    # The same orbit with phase diffusion and observation noise: the symbols
    # carry randomness (h > 0.5 bit) and a different statistical complexity
    # (more than 0.5 bit from log2 40), so the symbolisation tells the two apart.
    from measures import causal_states

    rng = np.random.default_rng(0)
    n = 40_000
    phase = 2 * np.pi * np.arange(n) / 40 + np.cumsum(rng.normal(0, 0.15, n))
    noisy = np.column_stack([np.cos(phase), np.sin(phase)]) + rng.normal(0, 0.2, (n, 2))
    m = causal_states(state_symbols(noisy, method=method).symbols)
    assert m.entropy_rate > 0.5
    assert abs(m.statistical_complexity - math.log2(40)) > 0.5


def test_state_symbols_iid_state_is_a_uniform_source(rng):
    # [ANALYTIC] Independent components cut at their quantiles give i.i.d.
    # symbols, uniform over q**m cells: C_mu = 0, h = log2(q**m) = log2 9.
    from measures import causal_states

    out = state_symbols(rng.normal(size=(40_000, 3)))
    assert out.n_components == 2 and out.cells_per_component == 3
    assert out.alphabet_size == 9
    assert np.bincount(out.symbols).min() > 0.9 * 40_000 / 9
    m = causal_states(out.symbols)
    assert m.n_states == 1
    assert abs(m.entropy_rate - math.log2(9)) < 0.01


def test_state_symbols_rule_and_parameters(rng):
    # Stated rule: the largest q with 50 * (q**m)**3 <= n.
    x = rng.normal(size=(40_000, 2))
    out = state_symbols(x)
    assert out.cells_per_component == 3  # 50 * 9**3 = 36,450 <= 40,000 < 50 * 16**3
    assert "50" in out.rule
    for j in range(2):
        assert np.allclose(out.edges[j], np.quantile(x[:, j], [1 / 3, 2 / 3]))
    big = state_symbols(rng.normal(size=(210_000, 2)))
    assert big.cells_per_component == 4  # 50 * 16**3 = 204,800 <= 210,000
    given = state_symbols(x, cells_per_component=5, n_components=1)
    assert given.alphabet_size == 5 and given.rule == "given"
    with pytest.raises(InsufficientDataError):
        state_symbols(rng.normal(size=(1000, 2)))
    with pytest.raises(InvalidParameterError):
        state_symbols(x, method="kmeans")
    with pytest.raises(InvalidParameterError):
        state_symbols(x, n_components=3)


# --- supported_word_length: the Marton & Shields (1994) rule --------------------------


def test_supported_word_length_fair_coin(rng):
    # A fair coin shows all 2**w words: W(w)**2 <= N gives w = floor(log2(N) / 2)
    # (analytic; log2 10,000 = 13.3, so 2**6 = 64 words <= 100 < 2**7).
    assert supported_word_length(rng.integers(0, 2, 10_000)) == 6


def test_supported_word_length_golden_mean_counts_fibonacci_words():
    # Binary words without "00" number F(w + 2) (Fibonacci; the golden mean process
    # of Crutchfield & Feldman 2003). A long sequence showing every allowed word:
    # W(w) = 2, 3, 5, 8, 13, 21, 34, 55, 89, 144 for w = 1..10; N = 10,000 gives
    # W(9) = 89 <= 100 < W(10) = 144, and 2**9 <= N: w = 9.
    rng = np.random.default_rng(3)
    out, last = [], 1
    while len(out) < 10_000:
        last = 1 if last == 0 else int(rng.integers(0, 2))
        out.append(last)
    assert supported_word_length(out) == 9


def test_supported_word_length_periodic_is_capped_by_the_alphabet():
    # Period 3 over 3 symbols: W(w) = 3 for every w, so only k**w <= N binds
    # (3**6 = 729 <= 900 < 3**7); period 2 over 2 symbols, N = 4: w = 2.
    assert supported_word_length([0, 1, 2] * 300) == 6
    assert supported_word_length([0, 1] * 2) == 2
    # Too few symbols for single-symbol frequencies: 4 distinct in 15 (4**2 > 15).
    assert supported_word_length([0, 1, 2, 3, 0] * 3) == 0
    with pytest.raises(InvalidParameterError):
        supported_word_length([])


@pytest.mark.parametrize("k", [2, 3, 4, 8, 9])
def test_quantile_symbols_equal_numpy_searchsorted_on_its_quantiles(k):
    # Few bins take a comparison per edge instead of searchsorted: the symbols
    # must be numpy's (the count of quantile edges <= x), ties and all.
    rng = np.random.default_rng(k)
    for x in (
        rng.standard_normal((64, 50)),
        np.round(rng.standard_normal(1001)),  # heavy ties, values on the edges
        np.r_[np.zeros(30), np.ones(3)],
    ):
        edges = np.quantile(x, np.arange(1, k) / k)
        got = quantile_symbols(x, n_bins=k)
        assert got.dtype == np.int64
        np.testing.assert_array_equal(got, np.searchsorted(edges, x, side="right"))
