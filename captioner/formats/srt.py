"""SRT writer, composed by the `srt` library (counter from 1, comma decimals)."""

from __future__ import annotations

from collections.abc import Sequence
from datetime import timedelta

import srt as srt_library

from ..cues import Cue


def dumps(cues: Sequence[Cue], note: str = "") -> str:
    """The whole SRT file as text. SRT has no comment blocks, so `note` is not written."""
    subtitles = [
        srt_library.Subtitle(
            index=number,
            start=timedelta(milliseconds=cue.start_ms),
            end=timedelta(milliseconds=cue.end_ms),
            content="\n".join(line for line in cue.lines if line.strip()),
        )
        for number, cue in enumerate(cues, start=1)
    ]
    return str(srt_library.compose(subtitles, reindex=False))


def dumps_text(cues: Sequence[tuple[int, int, str]]) -> str:
    """SRT from (start_ms, end_ms, text) triples in time order; text is written as given.

    >>> dumps_text([(1000, 2500, "Hello\\n[door slams]")])
    '1\\n00:00:01,000 --> 00:00:02,500\\nHello\\n[door slams]\\n\\n'
    """
    subtitles = [
        srt_library.Subtitle(
            index=number, start=timedelta(milliseconds=start), end=timedelta(milliseconds=end), content=text
        )
        for number, (start, end, text) in enumerate(cues, start=1)
    ]
    return str(srt_library.compose(subtitles, reindex=False))
