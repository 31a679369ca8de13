"""Causal-state reconstruction (CSSR) of a discrete symbol sequence.

CSSR (Shalizi & Klinkner 2004) groups pasts ("histories", strings of the most
recent symbols) into causal states: classes of histories with the same
distribution of the next symbol, refined until the class of ``x`` followed by
symbol ``b`` is fixed by the class of ``x`` and ``b`` alone (a deterministic,
"unifilar" machine). Its stationary state entropy is the statistical
complexity C_mu and its average next-symbol entropy the entropy rate h_mu
(Crutchfield & Young 1989; Crutchfield & Feldman 2003).

How this implementation works
-----------------------------
1. Counting: next-symbol counts of every observed history of length
   0..L (``L = max_history``) are taken at once with numpy (integer codes in
   base k, newest symbol least significant; ``np.unique`` on the codes).
2. Splitting ("sufficiency"): for L' = 0..L-1, every history of length L' in
   a state is extended one symbol into the past. The child joins its parent's
   state unless a homogeneity test rejects equal next-symbol distributions at
   level ``alpha``; then it joins the existing state with the largest p-value
   that does not reject, or founds a new state. Tests are in
   :mod:`measures.information._homogeneity` (G-test when every expected count is >= 5,
   Fisher's exact test or an exact enumeration otherwise, pooling the rarest
   symbols when a table is too large to enumerate).
3. Determinisation ("recursion"): the transitions of a state are read off its
   histories of length L-1: history x on symbol b goes to the state of the
   length-L history xb (no truncation, so finite-L histories that cannot be
   synchronised, such as runs of 1 in the even process, stay transient).
   States whose histories disagree on a successor are split until none do;
   unobserved successors are compatible with any. A state holding only
   length-L histories uses the state of the length-L suffix of xb instead.
4. Every closed strongly connected class of the state graph is a candidate
   machine (transient states are dropped). Each is synchronised on the
   sequence (:meth:`CausalStateModel.state_sequence`) and the one that
   explains the largest share of the sequence is kept (ties: the one carrying
   the most data); its stationary distribution gives C_mu and h_mu.
5. Coverage check: ``synchronised_fraction`` is the share of the N - 1
   predicted symbols that the kept machine is synchronised on *and* that it
   allows (non-zero emission probability). A correct machine misses only the
   symbols before synchronisation (about L at the start, plus transient
   stretches such as long runs of 1 in the even process), so it explains
   nearly everything. Below :data:`SYNCHRONISED_THRESHOLD` (0.95) the result is
   flagged ``reliable=False`` with a ``note``: the machine describes only part
   of the data (typically a history length too short for the structure, e.g.
   a long period) and its C_mu and h_mu must not be reported as the process's.

Defaults (stated rules)
-----------------------
* ``max_history=None``: the largest L >= 1 with ``50 * k**(L + 1) <= N``, so
  that every (history, next symbol) cell has about 50 expected counts at a
  uniform spread (a working rule, see the module tests). A sequence whose
  words saturate supports more: if W(d + 1) = W(d) for some d with
  ``50 * W(d + 1) <= N`` (W(j) the number of distinct j-words observed; the
  last d symbols then fix the next one, as in a periodic sequence), L is at
  least d + 1, because transitions are read off histories of length L - 1.
  Fewer than ``50 * k**2`` symbols raise :class:`InsufficientDataError`. A
  constant sequence (k = 1) gets L = 1 and one state.
* ``alpha=None``: ``alpha = 0.01 / k**(L + 1)``. One run makes at most about
  ``k**(L + 1)`` tests (one per child history), so the expected number of false
  splits per run is at most about 0.01 (a Bonferroni-style bound).
* An explicit ``max_history`` with ``k**(max_history + 1) > N`` (more possible
  words than symbols) raises :class:`InsufficientDataError` rather than
  silently clamping.

References
----------
C. R. Shalizi & K. L. Klinkner (2004), "Blind construction of optimal nonlinear
recursive predictors for discrete sequences", Proc. 20th Conf. Uncertainty in
Artificial Intelligence, 504-511.
J. P. Crutchfield & D. P. Feldman (2003), "Regularities unseen, randomness
observed: levels of entropy convergence", Chaos 13:25-54.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace
from functools import cached_property

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy.sparse import csr_matrix
from scipy.sparse.csgraph import connected_components

from measures._validation import InsufficientDataError, InvalidParameterError
from measures.information._homogeneity import homogeneity_pvalue

__all__ = [
    "SYNCHRONISED_THRESHOLD",
    "CausalStateModel",
    "causal_states",
    "determining_history",
    "longer_histories_supported",
]

#: Share of the predicted symbols a machine must explain to be ``reliable``.
SYNCHRONISED_THRESHOLD = 0.95

_FUNC = "causal_states"
_CELL_COUNT = 50  # expected counts per (history, symbol) cell for the default L
_FAMILY_ERROR = 0.01  # expected false splits per run for the default alpha
_MAX_CODE = 2**62

# Types of the reconstruction's working state.
_Codes = NDArray[np.int64]
#: Per history length l: sorted history codes and their (n_hist, k) next-symbol counts.
_Levels = list[tuple[_Codes, _Codes]]
#: Per history length l: the state of each history (-1: none yet).
_Assign = list[_Codes]
#: Per state: its histories as (length, index into that length's codes).
_Members = list[list[tuple[int, int]]]


@dataclass(frozen=True)
class CausalStateModel:
    """A reconstructed causal-state machine (epsilon-machine).

    Attributes
    ----------
    statistical_complexity : float
        C_mu, Shannon entropy of the stationary state distribution, bits.
    entropy_rate : float
        h_mu = sum_s pi(s) H[X | s], bits per symbol.
    n_states : int
        Number of recurrent causal states.
    states : tuple of tuple of tuple
        Per state, its histories of length ``max_history - 1`` and
        ``max_history`` as tuples of the original symbol labels, oldest first.
    transitions : ndarray of int, shape (n_states, k)
        Next state after emitting each symbol; -1 where the symbol is never
        emitted from that state.
    emission_probabilities : ndarray of float, shape (n_states, k)
        P(next symbol | state), columns in the order of ``alphabet``.
    stationary_distribution : ndarray of float, shape (n_states,)
    alphabet : ndarray, shape (k,)
        The distinct input symbols, sorted; column j of the arrays above is
        ``alphabet[j]``.
    max_history, alpha : int, float
        The history length and per-test level actually used.
    n_symbols : int
        Length of the input sequence.
    synchronised_fraction : float
        Share of the N - 1 predicted symbols on which the machine is
        synchronised and which it allows (see the module notes).
    reliable : bool
        ``synchronised_fraction >= SYNCHRONISED_THRESHOLD``.
    note : str
        Empty when reliable, else why the machine must not be used as the
        process's causal states.
    """

    statistical_complexity: float
    entropy_rate: float
    n_states: int
    states: tuple[tuple[tuple[int, ...], ...], ...]
    transitions: NDArray[np.int64]
    emission_probabilities: NDArray[np.float64]
    stationary_distribution: NDArray[np.float64]
    alphabet: NDArray[np.int64]
    max_history: int
    alpha: float
    n_symbols: int
    synchronised_fraction: float
    reliable: bool
    note: str
    # History code -> state lookups (codes in base k, newest symbol least
    # significant) used to synchronise the machine on a sequence.
    _lookup_long: tuple[NDArray[np.int64], NDArray[np.int64]] = field(repr=False)
    _lookup_short: tuple[NDArray[np.int64], NDArray[np.int64]] = field(repr=False)

    @cached_property  # read by the ceiling, the note and the support check: found once
    def effective_history(self) -> int:
        """Fewest past symbols that fix the state: the smallest j such that every
        recurrent history's state is a function of its last j symbols (at most
        ``max_history``; 0 for a one-state machine)."""
        if self.n_states <= 1:
            return 0
        hist = [(h, i) for i, st in enumerate(self.states) for h in st if h]
        for j in range(1, self.max_history + 1):
            seen: dict[tuple[int, ...], int] = {}
            if all(seen.setdefault(h[-j:], i) == i for h, i in hist if len(h) >= j):
                return j
        return self.max_history

    @property
    def history_ceiling_bits(self) -> float:
        """log2 of the number of distinct last-j words of the recurrent histories,
        j = :attr:`effective_history`.

        A machine whose states are fixed by the last j symbols is a Markov chain
        of order j on the symbols and has at most that many states, so
        ``statistical_complexity <= history_ceiling_bits``. At the ceiling every
        j-word is a state of its own, evenly occupied: C_mu is then the entropy
        of the last j symbols, set by j and the alphabet (at j = 1, log2 of the
        alphabet for evenly used symbols), not by structure the histories resolved.
        """
        j = self.effective_history
        if j == 0:
            return 0.0
        words = {h[-j:] for st in self.states for h in st if len(h) >= j}
        return float(np.log2(len(words)))

    @property
    def deterministic(self) -> bool:
        """True when every state emits one symbol only (h_mu = 0: a periodic machine).

        Longer histories cannot split such states (the next symbol is already
        certain), so the machine cannot be a coarse version of a larger one.
        """
        return bool(np.all((self.emission_probabilities > 0).sum(axis=1) <= 1))

    def state_sequence(self, symbols: ArrayLike) -> NDArray[np.int64]:
        """State after each symbol of ``symbols`` (the state predicting the next one).

        A position takes the state of its length-``max_history`` history (else
        of its length ``max_history - 1`` history) when that history belongs to
        a recurrent state; other positions follow the machine's transitions
        from the previous position. -1 where neither is available (the start,
        before the machine is synchronised).
        """
        s = _encode_with(np.asarray(symbols), self.alphabet)
        k, L = self.alphabet.size, self.max_history
        sync = np.full(s.size, -1, dtype=np.int64)
        for length, (codes, st) in ((L - 1, self._lookup_short), (L, self._lookup_long)):
            if codes.size == 0 or s.size < max(length, 1):
                continue
            if length == 0:  # the empty history precedes every position
                sync[:] = st[0]
                continue
            ends = _window_codes(s, k, length)  # window i ends at position i + length - 1
            pos = np.minimum(np.searchsorted(codes, ends), codes.size - 1)
            idx = np.nonzero(codes[pos] == ends)[0]
            sync[idx + length - 1] = st[pos[idx]]
        gaps = np.nonzero(sync < 0)[0]
        for t in gaps:  # only unsynchronised positions are walked in Python
            if t > 0 and sync[t - 1] >= 0:
                sync[t] = self.transitions[sync[t - 1], s[t]]
        return sync


def causal_states(
    symbols: ArrayLike,
    *,
    max_history: int | None = None,
    alpha: float | None = None,
    seed: int = 0,
) -> CausalStateModel:
    """Reconstruct the causal states of a symbol sequence with CSSR.

    Parameters
    ----------
    symbols : array_like of int, shape (N,)
        The sequence; any integer labels (relabelling them changes nothing).
    max_history : int, optional
        Longest history L. Default: the largest L >= 1 with
        ``50 * k**(L + 1) <= N`` (k distinct symbols).
    alpha : float, optional
        Per-test significance level. Default ``0.01 / k**(L + 1)`` (about one
        test per child history, so the expected number of false splits in a
        run stays near 0.01).
    seed : int
        Accepted for interface stability with the other seeded measures. The
        reconstruction is deterministic (every homogeneity test is exact or
        asymptotic, none is Monte Carlo), so the result does not depend on it.

    Returns
    -------
    CausalStateModel

    References
    ----------
    Shalizi & Klinkner (2004), UAI 504-511 (the algorithm); Crutchfield &
    Feldman (2003), Chaos 13:25 (C_mu and h_mu).

    Examples
    --------
    >>> m = causal_states([0, 1, 1] * 3000, max_history=3)
    >>> m.n_states, round(m.statistical_complexity, 6), m.entropy_rate
    (3, 1.584963, 0.0)
    """
    raw = np.asarray(symbols)
    if raw.ndim != 1 or raw.size == 0:
        raise InvalidParameterError("symbols", _FUNC, "a non-empty 1D array of integers", raw)
    if not np.issubdtype(raw.dtype, np.integer):
        if not np.issubdtype(raw.dtype, np.floating) or not np.all(raw == np.round(raw)):
            raise InvalidParameterError("symbols", _FUNC, "integer symbols", raw)
        raw = raw.astype(np.int64)
    alphabet, s = np.unique(raw, return_inverse=True)
    s = s.astype(np.int64)
    k, n = alphabet.size, s.size
    L = _choose_history(max_history, k, n, s)
    if alpha is None:
        alpha = _FAMILY_ERROR / float(k) ** (L + 1)
    elif not (isinstance(alpha, (int, float)) and 0.0 < alpha < 1.0):
        raise InvalidParameterError("alpha", _FUNC, "a float in (0, 1)", alpha)
    del seed  # accepted for interface stability; nothing here is random
    levels = _history_counts(s, k, L)
    if k == 1:
        return _single_symbol_model(alphabet, L, float(alpha), n)
    assign, members = _split_states(levels, k, L, float(alpha))
    _determinise(levels, assign, members, k, L)
    return _best_model(levels, assign, members, alphabet, L, float(alpha), s)


# ----------------------------------------------------------------------------- helpers


def _distinct_words(s: NDArray[np.int64], k: int, length: int) -> int:
    """Number of distinct words of ``length`` symbols in ``s`` (W(length))."""
    if length > s.size:
        return 0
    return int(np.unique(_window_codes(s, k, length)).size)


def _determining_history(s: NDArray[np.int64], k: int, n: int) -> int:
    """One more than the first d with W(d + 1) = W(d), if 50 * W(d + 1) <= N; else 0.

    W(d + 1) = W(d) means every d-word has one continuation: the last d symbols
    fix the next one (a periodic or otherwise saturated sequence). CSSR reads
    transitions off histories of length L - 1, so L = d + 1.
    """
    previous = k
    d = 1
    while float(k) ** (d + 1) < _MAX_CODE and d + 1 <= n:
        words = _distinct_words(s, k, d + 1)
        if _CELL_COUNT * words > n:
            return 0
        if words == previous:
            return d + 1 if float(k) ** (d + 2) < _MAX_CODE else 0
        previous = words
        d += 1
    return 0


def determining_history(symbols: ArrayLike) -> int:
    """History length the default rule takes from saturating word counts (0 if none).

    One more than the first d with W(d + 1) = W(d) (W(j) the distinct j-words
    observed: the last d symbols then fix the next one, as in a periodic
    sequence), provided ``50 * W(d + 1) <= N``; 0 when the counts do not
    saturate within that support. :func:`causal_states` with
    ``max_history=None`` uses at least this length (module notes).

    Examples
    --------
    >>> determining_history([0, 0, 1] * 400)  # W(1) = 2, W(2) = 3, W(3) = 3
    3
    """
    raw = np.asarray(symbols)
    if raw.ndim != 1 or raw.size == 0:
        raise InvalidParameterError("symbols", "determining_history", "a non-empty 1D array", raw)
    alphabet, s = np.unique(raw, return_inverse=True)
    if alphabet.size < 2:
        return 0
    return _determining_history(s.astype(np.int64).ravel(), int(alphabet.size), int(raw.size))


def longer_histories_supported(model: CausalStateModel, symbols: ArrayLike) -> bool:
    """Whether CSSR tested histories longer than the machine's effective history with support.

    True when ``model.max_history > j`` (j = ``model.effective_history``) and
    ``50 * W(j + 2) <= N``: every observed (history of j + 1 symbols, next symbol)
    cell has about 50 counts, the support rule of the default history length and
    of :func:`determining_history`. Then the merges of those longer histories into
    the j-symbol states are evidence that the longer past adds nothing; otherwise
    the homogeneity tests had too few counts to split them, and the states are
    only as fine as j.

    Examples
    --------
    >>> rhythm = np.tile(np.repeat([0, 1, 2, 3], 4), 5)  # 80 symbols, period 16
    >>> longer_histories_supported(causal_states(rhythm, max_history=2), rhythm)
    False
    """
    raw = np.asarray(symbols)
    alphabet, s = np.unique(raw, return_inverse=True)
    j = model.effective_history
    if model.max_history <= j or alphabet.size < 2:
        return False
    words = _distinct_words(s.astype(np.int64).ravel(), int(alphabet.size), j + 2)
    return bool(_CELL_COUNT * words <= raw.size)


def _choose_history(max_history: int | None, k: int, n: int, s: NDArray[np.int64]) -> int:
    if max_history is None:
        if k == 1:  # a constant sequence: every history length gives one state
            return 1
        L = 0
        while _CELL_COUNT * float(k) ** (L + 2) <= n and float(k) ** (L + 2) < _MAX_CODE:
            L += 1
        L = max(L, _determining_history(s, k, n))
        if L < 1:
            raise InsufficientDataError(
                "symbols", _FUNC, f"at least {_CELL_COUNT * k**2} symbols for {k} distinct ones", n
            )
        return L
    if isinstance(max_history, bool) or not isinstance(max_history, (int, np.integer)):
        raise InvalidParameterError("max_history", _FUNC, "an integer >= 1 or None", max_history)
    if max_history < 1:
        raise InvalidParameterError("max_history", _FUNC, "an integer >= 1 or None", max_history)
    if float(k) ** (max_history + 1) > min(n, _MAX_CODE):
        raise InsufficientDataError(
            "max_history", _FUNC, f"at most the L with k**(L+1) <= N = {n} (k = {k})", max_history
        )
    return int(max_history)


def _encode_with(raw: NDArray, alphabet: NDArray) -> NDArray[np.int64]:
    pos = np.searchsorted(alphabet, raw)
    pos = np.minimum(pos, alphabet.size - 1)
    if raw.ndim != 1 or not np.all(alphabet[pos] == raw):
        raise InvalidParameterError(
            "symbols", "state_sequence", "symbols of the model alphabet", raw
        )
    return pos.astype(np.int64)


def _window_codes(s: NDArray[np.int64], k: int, length: int) -> NDArray[np.int64]:
    """Codes of all windows s[t:t+length], t = 0..N-length (newest symbol last digit)."""
    codes = np.zeros(s.size - length + 1, dtype=np.int64)
    for i in range(length):
        codes = codes * k + s[i : s.size - length + 1 + i]
    return codes


def _history_counts(s: _Codes, k: int, L: int) -> _Levels:
    """Per length l = 0..L: sorted history codes and their (n_hist, k) next-symbol counts."""
    n = s.size
    codes = np.zeros(n + 1, dtype=np.int64)
    levels: _Levels = []
    for l in range(L + 1):
        if l > 0:
            codes[: n - l + 1] = codes[: n - l + 1] * k + s[l - 1 :]
        m = n - l  # windows followed by a next symbol
        joint = codes[:m] * k + s[l : l + m]
        uniq, cnt = np.unique(joint, return_counts=True)
        hist, inv = np.unique(uniq // k, return_inverse=True)
        counts = np.zeros((hist.size, k), dtype=np.int64)
        np.add.at(counts, (inv, uniq % k), cnt)
        levels.append((hist, counts))
    return levels


def _find(codes: NDArray[np.int64], code: int) -> int:
    i = int(np.searchsorted(codes, code))
    return i if i < codes.size and codes[i] == code else -1


def _split_states(levels: _Levels, k: int, L: int, alpha: float) -> tuple[_Assign, _Members]:
    """Sufficiency step: grow histories into the past, splitting on rejected tests."""
    assign = [np.full(h.size, -1, dtype=np.int64) for h, _ in levels]
    assign[0][0] = 0
    members: list[list[tuple[int, int]]] = [[(0, 0)]]
    for l in range(L):
        codes_next, counts_next = levels[l + 1]
        ref = [_reference_counts(levels, m, l, k) for m in members]
        n_old = len(members)
        for st in range(n_old):
            for lev, idx in [m for m in members[st] if m[0] == l]:
                parent_code = int(levels[lev][0][idx])
                for a in range(k):
                    j = _find(codes_next, a * k**l + parent_code)
                    if j < 0:
                        continue
                    c = counts_next[j]
                    target = st
                    if homogeneity_pvalue(c, ref[st]) <= alpha:
                        target = _best_other_state(c, ref, st, alpha)
                    if target < 0:
                        target = len(members)
                        members.append([])
                        ref.append(np.zeros(k, dtype=np.int64))
                    if target >= n_old:  # new states pool their own children
                        ref[target] = ref[target] + c
                    assign[l + 1][j] = target
                    members[target].append((l + 1, j))
    return assign, members


def _reference_counts(levels: _Levels, mem: list[tuple[int, int]], l: int, k: int) -> _Codes:
    """Pooled next-symbol counts of a state's histories at its longest length <= l."""
    lengths = [lev for lev, _ in mem if lev <= l]
    if not lengths:
        return np.zeros(k, dtype=np.int64)
    top = max(lengths)
    return sum((levels[lev][1][i] for lev, i in mem if lev == top), np.zeros(k, dtype=np.int64))


