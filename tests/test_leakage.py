"""The leakage check finds a re-encoded, trimmed, gain-changed copy and leaves other sounds alone.

Chromaprint (Debian libchromaprint-tools, `fpcalc`) is the acoustic fingerprint the project's
corpus check is built on; these tests skip where it is not installed.
"""

from __future__ import annotations

import shutil
import subprocess

import imageio_ffmpeg
import numpy as np
import pytest

from training.audio import RATE, decode_bytes, pcm_sha256, to_int16
from training.leakage import FingerprintIndex, best_alignment, checksum_matches, fingerprint, is_match

needs_fpcalc = pytest.mark.skipif(
    shutil.which("fpcalc") is None, reason="fpcalc (libchromaprint-tools) not installed"
)


def _event_sound(seed: int, seconds: float = 3.0) -> np.ndarray:
    """A made-up sound effect: random chirps and noise bursts, different for every seed."""
    rng = np.random.default_rng(seed)
    t = np.arange(int(seconds * RATE)) / RATE
    out = np.zeros_like(t)
    for _ in range(12):
        start, length = rng.uniform(0, seconds - 0.3), rng.uniform(0.08, 0.3)
        f0, f1 = rng.uniform(200, 3000, size=2)
        window = (t >= start) & (t < start + length)
        local = t[window] - start
        phase = 2 * np.pi * (f0 * local + (f1 - f0) * local**2 / (2 * length))
        out[window] += np.sin(phase) * np.exp(-local / length * 3) * rng.uniform(0.3, 1.0)
        if rng.random() < 0.4:
            out[window] += rng.standard_normal(window.sum()) * 0.2 * np.exp(-local / 0.05)
    return to_int16(out)


def _reencode(samples: np.ndarray, fmt: str, rate: int) -> np.ndarray:
    """Encode with ffmpeg (lossy), then decode the way the corpus does."""
    ffmpeg = imageio_ffmpeg.get_ffmpeg_exe()
    command = [ffmpeg, "-v", "error", "-f", "s16le", "-ar", str(RATE), "-ac", "1", "-i", "-"]
    command += ["-ar", str(rate), "-ac", "2", "-f", fmt, "-"]
    encoded = subprocess.run(
        command, input=samples.astype("<i2").tobytes(), capture_output=True, check=True
    ).stdout
    return decode_bytes(encoded, f".{fmt}")


def _planted_copy(original: np.ndarray, fmt: str) -> np.ndarray:
    """Cut 0.37 s from the start and 0.21 s from the end, 7 dB quieter, lossy re-encoded."""
    cut = original[int(0.37 * RATE) : len(original) - int(0.21 * RATE)].astype(np.float64)
    quieter = np.round(cut * 10 ** (-7 / 20)).astype(np.int16)
    return _reencode(quieter, fmt, 44_100 if fmt == "mp3" else 22_050)


@needs_fpcalc
@pytest.mark.parametrize("fmt", ["ogg", "mp3"])
def test_planted_duplicate_is_found(fmt: str) -> None:
    excluded = [_event_sound(seed) for seed in (1, 2, 3, 4)]
    index = FingerprintIndex([f"excluded/{n}" for n in range(4)], [fingerprint(s) for s in excluded])
    copy = _planted_copy(excluded[2], fmt)
    assert pcm_sha256(copy) != pcm_sha256(excluded[2])  # the checksums cannot see it
    found = index.matches(fingerprint(copy))
    assert [name for name, _ in found] == ["excluded/2"]


@needs_fpcalc
def test_clip_inside_a_longer_mixture_is_found() -> None:
    # A development clip is a soundscape: the source sound sits among other sounds, 10 dB
    # above a noise floor. The match must hold for that sub-segment.
    source = _event_sound(7).astype(np.float64)
    rng = np.random.default_rng(0)
    scene = rng.standard_normal(8 * RATE) * np.sqrt(np.mean(source**2)) * 10 ** (-10 / 20)
    scene[: 2 * RATE] += _event_sound(8, 2.0)
    scene[3 * RATE : 3 * RATE + len(source)] += source
    index = FingerprintIndex(["dev:scene"], [fingerprint(to_int16(scene))])
    assert [name for name, _ in index.matches(fingerprint(_reencode(to_int16(source), "ogg", 22_050)))] == [
        "dev:scene"
    ]


@needs_fpcalc
def test_unrelated_sounds_are_not_flagged() -> None:
    excluded = [_event_sound(seed) for seed in range(10, 20)]
    index = FingerprintIndex([str(n) for n in range(10)], [fingerprint(s) for s in excluded])
    for seed in range(30, 36):
        query = fingerprint(_reencode(_event_sound(seed), "ogg", 22_050))
        assert index.matches(query) == []
        closest = min(
            (best_alignment(query, fingerprint(s)) for s in excluded[:3]), key=lambda a: a.ber if a else 1
        )
        assert closest is None or not is_match(closest)


def test_checksums_name_the_matching_file() -> None:
    file_index, audio_index = {"f1": "pkg/a.ogg"}, {"a1": "pkg/b.wav"}
    assert checksum_matches("f1", "zz", file_index, audio_index) == ("file checksum", "pkg/a.ogg")
    assert checksum_matches("zz", "a1", file_index, audio_index) == ("audio checksum", "pkg/b.wav")
    assert checksum_matches("zz", "zz", file_index, audio_index) is None
