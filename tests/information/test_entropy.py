"""Tests for measures.information.entropy: block entropies, entropy rate, excess entropy, LZ76, 2D.

Exact values come from the processes' hidden Markov models (forward products,
P(w) = pi T(w1) ... T(wL) 1), as in CHECKS section A; the estimators are run
on sequences simulated from the same models.
"""

from __future__ import annotations

import itertools
import math
from collections import Counter

import antropy
import numpy as np
import pytest
from _testing import assert_allclose
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays

from measures import (
    InsufficientDataError,
    InvalidParameterError,
    block_entropies,
    causal_neighbourhood,
    entropy_density_2d,
    entropy_rate,
    excess_entropy,
    lz76_complexity,
    predictability_gain,
    threshold_symbols,
)

# HMMs as {symbol: T} with T[i, j] = P(emit symbol, go to j | in i); states A=0, B=1.
FAIR_COIN = {0: np.array([[0.5]]), 1: np.array([[0.5]])}
BIASED_COIN = {0: np.array([[0.7]]), 1: np.array([[0.3]])}
# Golden mean (CHECKS A4): A->A on 1 (1/2), A->B on 0 (1/2), B->A on 1 (1).
GOLDEN_MEAN = {0: np.array([[0.0, 0.5], [0.0, 0.0]]), 1: np.array([[0.5, 0.0], [1.0, 0.0]])}
# Even process (CHECKS A5): A->A on 0 (1/2), A->B on 1 (1/2), B->A on 1 (1).
EVEN = {0: np.array([[0.5, 0.0], [0.0, 0.0]]), 1: np.array([[0.0, 0.5], [1.0, 0.0]])}
H03 = -(0.3 * math.log2(0.3) + 0.7 * math.log2(0.7))  # H(0.3) = 0.881291


def _stationary(hmm):
    total = sum(hmm.values())
    w, v = np.linalg.eig(total.T)
    pi = np.real(v[:, np.argmin(np.abs(w - 1.0))])
    return pi / pi.sum()


def _exact_block_entropy(hmm, length):
    """H(L) in bits by forward products over all k**L words (Crutchfield & Feldman 2003)."""
    vecs = _stationary(hmm)[None, :]
    for _ in range(length):
        vecs = np.concatenate([vecs @ hmm[s] for s in sorted(hmm)])
    p = vecs.sum(axis=1)
    p = p[p > 0]
    return float(-np.sum(p * np.log2(p)))


def _simulate(hmm, n, rng):
    """Sample n symbols from the HMM started in its stationary law."""
    symbols = sorted(hmm)
    n_states = next(iter(hmm.values())).shape[0]
    # For each state, the joint law of (symbol, next state), flattened.
    choices = [(s, j) for s in symbols for j in range(n_states)]
    cum = np.cumsum([[hmm[s][i, j] for s, j in choices] for i in range(n_states)], axis=1)
    state = int(rng.choice(n_states, p=_stationary(hmm)))
    out = np.empty(n, dtype=np.int64)
    for t, u in enumerate(rng.random(n)):
        s, state = choices[int(np.searchsorted(cum[state], u, side="right"))]
        out[t] = s
    return out


def _naive_block_entropy(seq, length, estimator):
    """Slow reference: Counter over tuples, plug-in or Miller-Madow, bits."""
    words = Counter(tuple(seq[i : i + length]) for i in range(len(seq) - length + 1))
    n = sum(words.values())
    h = -sum(c / n * math.log2(c / n) for c in words.values())
    if estimator == "miller_madow":
        h += (len(words) - 1) / (2 * n * math.log(2))
    return h


def _logistic_symbols(n, x0=0.3141, transient=1000):
    # CHECKS A7: x -> 4x(1-x), x0 = 0.3141, 1000 transient, cut at 1/2.
    x = x0
    out = np.empty(n)
    for t in range(n + transient):
        x = 4.0 * x * (1.0 - x)
        if t >= transient:
            out[t - transient] = x
    return threshold_symbols(out, thresholds=0.5)


# ---------------------------------------------------------------- exact HMM values


