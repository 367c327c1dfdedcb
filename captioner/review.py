"""Review page: one self-contained HTML file to check, fix and save a sound-caption track.

The page holds its script, styles and data inline and loads nothing from the network; it
refers to the media file by a path relative to the page. All data travels as JSON in a
`<script type="application/json">` block with `<`, `>` and `&` written as \\u escapes, and
the page script builds the DOM with textContent only, so no cue text can turn into markup.
A Content-Security-Policy allows exactly the page's own script (by SHA-256 hash).
"""

from __future__ import annotations

import base64
import hashlib
import json
import os
import re
from collections.abc import Mapping
from dataclasses import dataclass
from importlib import resources
from pathlib import Path
from typing import Any, Literal
from urllib.parse import quote

from .cues import word
from .errors import MediaError, SubtitleError
from .formats import sound_track_path
from .formats.subtitles import SubtitleTrack, decode_text, plain_lines, read_track
from .style import Wording
from .update import note_blocks

MediaKind = Literal["audio", "video"]
_AUDIO_SUFFIXES = {".wav", ".mp3", ".m4a", ".aac", ".flac", ".ogg", ".oga", ".opus", ".wma", ".aif", ".aiff"}
_MAX_CURVES = 8  # more lines than this cannot be told apart on one small chart
_SLOT = re.compile(r"\{\{(POLICY|STYLE|SCRIPT|DATA)\}\}")


@dataclass(frozen=True, slots=True)
class ReviewInputs:
    """What one page shows: the media, its caption track, and the optional JSON sidecar."""

    media: Path
    captions: SubtitleTrack
    captions_path: Path
    sidecar: Mapping[str, Any] | None


def media_kind(path: Path) -> MediaKind:
    """Audio-only inputs get an <audio> player, everything else a <video> player.

    >>> media_kind(Path("talk.WAV")), media_kind(Path("film.mkv"))
    ('audio', 'video')
    """
    return "audio" if Path(path).suffix.lower() in _AUDIO_SUFFIXES else "video"


def default_captions(media: Path) -> Path:
    """The caption file `captioner caption` writes by default: NAME.sounds.vtt, else .srt."""
    vtt, srt = sound_track_path(media, "vtt"), sound_track_path(media, "srt")
    return srt if srt.is_file() and not vtt.is_file() else vtt


def load_inputs(media: Path, captions: Path | None, sidecar: Path | None) -> ReviewInputs:
    """Read the caption track and the sidecar (INPUT.json when present and not named).

    Raises:
        MediaError: the media file is missing.
        SubtitleError: the caption file or the sidecar is missing or malformed.
    """
    media = Path(media)
    if not media.is_file():
        raise MediaError(media, "file not found", "check the path")
    captions_path = Path(captions) if captions else default_captions(media)
    track = read_track(captions_path)
    if sidecar is None and sound_track_path(media, "json").is_file():
        sidecar = sound_track_path(media, "json")
    return ReviewInputs(media, track, captions_path, _read_sidecar(sidecar) if sidecar else None)


