"""Model packs: pinned hashes, graph quantization, batching, offline behaviour."""

from __future__ import annotations

import shutil
from pathlib import Path

import numpy as np
import pytest

from captioner import packs
from captioner.errors import PackError


def test_quantization_is_read_from_the_graph(pack: packs.LoadedPack) -> None:
    # Values documented for this graph's initializers (audio_scale 0.04794, zero point 144;
    # class_scores_scale 0.75654, zero point 190).
    scale, zero = pack.classifier.input_quant
    assert scale == pytest.approx(0.04794, abs=1e-5) and zero == 144
    scale, zero = pack.classifier.output_quant
    assert scale == pytest.approx(0.75654, abs=1e-5) and zero == 190


def test_batched_graph_gives_the_same_scores_as_one_by_one(pack: packs.LoadedPack) -> None:
    rng = np.random.default_rng(3)
    patches = rng.normal(-4, 2, (5, 96, 64)).astype(np.float32)
    together = pack.classifier(patches)
    alone = np.concatenate([pack.classifier(patches[i : i + 1]) for i in range(5)])
    assert together.shape == (5, 521)
    np.testing.assert_array_equal(together, alone)


def test_labels_are_the_521_audioset_classes(pack: packs.LoadedPack) -> None:
    assert len(pack.labels) == 521
    assert pack.labels[0] == "Speech" and len(set(pack.labels)) == 521


def _copy_installed(pack: packs.LoadedPack, cache: Path) -> packs.PackManifest:
    manifest = packs.read_manifest(packs.DEFAULT_PACK, cache)
    shutil.copytree(pack.manifest.root, manifest.root)
    return manifest


def test_changed_pack_file_is_detected(pack: packs.LoadedPack, tmp_path: Path) -> None:
    manifest = _copy_installed(pack, tmp_path)
    labels = manifest.file_path("labels.csv")
    labels.write_bytes(labels.read_bytes().replace(b"Speech", b"Speach", 1))
    with pytest.raises(PackError, match="does not match its SHA-256"):
        packs.load_pack(packs.DEFAULT_PACK, cache=tmp_path, say=lambda m: None)


def test_offline_without_a_cached_pack_says_what_to_run(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    # No package index reachable: pip fails straight away, as it does offline.
    monkeypatch.setenv("PIP_NO_INDEX", "1")
    monkeypatch.setenv("PIP_FIND_LINKS", str(tmp_path))
    with pytest.raises(PackError, match="captioner models install"):
        packs.load_pack(packs.DEFAULT_PACK, cache=tmp_path / "empty", say=lambda m: None)
    assert not (tmp_path / "empty" / "packs" / packs.DEFAULT_PACK).exists()


def test_not_installed_without_auto_install(tmp_path: Path) -> None:
    with pytest.raises(PackError, match="not installed"):
        packs.load_pack(packs.DEFAULT_PACK, cache=tmp_path, auto_install=False)


def test_wheel_with_wrong_hash_is_refused(tmp_path: Path) -> None:
    manifest = packs.read_manifest(packs.DEFAULT_PACK, tmp_path)
    assert manifest.source is not None
    (tmp_path / manifest.source["wheel"]).write_bytes(b"not the published wheel")
    with pytest.raises(PackError, match="SHA-256 mismatch"):
        packs.install(manifest, wheel_dir=tmp_path, say=lambda m: None)
    assert not manifest.root.exists()


def test_unknown_pack_name(tmp_path: Path) -> None:
    with pytest.raises(PackError, match="no such model pack"):
        packs.read_manifest("no-such-pack", tmp_path)


@pytest.mark.parametrize(
    ("manifest", "onnx_bytes", "message"),
    [
        ("files: [m.onnx]\n", b"", "files must map each file name"),
        ("", None, "model file not found"),
        ("", b"this is not a protobuf graph", "not a readable ONNX model"),
        ("source: {wheel: x.whl}\n", b"", "source must be a mapping with"),
    ],
)
def test_a_broken_user_pack_is_one_clear_error(
    tmp_path: Path, manifest: str, onnx_bytes: bytes | None, message: str
) -> None:
    path = tmp_path / "mine.pack.yaml"
    path.write_text("name: mine\nmodel: m.onnx\nlabels: labels.csv\nvocabulary: vocab.yaml\n" + manifest)
    (tmp_path / "labels.csv").write_text("index,mid,display_name\n0,/m/x,Bark\n")
    (tmp_path / "vocab.yaml").write_text(
        "dog: {kind: transient, priority: 3, classes: {Bark: [dog barking, dog barks]}}\n"
    )
    if onnx_bytes is not None:
        (tmp_path / "m.onnx").write_bytes(onnx_bytes)
    with pytest.raises(PackError, match=message):
        packs.load_pack(str(path), cache=tmp_path / "cache", say=lambda m: None)


def test_models_install_keeps_an_intact_pack_without_downloading(
    pack: packs.LoadedPack, monkeypatch: pytest.MonkeyPatch, capsys: pytest.CaptureFixture[str]
) -> None:
    from captioner.cli import main

    monkeypatch.setenv("PIP_NO_INDEX", "1")  # offline: a download would fail
    assert main(["models", "install"]) == 0
    assert "ready in" in capsys.readouterr().out
