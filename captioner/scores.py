"""Scores: run a classifier over patches and keep a [time x class] track of probabilities."""

from __future__ import annotations

from collections.abc import Callable, Iterable
from dataclasses import dataclass, field
from typing import Protocol, runtime_checkable

import numpy as np

from .features import Frontend, PatchStream, shift_level
from .heads import HeadSet


class Classifier(Protocol):
    """Anything that maps a batch of patches to per-class probabilities.

    patches: (n, patch_frames, n_mels) float32 log-mel -> (n, n_classes) float32 in [0, 1].
    """

    def __call__(self, patches: np.ndarray) -> np.ndarray: ...


@runtime_checkable
class EmbeddingClassifier(Protocol):
    """A classifier that also gives each patch's embedding (the input of its last layer).

    patches -> (probabilities (n, n_classes), embeddings (n, d) float32, or None).
    """

    def __call__(self, patches: np.ndarray) -> np.ndarray: ...

    def with_embeddings(self, patches: np.ndarray) -> tuple[np.ndarray, np.ndarray | None]: ...


@dataclass(frozen=True, slots=True, eq=False)
class ScoreTrack:
    """Class probabilities over time plus the signal level needed to check them.

    scores: (n_patches, n_classes) float32; patch i covers
        [i * hop_ms, i * hop_ms + patch_ms).
    energy_db: (n_frames,) RMS level in dBFS per analysis frame, frame j starting at
        j * frame_ms.
    head_scores: (n_patches, n_heads) calibrated concept-head scores, one column per name
        in head_concepts; these concepts' curves come from their heads, not their classes.
    embeddings: (n_patches, d) float32, kept only when asked for (training heads).
    """

    scores: np.ndarray
    hop_ms: int
    patch_ms: int
    energy_db: np.ndarray
    frame_ms: float
    duration_ms: int
    head_scores: np.ndarray = field(default_factory=lambda: np.zeros((0, 0), np.float32))
    head_concepts: tuple[str, ...] = ()
    embeddings: np.ndarray | None = None

    @property
    def n_patches(self) -> int:
        return int(self.scores.shape[0])

    def patch_start_ms(self, index: int | np.ndarray) -> np.ndarray:
        """Start time of patch `index` in integer milliseconds (the one frame-to-ms conversion)."""
        return np.asarray(index, dtype=np.int64) * self.hop_ms


def compute_scores(
    chunks: Iterable[np.ndarray],
    classifier: Classifier,
    frontend: Frontend,
    *,
    hop_ms: int,
    batch_size: int = 256,
    level_spread_db: float = 0.0,
    heads: HeadSet | None = None,
    keep_embeddings: bool = False,
    on_progress: Callable[[int], None] | None = None,
) -> ScoreTrack:
    """Classify overlapping patches of the decoded audio.

    `hop_ms` is the patch hop; it must be a whole number of frontend frames.
    `level_spread_db` > 0 scores every patch three times, as heard, `level_spread_db`
    quieter and as much louder, and keeps the mean (see `_classify`); embeddings are
    averaged the same way. `heads` adds calibrated concept-head scores from each patch's
    embedding; `keep_embeddings` keeps the embeddings themselves (about 4 KB a patch).
    `on_progress` receives the number of samples consumed after each chunk.
    """
    wants_embeddings = heads is not None or keep_embeddings
    if wants_embeddings and not isinstance(classifier, EmbeddingClassifier):
        raise ValueError("heads and embeddings need a classifier with an embedding output")
    hop_frames = round(hop_ms / frontend.frame_ms)
    if hop_frames <= 0 or abs(hop_frames * frontend.frame_ms - hop_ms) > 1e-6:
        raise ValueError(
            f"hop_ms={hop_ms} must be a positive multiple of the frame hop {frontend.frame_ms} ms"
        )
    stream = PatchStream(frontend, hop_frames)
    blocks: list[_Scored] = []
    energy_blocks: list[np.ndarray] = []
    total_samples = 0

    def classify(patches: np.ndarray) -> None:
        for i in range(0, patches.shape[0], batch_size):
            scored = _classify(
                classifier,
                patches[i : i + batch_size],
                level_spread_db,
                frontend.log_offset,
                embed=wants_embeddings,
            )
            if heads is not None and scored.embeddings is not None:
                scored = _Scored(scored.scores, scored.embeddings, heads(scored.embeddings, scored.scores))
            blocks.append(scored if keep_embeddings else _Scored(scored.scores, None, scored.heads))

    for chunk in chunks:
        total_samples += chunk.size
        block = stream.push(chunk)
        energy_blocks.append(block.energy_db)
        classify(block.patches)
        if on_progress:
            on_progress(chunk.size)
    classify(stream.finish().patches)
    scores = np.concatenate([b.scores for b in blocks]) if blocks else np.zeros((0, 0), np.float32)
    n_heads = len(heads.concepts) if heads is not None else 0
    head_blocks = [b.heads for b in blocks if b.heads is not None]
    embedding_blocks = [b.embeddings for b in blocks if b.embeddings is not None]
    return ScoreTrack(
        scores=scores.astype(np.float32, copy=False),
        hop_ms=int(hop_ms),
        patch_ms=round(frontend.patch_frames * frontend.frame_ms),
        energy_db=np.concatenate(energy_blocks) if energy_blocks else np.zeros(0, np.float32),
        frame_ms=frontend.frame_ms,
        duration_ms=round(1000 * total_samples / frontend.sample_rate),
        head_scores=np.concatenate(head_blocks)
        if head_blocks
        else np.zeros((len(scores), n_heads), np.float32),
        head_concepts=heads.concepts if heads is not None else (),
        embeddings=np.concatenate(embedding_blocks) if keep_embeddings and embedding_blocks else None,
    )


@dataclass(frozen=True, slots=True, eq=False)
class _Scored:
    scores: np.ndarray
    embeddings: np.ndarray | None = None
    heads: np.ndarray | None = None


def _classify(
    classifier: Classifier, batch: np.ndarray, spread_db: float, log_offset: float, *, embed: bool
) -> _Scored:
    """Scores (and embeddings) of one batch; with a spread, the mean over three playback levels.

    An 8-bit classifier answers in coarse steps, and a sound a few dB louder or quieter
    can flip a class between steps. Averaging over levels smooths those steps and damps
    one-level flukes: on recorded test sets this raised the class-balanced average
    precision and cut isolated false peaks, for three times the classifier's work.
    """
    levels = [batch]
    if spread_db > 0:
        # One level at a time: a triple batch would triple the classifier's working memory.
        levels += [shift_level(batch, -spread_db, log_offset), shift_level(batch, spread_db, log_offset)]
    if not embed or not isinstance(classifier, EmbeddingClassifier):
        return _Scored(_mean([classifier(level) for level in levels]))
    outputs = [classifier.with_embeddings(level) for level in levels]
    embedded = [o[1] for o in outputs if o[1] is not None]
    return _Scored(_mean([o[0] for o in outputs]), _mean(embedded) if len(embedded) == len(outputs) else None)


def _mean(arrays: list[np.ndarray]) -> np.ndarray:
    total = arrays[0]
    for more in arrays[1:]:
        total = total + more
    return total / float(len(arrays)) if len(arrays) > 1 else total
