"""Leakage check: is a training clip (or a cut of it) also in the excluded packages or the dev set?

Three tests, any one is enough to drop a clip:

- file checksum: SHA-256 of the encoded file;
- audio checksum: SHA-256 of the decoded 16 kHz mono PCM (same audio in another container);
- acoustic fingerprint: Chromaprint raw fingerprints (``fpcalc -raw``), compared by bit error
  rate at the best alignment offset, so that a cut, a re-encoding, a gain change or a mixture
  that contains the clip is found.

Chromaprint computes one 32-bit item per 1365 samples at 11025 Hz from a 12-bin chroma image,
so a clip shorter than about two seconds gives almost no items. The audio is therefore handed
to fpcalc declared at a quarter of its real rate (``STRETCH``): four times slower and two
octaves lower. Chroma ignores octaves, so the features stay, and a one-second sound effect
yields about 17 items instead of none. Every fingerprint here is made the same way, so they
are comparable with each other (not with fingerprints made elsewhere).
"""

from __future__ import annotations

import json
import subprocess
from collections.abc import Iterable, Sequence
from dataclasses import dataclass

import numpy as np

from training.audio import RATE

STRETCH = 8
PAD_SECONDS = 0.3  # silence around every clip, so that a short one still fills whole chroma images
ITEM_SECONDS = 1365 / 11025 / STRETCH  # real time between items
ITEM_SPAN_SECONDS = (15 * 1365 + 4096) / 11025 / STRETCH  # real audio one item depends on
SILENT_DBFS = -50.0  # items over quieter audio are ignored: silence fingerprints alike everywhere
MAX_FP_SECONDS = 60.0  # real seconds fingerprinted per file (long music: its first minute)

# Thresholds, measured by tests/test_leakage.py and the calibration in training/README.md:
# a re-encoded, trimmed, gain-changed copy lands at a bit error rate of about 0.05-0.2,
# unrelated sounds at 0.42-0.5 (random bits would give 0.5).
MATCH_BER = 0.20  # overlap of the whole shorter fingerprint
WINDOW_ITEMS = 48  # ... or any window of this many non-silent items (about 0.75 s of audio)
WINDOW_BER = 0.18
CONTRAST_SHIFTS = (-16, -12, -8, 8, 12, 16)  # items (a quarter second at most)
CONTRAST = 0.6  # the match must have at most this share of the bit errors of those shifts
MIN_ITEMS = 16  # overlaps with fewer loud items (about a quarter second) are not judged


@dataclass(frozen=True)
class Fingerprint:
    """Raw Chromaprint items of one clip, with a mask of the items that heard sound."""

    items: np.ndarray  # uint32
    loud: np.ndarray  # bool, same length


def fingerprint_many(clips: Sequence[np.ndarray]) -> list[Fingerprint]:
    """Fingerprints of 16 kHz int16 clips."""
    return [fingerprint(clip) for clip in clips]


