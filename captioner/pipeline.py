"""Pipeline: one media file -> score track -> events -> selection -> cues -> output texts."""

from __future__ import annotations

import dataclasses
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from pathlib import Path

from threadpoolctl import threadpool_limits

from . import __version__, media, update
from .captioned import Captioned as Captioned  # re-exported: pipeline.Captioned
from .cues import Cue, build_cues
from .dialogue import speech_spans
from .dialogue_sources import embedded_dialogue, embedded_stream
from .errors import StyleError
from .events import SoundEvent, Span, detect_events
from .formats import WRITERS, sidecar
from .formats.merge import (
    MergedTrack,
    dropped_decisions,
    dumps_merged,
    merge_json,
    merge_tracks,
    sound_cues_from_track,
)
from .formats.subtitles import SubtitleTrack, read_track
from .ownership import sealed
from .packs import LoadedPack
from .policy import Decision, select_events
from .scores import ScoreTrack, compute_scores
from .style import Style
from .vocabulary import Vocabulary, house_vocabulary


def caption_track(
    track: ScoreTrack,
    vocabulary: Vocabulary,
    style: Style,
    *,
    dialogue: tuple[Span, ...] | None = None,
) -> tuple[tuple[Span, ...], tuple[SoundEvent, ...], tuple[Decision, ...], tuple[Cue, ...]]:
    """The pure part: score track -> dialogue spans, events, decisions, cues."""
    vocabulary = house_vocabulary(vocabulary, style.vocabulary, style.name)
    spans = speech_spans(track, vocabulary, style.detection) if dialogue is None else dialogue
    events = detect_events(track, vocabulary, style.detection)
    selected = select_events(events, spans, style.selection)
    cues, layout_drops = build_cues(selected.kept, style, track.duration_ms)
    overrides = {d.event_id: d for d in layout_drops}
    decisions = tuple(overrides.get(d.event_id, d) for d in selected.decisions)
    return spans, tuple(events), decisions, cues


def check_style_fits_pack(style: Style, pack: LoadedPack) -> None:
    """The patch hop must be a whole number of the pack's frames (10 ms for YAMNet), and a
    house vocabulary may only name concepts of the pack.

    Raises:
        StyleError: it is not.
    """
    house_vocabulary(pack.vocabulary, style.vocabulary, style.name)  # names only concepts it has
    frame_ms = pack.manifest.frontend.frame_ms
    frames = style.detection.patch_hop_ms / frame_ms
    if abs(frames - round(frames)) > 1e-6 or round(frames) < 1:
        raise StyleError(
            style.name,
            f"detection.patch_hop_ms={style.detection.patch_hop_ms} is not a whole number of the model "
            f"pack's {frame_ms:g} ms frames",
            f"use a multiple of {frame_ms:g} ms",
        )


def caption_file(
    path: Path,
    pack: LoadedPack,
    style: Style,
    *,
    audio_stream: int | str | None = None,
    dialogue: tuple[Span, ...] | None = None,
    dialogue_source: str = "classifier",
    dialogue_language: str | None = None,
    on_start: Callable[[int | None], None] | None = None,
    on_progress: Callable[[int], None] | None = None,
) -> Captioned:
    """Decode, classify and caption one file.

    `on_start` receives the duration in ms (None when unknown) before decoding begins;
    `on_progress` receives ms of audio processed after each chunk. Without `dialogue`, a
    text subtitle stream inside the file (of `dialogue_language` when given) marks dialogue.

    Raises:
        MediaError: the file cannot be probed or decoded.
    """
    check_style_fits_pack(style, pack)
    info = media.probe(path)
    stream = info.choose_stream(audio_stream)
    if dialogue is None and (embedded := embedded_stream(info, dialogue_language)) is not None:
        dialogue = embedded_dialogue(info, embedded)
        dialogue_source = f"{path.name} subtitle stream {embedded.index}" + (
            f" ({embedded.language})" if embedded.language else ""
        )
    if on_start:
        on_start(info.duration_ms)
    rate = pack.manifest.frontend.sample_rate
    chunks = media.decode_chunks(path, stream, sample_rate=rate, expected_ms=info.duration_ms)
    progress = (lambda samples: on_progress(round(samples * 1000 / rate))) if on_progress else None
    # One BLAS thread: the per-chunk products are small, and spare BLAS threads only spin on
    # the core that ffmpeg needs for decoding (measured: 60 min in 8.0 s instead of 9.7 s).
    with threadpool_limits(limits=1, user_api="blas"):
        track = compute_scores(
            chunks,
            pack.classifier,
            pack.manifest.frontend,
            hop_ms=style.detection.patch_hop_ms,
            level_spread_db=style.detection.level_spread_db,
            heads=pack.heads,
            on_progress=progress,
        )
    spans, events, decisions, cues = caption_track(track, pack.vocabulary, style, dialogue=dialogue)
    return Captioned(
        path,
        style,
        pack.manifest.name,
        track,
        spans,
        dialogue_source,
        events,
        decisions,
        cues,
        stream,
        info.audio_streams,
    )


