"""Teaching heads: a user's labelled clips -> embeddings -> a head file of new concepts.

Clips come from a folder with one sub-folder per concept (a sub-folder named `_other` holds
clips that are none of them), or from a CSV of `file,onset,offset,concept` rows, where the
rest of each listed file serves as negatives. The built-in negative pool (embeddings of
speech, room tone, music and unrelated sounds) is added to every head's negatives.
"""

from __future__ import annotations

import csv
import re
from collections.abc import Callable, Iterable, Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from threadpoolctl import threadpool_limits

from . import media
from .errors import CaptionerError, MediaError, PackError
from .fitting import IGNORED, NEGATIVE, POSITIVE, TrainingSet
from .heads import NewConcept
from .packs import LoadedPack
from .scores import compute_scores
from .separability import patch_labels

NEGATIVE_FOLDER = "_other"
NEGATIVE_POOL = Path(__file__).parent / "data" / "yamnet_negatives.npz"
_AUDIO = {".wav", ".flac", ".ogg", ".oga", ".mp3", ".m4a", ".aac", ".opus", ".mp4", ".mkv", ".webm", ".mov"}
_CONCEPT_ID = re.compile(r"^[a-z][a-z0-9_]*$")
QUIET_DB = 15.0  # patches this far below a clip's loudest patch are its pauses, not the sound
MIN_CLIPS = 3  # fewer clips than this cannot be cross-validated


class TeachError(CaptionerError):
    """The labelled clips cannot be used to teach heads."""


@dataclass(frozen=True, slots=True)
class LabelledClip:
    """A recording and what it holds.

    Folder mode: `concept` fills the whole clip (None: a clip of none of the concepts).
    CSV mode: `spans` lists (concept, start_ms, end_ms) inside the file; the rest of it
    is negative for every concept.
    """

    path: Path
    concept: str | None
    spans: tuple[tuple[str, int, int], ...] | None = None


def read_folder(folder: Path) -> list[LabelledClip]:
    """Clips of a folder: each sub-folder is a concept, `_other` holds negatives.

    Raises:
        TeachError: no such folder or no audio files in it.
    """
    if not folder.is_dir():
        raise TeachError(
            folder, "not a folder", "pass a folder with one sub-folder per concept, or a CSV file"
        )
    clips = []
    for sub in sorted(p for p in folder.iterdir() if p.is_dir() and not p.name.startswith(".")):
        concept = None if sub.name == NEGATIVE_FOLDER else sub.name
        for file in sorted(sub.rglob("*")):
            if file.is_file() and file.suffix.lower() in _AUDIO:
                clips.append(LabelledClip(file, concept))
    if not clips:
        raise TeachError(
            folder, "no audio clips found", "put clips in one sub-folder per concept (e.g. gate_squeak/*.wav)"
        )
    return clips


def read_label_csv(path: Path) -> list[LabelledClip]:
    """Clips of a CSV `file,onset,offset,concept` (seconds; files relative to the CSV).

    Raises:
        TeachError: unreadable file, a bad row, or no rows.
    """
    try:
        rows = list(csv.reader(path.read_text(encoding="utf-8-sig").splitlines()))
    except (OSError, UnicodeDecodeError) as exc:
        raise TeachError(path, f"cannot read the label file ({exc})", "pass a UTF-8 CSV") from exc
    spans: dict[Path, list[tuple[str, int, int]]] = {}
    for number, row in enumerate(rows, start=1):
        if not row or (number == 1 and row[:2] == ["file", "onset"]):
            continue
        if len(row) != 4:
            raise TeachError(f"{path}:{number}", "expected file,onset,offset,concept", "fix the row")
        try:
            onset, offset = float(row[1]), float(row[2])
        except ValueError as exc:
            raise TeachError(f"{path}:{number}", "onset and offset must be seconds", "fix the row") from exc
        if not 0 <= onset < offset:
            raise TeachError(f"{path}:{number}", f"offset {offset} is not after onset {onset}", "fix the row")
        file = Path(row[0]) if Path(row[0]).is_absolute() else path.parent / row[0]
        spans.setdefault(file, []).append((row[3].strip(), round(onset * 1000), round(offset * 1000)))
    if not spans:
        raise TeachError(path, "no labelled rows", "add rows file,onset,offset,concept")
    return [LabelledClip(file, None, tuple(sorted(s))) for file, s in spans.items()]


