"""Tests for measures.terrain.summary: gradient entropy, hillshade, terrain_summary."""

from __future__ import annotations

import numpy as np
import pytest
from _testing import assert_allclose

from measures import (
    TERRAIN_DEFAULTS,
    InvalidParameterError,
    Score,
    gradient_entropy,
    hillshade,
    terrain_summary,
)
from measures.terrain._synthesis import self_affine_surface

EXPECTED_NAMES = {
    "sq_m",
    "sa_m",
    "ssk",
    "sku",
    "sdq",
    "sdr",
    "sal_m",
    "str",
    "hurst_psd",
    "fractal_dimension_psd",
    "hurst_variogram",
    "hurst_madogram",
    "hurst_boxcount",
    "slope_entropy_bits",
    "aspect_entropy_bits",
    "permutation_entropy_2d",
    "js_complexity_2d",
    "entropy_density_2d_bits",
    "excess_entropy_2d_bits",
}


def test_gradient_entropy_uniform_aspect():
    # Analytic: a cone z = -r has slope 45 degrees everywhere (one slope bin, entropy ~0)
    # and aspect uniform over 360 degrees: 36 equal 10-degree bins -> log2(36) bits, up to
    # the grid's discretisation of directions (0.05 bit).
    yy, xx = np.indices((401, 401)) - 200.0
    z = -np.hypot(xx, yy)
    g = gradient_entropy(z, 1.0, slope_bin_deg=2.0)
    assert_allclose(g.aspect_entropy_bits, np.log2(36), atol=0.05)
    assert g.slope_entropy_bits < 0.3  # the apex and edge cells only


def test_gradient_entropy_plane_and_floor(rng):
    # A plane tilted 30.5 degrees (mid-bin) towards -x: aspect 180 deg; both entropies 0.
    _yy, xx = np.indices((64, 64)) * 1e-3
    z = np.tan(np.radians(30.5)) * xx
    g = gradient_entropy(z, 1e-3)
    assert g.slope_entropy_bits == 0.0 and g.aspect_entropy_bits == 0.0
    assert g.aspect_counts.argmax() == 18 and g.slope_counts.argmax() == 30
    # Below the slope floor no cell has an aspect: NaN, never a silent 0.
    flat = gradient_entropy(1e-9 * rng.normal(size=(32, 32)), 1e-3)
    assert np.isnan(flat.aspect_entropy_bits) and flat.n_aspect_cells == 0


def test_hillshade_lambert():
    # Lambert's cosine law: a plane facing the light exactly is fully lit.
    az, alt = np.radians(135.0), np.radians(45.0)
    yy, xx = np.indices((16, 16)) * 1.0
    # Normal (-gx, -gy, 1) parallel to the light direction.
    lx, ly, lz = np.cos(alt) * np.cos(az), np.cos(alt) * np.sin(az), np.sin(alt)
    z = -(lx / lz) * xx - (ly / lz) * yy
    assert_allclose(hillshade(z, 1.0), 1.0, rtol=1e-12)
    assert hillshade(np.zeros((600, 300)), 1.0, max_px=256).shape == (200, 100)  # 3 x 3 blocks


@pytest.fixture(scope="module")
def summary():
    z = self_affine_surface(256, 0.7, seed=4, rms_m=1e-3)
    return terrain_summary(z, 1e-3)


def test_summary_scores_and_arrays(summary):
    names = {s.name for s in summary.scores}
    assert names >= EXPECTED_NAMES
    assert all(isinstance(s, Score) for s in summary.scores)
    assert summary.score("sq_m").unit == "m"
    # Surrogate z-score from 2-D phase randomisation (Theiler et al. 1992) is attached.
    z_perm = summary.score("permutation_entropy_2d").surrogate_z
    assert z_perm is not None and np.isfinite(z_perm)
    assert summary.params == TERRAIN_DEFAULTS
    assert summary.hillshade.ndim == 2 and summary.radial_q.size == summary.radial_psd.size
    assert summary.fit_q.size >= 5 and summary.slope_counts.sum() == 256 * 256
    # CHECKS G2 tolerance on the PSD estimator (256^2: ±0.06, fewer modes per bin).
    assert abs(summary.score("hurst_psd").value - 0.7) < 0.06
    assert summary.score("fractal_dimension_psd").value == pytest.approx(
        3 - summary.score("hurst_psd").value
    )


