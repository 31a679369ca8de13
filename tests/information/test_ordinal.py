"""Tests for measures.information.ordinal: permutation entropy and the complexity-entropy plane."""

from __future__ import annotations

import math

import numpy as np
import ordpy
import pytest
from _testing import assert_allclose
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays

from measures import (
    InsufficientDataError,
    InvalidParameterError,
    complexity_entropy,
    complexity_entropy_bounds,
    jensen_shannon_complexity,
    ordinal_distribution,
    tie_fraction,
)


@pytest.fixture(scope="module")
def white_noise():
    # CHECKS B1/B4 input: N = 2**17 Gaussian, seed 12345.
    return np.random.default_rng(12345).normal(size=2**17)


@pytest.fixture(scope="module")
def logistic():
    # CHECKS B3 input: x -> 4x(1-x), x0 = 0.1234, 1000 transient, N = 2**17.
    x, out = 0.1234, np.empty(2**17)
    for t in range(2**17 + 1000):
        x = 4.0 * x * (1.0 - x)
        if t >= 1000:
            out[t - 1000] = x
    return out


def test_white_noise_permutation_entropy(white_noise):
    # CHECKS B1/B4 [ANALYTIC (1, 0); ordpy 1.2.3 ORACLE]: (H, C) =
    # (0.99999, 0.00001) D=3 ... (0.99960, 0.00095) D=6; 1 - H < 2e-3 and
    # C < 2e-3 at D = 6, N >= 1e5.
    h, c = complexity_entropy(white_noise, order=6)
    assert 1.0 - h < 2e-3
    assert c < 2e-3
    for order, h_ref, c_ref in [(3, 0.99999, 0.00001), (6, 0.99960, 0.00095)]:
        h, c = complexity_entropy(white_noise, order=order)
        assert_allclose(h, h_ref, atol=1e-5)  # oracle printed to 5 decimals
        assert_allclose(c, c_ref, atol=1e-5)


@pytest.mark.parametrize("order", [3, 4, 5, 6])
def test_complexity_entropy_matches_ordpy(white_noise, logistic, order):
    # Reference: ordpy.complexity_entropy (general-purpose PyPI library), same
    # definitions (Rosso et al. 2007 with Q0 of Lamberti et al. 2004).
    for x in (white_noise[: 2**15], logistic[: 2**15]):  # 2**15 >= 10 * 6! windows
        ours = complexity_entropy(x, order=order)
        ref = ordpy.complexity_entropy(x, dx=order)
        assert_allclose(ours, ref, rtol=1e-10)


def test_monotone_series():
    # CHECKS B2 [ANALYTIC + ORACLE]: PE = 0 exactly for arange(1000); one
    # pattern only, so C = 0 too.
    assert complexity_entropy(np.arange(1000.0), order=4) == (0.0, 0.0)


def test_logistic_map_patterns(logistic):
    # CHECKS B3 [ANALYTIC]: the decreasing pattern (2,1,0) (our code 5, the
    # last in lexicographic order) is forbidden (Amigó, Zambrano & Sanjuán
    # 2007 [MEMORY]); [ORACLE, ordpy]: probabilities (0,1,2) 0.3361,
    # (0,2,1) 0.0667, (1,0,2) 0.1314, (1,2,0) 0.2005, (2,0,1) 0.2652, PE 0.83046.
    dist = ordinal_distribution(logistic, order=3)
    assert dist.n_patterns == 6
    assert dist.probabilities[5] == 0.0
    assert_allclose(
        dist.probabilities[:5], [0.3361, 0.0667, 0.1314, 0.2005, 0.2652], atol=5e-3
    )  # oracle values given to 4 decimals, tolerance of CHECKS B3
    h, c = complexity_entropy(logistic, order=3)
    assert_allclose(h, 0.83046, atol=5e-3)
    assert_allclose(c, 0.16627, atol=1e-2)  # CHECKS B4 tolerance


def test_logistic_map_in_complexity_entropy_plane(logistic):
    # CHECKS B4 [ORACLE, ordpy]: (0.62933, 0.48411) at D = 6, +-0.01; Rosso
    # et al. 2007 Fig. 1 puts it near the upper bound [MEMORY, position only].
    h, c = complexity_entropy(logistic, order=6)
    assert_allclose(h, 0.62933, atol=1e-2)
    assert_allclose(c, 0.48411, atol=1e-2)
    bounds = complexity_entropy_bounds(720)
    c_max = np.interp(h, bounds.entropy_max, bounds.complexity_max)
    assert c_max - c < 0.05


def test_ordinal_distribution_matches_ordpy(logistic):
    # Reference: ordpy.ordinal_distribution(return_missing=True, ordered=True)
    # lists every permutation in lexicographic order, our code order.
    for order in (3, 4):
        _, ref = ordpy.ordinal_distribution(logistic, dx=order, return_missing=True, ordered=True)
        ours = ordinal_distribution(logistic, order=order).probabilities
        assert_allclose(ours, ref, rtol=1e-12)


# ---------------------------------------------------------------- 2D


