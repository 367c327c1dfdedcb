"""Merging sound cues into dialogue subtitles: nothing lost, valid files, layout limits kept.

Dialogue cues are the editor's and pass through untouched; the layout checks here apply to
what the merge creates or changes (sound cues, and dialogue cues that gained a sound line).
"""

from __future__ import annotations

import html
import io
import json
import random
import re
from datetime import timedelta
from pathlib import Path

import pytest
import srt
import webvtt
from hypothesis import HealthCheck, event, given, settings
from hypothesis import strategies as st

from captioner.cli import main
from captioner.cues import Cue
from captioner.formats.merge import MergedTrack, dropped_decisions, dumps_merged, merge_tracks, unmerge
from captioner.formats.subtitles import SubtitleCue, SubtitleFormat, SubtitleTrack, parse_subtitles
from captioner.style import Style, load_style, replace

# W3C WebVTT: timestamps are [hh:]mm:ss.ttt with hours of two or more digits and exactly three decimals
VTT_TIMING = re.compile(r"^(\d{2,}:)?[0-5]\d:[0-5]\d\.\d{3} --> (\d{2,}:)?[0-5]\d:[0-5]\d\.\d{3}( .*)?$")
# SRT (de facto, as described in Matroska's subtitle notes): HH:MM:SS,mmm with a comma
SRT_TIMING = re.compile(r"^\d{2}:\d{2}:\d{2},\d{3} --> \d{2}:\d{2}:\d{2},\d{3}$")
SOUNDS = [
    "[door slams]",
    "[dog barking]",
    "[upbeat music]",
    "[glass clinking]",
    "[phone ringing]",
    "[kettle whistling]",
    "[applause]",
]
STRATEGIES = ["position", "combine", "move", "drop"]


def stamp(ms: int) -> str:
    return f"{ms // 3600000:02d}:{ms // 60000 % 60:02d}:{ms // 1000 % 60:02d}.{ms % 1000:03d}"


def vtt_text(cues: list[SubtitleCue]) -> str:
    """A dialogue file composed by the reference library webvtt-py."""
    captions = [
        webvtt.Caption(stamp(c.start_ms), stamp(c.end_ms), c.text, c.identifier or None, c.settings or None)
        for c in cues
    ]
    return webvtt.WebVTT(captions=captions).content


def srt_text(cues: list[SubtitleCue]) -> str:
    """A dialogue file composed by the reference library srt."""
    return srt.compose(
        [
            srt.Subtitle(i, timedelta(milliseconds=c.start_ms), timedelta(milliseconds=c.end_ms), c.text)
            for i, c in enumerate(cues, 1)
        ]
    )


def dialogue_track(cues: list[SubtitleCue], fmt: SubtitleFormat) -> SubtitleTrack:
    return parse_subtitles(vtt_text(cues) if fmt == "vtt" else srt_text(cues), fmt, name=f"dialogue.{fmt}")


def style_for(preset: str, strategy: str) -> Style:
    return replace(load_style(preset), "merge", strategy=strategy)


def sound(start_ms: int, end_ms: int, *lines: str, event: str = "e1") -> Cue:
    return Cue(start_ms, end_ms, lines, (event,))


def parsed_output(text: str, fmt: SubtitleFormat) -> list[tuple[int, int, list[str], str, str]]:
    """(start, end, lines, identifier, settings) of every cue, read back by the reference libraries."""
    if fmt == "vtt":
        document = webvtt.from_buffer(io.StringIO(text), strict=True)
        return [
            (
                c.start_time.in_milliseconds(),
                c.end_time.in_milliseconds(),
                c.lines,
                c.identifier or "",
                str(c.settings),
            )
            for c in document.captions
        ]
    return [
        (
            s.start // timedelta(milliseconds=1),
            s.end // timedelta(milliseconds=1),
            s.content.split("\n"),
            str(s.index),
            "",
        )
        for s in srt.parse(text)
    ]


