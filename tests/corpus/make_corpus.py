"""Malformed input files for every reader, built from reference writers and then damaged.

``python tests/corpus/make_corpus.py DIR`` writes the files to DIR (with ``index.json`` listing
kind, file name and upload meta); the tests call :func:`build_corpus` into a temporary
directory instead, so nothing binary is kept in the repository. Every file is small
(< 64 kB); the "absurd size" cases are headers that *claim* gigabytes.

Reference writers: ezc3d (C3D), tifffile (TIFF), numpy.save (NPY, format per NEP 1); PLY/PCD
headers follow the published layouts (PLY: Turk 1994; PCD: Point Cloud Library file format
v0.7), written by hand so they can be damaged precisely.
"""

from __future__ import annotations

import io
import json
import struct
import sys
from dataclasses import asdict, dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

__all__ = ["Case", "build_corpus", "tiff_bomb", "valid_c3d", "valid_tiff"]

TRIAL_META = {"units": "mm", "frame_rate_hz": 300.0}  # 300 Hz: common practice
SCAN_META = {"units": "mm"}
GRID_META = {"units": "mm", "dx": 0.5}
MARKERS = ("snout", "tail", "lf", "rf", "lh", "rh")


@dataclass(frozen=True)
class Case:
    """One hostile upload: what it is, the multipart file name and bytes, and its meta."""

    name: str
    kind: str  # "trial" or "scan"
    filename: str
    content: bytes = field(repr=False)
    meta: dict[str, Any] = field(default_factory=dict)
    raw_meta: str | None = None  # sent as the meta field verbatim instead of ``meta``


def _npy(array: np.ndarray) -> bytes:
    buf = io.BytesIO()
    np.save(buf, array, allow_pickle=False)
    return buf.getvalue()


def _npy_with_header(header: str, body: bytes = b"") -> bytes:
    """A version 1.0 .npy file with an arbitrary header dict (NEP 1 layout)."""
    text = header.encode("latin-1")
    pad = 64 - (10 + len(text) + 1) % 64
    text = text + b" " * pad + b"\n"
    return b"\x93NUMPY\x01\x00" + struct.pack("<H", len(text)) + text + body


def valid_c3d(path: Path, *, n_frames: int = 30) -> bytes:
    """A small, valid C3D written by ezc3d (reference writer)."""
    import ezc3d

    c3d = ezc3d.c3d()
    c3d["parameters"]["POINT"]["RATE"]["value"] = [300.0]
    c3d["parameters"]["POINT"]["LABELS"]["value"] = list(MARKERS)
    c3d["parameters"]["POINT"]["UNITS"]["value"] = ["mm"]
    rng = np.random.default_rng(7)
    pts = np.ones((4, len(MARKERS), n_frames))
    pts[:3] = rng.normal(100.0, 5.0, size=(3, len(MARKERS), n_frames))
    c3d["data"]["points"] = pts
    c3d.write(str(path))
    return path.read_bytes()


def valid_tiff(path: Path) -> bytes:
    import tifffile

    tifffile.imwrite(path, np.arange(64, dtype=np.float32).reshape(8, 8))
    return path.read_bytes()


def _wide_csv(rows: list[list[str]]) -> bytes:
    header = ["time"] + [f"{m}_{a}" for m in MARKERS for a in "xyz"]
    return ("\n".join(",".join(r) for r in [header, *rows]) + "\n").encode()


