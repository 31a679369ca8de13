"""The demo study: arenas, subjects and files, generated with a fixed seed.

An invented study of a small quadruped ("demo vole", not a real species
record) walking seven arena trays from a belt treadmill to a boulder field, with
amplitude and structure set apart (low and tall ripples, low and tall scree).
Every number here is invented for the demo; none comes from an experiment.
"""

from __future__ import annotations

import json
from collections.abc import Callable
from dataclasses import asdict, dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from demo_arena.files import (
    write_c3d,
    write_csv_wide,
    write_heightmap_npy,
    write_ply,
    write_sidecar,
)
from demo_arena.ground import TRAYS, TraySpec, make_tray
from demo_arena.walker import FEET, SubjectSpec, walk_over

__all__ = ["SUBJECTS", "DemoFile", "Scenario", "build_scenario", "scan_points"]

SUBJECTS: tuple[SubjectSpec, ...] = (
    SubjectSpec("vole-01", 0.085, 0.045, 0.32, 11),
    SubjectSpec("vole-02", 0.078, 0.038, 0.28, 12),
    SubjectSpec("vole-03", 0.092, 0.052, 0.36, 13),
    SubjectSpec("vole-04", 0.081, 0.041, 0.30, 14),
)
# Foot size to stride length of the demo animal, in metres (invented).
SCALE_BAND_M = (0.005, 0.08)
DX_M = 0.001
RUNWAY_M = (1.2, 0.25)  # length, width of every tray (invented)


@dataclass(frozen=True)
class DemoFile:
    """One generated file and the metadata an acquisition PC would send with it."""

    path: str
    kind: str  # "scan" or "trial"
    arena: str
    subject: str | None
    meta: dict[str, Any]


@dataclass
class Scenario:
    """Everything the demo uploads: arena and subject records, then files."""

    root: str
    arenas: list[dict[str, Any]] = field(default_factory=list)
    subjects: list[dict[str, Any]] = field(default_factory=list)
    files: list[DemoFile] = field(default_factory=list)

    def to_json(self) -> str:
        return json.dumps(asdict(self), indent=2)


def scan_points(z: np.ndarray, dx_m: float, *, n_points: int, seed: int) -> np.ndarray:
    """A noisy, slightly tilted 'scan' of heightmap ``z``: (n, 3) points in metres.

    Points are sampled uniformly with bilinear heights, 0.2 mm noise (common
    practice resolution), 0.5 % outliers and a 1 degree scanner tilt.
    """
    rng = np.random.default_rng(seed)
    ny, nx = z.shape
    x = rng.uniform(0, (nx - 1) * dx_m, n_points)
    y = rng.uniform(0, (ny - 1) * dx_m, n_points)
    fi, fj = y / dx_m, x / dx_m
    i0, j0 = np.floor(fi).astype(int), np.floor(fj).astype(int)
    i1, j1 = np.minimum(i0 + 1, ny - 1), np.minimum(j0 + 1, nx - 1)
    wy, wx = fi - i0, fj - j0
    h = (
        z[i0, j0] * (1 - wy) * (1 - wx)
        + z[i1, j0] * wy * (1 - wx)
        + z[i0, j1] * (1 - wy) * wx
        + z[i1, j1] * wy * wx
    )
    pts = np.column_stack([x, y, h + rng.normal(0, 0.0002, n_points)])
    bad = rng.random(n_points) < 0.005
    pts[bad, 2] += rng.choice([-1, 1], bad.sum()) * rng.uniform(0.01, 0.05, bad.sum())
    tilt = np.deg2rad(1.0)
    rot = np.array([[1, 0, 0], [0, np.cos(tilt), -np.sin(tilt)], [0, np.sin(tilt), np.cos(tilt)]])
    return pts @ rot.T + np.array([0.0, 0.0, 0.35])  # scanner frame: tray 0.35 m below


def _roles() -> dict[str, Any]:
    return {"anterior": "snout", "posterior": "tailbase", "feet": {f: f"foot_{f}" for f in FEET}}


def _write_scans(
    root: Path, spec: TraySpec, z: np.ndarray, n_points: int, seed: int, with_heightmap: bool
) -> list[DemoFile]:
    files = []
    ply = root / f"{spec.key}.ply"
    write_ply(ply, scan_points(z, DX_M, n_points=n_points, seed=seed))
    meta = {"kind": "scan", "arena": spec.key, "units": "m"}
    write_sidecar(ply, meta)
    files.append(DemoFile(str(ply), "scan", spec.key, None, meta))
    if with_heightmap:
        npy = root / f"{spec.key}-heightmap.npy"
        write_heightmap_npy(npy, z)
        hmeta = {"kind": "scan", "arena": spec.key, "units": "m", "dx": DX_M, "dy": DX_M}
        write_sidecar(npy, hmeta)
        files.append(DemoFile(str(npy), "scan", spec.key, None, hmeta))
    return files


