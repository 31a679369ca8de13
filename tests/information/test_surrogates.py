"""Tests for measures.information.surrogates.

Sources: the defining properties of each surrogate (Theiler et al. 1992,
Physica D 58:77: shuffles keep the values, phase randomisation keeps the
periodogram; Prichard & Theiler 1994: common phases keep cross-spectra);
CHECKS H2 (Schreiber & Schmitz 1996 IAAFT: sorted values identical, spectral
error < 0.10 for a cubed AR(1) [ORACLE]); the logistic map as a nonlinear
deterministic series and a Gaussian AR(1) as a linear one (common practice in
surrogate testing, Theiler et al. 1992).
"""

from __future__ import annotations

import numpy as np
import pytest
from _testing import assert_allclose

from measures import (
    InvalidParameterError,
    iaaft_surrogate,
    phase_surrogate,
    shuffle_surrogate,
    surrogate_test,
    surrogate_zscore,
)


def ar1(n, phi, seed):
    e = np.random.default_rng(seed).standard_normal(n)
    x = np.empty(n)
    x[0] = e[0] / np.sqrt(1 - phi**2)  # start in the stationary law
    for i in range(1, n):
        x[i] = phi * x[i - 1] + e[i]
    return x


def logistic(n, x0=0.3141):
    x = np.empty(n)
    x[0] = x0
    for i in range(1, n):
        x[i] = 4 * x[i - 1] * (1 - x[i - 1])
    return x


def time_asymmetry(v):
    """Skewness of increments: zero in expectation for time-reversible processes."""
    d = np.diff(v)
    return float(np.mean(d**3) / np.mean(d**2) ** 1.5)


def test_shuffle_keeps_values(rng):
    x = rng.standard_normal(500)
    s = shuffle_surrogate(x, seed=1)
    assert np.array_equal(np.sort(s), np.sort(x)) and not np.array_equal(s, x)
    field = rng.standard_normal((20, 30))
    sf = shuffle_surrogate(field, seed=1)
    assert sf.shape == field.shape and np.array_equal(np.sort(sf.ravel()), np.sort(field.ravel()))
    multi = rng.standard_normal((100, 3))
    sm = shuffle_surrogate(multi, seed=1, multichannel=True)
    # Whole time points move together: the set of rows is unchanged.
    assert_allclose(np.sort(sm[:, 0]), np.sort(multi[:, 0]))
    assert_allclose(sm[:, 1][np.argsort(sm[:, 0])], multi[:, 1][np.argsort(multi[:, 0])])


@pytest.mark.parametrize("n", [512, 513])
def test_phase_surrogate_keeps_periodogram(n):
    # Theiler et al. (1992), algorithm 1: |FFT| unchanged, incl. Nyquist (even n).
    x = ar1(n, 0.8, seed=2)
    s = phase_surrogate(x, seed=3)
    assert s.dtype == np.float64 and s.shape == x.shape
    assert_allclose(np.abs(np.fft.fft(s)), np.abs(np.fft.fft(x)), rtol=1e-9, atol=1e-9)
    assert_allclose(s.mean(), x.mean(), atol=1e-12)
    assert not np.allclose(s, x)


def test_phase_surrogate_multichannel_keeps_cross_spectrum(rng):
    # Prichard & Theiler (1994): the same phases in every channel keep
    # X_i(f) conj(X_j(f)), hence all auto- and cross-correlations.
    base = ar1(1024, 0.9, seed=5)
    multi = np.column_stack([base, np.roll(base, 3) + 0.3 * rng.standard_normal(1024)])
    s = phase_surrogate(multi, seed=6, multichannel=True)
    fx, fs = np.fft.rfft(multi, axis=0), np.fft.rfft(s, axis=0)
    assert_allclose(fs[:, 0] * np.conj(fs[:, 1]), fx[:, 0] * np.conj(fx[:, 1]), atol=1e-8)


@pytest.mark.parametrize("shape", [(64, 48), (33, 47)])
def test_phase_surrogate_2d_keeps_power_spectrum(shape, rng):
    # 2D version for surfaces: Hermitian symmetry must hold for a real output,
    # and the 2D power spectrum must be unchanged.
    z = np.cumsum(np.cumsum(rng.standard_normal(shape), axis=0), axis=1)
    s = phase_surrogate(z, seed=7)
    assert np.isrealobj(s) and s.shape == z.shape
    assert_allclose(np.abs(np.fft.fft2(s)), np.abs(np.fft.fft2(z)), rtol=1e-8, atol=1e-8)
    assert_allclose(s.mean(), z.mean(), rtol=1e-10)


