"""Run manifest: what a batch run did to each media file, kept in SQLite in the output folder,
and the summary of a run.

One row per media file (keyed by its path relative to the library folder): the file's
fingerprint, the settings it was captioned with, its status and error, its duration, cue
count and timings, and the SHA-256 of every output written for it. The batch runner reads
it to skip unchanged files, and to tell its own outputs from ones a person has edited.

Crash safety comes from the order of writes: the hashes of the outputs about to be written
are committed first (status "writing", `pending`), then the outputs are renamed into place,
then the row is marked done. A run killed at any point leaves a row that is either done and true, or not
done (the file is captioned again next time, and any output already in place is recognised
by its pending hash).
"""

from __future__ import annotations

import dataclasses
import hashlib
import json
import sqlite3
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Literal

from .errors import OutputError

MANIFEST_NAME = "captioner-batch.sqlite3"
SCHEMA_VERSION = 1
_EDGE_BYTES = 1 << 20  # bytes hashed at each end of a media file

Status = Literal["done", "failed", "writing"]  # "writing": outputs were being put in place

_SCHEMA = """
CREATE TABLE IF NOT EXISTS files (
    path TEXT PRIMARY KEY,          -- relative to the library folder, '/' separated
    size INTEGER NOT NULL,          -- bytes
    mtime_ns INTEGER NOT NULL,
    edge_hash TEXT NOT NULL,        -- SHA-256 of size, first MiB and last MiB
    settings TEXT NOT NULL,         -- digest of everything that changes the outputs
    pack TEXT NOT NULL,
    pack_version TEXT NOT NULL,
    style TEXT NOT NULL,
    style_digest TEXT NOT NULL,
    format TEXT NOT NULL,
    dialogue TEXT,                  -- subtitle file used as dialogue, relative path
    status TEXT NOT NULL,           -- 'done', 'failed' or 'writing'
    error TEXT NOT NULL DEFAULT '',
    duration_ms INTEGER,
    cues INTEGER,
    caption_s REAL,                 -- worker wall time for this file, seconds
    load_s REAL,                    -- model loading paid by this file (0 when warm)
    worker TEXT NOT NULL DEFAULT '',
    finished_at REAL NOT NULL,      -- Unix time
    outputs TEXT NOT NULL DEFAULT '{}',  -- JSON {output path: sha256 of what we wrote} (+ '#merged-from')
    pending TEXT NOT NULL DEFAULT '{}'   -- JSON, hashes of outputs being written right now
);
CREATE TABLE IF NOT EXISTS runs (
    id INTEGER PRIMARY KEY,
    started_at REAL NOT NULL,
    finished_at REAL,
    summary TEXT                    -- JSON summary, NULL while running or when interrupted
);
"""


@dataclass(frozen=True, slots=True)
class Fingerprint:
    """Identity of a media file's content without reading all of it."""

    size: int  # bytes
    mtime_ns: int
    edge_hash: str


@dataclass(frozen=True, slots=True)
class Settings:
    """What a file was captioned with; `digest` covers all of it plus the dialogue file."""

    digest: str
    pack: str
    pack_version: str
    style: str
    style_digest: str
    format: str
    dialogue: str | None = None


@dataclass(frozen=True, slots=True)
class FileRecord:
    """One manifest row."""

    path: str
    fingerprint: Fingerprint
    settings: Settings
    status: Status
    error: str = ""
    duration_ms: int | None = None
    cues: int | None = None
    caption_s: float | None = None
    load_s: float | None = None
    worker: str = ""
    finished_at: float = 0.0
    outputs: dict[str, str] = field(default_factory=dict)
    pending: dict[str, str] = field(default_factory=dict)


def fingerprint(path: Path) -> Fingerprint:
    """Size, modification time and a SHA-256 of the size and the first and last MiB.

    Raises:
        OSError: the file cannot be read.
    """
    info = path.stat()
    digest = hashlib.sha256(str(info.st_size).encode())
    with path.open("rb") as handle:
        digest.update(handle.read(_EDGE_BYTES))
        if info.st_size > _EDGE_BYTES:
            handle.seek(max(_EDGE_BYTES, info.st_size - _EDGE_BYTES))
            digest.update(handle.read(_EDGE_BYTES))
    return Fingerprint(info.st_size, info.st_mtime_ns, digest.hexdigest())


