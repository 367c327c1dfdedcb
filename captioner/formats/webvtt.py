"""WebVTT writer (W3C WebVTT: header, timestamps, cue identifiers, escaped text)."""

from __future__ import annotations

from collections.abc import Sequence

from ..cues import Cue


def timestamp(ms: int) -> str:
    """WebVTT timestamp hh:mm:ss.ttt (hours always written, at least two digits).

    >>> timestamp(3723004)
    '01:02:03.004'
    """
    if ms < 0:
        raise ValueError(f"ms={ms} must be >= 0")
    hours, rest = divmod(ms, 3_600_000)
    minutes, rest = divmod(rest, 60_000)
    seconds, millis = divmod(rest, 1000)
    return f"{hours:02d}:{minutes:02d}:{seconds:02d}.{millis:03d}"


def escape(text: str) -> str:
    """Escape cue text: & and < start markup in WebVTT, > is escaped for safety; the
    "-->" arrow cannot survive escaping of '>' so it never reaches a player.

    >>> escape("<b> & -->")
    '&lt;b&gt; &amp; --&gt;'
    """
    return text.replace("&", "&amp;").replace("<", "&lt;").replace(">", "&gt;")


def note_text(text: str) -> str:
    r"""Make text safe for a NOTE block: no blank lines, and no "-->" anywhere.

    Replacing once is not enough ("--->" would become "-->" again), hence the loop.

    >>> note_text("from a--->b.mp4\n\nsecond line")
    'from a->b.mp4\nsecond line'
    """
    lines = [line for line in text.splitlines() if line.strip()]
    safe = "\n".join(lines)
    while "-->" in safe:
        safe = safe.replace("-->", "->")
    return safe


def _note(text: str) -> str:
    # A NOTE block ends at a blank line and may not contain "-->".
    return "NOTE\n" + note_text(text)


def cue_payload(lines: Sequence[str]) -> str:
    """Cue text for plain caption lines: escaped, blank lines left out (a blank line would
    end the cue), and a non-breaking space when nothing is left, so the cue keeps a payload.

    >>> cue_payload(["[door slams]", " ", "<b>"])
    '[door slams]\\n&lt;b&gt;'
    """
    return "\n".join(escape(line) for line in lines if line.strip()) or "&nbsp;"


def cue_block(start_ms: int, end_ms: int, payload: str, *, identifier: str = "", settings: str = "") -> str:
    """One cue block; `payload` is WebVTT cue text already (escaped, tags as wanted).

    >>> cue_block(1000, 2500, "[door slams]", identifier="s1", settings="line:0")
    's1\\n00:00:01.000 --> 00:00:02.500 line:0\\n[door slams]'
    """
    timing = f"{timestamp(start_ms)} --> {timestamp(end_ms)}" + (f" {settings}" if settings else "")
    return "\n".join(part for part in (identifier, timing, payload) if part)


def document(blocks: Sequence[str], *, note: str = "", header_blocks: Sequence[str] = ()) -> str:
    """A whole WebVTT file from cue blocks; STYLE/REGION `header_blocks` go before the first cue."""
    parts = ["WEBVTT", *([_note(note)] if note else []), *header_blocks, *blocks]
    return "\n\n".join(parts) + "\n"


def dumps(cues: Sequence[Cue], note: str = "") -> str:
    """The whole WebVTT file as text; `note` becomes a NOTE block after the header."""
    blocks = [
        cue_block(
            c.start_ms, c.end_ms, cue_payload(c.lines), identifier=c.event_ids[0] if c.event_ids else ""
        )
        for c in cues
    ]
    return document(blocks, note=note)
