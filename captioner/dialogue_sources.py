"""Where dialogue subtitles come from when none is named: files beside the video, with or
without a language tag (`NAME.srt`, `NAME.en.srt`, `NAME.eng.vtt`, `NAME.en-GB.srt`), else
text subtitle streams inside the container (mov_text, SubRip, WebVTT, ASS)."""

from __future__ import annotations

import subprocess
from dataclasses import dataclass
from pathlib import Path

from .errors import MediaError
from .events import Span
from .languages import is_language_tag, same_language
from .probing import MediaInfo, SubtitleStream, clock_keeper, ffmpeg_executable, input_url, last_error_line

DIALOGUE_EXTENSIONS = (".vtt", ".srt")


@dataclass(frozen=True, slots=True)
class DialogueChoice:
    """The subtitle file picked beside a video, and a notice when the pick was not obvious."""

    path: Path | None
    notice: str = ""


def subtitle_language(name: str, stem: str) -> str | None:
    """The language tag of subtitle file `name` for a video with `stem`: "" untagged, None not its.

    >>> subtitle_language("show.en-GB.srt", "show"), subtitle_language("show.srt", "show")
    ('en-GB', '')
    >>> subtitle_language("show.sounds.vtt", "show") is None
    True
    >>> subtitle_language("other.en.srt", "show") is None
    True
    """
    path = Path(name)
    if path.suffix.lower() not in DIALOGUE_EXTENSIONS or not name.lower().startswith(stem.lower() + "."):
        return None
    middle = path.stem[len(stem) :]
    if not middle:
        return ""
    tag = middle.lstrip(".")
    return tag if middle.startswith(".") and "." not in tag and is_language_tag(tag) else None


def choose_beside(
    video: Path, names: list[str], stem: str, *, language: str | None, taken: set[str]
) -> DialogueChoice:
    """Pick the dialogue file for `video` among the file `names` of its folder.

    `language` picks a tagged file; otherwise an untagged `NAME.srt|vtt` comes first, then the
    tagged ones in name order, and the choice is reported when there were several. `taken`
    holds lowercased names that are not dialogue (our own outputs, other videos' subtitles).
    """
    candidates = sorted(
        (
            (tag, n)
            for n in names
            if n.lower() not in taken and (tag := subtitle_language(n, stem)) is not None
        ),
        key=lambda pair: (
            pair[0] != "",
            pair[0].lower(),
            DIALOGUE_EXTENSIONS.index(Path(pair[1]).suffix.lower()),
        ),
    )
    if not candidates:
        return DialogueChoice(None)
    if language:
        matching = [n for tag, n in candidates if same_language(tag, language)]
        if matching:
            return DialogueChoice(video.parent / matching[0])
    chosen = candidates[0][1]
    if len(candidates) == 1:
        return DialogueChoice(video.parent / chosen)
    others = ", ".join(n for _, n in candidates[1:])
    wanted = f"none is in {language!r}; " if language else ""
    return DialogueChoice(
        video.parent / chosen,
        f"{video}: several dialogue subtitles beside it ({chosen}, {others}); {wanted}using {chosen} "
        "(choose with --dialogue-language)",
    )


def embedded_stream(info: MediaInfo, language: str | None) -> SubtitleStream | None:
    """The text subtitle stream to read as dialogue: the wanted language, else the default, else the first."""
    texts = [s for s in info.subtitle_streams if s.is_text]
    if language:
        texts = [s for s in texts if same_language(s.language, language)] or texts
    defaults = [s for s in texts if s.is_default]
    return (defaults or texts)[0] if texts else None


def embedded_dialogue(info: MediaInfo, stream: SubtitleStream) -> tuple[Span, ...]:
    """The dialogue spans of an embedded text subtitle stream, on the player's clock.

    Raises:
        MediaError: ffmpeg cannot extract the stream.
    """
    from .formats.subtitles import dialogue_spans, parse_subtitles

    # On ffmpeg's timeline, as the audio is (see media.py).
    result = subprocess.run(
        [
            ffmpeg_executable(),
            *(
                "-nostdin",
                "-v",
                "error",
                "-dn",
                *(() if info.rebased else ("-vn",)),
                "-i",
                input_url(info.path),
            ),
            *("-map", f"0:s:{stream.index}", "-f", "srt", "pipe:", *clock_keeper(info.rebased)),
        ],
        capture_output=True,
    )
    if result.returncode != 0:
        raise MediaError(
            info.path,
            f"subtitle stream {stream.index} cannot be read "
            f"({last_error_line(result.stderr.decode('utf-8', 'replace'), info.path)})",
            "pass --dialogue SUBS, or re-export the file",
        )
    track = parse_subtitles(
        result.stdout.decode("utf-8", "replace"), "srt", name=f"{info.path.name} subtitles"
    )
    return tuple(span for span in dialogue_spans(track.cues) if span.end_ms > span.start_ms)
