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


# --- differential: every accepted file equals an independent parser's reading -------------------
# Each file below is written by a reference writer (or by hand from the format document), read
# by our reader and by a parser that shares no code with it, and the arrays must be identical
# (float32 sources compared after the same float32 -> float64 widening). PLY: Turk 1994; PCD:
# PCL file format v0.7; LAS: ASPRS LAS 1.2 specification (public header block, point data
# record format 3); TIFF 6.0; NPY: NEP 1; C3D: C3D User Guide (Motion Lab Systems 2008).
def _o3d_points(path: Path) -> np.ndarray:
    import open3d as o3d

    cloud = o3d.io.read_point_cloud(str(path), remove_nan_points=False,
                                    remove_infinite_points=False)  # fmt: skip
    return np.asarray(cloud.points, dtype=np.float64)


def _ply_file(path: Path, pts: np.ndarray, encoding: str, *, faces: bool = False,
              intensity_first: bool = False) -> None:  # fmt: skip
    n = len(pts)
    props = ["property double x", "property double y", "property double z"]
    if intensity_first:
        props = ["property uchar intensity", *props]
    head = ["ply", f"format {encoding} 1.0", f"element vertex {n}", *props]
    if faces:
        head += ["element face 2", "property list uchar int vertex_indices"]
    head.append("end_header")
    out = ("\n".join(head) + "\n").encode()
    if encoding == "ascii":
        lines = [" ".join(([str(i % 250)] if intensity_first else []) + [repr(float(v)) for v in p])
                 for i, p in enumerate(pts)]  # fmt: skip
        if faces:
            lines += ["3 0 1 2", "3 1 2 3"]
        out += ("\n".join(lines) + "\n").encode()
    else:
        end = "<" if encoding == "binary_little_endian" else ">"
        fields = ([("i", "u1")] if intensity_first else []) + [(a, end + "f8") for a in "xyz"]
        rec = np.zeros(n, dtype=fields)
        for j, a in enumerate("xyz"):
            rec[a] = pts[:, j]
        if intensity_first:
            rec["i"] = np.arange(n) % 250
        out += rec.tobytes()
        if faces:
            face = np.dtype([("n", "u1"), ("v", end + "i4", (3,))])
            out += np.array([(3, (0, 1, 2)), (3, (1, 2, 3))], dtype=face).tobytes()
    path.write_bytes(out)


def _pcd_file(path: Path, pts: np.ndarray, data: str) -> None:
    n = len(pts)
    head = (f"# .PCD v0.7\nVERSION 0.7\nFIELDS x y z rgb\nSIZE 4 4 4 4\nTYPE F F F U\n"
            f"COUNT 1 1 1 1\nWIDTH {n}\nHEIGHT 1\nVIEWPOINT 0 0 0 1 0 0 0\nPOINTS {n}\n"
            f"DATA {data}\n")  # fmt: skip
    p32 = pts.astype(np.float32)
    if data == "ascii":
        body = "".join(f"{x!r} {y!r} {z!r} {i}\n" for i, (x, y, z) in
                       enumerate(p32.astype(float).tolist()))  # fmt: skip
        path.write_bytes(head.encode() + body.encode())
    else:
        rec = np.zeros(n, dtype=[("x", "<f4"), ("y", "<f4"), ("z", "<f4"), ("c", "<u4")])
        rec["x"], rec["y"], rec["z"], rec["c"] = p32[:, 0], p32[:, 1], p32[:, 2], 7
        path.write_bytes(head.encode() + rec.tobytes())


def _las_spec_points(path: Path) -> tuple[np.ndarray, np.ndarray]:
    """x, y, z and classification straight from the bytes (ASPRS LAS 1.2, section 2)."""
    raw = path.read_bytes()
    offset = struct.unpack_from("<I", raw, 96)[0]  # offset to point data
    fmt, rec_len, n = struct.unpack_from("<BHI", raw, 104)
    scale = np.array(struct.unpack_from("<3d", raw, 131))
    shift = np.array(struct.unpack_from("<3d", raw, 155))
    assert fmt in (0, 1, 2, 3)
    rec = np.frombuffer(raw, dtype=np.uint8, count=n * rec_len, offset=offset).reshape(n, rec_len)
    xyz = rec[:, :12].copy().view("<i4").astype(np.float64) * scale + shift
    classes = rec[:, 15] & 0x1F  # format 0-3: classification in the low five bits of byte 15
    return xyz, classes


