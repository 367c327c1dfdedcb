"""The command line in-process through main(), plus one subprocess run on the demo video."""

from __future__ import annotations

import csv
import re
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
import webvtt

from captioner.cli import main
from conftest import tone, write_wav

DEMO = Path(__file__).resolve().parent.parent / "demo_media"


def _error_line(capsys: pytest.CaptureFixture[str]) -> str:
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1, err  # one clear line, no traceback
    return err[0]


def test_missing_input(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["caption", str(tmp_path / "nope.mp4"), "--quiet"]) == 2
    assert "nope.mp4: file not found" in _error_line(capsys)


@pytest.mark.parametrize("name", ["nope.mp4", "fake.mkv"])
def test_bad_input_is_reported_before_the_model_pack_is_fetched(
    tmp_path: Path, capsys: pytest.CaptureFixture[str], monkeypatch: pytest.MonkeyPatch, name: str
) -> None:
    # A typo in the input name must not start a download of the model pack.
    from captioner import packs

    fetched: list[str] = []
    monkeypatch.setattr(packs, "load_pack", lambda name, **_: fetched.append(name))
    if name == "fake.mkv":
        (tmp_path / name).write_bytes(b"\x00" * 1000)
    assert main(["caption", str(tmp_path / name), "--quiet"]) == 2
    assert name in _error_line(capsys)
    assert fetched == []


