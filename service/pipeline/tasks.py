"""Compute tasks: pure functions of (stored file, format, meta, recipe parameters).

They run in worker processes (the local pool or a Dask cluster), read files with
``storage.readers`` and return plain results (arrays and ``measures.Score`` tuples). They
never open the database: the job runner is the single writer of rows. On a cluster the
artifact store must be on a file system every worker sees at the same path.
"""

from __future__ import annotations

import contextlib
import math
import os
import sys
from collections.abc import Mapping
from dataclasses import dataclass, field, fields
from typing import Any

import numpy as np
from numpy.typing import NDArray

__all__ = [
    "DEFAULT_MAX_GRID_CELLS",
    "HeightmapResult",
    "MovementResult",
    "TerrainResult",
    "code_version",
    "heightmap_task",
    "movement_task",
    "prepare",
    "run_pinned",
    "terrain_task",
    "warm_up",
]

#: Largest heightmap (cells) a job may allocate unless the settings say otherwise:
#: 4096 x 4096, 128 MiB per float64 array (the terrain summary holds several at once).
DEFAULT_MAX_GRID_CELLS = 4096 * 4096
#: Window of the per-window movement measures stored for local correspondence (s); the
#: same default as the local-correspondence view.
WINDOW_S = 2.0
_warm = False


def code_version() -> str:
    """Version of the code that computed a score: the measures package and gaitscape."""
    import measures
    from service import __version__

    return f"measures {measures.__version__}; gaitscape {__version__}"


def warm_up() -> None:
    """Prepare a worker process: one BLAS thread, one numba thread, heavy modules imported once.

    The pool already runs one job per core; a multithreaded BLAS inside each
    worker would oversubscribe the cores (an 826 x 75 SVD went from 2 ms to
    seconds that way), so each worker keeps BLAS to a single thread. The same
    holds for numba's parallel kernels (RQA): with one OpenMP thread per core in
    every worker, threads waiting at the end of each parallel region spin on
    cores the other worker needs (demo trials took 2.6x the CPU time and 2.5x
    the wall time on a loaded 2-core machine).
    """
    global _warm
    # A BLAS loaded later (scipy ships its own OpenBLAS, loaded on first use of
    # scipy.linalg) reads these at load time; threadpoolctl reaches those already loaded.
    # numba reads NUMBA_NUM_THREADS when it is first imported (after this, in a worker).
    for var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS", "NUMBA_NUM_THREADS"):
        os.environ[var] = "1"
    import scipy.linalg  # noqa: F401
    from threadpoolctl import threadpool_limits

    import measures  # noqa: F401
    import storage.readers  # noqa: F401

    threadpool_limits(limits=1, user_api="blas")
    if "numba" in sys.modules:  # imported before us (a Dask worker): limit its launches
        sys.modules["numba"].set_num_threads(1)
    _warm = True


#: What scan and trial jobs import on first use (``measures`` itself imports lazily).
_SCORING_MODULES = (
    "measures.correspondence.local",
    "measures.movement.bodyframe",
    "measures.movement.summary",
    "measures.terrain.pointcloud",
    "measures.terrain.summary",
)


def prepare() -> int:
    """Do a worker's one-time costs before its first job: import what scoring uses.

    About 2 CPU-s a worker that the first job would otherwise pay (the numba kernels load
    from their on-disk cache on first call); a pool started early (``LocalPool.start``,
    the demo) does it while its inputs are still being made. Returns the process id
    (which worker ran it).
    """
    if not _warm:
        warm_up()
    import importlib

    for name in _SCORING_MODULES:
        importlib.import_module(name)
    with contextlib.suppress(ImportError):  # the reader says so when a C3D file comes
        import ezc3d  # noqa: F401  # the C3D reader's library, for trial jobs
    return os.getpid()


