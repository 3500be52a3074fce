"""Where each sampled work unit draws its machines, and whether two units ever draw the same.

A unit's generator (ctm_core.c: ctm_unit_init, next_rand) starts at r0 = mix(U + golden) | 1, U
its unit seed (enumerator/driver.py unit_seed), and every draw first steps r by the xorshift64 map T (shifts
12, 25, 27); a unit of c machines of a space with e table entries draws c·e times, so it uses
the states T^1 r0 .. T^(c·e) r0. Distinct seeds do not keep these apart: mix is a bijection, so
a seed can be chosen whose units start where another seed's units are.

T is linear over GF(2) with a primitive minimal polynomial p (checked when the tables are
made), so the nonzero states form one cycle of 2^64 - 1, and the place of a state on it is a
discrete logarithm in GF(2)[x]/(p): Pohlig-Hellman over 2^64 - 1 = 3·5·17·257·641·65537·6700417,
vectorised over the units with numpy uint64. Two units overlap when one starts within the
other's draws; sorted by place, only neighbours need comparing."""
from __future__ import annotations

import functools

import numpy as np

from ..errors import InvariantError, TooLargeError

SAMPLE_UNIT = 25_000  # samples per work unit: the result never depends on the worker count

U64 = np.uint64
MASK = (1 << 64) - 1
GOLDEN = 0x9E3779B97F4A7C15
ORDER = MASK  # states on the cycle
PRIMES = (3, 5, 17, 257, 641, 65537, 6700417)  # 2^64 - 1 (Fermat numbers F0..F5; F5 = 641 x 6700417)
BABY = 1 << 20  # baby steps of the largest prime's logarithm: 7 giant steps
MAX_UNITS = 1 << 24  # units checked at once: about 4 minutes and 1 GiB (4 x 10^11 samples)


def _step(x: int) -> int:
    """One xorshift64 step, as next_rand does before it multiplies."""
    x ^= x >> 12
    x ^= (x << 25) & MASK
    return x ^ (x >> 27)


# ---- GF(2) linear maps and GF(2^64) = GF(2)[x]/(p), setup in Python ints

def _clmul(a: int, b: int) -> int:
    out = 0
    while b:
        low = b & -b
        out ^= a * low
        b ^= low
    return out


def _mod(a: int, p: int) -> int:
    while a.bit_length() > 64:
        a ^= p << (a.bit_length() - 65)
    return a


def _mulmod(a: int, b: int, p: int) -> int:
    return _mod(_clmul(a, b), p)


def _powmod(a: int, e: int, p: int) -> int:
    out = 1
    while e:
        if e & 1:
            out = _mulmod(out, a, p)
        a = _mulmod(a, a, p)
        e >>= 1
    return out


def _tables(images) -> np.ndarray:
    """8 x 256 byte tables of the linear map whose image of bit b is images[b]."""
    tab = np.zeros((8, 256), dtype=U64)
    for j in range(8):
        row = [0] * 256
        for v in range(1, 256):
            row[v] = row[v & (v - 1)] ^ images[8 * j + (v & -v).bit_length() - 1]
        tab[j] = row
    return tab


def _apply(tab: np.ndarray, a: np.ndarray) -> np.ndarray:
    out = tab[0][(a & U64(255)).astype(np.intp)]
    for j in range(1, 8):
        out ^= tab[j][((a >> U64(8 * j)) & U64(255)).astype(np.intp)]
    return out