def check_clips(clips: Sequence[LabelledClip], known_concepts: Iterable[str], where: Path) -> tuple[str, ...]:
    """The concepts to teach, after checking names, counts and negatives.

    Raises:
        TeachError: a concept clashes with the vocabulary, has a bad name or too few clips,
            or there is only one concept and nothing that is not it.
    """
    known = set(known_concepts)
    counts: dict[str, int] = {}
    for clip in clips:
        labelled = (
            [s[0] for s in clip.spans] if clip.spans is not None else [clip.concept] if clip.concept else []
        )
        for concept in labelled:
            counts[concept] = counts.get(concept, 0) + 1
    if not counts:
        raise TeachError(
            where, "no labelled clips, only negatives", "add one sub-folder of clips per concept"
        )
    for concept, count in sorted(counts.items()):
        if not _CONCEPT_ID.match(concept):
            raise TeachError(where, f"concept name {concept!r}", "use lowercase letters, digits and _")
        if concept in known:
            raise TeachError(
                where,
                f"concept {concept!r} is already in the vocabulary",
                "name your sound differently (e.g. my_" + concept + ")",
            )
        if count < MIN_CLIPS:
            raise TeachError(where, f"concept {concept!r} has {count} clip(s)", f"give at least {MIN_CLIPS}")
    has_negatives = any(c.concept is None for c in clips)  # an _other clip, or a CSV file's unlabelled rest
    if len(counts) == 1 and not has_negatives:
        raise TeachError(
            where,
            f"only one concept ({next(iter(counts))}) and no clips that are not it",
            f"add a second concept or a {NEGATIVE_FOLDER}/ folder of other sounds from your material",
        )
    return tuple(sorted(counts))


@dataclass(frozen=True, slots=True, eq=False)
class Embedded:
    """Embeddings of one recording's patches with their start times and levels."""

    embeddings: np.ndarray  # (n, d) float32
    class_scores: np.ndarray  # (n, n_classes) float32
    level_db: np.ndarray  # (n,) loudest 10 ms frame level inside each patch, dBFS
    hop_ms: int
    patch_ms: int


def decode(path: Path, sample_rate: int) -> np.ndarray:
    """Whole file as mono float32 (clips are short).

    Raises:
        MediaError: not readable as audio.
    """
    info = media.probe(path)
    stream = info.choose_stream(None)
    chunks = list(media.decode_chunks(path, stream, sample_rate=sample_rate, expected_ms=info.duration_ms))
    return np.concatenate(chunks)


def embed(samples: np.ndarray, pack: LoadedPack, *, hop_ms: int, level_spread_db: float) -> Embedded:
    """Per-patch embeddings of decoded audio, level-averaged as the caption run does."""
    with threadpool_limits(limits=1, user_api="blas"):
        track = compute_scores(
            [samples.astype(np.float32)],
            pack.classifier,
            pack.manifest.frontend,
            hop_ms=hop_ms,
            level_spread_db=level_spread_db,
            keep_embeddings=True,
        )
    assert track.embeddings is not None
    levels = patch_peaks(
        track.energy_db,
        track.n_patches,
        round(track.hop_ms / track.frame_ms),
        round(track.patch_ms / track.frame_ms),
    )
    return Embedded(track.embeddings, track.scores, levels, track.hop_ms, track.patch_ms)


def patch_peaks(frame_db: np.ndarray, n_patches: int, hop_frames: int, patch_frames: int) -> np.ndarray:
    """Loudest frame level (dBFS) inside each patch; -120 where a patch has no frames."""
    return np.array(
        [
            frame_db[i * hop_frames : i * hop_frames + patch_frames].max(initial=-120.0)
            for i in range(n_patches)
        ],
        frame_db.dtype,  # float32 from a score track, float64 from the recipe's own levels
    )


def loud_patches(levels: np.ndarray, *, floor_db: float = -60.0) -> np.ndarray:
    """Patches that hold the clip's sound: within QUIET_DB of its loudest and above the floor."""
    if levels.size == 0:
        return np.zeros(0, bool)
    loud: np.ndarray = (levels >= levels.max() - QUIET_DB) & (levels > floor_db)
    return loud


