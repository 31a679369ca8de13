"""Point-cloud scans: PLY and PCD via open3d, XYZ/PTS parsed here for precise errors.

Headers are checked before open3d sees the file: open3d reports most failures only as an
empty cloud, and a header that claims more data than the file holds must be refused
before anything is allocated. Formats: PLY (Turk 1994, the Stanford polygon file format),
PCD (Point Cloud Library file format v0.7), XYZ/PTS (plain text, one point per line).
"""

from __future__ import annotations

import os
from dataclasses import dataclass, field
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
from storage.readers._text import decode_text, parse_table, split_cells

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


def read(
    path: str | Path,
    *,
    fmt: str,
    units: str | None = None,
    limits: ReaderLimits = DEFAULT_LIMITS,
    **meta: Any,
) -> ScanData:
    """Read a point cloud; coordinates in ``units``, returned in metres.

    Every value comes from the file exactly or the file is refused: ASCII bodies are parsed
    here (a non-numeric token is an error naming its line and column), binary bodies of fixed
    stride are read with numpy after their size is checked against the header; only PLY with
    list properties before the vertices and compressed PCD go through open3d. Rows with NaN
    are dropped and counted (``n_points_dropped_nan``); infinite coordinates are refused.
    """
    file = display_name(path, meta.get("filename"))
    fmt = fmt.lower()
    if fmt not in FORMATS:
        raise ReaderError(f"not a point-cloud format: {fmt!r}", file=file)
    size = check_nonempty(path, file=file)
    scale = unit_to_m(units, file=file)
    first_line: int | None = None
    if fmt == "ply":
        points, header, first_line = _read_ply(path, size=size, file=file, limits=limits)
    elif fmt == "pcd":
        points, header, first_line = _read_pcd(path, size=size, file=file, limits=limits)
    else:
        points, header, first_line = _read_text_points(path, fmt=fmt, file=file, limits=limits)
    pts, dropped = check_points(points, file=file, first_line=first_line)
    check_relief(pts[:, 2], file=file)
    pts = pts * scale
    info = {
        "n_points_in_file": len(points),
        "n_points": len(pts),
        "n_points_dropped_nan": dropped,
        **header,
    }
    return ScanData(
        kind="points", fmt=fmt, units_in=canonical_unit(str(units)), points=pts, meta=info
    )


def _open3d_points(path: str | Path, fmt: str, *, file: str) -> np.ndarray:
    import open3d as o3d  # only here: open3d is heavy and only these encodings need it

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


_PLY_NUMPY = {
    "char": "i1", "int8": "i1", "uchar": "u1", "uint8": "u1",
    "short": "i2", "int16": "i2", "ushort": "u2", "uint16": "u2",
    "int": "i4", "int32": "i4", "uint": "u4", "uint32": "u4",
    "float": "f4", "float32": "f4", "double": "f8", "float64": "f8",
}  # fmt: skip


@dataclass
class _Element:
    name: str
    count: int
    props: list[tuple[str, str]] = field(default_factory=list)  # (name, type) scalars
    has_list: bool = False
    min_stride: int = 0


def _parse_ply_header(path: str | Path, *, file: str) -> tuple[str, list[_Element], int, int]:
    """Encoding, elements, body offset and number of header lines of a PLY file."""
    if read_head(path, 4) not in (b"ply\n", b"ply\r"):
        raise ReaderError("wrong magic: a PLY file starts with 'ply'", file=file, where="line 1")
    lines, body = _header_lines(path, file=file, end="end_header")
    encoding = None
    elements: list[_Element] = []
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
            elements.append(_Element(words[1], int(words[2])))
        elif words[0] == "property":
            if not elements:
                raise ReaderError("property before any element", file=file, where=where)
            el = elements[-1]
            if len(words) == 5 and words[1] == "list":
                if words[2] not in _PLY_SIZES or words[3] not in _PLY_SIZES:
                    raise ReaderError(f"unknown property type in {line!r}", file=file, where=where)
                el.min_stride += _PLY_SIZES[words[2]]  # at least the count of each list
                el.has_list = True
                el.props.append((words[4], "list"))
            elif len(words) == 3 and words[1] in _PLY_SIZES:
                el.min_stride += _PLY_SIZES[words[1]]
                el.props.append((words[2], words[1]))
            else:
                raise ReaderError(f"bad property line {line!r}", file=file, where=where)
        else:
            raise ReaderError(f"unexpected header line {line!r}", file=file, where=where)
    if encoding is None:
        raise ReaderError("PLY header has no format line", file=file)
    return encoding, elements, body, len(lines)


