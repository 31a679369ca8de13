"""Heightmap grid from the cloud: cell size from the point spacing, memory before allocation.

A scan's grid must suit the scan: a 1 mm grid over 360 m of airborne lidar
asks for hundreds of GiB, and a 5 mm grid over a 0.5 m tray scanned at
0.2 mm throws away what the capture paid for. The cell size therefore comes
from the cloud's own point spacing (median nearest-neighbour distance in
the ground plane) times a stated factor, kept inside bounds tied to the
arena's extent; and a job estimates the memory its grid will take before
allocating it, refusing with the smallest cell that fits when a cap is given.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

from measures._validation import (
    InsufficientDataError,
    InvalidParameterError,
    as_float_array,
    check_positive_float,
    check_positive_int,
)


def self_neighbours(
    points: NDArray[np.float64], k: int, *, balanced_tree: bool = True
) -> tuple[NDArray[np.float64], NDArray[np.intp]]:
    """Each point's ``k`` nearest points of the same set (itself first): distances, indices.

    ``cKDTree(points).query(points, k)`` with the queries made in the tree's own leaf order
    and the answers put back: neighbouring queries then walk the same nodes, which halves
    the time on a scan of 10^5-10^6 points; each point's answer does not depend on the
    order of the queries, so the result is the same array. ``balanced_tree=False`` builds
    the tree at sliding midpoints (faster again for scans); the distances are the same, the
    index of one of two equidistant neighbours may differ, so callers that use the indices
    keep the default.
    """
    from scipy.spatial import cKDTree

    tree = cKDTree(points, balanced_tree=balanced_tree)
    order = tree.indices
    dist, idx = tree.query(points[order], k=k, workers=-1)
    out_d = np.empty_like(dist)
    out_i = np.empty_like(idx)
    out_d[order] = dist
    out_i[order] = idx
    return out_d, out_i


__all__ = [
    "CELL_SPACING_FACTOR",
    "HeightmapMemory",
    "heightmap_dx_m",
    "heightmap_memory",
    "point_spacing_m",
]

# Cell edge = this many median nearest-neighbour distances. For points on a
# regular scan grid it puts about 9 points in a cell; for uniformly random
# (Poisson) points, whose median nearest-neighbour distance is
# sqrt(ln 2 / (pi rho)), a cell holds 9 ln 2 / pi = 2.0 points on average and
# exp(-2.0) = 14 % of cells are empty (and filled). Our choice, stated.
CELL_SPACING_FACTOR = 3.0
# Bounds (common practice for small-animal arenas, and what the spectra need):
# no cell below 0.1 mm (below the ~0.2 mm resolution of the capture, common
# practice), at least 64 cells along the shorter side (fewer leave no band to
# fit a spectrum on) and at most 8192 cells along the longer side.
MIN_CELL_M = 1e-4
MIN_CELLS_SHORT_SIDE = 64
MAX_CELLS_LONG_SIDE = 8192
# Peak bytes per heightmap cell of a scan job (gridding plus terrain_summary
# with surrogates, float64 heights; bench/bench_terrain.py measures it) and
# per input point of points_to_heightmap (the (n, 3) float64 cloud, its
# levelled copy, cell indices and sort keys; bench/bench_pointcloud.py).
BYTES_PER_CELL = 96
BYTES_PER_POINT = 120
# Spacing is measured on a compact tile of about this many points (a tile,
# not a random subsample: thinning a cloud would lengthen its spacing).
_SPACING_TILE_POINTS = 200_000


@dataclass(frozen=True)
class HeightmapMemory:
    """Memory estimate of one heightmap job.

    Attributes
    ----------
    nx, ny : int
        Cells along x and y.
    cells : int
    n_points : int
    bytes : int
        Estimated peak: ``cells * bytes_per_cell + n_points * bytes_per_point``.
    cap_bytes : int or None
    smallest_dx_m : float or None
        Smallest cell whose job fits ``cap_bytes`` (None without a cap, NaN
        when the points alone exceed it).
    """

    nx: int
    ny: int
    cells: int
    n_points: int
    bytes: int
    cap_bytes: int | None
    smallest_dx_m: float | None


def _xy(points: ArrayLike, function: str) -> np.ndarray:
    pts = as_float_array("points", points, function, ndim=2, min_length=2)
    if pts.shape[1] not in (2, 3):
        raise InvalidParameterError("points", function, "an array of shape (n, 2) or (n, 3)", pts)
    return pts[:, :2]


def point_spacing_m(points: ArrayLike, *, max_points: int = _SPACING_TILE_POINTS) -> float:
    """Median nearest-neighbour distance of the points in the x-y plane (m).

    Clouds larger than ``max_points`` are measured on the compact tile of
    about ``max_points`` points nearest the median point (a square in x-y),
    so the spacing is that of the full-density cloud. Duplicate points (zero
    distance) are left out.

    Parameters
    ----------
    points : array (n, 2) or (n, 3), m
        Only x and y are used: give a levelled cloud (z up).
    max_points : int

    Returns
    -------
    float, m

    Raises
    ------
    InsufficientDataError
        Fewer than 2 distinct points.

    References
    ----------
    Clark & Evans (1954), Ecology 35:445 (nearest-neighbour distances of
    random points: the median is sqrt(ln 2 / (pi rho)) at density rho).

    Examples
    --------
    >>> import numpy as np
    >>> g = np.stack(np.meshgrid(np.arange(50), np.arange(40)), -1).reshape(-1, 2) * 2e-4
    >>> round(point_spacing_m(g) * 1e4, 6)
    2.0
    """
    fn = "point_spacing_m"
    xy = _xy(points, fn)
    m = check_positive_int("max_points", max_points, fn, minimum=100)
    if xy.shape[0] > m:
        centre = np.median(xy, axis=0)
        # Chebyshev distance to the centre: the m nearest form a square tile.
        d = np.max(np.abs(xy - centre), axis=1)
        xy = xy[np.argpartition(d, m - 1)[:m]]
    dist, _ = self_neighbours(np.ascontiguousarray(xy, dtype=np.float64), 2, balanced_tree=False)
    nn = dist[:, 1]
    nn = nn[nn > 0]
    if nn.size == 0:
        raise InsufficientDataError("points", fn, "at least 2 distinct points in x-y", points)
    return float(np.median(nn))


def heightmap_dx_m(
    points: ArrayLike,
    *,
    dx_m: float | None = None,
    spacing_factor: float = CELL_SPACING_FACTOR,
    bounds_m: tuple[float | None, float | None] | None = None,
) -> tuple[float, str]:
    """Cell size for gridding a levelled cloud, and a note saying how it was chosen.

    ``dx_m`` given: used as is (the recipe fixes it). Otherwise
    ``spacing_factor * point_spacing_m(points)`` clipped to the bounds:
    by default at least 0.1 mm and ``longest side / 8192``, at most
    ``shortest side / 64`` (module constants); ``bounds_m`` overrides them.

    Returns
    -------
    (dx_m, note) : (float, str)

    Examples
    --------
    >>> import numpy as np
    >>> g = np.stack(np.meshgrid(np.arange(400), np.arange(300)), -1).reshape(-1, 2) * 1e-3
    >>> c, note = heightmap_dx_m(g)
    >>> round(c, 6)
    0.003
    """
    fn = "heightmap_dx_m"
    if dx_m is not None:
        c = check_positive_float("dx_m", dx_m, fn)
        return c, f"cell {c:.3g} m fixed by the parameters"
    f = check_positive_float("spacing_factor", spacing_factor, fn)
    xy = _xy(points, fn)
    span = np.ptp(xy, axis=0)
    if not np.all(span > 0):
        raise InsufficientDataError("points", fn, "points spanning an area in x-y", points)
    lo = max(MIN_CELL_M, float(span.max()) / MAX_CELLS_LONG_SIDE)
    hi = float(span.min()) / MIN_CELLS_SHORT_SIDE
    if bounds_m is not None:
        try:
            blo, bhi = bounds_m
        except (TypeError, ValueError):
            raise InvalidParameterError("bounds_m", fn, "a pair (lo, hi) in m", bounds_m) from None
        lo = lo if blo is None else check_positive_float("bounds_m", blo, fn)
        hi = hi if bhi is None else check_positive_float("bounds_m", bhi, fn)
    spacing = point_spacing_m(xy)
    # Clustered clouds (airborne lidar lines, ground-class subsets) have a median neighbour
    # distance far below the mean area per point sqrt(A / n): on such a tile (23,000 ground
    # points, 0.08 m median spacing, 1 km box) the median alone asks for 13 M cells, 99.8 %
    # of them empty. For such clouds the geometric mean of the two sits between local
    # sampling and coverage. Evenly sampled scans are left alone: there sqrt(A / n) is 1-2.1x
    # the median distance (a grid; Poisson points, 0.5 / sqrt(density) - analytic), so the
    # rule applies only beyond 3x.
    coverage = math.sqrt(float(span[0]) * float(span[1]) / max(xy.shape[0], 1))
    if coverage > 3.0 * spacing:
        spacing = math.sqrt(spacing * coverage)
    raw = f * spacing
    c = float(min(max(raw, lo), hi)) if lo <= hi else hi
    note = f"cell {c:.3g} m = {f:g} x point spacing {spacing:.3g} m"
    if c != raw:
        note = (
            f"cell {c:.3g} m: {f:g} x point spacing {spacing:.3g} m = {raw:.3g} m "
            f"clipped to the bounds [{lo:.3g}, {hi:.3g}] m"
        )
    return c, note


def _cells(extent_x: float, extent_y: float, cell: float) -> tuple[int, int]:
    nx = max(1, math.ceil(extent_x / cell - 1e-9))
    ny = max(1, math.ceil(extent_y / cell - 1e-9))
    return nx, ny


def heightmap_memory(
    extent_x_m: float,
    extent_y_m: float,
    dx_m: float,
    *,
    n_points: int = 0,
    cap_bytes: int | None = None,
    bytes_per_cell: int = BYTES_PER_CELL,
    bytes_per_point: int = BYTES_PER_POINT,
) -> HeightmapMemory:
    """Estimate the peak memory of a heightmap job before allocating anything.

    Pure arithmetic: ``cells = ceil(extent_x / cell) * ceil(extent_y / cell)``
    and ``bytes = cells * bytes_per_cell + n_points * bytes_per_point``.

    Parameters
    ----------
    extent_x_m, extent_y_m : float, m
        Extent of the grid (the crop rectangle of the levelled cloud).
    dx_m : float, m
    n_points : int
        Points to be gridded (0 for a heightmap upload).
    cap_bytes : int, optional
        Refuse past this many bytes.
    bytes_per_cell, bytes_per_point : int
        Cost model (module constants, measured by the benchmarks).

    Returns
    -------
    HeightmapMemory

    Raises
    ------
    InvalidParameterError
        The estimate exceeds ``cap_bytes``; the message gives cells, bytes and
        the smallest cell that fits (or says the points alone do not fit).

    Examples
    --------
    >>> m = heightmap_memory(0.5, 0.25, 1e-3)
    >>> m.nx, m.ny, m.cells, m.bytes
    (500, 250, 125000, 12000000)
    """
    fn = "heightmap_memory"
    ex = check_positive_float("extent_x_m", extent_x_m, fn)
    ey = check_positive_float("extent_y_m", extent_y_m, fn)
    cell = check_positive_float("dx_m", dx_m, fn)
    npts = check_positive_int("n_points", n_points, fn, minimum=0)
    bpc = check_positive_int("bytes_per_cell", bytes_per_cell, fn)
    bpp = check_positive_int("bytes_per_point", bytes_per_point, fn, minimum=0)
    nx, ny = _cells(ex, ey, cell)
    cells = nx * ny
    total = cells * bpc + npts * bpp
    smallest = None
    if cap_bytes is not None:
        cap = check_positive_int("cap_bytes", cap_bytes, fn)
        room = cap - npts * bpp
        if room < bpc:
            smallest = float("nan")
        else:
            # Continuous solution, then step up until the ceil()s fit too.
            c = math.sqrt(ex * ey * bpc / room)
            while math.prod(_cells(ex, ey, c)) * bpc > room:
                c *= 1.001
            smallest = c
        if total > cap:
            if math.isnan(smallest):
                hint = f"the {npts:,} points alone need {npts * bpp:,} bytes"
            else:
                hint = f"the smallest cell that fits is {smallest:.4g} m"
            raise InvalidParameterError(
                "dx_m",
                fn,
                f"a cell whose grid fits the memory cap of {cap:,} bytes: a {cell:.4g} m "
                f"cell over {ex:.4g} m x {ey:.4g} m makes {nx:,} x {ny:,} = {cells:,} cells "
                f"and needs about {total:,} bytes; {hint}",
                cell,
            )
    return HeightmapMemory(nx, ny, cells, npts, total, cap_bytes, smallest)
