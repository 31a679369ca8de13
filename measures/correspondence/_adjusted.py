"""Covariate adjustment at the arena level (private; used by ``inference`` and ``arena``).

What is used (documented in :func:`measures.arena_permutation_test`): movement and
covariates are centred within subject and averaged per arena
(:func:`arena_level_values`); the arena-level Freedman-Lane (1983) test fits the reduced
model ``arena movement ~ 1 + arena covariates``, permutes its residuals across arenas and
adds them back to its fitted values (:func:`freedman_lane_statistics`).

Vectorisation: with ``Q`` an orthonormal basis of ``[1, arena covariates]``
(:func:`nuisance_basis`, rank-revealing) the statistic of every permutation is a partial
correlation computed from ``Q`` and the permuted residuals, ``O(A (T + p) M)`` each.

The trial-level alternative (permuting terrain and re-residualising on subject indicators
and covariates, listed as Draper & Stoneman 1966 in Winkler et al. 2014, NeuroImage 92:381,
Table 2) was tried and rejected: liberal without arena noise, very conservative with it
(``tests/correspondence/test_covariates.py`` checks the arena-level test's uniform null).
"""

from __future__ import annotations

import numpy as np
from numpy.typing import NDArray


def nuisance_basis(
    n_trials: int,
    subject: NDArray[np.intp] | None,
    covariates: NDArray[np.float64] | None,
) -> NDArray[np.float64]:
    """Orthonormal basis (n_trials, p) of ``[1, subject indicators, covariates]``."""
    cols = [np.ones((n_trials, 1))]
    if subject is not None:
        n_subjects = int(subject.max()) + 1
        dummies = np.zeros((n_trials, n_subjects))
        dummies[np.arange(n_trials), subject] = 1.0
        cols = [dummies[:, np.bincount(subject, minlength=n_subjects) > 0]]
    if covariates is not None and covariates.size:
        cols.append(covariates)
    design = np.column_stack(cols)
    # Rank-revealing via SVD: collinear covariates (or a covariate constant within
    # every subject) must not break the projector, only drop a direction.
    u, s, _ = np.linalg.svd(design, full_matrices=False)
    keep = s > s[0] * max(design.shape) * np.finfo(float).eps
    return u[:, keep]


def residualise(values: NDArray[np.float64], basis: NDArray[np.float64]) -> NDArray[np.float64]:
    """``values - Q Q' values`` for (n,) or (n, k) values."""
    return values - basis @ (basis.T @ values)


def arena_level_values(
    values: NDArray[np.float64],
    arena: NDArray[np.intp],
    subject: NDArray[np.intp] | None,
    n_arenas: int,
) -> NDArray[np.float64]:
    """Unweighted arena means (A, k) of values centred within subject (when given)."""
    if subject is not None:
        basis = nuisance_basis(values.shape[0], subject, None)
        values = residualise(values, basis)
    sums = np.zeros((n_arenas, values.shape[1]))
    np.add.at(sums, arena, values)
    return sums / np.bincount(arena, minlength=n_arenas)[:, None]


def freedman_lane_statistics(
    terrain: NDArray[np.float64],
    movement_means: NDArray[np.float64],
    covariate_means: NDArray[np.float64],
    perms: NDArray[np.intp],
    *,
    chunk: int = 1024,
) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """Observed partial correlations (T, M) and Freedman-Lane hit counts (T, M).

    Arena-level model ``ybar = c + t b + Zbar g + u``. The reduced model
    ``ybar ~ 1 + Zbar`` gives fitted values and residuals ``e``; a permuted
    response is ``fitted + P e`` and its statistic the partial correlation of
    ``t`` with it given ``[1, Zbar]``. Because the residual-forming matrix ``R``
    annihilates the fitted part, that is ``(R t)' P e / (|R t| |R P e|)``, and
    ``|R P e|^2 = |e|^2 - |Q' P e|^2`` with ``Q`` an orthonormal basis of
    ``[1, Zbar]`` -- so each permutation costs ``O(A (T + p) M)``.
    ``perms[pi, a]`` is the arena whose residual arena ``a`` receives.
    """
    n_arenas = terrain.shape[0]
    basis = nuisance_basis(n_arenas, None, covariate_means)
    rt = residualise(terrain, basis)  # (A, T)
    rt_norm = np.sqrt(np.sum(rt**2, axis=0))  # (T,)
    resid = residualise(movement_means, basis)  # (A, M), e of the reduced model
    ss_e = np.sum(resid**2, axis=0)  # |P e|^2 = |e|^2 for every permutation

    def corr(perm_rows: NDArray[np.intp]) -> NDArray[np.float64]:
        pe = resid[perm_rows]  # (P, A, M)
        num = np.einsum("at,pam->ptm", rt, pe, optimize=True)
        proj = np.einsum("aj,pam->pjm", basis, pe, optimize=True)
        ss = np.maximum(ss_e[None, :] - np.sum(proj**2, axis=1), 0.0)  # (P, M)
        with np.errstate(divide="ignore", invalid="ignore"):
            out = num / (rt_norm[None, :, None] * np.sqrt(ss)[:, None, :])
        return np.where(np.isfinite(out), out, 0.0)

    observed = corr(np.arange(n_arenas)[None, :])[0]
    threshold = np.abs(observed) * (1 - 1e-12)
    hits = np.zeros_like(observed)
    for start in range(0, len(perms), chunk):
        hits += (np.abs(corr(perms[start : start + chunk])) >= threshold).sum(axis=0)
    return observed, hits


def adjust_movement(
    movement: NDArray[np.float64],
    subject: NDArray[np.intp],
    covariates: NDArray[np.float64],
) -> NDArray[np.float64]:
    """Movement minus the covariates' fitted part (reduced model with subject effects).

    The slopes ``g`` come from ``movement ~ covariates + subject`` (within-subject
    least squares); ``movement - covariates @ g`` keeps subject offsets and the
    arena structure for the rank correlation of arena means.
    """
    basis = nuisance_basis(movement.shape[0], subject, None)
    rz = residualise(covariates, basis)
    ry = residualise(movement, basis)
    coef, *_ = np.linalg.lstsq(rz, ry, rcond=None)
    return movement - covariates @ coef