def _best_other_state(c: _Codes, ref: list[_Codes], exclude: int, alpha: float) -> int:
    best, best_p = -1, alpha
    for st, r in enumerate(ref):
        if st == exclude or r.sum() == 0:
            continue
        p = homogeneity_pvalue(c, r)
        if p > best_p:
            best, best_p = st, p
    return best


def _lookup_state(levels: _Levels, assign: _Assign, code: int, length: int, k: int) -> int:
    """State of the longest assigned suffix (of length <= ``length``) of a history."""
    for l in range(length, -1, -1):
        j = _find(levels[l][0], code % k**l if l > 0 else 0)
        if j >= 0 and assign[l][j] >= 0:
            return int(assign[l][j])
    return -1


def _holder_signatures(
    levels: _Levels, assign: _Assign, mem: list[tuple[int, int]], k: int, L: int
) -> tuple[list[tuple[int, int]], _Codes]:
    """Successor states of a state's transition-carrying histories, (n, k), -1 unknown."""
    short = [(lev, i) for lev, i in mem if lev == L - 1]
    holders = short if short else [(lev, i) for lev, i in mem if lev == L]
    sigs = np.full((len(holders), k), -1, dtype=np.int64)
    for row, (lev, i) in enumerate(holders):
        code = int(levels[lev][0][i])
        for b in range(k):
            if levels[lev][1][i, b] == 0:
                continue
            nxt = code * k + b
            if lev == L:  # fallback: truncate to the length-L suffix
                nxt %= k**L
            sigs[row, b] = _lookup_state(levels, assign, nxt, L, k)
    return holders, sigs


