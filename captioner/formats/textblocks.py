"""A subtitle file's text as written: its lines, blocks and line ending, so a merge can
insert into it and leave every byte of the original where it was."""

from __future__ import annotations

import re
from collections.abc import Sequence
from dataclasses import dataclass

LINE_END = re.compile(r"\r\n|\r|\n")  # W3C WebVTT line terminators: CRLF, LF, CR


@dataclass(frozen=True, slots=True)
class BlockSpan:
    """Character offsets of one cue block in the decoded file: where the block starts, where
    its timing line starts, and where its last text line ends (before the line ending)."""

    start: int
    timing: int
    text_end: int


@dataclass(frozen=True, slots=True)
class Source:
    """A subtitle file's text as written, so a merge can keep it byte for byte."""

    text: str  # decoded, without the byte-order mark
    bom: bool
    newline: str  # the file's first line ending, used for every line a merge adds


def newline_of(text: str) -> str:
    r"""The first line ending of the text (CRLF, LF or CR), LF when it has none.

    >>> newline_of("WEBVTT\r\n\r\n"), newline_of("WEBVTT")
    ('\r\n', '\n')
    """
    found = LINE_END.search(text)
    return found.group() if found else "\n"


def line_spans(text: str) -> list[tuple[int, int]]:
    """(start, end) of every line's content, split at CRLF, LF or CR (the WebVTT line endings)."""
    rows, start = [], 0
    for end in LINE_END.finditer(text):
        rows.append((start, end.start()))
        start = end.end()
    if start < len(text):
        rows.append((start, len(text)))
    return rows


def blocks(text: str) -> list[tuple[int, int]]:
    r"""(start, end) of every block: a run of non-blank lines, end before its last line ending.

    >>> blocks("WEBVTT\r\n\r\nNOTE a\r\nb\r\n")
    [(0, 6), (10, 19)]
    """
    found: list[tuple[int, int]] = []
    previous_blank = True
    for start, end in line_spans(text):
        if not text[start:end].strip():
            previous_blank = True
        elif previous_blank:
            found.append((start, end))
            previous_blank = False
        else:
            found[-1] = (found[-1][0], end)
    return found


def block_span(text: str, rows: Sequence[tuple[int, int]], timing: int) -> BlockSpan:
    """The block around the timing line at row `timing`: an identifier or counter line just
    above it belongs to it, and its text runs to the next blank line."""

    def blank(row: int) -> bool:
        return not text[rows[row][0] : rows[row][1]].strip()

    first = timing - 1 if timing > 0 and not blank(timing - 1) else timing
    last = timing
    while last + 1 < len(rows) and not blank(last + 1):
        last += 1
    return BlockSpan(rows[first][0], rows[timing][0], rows[last][1])
