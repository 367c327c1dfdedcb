"""Concept heads: the embedding output, head files, calibration, the scores stage and fitting."""

from __future__ import annotations

from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest

from captioner import packs
from captioner.errors import PackError
from captioner.events import concept_curves, detect_events
from captioner.features import Frontend
from captioner.fitting import NEGATIVE, POSITIVE, TrainingSet, fit_layered, fit_logistic, train_heads
from captioner.heads import (
    DECADES,
    FLOOR_DECADES,
    HeadSet,
    NewConcept,
    calibrate,
    calibration_knots,
    combine_heads,
    knot_scores,
    load_heads,
    save_heads,
    with_head_concepts,
)
from captioner.scores import ScoreTrack, compute_scores
from captioner.style import Detection
from captioner.vocabulary import Kind


def _heads(concepts: tuple[str, ...], width: int, seed: int = 0) -> HeadSet:
    rng = np.random.default_rng(seed)
    n = len(concepts)
    knots = np.sort(rng.normal(size=(n, knot_scores().size)), axis=1).astype(np.float32)
    return HeadSet(
        concepts,
        rng.normal(size=(n, width)).astype(np.float32),
        rng.normal(size=n).astype(np.float32),
        knots,
        knot_scores(),
        new_concepts={c: NewConcept(c.replace("_", " "), c.replace("_", " ") + "s") for c in concepts},
        info={"trained_on": "test"},
    )


def _layered(concepts: tuple[str, ...], width: int, hidden: int, seed: int = 0, **fields: object) -> HeadSet:
    rng = np.random.default_rng(seed + 100)
    return replace(
        _heads(concepts, hidden, seed),
        hidden_weights=rng.normal(size=(hidden, width)).astype(np.float32),
        hidden_bias=rng.normal(size=hidden).astype(np.float32),
        **fields,  # type: ignore[arg-type]
    )


def test_embedding_output_is_the_input_of_the_final_layer(pack: packs.LoadedPack) -> None:
    # Independent check from the graph itself: the last Gemm's 8-bit weights, dequantized by
    # the graph's own scale and zero point, applied to the embedding output give the logits
    # that the class output carries (up to its 8-bit output step).
    import onnx
    from onnx import numpy_helper

    model = onnx.load(str(pack.manifest.file_path(pack.manifest.model)))  # with its external weights
    graph = model.graph
    values = {init.name: numpy_helper.to_array(init) for init in graph.initializer}
    gemm = next(node for node in graph.node if node.op_type == "Gemm")
    assert gemm.input[0] == pack.manifest.embedding
    dequant = next(node for node in graph.node if gemm.input[1] in node.output)
    quant = next(node for node in graph.node if dequant.input[0] in node.output)
    raw, scale, zero = (values[name] for name in quant.input)
    info = np.iinfo(zero.dtype)  # QuantizeLinear semantics (ONNX operator spec): round, shift, saturate
    q = np.clip(np.round(raw / scale) + zero.astype(np.int32), info.min, info.max)
    weight = (q.astype(np.float32) - zero.astype(np.float32)) * scale
    bias = values[gemm.input[2]]
    rng = np.random.default_rng(5)
    patches = rng.normal(-4, 2, (6, 96, 64)).astype(np.float32)
    probabilities, embeddings = pack.classifier.with_embeddings(patches)
    assert embeddings is not None and embeddings.shape == (6, 1024)
    transposed = any(a.name == "transB" and a.i == 1 for a in gemm.attribute)
    logits = embeddings @ (weight.T if transposed else weight) + bias
    out_scale, _ = pack.classifier.output_quant or (1.0, 0.0)
    expected = 1 / (1 + np.exp(-logits))
    # one output step of the 8-bit logits moves a probability by at most scale / 4
    assert np.abs(expected - probabilities).max() <= out_scale / 4 + 1e-4
    np.testing.assert_array_equal(pack.classifier(patches), probabilities)


def test_head_file_round_trips(tmp_path: Path) -> None:
    heads = _heads(("gate_squeak", "kettle_click"), 16)
    save_heads(tmp_path / "h.heads.npz", heads)
    back = load_heads(tmp_path / "h.heads.npz")
    assert back.concepts == heads.concepts and back.new_concepts == heads.new_concepts
    np.testing.assert_array_equal(back.weights, heads.weights)
    np.testing.assert_array_equal(back.knots, heads.knots)
    assert back.info == {"trained_on": "test"}
    x = np.random.default_rng(1).normal(size=(7, 16)).astype(np.float32)
    np.testing.assert_array_equal(back(x, np.zeros((7, 0))), heads(x, np.zeros((7, 0))))