def text_hash(text: str) -> str:
    """SHA-256 of text as write_together stores it (UTF-8)."""
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


def file_hash(path: Path) -> str | None:
    """SHA-256 of a file's bytes, None when it does not exist."""
    try:
        return hashlib.sha256(path.read_bytes()).hexdigest()
    except FileNotFoundError:
        return None


def settings_digest(parts: dict[str, Any]) -> str:
    """A short stable digest of JSON-ready settings.

    >>> settings_digest({"b": 1, "a": 2}) == settings_digest({"a": 2, "b": 1})
    True
    """
    return hashlib.sha256(json.dumps(parts, sort_keys=True, default=str).encode()).hexdigest()[:20]


class RunManifest:
    """The SQLite manifest of one output folder; use as a context manager.

    Raises:
        OutputError: the file is not a manifest, is from a newer captioner, or the folder
            cannot be written.
    """

    def __init__(self, path: Path) -> None:
        self.path = path
        try:
            self.db = sqlite3.connect(path, timeout=30)
            self.db.row_factory = sqlite3.Row
            version = self.db.execute("PRAGMA user_version").fetchone()[0]
            if version > SCHEMA_VERSION:
                raise OutputError(
                    path,
                    f"run manifest has schema {version}, newer than this captioner knows ({SCHEMA_VERSION})",
                    "upgrade captioner or use another output folder",
                )
            self.db.execute("PRAGMA synchronous=FULL")
            with self.db:
                self.db.executescript(_SCHEMA)
                self.db.execute(f"PRAGMA user_version={SCHEMA_VERSION}")
        except sqlite3.DatabaseError as exc:
            raise OutputError(
                path,
                f"not a usable run manifest ({exc})",
                "move it away to start a fresh manifest, or free the folder",
            ) from exc

    def __enter__(self) -> RunManifest:
        return self

    def __exit__(self, *exc: object) -> None:
        self.db.close()

    def records(self) -> dict[str, FileRecord]:
        """Every row, by relative path."""
        return {row["path"]: _record(row) for row in self.db.execute("SELECT * FROM files")}

    def save(self, record: FileRecord) -> None:
        """Insert or replace one row in its own committed transaction."""
        fp, st = record.fingerprint, record.settings
        with self.db:
            self.db.execute(
                "INSERT OR REPLACE INTO files VALUES (?,?,?,?,?,?,?,?,?,?,?,?,?,?,?,?,?,?,?,?,?)",
                (
                    record.path,
                    fp.size,
                    fp.mtime_ns,
                    fp.edge_hash,
                    st.digest,
                    st.pack,
                    st.pack_version,
                    st.style,
                    st.style_digest,
                    st.format,
                    st.dialogue,
                    record.status,
                    record.error,
                    record.duration_ms,
                    record.cues,
                    record.caption_s,
                    record.load_s,
                    record.worker,
                    record.finished_at or time.time(),
                    json.dumps(record.outputs, sort_keys=True),
                    json.dumps(record.pending, sort_keys=True),
                ),
            )

    def start_run(self) -> int:
        with self.db:
            cursor = self.db.execute("INSERT INTO runs (started_at) VALUES (?)", (time.time(),))
        return int(cursor.lastrowid or 0)

    def finish_run(self, run_id: int, summary: dict[str, Any]) -> None:
        with self.db:
            self.db.execute(
                "UPDATE runs SET finished_at = ?, summary = ? WHERE id = ?",
                (time.time(), json.dumps(summary), run_id),
            )


