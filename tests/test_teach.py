"""`captioner teach`: labelled clips of a user's own -> head file + pack manifest, and its errors."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from captioner import packs
from captioner.cli import main
from captioner.heads import load_heads
from conftest import write_wav

RATE = 16000


def _chirp(rng: np.random.Generator) -> np.ndarray:
    t = np.arange(int(RATE * rng.uniform(1.0, 1.6))) / RATE
    f0 = rng.uniform(800, 1200)
    return 0.3 * np.sin(2 * np.pi * (f0 * t + 900 * t**2))


def _rumble(rng: np.random.Generator) -> np.ndarray:
    noise = rng.normal(size=int(RATE * rng.uniform(1.0, 1.6)))
    return 0.2 * np.convolve(noise, np.ones(40) / 40, mode="same") * 6


def _corpus(root: Path, concepts: dict[str, int], *, other: int = 0) -> Path:
    rng = np.random.default_rng(11)
    makers = {"test_chirp": _chirp, "test_rumble": _rumble}
    for concept, count in concepts.items():
        (root / concept).mkdir(parents=True)
        for i in range(count):
            write_wav(root / concept / f"{i}.wav", makers.get(concept, _chirp)(rng))
    if other:
        (root / "_other").mkdir()
        for i in range(other):
            write_wav(root / "_other" / f"{i}.wav", 0.05 * rng.normal(size=RATE))
    return root


def test_teach_writes_heads_that_caption_can_use(
    tmp_path: Path, pack: packs.LoadedPack, capsys: pytest.CaptureFixture[str]
) -> None:
    source = _corpus(tmp_path / "clips", {"test_chirp": 6, "test_rumble": 6})
    out = tmp_path / "mine.heads.npz"
    assert main(["teach", str(source), "-o", str(out), "--folds", "3", "--quiet"]) == 0
    table = capsys.readouterr().out
    assert "test_chirp" in table and "AUC" in table
    heads = load_heads(out)
    assert heads.concepts == ("test_chirp", "test_rumble")
    assert heads.info["cross_validated"]["test_chirp"]["auc"] > 0.9
    manifest = tmp_path / "mine.pack.yaml"
    loaded = packs.load_pack(str(manifest), cache=packs.cache_root(), say=lambda m: None)
    assert loaded.heads is not None and "test_chirp" in loaded.heads.concepts
    assert "test_chirp" in loaded.vocabulary.concepts()
    # A chirp like the taught ones is captioned with the new concept's wording.
    rng = np.random.default_rng(99)
    clip = np.concatenate([np.zeros(RATE * 2), _chirp(rng), np.zeros(RATE * 2)])
    media = write_wav(tmp_path / "take.wav", clip)
    assert main(["caption", str(media), "--model", str(manifest), "-o", str(tmp_path / "take.vtt")]) == 0
    assert "[test chirp]" in (tmp_path / "take.vtt").read_text(encoding="utf-8")


@pytest.mark.parametrize(
    ("layout", "message"),
    [
        ({}, "no audio clips found"),
        ({"test_chirp": 4}, "only one concept"),
        ({"dog": 4, "test_chirp": 4}, "already in the vocabulary"),
        ({"test_chirp": 2, "test_rumble": 4}, "has 2 clip"),
    ],
)
def test_teach_bad_input_is_one_line(
    tmp_path: Path, layout: dict[str, int], message: str, capsys: pytest.CaptureFixture[str]
) -> None:
    source = tmp_path / "clips"
    source.mkdir()
    _corpus(source / "x", layout) if layout else None
    folder = source / "x" if layout else source
    assert main(["teach", str(folder), "-o", str(tmp_path / "h.heads.npz")]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and message in err[0] and "Traceback" not in err[0]
    assert not (tmp_path / "h.heads.npz").exists()


def test_teach_unreadable_clip_names_the_file(
    tmp_path: Path, pack: packs.LoadedPack, capsys: pytest.CaptureFixture[str]
) -> None:
    source = _corpus(tmp_path / "clips", {"test_chirp": 3, "test_rumble": 3})
    (source / "test_chirp" / "broken.wav").write_bytes(b"RIFF0000WAVEjunk")
    assert main(["teach", str(source), "-o", str(tmp_path / "h.heads.npz"), "--quiet"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "broken.wav" in err[0] and "cannot read this clip" in err[0]


def test_teach_csv_rows_are_checked(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    labels = tmp_path / "labels.csv"
    labels.write_text("file,onset,offset,concept\na.wav,2.0,1.0,test_chirp\n", encoding="utf-8")
    assert main(["teach", str(labels), "-o", str(tmp_path / "h.heads.npz")]) == 2
    err = capsys.readouterr().err
    assert "labels.csv:2" in err and "not after onset" in err
