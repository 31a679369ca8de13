"""Tests for measures.terrain.pointcloud (point cloud -> levelled heightmap).

Noise level: 0.2 mm, the resolution of marker-based capture and of small
arena scanners (common practice). All clouds are synthetic and small.
"""

from __future__ import annotations

import numpy as np
import pytest
from _testing import assert_allclose
from scipy.spatial.transform import Rotation

from measures._validation import InsufficientDataError, InvalidParameterError
from measures.terrain.pointcloud import _voxel_downsample, points_to_heightmap

SIGMA = 2e-4  # m, scanner noise (common practice: 0.2 mm resolution)
L = 0.2  # m, side of the synthetic tray


def _flat(rng: np.random.Generator, n: int = 200_000) -> np.ndarray:
    xy = rng.uniform(0, L, (n, 2))
    return np.column_stack([xy, rng.normal(0, SIGMA, n)])


def _sine(rng: np.random.Generator, n: int, amp: float = 2e-3, lam: float = 0.05) -> np.ndarray:
    xy = rng.uniform(0, L, (n, 2))
    k = 2 * np.pi / lam
    z = amp * np.sin(k * xy[:, 0]) * np.sin(k * xy[:, 1]) + rng.normal(0, SIGMA, n)
    return np.column_stack([xy, z])


def _expected_mean_std(count: np.ndarray, var_per_point: float) -> float:
    """Std of cell means of i.i.d. heights: sqrt(mean(var / n_cell)) (central limit theorem)."""
    return float(np.sqrt(np.mean(var_per_point / count)))


def test_sine_surface_rasterises_to_analytic_cell_means(rng):
    # z = A sin(kx) sin(ky); its exact cell average is A * Sx * Sy with
    # Sx = (cos k x0 - cos k x1) / (k dx) (calculus, closed form).
    amp, lam, cell = 2e-3, 0.05, 2.5e-3
    k = 2 * np.pi / lam
    pts = _sine(rng, 400_000, amp, lam)
    hm = points_to_heightmap(pts, dx_m=cell, plane="none", outlier_method="none", crop=(0, L, 0, L))
    assert hm.z.shape == (80, 80)
    assert hm.valid.all() and hm.filled_fraction == 0.0
    edges = np.arange(81) * cell
    s = (np.cos(k * edges[:-1]) - np.cos(k * edges[1:])) / (k * cell)
    expected = amp * np.outer(s, s)
    err = hm.z - expected
    # Deterministic bound: a cell mean of samples and the cell average both
    # lie within [inf, sup] of the cell, whose width is <= max|grad z| * diag
    # (mean value theorem), plus 6 sigma of the averaged noise.
    grad_max = np.sqrt(2) * amp * k
    bound = grad_max * np.sqrt(2) * cell + 6 * SIGMA / np.sqrt(hm.count.min())
    assert np.abs(err).max() < bound
    # Statistical check: the error is the sampling error of a cell mean,
    # variance (var_within + sigma^2) / n with var_within = <|grad z|^2> cell^2 / 12
    # for uniform xy (linear term) and <|grad z|^2> = A^2 k^2 / 2 (analytic).
    var_within = (amp * k) ** 2 / 2 * cell**2 / 12
    expected_rms = _expected_mean_std(hm.count, var_within + SIGMA**2)
    ratio = np.sqrt(np.mean(err**2)) / expected_rms
    assert 0.9 < ratio < 1.1, ratio  # 6400 cells: 1.8 % standard error of the ratio


def test_counts_match_numpy_histogram2d(rng):
    pts = _sine(rng, 50_000)
    hm = points_to_heightmap(pts, dx_m=0.01, plane="none", outlier_method="none", crop=(0, L, 0, L))
    edges = np.linspace(0, L, 21)
    ref, _, _ = np.histogram2d(pts[:, 1], pts[:, 0], bins=[edges, edges])  # numpy reference
    np.testing.assert_array_equal(hm.count, ref.astype(np.int64))


@pytest.mark.parametrize("plane", ["lstsq", "ransac"])
def test_flat_plane_noise_levels(rng, plane):
    pts = _flat(rng)
    hm = points_to_heightmap(pts, dx_m=4e-3, plane=plane)
    # ISO 25178-2 Sq of the raw heights about the plane is the noise sigma;
    # 200k points give a relative standard error of 1/sqrt(2n) = 0.16 %.
    assert_allclose(hm.point_sq_m, SIGMA, rtol=0.01)
    # Cell means of n Gaussian points have std sigma / sqrt(n).
    ratio = np.std(hm.z[hm.valid]) / _expected_mean_std(hm.count[hm.valid], SIGMA**2)
    assert 0.93 < ratio < 1.07, ratio  # 2500 cells: 1.4 % standard error
    assert hm.n_outliers < 0.001 * pts.shape[0]  # 4-sigma rejection: 6e-5 of inliers


