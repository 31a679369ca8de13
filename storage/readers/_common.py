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
    "NPY_MAGIC",
    "UNIT_SCALE",
    "ScanData",
    "TrialData",
    "check_npy_header",
    "check_size_claim",
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
}


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
            "no units given: pass units (one of m, cm, mm, um)", file=file, where=where
        )
    key = str(unit).strip().strip("\x00").strip()
    scale = UNIT_SCALE.get(key) or UNIT_SCALE.get(key.lower())
    if scale is None:
        raise ReaderError(
            f"unknown unit {unit!r}: expected one of m, cm, mm, um", file=file, where=where
        )
    return scale


def canonical_unit(unit: str) -> str:
    """``µm`` and ``μm`` are stored as ``um``."""
    key = unit.strip().strip("\x00").strip().lower()
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


def check_points(points: np.ndarray, *, file: str) -> np.ndarray:
    """Keep finite rows; reject fewer than 3 or all-identical points."""
    finite = np.isfinite(points).all(axis=1)
    pts = points[finite]
    if len(pts) < 3:
        raise ReaderError(
            f"fewer than 3 valid points ({len(pts)} finite of {len(points)})", file=file
        )
    if np.all(pts == pts[0]):
        raise ReaderError(f"all {len(pts)} points are identical: {pts[0].tolist()}", file=file)
    out: np.ndarray = pts
    return out


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
