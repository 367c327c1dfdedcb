"""Merge: sound cues folded into a dialogue subtitle file, which is kept as it was.

The merged file is the dialogue file's own text (header text, STYLE/REGION/NOTE blocks,
line endings, byte-order mark, every cue block as written) with sound cue blocks inserted
between its blocks, plus sound lines after a dialogue cue's own text where the `combine`
strategy adds one. Taking those out again gives the dialogue file back byte for byte; SRT
counters are renumbered from 1 in the merged order (SRT has no other way to hold a cue
between two others). WebVTT merges carry a `NOTE captioner merge` block.

Where each sound goes is decided in `placement`. Here: which sounds are alerts (priority
4-5, never left out), which are in the dialogue file already (an earlier merge), and
refusing a "dialogue" file that holds captioner's own sound captions.
"""

from __future__ import annotations

import re
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from datetime import timedelta
from functools import lru_cache
from pathlib import Path
from typing import Any

import srt as srt_library
import yaml

from ..cues import Cue, unique_identifier
from ..errors import SubtitleError
from ..policy import Decision
from ..style import Style
from ..vocabulary import ALERT_PRIORITY
from . import webvtt as vtt_writer
from .delivery import delivery_text
from .placement import ACTIONS, Board, MergedCue, SoundOutcome, pieces
from .subtitles import SubtitleCue, SubtitleFormat, SubtitleTrack, parse_subtitles, plain_lines
from .textblocks import blocks

__all__ = [
    "ACTIONS",
    "MergedCue",
    "MergedTrack",
    "SoundOutcome",
    "check_dialogue",
    "dropped_decisions",
    "dumps_merged",
    "merge_json",
    "merge_tracks",
    "outcomes_json",
    "sound_cues_from_track",
    "sound_priority",
    "unmerge",
]

MERGE_HEADING = "NOTE captioner merge"
_OURS = re.compile(r"^(NOTE captioner (?:record|merge))\b", re.MULTILINE)
_VOCABULARY = Path(__file__).resolve().parents[1] / "data" / "yamnet_vocabulary.yaml"
_MARKS = "[]♪# \t"


@dataclass(frozen=True, slots=True)
class MergedTrack:
    """The merged track: its cues in time order, what happened to each sound, and the
    dialogue file it is written into."""

    format: SubtitleFormat
    cues: tuple[MergedCue, ...]
    outcomes: tuple[SoundOutcome, ...]
    dialogue: SubtitleTrack


def merge_tracks(
    dialogue: SubtitleTrack,
    sounds: Sequence[Cue],
    style: Style,
    *,
    priorities: Mapping[str, int] | None = None,
) -> MergedTrack:
    """Fold sound cues into a dialogue track; see the module notes for the rules.

    `priorities` maps event ids to vocabulary priorities; a cue whose ids are not in it is
    rated by its wording (see `sound_priority`).

    Raises:
        SubtitleError: the dialogue file holds captioner's own sound captions.
    """
    _refuse_sound_tracks(dialogue, sounds, style.layout.sync_tolerance_ms)
    if dialogue.source is None:
        dialogue = _with_source(dialogue)
    board = Board(dialogue, style)
    outcomes = []
    for cue in sorted(sounds, key=lambda c: (c.start_ms, c.end_ms)):
        earlier = _already_there(dialogue, cue, style.layout.sync_tolerance_ms)
        if earlier is not None:
            outcomes.append(earlier)
            continue
        alert = sound_priority(cue, priorities) >= ALERT_PRIORITY
        outcomes += [board.place(piece) for piece in pieces(cue, style.layout, alert=alert)]
    merged = [
        MergedCue(
            d.start_ms,
            d.end_ms,
            d,
            tuple(line for lines, _ in board.added[i] for line in lines),
            tuple(x for _, ids in board.added[i] for x in ids),
        )
        for i, d in enumerate(board.dialogue)
    ]
    merged += board.placed
    merged.sort(key=lambda c: (c.start_ms, c.end_ms, c.dialogue is None))  # stable: dialogue keeps its order
    return MergedTrack(dialogue.format, tuple(merged), tuple(outcomes), dialogue)


