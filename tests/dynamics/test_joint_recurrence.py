"""Joint recurrence (Romano et al. 2004, Phys. Lett. A 330:214) against a
brute-force count with scipy's Chebyshev distances, and its limits."""

from __future__ import annotations

import numpy as np
from scipy.spatial.distance import cdist

from measures.dynamics.recurrence import (
    joint_recurrence,
    recurrence_rate_at,
    recurrence_threshold,
)


def _brute(x, y, ex, ey, w=1):
    rx = cdist(x, x, "chebyshev") <= ex
    ry = cdist(y, y, "chebyshev") <= ey
    i, j = np.tril_indices(len(x), -w)
    return (rx[i, j] & ry[i, j]).mean(), rx[i, j].mean()


def test_joint_rate_equals_brute_force(rng) -> None:
    t = np.arange(600) / 50
    a = np.column_stack([np.sin(2 * np.pi * t), np.cos(2 * np.pi * t)])
    a += 0.05 * rng.standard_normal(a.shape)
    b = np.roll(a, 7, axis=0) + 0.05 * rng.standard_normal(a.shape)
    res = joint_recurrence(a, b, recurrence_rate=0.1, theiler=3)
    jrr, rr_x = _brute(a, b, res.threshold_x, res.threshold_y, w=3)
    assert res.jrr == jrr and res.rr_x == rr_x
    assert recurrence_rate_at(a, threshold=res.threshold_x, theiler=3, metric="maximum") == rr_x
    eps = recurrence_threshold(a, recurrence_rate=0.1, theiler=3, metric="maximum")
    assert eps == res.threshold_x


def test_synchronisation_limits(rng) -> None:
    # Identical systems: every recurrence is joint, index 1. Independent noise:
    # JRR = RR^2 in expectation, index near 0 (Romano et al. 2005, JPR).
    x = np.cumsum(rng.standard_normal((800, 2)), axis=0)
    assert joint_recurrence(x, x.copy(), recurrence_rate=0.05).synchronisation == 1.0
    # Scaled copy: rounding of x / eps can move the pairs that sit exactly at eps.
    same = joint_recurrence(x, 3.0 * x + 1.0, recurrence_rate=0.05)
    assert abs(same.synchronisation - 1.0) < 1e-3
    y = rng.standard_normal((800, 2))
    z = rng.standard_normal((800, 2))
    assert abs(joint_recurrence(y, z, recurrence_rate=0.05).synchronisation) < 0.02
