"""Choosing what to caption and what marks dialogue: audio streams with titles and languages,
embedded text subtitle streams, language-tagged subtitle files beside a video; and the small
timing and output checks of the command line."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest
from test_channels import _music

from captioner import library, media
from captioner.cli import main
from captioner.dialogue_sources import embedded_dialogue, embedded_stream
from captioner.report import _clock
from captioner.style import load_style
from conftest import run_ffmpeg, tone, write_wav

# Dialogue cues of the subtitle tracks built below: (start s, end s).
CUES = ((1.0, 2.5), (3.2, 4.0))


def _srt(path: Path) -> Path:
    def stamp(seconds: float) -> str:
        ms = round(seconds * 1000)
        return f"00:00:{ms // 1000:02d},{ms % 1000:03d}"

    blocks = [f"{n}\n{stamp(a)} --> {stamp(b)}\nLine {n}.\n" for n, (a, b) in enumerate(CUES, 1)]
    path.write_text("\n".join(blocks), encoding="utf-8")
    return path


def _dual(tmp_path: Path) -> Path:
    """dual.mkv: a silent commentary stream first, then "Music and effects" with music."""
    quiet = write_wav(tmp_path / "quiet.wav", np.zeros(6 * 16000))
    bed = write_wav(tmp_path / "bed.wav", _music(6.0), rate=48000)
    path = tmp_path / "dual.mkv"
    run_ffmpeg(
        *("-f", "lavfi", "-i", "color=c=black:s=64x64:r=25:d=6", "-i", str(quiet), "-i", str(bed)),
        *("-map", "0:v", "-map", "1:a", "-map", "2:a", "-c:v", "mpeg4", "-c:a", "flac", "-t", "6"),
        *("-metadata:s:a:0", "language=eng", "-metadata:s:a:0", "title=Director commentary"),
        *("-metadata:s:a:1", "language=fre", "-metadata:s:a:1", "title=Music and effects"),
        *("-disposition:a:0", "default", "-disposition:a:1", "0"),
        str(path),
    )
    return path


def test_streams_are_listed_with_codec_channels_language_title_and_default(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    path = _dual(tmp_path)
    assert main(["streams", str(path)]) == 0
    out = capsys.readouterr().out
    commentary, effects = [line for line in out.splitlines() if "flac" in line]
    assert commentary.startswith("*") and "eng" in commentary and "Director commentary" in commentary
    assert not effects.startswith("*") and "fre" in effects and "Music and effects" in effects
    assert "mono" in commentary


@pytest.mark.parametrize("request_", ["1", "fre", "fr", "music effects", "Music and effects"])
def test_a_stream_is_chosen_by_index_language_or_title_words(tmp_path: Path, request_: str) -> None:
    info = media.probe(_dual(tmp_path))
    assert info.choose_stream(request_).index == 1
    assert info.choose_stream(None).index == 0  # the default one


def test_an_unmatched_stream_request_lists_the_streams(tmp_path: Path) -> None:
    info = media.probe(_dual(tmp_path))
    with pytest.raises(Exception, match="no audio stream matches.*Director commentary.*captioner streams"):
        info.choose_stream("german dub")


def test_the_chosen_stream_is_recorded_and_an_empty_one_is_pointed_out(
    tmp_path: Path, capsys: pytest.CaptureFixture[str], pack: object
) -> None:
    path = _dual(tmp_path)
    out = tmp_path / "dual.sounds.vtt"
    assert main(["caption", str(path), "-o", str(out), "--events-json"]) == 0
    notices = capsys.readouterr().err
    assert 'audio stream 0 (eng, "Director commentary") gave no cues' in notices
    assert '1 (fre, "Music and effects")' in notices
    assert 'audio stream 0 (eng, "Director commentary") of 2' in out.read_text()
    chosen = tmp_path / "effects.vtt"
    assert (
        main(
            [
                "caption",
                str(path),
                "-o",
                str(chosen),
                "--audio-stream",
                "music",
                "--events-json",
                str(tmp_path / "e.json"),
            ]
        )
        == 0
    )
    assert "gave no cues" not in capsys.readouterr().err
    assert "[music]" in chosen.read_text()
    sidecar = json.loads((tmp_path / "e.json").read_text())
    assert sidecar["audio_stream"]["index"] == 1 and sidecar["audio_stream"]["language"] == "fre"
    assert sidecar["audio_stream"]["title"] == "Music and effects"


# -- embedded subtitle streams ----------------------------------------------------------------


def _with_subtitles(tmp_path: Path, name: str, codec: str, offset_s: float = 0.0) -> Path:
    subs = _srt(tmp_path / "lines.srt")
    audio = write_wav(tmp_path / "a.wav", tone(6.0, level=0.05))
    path = tmp_path / name
    run_ffmpeg(
        *("-f", "lavfi", "-i", "color=c=black:s=64x64:r=25:d=6", "-i", str(audio)),
        *("-itsoffset", str(offset_s), "-i", str(subs)),
        *("-map", "0:v", "-map", "1:a", "-map", "2:s", "-c:v", "mpeg4", "-c:a", "aac", "-c:s", codec),
        *("-metadata:s:s:0", "language=eng", "-t", "6", str(path)),
    )
    return path


@pytest.mark.parametrize(
    ("name", "codec", "offset"),
    [
        ("movtext.mp4", "mov_text", 0.0),
        ("subrip.mkv", "srt", 0.0),
        ("webvtt.mkv", "webvtt", 0.0),
        ("ass.mkv", "ass", 0.0),
        ("late.mkv", "srt", 0.7),
    ],
)
def test_embedded_text_subtitles_mark_dialogue_on_the_players_clock(
    tmp_path: Path, name: str, codec: str, offset: float
) -> None:
    path = _with_subtitles(tmp_path, name, codec, offset)
    info = media.probe(path)
    stream = embedded_stream(info, None)
    assert stream is not None and stream.is_text and stream.language == "eng"
    spans = embedded_dialogue(info, stream)
    assert len(spans) == len(CUES)
    for span, (start, end) in zip(spans, CUES):
        assert abs(span.start_ms / 1000 - (start + offset)) <= 0.05  # the 50 ms
        assert abs(span.end_ms / 1000 - (end + offset)) <= 0.05


def test_embedded_subtitles_are_the_dialogue_source_of_a_run(tmp_path: Path, pack: object) -> None:
    path = _with_subtitles(tmp_path, "talk.mkv", "srt")
    sidecar = tmp_path / "talk.json"
    assert (
        main(["caption", str(path), "-o", str(tmp_path / "t.vtt"), "--events-json", str(sidecar), "--quiet"])
        == 0
    )
    dialogue = json.loads(sidecar.read_text())["dialogue"]
    assert dialogue["source"] == "talk.mkv subtitle stream 0 (eng)"
    assert dialogue["spans"] == [[1000, 2500], [3200, 4000]]


# -- language-tagged subtitle files beside a video ------------------------------------------------


def _library(tmp_path: Path, names: list[str]) -> Path:
    folder = tmp_path / "lib"
    folder.mkdir()
    write_wav(folder / "show.wav", tone(1.0))
    for name in names:
        _srt(folder / name)
    return folder


@pytest.mark.parametrize("name", ["show.en.srt", "show.eng.vtt", "show.en-GB.srt", "show.srt"])
def test_a_language_tagged_subtitle_beside_the_video_is_its_dialogue(tmp_path: Path, name: str) -> None:
    (item,) = library.find_media(_library(tmp_path, [name, "show.sounds.vtt", "other.en.srt"]))
    assert item.dialogue is not None and item.dialogue.name == name
    assert item.dialogue_notice == ""
    assert item.outputs["merged"].name == f"show.merged{Path(name).suffix}"


def test_a_language_option_picks_among_several_and_otherwise_the_choice_is_reported(tmp_path: Path) -> None:
    folder = _library(tmp_path, ["show.en.srt", "show.fr.srt", "show.de.vtt"])
    (picked,) = library.find_media(folder, dialogue_language="fre")
    assert (
        picked.dialogue is not None and picked.dialogue.name == "show.fr.srt" and not picked.dialogue_notice
    )
    (reported,) = library.find_media(folder)
    assert reported.dialogue is not None and reported.dialogue.name == "show.de.vtt"
    assert (
        "several dialogue subtitles" in reported.dialogue_notice
        and "--dialogue-language" in reported.dialogue_notice
    )


def test_another_videos_subtitles_are_not_taken(tmp_path: Path) -> None:
    folder = _library(tmp_path, ["show.en.srt"])
    write_wav(folder / "show.en.wav", tone(1.0))  # a second video whose own subtitles these are
    by_name = {item.path.name: item for item in library.find_media(folder)}
    assert by_name["show.wav"].dialogue is None
    assert by_name["show.en.wav"].dialogue is not None


# -- small timing and output faults ------------------------------------------------------------


def test_explain_times_carry_into_minutes_and_hours() -> None:
    assert _clock(359_960) == "0:06:00.0"  # was 5:60.0
    assert _clock(3_599_960) == "1:00:00.0"  # was 59:60.0
    assert _clock(7_099_600) == "1:58:19.6"  # was 118:19.6
    assert _clock(83_449) == "0:01:23.4"


def test_a_format_that_contradicts_the_extension_is_refused(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    audio = write_wav(tmp_path / "a.wav", tone(1.0))
    target = tmp_path / "out.vtt"
    assert main(["caption", str(audio), "--format", "srt", "-o", str(target)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "out.vtt" in err[0] and "--format srt" in err[0]
    assert not target.exists()


def test_batch_chooses_the_stream_and_says_when_the_chosen_one_is_empty(tmp_path: Path, pack: object) -> None:
    folder = tmp_path / "archive"
    folder.mkdir()
    _dual(tmp_path).rename(folder / "dual.mkv")
    style = load_style("brackets")
    heard: list[str] = []
    library.run_batch(library.BatchOptions(folder=folder, style=style, workers=0), say=heard.append)
    assert any("gave no cues" in line and "Music and effects" in line for line in heard)
    heard.clear()
    chosen = library.BatchOptions(folder=folder, style=style, workers=0, audio_stream="fre")
    summary = library.run_batch(chosen, say=heard.append)
    assert summary.done == 1  # a new stream choice redoes the file
    assert not any("gave no cues" in line for line in heard)
    assert "[music]" in (folder / "dual.sounds.vtt").read_text()
