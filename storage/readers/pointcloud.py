"""Point-cloud scans: PLY and PCD via open3d, XYZ/PTS parsed here for precise errors.

Headers are checked before open3d sees the file: open3d reports most failures only as an
empty cloud, and a header that claims more data than the file holds must be refused
before anything is allocated. Formats: PLY (Turk 1994, the Stanford polygon file format),
PCD (Point Cloud Library file format v0.7), XYZ/PTS (plain text, one point per line).
"""

from __future__ import annotations

import os
from pathlib import Path
from typing import Any

import numpy as np

from storage.errors import ReaderError
from storage.readers._common import (
    ScanData,
    canonical_unit,
    check_nonempty,
    check_points,
    check_size_claim,
    display_name,
    read_head,
    unit_to_m,
)
from storage.readers._text import decode_text, parse_table

__all__ = ["FORMATS", "can_open", "read"]

FORMATS = ("ply", "pcd", "xyz", "pts")
_HEADER_MAX = 65536
_PLY_SIZES = {
    "char": 1, "int8": 1, "uchar": 1, "uint8": 1,
    "short": 2, "int16": 2, "ushort": 2, "uint16": 2,
    "int": 4, "int32": 4, "uint": 4, "uint32": 4,
    "float": 4, "float32": 4, "double": 8, "float64": 8,
}  # fmt: skip


def can_open(path: str | Path) -> bool:
    """Whether the file looks like a point cloud we read (by extension, then magic)."""
    ext = Path(path).suffix.lower().lstrip(".")
    if ext not in FORMATS:
        return False
    if ext == "ply":
        return read_head(path, 4) in (b"ply\n", b"ply\r")
    return True


def read(path: str | Path, *, fmt: str, units: str | None = None, **meta: Any) -> ScanData:
    """Read a point cloud; coordinates in ``units``, returned in metres."""
    file = display_name(path, meta.get("filename"))
    fmt = fmt.lower()
    if fmt not in FORMATS:
        raise ReaderError(f"not a point-cloud format: {fmt!r}", file=file)
    size = check_nonempty(path, file=file)
    scale = unit_to_m(units, file=file)
    if fmt == "ply":
        header = _check_ply(path, size=size, file=file)
        points = _open3d_points(path, "ply", file=file)
    elif fmt == "pcd":
        header = _check_pcd(path, size=size, file=file)
        points = _open3d_points(path, "pcd", file=file)
    else:
        points, header = _read_text_points(path, fmt=fmt, file=file)
    pts = check_points(points, file=file) * scale
    info = {"n_points_in_file": len(points), "n_points": len(pts), **header}
    return ScanData(
        kind="points", fmt=fmt, units_in=canonical_unit(str(units)), points=pts, meta=info
    )


def _open3d_points(path: str | Path, fmt: str, *, file: str) -> np.ndarray:
    import open3d as o3d  # only here: open3d is heavy and only point clouds need it

    o3d.utility.set_verbosity_level(o3d.utility.VerbosityLevel.Error)
    cloud = o3d.io.read_point_cloud(
        os.fspath(path),  # type: ignore[arg-type]  # the stubs say PathLike; str works
        format=fmt,
        remove_nan_points=False,
        remove_infinite_points=False,
    )
    points = np.asarray(cloud.points, dtype=np.float64)
    if points.size == 0:
        raise ReaderError(f"no points could be read from this {fmt.upper()} file", file=file)
    return points.reshape(-1, 3)


def _header_lines(path: str | Path, *, file: str, end: str) -> tuple[list[str], int]:
    """Header lines up to and including the one starting with ``end``; and body offset."""
    head = read_head(path, _HEADER_MAX)
    lines: list[str] = []
    offset = 0
    for raw in head.splitlines(keepends=True):
        offset += len(raw)
        try:
            text = raw.decode("ascii").strip()
        except UnicodeDecodeError:
            raise ReaderError(
                "header is not ASCII text", file=file, where=f"header line {len(lines) + 1}"
            ) from None
        lines.append(text)
        if text.split(" ", 1)[0] == end:
            return lines, offset
    raise ReaderError(f"header has no {end!r} line (truncated or not this format)", file=file)