def remove_sound(text: str, fmt: SubtitleFormat) -> list[tuple[int, int, str, str, str]]:
    """Take every sound caption back out of a merged file: sound-only cues go, sound lines
    appended to dialogue cues go. Sound lines are the bracketed ones (dialogue here has none)."""
    kept = []
    for start, end, lines, identifier, cue_settings in parsed_output(text, fmt):
        is_sound = [line.startswith("[") and line.endswith("]") for line in lines]
        if lines and all(is_sound):
            continue
        while lines and is_sound[len(lines) - 1]:
            lines = lines[:-1]
        kept.append((start, end, "\n".join(lines), identifier, cue_settings))
    return kept


def assert_valid_file(text: str, fmt: SubtitleFormat) -> None:
    rows = text.split("\n")
    timings = [row for row in rows if "-->" in row]
    cues = parsed_output(text, fmt)
    assert len(timings) == len(cues)
    assert all(end > start for start, end, *_ in cues)  # W3C WebVTT: end greater than start
    assert [c[0] for c in cues] == sorted(c[0] for c in cues)  # W3C WebVTT: starts never decrease
    if fmt == "vtt":
        assert rows[0] == "WEBVTT" and rows[1] == ""  # W3C WebVTT: header line then a blank line
        assert all(VTT_TIMING.match(row) for row in timings), timings
        identifiers = [c[3] for c in cues if c[3]]
        assert len(identifiers) == len(set(identifiers))  # W3C WebVTT: identifiers are unique
        for *_, cue_settings in cues:
            names = [item.split(":")[0] for item in cue_settings.split()]
            assert len(names) == len(set(names))  # W3C WebVTT: each setting at most once
    else:
        assert all(SRT_TIMING.match(row) for row in timings), timings
        assert [int(c[3]) for c in cues] == list(range(1, len(cues) + 1))  # SRT: counter from 1


# -- hand-made cases, one per rule --------------------------------------------------------


def test_sound_clear_of_dialogue_is_kept_in_time_order() -> None:
    track = dialogue_track([SubtitleCue(1000, 3000, "Morning."), SubtitleCue(8000, 10000, "Coffee?")], "vtt")
    merged = merge_tracks(track, [sound(4000, 6500, "[kettle whistling]")], style_for("brackets", "position"))
    assert [(c.start_ms, c.end_ms, c.dialogue is None) for c in merged.cues] == [
        (1000, 3000, False),
        (4000, 6500, True),
        (8000, 10000, False),
    ]
    assert merged.outcomes[0].action == "kept"
    text = dumps_merged(merged, note="demo")
    assert text == (
        "WEBVTT\n\nNOTE captioner merge\ndemo\n\n"
        "00:00:01.000 --> 00:00:03.000\nMorning.\n\n"
        "sound-e1\n00:00:04.000 --> 00:00:06.500\n[kettle whistling]\n\n"
        "00:00:08.000 --> 00:00:10.000\nCoffee?\n"
    )


def test_webvtt_position_puts_the_sound_at_the_edge_away_from_the_dialogue() -> None:
    style = style_for("brackets", "position")
    bottom = dialogue_track([SubtitleCue(1000, 5000, "Morning.")], "vtt")
    merged = merge_tracks(bottom, [sound(2000, 4500, "[door slams]")], style)
    assert merged.outcomes[0].action == "positioned"
    assert "00:00:02.000 --> 00:00:04.500 line:0\n[door slams]" in dumps_merged(merged)
    top = dialogue_track([SubtitleCue(1000, 5000, "Morning.", "d1", "line:0 align:start")], "vtt")
    text = dumps_merged(merge_tracks(top, [sound(2000, 4500, "[door slams]")], style))
    assert "00:00:02.000 --> 00:00:04.500 line:-1\n[door slams]" in text
    assert "d1\n00:00:01.000 --> 00:00:05.000 line:0 align:start\nMorning." in text


def test_dialogue_at_both_edges_falls_back_to_the_next_strategy() -> None:
    track = dialogue_track(
        [SubtitleCue(1000, 5000, "Up here.", settings="line:0"), SubtitleCue(1000, 5000, "Down here.")], "vtt"
    )
    merged = merge_tracks(track, [sound(2000, 4000, "[door slams]")], style_for("brackets", "position"))
    outcome = merged.outcomes[0]
    assert outcome.action != "positioned"
    assert "both screen edges" in outcome.detail or outcome.action in ("combined", "moved")


