"""Caption quality and separability on an annotated evaluation set, through the command line.

Captions every NAME.mp4 of the set with `captioner caption` (default style, with a JSON
sidecar) into a work folder, then runs `captioner evaluate` and `captioner evaluate --scores`
and prints both reports as Markdown tables for the README.

    python tests/benchmarks/evaluate_cli_dev.py EVAL_DIR                 # temporary work folder
    python tests/benchmarks/evaluate_cli_dev.py EVAL_DIR --work out/ --style capitals

EVAL_DIR holds truth.csv, concepts.yaml, dialogue.csv, files.csv (file,duration,...) and the clips.
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

CAPTIONER = [sys.executable, "-m", "captioner"]


def run(arguments: list[str]) -> None:
    subprocess.run(
        CAPTIONER + arguments, check=True, stdout=subprocess.DEVNULL
    )  # the reports are read back as JSON


def caption_all(eval_dir: Path, work: Path, style: str | None) -> float:
    started = time.perf_counter()
    for clip in sorted(eval_dir.glob("*.mp4")):
        style_args = ["--style", style] if style else []
        run(
            [
                "caption",
                str(clip),
                "-o",
                str(work / f"{clip.stem}.vtt"),
                "--events-json",
                str(work / f"{clip.stem}.json"),
                "--quiet",
                "--force",
                *style_args,
            ]
        )
    return time.perf_counter() - started


def evaluate(eval_dir: Path, work: Path, *extra: str) -> dict[str, Any]:
    report = work / ("scores.json" if "--scores" in extra else "quality.json")
    run(
        [
            "evaluate",
            str(eval_dir / "truth.csv"),
            str(work),
            "--concepts",
            str(eval_dir / "concepts.yaml"),
            "--dialogue",
            str(eval_dir / "dialogue.csv"),
            "--durations",
            str(eval_dir / "files.csv"),
            "--json",
            str(report),
            "--force",
            *extra,
        ]
    )
    data: dict[str, Any] = json.loads(report.read_text(encoding="utf-8"))
    return data


def _cell(value: float | None, digits: int = 3, scale: float = 1.0) -> str:
    return "–" if value is None else f"{value / scale:.{digits}f}"


def quality_markdown(data: dict[str, Any]) -> str:
    lines = [
        "| concept | events | found | cues | matched | precision | recall | F1 | cues per found event | "
        "onset error (s) |",
        "|---|---:|---:|---:|---:|---:|---:|---:|---:|---:|",
    ]
    rows = [*data["concepts"].items(), ("**overall**", data["overall"])]
    for name, q in rows:
        lines.append(
            f"| {name} | {q['events']} | {q['detected_events']} | {q['cues']} | {q['matched_cues']} | "
            f"{_cell(q['precision'])} | {_cell(q['recall'])} | "
            f"{_cell(q['f1'])} | {_cell(q['redundancy'], 2)} | {_cell(q['onset_error_ms'], 2, 1000)} |"
        )
    overall = data["overall"]
    lines.append("")
    lines.append(
        f"False alarms: {overall['false_alarm_cues']} cue(s) in {data['truth_free_ms'] / 60000:.2f} min of "
        "clips without annotated sounds "
        f"({_cell(overall['false_alarms_per_minute'], 2)} per minute); cues overlapping dialogue: "
        f"{overall['cues_over_dialogue']}; "
        f"cues naming no annotated concept: {data['unnamed_cues']}; collar {data['collar_ms'] / 1000:g} s."
    )
    return "\n".join(lines)


def scores_markdown(data: dict[str, Any]) -> str:
    lines = [
        "| concept | scored by | positive patches | ROC AUC | AP | d′ |",
        "|---|---|---:|---:|---:|---:|",
    ]
    for name, r in data["concepts"].items():
        d_text = _cell(r["d_prime"], 2) if r["d_prime"] is not None or r["auc"] is None else "∞"
        lines.append(
            f"| {name} | {', '.join(r['score_concepts'])} | {r['positives']} | {_cell(r['auc'])} | "
            f"{_cell(r['average_precision'])} | {d_text} |"
        )
    b = data["balanced"]
    lines.append(
        f"| **class-balanced mean** | | | {_cell(b['auc'])} | {_cell(b['average_precision'])} | "
        f"{_cell(b['d_prime'], 2)} |"
    )
    return "\n".join(lines)


def main() -> int:
    parser = argparse.ArgumentParser(
        description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter
    )
    parser.add_argument("eval_dir", type=Path)
    parser.add_argument(
        "--work", type=Path, help="folder for captions, sidecars and reports (default: a temporary one)"
    )
    parser.add_argument("--style", help="style preset or file (default: captioner's default)")
    args = parser.parse_args()
    with tempfile.TemporaryDirectory() as temporary:
        work = args.work or Path(temporary)
        work.mkdir(parents=True, exist_ok=True)
        seconds = caption_all(args.eval_dir, work, args.style)
        quality = evaluate(args.eval_dir, work)
        scores = evaluate(args.eval_dir, work, "--scores")
    print(f"<!-- {len(list(args.eval_dir.glob('*.mp4')))} clips captioned in {seconds:.0f} s -->\n")
    print(quality_markdown(quality))
    print()
    print(scores_markdown(scores))
    return 0


if __name__ == "__main__":
    sys.exit(main())
