"""Safe re-runs: keep a person's edits when a cue file is captioned again with --update.

Every WebVTT sound-caption track the tool writes carries one record block (a merged
track, dialogue plus sound cues, carries none), a WebVTT comment that lists each
machine-written cue by identifier, time and fingerprint (SHA-256 of its timing and text
exactly as written)::

    NOTE captioner record 1
    cue e0006 00:00:06.870 00:00:09.120 sha256:5be1f0a2c3d4e5f6
    gone e0009 00:00:12.440 00:00:18.440

The file a person saved is the truth: on a re-run every cue in it stays exactly as it is
(only a repeated identifier is renamed, as WebVTT needs them unique). Each cue falls in
one of four classes, which decide where new machine cues may go:

- unchanged: identifier (or fingerprint) of a recorded cue, fingerprint matches;
- edited: identifier of a recorded cue, fingerprint differs;
- added: no, unknown or repeated identifier;
- deleted: a recorded cue missing from the file; remembered as `gone`, never brought back.

New machine cues go in only where they overlap no cue of the file and no deleted cue (nor
the old place of an edited one). A file whose record is lost is read as all the person's.
"""

from __future__ import annotations

import dataclasses
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
NOTE_OPENING = "Sound captions drafted by captioner"  # how the heading note of every track starts
_HEADING_WORDS = RECORD_HEADING.split()
_STAMP = re.compile(r"^(?:(\d+):)?(\d\d):(\d\d)\.(\d{3})$")
_DIGEST = re.compile(r"^sha256:([0-9a-f]+)$")
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

    kept_unchanged: int  # machine cues the person left alone, kept as they are
    kept_edited: int
    kept_added: int
    deleted: int
    new_written: int  # machine cues added where the file had none
    new_skipped: int  # new machine cues left out where the person had worked
    already_there: int = 0  # new machine cues over an unchanged one: the file has that sound already
    renamed: int = 0  # repeated identifiers given a free one
    without_record: bool = False  # the record was lost: every cue was taken as the person's

    def line(self) -> str:
        kept = self.kept_unchanged + self.kept_edited + self.kept_added
        text = (
            f"kept all {kept} cue(s) of your file ({self.kept_edited} edited, {self.kept_added} added by "
            f"hand), respected {self.deleted} deletion(s); added {self.new_written} new machine cue(s) "
            f"where your file had none, {self.new_skipped} left out where you had worked"
        )
        if self.renamed:
            text += f"; gave {self.renamed} repeated cue identifier(s) a free one"
        if self.without_record:
            text = f"no '{RECORD_HEADING}' block, so every cue in the file is taken as yours; " + text
        return text


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
    """The record block of a WebVTT file's text; None when the file has none.

    Read leniently, as other editors re-save files: any line breaks and spacing inside
    the block (a heading reflowed onto two lines included), CRLF line ends, a BOM.
    """
    for block in note_blocks(text.lstrip("\ufeff")):
        words = block.split()
        if words[: len(_HEADING_WORDS)] != _HEADING_WORDS:
            continue
        return _entries(words[len(_HEADING_WORDS) :])
    return None


def _entries(words: list[str]) -> tuple[RecordEntry, ...]:
    """Record entries from the words after the heading: `cue ID START END sha256:HEX` or
    `gone ID START END`; anything else is skipped."""
    entries: list[RecordEntry] = []
    position = 0
    while position < len(words):
        kind = words[position]
        size = 5 if kind == "cue" else 4 if kind == "gone" else 0
        fields = words[position : position + size]
        if size and len(fields) == size and _STAMP.match(fields[2]) and _STAMP.match(fields[3]):
            digest = _DIGEST.match(fields[4]) if kind == "cue" else None
            if kind == "gone" or digest:
                fingerprint_hex = digest.group(1) if digest else ""
                entries.append(
                    RecordEntry(fields[1], _ms(fields[2]), _ms(fields[3]), fingerprint_hex, kind == "gone")
                )
                position += size
                continue
        position += 1
    return tuple(entries)


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
    origins, _ = _matched(track, record)
    return origins


def _matched(
    track: SubtitleTrack, record: Sequence[RecordEntry]
) -> tuple[dict[str, Origin], dict[int, RecordEntry]]:
    """`classify`, plus the record entry each unchanged or edited cue (by position) stands for.

    Each entry stands for one cue only: a copy of a cue with its identifier is an added cue.
    """
    live = {e.identifier: e for e in record if not e.gone}
    by_print = {e.fingerprint: e for e in live.values()}
    origins: dict[str, Origin] = {}
    entries: dict[int, RecordEntry] = {}
    seen: set[str] = set()
    for position, cue in enumerate(track.cues):
        printed = fingerprint(cue.start_ms, cue.end_ms, cue.text)
        entry = live.get(cue.identifier)
        if entry is None and not cue.identifier and printed in by_print:
            entry = by_print[printed]  # an editor that drops identifiers: match the cue by content
        if entry is None or entry.identifier in seen:
            origins[str(position)] = Origin.ADDED
            continue
        seen.add(entry.identifier)
        entries[position] = entry
        origins[str(position)] = Origin.UNCHANGED if printed == entry.fingerprint else Origin.EDITED
    for identifier in live:
        if identifier not in seen:
            origins[identifier] = Origin.DELETED
    return origins, entries


