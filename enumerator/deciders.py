"""Decider names and their bits in the C core (pure Python, so readers need no core).

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
# Not a decider but a search option beside their bits (CTM_SEARCH_RELABEL; the binding makes it the
# core's ctm_options.relabel): exhaustive searches with m >= 3 symbols write the non-blank ones in
# first-use order, about (m-1)! times fewer nodes.
SEARCH_RELABEL = 256
STEP_BOUND = "step-bound"    # not a decider: the proven busy-beaver bound (enumerator/bounds.py)
# Exhaustive builds run the CPS only from this cap on: it is tried once per node, at step 128
# (enumerator/_core.pyx CPS_AT) or at the cap, and shorter caps leave mostly runs cut short.
CPS_MIN_CAP = 128