def _group_signatures(sigs: NDArray[np.int64]) -> list[list[int]]:
    """Group rows whose known entries agree (-1 matches anything); informative rows first."""
    order = np.argsort((sigs < 0).sum(axis=1), kind="stable")
    groups: list[list[int]] = []
    merged: list[NDArray[np.int64]] = []
    for r in order:
        for g, m in enumerate(merged):
            known = (m >= 0) & (sigs[r] >= 0)
            if np.all(m[known] == sigs[r][known]):
                groups[g].append(int(r))
                merged[g] = np.where(m >= 0, m, sigs[r])
                break
        else:
            groups.append([int(r)])
            merged.append(sigs[r].copy())
    return groups


def _determinise(levels: _Levels, assign: _Assign, members: _Members, k: int, L: int) -> None:
    """Recursion step: split states until each (state, symbol) has one successor."""
    changed = True
    while changed:
        changed = False
        for st in range(len(members)):
            holders, sigs = _holder_signatures(levels, assign, members[st], k, L)
            if len(holders) < 2:
                continue
            groups = _group_signatures(sigs)
            if len(groups) < 2:
                continue
            changed = True
            _apply_split(levels, assign, members, st, holders, groups, k, L)


def _apply_split(
    levels: _Levels,
    assign: _Assign,
    members: _Members,
    st: int,
    holders: list[tuple[int, int]],
    groups: list[list[int]],
    k: int,
    L: int,
) -> None:
    """Give each group of holders of state ``st`` its own state; move the rest along."""
    new_ids = [st, *range(len(members), len(members) + len(groups) - 1)]
    members.extend([] for _ in groups[1:])
    moved: set[tuple[int, int]] = set()
    for gid, g in zip(new_ids, groups, strict=True):
        for r in g:
            lev, i = holders[r]
            assign[lev][i] = gid
            moved.add((lev, i))
    holder_level = holders[0][0]
    rest = [m for m in members[st] if m not in moved]
    for lev, i in rest:
        gid = st
        if lev == L and holder_level == L - 1:
            # A length-L history follows the group of its length-(L-1) suffix.
            code = int(levels[lev][0][i]) % k ** (L - 1) if L > 1 else 0
            j = _find(levels[L - 1][0], code)
            if j >= 0 and (L - 1, j) in moved:
                gid = int(assign[L - 1][j])
        assign[lev][i] = gid
    all_members = list(members[st])
    for gid in new_ids:
        members[gid] = [m for m in all_members if assign[m[0]][m[1]] == gid]


