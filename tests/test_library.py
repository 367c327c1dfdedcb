"""Batch runs: scanning, the run manifest, resuming after a kill, hand edits, workers and Dask.

Outputs are checked with reference parsers (webvtt-py for W3C WebVTT, `srt` for SubRip)
and the manifest with the standard library's sqlite3, not with the project's own readers.
"""

from __future__ import annotations

import json
import os
import shutil
import signal
import sqlite3
import subprocess
import sys
import time
from pathlib import Path
from typing import Any

import numpy as np
import pytest
import srt
import webvtt

from captioner import library, manifest
from captioner.cli import main
from captioner.formats import write_together
from captioner.style import load_style
from conftest import RATE, run_ffmpeg, tone, write_wav

DEMO = Path(__file__).resolve().parent.parent / "demo_media"
QUIET = np.zeros(RATE * 2)


def beeps(path: Path, hz: float = 1000.0) -> Path:
    """About 7 s: silence, a 3 s tone (captioned as a beep), silence."""
    return write_wav(path, np.concatenate([QUIET, tone(3.0, hz), QUIET]))


def rows(folder: Path) -> dict[str, dict[str, Any]]:
    db = sqlite3.connect(folder / manifest.MANIFEST_NAME)
    db.row_factory = sqlite3.Row
    found = {row["path"]: dict(row) for row in db.execute("SELECT * FROM files")}
    db.close()
    return found


def run(folder: Path, *extra: str, capsys: pytest.CaptureFixture[str]) -> tuple[int, dict[str, Any]]:
    """`captioner batch FOLDER --json` in-process; returns the exit status and the summary."""
    status = main(["batch", str(folder), "--workers", "1", "--json", *extra])
    return status, json.loads(capsys.readouterr().out)


def snapshot(folder: Path) -> dict[str, tuple[int, bytes]]:
    """Every file under folder except the manifest: mtime and bytes."""
    return {
        p.relative_to(folder).as_posix(): (p.stat().st_mtime_ns, p.read_bytes())
        for p in sorted(folder.rglob("*"))
        if p.is_file() and not p.name.startswith(manifest.MANIFEST_NAME)
    }


def test_scan_finds_media_by_extension_and_skips_hidden_and_outputs(tmp_path: Path) -> None:
    lib = tmp_path / "lib"
    for name in (
        "Talk.MP4",
        "talk.srt",
        "sub/b.wav",
        "sub/x.mp4",
        "sub/x.mkv",
        ".hidden/c.wav",
        ".d.wav",
        "notes.txt",
        "Talk.sounds.vtt",
        "captions/e.wav",
    ):
        (lib / name).parent.mkdir(parents=True, exist_ok=True)
        (lib / name).write_bytes(b"0")
    found = library.find_media(lib, output_dir=lib / "captions")
    assert [m.relative for m in found] == ["Talk.MP4", "sub/b.wav", "sub/x.mkv", "sub/x.mp4"]
    talk, b, x_mkv, _ = found
    assert talk.dialogue == (lib / "talk.srt").absolute()  # same stem, any case
    assert talk.outputs == {
        "caption": (lib / "captions/Talk.sounds.vtt").absolute(),
        "events": (lib / "captions/Talk.sounds.json").absolute(),
        "merged": (lib / "captions/Talk.merged.srt").absolute(),
    }
    assert b.dialogue is None and set(b.outputs) == {"caption", "events"}
    # x.mp4 and x.mkv share a stem: their outputs are named in full so they never collide.
    assert x_mkv.outputs["caption"].name == "x.mkv.sounds.vtt"
    beside = library.find_media(lib, fmt="srt")
    assert [m.relative for m in beside] == [
        "Talk.MP4",
        "captions/e.wav",
        "sub/b.wav",
        "sub/x.mkv",
        "sub/x.mp4",
    ]
    assert beside[0].outputs["caption"] == (lib / "Talk.sounds.srt").absolute()


