"""Benchmark: 10 million terrain points -> 1024 x 1024 heightmap.

Synthetic rough surface (sum of random Gaussian bumps over a 0.5 m tray,
gentle tilt), 0.2 mm noise (common practice scanner/marker resolution),
1 % outliers 5-50 mm off the surface. Invented data, for timing only.

Prints, in one run:
- wall time of ``points_to_heightmap`` on 10M points (median of 3, or 1
  with ``--quick`` on 2M points) and its peak RSS, measured in a fresh
  subprocess per run (``resource.getrusage``, Linux kB);
- on 1M points, the fast path (plane on a subsample, per-cell outliers)
  against the full-resolution open3d path (kNN filter and plane on all
  points): time ratio and max/RMS difference of the heightmaps;
- the demo's flat tray (demo generators, 600k points): the default path
  (per-cell filter and pit filter) against open3d's statistical outlier
  filter, time ratio, and Sq / Sku / Sv of each against the tray's heightmap.

Usage: python bench/bench_pointcloud.py [--quick]
"""

from __future__ import annotations

import argparse
import json
import subprocess
import sys
import time

import numpy as np

TRAY_M = 0.5
GRID = 1024
SIGMA = 2e-4


def make_cloud(n: int, seed: int = 7) -> np.ndarray:
    rng = np.random.default_rng(seed)
    xy = rng.uniform(0, TRAY_M, (n, 2))
    z = np.zeros(n)
    centres = rng.uniform(0, TRAY_M, (40, 2))
    heights = rng.normal(0, 3e-3, 40)
    widths = rng.uniform(0.01, 0.05, 40)
    for c, h, w in zip(centres, heights, widths, strict=True):
        z += h * np.exp(-((xy - c) ** 2).sum(1) / (2 * w**2))
    z += 0.02 * xy[:, 0] - 0.01 * xy[:, 1] + rng.normal(0, SIGMA, n)
    k = n // 100
    z[:k] += rng.choice([-1.0, 1.0], k) * rng.uniform(5e-3, 5e-2, k)
    return np.column_stack([xy, z])


def _child(n: int) -> None:
    """One timed run in a fresh process, so peak RSS is this run's alone."""
    import resource

    from measures.terrain.pointcloud import points_to_heightmap

    pts = make_cloud(n)
    t0 = time.perf_counter()
    hm = points_to_heightmap(pts, dx_m=TRAY_M / GRID, crop=(0, TRAY_M, 0, TRAY_M))
    wall = time.perf_counter() - t0
    rss_gb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1e6
    print(
        json.dumps(
            {
                "wall_s": wall,
                "rss_gb": rss_gb,
                "shape": hm.z.shape,
                "n_outliers": hm.n_outliers,
                "filled": hm.filled_fraction,
            }
        )
    )


def _compare(n: int) -> None:
    from measures.terrain.pointcloud import points_to_heightmap

    pts = make_cloud(n, seed=11)
    kw = {"dx_m": TRAY_M / 256, "crop": 4 * TRAY_M / 256}
    t0 = time.perf_counter()
    fast = points_to_heightmap(pts, **kw)
    t_fast = time.perf_counter() - t0
    t0 = time.perf_counter()
    full = points_to_heightmap(pts, outlier_method="knn", max_points_for_fit=None, **kw)
    t_full = time.perf_counter() - t0
    # Cells measured by >= 4 points in both (the grids' origins differ by
    # tens of um, which can empty a one-point cell at the footprint's edge).
    d = (fast.z - full.z)[(fast.count >= 4) & (full.count >= 4)]
    print(
        f"1M-point comparison (256 x 256 grid): fast {t_fast:.2f} s, full-resolution "
        f"{t_full:.2f} s, ratio full/fast {t_full / t_fast:.1f}x"
    )
    print(
        f"  heightmap difference: max {np.abs(d).max() * 1e6:.1f} um, "
        f"RMS {np.sqrt(np.mean(d**2)) * 1e6:.1f} um (noise sigma {SIGMA * 1e6:.0f} um)"
    )


def _flat_tray() -> None:
    """The demo's flat tray (demo generators): our path against open3d's filter."""
    from demo_arena.ground import TRAYS, make_tray
    from demo_arena.scenario import scan_points
    from measures import areal_parameters
    from measures.terrain.pointcloud import points_to_heightmap

    spec = next(t for t in TRAYS if t.key == "tray-a-pressed")
    z = make_tray(spec, seed=5)
    ref = areal_parameters(z, 1e-3)
    pts = scan_points(z, 1e-3, n_points=600_000, seed=3)
    rows = []
    for label, kw in (
        ("cell + pit filter (default)", {}),
        ("open3d statistical filter  ", {"outlier_method": "knn", "pit_sigmas": None}),
    ):
        t0 = time.perf_counter()
        hm = points_to_heightmap(pts, dx_m=1e-3, **kw)
        wall = time.perf_counter() - t0
        ap = areal_parameters(hm.z, 1e-3)
        rows.append((label, wall, ap))
    print(f"demo flat tray, 600k points: heightmap Sq {ref.Sq * 1e6:.0f} um, Sku {ref.Sku:.2f}")
    for label, wall, ap in rows:
        print(
            f"  {label}: {wall:6.2f} s (ratio {wall / rows[1][1]:4.2f}), "
            f"Sq {ap.Sq * 1e6:.0f} um, Sku {ap.Sku:.2f}, Sv {ap.Sv * 1e6:.0f} um"
        )


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="2M points, one run, 250k comparison")
    ap.add_argument("--child", type=int, help=argparse.SUPPRESS)
    args = ap.parse_args()
    if args.child:
        _child(args.child)
        return
    n, repeats = (2_000_000, 1) if args.quick else (10_000_000, 3)
    runs = []
    for _ in range(repeats):
        out = subprocess.run(
            [sys.executable, __file__, "--child", str(n)],
            check=True,
            capture_output=True,
            text=True,
        ).stdout
        runs.append(json.loads(out.strip().splitlines()[-1]))
    walls = sorted(r["wall_s"] for r in runs)
    print(
        f"{n:,} points -> {runs[0]['shape'][0]} x {runs[0]['shape'][1]} heightmap: "
        f"median wall {walls[len(walls) // 2]:.2f} s over {repeats} run(s) "
        f"(all: {', '.join(f'{w:.2f}' for w in walls)}); "
        f"peak RSS {max(r['rss_gb'] for r in runs):.2f} GB incl. the input cloud; "
        f"outliers removed {runs[0]['n_outliers']:,} (1 % injected); "
        f"filled {runs[0]['filled'] * 100:.3f} % of cells"
    )
    print("  target: < ~10 s and < 4 GB")
    _compare(250_000 if args.quick else 1_000_000)
    _flat_tray()


if __name__ == "__main__":
    main()
