"""Nothing a person made is ever lost: each way a re-run could destroy or block hand work,
tried from the user's side (files on disk, the real command line).

Caption files are checked with webvtt-py (reference parser of W3C WebVTT) and `srt`, not
with the project's own readers; the manifest with the standard library's sqlite3.
"""

from __future__ import annotations

import errno
import json
import os
import re
import signal
import subprocess
import sys
import time
from collections.abc import Iterator
from pathlib import Path

import numpy as np
import pytest
import srt
import webvtt

from captioner import formats, library, ownership
from captioner.cli import main
from captioner.style import load_style
from conftest import RATE, run_ffmpeg, tone, write_wav

DIALOGUE = "WEBVTT\n\nd1\n00:00:13.500 --> 00:00:15.500\nHello there.\n"


def two_sounds(path: Path) -> Path:
    """16 s: a beep near 1-4 s and an alarm-like tone near 9-12 s (two machine cues)."""
    quiet = lambda seconds: np.zeros(int(RATE * seconds))  # noqa: E731
    return write_wav(
        path, np.concatenate([quiet(1), tone(2.5, 1000), quiet(6), tone(2.5, 3000, 0.5), quiet(4)])
    )


def captioned(folder: Path) -> tuple[Path, Path]:
    """`captioner caption talk.wav`: the media and the sound track written beside it."""
    media = two_sounds(folder / "talk.wav")
    assert main(["caption", str(media), "--quiet"]) == 0
    return media, folder / "talk.sounds.vtt"


def cues(path: Path) -> list[webvtt.Caption]:
    return list(webvtt.read(str(path)).captions)


def blocks(text: str) -> list[str]:
    return text.split("\n\n")


def cue_block(text: str, number: int) -> str:
    """The number-th cue block of a file we wrote (identifier, timing, text)."""
    return [b for b in blocks(text) if "-->" in b and not b.startswith("NOTE")][number]


def retext(text: str, number: int, new: str) -> str:
    """`text` with the number-th cue's text replaced (identifier and timing kept)."""
    lines = cue_block(text, number).strip("\n").split("\n")
    timing = next(n for n, line in enumerate(lines) if "-->" in line)
    return text.replace("\n".join(lines), "\n".join([*lines[: timing + 1], new]), 1)


def record_lines(text: str) -> list[str]:
    block = next(b for b in blocks(text) if b.startswith("NOTE captioner record"))
    return block.splitlines()[1:]


def assert_valid_vtt(path: Path) -> None:
    """W3C WebVTT: identifiers unique within a file, timestamps hh:mm:ss.ttt (or mm:ss.ttt)."""
    parsed = cues(path)
    identifiers = [c.identifier for c in parsed if c.identifier]
    assert len(identifiers) == len(set(identifiers)), identifiers
    stamp = r"(\d{2,}:)?\d{2}:\d{2}\.\d{3}"
    for line in path.read_text(encoding="utf-8-sig").splitlines():
        if "-->" in line:
            assert re.match(rf"^{stamp} --> {stamp}( |$)", line), line


def no_temporaries(folder: Path) -> bool:
    return not [p for p in folder.rglob(".*") if p.name.endswith(".tmp")]


# -- 1. a merged output is built from the sound track as the person left it -----------------


