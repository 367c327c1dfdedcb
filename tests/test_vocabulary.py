"""The vocabulary covers every class of the pack exactly once, and never captions speech."""

from __future__ import annotations

from collections import Counter
from dataclasses import replace
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
        "a: {kind: transient, priority: 3, classes: {Bark: [x, y]}}\nb: {kind: transient, priority: 3, "
        "classes: {Bark: [x, y]}}\n"
    )
    with pytest.raises(PackError, match="mapped twice"):
        load_vocabulary(twice, ("Bark",))
    with pytest.raises(PackError, match="unmapped"):
        load_vocabulary(_one(tmp_path), ("Bark", "Meow"))


def _one(tmp_path: Path) -> Path:
    path = tmp_path / "one.yaml"
    path.write_text("dog: {kind: transient, priority: 3, classes: {Bark: [dog barking, dog barks]}}\n")
    return path


_CAPTIONED = (Kind.TRANSIENT, Kind.CONTINUOUS, Kind.MUSIC, Kind.AMBIENCE)


def test_every_lasting_sound_has_a_noun_for_its_end_cue(pack: packs.LoadedPack) -> None:
    # DCMP Captioning Key words the end of a sound by its name: "[rain stops]", "[music stops]".
    from captioner.cues import end_text
    from captioner.events import SoundEvent
    from captioner.style import Wording

    def ending(label: str) -> str:
        e = next(e for e in pack.vocabulary.entries if e.label == label)
        sound = SoundEvent(
            "e1", e.concept, e.label, e.phrase, e.phrase_present, e.kind, 3, None, 0, 1, 1, 1, 0, 0
        )
        return end_text(replace(sound, noun=e.noun), Wording())

    lasting = [e for e in pack.vocabulary.entries if e.kind in (Kind.CONTINUOUS, Kind.MUSIC, Kind.AMBIENCE)]
    assert lasting and all(e.noun for e in lasting), [e.label for e in lasting if not e.noun]
    assert {e.noun for e in lasting if e.kind is Kind.MUSIC} <= {"music", "singing"}
    assert ending("Rain") == "[rain stops]" and ending("Percussion") == "[music stops]"
    assert ending("Walk, footsteps") == "[footsteps stop]" and ending("Television") == "[TV stops]"


def test_capitals_wording_describes_the_sound_not_an_unseen_agent(pack: packs.LoadedPack) -> None:
    # BBC Subtitle Guidelines §17.4: describe the sound, not the action of someone the
    # viewer may not see ("SOMEONE DIALS PHONE", "PERSON CLAPS" were written before).
    agents = ("person ", "someone ", "something ", "people ", "device ")
    captioned = [e for e in pack.vocabulary.entries if e.kind in _CAPTIONED]
    invented = [e.phrase_present for e in captioned if e.phrase_present.startswith(agents)]
    assert invented == []
    assert not [e.phrase for e in captioned if e.phrase.startswith(agents)]
    present = {e.label: e.phrase_present for e in captioned}
    assert present["Telephone dialing, DTMF"] == "phone keypad beeps" and present["Clapping"] == "clapping"


def test_wording_names_the_right_thing(pack: packs.LoadedPack) -> None:
    phrase = {e.label: e.phrase for e in pack.vocabulary.entries}
    assert phrase["Fowl"] == "chickens clucking"  # hens cluck; "birds clucking" named no bird
    assert phrase["Keyboard (musical)"] == "piano music"
    music = [e.phrase for e in pack.vocabulary.entries if e.kind is Kind.MUSIC]
    assert phrase["Percussion"] == "percussion music" and "percussion" not in music
    # DCMP: proper nouns keep their capitals inside lowercase brackets.
    assert phrase["Christmas music"] == "Christmas music" and phrase["French horn"] == "French horn music"


def test_same_sound_names_known_concepts_and_is_checked(tmp_path: Path, pack: packs.LoadedPack) -> None:
    concepts = pack.vocabulary.concepts()
    rain = concepts["rain"][0]
    assert "water" in rain.same_sound and "applause" in concepts["clapping"][0].same_sound
    bad = tmp_path / "bad.yaml"
    bad.write_text("a: {kind: ambience, priority: 2, same_sound: [nope], classes: {Rain: [x, y]}}\n")
    with pytest.raises(PackError, match="same_sound"):
        load_vocabulary(bad, ("Rain",))
