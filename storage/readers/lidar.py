"""Airborne and terrestrial lidar: LAS and LAZ (ASPRS LAS 1.0-1.4) through laspy and lazrs.

Coordinates are the file's integers times its header scale plus its offset (laspy's ``x``,
``y``, ``z``), in the unit of the file's coordinate system, which the upload's ``units`` names
(LAS files in US state-plane systems are often in US survey feet: ``us_ft``). When the file
classifies its points and some are ground (ASPRS class 2), only those are kept by default
(``ground_only``; false keeps every point); the counts go in the reader's meta.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import numpy as np

from storage.errors import ReaderError
from storage.readers._common import (
    DEFAULT_LIMITS,
    ReaderLimits,
    ScanData,
    canonical_unit,
    check_cap,
    check_nonempty,
    check_points,
    check_relief,
    check_size_claim,
    display_name,
    read_head,
    unit_to_m,
)

__all__ = ["FORMATS", "GROUND_CLASS", "can_open", "read"]

FORMATS = ("las", "laz")
MAGIC = b"LASF"  # ASPRS LAS specification, public header block, bytes 0-3
GROUND_CLASS = 2  # ASPRS standard point class "ground"


def can_open(path: str | Path) -> bool:
    """Whether the file looks like LAS/LAZ (by extension, then magic)."""
    ext = Path(path).suffix.lower().lstrip(".")
    return ext in FORMATS and read_head(path, 4) == MAGIC


def read(
    path: str | Path,
    *,
    fmt: str,
    units: str | None = None,
    ground_only: bool | None = None,
    limits: ReaderLimits = DEFAULT_LIMITS,
    **meta: Any,
) -> ScanData:
    """Read a LAS/LAZ point cloud; coordinates in ``units``, returned in metres."""
    file = display_name(path, meta.get("filename"))
    fmt = fmt.lower()
    if fmt not in FORMATS:
        raise ReaderError(f"not a lidar format: {fmt!r}", file=file)
    size = check_nonempty(path, file=file)
    scale = unit_to_m(units, file=file)
    if read_head(path, 4) != MAGIC:
        raise ReaderError("wrong magic: a LAS/LAZ file starts with 'LASF'", file=file)
    import laspy

    try:
        with laspy.open(str(path)) as reader:
            header = reader.header
            n = int(header.point_count)
            check_cap(n, limits.max_points, what="point count", setting="max_points",
                      file=file, where="public header")  # fmt: skip
            compressed = bool(header.are_points_compressed)
            if not compressed:
                record = int(header.point_format.size)
                check_size_claim(n * record, size - int(header.offset_to_point_data),
                                 file=file, what=f"{n} point records")  # fmt: skip
            las = reader.read()
    except ReaderError:
        raise
    except Exception as exc:  # laspy and lazrs raise many types on corrupt input
        raise ReaderError(f"unreadable {fmt.upper()} file: {exc}", file=file) from None
    if len(las.points) != n:
        raise ReaderError(
            f"the header announces {n} points, {len(las.points)} could be read", file=file
        )
    points = np.column_stack(
        [np.asarray(las.x, float), np.asarray(las.y, float), np.asarray(las.z, float)]
    )
    classes = np.asarray(las.classification, dtype=np.int64)
    n_ground = int((classes == GROUND_CLASS).sum())
    use_ground = (ground_only is None or bool(ground_only)) and n_ground > 0
    if use_ground:
        points = points[classes == GROUND_CLASS]
    pts, dropped = check_points(points, file=file)
    check_relief(pts[:, 2], file=file)
    info = {
        "n_points_in_file": n,
        "n_points": len(pts),
        "n_points_dropped_nan": dropped,
        "n_ground_points": n_ground,
        "ground_class_used": use_ground,
        "las_version": f"{header.version.major}.{header.version.minor}",
        "las_point_format": int(header.point_format.id),
        "las_scale": [float(v) for v in header.scales],
        "las_offset": [float(v) for v in header.offsets],
        "compressed": compressed,
    }
    if n_ground == 0:
        info["note"] = "no point is classified ground (class 2): every point was used"
    return ScanData(
        kind="points", fmt=fmt, units_in=canonical_unit(str(units)), points=pts * scale, meta=info
    )
