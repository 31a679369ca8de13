"""Hostile uploads through the API: each malformed file is the expected 4xx with the expected
message, and nothing is stored (no row, no job, no artifact, no staging leftover).
Path-traversal names are stored by hash only. The expected messages are this project's own
wording; the statuses follow RFC 9110 (400 bad request form, 415 unknown media, 422 a file the
reader refuses)."""

from __future__ import annotations

import json
import sys
import tempfile
from pathlib import Path

import numpy as np
import pytest
from test_api import Lab, wide_csv

sys.path.insert(0, str(Path(__file__).parent / "corpus"))
from make_corpus import build_corpus

with tempfile.TemporaryDirectory() as _work:  # scratch for the reference writers only
    CASES = build_corpus(Path(_work))


@pytest.fixture(scope="module")
def lab(tmp_path_factory: pytest.TempPathFactory) -> Lab:
    return Lab(tmp_path_factory.mktemp("hostile"))


# name -> (status, a piece of the message). Every corpus case must be listed here.
EXPECTED: dict[str, tuple[int, str]] = {
    "csv truncated row": (422, "line 3: ragged row: 7 columns"),
    "csv header only": (422, "header but no data rows"),
    "csv text in numbers": (422, "line 3, column 2 (snout_x): non-numeric value 'abc'"),
    "csv infinite value": (422, "frame 1: infinite coordinate for marker 'snout'"),
    "csv time goes back": (422, "line 3: time is not increasing"),
    "csv binary junk": (422, "this is a binary file"),
    "csv oversized header": (422, "header but no data rows"),
    "tsv with commas": (422, "first column must be 'time' or 'frame'"),
    "c3d truncated": (422, "truncated file: the header announces 30 frames"),
    "c3d garbage": (422, "unknown processor type 0"),
    "c3d absurd counts": (422, "65535 frames of 65535 points"),
    "npy text dtype": (422, "dtype must be numeric"),
    "npy wrong ndim": (422, "expected an array (frames, markers, 3)"),
    "npy pickled objects": (422, "got '|O'"),
    "npy claims terabytes": (422, "shape (100000, 100000, 3)"),
    "npy truncated body": (422, "but only 72 bytes follow"),
    "npy infinite": (422, "frame 0: infinite coordinate for marker 'snout'"),
    "empty c3d": (422, "file is empty"),
    "frame rate zero": (400, "frame_rate_hz: Input should be greater than or equal to 1"),
    "frame rate absurd": (400, "frame_rate_hz: Input should be less than or equal to 100000"),
    "units unknown": (400, "units: Input should be"),
    "rate is text": (400, "frame_rate_hz: Input should be a valid number"),
    "rate is Infinity": (400, "frame_rate_hz: Input should be a finite number"),
    "rate is NaN": (400, "frame_rate_hz: Input should be a finite number"),
    "path traversal, bad body": (422, "header but no data rows"),
    "rate 1e9 Hz from the time column": (422, "frame rate 1e+09 Hz is outside the accepted"),
    "rate 0.01 Hz from the time column": (422, "frame rate 0.01 Hz is outside the accepted"),
    "frame rate 1e-9": (400, "frame_rate_hz: Input should be greater than or equal to 1"),
    "frame rate 200 kHz": (400, "frame_rate_hz: Input should be less than or equal to 100000"),
    "no marker moves": (422, "no marker moves in 10 frames"),
    "NUL in file name": (400, "the file name contains a control character (U+0000)"),
    "escape in file name": (400, "the file name contains a control character (U+001B)"),
    "meta nested 100k deep": (400, "Form field 'meta' is longer than 65536 bytes"),
    "meta over 64 kB": (400, "Form field 'meta' is longer than 65536 bytes"),
    "meta nested 30k deep": (400, "meta is nested deeper than 4 levels"),
    "meta is a list": (400, "meta must be a JSON object"),
    "meta unknown key": (400, "colour: Extra inputs are not permitted"),
    "treadmill 1e9 m/s": (400, "treadmill_speed_m_s: Input should be less than or equal to 100"),
    "up axis w": (400, "up_axis: Input should be 'x'"),
    "condition 300 chars": (400, "condition: String should have at most 200 characters"),
    "csv with NUL bytes": (422, "this is a binary file"),
    "unknown trial format": (415, "unknown trial format .mat"),
    "ply wrong magic": (422, "wrong magic: a PLY file starts with 'ply'"),
    "ply no end_header": (422, "header has no 'end_header' line"),
    "ply oversized header": (422, "header has no 'end_header' line"),
    "ply claims gigabytes": (422, "binary elements (4000000000 vertex)"),
    "ply truncated body": (422, "binary elements (100 vertex) (1200 bytes) but only 120"),
    "ply bad type": (422, "header line 4: bad property line 'property quad x'"),
    "pcd short body": (422, "1000 points (12000 bytes) but only 120 bytes follow"),
    "pcd text junk": (422, "header is not ASCII text"),
    "xyz text": (422, "line 2, column 2: non-numeric value 'five'"),
    "xyz two columns": (422, "expected at least 3 columns, found 2"),
    "xyz nan inf": (422, "line 2: infinite coordinate in point 1"),
    "pts empty": (422, "file is empty"),
    "heightmap 1-D": (422, "heightmap must be a 2-D array"),
    "heightmap all NaN": (422, "fewer than 3 valid cells (0 of 36)"),
    "heightmap object": (422, "got '|O'"),
    "heightmap claims terabytes": (422, "shape (10000000, 10000000)"),
    "heightmap bad npy header": (422, "unreadable .npy header"),
    "csv grid ragged": (422, "line 2: ragged row: 2 columns where 3 were expected"),
    "csv grid text": (422, "line 2, column 2: non-numeric value 'x'"),
    "tiff truncated": (422, "truncated file"),
    "tiff garbage": (422, "TIFF has no images"),
    "heightmap negative dx": (400, "dx: Input should be greater than 0"),
    "heightmap dx Infinity": (400, "dx: Input should be a finite number"),
    "heightmap dx NaN": (400, "dx: Input should be a finite number"),
    "path traversal scan": (422, "expected at least 3 columns, found 2"),
    "ply ascii word at line 1000": (422, "line 1008, column 2: non-numeric value 'abc'"),
    "ply ascii inf token": (422, "line 13: infinite coordinate in point 5"),
    "ply ascii more rows than vertices": (422, "extra data: the header announces 1000 element"),
    "ply ascii fewer rows than vertices": (422, "truncated file: the header announces 40 element"),
    "ply ascii face count 1e9": (422, "(30 vertex, 1000000000 face)"),
    "ply binary trailing bytes": (422, "the body holds 40 bytes, the header announces 36"),
    "pcd ascii word": (422, "line 11, column 2: non-numeric value 'zz'"),
    "pcd ascii short": (422, "POINTS announces 25 points, the body has 20 lines"),
    "points all identical": (422, "all 500 points are identical"),
    "points on one line": (422, "all 50 points lie on one line"),
    "points on a flat plane": (422, "all 49 heights are the same"),
    "xyz count disagrees": (422, "header announces 5 points, 6 rows follow"),
    "tiff decompression bomb": (422, "268,435,456 exceeds this server's cap of 33,554,432"),
    "heightmap constant": (422, "all 64 heights are the same"),
    "heightmap one row": (422, "a heightmap needs at least 2 x 2 cells"),
    "heightmap dx 1e308": (422, "dx 1e+305 m is outside the accepted 1e-07-1000 m"),
    "heightmap dx 1e-300": (422, "dx 1e-300 m is outside the accepted 1e-07-1000 m"),
    "heightmap dy 5 km": (422, "dy 5000 m is outside the accepted 1e-07-1000 m"),
    "las garbage": (422, "unreadable LAS file"),
    "las truncated": (422, "the header announces 50 point records"),
    "las claims 4M points": (422, "the header announces 4000000 point records"),
    "las without units": (422, "no units given"),
    "units furlong scan": (400, "units: Input should be"),
    "NUL in scan name": (400, "the file name contains a control character (U+0000)"),
}


