"""Delay embedding: delay and dimension choice, embedding, singular spectrum.

Delay from the first minimum of the average mutual information (Fraser &
Swinney 1986); dimension from false nearest neighbours (Kennel, Brown &
Abarbanel 1992) or Cao's E1/E2 (Cao 1997); singular spectrum analysis of the
trajectory (lag) matrix with diagonal averaging.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy import signal
from scipy.spatial import cKDTree

from measures._validation import (
    InsufficientDataError,
    as_float_array,
    check_choice,
    check_positive_float,
    check_positive_int,
)

__all__ = [
    "AMIResult",
    "CaoResult",
    "FNNResult",
    "MultichannelSSA",
    "SingularSpectrum",
    "average_mutual_information",
    "cao_embedding",
    "delay_embed",
    "embedding_dimension",
    "false_nearest_neighbours",
    "first_ami_minimum",
    "lag_covariance",
    "multichannel_ssa",
    "singular_spectrum",
]


def _series(x: ArrayLike, function: str, min_length: int = 4) -> NDArray[np.float64]:
    return as_float_array("x", x, function, ndim=1, min_length=min_length)


def delay_embed(x: ArrayLike, *, dimension: int, delay: int) -> NDArray[np.float64]:
    """Delay vectors of a series.

    Parameters
    ----------
    x : array_like, shape (N,) or (N, c)
        Series; several channels are embedded together.
    dimension, delay : int
        Embedding dimension d and delay tau (samples).

    Returns
    -------
    ndarray, shape (N - (d - 1) tau, d) or (N - (d - 1) tau, d * c)
        Row t is (x_t, x_{t+tau}, ..., x_{t+(d-1)tau}); with channels the
        columns are grouped by lag (all channels at lag 0, then lag tau, ...).

    References
    ----------
    F. Takens (1981), "Detecting strange attractors in turbulence", Lecture
    Notes in Mathematics 898:366-381.

    Examples
    --------
    >>> delay_embed(np.arange(5.0), dimension=2, delay=2)
    array([[0., 2.],
           [1., 3.],
           [2., 4.]])
    """
    fn = "delay_embed"
    d = check_positive_int("dimension", dimension, fn)
    tau = check_positive_int("delay", delay, fn)
    arr = as_float_array("x", x, fn, ndim=(1, 2), min_length=(d - 1) * tau + 1)
    rows = arr.shape[0] - (d - 1) * tau
    parts = [arr[lag * tau : lag * tau + rows] for lag in range(d)]
    if arr.ndim == 1:
        return np.column_stack(parts)
    return np.concatenate(parts, axis=1)


@dataclass(frozen=True)
class AMIResult:
    """Average mutual information I(x_t; x_{t+lag}) in bits.

    Attributes
    ----------
    lags : ndarray of int, shape (max_lag + 1,)
    ami : ndarray, shape (max_lag + 1,), bits
    n_bins : int
    """

    lags: NDArray[np.int64]
    ami: NDArray[np.float64]
    n_bins: int


def average_mutual_information(x: ArrayLike, *, max_lag: int, n_bins: int = 32) -> AMIResult:
    """Histogram estimate of the mutual information between x_t and x_{t+lag}.

    Parameters
    ----------
    x : array_like, shape (N,)
    max_lag : int
        Largest lag (samples).
    n_bins : int, default 32
        Equal-width bins over the range of x (shared by both coordinates).

    Returns
    -------
    AMIResult
        ``ami[0]`` is the entropy of the binned series.

    References
    ----------
    A. M. Fraser & H. L. Swinney (1986), "Independent coordinates for strange
    attractors from mutual information", Phys. Rev. A 33:1134.
    """
    fn = "average_mutual_information"
    arr = _series(x, fn)
    max_lag = check_positive_int("max_lag", max_lag, fn, minimum=0)
    n_bins = check_positive_int("n_bins", n_bins, fn, minimum=2)
    if max_lag >= arr.size - 1:
        raise InsufficientDataError("x", fn, f"more than max_lag + 1 = {max_lag + 1} samples", arr)
    lo, hi = arr.min(), arr.max()
    span = hi - lo if hi > lo else 1.0
    codes = np.minimum(((arr - lo) / span * n_bins).astype(np.int64), n_bins - 1)
    ami = np.empty(max_lag + 1)
    for lag in range(max_lag + 1):
        a = codes[: arr.size - lag]
        b = codes[lag:]
        joint = np.bincount(a * n_bins + b, minlength=n_bins * n_bins).reshape(n_bins, n_bins)
        p = joint / a.size
        pa = p.sum(axis=1)
        pb = p.sum(axis=0)
        nz = p > 0
        ami[lag] = float((p[nz] * np.log2(p[nz] / np.outer(pa, pb)[nz])).sum())
    return AMIResult(lags=np.arange(max_lag + 1), ami=ami, n_bins=n_bins)


def first_ami_minimum(x: ArrayLike, *, max_lag: int = 100, n_bins: int = 32) -> int:
    """Delay (samples) at the first local minimum of the average mutual information.

    The first lag with ami[lag - 1] > ami[lag] <= ami[lag + 1]. When the
    AMI has no local minimum up to ``max_lag``, the first lag where it falls
    below 1/e of ami[0] is used instead (a common practice fallback), and
    ``max_lag`` if neither exists.

    References
    ----------
    A. M. Fraser & H. L. Swinney (1986), Phys. Rev. A 33:1134.
    """
    res = average_mutual_information(x, max_lag=max_lag, n_bins=n_bins)
    a = res.ami
    for lag in range(1, a.size - 1):
        if a[lag - 1] > a[lag] <= a[lag + 1]:
            return lag
    below = np.flatnonzero(a < a[0] / np.e)
    return int(below[0]) if below.size else int(max_lag)


@dataclass(frozen=True)
class FNNResult:
    """Fraction of false nearest neighbours per dimension.

    Attributes
    ----------
    dimensions : ndarray of int, (1, ..., max_dim)
    fraction : ndarray, same shape
    """

    dimensions: NDArray[np.int64]
    fraction: NDArray[np.float64]


def _nearest(
    points: NDArray[np.float64], p: float, theiler: int
) -> tuple[NDArray[np.intp], NDArray[np.float64], NDArray[np.bool_]]:
    """Index and distance of each point's nearest neighbour (self and |i-j| < theiler out)."""
    tree = cKDTree(points)
    k = min(points.shape[0], max(2, 2 * theiler + 2))
    dist, idx = tree.query(points, k=k, p=p)
    own = np.arange(points.shape[0])[:, None]
    ok = (np.abs(idx - own) >= max(theiler, 1)) & (idx < points.shape[0])
    first = np.argmax(ok, axis=1)
    rows = np.arange(points.shape[0])
    found = ok[rows, first]
    return idx[rows, first], dist[rows, first], found