def _check_ply(path: str | Path, *, size: int, file: str) -> dict[str, Any]:
    if read_head(path, 4) not in (b"ply\n", b"ply\r"):
        raise ReaderError("wrong magic: a PLY file starts with 'ply'", file=file, where="line 1")
    lines, body = _header_lines(path, file=file, end="end_header")
    encoding = None
    elements: list[list[Any]] = []  # [name, count, fixed_stride, has_list, props]
    for i, line in enumerate(lines, start=1):
        words = line.split()
        if not words or words[0] in ("ply", "comment", "obj_info", "end_header"):
            continue
        where = f"header line {i}"
        if words[0] == "format":
            if len(words) < 2 or words[1] not in (
                "ascii",
                "binary_little_endian",
                "binary_big_endian",
            ):
                raise ReaderError(f"unknown PLY format line {line!r}", file=file, where=where)
            encoding = words[1]
        elif words[0] == "element":
            if len(words) != 3 or not words[2].isdigit():
                raise ReaderError(f"bad element line {line!r}", file=file, where=where)
            elements.append([words[1], int(words[2]), 0, False, []])
        elif words[0] == "property":
            if not elements:
                raise ReaderError("property before any element", file=file, where=where)
            el = elements[-1]
            if len(words) >= 5 and words[1] == "list":
                if words[2] not in _PLY_SIZES or words[3] not in _PLY_SIZES:
                    raise ReaderError(f"unknown property type in {line!r}", file=file, where=where)
                el[2] += _PLY_SIZES[words[2]]  # at least the count of each list
                el[3] = True
            elif len(words) == 3 and words[1] in _PLY_SIZES:
                el[2] += _PLY_SIZES[words[1]]
            else:
                raise ReaderError(f"bad property line {line!r}", file=file, where=where)
            el[4].append(words[-1])
        else:
            raise ReaderError(f"unexpected header line {line!r}", file=file, where=where)
    if encoding is None:
        raise ReaderError("PLY header has no format line", file=file)
    vertex = next((el for el in elements if el[0] == "vertex"), None)
    if vertex is None:
        raise ReaderError("PLY header has no 'element vertex'", file=file)
    missing = [p for p in ("x", "y", "z") if p not in vertex[4]]
    if missing:
        raise ReaderError(f"vertex element lacks properties {missing}", file=file)
    available = size - body
    if encoding == "ascii":
        # Every element row takes at least two bytes ("0\n").
        claimed = 2 * sum(el[1] for el in elements)
        check_size_claim(claimed, available, file=file, what=f"{vertex[1]} vertices")
        n_lines = _count_lines(path, body)
        if n_lines < vertex[1]:
            raise ReaderError(
                f"truncated file: {vertex[1]} vertices announced, {n_lines} lines of data",
                file=file,
                where=f"line {len(lines) + n_lines + 1}",
            )
    else:
        claimed = sum(el[1] * el[2] for el in elements)
        check_size_claim(claimed, available, file=file, what=f"{vertex[1]} vertices")
    return {"ply_encoding": encoding}


def _count_lines(path: str | Path, offset: int) -> int:
    n = 0
    last = b"\n"
    with open(path, "rb") as fh:
        fh.seek(offset)
        for chunk in iter(lambda: fh.read(1 << 20), b""):
            n += chunk.count(b"\n")
            last = chunk[-1:]
    return n + (0 if last == b"\n" else 1)


