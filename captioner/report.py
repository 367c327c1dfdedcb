"""Terminal output: the progress bar and the --explain table."""

from __future__ import annotations

import sys
from collections.abc import Iterator
from contextlib import contextmanager
from typing import Any

from .captioned import Captioned

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
    """m:ss.t

    >>> _clock(83450)
    '1:23.4'
    """
    return f"{ms // 60000}:{ms % 60000 / 1000:04.1f}"


def explain_table(result: Captioned) -> str:
    """One row per detected event: time, concept, score, level, decision and reason."""
    decisions = {d.event_id: d for d in result.decisions}
    header = (
        f"{'event':<6} {'start':>7} {'end':>7} {'concept':<18} {'score':>5} {'dB':>5}  {'decision':<10} "
        "reason"
    )
    rows = [header, "-" * len(header)]
    for event in result.events:
        decision = decisions[event.event_id]
        verdict = "KEPT" if decision.kept else f"drop:{decision.rule}"
        rows.append(
            f"{event.event_id:<6} {_clock(event.start_ms):>7} {_clock(event.end_ms):>7} "
            f"{event.concept[:18]:<18} "
            f"{event.peak_score:5.2f} {event.contrast_db:+5.0f}  {verdict:<10} {decision.detail}"
        )
    kept = sum(d.kept for d in result.decisions)
    rows.append(
        f"{len(result.events)} events detected, {kept} kept, {len(result.cues)} cues; dialogue from "
        f"{result.dialogue_source}"
    )
    return "\n".join(rows)
