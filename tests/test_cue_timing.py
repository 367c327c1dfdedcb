"""Property test: for any set of kept events and both presets, every cue keeps the style's
timing and layout rules exactly (Hypothesis generates the events)."""

from __future__ import annotations

import itertools

from hypothesis import given, settings
from hypothesis import strategies as st

from captioner.cues import build_cues
from captioner.events import SoundEvent
from captioner.style import Style, load_style
from captioner.vocabulary import Kind

STYLES = {name: load_style(name) for name in ("brackets", "capitals")}
PHRASES = [
    ("dog barking", "dog barks"),
    ("door slams", "door slams"),
    ("distant church bells ringing over the valley", "distant church bells ring over the valley"),
    ("music", "music plays"),
    ("applause", "applause"),
]


@st.composite
def event_sets(draw: st.DrawFn) -> tuple[list[SoundEvent], int]:
    duration = draw(st.one_of(st.integers(100, 2500), st.integers(2500, 120_000)))
    events = []
    for number in range(draw(st.integers(0, 12))):
        start = draw(st.integers(0, max(0, duration - 1)))
        end = draw(st.integers(start + 1, min(duration, start + 20_000)))
        phrase, present = draw(st.sampled_from(PHRASES))
        kind = draw(st.sampled_from([Kind.TRANSIENT, Kind.CONTINUOUS, Kind.MUSIC]))
        events.append(
            SoundEvent(
                f"e{number:04d}", "c", "C", phrase, present, kind, 3, None, start, end, 0.9, 0.7, -20.0, -40.0
            )
        )
    return sorted(events, key=lambda e: e.start_ms), duration


def check_rules(events: list[SoundEvent], duration: int, style: Style) -> None:
    layout = style.layout
    cues, _ = build_cues(tuple(events), style, duration)
    for cue in cues:
        # Every cue inside the media.
        assert 0 <= cue.start_ms < cue.end_ms <= duration, cue
        shown = cue.end_ms - cue.start_ms
        # Minimum display time (DCMP Captioning Key "Presentation Rate": 2 s for brackets; the
        # capitals preset's 1.3 s is its own setting), except that on media shorter than the
        # minimum the cue ends with the media.
        if duration >= layout.min_duration_ms:
            assert shown >= layout.min_duration_ms, (cue, duration)
        else:
            assert cue.end_ms == duration, (cue, duration)
        assert shown <= layout.max_duration_ms, cue  # the style's maximum (common practice: 6-7 s)
        # Lines and characters (BBC Subtitle Guidelines: 37 characters, two lines for capitals).
        assert len(cue.lines) <= layout.max_lines, cue
        assert all(len(line) <= layout.max_chars_per_line for line in cue.lines), cue
    for current, following in itertools.pairwise(cues):
        gap = following.start_ms - current.end_ms
        # No overlap; a gap is either none or at least the style's minimum (BBC: 1 s between captions).
        assert gap == 0 or gap >= layout.min_gap_ms, (current, following)
        assert gap >= 0, (current, following)


@settings(max_examples=300, deadline=None)
@given(event_sets(), st.sampled_from(sorted(STYLES)))
def test_every_cue_keeps_the_styles_timing_rules(case: tuple[list[SoundEvent], int], name: str) -> None:
    events, duration = case
    check_rules(events, duration, STYLES[name])


def test_the_reported_cases() -> None:
    brackets = STYLES["brackets"]

    def event(start: int, end: int, kind: Kind = Kind.TRANSIENT) -> SoundEvent:
        return SoundEvent(
            "e", "c", "C", "dog barking", "dog barks", kind, 3, None, start, end, 0.9, 0.7, -20.0, -40.0
        )

    # A 0.3 s file: its one cue covers the media rather than 0.1 s of it.
    (cue,), _ = build_cues((event(200, 300),), brackets, 300)
    assert (cue.start_ms, cue.end_ms) == (0, 300)
    # A long sound interrupted 1.92 s in: the first cue keeps its 2 s.
    long_one = SoundEvent(
        "a", "c", "C", "rain", "rain falls", Kind.CONTINUOUS, 3, None, 0, 6000, 0.9, 0.7, -20.0, -40.0
    )
    cues, _ = build_cues((long_one, event(1920, 2500)), brackets, 60_000)
    assert cues[0].end_ms - cues[0].start_ms >= 2000
    check_rules([long_one, event(1920, 2500)], 60_000, brackets)
