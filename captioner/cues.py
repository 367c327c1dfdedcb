"""Cues: kept events -> worded, timed, laid-out captions that never overlap."""

from __future__ import annotations

import textwrap
from dataclasses import dataclass, replace

from .events import SoundEvent
from .policy import Decision, salience
from .style import Layout, Style, Wording
from .vocabulary import Kind

_LASTING = (Kind.CONTINUOUS, Kind.MUSIC, Kind.AMBIENCE)


@dataclass(frozen=True, slots=True)
class Cue:
    """One caption on screen: [start_ms, end_ms) and up to max_lines lines of text."""

    start_ms: int
    end_ms: int
    lines: tuple[str, ...]
    event_ids: tuple[str, ...]

    @property
    def text(self) -> str:
        return "\n".join(self.lines)


def word(phrase: str, wording: Wording, *, music: bool = False) -> str:
    """Render a vocabulary phrase in a style's convention.

    >>> word("dog barking", Wording())
    '[dog barking]'
    >>> word("dog barks", Wording(case="upper", brackets=False))
    'DOG BARKS'
    >>> word("upbeat music", Wording(music_notes=True), music=True)
    '♪ upbeat music ♪'
    """
    text = phrase.upper() if wording.case == "upper" else phrase
    if music and wording.music_notes:
        return f"♪ {text} ♪"
    return f"[{text}]" if wording.brackets else text


def event_text(event: SoundEvent, wording: Wording) -> str:
    phrase = event.phrase if wording.tense == "ing" else event.phrase_present
    return word(phrase, wording, music=event.kind is Kind.MUSIC)


def end_text(event: SoundEvent, wording: Wording) -> str:
    """Text for the end of a lasting sound, by the sound's noun: "[rain stops]", "[music stops]".

    The end of music is a description, not music, so it is never set between notes.

    >>> from captioner.vocabulary import Kind
    >>> rain = SoundEvent(
    ...     "e1", "rain", "Rain", "rain falling", "rain falls", Kind.AMBIENCE, 2, None,
    ...     0, 1, 0.8, 0.6, -20.0, -30.0,
    ... )
    >>> end_text(rain, Wording()), end_text(rain, Wording(case="upper", brackets=False))
    ('[rain stops]', 'RAIN STOPS')
    """
    noun = event.noun or ("music" if event.kind is Kind.MUSIC else noun_of(event.phrase))
    return word(f"{noun} {'stop' if _plural(noun) else 'stops'}", wording)


def noun_of(phrase: str) -> str:
    """The sound's name in an -ing phrase: the words before its first -ing verb.

    >>> noun_of("rain falling"), noun_of("water running into sink"), noun_of("snoring")
    ('rain', 'water', 'snoring')
    """
    words = phrase.split()
    verb = next((i for i, w in enumerate(words) if i > 0 and w.endswith("ing")), len(words))
    return " ".join(words[:verb])


def _plural(noun: str) -> bool:
    """Whether a noun takes "stop" rather than "stops" ("footsteps", not "bus" or "glass")."""
    last = noun.split()[-1] if noun.split() else ""
    return last.endswith("s") and not last.endswith(("ss", "us", "is"))


def wrap(text: str, layout: Layout) -> tuple[str, ...]:
    """Break text into lines of at most max_chars_per_line (long words are split)."""
    return tuple(textwrap.wrap(text, layout.max_chars_per_line, break_long_words=True)) or ("",)


def reading_ms(lines: tuple[str, ...], layout: Layout) -> int:
    """Display time the reading rate asks for: words / (wpm / 60 s).

    >>> reading_ms(("[door slams]",), Layout(reading_rate_wpm=160))
    750
    """
    words = sum(len(line.split()) for line in lines)
    return round(words * 60000 / layout.reading_rate_wpm)


def build_cues(
    events: tuple[SoundEvent, ...], style: Style, duration_ms: int
) -> tuple[tuple[Cue, ...], tuple[Decision, ...]]:
    """Word and time each kept event, add end cues, then resolve overlaps and gaps.

    Returns the cues in time order and a `layout` decision for any event that could not
    be placed within the style's limits.
    """
    layout, wording = style.layout, style.wording
    drafts: list[Cue] = []
    for event in events:
        lines = wrap(event_text(event, wording), layout)
        drafts.append(_timed(event.start_ms, event.end_ms, lines, (event.event_id,), layout, duration_ms))
        # Only a sound heard without a break gets an end cue: a join of separate occurrences
        # has no single moment at which it stops.
        lasting = event.kind in _LASTING and event.duration_ms >= wording.end_cue_min_ms and not event.joined
        if wording.end_cues and lasting and event.end_ms < duration_ms - layout.min_duration_ms:
            end_lines = wrap(end_text(event, wording), layout)
            drafts.append(
                _timed(event.end_ms, event.end_ms, end_lines, (event.event_id + "-end",), layout, duration_ms)
            )
    drafts.sort(key=lambda c: c.start_ms)  # stable: events starting together stay in the policy's order
    need = {event.event_id: salience(event, style.selection) for event in events}
    return _resolve(drafts, layout, duration_ms, need)


