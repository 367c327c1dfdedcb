"""Merge: sound cues folded into an existing dialogue track, every dialogue cue kept exactly.

Dialogue cues are the editor's: their text, tags, identifiers, settings and times pass
through untouched (a cue only ever gains sound lines appended after its own text), so
removing the sound from the merged track gives the dialogue track back. Layout limits are
enforced on what the merge creates or changes: sound cues, and dialogue cues that gained a
sound line. A sound cue that clashes with dialogue is, by the style's merge strategy and its
fallbacks (see `captioner.style.Merge`), positioned at the other screen edge (WebVTT),
added as a line of the dialogue cue, moved into a dialogue gap within the sync tolerance,
or left out with the reason recorded.
"""

from __future__ import annotations

from bisect import bisect_left, bisect_right, insort
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any, Literal

from webvtt.models import CueSettings

from ..cues import Cue, reading_ms, unique_identifier, wrap
from ..policy import Decision
from ..style import Layout, Style
from . import srt as srt_writer
from . import webvtt as vtt_writer
from .subtitles import SubtitleCue, SubtitleFormat, SubtitleTrack, plain_lines

Action = Literal["kept", "retimed", "positioned", "combined", "moved", "dropped"]
Edge = Literal["top", "bottom"]
_FALLBACKS = {
    "position": ("position", "combine", "move"),
    "combine": ("combine", "move"),
    "move": ("move",),
    "drop": (),
}
_EDGE_SETTING = {"top": "line:0", "bottom": "line:-1"}  # first line from the top / last from the bottom
_OTHER_EDGE: dict[Edge, Edge] = {"top": "bottom", "bottom": "top"}


@dataclass(frozen=True, slots=True)
class MergedCue:
    """One cue of the merged track: a dialogue cue (possibly with sound lines after its own
    text) or a sound cue of its own. Times in ms."""

    start_ms: int
    end_ms: int
    dialogue: SubtitleCue | None = None  # the editor's cue, unchanged
    sound_lines: tuple[str, ...] = ()  # plain-text sound caption lines shown in this cue
    event_ids: tuple[str, ...] = ()
    edge: Edge | None = None  # a sound cue placed at this screen edge (WebVTT `line:`)


@dataclass(frozen=True, slots=True)
class SoundOutcome:
    """What the merge did with one sound cue (or one part of a split cue); times in ms."""

    event_ids: tuple[str, ...]
    text: str
    start_ms: int
    end_ms: int
    action: Action
    placed_start_ms: int | None
    placed_end_ms: int | None
    detail: str


@dataclass(frozen=True, slots=True)
class MergedTrack:
    """The merged track in time order, in the dialogue file's format."""

    format: SubtitleFormat
    cues: tuple[MergedCue, ...]
    outcomes: tuple[SoundOutcome, ...]
    header_blocks: tuple[str, ...] = ()


def merge_tracks(dialogue: SubtitleTrack, sounds: Sequence[Cue], style: Style) -> MergedTrack:
    """Fold sound cues into a dialogue track; see the module notes for the rules."""
    board = _Board(dialogue, style)
    outcomes = [
        board.place(piece)
        for cue in sorted(sounds, key=lambda c: (c.start_ms, c.end_ms))
        for piece in _pieces(cue, style.layout)
    ]
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
    return MergedTrack(dialogue.format, tuple(merged), tuple(outcomes), dialogue.header_blocks)


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
    """The merged track as WebVTT (with `note` and the dialogue's STYLE/REGION blocks) or SRT."""
    if track.format == "srt":
        return srt_writer.dumps_text([(c.start_ms, c.end_ms, _payload(c, "srt")) for c in track.cues])
    used = {c.dialogue.identifier for c in track.cues if c.dialogue is not None and c.dialogue.identifier}
    blocks = []
    for cue in track.cues:
        if cue.dialogue is not None:
            blocks.append(
                vtt_writer.cue_block(
                    cue.start_ms,
                    cue.end_ms,
                    _payload(cue, "vtt"),
                    identifier=cue.dialogue.identifier,
                    settings=cue.dialogue.settings,
                )
            )
            continue
        identifier = unique_identifier(f"sound-{cue.event_ids[0]}" if cue.event_ids else "sound", used)
        settings = _EDGE_SETTING[cue.edge] if cue.edge else ""
        blocks.append(
            vtt_writer.cue_block(
                cue.start_ms, cue.end_ms, _payload(cue, "vtt"), identifier=identifier, settings=settings
            )
        )
    return vtt_writer.document(blocks, note=note, header_blocks=track.header_blocks)


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
            "placed_start_ms": o.placed_start_ms,
            "placed_end_ms": o.placed_end_ms,
            "reason": o.detail,
        }
        for o in track.outcomes
    ]


