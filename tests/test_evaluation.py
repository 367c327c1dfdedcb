"""`captioner evaluate`: caption quality and score separability.

Cross-checks against reference implementations from PyPI: event-based F1 against sed_eval,
ROC AUC and average precision against scikit-learn, d' against scipy's normal quantile.
The hand-made cases have answers known by construction.
"""

from __future__ import annotations

import json
import math
import re
import subprocess
import sys
import warnings
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.stats import norm
from sklearn.metrics import average_precision_score, roc_auc_score

from captioner.cli import main
from captioner.evaluation import QualityReport, caption_quality, keyword_pattern
from captioner.events import Span
from captioner.formats.annotations import AnnotationError, ConceptSpec, SidecarScores, TruthEvent, read_truth
from captioner.formats.subtitles import SubtitleCue, SubtitleFormat
from captioner.separability import (
    average_precision,
    d_prime,
    default_score_concepts,
    patch_labels,
    roc_auc,
    separability,
    vocabulary_from_file,
)

KEYWORDS = {
    "dog_bark": ("dog", "barking"),
    "door": ("door", "slam"),
    "alarm_clock": ("alarm clock", "beeping"),
}
VOCABULARY_FILE = Path(__file__).parents[1] / "captioner" / "data" / "yamnet_vocabulary.yaml"


def cue(start_ms: int, end_ms: int, text: str) -> SubtitleCue:
    return SubtitleCue(start_ms, end_ms, text)


def quality(
    events: list[TruthEvent],
    cues: dict[str, list[SubtitleCue]],
    *,
    collar_ms: int = 1000,
    durations_ms: dict[str, int] | None = None,
    dialogue: dict[str, list[Span]] | None = None,
) -> QualityReport:
    return caption_quality(
        events, cues, KEYWORDS, collar_ms=collar_ms, durations_ms=durations_ms, dialogue=dialogue
    )


# ---------------------------------------------------------------- hand-made caption cases

EVENTS = [
    TruthEvent("a", 2000, 3000, "dog_bark"),
    TruthEvent("a", 10000, 12000, "door"),
    TruthEvent("b", 5000, 6000, "dog_bark"),
]


def test_perfect_captions_score_one() -> None:
    cues = {
        "a": [cue(2000, 3000, "[dog barking]"), cue(10000, 12000, "[door slams]")],
        "b": [cue(5000, 6000, "[DOG BARKING]")],
    }
    report = quality(EVENTS, cues)
    overall = report.overall
    assert (overall.precision, overall.recall, overall.f1) == (1.0, 1.0, 1.0)
    assert overall.redundancy == 1.0 and overall.onset_error_ms == 0.0
    assert report.concepts["dog_bark"].events == 2 and report.concepts["dog_bark"].detected_events == 2


def test_empty_captions_score_zero() -> None:
    report = quality(EVENTS, {"a": [], "b": []})
    overall = report.overall
    # No cues: precision 0/0 is reported as 0 (sed_eval would give NaN), recall 0 of 3.
    assert (overall.precision, overall.recall, overall.f1) == (0.0, 0.0, 0.0)
    assert overall.redundancy is None and overall.onset_error_ms is None and overall.cues == 0


def test_wrong_words_at_the_right_times_score_zero() -> None:
    cues = {
        "a": [cue(2000, 3000, "[door slams]"), cue(10000, 12000, "[dog barking]")],
        "b": [cue(5000, 6000, "[music]")],
    }
    report = quality(EVENTS, cues)
    assert (report.overall.precision, report.overall.recall) == (0.0, 0.0)
    assert report.unnamed_cues == 1  # "[music]" names no concept
    assert report.concepts["door"].cues == 1 and report.concepts["door"].matched_cues == 0


