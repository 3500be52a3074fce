"""The Block Decomposition Method over a table's public lookups (DESIGN.md section 7).

BDM(X) = sum over the distinct blocks r of X of CTM(r) + log2(n_r), n_r the number of
times r occurs (Zenil et al., Entropy 20(8):605, 2018). A decomposition is a list of parts,
each a grid of block origins of one block shape; a 1D input is handled as one row, so 1D and 2D
share every step. Many inputs of one shape are scored together: their blocks are coded at once,
counted per input with one sort, and each distinct block is looked up once."""
from __future__ import annotations

import math
import warnings
from dataclasses import dataclass

import numpy as np

from ..errors import CtmtabError, FallbackWarning, MissingKeyError, RareKeyWarning
from ..tables import keys as keytext
from ..tables.dense import DENSE_LOOKUP, dense_keys

# What happens to the cells that do not fill a whole block.
MODES = ("drop", "wrap", "shrink")
# What a block the table never produced does, besides taking the fallback value.
ON_MISSING = ("warn", "error", "ignore")
CODE_BITS = 62  # a block's base-m code, and a code beside an input's index, fit an int64


@dataclass(frozen=True)
class Estimate:
    """BDM of one input and how far to trust it.

    value: BDM in bits. low, high (exhaustive tables): the certified interval, the sum over the
    distinct blocks of each one's certified CTM bounds plus the exact log2(n) terms; it bounds
    the unbounded-runtime BDM. A block that fell back has no table value, only a lower bound, so
    with fallbacks high is infinite and the value (a convention) need not lie inside.
    standard_error (sampled tables): from each distinct block's, se(CTM) = se(p) / (p ln 2),
    added in quadrature as if the blocks' estimates were independent (they come from one sample,
    so this is an approximation); blocks that fell back add none.
    blocks: block occurrences scored; distinct: distinct blocks; fallbacks: occurrences the table
    never produced; rare: occurrences of blocks a sampled table saw in fewer than its min_seen
    samples; dropped_cells: cells no block covers (the boundary mode's leftovers, and the gaps of
    a stride longer than the block)."""

    value: float
    low: float | None
    high: float | None
    standard_error: float | None
    blocks: int
    distinct: int
    fallbacks: int
    rare: int
    dropped_cells: int

    def __float__(self) -> float:
        return self.value


def symbols_from_text(text: str, alphabet: str, what: str = "the data") -> np.ndarray:
    """Text over an alphabet as symbols: its i-th character is symbol i. A character outside it
    is refused, naming its column (1-based)."""
    if text.isascii() and alphabet.isascii():  # one table lookup per byte
        lut = np.full(128, 255, dtype=np.uint8)
        lut[np.frombuffer(alphabet.encode(), dtype=np.uint8)] = np.arange(len(alphabet), dtype=np.uint8)
        out = lut[np.frombuffer(text.encode(), dtype=np.uint8)]
        bad = np.flatnonzero(out == 255)
    else:
        index = {c: i for i, c in enumerate(alphabet)}
        out = np.array([index.get(c, 255) for c in text], dtype=np.uint8)
        bad = np.flatnonzero(out == 255)
    if len(bad):
        col = int(bad[0])
        raise CtmtabError(f"{what} holds {text[col]!r} at column {col + 1}, which is not in the alphabet "
                          f"{alphabet!r}; fix the data or the alphabet")
    return out


def check_alphabet(alphabet: str, m: int) -> str:
    if not isinstance(alphabet, str) or not alphabet:
        raise CtmtabError(f"the alphabet must be a non-empty string of characters, got {alphabet!r}")
    if len(set(alphabet)) != len(alphabet):
        raise CtmtabError(f"the alphabet {alphabet!r} repeats a character; give each symbol's character once")
    if len(alphabet) > m:
        raise CtmtabError(f"the alphabet {alphabet!r} has {len(alphabet)} characters, but the table has "
                          f"{m} symbols; use a table of at least {len(alphabet)} symbols")
    if any(c in "/\n\r" for c in alphabet):
        raise CtmtabError("the alphabet may not hold '/' or a line break: they separate rows")
    return alphabet


