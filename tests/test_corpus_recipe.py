"""The corpus recipe: labels only from allowed packages, onto concepts the vocabulary has."""

from __future__ import annotations

import io
import struct
import zipfile
import zlib
from pathlib import Path

import pytest
import yaml

from training.archives import package_sounds
from training.recipe import copyright_stanzas, licence_of, load_recipe

VOCABULARY = Path(__file__).resolve().parent.parent / "captioner" / "data" / "yamnet_vocabulary.yaml"

# Paths shaped like the sound files of the evaluation packages (every rule pattern is tried on
# each of them under each excluded package name).
TYPICAL_PATHS = [
    "usr/share/games/x/data/sounds/dog.ogg",
    "usr/share/games/x/sound/explosion.wav",
    "usr/share/games/x/mods/public/public.zip/audio/actor/fauna/animal/horse_idle1.ogg",
    "usr/share/games/x/base/0snd.pk3/sound/weapons/bullet-rifle.ogg",
    "usr/share/sounds/x/stereo/phone-incoming-call.oga",
]


def test_every_rule_labels_a_concept_of_the_vocabulary() -> None:
    concepts = set(yaml.safe_load(VOCABULARY.read_text(encoding="utf-8")))
    recipe = load_recipe()
    unknown = {rule.label for rule in recipe.rules if not rule.negative} - concepts
    assert unknown == set()
    assert all(rule.package in {p.name for p in recipe.packages} for rule in recipe.rules)


def test_no_rule_selects_a_file_of_an_excluded_package() -> None:
    recipe = load_recipe()
    assert len(recipe.excluded) == 19
    assert not {p.name for p in recipe.packages} & set(recipe.excluded)
    assert not {rule.package for rule in recipe.rules} & set(recipe.excluded)
    for package in recipe.excluded:
        for path in TYPICAL_PATHS:
            assert recipe.rule_for(package, path) is None


def test_rules_are_checked_in_order_and_ignore_case() -> None:
    recipe = load_recipe()
    rule = recipe.rule_for("freeciv-data", "usr/share/games/freeciv/stdsounds/LRGEXPL.ogg")
    assert rule is not None and rule.label == "explosion"
    assert recipe.rule_for("freeciv-data", "usr/share/games/freeciv/stdsounds/illegal.ogg") is None


def test_licence_comes_from_the_last_matching_stanza() -> None:
    # Debian machine-readable copyright format 1.0: the last matching Files stanza applies.
    text = (
        "Format: x\n\nFiles: *\nLicense: GPL-3+\n\n"
        "Files: src/core/resource/sounds/win.wav\nLicense: CC-BY-3.0\n"
    )
    stanzas = copyright_stanzas(text)
    assert (
        licence_of("usr/share/g/rcc/core.rcc/g/src/core/resource/sounds/win.wav", stanzas, "?") == "CC-BY-3.0"
    )
    assert (
        licence_of("usr/share/g/rcc/core.rcc/g/src/core/resource/sounds/flip.wav", stanzas, "?") == "GPL-3+"
    )
    assert licence_of("a/b.wav", [], "fallback") == "fallback"


def _rcc(files: dict[str, bytes]) -> bytes:
    """A Qt resource bundle (format 3) with one folder of zlib-compressed files."""
    names, data, nodes = b"", b"", []

    def name(text: str) -> int:
        nonlocal names
        offset = len(names)
        names += struct.pack(">HI", len(text), 0) + text.encode("utf-16-be")
        return offset

    folder = name("sounds")
    nodes.append(struct.pack(">IHII", 0, 2, 1, 1) + b"\0" * 8)  # root: one child, node 1
    nodes.append(struct.pack(">IHII", folder, 2, len(files), 2) + b"\0" * 8)
    for file_name, payload in files.items():
        packed = struct.pack(">I", len(payload)) + zlib.compress(payload)
        nodes.append(struct.pack(">IHHHI", name(file_name), 1, 0, 0, len(data)) + b"\0" * 8)
        data += struct.pack(">I", len(packed)) + packed
    tree = b"".join(nodes)
    header = 24
    return (
        b"qres"
        + struct.pack(">IIIII", 3, header, header + len(tree), header + len(tree) + len(data), 0)
        + tree
        + data
        + names
    )


