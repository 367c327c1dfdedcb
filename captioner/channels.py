"""Channels: fold any layout into the signal a listener hears, and notice when that fold cancels.

ffmpeg's automatic mono mix of 5.1 (measured one channel at a time: fronts -3 dB, centre
0 dB, surrounds -6 dB) leaves the LFE out, and a music bed carried by the surrounds in
anti-phase (as some upmixes and wide mixes have it) cancels to silence and is lost.
Here the fold is our own `pan` filter with the same ITU-R BS.775 stereo downmix coefficients
(centre and surrounds at -3 dB into left and right; from memory of the recommendation) plus
the LFE, so that it reaches the mono mix at -6 dB (common practice), then left and right
into mono at -3 dB each.

ffmpeg emits two channels: mid = 0.707 (L + R), the mono mix, and side = 0.707 (L - R).
Mid and side together carry the channels' power (P_mid + P_side = P_L + P_R), so a mid far
below that sum means the channels cancel (one is polarity-inverted), and the side is then
the usable signal: for R = -L it is exactly what mid would have been in phase.
"""

from __future__ import annotations

import functools
import re
import subprocess
from dataclasses import dataclass

import numpy as np

from .probing import ffmpeg_executable

_SQRT_HALF = 0.7071
_LFE_GAIN = 0.5
# Mid below this share of the channels' power (10 dB down) means they cancel in the mix.
CANCEL_RATIO = 0.1
_SILENCE_POWER = 1e-8  # -80 dBFS: too quiet to judge cancellation
# How each channel name feeds the left/right fold: (left, right) gains before the mono sum.
_LEFT = {"FL", "FLC", "BL", "SL", "TFL", "TBL", "TSL", "WL", "SDL", "DL", "BFL", "SSL", "TTL", "BIL"}
_RIGHT = {"FR", "FRC", "BR", "SR", "TFR", "TBR", "TSR", "WR", "SDR", "DR", "BFR", "SSR", "TTR", "BIR"}
_FRONT_PAIR = {"FL", "FR", "DL", "DR", "BIL", "BIR"}
_LFE = {"LFE", "LFE2"}


@functools.lru_cache(maxsize=1)
def standard_layouts() -> dict[str, tuple[str, ...]]:
    """ffmpeg's named channel layouts and their channels, from `ffmpeg -layouts`."""
    text = subprocess.run(
        [ffmpeg_executable(), "-hide_banner", "-layouts"], capture_output=True, text=True, errors="replace"
    ).stdout
    layouts: dict[str, tuple[str, ...]] = {}
    table = text.split("Standard channel layouts:", 1)[-1]
    for line in table.splitlines():
        match = re.match(r"^(\S+)\s+([A-Z0-9]+(?:\+[A-Z0-9]+)*)$", line.strip())
        if match and match.group(1) != "NAME":
            layouts[match.group(1)] = tuple(match.group(2).split("+"))
    return layouts


def _gains(name: str) -> tuple[float, float]:
    """(left, right) gain of one channel in the stereo fold."""
    if name in _LFE:
        return (_LFE_GAIN * _SQRT_HALF, _LFE_GAIN * _SQRT_HALF)
    if name in _FRONT_PAIR:
        return (1.0, 0.0) if name in _LEFT else (0.0, 1.0)
    if name in _LEFT:
        return (_SQRT_HALF, 0.0)
    if name in _RIGHT:
        return (0.0, _SQRT_HALF)
    return (_SQRT_HALF, _SQRT_HALF)  # centre channels


def mid_side_pan(layout: str) -> str | None:
    """The `pan` filter argument that folds `layout` into mid and side, or None when the
    layout's channels are unknown (ffmpeg's "3 channels") and its own mono mix must do.

    >>> mid_side_pan("stereo")
    'stereo|c0=0.7071*FL+0.7071*FR|c1=0.7071*FL-0.7071*FR'
    """
    channels = standard_layouts().get(layout)
    if not channels:
        return None
    if channels == ("FC",):
        return "stereo|c0=FC|c1=0*FC"
    mid: list[str] = []
    side: list[str] = []
    for name in channels:
        left, right = _gains(name)
        mid.append(f"{_SQRT_HALF * (left + right):.4g}*{name}")
        if left != right:
            side.append(f"{_SQRT_HALF * (left - right):+.4g}*{name}")
    side_text = "".join(side).lstrip("+") if side else f"0*{channels[0]}"
    return f"stereo|c0={'+'.join(mid)}|c1={side_text}"


@dataclass(frozen=True, slots=True)
class Fold:
    """One decoded block reduced to mono, and whether the mono mix cancelled in it."""

    samples: np.ndarray
    cancelled: bool


def fold(mid_side: np.ndarray) -> Fold:
    """Interleaved (mid, side) float32 -> mono: the mid, or the side where the mid cancels.

    >>> left = np.sin(np.arange(1600) / 5).astype(np.float32)
    >>> fold(np.stack([0 * left, 1.4142 * left], axis=1).reshape(-1)).cancelled
    True
    """
    pairs = mid_side.reshape(-1, 2)
    mid, side = pairs[:, 0], pairs[:, 1]
    mid_power = float(np.dot(mid, mid)) / max(mid.size, 1)
    side_power = float(np.dot(side, side)) / max(side.size, 1)
    total = mid_power + side_power
    if total > _SILENCE_POWER and mid_power < CANCEL_RATIO * total:
        return Fold(side.copy(), True)  # a copy: the caller reuses its buffer
    return Fold(mid.copy(), False)
