"""The build spool: finished units on disk, so a killed build resumes.

Finished units are written in batches, one part file per flush and at most one flush every
FLUSH_SECONDS, so a build shorter than that writes nothing and a killed one loses at most the
last few seconds. Every record in a part is sealed with its unit id, the build's fingerprint
and the sha256 of its payload; a record or part that fails the check is dropped and its unit
recomputed, never trusted.

Housekeeping touches only what is provably this build's: a part file is deleted only when it
carries this build's fingerprint and either this run wrote it or every unit in it was used; any
other file is left where it is, and the build says so."""
from __future__ import annotations

import errno
import hashlib
import json
import os
import re
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
        self.damaged = 0         # part files not trusted: failed a check, or not this build's
        self.next_part = 0
        self.last_flush = time.monotonic()
        self._stale = False
        self._held: dict = {}   # part name -> unit indices it holds from earlier runs (ours only)
        if self.folder.exists() or self.folder.is_symlink():
            if not self.folder.is_dir():
                raise SpoolError(f"{self.folder} is in the way of the build's spool folder; move it, or choose "
                                 "another -o")
            if not os.access(self.folder, os.R_OK | os.W_OK | os.X_OK):
                raise SpoolError(f"the spool folder {self.folder} is not writable, so the build could not keep "
                                 f"its finished units; make it writable (chmod u+rwx {self.folder}), remove it, "
                                 "or choose another -o")
            marker = self.folder / "plan.json"
            if not marker.exists():
                if any(self.folder.iterdir()):  # not a spool: some other folder under this name
                    raise SpoolError(f"{self.folder} holds files but no plan.json, so it is not this build's "
                                     "spool; move it away, or choose another -o")
                return
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
                raise SpoolError(f"{self.folder} holds the finished units of a different build ({_describe(found)}); "
                                 "choose another -o for this one, or remove the folder if that build is "
                                 "not needed")

    def finished(self) -> dict:
        """Every sealed result on disk that this build wants, by unit index. A part of ours with
        any record that fails its seal is deleted; its intact records are written again. A file
        that is not ours is left alone (and its units recomputed)."""
        out: dict = {}
        if not self.folder.is_dir():
            return out
        for path in sorted(self.folder.iterdir()):
            name = _PART.fullmatch(path.name)
            if not name:
                continue
            seq = int(name.group(1))
            self.next_part = max(self.next_part, seq + 1)
            records = self._records(path, seq)
            if records is None:  # not written for this build: someone else's file, never deleted
                self.damaged += 1
                continue
            good, intact = self._read(records)
            for index, record, result in good:
                if result is not False and index not in out:
                    out[index] = result
            if intact:
                self._held[path.name] = {index for index, _, _ in good}
            else:
                self.pending.extend(record for _, record, _ in good)  # every intact one, used or not
                self.damaged += 1
                path.unlink(missing_ok=True)
        return out

    def _records(self, path: Path, seq: int):
        """The records of a part carrying this build's fingerprint ([] if it is ours but misnamed
        or malformed), or None for a file that is not ours."""
        try:
            rec = msgpack.unpackb(path.read_bytes(), raw=False, strict_map_key=True)
        except Exception:  # unreadable, truncated or not msgpack
            return None
        if not (isinstance(rec, dict) and rec.get("plan") == self.fingerprint):
            return None
        if rec.get("part") != seq or not isinstance(rec.get("units"), list):
            return []  # ours, but copied over another part's name or damaged
        return rec["units"]

    def _read(self, records):
        """(intact records as (index, record, result or False when unwanted), whether all passed)."""
        if not records:
            return [], False
        good, intact = [], True
        for record in records:
            result = self._check(record)
            if result is None:
                intact = False
            else:
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
        seq = self.next_part
        name = f"part-{seq:06d}.part"
        try:
            if not self.folder.is_dir():
                self.folder.mkdir(parents=True, exist_ok=True)
            marker = self.folder / "plan.json"
            if self._stale or not marker.exists():
                write_atomic(marker, json.dumps(self.ident).encode(), durable=False)
                self._stale = False
            units = [self._seal(item) for item in self.pending]
            data = msgpack.packb({"plan": self.fingerprint, "part": seq, "units": units}, use_bin_type=True)
            # rename without fsync: safe against a killed process, cheap enough per batch
            write_atomic(self.folder / name, data, durable=False)
        except OSError as exc:  # name the folder, not a temporary file in it, and say what to do
            exc.filename = str(self.folder)
            if exc.errno in (errno.EACCES, errno.EPERM, errno.EROFS):
                exc.hint = ("the build cannot keep its finished units there; make the folder writable, "
                            "or choose another -o")
            raise
        # records carried over from a damaged part are not this run's: remember which units they are
        self._held[name] = {item[0] for item in self.pending if isinstance(item, list)}
        self.next_part, self.pending, self.last_flush = seq + 1, [], time.monotonic()

    def close(self) -> None:
        """End of the computation: keep what is pending if the build was long enough to spool at
        all, so a failed final write loses nothing; a short build leaves no folder behind."""
        if self.folder.is_dir():
            self.flush()

    def clean(self, used) -> tuple[int, list]:
        """Once the table is safely written: delete the parts of ours whose units from earlier runs
        were all used (used(index) -> bool), then plan.json and the folder if nothing else is left.
        Returns (units kept for another build, names of the other files left in the folder)."""
        if not self.folder.is_dir():
            return 0, []
        unused, kept = 0, set()
        for name, held in self._held.items():
            left = sum(1 for index in held if not used(index))
            if left:
                unused, kept = unused + left, kept | {name}
            else:
                (self.folder / name).unlink(missing_ok=True)
        others = sorted(p.name for p in self.folder.iterdir() if p.name != "plan.json" and p.name not in kept)
        if unused or others:
            return unused, others
        (self.folder / "plan.json").unlink(missing_ok=True)
        if not self.folder.is_symlink():  # a linked folder is the user's: only our files go
            try:
                self.folder.rmdir()
            except OSError:  # a file appeared meanwhile: it stays, and so does the folder
                pass
        return 0, []


def _describe(ident) -> str:
    """A few words on the build a plan.json belongs to, for the refusal."""
    if not isinstance(ident, dict):
        return "its plan.json is unreadable"
    space, cap = ident.get("space"), ident.get("cap")
    words = [str(ident.get("kind", "an earlier format"))]
    if isinstance(space, dict):
        words.append(f"{space.get('dims')}D ({space.get('states')},{space.get('symbols')})")
    if cap is not None:
        words.append(f"cap {cap}")
    if ident.get("seed") is not None:
        words.append(f"seed {ident['seed']}")
    if ident.get("shard") is not None:
        words.append("shard {}/{}".format(*ident["shard"]))
    return " ".join(words)


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