def test_collar_edges() -> None:
    event = [TruthEvent("a", 10000, 11000, "door")]
    # Overlap is strict: a cue touching the widened event [9000, 12000) does not match it.
    assert quality(event, {"a": [cue(12000, 13000, "[door]")]}).overall.recall == 0.0
    assert quality(event, {"a": [cue(8000, 9000, "[door]")]}).overall.recall == 0.0
    assert quality(event, {"a": [cue(11999, 13000, "[door]")]}).overall.recall == 1.0
    assert quality(event, {"a": [cue(8000, 9001, "[door]")]}).overall.recall == 1.0
    # Shifted by more than the collar: no match with 1 s, a match once the collar is 2.5 s.
    late = {"a": [cue(13000, 14000, "[door slams]")]}
    assert quality(event, late).overall.f1 == 0.0
    assert quality(event, late, collar_ms=2500).overall.f1 == 1.0


def test_redundancy_and_onset_error_use_the_earliest_matching_cue() -> None:
    event = [TruthEvent("a", 10000, 14000, "door")]
    cues = {
        "a": [
            cue(9100, 10000, "[door creaks]"),
            cue(12000, 13000, "[door slams]"),
            cue(20000, 21000, "[door slams]"),
        ]
    }
    overall = quality(event, cues).overall
    assert overall.redundancy == 2.0  # two matched cues for one detected event
    assert overall.onset_error_ms == 900.0  # |9100 - 10000|
    assert overall.precision == pytest.approx(2 / 3) and overall.recall == 1.0


def test_keywords_are_whole_words_any_case_and_ignore_markup() -> None:
    pattern = keyword_pattern(["door", "alarm clock"])
    assert (
        pattern.search("[DOOR SLAMS]")
        and pattern.search("door-slam")
        and pattern.search("<i>alarm\nclock</i>")
    )
    assert (
        not pattern.search("[doorbell rings]")
        and not pattern.search("[alarm]")
        and not pattern.search("[outdoor]")
    )
    event = [TruthEvent("a", 1000, 2000, "alarm_clock")]
    assert quality(event, {"a": [cue(1000, 2000, "<c.sound>[alarm clock beeping]</c>")]}).overall.f1 == 1.0


def test_keywords_match_the_text_a_viewer_reads() -> None:
    keywords = {"pans": ("pots & pans",), "door": ("door",)}
    events = [TruthEvent("a", 1000, 2000, "pans")]

    def named(text: str, fmt: SubtitleFormat = "vtt") -> float:
        return caption_quality(
            events, {"a": [cue(1000, 2000, text)]}, keywords, formats={"a": fmt}
        ).overall.f1

    # W3C WebVTT: "&amp;" in cue text is an escaped "&"; SRT has no escapes and {\an8} is a
    # position code of the SRT trade (common practice), not text a viewer reads
    assert (
        named("<i>[pots &amp; pans clattering]</i>") == 1.0
        and named("{\\an8}[pots & pans clattering]", "srt") == 1.0
    )
    # tags join what they split: a viewer reads "doorbell", which does not name "door"
    doorbell = caption_quality(
        [TruthEvent("a", 1000, 2000, "door")], {"a": [cue(1000, 2000, "[door<c.x>bell</c> rings]")]}, keywords
    )
    assert doorbell.overall.matched_cues == 0 and doorbell.unnamed_cues == 1


def test_false_alarms_per_minute_of_truth_free_files() -> None:
    cues = {
        "a": [cue(2000, 3000, "[dog barking]")],
        "quiet": [
            cue(1000, 2000, "[dog barking]"),
            cue(5000, 6000, "[door slams]"),
            cue(8000, 9000, "[wind]"),
        ],
    }
    report = quality(
        [TruthEvent("a", 2000, 3000, "dog_bark")], cues, durations_ms={"a": 60000, "quiet": 30000}
    )
    assert report.truth_free_ms == 30000 and report.truth_free_files == 1
    assert (
        report.overall.false_alarm_cues == 3 and report.overall.false_alarms_per_minute == 6.0
    )  # 3 cues / 0.5 min
    assert report.concepts["door"].false_alarms_per_minute == 2.0
    assert report.overall.precision == 0.25  # false alarms are unmatched cues too


