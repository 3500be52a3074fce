"""The table file: round trips, determinism, exactness, and every hostile file."""
import msgpack
import numpy as np
import pytest

from ctmtab.enumerator import Space
from ctmtab.errors import (BadMagicError, ChecksumError, InconsistentTableError, SizeLimitError,
                           TableError, TruncatedError, VersionError)
from ctmtab.tables import Table, load, loads, problems
from ctmtab.tables import format as fmt
from ctmtab.tables.format import NewerMinorWarning

from conftest import exact_table
from hostile import (hand_tally, sections, small_valid, with_header, with_raw_body, with_version)


@pytest.mark.core  # builds with exact_table
def test_round_trip_keeps_every_count():
    tally = exact_table(3, 2, 21)
    t = loads(Table.from_tally(tally).to_bytes())
    assert dict(t.items()) == {"".join(map(str, k)): c for g in tally.groups.values() for k, c in g.items()}
    assert (t.halting, t.non_halting, t.undecided, t.space_size) == (
        tally.halting, tally.non_halting, tally.undecided, Space(1, 3, 2).size)
    assert t.steps_hist == tally.steps_hist and t.length_hist == tally.length_hist
    assert problems(t) == []


@pytest.mark.core  # builds with exact_table
def test_same_build_gives_byte_identical_body():
    a = Table.from_tally(exact_table(3, 2, 21), notes="first").to_bytes()
    b = Table.from_tally(exact_table(3, 2, 21, 2), notes="second, split build").to_bytes()
    assert a[sections(a)[0]:] == b[sections(b)[0]:]


def test_counts_beyond_64_bits_and_keys_beyond_64_bit_codes_stay_exact():
    big = 3 * 2**70 + 12345
    long_key = bytes([0, 1] * 40)  # 80 binary symbols: 2^80 codes do not fit 64 bits
    groups = {(1,): {b"\x00": big, b"\x01": big}, (80,): {long_key: 2, long_key[::-1]: 2}}
    tally = hand_tally(groups, space=Space(1, 8, 2), cap=200)
    t = loads(Table.from_tally(tally).to_bytes())
    assert t.count("0") == big
    assert t.count(long_key) == 2 and t.count(long_key[::-1]) == 2
    assert t.groups[(80,)].symbols is not None
    assert t.total == 2 * big + 4


@pytest.mark.core  # builds with exact_table
def test_write_is_atomic(tmp_path, monkeypatch):
    path = tmp_path / "t.ctmt"
    Table.from_tally(exact_table(2, 2, 6)).save(path)
    before = path.read_bytes()

    def fail(*a, **k):
        raise OSError("disk full")

    import ctmtab.fsutil
    monkeypatch.setattr(ctmtab.fsutil.os, "fsync", fail)
    with pytest.raises(OSError):
        Table.from_tally(exact_table(3, 2, 21)).save(path)
    assert path.read_bytes() == before
    assert [p.name for p in tmp_path.iterdir()] == ["t.ctmt"]  # no temporary left behind


def test_wrong_magic():
    with pytest.raises(BadMagicError, match="wrong magic"):
        loads(b"PK\x03\x04" + small_valid()[4:])


@pytest.mark.parametrize("where", ["magic", "preamble", "header", "body"])
def test_truncation_at_every_section(where):
    data = small_valid()
    hend, bend = sections(data)
    cuts = {"magic": [0, 3, 7], "preamble": [8, 20, fmt.PREAMBLE.size - 1],
            "header": [fmt.PREAMBLE.size, fmt.PREAMBLE.size + 1, hend - 1],
            "body": [hend, hend + 1, bend - 1]}[where]
    for cut in cuts:
        with pytest.raises(TruncatedError, match="ends inside|incomplete"):
            loads(data[:cut])


def test_trailing_bytes_are_refused():
    with pytest.raises(TableError, match="trail"):
        loads(small_valid() + b"\x00")


