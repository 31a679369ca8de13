"""Upload client for acquisition PCs: push scan and trial files to a gaitscape server.

What is uploaded, and as what
-----------------------------
Folders are walked recursively (sorted, hidden entries skipped). Each file's kind follows
from its extension, refined by its metadata:

=========================  ==========================================================
extension                  kind
=========================  ==========================================================
.ply .pcd .xyz .pts        scan (point cloud)
.las .laz                  scan (lidar point cloud; ground class kept by default)
.tif .tiff                 scan (heightmap; needs dx, dy)
.c3d .tsv                  trial
.csv                       trial, unless the metadata says ``kind: scan`` or gives ``dx``
                           (a CSV heightmap grid)
.npy                       scan if the metadata gives ``dx`` or ``kind: scan``; trial if it
                           gives ``frame_rate_hz``, ``marker_names`` or ``kind: trial``;
                           otherwise the file fails with a message asking for a sidecar
.json                      metadata only, never uploaded (listed as ``ignored``)
anything else              not uploaded, listed as ``ignored`` with the reason
=========================  ==========================================================

Hidden files and folders (names starting with ".") are not walked into; each one met is
listed as ``ignored`` too, so the summary accounts for every entry it saw.

Metadata for a file is merged from, weakest first: the command line (``--arena``,
``--subject``, ``--study``), every ``gaitscape.json`` from the walked root down to the file's
folder (inner folders win), and the file's own sidecar ``<file>.json`` (e.g.
``run3.c3d.json``). Keys: ``kind``, ``arena``, ``subject`` (ids), ``study`` (a name),
``units``, ``frame_rate_hz``, ``dx``, ``dy``, ``ground_only``, ``up_axis``,
``condition``, ``treadmill_speed_m_s``, ``recorded_at``, ``captured_at``, ``marker_names``.

Resume and retries
------------------
Each file is hashed (sha256) and the server asked ``HEAD /v1/uploads/{sha256}`` with the
file's target (``arena_id``, and ``subject_id`` for a trial) first; a file it holds *for that
target* is ``skipped``, and one it holds only under another target is uploaded. This works
with a token that has nothing but the ``upload`` scope. Uploads are retried on connection
errors and 5xx answers (but not 507, disk full) with exponential backoff, a bounded number of
times. A failure prints the server's own ``detail``. A 401 or 403 (token wrong, expired,
revoked or lacking a scope) stops the run at once: every later file is listed as
``not attempted``. The run prints a summary table (file, kind, status
new/duplicate/skipped/ignored/failed/not attempted, id, message) and returns 1 if any file
failed or was not attempted.
"""

from __future__ import annotations

import json
import sys
import time
from collections.abc import Callable, Iterable, Iterator
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, BinaryIO, TextIO, cast

import httpx

from service.console import format_table
from service.progress import Progress
from storage.artifacts import sha256_file

__all__ = [
    "FOLDER_META",
    "PlannedFile",
    "UploadResult",
    "classify",
    "file_sha256",
    "plan_uploads",
    "run_upload",
    "upload_files",
]

FOLDER_META = "gaitscape.json"
SCAN_EXTS = {".ply", ".pcd", ".xyz", ".pts", ".tif", ".tiff", ".las", ".laz"}
TRIAL_EXTS = {".c3d", ".tsv"}
AMBIGUOUS_EXTS = {".csv", ".npy"}
SCAN_META_KEYS = ("units", "dx", "dy", "captured_at", "study", "ground_only")
TRIAL_META_KEYS = (
    "study",
    "frame_rate_hz",
    "units",
    "condition",
    "treadmill_speed_m_s",
    "recorded_at",
    "marker_names",
    "up_axis",
)
CHUNK = 1 << 20
NO_RETRY_STATUSES = {507}  # disk full: trying again will not help


@dataclass
class PlannedFile:
    path: Path
    kind: str | None  # "scan", "trial" or None when it cannot be decided
    meta: dict[str, Any]
    problem: str = ""
    ignored: str = ""  # why the file is not uploaded at all (not an error)


@dataclass
class UploadResult:
    path: Path
    kind: str
    status: str  # new, duplicate, skipped, ignored, failed, not attempted
    id: int | None = None
    sha256: str = ""
    message: str = ""
    attempts: int = 0
    extra: dict[str, Any] = field(default_factory=dict)


# -- planning ---------------------------------------------------------------------------------
def _read_json(path: Path) -> dict[str, Any]:
    try:
        value = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, json.JSONDecodeError) as exc:
        raise ValueError(f"{path}: unreadable metadata JSON ({exc})") from exc
    if not isinstance(value, dict):
        raise ValueError(f"{path}: metadata must be a JSON object")
    return value