def run_pinned(fn: Any, /, *args: Any, **kwargs: Any) -> Any:
    """Call ``fn`` after :func:`warm_up` has run once in this process.

    Dask workers have no pool initializer: every task goes through here, so BLAS is pinned
    to one thread in them as in the local pool's workers.
    """
    if not _warm:
        warm_up()
    return fn(*args, **kwargs)


def blas_threads() -> int:
    """Largest thread count of the BLAS libraries loaded in this process (for tests)."""
    from threadpoolctl import threadpool_info

    counts = [int(i["num_threads"]) for i in threadpool_info() if i.get("user_api") == "blas"]
    return max(counts, default=1)


def numba_threads() -> int:
    """Threads numba's parallel kernels use in this process (for tests)."""
    import numba

    return int(numba.get_num_threads())


def _verify(path: str, sha256: str) -> None:
    # The store names files by content; a mismatch means the bytes changed on disk.
    from storage.artifacts import sha256_file
    from storage.errors import ArtifactCorrupt

    if sha256_file(path) != sha256:
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
    """Terrain scores, the summary's notes and its plot arrays (for the report)."""

    scores: tuple[Any, ...]
    notes: tuple[str, ...]
    code_version: str
    plots: dict[str, NDArray[Any]] = field(default_factory=dict)


@dataclass(frozen=True)
class MovementResult:
    """Movement scores and the preprocessed markers (float32 m: ample for 0.2 mm data),
    the summary's notes and plot arrays, and the per-window movement measures that local
    correspondence joins with terrain patches (empty when the trial is too short)."""

    scores: tuple[Any, ...]
    preprocessed: NDArray[np.float32]
    code_version: str
    notes: tuple[str, ...] = ()
    plots: dict[str, NDArray[Any]] = field(default_factory=dict)
    windows: dict[str, NDArray[Any]] = field(default_factory=dict)


def plot_arrays(result: Any) -> dict[str, NDArray[Any]]:
    """The numeric array fields of a summary result (what its figures draw), by name.

    Read generically, so a field a summary gains is stored without a change here.
    """
    out: dict[str, NDArray[Any]] = {}
    for f in fields(result):
        value = getattr(result, f.name)
        if isinstance(value, np.ndarray) and value.dtype.kind in "biuf":
            out[f.name] = value
    return out


def _bytes_text(n: float) -> str:
    for unit, size in (("GiB", 2**30), ("MiB", 2**20), ("KiB", 2**10)):
        if n >= size:
            return f"{n / size:.1f} {unit}"
    return f"{n:.0f} bytes"


def grid_cap_check(
    extent_x_m: float, extent_y_m: float, dx_m: float, max_cells: int | None
) -> None:
    """Refuse a heightmap past ``max_cells`` before anything is allocated.

    The message names the cells, the bytes per float64 array and the smallest cell that
    fits, so a lab can set ``heightmap.dx_m`` in a recipe (or raise the cap).
    """
    from measures.errors import InvalidParameterError

    if max_cells is None or not (dx_m > 0):
        return
    nx = math.floor(extent_x_m / dx_m) + 1
    ny = math.floor(extent_y_m / dx_m) + 1
    cells = nx * ny
    if cells <= max_cells:
        return
    fit = math.sqrt(max(extent_x_m, dx_m) * max(extent_y_m, dx_m) / max_cells)
    while (math.floor(extent_x_m / fit) + 1) * (math.floor(extent_y_m / fit) + 1) > max_cells:
        fit *= 1.01
    raise InvalidParameterError(
        "dx_m",
        "the heightmap step",
        f"at least {fit:.3g} m for this scan ({extent_x_m:.3g} m x {extent_y_m:.3g} m): at "
        f"{dx_m:g} m its grid would have {nx:,} x {ny:,} = {cells:,} cells "
        f"({_bytes_text(cells * 8)} per float64 array), past the cap of {max_cells:,} "
        "cells (GAITSCAPE_MAX_GRID_CELLS); set heightmap.dx_m in a recipe or raise the cap",
        dx_m,
    )