def _read_ply(
    path: str | Path, *, size: int, file: str, limits: ReaderLimits
) -> tuple[np.ndarray, dict[str, Any], int | None]:
    encoding, elements, body, n_header = _parse_ply_header(path, file=file)
    vi = next((i for i, el in enumerate(elements) if el.name == "vertex"), None)
    if vi is None:
        raise ReaderError("PLY header has no 'element vertex'", file=file)
    vertex = elements[vi]
    names = [n for n, _ in vertex.props]
    missing = [p for p in ("x", "y", "z") if p not in names]
    if missing:
        raise ReaderError(f"vertex element lacks properties {missing}", file=file)
    available = size - body
    counts = ", ".join(f"{el.count} {el.name}" for el in elements)
    info = {"ply_encoding": encoding}
    if encoding == "ascii":
        # Every element row takes at least two bytes ("0\n").
        check_size_claim(2 * sum(el.count for el in elements), available, file=file,
                         what=f"element rows ({counts})")  # fmt: skip
        check_cap(vertex.count, limits.max_points, what="vertex count", setting="max_points",
                  file=file, where="element vertex")  # fmt: skip
        first_line = n_header + sum(el.count for el in elements[:vi]) + 1
        return _ascii_ply(path, body, n_header, elements, vi, file=file), info, first_line
    check_size_claim(sum(el.count * el.min_stride for el in elements), available, file=file,
                     what=f"binary elements ({counts})")  # fmt: skip
    check_cap(vertex.count, limits.max_points, what="vertex count", setting="max_points",
              file=file, where="element vertex")  # fmt: skip
    if any(el.has_list for el in elements[: vi + 1]):
        return _open3d_points(path, "ply", file=file), info, None  # variable stride
    end = ">" if encoding == "binary_big_endian" else "<"
    offset = body + sum(el.count * el.min_stride for el in elements[:vi])
    dtype = np.dtype([(f"p{j}_{n}", end + _PLY_NUMPY[t]) for j, (n, t) in enumerate(vertex.props)])
    if not any(el.has_list for el in elements):
        exact = sum(el.count * el.min_stride for el in elements)
        if available != exact:
            raise ReaderError(
                f"the body holds {available} bytes, the header announces {exact} ({counts})",
                file=file,
            )
    raw = np.fromfile(path, dtype=dtype, count=vertex.count, offset=offset)
    cols = [dtype.names[names.index(a)] for a in ("x", "y", "z")]  # type: ignore[index]
    return np.column_stack([raw[c].astype(np.float64) for c in cols]), info, None


def _ascii_ply(
    path: str | Path,
    body: int,
    n_header: int,
    elements: list[_Element],
    vi: int,
    *,
    file: str,
) -> np.ndarray:
    with open(path, "rb") as fh:
        fh.seek(body)
        text = decode_text(fh.read(), file=file)
    lines = text.splitlines()
    while lines and not lines[-1].strip():
        lines.pop()
    announced = sum(el.count for el in elements)
    if len(lines) != announced:
        counts = ", ".join(f"{el.count} {el.name}" for el in elements)
        kind = "truncated file" if len(lines) < announced else "extra data"
        raise ReaderError(
            f"{kind}: the header announces {announced} element rows ({counts}), "
            f"the body has {len(lines)} lines",
            file=file,
            where=f"line {n_header + min(len(lines), announced) + 1}",
        )
    first = sum(el.count for el in elements[:vi])
    vertex = elements[vi]
    first_line = n_header + first + 1  # 1-based line number of vertex 0
    rows = [(first_line + k, lines[first + k]) for k in range(vertex.count)]
    if not rows:
        raise ReaderError("no vertices in the file", file=file)
    names = [n for n, _ in vertex.props]
    if vertex.has_list:
        raise ReaderError("list properties on vertices are not supported in ASCII PLY", file=file)
    table = parse_table(rows, file=file, delimiter=None, n_cols=len(names), strict=True)
    return table[:, [names.index(a) for a in ("x", "y", "z")]]


def _count_lines(path: str | Path, offset: int) -> int:
    n = 0
    last = b"\n"
    with open(path, "rb") as fh:
        fh.seek(offset)
        for chunk in iter(lambda: fh.read(1 << 20), b""):
            n += chunk.count(b"\n")
            last = chunk[-1:]
    return n + (0 if last == b"\n" else 1)


_PCD_KINDS = {"F": "f", "I": "i", "U": "u"}


