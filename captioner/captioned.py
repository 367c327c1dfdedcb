"""Captioned: everything one captioning run produced, the value the writers, the JSON sidecar
and the --explain table read (kept apart from the pipeline so those never import it)."""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

from .cues import Cue
from .events import SoundEvent, Span
from .policy import Decision
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
