"""Parsing numeric text tables with messages that name the line and column."""

from __future__ import annotations

import io
import math
import re
import warnings

import numpy as np

from storage.errors import ReaderError

__all__ = ["decode_text", "parse_float", "parse_table"]

_WS = re.compile(r"[\s,;]+")


def decode_text(raw: bytes, *, file: str) -> str:
    """UTF-8 text (a BOM is dropped); ReaderError for binary data."""
    if b"\x00" in raw[:4096]:
        raise ReaderError("this is a binary file, expected text", file=file)
    try:
        return raw.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        line = raw[: exc.start].count(b"\n") + 1
        raise ReaderError("not UTF-8 text", file=file, where=f"line {line}") from None


def parse_float(
    cell: str, *, file: str, line: int, column: int | str, strict: bool = False
) -> float:
    """One cell as float; empty cells are gaps (NaN), or an error when ``strict``."""
    text = cell.strip()
    if not text:
        if strict:
            raise ReaderError("empty value", file=file, where=f"line {line}, column {column}")
        return math.nan
    try:
        return float(text)
    except ValueError:
        raise ReaderError(
            f"non-numeric value {text[:40]!r}",
            file=file,
            where=f"line {line}, column {column}",
        ) from None


def split_cells(line: str, delimiter: str | None) -> list[str]:
    """Cells of one line: ``delimiter`` if given, else any run of spaces, commas, semicolons."""
    if delimiter is None:
        return [c for c in _WS.split(line.strip()) if c != ""]
    return line.rstrip("\r\n").split(delimiter)


def parse_table(
    lines: list[tuple[int, str]],
    *,
    file: str,
    delimiter: str | None,
    n_cols: int | None = None,
    min_cols: int = 1,
    strict: bool = False,
) -> np.ndarray:
    """Parse ``(line_number, text)`` rows into a float64 array of shape (rows, cols).

    A fast numpy pass first; if it fails, a slow pass finds the first bad cell or ragged
    row and says where. ``strict``: an empty cell is an error, not a gap.
    """
    if not lines:
        raise ReaderError("no data rows", file=file)
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("error")
            arr = np.loadtxt(
                io.StringIO("\n".join(t for _, t in lines)),
                delimiter=delimiter,
                ndmin=2,
                dtype=np.float64,
                comments=None,
            )
        if (n_cols is None or arr.shape[1] == n_cols) and arr.shape[1] >= min_cols:
            return arr
    except (ValueError, UserWarning):
        pass
    return _slow_parse(
        lines, file=file, delimiter=delimiter, n_cols=n_cols, min_cols=min_cols, strict=strict
    )


def _slow_parse(
    lines: list[tuple[int, str]],
    *,
    file: str,
    delimiter: str | None,
    n_cols: int | None,
    min_cols: int,
    strict: bool = False,
) -> np.ndarray:
    expected = n_cols
    rows: list[list[float]] = []
    for line_no, text in lines:
        cells = split_cells(text, delimiter)
        if expected is None:
            expected = len(cells)
            if expected < min_cols:
                raise ReaderError(
                    f"expected at least {min_cols} columns, found {expected}",
                    file=file,
                    where=f"line {line_no}",
                )
        if len(cells) != expected:
            raise ReaderError(
                f"ragged row: {len(cells)} columns where {expected} were expected",
                file=file,
                where=f"line {line_no}",
            )
        rows.append(
            [
                parse_float(c, file=file, line=line_no, column=j + 1, strict=strict)
                for j, c in enumerate(cells)
            ]
        )
    return np.asarray(rows, dtype=np.float64)
