"""Tests for measures.dynamics.embedding against published and analytic values (CHECKS.md E3-E5)."""

from __future__ import annotations

import numpy as np
import pytest
from _testing import assert_allclose
from scipy.integrate import solve_ivp

from measures import (
    average_mutual_information,
    cao_embedding,
    delay_embed,
    embedding_dimension,
    false_nearest_neighbours,
    first_ami_minimum,
    singular_spectrum,
)


@pytest.fixture(scope="module")
def lorenz_x() -> np.ndarray:
    """Lorenz x (sigma 10, rho 28, beta 8/3), IC (1,1,1), dt 0.01, t >= 50 kept.

    The recipe of CHECKS.md section E (DOP853); 20,000 samples.
    """

    def f(_t, s):
        x, y, z = s
        return [10.0 * (y - x), x * (28.0 - z) - y, x * y - 8.0 / 3.0 * z]

    t = np.arange(0, 250.0, 0.01)
    sol = solve_ivp(f, (0, t[-1]), [1.0, 1.0, 1.0], t_eval=t, method="DOP853",
                    rtol=1e-10, atol=1e-12)  # fmt: skip
    return sol.y[0][t >= 50][:20000]


def test_delay_embed_layout():
    # Definition (Takens 1981): row t = (x_t, x_{t+tau}, ...).
    x = np.arange(10.0)
    e = delay_embed(x, dimension=3, delay=2)
    assert e.shape == (6, 3)
    assert_allclose(e[0], [0, 2, 4])
    multi = delay_embed(np.column_stack([x, -x]), dimension=2, delay=3)
    assert_allclose(multi[1], [1, -1, 4, -4])


def test_ami_first_minimum_lorenz(lorenz_x):
    # CHECKS E3 (Fraser & Swinney 1986 [MEMORY]; literature spread 10-17
    # samples at dt = 0.01, 32-bin oracle gives 17): assert [10, 20].
    lag = first_ami_minimum(lorenz_x, max_lag=60, n_bins=32)
    assert 10 <= lag <= 20


def test_ami_lag_zero_is_entropy_and_independent_is_zero(rng):
    # Analytic: I(X;X) = H(X); i.i.d. uniform with 8 bins: H = 3 bits and
    # I(x_t; x_{t+1}) = 0 up to the plug-in bias (K-1)^2 / (2 N ln 2) bits
    # (Miller 1955 [MEMORY]), 49 / (2e5 * ln 2) = 3.5e-4 here.
    x = rng.random(100_000)
    res = average_mutual_information(x, max_lag=2, n_bins=8)
    assert abs(res.ami[0] - 3.0) < 1e-3
    assert res.ami[1] < 1.5e-3


def test_fnn_lorenz_dimension_three(lorenz_x):
    # CHECKS E4 (Kennel et al. 1992; Lorenz minimum dimension 3 [CONFIRMED]):
    # FNN(3) < 0.01 and FNN(2) > 0.01 with R_tol 15, A_tol 2, tau 17.
    res = false_nearest_neighbours(lorenz_x, delay=17, max_dim=4)
    assert res.fraction[2] < 0.01
    assert res.fraction[1] > 0.01
    assert res.fraction[0] > 0.5  # oracle 0.994 for d = 1
    assert embedding_dimension(lorenz_x, delay=17, max_dim=6) == 3


def test_cao_lorenz_jump_between_two_and_three(lorenz_x):
    # CHECKS E5 (Cao 1997 [MEMORY]; oracle E1 = 0.19, 0.915 for d = 2, 3):
    # E1(3) > 0.85 and E1(2) < 0.5.
    res = cao_embedding(lorenz_x, delay=17, max_dim=5)
    assert res.e1[2] > 0.85
    assert res.e1[1] < 0.5
    assert embedding_dimension(lorenz_x, delay=17, max_dim=6, method="cao") == 3


def test_cao_e2_near_one_for_noise(rng):
    # Cao 1997 [MEMORY, CHECKS E5]: E2(d) ~ 1 for every d on random data.
    res = cao_embedding(rng.normal(size=5000), delay=1, max_dim=4)
    assert np.all(np.abs(res.e2 - 1) < 0.1)


def test_ssa_two_sinusoids(rng):
    # Analytic: a sinusoid of amplitude A (period dividing the window L) has
    # variance A^2/2 and fills one
    # eigenvalue pair of the lag covariance, so the pair's eigenvalues sum to
    # L * A^2 / 2 (plus 2 sigma^2 of white noise, sigma^2 per eigenvalue).
    n, window = 4000, 40
    t = np.arange(n)
    a1, a2, sigma = 2.0, 1.0, 0.1
    x = a1 * np.sin(2 * np.pi * t / 10) + a2 * np.sin(2 * np.pi * t / 20 + 0.4)
    x = x + rng.normal(scale=sigma, size=n)
    ssa = singular_spectrum(x, window_samples=window, variance_fraction=0.95)
    lam = ssa.eigenvalues
    # Tolerance 2 %: finite window leakage and noise-sample variance.
    assert_allclose(lam[0] + lam[1], window * (a1**2 / 2 + 2 * sigma**2 / window), rtol=0.02)
    assert_allclose(lam[2] + lam[3], window * (a2**2 / 2 + 2 * sigma**2 / window), rtol=0.02)
    total = a1**2 / 2 + a2**2 / 2 + sigma**2
    assert_allclose(ssa.variance_share[:2].sum(), (a1**2 / 2) / total, rtol=0.02)
    assert ssa.n_components == 4
    # Diagonal averaging is linear, so the components sum to the centred series.
    assert_allclose(ssa.components.sum(axis=0), x - x.mean(), rtol=0, atol=1e-9)
