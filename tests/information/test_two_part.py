"""Tests for measures.information.two_part (two-part code over context models).

External checks: the data part per site must reach the exact conditional
entropy of the source given the chosen context (Shannon's source coding
theorem; exact h values of CHECKS A1-A5 from Crutchfield & Feldman 2003,
Chaos 13:25, recomputed here from the hidden Markov models by forward
products), the model part follows the counting rule stated in the module
(Rissanen 1978), and the effective complexity of a stationary source settles
with length (issue contract: 10^4 and 10^5 symbols within 10 %).
"""

from __future__ import annotations

import itertools
import math

import numpy as np
import pytest
from _testing import assert_allclose
from hypothesis import given, settings
from hypothesis import strategies as st
from test_causal import EVEN_PROCESS, GOLDEN_MEAN, simulate

from measures import (
    InsufficientDataError,
    InvalidParameterError,
    causal_states,
    two_part_code,
)

H_GOLDEN = 0.918296  # H(2/3, 1/3), bits, CHECKS A4/A5 [ANALYTIC]


def _exact_block_entropy(machine: dict, length: int) -> float:
    """H(L) of a unifilar HMM by forward products P(w) = pi T(w1)..T(wL) 1 (CHECKS A)."""
    states = sorted(machine)
    symbols = sorted({sym for arcs in machine.values() for _, sym, _ in arcs})
    mats = {b: np.zeros((len(states), len(states))) for b in symbols}
    for s, arcs in machine.items():
        for p, b, nxt in arcs:
            mats[b][s, nxt] += p
    full = sum(mats.values())
    w, v = np.linalg.eig(full.T)
    pi = np.real(v[:, np.argmin(np.abs(w - 1))])
    pi /= pi.sum()
    h = 0.0
    for word in itertools.product(symbols, repeat=length):
        row = pi
        for b in word:
            row = row @ mats[b]
        p = row.sum()
        if p > 0:
            h -= p * math.log2(p)
    return h


def _exact_conditional_entropy(machine: dict, context: int) -> float:
    """h(m + 1) = H(m + 1) - H(m): entropy of the next symbol given m past ones."""
    upper = _exact_block_entropy(machine, context + 1)
    return upper - (_exact_block_entropy(machine, context) if context else 0.0)


def test_fair_coin_is_at_the_minimum(rng):
    # CHECKS A1: a fair coin has no regularities (h = 1, C_mu = 0). Its model
    # is the smallest any binary input can have: m = 0 and the uniform rule,
    # the same model bits as a constant sequence (module counting rule:
    # Elias gamma(1) = 1, which symbols = log2 2 + log2 C(2, j), rule bit).
    coin = two_part_code(rng.integers(0, 2, 50_000))
    constant = two_part_code(np.zeros(50_000, dtype=int), alphabet_size=2)
    assert coin.context_size == 0
    assert_allclose(coin.effective_complexity_bits, 1 + 1 + 0 + 1)
    assert_allclose(constant.effective_complexity_bits, 1 + 1 + 1)
    assert coin.effective_complexity_spread_bits == 0.0
    # Shannon: no code beats h = 1 bit/symbol; the uniform rule costs exactly 1.
    assert coin.entropy_rate_bits_per_symbol == 1.0
    assert 1.0 <= coin.total_information_bits_per_symbol < 1.001


@pytest.mark.parametrize("seed", range(4))
def test_every_input_costs_at_least_the_coin(seed):
    # Property: nothing has fewer model bits than the m = 0 uniform model.
    rng = np.random.default_rng(seed)
    x = (rng.random(8192) < rng.uniform(0.05, 0.5)).astype(int)
    assert two_part_code(x, alphabet_size=2).effective_complexity_bits >= 3.0


def test_golden_mean_matches_the_published_process():
    # CHECKS A4 (Crutchfield & Feldman 2003): Markov order 1, h = 2/3.
    x = simulate(GOLDEN_MEAN, 100_000, seed=5)
    code = two_part_code(x)
    assert code.context_size == 1  # order 1 is the shortest code
    assert_allclose(code.entropy_rate_bits_per_symbol, 2 / 3, atol=0.01)
    # Its context model: after 0 always 1 (j = 1), after 1 either symbol; 1 is
    # emitted with probability 1/2 so the parameter-free uniform rule wins:
    # Elias(2) = 3, contexts log2 2 + log2 C(2, 2) = 1, after 0: 1 + 1,
    # after 1: 1 + 0 + rule bit 1 -> 8 bits in every window.
    assert_allclose(code.effective_complexity_bits, 8.0)
    # C_mu is the causal-state machine's (the context model is not minimal in
    # general): CHECKS A4, C_mu = H(2/3, 1/3).
    assert_allclose(causal_states(x).statistical_complexity, H_GOLDEN, atol=0.01)


