"""Reading existing subtitle files (WebVTT via webvtt-py, SRT via srt), text kept exactly.

Cue text keeps its inline tags, entities and line breaks as written; WebVTT cue settings
and identifiers are kept too, and STYLE/REGION blocks are kept so a merged track can carry
them. A malformed file raises one SubtitleError naming the file and the line; a cue of
zero length is kept (WebVTT parsers accept it) but counts as no dialogue time.
"""

from __future__ import annotations

import codecs
import html
import io
import re
import warnings
from collections.abc import Sequence
from dataclasses import dataclass, field, replace
from datetime import timedelta
from pathlib import Path
from typing import Literal

import srt as srt_library
import webvtt
from webvtt.errors import MalformedCaptionError, MalformedFileError

from ..errors import SubtitleError
from ..events import Span
from .textblocks import LINE_END, BlockSpan, Source, block_span, line_spans, newline_of

SubtitleFormat = Literal["vtt", "srt"]
_FIX = "fix that line or export the file again"
_VTT_ERRORS = (MalformedFileError, MalformedCaptionError, ValueError)  # what webvtt-py raises for bad input
_TAG = re.compile(r"<[^>]*>|\{\\[^}]*\}")  # WebVTT/SRT inline tags and SRT {\an8}-style codes
# An SRT timing line as the srt library accepts it: three fields and an optional fraction
# each side, separated by any of , . : (or their full-width forms), then the arrow.
_SRT_STAMP = r"\d+[,.:，．。：]\d+[,.:，．。：]\d+[,.:，．。：]\d*"
_SRT_TIMING = re.compile(rf"^\s*{_SRT_STAMP} *-[ -] *> *{_SRT_STAMP}")
_SRT_PARTS = re.compile(r"(\d+)[,.:，．。：](\d+)[,.:，．。：](\d+)[,.:，．。：](\d*)")


@dataclass(frozen=True, slots=True)
class SubtitleCue:
    """A cue read from a subtitle file; text and settings exactly as in the file."""

    start_ms: int
    end_ms: int
    text: str
    identifier: str = ""
    settings: str = ""
    # where the cue's timing line is, as "FILE, line N", for messages; not part of equality
    location: str = field(default="", compare=False, repr=False)
    # where the cue's block sits in the file's text (see `Source`); not part of equality
    span: BlockSpan | None = field(default=None, compare=False, repr=False)


@dataclass(frozen=True, slots=True)
class SubtitleTrack:
    """A whole subtitle file: its format, its cues in time order, and its WebVTT header blocks."""

    name: str
    format: SubtitleFormat
    cues: tuple[SubtitleCue, ...]
    header_blocks: tuple[str, ...] = ()  # STYLE and REGION blocks, as "STYLE\n..." text
    source: Source | None = None  # the file's own text (None for a track built in code)


def decode_text(path: Path, raw: bytes) -> str:
    """UTF-8 (with or without BOM), UTF-16 with BOM, else a single-byte code page with a warning.

    The fallback tries Windows-1252 (curly quotes and dashes of older subtitle tools) and
    then Latin-1, which decodes any byte.

    >>> decode_text(Path("a.srt"), "café".encode("utf-16"))
    'café'
    """
    if raw.startswith((codecs.BOM_UTF16_LE, codecs.BOM_UTF16_BE)):
        try:
            return raw.decode("utf-16")
        except UnicodeDecodeError as exc:
            raise SubtitleError(
                path, "starts with a UTF-16 byte-order mark but is not valid UTF-16", "save it again as UTF-8"
            ) from exc
    try:
        return raw.decode("utf-8-sig")
    except UnicodeDecodeError:
        pass
    for legacy in ("cp1252", "latin-1"):
        try:
            text = raw.decode(legacy)
        except UnicodeDecodeError:
            continue
        warnings.warn(
            f"{path}: not UTF-8; read as {legacy}, check accented letters (save it as UTF-8 to silence this)",
            stacklevel=2,
        )
        return text
    raise AssertionError("latin-1 decodes every byte")  # pragma: no cover


