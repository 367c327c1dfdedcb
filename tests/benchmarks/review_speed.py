"""Review page speed in headless Chromium on a one-hour file with ~300 cues and their curves.

Builds a one-hour AAC-in-MP4 input (as speed.py does), a made-up sound-caption track of 300
cues and a sidecar with 300 kept and 200 dropped events over 40 concepts (score curves every
0.48 s) and 400 dialogue spans, writes the page with `review.build_page` (which decodes the
waveform), then measures in Debian's chromium through Selenium:

- page ready: from navigation start to the end of the page script (`review-ready` mark),
  and to the load event;
- typing: per key in a cue's text, the page's own handling plus the style and layout it
  causes (keydown to the end of the input event, layout forced), over 80 keys;
- timeline: one step of panning at a 30 s view and a redraw of the whole hour, with layout;
  how many cue blocks exist at a time (only the visible ones are drawn);
- the cue list: one 600 px scroll step with layout.

    python tests/benchmarks/review_speed.py [--workdir DIR]

Prints a Markdown table for the README.
"""

from __future__ import annotations

import argparse
import json
import shutil
import statistics
import sys
import tempfile
import time
from pathlib import Path
from typing import Any

import numpy as np

from captioner import review, update
from captioner.cues import Cue

sys.path.insert(0, str(Path(__file__).parent))
from speed import make_input  # the same generated input as the speed benchmark

HOUR_MS = 3_600_000
N_CUES, N_DROPPED, N_CONCEPTS = 300, 200, 40


def make_track_and_sidecar(folder: Path, media: Path) -> tuple[Path, Path]:
    rng = np.random.default_rng(7)
    starts = np.sort(rng.choice(np.arange(0, HOUR_MS - 10_000, 1000), N_CUES + N_DROPPED, replace=False))
    concepts = [f"concept_{n:02d}" for n in range(N_CONCEPTS)]
    events: list[dict[str, Any]] = []
    cues: list[Cue] = []
    for n, start in enumerate(starts):
        start = int(start)
        end = start + int(rng.integers(1500, 6000))
        kept = n % 5 < 3 and len(cues) < N_CUES
        identifier = f"e{n:04d}"
        concept = concepts[n % N_CONCEPTS]
        events.append(
            {
                "id": identifier,
                "concept": concept,
                "text": f"sound number {n}",
                "caption": f"[sound number {n}]",
                "start_ms": start,
                "end_ms": end,
                "kept": kept,
                "rule": "kept" if kept else "confidence",
                "reason": "made up for the benchmark",
                "peak_score": 0.5,
            }
        )
        if kept:
            cues.append(Cue(start, end, (f"[sound number {n}]",), (identifier,)))
    while len(cues) < N_CUES:  # top up: every fifth event onwards is kept
        event = next(e for e in events if not e["kept"])
        event["kept"] = True
        cues.append(Cue(event["start_ms"], event["end_ms"], (event["caption"],), (event["id"],)))
    cues.sort(key=lambda c: c.start_ms)
    n_patches = HOUR_MS // 480
    curves = {}
    for concept in concepts:
        noise = np.convolve(rng.random(n_patches), np.ones(9) / 9, mode="same")
        curves[concept] = [round(float(v), 2) for v in np.clip(noise - 0.3, 0, 1)]
    spans = sorted(int(s) for s in rng.choice(np.arange(0, HOUR_MS - 5000, 500), 400, replace=False))
    sidecar = {
        "version": 1,
        "duration_ms": HOUR_MS,
        "dialogue": {"source": "classifier", "spans": [[s, s + 3000] for s in spans]},
        "events": events,
        "scores": {"hop_ms": 480, "patch_ms": 960, "concepts": curves},
    }
    track = folder / "hour.sounds.vtt"
    track.write_text(update.recorded_vtt(cues, "made up for the review benchmark"))
    side = folder / "hour.sounds.json"
    side.write_text(json.dumps(sidecar))
    return track, side


def browser() -> Any:
    from selenium import webdriver
    from selenium.webdriver.chrome.service import Service

    options = webdriver.ChromeOptions()
    options.binary_location = shutil.which("chromium") or "chromium"
    for flag in ("--headless", "--no-sandbox", "--disable-gpu", "--window-size=1280,900"):
        options.add_argument(flag)
    return webdriver.Chrome(options=options, service=Service(shutil.which("chromedriver") or "chromedriver"))


