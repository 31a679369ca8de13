"""SSA by the lag-covariance route and multichannel SSA, against the SVD of
the explicit trajectory matrix (numpy; Broomhead & King 1986: the right
singular vectors of X are the eigenvectors of X^T X) and analytic values."""

from __future__ import annotations

import numpy as np
import pytest
from _testing import assert_allclose

from measures import InsufficientDataError, delay_embed, singular_spectrum
from measures.dynamics.embedding import lag_covariance, multichannel_ssa


def _svd_components(x: np.ndarray, window: int) -> tuple[np.ndarray, np.ndarray]:
    """Reference written here: SVD of X, every rank-one term anti-diagonally averaged."""
    xc = x - x.mean()
    traj = np.column_stack([xc[i : i + x.size - window + 1] for i in range(window)])
    u, sv, vt = np.linalg.svd(traj, full_matrices=False)
    k = traj.shape[0]
    comps = np.zeros((window, x.size))
    counts = np.zeros(x.size)
    for i in range(window):
        counts[i : i + k] += 1
    for r in range(window):
        term = sv[r] * np.outer(u[:, r], vt[r])
        for i in range(window):
            comps[r, i : i + k] += term[:, i]
    return comps / counts, sv**2 / k


@pytest.mark.parametrize("window", [2, 13, 40])
def test_lag_covariance_route_equals_svd(window, rng) -> None:
    x = np.sin(np.arange(400) / 6.0) + 0.3 * rng.standard_normal(400)
    ref, eig = _svd_components(x, window)
    got = singular_spectrum(x, window_samples=window)
    assert_allclose(got.eigenvalues, eig, rtol=0, atol=1e-10)
    assert_allclose(got.components, ref, rtol=0, atol=1e-10)  # issue: equal within 1e-10
    assert_allclose(got.components.sum(axis=0), x - x.mean(), rtol=0, atol=1e-10)
    lead = singular_spectrum(x, window_samples=window, n_reconstructed=2)
    assert lead.components.shape == (min(2, window), x.size)
    assert_allclose(lead.components, ref[:2], rtol=0, atol=1e-10)


@pytest.mark.parametrize(("channels", "step"), [(1, 1), (3, 1), (3, 4)])
def test_lag_covariance_equals_explicit_product(channels, step, rng) -> None:
    x = np.cumsum(rng.standard_normal((300, channels)), axis=0)
    x -= x.mean(axis=0)
    traj = delay_embed(x if channels > 1 else x[:, 0], dimension=7, delay=step)
    assert_allclose(
        lag_covariance(x, window_samples=7, lag_step=step), traj.T @ traj, rtol=1e-12, atol=1e-9
    )


def test_multichannel_state_is_the_pca_of_the_trajectory_matrix(rng) -> None:
    # Reference: numpy eigendecomposition of the explicit X^T X (Ghil et al. 2002, M-SSA).
    t = np.arange(800)
    x = np.column_stack(
        [np.sin(2 * np.pi * t / 40), np.cos(2 * np.pi * t / 40), 0.2 * rng.standard_normal(800)]
    )
    m = multichannel_ssa(x, window_samples=8, lag_step=3, max_components=4, variance_fraction=0.5)
    traj = delay_embed(x - x.mean(axis=0), dimension=8, delay=3)
    vals, vecs = np.linalg.eigh(traj.T @ traj)
    order = np.argsort(vals)[::-1]
    ref = traj @ vecs[:, order[: m.n_components]]
    for r in range(m.n_components):  # eigenvectors are defined up to sign
        sign = np.sign(ref[:, r] @ m.state[:, r])
        assert_allclose(m.state[:, r], sign * ref[:, r], rtol=0, atol=1e-8)
    assert_allclose(m.eigenvalues, vals[order] / traj.shape[0], rtol=0, atol=1e-10)


def test_sinusoid_pair_holds_all_variance() -> None:
    # Analytic: a sinusoid observed in two channels is a rank-2 trajectory matrix.
    t = np.arange(600)
    x = np.column_stack([np.sin(2 * np.pi * t / 50), 2 * np.cos(2 * np.pi * t / 50)])
    m = multichannel_ssa(x, window_samples=10, lag_step=2)
    assert m.n_components == 2
    assert_allclose(m.variance_share[:2].sum(), 1.0, rtol=1e-10)
    rec = m.reconstruct(0) + m.reconstruct(1)
    assert_allclose(rec, x - x.mean(axis=0), rtol=0, atol=1e-9)


def test_multichannel_too_short() -> None:
    with pytest.raises(InsufficientDataError):
        multichannel_ssa(np.zeros((20, 2)), window_samples=10, lag_step=2)
