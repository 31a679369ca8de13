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

import os
import threading
from collections.abc import Callable, Mapping
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field
from functools import partial
from typing import Any, cast

import numpy as np
from numpy.typing import ArrayLike, NDArray

from measures._types import Score
from measures._validation import (
    InsufficientDataError,
    InvalidParameterError,
    check_choice,
    check_positive_float,
    check_positive_int,
)
from measures.defaults import TERRAIN_DEFAULTS
from measures.information.symbolic import MIN_WINDOWS_PER_PATTERN
from measures.terrain._fastfield import gradient_histograms, ordinal_counts, phase_surrogates
from measures.terrain._surface import check_grid, fill_holes, hole_scale_cells, inpaint_holes, level
from measures.terrain.areal import _areal_from_levelled, _check_band, bandpass_surface
from measures.terrain.fractal import HurstResult, _hurst_all
from measures.terrain.spectra import (
    RadialPSD,
    _half_spectrum,
    _moments_from_half,
    _radial_from_half,
    psd_anisotropy,
    rms_slope_from_psd,
    surface_psd,
)

__all__ = [
    "TERRAIN_DEFAULTS",
    "GradientEntropy",
    "TerrainSummary",
    "gradient_entropy",
    "hillshade",
    "terrain_summary",
]

# Threads for the FFTs of the surrogates (numba kernels use numba's own pool).
_WORKERS = min(2, os.cpu_count() or 1)
# Complexity scores that can carry a surrogate z-score.
_ORDINAL_SCORES = ("permutation_entropy_2d", "js_complexity_2d")
_FIELD_SCORES = (
    "entropy_density_2d_bits",
    "excess_entropy_2d_bits",
    "effective_complexity_2d_bits",
    "total_information_2d_bits_per_site",
)


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
    # No copy of a hole-free grid: np.gradient does not write to its input.
    src = arr if mask is None and not np.isnan(arr).any() else fill_holes(np.nan_to_num(arr), mask)
    # numpy's stubs cannot tell a 2-D input's gradient pair from a 1-D array
    gy, gx = cast("tuple[NDArray[np.float64], NDArray[np.float64]]", np.gradient(src, dy_f, dx_f))
    del src
    # In place: a 4096^2 scan makes each temporary 128 MiB.
    slope = np.hypot(gx, gy)
    np.arctan(slope, out=slope)
    np.degrees(slope, out=slope)
    # atan2(-gy, -gx) = atan2(gy, gx) + 180 degrees (mod 360): no negated copies.
    aspect = np.arctan2(gy, gx, out=gy)
    del gx
    np.degrees(aspect, out=aspect)
    aspect += 180.0
    aspect %= 360.0
    if mask is not None:
        slope, aspect = slope[mask], aspect[mask]
    else:
        slope, aspect = slope.ravel(), aspect.ravel()
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


def _gradient_entropy_full(
    z: NDArray[np.float64], dx: float, dy: float, p: Mapping[str, Any]
) -> tuple[GradientEntropy, tuple[float, float]]:
    """:func:`gradient_entropy` of a hole-free grid in one compiled pass, plus Sdq/Sdr sums."""
    fn = "gradient_entropy"
    sb = check_positive_float("slope_bin_deg", p["slope_bin_deg"], fn)
    ab = check_positive_float("aspect_bin_deg", p["aspect_bin_deg"], fn)
    floor = check_positive_float("slope_floor_deg", p["slope_floor_deg"], fn, allow_zero=True)
    slope_edges = np.arange(0.0, 90.0 + sb, sb)
    aspect_edges = np.arange(0.0, 360.0 + ab, ab)
    s_counts, a_counts, n_steep, g2_sum, sdr_sum = gradient_histograms(
        z, dx, dy, slope_edges, aspect_edges, floor
    )
    ge = GradientEntropy(
        _entropy_bits(s_counts),
        _entropy_bits(a_counts),
        s_counts,
        slope_edges,
        a_counts,
        aspect_edges,
        int(z.size),
        n_steep,
    )
    return ge, (g2_sum, sdr_sum)


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
    # A full grid is only read (block means): no filled copy.
    small = _downsample(arr if mask is None else fill_holes(np.nan_to_num(arr), mask), factor)
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


