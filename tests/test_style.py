"""Style presets and style files: loading and validation messages."""

from __future__ import annotations

import dataclasses
from pathlib import Path

import pytest

from captioner.errors import StyleError
from captioner.style import builtin_styles, load_style
from captioner.vocabulary import ConceptStyle


def test_presets_follow_the_published_numbers() -> None:
    brackets, capitals = load_style("brackets"), load_style("capitals")
    # DCMP Captioning Key: 32 characters per line (memory), 2 lines, 2.0 s minimum display.
    assert (
        brackets.layout.max_chars_per_line,
        brackets.layout.max_lines,
        brackets.layout.min_duration_ms,
    ) == (32, 2, 2000)
    # BBC Subtitle Guidelines §3.1 / §3.3: 37 characters, 2 lines; §4.5: gaps none or >= 1 s.
    assert (capitals.layout.max_chars_per_line, capitals.layout.max_lines, capitals.layout.min_gap_ms) == (
        37,
        2,
        1000,
    )
    assert (
        capitals.wording.case == "upper"
        and not capitals.wording.brackets
        and capitals.wording.tense == "present"
    )
    assert {"brackets", "capitals"} <= set(builtin_styles())


def test_unknown_style_name() -> None:
    with pytest.raises(StyleError, match="no such style.*brackets"):
        load_style("fancy")


def test_malformed_yaml_names_the_line(tmp_path: Path) -> None:
    path = tmp_path / "bad.yaml"
    path.write_text("layout:\n  max_lines: 2\n  max_chars: [1, 2\n")
    with pytest.raises(StyleError, match="malformed YAML at line"):
        load_style(str(path))


@pytest.mark.parametrize(
    ("text", "message"),
    [
        ("layout:\n  max_lines: 9\n", r"layout.max_lines=9 is outside 1..4"),
        ("layout:\n  max_lines: two\n", r"layout.max_lines='two' must be a int"),
        ("layout:\n  colour: red\n", r"unknown field\(s\) layout.colour"),
        ("fonts: {}\n", r"unknown section\(s\) fonts"),
        ("wording:\n  case: title\n", r"wording.case='title' is not one of lower, upper"),
        ("detection:\n  onset_threshold: 0.2\n  offset_threshold: 0.4\n", r"offset_threshold=0.4 is above"),
        ("detection:\n  level_spread_db: -3\n", r"detection.level_spread_db=-3 is outside 0..20"),
        ("detection:\n  level_spread_db: loud\n", r"detection.level_spread_db='loud' must be a float"),
    ],
)
def test_invalid_values_are_named(tmp_path: Path, text: str, message: str) -> None:
    path = tmp_path / "style.yaml"
    path.write_text(text)
    with pytest.raises(StyleError, match=message):
        load_style(str(path))


def test_partial_file_keeps_defaults(tmp_path: Path) -> None:
    path = tmp_path / "mine.yaml"
    path.write_text("layout:\n  max_chars_per_line: 40\n")
    style = load_style(str(path))
    assert style.layout.max_chars_per_line == 40 and style.layout.max_lines == 2 and style.name == "mine"


@pytest.mark.parametrize(
    ("text", "message"),
    [
        ("vocabulary: [rain]", "section vocabulary must map concept ids"),
        ("vocabulary: {rain: {colour: red}}", r"unknown field\(s\) vocabulary.rain.colour"),
        ("vocabulary: {rain: {wording: [only one]}}", "vocabulary.rain.wording=.* is not two texts"),
        ("vocabulary: {rain: {priority: 9}}", r"vocabulary.rain.priority=9 is outside 1..5"),
        ("vocabulary: {rain: {banned: maybe}}", "vocabulary.rain.banned='maybe' must be a bool"),
        ("vocabulary: {rain: 3}", "vocabulary.rain must be a mapping"),
    ],
)
def test_house_vocabulary_errors_are_one_line_with_the_field(tmp_path: Path, text: str, message: str) -> None:
    path = tmp_path / "house.yaml"
    path.write_text(text + "\n", encoding="utf-8")
    with pytest.raises(StyleError, match=message) as caught:
        load_style(str(path))
    assert "\n" not in str(caught.value) and "house.yaml" in str(caught.value)


