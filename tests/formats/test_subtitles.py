"""Reading existing subtitles: exact text, encodings, and one clear error naming file and line."""

from __future__ import annotations

import codecs
import warnings
from pathlib import Path

import pytest
import srt
import webvtt

from captioner.errors import SubtitleError
from captioner.events import Span
from captioner.formats.subtitles import (
    SubtitleCue,
    dialogue_spans,
    parse_subtitles,
    plain_lines,
    read_subtitles,
    read_track,
)

VTT = """WEBVTT - dialogue of the breakfast scene

STYLE
::cue(.loud) { color: yellow }

REGION
id:upper
width:40%

NOTE written by hand

intro
00:00:01.000 --> 00:00:02.500 line:0 align:start
<v A><i>Morning</i> &amp; welcome</v>
  <c.loud>second line</c>

01:02:03.004 --> 01:02:05.000
Toast &lt;burnt&gt; again?
"""

SRT = """1
00:00:01,000 --> 00:00:02,500
<i>Morning</i> & welcome
second line

2
01:02:03,004 --> 01:02:05,000
Toast again?
"""


def test_webvtt_text_tags_identifiers_and_settings_are_kept_exactly(tmp_path: Path) -> None:
    path = tmp_path / "scene.vtt"
    path.write_text(VTT, encoding="utf-8")
    track = read_track(path)
    assert track.format == "vtt"
    assert track.cues == (
        SubtitleCue(
            1000,
            2500,
            "<v A><i>Morning</i> &amp; welcome</v>\n  <c.loud>second line</c>",
            "intro",
            "line:0 align:start",
        ),
        # W3C WebVTT timestamps: hh:mm:ss.ttt, so 01:02:03.004 is 3,723,004 ms
        SubtitleCue(3723004, 3725000, "Toast &lt;burnt&gt; again?", "", ""),
    )
    # STYLE and REGION blocks travel with the track so a merged file can keep them
    assert track.header_blocks == ("STYLE\n::cue(.loud) { color: yellow }", "REGION\nid:upper\nwidth:40%")


def test_webvtt_reading_agrees_with_webvtt_py(tmp_path: Path) -> None:
    path = tmp_path / "scene.vtt"
    path.write_text(VTT, encoding="utf-8")
    reference = webvtt.read(str(path))
    ours = read_subtitles(path)
    assert [c.text for c in ours] == [c.raw_text for c in reference.captions]
    assert [c.start_ms for c in ours] == [c.start_time.in_milliseconds() for c in reference.captions]


def test_srt_text_and_markup_are_kept_exactly(tmp_path: Path) -> None:
    path = tmp_path / "scene.srt"
    path.write_text(SRT, encoding="utf-8")
    cues = read_subtitles(path)
    reference = list(srt.parse(SRT))
    assert (
        [c.text for c in cues]
        == [s.content for s in reference]
        == ["<i>Morning</i> & welcome\nsecond line", "Toast again?"]
    )
    assert [(c.start_ms, c.end_ms) for c in cues] == [(1000, 2500), (3723004, 3725000)]  # SRT: HH:MM:SS,mmm


@pytest.mark.parametrize("encoding", ["utf-8", "utf-8-sig", "utf-16", "utf-16-le", "utf-16-be"])
def test_unicode_encodings_read_the_same_without_warnings(tmp_path: Path, encoding: str) -> None:
    text = VTT.replace("Toast", "Café toast")
    raw = text.encode(encoding)
    if encoding in ("utf-16-le", "utf-16-be"):  # with an explicit byte-order mark
        raw = (codecs.BOM_UTF16_LE if encoding.endswith("le") else codecs.BOM_UTF16_BE) + raw
    path = tmp_path / "scene.vtt"
    path.write_bytes(raw)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        cues = read_subtitles(path)
    assert cues[1].text == "Café toast &lt;burnt&gt; again?"
    assert cues[0].identifier == "intro"  # a BOM must not leak into the header or the first cue


