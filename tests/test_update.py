"""Safe re-runs: records, fingerprints and the three-way reconciliation behind `caption --update`.

Files are checked with webvtt-py (reference parser) besides our own reader.
"""

from __future__ import annotations

import io
import itertools
import re
from pathlib import Path

import pytest
import webvtt

from captioner import update
from captioner.cli import main
from captioner.cues import Cue
from captioner.formats.subtitles import parse_subtitles
from captioner.update import Origin, RecordEntry

DEMO = Path(__file__).resolve().parent.parent / "demo_media" / "demo.mp4"


def _cue(start: int, end: int, text: str, event_id: str) -> Cue:
    return Cue(start, end, (text,), (event_id,))


MACHINE = (
    _cue(1000, 2000, "[door slams]", "e0001"),
    _cue(3000, 4000, "[dog barking]", "e0002"),
    _cue(5000, 6000, "[glass breaking]", "e0003"),
    _cue(7000, 8000, "[phone ringing]", "e0004"),
)


def _reference(text: str) -> list[webvtt.Caption]:
    return list(webvtt.from_buffer(io.StringIO(text)).captions)


def _edit(text: str, old: str, new: str) -> str:
    assert old in text, old
    return text.replace(old, new, 1)


def _rerun(text: str, cues: tuple[Cue, ...] = MACHINE) -> tuple[str, update.Summary]:
    track = parse_subtitles(text, "vtt")
    record = update.read_record(text)
    assert record is not None
    return update.reconcile(track, record, cues, "note")


def test_fingerprint_covers_times_and_text() -> None:
    base = update.fingerprint(1000, 2000, "[door slams]")
    assert base == update.fingerprint(1000, 2000, "[door slams]")
    assert (
        len(
            {
                base,
                update.fingerprint(1001, 2000, "[door slams]"),
                update.fingerprint(1000, 1999, "[door slams]"),
                update.fingerprint(1000, 2000, "[door slam]"),
            }
        )
        == 4
    )


def test_fresh_file_is_valid_webvtt_with_a_record_of_every_cue() -> None:
    text = update.recorded_vtt(MACHINE, "drafted by a test")
    captions = _reference(text)
    assert [c.identifier for c in captions] == ["e0001", "e0002", "e0003", "e0004"]
    record = update.read_record(text)
    assert record is not None and [e.identifier for e in record] == ["e0001", "e0002", "e0003", "e0004"]
    for entry, caption in zip(record, captions):
        assert entry.fingerprint == update.fingerprint(entry.start_ms, entry.end_ms, caption.raw_text)
    # W3C WebVTT §4.1: a NOTE block must not contain the string "-->"
    assert all("-->" not in block for block in update.note_blocks(text))


def test_record_block_round_trips() -> None:
    entries = (
        RecordEntry("e0001", 0, 1500, "0123456789abcdef"),
        RecordEntry("e0007-end", 3_600_000, 3_601_000, "", gone=True),
    )
    text = "WEBVTT\n\n" + update.record_block(entries) + "\n\n00:00.000 --> 00:01.000\nx\n"
    assert update.read_record(text) == entries
    assert update.read_record("WEBVTT\n\nNOTE something else\n") is None


def test_classify_tells_unchanged_edited_added_and_deleted() -> None:
    text = update.recorded_vtt(MACHINE, "")
    text = _edit(text, "[dog barking]", "[small dog yapping]")
    text = _edit(text, "e0003\n00:00:05.000 --> 00:00:06.000\n[glass breaking]\n\n", "")
    text += "\n00:00:09.000 --> 00:00:09.800\n[hand-made cue]\n"
    record = update.read_record(text)
    assert record is not None
    origins = update.classify(parse_subtitles(text, "vtt"), record)
    assert origins == {
        "0": Origin.UNCHANGED,
        "1": Origin.EDITED,
        "2": Origin.UNCHANGED,
        "3": Origin.ADDED,
        "e0003": Origin.DELETED,
    }


