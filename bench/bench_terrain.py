"""Benchmark: terrain measures on large heightmaps (medians of repeated runs).

Targets: PSD + Hurst fit of a 4096 x 4096 heightmap < 5 s; terrain_summary of a
1024 x 1024 heightmap within the scan budget (20 s with point-cloud processing).
Reference for the ratios: a bare numpy rfft2 of the same grid.

Run: python bench/bench_terrain.py [--quick]
"""

from __future__ import annotations

import argparse
import statistics
import time

import numpy as np

from measures import hurst_exponent, radial_psd, terrain_summary
from measures.terrain._synthesis import self_affine_surface


def _median_time(fn, repeats):
    times = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return statistics.median(times)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__)
    ap.add_argument("--quick", action="store_true", help="smaller grids, one repeat")
    args = ap.parse_args()
    big, mid, reps = (1024, 512, 1) if args.quick else (4096, 1024, 3)
    z_big = self_affine_surface(big, 0.7, seed=1, rms_m=2e-3)
    z_mid = self_affine_surface(mid, 0.7, seed=2, rms_m=2e-3)
    t_fft = _median_time(lambda: np.fft.rfft2(z_big), reps)
    t_psd = _median_time(lambda: radial_psd(z_big, 1e-3), reps)
    t_hurst = _median_time(lambda: hurst_exponent(z_big, 1e-3, method="psd"), reps)
    t_sum = _median_time(lambda: terrain_summary(z_mid, 1e-3), reps)
    print(f"grid {big}^2: numpy rfft2 reference     median {t_fft:7.3f} s")
    print(
        f"grid {big}^2: radial_psd                median {t_psd:7.3f} s  ratio {t_psd / t_fft:5.1f}"
    )
    print(
        f"grid {big}^2: PSD + Hurst fit (auto band) median {t_hurst:7.3f} s  "
        f"ratio {t_hurst / t_fft:5.1f}  target < 5 s"
    )
    print(f"grid {mid}^2: terrain_summary           median {t_sum:7.3f} s  budget share of 20 s")


if __name__ == "__main__":
    main()