def classify(path: Path, meta: dict[str, Any]) -> tuple[str | None, str]:
    """``(kind, problem)`` for a file from its extension and metadata (see module docs)."""
    ext = path.suffix.lower()
    declared = meta.get("kind")
    if declared is not None and declared not in ("scan", "trial"):
        return None, f"metadata kind must be 'scan' or 'trial', got {declared!r}"
    if ext in SCAN_EXTS or ext in TRIAL_EXTS:
        natural = "scan" if ext in SCAN_EXTS else "trial"
        if declared is not None and declared != natural:
            return None, f"{ext} files are {natural}s, but the metadata says kind {declared!r}"
        return natural, ""
    if declared is not None:
        return declared, ""
    if ext == ".csv":
        return ("scan" if "dx" in meta else "trial"), ""
    if "dx" in meta:
        return "scan", ""
    if "frame_rate_hz" in meta or "marker_names" in meta:
        return "trial", ""
    return None, (
        "an .npy file needs a sidecar <file>.json giving dx (heightmap) or frame_rate_hz and "
        "marker_names (trial), or kind"
    )


def _walk(root: Path, hidden: list[Path]) -> Iterator[Path]:
    if root.is_file():
        yield root
        return
    for child in sorted(root.iterdir()):
        if child.name.startswith("."):
            hidden.append(child)
            continue
        if child.is_dir():
            yield from _walk(child, hidden)
        elif child.is_file():
            yield child


def _folder_meta(root: Path, folder: Path, cache: dict[Path, dict[str, Any]]) -> dict[str, Any]:
    chain = [folder, *folder.parents]
    top = root if root.is_dir() else root.parent
    merged: dict[str, Any] = {}
    for directory in reversed(chain):
        if directory != top and top not in directory.parents:
            continue
        if directory not in cache:
            meta_file = directory / FOLDER_META
            cache[directory] = _read_json(meta_file) if meta_file.is_file() else {}
        merged.update(cache[directory])
    return merged


def plan_uploads(
    paths: Iterable[Path], *, defaults: dict[str, Any] | None = None
) -> list[PlannedFile]:
    """Every uploadable file under ``paths`` with its kind and merged metadata."""
    cache: dict[Path, dict[str, Any]] = {}
    planned: list[PlannedFile] = []
    seen: set[Path] = set()
    base = {k: v for k, v in (defaults or {}).items() if v is not None}
    for root in paths:
        root = Path(root)
        if not root.exists():
            planned.append(PlannedFile(root, None, {}, "no such file or folder"))
            continue
        hidden: list[Path] = []
        for path in _walk(root, hidden):
            ext = path.suffix.lower()
            if path.resolve() in seen:
                continue
            seen.add(path.resolve())
            if ext == ".json":
                planned.append(PlannedFile(path, None, {}, ignored="metadata file, not uploaded"))
                continue
            if ext not in SCAN_EXTS | TRIAL_EXTS | AMBIGUOUS_EXTS:
                why = f"extension {ext or '(none)'} is not a scan or trial format"
                planned.append(PlannedFile(path, None, {}, ignored=why))
                continue
            try:
                meta = {**base, **_folder_meta(root, path.parent, cache)}
                sidecar = path.with_name(path.name + ".json")
                if sidecar.is_file():
                    meta.update(_read_json(sidecar))
            except ValueError as exc:
                planned.append(PlannedFile(path, None, {}, str(exc)))
                continue
            kind, problem = classify(path, meta)
            planned.append(PlannedFile(path, kind, meta, problem))
        for path in hidden:
            what = "hidden folder" if path.is_dir() else "hidden file"
            planned.append(PlannedFile(path, None, {}, ignored=f"{what}, not walked"))
    return planned


def _is_id(value: Any) -> bool:
    """A record id as the metadata may give it: an int, or a string of digits."""
    if isinstance(value, bool):
        return False
    return isinstance(value, int) or (isinstance(value, str) and value.strip().isdigit())


def _server_meta(kind: str, meta: dict[str, Any]) -> tuple[dict[str, Any], str]:
    """The ``meta`` JSON the server expects, or a problem when a required id is missing."""
    keys = SCAN_META_KEYS if kind == "scan" else TRIAL_META_KEYS
    out = {k: meta[k] for k in keys if meta.get(k) is not None}
    arena = meta.get("arena", meta.get("arena_id"))
    if arena is None:
        return out, "no arena id: give --arena or 'arena' in gaitscape.json or a sidecar"
    if not _is_id(arena):  # a name here gave a bare "HTTP 422" from the resume check
        return (
            out,
            f"'arena' must be an arena id (a whole number), got {arena!r}: "
            "`gaitscape arena list` shows the ids",
        )
    if kind == "trial":
        subject = meta.get("subject", meta.get("subject_id"))
        if subject is None:
            return out, "no subject id: give --subject or 'subject' in the metadata"
        if not _is_id(subject):
            return (
                out,
                f"'subject' must be a subject id (a whole number), got {subject!r}: "
                "`gaitscape subject list` shows the ids",
            )
        out.update(arena_id=arena, subject_id=subject)
    else:
        out["arena"] = arena  # goes in the URL, removed before sending
    return out, ""