def test_edits_additions_and_deletions_survive_a_rerun() -> None:
    text = update.recorded_vtt(MACHINE, "")
    text = _edit(text, "[dog barking]", "[small dog yapping]")  # edited text
    text = _edit(text, "00:00:07.000 --> 00:00:08.000", "00:00:07.500 --> 00:00:08.400")  # edited times
    text = _edit(text, "e0003\n00:00:05.000 --> 00:00:06.000\n[glass breaking]\n\n", "")  # deleted
    text += (
        "\nmine\n00:00:09.000 --> 00:00:09.800 line:0\n<i>[hand-made]</i> &amp; more\n"  # added, with markup
    )
    new_run = (
        *MACHINE,
        _cue(9500, 10500, "[applause]", "e0005"),
        _cue(11000, 12000, "[crowd cheering]", "e0006"),
    )

    once, summary = _rerun(text, new_run)
    captions = _reference(once)
    shown = [(c.identifier, c.start, c.end, c.raw_text) for c in captions]
    assert ("e0002", "00:00:03.000", "00:00:04.000", "[small dog yapping]") in shown
    assert ("e0004", "00:00:07.500", "00:00:08.400", "[phone ringing]") in shown
    assert ("mine", "00:00:09.000", "00:00:09.800", "<i>[hand-made]</i> &amp; more") in shown
    assert "line:0" in once  # the person's cue settings are kept
    assert "[dog barking]" not in once and "[glass breaking]" not in once  # no machine copy comes back
    assert (
        "e0006",
        "00:00:11.000",
        "00:00:12.000",
        "[crowd cheering]",
    ) in shown  # new cue where nobody worked
    assert "[applause]" not in once  # overlaps the hand-made cue
    # e0001 was left alone: it stays as it is, and the new run's copy of it is not added again
    assert summary == update.Summary(
        kept_unchanged=1,
        kept_edited=2,
        kept_added=1,
        deleted=1,
        new_written=1,
        new_skipped=4,
        already_there=1,
    )

    twice, _ = _rerun(once, new_run)
    assert twice == once  # the deletion is remembered: a second run changes nothing


def test_untouched_machine_cues_stay_exactly_as_they_are() -> None:
    # The file the person saved is the truth: --update never removes or rewrites a cue.
    text = update.recorded_vtt(MACHINE, "")
    better = (_cue(1000, 2200, "[door slams shut]", "e0001"), *MACHINE[1:])
    result, summary = _rerun(text, better)
    assert "[door slams shut]" not in result and "[door slams]\n" in result
    assert [c.raw_text for c in _reference(result)] == [c.lines[0] for c in MACHINE]
    assert summary.kept_unchanged == 4 and summary.new_written == 0 and summary.already_there == 4


def test_a_moved_cue_protects_its_old_place_too() -> None:
    text = _edit(
        update.recorded_vtt(MACHINE, ""), "00:00:01.000 --> 00:00:02.000", "00:00:20.000 --> 00:00:21.000"
    )
    result, _ = _rerun(text)
    starts = [c.start for c in _reference(result)]
    assert "00:00:01.000" not in starts and "00:00:20.000" in starts


def test_new_cue_gets_a_fresh_identifier_when_its_own_is_held() -> None:
    text = _edit(update.recorded_vtt(MACHINE[:1], ""), "[door slams]", "[door creaks]")
    moved_event = (_cue(30_000, 31_000, "[door slams]", "e0001"),)  # same id, elsewhere in time
    result, _ = _rerun(text, moved_event)
    identifiers = [c.identifier for c in _reference(result)]
    assert identifiers == ["e0001", "e0001-2"]


def test_update_vtt_reconciles_the_text_it_is_given(tmp_path: Path) -> None:
    path = tmp_path / "track.vtt"
    original = update.recorded_vtt(MACHINE, "")
    path.write_text(original)
    edited = _edit(original, "[dog barking]", "[small dog yapping]")
    result, summary = update.update_vtt(path, MACHINE, "", text=edited)  # the caller's copy, not the file's
    assert "[small dog yapping]" in result and summary.kept_edited == 1
    assert update.update_vtt(path, MACHINE, "")[1].kept_edited == 0  # read from the file when not given


