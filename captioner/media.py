"""Media: probe a file and decode one audio stream to mono float32 in bounded chunks.

ffmpeg does the decoding in its own process; a reader thread keeps its pipe drained so
decoding overlaps with classification. The ffmpeg binary is the system one when present,
else the one shipped by the `imageio-ffmpeg` package (which has no ffprobe, so probing
reads ffmpeg's own description of the input).
"""

from __future__ import annotations

import queue
import re
import shutil
import subprocess
import tempfile
import threading
import warnings
from collections.abc import Iterable, Iterator
from dataclasses import dataclass
from pathlib import Path

import ffmpeg
import numpy as np

from .errors import MediaError

_STREAM_LINE = re.compile(r"Stream #0:(\d+)[^:]*: Audio: (.*)")
_FFMPEG_TAGS = re.compile(r"^(\[[^\]]*\]\s*)+")  # "[aac @ 0x5600...] " prefixes name ffmpeg's internals
_DURATION = re.compile(r"Duration: (\d+):(\d\d):(\d\d(?:\.\d+)?)")


@dataclass(frozen=True, slots=True)
class AudioStream:
    """One audio stream of a media file, as ffmpeg describes it."""

    index: int  # position among the file's audio streams (0 = first audio stream)
    description: str
    is_default: bool


@dataclass(frozen=True, slots=True)
class MediaInfo:
    """What probing found: duration (None when unknown) and audio streams."""

    path: Path
    duration_ms: int | None
    audio_streams: tuple[AudioStream, ...]

    def choose_stream(self, requested: int | None) -> AudioStream:
        """The requested audio stream, else the default one, else the first.

        Raises:
            MediaError: no audio stream, or the requested one does not exist.
        """
        if not self.audio_streams:
            raise MediaError(self.path, "no audio stream", "check that the file plays with sound")
        if requested is not None:
            if not 0 <= requested < len(self.audio_streams):
                raise MediaError(
                    self.path,
                    f"--audio-stream {requested} does not exist "
                    f"(the file has {len(self.audio_streams)} audio stream(s))",
                    f"pass a number from 0 to {len(self.audio_streams) - 1}",
                )
            return self.audio_streams[requested]
        defaults = [s for s in self.audio_streams if s.is_default]
        return (defaults or list(self.audio_streams))[0]


def ffmpeg_executable() -> str:
    """Path of an ffmpeg binary: the system one, else the one bundled by imageio-ffmpeg."""
    system = shutil.which("ffmpeg")
    if system:
        return system
    import imageio_ffmpeg

    return str(imageio_ffmpeg.get_ffmpeg_exe())


def probe(path: Path) -> MediaInfo:
    """Describe a media file's audio streams and duration without ffprobe.

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
        [ffmpeg_executable(), "-hide_banner", "-nostdin", "-i", _input_url(path)],
        capture_output=True,
        text=True,
        errors="replace",
    )
    text = result.stderr
    if "Input #0" not in text:
        reason = _last_error_line(text, path) or "ffmpeg cannot read it"
        raise MediaError(
            path,
            f"not a readable media file ({reason})",
            "check that it plays; re-export it if it is damaged",
        )
    streams: list[AudioStream] = []
    for match in _STREAM_LINE.finditer(text):
        streams.append(AudioStream(len(streams), match.group(2).strip(), "(default)" in match.group(2)))
    duration = _DURATION.search(text)
    duration_ms = None
    if duration:
        hours, minutes, seconds = duration.groups()
        duration_ms = round((int(hours) * 3600 + int(minutes) * 60 + float(seconds)) * 1000)
    return MediaInfo(path, duration_ms, tuple(streams))


def _input_url(path: Path) -> str:
    """The path as ffmpeg's file protocol, so a name like "12:30 news.mp4" is not a protocol."""
    return "file:" + str(Path(path).absolute())


def _last_error_line(text: str, path: Path) -> str:
    lines = [line.strip() for line in text.splitlines() if line.strip()]
    useful = [line for line in lines if "output file" not in line.lower()]
    line = _FFMPEG_TAGS.sub("", useful[-1]) if useful else ""
    for name in (_input_url(path), str(Path(path).absolute()), str(path)):
        line = line.replace(name + ": ", "").replace(name, "the file")
    return line


