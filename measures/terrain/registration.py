"""Rescans of one arena: rigid registration and height change between scans."""

from __future__ import annotations

from dataclasses import dataclass
from types import MappingProxyType
from typing import Any

import numpy as np
from numpy.typing import ArrayLike, NDArray

from measures._types import Score
from measures._validation import (
    InsufficientDataError,
    InvalidParameterError,
    as_float_array,
    check_choice,
    check_positive_float,
    check_positive_int,
)
from measures.terrain.pointcloud import _check_points, _voxel_downsample

__all__ = ["HeightChange", "ScanRegistration", "height_change", "register_scans"]

# Coarse-to-fine ICP: voxel multiples, finest last.
_ICP_LEVELS = (4.0, 2.0, 1.0)


@dataclass(frozen=True, eq=False)
class ScanRegistration:
    """Rigid transform taking a new scan onto a previous scan of the same arena.

    Attributes
    ----------
    transform : ndarray, shape (4, 4)
        Homogeneous transform; ``transform @ [p, 1]`` maps a moving point
        into the fixed scan's frame.
    rotation_deg : float
        Angle of the rotation part (axis-angle), degrees.
    translation_m : ndarray, shape (3,), m
        Translation part.
    rms_residual_m : float, m
        Root mean square point-to-plane distance from the aligned moving
        points to the fixed surface (both voxel-averaged), over the
        correspondences within ``max_correspondence_m``.
    fitness : float
        Fraction of aligned moving points with a fixed point within
        ``max_correspondence_m`` (open3d's definition).
    converged : bool
        True when one more ICP iteration moves the result by less than
        0.01 voxel and 0.01 degree and fitness >= 0.5.
    n_correspondences : int
        Correspondences behind ``rms_residual_m``.
    parameters : mapping
        Parameters actually used.
    """

    transform: NDArray[np.float64]
    rotation_deg: float
    translation_m: NDArray[np.float64]
    rms_residual_m: float
    fitness: float
    converged: bool
    n_correspondences: int
    parameters: MappingProxyType[str, Any]


@dataclass(frozen=True)
class HeightChange:
    """Summary of the change between two heightmaps on the same grid.

    Attributes
    ----------
    mean_m, rms_m, max_abs_m : float, m
        Mean, root mean square and largest absolute change (new - old).
    fraction_moved : float
        Fraction of compared cells whose absolute change exceeds ``threshold_m``.
    volume_change_m3 : float, m^3
        Sum of change times cell area (positive: material added).
    n_cells : int
        Cells compared (valid in both).
    threshold_m : float, m
        Threshold used for ``fraction_moved``.
    """

    mean_m: float
    rms_m: float
    max_abs_m: float
    fraction_moved: float
    volume_change_m3: float
    n_cells: int
    threshold_m: float

    def scores(self) -> list[Score]:
        """The summary as score rows."""
        return [
            Score("height_change_mean_m", self.mean_m, "m"),
            Score("height_change_rms_m", self.rms_m, "m"),
            Score("height_change_max_abs_m", self.max_abs_m, "m"),
            Score("height_change_fraction_moved", self.fraction_moved, "1"),
            Score("height_change_volume_m3", self.volume_change_m3, "m^3"),
        ]


