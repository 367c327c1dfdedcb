"""Every sound file of an unpacked Debian package, archive members included.

Games ship many of their sounds inside archives: zip files under other names (.pk3, .wz,
.zip) and Qt resource bundles (.rcc). A member is named ``path/of/archive.zip/member`` so that
one string says where the clip lives inside the package.
"""

from __future__ import annotations

import struct
import zipfile
import zlib
from collections.abc import Callable, Iterator
from dataclasses import dataclass
from pathlib import Path

AUDIO_SUFFIXES = (
    ".ogg",
    ".oga",
    ".wav",
    ".mp3",
    ".flac",
    ".opus",
    ".wv",
    ".au",
    ".aif",
    ".aiff",
    ".spx",
    ".m4a",
)
ZIP_SUFFIXES = (".zip", ".pk3", ".pk4", ".wz")
RCC_SUFFIXES = (".rcc",)
C4GROUP_SUFFIXES = (".ocg", ".ocd", ".ocf", ".ocs", ".c4g", ".c4d")


@dataclass(frozen=True)
class SoundFile:
    """One sound file: its path inside the package and a way to read its bytes."""

    path: str
    read: Callable[[], bytes]


def is_audio(name: str) -> bool:
    return name.lower().endswith(AUDIO_SUFFIXES)


def package_sounds(root: Path) -> Iterator[SoundFile]:
    """Sound files under an unpacked package root, in a stable order."""
    for file in sorted(p for p in root.rglob("*") if p.is_file() and not p.is_symlink()):
        rel = file.relative_to(root).as_posix()
        lower = rel.lower()
        if is_audio(lower):
            yield SoundFile(rel, file.read_bytes)
        elif lower.endswith(ZIP_SUFFIXES):
            yield from _zip_members(file, rel)
        elif lower.endswith(RCC_SUFFIXES):
            yield from _rcc_members(file.read_bytes(), rel)
        elif lower.endswith(".cat"):
            yield from _cat_members(file.read_bytes(), rel)
        elif lower.endswith(C4GROUP_SUFFIXES):
            yield from _c4group_members(file.read_bytes(), rel)


def _zip_members(file: Path, rel: str) -> Iterator[SoundFile]:
    try:
        archive = zipfile.ZipFile(file)
    except zipfile.BadZipFile:
        return
    for name in sorted(archive.namelist()):
        if is_audio(name) and not name.endswith("/"):
            yield SoundFile(f"{rel}/{name}", _zip_reader(file, name))


def _zip_reader(file: Path, name: str) -> Callable[[], bytes]:
    def read() -> bytes:
        with zipfile.ZipFile(file) as archive:
            return archive.read(name)

    return read


# Qt resource (.rcc) layout, as written by Qt's rcc tool (format versions 1-3): a "qres" header
# with offsets of the node tree, the data blobs and the names; tree nodes are 14 bytes (v1) or
# 22 bytes (v2+, with a modification time); flag 1 = zlib (qCompress: 4-byte size + zlib
# stream), 2 = directory, 4 = zstd.
_RCC_COMPRESSED, _RCC_DIRECTORY, _RCC_ZSTD = 1, 2, 4


def _rcc_members(blob: bytes, rel: str) -> Iterator[SoundFile]:
    if blob[:4] != b"qres":
        return
    version, tree, data, names = struct.unpack(">IIII", blob[4:20])
    node_size = 14 if version == 1 else 22

    def name_at(offset: int) -> str:
        length = struct.unpack(">H", blob[names + offset : names + offset + 2])[0]
        start = names + offset + 6
        return blob[start : start + 2 * length].decode("utf-16-be")

    def walk(index: int, prefix: str) -> Iterator[SoundFile]:
        at = tree + index * node_size
        name_offset, flags = struct.unpack(">IH", blob[at : at + 6])
        name = "" if index == 0 else name_at(name_offset)
        path = f"{prefix}/{name}" if name else prefix
        if flags & _RCC_DIRECTORY:
            count, first = struct.unpack(">II", blob[at + 6 : at + 14])
            for child in range(first, first + count):
                yield from walk(child, path)
        elif is_audio(name) and not flags & _RCC_ZSTD:
            offset = struct.unpack(">I", blob[at + 10 : at + 14])[0]
            yield SoundFile(f"{rel}{path}", _rcc_reader(blob, data + offset, bool(flags & _RCC_COMPRESSED)))

    yield from walk(0, "")


def _rcc_reader(blob: bytes, at: int, compressed: bool) -> Callable[[], bytes]:
    def read() -> bytes:
        size = struct.unpack(">I", blob[at : at + 4])[0]
        payload = blob[at + 4 : at + 4 + size]
        return zlib.decompress(payload[4:]) if compressed else payload

    return read


def _cat_members(blob: bytes, rel: str) -> Iterator[SoundFile]:
    """OpenTTD sound catalogues: a table of (offset, size) pairs, each entry a name then a WAV."""
    if len(blob) < 8:
        return
    count = (struct.unpack("<I", blob[:4])[0] & 0x7FFFFFFF) // 8  # the top bit of an offset is a flag
    if not 0 < count <= len(blob) // 8:
        return
    for n in range(count):
        offset, size = struct.unpack("<II", blob[8 * n : 8 * n + 8])
        offset &= 0x7FFFFFFF
        entry = blob[offset : offset + size]
        if not entry:
            continue
        payload = entry[1 + entry[0] :]
        if payload[:4] == b"RIFF":
            yield SoundFile(f"{rel}/{n}", _constant(payload))


def _constant(payload: bytes) -> Callable[[], bytes]:
    return lambda: payload


# OpenClonk groups (.ocg/.ocd/...): a gzip stream whose first two magic bytes are changed
# (1E 8C), holding a 204-byte header and 316-byte entries, both scrambled (XOR 237, then every
# three bytes reversed); sub-groups are stored inside uncompressed, in the same layout.
_C4_HEADER, _C4_ENTRY = 204, 316


def _c4group_members(blob: bytes, rel: str) -> Iterator[SoundFile]:
    if blob[:2] == b"\x1e\x8c":
        try:
            blob = zlib.decompressobj(31).decompress(b"\x1f\x8b" + blob[2:])
        except zlib.error:
            return
    yield from _c4group_walk(blob, rel)


def _c4_unscramble(data: bytes) -> bytes:
    out = bytearray(byte ^ 237 for byte in data)
    for i in range(0, len(out) - 2, 3):
        out[i], out[i + 2] = out[i + 2], out[i]
    return bytes(out)


def _c4group_walk(blob: bytes, rel: str) -> Iterator[SoundFile]:
    header = _c4_unscramble(blob[:_C4_HEADER])
    if not header.startswith(b"RedWolf Design GrpFolder"):
        return
    entries = struct.unpack("<i", header[36:40])[0]
    base = _C4_HEADER + entries * _C4_ENTRY
    for n in range(entries):
        entry = blob[_C4_HEADER + n * _C4_ENTRY : _C4_HEADER + (n + 1) * _C4_ENTRY]
        name = entry[:260].split(b"\0")[0].decode("latin-1")
        _, child, size, _, offset = struct.unpack("<iiiii", entry[260:280])
        payload = blob[base + offset : base + offset + size]
        if child:
            yield from _c4group_walk(payload, f"{rel}/{name}")
        elif is_audio(name):
            yield SoundFile(f"{rel}/{name}", _constant(payload))
