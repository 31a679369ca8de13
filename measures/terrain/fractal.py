"""Hurst exponent and fractal dimension of heightmaps and profiles by three estimators.

Self-affine ground has ``C_iso(q) ~ q^-(2+2H)`` (surfaces), ``C_1D(q) ~
q^-(1+2H)`` (profiles), increments ``E|z(x+h) - z(x)|^p ~ h^(pH)``, and
fractal dimension ``D = 3 - H`` (surface) or ``2 - H`` (profile) for 0 < H < 1
(Jacobs, Junge & Pastewka 2017; Gneiting, Ševčíková & Percival 2012).

Bands are lengths in metres: wavelengths for ``method="psd"``, lags for
``"variogram"``/``"madogram"``, box sides for ``"boxcount"`` (treating a
wavelength and a lag of the same length as the same scale, common practice).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import cast

import numpy as np
from numba import njit, prange
from numpy.lib.stride_tricks import sliding_window_view
from numpy.typing import ArrayLike, NDArray

from measures._validation import (
    InsufficientDataError,
    InvalidParameterError,
    check_choice,
    check_positive_float,
)
from measures.terrain._surface import (
    check_grid,
    fill_holes,
    hole_scale_cells,
    inpaint_holes,
    level,
)
from measures.terrain.spectra import profile_psd, radial_psd

__all__ = ["HurstResult", "SelfAffineBand", "hurst_exponent", "self_affine_band"]

_METHODS = ("psd", "variogram", "madogram", "boxcount")
# Below half the cells valid, interpolation makes up most of the surface:
# no Hurst exponent is fitted (our choice, stated).
MIN_VALID_FRACTION = 0.5
_MAX_TRANSECTS = 1024

# A fit as the estimators return it: H, band used (m), R^2, slope, intercept, fitted x and y.
_Fit = tuple[
    float, tuple[float, float], float, float, float, NDArray[np.float64], NDArray[np.float64]
]


@dataclass(frozen=True, eq=False)
class HurstResult:
    """A Hurst exponent with the fit that produced it.

    Attributes
    ----------
    hurst : float
        H (1).
    fractal_dimension : float
        3 - H for a surface, 2 - H for a profile.
    band : tuple (lo, hi) of float, m
        Length band actually fitted (wavelengths, lags or box sides; see module).
    r2 : float
        Coefficient of determination of the log-log fit.
    method : str
    slope : float
        Fitted log-log slope.
    n_points : int
        Points in the fit.
    power_law_found : bool
        False when ``band=None`` and no self-affine band could be found (the
        fit then used the fallback band and H should not be trusted).
    fit_x, fit_y : arrays
        The points fitted (q in rad/m and PSD; lag in m and mean |dz|^p; box
        side in m and count), and ``fit_intercept`` for drawing the line.
    """

    hurst: float
    fractal_dimension: float
    band: tuple[float, float]
    r2: float
    method: str
    slope: float
    n_points: int
    power_law_found: bool
    fit_x: NDArray[np.float64] = field(repr=False)
    fit_y: NDArray[np.float64] = field(repr=False)
    fit_intercept: float = 0.0


@dataclass(frozen=True)
class SelfAffineBand:
    """The widest wavelength band over which the PSD is a stable power law.

    Attributes
    ----------
    found : bool
        False when no band met the criteria (``band_m`` is then None).
    band_m : (lo, hi) of float, m, or None
        Wavelength band.
    hurst, slope, r2 : float
        Of the fit over the band (NaN when not found).
    n_points : int
    reason : str
        Why nothing was found, or "ok".
    """

    found: bool
    band_m: tuple[float, float] | None
    hurst: float
    slope: float
    r2: float
    n_points: int
    reason: str


def _fit(x: NDArray[np.float64], y: NDArray[np.float64]) -> tuple[float, float, float]:
    """Least-squares line through (log x, log y): slope, intercept, R^2."""
    lx, ly = np.log(x), np.log(y)
    slope, icpt = np.polyfit(lx, ly, 1)
    resid = ly - (slope * lx + icpt)
    tot = np.sum((ly - ly.mean()) ** 2)
    r2 = 1.0 - np.sum(resid**2) / tot if tot > 0 else float("nan")
    return float(slope), float(icpt), float(r2)


def _log_bin(
    q: NDArray[np.float64], c: NDArray[np.float64], bins_per_decade: int = 10
) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """Average a linearly sampled spectrum in log-spaced bins (q > 0 only)."""
    keep = q > 0
    q, c = q[keep], c[keep]
    lo, hi = np.log10(q[0]), np.log10(q[-1])
    n_bins = max(1, int(np.ceil((hi - lo) * bins_per_decade)))
    edges = np.linspace(lo, hi + 1e-12, n_bins + 1)
    idx = np.clip(np.searchsorted(edges, np.log10(q), side="right") - 1, 0, n_bins - 1)
    cnt = np.bincount(idx, minlength=n_bins)
    qs = np.bincount(idx, weights=np.log(q), minlength=n_bins)
    cs = np.bincount(idx, weights=c, minlength=n_bins)
    ok = cnt > 0
    return np.exp(qs[ok] / cnt[ok]), cs[ok] / cnt[ok]


def _spectrum(
    arr: NDArray[np.float64], dx: float, dy: float, mask: NDArray[np.bool_] | None
) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """Log-binned (q, C) for a surface (radial PSD) or a profile (1-D PSD)."""
    if arr.ndim == 2:
        r = radial_psd(arr, dx, dy, valid=mask)
        return r.q, r.psd
    p = profile_psd(arr, dx, valid=mask)
    return _log_bin(p.q, p.psd)


def _psd_slope_to_hurst(slope: float, ndim: int) -> float:
    return -slope / 2.0 - (1.0 if ndim == 2 else 0.5)


def self_affine_band(
    z: ArrayLike,
    dx: float,
    dy: float | None = None,
    *,
    valid: ArrayLike | None = None,
    r2_min: float = 0.98,
    min_decades: float = 0.8,
    slope_tolerance: float = 0.4,
    hurst_range: tuple[float, float] = (0.0, 1.0),
) -> SelfAffineBand:
    """Find the widest wavelength band where the PSD is a power law with 0 < H < 1.

    Rule: over every contiguous run of log-spaced PSD bins spanning at least
    ``min_decades`` of q, fit log C on log q; keep runs with R^2 >= ``r2_min``,
    an implied H inside ``hurst_range`` and a stable local slope (every
    half-decade sub-fit within ``slope_tolerance`` of the run's slope). Return
    the widest run (ties: higher R^2). When no run qualifies, ``found`` is
    False and ``reason`` says which criterion failed: never a silent fit.

    Parameters
    ----------
    z : array (ny, nx) or (n,), float, m
    dx, dy : float, m
    valid : bool array, optional
    r2_min, min_decades, slope_tolerance, hurst_range
        The acceptance rule above.

    Returns
    -------
    SelfAffineBand

    References
    ----------
    Jacobs, Junge & Pastewka (2017): self-affine scaling holds over a finite
    band, bounded by roll-off and instrument limits, and must be identified.
    """
    fn = "self_affine_band"
    arr, dx_f, dy_f, mask = check_grid(z, dx, dy, valid, fn, ndim=(1, 2), min_size=8)
    spectrum = _spectrum(arr, dx_f, dy_f, mask)
    return _band_from_spectrum(
        *spectrum, arr.ndim, r2_min, min_decades, slope_tolerance, hurst_range
    )


def _band_from_spectrum(
    q: NDArray[np.float64],
    c: NDArray[np.float64],
    ndim: int,
    r2_min: float,
    min_decades: float,
    slope_tolerance: float,
    hurst_range: tuple[float, float],
) -> SelfAffineBand:
    """The band search of :func:`self_affine_band` on a log-binned spectrum."""
    ok = c > 0
    q, c = q[ok], c[ok]
    lq = np.log10(q)
    sub = 5  # points in a half-decade sub-fit at 10 bins per decade
    best: tuple[float, float, int, int, float] | None = None
    failed = {"r2": 0, "hurst": 0, "stable": 0}
    n = q.size
    for i in range(n):
        for j in range(i + 1, n):
            width = lq[j] - lq[i]
            if width < min_decades or j - i + 1 < sub + 1:
                continue
            if best is not None and width < best[0]:
                continue
            slope, _, r2 = _fit(q[i : j + 1], c[i : j + 1])
            if not r2 >= r2_min:
                failed["r2"] += 1
                continue
            h = _psd_slope_to_hurst(slope, ndim)
            if not hurst_range[0] < h < hurst_range[1]:
                failed["hurst"] += 1
                continue
            local = [_fit(q[k : k + sub], c[k : k + sub])[0] for k in range(i, j + 2 - sub)]
            if np.max(np.abs(np.array(local) - slope)) > slope_tolerance:
                failed["stable"] += 1
                continue
            if best is None or width > best[0] or r2 > best[4]:
                best = (width, slope, i, j, r2)
    if best is None:
        if n < sub + 1 or lq[-1] - lq[0] < min_decades:
            reason = f"the PSD spans fewer than {min_decades} decades"
        else:
            reason = (
                f"no band of >= {min_decades} decades met the rule "
                f"(rejected for R^2: {failed['r2']}, H outside {hurst_range}: "
                f"{failed['hurst']}, unstable local slope: {failed['stable']})"
            )
        nan = float("nan")
        return SelfAffineBand(False, None, nan, nan, nan, 0, reason)
    _, slope, i, j, r2 = best
    band = (float(2 * np.pi / q[j]), float(2 * np.pi / q[i]))
    h = _psd_slope_to_hurst(slope, ndim)
    return SelfAffineBand(True, band, h, slope, r2, j - i + 1, "ok")


def _lags_px(
    band: tuple[float, float] | None, step: float, n: int, default_hi_frac: float
) -> NDArray[np.int_]:
    """Integer lags (px), about 10 per decade, in the band (m) or the default range."""
    lo_px, hi_px = (
        (2.0, max(4.0, n * default_hi_frac))
        if band is None
        else (
            band[0] / step,
            band[1] / step,
        )
    )
    lo_px, hi_px = max(1.0, lo_px), min(hi_px, n / 2)
    if hi_px < lo_px * 1.5:
        return np.array([], dtype=int)
    lags = np.unique(np.rint(np.geomspace(lo_px, hi_px, 20)).astype(int))
    return lags[lags >= 1]


def _increments(
    arr: NDArray[np.float64], mask: NDArray[np.bool_] | None, lags: NDArray[np.int_], p: int
) -> NDArray[np.float64]:
    """Mean |z(x+h) - z(x)|^p per transect (rows, then columns if 2-D): (n_lines, n_lags)."""
    # At most _MAX_TRANSECTS evenly spaced rows (and columns): H is the median
    # over transects, which 1024 of them pin down as well as 4096 do.
    sr = max(1, -(-arr.shape[0] // _MAX_TRANSECTS)) if arr.ndim == 2 else 1
    sc = max(1, -(-arr.shape[-1] // _MAX_TRANSECTS)) if arr.ndim == 2 else 1
    lines = [arr[None, :]] if arr.ndim == 1 else [arr[::sr], np.ascontiguousarray(arr.T[::sc])]
    masks: list[NDArray[np.bool_] | None] = [None] * len(lines)
    if mask is not None:
        masks = [mask[None, :]] if arr.ndim == 1 else [mask[::sr], mask.T[::sc]]
    out = []
    for zz, mm in zip(lines, masks, strict=True):
        cols = []
        for h in lags:
            d = np.abs(zz[:, h:] - zz[:, :-h]) ** p
            if mm is None:
                cols.append(d.mean(axis=1))
            else:
                w = mm[:, h:] & mm[:, :-h]
                with np.errstate(invalid="ignore", divide="ignore"):
                    cols.append(np.where(w, d, 0.0).sum(axis=1) / w.sum(axis=1))
        out.append(np.column_stack(cols))
    return np.vstack(out)


@njit(cache=True, parallel=True, fastmath=True)
def _line_increments(  # pragma: no cover - compiled
    lines: NDArray[np.float64], lags: NDArray[np.int64]
) -> NDArray[np.float64]:
    """(n_lines, n_lags, 2): mean |dz| and mean dz^2 per line and lag, one pass each."""
    n_lines, n = lines.shape
    out = np.empty((n_lines, lags.size, 2))
    for r in prange(n_lines):
        line = lines[r]
        for li in range(lags.size):
            h = lags[li]
            s1 = 0.0
            s2 = 0.0
            for j in range(n - h):
                d = line[j + h] - line[j]
                s1 += abs(d)
                s2 += d * d
            out[r, li, 0] = s1 / (n - h)
            out[r, li, 1] = s2 / (n - h)
    return out


def _increments_both(
    arr: NDArray[np.float64], lags: NDArray[np.int_]
) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """``_increments`` for p = 1 and p = 2 at once (2-D grid without holes).

    The same transects (rows, then columns, at most ``_MAX_TRANSECTS`` each);
    sums in another order than numpy's, so values agree to rounding (~1e-15).
    """
    sr = max(1, -(-arr.shape[0] // _MAX_TRANSECTS))
    sc = max(1, -(-arr.shape[1] // _MAX_TRANSECTS))
    lg = np.asarray(lags, dtype=np.int64)
    rows = _line_increments(np.ascontiguousarray(arr[::sr]), lg)
    cols = _line_increments(np.ascontiguousarray(arr.T[::sc]), lg)
    both = np.concatenate([rows, cols])
    return both[:, :, 0], both[:, :, 1]


@njit(cache=True, parallel=True)
def _box_counts_kernel(  # pragma: no cover - compiled
    arr: NDArray[np.float64], amin: float, scale: float, sizes: NDArray[np.int64]
) -> NDArray[np.float64]:
    ny, nx = arr.shape
    out = np.zeros(sizes.size)
    for si in range(sizes.size):
        s = sizes[si]
        nby, nbx = (ny - s - 1) // s + 1, (nx - s - 1) // s + 1
        per_row = np.zeros(nby)
        for bi in prange(nby):
            acc = 0.0
            for bj in range(nbx):
                hi = -np.inf
                lo = np.inf
                for r in range(bi * s, bi * s + s + 1):
                    for c in range(bj * s, bj * s + s + 1):
                        v = (arr[r, c] - amin) * scale
                        hi = max(hi, v)
                        lo = min(lo, v)
                acc += max(math.ceil((hi - lo) / s), 1.0)
            per_row[bi] = acc
        out[si] = per_row.sum()
    return out


def _box_counts_2d(arr: NDArray[np.float64], sizes: NDArray[np.int_]) -> NDArray[np.float64]:
    """``_box_counts`` of a 2-D grid in one compiled pass per box size (same counts)."""
    amin = float(arr.min())
    span = float(arr.max() - amin)
    scale = (max(arr.shape) - 1) / span
    return _box_counts_kernel(
        np.ascontiguousarray(arr), amin, scale, np.asarray(sizes, dtype=np.int64)
    )


def _structure_fit(
    arr: NDArray[np.float64],
    dx: float,
    dy: float,
    mask: NDArray[np.bool_] | None,
    band: tuple[float, float] | None,
    p: int,
    increments: NDArray[np.float64] | None = None,
) -> _Fit:
    """Transect increment estimator, median over rows and columns (Gneiting et al. 2012).

    ``increments``: the (n_lines, n_lags) means of ``_increments`` if already
    computed (``_increments_both`` makes p = 1 and 2 in one pass).
    """
    step = dx if arr.ndim == 1 else min(dx, dy)
    lags = _lags_px(band, step, min(arr.shape), 1 / 16)
    if lags.size < 3:
        raise InsufficientDataError("band", "hurst_exponent", "a band spanning >= 3 lags", band)
    # With dx != dy the column lags are in other units, but a log-log slope does not
    # depend on the unit of the lag, so the per-transect estimates stay valid.
    v = _increments(arr, mask, lags, p) if increments is None else increments
    good = np.all(np.isfinite(v) & (v > 0), axis=1)
    if not good.any():
        raise InsufficientDataError("z", "hurst_exponent", "a surface that is not flat", arr)
    lv, lh = np.log(v[good]), np.log(lags * step)
    lhc = lh - lh.mean()
    slopes = (lv - lv.mean(axis=1, keepdims=True)) @ lhc / (lhc @ lhc)
    # int lags times a float step are float64 (the stubs only say floating)
    x, y = cast("NDArray[np.float64]", lags * step), v[good].mean(axis=0)
    slope, icpt, r2 = _fit(x, y)
    return float(np.median(slopes)) / p, (float(x[0]), float(x[-1])), r2, slope, icpt, x, y


def _box_counts(arr: NDArray[np.float64], sizes: NDArray[np.int_]) -> NDArray[np.float64]:
    """Boxes of height s touched per s x s cell block, heights scaled to the extent in px.

    Differential box counting (Sarkar & Chaudhuri 1994), with neighbouring
    blocks sharing their boundary samples (s + 1 per side) so that the
    interpolated surface between samples is covered; the height range is
    rescaled to the horizontal extent so the surface is rough at every box size.
    """
    span = float(arr.max() - arr.min())
    zs = (arr - arr.min()) * ((max(arr.shape) - 1) / span)
    counts = []
    for s in sizes:
        win = (s + 1,) * arr.ndim
        blk = sliding_window_view(zs, win)[(slice(None, None, s),) * arr.ndim]
        axes = tuple(range(arr.ndim, 2 * arr.ndim))
        rng = blk.max(axis=axes) - blk.min(axis=axes)
        counts.append(float(np.sum(np.maximum(np.ceil(rng / s), 1.0))))
    return np.array(counts)


def _boxcount_fit(
    arr: NDArray[np.float64],
    dx: float,
    mask: NDArray[np.bool_] | None,
    band: tuple[float, float] | None,
    fast: bool = False,
) -> _Fit:
    if mask is not None:
        arr = fill_holes(arr, mask)
    n = min(arr.shape)
    lo_px, hi_px = (2.0, n / 8) if band is None else (band[0] / dx, band[1] / dx)
    sizes = [s for s in 2 ** np.arange(1, 20) if max(lo_px, 2) <= s <= min(hi_px, n / 4)]
    if len(sizes) < 3:
        raise InsufficientDataError("band", "hurst_exponent", "a band of >= 3 box sizes", band)
    size_arr = np.array(sizes)
    counts = _box_counts_2d(arr, size_arr) if fast and arr.ndim == 2 else _box_counts(arr, size_arr)
    # int sizes times a float spacing are float64 (the stubs only say floating)
    x = cast("NDArray[np.float64]", size_arr * dx)
    slope, icpt, r2 = _fit(x, counts)
    dim = -slope
    h = (3.0 if arr.ndim == 2 else 2.0) - dim
    return h, (float(x[0]), float(x[-1])), r2, slope, icpt, x, counts


def _psd_fit_nd(
    ndim: int,
    band: tuple[float, float],
    q: NDArray[np.float64],
    c: NDArray[np.float64],
) -> _Fit:
    sel = (q >= 2 * np.pi / band[1] * 0.999) & (q <= 2 * np.pi / band[0] * 1.001) & (c > 0)
    if sel.sum() < 3:
        raise InsufficientDataError("band", "hurst_exponent", "a band holding >= 3 PSD bins", band)
    slope, icpt, r2 = _fit(q[sel], c[sel])
    h = _psd_slope_to_hurst(slope, ndim)
    qs = q[sel]
    return h, (float(2 * np.pi / qs[-1]), float(2 * np.pi / qs[0])), r2, slope, icpt, qs, c[sel]


def _psd_from_spectrum(
    q: NDArray[np.float64],
    c: NDArray[np.float64],
    ndim: int,
    shape: tuple[int, ...],
    dx_f: float,
    dy_f: float,
    mask: NDArray[np.bool_] | None,
    fit_band: tuple[float, float] | None,
) -> tuple[_Fit, bool]:
    """The PSD estimate from a log-binned spectrum: (fit, power law found)."""
    fn = "hurst_exponent"
    found = True
    if ndim == 2 and mask is not None:
        floor = 4.0 * hole_scale_cells(mask) * max(dx_f, dy_f)
        keep = q <= 2 * np.pi / floor if floor > 0 else np.ones(q.size, bool)
        q, c = q[keep], c[keep]
        if fit_band is not None and fit_band[0] < floor:
            if fit_band[1] < 2.0 * floor:
                raise InsufficientDataError(
                    "band",
                    fn,
                    f"a band reaching beyond twice the hole scale ({floor:.3g} m)",
                    fit_band,
                )
            fit_band = (floor, fit_band[1])
    if fit_band is None:
        auto = _band_from_spectrum(q, c, ndim, 0.98, 0.8, 0.4, (0.0, 1.0))
        found = auto.found
        n = max(shape) if ndim == 2 else shape[0]
        step = max(dx_f, dy_f) if ndim == 2 else dx_f
        fit_band = auto.band_m if found else (4 * step, n * step / 4)
    assert fit_band is not None  # a found band always has band_m
    return _psd_fit_nd(ndim, fit_band, q, c), found


def hurst_exponent(
    z: ArrayLike,
    dx: float,
    *,
    method: str = "psd",
    band: tuple[float, float] | None = None,
    dy: float | None = None,
    valid: ArrayLike | None = None,
    min_valid_fraction: float = MIN_VALID_FRACTION,
) -> HurstResult:
    """Hurst exponent and fractal dimension of a heightmap or a profile.

    Methods
    -------
    "psd"
        Log-log fit of the radial PSD (surfaces, ``C ~ q^-(2+2H)``) or of the
        log-binned profile PSD (``C ~ q^-(1+2H)``) over ``band`` (wavelengths,
        m). ``band=None``: the band from :func:`self_affine_band`; if none is
        found, wavelengths 4 cells to 1/4 of the extent and
        ``power_law_found=False``.
    "variogram", "madogram"
        Increments along rows and columns (transects), ``E|dz|^p ~ h^(pH)`` with
        p = 2 and p = 1; H is the median of the per-transect slopes divided by p
        (Gneiting et al. 2012 recommend the madogram and the median over
        transects for lattice data). ``band`` is the lag range in m; default
        2 cells to 1/16 of the extent or 64 cells, whichever is less (lag 1 is
        left out: it is the most affected by sampling and aliasing at the grid
        scale). R^2 is that of the mean-over-transects curve.
    "boxcount"
        Differential box counting with heights rescaled to the extent;
        ``D = -slope``, ``H = 3 - D`` (2 - D for profiles). Biased: box counting
        over-estimates H (under-estimates D) for rough surfaces at coarse boxes,
        and depends on the height scaling of a self-affine (not self-similar)
        surface. ``band`` is the box-side range in m; default 2 cells to 1/8 extent.

    Parameters
    ----------
    z : array (ny, nx) or (n,), float, m
    dx : float, m
        Spacing along x (and y unless ``dy`` is given).
    method : {"psd", "variogram", "madogram", "boxcount"}
    band : (lo, hi) in m, optional
    dy : float, m, optional
    valid : bool array, optional
        Holes. Increments across them are skipped; for the PSD and box
        counting they are interpolated (harmonic) and, for the PSD, the band
        starts no shorter than 4 hole radii (95th percentile of the distance
        to data inside holes), where interpolation no longer shapes the spectrum.
    min_valid_fraction : float
        Fewer valid cells than this fraction: InsufficientDataError.

    Returns
    -------
    HurstResult

    References
    ----------
    Jacobs, Junge & Pastewka (2017), Surf. Topogr.: Metrol. Prop. 5:013001.
    Gneiting, Ševčíková & Percival (2012), Statistical Science 27(2):247-277.
    Sarkar & Chaudhuri (1994), IEEE Trans. Syst. Man Cybern. 24(1):115-120.

    Examples
    --------
    >>> from measures.terrain._synthesis import self_affine_surface
    >>> z = self_affine_surface(256, 0.6, seed=1)
    >>> round(hurst_exponent(z, 1.0, method="madogram").hurst, 1)
    0.6
    """
    fn = "hurst_exponent"
    check_choice("method", method, fn, _METHODS)
    arr, dx_f, dy_f, mask = check_grid(z, dx, dy, valid, fn, ndim=(1, 2), min_size=8)
    min_valid_fraction = check_positive_float("min_valid_fraction", min_valid_fraction, fn)
    fit_band = None
    if band is not None:
        try:
            lo, hi = (check_positive_float("band", b, fn) for b in band)
        except TypeError:
            raise InvalidParameterError("band", fn, "a pair (lo, hi) in m", band) from None
        if not lo < hi:
            raise InvalidParameterError("band", fn, "a pair with lo < hi", band)
        fit_band = (lo, hi)
    frac = 1.0 if mask is None else float(mask.mean())
    if frac < min_valid_fraction:
        raise InsufficientDataError(
            "valid", fn, f"at least {min_valid_fraction:.0%} valid cells", f"{frac:.1%} valid"
        )
    if arr.ndim == 2 and method in ("psd", "boxcount"):
        filled = inpaint_holes(np.nan_to_num(arr), mask)
        spec_mask = None
    else:
        filled = fill_holes(np.nan_to_num(arr), mask)
        spec_mask = mask
    found = True
    if method == "psd":
        q, c = _spectrum(filled, dx_f, dy_f, spec_mask)
        res, found = _psd_from_spectrum(q, c, arr.ndim, arr.shape, dx_f, dy_f, mask, fit_band)
    elif method == "boxcount":
        zl = level(filled, dx_f, dy_f, spec_mask, "plane")
        res = _boxcount_fit(zl, dx_f, spec_mask, fit_band)
    else:
        zl = level(filled, dx_f, dy_f, mask, "plane")
        res = _structure_fit(zl, dx_f, dy_f, mask, fit_band, 2 if method == "variogram" else 1)
    h, used, r2, slope, icpt, x, y = res
    dim = (3.0 if arr.ndim == 2 else 2.0) - h
    return HurstResult(h, dim, used, r2, method, slope, int(x.size), found, x, y, icpt)


def _result(res: _Fit, method: str, ndim: int, found: bool = True) -> HurstResult:
    h, used, r2, slope, icpt, x, y = res
    dim = (3.0 if ndim == 2 else 2.0) - h
    return HurstResult(h, dim, used, r2, method, slope, int(x.size), found, x, y, icpt)


def _hurst_all(
    zl: NDArray[np.float64],
    dx: float,
    dy: float,
    mask: NDArray[np.bool_] | None,
    methods: Sequence[str],
    fit_band: tuple[float, float] | None,
    min_valid_fraction: float,
    spectrum: tuple[NDArray[np.float64], NDArray[np.float64]] | None,
) -> dict[str, HurstResult | ValueError]:
    """:func:`hurst_exponent` of a levelled grid for several methods, sharing the work.

    ``zl``: levelled heights, holes 0 (as ``terrain_summary`` makes them);
    ``spectrum``: the radial PSD (q, C) of the hole-filled grid, if already
    made. What each method computes is that of :func:`hurst_exponent`; the
    variogram and madogram read one pass of increments (compiled) and box
    counting a compiled block pass. A full grid is not levelled a second time
    (that would move heights by rounding only). Each value is a result or the
    error :func:`hurst_exponent` would raise.
    """
    fn = "hurst_exponent"
    out: dict[str, HurstResult | ValueError] = {}
    frac = 1.0 if mask is None else float(mask.mean())
    if frac < min_valid_fraction:
        err = InsufficientDataError(
            "valid", fn, f"at least {min_valid_fraction:.0%} valid cells", f"{frac:.1%} valid"
        )
        return dict.fromkeys(methods, err)
    inpainted = zl if mask is None else inpaint_holes(zl, mask)
    increments: dict[int, NDArray[np.float64]] = {}
    structure = [m for m in methods if m in ("variogram", "madogram")]
    zs = zl
    if structure and mask is not None:
        zs = level(fill_holes(zl, mask), dx, dy, mask, "plane")
    for m in methods:
        try:
            if m == "psd":
                q, c = spectrum if spectrum is not None else _spectrum(inpainted, dx, dy, None)
                res, found = _psd_from_spectrum(q, c, 2, zl.shape, dx, dy, mask, fit_band)
                out[m] = _result(res, m, 2, found)
            elif m == "boxcount":
                zb = inpainted if mask is None else level(inpainted, dx, dy, None, "plane")
                out[m] = _result(_boxcount_fit(zb, dx, None, fit_band, fast=True), m, 2)
            else:
                p = 2 if m == "variogram" else 1
                if mask is None and not increments:
                    step = min(dx, dy)
                    lags = _lags_px(fit_band, step, min(zl.shape), 1 / 16)
                    if lags.size >= 3:
                        increments[1], increments[2] = _increments_both(zs, lags)
                fit = _structure_fit(zs, dx, dy, mask, fit_band, p, increments.get(p))
                out[m] = _result(fit, m, 2)
        except ValueError as err:
            out[m] = err
    return out