def subtitle_format(path: Path) -> SubtitleFormat:
    """The format a subtitle file's extension names.

    Raises:
        SubtitleError: the extension is neither .vtt nor .srt.
    """
    suffix = Path(path).suffix.lower()
    if suffix == ".vtt":
        return "vtt"
    if suffix == ".srt":
        return "srt"
    raise SubtitleError(
        path, f"unknown subtitle type {suffix or '(no extension)'}", "use a .vtt or .srt file"
    )


def read_track(path: Path) -> SubtitleTrack:
    """Read a .vtt or .srt file; the file itself is only read, never changed.

    Raises:
        SubtitleError: missing or unreadable file, unknown extension, or malformed content
            (the message names the line).
    """
    path = Path(path)
    fmt = subtitle_format(path)
    if not path.is_file():
        raise SubtitleError(path, "subtitle file not found", "check the path")
    try:
        raw = path.read_bytes()
    except OSError as exc:
        raise SubtitleError(path, f"cannot read ({exc.strerror})", "check its permissions") from exc
    bom = raw.startswith((codecs.BOM_UTF8, codecs.BOM_UTF16_LE, codecs.BOM_UTF16_BE))
    return parse_subtitles(decode_text(path, raw), fmt, name=str(path), bom=bom)


def read_subtitles(path: Path) -> tuple[SubtitleCue, ...]:
    """All cues of a .vtt or .srt file, sorted by start time (see `read_track`)."""
    return read_track(path).cues


def parse_subtitles(
    text: str, fmt: SubtitleFormat, *, name: str = "subtitles", bom: bool = False
) -> SubtitleTrack:
    """Parse decoded subtitle text; `name` is used in messages and in each cue's `location`.

    A zero-length cue is kept here (so a merge passes it through); `dialogue_spans` skips it.
    The text itself travels in the track's `source` (`bom`: the file started with one).

    Raises:
        SubtitleError: malformed content or a cue that ends before it starts, naming `name`
            and the line.
    """
    source = Source(text.removeprefix("\ufeff"), bom or text.startswith("\ufeff"), newline_of(text))
    text = source.text
    rows = line_spans(text)
    cues, header = _parse_vtt(name, text) if fmt == "vtt" else (_parse_srt(name, text), ())
    timings = _vtt_timing_rows(text, rows) if fmt == "vtt" else _srt_timing_rows(text, rows, cues)
    cues = [
        replace(cue, location=_where(name, timings[n] + 1), span=block_span(text, rows, timings[n]))
        if n < len(timings)
        else replace(cue, location=name)
        for n, cue in enumerate(cues)
    ]
    if fmt == "srt":
        cues = [_trade_reading(cue, text) for cue in cues]
    for cue in cues:
        if cue.end_ms < cue.start_ms:
            raise SubtitleError(cue.location, "cue ends before or when it starts", _FIX)
    ordered = sorted(cues, key=lambda c: (c.start_ms, c.end_ms))  # stable: equal times keep file order
    return SubtitleTrack(name, fmt, tuple(ordered), header, source)


def dialogue_spans(cues: Sequence[SubtitleCue]) -> tuple[Span, ...]:
    """The time covered by subtitle cues, overlapping or touching cues joined into one span.

    A cue without duration covers no dialogue time: it is left out with a warning naming
    its file and line (the cue itself stays in the track).

    >>> dialogue_spans([SubtitleCue(0, 1000, "a"), SubtitleCue(500, 2000, "b"), SubtitleCue(3000, 4000, "c")])
    (Span(start_ms=0, end_ms=2000), Span(start_ms=3000, end_ms=4000))
    """
    spans: list[Span] = []
    for cue in sorted(cues, key=lambda c: c.start_ms):
        if cue.end_ms <= cue.start_ms:
            warnings.warn(
                f"{cue.location or 'dialogue'}: cue has no duration (it ends when it starts), so it counts "
                "as no dialogue "
                "time; give it an end time after its start to silence this",
                stacklevel=2,
            )
            continue
        if spans and cue.start_ms <= spans[-1].end_ms:
            spans[-1] = Span(spans[-1].start_ms, max(spans[-1].end_ms, cue.end_ms))
        else:
            spans.append(Span(cue.start_ms, cue.end_ms))
    return tuple(spans)