def false_nearest_neighbours(
    x: ArrayLike,
    *,
    delay: int,
    max_dim: int,
    rtol: float = 15.0,
    atol: float = 2.0,
    theiler: int = 0,
) -> FNNResult:
    """False nearest neighbours (Euclidean) for dimensions 1..max_dim.

    A neighbour in dimension d is false when adding the next coordinate
    stretches the distance by more than ``rtol`` (|x_{i+d tau} -
    x_{n+d tau}| / R_d > rtol) or the new distance exceeds ``atol`` times the
    standard deviation of x (R_{d+1} / R_A > atol). Points whose nearest
    neighbour coincides (R_d = 0) are left out.

    References
    ----------
    M. B. Kennel, R. Brown & H. D. I. Abarbanel (1992), "Determining
    embedding dimension for phase-space reconstruction using a geometrical
    construction", Phys. Rev. A 45:3403 (criteria 1 and 2).
    """
    fn = "false_nearest_neighbours"
    arr = _series(x, fn)
    tau = check_positive_int("delay", delay, fn)
    max_dim = check_positive_int("max_dim", max_dim, fn)
    rtol = check_positive_float("rtol", rtol, fn)
    atol = check_positive_float("atol", atol, fn)
    theiler = check_positive_int("theiler", theiler, fn, minimum=0)
    if arr.size - max_dim * tau < 10:
        raise InsufficientDataError("x", fn, f"more than {max_dim * tau + 10} samples", arr)
    r_a = float(np.std(arr))
    out = np.empty(max_dim)
    for d in range(1, max_dim + 1):
        rows = arr.size - d * tau
        emb = delay_embed(arr[: rows + (d - 1) * tau], dimension=d, delay=tau)
        nn, r_d, found = _nearest(emb, 2.0, theiler)
        extra = np.abs(arr[np.arange(rows) + d * tau] - arr[nn + d * tau])
        keep = found & (r_d > 0)
        r_d1 = np.sqrt(r_d**2 + extra**2)
        false = (extra[keep] / r_d[keep] > rtol) | (r_d1[keep] / r_a > atol)
        out[d - 1] = float(false.mean()) if keep.any() else np.nan
    return FNNResult(dimensions=np.arange(1, max_dim + 1), fraction=out)


