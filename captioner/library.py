"""Batch runs over a media library: find files, caption them in parallel, write outputs safely.

The run is split in two roles. Workers (`captioner.workers`: processes on this machine, or
a Dask cluster) only read media and return texts. The driver, here, owns every write:
outputs, mirrored folders and the run manifest (`captioner.manifest`), so workers need read
access to the media by the same path and nothing else.

Outputs of a video `NAME.EXT` (beside it, or mirrored under the output folder):
`NAME.sounds.vtt|srt` (the sound captions), `NAME.sounds.json` (events and decisions) and,
when a dialogue subtitle `NAME.srt|vtt` (or `NAME.LANG.srt|vtt`) sits beside the video,
`NAME.merged.vtt|srt`.
An output that differs from what the manifest says we wrote (and is not provably ours,
see `captioner.ownership`) was edited by a person: it is left alone and the new draft is
written beside it as `NAME.sounds.draft.vtt` (`ownership.draft_path`). A merged track is
built from the sound track as the person left it. The outputs of one file land together
(`formats.write_together`).
"""

from __future__ import annotations

import dataclasses
import os
import time
from collections.abc import Callable
from contextlib import closing
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from . import ownership, packs, pipeline
from .dialogue_sources import choose_beside
from .errors import CaptionerError, MediaError, OutputError
from .formats import Format, write_together
from .manifest import (
    MANIFEST_NAME,
    FileRecord,
    Fingerprint,
    RunManifest,
    Settings,
    Summary,
    file_hash,
    fingerprint,
    settings_digest,
    summary_json,
    text_hash,
)
from .style import Style
from .workers import Drafted, Job, dispatch

MEDIA_EXTENSIONS = frozenset(
    {
        *(
            ".mp4",
            ".m4v",
            ".mov",
            ".mkv",
            ".webm",
            ".avi",
            ".wmv",
            ".flv",
            ".mpg",
            ".mpeg",
            ".m2ts",
            ".mts",
            ".ts",
            ".mxf",
            ".3gp",
            ".ogv",
            ".vob",
        ),
        *(".wav", ".mp3", ".m4a", ".aac", ".flac", ".ogg", ".oga", ".opus", ".wma", ".aif", ".aiff"),
    }
)
_MERGED_FROM = "#merged-from"  # manifest key suffix: hash of the edited sound track a merge used
_OUTPUT_LAYOUT = 2  # bump when output names or contents change for the same settings


# -- finding the library ----------------------------------------------------------------------


@dataclass(frozen=True, slots=True)
class MediaFile:
    """A media file found in the library, with where its outputs go."""

    path: Path  # absolute
    relative: str  # '/' separated, relative to the library folder
    outputs: dict[str, Path]  # kind -> output path ("caption", "events", maybe "merged")
    dialogue: Path | None  # subtitle sidecar found beside it
    dialogue_notice: str = ""  # how the sidecar was picked among several


def find_media(
    folder: Path, *, output_dir: Path | None = None, fmt: Format = "vtt", dialogue_language: str | None = None
) -> list[MediaFile]:
    """Media files under `folder` by extension (any case), skipping hidden files and folders
    and the output folder; sorted by relative path. `dialogue_language` picks among
    language-tagged subtitles beside a video.

    Raises:
        MediaError: `folder` is not a folder.
    """
    folder = folder.absolute()
    if not folder.is_dir():
        raise MediaError(folder, "folder not found", "check the path of the media library")
    skip = output_dir.absolute() if output_dir else None
    found: list[MediaFile] = []
    for here, dirnames, filenames in os.walk(folder):
        base = Path(here)
        dirnames[:] = sorted(d for d in dirnames if not d.startswith(".") and base / d != skip)
        media = sorted(
            n for n in filenames if not n.startswith(".") and Path(n).suffix.lower() in MEDIA_EXTENSIONS
        )
        stems = [Path(n).stem.lower() for n in media]
        ours = {
            f"{s}{tail}"
            for s in stems
            for tail in (f".sounds.{fmt}", ".sounds.json", ".merged.vtt", ".merged.srt")
        }
        for name in media:
            stem = Path(name).stem
            # Two videos with one stem (a.mp4, a.mkv) would share outputs: name those in full.
            label = name if stems.count(stem.lower()) > 1 else stem
            # Another video's own subtitles (b.en.srt beside b.en.mp4) are not this one's.
            others = {f"{o}{e}" for o in stems if o != stem.lower() for e in (".srt", ".vtt")}
            # Our drafts and backups (a.sounds.draft.vtt) are never anyone's dialogue either.
            kept = {n.lower() for n in filenames if ownership.KEPT_NAME.search(n)}
            choice = choose_beside(
                base / name, filenames, stem, language=dialogue_language, taken=ours | others | kept
            )
            dialogue = choice.path
            relative = (base / name).relative_to(folder)
            target = (skip / relative.parent) if skip else base
            outputs = {"caption": target / f"{label}.sounds.{fmt}", "events": target / f"{label}.sounds.json"}
            if dialogue is not None:
                outputs["merged"] = target / f"{label}.merged{dialogue.suffix.lower()}"
            found.append(MediaFile(base / name, relative.as_posix(), outputs, dialogue, choice.notice))
    return found


