"""Media: decode one audio stream to mono float32 on the player's clock, in bounded chunks.

ffmpeg does the decoding in its own process; a reader thread keeps its pipe drained so
decoding overlaps with classification. Probing (`captioner.probing`) reads ffmpeg's own
description of the input, since the imageio-ffmpeg binary has no ffprobe.

Time zero is the container's start, where a player's clock reads zero: ffmpeg measures
every stream from it (honouring MP4 edit lists, Matroska/WebM codec delay and MPEG-TS start
times, and correcting TS timestamp jumps), and `aresample` pads the leading gap (and any
later gap) with silence, so sample n plays at n / rate seconds. For TS-like formats ffmpeg
measures from the first stream in use, so the video is kept in use (copied to a null output).
"""

from __future__ import annotations

import io
import queue
import subprocess
import tempfile
import threading
import warnings
from collections.abc import Iterable, Iterator
from pathlib import Path

import numpy as np

from .channels import Fold, fold, mid_side_pan
from .errors import MediaError
from .probing import (
    AudioStream,
    MediaInfo,
    SubtitleStream,
    clock_keeper,
    ffmpeg_executable,
    input_url,
    last_error_line,
    probe,
)

__all__ = ["AudioStream", "MediaInfo", "SubtitleStream", "decode_chunks", "ffmpeg_executable", "probe"]


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
    args = _command(path, stream, sample_rate)
    chunk_bytes = int(chunk_seconds * sample_rate) * 4 * 2  # interleaved mid and side
    with tempfile.TemporaryFile() as errors:
        process = subprocess.Popen(args, stdout=subprocess.PIPE, stderr=errors)
        chunks: queue.Queue[Fold | None] = queue.Queue(maxsize=3)
        reader = threading.Thread(target=_pump, args=(process, chunk_bytes, chunks), daemon=True)
        reader.start()
        total = 0
        warned = False
        try:
            while (folded := chunks.get()) is not None:
                total += folded.samples.size
                if folded.cancelled and not warned:
                    warned = True
                    warnings.warn(
                        f"{path}: audio stream {stream.index} nearly cancels in a mono mix (one channel is "
                        "polarity-inverted?); captioning from the difference of its channels",
                        stacklevel=2,
                    )
                yield folded.samples
        finally:
            if process.poll() is None:
                process.kill()
            while reader.is_alive():  # unblock a reader waiting on a full queue
                try:
                    chunks.get(timeout=0.1)
                except queue.Empty:
                    pass
            process.wait()
            if process.stdout is not None:
                process.stdout.close()
        errors.seek(0)
        message = errors.read().decode("utf-8", "replace")
    if process.returncode != 0:
        reason = last_error_line(message, path) or f"ffmpeg exit status {process.returncode}"
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


def _command(path: Path, stream: AudioStream, sample_rate: int) -> list[str]:
    """The ffmpeg command: the stream on the player's clock, folded to (mid, side), at `sample_rate`.

    Whole-second frames (asetnsamples) make ffmpeg write the pipe in large blocks, which
    saves CPU that the classifier needs on a 2-core machine.
    """
    pan = mid_side_pan(stream.channels)
    filters = []
    if pan is None:  # a layout without channel names: ffmpeg's own mono mix, and no side
        filters.append("aformat=channel_layouts=mono")
        pan = "stereo|c0=FC|c1=0*FC"
    filters += [
        f"pan={pan}",
        "aformat=sample_fmts=flt:channel_layouts=stereo",
        # async: pad the gap before the first sample (and any later gap) with silence, and
        # drop what lies before zero, so samples sit on the player's clock.
        f"aresample={sample_rate}:async=1:first_pts=0",
        f"asetnsamples=n={sample_rate}:p=0",
    ]
    # The input-side -vn/-sn/-dn keep the demuxer from handing over other streams (a saving
    # on a 2-core machine), except the video where the format re-bases time on it.
    skip = ("-sn", "-dn") if stream.rebased else ("-vn", "-sn", "-dn")
    return [
        ffmpeg_executable(),
        *("-nostdin", "-v", "error", *skip, "-i", input_url(path)),
        *("-map", f"0:a:{stream.index}", "-af", ",".join(filters)),
        *("-f", "f32le", "-acodec", "pcm_f32le", "-ac", "2", "-ar", str(sample_rate), "pipe:"),
        *clock_keeper(stream.rebased),
    ]


def _check_damage(path: Path, message: str, decoded_ms: int, expected_ms: int | None) -> None:
    """Decoder errors: fatal when the audio also stops well short of its declared length."""
    # Container durations are estimates for some formats, so only a clear shortfall that
    # comes with decoder errors counts as truncation.
    if expected_ms and decoded_ms < 0.95 * expected_ms - 500:
        raise MediaError(
            path,
            f"truncated or damaged: only {decoded_ms / 1000:.1f} s of its {expected_ms / 1000:.1f} s of "
            f"audio decode ({last_error_line(message, path)})",
            "copy or export the file again",
        )
    count = sum(1 for line in message.splitlines() if line.strip())
    warnings.warn(
        f"{path}: {count} decoder error(s), the audio has damaged stretches; captions near them may be wrong",
        stacklevel=2,
    )


def _pump(process: subprocess.Popen[bytes], chunk_bytes: int, chunks: queue.Queue[Fold | None]) -> None:
    """Move ffmpeg's output into the queue in whole-chunk blocks, folded to mono (runs in a
    thread, so the queue holds mono chunks and the fold overlaps with classification).

    The pipe is read straight into one reused buffer: `fold` copies what it keeps.
    """
    assert isinstance(process.stdout, io.BufferedReader)
    block = np.empty(chunk_bytes // 4, dtype="<f4")
    view = block.data.cast("B")
    filled = 0
    while read := process.stdout.readinto(view[filled:]):
        filled += read
        if filled == chunk_bytes:
            chunks.put(fold(block))
            filled = 0
    usable = filled - filled % 8  # whole (mid, side) pairs
    if usable:
        chunks.put(fold(block[: usable // 4]))
    chunks.put(None)
