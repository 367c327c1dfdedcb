"""Policy: decide which detected events become captions, and record why for each one.

Rules run in a fixed order; the first rule that drops an event names the decision.
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from typing import Literal

from .dialogue import overlap_ms
from .events import SoundEvent, Span
from .style import Selection
from .vocabulary import Kind

Rule = Literal["kept", "confidence", "duration", "evidence", "parent", "dialogue", "repeat", "density", "layout"]


@dataclass(frozen=True, slots=True)
class Decision:
    """What happened to one event and which rule decided it."""

    event_id: str
    kept: bool
    rule: Rule
    detail: str


@dataclass(frozen=True, slots=True)
class Selected:
    """The kept events (possibly extended by joins) and a decision for every event."""

    kept: tuple[SoundEvent, ...]
    decisions: tuple[Decision, ...]


def salience(event: SoundEvent) -> float:
    """How much a viewer needs this sound: confidence, priority, loudness and length.

    >>> from captioner.vocabulary import Kind
    >>> e = SoundEvent("e1", "dog", "Bark", "dog barking", "dog barks", Kind.TRANSIENT, 3, None, 0, 1000, 0.8, 0.6, -20.0, -40.0)
    >>> round(salience(e), 3)
    1.467
    """
    contrast = min(max(event.contrast_db, 0.0), 20.0) / 20.0
    length = min(event.duration_ms, 3000) / 3000
    return event.peak_score + 0.15 * event.priority + 0.1 * contrast + 0.1 * length


def select_events(events: list[SoundEvent], dialogue: tuple[Span, ...], settings: Selection) -> Selected:
    """Apply the selection rules in order; see `Rule` for the names used in decisions."""
    decisions: dict[str, Decision] = {}

    def drop(event: SoundEvent, rule: Rule, detail: str) -> None:
        decisions[event.event_id] = Decision(event.event_id, False, rule, detail)

    alive: list[SoundEvent] = []
    for event in events:
        if event.peak_score < settings.min_confidence:
            drop(event, "confidence", f"peak score {event.peak_score:.2f} < {settings.min_confidence}")
        elif event.duration_ms < settings.min_duration_ms:
            drop(event, "duration", f"{event.duration_ms} ms < {settings.min_duration_ms} ms")
        elif event.level_db < settings.min_level_db:
            drop(event, "evidence", f"signal level {event.level_db:.0f} dBFS is near silence")
        elif event.contrast_db < settings.min_contrast_db:
            drop(event, "evidence", f"only {event.contrast_db:.1f} dB above the background")
        else:
            alive.append(event)

    if settings.parent_redundancy:
        children = [e for e in alive if e.parent]
        survivors = []
        for event in alive:
            cover = next((c for c in children if c.parent == event.concept and _overlaps(c, event)), None)
            if cover is not None:
                drop(event, "parent", f"covered by the more specific {cover.concept} ({cover.event_id})")
            else:
                survivors.append(event)
        alive = survivors

    survivors = []
    for event in alive:
        shared = overlap_ms(event.start_ms, event.end_ms, dialogue)
        if shared * 2 <= event.duration_ms:
            survivors.append(event)
        elif event.priority < settings.dialogue_min_priority and event.kind is not Kind.MUSIC:
            drop(event, "dialogue", f"priority {event.priority} sound under dialogue")
        elif event.peak_score < settings.dialogue_confidence:
            drop(event, "dialogue", f"under dialogue and peak score {event.peak_score:.2f} < {settings.dialogue_confidence}")
        else:
            survivors.append(event)
    alive = survivors

    joined: list[SoundEvent] = []
    for event in alive:
        earlier = next((k for k in reversed(joined) if k.concept == event.concept and event.start_ms - k.end_ms < settings.cooldown_ms), None)
        if earlier is None:
            joined.append(event)
            continue
        index = joined.index(earlier)
        joined[index] = replace(earlier, end_ms=max(earlier.end_ms, event.end_ms), peak_score=max(earlier.peak_score, event.peak_score))
        drop(event, "repeat", f"joined to {earlier.event_id}, the same sound {event.start_ms - earlier.end_ms} ms earlier")

    kept = _cap_density(joined, settings.max_cues_per_minute, drop)
    for event in kept:
        decisions[event.event_id] = Decision(event.event_id, True, "kept", f"salience {salience(event):.2f}")
    ordered = tuple(decisions[e.event_id] for e in events)
    return Selected(tuple(kept), ordered)


def _overlaps(a: SoundEvent, b: SoundEvent) -> bool:
    return a.start_ms < b.end_ms and b.start_ms < a.end_ms


def _cap_density(events: list[SoundEvent], per_minute: int, drop: object) -> list[SoundEvent]:
    """Within any 60 s window keep at most `per_minute` events, the most salient ones."""
    kept = list(events)
    for event in sorted(events, key=salience):
        window = [k for k in kept if abs(k.start_ms - event.start_ms) < 30000]
        if len(window) > per_minute and event in kept:
            kept.remove(event)
            drop(event, "density", f"more than {per_minute} cues within a minute; less salient")  # type: ignore[operator]
    return kept