def decode_chunks(
    path: Path,
    stream: AudioStream,
    *,
    sample_rate: int,
    chunk_seconds: float = 60.0,
    expected_ms: int | None = None,
) -> Iterator[np.ndarray]:
    """Decode one audio stream to mono float32 at `sample_rate`, chunk by chunk.

    Yields arrays of shape (n,) with n == chunk_seconds * sample_rate except the last.
    Memory stays bounded: at most a few chunks are queued between ffmpeg and the caller.
    `expected_ms` is the duration the container declares (from `probe`); with it a file
    that ends early with decoder errors is reported as truncated. Decoder errors on a file
    that still decodes to its full length only raise a warning.

    Raises:
        MediaError: ffmpeg failed, the file is truncated, or it decoded to no samples at all.
    """
    if sample_rate <= 0 or chunk_seconds <= 0:
        raise ValueError(f"sample_rate={sample_rate} and chunk_seconds={chunk_seconds} must be > 0")
    args = (
        # The input-side -vn/-sn/-dn keep the demuxer from handing over other streams, and
        # whole-second frames make ffmpeg write the pipe in large blocks: both save CPU that
        # the classifier needs on a 2-core machine.
        ffmpeg.input(_input_url(path), vn=None, sn=None, dn=None)[f"a:{stream.index}"]
        .filter("aformat", sample_fmts="flt", channel_layouts="mono")
        .filter("aresample", sample_rate)
        .filter("asetnsamples", n=sample_rate, p=0)
        .output("pipe:", format="f32le", acodec="pcm_f32le", ac=1, ar=sample_rate)
        .global_args("-nostdin", "-v", "error")
        .compile(cmd=ffmpeg_executable())
    )
    chunk_bytes = int(chunk_seconds * sample_rate) * 4
    with tempfile.TemporaryFile() as errors:
        process = subprocess.Popen(args, stdout=subprocess.PIPE, stderr=errors)
        chunks: queue.Queue[bytes | None] = queue.Queue(maxsize=3)
        reader = threading.Thread(target=_pump, args=(process, chunk_bytes, chunks), daemon=True)
        reader.start()
        total = 0
        try:
            while (data := chunks.get()) is not None:
                samples = np.frombuffer(data, dtype="<f4")
                total += samples.size
                yield samples
        finally:
            if process.poll() is None:
                process.kill()
            while reader.is_alive():  # unblock a reader waiting on a full queue
                try:
                    chunks.get(timeout=0.1)
                except queue.Empty:
                    pass
            process.wait()
        errors.seek(0)
        message = errors.read().decode("utf-8", "replace")
    if process.returncode != 0:
        reason = _last_error_line(message, path) or f"ffmpeg exit status {process.returncode}"
        raise MediaError(
            path,
            f"audio could not be decoded ({reason})",
            "check that it plays; re-export it if it is damaged",
        )
    if total == 0:
        raise MediaError(path, "the audio stream is empty (zero-length audio)", "check the file has sound")
    if message.strip():
        _check_damage(path, message, round(total * 1000 / sample_rate), expected_ms)


def peak_envelope(chunks: Iterable[np.ndarray], *, sample_rate: int, hop_ms: int = 50) -> np.ndarray:
    """Lowest and highest sample of every `hop_ms` window, read chunk by chunk as they decode.

    Returns an int8 array of shape (n_windows, 2) (min, max, full scale = 127); the last
    window may be shorter. An hour at 50 ms is 72,000 windows, 144 kB: small enough to embed.
    """
    window = sample_rate * hop_ms // 1000
    if window <= 0:
        raise ValueError(f"sample_rate={sample_rate} and hop_ms={hop_ms} give an empty window")
    parts: list[np.ndarray] = []
    rest = np.zeros(0, dtype=np.float32)
    for chunk in chunks:
        data = np.concatenate((rest, chunk))
        whole = data.size - data.size % window
        blocks = data[:whole].reshape(-1, window)
        parts.append(np.stack((blocks.min(axis=1), blocks.max(axis=1)), axis=1))
        rest = data[whole:]
    if rest.size:
        parts.append(np.array([[rest.min(), rest.max()]], dtype=np.float32))
    if not parts:
        return np.zeros((0, 2), dtype=np.int8)
    return np.clip(np.round(np.concatenate(parts) * 127), -127, 127).astype(np.int8)


def _check_damage(path: Path, message: str, decoded_ms: int, expected_ms: int | None) -> None:
    """Decoder errors: fatal when the audio also stops well short of its declared length."""
    # Container durations are estimates for some formats, so only a clear shortfall that
    # comes with decoder errors counts as truncation.
    if expected_ms and decoded_ms < 0.95 * expected_ms - 500:
        raise MediaError(
            path,
            f"truncated or damaged: only {decoded_ms / 1000:.1f} s of its {expected_ms / 1000:.1f} s of "
            f"audio decode ({_last_error_line(message, path)})",
            "copy or export the file again",
        )
    count = sum(1 for line in message.splitlines() if line.strip())
    warnings.warn(
        f"{path}: {count} decoder error(s), the audio has damaged stretches; captions near them may be wrong",
        stacklevel=2,
    )


def _pump(process: subprocess.Popen[bytes], chunk_bytes: int, chunks: queue.Queue[bytes | None]) -> None:
    """Move ffmpeg's output into the queue in whole-chunk blocks (runs in a thread)."""
    assert process.stdout is not None
    pending = bytearray()
    while block := process.stdout.read(chunk_bytes - len(pending)):
        pending += block
        if len(pending) >= chunk_bytes:
            chunks.put(bytes(pending))
            pending.clear()
    usable = len(pending) - len(pending) % 4
    if usable:
        chunks.put(bytes(pending[:usable]))
    chunks.put(None)
