"""Placing sound cues among dialogue: each sound cue (or part of one) gets a time and a place.

A sound cue that clashes with dialogue is, by the style's merge strategy and its fallbacks
(see `captioner.style.Merge`), positioned at the other screen edge (WebVTT), added as a line
of the dialogue cue, moved into a dialogue gap within the sync tolerance, or left out with
the reason recorded. An alert (priority 4-5) is never left out: when nothing keeps every
layout limit it is shown at its own time over the dialogue, which players stack (W3C WebVTT
rendering moves overlapping cues apart; SRT players commonly stack them, common practice),
and the outcome says so.
"""

from __future__ import annotations

from bisect import bisect_left, bisect_right, insort
from dataclasses import dataclass
from typing import Literal

from webvtt.models import CueSettings

from ..cues import Cue, reading_ms, wrap
from ..style import Layout, Style
from . import webvtt as vtt_writer
from .subtitles import SubtitleCue, SubtitleTrack, plain_lines

Action = Literal["kept", "retimed", "positioned", "combined", "moved", "overlapping", "dropped", "present"]
ACTIONS: tuple[Action, ...] = (
    "kept",
    "retimed",
    "positioned",
    "combined",
    "moved",
    "overlapping",
    "dropped",
    "present",
)
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

    @property
    def edge_setting(self) -> str:
        return _EDGE_SETTING[self.edge] if self.edge else ""


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
    alert: bool = False  # priority 4-5: never left out


def edge_of(settings: str) -> Edge:
    """The screen edge a dialogue cue sits at, from its WebVTT `line` setting.

    >>> edge_of(""), edge_of("line:0"), edge_of("line:85%,end align:start"), edge_of("line:10%")
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
class Piece:
    """A sound cue, or one part of a cue too long for the line limit, with its ideal timing."""

    lines: tuple[str, ...]
    event_ids: tuple[str, ...]
    start_ms: int
    end_ms: int
    part: str = ""  # "part 2 of 3" for split cues
    alert: bool = False  # priority 4-5: placed however busy the dialogue is


def pieces(cue: Cue, layout: Layout, *, alert: bool = False) -> list[Piece]:
    """Re-wrap lines longer than the limit and split cues with too many lines into parts
    that follow one another over the cue's time."""
    lines = tuple(w for line in cue.lines if line.strip() for w in wrap(line.strip(), layout))
    if not lines:
        return []
    chunks = [lines[i : i + layout.max_lines] for i in range(0, len(lines), layout.max_lines)]
    if len(chunks) == 1:
        return [Piece(lines, cue.event_ids, cue.start_ms, cue.end_ms, alert=alert)]
    share = max((cue.end_ms - cue.start_ms) // len(chunks), 1)
    return [
        Piece(
            chunk,
            cue.event_ids,
            cue.start_ms + k * share,
            cue.start_ms + (k + 1) * share,
            f"part {k + 1} of {len(chunks)}",
            alert,
        )
        for k, chunk in enumerate(chunks)
    ]


class Board:
    """The merge in progress: dialogue, sound lines added to it, and sound cues placed so far."""

    def __init__(self, track: SubtitleTrack, style: Style) -> None:
        self.track, self.style, self.layout = track, style, style.layout
        self.dialogue = sorted(track.cues, key=lambda c: (c.start_ms, c.end_ms))
        self.added: list[list[tuple[tuple[str, ...], tuple[str, ...]]]] = [[] for _ in self.dialogue]
        self.edges: list[Edge] = [
            edge_of(d.settings) if track.format == "vtt" else "bottom" for d in self.dialogue
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

    def _slot(self, starts: list[int], piece: Piece, edge: Edge | None) -> tuple[int, int] | None:
        """The first start (in the order given) with an end that fits; end kept near the ideal."""
        need, desired = self._durations(piece)
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

    def place(self, piece: Piece) -> SoundOutcome:
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
                piece.alert,
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
        chain = _FALLBACKS[self.style.merge.strategy]
        if piece.alert and "move" not in chain:
            chain += ("move",)  # an alert is never simply left out
        for strategy in chain:
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
        if piece.alert:
            slot = (piece.start_ms, piece.start_ms + self._durations(piece)[1])
            self._put(piece, slot, None)
            return outcome(
                "overlapping",
                slot,
                "an alert is never left out: shown at its own time although it overlaps other cues "
                "(players stack them), as no placement keeps every layout limit (" + "; ".join(reasons) + ")",
            )
        return outcome("dropped", None, "; ".join(reasons))

    def _durations(self, piece: Piece) -> tuple[int, int]:
        """The least time on screen the limits allow, and the time wanted (the sound's own, capped)."""
        need = max(self.layout.min_duration_ms, reading_ms(piece.lines, self.layout))
        return need, max(need, min(piece.end_ms - piece.start_ms, self.layout.max_duration_ms))

    def _put(self, piece: Piece, slot: tuple[int, int], edge: Edge | None) -> None:
        insort(self.sounds[edge or "bottom"], slot)
        self.placed.append(MergedCue(slot[0], slot[1], None, piece.lines, piece.event_ids, edge))

    def _clashing(self, piece: Piece) -> list[int]:
        end = max(piece.end_ms, piece.start_ms + self.layout.min_duration_ms)
        gap = self.layout.min_gap_ms
        return [
            i
            for i in self._near_dialogue(piece.start_ms, end)
            if self.dialogue[i].start_ms < end + gap and piece.start_ms - gap < self.dialogue[i].end_ms
        ]

    def _clash_text(self, piece: Piece) -> str:
        clashing = self._clashing(piece)
        if not clashing:
            return "another sound cue"
        first = self.dialogue[clashing[0]]
        return f"dialogue {vtt_writer.timestamp(first.start_ms)}-{vtt_writer.timestamp(first.end_ms)}"

    def _free_edge(self, piece: Piece) -> tuple[Edge | None, str]:
        edges = {self.edges[i] for i in self._clashing(piece)}
        if len(edges) > 1:
            return None, "dialogue fills both screen edges"
        return (_OTHER_EDGE[edges.pop()] if edges else "top"), ""

    def _combinable(self, piece: Piece) -> tuple[int | None, str]:
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

    def _move_starts(self, piece: Piece) -> list[int]:
        """Candidate starts within the sync tolerance, nearest first (later wins a tie)."""
        tolerance, gap = self.layout.sync_tolerance_ms, self.layout.min_gap_ms
        need, desired = self._durations(piece)
        candidates = {piece.start_ms}
        for a, b in self._blockers(piece.start_ms - tolerance, piece.start_ms + tolerance + desired, None):
            candidates.update((b, b + gap, a - desired, a - need, a - gap - desired, a - gap - need))
        near = (s for s in candidates if abs(s - piece.start_ms) <= tolerance and s >= 0)
        return sorted(near, key=lambda s: (abs(s - piece.start_ms), s < piece.start_ms))
