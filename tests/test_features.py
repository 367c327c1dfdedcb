"""Log-mel frontend, checked against librosa (the PyPI reference implementation)."""

from __future__ import annotations

import librosa
import numpy as np
import pytest

from captioner.features import Frontend, PatchStream, log_mel, mel_filterbank, shift_level


def test_filterbank_matches_librosa_htk_without_norm() -> None:
    frontend = Frontend()
    # Reference: librosa.filters.mel with htk=True, norm=None (YAMNet's frontend definition).
    expected = librosa.filters.mel(
        sr=16000, n_fft=512, n_mels=64, fmin=125.0, fmax=7500.0, htk=True, norm=None
    )
    np.testing.assert_allclose(mel_filterbank(frontend), expected, atol=1e-5)


def test_log_mel_matches_librosa_stft() -> None:
    frontend = Frontend()
    rng = np.random.default_rng(1)
    samples = rng.normal(0, 0.1, 16000).astype(np.float32)
    ours = log_mel(samples, frontend)
    # librosa centres a 400-sample window inside the 512-point frame, which only shifts the
    # analysed samples by 56; feed it the shifted signal so both see the same samples.
    padded = np.concatenate([np.zeros(56, np.float32), samples, np.zeros(56, np.float32)])
    spectrum = np.abs(
        librosa.stft(padded, n_fft=512, hop_length=160, win_length=400, window="hann", center=False)
    )
    reference = np.log(
        librosa.filters.mel(sr=16000, n_fft=512, n_mels=64, fmin=125.0, fmax=7500.0, htk=True, norm=None)
        @ spectrum
        + 0.001
    ).T
    n = min(len(ours), len(reference))
    assert n >= 97  # 1 + (16000 - 400) // 160
    np.testing.assert_allclose(ours[:n], reference[:n], atol=2e-3)


def test_streaming_patches_equal_one_shot() -> None:
    frontend = Frontend()
    rng = np.random.default_rng(2)
    samples = rng.normal(0, 0.1, 16000 * 5).astype(np.float32)
    whole = PatchStream(frontend, hop_frames=48).push(samples).patches
    stream = PatchStream(frontend, hop_frames=48)
    pieces = [stream.push(part).patches for part in np.array_split(samples, [3333, 20000, 20001, 51000])]
    np.testing.assert_allclose(np.concatenate(pieces), whole, atol=1e-5)
    assert whole.shape == (1 + (498 - 96) // 48, 96, 64)


def test_short_input_is_padded_to_one_patch() -> None:
    stream = PatchStream(Frontend(), hop_frames=48)
    first = stream.push(np.full(4000, 0.1, np.float32))  # 0.25 s, less than a 0.96 s patch
    tail = stream.finish()
    assert first.patches.shape[0] == 0
    assert tail.patches.shape == (1, 96, 64)


@pytest.mark.parametrize("bad", [dict(win_length=600), dict(fmax_hz=9000.0), dict(hop_length=0)])
def test_frontend_rejects_bad_parameters(bad: dict) -> None:
    with pytest.raises(ValueError):
        Frontend(**bad)


@pytest.mark.parametrize("gain_db", [-6.0, 6.0, 20.0])
def test_level_shift_equals_librosa_log_mel_of_the_scaled_signal(gain_db: float) -> None:
    # Reference: librosa's magnitude STFT and HTK mel bank on the samples times the gain
    # (a gain scales every STFT magnitude linearly, so the shifted frames must match).
    frontend = Frontend()
    rng = np.random.default_rng(3)
    samples = (rng.normal(0, 0.05, 16000) * np.linspace(0.0, 1.0, 16000)).astype(
        np.float32
    )  # quiet start: frames near the log floor
    scaled = samples * np.float32(10.0 ** (gain_db / 20.0))
    padded = np.concatenate([np.zeros(56, np.float32), scaled, np.zeros(56, np.float32)])
    spectrum = np.abs(
        librosa.stft(padded, n_fft=512, hop_length=160, win_length=400, window="hann", center=False)
    )
    reference = np.log(
        librosa.filters.mel(sr=16000, n_fft=512, n_mels=64, fmin=125.0, fmax=7500.0, htk=True, norm=None)
        @ spectrum
        + 0.001
    ).T
    shifted = shift_level(log_mel(samples, frontend), gain_db, frontend.log_offset)
    n = min(len(shifted), len(reference))
    np.testing.assert_allclose(shifted[:n], reference[:n], atol=5e-3)
    assert not np.allclose(
        shifted, log_mel(samples, frontend), atol=0.1
    )  # the shift really changes the frames