def _record(row: sqlite3.Row) -> FileRecord:
    return FileRecord(
        path=row["path"],
        fingerprint=Fingerprint(row["size"], row["mtime_ns"], row["edge_hash"]),
        settings=Settings(
            row["settings"],
            row["pack"],
            row["pack_version"],
            row["style"],
            row["style_digest"],
            row["format"],
            row["dialogue"],
        ),
        status=row["status"],
        error=row["error"],
        duration_ms=row["duration_ms"],
        cues=row["cues"],
        caption_s=row["caption_s"],
        load_s=row["load_s"],
        worker=row["worker"],
        finished_at=row["finished_at"],
        outputs=json.loads(row["outputs"]),
        pending=json.loads(row["pending"]),
    )


@dataclass(frozen=True, slots=True)
class Summary:
    """What one run did; times in seconds, media in ms."""

    files: int
    done: int
    skipped: int
    failed: int  # failed in this run
    failed_before: int  # failed in an earlier run with the same file and settings, not retried
    media_ms: int  # duration of the files captioned in this run
    cues: int
    wall_s: float
    workers: int  # local worker processes (0: in the calling process, or on the cluster)
    edited: tuple[str, ...]  # outputs a person changed; the new draft went beside each (NAME.draft.EXT)
    failures: tuple[tuple[str, str], ...]  # (file, error), this run's and earlier ones
    merged: int  # files that also got a merged dialogue + sound track
    manifest: str
    cluster: str | None = None  # the Dask scheduler's address, when the work went there

    @property
    def ok(self) -> bool:
        return not (self.failed or self.failed_before)

    @property
    def media_hours_per_hour(self) -> float:
        return (self.media_ms / 3_600_000) / (self.wall_s / 3600) if self.wall_s > 0 else 0.0


def summary_json(summary: Summary) -> dict[str, Any]:
    """The summary as JSON-ready data (for `--json` and the manifest's run table)."""
    data: dict[str, Any] = dataclasses.asdict(summary)
    data["failures"] = [{"file": f, "error": e} for f, e in summary.failures]
    data["edited"] = list(summary.edited)
    data["media_hours"] = round(summary.media_ms / 3_600_000, 4)
    data["media_hours_per_hour"] = round(summary.media_hours_per_hour, 2)
    data["wall_s"] = round(summary.wall_s, 3)
    data["ok"] = summary.ok
    return data


def summary_table(summary: Summary) -> str:
    """A short human summary of a run."""
    workers = (
        "on a Dask cluster"
        if summary.cluster
        else f"{summary.workers} worker{'s' if summary.workers != 1 else ''}"
    )
    lines = [
        f"{'files':<8}{'done':>8}{'skipped':>9}{'failed':>8}{'total':>8}",
        f"{'':<8}{summary.done:>8}{summary.skipped:>9}"
        f"{summary.failed + summary.failed_before:>8}{summary.files:>8}",
        (
            f"media captioned: {summary.media_ms / 3_600_000:.2f} h ({_duration(summary.media_ms / 1000)}) "
            f"in {_duration(summary.wall_s)} "
            f"({summary.media_hours_per_hour:.1f} h of media per hour, {workers})"
        ),
        f"cues written: {summary.cues}"
        + (f"; merged dialogue tracks: {summary.merged}" if summary.merged else ""),
    ]
    if summary.edited:
        lines.append(
            f"kept {len(summary.edited)} hand-edited output(s) as you left them; the new draft is beside "
            "each as NAME.draft.EXT:"
        )
        lines += [f"  {name}" for name in summary.edited]
    if summary.failed_before:
        lines.append(
            f"{summary.failed_before} file(s) failed in an earlier run and were not retried (pass "
            "--retry-failed)"
        )
    if not summary.ok:
        lines.append(
            f"{summary.failed + summary.failed_before} of {summary.files} files failed; see the lines above "
            f"and {summary.manifest}"
        )
    return "\n".join(lines)


def _duration(seconds: float) -> str:
    """
    >>> _duration(3725.2), _duration(42.04)
    ('1 h 2 min', '42.0 s')
    """
    if seconds >= 3600:
        return f"{int(seconds // 3600)} h {int(seconds % 3600 // 60)} min"
    if seconds >= 60:
        return f"{int(seconds // 60)} min {int(seconds % 60)} s"
    return f"{seconds:.1f} s"
