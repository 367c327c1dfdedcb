"""Decoded audio sits on the player's clock: late streams, edit lists, codec delay, MPEG-TS start
times. Each case is a file built with ffmpeg, and the oracle is the time ffmpeg itself reports
for the same sound: its `silencedetect` filter, run with every stream of the file mapped, so
ffmpeg places the audio on the timeline the way it would for a player."""

from __future__ import annotations

import re
import subprocess
from pathlib import Path

import numpy as np
import pytest

from captioner import media, pipeline
from captioner.style import load_style
from conftest import run_ffmpeg, tone, write_wav

RATE = 16000
TOLERANCE_S = 0.050  # the bound: within 50 ms of what ffmpeg reports


def _source(tmp_path: Path) -> Path:
    """3 s of audio: silence, a 1 kHz burst from 1.0 s to 1.5 s, silence."""
    samples = np.zeros(3 * 48000)
    samples[48000:72000] = tone(0.5, 1000.0, 0.5, rate=48000)
    return write_wav(tmp_path / "source.wav", samples, rate=48000)


def _video(
    tmp_path: Path, name: str, audio_args: list[str], out_args: list[str], vcodec: str = "mpeg4"
) -> Path:
    path = tmp_path / name
    run_ffmpeg(
        *("-f", "lavfi", "-i", "color=c=black:s=64x64:r=25:d=6"),
        *audio_args,
        *("-map", "0:v", "-map", "1:a", "-c:v", vcodec, "-t", "6"),
        *out_args,
        str(path),
    )
    return path


def ffmpeg_onset_s(path: Path, audio_index: int = 0) -> float:
    """When ffmpeg says the first sound of the audio stream begins (silencedetect's silence_end)."""
    text = subprocess.run(
        [
            media.ffmpeg_executable(),
            *("-hide_banner", "-nostdin", "-i", str(path), "-map", "0:v?", "-map", f"0:a:{audio_index}"),
            *("-af", "silencedetect=n=-30dB:d=0.2", "-f", "null", "-"),
        ],
        capture_output=True,
        text=True,
        check=True,
    ).stderr
    match = re.search(r"silence_end: (-?[\d.]+)", text)
    assert match, text
    return float(match.group(1))


def decoded(path: Path, stream: int | str | None = None) -> np.ndarray:
    info = media.probe(path)
    return np.concatenate(
        list(
            media.decode_chunks(
                path, info.choose_stream(stream), sample_rate=RATE, expected_ms=info.duration_ms
            )
        )
    )


def our_onset_s(samples: np.ndarray) -> float:
    """First sample above -30 dBFS peak (silencedetect's threshold), in seconds."""
    loud = np.flatnonzero(np.abs(samples) > 10 ** (-30 / 20))
    assert loud.size, "no sound decoded"
    return float(loud[0] / RATE)


CASES = {
    # name: (audio input options, output options, video codec, expected onset on the player's clock)
    "late audio in mp4 (edit list with an empty edit)": (
        "late.mp4",
        ["-itsoffset", "2.98"],
        ["-c:a", "aac"],
        "mpeg4",
        3.98,
    ),
    "late audio in mkv (block timestamps)": (
        "late.mkv",
        ["-itsoffset", "2.98"],
        ["-c:a", "aac"],
        "mpeg4",
        3.98,
    ),
    "edit list trimming the audio's first 0.6 s": (
        "trim.mp4",
        ["-itsoffset", "-0.6"],
        ["-c:a", "aac"],
        "mpeg4",
        0.40,
    ),
    "opus codec delay in webm": ("late.webm", ["-itsoffset", "0.7"], ["-c:a", "libopus"], "libvpx", 1.70),
    "MPEG-TS starting at 30000 s, audio 1.5 s after video": (
        "big.ts",
        ["-itsoffset", "1.5"],
        ["-c:a", "mp2", "-output_ts_offset", "30000"],
        "mpeg2video",
        2.50,
    ),
}