def test_srt_adds_the_sound_as_a_line_when_the_limits_allow() -> None:
    track = dialogue_track([SubtitleCue(1000, 4000, "Morning."), SubtitleCue(9000, 12000, "Coffee?")], "srt")
    merged = merge_tracks(track, [sound(1500, 3500, "[door slams]")], style_for("brackets", "position"))
    assert merged.outcomes[0].action == "combined"
    text = dumps_merged(merged)
    assert text.startswith("1\n00:00:01,000 --> 00:00:04,000\nMorning.\n[door slams]\n\n2\n")
    assert unmerge(merged) == track.cues


def test_srt_too_many_lines_moves_the_sound_into_a_gap_within_the_sync_tolerance() -> None:
    style = style_for("capitals", "combine")
    two_lines = SubtitleCue(1000, 4000, "Morning, both of you.\nThe coffee is ready.")
    track = dialogue_track([two_lines, SubtitleCue(9000, 12000, "Coffee?")], "srt")
    merged = merge_tracks(track, [sound(3000, 5000, "DOOR SLAMS")], style)
    outcome = merged.outcomes[0]
    assert outcome.action == "moved"
    assert outcome.placed_start_ms is not None and outcome.placed_end_ms is not None
    # BBC §5.2-5.5: at most 1.5 s early or late; BBC §4.5: gap of none or at least 1 s
    assert abs(outcome.placed_start_ms - 3000) <= 1500
    assert outcome.placed_start_ms == 4000 or outcome.placed_start_ms >= 5000
    assert merged.cues[0].dialogue == track.cues[0] and merged.cues[0].sound_lines == ()
    assert track.cues[0].text == two_lines.text


def test_sound_with_no_room_is_left_out_and_the_reason_recorded() -> None:
    style = style_for("brackets", "combine")
    # dialogue wall to wall, each cue already two lines (BBC §3.3: at most 2 lines)
    cues = [SubtitleCue(t, t + 3000, "One line here.\nAnother line.") for t in range(0, 30000, 3000)]
    track = dialogue_track(cues, "srt")
    merged = merge_tracks(track, [sound(10000, 12500, "[door slams]", event="e7")], style)
    outcome = merged.outcomes[0]
    assert outcome.action == "dropped" and outcome.placed_start_ms is None
    assert "3 lines (limit 2)" in outcome.detail and "no free time within 1500 ms" in outcome.detail
    assert [(d.event_id, d.kept, d.rule) for d in dropped_decisions(merged)] == [("e7", False, "layout")]
    assert unmerge(merged) == track.cues
    assert "[door slams]" not in dumps_merged(merged)


def test_drop_strategy_leaves_out_every_clashing_sound() -> None:
    track = dialogue_track([SubtitleCue(1000, 5000, "Morning.")], "vtt")
    merged = merge_tracks(
        track,
        [sound(2000, 4000, "[door slams]"), sound(8000, 10000, "[dog barking]", event="e2")],
        style_for("brackets", "drop"),
    )
    assert [o.action for o in merged.outcomes] == ["dropped", "kept"]


def test_sound_cue_over_the_line_limit_is_rewrapped_and_split() -> None:
    lines = ("[heavy rain drumming on the tin roof of the shed]", "[thunder]", "[wind howling]")
    track = dialogue_track([SubtitleCue(60000, 62000, "Later.")], "vtt")
    merged = merge_tracks(track, [Cue(1000, 9000, lines, ("e1",))], style_for("brackets", "position"))
    sounds = [c for c in merged.cues if c.dialogue is None]
    assert len(sounds) == 2 and all(len(c.sound_lines) <= 2 for c in sounds)  # BBC §3.3
    assert all(len(line) <= 32 for c in sounds for line in c.sound_lines)  # DCMP: 32 characters (memory)
    assert " ".join(line for c in sounds for line in c.sound_lines).replace("\n", " ") == " ".join(lines)
    assert sounds[0].end_ms <= sounds[1].start_ms


