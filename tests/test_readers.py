"""Readers: round trips through outside writers, and every malformed input refused.

Writers used as references: ezc3d and the ``c3d`` package (C3D), open3d (PLY, PCD),
tifffile (TIFF), numpy.save (NPY, format per NEP 1). Byte layouts of damaged files follow
the format documents named beside each test. Unit factors are the SI definitions
(BIPM SI Brochure, 9th ed., 2019: prefixes centi 1e-2, milli 1e-3, micro 1e-6).
"""

from __future__ import annotations

import json
import struct
import warnings
from pathlib import Path

import numpy as np
import pytest
from _testing import assert_allclose

from storage.errors import BadInput, ReaderError
from storage.readers import READERS, detect_format, read_scan, read_trial, unit_to_m


def _raises(match: str, fn, *args, **kwargs) -> ReaderError:
    with pytest.raises(ReaderError, match=match) as info:
        fn(*args, **kwargs)
    assert isinstance(info.value, BadInput)
    return info.value


# --- units ------------------------------------------------------------------------------
@pytest.mark.parametrize(
    ("unit", "factor"),
    [("m", 1.0), ("cm", 1e-2), ("mm", 1e-3), ("um", 1e-6), ("\u00b5m", 1e-6), ("\u03bcm", 1e-6)],
)
def test_unit_factors_are_the_si_prefixes(unit, factor):
    # BIPM SI Brochure (2019), table 7: centi, milli, micro.
    assert unit_to_m(unit) == factor


def test_unknown_unit_is_named():
    err = _raises("furlong", unit_to_m, "furlong", file="a.csv")
    assert err.file == "a.csv"


# --- point clouds -----------------------------------------------------------------------
@pytest.fixture
def cloud(rng):
    return rng.uniform(-50, 50, size=(200, 3))


@pytest.mark.parametrize(("fmt", "ascii"), [("ply", False), ("ply", True), ("pcd", False)])
def test_point_cloud_round_trip_through_open3d(tmp_path, cloud, fmt, ascii):
    import open3d as o3d  # reference writer

    pc = o3d.geometry.PointCloud()
    pc.points = o3d.utility.Vector3dVector(cloud)
    path = tmp_path / f"c.{fmt}"
    assert o3d.io.write_point_cloud(str(path), pc, write_ascii=ascii)
    data = read_scan(path, units="mm")
    assert data.kind == "points" and data.fmt == fmt and data.units_in == "mm"
    # open3d writes binary PLY/PCD as float64 (exact) but ASCII PLY with 6 significant
    # digits, i.e. up to 5e-5 mm on coordinates of 50 mm; hence the atol for ASCII.
    assert_allclose(data.points, cloud * 1e-3, atol=1e-7 if ascii else 0.0)


def test_xyz_text_round_trip(tmp_path, cloud):
    path = tmp_path / "c.xyz"
    np.savetxt(path, cloud, fmt="%.17g")
    assert_allclose(read_scan(path, units="cm").points, cloud * 1e-2)


def test_pts_with_count_line(tmp_path, cloud):
    path = tmp_path / "c.pts"
    body = "\n".join(" ".join(f"{v:.17g}" for v in row) + " 7 1 2 3" for row in cloud)
    path.write_text(f"{len(cloud)}\n{body}\n")
    assert_allclose(read_scan(path, units="m").points, cloud)


def test_pts_claiming_more_points_than_rows(tmp_path):
    path = tmp_path / "c.pts"
    path.write_text("10\n0 0 0\n1 0 0\n0 1 0\n")
    _raises("truncated file: header announces 10 points, 3 rows", read_scan, path, units="m")


def test_xyz_non_numeric_cell_names_line_and_column(tmp_path):
    path = tmp_path / "c.xyz"
    path.write_text("0 0 0\n1 0 0\n0 abc 0\n1 1 1\n")
    err = _raises("non-numeric", read_scan, path, units="m")
    assert err.where == "line 3, column 2"


def test_xyz_ragged_row(tmp_path):
    path = tmp_path / "c.xyz"
    path.write_text("0 0 0\n1 0 0\n0 1\n1 1 1\n")
    assert _raises("ragged row", read_scan, path, units="m").where == "line 3"


