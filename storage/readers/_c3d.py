"""Checks on a C3D file's header and parameter section before ezc3d reads it.

Layout from the C3D file format (c3d.org, "The C3D File Format User Guide", Motion
Lab Systems 2008): 512-byte blocks; block 1 is the header, whose byte 1 is 0x50 and byte 0
the block number of the parameter section. Header words (16-bit, 1-based): 2 number of 3D
points, 3 analog measurements per 3D frame, 4 first frame, 5 last frame, 7-8 scale factor
(float; negative means float storage), 9 first block of 3D/analog data, 11-12 frame rate.
The parameter section starts with 4 bytes: two reserved, the number of parameter blocks and
the processor type (84 Intel, 85 DEC, 86 MIPS = big-endian).

ezc3d trusts these numbers and can allocate or crash on a corrupt file, so they are
checked here against the file size first.
"""

from __future__ import annotations

import math
import struct
from dataclasses import dataclass
from pathlib import Path

from storage.errors import ReaderError
from storage.readers._common import check_size_claim

__all__ = ["C3DHeader", "check_c3d"]

BLOCK = 512
MAGIC = 0x50
PROCESSORS = {84: "intel", 85: "dec", 86: "mips"}


@dataclass(frozen=True)
class C3DHeader:
    """The header numbers that matter for reading the points."""

    n_points: int
    analog_per_frame: int
    first_frame: int
    last_frame: int
    scale: float
    data_block: int
    frame_rate_hz: float
    processor: str


def _float(raw: bytes, processor: str) -> float:
    if processor == "mips":
        return float(struct.unpack(">f", raw)[0])
    if processor == "dec":
        # DEC (VAX F) floats: 16-bit words swapped relative to IEEE and exponent bias
        # larger by 2, so swap the words and divide by 4.
        return float(struct.unpack("<f", raw[2:4] + raw[0:2])[0]) / 4.0
    return float(struct.unpack("<f", raw)[0])


def check_c3d(path: str | Path, *, size: int, file: str) -> C3DHeader:
    """Validate header and parameter section; ReaderError naming the field otherwise."""
    with open(path, "rb") as fh:
        header = fh.read(BLOCK)
        if len(header) < BLOCK:
            raise ReaderError(
                f"truncated file: a C3D header needs {BLOCK} bytes, the file has {size}",
                file=file,
            )
        if header[1] != MAGIC:
            raise ReaderError(
                "wrong magic: byte 2 of a C3D file must be 0x50", file=file, where="header"
            )
        param_block = header[0]
        param_start = (param_block - 1) * BLOCK
        if param_block < 2 or param_start + 4 > size:
            raise ReaderError(
                f"parameter block pointer {param_block} points outside the file",
                file=file,
                where="header word 1",
            )
        fh.seek(param_start)
        phead = fh.read(4)
        processor = PROCESSORS.get(phead[3] if len(phead) == 4 else -1)
        if processor is None:
            raise ReaderError(
                f"unknown processor type {phead[3] if len(phead) == 4 else None}"
                " (expected 84, 85 or 86)",
                file=file,
                where="parameter section",
            )
        n_param_blocks = phead[2]
        check_size_claim(
            param_start + n_param_blocks * BLOCK,
            size,
            file=file,
            what=f"{n_param_blocks} parameter blocks ending at byte",
            where="parameter section",
        )
        fh.seek(param_start)
        params = fh.read(max(n_param_blocks, 1) * BLOCK)
    end = "<" if processor != "mips" else ">"
    n_points, analog, first, last = struct.unpack(end + "4H", header[2:10])
    scale = _float(header[12:16], processor)
    (data_block,) = struct.unpack(end + "H", header[16:18])
    rate = _float(header[20:24], processor)
    if not math.isfinite(scale) or scale == 0:
        raise ReaderError(f"scale factor {scale} is not usable", file=file, where="header word 7")
    if n_points == 0:
        raise ReaderError("the file holds no 3D points", file=file, where="header word 2")
    if first < 1 or last < first:
        raise ReaderError(
            f"frame range {first}..{last} is empty or starts below 1",
            file=file,
            where="header words 4-5",
        )
    data_start = (data_block - 1) * BLOCK
    if data_block < 2 or data_start > size:
        raise ReaderError(
            f"data block pointer {data_block} points outside the file",
            file=file,
            where="header word 9",
        )
    value_bytes = 4 if scale < 0 else 2
    n_frames = last - first + 1
    frame_bytes = (4 * n_points + analog) * value_bytes
    check_size_claim(
        n_frames * frame_bytes,
        size - data_start,
        file=file,
        what=f"{n_frames} frames of {n_points} points",
        where=f"frame {first + (size - data_start) // max(frame_bytes, 1)}",
    )
    _walk_parameters(params, end=end, file=file)
    return C3DHeader(n_points, analog, first, last, scale, data_block, rate, processor)


def _walk_parameters(params: bytes, *, end: str, file: str) -> None:
    """Follow the group/parameter chain; every record must fit inside the section."""
    pos = 4
    limit = len(params)
    for _ in range(100_000):
        if pos + 2 > limit:
            return
        n_chars = struct.unpack("b", params[pos : pos + 1])[0]
        if n_chars == 0:
            return
        group_id = struct.unpack("b", params[pos + 1 : pos + 2])[0]
        name_end = pos + 2 + abs(n_chars)
        if name_end + 2 > limit:
            raise _corrupt(file, pos)
        (offset,) = struct.unpack(end + "h", params[name_end : name_end + 2])
        if group_id > 0:  # a parameter: type, dimensions, data must fit
            body = name_end + 2
            if body + 2 > limit:
                raise _corrupt(file, pos)
            elem = abs(struct.unpack("b", params[body : body + 1])[0])
            n_dims = params[body + 1]
            dims = params[body + 2 : body + 2 + n_dims]
            if elem not in (1, 2, 4) or len(dims) < n_dims:
                raise _corrupt(file, pos)
            if body + 2 + n_dims + elem * math.prod(dims) > limit:
                raise _corrupt(file, pos)
        if offset == 0:
            return
        nxt = name_end + offset
        if nxt <= pos or nxt > limit:
            raise _corrupt(file, pos)
        pos = nxt
    raise _corrupt(file, pos)


def _corrupt(file: str, pos: int) -> ReaderError:
    return ReaderError(
        "corrupt parameter section (a record runs past its end)",
        file=file,
        where=f"parameter section byte {pos}",
    )
