"""Dialogue: the time spans where someone is speaking, from the speech classes' scores."""

from __future__ import annotations

import numpy as np
from scipy.ndimage import median_filter

from .events import Span, hysteresis, median_patches
from .scores import ScoreTrack
from .style import Detection
from .vocabulary import Kind, Vocabulary


def speech_spans(track: ScoreTrack, vocabulary: Vocabulary, settings: Detection) -> tuple[Span, ...]:
    """Spans where the speech classes are active, with their own double threshold.

    Patch timing is coarse (a patch spans `patch_ms`), so a span runs from the start of
    its first active patch to the end of its last one: generous on purpose, since a
    dialogue span only ever protects speech from being covered by sound captions.
    """
    columns = vocabulary.indices(Kind.SPEECH)
    if not columns or track.n_patches == 0:
        return ()
    curve = track.scores[:, columns].max(axis=1)
    kernel = median_patches(settings.median_ms, track.hop_ms)
    if kernel > 1:
        curve = median_filter(curve, size=kernel, mode="nearest")
    spans = []
    for first, last in hysteresis(curve, settings.speech_onset, settings.speech_offset):
        start = int(track.patch_start_ms(first))
        end = min(int(track.patch_start_ms(last - 1)) + track.patch_ms, max(track.duration_ms, start + 1))
        spans.append(Span(start, end))
    return tuple(spans)


def overlap_ms(start_ms: int, end_ms: int, spans: tuple[Span, ...]) -> int:
    """Total time that [start_ms, end_ms) shares with the spans.

    >>> overlap_ms(1000, 3000, (Span(0, 1500), Span(2500, 9000)))
    1000
    """
    starts = np.array([s.start_ms for s in spans], dtype=np.int64)
    ends = np.array([s.end_ms for s in spans], dtype=np.int64)
    if starts.size == 0:
        return 0
    return int(np.clip(np.minimum(ends, end_ms) - np.maximum(starts, start_ms), 0, None).sum())
