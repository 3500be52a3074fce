"""Decider names, as tables record them, and their bits in the C core (pure Python, so readers
need no core; enumerator/deciders.py holds the search's own options).

None of them may change a count: each proves non-halting for every completion of
a partial machine, an undefined entry counting as a possible halt. The core's
per-decider proven weights follow this order."""
from __future__ import annotations

# Copied from the C core (csrc/ctm_core.h, CTM_DEC_* and ctm_decider_name; the C name of each
# is in its comment); tests/test_enumerator.py checks that both tables agree, bit by bit.
DECIDERS = {
    "full-table": 1,         # CTM_DEC_FULL_TABLE: every entry defined and none is HALT
    "escapee": 2,            # CTM_DEC_ESCAPEE: on fresh blank cells a chain of entries runs off the same way
    "cycler": 4,             # CTM_DEC_CYCLER: a configuration repeats exactly
    "translated-cycler": 8,  # CTM_DEC_TRANSLATED_CYCLER: a record configuration repeats shifted (1D and 2D)
    "ngram-cps": 16,         # CTM_DEC_NGRAM_CPS: n-gram closed position set (1D; 2D runs still in one row at the cap)
}
ALL_DECIDERS = tuple(DECIDERS)
STEP_BOUND = "step-bound"    # not a decider: the proven busy-beaver bound (model/bounds.py)
