"""Cues: wording, timing and layout of kept events, checked against published caption guidance."""

from __future__ import annotations

import itertools

from captioner.cues import build_cues, event_text, reading_ms, word
from captioner.events import SoundEvent
from captioner.style import Layout, Style, Wording, load_style, replace
from captioner.vocabulary import Kind

BRACKETS = load_style("brackets")
CAPITALS = load_style("capitals")


def event(
    event_id: str,
    start_ms: int,
    end_ms: int,
    phrase: str = "dog barking",
    present: str = "dog barks",
    kind: Kind = Kind.TRANSIENT,
) -> SoundEvent:
    return SoundEvent(
        event_id, "dog", "Dog", phrase, present, kind, 3, None, start_ms, end_ms, 0.9, 0.7, -20.0, -40.0
    )


def cues_of(events: list[SoundEvent], style: Style = BRACKETS, duration_ms: int = 600_000) -> tuple:
    return build_cues(tuple(events), style, duration_ms)


def test_bracket_and_capitals_wording() -> None:
    # DCMP Captioning Key: square brackets, lowercase, -ing verb.
    assert event_text(event("a", 0, 1000), BRACKETS.wording) == "[dog barking]"
    # BBC Subtitle Guidelines §17.2-17.4: capitals, no brackets, present tense.
    assert event_text(event("a", 0, 1000), CAPITALS.wording) == "DOG BARKS"


def test_music_notes_instead_of_brackets_when_the_style_asks() -> None:
    music = event("m", 0, 9000, "upbeat music", "upbeat music plays", Kind.MUSIC)
    assert event_text(music, BRACKETS.wording) == "[upbeat music]"
    assert event_text(music, Wording(music_notes=True)) == "♪ upbeat music ♪"
    assert word("dog barking", Wording(music_notes=True)) == "[dog barking]"  # notes only for music


def test_minimum_display_time() -> None:
    (cue,), _ = cues_of([event("a", 1000, 1200)])
    assert cue.end_ms - cue.start_ms >= 2000  # DCMP "Presentation Rate": at least 2 s on screen


def test_maximum_display_time() -> None:
    (cue,), _ = cues_of([event("a", 0, 15000, kind=Kind.CONTINUOUS)])
    assert cue.end_ms - cue.start_ms <= 6000  # common practice (memory): re-cue or end past 6-7 s


def test_reading_rate_sets_the_floor_for_long_texts() -> None:
    # BBC Subtitle Guidelines §4: about 160-180 words per minute; sound tags count as words.
    long_phrase = "distant church bells ringing over the valley"
    layout = Layout(min_duration_ms=0, reading_rate_wpm=160, max_chars_per_line=80)
    assert reading_ms((long_phrase,), layout) == round(7 * 60000 / 160)
    style = replace(BRACKETS, "layout", min_duration_ms=0, max_chars_per_line=80)
    (cue,), _ = cues_of([event("a", 0, 100, long_phrase, long_phrase)], style)
    assert cue.end_ms - cue.start_ms >= round(7 * 60000 / 160)


def test_lines_respect_characters_per_line_and_line_count() -> None:
    events = [
        event(str(i), 1000, 2000, f"very long description number {i} of a sound", "x") for i in range(3)
    ]
    for style, chars in ((BRACKETS, 32), (CAPITALS, 37)):  # DCMP 32 (memory), BBC §3.1: 37
        cues, _ = cues_of(events, style)
        for cue in cues:
            assert len(cue.lines) <= 2  # BBC §3.3: at most two lines
            assert all(len(line) <= chars for line in cue.lines)


def test_simultaneous_sounds_share_one_cue_on_two_lines() -> None:
    cues, dropped = cues_of([event("a", 1000, 2000), event("b", 1200, 2000, "cat meowing", "cat meows")])
    assert [(c.lines, c.event_ids) for c in cues] == [(("[dog barking]", "[cat meowing]"), ("a", "b"))]
    assert dropped == ()


def test_cues_never_overlap_and_never_start_far_before_their_sound() -> None:
    # FCC 14-12: captions must not overlap; BBC §5.2-5.5: at most 1.5 s early.
    events = [event(str(i), 700 * i, 700 * i + 400, f"sound number {i} here", "x") for i in range(12)]
    cues, _ = cues_of(events)
    onsets = {e.event_id: e.start_ms for e in events}
    for earlier, later in itertools.pairwise(cues):
        assert earlier.end_ms <= later.start_ms
    for cue in cues:
        assert all(cue.start_ms >= onsets[i] - BRACKETS.layout.sync_tolerance_ms for i in cue.event_ids)


def test_a_new_sound_ends_an_earlier_caption_that_has_been_read() -> None:
    full = [
        event("a", 0, 9000, "first long line of text here", "x"),
        event("b", 0, 9000, "second long line of text here", "x"),
    ]
    later = event("c", 3000, 4000, "door slamming", "door slams")
    cues, dropped = cues_of([*full, later])
    assert dropped == ()
    assert [c.start_ms for c in cues] == [0, 3000]
    assert cues[0].end_ms == 3000


