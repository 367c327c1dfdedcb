"""One exception tree: every error a user can cause is a CaptionerError.

Each error keeps what it was about as attributes and renders one line:
which file or value, what is wrong, what to do about it.
"""

from __future__ import annotations

from pathlib import Path


class CaptionerError(Exception):
    """Root of the errors the command line reports as one line with exit status 2."""

    def __init__(self, subject: str | Path, problem: str, fix: str) -> None:
        self.subject = str(subject)
        self.problem = problem
        self.fix = fix
        super().__init__(f"{self.subject}: {problem}; {fix}")


class MediaError(CaptionerError):
    """The input cannot be probed or decoded (missing, not media, no audio, corrupt)."""


class PackError(CaptionerError):
    """A model pack is missing, offline, corrupt or malformed."""


class StyleError(CaptionerError):
    """A style preset or style file is unknown or invalid."""


class SubtitleError(CaptionerError):
    """A subtitle or caption file cannot be read."""


class OutputError(CaptionerError):
    """An output cannot be written (exists, unwritable folder)."""
