"""Safe re-runs: keep a person's edits when a cue file is captioned again with --update.

Every WebVTT sound-caption track the tool writes carries one record block (a merged
track, dialogue plus sound cues, carries none), a WebVTT comment that lists each
machine-written cue by identifier, time and fingerprint (SHA-256 of its timing and text
exactly as written)::

    NOTE captioner record 1
    cue e0006 00:00:06.870 00:00:09.120 sha256:5be1f0a2c3d4e5f6
    gone e0009 00:00:12.440 00:00:18.440

On a re-run each cue of the existing file falls in one of four classes:

- unchanged: identifier (or fingerprint) of a recorded cue, fingerprint matches; the new
  run may replace it;
- edited: identifier of a recorded cue, fingerprint differs; kept as the person left it;
- added: no or unknown identifier; kept;
- deleted: a recorded cue missing from the file; remembered as `gone`, never brought back.

New machine cues go in only where they overlap no edited, added or deleted cue (old or
new position of an edited cue alike).
"""

from __future__ import annotations

import hashlib
import re
from collections.abc import Sequence
from dataclasses import dataclass
from enum import Enum
from pathlib import Path

from .cues import Cue, unique_identifier
from .errors import OutputError, SubtitleError
from .events import overlaps
from .formats import webvtt
from .formats.subtitles import SubtitleCue, SubtitleTrack, decode_text, parse_subtitles

RECORD_HEADING = "NOTE captioner record 1"
_RECORD_LINE = re.compile(
    r"^(cue|gone) (\S+) (\d+:\d\d:\d\d\.\d{3}) (\d+:\d\d:\d\d\.\d{3})(?: sha256:([0-9a-f]+))?$"
)
_FINGERPRINT_HEX = 16  # 64 bits: collisions between a person's edit and the original are negligible


class Origin(Enum):
    """What became of a cue between the last run and now."""

    UNCHANGED = "unchanged"
    EDITED = "edited"
    ADDED = "added"
    DELETED = "deleted"


@dataclass(frozen=True, slots=True)
class RecordEntry:
    """One machine cue as the tool last wrote it; `fingerprint` is empty for a `gone` entry."""

    identifier: str
    start_ms: int
    end_ms: int
    fingerprint: str
    gone: bool = False


@dataclass(frozen=True, slots=True)
class Summary:
    """Counts of one update, for the one-line report."""

    kept_edited: int
    kept_added: int
    deleted: int
    replaced: int
    new_written: int
    new_skipped: int

    def line(self) -> str:
        return (
            f"kept {self.kept_edited} edited and {self.kept_added} hand-added cue(s), respected "
            f"{self.deleted} deletion(s); "
            f"{self.new_written} machine cue(s) written, {self.new_skipped} skipped where you had worked"
        )


def fingerprint(start_ms: int, end_ms: int, text: str) -> str:
    """Fingerprint of a cue's timing and its text exactly as in the file.

    >>> fingerprint(0, 1000, "[door slams]") == fingerprint(0, 1000, "[door slams]")
    True
    >>> fingerprint(0, 1000, "[door slams]") == fingerprint(0, 1001, "[door slams]")
    False
    """
    digest = hashlib.sha256(f"{start_ms}\n{end_ms}\n{text}".encode()).hexdigest()
    return digest[:_FINGERPRINT_HEX]


def note_blocks(text: str) -> tuple[str, ...]:
    """The WebVTT comment blocks of a file, each as written ("NOTE ..." up to the blank line)."""
    blocks = re.split(r"\n[ \t]*\n", text.replace("\r\n", "\n").replace("\r", "\n"))
    return tuple(
        block.strip("\n")
        for block in blocks
        if block.startswith("NOTE") and (len(block) == 4 or block[4] in " \t\n")
    )


def read_record(text: str) -> tuple[RecordEntry, ...] | None:
    """The record block of a WebVTT file's text; None when the file has none."""
    for block in note_blocks(text):
        lines = block.split("\n")
        if lines[0].strip() != RECORD_HEADING:
            continue
        entries = []
        for line in lines[1:]:
            match = _RECORD_LINE.match(line.strip())
            if match:
                kind, identifier, start, end, digest = match.groups()
                entries.append(RecordEntry(identifier, _ms(start), _ms(end), digest or "", kind == "gone"))
        return tuple(entries)
    return None


