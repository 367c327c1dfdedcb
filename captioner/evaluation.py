"""Evaluation: caption quality of finished caption files against a user's own annotations.

Definitions (all times in integer milliseconds):

- A cue *names* a concept when the text a viewer reads (`subtitles.plain_lines`: markup
  removed, WebVTT character references decoded) contains one of the concept's keywords as a
  whole word, ignoring case.
- A cue *matches* a truth event when it names the event's concept and its span overlaps the
  event widened by the collar on both sides (touching ends do not overlap).
- precision = matched cues / cues; recall = detected events (matched by at least one cue) /
  events; F1 is their harmonic mean; a ratio with nothing to count is 0, and a mean with
  nothing to average (onset error, redundancy, false alarms) is None.
- redundancy = matched cues per detected event (1.0 = one cue per sound).
- onset error = mean over detected events of |start of the earliest matching cue - onset|.
- truth-free audio = whole annotated files with no truth events and a known duration; every
  cue in them is a false alarm. Gaps between events inside annotated files are not counted,
  because whether a cue there is wrong depends on sounds nobody annotated.
- per concept, precision, false alarms and dialogue overlaps count the cues naming it.
"""

from __future__ import annotations

import re
import warnings
from collections.abc import Mapping, Sequence
from dataclasses import asdict, dataclass
from pathlib import Path
from typing import Any

from .events import Span, overlaps
from .formats.annotations import (
    AnnotationError,
    TruthEvent,
    annotated_files,
    concepts_path_for,
    read_caption_files,
    read_concepts,
    read_dialogue,
    read_durations,
    read_truth,
    sidecar_durations,
)
from .formats.subtitles import SubtitleCue, SubtitleFormat, plain_lines

DEFAULT_COLLAR_MS = 1000


@dataclass(frozen=True, slots=True)
class Quality:
    """Caption-quality numbers for one concept or for all of them."""

    events: int
    detected_events: int
    cues: int
    matched_cues: int
    precision: float
    recall: float
    f1: float
    redundancy: float | None  # matched cues per detected event
    onset_error_ms: float | None  # mean |earliest matching cue start - event onset|
    false_alarm_cues: int  # cues in truth-free files
    false_alarms_per_minute: float | None
    cues_over_dialogue: int | None  # None when no dialogue file was given


@dataclass(frozen=True, slots=True)
class QualityReport:
    """Everything `captioner evaluate` reports about caption quality."""

    overall: Quality
    concepts: dict[str, Quality]
    files: int
    collar_ms: int
    truth_free_files: int
    truth_free_ms: int
    unnamed_cues: int  # cues naming no concept at all


# ---------------------------------------------------------------- matching


def keyword_pattern(keywords: Sequence[str]) -> re.Pattern[str]:
    """One case-insensitive whole-word pattern for a concept's keywords.

    >>> door = keyword_pattern(["door"])
    >>> bool(door.search("[Door slams]")), bool(door.search("[doorbell]"))
    (True, False)
    """
    alternatives = [
        r"\s+".join(re.escape(word) for word in keyword.split())
        for keyword in sorted(keywords, key=len, reverse=True)
    ]
    return re.compile(r"(?<!\w)(?:" + "|".join(alternatives) + r")(?!\w)", re.IGNORECASE)


def _ratio(numerator: float, denominator: float) -> float:
    return numerator / denominator if denominator else 0.0


def _quality(
    events: int,
    detected: int,
    cues: int,
    matched: int,
    onset_errors: list[int],
    false_alarms: int,
    truth_free_ms: int,
    over_dialogue: int | None,
) -> Quality:
    precision, recall = _ratio(matched, cues), _ratio(detected, events)
    return Quality(
        events=events,
        detected_events=detected,
        cues=cues,
        matched_cues=matched,
        precision=precision,
        recall=recall,
        f1=_ratio(2 * precision * recall, precision + recall),
        redundancy=matched / detected if detected else None,
        onset_error_ms=sum(onset_errors) / len(onset_errors) if onset_errors else None,
        false_alarm_cues=false_alarms,
        false_alarms_per_minute=false_alarms / (truth_free_ms / 60000) if truth_free_ms else None,
        cues_over_dialogue=over_dialogue,
    )