def test_a_track_saved_in_a_legacy_code_page_is_read_with_one_decoder(tmp_path: Path) -> None:
    cafe = (_cue(1000, 2000, "[café door]", "café1"),)
    path = tmp_path / "track.vtt"
    text = _edit(update.recorded_vtt(cafe, ""), "[café door]\n", "[café door creaks]\n")
    path.write_bytes(text.encode("cp1252"))  # an editor that saved it as Windows-1252
    with pytest.warns(UserWarning, match="cp1252"):
        result, summary = update.update_vtt(path, cafe, "")
    # cue identifier and record decoded alike, so the edited cue is known by its identifier
    # (not taken for a hand-added cue plus a deletion)
    assert (summary.kept_edited, summary.kept_added, summary.deleted) == (1, 0, 0)
    assert "café1\n00:00:01.000 --> 00:00:02.000\n[café door creaks]" in result and "cue café1 " in result


def test_cues_whose_identifiers_an_editor_dropped_are_matched_by_content() -> None:
    text = update.recorded_vtt(MACHINE, "")
    stripped = re.sub(r"^e000\d\n", "", text, flags=re.MULTILINE)
    result, summary = _rerun(stripped)
    assert summary.kept_added == 0 and summary.kept_unchanged == 4
    assert len(_reference(result)) == 4


# ---- the command line: generate, edit by hand, re-run --------------------------------


def _blocks(path: Path) -> list[webvtt.Caption]:
    return list(webvtt.read(str(path)).captions)


def test_update_keeps_hand_work_on_a_generated_track(
    tmp_path: Path, pack: object, capsys: pytest.CaptureFixture[str]
) -> None:
    out = tmp_path / "demo.vtt"
    assert main(["caption", str(DEMO), "-o", str(out), "--quiet"]) == 0
    original = out.read_text()
    cues = _blocks(out)
    assert len(cues) >= 4, original
    edited, deleted, vanished = cues[0], cues[1], cues[-1]
    gap_start = next(
        c.end
        for c, following in itertools.pairwise(cues)
        if following.start_in_seconds - c.end_in_seconds >= 1
    )

    text = _edit(
        original,
        f"{edited.identifier}\n{edited.start} --> {edited.end}\n{edited.raw_text}",
        f"{edited.identifier}\n{edited.start} --> {edited.end}\n[chime from the hallway]",
    )
    text = _edit(text, f"{deleted.identifier}\n{deleted.start} --> {deleted.end}\n{deleted.raw_text}\n\n", "")
    # a cue the earlier run did not write at all (neither in the file nor in its record): the new run may add
    # it
    text = _edit(text, f"{vanished.identifier}\n{vanished.start} --> {vanished.end}\n{vanished.raw_text}", "")
    text = re.sub(rf"^cue {re.escape(vanished.identifier)} .*\n", "", text, flags=re.MULTILINE)
    gap_ms = round(float(gap_start.split(":")[-1]) * 1000) + 60_000 * int(gap_start.split(":")[-2])
    added = (
        f"\n\n{update.webvtt.timestamp(gap_ms + 100)} --> "
        f"{update.webvtt.timestamp(gap_ms + 700)}\n[footsteps, added by hand]\n"
    )
    out.write_text(text.rstrip("\n") + added)
    hand_file = out.read_text()

    assert main(["caption", str(DEMO), "-o", str(out), "--quiet"]) == 2  # no flag: refuses
    assert "already exists" in capsys.readouterr().err and out.read_text() == hand_file

    assert main(["caption", str(DEMO), "-o", str(out), "--update"]) == 0
    assert "(1 edited, 1 added by hand), respected 1 deletion(s)" in capsys.readouterr().err
    after = _blocks(out)
    texts = [c.raw_text for c in after]
    assert "[chime from the hallway]" in texts and edited.raw_text not in texts[:1]
    assert "[footsteps, added by hand]" in texts
    assert all((c.start, c.end) != (deleted.start, deleted.end) for c in after)  # not brought back
    assert (vanished.identifier, vanished.start, vanished.raw_text) in [
        (c.identifier, c.start, c.raw_text) for c in after
    ]
    unchanged = cues[2]
    assert (unchanged.identifier, unchanged.start, unchanged.raw_text) in [
        (c.identifier, c.start, c.raw_text) for c in after
    ]