def _multipart(filename: str, content: bytes, meta: str) -> tuple[bytes, str]:
    """A multipart body written by hand: httpx would percent-encode a NUL in the file name,
    a hostile client need not."""
    boundary = "hostile0boundary"
    parts = [
        f'--{boundary}\r\nContent-Disposition: form-data; name="meta"\r\n\r\n'.encode()
        + meta.encode()
        + b"\r\n",
        f'--{boundary}\r\nContent-Disposition: form-data; name="file"; filename="'.encode()
        + filename.encode("latin-1")
        + b'"\r\nContent-Type: application/octet-stream\r\n\r\n'
        + content
        + b"\r\n",
        f"--{boundary}--\r\n".encode(),
    ]
    return b"".join(parts), f"multipart/form-data; boundary={boundary}"


def _post(lab: Lab, case) -> object:
    if case.kind == "trial":
        meta = {"arena_id": lab.arena_id, "subject_id": lab.subject_id, **case.meta}
        url = "/v1/trials"
    else:
        meta = dict(case.meta)
        url = f"/v1/arenas/{lab.arena_id}/scans"
    raw = case.raw_meta if case.raw_meta is not None else json.dumps(meta)
    if "\x00" in case.filename:
        body, ctype = _multipart(case.filename, case.content, raw)
        return lab.client.post(url, content=body, headers={"Content-Type": ctype})
    return lab.client.post(url, files={"file": (case.filename, case.content)}, data={"meta": raw})


def test_every_case_has_an_expectation() -> None:
    assert sorted(c.name for c in CASES) == sorted(EXPECTED)


def test_corpus_files_are_small() -> None:
    assert len(CASES) >= 60
    assert max(len(c.content) for c in CASES) < 64 * 1024
    assert {c.filename.rsplit(".", 1)[-1] for c in CASES} >= {
        "csv",
        "tsv",
        "c3d",
        "npy",
        "ply",
        "pcd",
        "xyz",
        "pts",
        "tif",
        "tiff",
        "las",
    }


