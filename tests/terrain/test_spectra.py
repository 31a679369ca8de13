"""Tests for measures.terrain.spectra: PSD normalisation (Parseval), moments, anisotropy."""

from __future__ import annotations

import numpy as np
import pytest
from _testing import assert_allclose

from measures import (
    InvalidParameterError,
    areal_parameters,
    profile_psd,
    psd_anisotropy,
    radial_psd,
    rms_height_from_psd,
    rms_slope_from_psd,
    surface_psd,
)
from measures.terrain._synthesis import self_affine_surface


def test_parseval_2d_no_window(rng):
    # Parseval / Jacobs, Junge & Pastewka (2017) normalisation: (2 pi)^-2 sum C dq^2 = Sq^2.
    z = rng.normal(size=(96, 128))
    p = surface_psd(z, 2e-3, 3e-3, taper="none", detrend="mean")
    dqx, dqy = 2 * np.pi / (128 * 2e-3), 2 * np.pi / (96 * 3e-3)
    sq = areal_parameters(z, 2e-3, 3e-3).Sq
    assert_allclose(p.psd.sum() * dqx * dqy / (2 * np.pi) ** 2, sq**2, rtol=1e-10)
    assert_allclose(rms_height_from_psd(p), sq, rtol=1e-10)
    assert_allclose(p.qx[1] - p.qx[0], dqx, rtol=1e-12)


def test_parseval_with_hann_window_power_correction(rng):
    # A stationary (white) surface keeps its power in expectation after the window's
    # mean(w^2) correction; 256^2 modes with chi^2 scatter -> rtol 2 %.
    z = rng.normal(size=(256, 256))
    p = surface_psd(z, 1.0, detrend="mean")
    assert_allclose(rms_height_from_psd(p) ** 2, np.mean((z - z.mean()) ** 2), rtol=0.02)


def test_profile_parseval(rng):
    # 1-D: (1/pi) integral_0^inf C dq = h_rms^2 (Jacobs et al. 2017); exact on the grid.
    for n in (200, 201):
        z = rng.normal(size=(7, n))
        p = profile_psd(z, 0.5, taper="none", detrend="mean")
        zz = z - z.mean(axis=1, keepdims=True)
        assert_allclose(rms_height_from_psd(p) ** 2, np.mean(zz**2), rtol=1e-10)
    pc = profile_psd(z, 0.5, 0.25, axis=0, taper="none", detrend="mean")
    assert pc.n_profiles == n and pc.axis == 0


def test_sinusoid_psd_slope_and_direction():
    # Analytic: z = A sin(k x) has h'_rms = k A / sqrt2 (continuous derivative) and all
    # its power on the x axis: anisotropy ratio 0, ridges (lay) along y.
    n, dx, lam = 256, 0.01, 0.32
    x = np.arange(n) * dx
    z = np.tile(0.5 * np.sin(2 * np.pi * x / lam), (64, 1))
    p = surface_psd(z, dx, taper="none", detrend="none")
    assert_allclose(rms_slope_from_psd(p), 2 * np.pi / lam * 0.5 / np.sqrt(2), rtol=1e-10)
    an = psd_anisotropy(p)
    assert_allclose(an.ratio, 0.0, atol=1e-6)
    assert_allclose(an.wavevector_direction_rad, 0.0, atol=1e-6)
    assert_allclose(an.lay_direction_rad, np.pi / 2, atol=1e-6)
    prof = profile_psd(z, dx, taper="none", detrend="none")
    assert_allclose(rms_slope_from_psd(prof), 2 * np.pi / lam * 0.5 / np.sqrt(2), rtol=1e-10)


def test_anisotropy_rotated_texture():
    # Analytic: a wave with wavevector at 30 degrees -> leading direction pi/6.
    yy, xx = np.indices((256, 256)) * 1.0
    k = 2 * np.pi / 16
    theta = np.pi / 6
    z = np.sin(k * (np.cos(theta) * xx + np.sin(theta) * yy))
    an = psd_anisotropy(surface_psd(z, 1.0))
    assert_allclose(an.wavevector_direction_rad, theta, atol=0.02)  # leakage off-grid
    assert an.ratio < 0.1


def test_self_affine_psd_slopes():
    # CHECKS G2 [ORACLE] recipe (Saupe 1988 spectral synthesis, 1024^2, H = 0.7): radial
    # PSD slope -(2 + 2H) = -3.4 and mean row PSD slope -(1 + 2H) = -2.4, ±0.05, over
    # 4/N < q/(2 pi) < 0.25 (our seed differs from the oracle's; the band holds).
    z = self_affine_surface(1024, 0.7, seed=5)
    r = radial_psd(z, 1.0, taper="none", detrend="none")
    sel = (r.q > 2 * np.pi * 4 / 1024) & (r.q < 2 * np.pi * 0.25)
    assert abs(np.polyfit(np.log(r.q[sel]), np.log(r.psd[sel]), 1)[0] + 3.4) < 0.05
    p = profile_psd(z, 1.0, taper="none", detrend="none")
    sel = (p.q > 2 * np.pi * 4 / 1024) & (p.q < 2 * np.pi * 0.25)
    assert abs(np.polyfit(np.log(p.q[sel]), np.log(p.psd[sel]), 1)[0] + 2.4) < 0.05


def test_rms_from_synthesised_spectrum():
    # CHECKS G1 test idea: a surface with a prescribed spectrum; Sq from the grid equals
    # the PSD integral; the radial average (log bins, Riemann sum) agrees within 15 %
    # once the spectrum rolls off below q_r (most power then sits in resolved bins).
    z = self_affine_surface(512, 0.8, seed=3, q_roll_px=64.0)
    p = surface_psd(z, 1.0, taper="none", detrend="none")
    assert_allclose(rms_height_from_psd(p), z.std(), rtol=1e-10)
    r = radial_psd(z, 1.0, taper="none", detrend="none")
    assert_allclose(rms_height_from_psd(r), z.std(), rtol=0.15)
    assert_allclose(rms_slope_from_psd(r), rms_slope_from_psd(p), rtol=0.15)


def test_radial_bins_log_spaced():
    r = radial_psd(np.random.default_rng(1).normal(size=(128, 128)), 1.0, bins_per_decade=8)
    ratios = r.q_edges[:, 1] / r.q_edges[:, 0]
    # Equal log widths (the first edge is nudged below the fundamental), at most 1/8 decade.
    assert_allclose(ratios[1:], ratios[1], rtol=1e-9)
    assert 10 ** (1 / 9) < ratios[1] <= 10 ** (1 / 8)
    assert r.q.max() <= np.pi and r.counts.sum() > 0.7 * 128 * 128


def test_invalid():
    with pytest.raises(InvalidParameterError):
        surface_psd(np.zeros((8, 8)), 1.0, taper="kaiser")
    with pytest.raises(InvalidParameterError):
        profile_psd(np.zeros((8, 8)), 1.0, axis=2)
