"""Annotation files for evaluation: truth events, concept keywords, dialogue, durations, captions.

CSV files may start with a header row naming their columns (other columns are then allowed);
times are seconds in the file and integer milliseconds once read. Every problem a user can
fix is an AnnotationError (or SubtitleError for caption files) naming the file and line.
"""

from __future__ import annotations

import csv
import json
import math
from collections.abc import Collection, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import yaml

from ..errors import CaptionerError, SubtitleError
from ..events import Span
from .subtitles import SubtitleTrack, read_track

CONCEPTS_BESIDE_TRUTH = "concepts.yaml"
# Files of an annotated clip NAME, tried in order: the plain name first, then the names
# `captioner caption` and `captioner batch` write by default (NAME.sounds.*).
CAPTION_SUFFIXES = (".vtt", ".srt", ".sounds.vtt", ".sounds.srt")
SIDECAR_SUFFIXES = (".json", ".events.json", ".sounds.json")


class AnnotationError(CaptionerError):
    """A truth, concept, dialogue, duration or score-map file cannot be used."""


@dataclass(frozen=True, slots=True)
class TruthEvent:
    """One annotated sound in one file, in integer milliseconds."""

    file: str
    start_ms: int
    end_ms: int
    concept: str


@dataclass(frozen=True, slots=True)
class ConceptSpec:
    """What counts as a correct caption for one truth concept."""

    keywords: tuple[str, ...]
    score_concepts: tuple[str, ...] = ()  # vocabulary concept ids whose scores stand for it (--scores)


def read_table(path: Path, columns: Sequence[str]) -> list[tuple[int, dict[str, str]]]:
    """Rows of a CSV as (line number, {column: value}).

    A first row naming all `columns` is a header and may add other columns in any order;
    otherwise the first len(columns) cells are taken in that order. Blank lines and lines
    starting with '#' are skipped.

    Raises:
        AnnotationError: missing or unreadable file, or a row with too few cells.
    """
    path = Path(path)
    if not path.is_file():
        raise AnnotationError(path, "file not found", "check the path")
    try:
        lines = path.read_text(encoding="utf-8-sig").splitlines()
    except (OSError, UnicodeDecodeError) as exc:
        raise AnnotationError(
            path,
            f"cannot read as UTF-8 text ({exc})",
            f"save it as a UTF-8 CSV with columns {','.join(columns)}",
        ) from exc
    rows = [
        (number, cells)
        for number, cells in enumerate(csv.reader(lines), start=1)
        if cells and any(c.strip() for c in cells) and not cells[0].lstrip().startswith("#")
    ]
    positions = {name: index for index, name in enumerate(columns)}
    if rows:
        header = [cell.strip().lower() for cell in rows[0][1]]
        if all(name in header for name in columns):
            positions = {name: header.index(name) for name in columns}
            rows = rows[1:]
    needed = max(positions.values()) + 1
    table = []
    for number, cells in rows:
        if len(cells) < needed:
            raise AnnotationError(
                f"{path}:{number}", f"{len(cells)} column(s), expected {','.join(columns)}", "fix the row"
            )
        table.append((number, {name: cells[index].strip() for name, index in positions.items()}))
    return table


def _seconds_to_ms(value: str, where: str, column: str) -> int:
    try:
        seconds = float(value)
    except ValueError:
        seconds = math.nan
    if not math.isfinite(seconds) or seconds < 0:
        raise AnnotationError(where, f"{column}={value!r} is not a number of seconds >= 0", "fix the row")
    return round(seconds * 1000)


def _file_name(value: str, where: str) -> str:
    if not value:
        raise AnnotationError(where, "empty file name", "name the clip in the first column")
    return value


def read_truth(path: Path, concepts: Collection[str]) -> tuple[TruthEvent, ...]:
    """Truth events from a CSV with columns file,onset,offset,concept (seconds).

    Raises:
        AnnotationError: missing file, bad number, offset <= onset, or a concept not in `concepts`.
    """
    events = []
    for number, row in read_table(path, ("file", "onset", "offset", "concept")):
        where = f"{path}:{number}"
        start = _seconds_to_ms(row["onset"], where, "onset")
        end = _seconds_to_ms(row["offset"], where, "offset")
        if end <= start:
            raise AnnotationError(
                where,
                f"offset {row['offset']} is not after onset {row['onset']}",
                "fix the row; an event needs a positive length",
            )
        if row["concept"] not in concepts:
            raise AnnotationError(
                where,
                f"unknown concept {row['concept']!r}",
                "add it with its caption keywords to the concept file, or correct the row",
            )
        events.append(TruthEvent(_file_name(row["file"], where), start, end, row["concept"]))
    return tuple(events)


