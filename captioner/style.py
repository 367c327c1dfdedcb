"""Settings: one frozen `Style` holding every tunable value, loaded from a YAML preset or file.

A style file has five sections (wording, layout, detection, selection, merge); any field left out
keeps the default documented here. Unknown fields, wrong types and out-of-range values are
rejected with the field's name and value.
"""

from __future__ import annotations

import dataclasses
import typing
from dataclasses import dataclass, field
from importlib import resources
from pathlib import Path
from typing import Any, Literal

import yaml

from .errors import StyleError
from .vocabulary import ConceptStyle


@dataclass(frozen=True, slots=True)
class Wording:
    """How a sound becomes caption text."""

    case: Literal["lower", "upper"] = "lower"
    brackets: bool = True  # "[dog barking]" rather than "dog barking"
    tense: Literal["ing", "present"] = "ing"  # "dog barking" vs "dog barks"
    music_notes: bool = False  # "♪ upbeat music ♪" instead of brackets for music
    end_cues: bool = True  # "[rain stops]" when a long continuous sound ends
    end_cue_min_ms: int = 20000  # only sounds at least this long get an end cue


@dataclass(frozen=True, slots=True)
class Layout:
    """Cue size and timing limits (defaults from published caption guidance)."""

    max_chars_per_line: int = 32
    max_lines: int = 2
    min_duration_ms: int = 2000
    max_duration_ms: int = 6000
    min_gap_ms: int = 0  # gaps shorter than this are closed or widened
    reading_rate_wpm: int = 160
    sync_tolerance_ms: int = 1500  # how far a cue may move from its sound


@dataclass(frozen=True, slots=True)
class Detection:
    """Turning score curves into timed events."""

    patch_hop_ms: int = 480
    level_spread_db: float = (
        6.0  # score each patch also this much quieter and louder, keep the mean (0 = once)
    )
    median_ms: int = 0  # median filter on lasting sounds' score curves (0 = off)
    bridge_ms: int = 1440  # running maximum that joins flickering patches (0 = off)
    lasting_min_active_ms: int = 960  # lasting sounds need this long above onset_threshold
    lasting_sure_score: float = 0.7  # ... unless one patch scores this high (1 = never)
    onset_threshold: float = 0.25  # a concept becomes active above this ...
    offset_threshold: float = 0.12  # ... and stays active above this
    min_event_ms: int = 100
    merge_gap_ms: int = 1000  # same-concept events closer than this become one
    speech_onset: float = 0.5
    speech_offset: float = 0.3
    onset_refine: bool = True  # move onsets to the nearest rise in signal level


@dataclass(frozen=True, slots=True)
class Selection:
    """Which detected events become cues; each rule can be switched off on its own."""

    min_confidence: float = 0.3  # peak classifier score an event needs
    min_duration_ms: int = 0
    min_salience: float = 0.55  # see policy.salience: confidence, priority, loudness, length
    priority_weight: float = 0.15  # salience per priority step above 3
    contrast_weight: float = 0.1  # salience for 20 dB above the local background
    length_weight: float = 0.1  # salience for lasting 3 s or more
    evidence_gate: bool = True  # a sound claim needs signal energy at that time
    min_level_db: float = -55.0  # quieter than this is near-silence
    min_contrast_db: float = 6.0  # event level above the local noise floor (quietest surroundings)
    opening_ms: int = 1000  # a lasting sound starting this early needs no contrast (0 = off)
    safety_confidence: float = (
        0.5  # a priority-5 sound this sure needs no contrast, only signal (1 = no exemption)
    )
    parent_redundancy: bool = True  # a confident child replaces its parent (car horn > vehicle)
    child_confidence: float = 0.6  # below this a child yields to an equally sure parent
    sibling_redundancy: bool = True  # overlapping siblings are one sound: keep the surest
    sibling_margin: float = (
        0.1  # siblings closer than this in score: word the sound as their parent (0 = off)
    )
    generic_redundancy: bool = True  # "[beeping]" is left out beside a specific sound of the same moment
    part_of_louder: bool = True  # a quiet short sound wholly inside a louder one is a part of it
    generic_confidence: float = (
        0.8  # a generic sound no specific one names needs this peak score (alerts exempt; 0 = off)
    )
    music_detail_confidence: float = 0.6  # mood/genre/singing wording only above this
    music_min_ms: int = 3000  # shorter "music" is left out: usually a tonal sound, not a score (0 = off)
    dialogue_gate: bool = True
    dialogue_min_priority: int = 3  # under dialogue, lower priorities are dropped ...
    dialogue_masking_db: float = 15.0  # ... unless this much louder than their surroundings (0 = off)
    dialogue_confidence: float = 0.6  # ... and kept ones need this confidence
    dialogue_alert_confidence: float = 0.5  # ... or this, for attention sounds (priority 4-5)
    gap_shift_ms: int = 1000  # a short event under dialogue may move this far into a gap (0 = off)
    short_event_ms: int = 2000  # only events shorter than this move
    cooldown_ms: int = 6000  # same concept again within this after it ended joins the earlier cue (0 = off)
    music_cooldown_ms: int = 20000  # the same for music, whose score dips under dialogue while it plays on
    max_cues_per_minute: int = 12  # density cap, most salient kept (0 = no cap)


