"""Quality check: what in a WebVTT or SRT track (hand-edited or not) breaks a style or the format.

Each finding names one cue and one rule. The layout rules read the style's `layout` section:
display time (min_duration_ms, max_duration_ms), reading rate (reading_rate_wpm, sound tags
count as words), characters per line, lines per cue, gaps below min_gap_ms, cues that overlap
on screen, and a line repeated within a cue or from the cue just before it. WebVTT files are
also checked against the W3C WebVTT syntax: the header, timestamps, end after start, starts in
order, unique identifiers, no "-->" in cue text.
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Literal

from .cues import reading_ms
from .errors import SubtitleError
from .formats.subtitles import (
    SubtitleCue,
    SubtitleTrack,
    decode_text,
    parse_subtitles,
    plain_lines,
    subtitle_format,
)
from .formats.webvtt import timestamp
from .style import Layout, Style

Rule = Literal["webvtt", "short", "long", "reading", "width", "lines", "overlap", "gap", "repeat"]
_STAMP = r"(?:\d{2,}:)?[0-5]\d:[0-5]\d\.\d{3}"
_TIMING = re.compile(rf"^({_STAMP})[ \t]+-->[ \t]+({_STAMP})(?:[ \t]+.*)?$")
_HEADER = re.compile(r"^\ufeff?WEBVTT(?:[ \t].*)?$")
_BACK_TO_BACK_MS = 1000  # a line shown again within a second reads as the same caption (common practice)


@dataclass(frozen=True, slots=True)
class Finding:
    """One thing that breaks the style or the format; cue 0 is the file as a whole."""

    cue: int  # position in the file, from 1
    identifier: str
    start_ms: int | None
    rule: Rule
    detail: str


@dataclass(frozen=True, slots=True)
class Report:
    """All findings for one track."""

    path: Path
    style: str
    cues: int
    findings: tuple[Finding, ...]

    @property
    def ok(self) -> bool:
        return not self.findings


def check_track(path: Path, style: Style) -> Report:
    """Check one caption file against a style (and, for WebVTT, the W3C syntax).

    Raises:
        SubtitleError: the file cannot be read, or is SRT that does not parse.
    """
    path = Path(path)
    fmt = subtitle_format(path)
    if not path.is_file():
        raise SubtitleError(path, "caption file not found", "check the path")
    try:
        text = decode_text(path, path.read_bytes())
    except OSError as exc:
        raise SubtitleError(path, f"cannot read ({exc.strerror})", "check the path") from exc
    syntax = webvtt_findings(text) if fmt == "vtt" else []
    try:
        track: SubtitleTrack | None = parse_subtitles(text, fmt, name=str(path))
    except SubtitleError as exc:
        if fmt != "vtt":
            raise
        track = None
        if not syntax:
            syntax.append(Finding(0, "", None, "webvtt", str(exc)))
    layout = layout_findings(track.cues, track.format, style.layout) if track is not None else []
    ordered = sorted(syntax + layout, key=lambda f: (f.cue, f.rule))
    return Report(path, style.name, len(track.cues) if track is not None else 0, tuple(ordered))


def webvtt_findings(text: str) -> list[Finding]:
    """W3C WebVTT syntax problems, by cue position (0 for the header)."""
    blocks = [b for b in re.split(r"\n[ \t]*\n", text.replace("\r\n", "\n").replace("\r", "\n").strip("\n"))]
    found: list[Finding] = []
    if not blocks or not _HEADER.match(blocks[0].split("\n")[0]):
        found.append(
            Finding(0, "", None, "webvtt", 'the file must start with "WEBVTT" (W3C WebVTT file header)')
        )
    seen: set[str] = set()
    previous_start = -1
    number = 0
    for block in blocks[1:]:
        lines = block.split("\n")
        if lines[0].startswith(("NOTE", "STYLE", "REGION")) and "-->" not in lines[0]:
            continue
        number += 1
        identifier = lines[0] if "-->" not in lines[0] and len(lines) > 1 else ""
        timing = lines[1] if identifier else lines[0]
        payload = lines[2:] if identifier else lines[1:]
        match = _TIMING.match(timing)
        start = _stamp_ms(match.group(1)) if match else None
        problems = [] if match else [f"timing line {timing!r} is not hh:mm:ss.ttt --> hh:mm:ss.ttt"]
        if match and start is not None:
            if _stamp_ms(match.group(2)) <= start:
                problems.append("ends before it starts (end must be after start)")
            if start < previous_start:
                problems.append("starts before the cue above it (starts must not decrease)")
            previous_start = max(previous_start, start)
            if identifier and identifier in seen:
                problems.append(f"identifier {identifier!r} is used twice (must be unique)")
            seen.add(identifier)
            if any("-->" in line for line in payload):
                problems.append('cue text holds "-->", which ends no cue but breaks players')
        found.extend(Finding(number, identifier, start, "webvtt", problem) for problem in problems)
    return found


def layout_findings(
    cues: tuple[SubtitleCue, ...], fmt: Literal["vtt", "srt"], layout: Layout
) -> list[Finding]:
    """The style's layout and timing rules, cue by cue in file order."""
    found: list[Finding] = []
    previous: SubtitleCue | None = None
    previous_lines: tuple[str, ...] = ()
    for number, cue in enumerate(cues, start=1):

        def add(rule: Rule, detail: str, cue: SubtitleCue = cue, number: int = number) -> None:
            found.append(Finding(number, cue.identifier, cue.start_ms, rule, detail))

        lines = tuple(line.strip() for line in plain_lines(cue.text, fmt) if line.strip())
        shown = cue.end_ms - cue.start_ms
        if shown < layout.min_duration_ms:
            add("short", f"on screen {shown / 1000:.2f} s < {layout.min_duration_ms / 1000:g} s")
        if shown > layout.max_duration_ms:
            add("long", f"on screen {shown / 1000:.2f} s > {layout.max_duration_ms / 1000:g} s")
        needed = reading_ms(lines, layout)
        if 0 < shown < needed:
            words = sum(len(line.split()) for line in lines)
            add(
                "reading",
                f"{words} word(s) in {shown / 1000:.2f} s is {words * 60000 / shown:.0f} wpm > "
                f"{layout.reading_rate_wpm}",
            )
        for line in lines:
            if len(line) > layout.max_chars_per_line:
                add("width", f"line {line!r} has {len(line)} characters > {layout.max_chars_per_line}")
        if len(lines) > layout.max_lines:
            add("lines", f"{len(lines)} lines > {layout.max_lines}")
        repeated = sorted({line for line in lines if lines.count(line) > 1})
        if previous is not None:
            gap = cue.start_ms - previous.end_ms
            if gap < 0 and _same_place(previous, cue):
                add("overlap", f"overlaps the cue above by {-gap / 1000:.2f} s on the same screen position")
            if 0 < gap < layout.min_gap_ms:
                add(
                    "gap",
                    f"gap of {gap / 1000:.2f} s after the cue above < {layout.min_gap_ms / 1000:g} s (close "
                    "it or widen it)",
                )
            if gap < _BACK_TO_BACK_MS:
                repeated += sorted({line for line in lines if line in previous_lines} - set(repeated))
        for line in repeated:
            add("repeat", f"line {line!r} is shown again; a continuing sound is not captioned twice")
        if previous is None or cue.end_ms >= previous.end_ms:
            previous, previous_lines = cue, lines
    return found