def test_point_cloud_fewer_than_three_valid_points(tmp_path):
    path = tmp_path / "c.xyz"
    path.write_text("0 0 0\n1 0 0\nnan 1 1\n")
    _raises("fewer than 3 valid points", read_scan, path, units="m")


def test_point_cloud_all_identical(tmp_path):
    path = tmp_path / "c.xyz"
    path.write_text("1 2 3\n" * 10)
    _raises("identical", read_scan, path, units="m")


def test_point_cloud_needs_units(tmp_path, cloud):
    path = tmp_path / "c.xyz"
    np.savetxt(path, cloud)
    _raises("no units", read_scan, path)
    _raises("unknown unit 'inch'", read_scan, path, units="inch")


def test_empty_files_are_refused(tmp_path):
    for name in ("e.ply", "e.pcd", "e.xyz", "e.npy", "e.csv", "e.tif"):
        (tmp_path / name).write_bytes(b"")
        _raises("file is empty", read_scan, tmp_path / name, units="m", dx=1)
    for name in ("e.c3d", "e.csv", "e.npy"):
        (tmp_path / name).write_bytes(b"")
        _raises("file is empty", read_trial, tmp_path / name, units="m")


def _ply_binary(n_claimed: int, n_written: int) -> bytes:
    # PLY header grammar: Turk (1994), "The PLY polygon file format".
    header = (
        "ply\nformat binary_little_endian 1.0\n"
        f"element vertex {n_claimed}\nproperty float x\nproperty float y\nproperty float z\n"
        "end_header\n"
    ).encode()
    return header + np.arange(3 * n_written, dtype="<f4").tobytes()


def test_ply_header_claiming_gigabytes_is_refused_before_reading(tmp_path):
    path = tmp_path / "big.ply"
    path.write_bytes(_ply_binary(200_000_000, 4))  # claims 2.4 GB, holds 48 bytes
    want = r"truncated file: the header announces binary elements \(200000000 vertex\)"
    err = _raises(want, read_scan, path, units="m")
    assert "2400000000 bytes" in str(err)


def test_ply_truncated_body(tmp_path):
    path = tmp_path / "t.ply"
    path.write_bytes(_ply_binary(100, 99))
    _raises("truncated", read_scan, path, units="m")


def test_ply_wrong_magic(tmp_path):
    path = tmp_path / "w.ply"
    path.write_bytes(b"plx\n" + _ply_binary(3, 3)[4:])
    assert _raises("wrong magic", read_scan, path, units="m").where == "line 1"


def test_ply_without_end_header(tmp_path):
    path = tmp_path / "h.ply"
    path.write_bytes(b"ply\nformat ascii 1.0\nelement vertex 3\n")
    _raises("end_header", read_scan, path, units="m")


def test_pcd_header_claiming_more_points_than_the_body(tmp_path):
    # PCD v0.7 header fields: Point Cloud Library, "The PCD (Point Cloud Data) file format".
    header = (
        "VERSION 0.7\nFIELDS x y z\nSIZE 4 4 4\nTYPE F F F\nCOUNT 1 1 1\n"
        "WIDTH 100000000\nHEIGHT 1\nVIEWPOINT 0 0 0 1 0 0 0\nPOINTS 100000000\nDATA binary\n"
    )
    path = tmp_path / "big.pcd"
    path.write_bytes(header.encode() + b"\x00" * 24)
    _raises("truncated file: the header announces 100000000 points", read_scan, path, units="m")


# --- heightmaps -------------------------------------------------------------------------
@pytest.fixture
def grid(rng):
    z = rng.normal(size=(12, 17))
    z[3, 4] = np.nan
    return z


def test_npy_heightmap_round_trip(tmp_path, grid):
    path = tmp_path / "h.npy"
    np.save(path, grid)
    data = read_scan(path, units="mm", dx=0.5, dy=0.25)
    assert data.kind == "heightmap" and data.units_in == "mm"
    assert_allclose(data.z[data.valid], grid[np.isfinite(grid)] * 1e-3)
    assert not data.valid[3, 4] and data.valid.sum() == grid.size - 1
    assert_allclose([data.dx_m, data.dy_m], [0.5e-3, 0.25e-3])


def test_dy_defaults_to_dx(tmp_path, grid):
    path = tmp_path / "h.npy"
    np.save(path, grid)
    data = read_scan(path, units="um", dx=20)
    assert_allclose([data.dx_m, data.dy_m], [20e-6, 20e-6])