def test_2d_noise_and_plane():
    # CHECKS B5 [ORACLE, ordpy, seed 12345]: i.i.d. Gaussian 512 x 512 with
    # dx = dy = 2 gives (0.99999, 0.00002); the plane z = x + 2y on 64 x 64
    # has a single pattern, (0, 0) exactly [ANALYTIC].
    z = np.random.default_rng(12345).normal(size=(512, 512))
    h, c = complexity_entropy(z, order=(2, 2))
    assert_allclose(h, 0.99999, atol=1e-5)  # oracle printed to 5 decimals
    assert_allclose(c, 0.00002, atol=1e-5)
    assert_allclose((h, c), ordpy.complexity_entropy(z, dx=2, dy=2), rtol=1e-10)
    yy, xx = np.mgrid[0:64, 0:64].astype(float)
    assert complexity_entropy(xx + 2.0 * yy, order=(2, 2)) == (0.0, 0.0)


@pytest.mark.parametrize(("order", "delay"), [((3, 2), 1), ((2, 3), 2), ((2, 2), (1, 3))])
def test_2d_matches_ordpy(rng, order, delay):
    # Reference: ordpy.complexity_entropy on images, incl. rectangular patches
    # and per-axis delays.
    z = np.cumsum(rng.normal(size=(300, 300)), axis=1)  # anisotropic field
    tx, ty = delay if isinstance(delay, tuple) else (delay, delay)
    ours = complexity_entropy(z, order=order, delay=delay)
    ref = ordpy.complexity_entropy(z, dx=order[0], dy=order[1], taux=tx, tauy=ty)
    assert_allclose(ours, ref, rtol=1e-10)


def test_2d_too_many_patterns_rejected():
    # CHECKS B5 pitfall: 3 x 3 patches need n_windows >> 9!; 512 x 512 is too small.
    z = np.random.default_rng(12345).normal(size=(512, 512))
    with pytest.raises(InsufficientDataError):
        complexity_entropy(z, order=(3, 3))


@settings(max_examples=30, deadline=None)
@given(arrays(np.int64, st.integers(300, 800), elements=st.integers(-50, 50)))
def test_complexity_entropy_invariant_under_increasing_maps(x):
    # Property (ordinal patterns depend only on order relations, Bandt & Pompe
    # 2002): 3 x^3 - 1 is strictly increasing and exact on these integers.
    xf = x.astype(float)
    assert complexity_entropy(xf, order=3) == complexity_entropy(3.0 * xf**3 - 1.0, order=3)


# ---------------------------------------------------------------- bounds


@pytest.mark.parametrize(
    ("order", "peak_c", "peak_h", "min_peak"),
    [
        (3, 0.29145, 0.61315, 0.21996),
        (4, 0.35409, 0.56379, 0.21550),
        (5, 0.42482, 0.61503, 0.20701),
        (6, 0.49670, 0.65419, 0.19740),
    ],
)
def test_bounds_against_published_curves(order, peak_c, peak_h, min_peak):
    # CHECKS B4 [ORACLE, ordpy maximum/minimum_complexity_entropy; curves of
    # Martín, Plastino & Rosso 2006, MEMORY]: peak of the max curve and the
    # largest C on the min curve, printed to 5 decimals.
    m = math.factorial(order)
    b = complexity_entropy_bounds(m)
    top = int(np.argmax(b.complexity_max))
    assert_allclose(b.complexity_max[top], peak_c, atol=1e-5)
    assert_allclose(b.entropy_max[top], peak_h, atol=1e-5)
    assert_allclose(b.complexity_min.max(), min_peak, atol=1e-4)  # ordpy samples 100 points
    # ordpy's max-curve points are exact points of the same family.
    ref = ordpy.maximum_complexity_entropy(dx=order)
    assert_allclose(np.interp(ref[:, 0], b.entropy_max, b.complexity_max), ref[:, 1], atol=1e-10)
    ref_min = ordpy.minimum_complexity_entropy(dx=order, size=200)
    assert_allclose(
        np.interp(ref_min[:, 0], b.entropy_min, b.complexity_min), ref_min[:, 1], atol=1e-4
    )  # linear interpolation between 1000 points of a smooth curve