def span_mask(
    n: int, hop_ms: int, patch_ms: int, spans_ms: Sequence[tuple[int, int]]
) -> tuple[np.ndarray, np.ndarray]:
    """(inside, near): patches labelled by the spans as `evaluate --scores` labels them; patches
    touching one at all."""
    starts = np.arange(n, dtype=np.int64) * hop_ms
    near = np.zeros(n, bool)
    for start, end in spans_ms:
        near |= np.minimum(starts + patch_ms, end) - np.maximum(starts, start) > -hop_ms
    return patch_labels(spans_ms, n, hop_ms, patch_ms), near


def build_training_set(
    clips: Sequence[LabelledClip],
    concepts: tuple[str, ...],
    pack: LoadedPack,
    *,
    hop_ms: int,
    level_spread_db: float,
    pool: Path | None = NEGATIVE_POOL,
    say: Callable[[str], None] = lambda _m: None,
) -> TrainingSet:
    """Embed every clip and label its patches for each concept.

    Raises:
        MediaError: a clip cannot be decoded (named, with the fix).
    """
    column = {c: j for j, c in enumerate(concepts)}
    features, labels, groups = [], [], []
    for number, clip in enumerate(clips):
        say(f"[{number + 1}/{len(clips)}] {clip.path.name}")
        try:
            samples = decode(clip.path, pack.manifest.frontend.sample_rate)
            done = embed(samples, pack, hop_ms=hop_ms, level_spread_db=level_spread_db)
        except MediaError as exc:
            raise TeachError(
                clip.path, f"cannot read this clip ({exc.problem})", "remove or re-export it"
            ) from exc
        rows = np.full((len(done.embeddings), len(concepts)), NEGATIVE, np.int8)
        keep = loud_patches(done.level_db)
        if clip.spans is None and clip.concept is not None:
            rows[:, column[clip.concept]] = POSITIVE
        for concept in sorted({s[0] for s in clip.spans or ()}):
            inside, near = span_mask(
                len(rows),
                done.hop_ms,
                done.patch_ms,
                [(a, b) for c, a, b in clip.spans or () if c == concept],
            )
            rows[near, column[concept]] = IGNORED  # a patch on a label's edge is neither
            rows[inside, column[concept]] = POSITIVE
        if clip.spans is not None:  # outside the labels, quiet patches are negatives too
            keep |= (rows != POSITIVE).all(axis=1)
        features.append(done.embeddings[keep])
        labels.append(rows[keep])
        groups.append(np.full(int(keep.sum()), number, np.int64))
    if pool is not None and pool.is_file():
        negatives = load_negative_pool(pool, pack.classifier.embedding_size)
        features.append(negatives)
        labels.append(np.full((len(negatives), len(concepts)), NEGATIVE, np.int8))
        groups.append(len(clips) + np.arange(len(negatives)) // 8)
    return TrainingSet(
        np.concatenate(features).astype(np.float32),
        np.concatenate(labels),
        np.concatenate(groups),
        concepts,
        {c: NewConcept(c.replace("_", " "), c.replace("_", " ")) for c in concepts},
    )


def load_negative_pool(path: Path, width: int) -> np.ndarray:
    """Built-in negative embeddings (n, width) float32, stored as 8-bit codes with a scale.

    Raises:
        PackError: the pool does not fit this classifier.
    """
    with np.load(path, allow_pickle=False) as data:
        codes, scale = data["codes"], float(data["scale"])
    if codes.ndim != 2 or codes.shape[1] != width:
        raise PackError(
            path, f"negative pool has width {codes.shape[-1]}, the classifier {width}", "rebuild it"
        )
    pool: np.ndarray = codes.astype(np.float32) * scale
    return pool


def save_negative_pool(path: Path, embeddings: np.ndarray) -> None:
    """Store negative embeddings as 8-bit codes (the classifier's own embedding is 8-bit too)."""
    scale = float(max(embeddings.max(), 1e-6) / 255.0)
    codes = np.clip(np.round(embeddings / scale), 0, 255).astype(np.uint8)
    with path.open("wb") as handle:
        np.savez_compressed(handle, codes=codes, scale=np.float32(scale))