def sound_priority(cue: Cue, priorities: Mapping[str, int] | None = None) -> int:
    """The cue's priority: from its events when known, else from its wording in the bundled
    vocabulary; wording it does not know counts as an alert (5), so it is never left out.

    >>> dog, phone = Cue(0, 1, ("[dog barking]",), ("e1-end",)), Cue(0, 1, ("PHONE RINGS",), ("x",))
    >>> sound_priority(dog), sound_priority(phone), sound_priority(dog, {"e1": 2})
    (3, 4, 2)
    >>> sound_priority(Cue(0, 1, ("[tuba]",), ()))
    5
    """
    given = priorities or {}
    known = [given[i.removesuffix("-end")] for i in cue.event_ids if i.removesuffix("-end") in given]
    if known:
        return max(known)
    wordings = _wording_priorities()
    rated = [wordings.get(_phrase(line), 5) for line in cue.lines if _phrase(line)]
    return max(rated, default=5)


def unmerge(track: MergedTrack) -> tuple[SubtitleCue, ...]:
    """The dialogue cues the merged track carries, in order (the original cues themselves)."""
    return tuple(c.dialogue for c in track.cues if c.dialogue is not None)


def sound_cues_from_track(track: SubtitleTrack) -> tuple[Cue, ...]:
    """Sound cues read from a caption file (for `captioner merge`), as plain-text lines."""
    cues = []
    for number, cue in enumerate(track.cues, start=1):
        lines = tuple(line.strip() for line in plain_lines(cue.text, track.format) if line.strip())
        cues.append(Cue(cue.start_ms, cue.end_ms, lines, (cue.identifier or f"cue{number}",)))
    return tuple(cues)


def dumps_merged(track: MergedTrack, note: str = "") -> str:
    """The dialogue file's text with the sound cues written in (WebVTT: and a merge NOTE)."""
    source = track.dialogue.source
    assert source is not None  # merge_tracks gives every track a source
    text, newline = source.text, source.newline
    taken = {c.dialogue.identifier for c in track.cues if c.dialogue is not None and c.dialogue.identifier}
    parts, cursor, counter = ["\ufeff" if source.bom else ""], 0, 0
    for edit in sorted(_edits(track, note), key=lambda e: (e.offset, e.order)):
        parts.append(text[cursor : edit.offset])
        cursor = edit.offset
        if edit.order == _ADDED_LINES:
            assert isinstance(edit.item, str)
            parts.append(edit.item)
            continue
        if edit.item is None:  # a dialogue cue: SRT numbers every cue in the merged order
            counter += 1
            if track.format == "srt" and text[edit.offset : edit.until].strip().isdigit():
                parts.append(str(counter))
                cursor = edit.until
            continue
        if isinstance(edit.item, MergedCue):
            counter += 1
            block = _sound_block(edit.item, track.format, counter, taken)
        else:
            block = edit.item
        block = block.replace("\n", newline)
        parts.append(newline * 2 + block if edit.order >= _AFTER_LAST else block + newline * 2)
    parts.append(text[cursor:])
    return "".join(parts)


@dataclass(frozen=True, slots=True)
class _Edit:
    """One change to the dialogue file's text: insert at `offset`, or (a cue's counter line,
    `item` None) replace up to `until`. Edits at one offset apply in `order`."""

    offset: int
    order: int
    item: str | MergedCue | None
    until: int = 0


_BEFORE_NOTE, _BEFORE, _COUNTER, _ADDED_LINES, _AFTER_LAST, _AFTER_LAST_SOUND = range(-1, 5)


