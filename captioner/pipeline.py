"""Pipeline: one media file -> score track -> events -> selection -> cues."""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

from . import media
from .cues import Cue, build_cues
from .dialogue import speech_spans
from .events import SoundEvent, Span, detect_events
from .packs import LoadedPack
from .policy import Decision, select_events
from .scores import ScoreTrack, compute_scores
from .style import Style
from .vocabulary import Vocabulary


@dataclass(frozen=True, slots=True)
class Captioned:
    """Everything one run produced, for writers, the sidecar and the explain table."""

    source: Path
    style: Style
    pack_name: str
    track: ScoreTrack
    dialogue: tuple[Span, ...]
    dialogue_source: str  # "classifier" or the subtitle file used
    events: tuple[SoundEvent, ...]
    decisions: tuple[Decision, ...]
    cues: tuple[Cue, ...]


def caption_track(
    track: ScoreTrack,
    vocabulary: Vocabulary,
    style: Style,
    *,
    dialogue: tuple[Span, ...] | None = None,
) -> tuple[tuple[Span, ...], tuple[SoundEvent, ...], tuple[Decision, ...], tuple[Cue, ...]]:
    """The pure part: score track -> dialogue spans, events, decisions, cues."""
    spans = speech_spans(track, vocabulary, style.detection) if dialogue is None else dialogue
    events = detect_events(track, vocabulary, style.detection)
    selected = select_events(events, spans, style.selection)
    cues, layout_drops = build_cues(selected.kept, style, track.duration_ms)
    overrides = {d.event_id: d for d in layout_drops}
    decisions = tuple(overrides.get(d.event_id, d) for d in selected.decisions)
    return spans, tuple(events), decisions, cues


def caption_file(
    path: Path,
    pack: LoadedPack,
    style: Style,
    *,
    audio_stream: int | None = None,
    dialogue: tuple[Span, ...] | None = None,
    dialogue_source: str = "classifier",
    on_start: Callable[[int | None], None] | None = None,
    on_progress: Callable[[int], None] | None = None,
) -> Captioned:
    """Decode, classify and caption one file.

    `on_start` receives the duration in ms (None when unknown) before decoding begins;
    `on_progress` receives ms of audio processed after each chunk.

    Raises:
        MediaError: the file cannot be probed or decoded.
    """
    info = media.probe(path)
    stream = info.choose_stream(audio_stream)
    if on_start:
        on_start(info.duration_ms)
    rate = pack.manifest.frontend.sample_rate
    chunks = media.decode_chunks(path, stream, sample_rate=rate)
    progress = (lambda samples: on_progress(round(samples * 1000 / rate))) if on_progress else None
    track = compute_scores(chunks, pack.classifier, pack.manifest.frontend, hop_ms=style.detection.patch_hop_ms, on_progress=progress)
    spans, events, decisions, cues = caption_track(track, pack.vocabulary, style, dialogue=dialogue)
    return Captioned(path, style, pack.manifest.name, track, spans, dialogue_source, events, decisions, cues)