def build_scenario(
    out_dir: str | Path,
    *,
    quick: bool = False,
    seed: int = 2026,
    on_file: Callable[[int, int], None] | None = None,
) -> Scenario:
    """Generate the demo study under ``out_dir`` and return its manifest.

    ``on_file(done, total)`` is called after each file is written (for a progress bar).

    ``quick`` keeps 3 subjects and one pass each per arena (for a demo of about a
    minute); the full study has 4 subjects and two passes per arena. Both scan every
    tray with 600,000 points (float32 PLY, 7.2 MB).
    """
    root = Path(out_dir)
    (root / "scans").mkdir(parents=True, exist_ok=True)
    (root / "trials").mkdir(parents=True, exist_ok=True)
    scenario = Scenario(root=str(root))
    subjects = SUBJECTS[:3] if quick else SUBJECTS
    # Scans sample 2 points per mm^2 (600,000 over the 1.2 m x 0.25 m tray; invented, but
    # what a lab's structured-light or laser-line scanner gives at sub-millimetre spacing):
    # a median neighbour distance of 0.33 mm, so the default cell (3 x that) is 1.0 mm,
    # the grid the ground was made on (denser clouds were gridded finer than the ground
    # has detail, at twice the cost). Overground trials are one pass along the 1.2 m
    # runway, treadmill trials a fixed stretch.
    n_trials, belt_s = (1, 5.0) if quick else (2, 8.0)
    n_points = 600_000
    for s in subjects:
        scenario.subjects.append(
            {
                "label": s.label,
                "species": "demo vole (invented)",
                "body_length_m": s.body_length_m,
                "mass_kg": s.mass_kg,
                "marker_roles": _roles(),
            }
        )
    trial_no = 0
    total = sum(1 + (a in (1, 4)) for a in range(len(TRAYS)))
    total += len(TRAYS) * len(subjects) * n_trials

    def written() -> None:
        if on_file is not None:
            on_file(len(scenario.files), total)

    for a, spec in enumerate(TRAYS):
        scenario.arenas.append(
            {
                "name": spec.key,
                "kind": spec.kind,
                "scale_band_m": list(SCALE_BAND_M),
                "notes": f"{spec.name}. {spec.notes}",
            }
        )
        z = make_tray(
            spec, length_m=RUNWAY_M[0], width_m=RUNWAY_M[1], dx_m=DX_M, seed=seed + 100 * a
        )
        scenario.files += _write_scans(
            root / "scans", spec, z, n_points, seed + 100 * a + 1, with_heightmap=a in (1, 4)
        )
        written()
        belt = 0.25 if spec.kind == "treadmill" else None
        for s in subjects:
            for t in range(n_trials):
                trial_no += 1
                rec = walk_over(
                    z,
                    DX_M,
                    s,
                    duration_s=belt_s if belt else 20.0,
                    treadmill_speed_m_s=belt,
                    stop_at_x_m=RUNWAY_M[0] - 0.05,
                    long_gap=trial_no == 5,
                    seed=seed * 7 + trial_no,
                )
                stem = root / "trials" / f"{spec.key}_{s.label}_{t + 1:02d}"
                meta = {
                    "kind": "trial",
                    "arena": spec.key,
                    "subject": s.label,
                    "units": "mm",
                    "condition": "treadmill" if belt else "overground",
                    "frame_rate_hz": rec.frame_rate_hz,
                }
                if belt:
                    meta["treadmill_speed_m_s"] = belt
                # Alternate formats the way a lab's two rigs might.
                if trial_no % 2:
                    path = stem.with_suffix(".c3d")
                    write_c3d(path, rec.markers, rec.marker_names, rec.frame_rate_hz)
                else:
                    path = stem.with_suffix(".csv")
                    write_csv_wide(path, rec.markers, rec.marker_names, rec.frame_rate_hz)
                write_sidecar(path, meta)
                scenario.files.append(DemoFile(str(path), "trial", spec.key, s.label, meta))
                written()
    (root / "scenario.json").write_text(scenario.to_json())
    return scenario