def plain_lines(text: str, fmt: SubtitleFormat) -> tuple[str, ...]:
    """The lines a viewer reads: tags removed, WebVTT character references decoded.

    >>> plain_lines("<v A><i>Tea</i> &amp; toast</v>\\nNow", "vtt")
    ('Tea & toast', 'Now')
    """
    stripped = _TAG.sub("", text)
    if fmt == "vtt":
        stripped = html.unescape(stripped)
    return tuple(stripped.split("\n"))


def _where(name: str, line: int) -> str:
    return f"{name}, line {line}" if line > 0 else name


def _vtt_timing_rows(text: str, rows: Sequence[tuple[int, int]]) -> list[int]:
    # In a well-formed WebVTT file every line holding "-->" is a cue timing line (WebVTT
    # forbids the arrow in cue text and comments), so the n-th such line is the n-th cue's.
    return [number for number, (start, end) in enumerate(rows) if "-->" in text[start:end]]


def _srt_timing_rows(text: str, rows: Sequence[tuple[int, int]], cues: Sequence[SubtitleCue]) -> list[int]:
    """The row of each cue's timing line, cues in file order.

    SRT cue text may hold "-->" or even a line shaped like a timing line, so walk the file:
    the next timing-shaped line is this cue's, and its text lines are skipped before looking
    for the next cue's.
    """
    found, row = [], 0
    for cue in cues:
        while row < len(rows) and not _SRT_TIMING.match(text[rows[row][0] : rows[row][1]]):
            row += 1
        if row == len(rows):
            break
        found.append(row)
        row += 2 + cue.text.count("\n")  # the timing line, then the cue's text lines
    return found


def _trade_reading(cue: SubtitleCue, text: str) -> SubtitleCue:
    """Read an SRT fraction of other than three digits as a decimal fraction, as subtitle
    software commonly does (`0:00:03,5` is 3.500 s; common practice), with a warning naming
    the line: the srt library reads the digits as milliseconds (3.005 s)."""
    if cue.span is None:
        return cue
    timing = LINE_END.split(text[cue.span.timing : cue.span.text_end + 1], maxsplit=1)[0]
    stamps = _SRT_PARTS.findall(timing)[:2]
    if len(stamps) != 2:
        return cue
    read = [_trade_ms(*parts) for parts in stamps]
    if read == [cue.start_ms, cue.end_ms]:
        return cue
    odd = next(f"{h}:{m}:{s},{f}" for h, m, s, f in stamps if len(f) not in (0, 3))
    warnings.warn(
        f"{cue.location}: timestamp {odd!r} has {len(odd.rpartition(',')[2])} decimal digit(s); read as a "
        f"fraction of a second ({_srt_stamp(read[0])} --> {_srt_stamp(read[1])}); write three digits "
        "(e.g. 00:00:03,500) to silence this",
        stacklevel=3,
    )
    return replace(cue, start_ms=read[0], end_ms=read[1])


def _trade_ms(hours: str, minutes: str, seconds: str, fraction: str) -> int:
    """
    >>> _trade_ms("0", "00", "03", "5"), _trade_ms("00", "00", "03", "5000"), _trade_ms("0", "0", "3", "")
    (3500, 3500, 3000)
    """
    whole = ((int(hours) * 60 + int(minutes)) * 60 + int(seconds)) * 1000
    return whole + (round(int(fraction) * 10 ** (3 - len(fraction))) if fraction else 0)


def _srt_stamp(ms: int) -> str:
    return f"{ms // 3_600_000:02d}:{ms // 60_000 % 60:02d}:{ms // 1000 % 60:02d},{ms % 1000:03d}"