def fingerprint(clip: np.ndarray) -> Fingerprint:
    """Raw Chromaprint items of a 16 kHz int16 clip (fed to fpcalc at the stretched rate)."""
    command = ["fpcalc", "-raw", "-json", "-format", "s16le", "-channels", "1"]
    command += ["-rate", str(RATE // STRETCH), "-length", str(int(MAX_FP_SECONDS * STRETCH)), "-"]
    clip = clip[: int(MAX_FP_SECONDS * RATE)]
    pad = np.zeros(int(PAD_SECONDS * RATE), dtype=np.int16)
    clip = np.concatenate([pad, clip.astype(np.int16), pad])
    data = clip.astype("<i2").tobytes()
    result = subprocess.run(command, input=data, capture_output=True, check=False)
    text = result.stdout.decode(errors="replace").strip()
    items = json.loads(text).get("fingerprint", []) if text.startswith("{") else []
    return _with_mask(np.asarray(items, dtype=np.uint32), clip)


def _with_mask(items: np.ndarray, clip: np.ndarray) -> Fingerprint:
    step, span = ITEM_SECONDS * RATE, ITEM_SPAN_SECONDS * RATE
    power = clip.astype(np.float64) ** 2
    cumulative = np.concatenate([[0.0], np.cumsum(power)])
    starts = np.minimum((np.arange(len(items)) * step).astype(int), len(clip))
    ends = np.minimum(starts + int(span), len(clip))
    mean = (cumulative[ends] - cumulative[starts]) / np.maximum(ends - starts, 1)
    level = 10 * np.log10(np.maximum(mean, 1e-12) / 32768.0**2)
    return Fingerprint(items, level > SILENT_DBFS)


_POPCOUNT = np.array([bin(n).count("1") for n in range(256)], dtype=np.uint8)


def _bit_errors(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Differing bits per item pair."""
    xor = np.bitwise_xor(a, b).view(np.uint8).reshape(-1, 4)
    counts: np.ndarray = _POPCOUNT[xor].sum(axis=1).astype(np.int32)
    return counts


@dataclass(frozen=True)
class Alignment:
    ber: float  # bit error rate over the overlapping loud items
    window_ber: float  # best window of WINDOW_ITEMS loud items (1.0 when the overlap is shorter)
    items: int  # loud items in the overlap


def align(query: Fingerprint, other: Fingerprint, offset: int) -> Alignment | None:
    """Compare query item i with other item i + offset."""
    start, stop = max(0, -offset), min(len(query.items), len(other.items) - offset)
    if stop - start < MIN_ITEMS:
        return None
    q = slice(start, stop)
    o = slice(start + offset, stop + offset)
    both = query.loud[q] & other.loud[o]
    count = int(both.sum())
    if count < MIN_ITEMS:
        return None
    errors = _bit_errors(query.items[q][both], other.items[o][both])
    ber = float(errors.sum()) / (32 * count)
    window = 1.0
    if count >= WINDOW_ITEMS:
        sums = np.convolve(errors, np.ones(WINDOW_ITEMS, dtype=np.int32), mode="valid")
        window = float(sums.min()) / (32 * WINDOW_ITEMS)
    return Alignment(ber, window, count)


def is_match(found: Alignment | None) -> bool:
    return found is not None and (found.ber <= MATCH_BER or found.window_ber <= WINDOW_BER)


def stands_out(query: Fingerprint, other: Fingerprint, offset: int, found: Alignment) -> bool:
    """A real alignment beats its neighbours: shifted by a few items, a copy no longer agrees.

    Steady tones and slow drones give nearly the same items everywhere, so two different
    beeps of one pitch class agree at every offset; they are no evidence of a copy.
    """
    around = [align(query, other, offset + d) for d in CONTRAST_SHIFTS]
    baseline = [min(a.ber, a.window_ber) for a in around if a is not None]
    if not baseline:
        return False
    return min(found.ber, found.window_ber) <= CONTRAST * float(np.median(baseline))


class FingerprintIndex:
    """Every excluded fingerprint, searchable by 16-bit halves of their items.

    A copy flips a few bits per item, so most items keep one half intact: the halves that
    agree vote for an alignment offset, and only offsets with several votes are compared bit
    by bit. Halves that occur everywhere (near-silence, steady tones) are not used as votes.
    """

    def __init__(self, names: Sequence[str], prints: Sequence[Fingerprint], common_limit: int = 400):
        self.names = list(names)
        self.prints = list(prints)
        owners = [np.full(len(p.items), n, dtype=np.int32) for n, p in enumerate(self.prints)]
        positions = [np.arange(len(p.items), dtype=np.int32) for p in self.prints]
        loud = np.concatenate([p.loud for p in self.prints]) if self.prints else np.zeros(0, bool)
        items = np.concatenate([p.items for p in self.prints]) if self.prints else np.zeros(0, np.uint32)
        owner = np.concatenate(owners) if owners else np.zeros(0, np.int32)
        position = np.concatenate(positions) if positions else np.zeros(0, np.int32)
        self._tables = []
        for shift in (16, 0):
            keys = ((items >> shift) & 0xFFFF).astype(np.int64) + (shift << 12)
            order = np.argsort(keys[loud], kind="stable")
            sorted_keys = keys[loud][order]
            self._tables.append((shift, sorted_keys, owner[loud][order], position[loud][order], common_limit))

    def matches(
        self, query: Fingerprint, min_votes: int = 3, max_candidates: int = 300
    ) -> list[tuple[str, Alignment]]:
        """Excluded clips that the query matches, with the best alignment for each."""
        loud_at = np.flatnonzero(query.loud)
        pairs = []
        for shift, sorted_keys, owner, position, common in self._tables:
            keys = ((query.items[loud_at] >> shift) & 0xFFFF).astype(np.int64) + (shift << 12)
            lo = np.searchsorted(sorted_keys, keys, side="left")
            hi = np.searchsorted(sorted_keys, keys, side="right")
            lengths = np.where(hi - lo > common, 0, hi - lo)
            if not lengths.sum():
                continue
            starts = np.repeat(lo - np.concatenate([[0], np.cumsum(lengths)[:-1]]), lengths)
            hits = starts + np.arange(int(lengths.sum()))
            offsets = position[hits].astype(np.int64) - np.repeat(loud_at, lengths)
            pairs.append(owner[hits].astype(np.int64) * (1 << 24) + offsets + (1 << 23))
        if not pairs:
            return []
        unique, counts = np.unique(np.concatenate(pairs), return_counts=True)
        needed = min(min_votes, max(1, len(loud_at) // 8))
        strong = np.flatnonzero(counts >= needed)
        strong = strong[np.argsort(-counts[strong], kind="stable")][
            :max_candidates
        ]  # steady tones vote everywhere
        candidates = [(int(k) >> 24, (int(k) & ((1 << 24) - 1)) - (1 << 23)) for k in unique[strong]]
        best: dict[int, Alignment] = {}
        for clip, offset in candidates:
            for shifted in (offset - 1, offset, offset + 1):
                found = align(query, self.prints[clip], shifted)
                if (
                    found is not None
                    and is_match(found)
                    and stands_out(query, self.prints[clip], shifted, found)
                ):
                    if clip not in best or found.ber < best[clip].ber:
                        best[clip] = found
        return [(self.names[clip], found) for clip, found in sorted(best.items(), key=lambda kv: kv[1].ber)]


def best_alignment(query: Fingerprint, other: Fingerprint) -> Alignment | None:
    """Exhaustive search over every offset (for tests and calibration; slow on long clips)."""
    found: list[Alignment] = []
    for offset in range(-len(query.items) + MIN_ITEMS, len(other.items) - MIN_ITEMS + 1):
        result = align(query, other, offset)
        if result is not None:
            found.append(result)
    return min(found, key=lambda a: min(a.ber, a.window_ber), default=None)


def checksum_matches(
    sha: str, audio_sha: str, file_index: dict[str, str], audio_index: dict[str, str]
) -> tuple[str, str] | None:
    """(method, matched name) when a checksum is already known, else None."""
    if sha in file_index:
        return "file checksum", file_index[sha]
    if audio_sha in audio_index:
        return "audio checksum", audio_index[audio_sha]
    return None


def describe(names: Iterable[str]) -> str:
    return "; ".join(names)
