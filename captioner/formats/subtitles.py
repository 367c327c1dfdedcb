"""Reading existing subtitle files (WebVTT via webvtt-py, SRT via srt), text kept exactly."""

from __future__ import annotations

import codecs
import io
import warnings
from dataclasses import dataclass
from pathlib import Path

import srt as srt_library
import webvtt

from ..errors import SubtitleError


@dataclass(frozen=True, slots=True)
class SubtitleCue:
    """A cue read from a subtitle file; text and settings exactly as in the file."""

    start_ms: int
    end_ms: int
    text: str
    identifier: str = ""
    settings: str = ""


def decode_text(path: Path, raw: bytes) -> str:
    """UTF-8 (with or without BOM), UTF-16 with BOM, else Latin-1 with a warning."""
    if raw.startswith(codecs.BOM_UTF16_LE) or raw.startswith(codecs.BOM_UTF16_BE):
        return raw.decode("utf-16")
    try:
        return raw.decode("utf-8-sig")
    except UnicodeDecodeError:
        warnings.warn(f"{path}: not UTF-8; read as Latin-1, check accented letters", stacklevel=2)
        return raw.decode("latin-1")


def read_subtitles(path: Path) -> tuple[SubtitleCue, ...]:
    """All cues of a .vtt or .srt file, sorted by start time.

    Raises:
        SubtitleError: missing file, unknown extension or malformed content.
    """
    path = Path(path)
    if not path.is_file():
        raise SubtitleError(path, "subtitle file not found", "check the path")
    text = decode_text(path, path.read_bytes())
    suffix = path.suffix.lower()
    if suffix == ".vtt":
        cues = _read_vtt(path, text)
    elif suffix == ".srt":
        cues = _read_srt(path, text)
    else:
        raise SubtitleError(path, f"unknown subtitle type {suffix or '(none)'}", "use a .vtt or .srt file")
    return tuple(sorted(cues, key=lambda c: (c.start_ms, c.end_ms)))


def _ms(seconds: float) -> int:
    return round(seconds * 1000)


def _stamp_ms(stamp: webvtt.models.Timestamp) -> int:
    # webvtt-py's *_in_seconds properties drop the milliseconds, so read the parts.
    return ((stamp.hours * 60 + stamp.minutes) * 60 + stamp.seconds) * 1000 + stamp.milliseconds


def _read_vtt(path: Path, text: str) -> list[SubtitleCue]:
    try:
        parsed = webvtt.from_buffer(io.StringIO(text))
    except Exception as exc:  # webvtt-py raises several error types for bad input
        raise SubtitleError(path, f"not valid WebVTT ({str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__})", "fix the file or export it again") from exc
    return [
        SubtitleCue(_stamp_ms(c.start_time), _stamp_ms(c.end_time), c.raw_text, c.identifier or "", c.settings or "")
        for c in parsed
    ]


def _read_srt(path: Path, text: str) -> list[SubtitleCue]:
    try:
        parsed = list(srt_library.parse(text))
    except srt_library.SRTParseError as exc:
        line = text[: exc.actual_start].count("\n") + 1 if hasattr(exc, "actual_start") else None
        where = f" near line {line}" if line else ""
        raise SubtitleError(path, f"not valid SRT{where}", "fix the file or export it again") from exc
    return [SubtitleCue(_ms(s.start.total_seconds()), _ms(s.end.total_seconds()), s.content, str(s.index)) for s in parsed]