# -- the driver ---------------------------------------------------------------------------------


@dataclass(frozen=True, slots=True)
class BatchOptions:
    """Everything a batch run needs. `workers`: processes on this machine, 0 = in this
    process; ignored when `cluster` (a Dask scheduler address) is given."""

    folder: Path
    style: Style
    output_dir: Path | None = None
    fmt: Format = "vtt"
    pack: str = packs.DEFAULT_PACK
    workers: int = 1
    cluster: str | None = None
    retry_failed: bool = False
    audio_stream: str | None = None  # index, language or title words, for every file
    dialogue_language: str | None = None


@dataclass(frozen=True, slots=True)
class _Task:
    item: MediaFile
    fingerprint: Fingerprint
    settings: Settings
    previous: FileRecord | None


def run_batch(
    options: BatchOptions,
    *,
    progress: bool = False,
    say: Callable[[str], None] = lambda message: None,
    report_failure: Callable[[str], None] = lambda message: None,
) -> Summary:
    """Caption every new or changed media file of a library; see the module notes.

    `say` gets notices, `report_failure` one line per failed file as it happens. Local
    workers are started with "spawn": a script calling this needs the usual
    `if __name__ == "__main__":` guard.

    Raises:
        MediaError: the library folder does not exist.
        OutputError: the output folder or its manifest cannot be used.
        PackError: the model pack cannot be installed (local workers only).
        CaptionerError: --cluster without Dask installed, or no scheduler at the address.
    """
    began = time.perf_counter()
    root = (options.output_dir or options.folder).absolute()
    items = find_media(
        options.folder,
        output_dir=options.output_dir,
        fmt=options.fmt,
        dialogue_language=options.dialogue_language,
    )
    for item in items:
        if item.dialogue_notice:
            say(item.dialogue_notice)
    try:
        root.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise OutputError(
            root, f"cannot create the output folder ({exc.strerror})", "choose a writable folder with -o"
        ) from exc
    pack_manifest = packs.read_manifest(options.pack, packs.cache_root())
    base = {
        "pack": pack_manifest.name,
        "pack_version": pack_manifest.version,
        "style": dataclasses.asdict(options.style),
        "format": options.fmt,
        "layout": _OUTPUT_LAYOUT,
    }
    # Only when set, so that runs without them keep their earlier settings digest.
    for key in ("audio_stream", "dialogue_language"):
        if getattr(options, key) is not None:
            base[key] = getattr(options, key)
    with RunManifest(root / MANIFEST_NAME) as manifest:
        run_id = manifest.start_run()
        records = manifest.records()
        tasks: list[_Task] = []
        skipped, failures_before, failures_now = 0, [], []
        for item in items:
            previous = records.get(item.relative)
            try:
                fp = fingerprint(item.path)
            except OSError as exc:
                failures_now.append(
                    (item.relative, f"{item.path}: cannot read ({exc.strerror}); check its permissions")
                )
                report_failure(failures_now[-1][1])
                continue
            settings = _settings(item, base, options)
            same = (
                previous is not None
                and previous.fingerprint == fp
                and previous.settings.digest == settings.digest
            )
            if (
                same
                and previous is not None
                and previous.status == "done"
                and all(p.exists() for p in item.outputs.values())
                and _merge_is_current(item, previous, root)
            ):
                skipped += 1
            elif same and previous is not None and previous.status == "failed" and not options.retry_failed:
                failures_before.append((item.relative, previous.error))
                report_failure(f"{previous.error} (in an earlier run; --retry-failed tries again)")
            else:
                tasks.append(_Task(item, fp, settings, previous))
        if not options.cluster and tasks and options.workers > 0:
            _ensure_installed(pack_manifest, say)
        tally = _Tally()
        cache = None if options.cluster else str(packs.cache_root())
        # A user's pack manifest is a path: make it absolute, as workers may start elsewhere.
        pack = options.pack if options.pack in packs.builtin_packs() else str(Path(options.pack).absolute())
        with _Bar(progress and bool(tasks), tasks) as bar:
            failed_line = bar.wrap(report_failure)
            jobs = {t.item.relative: t for t in tasks}
            # Largest first, so the last files running in parallel are the short ones.
            ordered = sorted(tasks, key=lambda t: -t.fingerprint.size)
            jobs_in_order = [_job(t, options, pack, cache) for t in ordered]
            with closing(
                dispatch(jobs_in_order, workers=options.workers, cluster=options.cluster)
            ) as results:
                for drafted in results:
                    task = jobs[drafted.relative]
                    _store(task, drafted, root, manifest, tally, options.style)
                    if drafted.notice:
                        bar.wrap(say)(drafted.notice)
                    if tally.last_error:
                        failures_now.append((task.item.relative, tally.last_error))
                        failed_line(tally.last_error)
                    bar.advance(task.fingerprint.size, drafted.duration_ms)
        summary = Summary(
            files=len(items),
            done=tally.done,
            skipped=skipped,
            failed=len(failures_now),
            failed_before=len(failures_before),
            media_ms=tally.media_ms,
            cues=tally.cues,
            wall_s=time.perf_counter() - began,
            workers=0 if options.cluster else options.workers,
            cluster=options.cluster,
            edited=tuple(tally.edited),
            failures=tuple(failures_now + failures_before),
            merged=tally.merged,
            manifest=str(manifest.path),
        )
        manifest.finish_run(run_id, summary_json(summary))
    return summary


