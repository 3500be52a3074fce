"""Mutated files: every one loads correctly or raises TableError, never anything else."""

import msgpack
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from hostile import load_or_refuse, sections, small_valid, with_header, with_raw_body

VALID = small_valid()
HEND, BEND = sections(VALID)
HEADER = msgpack.unpackb(VALID[56:HEND], raw=False)


def _must_load_or_refuse(data: bytes) -> None:
    t = load_or_refuse(data)
    if t is None:
        return
    # what loads must be self-consistent
    assert t.total == t.blanks * t.halting or t.mode != "exhaustive"


mutation = st.one_of(
    st.tuples(st.just("flip"), st.integers(0, len(VALID) - 1), st.integers(1, 255)),
    st.tuples(st.just("cut"), st.integers(0, len(VALID)), st.just(0)),
    st.tuples(st.just("insert"), st.integers(0, len(VALID)), st.integers(0, 255)),
)


@settings(max_examples=7000, deadline=None, suppress_health_check=list(HealthCheck), derandomize=True)
@given(st.lists(mutation, min_size=1, max_size=4))
def test_raw_byte_mutations(ops):
    data = bytearray(VALID)
    for op, pos, val in ops:
        pos = min(pos, len(data))
        if op == "flip" and pos < len(data):
            data[pos] ^= val
        elif op == "cut":
            del data[pos:]
        elif op == "insert":
            data[pos:pos] = bytes([val])
    _must_load_or_refuse(bytes(data))


@settings(max_examples=2000, deadline=None, suppress_health_check=list(HealthCheck), derandomize=True)
@given(st.integers(0, 10**6), st.integers(1, 255))
def test_resealed_body_mutations(pos, val):
    """Checksums re-computed after the edit, so only the deeper validation can catch it."""

    def edit(raw):
        b = bytearray(raw)
        b[pos % len(b)] ^= val
        return bytes(b)

    _must_load_or_refuse(with_raw_body(VALID, edit))


values = st.one_of(st.none(), st.booleans(), st.integers(-2**63, 2**64 - 1), st.text(max_size=5),
                   st.binary(max_size=8), st.lists(st.integers(0, 3), max_size=3),
                   st.dictionaries(st.text(max_size=3), st.integers(-2**63, 2**64 - 1), max_size=2))


@settings(max_examples=1500, deadline=None, suppress_health_check=list(HealthCheck), derandomize=True)
@given(st.sampled_from(sorted(HEADER)), values)
def test_resealed_header_field_replacements(key, value):
    _must_load_or_refuse(with_header(VALID, lambda h: h.update({key: value})))
