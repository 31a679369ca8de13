"""Benchmark: terrain summaries of large heightmaps, surrogates included (medians).

Targets (4096 x 4096, 19 surrogates, 2 cores): terrain_summary <= 5 s and
<= 1.5 GiB peak. References measured in the same run, printed with ratios:
- numpy's rfft2 of the same grid (the floor for anything spectral);
- the shared surrogate path (``measures.information.surrogates.surrogate_test``
  with 2-D phase surrogates and ``complexity_entropy``), i.e. how the
  surrogate z-score was computed before the fused kernel.
Each terrain_summary run is a fresh subprocess, so its peak RSS is its own; it
also reports its CPU time and an rfft2 of the grid timed in that process just
before (the per-run ratio is robust to load from other processes), and the
load average is printed at the start and the end.

Run: python bench/bench_terrain.py [--quick]   (--quick: 1024 x 1024, one repeat)
"""

from __future__ import annotations

import argparse
import json
import os
import statistics
import subprocess
import sys
import time
from pathlib import Path

import numpy as np

# The checkout's packages, not an installed copy (the script's folder is bench/,
# so the checkout root is not on sys.path by itself).
sys.path.insert(0, str(Path(__file__).resolve().parents[1]))


def _median_time(fn, repeats):
    times = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return statistics.median(times)


def _child(n: int) -> None:
    import resource

    from measures import terrain_summary
    from measures.terrain._synthesis import self_affine_surface

    z = self_affine_surface(n, 0.7, seed=1, rms_m=2e-3)
    terrain_summary(z[:64, :64], 1e-3, params={"n_surrogates": 2})  # compile kernels
    # rfft2 of the same grid in the same process, just before: the reference
    # whose ratio is robust to load from other processes.
    t_fft = _median_time(lambda: np.fft.rfft2(z), 3)
    t0, c0 = time.perf_counter(), time.process_time()
    s = terrain_summary(z, 1e-3)
    wall, cpu = time.perf_counter() - t0, time.process_time() - c0
    rss = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 2**20  # kB -> GiB
    print(
        json.dumps(
            {
                "wall_s": wall,
                "cpu_s": cpu,
                "rfft2_s": t_fft,
                "rss_gib": rss,
                "pe": s.score("permutation_entropy_2d").value,
                "pe_z": s.score("permutation_entropy_2d").surrogate_z,
            }
        )
    )


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="1024 x 1024, one repeat")
    ap.add_argument("--child", type=int, help=argparse.SUPPRESS)
    args = ap.parse_args()
    if args.child:
        _child(args.child)
        return
    from measures.information.ordinal import complexity_entropy
    from measures.information.surrogates import surrogate_test
    from measures.terrain._fastfield import ordinal_counts, phase_surrogates
    from measures.terrain._synthesis import self_affine_surface

    n, reps = (1024, 1) if args.quick else (4096, 3)
    load0 = os.getloadavg()
    z = self_affine_surface(n, 0.7, seed=1, rms_m=2e-3)
    t_fft = _median_time(lambda: np.fft.rfft2(z), reps)
    print(f"grid {n}^2: numpy rfft2 (reference)              median {t_fft:7.3f} s")

    ordinal_counts(z[:32, :32], (2, 2))  # compile
    make = phase_surrogates(z, 1, workers=2)
    make(0)

    def fast():
        for k in range(19):
            ordinal_counts(make(k), (2, 2), ties="random", seed=k)

    t_fast = _median_time(fast, reps)
    t_old = _median_time(
        lambda: surrogate_test(
            lambda x: complexity_entropy(x, order=(2, 2))[0], z, kind="phase", n_surrogates=19
        ),
        1,
    )
    print(
        f"grid {n}^2: 19 surrogates, shared path (reference) median {t_old:7.3f} s  "
        f"ratio to rfft2 {t_old / t_fft:6.1f}"
    )
    print(
        f"grid {n}^2: 19 surrogates, fused half-plane path    median {t_fast:7.3f} s  "
        f"ratio to rfft2 {t_fast / t_fft:6.1f}  speed-up {t_old / t_fast:5.1f}x"
    )
    runs = []
    for _ in range(reps):
        cmd = [sys.executable, __file__, "--child", str(n)]
        out = subprocess.run(cmd, check=True, capture_output=True, text=True).stdout
        runs.append(json.loads(out.strip().splitlines()[-1]))
    wall = statistics.median(r["wall_s"] for r in runs)
    cpu = statistics.median(r["cpu_s"] for r in runs)
    ratio = statistics.median(r["wall_s"] / r["rfft2_s"] for r in runs)
    rss = max(r["rss_gib"] for r in runs)
    walls = ", ".join(f"{r['wall_s']:.2f} s" for r in runs)
    print(
        f"grid {n}^2: terrain_summary with 19 surrogates     median {wall:7.3f} s  "
        f"ratio to rfft2 {wall / t_fft:6.1f}  peak RSS {rss:.2f} GiB"
    )
    print(
        f"  CPU time median {cpu:.2f} s (CPU / wall {cpu / wall:.2f}); per run, summary / "
        f"rfft2 of the grid in the same process: median ratio {ratio:.1f} "
        f"(runs: {walls})"
    )
    load1 = os.getloadavg()
    print(f"  load average (1 min) {load0[0]:.2f} at the start, {load1[0]:.2f} at the end")
    if n == 4096:
        print("  targets: <= 5 s and <= 1.5 GiB on 2 cores (quiet machine)")


if __name__ == "__main__":
    main()