def _settings(item: MediaFile, base: dict[str, Any], options: BatchOptions) -> Settings:
    dialogue = None
    parts = dict(base)
    if item.dialogue is not None:
        dialogue = item.dialogue.relative_to(options.folder.absolute()).as_posix()
        try:
            stat = item.dialogue.stat()
            parts["dialogue"] = [dialogue, stat.st_size, stat.st_mtime_ns]
        except OSError:
            parts["dialogue"] = [dialogue]
    style_digest = settings_digest(base["style"])
    return Settings(
        settings_digest(parts),
        base["pack"],
        base["pack_version"],
        options.style.name,
        style_digest,
        options.fmt,
        dialogue,
    )


def _job(task: _Task, options: BatchOptions, pack: str, cache: str | None) -> Job:
    dialogue = str(task.item.dialogue) if task.item.dialogue else None
    return Job(
        str(task.item.path),
        task.item.relative,
        options.style,
        options.fmt,
        pack,
        cache,
        dialogue,
        options.audio_stream,
        options.dialogue_language,
    )


def _ensure_installed(manifest: packs.PackManifest, say: Callable[[str], None]) -> None:
    """Install a downloaded pack once here, before several workers would race to do it."""
    if manifest.is_downloaded and not packs.is_installed(manifest):
        say(f"first use: installing model pack {manifest.name} into {manifest.root}")
        packs.install(manifest, say=say)


class _Tally:
    """Counts of the files stored so far."""

    def __init__(self) -> None:
        self.done = self.media_ms = self.cues = self.merged = 0
        self.edited: list[str] = []
        self.last_error = ""


