"""Benchmark: score synthetic trials and heightmaps end to end on the local process pool.

Reference: a sequential loop in this process over the same task functions (same reads, same
measures, no database). Reports trials per minute for both and their ratio (near the worker
count when the pool keeps every core busy). Inputs are invented ``demo_arena`` data.

Run: python bench/bench_pipeline.py [--quick] [--trials N --duration S --heightmaps M]
"""

from __future__ import annotations

import argparse
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))  # demo_arena from the checkout

from demo_arena import SUBJECTS, TRAYS, make_tray, walk_over
from demo_arena.files import write_csv_wide
from service.pipeline import (
    JobRunner,
    LocalPool,
    default_parameters,
    tasks,
)
from storage import repo
from storage.artifacts import ArtifactStore
from storage.db import make_engine, make_sessionmaker, sqlite_url, upgrade

ROLES = {"anterior": "snout", "posterior": "tailbase",
         "feet": {f: f"foot_{f}" for f in ("LF", "RF", "LH", "RH")}}  # fmt: skip


def build(root: Path, n_trials: int, duration_s: float, n_maps: int):
    engine = make_engine(sqlite_url(root / "data"))
    upgrade(engine)
    sm = make_sessionmaker(engine)
    store = ArtifactStore(root / "data" / "artifacts")
    z = make_tray(TRAYS[3], length_m=1.0, width_m=0.3, dx_m=0.001, seed=1)
    with sm() as s:
        arena = repo.create_arena(
            session=s, name="bench", kind="runway", scale_band_m=(0.005, 0.08)
        )
        subj = repo.create_subject(session=s, label="b1", marker_roles=ROLES)
        targets = []
        for i in range(n_trials):
            rec = walk_over(z, 0.001, SUBJECTS[i % 4], duration_s=duration_s, seed=100 + i)
            path = root / f"t{i}.csv"
            write_csv_wide(path, rec.markers, rec.marker_names, rec.frame_rate_hz)
            row, _ = repo.ingest_trial(session=s, store=store, staged=store.put_file(path),
                                       filename=path.name, meta={"arena_id": arena.id,
                                       "subject_id": subj.id, "units": "mm"})  # fmt: skip
            targets.append(("trial", row.id))
        for k in range(n_maps):
            hm = make_tray(TRAYS[k % len(TRAYS)], length_m=0.256, width_m=0.256, dx_m=0.001, seed=k)
            path = root / f"h{k}.npy"
            np.save(path, hm, allow_pickle=False)
            row, _ = repo.ingest_scan(session=s, store=store, arena_id=arena.id,
                                      staged=store.put_file(path), filename=path.name,
                                      meta={"units": "m", "dx": 0.001, "dy": 0.001})  # fmt: skip
            targets.append(("scan", row.id))
    return sm, store, targets


def sequential(sm, store, targets) -> float:
    p = default_parameters()
    t0 = time.perf_counter()
    with sm() as s:
        for kind, tid in targets:
            if kind == "trial":
                t = repo.get_trial(session=s, trial_id=tid)
                tasks.movement_task(str(store.path(t.sha256)), sha256=t.sha256, fmt=t.format,
                                    filename=t.filename, read_meta={"units": "mm"}, roles=ROLES,
                                    params=p["movement"])  # fmt: skip
            else:
                sc = repo.get_scan(session=s, scan_id=tid)
                hm = tasks.heightmap_task(str(store.path(sc.sha256)), sha256=sc.sha256,
                                          fmt=sc.format, filename=sc.filename,
                                          read_meta={"units": "m", "dx": 0.001, "dy": 0.001},
                                          params=p["heightmap"])  # fmt: skip
                tasks.terrain_task(hm.z, hm.valid, dx_m=hm.dx_m, dy_m=hm.dy_m,
                                   band_m=(0.005, 0.08), params=p["terrain"])  # fmt: skip
    return time.perf_counter() - t0


def pooled(sm, store, targets, workers: int) -> float:
    from service.pipeline import ensure_default_recipe

    with sm() as s:
        ensure_default_recipe(s)
        repo.enqueue_job(session=s, kind="score", target_kind="scan", target_id=targets[-1][1])
    pool = LocalPool(workers)
    # Warm the pool (spawn + imports + numba cache) on one job outside the timing.
    JobRunner(sessionmaker=sm, store=store, executor=pool, poll_s=0.05).run_until_idle(3600)
    with sm() as s:
        default = repo.get_recipe(session=s, name="default")
        from storage.repo.jobs import enqueue_jobs

        enqueue_jobs(session=s, kind="score", targets=targets, recipe_hash=default.hash)
    t0 = time.perf_counter()
    JobRunner(sessionmaker=sm, store=store, executor=pool, poll_s=0.05).run_until_idle(36000)
    elapsed = time.perf_counter() - t0
    pool.close()
    return elapsed


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__)
    ap.add_argument("--quick", action="store_true", help="10 trials of 20 s, 2 heightmaps")
    ap.add_argument("--trials", type=int, default=200)
    ap.add_argument("--duration", type=float, default=60.0, help="trial length, s (300 Hz)")
    ap.add_argument("--heightmaps", type=int, default=10)
    ap.add_argument("--workers", type=int, default=2)
    a = ap.parse_args()
    n, dur, maps = (10, 20.0, 2) if a.quick else (a.trials, a.duration, a.heightmaps)
    with tempfile.TemporaryDirectory() as tmp:
        sm, store, targets = build(Path(tmp), n, dur, maps)
        # Warm this process too (imports, numba cache) on one small call.
        sequential(sm, store, targets[:1])
        t_seq = sequential(sm, store, targets)
        t_pool = pooled(sm, store, targets, a.workers)
    print(f"{n} trials of {dur:g} s at 300 Hz + {maps} heightmaps (256 x 256, 1 mm)")
    print(f"sequential loop : {t_seq:8.1f} s  {60 * n / t_seq:7.2f} trials/min")
    print(f"pool, {a.workers} workers : {t_pool:8.1f} s  {60 * n / t_pool:7.2f} trials/min")
    print(f"ratio (pool / sequential throughput): {t_seq / t_pool:.2f}")


if __name__ == "__main__":
    main()
