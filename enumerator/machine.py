"""One machine in the compact text notation of the busy-beaver literature,
and its run. `1RB1LC_1RC1RB_...`: one group per state, one write/move/next
triple per symbol read; next state A, B, ...; Z halts; `---` is undefined."""
from __future__ import annotations

import dataclasses
from dataclasses import dataclass

import numpy as np

from ..errors import NotationError, SpaceError, TooLargeError
from .native import core as _core

HALT_LETTER = "Z"
STATUS = {0: "halted", 1: "capped", 2: "undefined"}  # and "escapes", found here in Python


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
    status: str        # halted, capped, undefined or escapes (never halts)
    steps: int         # transitions executed, the halting one included
    nonblank: int      # cells not holding the blank at the end
    output: bytes      # the visited span, left to right
    head: int          # head position within output
    state: int         # final state, 0-based

    @property
    def output_text(self) -> str:
        return "".join(str(s) for s in self.output)


# A run's visited cells are bounded so that `run` cannot take the memory of the host: the core
# doubles its tape as the head moves on, so a machine that keeps heading into fresh cells would
# otherwise allocate about 2 bytes per step (2 GB at a cap of 10^9).
RUN_CELLS = 1 << 28
FIRST_CHUNK = 256  # steps of the first try; each later try runs GROWTH times as far
GROWTH = 8  # (the tries restart from blank: they cost at most 1/7 more than one run)
MAX_RUN_STEPS = (1 << 64) - 1  # the core counts steps in 64 bits


def _runs_off(machine: Machine, state: int, symbol: int, side: int, blank: int) -> int:
    """At the `side` edge (+1 right, -1 left) of the visited cells, in `state`, reading `symbol`:
    the steps until the machine provably runs off that side forever (moving that way onto fresh
    blanks, in a cycle of states), or 0 if it does not. The escapee argument of the deciders."""
    m, seen, steps = machine.symbols, set(), 0
    while True:
        e = state * m + symbol
        if machine.next[e] < 0 or machine.move[e] != side:
            return 0
        state, symbol, steps = machine.next[e], blank, steps + 1
        if state in seen:
            return steps
        seen.add(state)


def _edge_escape(machine: Machine, r: "Run", blank: int) -> bool:
    for side, at_edge in ((-1, r.head == 0), (1, r.head == len(r.output) - 1)):
        if at_edge and _runs_off(machine, r.state, r.output[r.head], side, blank):
            return True
    return False


def _core_moves(machine: Machine) -> np.ndarray:
    """The moves as the core's direction indices (+1 R, -1 L; the 0 of HALT and undefined
    entries, which the core never reads, as R)."""
    index = {letter: k for k, letter in _core.MOVES[1].items()}
    return np.asarray([index["L" if d < 0 else "R"] for d in machine.move], dtype=np.int8)


def _core_run(machine: Machine, max_steps: int, blank: int) -> Run:
    status, steps, state, nonblank, output, head = _core.run_machine(
        machine.states,
        machine.symbols,
        np.asarray(machine.write, dtype=np.uint8),
        _core_moves(machine),
        np.asarray(machine.next, dtype=np.int16),
        blank,
        max_steps,
    )
    return Run(STATUS[status], steps, nonblank, output, head, state)


def run(machine: Machine | str, max_steps: int, blank: int = 0) -> Run:
    """Run one 1D machine from a blank tape for at most max_steps steps. Status 'escapes': by
    `steps` the run provably heads into blank cells forever (it never halts), so it was stopped.
    A machine whose tape would grow past RUN_CELLS cells before max_steps is refused
    (TooLargeError), judged by its growth in the tries so far, which start short."""
    if isinstance(machine, str):
        machine = Machine.parse(machine)
    if not 0 <= blank < machine.symbols:
        raise NotationError(f"blank {blank} is not a symbol of this machine (0..{machine.symbols - 1})")
    if not isinstance(max_steps, int) or isinstance(max_steps, bool) or not 0 <= max_steps <= MAX_RUN_STEPS:
        raise SpaceError(f"max steps must be a whole number from 0 to 2^64 - 1, got {max_steps!r}")
    first = machine.move[blank] and _runs_off(machine, 0, blank, machine.move[blank], blank)
    limit = min(max_steps, first or FIRST_CHUNK)
    before = (0, 1)  # (steps, visited cells) of the previous try
    while True:
        r = _core_run(machine, limit, blank)
        if r.status != "capped":
            return r
        if _edge_escape(machine, r, blank):
            return dataclasses.replace(r, status="escapes")
        if limit == max_steps:
            return r
        nxt = min(max_steps, GROWTH * limit)
        if nxt < RUN_CELLS:  # a run visits at most steps + 1 cells
            before, limit = (r.steps, len(r.output)), nxt
            continue
        pace = (len(r.output) - before[1]) / max(1, r.steps - before[0])  # new cells per step lately
        if len(r.output) + pace * (nxt - limit) > RUN_CELLS:
            safe = limit + int((RUN_CELLS - len(r.output)) / pace) if pace > 0 else limit
            raise TooLargeError(
                f"the tape grew to {len(r.output):,} cells in {r.steps:,} steps; at that pace a run of "
                f"{max_steps:,} steps would pass the limit of {RUN_CELLS:,} cells ({RUN_CELLS >> 20} MiB); "
                f"give --max-steps {max(safe, limit)} or fewer")
        before, limit = (r.steps, len(r.output)), nxt