def _check_pcd(path: str | Path, *, size: int, file: str) -> dict[str, Any]:
    lines, body = _header_lines(path, file=file, end="DATA")
    fields: dict[str, list[str]] = {}
    for i, line in enumerate(lines, start=1):
        if not line or line.startswith("#"):
            continue
        words = line.split()
        fields[words[0].upper()] = words[1:]
        if i == 1 and words[0].upper() not in ("VERSION", "FIELDS"):
            raise ReaderError("wrong magic: a PCD header starts with VERSION", file=file)
    for key in ("FIELDS", "SIZE", "TYPE", "WIDTH", "HEIGHT", "POINTS", "DATA"):
        if key not in fields:
            raise ReaderError(f"PCD header has no {key} line", file=file)
    names = fields["FIELDS"]
    if not {"x", "y", "z"} <= set(names):
        raise ReaderError(f"PCD FIELDS {names} lack x, y, z", file=file)
    try:
        sizes = [int(s) for s in fields["SIZE"]]
        counts = [int(c) for c in fields.get("COUNT", ["1"] * len(names))]
        n_points = int(fields["POINTS"][0])
        width, height = int(fields["WIDTH"][0]), int(fields["HEIGHT"][0])
    except (ValueError, IndexError):
        raise ReaderError("PCD header has a non-integer SIZE, COUNT or POINTS", file=file) from None
    if not (len(sizes) == len(counts) == len(names) == len(fields["TYPE"])):
        raise ReaderError("PCD FIELDS, SIZE, TYPE and COUNT differ in length", file=file)
    if n_points < 0 or n_points != width * height:
        raise ReaderError(
            f"PCD POINTS {n_points} is not WIDTH x HEIGHT = {width} x {height}", file=file
        )
    data = fields["DATA"][0].lower() if fields["DATA"] else ""
    stride = sum(s * c for s, c in zip(sizes, counts, strict=True))
    available = size - body
    what = f"{n_points} points"
    if data == "ascii":
        check_size_claim(2 * n_points, available, file=file, what=what)
    elif data == "binary":
        check_size_claim(n_points * stride, available, file=file, what=what)
    elif data == "binary_compressed":
        with open(path, "rb") as fh:
            fh.seek(body)
            sizes_raw = fh.read(8)
        if len(sizes_raw) < 8:
            raise ReaderError("truncated file: compressed PCD body missing", file=file)
        compressed, uncompressed = np.frombuffer(sizes_raw, dtype="<u4").tolist()
        check_size_claim(compressed, available - 8, file=file, what="a compressed body")
        if uncompressed != n_points * stride:
            raise ReaderError("PCD compressed body size does not match POINTS", file=file)
    else:
        raise ReaderError(f"unknown PCD DATA encoding {data!r}", file=file)
    return {"pcd_data": data}


def _read_text_points(
    path: str | Path, *, fmt: str, file: str
) -> tuple[np.ndarray, dict[str, Any]]:
    with open(path, "rb") as fh:
        text = decode_text(fh.read(), file=file)
    rows = [
        (i, line)
        for i, line in enumerate(text.splitlines(), start=1)
        if line.strip() and not line.lstrip().startswith(("#", "//"))
    ]
    claimed = None
    if rows and len(rows[0][1].split()) == 1:
        first = rows[0][1].strip()
        if not first.isdigit():
            raise ReaderError(
                f"expected a point count or x y z, found {first[:40]!r}",
                file=file,
                where=f"line {rows[0][0]}",
            )
        claimed = int(first)
        rows = rows[1:]
        if claimed > len(rows):
            raise ReaderError(
                f"truncated file: header announces {claimed} points, {len(rows)} rows follow",
                file=file,
            )
    if not rows:
        raise ReaderError("no points in file", file=file)
    delimiter = "," if "," in rows[0][1] else None
    table = parse_table(rows, file=file, delimiter=delimiter, min_cols=3)
    if table.shape[1] < 3:
        raise ReaderError(
            f"expected at least 3 columns (x y z), found {table.shape[1]}",
            file=file,
            where=f"line {rows[0][0]}",
        )
    return table[:, :3], {"point_count_in_header": claimed}