def test_even_process_reaches_its_finite_context_entropy():
    # CHECKS A5: infinite Markov order; h(m + 1) -> 2/3 slowly from above. The
    # data part must equal the exact h(m + 1) at the chosen m (forward
    # products of the published HMM), up to sampling error.
    x = simulate(EVEN_PROCESS, 100_000, seed=7)
    code = two_part_code(x)
    assert code.context_size >= 3
    exact = _exact_conditional_entropy(EVEN_PROCESS, code.context_size)
    assert_allclose(code.entropy_rate_bits_per_symbol, exact, atol=0.01)
    assert 2 / 3 < exact < 0.72
    # C_mu = H(2/3, 1/3) (CHECKS A5) from the causal-state machine.
    m = causal_states(x)
    assert_allclose(m.statistical_complexity, H_GOLDEN, atol=0.02)
    assert_allclose(m.entropy_rate, 2 / 3, atol=0.01)


def test_exact_conditional_entropy_helper_matches_checks():
    # CHECKS A5 table: h(8) = 0.692607 and H(1..5) of the even process.
    assert_allclose(_exact_conditional_entropy(EVEN_PROCESS, 7), 0.692607, atol=1e-6)
    assert_allclose(_exact_block_entropy(EVEN_PROCESS, 5), 4.084963, atol=1e-6)


