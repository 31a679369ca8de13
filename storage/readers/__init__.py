"""File readers: small adapters behind one registry, keyed by kind and format.

Each adapter module has ``FORMATS``, ``can_open(path) -> bool`` and
``read(path, *, fmt, **meta)``. ``read_scan``/``read_trial`` pick the adapter from the
format (given, or from the file name's extension). Every failure is a ``ReaderError``
naming the file and, where it applies, the line, column, frame or header field.
"""

from __future__ import annotations

import os
from pathlib import Path
from types import ModuleType
from typing import Any

from storage.errors import ReaderError
from storage.readers import heightmap, lidar, pointcloud, trial
from storage.readers._common import (
    DEFAULT_LIMITS,
    FRAME_RATE_RANGE_HZ,
    SPACING_RANGE_M,
    UNIT_SCALE,
    ReaderLimits,
    ScanData,
    TrialData,
    canonical_unit,
    display_name,
    unit_to_m,
)

__all__ = [
    "DEFAULT_LIMITS",
    "FRAME_RATE_RANGE_HZ",
    "READERS",
    "SPACING_RANGE_M",
    "UNIT_SCALE",
    "ReaderError",
    "ReaderLimits",
    "ScanData",
    "TrialData",
    "canonical_unit",
    "detect_format",
    "read_scan",
    "read_trial",
    "unit_to_m",
]

READERS: dict[str, dict[str, ModuleType]] = {
    "scan": {
        **{fmt: pointcloud for fmt in pointcloud.FORMATS},
        **{fmt: heightmap for fmt in heightmap.FORMATS},
        **{fmt: lidar for fmt in lidar.FORMATS},
    },
    "trial": {fmt: trial for fmt in trial.FORMATS},
}
_ALIASES = {"tif": "tiff", "txt": "xyz"}


def detect_format(filename: str, *, kind: str) -> str:
    """Format name from a file name's extension, for ``kind`` "scan" or "trial"."""
    if kind not in READERS:
        raise ValueError(f"kind must be 'scan' or 'trial', got {kind!r}")
    ext = Path(filename).suffix.lower().lstrip(".")
    fmt = _ALIASES.get(ext, ext)
    fmt = fmt if fmt in READERS[kind] else ext
    if fmt not in READERS[kind]:
        known = ", ".join(sorted(READERS[kind]))
        raise ReaderError(
            f"unknown {kind} format {('.' + ext) if ext else '(no extension)'}: "
            f"expected one of {known}",
            file=os.path.basename(filename),
        )
    return fmt


def _resolve(kind: str, path: str | Path, fmt: str | None, filename: str | None) -> str:
    if fmt:
        fmt = fmt.lower().lstrip(".")
        fmt = _ALIASES.get(fmt, fmt) if _ALIASES.get(fmt, fmt) in READERS[kind] else fmt
        if fmt not in READERS[kind]:
            known = ", ".join(sorted(READERS[kind]))
            raise ReaderError(
                f"unknown {kind} format {fmt!r}: expected one of {known}",
                file=display_name(path, filename),
            )
        return fmt
    return detect_format(filename or os.fspath(path), kind=kind)


def read_scan(
    path: str | Path,
    *,
    fmt: str | None = None,
    filename: str | None = None,
    units: str | None = None,
    dx: float | None = None,
    dy: float | None = None,
    ground_only: bool | None = None,
    limits: ReaderLimits | None = None,
    **meta: Any,
) -> ScanData:
    """Read a terrain scan (point cloud, lidar or heightmap) into metres.

    ``limits`` caps what the file may make us allocate (default ``DEFAULT_LIMITS``);
    ``ground_only`` applies to LAS/LAZ (default: keep class 2 when the file has it).
    """
    fmt = _resolve("scan", path, fmt, filename)
    module = READERS["scan"][fmt]
    lim = limits or DEFAULT_LIMITS
    if module is heightmap:
        return heightmap.read(
            path, fmt=fmt, units=units, dx=dx, dy=dy, filename=filename, limits=lim
        )
    if module is lidar:
        return lidar.read(
            path, fmt=fmt, units=units, ground_only=ground_only, filename=filename, limits=lim
        )
    return pointcloud.read(path, fmt=fmt, units=units, filename=filename, limits=lim)


def read_trial(
    path: str | Path,
    *,
    fmt: str | None = None,
    filename: str | None = None,
    units: str | None = None,
    frame_rate_hz: float | None = None,
    marker_names: list[str] | None = None,
    limits: ReaderLimits | None = None,
    **meta: Any,
) -> TrialData:
    """Read a trial recording into metres, NaN in gaps (``limits`` as for ``read_scan``)."""
    fmt = _resolve("trial", path, fmt, filename)
    return trial.read(
        path,
        fmt=fmt,
        units=units,
        frame_rate_hz=frame_rate_hz,
        marker_names=marker_names,
        filename=filename,
        limits=limits or DEFAULT_LIMITS,
    )
