"""JSON sidecar: every detected event with its scores and decision, the cues, and score curves."""

from __future__ import annotations

import json
from typing import Any

import numpy as np

from ..pipeline import Captioned
from ..vocabulary import Kind, Vocabulary

SIDECAR_VERSION = 1
_CURVE_FLOOR = 0.02  # concepts that never reach this score are left out to keep files small


def sidecar(result: Captioned, vocabulary: Vocabulary) -> dict[str, Any]:
    """A JSON-ready description of one run."""
    decisions = {d.event_id: d for d in result.decisions}
    return {
        "version": SIDECAR_VERSION,
        "source": result.source.name,
        "pack": result.pack_name,
        "style": result.style.name,
        "duration_ms": result.track.duration_ms,
        "dialogue": {"source": result.dialogue_source, "spans": [[s.start_ms, s.end_ms] for s in result.dialogue]},
        "events": [
            {
                "id": e.event_id,
                "concept": e.concept,
                "class": e.label,
                "text": e.phrase,
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
        "cues": [{"start_ms": c.start_ms, "end_ms": c.end_ms, "text": c.text, "events": list(c.event_ids)} for c in result.cues],
        "scores": _curves(result, vocabulary),
    }


def _curves(result: Captioned, vocabulary: Vocabulary) -> dict[str, Any]:
    track = result.track
    curves = {}
    for concept, entries in vocabulary.concepts().items():
        if entries[0].kind is Kind.IGNORE:
            continue
        curve = track.scores[:, [e.index for e in entries]].max(axis=1) if track.n_patches else np.zeros(0)
        if curve.size and curve.max() >= _CURVE_FLOOR:
            curves[concept] = [round(float(v), 3) for v in curve]
    return {"hop_ms": track.hop_ms, "patch_ms": track.patch_ms, "concepts": curves}


def dumps(result: Captioned, vocabulary: Vocabulary) -> str:
    return json.dumps(sidecar(result, vocabulary), indent=1, ensure_ascii=False) + "\n"
