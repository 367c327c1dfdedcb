"""Delivery copy: a caption track as platforms want it, without our NOTE blocks.

The working file keeps its NOTE heading and its `--update` record; the delivery copy is
written beside it. Cues, their identifiers, settings and text, and STYLE/REGION blocks are
carried over exactly.
"""

from __future__ import annotations

from . import srt as srt_writer
from . import webvtt as vtt_writer
from .subtitles import SubtitleTrack


def delivery_text(track: SubtitleTrack) -> str:
    """The track in its own format with every NOTE block left out (SRT has none to leave out)."""
    if track.format == "srt":
        return srt_writer.dumps_text([(c.start_ms, c.end_ms, c.text) for c in track.cues])
    blocks = [
        vtt_writer.cue_block(c.start_ms, c.end_ms, c.text, identifier=c.identifier, settings=c.settings)
        for c in track.cues
    ]
    return vtt_writer.document(blocks, header_blocks=track.header_blocks)
