"""`captioner check`: every finding against the W3C WebVTT rules and the published caption numbers."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from captioner.cli import main
from captioner.qc import check_track
from captioner.style import load_style

BRACKETS, CAPITALS = load_style("brackets"), load_style("capitals")


def _vtt(tmp_path: Path, body: str, header: str = "WEBVTT") -> Path:
    path = tmp_path / "track.vtt"
    path.write_text(f"{header}\n\n{body.strip()}\n", encoding="utf-8")
    return path


def _rules(path: Path, style: object = BRACKETS) -> list[tuple[int, str]]:
    return [(f.cue, f.rule) for f in check_track(path, style).findings]  # type: ignore[arg-type]


def test_a_clean_track_has_no_findings(tmp_path: Path) -> None:
    path = _vtt(
        tmp_path,
        "a\n00:00:01.000 --> 00:00:03.500\n[door slams]\n\nb\n00:00:05.000 --> 00:00:07.000\n[dog barking]",
    )
    assert _rules(path) == [] and main(["check", str(path)]) == 0


def test_display_time_limits(tmp_path: Path) -> None:
    # DCMP "Presentation Rate": at least 2.0 s on screen (brackets preset); re-cue past
    # 6-7 s is common practice (memory), the preset's 6 s.
    path = _vtt(
        tmp_path,
        "00:00:01.000 --> 00:00:02.500\n[door slams]\n\n00:00:05.000 --> 00:00:12.000\n[rain falling]",
    )
    assert _rules(path) == [(1, "short"), (2, "long")]


def test_reading_rate_counts_sound_tags_as_words(tmp_path: Path) -> None:
    # BBC Subtitle Guidelines §4: 160-180 words per minute; sound tags count as words.
    # 8 words in 2.0 s is 240 wpm, above the brackets preset's 160.
    path = _vtt(
        tmp_path, "00:00:01.000 --> 00:00:03.000\n[distant church bells ringing]\n[dogs barking far away]"
    )
    assert (1, "reading") in _rules(path)


def test_characters_per_line_and_lines_per_cue(tmp_path: Path) -> None:
    # DCMP (memory): 32 characters per line; BBC §3.1: 37; BBC §3.3 and DCMP: at most 2 lines.
    line = "[x" + "y" * 33 + "]"  # 36 characters: over 32, within 37
    path = _vtt(tmp_path, f"00:00:01.000 --> 00:00:07.000\n{line}\n[a]\n[b]")
    assert set(_rules(path)) >= {(1, "width"), (1, "lines")}
    assert (1, "width") not in _rules(path, CAPITALS)


def test_overlap_on_the_same_screen_position(tmp_path: Path) -> None:
    # FCC 14-12 placement: captions must not overlap one another on screen. A cue moved to
    # the other edge (`line:0`, as the merge does) does not cover the one below.
    path = _vtt(
        tmp_path,
        "00:00:01.000 --> 00:00:04.000\n[music]\n\n00:00:03.000 --> 00:00:06.000\n[dog barking]\n\n"
        "00:00:05.000 --> 00:00:07.500 line:0\n[phone ringing]",
    )
    assert [r for r in _rules(path) if r[1] == "overlap"] == [(2, "overlap")]


def test_gaps_below_the_style_minimum(tmp_path: Path) -> None:
    # BBC §4.5: no gap, or at least 1 s (capitals preset); brackets allows any gap.
    path = _vtt(
        tmp_path, "00:00:01.000 --> 00:00:03.000\n[music]\n\n00:00:03.500 --> 00:00:05.500\n[dog barking]"
    )
    assert (2, "gap") in _rules(path, CAPITALS) and (2, "gap") not in _rules(path)


def test_repeated_lines(tmp_path: Path) -> None:
    # DCMP Captioning Key: a continuing sound is not captioned again from scratch.
    path = _vtt(
        tmp_path,
        "00:00:01.000 --> 00:00:03.000\n[hens clucking]\n\n00:00:03.000 --> 00:00:05.000\n[hens "
        "clucking]\n[phone keypad beeping]",
    )
    assert _rules(path) == [(2, "repeat")]


@pytest.mark.parametrize(
    ("header", "body", "message"),
    [
        # W3C WebVTT: the file starts with "WEBVTT" (after an optional BOM).
        ("WEBVT", "00:00:01.000 --> 00:00:03.000\n[a]", "start with"),
        # W3C WebVTT: timestamps are [hh:]mm:ss.ttt, three decimals, minutes and seconds 00-59.
        ("WEBVTT", "00:00:01,000 --> 00:00:03.000\n[a]", "is not hh:mm:ss.ttt"),
        ("WEBVTT", "00:61.000 --> 00:63.000\n[a]", "is not hh:mm:ss.ttt"),
        # W3C WebVTT: a cue's end time is greater than its start time.
        ("WEBVTT", "00:00:03.000 --> 00:00:03.000\n[a]", "ends before it starts"),
        # W3C WebVTT: cue start times do not decrease through the file.
        (
            "WEBVTT",
            "00:00:05.000 --> 00:00:07.000\n[a]\n\n00:00:01.000 --> 00:00:03.000\n[b]",
            "starts before",
        ),
        # W3C WebVTT: cue identifiers are unique.
        (
            "WEBVTT",
            "x\n00:00:01.000 --> 00:00:03.000\n[a]\n\nx\n00:00:05.000 --> 00:00:07.000\n[b]",
            "used twice",
        ),
        # W3C WebVTT: cue text must not contain "-->".
        ("WEBVTT", "00:00:01.000 --> 00:00:03.000\n[a] --> [b]", '"-->"'),
    ],
)
def test_invalid_webvtt(tmp_path: Path, header: str, body: str, message: str) -> None:
    report = check_track(_vtt(tmp_path, body, header), BRACKETS)
    assert any(f.rule == "webvtt" and message in f.detail for f in report.findings), report.findings


def test_one_line_per_finding_a_summary_exit_1_and_json(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    path = tmp_path / "track.srt"
    path.write_text(
        "1\n00:00:01,000 --> 00:00:01,500\n[door slams]\n\n2\n00:00:01,200 --> 00:00:04,000\n[music]\n\n"
    )
    assert main(["check", str(path)]) == 1
    out = capsys.readouterr().out.strip().splitlines()
    assert out[0].startswith("track.srt:1 00:00:01.000 1: reading: 2 word(s)") and len(out) == 4
    assert out[-1] == "track.srt: 3 finding(s) in 2 of 2 cue(s) against style brackets"
    assert main(["check", str(path), "--json"]) == 1
    data = json.loads(capsys.readouterr().out)
    assert not data["ok"] and [f["rule"] for f in data["findings"]] == ["reading", "short", "overlap"]
    assert main(["check", str(tmp_path / "missing.vtt")]) == 2