def _best_model(
    levels: _Levels,
    assign: _Assign,
    members: _Members,
    alphabet: _Codes,
    L: int,
    alpha: float,
    s: _Codes,
) -> CausalStateModel:
    """The candidate machine (closed class) that explains most of ``s``."""
    k = alphabet.size
    n_all = len(members)
    trans = np.full((n_all, k), -1, dtype=np.int64)
    counts = np.zeros((n_all, k), dtype=np.int64)
    for st in range(n_all):
        holders, sigs = _holder_signatures(levels, assign, members[st], k, L)
        if holders:
            trans[st] = np.max(sigs, axis=0)
            counts[st] = sum(levels[lev][1][i] for lev, i in holders)
    best: tuple[float, CausalStateModel] | None = None
    for keep in _closed_classes(trans, counts):  # heaviest first
        model = _build_model(levels, assign, alphabet, L, alpha, s.size, trans, counts, keep)
        fraction = _synchronised_fraction(model, s)
        if best is None or fraction > best[0]:
            best = (fraction, model)
    assert best is not None  # _closed_classes returns at least one class
    fraction, model = best
    reliable = fraction >= SYNCHRONISED_THRESHOLD
    note = ""
    if not reliable:
        note = (
            f"machine explains {fraction:.0%} of the sequence (< {SYNCHRONISED_THRESHOLD:.0%}): "
            f"histories of length {L} do not capture the structure; C_mu and h_mu are not "
            "the process's"
        )
    return replace(model, synchronised_fraction=fraction, reliable=reliable, note=note)


