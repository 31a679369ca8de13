"""Mutual information of continuous variables: the KSG estimator.

Kraskov, Stögbauer & Grassberger (2004), algorithm 1: for each point, eps_i
is the Chebyshev (max-norm) distance to its k-th nearest neighbour in the
joint space (x, y); n_x(i) and n_y(i) count the other points strictly closer
than eps_i in the x and y marginal spaces (also max-norm); then

    I(X; Y) = psi(k) + psi(N) - < psi(n_x + 1) + psi(n_y + 1) >   (nats).

Preparation (the same as scikit-learn's ``mutual_info_regression``, which we
use as a reference in the tests): every column is divided by its sample
standard deviation, because the max-norm makes the neighbour search depend on
the relative scale of the coordinates; then Gaussian jitter of
``jitter * max(1, mean |column|)`` is added (seeded), so that tied values (for
example quantised marker coordinates) do not make distances exactly equal and
the strict "closer than" counts ill-defined. The default jitter of 1e-10 is far
below any measurement resolution. The estimate is not clipped at zero (it can
be slightly negative for independent variables).

References
----------
A. Kraskov, H. Stögbauer & P. Grassberger (2004), "Estimating mutual
information", Phys. Rev. E 69:066138, eq. 8 (algorithm 1).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy.spatial import cKDTree
from scipy.special import digamma

from measures._validation import (
    InsufficientDataError,
    InvalidParameterError,
    as_float_array,
    check_choice,
    check_positive_float,
    check_positive_int,
)

__all__ = ["MutualInformation", "ksg_mutual_information"]

_FUNC = "ksg_mutual_information"


@dataclass(frozen=True)
class MutualInformation:
    """A KSG mutual-information estimate.

    Attributes
    ----------
    value : float
        I(X; Y) in ``unit``.
    unit : str
        ``"bits"`` or ``"nats"``.
    k : int
        Neighbours in the joint space.
    n : int
        Number of samples.
    """

    value: float
    unit: str
    k: int
    n: int

    def __float__(self) -> float:
        return self.value


def _prepare(v: ArrayLike, name: str, jitter: float, rng: np.random.Generator) -> NDArray:
    arr = as_float_array(name, v, _FUNC, ndim=(1, 2), min_length=2)
    arr = arr.reshape(arr.shape[0], -1).copy()
    sd = arr.std(axis=0, ddof=1)
    if np.any(sd == 0):
        raise InvalidParameterError(name, _FUNC, "columns with non-zero variance", arr)
    arr /= sd
    arr += jitter * np.maximum(1.0, np.abs(arr).mean(axis=0)) * rng.standard_normal(arr.shape)
    return arr


def _strict_counts(points: NDArray, radius: NDArray) -> NDArray[np.int64]:
    """Other points strictly within ``radius[i]`` of point i (max-norm)."""
    tree = cKDTree(points)
    # nextafter towards 0 turns "<= r" into "< r"; subtract the point itself.
    r = np.nextafter(radius, 0)
    return tree.query_ball_point(points, r, p=np.inf, return_length=True) - 1


def ksg_mutual_information(
    x: ArrayLike,
    y: ArrayLike,
    *,
    k: int = 3,
    unit: str = "bits",
    jitter: float = 1e-10,
    seed: int = 0,
) -> MutualInformation:
    """Mutual information I(X; Y) by the KSG estimator (algorithm 1).

    Parameters
    ----------
    x : array_like of float, shape (N,) or (N, d_x)
    y : array_like of float, shape (N,) or (N, d_y)
    k : int, default 3
        Number of joint-space neighbours.
    unit : {"bits", "nats"}, default "bits"
    jitter : float, default 1e-10
        Relative size of the tie-breaking noise (see the module notes); 0
        disables it.
    seed : int
        Seed of the jitter.

    Returns
    -------
    MutualInformation

    References
    ----------
    Kraskov, Stögbauer & Grassberger (2004), Phys. Rev. E 69:066138, eq. 8.

    Examples
    --------
    >>> g = np.random.default_rng(0).standard_normal((2000, 2))
    >>> abs(ksg_mutual_information(g[:, 0], g[:, 1]).value) < 0.05
    True
    """
    k = check_positive_int("k", k, _FUNC)
    check_choice("unit", unit, _FUNC, ("bits", "nats"))
    jitter = check_positive_float("jitter", jitter, _FUNC, allow_zero=True)
    rng = np.random.default_rng(seed)
    xs = _prepare(x, "x", jitter, rng)
    ys = _prepare(y, "y", jitter, rng)
    n = xs.shape[0]
    if ys.shape[0] != n:
        raise InvalidParameterError("y", _FUNC, f"an array with {n} rows like x", ys)
    if n <= k:
        raise InsufficientDataError("x", _FUNC, f"more than k = {k} samples", xs)
    joint = np.hstack([xs, ys])
    dist, _ = cKDTree(joint).query(joint, k=k + 1, p=np.inf)
    eps = dist[:, -1]
    nx = _strict_counts(xs, eps)
    ny = _strict_counts(ys, eps)
    nats = float(digamma(k) + digamma(n) - np.mean(digamma(nx + 1) + digamma(ny + 1)))
    value = nats / math.log(2) if unit == "bits" else nats
    return MutualInformation(value=value, unit=unit, k=k, n=n)