def test_csv_grid_round_trip(tmp_path, grid):
    path = tmp_path / "h.csv"
    np.savetxt(path, grid, delimiter=",", fmt="%.17g")
    data = read_scan(path, units="m", dx=1e-3)
    assert_allclose(data.z[data.valid], grid[np.isfinite(grid)])


def test_tiff_round_trip_through_tifffile(tmp_path, grid):
    import tifffile  # reference writer

    path = tmp_path / "h.tif"
    tifffile.imwrite(path, grid.astype(np.float32))
    data = read_scan(path, units="mm", dx=1)
    assert data.fmt == "tiff"
    expected = grid.astype(np.float32).astype(np.float64) * 1e-3
    assert_allclose(data.z[data.valid], expected[np.isfinite(expected)])


def test_heightmap_without_spacing(tmp_path, grid):
    path = tmp_path / "h.npy"
    np.save(path, grid)
    _raises("no grid spacing", read_scan, path, units="mm")
    _raises("dx must be a finite number > 0", read_scan, path, units="mm", dx=-1)


def test_npy_header_claiming_gigabytes(tmp_path):
    # .npy v1 layout (NEP 1): magic, version, little-endian header length, dict header.
    header = "{'descr': '<f8', 'fortran_order': False, 'shape': (20000, 20000), }"
    header = header.ljust(118) + "\n"
    path = tmp_path / "big.npy"
    path.write_bytes(b"\x93NUMPY\x01\x00" + struct.pack("<H", len(header)) + header.encode()
                     + b"\x00" * 64)  # fmt: skip
    _raises("3200000000 bytes", read_scan, path, units="m", dx=1)


def test_npy_object_dtype_refused_without_unpickling(tmp_path):
    header = "{'descr': '|O', 'fortran_order': False, 'shape': (2, 2), }".ljust(118) + "\n"
    path = tmp_path / "obj.npy"
    path.write_bytes(b"\x93NUMPY\x01\x00" + struct.pack("<H", len(header)) + header.encode()
                     + b"\x80\x04" + b"\x00" * 40)  # fmt: skip
    _raises("dtype must be numeric", read_scan, path, units="m", dx=1)


def test_npy_wrong_magic_and_truncation(tmp_path, grid):
    path = tmp_path / "h.npy"
    np.save(path, grid)
    raw = path.read_bytes()
    path.write_bytes(b"\x00" + raw[1:])
    _raises("wrong magic", read_scan, path, units="m", dx=1)
    path.write_bytes(raw[:-8])
    _raises("truncated", read_scan, path, units="m", dx=1)


def test_csv_grid_ragged_and_non_numeric(tmp_path):
    path = tmp_path / "h.csv"
    path.write_text("1,2,3\n4,5,6\n7,8\n")
    assert _raises("ragged row", read_scan, path, units="m", dx=1).where == "line 3"
    path.write_text("1,2,3\n4,x5,6\n7,8,9\n")
    assert _raises("non-numeric", read_scan, path, units="m", dx=1).where == "line 2, column 2"


def test_tiff_wrong_magic(tmp_path):
    path = tmp_path / "h.tif"
    path.write_bytes(b"PK\x03\x04" + b"\x00" * 100)
    _raises("wrong magic", read_scan, path, units="m", dx=1)


# --- trials: C3D ------------------------------------------------------------------------
def _write_c3d_ezc3d(path: Path, markers_mm: np.ndarray, names, *, rate=300.0, units="mm"):
    import ezc3d  # reference writer

    c = ezc3d.c3d()
    c["parameters"]["POINT"]["RATE"]["value"] = [rate]
    c["parameters"]["POINT"]["LABELS"]["value"] = tuple(names)
    pts = np.ones((4, markers_mm.shape[1], markers_mm.shape[0]))
    pts[:3] = np.transpose(markers_mm, (2, 1, 0))
    c["data"]["points"] = pts
    c.add_parameter("POINT", "UNITS", units)
    c.write(str(path))


@pytest.fixture
def walk(rng):
    return rng.uniform(-100, 100, size=(30, 4, 3))


