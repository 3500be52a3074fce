"""Builders of valid and hostile table files for the reader's tests."""
from __future__ import annotations

import hashlib
import struct
import warnings

import msgpack
import zstandard

from ctmtab.model.space import Space
from ctmtab.model.tally import Tally
from ctmtab.tables import Table
from ctmtab.tables import format as fmt


def hand_tally(groups: dict, space=Space(1, 1, 2), cap=5, halting=None) -> Tally:
    """A tally written by hand, with totals made consistent with the counts."""
    total = sum(sum(g.values()) for g in groups.values())
    m = space.symbols
    halting = total // m if halting is None else halting
    length_hist = [0] * (max(s[0] for s in groups) + 1)
    for shape, g in groups.items():
        length_hist[shape[0]] = sum(g.values()) // m
    return Tally(space=space, cap=cap, groups=groups, halting=halting, non_halting=0,
                 undecided=space.size - halting, halting_nodes=1, steps_hist=[0, halting],
                 length_hist=length_hist, longest_run=1, most_nonblank=1, steps=0, deciders=())


def sections(data: bytes) -> tuple[int, int]:
    """(header end, body end) offsets."""
    _, _, _, hl, bl, _ = fmt.PREAMBLE.unpack_from(data)
    return fmt.PREAMBLE.size + hl, fmt.PREAMBLE.size + hl + bl


def split(data: bytes):
    pre = bytearray(data[: fmt.PREAMBLE.size])
    hend, _ = sections(data)
    return pre, data[fmt.PREAMBLE.size: hend], data[hend:]


def seal(pre: bytearray, head: bytes, body: bytes) -> bytes:
    """Recompute lengths and the header checksum around edited sections."""
    magic, major, minor, _, _, _ = fmt.PREAMBLE.unpack_from(bytes(pre))
    return fmt.PREAMBLE.pack(magic, major, minor, len(head), len(body), hashlib.sha256(head).digest()) + head + body


def with_header(data: bytes, edit) -> bytes:
    """Apply edit(header dict) and re-seal, so only deeper checks can catch it."""
    pre, head, body = split(data)
    header = msgpack.unpackb(head, raw=False)
    edit(header)
    return seal(pre, msgpack.packb(header, use_bin_type=True), body)


def with_raw_body(data: bytes, edit_raw) -> bytes:
    """Replace the decompressed body bytes, re-compress and re-seal everything."""
    pre, head, body = split(data)
    raw = zstandard.ZstdDecompressor().decompress(body)
    raw = edit_raw(raw)
    new = zstandard.ZstdCompressor(level=3).compress(raw)
    header = msgpack.unpackb(head, raw=False)
    header["body"]["raw_size"] = len(raw)
    header["body"]["sha256"] = hashlib.sha256(new).hexdigest()
    return seal(pre, msgpack.packb(header, use_bin_type=True), new)


def with_version(data: bytes, major: int, minor: int) -> bytes:
    pre = bytearray(data)
    struct.pack_into("<HH", pre, 8, major, minor)
    return bytes(pre)


def small_valid() -> bytes:
    """The shipped (2,2) table, rewritten: needs no compiled core (test_without_core.py)."""
    from ctmtab.tables import load

    return Table.from_tally(load("1d-n2-m2-t6").to_tally(), command="test", builder="tests").to_bytes()


def no_halting(mode: str = "exhaustive", space=Space(1, 2, 2), cap=6) -> bytes:
    """A well-formed table in which no run halted (sampled: none of its 1000 samples)."""
    extra = dict(mode="sampled", samples=1000, seed=1, moments={}, streams=[(1, 1000)], weight=1000) \
        if mode == "sampled" else {}
    size = 1000 if mode == "sampled" else space.size
    tally = Tally(space=space, cap=cap, groups={}, halting=0, non_halting=0, undecided=size, halting_nodes=0,
                  steps_hist=[], length_hist=[], longest_run=0, most_nonblank=0, steps=0, deciders=(), **extra)
    tally.check()
    return Table.from_tally(tally, command="test", builder="tests").to_bytes()


def with_zero_body(data: bytes, zeros: int, declared: int | None = None) -> bytes:
    """A decompression bomb: the body replaced by `zeros` zero bytes (a few KiB compressed),
    declared as `declared` raw bytes (default: honestly), every checksum re-sealed."""
    comp = zstandard.ZstdCompressor(level=3)
    chunks = comp.compressobj(size=zeros)
    block, left, parts = bytes(min(zeros, 1 << 24)), zeros, []
    while left:
        parts.append(chunks.compress(block[: min(left, len(block))]))
        left -= min(left, len(block))
    parts.append(chunks.flush())
    new = b"".join(parts)
    pre, head, _ = split(data)
    header = msgpack.unpackb(head, raw=False)
    header["body"]["raw_size"] = zeros if declared is None else declared
    header["body"]["sha256"] = hashlib.sha256(new).hexdigest()
    return seal(pre, msgpack.packb(header, use_bin_type=True), new)


def small_2d() -> bytes:
    """The shipped 2D (2,2) table, rewritten (no compiled core needed)."""
    from ctmtab.tables import load

    return Table.from_tally(load("2d-n2-m2-t2000").to_tally(), command="test", builder="tests").to_bytes()


def load_or_refuse(data: bytes):
    """The table a damaged file loads as, or None where the reader refuses it with a TableError
    (the only failure allowed); format warnings are silenced."""
    from ctmtab.errors import TableError
    from ctmtab.tables import loads
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            return loads(data)
    except TableError:
        return None