def _nan(name: str, unit: str, reason: str) -> Score:
    return Score(name, float("nan"), unit, note=reason)


def _hurst_band(
    p: Mapping[str, Any],
    band: tuple[float | None, float | None] | None,
    shape: tuple[int, ...],
    step: float,
    hole_floor: float,
) -> tuple[tuple[float, float] | None, str]:
    """The one band every Hurst estimator fits (None: each method's own default)."""
    extent = max(shape) * step
    if p["hurst_band"] == "auto":
        if band is None:
            return None, "each method's default band"
        lo, hi = max(band[0] or 0.0, 2 * step), min(band[1] or extent, extent)
        return (lo, hi), "the arena's band"
    if band is not None:
        lo, hi = max(band[0] or 0.0, 2 * step), min(band[1] or extent, extent)
        why = "the arena's band"
    else:
        # 4 cells: below, the grid's own sampling (aliasing, finite differences,
        # cell averaging) shapes the spectrum; an eighth of the shorter side:
        # above, increments saturate on a finite scan (variogram and madogram
        # read H low) and few independent samples remain.
        lo, hi = 4 * step, min(shape) * step / 8
        why = "the common default band (4 cells to 1/8 of the shorter side)"
    if hole_floor > lo:
        lo = hole_floor
        why += f", starting at 4 hole radii ({hole_floor:.3g} m)"
    return (lo, hi), why


def _hurst_scores(
    zl: NDArray[np.float64],
    dx: float,
    dy: float,
    mask: NDArray[np.bool_] | None,
    band: tuple[float | None, float | None] | None,
    p: Mapping[str, Any],
    notes: list[str],
    hole_floor: float,
    spectrum: tuple[NDArray[np.float64], NDArray[np.float64]] | None = None,
) -> tuple[list[Score], HurstResult | None]:
    """Hurst/fractal-dimension scores for each method, each with its band and fit quality.

    ``spectrum``: the radial PSD (q, C) of the filled, levelled grid at 10 bins
    per decade (what ``hurst_exponent(method="psd")`` computes), if made already.
    """
    scores: list[Score] = []
    psd_fit: HurstResult | None = None
    step = max(dx, dy)
    fit_band, why = _hurst_band(p, band, zl.shape, step, hole_floor)
    notes.append(
        "hurst: band "
        + (f"{fit_band[0]:.3g}-{fit_band[1]:.3g} m" if fit_band else "per method")
        + f" ({why})"
    )
    band_error: ValueError | None = None
    if fit_band is not None and not fit_band[1] > 1.5 * fit_band[0]:
        band_error = InsufficientDataError(
            "band_m", "terrain_summary", "a band at least 1.5 wide (hi / lo)", fit_band
        )
    results: dict[str, HurstResult | ValueError] = {}
    if band_error is None:
        results = _hurst_all(
            zl, dx, dy, mask, p["hurst_methods"], fit_band, p["min_valid_fraction"], spectrum
        )
    for m in p["hurst_methods"]:
        names = (f"hurst_{m}", f"fractal_dimension_{m}", f"hurst_{m}_r2")
        bands = (f"hurst_{m}_band_lo_m", f"hurst_{m}_band_hi_m")
        extra = ("psd_slope", "psd_band_lo_m", "psd_band_hi_m") if m == "psd" else ()
        got = band_error if band_error is not None else results[m]
        if isinstance(got, ValueError):
            err = got
            reason = f"hurst {m}: not estimated ({err})"
            notes.append(reason)
            scores += [_nan(n, "1", reason) for n in names]
            scores += [_nan(n, "m", reason) for n in bands]
            scores += [_nan(n, "1" if n == "psd_slope" else "m", reason) for n in extra]
            continue
        r = got
        band_note = f"fitted on {r.band[0]:.3g}-{r.band[1]:.3g} m, R^2 {r.r2:.3f}"
        if not r.power_law_found:
            band_note += "; no self-affine band found, fallback band"
            notes.append(f"hurst {m}: no self-affine band found; fitted the fallback band")
        hurst, dim, reason = r.hurst, r.fractal_dimension, band_note
        if not 0.0 <= hurst <= 1.0:
            # A self-affine surface has 0 <= H <= 1 (D between 2 and 3); a fit outside
            # that range says the ground is not self-affine in this band (ripples,
            # cracks, scanner noise), so H and D are not reported as numbers.
            reason = (
                f"hurst {m}: fitted exponent {hurst:.2f} is outside the self-affine range "
                f"[0, 1] in this band; H and D reported as NaN ({band_note})"
            )
            notes.append(reason)
            hurst = dim = float("nan")
        scores += [
            Score(f"hurst_{m}", hurst, "1", note=reason),
            Score(f"fractal_dimension_{m}", dim, "1", note=reason),
            Score(f"hurst_{m}_r2", r.r2, "1", note=band_note),
            Score(f"hurst_{m}_band_lo_m", r.band[0], "m"),
            Score(f"hurst_{m}_band_hi_m", r.band[1], "m"),
        ]
        if m == "psd":
            psd_fit = r
            scores += [
                # The spectral slope itself stays meaningful whatever H would be.
                Score("psd_slope", r.slope, "1", note=band_note),
                Score("psd_band_lo_m", r.band[0], "m"),
                Score("psd_band_hi_m", r.band[1], "m"),
            ]
    return scores, psd_fit


