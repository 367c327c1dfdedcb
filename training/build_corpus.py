"""Build the training corpus from the recipe in training/sources.yaml.

    python training/build_corpus.py --work DIR

Downloads the recipe's Debian packages (apt-get download) into DIR/debs and unpacks them,
labels their sound files by the rules, decodes each labelled clip to 16 kHz mono 16-bit WAV
under DIR/clips/<concept>/, adds synthesized clips and negatives (DIR/clips/_negative/<kind>/,
espeak speech for mixing under DIR/clips/_speech/), checks every clip against the excluded
packages and the development clips (training/leakage.py), and writes training/clips.csv,
training/negatives.csv and training/dropped.csv. Every step keeps its results under DIR, so
a second run only does what is missing.
"""

from __future__ import annotations

import argparse
import csv
import hashlib
import json
import re
import shutil
import subprocess
import sys
from collections.abc import Iterator
from concurrent.futures import ProcessPoolExecutor
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

from training.archives import package_sounds
from training.audio import RATE, DecodeError, decode_bytes, pcm_sha256, to_int16, write_wav
from training.recipe import Recipe, copyright_stanzas, licence_of, load_recipe

HERE = Path(__file__).resolve().parent
COLUMNS = [
    "clip_id",
    "concept",
    "package",
    "version",
    "path",
    "licence",
    "rule",
    "sha256",
    "audio_sha256",
    "duration_s",
    "synthesized",
]
MIN_SECONDS = 0.15
SILENT_PEAK = 100  # int16 peak below which a decoded file counts as silent (about -50 dBFS)


def progress(message: str) -> None:
    print(message, file=sys.stderr, flush=True)


def fetch(packages: list[str], debs: Path, pinned: dict[str, str]) -> dict[str, Path]:
    """The .deb of every package, downloaded when missing; warns when the version differs."""
    debs.mkdir(parents=True, exist_ok=True)
    found = {p: next(iter(sorted(debs.glob(f"{p}_*.deb"))), None) for p in packages}
    missing = [p for p, deb in found.items() if deb is None]
    if missing:
        progress(f"downloading {len(missing)} package(s): {' '.join(missing)}")
        for name in missing:
            result = subprocess.run(
                ["apt-get", "download", name], cwd=debs, capture_output=True, text=True, check=False
            )
            if result.returncode != 0:
                progress(f"warning: {name}: not downloadable ({result.stderr.strip().splitlines()[-1:]})")
        found = {p: next(iter(sorted(debs.glob(f"{p}_*.deb"))), None) for p in packages}
    ready = {}
    for name, deb in found.items():
        if deb is None:
            continue
        version = subprocess.run(
            ["dpkg-deb", "-f", str(deb), "Version"], capture_output=True, text=True, check=True
        ).stdout.strip()
        if name in pinned and version != pinned[name]:
            progress(f"warning: {name}: recipe pins {pinned[name]}, found {version}; labels may need a look")
        ready[name] = deb
    return ready


def unpack(deb: Path, root: Path) -> Path:
    done = root / ".unpacked"
    if not done.exists():
        root.mkdir(parents=True, exist_ok=True)
        subprocess.run(["dpkg-deb", "-x", str(deb), str(root)], check=True)
        done.touch()
    return root


def clip_id(package: str, path: str) -> str:
    slug = re.sub(r"[^a-z0-9]+", "-", Path(path).stem.lower()).strip("-")[:40]
    return f"{package}-{slug}-{hashlib.sha1(path.encode()).hexdigest()[:8]}"


def _labelled(package: str, root: Path, recipe: Recipe) -> Iterator[tuple[str, bytes, str, bool]]:
    for sound in package_sounds(root):
        rule = recipe.rule_for(package, sound.path)
        if rule is not None:
            yield sound.path, sound.read(), rule.name, rule.negative


