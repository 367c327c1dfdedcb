"""Separability: how well the classifier's score curves tell each annotated sound from the rest.

Per truth concept, every patch of every annotated clip is one example: its score is the
highest curve among the vocabulary concepts that stand for the truth concept, and it is
positive when it overlaps an event of that concept by at least half the patch or half the
event, whichever is shorter (so sounds shorter than a patch still get positive patches).
From these: ROC AUC (rank-based, ties count half), average precision (the step-wise sum
that scikit-learn's average_precision_score computes) and d' = sqrt(2) * PhiInv(AUC).
Class-balanced means weigh every concept the same; the balanced d' is taken from the
balanced AUC, since a concept separated perfectly has an infinite d' of its own.

Which vocabulary concepts stand for a truth concept: a `score_concepts` list in the concept
file or a --score-map file, else this rule on the pack's vocabulary:
1. the vocabulary concept with the same id, together with every one whose id read as
   words ("car_horn" -> "car horn") is a keyword, or is made only of keywords, of the
   truth concept;
2. if there is none, the vocabulary concept whose caption wordings contain the truth
   concept's keywords most often (the first in vocabulary order on a tie).
"""

from __future__ import annotations

import math
from collections.abc import Collection, Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from statistics import NormalDist
from typing import Any

import numpy as np
import yaml

from .evaluation import keyword_pattern
from .formats.annotations import (
    AnnotationError,
    ConceptSpec,
    SidecarScores,
    TruthEvent,
    annotated_files,
    concepts_path_for,
    find_sidecar,
    read_concepts,
    read_dialogue,
    read_durations,
    read_score_map,
    read_sidecar_scores,
    read_truth,
)
from .vocabulary import Kind, Vocabulary, load_vocabulary


@dataclass(frozen=True, slots=True)
class Separation:
    """How well one truth concept's scores separate its patches from all others."""

    score_concepts: tuple[str, ...]
    positives: int  # patches labelled with the concept
    negatives: int
    auc: float | None  # None without positives or without negatives
    average_precision: float | None
    d_prime: float | None  # None when undefined or infinite (AUC 0 or 1)


@dataclass(frozen=True, slots=True)
class SeparabilityReport:
    """Per-concept separation and the class-balanced means."""

    concepts: dict[str, Separation]
    auc: float | None
    average_precision: float | None
    d_prime: float | None
    files: int
    patches: int


def roc_auc(scores: np.ndarray, labels: np.ndarray) -> float:
    """Area under the ROC curve: the chance a positive outscores a negative, ties counting half.

    scores, labels: (n,) arrays; labels are booleans and must include both classes.

    >>> roc_auc(np.array([0.1, 0.4, 0.35, 0.8]), np.array([False, False, True, True]))
    0.75
    """
    scores, labels = np.asarray(scores, dtype=np.float64), np.asarray(labels, dtype=bool)
    positives, negatives = int(labels.sum()), int((~labels).sum())
    if not positives or not negatives:
        raise ValueError(f"AUC needs both classes (positives={positives}, negatives={negatives})")
    order = np.argsort(scores, kind="mergesort")
    _, first, counts = np.unique(scores[order], return_index=True, return_counts=True)
    ranks = np.repeat(first + (counts + 1) / 2, counts)  # 1-based ranks, tied scores share the mean rank
    rank_sum = ranks[labels[order]].sum()
    return float((rank_sum - positives * (positives + 1) / 2) / (positives * negatives))


def average_precision(scores: np.ndarray, labels: np.ndarray) -> float:
    """Sum over score thresholds of (recall gained) x (precision there), without interpolation.

    >>> average_precision(np.array([0.1, 0.4, 0.35, 0.8]), np.array([False, False, True, True]))
    0.8333333333333333
    """
    scores, labels = np.asarray(scores, dtype=np.float64), np.asarray(labels, dtype=bool)
    if not labels.any():
        raise ValueError("average precision needs at least one positive")
    order = np.argsort(-scores, kind="mergesort")
    ranked = scores[order]
    last_of_tie = np.r_[np.flatnonzero(np.diff(ranked)), ranked.size - 1]  # one threshold per distinct score
    true_positives = np.cumsum(labels[order])[last_of_tie]
    precision = true_positives / (last_of_tie + 1)
    recall = true_positives / true_positives[-1]
    return float(np.sum(np.diff(np.r_[0.0, recall]) * precision))


def d_prime(auc: float) -> float:
    """Sensitivity index d' = sqrt(2) * PhiInv(AUC) for equal-variance normal scores; +-inf at 1 and 0.

    >>> d_prime(0.5)
    0.0
    """
    if not 0.0 <= auc <= 1.0:
        raise ValueError(f"auc={auc} must be within [0, 1]")
    if auc in (0.0, 1.0):
        return math.copysign(math.inf, auc - 0.5)
    return math.sqrt(2.0) * NormalDist().inv_cdf(auc)


