"""The vocabulary covers every class of the pack exactly once, and never captions speech."""

from __future__ import annotations

from collections import Counter
from pathlib import Path

import pytest
import yaml

from captioner import packs
from captioner.errors import PackError
from captioner.vocabulary import Kind, load_vocabulary

VOCABULARY = Path(packs.__file__).parent / "data" / "yamnet_vocabulary.yaml"


def test_every_label_is_mapped_exactly_once(pack: packs.LoadedPack) -> None:
    data = yaml.safe_load(VOCABULARY.read_text(encoding="utf-8"))
    mapped = Counter(label for spec in data.values() for label in spec["classes"])
    assert set(mapped) == set(pack.labels)
    assert max(mapped.values()) == 1
    assert len(pack.vocabulary.entries) == 521


def test_speech_classes_are_never_captioned(pack: packs.LoadedPack) -> None:
    kinds = {e.label: e.kind for e in pack.vocabulary.entries}
    for label in ("Speech", "Conversation", "Narration, monologue", "Child speech, kid speaking"):
        assert kinds[label] is Kind.SPEECH


def test_safety_sounds_rank_highest(pack: packs.LoadedPack) -> None:
    priority = {e.label: e.priority for e in pack.vocabulary.entries}
    for label in ("Smoke detector, smoke alarm", "Fire alarm", "Siren"):
        assert priority[label] == 5
    assert priority["Doorbell"] >= 4 and priority["Rain"] <= 2


def test_wording_has_both_conventions(pack: packs.LoadedPack) -> None:
    bark = next(e for e in pack.vocabulary.entries if e.label == "Bark")
    assert bark.phrase.endswith("ing") and bark.phrase == bark.phrase.lower()
    assert bark.phrase_present and not bark.phrase_present.endswith("ing")


def test_duplicate_and_missing_labels_are_rejected(tmp_path: Path) -> None:
    twice = tmp_path / "twice.yaml"
    twice.write_text(
        "a: {kind: transient, priority: 3, classes: {Bark: [x, y]}}\nb: {kind: transient, priority: 3, classes: {Bark: [x, y]}}\n"
    )
    with pytest.raises(PackError, match="mapped twice"):
        load_vocabulary(twice, ("Bark",))
    with pytest.raises(PackError, match="unmapped"):
        load_vocabulary(_one(tmp_path), ("Bark", "Meow"))


def _one(tmp_path: Path) -> Path:
    path = tmp_path / "one.yaml"
    path.write_text("dog: {kind: transient, priority: 3, classes: {Bark: [dog barking, dog barks]}}\n")
    return path
