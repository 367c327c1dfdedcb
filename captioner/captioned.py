"""Captioned: everything one captioning run produced, the value the writers, the JSON sidecar
and the --explain table read (kept apart from the pipeline so those never import it)."""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

from .cues import Cue
from .events import SoundEvent, Span
from .policy import Decision
from .probing import AudioStream
from .scores import ScoreTrack
from .style import Style


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
    stream: AudioStream | None = None  # the audio stream captioned
    streams: tuple[AudioStream, ...] = ()  # every audio stream of the file

    def stream_line(self) -> str:
        """The NOTE heading's line naming the stream, for files with more than one."""
        if self.stream is None or len(self.streams) < 2:
            return ""
        return f"audio stream {self.stream.label()} of {len(self.streams)}"

    def empty_stream_notice(self) -> str:
        """One line when the chosen stream gave no cues although the file has other streams."""
        if self.cues or self.stream is None or len(self.streams) < 2:
            return ""
        others = "; ".join(s.label() for s in self.streams if s.index != self.stream.index)
        return (
            f"{self.source}: audio stream {self.stream.label()} gave no cues; the file has other audio "
            f"streams ({others}): list them with `captioner streams` and choose one with --audio-stream"
        )
