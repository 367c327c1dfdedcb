"""captioner: draft caption tracks for the non-speech sounds of a video, on an ordinary CPU."""

__version__ = "0.1.0"

from .cues import Cue
from .errors import CaptionerError, MediaError, OutputError, PackError, StyleError, SubtitleError
from .events import SoundEvent, Span
from .policy import Decision
from .scores import ScoreTrack
from .style import Style, load_style

__all__ = [
    "CaptionerError",
    "Cue",
    "Decision",
    "MediaError",
    "OutputError",
    "PackError",
    "ScoreTrack",
    "SoundEvent",
    "Span",
    "Style",
    "StyleError",
    "SubtitleError",
    "__version__",
    "load_style",
]