file_sha256 = sha256_file  # the client hashes exactly as the store names files


# -- sending ----------------------------------------------------------------------------------
class _ProgressReader:
    """File wrapper that reports bytes read (httpx streams multipart files by ``read``)."""

    def __init__(self, fh: BinaryIO, update: Callable[[int], Any]) -> None:
        self._fh = fh
        self._update = update

    def read(self, size: int = -1) -> bytes:
        data = self._fh.read(size)
        self._update(len(data))
        return data

    def seek(self, offset: int, whence: int = 0) -> int:
        return self._fh.seek(offset, whence)

    def tell(self) -> int:
        return self._fh.tell()

    def fileno(self) -> int:
        return self._fh.fileno()


def _detail(response: httpx.Response) -> str:
    try:
        body = response.json()
    except ValueError:
        return response.text[:300]
    return str(body.get("detail", body)) if isinstance(body, dict) else str(body)


class _Sender:
    def __init__(
        self,
        client: httpx.Client,
        *,
        retries: int,
        backoff_s: float,
        sleep: Callable[[float], None],
        progress: bool,
    ) -> None:
        self.client = client
        self.retries = retries
        self.backoff_s = backoff_s
        self.sleep = sleep
        self.progress = progress
        # One overall bar for the whole run (bytes of every file to send, in MiB).
        self.bar: Progress | None = None
        self.done_bytes = 0

    def _retrying(self, send: Callable[[], httpx.Response]) -> tuple[httpx.Response, int]:
        attempt = 0
        while True:
            attempt += 1
            try:
                response = send()
            except httpx.TransportError:
                if attempt > self.retries:
                    raise
            else:
                retry = (
                    response.status_code >= 500 and response.status_code not in NO_RETRY_STATUSES
                )
                if not retry or attempt > self.retries:
                    return response, attempt
            # Exponential backoff, capped so a long outage does not stall a run for minutes.
            self.sleep(min(self.backoff_s * 2 ** (attempt - 1), 30.0))

    def has(self, sha256: str, target: dict[str, Any]) -> tuple[httpx.Response, int]:
        """The server's answer to "do you hold this file for this target?" (200 or 404)."""
        return self._retrying(lambda: self.client.head(f"/v1/uploads/{sha256}", params=target))

    def record_id(self, sha256: str, target: dict[str, Any]) -> int | None:
        response = self.client.get(f"/v1/uploads/{sha256}", params=target)
        if response.status_code != 200:
            return None
        records = response.json().get("records") or []
        return records[0]["id"] if records else None

    def upload(self, path: Path, url: str, meta: dict[str, Any]) -> tuple[httpx.Response, int]:
        base = self.done_bytes  # the overall bar restarts this file's share on a retry
        with open(path, "rb") as fh:

            def send() -> httpx.Response:
                fh.seek(0)
                sent = [0]

                def on_read(n: int) -> None:
                    sent[0] += n
                    if self.bar is not None:
                        self.bar.update((base + sent[0]) / _MIB)

                reader = _ProgressReader(fh, on_read)
                return self.client.post(
                    url,
                    # httpx types files as IO[bytes] but calls only read/seek/tell/fileno.
                    files={"file": (path.name, cast(BinaryIO, reader), "application/octet-stream")},
                    data={"meta": json.dumps(meta)},
                )

            return self._retrying(send)


_HEAD_REASONS = {
    401: "the token is missing, wrong, expired or revoked",
    403: "the token lacks a scope this needs",
}


def _target(kind: str, meta: dict[str, Any]) -> dict[str, Any]:
    """The resume check's query: this file's target, so only it counts as "already there"."""
    if kind == "scan":
        return {"kind": "scan", "arena_id": meta["arena"]}
    return {"kind": "trial", "arena_id": meta["arena_id"], "subject_id": meta["subject_id"]}


def _failed(item: PlannedFile, kind: str, response: httpx.Response, **kw: Any) -> UploadResult:
    detail = _detail(response) if response.request.method != "HEAD" else ""
    if not detail:  # a HEAD answer has no body to quote
        detail = _HEAD_REASONS.get(response.status_code, "")
    message = f"HTTP {response.status_code}: {detail}".rstrip(": ")
    return UploadResult(item.path, kind, "failed", message=message, **kw)


