"""Terrain point cloud -> levelled, regular heightmap.

Steps, in the order they run (chosen so that 10 million points fit in a few
seconds; see ``bench/bench_pointcloud.py``):

1. optional voxel downsampling (centroid per voxel; numpy, same rule as
   open3d's ``voxel_down_sample``). It runs first because it is linear and
   keeps isolated outliers isolated, and it shrinks everything after it;
2. ground plane on a random subsample of at most ``max_points_for_fit``
   points: RANSAC (seeded, numpy) refined by trimmed least squares
   on its inliers, or least squares alone for already-level scans;
3. levelling: the rotation taking the plane normal to +z, then the plane
   offset is subtracted, so z is height above the plane;
4. crop to the usable rectangle (levelled frame) and bin into cells;
5. outlier removal: per cell, from robust cell statistics (median and
   median absolute deviation, two sorts of all points) -- or, on request, the
   k-nearest-neighbour statistical filter (open3d's rule, on scipy's k-d tree)
   on all points;
6. rasterisation (cell mean and count, ``np.bincount``);
7. pit removal: cells far (in robust sigmas) from the median of their 5 x 5
   neighbourhood, in isolated groups of a few cells, become holes. The point
   filter misses them where outliers outnumber the inliers of a sparse cell
   or fill a corner of the grid; a real pit one cell wide is below what the
   grid resolves anyway, while cracks and stone edges, being long or wide,
   are kept;
8. harmonic (Laplace) filling of empty cells, keeping the validity mask.

The cell size can come from the cloud (``dx_m=None``, see
:func:`measures.terrain.gridding.heightmap_dx_m`), and the grid's memory
is estimated before anything is allocated (``memory_cap_bytes``).
"""

from __future__ import annotations

from dataclasses import dataclass
from types import MappingProxyType
from typing import Any

import numpy as np
from numpy.typing import ArrayLike, NDArray

from measures._validation import (
    InsufficientDataError,
    InvalidParameterError,
    as_float_array,
    check_choice,
    check_positive_float,
    check_positive_int,
)
from measures.terrain.gridding import heightmap_dx_m, heightmap_memory, self_neighbours

__all__ = ["Heightmap", "points_to_heightmap"]

_FUNC = "points_to_heightmap"
# Cells with fewer points than this take their reference height from the
# neighbourhood instead of their own (unreliable) quartiles.
_MIN_CELL_POINTS = 4
# Pit filter: neighbourhood size (cells), rejection distance in robust
# sigmas of the cell-minus-neighbourhood residual, and the largest group of
# connected flagged cells still treated as pits (larger groups are relief).
_PIT_WINDOW = 5
_PIT_MAX_CELLS = 4


@dataclass(frozen=True, eq=False)
class Heightmap:
    """A levelled terrain heightmap on a regular grid.

    Attributes
    ----------
    z : ndarray of float64, shape (ny, nx), m
        Height above the fitted ground plane; ``z[iy, ix]`` is the cell whose
        centre is ``origin_xy + ((ix + 0.5) dx, (iy + 0.5) dy)``. Empty cells
        are filled (harmonic interpolation) unless filling was switched off,
        in which case they are NaN.
    valid : ndarray of bool, shape (ny, nx)
        True where the cell holds at least one measured point.
    count : ndarray of int64, shape (ny, nx)
        Points averaged into each cell.
    dx_m, dy_m : float
        Cell spacing along x (columns) and y (rows), m.
    origin_xy : tuple of float
        Levelled-frame (x, y) of the outer corner of cell (0, 0), m.
    filled_fraction : float
        Fraction of cells that were empty and filled (0 when none).
    plane_normal : ndarray, shape (3,)
        Unit normal of the ground plane in the input frame (n_z >= 0).
    plane_offset_m : float
        d in the plane equation ``n . p + d = 0`` (input frame).
    rotation : ndarray, shape (3, 3)
        Rotation applied: levelled point = ``rotation @ p``; its z plus
        ``plane_offset_m`` is the height above the plane.
    n_points_in, n_outliers, n_points_outside, n_points_used : int
        Points given, rejected as outliers, outside the crop, rasterised
        (after voxel downsampling when it was asked for).
    n_pit_cells : int
        Cells removed by the pit filter (then filled like empty cells).
    point_sq_m : float
        ISO 25178-2 Sq (root mean square about the mean) of the heights of
        the rasterised points, before cell averaging.
    plane_inlier_fraction : float
        Fraction of the fit subsample within the RANSAC threshold (1 for
        the least-squares and "none" planes).
    parameters : mapping
        The parameters actually used (defaults resolved).
    """

    z: NDArray[np.float64]
    valid: NDArray[np.bool_]
    count: NDArray[np.int64]
    dx_m: float
    dy_m: float
    origin_xy: tuple[float, float]
    filled_fraction: float
    plane_normal: NDArray[np.float64]
    plane_offset_m: float
    rotation: NDArray[np.float64]
    n_points_in: int
    n_outliers: int
    n_points_outside: int
    n_points_used: int
    point_sq_m: float
    plane_inlier_fraction: float
    parameters: MappingProxyType[str, Any]
    n_pit_cells: int = 0
    notes: tuple[str, ...] = ()


