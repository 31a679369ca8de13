"""Multivariate summary of terrain-movement correspondence at the arena level.

The first canonical correlation (Hotelling 1936) of the arena-level terrain
vector and the arena-mean movement vector: the largest Pearson correlation any
linear combination of terrain measures reaches with any linear combination of
movement measures. With n arenas and p + q variables it is 1 whenever
``n <= p + q`` (a perfect fit is always available), so the result carries a
``degenerate`` flag and the caller should warn. Computed from orthonormal bases
of the centred data (SVD), which is numerically stable: the canonical
correlations are the singular values of ``Ux' Uy`` (Björck & Golub 1973).

The p-value permutes arenas (rows of the movement block), exactly when
``n! <= n_permutations + 1``.

References
----------
Hotelling, H. (1936). Relations between two sets of variates. Biometrika 28, 321-377.
Björck, Å. & Golub, G. H. (1973). Numerical methods for computing angles between
linear subspaces. Math. Comp. 27, 579-594.
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

from measures._validation import InvalidParameterError, as_float_array, check_positive_int

__all__ = ["CanonicalCorrelation", "first_canonical_correlation"]


@dataclass(frozen=True)
class CanonicalCorrelation:
    """First canonical correlation of two blocks of variables.

    Attributes
    ----------
    correlation : float
        First canonical correlation, in [0, 1].
    x_weights, y_weights : ndarray, shape (p,), (q,)
        Weights of the canonical variates on the standardised variables
        (unit-variance variates; sign fixed so the largest x weight is positive).
    p_value : float
        Permutation p-value (rows of ``y`` permuted); NaN when degenerate.
    n_permutations : int
    exact : bool
    n, n_variables : int
        Observations and ``p + q``.
    rank_x, rank_y : int
        Numerical ranks of the centred blocks.
    degenerate : bool
        ``n <= p + q``: the correlation is 1 by construction and says nothing.
    """

    correlation: float
    x_weights: NDArray[np.float64]
    y_weights: NDArray[np.float64]
    p_value: float
    n_permutations: int
    exact: bool
    n: int
    n_variables: int
    rank_x: int
    rank_y: int
    degenerate: bool


def _basis(
    a: NDArray[np.float64],
) -> tuple[NDArray[np.float64], NDArray[np.float64], NDArray[np.float64]]:
    u, s, vt = np.linalg.svd(a, full_matrices=False)
    keep = s > s.max(initial=0.0) * max(a.shape) * np.finfo(np.float64).eps
    return u[:, keep], s[keep], vt[keep]


def first_canonical_correlation(
    x: ArrayLike, y: ArrayLike, *, n_permutations: int = 999, seed: int = 0
) -> CanonicalCorrelation:
    """First canonical correlation of ``x`` and ``y`` with a permutation p-value.

    Parameters
    ----------
    x : array_like, shape (n,) or (n, p)
        First block (e.g. terrain measures per arena).
    y : array_like, shape (n,) or (n, q)
        Second block (e.g. arena-mean movement measures).
    n_permutations : int, default 999
    seed : int, default 0

    Returns
    -------
    CanonicalCorrelation

    References
    ----------
    Hotelling (1936); Björck & Golub (1973).

    Examples
    --------
    >>> x = np.arange(6.0); y = np.array([0.0, 2, 1, 3, 5, 4])
    >>> round(first_canonical_correlation(x, y).correlation, 6)  # = |Pearson r|
    0.885714
    """
    fn = "first_canonical_correlation"
    xa = as_float_array("x", x, fn, ndim=(1, 2), min_length=3)
    ya = as_float_array("y", y, fn, ndim=(1, 2), min_length=3)
    xa = xa.reshape(xa.shape[0], -1)
    ya = ya.reshape(ya.shape[0], -1)
    n = xa.shape[0]
    if ya.shape[0] != n:
        raise InvalidParameterError("y", fn, f"{n} rows like x", ya)
    check_positive_int("n_permutations", n_permutations, fn)
    sx = xa.std(axis=0)
    sy = ya.std(axis=0)
    if np.any(sx == 0) or np.any(sy == 0):
        raise InvalidParameterError("x", fn, "columns that are not constant", xa)
    xs = (xa - xa.mean(axis=0)) / sx
    ys = (ya - ya.mean(axis=0)) / sy
    ux, dx, vx = _basis(xs)
    uy, dy, vy = _basis(ys)
    u, s, vt = np.linalg.svd(ux.T @ uy)
    corr = float(min(s[0], 1.0))
    # Variate = xs @ w with unit variance: w = V' diag(1/d) u1 * sqrt(n).
    wx = vx.T @ (u[:, 0] / dx) * math.sqrt(n)
    wy = vy.T @ (vt[0] / dy) * math.sqrt(n)
    sign = 1.0 if wx[np.argmax(np.abs(wx))] >= 0 else -1.0
    degenerate = n <= xa.shape[1] + ya.shape[1]
    p_value, n_perm, exact = math.nan, 0, False
    if not degenerate:
        if math.factorial(n) <= n_permutations + 1:
            perms = np.array(list(itertools.permutations(range(n))), dtype=np.intp)
            exact = True
        else:
            rng = np.random.default_rng(seed)
            perms = np.argsort(rng.random((n_permutations, n)), axis=1)
        null = np.linalg.svd(ux.T[None, :, :] @ uy[perms], compute_uv=False)[:, 0]
        hits = int(np.sum(null >= corr * (1 - 1e-12)))
        n_perm = len(perms)
        p_value = hits / n_perm if exact else (1 + hits) / (1 + n_perm)
    return CanonicalCorrelation(
        correlation=corr,
        x_weights=sign * wx,
        y_weights=sign * wy,
        p_value=float(p_value),
        n_permutations=n_perm,
        exact=exact,
        n=n,
        n_variables=xa.shape[1] + ya.shape[1],
        rank_x=ux.shape[1],
        rank_y=uy.shape[1],
        degenerate=degenerate,
    )