def test_truth_free_file_without_duration_is_left_out_with_a_warning() -> None:
    with pytest.warns(UserWarning, match="quiet"):
        report = quality([], {"quiet": [cue(1000, 2000, "[door]")]})
    assert report.overall.false_alarms_per_minute is None and report.truth_free_files == 0


def test_cues_over_dialogue() -> None:
    cues = {"a": [cue(2000, 3000, "[dog barking]"), cue(10000, 12000, "[door slams]")]}
    events = [TruthEvent("a", 2000, 3000, "dog_bark")]
    report = quality(events, cues, dialogue={"a": [Span(2500, 4000), Span(12000, 13000)]})
    assert report.overall.cues_over_dialogue == 1  # the second cue only touches the speech span
    assert (
        report.concepts["dog_bark"].cues_over_dialogue == 1
        and report.concepts["door"].cues_over_dialogue == 0
    )
    assert quality(events, cues).overall.cues_over_dialogue is None


# ---------------------------------------------------------------- cross-check: sed_eval


def _one_to_one_case(
    rng: np.random.Generator, collar_ms: int
) -> tuple[list[TruthEvent], dict[str, list[SubtitleCue]], list[tuple[str, float, float, str]]]:
    """Events far apart, each with at most one cue whose onset is within the collar, plus far-off
    and wrong-word cues: a case where cue overlap and sed_eval's onset pairing must agree."""
    labels = list(KEYWORDS)
    events: list[TruthEvent] = []
    cues: dict[str, list[SubtitleCue]] = {}
    estimates: list[tuple[str, float, float, str]] = []
    for name in ("f1", "f2", "f3"):
        cues[name] = []
        t = int(rng.integers(0, 3000))
        for _ in range(int(rng.integers(0, 6))):
            concept = labels[int(rng.integers(len(labels)))]
            length = int(rng.integers(300, 4000))
            events.append(TruthEvent(name, t, t + length, concept))
            roll = rng.random()
            if roll < 0.6:  # a correct cue starting within the collar of the onset
                start = max(0, t + int(rng.integers(-collar_ms + 50, collar_ms - 50)))
                said = concept
            elif roll < 0.8:  # right time, wrong words
                start, said = t, labels[(labels.index(concept) + 1) % len(labels)]
            else:
                start, said = -1, ""
            if start >= 0:
                end = start + int(rng.integers(500, 3000))
                cues[name].append(cue(start, end, f"[{KEYWORDS[said][0]}]"))
                estimates.append((name, start / 1000, end / 1000, said))
            t += length + 3 * collar_ms + 4000  # far enough that no cue reaches a neighbour
        if rng.random() < 0.7:  # a false alarm well after every event
            start = t + 2 * collar_ms
            said = labels[int(rng.integers(len(labels)))]
            cues[name].append(cue(start, start + 1000, f"[{KEYWORDS[said][0]}]"))
            estimates.append((name, start / 1000, start / 1000 + 1, said))
    return events, cues, estimates


@pytest.mark.parametrize("collar_ms", [500, 1000])
@pytest.mark.parametrize("seed", range(8))
def test_f1_matches_sed_eval_event_based(collar_ms: int, seed: int) -> None:
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        import sed_eval

    events, cues, estimates = _one_to_one_case(np.random.default_rng(seed), collar_ms)
    if not estimates or not events:
        pytest.skip("degenerate draw: sed_eval gives NaN where we give 0")
    # Reference: sed_eval.sound_event.EventBasedMetrics, onset-only pairing with t_collar in seconds.
    metrics = sed_eval.sound_event.EventBasedMetrics(
        event_label_list=list(KEYWORDS), t_collar=collar_ms / 1000, evaluate_onset=True, evaluate_offset=False
    )
    for name in cues:
        reference = [
            {
                "filename": name,
                "onset": e.start_ms / 1000,
                "offset": e.end_ms / 1000,
                "event_label": e.concept,
            }
            for e in events
            if e.file == name
        ]
        estimated = [
            {"filename": name, "onset": s, "offset": o, "event_label": label}
            for n, s, o, label in estimates
            if n == name
        ]
        metrics.evaluate(reference_event_list=reference, estimated_event_list=estimated)
    expected = metrics.results_overall_metrics()["f_measure"]
    ours = quality(events, cues, collar_ms=collar_ms, durations_ms=dict.fromkeys(cues, 60000)).overall
    assert ours.precision == pytest.approx(expected["precision"])
    assert ours.recall == pytest.approx(expected["recall"])
    assert ours.f1 == pytest.approx(0.0 if math.isnan(expected["f_measure"]) else expected["f_measure"])