def test_tilted_plane_is_levelled_to_the_same_numbers(rng):
    pts = _flat(rng)
    level = points_to_heightmap(pts, dx_m=4e-3, plane="lstsq")
    axis = np.array([*rng.normal(size=2), 0.0])
    tilt = Rotation.from_rotvec(np.radians(15) * axis / np.linalg.norm(axis))
    tilted = tilt.apply(pts) + np.array([0.3, -0.1, 0.5])
    hm = points_to_heightmap(tilted, dx_m=4e-3, plane="ransac", seed=3)
    true_normal = tilt.apply([0.0, 0.0, 1.0])
    angle = np.degrees(np.arccos(np.clip(hm.plane_normal @ true_normal, -1, 1)))
    # Slope error of a plane fit ~ sigma / (L sqrt(N / 12)) ~ 1e-5 rad (least
    # squares, analytic); 0.01 degree is 17x that.
    assert angle < 0.01
    assert_allclose(hm.rotation @ hm.plane_normal, [0, 0, 1], atol=1e-12)
    assert_allclose(hm.point_sq_m, level.point_sq_m, rtol=0.01)
    assert hm.z.shape == level.z.shape
    # Same points per cell up to the odd point moved across a cell edge by
    # the residual tilt, hence a tolerance rather than equality.
    diff = hm.z[level.valid] - level.z[level.valid]
    assert np.sqrt(np.mean(diff**2)) < 0.05 * SIGMA


@pytest.mark.parametrize("method", ["cell", "knn"])
def test_outliers_are_removed(rng, method):
    clean = _sine(rng, 150_000)
    n_out = clean.shape[0] // 100  # 1 %
    xy = rng.uniform(0, L, (n_out, 2))
    dz = rng.choice([-1.0, 1.0], n_out) * rng.uniform(5e-3, 5e-2, n_out)  # 25-250 sigma
    dirty = np.vstack([clean, np.column_stack([xy, dz])])
    kw = {"dx_m": 5e-3, "plane": "none", "crop": (0, L, 0, L)}
    ref = points_to_heightmap(clean, outlier_method="none", **kw)
    hm = points_to_heightmap(dirty, outlier_method=method, **kw)
    raw = points_to_heightmap(dirty, outlier_method="none", **kw)
    rms_raw = np.sqrt(np.mean((raw.z - ref.z) ** 2))
    rms = np.sqrt(np.mean((hm.z - ref.z) ** 2))
    # The kNN filter at 2 std also trims the noisiest few % of inliers, which
    # moves cell means by a fraction of sigma / sqrt(n); the cell filter
    # (4 robust sigmas) leaves inliers alone.
    if method == "cell":
        assert n_out <= hm.n_outliers < n_out + 0.001 * clean.shape[0]
        assert rms < 0.02 * SIGMA
    else:
        assert rms < 0.1 * SIGMA
    assert rms_raw > SIGMA  # without a filter the outliers move the map by > 1 sigma


def test_holes_fill_exactly_within_maximum_principle(rng):
    # z = a (x^2 - y^2) + b x is harmonic; its discrete 5-point Laplacian is
    # exact, so the harmonic fill deviates from the surface by no more than
    # the measured cells do (discrete maximum principle, e.g. Morton &
    # Mayers 2005, Numerical Solution of PDEs, ch. 6 [MEMORY]).
    xy = rng.uniform(0, L, (120_000, 2))
    a, b = 0.5, 0.02

    def surface(x, y):
        return a * (x**2 - y**2) + b * x

    centres = np.array([[0.06, 0.07], [0.14, 0.12]])
    radii = np.array([0.02, 0.03])
    d = np.linalg.norm(xy[:, None, :] - centres[None], axis=2)
    keep = (d > radii).all(axis=1)
    pts = np.column_stack([xy[keep], surface(*xy[keep].T)])
    cell = 5e-3
    hm = points_to_heightmap(pts, dx_m=cell, plane="none", outlier_method="none", crop=(0, L, 0, L))
    edges = np.linspace(0, L, 41)
    counts, _, _ = np.histogram2d(pts[:, 1], pts[:, 0], bins=[edges, edges])
    np.testing.assert_array_equal(hm.valid, counts > 0)  # numpy reference
    assert_allclose(hm.filled_fraction, np.mean(counts == 0))
    assert 0.05 < hm.filled_fraction < 0.15  # two discs: pi (0.02^2 + 0.03^2) / L^2 = 10 %
    c = (np.arange(40) + 0.5) * cell
    exact = surface(c[None, :], c[:, None])
    measured_err = np.abs(hm.z - exact)[hm.valid].max()
    assert np.abs(hm.z - exact)[~hm.valid].max() <= measured_err * (1 + 1e-9)
    unfilled = points_to_heightmap(
        pts, dx_m=cell, plane="none", outlier_method="none", crop=(0, L, 0, L), fill_holes=False
    )
    assert np.isnan(unfilled.z[~unfilled.valid]).all()
    assert np.isfinite(unfilled.z[unfilled.valid]).all()