def test_not_media(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    fake = tmp_path / "fake.mkv"
    fake.write_bytes(b"\x00" * 1000)
    assert main(["caption", str(fake), "--quiet"]) == 2
    assert "fake.mkv: not a readable media file" in _error_line(capsys)


def test_unknown_style(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["caption", str(write_wav(tmp_path / "a.wav", tone(1.0))), "--style", "nope"]) == 2
    assert "nope: no such style" in _error_line(capsys)


def test_malformed_style_file(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    style = tmp_path / "house.yaml"
    style.write_text("layout: [unclosed\n")
    assert main(["caption", str(write_wav(tmp_path / "a.wav", tone(1.0))), "--style", str(style)]) == 2
    assert "house.yaml: malformed YAML" in _error_line(capsys)


def test_existing_output_is_not_overwritten(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    audio = write_wav(tmp_path / "a.wav", tone(1.0))
    edited = tmp_path / "a.sounds.vtt"  # the default output name beside a.wav
    edited.write_text("WEBVTT\n\n00:00.000 --> 00:01.000\n[hand edit]\n")
    assert main(["caption", str(audio), "--quiet"]) == 2
    assert "a.sounds.vtt: already exists" in _error_line(capsys)
    assert "[hand edit]" in edited.read_text()


def test_default_output_never_takes_the_dialogue_subtitle_name(tmp_path: Path, pack: object) -> None:
    audio = write_wav(tmp_path / "talk.wav", np.concatenate([np.zeros(32000), tone(2.0), np.zeros(32000)]))
    dialogue = tmp_path / "talk.vtt"
    dialogue.write_text("WEBVTT\n\n00:00.000 --> 00:01.000\nHello there.\n")
    assert main(["caption", str(audio), "--quiet", "--force"]) == 0
    assert dialogue.read_text().endswith("Hello there.\n")
    assert webvtt.read(str(tmp_path / "talk.sounds.vtt")).captions


def test_unwritable_output_folder(tmp_path: Path, capsys: pytest.CaptureFixture[str], pack: object) -> None:
    audio = write_wav(tmp_path / "a.wav", tone(1.0))
    assert main(["caption", str(audio), "-o", str(tmp_path / "no" / "such" / "dir.vtt"), "--quiet"]) == 2
    assert "does not exist" in _error_line(capsys)


def test_caption_writes_a_valid_track_and_sidecar(tmp_path: Path, pack: object) -> None:
    quiet = np.zeros(16000 * 2)
    audio = write_wav(tmp_path / "beeps.wav", np.concatenate([quiet, tone(3.0, 1000.0), quiet]))
    out, sidecar = tmp_path / "beeps.vtt", tmp_path / "beeps.json"
    assert main(["caption", str(audio), "-o", str(out), "--events-json", str(sidecar), "--quiet"]) == 0
    parsed = webvtt.read(str(out))
    assert len(parsed) >= 1 and "beep" in parsed.captions[0].text.lower()
    assert '"events"' in sidecar.read_text()
    assert (
        main(
            [
                "caption",
                str(audio),
                "-o",
                str(out),
                "--quiet",
                "--force",
                "--format",
                "srt",
                "-o",
                str(tmp_path / "b.srt"),
            ]
        )
        == 0
    )
    assert (tmp_path / "b.srt").read_text().startswith("1\n00:00:0")


def test_demo_video_yields_its_sounds_on_time(tmp_path: Path, pack: object) -> None:
    """Subprocess run of the real command on the bundled demo; expected sounds within 1 s."""
    out = tmp_path / "demo.vtt"
    subprocess.run(
        [sys.executable, "-m", "captioner", "caption", str(DEMO / "demo.mp4"), "-o", str(out), "--quiet"],
        check=True,
    )
    cues = [(c.start_in_seconds, c.end_in_seconds, c.text.lower()) for c in webvtt.read(str(out))]
    truth = list(csv.DictReader((DEMO / "truth.csv").open()))
    words = {
        "doorbell": "doorbell|bell|chime",
        "dog": "dog|bark",
        "telephone": "phone|ring",
        "music": "music",
        "smoke_alarm": "alarm|beep",
        "siren": "siren",
        "glass": "glass|clink|shatter",
    }
    import re

    found = set()
    for event in truth:
        onset, offset = float(event["onset"]), float(event["offset"])
        pattern = re.compile(rf"\b({words[event['concept']]})")
        # A cue counts when it names the sound and overlaps it widened by 1 s (cue-level collar).
        if any(
            pattern.search(text) and start <= offset + 1 and end >= onset - 1 for start, end, text in cues
        ):
            found.add(event["concept"])
    assert {"dog", "telephone", "music", "smoke_alarm"} <= found, (found, cues)


def test_an_arrow_in_the_file_name_cannot_break_the_track(tmp_path: Path, pack: object) -> None:
    # W3C WebVTT: a NOTE block must not contain "-->"; a name like "a--->b" must not sneak one in.
    quiet = np.zeros(16000 * 2)
    audio = write_wav(
        tmp_path / "a--->b.wav", np.concatenate([quiet, tone(3.0, 1000.0), quiet, tone(3.0, 1000.0), quiet])
    )
    out = tmp_path / "out.vtt"
    assert main(["caption", str(audio), "-o", str(out), "--quiet"]) == 0
    text = out.read_text()
    timing = re.compile(r"^\d{2}:\d{2}:\d{2}\.\d{3} --> \d{2}:\d{2}:\d{2}\.\d{3}")
    assert all(timing.match(line) for line in text.splitlines() if "-->" in line)
    recorded = [line for line in text.splitlines() if line.startswith("cue e")]
    assert len(webvtt.read(str(out)).captions) == len(recorded) >= 1


def test_a_patch_hop_that_does_not_fit_the_pack_is_refused_before_decoding(
    tmp_path: Path, capsys: pytest.CaptureFixture[str], pack: object
) -> None:
    style = tmp_path / "odd.yaml"
    style.write_text("detection:\n  patch_hop_ms: 485\n")
    audio = write_wav(tmp_path / "a.wav", tone(1.0))
    assert main(["caption", str(audio), "--style", str(style), "--quiet"]) == 2
    assert "detection.patch_hop_ms=485 is not a whole number of the model pack's 10 ms frames" in _error_line(
        capsys
    )
    assert not (tmp_path / "a.sounds.vtt").exists()


def test_output_problems_are_found_before_any_output_is_written(
    tmp_path: Path, capsys: pytest.CaptureFixture[str], pack: object
) -> None:
    audio = write_wav(tmp_path / "a.wav", tone(1.0))
    out = tmp_path / "a.vtt"
    assert (
        main(
            [
                "caption",
                str(audio),
                "-o",
                str(out),
                "--events-json",
                str(tmp_path / "nodir" / "a.json"),
                "--quiet",
            ]
        )
        == 2
    )
    assert "does not exist" in _error_line(capsys) and not out.exists()
    assert main(["caption", str(audio), "-o", str(out), "--events-json", str(out), "--quiet"]) == 2
    assert "is named for two outputs" in _error_line(capsys) and not out.exists()


def test_events_json_without_a_path_goes_beside_the_input(tmp_path: Path, pack: object) -> None:
    audio = write_wav(tmp_path / "a.wav", np.concatenate([np.zeros(32000), tone(2.0), np.zeros(32000)]))
    assert main(["caption", str(audio), "--events-json", "--quiet"]) == 0
    assert (tmp_path / "a.sounds.vtt").is_file() and '"events"' in (tmp_path / "a.sounds.json").read_text()


def test_a_reader_that_stops_early_is_no_error() -> None:
    # `captioner styles brackets | head -1`: the pipe's reader is gone before we write. Unix
    # convention (common practice): a program whose output pipe closes stops quietly.
    process = subprocess.Popen(
        [sys.executable, "-m", "captioner", "styles", "brackets"],
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
    )
    assert process.stdout is not None and process.stderr is not None
    process.stdout.close()  # before the interpreter has even imported captioner
    stderr = process.stderr.read().decode()
    assert process.wait(timeout=60) == 0
    assert "Traceback" not in stderr and "BrokenPipe" not in stderr
