"""The corpus recipe (training/sources.yaml): packages, labelling rules and licences."""

from __future__ import annotations

import fnmatch
import re
from dataclasses import dataclass
from pathlib import Path

import yaml

SOURCES = Path(__file__).with_name("sources.yaml")


@dataclass(frozen=True)
class Rule:
    """Files of `package` whose path matches `match` are examples of `label`."""

    package: str
    match: str
    label: str  # a concept id, or the kind of a negative
    reason: str
    negative: bool

    @property
    def name(self) -> str:
        return f"{self.package}:{self.match}"

    def selects(self, package: str, path: str) -> bool:
        return package == self.package and re.search(self.match, path, re.IGNORECASE) is not None


@dataclass(frozen=True)
class Package:
    name: str
    version: str
    licence: str  # empty: read from the package's copyright file


@dataclass(frozen=True)
class Recipe:
    excluded: tuple[str, ...]
    packages: tuple[Package, ...]
    rules: tuple[Rule, ...]

    def rule_for(self, package: str, path: str) -> Rule | None:
        """The first rule that selects the file (positive rules come first)."""
        return next((rule for rule in self.rules if rule.selects(package, path)), None)

    def package(self, name: str) -> Package:
        return next(p for p in self.packages if p.name == name)


def load_recipe(path: Path = SOURCES) -> Recipe:
    data = yaml.safe_load(path.read_text(encoding="utf-8"))
    packages = tuple(
        Package(name, str(info["version"]), str(info.get("licence", "")))
        for name, info in data["packages"].items()
    )
    rules = [Rule(r["package"], r["match"], r["concept"], r["reason"], False) for r in data["rules"]]
    rules += [Rule(r["package"], r["match"], r["kind"], r["reason"], True) for r in data["negatives"]]
    return Recipe(tuple(data["excluded"]), packages, tuple(rules))


@dataclass(frozen=True)
class Stanza:
    patterns: tuple[str, ...]
    licence: str


def copyright_stanzas(text: str) -> list[Stanza]:
    """`Files:` stanzas of a machine-readable (DEP-5) copyright file; empty for other formats."""
    stanzas: list[Stanza] = []
    for block in re.split(r"\n\s*\n", text):
        files = re.search(r"^Files:(.*(?:\n[ \t].*)*)", block, re.MULTILINE)
        licence = re.search(r"^License:[ \t]*(.*)", block, re.MULTILINE)
        if files and licence and licence.group(1).strip():
            stanzas.append(Stanza(tuple(files.group(1).split()), licence.group(1).strip()))
    return stanzas


def licence_of(path: str, stanzas: list[Stanza], fallback: str) -> str:
    """The licence of the last stanza whose pattern matches the end of the installed path.

    Copyright files name source-tree paths (``data/sounds/x.ogg``); the installed path
    (``usr/share/games/x/data/sounds/x.ogg``) ends with the same components, so a pattern is
    tried against every tail of it. As in DEP-5, the last matching stanza wins.
    """
    parts = path.split("/")
    tails = ["/".join(parts[i:]) for i in range(len(parts))]
    found = fallback
    for stanza in stanzas:
        if any(fnmatch.fnmatchcase(tail, pattern) for pattern in stanza.patterns for tail in tails):
            found = stanza.licence
    return found