@dataclass(frozen=True, slots=True)
class Merge:
    """How sound cues join an existing dialogue track when they clash with a dialogue cue.

    The strategy names the first thing tried; each falls back to the next one in the order
    position -> combine -> move -> drop (a dropped cue is recorded with the reason).
    position: WebVTT only, the sound cue keeps its time and moves to the screen edge away
      from the dialogue (cue setting `line:`); SRT has no positioning and starts at combine.
    combine: the sound becomes an extra line of the dialogue cue when the layout limits allow.
    move: the sound cue moves into the nearest gap in the dialogue within sync_tolerance_ms.
    drop: the sound cue is left out.
    """

    strategy: Literal["position", "combine", "move", "drop"] = "position"


@dataclass(frozen=True, slots=True)
class Style:
    """All settings of one run."""

    name: str = "default"
    description: str = ""
    wording: Wording = field(default_factory=Wording)
    layout: Layout = field(default_factory=Layout)
    detection: Detection = field(default_factory=Detection)
    selection: Selection = field(default_factory=Selection)
    merge: Merge = field(default_factory=Merge)
    vocabulary: tuple[ConceptStyle, ...] = ()  # house wording, priorities and bans per concept


_CONCEPT_FIELDS = ("wording", "noun", "priority", "banned")
_SECTIONS = {
    "wording": Wording,
    "layout": Layout,
    "detection": Detection,
    "selection": Selection,
    "merge": Merge,
}
_RANGES: dict[str, tuple[float, float]] = {
    "music_min_ms": (0, 60000),
    "music_cooldown_ms": (0, 120000),
    "max_chars_per_line": (10, 80),
    "max_lines": (1, 4),
    "min_duration_ms": (0, 20000),
    "max_duration_ms": (500, 60000),
    "min_gap_ms": (0, 5000),
    "reading_rate_wpm": (60, 400),
    "sync_tolerance_ms": (0, 5000),
    "patch_hop_ms": (10, 960),
    "level_spread_db": (0.0, 20.0),
    "median_ms": (0, 10000),
    "onset_threshold": (0.0, 1.0),
    "offset_threshold": (0.0, 1.0),
    "speech_onset": (0.0, 1.0),
    "speech_offset": (0.0, 1.0),
    "min_confidence": (0.0, 1.0),
    "dialogue_confidence": (0.0, 1.0),
    "dialogue_masking_db": (0.0, 60.0),
    "dialogue_alert_confidence": (0.0, 1.0),
    "dialogue_min_priority": (1, 6),
    "max_cues_per_minute": (0, 60),
    "bridge_ms": (0, 10000),
    "lasting_min_active_ms": (0, 10000),
    "lasting_sure_score": (0.0, 1.0),
    "end_cue_min_ms": (0, 600000),
    "min_salience": (0.0, 2.0),
    "priority_weight": (0.0, 1.0),
    "contrast_weight": (0.0, 1.0),
    "length_weight": (0.0, 1.0),
    "child_confidence": (0.0, 1.0),
    "sibling_margin": (0.0, 1.0),
    "music_detail_confidence": (0.0, 1.0),
    "gap_shift_ms": (0, 5000),
    "short_event_ms": (0, 20000),
    "cooldown_ms": (0, 120000),
    "merge_gap_ms": (0, 10000),
    "min_event_ms": (0, 10000),
    "min_level_db": (-120.0, 0.0),
    "min_contrast_db": (-60.0, 60.0),
    "safety_confidence": (0.0, 1.0),
    "opening_ms": (0, 10000),
    "generic_confidence": (0.0, 1.0),
}


