"""Merging into real-world dialogue files: the file survives byte for byte, alerts are never
left out, and the merge says what it did.

Dialogue files are built with the reference libraries (webvtt-py parses every WebVTT file
made here, `srt` composes the SRT ones) plus raw bytes for what they do not write: header
text, NOTE/STYLE/REGION blocks, CRLF line endings and byte-order marks.
"""

from __future__ import annotations

import codecs
import io
import json
import re
from datetime import timedelta
from functools import cache
from pathlib import Path

import pytest
import srt
import webvtt
from hypothesis import HealthCheck, event, given, settings
from hypothesis import strategies as st

from captioner.cli import main
from captioner.cues import Cue
from captioner.formats.merge import MERGE_HEADING, MergedTrack, dumps_merged, merge_tracks, sound_priority
from captioner.formats.subtitles import SubtitleFormat, parse_subtitles, read_track
from captioner.report import merge_warnings
from captioner.style import Style, load_style, replace

EOL = r"(?:\r\n|\n|\r(?!\n))"  # W3C WebVTT line terminators: CRLF, LF, CR
BLOCK_BREAK = re.compile(rf"({EOL}(?:[ \t]*{EOL})+)")  # a line ending, then blank lines
SOUNDS = [("[door slams]", 3), ("[dog barking]", 3), ("[phone ringing]", 4), ("[smoke alarm beeping]", 5)]
# cue texts (flat choices keep generation fast): tags, entities, accents, one or two lines
VTT_TEXTS = [
    "tea",
    "Ready? <i>wait</i>",
    "café &amp; toast",
    "<v A>hi</v>\nnow, well,",
    "Morning.\nTea?",
    "<b>no</b>",
]
SRT_TEXTS = ["tea", "Ready? <i>wait</i>", "café & toast", "now, well,\nReady?", "Morning.\nTea?"]


def stamp(ms: int, comma: bool = False) -> str:
    text = f"{ms // 3600000:02d}:{ms // 60000 % 60:02d}:{ms // 1000 % 60:02d}.{ms % 1000:03d}"
    return text.replace(".", ",") if comma else text


def is_sound_line(line: str) -> bool:
    return line.startswith("[") and line.endswith("]")  # dialogue here never has a bracketed line


def remove_sound(merged: bytes, fmt: SubtitleFormat) -> bytes:
    """Take the sound back out of a merged file, working on its bytes alone: drop the blocks
    the merge added (sound cues; in WebVTT the merge NOTE) with one block break each, drop
    sound lines after a dialogue cue's text, and (SRT) number the cues from 1 again."""
    bom = merged.startswith(codecs.BOM_UTF8)
    text = merged.decode("utf-8-sig")
    body = re.sub(r"[\r\n \t]*$", "", text)
    trailing = text[len(body) :]
    tokens = BLOCK_BREAK.split(body)
    blocks, breaks = tokens[0::2], tokens[1::2]

    def added(block: str) -> bool:
        lines = block.splitlines()
        if fmt == "vtt":
            return lines[0].startswith(("sound-", MERGE_HEADING))
        return len(lines) > 2 and all(is_sound_line(x) for x in lines[2:])

    k = 0
    while k < len(blocks):
        if added(blocks[k]):
            if k < len(breaks):
                del breaks[k]  # the break after it
            elif breaks:
                del breaks[k - 1]  # the last block: the break before it
            del blocks[k]
            continue
        k += 1
    out, number = [], 0
    for n, block in enumerate(blocks):
        lines = re.split(f"({EOL})", block)  # keep each line's own ending
        while len(lines) > 2 and is_sound_line(lines[-1]):
            lines = lines[:-2]
        if fmt == "srt" and lines[0].strip().isdigit():
            number += 1
            lines[0] = str(number)
        out.append("".join(lines) + (breaks[n] if n < len(breaks) else ""))
    return (codecs.BOM_UTF8 if bom else b"") + ("".join(out) + trailing).encode("utf-8")


@cache
def style_for(preset: str, strategy: str) -> Style:
    return replace(load_style(preset), "merge", strategy=strategy)  # read once: YAML parsing is slow