def merge_table(track: MergedTrack) -> str:
    """One row per sound cue: its time, text, what the merge did and why."""
    header = f"{'sound cue':<12} {'start':>9} {'placed':>9}  {'action':<10} text / reason"
    rows = [header, "-" * len(header)]
    for o in track.outcomes:
        placed = "-" if o.placed_start_ms is None else vtt_writer.timestamp(o.placed_start_ms)[3:]
        rows.append(
            f"{','.join(o.event_ids)[:12]:<12} {vtt_writer.timestamp(o.start_ms)[3:]:>9} {placed:>9}  "
            f"{o.action:<10} {o.text[:30]} / {o.detail}"
        )
    counts = {
        action: sum(o.action == action for o in track.outcomes)
        for action in ("kept", "retimed", "positioned", "combined", "moved", "dropped")
    }
    dialogue = sum(c.dialogue is not None for c in track.cues)
    rows.append(
        f"{dialogue} dialogue cues kept unchanged; sound cues: "
        + ", ".join(f"{n} {a}" for a, n in counts.items() if n)
    )
    return "\n".join(rows)


def _payload(cue: MergedCue, fmt: SubtitleFormat) -> str:
    sound = [vtt_writer.escape(line) if fmt == "vtt" else line for line in cue.sound_lines]
    own = [cue.dialogue.text] if cue.dialogue is not None and cue.dialogue.text else []
    return "\n".join(own + sound)


def _edge(settings: str) -> Edge:
    """The screen edge a dialogue cue sits at, from its WebVTT `line` setting.

    >>> _edge(""), _edge("line:0"), _edge("line:85%,end align:start"), _edge("line:10%")
    ('bottom', 'top', 'bottom', 'top')
    """
    line = CueSettings.from_string(settings).line if settings else None
    if not line or line == "auto":
        return "bottom"  # the default place of horizontal cues
    number = line.partition(",")[0]
    if number.endswith("%"):
        return "top" if float(number[:-1]) < 50 else "bottom"
    return "top" if int(number) >= 0 else "bottom"


@dataclass(frozen=True, slots=True)
class _Piece:
    """A sound cue, or one part of a cue too long for the line limit, with its ideal timing."""

    lines: tuple[str, ...]
    event_ids: tuple[str, ...]
    start_ms: int
    end_ms: int
    part: str = ""  # "part 2 of 3" for split cues


