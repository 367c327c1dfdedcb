"""JSON sidecar: every detected event with its scores and decision, the cues, and score curves."""

from __future__ import annotations

import json
import re
from collections.abc import Mapping
from typing import Any

from ..captioned import Captioned
from ..cues import event_text
from ..events import concept_curves
from ..vocabulary import Vocabulary

SIDECAR_VERSION = 1
_CURVE_FLOOR = 1e-3  # concepts that never reach this score are left out to keep files small
# Significant digits, not decimals: AUC ranks the many small scores, and rounding them all to
# 0.000 ties them (measured on the dev set: class-balanced AUC 0.93 read back as 0.87).
_DIGITS = 2


def sidecar(result: Captioned, vocabulary: Vocabulary) -> dict[str, Any]:
    """A JSON-ready description of one run.

    Each event carries `text`, its vocabulary phrase ("dog barking"), and `caption`, the
    caption the run's style words it as ("DOG BARKS" in capitals), so a reader can show a
    dropped event as the style would have written it without knowing the style.
    """
    decisions = {d.event_id: d for d in result.decisions}
    wording = result.style.wording
    return {
        "version": SIDECAR_VERSION,
        "source": result.source.name,
        "pack": result.pack_name,
        "style": result.style.name,
        "duration_ms": result.track.duration_ms,
        "audio_stream": _stream(result),
        "dialogue": {
            "source": result.dialogue_source,
            "spans": [[s.start_ms, s.end_ms] for s in result.dialogue],
        },
        "events": [
            {
                "id": e.event_id,
                "concept": e.concept,
                "class": e.label,
                "text": e.phrase,
                "caption": event_text(e, wording),
                "kind": e.kind.value,
                "priority": e.priority,
                "start_ms": e.start_ms,
                "end_ms": e.end_ms,
                "peak_score": round(e.peak_score, 4),
                "mean_score": round(e.mean_score, 4),
                "level_db": round(e.level_db, 1),
                "background_db": round(e.background_db, 1),
                "kept": decisions[e.event_id].kept,
                "rule": decisions[e.event_id].rule,
                "reason": decisions[e.event_id].detail,
            }
            for e in result.events
        ],
        "cues": [
            {"start_ms": c.start_ms, "end_ms": c.end_ms, "text": c.text, "events": list(c.event_ids)}
            for c in result.cues
        ],
        "scores": _curves(result, vocabulary),
    }


def _stream(result: Captioned) -> dict[str, Any] | None:
    """The audio stream captioned, as the file describes it (None for hand-made score tracks)."""
    stream = result.stream
    if stream is None:
        return None
    return {
        "index": stream.index,
        "of": len(result.streams),
        "codec": stream.codec,
        "channels": stream.channels,
        "language": stream.language,
        "title": stream.title,
        "default": stream.is_default,
        "start_ms": stream.start_ms,
    }


def _curves(result: Captioned, vocabulary: Vocabulary) -> dict[str, Any]:
    """Per-patch score of every concept that can become a caption (speech and ignored
    classes cannot; dialogue is described by the `dialogue` spans instead)."""
    track = result.track
    curves = {
        concept: [float(f"{v:.{_DIGITS}g}") for v in curve.tolist()]
        for concept, (curve, _) in concept_curves(track, vocabulary).items()
        if curve.size and curve.max() >= _CURVE_FLOOR
    }
    return {"hop_ms": track.hop_ms, "patch_ms": track.patch_ms, "concepts": curves}


_NUMBER_LIST = re.compile(r"\[\s+([-+\deE.,\s]+?)\s+\]")


def dumps(document: Mapping[str, Any]) -> str:
    """A sidecar document (from `sidecar`, possibly with more sections) as the file's text.

    Indented for reading, except that lists of plain numbers (the score curves) stay on one
    line: one number per line would make an hour's sidecar several times larger.
    """
    text = json.dumps(document, indent=1, ensure_ascii=False)
    return _NUMBER_LIST.sub(lambda m: "[" + re.sub(r",\s+", ",", m.group(1)) + "]", text) + "\n"
