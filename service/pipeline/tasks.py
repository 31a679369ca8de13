"""Compute tasks: pure functions of (stored file, format, meta, recipe parameters).

They run in worker processes (the local pool or a Dask cluster), read files with
``storage.readers`` and return plain results (arrays and ``measures.Score`` tuples). They
never open the database: the job runner is the single writer of rows. On a cluster the
artifact store must be on a file system every worker sees at the same path.
"""

from __future__ import annotations

import hashlib
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np
from numpy.typing import NDArray

__all__ = [
    "HeightmapResult",
    "MovementResult",
    "TerrainResult",
    "code_version",
    "heightmap_task",
    "movement_task",
    "terrain_task",
    "warm_up",
]

_CHUNK = 1 << 20


def code_version() -> str:
    """Version of the code that computed a score: the measures package and gaitscape."""
    import measures
    from service import __version__

    return f"measures {measures.__version__}; gaitscape {__version__}"


def warm_up() -> None:
    """Prepare a worker process: one BLAS thread, heavy modules imported once.

    The pool already runs one job per core; a multithreaded BLAS inside each
    worker would oversubscribe the cores (an 826 x 75 SVD went from 2 ms to
    seconds that way), so each worker keeps BLAS to a single thread.
    """
    from threadpoolctl import threadpool_limits

    threadpool_limits(limits=1, user_api="blas")
    import measures  # noqa: F401
    import storage.readers  # noqa: F401


def _verify(path: str, sha256: str) -> None:
    # The store names files by content; a mismatch means the bytes changed on disk.
    from storage.errors import ArtifactCorrupt

    digest = hashlib.sha256()
    with open(path, "rb") as fh:
        while chunk := fh.read(_CHUNK):
            digest.update(chunk)
    if digest.hexdigest() != sha256:
        raise ArtifactCorrupt(sha256)


@dataclass(frozen=True)
class HeightmapResult:
    """A scan's heightmap (m) with its validity mask and grid spacing (m), plus QC scores."""

    z: NDArray[np.float64]
    valid: NDArray[np.bool_]
    dx_m: float
    dy_m: float
    scores: tuple[Any, ...]
    code_version: str


@dataclass(frozen=True)
class TerrainResult:
    scores: tuple[Any, ...]
    notes: tuple[str, ...]
    code_version: str


@dataclass(frozen=True)
class MovementResult:
    """Movement scores and the preprocessed markers (float32 m: ample for 0.2 mm data)."""

    scores: tuple[Any, ...]
    preprocessed: NDArray[np.float32]
    code_version: str


def heightmap_task(
    path: str,
    *,
    sha256: str,
    fmt: str,
    filename: str,
    read_meta: Mapping[str, Any],
    params: Mapping[str, Any],
) -> HeightmapResult:
    """Read a scan; rasterise a point cloud with ``points_to_heightmap(**params)``.

    A heightmap file is used as it is (its NaN cells are the invalid ones).
    """
    from measures import Score, points_to_heightmap
    from storage.readers import read_scan

    _verify(path, sha256)
    data = read_scan(path, fmt=fmt, filename=filename, **dict(read_meta))
    if data.kind == "points":
        hm = points_to_heightmap(data.points, **dict(params))
        qc = (
            Score("heightmap_filled_fraction", hm.filled_fraction, "1"),
            Score("heightmap_points_used", float(hm.n_points_used), "count"),
            Score("heightmap_outliers", float(hm.n_outliers), "count"),
            Score("heightmap_plane_inlier_fraction", hm.plane_inlier_fraction, "1"),
        )
        return HeightmapResult(hm.z, hm.valid, hm.dx_m, hm.dy_m, qc, code_version())
    z = np.asarray(data.z, dtype=np.float64)
    valid = np.isfinite(z) if data.valid is None else np.asarray(data.valid, dtype=bool)
    return HeightmapResult(z, valid, float(data.dx_m), float(data.dy_m), (), code_version())


def terrain_task(
    z: NDArray[np.float64],
    valid: NDArray[np.bool_],
    *,
    dx_m: float,
    dy_m: float,
    band_m: tuple[float, float] | None,
    params: Mapping[str, Any],
) -> TerrainResult:
    """``measures.terrain_summary`` of one heightmap, restricted to the arena's band."""
    from measures import terrain_summary

    mask = None if bool(np.all(valid)) else valid
    summary = terrain_summary(z, dx_m, dy_m, valid=mask, band_m=band_m, params=dict(params))
    return TerrainResult(tuple(summary.scores), tuple(summary.notes), code_version())


def movement_task(
    path: str,
    *,
    sha256: str,
    fmt: str,
    filename: str,
    read_meta: Mapping[str, Any],
    roles: Mapping[str, Any],
    params: Mapping[str, Any],
) -> MovementResult:
    """Read a trial and run ``measures.movement_summary`` (which preprocesses first)."""
    from measures import movement_summary
    from storage.readers import read_trial

    _verify(path, sha256)
    data = read_trial(path, fmt=fmt, filename=filename, **dict(read_meta))
    summary = movement_summary(
        data.markers,
        frame_rate_hz=data.frame_rate_hz,
        marker_names=list(data.marker_names),
        roles=roles,
        params=dict(params),
    )
    pre = np.asarray(summary.preprocessed.markers, dtype=np.float32)
    return MovementResult(tuple(summary.scores), pre, code_version())
