"""Probing: a media file's streams, start time and duration, read from ffmpeg's own description.

The imageio-ffmpeg binary ships no ffprobe, so this parses what `ffmpeg -i FILE` prints:
one `Stream #0:N(lang): Kind: ...` line per stream, its `title` metadata below it, and the
container's `Duration: ..., start: S` line. The container start is where a player's clock
reads zero.
"""

from __future__ import annotations

import re
import shutil
import subprocess
from dataclasses import dataclass
from pathlib import Path

from .errors import MediaError
from .languages import same_language

_STREAM_LINE = re.compile(
    r"^\s*Stream #0:\d+(?:\[[^\]]*\])?(?:\((?P<lang>[^)]*)\))?: (?P<kind>Audio|Subtitle): (?P<rest>.*)$"
)
_ANY_STREAM = re.compile(r"^\s*Stream #")
_TITLE = re.compile(r"^\s+title\s*:\s*(?P<title>.*)$")
_FFMPEG_TAGS = re.compile(r"^(\[[^\]]*\]\s*)+")  # "[aac @ 0x5600...] " prefixes name ffmpeg's internals
_DURATION = re.compile(r"Duration: (\d+):(\d\d):(\d\d(?:\.\d+)?)")
_START = re.compile(r"Duration: [^\n]*?start: (-?\d+(?:\.\d+)?)")
_STREAM_START = re.compile(r", start (-?\d+(?:\.\d+)?)")
_CHANNELS = re.compile(r"\d+ Hz, ([^,]+)")
_DEMUXER = re.compile(r"^Input #0, (.*?), from ", re.MULTILINE)
# Demuxers flagged AVFMT_TS_DISCONT (from memory of libavformat): ffmpeg corrects their
# timestamp jumps and, on the first packet, re-bases their start on the streams in use.
_REBASING = frozenset({"mpegts", "mpegtsraw", "mpeg", "mpegvideo", "flv", "hls", "live_flv"})
# Subtitle codecs that carry text (bitmap subtitles such as PGS or DVB cannot be read as dialogue).
TEXT_SUBTITLE_CODECS = frozenset({"mov_text", "subrip", "srt", "webvtt", "ass", "ssa", "text"})


@dataclass(frozen=True, slots=True)
class AudioStream:
    """One audio stream of a media file, as ffmpeg describes it."""

    index: int  # position among the file's audio streams (0 = first audio stream)
    description: str
    is_default: bool
    codec: str = ""
    channels: str = ""  # channel layout as ffmpeg names it: "mono", "stereo", "5.1(side)", "3 channels"
    language: str = ""  # as tagged in the file ("eng", "fre"); "" when untagged or "und"
    title: str = ""
    start_ms: int = 0  # where the stream starts on the player's clock (0 = with the container)
    # The demuxer re-bases time on the streams in use (MPEG-TS/PS, FLV, HLS: ffmpeg's
    # AVFMT_TS_DISCONT formats), so decoding must keep the video in use to keep the player's zero.
    rebased: bool = False

    def label(self) -> str:
        """How notices name the stream: `1 (fre, "Music and effects")`."""
        parts = [p for p in (self.language, f'"{self.title}"' if self.title else "") if p]
        return f"{self.index} ({', '.join(parts)})" if parts else str(self.index)


@dataclass(frozen=True, slots=True)
class SubtitleStream:
    """One subtitle stream; only text codecs (see TEXT_SUBTITLE_CODECS) can be read as dialogue."""

    index: int  # position among the file's subtitle streams
    codec: str
    language: str
    title: str
    is_default: bool

    @property
    def is_text(self) -> bool:
        return self.codec in TEXT_SUBTITLE_CODECS


@dataclass(frozen=True, slots=True)
class MediaInfo:
    """What probing found: duration (None when unknown), the container start and the streams."""

    path: Path
    duration_ms: int | None
    audio_streams: tuple[AudioStream, ...]
    start_s: float = 0.0  # the container's start time in seconds (the player's zero)
    subtitle_streams: tuple[SubtitleStream, ...] = ()
    rebased: bool = False  # see AudioStream.rebased

    def choose_stream(self, requested: int | str | None) -> AudioStream:
        """The requested audio stream, else the default one, else the first.

        `requested` is an index (0 = first audio stream), a language ("en", "eng", "fre"),
        or words that all occur in the stream's title ("music effects"), tried in that order.

        Raises:
            MediaError: no audio stream, or none matches the request.
        """
        if not self.audio_streams:
            raise MediaError(self.path, "no audio stream", "check that the file plays with sound")
        if requested is None:
            defaults = [s for s in self.audio_streams if s.is_default]
            return (defaults or list(self.audio_streams))[0]
        text = str(requested).strip()
        if text.isdigit():
            number = int(text)
            if not 0 <= number < len(self.audio_streams):
                raise MediaError(
                    self.path,
                    f"--audio-stream {number} does not exist "
                    f"(the file has {len(self.audio_streams)} audio stream(s))",
                    f"pass a number from 0 to {len(self.audio_streams) - 1}",
                )
            return self.audio_streams[number]
        by_language = [s for s in self.audio_streams if s.language and same_language(s.language, text)]
        words = text.lower().split()
        by_title = [s for s in self.audio_streams if words and all(w in s.title.lower() for w in words)]
        if by_language or by_title:
            return (by_language or by_title)[0]
        listed = "; ".join(s.label() for s in self.audio_streams)
        raise MediaError(
            self.path,
            f"no audio stream matches --audio-stream {text!r} (streams: {listed})",
            "pass a stream number, a language or words of a title (see `captioner streams FILE`)",
        )