@dataclass(frozen=True)
class CaoResult:
    """Cao's E1(d) and E2(d) for d = 1..max_dim (maximum norm).

    Attributes
    ----------
    dimensions : ndarray of int
    e1, e2 : ndarray
        E1(d) = E(d+1)/E(d) and E2(d) = E*(d+1)/E*(d).
    """

    dimensions: NDArray[np.int64]
    e1: NDArray[np.float64]
    e2: NDArray[np.float64]


def _cao_terms(arr: NDArray[np.float64], tau: int, d: int, theiler: int) -> tuple[float, float]:
    """E(d) and E*(d) of Cao (1997), eq. (3) and (5)."""
    rows = arr.size - d * tau
    emb = delay_embed(arr[: rows + (d - 1) * tau], dimension=d, delay=tau)
    nn, r_d, found = _nearest(emb, np.inf, theiler)
    extra = np.abs(arr[np.arange(rows) + d * tau] - arr[nn + d * tau])
    keep = found & (r_d > 0)
    r_d1 = np.maximum(r_d, extra)
    return float(np.mean(r_d1[keep] / r_d[keep])), float(np.mean(extra[found]))


def cao_embedding(x: ArrayLike, *, delay: int, max_dim: int, theiler: int = 0) -> CaoResult:
    """Cao's minimum-embedding-dimension statistics E1 and E2.

    E1(d) stops changing (tends to 1) once d reaches the minimum embedding
    dimension; E2(d) stays near 1 for all d for random data.

    References
    ----------
    L. Cao (1997), "Practical method for determining the minimum embedding
    dimension of a scalar time series", Physica D 110:43-50.
    """
    fn = "cao_embedding"
    arr = _series(x, fn)
    tau = check_positive_int("delay", delay, fn)
    max_dim = check_positive_int("max_dim", max_dim, fn)
    theiler = check_positive_int("theiler", theiler, fn, minimum=0)
    if arr.size - (max_dim + 1) * tau < 10:
        raise InsufficientDataError("x", fn, f"more than {(max_dim + 1) * tau + 10} samples", arr)
    terms = [_cao_terms(arr, tau, d, theiler) for d in range(1, max_dim + 2)]
    e = np.array([t[0] for t in terms])
    es = np.array([t[1] for t in terms])
    return CaoResult(dimensions=np.arange(1, max_dim + 1), e1=e[1:] / e[:-1], e2=es[1:] / es[:-1])


def embedding_dimension(
    x: ArrayLike,
    *,
    delay: int,
    max_dim: int = 10,
    method: str = "fnn",
    fnn_fraction: float = 0.01,
    e1_saturation: float = 0.85,
) -> int:
    """Minimum embedding dimension.

    ``method="fnn"``: the smallest d whose false-neighbour fraction is below
    ``fnn_fraction`` (1 %, common practice). ``method="cao"``: the smallest d
    with E1(d) >= ``e1_saturation`` (0.85; E1 has stopped changing from d on, so
    d = d0 + 1 in Cao's notation). Returns ``max_dim`` when neither happens.

    References
    ----------
    Kennel, Brown & Abarbanel (1992), Phys. Rev. A 45:3403; Cao (1997),
    Physica D 110:43.
    """
    fn = "embedding_dimension"
    check_choice("method", method, fn, ("fnn", "cao"))
    if method == "fnn":
        frac = false_nearest_neighbours(x, delay=delay, max_dim=max_dim).fraction
        hit = np.flatnonzero(frac < fnn_fraction)
    else:
        e1 = cao_embedding(x, delay=delay, max_dim=max_dim).e1
        hit = np.flatnonzero(e1 >= e1_saturation)
    return int(hit[0]) + 1 if hit.size else int(max_dim)