def test_ransac_finds_the_floor_under_a_raised_block(rng):
    # 30 % of the points on a 2 cm block: least squares tilts, RANSAC keeps
    # the floor (Fischler & Bolles 1981: consensus ignores gross errors).
    pts = _flat(rng, 100_000)
    on_block = (pts[:, 0] > 0.12) & (pts[:, 1] > 0.05)
    pts[on_block, 2] += 0.02
    r = points_to_heightmap(pts, dx_m=5e-3, plane="ransac", outlier_method="none")
    q = points_to_heightmap(pts, dx_m=5e-3, plane="lstsq", outlier_method="none")
    tilt_r = np.degrees(np.arccos(r.plane_normal[2]))
    tilt_q = np.degrees(np.arccos(q.plane_normal[2]))
    assert tilt_r < 0.01 and tilt_q > 1.0
    assert 0.6 < r.plane_inlier_fraction < 0.75  # ~70 % floor within 2.5 sigma


def test_seeded_and_reproducible(rng):
    pts = _sine(rng, 30_000)
    a = points_to_heightmap(pts, dx_m=0.01, seed=5, max_points_for_fit=5000)
    b = points_to_heightmap(pts, dx_m=0.01, seed=5, max_points_for_fit=5000)
    np.testing.assert_array_equal(a.z, b.z)
    assert a.parameters["plane_threshold_m"] == b.parameters["plane_threshold_m"]


def test_subsampled_path_matches_full_resolution(rng):
    _compare_paths(rng, 120_000, fit_points=20_000)


@pytest.mark.slow
def test_subsampled_path_matches_full_resolution_1m(rng):
    _compare_paths(rng, 1_000_000, fit_points=200_000)


def _compare_paths(rng, n, fit_points):
    """Fast path (plane on a subsample, per-cell outliers) vs open3d on all points."""
    pts = _sine(rng, n)
    n_out = n // 100
    pts[:n_out, 2] += rng.choice([-1.0, 1.0], n_out) * rng.uniform(5e-3, 5e-2, n_out)
    pts = Rotation.from_rotvec([0.05, -0.08, 0.3]).apply(pts)
    cell = L / 64
    full = points_to_heightmap(
        pts, dx_m=cell, outlier_method="knn", max_points_for_fit=None, crop=2 * cell
    )
    fast = points_to_heightmap(pts, dx_m=cell, max_points_for_fit=fit_points, crop=2 * cell)
    assert full.z.shape == fast.z.shape
    angle = np.arccos(np.clip(full.plane_normal @ fast.plane_normal, -1, 1))  # rad
    # Slope standard error of a least-squares plane on N points spread
    # uniformly over a side L with height spread s: s / (L sqrt(N / 12))
    # (regression slope variance, analytic); s^2 = A^2 / 4 + sigma^2 here.
    spread = np.sqrt((2e-3) ** 2 / 4 + SIGMA**2)
    slope_se = spread / (L * np.sqrt(fit_points / 12))
    assert angle < 4 * slope_se
    # Compared on cells measured by >= 4 points in both paths: the grids'
    # origins differ by the extent of the fit subsample (tens of um), which
    # can turn a one-point cell at the footprint's edge into a filled one.
    both = (fast.count >= 4) & (full.count >= 4)
    assert both.mean() > 0.5
    diff = (fast.z - full.z)[both]
    # Stated tolerance: the residual tilt moves heights by up to L/2 * 4 se
    # at the edges, and the two paths keep slightly different inliers (the
    # kNN filter trims a few % of noisy ones): RMS < 0.25 sigma, max < 1 sigma.
    assert np.sqrt(np.mean(diff**2)) < 0.25 * SIGMA
    assert np.abs(diff).max() < SIGMA


def test_voxel_downsample_is_the_voxel_centroid(rng):
    pts = rng.uniform(0, 0.01, (2000, 3))
    out = _voxel_downsample(pts, 0.003)
    # Naive reference: loop over occupied voxels (obviously correct).
    idx = np.floor((pts - pts.min(axis=0)) / 0.003).astype(int)
    ref = np.array([pts[(idx == v).all(axis=1)].mean(axis=0) for v in np.unique(idx, axis=0)])
    assert out.shape == ref.shape
    assert_allclose(np.sort(out, axis=0), np.sort(ref, axis=0), rtol=0, atol=1e-15)
    hm = points_to_heightmap(_flat(rng, 50_000), dx_m=0.01, voxel_m=2e-3)
    assert hm.n_points_in == 50_000 and hm.n_points_used < 50_000