def _edits(track: MergedTrack, note: str) -> list[_Edit]:
    """Where the merge NOTE, each sound cue and each added sound line go in the dialogue text.

    A sound cue goes before the first dialogue cue (in file order) that starts after it, right
    after the block of the cue before that one, so a NOTE above a cue stays with its cue; a
    sound after every dialogue cue goes after the last block.
    """
    assert track.dialogue.source is not None
    text, fmt = track.dialogue.source.text, track.format
    found = blocks(text)
    last = found[-1][1] if found else 0
    edits = []
    if fmt == "vtt":
        heading = MERGE_HEADING + ("\n" + vtt_writer.note_text(note) if note.strip() else "")
        first = found[1][0] if len(found) > 1 else None  # the block after the WEBVTT header
        edits.append(
            _Edit(first, _BEFORE_NOTE, heading) if first is not None else _Edit(last, _AFTER_LAST, heading)
        )
    in_file = sorted(
        ((c.dialogue.span, c) for c in track.cues if c.dialogue is not None and c.dialogue.span is not None),
        key=lambda pair: pair[0].start,
    )
    for span, cue in in_file:
        counter_end = span.start + len(text[span.start : span.timing].rstrip("\r\n"))
        edits.append(_Edit(span.start, _COUNTER, None, counter_end))
        if cue.sound_lines:
            lines = [vtt_writer.escape(x) if fmt == "vtt" else x for x in cue.sound_lines]
            edits.append(
                _Edit(span.text_end, _ADDED_LINES, "".join(track.dialogue.source.newline + x for x in lines))
            )
    for sound in (c for c in track.cues if c.dialogue is None):
        later = next((n for n, (_, d) in enumerate(in_file) if d.start_ms > sound.start_ms), None)
        if later is None:
            edits.append(_Edit(last, _AFTER_LAST_SOUND, sound))
        elif later == 0:
            edits.append(_Edit(in_file[0][0].start, _BEFORE, sound))
        else:
            previous_end = in_file[later - 1][0].text_end
            edits.append(_Edit(next(b for b, _ in found if b > previous_end), _BEFORE, sound))
    return edits


def dropped_decisions(track: MergedTrack) -> tuple[Decision, ...]:
    """A `layout` decision for every event whose sound cue the merge left out."""
    return tuple(
        Decision(event_id, False, "layout", f"merge: {o.detail}")
        for o in track.outcomes
        if o.action == "dropped"
        for event_id in o.event_ids
        if not event_id.endswith("-end")
    )


def outcomes_json(track: MergedTrack) -> list[dict[str, Any]]:
    """One JSON-ready record per sound cue: original and placed times, action and reason."""
    return [
        {
            "events": list(o.event_ids),
            "text": o.text,
            "start_ms": o.start_ms,
            "end_ms": o.end_ms,
            "action": o.action,
            "alert": o.alert,
            "placed_start_ms": o.placed_start_ms,
            "placed_end_ms": o.placed_end_ms,
            "reason": o.detail,
        }
        for o in track.outcomes
    ]


def merge_json(track: MergedTrack) -> dict[str, Any]:
    """The sidecar's account of a merge: every sound cue, and which dialogue cues gained a line."""
    changed = [c for c in track.cues if c.dialogue is not None and c.sound_lines]
    return {
        "sound_cues": outcomes_json(track),
        "dialogue_cues": sum(c.dialogue is not None for c in track.cues),
        "dialogue_cues_untouched": sum(c.dialogue is not None and not c.sound_lines for c in track.cues),
        "dialogue_cues_with_sound_line": [
            {
                "start_ms": c.start_ms,
                "end_ms": c.end_ms,
                "where": c.dialogue.location if c.dialogue else "",
                "added": list(c.sound_lines),
            }
            for c in changed
        ],
    }


def _sound_block(cue: MergedCue, fmt: SubtitleFormat, counter: int, taken: set[str]) -> str:
    if fmt == "srt":
        stamps = (
            srt_library.timedelta_to_srt_timestamp(timedelta(milliseconds=ms))
            for ms in (cue.start_ms, cue.end_ms)
        )
        return f"{counter}\n{' --> '.join(stamps)}\n" + "\n".join(cue.sound_lines)
    identifier = unique_identifier(f"sound-{cue.event_ids[0]}" if cue.event_ids else "sound", taken)
    payload = vtt_writer.cue_payload(cue.sound_lines)
    return vtt_writer.cue_block(
        cue.start_ms, cue.end_ms, payload, identifier=identifier, settings=cue.edge_setting
    )