def register_scans(
    moving: ArrayLike,
    fixed: ArrayLike,
    *,
    voxel_m: float,
    max_iterations: int = 50,
    max_correspondence_m: float | None = None,
    coarse: str = "centroid",
    seed: int = 0,
) -> ScanRegistration:
    """Align a new scan of an arena (``moving``) to a previous one (``fixed``).

    Parameters
    ----------
    moving, fixed : array_like of float, shape (n, 3) and (m, 3), m
        The two point clouds (any size; both are voxel-averaged).
    voxel_m : float, m
        Voxel edge of the finest level; a few times the point spacing and
        smaller than the terrain features that pin the alignment.
    max_iterations : int, default 50
        ICP iterations per level (levels at 4, 2 and 1 voxel).
    max_correspondence_m : float or None, m
        Largest point pair distance at the finest level; None uses 3 voxels
        (coarser levels scale with their voxel).
    coarse : {"centroid", "fpfh", "none"}, default "centroid"
        Starting transform. "centroid": translate centroid onto centroid
        (rescans from a similar viewpoint). "fpfh": global registration by
        RANSAC on FPFH feature matches (open3d), for arbitrary poses; needs
        distinctive relief. "none": identity.
    seed : int, default 0
        Seeds open3d's RANSAC for "fpfh".

    Returns
    -------
    ScanRegistration

    References
    ----------
    Besl & McKay (1992), A method for registration of 3-D shapes, IEEE
    TPAMI 14:239. Chen & Medioni (1992), Object modelling by registration of
    multiple range images, Image Vis. Comput. 10:145 (point-to-plane).
    Rusu, Blodow & Beetz (2009), Fast point feature histograms (FPFH) for
    3D registration, ICRA.
    """
    func = "register_scans"
    mov = _check_points(moving, "moving", func)
    fix = _check_points(fixed, "fixed", func)
    voxel_m = check_positive_float("voxel_m", voxel_m, func)
    max_iterations = check_positive_int("max_iterations", max_iterations, func)
    check_choice("coarse", coarse, func, ("centroid", "fpfh", "none"))
    corr = 3.0 * voxel_m
    if max_correspondence_m is not None:
        corr = check_positive_float("max_correspondence_m", max_correspondence_m, func)

    import open3d as o3d

    reg = o3d.pipelines.registration
    levels = {s: (_cloud(mov, s * voxel_m), _cloud(fix, s * voxel_m)) for s in _ICP_LEVELS}
    src, tgt = levels[_ICP_LEVELS[0]]
    if min(len(src.points), len(tgt.points)) < 3:
        raise InsufficientDataError(
            "voxel_m", func, "a voxel small enough to leave >= 3 points per scan", voxel_m
        )
    if coarse == "centroid":
        start = np.eye(4)
        start[:3, 3] = fix.mean(axis=0) - mov.mean(axis=0)
    elif coarse == "fpfh":
        start = _fpfh_start(src, tgt, _ICP_LEVELS[0] * voxel_m, seed)
    else:
        start = np.eye(4)
    current = start
    for s in _ICP_LEVELS:
        src, tgt = levels[s]
        # Tukey's biweight with c = 4.685 robust sigmas (95 % Gaussian
        # efficiency; Holland & Welsch 1977) of the current point-to-plane
        # residuals, so that changed ground (a new mound, a dug pit) does
        # not pull the alignment.
        estimation = reg.TransformationEstimationPointToPlane(
            reg.TukeyLoss(k=_tukey_k(src, tgt, current, corr * s, voxel_m))
        )
        criteria = reg.ICPConvergenceCriteria(
            relative_fitness=1e-7, relative_rmse=1e-7, max_iteration=max_iterations
        )
        current = reg.registration_icp(
            src, tgt, corr * s, current, estimation, criteria
        ).transformation
    step = reg.registration_icp(
        src, tgt, corr, current, estimation, reg.ICPConvergenceCriteria(max_iteration=1)
    ).transformation
    delta = step @ np.linalg.inv(current)
    settled = (
        _angle_deg(delta[:3, :3]) < 1e-2 and float(np.linalg.norm(delta[:3, 3])) < 1e-2 * voxel_m
    )
    rms, n_corr, fitness = _point_to_plane_rms(src, tgt, current, corr)
    current = np.asarray(current, dtype=np.float64).copy()
    current.setflags(write=False)
    return ScanRegistration(
        transform=current,
        rotation_deg=_angle_deg(current[:3, :3]),
        translation_m=current[:3, 3].copy(),
        rms_residual_m=rms,
        fitness=fitness,
        converged=bool(settled and fitness >= 0.5),
        n_correspondences=n_corr,
        parameters=MappingProxyType(
            {
                "voxel_m": voxel_m,
                "max_iterations": max_iterations,
                "max_correspondence_m": corr,
                "coarse": coarse,
                "seed": seed,
                "levels": _ICP_LEVELS,
            }
        ),
    )


def _cloud(pts: NDArray[np.float64], voxel_m: float):  # type: ignore[no-untyped-def]
    """Voxel-averaged open3d cloud with normals from a 2.5-voxel neighbourhood."""
    import open3d as o3d

    cloud = o3d.geometry.PointCloud(o3d.utility.Vector3dVector(_voxel_downsample(pts, voxel_m)))
    cloud.estimate_normals(o3d.geometry.KDTreeSearchParamHybrid(radius=2.5 * voxel_m, max_nn=30))
    return cloud


def _fpfh_start(src, tgt, voxel_m: float, seed: int) -> NDArray[np.float64]:  # type: ignore[no-untyped-def]
    import open3d as o3d

    reg = o3d.pipelines.registration
    param = o3d.geometry.KDTreeSearchParamHybrid(radius=5 * voxel_m, max_nn=100)
    # open3d's stub drops the runtime default of `indices` (all points)
    f_src = reg.compute_fpfh_feature(src, param)  # type: ignore[call-arg]
    f_tgt = reg.compute_fpfh_feature(tgt, param)  # type: ignore[call-arg]
    o3d.utility.random.seed(int(seed))
    dist = 1.5 * voxel_m
    result = reg.registration_ransac_based_on_feature_matching(
        src,
        tgt,
        f_src,
        f_tgt,
        True,
        dist,
        reg.TransformationEstimationPointToPoint(False),
        3,
        [
            reg.CorrespondenceCheckerBasedOnEdgeLength(0.9),
            reg.CorrespondenceCheckerBasedOnDistance(dist),
        ],
        reg.RANSACConvergenceCriteria(100_000, 0.999),
    )
    return np.asarray(result.transformation, dtype=np.float64)