@functools.lru_cache(maxsize=1)
def _field():
    """p, the coordinates of a state in the Krylov basis T^i(1) (so that state T^k(1) has
    coordinates x^k mod p), the reduction of x^64.., and the Frobenius maps f -> f^(2^k)."""
    krylov = [1]
    for _ in range(64):
        krylov.append(_step(krylov[-1]))
    pivots: dict = {}  # leading bit -> (vector, combination of basis indices)

    def reduce(v: int, combo: int):
        while v:
            top = v.bit_length() - 1
            if top not in pivots:
                return v, combo
            pv, pc = pivots[top]
            v, combo = v ^ pv, combo ^ pc
        return 0, combo

    for i in range(64):
        v, combo = reduce(krylov[i], 1 << i)
        if not v:
            raise InvariantError("the generator's Krylov basis is singular (a bug)")
        pivots[v.bit_length() - 1] = (v, combo)
    p = (1 << 64) | reduce(krylov[64], 0)[1]
    # p primitive: x has order exactly 2^64 - 1, so T walks one cycle through every nonzero state
    if _powmod(2, ORDER, p) != 1 or any(_powmod(2, ORDER // q, p) == 1 for q in PRIMES):
        raise InvariantError("the generator's polynomial is not primitive (a bug)")
    coords = _tables([reduce(1 << b, 0)[1] for b in range(64)])
    fold = _tables([_mod(1 << (64 + b), p) for b in range(64)])
    frob = {k: _tables([_powmod(1 << b, 1 << k, p) for b in range(64)]) for k in (1, 2, 4, 8, 16, 32)}
    return p, coords, fold, frob


def _mul(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Products in GF(2^64) of two uint64 arrays: a carry-less product bit by bit of b (masks,
    no gathers: cache-friendly), then x^64 and above folded back by its table."""
    n = a.size
    lo, hi = np.zeros(n, dtype=U64), np.zeros(n, dtype=U64)
    mask, part = np.empty(n, dtype=U64), np.empty(n, dtype=U64)
    for i in range(64):
        np.right_shift(b, U64(i), out=mask)
        mask &= U64(1)
        np.negative(mask, out=mask)  # all ones where bit i of b is set
        np.left_shift(a, U64(i), out=part)
        part &= mask
        lo ^= part
        if i:
            np.right_shift(a, U64(64 - i), out=part)
            part &= mask
            hi ^= part
    return lo ^ _apply(_field()[2], hi)


@functools.lru_cache(maxsize=64)
def _times_table(c: int) -> np.ndarray:
    p = _field()[0]
    return _tables([_mulmod(1 << b, c, p) for b in range(64)])


def _times(a: np.ndarray, c: int) -> np.ndarray:
    """a times the constant c: a linear map, by its byte tables."""
    return _apply(_times_table(c), a)


def _power(a: np.ndarray, e: int) -> np.ndarray:
    """a^e for a small e: squarings by the Frobenius table, products where e has a bit."""
    frob = _field()[3][1]
    out = None
    for bit in bin(e)[2:]:
        out = None if out is None else _apply(frob, out)
        if bit == "1":
            out = a.copy() if out is None else _mul(out, a)
    return out


def _fermat(a: np.ndarray, i: int) -> np.ndarray:
    """a^(2^(2^i) + 1) = a^(2^(2^i)) x a: one product."""
    return _mul(_apply(_field()[3][1 << i], a), a)


@functools.lru_cache(maxsize=None)
def _powers(q: int, count: int):
    """g^0 .. g^(count-1) for g = x^((2^64 - 1) / q), sorted, with their exponents."""
    p = _field()[0]
    g = _powmod(2, ORDER // q, p)
    table = np.ones(1, dtype=U64)
    while len(table) < count:
        table = np.concatenate([table, _times(table, _powmod(g, len(table), p))])
    table = table[:count]
    order = np.argsort(table, kind="stable")
    return table[order], order.astype(np.int64)


def _subgroup_log(h: np.ndarray, q: int) -> np.ndarray:
    """d in [0, q) with g^d = h, g = x^((2^64 - 1) / q); baby steps and giant steps."""
    m = min(q, BABY)
    baby, exps = _powers(q, m)
    p = _field()[0]
    back = _powmod(_powmod(2, ORDER // q, p), q - m % q, p)  # g^-m
    out = np.full(h.size, -1, dtype=np.int64)
    cur = h.copy()
    for giant in range(-(-q // m)):
        at = np.minimum(np.searchsorted(baby, cur), m - 1)
        hit = (baby[at] == cur) & (out < 0)
        out[hit] = giant * m + exps[at[hit]]
        if (out >= 0).all():
            return out
        cur = _times(cur, back)
    raise InvariantError("a discrete logarithm was not found: the generator's group is not what it should be (a bug)")


CHUNK = 1 << 16  # states per pass: the work arrays stay in the cache


def places(states: np.ndarray) -> np.ndarray:
    """The place k of each nonzero generator state on T's cycle: state = T^k(1), 0 <= k < 2^64 - 1."""
    states = np.ascontiguousarray(states, dtype=U64).reshape(-1)
    if states.size and not states.all():
        raise InvariantError("a generator state of 0 has no place on the cycle (a bug)")
    return np.concatenate([_places(states[i: i + CHUNK]) for i in range(0, states.size, CHUNK)] or
                          [np.zeros(0, dtype=U64)])


def _places(states: np.ndarray) -> np.ndarray:
    f = _apply(_field()[1], states)
    head = f  # f^(F0 F1 F2) and f^(F3 F4 F5), shared by the exponents N / q
    for i in (0, 1, 2):
        head = _fermat(head, i)
    tail = f
    for i in (3, 4, 5):
        tail = _fermat(tail, i)
    h = {}
    for q, i in zip((3, 5, 17), (0, 1, 2)):  # N / F_i: every Fermat factor but F_i
        x = tail
        for k in (0, 1, 2):
            x = _fermat(x, k) if k != i else x
        h[q] = x
    for q, i in zip((257, 65537), (3, 4)):
        x = head
        for k in (3, 4, 5):
            x = _fermat(x, k) if k != i else x
        h[q] = x
    y = _fermat(_fermat(head, 3), 4)  # N / F5: its order divides 641 x 6700417
    h[641], h[6700417] = _power(y, 6700417), _power(y, 641)
    # Garner: fold the residues into one number below 2^64 - 1, all in uint64
    x, modulus = np.zeros(states.size, dtype=U64), 1
    for q in PRIMES:
        d = _subgroup_log(h[q], q).astype(U64)
        t = ((d + U64(q) - x % U64(q)) % U64(q)) * U64(pow(modulus, -1, q)) % U64(q)
        x = x + t * U64(modulus)
        modulus *= q
    return x


def mix64(z: np.ndarray) -> np.ndarray:
    """The splitmix64 output function on uint64 arrays (enumerator/driver.py _mix64)."""
    z = (z ^ (z >> U64(30))) * U64(0xBF58476D1CE4E5B9)
    z = (z ^ (z >> U64(27))) * U64(0x94D049BB133111EB)
    return z ^ (z >> U64(31))


def unit_starts(seed: int, units: int) -> np.ndarray:
    """The generator's first state r0 of units 0..units-1 of a seed (enumerator/driver.py unit_seed, then
    ctm_unit_init): mix(mix(mix(seed) + (k + 1) golden) + golden) | 1."""
    k = np.arange(1, units + 1, dtype=U64)
    unit = mix64(mix64(np.array([seed], dtype=U64)) + k * U64(GOLDEN))
    unit[unit == 0] = 1  # enumerator/driver.py unit_seed's `or 1`
    return mix64(unit + U64(GOLDEN)) | U64(1)


def first_overlap(streams, entries: int, unit: int):
    """streams: (label, seed, size) of every stream; entries: table entries n x m (draws per
    machine); unit: samples per work unit. Two units whose draws share a state, as
    ((stream number, seed, unit index), (stream number, seed, unit index)), the earliest such
    pair in stream and unit order; None when every unit is disjoint from every other."""
    total = sum(-(-size // unit) for _, _, size in streams)
    if total > MAX_UNITS:
        raise TooLargeError(f"the streams hold {total:,} work units, more than the {MAX_UNITS:,} whose overlap "
                            "can be checked here; merge or extend smaller tables")
    if not streams:
        return None
    starts, lengths, owner, index = [], [], [], []
    for i, (_, seed, size) in enumerate(streams):
        k = -(-size // unit)
        starts.append(unit_starts(seed, k))
        count = np.full(k, unit, dtype=U64)
        count[-1] = size - unit * (k - 1)
        lengths.append(count * U64(entries))
        owner.append(np.full(k, i, dtype=np.int64))
        index.append(np.arange(k, dtype=np.int64))
    place = places(np.concatenate(starts))
    lengths, owner, index = np.concatenate(lengths), np.concatenate(owner), np.concatenate(index)
    order = np.argsort(place, kind="stable")
    place, lengths, owner, index = place[order], lengths[order], owner[order], index[order]
    # unit a uses places a+1 .. a+L: the next start must lie past them (and around the cycle)
    bad = [(j, j + 1) for j in np.flatnonzero(np.diff(place) < lengths[:-1]).tolist()]
    if len(place) > 1 and ORDER - int(place[-1]) + int(place[0]) < int(lengths[-1]):
        bad.append((len(place) - 1, 0))
    if not bad:
        return None

    def unit_of(j):
        return int(owner[j]), streams[owner[j]][1], int(index[j])

    return min(tuple(sorted((unit_of(a), unit_of(b)))) for a, b in bad)
