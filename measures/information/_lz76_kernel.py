"""Lempel-Ziv (1976) phrase counting (private numba kernels, compiled once and cached).

Top-level functions so that numba caches their machine code on disk: defined inside a
function, as they first were, every process compiled them again (about 2.5 s each).
"""

from __future__ import annotations

import numpy as np
from numba import njit
from numpy.typing import NDArray


@njit(cache=True)
def phrases_quadratic(s: NDArray[np.int64]) -> int:  # pragma: no cover - compiled
    # Kaspar & Schuster (1987), Phys. Rev. A 36:842, the parsing loop of
    # their appendix: extend the current phrase while it can be copied from
    # a start point in the history, else try the next start point.
    # Quadratic; kept as the reference the suffix-array parser is checked
    # and benchmarked against.
    n = s.shape[0]
    if n < 2:
        return n
    i, k, l = 0, 1, 1
    c, k_max = 1, 1
    while True:
        if s[i + k - 1] == s[l + k - 1]:
            k += 1
            if l + k > n:
                c += 1
                break
        else:
            k_max = max(k, k_max)
            i += 1
            if i == l:
                c += 1
                l += k_max
                if l + 1 > n:
                    break
                i, k, k_max = 0, 1, 1
            else:
                k = 1
    return c


@njit(cache=True)
def phrases_from_suffix_array(  # pragma: no cover - compiled
    s: NDArray[np.int64], sa: NDArray[np.int64]
) -> int:
    # Longest previous factor from the suffix array (Ohlebusch & Gog 2011,
    # "Lempel-Ziv factorization revisited", CPM; from memory): among the
    # suffixes starting before l, the ones lexicographically nearest to
    # suffix l (previous / next smaller start in suffix-array order) share
    # the longest prefix with it. One stack pass finds them for every l;
    # the match lengths are then compared symbol by symbol only at phrase
    # starts, which costs the sum of the phrase lengths, O(n).
    n = s.shape[0]
    if n < 2:
        return n
    psv = np.full(n, -1, dtype=np.int64)
    nsv = np.full(n, -1, dtype=np.int64)
    stack = np.empty(n, dtype=np.int64)
    top = 0
    for r in range(n):
        cur = sa[r]
        while top > 0 and sa[stack[top - 1]] > cur:
            nsv[sa[stack[top - 1]]] = cur
            top -= 1
        if top > 0:
            psv[cur] = sa[stack[top - 1]]
        stack[top] = r
        top += 1
    c = 1  # the first symbol is the first phrase
    l = 1
    while l < n:
        best = 0
        for p in (psv[l], nsv[l]):
            if p < 0:
                continue
            m = 0
            while l + m < n and s[p + m] == s[l + m]:
                m += 1
            if m > best:
                best = m
        c += 1
        l += best + 1
    return c
