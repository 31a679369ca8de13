"""Shared pieces of the readers: result records, units, and small validators."""

from __future__ import annotations

import ast
import math
import os
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from storage.errors import ReaderError

__all__ = [
    "FRAME_RATE_RANGE_HZ",
    "NPY_MAGIC",
    "SPACING_RANGE_M",
    "UNIT_SCALE",
    "ReaderLimits",
    "ScanData",
    "TrialData",
    "check_cap",
    "check_npy_header",
    "check_rate",
    "check_size_claim",
    "check_spacing",
    "display_name",
    "load_npy",
    "positive_float",
    "read_head",
    "unit_to_m",
]

# Length units accepted on the way in, as metres per unit (SI definitions).
UNIT_SCALE: dict[str, float] = {
    "m": 1.0,
    "cm": 1e-2,
    "mm": 1e-3,
    "um": 1e-6,
    "\u00b5m": 1e-6,  # MICRO SIGN
    "\u03bcm": 1e-6,  # GREEK SMALL LETTER MU
    "ft": 0.3048,  # international foot (exact by definition, 1959)
    "us_ft": 1200.0 / 3937.0,  # US survey foot (exact by definition); common in US lidar
}
UNIT_NAMES = "m, cm, mm, um, ft (international foot) or us_ft (US survey foot)"
_UNIT_ALIASES = {"foot": "ft", "feet": "ft", "us-ft": "us_ft", "ftus": "us_ft",
                 "us_survey_foot": "us_ft", "us survey foot": "us_ft"}  # fmt: skip

# Bounds on what a reader accepts, stated once (README "Inputs"). A frame rate outside
# 1 Hz - 100 kHz or a cell size outside 0.1 um - 1 km is a typing slip, not a recording.
FRAME_RATE_RANGE_HZ = (1.0, 100_000.0)
SPACING_RANGE_M = (1e-7, 1e3)


@dataclass(frozen=True)
class ReaderLimits:
    """Caps on what one file may ask the server to allocate, checked from headers first.

    Defaults keep one decoded upload well under 1 GiB of float64 arrays: 20 M points
    (480 MB), 32 Mi grid cells (256 MiB, plus its mask), 2 M frames and 20 M marker samples
    (frames x markers; 480 MB). Settings ``max_points``, ``max_upload_grid_cells``, ``max_frames``
    and ``max_marker_samples`` change them.
    """

    max_points: int = 20_000_000
    max_grid_cells: int = 32 * 1024 * 1024
    max_frames: int = 2_000_000
    max_marker_samples: int = 20_000_000


DEFAULT_LIMITS = ReaderLimits()


def check_cap(count: int, cap: int, *, what: str, setting: str, file: str,
              where: str | None = None) -> None:  # fmt: skip
    """Refuse ``count`` items of ``what`` past ``cap``, before anything is allocated."""
    if count > cap:
        raise ReaderError(
            f"{what}: {count:,} exceeds this server's cap of {cap:,} "
            f"(setting {setting}); split or decimate the file",
            file=file,
            where=where,
        )


def check_rate(rate: float, *, file: str, where: str | None = None) -> float:
    """A frame rate inside ``FRAME_RATE_RANGE_HZ`` or ReaderError stating the bounds."""
    lo, hi = FRAME_RATE_RANGE_HZ
    if not (math.isfinite(rate) and lo <= rate <= hi):
        raise ReaderError(
            f"frame rate {rate:g} Hz is outside the accepted {lo:g}-{hi:g} Hz",
            file=file,
            where=where,
        )
    return float(rate)


def check_spacing(value_m: float, *, name: str, file: str) -> float:
    """A grid spacing in metres inside ``SPACING_RANGE_M`` or ReaderError stating the bounds."""
    lo, hi = SPACING_RANGE_M
    if not (math.isfinite(value_m) and lo <= value_m <= hi):
        raise ReaderError(
            f"{name} {value_m:g} m is outside the accepted {lo:g}-{hi:g} m", file=file
        )
    return float(value_m)


