"""Local correspondence: the ground under the animal, window by window.

For an overground trial the body-frame origin traces a path across the
arena. Each analysis window of the movement (windowed RQA, entropy rate of
each window's ordinal symbols, ...) is paired with the terrain *patch* the
animal crossed during that window: the axis-aligned rectangle of heightmap
cells that covers the window's path, widened by a margin (typically half a
body width). The patch is scored with the same estimators as a whole scan:
Sq (ISO 25178-2) and the 2D normalised permutation entropy and
Jensen-Shannon complexity (Ribeiro et al. 2012).

Window-level movement complexity is then related to local terrain
complexity

- *within* each trial: the Spearman correlation over its windows;
- *across* trials: the random-intercept model ``movement ~ terrain + (1 | trial)``
  (:func:`measures.fit_random_intercept`, windows nested in trials).

Neighbouring windows are not independent: the path crosses the same stretch of
ground and gait drifts slowly. The caller should use non-overlapping windows
(the service does), and the p-values here do not assume independence: they
come from cyclic shifts of each trial's terrain series against its movement
series (a torus-translation test), which keeps the autocorrelation of both
series and breaks only their alignment. Within a trial of n windows every
shift is enumerated (exact; the smallest attainable p is 1/n); across trials
independent random shifts per trial are drawn. The mixed model's Wald p treats
windows as exchangeable within a trial and is reported for reference only.

References
----------
Ribeiro, H. V., Zunino, L., Lenzi, E. K., Santoro, P. A. & Mendes, R. S.
(2012). Complexity-entropy causality plane as a complexity measure for
two-dimensional patterns. PLoS ONE 7, e40689.
Harms, K. E., Condit, R., Hubbell, S. P. & Foster, R. B. (2001). Habitat
associations of trees and shrubs in a 50-ha neotropical forest plot.
J. Ecol. 89, 947-959 (torus-translation test; citation from memory).
ISO 25178-2:2012 (Sq).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy import stats

from measures._validation import (
    InsufficientDataError,
    InvalidParameterError,
    as_float_array,
    check_positive_float,
    check_positive_int,
)
from measures.correspondence.inference import fit_random_intercept
from measures.dynamics.embedding import delay_embed
from measures.dynamics.recurrence import windowed_rqa
from measures.information.entropy import entropy_rate
from measures.information.ordinal import complexity_entropy
from measures.information.symbolic import ordinal_patterns
from measures.terrain.areal import areal_parameters

__all__ = [
    "LocalCorrespondence",
    "LocalCorrespondenceRow",
    "TerrainPatches",
    "WindowMovement",
    "local_correspondence",
    "window_movement_measures",
    "window_terrain_patches",
]

#: Names of the patch measures, in the column order of :attr:`TerrainPatches.values`.
PATCH_MEASURES = ("patch_sq_m", "patch_permutation_entropy_2d", "patch_js_complexity_2d")


@dataclass(frozen=True)
class TerrainPatches:
    """Terrain patch under the animal for each window.

    Attributes
    ----------
    centre_xy_m : ndarray, shape (n_windows, 2)
        Mean path position in the window (heightmap frame, m).
    bounds_ij : ndarray of int, shape (n_windows, 4)
        ``(row_lo, row_hi, col_lo, col_hi)`` of the patch (half-open), -1 when empty.
    sq_m, permutation_entropy_2d, js_complexity_2d : ndarray, shape (n_windows,)
        Patch measures; NaN when the patch is too small, off the grid or has holes
        (the ordinal measures need every cell).
    coverage : ndarray, shape (n_windows,)
        Fraction of the window's path samples that fall on the grid.
    names : tuple of str
        :data:`PATCH_MEASURES`.
    """

    centre_xy_m: NDArray[np.float64]
    bounds_ij: NDArray[np.intp]
    sq_m: NDArray[np.float64]
    permutation_entropy_2d: NDArray[np.float64]
    js_complexity_2d: NDArray[np.float64]
    coverage: NDArray[np.float64]
    names: tuple[str, ...] = PATCH_MEASURES

    @property
    def values(self) -> NDArray[np.float64]:
        """Patch measures as columns, shape (n_windows, 3)."""
        return np.column_stack([self.sq_m, self.permutation_entropy_2d, self.js_complexity_2d])


def _cell_range(lo: float, hi: float, origin: float, step: float, n: int) -> tuple[int, int]:
    # Cell i has its centre at origin + (i + 0.5) step (the rasteriser's convention).
    first = max(0, math.ceil((lo - origin) / step - 0.5))
    last = min(n - 1, math.floor((hi - origin) / step - 0.5))
    return first, last + 1


def _patch_scores(
    patch: NDArray[np.float64], dx: float, dy: float, order: tuple[int, int]
) -> tuple[float, float, float]:
    ok = np.isfinite(patch)
    if patch.shape[0] < 2 or patch.shape[1] < 2 or ok.sum() < 4:
        return (math.nan,) * 3
    sq = areal_parameters(patch, dx, dy, valid=ok).Sq
    if not ok.all():
        return sq, math.nan, math.nan
    try:
        h, c = complexity_entropy(patch, order=order)
    except InsufficientDataError:
        h = c = math.nan
    return sq, h, c


def window_terrain_patches(
    path_xy: ArrayLike,
    *,
    time_s: ArrayLike,
    window_start_s: ArrayLike,
    window_stop_s: ArrayLike,
    z: ArrayLike,
    dx_m: float,
    dy_m: float | None = None,
    origin_xy_m: Sequence[float] = (0.0, 0.0),
    margin_m: float = 0.0,
    ordinal_order: tuple[int, int] = (2, 2),
) -> TerrainPatches:
    """Score the heightmap patch the path crosses in each window.

    Parameters
    ----------
    path_xy : array_like, shape (n, 2), m
        Path of the body-frame origin in the heightmap's frame (NaN for gaps).
    time_s : array_like, shape (n,), s
        Sample times of ``path_xy``.
    window_start_s, window_stop_s : array_like, shape (n_windows,), s
        Window bounds (inclusive) on the same clock.
    z : array_like, shape (ny, nx), m
        Heights; NaN for holes. Row i is y, column j is x.
    dx_m, dy_m : float, m
        Grid spacing along x and y; ``dy_m`` defaults to ``dx_m``.
    origin_xy_m : (x0, y0), m, default (0, 0)
        Corner of the grid: cell (i, j) has its centre at
        ``(x0 + (j + 0.5) dx, y0 + (i + 0.5) dy)``.
    margin_m : float, m, default 0
        Widening of the path's bounding box on every side (half a body width
        makes the patch the strip the body covered).
    ordinal_order : (int, int), default (2, 2)
        Patch of the 2D ordinal patterns; needs ``10 (dx dy)!`` windows in the patch.

    Returns
    -------
    TerrainPatches

    References
    ----------
    ISO 25178-2:2012 (Sq); Ribeiro et al. (2012), PLoS ONE 7:e40689 (2D ordinal patterns).

    Examples
    --------
    >>> z = np.zeros((40, 40)); z[:, 20:] = np.indices((40, 20)).sum(0) % 2 * 2e-3 - 1e-3
    >>> t = np.linspace(0, 1, 101); xy = np.column_stack([0.3 + 0.05 * t, np.full(101, 0.2)])
    >>> p = window_terrain_patches(xy, time_s=t, window_start_s=[0.0], window_stop_s=[1.0],
    ...     z=z, dx_m=0.01, margin_m=0.05)
    >>> float(round(p.sq_m[0], 6))
    0.001
    """
    fn = "window_terrain_patches"
    xy = as_float_array("path_xy", path_xy, fn, ndim=2, allow_nan=True)
    if xy.shape[1] != 2:
        raise InvalidParameterError("path_xy", fn, "an array of shape (n, 2)", xy)
    t = as_float_array("time_s", time_s, fn, ndim=1)
    if t.size != xy.shape[0]:
        raise InvalidParameterError("time_s", fn, f"one time per path sample ({xy.shape[0]})", t)
    lo = as_float_array("window_start_s", window_start_s, fn, ndim=1)
    hi = as_float_array("window_stop_s", window_stop_s, fn, ndim=1)
    if lo.shape != hi.shape or np.any(hi < lo):
        raise InvalidParameterError("window_stop_s", fn, "window_start_s <= stop, same shape", hi)
    grid = as_float_array("z", z, fn, ndim=2, min_length=2, allow_nan=True)
    dx = check_positive_float("dx_m", dx_m, fn)
    dy = dx if dy_m is None else check_positive_float("dy_m", dy_m, fn)
    x0, y0 = (float(v) for v in origin_xy_m)
    if not (math.isfinite(margin_m) and margin_m >= 0):
        raise InvalidParameterError("margin_m", fn, "a finite length >= 0 (m)", margin_m)
    order = (int(ordinal_order[0]), int(ordinal_order[1]))
    ny, nx = grid.shape
    n_w = lo.size
    centre = np.full((n_w, 2), np.nan)
    bounds = np.full((n_w, 4), -1, dtype=np.intp)
    scores = np.full((n_w, 3), np.nan)
    coverage = np.zeros(n_w)
    on_grid = (
        (xy[:, 0] >= x0)
        & (xy[:, 0] <= x0 + nx * dx)
        & (xy[:, 1] >= y0)
        & (xy[:, 1] <= y0 + ny * dy)
    )
    for w in range(n_w):
        inside = (t >= lo[w]) & (t <= hi[w])
        pts = xy[inside & np.isfinite(xy).all(axis=1)]
        if pts.shape[0] == 0:
            continue
        coverage[w] = float(on_grid[inside].mean())
        centre[w] = pts.mean(axis=0)
        (xa, ya), (xb, yb) = pts.min(axis=0) - margin_m, pts.max(axis=0) + margin_m
        c0, c1 = _cell_range(xa, xb, x0, dx, nx)
        r0, r1 = _cell_range(ya, yb, y0, dy, ny)
        if c1 - c0 < 2 or r1 - r0 < 2:
            continue
        bounds[w] = (r0, r1, c0, c1)
        scores[w] = _patch_scores(grid[r0:r1, c0:c1], dx, dy, order)
    return TerrainPatches(centre, bounds, scores[:, 0], scores[:, 1], scores[:, 2], coverage)


@dataclass(frozen=True)
class WindowMovement:
    """Movement measures of consecutive non-overlapping windows of one signal.

    Attributes
    ----------
    window_start_s, window_stop_s : ndarray, shape (n_windows,)
        First and last sample time each window's measures depend on (the
        delay vectors of a window reach ``(dimension - 1) delay`` samples past it).
    values : dict of str to ndarray, shape (n_windows,)
        ``rqa_det``, ``rqa_lam``, ``rqa_rr``, ``rqa_entr`` (nats) and
        ``entropy_rate_bits`` (bits/symbol; ordinal symbols of each window).
    window_samples : int
    """

    window_start_s: NDArray[np.float64]
    window_stop_s: NDArray[np.float64]
    values: dict[str, NDArray[np.float64]]
    window_samples: int


def window_movement_measures(
    signal: ArrayLike,
    *,
    frame_rate_hz: float,
    window_s: float,
    delay: int,
    dimension: int,
    start_time_s: float = 0.0,
    recurrence_rate: float = 0.05,
    theiler: int | None = None,
    symbol_order: int = 2,
    seed: int = 0,
) -> WindowMovement:
    """Windowed RQA and entropy rate of a signal in non-overlapping windows.

    The signal is delay-embedded once, and :func:`measures.windowed_rqa` runs
    on windows of ``window_s`` with a step of one window, so no two windows
    share a delay vector. Each window's entropy rate is the block estimate of
    the ordinal symbols (order ``symbol_order``, the embedding delay) of the
    samples the window's vectors span; NaN when too few symbols.

    Parameters
    ----------
    signal : array_like, shape (n,)
        Analysis signal sampled at ``frame_rate_hz`` without gaps.
    frame_rate_hz, window_s : float
    delay, dimension : int
        Embedding delay (samples) and dimension.
    start_time_s : float, default 0
        Time of the first sample (to put windows on the trial clock).
    recurrence_rate : float, default 0.05
        Fixed recurrence rate per window (its threshold is chosen per window).
    theiler : int, optional
        Theiler window in samples; default the delay.
    symbol_order : int, default 2
    seed : int, default 0

    Returns
    -------
    WindowMovement

    References
    ----------
    N. Marwan et al. (2007), Phys. Rep. 438:237 (windowed RQA); C. Bandt &
    B. Pompe (2002), Phys. Rev. Lett. 88:174102 (ordinal symbols).
    """
    fn = "window_movement_measures"
    x = as_float_array("signal", signal, fn, ndim=1, min_length=8)
    delay = check_positive_int("delay", delay, fn)
    dimension = check_positive_int("dimension", dimension, fn)
    points = delay_embed(x, dimension=dimension, delay=delay)
    res = windowed_rqa(
        points, frame_rate_hz=frame_rate_hz, window_s=window_s, step_s=window_s,
        recurrence_rate=recurrence_rate, theiler=delay if theiler is None else theiler,
        seed=seed,
    )  # fmt: skip
    win, span = res.window_samples, (dimension - 1) * delay
    starts = np.round(res.time_s * frame_rate_hz - (win - 1) / 2.0).astype(np.intp)
    rates = np.full(starts.size, np.nan)
    for w, a in enumerate(starts):
        try:
            symbols = ordinal_patterns(x[a : a + win + span], order=symbol_order, delay=delay)
            rates[w] = entropy_rate(symbols)
        except InsufficientDataError:
            pass
    values = {
        "rqa_det": res.det,
        "rqa_lam": res.lam,
        "rqa_rr": res.rr,
        "rqa_entr": res.entr,
        "entropy_rate_bits": rates,
    }
    return WindowMovement(
        window_start_s=start_time_s + starts / frame_rate_hz,
        window_stop_s=start_time_s + (starts + win - 1 + span) / frame_rate_hz,
        values=values,
        window_samples=win,
    )


@dataclass(frozen=True)
class LocalCorrespondenceRow:
    """One patch measure x window movement measure pair.

    Attributes
    ----------
    slope, ci_low, ci_high, mixed_p_value : float
        Random-intercept model over windows, trial as the group (Wald; for
        reference, since it treats windows within a trial as exchangeable).
    p_value : float
        Torus-translation p-value across trials (independent cyclic shifts of
        each trial's terrain series; Monte Carlo, (1 + b) / (1 + B)).
    statistic : float
        Pooled correlation of within-trial-centred terrain and movement.
    rho_within : ndarray, shape (n_trials,)
        Spearman correlation within each trial (NaN when fewer than 3 windows or constant).
    p_within : ndarray, shape (n_trials,)
        Exact cyclic-shift p-value of ``rho_within`` (all n shifts, identity included).
    n_trials, n_windows : int
        Trials and windows with both values finite.
    """

    terrain_measure: str
    movement_measure: str
    slope: float
    ci_low: float
    ci_high: float
    mixed_p_value: float
    p_value: float
    statistic: float
    rho_within: NDArray[np.float64]
    p_within: NDArray[np.float64]
    n_trials: int
    n_windows: int

    @property
    def rho_within_median(self) -> float:
        """Median of the finite within-trial correlations (NaN when there are none)."""
        ok = np.isfinite(self.rho_within)
        return float(np.median(self.rho_within[ok])) if ok.any() else math.nan


@dataclass(frozen=True)
class LocalCorrespondence:
    """Every pair's row; ``trial_codes`` orders the within-trial arrays."""

    rows: tuple[LocalCorrespondenceRow, ...]
    trial_codes: NDArray[np.intp]
    n_permutations: int


def _shift_rho(t: NDArray[np.float64], m: NDArray[np.float64]) -> tuple[float, float]:
    """Spearman rho and its exact cyclic-shift p-value for one trial."""
    n = t.size
    if n < 3 or np.ptp(t) == 0 or np.ptp(m) == 0:
        return math.nan, math.nan
    rt = stats.rankdata(t)
    rm = stats.rankdata(m)
    rt = (rt - rt.mean()) / np.linalg.norm(rt - rt.mean())
    rm = (rm - rm.mean()) / np.linalg.norm(rm - rm.mean())
    shifts = (np.arange(n)[:, None] + np.arange(n)[None, :]) % n  # row k: shift by k
    null = rt[shifts] @ rm
    observed = null[0]
    return float(observed), float(np.mean(np.abs(null) >= abs(observed) * (1 - 1e-12)))


def _pooled_shift_test(
    t: NDArray[np.float64],
    m: NDArray[np.float64],
    trial: NDArray[np.intp],
    n_permutations: int,
    rng: np.random.Generator,
) -> tuple[float, float]:
    order = np.argsort(trial, kind="stable")
    t, m, trial = t[order], m[order], trial[order]
    codes, starts, counts = np.unique(trial, return_index=True, return_counts=True)
    tc = t - np.repeat(np.add.reduceat(t, starts) / counts, counts)
    mc = m - np.repeat(np.add.reduceat(m, starts) / counts, counts)
    den = math.sqrt(float(tc @ tc) * float(mc @ mc))
    if den == 0:
        return math.nan, math.nan
    observed = float(tc @ mc) / den
    # Each trial's terrain series is rotated by its own random shift: index
    # start + (k + s) mod n for k = 0..n-1.
    shift = rng.integers(0, counts[None, :], size=(n_permutations, codes.size))
    local = np.arange(t.size) - np.repeat(starts, counts)
    idx = np.repeat(starts, counts) + (
        local[None, :] + np.repeat(shift, counts, axis=1)
    ) % np.repeat(counts, counts)
    null = tc[idx] @ mc / den
    hits = int(np.sum(np.abs(null) >= abs(observed) * (1 - 1e-12)))
    return observed, (1 + hits) / (1 + n_permutations)


def _pair_row(
    t: NDArray[np.float64],
    m: NDArray[np.float64],
    trial: NDArray[np.intp],
    codes: NDArray[np.intp],
    names: tuple[str, str],
    n_permutations: int,
    rng: np.random.Generator,
) -> LocalCorrespondenceRow:
    ok = np.isfinite(t) & np.isfinite(m)
    t, m, trial = t[ok], m[ok], trial[ok]
    rho = np.full(codes.size, np.nan)
    p_in = np.full(codes.size, np.nan)
    for k, code in enumerate(codes):
        sel = trial == code
        rho[k], p_in[k] = _shift_rho(t[sel], m[sel])
    mixed = (math.nan,) * 4
    statistic = p_value = math.nan
    if t.size >= 4 and np.unique(trial).size >= 1 and np.ptp(t) > 0:
        try:
            fit = fit_random_intercept(m, t, trial)
            mixed = (fit.slope, fit.ci_low, fit.ci_high, fit.p_value)
        except (InvalidParameterError, np.linalg.LinAlgError):
            pass
        statistic, p_value = _pooled_shift_test(t, m, trial, n_permutations, rng)
    return LocalCorrespondenceRow(
        terrain_measure=names[0],
        movement_measure=names[1],
        slope=float(mixed[0]),
        ci_low=float(mixed[1]),
        ci_high=float(mixed[2]),
        mixed_p_value=float(mixed[3]),
        p_value=float(p_value),
        statistic=float(statistic),
        rho_within=rho,
        p_within=p_in,
        n_trials=int(np.unique(trial).size),
        n_windows=int(t.size),
    )


def local_correspondence(
    terrain: ArrayLike,
    movement: ArrayLike,
    trial_index: ArrayLike,
    *,
    terrain_names: Sequence[str],
    movement_names: Sequence[str],
    n_permutations: int = 999,
    seed: int = 0,
) -> LocalCorrespondence:
    """Relate window movement measures to the terrain patch of each window.

    Parameters
    ----------
    terrain : array_like, shape (n_windows, n_terrain)
        Patch measures per window (e.g. :attr:`TerrainPatches.values`); NaN allowed.
    movement : array_like, shape (n_windows, n_movement)
        Movement measures per window (windowed RQA DET, entropy rate, ...); NaN allowed.
    trial_index : array_like of int, shape (n_windows,)
        Trial of each window. Windows of one trial must be in time order.
    terrain_names, movement_names : sequence of str
    n_permutations : int, default 999
        Random cyclic-shift draws for the across-trial p-value.
    seed : int, default 0

    Returns
    -------
    LocalCorrespondence
        One row per pair; each pair uses the windows where both values are finite.

    References
    ----------
    Laird & Ware (1982), Biometrics 38:963 (random-intercept model); Harms et al.
    (2001), J. Ecol. 89:947 (torus translation; from memory).
    """
    fn = "local_correspondence"
    t = as_float_array("terrain", terrain, fn, ndim=(1, 2), allow_nan=True)
    m = as_float_array("movement", movement, fn, ndim=(1, 2), allow_nan=True)
    t = t.reshape(t.shape[0], -1)
    m = m.reshape(m.shape[0], -1)
    if t.shape[0] != m.shape[0]:
        raise InvalidParameterError("movement", fn, f"{t.shape[0]} rows like terrain", m)
    if len(terrain_names) != t.shape[1] or len(movement_names) != m.shape[1]:
        raise InvalidParameterError(
            "terrain_names", fn, "one name per column of terrain and movement", terrain_names
        )
    trial = np.asarray(trial_index)
    if trial.shape != (t.shape[0],) or not np.issubdtype(trial.dtype, np.integer):
        raise InvalidParameterError(
            "trial_index", fn, f"integer codes of shape ({t.shape[0]},)", trial
        )
    n_permutations = check_positive_int("n_permutations", n_permutations, fn)
    rng = np.random.default_rng(seed)
    codes = np.unique(trial).astype(np.intp)
    rows = [
        _pair_row(t[:, i], m[:, j], trial.astype(np.intp), codes, (tn, mn), n_permutations, rng)
        for i, tn in enumerate(terrain_names)
        for j, mn in enumerate(movement_names)
    ]
    return LocalCorrespondence(tuple(rows), codes, n_permutations)