def builtin_styles() -> dict[str, Path]:
    """Preset name -> file, for the presets shipped in styles/."""
    folder = resources.files("captioner.styles")
    return {Path(str(item)).stem: Path(str(item)) for item in folder.iterdir() if str(item).endswith(".yaml")}


def load_style(name_or_path: str) -> Style:
    """A preset by name, or a style YAML file by path.

    Raises:
        StyleError: unknown preset, unreadable or malformed file, invalid field.
    """
    presets = builtin_styles()
    path = presets.get(name_or_path) or Path(name_or_path)
    if not path.is_file():
        raise StyleError(
            name_or_path,
            "no such style",
            f"use one of {', '.join(sorted(presets))} or a path to a style .yaml file",
        )
    try:
        data = yaml.safe_load(path.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError) as exc:
        raise StyleError(path, f"cannot read the style file ({exc})", "check the file") from exc
    except yaml.YAMLError as exc:
        mark = getattr(exc, "problem_mark", None)
        where = f" at line {mark.line + 1}" if mark else ""
        raise StyleError(
            path, f"malformed YAML{where}", "fix the syntax (compare with a preset from `captioner styles`)"
        ) from exc
    return style_from_mapping(data or {}, source=str(path), default_name=path.stem)


def style_from_mapping(data: Any, *, source: str = "style", default_name: str = "custom") -> Style:
    """Build a validated Style from a parsed YAML mapping."""
    if not isinstance(data, dict):
        raise StyleError(
            source, "a style must be a YAML mapping of sections", "see `captioner styles` for an example"
        )
    unknown = set(data) - set(_SECTIONS) - {"name", "description", "vocabulary"}
    if unknown:
        raise StyleError(
            source,
            f"unknown section(s) {', '.join(sorted(unknown))}",
            f"use {', '.join(_SECTIONS)}, vocabulary",
        )
    sections = {name: _section(source, name, cls, data.get(name) or {}) for name, cls in _SECTIONS.items()}
    style = Style(
        name=str(data.get("name", default_name)),
        description=str(data.get("description", "")),
        vocabulary=_house_vocabulary(source, data.get("vocabulary") or {}),
        **sections,
    )
    _check_consistency(source, style)
    return style


def _section(source: str, name: str, cls: type, values: Any) -> Any:
    if not isinstance(values, dict):
        raise StyleError(source, f"section {name} must be a mapping", "indent its fields under it")
    hints = typing.get_type_hints(cls)
    unknown = set(values) - set(hints)
    if unknown:
        raise StyleError(
            source,
            f"unknown field(s) {', '.join(f'{name}.{k}' for k in sorted(unknown))}",
            f"{name} takes {', '.join(hints)}",
        )
    for key, value in values.items():
        _check_value(source, f"{name}.{key}", hints[key], value)
    return cls(**values)


