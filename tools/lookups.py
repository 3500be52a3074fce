"""Batch lookups for the CLI: keys from the command line and from a file or stdin, each parsed
once and looked up with one vectorised Table.lookup per shape."""
from __future__ import annotations

import math
import sys
import warnings

import numpy as np

from ..errors import CtmtabError, MissingKeyError, RareKeyWarning
from ..tables import sampled


def read_keys(source: str) -> list[tuple[str, str]]:
    """(where, key text) of every non-blank line of a file, or of stdin for "-"; surrounding
    spaces and a Windows line end are dropped."""
    name = "stdin" if source == "-" else source
    try:
        if source == "-":
            text = sys.stdin.buffer.read().decode("utf-8-sig")
        else:
            with open(source, "rb") as f:
                text = f.read().decode("utf-8-sig")
    except FileNotFoundError:
        raise CtmtabError(f"no keys file {source}; check the path, or give - to read the keys from stdin") from None
    except IsADirectoryError:
        raise CtmtabError(f"--keys-from {source} is a folder; give a file of keys, one a line") from None
    except UnicodeDecodeError as exc:
        raise CtmtabError(f"{name} is not UTF-8 text (byte 0x{exc.object[exc.start]:02x} at offset "
                          f"{exc.start}); give keys such as 0110, one a line") from None
    return [(f"{name} line {i}", line.strip()) for i, line in enumerate(text.splitlines(), 1) if line.strip()]


def look_up(t, typed: list[tuple[str, str]], missing: str) -> tuple[list[dict], list[tuple[str, float]]]:
    """One row per key, in the order given, and the (key, samples) of keys seen in fewer than
    t.min_seen samples. typed: (where, key text); where is None for a key on the command line."""
    shapes, texts, sizes = _parse_all(t, typed)
    n = len(typed)
    count, ctm, low, high = (np.full(n, np.nan) for _ in range(4))
    error, seen = np.full(n, np.nan), np.full(n, np.nan)
    dropped = np.zeros(n, dtype=bool)
    t.require_halting()
    for shape, (idx, rows) in shapes.items():
        if t.dropped(shape):  # cut from the table: a bound, never a value
            dropped[idx] = True
            low[idx], high[idx] = t.dropped_bound(shape), math.inf
            continue
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RareKeyWarning)  # reported per key below
            out = t.lookup(rows.reshape((len(rows),) + shape), missing="nan")
        count[idx], ctm[idx] = out["count"], out["ctm"]
        if t.mode == "sampled":
            error[idx] = out["standard_error"]
            moments = sampled.moments_of(t, shape, rows)
            with np.errstate(divide="ignore", invalid="ignore"):
                seen[idx] = np.where(out["count"] > 0, sampled.seen_of(out["count"], moments), 0.0)
                lo, hi = sampled.interval95(out["count"] / t.total, out["standard_error"])
            never = out["count"] == 0
            lo[never], hi[never] = sampled.unseen_bound(t), math.inf
            low[idx], high[idx] = lo, hi
        else:
            low[idx], high[idx] = out["ctm_low"], out["ctm_high"]
    absent = (count == 0) & ~dropped
    if absent.any() and missing == "raise":
        i = int(np.flatnonzero(absent)[0])
        where = f"{typed[i][0]}: " if typed[i][0] else ""
        never = "seen in this sample" if t.mode == "sampled" else "produced by this table"
        raise MissingKeyError(f"{where}key {texts[i]} was never {never} ({t.space.label}, cap {t.cap}); "
                              "give --missing nan (a row of NaN) or --missing fallback to go on past such keys")
    if absent.any() and missing == "fallback":
        ctm[absent] = t.fallback()
    rows, rare = [], []
    settle = t.settle_size
    for i, key in enumerate(texts):
        if dropped[i]:
            rows.append({"key": key, "table": t.source, "dropped": True, "count": None, "probability": None,
                         "ctm": None, "ctm_low": float(low[i]), "ctm_high": math.inf, "interval_width": math.inf})
            continue
        c = int(count[i])
        row = {"key": key, "table": t.source, "count": c, "probability": c / t.total, "ctm": float(ctm[i]),
               "ctm_low": float(low[i]), "ctm_high": float(high[i]),
               "interval_width": math.inf if math.isinf(high[i]) else float(high[i] - low[i])}
        if t.mode == "sampled":
            row["standard_error"] = float(error[i])
            row["rare"] = bool(c > 0 and seen[i] < t.min_seen)
            if row["rare"]:
                rare.append((key, float(seen[i])))
        elif settle is not None:  # its interval bounds the unbounded-time value with every run settled
            row["settled"] = bool(sizes[i] <= settle)
        rows.append(row)
    return rows, rare


def _parse_all(t, typed):
    """shape -> (indices, N x cells uint8 rows), the key texts in the one spelling, and each key's
    size. Plain digit keys (up to 10 symbols) are read by numpy, one pass per length; any other
    text goes through Table.parse_key, once, which also words every refusal."""
    m, dims = t.space.symbols, t.space.dims
    by_length: dict = {}
    slow = []
    for i, (_, key) in enumerate(typed):
        if m <= 10 and key.isascii() and key.isdigit() or (dims == 2 and m <= 10 and key.isascii()
                                                           and key.replace("/", "").isdigit()):
            by_length.setdefault((len(key), key.find("/")), []).append(i)
        else:
            slow.append(i)
    parts: dict = {}  # shape -> [(indices, rows)]
    texts: list = [None] * len(typed)
    for (length, bar), idx in by_length.items():
        got = _digits(np.frombuffer("".join(typed[i][1] for i in idx).encode("ascii"), dtype=np.uint8)
                      .reshape(len(idx), length), bar, m, dims)
        if got is None:  # a digit outside the alphabet, rows of unequal length: worded by parse_key
            slow += idx
            continue
        shape, rows = got
        parts.setdefault(shape, []).append((np.asarray(idx), rows))
        for i in idx:
            texts[i] = typed[i][1]  # digits (and '/') are already the one spelling
    for i in sorted(slow):
        where, key = typed[i]
        try:
            shape, cells = t.parse_key(key)
        except CtmtabError as exc:
            raise type(exc)(f"{where}: {exc}" if where else str(exc)) from None
        parts.setdefault(shape, []).append((np.array([i]), cells[None, :]))
        texts[i] = t.key_text(shape, cells)  # the one spelling, as export writes it
    sizes = np.zeros(len(typed), dtype=np.int64)
    shapes = {}
    for shape, chunks in parts.items():
        idx = np.concatenate([c[0] for c in chunks])
        shapes[shape] = (idx, np.concatenate([c[1] for c in chunks]))
        sizes[idx] = max(shape)
    return shapes, texts, sizes


def _digits(raw: np.ndarray, bar: int, m: int, dims: int):
    """(shape, rows) of N keys of one length written in digits, rows of a 2D key joined by '/'
    (bar: where the first '/' is, -1 for none); None where any of them is not a key of m symbols."""
    length = raw.shape[1]
    width = length if bar < 0 else bar
    if dims == 1 and bar >= 0 or width == 0 or (length + 1) % (width + 1):
        return None
    cols = np.arange(length)
    sep = (cols % (width + 1)) == width
    cells = raw[:, ~sep]
    if not (raw[:, sep] == ord("/")).all() or cells.min() < ord("0") or cells.max() >= ord("0") + m:
        return None
    shape = (length,) if dims == 1 else ((length + 1) // (width + 1), width)
    return shape, cells - ord("0")