_TYPING_PROBE = """
window.__keys = [];
let t0 = 0;
window.addEventListener('keydown', () => { t0 = performance.now(); }, true);
window.addEventListener('input', () => {
  document.body.getBoundingClientRect();  // the layout the keystroke caused
  window.__keys.push(performance.now() - t0);
});
"""

_TIMELINE_PROBE = """
const api = window.soundCaptionReview, steps = [];
api.setView(600000, 30000);
for (let i = 1; i <= 100; i++) {
  const t = performance.now();
  api.setView(600000 + i * 3000, 30000);
  document.body.getBoundingClientRect();
  steps.push(performance.now() - t);
}
const blocks = document.querySelectorAll('.cue-block').length;
const whole = [];
for (let i = 0; i < 10; i++) {
  const t = performance.now();
  api.setView(0, 3600000 + i);
  document.body.getBoundingClientRect();
  whole.push(performance.now() - t);
}
const side = document.querySelector('.side'), scroll = [];
for (let i = 0; i < 60; i++) {
  const t = performance.now();
  side.scrollTop += 600;
  document.body.getBoundingClientRect();
  scroll.push(performance.now() - t);
}
return {steps, blocks, whole, scroll, wholeBlocks: document.querySelectorAll('.cue-block').length};
"""


def summary(values: list[float]) -> str:
    ordered = sorted(values)
    p95 = ordered[min(len(ordered) - 1, int(0.95 * len(ordered)))]
    return f"{statistics.median(ordered):.1f} / {p95:.1f} / {ordered[-1]:.1f}"


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--workdir", type=Path, help="keep the generated files here (default: a temp folder)")
    args = parser.parse_args()
    folder = args.workdir or Path(tempfile.mkdtemp(prefix="review-bench-"))
    folder.mkdir(parents=True, exist_ok=True)
    media = make_input(folder / "hour.mp4", 60)
    track, side = make_track_and_sidecar(folder, media)
    page = folder / "hour.review.html"
    started = time.perf_counter()
    page.write_text(review.build_page(media, page, captions=track, sidecar=side))
    build_s = time.perf_counter() - started
    size_kb = page.stat().st_size / 1024

    driver = browser()
    try:
        ready, loaded = [], []
        for _ in range(5):
            driver.get(page.as_uri())
            time.sleep(0.5)
            marks = driver.execute_script(
                "return [performance.getEntriesByName('review-ready')[0].startTime,"
                " performance.getEntriesByType('navigation')[0].loadEventEnd]"
            )
            ready.append(marks[0])
            loaded.append(marks[1])
        rows = driver.execute_script("return document.querySelectorAll('.cue-row').length")
        driver.execute_script(_TYPING_PROBE)
        field = driver.find_elements("css selector", ".cue-text")[150]
        driver.execute_script("arguments[0].scrollIntoView({block: 'center'})", field)
        for _ in range(8):
            field.send_keys(" rumbling")  # 9 keys each
        keys = driver.execute_script("return window.__keys")
        timeline = driver.execute_script(_TIMELINE_PROBE)
    finally:
        driver.quit()

    print(f"page: {size_kb:.0f} kB, {rows} cue rows; written in {build_s:.1f} s (waveform decode included)\n")
    print("| measure (headless Chromium, 2-core x86_64) | median / p95 / max ms |")
    print("|---|---|")
    print(f"| page ready: navigation start to end of page script | {summary(ready)} |")
    print(f"| page load event | {summary(loaded)} |")
    print(f"| typing: one key in a cue's text, with layout ({len(keys)} keys) | {summary(keys)} |")
    print(
        f"| timeline: one pan step at a 30 s view, with layout ({timeline['blocks']} cue blocks drawn) "
        f"| {summary(timeline['steps'])} |"
    )
    print(
        f"| timeline: whole hour redrawn ({timeline['wholeBlocks']} cue blocks) "
        f"| {summary(timeline['whole'])} |"
    )
    print(f"| cue list: one 600 px scroll step, with layout | {summary(timeline['scroll'])} |")
    return 0


if __name__ == "__main__":
    sys.exit(main())