def _phrase(line: str) -> str:
    """A caption line as a vocabulary phrase: marks and case gone, an end cue's "stops" too.

    >>> _phrase("[Music stops]"), _phrase("♪ upbeat music ♪"), _phrase("DOG BARKS")
    ('music', 'upbeat music', 'dog barks')
    """
    return line.strip(_MARKS).lower().removesuffix(" stops").strip()


@lru_cache(maxsize=1)
def _wording_priorities() -> dict[str, int]:
    """Every wording of the bundled vocabulary (both conventions) -> its concept's priority."""
    try:
        data = yaml.safe_load(_VOCABULARY.read_text(encoding="utf-8"))
    except (OSError, yaml.YAMLError):
        return {}
    found: dict[str, int] = {}
    for spec in data.values() if isinstance(data, dict) else ():
        for wordings in (spec.get("classes") or {}).values():
            for phrase in wordings:
                found[phrase] = max(found.get(phrase, 0), int(spec.get("priority", 2)))
    return found


def _matches(dialogue_lines: Sequence[str], sound_lines: Sequence[str]) -> bool:
    """The dialogue cue shows the sound's lines: as its whole text, or as its last lines."""
    wanted = [line.strip() for line in sound_lines if line.strip()]
    have = [line.strip() for line in dialogue_lines if line.strip()]
    return bool(wanted) and have[len(have) - len(wanted) :] == wanted


def _already_there(dialogue: SubtitleTrack, cue: Cue, tolerance_ms: int) -> SoundOutcome | None:
    """An outcome `present` when a dialogue cue near the sound's start already shows its text."""
    for d in dialogue.cues:
        if abs(d.start_ms - cue.start_ms) <= tolerance_ms and _matches(
            plain_lines(d.text, dialogue.format), cue.lines
        ):
            where = d.location or vtt_writer.timestamp(d.start_ms)
            return SoundOutcome(
                cue.event_ids,
                " / ".join(cue.lines),
                cue.start_ms,
                cue.end_ms,
                "present",
                d.start_ms,
                d.end_ms,
                f"already in the dialogue file ({where}), from an earlier merge; not added again",
            )
    return None


def check_dialogue(dialogue: SubtitleTrack) -> None:
    """Refuse a dialogue file that is captioner's own sound track or merged track (by its
    record or merge NOTE), before any work is done.

    Raises:
        SubtitleError: naming the file and the block found.
    """
    mark = _OURS.search(dialogue.source.text) if dialogue.source else None
    if mark:
        raise SubtitleError(
            dialogue.name,
            f"holds sound captions captioner wrote (its '{mark.group(1)}' block), not only dialogue",
            "merge into the original dialogue subtitles instead",
        )


def _refuse_sound_tracks(dialogue: SubtitleTrack, sounds: Sequence[Cue], tolerance_ms: int) -> None:
    """Refuse a dialogue file that is captioner's own track, or whose cues are the sound cues."""
    check_dialogue(dialogue)
    if dialogue.cues and all(
        any(
            abs(d.start_ms - s.start_ms) <= tolerance_ms
            and [x.strip() for x in plain_lines(d.text, dialogue.format) if x.strip()] == list(s.lines)
            for s in sounds
        )
        for d in dialogue.cues
    ):
        raise SubtitleError(
            dialogue.name,
            "its cues are the sound cues themselves (same text and times), so merging would show each twice",
            "pass the dialogue subtitles, not the sound captions",
        )


def _with_source(track: SubtitleTrack) -> SubtitleTrack:
    """A track built in code, written out and read back so the merge can work on its text."""
    return parse_subtitles(delivery_text(track), track.format, name=track.name)
