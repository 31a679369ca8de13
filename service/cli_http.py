"""CLI commands that talk to a running server over HTTP: set-up without curl.

``gaitscape arena create/list``, ``subject create/list``, ``study create/list``,
``recipe create/list``, ``rescore`` and ``report --out FILE``. Each takes ``--server`` and
``--token`` (environment ``GAITSCAPE_SERVER`` and ``GAITSCAPE_TOKEN``); the server checks
the token's scope, as it does for the dashboard's forms.
"""

from __future__ import annotations

import argparse
import json
import os
import sys
import time
from collections.abc import Callable
from pathlib import Path
from typing import Any

from service.console import format_table

__all__ = ["HTTP_COMMANDS", "ServerError"]

DEFAULT_SERVER = "http://127.0.0.1:8000"
FEET = ("LF", "RF", "LH", "RH")


class ServerError(RuntimeError):
    """The server answered with an error (its ``detail`` in the message)."""


def _client(args: argparse.Namespace, timeout_s: float = 60.0) -> Any:
    import httpx

    if not args.token:
        raise SystemExit(f"gaitscape {args.command}: give --token or set GAITSCAPE_TOKEN")
    return httpx.Client(
        base_url=args.server.rstrip("/"),
        headers={"Authorization": f"Bearer {args.token}"},
        timeout=httpx.Timeout(timeout_s, connect=10.0),
    )


def _check(response: Any) -> Any:
    if response.status_code >= 400:
        try:
            detail = response.json().get("detail")
        except ValueError:
            detail = response.text[:300]
        raise ServerError(f"HTTP {response.status_code}: {detail}")
    return response.json() if response.content else None


def _all(client: Any, path: str) -> list[dict[str, Any]]:
    rows: list[dict[str, Any]] = _check(client.get(path, params={"limit": 1000}))["data"]
    return rows


def _resolve(client: Any, path: str, key: str, ref: str) -> int:
    """An id from an id or a name/label (``key``)."""
    if ref.isdigit():
        return int(ref)
    for row in _all(client, path):
        if row[key] == ref:
            return int(row["id"])
    raise ServerError(f"no {path.strip('/').split('/')[-1][:-1]} named {ref!r}")


def _run(args: argparse.Namespace) -> int:
    import httpx

    try:
        return int(args.http_func(args) or 0)
    except ServerError as exc:
        print(f"gaitscape {args.command}: {exc}", file=sys.stderr)
        return 1
    except httpx.HTTPError as exc:
        print(f"gaitscape {args.command}: cannot reach {args.server}: {exc}", file=sys.stderr)
        return 1


def _table(rows: list[tuple[Any, ...]]) -> None:

    print(format_table([tuple(str(c) for c in r) for r in rows]))


# -- arena ------------------------------------------------------------------------------------
def _arena_create(args: argparse.Namespace) -> int:
    band = None if args.band_mm is None else [args.band_mm[0] / 1000, args.band_mm[1] / 1000]
    body = {"name": args.name, "kind": args.kind, "scale_band_m": band, "notes": args.notes}
    with _client(args) as c:
        a = _check(c.post("/v1/arenas", json=body))
    print(f"created arena {a['id']} {a['name']!r}")
    return 0


def _arena_list(args: argparse.Namespace) -> int:
    with _client(args) as c:
        rows = _all(c, "/v1/arenas")
    out: list[tuple[Any, ...]] = [("id", "name", "kind", "band (mm)", "notes")]
    for a in rows:
        band = a.get("scale_band_m")
        shown = "whole scan" if not band else f"{band[0] * 1000:g} to {band[1] * 1000:g}"
        out.append((a["id"], a["name"], a["kind"], shown, a.get("notes") or ""))
    _table(out)
    return 0