def _zscore(value: float, sur: NDArray[np.float64]) -> float | None:
    sur = sur[np.isfinite(sur)]
    if sur.size < 2 or not np.isfinite(value):
        return None
    sd = float(sur.std(ddof=1))
    return (value - float(sur.mean())) / sd if sd > 0 else None


def _ordinal_hc(
    x: NDArray[np.floating[Any]],
    order: tuple[int, int],
    ties: str,
    seed: int,
    raw: NDArray[np.floating[Any]] | None = None,
    serial: bool = False,
    offset: float = 0.0,
) -> tuple[float, float, float, int, int]:
    from measures.information.ordinal import jensen_shannon_complexity

    counts, n_ties = ordinal_counts(
        x, order, ties=ties, seed=seed, raw=raw, serial=serial, offset=offset
    )
    n = int(counts.sum())
    h, c = jensen_shannon_complexity(counts / n)
    return float(h), float(c), n_ties / n, n, counts.size


class _SurrogateLane:
    """Surrogates 0 .. n - 1 of the ordinal scores, taken one at a time by any thread.

    Every step of a surrogate runs on the calling thread without the GIL
    (numpy's generator, single-thread compiled kernels, a one-thread FFT) and
    launches no numba parallel kernel, so a lane may run beside anything.
    Surrogate k and its tie seed depend on k only: results do not depend on
    which thread made them or in what order.
    """

    def __init__(self, one: Callable[[int], tuple[float, float]], n: int) -> None:
        self._one = one
        self._n = n
        self._next = 0
        self._lock = threading.Lock()
        self.results: list[tuple[float, float]] = [(np.nan, np.nan)] * n
        # One more task, run once by whichever thread takes it first: the
        # background thread after the surrogates, the caller's when its own
        # stages are done (whichever lane is free first), on one numba thread
        # beside the other lane (see _LaneThreads).
        self._extra: Callable[[], Any] | None = None
        self.extra_result: Any = None
        self.extra_taken = False

    def offer(self, task: Callable[[], Any]) -> None:
        self._extra = task

    def run_extra(self, one_numba_thread: bool) -> bool:
        """Run the extra task here if nobody has taken it; True if it ran here."""
        with self._lock:
            if self._extra is None or self.extra_taken:
                return False
            self.extra_taken = True
        if not one_numba_thread:
            self.extra_result = self._extra()
            return True
        import numba

        prev = numba.get_num_threads()
        numba.set_num_threads(1)
        try:
            self.extra_result = self._extra()
        finally:
            numba.set_num_threads(prev)
        return True

    @property
    def exhausted(self) -> bool:
        """Every surrogate has been taken (the last ones may still be running)."""
        return self._next >= self._n

    def cancel(self) -> None:
        """Take no further surrogates or the extra task (the one in progress finishes)."""
        with self._lock:
            self._next = self._n
            self.extra_taken = True

    def run(self) -> None:
        while True:
            with self._lock:
                k = self._next
                self._next += 1
            if k >= self._n:
                return
            self.results[k] = self._one(k)


