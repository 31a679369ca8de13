"""Tests for measures.information.causal (CSSR).

Reference values are the exact h_mu and C_mu of small hidden Markov processes
(CHECKS A1-A5, A7, A8b: Crutchfield & Feldman 2003, Chaos 13:25, analytic;
Shalizi & Klinkner 2004, UAI, for the algorithm).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from _testing import assert_allclose
from hypothesis import given, settings
from hypothesis import strategies as st

from measures import (
    SYNCHRONISED_THRESHOLD,
    InsufficientDataError,
    InvalidParameterError,
    causal_states,
)

LOG2_3 = math.log2(3)
H_GOLDEN = 0.918296  # H(2/3, 1/3) in bits, CHECKS A4/A5 [ANALYTIC]

# Unifilar hidden Markov models: state -> [(probability, symbol, next state)].
GOLDEN_MEAN = {0: [(0.5, 1, 0), (0.5, 0, 1)], 1: [(1.0, 1, 0)]}  # no "00", CHECKS A4
EVEN_PROCESS = {0: [(0.5, 0, 0), (0.5, 1, 1)], 1: [(1.0, 1, 0)]}  # even runs of 1, CHECKS A5


def simulate(machine: dict, n: int, seed: int) -> np.ndarray:
    """Draw n symbols from a unifilar HMM, starting in state 0."""
    u = np.random.default_rng(seed).random(n)
    out = np.empty(n, dtype=np.int64)
    state = 0
    for t in range(n):
        acc = 0.0
        for p, sym, nxt in machine[state]:
            acc += p
            if u[t] < acc:
                out[t], state = sym, nxt
                break
    return out


def logistic_symbols(n: int, x0: float = 0.3141) -> np.ndarray:
    """Logistic map r=4, symbol [x >= 1/2], 1000 transient (CHECKS A7 input)."""
    x = x0
    for _ in range(1000):
        x = 4 * x * (1 - x)
    out = np.empty(n, dtype=np.int64)
    for i in range(n):
        x = 4 * x * (1 - x)
        out[i] = x >= 0.5
    return out


def test_fair_coin(rng):
    # CHECKS A1: fair coin, h = 1, C_mu = 0 [ANALYTIC].
    m = causal_states(rng.integers(0, 2, 90_000))
    assert m.n_states == 1
    assert m.statistical_complexity == 0.0
    # Plug-in entropy of p-hat with sd(p-hat) = 0.0017: deficit ~2e-5 bit.
    assert abs(m.entropy_rate - 1.0) < 1e-3


def test_biased_coin(rng):
    # CHECKS A2: P(1) = 0.3, h = H(0.3) = 0.881291, C_mu = 0 [ANALYTIC].
    m = causal_states((rng.random(90_000) < 0.3).astype(int))
    assert m.n_states == 1
    assert m.statistical_complexity == 0.0
    # 3 sd of H(p-hat): sd(p-hat) = 0.0015, dH/dp = log2(0.7/0.3) = 1.22.
    assert_allclose(m.entropy_rate, 0.881291, atol=6e-3)


def test_period_three_is_exact():
    # CHECKS A3: "011" repeated, h = 0, C_mu = log2 3 [ANALYTIC].
    m = causal_states(np.tile([0, 1, 1], 30_000))
    assert m.n_states == 3
    assert_allclose(m.statistical_complexity, LOG2_3, rtol=1e-12)
    assert m.entropy_rate == 0.0
    assert_allclose(m.stationary_distribution, np.full(3, 1 / 3), rtol=1e-12)


@pytest.mark.parametrize("machine", [GOLDEN_MEAN, EVEN_PROCESS], ids=["golden", "even"])
def test_two_state_processes(machine):
    # CHECKS A4 (golden mean) and A5 (even process): h = 2/3, C_mu = 0.918296
    # [ANALYTIC]. The even process has infinite Markov order; CSSR must still
    # find two recurrent states (runs of 1 stay transient).
    m = causal_states(simulate(machine, 90_000, seed=7))
    assert m.n_states == 2
    # Estimation error of the 1/2 branch probability over ~60,000 visits.
    assert_allclose(m.statistical_complexity, H_GOLDEN, atol=0.01)
    assert_allclose(m.entropy_rate, 2 / 3, atol=0.01)
    # Topology of the published two-state machine: one state emits both
    # symbols (p = 1/2 each), the other emits a single symbol with p = 1.
    n_allowed = sorted((m.emission_probabilities > 0).sum(axis=1))
    assert n_allowed == [1, 2]
    assert np.all(m.transitions[m.emission_probabilities > 0] >= 0)


def test_golden_mean_rate_matches_naive_block_entropy():
    # Naive reference in this file: for an order-1 Markov source
    # h = H(2) - H(1) from plug-in word counts (Crutchfield & Feldman 2003,
    # eq. for h_mu(L)); CSSR's h must agree to estimation error.
    x = simulate(GOLDEN_MEAN, 60_000, seed=3)
    words2 = np.bincount(x[:-1] * 2 + x[1:], minlength=4) / (x.size - 1)
    words1 = np.bincount(x, minlength=2) / x.size

    def h(p):
        p = p[p > 0]
        return -np.sum(p * np.log2(p))

    m = causal_states(x)
    assert_allclose(m.entropy_rate, h(words2) - h(words1), atol=2e-3)  # O(1/sqrt N)


def test_logistic_map_generating_partition():
    # CHECKS A7: r = 4 with the partition at 1/2 is a fair coin: h = 1,
    # C_mu = 0 [ANALYTIC]; +-1e-3 at N = 2^17 (CHECKS A7 tolerance at 2^20,
    # widened by sqrt(8) for the shorter series).
    m = causal_states(logistic_symbols(2**17))
    assert m.n_states == 1
    assert m.statistical_complexity == 0.0
    assert abs(m.entropy_rate - 1.0) < 3e-3


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_no_spurious_states_bernoulli(seed):
    # CHECKS A8b [ORACLE]: Bernoulli(0.2), n = 200,000; at a too-liberal alpha
    # false splits appear, with the default alpha the machine has one state.
    x = (np.random.default_rng(seed).random(200_000) < 0.2).astype(int)
    m = causal_states(x)
    assert m.n_states == 1
    assert m.alpha < 1e-5  # 0.01 / 2**11 at L = 10


@pytest.mark.slow
def test_no_spurious_states_many_runs():
    # CHECKS A8b: 40/40 runs right for Bernoulli(0.2) and the logistic map at
    # n = 200,000 with a small enough alpha [ORACLE]; here 20 runs of each.
    for seed in range(20):
        x = (np.random.default_rng(100 + seed).random(200_000) < 0.2).astype(int)
        assert causal_states(x).n_states == 1
        y = logistic_symbols(200_000, x0=0.1234 + 0.01 * seed)
        m = causal_states(y)
        assert m.n_states == 1
        assert abs(m.statistical_complexity) < 0.002


def test_default_rules_are_the_documented_ones(rng):
    # Rule stated in the module (after CHECKS A8b): largest L with
    # 50 * k**(L+1) <= N; alpha = 0.01 / k**(L+1).
    m = causal_states(rng.integers(0, 2, 90_000))
    assert m.max_history == 9  # 50 * 2**10 = 51,200 <= 90,000 < 102,400
    assert_allclose(m.alpha, 0.01 / 2**10)
    m3 = causal_states(rng.integers(0, 3, 90_000))
    assert m3.max_history == 5  # 50 * 3**6 = 36,450 <= 90,000 < 109,350


def test_guards(rng):
    with pytest.raises(InsufficientDataError):
        causal_states(rng.integers(0, 2, 100))  # fewer than 50 * 2**2 symbols
    with pytest.raises(InsufficientDataError):
        causal_states(rng.integers(0, 2, 1000), max_history=12)  # 2**13 > N
    with pytest.raises(InvalidParameterError):
        causal_states(rng.integers(0, 2, 1000), max_history=0)
    with pytest.raises(InvalidParameterError):
        causal_states(rng.integers(0, 2, 1000), alpha=1.5)
    with pytest.raises(InvalidParameterError):
        causal_states(rng.random(1000))


def test_constant_sequence():
    # A constant sequence is one state emitting one symbol: C_mu = h = 0
    # [ANALYTIC] (the logistic map started at its fixed point 3/4 gives one).
    m = causal_states(np.ones(500, dtype=int))
    assert (m.n_states, m.statistical_complexity, m.entropy_rate) == (1, 0.0, 0.0)


def test_state_sequence_follows_period_three():
    m = causal_states(np.tile([0, 1, 1], 1000), max_history=3)
    states = m.state_sequence(np.tile([0, 1, 1], 20))
    synced = states[states >= 0]
    assert np.all(synced[3:] == synced[:-3])  # period 3 in the state sequence
    assert len(set(synced.tolist())) == 3


# A three-symbol unifilar source with unequal branch probabilities, for the
# relabelling property (constructed for this test; its C_mu is not a check value).
THREE_SYMBOL = {
    0: [(0.6, 0, 0), (0.4, 1, 1)],
    1: [(0.5, 2, 0), (0.5, 1, 2)],
    2: [(1.0, 2, 0)],
}
_THREE = simulate(THREE_SYMBOL, 20_000, seed=11)
_THREE_MODEL = causal_states(_THREE, max_history=3)


@settings(max_examples=15, deadline=None)
@given(st.lists(st.integers(-10_000, 10_000), min_size=3, max_size=3, unique=True))
def test_relabelling_symbols_changes_nothing(labels):
    # Property: C_mu, h_mu and the number of states are functions of the
    # process, not of the names of its symbols (Shalizi & Klinkner 2004).
    relabelled = np.asarray(labels)[_THREE]
    m = causal_states(relabelled, max_history=3)
    assert m.n_states == _THREE_MODEL.n_states
    assert_allclose(m.statistical_complexity, _THREE_MODEL.statistical_complexity, rtol=1e-9)
    assert_allclose(m.entropy_rate, _THREE_MODEL.entropy_rate, rtol=1e-9)


def test_three_symbol_source_matches_its_analytic_values():
    # [ANALYTIC, derived here from the definitions in Crutchfield & Feldman
    # 2003]: stationary pi = (5/8, 1/4, 1/8) solves pi = pi T, so
    # C_mu = H(5/8, 1/4, 1/8) = 1.298795 bits and
    # h = 5/8 H(0.6) + 1/4 * 1 = 0.856844 bits/symbol.
    pi = np.array([5 / 8, 1 / 4, 1 / 8])
    c_mu = float(-np.sum(pi * np.log2(pi)))
    h = 5 / 8 * -(0.6 * math.log2(0.6) + 0.4 * math.log2(0.4)) + 1 / 4
    assert _THREE_MODEL.n_states == 3
    # N = 20,000: sd of the branch estimates about 0.005.
    assert_allclose(_THREE_MODEL.statistical_complexity, c_mu, atol=0.02)
    assert_allclose(_THREE_MODEL.entropy_rate, h, atol=0.02)


def test_liberal_alpha_creates_spurious_states(rng):
    # CHECKS A8b [ORACLE]: a per-test level far above 1 / (number of tests)
    # splits states of an i.i.d. source; the default level does not.
    x = rng.integers(0, 2, 90_000)
    assert causal_states(x, max_history=6, alpha=0.05).n_states > 1
    assert causal_states(x, max_history=6).n_states == 1


@pytest.mark.parametrize(
    "table", [[[3, 1], [1, 3]], [[0, 5], [6, 1]], [[2, 7], [8, 2]], [[1, 0], [0, 9]]]
)
def test_exact_enumeration_matches_fisher(table):
    # The exact 2 x k test by enumeration reduces to Fisher's exact test for
    # k = 2 (Fisher 1935; scipy.stats.fisher_exact as the reference).
    from scipy.stats import fisher_exact

    from measures.information._homogeneity import _exact_enumeration

    a, b = np.asarray(table[0]), np.asarray(table[1])
    small, cols = (a, a + b) if a.sum() <= b.sum() else (b, a + b)
    assert_allclose(_exact_enumeration(small, cols), fisher_exact(table).pvalue, rtol=1e-9)


def test_pooling_keeps_the_level_on_rare_symbols():
    # Identical distributions with a rare fourth symbol: the pooled test must
    # not reject (a consequence of the null hypothesis is tested).
    from measures.information._homogeneity import homogeneity_pvalue

    p = homogeneity_pvalue(np.array([400, 300, 290, 1]), np.array([41, 29, 30, 0]))
    assert p > 0.05
    # A clear difference is still found after pooling.
    assert homogeneity_pvalue(np.array([900, 90, 9, 1]), np.array([10, 80, 9, 1])) < 1e-10


def _random_period(period: int, seed: int) -> np.ndarray:
    rng = np.random.default_rng(seed)
    while True:
        pattern = rng.integers(0, 2, period)
        if len({tuple(np.roll(pattern, r)) for r in range(period)}) == period:
            return pattern


@pytest.mark.slow
@pytest.mark.parametrize(("period", "seed"), [(53, 1), (97, 2), (120, 3), (199, 4)])
def test_long_random_periods_are_found(period, seed):
    # CHECKS A3 (general period p): h = 0, C_mu = log2 p with p equiprobable
    # states [ANALYTIC]. Random binary patterns of period 50-200 need histories
    # longer than the default cell rule allows at this N; the saturation rule
    # (module notes) finds the determining length.
    x = np.tile(_random_period(period, seed), 20_000 // period + 1)[:20_000]
    m = causal_states(x)
    assert m.n_states == period
    assert_allclose(m.statistical_complexity, math.log2(period), rtol=1e-12)
    assert m.entropy_rate == 0.0
    assert m.reliable and m.synchronised_fraction > 0.99 and m.note == ""


def test_too_short_history_is_flagged_never_silently_wrong():
    # A deterministic machine (h = 0) with fewer than p states cannot produce a
    # sequence of period p [ANALYTIC]; with histories far too short for a
    # random period-100 pattern, any such machine must be flagged, and every
    # flagged machine explains less than the stated threshold.
    flagged = 0
    for seed in range(6):
        x = np.tile(_random_period(100, 10 + seed), 200)
        m = causal_states(x, max_history=6)
        if m.entropy_rate == 0.0 and m.n_states < 100:
            assert not m.reliable
        if not m.reliable:
            flagged += 1
            assert m.synchronised_fraction < SYNCHRONISED_THRESHOLD
            assert "explains" in m.note
    assert flagged >= 1


def test_correct_machines_explain_almost_everything(rng):
    # CHECKS A1/A4/A5 machines: only the symbols before synchronisation are
    # unexplained (about L of them, plus transient runs of 1 in the even
    # process at the start).
    for x in (
        rng.integers(0, 2, 30_000),
        simulate(GOLDEN_MEAN, 30_000, seed=1),
        simulate(EVEN_PROCESS, 30_000, seed=2),
        np.tile([0, 1, 1], 10_000),
    ):
        m = causal_states(x)
        assert m.reliable and m.synchronised_fraction > 0.999


def _rhythm(n_strides: int) -> np.ndarray:
    """Four symbols in runs of four: a period-16 sequence, C_mu = log2 16 = 4 bits, h = 0."""
    return np.tile(np.repeat([0, 1, 2, 3], 4), n_strides)


def test_history_ceiling_of_a_finely_read_rhythm_is_a_lower_bound():
    # Period-p process (Crutchfield & Feldman 2003, Chaos 13:25): C_mu = log2 16 = 4 bits.
    # With one-symbol histories the states can be no finer than the four symbols: the
    # estimate sits at the ceiling log2 4 = 2 bits, below the true 4, and the machine is
    # not periodic (a run can end or go on), so longer histories could split it.
    short = causal_states(_rhythm(5), max_history=1)
    assert short.effective_history == 1
    assert short.history_ceiling_bits == pytest.approx(2.0)
    assert short.statistical_complexity == pytest.approx(2.0, abs=0.01)
    assert short.statistical_complexity < math.log2(16)
    assert not short.deterministic
    # With enough symbols the default rule resolves the period: 16 states, exact.
    full = causal_states(_rhythm(100))
    assert full.deterministic and full.effective_history == 4
    assert_allclose(full.statistical_complexity, math.log2(16), atol=1e-9)
    assert_allclose(full.history_ceiling_bits, math.log2(16), atol=1e-9)


def test_golden_mean_sits_below_its_ceiling():
    # Golden mean (CHECKS A4): two states fixed by the last symbol, C_mu = 0.918 < log2 2.
    m = causal_states(simulate(GOLDEN_MEAN, 5000, seed=3))
    assert m.effective_history == 1
    assert m.history_ceiling_bits == pytest.approx(1.0)
    assert_allclose(m.statistical_complexity, H_GOLDEN, atol=0.02)


@settings(max_examples=40, deadline=None)
@given(
    st.lists(st.integers(0, 2), min_size=150, max_size=300),
    st.integers(1, 2),
)
def test_complexity_never_exceeds_the_history_ceiling(symbols, history):
    # C_mu is the entropy of at most 2**ceiling states (property; no published value).
    s = np.asarray(symbols)
    if np.unique(s).size ** (history + 1) > s.size:
        return
    m = causal_states(s, max_history=history)
    assert m.statistical_complexity <= m.history_ceiling_bits + 1e-9
    assert 0 <= m.effective_history <= m.max_history