def test_sound_identifiers_never_repeat_a_dialogue_identifier() -> None:
    track = dialogue_track([SubtitleCue(1000, 2000, "Hi.", "sound-e1")], "vtt")
    text = dumps_merged(
        merge_tracks(track, [sound(5000, 7000, "[door slams]")], style_for("brackets", "position"))
    )
    assert "sound-e1-2\n00:00:05.000" in text
    assert_valid_file(text, "vtt")


def test_style_and_region_blocks_of_the_dialogue_are_carried_over() -> None:
    text = (
        "WEBVTT\n\nSTYLE\n::cue(.a) { color: lime }\n\nREGION\nid:r1\nwidth:40%\n\n00:00:01.000 --> "
        "00:00:02.000 region:r1\n<c.a>Hi</c>\n"
    )
    merged = merge_tracks(
        parse_subtitles(text, "vtt"), [sound(5000, 7000, "[door slams]")], style_for("brackets", "position")
    )
    out = dumps_merged(merged)
    assert (
        out.index("STYLE\n::cue(.a) { color: lime }")
        < out.index("REGION\nid:r1\nwidth:40%")
        < out.index("-->")
    )
    assert "00:00:01.000 --> 00:00:02.000 region:r1\n<c.a>Hi</c>" in out


# -- property tests (Hypothesis) ----------------------------------------------------------

WORDS = {
    "vtt": [
        "tea",
        "now",
        "Ready?",
        "café",
        "<i>wait</i>",
        "<b>no</b>",
        "&amp;",
        "&lt;3",
        "<v A>hi</v>",
        "<c.loud>go</c>",
        "1/2",
    ],
    "srt": ["tea", "now", "Ready?", "café", "<i>wait</i>", "<b>no</b>", "&", "1/2", "well,"],
}


@st.composite
def dialogue_cues(draw: st.DrawFn, fmt: SubtitleFormat, max_cues: int = 14) -> list[SubtitleCue]:
    """Dialogue as editors have it: mostly in sequence, sometimes overlapping, 1-3 lines with tags."""
    count = draw(st.integers(0, max_cues))
    cues, clock = [], draw(st.integers(0, 3000))
    for number in range(count):
        clock = max(0, clock + draw(st.integers(-800, 5000)))
        duration = draw(st.integers(300, 7000))
        lines = draw(
            st.lists(
                st.lists(st.sampled_from(WORDS[fmt]), min_size=1, max_size=7).map(" ".join),
                min_size=1,
                max_size=3,
            )
        )
        identifier = draw(st.sampled_from(["", f"d{number}"])) if fmt == "vtt" else ""
        cue_settings = (
            draw(st.sampled_from(["", "", "line:0", "align:start", "line:85%,end"])) if fmt == "vtt" else ""
        )
        cues.append(SubtitleCue(clock, clock + duration, "\n".join(lines), identifier, cue_settings))
        clock += duration
    return sorted(cues, key=lambda c: (c.start_ms, c.end_ms))


@st.composite
def sound_cues(draw: st.DrawFn, max_cues: int = 10) -> list[Cue]:
    """Sound cues as the cue builder makes them: in sequence, one or two short lines."""
    cues, clock = [], draw(st.integers(0, 3000))
    for number in range(draw(st.integers(0, max_cues))):
        clock += draw(st.integers(0, 6000))
        duration = draw(st.integers(300, 8000))
        lines = tuple(draw(st.lists(st.sampled_from(SOUNDS), min_size=1, max_size=3, unique=True)))
        cues.append(Cue(clock, clock + duration, lines, (f"e{number}",)))
        clock += duration
    return cues


PROPERTY = settings(max_examples=200, deadline=None, suppress_health_check=[HealthCheck.too_slow])


