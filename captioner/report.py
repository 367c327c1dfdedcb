"""Terminal output: the progress bar, the --explain tables, and what a merge did."""

from __future__ import annotations

import sys
from collections.abc import Iterator
from contextlib import contextmanager
from typing import Any

from .captioned import Captioned
from .formats.merge import ACTIONS, MergedTrack
from .formats.webvtt import timestamp
from .probing import MediaInfo

_LONG_INPUT_MS = 30_000  # shorter inputs finish before a bar is worth drawing


class _Progress:
    """Progress in seconds of audio; draws only on a terminal and for long inputs."""

    def __init__(self, enabled: bool, label: str) -> None:
        self.enabled = enabled and sys.stderr.isatty()
        self.label = label
        self.bar: Any = None

    def start(self, duration_ms: int | None) -> None:
        if self.enabled and (duration_ms is None or duration_ms >= _LONG_INPUT_MS):
            from tqdm import tqdm

            total = None if duration_ms is None else round(duration_ms / 1000)
            self.bar = tqdm(total=total, unit="s", desc=self.label, file=sys.stderr, leave=False)

    def advance(self, ms: int) -> None:
        if self.bar is not None:
            self.bar.update(round(ms / 1000))

    def close(self) -> None:
        if self.bar is not None:
            self.bar.close()


@contextmanager
def progress_bar(*, enabled: bool, label: str) -> Iterator[_Progress]:
    progress = _Progress(enabled, label)
    try:
        yield progress
    finally:
        progress.close()


def _clock(ms: int) -> str:
    """h:mm:ss.t, rounded to the tenth once so that a carry reaches the minutes and hours.

    >>> _clock(83450), _clock(359_960), _clock(3_599_960), _clock(7_099_600)
    ('0:01:23.4', '0:06:00.0', '1:00:00.0', '1:58:19.6')
    """
    tenths = round(ms / 100)
    hours, rest = divmod(tenths, 36000)
    minutes, rest = divmod(rest, 600)
    return f"{hours}:{minutes:02d}:{rest // 10:02d}.{rest % 10}"


def streams_table(info: MediaInfo) -> str:
    """`captioner streams`: the audio streams (default marked), then the text subtitle streams."""
    rows = [f"{info.path.name}: {len(info.audio_streams)} audio stream(s); * = the default"]
    header = f"  {'#':>2} {'codec':<10} {'channels':<10} {'language':<8} {'starts':>8}  title"
    rows += [header, "  " + "-" * (len(header) - 2)]
    for s in info.audio_streams:
        mark = "*" if s.is_default else " "
        rows.append(
            f"{mark} {s.index:>2} {s.codec:<10} {s.channels:<10} {s.language or '-':<8} "
            f"{s.start_ms / 1000:>7.3f}s  {s.title}"
        )
    texts = [s for s in info.subtitle_streams if s.is_text]
    if texts:
        rows.append(
            f"{len(texts)} text subtitle stream(s), read as dialogue when no subtitle file sits beside:"
        )
        rows += [f"  {s.index:>2} {s.codec:<10} {s.language or '-':<8} {s.title}" for s in texts]
    return "\n".join(rows)


def explain_table(result: Captioned) -> str:
    """One row per detected event: time, concept, score, level, decision and reason."""
    decisions = {d.event_id: d for d in result.decisions}
    header = (
        f"{'event':<6} {'start':>9} {'end':>9} {'concept':<18} {'score':>5} {'dB':>5}  {'decision':<10} "
        "reason"
    )
    rows = [header, "-" * len(header)]
    for event in result.events:
        decision = decisions[event.event_id]
        verdict = "KEPT" if decision.kept else f"drop:{decision.rule}"
        rows.append(
            f"{event.event_id:<6} {_clock(event.start_ms):>9} {_clock(event.end_ms):>9} "
            f"{event.concept[:18]:<18} "
            f"{event.peak_score:5.2f} {event.contrast_db:+5.0f}  {verdict:<10} {decision.detail}"
        )
    kept = sum(d.kept for d in result.decisions)
    rows.append(
        f"{len(result.events)} events detected, {kept} kept, {len(result.cues)} cues; dialogue from "
        f"{result.dialogue_source}"
    )
    return "\n".join(rows)


def merge_table(track: MergedTrack) -> str:
    """One row per sound cue: its time, text, what the merge did and why; then the counts."""
    header = f"{'sound cue':<12} {'start':>9} {'placed':>9}  {'action':<11} text / reason"
    rows = [header, "-" * len(header)]
    for o in track.outcomes:
        placed = "-" if o.placed_start_ms is None else timestamp(o.placed_start_ms)[3:]
        rows.append(
            f"{','.join(o.event_ids)[:12]:<12} {timestamp(o.start_ms)[3:]:>9} {placed:>9}  {o.action:<11} "
            f"{o.text[:30]} / {o.detail}"
        )
    rows += [
        f"  sound line added to the dialogue cue at {timestamp(c.start_ms)} ({c.dialogue.location}): "
        + " / ".join(c.sound_lines)
        for c in track.cues
        if c.dialogue is not None and c.sound_lines
    ]
    counts = {action: sum(o.action == action for o in track.outcomes) for action in ACTIONS}
    rows.append(
        merge_summary(track) + "; sound cues: " + ", ".join(f"{n} {a}" for a, n in counts.items() if n)
    )
    return "\n".join(rows)


def merge_summary(track: MergedTrack) -> str:
    """What happened to the dialogue file, e.g. "41 dialogue cue(s) untouched, 2 with a sound line added".

    Every dialogue cue's own text, timing, identifier and settings stay as written; "a sound
    line added" means the `combine` strategy showed a sound as an extra line of that cue.
    """
    dialogue = [c for c in track.cues if c.dialogue is not None]
    added = sum(bool(c.sound_lines) for c in dialogue)
    own = sum(c.dialogue is None for c in track.cues)
    left_out = sum(o.action == "dropped" for o in track.outcomes)
    return (
        f"{len(dialogue) - added} dialogue cue(s) untouched, {added} with a sound line added; "
        f"{own} sound cue(s) of their own, {left_out} left out"
    )


def merge_warnings(track: MergedTrack) -> list[str]:
    """One line per sound left out, per alert shown overlapping, and one for sounds already there."""
    lines = []
    for o in track.outcomes:
        if o.action == "dropped":
            lines.append(f"left out {o.text} at {timestamp(o.start_ms)}: {o.detail}")
        elif o.action == "overlapping":
            lines.append(
                f"alert {o.text} at {timestamp(o.start_ms)} overlaps other cues (players stack them): "
                "no placement kept every layout limit; check it"
            )
    present = [o for o in track.outcomes if o.action == "present"]
    if present:
        lines.append(
            f"{len(present)} sound cue(s) already in {track.dialogue.name} with the same text and time "
            f"(from an earlier merge, first at {timestamp(present[0].start_ms)}) were not added again"
        )
    return lines