def _synchronised_fraction(model: CausalStateModel, s: NDArray[np.int64]) -> float:
    """Share of the N - 1 predicted symbols the machine is synchronised on and allows."""
    if s.size < 2:
        return 1.0
    states = model.state_sequence(model.alphabet[s])
    pred, nxt = states[:-1], s[1:]
    ok = pred >= 0
    explained = np.zeros(pred.size, dtype=bool)
    explained[ok] = model.emission_probabilities[pred[ok], nxt[ok]] > 0
    return float(explained.mean())


def _build_model(
    levels: _Levels,
    assign: _Assign,
    alphabet: _Codes,
    L: int,
    alpha: float,
    n: int,
    trans: _Codes,
    counts: _Codes,
    keep: _Codes,
) -> CausalStateModel:
    n_all = trans.shape[0]
    remap = np.full(n_all, -1, dtype=np.int64)
    remap[keep] = np.arange(keep.size)
    t_kept = np.where(trans[keep] >= 0, remap[np.maximum(trans[keep], 0)], -1)
    c_kept = np.where(t_kept >= 0, counts[keep], 0).astype(float)  # drop unknown successors
    probs = c_kept / c_kept.sum(axis=1, keepdims=True)
    pi = _stationary(t_kept, probs)
    with np.errstate(divide="ignore", invalid="ignore"):
        h_state = -np.sum(np.where(probs > 0, probs * np.log2(probs), 0.0), axis=1)
        c_mu = float(-np.sum(np.where(pi > 0, pi * np.log2(pi), 0.0)))
    states, look_long, look_short = _describe_states(levels, assign, keep, remap, alphabet, L)
    return CausalStateModel(
        statistical_complexity=max(c_mu, 0.0) + 0.0,
        entropy_rate=max(float(pi @ h_state), 0.0) + 0.0,
        n_states=int(keep.size),
        states=states,
        transitions=t_kept,
        emission_probabilities=probs,
        stationary_distribution=pi,
        alphabet=alphabet,
        max_history=L,
        alpha=alpha,
        n_symbols=n,
        synchronised_fraction=float("nan"),
        reliable=False,
        note="coverage not checked",
        _lookup_long=look_long,
        _lookup_short=look_short,
    )


