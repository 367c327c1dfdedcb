"""Runs the leakage check of training/leakage.py over a built corpus (called by build_corpus.py)."""

from __future__ import annotations

import hashlib
import multiprocessing
import pickle
import sys
from concurrent.futures import ProcessPoolExecutor
from pathlib import Path

from training.archives import package_sounds
from training.audio import MAX_SECONDS, DecodeError, decode_bytes, decode_file, pcm_sha256, read_wav
from training.leakage import Fingerprint, FingerprintIndex, checksum_matches, fingerprint
from training.recipe import Recipe

CHUNKS_PER_PACKAGE = 8
REFERENCE_MAX_SECONDS = MAX_SECONDS  # the same cut as the training clips, so that audio checksums compare


def progress(message: str) -> None:
    print(message, file=sys.stderr, flush=True)


Reference = list[tuple[str, str, str, Fingerprint | None]]  # name, file sha, audio sha, fingerprint


def reference_chunk(package: str, root: str, chunk: int, cache: str) -> Reference:
    """Checksums (and fingerprints) of every sound file of an excluded package, one share of them."""
    target = Path(cache)
    if target.exists():
        cached: Reference = pickle.loads(target.read_bytes())
        return cached
    found: Reference = []
    for n, sound in enumerate(package_sounds(Path(root))):
        if n % CHUNKS_PER_PACKAGE != chunk:
            continue
        data = sound.read()
        name = f"{package}/{sound.path}"
        try:
            samples = decode_bytes(data, Path(sound.path).suffix, REFERENCE_MAX_SECONDS)
        except DecodeError:
            found.append((name, hashlib.sha256(data).hexdigest(), "", None))
            continue
        fp = fingerprint(samples)
        found.append((name, hashlib.sha256(data).hexdigest(), pcm_sha256(samples), fp))
    target.parent.mkdir(parents=True, exist_ok=True)
    target.write_bytes(pickle.dumps(found))
    return found


def dev_reference(path: Path) -> tuple[str, str, str, Fingerprint | None]:
    samples = decode_file(path, REFERENCE_MAX_SECONDS)
    return (
        f"dev:{path.name}",
        hashlib.sha256(path.read_bytes()).hexdigest(),
        pcm_sha256(samples),
        fingerprint(samples),
    )


def matched_label(name: str, digests: dict[str, str]) -> str:
    """What a dropped clip matched, by the SHA-256 of that sound file alone: the lists name no
    file of the excluded packages, so they never read as a source of training clips."""
    kind = "development clip" if name.startswith("dev:") else "evaluation source"
    return f"{kind} sha256:{digests[name]}"


def clip_print(wav: str, cache: str) -> Fingerprint:
    target = Path(cache)
    if target.exists():
        loaded: Fingerprint = pickle.loads(target.read_bytes())
        return loaded
    path = Path(wav)
    fp = fingerprint(read_wav(path if path.exists() else Path(wav.replace("/clips/", "/dropped/"))))
    target.parent.mkdir(parents=True, exist_ok=True)
    target.write_bytes(pickle.dumps(fp))
    return fp


_INDEX: FingerprintIndex | None = None


def _acoustic_match(query: Fingerprint) -> tuple[str, str, str] | None:
    assert _INDEX is not None
    found = _INDEX.matches(query)
    if not found:
        return None
    name, how = found[0]
    detail = f"bit error rate {how.ber:.3f} (best window {how.window_ber:.3f}) over {how.items} items"
    return name, "chromaprint", detail + (f"; {len(found)} matches" if len(found) > 1 else "")


def run_leakage_check(
    rows: list[dict[str, str]], recipe: Recipe, work: Path, dev: list[Path], jobs: int, with_prints: bool
) -> tuple[list[dict[str, str]], list[dict[str, str]]]:
    """Split the clip rows into kept and dropped (with what each dropped clip matched)."""
    from training.build_corpus import fetch, unpack

    debs = fetch(list(recipe.excluded), work / "excluded-debs", {})
    absent = sorted(set(recipe.excluded) - set(debs))
    if absent:
        progress(f"excluded packages not in this release (nothing to check against): {' '.join(absent)}")
    reference: Reference = []
    with ProcessPoolExecutor(jobs) as pool:
        futures = []
        for name, deb in debs.items():
            root = unpack(deb, work / "excluded" / name)
            for chunk in range(CHUNKS_PER_PACKAGE):
                cache = work / "leakage" / "reference" / f"{name}.{chunk}.pickle"
                futures.append((name, pool.submit(reference_chunk, name, str(root), chunk, str(cache))))
        for n, (name, future) in enumerate(futures, 1):
            reference += future.result()
            if n % CHUNKS_PER_PACKAGE == 0:
                progress(
                    f"reference [{n // CHUNKS_PER_PACKAGE}/{len(debs)}] {name}: "
                    f"{len(reference)} sound files so far"
                )
        for path in dev:
            reference.append(dev_reference(path))
        progress(f"reference: {len(reference)} sound files ({len(dev)} development clips)")
        file_index = {sha: name for name, sha, _, _ in reference}
        audio_index = {audio: name for name, _, audio, _ in reference if audio}
        index = None
        prints = {}
        if with_prints:
            named = [(name, fp) for name, _, _, fp in reference if fp is not None and len(fp.items)]
            index = FingerprintIndex([n for n, _ in named], [fp for _, fp in named])
            caches = work / "leakage" / "clips"
            submitted = {
                r["clip_id"]: pool.submit(
                    clip_print, str(work / "clips" / r["file"]), str(caches / f"{r['audio_sha256']}.pickle")
                )
                for r in rows
            }
            for n, (cid, printed) in enumerate(submitted.items(), 1):
                prints[cid] = printed.result()
                if n % 500 == 0:
                    progress(f"fingerprinted {n}/{len(rows)} clips")
    acoustic: dict[str, tuple[str, str, str]] = {}
    if index is not None:
        global _INDEX
        _INDEX = index
        ids = [r["clip_id"] for r in rows]
        # forked workers share the index built here (copy on write)
        with ProcessPoolExecutor(jobs, mp_context=multiprocessing.get_context("fork")) as pool:
            verdicts = pool.map(_acoustic_match, [prints[i] for i in ids], chunksize=20)
            for n, (cid, verdict) in enumerate(zip(ids, verdicts), 1):
                if verdict is not None:
                    acoustic[cid] = verdict
                if n % 250 == 0:
                    progress(f"compared {n}/{len(rows)} clips by fingerprint, {len(acoustic)} matched")
    digests = {name: sha for name, sha, _, _ in reference}
    kept, dropped = [], []
    for n, row in enumerate(rows, 1):
        match = checksum_matches(row["sha256"], row["audio_sha256"], file_index, audio_index)
        verdict = (match[1], match[0], "") if match else acoustic.get(row["clip_id"])
        if verdict is None:
            kept.append(row)
        else:
            dropped.append(
                {
                    **row,
                    "matched": matched_label(verdict[0], digests),
                    "method": verdict[1],
                    "detail": verdict[2],
                }
            )
            wav = work / "clips" / row["file"]
            if wav.exists():  # moved out, so that a folder listing of clips/ holds no leaked clip
                (work / "dropped" / row["file"]).parent.mkdir(parents=True, exist_ok=True)
                wav.rename(work / "dropped" / row["file"])
        if n % 1000 == 0:
            progress(f"checked {n}/{len(rows)} clips, dropped {len(dropped)}")
    return kept, dropped
