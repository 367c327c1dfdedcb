"""Whose a file on disk is: the tool's own, to replace freely, or a person's, to keep.

A file is the tool's own while nobody changed it since it was written: a sound-caption
WebVTT track when every cue matches its record (`update.is_untouched`); a merged WebVTT
track or a JSON sidecar when its seal, a SHA-256 of the rest of the file, still matches.
SubRip has no comments, so an SRT file is never known to be ours (batch runs know their
outputs from the run manifest instead).

A person's file is never replaced in silence: a new draft goes beside it, or (with
--force) it is kept as a backup. Both names keep the format's extension, so players and
caption editors open them, and carry a word no dialogue subtitle or output of ours has:
`talk.sounds.draft.vtt`, `talk.sounds.draft-2.vtt`, `talk.sounds.backup.vtt`, ...
"""

from __future__ import annotations

import hashlib
import re
from collections.abc import Callable, Iterator
from pathlib import Path

from . import update

KEPT_NAME = re.compile(r"\.(?:draft|backup)(?:-\d+)?\.(?:vtt|srt|json)$", re.IGNORECASE)
_VTT_SEAL = re.compile(r"\n\nNOTE captioner seal sha256:([0-9a-f]{64})\n\n")
_JSON_SEAL = re.compile(r',\n "sealed": "sha256:([0-9a-f]{64})"\n\}\n$')


def _digest(text: str) -> str:
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


def sealed(text: str, fmt: str) -> str:
    """`text` with its seal: a NOTE after the WebVTT header, or a last key of a JSON object.
    Other formats have no place for one and are returned as they are.
    """
    if fmt == "vtt" and text.startswith("WEBVTT\n\n"):
        return f"WEBVTT\n\nNOTE captioner seal sha256:{_digest(text)}\n\n" + text[len("WEBVTT\n\n") :]
    if fmt == "json" and text.endswith("\n}\n"):
        return text[: -len("\n}\n")] + f',\n "sealed": "sha256:{_digest(text)}"\n}}\n'
    return text


def is_sealed(text: str) -> bool:
    """Whether `text` carries a seal that matches the rest of it."""
    match = _VTT_SEAL.search(text)
    if match is not None and text.startswith("WEBVTT\n\nNOTE captioner seal"):
        return _digest(text[: match.start()] + "\n\n" + text[match.end() :]) == match.group(1)
    match = _JSON_SEAL.search(text)
    return match is not None and _digest(text[: match.start()] + "\n}\n") == match.group(1)


def is_ours(path: Path) -> bool:
    """Whether the file at `path` is exactly what the tool wrote (False when it is missing)."""
    try:
        text = Path(path).read_bytes().decode("utf-8")
    except (OSError, UnicodeDecodeError):
        return False
    text = text.removeprefix("\ufeff")
    if Path(path).suffix.lower() == ".vtt" and update.read_record(text) is not None:
        return update.is_untouched(text)
    return is_sealed(text)


def draft_path(path: Path, usable: Callable[[Path], bool] | None = None) -> Path:
    """Where the new draft goes beside a person's file: the first `NAME.draft[-N].EXT` that
    does not exist or that `usable` says may be replaced (default: a draft that is ours)."""
    usable = usable or is_ours
    return next(p for p in _variants(Path(path), "draft") if not p.exists() or usable(p))


def backup_path(path: Path) -> Path:
    """A name for a backup of `path` that no file has yet: `NAME.backup[-N].EXT`."""
    return next(p for p in _variants(Path(path), "backup") if not p.exists())


def _variants(path: Path, word: str) -> Iterator[Path]:
    number = 1
    while True:
        tag = word if number == 1 else f"{word}-{number}"
        yield path.with_name(f"{path.name[: len(path.name) - len(path.suffix)]}.{tag}{path.suffix}")
        number += 1