def points_to_heightmap(
    points: ArrayLike,
    *,
    dx_m: float | None = None,
    outlier_method: str = "cell",
    outlier_neighbours: int = 20,
    outlier_std: float = 2.0,
    outlier_cell_sigmas: float = 4.0,
    voxel_m: float | None = None,
    plane: str = "ransac",
    plane_threshold_m: float | None = None,
    crop: float | tuple[float, float, float, float] | None = None,
    fill_holes: bool = True,
    seed: int = 0,
    max_points_for_fit: int | None = 200_000,
    pit_sigmas: float | None = 5.0,
    memory_cap_bytes: int | None = None,
) -> Heightmap:
    """Turn a terrain point cloud into a levelled heightmap.

    Parameters
    ----------
    points : array_like of float, shape (n, 3), m
        Scanned points (x, y, z) in any frame; n >= 3, not all identical,
        not collinear.
    dx_m : float or None, m
        Grid spacing (square cells). None: 3 x the median nearest-neighbour
        spacing of the levelled points, within arena-scale bounds
        (:func:`measures.terrain.gridding.heightmap_dx_m`; the choice is
        in ``notes``).
    outlier_method : {"cell", "knn", "none"}, default "cell"
        "cell": a point is an outlier when it lies more than
        ``outlier_cell_sigmas`` robust standard deviations (1.4826 MAD, at
        least the median over cells) from its cell's median height (cells
        with fewer than 4 points use the median of their 3 x 3
        neighbourhood); two sorts of all points, suited to 10^7
        points. "knn": the statistical filter (open3d's rule: mean distance to the
        ``outlier_neighbours`` nearest points more than ``outlier_std``
        standard deviations above the average) on all points, before the
        plane fit.
    outlier_neighbours : int, default 20
        k of the "knn" filter.
    outlier_std : float, default 2.0
        Standard-deviation ratio of the "knn" filter.
    outlier_cell_sigmas : float, default 4.0
        Rejection distance of the "cell" filter in robust sigmas
        (1.4826 MAD); at 4 sigma a Gaussian inlier is rejected with
        probability 6e-5.
    voxel_m : float or None, m
        Edge of the voxels averaged before anything else; None keeps all points.
    plane : {"ransac", "lstsq", "none"}, default "ransac"
        Ground reference. "none" keeps the input frame (z already height).
    plane_threshold_m : float or None, m
        RANSAC inlier distance. None: RANSAC runs with 2.5 times the local
        noise (from height differences of xy-nearest neighbours), then the
        inlier band is widened to 2.5 robust sigmas (1.4826 MAD) of the
        residuals about that plane, so rough ground stays inside the band
        and walls or objects stay outside.
    crop : None, float or (x_min, x_max, y_min, y_max), m
        None: the bounding box of the levelled points (with the "cell"
        filter: of the kNN-filtered fit subsample, a few micrometres inside
        the full box for 2e5 points; points beyond count as outside). A float: that box
        shrunk by this margin on every side. A tuple: a rectangle in the
        levelled frame (x, y are the rotated input axes).
    fill_holes : bool, default True
        Fill empty cells by solving Laplace's equation with the measured
        cells as boundary values (exact for planar and other harmonic
        ground); False leaves NaN.
    seed : int, default 0
        Seeds the fit subsample and RANSAC.
    max_points_for_fit : int or None, default 200000
        Size of the random subsample the plane is fitted on; None fits on all.
    pit_sigmas : float or None, default 5.0
        Pit filter (step 7 of the module notes): a cell is a pit when it lies
        more than this many robust sigmas (1.4826 MAD of all cells'
        residuals) from the median of its 5 x 5 neighbourhood and belongs to a
        connected group of at most 4 such cells. None switches it off.
    memory_cap_bytes : int or None
        Refuse (InvalidParameterError naming cells, bytes and the smallest
        cell that fits) when the estimated memory of the job exceeds this,
        before the grid is allocated
        (:func:`measures.terrain.gridding.heightmap_memory`).

    Returns
    -------
    Heightmap

    Raises
    ------
    InsufficientDataError
        Fewer than 3 points, or fewer than 3 left in the crop.
    InvalidParameterError
        Bad parameters, identical or collinear points.

    References
    ----------
    Fischler & Bolles (1981), Random sample consensus, Commun. ACM 24:381.
    Rusu et al. (2008), Towards 3D point cloud based object maps for
    household environments, Robot. Auton. Syst. 56:927 (statistical filter).
    ISO 25178-2:2012, Sq.

    Examples
    --------
    >>> import numpy as np
    >>> xy = np.random.default_rng(0).uniform(0, 0.1, (20000, 2))
    >>> pts = np.column_stack([xy, 0.01 + 0.1 * xy[:, 0]])  # tilted plane
    >>> hm = points_to_heightmap(pts, dx_m=0.01)
    >>> hm.z.shape, bool(np.abs(hm.z).max() < 1e-9)  # levelled, x spans 0.1005 m
    ((10, 11), True)
    """
    pts = _check_points(points, "points", _FUNC)
    if dx_m is not None:
        dx_m = check_positive_float("dx_m", dx_m, _FUNC)
    if pit_sigmas is not None:
        pit_sigmas = check_positive_float("pit_sigmas", pit_sigmas, _FUNC)
    check_choice("outlier_method", outlier_method, _FUNC, ("cell", "knn", "none"))
    check_choice("plane", plane, _FUNC, ("ransac", "lstsq", "none"))
    outlier_neighbours = check_positive_int("outlier_neighbours", outlier_neighbours, _FUNC)
    outlier_std = check_positive_float("outlier_std", outlier_std, _FUNC)
    outlier_cell_sigmas = check_positive_float("outlier_cell_sigmas", outlier_cell_sigmas, _FUNC)
    if max_points_for_fit is not None:
        max_points_for_fit = check_positive_int(
            "max_points_for_fit", max_points_for_fit, _FUNC, minimum=3
        )
    n_in = pts.shape[0]
    if voxel_m is not None:
        pts = _voxel_downsample(pts, check_positive_float("voxel_m", voxel_m, _FUNC))
    n_outliers = 0
    if outlier_method == "knn":
        keep = _knn_inliers(pts, outlier_neighbours, outlier_std)
        n_outliers += int(keep.size - keep.sum())
        pts = pts[keep]
    rng = np.random.default_rng(seed)
    fit = pts
    if max_points_for_fit is not None and pts.shape[0] > max_points_for_fit:
        fit = pts[rng.choice(pts.shape[0], max_points_for_fit, replace=False)]
    if outlier_method == "cell" and fit.shape[0] > outlier_neighbours:
        # Gross outliers inside the inlier band would tilt the plane, and
        # outliers high above a tilted plane land beyond the tray once
        # levelled, stretching the grid; the fit subsample therefore gets
        # the kNN filter (cheap at subsample size) and sets both.
        fit = fit[_knn_inliers(fit, outlier_neighbours, outlier_std)]
    normal, offset, inlier_frac, thr = _fit_plane(fit, plane, plane_threshold_m, seed)
    rotation = _rotation_to_z(normal)
    lev = pts @ rotation.T
    lev[:, 2] += offset
    del pts
    rect = _resolve_crop(crop, fit @ rotation.T if outlier_method == "cell" else lev)
    notes: list[str] = []
    if dx_m is None:
        dx_m, note = heightmap_dx_m(
            (fit @ rotation.T)[:, :2],
            bounds_m=(None, min(rect[1] - rect[0], rect[3] - rect[2]) / 64),
        )
        notes.append(note)
    heightmap_memory(
        rect[1] - rect[0],
        rect[3] - rect[2],
        dx_m,
        n_points=n_in,
        cap_bytes=memory_cap_bytes,
    )
    nx = max(1, int(np.ceil((rect[1] - rect[0]) / dx_m - 1e-9)))
    ny = max(1, int(np.ceil((rect[3] - rect[2]) / dx_m - 1e-9)))
    x, y, h = lev[:, 0], lev[:, 1], lev[:, 2]
    inside = (x >= rect[0]) & (x <= rect[1]) & (y >= rect[2]) & (y <= rect[3])
    n_outside = int(inside.size - inside.sum())
    if n_outside:
        x, y, h = x[inside], y[inside], h[inside]
    if h.size < 3:
        raise InsufficientDataError("crop", _FUNC, "a region holding at least 3 points", rect)
    ix = np.minimum(((x - rect[0]) / dx_m).astype(np.int64), nx - 1)
    iy = np.minimum(((y - rect[2]) / dx_m).astype(np.int64), ny - 1)
    cell = iy * nx + ix
    del x, y, ix, iy, lev
    if outlier_method == "cell":
        keep = _cell_inliers(cell, h, (ny, nx), outlier_cell_sigmas)
        n_outliers += int(keep.size - keep.sum())
        cell, h = cell[keep], h[keep]
    count = np.bincount(cell, minlength=nx * ny).reshape(ny, nx)
    total = np.bincount(cell, weights=h, minlength=nx * ny).reshape(ny, nx)
    valid = count > 0
    z = np.full((ny, nx), np.nan)
    z[valid] = total[valid] / count[valid]
    n_pits = 0
    if pit_sigmas is not None and valid.sum() >= 9:
        pits = _pit_cells(z, valid, pit_sigmas)
        n_pits = int(pits.sum())
        if n_pits:
            valid = valid & ~pits
            z[pits] = np.nan
            notes.append(f"pit filter: {n_pits} cells removed and filled")
    holes = int((~valid).sum())
    if fill_holes and holes:
        z = _harmonic_fill(z, valid)
    params = {
        "dx_m": dx_m,
        "outlier_method": outlier_method,
        "outlier_neighbours": outlier_neighbours,
        "outlier_std": outlier_std,
        "outlier_cell_sigmas": outlier_cell_sigmas,
        "voxel_m": voxel_m,
        "plane": plane,
        "plane_threshold_m": thr,
        "crop": rect,
        "fill_holes": bool(fill_holes),
        "seed": seed,
        "max_points_for_fit": max_points_for_fit,
        "pit_sigmas": pit_sigmas,
        "memory_cap_bytes": memory_cap_bytes,
    }
    for arr in (z, valid, count, normal, rotation):
        arr.setflags(write=False)
    return Heightmap(
        z=z,
        valid=valid,
        count=count,
        dx_m=dx_m,
        dy_m=dx_m,
        origin_xy=(rect[0], rect[2]),
        filled_fraction=holes / z.size,
        plane_normal=normal,
        plane_offset_m=offset,
        rotation=rotation,
        n_points_in=n_in,
        n_outliers=n_outliers,
        n_points_outside=n_outside,
        n_points_used=int(h.size),
        point_sq_m=float(np.std(h)),
        plane_inlier_fraction=inlier_frac,
        parameters=MappingProxyType(params),
        n_pit_cells=n_pits,
        notes=tuple(notes),
    )


