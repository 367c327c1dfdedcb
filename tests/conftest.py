"""Shared fixtures: generated audio/video files and the real model pack (installed on first use)."""

from __future__ import annotations

import subprocess
import wave
from pathlib import Path

import numpy as np
import pytest

from captioner import media, packs

RATE = 16000


def write_wav(path: Path, samples: np.ndarray, rate: int = RATE) -> Path:
    """Write mono or (n, channels) float audio in [-1, 1] as 16-bit PCM WAV."""
    data = np.asarray(samples, dtype=np.float64)
    channels = 1 if data.ndim == 1 else data.shape[1]
    pcm = (np.clip(data, -1, 1) * 32767).astype("<i2")
    with wave.open(str(path), "wb") as handle:
        handle.setnchannels(channels)
        handle.setsampwidth(2)
        handle.setframerate(rate)
        handle.writeframes(pcm.tobytes())
    return path


def tone(seconds: float, hz: float = 1000.0, level: float = 0.3, rate: int = RATE) -> np.ndarray:
    t = np.arange(int(seconds * rate)) / rate
    return level * np.sin(2 * np.pi * hz * t)


def run_ffmpeg(*args: str) -> None:
    subprocess.run([media.ffmpeg_executable(), "-v", "error", "-y", "-nostdin", *args], check=True)


@pytest.fixture(scope="session")
def pack() -> packs.LoadedPack:
    """The default model pack from the user cache (downloaded once if missing)."""
    return packs.load_pack(packs.DEFAULT_PACK, cache=packs.cache_root(), say=lambda m: None)


@pytest.fixture
def tone_wav(tmp_path: Path) -> Path:
    return write_wav(tmp_path / "tone.wav", tone(3.0))
