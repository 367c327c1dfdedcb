"""Concept heads against the classifier's own classes on an annotated set: separability and reach.

For every devNN clip (WAV and MP4 versions) the score tracks are computed once with their
embeddings; then each truth concept's curve is taken (a) from the classifier's classes only
and (b) from the heads where the pack has one (as the pipeline does). Reported per concept
and class-balanced: ROC AUC and average precision over all patches, and *reach*: the events
whose curve gets above one global threshold, chosen so that at most BUDGET patches outside
every annotated event score that high on any captioned concept. With --captions the clips are
also captioned from the same tracks and scored with the set's scorer. Not collected by pytest.

    python tests/benchmarks/heads_dev.py EVAL_DIR [--heads FILE] [--captions]
"""

from __future__ import annotations

import argparse
import sys
import tempfile
from dataclasses import replace
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).parent))

from evaluate_dev import score, write_captions

from captioner import packs, pipeline
from captioner.events import concept_curves
from captioner.formats.annotations import read_concepts, read_truth
from captioner.heads import HeadSet, load_heads
from captioner.scores import ScoreTrack, compute_scores
from captioner.separability import average_precision, patch_labels, resolve_score_map, roc_auc
from captioner.style import load_style
from captioner.teach import decode

BUDGET = 5  # false patches allowed at the reach threshold


def tracks_for(eval_dir: Path, ext: str, pack: packs.LoadedPack, cache: Path) -> dict[str, ScoreTrack]:
    style = load_style("brackets")
    out = {}
    for clip in sorted(eval_dir.glob(f"dev*.{ext}")):
        stored = cache / f"{clip.stem}.{ext}.npz"
        if stored.is_file():
            data = np.load(stored)
            track = ScoreTrack(
                data["scores"],
                480,
                960,
                data["energy"],
                10.0,
                int(data["duration"]),
                embeddings=data["embeddings"],
            )
        else:
            samples = decode(clip, 16000)
            track = compute_scores(
                [samples],
                pack.classifier,
                pack.manifest.frontend,
                hop_ms=style.detection.patch_hop_ms,
                level_spread_db=style.detection.level_spread_db,
                keep_embeddings=True,
            )
            assert track.embeddings is not None
            np.savez(
                stored,
                scores=track.scores,
                energy=track.energy_db,
                duration=track.duration_ms,
                embeddings=track.embeddings,
            )
        out[clip.stem] = track
    return out


def with_heads(track: ScoreTrack, heads: HeadSet | None) -> ScoreTrack:
    if heads is None or track.embeddings is None:
        return replace(track, head_scores=np.zeros((track.n_patches, 0), np.float32), head_concepts=())
    return replace(track, head_scores=heads(track.embeddings, track.scores), head_concepts=heads.concepts)


