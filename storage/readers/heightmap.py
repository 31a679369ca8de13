"""Heightmap scans: NPY (no pickle), CSV grids and TIFF (via tifffile).

A heightmap is a regular grid z[iy, ix]; the spacing ``dx`` (along columns) and ``dy``
(along rows) and the length ``units`` of z, dx and dy come from the upload's metadata.
NaN cells are holes and become ``valid == False``.
"""

from __future__ import annotations

import math
from pathlib import Path
from typing import Any

import numpy as np

from storage.errors import ReaderError
from storage.readers._common import (
    DEFAULT_LIMITS,
    NPY_MAGIC,
    ReaderLimits,
    ScanData,
    canonical_unit,
    check_cap,
    check_nonempty,
    check_npy_header,
    check_relief,
    check_size_claim,
    check_spacing,
    display_name,
    load_npy,
    positive_float,
    read_head,
    unit_to_m,
)
from storage.readers._text import decode_text, parse_table

__all__ = ["FORMATS", "can_open", "read"]

FORMATS = ("npy", "csv", "tif", "tiff")
# TIFF 6.0 (Adobe 1992) section 2 byte orders, and BigTIFF (version 43).
TIFF_MAGICS = (b"II*\x00", b"MM\x00*", b"II+\x00", b"MM\x00+")


def can_open(path: str | Path) -> bool:
    """Whether the file looks like a heightmap we read (by extension, then magic)."""
    ext = Path(path).suffix.lower().lstrip(".")
    if ext == "npy":
        return read_head(path, 6) == NPY_MAGIC
    if ext in ("tif", "tiff"):
        return read_head(path, 4) in TIFF_MAGICS
    return ext == "csv"


def read(
    path: str | Path,
    *,
    fmt: str,
    units: str | None = None,
    dx: float | None = None,
    dy: float | None = None,
    limits: ReaderLimits = DEFAULT_LIMITS,
    **meta: Any,
) -> ScanData:
    """Read a heightmap; z, dx and dy are in ``units`` and returned in metres.

    The grid's size is read from the header and checked against ``limits.max_grid_cells``
    before any sample is decoded (a compressed TIFF cannot make the server inflate more than
    that). dx and dy must lie within ``SPACING_RANGE_M`` once converted to metres; a grid
    smaller than 2 x 2 or exactly flat is refused.
    """
    file = display_name(path, meta.get("filename"))
    fmt = fmt.lower()
    if fmt not in FORMATS:
        raise ReaderError(f"not a heightmap format: {fmt!r}", file=file)
    size = check_nonempty(path, file=file)
    scale = unit_to_m(units, file=file)
    if dx is None:
        raise ReaderError("heightmap has no grid spacing: pass dx (and dy) in meta", file=file)
    dx_m = check_spacing(positive_float(dx, name="dx", file=file) * scale, name="dx", file=file)
    dy_m = (
        check_spacing(positive_float(dy, name="dy", file=file) * scale, name="dy", file=file)
        if dy is not None
        else dx_m
    )
    if fmt == "npy":
        z = _read_npy(path, size=size, file=file, limits=limits)
    elif fmt == "csv":
        z = _read_csv(path, file=file, limits=limits)
    else:
        z = _read_tiff(path, size=size, file=file, limits=limits)
    if min(z.shape) < 2:
        raise ReaderError(f"a heightmap needs at least 2 x 2 cells, got {z.shape}", file=file)
    z = z.astype(np.float64) * scale
    valid = np.isfinite(z)
    z[~valid] = np.nan
    n_valid = int(valid.sum())
    if n_valid < 3:
        raise ReaderError(f"fewer than 3 valid cells ({n_valid} of {z.size})", file=file)
    check_relief(z, file=file)
    return ScanData(
        kind="heightmap",
        fmt="tiff" if fmt == "tif" else fmt,
        units_in=canonical_unit(str(units)),
        z=z,
        valid=valid,
        dx_m=dx_m,
        dy_m=dy_m,
        meta={"grid_shape": list(z.shape), "n_valid": n_valid},
    )


def _read_npy(path: str | Path, *, size: int, file: str, limits: ReaderLimits) -> np.ndarray:
    _dtype, shape = check_npy_header(path, size=size, file=file)
    if len(shape) != 2 or min(shape) < 1:
        raise ReaderError(f"heightmap must be a 2-D array (ny, nx), got shape {shape}", file=file)
    _cap_cells(shape, limits, file=file)
    return load_npy(path, file=file)


def _cap_cells(shape: tuple[int, ...], limits: ReaderLimits, *, file: str) -> None:
    check_cap(math.prod(shape), limits.max_grid_cells, what=f"grid of {shape} cells",
              setting="max_upload_grid_cells", file=file)  # fmt: skip


def _read_csv(path: str | Path, *, file: str, limits: ReaderLimits) -> np.ndarray:
    with open(path, "rb") as fh:
        text = decode_text(fh.read(), file=file)
    rows = [
        (i, line)
        for i, line in enumerate(text.splitlines(), start=1)
        if line.strip() and not line.lstrip().startswith("#")
    ]
    if not rows:
        raise ReaderError("no data rows", file=file)
    delimiter = "," if "," in rows[0][1] else ("\t" if "\t" in rows[0][1] else None)
    first = len(rows[0][1].split(delimiter) if delimiter else rows[0][1].split())
    _cap_cells((len(rows), first), limits, file=file)
    return parse_table(rows, file=file, delimiter=delimiter)


def _read_tiff(path: str | Path, *, size: int, file: str, limits: ReaderLimits) -> np.ndarray:
    import tifffile

    if read_head(path, 4) not in TIFF_MAGICS:
        raise ReaderError("wrong magic: a TIFF starts with II*\\0 or MM\\0*", file=file)
    try:
        with tifffile.TiffFile(path) as tif:
            if not tif.pages:
                raise ReaderError("TIFF has no images", file=file)
            page = tif.pages.first
            shape = tuple(page.shape)
            squeezed = tuple(s for s in shape if s != 1)
            if len(squeezed) != 2:
                raise ReaderError(
                    f"TIFF image must be a single-band 2-D grid, got shape {shape}", file=file
                )
            # Shape and sample type come from the tags alone: the decoded size is known
            # (and capped) before a byte is inflated, so a small deflate bomb costs nothing.
            _cap_cells(shape, limits, file=file)
            itemsize = np.dtype(page.dtype).itemsize if page.dtype is not None else 0
            if itemsize == 0 or itemsize > 8:
                raise ReaderError(f"TIFF samples must be numeric, got {page.dtype}", file=file)
            offsets, counts = page.dataoffsets, page.databytecounts
            end = max((o + n for o, n in zip(offsets, counts, strict=False)), default=0)
            check_size_claim(end, size, file=file, what="image data up to byte offset")
            if page.compression == 1:  # uncompressed: the strips must hold the whole image
                check_size_claim(
                    math.prod(shape) * itemsize,
                    sum(counts),
                    file=file,
                    what=f"an uncompressed {shape} image",
                )
            data = page.asarray(maxworkers=1)
    except ReaderError:
        raise
    except Exception as exc:  # tifffile raises many types on corrupt input
        raise ReaderError(f"unreadable TIFF: {exc}", file=file) from None
    if data.dtype.kind not in "biuf":
        raise ReaderError(f"TIFF samples must be numeric, got {data.dtype}", file=file)
    return np.asarray(data).reshape(squeezed)
