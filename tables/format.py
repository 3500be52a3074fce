"""The ctmtab table file, format MAJOR.MINOR below (specified in docs/FORMAT.md).

    preamble  56 bytes: magic, major, minor, header length, body length, header sha256
    header    msgpack map, at most MAX_HEADER bytes, readable without the body
    body      zstd-compressed msgpack map of columnar little-endian arrays

Every read is bounded and checked before anything is allocated or decompressed; the body is
decompressed and decoded as one stream, so reading takes about READ_PEAK times its raw size."""
from __future__ import annotations

import hashlib
import io
import struct
import warnings

import msgpack
import zstandard

from ..fsutil import write_atomic  # noqa: F401  (part of this module's API)
from ..errors import (BadMagicError, ChecksumError, InconsistentTableError, SizeLimitError,
                      TableError, TruncatedError, VersionError)

MAGIC = b"\x8cCTMTAB\x1a"
MAJOR, MINOR = 1, 6  # 1.1 sampled tables (header "sample", group "moments"); 1.2 sample "streams"; 1.3 "certificate";
# 1.4 sparse histograms ("at"); 1.5 certificate "proof_nodes", the size cut ("cut"); 1.6 the run-on past
# the cap (certificate "settle", body "late")
PREAMBLE = struct.Struct("<8sHHIQ32s")  # magic, major, minor, header len, body len, header sha256
MAX_HEADER = 1 << 20
MAX_BODY = 1 << 31  # default cap on the decompressed body (and READ_PEAK x it must be free); load(max_body=...)
ZSTD_LEVEL = 12


class NewerMinorWarning(UserWarning):
    """The file has a newer minor version: it loads, unknown keys are ignored."""


def _pack(obj) -> bytes:
    return msgpack.packb(obj, use_bin_type=True)


def _unpack(data: bytes, what: str):
    def no_ext(code, _data):
        raise TableError(f"the {what} holds a msgpack extension type {code}; the file is not a ctmtab table")

    try:
        return msgpack.unpackb(data, raw=False, strict_map_key=True, ext_hook=no_ext,
                               timestamp=0)  # length limits default to len(data)
    except TableError:
        raise
    except (ValueError, TypeError, msgpack.UnpackException, RecursionError) as exc:
        raise TableError(f"the {what} is not valid msgpack ({exc}); the file is corrupt, fetch it again") from None


def encode(header: dict, body: dict) -> bytes:
    """Serialise one table. The body bytes depend on the body dict alone."""
    raw = _pack(body)
    compressed = zstandard.ZstdCompressor(level=ZSTD_LEVEL, write_content_size=True,
                                          write_checksum=False).compress(raw)
    header = dict(header)
    header["body"] = {"codec": "zstd", "raw_size": len(raw), "sha256": hashlib.sha256(compressed).hexdigest()}
    head = _pack(header)
    if len(head) > MAX_HEADER:
        raise TableError(f"the header is {len(head)} bytes, over the {MAX_HEADER} limit; shorten the notes")
    pre = PREAMBLE.pack(MAGIC, MAJOR, MINOR, len(head), len(compressed), hashlib.sha256(head).digest())
    return pre + head + compressed


def read_header(data: bytes, where: str = "table", size: int | None = None) -> tuple[dict, int]:
    """Check the preamble and header; return the header and the body offset. size: the whole
    file's length where data holds only its start (the preamble and the header)."""
    if len(data) < len(MAGIC) or data[: len(MAGIC)] != MAGIC:
        if len(data) < len(MAGIC) and MAGIC.startswith(data):
            raise TruncatedError(f"{where}: the file ends inside the magic bytes; the download is incomplete")
        raise BadMagicError(f"{where}: not a ctmtab table (wrong magic bytes); check the file name")
    if len(data) < PREAMBLE.size:
        raise TruncatedError(f"{where}: the file ends inside the preamble ({len(data)} bytes); fetch it again")
    _, major, minor, head_len, body_len, head_sha = PREAMBLE.unpack_from(data)
    if major != MAJOR:
        raise VersionError(
            f"{where}: table format {major}.{minor} is not readable by this ctmtab (reads {MAJOR}.x); "
            "upgrade ctmtab" if major > MAJOR else f"{where}: table format {major}.{minor} is unknown"
        )
    if head_len > MAX_HEADER:
        raise SizeLimitError(f"{where}: the header declares {head_len} bytes, over the {MAX_HEADER} limit")
    rest = (len(data) if size is None else size) - PREAMBLE.size  # subtract, never add: no overflow
    if head_len > min(rest, len(data) - PREAMBLE.size):
        raise TruncatedError(f"{where}: the file ends inside the header; the download is incomplete, fetch it again")
    if body_len > rest - head_len:
        raise TruncatedError(f"{where}: the file ends inside the body; the download is incomplete, fetch it again")
    if body_len != rest - head_len:
        raise TableError(f"{where}: {rest - head_len - body_len} bytes trail the body; the file is corrupt")
    head = data[PREAMBLE.size: PREAMBLE.size + head_len]
    if hashlib.sha256(head).digest() != head_sha:
        raise ChecksumError(f"{where}: the header checksum does not match; the file is corrupt, fetch it again")
    header = _unpack(head, "header")
    if not isinstance(header, dict):
        raise TableError(f"{where}: the header is not a map; the file is not a ctmtab table")
    if minor > MINOR:
        warnings.warn(f"{where}: table format {major}.{minor} is newer than this reader's {MAJOR}.{MINOR}; "
                      "unknown fields are ignored", NewerMinorWarning, stacklevel=3)
    header["_format"] = [major, minor]
    return header, PREAMBLE.size + head_len


