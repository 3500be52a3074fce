"""The search's options beside the decider bits (the names and bits: model/deciders.py)."""
from __future__ import annotations

from ..model.deciders import ALL_DECIDERS, DECIDERS, STEP_BOUND  # noqa: F401  (the search's callers)

# Not a decider but a search option beside their bits (CTM_SEARCH_RELABEL; the binding makes it the
# core's ctm_options.relabel): exhaustive searches with m >= 3 symbols write the non-blank ones in
# first-use order, about (m-1)! times fewer nodes.
SEARCH_RELABEL = 256
# Exhaustive builds run the CPS only from this cap on: it is tried once per node, at step 128
# (enumerator/_core.pyx CPS_AT) or at the cap, and shorter caps leave mostly runs cut short.
CPS_MIN_CAP = 128