def _points_extent(points: NDArray[np.float64], crop: Any) -> tuple[float, float]:
    if isinstance(crop, (list, tuple)) and len(crop) == 4:
        x0, x1, y0, y1 = (float(v) for v in crop)
        return abs(x1 - x0), abs(y1 - y0)
    xy = np.asarray(points)[:, :2]
    finite = xy[np.all(np.isfinite(xy), axis=1)]
    if finite.size == 0:
        return 0.0, 0.0
    ex, ey = (float(v) for v in finite.max(axis=0) - finite.min(axis=0))
    if isinstance(crop, (int, float)):
        ex, ey = max(ex - 2 * float(crop), 0.0), max(ey - 2 * float(crop), 0.0)
    return ex, ey


def heightmap_task(
    path: str,
    *,
    sha256: str,
    fmt: str,
    filename: str,
    read_meta: Mapping[str, Any],
    params: Mapping[str, Any],
    max_cells: int | None = DEFAULT_MAX_GRID_CELLS,
) -> HeightmapResult:
    """Read a scan; rasterise a point cloud with ``points_to_heightmap(**params)``.

    A heightmap file is used as it is (its NaN cells are the invalid ones). Past
    ``max_cells`` the job is refused before the grid is allocated (a 360 m lidar tile on a
    1 mm grid would ask for hundreds of GiB). ``heightmap_hole_fraction`` is the fraction of
    cells without data (filled by interpolation for a point cloud, NaN in a heightmap file).
    """
    from measures import Score, heightmap_dx_m, points_to_heightmap
    from storage.readers import read_scan

    _verify(path, sha256)
    data = read_scan(path, fmt=fmt, filename=filename, **dict(read_meta))
    if data.kind == "points":
        points = np.asarray(data.points, dtype=np.float64)
        ex, ey = _points_extent(points, params.get("crop"))
        # The cell is chosen once, here, so the cap is checked on the grid that will be built.
        dx_m, cell_note = heightmap_dx_m(points, dx_m=params.get("dx_m"))
        grid_cap_check(ex, ey, dx_m, max_cells)
        hm = points_to_heightmap(points, **{**dict(params), "dx_m": dx_m})
        qc: tuple[Any, ...] = (
            Score("heightmap_dx_m", dx_m, "m", note=cell_note),
            Score("heightmap_filled_fraction", hm.filled_fraction, "1"),
            Score("heightmap_hole_fraction", hm.filled_fraction, "1"),
            Score("heightmap_points_used", float(hm.n_points_used), "count"),
            Score("heightmap_outliers", float(hm.n_outliers), "count"),
            Score("heightmap_plane_inlier_fraction", hm.plane_inlier_fraction, "1"),
        )
        return HeightmapResult(hm.z, hm.valid, hm.dx_m, hm.dy_m, qc, code_version())
    z = np.asarray(data.z, dtype=np.float64)
    if data.dx_m is None or data.dy_m is None:  # the reader guarantees both for heightmaps
        raise ValueError(f"heightmap {filename!r} was read without its grid spacing")
    dx_m, dy_m = float(data.dx_m), float(data.dy_m)
    if max_cells is not None and z.size > max_cells:
        grid_cap_check((z.shape[1] - 1) * dx_m, (z.shape[0] - 1) * dy_m, dx_m, max_cells)
    valid = np.isfinite(z) if data.valid is None else np.asarray(data.valid, dtype=bool)
    holes = float(1.0 - valid.mean())
    qc = (Score("heightmap_hole_fraction", holes, "1"),)
    return HeightmapResult(z, valid, dx_m, dy_m, qc, code_version())


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
    return TerrainResult(
        tuple(summary.scores), tuple(summary.notes), code_version(), plot_arrays(summary)
    )