@pytest.mark.parametrize("period", [2, 3, 5, 8])
def test_period_p_pins_its_phase(period):
    # CHECKS A3 (general period p): h = 0, C_mu = log2 p. The code spends
    # nothing on the data once the phase is known; the context it needs has p
    # distinct values, each seen 1/p of the time, so their entropy is log2 p.
    rng = np.random.default_rng(period)
    while True:
        pattern = rng.integers(0, 2, period)
        # Distinct rotations: a true period p (not a shorter one).
        if len({tuple(np.roll(pattern, r)) for r in range(period)}) == period:
            break
    x = np.tile(pattern, 40_000 // period)
    code = two_part_code(x)
    assert code.entropy_rate_bits_per_symbol == 0.0
    m = code.context_size
    # Entropy of the chosen contexts over the sequence (computed here, outside
    # the module).
    windows = np.lib.stride_tricks.sliding_window_view(x, m)
    _, counts = np.unique(windows, axis=0, return_counts=True)
    p = counts / counts.sum()
    assert_allclose(-np.sum(p * np.log2(p)), math.log2(period), atol=1e-3)
    assert_allclose(
        causal_states(x, max_history=m + 1).statistical_complexity,
        math.log2(period),
        atol=1e-9,
    )
    # A periodic sequence has regularities; a coin has none.
    assert code.effective_complexity_bits > 3.0


def _noisy_period_three(n: int, seed: int) -> np.ndarray:
    x = np.tile([0, 1, 1], n // 3 + 1)[:n]
    flip = np.random.default_rng(seed).random(n) < 0.1
    x[flip] = 1 - x[flip]
    return x


@pytest.mark.parametrize(
    "make",
    [
        lambda n: simulate(EVEN_PROCESS, n, seed=11),
        lambda n: _noisy_period_three(n, seed=12),
        lambda n: (np.random.default_rng(13).random(n) < 0.3).astype(int),
    ],
    ids=["even", "noisy_period_3", "biased_coin"],
)
def test_effective_complexity_settles_with_length(make):
    # Issue contract: 10^4 and 10^5 symbols of a stationary source agree
    # within 10 %.
    short = two_part_code(make(10_000))
    long = two_part_code(make(100_000))
    assert short.comparable and long.comparable
    assert_allclose(short.effective_complexity_bits, long.effective_complexity_bits, rtol=0.10)
    assert_allclose(
        short.total_information_bits_per_symbol,
        long.total_information_bits_per_symbol,
        rtol=0.10,
    )
    # Extensive total information grows with the input.
    assert long.total_information_bits > 5 * short.total_information_bits


def test_biased_coin_fits_its_parameter(rng):
    # CHECKS A2: P(1) = 0.3, h = H(0.3) = 0.881291; the fitted rule pays
    # (1/2) log2 n bits (Rissanen 1978) for its one parameter, n the sites
    # coded with a full context (the window less the largest template).
    x = (rng.random(40_960) < 0.3).astype(int)
    code = two_part_code(x)
    assert code.context_size == 0
    assert_allclose(code.entropy_rate_bits_per_symbol, 0.881291, atol=0.01)
    expected_model = 1 + 1 + 1 + 0.5 * math.log2(4096 - code.max_context)
    assert_allclose(code.effective_complexity_bits, expected_model)


def test_fields_checkerboard_stripes_and_iid(rng):
    # 2D, same code path. A checkerboard or stripes are determined by one
    # neighbour (h = 0); an i.i.d. field has nothing to model (h = 1 bit/site).
    board = np.indices((256, 256)).sum(axis=0) % 2
    stripes = np.indices((256, 256))[0] % 2
    noise = rng.integers(0, 2, (256, 256))
    for field in (board, stripes):
        code = two_part_code(field)
        assert code.entropy_rate_bits_per_symbol == 0.0
        assert 1 <= code.context_size <= 2
    iid = two_part_code(noise)
    assert iid.context_size == 0
    assert iid.entropy_rate_bits_per_symbol == 1.0
    assert_allclose(iid.effective_complexity_bits, 3.0)
    assert iid.window_shape == (64, 64) and iid.n_windows == 16


def test_field_with_known_conditional_entropy():
    # x[i, j] = x[i, j-1] XOR x[i-1, j] XOR e, e ~ Bernoulli(0.1): given its
    # left and upper neighbours a site has conditional entropy H(0.1) =
    # 0.468996 bits [ANALYTIC], which the code must reach (the two sites are
    # the first two of the causal neighbourhood).
    rng = np.random.default_rng(3)
    n = 320
    noise = (rng.random((n, n)) < 0.1).astype(np.int64)
    f = np.zeros((n, n), dtype=np.int64)
    f[0] = rng.integers(0, 2, n)
    f[:, 0] = rng.integers(0, 2, n)
    for i in range(1, n):
        for j in range(1, n):
            f[i, j] = f[i, j - 1] ^ f[i - 1, j] ^ noise[i, j]
    code = two_part_code(f)
    assert code.context_size >= 2
    assert set(code.context_offsets[:2]) == {(0, -1), (-1, 0)}
    assert_allclose(code.entropy_rate_bits_per_symbol, 0.468996, atol=0.015)


def test_short_input_is_flagged(rng):
    code = two_part_code(rng.integers(0, 2, 1000))
    assert not code.comparable and "not comparable" in code.note
    assert code.n_windows == 1 and code.window_size == 1000


def test_per_second(rng):
    x = rng.integers(0, 3, 20_000)
    a = two_part_code(x, sample_rate_hz=250.0)
    assert_allclose(a.total_information_bits_per_second, a.total_information_bits / 80.0)
    assert two_part_code(x).total_information_bits_per_second is None
    # Three equiprobable symbols: log2 3 bits/symbol (Shannon; i.i.d. source).
    assert_allclose(a.entropy_rate_bits_per_symbol, math.log2(3), rtol=1e-12)


@settings(max_examples=20, deadline=None)
@given(st.permutations([0, 1, 2, 3]))
def test_relabelling_changes_nothing(labels):
    x = np.random.default_rng(4).integers(0, 4, 8192)
    a = two_part_code(x)
    b = two_part_code(np.asarray(labels)[x])
    assert_allclose(a.total_information_bits, b.total_information_bits)
    assert a.context_size == b.context_size


def test_bad_parameters(rng):
    x = rng.integers(0, 2, 1000)
    with pytest.raises(InvalidParameterError):
        two_part_code(x, sample_rate_hz=-1.0)
    with pytest.raises(InvalidParameterError):
        two_part_code(x, alphabet_size=1)
    with pytest.raises(InvalidParameterError):
        two_part_code(rng.integers(0, 2, (50, 50)), sample_rate_hz=10.0)
    with pytest.raises(InvalidParameterError):
        two_part_code(rng.integers(0, 2, (2, 2, 2)))
    with pytest.raises(InsufficientDataError):
        two_part_code([0, 1, 0])


@pytest.mark.parametrize(
    ("shape", "k", "kw"),
    [
        ((130, 130), 4, {}),
        ((100, 90), 3, {"window": (20, 30)}),
        ((90, 90), 6, {}),
        ((300, 200), 2, {"max_context": 3}),
        ((50, 70), 2, {"window": 100}),
    ],
)
def test_2d_compiled_counts_equal_the_code_path(monkeypatch, shape, k, kw):
    # The compiled 2-D path counts the largest context once, on the field in
    # place, and sums over trailing digits for the smaller ones; the code path
    # (tile copies, explicit codes, np.unique/bincount keys) must give the same
    # description lengths, bit for bit.
    from measures.information import two_part

    rng = np.random.default_rng(k)
    sym = rng.integers(0, k, shape)
    sym[::2] = sym[::2] // 2  # some structure, so the contexts matter
    fast = two_part.two_part_code(sym, alphabet_size=k, **kw)
    monkeypatch.setattr(two_part, "_KERNEL_MAX_KEYS", 0)
    slow = two_part.two_part_code(sym, alphabet_size=k, **kw)
    np.testing.assert_array_equal(fast.description_length_bits, slow.description_length_bits)
    np.testing.assert_array_equal(fast.window_model_bits, slow.window_model_bits)
    np.testing.assert_array_equal(fast.window_data_bits, slow.window_data_bits)
    assert fast.effective_complexity_bits == slow.effective_complexity_bits