def _stamp_ms(stamp: webvtt.models.Timestamp) -> int:
    # webvtt-py's *_in_seconds properties drop the milliseconds, so read the parts.
    return ((stamp.hours * 60 + stamp.minutes) * 60 + stamp.seconds) * 1000 + stamp.milliseconds


def _vtt_document(text: str) -> webvtt.WebVTT:
    # strict: a malformed cue raises instead of vanishing, so no dialogue is ever lost
    return webvtt.from_buffer(io.StringIO(text), strict=True)


def _parse_vtt(name: str, text: str) -> tuple[list[SubtitleCue], tuple[str, ...]]:
    try:
        document = _vtt_document(text)
    except _VTT_ERRORS as exc:
        line, problem = _locate_vtt_error(text)
        raise SubtitleError(_where(name, line), problem, _FIX) from exc
    cues = [
        SubtitleCue(
            _stamp_ms(c.start_time), _stamp_ms(c.end_time), c.raw_text, c.identifier or "", str(c.settings)
        )
        for c in document.captions
    ]
    header = tuple("STYLE\n" + s.text for s in document.styles) + tuple(
        "REGION\n" + "\n".join(r) for r in document.regions
    )
    return cues, header


def _locate_vtt_error(text: str) -> tuple[int, str]:
    """The line of the first block webvtt-py rejects, found by parsing ever longer prefixes.

    webvtt-py names the bad block but not its line, so bisect over block boundaries: a
    prefix of whole blocks fails exactly when it holds the first bad block.
    """
    lines = text.splitlines()
    if not lines or not lines[0].startswith("WEBVTT"):
        return 1, "not a WebVTT file (the first line must start with WEBVTT)"
    starts = [i for i, line in enumerate(lines) if line and (i == 0 or not lines[i - 1])]
    ends = starts[1:] + [len(lines)]

    def fails(blocks: int) -> bool:
        try:
            _vtt_document("\n".join(lines[: ends[blocks - 1]]) + "\n")
        except _VTT_ERRORS:
            return True
        return False

    low, high = 1, len(starts)
    if not fails(high):
        return 0, "not valid WebVTT"
    while low < high:
        middle = (low + high) // 2
        if fails(middle):
            high = middle
        else:
            low = middle + 1
    first = starts[low - 1]
    block = lines[first : ends[low - 1]]
    arrows = [i for i, line in enumerate(block) if "-->" in line] or [0]
    if len(arrows) > 1:
        return first + arrows[1] + 1, "cue timing line without a blank line before it"
    arrow = arrows[0]
    return (
        first + arrow + 1,
        f"not a valid WebVTT cue ({block[arrow].strip()[:60]!r}: check timestamps hh:mm:ss.ttt and cue "
        "settings)",
    )


def _parse_srt(name: str, text: str) -> list[SubtitleCue]:
    try:
        parsed = list(srt_library.parse(text))
    except srt_library.SRTParseError as exc:
        skipped = len(exc.unmatched_content) - len(exc.unmatched_content.lstrip())
        line = text[: exc.expected_start + skipped].count("\n") + 1
        snippet = exc.unmatched_content.strip().splitlines()[0][:60] if exc.unmatched_content.strip() else ""
        raise SubtitleError(
            _where(name, line), f"not valid SRT ({snippet!r} is not a subtitle block)", _FIX
        ) from exc
    except ValueError as exc:  # srt.TimestampParseError: a timestamp with impossible fields
        stamp = str(exc).rpartition(": ")[2]
        line = next((n for n, row in enumerate(text.splitlines(), start=1) if stamp and stamp in row), 0)
        raise SubtitleError(_where(name, line), f"not valid SRT ({exc})", _FIX) from exc
    return [SubtitleCue(_ms(s.start), _ms(s.end), s.content, str(s.index)) for s in parsed]


def _ms(delta: timedelta) -> int:
    return delta // timedelta(milliseconds=1)