def _closed_classes(trans: _Codes, counts: _Codes) -> list[NDArray[np.int64]]:
    """States of each closed strongly connected class, heaviest (most counts) first."""
    n_all = trans.shape[0]
    src, dst = np.nonzero((trans >= 0) & (counts > 0))
    tgt = trans[src, dst]
    graph = csr_matrix((np.ones(src.size), (src, tgt)), shape=(n_all, n_all))
    n_comp, label = connected_components(graph, directed=True, connection="strong")
    leaves = np.ones(n_comp, dtype=bool)
    leaves[label[src][label[src] != label[tgt]]] = False
    weight = np.bincount(label, weights=counts.sum(axis=1), minlength=n_comp)
    has_out = np.bincount(label[src], minlength=n_comp) > 0
    candidates = np.nonzero(leaves & has_out)[0]
    if not candidates.size:
        candidates = np.array([int(np.argmax(weight))])
    order = candidates[np.argsort(-weight[candidates], kind="stable")]
    return [np.nonzero(label == c)[0] for c in order]


def _stationary(trans: _Codes, probs: NDArray[np.float64]) -> NDArray[np.float64]:
    m = trans.shape[0]
    matrix = np.zeros((m, m))
    for b in range(trans.shape[1]):
        ok = trans[:, b] >= 0
        np.add.at(matrix, (np.nonzero(ok)[0], trans[ok, b]), probs[ok, b])
    system = np.vstack([matrix.T - np.eye(m), np.ones((1, m))])
    rhs = np.zeros(m + 1)
    rhs[-1] = 1.0
    pi = np.linalg.lstsq(system, rhs, rcond=None)[0]
    pi = np.clip(pi, 0.0, None)
    return pi / pi.sum()