def _runs(keys: np.ndarray, size: int | None = None):
    """Sorted distinct values of keys and how often each occurs (size: keys lie in 0..size-1,
    counted in one pass where that array is small)."""
    if size is not None and size <= 1 << 20 and len(keys) >= size >> 4:
        counts = np.bincount(keys, minlength=size)
        distinct = np.flatnonzero(counts)
        return distinct, counts[distinct]
    keys = np.sort(keys, kind="stable")
    if len(keys) == 0:
        return keys, np.zeros(0, dtype=np.int64)
    new = np.empty(len(keys), dtype=bool)
    new[0] = True
    np.not_equal(keys[1:], keys[:-1], out=new[1:])
    starts = np.flatnonzero(new)
    return keys[starts], np.diff(starts, append=len(keys))


def _item(cols: dict, name: str):
    return float(cols[name][0]) if name in cols else None


class _Part:
    """Blocks of one shape at the origins rows x cols of a region (r0, c0, R, C) of the input;
    wrap: cells past the region's edge are read from its start."""

    def __init__(self, block, rows, cols, region, wrap=False):
        self.block, self.rows, self.cols, self.region, self.wrap = block, rows, cols, region, wrap

    def __len__(self):
        return len(self.rows) * len(self.cols)

    def cells(self, width: int) -> np.ndarray:
        """Per cell (i, j) of a block, in row-major order: the flat index in the input of that cell
        of every block, cells x blocks."""
        r0, c0, R, C = self.region
        return np.stack([(((self.rows + i) % R + r0)[:, None] * width + ((self.cols + j) % C + c0)[None, :])
                         .reshape(-1) for i in range(self.block[0]) for j in range(self.block[1])])