class _OrdinalScores:
    """Permutation entropy and JS complexity of the whole field (fused kernel), with surrogates.

    The observed value is computed on construction; with the 2 x 2 kernel
    and two cores the surrogates start at once on a background thread
    (``lane``), and the caller's thread joins them in :meth:`finish`.
    ``raw``: the measured heights (ties are their equalities; see ordinal_counts).
    """

    def __init__(
        self,
        zb: NDArray[np.float64],
        p: Mapping[str, Any],
        notes: list[str],
        raw: NDArray[np.float64] | None = None,
    ) -> None:
        self.lane: _SurrogateLane | None = None
        self._early: list[Score] | None = None
        self._pool: ThreadPoolExecutor | None = None
        self._sequential: Callable[[], list[tuple[float, float]]] | None = None
        order = (int(p["ordinal_order"][0]), int(p["ordinal_order"][1]))
        ties, seed = p["ordinal_ties"], int(p["surrogate_seed"])
        h, c, tie_frac, n_win, n_pat = _ordinal_hc(zb, order, ties, seed, raw)
        if n_win < MIN_WINDOWS_PER_PATTERN * n_pat:
            reason = (
                f"ordinal scores: {n_win} windows, fewer than {MIN_WINDOWS_PER_PATTERN} per "
                f"possible pattern ({n_pat})"
            )
            notes.append(reason)
            self._early = [
                _nan("permutation_entropy_2d", "1", reason),
                _nan("js_complexity_2d", "1", reason),
                Score("permutation_entropy_2d_tie_fraction", tie_frac, "1"),
            ]
            return
        tie_note = f"ties: {tie_frac:.1%} of windows hold equal heights; " + (
            "broken at random (seeded)" if ties == "random" else "earlier cell ranks lower"
        )
        if tie_frac > 0.5:
            # Random tie-breaking keeps PE within 0.02 under rounding to 0.05 Sq while
            # under about half the windows are tied (tests); beyond, the heights'
            # resolution, not the ground, sets the ordinal scores.
            tie_note += (
                "; over half the windows are tied: ordinal scores reflect the height resolution"
            )
        if tie_frac > 0:
            notes.append(tie_note)
        self._h, self._c, self._tie_frac, self._tie_note = h, c, tie_frac, tie_note
        self._wanted = [n for n in _ORDINAL_SCORES if n in p["surrogate_scores"]]
        if not (self._wanted and p["n_surrogates"] > 0):
            return
        n_sur = int(p["n_surrogates"])
        # Only the 2 x 2 kernel has a single-thread variant; the generic one is parallel.
        threaded = _WORKERS > 1 and n_sur > 1 and order == (2, 2)
        made: list[Callable[..., NDArray[np.float32]]] = []
        self._made = made

        def one(k: int) -> tuple[float, float]:
            make = made[0]
            mean = make.mean  # type: ignore[attr-defined]  # set by phase_surrogates
            # The mean is added inside the counting pass (same float32 sums).
            x = make(k, serial=threaded, centred=True, reuse=threaded)
            h_k, c_k = _ordinal_hc(x, order, ties, seed + k + 1, serial=threaded, offset=mean)[:2]
            return h_k, c_k

        if threaded:
            lane = _SurrogateLane(one, n_sur)
            self._ready = threading.Event()

            def background() -> None:
                # The amplitude spectrum too (an FFT of the grid) is made here,
                # so the caller's stages start at once.
                try:
                    made.append(phase_surrogates(zb, seed, workers=_WORKERS))
                finally:
                    self._ready.set()
                lane.run()
                lane.run_extra(one_numba_thread=True)

            self.lane = lane
            self._pool = ThreadPoolExecutor(1)
            self._future = self._pool.submit(background)
        else:
            made.append(phase_surrogates(zb, seed, workers=_WORKERS))
            self._sequential = lambda: [one(k) for k in range(n_sur)]

    def cancel(self) -> None:
        """Stop the background lane after its current surrogate (the caller failed)."""
        if self.lane is not None and self._pool is not None:
            self.lane.cancel()
            self._pool.shutdown(wait=False)

    def finish(self) -> list[Score]:
        """Join the surrogates (the calling thread takes those left) and score."""
        if self._early is not None:
            return self._early
        zs: dict[str, float | None] = dict.fromkeys(_ORDINAL_SCORES)
        sur = None
        if self.lane is not None and self._pool is not None:
            try:
                self._ready.wait()
                if self._made:  # else the set-up failed: result() raises its error
                    self.lane.run()
                self._future.result()
            finally:
                self._pool.shutdown()
            sur = np.array(self.lane.results)
        elif self._sequential is not None:
            sur = np.array(self._sequential())
        if sur is not None:
            zs["permutation_entropy_2d"] = _zscore(self._h, sur[:, 0])
            zs["js_complexity_2d"] = _zscore(self._c, sur[:, 1])
        out = [
            Score("permutation_entropy_2d", self._h, "1", surrogate_z=zs["permutation_entropy_2d"]),
            Score("js_complexity_2d", self._c, "1", surrogate_z=zs["js_complexity_2d"]),
            Score("permutation_entropy_2d_tie_fraction", self._tie_frac, "1", note=self._tie_note),
        ]
        return [
            s if s.name in self._wanted or s.surrogate_z is None else _without_z(s) for s in out
        ]


