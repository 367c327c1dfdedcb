"""Vocabulary: each classifier class mapped to a caption concept, wording, kind and priority.

The mapping is a YAML data file grouped by concept (see data/yamnet_vocabulary.yaml);
every class of the pack must appear in it exactly once.
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from enum import Enum
from pathlib import Path
from typing import Any

import yaml

from .errors import PackError, StyleError

# Attention and safety sounds (alarms, sirens, phones, doorbells, knocks): priorities 4 and 5.
# They are never left out of a merge, need less confidence under dialogue, and keep their
# classifier classes beside a learned head.
ALERT_PRIORITY = 4


class Kind(str, Enum):
    """How a concept behaves on screen."""

    TRANSIENT = "transient"  # short sounds: captioned where they happen
    CONTINUOUS = "continuous"  # lasting sounds: captioned at onset, optional end cue
    MUSIC = "music"
    SPEECH = "speech"  # dialogue: never captioned as a sound
    AMBIENCE = "ambience"  # background beds: captioned only when salient
    IGNORE = "ignore"  # technical or environment classes: never captioned


@dataclass(frozen=True, slots=True)
class ClassEntry:
    """One classifier output and what it means for captions."""

    index: int
    label: str
    concept: str
    phrase: str  # bracket convention: "dog barking"
    phrase_present: str  # capitals convention: "dog barks"
    kind: Kind
    priority: int  # 1 (trivial) .. 5 (safety alert)
    parent: str | None
    generic: bool = False  # the wording names no source ("beeping"); a specific sound of the moment says more
    noun: str = ""  # the sound as a noun, for its end cue ("rain" -> "[rain stops]")
    same_sound: tuple[str, ...] = ()  # concepts naming the same sound in other words ("rain" ~ "water")


@dataclass(frozen=True, slots=True)
class Vocabulary:
    """All class entries in classifier output order."""

    entries: tuple[ClassEntry, ...]

    def concepts(self) -> dict[str, tuple[ClassEntry, ...]]:
        """Concept -> its class entries, in first-appearance order."""
        grouped: dict[str, list[ClassEntry]] = {}
        for entry in self.entries:
            grouped.setdefault(entry.concept, []).append(entry)
        return {name: tuple(group) for name, group in grouped.items()}

    def indices(self, kind: Kind) -> list[int]:
        return [e.index for e in self.entries if e.kind is kind]


@dataclass(frozen=True, slots=True)
class ConceptStyle:
    """A house style's changes to one concept; None keeps the vocabulary's own value."""

    concept: str
    phrase: str | None = None  # bracket wording for every class of the concept
    phrase_present: str | None = None  # capitals wording
    noun: str | None = None  # end-cue noun
    priority: int | None = None
    banned: bool = False  # never captioned


def house_vocabulary(vocabulary: Vocabulary, changes: tuple[ConceptStyle, ...], source: str) -> Vocabulary:
    """The vocabulary with a style's house wording, priorities and bans applied.

    Raises:
        StyleError: a change names a concept the vocabulary does not have.
    """
    if not changes:
        return vocabulary
    known = vocabulary.concepts()
    unknown = sorted(c.concept for c in changes if c.concept not in known)
    if unknown:
        raise StyleError(
            source,
            f"vocabulary.{unknown[0]} is not a concept of the model pack's vocabulary",
            f"use a concept id such as {', '.join(list(known)[:4])} (see the pack's vocabulary file)",
        )
    by_concept = {c.concept: c for c in changes}
    entries = []
    for entry in vocabulary.entries:
        change = by_concept.get(entry.concept)
        if change is None:
            entries.append(entry)
            continue
        entries.append(
            replace(
                entry,
                phrase=change.phrase or entry.phrase,
                phrase_present=change.phrase_present or entry.phrase_present,
                noun=change.noun or entry.noun,
                priority=change.priority or entry.priority,
                kind=Kind.IGNORE if change.banned else entry.kind,
            )
        )
    return Vocabulary(tuple(entries))


def load_vocabulary(path: Path, labels: tuple[str, ...]) -> Vocabulary:
    """Read a vocabulary file and align it with the pack's labels.

    Raises:
        PackError: unreadable file, a label missing or mapped twice, a bad field.
    """
    try:
        data = yaml.safe_load(Path(path).read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, yaml.YAMLError) as exc:
        raise PackError(
            path, f"cannot read the vocabulary ({str(exc).splitlines()[0]})", "fix the file"
        ) from exc
    if not isinstance(data, dict):
        raise PackError(
            path, "the vocabulary must map concept names to entries", "see data/yamnet_vocabulary.yaml"
        )
    by_label: dict[str, tuple[str, dict[str, Any], list[str]]] = {}
    for concept, spec in data.items():
        if not isinstance(spec, dict) or not isinstance(spec.get("classes"), dict):
            raise PackError(path, f"concept {concept!r} needs a 'classes' mapping", "fix the entry")
        for label, wording in spec["classes"].items():
            if label in by_label:
                raise PackError(
                    path, f"class {label!r} is mapped twice ({by_label[label][0]} and {concept})", "keep one"
                )
            if not (
                isinstance(wording, list)
                and len(wording) in (2, 3)
                and all(isinstance(w, str) and w.strip() for w in wording)
            ):
                raise PackError(
                    path,
                    f"class {label!r} needs [bracket wording, capitals wording] and optionally its noun",
                    "fix the entry",
                )
            by_label[label] = (str(concept), spec, wording)
    missing = [label for label in labels if label not in by_label]
    extra = sorted(set(by_label) - set(labels))
    if missing or extra:
        problem = (
            f"{len(missing)} class(es) unmapped, e.g. {missing[:3]}"
            if missing
            else f"unknown class(es) {extra[:3]}"
        )
        raise PackError(path, problem, "map every class of the pack exactly once")
    entries = []
    for index, label in enumerate(labels):
        concept, spec, wording = by_label[label]
        try:
            kind = Kind(spec.get("kind"))
        except ValueError as exc:
            raise PackError(
                path,
                f"concept {concept!r} has kind={spec.get('kind')!r}",
                f"use one of {', '.join(k.value for k in Kind)}",
            ) from exc
        priority = spec.get("priority", 2)
        if not isinstance(priority, int) or not 1 <= priority <= 5:
            raise PackError(path, f"concept {concept!r} has priority={priority!r}", "use a whole number 1..5")
        parent = spec.get("parent")
        if parent is not None and parent not in data:
            raise PackError(
                path,
                f"concept {concept!r} names unknown parent {parent!r}",
                "add that concept or drop the parent",
            )
        generic = spec.get("generic", False)
        if not isinstance(generic, bool):
            raise PackError(path, f"concept {concept!r} has generic={generic!r}", "use true or false")
        noun = wording[2] if len(wording) == 3 else spec.get("noun", "")
        if not isinstance(noun, str):
            raise PackError(path, f"concept {concept!r} has noun={noun!r}", "use the sound's name as text")
        entries.append(
            ClassEntry(
                index,
                label,
                concept,
                wording[0],
                wording[1],
                kind,
                priority,
                parent,
                generic,
                noun,
                _same_sound(path, concept, spec.get("same_sound", []), data),
            )
        )
    return Vocabulary(tuple(entries))


def _same_sound(path: Path, concept: str, names: Any, concepts: dict[str, Any]) -> tuple[str, ...]:
    if not isinstance(names, list) or not all(isinstance(n, str) and n in concepts for n in names):
        raise PackError(
            path,
            f"concept {concept!r} has same_sound={names!r}",
            "list concepts of this file, e.g. same_sound: [water]",
        )
    return tuple(names)