def _check_points(points: ArrayLike, name: str, function: str) -> NDArray[np.float64]:
    """Validate an (n, 3) cloud: >= 3 finite points, not identical, not collinear."""
    pts = as_float_array(name, points, function, ndim=2, min_length=3)
    if pts.shape[1] != 3:
        raise InvalidParameterError(name, function, "an array of shape (n, 3)", pts)
    span = np.ptp(pts, axis=0)
    if not span.any():
        raise InvalidParameterError(name, function, "points that are not all identical", pts)
    sample = pts[:: max(1, pts.shape[0] // 100_000)]
    eig = np.linalg.eigvalsh(np.cov(sample, rowvar=False))
    if eig[1] <= 1e-12 * eig[2]:
        raise InvalidParameterError(name, function, "points that span a surface (not a line)", pts)
    return pts


def _voxel_downsample(pts: NDArray[np.float64], voxel_m: float) -> NDArray[np.float64]:
    """Centroid of the points in each voxel of edge ``voxel_m`` (grid anchored at the minimum).

    Same rule as open3d's ``PointCloud.voxel_down_sample``, in numpy because
    it is several times faster on 10^7 points here.
    """
    idx = np.floor((pts - pts.min(axis=0)) / voxel_m).astype(np.int64)
    dims = idx.max(axis=0) + 1
    key = (idx[:, 0] * dims[1] + idx[:, 1]) * dims[2] + idx[:, 2]
    _, inverse, counts = np.unique(key, return_inverse=True, return_counts=True)
    out = np.empty((counts.size, 3))
    for j in range(3):
        out[:, j] = np.bincount(inverse, weights=pts[:, j]) / counts
    return out


def _knn_inliers(pts: NDArray[np.float64], k: int, std_ratio: float) -> NDArray[np.bool_]:
    """Statistical outlier filter: keep points whose mean distance to their ``k`` nearest
    points (the point itself included, at distance 0) is below the cloud's mean of that
    distance plus ``std_ratio`` sample standard deviations.

    The rule of open3d's ``remove_statistical_outlier`` (checked against it in
    tests/terrain/test_pointcloud.py), on scipy's k-d tree with every core: open3d took 6 s
    on 200,000 points here, plus 4 s to import (it loads its plotting stack). One difference:
    points whose ``k`` neighbours all coincide with them (mean distance 0) are kept, where
    open3d drops them.
    """
    if pts.shape[0] <= 1:
        return np.ones(pts.shape[0], dtype=bool)
    k = min(k, pts.shape[0])
    # Distances only, so the midpoint-split tree (same distances, 3x less time on a scan).
    dist, _ = self_neighbours(np.ascontiguousarray(pts), k, balanced_tree=False)
    mean_dist = dist.reshape(pts.shape[0], -1).mean(axis=1)
    threshold = mean_dist.mean() + std_ratio * mean_dist.std(ddof=1)
    return np.asarray(mean_dist < threshold)


def _lstsq_plane(pts: NDArray[np.float64]) -> tuple[NDArray[np.float64], float]:
    """Total-least-squares plane: normal = smallest principal axis, through the centroid."""
    centre = pts.mean(axis=0)
    _, vecs = np.linalg.eigh(np.cov(pts - centre, rowvar=False))
    normal = vecs[:, 0]
    if normal[2] < 0:
        normal = -normal
    return normal, -float(normal @ centre)


def _fit_plane(
    pts: NDArray[np.float64], plane: str, threshold: float | None, seed: int
) -> tuple[NDArray[np.float64], float, float, float | None]:
    """Return (normal, offset, inlier fraction, inlier band used)."""
    if plane == "none":
        return np.array([0.0, 0.0, 1.0]), 0.0, 1.0, None
    if plane == "lstsq":
        return (*_lstsq_plane(pts), 1.0, None)
    floor = 1e-9 * float(np.ptp(pts, axis=0).max())  # a noise-free plane still needs a band
    if threshold is None:
        seed_band = max(2.5 * _local_noise(pts), floor)
    else:
        seed_band = check_positive_float("plane_threshold_m", threshold, _FUNC)
    normal, offset = _ransac_plane(pts, seed_band, seed)
    resid = pts @ normal + offset
    band = seed_band
    if threshold is None:
        # Inlier band from the spread about the RANSAC plane: 2.5 robust
        # sigmas (1.4826 MAD) of all residuals. Gross structure (walls,
        # objects) stays outside; rough ground's own relief stays inside.
        band = max(seed_band, 2.5 * 1.4826 * float(np.median(np.abs(resid))))
    inliers = np.abs(resid) <= band
    # Trimmed least squares on the consensus set, repeated until the set is
    # stable: a band centred on the true plane truncates symmetric noise
    # symmetrically, so the refit is unbiased (one refit would keep part of
    # the 3-point model's tilt).
    for _ in range(20):
        if inliers.sum() < 3:
            break
        normal, offset = _lstsq_plane(pts[inliers])
        again = np.abs(pts @ normal + offset) <= band
        if np.array_equal(again, inliers):
            break
        inliers = again
    return normal, offset, float(inliers.mean()), band


def _ransac_plane(
    pts: NDArray[np.float64], band: float, seed: int, n_hypotheses: int = 1000
) -> tuple[NDArray[np.float64], float]:
    """RANSAC plane (Fischler & Bolles 1981): the 3-point plane with most points within ``band``.

    numpy rather than open3d's ``segment_plane``: with several threads the
    latter returned different planes for one seed here (open3d 0.20), and
    results must be reproducible. 1000 hypotheses find an all-inlier sample
    with probability > 0.9997 down to 20 % inliers: 1 - (1 - 0.2^3)^1000.
    Consensus is counted on at most 20000 points (enough to rank planes).
    """
    rng = np.random.default_rng(seed)
    score_pts = pts
    if pts.shape[0] > 20_000:
        score_pts = pts[rng.choice(pts.shape[0], 20_000, replace=False)]
    tri = pts[rng.integers(0, pts.shape[0], (n_hypotheses, 3))]
    normals = np.cross(tri[:, 1] - tri[:, 0], tri[:, 2] - tri[:, 0])
    norm = np.linalg.norm(normals, axis=1)
    ok = norm > 0
    normals[ok] /= norm[ok, None]
    offsets = -np.einsum("ij,ij->i", normals, tri[:, 0])
    best, best_count = 0, -1
    for start in range(0, n_hypotheses, 100):
        sl = slice(start, start + 100)
        counts = (np.abs(normals[sl] @ score_pts.T + offsets[sl, None]) <= band).sum(axis=1)
        counts[~ok[sl]] = -1
        j = int(np.argmax(counts))
        if counts[j] > best_count:
            best, best_count = start + j, int(counts[j])
    normal, offset = normals[best], float(offsets[best])
    if normal[2] < 0:
        normal, offset = -normal, -offset
    return normal, offset


def _local_noise(pts: NDArray[np.float64]) -> float:
    """Robust height noise from nearest neighbours in xy: 1.4826 MAD(dz) / sqrt(2).

    Differences between neighbouring points cancel the relief and gross
    structure alike, leaving the scanner noise and micro-roughness.
    """
    centred = pts - pts.mean(axis=0)
    # Project on the dominant plane so "neighbour" means neighbour on the ground.
    _, vecs = np.linalg.eigh(np.cov(centred, rowvar=False))
    local = centred @ vecs[:, ::-1]
    # The neighbour's index is used: the default tree, as always (same ties).
    _, idx = self_neighbours(np.ascontiguousarray(local[:, :2]), 2)
    dz = local[:, 2] - local[idx[:, 1], 2]
    return 1.4826 * float(np.median(np.abs(dz))) / np.sqrt(2.0)


def _rotation_to_z(normal: NDArray[np.float64]) -> NDArray[np.float64]:
    """Smallest rotation taking unit ``normal`` (n_z >= 0) to +z (Rodrigues' formula)."""
    axis = np.cross(normal, [0.0, 0.0, 1.0])
    s, c = np.linalg.norm(axis), float(normal[2])
    if s < 1e-15:
        return np.eye(3)
    k = axis / s
    kx = np.array([[0, -k[2], k[1]], [k[2], 0, -k[0]], [-k[1], k[0], 0]])
    return np.eye(3) + s * kx + (1 - c) * (kx @ kx)


def _resolve_crop(crop: Any, lev: NDArray[np.float64]) -> tuple[float, float, float, float]:
    lo, hi = lev[:, :2].min(axis=0), lev[:, :2].max(axis=0)
    box = (float(lo[0]), float(hi[0]), float(lo[1]), float(hi[1]))
    if crop is None:
        rect = box
    elif np.ndim(crop) == 0:
        m = check_positive_float("crop", crop, _FUNC, allow_zero=True)
        rect = (box[0] + m, box[1] - m, box[2] + m, box[3] - m)
    elif np.shape(crop) == (4,):
        rect = tuple(float(v) for v in crop)  # type: ignore[assignment]
    else:
        raise InvalidParameterError(
            "crop", _FUNC, "None, a margin in m or (x_min, x_max, y_min, y_max)", crop
        )
    if not (np.all(np.isfinite(rect)) and rect[1] > rect[0] and rect[3] > rect[2]):
        raise InvalidParameterError("crop", _FUNC, "a rectangle of positive width and depth", rect)
    return rect


def _sorted_quantile(zs, starts, counts, q):  # type: ignore[no-untyped-def]
    """Per-cell quantile (linear interpolation) of heights sorted within each cell."""
    pos = (counts - 1) * q
    lo = np.floor(pos).astype(np.int64)
    frac = pos - lo
    hi = np.minimum(lo + 1, counts - 1)
    return zs[starts + lo] * (1 - frac) + zs[starts + hi] * frac


def _sort_within_cells(
    cell: NDArray[np.int64], v: NDArray[np.float64], span: float
) -> NDArray[np.float64]:
    """``v`` (>= 0) ordered by (cell, value) with one float argsort.

    The cell index plus the value scaled into [0, 1) is a single float64
    key with 30+ bits left for the value, so ``argsort`` of one array does
    the job of a lexsort at a fraction of its cost.
    """
    key = cell + v / (span * (1 + 1e-9) if span > 0 else 1.0)
    return v[np.argsort(key)]


def _cell_inliers(
    cell: NDArray[np.int64], h: NDArray[np.float64], shape: tuple[int, int], k: float
) -> NDArray[np.bool_]:
    """Reject points far from their cell's median, in robust sigmas (1.4826 MAD)."""
    from scipy import ndimage

    ncell = shape[0] * shape[1]
    lo, span = h.min(), np.ptp(h)
    zs = _sort_within_cells(cell, h - lo, span)
    counts = np.bincount(cell, minlength=ncell)
    starts = np.cumsum(counts) - counts
    occ = counts > 0
    med = np.full(ncell, np.nan)
    s_o, c_o = starts[occ], counts[occ]
    med[occ] = _sorted_quantile(zs, s_o, c_o, 0.5) + lo
    # Median absolute deviation per cell (a second sort): unlike the
    # inter-quartile range it survives up to half the cell being outliers.
    dev = np.abs(h - med[cell])
    ds = _sort_within_cells(cell, dev, float(dev.max()))
    del dev
    sig = np.full(ncell, np.nan)
    sig[occ] = 1.4826 * _sorted_quantile(ds, s_o, c_o, 0.5)
    del zs, ds
    dense = counts >= _MIN_CELL_POINTS
    if not dense.any():
        return np.ones(h.size, dtype=bool)
    pooled = float(np.median(sig[dense]))
    # Neighbourhood reference for sparse cells: 3 x 3 median of the cell
    # medians, empty cells first given their nearest occupied value.
    grid = med.reshape(shape)
    empty = ~occ.reshape(shape)
    if empty.any():
        near = ndimage.distance_transform_edt(empty, return_distances=False, return_indices=True)
        grid = grid[near[0], near[1]]
    nb = ndimage.median_filter(grid, size=3, mode="nearest").ravel()
    nb_sig = 1.4826 * float(np.median(np.abs((med - nb)[dense])))
    ref = np.where(dense, med, nb)
    scale = np.where(dense, np.maximum(sig, pooled), max(pooled, nb_sig))
    scale = np.maximum(scale, 1e-12 * max(span, 1.0))
    return np.abs(h - ref[cell]) <= k * scale[cell]


def _pit_cells(z: NDArray[np.float64], valid: NDArray[np.bool_], k: float) -> NDArray[np.bool_]:
    """Isolated cells far from their neighbourhood median (see ``pit_sigmas``)."""
    from scipy import ndimage

    filled = z
    if not valid.all():
        # Empty cells become +big and -big on alternate squares of a
        # checkerboard, so they cancel in the neighbourhood median instead of
        # copying a nearby value (one outlier copied into its empty
        # neighbours would win its own neighbourhood median).
        big = 10.0 * float(np.nanmax(np.abs(z))) + 1.0
        parity = (np.indices(z.shape).sum(axis=0) % 2) * 2.0 - 1.0
        filled = np.where(valid, z, big * parity)
    ref = ndimage.median_filter(filled, size=_PIT_WINDOW, mode="nearest")
    resid = (z - ref)[valid]
    sigma = 1.4826 * float(np.median(np.abs(resid - np.median(resid))))
    if not sigma > 0:
        return np.zeros(z.shape, dtype=bool)
    flag = valid & (np.abs(np.nan_to_num(z - ref)) > k * sigma)
    if not flag.any():
        return flag
    labels, n = ndimage.label(flag, structure=np.ones((3, 3), dtype=bool))
    sizes = np.bincount(labels.ravel(), minlength=n + 1)
    small = sizes <= _PIT_MAX_CELLS
    small[0] = False
    return small[labels]


#: Up to this many empty cells the Laplace system is solved directly; beyond, by
#: preconditioned conjugate gradients (same equations, bounded memory).
_DIRECT_FILL_MAX_HOLES = 20_000


def _harmonic_fill(z: NDArray[np.float64], valid: NDArray[np.bool_]) -> NDArray[np.float64]:
    """Fill empty cells with the solution of the 5-point Laplace equation.

    Measured cells are Dirichlet values, grid edges are reflecting (zero
    normal gradient). The discrete Laplacian is exact for linear and
    quadratic harmonic surfaces, so interior holes in them fill exactly.
    """
    from scipy import sparse
    from scipy.sparse.linalg import spsolve

    ny, nx = z.shape
    hole = ~valid
    n_h = int(hole.sum())
    index = np.full((ny, nx), -1, dtype=np.int64)
    index[hole] = np.arange(n_h)
    hy, hx = np.nonzero(hole)
    diag = np.zeros(n_h)
    rhs = np.zeros(n_h)
    rows, cols = [], []
    for dy, dx in ((1, 0), (-1, 0), (0, 1), (0, -1)):
        ny_, nx_ = hy + dy, hx + dx
        inside = (ny_ >= 0) & (ny_ < ny) & (nx_ >= 0) & (nx_ < nx)
        diag += inside
        src = np.nonzero(inside)[0]
        nbr = index[ny_[src], nx_[src]]
        unknown = nbr >= 0
        rows.append(src[unknown])
        cols.append(nbr[unknown])
        known = src[~unknown]
        rhs[known] += z[ny_[known], nx_[known]]
    r = np.concatenate(rows)
    c = np.concatenate(cols)
    a = sparse.csr_matrix(
        (
            np.concatenate([diag, -np.ones(r.size)]),
            (np.concatenate([np.arange(n_h), r]), np.concatenate([np.arange(n_h), c])),
        ),
        shape=(n_h, n_h),
    )
    out = z.copy()
    if n_h <= _DIRECT_FILL_MAX_HOLES:
        out[hole] = spsolve(a.tocsc(), rhs)
        return out
    # Many holes (a sparse lidar tile): a direct factorisation's fill-in grew past 12 GB on
    # 3e5 unknowns. Preconditioned conjugate gradients solve the same symmetric positive
    # (semi)definite system in O(cells) memory; start from the measured mean.
    from scipy.sparse.linalg import cg

    x0 = np.full(n_h, float(np.mean(z[valid]))) if valid.any() else np.zeros(n_h)
    pre = sparse.diags(1.0 / diag)
    # Bounded work: the filled cells stay marked invalid, so a fill that stops short on a
    # huge, mostly empty grid only smooths less; the exactness test converges well within.
    x, _ = cg(a, rhs, x0=x0, rtol=1e-10, maxiter=min(20 * int(np.sqrt(n_h)) + 2000, 5000), M=pre)
    out[hole] = x
    return out