def record_block(entries: Sequence[RecordEntry]) -> str:
    """The record as a WebVTT comment block (no "-->" can appear in it)."""
    lines = [RECORD_HEADING]
    for entry in entries:
        times = f"{webvtt.timestamp(entry.start_ms)} {webvtt.timestamp(entry.end_ms)}"
        if entry.gone:
            lines.append(f"gone {entry.identifier} {times}")
        else:
            lines.append(f"cue {entry.identifier} {times} sha256:{entry.fingerprint}")
    return "\n".join(lines)


def recorded_vtt(cues: Sequence[Cue], note: str) -> str:
    """A fresh WebVTT file for machine cues, with its record block after the note.

    The record needs each identifier once: a repeated one gets a suffix (`unique_identifier`).
    """
    return _document(cues, set(), [], (), [], note)


def classify(track: SubtitleTrack, record: Sequence[RecordEntry]) -> dict[str, Origin]:
    """Origin of each cue of `track` (keyed by position "0", "1", ...) and of each recorded
    identifier missing from the file (keyed by that identifier, always DELETED)."""
    live = {e.identifier: e for e in record if not e.gone}
    by_print = {e.fingerprint: e for e in live.values()}
    origins: dict[str, Origin] = {}
    seen: set[str] = set()
    for position, cue in enumerate(track.cues):
        printed = fingerprint(cue.start_ms, cue.end_ms, cue.text)
        entry = live.get(cue.identifier)
        if entry is None and printed in by_print and by_print[printed].identifier not in seen:
            entry = by_print[printed]  # an editor that drops identifiers: match the cue by content
        if entry is None:
            origins[str(position)] = Origin.ADDED
            continue
        seen.add(entry.identifier)
        origins[str(position)] = Origin.UNCHANGED if printed == entry.fingerprint else Origin.EDITED
    for identifier in live:
        if identifier not in seen:
            origins[identifier] = Origin.DELETED
    return origins


def update_vtt(
    existing: Path, cues: Sequence[Cue], note: str, *, text: str | None = None
) -> tuple[str, Summary]:
    """The text that replaces `existing` after a new run produced `cues`.

    `text` is the file's content when the caller has read it already; otherwise the file is
    read here, once.

    Raises:
        SubtitleError: the existing file is not valid WebVTT.
        OutputError: it is missing, not WebVTT, or has no record block, so edits cannot be told apart.
    """
    existing = Path(existing)
    if text is None:
        text = existing_text(existing)
    if text is None:
        raise OutputError(existing, "not found", "run without --update to write it")
    return reconcile(
        parse_subtitles(text, "vtt", name=str(existing)), _required_record(existing, text), cues, note
    )


def reconcile(
    track: SubtitleTrack, record: Sequence[RecordEntry], cues: Sequence[Cue], note: str
) -> tuple[str, Summary]:
    """Merge a person's file (`track` + its `record`) with a new run's machine `cues`."""
    origins = classify(track, record)
    recorded = {e.identifier: e for e in record}
    kept: list[SubtitleCue] = []
    protected: list[tuple[int, int]] = []
    entries: list[RecordEntry] = [e for e in record if e.gone]
    for position, cue in enumerate(track.cues):
        origin = origins[str(position)]
        if origin is Origin.UNCHANGED:
            continue
        kept.append(cue)
        protected.append((cue.start_ms, cue.end_ms))
        entry = recorded.get(cue.identifier)
        if origin is Origin.EDITED and entry is not None:
            entries.append(entry)  # the original fingerprint keeps marking it as edited
            protected.append((entry.start_ms, entry.end_ms))
    for identifier, origin in origins.items():
        if origin is Origin.DELETED:
            entry = recorded[identifier]
            entries.append(RecordEntry(identifier, entry.start_ms, entry.end_ms, "", gone=True))
    protected += [(e.start_ms, e.end_ms) for e in entries if e.gone]

    fresh = [c for c in cues if not any(overlaps(c.start_ms, c.end_ms, s, e) for s, e in protected)]
    taken = {c.identifier for c in kept} | {e.identifier for e in entries}
    text = _document(fresh, taken, kept, track.header_blocks, entries, note)
    counts = list(origins.values())
    summary = Summary(
        kept_edited=counts.count(Origin.EDITED),
        kept_added=counts.count(Origin.ADDED),
        deleted=counts.count(Origin.DELETED) + sum(e.gone for e in record),
        replaced=counts.count(Origin.UNCHANGED),
        new_written=len(fresh),
        new_skipped=len(cues) - len(fresh),
    )
    return text, summary


