"""Sample entropy and multiscale entropy (in nats, as published).

Sample entropy (Richman & Moorman 2000) is ``-ln(A / B)``, where ``B`` counts
pairs of distinct templates of ``m`` consecutive values within Chebyshev
distance ``r`` of each other and ``A`` counts the pairs that still match when
extended to ``m + 1`` values. Both counts use the same ``N - m`` template
starts, so every pair counted in ``A`` is counted in ``B``; self-matches are
excluded. Matches are ``distance <= r``.

``r`` is given relative to the standard deviation of the series, with
``ddof=0`` (population SD) by default, the convention of the general-purpose
libraries antropy and nolds; ``ddof=1`` gives the sample SD.

Pairs are counted exactly by a compiled (numba) sweep over templates sorted
by their first value, which only visits pairs whose first values are within
``r`` (see :mod:`measures.information._sampen_kernel`); no O(N^2) Python loop.

References
----------
J. S. Richman & J. R. Moorman (2000), "Physiological time-series analysis
using approximate entropy and sample entropy", Am. J. Physiol. Heart Circ.
Physiol. 278:H2039-H2049.
M. Costa, A. L. Goldberger & C.-K. Peng (2002), "Multiscale entropy analysis of
complex physiologic time series", Phys. Rev. Lett. 89:068102.
"""

from __future__ import annotations

import math
from collections.abc import Iterable
from dataclasses import dataclass

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
from measures.information._sampen_kernel import count_matches

__all__ = ["MultiscaleEntropy", "multiscale_entropy", "sample_entropy"]


@dataclass(frozen=True)
class MultiscaleEntropy:
    """Sample entropy of coarse-grained series, per scale.

    Attributes
    ----------
    scales : ndarray of int, shape (n_scales,)
    sample_entropy : ndarray of float, shape (n_scales,)
        nats; inf where no (m+1)-match exists, NaN where no m-match exists.
    m : int
    r : float
        Tolerance relative to the SD of the original series.
    tolerance : float
        The absolute tolerance used at every scale (r * SD of the original).
    ddof : int
    """

    scales: NDArray[np.int64]
    sample_entropy: NDArray[np.float64]
    m: int
    r: float
    tolerance: float
    ddof: int


def _sampen_abs(x: NDArray[np.float64], m: int, tolerance: float) -> float:
    if x.size - m < 2:
        return math.nan
    a, b = count_matches(x, m, tolerance)
    if b == 0:
        return math.nan
    return math.inf if a == 0 else -math.log(a / b)


def _check(
    x: ArrayLike, m: int, r: float, ddof: int, func: str
) -> tuple[NDArray[np.float64], int, float, int, float]:
    arr = as_float_array("x", x, func, ndim=1, min_length=3)
    m = check_positive_int("m", m, func)
    r = check_positive_float("r", r, func)
    ddof = check_choice("ddof", ddof, func, (0, 1))
    if arr.size <= m + 1:
        raise InsufficientDataError("x", func, f"a series longer than m + 1 = {m + 1}", arr)
    sd = float(np.std(arr, ddof=ddof))
    if sd == 0:
        raise InvalidParameterError("x", func, "a series with non-zero standard deviation", arr)
    return arr, m, r, ddof, sd


def sample_entropy(x: ArrayLike, *, m: int = 2, r: float = 0.2, ddof: int = 0) -> float:
    """Sample entropy SampEn(m, r) of a series, in nats.

    Parameters
    ----------
    x : array_like of float, shape (N,)
    m : int, default 2
        Template length.
    r : float, default 0.2
        Tolerance as a multiple of the standard deviation of ``x``.
    ddof : {0, 1}, default 0
        Delta degrees of freedom of that standard deviation (0: population SD,
        as antropy and nolds; 1: sample SD).

    Returns
    -------
    float
        ``-ln(A/B)`` nats; ``inf`` when no (m+1)-match exists, NaN when no
        m-match exists.

    References
    ----------
    Richman & Moorman (2000), Am. J. Physiol. 278:H2039, eq. for SampEn.

    Examples
    --------
    >>> round(sample_entropy(np.sin(np.arange(2000) * 0.1)), 3) < 0.3
    True
    """
    arr, m, r, _, sd = _check(x, m, r, ddof, "sample_entropy")
    return _sampen_abs(arr, m, r * sd)


def multiscale_entropy(
    x: ArrayLike,
    *,
    scales: Iterable[int] = range(1, 21),
    m: int = 2,
    r: float = 0.2,
    ddof: int = 0,
) -> MultiscaleEntropy:
    """Multiscale entropy: sample entropy of coarse-grained copies of ``x``.

    At scale ``tau`` the series is cut into non-overlapping windows of
    ``tau`` samples and each window is replaced by its mean (Costa et al.
    2002, eq. 1); a trailing partial window is dropped. The absolute tolerance
    is fixed at ``r * SD(x)`` of the original series for every scale, as in
    Costa et al. (2002).

    Parameters
    ----------
    x : array_like of float, shape (N,)
    scales : iterable of int, default 1..20
    m, r, ddof
        As in :func:`sample_entropy`.

    Returns
    -------
    MultiscaleEntropy

    References
    ----------
    Costa, Goldberger & Peng (2002), Phys. Rev. Lett. 89:068102.
    """
    func = "multiscale_entropy"
    arr, m, r, ddof, sd = _check(x, m, r, ddof, func)
    scale_arr = np.array([check_positive_int("scales", s, func) for s in scales], dtype=np.int64)
    if scale_arr.size == 0:
        raise InvalidParameterError("scales", func, "a non-empty iterable of integers >= 1", scales)
    tol = r * sd
    values = np.empty(scale_arr.size)
    for i, tau in enumerate(scale_arr):
        n_win = arr.size // tau
        grained = arr[: n_win * tau].reshape(n_win, tau).mean(axis=1)
        values[i] = _sampen_abs(grained, m, tol) if n_win > m + 1 else math.nan
    return MultiscaleEntropy(scale_arr, values, m, r, tol, ddof)
