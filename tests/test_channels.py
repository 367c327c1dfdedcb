"""Multichannel input: the fold's gains per channel, polarity-inverted stereo, and a 5.1 music
bed in anti-phase surrounds (which ffmpeg's own mono mix cancels to silence)."""

from __future__ import annotations

import warnings
from pathlib import Path

import numpy as np
import pytest

from captioner import channels, media, pipeline
from captioner.style import load_style
from conftest import run_ffmpeg, tone, write_wav

RATE = 48000
_LAYOUT_51 = ("FL", "FR", "FC", "LFE", "BL", "BR")


def _rms(samples: np.ndarray) -> float:
    return float(np.sqrt(np.mean(samples[1600:-1600] ** 2)))


def _decode(path: Path) -> np.ndarray:
    info = media.probe(path)
    return np.concatenate(list(media.decode_chunks(path, info.choose_stream(None), sample_rate=16000)))


def _51_wav(path: Path, columns: list[np.ndarray]) -> Path:
    """A 5.1 WAV (FL FR FC LFE BL BR), tagged as 5.1 by ffmpeg."""
    plain = write_wav(path.with_suffix(".raw.wav"), np.stack(columns, axis=1), rate=RATE)
    run_ffmpeg("-i", str(plain), "-af", "aformat=channel_layouts=5.1", "-c:a", "pcm_s16le", str(path))
    return path


# ITU-R BS.775 stereo fold (centre, surrounds -3 dB into L/R; from memory), LFE at -6 dB (common
# practice), then L and R at -3 dB into mono: the gain each 5.1 channel reaches the mono mix with.
EXPECTED_GAIN = {"FL": 0.7071, "FR": 0.7071, "FC": 1.0, "LFE": 0.5, "BL": 0.5, "BR": 0.5}


@pytest.mark.parametrize("channel", _LAYOUT_51)
def test_each_51_channel_reaches_the_mix_at_its_downmix_gain(tmp_path: Path, channel: str) -> None:
    signal = tone(1.0, 100.0 if channel == "LFE" else 440.0, 0.4, rate=RATE)
    columns = [signal if name == channel else np.zeros_like(signal) for name in _LAYOUT_51]
    path = _51_wav(tmp_path / "one.wav", columns)
    assert media.probe(path).choose_stream(None).channels == "5.1"
    gain = _rms(_decode(path)) / _rms(signal)
    assert gain == pytest.approx(EXPECTED_GAIN[channel], rel=0.03)


def test_inverted_stereo_is_noticed_and_analysed_from_the_difference(tmp_path: Path) -> None:
    left = tone(2.0, 440.0, 0.3, rate=RATE)
    path = write_wav(tmp_path / "archive transfer.wav", np.stack([left, -left], axis=1), rate=RATE)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        samples = _decode(path)
    messages = [str(w.message) for w in caught if issubclass(w.category, UserWarning)]
    assert len(messages) == 1 and "archive transfer.wav" in messages[0] and "inverted" in messages[0]
    # The difference of R = -L is what the mix would have been in phase: 0.707 (L + L).
    assert _rms(samples) == pytest.approx(2 * 0.7071 * _rms(left), rel=0.03)


def test_ordinary_stereo_is_folded_without_a_warning(tmp_path: Path) -> None:
    rng = np.random.default_rng(3)
    left, right = rng.normal(0, 0.1, 32000), rng.normal(0, 0.1, 32000)  # uncorrelated: half cancels
    path = write_wav(tmp_path / "wide.wav", np.stack([left, right], axis=1), rate=16000)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        samples = _decode(path)
    assert np.allclose(samples[:1000], 0.7071 * (left[:1000] + right[:1000]), atol=2e-3)


def test_fold_switches_only_when_the_mix_cancels() -> None:
    mid = np.full(1600, 0.1, np.float32)
    assert not channels.fold(np.stack([mid, 0.9 * mid], axis=1).reshape(-1)).cancelled  # mid power 55%
    assert channels.fold(np.stack([0.2 * mid, mid], axis=1).reshape(-1)).cancelled  # mid power 4%
    silent = np.zeros(3200, np.float32)
    assert not channels.fold(silent).cancelled  # silence is not cancellation


def test_layouts_come_from_ffmpeg_and_unknown_ones_fall_back() -> None:
    assert channels.standard_layouts()["5.1(side)"] == ("FL", "FR", "FC", "LFE", "SL", "SR")
    assert channels.mid_side_pan("3 channels") is None


def _music(seconds: float) -> np.ndarray:
    """A keyboard-like tune over chords (struck partials with decays), 48 kHz."""
    t_note = np.arange(int(0.75 * RATE)) / RATE
    out = np.zeros(int(seconds * RATE))
    chords = [(261.6, 329.6, 392.0), (220.0, 261.6, 329.6), (174.6, 220.0, 261.6), (196.0, 246.9, 293.7)]
    for step in range(int(seconds / 0.5)):
        notes = chords[(step // 2) % 4] + ((523.3, 587.3, 659.3, 587.3)[step % 4],)
        note = sum(
            np.sin(2 * np.pi * f * k * t_note) * np.exp(-t_note / (0.4 / k)) / k
            for f in notes
            for k in (1, 2, 3)
        )
        start = int(step * 0.5 * RATE)
        end = min(out.size, start + note.size)
        out[start:end] += note[: end - start] * np.minimum(1, t_note[: end - start] / 0.003)
    return 0.3 * out / np.abs(out).max()


def test_a_51_music_bed_in_antiphase_surrounds_is_captioned(tmp_path: Path, pack: object) -> None:
    bed = _music(8.0)
    quiet = np.zeros_like(bed)
    path = _51_wav(tmp_path / "bed.wav", [quiet, quiet, quiet, quiet, bed, -bed])
    # ffmpeg's own mono mix of this file is silence (the measured cause of the lost bed):
    run_ffmpeg("-i", str(path), "-ac", "1", "-c:a", "pcm_s16le", str(tmp_path / "auto.wav"))
    assert _rms(_decode(tmp_path / "auto.wav")) < 1e-3
    with warnings.catch_warnings(record=True):
        warnings.simplefilter("always")
        result = pipeline.caption_file(path, pack, load_style("brackets"))  # type: ignore[arg-type]
    assert any("music" in cue.text for cue in result.cues), [c.text for c in result.cues]