@dataclass(frozen=True)
class ScanData:
    """What a scan reader returns; coordinates in metres."""

    kind: str  # "points" or "heightmap"
    fmt: str
    units_in: str
    points: np.ndarray | None = None  # (n, 3) float64, m
    z: np.ndarray | None = None  # (ny, nx) float64, m, NaN where invalid
    valid: np.ndarray | None = None  # (ny, nx) bool
    dx_m: float | None = None
    dy_m: float | None = None
    meta: dict[str, Any] = field(default_factory=dict)


@dataclass(frozen=True)
class TrialData:
    """What a trial reader returns; marker positions in metres, NaN in gaps."""

    markers: np.ndarray  # (n_frames, n_markers, 3) float64, m
    marker_names: tuple[str, ...]
    frame_rate_hz: float
    fmt: str
    units_in: str
    time_s: np.ndarray  # (n_frames,) float64
    meta: dict[str, Any] = field(default_factory=dict)


def display_name(path: str | Path, filename: str | None) -> str:
    """The name to put in messages: the uploaded filename when known."""
    return filename or os.path.basename(str(path))


def unit_to_m(unit: object, *, file: str | None = None, where: str | None = None) -> float:
    """Metres per ``unit``; ReaderError naming the unit if it is not a length we accept."""
    if unit is None or (isinstance(unit, str) and not unit.strip()):
        raise ReaderError(
            f"no units given: pass units (one of {UNIT_NAMES})", file=file, where=where
        )
    key = str(unit).strip().strip("\x00").strip()
    key = _UNIT_ALIASES.get(key.lower(), key)
    scale = UNIT_SCALE.get(key) or UNIT_SCALE.get(key.lower())
    if scale is None:
        raise ReaderError(
            f"unknown unit {str(unit)[:40]!r}: expected one of {UNIT_NAMES}", file=file, where=where
        )
    return scale


def canonical_unit(unit: str) -> str:
    """``µm`` and ``μm`` are stored as ``um``."""
    key = unit.strip().strip("\x00").strip().lower()
    key = _UNIT_ALIASES.get(key, key)
    return "um" if key in ("\u00b5m", "\u03bcm") else key


def positive_float(value: object, *, name: str, file: str | None) -> float:
    """A finite float > 0, or ReaderError naming ``name``."""
    try:
        out = float(value)  # type: ignore[arg-type]
    except (TypeError, ValueError):
        raise ReaderError(f"{name} must be a number, got {value!r}", file=file) from None
    if not math.isfinite(out) or out <= 0:
        raise ReaderError(f"{name} must be a finite number > 0, got {value!r}", file=file)
    return out


def read_head(path: str | Path, n: int) -> bytes:
    """The first ``n`` bytes of a file."""
    with open(path, "rb") as fh:
        return fh.read(n)


def check_nonempty(path: str | Path, *, file: str) -> int:
    """File size in bytes; ReaderError for an empty file."""
    size = os.path.getsize(path)
    if size == 0:
        raise ReaderError("file is empty", file=file)
    return size


def check_size_claim(
    claimed: int, available: int, *, file: str, what: str, where: str | None = None
) -> None:
    """Reject a header whose claimed body is larger than what the file holds.

    Checked before anything is allocated, so a 2 GB claim in a 1 kB file costs nothing.
    """
    if claimed > available:
        raise ReaderError(
            f"truncated file: the header announces {what} ({claimed} bytes) "
            f"but only {available} bytes follow",
            file=file,
            where=where,
        )