def test_c3d_round_trip_through_ezc3d_writer(tmp_path, walk):
    path = tmp_path / "t.c3d"
    _write_c3d_ezc3d(path, walk, ["nose", "tail", "LF", "RF"], rate=250.0)
    data = read_trial(path)
    assert data.marker_names == ("nose", "tail", "LF", "RF")
    assert data.frame_rate_hz == 250.0 and data.units_in == "mm"
    # C3D float storage is float32 (C3D User Guide, 3D point data section).
    assert_allclose(data.markers, walk.astype(np.float32) * 1e-3, rtol=1e-6)
    assert_allclose(data.time_s[:3], [0, 1 / 250, 2 / 250], atol=1e-15)


def test_c3d_residual_below_zero_is_a_gap(tmp_path, walk):
    import c3d  # reference writer; residual -1 marks an invalid sample (C3D User Guide)

    writer = c3d.Writer(point_rate=300.0, point_units="mm  ")
    for f in range(walk.shape[0]):
        points = np.zeros((walk.shape[1], 5), dtype=np.float32)
        points[:, :3] = walk[f]
        if f == 7:
            points[2, 3] = -1.0
        writer.add_frames([(points, np.zeros((0, 0), dtype=np.float32))])
    writer.set_point_labels(["a", "b", "c", "d"])
    path = tmp_path / "gap.c3d"
    with open(path, "wb") as fh, warnings.catch_warnings():
        warnings.simplefilter("ignore", UserWarning)  # the writer notes "no analog data"
        writer.write(fh)
    data = read_trial(path)
    assert data.frame_rate_hz == 300.0 and data.units_in == "mm"
    assert np.isnan(data.markers[7, 2]).all()
    assert np.isfinite(data.markers[6, 2]).all() and np.isfinite(data.markers[7, 1]).all()
    assert_allclose(data.markers[0, 0], walk[0, 0].astype(np.float32) * 1e-3, rtol=1e-6)


def _c3d_bytes(tmp_path, walk) -> bytes:
    path = tmp_path / "ok.c3d"
    _write_c3d_ezc3d(path, walk, ["a", "b", "c", "d"])
    return path.read_bytes()


def test_c3d_wrong_magic(tmp_path, walk):
    raw = bytearray(_c3d_bytes(tmp_path, walk))
    raw[1] = 0x51  # C3D User Guide: header byte 2 is always 0x50
    (tmp_path / "w.c3d").write_bytes(raw)
    _raises("wrong magic", read_trial, tmp_path / "w.c3d")


def test_c3d_parameter_pointer_outside_file(tmp_path, walk):
    raw = bytearray(_c3d_bytes(tmp_path, walk))
    raw[0] = 200  # parameter section would start at byte 101888
    (tmp_path / "p.c3d").write_bytes(raw)
    err = _raises("parameter block pointer 200", read_trial, tmp_path / "p.c3d")
    assert err.where == "header word 1"


def test_c3d_header_claiming_huge_frame_count(tmp_path, walk):
    raw = bytearray(_c3d_bytes(tmp_path, walk))
    raw[8:10] = struct.pack("<H", 65535)  # header word 5, last frame
    (tmp_path / "f.c3d").write_bytes(raw)
    _raises("truncated file: the header announces 65535 frames", read_trial, tmp_path / "f.c3d")


def test_c3d_truncated_body_names_the_frame(tmp_path, walk):
    raw = _c3d_bytes(tmp_path, walk)
    (tmp_path / "t.c3d").write_bytes(raw[: len(raw) - 200])
    err = _raises("truncated", read_trial, tmp_path / "t.c3d")
    assert err.where.startswith("frame ")


def test_c3d_bad_frame_range_and_scale(tmp_path, walk):
    raw = bytearray(_c3d_bytes(tmp_path, walk))
    bad = bytearray(raw)
    bad[6:8] = struct.pack("<H", 20)
    bad[8:10] = struct.pack("<H", 10)
    (tmp_path / "r.c3d").write_bytes(bad)
    _raises("frame range 20..10", read_trial, tmp_path / "r.c3d")
    bad = bytearray(raw)
    bad[12:16] = struct.pack("<f", 0.0)
    (tmp_path / "s.c3d").write_bytes(bad)
    _raises("scale factor", read_trial, tmp_path / "s.c3d")


def test_c3d_header_only(tmp_path, walk):
    (tmp_path / "h.c3d").write_bytes(_c3d_bytes(tmp_path, walk)[:300])
    _raises("C3D header needs 512 bytes", read_trial, tmp_path / "h.c3d")