@pytest.mark.parametrize("case", sorted(CASES))
def test_decoded_sound_starts_when_ffmpeg_says_it_plays(tmp_path: Path, case: str) -> None:
    name, offset, out, vcodec, expected = CASES[case]
    path = _video(tmp_path, name, [*offset, "-i", str(_source(tmp_path))], out, vcodec)
    reported = ffmpeg_onset_s(path)
    ours = our_onset_s(decoded(path))
    assert abs(ours - reported) <= TOLERANCE_S, (case, ours, reported)
    # And the case is the one intended: the burst plays where the offset puts it.
    assert reported == pytest.approx(expected, abs=0.1)


def test_a_stream_cut_keeps_the_edit_list_timing(tmp_path: Path) -> None:
    """`-ss` with stream copy writes an edit list that starts the presentation mid-stream."""
    whole = _video(
        tmp_path, "whole.mp4", ["-itsoffset", "1.0", "-i", str(_source(tmp_path))], ["-c:a", "aac"], "libx264"
    )
    cut = tmp_path / "cut.mp4"
    run_ffmpeg("-ss", "1.3", "-i", str(whole), "-c", "copy", str(cut))
    reported = ffmpeg_onset_s(cut)
    assert reported == pytest.approx(0.7, abs=0.1)
    assert abs(our_onset_s(decoded(cut)) - reported) <= TOLERANCE_S


def test_probe_reports_the_stream_offset_and_container_start(tmp_path: Path) -> None:
    source = [*("-itsoffset", "1.5", "-i", str(_source(tmp_path)))]
    ts = _video(tmp_path, "big.ts", source, ["-c:a", "mp2", "-output_ts_offset", "30000"], "mpeg2video")
    info = media.probe(ts)
    assert info.start_s > 29999  # the player's zero is the container start, not 0
    stream = info.choose_stream(None)
    assert stream.start_ms == pytest.approx(1500, abs=30) and stream.rebased


def test_a_late_stream_is_captioned_on_the_players_clock(tmp_path: Path, pack: object) -> None:
    """The issue's case: a sound 2.98 s into a late stream plays, and is captioned, at ~5 s."""
    samples = np.zeros(4 * 16000)
    samples[2 * 16000 : 4 * 16000] = tone(2.0, 1000.0, 0.3)
    source = write_wav(tmp_path / "beep.wav", samples)
    path = _video(tmp_path, "delayed.mp4", ["-itsoffset", "2.98", "-i", str(source)], ["-c:a", "aac"])
    reported = ffmpeg_onset_s(path)
    assert reported == pytest.approx(4.98, abs=0.05)
    result = pipeline.caption_file(path, pack, load_style("brackets"))  # type: ignore[arg-type]
    assert result.cues, "the beep should be captioned"
    # Cues start on a patch boundary (0.48 s hops of 0.96 s patches), so within one patch of the sound.
    assert abs(result.cues[0].start_ms / 1000 - reported) <= 0.96
    assert abs(our_onset_s(decoded(path)) - reported) <= TOLERANCE_S


def test_a_ts_timestamp_jump_is_not_decoded_as_hours_of_silence(tmp_path: Path) -> None:
    """Two TS recordings joined end to end (a splice): their clocks jump by 30000 s."""
    source = [*("-i", str(_source(tmp_path)))]
    first = _video(
        tmp_path, "a.ts", source, ["-c:a", "mp2", "-output_ts_offset", "30000", "-t", "3"], "mpeg2video"
    )
    second = _video(
        tmp_path, "b.ts", source, ["-c:a", "mp2", "-output_ts_offset", "60000", "-t", "3"], "mpeg2video"
    )
    joined = tmp_path / "joined.ts"
    joined.write_bytes(first.read_bytes() + second.read_bytes())
    samples = decoded(joined)
    assert samples.size / RATE == pytest.approx(6.0, abs=0.2)
    # The second burst plays 3 s after the first, as ffmpeg has it with every stream mapped.
    second_burst = our_onset_s(samples[int(2.0 * RATE) :]) + 2.0
    assert second_burst == pytest.approx(ffmpeg_onset_s(joined) + 3.0, abs=TOLERANCE_S)
