"""Tests for measures.terrain.registration (rescan alignment and height change).

Noise level 0.2 mm: marker/scanner resolution for small-animal arenas
(common practice). Terrains are synthetic sums of Gaussian bumps.
"""

from __future__ import annotations

import numpy as np
import pytest
from _testing import assert_allclose
from scipy.spatial.transform import Rotation

from measures._validation import InsufficientDataError, InvalidParameterError
from measures.terrain.pointcloud import points_to_heightmap
from measures.terrain.registration import height_change, register_scans

SIGMA = 2e-4  # m (common practice: 0.2 mm resolution)
L = 0.4  # m


class _Terrain:
    """Random smooth relief: 60 Gaussian bumps, heights ~ 4 mm, widths 1-4 cm."""

    def __init__(self, rng: np.random.Generator) -> None:
        self.rng = rng
        self.centres = rng.uniform(0, L, (60, 2))
        self.heights = rng.normal(0, 4e-3, 60)
        self.widths = rng.uniform(0.01, 0.04, 60)

    def height(self, xy: np.ndarray) -> np.ndarray:
        d2 = ((xy[:, None, :] - self.centres[None]) ** 2).sum(-1)
        return (self.heights * np.exp(-d2 / (2 * self.widths**2))).sum(1)

    def scan(self, n: int, extra=None) -> np.ndarray:
        xy = self.rng.uniform(0, L, (n, 2))
        z = self.height(xy) + self.rng.normal(0, SIGMA, n)
        if extra is not None:
            z += extra(xy)
        return np.column_stack([xy, z])


def _rigid(angle_deg: float, axis, shift) -> np.ndarray:
    t = np.eye(4)
    t[:3, :3] = Rotation.from_rotvec(
        np.radians(angle_deg) * np.asarray(axis) / np.linalg.norm(axis)
    ).as_matrix()
    t[:3, 3] = shift
    return t


def _apply(t: np.ndarray, pts: np.ndarray) -> np.ndarray:
    return pts @ t[:3, :3].T + t[:3, 3]


def _errors(estimate: np.ndarray, truth: np.ndarray) -> tuple[float, float]:
    d = estimate @ np.linalg.inv(truth)
    angle = np.degrees(np.arccos(np.clip((np.trace(d[:3, :3]) - 1) / 2, -1, 1)))
    return float(angle), float(np.linalg.norm(estimate[:3, 3] - truth[:3, 3]))


@pytest.mark.parametrize("coarse", ["centroid", "fpfh"])
def test_recovers_a_known_rigid_transform(rng, coarse):
    terrain = _Terrain(rng)
    fixed = terrain.scan(80_000)
    truth = _rigid(4.0, [0.1, 0.2, 1.0], [0.03, -0.02, 0.01])  # a few degrees, a few cm
    moving = _apply(np.linalg.inv(truth), terrain.scan(80_000))  # an independent rescan
    reg = register_scans(moving, fixed, voxel_m=3e-3, coarse=coarse)
    angle_err, shift_err = _errors(reg.transform, truth)
    # Stated tolerances: 0.05 degree and 0.5 mm (a sixth of a voxel); the
    # alignment error of two independent 0.2 mm-noise samples is far below.
    assert angle_err < 0.05
    assert shift_err < 5e-4
    assert_allclose(reg.rotation_deg, 4.0, rtol=0.02)
    # Point-to-plane residual of two independent scans: at most the noise of
    # a difference, sqrt(2) sigma (voxel averaging lowers it further).
    assert reg.rms_residual_m < np.sqrt(2) * SIGMA
    assert reg.fitness > 0.9 and reg.converged


def test_scan_registered_to_itself_is_identity(rng):
    pts = _Terrain(rng).scan(30_000)
    reg = register_scans(pts, pts, voxel_m=4e-3)
    assert_allclose(reg.transform, np.eye(4), atol=1e-9)  # exact correspondence
    assert reg.rms_residual_m < 1e-9 and reg.converged


