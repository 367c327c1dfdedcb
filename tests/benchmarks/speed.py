"""Speed and memory benchmark: real-time factor end to end and per stage, and peak memory.

Generates AAC-in-MP4 test inputs (pink noise, tones and bursts) of the requested lengths,
then runs each measurement in a fresh process so peak memory is that run's own.

    python tests/benchmarks/speed.py            # 10 and 60 minutes
    python tests/benchmarks/speed.py --minutes 1 5
    python tests/benchmarks/speed.py --stages decode end_to_end

Prints a Markdown table for the README.
"""

from __future__ import annotations

import argparse
import dataclasses
import json
import os
import platform
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
from threadpoolctl import threadpool_limits

from captioner import media, packs, pipeline
from captioner.features import PatchStream
from captioner.scores import compute_scores
from captioner.style import load_style

STAGES = ("decode", "features", "classify", "end_to_end_no_heads", "end_to_end")


def make_input(path: Path, minutes: int) -> Path:
    """An AAC audio track with pink noise plus a recurring tone, in MP4 with a tiny picture."""
    seconds = minutes * 60
    if path.exists():
        return path
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
            f"color=c=black:s=64x64:r=1:d={seconds}",
            "-f",
            "lavfi",
            "-i",
            f"anoisesrc=d={seconds}:c=pink:a=0.05:r=44100",
            "-f",
            "lavfi",
            "-i",
            f"sine=f=880:r=44100:d={seconds}",
            "-filter_complex",
            "[2:a]volume='0.3*lt(mod(t,7),0.5)':eval=frame[beep];[1:a][beep]amix=inputs=2:normalize=0[a]",
            "-map",
            "0:v",
            "-map",
            "[a]",
            "-c:v",
            "libx264",
            "-preset",
            "ultrafast",
            "-c:a",
            "aac",
            "-b:a",
            "96k",
            "-ac",
            "2",
            str(path),
        ],
        check=True,
    )
    return path


def measure(path: Path, stage: str) -> dict[str, float]:
    """Run one stage on one file in this process; returns seconds and peak RSS (MB)."""
    pack = packs.load_pack(packs.DEFAULT_PACK, cache=packs.cache_root(), say=lambda m: None)
    style = load_style("brackets")
    frontend = pack.manifest.frontend
    info = media.probe(path)
    stream = info.choose_stream(None)
    began = time.perf_counter()
    cpu = time.process_time()
    if stage.startswith("end_to_end"):
        if stage == "end_to_end_no_heads":  # the classifier's classes only, as before the heads
            pack = dataclasses.replace(pack, heads=None)
        result = pipeline.caption_file(path, pack, style)
        extra = {"cues": len(result.cues)}
    elif stage == "decode":
        total = sum(
            chunk.size for chunk in media.decode_chunks(path, stream, sample_rate=frontend.sample_rate)
        )
        extra = {"samples": total}
    else:
        hop_frames = style.detection.patch_hop_ms // 10
        # Decode first (not timed) into a memory-mapped file so this stage is timed alone.
        raw = Path(tempfile.mkdtemp()) / "audio.f32"
        with raw.open("wb") as sink:
            for chunk in media.decode_chunks(path, stream, sample_rate=frontend.sample_rate):
                sink.write(chunk.tobytes())
        audio = np.memmap(raw, dtype="<f4", mode="r")
        began, cpu = time.perf_counter(), time.process_time()
        step = 60 * frontend.sample_rate
        chunks = (np.asarray(audio[i : i + step]) for i in range(0, audio.size, step))
        with threadpool_limits(limits=1, user_api="blas"):  # as the pipeline runs them
            if stage == "classify":  # as the pipeline scores: every patch at three levels
                n = compute_scores(
                    chunks,
                    pack.classifier,
                    frontend,
                    hop_ms=style.detection.patch_hop_ms,
                    level_spread_db=style.detection.level_spread_db,
                    heads=pack.heads,
                ).n_patches
            else:
                patch_stream = PatchStream(frontend, hop_frames)
                n = sum(patch_stream.push(chunk).patches.shape[0] for chunk in chunks)
        extra = {"patches": n}
    seconds = time.perf_counter() - began
    peak_mb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    return {"seconds": seconds, "cpu_seconds": time.process_time() - cpu, "peak_mb": peak_mb, **extra}


def main() -> None:
    parser = argparse.ArgumentParser(
        description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter
    )
    parser.add_argument("--minutes", type=int, nargs="+", default=[10, 60])
    parser.add_argument("--workdir", type=Path, default=Path(tempfile.gettempdir()) / "captioner-bench")
    parser.add_argument(
        "--stages",
        nargs="+",
        choices=STAGES,
        default=list(STAGES),
        help="which rows to measure (default: all)",
    )
    parser.add_argument("--stage", help=argparse.SUPPRESS)
    parser.add_argument("--input", type=Path, help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.stage:  # child process: one measurement, printed as JSON
        print(json.dumps(measure(args.input, args.stage)))
        return
    args.workdir.mkdir(parents=True, exist_ok=True)
    print(f"machine: {platform.machine()}, {os.cpu_count()} cores, Python {platform.python_version()}")
    print("| input | stage | wall s | CPU s | × real time | peak MB (Python process) |")
    print("|---|---|---|---|---|---|")
    for minutes in args.minutes:
        path = make_input(args.workdir / f"bench-{minutes}min.mp4", minutes)
        for stage in args.stages:
            out = subprocess.run(
                [sys.executable, __file__, "--stage", stage, "--input", str(path)],
                capture_output=True,
                text=True,
                check=True,
            )
            r = json.loads(out.stdout.strip().splitlines()[-1])
            label = {
                "features": "log-mel only",
                "classify": "log-mel + classifier + heads",
                "end_to_end_no_heads": "end to end, classes only",
                "end_to_end": "end to end (with heads)",
            }.get(stage, "decode (ffmpeg)")
            print(
                f"| {minutes} min AAC | {label} | {r['seconds']:.1f} | {r['cpu_seconds']:.1f} | "
                f"{minutes * 60 / r['seconds']:.0f}× | {r['peak_mb']:.0f} |",
                flush=True,
            )


if __name__ == "__main__":
    main()
