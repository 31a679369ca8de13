"""Tests for measures.information.two_part (two-part code).

Data bits per symbol must converge to the entropy rate (Shannon's source
coding theorem; exact h values from CHECKS A1, A3, A4 [ANALYTIC]); model bits
follow the counting rule stated in the module (Rissanen 1978: (1/2) log2 N
bits per free parameter), checked here against the published machines of the
test processes (Crutchfield & Feldman 2003).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from _testing import assert_allclose
from test_causal import GOLDEN_MEAN, simulate

from measures import InvalidParameterError, causal_states, two_part_code


def _structure_bits(n_states: int, k: int) -> float:
    # Module rule: Elias gamma length of S plus S*k cells of log2(S+1) bits.
    return 2 * math.floor(math.log2(n_states)) + 1 + n_states * k * math.log2(n_states + 1)


def test_fair_coin_costs_one_bit_per_symbol(rng):
    # CHECKS A1: h = 1, so no code beats 1 bit/symbol on average (Shannon).
    x = rng.integers(0, 2, 50_000)
    code = two_part_code(x)
    assert code.n_states == 1 and code.n_free_parameters == 1
    assert abs(code.data_bits_per_symbol - 1.0) < 1e-3
    assert_allclose(code.model_bits, _structure_bits(1, 2) + 0.5 * math.log2(50_000))
    assert_allclose(code.total_bits, code.model_bits + code.data_bits)


def test_golden_mean():
    # CHECKS A4: h = 2/3; the machine has 2 states and one free probability.
    x = simulate(GOLDEN_MEAN, 60_000, seed=5)
    code = two_part_code(x, sample_rate_hz=300.0)
    assert code.n_states == 2 and code.n_free_parameters == 1
    assert_allclose(code.data_bits_per_symbol, 2 / 3, atol=0.01)  # estimation error
    assert_allclose(code.model_bits, _structure_bits(2, 2) + 0.5 * math.log2(60_000))
    # The two-part code beats the raw binary code (1 bit/symbol) as h < 1.
    assert code.total_bits < x.size


def test_period_three_data_costs_only_synchronisation():
    # CHECKS A3: h = 0; after synchronisation every symbol has probability 1,
    # so the data bits are exactly the log2 k bits of unsynchronised symbols.
    code = two_part_code(np.tile([0, 1, 1], 5000), max_history=3)
    assert code.n_states == 3 and code.n_free_parameters == 0
    assert_allclose(code.data_bits, code.n_unsynchronised * 1.0)
    assert code.n_unsynchronised <= 3
    assert_allclose(code.model_bits, _structure_bits(3, 2))


def test_per_second_and_machine_reuse(rng):
    x = rng.integers(0, 3, 20_000)
    machine = causal_states(x)
    a = two_part_code(x, machine=machine, sample_rate_hz=250.0)
    b = two_part_code(x, sample_rate_hz=250.0)
    assert_allclose(a.total_bits, b.total_bits)
    duration_s = x.size / 250.0
    assert_allclose(a.total_bits_per_second, a.total_bits / duration_s)
    assert_allclose(a.data_bits_per_second, a.data_bits_per_symbol * 250.0)
    assert two_part_code(x, machine=machine).model_bits_per_second is None
    # Three equiprobable symbols: log2 3 bits/symbol (Shannon; i.i.d. source).
    assert abs(a.data_bits_per_symbol - math.log2(3)) < 2e-3


def test_bad_parameters(rng):
    x = rng.integers(0, 2, 1000)
    with pytest.raises(InvalidParameterError):
        two_part_code(x, sample_rate_hz=-1.0)
    with pytest.raises(InvalidParameterError):
        two_part_code(x, machine="not a machine")
