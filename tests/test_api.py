"""The public API list is sorted and honest, and the doctest examples in pure modules hold."""

from __future__ import annotations

import doctest
import importlib

import pytest

import captioner


def test_all_is_sorted_and_every_name_exists() -> None:
    assert captioner.__all__ == sorted(captioner.__all__)
    for name in captioner.__all__:
        assert hasattr(captioner, name), name


@pytest.mark.parametrize(
    "module", ["features", "events", "dialogue", "policy", "cues", "report", "formats", "formats.webvtt"]
)
def test_doctests(module: str) -> None:
    result = doctest.testmod(importlib.import_module(f"captioner.{module}"))
    assert result.attempted > 0 and result.failed == 0
