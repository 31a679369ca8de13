"""Total information and effective complexity as a two-part code.

Gell-Mann & Lloyd (1996) split the information needed to describe an entity
into the regularities (effective complexity: the length of a concise
description of the ensemble the entity belongs to) and the random part
(the Shannon information of the entity within that ensemble); the sum is the
total information. We make this operational as a two-part
minimum-description-length code (Rissanen 1978): the regularities are the
causal-state machine reconstructed by CSSR (:func:`measures.causal_states`),
the random part is the code length of the sequence given that machine.

How each part is counted
------------------------
With ``S`` recurrent states, ``k`` symbols (the alphabet itself is taken as
known to sender and receiver) and ``N`` symbols:

* structure bits = ``2 * floor(log2 S) + 1`` (Elias gamma code for S) plus
  ``S * k * log2(S + 1)`` (each state-symbol cell names "never emitted" or
  one of S successor states);
* parameter bits = ``(1/2) * log2(N)`` per free emission probability
  (Rissanen 1978: a maximum-likelihood parameter needs precision about
  ``1/sqrt(N)``); a state emitting ``j`` symbols has ``j - 1`` free
  probabilities;
* model bits (the effective complexity) = structure bits + parameter bits;
* data bits (the fluctuations) = ``-log2`` of the likelihood of the sequence
  under the machine with its maximum-likelihood emission probabilities from
  this run: every symbol predicted by a synchronised state costs
  ``-log2 P(symbol | state)``; the first symbol and any symbol read before the
  machine is synchronised cost ``log2 k`` (a uniform code);
* total bits = model bits + data bits.

Per-symbol values divide by N; per-second values divide by the duration
``N / sample_rate_hz`` (None when no rate is given).

References
----------
M. Gell-Mann & S. Lloyd (1996), "Information measures, effective complexity,
and total information", Complexity 2(1):44-52.
J. Rissanen (1978), "Modeling by shortest data description", Automatica
14:465-471.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike

from measures._validation import InvalidParameterError, check_positive_float
from measures.information.causal import CausalStateModel, causal_states

__all__ = ["TwoPartCode", "two_part_code"]

_FUNC = "two_part_code"


@dataclass(frozen=True)
class TwoPartCode:
    """Two-part code length of a symbol sequence (bits), see the module notes.

    Attributes
    ----------
    model_bits : float
        Effective complexity: structure_bits + parameter_bits.
    data_bits : float
        Code length of the sequence given the model.
    total_bits : float
        Total information, model_bits + data_bits.
    structure_bits, parameter_bits : float
        The two terms of model_bits.
    model_bits_per_symbol, data_bits_per_symbol, total_bits_per_symbol : float
    model_bits_per_second, data_bits_per_second, total_bits_per_second : float or None
        Divided by the duration N / sample_rate_hz; None without a rate.
    n_symbols, n_states, n_free_parameters : int
    n_unsynchronised : int
        Symbols coded at log2 k because no state predicted them.
    sample_rate_hz : float or None
    machine : CausalStateModel
        The model whose code length is model_bits.
    """

    model_bits: float
    data_bits: float
    total_bits: float
    structure_bits: float
    parameter_bits: float
    model_bits_per_symbol: float
    data_bits_per_symbol: float
    total_bits_per_symbol: float
    model_bits_per_second: float | None
    data_bits_per_second: float | None
    total_bits_per_second: float | None
    n_symbols: int
    n_states: int
    n_free_parameters: int
    n_unsynchronised: int
    sample_rate_hz: float | None
    machine: CausalStateModel


def two_part_code(
    symbols: ArrayLike,
    *,
    machine: CausalStateModel | None = None,
    sample_rate_hz: float | None = None,
    max_history: int | None = None,
    alpha: float | None = None,
    seed: int = 0,
) -> TwoPartCode:
    """Effective complexity, fluctuation and total information of a sequence.

    Parameters
    ----------
    symbols : array_like of int, shape (N,)
    machine : CausalStateModel, optional
        A machine reconstructed from ``symbols`` (reused); by default
        ``causal_states(symbols, max_history=..., alpha=..., seed=...)``.
    sample_rate_hz : float, optional
        Symbols per second, for the per-second figures.
    max_history, alpha, seed
        Passed to :func:`measures.causal_states` when ``machine`` is None.

    Returns
    -------
    TwoPartCode

    References
    ----------
    Gell-Mann & Lloyd (1996), Complexity 2:44; Rissanen (1978), Automatica
    14:465; Shalizi & Klinkner (2004) for the model class.

    Examples
    --------
    >>> code = two_part_code([0, 1, 1] * 1000, max_history=3)
    >>> code.n_states, code.data_bits_per_symbol < 0.01
    (3, True)
    """
    s_raw = np.asarray(symbols)
    if machine is None:
        machine = causal_states(s_raw, max_history=max_history, alpha=alpha, seed=seed)
    elif not isinstance(machine, CausalStateModel):
        raise InvalidParameterError("machine", _FUNC, "a CausalStateModel or None", machine)
    rate = None
    if sample_rate_hz is not None:
        rate = check_positive_float("sample_rate_hz", sample_rate_hz, _FUNC)
    states = machine.state_sequence(s_raw)
    s = np.searchsorted(machine.alphabet, s_raw)
    n, k, n_st = s.size, machine.alphabet.size, machine.n_states

    predictor, nxt = states[:-1], s[1:]
    synced = predictor >= 0
    cells = np.bincount(predictor[synced] * k + nxt[synced], minlength=n_st * k).reshape(n_st, k)
    per_state = cells.sum(axis=1, keepdims=True)
    with np.errstate(divide="ignore", invalid="ignore"):
        log_p = np.where(cells > 0, np.log2(cells / per_state), 0.0)
    n_unsync = int(n - synced.sum())  # includes the first symbol
    data_bits = float(-(cells * log_p).sum()) + n_unsync * math.log2(k) if k > 1 else 0.0

    allowed = (machine.emission_probabilities > 0).sum(axis=1)
    n_free = int(np.sum(np.maximum(allowed - 1, 0)))
    structure = (2 * math.floor(math.log2(n_st)) + 1) + n_st * k * math.log2(n_st + 1)
    parameters = n_free * 0.5 * math.log2(n)
    model_bits = structure + parameters
    total = model_bits + data_bits
    duration = n / rate if rate is not None else None

    def per_second(bits: float) -> float | None:
        return None if duration is None else bits / duration

    return TwoPartCode(
        model_bits=model_bits,
        data_bits=data_bits,
        total_bits=total,
        structure_bits=structure,
        parameter_bits=parameters,
        model_bits_per_symbol=model_bits / n,
        data_bits_per_symbol=data_bits / n,
        total_bits_per_symbol=total / n,
        model_bits_per_second=per_second(model_bits),
        data_bits_per_second=per_second(data_bits),
        total_bits_per_second=per_second(total),
        n_symbols=n,
        n_states=n_st,
        n_free_parameters=n_free,
        n_unsynchronised=n_unsync,
        sample_rate_hz=rate,
        machine=machine,
    )
