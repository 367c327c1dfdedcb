"""WebVTT and SRT writers, checked against the W3C WebVTT rules and the webvtt-py / srt parsers."""

from __future__ import annotations

import io
import re
from datetime import timedelta

import srt
import webvtt
from hypothesis import given, settings
from hypothesis import strategies as st

from captioner.cues import Cue
from captioner.formats import WRITERS
from captioner.formats.webvtt import dumps as vtt_dumps
from captioner.formats.webvtt import timestamp

# W3C WebVTT: timestamps are [hh:]mm:ss.ttt with exactly three decimals, mm and ss 00-59.
TIMESTAMP = re.compile(r"^(\d{2,}:)?[0-5]\d:[0-5]\d\.\d{3}$")


def _cues() -> list[Cue]:
    return [
        Cue(1500, 3500, ("[dog barking]",), ("e0001",)),
        Cue(3723004, 3725004, ("[glass & <plate> --> breaking]", "[music]"), ("e0002",)),
    ]


def test_webvtt_golden_text() -> None:
    text = vtt_dumps(_cues(), "drafted by captioner")
    assert text == (
        "WEBVTT\n\nNOTE\ndrafted by captioner\n\n"
        "e0001\n00:00:01.500 --> 00:00:03.500\n[dog barking]\n\n"
        "e0002\n01:02:03.004 --> 01:02:05.004\n[glass &amp; &lt;plate&gt; --&gt; breaking]\n[music]\n"
    )


def test_webvtt_parses_back_with_webvtt_py() -> None:
    parsed = webvtt.from_buffer(io.StringIO(vtt_dumps(_cues(), "note")))
    assert [c.identifier for c in parsed] == ["e0001", "e0002"]
    assert [c.start for c in parsed] == ["00:00:01.500", "01:02:03.004"]
    # webvtt-py unescapes nothing in .text; the raw payload keeps W3C escapes
    assert "&amp;" in parsed.captions[1].raw_text and "<" not in parsed.captions[1].raw_text


def test_webvtt_payload_has_no_arrow_and_no_raw_markup() -> None:
    text = vtt_dumps(_cues())
    # W3C WebVTT: cue text may not contain "-->"; '&' and '<' must be escaped.
    for line in text.splitlines()[1:]:
        if " --> " in line:
            start, end = line.split(" --> ")
            assert TIMESTAMP.match(start) and TIMESTAMP.match(end)
        else:
            assert "-->" not in line and "<" not in line
    assert text.count(" --> ") == 2


def test_srt_parses_back_with_srt_library() -> None:
    text = WRITERS["srt"](_cues(), "")
    parsed = list(srt.parse(text))
    assert [s.index for s in parsed] == [1, 2]
    assert parsed[1].start == timedelta(hours=1, minutes=2, seconds=3, milliseconds=4)
    assert parsed[1].content == "[glass & <plate> --> breaking]\n[music]"
    assert "01:02:03,004 --> 01:02:05,004" in text  # SRT uses a comma before milliseconds


@settings(max_examples=200, deadline=None)
@given(
    st.lists(
        st.tuples(
            st.integers(0, 10**8),
            st.integers(1, 10**6),
            st.text(st.characters(blacklist_categories=("Cs", "Cc", "Zl", "Zp")), min_size=1, max_size=40),
        ),
        max_size=8,
    )
)
def test_round_trip_through_reference_parsers(items: list[tuple[int, int, str]]) -> None:
    cues = [
        Cue(start, start + length, (text.strip() or "x",), (f"e{i}",))
        for i, (start, length, text) in enumerate(sorted(items))
    ]
    parsed = webvtt.from_buffer(io.StringIO(vtt_dumps(cues)))
    assert [(c.start, c.end) for c in parsed] == [(timestamp(c.start_ms), timestamp(c.end_ms)) for c in cues]
    back = list(srt.parse(WRITERS["srt"](cues, "")))
    assert [
        (int(s.start / timedelta(milliseconds=1)), int(s.end / timedelta(milliseconds=1))) for s in back
    ] == [(c.start_ms, c.end_ms) for c in cues]