def test_iaaft_cubed_ar1():
    # CHECKS H2: AR(1) phi = 0.9, N = 4096, cubed, 200 iterations, ending on
    # the rank-order step. The spectral error depends on the realisation
    # (heavy tails of the cube); this seed gives about 0.05.
    x = ar1(4096, 0.9, seed=0) ** 3
    s, errors = iaaft_surrogate(x, seed=0, max_iter=200, return_errors=True)
    assert np.array_equal(np.sort(s), np.sort(x))  # bit for bit
    assert errors[-1] < 0.10
    # The error is non-increasing over iterations (up to convergence noise).
    assert np.all(np.diff(errors) <= 1e-6 * errors[:-1])
    assert_allclose(
        errors[-1],
        np.linalg.norm(np.abs(np.fft.rfft(s)) - np.abs(np.fft.rfft(x)))
        / np.linalg.norm(np.abs(np.fft.rfft(x))),
    )


def test_iaaft_2d_and_multichannel(rng):
    z = np.cumsum(rng.standard_normal((48, 40)), axis=1) ** 2
    s, err = iaaft_surrogate(z, seed=1, return_errors=True)
    assert np.array_equal(np.sort(s.ravel()), np.sort(z.ravel()))
    assert err[-1] < 0.10
    multi = np.column_stack([ar1(2048, 0.9, seed=3), ar1(2048, 0.5, seed=4)])
    multi[:, 1] += multi[:, 0]
    multi = multi**3
    sm, em = iaaft_surrogate(multi, seed=2, multichannel=True, return_errors=True)
    assert np.array_equal(np.sort(sm, axis=0), np.sort(multi, axis=0))
    assert em[-1] < 0.15
    # Relative phases are kept, so the cross-correlation survives
    # (Schreiber & Schmitz 2000); an independent shuffle would give ~0.
    c_orig = np.corrcoef(multi.T)[0, 1]
    assert abs(np.corrcoef(sm.T)[0, 1] - c_orig) < 0.1 * abs(c_orig)


def test_seeding_is_deterministic():
    x = ar1(256, 0.5, seed=1)
    for make in (shuffle_surrogate, phase_surrogate, iaaft_surrogate):
        assert np.array_equal(make(x, seed=4), make(x, seed=4))
        assert not np.array_equal(make(x, seed=4), make(x, seed=5))
        g1, g2 = np.random.default_rng(9), np.random.default_rng(9)
        assert np.array_equal(make(x, rng=g1), make(x, rng=g2))


def test_surrogate_test_flags_nonlinear_not_linear():
    # Logistic map (deterministic, time-irreversible) vs Gaussian AR(1)
    # (linear, time-reversible): IAAFT surrogates are reversible, so the
    # increment skewness separates them (Theiler et al. 1992, common practice).
    nonlinear = surrogate_test(time_asymmetry, logistic(1024), n_surrogates=39, seed=1)
    assert nonlinear.p_value <= 0.05 and abs(nonlinear.z_score) > 3
    linear = surrogate_test(time_asymmetry, ar1(1024, 0.7, seed=2), n_surrogates=39, seed=1)
    assert linear.p_value > 0.05 and abs(linear.z_score) < 2
    assert nonlinear.surrogate_values.shape == (39,)


def test_surrogate_test_on_a_surface(rng):
    # A skewed field vs Gaussian phase surrogates: skewness is flagged.
    z = rng.standard_normal((32, 32)) ** 2

    def skew(a):
        d = a - a.mean()
        return float(np.mean(d**3) / np.mean(d**2) ** 1.5)

    res = surrogate_test(skew, z, kind="phase", n_surrogates=19, alternative="greater")
    assert_allclose(res.p_value, 1 / 20)  # the smallest one-sided p with 19


def test_rank_p_value_with_ties():
    # Shuffles keep the values, so max() is the same on every surrogate: all
    # tie with the data, both one-sided p = 1, two-sided p = 1.
    res = surrogate_test(np.max, np.arange(50.0), kind="shuffle", n_surrogates=9)
    assert res.p_value == 1.0 and np.isnan(res.z_score)


