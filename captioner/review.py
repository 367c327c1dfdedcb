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
import html
import json
import os
import re
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from importlib import resources
from pathlib import Path
from typing import Any, Literal
from urllib.parse import quote

import numpy as np

from .cues import word
from .errors import MediaError, SubtitleError
from .formats import sound_track_path
from .formats.subtitles import SubtitleFormat, SubtitleTrack, decode_text, read_track
from .media import decode_chunks, peak_envelope, probe
from .style import Wording
from .update import note_blocks

MediaKind = Literal["audio", "video"]
_AUDIO_SUFFIXES = {".wav", ".mp3", ".m4a", ".aac", ".flac", ".ogg", ".oga", ".opus", ".wma", ".aif", ".aiff"}
_SLOT = re.compile(r"\{\{(POLICY|STYLE|SCRIPT|DATA)\}\}")
_TAG_SPLIT = re.compile(r"(<[^>]*>)")
WAVEFORM_HOP_MS = 50
_WAVEFORM_RATE = 8000  # the envelope needs no more: peaks, not spectra

# Curve colours designed for this page: twenty colours chosen by farthest-point search over
# sRGB for the largest smallest CIEDE2000 distance between any two, as seen with normal
# vision and under simulated deuteranopia and protanopia (Machado et al. 2009, severity 1),
# each with at least 3:1 contrast on the white timeline (WCAG 2.1, 1.4.11 non-text contrast).
# Listed most distinct first: a page with few concepts uses the best-separated ones.
PALETTE = (
    "#001eff", "#69a500", "#4b4b3c", "#789696", "#2d96ff", "#5a6900", "#005a69", "#5a9678",
    "#7878b4", "#4b7869", "#2d69ff", "#5a784b", "#691eb4", "#69872d", "#5a4b1e", "#876987",
    "#7896b4", "#695a96", "#ff0f69", "#96005a",
)  # fmt: skip


@dataclass(frozen=True, slots=True)
class ReviewInputs:
    """What one page shows: the media, its caption track, and the optional JSON sidecar."""

    media: Path
    captions: SubtitleTrack
    captions_path: Path
    sidecar: Mapping[str, Any] | None
    sidecar_path: Path | None = None


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
    document = _read_sidecar(sidecar) if sidecar else None
    return ReviewInputs(media, track, captions_path, document, Path(sidecar) if sidecar else None)


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


def page_data(
    inputs: ReviewInputs,
    media_src: str,
    *,
    waveform: np.ndarray | None = None,
    save: Mapping[str, Any] | None = None,
) -> dict[str, Any]:
    """Everything the page script needs, as JSON-ready values (times in integer ms).

    `media_src` is the URL the player loads (`media_link` for a page on disk); `waveform`
    is a `media.peak_envelope` at WAVEFORM_HOP_MS; `save` tells a served page where and
    against which file version to save in place (None: the page can only download).
    """
    sidecar = inputs.sidecar or {}
    events = sidecar.get("events", [])
    track = inputs.captions
    # NOTE blocks are not part of the parsed track; read them with the same decoder as the cues.
    text = (
        decode_text(inputs.captions_path, inputs.captions_path.read_bytes()) if track.format == "vtt" else ""
    )
    concept_of = {e["id"]: e["concept"] for e in events if "id" in e and "concept" in e}
    return {
        "media": {"src": media_src, "name": inputs.media.name, "kind": media_kind(inputs.media)},
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
                "text": editor_text(c.text, track.format),
                "identifier": c.identifier if track.format == "vtt" else "",
                "settings": c.settings.strip(),
                "concept": concept_of.get(c.identifier, ""),
            }
            for c in track.cues
        ],
        "duration_ms": sidecar.get("duration_ms"),
        "dialogue": sidecar.get("dialogue", {}).get("spans", []),
        "curves": _curves(sidecar, {e["concept"] for e in events if "concept" in e}),
        "waveform": None
        if waveform is None
        else {"hop_ms": WAVEFORM_HOP_MS, "peaks": base64.b64encode(waveform.tobytes()).decode("ascii")},
        "palette": list(PALETTE),
        "save": dict(save) if save else None,
        "dropped": [
            {
                "id": e["id"],
                "concept": e.get("concept", ""),
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


def media_link(media: Path, page: Path) -> str:
    """The media file's URL relative to a page written at `page`."""
    relative = Path(os.path.relpath(Path(media).resolve(), Path(page).resolve().parent)).as_posix()
    return quote(relative)


def editor_text(text: str, fmt: SubtitleFormat) -> str:
    """Cue text as the editor sees it: inline tags kept as written, WebVTT character
    references decoded (the page escapes them again on save).

    >>> editor_text("<i>tea</i> &amp; &lt;toast&gt;", "vtt")
    '<i>tea</i> & <toast>'
    """
    if fmt != "vtt":
        return text
    pieces = _TAG_SPLIT.split(text)  # odd positions are tags
    return "".join(piece if n % 2 else html.unescape(piece) for n, piece in enumerate(pieces))


def waveform(media: Path) -> np.ndarray | None:
    """The peak envelope of the media's default audio stream; None when it has no audio.

    Raises:
        MediaError: the file is not media ffmpeg can decode.
    """
    info = probe(media)
    if not info.audio_streams:
        return None
    stream = info.choose_stream(None)
    chunks = decode_chunks(media, stream, sample_rate=_WAVEFORM_RATE, expected_ms=info.duration_ms)
    return peak_envelope(chunks, sample_rate=_WAVEFORM_RATE, hop_ms=WAVEFORM_HOP_MS)


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
    """Score curves of every concept that produced an event (kept or dropped), strongest first
    (they get the palette's most distinct colours), each as base64 of uint8 (score × 255)."""
    scores = sidecar.get("scores") or {}
    curves = scores.get("concepts", {})
    wanted = sorted(
        (name for name in curves if name in concepts), key=lambda name: (-max(curves[name], default=0), name)
    )
    return {
        "hop_ms": scores.get("hop_ms", 0),
        "patch_ms": scores.get("patch_ms", 0),
        "order": wanted,
        "concepts": {name: _bytes64(curves[name]) for name in wanted},
    }


def _bytes64(values: Sequence[float]) -> str:
    quantised = np.clip(np.round(np.asarray(values, dtype=np.float64) * 255), 0, 255).astype(np.uint8)
    return base64.b64encode(quantised.tobytes()).decode("ascii")


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
            "connect-src 'self'" if data.get("save") else "connect-src 'none'",
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
    inputs = load_inputs(media, captions, sidecar)
    return render_page(page_data(inputs, media_link(inputs.media, page), waveform=waveform(inputs.media)))
