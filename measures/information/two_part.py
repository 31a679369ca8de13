"""Total information and effective complexity as a two-part code over context models.

Gell-Mann & Lloyd (1996) split the information needed to describe an entity
into its regularities (effective complexity: a concise description of the
ensemble it belongs to) and the random part (its Shannon information within
that ensemble); the sum is the total information. We make this operational as
a two-part minimum-description-length code (Rissanen 1978, 1989): the model is
a *context model*, the data part the code length of the symbols given it.

One code path for sequences and fields
--------------------------------------
A site is predicted from its *context*: the symbols at the first ``m`` offsets
of a causal template. In 1D the offsets are the past symbols ``-1, -2, ...``;
in 2D they are the nearest already-coded cells in raster order,
:func:`measures.causal_neighbourhood` (left, up, up-left, up-right, ...). The
counting below never looks at the dimension: it reads symbols at offsets.

Windows (comparability across lengths)
--------------------------------------
Model bits of any consistent code grow with the amount of data (parameters
need precision about ``1/sqrt(n)``), so one code of a whole trial cannot be
compared with one of a longer trial. The input is therefore cut into
non-overlapping windows of a fixed number of sites (default 4096: a run of
4096 symbols, or a 64 x 64 tile of a field), each coded on its own; the
effective complexity is the **mean model bits per window** (with the spread
across windows), which settles for a stationary source, whatever the length.

The code of one window (bits)
-----------------------------
With ``k`` the alphabet size (known to sender and receiver), ``m`` the
context size and ``K = k**m`` possible contexts:

* ``m``: Elias gamma code of ``m + 1``, ``2 floor(log2(m + 1)) + 1``;
* which contexts occur: ``log2 min(K, n)`` for their number S and
  ``log2 binom(K, S)`` for which ones (enumerative code; n coded sites);
* per occurring context, which symbols follow it: ``log2 k`` for their number
  j and ``log2 binom(k, j)`` for which ones;
* per context with ``j >= 2``, one bit for its rule: *uniform* over its j
  symbols (no parameter; data ``n_c log2 j``) or *fitted* (maximum-likelihood
  probabilities, ``(j - 1)/2 log2 n_c`` bits of parameters, Rissanen 1978;
  data ``n_c`` times the plug-in entropy), whichever gives the shorter code;
* sites near the window's edge whose largest template does not fit are coded
  at ``log2 k`` each, for every candidate m alike.

Model bits (effective complexity) = the first four items; data bits = the
rest. The context size m is the one with the shortest total code summed over
all full windows (minimum description length), searched from 0 to the
largest m with ``max(k, 2)**(m + 1) * 4 <= window`` whose template fits.

Consequences worth knowing: a fair coin takes the uniform rule at m = 0, so
its effective complexity is the smallest any input can have (4 bits for a
binary alphabet, the same as a constant sequence); a period-p sequence codes
its data in almost nothing and pays only for the contexts that pin its phase,
so it scores above the coin, as it should (it has regularities, the coin has
none). The entropy-rate estimate is the data part per coded site (edge sites
excluded), the conditional entropy given the chosen context.

References
----------
M. Gell-Mann & S. Lloyd (1996), "Information measures, effective complexity,
and total information", Complexity 2(1):44-52.
J. Rissanen (1978), "Modeling by shortest data description", Automatica
14:465-471; J. Rissanen (1989), Stochastic Complexity in Statistical Inquiry,
World Scientific (enumerative and two-part codes; from memory).
D. P. Feldman & J. P. Crutchfield (2003), Phys. Rev. E 67:051104 (causal
neighbourhoods of 2D patterns).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy.special import gammaln

from measures._validation import (
    InsufficientDataError,
    InvalidParameterError,
    check_positive_float,
    check_positive_int,
)
from measures.information._counting import dense_symbols
from measures.information.entropy import causal_neighbourhood

__all__ = ["TWO_PART_WINDOW", "TwoPartCode", "two_part_code"]

_FUNC = "two_part_code"

#: Sites per window by default: 4096 symbols in 1D, a 64 x 64 tile in 2D.
TWO_PART_WINDOW = 4096

# Context-size cap: at least 4 sites per possible (context, symbol) cell (MDL decides
# below the cap; 4 lets a 24-symbol alphabet try one neighbour in a 4096-site window).
_SITES_PER_CELL = 4
_LN2 = math.log(2.0)


@dataclass(frozen=True)
class TwoPartCode:
    """Two-part code of a symbol sequence or field, see the module notes.

    Attributes
    ----------
    effective_complexity_bits : float
        Mean model bits per window (Gell-Mann & Lloyd's effective complexity).
    effective_complexity_spread_bits : float
        Standard deviation of the model bits across windows (0 with one window).
    effective_complexity_bits_per_symbol : float
        ``effective_complexity_bits / window_size``.
    total_information_bits : float
        Code length of the whole input, windows coded independently; a trailing
        part shorter than a window is charged at the mean rate of the full windows.
    total_information_bits_per_symbol : float
        Mean (model + data) bits per site over the full windows.
    data_bits_per_symbol : float
        Mean data bits per site over the full windows (edge sites included).
    entropy_rate_bits_per_symbol : float
        Data bits per site given a full context (edge sites excluded): the
        estimate of h_mu (1D) or the entropy density (2D).
    effective_complexity_bits_per_second, total_information_bits_per_second : float or None
        Per second of input (1D with ``sample_rate_hz``), else None.
    context_size : int
        The chosen m.
    context_offsets : tuple of tuple of int
        The m offsets of the chosen context (1D: ``(-1,), (-2,), ...``).
    max_context : int
        Largest m searched.
    description_length_bits : ndarray, shape (max_context + 1,)
        Total code length over the full windows for each candidate m.
    window_shape : tuple of int
        Sites per window along each axis.
    window_size : int
        Sites per window.
    n_windows : int
        Number of full windows.
    window_model_bits, window_data_bits : ndarray, shape (n_windows,)
        Per-window model and data bits at the chosen m.
    alphabet_size : int
        k used by the code.
    n_symbols : int
        Sites in the input.
    comparable : bool
        False when the input is shorter than the standard window, so the window
        is the whole input and values are not comparable with longer inputs.
    note : str
        Empty, or why ``comparable`` is False.
    """

    effective_complexity_bits: float
    effective_complexity_spread_bits: float
    effective_complexity_bits_per_symbol: float
    total_information_bits: float
    total_information_bits_per_symbol: float
    data_bits_per_symbol: float
    entropy_rate_bits_per_symbol: float
    effective_complexity_bits_per_second: float | None
    total_information_bits_per_second: float | None
    context_size: int
    context_offsets: tuple[tuple[int, ...], ...]
    max_context: int
    description_length_bits: NDArray[np.float64]
    window_shape: tuple[int, ...]
    window_size: int
    n_windows: int
    window_model_bits: NDArray[np.float64]
    window_data_bits: NDArray[np.float64]
    alphabet_size: int
    n_symbols: int
    comparable: bool
    note: str


def _log2_binom(n: NDArray | float, r: NDArray | float) -> NDArray[np.float64]:
    n = np.asarray(n, dtype=float)
    r = np.asarray(r, dtype=float)
    return (gammaln(n + 1) - gammaln(r + 1) - gammaln(n - r + 1)) / _LN2


def _template(ndim: int, size: int) -> tuple[tuple[int, ...], ...]:
    if ndim == 1:
        return tuple((-(i + 1),) for i in range(size))
    return causal_neighbourhood(size)


def _fits(offsets: tuple[tuple[int, ...], ...], shape: tuple[int, ...]) -> bool:
    for d, n in enumerate(shape):
        vals = [0] + [o[d] for o in offsets]
        if max(vals) - min(vals) >= n:
            return False
    return True


def _window_shape(
    dense: NDArray[np.int64], window: int | tuple[int, int] | None
) -> tuple[int, tuple[int, ...], bool]:
    """(number of full windows, window shape, comparable) of the input."""
    if dense.ndim == 1:
        w = TWO_PART_WINDOW if window is None else window
        if isinstance(w, tuple):
            if len(w) != 1:
                raise InvalidParameterError("window", _FUNC, "an int for a 1D input", window)
            w = w[0]
        w = check_positive_int("window", w, _FUNC, minimum=8)
        comparable = dense.size >= w
        w = min(w, dense.size)
        return dense.size // w, (w,), comparable
    if window is None or isinstance(window, (int, np.integer)):
        side = math.isqrt(TWO_PART_WINDOW if window is None else int(window))
        shape: tuple[int, ...] = (side, side)
    else:
        if len(window) != 2:
            raise InvalidParameterError("window", _FUNC, "an int or (rows, columns)", window)
        shape = tuple(int(v) for v in window)
    for v in shape:
        check_positive_int("window", v, _FUNC, minimum=3)
    comparable = dense.shape[0] >= shape[0] and dense.shape[1] >= shape[1]
    shape = (min(shape[0], dense.shape[0]), min(shape[1], dense.shape[1]))
    return (dense.shape[0] // shape[0]) * (dense.shape[1] // shape[1]), shape, comparable


def _windows(dense: NDArray[np.int64], shape: tuple[int, ...]) -> NDArray[np.int64]:
    """Cut the input into full windows of ``shape``, shape (n_win, *shape)."""
    if dense.ndim == 1:
        n_win = dense.size // shape[0]
        return dense[: n_win * shape[0]].reshape(n_win, shape[0])
    ny, nx = dense.shape[0] // shape[0], dense.shape[1] // shape[1]
    tiles = dense[: ny * shape[0], : nx * shape[1]].reshape(ny, shape[0], nx, shape[1])
    return tiles.transpose(0, 2, 1, 3).reshape(ny * nx, *shape)


def _window_costs(
    codes: NDArray[np.int64],
    symbols: NDArray[np.int64],
    n_win: int,
    k: int,
    m: int,
    n_sites: int,
    n_edge: int,
    full: NDArray[np.int64] | None = None,
) -> tuple[NDArray[np.float64], NDArray[np.float64], NDArray[np.float64]]:
    """Model and data bits per window for contexts ``codes`` (see module notes).

    ``full``: the counts of every (window, context, symbol) key, if already
    made (``_context_kernel``); ``codes`` and ``symbols`` are then not read.
    """
    big_k = float(k) ** m
    if full is None:
        # (window, context, symbol) keys; k**(m+1) * n_win stays far below 2**62
        # because of the context-size cap.
        key = (np.arange(n_win, dtype=np.int64)[:, None] * int(big_k) + codes) * k + symbols
        bound = n_win * int(big_k) * k
        if bound <= max(2**22, 4 * key.size):
            full = np.bincount(key.ravel(), minlength=bound)
    if full is not None:
        # Small key range: counting, not sorting (the same sorted keys and counts).
        uniq = np.flatnonzero(full)
        cnt = full[uniq]
        del full
        g = uniq // k  # sorted, so groups are runs
        first = np.empty(g.size, dtype=bool)
        first[:1] = True
        np.not_equal(g[1:], g[:-1], out=first[1:])
        grp = g[first]
        ginv = np.cumsum(first) - 1
    else:
        uniq, cnt = np.unique(key.ravel(), return_counts=True)
        grp, ginv = np.unique(uniq // k, return_inverse=True)
    n_c = np.bincount(ginv, weights=cnt)
    j_c = np.bincount(ginv).astype(float)
    fitted_data = n_c * np.log2(n_c) - np.bincount(ginv, weights=cnt * np.log2(cnt))
    uniform_data = n_c * np.log2(j_c)
    many = j_c >= 2
    fitted = fitted_data + np.where(many, 0.5 * (j_c - 1) * np.log2(n_c), 0.0)
    use_fit = fitted < uniform_data
    data = np.where(use_fit, fitted_data, uniform_data)
    rule = np.where(many, 1.0, 0.0) + np.where(use_fit, fitted - fitted_data, 0.0)
    subset = math.log2(k) + _log2_binom(k, j_c)
    win = grp // int(big_k)
    per_ctx_model = np.bincount(win, weights=rule + subset, minlength=n_win)
    n_ctx = np.bincount(win, minlength=n_win).astype(float)
    support = math.log2(min(big_k, n_sites)) + _log2_binom(big_k, n_ctx)
    elias = 2 * math.floor(math.log2(m + 1)) + 1
    model = elias + support + per_ctx_model
    # Weighted bincount is float64; numpy's stubs say intp, so say it (no copy is made).
    inner = np.bincount(win, weights=data, minlength=n_win).astype(np.float64, copy=False)
    edge = n_edge * math.log2(k)
    return model, inner + edge, inner


# Largest (window, context, symbol) key range counted by the compiled 2-D path.
_KERNEL_MAX_KEYS = 2**24
_CONTEXT: Any = None


def _context_kernel() -> Any:
    """Compiled (window, context, symbol) counting for 2-D windows (built on first use)."""
    global _CONTEXT
    if _CONTEXT is None:
        from numba import njit, prange

        @njit(cache=True, parallel=True)
        def count(  # pragma: no cover - compiled
            dense: NDArray[np.uint8],
            wy: int,
            wx: int,
            n_wx: int,
            n_win: int,
            offs: NDArray[np.int64],
            lo0: int,
            lo1: int,
            hi0: int,
            hi1: int,
            k: int,
            n_ctx: int,
        ) -> NDArray[np.int64]:
            # Key (w * n_ctx + context) * k + symbol, the context's digits in
            # template order (the first offset most significant), as the codes.
            # Window w is the tile (w // n_wx, w % n_wx) of the field, read in
            # place (no copy of the tiles).
            m = offs.shape[0]
            full = np.zeros(n_win * n_ctx * k, dtype=np.int64)
            for w in prange(n_win):  # each window owns its slice of the counts
                base = w * n_ctx
                r0, c0 = (w // n_wx) * wy, (w % n_wx) * wx
                for i in range(r0 + lo0, r0 + hi0):
                    for j in range(c0 + lo1, c0 + hi1):
                        code = 0
                        for s in range(m):
                            code = code * k + dense[i + offs[s, 0], j + offs[s, 1]]
                        full[(base + code) * k + dense[i, j]] += 1
            return full

        _CONTEXT = count
    return _CONTEXT


def two_part_code(
    symbols: ArrayLike,
    *,
    alphabet_size: int | None = None,
    max_context: int | None = None,
    window: int | tuple[int, int] | None = None,
    sample_rate_hz: float | None = None,
) -> TwoPartCode:
    """Effective complexity and total information of a 1D sequence or 2D field.

    Parameters
    ----------
    symbols : array_like of int, shape (N,) or (ny, nx)
        Symbols (any integer labels; relabelled densely).
    alphabet_size : int, optional
        k used by the code (at least the number of distinct symbols). Give the
        size of the symbolisation's alphabet (for example ``order!`` for
        ordinal patterns) so that inputs that miss some symbols are coded alike.
        Default: the number of distinct symbols present.
    max_context : int, optional
        Largest context size searched. Default: the largest m with
        ``max(k, 2)**(m + 1) * 4 <= window size`` whose template fits.
    window : int or (rows, columns), optional
        Sites per window (1D) or tile shape (2D); an int in 2D gives a square
        tile of about that many sites. Default 4096 (64 x 64 in 2D). An input
        smaller than the window is coded as one window and flagged
        ``comparable=False``.
    sample_rate_hz : float, optional
        Symbols per second (1D only), for the per-second figures.

    Returns
    -------
    TwoPartCode

    References
    ----------
    Gell-Mann & Lloyd (1996), Complexity 2:44; Rissanen (1978), Automatica
    14:465.

    Examples
    --------
    >>> code = two_part_code([0, 1, 1] * 3000)
    >>> code.context_size, code.data_bits_per_symbol < 0.01
    (2, True)
    """
    dense, k_obs = dense_symbols(symbols, _FUNC, ndim=(1, 2))
    k = k_obs
    if alphabet_size is not None:
        k = check_positive_int("alphabet_size", alphabet_size, _FUNC)
        if k < k_obs:
            raise InvalidParameterError(
                "alphabet_size", _FUNC, f"at least the {k_obs} distinct symbols present", k
            )
    rate = None
    if sample_rate_hz is not None:
        if dense.ndim != 1:
            raise InvalidParameterError(
                "sample_rate_hz", _FUNC, "None for a 2D field", sample_rate_hz
            )
        rate = check_positive_float("sample_rate_hz", sample_rate_hz, _FUNC)
    if dense.size < 8:
        raise InsufficientDataError("symbols", _FUNC, "at least 8 sites", dense)

    n_win, wshape, comparable = _window_shape(dense, window)
    w_size = int(np.prod(wshape))
    base = max(k, 2)
    cap = 0
    while (
        float(base) ** (cap + 2) * _SITES_PER_CELL <= w_size
        and _fits(_template(dense.ndim, cap + 1), wshape)
        and (dense.ndim == 1 or cap + 1 <= 40)
    ):
        cap += 1
    if max_context is not None:
        cap = min(cap, check_positive_int("max_context", max_context, _FUNC, minimum=0))
    offsets = _template(dense.ndim, cap)

    # Anchor region: sites where the largest template fits inside the window.
    lo = [max([0] + [-o[d] for o in offsets]) for d in range(dense.ndim)]
    hi = [wshape[d] - max([0] + [o[d] for o in offsets]) for d in range(dense.ndim)]
    anchor = (slice(None), *(slice(a, b) for a, b in zip(lo, hi, strict=True)))
    n_sites = int(np.prod([b - a for a, b in zip(lo, hi, strict=True)]))
    n_edge = w_size - n_sites

    results = []
    if dense.ndim == 2 and n_win * float(k) ** (cap + 1) <= _KERNEL_MAX_KEYS and k <= 255:
        # Fields: every (window, context, symbol) count of the largest context
        # straight from the field in one compiled pass (no tile copy, no code or
        # key arrays). A smaller context is a prefix of the largest (its digits
        # come first) over the same anchors, so its counts are sums of the
        # largest context's over the trailing digits: exact, the same counts as
        # the codes below.
        count = _context_kernel()
        offs = np.array(offsets, dtype=np.int64).reshape(len(offsets), 2)
        n_wx = dense.shape[1] // wshape[1]
        top = count(
            np.ascontiguousarray(dense, dtype=np.uint8),
            wshape[0],
            wshape[1],
            n_wx,
            n_win,
            offs,
            lo[0],
            lo[1],
            hi[0],
            hi[1],
            k,
            k**cap,
        ).reshape(n_win, k**cap, k)
        for m in range(cap + 1):
            full = top.reshape(n_win, k**m, k ** (cap - m), k).sum(axis=2).ravel()
            results.append(_window_costs(full, full, n_win, k, m, n_sites, n_edge, full))
    else:
        wins = _windows(dense, wshape)
        sym = wins[anchor].reshape(n_win, -1)
        codes = np.zeros_like(sym)
        for m in range(cap + 1):
            if m > 0:
                o = offsets[m - 1]
                shifted = (
                    slice(None),
                    *(slice(a + d, b + d) for a, b, d in zip(lo, hi, o, strict=True)),
                )
                codes = codes * k + wins[shifted].reshape(n_win, -1)
            results.append(_window_costs(codes, sym, n_win, k, m, n_sites, n_edge))
    lengths = np.array([float(np.sum(mod + dat)) for mod, dat, _ in results])
    best = int(np.argmin(lengths))
    model, data, inner = results[best]

    total_rate = float(np.mean(model + data)) / w_size
    ec = float(np.mean(model))
    duration = dense.size / rate if rate is not None else None
    note = ""
    if not comparable:
        note = (
            f"input ({dense.size} sites) smaller than the standard window; "
            "coded as one window, not comparable with longer inputs"
        )
    return TwoPartCode(
        effective_complexity_bits=ec,
        effective_complexity_spread_bits=float(np.std(model)),
        effective_complexity_bits_per_symbol=ec / w_size,
        total_information_bits=total_rate * dense.size,
        total_information_bits_per_symbol=total_rate,
        data_bits_per_symbol=float(np.mean(data)) / w_size,
        entropy_rate_bits_per_symbol=float(np.mean(inner)) / n_sites,
        effective_complexity_bits_per_second=(
            None if rate is None else ec / (w_size / rate)  # per window duration
        ),
        total_information_bits_per_second=(
            None if duration is None else total_rate * dense.size / duration
        ),
        context_size=best,
        context_offsets=tuple(offsets[:best]),
        max_context=cap,
        description_length_bits=lengths,
        window_shape=tuple(wshape),
        window_size=w_size,
        n_windows=n_win,
        window_model_bits=model,
        window_data_bits=data,
        alphabet_size=k,
        n_symbols=int(dense.size),
        comparable=comparable,
        note=note,
    )
