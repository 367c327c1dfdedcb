"""Fitting concept heads over embeddings, one-vs-rest and cross-validated.

Used by `captioner teach` and by the recipe that trains the built-in heads. Only numpy and
scipy. Linear heads (logistic regression; scipy's L-BFGS fits all of them at once) suit a
user's few clips; the built-in heads, learnt from a larger corpus, read one shared hidden
ReLU layer (a small network trained with Adam, several seeds averaged), which held out better.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from scipy.optimize import minimize

from .heads import HeadSet, NewConcept, calibration_knots, forward, knot_scores
from .separability import average_precision, roc_auc

POSITIVE, NEGATIVE, IGNORED = 1, 0, -1


@dataclass(frozen=True, slots=True)
class HeadReport:
    """Cross-validated quality of one head (patches held out by clip group)."""

    concept: str
    positive_patches: int
    negative_patches: int
    positive_groups: int  # clips (or files) the positives come from
    auc: float | None
    average_precision: float | None


@dataclass(frozen=True, slots=True, eq=False)
class TrainingSet:
    """Patches to learn from.

    features: (n, d) float32 embeddings (then class probabilities, when uses_class_scores);
    labels: (n, n_heads) int8, POSITIVE, NEGATIVE or
    IGNORED (neither: e.g. a parent sound, or a quiet stretch of a labelled clip);
    groups: (n,) int clip numbers, so that folds never split one recording.
    """

    features: np.ndarray
    labels: np.ndarray
    groups: np.ndarray
    concepts: tuple[str, ...]
    new_concepts: Mapping[str, NewConcept] = field(default_factory=dict)
    uses_class_scores: bool = False  # features end with the classifier's class probabilities


def fit_logistic(
    x: np.ndarray, labels: np.ndarray, *, l2: float, max_iter: int = 400
) -> tuple[np.ndarray, np.ndarray]:
    """Weights (n_heads, d) and biases (n_heads,) of class-balanced, L2-penalised logistic heads.

    Each head minimises  0.5 * mean loss(positives) + 0.5 * mean loss(negatives)
    + l2/2 * |w|^2  over the rows it does not ignore; the bias is not penalised. This is
    scikit-learn's LogisticRegression(class_weight="balanced", C=1 / (l2 * n_used)).
    """
    x = np.asarray(x, dtype=np.float32)
    d = x.shape[1]
    weight, target = _balanced(labels)
    h = labels.shape[1]

    def loss(theta: np.ndarray) -> tuple[float, np.ndarray]:
        w = theta[: d * h].reshape(d, h).astype(np.float32)
        b = theta[d * h :].astype(np.float32)
        z = x @ w + b
        # log(1 + e^z) - y z, written to stay finite for large |z|
        value = np.logaddexp(0.0, z) - target * z
        p = 0.5 * (1.0 + np.tanh(0.5 * z))
        residual = (weight * (p - target)).astype(np.float32)
        grad_w = x.T @ residual + l2 * w
        total = float((weight * value).sum() + 0.5 * l2 * float((w.astype(np.float64) ** 2).sum()))
        return total, np.concatenate([grad_w.ravel(), residual.sum(axis=0)]).astype(np.float64)

    result = minimize(loss, np.zeros(d * h + h), jac=True, method="L-BFGS-B", options={"maxiter": max_iter})
    theta = result.x
    return theta[: d * h].reshape(d, h).T.astype(np.float32), theta[d * h :].astype(np.float32)


def _balanced(labels: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Row weights (n, n_heads): each head's positives and negatives weigh half each, IGNORED
    rows nothing; and the 0/1 targets."""
    used = labels >= 0
    positive = labels == POSITIVE
    n_pos = np.maximum(positive.sum(axis=0), 1)
    n_neg = np.maximum((used & ~positive).sum(axis=0), 1)
    return np.where(positive, 0.5 / n_pos, 0.5 / n_neg) * used, positive.astype(np.float32)