def test_hmm_helper_reproduces_published_block_entropies():
    # CHECKS A1-A5 [ANALYTIC; dit 2.3 ORACLE]: the forward-product helper used
    # below must give the tabulated exact H(L).
    for length in range(1, 6):
        assert_allclose(_exact_block_entropy(FAIR_COIN, length), length, rtol=1e-12)
        assert_allclose(_exact_block_entropy(BIASED_COIN, length), H03 * length, rtol=1e-12)
    golden = [0.918296, 1.584963, 2.251629, 2.918296, 3.584963]
    even = [0.918296, 1.792481, 2.584963, 3.355389, 4.084963]
    for length in range(1, 6):
        # Table values are printed to 6 decimals.
        assert_allclose(_exact_block_entropy(GOLDEN_MEAN, length), golden[length - 1], atol=1e-6)
        assert_allclose(_exact_block_entropy(EVEN, length), even[length - 1], atol=1e-6)
    # Even process, slow convergence (CHECKS A5): h(L) and E(L) at L = 8, 12.
    for length, h_ref, e_ref in [(8, 0.692607, 0.65338), (12, 0.673152, 0.82613)]:
        hl = _exact_block_entropy(EVEN, length)
        h = hl - _exact_block_entropy(EVEN, length - 1)
        assert_allclose(h, h_ref, atol=1e-5)
        assert_allclose(hl - length * h, e_ref, atol=1e-5)


# ---------------------------------------------------------------- estimators


def test_block_entropies_match_naive_reference(rng):
    # STYLE 12: an obviously correct slow implementation.
    seq = rng.integers(0, 3, size=3000)
    for estimator in ("plugin", "miller_madow"):
        b = block_entropies(seq, max_length=4, estimator=estimator)
        ref = [_naive_block_entropy(seq.tolist(), L, estimator) for L in range(1, 5)]
        assert_allclose(b.block_entropy, ref, rtol=1e-12)
        assert_allclose(b.entropy_gain, np.diff(ref, prepend=0.0), rtol=1e-10, atol=1e-12)


@pytest.mark.parametrize(
    ("hmm", "h_mu", "e_exact"),
    [
        (FAIR_COIN, 1.0, 0.0),  # A1
        (BIASED_COIN, H03, 0.0),  # A2
        (GOLDEN_MEAN, 2.0 / 3.0, 0.918296 - 2.0 / 3.0),  # A4, E = H(1) - h
    ],
)
def test_entropy_rate_and_excess_of_finite_order_processes(hmm, h_mu, e_exact):
    # CHECKS A1, A2, A4 [ANALYTIC]. N = 200,000 simulated symbols; the
    # tolerances (5e-3 on h, 1e-2 on E) are about 3 standard errors of the
    # estimates at the default L_max (10 for a binary alphabet), judged from
    # repeated seeds.
    seq = _simulate(hmm, 200_000, np.random.default_rng(7))
    b = block_entropies(seq)
    assert b.lengths[-1] == 10  # 2**10 * 100 <= 200,000 < 2**11 * 100
    assert_allclose(b.entropy_rate, h_mu, atol=5e-3)
    assert_allclose(entropy_rate(seq), h_mu, atol=5e-3)
    assert_allclose(excess_entropy(seq), e_exact, atol=1e-2)
    # Finite-L values against the exact forward products, L <= 6 (tolerance
    # ~ 3 sigma of a plug-in entropy at this N).
    exact = [_exact_block_entropy(hmm, L) for L in range(1, 7)]
    assert_allclose(b.block_entropy[:6], exact, atol=1e-2)


def test_even_process_finite_length_block_entropies():
    # CHECKS A5: exact H(1..5) from the HMM; the estimate from 200,000 symbols
    # must follow the slowly converging exact curve, not the limit E = 0.918.
    seq = _simulate(EVEN, 200_000, np.random.default_rng(11))
    b = block_entropies(seq, max_length=8)
    exact = np.array([_exact_block_entropy(EVEN, L) for L in range(1, 9)])
    assert_allclose(b.block_entropy, exact, atol=1e-2)  # sampling error, see above
    assert_allclose(b.excess_entropy[-1], 0.65338, atol=3e-2)  # E(8), CHECKS A5