def is_untouched(text: str) -> bool:
    """Whether a WebVTT text holds exactly what the tool wrote: every cue matches its record
    entry's fingerprint, none was added or deleted (now or before), and no comment, STYLE or
    REGION block was added."""
    record = read_record(text)
    if record is None or any(e.gone for e in record):
        return False
    try:
        track = parse_subtitles(text, "vtt")
    except SubtitleError:
        return False
    ours = sum(
        block.split()[: len(_HEADING_WORDS)] == _HEADING_WORDS or block[4:].strip().startswith(NOTE_OPENING)
        for block in note_blocks(text)
    )
    if ours != len(note_blocks(text)) or track.header_blocks:
        return False
    return all(origin is Origin.UNCHANGED for origin in classify(track, record).values())


def update_vtt(
    existing: Path, cues: Sequence[Cue], note: str, *, text: str | None = None
) -> tuple[str, Summary]:
    """The text that replaces `existing` after a new run produced `cues`.

    `text` is the file's content when the caller has read it already; otherwise the file is
    read here, once. A file without a record block is taken as all the person's work.

    Raises:
        SubtitleError: the existing file is not valid WebVTT.
        OutputError: it is missing or not WebVTT.
    """
    existing = Path(existing)
    if text is None:
        text = existing_text(existing)
    if text is None:
        raise OutputError(existing, "not found", "run without --update to write it")
    track = parse_subtitles(text, "vtt", name=str(existing))
    record = read_record(text)
    if record is None:
        return reconcile(track, (), cues, note, without_record=True)
    return reconcile(track, record, cues, note)


def reconcile(
    track: SubtitleTrack,
    record: Sequence[RecordEntry],
    cues: Sequence[Cue],
    note: str,
    *,
    without_record: bool = False,
) -> tuple[str, Summary]:
    """Merge a person's file (`track` + its `record`) with a new run's machine `cues`.

    Every cue of the file is kept as it is; new machine cues go in only where the file has
    none and where no recorded cue was deleted or moved away from.
    """
    origins, matched = _matched(track, record)
    worked: list[tuple[int, int]] = []  # where the person changed something
    untouched: list[tuple[int, int]] = []  # machine cues left alone
    entries: list[RecordEntry] = [e for e in record if e.gone]
    kept: list[SubtitleCue] = []
    taken: set[str] = {e.identifier for e in record}
    renamed = 0
    for position, cue in enumerate(track.cues):
        origin = origins[str(position)]
        entry = matched.get(position)
        if entry is not None:
            entries.append(entry)  # the original fingerprint keeps marking an edited cue as edited
            if origin is Origin.EDITED:
                worked.append((entry.start_ms, entry.end_ms))
        (untouched if origin is Origin.UNCHANGED else worked).append((cue.start_ms, cue.end_ms))
        if cue.identifier and entry is None and cue.identifier in {c.identifier for c in kept}:
            cue = dataclasses.replace(cue, identifier=unique_identifier(cue.identifier, taken))
            renamed += 1
        taken.add(cue.identifier)
        kept.append(cue)
    for identifier, origin in origins.items():
        if origin is Origin.DELETED:
            entry = next(e for e in record if e.identifier == identifier and not e.gone)
            entries.append(RecordEntry(identifier, entry.start_ms, entry.end_ms, "", gone=True))
            worked.append((entry.start_ms, entry.end_ms))
    worked += [(e.start_ms, e.end_ms) for e in record if e.gone]

    def clear(cue: Cue, spans: list[tuple[int, int]]) -> bool:
        return not any(overlaps(cue.start_ms, cue.end_ms, s, e) for s, e in spans)

    fresh = [c for c in cues if clear(c, worked) and clear(c, untouched)]
    skipped = sum(not clear(c, worked) for c in cues)
    taken.discard("")
    text = _document(fresh, taken, kept, track.header_blocks, _unique(entries), note)
    counts = list(origins.values())
    summary = Summary(
        kept_unchanged=counts.count(Origin.UNCHANGED),
        kept_edited=counts.count(Origin.EDITED),
        kept_added=counts.count(Origin.ADDED),
        deleted=counts.count(Origin.DELETED) + sum(e.gone for e in record),
        new_written=len(fresh),
        new_skipped=skipped,
        already_there=len(cues) - len(fresh) - skipped,
        renamed=renamed,
        without_record=without_record,
    )
    return text, summary


def _unique(entries: Sequence[RecordEntry]) -> list[RecordEntry]:
    """One record line per identifier and kind (a record read from a damaged file may repeat one)."""
    seen: set[tuple[str, bool]] = set()
    unique = []
    for entry in entries:
        if (entry.identifier, entry.gone) not in seen:
            seen.add((entry.identifier, entry.gone))
            unique.append(entry)
    return unique


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
    match = _STAMP.match(stamp)
    if match is None:
        raise ValueError(f"not a WebVTT timestamp: {stamp}")
    hours, minutes, seconds, millis = (int(part or 0) for part in match.groups())
    return ((hours * 60 + minutes) * 60 + seconds) * 1000 + millis


def updatable(output: Path | None, *, merge: bool) -> bool:
    """Whether --update has an existing file to reconcile (False: a fresh file is written).

    Checked before any work, so a run that cannot keep the edits stops at once.

    Raises:
        OutputError: standard output, a merged track, or an SRT file.
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
    """The decoded text of a track to update, checked to be WebVTT; None when there is no
    such file yet.

    Decoded like every subtitle file the tool reads (`subtitles.decode_text`).

    Raises:
        OutputError: not a .vtt file.
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
    return decode_text(output, raw)