def _pieces(cue: Cue, layout: Layout) -> list[_Piece]:
    """Re-wrap lines longer than the limit and split cues with too many lines into parts
    that follow one another over the cue's time."""
    lines = tuple(w for line in cue.lines if line.strip() for w in wrap(line.strip(), layout))
    if not lines:
        return []
    chunks = [lines[i : i + layout.max_lines] for i in range(0, len(lines), layout.max_lines)]
    if len(chunks) == 1:
        return [_Piece(lines, cue.event_ids, cue.start_ms, cue.end_ms)]
    share = max((cue.end_ms - cue.start_ms) // len(chunks), 1)
    return [
        _Piece(
            chunk,
            cue.event_ids,
            cue.start_ms + k * share,
            cue.start_ms + (k + 1) * share,
            f"part {k + 1} of {len(chunks)}",
        )
        for k, chunk in enumerate(chunks)
    ]


class _Board:
    """The merge in progress: dialogue, sound lines added to it, and sound cues placed so far."""

    def __init__(self, track: SubtitleTrack, style: Style) -> None:
        self.track, self.style, self.layout = track, style, style.layout
        self.dialogue = sorted(track.cues, key=lambda c: (c.start_ms, c.end_ms))
        self.added: list[list[tuple[tuple[str, ...], tuple[str, ...]]]] = [[] for _ in self.dialogue]
        self.edges: list[Edge] = [
            _edge(d.settings) if track.format == "vtt" else "bottom" for d in self.dialogue
        ]
        self.starts = [d.start_ms for d in self.dialogue]
        self.longest = max((d.end_ms - d.start_ms for d in self.dialogue), default=0)
        self.sounds: dict[Edge, list[tuple[int, int]]] = {"top": [], "bottom": []}
        self.placed: list[MergedCue] = []

    # -- what blocks a time range -------------------------------------------------------

    def _near_dialogue(self, start: int, end: int) -> list[int]:
        """Indices of dialogue cues that could overlap [start - margin, end + margin)."""
        margin = self.layout.min_gap_ms
        first = bisect_left(self.starts, start - self.longest - margin)
        last = bisect_right(self.starts, end + margin)
        return [i for i in range(first, last) if self.dialogue[i].end_ms > start - margin]

    def _blockers(self, start: int, end: int, edge: Edge | None) -> list[tuple[int, int]]:
        """Intervals a sound cue at `edge` must keep clear of (None = default place: all dialogue)."""
        wide = (
            self.layout.sync_tolerance_ms
            + max(self.layout.max_duration_ms, end - start)
            + self.layout.min_gap_ms
        )
        near = self._near_dialogue(start - wide, end + wide)
        dialogue = [
            (self.dialogue[i].start_ms, self.dialogue[i].end_ms)
            for i in near
            if edge is None or self.edges[i] == edge
        ]
        return dialogue + self.sounds[edge or "bottom"]

    def _fits(self, start: int, end: int, blockers: list[tuple[int, int]]) -> bool:
        """No overlap, and every gap to a neighbour either 0 or at least min_gap_ms."""
        for a, b in blockers:
            if start < b and a < end:
                return False
            gap = a - end if a >= end else start - b
            if 0 < gap < self.layout.min_gap_ms:
                return False
        return start >= 0

    def _slot(self, starts: list[int], piece: _Piece, edge: Edge | None) -> tuple[int, int] | None:
        """The first start (in the order given) with an end that fits; end kept near the ideal."""
        need = max(self.layout.min_duration_ms, reading_ms(piece.lines, self.layout))
        desired = max(need, min(piece.end_ms - piece.start_ms, self.layout.max_duration_ms))
        longest = max(desired, self.layout.max_duration_ms)
        for start in starts:
            blockers = self._blockers(start, start + desired, edge)
            ends = {start + desired, start + need}
            for a, _ in blockers:
                ends.update((a, a - self.layout.min_gap_ms))
            for end in sorted(
                (e for e in ends if start + need <= e <= start + longest),
                key=lambda e: (abs(e - start - desired), -e),
            ):
                if self._fits(start, end, blockers):
                    return start, end
        return None

    # -- the strategies -----------------------------------------------------------------

    def place(self, piece: _Piece) -> SoundOutcome:
        text = " / ".join(piece.lines)
        suffix = f" ({piece.part})" if piece.part else ""

        def outcome(action: Action, slot: tuple[int, int] | None, detail: str) -> SoundOutcome:
            return SoundOutcome(
                piece.event_ids,
                text,
                piece.start_ms,
                piece.end_ms,
                action,
                slot[0] if slot else None,
                slot[1] if slot else None,
                detail + suffix,
            )

        overlapping = [
            i
            for i in self._clashing(piece)
            if self.dialogue[i].start_ms < piece.end_ms and piece.start_ms < self.dialogue[i].end_ms
        ]
        slot = None if overlapping else self._slot([piece.start_ms], piece, None)
        if slot is not None:
            self._put(piece, slot, None)
            if slot == (piece.start_ms, piece.end_ms):
                return outcome("kept", slot, "clear of dialogue")
            change = "lengthened" if slot[1] > piece.end_ms else "shortened"
            return outcome(
                "retimed",
                slot,
                f"{change} to end at {vtt_writer.timestamp(slot[1])} for the display-time and gap limits",
            )
        reasons = [f"clashes with {self._clash_text(piece)}"]
        for strategy in _FALLBACKS[self.style.merge.strategy]:
            if strategy == "position" and self.track.format == "vtt":
                edge, why = self._free_edge(piece)
                slot = self._slot([piece.start_ms], piece, edge) if edge else None
                if edge and slot:
                    self._put(piece, slot, edge)
                    return outcome("positioned", slot, f"shown at the {edge} edge, away from the dialogue")
                reasons.append(why or f"the {edge} edge is busy")
            elif strategy == "combine":
                index, why = self._combinable(piece)
                if index is not None:
                    self.added[index].append((piece.lines, piece.event_ids))
                    d = self.dialogue[index]
                    return outcome(
                        "combined",
                        (d.start_ms, d.end_ms),
                        f"added as a line of the dialogue cue at {vtt_writer.timestamp(d.start_ms)}",
                    )
                reasons.append(why)
            elif strategy == "move":
                slot = self._slot(self._move_starts(piece), piece, None)
                if slot is not None:
                    self._put(piece, slot, None)
                    if slot[0] == piece.start_ms:
                        return outcome(
                            "moved",
                            slot,
                            f"shortened to end at {vtt_writer.timestamp(slot[1])}, in the gap before the "
                            "dialogue",
                        )
                    return outcome(
                        "moved", slot, f"moved {slot[0] - piece.start_ms:+d} ms into a dialogue gap"
                    )
                reasons.append(f"no free time within {self.layout.sync_tolerance_ms} ms")
        return outcome("dropped", None, "; ".join(reasons))

    def _put(self, piece: _Piece, slot: tuple[int, int], edge: Edge | None) -> None:
        insort(self.sounds[edge or "bottom"], slot)
        self.placed.append(MergedCue(slot[0], slot[1], None, piece.lines, piece.event_ids, edge))

    def _clashing(self, piece: _Piece) -> list[int]:
        end = max(piece.end_ms, piece.start_ms + self.layout.min_duration_ms)
        gap = self.layout.min_gap_ms
        return [
            i
            for i in self._near_dialogue(piece.start_ms, end)
            if self.dialogue[i].start_ms < end + gap and piece.start_ms - gap < self.dialogue[i].end_ms
        ]

    def _clash_text(self, piece: _Piece) -> str:
        clashing = self._clashing(piece)
        if not clashing:
            return "another sound cue"
        first = self.dialogue[clashing[0]]
        return f"dialogue {vtt_writer.timestamp(first.start_ms)}-{vtt_writer.timestamp(first.end_ms)}"

    def _free_edge(self, piece: _Piece) -> tuple[Edge | None, str]:
        edges = {self.edges[i] for i in self._clashing(piece)}
        if len(edges) > 1:
            return None, "dialogue fills both screen edges"
        return (_OTHER_EDGE[edges.pop()] if edges else "top"), ""

    def _combinable(self, piece: _Piece) -> tuple[int | None, str]:
        """The dialogue cue this sound can join as extra line(s), or why none can."""
        tolerance = self.layout.sync_tolerance_ms
        overlapping = [
            i
            for i in self._near_dialogue(piece.start_ms, piece.end_ms)
            if self.dialogue[i].start_ms < piece.end_ms and piece.start_ms < self.dialogue[i].end_ms
        ]
        timely = sorted(
            (i for i in overlapping if abs(self.dialogue[i].start_ms - piece.start_ms) <= tolerance),
            key=lambda i: abs(self.dialogue[i].start_ms - piece.start_ms),
        )
        if not timely:
            return None, f"no overlapping dialogue cue starts within {tolerance} ms of it"
        why = ""
        for i in timely:
            d = self.dialogue[i]
            lines = (
                plain_lines(d.text, self.track.format)
                + tuple(x for lines, _ in self.added[i] for x in lines)
                + piece.lines
            )
            longest = max(len(line) for line in lines)
            read = max(self.layout.min_duration_ms, reading_ms(lines, self.layout))
            if len(lines) > self.layout.max_lines:
                why = f"with the dialogue it would make {len(lines)} lines (limit {self.layout.max_lines})"
            elif longest > self.layout.max_chars_per_line:
                why = (
                    f"with the dialogue it would have a {longest}-character line (limit "
                    f"{self.layout.max_chars_per_line})"
                )
            elif d.end_ms - d.start_ms < read:
                why = (
                    f"with the dialogue it needs {read} ms on screen, the cue lasts {d.end_ms - d.start_ms} "
                    "ms"
                )
            else:
                return i, ""
        return None, why

    def _move_starts(self, piece: _Piece) -> list[int]:
        """Candidate starts within the sync tolerance, nearest first (later wins a tie)."""
        tolerance, gap = self.layout.sync_tolerance_ms, self.layout.min_gap_ms
        need = max(self.layout.min_duration_ms, reading_ms(piece.lines, self.layout))
        desired = max(need, min(piece.end_ms - piece.start_ms, self.layout.max_duration_ms))
        candidates = {piece.start_ms}
        for a, b in self._blockers(piece.start_ms - tolerance, piece.start_ms + tolerance + desired, None):
            candidates.update((b, b + gap, a - desired, a - need, a - gap - desired, a - gap - need))
        near = (s for s in candidates if abs(s - piece.start_ms) <= tolerance and s >= 0)
        return sorted(near, key=lambda s: (abs(s - piece.start_ms), s < piece.start_ms))