@pytest.mark.parametrize("fmt", ["vtt", "srt"])
@PROPERTY
@given(data=st.data())
def test_removing_the_sound_gives_back_the_dialogue_exactly(fmt: SubtitleFormat, data: st.DataObject) -> None:
    original = data.draw(dialogue_cues(fmt))
    sounds = data.draw(sound_cues())
    style = style_for(
        data.draw(st.sampled_from(["brackets", "capitals"])), data.draw(st.sampled_from(STRATEGIES))
    )
    track = dialogue_track(original, fmt)
    assert [(c.start_ms, c.end_ms, c.text) for c in track.cues] == [
        (c.start_ms, c.end_ms, c.text) for c in original
    ]
    merged = merge_tracks(track, sounds, style)
    for action in sorted({o.action for o in merged.outcomes}):
        event(f"some sound cue {action}")  # shown with --hypothesis-show-statistics
    assert unmerge(merged) == track.cues  # the very same cue values, in order
    text = dumps_merged(merged, note="merged")
    assert_valid_file(text, fmt)
    back = remove_sound(text, fmt)
    assert [(s, e, t) for s, e, t, *_ in back] == [(c.start_ms, c.end_ms, c.text) for c in original]
    if fmt == "vtt":
        assert [(i, c) for *_, i, c in back] == [(c.identifier, c.settings) for c in original]
    # every sound cue is accounted for: placed somewhere, or dropped with a reason
    assert all(o.detail for o in merged.outcomes)


def layout_violations(merged: MergedTrack, style: Style, fmt: SubtitleFormat) -> list[str]:
    """Every created or changed cue checked against the style's limits (independent of the package).

    The one exception: an alert that no placement could fit is shown overlapping other cues
    (the outcome says so, and it must be an alert); its line and duration limits still hold.
    """
    layout, problems = style.layout, []
    overlapping = {
        (o.event_ids, o.placed_start_ms, o.placed_end_ms)
        for o in merged.outcomes
        if o.action == "overlapping"
    }
    problems += [
        f"{o}: overlapping but not an alert"
        for o in merged.outcomes
        if o.action == "overlapping" and not o.alert
    ]

    def plain(text: str) -> list[str]:
        return html.unescape(re.sub(r"<[^>]*>", "", text)).split("\n")

    def edge_of(dialogue: SubtitleCue) -> str:
        return "top" if "line:0" in dialogue.settings else "bottom"

    for cue in merged.cues:
        if not cue.sound_lines:
            continue  # the editor's dialogue passes through untouched
        lines = (plain(cue.dialogue.text) if cue.dialogue and cue.dialogue.text else []) + list(
            cue.sound_lines
        )
        words = sum(len(line.split()) for line in lines)
        duration = cue.end_ms - cue.start_ms
        if len(lines) > layout.max_lines:
            problems.append(f"{cue}: {len(lines)} lines")
        if max(len(line) for line in lines) > layout.max_chars_per_line:
            problems.append(f"{cue}: line too long")
        if duration < layout.min_duration_ms:
            problems.append(f"{cue}: on screen {duration} ms")
        if duration * layout.reading_rate_wpm < words * 60000:
            problems.append(f"{cue}: {words} words in {duration} ms")
        if cue.dialogue is not None or (cue.event_ids, cue.start_ms, cue.end_ms) in overlapping:
            continue
        for other in merged.cues:
            if other is cue or (other.event_ids, other.start_ms, other.end_ms) in overlapping:
                continue
            if other.dialogue is not None:  # a sound in the default place must clear all dialogue
                same_place = cue.edge is None or edge_of(other.dialogue) == cue.edge
            else:
                same_place = (other.edge or "bottom") == (cue.edge or "bottom")
            if not same_place:
                continue
            gap = max(other.start_ms - cue.end_ms, cue.start_ms - other.end_ms)
            if gap < 0:
                problems.append(f"{cue}: overlaps {other}")
            elif 0 < gap < layout.min_gap_ms:
                problems.append(f"{cue}: gap {gap} ms to {other}")
    for outcome in merged.outcomes:
        # BBC §5.2-5.5 via the style: a placed sound (or the dialogue cue it joined) starts within the
        # tolerance
        if (
            outcome.placed_start_ms is not None
            and abs(outcome.placed_start_ms - outcome.start_ms) > layout.sync_tolerance_ms
        ):
            problems.append(f"{outcome}: out of sync")
    if fmt == "srt":
        problems += [f"{c}: positioned in SRT" for c in merged.cues if c.edge]
    return problems