def clock_keeper(rebased: bool) -> tuple[str, ...]:
    """ffmpeg output options that keep the video in use, for formats that re-base time on the
    streams in use: the video is copied to a null output (no decoding)."""
    return ("-map", "0:v?", "-c", "copy", "-f", "null", "-") if rebased else ()


def ffmpeg_executable() -> str:
    """Path of an ffmpeg binary: the system one, else the one bundled by imageio-ffmpeg."""
    system = shutil.which("ffmpeg")
    if system:
        return system
    import imageio_ffmpeg

    return str(imageio_ffmpeg.get_ffmpeg_exe())


def input_url(path: Path) -> str:
    """The path as ffmpeg's file protocol, so a name like "12:30 news.mp4" is not a protocol."""
    return "file:" + str(Path(path).absolute())


def last_error_line(text: str, path: Path) -> str:
    """ffmpeg's last message, without its internal prefixes and with the path shortened."""
    lines = [line.strip() for line in text.splitlines() if line.strip()]
    useful = [line for line in lines if "output file" not in line.lower()]
    line = _FFMPEG_TAGS.sub("", useful[-1]) if useful else ""
    for name in (input_url(path), str(Path(path).absolute()), str(path)):
        line = line.replace(name + ": ", "").replace(name, "the file")
    return line


def probe(path: Path) -> MediaInfo:
    """Describe a media file's streams, start and duration without ffprobe.

    Raises:
        MediaError: the file is missing, unreadable or not media ffmpeg understands.
    """
    path = Path(path)
    if path.is_dir():
        raise MediaError(
            path, "is a folder, not a media file", "use `captioner batch FOLDER` to caption every file in it"
        )
    if not path.is_file():
        raise MediaError(path, "file not found", "check the path")
    result = subprocess.run(
        [ffmpeg_executable(), "-hide_banner", "-nostdin", "-i", input_url(path)],
        capture_output=True,
        text=True,
        errors="replace",
    )
    text = result.stderr
    if "Input #0" not in text:
        reason = last_error_line(text, path) or "ffmpeg cannot read it"
        raise MediaError(
            path,
            f"not a readable media file ({reason})",
            "check that it plays; re-export it if it is damaged",
        )
    return describe(path, text)


def describe(path: Path, text: str) -> MediaInfo:
    """MediaInfo from the text `ffmpeg -i` printed for `path`."""
    demuxer = _DEMUXER.search(text)
    rebased = demuxer is not None and bool(_REBASING & set(demuxer.group(1).split(",")))
    start_match = _START.search(text)
    start_s = float(start_match.group(1)) if start_match else 0.0
    audio: list[AudioStream] = []
    subtitles: list[SubtitleStream] = []
    lines = text.splitlines()
    for number, line in enumerate(lines):
        match = _STREAM_LINE.match(line)
        if not match:
            continue
        rest = match.group("rest").strip()
        language = "" if (match.group("lang") or "und") == "und" else match.group("lang")
        title = _stream_title(lines[number + 1 :])
        codec = rest.split(None, 1)[0].rstrip(",") if rest else ""
        default = "(default)" in rest
        if match.group("kind") == "Subtitle":
            subtitles.append(SubtitleStream(len(subtitles), codec, language, title, default))
            continue
        channels = _CHANNELS.search(rest)
        stream_start = _STREAM_START.search(rest)
        offset_ms = round((float(stream_start.group(1)) - start_s) * 1000) if stream_start else 0
        audio.append(
            AudioStream(
                len(audio),
                rest,
                default,
                codec,
                channels.group(1).strip() if channels else "",
                language,
                title,
                max(offset_ms, 0),
                rebased,
            )
        )
    duration = _DURATION.search(text)
    duration_ms = None
    if duration:
        hours, minutes, seconds = duration.groups()
        duration_ms = round((int(hours) * 3600 + int(minutes) * 60 + float(seconds)) * 1000)
    return MediaInfo(path, duration_ms, tuple(audio), start_s, tuple(subtitles), rebased)


def _stream_title(following: list[str]) -> str:
    """The `title` metadata printed under a stream line, before the next stream."""
    for line in following:
        if _ANY_STREAM.match(line) or not line.startswith("    "):
            return ""
        title = _TITLE.match(line)
        if title:
            return title.group("title").strip()
    return ""