# ---------------------------------------------------------------- separability measures

score_values = st.sampled_from([0.0, 0.1, 0.25, 0.5, 0.5, 0.75, 0.9, 1.0])  # few values: many ties


@settings(max_examples=200, deadline=None)
@given(
    st.lists(st.tuples(score_values, st.booleans()), min_size=2, max_size=60).filter(
        lambda rows: len({label for _, label in rows}) == 2
    )
)
def test_auc_and_average_precision_match_scikit_learn(rows: list[tuple[float, bool]]) -> None:
    scores = np.array([s for s, _ in rows])
    labels = np.array([label for _, label in rows])
    # Reference: sklearn.metrics.roc_auc_score and average_precision_score.
    assert roc_auc(scores, labels) == pytest.approx(roc_auc_score(labels, scores), abs=1e-12)
    assert average_precision(scores, labels) == pytest.approx(
        average_precision_score(labels, scores), abs=1e-12
    )


def test_d_prime_against_scipy_normal_quantile() -> None:
    assert d_prime(0.5) == 0.0
    # Phi(1 / sqrt(2)) = 0.76025, so AUC 0.76025 is d' = 1 (equal-variance normal model).
    assert d_prime(0.76025) == pytest.approx(1.0, abs=1e-4)
    for auc in (0.01, 0.3, 0.6, 0.9, 0.999):
        assert d_prime(auc) == pytest.approx(
            math.sqrt(2) * norm.ppf(auc), rel=1e-9
        )  # reference: scipy.stats.norm.ppf
    assert d_prime(1.0) == math.inf and d_prime(0.0) == -math.inf


def test_patch_labels_half_of_patch_or_half_of_event() -> None:
    # Patches of 960 ms every 480 ms: [0,960) [480,1440) [960,1920) [1440,2400) [1920,2880)
    long_event = patch_labels([(700, 2400)], 5, 480, 960)
    assert long_event.tolist() == [False, True, True, True, True]  # overlaps 260, 740, 960, 960, 480 ms
    short = patch_labels([(1900, 2100)], 5, 480, 960)  # 200 ms event: a patch needs 100 ms of it
    assert short.tolist() == [False, False, False, True, True]  # overlaps 0, 0, 20, 200, 180 ms


def test_patch_labels_long_event_edge_is_half_a_patch() -> None:
    # Event [0, 1440): patch [960,1920) holds 480 ms = exactly half, so it counts.
    assert patch_labels([(0, 1440)], 4, 480, 960).tolist() == [True, True, True, False]


def _track(curves: dict[str, list[float]], hop_ms: int = 500, patch_ms: int = 1000) -> SidecarScores:
    n = len(next(iter(curves.values())))
    return SidecarScores("yamnet-int8", hop_ms, patch_ms, n, {k: np.array(v) for k, v in curves.items()})


def test_separability_by_construction() -> None:
    # Ten patches of 1 s every 0.5 s; the dog barks over [2000, 3500): patches 3..6 hold half a patch of it.
    events = [TruthEvent("a", 2000, 3500, "dog_bark"), TruthEvent("a", 2000, 3500, "door")]
    dog = [0.1, 0.1, 0.2, 0.9, 0.8, 0.95, 0.7, 0.3, 0.1, 0.0]
    report = separability(
        events,
        {"a": _track({"dog": dog, "door": [1 - v for v in dog]})},
        {"dog_bark": ("dog",), "door": ("door",), "cough": ("cough_sneeze",)},
    )
    assert report.concepts["dog_bark"].positives == 4 and report.concepts["dog_bark"].negatives == 6
    assert report.concepts["dog_bark"].auc == 1.0 and report.concepts["dog_bark"].average_precision == 1.0
    assert report.concepts["dog_bark"].d_prime is None  # infinite
    assert report.concepts["door"].auc == 0.0  # scores inverted
    assert report.concepts["cough"].auc is None  # no positives: undefined, left out of the means
    assert report.auc == 0.5 and report.d_prime == 0.0