def _read_sidecar(path: Path) -> Mapping[str, Any]:
    try:
        document = json.loads(Path(path).read_text(encoding="utf-8"))
    except FileNotFoundError as exc:
        raise SubtitleError(
            path, "events JSON not found", "check the path, or leave out --events-json"
        ) from exc
    except (OSError, UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise SubtitleError(
            path,
            f"not a readable events JSON ({exc})",
            "write it again with `captioner caption --events-json`",
        ) from exc
    if not isinstance(document, dict) or not isinstance(document.get("events"), list):
        raise SubtitleError(
            path, "has no 'events' list", "write it again with `captioner caption --events-json`"
        )
    return document


def page_data(inputs: ReviewInputs, page: Path) -> dict[str, Any]:
    """Everything the page script needs, as JSON-ready values (times in integer ms)."""
    sidecar = inputs.sidecar or {}
    events = sidecar.get("events", [])
    track = inputs.captions
    folder = Path(page).resolve().parent
    relative = Path(os.path.relpath(inputs.media.resolve(), folder)).as_posix()
    # NOTE blocks are not part of the parsed track; read them with the same decoder as the cues.
    text = (
        decode_text(inputs.captions_path, inputs.captions_path.read_bytes()) if track.format == "vtt" else ""
    )
    return {
        "media": {"src": quote(relative), "name": inputs.media.name, "kind": media_kind(inputs.media)},
        "captions": {
            "name": inputs.captions_path.name,
            "stem": inputs.captions_path.stem,
            "format": track.format,
            "notes": list(
                note_blocks(text)
            ),  # kept on save: the record lets `caption --update` see the edits
            "header_blocks": list(track.header_blocks),
        },
        "cues": [
            {
                "start_ms": c.start_ms,
                "end_ms": c.end_ms,
                "text": "\n".join(plain_lines(c.text, track.format)),
                "identifier": c.identifier if track.format == "vtt" else "",
                "settings": c.settings.strip(),
            }
            for c in track.cues
        ],
        "duration_ms": sidecar.get("duration_ms"),
        "dialogue": sidecar.get("dialogue", {}).get("spans", []),
        "curves": _curves(sidecar, {e["concept"] for e in events}),
        "dropped": [
            {
                "id": e["id"],
                "text": _caption(e),
                "start_ms": e["start_ms"],
                "end_ms": e["end_ms"],
                "rule": e.get("rule", ""),
                "reason": e.get("reason", ""),
                "peak_score": e.get("peak_score", 0),
            }
            for e in events
            if not e.get("kept", True)
        ],
    }


def _caption(event: Mapping[str, Any]) -> str:
    """A dropped event's caption as the run's style worded it (the sidecar's `caption`).

    Sidecars written before that field existed hold only the phrase: it gets the default
    wording, as the style they name may be a file that is no longer at hand.
    """
    caption = event.get("caption")
    if isinstance(caption, str) and caption:
        return caption
    return word(str(event.get("text", "")), Wording(), music=event.get("kind") == "music")


def _curves(sidecar: Mapping[str, Any], concepts: set[str]) -> dict[str, Any]:
    """Score curves of the concepts that produced events, the strongest _MAX_CURVES of them."""
    scores = sidecar.get("scores") or {}
    curves = scores.get("concepts", {})
    wanted = sorted(
        (name for name in curves if name in concepts), key=lambda name: -max(curves[name], default=0)
    )
    return {
        "hop_ms": scores.get("hop_ms", 0),
        "patch_ms": scores.get("patch_ms", 0),
        "concepts": {name: curves[name] for name in sorted(wanted[:_MAX_CURVES])},
    }


def json_for_script(value: object) -> str:
    """JSON that is safe inside an HTML <script> element: no '<', '>' or '&' appear raw.

    >>> json_for_script({"text": "</script><b>&"})
    '{"text": "\\\\u003c/script\\\\u003e\\\\u003cb\\\\u003e\\\\u0026"}'
    """
    text = json.dumps(value, ensure_ascii=False)
    return (
        text.replace("<", "\\u003c")
        .replace(">", "\\u003e")
        .replace("&", "\\u0026")
        .replace("\u2028", "\\u2028")
        .replace("\u2029", "\\u2029")
    )


def render_page(data: Mapping[str, Any]) -> str:
    """The whole HTML page for `page_data` output."""
    folder = resources.files("captioner") / "review_page"
    template = (folder / "page.html").read_text(encoding="utf-8")
    style = (folder / "page.css").read_text(encoding="utf-8")
    script = (folder / "page.js").read_text(encoding="utf-8")
    policy = "; ".join(
        (
            "default-src 'none'",
            f"script-src '{_hash(script)}'",
            f"style-src '{_hash(style)}'",
            "media-src 'self' file: blob:",
            "img-src data:",
            "base-uri 'none'",
            "form-action 'none'",
        )
    )
    slots = {"POLICY": policy, "STYLE": style, "SCRIPT": script, "DATA": json_for_script(data)}
    return _SLOT.sub(lambda match: slots[match.group(1)], template)  # one pass: data is never re-scanned


def _hash(source: str) -> str:
    return "sha256-" + base64.b64encode(hashlib.sha256(source.encode("utf-8")).digest()).decode("ascii")


def build_page(media: Path, page: Path, *, captions: Path | None = None, sidecar: Path | None = None) -> str:
    """Read the inputs and return the page's HTML for writing at `page`.

    Raises:
        MediaError: the media file is missing.
        SubtitleError: the caption file or sidecar cannot be read.
    """
    return render_page(page_data(load_inputs(media, captions, sidecar), page))
