"""Tests for measures.information.mutual_info (KSG estimator).

Sources: the bivariate-Gaussian value I = -1/2 ln(1 - rho^2) nats (CHECKS H1
[ANALYTIC]); Kraskov, Stögbauer & Grassberger (2004), Phys. Rev. E 69:066138,
algorithm 1; scikit-learn's ``mutual_info_regression`` (a KSG implementation,
CHECKS H1 [ORACLE]) as a general-purpose reference.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from _testing import assert_allclose
from sklearn.feature_selection import mutual_info_regression

from measures import InvalidParameterError, ksg_mutual_information


def gaussian_pair(rho, n, seed):
    rng = np.random.default_rng(seed)
    z = rng.multivariate_normal([0.0, 0.0], [[1.0, rho], [rho, 1.0]], size=n)
    return z[:, 0], z[:, 1]


@pytest.mark.parametrize(("rho", "band"), [(0.5, 0.06), (0.9, 0.09)])
def test_single_draw_bivariate_gaussian(rho, band):
    # CHECKS H1: single draw at N = 2000, bands of 3 sd (0.06 and 0.09 nats).
    x, y = gaussian_pair(rho, 2000, seed=12345)
    est = ksg_mutual_information(x, y, unit="nats")
    assert abs(est.value - (-0.5 * math.log(1 - rho**2))) < band


def test_replicate_mean_bivariate_gaussian():
    # CHECKS H1: 20 replicates of N = 2000 at rho = 0.5, mean within 0.01 of
    # 0.143841 nats (oracle mean 0.1462).
    values = [
        ksg_mutual_information(*gaussian_pair(0.5, 2000, seed=s), unit="nats").value
        for s in range(20)
    ]
    assert abs(np.mean(values) - 0.143841) < 0.01


def test_independent_variables_near_zero():
    # CHECKS H1: |I| < 0.02 nats at N = 2000 for rho = 0.
    x, y = gaussian_pair(0.0, 2000, seed=1)
    assert abs(ksg_mutual_information(x, y, unit="nats").value) < 0.02


@pytest.mark.parametrize("rho", [0.0, 0.5, 0.9])
def test_agrees_with_scikit_learn(rho):
    # scikit-learn 1.9 `mutual_info_regression(n_neighbors=3)` runs the same
    # algorithm (unit-SD scaling, 1e-10 jitter, strict max-norm counts); the
    # jitter draws differ but cannot reorder neighbours of continuous data, so
    # the values agree to round-off (it clips at 0, hence max(0, .)).
    x, y = gaussian_pair(rho, 1500, seed=4)
    ref = mutual_info_regression(x[:, None], y, n_neighbors=3, random_state=0)[0]
    ours = ksg_mutual_information(x, y, k=3, unit="nats").value
    assert_allclose(max(ours, 0.0), ref, rtol=1e-9, atol=1e-12)


def test_multivariate_x():
    # I((x1, x2); y) = I(x1; y) when x2 is independent of (x1, y) (chain rule,
    # Cover & Thomas 2006, Thm 2.5.2); for Gaussians I(x1; y) = -1/2 ln(1-rho^2).
    rng = np.random.default_rng(8)
    x1, y = gaussian_pair(0.8, 3000, seed=9)
    x = np.column_stack([x1, rng.standard_normal(3000)])
    est = ksg_mutual_information(x, y, k=4, unit="nats").value
    # KSG is biased low in higher dimension (Kraskov 2004, Fig. 4): wide band.
    assert abs(est - (-0.5 * math.log(1 - 0.64))) < 0.08


def test_units_and_symmetry():
    x, y = gaussian_pair(0.7, 1000, seed=2)
    nats = ksg_mutual_information(x, y, unit="nats").value
    bits = ksg_mutual_information(x, y, unit="bits").value
    assert_allclose(bits, nats / math.log(2))
    # Swapping the arguments changes only the jitter draws (round-off level).
    assert_allclose(ksg_mutual_information(y, x, unit="nats").value, nats, rtol=1e-9)


def test_ties_from_quantised_data_are_handled():
    # Coordinates quantised to 0.2 mm-like steps produce many exact ties; the
    # jitter makes the estimate finite and close to the unquantised one.
    x, y = gaussian_pair(0.9, 2000, seed=6)
    step = 0.05  # in SD units
    xq, yq = np.round(x / step) * step, np.round(y / step) * step
    quantised = ksg_mutual_information(xq, yq, unit="nats").value
    assert np.isfinite(quantised)
    assert abs(quantised - ksg_mutual_information(x, y, unit="nats").value) < 0.05


def test_bad_input():
    x = np.arange(10.0)
    with pytest.raises(InvalidParameterError):
        ksg_mutual_information(x, x[:5])
    with pytest.raises(InvalidParameterError):
        ksg_mutual_information(x, np.ones(10))
    with pytest.raises(InvalidParameterError):
        ksg_mutual_information(x, x, unit="bans")
