"""The real classifier on generated sounds: espeak-ng speech and a pure tone."""

from __future__ import annotations

import os
import shutil
import subprocess
from pathlib import Path

import numpy as np
import pytest

from captioner import media, packs
from captioner.scores import compute_scores
from conftest import tone, write_wav


def _track(path: Path, pack: packs.LoadedPack, hop_ms: int = 480):
    info = media.probe(path)
    chunks = media.decode_chunks(path, info.choose_stream(None), sample_rate=16000)
    return compute_scores(chunks, pack.classifier, pack.manifest.frontend, hop_ms=hop_ms)


def _mean_score(track, pack: packs.LoadedPack, label: str) -> float:
    return float(track.scores[:, pack.labels.index(label)].mean())


@pytest.mark.skipif(shutil.which("espeak-ng") is None and not os.environ.get("CI"), reason="needs espeak-ng (Debian package espeak-ng)")
def test_synthetic_speech_scores_as_speech(pack: packs.LoadedPack, tmp_path: Path) -> None:
    speech = tmp_path / "speech.wav"
    text = "The kettle is on, and the post has just arrived at the front door of the flat."
    subprocess.run(["espeak-ng", "-v", "en-us", "-s", "150", "-w", str(speech), text], check=True)
    track = _track(speech, pack)
    top = pack.labels[int(np.argmax(track.scores.mean(axis=0)))]
    assert top in {"Speech", "Narration, monologue", "Speech synthesizer"}
    assert float(track.scores[:, pack.labels.index("Speech")].max()) > 0.5


def test_pure_tone_scores_as_a_beep_not_speech(pack: packs.LoadedPack, tmp_path: Path) -> None:
    track = _track(write_wav(tmp_path / "tone.wav", tone(3.0, 1000.0)), pack)
    top = pack.labels[int(np.argmax(track.scores.mean(axis=0)))]
    assert top in {"Beep, bleep", "Sine wave", "Tone"}
    assert _mean_score(track, pack, "Speech") < 0.1


def test_track_shape_timing_and_padding(pack: packs.LoadedPack, tmp_path: Path) -> None:
    track = _track(write_wav(tmp_path / "short.wav", tone(0.3)), pack)
    assert track.scores.shape == (1, 521)  # shorter than a patch: padded to one
    longer = _track(write_wav(tmp_path / "ten.wav", tone(10.0)), pack, hop_ms=480)
    assert longer.n_patches == 1 + (998 - 96) // 48
    assert longer.patch_ms == 960 and longer.duration_ms == 10000
    assert ((longer.scores >= 0) & (longer.scores <= 1)).all()