def _timed(
    start_ms: int, end_ms: int, lines: tuple[str, ...], ids: tuple[str, ...], layout: Layout, duration_ms: int
) -> Cue:
    shortest = max(layout.min_duration_ms, reading_ms(lines, layout))
    end = min(max(end_ms, start_ms + shortest), start_ms + layout.max_duration_ms)
    if duration_ms > start_ms:
        end = min(end, max(duration_ms, start_ms + 1))
    return Cue(start_ms, max(end, start_ms + 1), lines, ids)


def _resolve(
    drafts: list[Cue], layout: Layout, duration_ms: int, need: dict[str, float]
) -> tuple[tuple[Cue, ...], tuple[Decision, ...]]:
    """Make cues that overlap share the screen; a text never appears more than
    sync_tolerance_ms before its sound.

    In this order of preference:
    1. Sounds that start within sync_tolerance_ms of each other share one cue when their
       lines fit within max_lines.
    2. The earlier cue ends where the new one starts, when it has already been on screen
       for min_duration_ms (the new sound is news; the old caption has been read).
    3. The new cue waits until the earlier one ends, when that stays within sync_tolerance_ms.
    4. The earlier cue ends where the new one starts, when it has been on screen for its
       reading time: a continuing sound is not captioned again beside the new one (DCMP).
    5. Both texts show together once the earlier cue has had its minimum time, when the
       lines fit (the new text comes a little late rather than the earlier one too briefly).
    6. Otherwise, when it starts within sync_tolerance_ms of the earlier cue and its sound is
       more needed (policy.salience, in `need`) than one the earlier cue shows, it takes that
       sound's line; else it is dropped. Either way the sound left out gets a `layout`
       decision. Sounds that start at the same moment come most needed first.
    A line the earlier cue already shows is never repeated in the one it shares.
    Then `_settle` fixes gaps and the media's end.
    """
    cues: list[Cue] = []
    dropped: list[Decision] = []
    lines_of = {d.event_ids[0]: d.lines for d in drafts}  # each draft is one sound (or its end)
    for cue in drafts:
        if not cues or cue.start_ms >= cues[-1].end_ms:
            cues.append(cue)
            continue
        previous = cues[-1]
        news = tuple(line for line in cue.lines if line not in previous.lines)  # one line per sound
        fits = len(previous.lines) + len(news) <= layout.max_lines
        both = Cue(
            cue.start_ms,
            min(max(previous.end_ms, cue.end_ms), cue.start_ms + layout.max_duration_ms),
            previous.lines + news,
            previous.event_ids + cue.event_ids,
        )
        if fits and cue.start_ms - previous.start_ms <= layout.sync_tolerance_ms:
            end = min(max(previous.end_ms, cue.end_ms), previous.start_ms + layout.max_duration_ms)
            cues[-1] = replace(both, start_ms=previous.start_ms, end_ms=end)
        elif cue.start_ms - previous.start_ms >= layout.min_duration_ms:
            cues[-1] = replace(previous, end_ms=cue.start_ms)
            cues.append(cue)
        elif previous.end_ms - cue.start_ms <= layout.sync_tolerance_ms:
            shift = previous.end_ms - cue.start_ms
            cues.append(
                replace(
                    cue,
                    start_ms=cue.start_ms + shift,
                    end_ms=max(cue.end_ms, cue.start_ms + shift + layout.min_duration_ms),
                )
            )
        elif cue.start_ms - previous.start_ms >= reading_ms(previous.lines, layout):
            cues[-1] = replace(previous, end_ms=cue.start_ms)
            cues.append(cue)
        elif fits:
            # The continuation is named after the sound that starts it: the earlier cue keeps its id.
            start = previous.start_ms + layout.min_duration_ms
            cues[-1] = replace(previous, end_ms=start)
            end = min(max(both.end_ms, start + layout.min_duration_ms), start + layout.max_duration_ms)
            cues.append(
                replace(both, start_ms=start, end_ms=end, event_ids=cue.event_ids + previous.event_ids)
            )
        else:
            swap = _give_way(previous, cue, need, lines_of, layout)
            if swap is None:
                dropped.extend(_no_room(cue, "no room on screen beside an earlier caption"))
            else:
                cues[-1], loser = swap
                dropped.extend(_no_room(loser, "gave its line to a more needed sound starting with it"))
    settled, late = _settle(cues, layout, duration_ms)
    for cue in late:
        dropped.extend(_no_room(cue, "no room for its minimum time before the media ends"))
    return tuple(unique_ids(settled)), tuple(dropped)