def patch_labels(
    spans_ms: Sequence[tuple[int, int]], n_patches: int, hop_ms: int, patch_ms: int
) -> np.ndarray:
    """(n_patches,) booleans: patch i = [i*hop_ms, i*hop_ms+patch_ms) covers half of itself or of a span.

    >>> patch_labels([(1000, 1300)], 4, 480, 960).tolist()
    [False, True, True, False]
    """
    starts = np.arange(n_patches, dtype=np.int64) * hop_ms
    labels = np.zeros(n_patches, dtype=bool)
    for start_ms, end_ms in spans_ms:
        overlap = np.minimum(starts + patch_ms, end_ms) - np.maximum(starts, start_ms)
        labels |= (overlap > 0) & (2 * overlap >= min(patch_ms, end_ms - start_ms))
    return labels


def _id_words(concept_id: str) -> str:
    return concept_id.replace("_", " ").lower()


def default_score_concepts(spec: ConceptSpec, truth_concept: str, vocabulary: Vocabulary) -> tuple[str, ...]:
    """The vocabulary concepts that stand for a truth concept by the module's rule (may be empty)."""
    candidates = {
        c: entries for c, entries in vocabulary.concepts().items() if entries[0].kind is not Kind.IGNORE
    }
    phrases = {k.lower() for k in spec.keywords}
    words = {k for k in phrases if " " not in k}
    chosen = [
        c
        for c in candidates
        if c == truth_concept or _id_words(c) in phrases or set(_id_words(c).split()) <= words
    ]
    if chosen:
        return tuple(chosen)
    pattern = keyword_pattern(spec.keywords)
    hits = {
        c: sum(bool(pattern.search(text)) for e in entries for text in (e.phrase, e.phrase_present))
        for c, entries in candidates.items()
    }
    best = max(hits.values(), default=0)
    return tuple(c for c in hits if hits[c] == best)[:1] if best else ()


def resolve_score_map(
    concepts: Mapping[str, ConceptSpec],
    truth_concepts: Sequence[str],
    vocabulary: Vocabulary,
    override: Mapping[str, Sequence[str]],
    *,
    source: Path,
) -> dict[str, tuple[str, ...]]:
    """Vocabulary concept ids per truth concept: `override` first, then the concept file, then the rule.

    Raises:
        AnnotationError: an unknown vocabulary id, or a truth concept nothing stands for.
    """
    known = set(vocabulary.concepts())
    mapping = {}
    for concept in truth_concepts:
        ids = tuple(
            override.get(concept)
            or concepts[concept].score_concepts
            or default_score_concepts(concepts[concept], concept, vocabulary)
        )
        if not ids:
            raise AnnotationError(
                source,
                f"no vocabulary concept matches the keywords of {concept!r}",
                "name its score concepts with --score-map or `score_concepts:` in the concept file",
            )
        unknown = [i for i in ids if i not in known]
        if unknown:
            raise AnnotationError(
                source,
                f"{concept!r} names unknown vocabulary concept(s) {', '.join(unknown)}",
                "use concept ids of the pack's vocabulary file",
            )
        mapping[concept] = ids
    return mapping


def separability(
    events: Sequence[TruthEvent], tracks: Mapping[str, SidecarScores], score_map: Mapping[str, Sequence[str]]
) -> SeparabilityReport:
    """Per truth concept in `score_map`: AUC, AP and d' over all patches of all clips in `tracks`."""
    results = {}
    for concept, ids in score_map.items():
        scores, labels = [], []
        for name, track in tracks.items():
            curves = [track.curves[i] for i in ids if i in track.curves]
            scores.append(np.max(curves, axis=0) if curves else np.zeros(track.n_patches))
            spans = [(e.start_ms, e.end_ms) for e in events if e.file == name and e.concept == concept]
            labels.append(patch_labels(spans, track.n_patches, track.hop_ms, track.patch_ms))
        score = np.concatenate(scores) if scores else np.zeros(0)
        label = np.concatenate(labels) if labels else np.zeros(0, dtype=bool)
        positives, negatives = int(label.sum()), int((~label).sum())
        auc = ap = dp = None
        if positives and negatives:
            auc, ap = roc_auc(score, label), average_precision(score, label)
            dp = d_prime(auc) if 0.0 < auc < 1.0 else None
        results[concept] = Separation(tuple(ids), positives, negatives, auc, ap, dp)
    defined = [r for r in results.values() if r.auc is not None]
    mean_auc = float(np.mean([r.auc for r in defined])) if defined else None
    mean_ap = float(np.mean([r.average_precision for r in defined])) if defined else None
    balanced_d = d_prime(mean_auc) if mean_auc is not None and 0.0 < mean_auc < 1.0 else None
    return SeparabilityReport(
        results, mean_auc, mean_ap, balanced_d, len(tracks), sum(t.n_patches for t in tracks.values())
    )


