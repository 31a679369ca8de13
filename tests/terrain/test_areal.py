"""Tests for measures.terrain.areal: ISO 25178-2 parameters and the Gaussian filters."""

from __future__ import annotations

import numpy as np
import pytest
from _testing import assert_allclose
from scipy import ndimage
from scipy.special import ellipe

from measures import (
    InvalidParameterError,
    areal_parameters,
    bandpass_surface,
    gaussian_filter_surface,
)

A, LAM, DX = 1.0, 10.0, 0.1  # CHECKS F1 input: 100 px per wavelength


@pytest.fixture(scope="module")
def sinusoid():
    x = np.arange(1000) * DX
    return np.tile(A * np.sin(2 * np.pi * x / LAM), (200, 1))


def test_sinusoid_height_parameters(sinusoid):
    # CHECKS F1 [ANALYTIC]: Sq = A/sqrt2, Ssk = 0, Sku = 3/2, Sp = Sv = A, Sz = 2A.
    p = areal_parameters(sinusoid, DX)
    assert_allclose(p.Sq, A / np.sqrt(2), rtol=1e-12)
    assert_allclose(p.Ssk, 0.0, atol=1e-12)
    assert_allclose(p.Sku, 1.5, rtol=1e-12)
    assert_allclose([p.Sp, p.Sv, p.Sz], [A, A, 2 * A], rtol=1e-12)
    # Sa = 2A/pi; sampled at 100 px per period the grid value is 0.63641 (F1 [ORACLE]):
    # 3.3e-4 relative sampling deficit, hence rtol 5e-4.
    assert_allclose(p.Sa, 2 * A / np.pi, rtol=5e-4)


def test_sinusoid_sdq_with_central_difference_factor(sinusoid):
    # CHECKS F1 [ANALYTIC]: Sdq = 2 pi A / (lambda sqrt2), times sin(kh)/(kh) for
    # central differences (interior); np.gradient's one-sided edge columns add ~1e-5.
    k = 2 * np.pi / LAM
    expected = k * A / np.sqrt(2) * np.sin(k * DX) / (k * DX)
    assert_allclose(areal_parameters(sinusoid, DX).Sdq, expected, rtol=1e-4)
    assert_allclose(expected, 0.443995, rtol=5e-6)  # CHECKS F1 [ORACLE], 6 digits given


def test_sinusoid_sdr_exact_elliptic(sinusoid):
    # CHECKS F1 [ANALYTIC]: Sdr = (2/pi) sqrt(1+k^2) E(k^2/(1+k^2)) - 1 = 0.092384 for
    # A=1, lambda=10; the grid value 0.092269 is low by the same central-difference
    # attenuation (F1 [ORACLE]), so rtol 2e-3.
    k = 2 * np.pi * A / LAM
    exact = 2 / np.pi * np.sqrt(1 + k**2) * ellipe(k**2 / (1 + k**2)) - 1
    assert_allclose(exact, 0.092384, rtol=1e-5)
    assert_allclose(areal_parameters(sinusoid, DX).Sdr, exact, rtol=2e-3)


def test_gaussian_random_surface_moments(rng):
    # CHECKS F3 [ANALYTIC]: Ssk = 0, Sku = 3, Sa/Sq = sqrt(2/pi); tolerances for 1024^2
    # i.i.d. from F3 (Ssk ±0.01, Sku ±0.02, Sa/Sq ±0.002).
    z = rng.normal(size=(1024, 1024))
    p = areal_parameters(z, 1e-3)
    assert abs(p.Ssk) < 0.01
    assert abs(p.Sku - 3.0) < 0.02
    assert abs(p.Sa / p.Sq - np.sqrt(2 / np.pi)) < 0.002


def test_flat_noisy_plane_sq_equals_noise(rng):
    # Analytic: a flat plane plus i.i.d. noise of std sigma has Sq = sigma (n = 512^2,
    # standard error of the std ~ sigma / sqrt(2n) = 1e-3 relative, so rtol 5e-3).
    sigma = 2e-4  # 0.2 mm scanner noise, common practice for small-animal arenas
    z = 0.05 + rng.normal(scale=sigma, size=(512, 512))
    assert_allclose(areal_parameters(z, 1e-3).Sq, sigma, rtol=5e-3)


def test_tilted_plane_levelled(rng):
    # Analytic: a tilted plane has zero height and zero slope once the plane is removed.
    yy, xx = np.indices((128, 160)) * 1e-3
    z = 0.3 * xx - 0.2 * yy + 0.01
    p = areal_parameters(z, 1e-3, detrend="plane")
    assert_allclose([p.Sq, p.Sdq, p.Sdr], [0.0, 0.0, 0.0], atol=1e-12)
    # With only the mean removed the tilt remains: Sdq = |grad| = sqrt(0.3^2 + 0.2^2).
    assert_allclose(areal_parameters(z, 1e-3).Sdq, np.hypot(0.3, 0.2), rtol=1e-10)