def read_dialogue(path: Path) -> dict[str, tuple[Span, ...]]:
    """Speech spans per file from a CSV with columns file,onset,offset (seconds).

    Raises:
        AnnotationError: missing file, bad number or offset <= onset.
    """
    spans: dict[str, list[Span]] = {}
    for number, row in read_table(path, ("file", "onset", "offset")):
        where = f"{path}:{number}"
        start = _seconds_to_ms(row["onset"], where, "onset")
        end = _seconds_to_ms(row["offset"], where, "offset")
        if end <= start:
            raise AnnotationError(
                where, f"offset {row['offset']} is not after onset {row['onset']}", "fix the row"
            )
        spans.setdefault(_file_name(row["file"], where), []).append(Span(start, end))
    return {name: tuple(group) for name, group in spans.items()}


def read_durations(path: Path) -> dict[str, int]:
    """File durations in ms from a CSV with columns file,duration (seconds).

    Raises:
        AnnotationError: missing file, bad number or a duration of zero.
    """
    durations = {}
    for number, row in read_table(path, ("file", "duration")):
        where = f"{path}:{number}"
        duration = _seconds_to_ms(row["duration"], where, "duration")
        if duration <= 0:
            raise AnnotationError(where, f"duration {row['duration']} is not positive", "fix the row")
        durations[_file_name(row["file"], where)] = duration
    return durations


def _yaml(path: Path) -> Any:
    path = Path(path)
    if not path.is_file():
        raise AnnotationError(path, "file not found", "check the path")
    try:
        return yaml.safe_load(path.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, yaml.YAMLError) as exc:
        first = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
        raise AnnotationError(path, f"not readable YAML ({first})", "fix the file") from exc


def _strings(value: Any) -> tuple[str, ...] | None:
    if isinstance(value, str) and value.strip():
        return (value.strip(),)
    if isinstance(value, list) and value and all(isinstance(v, (str, int)) and str(v).strip() for v in value):
        return tuple(str(v).strip() for v in value)
    return None


def read_concepts(path: Path) -> dict[str, ConceptSpec]:
    """Concept file: `concept: [keyword, ...]`, or `concept: {keywords: [...], score_concepts: [...]}`.

    Raises:
        AnnotationError: missing or malformed file.
    """
    data = _yaml(path)
    if not isinstance(data, dict) or not data:
        raise AnnotationError(
            path,
            "expected a mapping of concept -> list of caption keywords",
            "write lines like `dog_bark: [dog, barking]`",
        )
    concepts = {}
    for concept, value in data.items():
        spec = value if isinstance(value, dict) else {"keywords": value}
        keywords = _strings(spec.get("keywords"))
        scored = _strings(spec["score_concepts"]) if "score_concepts" in spec else ()
        if keywords is None or scored is None or set(spec) - {"keywords", "score_concepts"}:
            raise AnnotationError(
                path,
                f"concept {concept!r} needs a non-empty keyword list (and optionally score_concepts)",
                "write `concept: [keyword, ...]`",
            )
        concepts[str(concept)] = ConceptSpec(keywords, scored)
    return concepts


def _find_beside(folder: Path, name: str, suffixes: Sequence[str]) -> Path | None:
    stems = [name] + ([Path(name).stem] if Path(name).suffix else [])  # "clip.mp4" -> clip.vtt too
    for stem in stems:
        for suffix in suffixes:
            if (Path(folder) / f"{stem}{suffix}").is_file():
                return Path(folder) / f"{stem}{suffix}"
    return None


def find_caption_file(folder: Path, name: str) -> Path | None:
    """The caption file of an annotated clip: NAME.vtt, NAME.srt, NAME.sounds.vtt or
    NAME.sounds.srt, the first that exists (NAME without a media extension too)."""
    return _find_beside(folder, name, CAPTION_SUFFIXES)


def read_caption_files(folder: Path, names: Sequence[str]) -> dict[str, SubtitleTrack]:
    """The caption track of every annotated clip, read from the caption folder.

    Raises:
        SubtitleError: the folder or a clip's caption file is missing, or a file does not parse.
    """
    folder = Path(folder)
    if not folder.is_dir():
        raise SubtitleError(
            folder,
            "caption folder not found",
            "give the folder holding NAME.vtt or NAME.srt (or NAME.sounds.vtt/.srt) per annotated clip",
        )
    tracks = {}
    for name in names:
        path = find_caption_file(folder, name)
        if path is None:
            raise SubtitleError(
                folder / f"{name}.vtt",
                "no caption file for this annotated clip (.vtt, .srt, .sounds.vtt or .sounds.srt)",
                "caption the clip into this folder, or remove it from the annotation files",
            )
        tracks[name] = read_track(path)
    return tracks