def test_period_three_sequence():
    # CHECKS A3 [ANALYTIC]: `011` repeated, h = 0, H(L) = log2 3 for L >= 2,
    # H(1) = H(1/3) = 0.918296. Plug-in on 30,000 symbols: word counts differ
    # by at most one, so the error is below 1e-4.
    seq = np.tile([0, 1, 1], 10_000)
    b = block_entropies(seq, estimator="plugin")
    assert_allclose(b.block_entropy[0], 0.918296, atol=1e-4)
    assert_allclose(b.block_entropy[1:], math.log2(3), atol=1e-4)
    assert_allclose(b.entropy_rate, 0.0, atol=1e-4)
    assert_allclose(b.excess_entropy_estimate, math.log2(3), atol=1e-3)


def test_logistic_map_generating_partition():
    # CHECKS A7 [ANALYTIC + ORACLE]: symbolic dynamics of x -> 4x(1-x) with the
    # cut at 1/2 is a fair coin: plug-in H(L)/L = 1.00000 (L=1, 4), 0.99998
    # (L=8) at N = 2**20; tolerance +-1e-3 for L <= 10.
    seq = _logistic_symbols(2**20)
    b = block_entropies(seq, max_length=10, estimator="plugin")
    assert_allclose(b.block_entropy / b.lengths, 1.0, atol=1e-3)
    mm = block_entropies(seq, max_length=10)
    assert_allclose(mm.entropy_gain, 1.0, atol=1e-3)


def test_predictability_gain_sums_to_total_predictability(rng):
    # Crutchfield & Feldman 2003: sum of Delta^2 H(L) = h(L_max) - log2|A|
    # (telescoping, with h(0) = log2|A|); biased coin: G = H(0.3) - 1.
    seq = (rng.random(100_000) < 0.3).astype(int)
    gains = predictability_gain(seq, max_length=8)
    assert_allclose(gains.sum(), H03 - 1.0, atol=1e-2)  # sampling error at N = 1e5
    assert np.all(gains[1:] < 5e-3)  # no predictability beyond L = 1 (i.i.d.)


@settings(max_examples=30, deadline=None)
@given(
    arrays(np.int64, st.integers(200, 600), elements=st.integers(0, 3)),
    st.permutations([7, -2, 40, 3]),
)
def test_block_entropies_invariant_under_relabelling(seq, labels):
    # Property: entropy is a function of the word distribution only, so a
    # bijective renaming of the alphabet changes nothing.
    relabelled = np.asarray(labels)[seq]
    a = block_entropies(seq, max_length=3)
    b = block_entropies(relabelled, max_length=3)
    assert_allclose(a.block_entropy, b.block_entropy, rtol=1e-12)


def test_block_entropy_errors():
    with pytest.raises(InsufficientDataError):
        block_entropies([0, 1, 0, 1, 1] * 30)  # fewer than 100 * 2 symbols
    with pytest.raises(InvalidParameterError):
        block_entropies(np.zeros(100, dtype=int), estimator="nsb")
    with pytest.raises(InvalidParameterError):
        entropy_rate(np.zeros(100, dtype=int), method="ctw")


# ---------------------------------------------------------------- LZ76


def test_lz76_worked_examples():
    # CHECKS A10: `0001101001000101` parses as 0.001.10.100.1000.101, c = 6
    # [MEMORY, classic example; antropy 0.2.3 ORACLE agrees]; antropy's
    # docstring example `1001111011000010` gives c = 6, normalised 1.5
    # [CONFIRMED in the installed docstring].
    assert lz76_complexity([int(c) for c in "0001101001000101"]).phrases == 6
    lz = lz76_complexity([int(c) for c in "1001111011000010"])
    assert lz.phrases == 6
    assert_allclose(lz.normalised, 1.5)


def test_lz76_matches_antropy(rng):
    # Reference: antropy.lziv_complexity (general-purpose PyPI library).
    for n in (50, 999, 5000):
        seq = rng.integers(0, 2, size=n)
        assert lz76_complexity(seq).phrases == antropy.lziv_complexity(seq)
        assert_allclose(
            lz76_complexity(seq).normalised, antropy.lziv_complexity(seq, normalize=True)
        )


def _lz76_test_set(seed: int) -> list[np.ndarray]:
    """Random, periodic, binary and multi-symbol sequences, short and long."""
    rng = np.random.default_rng(seed)
    out = [np.array([0]), np.array([1, 1]), np.array([0, 1])]
    for n in (2, 3, 7, 50, 333, 2000):
        for k in (2, 3, 7):
            out.append(rng.integers(0, k, n))
            out.append(np.tile(rng.integers(0, k, int(rng.integers(1, 40))), n)[:n])
    out.append((rng.random(3000) < 0.05).astype(int))  # long runs of 0
    out.append(np.concatenate([rng.integers(0, 4, 500), np.zeros(500, dtype=int)]))
    return out


