"""One machine in the compact text notation of the busy-beaver literature,
and its run. `1RB1LC_1RC1RB_...`: one group per state, one write/move/next
triple per symbol read; next state A, B, ...; Z halts; `---` is undefined."""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..errors import NotationError
from . import _core

HALT_LETTER = "Z"
STATUS = {0: "halted", 1: "capped", 2: "undefined"}


@dataclass(frozen=True)
class Machine:
    states: int
    symbols: int
    write: tuple  # per entry state*m + symbol
    move: tuple   # +1 right, -1 left (0 for HALT and undefined)
    next: tuple   # 0-based next state, _core.NX_HALT or _core.NX_UNDEF

    @classmethod
    def parse(cls, text: str) -> "Machine":
        text = text.strip()
        if not text:
            raise NotationError("empty machine notation; give groups such as 1RB1LB_1LA1RZ")
        groups = text.split("_")
        n = len(groups)
        if n > 25:
            raise NotationError(f"{n} states is over the notation's 25 (A..Y); use fewer states")
        if len(groups[0]) % 3:
            raise NotationError(
                f"state A has {len(groups[0])} characters; each symbol needs 3 (write, move, next)"
            )
        m = len(groups[0]) // 3
        if m < 2 or m > 10:
            raise NotationError(f"state A lists {m} symbols; the notation takes 2 to 10")
        write, move, nxt = [], [], []
        pos = 0
        for q, group in enumerate(groups):
            if len(group) != 3 * m:
                raise NotationError(
                    f"state {chr(65 + q)} (at character {pos + 1}) has {len(group)} characters, "
                    f"expected {3 * m}: every state needs one triple per symbol"
                )
            for s in range(m):
                triple = group[3 * s: 3 * s + 3]
                at = pos + 3 * s
                if triple == "---":
                    write.append(0), move.append(0), nxt.append(_core.NX_UNDEF)
                    continue
                w, d, t = triple
                if not w.isdigit() or int(w) >= m:
                    raise NotationError(f"bad write symbol {w!r} at character {at + 1}: expected 0..{m - 1}")
                if d not in "LR":
                    raise NotationError(f"bad move {d!r} at character {at + 2}: expected L or R")
                if t == HALT_LETTER:
                    write.append(int(w)), move.append(0), nxt.append(_core.NX_HALT)
                    continue
                if not ("A" <= t <= "Y") or ord(t) - 65 >= n:
                    raise NotationError(
                        f"bad next state {t!r} at character {at + 3}: expected A..{chr(64 + n)} or Z (halt)"
                    )
                write.append(int(w)), move.append(1 if d == "R" else -1), nxt.append(ord(t) - 65)
            pos += len(group) + 1
        return cls(n, m, tuple(write), tuple(move), tuple(nxt))

    def __str__(self) -> str:
        out = []
        for q in range(self.states):
            parts = []
            for s in range(self.symbols):
                e = q * self.symbols + s
                if self.next[e] == _core.NX_UNDEF:
                    parts.append("---")
                elif self.next[e] == _core.NX_HALT:
                    parts.append(f"{self.write[e]}R{HALT_LETTER}")
                else:
                    parts.append(f"{self.write[e]}{'R' if self.move[e] > 0 else 'L'}{chr(65 + self.next[e])}")
            out.append("".join(parts))
        return "_".join(out)


@dataclass(frozen=True)
class Run:
    status: str        # halted, capped or undefined
    steps: int         # transitions executed, the halting one included
    nonblank: int      # cells not holding the blank at the end
    output: bytes      # the visited span, left to right
    head: int          # head position within output
    state: int         # final state, 0-based

    @property
    def output_text(self) -> str:
        return "".join(str(s) for s in self.output)


def run(machine: Machine | str, max_steps: int, blank: int = 0) -> Run:
    """Run one 1D machine from a blank tape for at most max_steps steps."""
    if isinstance(machine, str):
        machine = Machine.parse(machine)
    if not 0 <= blank < machine.symbols:
        raise NotationError(f"blank {blank} is not a symbol of this machine (0..{machine.symbols - 1})")
    if max_steps < 0:
        raise NotationError(f"max steps must be 0 or more, got {max_steps}")
    status, steps, state, nonblank, output, head = _core.run_machine(
        machine.states,
        machine.symbols,
        np.asarray(machine.write, dtype=np.uint8),
        np.asarray(machine.move, dtype=np.int8),
        np.asarray(machine.next, dtype=np.int16),
        blank,
        max_steps,
    )
    return Run(STATUS[status], steps, nonblank, output, head, state)
