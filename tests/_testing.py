"""Project-wide numerical assertion with documented default tolerances.

Defaults: ``rtol=1e-7`` (float64 arithmetic with a few hundred operations
of round-off) and ``atol=0``. Pass an explicit ``atol`` when the expected
value is near zero, and write the reason beside any looser tolerance.
"""

from __future__ import annotations

from typing import Any

import numpy as np

DEFAULT_RTOL = 1e-7
DEFAULT_ATOL = 0.0


def assert_allclose(
    actual: Any,
    desired: Any,
    *,
    rtol: float = DEFAULT_RTOL,
    atol: float = DEFAULT_ATOL,
    err_msg: str = "",
) -> None:
    """Assert ``actual`` equals ``desired`` within ``rtol``/``atol`` (numpy semantics)."""
    np.testing.assert_allclose(actual, desired, rtol=rtol, atol=atol, err_msg=err_msg)


def crossed_study(
    rng: np.random.Generator,
    *,
    n_arenas: int,
    n_subjects: int,
    trials: int,
    slope: float,
    arena_sd: float,
    noise_sd: float,
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """A simulated crossed study (every subject on every arena, ``trials`` per cell):
    y = 1 + slope * terrain + arena offset + subject offset (sd 1) + trial noise.

    Returns (terrain per arena, y per trial, arena index, subject index). Simulated data
    for checking statistical properties (coverage, calibration), used by the tests and
    ``bench/bench_prediction.py``.
    """
    terrain = np.sort(rng.uniform(0.0, 2.0, n_arenas))
    arena = np.repeat(np.arange(n_arenas), n_subjects * trials)
    subject = np.tile(np.repeat(np.arange(n_subjects), trials), n_arenas)
    y = (
        1.0
        + slope * terrain[arena]
        + rng.normal(0, arena_sd, n_arenas)[arena]
        + rng.normal(0, 1.0, n_subjects)[subject]
        + rng.normal(0, noise_sd, arena.size)
    )
    return terrain, y, arena, subject