def measure(
    tracks: dict[str, ScoreTrack], pack: packs.LoadedPack, truth: list, score_map: dict[str, tuple[str, ...]]
) -> dict[str, dict[str, float | int | None]]:
    curves = {
        name: {c: v[0] for c, v in concept_curves(t, pack.vocabulary).items()} for name, t in tracks.items()
    }
    # The reach threshold: the lowest value at which at most BUDGET patches outside all events
    # score that high on any captioned concept.
    outside = []
    for name, track in tracks.items():
        spans = [(e.start_ms, e.end_ms) for e in truth if e.file == name]
        inside = patch_labels(spans, track.n_patches, track.hop_ms, track.patch_ms)
        # a patch touching an event at all is not "outside"
        starts = np.arange(track.n_patches) * track.hop_ms
        for s, e in spans:
            inside |= (starts < e + 500) & (starts + track.patch_ms > s - 500)
        top = np.max(np.stack(list(curves[name].values())), axis=0)
        outside.append(top[~inside])
    peaks = np.sort(np.concatenate(outside))[::-1]
    threshold = float(peaks[BUDGET]) + 1e-6 if peaks.size > BUDGET else 0.0
    results: dict[str, dict[str, float | int | None]] = {}
    for concept, ids in score_map.items():
        s_all, l_all, reached, events = [], [], 0, 0
        for name, track in tracks.items():
            available = [curves[name][i] for i in ids if i in curves[name]]
            curve = np.max(available, axis=0) if available else np.zeros(track.n_patches)
            spans = [(e.start_ms, e.end_ms) for e in truth if e.file == name and e.concept == concept]
            s_all.append(curve)
            l_all.append(patch_labels(spans, track.n_patches, track.hop_ms, track.patch_ms))
            for start, end in spans:
                events += 1
                first = max(0, start // track.hop_ms - 1)
                last = min(track.n_patches, end // track.hop_ms + 1)
                reached += bool(curve[first:last].max(initial=0) >= threshold)
        s, lab = np.concatenate(s_all), np.concatenate(l_all)
        both = lab.any() and (~lab).any()
        results[concept] = {
            "auc": roc_auc(s, lab) if both else None,
            "ap": average_precision(s, lab) if both else None,
            "events": events,
            "reached": reached,
        }
    results["_threshold"] = {"value": threshold}
    return results


def main() -> int:
    parser = argparse.ArgumentParser(
        description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter
    )
    parser.add_argument("eval_dir", type=Path)
    parser.add_argument("--heads", type=Path, help="a head file to use instead of the pack's")
    parser.add_argument("--cache", type=Path, default=Path(tempfile.gettempdir()) / "captioner-heads-dev")
    parser.add_argument("--captions", action="store_true", help="also caption and score (default style)")
    args = parser.parse_args()
    args.cache.mkdir(parents=True, exist_ok=True)
    pack = packs.load_pack(packs.DEFAULT_PACK, cache=packs.cache_root())
    heads = load_heads(args.heads) if args.heads else pack.heads
    if heads is not None and args.heads:
        from captioner.heads import with_head_concepts

        pack = replace(pack, heads=heads, vocabulary=with_head_concepts(pack.vocabulary, heads))
    concepts = read_concepts(args.eval_dir / "concepts.yaml")
    truth = list(read_truth(args.eval_dir / "truth.csv", concepts))
    score_map = resolve_score_map(
        concepts, sorted({e.concept for e in truth}), pack.vocabulary, {}, source=args.eval_dir
    )
    for ext in ("wav", "mp4"):
        base = tracks_for(args.eval_dir, ext, pack, args.cache)
        before = measure({n: with_heads(t, None) for n, t in base.items()}, pack, truth, score_map)
        after = measure({n: with_heads(t, heads) for n, t in base.items()}, pack, truth, score_map)
        print(f"\n### {ext.upper()} files: classes only -> with heads\n")
        print(
            "| concept | scored by | events | AUC | AP | reached "
            "| AUC (heads) | AP (heads) | reached (heads) |"
        )
        print("|---|---|---:|---:|---:|---:|---:|---:|---:|")
        for concept in score_map:
            b, a = before[concept], after[concept]
            headed = ", ".join(i + ("*" if heads and i in heads.concepts else "") for i in score_map[concept])
            print(
                f"| {concept} | {headed} | {b['events']} | {_f(b['auc'])} | {_f(b['ap'])} | {b['reached']} "
                f"| {_f(a['auc'])} | {_f(a['ap'])} | {a['reached']} |"
            )
        for label, r in (("classes only", before), ("with heads", after)):
            rows = [v for k, v in r.items() if not k.startswith("_")]
            aucs = [v["auc"] for v in rows if v["auc"] is not None]
            aps = [v["ap"] for v in rows if v["ap"] is not None]
            reach = sum(int(v["reached"] or 0) for v in rows)
            total = sum(int(v["events"] or 0) for v in rows)
            print(
                f"\n{label}: balanced AUC {np.mean(aucs):.3f}, AP {np.mean(aps):.3f}; "
                f"{reach}/{total} events reach the threshold {r['_threshold']['value']:.3f} "
                f"that lets {BUDGET} patches outside all events through"
            )
        if args.captions:
            style = load_style("brackets")
            cues = {
                n: pipeline.caption_track(with_heads(t, heads), pack.vocabulary, style)[3]
                for n, t in base.items()
            }
            folder = args.cache / f"captions-{ext}"
            write_captions(folder, cues)
            o = score(args.eval_dir, folder)["overall"]
            print(
                f"\ncaptions ({ext}): F1 {o['F1']:.3f} P {o['P']:.3f} R {o['R']:.3f} "
                f"({o['events_hit']}/{o['events']} events, {o['cues']} cues), onset {o['onset_mae']:.2f} s, "
                f"false alarms {o['false_alarms_per_dialogue_minute']:.2f}/dialogue min"
            )
    return 0


def _f(value: float | int | None) -> str:
    return "–" if value is None else f"{value:.3f}"


if __name__ == "__main__":
    sys.exit(main())
