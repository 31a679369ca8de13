"""Tests for measures.information.sampen.

Sources: Richman & Moorman (2000) for the definition; the white-noise value
-ln erf(r / (2 sigma)) (CHECKS C1 [ANALYTIC]); antropy 0.2.3 and nolds 0.6.2 as
general-purpose reference implementations (CHECKS C1 [ORACLE]); Costa et al.
(2002), Phys. Rev. Lett. 89:068102, Fig. 1, for the multiscale trends.
"""

from __future__ import annotations

import math

import antropy
import nolds
import numpy as np
import pytest
from _testing import assert_allclose

from measures import InvalidParameterError, multiscale_entropy, sample_entropy

SAMPEN_WHITE = -math.log(math.erf(0.1))  # 2.18513 nats, CHECKS C1 [ANALYTIC]


def naive_sampen(x, m, r_abs):
    """O(N^2) reference straight from Richman & Moorman (2000)."""
    n = x.size - m
    t = np.column_stack([x[i : i + n] for i in range(m + 1)])
    d = np.abs(t[:, None, :] - t[None, :, :])
    upper = np.triu(np.ones((n, n), dtype=bool), 1)
    b = np.sum((d[:, :, :m].max(axis=2) <= r_abs) & upper)
    a = np.sum((d.max(axis=2) <= r_abs) & upper)
    return -math.log(a / b)


def test_white_noise_analytic():
    # CHECKS C1: seed 12345, N = 5000 gives 2.1880 in antropy/nolds; tolerance
    # +-0.03 at N = 5000 (CHECKS C1).
    x = np.random.default_rng(12345).standard_normal(5000)
    assert abs(sample_entropy(x) - SAMPEN_WHITE) < 0.03
    y = np.random.default_rng(7).standard_normal(20_000)
    assert abs(sample_entropy(y) - SAMPEN_WHITE) < 0.02  # CHECKS C1, N = 20000


@pytest.mark.parametrize("n", [1000, 5000])
def test_agrees_with_reference_libraries(n):
    # antropy.sample_entropy (order 2, r = 0.2 * SD with ddof = 0, Chebyshev)
    # and nolds.sampen count the same pairs, so the values agree exactly up to
    # float round-off (CHECKS C1: "agree to 4 d.p.").
    x = np.random.default_rng(12345).standard_normal(n)
    ours = sample_entropy(x)
    assert_allclose(ours, antropy.sample_entropy(x, order=2), rtol=1e-12)
    if n <= 1000:  # nolds counts pairs in O(N^2) Python-level numpy; keep it small
        ref = nolds.sampen(x, emb_dim=2, tolerance=0.2 * np.std(x))
        assert_allclose(ours, ref, rtol=1e-12)


def test_ddof_one_matches_nolds_with_sample_sd():
    x = np.random.default_rng(3).standard_normal(1000)
    ref = nolds.sampen(x, emb_dim=2, tolerance=0.2 * np.std(x, ddof=1))
    assert_allclose(sample_entropy(x, ddof=1), ref, rtol=1e-12)


@pytest.mark.parametrize(("m", "r"), [(1, 0.15), (2, 0.2), (3, 0.3)])
def test_matches_naive_definition(m, r):
    x = np.cumsum(np.random.default_rng(m).standard_normal(400))
    assert_allclose(sample_entropy(x, m=m, r=r), naive_sampen(x, m, r * np.std(x)), rtol=1e-12)


def test_undefined_cases():
    # A period-2 series: every template matches its twins, SampEn = 0 exactly.
    assert sample_entropy(np.tile([0.0, 1.0], 200)) == 0.0
    # Widely spread values with tiny r: no match at all -> NaN (documented).
    assert math.isnan(sample_entropy(np.arange(50.0) ** 3, r=1e-6))
    with pytest.raises(InvalidParameterError):
        sample_entropy(np.ones(100))
    with pytest.raises(InvalidParameterError):
        sample_entropy(np.random.default_rng(0).standard_normal(100), r=0)


def test_multiscale_white_noise_follows_analytic_curve():
    # Coarse-grained white noise at scale tau is i.i.d. Gaussian with SD
    # sigma / sqrt(tau), and r stays 0.2 sigma, so SampEn = -ln erf(0.1 sqrt(tau))
    # [ANALYTIC, CHECKS C1 formula applied per scale]; it falls with scale
    # (Costa et al. 2002, Fig. 1).
    x = np.random.default_rng(12345).standard_normal(20_000)
    mse = multiscale_entropy(x, scales=range(1, 11))
    expected = [-math.log(math.erf(0.1 * math.sqrt(s))) for s in range(1, 11)]
    # 3 sd at N/tau points: sd ~ 0.027 at N = 1000 (CHECKS C1 band +-0.08).
    tolerance = 0.08 * np.sqrt(1000 / (20_000 / mse.scales))
    assert np.all(np.abs(mse.sample_entropy - expected) < np.maximum(tolerance, 0.02))
    assert np.all(np.diff(mse.sample_entropy) < 0)
    assert_allclose(mse.tolerance, 0.2 * np.std(x))


def test_multiscale_pink_noise_stays_flat():
    # Costa et al. (2002), Fig. 1: 1/f noise keeps roughly constant entropy
    # across scales, white noise loses it.
    rng = np.random.default_rng(12345)
    n = 20_000
    freq = np.fft.rfftfreq(n)
    spec = np.fft.rfft(rng.standard_normal(n))
    spec[1:] /= np.sqrt(freq[1:])
    spec[0] = 0.0
    pink = np.fft.irfft(spec, n)
    mse = multiscale_entropy(pink, scales=range(1, 11)).sample_entropy
    white = multiscale_entropy(rng.standard_normal(n), scales=range(1, 11)).sample_entropy
    assert np.ptp(mse[2:]) < 0.15  # flat within estimation noise
    assert white[0] - white[-1] > 1.0 > abs(mse[0] - mse[-1])
