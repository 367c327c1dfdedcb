"""Style presets and style files: loading and validation messages."""

from __future__ import annotations

from pathlib import Path

import pytest

from captioner.errors import StyleError
from captioner.style import builtin_styles, load_style


def test_presets_follow_the_published_numbers() -> None:
    brackets, capitals = load_style("brackets"), load_style("capitals")
    # DCMP Captioning Key: 32 characters per line (memory), 2 lines, 2.0 s minimum display.
    assert (
        brackets.layout.max_chars_per_line,
        brackets.layout.max_lines,
        brackets.layout.min_duration_ms,
    ) == (32, 2, 2000)
    # BBC Subtitle Guidelines §3.1 / §3.3: 37 characters, 2 lines; §4.5: gaps none or >= 1 s.
    assert (capitals.layout.max_chars_per_line, capitals.layout.max_lines, capitals.layout.min_gap_ms) == (
        37,
        2,
        1000,
    )
    assert (
        capitals.wording.case == "upper"
        and not capitals.wording.brackets
        and capitals.wording.tense == "present"
    )
    assert {"brackets", "capitals"} <= set(builtin_styles())


def test_unknown_style_name() -> None:
    with pytest.raises(StyleError, match="no such style.*brackets"):
        load_style("fancy")


def test_malformed_yaml_names_the_line(tmp_path: Path) -> None:
    path = tmp_path / "bad.yaml"
    path.write_text("layout:\n  max_lines: 2\n  max_chars: [1, 2\n")
    with pytest.raises(StyleError, match="malformed YAML at line"):
        load_style(str(path))


@pytest.mark.parametrize(
    ("text", "message"),
    [
        ("layout:\n  max_lines: 9\n", r"layout.max_lines=9 is outside 1..4"),
        ("layout:\n  max_lines: two\n", r"layout.max_lines='two' must be a int"),
        ("layout:\n  colour: red\n", r"unknown field\(s\) layout.colour"),
        ("fonts: {}\n", r"unknown section\(s\) fonts"),
        ("wording:\n  case: title\n", r"wording.case='title' is not one of lower, upper"),
        ("detection:\n  onset_threshold: 0.2\n  offset_threshold: 0.4\n", r"offset_threshold=0.4 is above"),
        ("detection:\n  level_spread_db: -3\n", r"detection.level_spread_db=-3 is outside 0..20"),
        ("detection:\n  level_spread_db: loud\n", r"detection.level_spread_db='loud' must be a float"),
    ],
)
def test_invalid_values_are_named(tmp_path: Path, text: str, message: str) -> None:
    path = tmp_path / "style.yaml"
    path.write_text(text)
    with pytest.raises(StyleError, match=message):
        load_style(str(path))


def test_partial_file_keeps_defaults(tmp_path: Path) -> None:
    path = tmp_path / "mine.yaml"
    path.write_text("layout:\n  max_chars_per_line: 40\n")
    style = load_style(str(path))
    assert style.layout.max_chars_per_line == 40 and style.layout.max_lines == 2 and style.name == "mine"
