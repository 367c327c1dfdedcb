"""Concept heads: small learned layers over the classifier's embedding, one per concept.

The classifier's own labels were not made for captions; a head per concept, trained on
labelled recordings, reads the network's embedding instead. A head file (.npz, no pickles)
holds for each concept an output layer (over the inputs, or over one hidden layer that the
file's heads share) and a calibration of its raw output:

    decades = -log10(share of held-out negative patches scoring as high)
    score = clip((decades - FLOOR_DECADES) / (DECADES - FLOOR_DECADES), 0, 1)

so a score means the same thing for every concept: 0 = as common as the commonest 3 % of
negative patches, 0.43 = one negative patch in a thousand scores this high, 0.71 = one in ten
thousand. Like a classifier's probabilities, most patches that hold none of the sound score 0.
Heads may also name new concepts with their own wording (a user's own sounds); built-in heads
refine concepts of the vocabulary.
"""

from __future__ import annotations

import hashlib
import io
import json
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any

import numpy as np

from .errors import PackError
from .vocabulary import ClassEntry, Kind, Vocabulary

DECADES = 5.0  # score 1.0 = one negative in 10**DECADES
# Below this many decades a score is 0: the other sounds and pauses of a soundtrack score
# there, and hysteresis thresholds near 0.1-0.3 must not keep an event alive on them.
FLOOR_DECADES = 1.5
_KNOT_DECADES = np.linspace(0.0, DECADES, 11)  # calibration knots every half decade
FORMAT = "captioner-heads-1"
_BLOCK = 2048  # patches per block when heads are applied


@dataclass(frozen=True, slots=True)
class NewConcept:
    """Wording of a concept that a head adds to the vocabulary."""

    phrase: str  # bracket convention: "gate squeaking"
    phrase_present: str  # capitals convention: "gate squeaks"
    kind: Kind = Kind.TRANSIENT
    priority: int = 3


@dataclass(frozen=True, slots=True, eq=False)
class HeadSet:
    """Heads with calibrations, in one stack: linear, or over one shared hidden layer.

    inputs: the embedding (n, d), then the class probabilities when `uses_class_scores`.
    hidden_weights: (n_hidden, n_inputs) and hidden_bias: (n_hidden,) of a ReLU layer that
        every head reads, or None for linear heads that read the inputs themselves.
    weights: (n_heads, n_hidden or n_inputs) float32; bias: (n_heads,); knots: (n_heads,
        n_knots) raw logits at which the held-out negatives' survival falls by each half
        decade; knot_scores: the score at each knot (see the module docstring).
    """

    concepts: tuple[str, ...]
    weights: np.ndarray
    bias: np.ndarray
    knots: np.ndarray
    knot_scores: np.ndarray
    uses_class_scores: bool = False
    new_concepts: Mapping[str, NewConcept] = field(default_factory=dict)
    info: Mapping[str, Any] = field(default_factory=dict)  # what the heads were trained on, metrics
    hidden_weights: np.ndarray | None = None
    hidden_bias: np.ndarray | None = None

    @property
    def n_inputs(self) -> int:
        first = self.weights if self.hidden_weights is None else self.hidden_weights
        return int(first.shape[1])

    def raw(self, embeddings: np.ndarray, class_scores: np.ndarray) -> np.ndarray:
        """Raw logits (n, n_heads) for embeddings (n, d) and class probabilities (n, n_classes)."""
        logits = np.empty((len(embeddings), len(self.concepts)), np.float32)
        for start in range(0, len(embeddings), _BLOCK):  # in blocks: an hour's inputs at once would be ~50 MB
            rows = slice(start, start + _BLOCK)
            x = (
                np.hstack([embeddings[rows], class_scores[rows]])
                if self.uses_class_scores
                else embeddings[rows]
            )
            logits[rows] = forward(x, self.hidden_weights, self.hidden_bias, self.weights, self.bias)
        return logits

    def __call__(self, embeddings: np.ndarray, class_scores: np.ndarray) -> np.ndarray:
        """Calibrated scores (n, n_heads) float32 in [0, 1]."""
        return calibrate(self.raw(embeddings, class_scores), self.knots, self.knot_scores)


def forward(
    inputs: np.ndarray,
    hidden_weights: np.ndarray | None,
    hidden_bias: np.ndarray | None,
    weights: np.ndarray,
    bias: np.ndarray,
) -> np.ndarray:
    """Logits of heads over `inputs`: through the ReLU layer when there is one, then linear."""
    x = inputs.astype(np.float32, copy=False)
    if hidden_weights is not None and hidden_bias is not None:
        x = np.maximum(x @ hidden_weights.T + hidden_bias, 0.0)
    logits: np.ndarray = x @ weights.T + bias
    return logits


def calibrate(logits: np.ndarray, knots: np.ndarray, knot_scores: np.ndarray) -> np.ndarray:
    """Map raw logits (n, n_heads) through each head's increasing knots to scores in [0, 1]."""
    out = np.empty(logits.shape, np.float32)
    for h in range(logits.shape[1]):
        out[:, h] = np.interp(logits[:, h], knots[h], knot_scores, left=0.0, right=1.0)
    return out