def _flagged_fraction(pre: Any) -> float | None:
    """Fraction of frames where the spike filter flagged any marker (None if not reported)."""
    spikes = getattr(pre, "spikes", None)
    frames = getattr(spikes, "spike_frames", None)
    n = int(np.asarray(pre.markers).shape[0])
    if frames is None or n == 0:
        return None
    flagged = np.zeros(n, dtype=bool)
    for f in frames:
        idx = np.asarray(f, dtype=np.intp)
        flagged[idx[(idx >= 0) & (idx < n)]] = True
    return float(flagged.mean())


def _window_measures(
    summary: Any, *, fs: float, markers_names: list[str], roles: Mapping[str, Any]
) -> tuple[dict[str, NDArray[Any]], str]:
    """Per-window movement measures of the summary's own analysis signal, and the body
    path in the arena frame (local correspondence maps windows onto terrain with it)."""
    from measures.correspondence.local import window_movement_measures
    from measures.errors import InvalidParameterError
    from measures.movement.bodyframe import body_frame

    p = summary.params
    by = {s.name: float(s.value) for s in summary.scores}
    delay_s, dim = by.get("embedding_delay_s", math.nan), by.get("embedding_dimension", math.nan)
    if not (math.isfinite(delay_s) and math.isfinite(dim)):
        return {}, "per-window measures: no embedding (delay or dimension missing)"
    delay, dimension = max(1, round(delay_s * fs)), int(dim)
    time_s = np.asarray(summary.signal_time_s, dtype=np.float64)
    try:
        wm = window_movement_measures(
            summary.signal, frame_rate_hz=fs, window_s=WINDOW_S, delay=delay,
            dimension=dimension, start_time_s=float(time_s[0]) if time_s.size else 0.0,
            recurrence_rate=p["rqa_recurrence_rate"], symbol_order=p["symbol_order"],
            seed=p["seed"],
        )  # fmt: skip
        lookup = {n: i for i, n in enumerate(markers_names)}

        def idx(v: Any) -> list[int]:
            return [lookup[n] for n in ([v] if isinstance(v, str) else v)]

        pre = summary.preprocessed
        body = body_frame(pre.markers, anterior=idx(roles["anterior"]),
                          posterior=idx(roles["posterior"]), up=p["up"])  # fmt: skip
    except InvalidParameterError as exc:
        return {}, f"per-window measures: {exc}"
    out: dict[str, NDArray[Any]] = {
        "window_start_s": wm.window_start_s,
        "window_stop_s": wm.window_stop_s,
        "window_s": np.asarray(WINDOW_S),
        "delay_samples": np.asarray(delay),
        "dimension": np.asarray(dimension),
        "path_origin_m": np.asarray(body.origin, dtype=np.float64),
        "path_time_s": np.arange(pre.markers.shape[0]) / fs,
    }
    out.update({f"m_{name}": np.asarray(v, dtype=np.float64) for name, v in wm.values.items()})
    return out, ""


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
    """Read a trial and run ``measures.movement_summary`` (which preprocesses first).

    Adds ``flagged_frame_fraction`` (frames where the spike filter flagged any marker)
    unless the summary reports it itself, and computes the per-window measures.
    """
    from measures import Score, movement_summary
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
    scores = list(summary.scores)
    notes = [str(n) for n in getattr(summary, "notes", ())]
    flagged = _flagged_fraction(summary.preprocessed)
    if flagged is not None and "flagged_frame_fraction" not in {s.name for s in scores}:
        scores.append(Score("flagged_frame_fraction", flagged, "1"))
    fs = float(summary.preprocessed.frame_rate_hz)
    windows, why = _window_measures(
        summary, fs=fs, markers_names=list(data.marker_names), roles=roles
    )
    if why:
        # Stored empty all the same: a view can tell "no window fits" from "not computed".
        notes.append(why)
        none = np.zeros(0, dtype=np.float64)
        windows = {"window_start_s": none, "window_stop_s": none, "window_s": np.asarray(WINDOW_S)}
    pre = np.asarray(summary.preprocessed.markers, dtype=np.float32)
    return MovementResult(
        tuple(scores), pre, code_version(), tuple(notes), plot_arrays(summary), windows
    )