def fit_layered(
    x: np.ndarray,
    labels: np.ndarray,
    *,
    hidden: int,
    seed: int,
    epochs: int = 12,
    dropout: float = 0.2,
    weight_decay: float = 1e-4,
    batch: int = 512,
    rate: float = 1e-3,
    min_steps: int = 2000,
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """(hidden weights (hidden, d), hidden bias, weights (n_heads, hidden), bias) of heads that
    share one ReLU layer, minimising fit_logistic's class-balanced loss by Adam in mini-batches
    (dropout on the hidden layer, L2 weight decay). Expects standardised features. Small sets
    get more epochs, at least min_steps updates in all: a few epochs of a few batches leave the
    heads' logits too flat to calibrate."""
    rng = np.random.default_rng(seed)
    x = np.asarray(x, dtype=np.float32)
    n, d = x.shape
    weight, target = _balanced(labels)
    weight = (weight * n).astype(np.float32)  # scaled by n so that a batch mean has the usual size
    params = [
        (rng.normal(size=(d, hidden)) * np.sqrt(2.0 / d)).astype(np.float32),
        np.zeros(hidden, np.float32),
        (rng.normal(size=(hidden, labels.shape[1])) * np.sqrt(1.0 / hidden)).astype(np.float32),
        np.zeros(labels.shape[1], np.float32),
    ]
    first, second = [np.zeros_like(p) for p in params], [np.zeros_like(p) for p in params]
    step = 0
    batches = -(-n // batch)
    for _epoch in range(max(epochs, -(-min_steps // batches))):
        order = rng.permutation(n)
        for start in range(0, n, batch):
            rows = order[start : start + batch]
            w1, b1, w2, b2 = params
            pre = x[rows] @ w1 + b1
            act = np.maximum(pre, 0.0)
            if dropout:
                act *= (rng.random(act.shape) >= dropout) / (1.0 - dropout)
            z = act @ w2 + b2
            p = 0.5 * (1.0 + np.tanh(0.5 * z))
            g = (p - target[rows]) * weight[rows] / len(rows)
            back = g @ w2.T
            back[pre <= 0] = 0.0
            grads = [
                x[rows].T @ back + weight_decay * w1,
                back.sum(axis=0),
                act.T @ g + weight_decay * w2,
                g.sum(axis=0),
            ]
            step += 1
            for i, grad in enumerate(grads):  # Adam, the usual constants
                first[i] = 0.9 * first[i] + 0.1 * grad
                second[i] = 0.999 * second[i] + 0.001 * grad * grad
                corrected = first[i] / (1 - 0.9**step), second[i] / (1 - 0.999**step)
                params[i] -= rate * corrected[0] / (np.sqrt(corrected[1]) + 1e-8)
    w1, b1, w2, b2 = params
    return w1.T.copy(), b1, w2.T.copy(), b2


def _standardiser(x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    mean = x.mean(axis=0)
    scale = x.std(axis=0)
    return mean.astype(np.float32), np.where(scale > 1e-6, scale, 1.0).astype(np.float32)


def _fit_standardised(x: np.ndarray, labels: np.ndarray, l2: float) -> tuple[np.ndarray, np.ndarray]:
    """Fit on standardised features, return weights for the raw features."""
    mean, scale = _standardiser(x)
    w, b = fit_logistic((x - mean) / scale, labels, l2=l2)
    raw_w = w / scale
    return raw_w.astype(np.float32), (b - raw_w @ mean).astype(np.float32)


_Model = tuple[np.ndarray | None, np.ndarray | None, np.ndarray, np.ndarray]  # hidden w, b; w, b


def _fit_model(x: np.ndarray, labels: np.ndarray, l2: float, hidden: int, seeds: int, seed: int) -> _Model:
    """Linear heads (hidden 0) or `seeds` layered fits averaged, as one model on raw features.

    The seeds' hidden layers are stacked into one wider layer and their output weights divided
    by the number of seeds, so the model's logits are the mean of theirs."""
    if hidden <= 0:
        w, b = _fit_standardised(x, labels, l2)
        return None, None, w, b
    mean, scale = _standardiser(x)
    standard = (x - mean) / scale
    fits = [fit_layered(standard, labels, hidden=hidden, seed=seed + k) for k in range(seeds)]
    hidden_w = np.vstack([hw / scale for hw, _hb, _w, _b in fits])  # standardisation folded in
    hidden_b = np.concatenate([hb - hw @ (mean / scale) for hw, hb, _w, _b in fits])
    weights = np.hstack([w for _hw, _hb, w, _b in fits]) / seeds
    bias = np.mean([b for *_, b in fits], axis=0)
    return (
        hidden_w.astype(np.float32),
        hidden_b.astype(np.float32),
        weights.astype(np.float32),
        bias.astype(np.float32),
    )


def fold_of(groups: np.ndarray, folds: int) -> np.ndarray:
    """Fold number per row, the same for every row of a group (a stable hash of its number)."""
    return ((np.asarray(groups, dtype=np.int64) * 2654435761) % 2**32 % folds).astype(np.int64)


def train_heads(
    data: TrainingSet,
    *,
    l2: float = 1e-3,
    folds: int = 5,
    hidden: int = 0,
    seeds: int = 1,
    info: Mapping[str, Any] | None = None,
    say: Callable[[str], None] = lambda _m: None,
) -> tuple[HeadSet, list[HeadReport]]:
    """Cross-validate, calibrate and fit one head per concept.

    hidden 0: linear heads with penalty l2; else heads over a shared ReLU layer of `hidden`
    units, `seeds` fits averaged. The out-of-fold logits give each head's AUC and average
    precision and, from its negative patches, the calibration knots (see heads.calibrate); the
    final heads are then fitted on every patch.
    """
    x, labels = data.features, data.labels
    oof = np.zeros(labels.shape, np.float32)
    fold = fold_of(data.groups, folds)
    for k in range(folds):
        held = fold == k
        if not held.any() or held.all():
            continue
        say(f"fold {k + 1} of {folds}")
        model = _fit_model(x[~held], labels[~held], l2, hidden, seeds, seed=10 * k)
        oof[held] = forward(x[held], *model)
    say("final fit on every patch")
    hidden_w, hidden_b, weights, bias = _fit_model(x, labels, l2, hidden, seeds, seed=100)
    reports = []
    knots = np.zeros((len(data.concepts), knot_scores().size), np.float32)
    for j, concept in enumerate(data.concepts):
        pos, neg = labels[:, j] == POSITIVE, labels[:, j] == NEGATIVE
        knots[j] = calibration_knots(oof[neg, j] if neg.any() else np.zeros(1, np.float32))
        both = pos.any() and neg.any()
        used = pos | neg
        reports.append(
            HeadReport(
                concept,
                int(pos.sum()),
                int(neg.sum()),
                int(np.unique(data.groups[pos]).size),
                roc_auc(oof[used, j], pos[used]) if both else None,
                average_precision(oof[used, j], pos[used]) if both else None,
            )
        )
    metrics = {
        r.concept: {"auc": r.auc, "ap": r.average_precision, "clips": r.positive_groups} for r in reports
    }
    heads = HeadSet(
        data.concepts,
        weights,
        bias,
        knots,
        knot_scores(),
        uses_class_scores=data.uses_class_scores,
        new_concepts=dict(data.new_concepts),
        info={
            **(info or {}),
            "cross_validated": metrics,
            "folds": folds,
            "l2": l2,
            "hidden": hidden,
            "seeds": seeds,
        },
        hidden_weights=hidden_w,
        hidden_bias=hidden_b,
    )
    return heads, reports


def report_table(reports: list[HeadReport]) -> str:
    """Per-concept cross-validated AUC and AP as an aligned text table."""
    width = max([len("concept")] + [len(r.concept) for r in reports])
    lines = [f"{'concept':<{width}}  clips  positive  negative    AUC     AP"]
    for r in reports:
        auc = f"{r.auc:.3f}" if r.auc is not None else "–"
        ap = f"{r.average_precision:.3f}" if r.average_precision is not None else "–"
        lines.append(
            f"{r.concept:<{width}}  {r.positive_groups:>5}  {r.positive_patches:>8}"
            f"  {r.negative_patches:>8}  {auc:>5}  {ap:>5}"
        )
    return "\n".join(lines)