def test_fingerprint_sees_a_change_at_either_end_of_the_file(tmp_path: Path) -> None:
    path = tmp_path / "big.bin"
    data = bytearray(os.urandom(3 << 20))
    path.write_bytes(bytes(data))
    first = manifest.fingerprint(path)
    stamp = os.stat(path).st_mtime_ns
    for position in (10, len(data) - 10):
        changed = bytearray(data)
        changed[position] ^= 0xFF
        path.write_bytes(bytes(changed))
        os.utime(path, ns=(stamp, stamp))  # same size and time: only the hash can tell
        assert manifest.fingerprint(path).edge_hash != first.edge_hash
    path.write_bytes(bytes(data))
    os.utime(path, ns=(stamp, stamp))
    assert manifest.fingerprint(path) == first


def make_library(lib: Path) -> None:
    """The demo video with its dialogue subtitles, a beep, silence, and three bad files."""
    (lib / "sub").mkdir(parents=True)
    shutil.copy(DEMO / "demo.mp4", lib / "demo.mp4")
    shutil.copy(DEMO / "demo.dialogue.vtt", lib / "demo.vtt")
    beeps(lib / "sub" / "beeps.wav")
    write_wav(lib / "sub" / "silent.wav", np.zeros(RATE * 3))
    (lib / "corrupt.mkv").write_bytes(os.urandom(4000))
    run_ffmpeg(
        "-f",
        "lavfi",
        "-i",
        "color=c=black:s=64x64:r=5:d=3",
        "-c:v",
        "libx264",
        "-preset",
        "ultrafast",
        str(lib / "sub" / "picture_only.mp4"),
    )
    run_ffmpeg("-f", "lavfi", "-i", "sine=f=440:d=6", "-c:a", "aac", str(lib / "whole.m4a"))
    data = (lib / "whole.m4a").read_bytes()
    (lib / "truncated.m4a").write_bytes(data[: len(data) // 3])


def test_batch_captions_a_library_and_isolates_bad_files(
    tmp_path: Path, capsys: pytest.CaptureFixture[str], pack: object
) -> None:
    lib = tmp_path / "lib"
    make_library(lib)
    status, summary = run(lib, capsys=capsys)
    assert status == 1  # some files failed
    assert (summary["files"], summary["done"], summary["failed"], summary["skipped"]) == (7, 4, 3, 0)
    table = rows(lib)
    assert {p for p, r in table.items() if r["status"] == "failed"} == {
        "corrupt.mkv",
        "truncated.m4a",
        "sub/picture_only.mp4",
    }
    assert "no audio stream" in table["sub/picture_only.mp4"]["error"]
    assert "corrupt.mkv" in table["corrupt.mkv"]["error"]
    # Durations: the generated files' own lengths (7 s, 3 s, 6 s), the demo's from ffmpeg.
    assert (
        table["sub/beeps.wav"]["duration_ms"],
        table["sub/silent.wav"]["duration_ms"],
        table["whole.m4a"]["duration_ms"],
    ) == (7000, 3000, pytest.approx(6000, abs=50))
    assert summary["media_ms"] == sum(r["duration_ms"] for r in table.values() if r["status"] == "done")
    for key in ("demo.mp4", "sub/beeps.wav", "sub/silent.wav", "whole.m4a"):
        stem = key.rsplit(".", 1)[0]
        track = webvtt.read(str(lib / f"{stem}.sounds.vtt"))  # W3C WebVTT, by the reference parser
        assert len(track.captions) == table[key]["cues"]
        assert len(json.loads((lib / f"{stem}.sounds.json").read_text())["cues"]) == table[key]["cues"]
    assert table["sub/silent.wav"]["cues"] == 0  # silence is captioned as nothing, not an error
    assert table["sub/beeps.wav"]["cues"] >= 1 and table["demo.mp4"]["cues"] >= 3
    assert summary["cues"] == sum(r["cues"] for r in table.values() if r["status"] == "done")
    # The dialogue subtitles beside the demo: used, and merged with every dialogue cue intact.
    assert table["demo.mp4"]["dialogue"] == "demo.vtt"
    dialogue = [(c.start, c.end, c.text) for c in webvtt.read(str(lib / "demo.vtt")).captions]
    merged = webvtt.read(str(lib / "demo.merged.vtt"))
    assert all(
        any(m.start == s and m.end == e and m.text.startswith(t) for m in merged.captions)
        for s, e, t in dialogue
    )
    assert len(merged.captions) > len(dialogue)
    assert summary["merged"] == 1
    assert not list(lib.rglob(".*.tmp"))


def test_rerun_skips_unchanged_files_and_retries_failures_on_request(
    tmp_path: Path, capsys: pytest.CaptureFixture[str], pack: object
) -> None:
    lib = tmp_path / "lib"
    lib.mkdir()
    beeps(lib / "a.wav")
    write_wav(lib / "b.wav", tone(2.0, 600.0))
    (lib / "bad.mp4").write_bytes(b"not a video")
    assert run(lib, capsys=capsys)[0] == 1
    before = snapshot(lib)
    status, summary = run(lib, capsys=capsys)
    assert status == 1  # the failure stands until it is fixed
    assert (summary["done"], summary["skipped"], summary["failed"], summary["failed_before"]) == (0, 2, 0, 1)
    assert snapshot(lib) == before  # nothing rewritten
    status, summary = run(lib, "--retry-failed", capsys=capsys)
    assert (summary["done"], summary["skipped"], summary["failed"]) == (0, 2, 1)
    write_wav(lib / "bad.mp4", tone(1.0))  # fixed (a WAV under any name is still media to ffmpeg)
    status, summary = run(lib, capsys=capsys)
    assert status == 0 and summary["done"] == 1 and rows(lib)["bad.mp4"]["status"] == "done"
    # Other settings redo everything, into the other format.
    status, summary = run(lib, "--format", "srt", capsys=capsys)
    assert summary["done"] == 3
    assert list(srt.parse((lib / "a.sounds.srt").read_text()))  # SubRip, by the reference parser


def test_changed_file_is_redone_and_a_hand_edit_is_kept(
    tmp_path: Path, capsys: pytest.CaptureFixture[str], pack: object
) -> None:
    lib = tmp_path / "lib"
    lib.mkdir()
    beeps(lib / "a.wav")
    beeps(lib / "b.wav", 700.0)
    run(lib, capsys=capsys)
    edited = (
        (lib / "a.sounds.vtt")
        .read_text()
        .replace("beep", "BEEP", 1)
        .replace("\n\n", "\n\nNOTE checked by the editor\n\n", 1)
    )
    (lib / "a.sounds.vtt").write_text(edited)
    b_before = snapshot(lib)["b.sounds.vtt"]
    time.sleep(0.01)
    beeps(lib / "a.wav", 1500.0)  # the media changed, so its captions are drafted again
    status, summary = run(lib, capsys=capsys)
    assert status == 0 and (summary["done"], summary["skipped"]) == (1, 1)
    assert summary["edited"] == ["a.sounds.vtt"]
    assert (lib / "a.sounds.vtt").read_text() == edited  # the person's version is untouched
    draft = webvtt.read(str(lib / "a.sounds.draft.vtt"))  # the new draft beside it, valid WebVTT
    assert len(draft.captions) == rows(lib)["a.wav"]["cues"]
    assert (lib / "a.sounds.draft.vtt").read_text() != edited
    assert json.loads(rows(lib)["a.wav"]["outputs"])["a.sounds.draft.vtt"] == manifest.file_hash(
        lib / "a.sounds.draft.vtt"
    )
    assert snapshot(lib)["b.sounds.vtt"] == b_before
    # Outputs we wrote and nobody touched are simply replaced: no draft for them.
    assert not list(lib.glob("a.sounds.draft*.json"))


def test_outdir_mirrors_the_library(tmp_path: Path, capsys: pytest.CaptureFixture[str], pack: object) -> None:
    lib, out = tmp_path / "lib", tmp_path / "out"
    (lib / "x" / "y").mkdir(parents=True)
    beeps(lib / "x" / "y" / "clip.wav")
    status = main(["batch", str(lib), "-o", str(out), "--workers", "1", "--quiet"])
    assert status == 0 and capsys.readouterr().err == ""
    assert (out / "x" / "y" / "clip.sounds.vtt").is_file() and (out / manifest.MANIFEST_NAME).is_file()
    assert sorted(p.name for p in lib.rglob("*") if p.is_file()) == ["clip.wav"]  # library untouched


def interrupted_then_resumed(
    lib: Path, monkeypatch: pytest.MonkeyPatch, patch: Any, check: Any = None
) -> None:
    """Run with `patch` applied until it raises KeyboardInterrupt, `check` the state left
    behind, then run again cleanly."""
    options = library.BatchOptions(folder=lib, style=load_style("brackets"), workers=0)
    with monkeypatch.context() as m:
        patch(m)
        with pytest.raises(KeyboardInterrupt):
            library.run_batch(options)
    if check:
        check()
    summary = library.run_batch(options)
    assert summary.ok and summary.done + summary.skipped == 3 and not summary.edited


def assert_complete(lib: Path, reference: dict[str, tuple[int, bytes]]) -> None:
    now = snapshot(lib)
    assert {k: v[1] for k, v in now.items()} == {
        k: v[1] for k, v in reference.items()
    }  # nothing lost, nothing extra
    assert {r["status"] for r in rows(lib).values()} == {"done"}
    assert all(r["pending"] == "{}" for r in rows(lib).values())


@pytest.fixture
def three_files(tmp_path: Path, pack: object) -> tuple[Path, dict[str, tuple[int, bytes]]]:
    """A library of three beeps, and the files a clean run leaves in a copy of it."""
    lib = tmp_path / "lib"
    lib.mkdir()
    for name, hz in (("a", 800.0), ("b", 1000.0), ("c", 1200.0)):
        beeps(lib / f"{name}.wav", hz)
    clean = tmp_path / "clean"
    shutil.copytree(lib, clean)
    assert library.run_batch(library.BatchOptions(folder=clean, style=load_style("brackets"), workers=0)).ok
    return lib, snapshot(clean)


def test_kill_between_output_write_and_manifest_update(
    three_files: tuple[Path, dict[str, tuple[int, bytes]]], monkeypatch: pytest.MonkeyPatch
) -> None:
    lib, reference = three_files
    real_save = manifest.RunManifest.save

    def save(self: manifest.RunManifest, record: manifest.FileRecord) -> None:
        if record.status == "done" and record.path == "b.wav":
            raise KeyboardInterrupt  # outputs of b are in place, its row still says "writing"
        real_save(self, record)

    def killed_state() -> None:
        assert rows(lib)["b.wav"]["status"] == "writing" and (lib / "b.sounds.vtt").is_file()

    interrupted_then_resumed(
        lib, monkeypatch, lambda m: m.setattr(manifest.RunManifest, "save", save), killed_state
    )
    assert_complete(lib, reference)


def test_output_left_by_a_killed_run_is_ours_even_when_the_media_then_changes(
    three_files: tuple[Path, dict[str, tuple[int, bytes]]], monkeypatch: pytest.MonkeyPatch
) -> None:
    lib, _ = three_files
    real_save = manifest.RunManifest.save

    def save(self: manifest.RunManifest, record: manifest.FileRecord) -> None:
        if record.status == "done" and record.path == "b.wav":
            raise KeyboardInterrupt
        real_save(self, record)

    def change_b() -> None:
        time.sleep(0.01)
        beeps(lib / "b.wav", 400.0)  # the next draft of b differs from the one left on disk

    left: dict[str, tuple[int, bytes]] = {}

    def remember_then_change() -> None:
        left.update(snapshot(lib))
        change_b()

    interrupted_then_resumed(
        lib, monkeypatch, lambda m: m.setattr(manifest.RunManifest, "save", save), remember_then_change
    )
    assert not list(lib.glob("*.draft*"))  # recognised as our own draft by its recorded pending hash
    assert (lib / "b.sounds.json").read_bytes() != left["b.sounds.json"][1]
    assert json.loads((lib / "b.sounds.json").read_text())["events"][0]["start_ms"] < 4000


def test_kill_in_the_middle_of_writing_an_output(
    three_files: tuple[Path, dict[str, tuple[int, bytes]]], monkeypatch: pytest.MonkeyPatch
) -> None:
    lib, reference = three_files
    real_write = write_together

    def half_write(files: list[tuple[Path, str]]) -> None:
        for path, text in files:
            if path.name == "b.sounds.json":
                (path.parent / f".{path.name}.k1ll3d.tmp").write_text(
                    text[: len(text) // 2]
                )  # as a kill inside write_together leaves it
                raise KeyboardInterrupt
        real_write(files)

    def killed_state() -> None:
        assert not (lib / "b.sounds.json").exists() and list(
            lib.glob(".b.sounds.json.*.tmp")
        )  # never a half output

    interrupted_then_resumed(
        lib, monkeypatch, lambda m: m.setattr(library, "write_together", half_write), killed_state
    )
    assert_complete(lib, reference)
    assert not list(lib.glob(".*.tmp"))


def test_sigkill_at_any_moment_then_resume(three_files: tuple[Path, dict[str, tuple[int, bytes]]]) -> None:
    """A real kill -9 of a two-worker run once its first file is recorded, then a resume."""
    lib, reference = three_files
    process = subprocess.Popen(
        [sys.executable, "-m", "captioner", "batch", str(lib), "--workers", "2", "--quiet"],
        start_new_session=True,
    )
    deadline = time.monotonic() + 60
    while process.poll() is None and time.monotonic() < deadline:
        if (lib / manifest.MANIFEST_NAME).exists() and any(
            r["status"] == "done" for r in _rows_or_empty(lib)
        ):
            break
        time.sleep(0.02)
    if process.poll() is None:
        os.killpg(process.pid, signal.SIGKILL)
    process.wait()
    print(
        "killed" if process.returncode == -signal.SIGKILL else "finished",
        "with",
        sum(r["status"] == "done" for r in _rows_or_empty(lib)),
        "file(s) done",
    )
    summary = library.run_batch(library.BatchOptions(folder=lib, style=load_style("brackets"), workers=0))
    assert summary.ok and summary.done + summary.skipped == 3 and not summary.edited
    assert_complete(lib, reference)


def _rows_or_empty(lib: Path) -> list[dict[str, Any]]:
    try:
        return list(rows(lib).values())
    except sqlite3.Error:  # the writer holds the lock, or the tables are not there yet
        return []


def test_worker_processes_and_a_dask_cluster_write_what_one_process_writes(
    three_files: tuple[Path, dict[str, tuple[int, bytes]]],
) -> None:
    import distributed  # in the test extra: a missing Dask must fail here, not skip

    lib, reference = three_files
    style = load_style("brackets")
    summary = library.run_batch(library.BatchOptions(folder=lib, style=style, workers=2))
    assert summary.ok and summary.done == 3
    assert {k: v[1] for k, v in snapshot(lib).items()} == {k: v[1] for k, v in reference.items()}
    pool_workers = {r["worker"] for r in rows(lib).values()}
    assert f":{os.getpid()}" not in " ".join(pool_workers)  # captioned in other processes
    for path in lib.glob("*.sounds.*"):
        path.unlink()
    (lib / manifest.MANIFEST_NAME).unlink()
    with distributed.LocalCluster(
        n_workers=2, processes=True, threads_per_worker=1, host="127.0.0.1", dashboard_address=None
    ) as cluster:
        summary = library.run_batch(
            library.BatchOptions(folder=lib, style=style, cluster=cluster.scheduler_address)
        )
    assert summary.ok and summary.done == 3 and summary.cluster == cluster.scheduler_address
    assert {k: v[1] for k, v in snapshot(lib).items()} == {k: v[1] for k, v in reference.items()}
    assert all(f":{os.getpid()}" not in r["worker"] for r in rows(lib).values())


def test_cluster_without_dask_names_the_extra_to_install(
    tmp_path: Path, capsys: pytest.CaptureFixture[str], monkeypatch: pytest.MonkeyPatch, pack: object
) -> None:
    beeps(tmp_path / "a.wav")
    monkeypatch.setitem(sys.modules, "distributed", None)  # import fails as if not installed
    assert main(["batch", str(tmp_path), "--cluster", "tcp://127.0.0.1:1"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "pip install 'captioner[cluster]'" in err[0]


def test_user_errors_are_one_line_with_status_2(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["batch", str(tmp_path / "nope")]) == 2
    assert "nope: folder not found" in capsys.readouterr().err
    (tmp_path / manifest.MANIFEST_NAME).write_bytes(b"this is not a database" * 100)
    assert main(["batch", str(tmp_path), "--workers", "1"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "not a usable run manifest" in err[0]