# -- subject ----------------------------------------------------------------------------------
def _parse_feet(values: list[str]) -> dict[str, str]:
    feet = {}
    for item in values:
        for pair in item.split(","):
            if "=" not in pair:
                raise SystemExit(f"gaitscape subject: --foot wants ROLE=MARKER, got {pair!r}")
            role, marker = (p.strip() for p in pair.split("=", 1))
            feet[role] = marker
    return feet


def _subject_create(args: argparse.Namespace) -> int:
    feet = _parse_feet(args.foot or [])
    with _client(args) as c:
        if args.markers_of_trial is not None:
            names = _check(c.get(f"/v1/trials/{args.markers_of_trial}"))["marker_names"]
            unknown = [m for m in [args.anterior, args.posterior, *feet.values()] if m not in names]
            if unknown:
                raise ServerError(
                    f"markers {unknown} are not in trial {args.markers_of_trial} "
                    f"(it has {', '.join(names)})"
                )
        body: dict[str, Any] = {
            "label": args.label,
            "species": args.species,
            "marker_roles": {"anterior": args.anterior, "posterior": args.posterior, "feet": feet},
        }
        if args.body_length_mm is not None:
            body["body_length_m"] = args.body_length_mm / 1000
        if args.mass_g is not None:
            body["mass_kg"] = args.mass_g / 1000
        s = _check(c.post("/v1/subjects", json=body))
    print(f"created subject {s['id']} {s['label']!r}")
    return 0


def _subject_list(args: argparse.Namespace) -> int:
    with _client(args) as c:
        rows = _all(c, "/v1/subjects")
    _table([("id", "label", "species")] + [(s["id"], s["label"], s["species"]) for s in rows])
    return 0


# -- study ------------------------------------------------------------------------------------
def _study_create(args: argparse.Namespace) -> int:
    with _client(args) as c:
        arenas = [_resolve(c, "/v1/arenas", "name", r) for r in args.arena or []]
        subjects = [_resolve(c, "/v1/subjects", "label", r) for r in args.subject or []]
        st = _check(c.post("/v1/studies", json={"name": args.name, "notes": args.notes}))
        if arenas or subjects:
            st = _check(
                c.post(
                    f"/v1/studies/{st['id']}/members",
                    json={"arena_ids": arenas, "subject_ids": subjects},
                )
            )
    print(
        f"created study {st['id']} {st['name']!r}: {len(st['arena_ids'])} arenas, "
        f"{len(st['subject_ids'])} subjects"
    )
    return 0


def _study_list(args: argparse.Namespace) -> int:
    with _client(args) as c:
        rows = _all(c, "/v1/studies")
    out: list[tuple[Any, ...]] = [("id", "name", "arenas", "subjects", "trials")]
    for s in rows:
        out.append(
            (s["id"], s["name"], len(s["arena_ids"]), len(s["subject_ids"]), s["n_trials_in_study"])
        )
    _table(out)
    return 0


# -- recipe -----------------------------------------------------------------------------------
def _parse_value(text: str) -> Any:
    try:
        return json.loads(text)
    except ValueError:
        return text


def _recipe_create(args: argparse.Namespace) -> int:
    params: dict[str, dict[str, Any]] = {}
    if args.file:
        params = json.loads(Path(args.file).read_text())
    for item in args.set or []:
        key, _, value = item.partition("=")
        section, _, name = key.partition(".")
        if not name or not _:
            raise SystemExit(f"gaitscape recipe: --set wants SECTION.NAME=VALUE, got {item!r}")
        params.setdefault(section, {})[name] = _parse_value(value)
    with _client(args) as c:
        r = _check(c.post("/v1/recipes", json={"name": args.name, "parameters": params}))
    state = "created" if r.get("created", True) else "unchanged (same parameters as)"
    print(f"{state} recipe {r['name']}@{r['version']} ({r['hash'][:12]})")
    return 0


def _recipe_list(args: argparse.Namespace) -> int:
    with _client(args) as c:
        rows = _all(c, "/v1/recipes")
    _table(
        [("recipe", "hash", "created")]
        + [(f"{r['name']}@{r['version']}", r["hash"][:12], r.get("created_at") or "") for r in rows]
    )
    return 0