def _tukey_k(src, tgt, transform, max_dist: float, voxel_m: float) -> float:  # type: ignore[no-untyped-def]
    r = _residuals(src, tgt, transform, max_dist)
    sigma = 1.4826 * float(np.median(np.abs(r))) if r.size else max_dist
    return 4.685 * max(sigma, 1e-3 * voxel_m)


def _angle_deg(rot: NDArray[np.float64]) -> float:
    """Rotation angle from the trace: cos(theta) = (tr R - 1) / 2."""
    c = np.clip((np.trace(rot) - 1.0) / 2.0, -1.0, 1.0)
    return float(np.degrees(np.arccos(c)))


def _residuals(src, tgt, transform, max_dist: float) -> NDArray[np.float64]:  # type: ignore[no-untyped-def]
    """Point-to-plane distances of transformed ``src`` points with a ``tgt`` point within reach."""
    from scipy.spatial import cKDTree

    p = np.asarray(src.points) @ np.asarray(transform)[:3, :3].T + np.asarray(transform)[:3, 3]
    q = np.asarray(tgt.points)
    n = np.asarray(tgt.normals)
    dist, idx = cKDTree(q).query(p, distance_upper_bound=max_dist)
    ok = np.isfinite(dist)
    return np.einsum("ij,ij->i", p[ok] - q[idx[ok]], n[idx[ok]])


def _point_to_plane_rms(src, tgt, transform, max_dist: float) -> tuple[float, int, float]:  # type: ignore[no-untyped-def]
    r = _residuals(src, tgt, transform, max_dist)
    if r.size == 0:
        return float("nan"), 0, 0.0
    return float(np.sqrt(np.mean(r**2))), int(r.size), r.size / len(src.points)


def height_change(
    z_new: ArrayLike,
    z_old: ArrayLike,
    *,
    valid_new: ArrayLike | None = None,
    valid_old: ArrayLike | None = None,
    dx_m: float,
    dy_m: float | None = None,
    threshold_m: float = 1e-3,
) -> HeightChange:
    """Summarise the height change between two heightmaps on one grid.

    Parameters
    ----------
    z_new, z_old : array_like of float, shape (ny, nx), m
        Heights on the same grid (register the scans and grid them with the
        same crop first). NaN cells are ignored.
    valid_new, valid_old : array_like of bool, shape (ny, nx), optional
        Cells to compare (e.g. ``Heightmap.valid``, to leave filled holes
        out); default all finite cells.
    dx_m, dy_m : float, m
        Cell spacing; ``dy_m`` defaults to ``dx_m``.
    threshold_m : float, m, default 1e-3
        A cell "moved" when its absolute change exceeds this. The default is
        about 3 standard deviations of the difference of two scans at 0.2 mm
        resolution (3 x sqrt(2) x 0.2 mm; the resolution is common practice).

    Returns
    -------
    HeightChange

    Examples
    --------
    >>> import numpy as np
    >>> old = np.zeros((10, 10)); new = old.copy(); new[2:4, 2:4] = 0.01
    >>> hc = height_change(new, old, dx_m=0.1)
    >>> round(hc.volume_change_m3, 6), hc.fraction_moved
    (0.0004, 0.04)
    """
    func = "height_change"
    new = as_float_array("z_new", z_new, func, ndim=2, allow_nan=True)
    old = as_float_array("z_old", z_old, func, ndim=2, allow_nan=True)
    if new.shape != old.shape:
        raise InvalidParameterError("z_old", func, f"an array of shape {new.shape}", old)
    dx_m = check_positive_float("dx_m", dx_m, func)
    dy_m = dx_m if dy_m is None else check_positive_float("dy_m", dy_m, func)
    threshold_m = check_positive_float("threshold_m", threshold_m, func, allow_zero=True)
    mask = np.isfinite(new) & np.isfinite(old)
    for name, extra in (("valid_new", valid_new), ("valid_old", valid_old)):
        if extra is not None:
            m = np.asarray(extra)
            if m.shape != new.shape or m.dtype != bool:
                raise InvalidParameterError(name, func, f"a boolean array of shape {new.shape}", m)
            mask &= m
    if not mask.any():
        raise InsufficientDataError("valid_new", func, "at least one cell valid in both", mask)
    dz = new[mask] - old[mask]
    return HeightChange(
        mean_m=float(dz.mean()),
        rms_m=float(np.sqrt(np.mean(dz**2))),
        max_abs_m=float(np.abs(dz).max()),
        fraction_moved=float(np.mean(np.abs(dz) > threshold_m)),
        volume_change_m3=float(dz.sum() * dx_m * dy_m),
        n_cells=int(dz.size),
        threshold_m=threshold_m,
    )