def _give_way(
    previous: Cue, cue: Cue, need: dict[str, float], lines_of: dict[str, tuple[str, ...]], layout: Layout
) -> tuple[Cue, Cue] | None:
    """(the earlier cue with the new sound's line in place of its least needed one, that sound
    alone), or None: only one-line sounds that start within sync_tolerance_ms trade places."""
    ids = previous.event_ids
    if (
        cue.start_ms - previous.start_ms > layout.sync_tolerance_ms
        or len(cue.event_ids) != 1
        or len(cue.lines) != 1
        or any(i not in need for i in (*ids, cue.event_ids[0]))  # end cues are never traded
        or tuple(line for i in ids for line in lines_of[i]) != previous.lines  # one line per sound, in order
        or len(ids) != len(previous.lines)
    ):
        return None
    weakest = min(range(len(ids)), key=lambda k: need[ids[k]])
    if need[cue.event_ids[0]] <= need[ids[weakest]] or cue.lines[0] in previous.lines:
        return None
    lines = previous.lines[:weakest] + cue.lines + previous.lines[weakest + 1 :]
    kept = ids[:weakest] + cue.event_ids + ids[weakest + 1 :]
    end = min(max(previous.end_ms, cue.end_ms), previous.start_ms + layout.max_duration_ms)
    loser = Cue(previous.start_ms, previous.end_ms, (previous.lines[weakest],), (ids[weakest],))
    return replace(previous, end_ms=end, lines=lines, event_ids=kept), loser


def _no_room(cue: Cue, why: str) -> list[Decision]:
    return [Decision(i, False, "layout", why) for i in cue.event_ids if not i.endswith("-end")]


def unique_ids(cues: list[Cue]) -> list[Cue]:
    """Every cue's first id (its WebVTT cue identifier) different from all earlier ones."""
    taken: set[str] = set()
    result = []
    for cue in cues:
        first = cue.event_ids[0] if cue.event_ids else ""
        name = unique_identifier(first, taken) if first else first
        result.append(replace(cue, event_ids=(name, *cue.event_ids[1:])) if name != first else cue)
    return result


def unique_identifier(identifier: str, taken: set[str]) -> str:
    """`identifier`, or with the first free suffix -2, -3, ... when `taken` holds it; the
    name returned is added to `taken`.

    W3C WebVTT requires cue identifiers to be unique within a file; every writer of
    identifiers goes through here, so one file never mixes suffix schemes.

    >>> taken = {"e0001"}
    >>> [unique_identifier(name, taken) for name in ("e0001", "e0001", "e0002")]
    ['e0001-2', 'e0001-3', 'e0002']
    """
    name, number = identifier, 1
    while name in taken:
        number += 1
        name = f"{identifier}-{number}"
    taken.add(name)
    return name


def _settle(cues: list[Cue], layout: Layout, duration_ms: int) -> tuple[list[Cue], list[Cue]]:
    """Last pass, in time order: no overlap; a gap of 0 or at least min_gap_ms (closed by
    extending the earlier cue where it stays within max_duration_ms, else widened by
    starting the later one later); min..max_duration_ms on screen; nothing past the media's
    end (a cue near the end starts earlier instead). Media shorter than min_duration_ms gets
    cues that end with it. Returns the cues and those with no room left before the end.
    """
    placed: list[Cue] = []
    late: list[Cue] = []
    short_media = duration_ms < layout.min_duration_ms
    for cue in cues:
        start, floor = cue.start_ms, 0
        if placed:
            previous = placed[-1]
            floor = previous.end_ms
            start = max(start, floor)
            if 0 < start - floor < layout.min_gap_ms:
                if start - previous.start_ms <= layout.max_duration_ms:
                    placed[-1] = replace(previous, end_ms=start)
                    floor = start
                else:
                    start = floor + layout.min_gap_ms
        end = min(max(cue.end_ms, start + layout.min_duration_ms), start + layout.max_duration_ms)
        if duration_ms > 0 and end > duration_ms:
            end = duration_ms
            start = max(min(start, end - layout.min_duration_ms), floor)
            if 0 < start - floor < layout.min_gap_ms:
                start = floor
        if end - start < layout.min_duration_ms and not (
            short_media and end == duration_ms and start == floor < end
        ):
            late.append(cue)
            continue
        placed.append(replace(cue, start_ms=start, end_ms=max(end, start + 1)))
    return placed, late