def test_layered_head_file_round_trips_and_is_checked(tmp_path: Path) -> None:
    heads = _layered(("gate_squeak", "kettle_click"), 16, 8)
    save_heads(tmp_path / "h.heads.npz", heads)
    back = load_heads(tmp_path / "h.heads.npz")
    assert back.hidden_weights is not None and back.hidden_bias is not None and back.n_inputs == 16
    np.testing.assert_array_equal(back.hidden_weights, heads.hidden_weights)
    x = np.random.default_rng(1).normal(size=(7, 16)).astype(np.float32)
    # The logits are a ReLU layer then a linear one, written out here with numpy alone.
    expected = np.maximum(x @ heads.hidden_weights.T + heads.hidden_bias, 0) @ heads.weights.T + heads.bias
    np.testing.assert_allclose(back.raw(x, np.zeros((7, 0))), expected, rtol=1e-5, atol=1e-5)
    bad = replace(heads, hidden_bias=np.zeros(5, np.float32))  # 5 biases for 8 hidden units
    save_heads(tmp_path / "bad.heads.npz", bad)
    with pytest.raises(PackError, match="do not fit together"):
        load_heads(tmp_path / "bad.heads.npz")


def test_combined_head_files_give_each_head_its_own_scores() -> None:
    # A user's linear file (embedding only) beside a built-in layered file that also reads the
    # class scores: one stack, and every head scores exactly what its own file scores.
    linear = _heads(("gate_squeak",), 16)
    layered = _layered(("kettle_click", "door_chime"), 16 + 5, 8, seed=2, uses_class_scores=True)
    both = combine_heads([linear, layered], 16, 5, Path("pack.yaml"))
    assert both is not None and both.concepts == ("gate_squeak", "kettle_click", "door_chime")
    rng = np.random.default_rng(4)
    emb, cls = rng.normal(size=(9, 16)).astype(np.float32), rng.uniform(size=(9, 5)).astype(np.float32)
    alone = np.hstack([linear.raw(emb, cls), layered.raw(emb, cls)])
    np.testing.assert_allclose(both.raw(emb, cls), alone, rtol=1e-5, atol=1e-4)
    two_linear = combine_heads([linear, _heads(("door_chime",), 16, seed=3)], 16, 5, Path("pack.yaml"))
    assert two_linear is not None and two_linear.hidden_weights is None


def test_head_file_checks(tmp_path: Path) -> None:
    path = tmp_path / "h.heads.npz"
    save_heads(path, _heads(("gate_squeak",), 8))
    with pytest.raises(PackError, match="SHA-256"):
        load_heads(path, expected_sha256="0" * 64)
    (tmp_path / "bad.npz").write_bytes(b"not a zip")
    with pytest.raises(PackError, match="not a captioner head file"):
        load_heads(tmp_path / "bad.npz")


def test_calibration_reads_as_the_negatives_false_positive_rate() -> None:
    rng = np.random.default_rng(2)
    negatives = rng.normal(size=200_000)
    knots = calibration_knots(negatives)
    assert np.all(np.diff(knots) > 0)
    # 1 % of negatives above = 2 decades, 0.1 % = 3 decades, mapped by the module's formula.
    # The shares are checked against the normal distribution's survival function (scipy),
    # not against our own quantiles.
    from scipy.stats import norm

    def expected(decades: float) -> float:
        return (decades - FLOOR_DECADES) / (DECADES - FLOOR_DECADES)

    for decades in (2.0, 3.0):
        z = float(norm.isf(10.0**-decades))
        value = calibrate(np.array([[z]], np.float32), knots[None, :], knot_scores())[0, 0]
        assert value == pytest.approx(expected(decades), abs=0.02)
    fresh = rng.normal(size=200_000).astype(np.float32)
    scored = calibrate(fresh[:, None], knots[None, :], knot_scores())[:, 0]
    assert np.mean(scored >= expected(3.0)) == pytest.approx(1e-3, rel=0.35)
    assert np.mean(scored == 0.0) == pytest.approx(1 - 10**-FLOOR_DECADES, abs=0.01)


