"""Decoding to the corpus format (16 kHz mono 16-bit PCM) and writing WAV files."""

from __future__ import annotations

import hashlib
import os
import subprocess
import tempfile
import wave
from pathlib import Path

import imageio_ffmpeg
import numpy as np

RATE = 16_000
MAX_SECONDS = 60.0  # longer recordings (music tracks) are cut here: enough for training patches


class DecodeError(Exception):
    """ffmpeg could not read a sound file."""


def decode_bytes(data: bytes, suffix: str, max_seconds: float = MAX_SECONDS) -> np.ndarray:
    """16 kHz mono int16 samples of an encoded sound file held in memory."""
    with tempfile.NamedTemporaryFile(suffix=suffix) as handle:
        handle.write(data)
        handle.flush()
        return decode_file(Path(handle.name), max_seconds)


def decode_file(path: Path, max_seconds: float = MAX_SECONDS) -> np.ndarray:
    command = [imageio_ffmpeg.get_ffmpeg_exe(), "-nostdin", "-v", "error", "-i", str(path)]
    command += ["-t", str(max_seconds), "-vn", "-ac", "1", "-ar", str(RATE), "-f", "s16le", "-"]
    result = subprocess.run(command, capture_output=True, check=False)
    if result.returncode != 0 or not result.stdout:
        raise DecodeError(result.stderr.decode(errors="replace").strip()[-200:] or "no audio")
    return np.frombuffer(result.stdout, dtype="<i2").copy()


def pcm_sha256(samples: np.ndarray) -> str:
    return hashlib.sha256(samples.astype("<i2").tobytes()).hexdigest()


def to_int16(signal: np.ndarray, peak: float = 0.9) -> np.ndarray:
    """Float signal scaled so that its peak is `peak` of full scale."""
    top = float(np.max(np.abs(signal))) if signal.size else 0.0
    scaled = signal * (peak / top) if top > 0 else signal
    out: np.ndarray = np.clip(np.round(scaled * 32767), -32768, 32767).astype(np.int16)
    return out


def write_wav(path: Path, samples: np.ndarray, rate: int = RATE) -> None:
    """Write through a temporary file, so an interrupted run never leaves half a clip."""
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_suffix(".tmp")
    with wave.open(str(tmp), "wb") as out:
        out.setnchannels(1)
        out.setsampwidth(2)
        out.setframerate(rate)
        out.writeframes(samples.astype("<i2").tobytes())
    os.replace(tmp, path)


def read_wav(path: Path) -> np.ndarray:
    with wave.open(str(path), "rb") as handle:
        return np.frombuffer(handle.readframes(handle.getnframes()), dtype="<i2").copy()