def test_lz76_suffix_array_parse_equals_quadratic_and_antropy():
    # The O(n log n) parser must give the phrase count of Kaspar & Schuster's
    # quadratic loop (kept as _lz76_phrases_quadratic) and of antropy 0.2.3's
    # lziv_complexity (an independent implementation of the same parsing,
    # CHECKS A10) on every sequence of the test set.
    from measures.information.entropy import _lz76_phrases_quadratic

    for seq in _lz76_test_set(5):
        ours = lz76_complexity(seq).phrases
        assert ours == _lz76_phrases_quadratic(seq.astype(np.int64)), seq[:20]
        assert ours == antropy.lziv_complexity(seq), seq[:20]


@settings(max_examples=60, deadline=None)
@given(st.lists(st.integers(0, 3), min_size=1, max_size=120))
def test_lz76_property_equals_quadratic(seq):
    from measures.information.entropy import _lz76_phrases_quadratic

    arr = np.asarray(seq)
    dense = np.unique(arr, return_inverse=True)[1].astype(np.int64)
    assert lz76_complexity(arr).phrases == _lz76_phrases_quadratic(dense)


def test_lz76_large_alphabet(rng):
    # More than 256 symbols takes the wide suffix-array path.
    seq = rng.integers(0, 1000, 5000)
    from measures.information.entropy import _lz76_phrases_quadratic

    dense = np.unique(seq, return_inverse=True)[1].astype(np.int64)
    assert lz76_complexity(seq).phrases == _lz76_phrases_quadratic(dense)


def test_lz76_fair_coin_and_period():
    # CHECKS A10 [ORACLE, antropy, seed 12345]: fair coin n = 1e4 gives
    # normalised 1.036 +- 0.02 (slow convergence from above); period-3 `011`
    # repeated has c = 4 and normalised ~ 6.6e-4 at n ~ 1e5.
    seq = np.random.default_rng(12345).integers(0, 2, size=10_000)
    assert_allclose(lz76_complexity(seq).normalised, 1.036, atol=0.02)
    assert_allclose(entropy_rate(seq, method="lz76"), 1.036, atol=0.02)
    periodic = lz76_complexity(np.tile([0, 1, 1], 33_333))
    assert periodic.phrases == 4
    assert periodic.normalised < 1e-3


# ---------------------------------------------------------------- 2D


def test_causal_neighbourhood_is_causal_and_nearest_first():
    sites = causal_neighbourhood(30)
    assert all(dy < 0 or (dy == 0 and dx < 0) for dy, dx in sites)
    dist = [dy * dy + dx * dx for dy, dx in sites]
    assert dist == sorted(dist)
    assert len(set(sites)) == 30


def test_iid_field_entropy_density(rng):
    # Analytic (Feldman & Crutchfield 2003): for i.i.d. sites every
    # conditional entropy equals the single-site entropy, so h = H(0.3) and
    # E = 0. 512 x 512 sites; 5e-3 / 1e-2 are about 3 standard errors here.
    field = (rng.random((512, 512)) < 0.3).astype(int)
    r = entropy_density_2d(field)
    assert_allclose(r.conditional_entropy[0], H03, atol=5e-3)
    assert_allclose(r.entropy_density, H03, atol=5e-3)
    assert_allclose(r.excess_entropy, 0.0, atol=1e-2)
    assert r.neighbourhood_sizes[-1] == 10  # 2**11 * 100 <= 512**2 < 2**12 * 100


def test_checkerboard_entropy_density_is_zero():
    # Analytic: the left neighbour fixes every site, so h(m >= 1) = 0 and
    # E = h(0) - h = 1 bit (Feldman & Crutchfield 2003, periodic patterns).
    board = np.indices((200, 300)).sum(axis=0) % 2
    r = entropy_density_2d(board)
    assert_allclose(r.entropy_density, 0.0, atol=1e-12)
    assert_allclose(r.conditional_entropy[1:], 0.0, atol=1e-12)
    assert_allclose(r.excess_entropy, 1.0, atol=1e-4)  # Miller-Madow term on h(0)