def test_flipped_byte_in_header_and_in_body():
    data = bytearray(small_valid())
    hend, bend = sections(bytes(data))
    h = bytearray(data)
    h[fmt.PREAMBLE.size + 5] ^= 0x40
    with pytest.raises(ChecksumError, match="header checksum"):
        loads(bytes(h))
    b = bytearray(data)
    b[(hend + bend) // 2] ^= 0x01
    with pytest.raises(ChecksumError, match="body checksum"):
        loads(bytes(b))


def test_unknown_major_version_is_refused():
    with pytest.raises(VersionError, match="upgrade ctmtab"):
        loads(with_version(small_valid(), fmt.MAJOR + 1, 0))


@pytest.mark.core  # builds with exact_table
def test_newer_minor_version_loads_with_a_warning():
    data = with_header(with_version(small_valid(), fmt.MAJOR, fmt.MINOR + 3),
                       lambda h: h.update(future_field={"x": 1}))
    with pytest.warns(NewerMinorWarning):
        t = loads(data)
    assert t.count("0") == exact_table(2, 2, 6).count(b"\x00")


def test_oversized_declared_header():
    data = bytearray(small_valid())
    fmt.struct.pack_into("<I", data, 12, fmt.MAX_HEADER + 1)
    with pytest.raises(SizeLimitError, match="header declares"):
        loads(bytes(data))


def test_oversized_declared_body():
    data = with_header(small_valid(), lambda h: h["body"].update(raw_size=fmt.MAX_BODY + 1))
    with pytest.raises(SizeLimitError, match="decompressed"):
        loads(data)


def test_decompression_bomb_is_stopped_at_the_declared_size():
    # 64 MiB of zeros compress to a few KiB
    bomb = with_raw_body(small_valid(), lambda raw: raw + bytes(64 << 20))
    # an honest header declares 64 MiB: refused under a 1 MiB limit, before decompressing
    with pytest.raises(SizeLimitError, match="decompressed"):
        loads(bomb, max_body=1 << 20)
    # a header that under-declares: the reader stops one byte past the declared size
    lying = with_header(bomb, lambda h: h["body"].update(raw_size=1000))
    with pytest.raises(InconsistentTableError, match="not the declared"):
        loads(lying)


@pytest.mark.parametrize("edit,fragment", [
    # the totals no longer add up to the units' weight: caught before the body is read
    (lambda h: h["totals"].update(halting=str(int(h["totals"]["halting"]) + 1)), "not the weight"),
    (lambda h: h["keys"].update(distinct=h["keys"]["distinct"] + 1), "key summary"),
    (lambda h: h["totals"].update(undecided="many"), "not a whole number"),
    (lambda h: h.update(space={"dims": 1, "states": 2, "symbols": 1}), "malformed"),
    (lambda h: h.update(cap=0), "cap or mode"),
])
def test_metadata_that_contradicts_the_body(edit, fragment):
    with pytest.raises(InconsistentTableError, match=fragment):
        loads(with_header(small_valid(), edit))


def test_unsorted_or_out_of_range_keys_in_the_body():
    def swap_codes(raw):
        body = msgpack.unpackb(raw, raw=False)
        g = body["groups"][1]
        codes = np.frombuffer(g["keys"]["data"], dtype="<u8")[::-1].copy()
        g["keys"]["data"] = codes.tobytes()
        return msgpack.packb(body, use_bin_type=True)

    with pytest.raises(InconsistentTableError, match="not sorted"):
        loads(with_raw_body(small_valid(), swap_codes))


def test_pickle_is_never_used():
    import importlib
    from pathlib import Path
    folder = Path(importlib.import_module("ctmtab.tables.format").__file__).parent
    for source in folder.glob("*.py"):
        text = source.read_text()
        assert "pickle" not in text and "allow_pickle=True" not in text, source


@pytest.mark.ci_slow  # heavy: the slow lane of .ci/run
@pytest.mark.core  # builds with exact_table
def test_shipped_tables_load_by_name_and_verify():
    from ctmtab.tables import shipped
    names = shipped()
    assert {"1d-n1-m2-t1", "1d-n2-m2-t6", "1d-n3-m2-t21", "1d-n4-m2-t107", "1d-n2-m3-t38",
            "1d-n5-m2-t500", "2d-n1-m2-t2000", "2d-n2-m2-t2000", "2d-n3-m2-t2000",
            "2d-n4-m2-t2000", "1d-n6-m2-t1000-upto18", "2d-n5-m2-t100-upto4"} <= set(names)
    for name in names:
        assert problems(load(name)) == [], name
    t = load("1d-n4-m2-t107")
    assert t.distinct == exact_table(4, 2, 107).distinct()
    assert dict(t.items()) == {"".join(map(str, k)): c for g in exact_table(4, 2, 107).groups.values()
                               for k, c in g.items()}


def _closed(t, images) -> bool:
    """Every key's count equals that of each of its images (images: rows -> rows, one shape)."""
    for shape in t.shapes:
        g = t.groups[shape]
        rows = g.rows(t.space.symbols).reshape(len(g), *shape)
        for img in images(rows):
            for row, c in zip(img, g.counts):
                if t.count(np.ascontiguousarray(row)) != c:
                    return False
    return True


@pytest.mark.core  # builds and samples
def test_header_symmetries_match_the_space_and_the_counts():
    import itertools

    from ctmtab.enumerator import build, sample

    mirror = lambda r: [r[:, ::-1]]  # noqa: E731
    dihedral = lambda r: [np.rot90(r, k, axes=(1, 2)) for k in (1, 2, 3)] + [r[:, ::-1, :]]  # noqa: E731

    def perms(m, every):
        maps = itertools.permutations(range(m)) if every else (
            [b if s == 0 else 0 if s == b else s for s in range(m)] for b in range(m))
        return lambda r: [np.array(p, dtype=np.uint8)[r] for p in maps]

    # (table, expected list, the image maps each named symmetry promises); DEVELOPERS.md
    # "How the search works" and "Sampling": exhaustive searches count mirror/dihedral classes,
    # blank swaps, unused states and (m >= 3) unused symbols once; sampled builds add each
    # output's images instead
    cases = [
        (build(Space(1, 2, 3), 12, budget_hours=None, workers=1),
         ["mirror", "blank-swap", "state-relabelling", "symbol-relabelling"], [mirror, perms(3, True)]),
        (build(Space(2, 2, 2), 20, budget_hours=None, workers=1), ["dihedral", "blank-swap", "state-relabelling"],
         [dihedral, perms(2, False)]),
        (sample(Space(1, 2, 3), 12, 25_000, seed=3, workers=1), ["mirror", "symbol-permutation"],
         [mirror, perms(3, True)]),
        (sample(Space(2, 2, 2), 20, 25_000, seed=3, workers=1), ["dihedral", "symbol-permutation"],
         [dihedral, perms(2, True)]),
        (sample(Space(1, 1, 6), 5, 25_000, seed=3, workers=1), ["mirror", "blank-swap"], [mirror]),
    ]
    for tally, expected, maps in cases:
        t = loads(Table.from_tally(tally).to_bytes())
        assert t.header["symmetries"] == expected, (t.space, t.mode)
        for images in maps:
            assert _closed(t, images), (t.space, t.mode, expected)
