"""Trial readers: C3D via ezc3d, CSV/TSV (wide and long form), NPY with a JSON sidecar.

Every reader returns markers (n_frames, n_markers, 3) in metres with NaN in gaps, the
marker names, the frame rate in Hz and the time of each frame in seconds.
"""

from __future__ import annotations

import json
import os
from pathlib import Path
from typing import Any

import numpy as np

from storage.errors import ReaderError
from storage.readers._c3d import check_c3d
from storage.readers._common import (
    DEFAULT_LIMITS,
    NPY_MAGIC,
    ReaderLimits,
    TrialData,
    canonical_unit,
    check_cap,
    check_nonempty,
    check_npy_header,
    check_rate,
    display_name,
    load_npy,
    positive_float,
    read_head,
    unit_to_m,
)
from storage.readers._text import decode_text, parse_float, split_cells

__all__ = ["FORMATS", "can_open", "read"]

FORMATS = ("c3d", "csv", "tsv", "npy")
_AXES = ("x", "y", "z")


def can_open(path: str | Path) -> bool:
    """Whether the file looks like a trial we read (by extension, then magic)."""
    ext = Path(path).suffix.lower().lstrip(".")
    if ext == "c3d":
        return read_head(path, 2)[1:2] == b"\x50"
    if ext == "npy":
        return read_head(path, 6) == NPY_MAGIC
    return ext in ("csv", "tsv")


def read(
    path: str | Path,
    *,
    fmt: str,
    units: str | None = None,
    frame_rate_hz: float | None = None,
    marker_names: list[str] | None = None,
    limits: ReaderLimits = DEFAULT_LIMITS,
    **meta: Any,
) -> TrialData:
    """Read a trial; positions come back in metres.

    Frame and sample counts are checked against ``limits`` from the header (C3D, NPY) or the
    row count (text) before the marker array is built; the frame rate, from the file, the
    time column or ``frame_rate_hz``, must lie within ``FRAME_RATE_RANGE_HZ``.
    """
    filename = meta.get("filename")
    file = display_name(path, filename)
    fmt = fmt.lower()
    if fmt not in FORMATS:
        raise ReaderError(f"not a trial format: {fmt!r}", file=file)
    size = check_nonempty(path, file=file)
    if fmt == "c3d":
        markers, names, rate, unit, extra = _read_c3d(
            path, size=size, file=file, units=units, frame_rate_hz=frame_rate_hz, limits=limits
        )
        time_s = np.arange(markers.shape[0]) / rate
    elif fmt == "npy":
        markers, names, rate, unit, extra = _read_npy(
            path,
            size=size,
            file=file,
            filename=filename,
            units=units,
            frame_rate_hz=frame_rate_hz,
            marker_names=marker_names,
            limits=limits,
        )
        time_s = np.arange(markers.shape[0]) / rate
    else:
        markers, names, rate, time_s, extra = _read_table(
            path, fmt=fmt, file=file, frame_rate_hz=frame_rate_hz, limits=limits
        )
        unit = units
    scale = unit_to_m(unit, file=file)
    markers = _finish(markers * scale, names, file=file)
    return TrialData(
        markers=markers,
        marker_names=tuple(names),
        frame_rate_hz=rate,
        fmt=fmt,
        units_in=canonical_unit(str(unit)),
        time_s=np.asarray(time_s, dtype=np.float64),
        meta={"n_frames": int(markers.shape[0]), "n_markers": len(names), **extra},
    )


def _finish(markers: np.ndarray, names: list[str], *, file: str) -> np.ndarray:
    """Common checks: names unique, at least 3 frames, no marker without data."""
    seen: set[str] = set()
    for name in names:
        if not name:
            raise ReaderError("a marker has an empty name", file=file)
        if name in seen:
            raise ReaderError(f"duplicate marker name {name!r}", file=file)
        seen.add(name)
    if markers.ndim != 3 or markers.shape[2] != 3 or markers.shape[1] != len(names):
        raise ReaderError(f"marker array has shape {markers.shape}", file=file)
    if markers.shape[0] < 3:
        raise ReaderError(f"fewer than 3 frames ({markers.shape[0]})", file=file)
    markers = np.array(markers, dtype=np.float64)
    # NaN is a gap (the stated convention); an infinite coordinate is a broken file.
    inf = np.argwhere(np.isinf(markers))
    if inf.size:
        frame, marker, _axis = (int(v) for v in inf[0])
        raise ReaderError(
            f"infinite coordinate for marker {names[marker]!r} ({len(inf)} such values)",
            file=file,
            where=f"frame {frame}",
        )
    # A sample is valid only when all three coordinates are.
    markers[~np.isfinite(markers).all(axis=2)] = np.nan
    present = np.isfinite(markers[:, :, 0]).any(axis=0)
    empty = [names[i] for i in np.flatnonzero(~present)]
    if empty:
        raise ReaderError(f"marker {empty[0]!r} has no valid sample (all NaN)", file=file)
    with np.errstate(invalid="ignore"):
        still = np.nanmax(markers, axis=0) == np.nanmin(markers, axis=0)
    if bool(still.all()):
        raise ReaderError(
            f"no marker moves in {markers.shape[0]} frames: every coordinate is constant",
            file=file,
        )
    return markers


