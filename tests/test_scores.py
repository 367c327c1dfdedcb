"""The real classifier on generated sounds: espeak-ng speech and a pure tone."""

from __future__ import annotations

import os
import shutil
import subprocess
from pathlib import Path

import numpy as np
import pytest

from captioner import media, packs
from captioner.features import Frontend, shift_level
from captioner.scores import compute_scores
from conftest import tone, write_wav


def _track(path: Path, pack: packs.LoadedPack, hop_ms: int = 480):
    info = media.probe(path)
    chunks = media.decode_chunks(path, info.choose_stream(None), sample_rate=16000)
    return compute_scores(chunks, pack.classifier, pack.manifest.frontend, hop_ms=hop_ms)


def _mean_score(track, pack: packs.LoadedPack, label: str) -> float:
    return float(track.scores[:, pack.labels.index(label)].mean())


@pytest.mark.skipif(
    shutil.which("espeak-ng") is None and not os.environ.get("CI"),
    reason="needs espeak-ng (Debian package espeak-ng)",
)
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


class _LevelMeter:
    """A stand-in classifier whose one score is the patch's mean log-mel value, squashed;
    records batch sizes."""

    def __init__(self) -> None:
        self.batches: list[int] = []

    def __call__(self, patches: np.ndarray) -> np.ndarray:
        self.batches.append(patches.shape[0])
        return (1.0 / (1.0 + np.exp(-patches.mean(axis=(1, 2)))))[:, None].astype(np.float32)


def test_level_spread_scores_are_the_mean_over_three_levels() -> None:
    frontend = Frontend()
    rng = np.random.default_rng(4)
    samples = rng.normal(0, 0.05, 16000 * 4).astype(np.float32)
    once, spread = _LevelMeter(), _LevelMeter()
    single = compute_scores([samples], once, frontend, hop_ms=480)
    mean = compute_scores([samples], spread, frontend, hop_ms=480, level_spread_db=6.0)
    assert sum(spread.batches) == 3 * sum(once.batches) == 3 * single.n_patches
    assert max(spread.batches) == max(once.batches)  # levels go one at a time, never as a triple batch
    # The expected value from the three versions of the patches, computed here independently.
    from captioner.features import PatchStream

    patches = PatchStream(frontend, 48).push(samples).patches
    levels = [shift_level(patches, gain, frontend.log_offset) for gain in (-6.0, 6.0)] + [patches]
    expected = np.mean([_LevelMeter()(p) for p in levels], axis=0)
    np.testing.assert_allclose(mean.scores, expected, atol=1e-6)
    assert not np.allclose(mean.scores, single.scores, atol=1e-4)  # the levels did differ
    np.testing.assert_array_equal(
        mean.energy_db, single.energy_db
    )  # level checks still use the signal as heard
