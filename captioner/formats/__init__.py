"""Output formats: one writer per format, and the one safe way to put a file on disk."""

from __future__ import annotations

import contextlib
import os
import secrets
import shutil
import tempfile
from collections.abc import Callable, Sequence
from pathlib import Path
from typing import Literal

from ..cues import Cue
from ..errors import OutputError
from . import srt, webvtt

Format = Literal["vtt", "srt"]


def _read_umask() -> int:
    # Read once at import: os.umask can only be read by setting it, which is not thread-safe.
    current = os.umask(0)
    os.umask(current)
    return current


_UMASK = _read_umask()
WRITERS: dict[str, Callable[[Sequence[Cue], str], str]] = {"vtt": webvtt.dumps, "srt": srt.dumps}


def sound_track_path(media: Path, suffix: str) -> Path:
    """Default output beside a media file: NAME.sounds.vtt / .srt / .json.

    Never NAME.vtt: players load that as the video's subtitles and editors keep their
    dialogue there, so a draft written under that name could shadow or replace it.

    >>> sound_track_path(Path("clips/talk.mp4"), "vtt").as_posix()
    'clips/talk.sounds.vtt'
    """
    return Path(media).with_name(f"{Path(media).stem}.sounds.{suffix}")


def merged_track_path(media: Path, suffix: str) -> Path:
    """Default merged track beside a media file: NAME.merged.vtt / .srt."""
    return Path(media).with_name(f"{Path(media).stem}.merged.{suffix}")


def write_atomic(path: Path, text: str, *, force: bool = False) -> None:
    """Write text as UTF-8 via a temporary file and a rename, so a crash never leaves half a file.

    Raises:
        OutputError: the file exists and force is off, or the folder is not writable.
    """
    path = Path(path)
    if path.exists() and not force:
        raise OutputError(
            path,
            "already exists (it may hold hand edits)",
            "pass --force to replace it, or choose another -o",
        )
    write_together([(path, text)])


def write_together(files: Sequence[tuple[Path, str | bytes]]) -> None:
    """Put several files in place as one step: all or none of them land.

    Every text (UTF-8; bytes as they are) goes to a hidden temporary file beside its target
    first (a full disk fails here, before any target changes); then each is renamed over its
    target, with a hard link
    to the old file kept aside until all renames are done, so a failure puts every old file
    back. Existing targets are replaced: the caller has decided they may be. Nothing is left
    behind but the targets, unless the process is killed (then only hidden `.NAME.*.tmp`
    files, which the next write of that name clears first).

    Raises:
        OutputError: a folder is missing or not writable, or a write or rename failed.
    """
    temporaries: list[tuple[Path, Path]] = []
    asides: list[tuple[Path, Path | None]] = []  # (target, its old content aside, or None if new)
    for path, _ in files:
        clear_strays(Path(path))
    try:
        for path, text in files:
            temporaries.append((Path(path), _temporary(Path(path), text)))
        for path, temporary in temporaries:
            asides.append((path, _set_aside(path)))
            os.replace(temporary, path)
    except OSError as exc:
        _roll_back(asides)
        failed = asides[-1][0] if asides else (temporaries[-1][0] if temporaries else Path("."))
        raise OutputError(
            failed, f"cannot write ({exc.strerror})", "check free space and permissions"
        ) from exc
    except BaseException:
        _roll_back(asides)
        raise
    finally:
        for _, temporary in temporaries:
            temporary.unlink(missing_ok=True)
        for _, aside in asides:
            if aside is not None:
                aside.unlink(missing_ok=True)


def clear_strays(path: Path) -> None:
    """Remove the hidden temporaries a killed run may have left beside `path`."""
    escaped = "".join(f"[{c}]" if c in "*?[" else c for c in Path(path).name)
    for stray in Path(path).parent.glob(f".{escaped}.*.tmp"):
        stray.unlink(missing_ok=True)


def _folder(path: Path) -> Path:
    folder = path.parent if str(path.parent) else Path(".")
    if not folder.is_dir():
        raise OutputError(path, f"folder {folder} does not exist", "create it or choose another path")
    return folder


def _temporary(path: Path, text: str | bytes) -> Path:
    folder = _folder(path)
    try:
        handle, name = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=folder)
    except OSError as exc:
        raise OutputError(
            path, f"cannot write in {folder} ({exc.strerror})", "choose a writable folder"
        ) from exc
    temporary = Path(name)
    try:
        with os.fdopen(handle, "wb") as stream:
            stream.write(text.encode("utf-8") if isinstance(text, str) else text)
        os.chmod(temporary, 0o666 & ~_UMASK)  # mkstemp makes it private; use the usual mode
    except BaseException as exc:
        temporary.unlink(missing_ok=True)
        if isinstance(exc, OSError):
            raise OutputError(
                path, f"cannot write ({exc.strerror})", "check free space and permissions"
            ) from exc
        raise
    return temporary


def _set_aside(path: Path) -> Path | None:
    """A second name for the file at `path` (a hard link; a copy where links are not
    supported), so it can be put back; None when there is no file yet."""
    if not path.exists():
        return None
    aside = _folder(path) / f".{path.name}.{os.getpid()}-{secrets.token_hex(4)}.old.tmp"
    try:
        os.link(path, aside)
    except OSError:
        shutil.copy2(path, aside)
    return aside


def _roll_back(asides: Sequence[tuple[Path, Path | None]]) -> None:
    for path, aside in reversed(asides):
        with contextlib.suppress(OSError):
            if aside is None:
                path.unlink(missing_ok=True)
            else:
                os.replace(aside, path)
