"""Policy: decide which detected events become captions, and record why for each one.

Rules run in a fixed order; the first rule that drops an event names the decision:

    confidence, duration, salience  -- the event alone is too weak to caption
    evidence   -- no signal energy backs the claim (near-silence, or not above the noise floor;
                  a lasting sound heard from the start has no floor of its own and is exempt)
    parent     -- a confident, more specific concept covers it (vehicle under car horn),
                  or it is an unsure child that its surer parent already names, or a sure
                  source whose name a longer sourceless parent ("alarm") takes over
    music      -- a mood/genre/singing detail that is not confident enough to word the music
    duration   -- music shorter than music_min_ms (checked after the music wording is given)
    sibling    -- another refinement of the same parent, or a concept the vocabulary marks as
                  the same sound (same_sound), scored higher on the same sound (when
                  the two scored within sibling_margin, the kept one is worded as the parent:
                  "[alarm blaring]", not a guess between "car alarm" and "smoke alarm")
    generic    -- a sourceless description ("beeping") beside a specific sound of that moment,
                  or alone and not sure enough to be worth a caption
    repeat     -- the same concept again within the cooldown: joined to the earlier event
    dialogue   -- it sits under dialogue and is too unimportant or too unsure for that
    density    -- more cues per minute than the style allows; the least salient go

Each rule has a setting in `Selection` that switches it off.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, replace
from typing import Any, Literal

from .dialogue import overlap_ms
from .events import LASTING, SoundEvent, Span
from .style import Selection
from .vocabulary import ALERT_PRIORITY, Kind

Rule = Literal[
    "kept",
    "confidence",
    "duration",
    "salience",
    "evidence",
    "parent",
    "music",
    "sibling",
    "generic",
    "part",
    "dialogue",
    "repeat",
    "density",
    "layout",
]
_Drop = Callable[[SoundEvent, Rule, str], None]


@dataclass(frozen=True, slots=True)
class Decision:
    """What happened to one event and which rule decided it."""

    event_id: str
    kept: bool
    rule: Rule
    detail: str


@dataclass(frozen=True, slots=True)
class Selected:
    """The kept events (possibly extended, reworded or moved) and a decision for every event."""

    kept: tuple[SoundEvent, ...]
    decisions: tuple[Decision, ...]


_DEFAULTS = Selection()


def salience(event: SoundEvent, settings: Selection = _DEFAULTS) -> float:
    """How much a viewer needs this sound: confidence, priority, loudness and length.

    Peak score, plus priority_weight per priority step above 3 (alarms 5, room tone 1),
    plus up to contrast_weight for 0..20 dB above the local background, plus up to
    length_weight for 0..3 s of duration.

    >>> from captioner.vocabulary import Kind
    >>> e = SoundEvent(
    ...     "e1", "dog", "Bark", "dog barking", "dog barks", Kind.TRANSIENT, 3, None,
    ...     0, 1500, 0.8, 0.6, -20.0, -30.0,
    ... )
    >>> round(salience(e), 3)
    0.9
    """
    contrast = min(max(event.contrast_db, 0.0), 20.0) / 20.0
    length = min(event.duration_ms, 3000) / 3000
    return (
        event.peak_score
        + settings.priority_weight * (event.priority - 3)
        + settings.contrast_weight * contrast
        + settings.length_weight * length
    )


def select_events(events: list[SoundEvent], dialogue: tuple[Span, ...], settings: Selection) -> Selected:
    """Apply the selection rules in order; see the module docstring for the rule names."""
    decisions: dict[str, Decision] = {}
    notes: dict[str, str] = {}

    def drop(event: SoundEvent, rule: Rule, detail: str) -> None:
        decisions[event.event_id] = Decision(event.event_id, False, rule, detail)

    alive = _weak(events, settings, drop)
    if settings.parent_redundancy:
        alive = _parents(alive, settings, drop, notes)
    if settings.music_min_ms > 0:  # after _parents, so a brief mood or instrument still words a long score
        alive = _brief_music(alive, settings.music_min_ms, drop)
    if settings.sibling_redundancy:
        alive = _siblings(alive, settings.sibling_margin, drop, notes)
    if settings.generic_redundancy:
        alive = _generics(alive, settings.cooldown_ms, drop)
    if settings.generic_confidence > 0:
        alive = _unnamed_generics(alive, settings.generic_confidence, drop)
    if settings.part_of_louder:
        alive = _parts(alive, settings, drop)
    if settings.cooldown_ms > 0:  # before the dialogue rule: a sound judged as a whole
        alive = _repeats(alive, settings.cooldown_ms, settings.music_cooldown_ms, drop)
    if settings.dialogue_gate:
        alive = _dialogue(alive, dialogue, settings, drop, notes)
    kept = _cap_density(alive, settings, drop) if settings.max_cues_per_minute > 0 else alive
    for event in kept:
        extra = f"; {notes[event.event_id]}" if event.event_id in notes else ""
        decisions[event.event_id] = Decision(
            event.event_id, True, "kept", f"salience {salience(event, settings):.2f}{extra}"
        )
    # Sounds that start together: the most needed first, so that they take the screen's lines.
    return Selected(
        tuple(sorted(kept, key=lambda e: (e.start_ms, -salience(e, settings), e.event_id))),
        tuple(decisions[e.event_id] for e in events),
    )


def _weak(events: list[SoundEvent], settings: Selection, drop: _Drop) -> list[SoundEvent]:
    """Confidence, duration, salience and the evidence gate: rules about one event alone."""
    alive = []
    for event in events:
        if event.peak_score < settings.min_confidence:
            drop(event, "confidence", f"peak score {event.peak_score:.2f} < {settings.min_confidence}")
        elif event.duration_ms < settings.min_duration_ms:
            drop(event, "duration", f"{event.duration_ms} ms < {settings.min_duration_ms} ms")
        elif salience(event, settings) < settings.min_salience:
            drop(event, "salience", f"salience {salience(event, settings):.2f} < {settings.min_salience}")
        elif settings.evidence_gate and event.level_db < settings.min_level_db:
            drop(event, "evidence", f"signal level {event.level_db:.0f} dBFS is near silence")
        elif (
            settings.evidence_gate
            and event.above_floor_db < settings.min_contrast_db
            and not _safety_exempt(event, settings)
            and not _from_the_start(event, settings)
        ):
            drop(event, "evidence", f"only {event.above_floor_db:+.1f} dB above the noise floor")
        else:
            alive.append(event)
    return alive


def _from_the_start(event: SoundEvent, settings: Selection) -> bool:
    """A lasting sound playing from the first second (a music bed under the opening titles)
    has no quieter stretch before it: its surroundings are itself, so the floor it is
    compared with is its own level. Only the near-silence test applies to it."""
    return event.kind in LASTING and event.start_ms < settings.opening_ms


def _brief_music(alive: list[SoundEvent], music_min_ms: int, drop: _Drop) -> list[SoundEvent]:
    """Music worth a caption lasts: a second of "music" is far more often a tonal sound
    (a chime, a knock on wood, a device's melody) than a score starting."""
    kept = []
    for event in alive:
        if event.kind is Kind.MUSIC and event.duration_ms < music_min_ms:
            drop(event, "duration", f"music lasting {event.duration_ms} ms < {music_min_ms} ms")
        else:
            kept.append(event)
    return kept


def _safety_exempt(event: SoundEvent, settings: Selection) -> bool:
    """A confident safety sound (priority 5) is captioned however loud its surroundings are:
    a missed siren costs a viewer far more than a false one."""
    return (
        event.priority >= 5
        and settings.safety_confidence < 1.0
        and event.peak_score >= settings.safety_confidence
    )


def _shared_ms(a: SoundEvent, b: SoundEvent) -> int:
    return max(0, min(a.end_ms, b.end_ms) - max(a.start_ms, b.start_ms))


def _lineage(event: SoundEvent) -> tuple[str, ...]:
    return event.ancestors or ((event.parent,) if event.parent else ())


def _worded_by(parent: SoundEvent, child: SoundEvent, notes: dict[str, str], **changes: Any) -> SoundEvent:
    """The parent event, keeping its span, worded as the child names the sound."""
    notes[parent.event_id] = f"worded by {child.concept} ({child.event_id}, {child.peak_score:.2f})"
    return replace(
        parent,
        label=child.label,
        phrase=child.phrase,
        phrase_present=child.phrase_present,
        noun=child.noun,
        **changes,
    )


def _parents(
    alive: list[SoundEvent], settings: Selection, drop: _Drop, notes: dict[str, str]
) -> list[SoundEvent]:
    """Parent/child redundancy, and music wording from a confident mood, genre or singing child.

    A child replaces a parent it covers for at least half of the parent's time (a brief car
    horn does not erase a long vehicle sound) when the child is at least child_confidence
    sure, more salient than the parent, or at least as sure as a generic parent (whose
    wording names no source). Otherwise the child is dropped: for an unsure guess the
    broader name is the safer one.
    Music is special: the music event keeps its own span and takes the child's wording
    when the child reaches music_detail_confidence. So does a generic parent ("[alarm
    blaring]") that a child at least child_confidence sure covers only in part: a sourceless
    sound in which a sure source is heard is that source.
    """
    by_id = {e.event_id: e for e in alive}
    gone: set[str] = set()
    for child in sorted((e for e in alive if _lineage(e)), key=lambda e: -e.peak_score):
        if child.event_id in gone:
            continue
        lineage = _lineage(child)
        for parent in [
            e for e in alive if e.concept in lineage and e.event_id not in gone and _shared_ms(e, child) > 0
        ]:
            if parent.kind is Kind.MUSIC and child.kind is Kind.MUSIC:
                gone.add(child.event_id)
                if child.peak_score >= settings.music_detail_confidence:
                    current = by_id[parent.event_id]
                    if current.label == parent.label:  # the first confident detail wins
                        by_id[parent.event_id] = _worded_by(current, child, notes)
                    drop(child, "music", f"wording given to the music cue {parent.event_id}")
                else:
                    drop(
                        child,
                        "music",
                        f"{child.label} {child.peak_score:.2f} < {settings.music_detail_confidence}: plain "
                        "music wording",
                    )
                break
            if _shared_ms(parent, child) * 2 < parent.duration_ms:
                if parent.generic and not child.generic and child.peak_score >= settings.child_confidence:
                    # A sourceless sound ("[alarm blaring]") in which a sure source is heard is
                    # that source: the span stays, the wording becomes the child's.
                    current = by_id[parent.event_id]
                    if current.generic:  # the first sure source wins
                        by_id[parent.event_id] = _worded_by(
                            current,
                            child,
                            notes,
                            generic=False,
                            peak_score=max(current.peak_score, child.peak_score),
                            priority=max(current.priority, child.priority),
                        )
                    gone.add(child.event_id)
                    drop(child, "parent", f"names the sound of {parent.concept} ({parent.event_id})")
                    break
                continue
            named_better = (
                parent.generic and child.peak_score >= parent.peak_score
            )  # "[siren]" over an equally sure "[alarm]"
            if (
                child.peak_score >= settings.child_confidence
                or salience(child, settings) > salience(parent, settings)
                or named_better
            ):
                gone.add(parent.event_id)
                drop(parent, "parent", f"covered by the more specific {child.concept} ({child.event_id})")
            else:
                gone.add(child.event_id)
                drop(
                    child,
                    "parent",
                    f"unsure ({child.peak_score:.2f}); the broader {parent.concept} ({parent.event_id}) "
                    "names it",
                )
                break
    return [by_id[e.event_id] for e in alive if e.event_id not in gone]


def _one_sound(keeper: SoundEvent, other: SoundEvent) -> bool:
    """Refinements of one parent, or concepts the vocabulary says name the same sound (then
    never at the cost of a more important one: an engine never hides the siren it carries)."""
    if keeper.parent is not None and keeper.parent == other.parent:
        return True
    declared = keeper.concept in other.same_sound or other.concept in keeper.same_sound
    return declared and other.priority <= keeper.priority


def _siblings(alive: list[SoundEvent], margin: float, drop: _Drop, notes: dict[str, str]) -> list[SoundEvent]:
    """Refinements of the same parent that share most of their time are one sound, named once;
    so are near-synonym concepts (`same_sound` in the vocabulary: "rain" and "water").

    When the classifier could barely tell two refinements apart (peaks within `margin`),
    the sound is named by what they share: a wrong specific name misleads more than a
    right general one.
    """
    gone: set[str] = set()
    reworded: dict[str, SoundEvent] = {}
    for event in sorted(alive, key=lambda e: -e.peak_score):
        if event.event_id in gone:
            continue
        for other in alive:
            if other is event or other.event_id in gone or not _one_sound(event, other):
                continue
            if (
                _shared_ms(event, other) * 2 >= min(event.duration_ms, other.duration_ms)
                and other.peak_score <= event.peak_score
            ):
                gone.add(other.event_id)
                drop(
                    other, "sibling", f"same sound as {event.concept} ({event.event_id}), which scored higher"
                )
                if (
                    event.peak_score - other.peak_score < margin
                    and other.parent == event.parent
                    and event.parent_wording
                    and event.event_id not in reworded
                ):
                    phrase, present = event.parent_wording
                    # noun "": the end cue names the parent's phrase too
                    reworded[event.event_id] = replace(event, phrase=phrase, phrase_present=present, noun="")
                    notes[event.event_id] = (
                        f"worded as {event.parent}: {other.concept} scored {other.peak_score:.2f}, too "
                        "close to tell"
                    )
    return [reworded.get(e.event_id, e) for e in alive if e.event_id not in gone]


def _generics(alive: list[SoundEvent], cooldown_ms: int, drop: _Drop) -> list[SoundEvent]:
    """A generic concept ("[beeping]", "[alarm blaring]") says nothing that a specific sound
    covering most of its time does not: "[smoke alarm beeping]" already is the beeping.

    The specific sound must rank at least as high, or be at least as sure and at most one
    priority step lower (a confidently heard phone names the "alarm" it set off; a dog
    never hides an alarm). A later fragment of a generic sound, within cooldown_ms of one
    a specific sound named, continues that sound: it extends the specific event instead.
    """
    by_id = {e.event_id: e for e in alive}
    gone: set[str] = set()
    named: dict[
        str, tuple[str, int]
    ] = {}  # generic concept -> (specific event id, end of the named fragment)
    for generic in sorted((e for e in alive if e.generic), key=lambda e: e.start_ms):
        namer = next((o for o in alive if _names(o, generic) and o.event_id not in gone), None)
        if namer is not None:
            detail = f"the specific {namer.concept} ({namer.event_id}) names this sound"
        elif generic.concept in named and generic.start_ms - named[generic.concept][1] < cooldown_ms:
            namer = by_id[named[generic.concept][0]]
            by_id[namer.event_id] = replace(namer, end_ms=max(namer.end_ms, generic.end_ms))
            detail = f"continues the sound {namer.concept} ({namer.event_id}) names"
        else:
            continue
        gone.add(generic.event_id)
        named[generic.concept] = (namer.event_id, generic.end_ms)
        drop(generic, "generic", detail)
    return [by_id[e.event_id] for e in alive if e.event_id not in gone]


def _unnamed_generics(alive: list[SoundEvent], confidence: float, drop: _Drop) -> list[SoundEvent]:
    """A generic sound no specific one names ("[animal calling]", "[beeping]") tells a viewer
    little unless the classifier is sure of it, so it needs `confidence`. Alerts (priority 4
    and 5) are exempt: "[alarm blaring]" warns even without its source."""
    survivors = []
    for event in alive:
        if event.generic and event.priority < ALERT_PRIORITY and event.peak_score < confidence:
            drop(event, "generic", f"names no source and peak score {event.peak_score:.2f} < {confidence}")
        else:
            survivors.append(event)
    return survivors


def _parts(alive: list[SoundEvent], settings: Selection, drop: _Drop) -> list[SoundEvent]:
    """Drop a transient that is quieter than its surroundings and lies wholly inside a louder
    sound (not music: a score is the surroundings of everything in it). A confident safety
    sound is never taken for a part of another."""
    gone: set[str] = set()
    for event in alive:
        if event.kind is not Kind.TRANSIENT or event.contrast_db >= 0 or _safety_exempt(event, settings):
            continue
        for other in alive:
            if (
                other is not event
                and other.event_id not in gone
                and other.kind not in (Kind.MUSIC, Kind.AMBIENCE)
                and other.concept != event.concept
                and _shared_ms(event, other) == event.duration_ms  # wholly inside
                and other.contrast_db > 0
            ):
                gone.add(event.event_id)
                drop(
                    event,
                    "part",
                    f"inside {other.concept} ({other.event_id}) and {-event.contrast_db:.0f} dB below "
                    "its surroundings: a part of that sound",
                )
                break
    return [e for e in alive if e.event_id not in gone]


def _names(specific: SoundEvent, generic: SoundEvent) -> bool:
    if specific.generic or _shared_ms(generic, specific) * 2 < generic.duration_ms:
        return False
    return specific.priority >= generic.priority or (
        specific.priority == generic.priority - 1 and specific.peak_score >= generic.peak_score
    )


def _dialogue(
    alive: list[SoundEvent],
    dialogue: tuple[Span, ...],
    settings: Selection,
    drop: _Drop,
    notes: dict[str, str],
) -> list[SoundEvent]:
    """Sounds under dialogue: drop the unimportant and the unsure; move short ones into a gap.

    Music, and a sound at least dialogue_masking_db louder than its surroundings, are exempt
    from the priority test (music is captioned once, at its onset, even when it starts under
    speech; a masking sound is why the speech cannot be heard). A kept short event whose onset
    lies in dialogue moves to the end of that dialogue span when the gap starts within
    gap_shift_ms.
    """
    survivors = []
    for event in alive:
        shared = overlap_ms(event.start_ms, event.end_ms, dialogue)
        if shared * 2 > event.duration_ms:
            # A sound far louder than its surroundings masks the speech, and a viewer who hears
            # nothing of the dialogue needs to know why: it stays whatever its priority.
            masking = 0 < settings.dialogue_masking_db <= event.contrast_db
            exempt = event.kind is Kind.MUSIC or masking
            if event.priority < settings.dialogue_min_priority and not exempt:
                drop(event, "dialogue", f"priority {event.priority} sound under dialogue")
                continue
            # Attention sounds (doorbell, phone, knock, alarms) are costlier to miss, so under
            # dialogue they need less confidence than ordinary story sounds.
            alert = event.priority >= ALERT_PRIORITY
            needed = settings.dialogue_alert_confidence if alert else settings.dialogue_confidence
            if event.peak_score < needed:
                drop(event, "dialogue", f"under dialogue and peak score {event.peak_score:.2f} < {needed}")
                continue
        survivors.append(_into_gap(event, dialogue, settings, notes))
    return survivors


def _into_gap(
    event: SoundEvent, dialogue: tuple[Span, ...], settings: Selection, notes: dict[str, str]
) -> SoundEvent:
    if settings.gap_shift_ms <= 0 or event.kind in LASTING or event.duration_ms >= settings.short_event_ms:
        return event
    span = next((s for s in dialogue if s.start_ms <= event.start_ms < s.end_ms), None)
    if span is None:
        return event
    shift = span.end_ms - event.start_ms
    if shift > settings.gap_shift_ms:
        return event
    notes[event.event_id] = f"moved {shift} ms later into a dialogue gap"
    return replace(
        event, start_ms=event.start_ms + shift, end_ms=max(event.end_ms, event.start_ms + shift + 1)
    )


def _repeats(
    alive: list[SoundEvent], cooldown_ms: int, music_cooldown_ms: int, drop: _Drop
) -> list[SoundEvent]:
    """The same concept again within the cooldown extends the earlier event instead of a new cue.

    Music gets its own, longer cooldown: a score keeps playing while the classifier's music
    score dips under dialogue, and music is captioned once at its onset, not re-announced.
    """
    joined: list[SoundEvent] = []
    for event in sorted(alive, key=lambda e: e.start_ms):
        window = max(cooldown_ms, music_cooldown_ms) if event.kind is Kind.MUSIC else cooldown_ms
        index = next(
            (
                i
                for i in range(len(joined) - 1, -1, -1)
                if joined[i].concept == event.concept and event.start_ms - joined[i].end_ms < window
            ),
            None,
        )
        if index is None:
            joined.append(event)
            continue
        earlier = joined[index]
        joined[index] = replace(
            earlier,
            end_ms=max(earlier.end_ms, event.end_ms),
            peak_score=max(earlier.peak_score, event.peak_score),
            joined=earlier.joined + 1,
        )
        drop(
            event,
            "repeat",
            f"joined to {earlier.event_id}, the same sound {max(0, event.start_ms - earlier.end_ms)} ms "
            "after it",
        )
    return joined


def _cap_density(events: list[SoundEvent], settings: Selection, drop: _Drop) -> list[SoundEvent]:
    """Within any 60 s window keep at most max_cues_per_minute events, the most salient ones."""
    limit = settings.max_cues_per_minute
    kept = list(events)
    for event in sorted(events, key=lambda e: salience(e, settings)):
        window = [k for k in kept if abs(k.start_ms - event.start_ms) < 30000]
        if len(window) > limit and event in kept:
            kept.remove(event)
            drop(event, "density", f"more than {limit} cues within a minute; less salient")
    return kept