def test_legacy_single_byte_file_is_read_with_a_warning(tmp_path: Path) -> None:
    path = tmp_path / "old.srt"
    path.write_bytes("1\n00:00:01,000 --> 00:00:02,000\nCafé – “quoted”\n".encode("cp1252"))
    with pytest.warns(UserWarning, match=r"old\.srt: not UTF-8; read as cp1252"):
        cues = read_subtitles(path)
    assert cues[0].text == "Café – “quoted”"


def test_bytes_undefined_in_windows_1252_fall_back_to_latin_1(tmp_path: Path) -> None:
    path = tmp_path / "odd.srt"
    path.write_bytes(b"1\n00:00:01,000 --> 00:00:02,000\nna\xefve \x81\n")
    with pytest.warns(UserWarning, match="latin-1"):
        cues = read_subtitles(path)
    assert cues[0].text == "naïve \x81"


@pytest.mark.parametrize(
    ("name", "text", "line", "problem"),
    [
        (
            "header.vtt",
            "WEBVT\n\n00:00:01.000 --> 00:00:02.000\nhi\n",
            1,
            "first line must start with WEBVTT",
        ),
        (
            "stamp.vtt",
            "WEBVTT\n\n00:00:01.000 --> 00:00:02.000\nhi\n\n00:00:03.000 --> 00:00:0x.000\nho\n",
            6,
            "not a valid WebVTT cue",
        ),
        # W3C WebVTT: "line" takes a number or a percentage
        (
            "setting.vtt",
            "WEBVTT\n\nNOTE x\n\n00:00:01.000 --> 00:00:02.000 line:abc\nhi\n",
            5,
            "not a valid WebVTT cue",
        ),
        (
            "blank.vtt",
            "WEBVTT\n\n00:00:01.000 --> 00:00:02.000\nhi\n00:00:03.000 --> 00:00:04.000\nho\n",
            5,
            "without a blank line",
        ),
        # W3C WebVTT: a cue's end time must be greater than its start time
        (
            "order.vtt",
            "WEBVTT\n\n00:00:01.000 --> 00:00:02.000\nhi\n\n00:00:05.000 --> 00:00:04.000\nho\n",
            6,
            "ends before or when it starts",
        ),
        ("garbage.srt", "\n\nnot a subtitle\n\n1\n00:00:01,000 --> 00:00:02,000\nhi\n", 3, "not valid SRT"),
        (
            "order.srt",
            "1\n00:00:01,000 --> 00:00:02,000\nhi\n\n2\n00:00:03,000 --> 00:00:02,500\nho\n",
            6,
            "ends before or when it starts",
        ),
        # SRT cue text may hold "-->": the line named is the bad cue's timing line, not the text's
        (
            "arrow.srt",
            "1\n00:00:01,000 --> 00:00:02,000\nrun --> now\n\n2\n00:00:05,000 --> 00:00:03,000\nho\n",
            6,
            "ends before",
        ),
        ("webvtt.srt", "WEBVTT\n\n00:00:01.000 --> 00:00:02.000\nhi\n", 1, "not valid SRT"),
    ],
)
def test_malformed_file_gives_one_error_naming_file_and_line(
    tmp_path: Path, name: str, text: str, line: int, problem: str
) -> None:
    path = tmp_path / name
    path.write_text(text, encoding="utf-8")
    with pytest.raises(
        SubtitleError, match=rf"{name.replace('.', '[.]')}, line {line}: .*{problem}"
    ) as caught:
        read_subtitles(path)
    assert "\n" not in str(caught.value)  # one line for the terminal


def test_missing_file_and_unknown_type_are_user_errors(tmp_path: Path) -> None:
    with pytest.raises(SubtitleError, match="not found"):
        read_subtitles(tmp_path / "absent.vtt")
    other = tmp_path / "scene.ass"
    other.write_text("[Script Info]\n", encoding="utf-8")
    with pytest.raises(SubtitleError, match="unknown subtitle type .ass"):
        read_subtitles(other)


def test_reading_never_changes_the_file(tmp_path: Path) -> None:
    path = tmp_path / "scene.vtt"
    path.write_bytes(codecs.BOM_UTF8 + VTT.encode("utf-8"))
    before = (path.read_bytes(), path.stat().st_mtime_ns)
    read_track(path)
    assert (path.read_bytes(), path.stat().st_mtime_ns) == before