@PROPERTY
@given(data=st.data())
def test_every_created_or_changed_cue_keeps_the_layout_limits(data: st.DataObject) -> None:
    fmt = data.draw(st.sampled_from(["vtt", "srt"]))
    style = style_for(
        data.draw(st.sampled_from(["brackets", "capitals"])), data.draw(st.sampled_from(STRATEGIES))
    )
    merged = merge_tracks(dialogue_track(data.draw(dialogue_cues(fmt)), fmt), data.draw(sound_cues()), style)
    for action in sorted({o.action for o in merged.outcomes}):
        event(f"{fmt}: some sound cue {action}")  # shown with --hypothesis-show-statistics
    assert layout_violations(merged, style, fmt) == []


def test_preset_limits_are_the_published_numbers() -> None:
    brackets, capitals = load_style("brackets").layout, load_style("capitals").layout
    assert brackets.max_lines == capitals.max_lines == 2  # BBC Subtitle Guidelines §3.3; DCMP
    assert brackets.max_chars_per_line == 32  # DCMP Captioning Key, 32 characters (memory)
    assert capitals.max_chars_per_line == 37  # BBC Subtitle Guidelines §3.1
    assert brackets.min_duration_ms == 2000  # DCMP "Presentation Rate": 2 s minimum
    assert capitals.min_gap_ms == 1000  # BBC Subtitle Guidelines §4.5: no gap or at least 1 s
    assert 160 <= brackets.reading_rate_wpm <= 180 and 160 <= capitals.reading_rate_wpm <= 180  # BBC §4
    assert brackets.sync_tolerance_ms <= 1500 and capitals.sync_tolerance_ms <= 1500  # BBC §5.2-5.5


@pytest.mark.parametrize("fmt", ["vtt", "srt"])
@pytest.mark.parametrize("preset", ["brackets", "capitals"])
@pytest.mark.parametrize("strategy", STRATEGIES)
def test_a_long_generated_merge_keeps_every_limit_and_every_dialogue_cue(
    fmt: SubtitleFormat, preset: str, strategy: str
) -> None:
    rng = random.Random(20240611)  # fixed: the same hour of dialogue and sounds every run
    dialogue, clock = [], 0
    while clock < 3_600_000:
        clock += rng.choice([0, 0, 200, 800, 1500, 3000, 6000, 12000])
        duration = rng.randint(700, 6500)
        text = "\n".join(
            " ".join(rng.choices(WORDS[fmt], k=rng.randint(1, 7))) for _ in range(rng.choice([1, 1, 2, 2, 3]))
        )
        dialogue.append(SubtitleCue(clock, clock + duration, text))
        clock += duration
    sounds, clock = [], 0
    while clock < 3_600_000:
        clock += rng.randint(2000, 30000)
        duration = rng.randint(400, 9000)
        sounds.append(
            Cue(
                clock,
                clock + duration,
                tuple(rng.sample(SOUNDS, rng.choice([1, 1, 2, 3]))),
                (f"e{len(sounds)}",),
            )
        )
        clock += duration
    style = style_for(preset, strategy)
    track = dialogue_track(dialogue, fmt)
    merged = merge_tracks(track, sounds, style)
    assert len(dialogue) > 500 and len(sounds) > 150
    assert layout_violations(merged, style, fmt) == []
    assert unmerge(merged) == track.cues
    text = dumps_merged(merged)
    assert_valid_file(text, fmt)
    assert [(s, e, t) for s, e, t, *_ in remove_sound(text, fmt)] == [
        (c.start_ms, c.end_ms, c.text) for c in track.cues
    ]
    actions = {o.action for o in merged.outcomes}
    plain = {o.action for o in merged.outcomes if not o.alert}  # an alert is moved even under `drop`
    assert "kept" in actions and (strategy == "drop") == (
        "moved" not in plain and "combined" not in plain and "positioned" not in plain
    )
    assert all(o.action != "dropped" for o in merged.outcomes if o.alert)


# -- command line -------------------------------------------------------------------------

