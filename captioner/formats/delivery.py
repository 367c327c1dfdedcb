"""Delivery copy: a caption track as platforms want it, without our NOTE blocks.

The working file keeps its NOTE heading and its `--update` record; the delivery copy is
written beside it. Cues, their identifiers, settings and text, and STYLE/REGION blocks are
carried over exactly, as a merge carries dialogue cues.
"""

from __future__ import annotations

from .merge import MergedCue, MergedTrack, dumps_merged
from .subtitles import SubtitleTrack


def delivery_text(track: SubtitleTrack) -> str:
    """The track in its own format with every NOTE block left out (SRT has none to leave out)."""
    cues = tuple(MergedCue(c.start_ms, c.end_ms, dialogue=c) for c in track.cues)
    return dumps_merged(MergedTrack(track.format, cues, (), track.header_blocks))