def _track(head_scores: np.ndarray, concepts: tuple[str, ...], n_classes: int = 521) -> ScoreTrack:
    n = head_scores.shape[0]
    scores = np.zeros((n, n_classes), np.float32)
    return ScoreTrack(scores, 480, 960, np.zeros(n * 48, np.float32), 10.0, n * 480, head_scores, concepts)


def test_scores_stage_uses_heads_where_present_and_classes_elsewhere(pack: packs.LoadedPack) -> None:
    vocabulary = pack.vocabulary
    dog = vocabulary.concepts()["dog"][0].index
    cat = vocabulary.concepts()["cat"][0].index
    track = _track(np.array([[0.9], [0.1]], np.float32), ("dog",))
    track.scores[:, dog] = 0.2  # the class says little: the head decides
    track.scores[:, cat] = [0.3, 0.7]
    curves = concept_curves(track, vocabulary)
    # An ordinary sound's head is read with 1.0 at one negative in 10**4 instead of the file's
    # 10**DECADES: 0.9 in the file = 4.65 decades (past 4: 1.0), 0.1 = 1.85 decades -> 0.14.
    decades = FLOOR_DECADES + np.array([0.9, 0.1]) * (DECADES - FLOOR_DECADES)
    expected = np.clip((decades - FLOOR_DECADES) / (4.0 - FLOOR_DECADES), 0, 1)
    np.testing.assert_allclose(curves["dog"][0], expected)
    np.testing.assert_allclose(curves["dog"][0], [1.0, 0.14], atol=1e-6)
    np.testing.assert_allclose(curves["cat"][0], [0.3, 0.7])


def test_an_alert_head_adds_to_its_classes_but_never_takes_away(pack: packs.LoadedPack) -> None:
    # A phone is an attention sound (priority 4): a head that misses a ring the Telephone class
    # hears must not silence it, while a head that hears what the class misses still counts.
    vocabulary = pack.vocabulary
    assert vocabulary.concepts()["telephone"][0].priority >= 4 > vocabulary.concepts()["dog"][0].priority
    phone = vocabulary.concepts()["telephone"][0].index
    track = _track(np.array([[0.1], [0.9]], np.float32), ("telephone",))
    track.scores[:, phone] = [0.8, 0.2]
    np.testing.assert_allclose(concept_curves(track, vocabulary)["telephone"][0], [0.8, 0.9])


def test_a_head_found_sound_is_worded_by_its_concept_unless_a_class_heard_it(pack: packs.LoadedPack) -> None:
    # The knock concept's classes are Knock then Tap. When only the head hears the sound, a
    # faint Tap score must not choose the wording: the concept's first class names it.
    vocabulary = pack.vocabulary
    tap = next(e.index for e in vocabulary.concepts()["knock"] if e.label == "Tap")
    head = np.array([[0.0], [0.9], [0.9], [0.0]], np.float32)
    settings = Detection(onset_refine=False)
    faint = _track(head, ("knock",))
    faint.scores[1:3, tap] = 0.05
    (event,) = [e for e in detect_events(faint, vocabulary, settings) if e.concept == "knock"]
    assert event.label == "Knock" and event.phrase == "knocking"
    heard = _track(head, ("knock",))
    heard.scores[1:3, tap] = 0.5  # the Tap class itself passed the onset threshold
    (event,) = [e for e in detect_events(heard, vocabulary, settings) if e.concept == "knock"]
    assert event.label == "Tap"


def test_a_head_brings_a_new_concept_into_the_vocabulary(pack: packs.LoadedPack) -> None:
    heads = _heads(("gate_squeak",), 1024)
    vocabulary = with_head_concepts(pack.vocabulary, heads)
    entry = vocabulary.concepts()["gate_squeak"][0]
    assert entry.phrase == "gate squeak" and entry.kind is Kind.TRANSIENT and entry.index == -1
    track = _track(np.array([[0.2], [0.8]], np.float32), ("gate_squeak",))
    np.testing.assert_allclose(concept_curves(track, vocabulary)["gate_squeak"][0], [0.28, 1.0], atol=1e-6)


