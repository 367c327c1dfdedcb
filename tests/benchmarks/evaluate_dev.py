"""Selection policy on an annotated evaluation set: overall and per-concept scores, and an ablation.

Captions every devNN.wav of the set with the default style through the real pipeline (model
pack + `pipeline.caption_file`), scores the captions with the set's own `score.py`, then
re-runs the pure part of the pipeline on the same score tracks with one rule switched off at
a time and scores each variant. Optionally repeats the default run at other patch hops to
compare timing accuracy with classifier cost. Not collected by pytest.

    python tests/benchmarks/evaluate_dev.py EVAL_DIR --hops 480,240,160
    python tests/benchmarks/evaluate_dev.py EVAL_DIR --keep out/   # keep the caption files

EVAL_DIR holds devNN.wav, truth.csv, dialogue.csv, files.csv, concepts.yaml and score.py.
Needs the default model pack (`captioner models install`) and, for score.py, the PyPI
packages webvtt-py, srt, PyYAML and sed_eval.
"""

from __future__ import annotations

import argparse
import json
import subprocess
import sys
import tempfile
import time
from pathlib import Path
from typing import Any

from captioner import packs, pipeline
from captioner.formats import WRITERS
from captioner.scores import ScoreTrack
from captioner.style import Style, load_style, replace

# Each variant switches one rule off (or back to a plain alternative) through settings alone.
ABLATIONS: list[tuple[str, str, dict[str, Any]]] = [
    ("evidence gate off (no energy check)", "selection", {"evidence_gate": False}),
    ("salience threshold off (min_salience 0)", "selection", {"min_salience": 0.0}),
    ("priority ignored in salience", "selection", {"priority_weight": 0.0}),
    ("parent/child redundancy off", "selection", {"parent_redundancy": False}),
    ("sibling redundancy off", "selection", {"sibling_redundancy": False}),
    ("close siblings keep the surest one's name (sibling_margin 0)", "selection", {"sibling_margin": 0.0}),
    ("generic/specific redundancy off", "selection", {"generic_redundancy": False}),
    ("sourceless sounds at any confidence (generic_confidence 0)", "selection", {"generic_confidence": 0.0}),
    ("no safety exemption from the evidence gate", "selection", {"safety_confidence": 1.0}),
    ("dialogue rule off", "selection", {"dialogue_gate": False}),
    ("alerts under dialogue as sure as other sounds", "selection", {"dialogue_alert_confidence": 0.6}),
    ("story sounds under dialogue need 0.7", "selection", {"dialogue_confidence": 0.7}),
    ("move into dialogue gaps off", "selection", {"gap_shift_ms": 0}),
    ("cooldown/joining off", "selection", {"cooldown_ms": 0}),
    ("cooldown 20 s for every sound", "selection", {"cooldown_ms": 20000}),
    ("music cooldown as short as the others", "selection", {"music_cooldown_ms": 0}),
    ("brief music kept (music_min_ms 0)", "selection", {"music_min_ms": 0}),
    ("density cap off", "selection", {"max_cues_per_minute": 0}),
    ("music mood/genre at any confidence", "selection", {"music_detail_confidence": 0.0}),
    ("bridging of flickering patches off", "detection", {"bridge_ms": 0}),
    ("lasting sounds from a single patch", "detection", {"lasting_min_active_ms": 0}),
    (
        "no single sure patch for lasting sounds (lasting_sure_score 1)",
        "detection",
        {"lasting_sure_score": 1.0},
    ),
    ("median filter 1.44 s on lasting sounds", "detection", {"median_ms": 1440}),
    ("onset refinement off", "detection", {"onset_refine": False}),
]


def score(eval_dir: Path, captions: Path) -> dict[str, Any]:
    """Run the set's scorer on a folder of caption files; its JSON report."""
    report = captions / "report.json"
    subprocess.run(
        [
            sys.executable,
            str(eval_dir / "score.py"),
            str(eval_dir),
            str(captions),
            "--json",
            str(report),
            "--quiet",
        ],
        check=True,
        stdout=subprocess.DEVNULL,
    )
    data: dict[str, Any] = json.loads(report.read_text(encoding="utf-8"))
    return data


def write_captions(folder: Path, cues_by_stem: dict[str, tuple[Any, ...]]) -> None:
    folder.mkdir(parents=True, exist_ok=True)
    for stem, cues in cues_by_stem.items():
        (folder / f"{stem}.vtt").write_text(WRITERS["vtt"](cues, "evaluation run"), encoding="utf-8")


def caption_set(
    eval_dir: Path, pack: packs.LoadedPack, style: Style, media: str = "wav"
) -> tuple[dict[str, ScoreTrack], dict[str, tuple[Any, ...]], float]:
    """Caption every devNN.wav (or .mp4) through the real pipeline; tracks, cues and seconds spent."""
    tracks, cues = {}, {}
    started = time.perf_counter()
    for clip in sorted(eval_dir.glob(f"dev*.{media}")):
        result = pipeline.caption_file(clip, pack, style)
        tracks[clip.stem], cues[clip.stem] = result.track, result.cues
    return tracks, cues, time.perf_counter() - started


def recaption(
    tracks: dict[str, ScoreTrack], pack: packs.LoadedPack, style: Style
) -> dict[str, tuple[Any, ...]]:
    return {stem: pipeline.caption_track(track, pack.vocabulary, style)[3] for stem, track in tracks.items()}