def test_degenerate_scans_raise(rng):
    pts = _Terrain(rng).scan(1000)
    with pytest.raises(InsufficientDataError):
        register_scans(pts[:2], pts, voxel_m=1e-3)
    with pytest.raises(InvalidParameterError):
        register_scans(np.ones((50, 3)), pts, voxel_m=1e-3)
    with pytest.raises(InvalidParameterError, match="voxel_m"):
        register_scans(pts, pts, voxel_m=-1.0)
    with pytest.raises(InvalidParameterError, match="coarse"):
        register_scans(pts, pts, voxel_m=1e-3, coarse="magic")
    with pytest.raises(InsufficientDataError, match="voxel_m"):
        register_scans(pts, pts, voxel_m=10.0)


def _bump(h: float, s: float, centre=(0.2, 0.2)):
    def f(xy):
        return h * np.exp(-((xy - centre) ** 2).sum(-1) / (2 * s**2))

    return f


def test_height_change_of_a_gaussian_bump():
    # Volume of h exp(-r^2 / 2 s^2) is 2 pi h s^2 (analytic); the cell sum of
    # a Gaussian spanning +-10 s is exact to round-off (trapezoid rule on a
    # rapidly decaying smooth function).
    h, s, dx = 5e-3, 0.02, 1e-3
    c = (np.arange(400) + 0.5) * dx
    xy = np.stack(np.meshgrid(c, c), axis=-1)
    old = np.zeros((400, 400))
    new = old + _bump(h, s)(xy)
    hc = height_change(new, old, dx_m=dx, threshold_m=1e-3)
    volume = 2 * np.pi * h * s**2
    assert_allclose(hc.volume_change_m3, volume, rtol=1e-6)
    assert_allclose(hc.mean_m, volume / L**2, rtol=1e-6)
    assert_allclose(hc.max_abs_m, h, rtol=1e-3)  # the peak falls between cell centres
    # Cells above the threshold: r < s sqrt(2 ln(h / t)), area pi r^2 (analytic);
    # counting cells adds an edge error ~ perimeter * dx / area.
    radius = s * np.sqrt(2 * np.log(h / 1e-3))
    assert_allclose(hc.fraction_moved, np.pi * radius**2 / L**2, rtol=0.02)
    assert hc.n_cells == 400 * 400
    # Masks: leaving out the bump's half x > 0.2 halves the volume (symmetry).
    half = np.broadcast_to(c[None, :] < 0.2, old.shape)
    assert_allclose(
        height_change(new, old, valid_new=half, dx_m=dx).volume_change_m3, volume / 2, rtol=1e-6
    )
    assert [sc.name for sc in hc.scores()][-1] == "height_change_volume_m3"


def test_height_change_after_registration_finds_the_added_bump(rng):
    terrain = _Terrain(rng)
    fixed = terrain.scan(150_000)
    bump = _bump(5e-3, 0.02)
    truth = _rigid(3.0, [0.0, 0.1, 1.0], [0.02, 0.01, -0.005])
    moving = _apply(np.linalg.inv(truth), terrain.scan(150_000, extra=bump))
    reg = register_scans(moving, fixed, voxel_m=3e-3)
    aligned = _apply(reg.transform, moving)
    kw = {"dx_m": 4e-3, "plane": "none", "crop": (0.02, 0.38, 0.02, 0.38)}
    old = points_to_heightmap(fixed, **kw)
    new = points_to_heightmap(aligned, **kw)
    hc = height_change(new.z, old.z, valid_new=new.valid, valid_old=old.valid, dx_m=4e-3)
    volume = 2 * np.pi * 5e-3 * 0.02**2  # analytic, as above
    # Stated tolerance 10 %: cell-mean noise (sigma / sqrt(10) per cell over
    # ~8000 cells) and the small pull of the bump on the ICP fit.
    assert_allclose(hc.volume_change_m3, volume, rtol=0.1)
    assert_allclose(hc.max_abs_m, 5e-3, rtol=0.15)


def test_height_change_rejects_bad_input():
    z = np.zeros((4, 4))
    with pytest.raises(InvalidParameterError, match="z_old"):
        height_change(z, np.zeros((4, 5)), dx_m=1.0)
    with pytest.raises(InvalidParameterError, match="valid_old"):
        height_change(z, z, valid_old=np.ones((4, 4)), dx_m=1.0)
    with pytest.raises(InsufficientDataError):
        height_change(z, z + np.nan, dx_m=1.0)
    with pytest.raises(InvalidParameterError, match="dx_m"):
        height_change(z, z, dx_m=0.0)