@dataclass(frozen=True)
class SingularSpectrum:
    """Singular spectrum analysis of a series.

    Attributes
    ----------
    eigenvalues : ndarray, shape (window_samples,)
        Eigenvalues of the lag-covariance matrix X^T X / K (descending), in
        squared units of x; they sum to ``window_samples`` times the mean square of
        the centred series (up to edge effects).
    variance_share : ndarray, shape (window_samples,)
        eigenvalues / their sum.
    components : ndarray, shape (n_reconstructed, N)
        Reconstructed components by diagonal averaging, leading first; with
        every component reconstructed they sum to the centred series.
    n_components : int
        Smallest r whose leading r shares sum to at least ``variance_fraction``.
    mean : float
        Mean removed before the decomposition.
    """

    eigenvalues: NDArray[np.float64]
    variance_share: NDArray[np.float64]
    components: NDArray[np.float64]
    n_components: int
    mean: float


def _diagonal_averages(
    u: NDArray[np.float64], sv: NDArray[np.float64], vt: NDArray[np.float64]
) -> NDArray[np.float64]:
    """Anti-diagonal means of every rank-one term ``sv[r] u[:, r] vt[r]``.

    The anti-diagonal sums of an outer product are the convolution of its two
    vectors, so all components come from one batched FFT convolution instead
    of forming r matrices of size K x L (Golyandina et al. 2001, sec. 1.1.2).
    """
    k, l = u.shape[0], vt.shape[1]
    sums = signal.fftconvolve(u.T, vt, mode="full", axes=1) * sv[:, None]
    counts = np.convolve(np.ones(k), np.ones(l))
    return sums / counts


def lag_covariance(
    x: NDArray[np.float64], *, window_samples: int, lag_step: int = 1
) -> NDArray[np.float64]:
    """X^T X of the (multichannel) trajectory matrix without forming X.

    Row t of X is ``(x_t, x_{t+s}, ..., x_{t+(L-1)s})`` with every channel at
    each lag (lag-major, as :func:`delay_embed`), K = N - (L-1)s rows. The
    block of lags (i, j) is ``sum_{t<K} x_{t+is}^T x_{t+js}``: for each lag
    difference d = j - i it is the full lagged product ``x[:N-ds]^T x[ds:]``
    minus a head (t + is below is) and a tail (past is + K) that are at most
    (L-1)s terms long, so the cost is O(N c^2 L) in BLAS products instead of
    O(N (cL)^2), and the sums are as exact as the direct ones.

    Parameters
    ----------
    x : ndarray (N, c), centred
    window_samples : int
        L, number of lags.
    lag_step : int, default 1
        s, samples between lags.

    Returns
    -------
    ndarray (c L, c L), symmetric
    """
    n, c = x.shape
    s = lag_step
    span = (window_samples - 1) * s
    k = n - span
    out = np.empty((window_samples, c, window_samples, c))
    for d in range(window_samples):
        off = d * s
        full = x[: n - off].T @ x[off:]  # (c, c): sum over u of x_u^T x_{u+off}
        # head[i] = sum over u < i s; tail[i] = sum over u >= i s + K.
        u_head = np.arange(span + 1)
        prod_h = x[u_head][:, :, None] * x[np.minimum(u_head + off, n - 1)][:, None, :]
        cum_h = np.concatenate((np.zeros((1, c, c)), np.cumsum(prod_h, axis=0)))
        tail_lo = k  # u from i s + K ... n - off - 1
        u_tail = np.arange(tail_lo, n - off)
        prod_t = x[u_tail][:, :, None] * x[u_tail + off][:, None, :]
        # suffix sums: rev_cum[m] = sum of prod_t[m:]
        rev_cum = np.concatenate((np.cumsum(prod_t[::-1], axis=0)[::-1], np.zeros((1, c, c))))
        for i in range(window_samples - d):
            j = i + d
            block = full - cum_h[i * s] - rev_cum[i * s]
            out[i, :, j, :] = block
            out[j, :, i, :] = block.T
    return out.reshape(window_samples * c, window_samples * c)


def _principal_components(
    x: NDArray[np.float64], vecs: NDArray[np.float64], window_samples: int, lag_step: int
) -> NDArray[np.float64]:
    """X @ vecs without forming X: one (K, c) @ (c, r) product per lag."""
    n, c = x.shape
    k = n - (window_samples - 1) * lag_step
    e = vecs.reshape(window_samples, c, -1)
    out = np.zeros((k, vecs.shape[1]))
    for i in range(window_samples):
        out += x[i * lag_step : i * lag_step + k] @ e[i]
    return out


