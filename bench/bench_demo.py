"""Benchmark: the full ``gaitscape demo`` with wall and CPU time per phase.

The machine may be shared, so wall time alone says little: a sampler thread reads the CPU
time of this process and of every child (the pool workers) twice a second, and each
phase is reported with its wall time, its CPU-seconds (main process and workers apart) and
the load average before and after. Reference: the same phases' CPU-seconds, which do not
grow with other people's load the way wall time does (CPU / wall near the core count means
the phase kept both cores busy).

Run: python bench/bench_demo.py [--quick] [--out DIR]
"""

from __future__ import annotations

import argparse
import io
import os
import shutil
import sys
import tempfile
import threading
import time
from pathlib import Path

import psutil

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))  # demo_arena from the checkout


def _cpu(proc: psutil.Process, seen: dict[int, float]) -> tuple[float, float]:
    """(main, workers) CPU-seconds; a child that ended keeps its last reading."""
    t = proc.cpu_times()
    main = t.user + t.system
    for child in proc.children(recursive=True):
        try:
            c = child.cpu_times()
            seen[child.pid] = c.user + c.system
        except psutil.Error:
            pass
    return main, sum(seen.values())


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__)
    ap.add_argument("--quick", action="store_true")
    ap.add_argument("--out", default=None, help="demo folder (emptied first); default a temp dir")
    args = ap.parse_args()
    from service.demo import run_demo

    out = Path(args.out) if args.out else Path(tempfile.mkdtemp(prefix="bench-demo-"))
    shutil.rmtree(out, ignore_errors=True)
    proc = psutil.Process()
    seen: dict[int, float] = {}
    samples: list[tuple[float, float, float]] = []
    stop = threading.Event()

    threads: dict[int, tuple[str, float]] = {}  # native id -> (name, CPU-s last seen)

    def sample() -> None:
        while not stop.is_set():
            samples.append((time.monotonic(), *_cpu(proc, seen)))
            names = {t.native_id: t.name for t in threading.enumerate()}
            for t in proc.threads():
                name = names.get(t.id) or threads.get(t.id, ("(native)", 0.0))[0]
                threads[t.id] = (name, t.user_time + t.system_time)
            stop.wait(0.5)

    load0 = os.getloadavg()
    t0 = time.monotonic()
    thread = threading.Thread(target=sample, daemon=True)
    thread.start()
    result = run_demo(out, quick=args.quick, progress=False, out=io.StringIO())
    stop.set()
    thread.join()
    load1 = os.getloadavg()
    samples.append((time.monotonic(), *_cpu(proc, seen)))

    def at(t: float) -> tuple[float, float]:
        # Last sample at or before t (CPU readings only grow).
        best = samples[0]
        for s in samples:
            if s[0] <= t:
                best = s
        return best[1], best[2]

    # run_demo's timings are consecutive phases from its start (the app's creation between
    # generate and upload is counted with upload here).
    phases = {k: v for k, v in result.timings_s.items() if k != "total"}
    total = result.timings_s["total"]
    bounds = [t0]
    acc = 0.0
    for v in phases.values():
        acc += v
        bounds.append(t0 + acc)
    bounds[-1] = t0 + total
    print(f"demo {'--quick' if args.quick else '(full)'} in {out}")
    print(f"load average before {load0[0]:.2f}, after {load1[0]:.2f}")
    head = ("phase", "wall s", "main CPU s", "worker CPU s", "CPU/wall")
    print(f"{head[0]:16s} {head[1]:>8s} {head[2]:>11s} {head[3]:>13s} {head[4]:>9s}")
    for (name, _), a, b in zip(phases.items(), bounds[:-1], bounds[1:], strict=True):
        m0, w0 = at(a)
        m1, w1 = at(b)
        wall = b - a
        cpu = (m1 - m0) + (w1 - w0)
        print(f"{name:16s} {wall:8.1f} {m1 - m0:11.1f} {w1 - w0:13.1f} {cpu / wall:9.2f}")
    m, w = at(t0 + total)
    print(f"{'total':16s} {total:8.1f} {m:11.1f} {w:13.1f} {(m + w) / total:9.2f}")
    by_name: dict[str, float] = {}
    for name, cpu in threads.values():
        key = name.split("-")[0] if name.startswith("AnyIO") else name
        by_name[key] = by_name.get(key, 0.0) + cpu
    print("main-process CPU-s by thread (sampled, a thread's last reading):")
    for name, cpu in sorted(by_name.items(), key=lambda kv: -kv[1])[:8]:
        print(f"  {name:40s} {cpu:6.1f}")
    if result.failed_uploads or result.failed_jobs:
        print("FAILED:", result.failed_uploads + result.failed_jobs)


if __name__ == "__main__":
    main()
