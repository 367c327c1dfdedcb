"""Probing and decoding through ffmpeg, with generated media files."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from captioner import media
from captioner.errors import MediaError
from conftest import run_ffmpeg, tone, write_wav


def _decode(path: Path, index: int | None = None, chunk_seconds: float = 60.0) -> list[np.ndarray]:
    info = media.probe(path)
    return list(
        media.decode_chunks(
            path,
            info.choose_stream(index),
            sample_rate=16000,
            chunk_seconds=chunk_seconds,
            expected_ms=info.duration_ms,
        )
    )


def test_stereo_48k_is_downmixed_and_resampled(tmp_path: Path) -> None:
    left = tone(2.0, 440, 0.5, rate=48000)
    path = write_wav(tmp_path / "stereo.wav", np.stack([left, left], axis=1), rate=48000)
    samples = np.concatenate(_decode(path))
    assert abs(samples.size - 32000) <= 16
    # Each channel's RMS is 0.5/sqrt(2) = 0.354. ffmpeg's stereo downmix sums the channels at
    # -3 dB each (0.707), so equal channels come out at RMS 0.5; an average would give 0.354.
    rms = float(np.sqrt(np.mean(samples[1000:-1000] ** 2)))
    assert 0.35 <= rms <= 0.51
    spectrum = np.abs(np.fft.rfft(samples))
    assert np.argmax(spectrum) * 16000 / samples.size == pytest.approx(440, abs=1)


def test_a_colon_in_the_name_is_not_taken_for_a_protocol(tmp_path: Path) -> None:
    path = write_wav(tmp_path / "take1:final.wav", tone(1.0))
    assert np.concatenate(_decode(path)).size == 16000


def test_chunks_are_bounded(tmp_path: Path) -> None:
    path = write_wav(tmp_path / "long.wav", tone(5.0))
    chunks = _decode(path, chunk_seconds=1.0)
    assert [c.size for c in chunks] == [16000] * 5


def test_choose_audio_stream_of_a_video(tmp_path: Path) -> None:
    quiet = write_wav(tmp_path / "quiet.wav", np.zeros(16000))
    loud = write_wav(tmp_path / "loud.wav", tone(1.0, level=0.5))
    video = tmp_path / "two.mkv"
    run_ffmpeg(
        "-f",
        "lavfi",
        "-i",
        "color=c=black:s=64x64:d=1",
        "-i",
        str(quiet),
        "-i",
        str(loud),
        "-map",
        "0:v",
        "-map",
        "1:a",
        "-map",
        "2:a",
        "-c:v",
        "mpeg4",
        "-c:a",
        "flac",
        "-shortest",
        str(video),
    )
    info = media.probe(video)
    assert len(info.audio_streams) == 2
    assert np.abs(np.concatenate(_decode(video, 0))).max() < 0.01
    assert np.abs(np.concatenate(_decode(video, 1))).max() > 0.4
    with pytest.raises(MediaError, match="--audio-stream 2 does not exist"):
        info.choose_stream(2)


def test_video_without_audio_is_a_clear_error(tmp_path: Path) -> None:
    video = tmp_path / "silent.mp4"
    run_ffmpeg("-f", "lavfi", "-i", "color=c=black:s=64x64:d=1", "-c:v", "mpeg4", str(video))
    with pytest.raises(MediaError, match="no audio stream"):
        media.probe(video).choose_stream(None)


def test_missing_and_non_media_files(tmp_path: Path) -> None:
    with pytest.raises(MediaError, match="file not found"):
        media.probe(tmp_path / "nope.mp4")
    with pytest.raises(MediaError, match="is a folder.*captioner batch"):
        media.probe(tmp_path)
    text = tmp_path / "notes.mp4"
    text.write_text("this is not a video\n")
    with pytest.raises(MediaError, match="not a readable media file"):
        media.probe(text)


def test_truncated_video_is_a_clear_error(tmp_path: Path) -> None:
    source = write_wav(tmp_path / "a.wav", tone(2.0))
    video = tmp_path / "whole.mp4"
    run_ffmpeg(
        "-f",
        "lavfi",
        "-i",
        "color=c=black:s=64x64:d=2",
        "-i",
        str(source),
        "-c:v",
        "mpeg4",
        "-c:a",
        "aac",
        "-shortest",
        str(video),
    )
    broken = tmp_path / "cut.mp4"
    broken.write_bytes(video.read_bytes()[: video.stat().st_size // 3])
    with pytest.raises(MediaError):
        info = media.probe(broken)
        _decode(broken)
        assert info  # pragma: no cover


def _streamable_video(tmp_path: Path, seconds: int = 10) -> Path:
    """An MP4 with its index up front (+faststart), so a cut copy still opens."""
    source = write_wav(tmp_path / "long.wav", tone(float(seconds)))
    video = tmp_path / "whole.mp4"
    run_ffmpeg(
        "-f",
        "lavfi",
        "-i",
        f"color=c=black:s=64x64:d={seconds}",
        "-i",
        str(source),
        "-c:v",
        "mpeg4",
        "-c:a",
        "aac",
        "-movflags",
        "+faststart",
        "-shortest",
        str(video),
    )
    return video


def test_a_file_that_stops_early_is_reported_as_truncated(tmp_path: Path) -> None:
    video = _streamable_video(tmp_path)
    cut = tmp_path / "cut.mp4"
    cut.write_bytes(video.read_bytes()[: video.stat().st_size // 2])
    with pytest.raises(MediaError, match=r"truncated or damaged: only \d+\.\d s of its 10\.0 s") as caught:
        _decode(cut)
    assert "@ 0x" not in str(caught.value)  # ffmpeg's internal tags are not shown


def test_damaged_stretches_warn_but_still_decode(tmp_path: Path) -> None:
    video = _streamable_video(tmp_path)
    data = bytearray(video.read_bytes())
    middle = len(data) // 2
    data[middle : middle + 3000] = bytes(3000)  # zero out part of the audio data
    damaged = tmp_path / "damaged.mp4"
    damaged.write_bytes(bytes(data))
    with pytest.warns(UserWarning, match="decoder error"):
        samples = np.concatenate(_decode(damaged))
    assert samples.size >= 0.9 * 10 * 16000


def test_zero_length_audio_is_a_clear_error(tmp_path: Path) -> None:
    path = write_wav(tmp_path / "empty.wav", np.zeros(0))
    with pytest.raises(MediaError, match="empty|not a readable"):
        _decode(path)