def test_summary_band_removes_long_wave():
    # Analytic (ISO 16610-61 transmission): a 0.256 m wave far above the 0.02 m upper
    # cut-off passes with weight 1 - exp(-ln2 (0.02/0.256)^2) = 0.0042, so Sq is that of
    # the in-band 4 mm wave alone (A / sqrt2, within 5 %: edge cells, 0.6 % leakage).
    n, dx = 512, 5e-4
    x = np.arange(n) * dx
    z = np.tile(
        0.002 * np.sin(2 * np.pi * x / 0.256) + 2e-4 * np.sin(2 * np.pi * x / 0.004), (64, 1)
    )
    s = terrain_summary(
        z, dx, band_m=(0.001, 0.02), params={"hurst_methods": ["madogram"], "surrogate_scores": []}
    )
    assert_allclose(s.score("sq_m").value, 2e-4 / np.sqrt(2), rtol=0.05)
    assert s.band_m == (0.001, 0.02)


def test_unknown_parameter_rejected():
    with pytest.raises(InvalidParameterError):
        terrain_summary(np.zeros((32, 32)), 1.0, params={"colour": "red"})


def test_real_dem_end_to_end():
    # Open data shipped by matplotlib: the Jacksboro fault DEM (3 arc-second grid, heights
    # in m). Spacing converted from degrees with 111.2 km per degree of latitude (as
    # matplotlib's own shading example does). Natural topography is often quoted with
    # H ~ 0.5-0.9 (from memory; e.g. Turcotte 1997, "Fractals and Chaos in Geology and
    # Geophysics"). The madogram (Gneiting et al. 2012's recommendation) must fall in
    # 0.4-0.9. The PSD estimate over the automatic band is looser (this ridge-and-valley
    # relief has a dominant ridge spacing that bends the spectrum): 0.15-1.0.
    cbook = pytest.importorskip("matplotlib.cbook")
    with np.load(
        cbook.get_sample_data("jacksboro_fault_dem.npz", asfileobj=False), allow_pickle=False
    ) as dem:
        z = dem["elevation"].astype(float)
        dy = 111_200.0 * float(dem["dy"])
        dx = 111_200.0 * float(dem["dx"]) * np.cos(np.radians(float(dem["ymin"])))
    # Each method on its own default band (hurst_band="auto"), as these bounds were set.
    params = {"hurst_methods": ["psd", "madogram"], "surrogate_scores": [], "hurst_band": "auto"}
    s = terrain_summary(z, dx, dy, params=params)
    h = s.score("hurst_psd").value
    assert 0.15 < h < 1.0, h
    assert 0.4 < s.score("hurst_madogram").value < 0.9
    assert s.score("sq_m").value > 10.0  # hundreds of metres of relief
    # Default: one band for both (4 cells to 1/8 of the shorter side), reported with
    # each estimate; on this ridge-and-valley relief they still differ, which the
    # shared band makes a statement about the ground rather than about the bands.
    c = terrain_summary(z, dx, dy, params={**params, "hurst_band": "common"})
    step = max(dx, dy)
    for m in ("psd", "madogram"):
        assert c.score(f"hurst_{m}_band_lo_m").value >= 4 * step * 0.999
        # (lags are whole cells of the finer spacing: up to one cell of rounding)
        assert c.score(f"hurst_{m}_band_hi_m").value <= min(z.shape) * step / 8 + step


def test_white_noise_is_not_reported_as_self_affine(rng):
    # White noise has a flat PSD, C(q) ~ q^0 = q^-(2+2H) gives H = -1 (Jacobs et al.
    # 2017, eq. for the isotropic PSD): outside [0, 1], so H and D must be NaN with a
    # note, never a fractal dimension of 4; the spectral slope itself is kept (~0).
    z = rng.normal(0, 1e-3, (256, 256))
    ts = terrain_summary(z, 1e-3, band_m=(0.004, 0.05))
    assert np.isnan(ts.score("hurst_psd").value)
    assert np.isnan(ts.score("fractal_dimension_psd").value)
    assert any("outside the self-affine range" in n for n in ts.notes)
    assert abs(ts.score("psd_slope").value) < 0.3