def vocabulary_from_file(path: Path) -> Vocabulary:
    """A vocabulary file read on its own, its classes in file order (no installed pack needed).

    Raises:
        PackError: unreadable or malformed vocabulary.
    """
    try:
        data = yaml.safe_load(Path(path).read_text(encoding="utf-8"))
        labels = tuple(str(label) for spec in data.values() for label in spec["classes"])
    except (
        OSError,
        UnicodeDecodeError,
        yaml.YAMLError,
        AttributeError,
        KeyError,
        TypeError,
    ):  # let the loader name the problem
        labels = ()
    return load_vocabulary(path, labels)


def evaluate_scores(
    truth_path: Path,
    captions_dir: Path,
    *,
    cache: Path,
    concepts_path: Path | None = None,
    score_map_path: Path | None = None,
    durations_path: Path | None = None,
    dialogue_path: Path | None = None,
) -> SeparabilityReport:
    """Read annotations and every annotated clip's sidecar (NAME.json, NAME.events.json or
    NAME.sounds.json), then score.

    `cache` is the model-pack cache, used to find the vocabulary of the pack the sidecars name.

    Raises:
        AnnotationError: a missing or malformed input, a missing sidecar, sidecars of different packs.
        PackError: the sidecars' pack is unknown.
    """
    from .packs import read_manifest

    concepts_file = concepts_path_for(truth_path, concepts_path)
    concepts = read_concepts(concepts_file)
    events = read_truth(truth_path, concepts)
    others: list[Collection[str]] = [
        read_durations(durations_path) if durations_path else {},
        read_dialogue(dialogue_path) if dialogue_path else {},
    ]
    tracks = {}
    for name in annotated_files(events, *others):
        path = find_sidecar(Path(captions_dir), name)
        if path is None:
            raise AnnotationError(
                Path(captions_dir) / f"{name}.json",
                "no JSON sidecar for this annotated clip",
                "caption it with --events-json CAPTIONS_DIR/NAME.json",
            )
        tracks[name] = read_sidecar_scores(path)
    packs = sorted({t.pack for t in tracks.values()})
    if len(packs) != 1:
        raise AnnotationError(
            captions_dir,
            f"sidecars of {len(packs)} model packs ({', '.join(packs)})",
            "evaluate each pack's sidecars in a folder of their own",
        )
    vocabulary = vocabulary_from_file(read_manifest(packs[0], cache).vocabulary)
    override = read_score_map(score_map_path) if score_map_path else {}
    truth_concepts = sorted({e.concept for e in events})
    score_map = resolve_score_map(
        concepts, truth_concepts, vocabulary, override, source=score_map_path or concepts_file
    )
    return separability(events, tracks, score_map)


def _number(value: float | None) -> str:
    return "-" if value is None else f"{value:.3f}"


def separability_table(report: SeparabilityReport) -> str:
    """A plain-text table: one row per truth concept and the class-balanced means."""
    rows = [("concept", "positives", "AUC", "AP", "d'", "scored by")]
    for name, r in sorted(report.concepts.items()):
        d_text = (
            _number(r.d_prime)
            if r.d_prime is not None or r.auc is None
            else ("inf" if r.auc == 1.0 else "-inf")
        )
        rows.append(
            (
                name,
                f"{r.positives}/{r.positives + r.negatives}",
                _number(r.auc),
                _number(r.average_precision),
                d_text,
                ", ".join(r.score_concepts),
            )
        )
    rows.append(
        (
            "balanced mean",
            "",
            _number(report.auc),
            _number(report.average_precision),
            _number(report.d_prime),
            "",
        )
    )
    widths = [max(len(row[i]) for row in rows) for i in range(len(rows[0]))]
    lines = [
        "  ".join(
            cell.ljust(w) if i in (0, 5) else cell.rjust(w) for i, (cell, w) in enumerate(zip(row, widths))
        ).rstrip()
        for row in rows
    ]
    rule = "-" * max(len(line) for line in lines)
    lines[1:1] = [rule]
    lines[-1:-1] = [rule]
    lines.append(
        f"{report.files} file(s), {report.patches} patches; d' of the balanced mean is taken from the "
        "balanced AUC"
    )
    return "\n".join(lines)


def separability_json(report: SeparabilityReport) -> dict[str, Any]:
    """A JSON-ready report; `balanced` holds the class-balanced auc, average_precision and d_prime."""

    def rounded(value: float | None) -> float | None:
        return None if value is None else round(value, 6)

    return {
        "files": report.files,
        "patches": report.patches,
        "balanced": {
            "auc": rounded(report.auc),
            "average_precision": rounded(report.average_precision),
            "d_prime": rounded(report.d_prime),
        },
        "concepts": {
            name: {
                "score_concepts": list(r.score_concepts),
                "positives": r.positives,
                "negatives": r.negatives,
                "auc": rounded(r.auc),
                "average_precision": rounded(r.average_precision),
                "d_prime": rounded(r.d_prime),
            }
            for name, r in sorted(report.concepts.items())
        },
    }
