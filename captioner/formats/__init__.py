"""Output formats: one writer per format, and the one safe way to put a file on disk."""

from __future__ import annotations

import os
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
    folder = path.parent if str(path.parent) else Path(".")
    if not folder.is_dir():
        raise OutputError(path, f"folder {folder} does not exist", "create it or choose another path")
    try:
        handle, temporary = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=folder)
    except OSError as exc:
        raise OutputError(
            path, f"cannot write in {folder} ({exc.strerror})", "choose a writable folder"
        ) from exc
    try:
        with os.fdopen(handle, "w", encoding="utf-8", newline="\n") as stream:
            stream.write(text)
        os.chmod(temporary, 0o666 & ~_UMASK)  # mkstemp makes it private; use the usual mode
        os.replace(temporary, path)
    except OSError as exc:
        Path(temporary).unlink(missing_ok=True)
        raise OutputError(path, f"cannot write ({exc.strerror})", "check free space and permissions") from exc