def test_missing_curve_scores_zero_everywhere() -> None:
    events = [TruthEvent("a", 0, 2000, "door")]
    report = separability(events, {"a": _track({"dog": [0.5] * 6})}, {"door": ("door",)})
    assert report.concepts["door"].auc == 0.5  # every patch tied at 0


def test_default_score_concepts_rules() -> None:
    vocabulary = vocabulary_from_file(VOCABULARY_FILE)
    # Rule 1: the same id, and ids made of keywords.
    assert default_score_concepts(ConceptSpec(("dog", "barking")), "dog_bark", vocabulary) == ("dog",)
    assert "car_horn" in default_score_concepts(ConceptSpec(("honk", "car horn")), "car_horn", vocabulary)
    # Rule 2: no id matches, so the concept whose wordings hold the keywords ("clock ticking").
    assert default_score_concepts(ConceptSpec(("ticking",)), "clock_tick", vocabulary) == ("clock",)
    assert default_score_concepts(ConceptSpec(("purring",)), "kitty", vocabulary) == ("cat",)
    assert default_score_concepts(ConceptSpec(("zzzqqq",)), "nothing", vocabulary) == ()


# ---------------------------------------------------------------- command line


def _write(path: Path, text: str) -> Path:
    path.write_text(text, encoding="utf-8")
    return path


def _vtt(path: Path, cues: list[tuple[str, str, str]]) -> Path:
    blocks = "".join(f"{start} --> {end}\n{text}\n\n" for start, end, text in cues)
    return _write(path, "WEBVTT\n\n" + blocks)


@pytest.fixture
def annotated(tmp_path: Path) -> Path:
    _write(
        tmp_path / "truth.csv", "file,onset,offset,concept\nclip1,2.0,3.0,dog_bark\nclip1,10.0,12.0,door\n"
    )
    _write(
        tmp_path / "concepts.yaml",
        "dog_bark: [dog, barking]\ndoor:\n  keywords: [door, slam]\n  score_concepts: [door]\n",
    )
    _write(tmp_path / "files.csv", "file,duration\nclip1,20.0\nquiet,30.0\n")
    captions = tmp_path / "captions"
    captions.mkdir()
    _vtt(
        captions / "clip1.vtt",
        [("00:00:02.100", "00:00:03.000", "[dog barking]"), ("00:00:15.000", "00:00:16.000", "[door slams]")],
    )
    _vtt(captions / "quiet.vtt", [("00:00:01.000", "00:00:02.000", "[dog barking]")])
    return tmp_path


def test_cli_table_and_json(annotated: Path, capsys: pytest.CaptureFixture[str]) -> None:
    report = annotated / "report.json"
    status = main(
        [
            "evaluate",
            str(annotated / "truth.csv"),
            str(annotated / "captions"),
            "--durations",
            str(annotated / "files.csv"),
            "--json",
            str(report),
        ]
    )
    assert status == 0
    assert "overall" in capsys.readouterr().out
    data = json.loads(report.read_text(encoding="utf-8"))
    # 3 cues, 1 matches; 2 events, 1 found; 1 cue in 0.5 min of truth-free audio.
    assert data["overall"]["precision"] == pytest.approx(1 / 3, abs=1e-4)
    assert data["overall"]["recall"] == 0.5 and data["overall"]["f1"] == pytest.approx(0.4)
    assert data["overall"]["false_alarms_per_minute"] == 2.0 and data["overall"]["onset_error_ms"] == 100.0