def _store(
    task: _Task, drafted: Drafted, root: Path, manifest: RunManifest, tally: _Tally, style: Style
) -> None:
    """Put one file's outputs in place and record it; see `captioner.manifest` for the order."""
    tally.last_error = ""
    previous = task.previous
    old_outputs = dict(previous.outputs) if previous else {}
    old_pending = dict(previous.pending) if previous else {}
    record = FileRecord(
        task.item.relative,
        task.fingerprint,
        task.settings,
        "failed",
        drafted.error,
        drafted.duration_ms or None,
        None,
        drafted.caption_s,
        drafted.load_s,
        drafted.worker,
        outputs=old_outputs,
        pending=old_pending,
    )
    error = drafted.error
    if not error and drafted.pack_version != task.settings.pack_version:
        error = (
            f"{task.item.path}: worker {drafted.worker} has model pack version {drafted.pack_version}, the "
            f"run expects {task.settings.pack_version}; install the same pack on every worker"
        )
    recorded = {h for k, h in old_outputs.items() if not k.endswith(_MERGED_FROM)} | set(old_pending.values())

    def ours(path: Path) -> bool:
        return file_hash(path) in recorded or ownership.is_ours(path)

    texts = dict(drafted.texts)
    edited = {
        kind for kind in texts if task.item.outputs[kind].exists() and not ours(task.item.outputs[kind])
    }
    merged_from: dict[str, str] = {}  # the edited sound track a merge was built from, by its hash
    if not error and "caption" in edited and "merged" in texts and task.item.dialogue is not None:
        caption = task.item.outputs["caption"]
        try:  # the person's sound track, not the machine draft, goes into the delivered merge
            texts["merged"] = pipeline.merge_kept_track(caption, task.item.dialogue, style)
            merged_from[_key(caption, root) + _MERGED_FROM] = file_hash(caption) or ""
        except CaptionerError as exc:
            error = str(exc)
    if error:
        manifest.save(dataclasses.replace(record, error=error, finished_at=time.time()))
        tally.last_error = error
        return
    writes: list[tuple[Path, str, str]] = []
    for kind, text in texts.items():
        target = task.item.outputs[kind]
        if kind in edited:
            tally.edited.append(_key(target, root))
            target = ownership.draft_path(target, ours)
        writes.append((target, text, text_hash(text)))
    pending = {_key(path, root): digest for path, _, digest in writes}
    manifest.save(
        dataclasses.replace(
            record,
            status="writing",
            error="",
            cues=drafted.cues,
            pending=old_pending | pending,
            finished_at=time.time(),
        )
    )
    try:
        _put([(path, text) for path, text, digest in writes if file_hash(path) != digest])
    except OutputError as exc:
        # Nothing of this file landed; "writing" makes the next run try it again by itself.
        manifest.save(
            dataclasses.replace(
                record,
                status="writing",
                error=str(exc),
                pending=old_pending | pending,
                finished_at=time.time(),
            )
        )
        tally.last_error = str(exc)
        return
    manifest.save(
        dataclasses.replace(
            record,
            status="done",
            error="",
            cues=drafted.cues,
            outputs=old_outputs | pending | merged_from,
            pending={},
            finished_at=time.time(),
        )
    )
    tally.done += 1
    tally.media_ms += drafted.duration_ms
    tally.cues += drafted.cues
    tally.merged += "merged" in drafted.texts


def _merge_is_current(item: MediaFile, previous: FileRecord, root: Path) -> bool:
    """Whether the merged track was built from the sound track as it is now: a person who
    edits the sound track after a run gets the merge rebuilt from it by the next run."""
    if "merged" not in item.outputs:
        return True
    key = _key(item.outputs["caption"], root)
    current = file_hash(item.outputs["caption"])
    return current in (previous.outputs.get(key), previous.outputs.get(key + _MERGED_FROM))


def _key(path: Path, root: Path) -> str:
    return path.relative_to(root).as_posix() if path.is_relative_to(root) else str(path)


def _put(files: list[tuple[Path, str]]) -> None:
    """Write the files of one media file together (clearing first what a killed run left)."""
    for path, _ in files:
        try:
            path.parent.mkdir(parents=True, exist_ok=True)
        except OSError as exc:
            raise OutputError(
                path.parent,
                f"cannot create the folder ({exc.strerror})",
                "check the output folder's permissions",
            ) from exc
    write_together(list(files))


# -- progress -----------------------------------------------------------------------------------


class _Bar:
    """One bar over the bytes of the files to caption (so long files weigh more in the ETA),
    showing files and hours of media done; drawn only on a terminal."""

    def __init__(self, enabled: bool, tasks: list[_Task]) -> None:
        import sys

        self.bar: Any = None
        self.files, self.count, self.media_ms = len(tasks), 0, 0
        if enabled and sys.stderr.isatty():
            from tqdm import tqdm

            total = sum(t.fingerprint.size for t in tasks)
            self.bar = tqdm(
                total=total,
                file=sys.stderr,
                leave=False,
                bar_format="{desc} {percentage:3.0f}%|{bar}| {elapsed}<{remaining}",
            )
            self._show()

    def __enter__(self) -> _Bar:
        return self

    def __exit__(self, *exc: object) -> None:
        if self.bar is not None:
            self.bar.close()

    def _show(self) -> None:
        self.bar.set_description_str(
            f"{self.count}/{self.files} files, {self.media_ms / 3_600_000:.2f} h of media", refresh=True
        )

    def advance(self, size: int, media_ms: int) -> None:
        self.count += 1
        self.media_ms += media_ms
        if self.bar is not None:
            self.bar.update(size)
            self._show()

    def wrap(self, emit: Callable[[str], None]) -> Callable[[str], None]:
        """`emit`, printed above the bar instead of through it."""
        if self.bar is None:
            return emit
        from tqdm import tqdm

        def above(message: str) -> None:
            with tqdm.external_write_mode(file=self.bar.fp):
                emit(message)

        return above