def _upload_one(sender: _Sender, item: PlannedFile) -> UploadResult:
    kind = item.kind or "?"
    if item.ignored:
        return UploadResult(item.path, "-", "ignored", message=item.ignored)
    if item.kind is None:
        return UploadResult(item.path, kind, "failed", message=item.problem)
    meta, problem = _server_meta(item.kind, item.meta)
    if problem:
        return UploadResult(item.path, kind, "failed", message=problem)
    sha = file_sha256(item.path)
    target = _target(item.kind, meta)
    try:
        check, _ = sender.has(sha, target)
        if check.status_code == 200:
            return UploadResult(
                item.path,
                kind,
                "skipped",
                id=sender.record_id(sha, target),
                sha256=sha,
                message="already on the server for this target",
            )
        if check.status_code != 404:
            return _failed(item, kind, check, sha256=sha)
        url = f"/v1/arenas/{meta.pop('arena')}/scans" if item.kind == "scan" else "/v1/trials"
        response, attempts = sender.upload(item.path, url, meta)
    except httpx.HTTPError as exc:
        return UploadResult(
            item.path, kind, "failed", sha256=sha, message=f"{type(exc).__name__}: {exc}"
        )
    if response.status_code in (200, 201):
        body = response.json()
        status = "new" if response.status_code == 201 else "duplicate"
        return UploadResult(
            item.path,
            kind,
            status,
            id=body.get("id"),
            sha256=sha,
            attempts=attempts,
            extra={"job_id": body.get("job_id")},
        )
    return _failed(item, kind, response, sha256=sha, attempts=attempts)


def upload_files(
    planned: Iterable[PlannedFile],
    *,
    client: httpx.Client,
    retries: int = 4,
    backoff_s: float = 0.5,
    sleep: Callable[[float], None] = time.sleep,
    progress: bool = True,
) -> list[UploadResult]:
    """Upload each planned file through ``client`` (base URL and token already set)."""
    sender = _Sender(client, retries=retries, backoff_s=backoff_s, sleep=sleep, progress=progress)
    planned = list(planned)
    sizes = {item.path: _size(item.path) for item in planned if not item.ignored}
    results: list[UploadResult] = []
    stop = ""
    with Progress("upload", total=sum(sizes.values()) / _MIB, unit="MiB", enabled=progress) as bar:
        sender.bar = bar
        for item in planned:
            if stop and not item.ignored:
                results.append(UploadResult(item.path, item.kind or "?", "not attempted",
                                            message=stop))  # fmt: skip
                continue
            result = _upload_one(sender, item)
            # Sent, skipped or failed, this file's share of the run is over.
            sender.done_bytes += sizes.get(item.path, 0)
            bar.update(sender.done_bytes / _MIB)
            results.append(result)
            if result.status == "failed" and result.message.startswith(("HTTP 401", "HTTP 403")):
                # A token problem fails every file alike: stop instead of repeating it.
                stop = f"stopped after {result.path.name}: {result.message}"
    return results


_MIB = float(1 << 20)


def _size(path: Path) -> int:
    try:
        return path.stat().st_size
    except OSError:
        return 0


def summary_table(results: list[UploadResult]) -> str:

    rows = [("file", "kind", "status", "id", "message")]
    rows += [
        (str(r.path), r.kind, r.status, "" if r.id is None else str(r.id), r.message)
        for r in results
    ]
    statuses = ("new", "duplicate", "skipped", "ignored", "failed", "not attempted")
    counts = {s: sum(r.status == s for r in results) for s in statuses}
    tail = ", ".join(f"{n} {s}" for s, n in counts.items())
    return format_table(rows) + f"\n{len(results)} files: {tail}"


def run_upload(
    paths: Iterable[Path],
    *,
    server: str | None = None,
    token: str | None = None,
    arena: int | None = None,
    subject: int | None = None,
    study: str | None = None,
    retries: int = 4,
    backoff_s: float = 0.5,
    progress: bool = True,
    client: httpx.Client | None = None,
    sleep: Callable[[float], None] = time.sleep,
    out: TextIO | None = None,
) -> int:
    """Plan, upload, print the summary; 0 when nothing failed, 1 otherwise."""
    out = out if out is not None else sys.stdout
    planned = plan_uploads(paths, defaults={"arena": arena, "subject": subject, "study": study})
    own_client = client is None
    if client is None:
        if not server:
            raise ValueError("give server or client")
        client = httpx.Client(base_url=server, timeout=httpx.Timeout(60.0, connect=10.0))
    if token:
        client.headers["Authorization"] = f"Bearer {token}"
    try:
        results = upload_files(
            planned,
            client=client,
            retries=retries,
            backoff_s=backoff_s,
            sleep=sleep,
            progress=progress,
        )
    finally:
        if own_client:
            client.close()
    print(summary_table(results), file=out)
    return 1 if any(r.status in ("failed", "not attempted") for r in results) else 0