def _same_place(a: SubtitleCue, b: SubtitleCue) -> bool:
    """Cues at different `line` positions (a sound cue moved to the top edge) share the screen."""
    return _line_setting(a.settings) == _line_setting(b.settings)


def _line_setting(settings: str) -> str:
    return next((part for part in settings.split() if part.startswith("line:")), "")


def _stamp_ms(stamp: str) -> int:
    parts = stamp.split(":")
    seconds = float(parts[-1])
    minutes = int(parts[-2])
    hours = int(parts[0]) if len(parts) == 3 else 0
    return round(((hours * 60 + minutes) * 60 + seconds) * 1000)


def report_lines(report: Report) -> list[str]:
    """One line per finding, then a summary line."""
    rows = []
    for f in report.findings:
        where = f"{report.path.name}:{f.cue}" if f.cue else report.path.name
        at = f" {timestamp(f.start_ms)}" if f.start_ms is not None else ""
        name = f" {f.identifier}" if f.identifier else ""
        rows.append(f"{where}{at}{name}: {f.rule}: {f.detail}")
    flagged = len({f.cue for f in report.findings})
    if report.ok:
        rows.append(f"{report.path.name}: {report.cues} cue(s), all within style {report.style}")
    else:
        rows.append(
            f"{report.path.name}: {len(report.findings)} finding(s) in {flagged} of {report.cues} cue(s) "
            f"against style {report.style}"
        )
    return rows


def report_json(report: Report) -> dict[str, Any]:
    """The report as a JSON-ready mapping for scripts."""
    return {
        "file": str(report.path),
        "style": report.style,
        "cues": report.cues,
        "ok": report.ok,
        "findings": [
            {
                "cue": f.cue,
                "identifier": f.identifier,
                "start_ms": f.start_ms,
                "rule": f.rule,
                "detail": f.detail,
            }
            for f in report.findings
        ],
    }
