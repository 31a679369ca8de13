"""Confound checks and the design summary of a correspondence study (private).

Public names are re-exported by :mod:`measures.correspondence.inference`. Inputs follow
that module: ``terrain`` (n_arenas, n_terrain), trial-level arrays
(n_trials,), integer ``arena_index`` / ``subject_index`` codes.

References
----------
Fieller, E. C., Hartley, H. O. & Pearson, E. S. (1957). Tests for rank
correlation coefficients. I. Biometrika 44, 470-481 (variance 1.06 / (n - 3)
of Fisher's z of Spearman's rho).
Fisher, R. A. (1921). On the "probable error" of a coefficient of correlation
deduced from a small sample. Metron 1, 3-32.
Belsley, D. A., Kuh, E. & Welsch, R. E. (1980). Regression Diagnostics.
Wiley (variance inflation factors).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy import stats

from measures._validation import InvalidParameterError, as_float_array
from measures.correspondence.arena import spearman_test

#: |r| above which two terrain measures are reported as the same thing twice
#: (common practice for "near duplicates"; not a published threshold).
SAME_THING_R = 0.95
#: VIF above which a terrain measure's own effect cannot be separated from the
#: others' (10 is the usual rule of thumb; Belsley et al. 1980 discuss it).
VIF_LIMIT = 10.0
#: Spearman test level for "slower on rough ground".
SPEED_ALPHA = 0.05
#: Variance of Fisher's z of Spearman's rho is about 1.06 / (n - 3)
#: (Fieller, Hartley & Pearson 1957).
SPEARMAN_Z_VARIANCE = 1.06


@dataclass(frozen=True)
class SpeedCheck:
    """Does the covariate (speed) change with this terrain measure across arenas?"""

    terrain_measure: str
    covariate: str
    rho: float
    p_value: float
    n_arenas: int
    confounded: bool


@dataclass(frozen=True)
class BalanceCheck:
    """Subject-by-arena trial counts: counts (n_arenas, n_subjects), int."""

    counts: NDArray[np.int64]
    fill_fraction: float
    fully_crossed: bool
    balanced: bool


@dataclass(frozen=True)
class CollinearityCheck:
    """Arena-level correlation matrix and VIF of the terrain measures.

    ``n_arenas``: arenas with a value of every measure (the ones both use); ``vif`` is NaN
    (undefined) when ``n_arenas <= len(names)``.
    """

    names: tuple[str, ...]
    correlation: NDArray[np.float64]
    vif: NDArray[np.float64]
    same_pairs: tuple[tuple[str, str, float], ...]
    n_arenas: int = 0

    @property
    def vif_defined(self) -> bool:
        """Whether the arenas are enough for a VIF (more arenas than measures)."""
        return len(self.names) < 2 or self.n_arenas > len(self.names)

    def pairs_by_abs_r(self) -> list[tuple[str, str, float]]:
        """Every pair of measures with its r, most to least correlated (finite r only)."""
        k = len(self.names)
        pairs = [
            (self.names[i], self.names[j], float(self.correlation[i, j]))
            for i in range(k)
            for j in range(i + 1, k)
            if np.isfinite(self.correlation[i, j])
        ]
        return sorted(pairs, key=lambda p: -abs(p[2]))


@dataclass(frozen=True)
class DesignSummary:
    """Trial counts per arena x subject and the power hint."""

    counts: NDArray[np.int64]
    n_arenas: int
    n_subjects: int
    n_trials: int
    detectable_rho: float
    alpha: float
    power: float
    power_method: str


@dataclass(frozen=True)
class ConfoundChecks:
    """All checks with plain-language warnings."""

    speed: tuple[SpeedCheck, ...]
    balance: BalanceCheck
    collinearity: CollinearityCheck
    warnings: tuple[str, ...]


def _arena_means(
    values: NDArray[np.float64], arena: NDArray[np.intp], n_arenas: int
) -> NDArray[np.float64]:
    ok = np.isfinite(values)
    sums = np.bincount(arena[ok], weights=values[ok], minlength=n_arenas)
    counts = np.bincount(arena[ok], minlength=n_arenas)
    with np.errstate(invalid="ignore", divide="ignore"):
        return sums / counts


def terrain_speed_check(
    terrain: ArrayLike,
    speed: ArrayLike,
    arena_index: ArrayLike,
    *,
    terrain_names: Sequence[str],
    covariate_name: str = "speed_m_s",
    alpha: float = SPEED_ALPHA,
) -> tuple[SpeedCheck, ...]:
    """Spearman correlation of arena mean speed with each terrain measure.

    The arena mean is the plain mean of the arena's finite trial values. The
    p-value is exact (all ``n!`` pairings of the ranks) below 10 arenas and
    scipy's t approximation from 10 on (:func:`measures.spearman_test`); an
    asymptotic p-value from 3 arenas would claim p = 0 where the exact one is
    1/3. ``confounded`` when ``p < alpha``.

    Parameters
    ----------
    terrain : array_like, shape (n_arenas,) or (n_arenas, n_terrain)
    speed : array_like, shape (n_trials,), m/s (NaN allowed)
    arena_index : array_like of int, shape (n_trials,)
    terrain_names : sequence of str
    covariate_name : str, default "speed_m_s"
    alpha : float, default 0.05

    Returns
    -------
    tuple of SpeedCheck, one per terrain measure

    References
    ----------
    Spearman, C. (1904). Am. J. Psychol. 15, 72-101.
    Good, P. (2005). Permutation, Parametric and Bootstrap Tests of Hypotheses (exact).
    """
    fn = "terrain_speed_check"
    t = as_float_array("terrain", terrain, fn, ndim=(1, 2), allow_nan=True)
    t = t.reshape(t.shape[0], -1)
    v = as_float_array("speed", speed, fn, ndim=1, allow_nan=True)
    arena = np.asarray(arena_index, dtype=np.intp)
    if arena.shape != v.shape or len(terrain_names) != t.shape[1]:
        raise InvalidParameterError("arena_index", fn, "one code per trial", arena_index)
    v_bar = _arena_means(v, arena, t.shape[0])
    out = []
    for name, col in zip(terrain_names, t.T, strict=True):
        ok = np.isfinite(col) & np.isfinite(v_bar)
        res = spearman_test(col[ok], v_bar[ok])
        rho, p = res.rho, res.p_value
        out.append(SpeedCheck(name, covariate_name, rho, p, int(ok.sum()), bool(p < alpha)))
    return tuple(out)


def subject_arena_balance(
    arena_index: ArrayLike, subject_index: ArrayLike, *, n_arenas: int | None = None
) -> BalanceCheck:
    """Counts of trials per (arena, subject), the filled fraction and balance flags.

    ``fully_crossed``: every subject walked every arena; ``balanced``: and with
    the same number of trials in every cell.

    Examples
    --------
    >>> subject_arena_balance([0, 0, 1, 1], [0, 1, 0, 1]).balanced
    True
    """
    arena = np.asarray(arena_index, dtype=np.intp)
    _, subject = np.unique(np.asarray(subject_index), return_inverse=True)
    n_a = int(arena.max()) + 1 if n_arenas is None else n_arenas
    n_s = int(subject.max()) + 1
    counts = np.zeros((n_a, n_s), dtype=np.int64)
    np.add.at(counts, (arena, subject), 1)
    filled = counts > 0
    crossed = bool(filled.all())
    return BalanceCheck(
        counts=counts,
        fill_fraction=float(filled.mean()),
        fully_crossed=crossed,
        balanced=crossed and bool(counts.min() == counts.max()),
    )


def collinearity_check(
    terrain: ArrayLike, *, terrain_names: Sequence[str], threshold: float = SAME_THING_R
) -> CollinearityCheck:
    """Pearson correlations and variance inflation factors of terrain measures.

    VIF_j = 1 / (1 - R_j^2), R_j^2 from the least-squares regression of measure
    j on an intercept and the other measures, over arenas where all are finite
    (Belsley, Kuh & Welsch 1980). Infinite when the others explain it exactly;
    NaN (undefined) when there are no more arenas than measures: the regression
    has ``k`` coefficients, so ``n <= k`` arenas fit it exactly whatever the
    terrain, and a VIF there says nothing about the measures.

    Examples
    --------
    >>> collinearity_check([[0.0, 1.0], [1.0, 0.0], [2.0, 2.0]],
    ...                    terrain_names=["a", "b"]).vif.round(3).tolist()
    [1.333, 1.333]
    """
    fn = "collinearity_check"
    t = as_float_array("terrain", terrain, fn, ndim=(1, 2), allow_nan=True)
    t = t.reshape(t.shape[0], -1)
    if len(terrain_names) != t.shape[1]:
        raise InvalidParameterError("terrain_names", fn, "one name per column", terrain_names)
    t = t[np.isfinite(t).all(axis=1)]
    n, k = t.shape
    with np.errstate(invalid="ignore", divide="ignore"):
        corr = np.corrcoef(t, rowvar=False).reshape(k, k) if n >= 2 else np.full((k, k), np.nan)
    vif = np.full(k, np.inf)
    for j in range(k):
        y = t[:, j] - t[:, j].mean()
        tss = float(y @ y)
        if k == 1 and tss > 0:
            vif[j] = 1.0
            continue
        if n <= k:
            vif[j] = np.nan
            continue
        if tss == 0:
            continue
        others = np.column_stack([np.ones(n), np.delete(t, j, axis=1)])
        coef, *_ = np.linalg.lstsq(others, t[:, j], rcond=None)
        rss = float(np.sum((t[:, j] - others @ coef) ** 2))
        r2 = 1.0 - rss / tss
        vif[j] = 1.0 / (1.0 - r2) if r2 < 1.0 - 1e-12 else np.inf
    pairs = tuple(
        (terrain_names[i], terrain_names[j], float(corr[i, j]))
        for i in range(k)
        for j in range(i + 1, k)
        if np.isfinite(corr[i, j]) and abs(corr[i, j]) > threshold
    )
    return CollinearityCheck(tuple(terrain_names), corr, vif, pairs, n)


def detectable_rank_correlation(n_arenas: int, *, alpha: float = 0.05, power: float = 0.8) -> float:
    """Smallest |Spearman rho| of arena values detectable with ``n_arenas``.

    Fisher-z approximation: ``atanh(rho) * sqrt((n - 3) / 1.06) = z_{1-alpha/2} +
    z_{power}`` (two-sided level ``alpha``, the far tail ignored), with the
    variance 1.06 / (n - 3) of Fisher's z of Spearman's rho (Fieller, Hartley &
    Pearson 1957). NaN when ``n_arenas <= 3`` or when an exact permutation test
    cannot reach ``alpha`` at all (``2 / n! > alpha``). Checked against a direct
    simulation of an arena-level permutation test in ``tests/test_confounds.py``.

    Examples
    --------
    >>> round(detectable_rank_correlation(20), 2)
    0.6
    """
    if n_arenas <= 3 or 2.0 / math.factorial(min(n_arenas, 20)) > alpha:
        return math.nan
    z = stats.norm.ppf(1 - alpha / 2) + stats.norm.ppf(power)
    return float(math.tanh(z * math.sqrt(SPEARMAN_Z_VARIANCE / (n_arenas - 3))))


def design_summary(
    arena_index: ArrayLike,
    subject_index: ArrayLike,
    *,
    n_arenas: int | None = None,
    alpha: float = 0.05,
    power: float = 0.8,
) -> DesignSummary:
    """Arenas x subjects trial counts and the power hint of the arena-level test."""
    balance = subject_arena_balance(arena_index, subject_index, n_arenas=n_arenas)
    n_a = balance.counts.shape[0]
    return DesignSummary(
        counts=balance.counts,
        n_arenas=n_a,
        n_subjects=balance.counts.shape[1],
        n_trials=int(balance.counts.sum()),
        detectable_rho=detectable_rank_correlation(n_a, alpha=alpha, power=power),
        alpha=alpha,
        power=power,
        power_method="Fisher z of Spearman rho, variance 1.06/(n-3) (Fieller et al. 1957)",
    )


def collinearity_notes(coll: CollinearityCheck) -> list[str]:
    """What the VIFs and the pairwise r of the terrain measures say, in plain words.

    Undefined VIFs (no more arenas than measures) are said to be undefined rather than
    reported as "above 10"; otherwise the measures above :data:`VIF_LIMIT` are named, with
    the arena count; and the least correlated pair says how distinct the measures are.
    """
    k = len(coll.names)
    if k < 2:
        return []
    notes = []
    names = list(coll.names)
    if not coll.vif_defined:
        notes.append(
            f"Variance inflation factors of the terrain measures {names} are undefined: "
            f"{coll.n_arenas} arenas have values of all {k}, and a VIF regresses each on the "
            f"other {k - 1} and an intercept ({k} coefficients), which {coll.n_arenas} arenas "
            "fit exactly whatever the terrain. Whether their effects can be told apart is not "
            "measurable with these arenas; the pairwise r below is."
        )
    else:
        high = [n for n, v in zip(names, coll.vif, strict=True) if v > VIF_LIMIT]
        df = coll.n_arenas - k
        rough = (
            f" With {df} residual degree(s) of freedom per VIF regression these VIFs are "
            "themselves rough."
            if df <= 3
            else ""
        )
        if len(high) > 1:
            notes.append(
                f"Terrain measures {high} have variance inflation factors above {VIF_LIMIT:g} "
                f"over {coll.n_arenas} arenas (checked with {names}): their separate effects "
                f"cannot be told apart with these arenas.{rough}"
            )
    pairs = coll.pairs_by_abs_r()
    if pairs:
        a, b, r = pairs[0]
        c, d, r_low = pairs[-1]
        distinct = sum(abs(p[2]) < SAME_THING_R for p in pairs)
        notes.append(
            f"Terrain measures {names} over {coll.n_arenas} arenas: |r| between two of them "
            f"ranges from {abs(r_low):.2f} ({c!r} vs {d!r}) to {abs(r):.2f} ({a!r} vs {b!r}); "
            f"{distinct} of {len(pairs)} pairs have |r| < {SAME_THING_R:g}."
        )
    return notes


def confound_checks(
    terrain: ArrayLike,
    arena_index: ArrayLike,
    subject_index: ArrayLike,
    *,
    terrain_names: Sequence[str],
    speed: ArrayLike | None = None,
    covariate_name: str = "speed_m_s",
) -> ConfoundChecks:
    """Speed vs terrain, subject-by-arena balance, terrain collinearity, with warnings."""
    t = np.asarray(terrain, dtype=np.float64).reshape(np.shape(terrain)[0], -1)
    arena = np.asarray(arena_index, dtype=np.intp)
    speed_rows = (
        ()
        if speed is None
        else terrain_speed_check(
            t, speed, arena, terrain_names=terrain_names, covariate_name=covariate_name
        )
    )
    balance = subject_arena_balance(arena, subject_index, n_arenas=t.shape[0])
    coll = collinearity_check(t, terrain_names=terrain_names)
    notes = []
    for row in speed_rows:
        if row.confounded:
            trend = "slower" if row.rho < 0 else "faster"
            notes.append(
                f"Animals are {trend} where {row.terrain_measure!r} is higher (Spearman rho "
                f"{row.rho:.2f}, p = {row.p_value:.3g}, {row.n_arenas} arenas): a terrain effect "
                f"on movement may be a {row.covariate!r} effect; name it as a covariate."
            )
    if not balance.fully_crossed:
        notes.append(
            f"Unbalanced design: {balance.fill_fraction:.0%} of subject x arena cells have "
            "trials, so arena differences are partly differences between animals."
        )
    elif not balance.balanced:
        notes.append("Every subject walked every arena, but with unequal trial counts.")
    for a, b, r in coll.same_pairs:
        notes.append(
            f"Terrain measures {a!r} and {b!r} are the same thing twice across these arenas "
            f"(r = {r:.3f}); their correspondences are not separate findings."
        )
    notes.extend(collinearity_notes(coll))
    return ConfoundChecks(speed_rows, balance, coll, tuple(notes))
