"""An RQA oracle for the tests that shares no code with measures.dynamics.

It builds the whole N x N recurrence matrix with numpy and reads the
definitions of Marwan et al. (2007), Physics Reports 438:237, as fixed in the
project's contract, literally: R_ij = 1 when ||x_i - x_j|| <= eps and
|i - j| >= theiler, the matrix taken whole; with a recurrence rate, eps is the
K-th smallest admissible distance of the whole matrix, K = round(rate * P)
(at least 1). Small N only (memory N^2).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class DenseRQA:
    rr: float
    det: float
    l_mean: float
    l_max: int
    entr: float
    lam: float
    tt: float
    v_max: int
    threshold: float
    n: int
    n_recurrences: int
    n_admissible: int
    diagonal_lengths: np.ndarray
    vertical_lengths: np.ndarray


def _run_lengths(row: np.ndarray) -> list[int]:
    out, run = [], 0
    for v in row:
        if v:
            run += 1
        elif run:
            out.append(run)
            run = 0
    if run:
        out.append(run)
    return out


def _histogram(lengths: list[int], n: int) -> np.ndarray:
    h = np.zeros(n + 1, dtype=np.int64)
    for length in lengths:
        h[length] += 1
    return h


def _stats(h: np.ndarray, lmin: int, n_rec: int) -> tuple[float, float, float, int]:
    """(fraction of recurrences on lines >= lmin, mean length, entropy, longest)."""
    lengths = np.flatnonzero(h)
    longest = int(lengths.max()) if lengths.size else 0
    counts = {int(l): int(h[l]) for l in lengths if l >= lmin}
    n_lines = sum(counts.values())
    if n_lines == 0:
        return 0.0, math.nan, math.nan, longest
    on_lines = sum(l * c for l, c in counts.items())
    ent = -sum((c / n_lines) * math.log(c / n_lines) for c in counts.values())
    return on_lines / n_rec, on_lines / n_lines, ent, longest


def dense_rqa(
    points,
    *,
    threshold: float | None = None,
    recurrence_rate: float | None = None,
    theiler: int = 1,
    lmin: int = 2,
    vmin: int = 2,
    metric: str = "euclidean",
) -> DenseRQA:
    x = np.asarray(points, dtype=np.float64)
    x = x[:, None] if x.ndim == 1 else x
    n = x.shape[0]
    diff = x[:, None, :] - x[None, :, :]
    # Euclidean distances compared squared (no rounding from a square root).
    dist = (diff * diff).sum(axis=-1) if metric == "euclidean" else np.abs(diff).max(axis=-1)
    i, j = np.indices((n, n))
    admissible = np.abs(i - j) >= theiler
    if threshold is None:
        rank = max(1, round(recurrence_rate * int(admissible.sum())))
        comp = float(np.sort(dist[admissible])[rank - 1])
        eps = math.sqrt(comp) if metric == "euclidean" else comp
    else:
        eps = float(threshold)
        comp = eps * eps if metric == "euclidean" else eps
    rec = (dist <= comp) & admissible
    n_rec = int(rec.sum())
    diag = [r for k in range(-(n - 1), n) for r in _run_lengths(np.diagonal(rec, k))]
    vert = [r for col in rec.T for r in _run_lengths(col)]
    hd, hv = _histogram(diag, n), _histogram(vert, n)
    det, l_mean, entr, l_max = _stats(hd, lmin, n_rec) if n_rec else (0.0, math.nan, math.nan, 0)
    lam, tt, _, v_max = _stats(hv, vmin, n_rec) if n_rec else (0.0, math.nan, math.nan, 0)
    if n_rec == 0:
        l_max = v_max = 0
    return DenseRQA(
        rr=n_rec / int(admissible.sum()), det=det, l_mean=l_mean, l_max=l_max, entr=entr,
        lam=lam, tt=tt, v_max=v_max, threshold=eps, n=n, n_recurrences=n_rec,
        n_admissible=int(admissible.sum()), diagonal_lengths=hd, vertical_lengths=hv,
    )  # fmt: skip