@pytest.mark.parametrize("case", CASES, ids=[c.name for c in CASES])
def test_hostile_upload_is_4xx_and_stores_nothing(lab: Lab, case) -> None:
    before = (lab.count("trial"), lab.count("scan"), lab.count("job"))
    response = _post(lab, case)
    status, message = EXPECTED[case.name]
    assert response.status_code == status, (response.status_code, response.text)
    detail = response.json()["detail"]
    assert isinstance(detail, str) and message in detail, detail
    assert response.headers.get("x-request-id") and response.headers.get("x-frame-options")
    assert (lab.count("trial"), lab.count("scan"), lab.count("job")) == before
    assert lab.stored_files() == [], "an artifact or staging file was left behind"


def test_tiff_bomb_is_refused_from_its_tags(tmp_path: Path) -> None:
    """16384 x 16384 float32 declared in a 1 kB file: refused from the tags, before any strip is
    inflated (a decoder that trusted them would allocate 1 GiB). Wall time is not asserted
    (bench/ holds timings); the decoded size is: the reader never reaches tifffile's decoder."""
    import tifffile
    from make_corpus import tiff_bomb

    from storage.errors import ReaderError
    from storage.readers import ReaderLimits, read_scan

    path = tmp_path / "bomb.tif"
    path.write_bytes(tiff_bomb(tmp_path / "w.tif"))
    assert path.stat().st_size < 4096
    calls: list[int] = []
    original = tifffile.TiffPage.asarray

    def spy(self, *args, **kwargs):  # records any decode attempt
        calls.append(1)
        return original(self, *args, **kwargs)

    tifffile.TiffPage.asarray = spy
    try:
        with pytest.raises(ReaderError, match="max_upload_grid_cells"):
            read_scan(path, units="mm", dx=0.5)
        # A cap above the declared size lets it through to tifffile, which then finds the
        # strips do not hold the image: still refused, and only with a 4 kB strip decoded.
        with pytest.raises(ReaderError):
            read_scan(path, units="mm", dx=0.5, limits=ReaderLimits(max_grid_cells=2**30))
    finally:
        tifffile.TiffPage.asarray = original
    assert len(calls) == 1


# JSON requests that are not uploads: (method, path, body or raw text, status, message piece).
JSON_CASES = [
    ("POST", "/v1/arenas", "[" * 50_000 + "]" * 50_000, 400, "error parsing the body"),
    ("POST", "/v1/arenas", {"name": "sand\x00pit", "kind": "runway"}, 400, "control character"),
    ("POST", "/v1/arenas", {"name": "a\x1b[2J", "kind": "runway"}, 400, "control character"),
    ("POST", "/v1/arenas", {"name": "ok", "kind": "runway", "notes": "x\x00"}, 400,
     "notes contains a control character"),
    ("POST", "/v1/subjects", {"label": "M\x00", "species": "x", "marker_roles": {
        "anterior": "a", "posterior": "b", "feet": {"LF": "c", "RF": "d"}}}, 400,
     "control character"),
    ("POST", "/v1/arenas", "x" * (2 * 1024**2), 413, "Request body larger than"),
    ("POST", "/v1/arenas", '{"name": "a", "kind": "runway", "scale_band_m": [1e400, 2]}', 422,
     ""),
]  # fmt: skip


@pytest.mark.parametrize("case", JSON_CASES, ids=[f"json-{i}" for i in range(len(JSON_CASES))])
def test_hostile_json_request_is_4xx(lab: Lab, case) -> None:
    method, path, body, status, message = case
    before = lab.count("arena"), lab.count("subject")
    if isinstance(body, str):
        response = lab.client.request(
            method, path, content=body, headers={"Content-Type": "application/json"}
        )
    else:
        response = lab.client.request(method, path, json=body)
    assert response.status_code == status, response.text[:300]
    assert message in str(response.json()["detail"])
    assert (lab.count("arena"), lab.count("subject")) == before


def test_traversal_name_is_stored_by_hash_only(tmp_path: Path, rng: np.random.Generator) -> None:
    lab = Lab(tmp_path / "lab")
    content = wide_csv(rng)
    response = lab.post_trial(content, name="../../etc/passwd.csv")
    assert response.status_code == 201, response.text
    sha = response.json()["sha256"]
    store = lab.app.state.store
    assert list(store.iter_shas()) == [sha] and store.read_bytes(sha) == content
    data_dir = lab.app.state.settings.data_dir
    every_file = [p for p in tmp_path.rglob("*") if p.is_file()]
    # Besides the database files, the one object named by its hash: nothing else anywhere.
    outside = [p for p in every_file if not p.name.startswith("gaitscape.sqlite")]
    assert outside == [store.path(sha)]
    assert all(p.is_relative_to(data_dir) for p in every_file)
    download = lab.client.get(f"/v1/trials/{response.json()['id']}/file")
    assert download.content == content
    assert "/" not in download.headers["content-disposition"].split("filename", 1)[1]