def _leading_eigh(
    cov: NDArray[np.float64], n_keep: int
) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """All eigenvalues (descending, clipped at 0) and the leading n_keep eigenvectors."""
    vals, vecs = np.linalg.eigh(cov)
    order = np.argsort(vals)[::-1]
    return np.clip(vals[order], 0.0, None), vecs[:, order[:n_keep]]


def singular_spectrum(
    x: ArrayLike,
    *,
    window_samples: int,
    variance_fraction: float = 0.9,
    n_reconstructed: int | None = None,
) -> SingularSpectrum:
    """Singular spectrum analysis (SSA) with diagonal-averaged reconstruction.

    The decomposition goes through the L x L lag-covariance matrix (its
    eigenvectors are the right singular vectors of the trajectory matrix X,
    its eigenvalues the squared singular values over K); only the components
    asked for are projected and reconstructed, so the cost is O(N L) plus
    O(L^3) instead of the O(N L^2) of an SVD of X. Components agree with the
    SVD route to round-off (tested to 1e-10).

    Parameters
    ----------
    x : array_like, shape (N,)
    window_samples : int
        Embedding window L in samples (2 <= L <= N / 2 is usual).
    variance_fraction : float in (0, 1], default 0.9
    n_reconstructed : int, optional
        Number of leading components to reconstruct (default: all L).

    Returns
    -------
    SingularSpectrum

    References
    ----------
    D. S. Broomhead & G. P. King (1986), "Extracting qualitative dynamics
    from experimental data", Physica D 20:217; N. Golyandina, V. Nekrutkin &
    A. Zhigljavsky (2001), Analysis of Time Series Structure: SSA and
    Related Techniques, Chapman & Hall (diagonal averaging).

    Examples
    --------
    >>> t = np.arange(400)
    >>> ssa = singular_spectrum(np.sin(2 * np.pi * t / 40), window_samples=40, n_reconstructed=2)
    >>> round(float(ssa.variance_share[:2].sum()), 6)
    1.0
    """
    fn = "singular_spectrum"
    arr = _series(x, fn)
    window_samples = check_positive_int("window_samples", window_samples, fn, minimum=2)
    frac = check_positive_float("variance_fraction", variance_fraction, fn)
    if window_samples > arr.size // 2 + 1 or frac > 1:
        raise InsufficientDataError(
            "window_samples", fn, f"at most N / 2 + 1 = {arr.size // 2 + 1}", window_samples
        )
    n_rec = window_samples if n_reconstructed is None else n_reconstructed
    n_rec = check_positive_int("n_reconstructed", n_rec, fn, minimum=1)
    n_rec = min(n_rec, window_samples)
    mean = float(arr.mean())
    centred = (arr - mean)[:, None]
    k = arr.size - window_samples + 1
    vals, vecs = _leading_eigh(lag_covariance(centred, window_samples=window_samples), n_rec)
    eig = vals / k
    share = eig / eig.sum()
    pcs = _principal_components(centred, vecs, window_samples, 1)  # = u * sv of the SVD route
    comps = _diagonal_averages(pcs, np.ones(n_rec), vecs.T)
    n_comp = int(np.searchsorted(np.cumsum(share), frac - 1e-12) + 1)
    return SingularSpectrum(
        eigenvalues=eig, variance_share=share, components=comps,
        n_components=min(n_comp, window_samples), mean=mean,
    )  # fmt: skip


@dataclass(frozen=True)
class MultichannelSSA:
    """Multichannel singular spectrum analysis (M-SSA) of a state.

    Attributes
    ----------
    state : ndarray (K, n_components)
        Principal components: the windowed vectors projected on the leading
        eigenvectors (the embedded state), K = N - (window_samples - 1) lag_step.
    eigenvalues : ndarray (window_samples * channels,)
        Eigenvalues of the lag-covariance matrix / K, descending.
    variance_share : ndarray, same shape
    eofs : ndarray (window_samples, channels, n_components)
        Leading eigenvectors (space-time patterns).
    n_components : int
        Chosen by the rule of :func:`multichannel_ssa`.
    window_samples, lag_step : int
    mean : ndarray (channels,)
    """

    state: NDArray[np.float64]
    eigenvalues: NDArray[np.float64]
    variance_share: NDArray[np.float64]
    eofs: NDArray[np.float64]
    n_components: int
    window_samples: int
    lag_step: int
    mean: NDArray[np.float64]

    def reconstruct(self, component: int) -> NDArray[np.float64]:
        """Reconstructed component ``component`` in every channel, (N, channels)."""
        a = self.state[:, component]
        e = self.eofs[:, :, component]  # (L, c)
        k, s = a.size, self.lag_step
        n = k + (self.window_samples - 1) * s
        out = np.zeros((n, e.shape[1]))
        counts = np.zeros(n)
        for i in range(self.window_samples):
            out[i * s : i * s + k] += a[:, None] * e[i][None, :]
            counts[i * s : i * s + k] += 1
        return out / counts[:, None]