def check_points(
    points: np.ndarray, *, file: str, first_line: int | None = None
) -> tuple[np.ndarray, int]:
    """Points as read, minus rows holding NaN (dropped and counted); refuse the rest.

    Returns ``(points, n_dropped_nan)``. A NaN row is a "no return" placeholder that some
    writers use (organised PCD clouds); an infinite coordinate is a broken file and is refused,
    naming the point (and its line when ``first_line``, the line of point 0, is known). Fewer
    than 3 points, or points that do not span an area (all identical or all on one line) are
    refused: no ground can be made of them.
    """
    inf_rows = np.flatnonzero(np.isinf(points).any(axis=1))
    if inf_rows.size:
        i = int(inf_rows[0])
        where = f"line {first_line + i}" if first_line is not None else f"point {i}"
        raise ReaderError(
            f"infinite coordinate in point {i} ({inf_rows.size} such points)",
            file=file,
            where=where,
        )
    finite = np.isfinite(points).all(axis=1)
    pts = points[finite]
    dropped = int(len(points) - len(pts))
    if len(pts) < 3:
        raise ReaderError(
            f"fewer than 3 valid points ({len(pts)} finite of {len(points)})", file=file
        )
    p0 = pts[0]
    away = np.flatnonzero((pts != p0).any(axis=1))
    if away.size == 0:
        raise ReaderError(f"all {len(pts)} points are identical: {p0.tolist()}", file=file)
    d1 = pts[away[0]] - p0
    cross = np.cross(pts - p0, d1)
    scale = float(np.abs(pts - p0).max())
    if not (np.abs(cross).max() > 1e-12 * scale * scale):
        raise ReaderError(f"all {len(pts)} points lie on one line: they span no area", file=file)
    out: np.ndarray = pts
    return out, dropped


def check_relief(z: np.ndarray, *, file: str) -> None:
    """Refuse a height grid (or point heights) that is exactly constant: nothing to score."""
    finite = z[np.isfinite(z)]
    if finite.size and float(finite.max()) == float(finite.min()):
        raise ReaderError(
            f"all {finite.size} heights are the same ({float(finite[0]):g}): a perfectly flat "
            "surface has no relief to score",
            file=file,
        )


NPY_MAGIC = b"\x93NUMPY"  # NumPy .npy format (NEP 1, "A simple file format for NumPy arrays")


def load_npy(path: str | Path, *, file: str) -> np.ndarray:
    """``np.load`` (never pickle) with numpy's own complaints turned into ``ReaderError``.

    ``check_npy_header`` runs first; this catches what only the full parse finds (a header
    key misspelt, a body shorter than numpy computes). Found by tests/test_fuzz_readers.py.
    """
    try:
        out: np.ndarray = np.load(path, allow_pickle=False)
    except (ValueError, OSError, EOFError, SyntaxError) as exc:
        raise ReaderError(f"unreadable .npy file: {exc}", file=file) from None
    return out


def check_npy_header(path: str | Path, *, size: int, file: str) -> tuple[np.dtype, tuple[int, ...]]:
    """Dtype and shape from a .npy header, checked against the file size before loading.

    Object dtypes are refused (they need pickle); so are non-numeric dtypes.
    """
    with open(path, "rb") as fh:
        head = fh.read(10)
        if len(head) < 10 or not head.startswith(NPY_MAGIC):
            raise ReaderError("wrong magic: not a NumPy .npy file", file=file)
        major = head[6]
        if major == 1:
            header_len, start = int.from_bytes(head[8:10], "little"), 10
        elif major in (2, 3):
            fh.seek(8)
            raw = fh.read(4)
            if len(raw) < 4:
                raise ReaderError("truncated .npy header", file=file)
            header_len, start = int.from_bytes(raw, "little"), 12
        else:
            raise ReaderError(f"unsupported .npy format version {major}", file=file)
        check_size_claim(header_len, size - start, file=file, what="a .npy header")
        fh.seek(start)
        header_text = fh.read(header_len).decode("latin1")
    try:
        header = ast.literal_eval(header_text)
        descr, shape = header["descr"], tuple(int(s) for s in header["shape"])
        dtype = np.dtype(descr) if isinstance(descr, str) else None
    except (ValueError, SyntaxError, KeyError, TypeError, RecursionError, MemoryError):
        raise ReaderError("unreadable .npy header", file=file) from None
    if dtype is None or dtype.hasobject or dtype.kind not in "biuf":
        raise ReaderError(
            f"array dtype must be numeric (int, uint, float or bool), got {descr!r}", file=file
        )
    check_size_claim(
        math.prod(shape) * dtype.itemsize,
        size - start - header_len,
        file=file,
        what=f"an array of shape {shape} and dtype {dtype}",
    )
    return dtype, shape
