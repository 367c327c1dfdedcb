"""Safe re-runs: keep a person's edits when a cue file is captioned again with --update.

Every WebVTT file the tool writes carries one record block, a WebVTT comment that lists
each machine-written cue by identifier, time and fingerprint (SHA-256 of its timing and
text exactly as written)::

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

from .cues import Cue
from .errors import OutputError
from .formats import webvtt
from .formats.subtitles import SubtitleCue, SubtitleTrack, parse_subtitles, read_track

RECORD_HEADING = "NOTE captioner record 1"
_RECORD_LINE = re.compile(r"^(cue|gone) (\S+) (\d+:\d\d:\d\d\.\d{3}) (\d+:\d\d:\d\d\.\d{3})(?: sha256:([0-9a-f]+))?$")
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
            f"kept {self.kept_edited} edited and {self.kept_added} hand-added cue(s), respected {self.deleted} deletion(s); "
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
    return tuple(block.strip("\n") for block in blocks if block.startswith("NOTE") and (len(block) == 4 or block[4] in " \t\n"))


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

    Identifiers are made unique (a split cue can share its event's id), as the record needs.
    """
    return _assemble(_split_vtt(webvtt.dumps(_unique_ids(cues, set()), note)), [], ())


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


def update_vtt(existing: Path, cues: Sequence[Cue], note: str) -> tuple[str, Summary]:
    """The text that replaces `existing` after a new run produced `cues`.

    Raises:
        SubtitleError: the existing file is not valid WebVTT.
        OutputError: it is not WebVTT or has no record block, so edits cannot be told apart.
    """
    existing = Path(existing)
    if not updatable(existing, merge=False):
        raise OutputError(existing, "not found", "run without --update to write it")
    track = read_track(existing)
    record = read_record(existing.read_text(encoding="utf-8-sig", errors="replace")) or ()
    return reconcile(track, record, cues, note)


def reconcile(track: SubtitleTrack, record: Sequence[RecordEntry], cues: Sequence[Cue], note: str) -> tuple[str, Summary]:
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

    fresh = [c for c in cues if not any(_overlaps(c.start_ms, c.end_ms, s, e) for s, e in protected)]
    taken = {c.identifier for c in kept} | {e.identifier for e in entries}
    blocks = _split_vtt(webvtt.dumps(_unique_ids(fresh, taken), note))
    text = _assemble(blocks, kept, track.header_blocks, entries)
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


@dataclass(frozen=True, slots=True)
class _Blocks:
    head: list[str]  # "WEBVTT" and the note block
    cues: list[tuple[int, str]]  # (start_ms, block text)


def _split_vtt(text: str) -> _Blocks:
    # The writer separates blocks by one blank line and never writes a blank line inside one.
    blocks = text.rstrip("\n").split("\n\n")
    # WEBVTT, NOTE, STYLE and REGION blocks open with their keyword; every other block is a cue.
    is_head = [b.split("\n", 1)[0].split(" ", 1)[0] in ("WEBVTT", "NOTE", "STYLE", "REGION") for b in blocks]
    head = [b for b, h in zip(blocks, is_head) if h]
    parsed = parse_subtitles(text, "vtt").cues
    cue_blocks = [b for b, h in zip(blocks, is_head) if not h]
    return _Blocks(head, [(cue.start_ms, block) for cue, block in zip(parsed, cue_blocks)])


def _assemble(machine: _Blocks, kept: Sequence[SubtitleCue], header_blocks: Sequence[str], carried: Sequence[RecordEntry] = ()) -> str:
    """Header, note, record, STYLE/REGION blocks, then all cues in time order."""
    machine_text = "\n\n".join([*machine.head, *(b for _, b in machine.cues)]) + "\n"
    written = parse_subtitles(machine_text, "vtt").cues  # fingerprint what a reader will see
    entries = list(carried) + [RecordEntry(c.identifier, c.start_ms, c.end_ms, fingerprint(c.start_ms, c.end_ms, c.text)) for c in written]
    entries.sort(key=lambda e: (e.start_ms, e.identifier))
    person = [(c.start_ms, _cue_block(c)) for c in kept]
    ordered = sorted(machine.cues + person, key=lambda pair: pair[0])  # stable: ties keep machine first
    return "\n\n".join([*machine.head, record_block(entries), *header_blocks, *(b for _, b in ordered)]) + "\n"


def _cue_block(cue: SubtitleCue) -> str:
    timing = f"{webvtt.timestamp(cue.start_ms)} --> {webvtt.timestamp(cue.end_ms)}"
    if cue.settings.strip():
        timing += " " + cue.settings.strip()
    return "\n".join(part for part in (cue.identifier, timing, cue.text) if part)


def _unique_ids(cues: Sequence[Cue], taken: set[str]) -> list[Cue]:
    """Give a new machine cue a fresh identifier when a kept cue or a deletion holds its own."""
    result = []
    for cue in cues:
        first = cue.event_ids[0] if cue.event_ids else "cue"
        name, number = first, 1
        while name in taken:
            number += 1
            name = f"{first}.{number}"
        taken.add(name)
        result.append(Cue(cue.start_ms, cue.end_ms, cue.lines, (name, *cue.event_ids[1:])) if name != first else cue)
    return result


def _overlaps(start_a: int, end_a: int, start_b: int, end_b: int) -> bool:
    return start_a < end_b and start_b < end_a


def _ms(stamp: str) -> int:
    hours, minutes, rest = stamp.split(":")
    seconds, millis = rest.split(".")
    return ((int(hours) * 60 + int(minutes)) * 60 + int(seconds)) * 1000 + int(millis)


def updatable(output: Path | None, *, merge: bool) -> bool:
    """Whether --update has an existing file to reconcile (False: a fresh file is written).

    Checked before any work, so a run that cannot keep the edits stops at once.

    Raises:
        OutputError: standard output, a merged track, an SRT file, or a file without a record.
    """
    if output is None:
        raise OutputError("-o -", "--update needs a caption file to update, not standard output", "name the file with -o")
    if merge:
        raise OutputError(output, "--update does not work on merged tracks", "update the sound-cue track, then merge it again")
    if not output.exists():
        return False
    if output.suffix.lower() != ".vtt":
        raise OutputError(output, "--update needs the record block that only WebVTT files can hold", "caption to a .vtt file, or pass --force to replace it")
    text = output.read_text(encoding="utf-8-sig", errors="replace")
    if read_record(text) is None:
        raise OutputError(output, f"has no '{RECORD_HEADING}' block, so hand edits cannot be told from machine cues", "restore that block, or pass --force to replace the file")
    return True