def concepts_path_for(truth_path: Path, concepts_path: Path | None) -> Path:
    """The concept file given, else concepts.yaml beside the truth file.

    Raises:
        AnnotationError: none given and none beside the truth file.
    """
    if concepts_path is not None:
        return Path(concepts_path)
    beside = Path(truth_path).parent / CONCEPTS_BESIDE_TRUTH
    if not beside.is_file():
        raise AnnotationError(
            truth_path,
            f"no concept file given and no {CONCEPTS_BESIDE_TRUTH} beside it",
            "pass --concepts CONCEPTS.yaml mapping each concept to its caption keywords",
        )
    return beside


def find_sidecar(folder: Path, name: str) -> Path | None:
    """The JSON sidecar of an annotated clip in the caption folder: NAME.json, NAME.events.json
    or NAME.sounds.json, the first that exists."""
    return _find_beside(folder, name, SIDECAR_SUFFIXES)


def read_json(path: Path) -> dict[str, Any]:
    """A JSON object from a file.

    Raises:
        AnnotationError: unreadable, not JSON, or not an object.
    """
    try:
        data = json.loads(Path(path).read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, ValueError) as exc:
        raise AnnotationError(
            path,
            f"not readable JSON ({str(exc).splitlines()[0] if str(exc) else type(exc).__name__})",
            "write it again with captioner caption --events-json",
        ) from exc
    if not isinstance(data, dict):
        raise AnnotationError(
            path, "not a captioner JSON sidecar", "write it again with captioner caption --events-json"
        )
    return data


def sidecar_durations(folder: Path, names: Sequence[str]) -> dict[str, int]:
    """Durations in ms of the clips whose sidecar in `folder` records one."""
    durations = {}
    for name in names:
        path = find_sidecar(folder, name)
        if path is not None:
            duration = read_json(path).get("duration_ms")
            if isinstance(duration, int) and duration > 0:
                durations[name] = duration
    return durations


def annotated_files(events: Sequence[TruthEvent], *others: Collection[str]) -> list[str]:
    """Every clip named by the truth events or by other annotation files, sorted."""
    names = {e.file for e in events}
    for group in others:
        names |= set(group)
    return sorted(names)


def read_score_map(path: Path) -> dict[str, tuple[str, ...]]:
    """A score map: `truth_concept: [vocabulary concept id, ...]` (a single id may stand alone).

    Raises:
        AnnotationError: missing or malformed file.
    """
    data = _yaml(path)
    if not isinstance(data, dict) or not data:
        raise AnnotationError(
            path,
            "expected a mapping of truth concept -> vocabulary concept ids",
            "write lines like `dog_bark: [dog]`",
        )
    mapping = {}
    for concept, value in data.items():
        ids = _strings(value)
        if ids is None:
            raise AnnotationError(
                path,
                f"concept {concept!r} needs one or more vocabulary concept ids",
                "write `concept: [id, ...]`",
            )
        mapping[str(concept)] = ids
    return mapping


@dataclass(frozen=True, slots=True, eq=False)
class SidecarScores:
    """The score curves of one clip, from its JSON sidecar.

    curves: vocabulary concept id -> (n_patches,) float64 in [0, 1]; patch i covers
    [i * hop_ms, i * hop_ms + patch_ms). A concept absent here never reached the
    sidecar's floor (0.001) and scores about 0 throughout.
    """

    pack: str
    hop_ms: int
    patch_ms: int
    n_patches: int
    curves: dict[str, np.ndarray]


def read_sidecar_scores(path: Path) -> SidecarScores:
    """Score curves from a sidecar written by `captioner caption --events-json`.

    Raises:
        AnnotationError: not a sidecar, or curves of unequal length.
    """
    data = read_json(path)
    section = data.get("scores")
    fix = "write it again with captioner caption --events-json"
    if (
        not isinstance(section, dict)
        or not isinstance(section.get("concepts"), dict)
        or not all(isinstance(section.get(k), int) and section[k] > 0 for k in ("hop_ms", "patch_ms"))
    ):
        raise AnnotationError(
            path, "no score curves (a 'scores' section with hop_ms, patch_ms and concepts)", fix
        )
    try:
        curves = {str(c): np.asarray(v, dtype=np.float64).reshape(-1) for c, v in section["concepts"].items()}
    except (TypeError, ValueError) as exc:
        raise AnnotationError(path, "a score curve is not a list of numbers", fix) from exc
    lengths = {len(v) for v in curves.values()}
    if len(lengths) > 1:
        raise AnnotationError(path, f"score curves of different lengths {sorted(lengths)}", fix)
    duration = data.get("duration_ms")
    # with no curve at all, every concept scored ~0: count the hops that fit in the clip
    n_patches = (
        lengths.pop() if lengths else (duration // section["hop_ms"] if isinstance(duration, int) else 0)
    )
    return SidecarScores(str(data.get("pack", "")), section["hop_ms"], section["patch_ms"], n_patches, curves)