def _layout(dims, region, block, stride, mode) -> list:
    """The parts of a decomposition of one region (r0, c0, R, C). 'shrink' scores what full blocks
    leave with smaller blocks: in 1D the rest of the row (by blocks of the same size while it is
    longer than one), in 2D the right strip, the bottom strip and the corner, each tiled."""
    r0, c0, R, C = region
    (br, bc), (sr, sc) = block, stride
    if mode == "wrap":
        return [_Part(block, np.arange(0, R, sr), np.arange(0, C, sc), region, wrap=True)]
    rows, cols = np.arange(0, R - br + 1, sr), np.arange(0, C - bc + 1, sc)
    parts = [_Part(block, rows, cols, region)] if len(rows) and len(cols) else []
    if mode == "drop":
        return parts
    end_r = ((R - br) // sr) * sr + br if R >= br else 0
    end_c = ((C - bc) // sc) * sc + bc if C >= bc else 0
    if dims == 1:
        rest = C - end_c
        if rest:
            sub, step = ((1, rest), (1, rest)) if rest < bc else (block, stride)
            parts += _layout(1, (r0, c0 + end_c, 1, rest), sub, step, "shrink")
        return parts
    for dr, dc, pr, pc in ((0, end_c, end_r, C - end_c), (end_r, 0, R - end_r, end_c),
                           (end_r, end_c, R - end_r, C - end_c)):
        if pr and pc:
            sub = (min(br, pr), min(bc, pc))
            parts += _layout(2, (r0 + dr, c0 + dc, pr, pc), sub, sub, "shrink")
    return parts


class _Geometry:
    """The decomposition of inputs of one shape: parts grouped by block shape, and the cells no
    block covers."""

    def __init__(self, bdm, shape):
        R, C = shape
        parts = _layout(bdm.dims, (0, 0, R, C), bdm.block2, bdm.stride2, bdm.mode)
        self.shapes = {}  # block shape (rows, cols) -> its parts
        for p in parts:
            self.shapes.setdefault(p.block, []).append(p)
        covered = np.zeros((R, C), dtype=bool)
        for p in parts:
            r0, c0, pr, pc = p.region
            for i in range(p.block[0]):
                for j in range(p.block[1]):
                    covered[r0 + (i + p.rows[:, None]) % pr, c0 + (j + p.cols[None, :]) % pc] = True
        self.dropped = int(R * C - np.count_nonzero(covered))
        self.width = C


class BDM:
    """BDM with blocks of one size: an int in 1D, (rows, cols) in 2D.

    mode, for the cells that do not fill a block: 'drop' leaves them out; 'wrap' lets the last
    blocks wrap around to the start (a ring, or a torus in 2D); 'shrink' scores them with smaller
    blocks of the same table. stride: the step between blocks (default the block size, no
    overlap; 1 gives every overlapping block).
    missing: 'fallback' (default) scores a block the table never produced above every observed
    value, 'nan' makes the whole estimate NaN. on_missing: 'warn' (default) warns with a
    FallbackWarning when a block fell back, 'error' raises MissingKeyError instead, 'ignore' says
    nothing (estimate() still counts them).
    alphabet: characters standing for the symbols 0..m-1 in order (e.g. "ACGT"), to read text
    such as DNA; without it text is key text (digits)."""

    def __init__(self, table, block, mode: str = "drop", stride=None, missing: str = "fallback",
                 on_missing: str = "warn", alphabet: str | None = None):
        if mode not in MODES:
            raise CtmtabError(f"unknown BDM mode {mode!r}; use one of {', '.join(MODES)}")
        if missing not in ("fallback", "nan"):
            raise CtmtabError(f"unknown missing-block policy {missing!r}; use 'fallback' or 'nan'")
        if on_missing not in ON_MISSING:
            raise CtmtabError(f"unknown on_missing {on_missing!r}; use one of {', '.join(ON_MISSING)}")
        self.table = table
        self.dims = table.space.dims
        self.block = (block,) if isinstance(block, int) else tuple(block)
        if len(self.block) != self.dims or min(self.block) < 1:
            raise CtmtabError(f"block {block!r} does not fit a {self.dims}D table")
        stride = self.block if stride is None else ((stride,) * self.dims if isinstance(stride, int) else tuple(stride))
        if len(stride) != self.dims or min(stride) < 1:
            raise CtmtabError(f"stride {stride!r} is not {self.dims} positive whole numbers")
        self.stride = stride
        self.mode = mode
        self.missing = missing
        self.on_missing = on_missing
        self.m = table.space.symbols
        self.alphabet = None if alphabet is None else check_alphabet(alphabet, self.m)
        if math.prod(self.block) * math.log2(self.m) > CODE_BITS:
            raise CtmtabError(f"blocks of {math.prod(self.block)} cells over {self.m} symbols are too large to "
                              "code; use smaller blocks")
        # 1D as one row: every step below is 2D
        self.block2 = self.block if self.dims == 2 else (1,) + self.block
        self.stride2 = self.stride if self.dims == 2 else (1,) + self.stride
        table.require_halting()
        table._refuse_dropped(f"(every key of shape {'x'.join(map(str, self.block))})", self.block)
        self._geometries = {}

    # ---- input
    def _data(self, x) -> np.ndarray:
        """x as a 2D array of uint8 symbols (1D: one row): an array or nested list of integers
        (bool too) in 0..m-1, or text. Text is key text as a table key is written ("0110", rows
        joined by "/"; over 10 symbols dotted cells, "3.11.0"), or with an alphabet its
        characters (rows joined by "/" or line breaks). Floats, even whole ones, NaN, complex,
        objects and symbols outside the alphabet are refused with one error, never rounded."""
        if isinstance(x, str) and self.alphabet is not None:
            rows = [symbols_from_text(r, self.alphabet, "the data" if "/" not in x else f"row {i + 1} of the data")
                    for i, r in enumerate(x.replace("\r\n", "\n").replace("\n", "/").strip("/").split("/"))]
            if len({len(r) for r in rows}) > 1:
                raise CtmtabError("the data's rows differ in length; give rows of equal length")
            x = rows[0] if len(rows) == 1 else np.stack(rows)
        elif isinstance(x, str):
            letter = next((c for c in x if c.isalpha()), None)
            if letter is not None:
                raise CtmtabError(f"the data holds the letter {letter!r}; BDM reads text as symbols written "
                                  f"as digits 0..{self.m - 1}: give alphabet= (e.g. alphabet='ACGT', "
                                  "--alphabet in the command line) to map letters to symbols")
        x = keytext.data_array(x, self.m)
        if self.dims == 2 and x.ndim == 1 and isinstance(x, np.ndarray) and x.size and self.alphabet is not None:
            x = x[None, :]
        if x.ndim != self.dims or x.size == 0:
            raise CtmtabError(f"BDM needs a non-empty {self.dims}D array of symbols, got {x.ndim} dimensions "
                              f"and {x.size} cells")
        x = keytext.as_symbols(x, self.m, "the data", f" of this {self.table.space.label} table")
        return x if self.dims == 2 else x[None, :]

    def _geometry(self, shape) -> _Geometry:
        g = self._geometries.get(shape)
        if g is None:
            if len(self._geometries) > 64:  # many lengths: keep the memory bounded
                self._geometries.clear()
            g = self._geometries[shape] = _Geometry(self, shape)
        return g

    def _key_shape(self, block2) -> tuple:
        return block2 if self.dims == 2 else (block2[1],)

    def _codes(self, X: np.ndarray, parts) -> np.ndarray:
        """Base-m codes (most significant cell first, row-major) of every block of the parts in
        every input: X is inputs x rows x cols. Strided views, one cell of every block at a time,
        so memory stays at one code per block."""
        out = []
        for p in parts:
            r0, c0, R, C = p.region
            (br, bc), (nr, nc) = p.block, (len(p.rows), len(p.cols))
            sub = X[:, r0:r0 + R, c0:c0 + C]
            if p.wrap:  # the region continued from its start, as far as the last block reaches
                sub = np.pad(sub, ((0, 0), (0, br), (0, bc)), mode="wrap")
            sr = p.rows[1] - p.rows[0] if nr > 1 else 1
            sc = p.cols[1] - p.cols[0] if nc > 1 else 1
            code = np.zeros((len(X), nr, nc), dtype=np.int64)
            for i in range(br):
                for j in range(bc):
                    code *= self.m
                    code += sub[:, i:i + sr * (nr - 1) + 1:sr, j:j + sc * (nc - 1) + 1:sc]
            out.append(code.reshape(len(X), -1))
        return out[0] if len(out) == 1 else np.concatenate(out, axis=1)

    def _decode(self, codes: np.ndarray, key_shape) -> np.ndarray:
        cells = math.prod(key_shape)
        powers = self.m ** np.arange(cells - 1, -1, -1, dtype=np.int64)
        return ((codes[:, None] // powers[None, :]) % self.m).astype(np.uint8).reshape((len(codes),) + key_shape)

    def _values(self, key_shape, codes: np.ndarray, full: bool) -> dict:
        """Per distinct code: ctm (the fallback or NaN where missing) and missing; full adds
        low and high (exhaustive) or se, the standard error of CTM, and rare (sampled)."""
        t = self.table
        keys = dense_keys(t, key_shape)
        out = None
        if not full and keys is not None and keys <= DENSE_LOOKUP:
            ctm = t.dense(key_shape, missing="nan")[codes]
            missing = np.isnan(ctm)
        else:
            with warnings.catch_warnings():  # rare blocks are counted, and warned about once, here
                warnings.simplefilter("ignore", RareKeyWarning)
                out = t.lookup(self._decode(codes, key_shape), missing="nan")
            ctm = out["ctm"]
            missing = out["count"] == 0
        ctm = ctm.copy()
        ctm[missing] = t.fallback() if self.missing == "fallback" else math.nan
        vals = {"ctm": ctm, "missing": missing}
        if full and t.mode == "sampled":
            with np.errstate(divide="ignore", invalid="ignore"):
                se = out["standard_error"] / (out["probability"] * math.log(2))
            vals["se"] = np.where(missing, 0.0, se)
            vals["rare"] = ~missing & (out["seen"] < t.min_seen)
        elif full:
            vals["low"], vals["high"] = out["ctm_low"], out["ctm_high"]
        return vals

    def _score(self, X: np.ndarray, full: bool) -> dict:
        """Scores of N inputs of one shape, X: N x rows x cols symbols; arrays of N."""
        n = len(X)
        geo = self._geometry(X.shape[1:])
        z = lambda: np.zeros(n)  # noqa: E731
        acc = {k: z() for k in ("value", "low", "high", "var", "blocks", "distinct", "fallbacks", "rare")}
        example = None
        for block2, parts in geo.shapes.items():
            key_shape = self._key_shape(block2)
            codes = self._codes(X, parts)
            per = codes.shape[1]
            size = self.m ** math.prod(block2)
            if n > 1 and math.log2(n) + math.log2(size) < 63:  # (input, code) as one int64: one sort
                pairs, counts = _runs((np.arange(n, dtype=np.int64)[:, None] * size + codes).reshape(-1))
                who, code = pairs // size, pairs % size
            else:
                pairs, counts = [], []
                for i in range(n):
                    u, c = _runs(codes[i])
                    pairs.append(u)
                    counts.append(c)
                who = np.repeat(np.arange(n), [len(u) for u in pairs])
                code, counts = np.concatenate(pairs), np.concatenate(counts)
            distinct, inv = np.unique(code, return_inverse=True)
            vals = self._values(key_shape, distinct, full)
            log_n = np.log2(counts)
            acc["value"] += np.bincount(who, vals["ctm"][inv] + log_n, minlength=n)
            acc["blocks"] += per
            acc["distinct"] += np.bincount(who, minlength=n)
            missing = vals["missing"][inv]
            acc["fallbacks"] += np.bincount(who, counts * missing, minlength=n)
            if example is None and vals["missing"].any():
                example = self.table.key_text(key_shape, self._decode(distinct[vals["missing"]][:1], key_shape)[0]
                                              .reshape(-1))
            if full and "low" in vals:
                acc["low"] += np.bincount(who, vals["low"][inv] + log_n, minlength=n)
                acc["high"] += np.bincount(who, vals["high"][inv] + log_n, minlength=n)
            elif full:
                acc["var"] += np.bincount(who, vals["se"][inv] ** 2, minlength=n)
                acc["rare"] += np.bincount(who, counts * vals["rare"][inv], minlength=n)
        acc["dropped"] = np.full(n, geo.dropped)
        acc["example"] = example
        return acc

    def _check_missing(self, fallbacks: int, blocks: int, inputs: int, example, level: int) -> None:
        if not fallbacks or self.on_missing == "ignore":
            return
        never = "seen in this sample" if self.table.mode == "sampled" else "produced by this table"
        of = f"{fallbacks:,} of the {blocks:,} blocks" + (f" of {inputs:,} inputs" if inputs > 1 else "")
        if self.on_missing == "error":
            raise MissingKeyError(f"{of} were never {never} (such as {example}); use smaller blocks or a "
                                  "table that holds them, or on_missing='warn' to score them with the fallback")
        value = "the fallback value" if self.missing == "fallback" else "NaN"
        warnings.warn(FallbackWarning(
            f"{of} were never {never} (such as {example}) and were scored with {value}, not a table value; "
            "use smaller blocks or a table that holds them (on_missing='ignore' silences this)"), stacklevel=level + 1)

    def _batches(self, xs):
        """Inputs grouped by shape: (positions, N x rows x cols symbols). An array of one more
        dimension than the table's is a batch of inputs of one shape, checked in one pass."""
        if isinstance(xs, np.ndarray) and xs.ndim == self.dims + 1:
            if 0 in xs.shape[1:]:
                raise CtmtabError(f"BDM needs non-empty inputs, got a batch of shape {xs.shape}")
            X = keytext.as_symbols(xs, self.m, "the data", f" of this {self.table.space.label} table")
            yield np.arange(len(X)), X if self.dims == 2 else X[:, None, :]
            return
        arrays = [self._data(x) for x in xs]
        by_shape = {}
        for i, a in enumerate(arrays):
            by_shape.setdefault(a.shape, []).append(i)
        for shape, idx in by_shape.items():
            yield np.array(idx), np.stack([arrays[i] for i in idx])

    def _scores(self, xs, full: bool, level: int) -> dict:
        """Scores of many inputs, and the one fallback check for all of them."""
        if not isinstance(xs, np.ndarray):
            xs = list(xs)
        n = len(xs)
        out = {k: np.zeros(n) for k in ("value", "low", "high", "var", "blocks", "distinct", "fallbacks", "rare",
                                        "dropped")}
        example = None
        for idx, X in self._batches(xs):
            acc = self._score(X, full)
            for k in out:
                out[k][idx] = acc[k]
            example = example or acc["example"]
        self._check_missing(int(out["fallbacks"].sum()), int(out["blocks"].sum()), n, example, level + 1)
        return out

    # ---- the estimates
    def __call__(self, x) -> float:
        """BDM of one sequence or array, in bits."""
        X = self._data(x)
        geo = self._geometry(X.shape)
        total, fell, blocks, example = 0.0, 0, 0, None
        for block2, parts in geo.shapes.items():  # one input: no per-input grouping to do
            key_shape = self._key_shape(block2)
            codes = self._codes(X[None], parts)[0]
            distinct, counts = _runs(codes, self.m ** math.prod(block2))
            vals = self._values(key_shape, distinct, False)
            total += float(np.sum(vals["ctm"]) + np.sum(np.log2(counts)))
            blocks += len(codes)
            if vals["missing"].any():
                fell += int(np.sum(counts[vals["missing"]]))
                example = example or self.table.key_text(key_shape, self._decode(
                    distinct[vals["missing"]][:1], key_shape)[0].reshape(-1))
        self._check_missing(fell, blocks, 1, example, 2)
        return total

    def estimate(self, x) -> Estimate:
        """BDM of one input with its certified interval (exhaustive tables) or standard error
        (sampled), and the blocks that fell back, were rare, and the cells dropped."""
        c = self._estimate_many([x], 3)
        return Estimate(value=float(c["bdm"][0]), low=_item(c, "bdm_low"), high=_item(c, "bdm_high"),
                        standard_error=_item(c, "standard_error"), blocks=int(c["blocks"][0]),
                        distinct=int(c["distinct"][0]), fallbacks=int(c["fallbacks"][0]), rare=int(c["rare"][0]),
                        dropped_cells=int(c["dropped_cells"][0]))

    def estimate_many(self, xs) -> dict:
        """estimate() of many inputs, as columns (numpy arrays, one entry per input): bdm,
        bdm_low and bdm_high (exhaustive) or standard_error (sampled), blocks, distinct,
        fallbacks, rare, dropped_cells. xs: a list of inputs (1D sequences of any lengths, 2D
        arrays), or one array holding a batch of one shape (N x length, N x rows x cols). Inputs
        of one shape are scored together and each distinct block is looked up once, so thousands
        of short sequences take one pass. One warning for all of them."""
        return self._estimate_many(xs, 2)

    def _estimate_many(self, xs, level: int) -> dict:
        s = self._scores(xs, True, level + 1)
        if s["rare"].any() and self.table.min_seen > 0:
            warnings.warn(RareKeyWarning(
                f"{int(s['rare'].sum()):,} blocks were seen in fewer than {self.table.min_seen} samples of this "
                "sampled table; their CTM values are rough"), stacklevel=level + 1)
        cols = {"bdm": s["value"]}
        if self.table.mode == "sampled":
            cols["standard_error"] = np.sqrt(s["var"])
        else:
            cols["bdm_low"], cols["bdm_high"] = s["low"], s["high"]
        for k, name in (("blocks", "blocks"), ("distinct", "distinct"), ("fallbacks", "fallbacks"),
                        ("rare", "rare"), ("dropped", "dropped_cells")):
            cols[name] = s[k].astype(np.int64)
        return cols

    def codes(self, x) -> np.ndarray:
        """Base-m codes of every block of the decomposition's first block size (the smaller
        blocks of 'shrink' aside)."""
        X = self._data(x)
        geo = self._geometry(X.shape)
        parts = geo.shapes.get(self.block2)
        if not parts:
            return np.zeros(0, dtype=np.int64)
        return self._codes(X[None], parts)[0]

    def fallbacks(self, x) -> int:
        """How many of the blocks BDM takes from x (the smaller blocks of 'shrink' too) the table
        never produced: each was scored with the missing-key policy, not with a value of the table.
        Never warns."""
        X = self._data(x)
        return int(self._score(X[None], full=False)["fallbacks"][0])

    # ---- perturbation
    def perturbation(self, x) -> np.ndarray:
        """The change in BDM (bits, new minus old) when each element (1D symbol, 2D cell) changes,
        in x's shape. Binary: the element flipped. Over m > 2 symbols: of the m - 1 other symbols,
        the change largest in size, its sign kept. A cell no block covers changes nothing (0).
        Incremental: only the blocks holding the element change; their old and new codes move
        counts between distinct blocks, and the change is the CTM of a block that appears or
        disappears plus the change of log2(n) terms. Every new block is looked up in one pass.
        Blocks that fall back after a change take the fallback value without a warning."""
        X = self._data(x)
        flat = X.reshape(-1).astype(np.int64)
        cells, m = len(flat), self.m
        geo = self._geometry(X.shape)
        shapes = list(geo.shapes)
        width = max(self.m ** math.prod(b) for b in shapes) if shapes else 1
        if math.log2(width) + math.log2(len(shapes) or 1) >= 62 or \
                math.log2(cells * (m - 1)) + math.log2(width * (len(shapes) or 1)) >= 62:
            raise CtmtabError("this input and block size are too large for perturbation(); use smaller blocks")
        if not shapes:
            return np.zeros(X.shape if self.dims == 2 else X.shape[1])
        occ_key, elem, occ, weight = [], [], [], []
        first = 0
        for g, block2 in enumerate(shapes):
            parts = geo.shapes[block2]
            code = self._codes(X[None], parts)[0]
            occ_key.append(code * len(shapes) + g)  # a block: its code beside its shape's number
            n_cells = math.prod(block2)
            ids = np.arange(first, first + len(code))
            at = 0
            for p in parts:
                for k, idx in enumerate(p.cells(geo.width)):
                    elem.append(idx)
                    occ.append(ids[at: at + len(p)])
                    weight.append(np.full(len(p), m ** (n_cells - 1 - k), dtype=np.int64))
                at += len(p)
            first += len(code)
        occ_key = np.concatenate(occ_key)
        elem, occ, weight = np.concatenate(elem), np.concatenate(occ), np.concatenate(weight)
        if self.mode == "wrap" and any(b[0] > X.shape[0] or b[1] > X.shape[1] for b in shapes):
            # a block longer than the input holds a cell twice: add the weights of its copies
            pair, inv = np.unique(occ * cells + elem, return_inverse=True)
            weight = np.bincount(inv, weights=weight).astype(np.int64)
            occ, elem = pair // cells, pair % cells
        keys, counts = _runs(occ_key)
        trials, changed, delta = [], [], []
        for d in range(1, m):
            new = (flat[elem] + d) % m
            trial = elem * (m - 1) + (d - 1)
            trials += [trial, trial]
            changed += [occ_key[occ], occ_key[occ] + (new - flat[elem]) * weight * len(shapes)]
            delta += [np.full(len(elem), -1), np.full(len(elem), 1)]
        trial, key, delta = np.concatenate(trials), np.concatenate(changed), np.concatenate(delta)
        span = width * len(shapes)
        pair, inv = np.unique(trial * span + key, return_inverse=True)
        moved = np.bincount(inv, weights=delta).astype(np.int64)
        trial, key = pair // span, pair % span
        pos = np.minimum(np.searchsorted(keys, key), len(keys) - 1)
        before = np.where(keys[pos] == key, counts[pos], 0)
        after = before + moved
        # CTM of every block met, each distinct one looked up once
        distinct, where = np.unique(key, return_inverse=True)
        ctm = np.empty(len(distinct))
        for g, block2 in enumerate(shapes):
            mine = distinct % len(shapes) == g
            if mine.any():
                ctm[mine] = self._values(self._key_shape(block2), distinct[mine] // len(shapes), False)["ctm"]
        ctm = ctm[where]
        with np.errstate(divide="ignore", invalid="ignore"):
            term = lambda c: np.where(c > 0, ctm + np.log2(np.maximum(c, 1)), 0.0)  # noqa: E731
            change = np.bincount(trial, weights=term(after) - term(before), minlength=cells * (m - 1))
        change = change.reshape(cells, m - 1)
        pick = np.argmax(np.abs(np.nan_to_num(change, nan=np.inf)), axis=1)
        out = change[np.arange(cells), pick]
        return out.reshape(X.shape if self.dims == 2 else X.shape[1])