def test_bad_parameters():
    x = np.arange(20.0)
    with pytest.raises(InvalidParameterError):
        surrogate_test(np.mean, x, kind="wavelet")
    with pytest.raises(InvalidParameterError):
        surrogate_test(np.mean, x, alternative="both")
    with pytest.raises(InvalidParameterError):
        phase_surrogate(np.arange(10.0), multichannel=True)


@pytest.mark.parametrize("shape", [(64, 48), (33, 47), (32, 33), (31, 32)])
def test_batched_phase_surrogates_keep_the_spectrum(shape, rng):
    # Theiler et al. (1992) algorithm 1 in 2D: every surrogate drawn by the
    # batched path (one forward FFT for all, phases drawn on the half-plane,
    # one inverse FFT each) keeps |X(k)| exactly and the mean; odd and even
    # sides exercise every self-conjugate line.
    z = np.cumsum(np.cumsum(rng.standard_normal(shape), axis=0), axis=1)
    amp = np.abs(np.fft.fft2(z))
    seen = []

    def spectrum_error(a):
        assert np.isrealobj(a) and a.shape == z.shape
        seen.append(a)
        return float(np.max(np.abs(np.abs(np.fft.fft2(a)) - amp)) / amp.max())

    res = surrogate_test(spectrum_error, z, kind="phase", n_surrogates=5, seed=3)
    assert np.all(res.surrogate_values < 1e-12)
    assert all(not np.allclose(a, z) for a in seen[1:])
    assert len({a.tobytes() for a in seen[1:]}) == 5  # five different draws


def test_phase_surrogate_matches_white_noise_phase_law(rng):
    # The angles are uniform on the circle (the law of the phases of a
    # white-noise transform, Theiler et al. 1992): mean resultant length
    # ~ 1/sqrt(n) over many bins.
    x = rng.standard_normal(4096)
    s = phase_surrogate(x, seed=11)
    rel = np.fft.rfft(s)[1:-1] / np.fft.rfft(x)[1:-1]
    assert abs(np.mean(rel / np.abs(rel))) < 4 / np.sqrt(rel.size)


def test_multichannel_iaaft_zscore_keeps_cross_correlation():
    # Multichannel IAAFT (Schreiber & Schmitz 1996, 2000): one phase rotation
    # per frequency for all channels keeps the relative phases, so a lagged
    # cross-correlation is reproduced by the surrogates, while time-point
    # shuffles destroy it -- Prichard & Theiler (1994). (The surrogates vary
    # so little that a z-score of the kept statistic is not a stable check;
    # the means are.)
    a = ar1(4096, 0.95, seed=8)
    b = np.roll(a, 5) + 0.5 * ar1(4096, 0.5, seed=9)
    multi = np.column_stack([a, b]) ** 3

    def lagged_corr(m):
        return float(np.corrcoef(m[:-5, 0], m[5:, 1])[0, 1])

    kept = surrogate_zscore(lagged_corr, multi, n_surrogates=9, method="iaaft", multichannel=True)
    lost = surrogate_zscore(lagged_corr, multi, n_surrogates=9, method="shuffle", multichannel=True)
    assert abs(kept.surrogate_mean - kept.value) < 0.01 * kept.value
    assert abs(lost.surrogate_mean) < 0.1 and abs(lost.z_score) > 10
    assert kept.kind == "iaaft" and kept.n_surrogates == 9


def test_surrogate_zscore_bad_method():
    with pytest.raises(InvalidParameterError):
        surrogate_zscore(np.mean, np.arange(20.0), method="wavelet")


def test_iaaft_iteration_cap_is_passed_on():
    # One iteration ends on the rank-order step too: the values are kept bit
    # for bit (Schreiber & Schmitz 1996), whatever the cap.
    x = ar1(512, 0.8, seed=4) ** 3
    seen = []

    def sorted_equal(a):
        seen.append(a)
        return float(np.array_equal(np.sort(a), np.sort(x)))

    res = surrogate_zscore(sorted_equal, x, n_surrogates=3, max_iter=1)
    assert np.all(res.surrogate_values == 1.0)
    with pytest.raises(InvalidParameterError):
        surrogate_zscore(np.mean, x, max_iter=0)
