"""The build spool: finished units on disk, so a killed build resumes."""
from __future__ import annotations

import json
import shutil
from pathlib import Path

from ..errors import CtmtabError
from ..fsutil import write_atomic
from .units import Plan, dump_result, load_result, unit_weight_ok


class SpoolError(CtmtabError):
    """The spool folder belongs to another build or is damaged."""


class Spool:
    """A folder OUTPUT.parts/ holding plan.json and one file per finished unit."""

    def __init__(self, folder, plan: Plan):
        self.folder = Path(folder)
        self.plan = plan
        ident = {"plan": plan.ident, "space": plan.space.to_dict(), "cap": plan.cap, "units": plan.count}
        marker = self.folder / "plan.json"
        if marker.exists():
            try:
                found = json.loads(marker.read_text())
            except (OSError, ValueError):
                found = None
            if found != ident:
                raise SpoolError(f"{self.folder} holds the parts of a different build; delete it, or choose "
                                 "another --output")
        else:
            self.folder.mkdir(parents=True, exist_ok=True)
            write_atomic(marker, json.dumps(ident).encode())

    def _path(self, index: int) -> Path:
        return self.folder / f"unit-{index:07d}.part"

    def finished(self, indices) -> dict:
        """Results already on disk for these indices; damaged parts are dropped (and recomputed)."""
        out = {}
        for k in indices:
            p = self._path(k)
            if not p.exists():
                continue
            try:
                result = load_result(p.read_bytes())
            except Exception:  # a damaged part is recomputed, never trusted
                p.unlink()
                continue
            if unit_weight_ok(result, self.plan.unit(k).weight):
                out[k] = result
            else:
                p.unlink()
        return out

    def save(self, index: int, result: dict) -> None:
        # rename without fsync: safe against a killed process, cheap enough per unit
        write_atomic(self._path(index), dump_result(result), durable=False)

    @staticmethod
    def discard(folder) -> None:
        """Remove a spool once its table is safely written."""
        shutil.rmtree(folder, ignore_errors=True)
