"""Fuzzing the readers (hypothesis): every input, however damaged, gives either a valid result or
a ``ReaderError`` — never another exception, never a crash.

Inputs are valid seed files (from reference writers: ezc3d, tifffile, numpy.save, and the
published PLY/PCD layouts) mutated by truncation, byte flips, splices and insertions, plus raw
random bytes. Bounded: ``GAITSCAPE_FUZZ_EXAMPLES`` examples per format (default 25; CI sets
200) and no deadline (the first open3d import takes seconds).
"""

from __future__ import annotations

import io
import os
import sys
import tempfile
from pathlib import Path

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

sys.path.insert(0, str(Path(__file__).parent / "corpus"))
from make_corpus import MARKERS, valid_c3d, valid_tiff

from storage.errors import ReaderError
from storage.readers import ScanData, TrialData, read_scan, read_trial

MAX_EXAMPLES = int(os.environ.get("GAITSCAPE_FUZZ_EXAMPLES", "25"))
TRIED: dict[str, int] = {}


def _npy(array: np.ndarray) -> bytes:
    buf = io.BytesIO()
    np.save(buf, array, allow_pickle=False)
    return buf.getvalue()


def _seeds() -> dict[tuple[str, str], bytes]:
    rng = np.random.default_rng(11)
    names = [f"{m}_{a}" for m in MARKERS for a in "xyz"]
    rows = [",".join(["time", *names])]
    rows += [
        ",".join([f"{i / 300:.6f}", *(f"{v:.3f}" for v in rng.normal(100, 5, 18))])
        for i in range(8)
    ]
    csv = ("\n".join(rows) + "\n").encode()
    pts = rng.uniform(0, 50, size=(12, 3))
    xyz = "".join(f"{a:.3f} {b:.3f} {c:.3f}\n" for a, b, c in pts).encode()
    ply = (
        b"ply\nformat ascii 1.0\nelement vertex 12\nproperty float x\nproperty float y\n"
        b"property float z\nend_header\n"
    ) + xyz
    pcd = (
        b"# .PCD v0.7\nVERSION 0.7\nFIELDS x y z\nSIZE 4 4 4\nTYPE F F F\nCOUNT 1 1 1\n"
        b"WIDTH 12\nHEIGHT 1\nVIEWPOINT 0 0 0 1 0 0 0\nPOINTS 12\nDATA ascii\n"
    ) + xyz
    grid = rng.normal(size=(6, 7))
    with tempfile.TemporaryDirectory() as work:
        c3d = valid_c3d(Path(work) / "s.c3d", n_frames=8)
        tif = valid_tiff(Path(work) / "s.tif")
    return {
        ("trial", "csv"): csv,
        ("trial", "tsv"): csv.replace(b",", b"\t"),
        ("trial", "c3d"): c3d,
        ("trial", "npy"): _npy(rng.normal(size=(8, len(MARKERS), 3))),
        ("scan", "ply"): ply,
        ("scan", "pcd"): pcd,
        ("scan", "xyz"): xyz,
        ("scan", "pts"): b"12\n" + xyz,
        ("scan", "npy"): _npy(grid),
        ("scan", "csv"): "\n".join(",".join(f"{v:.4f}" for v in r) for r in grid).encode(),
        ("scan", "tiff"): tif,
    }


SEEDS = _seeds()


@st.composite
def mutated(draw: st.DrawFn, seed: bytes) -> bytes:
    """The seed damaged by a few edits, or random bytes."""
    if draw(st.integers(0, 9)) == 0:
        return draw(st.binary(max_size=512))
    data = bytearray(seed)
    for _ in range(draw(st.integers(1, 4))):
        op = draw(st.sampled_from(["truncate", "flip", "insert", "delete", "splice_number"]))
        pos = draw(st.integers(0, max(len(data) - 1, 0)))
        if op == "truncate":
            del data[pos:]
        elif op == "flip" and data:
            data[pos] = draw(st.integers(0, 255))
        elif op == "insert":
            data[pos:pos] = draw(st.binary(min_size=1, max_size=16))
        elif op == "delete":
            del data[pos : pos + draw(st.integers(1, 32))]
        else:  # numbers that parsers get wrong
            token = draw(
                st.sampled_from(
                    [
                        b"nan",
                        b"inf",
                        b"-inf",
                        b"1e309",
                        b"-0",
                        b"9" * 40,
                        b"0x1f",
                        b"\x00",
                        b"\xff\xfe",
                        b"4294967296",
                    ]
                )
            )
            data[pos:pos] = token
    return bytes(data)


def _check_result(result: object, kind: str) -> None:
    if kind == "trial":
        assert isinstance(result, TrialData)
        assert result.markers.ndim == 3 and result.markers.shape[2] == 3
        assert not np.isinf(result.markers).any()
        assert np.isfinite(result.frame_rate_hz) and result.frame_rate_hz > 0
        assert len(result.marker_names) == result.markers.shape[1]
    else:
        assert isinstance(result, ScanData)
        if result.points is not None:
            assert result.points.ndim == 2 and np.isfinite(result.points).all()
        if result.z is not None:
            assert not np.isinf(result.z).any()
            assert result.valid is not None and result.valid.shape == result.z.shape


@pytest.mark.parametrize(("kind", "fmt"), list(SEEDS), ids=[f"{k}-{f}" for k, f in SEEDS])
def test_reader_outcome_is_result_or_reader_error(kind: str, fmt: str, tmp_path: Path) -> None:
    path = tmp_path / f"fuzz.{fmt}"

    @settings(
        max_examples=MAX_EXAMPLES,
        deadline=None,
        database=None,
        derandomize=True,  # reproducible in CI; vary with GAITSCAPE_FUZZ_EXAMPLES
        suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow],
    )
    @given(mutated(SEEDS[(kind, fmt)]))
    def run(content: bytes) -> None:
        TRIED[f"{kind}-{fmt}"] = TRIED.get(f"{kind}-{fmt}", 0) + 1
        path.write_bytes(content)
        try:
            if kind == "trial":
                result = read_trial(
                    path,
                    fmt=fmt,
                    filename=path.name,
                    units="mm",
                    frame_rate_hz=300.0,
                    marker_names=list(MARKERS),
                )
            else:
                result = read_scan(path, fmt=fmt, filename=path.name, units="mm", dx=0.5)
        except ReaderError as exc:
            assert str(exc)  # a message for the client
            return
        _check_result(result, kind)

    run()
    assert TRIED[f"{kind}-{fmt}"] >= min(MAX_EXAMPLES, 10)


def test_zz_report_cases_tried(capsys: pytest.CaptureFixture[str]) -> None:
    with capsys.disabled():
        if TRIED:
            print(f"\nreader fuzz cases tried: {sum(TRIED.values())} ({TRIED})")