class _LaneThreads:
    """numba's thread count for this thread's parallel kernels beside a surrogate lane.

    While the ordinal surrogates run on their background thread, the
    summary's other stages run on one numba thread, so the two lanes share
    the two cores without oversubscription; :meth:`refresh` (between stages)
    gives them every thread back once the lane has no surrogate left to
    take. Every parallel kernel they call writes per-chunk or per-row
    results with chunks fixed by the input, so its output does not depend
    on the thread count.
    """

    def __init__(self, lane: _SurrogateLane | None) -> None:
        self._lane = lane
        self._prev: int | None = None

    def __enter__(self) -> _LaneThreads:
        if self._lane is not None:
            import numba

            self._prev = numba.get_num_threads()
            numba.set_num_threads(1)
            self.refresh()
        return self

    def refresh(self) -> None:
        if self._prev is not None and self._lane is not None and self._lane.exhausted:
            import numba

            numba.set_num_threads(self._prev)

    def __exit__(self, *exc: object) -> None:
        if self._prev is not None:
            import numba

            numba.set_num_threads(self._prev)


def _concurrent_parallel_ok() -> bool:
    """Whether numba's threading layer lets two threads launch parallel kernels at once."""
    import numba

    try:
        # "workqueue" is not thread-safe; "omp" and "tbb" are (numba's documentation).
        return numba.threading_layer() in ("omp", "tbb")
    except ValueError:  # no parallel kernel has run yet
        return False


def _without_z(s: Score) -> Score:
    return Score(s.name, s.value, s.unit, s.ci_low, s.ci_high, None, s.note)


def _two_part(sym: NDArray[np.int64], k: int) -> tuple[float, float, str]:
    """(effective complexity bits, total information bits/site, note) of a symbol field.

    Calls the shared two-part code; until it accepts 2-D fields this returns
    NaN with the reason.
    """
    from measures.information.two_part import two_part_code

    try:
        code = two_part_code(sym, alphabet_size=k)
    except TypeError:
        return float("nan"), float("nan"), "two_part_code does not take 2-D fields in this build"
    except ValueError as err:
        return float("nan"), float("nan"), f"two-part code not computed ({err})"
    note = getattr(code, "note", "")
    return (
        float(code.effective_complexity_bits),
        float(code.total_information_bits_per_symbol),
        note,
    )