def test_dialogue_spans_join_overlapping_cues() -> None:
    cues = [
        SubtitleCue(0, 1000, "a"),
        SubtitleCue(4000, 5000, "c"),
        SubtitleCue(500, 2000, "b"),
        SubtitleCue(2000, 2500, "d"),
    ]
    assert dialogue_spans(cues) == (Span(0, 2500), Span(4000, 5000))
    assert dialogue_spans([]) == ()


def test_plain_lines_remove_tags_and_decode_references() -> None:
    assert plain_lines("<v A><i>Tea</i> &amp; toast</v>\n<c.loud>Now</c>", "vtt") == ("Tea & toast", "Now")
    assert plain_lines("{\\an8}<i>Tea</i> & toast", "srt") == ("Tea & toast",)


def test_parse_keeps_file_order_for_cues_with_equal_times() -> None:
    text = (
        "WEBVTT\n\n00:00:01.000 --> 00:00:02.000\nfirst\n\n00:00:01.000 --> "
        "00:00:02.000\nsecond\n\n00:00:00.500 --> 00:00:03.000\nearlier\n"
    )
    assert [c.text for c in parse_subtitles(text, "vtt").cues] == ["earlier", "first", "second"]


def test_each_cue_knows_the_line_of_its_timing_line() -> None:
    # cue text holding an arrow, and even a line shaped like a timing line, is still text
    text = (
        "1\n00:00:01,000 --> 00:00:02,000\nrun --> now\n00:00:09,000 --> 00:00:10,000 is the "
        "clip\n\n2\n00:00:03,000 --> 00:00:04,000\nho\n"
    )
    assert len(list(srt.parse(text))) == 2  # the reference library reads two cues too
    assert [c.location for c in parse_subtitles(text, "srt", name="talk.srt").cues] == [
        "talk.srt, line 2",
        "talk.srt, line 7",
    ]
    vtt = (
        "WEBVTT\n\nNOTE x\n\nintro\n00:00:01.000 --> 00:00:02.000\nhi\n\n00:00:03.000 --> 00:00:04.000\nho\n"
    )
    assert [c.location for c in parse_subtitles(vtt, "vtt", name="talk.vtt").cues] == [
        "talk.vtt, line 6",
        "talk.vtt, line 9",
    ]


@pytest.mark.parametrize(
    ("name", "text"),
    [
        (
            "talk.vtt",
            "WEBVTT\n\n00:00:01.000 --> 00:00:02.000\nHi\n\n00:00:03.000 --> "
            "00:00:03.000\nBlink\n\n00:00:05.000 --> 00:00:06.000\nBye\n",
        ),
        (
            "talk.srt",
            "1\n00:00:01,000 --> 00:00:02,000\nHi\n\n2\n00:00:03,000 --> "
            "00:00:03,000\nBlink\n\n3\n00:00:05,000 --> 00:00:06,000\nBye\n",
        ),
    ],
)
def test_a_zero_length_cue_is_kept_but_counts_as_no_dialogue_time(
    tmp_path: Path, name: str, text: str
) -> None:
    path = tmp_path / name
    path.write_text(text, encoding="utf-8")
    # the reference readers keep it (the W3C WebVTT parsing rules, from memory, do not compare
    # start and end), so the track keeps it too and a merge passes it through untouched
    reference = (
        [c.raw_text for c in webvtt.read(str(path)).captions]
        if name.endswith(".vtt")
        else [s.content for s in srt.parse(text)]
    )
    track = read_track(path)
    assert [c.text for c in track.cues] == reference == ["Hi", "Blink", "Bye"]
    assert (track.cues[1].start_ms, track.cues[1].end_ms) == (3000, 3000)
    with pytest.warns(UserWarning, match=r"talk[.](vtt|srt), line 6: cue has no duration") as caught:
        spans = dialogue_spans(track.cues)
    assert len(caught) == 1
    assert spans == (Span(1000, 2000), Span(5000, 6000))