DIALOGUE = (
    "WEBVTT\n\n00:00:01.000 --> 00:00:04.000\n<i>Morning.</i>\n\n00:00:09.000 --> 00:00:12.000\nCoffee?\n"
)
SOUND = (
    "WEBVTT\n\ne1\n00:00:02.000 --> 00:00:04.000\n[door slams]\n\ne2\n00:00:05.000 --> 00:00:07.000\n[dog "
    "barking]\n"
)


def test_merge_command_writes_the_merged_track_and_never_touches_the_inputs(tmp_path: Path) -> None:
    dialogue, sounds, out = tmp_path / "talk.vtt", tmp_path / "talk.sounds.vtt", tmp_path / "talk.merged.vtt"
    dialogue.write_text(DIALOGUE, encoding="utf-8")
    sounds.write_text(SOUND, encoding="utf-8")
    before = dialogue.read_bytes()
    assert (
        main(
            [
                "merge",
                str(sounds),
                str(dialogue),
                "-o",
                str(out),
                "--events-json",
                str(tmp_path / "m.json"),
                "--quiet",
            ]
        )
        == 0
    )
    text = out.read_text(encoding="utf-8")
    assert "00:00:02.000 --> 00:00:04.000 line:0\n[door slams]" in text and "<i>Morning.</i>" in text
    assert_valid_file(text, "vtt")
    record = json.loads((tmp_path / "m.json").read_text(encoding="utf-8"))
    assert [(r["events"], r["action"]) for r in record["sound_cues"]] == [
        (["e1"], "positioned"),
        (["e2"], "kept"),
    ]
    assert dialogue.read_bytes() == before
    assert sorted(p.name for p in tmp_path.iterdir()) == [
        "m.json",
        "talk.merged.vtt",
        "talk.sounds.vtt",
        "talk.vtt",
    ]  # no temporary left


def test_merge_command_refuses_to_overwrite_and_never_writes_over_an_input(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    dialogue, sounds, out = tmp_path / "talk.vtt", tmp_path / "talk.sounds.vtt", tmp_path / "out.vtt"
    dialogue.write_text(DIALOGUE, encoding="utf-8")
    sounds.write_text(SOUND, encoding="utf-8")
    out.write_text("hand edits", encoding="utf-8")
    assert main(["merge", str(sounds), str(dialogue), "-o", str(out)]) == 2
    assert "already exists" in capsys.readouterr().err and out.read_text(encoding="utf-8") == "hand edits"
    assert main(["merge", str(sounds), str(dialogue), "-o", str(dialogue), "--force"]) == 2
    assert "never modified" in capsys.readouterr().err and dialogue.read_text(encoding="utf-8") == DIALOGUE
    assert main(["merge", str(sounds), str(dialogue), "-o", str(out), "--force", "--quiet"]) == 0
    assert out.read_text(encoding="utf-8").startswith("WEBVTT")


def test_merge_command_keeps_the_dialogue_format(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    dialogue, sounds = tmp_path / "talk.vtt", tmp_path / "talk.sounds.vtt"
    dialogue.write_text(DIALOGUE, encoding="utf-8")
    sounds.write_text(SOUND, encoding="utf-8")
    assert main(["merge", str(sounds), str(dialogue), "-o", str(tmp_path / "out.srt")]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "talk.vtt: is VTT but the merged track would be SRT" in err
    assert not (tmp_path / "out.srt").exists()


def test_malformed_dialogue_stops_the_merge_with_file_and_line(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    dialogue, sounds = tmp_path / "talk.srt", tmp_path / "talk.sounds.vtt"
    dialogue.write_text(
        "1\n00:00:01,000 --> 00:00:02,000\nHi\n\n2\n00:00:05,000 --> 00:00:03,000\nBye\n", encoding="utf-8"
    )
    sounds.write_text(SOUND, encoding="utf-8")
    assert main(["merge", str(sounds), str(dialogue), "-o", str(tmp_path / "out.srt")]) == 2
    assert "talk.srt, line 6: cue ends before or when it starts" in capsys.readouterr().err
    assert not (tmp_path / "out.srt").exists()


def test_caption_merge_needs_dialogue(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["caption", str(tmp_path / "x.wav"), "--merge", "-o", str(tmp_path / "x.vtt")]) == 2
    assert "--merge: needs the dialogue track" in capsys.readouterr().err