def merge_bytes(
    raw: bytes, fmt: SubtitleFormat, sounds: list[Cue], priorities: dict[str, int], strategy: str = "position"
) -> tuple[bytes, MergedTrack]:
    track = parse_subtitles(
        raw.decode("utf-8-sig"), fmt, name=f"dialogue.{fmt}", bom=raw.startswith(codecs.BOM_UTF8)
    )
    merged = merge_tracks(track, sounds, style_for("brackets", strategy), priorities=priorities)
    return dumps_merged(merged, note="merged").encode("utf-8"), merged


# -- generated dialogue files ---------------------------------------------------------------


@st.composite
def vtt_file(draw: st.DrawFn) -> tuple[bytes, list[tuple[int, int, str]]]:
    """A WebVTT dialogue file as bytes, and its cues (start, end, text) as webvtt-py reads them."""
    newline = draw(st.sampled_from(["\n", "\r\n"]))
    header = ["WEBVTT" + draw(st.sampled_from(["", " - breakfast scene"]))]
    header += draw(
        st.lists(
            st.sampled_from(["Kind: captions", "Language: en", "X-Note: made by hand"]),
            max_size=2,
            unique=True,
        )
    )
    parts = ["\n".join(header)]
    parts += draw(
        st.lists(st.sampled_from(["NOTE opening remarks\nby the editor", "NOTE\nchecked twice"]), max_size=1)
    )
    parts += draw(
        st.lists(
            st.sampled_from(["STYLE\n::cue(.loud) { color: yellow }", "REGION\nid:upper\nwidth:40%"]),
            max_size=2,
            unique=True,
        )
    )
    cues, clock = [], draw(st.integers(0, 2000))
    for number in range(draw(st.integers(0, 10))):
        clock += draw(st.integers(0, 5000))
        duration = draw(st.integers(400, 6000))
        text = draw(st.sampled_from(VTT_TEXTS))
        identifier = draw(st.sampled_from(["", f"line{number}\n"]))
        setting = draw(st.sampled_from(["", " line:0", " align:start"]))
        if draw(st.booleans()) and draw(st.booleans()):
            parts.append(draw(st.sampled_from(["NOTE a note between cues", "NOTE\nsecond take"])))
        parts.append(f"{identifier}{stamp(clock)} --> {stamp(clock + duration)}{setting}\n{text}")
        cues.append((clock, clock + duration, text))
        clock += duration
    breaks = [draw(st.sampled_from(["\n\n", "\n\n\n"])) for _ in parts[1:]]
    text = parts[0] + "".join(b + p for b, p in zip(breaks, parts[1:], strict=True))
    text += draw(st.sampled_from(["", "\n", "\n\n"]))
    text = text.replace("\n", newline)
    bom = codecs.BOM_UTF8 if draw(st.booleans()) else b""
    event(f"{'CRLF' if newline == chr(13) + chr(10) else 'LF'}, {'BOM' if bom else 'no BOM'}")
    return bom + text.encode("utf-8"), cues


