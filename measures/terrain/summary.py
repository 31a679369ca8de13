"""Terrain scoring: gradient entropy, hillshade, and the whole-heightmap summary.

``terrain_summary`` gathers every terrain measure of one heightmap into
:class:`measures.Score` records, optionally restricted to an animal-scale
wavelength band: band-limited heights (Gaussian band-pass, ISO 16610-61
style) feed the areal, gradient and information measures; the scale-resolved
measures (PSD, Hurst exponents) are restricted through their fit band on the
levelled but unfiltered surface, since the filter's 50 % roll-off at the band
edges would bend the very power law being fitted.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from numpy.typing import ArrayLike, NDArray

from measures._types import Score
from measures._validation import (
    InvalidParameterError,
    check_positive_float,
    check_positive_int,
)
from measures.terrain._surface import check_grid, fill_holes, level
from measures.terrain.areal import _check_band, areal_parameters, bandpass_surface
from measures.terrain.fractal import hurst_exponent
from measures.terrain.spectra import psd_anisotropy, radial_psd, rms_slope_from_psd, surface_psd

__all__ = [
    "TERRAIN_DEFAULTS",
    "GradientEntropy",
    "TerrainSummary",
    "gradient_entropy",
    "hillshade",
    "terrain_summary",
]

# Every parameter terrain_summary uses, with its default. Plain values only,
# so the dict can be stored as a versioned analysis profile (JSON).
TERRAIN_DEFAULTS: dict[str, Any] = {
    "detrend": "plane",  # levelling before every measure ("plane" or "mean")
    "acf_threshold": 0.2,  # s for Sal and Str (ISO 25178-2 default)
    "slope_bin_deg": 1.0,  # fixed slope-histogram bin width, 0..90 degrees
    "aspect_bin_deg": 10.0,  # fixed aspect-histogram bin width, 0..360 degrees
    "slope_floor_deg": 2.0,  # aspect counted only where the slope exceeds this
    "psd_bins_per_decade": 10,
    "hurst_methods": ["psd", "variogram", "madogram", "boxcount"],
    "ordinal_order": [2, 2],  # 2-D ordinal patch (Ribeiro et al. 2012)
    "quantile_bins": 4,  # symbols for the 2-D entropy density
    "max_neighbourhood": None,  # None: the largest the field supports
    "surrogate_scores": ["permutation_entropy_2d"],  # each costs n_surrogates re-runs
    "n_surrogates": 19,
    "surrogate_seed": 20261201,
    "thumbnail_px": 256,  # longer side of the hillshade thumbnail
    "hillshade_azimuth_deg": 135.0,
    "hillshade_altitude_deg": 45.0,
}


@dataclass(frozen=True, eq=False)
class GradientEntropy:
    """Shannon entropy of slope-magnitude and aspect histograms.

    Attributes
    ----------
    slope_entropy_bits, aspect_entropy_bits : float
        Plug-in entropy (bits) of the histograms; aspect is NaN when no cell
        exceeds the slope floor.
    slope_counts, slope_edges_deg : arrays
        Histogram of slope (degrees) on fixed bins.
    aspect_counts, aspect_edges_deg : arrays
        Histogram of aspect (degrees) on fixed bins, cells above the floor.
    n_cells, n_aspect_cells : int
    """

    slope_entropy_bits: float
    aspect_entropy_bits: float
    slope_counts: NDArray[np.int64] = field(repr=False)
    slope_edges_deg: NDArray[np.float64] = field(repr=False)
    aspect_counts: NDArray[np.int64] = field(repr=False)
    aspect_edges_deg: NDArray[np.float64] = field(repr=False)
    n_cells: int = 0
    n_aspect_cells: int = 0


def _entropy_bits(counts: NDArray[np.int64]) -> float:
    total = counts.sum()
    if total == 0:
        return float("nan")
    p = counts[counts > 0] / total
    return float(-np.sum(p * np.log2(p)) + 0.0)


def gradient_entropy(
    z: ArrayLike,
    dx: float,
    dy: float | None = None,
    *,
    valid: ArrayLike | None = None,
    slope_bin_deg: float = 1.0,
    aspect_bin_deg: float = 10.0,
    slope_floor_deg: float = 2.0,
) -> GradientEntropy:
    """Entropy (bits) of the slope-magnitude and aspect distributions of a heightmap.

    Gradients are central differences (``numpy.gradient``). Slope is
    ``atan(|grad z|)`` in degrees, binned on fixed bins of ``slope_bin_deg``
    from 0 to 90; aspect is the downslope direction ``atan2(-z_y, -z_x)``,
    counter-clockwise from +x in [0, 360), on fixed bins of ``aspect_bin_deg``,
    counted only where the slope exceeds ``slope_floor_deg`` (on near-flat
    cells the aspect is set by scanner noise). Bins are fixed, not fitted to
    the data (as Freedman-Diaconis or quantile bins would be), so that the
    entropies of different arenas are on one scale and can be compared.

    Returns
    -------
    GradientEntropy

    References
    ----------
    C. E. Shannon (1948), Bell Syst. Tech. J. 27:379 (entropy); slope and
    aspect as in common terrain-analysis practice (e.g. Horn 1981, Proc.
    IEEE 69:14, from memory).

    Examples
    --------
    >>> import numpy as np
    >>> x = np.arange(64) * 0.01
    >>> plane = np.tile(0.1 * x, (64, 1))  # one slope, one aspect
    >>> g = gradient_entropy(plane, 0.01)
    >>> g.slope_entropy_bits, g.aspect_entropy_bits
    (0.0, 0.0)
    """
    fn = "gradient_entropy"
    arr, dx_f, dy_f, mask = check_grid(z, dx, dy, valid, fn)
    sb = check_positive_float("slope_bin_deg", slope_bin_deg, fn)
    ab = check_positive_float("aspect_bin_deg", aspect_bin_deg, fn)
    floor = check_positive_float("slope_floor_deg", slope_floor_deg, fn, allow_zero=True)
    gy, gx = np.gradient(fill_holes(np.nan_to_num(arr), mask), dy_f, dx_f)
    use = np.ones(arr.shape, bool) if mask is None else mask
    slope = np.degrees(np.arctan(np.hypot(gx, gy)))[use]
    aspect = (np.degrees(np.arctan2(-gy, -gx)) % 360.0)[use]
    slope_edges = np.arange(0.0, 90.0 + sb, sb)
    aspect_edges = np.arange(0.0, 360.0 + ab, ab)
    s_counts, _ = np.histogram(np.minimum(slope, slope_edges[-1]), slope_edges)
    steep = slope > floor
    a_counts, _ = np.histogram(aspect[steep], aspect_edges)
    return GradientEntropy(
        _entropy_bits(s_counts),
        _entropy_bits(a_counts),
        s_counts,
        slope_edges,
        a_counts,
        aspect_edges,
        int(slope.size),
        int(steep.sum()),
    )


def _downsample(z: NDArray[np.float64], factor: int) -> NDArray[np.float64]:
    if factor <= 1:
        return z
    ny, nx = (z.shape[0] // factor) * factor, (z.shape[1] // factor) * factor
    return z[:ny, :nx].reshape(ny // factor, factor, nx // factor, factor).mean(axis=(1, 3))


def hillshade(
    z: ArrayLike,
    dx: float,
    dy: float | None = None,
    *,
    azimuth_deg: float = 135.0,
    altitude_deg: float = 45.0,
    vertical_exaggeration: float = 1.0,
    max_px: int | None = None,
) -> NDArray[np.float64]:
    """Lambertian shaded relief in [0, 1] for thumbnails.

    The light comes from ``azimuth_deg`` (counter-clockwise from +x, in the
    grid's own frame; 135 puts it at the -x, +y corner) at ``altitude_deg``
    above the horizon; brightness is the cosine between the surface normal
    and the light, clipped at 0. ``max_px`` block-averages first so the
    longer side is at most that many cells.

    Returns
    -------
    array (ny', nx'), float in [0, 1]

    Examples
    --------
    >>> import numpy as np
    >>> flat = np.zeros((8, 8))
    >>> round(float(hillshade(flat, 1.0)[0, 0]), 4)  # sin(45 degrees)
    0.7071
    """
    fn = "hillshade"
    arr, dx_f, dy_f, mask = check_grid(z, dx, dy, None, fn)
    factor = 1
    if max_px is not None:
        mp = check_positive_int("max_px", max_px, fn, minimum=2)
        factor = int(np.ceil(max(arr.shape) / mp))
    small = _downsample(fill_holes(np.nan_to_num(arr), mask), factor)
    gy, gx = np.gradient(small * vertical_exaggeration, dy_f * factor, dx_f * factor)
    az, alt = np.radians(azimuth_deg), np.radians(altitude_deg)
    light = np.array([np.cos(alt) * np.cos(az), np.cos(alt) * np.sin(az), np.sin(alt)])
    shade = (-gx * light[0] - gy * light[1] + light[2]) / np.sqrt(1.0 + gx**2 + gy**2)
    return np.clip(shade, 0.0, 1.0)


@dataclass(frozen=True, eq=False)
class TerrainSummary:
    """Every terrain score of one heightmap, the parameters used and the plotted arrays.

    Attributes
    ----------
    scores : tuple of Score
    params : dict
        The full parameter set used (defaults merged with the caller's).
    band_m : (lo, hi) or None
    hillshade : array (<= thumbnail_px, <= thumbnail_px), float in [0, 1]
    radial_q, radial_psd : arrays, rad/m and m^4
    fit_q, fit_psd : arrays
        The fitted power law of the PSD Hurst estimate over its band.
    slope_counts, slope_edges_deg : arrays
    notes : tuple of str
        Anything the caller should know (failed estimators, filled holes).
    """

    scores: tuple[Score, ...]
    params: dict[str, Any]
    band_m: tuple[float | None, float | None] | None
    hillshade: NDArray[np.float64] = field(repr=False)
    radial_q: NDArray[np.float64] = field(repr=False)
    radial_psd: NDArray[np.float64] = field(repr=False)
    fit_q: NDArray[np.float64] = field(repr=False)
    fit_psd: NDArray[np.float64] = field(repr=False)
    slope_counts: NDArray[np.int64] = field(repr=False)
    slope_edges_deg: NDArray[np.float64] = field(repr=False)
    notes: tuple[str, ...] = ()

    def score(self, name: str) -> Score:
        """The score called ``name`` (KeyError if absent)."""
        for s in self.scores:
            if s.name == name:
                return s
        raise KeyError(name)


def _merge_params(params: Mapping[str, Any] | None) -> dict[str, Any]:
    merged = dict(TERRAIN_DEFAULTS)
    if params:
        unknown = sorted(set(params) - set(TERRAIN_DEFAULTS))
        if unknown:
            raise InvalidParameterError(
                "params", "terrain_summary", f"keys among {sorted(TERRAIN_DEFAULTS)}", unknown
            )
        merged.update(params)
    return merged


def _hurst_scores(zl, dx, dy, mask, band, methods, notes):
    """Hurst/fractal-dimension scores for each method; failures become NaN plus a note."""
    scores, psd_fit = [], None
    step = max(dx, dy)
    for m in methods:
        fit_band = band
        if band is not None:
            extent = max(zl.shape) * step
            fit_band = (max(band[0] or 0.0, 2 * step), min(band[1] or extent, extent))
        try:
            r = hurst_exponent(zl, dx, dy=dy, method=m, band=fit_band, valid=mask)
        except ValueError as err:
            notes.append(f"hurst {m}: {err}")
            scores += [Score(f"hurst_{m}", float("nan"), "1")]
            scores += [Score(f"fractal_dimension_{m}", float("nan"), "1")]
            continue
        if not r.power_law_found:
            notes.append(f"hurst {m}: no self-affine band found; fitted the fallback band")
        hurst, dim = r.hurst, r.fractal_dimension
        if not 0.0 <= hurst <= 1.0:
            # A self-affine surface has 0 <= H <= 1 (D between 2 and 3); a fit outside
            # that range says the ground is not self-affine in this band (ripples,
            # cracks, scanner noise), so H and D are not reported as numbers.
            notes.append(
                f"hurst {m}: fitted exponent {hurst:.2f} is outside the self-affine range "
                "[0, 1] in this band; H and D reported as NaN"
            )
            hurst = dim = float("nan")
        scores += [
            Score(f"hurst_{m}", hurst, "1"),
            Score(f"fractal_dimension_{m}", dim, "1"),
        ]
        scores += [Score(f"hurst_{m}_r2", r.r2, "1")]
        if m == "psd":
            psd_fit = r
            scores += [
                # The spectral slope itself stays meaningful whatever H would be.
                Score("psd_slope", r.slope, "1"),
                Score("psd_band_lo_m", r.band[0], "m"),
                Score("psd_band_hi_m", r.band[1], "m"),
            ]
    return scores, psd_fit


def _information_scores(zb, p, notes):
    """Shared 2-D information estimators on the band-limited surface (one code path)."""
    from measures.information.entropy import entropy_density_2d
    from measures.information.ordinal import complexity_entropy
    from measures.information.symbolic import quantile_symbols

    order = tuple(p["ordinal_order"])

    def perm(x):
        return complexity_entropy(x, order=order)[0]

    def jsc(x):
        return complexity_entropy(x, order=order)[1]

    def dens(x):
        sym = quantile_symbols(x, n_bins=p["quantile_bins"])
        return entropy_density_2d(sym, max_neighbourhood=p["max_neighbourhood"])

    h, c = complexity_entropy(zb, order=order)
    ed = dens(zb)
    estimators = {
        "permutation_entropy_2d": (perm, h, "1"),
        "js_complexity_2d": (jsc, c, "1"),
        "entropy_density_2d_bits": (
            lambda x: dens(x).entropy_density,
            ed.entropy_density,
            "bits/site",
        ),
        "excess_entropy_2d_bits": (lambda x: dens(x).excess_entropy, ed.excess_entropy, "bits"),
    }
    out = []
    for name, (fn, value, unit) in estimators.items():
        zscore = None
        if name in p["surrogate_scores"]:
            zscore = _surrogate_z(fn, zb, p, notes, name)
        out.append(Score(name, float(value), unit, surrogate_z=zscore))
    return out


def _surrogate_z(estimator, zb, p, notes, name):
    """z-score of ``estimator`` against 2-D phase-randomised surrogates (shared module)."""
    try:
        from measures.information.surrogates import surrogate_test
    except ImportError:
        notes.append(
            f"{name}: measures.information.surrogates.surrogate_test unavailable; no surrogate z"
        )
        return None
    try:
        res = surrogate_test(
            estimator,
            zb,
            kind="phase",  # 2-D fields get 2-D phase randomisation
            n_surrogates=p["n_surrogates"],
            seed=p["surrogate_seed"],
        )
    except (ValueError, TypeError) as err:
        notes.append(f"{name}: surrogate test failed ({err})")
        return None
    for attr in ("z_score", "zscore", "z"):
        if hasattr(res, attr):
            return float(getattr(res, attr))
    notes.append(f"{name}: surrogate result has no z-score field")
    return None


def terrain_summary(
    z: ArrayLike,
    dx: float,
    dy: float | None = None,
    *,
    valid: ArrayLike | None = None,
    band_m: tuple[float | None, float | None] | None = None,
    params: Mapping[str, Any] | None = None,
) -> TerrainSummary:
    """Score one heightmap: areal parameters, spectra, Hurst exponents, entropies.

    Parameters
    ----------
    z : array (ny, nx), float, m
        Heights; NaN cells are holes.
    dx, dy : float, m
        Spacing along x (axis 1) and y (axis 0); ``dy`` defaults to ``dx``.
    valid : bool array (ny, nx), optional
        Cells that hold data. The information estimators need a full grid:
        holes are filled with the mean height for them (noted).
    band_m : (lo, hi) in m, optional
        Animal-scale wavelength band (either side may be None).
    params : mapping, optional
        Overrides of :data:`TERRAIN_DEFAULTS` (unknown keys are an error).

    Returns
    -------
    TerrainSummary
        Scores (snake_case, unit suffix where dimensional): ``sq_m, sa_m, ssk,
        sku, sp_m, sv_m, sz_m, sdq, sdr, sal_m, str, rms_slope_psd,
        psd_anisotropy_ratio, lay_direction_deg, psd_slope, hurst_<method>,
        fractal_dimension_<method>, hurst_<method>_r2, psd_band_lo_m,
        psd_band_hi_m, slope_entropy_bits, aspect_entropy_bits,
        permutation_entropy_2d, js_complexity_2d, entropy_density_2d_bits,
        excess_entropy_2d_bits``.

    References
    ----------
    ISO 25178-2:2012; Jacobs, Junge & Pastewka (2017); Gneiting, Ševčíková &
    Percival (2012); Bandt & Pompe (2002), Ribeiro et al. (2012), Rosso et
    al. (2007); Feldman & Crutchfield (2003); Theiler et al. (1992) for
    phase-randomised surrogates.
    """
    fn = "terrain_summary"
    arr, dx_f, dy_f, mask = check_grid(z, dx, dy, valid, fn, min_size=16)
    p = _merge_params(params)
    notes: list[str] = []
    band = None if band_m is None else _check_band(band_m, fn)
    zl = level(np.nan_to_num(arr), dx_f, dy_f, mask, p["detrend"])
    zb = zl if band_m is None else bandpass_surface(zl, dx_f, dy_f, band_m=band, valid=mask)
    ap = areal_parameters(
        zb, dx_f, dy_f, valid=mask, detrend=p["detrend"], acf_threshold=p["acf_threshold"]
    )
    scores = [
        Score("sq_m", ap.Sq, "m"),
        Score("sa_m", ap.Sa, "m"),
        Score("ssk", ap.Ssk, "1"),
        Score("sku", ap.Sku, "1"),
        Score("sp_m", ap.Sp, "m"),
        Score("sv_m", ap.Sv, "m"),
        Score("sz_m", ap.Sz, "m"),
        Score("sdq", ap.Sdq, "1"),
        Score("sdr", ap.Sdr, "1"),
        Score("sal_m", ap.Sal, "m"),
        Score("str", ap.Str, "1"),
    ]
    if ap.str_is_upper_bound:
        notes.append("str: the ACF did not decay to s in every direction; Str is an upper bound")
    sp2 = surface_psd(zb, dx_f, dy_f, valid=mask)
    an = psd_anisotropy(sp2)
    scores += [
        Score("rms_slope_psd", rms_slope_from_psd(sp2), "1"),
        Score("psd_anisotropy_ratio", an.ratio, "1"),
        Score("lay_direction_deg", float(np.degrees(an.lay_direction_rad)), "deg"),
    ]
    hs, psd_fit = _hurst_scores(zl, dx_f, dy_f, mask, band, p["hurst_methods"], notes)
    scores += hs
    ge = gradient_entropy(
        zb,
        dx_f,
        dy_f,
        valid=mask,
        slope_bin_deg=p["slope_bin_deg"],
        aspect_bin_deg=p["aspect_bin_deg"],
        slope_floor_deg=p["slope_floor_deg"],
    )
    scores += [
        Score("slope_entropy_bits", ge.slope_entropy_bits, "bits"),
        Score("aspect_entropy_bits", ge.aspect_entropy_bits, "bits"),
    ]
    if mask is not None:
        notes.append("information scores: holes filled with the mean height")
    scores += _information_scores(fill_holes(zb, mask), p, notes)
    rp = radial_psd(zl, dx_f, dy_f, valid=mask, bins_per_decade=p["psd_bins_per_decade"])
    if psd_fit is not None:
        fit_q = psd_fit.fit_x
        fit_psd = np.exp(psd_fit.fit_intercept) * fit_q**psd_fit.slope
    else:
        fit_q = fit_psd = np.array([])
    thumb = hillshade(
        zb,
        dx_f,
        dy_f,
        azimuth_deg=p["hillshade_azimuth_deg"],
        altitude_deg=p["hillshade_altitude_deg"],
        max_px=p["thumbnail_px"],
    )
    return TerrainSummary(
        scores=tuple(scores),
        params=p,
        band_m=band,
        hillshade=thumb,
        radial_q=rp.q,
        radial_psd=rp.psd,
        fit_q=fit_q,
        fit_psd=fit_psd,
        slope_counts=ge.slope_counts,
        slope_edges_deg=ge.slope_edges_deg,
        notes=tuple(notes),
    )