def test_field_of_independent_golden_mean_rows():
    # Same code path as 1D: rows are independent golden-mean sequences, so the
    # left neighbour carries all the information (Markov order 1) and the
    # field has h = 2/3 and E = H(1) - h = 0.251629 (CHECKS A4 [ANALYTIC]).
    rng = np.random.default_rng(3)
    field = _simulate(GOLDEN_MEAN, 400 * 500, rng).reshape(400, 500)
    # Row ends join the next row start; that couples 1 site in 500 and is
    # below the tolerance, judged by the 2e5-site sampling error.
    r = entropy_density_2d(field)
    assert_allclose(r.entropy_density, 2.0 / 3.0, atol=5e-3)
    assert_allclose(r.excess_entropy, 0.251629, atol=1e-2)


@settings(max_examples=20, deadline=None)
@given(
    arrays(np.int64, (30, 40), elements=st.integers(0, 2)),
    st.permutations([5, -1, 9]),
)
def test_entropy_density_invariant_under_relabelling(field, labels):
    # Property: a bijective renaming of symbols changes no entropy.
    a = entropy_density_2d(field, max_neighbourhood=3)
    b = entropy_density_2d(np.asarray(labels)[field], max_neighbourhood=3)
    assert_allclose(a.conditional_entropy, b.conditional_entropy, rtol=1e-12, atol=1e-12)


def test_entropy_density_errors():
    with pytest.raises(InsufficientDataError):
        entropy_density_2d(np.zeros((3, 4), dtype=int))
    with pytest.raises(InsufficientDataError):
        entropy_density_2d(np.zeros((2, 400), dtype=int), max_neighbourhood=6)
    with pytest.raises(InvalidParameterError):
        entropy_density_2d(np.zeros(400, dtype=int))


@pytest.mark.slow
def test_even_process_long_words_converge_slowly():
    # CHECKS A5 [ANALYTIC, dit ORACLE]: h(12) = 0.673152, E(12) = 0.82613;
    # at N = 10**6 the estimate must sit at these finite-L values, far from
    # E = 0.918. Tolerance: sampling error at L = 12 (4096 possible words).
    seq = _simulate(EVEN, 1_000_000, np.random.default_rng(5))
    b = block_entropies(seq, max_length=12)
    assert_allclose(b.entropy_gain[-1], 0.673152, atol=5e-3)
    assert_allclose(b.excess_entropy[-1], 0.82613, atol=5e-2)


def test_all_words_enumerated_by_helper_sum_to_one():
    # Guard for the HMM helper itself: word probabilities form a distribution.
    for hmm in (GOLDEN_MEAN, EVEN):
        vecs = _stationary(hmm)[None, :]
        for _ in range(6):
            vecs = np.concatenate([vecs @ hmm[s] for s in sorted(hmm)])
        assert_allclose(vecs.sum(), 1.0, rtol=1e-12)
        assert len(list(itertools.product([0, 1], repeat=6))) == vecs.shape[0]


@pytest.mark.parametrize(
    ("shape", "k", "m"),
    [((40, 37), 3, 6), ((9, 50), 4, 5), ((100, 100), 2, 12), ((30, 30), 5, 4), ((7, 7), 2, 12)],
)
@pytest.mark.parametrize("estimator", ["miller_madow", "plugin"])
def test_site_and_neighbour_entropies_equal_two_prefix_entropies(shape, k, m, estimator):
    # The compiled pass counts each site's longest word once and derives the
    # shorter and the neighbour-only words as marginals: the entropies must be
    # those of the two plain prefix_entropies calls, bit for bit (also where the
    # template crops the field, and where it does not fit at all).
    from measures.information._counting import prefix_entropies, site_and_neighbour_entropies

    rng = np.random.default_rng(m)
    d = rng.integers(0, k, shape)
    d[::3] = d[::3] // 2
    offs = causal_neighbourhood(m)
    joint, nbs = site_and_neighbour_entropies(d, k, offs, estimator)
    np.testing.assert_array_equal(joint, prefix_entropies(d, k, [(0, 0), *offs], estimator)[0])
    np.testing.assert_array_equal(nbs, prefix_entropies(d, k, offs, estimator)[0])
