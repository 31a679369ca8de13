"""Benchmark of whole-trial movement scoring and of its two costliest steps.

Run ``python bench/bench_movement.py`` (full: a 5-minute, 300 Hz, 7-marker
demo trial, medians of 3) or with ``--quick`` (a 1-minute trial, one run).
Input: the demo walker (``demo_arena.walker.walk_over``) on a flat belt;
invented data, fine for speed, never a check of values. BLAS is pinned to
one thread, as in the pool workers.

Printed, each beside a reference measured in the same run:

* ``movement_summary`` of the whole trial, surrogates included (target <= 30 s
  on 2 cores), beside the same call with one symbol per delay
  (``symbols_per_delay=1``, the symbolisation before symbols were read at a
  finer step): the ratio is the cost of the finer step;
* SSA: the lag-covariance route (``singular_spectrum``, two components
  reconstructed) against the SVD of the trajectory matrix with every
  component reconstructed;
* the residual-analysis cut-off search: one FFT per channel against the
  filtfilt loop over 80 candidates.
"""

from __future__ import annotations

import argparse
import statistics
import sys
import time
from pathlib import Path

import numpy as np
from threadpoolctl import threadpool_limits

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))  # measures from the checkout

MARKERS_USED = ("snout", "spine", "tailbase", "foot_LF", "foot_RF", "foot_LH", "foot_RH")
ROLES = {
    "anterior": "snout",
    "posterior": "tailbase",
    "feet": {"LF": "foot_LF", "RF": "foot_RF", "LH": "foot_LH", "RH": "foot_RH"},
}
BELT_M_S = 0.25


def _trial(duration_s: float, frame_rate_hz: float = 300.0) -> tuple[np.ndarray, list[str]]:
    from demo_arena.scenario import SUBJECTS
    from demo_arena.walker import walk_over

    z = np.zeros((200, 200))
    rec = walk_over(
        z, 0.001, SUBJECTS[0], duration_s=duration_s, frame_rate_hz=frame_rate_hz,
        treadmill_speed_m_s=BELT_M_S, seed=7,
    )  # fmt: skip
    keep = [rec.marker_names.index(n) for n in MARKERS_USED]
    return rec.markers[:, keep], list(MARKERS_USED)


CPU_TIMES: list[float] = []


def _median_time(func, repeats: int) -> tuple[float, object]:
    """Median wall time; the median process CPU time (all threads) goes to CPU_TIMES."""
    times, cpu, out = [], [], None
    for _ in range(repeats):
        c0, t0 = time.process_time(), time.perf_counter()
        out = func()
        times.append(time.perf_counter() - t0)
        cpu.append(time.process_time() - c0)
    CPU_TIMES.append(statistics.median(cpu))
    return statistics.median(times), out


def _svd_route(x: np.ndarray, window: int) -> np.ndarray:
    """Reference: SVD of the whole trajectory matrix, every component reconstructed."""
    from measures.dynamics.embedding import _diagonal_averages, delay_embed

    traj = delay_embed(x - x.mean(), dimension=window, delay=1)
    u, sv, vt = np.linalg.svd(traj, full_matrices=False)
    return _diagonal_averages(u, sv, vt)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="1-minute trial, one repeat")
    parser.add_argument("--repeats", type=int, default=None, help="override the repeat count")
    args = parser.parse_args()
    duration = 60.0 if args.quick else 300.0
    repeats = args.repeats or (1 if args.quick else 3)
    from measures import movement_summary, residual_analysis, singular_spectrum

    with threadpool_limits(limits=1, user_api="blas"):
        warm, names = _trial(5.0)
        movement_summary(
            warm,
            frame_rate_hz=300.0,
            marker_names=names,
            roles=ROLES,
            params={"treadmill_speed_m_s": BELT_M_S, "n_surrogates": 2},
        )  # fmt: skip  (compiles the numba kernels before timing)
        markers, names = _trial(duration)
        print(f"trial: {duration:.0f} s at 300 Hz, {markers.shape[1]} markers, {repeats} repeat(s)")

        def score():
            return movement_summary(
                markers, frame_rate_hz=300.0, marker_names=names, roles=ROLES,
                params={"treadmill_speed_m_s": BELT_M_S},
            )  # fmt: skip

        def score_coarse():
            return movement_summary(
                markers, frame_rate_hz=300.0, marker_names=names, roles=ROLES,
                params={"treadmill_speed_m_s": BELT_M_S, "symbols_per_delay": 1},
            )  # fmt: skip

        t_sum, summary = _median_time(score, repeats)
        c_sum = CPU_TIMES[-1]
        n_sur = summary.params["n_surrogates"]
        per = summary.params["symbols_per_delay"]
        t_ref, _ = _median_time(score_coarse, repeats)
        print(
            f"movement_summary (whole body, {n_sur} surrogates, {per} symbols a delay): "
            f"{t_sum:.2f} s wall, {c_sum:.2f} s CPU (target <= 30 s wall on 2 quiet cores); "
            f"one symbol a delay {t_ref:.2f} s wall, {CPU_TIMES[-1]:.2f} s CPU; "
            f"ratio {t_sum / t_ref:.2f}x"
        )
        print("  " + next((n for n in summary.notes if n.startswith("symbols:")), "no symbols"))
        for name in ("rqa_points", "embedding_dimension", "spike_flagged_fraction"):
            print(f"  {name} = {summary.score(name):g}")

        foot = np.nan_to_num(markers[:, 5, 2] - np.nanmean(markers[:, 5, 2]))
        for window in (52, 218):
            t_lag, fast = _median_time(
                lambda w=window: singular_spectrum(foot, window_samples=w, n_reconstructed=2),
                repeats,
            )
            c_lag = CPU_TIMES[-1]
            t_svd, ref = _median_time(lambda w=window: _svd_route(foot, w), repeats)
            diff = float(np.abs(fast.components - ref[:2]).max())
            print(
                f"SSA N={foot.size} L={window}: lag-cov {t_lag:.3f} s, SVD {t_svd:.3f} s, "
                f"ratio {t_svd / t_lag:.1f}x (CPU {c_lag:.3f} s vs {CPU_TIMES[-1]:.3f} s), "
                f"max |diff| {diff:.1e}"
            )

        flat = np.nan_to_num(markers.reshape(markers.shape[0], -1))
        t_fft, a = _median_time(
            lambda: residual_analysis(flat, frame_rate_hz=300.0, method="fft"), repeats
        )
        c_fft = CPU_TIMES[-1]
        t_ff, b = _median_time(
            lambda: residual_analysis(flat, frame_rate_hz=300.0, method="filtfilt"), repeats
        )
        step = float(a.candidates_hz[1] - a.candidates_hz[0])
        worst = float(np.abs(a.cutoff_hz - b.cutoff_hz).max()) / step
        print(
            f"cut-off search {flat.shape[1]} channels: FFT {t_fft:.3f} s, filtfilt loop "
            f"{t_ff:.3f} s, ratio {t_ff / t_fft:.1f}x "
            f"(CPU {c_fft:.3f} s vs {CPU_TIMES[-1]:.3f} s), "
            f"largest difference {worst:.0f} step(s)"
        )


if __name__ == "__main__":
    main()