def _write_las(path: Path, pts: np.ndarray, classes: np.ndarray) -> None:
    import laspy

    las = laspy.create(point_format=3, file_version="1.2")
    las.header.scales = [0.001, 0.001, 0.001]
    las.header.offsets = [1000.0, 2000.0, 10.0]
    las.x, las.y, las.z = pts[:, 0] + 1000, pts[:, 1] + 2000, pts[:, 2] + 10
    las.classification = classes
    las.write(str(path))


@pytest.fixture
def terrain(rng):
    pts = np.column_stack(
        [rng.uniform(0, 5, 300), rng.uniform(0, 4, 300), rng.normal(0, 0.05, 300)]
    )
    return np.round(pts, 3)


@pytest.mark.parametrize(
    "variant",
    ["ascii", "binary_little_endian", "binary_big_endian", "ascii+faces", "binary+faces",
     "ascii+intensity", "binary+intensity"],
)  # fmt: skip
def test_differential_ply_against_open3d(tmp_path, terrain, variant):
    encoding = {"ascii": "ascii", "binary": "binary_little_endian"}.get(
        variant.split("+")[0], variant.split("+")[0]
    )
    path = tmp_path / "c.ply"
    _ply_file(path, terrain, encoding, faces="faces" in variant,
              intensity_first="intensity" in variant)  # fmt: skip
    ours = read_scan(path, units="m").points
    np.testing.assert_array_equal(ours, _o3d_points(path))
    np.testing.assert_array_equal(ours, terrain)


@pytest.mark.parametrize("data", ["ascii", "binary"])
def test_differential_pcd_against_open3d(tmp_path, terrain, data):
    path = tmp_path / "c.pcd"
    _pcd_file(path, terrain, data)
    ours = read_scan(path, units="m").points
    np.testing.assert_array_equal(ours, _o3d_points(path))
    np.testing.assert_array_equal(ours, terrain.astype(np.float32).astype(np.float64))


def test_differential_xyz_against_loadtxt(tmp_path, terrain):
    path = tmp_path / "c.xyz"
    path.write_text("# x y z\n" + "".join(f"{x!r},{y!r},{z!r}\n" for x, y, z in terrain.tolist()))
    ours = read_scan(path, units="m").points
    np.testing.assert_array_equal(ours, np.loadtxt(path, delimiter=",", comments="#"))


def test_differential_heightmaps(tmp_path, rng):
    from PIL import Image

    z = rng.normal(0, 1, (20, 30)).astype(np.float32)
    tif = tmp_path / "z.tif"
    import tifffile

    tifffile.imwrite(tif, z, compression="zlib")
    ours = read_scan(tif, units="m", dx=0.01).z
    np.testing.assert_array_equal(ours, np.asarray(Image.open(tif), dtype=np.float64))
    u16 = (rng.integers(0, 60000, (16, 12))).astype(np.uint16)
    tifffile.imwrite(tmp_path / "u.tif", u16)
    ours = read_scan(tmp_path / "u.tif", units="mm", dx=1).z
    np.testing.assert_array_equal(ours, np.asarray(Image.open(tmp_path / "u.tif"), float) * 1e-3)
    npy = tmp_path / "z.npy"
    np.save(npy, z.astype(np.float64), allow_pickle=False)
    raw = npy.read_bytes()
    header_len = struct.unpack_from("<H", raw, 8)[0]  # NEP 1: version 1.0 header length
    manual = np.frombuffer(raw, dtype="<f8", offset=10 + header_len).reshape(20, 30)
    np.testing.assert_array_equal(read_scan(npy, units="m", dx=0.01).z, manual)
    csv = tmp_path / "g.csv"
    csv.write_text("\n".join(",".join(repr(float(v)) for v in row) for row in z.tolist()))
    np.testing.assert_array_equal(
        read_scan(csv, units="m", dx=0.01).z, np.loadtxt(csv, delimiter=",")
    )


def test_differential_c3d_against_the_c3d_package(tmp_path, walk):
    import c3d

    path = tmp_path / "t.c3d"
    _write_c3d_ezc3d(path, walk, ["nose", "tail", "LF", "RF"], rate=250.0)
    ours = read_trial(path)
    with open(path, "rb") as fh, warnings.catch_warnings():
        warnings.simplefilter("ignore", UserWarning)  # the reader notes "no analog data"
        reader = c3d.Reader(fh)
        frames = np.array([pts[:, :3] for _, pts, _ in reader.read_frames()])
    np.testing.assert_array_equal(ours.markers, frames.astype(np.float64) * 1e-3)