def _cap_frames(n_frames: int, n_markers: int, limits: ReaderLimits, *, file: str) -> None:
    check_cap(n_frames, limits.max_frames, what="frame count", setting="max_frames", file=file)
    check_cap(n_frames * n_markers, limits.max_marker_samples,
              what=f"{n_frames} frames x {n_markers} markers", setting="max_marker_samples",
              file=file)  # fmt: skip


def _rate(file_rate: float | None, given: float | None, *, file: str) -> float:
    if file_rate is not None and np.isfinite(file_rate) and file_rate > 0:
        return check_rate(float(file_rate), file=file, where="the file's frame rate")
    if given is None:
        raise ReaderError("frame rate missing: pass frame_rate_hz", file=file)
    rate = positive_float(given, name="frame_rate_hz", file=file)
    return check_rate(rate, file=file, where="frame_rate_hz")


# --- C3D --------------------------------------------------------------------------------
def _read_c3d(
    path: str | Path,
    *,
    size: int,
    file: str,
    units: str | None,
    frame_rate_hz: float | None,
    limits: ReaderLimits,
) -> tuple[np.ndarray, list[str], float, str | None, dict[str, Any]]:
    header = check_c3d(path, size=size, file=file)
    _cap_frames(header.last_frame - header.first_frame + 1, header.n_points, limits, file=file)
    import ezc3d

    try:
        c3d = ezc3d.c3d(os.fspath(path), extract_forceplat_data=False)
    except Exception as exc:  # ezc3d raises RuntimeError/IOError with its own text
        raise ReaderError(f"C3D could not be decoded: {exc}", file=file) from None
    point = c3d["parameters"].get("POINT", {})
    labels = _c3d_strings(point, "LABELS")
    for more in ("LABELS2", "LABELS3", "LABELS4"):
        labels += _c3d_strings(point, more)
    data = np.asarray(c3d["data"]["points"], dtype=np.float64)  # (4, n_points, n_frames)
    n_points = data.shape[1]
    if len(labels) < n_points:
        raise ReaderError(
            f"POINT:LABELS names {len(labels)} markers, the data has {n_points}",
            file=file,
            where="parameter POINT:LABELS",
        )
    names = [s.strip() for s in labels[:n_points]]
    markers = np.transpose(data[:3], (2, 1, 0)).copy()
    residuals = np.asarray(c3d["data"]["meta_points"]["residuals"], dtype=np.float64)
    if residuals.size:
        markers[np.transpose(residuals[0], (1, 0)) < 0] = np.nan  # C3D: residual < 0 = invalid
    file_units = _c3d_strings(point, "UNITS")
    unit = file_units[0].strip() if file_units and file_units[0].strip() else units
    rate_value = point.get("RATE", {}).get("value")
    file_rate = (
        float(np.ravel(rate_value)[0]) if rate_value is not None and len(rate_value) else None
    )
    if file_rate is None or file_rate <= 0:
        file_rate = header.frame_rate_hz
    rate = _rate(file_rate, frame_rate_hz, file=file)
    extra = {"c3d_first_frame": header.first_frame, "c3d_processor": header.processor}
    if units and file_units and canonical_unit(units) != canonical_unit(file_units[0]):
        extra["units_given_ignored"] = units  # the file's POINT:UNITS wins
    return markers, names, rate, unit, extra


def _c3d_strings(group: dict[str, Any], name: str) -> list[str]:
    value = group.get(name, {}).get("value")
    if value is None:
        return []
    return [str(v) for v in np.ravel(np.asarray(value, dtype=object))]


# --- NPY + sidecar ----------------------------------------------------------------------
def _read_npy(
    path: str | Path,
    *,
    size: int,
    file: str,
    filename: str | None,
    units: str | None,
    frame_rate_hz: float | None,
    marker_names: list[str] | None,
    limits: ReaderLimits,
) -> tuple[np.ndarray, list[str], float, str | None, dict[str, Any]]:
    _, shape = check_npy_header(path, size=size, file=file)
    if len(shape) != 3 or shape[2] != 3:
        raise ReaderError(f"expected an array (frames, markers, 3), got shape {shape}", file=file)
    _cap_frames(shape[0], shape[1], limits, file=file)
    side = _sidecar(path, filename=filename, file=file)
    names = marker_names if marker_names is not None else side.get("marker_names")
    if not isinstance(names, list) or not all(isinstance(n, str) for n in names):
        raise ReaderError("marker_names (a list of strings) missing from meta/sidecar", file=file)
    if len(names) != shape[1]:
        raise ReaderError(
            f"{len(names)} marker_names for {shape[1]} markers in the array", file=file
        )
    rate = _rate(None, frame_rate_hz if frame_rate_hz is not None else side.get("frame_rate_hz"),
                 file=file)  # fmt: skip
    unit = units if units is not None else side.get("units")
    markers = load_npy(path, file=file)
    return markers, list(names), rate, unit, {"sidecar": bool(side)}