def _house_vocabulary(source: str, values: Any) -> tuple[ConceptStyle, ...]:
    """The `vocabulary` section: concept id -> {wording: [bracketed, capitals], noun, priority, banned}.

    Concept ids are checked against the model pack's vocabulary when a run starts.
    """
    if not isinstance(values, dict):
        raise StyleError(
            source, "section vocabulary must map concept ids to changes", "e.g. rain: {priority: 3}"
        )
    changes = []
    for concept, spec in values.items():
        label = f"vocabulary.{concept}"
        if not isinstance(spec, dict) or not spec:
            raise StyleError(
                source, f"{label} must be a mapping of changes", f"give one of {', '.join(_CONCEPT_FIELDS)}"
            )
        unknown = sorted(set(spec) - set(_CONCEPT_FIELDS))
        if unknown:
            raise StyleError(
                source,
                f"unknown field(s) {', '.join(f'{label}.{k}' for k in unknown)}",
                f"{label} takes {', '.join(_CONCEPT_FIELDS)}",
            )
        wording = spec.get("wording")
        if wording is not None and not (
            isinstance(wording, list)
            and len(wording) == 2
            and all(isinstance(w, str) and w.strip() for w in wording)
        ):
            raise StyleError(
                source,
                f"{label}.wording={wording!r} is not two texts",
                "write [bracket wording, capitals wording]",
            )
        priority = spec.get("priority")
        if priority is not None and (
            isinstance(priority, bool) or not isinstance(priority, int) or not 1 <= priority <= 5
        ):
            raise StyleError(
                source, f"{label}.priority={priority!r} is outside 1..5", "use a whole number 1..5"
            )
        noun, banned = spec.get("noun"), spec.get("banned", False)
        if noun is not None and not (isinstance(noun, str) and noun.strip()):
            raise StyleError(
                source, f"{label}.noun={noun!r} must be a text", "name the sound, e.g. noun: rain"
            )
        if not isinstance(banned, bool):
            raise StyleError(source, f"{label}.banned={banned!r} must be a bool", "use true or false")
        changes.append(
            ConceptStyle(
                str(concept),
                wording[0] if wording else None,
                wording[1] if wording else None,
                noun,
                priority,
                banned,
            )
        )
    return tuple(changes)


def _check_value(source: str, label: str, hint: Any, value: Any) -> None:
    key = label.split(".")[-1]
    if typing.get_origin(hint) is Literal:
        if value not in typing.get_args(hint):
            raise StyleError(
                source,
                f"{label}={value!r} is not one of {', '.join(map(str, typing.get_args(hint)))}",
                "pick one of those",
            )
        return
    ok = {
        bool: isinstance(value, bool),
        int: isinstance(value, int) and not isinstance(value, bool),
        float: isinstance(value, (int, float)) and not isinstance(value, bool),
        str: isinstance(value, str),
    }.get(hint, True)
    if not ok:
        raise StyleError(source, f"{label}={value!r} must be a {hint.__name__}", "fix the value")
    if key in _RANGES and not isinstance(value, bool):
        low, high = _RANGES[key]
        if not low <= value <= high:
            raise StyleError(
                source, f"{label}={value!r} is outside {low:g}..{high:g}", "choose a value in range"
            )


def _check_consistency(source: str, style: Style) -> None:
    d, layout, selection = style.detection, style.layout, style.selection
    if d.offset_threshold > d.onset_threshold:
        raise StyleError(
            source,
            f"detection.offset_threshold={d.offset_threshold} is above onset_threshold={d.onset_threshold}",
            "the offset threshold must be the lower one",
        )
    if d.speech_offset > d.speech_onset:
        raise StyleError(
            source,
            f"detection.speech_offset={d.speech_offset} is above speech_onset={d.speech_onset}",
            "the offset threshold must be the lower one",
        )
    if layout.min_duration_ms > layout.max_duration_ms:
        raise StyleError(
            source,
            f"layout.min_duration_ms={layout.min_duration_ms} exceeds "
            f"max_duration_ms={layout.max_duration_ms}",
            "make the minimum smaller",
        )
    if (
        selection.gap_shift_ms > layout.sync_tolerance_ms
    ):  # a moved sound cue would lag its sound beyond the tolerance
        raise StyleError(
            source,
            f"selection.gap_shift_ms={selection.gap_shift_ms} exceeds "
            f"layout.sync_tolerance_ms={layout.sync_tolerance_ms}",
            "make the gap move at most the sync tolerance",
        )


def replace(style: Style, section: str, **changes: Any) -> Style:
    """A copy of `style` with fields of one section changed (for experiments and tests)."""
    return dataclasses.replace(style, **{section: dataclasses.replace(getattr(style, section), **changes)})