def test_random_distributions_lie_between_bounds(rng):
    # CHECKS B4 invariant: every distribution's (H, C) lies between the curves.
    m = 24
    b = complexity_entropy_bounds(m, n_points=4000)
    for alpha in (0.05, 0.5, 5.0):
        p = rng.dirichlet(np.full(m, alpha), size=500)
        p[:100, : m // 2] = 0.0  # include laws with absent patterns
        h, c = jensen_shannon_complexity(p)
        upper = np.interp(h, b.entropy_max, b.complexity_max)
        lower = np.interp(h, b.entropy_min, b.complexity_min)
        # 1e-3: interpolation error of the sampled curves.
        assert np.all(c <= upper + 1e-3)
        assert np.all(c >= lower - 1e-3)


def test_bounds_endpoints():
    # Analytic: both curves run from the delta law (0, 0) to the uniform law (1, 0).
    b = complexity_entropy_bounds(120, n_points=500)
    for h, c in ((b.entropy_max, b.complexity_max), (b.entropy_min, b.complexity_min)):
        assert_allclose([h[0], c[0], h[-1], c[-1]], [0.0, 0.0, 1.0, 0.0], atol=1e-12)


# ---------------------------------------------------------------- ties


def test_tie_fraction_worked_example_and_birthday_rule(rng):
    # [ANALYTIC] Worked example: windows (1,1), (1,2), (2,3), (3,3) -> 2 of 4.
    assert tie_fraction([1.0, 1.0, 2.0, 3.0, 3.0], order=2) == 0.5
    # i.i.d. uniform on k values: a window of D values holds a tie with
    # probability 1 - k! / ((k - D)! k^D) (the birthday problem).
    k, d = 6, 3
    expected = 1 - math.perm(k, d) / k**d
    x = rng.integers(0, k, 200_000).astype(float)
    assert_allclose(tie_fraction(x, order=d), expected, atol=0.005)  # ~5 sd
    f = rng.integers(0, k, (400, 400)).astype(float)
    assert_allclose(tie_fraction(f, order=(3, 1)), expected, atol=0.005)
    assert tie_fraction(rng.normal(size=1000), order=4) == 0.0


def test_random_ties_make_iid_integers_look_like_noise(rng):
    # [ANALYTIC] i.i.d. integers with i.i.d. uniform tie-breaking keys are an
    # i.i.d. sequence of distinct values, so every pattern has probability
    # 1 / D! and H = 1 (CHECKS B1 for noise). Stable ties bias H below 1.
    x = rng.integers(0, 3, 2**17).astype(float)
    stable = complexity_entropy(x, order=4)
    rand = complexity_entropy(x, order=4, ties="random", seed=3)
    assert 1 - rand[0] < 2e-3 and rand[1] < 2e-3  # CHECKS B1/B4 tolerances
    assert stable[0] < 0.95
    assert rand.tie_fraction == stable.tie_fraction > 0.5
    field = rng.integers(0, 2, (512, 512)).astype(float)
    h2, _ = complexity_entropy(field, order=(2, 2), ties="random", seed=1)
    assert 1 - h2 < 2e-3


def test_constant_input_random_ties_are_uniform():
    # [ANALYTIC] Every window tied: stable ties give one pattern (H = 0),
    # random ties give all patterns alike (H -> 1).
    x = np.ones(50_000)
    assert complexity_entropy(x, order=3)[0] == 0.0
    res = complexity_entropy(x, order=3, ties="random")
    assert res.tie_fraction == 1.0 and res[0] > 0.999


def test_no_ties_means_rules_agree(white_noise):
    # Without ties the rule never acts: identical to stable and to ordpy
    # (CHECKS B1 oracle).
    a = complexity_entropy(white_noise, order=5)
    b = complexity_entropy(white_noise, order=5, ties="random", n_draws=3)
    assert tuple(a) == tuple(b) and a.tie_fraction == 0.0
    assert_allclose(a[0], ordpy.complexity_entropy(white_noise, dx=5)[0], rtol=1e-9)


def test_quantised_surface_random_ties_within_002():
    # Issue requirement: rounding a self-affine surface (Hurst 0.5, 512 x 512,
    # measures.terrain._synthesis) to 0.05 Sq moves permutation entropy by at
    # most 0.02 with the summaries' tie rule; stable ties move it further.
    from measures.terrain._synthesis import self_affine_surface

    z = self_affine_surface(512, 0.5, seed=1)
    step = 0.05 * z.std()
    zq = np.round(z / step) * step
    ref = complexity_entropy(z, order=(2, 2))
    rand = complexity_entropy(zq, order=(2, 2), ties="random", seed=2)
    stable = complexity_entropy(zq, order=(2, 2))
    assert rand.tie_fraction > 0.5  # the rounding really creates ties
    assert abs(rand[0] - ref[0]) <= 0.02
    assert abs(stable[0] - ref[0]) > 0.02


def test_draws_are_seeded_and_averaged(rng):
    x = rng.integers(0, 4, 20_000).astype(float)
    a = ordinal_distribution(x, order=3, ties="random", seed=5, n_draws=4)
    b = ordinal_distribution(x, order=3, ties="random", seed=5, n_draws=4)
    c = ordinal_distribution(x, order=3, ties="random", seed=6)
    assert np.array_equal(a.probabilities, b.probabilities) and a.n_draws == 4
    assert_allclose(a.probabilities.sum(), 1.0)
    # Draw-to-draw spread ~ sqrt(p / n) = 0.006: the averages agree to 0.02.
    assert_allclose(a.probabilities, c.probabilities, atol=0.02)


def test_result_unpacks_and_pickles():
    import pickle

    res = complexity_entropy(np.arange(100.0), order=3)
    h, c = res
    assert (h, c) == (0.0, 0.0) == res
    # Our own result object, as a process pool carries it back from a worker (never
    # uploaded data: readers refuse pickled input).
    back = pickle.loads(pickle.dumps(res))
    assert back == res and back.tie_fraction == res.tie_fraction == 0.0
    with pytest.raises(InvalidParameterError):
        complexity_entropy(np.arange(100.0), order=3, ties="average")