def calibration_knots(negative_logits: np.ndarray) -> np.ndarray:
    """Knots (n_knots,) from held-out negative logits: where their survival falls by each half decade.

    Survival levels beyond what the sample can show (fewer than 10**k negatives) continue the
    last measured slope, so the knots stay strictly increasing.
    """
    values = np.sort(np.asarray(negative_logits, dtype=np.float64))
    n = values.size
    knots = np.empty(_KNOT_DECADES.size)
    measurable = 10.0**_KNOT_DECADES <= n / 2  # at least two negatives above the knot
    for i, k in enumerate(_KNOT_DECADES):
        if measurable[i]:
            knots[i] = np.quantile(values, 1.0 - 10.0**-k) if k > 0 else values[0]
        else:
            step = max(knots[i - 1] - knots[i - 2], 1e-3) if i >= 2 else 1.0
            knots[i] = knots[i - 1] + step
    for i in range(1, knots.size):  # ties in the sample would make a flat step
        knots[i] = max(knots[i], knots[i - 1] + 1e-4)
    return knots.astype(np.float32)


def knot_scores() -> np.ndarray:
    """Calibrated score at each knot (see the module docstring)."""
    return np.clip((_KNOT_DECADES - FLOOR_DECADES) / (DECADES - FLOOR_DECADES), 0, 1).astype(np.float32)


def save_heads(path: Path, heads: HeadSet) -> None:
    """Write a head file (.npz, arrays plus one JSON text; no pickled objects)."""
    Path(path).write_bytes(heads_bytes(heads))


def heads_bytes(heads: HeadSet) -> bytes:
    """The contents of a head file."""
    meta = {
        "format": FORMAT,
        "concepts": list(heads.concepts),
        "uses_class_scores": heads.uses_class_scores,
        "new_concepts": {
            name: {
                "phrase": c.phrase,
                "phrase_present": c.phrase_present,
                "kind": c.kind.value,
                "priority": c.priority,
            }
            for name, c in heads.new_concepts.items()
        },
        "info": dict(heads.info),
    }
    hidden: dict[str, Any] = {}
    if heads.hidden_weights is not None and heads.hidden_bias is not None:
        hidden = {
            "hidden_weights": heads.hidden_weights.astype(np.float32),
            "hidden_bias": heads.hidden_bias.astype(np.float32),
        }
    handle = io.BytesIO()
    np.savez_compressed(
        handle,
        weights=heads.weights.astype(np.float32),
        bias=heads.bias.astype(np.float32),
        knots=heads.knots.astype(np.float32),
        knot_scores=heads.knot_scores.astype(np.float32),
        meta=np.array(json.dumps(meta, sort_keys=True)),
        **hidden,
    )
    return handle.getvalue()


def load_heads(path: Path, *, expected_sha256: str | None = None) -> HeadSet:
    """Read a head file, checking its SHA-256 when the pack pins one.

    Raises:
        PackError: missing, changed, or not a head file.
    """
    path = Path(path)
    try:
        data = path.read_bytes()
    except OSError as exc:
        raise PackError(
            path, f"cannot read the head file ({exc.strerror})", "check the pack's heads"
        ) from exc
    if expected_sha256 and hashlib.sha256(data).hexdigest() != expected_sha256:
        raise PackError(
            path, "head file does not match its SHA-256", "restore it or update the pack manifest"
        )
    try:
        with np.load(path, allow_pickle=False) as arrays:
            weights, bias = arrays["weights"], arrays["bias"]
            knots, scores = arrays["knots"], arrays["knot_scores"]
            meta = json.loads(str(arrays["meta"]))
            layered = "hidden_weights" in arrays.files
            hidden_w = arrays["hidden_weights"].astype(np.float32) if layered else None
            hidden_b = arrays["hidden_bias"].astype(np.float32) if layered else None
    except (OSError, ValueError, KeyError) as exc:
        raise PackError(
            path, f"not a captioner head file ({exc})", "train one with `captioner teach`"
        ) from exc
    if not isinstance(meta, dict) or meta.get("format") != FORMAT:
        raise PackError(path, "not a captioner head file (format)", "train one with `captioner teach`")
    concepts = tuple(str(c) for c in meta["concepts"])
    n = len(concepts)
    fits = weights.ndim == 2 and weights.shape[0] == n and bias.shape == (n,)
    fits = fits and knots.shape == (n, scores.size)
    if hidden_w is not None and hidden_b is not None:
        fits = fits and hidden_w.ndim == 2 and hidden_b.shape == (hidden_w.shape[0],)
        fits = fits and weights.shape[1] == hidden_w.shape[0]
    if not fits:
        raise PackError(path, "head arrays do not fit together", "train the head file again")
    try:
        new = {
            str(name): NewConcept(
                str(spec["phrase"]), str(spec["phrase_present"]), Kind(spec["kind"]), int(spec["priority"])
            )
            for name, spec in meta.get("new_concepts", {}).items()
        }
    except (KeyError, ValueError, TypeError) as exc:
        raise PackError(path, f"bad concept wording in the head file ({exc})", "train it again") from exc
    return HeadSet(
        concepts,
        weights.astype(np.float32),
        bias.astype(np.float32),
        knots.astype(np.float32),
        scores.astype(np.float32),
        bool(meta.get("uses_class_scores", False)),
        new,
        dict(meta.get("info", {})),
        hidden_w,
        hidden_b,
    )