@pytest.mark.parametrize(
    ("points", "error"),
    [
        (np.array([[0.0, 0, 0], [1, 1, 1]]), InsufficientDataError),
        (np.ones((100, 3)), InvalidParameterError),
        (np.outer(np.arange(10.0), [1, 2, 3]), InvalidParameterError),  # collinear
        (np.ones((10, 2)), InvalidParameterError),
        (np.array([[0, 0, np.nan], [1, 0, 0], [0, 1, 0]]), InvalidParameterError),
    ],
)
def test_degenerate_clouds_raise(points, error):
    with pytest.raises(error):
        points_to_heightmap(points, dx_m=0.01)


def test_bad_parameters_raise(rng):
    pts = _flat(rng, 1000)
    with pytest.raises(InvalidParameterError, match="dx_m"):
        points_to_heightmap(pts, dx_m=0.0)
    with pytest.raises(InvalidParameterError, match="plane"):
        points_to_heightmap(pts, dx_m=0.01, plane="best")
    with pytest.raises(InvalidParameterError, match="crop"):
        points_to_heightmap(pts, dx_m=0.01, crop=(0.1, 0.0, 0, 1))
    with pytest.raises(InsufficientDataError, match="crop"):
        points_to_heightmap(pts, dx_m=0.01, crop=(5, 6, 5, 6))


def test_many_holes_fill_by_the_iterative_route_and_stay_exact_on_a_harmonic_surface() -> None:
    # x^2 - y^2 is harmonic and the 5-point discrete Laplacian of a quadratic is exact
    # (analytic), so the filled holes must reproduce it; 70 % holes on a 700 x 600 grid is
    # past the direct solver's limit (a sparse lidar tile's case; the direct factorisation's
    # fill-in took 12 GB there).
    from measures.terrain import pointcloud as pc

    ny, nx = 700, 600
    y, x = np.mgrid[0:ny, 0:nx].astype(float)
    z = (x - 300.0) ** 2 - (y - 350.0) ** 2
    valid = np.random.default_rng(0).random((ny, nx)) > 0.7
    valid[[0, -1], :] = True
    valid[:, [0, -1]] = True
    assert (~valid).sum() > pc._DIRECT_FILL_MAX_HOLES
    out = pc._harmonic_fill(np.where(valid, z, np.nan), valid)
    assert np.abs(out - z).max() < 1e-7 * np.abs(z).max()  # CG to rtol 1e-10


def test_knn_filter_keeps_what_open3d_keeps(rng) -> None:
    # Reference: open3d's PointCloud.remove_statistical_outlier (a general-purpose library),
    # same k and ratio, on a noisy floor with sprayed outliers (no coincident points).
    o3d = pytest.importorskip("open3d")
    from measures.terrain.pointcloud import _knn_inliers

    floor = np.column_stack([rng.uniform(0, 0.2, (6000, 2)), rng.normal(0, 2e-4, 6000)])
    spray = np.column_stack([rng.uniform(0, 0.2, (150, 2)), rng.uniform(0.002, 0.05, 150)])
    pts = np.vstack([floor, spray])
    for k, ratio in ((20, 2.0), (8, 1.0), (30, 3.0)):
        cloud = o3d.geometry.PointCloud(o3d.utility.Vector3dVector(pts))
        _, kept = cloud.remove_statistical_outlier(nb_neighbors=k, std_ratio=ratio)
        expected = np.zeros(pts.shape[0], dtype=bool)
        expected[np.asarray(kept, dtype=np.int64)] = True
        got = _knn_inliers(pts, k, ratio)
        assert np.array_equal(got, expected), (k, ratio, int((got != expected).sum()))
    assert not _knn_inliers(pts, 20, 2.0)[6000:].all()  # the spray is (partly) flagged


@pytest.mark.parametrize("k", [2, 20])
def test_neighbours_in_tree_order_are_scipys_answers(rng, k) -> None:
    # Reference: scipy's cKDTree queried in the points' own order (the plain call). Asking
    # in the tree's leaf order and putting the answers back gives the same arrays; the
    # midpoint-split tree gives the same distances. Duplicates and a plane-like scan included.
    from scipy.spatial import cKDTree

    from measures.terrain.gridding import self_neighbours

    xy = rng.uniform(0.0, 0.3, size=(20_000, 2))
    z = 1e-3 * np.sin(40.0 * xy[:, 0]) + rng.normal(0.0, 2e-4, size=xy.shape[0])
    pts = np.column_stack([xy, z])
    pts[:500] = pts[500:1000]  # exact duplicates: zero distances and equidistant ties
    d0, i0 = cKDTree(pts).query(pts, k=k)
    d1, i1 = self_neighbours(pts, k)
    assert np.array_equal(d1, d0) and np.array_equal(i1, i0)
    d2, _ = self_neighbours(pts, k, balanced_tree=False)
    assert np.array_equal(d2, d0)