# -- rescore and waiting ----------------------------------------------------------------------
def wait_for_jobs(
    client: Any, *, progress: bool, timeout_s: float | None = None
) -> list[dict[str, Any]]:
    """Poll ``/v1/jobs`` until none is queued or running; a bar (or lines) with an ETA."""
    from service.progress import Progress

    start = time.monotonic()
    bar: Progress | None = None
    try:
        while True:
            jobs = _all(client, "/v1/jobs")
            done = sum(
                1.0 if j["state"] in ("done", "failed") else float(j.get("progress") or 0)
                for j in jobs
            )
            if bar is None:
                bar = Progress("scoring", total=max(len(jobs), 1), unit="jobs", enabled=progress)
            bar.update(done, total=max(len(jobs), 1))
            if all(j["state"] in ("done", "failed") for j in jobs):
                return jobs
            if timeout_s is not None and time.monotonic() - start > timeout_s:
                raise ServerError(f"scoring did not finish within {timeout_s:.0f} s")
            time.sleep(1.0)
    finally:
        if bar is not None:
            bar.close()


def _rescore(args: argparse.Namespace) -> int:
    with _client(args) as c:
        body: dict[str, Any] = {"recipe": args.recipe}
        if args.arena:
            body["arena_ids"] = [_resolve(c, "/v1/arenas", "name", r) for r in args.arena]
        else:
            body["all"] = True
        r = _check(c.post("/v1/jobs/rescore", json=body))
        print(f"queued {r['count']} jobs under {r['recipe']['name']}@{r['recipe']['version']}")
        if args.wait:
            jobs = wait_for_jobs(c, progress=not args.no_progress, timeout_s=args.timeout)
            failed = [j for j in jobs if j["state"] == "failed"]
            print(f"{len(jobs) - len(failed)} jobs done, {len(failed)} failed")
            return 1 if failed else 0
    return 0


def _report(args: argparse.Namespace) -> int:
    from service.progress import Progress

    with _client(args, timeout_s=3600.0) as c:
        if not args.no_wait:
            wait_for_jobs(c, progress=not args.no_progress, timeout_s=args.timeout)
        params: dict[str, Any] = {"recipe": args.recipe}
        if args.study:
            params["study"] = args.study
        bar = Progress("report", total=None, unit="s", enabled=not args.no_progress)
        try:
            with c.stream("GET", "/v1/correspondence/report", params=params) as resp:
                if resp.status_code >= 400:
                    resp.read()
                    _check(resp)
                chunks = []
                for chunk in resp.iter_bytes():
                    chunks.append(chunk)
                    bar.tick()
        finally:
            bar.close()
    out = Path(args.out)
    tmp = out.with_name(out.name + ".part")
    tmp.write_bytes(b"".join(chunks))
    tmp.replace(out)  # atomic: never a half-written report
    print(f"wrote {out}")
    return 0


# -- parsers ----------------------------------------------------------------------------------
def _common(p: argparse.ArgumentParser) -> None:
    p.add_argument(
        "--server",
        default=os.environ.get("GAITSCAPE_SERVER", DEFAULT_SERVER),
        help=f"server URL (env GAITSCAPE_SERVER; default {DEFAULT_SERVER})",
    )
    p.add_argument(
        "--token",
        default=os.environ.get("GAITSCAPE_TOKEN"),
        help="API token (env GAITSCAPE_TOKEN)",
    )
    p.set_defaults(func=_run)


def _mm_band(values: list[str]) -> list[float]:
    return [float(v) for v in values]