def test_house_vocabulary_rewords_reranks_and_bans(tmp_path: Path, pack: object) -> None:
    from captioner.cues import end_text, event_text
    from captioner.errors import StyleError as Error
    from captioner.events import SoundEvent
    from captioner.packs import LoadedPack
    from captioner.vocabulary import Kind, house_vocabulary

    assert isinstance(pack, LoadedPack)
    path = tmp_path / "house.yaml"
    path.write_text(
        "vocabulary:\n"
        "  poultry: {wording: [hens clucking, hens cluck], noun: hens}\n"
        "  breathing: {banned: true}\n"
        "  telephone: {priority: 5}\n",
        encoding="utf-8",
    )
    style = load_style(str(path))
    house = house_vocabulary(pack.vocabulary, style.vocabulary, style.name)
    entry = {e.label: e for e in house.entries}
    fowl = entry["Fowl"]
    assert (fowl.phrase, fowl.phrase_present, fowl.noun) == ("hens clucking", "hens cluck", "hens")
    assert entry["Breathing"].kind is Kind.IGNORE and entry["Telephone"].priority == 5
    assert entry["Rain"] == {e.label: e for e in pack.vocabulary.entries}["Rain"]  # the rest unchanged
    sound = SoundEvent(
        "e1", "poultry", "Fowl", fowl.phrase, fowl.phrase_present, Kind.CONTINUOUS, 3, None, 0, 1, 1, 1, 0, 0
    )
    assert event_text(sound, load_style("capitals").wording) == "HENS CLUCK"
    assert end_text(dataclasses.replace(sound, noun=fowl.noun), style.wording) == "[hens stop]"
    path.write_text("vocabulary:\n  unicorn: {banned: true}\n", encoding="utf-8")
    with pytest.raises(Error, match="vocabulary.unicorn is not a concept"):
        house_vocabulary(pack.vocabulary, load_style(str(path)).vocabulary, "house")


def test_styles_name_prints_the_whole_preset(capsys: pytest.CaptureFixture[str]) -> None:
    from captioner.cli import main

    assert main(["styles", "capitals"]) == 0
    printed = capsys.readouterr().out
    assert printed == builtin_styles()["capitals"].read_text(encoding="utf-8")
    assert "vocabulary:" in printed and "max_chars_per_line: 37" in printed
    assert main(["styles", "nope"]) == 2


def test_a_banned_concept_is_never_captioned_and_house_wording_reaches_the_cue() -> None:
    import numpy as np

    from captioner.pipeline import caption_track
    from captioner.scores import ScoreTrack
    from captioner.vocabulary import ClassEntry, Kind, Vocabulary

    vocabulary = Vocabulary(
        (
            ClassEntry(0, "Bark", "dog", "dog barking", "dog barks", Kind.TRANSIENT, 3, None),
            ClassEntry(1, "Cluck", "poultry", "hen clucking", "hen clucks", Kind.TRANSIENT, 3, None),
        )
    )
    scores = np.zeros((40, 2), np.float32)
    scores[5:9, 0] = 0.9  # a dog at 2.4-4.3 s
    scores[25:29, 1] = 0.9  # a hen at 12-14 s
    energy = np.full(2000, -60.0, np.float32)
    energy[240:440] = energy[1200:1400] = -20.0
    track = ScoreTrack(scores, 480, 960, energy, 10.0, 20000)
    plain = caption_track(track, vocabulary, load_style("brackets"))[3]
    assert [c.text for c in plain] == ["[dog barking]", "[hen clucking]"]
    house = dataclasses.replace(
        load_style("brackets"),
        vocabulary=(
            ConceptStyle("dog", banned=True),
            ConceptStyle("poultry", phrase="hens clucking", phrase_present="hens cluck"),
        ),
    )
    assert [c.text for c in caption_track(track, vocabulary, house)[3]] == ["[hens clucking]"]
