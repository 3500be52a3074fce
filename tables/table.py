"""A loaded table: exact counts by key, CTM values with certified intervals,
dense views for estimators, verification, merging and export."""
from __future__ import annotations

import math
import warnings
from pathlib import Path

import numpy as np

from ..model.space import Space
from ..model.symmetry import size_of
from ..errors import (DEFAULT_MIN_SEEN, InconsistentTableError, MissingKeyError, RareKeyWarning, SpaceError,
                      TableError)
from . import certify, convert, dense, report, sampled, write
from .group import Group
from . import cut as sizecut
from .cut import DroppedKeyError
from .dense import DENSE_LOOKUP
from . import keys as keytext
from .arrays import Hist, codes_of, exact_sum

MISSING_POLICIES = ("raise", "nan", "fallback")
SHIPPED = Path(__file__).parent


def _int_total(header: dict, name: str) -> int:
    value = header.get("totals", {}).get(name) if isinstance(header.get("totals"), dict) else None
    if not isinstance(value, str) or not value.isdigit():
        raise InconsistentTableError(f"the header total {name!r} is missing or not a whole number")
    return int(value)


class Table:
    """One coding-theorem table. Build one with Table.from_tally, or load a file with load()."""

    def __init__(self, header: dict, groups: dict, steps_hist: list, length_hist: list, source: str = "table",
                 late: dict | None = None):
        self.header = header
        self.source = source
        try:
            space = header["space"]
            self.space = Space(space["dims"], space["states"], space["symbols"])
            self.cap = header["cap"]
            self.mode = header["mode"]
        except (KeyError, TypeError, SpaceError) as exc:
            raise InconsistentTableError(f"{source}: the header's space, cap or mode is malformed ({exc})") from None
        if not isinstance(self.cap, int) or self.cap < 1 or self.mode not in ("exhaustive", "sampled"):
            raise InconsistentTableError(f"{source}: the header's cap or mode is malformed")
        self.space_size = _int_total(header, "space_size")
        self.halting = _int_total(header, "halting")
        self.non_halting = _int_total(header, "non_halting")
        self.undecided = _int_total(header, "undecided")
        self.groups = groups
        self.steps_hist = Hist.of(steps_hist)  # non-zero entries only: caps run to millions of steps
        self.length_hist = Hist.of(length_hist)
        self._dense = {}
        self.min_seen = DEFAULT_MIN_SEEN
        self._index = {}
        self.cut = sizecut.parse(header, self.space.dims, self.space.symbols, self.cap, groups)
        # the dropped weight stays in the total, so probabilities keep the true normalisation
        self.total = sum(exact_sum(g.counts) for g in groups.values()) + (self.cut.weight if self.cut else 0)
        try:
            self.certificate = certify.parse(header, self.non_halting, self.undecided, self.cap, self.space.dims,
                                            self.space, self.mode)
        except InconsistentTableError as exc:
            raise InconsistentTableError(f"{source}: {exc}; the file is corrupt or was edited") from None
        # the run-on past the cap (certificate "settle"): shape -> Group of the runs that halted later
        self.late = late or {}
        settle = None if self.certificate is None else self.certificate.settle
        late_total = sum(exact_sum(g.counts) for g in self.late.values())
        if late_total != (0 if settle is None else self.blanks * settle["halting"]) or (
                settle is not None and any(size_of(s) > settle["size"] for s in self.late)):
            raise InconsistentTableError(f"{source}: the halts past the cap contradict the certificate's settle "
                                         "record (their counts or sizes)")

    # ---- identity and totals
    @property
    def blanks(self) -> int:
        return self.space.symbols

    @property
    def undecided_runs(self) -> int:
        """Runs (machine, blank) that reached the cap unproven: the bound on any count's error."""
        return self.blanks * self.undecided

    @property
    def settle_size(self) -> int | None:
        """Keys up to this size (2D: longer side) have exact unbounded-time counts: every run
        undecided at the cap that fitted it was run on until it halted, repeated or outgrew it."""
        cert = self.certificate
        return None if cert is None or cert.settle is None else cert.settle["size"]

    def _certified(self, shape, counts, rows=None):
        """Certified CTM bounds (low, high) of keys of one shape with these counts at the cap;
        rows (N x cells) add each key's halts past the cap where the table settled its size."""
        late, left = certify.open_runs(self.certificate, self.blanks, self.undecided)
        counts = np.asarray(counts, dtype=np.float64)
        if rows is not None:
            counts = counts + self._late_counts(shape, rows)
        return certify.bounds(counts, self.undecided_reach(shape), left, self.total + late)

    def _late_counts(self, shape, rows) -> np.ndarray:
        """Runs that produced each row (N x cells) after the cap, found by the run-on (float64)."""
        g = self.late.get(tuple(shape))
        rows = np.ascontiguousarray(rows, dtype=np.uint8).reshape(len(rows), -1)
        if g is None:
            return np.zeros(len(rows))
        pos = self._position(tuple(shape), rows, late=True)
        return np.where(pos >= 0, np.asarray(g.counts, dtype=np.float64)[np.maximum(pos, 0)], 0.0)

    @property
    def streams(self) -> list:
        """Sampled tables: [(seed, size)] of every stream the samples came from."""
        sample = self.header.get("sample") or {}
        return [tuple(x) for x in sample.get("streams", [[sample.get("seed"), sample.get("size")]])]

    @property
    def distinct(self) -> int:
        return sum(len(g) for g in self.groups.values())

    @property
    def shapes(self) -> list:
        return sorted(self.groups)

    def __repr__(self):
        return f"<ctmtab Table {self.space.label} cap {self.cap}, {self.distinct} keys>"

    # ---- building and saving

    def cut_at(self, keep_size: int) -> "Table":
        """This table keeping only the keys whose longer side is at most keep_size, with an exact
        record of what it dropped (tables/cut.py). Pure Python; the counts are not rebuilt."""
        if isinstance(keep_size, bool) or not isinstance(keep_size, int) or keep_size < 1:
            raise TableError(f"the size to keep must be a whole number >= 1, got {keep_size!r}")
        if self.cut is not None and keep_size >= self.cut.keep_size:
            raise TableError(f"{self.source} is already cut at size {self.cut.keep_size}; a cut can only "
                             f"keep fewer sizes, so give a size below {self.cut.keep_size}")
        # no output is longer than cap + 1 cells: a larger size keeps everything, and says so
        cut = sizecut.Cut(min(keep_size, self.cap + 1), dict(self.cut.dropped) if self.cut else {})
        groups = {}
        for shape, g in self.groups.items():
            if cut.cuts(shape):
                cut.dropped[shape] = (exact_sum(g.counts), len(g), int(max(g.counts)))
            else:
                groups[shape] = g
        header = {k: v for k, v in self.header.items() if not k.startswith("_")}
        header["cut"] = cut.header_field()
        # the halts past the cap stay whole (lookups of a cut shape refuse before they read them)
        table = Table(header, groups, self.steps_hist, self.length_hist, source=self.source, late=self.late)
        header["keys"] = table._key_summary()
        table.min_seen = self.min_seen
        return table

    def trimmed(self, max_size: int) -> "Table":
        """Deprecated name of cut_at."""
        warnings.warn("Table.trimmed is now Table.cut_at", DeprecationWarning, stacklevel=2)
        return self.cut_at(max_size)

    def _key_summary(self) -> dict:
        return {"distinct": self.distinct, "groups": [[list(s), len(self.groups[s])] for s in self.shapes]}

    # ---- keys
    def parse_key(self, key) -> tuple[tuple, np.ndarray]:
        """A key as (shape, symbols): key text (tables/keys.py: "0110", "01/10", over 10 symbols
        "3.11.0" or "10."), bytes of symbols, an int sequence or a numpy array of integers."""
        m = self.space.symbols
        if isinstance(key, (bytes, bytearray)):
            arr = np.frombuffer(bytes(key), dtype=np.uint8)
        elif isinstance(key, str):
            arr = keytext.parse(key, m)
            if self.space.dims == 2 and arr.ndim == 1:
                arr = arr[None, :]  # a 2D key of one row
        else:
            try:
                arr = np.asarray(key)
            except (ValueError, TypeError):  # ragged rows
                raise TableError(f"key {key!r:.60} is not a {self.space.dims}D array of symbols") from None
        if isinstance(key, str) and arr.ndim != self.space.dims:
            raise TableError(f"key {keytext.shown(key)} has {len(arr)} rows joined by '/', but the keys of this "
                             "1D table are one row; leave out the '/'")
        if arr.ndim != self.space.dims or arr.size == 0:
            raise TableError(f"key {keytext.shown(key)} is not a non-empty {self.space.dims}D array of symbols")
        return tuple(arr.shape), self._symbols(arr, f"key {keytext.shown(key)}").reshape(-1)


    def _symbols(self, arr: np.ndarray, what: str) -> np.ndarray:
        """arr as uint8 symbols (keys.as_symbols: integers only, each in 0..m-1)."""
        return keytext.as_symbols(arr, self.space.symbols, what, f" of this {self.space.label} table",
                                  "fix the key")

    def require_halting(self) -> None:
        """Refuse a table where no run halted (it has no probabilities): one clear error, never
        log2(0). Counts and info still work."""
        if self.total == 0:
            runs = (f"none of its {self.header['sample']['size']:,} samples" if self.mode == "sampled"
                    else "no machine")
            fix = "draw more samples (build --extend) or" if self.mode == "sampled" else "rebuild and"
            raise TableError(f"{self.source}: {runs} halted within cap {self.cap}, so no key has a "
                             f"probability or CTM; {fix} raise --max-steps")

    def key_text(self, shape: tuple, row: np.ndarray) -> str:
        """The one spelling of a key (tables/keys.py); parse_key reads it back as itself."""
        return keytext.write(self.space.symbols, shape, row)

    def _position(self, shape: tuple, rows: np.ndarray, late: bool = False) -> np.ndarray:
        """Index of each row in its group (late: in the run-on's halts past the cap), -1 where
        absent."""
        g = (self.late if late else self.groups).get(shape)
        if g is None:
            return np.full(len(rows), -1, dtype=np.int64)
        if g.codes is not None:
            codes = codes_of(rows, self.space.symbols)
            pos = np.searchsorted(g.codes, codes)
            pos[pos == len(g.codes)] = 0
            return np.where(g.codes[pos] == codes, pos, -1)
        index = self._index.get((late, shape))
        if index is None:
            index = self._index[late, shape] = {r.tobytes(): i for i, r in enumerate(g.symbols)}
        return np.array([index.get(r.tobytes(), -1) for r in rows], dtype=np.int64)

    def _find(self, key) -> tuple[tuple, int]:
        """(shape, index in its group) of one key; index -1 where absent."""
        shape, row = self.parse_key(key)
        return shape, int(self._position(shape, row[None, :])[0])

    def count(self, key) -> int:
        """Exact count of runs (machine, blank) with this output; 0 if never produced. A key of a
        shape this table cut raises DroppedKeyError: its count is bounded, not known."""
        shape, pos = self._find(key)
        self._refuse_dropped(key, shape)
        return 0 if pos < 0 else int(self.groups[shape].counts[pos])

    def weight_by_size(self) -> dict:
        """Size (the longer side) -> the counts of the keys of that size, those a cut dropped
        included: each must equal the size histogram's entry times the runs per machine."""
        by_size: dict = {}
        for shape, g in self.groups.items():
            by_size[max(shape)] = by_size.get(max(shape), 0) + exact_sum(g.counts)
        for shape, (weight, _, _) in (self.cut.dropped.items() if self.cut else ()):
            by_size[max(shape)] = by_size.get(max(shape), 0) + weight
        return by_size

    # ---- the size cut (tables/cut.py)
    def dropped(self, shape) -> bool:
        """Whether this table cut the keys of this shape (they are counted only in total)."""
        return self.cut is not None and self.cut.cuts(tuple(shape))

    def dropped_bound(self, shape) -> float:
        """A lower bound on the CTM of any key of a cut shape: its count is at most the shape's
        largest dropped count (plus, exhaustive, the undecided runs that could still reach it).
        Certified for exhaustive tables. Sampled tables: an approximate 95% bound, from the
        largest count seen plus two standard deviations of a count of it (k images a sample)
        and, as for a key never seen, the rule of three (p <= 3/H)."""
        most = self.cut.most(tuple(shape))
        if self.mode == "sampled":
            k = self.header["sample"]["images_per_sample"]
            return math.log2(self.total) - math.log2(most + 2 * math.sqrt(k * most) + 3 * k)
        low, _ = self._certified(shape, most)
        return float(low)

    def _refuse_dropped(self, key, shape) -> None:
        if self.dropped(shape):
            size = "x".join(map(str, shape))
            raise DroppedKeyError(
                f"key {key!r} has size {size}, which this table cut (it keeps keys up to size "
                f"{self.cut.keep_size}); its CTM is at least {self.dropped_bound(shape):.4f} bits. "
                "Use blocks of at most that size, or a table cut at a larger size")

    def probability(self, key) -> float:
        """D(key): the key's count over the total of every count (the cut ones included)."""
        self.require_halting()
        c = self.count(key)
        sampled.warn_rare(self, key, c)
        return c / self.total

    def fallback(self) -> float:
        """CTM for a key never produced under the 'fallback' policy: log2(total) + 1 bits,
        the value of half the smallest possible count, above every observed value."""
        self.require_halting()
        return math.log2(self.total) + 1.0

    def _missing(self, key, missing: str) -> float:
        if missing == "nan":
            return math.nan
        if missing == "fallback":
            return self.fallback()
        if missing == "raise":
            never = "seen in this sample" if self.mode == "sampled" else "produced by this table"
            raise MissingKeyError(
                f"key {key!r} was never {never} ({self.space.label}, cap {self.cap}); "
                "use the missing-key policy 'nan' or 'fallback' (--missing in the CLI) to score it anyway"
            )
        raise TableError(f"unknown missing-key policy {missing!r}; use one of {', '.join(MISSING_POLICIES)}")

    def ctm(self, key, missing: str = "raise") -> float:
        """CTM(key) = -log2 D(key), in bits.

        Parameters
        ----------
        key : str, bytes, sequence of int or numpy.ndarray
            One key (see ``parse_key``).
        missing : {"raise", "nan", "fallback"}
            A key never produced raises MissingKeyError (the default), scores NaN, or scores
            ``fallback()`` bits.

        Returns
        -------
        float
            The CTM at the table's cap. Exhaustive tables: ``interval(key)`` bounds it for an
            unbounded runtime; sampled tables: ``standard_error(key)``, and a RareKeyWarning for
            a key seen fewer than ``min_seen`` times. A key of a size the table dropped raises
            DroppedKeyError (NaN with missing="nan").
        """
        self.require_halting()
        try:
            c = self.count(key)
        except DroppedKeyError:
            if missing == "nan":
                return math.nan
            raise
        if c == 0:
            return self._missing(key, missing)
        sampled.warn_rare(self, key, c)
        return math.log2(self.total) - math.log2(c)

    def interval(self, key) -> tuple[float, float]:
        """Bounds on CTM(key), in bits.

        Returns
        -------
        (low, high) : tuple of float
            Exhaustive tables: certified bounds for an unbounded runtime. The true count lies in
            [c, c + U] and the true halting total in [H, H + U], U = the undecided runs that could
            still produce a key of this size; a key within the table's settle size adds its
            halts past the cap, leaving only the normalisation open. Equal where exact.
            Sampled tables: an approximate 95% interval from the standard error, not certified;
            an unseen key gets the rule of three, (log2(H / 3), inf).
            A key of a dropped size: (dropped_bound, inf).
        """
        self.require_halting()
        shape, row = self.parse_key(key)
        if self.dropped(shape):  # bounded below only
            return self.dropped_bound(shape), math.inf
        if self.mode == "sampled":
            c = self.count(key)
            if c == 0:
                return sampled.unseen_bound(self), math.inf
            sampled.warn_rare(self, key, c)
            low, high = sampled.interval95(np.float64(c / self.total), np.float64(sampled.standard_error(self, key)))
            return float(low), float(high)
        pos = int(self._position(shape, row[None, :])[0])
        c = 0 if pos < 0 else int(self.groups[shape].counts[pos])
        low, high = self._certified(shape, [c], row[None, :])
        return float(low[0]), float(high[0])

    def undecided_reach(self, shape) -> int:
        """Undecided runs that could still produce a key of this shape: the bound on its count's
        error (all undecided runs for a table without a certificate)."""
        if self.certificate is None:
            return self.undecided_runs
        return self.blanks * self.certificate.reach(tuple(shape))

    def interval_widths(self) -> list:
        """Per key shape: the keys and the widest certified interval among them, in bits."""
        rows = []
        for shape in self.shapes:
            counts = np.asarray(self.groups[shape].counts, dtype=np.float64)
            low, high = self._certified(shape, counts, self.groups[shape].rows(self.space.symbols))
            rows.append({"shape": "x".join(map(str, shape)), "keys": len(counts),
                         "widest": float(np.max(high - low)) if len(counts) else 0.0})
        return rows

    @property
    def exact(self) -> bool:
        """An exhaustive table with nothing undecided: every count is the unbounded-runtime count."""
        return self.mode == "exhaustive" and self.undecided == 0

    @property
    def exact_by(self) -> str | None:
        """What made the table exact: "step-bound" (the cap reaches a proven S(n, m), which proved
        the runs left at the cap) or "proofs" (every run halted or a decider proved it never
        halts, no bound used); None when it is not exact."""
        if not self.exact:
            return None
        bound = self.certificate.step_bound if self.certificate is not None else None
        return "step-bound" if bound is not None else "proofs"

    def lookup(self, keys, missing: str = "nan") -> dict:
        """Look up many keys at once.

        Parameters
        ----------
        keys : list or numpy.ndarray
            A list of keys (key text such as ``"0110"`` or ``"01/10"``, bytes, integer sequences),
            or an integer array of one shape: N x L (1D) or N x rows x cols (2D). Zero keys give
            empty arrays; one key alone (a string) is refused, give ``[key]``.
        missing : {"nan", "fallback", "raise"}
            What a key the table never produced scores: NaN (the default here, so that a batch
            carries on), ``fallback()`` bits, or MissingKeyError. ``ctm()`` defaults to "raise",
            since one missing key asked for by name is worth an error.

        Returns
        -------
        dict of numpy.ndarray, one entry per key, in the order given
            Every table: ``count`` (float64; exact up to 2^53), ``probability`` (count / total)
            and ``ctm`` (-log2 probability, bits).
            Exhaustive tables add ``ctm_low`` and ``ctm_high``: certified bounds on the CTM for
            an unbounded runtime (points where the table is exact or settled the key's size).
            Sampled tables add ``standard_error`` of the probability (NaN for unseen keys) and
            ``seen`` (the samples behind each key), and warn (RareKeyWarning) about keys seen fewer than ``min_seen`` times.
            Tables cut by size add ``dropped`` (bool): a key of a dropped size has count NaN and
            bounds [dropped_bound, inf].
        """
        if missing not in MISSING_POLICIES:
            self._missing(None, missing)  # the one error for an unknown policy
        self.require_halting()
        one = "one key per row" if self.space.dims == 1 else "N x rows x cols"
        if isinstance(keys, (str, bytes, bytearray)):  # iterating it would look up each character
            raise TableError(f"lookup takes a list of keys, not the one key {keytext.shown(keys)}; "
                             "give [key], or use ctm(key)")
        if isinstance(keys, np.ndarray) and keys.ndim <= self.space.dims:
            raise TableError(f"a lookup array of shape {keys.shape} holds no batch of keys; give {one} "
                             "(a single key as [key])")
        if isinstance(keys, np.ndarray) and keys.ndim == self.space.dims + 1:
            n = len(keys)
            if n == 0:  # zero keys is a batch too: empty answers, whatever the dtype
                batches = {}
            elif 0 in keys.shape[1:]:
                raise TableError(f"lookup keys of shape {keys.shape[1:]} are empty; give at least one symbol")
            else:
                batches = {tuple(keys.shape[1:]): (None, self._symbols(keys, "a lookup key array")
                                                   .reshape(n, -1))}
        else:
            try:
                keys = list(keys)
            except TypeError:
                raise TableError(f"lookup takes a list of keys or an array ({one}), not a "
                                 f"{type(keys).__name__}") from None
            parsed = [self.parse_key(k) for k in keys]
            n = len(parsed)
            batches = {}
            for i, (s, _) in enumerate(parsed):  # one search per shape, not per key
                batches.setdefault(s, ([], None))[0].append(i)
            batches = {s: (np.array(idx), np.stack([parsed[i][1] for i in idx])) for s, (idx, _) in batches.items()}
        counts, moments = np.zeros(n), np.zeros(n)
        cut = np.zeros(n, dtype=bool)
        for shape, (idx, rows) in batches.items():
            where = slice(None) if idx is None else idx
            if self.dropped(shape):  # bounded, not known: NaN, never a made-up value
                if missing != "nan":
                    self._refuse_dropped(self.key_text(shape, rows[0]), shape)
                counts[where], cut[where] = np.nan, True
                continue
            counts[where] = self._counts_of(shape, rows)
            if self.mode == "sampled":
                moments[where] = sampled.moments_of(self, shape, rows)
        with np.errstate(divide="ignore", invalid="ignore"):
            ctm = math.log2(self.total) - np.log2(counts)
        absent = counts == 0
        if absent.any():
            if missing == "raise":
                self._missing("(one of the keys)", "raise")
            ctm[absent] = self._missing(None, missing)
        out = {"count": counts, "probability": counts / self.total, "ctm": ctm}
        if self.mode == "exhaustive":  # certified bounds, one shape at a time (its reach and halts past the cap)
            low, high = np.full(n, np.nan), np.full(n, np.nan)
            for shape, (idx, rows) in batches.items():
                where = slice(None) if idx is None else idx
                with np.errstate(invalid="ignore"):
                    low[where], high[where] = self._certified(shape, counts[where], rows)
            out["ctm_low"], out["ctm_high"] = low, high
        if self.cut is not None:
            out["dropped"] = cut
            if cut.any():
                low = out.setdefault("ctm_low", np.full(n, np.nan))
                high = out.setdefault("ctm_high", np.full(n, np.nan))
                for shape, (idx, _) in batches.items():
                    if self.dropped(shape):
                        where = slice(None) if idx is None else idx
                        low[where], high[where] = self.dropped_bound(shape), np.inf
        if self.mode == "sampled":
            with np.errstate(divide="ignore", invalid="ignore"):
                out["standard_error"] = np.where(counts > 0, sampled.errors(self, counts, moments), np.nan)
                out["seen"] = np.where(counts > 0, sampled.seen_of(counts, moments), 0.0)
                rare = int(np.count_nonzero((counts > 0) & (out["seen"] < self.min_seen)))
            if rare:
                warnings.warn(RareKeyWarning(
                    f"{rare} of the {len(counts)} keys were seen fewer than {self.min_seen} times in this sampled "
                    "table; their estimates are rough (sample more, or set min_seen to silence this)"), stacklevel=2)
        return out

    def _counts_of(self, shape, rows) -> np.ndarray:
        """Counts (float64) of rows of valid symbols: a dense array indexed by code for small
        shapes, a sorted search of the group beyond (bounded memory for long keys)."""
        g = self.groups.get(shape)
        if g is None:
            return np.zeros(len(rows))
        keys = dense.dense_keys(self, shape)
        if g.codes is not None and keys is not None and keys <= DENSE_LOOKUP:
            return dense.dense_counts(self, shape)[codes_of(rows, self.space.symbols).astype(np.intp)]
        pos = self._position(shape, np.ascontiguousarray(rows, dtype=np.uint8))
        vals = np.asarray(g.counts, dtype=np.float64)
        return np.where(pos >= 0, vals[np.maximum(pos, 0)], 0.0)

    def items(self, shape=None):
        """(key text, exact count) in shape order, then code order; optionally one shape."""
        shapes = self.shapes if shape is None else [(shape,) if isinstance(shape, int) else tuple(shape)]
        m = self.space.symbols
        for s in shapes:
            g = self.groups.get(s)
            if g is None:
                continue
            for row, c in zip(g.rows(m), g.counts):
                yield self.key_text(s, row), int(c)

    def __iter__(self):
        return self.items()

    def __len__(self):
        return self.distinct

    @property
    def hist_steps(self):
        """Deprecated name of steps_hist (the file keeps the key hist_steps)."""
        warnings.warn("Table.hist_steps is now Table.steps_hist", DeprecationWarning, stacklevel=2)
        return self.steps_hist

    @property
    def hist_len(self):
        """Deprecated name of length_hist (the file keeps the key hist_len)."""
        warnings.warn("Table.hist_len is now Table.length_hist", DeprecationWarning, stacklevel=2)
        return self.length_hist

    # ---- building and saving (tables/convert.py, tables/write.py)
    @classmethod
    def from_tally(cls, tally, *, command: str = "", notes: str = "", builder: str | None = None,
                   workers=None) -> "Table":
        """The table of a build's Tally, with its header (who built it: builder, else
        $CTMTAB_BUILDER, else nobody; workers: the build's worker count or "dask", if known)."""
        return convert.table_from_tally(cls, tally, command=command, notes=notes, builder=builder,
                                        workers=workers)

    def to_tally(self):
        """The exact tally behind this table (for merging and extending)."""
        return convert.tally_of(self)

    def body(self) -> dict:
        return write.body(self)

    def to_bytes(self) -> bytes:
        return write.table_bytes(self)

    def save(self, path) -> None:
        """Write the table to path atomically: no half-written file ever has that name."""
        write.save(self, path)

    # ---- sampled tables (tables/sampled.py); exhaustive tables are exact
    def standard_error(self, key) -> float:
        """Sampled tables: the standard error of the probability estimate. Exhaustive: 0."""
        return sampled.standard_error(self, key)

    def seen(self, key) -> float:
        """Sampled tables: how many samples produced the key. Exhaustive tables: its count."""
        return sampled.seen(self, key)

    def relative_errors(self, shape) -> np.ndarray:
        """Sampled tables: standard error / estimate for every key of one shape seen, in key order."""
        return sampled.relative_errors(self, shape)

    def rare(self, min_seen: int | None = None) -> int:
        """Sampled tables: how many keys were seen fewer than min_seen times (default
        self.min_seen). Exhaustive tables: 0."""
        return sampled.rare(self, min_seen)

    @staticmethod
    def group_seen(g: Group) -> np.ndarray:
        """Sampled tables: how many samples produced each key of one group."""
        return sampled.group_seen(g)

    # ---- dense views (tables/dense.py)
    def dense(self, shape, missing: str = "nan") -> np.ndarray:
        """CTM of every key of one shape (an int length in 1D, (rows, cols) in 2D),
        indexed by base-m code, most significant symbol first (row-major in 2D)."""
        return dense.dense(self, shape, missing)

    # ---- reports (tables/report.py)
    def summary(self) -> dict:
        return report.summary(self)

    def write_csv(self, out) -> None:
        """One row per key: the exact count, and for sampled tables the probability, its standard
        error, the CTM and its 95% interval (not certified)."""
        report.write_csv(self, out)

    def to_json(self) -> dict:
        return report.to_json(self)


