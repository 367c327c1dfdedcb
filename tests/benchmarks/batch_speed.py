"""Batch throughput and per-file overhead: `captioner batch` with 1 and 2 local workers.

Builds a library of generated AAC-in-MP4 files (pink noise with a recurring beep, from
speed.py), runs the real command in a fresh process per measurement, and reports:

- audio hours captioned per wall-clock hour, with 1 and 2 workers; the wall time is the
  whole command (interpreter start, worker start, model load, every file, the manifest);
- startup: the whole command on a library of one 1-second file (interpreter, imports,
  worker processes, model load, one tiny file);
- overhead per file once warm: the extra wall time per extra 1-second file in a library of
  many such files, (T(n files) - T(1 file)) / (n - 1); it includes probing, decoding and
  classifying that second of audio, so it is an upper bound.

    python tests/benchmarks/batch_speed.py                     # 8 files x 3 min, 24 tiny files
    python tests/benchmarks/batch_speed.py --files 4 --minutes 1 --tiny 10

Each measurement is the fastest of --repeat runs (other work on a shared machine only ever
slows a run down). Prints Markdown tables for the README, with the load average before and
after. Set CAPTIONER_CACHE if the model pack lives there.
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import resource
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))
from speed import make_input


def build_library(folder: Path, source: Path, count: int) -> Path:
    """`count` copies of `source` in two subfolders (the scan is recursive)."""
    if folder.exists():
        shutil.rmtree(folder)
    for index in range(count):
        target = folder / f"reel{index % 2}" / f"clip{index:03d}.mp4"
        target.parent.mkdir(parents=True, exist_ok=True)
        shutil.copyfile(source, target)
    return folder


def run_batch(library: Path, output: Path, workers: int) -> tuple[float, float, dict[str, object]]:
    """Wall and CPU seconds of one whole `captioner batch` command (CPU of every process it
    started: workers and ffmpeg included), and its JSON summary."""
    if output.exists():
        shutil.rmtree(output)
    cpu = _children_cpu()
    began = time.perf_counter()
    done = subprocess.run(
        [
            sys.executable,
            "-m",
            "captioner",
            "batch",
            str(library),
            "-o",
            str(output),
            "--workers",
            str(workers),
            "--json",
            "--quiet",
        ],
        capture_output=True,
        text=True,
    )
    wall = time.perf_counter() - began
    if done.returncode != 0:
        raise SystemExit(f"captioner batch failed ({done.returncode}): {done.stderr.strip()}")
    return wall, _children_cpu() - cpu, json.loads(done.stdout)


def _children_cpu() -> float:
    usage = resource.getrusage(resource.RUSAGE_CHILDREN)
    return usage.ru_utime + usage.ru_stime


def load_seconds(output: Path) -> list[float]:
    """Model loading time each worker paid, from the run manifest."""
    import sqlite3

    db = sqlite3.connect(output / "captioner-batch.sqlite3")
    values = [row[0] for row in db.execute("SELECT load_s FROM files WHERE load_s > 0")]
    db.close()
    return values


def uptime() -> str:
    """The 1, 5 and 15 minute load averages (other work on the machine skews the numbers)."""
    try:
        return " ".join(Path("/proc/loadavg").read_text().split()[:3])
    except OSError:
        return "unknown"


def main() -> None:
    parser = argparse.ArgumentParser(
        description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter
    )
    parser.add_argument("--files", type=int, default=8, help="files in the throughput library")
    parser.add_argument("--minutes", type=int, default=3, help="length of each of those files")
    parser.add_argument("--tiny", type=int, default=24, help="1-second files in the overhead library")
    parser.add_argument("--workers", type=int, nargs="+", default=[1, 2])
    parser.add_argument(
        "--repeat",
        type=int,
        default=3,
        help="runs per measurement, alternating worker counts; the fastest is kept",
    )
    parser.add_argument("--workdir", type=Path, default=Path(tempfile.gettempdir()) / "captioner-batch-bench")
    args = parser.parse_args()
    work = args.workdir
    work.mkdir(parents=True, exist_ok=True)
    source = make_input(work / f"source-{args.minutes}min.mp4", args.minutes)
    tiny = work / "tiny.mp4"
    if not tiny.exists():
        from captioner import media

        subprocess.run(
            [
                media.ffmpeg_executable(),
                "-v",
                "error",
                "-y",
                "-nostdin",
                "-f",
                "lavfi",
                "-i",
                "anoisesrc=d=1:c=pink:a=0.1:r=44100",
                "-c:a",
                "aac",
                str(tiny),
            ],
            check=True,
        )
    big = build_library(work / "library", source, args.files)
    many = build_library(work / "tiny-many", tiny, args.tiny)
    one = build_library(work / "tiny-one", tiny, 1)

    print(
        f"machine: {platform.machine()}, {os.cpu_count()} cores, Python {platform.python_version()}; load "
        f"average before: {uptime()}"
    )
    audio_hours = args.files * args.minutes / 60
    print(
        f"\nlibrary: {args.files} files x {args.minutes} min AAC-in-MP4 = {audio_hours * 60:.0f} min of "
        "audio\n"
    )
    print(
        "| workers | wall s (whole command) | audio h per wall h | speed-up | CPU s | cores busy | model "
        "load s per worker |"
    )
    print("|---|---|---|---|---|---|---|")
    best: dict[int, tuple[float, float]] = {}
    for _ in range(args.repeat):  # alternate, so a burst of other load hits both alike
        for workers in args.workers:
            wall, cpu, _ = run_batch(big, work / f"out-{workers}", workers)
            if workers not in best or wall < best[workers][0]:
                best[workers] = (wall, cpu)
    base = None
    for workers in args.workers:
        wall, cpu = best[workers]
        rate = audio_hours / (wall / 3600)
        base = base or rate
        loads = load_seconds(work / f"out-{workers}")
        load = f"{sum(loads) / len(loads):.2f}" if loads else "-"
        print(
            f"| {workers} | {wall:.1f} | {rate:.0f} | {rate / base:.2f}x | {cpu:.1f} | {cpu / wall:.2f} | "
            f"{load} |",
            flush=True,
        )

    print(f"\noverhead: libraries of 1 and {args.tiny} one-second AAC files\n")
    print(
        "| workers | startup s (1 file, whole command) | wall s for the library | overhead s per extra file |"
    )
    print("|---|---|---|---|")
    for workers in args.workers:
        start = min(run_batch(one, work / f"tiny-one-out-{workers}", workers)[0] for _ in range(args.repeat))
        wall = min(run_batch(many, work / f"tiny-many-out-{workers}", workers)[0] for _ in range(args.repeat))
        print(
            f"| {workers} | {start:.2f} | {wall:.2f} | {(wall - start) / (args.tiny - 1):.3f} |", flush=True
        )
    print(f"\nload average after: {uptime()}")


if __name__ == "__main__":
    main()