def _decode(code: int, length: int, k: int, alphabet: _Codes) -> tuple[int, ...]:
    digits = [0] * length
    for i in range(length - 1, -1, -1):
        code, digits[i] = divmod(code, k)
    return tuple(alphabet[d].item() for d in digits)


def _describe_states(
    levels: _Levels, assign: _Assign, keep: _Codes, remap: _Codes, alphabet: _Codes, L: int
) -> tuple[tuple[tuple[tuple[int, ...], ...], ...], tuple[_Codes, _Codes], tuple[_Codes, _Codes]]:
    k = alphabet.size
    per_state: list[list[tuple[int, ...]]] = [[] for _ in keep]
    lookups: list[tuple[_Codes, _Codes]] = []
    for length in (L, L - 1):
        codes, _ = levels[length]
        st = assign[length]
        ok = (st >= 0) & (remap[np.maximum(st, 0)] >= 0)
        lookups.append((codes[ok], remap[st[ok]]))
        for c, s_new in zip(codes[ok], remap[st[ok]], strict=True):
            per_state[s_new].append(_decode(int(c), length, k, alphabet))
    states = tuple(tuple(sorted(h)) for h in per_state)
    return states, lookups[0], lookups[1]


def _single_symbol_model(alphabet: _Codes, L: int, alpha: float, n: int) -> CausalStateModel:
    empty = (np.zeros(0, dtype=np.int64), np.zeros(0, dtype=np.int64))
    one = (np.zeros(1, dtype=np.int64), np.zeros(1, dtype=np.int64))
    return CausalStateModel(
        statistical_complexity=0.0,
        entropy_rate=0.0,
        n_states=1,
        states=((tuple(alphabet[0].item() for _ in range(L)),),),
        transitions=np.zeros((1, 1), dtype=np.int64),
        emission_probabilities=np.ones((1, 1)),
        stationary_distribution=np.ones(1),
        alphabet=alphabet,
        max_history=L,
        alpha=alpha,
        n_symbols=n,
        synchronised_fraction=1.0,
        reliable=True,
        note="",
        _lookup_long=one,
        _lookup_short=one if L >= 1 else empty,
    )