def test_batch_merges_the_sound_track_a_person_edited_and_keeps_an_edited_merge(
    tmp_path: Path, capsys: pytest.CaptureFixture[str], pack: object
) -> None:
    lib, out = tmp_path / "lib", tmp_path / "out"
    lib.mkdir()
    two_sounds(lib / "a_talk.wav")
    (lib / "a_talk.vtt").write_text(DIALOGUE)
    assert main(["batch", str(lib), "-o", str(out), "--workers", "1", "--quiet"]) == 0
    sounds, merged = out / "a_talk.sounds.vtt", out / "a_talk.merged.vtt"
    text = sounds.read_text()
    edited = retext(retext(text, 0, "[dog barking excitedly]"), 1, "[smoke alarm beeping]")
    sounds.write_text(edited)

    capsys.readouterr()
    assert main(["batch", str(lib), "-o", str(out), "--workers", "1", "--style", "capitals", "--json"]) == 0
    summary = json.loads(capsys.readouterr().out)
    assert summary["edited"] == ["a_talk.sounds.vtt"]
    assert sounds.read_text() == edited  # the person's track, untouched
    assert_valid_vtt(out / "a_talk.sounds.draft.vtt")  # the machine draft, beside it
    delivered = [c.text for c in cues(merged)]
    assert "[dog barking excitedly]" in delivered and "[smoke alarm beeping]" in delivered  # 2 of 2 edits
    assert "Hello there." in delivered  # the dialogue as it was
    assert not any(t.isupper() and "BEEP" in t for t in delivered)  # not the capitals machine draft

    # The merged file itself edited: kept, the new merge (still from the person's track) beside it.
    merged_edit = merged.read_text().replace("Hello there.", "Hello there, friend.")
    merged.write_text(merged_edit)
    assert main(["batch", str(lib), "-o", str(out), "--workers", "1", "--json"]) == 0  # brackets: redo
    assert sorted(json.loads(capsys.readouterr().out)["edited"]) == ["a_talk.merged.vtt", "a_talk.sounds.vtt"]
    assert merged.read_text() == merged_edit
    beside = [c.text for c in cues(out / "a_talk.merged.draft.vtt")]
    assert "[dog barking excitedly]" in beside and "Hello there." in beside
    # Edited again, nothing else changed: the next run builds the merge from it once more.
    sounds.write_text(retext(sounds.read_text(), 0, "[two dogs barking]"))
    assert main(["batch", str(lib), "-o", str(out), "--workers", "1", "--quiet"]) == 0
    assert "[two dogs barking]" in [c.text for c in cues(out / "a_talk.merged.draft.vtt")]
    assert merged.read_text() == merged_edit and not (out / "a_talk.merged.draft-2.vtt").exists()
    assert no_temporaries(out)


def test_caption_merge_uses_the_edited_sound_track_and_keeps_an_edited_merge(
    tmp_path: Path, capsys: pytest.CaptureFixture[str], pack: object
) -> None:
    media = two_sounds(tmp_path / "talk.wav")
    dialogue = tmp_path / "talk.en.vtt"
    dialogue.write_text(DIALOGUE)
    assert main(["caption", str(media), "--quiet"]) == 0
    sounds = tmp_path / "talk.sounds.vtt"
    sounds.write_text(retext(sounds.read_text(), 0, "[dog barking excitedly]"))

    merge = ["caption", str(media), "--dialogue", str(dialogue), "--merge"]
    assert main(merge) == 0
    assert "as you left them" in capsys.readouterr().err
    merged = tmp_path / "talk.merged.vtt"
    assert "[dog barking excitedly]" in [c.text for c in cues(merged)]

    hand = merged.read_text().replace("Hello there.", "Hello, you.")
    merged.write_text(hand)
    assert main(merge) == 0
    err = capsys.readouterr().err
    assert f"kept {merged} as you left it" in err
    assert merged.read_text() == hand
    assert "[dog barking excitedly]" in [c.text for c in cues(tmp_path / "talk.merged.draft.vtt")]


# -- 2. --update never removes a cue, and keeps identifiers and record lines unique -------------