def compressed_bound(raw_size: int) -> int:
    """The most bytes zstd needs for raw_size bytes (ZSTD_compressBound, plus slack)."""
    return raw_size + (raw_size >> 7) + 1024


READ_PEAK = 2  # memory while reading, per decompressed body byte: the unpacked arrays and one chunk


def available_memory() -> int | None:
    """Bytes this process may still allocate: MemAvailable, or less under a cgroup limit; None
    where neither is known."""
    found = []
    try:
        with open("/proc/meminfo") as f:
            found += [int(line.split()[1]) * 1024 for line in f if line.startswith("MemAvailable:")]
    except (OSError, ValueError, IndexError):
        pass
    try:
        with open("/sys/fs/cgroup/memory.max") as f:
            top = f.read().strip()
        if top.isdigit():
            with open("/sys/fs/cgroup/memory.current") as f:
                found.append(max(0, int(top) - int(f.read().strip())))
    except (OSError, ValueError):
        pass
    return min(found) if found else None


class _Bounded:
    """A read() over a decompressing stream that never yields more than `left` bytes in all."""

    def __init__(self, reader, left: int):
        self.reader, self.left, self.done = reader, left, 0

    def read(self, n: int = -1) -> bytes:
        n = self.left if n is None or n < 0 else min(n, self.left)
        data = self.reader.read(n) if n else b""
        self.left -= len(data)
        self.done += len(data)
        return data


def read_body(data: bytes, header: dict, offset: int, max_body: int = MAX_BODY, where: str = "table",
              expect: tuple[int, int] | None = None) -> dict:
    """Verify the body checksum, then decompress and decode it as one stream, never holding more
    than the declared size. expect: the (fewest, most) raw bytes the header allows (load.body_bounds)."""
    info = header.get("body")
    if not isinstance(info, dict) or info.get("codec") != "zstd":
        raise TableError(f"{where}: the header does not describe a zstd body; the file is not a ctmtab table")
    raw_size, digest = info.get("raw_size"), info.get("sha256")
    if not isinstance(raw_size, int) or isinstance(raw_size, bool) or raw_size < 1 or not isinstance(digest, str):
        raise TableError(f"{where}: the header's body size or checksum is malformed")
    if raw_size > max_body:
        raise SizeLimitError(
            f"{where}: the body declares {raw_size} bytes decompressed, over the limit of {max_body}; "
            "pass a larger max_body if you trust this file"
        )
    if expect is not None and not expect[0] <= raw_size <= expect[1]:
        raise InconsistentTableError(
            f"{where}: the body declares {raw_size} bytes decompressed, but the keys the header lists take "
            f"{expect[0]} to {expect[1]}; the file is corrupt or hostile"
        )
    free = available_memory()
    if free is not None and READ_PEAK * raw_size > free:
        raise SizeLimitError(f"{where}: reading it needs about {READ_PEAK * raw_size >> 20} MiB of memory, and "
                             f"{free >> 20} MiB is free; free some memory or read it on a larger machine")
    body = data[offset:]
    if hashlib.sha256(body).hexdigest() != digest:
        raise ChecksumError(f"{where}: the body checksum does not match; the file is corrupt, fetch it again")

    def no_ext(code, _data):
        raise TableError(f"the body holds a msgpack extension type {code}; the file is not a ctmtab table")

    stream = _Bounded(zstandard.ZstdDecompressor().stream_reader(io.BytesIO(body)), raw_size + 1)
    chunk = min(1 << 20, raw_size)
    unpacker = msgpack.Unpacker(stream, read_size=chunk, max_buffer_size=max(raw_size, chunk), raw=False,
                                strict_map_key=True, ext_hook=no_ext, timestamp=0)
    try:
        out = unpacker.unpack()
        used = unpacker.tell()
        extra = stream.read(1) if used == raw_size else b""
    except zstandard.ZstdError as exc:
        raise TableError(f"{where}: the body does not decompress ({exc}); the file is corrupt") from None
    except msgpack.OutOfData:
        raise InconsistentTableError(f"{where}: the body ends after {stream.done} bytes, inside its table data, "
                                     f"not at the declared {raw_size}; the file is corrupt or hostile") from None
    except TableError as exc:
        raise TableError(f"{where}: {exc}") from None
    except (ValueError, TypeError, msgpack.UnpackException, RecursionError) as exc:
        raise TableError(f"{where}: the body is not valid msgpack ({exc}); "
                         "the file is corrupt, fetch it again") from None
    if not isinstance(out, dict):
        raise TableError(f"{where}: the body is not a map; the file is corrupt")
    if used != raw_size or extra:
        raise InconsistentTableError(
            f"{where}: the body's table data " + (f"ends after {used} bytes" if used < raw_size else
                                                  "runs on past its end") +
            f", not the declared {raw_size}; the file is corrupt or hostile"
        )
    return out
