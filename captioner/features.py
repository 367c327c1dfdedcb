"""Features: log-mel frames and fixed-size patches, as a model pack's frontend describes.

Computed with numpy alone, chunk by chunk, so memory does not grow with the input length.
The filterbank is the HTK-mel triangle bank without area normalisation (checked against
librosa in the tests).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True, slots=True)
class Frontend:
    """Log-mel parameters of a model pack (defaults: YAMNet's)."""

    sample_rate: int = 16000
    n_fft: int = 512
    win_length: int = 400
    hop_length: int = 160
    n_mels: int = 64
    fmin_hz: float = 125.0
    fmax_hz: float = 7500.0
    log_offset: float = 0.001
    patch_frames: int = 96

    def __post_init__(self) -> None:
        if not 0 < self.win_length <= self.n_fft:
            raise ValueError(f"win_length={self.win_length} must be in 1..n_fft={self.n_fft}")
        if self.hop_length <= 0 or self.n_mels <= 0 or self.patch_frames <= 0:
            raise ValueError("hop_length, n_mels and patch_frames must be > 0")
        if not 0 <= self.fmin_hz < self.fmax_hz <= self.sample_rate / 2:
            raise ValueError(
                f"fmin_hz={self.fmin_hz}, fmax_hz={self.fmax_hz} must satisfy 0 <= fmin < fmax <= "
                "sample_rate/2"
            )

    @property
    def frame_ms(self) -> float:
        """Milliseconds between successive log-mel frames."""
        return 1000.0 * self.hop_length / self.sample_rate


def hz_to_mel_htk(hz: np.ndarray | float) -> np.ndarray:
    """HTK mel scale: 2595 * log10(1 + f / 700).

    >>> round(float(hz_to_mel_htk(1000.0)), 3)
    999.986
    """
    return 2595.0 * np.log10(1.0 + np.asarray(hz, dtype=np.float64) / 700.0)


def mel_filterbank(frontend: Frontend) -> np.ndarray:
    """Triangular HTK-mel filters, shape (n_mels, n_fft // 2 + 1), peak value 1 (no area norm)."""
    fft_hz = np.linspace(0.0, frontend.sample_rate / 2, frontend.n_fft // 2 + 1)
    mel_edges = np.linspace(
        hz_to_mel_htk(frontend.fmin_hz), hz_to_mel_htk(frontend.fmax_hz), frontend.n_mels + 2
    )
    hz_edges = 700.0 * (10.0 ** (mel_edges / 2595.0) - 1.0)
    lower, centre, upper = hz_edges[:-2, None], hz_edges[1:-1, None], hz_edges[2:, None]
    rising = (fft_hz - lower) / (centre - lower)
    falling = (upper - fft_hz) / (upper - centre)
    return np.maximum(0.0, np.minimum(rising, falling)).astype(np.float32)


def _periodic_hann(length: int) -> np.ndarray:
    # The periodic Hann window, as STFT frontends (librosa, TF) use for analysis.
    return (0.5 - 0.5 * np.cos(2.0 * np.pi * np.arange(length) / length)).astype(np.float32)


def _framed(samples: np.ndarray, frontend: Frontend) -> np.ndarray:
    """Analysis frames, shape (n_frames, win_length); n_frames = 1 + (n - win) // hop (0 when too short)."""
    n_frames = (
        0
        if samples.size < frontend.win_length
        else 1 + (samples.size - frontend.win_length) // frontend.hop_length
    )
    starts = np.arange(n_frames) * frontend.hop_length
    frames: np.ndarray = samples[starts[:, None] + np.arange(frontend.win_length)].reshape(
        n_frames, frontend.win_length
    )
    return frames


def analyse(
    samples: np.ndarray, frontend: Frontend, filterbank: np.ndarray | None = None
) -> tuple[np.ndarray, np.ndarray]:
    """Log-mel frames (n_frames, n_mels) and their RMS levels in dBFS (n_frames,), no centering.

    Both come from the same framing, computed once.
    """
    filterbank = mel_filterbank(frontend) if filterbank is None else filterbank
    frames = _framed(samples, frontend)
    power = np.mean(np.square(frames, dtype=np.float64), axis=1)
    energy_db: np.ndarray = (10.0 * np.log10(power + 1e-10)).astype(np.float32)
    magnitude = np.abs(
        np.fft.rfft(frames * _periodic_hann(frontend.win_length), n=frontend.n_fft, axis=1)
    ).astype(np.float32)
    mel: np.ndarray = np.log(magnitude @ filterbank.T + frontend.log_offset).astype(np.float32)
    return mel, energy_db


def shift_level(log_mel_frames: np.ndarray, gain_db: float, log_offset: float) -> np.ndarray:
    """Log-mel frames of the same audio made `gain_db` louder, computed from the frames alone.

    A gain g scales every STFT magnitude, hence every mel energy, by g:
    log(g * (exp(L) - offset) + offset) is exactly what `analyse` would give for g * samples.

    >>> frames = np.log(np.array([[1.0, 100.0]]) + 0.001)  # mel energies 1 and 100
    >>> [round(float(v), 1) for v in np.exp(shift_level(frames, 20.0, 0.001))[0] - 0.001]  # 20 dB = 10x
    [10.0, 1000.0]
    """
    linear = np.maximum(np.exp(log_mel_frames, dtype=np.float32) - np.float32(log_offset), np.float32(0.0))
    shifted: np.ndarray = np.log(linear * np.float32(10.0 ** (gain_db / 20.0)) + np.float32(log_offset))
    return shifted


def log_mel(samples: np.ndarray, frontend: Frontend, filterbank: np.ndarray | None = None) -> np.ndarray:
    """Log-mel frames of mono float32 audio, shape (n_frames, n_mels), no centering."""
    return analyse(samples, frontend, filterbank)[0]


@dataclass(frozen=True, slots=True, eq=False)
class PatchBlock:
    """A run of consecutive patches and the frame energies that arrived with them.

    patches: (n_patches, patch_frames, n_mels) float32, patch i starting at frame
    first_patch + i * hop_frames. energy_db: (n_new_frames,) frame levels in dBFS.
    """

    patches: np.ndarray
    energy_db: np.ndarray


class PatchStream:
    """Turns audio chunks into patches of log-mel frames, keeping only the carry-over.

    Feed chunks with `push`; call `finish` at the end to pad a short input out to one patch
    (short inputs are padded, not rejected).
    """

    def __init__(self, frontend: Frontend, hop_frames: int) -> None:
        if hop_frames <= 0:
            raise ValueError(f"hop_frames={hop_frames} must be > 0")
        self.frontend = frontend
        self.hop_frames = hop_frames
        self._filterbank = mel_filterbank(frontend)
        self._samples = np.zeros(0, dtype=np.float32)
        self._frames = np.zeros((0, frontend.n_mels), dtype=np.float32)
        self.patches_emitted = 0

    def push(self, chunk: np.ndarray) -> PatchBlock:
        """Add samples; return the patches (and frame energies) that are now complete."""
        buffer = np.concatenate([self._samples, chunk.astype(np.float32, copy=False)])
        frames, energy = analyse(buffer, self.frontend, self._filterbank)
        consumed = frames.shape[0] * self.frontend.hop_length
        self._samples = buffer[consumed:]
        self._frames = np.concatenate([self._frames, frames])
        return PatchBlock(self._take_patches(), energy)

    def finish(self) -> PatchBlock:
        """Pad the tail so that a too-short input still yields one patch."""
        if self.patches_emitted > 0:
            return PatchBlock(
                np.zeros((0, self.frontend.patch_frames, self.frontend.n_mels), np.float32),
                np.zeros(0, np.float32),
            )
        missing = self.frontend.patch_frames - self._frames.shape[0]
        padding = np.full((missing, self.frontend.n_mels), np.log(self.frontend.log_offset), dtype=np.float32)
        self._frames = np.concatenate([self._frames, padding])
        return PatchBlock(self._take_patches(), np.zeros(0, np.float32))

    def _take_patches(self) -> np.ndarray:
        size, hop = self.frontend.patch_frames, self.hop_frames
        count = 0 if self._frames.shape[0] < size else 1 + (self._frames.shape[0] - size) // hop
        starts = np.arange(count) * hop
        patches = (
            self._frames[starts[:, None] + np.arange(size)]
            if count
            else np.zeros((0, size, self.frontend.n_mels), np.float32)
        )
        self._frames = self._frames[count * hop :]
        self.patches_emitted += count
        return patches