def test_update_keeps_an_untouched_machine_cue_beside_a_hand_cue_and_unique_ids(
    tmp_path: Path, capsys: pytest.CaptureFixture[str], pack: object
) -> None:
    media, sounds = captioned(tmp_path)
    text = sounds.read_text()
    machine = cues(sounds)
    # A hand cue that starts inside the untouched second machine cue, and a copy of the
    # first cue block, identifier included, pasted at the end (after the second cue).
    start = round(machine[1].start_in_seconds * 1000) + 500
    stamp = formats.webvtt.timestamp
    hand = f"{stamp(start)} --> {stamp(start + 1500)}\n[crowd cheering]"
    copied = (
        cue_block(text, 0).replace(machine[0].start, "00:00:14.000").replace(machine[0].end, "00:00:15.000")
    )
    edited = f"{text.rstrip()}\n\n{hand}\n\n{copied.strip()}\n"
    sounds.write_text(edited)

    assert main(["caption", str(media), "--update"]) == 0
    line = capsys.readouterr().err
    after = sounds.read_text()
    shown = [(c.identifier, c.start, c.end, c.text) for c in cues(sounds)]
    for cue in machine:  # every machine cue the person left alone is still there, exactly
        assert (cue.identifier, cue.start, cue.end, cue.text) in shown
        assert sum(r.startswith(f"cue {cue.identifier} ") for r in record_lines(after)) == 1
    assert "[crowd cheering]" in [t for *_, t in shown]
    assert ("00:00:14.000", "00:00:15.000") in [(s, e) for _, s, e, _ in shown]  # the copy, kept
    assert len(shown) == len(machine) + 2
    assert_valid_vtt(sounds)  # the copy got an identifier of its own
    assert len(record_lines(after)) == len(set(record_lines(after)))
    assert "kept all 4 cue(s)" in line
    assert main(["caption", str(media), "--update", "--quiet"]) == 0
    assert sounds.read_text() == after  # a second update changes nothing


# -- 3. --force keeps a changed file as a backup -------------------------------------------------


def test_force_keeps_a_changed_file_as_a_backup_that_never_clashes(
    tmp_path: Path, capsys: pytest.CaptureFixture[str], pack: object
) -> None:
    media = two_sounds(tmp_path / "talk.wav")
    out = tmp_path / "talk.srt"
    assert main(["caption", str(media), "-o", str(out), "--quiet"]) == 0
    edited = out.read_text().replace("[beeping]", "[kettle whistling]")
    out.write_text(edited)
    assert main(["caption", str(media), "-o", str(out), "--force"]) == 0
    err = capsys.readouterr().err
    backup = tmp_path / "talk.backup.srt"
    assert f"kept the old {out} as {backup}" in err
    assert backup.read_text() == edited
    assert next(s.content for s in srt.parse(backup.read_text())) == "[kettle whistling]"  # still SubRip

    out.write_text(edited.replace("kettle", "teapot"))
    assert main(["caption", str(media), "-o", str(out), "--force", "--quiet"]) == 0
    assert "as " + str(tmp_path / "talk.backup-2.srt") in capsys.readouterr().err  # named even when quiet
    assert backup.read_text() == edited  # the first backup is never overwritten
    assert "[teapot whistling]" in (tmp_path / "talk.backup-2.srt").read_text()

    vtt = tmp_path / "talk.sounds.vtt"
    assert main(["caption", str(media), "--quiet"]) == 0
    assert main(["caption", str(media), "--force", "--quiet"]) == 0  # untouched: nothing to keep
    assert not list(tmp_path.glob("talk.sounds.backup*"))
    vtt.write_text(vtt.read_text().replace("[beeping]", "[kettle whistling]"))
    assert main(["caption", str(media), "--force", "--quiet"]) == 0
    assert "[kettle whistling]" in [c.text for c in cues(tmp_path / "talk.sounds.backup.vtt")]


# -- 4. a record re-saved by another editor, or lost -------------------------------------------