def caption_quality(
    events: Sequence[TruthEvent],
    cues: Mapping[str, Sequence[SubtitleCue]],
    keywords: Mapping[str, Sequence[str]],
    *,
    collar_ms: int = DEFAULT_COLLAR_MS,
    durations_ms: Mapping[str, int] | None = None,
    dialogue: Mapping[str, Sequence[Span]] | None = None,
    formats: Mapping[str, SubtitleFormat] | None = None,
) -> QualityReport:
    """Score the cues of every annotated file against its truth events.

    `cues` holds one entry per annotated file (an empty tuple for an empty caption track);
    `formats` says how each file's cue text is written (default "vtt": WebVTT markup and
    character references); `keywords` maps every concept to its caption keywords. Files with
    no events count as truth-free audio when `durations_ms` knows their length (a warning
    names those it doesn't).
    """
    if collar_ms < 0:
        raise ValueError(f"collar_ms={collar_ms} must be >= 0")
    durations_ms = durations_ms or {}
    patterns = {concept: keyword_pattern(words) for concept, words in keywords.items()}
    by_file: dict[str, list[tuple[int, TruthEvent]]] = {}
    for index, event in enumerate(events):
        by_file.setdefault(event.file, []).append((index, event))
    missing = sorted(set(by_file) - set(cues))
    if missing:
        raise ValueError(f"no cues given for annotated file(s) {missing[:3]}")

    counts: dict[str, dict[str, int]] = {
        c: dict.fromkeys(("cues", "matched", "false_alarms", "over_dialogue"), 0) for c in keywords
    }
    earliest: dict[int, int] = {}  # index of a detected event -> start of its earliest matching cue
    total = dict.fromkeys(("cues", "matched", "false_alarms", "over_dialogue", "unnamed"), 0)
    truth_free_ms, truth_free_files, unknown_length = 0, 0, []
    for name, file_cues in cues.items():
        file_events = by_file.get(name, [])
        truth_free = not file_events and name in durations_ms
        if truth_free:
            truth_free_ms += durations_ms[name]
            truth_free_files += 1
        elif not file_events:
            unknown_length.append(name)
        speech = dialogue.get(name, ()) if dialogue is not None else ()
        fmt = formats.get(name, "vtt") if formats else "vtt"
        for cue in file_cues:
            text = "\n".join(plain_lines(cue.text, fmt))
            named = [c for c, pattern in patterns.items() if pattern.search(text)]
            over = any(overlaps(cue.start_ms, cue.end_ms, s.start_ms, s.end_ms) for s in speech)
            cue_matched = False
            for concept in named:
                hits = [
                    i
                    for i, e in file_events
                    if e.concept == concept
                    and overlaps(cue.start_ms, cue.end_ms, e.start_ms - collar_ms, e.end_ms + collar_ms)
                ]
                for index in hits:
                    earliest[index] = min(earliest.get(index, cue.start_ms), cue.start_ms)
                counts[concept]["cues"] += 1
                counts[concept]["matched"] += bool(hits)
                counts[concept]["false_alarms"] += truth_free
                counts[concept]["over_dialogue"] += over
                cue_matched = cue_matched or bool(hits)
            total["cues"] += 1
            total["matched"] += cue_matched
            total["false_alarms"] += truth_free
            total["over_dialogue"] += over
            total["unnamed"] += not named
    if unknown_length:
        warnings.warn(
            f"{len(unknown_length)} file(s) without truth events and without a known duration "
            f"({', '.join(unknown_length[:3])}) left out of the false-alarm rate; pass --durations",
            stacklevel=2,
        )

    with_dialogue = dialogue is not None
    concepts = {}
    for concept in keywords:
        own = [i for i, e in enumerate(events) if e.concept == concept]
        if not own and not counts[concept]["cues"]:
            continue
        found = [i for i in own if i in earliest]
        concepts[concept] = _quality(
            len(own),
            len(found),
            counts[concept]["cues"],
            counts[concept]["matched"],
            [abs(earliest[i] - events[i].start_ms) for i in found],
            counts[concept]["false_alarms"],
            truth_free_ms,
            counts[concept]["over_dialogue"] if with_dialogue else None,
        )
    overall = _quality(
        len(events),
        len(earliest),
        total["cues"],
        total["matched"],
        [abs(start - events[i].start_ms) for i, start in earliest.items()],
        total["false_alarms"],
        truth_free_ms,
        total["over_dialogue"] if with_dialogue else None,
    )
    return QualityReport(
        overall, concepts, len(cues), collar_ms, truth_free_files, truth_free_ms, total["unnamed"]
    )


# ---------------------------------------------------------------- from files to a report