def _document(
    fresh: Sequence[Cue],
    taken: set[str],
    kept: Sequence[SubtitleCue],
    header_blocks: Sequence[str],
    carried: Sequence[RecordEntry],
    note: str,
) -> str:
    """Header, note, record, STYLE/REGION blocks, then all cues in time order.

    Each new machine cue gets an identifier no kept cue or record entry holds (`taken`
    grows as they are given out); its record entry fingerprints the cue text exactly as
    written, which is what a reader of the file gets back.
    """
    entries = list(carried)
    timed: list[tuple[int, str]] = []
    for cue in fresh:
        identifier = unique_identifier(cue.event_ids[0] if cue.event_ids else "cue", taken)
        payload = webvtt.cue_payload(cue.lines)
        timed.append(
            (cue.start_ms, webvtt.cue_block(cue.start_ms, cue.end_ms, payload, identifier=identifier))
        )
        entries.append(
            RecordEntry(identifier, cue.start_ms, cue.end_ms, fingerprint(cue.start_ms, cue.end_ms, payload))
        )
    entries.sort(key=lambda e: (e.start_ms, e.identifier))
    # A person's cue is written back exactly as read: text, identifier and settings.
    timed += [
        (
            c.start_ms,
            webvtt.cue_block(
                c.start_ms, c.end_ms, c.text, identifier=c.identifier, settings=c.settings.strip()
            ),
        )
        for c in kept
    ]
    timed.sort(key=lambda pair: pair[0])  # stable: on equal starts machine cues come first
    return webvtt.document(
        [block for _, block in timed], note=note, header_blocks=(record_block(entries), *header_blocks)
    )


def _ms(stamp: str) -> int:
    hours, minutes, rest = stamp.split(":")
    seconds, millis = rest.split(".")
    return ((int(hours) * 60 + int(minutes)) * 60 + int(seconds)) * 1000 + int(millis)


def updatable(output: Path | None, *, merge: bool) -> bool:
    """Whether --update has an existing file to reconcile (False: a fresh file is written).

    Checked before any work, so a run that cannot keep the edits stops at once.

    Raises:
        OutputError: standard output, a merged track, an SRT file, or a file without a record.
        SubtitleError: the file cannot be read.
    """
    if output is None:
        raise OutputError(
            "-o -", "--update needs a caption file to update, not standard output", "name the file with -o"
        )
    if merge:
        raise OutputError(
            output,
            "--update does not work on merged tracks",
            "update the sound-cue track, then merge it again",
        )
    return existing_text(output) is not None


def existing_text(output: Path) -> str | None:
    """The decoded text of a track to update, checked to be WebVTT with a record block;
    None when there is no such file yet.

    Decoded like every subtitle file the tool reads (`subtitles.decode_text`).

    Raises:
        OutputError: not a .vtt file, or no record block.
        SubtitleError: the file cannot be read.
    """
    output = Path(output)
    if not output.exists():
        return None
    if output.suffix.lower() != ".vtt":
        raise OutputError(
            output,
            "--update needs the record block that only WebVTT files can hold",
            "caption to a .vtt file, or pass --force to replace it",
        )
    try:
        raw = output.read_bytes()
    except OSError as exc:
        raise SubtitleError(output, f"cannot read ({exc.strerror})", "check its permissions") from exc
    text = decode_text(output, raw)
    _required_record(output, text)
    return text


def _required_record(path: Path, text: str) -> tuple[RecordEntry, ...]:
    record = read_record(text)
    if record is None:
        raise OutputError(
            path,
            f"has no '{RECORD_HEADING}' block, so hand edits cannot be told from machine cues",
            "restore that block, or pass --force to replace the file",
        )
    return record