def combine_heads(
    head_sets: Sequence[HeadSet], embedding_size: int, n_classes: int, where: Path
) -> HeadSet | None:
    """One stack of every head file of a pack; a concept in two files is an error.

    Raises:
        PackError: a head does not fit the classifier, or two files name one concept.
    """
    if not head_sets:
        return None
    seen: set[str] = set()
    for heads in head_sets:
        width = embedding_size + (n_classes if heads.uses_class_scores else 0)
        if heads.n_inputs != width:
            raise PackError(
                where,
                f"a head file expects {heads.n_inputs} inputs, the classifier gives {width}",
                "train the heads on this pack",
            )
        clash = seen & set(heads.concepts)
        if clash:
            raise PackError(where, f"concept(s) {sorted(clash)} have two heads", "keep one head per concept")
        seen |= set(heads.concepts)
    if len(head_sets) == 1:
        return head_sets[0]
    use_scores = any(h.uses_class_scores for h in head_sets)

    def widen(first_layer: np.ndarray, heads: HeadSet) -> np.ndarray:  # no class-score inputs: zeros
        if heads.uses_class_scores or not use_scores:
            return first_layer
        return np.pad(first_layer, ((0, 0), (0, n_classes)))

    combined = replace(
        head_sets[0],
        concepts=tuple(c for h in head_sets for c in h.concepts),
        bias=np.concatenate([h.bias for h in head_sets]),
        knots=np.vstack([h.knots for h in head_sets]),
        uses_class_scores=use_scores,
        new_concepts={k: v for h in head_sets for k, v in h.new_concepts.items()},
        info={"files": [dict(h.info) for h in head_sets]},
    )
    if all(h.hidden_weights is None for h in head_sets):
        return replace(combined, weights=np.vstack([widen(h.weights, h) for h in head_sets]))
    # One wider hidden layer; each file's heads read only their own hidden units.
    layers = [_as_layered(h) for h in head_sets]
    weights = np.zeros((len(combined.concepts), sum(w.shape[1] for w, *_ in layers)), np.float32)
    row = column = 0
    for w, *_ in layers:
        weights[row : row + w.shape[0], column : column + w.shape[1]] = w
        row, column = row + w.shape[0], column + w.shape[1]
    return replace(
        combined,
        weights=weights,
        bias=np.concatenate([b for _w, b, _hw, _hb in layers]),
        hidden_weights=np.vstack([widen(layer[2], h) for layer, h in zip(layers, head_sets, strict=True)]),
        hidden_bias=np.concatenate([hb for *_, hb in layers]),
    )


def _as_layered(heads: HeadSet) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """(weights, bias, hidden weights, hidden bias) giving the same logits through a ReLU layer.

    Linear heads pass through it exactly, as relu(z) - relu(-z) = z: hidden units for w and -w
    (their bias moves into the hidden layer, so the output bias of a linear head becomes 0).
    """
    if heads.hidden_weights is not None and heads.hidden_bias is not None:
        return heads.weights, heads.bias, heads.hidden_weights, heads.hidden_bias
    n = len(heads.concepts)
    eye = np.eye(n, dtype=np.float32)
    hidden_w = np.vstack([heads.weights, -heads.weights])
    hidden_b = np.concatenate([heads.bias, -heads.bias])
    return np.hstack([eye, -eye]), np.zeros(n, np.float32), hidden_w, hidden_b


def check_heads_fit(heads: HeadSet | None, vocabulary: Vocabulary, where: Path) -> None:
    """Every head refines a captioned concept of the vocabulary or brings its own wording.

    Raises:
        PackError: a head names an unknown concept without wording, or rewords a known one.
    """
    if heads is None:
        return
    known = vocabulary.concepts()
    for concept in heads.concepts:
        if concept in heads.new_concepts and concept in known:
            raise PackError(
                where,
                f"head concept {concept!r} is already in the vocabulary",
                "give your concept another name",
            )
        if concept not in heads.new_concepts and concept not in known:
            raise PackError(
                where, f"head concept {concept!r} is not in the vocabulary", "retrain with wording"
            )


def with_head_concepts(vocabulary: Vocabulary, heads: HeadSet | None) -> Vocabulary:
    """The vocabulary plus one entry (no classifier class: index -1) per concept a head adds."""
    if heads is None or not heads.new_concepts:
        return vocabulary
    added = tuple(
        ClassEntry(-1, f"head:{name}", name, c.phrase, c.phrase_present, c.kind, c.priority, None)
        for name, c in heads.new_concepts.items()
    )
    return Vocabulary(vocabulary.entries + added)