def test_update_reads_a_record_reflowed_with_crlf_and_bom_and_works_without_one(
    tmp_path: Path, capsys: pytest.CaptureFixture[str], pack: object
) -> None:
    media, sounds = captioned(tmp_path)
    resaved = (
        sounds.read_text()
        .replace("[beeping]", "[beeping twice]")
        .replace("NOTE captioner record 1\ncue", "NOTE captioner\nrecord 1\ncue")
    )
    resaved = re.sub(r"(cue \S+ \S+) ", r"\1\n  ", resaved)  # lines broken again inside the block
    sounds.write_bytes(b"\xef\xbb\xbf" + resaved.replace("\n", "\r\n").encode())
    assert main(["caption", str(media), "--update"]) == 0
    err = capsys.readouterr().err
    assert "(1 edited, 0 added by hand), respected 0 deletion(s)" in err and "no 'NOTE" not in err
    assert "[beeping twice]" in [c.text for c in cues(sounds)]
    assert len(cues(sounds)) == 2  # the edited cue is known as the machine cue it was

    no_record = "\n\n".join(
        b for b in blocks(sounds.read_text()) if not b.startswith("NOTE captioner record")
    )
    no_record = retext(no_record, 1, "[siren]")
    no_record = no_record.rstrip("\n") + "\n\n00:00:05.000 --> 00:00:06.000\n[hand cue]\n"
    sounds.write_text(no_record)
    assert main(["caption", str(media), "--update"]) == 0  # no refusal
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "every cue in the file is taken as yours" in err[0]
    assert [c.text for c in cues(sounds)] == ["[beeping twice]", "[hand cue]", "[siren]"]  # none added
    assert_valid_vtt(sounds)


# -- 5. outputs land together; a failed run never blocks its retry ---------------------------


@pytest.fixture
def full_disk_on(monkeypatch: pytest.MonkeyPatch) -> Iterator[list[str]]:
    """Names of files whose temporary write fails as on a full disk (ENOSPC)."""
    failing: list[str] = []
    real = formats._temporary

    def temporary(path: Path, text: str | bytes) -> Path:
        if path.name in failing:
            raise formats.OutputError(path, f"cannot write ({os.strerror(errno.ENOSPC)})", "check free space")
        return real(path, text)

    monkeypatch.setattr(formats, "_temporary", temporary)
    yield failing


def test_a_run_that_fails_writes_nothing_and_its_retry_needs_no_force(
    tmp_path: Path, capsys: pytest.CaptureFixture[str], pack: object, full_disk_on: list[str]
) -> None:
    media = two_sounds(tmp_path / "talk.wav")
    run = ["caption", str(media), "--events-json", "--quiet"]
    full_disk_on.append("talk.sounds.json")
    assert main(run) == 2
    assert "talk.sounds.json: cannot write (No space left on device)" in capsys.readouterr().err
    assert sorted(p.name for p in tmp_path.iterdir()) == ["talk.wav"]  # the VTT did not land alone
    full_disk_on.clear()
    assert main(run) == 0
    before = {p.name: p.read_bytes() for p in tmp_path.iterdir()}
    assert main(run) == 0  # ours and unchanged: replaced without --force
    full_disk_on.append("talk.sounds.json")
    assert main(run) == 2
    assert {p.name: p.read_bytes() for p in tmp_path.iterdir()} == before  # all as they were
    full_disk_on.clear()
    (tmp_path / "talk.sounds.vtt").write_text(
        (tmp_path / "talk.sounds.vtt").read_text().replace("beeping", "pip")
    )
    assert main(run) == 2  # changed by a person: that, and only that, needs --update or --force
    assert "--update" in capsys.readouterr().err