def test_c3d_duplicate_labels(tmp_path, walk):
    path = tmp_path / "d.c3d"
    _write_c3d_ezc3d(path, walk, ["a", "b", "a", "d"])
    _raises("duplicate marker name 'a'", read_trial, path)


def test_c3d_unknown_unit(tmp_path, walk):
    path = tmp_path / "u.c3d"
    _write_c3d_ezc3d(path, walk, ["a", "b", "c", "d"], units="in")
    _raises("unknown unit 'in'", read_trial, path)


# --- trials: CSV/TSV --------------------------------------------------------------------
def _wide_csv(walk, *, sep=",", time=True):
    names = [f"m{j}" for j in range(walk.shape[1])]
    head = ["time" if time else "frame"] + [f"{n}_{a}" for n in names for a in "xyz"]
    lines = [sep.join(head)]
    for f in range(walk.shape[0]):
        clock = f / 200 if time else f + 1
        lines.append(sep.join([f"{clock:.17g}"] + [f"{v:.17g}" for v in walk[f].ravel()]))
    return "\n".join(lines) + "\n", names


def test_wide_csv_round_trip(tmp_path, walk):
    text, names = _wide_csv(walk)
    path = tmp_path / "t.csv"
    path.write_text(text)
    data = read_trial(path, units="mm")
    assert data.marker_names == tuple(names)
    assert_allclose(data.frame_rate_hz, 200.0, rtol=1e-9)  # derived from the time column
    assert_allclose(data.markers, walk * 1e-3)


def test_wide_tsv_with_frame_column_needs_a_rate(tmp_path, walk):
    text, _ = _wide_csv(walk, sep="\t", time=False)
    path = tmp_path / "t.tsv"
    path.write_text(text)
    _raises("frame rate missing", read_trial, path, units="m")
    _raises("frame_rate_hz must be a finite number > 0", read_trial, path, units="m",
            frame_rate_hz=0)  # fmt: skip
    data = read_trial(path, units="m", frame_rate_hz=300)
    assert_allclose(data.time_s[1], 1 / 300)
    assert_allclose(data.markers, walk)


def test_long_csv_round_trip_with_a_gap(tmp_path, walk):
    lines = ["time,marker,x,y,z"]
    for f in range(walk.shape[0]):
        for j in range(walk.shape[1]):
            if (f, j) == (5, 1):
                continue  # missing sample -> NaN gap
            lines.append(f"{f / 100!r},m{j}," + ",".join(f"{v:.17g}" for v in walk[f, j]))
    path = tmp_path / "long.csv"
    path.write_text("\n".join(lines))
    data = read_trial(path, units="cm")
    assert data.marker_names == ("m0", "m1", "m2", "m3")
    assert np.isnan(data.markers[5, 1]).all()
    mask = np.ones(walk.shape[:2], bool)
    mask[5, 1] = False
    assert_allclose(data.markers[mask], walk[mask] * 1e-2)
    assert_allclose(data.frame_rate_hz, 100.0, rtol=1e-9)


def test_csv_non_numeric_cell_names_line_and_column(tmp_path, walk):
    text, _ = _wide_csv(walk)
    lines = text.splitlines()
    cells = lines[4].split(",")
    cells[3] = "oops"
    lines[4] = ",".join(cells)
    path = tmp_path / "t.csv"
    path.write_text("\n".join(lines))
    err = _raises("non-numeric value 'oops'", read_trial, path, units="mm")
    assert err.where == "line 5, column 4 (m0_z)"


def test_csv_ragged_row(tmp_path, walk):
    text, _ = _wide_csv(walk)
    lines = text.splitlines()
    lines[6] = lines[6].rsplit(",", 1)[0]
    path = tmp_path / "t.csv"
    path.write_text("\n".join(lines))
    assert _raises("ragged row", read_trial, path, units="mm").where == "line 7"


def test_csv_non_monotonic_time_names_the_line(tmp_path, walk):
    text, _ = _wide_csv(walk)
    lines = text.splitlines()
    lines[10], lines[11] = lines[11], lines[10]
    path = tmp_path / "t.csv"
    path.write_text("\n".join(lines))
    assert _raises("time is not increasing", read_trial, path, units="mm").where == "line 12"