def test_archive_members_are_listed_with_their_archive(tmp_path: Path) -> None:
    games = tmp_path / "usr/share/games/g"
    games.mkdir(parents=True)
    (games / "plain.ogg").write_bytes(b"ogg")
    buffer = io.BytesIO()
    with zipfile.ZipFile(buffer, "w") as archive:
        archive.writestr("sound/a.wav", b"wav-a")
        archive.writestr("readme.txt", b"not a sound")
    (games / "data.pk3").write_bytes(buffer.getvalue())
    (games / "res.rcc").write_bytes(_rcc({"b.ogg": b"ogg-b", "c.txt": b"text"}))
    found = {sound.path: sound.read() for sound in package_sounds(tmp_path)}
    assert found == {
        "usr/share/games/g/data.pk3/sound/a.wav": b"wav-a",
        "usr/share/games/g/plain.ogg": b"ogg",
        "usr/share/games/g/res.rcc/sounds/b.ogg": b"ogg-b",
    }


def test_a_missing_program_stops_the_build_with_one_line_before_any_download(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch, capsys: pytest.CaptureFixture[str]
) -> None:
    from training import build_corpus

    monkeypatch.setattr(build_corpus.shutil, "which", lambda tool: None if tool == "espeak-ng" else tool)
    monkeypatch.setattr(build_corpus, "fetch", lambda *a, **k: pytest.fail("downloaded before the check"))
    assert build_corpus.main(["--work", str(tmp_path)]) == 2
    message = capsys.readouterr().err.strip()
    assert len(message.splitlines()) == 1
    assert "espeak-ng not found" in message and "install" in message
    assert not any(tmp_path.iterdir())


def test_test_tone_negatives_are_audible_tones_over_near_silence_and_repeatable() -> None:
    import numpy as np

    from training.audio import RATE
    from training.negatives import tones

    made = tones(12, seed=3)
    assert [m.samples.tobytes() for m in made] == [m.samples.tobytes() for m in tones(12, seed=3)]
    for clip in made:
        assert clip.samples.dtype == np.int16 and 3 * RATE <= clip.samples.size <= 8 * RATE
        frames = clip.samples[: clip.samples.size // 160 * 160].reshape(-1, 160).astype(np.float64) / 32768
        level_db = 10 * np.log10(np.mean(frames**2, axis=1) + 1e-12)
        assert level_db.max() > -36  # a tone at -30 dBFS peak or louder (-3 dB RMS for a sine)
        assert np.percentile(level_db, 5) < -50  # around it: near-silence or faint noise
        spectrum = np.abs(np.fft.rfft(clip.samples.astype(np.float64)))
        assert spectrum.max() > 20 * np.median(spectrum)  # tonal, not noise


def test_head_relations_follow_the_vocabulary_and_the_tonal_flag() -> None:
    # A car is a vehicle (positive for the vehicle head); an "animal" clip may be this dog (neither);
    # a test tone is neither positive nor negative for a tonal head, and a negative for the others.
    from training.train_heads import concept_relations

    parents = {"dog": "animal", "animal": None, "car": "vehicle", "vehicle": None, "siren": None}
    config = {"heads": {"dog": {}, "vehicle": {}, "siren": {"tonal": True}}}
    relations = concept_relations(config, parents)
    assert relations["vehicle"][0] == {"vehicle", "car"}
    assert "animal" in relations["dog"][1] and "_negative:tone" not in relations["dog"][1]
    assert relations["siren"] == ({"siren"}, {"_negative:tone"})
    shipped = yaml.safe_load((VOCABULARY.parent.parent.parent / "training" / "heads.yaml").read_text())
    assert all("_negative:tone" not in (spec or {}).get("ignore", []) for spec in shipped["heads"].values())