def evaluate_captions(
    truth_path: Path,
    captions_dir: Path,
    *,
    concepts_path: Path | None = None,
    collar_ms: int = DEFAULT_COLLAR_MS,
    dialogue_path: Path | None = None,
    durations_path: Path | None = None,
) -> QualityReport:
    """Read the annotations and the caption folder, then score them with `caption_quality`.

    The annotated clips are those named in the truth, durations or dialogue file; each needs a
    caption file in `captions_dir`: NAME.vtt or NAME.srt, else NAME.sounds.vtt or NAME.sounds.srt
    as `captioner caption` and `captioner batch` name them. Durations come from the durations
    file, else from JSON sidecars (NAME.json, NAME.events.json or NAME.sounds.json) beside the
    captions.

    Raises:
        AnnotationError, SubtitleError: a missing or malformed input file.
    """
    if collar_ms < 0:
        raise AnnotationError(
            f"--collar {collar_ms / 1000:g}",
            "the collar must not be negative",
            "pass a collar in seconds such as 1.0",
        )
    concepts = read_concepts(concepts_path_for(truth_path, concepts_path))
    events = read_truth(truth_path, concepts)
    dialogue = read_dialogue(dialogue_path) if dialogue_path else None
    durations = read_durations(durations_path) if durations_path else {}
    names = annotated_files(events, durations, dialogue or {})
    if not durations_path:
        with_events = {e.file for e in events}
        durations = sidecar_durations(captions_dir, [n for n in names if n not in with_events])
    tracks = read_caption_files(captions_dir, names)
    cues = {name: track.cues for name, track in tracks.items()}
    formats = {name: track.format for name, track in tracks.items()}
    keywords = {concept: spec.keywords for concept, spec in concepts.items()}
    return caption_quality(
        events,
        cues,
        keywords,
        collar_ms=collar_ms,
        durations_ms=durations,
        dialogue=dialogue,
        formats=formats,
    )


# ---------------------------------------------------------------- output


def _number(value: float | None, digits: int) -> str:
    return "-" if value is None else f"{value:.{digits}f}"


def quality_table(report: QualityReport) -> str:
    """A plain-text table, one row per concept and an overall row."""
    header = (
        "concept",
        "events",
        "found",
        "cues",
        "match",
        "prec",
        "recall",
        "F1",
        "cues/event",
        "onset err s",
        "false/min",
        "over dialogue",
    )
    rows = [header]
    for name, q in [*sorted(report.concepts.items()), ("overall", report.overall)]:
        rows.append(
            (
                name,
                str(q.events),
                str(q.detected_events),
                str(q.cues),
                str(q.matched_cues),
                f"{q.precision:.3f}",
                f"{q.recall:.3f}",
                f"{q.f1:.3f}",
                _number(q.redundancy, 2),
                _number(None if q.onset_error_ms is None else q.onset_error_ms / 1000, 2),
                _number(q.false_alarms_per_minute, 2),
                "-" if q.cues_over_dialogue is None else str(q.cues_over_dialogue),
            )
        )
    widths = [max(len(row[i]) for row in rows) for i in range(len(header))]
    lines = [
        "  ".join(cell.ljust(w) if i == 0 else cell.rjust(w) for i, (cell, w) in enumerate(zip(row, widths)))
        for row in rows
    ]
    lines.insert(1, "-" * len(lines[0]))
    lines.insert(len(lines) - 1, "-" * len(lines[0]))
    minutes = report.truth_free_ms / 60000
    lines.append(
        f"{report.files} file(s), collar {report.collar_ms / 1000:g} s; truth-free audio {minutes:.2f} min "
        f"in {report.truth_free_files} file(s); "
        f"{report.unnamed_cues} cue(s) name no concept"
    )
    return "\n".join(lines)


def _rounded(quality: Quality) -> dict[str, Any]:
    return {
        key: round(value, 6) if isinstance(value, float) else value for key, value in asdict(quality).items()
    }


def quality_json(report: QualityReport) -> dict[str, Any]:
    """A JSON-ready report; `overall` holds f1, precision and recall among the rest."""
    return {
        "collar_ms": report.collar_ms,
        "files": report.files,
        "truth_free_files": report.truth_free_files,
        "truth_free_ms": report.truth_free_ms,
        "unnamed_cues": report.unnamed_cues,
        "overall": _rounded(report.overall),
        "concepts": {name: _rounded(q) for name, q in sorted(report.concepts.items())},
    }