def _field_values(x: NDArray[np.float64], p: Mapping[str, Any]) -> dict[str, tuple[float, str]]:
    """The symbol-field scores of one field: {name: (value, note)}."""
    from measures.information.entropy import entropy_density_2d
    from measures.information.symbolic import quantile_symbols

    k = int(p["quantile_bins"])
    sym = quantile_symbols(x, n_bins=k)
    out: dict[str, tuple[float, str]] = {}
    try:
        ed = entropy_density_2d(sym, max_neighbourhood=p["max_neighbourhood"])
        out["entropy_density_2d_bits"] = (ed.entropy_density, "")
        out["excess_entropy_2d_bits"] = (ed.excess_entropy, "")
    except ValueError as err:
        reason = f"entropy density not computed ({err})"
        out["entropy_density_2d_bits"] = out["excess_entropy_2d_bits"] = (float("nan"), reason)
    ec, ti, note = _two_part(sym, k)
    out["effective_complexity_2d_bits"] = (ec, note)
    out["total_information_2d_bits_per_site"] = (ti, note)
    return out


_FIELD_UNITS = {
    "entropy_density_2d_bits": "bits/site",
    "excess_entropy_2d_bits": "bits",
    "effective_complexity_2d_bits": "bits",
    "total_information_2d_bits_per_site": "bits/site",
}


