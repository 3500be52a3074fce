"""The build spool: finished units on disk, so a killed build resumes.

Finished units are written in batches, one part file per flush and at most one flush every
FLUSH_SECONDS, so a build shorter than that writes nothing and a killed one loses at most the
last few seconds. Every record in a part is sealed with its unit id, the build's fingerprint
and the sha256 of its payload; a record or part that fails the check is dropped and its unit
recomputed, never trusted."""
from __future__ import annotations

import hashlib
import json
import re
import shutil
import time
from contextlib import contextmanager
from pathlib import Path

import msgpack

from ..errors import CtmtabError
from ..fsutil import write_atomic
from .units import dump_result, load_result

FLUSH_SECONDS = 1.0
SPOOL_FORMAT = 2  # 1: one unsealed file per unit
_PART = re.compile(r"part-(\d{6,})\.part")


class SpoolError(CtmtabError):
    """The spool folder belongs to another build or is damaged."""


class Spool:
    """A folder OUTPUT.parts/ holding plan.json and sealed part files, made on the first flush.

    ident: what the build is (space, cap, plan or seed); it must match the folder's plan.json.
    expect(index) -> (uid, weight) of a unit this build wants, or None for any other index."""

    def __init__(self, folder, ident: dict, expect):
        self.folder = Path(folder)
        self.ident = {"spool": SPOOL_FORMAT, **ident}
        self.fingerprint = hashlib.sha256(json.dumps(self.ident, sort_keys=True).encode()).hexdigest()[:32]
        self.expect = expect
        self.pending: list = []  # (index, result) or sealed records, not yet on disk
        self.damaged = 0         # part files dropped because a record failed its check
        self.next_part = 0
        self.last_flush = time.monotonic()
        self._stale = False
        if self.folder.exists() or self.folder.is_symlink():
            if not self.folder.is_dir():
                raise SpoolError(f"{self.folder} is in the way of the build's spool folder; move it, or choose "
                                 "another --output")
            marker = self.folder / "plan.json"
            if marker.exists():
                try:
                    found = json.loads(marker.read_text())
                except (OSError, ValueError):
                    found = None
                if (isinstance(found, dict) and set(found) == {"plan", "space", "cap", "units"}
                        and found["plan"] == self.ident.get("plan")):
                    # this build under spool format 1: its parts are unsealed, so never trusted;
                    # they are left unread and the marker is written anew at the first flush
                    self._stale = True
                elif found != self.ident:
                    raise SpoolError(f"{self.folder} holds the parts of a different build; delete it, or "
                                     "choose another --output")

    def finished(self) -> dict:
        """Every sealed result on disk that this build wants, by unit index. A part with any
        record that fails its seal is deleted; its good records are written again."""
        out: dict = {}
        if not self.folder.is_dir():
            return out
        for path in sorted(self.folder.iterdir()):
            name = _PART.fullmatch(path.name)
            if not name:
                continue
            seq = int(name.group(1))
            self.next_part = max(self.next_part, seq + 1)
            good, intact = self._read(path, seq)
            for index, record, result in good:
                if index not in out:
                    out[index] = result
                    if not intact:
                        self.pending.append(record)
            if not intact:
                self.damaged += 1
                path.unlink(missing_ok=True)
        return out

    def _read(self, path: Path, seq: int):
        """(good records, whether the whole part passed its checks)."""
        try:
            rec = msgpack.unpackb(path.read_bytes(), raw=False, strict_map_key=True)
            ok = (isinstance(rec, dict) and rec.get("plan") == self.fingerprint and rec.get("part") == seq
                  and isinstance(rec.get("units"), list))
        except Exception:  # unreadable, truncated or not msgpack
            return [], False
        if not ok:  # another build's part, or one copied over this name
            return [], False
        good, intact = [], True
        for record in rec["units"]:
            result = self._check(record)
            if result is None:
                intact = False
            elif result is not False:
                good.append((record[0], record, result))
        return good, intact

    def _check(self, record):
        """The result of a sealed record; None if it fails its seal, False if intact but not wanted."""
        if not (isinstance(record, list) and len(record) == 4):
            return None
        index, uid, digest, payload = record
        if type(index) is not int or not isinstance(payload, bytes) or not isinstance(digest, str):
            return None
        if hashlib.sha256(payload).hexdigest() != digest:
            return None
        expected = self.expect(index)
        if expected is None:
            return False
        if uid != expected[0]:
            return None
        try:
            result = load_result(payload)
            weight = result["halting"] + result["non_halting"] + result["undecided"]
        except Exception:
            return None
        return result if weight == expected[1] else None

    def save(self, index: int, result: dict) -> None:
        """Queue a finished unit; flush when the last flush is FLUSH_SECONDS old. Sealed only at
        the flush, so a build too short to flush pays nothing."""
        self.pending.append((index, result))
        if time.monotonic() - self.last_flush >= FLUSH_SECONDS:
            self.flush()

    def _seal(self, item) -> list:
        if isinstance(item, list):  # a record read back from a damaged part, already sealed
            return item
        index, result = item
        payload = dump_result(result)
        return [index, self.expect(index)[0], hashlib.sha256(payload).hexdigest(), payload]

    def flush(self) -> None:
        if not self.pending:
            return
        if not self.folder.is_dir():
            self.folder.mkdir(parents=True, exist_ok=True)
        marker = self.folder / "plan.json"
        if self._stale or not marker.exists():
            write_atomic(marker, json.dumps(self.ident).encode(), durable=False)
            self._stale = False
        seq = self.next_part
        units = [self._seal(item) for item in self.pending]
        data = msgpack.packb({"plan": self.fingerprint, "part": seq, "units": units}, use_bin_type=True)
        # rename without fsync: safe against a killed process, cheap enough per batch
        write_atomic(self.folder / f"part-{seq:06d}.part", data, durable=False)
        self.next_part, self.pending, self.last_flush = seq + 1, [], time.monotonic()

    def close(self) -> None:
        """End of the computation: keep what is pending if the build was long enough to spool at
        all, so a failed final write loses nothing; a short build leaves no folder behind."""
        if self.folder.is_dir():
            self.flush()

    @staticmethod
    def discard(folder) -> None:
        """Remove a spool once its table is safely written."""
        shutil.rmtree(folder, ignore_errors=True)


@contextmanager
def kept(store: Spool | None):
    """Close the spool when the computation ends, however it ends: an interrupted or terminated
    build keeps what it has finished (an error while flushing must not hide the first error)."""
    try:
        yield
    except BaseException:
        if store is not None:
            try:
                store.close()
            except OSError:
                pass
        raise
    if store is not None:
        store.close()