def test_a_rename_failing_midway_puts_every_old_file_back(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    old = {"a.vtt": b"WEBVTT\n\nold a\n", "b.json": b"{}\n"}
    for name, data in old.items():
        (tmp_path / name).write_bytes(data)
    real, calls = os.replace, []

    def replace(source: object, target: object) -> None:
        calls.append(target)
        if len(calls) == 2:
            raise OSError(errno.EIO, "I/O error")
        real(source, target)  # type: ignore[arg-type]

    monkeypatch.setattr(formats.os, "replace", replace)
    with pytest.raises(formats.OutputError, match="b.json: cannot write"):
        formats.write_together(
            [(tmp_path / "a.vtt", "new a"), (tmp_path / "b.json", "new b"), (tmp_path / "c", "c")]
        )
    assert {p.name: p.read_bytes() for p in tmp_path.iterdir()} == old


def test_a_batch_write_failure_is_retried_by_the_next_run(
    tmp_path: Path, capsys: pytest.CaptureFixture[str], pack: object, full_disk_on: list[str]
) -> None:
    lib = tmp_path / "lib"
    lib.mkdir()
    two_sounds(lib / "a.wav")
    full_disk_on.append("a.sounds.json")
    options = library.BatchOptions(folder=lib, style=load_style("brackets"), workers=0)
    summary = library.run_batch(options)
    assert summary.failed == 1 and "No space left" in summary.failures[0][1]
    assert not (lib / "a.sounds.vtt").exists() and no_temporaries(lib)
    full_disk_on.clear()
    summary = library.run_batch(options)  # no --retry-failed needed: the media was never at fault
    assert summary.ok and summary.done == 1 and (lib / "a.sounds.vtt").is_file()


def test_a_sidecar_or_merge_changed_by_hand_is_told_from_our_own_by_its_seal(
    tmp_path: Path, capsys: pytest.CaptureFixture[str], pack: object
) -> None:
    media = two_sounds(tmp_path / "talk.wav")
    run = ["caption", str(media), "--events-json", "--quiet"]
    assert main(run) == 0
    sidecar = tmp_path / "talk.sounds.json"
    assert json.loads(sidecar.read_text())["sealed"].startswith("sha256:")  # still plain JSON
    assert ownership.is_ours(sidecar) and main(run) == 0
    sidecar.write_text(sidecar.read_text().replace('"style": "brackets"', '"style": "mine"'))
    assert not ownership.is_ours(sidecar)
    assert main(run) == 2
    err = capsys.readouterr().err
    assert "talk.sounds.json: already exists" in err and "--update" not in err  # no --update for JSON
    merged = "WEBVTT\n\nd1\n00:00:01.000 --> 00:00:02.000\nHello.\n"
    sealed = ownership.sealed(merged, "vtt")
    assert ownership.is_sealed(sealed) and webvtt.from_string(sealed).captions[0].text == "Hello."
    assert not ownership.is_sealed(sealed.replace("Hello.", "Hi."))


# -- 6. drafts keep their extension and are never taken for dialogue or outputs ------------


def test_batch_drafts_open_as_subtitles_and_are_not_mistaken_on_a_later_scan(
    tmp_path: Path, capsys: pytest.CaptureFixture[str], pack: object
) -> None:
    lib = tmp_path / "lib"
    lib.mkdir()
    media = two_sounds(lib / "a.wav")
    assert main(["batch", str(lib), "--workers", "1", "--format", "srt", "--quiet"]) == 0
    track = lib / "a.sounds.srt"
    track.write_text(track.read_text().replace("[beeping]", "[kettle]"))
    stamp = media.stat().st_mtime_ns
    two_sounds(media)
    os.utime(media, ns=(stamp + 10**9, stamp + 10**9))  # the media changed: drafted again
    assert main(["batch", str(lib), "--workers", "1", "--format", "srt", "--quiet"]) == 0
    draft = lib / "a.sounds.draft.srt"
    assert next(s.content for s in srt.parse(draft.read_text())) == "[beeping]"  # SubRip, by extension too
    assert ownership.KEPT_NAME.search(draft.name)
    oddly_named = lib / "a.sounds.draft.mp4"  # a video whose dialogue would be a.sounds.draft.srt
    oddly_named.write_bytes(b"")
    found = {m.relative: m for m in library.find_media(lib, fmt="srt")}
    assert set(found) == {oddly_named.name, "a.wav"}  # a draft is not media
    assert found[oddly_named.name].dialogue is None and found["a.wav"].dialogue is None  # nor dialogue
    oddly_named.unlink()
    os.utime(media, ns=(stamp + 2 * 10**9, stamp + 2 * 10**9))
    assert main(["batch", str(lib), "--workers", "1", "--format", "srt", "--quiet"]) == 0
    assert not (lib / "a.sounds.draft-2.srt").exists()  # our own untouched draft is reused
    draft.write_text(draft.read_text().replace("[beeping]", "[pinging]"))  # the draft edited too
    os.utime(media, ns=(stamp + 3 * 10**9, stamp + 3 * 10**9))
    assert main(["batch", str(lib), "--workers", "1", "--format", "srt", "--quiet"]) == 0
    assert "[pinging]" in draft.read_text() and (lib / "a.sounds.draft-2.srt").is_file()


# -- 7. workers end when the batch is killed ------------------------------------------------


def _descendants(pid: int) -> list[object]:
    psutil = pytest.importorskip("psutil")  # installed with Dask (the test extra)
    return list(psutil.Process(pid).children(recursive=True))


def _name_or_empty(process: object) -> str:
    """A process's name, or "" when it ended between being listed and being asked."""
    import psutil

    try:
        return str(process.name())  # type: ignore[attr-defined]
    except psutil.NoSuchProcess:
        return ""


def _is_alive(process: object) -> bool:
    import psutil

    try:
        return bool(process.is_running() and process.status() != psutil.STATUS_ZOMBIE)  # type: ignore[attr-defined]
    except psutil.NoSuchProcess:
        return False


def _seconds_until_gone(processes: list[object], limit_s: float) -> float:
    began = time.monotonic()
    while time.monotonic() - began < limit_s:
        alive = [p for p in processes if _is_alive(p)]
        if not alive:
            return time.monotonic() - began
        time.sleep(0.05)
    return float("inf")


def _long_silence(folder: Path, count: int) -> None:
    """Media that keeps a worker busy for several seconds each (30 min, a few hundred kB)."""
    folder.mkdir()
    for number in range(count):
        run_ffmpeg(
            "-f",
            "lavfi",
            "-i",
            "anullsrc=r=16000:cl=mono",
            "-t",
            "1800",
            "-c:a",
            "flac",
            str(folder / f"long{number}.flac"),
        )


def _kill_when_busy(command: list[str]) -> tuple[list[object], float]:
    """Start `command`, SIGKILL its main process once two ffmpeg decoders run under it, and
    return its descendants and how long they outlived it."""
    process = subprocess.Popen(command, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    deadline = time.monotonic() + 120
    while time.monotonic() < deadline and process.poll() is None:
        if sum("ffmpeg" in _name_or_empty(p) for p in _descendants(process.pid)) >= 2:
            break
        time.sleep(0.05)
    workers = _descendants(process.pid)
    os.kill(process.pid, signal.SIGKILL)  # the main process only, as `kill -9 PID` does
    process.wait()
    return workers, _seconds_until_gone(workers, 30)


def test_pool_workers_exit_within_seconds_of_a_kill_9_of_the_batch(tmp_path: Path, pack: object) -> None:
    _long_silence(tmp_path / "lib", 2)
    command = [sys.executable, "-m", "captioner", "batch", str(tmp_path / "lib"), "--workers", "2", "--quiet"]
    workers, outlived = _kill_when_busy(command)
    print(f"{len(workers)} descendant process(es) gone {outlived:.2f} s after kill -9")
    assert len(workers) >= 4  # two workers and their two decoders, at least
    assert outlived < 10  # before: still running minutes later


DASK_DRIVER = """
import sys
from pathlib import Path
import distributed
from captioner import library
from captioner.style import load_style
if __name__ == "__main__":
    options = dict(n_workers=2, threads_per_worker=1, host="127.0.0.1", dashboard_address=None)
    with distributed.LocalCluster(processes=True, **options) as cluster:
        style, address = load_style("brackets"), cluster.scheduler_address
        library.run_batch(library.BatchOptions(folder=Path(sys.argv[1]), style=style, cluster=address))
"""


def test_dask_local_workers_exit_within_seconds_of_a_kill_9_of_their_parent(
    tmp_path: Path, pack: object
) -> None:
    _long_silence(tmp_path / "lib", 2)
    (tmp_path / "driver.py").write_text(DASK_DRIVER)
    workers, outlived = _kill_when_busy([sys.executable, str(tmp_path / "driver.py"), str(tmp_path / "lib")])
    print(f"{len(workers)} descendant process(es) gone {outlived:.2f} s after kill -9")
    assert len(workers) >= 4 and outlived < 10
