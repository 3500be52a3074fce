"""Mutated files: every one loads correctly or raises TableError, never anything else."""

import msgpack
import pytest
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


def _raw_byte_mutations(ops):
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


def _fuzz(body, examples, *strategies):
    return settings(max_examples=examples, deadline=None, suppress_health_check=list(HealthCheck),
                    derandomize=True)(given(*strategies)(body))


# Each fuzz runs short in README's test command and at length (the counts of old) in the slow
# lane of .ci/run: about 40, 10 and 8 s.
test_raw_byte_mutations = _fuzz(_raw_byte_mutations, 300, st.lists(mutation, min_size=1, max_size=4))
test_raw_byte_mutations_at_length = pytest.mark.ci_slow(
    _fuzz(_raw_byte_mutations, 7000, st.lists(mutation, min_size=1, max_size=4)))


def _resealed_body_mutations(pos, val):
    """Checksums re-computed after the edit, so only the deeper validation can catch it."""

    def edit(raw):
        b = bytearray(raw)
        b[pos % len(b)] ^= val
        return bytes(b)

    _must_load_or_refuse(with_raw_body(VALID, edit))


values = st.one_of(st.none(), st.booleans(), st.integers(-2**63, 2**64 - 1), st.text(max_size=5),
                   st.binary(max_size=8), st.lists(st.integers(0, 3), max_size=3),
                   st.dictionaries(st.text(max_size=3), st.integers(-2**63, 2**64 - 1), max_size=2))


def _resealed_header_field_replacements(key, value):
    _must_load_or_refuse(with_header(VALID, lambda h: h.update({key: value})))


test_resealed_body_mutations = _fuzz(_resealed_body_mutations, 500, st.integers(0, 10**6), st.integers(1, 255))
test_resealed_body_mutations_at_length = pytest.mark.ci_slow(
    _fuzz(_resealed_body_mutations, 2000, st.integers(0, 10**6), st.integers(1, 255)))
test_resealed_header_field_replacements = _fuzz(_resealed_header_field_replacements, 400,
                                                st.sampled_from(sorted(HEADER)), values)
test_resealed_header_field_replacements_at_length = pytest.mark.ci_slow(
    _fuzz(_resealed_header_field_replacements, 1500, st.sampled_from(sorted(HEADER)), values))