def test_compute_scores_applies_heads_to_level_averaged_embeddings(pack: packs.LoadedPack) -> None:
    rng = np.random.default_rng(8)
    samples = (0.1 * rng.normal(size=16000 * 3)).astype(np.float32)
    heads = _heads(("gate_squeak",), 1024)
    frontend: Frontend = pack.manifest.frontend
    track = compute_scores(
        [samples],
        pack.classifier,
        frontend,
        hop_ms=480,
        level_spread_db=6.0,
        heads=heads,
        keep_embeddings=True,
    )
    plain = compute_scores([samples], pack.classifier, frontend, hop_ms=480, level_spread_db=6.0)
    np.testing.assert_array_equal(track.scores, plain.scores)  # heads change no class score
    assert track.embeddings is not None and track.head_scores.shape == (track.n_patches, 1)
    np.testing.assert_allclose(track.head_scores, heads(track.embeddings, track.scores), atol=1e-6)


def test_fit_matches_scikit_learn_logistic_regression() -> None:
    # Reference: scikit-learn's LogisticRegression with balanced class weights; our penalty
    # l2 = 1 / (C * n) is the same objective scaled by a constant.
    from sklearn.linear_model import LogisticRegression

    rng = np.random.default_rng(0)
    x = rng.normal(size=(300, 6)).astype(np.float32)
    y = (x[:, 0] - 0.7 * x[:, 2] + rng.normal(size=300) > 0.8).astype(np.int8)
    w, b = fit_logistic(x, y[:, None], l2=1.0 / (0.5 * 300))
    ref = LogisticRegression(C=0.5, class_weight="balanced", tol=1e-10, max_iter=10_000).fit(x, y)
    np.testing.assert_allclose(w[0], ref.coef_[0], atol=2e-3)
    assert b[0] == pytest.approx(ref.intercept_[0], abs=2e-3)


def test_training_separates_tones_from_noise(pack: packs.LoadedPack) -> None:
    # A tiny made-up corpus: 12 short tone clips against 12 noise clips, embedded by the real pack.
    from captioner.teach import embed

    rng = np.random.default_rng(3)
    t = np.arange(16000) / 16000
    features, labels, groups = [], [], []
    for clip in range(24):
        if clip % 2 == 0:
            audio = 0.3 * np.sin(2 * np.pi * rng.uniform(500, 3000) * t)
        else:
            audio = rng.uniform(0.02, 0.3) * rng.normal(size=t.size)
        done = embed(audio.astype(np.float32), pack, hop_ms=480, level_spread_db=0.0)
        features.append(done.embeddings)
        labels.append(np.full((len(done.embeddings), 1), POSITIVE if clip % 2 == 0 else NEGATIVE, np.int8))
        groups.append(np.full(len(done.embeddings), clip))
    data = TrainingSet(np.concatenate(features), np.concatenate(labels), np.concatenate(groups), ("tone",))
    heads, reports = train_heads(data, folds=3)
    assert reports[0].auc is not None and reports[0].auc > 0.95
    assert reports[0].positive_groups == 12
    assert heads.weights.shape == (1, 1024)
    layered, reports = train_heads(data, folds=3, hidden=16, seeds=2)
    assert reports[0].auc is not None and reports[0].auc > 0.95
    assert layered.hidden_weights is not None and layered.hidden_weights.shape == (32, 1024)
    logits = layered.raw(data.features, np.zeros((len(data.features), 0), np.float32))[:, 0]
    tone = data.labels[:, 0] == POSITIVE
    assert logits[tone].min() > logits[~tone].max()  # the final fit, not only the folds, separates


def test_a_hidden_layer_learns_what_a_linear_head_cannot() -> None:
    # Positives where two features share a sign (XOR): no line separates them. AUC by
    # scikit-learn's roc_auc_score on fresh points, not by our own metric.
    from sklearn.metrics import roc_auc_score

    rng = np.random.default_rng(5)
    x = rng.normal(size=(3000, 4)).astype(np.float32)
    y = (x[:, 0] * x[:, 1] > 0).astype(np.int8)
    fresh = rng.normal(size=(1000, 4)).astype(np.float32)
    truth = fresh[:, 0] * fresh[:, 1] > 0
    hidden_w, hidden_b, w, b = fit_layered(x, y[:, None], hidden=16, seed=0, epochs=30)
    layered = np.maximum(fresh @ hidden_w.T + hidden_b, 0) @ w.T + b
    assert roc_auc_score(truth, layered[:, 0]) > 0.9
    lw, lb = fit_logistic(x, y[:, None], l2=1e-3)
    assert roc_auc_score(truth, (fresh @ lw.T + lb)[:, 0]) < 0.65