def _trial_cases(work: Path) -> list[Case]:
    good_row = ["0.0"] + ["1.0"] * 18
    c3d = valid_c3d(work / "good.c3d")
    # C3D header word 2 (bytes 2-3): number of 3D points; words 4-5: first/last frame.
    absurd = bytearray(c3d)
    absurd[8:10] = struct.pack("<H", 65535)  # last frame far past the data
    absurd[2:4] = struct.pack("<H", 65535)  # and 65535 points per frame
    cases = [
        ("csv truncated row", "cut.csv", _wide_csv([good_row, good_row[:7]])),
        ("csv header only", "header.csv", _wide_csv([])),
        ("csv text in numbers", "text.csv", _wide_csv([good_row, ["0.1", "abc", *good_row[2:]]])),
        (
            "csv infinite value",
            "inf.csv",
            _wide_csv([good_row, ["0.1", "inf", *good_row[2:]], ["0.2", *good_row[1:]]]),
        ),
        ("csv time goes back", "back.csv", _wide_csv([good_row, good_row, good_row])),
        ("csv binary junk", "junk.csv", bytes(range(256)) * 8),
        ("csv oversized header", "wide.csv", (",".join(f"m{i}_x" for i in range(6000))).encode()),
        ("tsv with commas", "mixed.tsv", _wide_csv([good_row, good_row]).replace(b",", b";")),
        ("c3d truncated", "cut.c3d", c3d[: len(c3d) // 3]),
        ("c3d garbage", "junk.c3d", b"\x02\x50" + bytes(600)),
        ("c3d absurd counts", "absurd.c3d", bytes(absurd)),
        ("npy text dtype", "names.npy", _npy(np.array([["a", "b", "c"]] * 4))),
        ("npy wrong ndim", "flat.npy", _npy(np.zeros(12))),
        (
            "npy pickled objects",
            "obj.npy",
            # An object-dtype header (NEP 1) over an opaque body: the reader must refuse it
            # from the header alone, so the corpus needs no real pickle stream.
            _npy_with_header(
                "{'descr': '|O', 'fortran_order': False, 'shape': (2,), }", b"\x80\x04" + bytes(30)
            ),
        ),
        (
            "npy claims terabytes",
            "huge.npy",
            _npy_with_header(
                "{'descr': '<f8', 'fortran_order': False, 'shape': (100000, 100000, 3), }"
            ),
        ),
        ("npy truncated body", "short.npy", _npy(np.zeros((20, 6, 3)))[:200]),
        ("npy infinite", "inf.npy", _npy(np.full((10, 6, 3), np.inf))),
        ("empty c3d", "empty.c3d", b""),
    ]
    out = []
    for name, filename, content in cases:
        meta = dict(TRIAL_META)
        if filename.endswith(".npy"):
            meta["marker_names"] = list(MARKERS)
        out.append(Case(name, "trial", filename, content, meta))
    # Meta that is wrong rather than the file: absurd or non-finite rates and unknown units.
    for name, extra in (
        ("frame rate zero", {"frame_rate_hz": 0}),
        ("frame rate absurd", {"frame_rate_hz": 1e300}),
        ("units unknown", {"units": "furlong"}),
        ("rate is text", {"frame_rate_hz": "fast"}),
        ("rate is Infinity", {"frame_rate_hz": float("inf")}),
        ("rate is NaN", {"frame_rate_hz": float("nan")}),
    ):
        out.append(
            Case(
                name,
                "trial",
                "meta.npy",
                _npy(np.zeros((5, 6, 3))),
                {**TRIAL_META, "marker_names": list(MARKERS), **extra},
            )
        )
    out.append(
        Case(
            "path traversal, bad body",
            "trial",
            "../../etc/passwd.csv",
            b"root:x:0:0\n",
            dict(TRIAL_META),
        )
    )
    out += _more_trial_cases(_wide_csv(_moving_rows(10, 1 / 300)))
    return out


def _moving_rows(n: int, dt: float) -> list[list[str]]:
    return [[f"{i * dt:.12g}"] + [f"{1.0 + 0.1 * i + j:.3f}" for j in range(18)] for i in range(n)]


def _more_trial_cases(good: bytes) -> list[Case]:
    """Cases found by the second hostile campaign: rates, constants, names, meta shapes."""
    no_rate = {"units": "mm"}
    still = _wide_csv([[f"{i / 300:.6f}"] + ["5.0"] * 18 for i in range(10)])
    deep = "[" * 100_000 + "]" * 100_000
    cases = [
        ("rate 1e9 Hz from the time column", "ghz.csv", _wide_csv(_moving_rows(10, 1e-9)),
         no_rate, None),
        ("rate 0.01 Hz from the time column", "slow.csv", _wide_csv(_moving_rows(10, 100.0)),
         no_rate, None),
        ("frame rate 1e-9", "tiny.csv", good, {**TRIAL_META, "frame_rate_hz": 1e-9}, None),
        ("frame rate 200 kHz", "fast.csv", good, {**TRIAL_META, "frame_rate_hz": 2e5}, None),
        ("no marker moves", "still.csv", still, TRIAL_META, None),
        ("NUL in file name", "walk\x00.csv", good, TRIAL_META, None),
        ("escape in file name", "walk\x1b[31m.csv", good, TRIAL_META, None),
        ("meta nested 100k deep", "deep.csv", good, {}, '{"units": ' + deep + "}"),
        ("meta nested 30k deep", "deep2.csv", good, {},
         '{"units": ' + "[" * 30_000 + "]" * 30_000 + "}"),
        ("meta over 64 kB", "big.csv", good, {}, json.dumps({"condition": "x" * 70_000})),
        ("meta is a list", "list.csv", good, {}, "[1, 2]"),
        ("meta unknown key", "key.csv", good, {**TRIAL_META, "colour": "red"}, None),
        ("treadmill 1e9 m/s", "belt.csv", good, {**TRIAL_META, "treadmill_speed_m_s": 1e9},
         None),
        ("up axis w", "up.csv", good, {**TRIAL_META, "up_axis": "w"}, None),
        ("condition 300 chars", "cond.csv", good, {**TRIAL_META, "condition": "c" * 300}, None),
        ("csv with NUL bytes", "nul.csv", good.replace(b"1.0", b"1\x00", 3), TRIAL_META, None),
        ("unknown trial format", "walk.mat", b"MATLAB 5.0", TRIAL_META, None),
    ]  # fmt: skip
    return [Case(n, "trial", f, c, dict(m), raw) for n, f, c, m, raw in cases]


def _ply(header_lines: list[str], body: bytes = b"") -> bytes:
    return ("\n".join(["ply", *header_lines, "end_header"]) + "\n").encode() + body


def _scan_cases(work: Path) -> list[Case]:
    xyz3 = b"".join(struct.pack("<3f", i, i * 2, i % 3) for i in range(10))
    tiff = valid_tiff(work / "good.tif")
    pcd_head = (
        "# .PCD v0.7\nVERSION 0.7\nFIELDS x y z\nSIZE 4 4 4\nTYPE F F F\nCOUNT 1 1 1\n"
        "WIDTH {n}\nHEIGHT 1\nVIEWPOINT 0 0 0 1 0 0 0\nPOINTS {n}\nDATA {enc}\n"
    )
    grid_bad = np.zeros((6, 6))
    grid_bad[:] = np.nan
    cases = [
        ("ply wrong magic", "magic.ply", b"plx\nformat ascii 1.0\nend_header\n"),
        ("ply no end_header", "open.ply", b"ply\nformat ascii 1.0\nelement vertex 3\n"),
        ("ply oversized header", "longhead.ply", b"ply\n" + b"comment " + b"x" * 60000 + b"\n"),
        (
            "ply claims gigabytes",
            "huge.ply",
            _ply(
                [
                    "format binary_little_endian 1.0",
                    "element vertex 4000000000",
                    "property float x",
                    "property float y",
                    "property float z",
                ],
                xyz3,
            ),
        ),
        (
            "ply truncated body",
            "cut.ply",
            _ply(
                [
                    "format binary_little_endian 1.0",
                    "element vertex 100",
                    "property float x",
                    "property float y",
                    "property float z",
                ],
                xyz3,
            ),
        ),
        (
            "ply bad type",
            "type.ply",
            _ply(["format ascii 1.0", "element vertex 1", "property quad x"], b"1\n"),
        ),
        ("pcd short body", "short.pcd", pcd_head.format(n=1000, enc="binary").encode() + xyz3),
        ("pcd text junk", "junk.pcd", b"VERSION banana\n" + bytes(range(256))),
        ("xyz text", "text.xyz", b"1 2 3\n4 five 6\n"),
        ("xyz two columns", "two.xyz", b"1 2\n3 4\n5 6\n"),
        ("xyz nan inf", "naninf.xyz", b"nan nan nan\ninf 1 2\n-inf 3 4\n"),
        ("pts empty", "empty.pts", b""),
        ("heightmap 1-D", "line.npy", _npy(np.zeros(50))),
        ("heightmap all NaN", "nan.npy", _npy(grid_bad)),
        (
            "heightmap object",
            "obj.npy",
            _npy_with_header(
                "{'descr': '|O', 'fortran_order': False, 'shape': (1, 1), }",
                b"\x80\x04" + bytes(14),
            ),
        ),
        (
            "heightmap claims terabytes",
            "huge.npy",
            _npy_with_header(
                "{'descr': '<f8', 'fortran_order': False, 'shape': (10000000, 10000000), }"
            ),
        ),
        ("heightmap bad npy header", "hdr.npy", _npy_with_header("__import__('os').system('x')")),
        ("csv grid ragged", "ragged.csv", b"1,2,3\n4,5\n6,7,8\n"),
        ("csv grid text", "text.csv", b"1,2,3\n4,x,6\n7,8,9\n"),
        ("tiff truncated", "cut.tif", tiff[: len(tiff) // 2]),
        ("tiff garbage", "junk.tiff", b"II*\x00" + bytes(100)),
    ]
    out = []
    for name, filename, content in cases:
        meta = GRID_META if filename.endswith((".npy", ".csv", ".tif", ".tiff")) else SCAN_META
        out.append(Case(name, "scan", filename, content, dict(meta)))
    out.append(
        Case(
            "heightmap negative dx",
            "scan",
            "dx.npy",
            _npy(np.zeros((4, 4))),
            {"units": "mm", "dx": -1.0},
        )
    )
    for name, dx in (("heightmap dx Infinity", float("inf")), ("heightmap dx NaN", float("nan"))):
        out.append(
            Case(name, "scan", "dxinf.npy", _npy(np.zeros((4, 4))), {"units": "mm", "dx": dx})
        )
    out.append(Case("path traversal scan", "scan", "../../../tmp/evil.xyz", b"1 2\n", SCAN_META))
    out += _more_scan_cases(work)
    return out


def _ascii_ply(rows: list[str], *, n: int | None = None, extra: list[str] | None = None) -> bytes:
    head = ["format ascii 1.0", f"element vertex {len(rows) if n is None else n}",
            "property float x", "property float y", "property float z", *(extra or [])]  # fmt: skip
    return _ply(head, ("\n".join(rows) + "\n").encode())


def tiff_bomb(path: Path, side: int = 16384) -> bytes:
    """A TIFF whose tags declare side x side float32 (deflate) but whose strips are tiny.

    Written by tifffile for a 64 x 64 image, then the ImageWidth/ImageLength tags (TIFF 6.0
    tags 256 and 257) are patched: a decoder that trusts them inflates side^2 x 4 bytes.
    """
    import tifffile

    tifffile.imwrite(path, np.zeros((64, 64), np.float32), compression="zlib")
    raw = bytearray(path.read_bytes())
    with tifffile.TiffFile(path) as tif:
        tags = tif.pages.first.tags
        for code in (256, 257):
            tag = tags[code]
            fmt = "<I" if tag.dtype == 4 else "<H"
            struct.pack_into(fmt, raw, tag.valueoffset, side)
    return bytes(raw)


def _las(work: Path, *, n: int = 50) -> bytes:
    import laspy

    las = laspy.create(point_format=3, file_version="1.2")
    rng = np.random.default_rng(3)
    las.header.scales = [0.001, 0.001, 0.001]
    las.x = rng.uniform(0, 10, n)
    las.y = rng.uniform(0, 10, n)
    las.z = rng.normal(0, 0.1, n)
    path = work / "tile.las"
    las.write(str(path))
    return path.read_bytes()


def _more_scan_cases(work: Path) -> list[Case]:
    grid = np.arange(36.0).reshape(6, 6)
    rows = [f"{0.001 * i:.4f} {0.002 * i:.4f} {0.0001 * (i % 7):.4f}" for i in range(1200)]
    bad = list(rows)
    bad[1000] = "0.1 abc 0.2"
    inf_rows = list(rows)
    inf_rows[5] = "inf 0.2 0.3"
    las = _las(work)
    las_claims = bytearray(las)
    struct.pack_into("<I", las_claims, 107, 4_000_000)  # LAS 1.2 legacy point count
    pcd = "VERSION 0.7\nFIELDS x y z\nSIZE 4 4 4\nTYPE F F F\nCOUNT 1 1 1\nWIDTH {n}\nHEIGHT 1\n"
    pcd += "POINTS {n}\nDATA ascii\n"
    pcd_rows = "\n".join(rows[:20]) + "\n"
    cases: list[tuple[str, str, bytes, dict[str, Any]]] = [
        ("ply ascii word at line 1000", "word.ply", _ascii_ply(bad), SCAN_META),
        ("ply ascii inf token", "inf.ply", _ascii_ply(inf_rows), SCAN_META),
        ("ply ascii more rows than vertices", "more.ply", _ascii_ply(rows, n=1000), SCAN_META),
        ("ply ascii fewer rows than vertices", "fewer.ply", _ascii_ply(rows[:30], n=40),
         SCAN_META),
        ("ply ascii face count 1e9", "faces.ply",
         _ascii_ply(rows[:30], extra=["element face 1000000000",
                                      "property list uchar int vertex_indices"]), SCAN_META),
        ("ply binary trailing bytes", "tail.ply",
         _ply(["format binary_little_endian 1.0", "element vertex 3", "property float x",
               "property float y", "property float z"],
              np.arange(9, dtype="<f4").tobytes() + b"junk"), SCAN_META),
        ("pcd ascii word", "word.pcd", (pcd.format(n=20) + pcd_rows.replace("0.0020", "zz", 1))
         .encode(), SCAN_META),
        ("pcd ascii short", "short.pcd", (pcd.format(n=25) + pcd_rows).encode(), SCAN_META),
        ("points all identical", "same.xyz", b"1 2 3\n" * 500, SCAN_META),
        ("points on one line", "line.xyz",
         "".join(f"{i} {2 * i} {3 * i}\n" for i in range(50)).encode(), SCAN_META),
        ("points on a flat plane", "flat.xyz",
         "".join(f"{i % 7} {i // 7} 4.5\n" for i in range(49)).encode(), SCAN_META),
        ("xyz count disagrees", "count.xyz", b"5\n1 2 3\n4 5 7\n7 8 1\n3 3 3\n1 1 2\n2 2 9\n",
         SCAN_META),
        ("tiff decompression bomb", "bomb.tif", tiff_bomb(work / "bomb.tif"), GRID_META),
        ("heightmap constant", "flat.npy", _npy(np.full((8, 8), 2.5)), GRID_META),
        ("heightmap one row", "row.npy", _npy(grid[:1]), GRID_META),
        ("heightmap dx 1e308", "dxbig.npy", _npy(grid), {"units": "mm", "dx": 1e308}),
        ("heightmap dx 1e-300", "dxsmall.npy", _npy(grid), {"units": "m", "dx": 1e-300}),
        ("heightmap dy 5 km", "dy.npy", _npy(grid), {"units": "m", "dx": 1.0, "dy": 5000.0}),
        ("las garbage", "junk.las", b"LASF" + bytes(400), SCAN_META),
        ("las truncated", "cut.las", las[: len(las) // 2], SCAN_META),
        ("las claims 4M points", "claims.las", bytes(las_claims), SCAN_META),
        ("las without units", "nounits.las", las, {}),
        ("units furlong scan", "furlong.xyz", b"1 2 3\n4 5 6\n7 8 0\n", {"units": "furlong"}),
        ("NUL in scan name", "tray\x00.xyz", b"1 2 3\n4 5 6\n7 8 0\n", SCAN_META),
    ]  # fmt: skip
    return [Case(n, "scan", f, c, dict(m)) for n, f, c, m in cases]


def build_corpus(work: Path) -> list[Case]:
    """Every hostile case; ``work`` is scratch space for the reference writers."""
    work.mkdir(parents=True, exist_ok=True)
    return _trial_cases(work) + _scan_cases(work)


def _main(dest: str) -> None:
    root = Path(dest)
    cases = build_corpus(root / "_work")
    index = []
    for i, case in enumerate(cases):
        name = f"{i:03d}-{Path(case.filename).name}"
        (root / name).write_bytes(case.content)
        entry = {k: v for k, v in asdict(case).items() if k != "content"}
        index.append({**entry, "stored_as": name})
    (root / "index.json").write_text(json.dumps(index, indent=1))
    print(f"wrote {len(cases)} files to {root}")


if __name__ == "__main__":
    _main(sys.argv[1] if len(sys.argv) > 1 else "hostile-corpus")