def test_cli_json_to_stdout(annotated: Path, capsys: pytest.CaptureFixture[str]) -> None:
    assert (
        main(
            [
                "evaluate",
                str(annotated / "truth.csv"),
                str(annotated / "captions"),
                "--json",
                "-",
                "--collar",
                "4",
            ]
        )
        == 0
    )
    data = json.loads(capsys.readouterr().out)
    assert data["collar_ms"] == 4000 and data["overall"]["recall"] == 1.0  # the late door cue is within 4 s


def test_cli_scores(annotated: Path, capsys: pytest.CaptureFixture[str]) -> None:
    for name, curves, n in (
        (
            "clip1",
            {"dog": [0.0] * 3 + [0.6, 0.9, 0.8] + [0.0] * 34, "door": [0.0] * 19 + [0.7] * 5 + [0.1] * 16},
            40,
        ),
        ("quiet", {"dog": [0.05] * 60}, 60),
    ):
        sidecar = {
            "version": 1,
            "pack": "yamnet-int8",
            "duration_ms": n * 500,
            "scores": {"hop_ms": 500, "patch_ms": 1000, "concepts": curves},
        }
        _write(annotated / "captions" / f"{name}.json", json.dumps(sidecar))
    status = main(
        [
            "evaluate",
            str(annotated / "truth.csv"),
            str(annotated / "captions"),
            "--scores",
            "--durations",
            str(annotated / "files.csv"),
            "--json",
            "-",
        ]
    )
    assert status == 0
    data = json.loads(capsys.readouterr().out)
    assert data["concepts"]["dog_bark"]["score_concepts"] == ["dog"]  # by the id-and-keyword rule
    assert data["concepts"]["door"]["score_concepts"] == ["door"]  # from the concept file
    # dog [2000, 3000) -> patches 3..5 hold >= 500 ms of it; door [10000, 12000) -> patches 19..23
    assert data["concepts"]["dog_bark"]["positives"] == 3 and data["concepts"]["door"]["positives"] == 5
    assert data["concepts"]["dog_bark"]["auc"] == 1.0 and data["balanced"]["auc"] == 1.0
    assert data["patches"] == 100


@pytest.mark.parametrize(
    ("truth", "expected"),
    [
        (
            "file,onset,offset,concept\nclip1,3.0,3.0,dog_bark\n",
            r"truth\.csv:2: offset 3\.0 is not after onset 3\.0",
        ),
        ("file,onset,offset,concept\nclip1,3.0,4.0,cat\n", r"truth\.csv:2: unknown concept 'cat'"),
        ("file,onset,offset,concept\nclip1,soon,4.0,door\n", r"truth\.csv:2: onset='soon' is not a number"),
        ("clip1,3.0\n", r"truth\.csv:1: 2 column\(s\)"),
    ],
)
def test_bad_truth_rows_are_one_line_with_status_2(
    annotated: Path, capsys: pytest.CaptureFixture[str], truth: str, expected: str
) -> None:
    _write(annotated / "truth.csv", truth)
    assert main(["evaluate", str(annotated / "truth.csv"), str(annotated / "captions")]) == 2
    error = capsys.readouterr().err.strip()
    assert len(error.splitlines()) == 1 and "Traceback" not in error
    assert re.search(expected, error)


def test_bad_inputs_are_one_line_with_status_2(annotated: Path, capsys: pytest.CaptureFixture[str]) -> None:
    truth, captions = str(annotated / "truth.csv"), str(annotated / "captions")
    cases = [
        (["evaluate", str(annotated / "nope.csv"), captions], "nope.csv: file not found"),
        (["evaluate", truth, str(annotated / "missing")], "missing: caption folder not found"),
        (
            ["evaluate", truth, captions, "--concepts", str(annotated / "none.yaml")],
            "none.yaml: file not found",
        ),
        (
            ["evaluate", truth, captions, "--durations", str(annotated / "files.csv"), "--scores"],
            "clip1.json: no JSON sidecar",
        ),
        (["evaluate", truth, captions, "--collar", "-1"], "the collar must not be negative"),
    ]
    (annotated / "report.json").write_text("{}")
    cases.append(
        (
            ["evaluate", truth, captions, "--json", str(annotated / "report.json")],
            "report.json: already exists",
        )
    )
    for argv, message in cases:
        assert main(argv) == 2, argv
        error = capsys.readouterr().err.strip()
        assert len(error.splitlines()) == 1 and message in error
    assert (annotated / "report.json").read_text() == "{}"  # not overwritten without --force