def test_gaps_between_cues_are_closed_or_at_least_a_second() -> None:
    # BBC §4.5: no gap, or a gap of at least 1 s (the capitals preset uses min_gap_ms 1000).
    events = [
        event("a", 0, 500),
        event("b", 1800, 2300, "cat meowing", "cat meows"),
        event("c", 6000, 6500, "bird singing", "bird sings"),
    ]
    cues, _ = cues_of(events, CAPITALS)
    for earlier, later in itertools.pairwise(cues):
        gap = later.start_ms - earlier.end_ms
        assert gap == 0 or gap >= 1000


def test_end_cue_for_a_long_continuous_sound_only() -> None:
    rain = event("r", 1000, 40000, "rain falling", "rain falls", Kind.AMBIENCE)
    cues, _ = cues_of([rain])
    assert [c.text for c in cues] == ["[rain falling]", "[rain stops]"]  # the trade names the sound: DCMP
    assert cues[1].start_ms == 40000
    assert [c.text for c in cues_of([rain], replace(BRACKETS, "wording", end_cues=False))[0]] == [
        "[rain falling]"
    ]
    bark = event("d", 1000, 40000)  # a transient, however long, gets no end cue
    assert [c.text for c in cues_of([bark])[0]] == ["[dog barking]"]


def test_no_end_cue_for_separate_occurrences_joined_into_one() -> None:
    from dataclasses import replace as change

    rain = change(event("r", 1000, 40000, "rain falling", "rain falls", Kind.AMBIENCE), joined=2)
    assert [c.text for c in cues_of([rain])[0]] == ["[rain falling]"]


def test_cue_identifiers_are_unique_when_a_caption_continues_beside_a_new_one() -> None:
    # W3C WebVTT §4.1 (from memory): a cue identifier must be unique among the file's cues.
    import io

    import webvtt

    from captioner.formats import WRITERS

    long = event("a", 0, 9000, "first long line of text here", "x")
    new = event(
        "b", 1800, 2800, "second long line of text", "x"
    )  # too soon to end "a", too late to share its start
    cues, dropped = cues_of([long, new])
    assert dropped == ()
    assert [c.event_ids for c in cues] == [("a",), ("b", "a")]
    parsed = webvtt.from_buffer(io.StringIO(WRITERS["vtt"](cues, "")))
    identifiers = [c.identifier for c in parsed]
    assert identifiers == ["a", "b"]


def test_a_repeated_first_id_gets_a_numbered_suffix() -> None:
    from captioner.cues import Cue, unique_ids

    cues = [
        Cue(0, 1000, ("[x]",), ("e1",)),
        Cue(1000, 2000, ("[y]",), ("e1", "e2")),
        Cue(2000, 3000, ("[z]",), ("e1",)),
    ]
    assert [c.event_ids for c in unique_ids(cues)] == [("e1",), ("e1-2", "e2"), ("e1-3",)]


def test_every_writer_of_identifiers_uses_the_same_suffixes() -> None:
    # W3C WebVTT §4.1 (from memory): cue identifiers are unique within a file.
    import io

    import webvtt

    from captioner.cues import Cue, unique_identifier
    from captioner.update import recorded_vtt

    taken = {"e1"}
    assert [
        unique_identifier("e1", taken),
        unique_identifier("e1", taken),
        unique_identifier("e2", taken),
    ] == ["e1-2", "e1-3", "e2"]
    assert taken == {"e1", "e1-2", "e1-3", "e2"}
    split = [Cue(0, 1000, ("[x]",), ("e1",)), Cue(1000, 2000, ("[x]",), ("e1",))]
    recorded = [c.identifier for c in webvtt.from_buffer(io.StringIO(recorded_vtt(split, "")))]
    assert recorded == ["e1", "e1-2"]


def test_a_continuing_sound_is_not_repeated_in_the_next_cue() -> None:
    # DCMP Captioning Key: a continuing sound is not re-captioned. A new sound 1.7 s into a
    # lasting one used to give "[hens clucking]", then "[hens clucking]" / "[phone keypad beeping]".
    hens = event("h", 0, 8000, "hens clucking", "hens cluck", Kind.CONTINUOUS)
    keypad = event("k", 1700, 2500, "phone keypad beeping", "phone keypad beeps")
    cues, dropped = cues_of([hens, keypad])
    assert [c.lines for c in cues] == [("[hens clucking]",), ("[phone keypad beeping]",)] and not dropped
    # The keypad's line waits for the hens' 2 s minimum on screen (DCMP), then takes over.
    assert cues[0].end_ms == cues[1].start_ms == 2000
    for earlier, later in itertools.pairwise(cues):
        assert not set(earlier.lines) & set(later.lines)


def test_one_line_per_sound_in_a_shared_cue() -> None:
    first = event("a", 0, 3000, "crowd murmuring", "crowd murmurs", Kind.CONTINUOUS)
    again = event("b", 500, 3000, "crowd murmuring", "crowd murmurs", Kind.CONTINUOUS)
    (cue,), _ = cues_of([first, again])
    assert cue.lines == ("[crowd murmuring]",) and cue.event_ids == ("a", "b")
