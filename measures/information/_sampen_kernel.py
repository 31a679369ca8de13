"""Exact template-match counting for sample entropy (private numba kernel).

Templates of length m + 1 are put into square cells of side r on their first
two values (the first value alone when m = 1). Two templates within Chebyshev
distance r lie in the same or in adjacent cells, so each cell is compared with
itself and with half of its neighbours (every pair once), and only those
candidate pairs are checked in full. A pair within r on the first m values
counts towards B, and towards A when the (m+1)-th values also match. Matches
are ``distance <= r``; the counts are exact (no sampling, no approximation).
"""

from __future__ import annotations

import numba
import numpy as np
from numpy.typing import NDArray

# Half of the 3 x 3 neighbourhood (plus the cell itself, handled apart), so that
# every unordered pair of cells is visited once.
_HALF_NEIGHBOURS = np.array([[0, 1], [1, -1], [1, 0], [1, 1]], dtype=np.int64)


@numba.njit(cache=True)
def _pair_counts(
    t: NDArray[np.float64], i: int, j: int, r: float, m: int, a: int, b: int
) -> tuple[int, int]:  # pragma: no cover - compiled
    for c in range(m):
        if abs(t[j, c] - t[i, c]) > r:
            return a, b
    b += 1
    if abs(t[j, m] - t[i, m]) <= r:
        a += 1
    return a, b


@numba.njit(cache=True)
def _count_cells(
    t: NDArray[np.float64],
    keys: NDArray[np.int64],
    starts: NDArray[np.int64],
    ends: NDArray[np.int64],
    offsets: NDArray[np.int64],
    width: np.int64,
    r: float,
    m: int,
) -> tuple[int, int]:  # pragma: no cover - compiled
    a = 0
    b = 0
    n_cells = keys.size
    for cell in range(n_cells):
        s0, e0 = starts[cell], ends[cell]
        for i in range(s0, e0):
            for j in range(i + 1, e0):
                a, b = _pair_counts(t, i, j, r, m, a, b)
        for q in range(offsets.shape[0]):
            other_key = keys[cell] + offsets[q, 0] * width + offsets[q, 1]
            pos = np.searchsorted(keys, other_key)
            if pos >= n_cells or keys[pos] != other_key:
                continue
            for i in range(s0, e0):
                for j in range(starts[pos], ends[pos]):
                    a, b = _pair_counts(t, i, j, r, m, a, b)
    return a, b


def count_matches(x: NDArray[np.float64], m: int, r: float) -> tuple[int, int]:
    """(A, B): pairs of the N - m template starts matching at lengths m + 1 and m."""
    n_templates = x.size - m
    templates = np.column_stack([x[i : i + n_templates] for i in range(m + 1)])
    dims = 2 if m >= 2 else 1
    cells = np.floor((templates[:, :dims] - templates[:, :dims].min(axis=0)) / r).astype(np.int64)
    if dims == 1:
        cells = np.column_stack([cells[:, 0], np.zeros(n_templates, dtype=np.int64)])
    width = int(cells[:, 1].max()) + 3  # room for the -1/+1 neighbour offsets
    key = (cells[:, 0] * width + cells[:, 1] + 1).astype(np.int64)
    order = np.argsort(key, kind="stable")
    key = key[order]
    templates = np.ascontiguousarray(templates[order])
    keys, starts, counts = np.unique(key, return_index=True, return_counts=True)
    offsets = _HALF_NEIGHBOURS if dims == 2 else _HALF_NEIGHBOURS[2:3]
    a, b = _count_cells(
        templates, keys, starts, starts + counts, offsets, np.int64(width), float(r), m
    )
    return int(a), int(b)