def test_sal_str_gaussian_correlated_field(rng):
    # Analytic: white noise smoothed by a Gaussian kernel of std s_x, s_y (cells) has
    # ACF exp(-tx^2/(4 s_x^2) - ty^2/(4 s_y^2)); it falls to s=0.2 (ISO 25178-2 default)
    # at t = 2 s sqrt(ln 5). Sal is the shorter length, Str their ratio. Finite-sample
    # ACF scatter over 1024^2 cells and ~40 correlation areas per side: rtol 5 %.
    sx, sy = 4.0, 8.0
    z = ndimage.gaussian_filter(rng.normal(size=(1024, 1024)), (sy, sx), mode="wrap")
    p = areal_parameters(z, 1.0)
    assert_allclose(p.Sal, 2 * sx * np.sqrt(np.log(5)), rtol=0.05)
    assert_allclose(p.Str, sx / sy, rtol=0.05)
    assert not p.str_is_upper_bound


def test_sal_sinusoid_and_str_upper_bound():
    # Analytic: ACF of a sinusoid is cos(2 pi t / lambda): Sal = lambda acos(0.2) / (2 pi).
    # 20 px per wavelength, 50 periods: finite-overlap error ~ 1/(n k dx) ~ 0.3 %.
    x = np.arange(1000) * 0.1
    z = np.tile(np.sin(2 * np.pi * x / 2.0), (100, 1))
    p = areal_parameters(z, 0.1)
    assert_allclose(p.Sal, 2.0 * np.arccos(0.2) / (2 * np.pi), rtol=5e-3)
    # Along the ridges the ACF never decays: Str is only an upper bound and is small.
    assert p.str_is_upper_bound and p.Str < 0.1


def test_mask_ignores_holes(rng):
    # Property: values written into masked-out cells do not change any parameter.
    z = rng.normal(size=(128, 128))
    valid = np.ones(z.shape, bool)
    valid[40:60, 30:90] = False
    a = areal_parameters(z, 1.0, valid=valid)
    z2 = z.copy()
    z2[~valid] = 1e3
    b = areal_parameters(z2, 1.0, valid=valid)
    assert_allclose([a.Sq, a.Sdq, a.Sp, a.Sal], [b.Sq, b.Sdq, b.Sp, b.Sal], rtol=1e-12)
    z3 = z.copy()
    z3[~valid] = np.nan  # NaN cells are holes too
    assert_allclose(areal_parameters(z3, 1.0).Sq, a.Sq, rtol=1e-12)
    assert a.n_valid == valid.sum()


def test_gaussian_filter_transmission_at_cutoff():
    # ISO 16610-61 (common practice): 50 % amplitude transmission at the cut-off,
    # exp(-pi (alpha lambda_c / lambda)^2) elsewhere, alpha = sqrt(ln2/pi).
    n, dx = 1024, 1e-3
    x = np.arange(n) * dx
    alpha = np.sqrt(np.log(2) / np.pi)
    for lam in (0.016, 0.032, 0.064):
        z = np.tile(np.sin(2 * np.pi * x / lam), (4, 1))
        low = gaussian_filter_surface(z, dx, cutoff_m=0.032)
        gain = np.abs(low[2, 256:768]).max()
        # Mirror padding keeps a tiny edge leakage into the interior: atol 2e-3.
        assert_allclose(gain, np.exp(-np.pi * (alpha * 0.032 / lam) ** 2), atol=2e-3)
        high = gaussian_filter_surface(z, dx, cutoff_m=0.032, kind="highpass")
        assert_allclose(high + low, z, rtol=0, atol=1e-12)


def test_band_restriction_removes_long_wave():
    # Analytic: a long wave (lambda = 0.5 m) far above the band's upper cut-off (0.05 m)
    # passes the L-filter with weight 1 - exp(-pi (alpha 0.05/0.5)^2) = 0.0069, and an
    # in-band wave (0.01 m) is kept with gain 0.983 * 0.997 (ISO 16610-61 transmission).
    n, dx = 2048, 5e-4
    x = np.arange(n) * dx
    short = 1e-3 * np.sin(2 * np.pi * x / 0.01)
    z = np.tile(0.02 * np.sin(2 * np.pi * x / 0.5) + short, (8, 1))
    zb = bandpass_surface(z, dx, band_m=(0.002, 0.05))
    interior = slice(400, n - 400)
    resid = zb[4, interior] - short[interior]
    assert np.abs(resid).max() < 0.02 * 0.01 + 1e-3 * 0.025
    p = areal_parameters(z, dx, band_m=(0.002, 0.05))
    assert_allclose(p.Sq, 1e-3 / np.sqrt(2), rtol=0.05)  # edge cells widen it: 5 %


def test_invalid_parameters():
    z = np.zeros((16, 16))
    with pytest.raises(InvalidParameterError):
        areal_parameters(z, -1.0)
    with pytest.raises(InvalidParameterError):
        areal_parameters(z, 1.0, detrend="quadric")
    with pytest.raises(InvalidParameterError):
        bandpass_surface(z, 1.0, band_m=(5.0, 1.0))
    with pytest.raises(InvalidParameterError):
        areal_parameters(z, 1.0, valid=np.ones((3, 3), bool))