def _sidecar(path: str | Path, *, filename: str | None, file: str) -> dict[str, Any]:
    candidates = [Path(f"{os.fspath(path)}.json")]
    if filename:
        candidates.append(Path(path).parent / f"{os.path.basename(filename)}.json")
    for candidate in candidates:
        if candidate.is_file():
            try:
                side = json.loads(candidate.read_text(encoding="utf-8"))
            except (ValueError, UnicodeDecodeError) as exc:
                raise ReaderError(
                    f"sidecar is not valid JSON: {exc}", file=candidate.name
                ) from None
            if not isinstance(side, dict):
                raise ReaderError("sidecar must be a JSON object", file=candidate.name)
            return side
    return {}


# --- CSV / TSV --------------------------------------------------------------------------
def _read_table(
    path: str | Path,
    *,
    fmt: str,
    file: str,
    frame_rate_hz: float | None,
    limits: ReaderLimits,
) -> tuple[np.ndarray, list[str], float, np.ndarray, dict[str, Any]]:
    with open(path, "rb") as fh:
        text = decode_text(fh.read(), file=file)
    rows = [
        (i, line)
        for i, line in enumerate(text.splitlines(), start=1)
        if line.strip() and not line.lstrip().startswith("#")
    ]
    if not rows:
        raise ReaderError("no header line", file=file)
    head_no, head = rows[0]
    delimiter = "\t" if fmt == "tsv" or ("\t" in head and "," not in head) else ","
    columns = [c.strip() for c in split_cells(head, delimiter)]
    lower = [c.lower() for c in columns]
    if len(rows) < 2:
        raise ReaderError("header but no data rows", file=file)
    # Rows bound the frames (wide) or the samples (long) before any array is built.
    _cap_frames(len(rows) - 1, max(1, (len(columns) - 1) // 3), limits, file=file)
    if lower[:1] and lower[0] in ("time", "frame") and lower[1:2] == ["marker"]:
        return _read_long(rows, columns=lower, delimiter=delimiter, file=file,
                          frame_rate_hz=frame_rate_hz)  # fmt: skip
    if not lower or lower[0] not in ("time", "frame"):
        raise ReaderError(
            f"first column must be 'time' or 'frame', found {columns[0]!r}",
            file=file,
            where=f"line {head_no}, column 1",
        )
    return _read_wide(rows, columns=columns, delimiter=delimiter, file=file,
                      frame_rate_hz=frame_rate_hz)  # fmt: skip


def _wide_columns(columns: list[str], *, file: str, line: int) -> tuple[list[str], np.ndarray]:
    """Marker names and, for each (marker, axis), the column index."""
    index: dict[str, dict[str, int]] = {}
    for j, col in enumerate(columns[1:], start=1):
        name, _, axis = col.rpartition("_")
        if not name or axis.lower() not in _AXES:
            raise ReaderError(
                f"column {col!r} is not <marker>_x, <marker>_y or <marker>_z",
                file=file,
                where=f"line {line}, column {j + 1}",
            )
        axes = index.setdefault(name, {})
        if axis.lower() in axes:
            raise ReaderError(
                f"duplicate column {col!r} (duplicate marker name {name!r})",
                file=file,
                where=f"line {line}, column {j + 1}",
            )
        axes[axis.lower()] = j
    names = list(index)
    for name in names:
        lacking = [a for a in _AXES if a not in index[name]]
        if lacking:
            raise ReaderError(
                f"marker {name!r} lacks column {name}_{lacking[0]}", file=file, where=f"line {line}"
            )
    cols = np.array([[index[n][a] for a in _AXES] for n in names], dtype=np.intp)
    return names, cols


def _read_wide(
    rows: list[tuple[int, str]],
    *,
    columns: list[str],
    delimiter: str,
    file: str,
    frame_rate_hz: float | None,
) -> tuple[np.ndarray, list[str], float, np.ndarray, dict[str, Any]]:
    head_no = rows[0][0]
    names, cols = _wide_columns(columns, file=file, line=head_no)
    body = rows[1:]
    table = _parse_rows(body, n_cols=len(columns), delimiter=delimiter, columns=columns, file=file)
    clock = table[:, 0]
    line_nos = [n for n, _ in body]
    rate, time_s = _clock(clock, kind=columns[0].lower(), line_nos=line_nos, file=file,
                          frame_rate_hz=frame_rate_hz)  # fmt: skip
    markers = table[:, cols]  # (frames, markers, 3)
    return markers, names, rate, time_s, {"layout": "wide"}


def _parse_rows(
    body: list[tuple[int, str]],
    *,
    n_cols: int,
    delimiter: str,
    columns: list[str],
    file: str,
) -> np.ndarray:
    out = np.empty((len(body), n_cols), dtype=np.float64)
    for r, (line_no, text) in enumerate(body):
        cells = split_cells(text, delimiter)
        if len(cells) != n_cols:
            raise ReaderError(
                f"ragged row: {len(cells)} columns where the header has {n_cols}",
                file=file,
                where=f"line {line_no}",
            )
        for j, cell in enumerate(cells):
            out[r, j] = parse_float(cell, file=file, line=line_no, column=f"{j + 1} ({columns[j]})")
    return out


def _clock(
    clock: np.ndarray,
    *,
    kind: str,
    line_nos: list[int],
    file: str,
    frame_rate_hz: float | None,
) -> tuple[float, np.ndarray]:
    """Frame rate and time of each frame from a time or frame column."""
    bad = np.flatnonzero(~np.isfinite(clock))
    if bad.size:
        raise ReaderError(f"{kind} is missing", file=file, where=f"line {line_nos[bad[0]]}")
    steps = np.diff(clock)
    back = np.flatnonzero(steps <= 0)
    if back.size:
        i = back[0] + 1
        raise ReaderError(
            f"{kind} is not increasing ({clock[i - 1]:g} then {clock[i]:g})",
            file=file,
            where=f"line {line_nos[i]}",
        )
    if kind == "time":
        derived = 1.0 / float(np.median(steps)) if steps.size else None
        if frame_rate_hz is not None:
            rate = _rate(None, frame_rate_hz, file=file)
        elif derived is None:
            raise ReaderError("frame rate missing: pass frame_rate_hz", file=file)
        else:
            rate = check_rate(derived, file=file, where="time column (median step)")
        return rate, clock - clock[0]
    rate = _rate(None, frame_rate_hz, file=file)
    return rate, (clock - clock[0]) / rate


def _read_long(
    rows: list[tuple[int, str]],
    *,
    columns: list[str],
    delimiter: str,
    file: str,
    frame_rate_hz: float | None,
) -> tuple[np.ndarray, list[str], float, np.ndarray, dict[str, Any]]:
    head_no = rows[0][0]
    if columns[2:] != list(_AXES):
        raise ReaderError(
            f"long form needs columns {columns[0]},marker,x,y,z; found {','.join(columns)}",
            file=file,
            where=f"line {head_no}",
        )
    kind = columns[0]
    names: dict[str, int] = {}
    last: dict[str, float] = {}
    samples: list[tuple[float, ...]] = []
    for line_no, text in rows[1:]:
        cells = split_cells(text, delimiter)
        if len(cells) != 5:
            raise ReaderError(
                f"ragged row: {len(cells)} columns where the header has 5",
                file=file,
                where=f"line {line_no}",
            )
        t = parse_float(cells[0], file=file, line=line_no, column=f"1 ({kind})")
        name = cells[1].strip()
        if not name:
            raise ReaderError("empty marker name", file=file, where=f"line {line_no}, column 2")
        xyz = [parse_float(c, file=file, line=line_no, column=f"{j} ({a})")
               for j, (c, a) in enumerate(zip(cells[2:], _AXES, strict=True), start=3)]  # fmt: skip
        if not np.isfinite(t):
            raise ReaderError(f"{kind} is missing", file=file, where=f"line {line_no}, column 1")
        if name in last and t <= last[name]:
            what = "repeats" if t == last[name] else "goes back"
            raise ReaderError(
                f"{kind} {what} for marker {name!r} ({last[name]:g} then {t:g})",
                file=file,
                where=f"line {line_no}",
            )
        last[name] = t
        samples.append((t, names.setdefault(name, len(names)), *xyz))
    arr = np.asarray(samples, dtype=np.float64)
    clock, frame_idx = np.unique(arr[:, 0], return_inverse=True)
    markers = np.full((len(clock), len(names), 3), np.nan)
    markers[frame_idx, arr[:, 1].astype(np.intp)] = arr[:, 2:]
    rate, time_s = _clock(clock, kind=kind, line_nos=[head_no] * len(clock), file=file,
                          frame_rate_hz=frame_rate_hz)  # fmt: skip
    return markers, list(names), rate, time_s, {"layout": "long"}