def test_long_csv_time_going_back_for_a_marker(tmp_path):
    path = tmp_path / "l.csv"
    path.write_text("time,marker,x,y,z\n0,a,1,2,3\n0.1,a,1,2,3\n0.05,a,1,2,3\n")
    assert _raises("goes back for marker 'a'", read_trial, path, units="m").where == "line 4"


def test_csv_nan_only_marker(tmp_path, walk):
    w = walk.copy()
    w[:, 2, :] = np.nan
    text, _ = _wide_csv(w)
    path = tmp_path / "t.csv"
    path.write_text(text)
    _raises("marker 'm2' has no valid sample", read_trial, path, units="mm")


def test_csv_duplicate_marker_columns(tmp_path):
    path = tmp_path / "t.csv"
    path.write_text("time,a_x,a_y,a_z,a_x\n0,1,2,3,4\n")
    _raises("duplicate column 'a_x'", read_trial, path, units="mm")


def test_csv_bad_columns(tmp_path):
    path = tmp_path / "t.csv"
    path.write_text("t,a_x,a_y,a_z\n0,1,2,3\n0.1,1,2,3\n0.2,1,2,3\n")
    assert _raises("first column must be 'time' or 'frame'", read_trial, path,
                   units="m").where == "line 1, column 1"  # fmt: skip
    path.write_text("time,a_x,a_y\n0,1,2\n0.1,1,2\n0.2,1,2\n")
    _raises("lacks column a_z", read_trial, path, units="m")


def test_csv_fewer_than_three_frames(tmp_path):
    path = tmp_path / "t.csv"
    path.write_text("time,a_x,a_y,a_z\n0,1,2,3\n0.1,1,2,3\n")
    _raises("fewer than 3 frames", read_trial, path, units="m")


def test_csv_needs_units(tmp_path, walk):
    text, _ = _wide_csv(walk)
    path = tmp_path / "t.csv"
    path.write_text(text)
    _raises("no units", read_trial, path)
    _raises("unknown unit 'yd'", read_trial, path, units="yd")


# --- trials: NPY + sidecar --------------------------------------------------------------
def test_npy_trial_with_sidecar(tmp_path, walk):
    path = tmp_path / "t.npy"
    np.save(path, walk)
    side = {"marker_names": ["a", "b", "c", "d"], "frame_rate_hz": 300, "units": "mm"}
    (tmp_path / "t.npy.json").write_text(json.dumps(side))
    data = read_trial(path)
    assert data.marker_names == ("a", "b", "c", "d") and data.frame_rate_hz == 300
    assert_allclose(data.markers, walk * 1e-3)


def test_npy_trial_sidecar_problems(tmp_path, walk):
    path = tmp_path / "t.npy"
    np.save(path, walk)
    _raises("marker_names", read_trial, path, units="mm", frame_rate_hz=300)
    _raises("3 marker_names for 4 markers", read_trial, path, units="mm",
            frame_rate_hz=300, marker_names=["a", "b", "c"])  # fmt: skip
    _raises("duplicate marker name 'a'", read_trial, path, units="mm", frame_rate_hz=300,
            marker_names=["a", "b", "a", "d"])  # fmt: skip
    _raises("frame rate missing", read_trial, path, units="mm", marker_names=list("abcd"))
    np.save(path, walk[:, :, :2])
    _raises(r"expected an array \(frames, markers, 3\)", read_trial, path, units="mm",
            frame_rate_hz=300, marker_names=list("abcd"))  # fmt: skip


# --- registry ---------------------------------------------------------------------------
def test_registry_and_detection(tmp_path):
    assert detect_format("a/b/scan.PLY", kind="scan") == "ply"
    assert detect_format("x.tif", kind="scan") == "tiff"
    assert detect_format("walk.c3d", kind="trial") == "c3d"
    _raises("unknown trial format .ply", detect_format, "x.ply", kind="trial")
    for kind, table in READERS.items():
        for fmt, module in table.items():
            assert fmt in module.FORMATS, (kind, fmt)
            assert callable(module.can_open) and callable(module.read)
    path = tmp_path / "ok.npy"
    np.save(path, np.zeros((2, 2)))
    assert READERS["scan"]["npy"].can_open(path)
    fake = tmp_path / "fake.tif"
    fake.write_bytes(path.read_bytes())
    assert not READERS["scan"]["tiff"].can_open(fake)  # TIFF magic (TIFF 6.0, section 2)
