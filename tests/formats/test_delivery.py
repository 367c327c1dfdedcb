"""`captioner deliver`: a clean copy without NOTE blocks; the working file and its record stay."""

from __future__ import annotations

from pathlib import Path

import pytest
import webvtt

from captioner.cli import main
from captioner.cues import Cue
from captioner.update import read_record, recorded_vtt

DEMO = Path(__file__).resolve().parents[2] / "demo_media"


def _cues(path: Path) -> list[tuple[str, str, str, str]]:
    # Parsed by webvtt-py, the reference reader: identifiers, times and text must survive.
    return [(c.identifier or "", c.start, c.end, c.text) for c in webvtt.read(str(path))]


def test_a_sound_track_is_delivered_without_its_note_and_record(tmp_path: Path) -> None:
    working = tmp_path / "show.sounds.vtt"
    cues = (Cue(1000, 3000, ("[door slams]",), ("e0001",)), Cue(4000, 6500, ("[dog barking]",), ("e0002",)))
    working.write_text(recorded_vtt(cues, "drafted by captioner"), encoding="utf-8")
    before = working.read_bytes()
    clean = tmp_path / "show.vtt"
    assert main(["deliver", str(working), "-o", str(clean)]) == 0
    text = clean.read_text(encoding="utf-8")
    assert "NOTE" not in text and text.startswith("WEBVTT\n\n")  # W3C WebVTT header, then a blank line
    assert _cues(clean) == _cues(working)
    assert working.read_bytes() == before and read_record(before.decode()) is not None  # --update still works


def test_a_merged_track_keeps_every_cue_and_its_settings(tmp_path: Path) -> None:
    clean = tmp_path / "demo.vtt"
    assert main(["deliver", str(DEMO / "demo.merged.vtt"), "-o", str(clean)]) == 0
    assert "NOTE" not in clean.read_text(encoding="utf-8")
    assert _cues(clean) == _cues(DEMO / "demo.merged.vtt")
    positioned = [c for c in clean.read_text().splitlines() if "-->" in c and "line:" in c]
    source = [c for c in (DEMO / "demo.merged.vtt").read_text().splitlines() if "-->" in c and "line:" in c]
    assert positioned == source


def test_the_working_file_is_never_the_delivery(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    working = tmp_path / "a.vtt"
    working.write_text("WEBVTT\n\nNOTE keep me\n\n00:00:01.000 --> 00:00:03.000\n[a]\n", encoding="utf-8")
    assert main(["deliver", str(working), "-o", str(working), "--force"]) == 2
    assert "never modified" in capsys.readouterr().err
    assert main(["deliver", str(working), "-o", str(tmp_path / "a.srt")]) == 2  # formats must match
    assert "NOTE keep me" in working.read_text(encoding="utf-8")