def _central_tile(x: NDArray[np.float64], cells: int) -> NDArray[np.float64]:
    ny, nx = x.shape
    if ny * nx <= cells:
        return x
    side = int(np.sqrt(cells))
    ty, tx = min(ny, side), min(nx, max(side, cells // max(1, min(ny, side))))
    y0, x0 = (ny - ty) // 2, (nx - tx) // 2
    return x[y0 : y0 + ty, x0 : x0 + tx]


def _field_scores(zb: NDArray[np.float64], p: Mapping[str, Any], notes: list[str]) -> list[Score]:
    """Entropy density, excess entropy, effective complexity and total information.

    Values from the whole field; surrogate z-scores from the central tile
    (value and 2-D phase surrogates of the tile alike).
    """
    values = _field_values(zb, p)
    wanted = [n for n in _FIELD_SCORES if n in p["surrogate_scores"]]
    zs: dict[str, float | None] = dict.fromkeys(_FIELD_SCORES)
    if wanted and p["n_surrogates"] > 0:
        tile = _central_tile(zb, int(p["surrogate_tile_cells"]))
        if tile.shape != zb.shape:
            notes.append(
                f"surrogate z of the symbol-field scores: central {tile.shape[0]} x "
                f"{tile.shape[1]} tile"
            )
        ref = _field_values(tile, p)
        make = phase_surrogates(tile, int(p["surrogate_seed"]) + 7919, workers=_WORKERS)
        sur: dict[str, list[float]] = {n: [] for n in wanted}
        for k in range(p["n_surrogates"]):
            sv = _field_values(make(k).astype(np.float64), p)
            for n in wanted:
                sur[n].append(sv[n][0])
        for n in wanted:
            zs[n] = _zscore(ref[n][0], np.array(sur[n], dtype=float))
    out = []
    for n in _FIELD_SCORES:
        v, note = values[n]
        if not np.isfinite(v) and not note:
            note = "not defined on this field"
        out.append(Score(n, float(v), _FIELD_UNITS[n], surrogate_z=zs[n], note=note))
        if note and not np.isfinite(v):
            notes.append(f"{n}: {note}")
    return out


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
        Cells that hold data. ``hole_fraction`` is a score. Spectra and the
        PSD and box-counting Hurst fits use harmonically interpolated holes
        and wavelengths above 4 hole radii; below ``min_valid_fraction``
        valid cells they are NaN with a note. The information estimators
        use the interpolated surface.
    band_m : (lo, hi) in m, optional
        Animal-scale wavelength band (either side may be None). With the
        default ``hurst_band="common"`` it is also the one band every Hurst
        estimator fits; without it the common band is 4 cells to 1/8 of the
        shorter side.
    params : mapping, optional
        Overrides of :data:`TERRAIN_DEFAULTS` (unknown keys are an error).

    Returns
    -------
    TerrainSummary
        Scores (snake_case, unit suffix where dimensional): ``hole_fraction,
        sq_m, sa_m, ssk, sku, sp_m, sv_m, sz_m, sdq, sdr, sal_m, str,
        rms_slope_psd, psd_anisotropy_ratio, lay_direction_deg, psd_slope,
        hurst_<method>, fractal_dimension_<method>, hurst_<method>_r2,
        hurst_<method>_band_lo_m, hurst_<method>_band_hi_m, psd_band_lo_m,
        psd_band_hi_m, slope_entropy_bits, aspect_entropy_bits,
        permutation_entropy_2d, js_complexity_2d,
        permutation_entropy_2d_tie_fraction, entropy_density_2d_bits,
        excess_entropy_2d_bits, effective_complexity_2d_bits,
        total_information_2d_bits_per_site``. Every NaN score has a ``note``;
        the complexity scores named in ``surrogate_scores`` carry a
        ``surrogate_z`` against ``n_surrogates`` 2-D phase surrogates. The
        notes, the hillshade thumbnail and the radial PSD with its fit are
        fields of the result, for the pipeline to store.

    References
    ----------
    ISO 25178-2:2012; Jacobs, Junge & Pastewka (2017); Gneiting, Ševčíková &
    Percival (2012); Bandt & Pompe (2002), Ribeiro et al. (2012), Rosso et
    al. (2007); Feldman & Crutchfield (2003); Gell-Mann & Lloyd (1996) for
    effective complexity and total information; Theiler et al. (1992) for
    phase-randomised surrogates.
    """
    fn = "terrain_summary"
    arr, dx_f, dy_f, mask = check_grid(z, dx, dy, valid, fn, min_size=16)
    p = _merge_params(params)
    check_choice("hurst_band", p["hurst_band"], fn, ("common", "auto"))
    check_choice("ordinal_ties", p["ordinal_ties"], fn, ("random", "stable"))
    notes: list[str] = []
    band = None if band_m is None else _check_band(band_m, fn)
    hole_fraction = 0.0 if mask is None else float(1.0 - mask.mean())
    spectral_ok = 1.0 - hole_fraction >= p["min_valid_fraction"]
    hole_floor = 0.0
    if mask is not None:
        hole_floor = 4.0 * hole_scale_cells(mask) * max(dx_f, dy_f)
        notes.append(
            f"holes: {hole_fraction:.1%} of cells; spectra and Hurst fits use interpolated "
            f"holes and wavelengths above {hole_floor:.3g} m; information scores use the "
            "interpolated surface"
        )
    # Levelled once: every measure below reads zl (or its band-passed zb) and is
    # not levelled again where that would move heights by rounding only.
    check_choice("detrend", p["detrend"], "areal_parameters", ("mean", "plane"))
    acf_s = check_positive_float("acf_threshold", p["acf_threshold"], "areal_parameters")
    bpd = check_positive_int("bins_per_decade", p["psd_bins_per_decade"], "radial_psd")
    zl = level(arr if mask is None else np.nan_to_num(arr), dx_f, dy_f, mask, p["detrend"])
    zb = zl if band is None else bandpass_surface(zl, dx_f, dy_f, band_m=band, valid=mask)
    za = zl if band is None else level(zb, dx_f, dy_f, mask, p["detrend"])
    zi = zb if mask is None else inpaint_holes(zb, mask)
    # Ties are equalities of the measured heights (holes never tie); after a
    # band-pass there are none left to speak of.
    raw = None
    if band_m is None:
        raw = arr if mask is None else np.where(mask, arr, np.nan)
    # The ordinal surrogates (the largest part) start now on a background lane
    # of single-thread kernels; the stages below run beside them on one numba
    # thread, then this thread joins the surrogates left. The same numbers as
    # one stage after the other (see _SurrogateLane, _LaneThreads).
    ord_notes: list[str] = []
    ordinal = _OrdinalScores(zi, p, ord_notes, raw)
    field_notes: list[str] = []
    # The symbol-field scores go to whichever lane is free first; the background
    # lane may take them only where numba lets two threads launch parallel
    # kernels at once.
    shared_fields = ordinal.lane is not None and _concurrent_parallel_ok()
    if shared_fields and ordinal.lane is not None:
        ordinal.lane.offer(partial(_field_scores, zi, p, field_notes))
    field_scores: list[Score] = []
    try:
        with _LaneThreads(ordinal.lane) as lanes:
            # Hole-free grids: slope and aspect histograms (and, without a band, the
            # Sdq/Sdr sums of the same gradients) in one compiled pass.
            ge: GradientEntropy | None = None
            sums = None
            if mask is None:
                ge, sums = _gradient_entropy_full(zb, dx_f, dy_f, p)
            lanes.refresh()
            ap = _areal_from_levelled(
                za, dx_f, dy_f, mask, p["detrend"], acf_s, None, sums if band is None else None
            )
            del za
            scores = [
                Score("hole_fraction", hole_fraction, "1"),
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
                notes.append(
                    "str: the ACF did not decay to s in every direction; Str is an upper bound"
                )
            radial: RadialPSD | None = None
            hurst_spectrum = None
            lanes.refresh()
            if spectral_ok:
                # One periodogram of the filled, levelled, windowed grid serves the radial
                # PSD (plotted and fitted for H) and, without a band, the surface moments.
                prepared = (
                    zl
                    if mask is None
                    else level(inpaint_holes(zl, mask), dx_f, dy_f, None, "plane")
                )
                half = _half_spectrum(prepared, dx_f, dy_f, "hann")
                del prepared
                radial = _radial_from_half(half, zl.shape, dx_f, dy_f, bpd, "hann", "plane")
                r10 = (
                    radial
                    if bpd == 10
                    else _radial_from_half(half, zl.shape, dx_f, dy_f, 10, "hann", "plane")
                )
                hurst_spectrum = (r10.q, r10.psd)
                if band is None:
                    rms_slope, an = _moments_from_half(half, zl.shape, dx_f, dy_f)
                else:
                    sp2 = surface_psd(zb, dx_f, dy_f, valid=mask)
                    rms_slope, an = rms_slope_from_psd(sp2), psd_anisotropy(sp2)
                    del sp2
                del half
                scores += [
                    Score("rms_slope_psd", rms_slope, "1"),
                    Score("psd_anisotropy_ratio", an.ratio, "1"),
                    Score("lay_direction_deg", float(np.degrees(an.lay_direction_rad)), "deg"),
                ]
            else:
                reason = (
                    f"only {1 - hole_fraction:.1%} of cells hold data, below the "
                    f"{p['min_valid_fraction']:.0%} needed for a spectrum"
                )
                notes.append(f"spectral scores: {reason}")
                scores += [
                    _nan("rms_slope_psd", "1", reason),
                    _nan("psd_anisotropy_ratio", "1", reason),
                    _nan("lay_direction_deg", "deg", reason),
                ]
            lanes.refresh()
            hs, psd_fit = _hurst_scores(
                zl, dx_f, dy_f, mask, band, p, notes, hole_floor, hurst_spectrum
            )
            scores += hs
            ge = ge or gradient_entropy(
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
                Score(
                    "aspect_entropy_bits",
                    ge.aspect_entropy_bits,
                    "bits",
                    note=""
                    if np.isfinite(ge.aspect_entropy_bits)
                    else "no cell steeper than the floor",
                ),
            ]
            lanes.refresh()
            if not shared_fields:
                field_scores = _field_scores(zi, p, field_notes)
            elif ordinal.lane is not None:
                ordinal.lane.run_extra(one_numba_thread=not ordinal.lane.exhausted)
    except BaseException:
        ordinal.cancel()  # the background lane stops after its current surrogate
        raise
    scores += ordinal.finish()
    if shared_fields and ordinal.lane is not None:
        field_scores = ordinal.lane.extra_result
    scores += field_scores
    notes += ord_notes + field_notes
    del zi
    if radial is not None:
        radial_q, radial_c = radial.q, radial.psd
    else:
        radial_q = radial_c = np.array([])
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
    scores = [
        sc
        if np.isfinite(sc.value) or sc.note
        else Score(sc.name, sc.value, sc.unit, sc.ci_low, sc.ci_high, sc.surrogate_z, "undefined")
        for sc in scores
    ]
    return TerrainSummary(
        scores=tuple(scores),
        params=p,
        band_m=band,
        hillshade=thumb,
        radial_q=radial_q,
        radial_psd=radial_c,
        fit_q=fit_q,
        fit_psd=fit_psd,
        slope_counts=ge.slope_counts,
        slope_edges_deg=ge.slope_edges_deg,
        notes=tuple(notes),
    )