def test_missing_and_unparsable_caption_files(annotated: Path, capsys: pytest.CaptureFixture[str]) -> None:
    truth, captions = str(annotated / "truth.csv"), annotated / "captions"
    _write(captions / "clip1.vtt", "WEBVTT\n\nthis is not a cue timing\n00:00:01.000 --> \n")
    assert main(["evaluate", truth, str(captions)]) == 2
    error = capsys.readouterr().err.strip()
    assert len(error.splitlines()) == 1 and "clip1.vtt" in error and "WebVTT" in error
    (captions / "clip1.vtt").unlink()
    assert main(["evaluate", truth, str(captions)]) == 2
    error = capsys.readouterr().err.strip()
    assert len(error.splitlines()) == 1 and "clip1.vtt: no caption file" in error


def test_default_output_names_are_found_plain_names_first(
    annotated: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    # `captioner caption` and `captioner batch` write NAME.sounds.vtt/.srt and NAME.sounds.json
    truth, captions = str(annotated / "truth.csv"), annotated / "captions"
    (captions / "clip1.vtt").rename(captions / "clip1.sounds.vtt")
    (captions / "quiet.vtt").unlink()
    _write(captions / "quiet.sounds.srt", "1\n00:00:01,000 --> 00:00:02,000\n[dog barking]\n")
    _write(captions / "quiet.sounds.json", json.dumps({"version": 1, "duration_ms": 30000}))
    speech = str(
        _write(annotated / "dialogue.csv", "file,onset,offset\nquiet,20.0,21.0\n")
    )  # names quiet as annotated
    assert main(["evaluate", truth, str(captions), "--dialogue", speech, "--json", "-"]) == 0
    data = json.loads(capsys.readouterr().out)
    # the same 3 cues as the plain names give; quiet's length (0.5 min) comes from its sidecar
    assert (
        data["overall"]["cues"] == 3
        and data["truth_free_ms"] == 30000
        and data["overall"]["false_alarms_per_minute"] == 2.0
    )
    _write(captions / "clip1.vtt", "WEBVTT\n")  # an empty track under the plain name wins
    assert main(["evaluate", truth, str(captions), "--dialogue", speech, "--json", "-"]) == 0
    assert json.loads(capsys.readouterr().out)["overall"]["cues"] == 1


def test_no_concept_file_beside_truth(annotated: Path, capsys: pytest.CaptureFixture[str]) -> None:
    (annotated / "concepts.yaml").unlink()
    assert main(["evaluate", str(annotated / "truth.csv"), str(annotated / "captions")]) == 2
    assert "pass --concepts" in capsys.readouterr().err


def test_truth_reader_converts_seconds_to_milliseconds(tmp_path: Path) -> None:
    path = _write(tmp_path / "t.csv", "# comment line\nclip,1.2345,2.5,door\n\nclip,0,0.001,door\n")
    assert read_truth(path, {"door"}) == (
        TruthEvent("clip", 1234, 2500, "door"),
        TruthEvent("clip", 0, 1, "door"),
    )
    with pytest.raises(AnnotationError, match=r"t\.csv:2: unknown concept 'door'"):
        read_truth(path, {"dog"})


def test_module_entry_point_smoke(annotated: Path) -> None:
    result = subprocess.run(
        [
            sys.executable,
            "-m",
            "captioner",
            "evaluate",
            str(annotated / "truth.csv"),
            str(annotated / "captions"),
        ],
        capture_output=True,
        text=True,
        check=False,
    )
    assert result.returncode == 0, result.stderr
    assert result.stdout.splitlines()[-2].startswith("overall")
