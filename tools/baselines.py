"""Baselines that need no table: compressed length and block Shannon entropy, in bits."""
from __future__ import annotations

import bz2
import lzma
import math
import zlib
from collections import Counter


from ..tables import keys

CODECS = {
    "zlib": lambda b: zlib.compress(b, 9),
    "lzma": lambda b: lzma.compress(b, preset=9 | lzma.PRESET_EXTREME),
    "bz2": lambda b: bz2.compress(b, 9),
}


def _bytes(x) -> bytes:
    """One byte per symbol, row-major. Text is key text (tables/keys.py), dotted over 10 symbols."""
    return keys.as_symbols(keys.data_array(x, None), 256, "the data").reshape(-1).tobytes()


def compressed_bits(x, codec: str = "zlib") -> float:
    """8 x the compressed length of the symbols, one byte each (2D: row-major)."""
    return 8.0 * len(CODECS[codec](_bytes(x)))


def block_entropy(x, block: int = 1) -> float:
    """Shannon entropy of the non-overlapping length-`block` blocks, times their number."""
    data = _bytes(x)
    blocks = [data[i: i + block] for i in range(0, len(data) - block + 1, block)]
    if not blocks:
        return 0.0
    counts = Counter(blocks)
    n = len(blocks)
    return -n * sum(c / n * math.log2(c / n) for c in counts.values())