def _read_pcd(
    path: str | Path, *, size: int, file: str, limits: ReaderLimits
) -> tuple[np.ndarray, dict[str, Any], int | None]:
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
    types = [t.upper() for t in fields["TYPE"]]
    if not (len(sizes) == len(counts) == len(names) == len(types)):
        raise ReaderError("PCD FIELDS, SIZE, TYPE and COUNT differ in length", file=file)
    if n_points < 0 or n_points != width * height:
        raise ReaderError(
            f"PCD POINTS {n_points} is not WIDTH x HEIGHT = {width} x {height}", file=file
        )
    for name, kind, nbytes, count in zip(names, types, sizes, counts, strict=True):
        if kind not in _PCD_KINDS or nbytes not in (1, 2, 4, 8) or count < 1:
            raise ReaderError(
                f"PCD field {name!r} has TYPE {kind} SIZE {nbytes} COUNT {count}", file=file
            )
        if name in "xyz" and (kind != "F" or count != 1):
            raise ReaderError(f"PCD field {name!r} must be one float (TYPE F, COUNT 1)", file=file)
    data = fields["DATA"][0].lower() if fields["DATA"] else ""
    stride = sum(s * c for s, c in zip(sizes, counts, strict=True))
    available = size - body
    what = f"{n_points} points"
    info = {"pcd_data": data}
    if data == "ascii":
        check_size_claim(2 * n_points, available, file=file, what=what)
    elif data == "binary":
        check_size_claim(n_points * stride, available, file=file, what=what)
    check_cap(n_points, limits.max_points, what="POINTS", setting="max_points", file=file,
              where="POINTS")  # fmt: skip
    # Column of x, y, z among the flattened values of one point.
    starts = np.cumsum([0, *counts[:-1]])
    where_xyz = [int(starts[names.index(a)]) for a in ("x", "y", "z")]
    if data == "ascii":
        check_size_claim(2 * n_points, available, file=file, what=what)
        with open(path, "rb") as fh:
            fh.seek(body)
            text = decode_text(fh.read(), file=file)
        body_lines = text.splitlines()
        while body_lines and not body_lines[-1].strip():
            body_lines.pop()
        if len(body_lines) != n_points:
            kind = "truncated file" if len(body_lines) < n_points else "extra data"
            raise ReaderError(
                f"{kind}: POINTS announces {n_points} points, the body has {len(body_lines)} lines",
                file=file,
                where=f"line {len(lines) + min(len(body_lines), n_points) + 1}",
            )
        if n_points == 0:
            raise ReaderError("no points in file", file=file)
        first_line = len(lines) + 1
        rows = [(first_line + k, t) for k, t in enumerate(body_lines)]
        table = parse_table(rows, file=file, delimiter=None, n_cols=sum(counts), strict=True)
        return table[:, where_xyz], info, first_line
    if data == "binary":
        if available != n_points * stride:
            check_size_claim(n_points * stride, available, file=file, what=what)
            raise ReaderError(
                f"extra data: the body holds {available} bytes, POINTS x point size is "
                f"{n_points * stride}",
                file=file,
            )
        dtype = np.dtype(
            [(f"f{j}", f"<{_PCD_KINDS[t]}{s}", (c,)) for j, (t, s, c)
             in enumerate(zip(types, sizes, counts, strict=True))]
        )  # fmt: skip
        raw = np.fromfile(path, dtype=dtype, count=n_points, offset=body)
        cols = [raw[f"f{names.index(a)}"][:, 0].astype(np.float64) for a in ("x", "y", "z")]
        return np.column_stack(cols), info, None
    if data == "binary_compressed":
        with open(path, "rb") as fh:
            fh.seek(body)
            sizes_raw = fh.read(8)
        if len(sizes_raw) < 8:
            raise ReaderError("truncated file: compressed PCD body missing", file=file)
        compressed, uncompressed = np.frombuffer(sizes_raw, dtype="<u4").tolist()
        check_size_claim(compressed, available - 8, file=file, what="a compressed body")
        if uncompressed != n_points * stride:
            raise ReaderError("PCD compressed body size does not match POINTS", file=file)
        return _open3d_points(path, "pcd", file=file), info, None
    raise ReaderError(f"unknown PCD DATA encoding {data!r}", file=file)


def _read_text_points(
    path: str | Path, *, fmt: str, file: str, limits: ReaderLimits
) -> tuple[np.ndarray, dict[str, Any], int | None]:
    with open(path, "rb") as fh:
        text = decode_text(fh.read(), file=file)
    rows = [
        (i, line)
        for i, line in enumerate(text.splitlines(), start=1)
        if line.strip() and not line.lstrip().startswith(("#", "//"))
    ]
    claimed = None
    if rows and len(split_cells(rows[0][1], None)) == 1:  # a point count, not "x,y,z"
        first = rows[0][1].strip()
        if not first.isdigit():
            raise ReaderError(
                f"expected a point count or x y z, found {first[:40]!r}",
                file=file,
                where=f"line {rows[0][0]}",
            )
        claimed = int(first)
        rows = rows[1:]
        if claimed != len(rows):
            kind = "truncated file" if claimed > len(rows) else "extra data"
            raise ReaderError(
                f"{kind}: header announces {claimed} points, {len(rows)} rows follow",
                file=file,
            )
    if not rows:
        raise ReaderError("no points in file", file=file)
    check_cap(len(rows), limits.max_points, what="point rows", setting="max_points", file=file)
    delimiter = "," if "," in rows[0][1] else None
    table = parse_table(rows, file=file, delimiter=delimiter, min_cols=3, strict=True)
    if table.shape[1] < 3:
        raise ReaderError(
            f"expected at least 3 columns (x y z), found {table.shape[1]}",
            file=file,
            where=f"line {rows[0][0]}",
        )
    # check_points names the point; comments and blank lines make its line differ, so the
    # line is given only when rows are consecutive.
    consecutive = rows[-1][0] - rows[0][0] == len(rows) - 1
    return table[:, :3], {"point_count_in_header": claimed}, rows[0][0] if consecutive else None