def _f(value: Any, digits: int = 3) -> str:
    return "–" if value is None or value != value else f"{value:.{digits}f}"


def overall_row(name: str, o: dict[str, Any]) -> str:
    return (
        f"| {name} | {_f(o['F1'])} | {_f(o['P'])} | {_f(o['R'])} | {o['events_hit']}/{o['events']} | "
        f"{o['cues']} "
        f"| {_f(o['onset_mae'], 2)} | {_f(o['false_alarms_per_dialogue_minute'], 2)} |"
    )


def concept_table(report: dict[str, Any]) -> str:
    lines = [
        "| concept | events | found | cues | matched cues | P | R | F1 | onset error (s) |",
        "|---|---:|---:|---:|---:|---:|---:|---:|---:|",
    ]
    for name, c in sorted(report["per_concept"].items()):
        lines.append(
            f"| {name} | {c['events']} | {c['hit']} | {c['cues']} | {c['cues_tp']} | {_f(c['P'])} | "
            f"{_f(c['R'])} | {_f(c['F1'])} | {_f(c['onset_mae'], 2)} |"
        )
    return "\n".join(lines)


HEADER = (
    "| run | F1 | P | R | events found | cues | onset error (s) | false alarms / dialogue min "
    "|\n|---|---:|---:|---:|---:|---:|---:|---:|"
)


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(
        description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter
    )
    parser.add_argument(
        "eval_dir",
        type=Path,
        help="folder with devNN.wav, truth.csv, dialogue.csv, files.csv, concepts.yaml and score.py",
    )
    parser.add_argument(
        "--style", default="brackets", help="style preset or file (default: brackets, the default style)"
    )
    parser.add_argument("--hops", default="", help="also run these patch hops in ms, e.g. 480,240,160")
    parser.add_argument("--keep", type=Path, help="write the caption files of every run under this folder")
    parser.add_argument(
        "--media", choices=("wav", "mp4"), default="wav", help="which files of the set to caption"
    )
    args = parser.parse_args(argv)
    eval_dir: Path = args.eval_dir
    if not (eval_dir / "score.py").is_file():
        print(f"{eval_dir}: no score.py here; pass the evaluation folder", file=sys.stderr)
        return 2
    pack = packs.load_pack(packs.DEFAULT_PACK, cache=packs.cache_root())
    style = load_style(args.style)
    work = args.keep or Path(tempfile.mkdtemp(prefix="captioner-eval-"))

    tracks, cues, seconds = caption_set(eval_dir, pack, style, args.media)
    write_captions(work / "default", cues)
    report = score(eval_dir, work / "default")
    print(
        f"## Default style `{style.name}`, patch hop {style.detection.patch_hop_ms} ms ({seconds:.1f} s for "
        f"{len(tracks)} files)\n"
    )
    print(HEADER)
    print(overall_row("default", report["overall"]))
    print("\n### Per concept\n")
    print(concept_table(report))

    print("\n### Ablation: one rule off at a time (same score tracks)\n")
    print(HEADER)
    print(overall_row("all rules on (default)", report["overall"]))
    for name, section, changes in ABLATIONS:
        variant = replace(style, section, **changes)
        folder = work / ("off-" + "-".join(changes))
        write_captions(folder, recaption(tracks, pack, variant))
        print(overall_row(name, score(eval_dir, folder)["overall"]), flush=True)

    print("\n### Scoring: one pass or the mean over three input levels (whole pipeline)\n")
    print(
        "| level spread (dB) | F1 | P | R | events found | cues | onset error (s) | false alarms / dialogue "
        "min | seconds for the set |"
    )
    print("|---:|---:|---:|---:|---:|---:|---:|---:|---:|")
    for spread in sorted({0.0, 3.0, style.detection.level_spread_db, 9.0}):
        variant = replace(style, "detection", level_spread_db=spread)
        _, spread_cues, spread_seconds = (
            (tracks, cues, seconds)
            if spread == style.detection.level_spread_db
            else caption_set(eval_dir, pack, variant, args.media)
        )
        folder = work / f"spread-{spread:g}"
        write_captions(folder, spread_cues)
        o = score(eval_dir, folder)["overall"]
        print(
            f"| {spread:g} | {_f(o['F1'])} | {_f(o['P'])} | {_f(o['R'])} | {o['events_hit']}/{o['events']} "
            f"| {o['cues']} "
            f"| {_f(o['onset_mae'], 2)} | {_f(o['false_alarms_per_dialogue_minute'], 2)} | "
            f"{spread_seconds:.1f} |",
            flush=True,
        )

    hops = [int(h) for h in args.hops.split(",") if h.strip()]
    if hops:
        print("\n### Patch hop: timing accuracy against classifier cost (whole pipeline)\n")
        print(
            "| hop (ms) | F1 | P | R | onset error (s) | seconds for the set "
            "|\n|---:|---:|---:|---:|---:|---:|"
        )
        for hop in hops:
            variant = replace(style, "detection", patch_hop_ms=hop)
            _, hop_cues, hop_seconds = caption_set(eval_dir, pack, variant, args.media)
            folder = work / f"hop-{hop}"
            write_captions(folder, hop_cues)
            o = score(eval_dir, folder)["overall"]
            print(
                f"| {hop} | {_f(o['F1'])} | {_f(o['P'])} | {_f(o['R'])} | {_f(o['onset_mae'], 2)} | "
                f"{hop_seconds:.1f} |",
                flush=True,
            )
    print(f"\ncaption files: {work}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