@dataclass(frozen=True, slots=True)
class Drafts:
    """One captioned file as output texts, shared by `captioner caption` and batch runs.

    `result` is the run with the merge's left-out sound cues recorded as decisions.
    """

    result: Captioned
    vocabulary: Vocabulary
    note: str  # the NOTE heading every track we write
    track: str  # the sound captions in the chosen format (WebVTT carries its edit record)
    merged: MergedTrack | None = None
    merged_text: str | None = None  # dialogue plus sound cues, in the dialogue's format
    dialogue_name: str = ""

    def events_json(self) -> str:
        """The JSON sidecar: every event, decision and score curve, plus the merge outcome."""
        document = sidecar.sidecar(self.result, self.vocabulary)
        if self.merged is not None:
            document["merge"] = {
                "dialogue": self.dialogue_name,
                "strategy": self.result.style.merge.strategy,
                **merge_json(self.merged),
            }
        return sealed(sidecar.dumps(document), "json")  # the seal tells our own file from a changed one


def draft_outputs(
    result: Captioned,
    vocabulary: Vocabulary,
    fmt: str,
    *,
    merge_with: SubtitleTrack | None = None,
    dialogue_name: str = "",
) -> Drafts:
    """Render a captioned file: the sound track in `fmt` ("vtt" or "srt") and, given a
    dialogue track, that track merged with the sound cues."""
    note = (
        f"{update.NOTE_OPENING} {__version__} from {result.source.name}\n"
        f"style {result.style.name}, model pack {result.pack_name}; review before publishing"
    )
    if result.stream_line():
        note += "\n" + result.stream_line()
    merged, merged_text = None, None
    if merge_with is not None:
        priorities = {e.event_id: e.priority for e in result.events}
        merged, merged_text = merge_text(
            merge_with,
            result.cues,
            result.style,
            note + f"\nmerged with the dialogue of {dialogue_name}",
            priorities=priorities,
        )
        drops = {d.event_id: d for d in dropped_decisions(merged)}
        result = dataclasses.replace(
            result, decisions=tuple(drops.get(d.event_id, d) for d in result.decisions)
        )
    track = update.recorded_vtt(result.cues, note) if fmt == "vtt" else WRITERS[fmt](result.cues, note)
    return Drafts(result, vocabulary, note, track, merged, merged_text, dialogue_name)


def merge_text(
    dialogue: SubtitleTrack,
    sounds: Sequence[Cue],
    style: Style,
    note: str,
    *,
    priorities: dict[str, int] | None = None,
) -> tuple[MergedTrack, str]:
    """Dialogue and sound cues as one track, and its text (a WebVTT one sealed, so a later
    run can tell it from a hand-edited copy)."""
    merged = merge_tracks(dialogue, sounds, style, priorities=priorities)
    return merged, sealed(dumps_merged(merged, note), merged.format)


def merge_kept_track(sounds: Path, dialogue: Path, style: Style) -> str:
    """The merged text for a sound track a person edited: their cues as they left them.

    Raises:
        SubtitleError: either file cannot be read.
    """
    note = (
        f"Dialogue of {dialogue.name} with the sound captions of {sounds.name} as edited by hand\n"
        f"merged by captioner {__version__}, style {style.name}; review before publishing"
    )
    return merge_text(read_track(dialogue), sound_cues_from_track(read_track(sounds)), style, note)[1]
