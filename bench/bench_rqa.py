"""Benchmark of the streaming RQA kernel against its compute floor and the dense oracle.

Run ``python bench/bench_rqa.py`` (full: N = 90,000 and 20,000) or with
``--quick``. Each measurement runs in its own subprocess so peak RSS belongs
to it alone; times are medians over repeats (wall clock, 2 cores). Input:
AR(1) (phi = 0.95) delay-embedded in m = 6, recurrence rate 5 %.
"""

from __future__ import annotations

import argparse
import json
import resource
import statistics
import subprocess
import sys
import time

import numpy as np


def _points(n: int) -> np.ndarray:
    rng = np.random.default_rng(12345)
    e = rng.normal(size=n + 5)
    x = np.zeros(n + 5)
    for i in range(1, n + 5):
        x[i] = 0.95 * x[i - 1] + e[i]
    return np.column_stack([x[i : i + n] for i in range(6)])


def _worker(kind: str, n: int, repeats: int) -> None:
    from measures.dynamics import _rqa_kernels as k
    from measures.dynamics.recurrence import _prepare, _resolve_threshold, rqa, rqa_dense

    small = _points(300)
    rqa(small, recurrence_rate=0.05)  # load compiled kernels before timing
    k.count_recurrences(np.ascontiguousarray(small.T), 1.0, 0, 1)
    pts = _points(n)
    base_rss = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    times = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        if kind == "stream":
            rqa(pts, recurrence_rate=0.05)
        elif kind == "stream_exact":
            rqa(pts, recurrence_rate=0.05, threshold_method="exact")
        elif kind == "dense":
            rqa_dense(pts, recurrence_rate=0.05, threshold_method="exact")
        else:  # count-only floor at the threshold rqa would use
            xt, *_ = _prepare(pts, "bench", 1, 2, 2, "euclidean")
            thr, _, _ = _resolve_threshold(xt, "b", "euclidean", 1, None, 0.05, "sampled", 0)
            t0 = time.perf_counter()
            k.count_recurrences(xt, thr, 0, 1)
        times.append(time.perf_counter() - t0)
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    print(json.dumps({"median_s": statistics.median(times), "peak_rss_mib": peak,
                      "base_rss_mib": base_rss}))  # fmt: skip


def _measure(kind: str, n: int, repeats: int) -> dict:
    out = subprocess.run(
        [sys.executable, __file__, "--worker", kind, str(n), str(repeats)],
        check=True, capture_output=True, text=True,
    )  # fmt: skip
    return json.loads(out.stdout.strip().splitlines()[-1])


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__)
    parser.add_argument("--quick", action="store_true", help="small sizes (seconds)")
    parser.add_argument("--no-dense", action="store_true", help="skip the dense oracle")
    parser.add_argument("--worker", nargs=3, help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.worker:
        _worker(args.worker[0], int(args.worker[1]), int(args.worker[2]))
        return
    big, mid, reps = (20_000, 3_000, 3) if args.quick else (90_000, 20_000, 3)
    rows = []
    for kind, n, r in (
        ("count", big, reps),
        ("stream", big, reps),
        ("stream_exact", big, 1),
        ("count", mid, reps),
        ("stream", mid, reps),
        ("dense", mid, 1),
    ):
        if kind == "dense" and args.no_dense:
            continue
        res = _measure(kind, n, r)
        rows.append((kind, n, res))
        print(
            f"{kind:>13} N={n:>6}: median {res['median_s']:8.3f} s, peak RSS "
            f"{res['peak_rss_mib']:7.1f} MiB (after import {res['base_rss_mib']:.1f} MiB)"
        )
    t = {(k, n): r["median_s"] for k, n, r in rows}
    print(
        f"stream / count floor at N={big}: {t['stream', big] / t['count', big]:.2f}x "
        f"(target <= 1.5x)"
    )
    print(f"stream_exact / count floor at N={big}: {t['stream_exact', big] / t['count', big]:.2f}x")
    if not args.no_dense:
        print(
            f"dense / stream at N={mid}: {t['dense', mid] / t['stream', mid]:.1f}x (target >= 20x)"
        )


if __name__ == "__main__":
    main()