def _create_and_list(
    sub: Any,
    noun: str,
    plural: str,
    create_help: str,
    create: Callable[..., Any],
    list_: Callable[..., Any],
    help_: str = "",
) -> argparse.ArgumentParser:
    """``gaitscape NOUN create|list`` with the server options; returns ``create``'s parser
    for its own arguments."""
    p = sub.add_parser(noun, help=help_ or f"create or list {plural} on a server")
    s = p.add_subparsers(dest=f"{noun}_command", required=True)
    c: argparse.ArgumentParser = s.add_parser("create", help=create_help)
    _common(c)
    c.set_defaults(http_func=create)
    ls = s.add_parser("list", help=f"list {plural}")
    _common(ls)
    ls.set_defaults(http_func=list_)
    return c


def _waiting(p: argparse.ArgumentParser, func: Callable[..., Any]) -> None:
    # rescore and report both wait for scoring jobs under a recipe
    p.add_argument("--recipe", default="default")
    p.add_argument("--timeout", type=float, help="give up waiting after this many seconds")
    p.add_argument("--no-progress", action="store_true")
    _common(p)
    p.set_defaults(http_func=func)


def register_arena(sub: Any) -> None:
    c = _create_and_list(sub, "arena", "arenas", "register an arena", _arena_create, _arena_list)
    c.add_argument("name")
    c.add_argument("--kind", default="runway", help="runway, open_field, treadmill or other")
    c.add_argument(
        "--band-mm",
        nargs=2,
        type=float,
        metavar=("LO", "HI"),
        help="animal-scale wavelength band in mm (about foot size to stride length); "
        "default: the whole scan",
    )
    c.add_argument("--notes", default="")


def register_subject(sub: Any) -> None:
    c = _create_and_list(
        sub,
        "subject",
        "subjects",
        "register a subject and its marker roles",
        _subject_create,
        _subject_list,
    )
    c.add_argument("label")
    c.add_argument("--anterior", required=True, help="marker at the head end (e.g. snout)")
    c.add_argument("--posterior", required=True, help="marker at the tail end (e.g. tailbase)")
    c.add_argument(
        "--foot",
        action="append",
        required=True,
        help="foot marker as ROLE=MARKER (LF, RF, LH, RH); repeat or comma-separate",
    )
    c.add_argument(
        "--markers-of-trial", type=int, help="check the names against this uploaded trial"
    )
    c.add_argument("--species", default="")
    c.add_argument("--body-length-mm", type=float)
    c.add_argument("--mass-g", type=float)


def register_study(sub: Any) -> None:
    c = _create_and_list(
        sub,
        "study",
        "studies",
        "create a study with member arenas and subjects",
        _study_create,
        _study_list,
    )
    c.add_argument("name")
    c.add_argument("--arena", action="append", help="arena name or id; repeat")
    c.add_argument("--subject", action="append", help="subject label or id; repeat")
    c.add_argument("--notes", default="")


def register_recipe(sub: Any) -> None:
    c = _create_and_list(
        sub,
        "recipe",
        "recipes",
        "create a recipe (a new version when the name exists)",
        _recipe_create,
        _recipe_list,
        help_="create or list recipes (scoring parameters)",
    )
    c.add_argument("name")
    c.add_argument("--set", action="append", help="SECTION.NAME=VALUE override; repeat")
    c.add_argument("--file", help="JSON file of overrides by section")


def register_rescore(sub: Any) -> None:
    p = sub.add_parser("rescore", help="queue scoring under a recipe (every record by default)")
    p.add_argument("--arena", action="append", help="only this arena (name or id); repeat")
    p.add_argument("--wait", action="store_true", help="wait for the jobs, with progress")
    _waiting(p, _rescore)


def register_report(sub: Any) -> None:
    p = sub.add_parser("report", help="fetch the correspondence report as one HTML file")
    p.add_argument("--out", required=True, help="file to write (e.g. report.html)")
    p.add_argument("--study", help="limit to this study")
    p.add_argument("--no-wait", action="store_true", help="do not wait for pending scoring")
    _waiting(p, _report)


HTTP_COMMANDS = [
    register_arena,
    register_subject,
    register_study,
    register_recipe,
    register_rescore,
    register_report,
]