def multichannel_ssa(
    x: ArrayLike,
    *,
    window_samples: int,
    lag_step: int = 1,
    variance_fraction: float = 0.9,
    min_components: int = 2,
    max_components: int = 6,
) -> MultichannelSSA:
    """Windowed PCA over every channel: the embedded state of a multichannel series.

    The trajectory matrix holds, per row, every channel at lags 0, s, ...,
    (L-1)s. Its lag-covariance matrix (built by :func:`lag_covariance`,
    never forming X) is diagonalised and the windowed vectors are projected
    on the leading eigenvectors. Rule for the number of components: the
    smallest r whose leading eigenvalues hold ``variance_fraction`` of the
    variance, clipped to ``[min_components, max_components]``.

    Parameters
    ----------
    x : array_like (N, channels), one unit for every channel (not rescaled,
        so each channel weighs by its own variance)
    window_samples : int
        L, number of lags (>= 2).
    lag_step : int, default 1
        Samples between lags; the window_samples spans (L - 1) s samples.
    variance_fraction : float in (0, 1], default 0.9
    min_components, max_components : int, defaults 2 and 6

    Returns
    -------
    MultichannelSSA

    References
    ----------
    D. S. Broomhead & G. P. King (1986), Physica D 20:217; M. Ghil et al.
    (2002), "Advanced spectral methods for climatic time series", Rev.
    Geophys. 40(1):1003 (multichannel SSA); G. Plaut & R. Vautard (1994),
    J. Atmos. Sci. 51:210 (from memory).

    Examples
    --------
    >>> t = np.arange(600)
    >>> x = np.column_stack([np.sin(2 * np.pi * t / 50), np.cos(2 * np.pi * t / 50)])
    >>> m = multichannel_ssa(x, window_samples=10, lag_step=2)
    >>> m.state.shape, m.n_components
    ((582, 2), 2)
    """
    fn = "multichannel_ssa"
    arr = as_float_array("x", x, fn, ndim=(1, 2))
    arr = arr[:, None] if arr.ndim == 1 else arr
    window_samples = check_positive_int("window_samples", window_samples, fn, minimum=2)
    s = check_positive_int("lag_step", lag_step, fn)
    frac = check_positive_float("variance_fraction", variance_fraction, fn)
    lo = check_positive_int("min_components", min_components, fn)
    hi = check_positive_int("max_components", max_components, fn, minimum=lo)
    n, c = arr.shape
    L = window_samples
    if n - (L - 1) * s < max(2 * L, 10) or frac > 1:
        raise InsufficientDataError(
            "x", fn, f"more than {(L - 1) * s + 2 * L} samples for this window", arr
        )
    mean = arr.mean(axis=0)
    centred = arr - mean
    k = n - (window_samples - 1) * s
    cov = lag_covariance(centred, window_samples=window_samples, lag_step=s)
    n_max = min(hi, window_samples * c)
    vals, vecs = _leading_eigh(cov, n_max)
    eig = vals / k
    total = eig.sum()
    share = eig / total if total > 0 else np.zeros_like(eig)
    r = int(np.searchsorted(np.cumsum(share), frac - 1e-12) + 1)
    r = int(np.clip(r, min(lo, n_max), n_max))
    vecs = vecs[:, :r]
    state = _principal_components(centred, vecs, window_samples, s)
    return MultichannelSSA(
        state=state, eigenvalues=eig, variance_share=share,
        eofs=vecs.reshape(L, c, r), n_components=r, window_samples=L, lag_step=s, mean=mean,
    )  # fmt: skip