def test_differential_csv_trial_against_csv_module(tmp_path, walk):
    import csv

    names = ["nose", "tail", "LF", "RF"]
    path = tmp_path / "w.csv"
    header = ["time"] + [f"{m}_{a}" for m in names for a in "xyz"]
    rows = [[repr(i / 120)] + [repr(float(v)) for v in walk[i].ravel()] for i in range(len(walk))]
    path.write_text("\n".join(",".join(r) for r in [header, *rows]) + "\n")
    with open(path, newline="") as fh:
        table = np.array([[float(c) for c in row] for row in list(csv.reader(fh))[1:]])
    ours = read_trial(path, units="m")
    np.testing.assert_array_equal(ours.markers.reshape(len(walk), -1), table[:, 1:])
    assert ours.frame_rate_hz == pytest.approx(120.0)


def test_differential_las_and_laz_against_the_specification(tmp_path, terrain):
    classes = np.where(np.arange(len(terrain)) % 3 == 0, 1, 2).astype(np.uint8)  # 1 unclassified
    las = tmp_path / "t.las"
    _write_las(las, terrain, classes)
    xyz, cls = _las_spec_points(las)
    every = read_scan(las, units="m", ground_only=False)
    np.testing.assert_array_equal(every.points, xyz)
    ground = read_scan(las, units="m")  # default: class 2 only, when the file has it
    np.testing.assert_array_equal(ground.points, xyz[cls == 2])
    assert ground.meta["ground_class_used"] and ground.meta["n_ground_points"] == (cls == 2).sum()
    import laspy

    laz = tmp_path / "t.laz"
    laspy.read(str(las)).write(str(laz))  # LAZ through lazrs; compressed body, same points
    assert laz.stat().st_size < las.stat().st_size
    np.testing.assert_array_equal(read_scan(laz, units="m").points, xyz[cls == 2])


def test_las_without_ground_class_keeps_every_point_and_says_so(tmp_path, terrain):
    las = tmp_path / "t.las"
    _write_las(las, terrain, np.ones(len(terrain), np.uint8))
    data = read_scan(las, units="us_ft")
    assert len(data.points) == len(terrain) and not data.meta["ground_class_used"]
    assert "no point is classified ground" in data.meta["note"]
    xyz, _ = _las_spec_points(las)
    np.testing.assert_allclose(data.points, xyz * 1200 / 3937, rtol=1e-15)


@pytest.mark.parametrize(("unit", "factor"), [("ft", 0.3048), ("us_ft", 1200 / 3937)])
def test_feet(unit, factor):
    # International foot: exactly 0.3048 m (1959 agreement). US survey foot: 1200/3937 m
    # (US Metric Law 1866 / NIST; common in US state-plane lidar).
    assert unit_to_m(unit) == factor


# --- caps and degenerate input -----------------------------------------------------------
def test_caps_are_checked_before_reading(tmp_path, terrain):
    from storage.readers import ReaderLimits

    path = tmp_path / "c.ply"
    _ply_file(path, terrain, "binary_little_endian")
    _raises("vertex count: 300 exceeds this server's cap of 299 .setting max_points.",
            read_scan, path, units="m", limits=ReaderLimits(max_points=299))  # fmt: skip
    grid = tmp_path / "g.npy"
    np.save(grid, np.arange(12.0).reshape(3, 4), allow_pickle=False)
    _raises(
        "max_upload_grid_cells",
        read_scan,
        grid,
        units="m",
        dx=1,
        limits=ReaderLimits(max_grid_cells=11),
    )
    trial = tmp_path / "t.npy"
    np.save(trial, np.random.default_rng(0).normal(size=(50, 4, 3)), allow_pickle=False)
    _raises("frame count: 50 exceeds", read_trial, trial, units="m", frame_rate_hz=100,
            marker_names=list("abcd"), limits=ReaderLimits(max_frames=49))  # fmt: skip
    _raises("50 frames x 4 markers", read_trial, trial, units="m", frame_rate_hz=100,
            marker_names=list("abcd"), limits=ReaderLimits(max_marker_samples=199))  # fmt: skip


def test_nan_points_are_dropped_and_counted(tmp_path, terrain):
    pts = terrain.copy()
    pts[[3, 10]] = np.nan
    path = tmp_path / "c.ply"
    _ply_file(path, pts, "binary_little_endian")
    data = read_scan(path, units="m")
    assert data.meta["n_points_dropped_nan"] == 2 and len(data.points) == len(pts) - 2
