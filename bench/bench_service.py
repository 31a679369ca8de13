"""Benchmark: how fast the service starts and how fast its report renders (medians).

Targets (quiet 2-core machine): ``/healthz`` answers <= 2 s after ``gaitscape serve``, and
the demo's report renders in <= 3 s. References measured in the same run, printed with
ratios:

- start-up: a minimal FastAPI app with one route under uvicorn, started the same way (the
  floor any FastAPI service pays: interpreter, FastAPI, uvicorn);
- report: rendering one empty 6 x 4 inch matplotlib figure to PNG six times (the report
  draws six figures; this is the drawing floor without any content).

The report is timed in wall time and in CPU time of this process (``time.process_time``),
which a shared machine's load disturbs much less; the load average is printed before and
after. The demo directory is copied first (opening a store may migrate or write to it).

Run (with bytecode writing allowed, as in a normal install: unset PYTHONDONTWRITEBYTECODE):
    python bench/bench_service.py [--demo DIR] [--repeats N] [--only startup|report]
(``--demo``: a finished ``gaitscape demo`` directory; without it the report is skipped.)
"""

from __future__ import annotations

import argparse
import os
import shutil
import socket
import statistics
import subprocess
import sys
import tempfile
import time
import urllib.request
from pathlib import Path
from typing import Any

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))  # service from the checkout

MINIMAL_APP = """
import uvicorn
from fastapi import FastAPI
app = FastAPI()
@app.get("/healthz")
def healthz():
    return {"status": "ok"}
uvicorn.run(app, host="127.0.0.1", port=int(__import__("sys").argv[1]), log_level="warning")
"""


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


def _time_to_healthz(cmd: list[str], port: int) -> float:
    env = dict(os.environ)
    env.pop("PYTHONDONTWRITEBYTECODE", None)  # a normal install has compiled bytecode
    t0 = time.perf_counter()
    proc = subprocess.Popen(cmd, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, env=env)
    try:
        while True:
            try:
                with urllib.request.urlopen(f"http://127.0.0.1:{port}/healthz", timeout=1) as r:
                    if r.status == 200:
                        return time.perf_counter() - t0
            except OSError:
                if proc.poll() is not None:
                    raise RuntimeError(f"{cmd[0]} exited with {proc.returncode}") from None
                time.sleep(0.01)
    finally:
        proc.terminate()
        proc.wait(timeout=30)


def bench_startup(repeats: int) -> None:
    gaitscape = shutil.which("gaitscape") or sys.exit("gaitscape is not on PATH")
    with tempfile.TemporaryDirectory() as tmp:
        script = Path(tmp) / "minimal.py"
        script.write_text(MINIMAL_APP)
        ref, first, again = [], [], []
        for k in range(repeats):
            port = _free_port()
            ref.append(_time_to_healthz([sys.executable, str(script), str(port)], port))
            data = Path(tmp) / f"d{k}"
            port = _free_port()
            cmd = [gaitscape, "serve", "--data", str(data), "--port", str(port)]
            first.append(_time_to_healthz(cmd, port))  # empty folder: migrations, token
            port = _free_port()
            cmd = [gaitscape, "serve", "--data", str(data), "--port", str(port)]
            again.append(_time_to_healthz(cmd, port))  # restart on a current database
    r = statistics.median(ref)
    print(f"/healthz, minimal FastAPI app (reference)      median {r:6.2f} s")
    for label, times in (("first start (empty folder)", first), ("restart", again)):
        m = statistics.median(times)
        print(f"/healthz after gaitscape serve, {label:27s} median {m:6.2f} s  ratio {m / r:5.2f}")
    print("  target: <= 2 s on a quiet 2-core machine")


def _load() -> str:
    one, five, fifteen = os.getloadavg()
    return f"load average {one:.2f}, {five:.2f}, {fifteen:.2f} on {os.cpu_count()} CPUs"


def bench_report(demo: Path, repeats: int) -> None:
    import matplotlib

    matplotlib.use("Agg")
    from matplotlib.figure import Figure

    from service.app import open_resources
    from service.report import convention as cv
    from service.report import render_report
    from service.report.cache import shared_correspondence
    from service.settings import Settings

    def empty_figures() -> None:
        import io

        for _ in range(6):
            fig = Figure(figsize=(6, 4))
            fig.add_subplot()
            fig.savefig(io.BytesIO(), format="png", dpi=110)

    def timed(fn: Any) -> tuple[float, float]:
        w0, c0 = time.perf_counter(), time.process_time()
        fn()
        return time.perf_counter() - w0, time.process_time() - c0

    print(f"report: before, {_load()}")
    with tempfile.TemporaryDirectory() as tmp:
        store = Path(tmp) / demo.name
        shutil.copytree(demo, store)
        res = open_resources(Settings(data_dir=store, job_runner=False))
        with res.sessionmaker() as session:
            corr = shared_correspondence(
                session=session, recipe="default", version=None, study=None,
                n_permutations=cv.N_PERMUTATIONS, n_boot=cv.N_BOOT, seed=cv.SEED,
            )  # fmt: skip

            def report() -> None:
                render_report(
                    session=session, store=res.store, recipe="default", correspondence=corr
                )

            cold = timed(report)  # imports matplotlib, as the demo's one report does
            ref, times = [], []
            for _ in range(repeats):
                ref.append(timed(empty_figures))
                times.append(timed(report))
        res.engine.dispose()
    print(f"report: after, {_load()}")
    rw, rc = (statistics.median(t[k] for t in ref) for k in (0, 1))
    mw, mc = (statistics.median(t[k] for t in times) for k in (0, 1))
    print(f"report: six empty figures (reference)         median {rw:6.2f} s wall {rc:6.2f} s CPU")
    print(
        f"report of {demo.name}, first render (imports) once   {cold[0]:6.2f} s wall "
        f"{cold[1]:6.2f} s CPU"
    )
    print(
        f"report of {demo.name} (correspondence given) median {mw:6.2f} s wall {mc:6.2f} s CPU"
        f"  ratio {mw / rw:5.1f} wall, {mc / rc:5.1f} CPU"
    )
    print("  target: <= 3 s on a quiet 2-core machine (the demo's report)")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--demo", type=Path, help="a finished gaitscape demo directory")
    ap.add_argument("--repeats", type=int, default=3)
    ap.add_argument("--only", choices=("startup", "report"), help="run one part")
    args = ap.parse_args()
    if args.only != "report":
        bench_startup(args.repeats)
    if args.demo is not None and args.only != "startup":
        bench_report(args.demo, args.repeats)


if __name__ == "__main__":
    main()