def process_package(package: str, deb: str, work: str) -> list[dict[str, str]]:
    """Decode every labelled file of one package; returns its clip rows (cached per package)."""
    recipe = load_recipe()
    info = recipe.package(package)
    own_rules = [(r.match, r.label, r.negative) for r in recipe.rules if r.package == package]
    recipe_part = [Path(deb).name, MIN_SECONDS, SILENT_PEAK, own_rules, info.licence]
    key = hashlib.sha256(json.dumps(recipe_part).encode()).hexdigest()  # a changed recipe redoes the package
    state = Path(work) / "state" / f"{package}.json"
    if state.exists():
        cached = json.loads(state.read_text())
        if isinstance(cached, dict) and cached.get("key") == key:
            return list(cached["rows"])
    root = unpack(Path(deb), Path(work) / "pkgs" / package)
    copyright_file = root / "usr/share/doc" / package / "copyright"
    stanzas = copyright_stanzas(copyright_file.read_text(errors="replace")) if copyright_file.exists() else []
    version = subprocess.run(
        ["dpkg-deb", "-f", deb, "Version"], capture_output=True, text=True, check=True
    ).stdout.strip()
    rules = {rule.name: rule for rule in recipe.rules}
    rows = []
    for path, data, rule_name, negative in _labelled(package, root, recipe):
        rule = rules[rule_name]
        try:
            samples = decode_bytes(data, Path(path).suffix)
        except DecodeError as error:
            progress(f"  skipped {package}/{path}: {error}")
            continue
        if len(samples) < MIN_SECONDS * RATE or int(abs(samples.astype(int)).max()) < SILENT_PEAK:
            continue
        cid = clip_id(package, path)
        folder = f"_negative/{rule.label}" if negative else rule.label
        write_wav(Path(work) / "clips" / folder / f"{cid}.wav", samples)
        licence = info.licence or licence_of(path, stanzas, "see copyright file")
        row = {
            "clip_id": cid,
            "concept": "" if negative else rule.label,
            "package": package,
            "version": version,
            "path": path,
            "licence": licence,
            "rule": rule_name,
            "sha256": hashlib.sha256(data).hexdigest(),
            "audio_sha256": pcm_sha256(samples),
            "duration_s": f"{len(samples) / RATE:.3f}",
            "synthesized": "0",
            "kind": rule.label if negative else "",
            "file": f"{folder}/{cid}.wav",
        }
        rows.append(row)
    state.parent.mkdir(parents=True, exist_ok=True)
    state.write_text(json.dumps({"key": key, "rows": rows}))
    return rows


def made_rows(work: Path) -> list[dict[str, str]]:
    """Synthesized positives, espeak speech, room tone and test tones (cached as one list)."""
    state = work / "state" / "_made.json"
    if state.exists():
        return list(json.loads(state.read_text()))
    from training.negatives import room_tone, speech, tones
    from training.synthesize import synthesize

    rows = []
    progress("synthesizing alert and household sounds")
    for n, clip in enumerate(synthesize()):
        samples = to_int16(clip.samples)
        cid = f"synth-{clip.generator}-{n:03d}"
        rows.append(_made_row(work, cid, clip.concept, "", clip.params, samples, f"{clip.concept}/{cid}.wav"))
    progress("speaking negatives and the speech pool with espeak-ng, making room tone and test tones")
    # (kind, clips, id prefix, folder under DIR/clips); kind "_speech" is the mixing pool
    made_negatives = (
        ("speech", speech(160, seed=11), "", "_negative/speech"),
        ("_speech", speech(90, seed=12), "pool_", "_speech"),
        ("room_tone", room_tone(60, seed=13), "", "_negative/room_tone"),
        ("tone", tones(60, seed=14), "", "_negative/tone"),
    )
    for kind, made_list, prefix, folder in made_negatives:
        for made in made_list:
            cid = prefix + made.name
            rows.append(_made_row(work, cid, "", kind, made.params, made.samples, f"{folder}/{cid}.wav"))
    state.parent.mkdir(parents=True, exist_ok=True)
    state.write_text(json.dumps(rows))
    return rows