@st.composite
def srt_file(draw: st.DrawFn) -> tuple[bytes, list[tuple[int, int, str]]]:
    """An SRT dialogue file composed by the srt library, with CRLF or LF and maybe a BOM."""
    subtitles, clock = [], draw(st.integers(0, 2000))
    for number in range(1, draw(st.integers(1, 10)) + 1):
        clock += draw(st.integers(0, 5000))
        duration = draw(st.integers(400, 6000))
        text = draw(st.sampled_from(SRT_TEXTS))
        subtitles.append(
            srt.Subtitle(
                number, timedelta(milliseconds=clock), timedelta(milliseconds=clock + duration), text
            )
        )
        clock += duration
    text = srt.compose(subtitles)
    if draw(st.booleans()):
        text = text.replace("\n", "\r\n")
    bom = codecs.BOM_UTF8 if draw(st.booleans()) else b""
    cues = [
        (s.start // timedelta(milliseconds=1), s.end // timedelta(milliseconds=1), s.content)
        for s in subtitles
    ]
    return bom + text.encode("utf-8"), cues


@st.composite
def sounds_with_priorities(draw: st.DrawFn, max_cues: int = 10) -> tuple[list[Cue], dict[str, int]]:
    cues, priorities, clock = [], {}, draw(st.integers(0, 3000))
    for number in range(draw(st.integers(0, max_cues))):
        clock += draw(st.integers(0, 6000))
        duration = draw(st.integers(300, 8000))
        text, priority = draw(st.sampled_from(SOUNDS))
        cues.append(Cue(clock, clock + duration, (text,), (f"e{number}",)))
        priorities[f"e{number}"] = priority
        clock += duration
    return cues, priorities


PROPERTY = settings(max_examples=300, deadline=None, suppress_health_check=[HealthCheck.too_slow])


def reference_cues(raw: bytes, fmt: SubtitleFormat) -> list[tuple[int, int, str]]:
    """Cues as the reference libraries read them (webvtt-py strict; srt)."""
    text = raw.decode("utf-8-sig")
    if fmt == "vtt":
        document = webvtt.from_buffer(io.StringIO(text), strict=True)
        return [
            (c.start_time.in_milliseconds(), c.end_time.in_milliseconds(), c.raw_text)
            for c in document.captions
        ]
    return [
        (s.start // timedelta(milliseconds=1), s.end // timedelta(milliseconds=1), s.content)
        for s in srt.parse(text)
    ]


@pytest.mark.parametrize("fmt", ["vtt", "srt"])
@PROPERTY
@given(data=st.data())
def test_removing_the_sound_gives_back_the_dialogue_file_byte_for_byte(
    fmt: SubtitleFormat, data: st.DataObject
) -> None:
    raw, cues = data.draw(vtt_file() if fmt == "vtt" else srt_file())
    assert reference_cues(raw, fmt) == cues  # the file is what we meant to build
    sounds, priorities = data.draw(sounds_with_priorities())
    strategy = data.draw(st.sampled_from(["position", "combine", "move", "drop"]))
    merged, track = merge_bytes(raw, fmt, sounds, priorities, strategy)
    for action in sorted({o.action for o in track.outcomes}):
        event(f"some sound {action}")  # shown with --hypothesis-show-statistics
    assert merged.startswith(codecs.BOM_UTF8) == raw.startswith(codecs.BOM_UTF8)
    if b"\r\n" in raw:
        assert b"\n" not in merged.replace(b"\r\n", b"")  # every line the merge added ends as the file's do
    placed = reference_cues(merged, fmt)  # still valid for the reference parsers
    assert len(placed) >= len(cues)
    # W3C WebVTT: starts never decrease (the generated dialogue is in order, so the merge must be)
    assert [p[0] for p in placed] == sorted(p[0] for p in placed)
    # the exact bytes back; for SRT after numbering the cues from 1 again, as the merge renumbers
    assert remove_sound(merged, fmt) == raw


@pytest.mark.parametrize("fmt", ["vtt", "srt"])
@PROPERTY
@given(data=st.data())
def test_no_alert_is_ever_missing_whatever_the_dialogue_density(
    fmt: SubtitleFormat, data: st.DataObject
) -> None:
    # dialogue from sparse to back to back, one to three lines a cue
    dialogue, clock = [], 0
    for _ in range(data.draw(st.integers(0, 25))):
        clock += data.draw(st.sampled_from([0, 0, 0, 100, 500, 2000]))
        duration = data.draw(st.integers(500, 5000))
        lines = data.draw(st.integers(1, 3))
        dialogue.append((clock, clock + duration, "\n".join(["well, now"] * lines)))
        clock += duration
    text = (
        webvtt.WebVTT(captions=[webvtt.Caption(stamp(s), stamp(e), t) for s, e, t in dialogue]).content
        if fmt == "vtt"
        else srt.compose(
            [
                srt.Subtitle(n, timedelta(milliseconds=s), timedelta(milliseconds=e), t)
                for n, (s, e, t) in enumerate(dialogue, 1)
            ]
        )
    )
    sounds, priorities = data.draw(sounds_with_priorities(max_cues=12))
    style = style_for(
        data.draw(st.sampled_from(["brackets", "capitals"])),
        data.draw(st.sampled_from(["position", "combine", "move", "drop"])),
    )
    track = parse_subtitles(text, fmt)
    merged = merge_tracks(track, sounds, style, priorities=priorities)
    written = reference_cues(dumps_merged(merged).encode("utf-8"), fmt)
    tolerance = style.layout.sync_tolerance_ms
    for cue in sounds:
        if priorities[cue.event_ids[0]] < 4:
            continue
        wording = cue.lines[0]
        shown = [
            (s, e)
            for s, e, t in written
            if wording in t.split("\n") and s <= cue.start_ms + tolerance and e > cue.start_ms - tolerance
        ]
        assert shown, f"alert {cue} missing from the merged track"
    actions = {o.action for o in merged.outcomes if o.alert}
    for action in sorted(actions):
        event(f"an alert {action}")
    assert "dropped" not in actions
    # every alert placed against the limits and every sound left out is one warning line
    warned = merge_warnings(merged)
    assert len([w for w in warned if w.startswith("alert ")]) == sum(
        o.action == "overlapping" for o in merged.outcomes
    )
    assert len([w for w in warned if w.startswith("left out ")]) == sum(
        o.action == "dropped" for o in merged.outcomes
    )


# -- one case each, through the command line -------------------------------------------------


def srt_bytes(cues: list[tuple[int, int, str]], newline: str = "\n", bom: bool = False) -> bytes:
    """An SRT file composed by the srt library, with the given line ending and BOM."""
    subtitles = [
        srt.Subtitle(n, timedelta(milliseconds=s), timedelta(milliseconds=e), t)
        for n, (s, e, t) in enumerate(cues, 1)
    ]
    return (codecs.BOM_UTF8 if bom else b"") + srt.compose(subtitles).replace("\n", newline).encode("utf-8")


def vtt_bytes(cues: list[tuple[int, int, str]]) -> bytes:
    """A WebVTT file composed by webvtt-py."""
    return webvtt.WebVTT(captions=[webvtt.Caption(stamp(s), stamp(e), t) for s, e, t in cues]).content.encode(
        "utf-8"
    )


def run_merge(
    tmp_path: Path, sounds: bytes, dialogue: bytes, fmt: str, *extra: str
) -> tuple[int, bytes, list[str]]:
    """`captioner merge` on two files; returns the exit status, the output's bytes and the stderr lines."""
    (tmp_path / f"scene.sounds.{fmt}").write_bytes(sounds)
    (tmp_path / f"scene.{fmt}").write_bytes(dialogue)
    out = tmp_path / f"scene.merged.{fmt}"
    out.unlink(missing_ok=True)
    err = io.StringIO()
    with pytest.MonkeyPatch.context() as patch:
        patch.setattr("sys.stderr", err)
        status = main(
            [
                "merge",
                str(tmp_path / f"scene.sounds.{fmt}"),
                str(tmp_path / f"scene.{fmt}"),
                "-o",
                str(out),
                *extra,
            ]
        )
    return status, out.read_bytes() if out.exists() else b"", err.getvalue().splitlines()


BUSY = [
    (n * 2000, n * 2000 + 2000, "Where did I leave it?\nCheck the hall.") for n in range(10)
]  # two lines, back to back


@pytest.mark.parametrize("alert", ["[phone ringing]", "[buzzer sounding]"])
def test_an_alert_over_busy_two_line_dialogue_is_kept_and_reported_on_one_line(
    tmp_path: Path, alert: str
) -> None:
    sounds = srt_bytes([(5000, 7000, alert), (9000, 11000, "[dog barking]")])
    status, out, err = run_merge(tmp_path, sounds, srt_bytes(BUSY), "srt")
    assert status == 0
    shown = [s for s in srt.parse(out.decode("utf-8")) if alert in s.content.split("\n")]
    assert [s.start for s in shown] == [timedelta(seconds=5)]  # at its own time, over the dialogue
    warnings = [line for line in err if "warning" in line]
    # the alert: one line naming its time; the lower-priority dog: left out, on one line of its own
    assert [line for line in warnings if alert in line] == [
        f"captioner: warning: alert {alert} at 00:00:05.000 overlaps other cues (players stack them): "
        "no placement kept every layout limit; check it"
    ]
    assert (
        len(
            [
                line
                for line in warnings
                if line.startswith("captioner: warning: left out [dog barking] at 00:00:09.000: ")
            ]
        )
        == 1
    )
    assert len(warnings) == 2


def test_wording_rates_a_sound_when_its_events_are_unknown() -> None:
    def rated(text: str) -> int:
        return sound_priority(Cue(0, 1000, (text,), ("1",)))

    # priorities from the bundled vocabulary: phone 4, smoke alarm 5, dog 3; both conventions
    assert [rated("[phone ringing]"), rated("SMOKE ALARM BEEPS"), rated("[dog barking]")] == [4, 5, 3]
    assert rated("[tuba solo]") == 5  # wording it does not know counts as an alert: never left out
    assert sound_priority(Cue(0, 1000, ("[tuba solo]",), ("e7-end",)), {"e7": 2}) == 2  # events win


def test_the_summary_counts_a_dialogue_cue_that_gained_a_sound_line(tmp_path: Path) -> None:
    style = tmp_path / "combine.yaml"
    style.write_text("merge:\n  strategy: combine\n", encoding="utf-8")
    dialogue = srt_bytes([(1000, 4000, "Down, boy!"), (6000, 8000, "Good dog.")])
    sounds = srt_bytes([(1200, 3000, "[dog barking]")])
    sidecar = tmp_path / "merge.json"
    status, out, err = run_merge(
        tmp_path, sounds, dialogue, "srt", "--style", str(style), "--explain", "--events-json", str(sidecar)
    )
    assert status == 0
    assert [s.content for s in srt.parse(out.decode("utf-8"))] == ["Down, boy!\n[dog barking]", "Good dog."]
    summary = [line for line in err if "untouched" in line and line.startswith("captioner: ")]
    assert summary[-1].endswith(
        "scene.merged.srt: 1 dialogue cue(s) untouched, 1 with a sound line added; "
        "0 sound cue(s) of their own, 0 left out (see --explain)"
    )
    assert any(
        "sound line added to the dialogue cue at 00:00:01.000" in line and "line 2" in line for line in err
    )
    record = json.loads(sidecar.read_text(encoding="utf-8"))
    assert record["dialogue_cues_untouched"] == 1
    assert [(c["start_ms"], c["added"]) for c in record["dialogue_cues_with_sound_line"]] == [
        (1000, ["[dog barking]"])
    ]


def test_help_no_longer_claims_every_dialogue_cue_is_unchanged(capsys: pytest.CaptureFixture[str]) -> None:
    for command in ("merge", "caption"):
        with pytest.raises(SystemExit):
            main([command, "--help"])
        text = " ".join(capsys.readouterr().out.split())
        assert "unchanged" not in text and "extra line of a dialogue cue" in text


WEBVTT_BY_HAND = (
    "WEBVTT\r\nKind: captions\r\nLanguage: en\r\n\r\n"
    "NOTE made by hand for the breakfast scene\r\n\r\n"
    "STYLE\r\n::cue { color: white }\r\n\r\n"
    "1\r\n00:00:01.000 --> 00:00:03.000\r\nMorning.\r\n\r\n"
    "NOTE the parcel arrives\r\n\r\n"
    "2\r\n00:00:09.000 --> 00:00:11.000\r\nThat will be my parcel.\r\n"
)


def test_webvtt_header_text_notes_crlf_and_bom_survive_byte_for_byte(tmp_path: Path) -> None:
    raw = codecs.BOM_UTF8 + WEBVTT_BY_HAND.encode("utf-8")
    status, out, _ = run_merge(
        tmp_path, vtt_bytes([(5000, 7000, "[doorbell ringing]")]), raw, "vtt", "--quiet"
    )
    assert status == 0
    text = out.decode("utf-8")
    assert text.startswith("\ufeffWEBVTT\r\nKind: captions\r\nLanguage: en\r\n\r\nNOTE captioner merge\r\n")
    assert "\n" not in text.replace("\r\n", "")  # CRLF throughout, as in the dialogue file
    # the sound goes after cue 1 and before the note that belongs to cue 2
    assert text.index("Morning.") < text.index("[doorbell ringing]") < text.index("NOTE the parcel arrives")
    document = webvtt.from_buffer(
        io.StringIO(text.lstrip("\ufeff")), strict=True
    )  # W3C WebVTT, as webvtt-py reads it
    assert [c.text for c in document.captions] == [
        "Morning.",
        "[doorbell ringing]",
        "That will be my parcel.",
    ]
    assert [s.text for s in document.styles] == ["::cue { color: white }"]
    assert remove_sound(out, "vtt") == raw
    assert (tmp_path / "scene.vtt").read_bytes() == raw  # the input is only read


def test_srt_crlf_and_bom_survive_except_the_renumbering(tmp_path: Path) -> None:
    raw = srt_bytes([(1000, 3000, "Morning."), (9000, 11000, "Coffee?")], newline="\r\n", bom=True)
    status, out, _ = run_merge(
        tmp_path, srt_bytes([(5000, 7000, "[doorbell ringing]")]), raw, "srt", "--quiet"
    )
    assert status == 0
    assert out.startswith(codecs.BOM_UTF8) and b"\n" not in out.replace(b"\r\n", b"")
    parsed = list(srt.parse(out.decode("utf-8-sig")))
    assert [(s.index, s.content) for s in parsed] == [
        (1, "Morning."),
        (2, "[doorbell ringing]"),
        (3, "Coffee?"),
    ]
    assert out.decode("utf-8-sig").endswith("3\r\n00:00:09,000 --> 00:00:11,000\r\nCoffee?\r\n\r\n")
    assert remove_sound(out, "srt") == raw  # identical once numbered from 1 again


def test_an_srt_fraction_of_one_digit_is_read_as_tenths_with_a_warning_naming_the_line(
    tmp_path: Path,
) -> None:
    raw = b"1\n0:00:03,5 --> 0:00:05,000\nHi there.\n\n2\n00:00:08,000 --> 00:00:09,25\nBye.\n"
    # the srt library reads the digits as milliseconds (3.005 s); subtitle software reads 3.5 s
    # (common practice)
    assert next(srt.parse(raw.decode())).start == timedelta(seconds=3, milliseconds=5)
    (tmp_path / "scene.srt").write_bytes(raw)
    with pytest.warns(UserWarning) as caught:
        track = read_track(tmp_path / "scene.srt")
    assert [(c.start_ms, c.end_ms) for c in track.cues] == [(3500, 5000), (8000, 9250)]
    messages = [str(w.message) for w in caught]
    assert len(messages) == 2
    assert messages[0].startswith(
        f"{tmp_path / 'scene.srt'}, line 2: timestamp '0:00:03,5' has 1 decimal digit(s)"
    )
    assert messages[1].startswith(
        f"{tmp_path / 'scene.srt'}, line 6: timestamp '00:00:09,25' has 2 decimal digit(s)"
    )


def test_a_malformed_webvtt_timestamp_is_refused_with_file_and_line(tmp_path: Path) -> None:
    raw = b"WEBVTT\n\n00:00:01.000 --> 00:00:02.000\nHi.\n\n00:03.5 --> 00:04.000\nBye.\n"
    status, out, err = run_merge(tmp_path, vtt_bytes([(5000, 7000, "[door slams]")]), raw, "vtt")
    assert status == 2 and out == b"" and len(err) == 1
    assert f"{tmp_path / 'scene.vtt'}, line 6: not a valid WebVTT cue" in err[0]


def test_a_sound_track_is_refused_as_its_own_dialogue(tmp_path: Path) -> None:
    from captioner.update import recorded_vtt

    track = recorded_vtt([Cue(1000, 3000, ("[door slams]",), ("e0001",))], "drafted").encode("utf-8")
    status, out, err = run_merge(tmp_path, track, track, "vtt")
    assert status == 2 and out == b"" and len(err) == 1
    assert "holds sound captions captioner wrote (its 'NOTE captioner record' block)" in err[0]
    sounds = srt_bytes([(1000, 3000, "[door slams]"), (5000, 7000, "[dog barking]")])
    status, out, err = run_merge(tmp_path, sounds, sounds, "srt")  # SRT has no record: same text and times
    assert status == 2 and out == b"" and len(err) == 1 and "its cues are the sound cues themselves" in err[0]


def test_a_merged_webvtt_track_is_refused_as_dialogue(tmp_path: Path) -> None:
    sounds = vtt_bytes([(5000, 7000, "[doorbell ringing]")])
    status, merged, _ = run_merge(tmp_path, sounds, WEBVTT_BY_HAND.encode("utf-8"), "vtt", "--quiet")
    assert status == 0
    status, out, err = run_merge(tmp_path, sounds, merged, "vtt")
    assert status == 2 and out == b"" and len(err) == 1
    assert "(its 'NOTE captioner merge' block)" in err[0] and "original dialogue subtitles" in err[0]


def test_merging_a_merged_srt_again_adds_nothing_twice_and_says_so(tmp_path: Path) -> None:
    style = tmp_path / "combine.yaml"
    style.write_text("merge:\n  strategy: combine\n", encoding="utf-8")
    dialogue = srt_bytes([(1000, 4000, "Down, boy!"), (9000, 11000, "Coffee?")])
    sounds = srt_bytes([(1200, 3000, "[dog barking]"), (5000, 7000, "[doorbell ringing]")])
    status, once, _ = run_merge(tmp_path, sounds, dialogue, "srt", "--style", str(style), "--quiet")
    assert status == 0 and len(list(srt.parse(once.decode()))) == 3
    status, twice, err = run_merge(tmp_path, sounds, once, "srt", "--style", str(style), "--quiet")
    assert status == 0 and twice == once  # neither the added line nor the sound cue comes twice
    assert [line for line in err if "already in" in line] == [
        f"captioner: warning: 2 sound cue(s) already in {tmp_path / 'scene.srt'} with the same text and time "
        "(from an earlier merge, first at 00:00:01.200) were not added again"
    ]


def test_caption_merge_rates_each_sound_by_its_events_not_its_wording(tmp_path: Path) -> None:
    from captioner.events import SoundEvent
    from captioner.pipeline import Captioned, draft_outputs
    from captioner.policy import Decision
    from captioner.vocabulary import Kind

    def heard(event_id: str, phrase: str, priority: int, start_ms: int) -> SoundEvent:
        return SoundEvent(
            event_id,
            "x",
            "X",
            phrase,
            phrase,
            Kind.TRANSIENT,
            priority,
            None,
            start_ms,
            start_ms + 2000,
            0.9,
            0.5,
            -20,
            -40,
        )

    # wording alone would rate both as alerts (the vocabulary knows neither); the events say 2 and 5
    events = (heard("e0001", "tuba playing", 2, 5000), heard("e0002", "kettle whistling", 5, 9000))
    cues = tuple(Cue(e.start_ms, e.end_ms, (f"[{e.phrase}]",), (e.event_id,)) for e in events)
    run = Captioned(
        tmp_path / "scene.wav",
        style_for("brackets", "move"),
        "test",
        None,  # type: ignore[arg-type]  # the score track is not needed to draft the texts
        (),
        "scene.srt",
        events,
        tuple(Decision(e.event_id, True, "kept", "") for e in events),
        cues,
    )
    busy = parse_subtitles(srt_bytes(BUSY).decode("utf-8"), "srt", name="scene.srt")
    drafts = draft_outputs(run, None, "srt", merge_with=busy, dialogue_name="scene.srt")  # type: ignore[arg-type]
    assert drafts.merged is not None and drafts.merged_text is not None
    assert {o.event_ids[0]: o.action for o in drafts.merged.outcomes} == {
        "e0001": "dropped",
        "e0002": "overlapping",
    }
    assert "[kettle whistling]" in drafts.merged_text and "[tuba playing]" not in drafts.merged_text
    assert [d.rule for d in drafts.result.decisions] == [
        "layout",
        "kept",
    ]  # the sidecar says why the tuba went


def test_caption_merge_refuses_a_sound_track_as_dialogue_before_any_work(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    from captioner.update import recorded_vtt

    sounds = tmp_path / "scene.sounds.vtt"
    sounds.write_text(
        recorded_vtt([Cue(1000, 3000, ("[door slams]",), ("e0001",))], "drafted"), encoding="utf-8"
    )
    out = tmp_path / "scene.merged.vtt"
    # the media file does not even exist: the refusal comes first
    status = main(
        ["caption", str(tmp_path / "scene.wav"), "--dialogue", str(sounds), "--merge", "-o", str(out)]
    )
    err = capsys.readouterr().err.splitlines()
    assert status == 2 and not out.exists() and len(err) == 1
    assert f"{sounds}: holds sound captions captioner wrote (its 'NOTE captioner record' block)" in err[0]