def test_update_refuses_files_it_cannot_reconcile(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    media = tmp_path / "clip.wav"
    media.write_bytes(b"")  # never decoded: the check comes before any work
    srt_file = tmp_path / "clip.srt"
    srt_file.write_text("1\n00:00:00,000 --> 00:00:01,000\n[hand edit]\n")
    assert main(["caption", str(media), "-o", str(srt_file), "--update"]) == 2
    assert "only WebVTT files can hold" in capsys.readouterr().err

    assert main(["caption", str(media), "-o", "-", "--update"]) == 2
    assert "not standard output" in capsys.readouterr().err


def test_identifiers_are_unique_even_when_two_cues_share_an_event() -> None:
    # W3C WebVTT: a cue identifier must be unique among the cues of a file (from memory of §4.1)
    split = (_cue(1000, 1200, "[doorbell ringing]", "e0001"), _cue(1200, 2000, "[doorbell ringing]", "e0001"))
    identifiers = [c.identifier for c in _reference(update.recorded_vtt(split, ""))]
    assert identifiers == ["e0001", "e0001-2"]


def test_the_record_is_read_however_another_editor_reflowed_it() -> None:
    text = update.recorded_vtt(MACHINE, "note")
    entries = update.read_record(text)
    assert entries is not None and len(entries) == 4
    reflowed = text.replace("NOTE captioner record 1\n", "NOTE captioner\n  record 1 \n")
    reflowed = re.sub(r"^(cue \S+) (\S+) ", r"\1\n\2\n", reflowed, flags=re.MULTILINE)
    for variant in (reflowed, reflowed.replace("\n", "\r\n"), "\ufeff" + reflowed.replace("\n", "\r\n")):
        assert update.read_record(variant) == entries
    assert update.read_record(text.replace("NOTE captioner record 1", "NOTE captioner notes")) is None


def test_a_block_copied_with_its_identifier_is_kept_under_a_free_one() -> None:
    text = update.recorded_vtt(MACHINE, "")
    copy = "e0002\n00:00:20.000 --> 00:00:21.000\n[dog barking]\n"
    result, summary = _rerun(text + "\n" + copy)
    captions = _reference(result)
    identifiers = [c.identifier for c in captions]
    # W3C WebVTT: cue identifiers are unique within a file (from memory of §4.1)
    assert len(identifiers) == len(set(identifiers)) == 5
    assert ("00:00:20.000", "[dog barking]") in [(c.start, c.text) for c in captions]
    record = [line for line in result.splitlines() if line.startswith("cue ")]
    assert len(record) == len(set(record)) == 4  # the copy is the person's: no record line of its own
    assert summary.renamed == 1 and summary.kept_added == 1


def test_only_a_file_exactly_as_written_counts_as_untouched() -> None:
    text = update.recorded_vtt(MACHINE, f"{update.NOTE_OPENING} 0.1.0 from a.mp4")
    assert update.is_untouched(text) and update.is_untouched(text.replace("\n", "\r\n"))
    assert not update.is_untouched(_edit(text, "[dog barking]", "[dog yapping]"))
    assert not update.is_untouched(
        _edit(text, "e0003\n00:00:05.000 --> 00:00:06.000\n[glass breaking]\n\n", "")
    )
    assert not update.is_untouched(text + "\n00:00:30.000 --> 00:00:31.000\n[added]\n")
    assert not update.is_untouched(_edit(text, "\n\ne0001\n", "\n\nNOTE checked by the editor\n\ne0001\n"))
    assert not update.is_untouched("WEBVTT\n\n00:00.000 --> 00:01.000\n[no record]\n")