def _made_row(
    work: Path, cid: str, concept: str, kind: str, params: str, samples: object, file: str
) -> dict[str, str]:
    import numpy as np

    assert isinstance(samples, np.ndarray)
    write_wav(work / "clips" / file, samples)
    digest = hashlib.sha256((work / "clips" / file).read_bytes()).hexdigest()
    return {
        "clip_id": cid,
        "concept": concept,
        "package": "synthesized",
        "version": "",
        "path": params,
        "licence": "MIT",
        "rule": "training/synthesize.py" if concept else "training/negatives.py",
        "sha256": digest,
        "audio_sha256": pcm_sha256(samples),
        "duration_s": f"{len(samples) / RATE:.3f}",
        "synthesized": "1",
        "kind": kind,
        "file": file,
    }


def write_csv(path: Path, rows: list[dict[str, str]], columns: list[str]) -> None:
    tmp = path.with_suffix(".tmp")
    with tmp.open("w", newline="", encoding="utf-8") as handle:
        writer = csv.DictWriter(handle, fieldnames=columns, extrasaction="ignore", lineterminator="\n")
        writer.writeheader()
        writer.writerows(sorted(rows, key=lambda r: (r.get("concept", ""), r.get("kind", ""), r["clip_id"])))
    tmp.replace(path)


# Programs the build runs, and the Debian package that brings each one.
TOOLS = {"apt-get": "apt", "dpkg-deb": "dpkg", "espeak-ng": "espeak-ng", "fpcalc": "libchromaprint-tools"}


def missing_tools(*, fingerprints: bool) -> list[str]:
    """The programs the build needs that are not installed, so it stops before downloading."""
    needed = [t for t in TOOLS if fingerprints or t != "fpcalc"]
    return [t for t in needed if shutil.which(t) is None]


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--work", type=Path, required=True, help="folder for packages, clips and caches")
    parser.add_argument(
        "--lists", type=Path, default=HERE, help="where clips.csv, negatives.csv, dropped.csv go"
    )
    parser.add_argument(
        "--dev", type=Path, action="append", default=[], help="development WAV files to check against"
    )
    parser.add_argument("--jobs", type=int, default=2)
    parser.add_argument(
        "--skip-fingerprints", action="store_true", help="checksums only (a quick first pass)"
    )
    args = parser.parse_args(argv)
    missing = missing_tools(fingerprints=not args.skip_fingerprints)
    if missing:
        print(
            f"build_corpus.py: {', '.join(missing)} not found on PATH; install the Debian packages "
            f"{' '.join(sorted(set(TOOLS[t] for t in missing)))} and run again",
            file=sys.stderr,
        )
        return 2
    work = args.work.resolve()
    recipe = load_recipe()
    pinned = {p.name: p.version for p in recipe.packages}
    debs = fetch([p.name for p in recipe.packages], work / "debs", pinned)
    rows: list[dict[str, str]] = []
    with ProcessPoolExecutor(args.jobs) as pool:
        futures = {
            name: pool.submit(process_package, name, str(deb), str(work)) for name, deb in debs.items()
        }
        for n, (name, future) in enumerate(futures.items(), 1):
            found = future.result()
            rows += found
            progress(f"[{n}/{len(futures)}] {name}: {len(found)} clip(s)")
    rows += made_rows(work)
    rows = _unique_audio(rows)
    from training.check import run_leakage_check

    kept, dropped = run_leakage_check(rows, recipe, work, args.dev, args.jobs, not args.skip_fingerprints)
    positives = [r for r in kept if r["concept"]]
    negatives = [r for r in kept if r["kind"] and r["kind"] != "_speech"]
    write_csv(args.lists / "clips.csv", positives, COLUMNS)
    write_csv(args.lists / "negatives.csv", negatives, [*COLUMNS, "kind"])
    write_csv(
        args.lists / "dropped.csv",
        dropped,
        ["clip_id", "concept", "kind", "package", "path", "matched", "method", "detail"],
    )
    progress(f"kept {len(positives)} labelled clips and {len(negatives)} negatives; dropped {len(dropped)}")
    return 0


def _unique_audio(rows: list[dict[str, str]]) -> list[dict[str, str]]:
    """The same recording shipped twice (by two packages, or twice in one) is kept once."""
    seen: set[str] = set()
    unique = []
    for row in rows:
        if row["audio_sha256"] not in seen:
            seen.add(row["audio_sha256"])
            unique.append(row)
    return unique


if __name__ == "__main__":
    sys.exit(main())
