# cython: language_level=3, boundscheck=False, wraparound=False
"""Thin binding over the C core: converts results to Python objects and maps
every C error code to one Python exception, in one place (``_check``)."""
from libc.stdint cimport uint8_t, int8_t, int16_t, uint16_t, uint32_t, int64_t, uint64_t
from libc.stdlib cimport malloc, free
from libc.string cimport memset

# gcc's -Warray-bounds misfires on the PyObject casts of Python's headers in this generated file
# (not in csrc/, which compiles clean with -Wall -Wextra): silenced here, for this file alone.
cdef extern from *:
    """
    #if defined(__GNUC__) && !defined(__clang__)
    #pragma GCC diagnostic ignored "-Warray-bounds"
    #endif
    """

cdef extern from "csrc/ctm_core.h" nogil:
    ctypedef struct ctm_count:
        pass
    int CTM_API_VERSION
    int CTM_OK, CTM_ENOMEM, CTM_EINVAL, CTM_EOVERFLOW, CTM_ESTOP
    int CTM_NX_HALT, CTM_NX_UNDEF
    int CTM_MAX_ENTRIES
    int CTM_MAX_CAP_2D
    int CTM_DEC_COUNT
    unsigned CTM_DEC_BIT(int d)
    unsigned CTM_SEARCH_RELABEL
    int CTM_ENTRY_UNDEF, CTM_ENTRY_MOVE, CTM_ENTRY_HALT
    int CTM_R, CTM_L, CTM_N, CTM_E, CTM_S, CTM_W
    const char *ctm_decider_name(int d)
    size_t CTM_HOLDOUT_BYTES(int nent)
    const char *ctm_strerror(int code)
    ctypedef struct ctm_map:
        uint64_t *hashes
        uint64_t *offs
        uint32_t *lens
        ctm_count *vals
        size_t cap, size
        uint8_t *arena
    ctypedef enum ctm_mode:
        CTM_MODE_FULL, CTM_MODE_PLAN, CTM_MODE_PROBE, CTM_MODE_SAMPLE
    ctypedef struct ctm_options:
        int dims
        int n, m
        int64_t cap
        ctm_mode mode
        unsigned deciders
        int relabel
        int cut_depth
        int prefix_len
        const uint16_t *prefix
        uint64_t seed
        int64_t keep_size
        int64_t settle_size
        int keep_holdouts
        int64_t cps_at
    ctypedef struct ctm_results:
        ctm_map raw
        ctm_map cut
        ctm_count halting, non_halting, undecided
        ctm_count proven[5]
        uint64_t proven_nodes[5]
        ctm_map undec
        ctm_map late
        ctm_count late_halting, late_proven
        uint64_t late_nodes[3]
        uint64_t late_steps
        uint8_t *holdouts
        size_t n_holdouts
        ctm_count *hist_steps
        ctm_count *hist_len
        uint64_t halting_nodes
        uint64_t undecided_nodes
        int64_t longest_run, most_nonblank
        uint64_t steps
        uint16_t *cuts
        ctm_count *cut_weights
        size_t n_cuts
        double est_nodes, est_steps
    ctypedef struct ctm_unit:  # its workspace, ws, is the core's own
        ctm_options opt
        ctm_results res
    int ctm_unit_init(ctm_unit *u)
    int ctm_unit_run(ctm_unit *u)
    int ctm_sample(ctm_unit *u, uint64_t count)
    void ctm_unit_free(ctm_unit *u)
    ctypedef struct ctm_machine:
        int n, m
        const int8_t *def_ "def"
        const uint8_t *wr
        const int8_t *mv
        const uint8_t *nx
    ctypedef struct ctm_cps_ws:
        pass
    ctm_cps_ws *ctm_cps_ws_new()
    int ctm_cps1d(ctm_cps_ws *ws, const ctm_machine *mc, int max_attempts)
    int ctm_cps1d_plan(ctm_cps_ws *ws, const ctm_machine *mc, const int (*plan)[3], int len)
    int ctm_cps1d_at_cap(ctm_cps_ws *ws, const ctm_machine *mc)
    int ctm_cps1d_search(ctm_cps_ws *ws, const ctm_machine *mc, int at_cap)
    int ctm_cps_attempts()
    void ctm_cps_ws_packed(ctm_cps_ws *ws, int on)
    void ctm_cps_ws_bitsets(ctm_cps_ws *ws, int on)
    ctypedef struct ctm_run_result:
        int status
        uint64_t steps
        int state
        uint64_t nonblank
        uint8_t *output
        size_t output_len
        int64_t head
    int ctm_run1d(int n, int m, const uint8_t *wr, const int8_t *mv, const int16_t *nx,
                  uint8_t blank, uint64_t max_steps, ctm_run_result *res)
    void ctm_free(void *p)

cdef extern from "csrc/ctm_count.h" nogil:
    uint64_t ctm_count_lo(const ctm_count *x)
    uint64_t ctm_count_hi(const ctm_count *x)

API_VERSION = CTM_API_VERSION
MAX_ENTRIES = CTM_MAX_ENTRIES
MAX_CAP_2D = CTM_MAX_CAP_2D
NX_HALT = CTM_NX_HALT
NX_UNDEF = CTM_NX_UNDEF
# The C core's decider bits by name, in the order of its proven[] (enumerator/deciders.py keeps
# a copy for readers without the core; a test compares the two).
DECIDERS = {ctm_decider_name(d).decode(): CTM_DEC_BIT(d) for d in range(CTM_DEC_COUNT)}
SEARCH_RELABEL = CTM_SEARCH_RELABEL
ENTRY_MOVE = CTM_ENTRY_MOVE  # def[e] of a MOVE in holdout records and cps_prove
MOVES = {1: {CTM_R: "R", CTM_L: "L"}, 2: {CTM_N: "N", CTM_E: "E", CTM_S: "S", CTM_W: "W"}}  # mv[e]


from ctmtab.errors import (CoreArgumentError, CoreMemoryError, CoreOverflowError, CoreStoppedError,
                           InvariantError)

# Every core error code has its own class (a code the binding does not know is a bug: exit 3).
_ERRORS = {
    CTM_ENOMEM: (CoreMemoryError, "; use fewer --workers or a smaller cap"),
    CTM_EINVAL: (CoreArgumentError, ""),
    CTM_EOVERFLOW: (CoreOverflowError, "; use fewer states or symbols"),
    CTM_ESTOP: (CoreStoppedError, ""),
}


cdef int _check(int rc) except -1:
    if rc == CTM_OK:
        return 0
    cls, hint = _ERRORS.get(rc, (InvariantError, f" (code {rc}); this is a bug, please report it"))
    raise cls("the compiled core: " + ctm_strerror(rc).decode() + hint)


cdef object _int(const ctm_count *x):
    return (int(ctm_count_hi(x)) << 64) | int(ctm_count_lo(x))


# 1D: try CPS when a segment reaches this step, so a proof saves the run to the cap
cdef int64_t CPS_AT = 128


cdef _setup(ctm_unit *u, ctm_mode mode, int dims, int n, int m, int64_t cap, unsigned bits):
    """The options of a unit; bits: the decider bits, plus SEARCH_RELABEL for the relabelling."""
    memset(u, 0, sizeof(ctm_unit))
    u.opt.mode = mode
    u.opt.dims = dims
    u.opt.n = n
    u.opt.m = m
    u.opt.cap = cap
    u.opt.deciders = bits & ~CTM_SEARCH_RELABEL
    u.opt.relabel = (bits & CTM_SEARCH_RELABEL) != 0
    u.opt.cps_at = CPS_AT if cap > CPS_AT else 0


cdef dict _map_items(ctm_map *mp):
    cdef size_t j
    out = {}
    if mp.hashes == NULL or mp.size == 0:
        return out
    for j in range(mp.cap):
        if mp.hashes[j]:
            out[mp.arena[mp.offs[j]:mp.offs[j] + mp.lens[j]]] = _int(&mp.vals[j])
    return out


cdef list _hist(ctm_count *h, int64_t n):
    """A histogram up to its last non-zero entry (sums of histograms pad the shorter ones)."""
    cdef int64_t end = n
    while end > 0 and ctm_count_lo(&h[end - 1]) == 0 and ctm_count_hi(&h[end - 1]) == 0:
        end -= 1
    return [_int(&h[i]) for i in range(end)]


cdef dict _result(ctm_unit *u, int64_t cap):
    cdef int64_t i
    cdef int k
    raw = _map_items(&u.res.raw)
    undec = {}
    for key, w in _map_items(&u.res.undec).items():
        undec[(int.from_bytes(key[:4], "little"), int.from_bytes(key[4:], "little"))] = w
    return dict(
        proven=[_int(&u.res.proven[k]) for k in range(CTM_DEC_COUNT)],
        proven_nodes=[int(u.res.proven_nodes[k]) for k in range(CTM_DEC_COUNT)],
        undecided_by_size=undec,
        raw=raw,
        cut=_map_items(&u.res.cut),
        halting=_int(&u.res.halting),
        non_halting=_int(&u.res.non_halting),
        undecided=_int(&u.res.undecided),
        # no entry lies past the longest run (an output has at most steps + 1 cells): a cap of
        # millions of steps leaves megabytes of untouched zeros that are not worth scanning
        hist_steps=_hist(u.res.hist_steps, min(cap + 1, u.res.longest_run + 1)),
        hist_len=_hist(u.res.hist_len, min(cap + 2, u.res.longest_run + 2)),
        halting_nodes=int(u.res.halting_nodes),
        undecided_nodes=int(u.res.undecided_nodes),
        longest_run=int(u.res.longest_run),
        most_nonblank=int(u.res.most_nonblank),
        steps=int(u.res.steps),
        late=_map_items(&u.res.late),
        late_halting=_int(&u.res.late_halting),
        late_proven=_int(&u.res.late_proven),
        late_nodes=[int(u.res.late_nodes[k]) for k in range(3)],
        late_steps=int(u.res.late_steps),
    )


def sample_unit(int dims, int n, int m, int64_t cap, unsigned deciders, uint64_t seed, uint64_t count):
    """Run `count` machines drawn uniformly from the full space with the stream of `seed`."""
    cdef ctm_unit u
    cdef int rc
    _setup(&u, CTM_MODE_SAMPLE, dims, n, m, cap, deciders)
    u.opt.seed = seed if seed else 1
    try:
        _check(ctm_unit_init(&u))
        with nogil:
            rc = ctm_sample(&u, count)
        _check(rc)
        return _result(&u, cap)
    finally:
        ctm_unit_free(&u)


def run_unit(int dims, int n, int m, int64_t cap, unsigned deciders, prefix=(), int cut_depth=-1,
             bint holdouts=False, int64_t cps_at=-1, int64_t keep_size=0, int64_t settle_size=0):
    """Enumerate one work unit of the space (dims, n, m) under cap.

    deciders: the decider bits (DECIDERS), plus SEARCH_RELABEL for the first-use symbol order.
    prefix: the move-option indices to follow through the first len(prefix)
    branch points (the unit's subtree); cut_depth >= 0 lists, instead of
    exploring, the branch points of that depth (they become their own units).
    Returns a dict of exact Python ints; raw outputs carry a leading byte, the
    symmetry class whose images are still to be added (see tally.py)."""
    cdef ctm_unit u
    cdef uint16_t *pre = NULL
    cdef int rc, i, k = len(prefix)
    cdef size_t j
    _setup(&u, CTM_MODE_PLAN if cut_depth >= 0 else CTM_MODE_FULL, dims, n, m, cap, deciders)
    u.opt.cut_depth = cut_depth
    u.opt.keep_holdouts = holdouts
    u.opt.keep_size = keep_size
    u.opt.settle_size = settle_size
    if cps_at >= 0:
        u.opt.cps_at = cps_at
    if k:
        pre = <uint16_t *>malloc(k * sizeof(uint16_t))
        if pre == NULL:
            raise MemoryError("out of memory")
        for i in range(k):
            pre[i] = prefix[i]
        u.opt.prefix = pre
        u.opt.prefix_len = k
    try:
        _check(ctm_unit_init(&u))
        with nogil:
            rc = ctm_unit_run(&u)
        _check(rc)
        out = _result(&u, cap)
        out["cuts"] = [(tuple(u.res.cuts[j * cut_depth + i] for i in range(cut_depth)), _int(&u.res.cut_weights[j]))
                       for j in range(u.res.n_cuts)] if cut_depth >= 0 else []
        out["holdouts"] = bytes(u.res.holdouts[:u.res.n_holdouts * CTM_HOLDOUT_BYTES(n * m)]) if u.res.n_holdouts else b""
        return out
    finally:
        ctm_unit_free(&u)
        free(pre)


def probe(int dims, int n, int m, int64_t cap, unsigned deciders, uint64_t seed, int walks, prefix=()):
    """Knuth's estimate of the (sub)tree below prefix: mean over random walks to
    a leaf of the branch-point count and of the simulated steps. Returns (nodes, steps)."""
    cdef ctm_unit u
    cdef int w, i, rc = 0, k = len(prefix)
    cdef uint16_t pre[64]
    if k > 64:
        raise ValueError("prefix too long")
    _setup(&u, CTM_MODE_PROBE, dims, n, m, cap, deciders)
    u.opt.seed = seed if seed else 1
    for i in range(k):
        pre[i] = prefix[i]
    u.opt.prefix = pre
    u.opt.prefix_len = k
    try:
        _check(ctm_unit_init(&u))
        with nogil:
            for w in range(walks):
                rc = ctm_unit_run(&u)
                if rc:
                    break
        _check(rc)
        return u.res.est_nodes / walks, u.res.est_steps / walks
    finally:
        ctm_unit_free(&u)


def run_machine(int n, int m, const uint8_t[:] wr, const int8_t[:] mv, const int16_t[:] nx,
                int blank, uint64_t max_steps):
    """Run one 1D machine (mv: the direction index, MOVES[1]); returns (status, steps, state,
    nonblank, output, head)."""
    cdef ctm_run_result res
    cdef int rc
    if wr.shape[0] != n * m or mv.shape[0] != n * m or nx.shape[0] != n * m:
        raise ValueError("transition arrays must have n*m entries")
    with nogil:
        rc = ctm_run1d(n, m, &wr[0], &mv[0], &nx[0], <uint8_t>blank, max_steps, &res)
    _check(rc)
    try:
        output = bytes(res.output[:res.output_len])
    finally:
        ctm_free(res.output)
    return res.status, int(res.steps), res.state, int(res.nonblank), output, int(res.head)


cdef ctm_cps_ws *_cps_ws = NULL


cdef ctm_cps_ws *_ws() except NULL:
    """One CPS workspace for this process's calls from Python (they hold the GIL)."""
    global _cps_ws
    if _cps_ws == NULL:
        _cps_ws = ctm_cps_ws_new()
        if _cps_ws == NULL:
            raise MemoryError("out of memory")
    return _cps_ws


def cps_prove(int n, int m, const int8_t[:] defined, const uint8_t[:] wr, const int8_t[:] mv,
              const uint8_t[:] nx, int attempts=-1, plan=None, bint at_cap=False, bint packed=True,
              bint bitsets=True, stage=None):
    """n-gram CPS on one partial 1D machine (defined[e] ENTRY_MOVE = MOVE, mv as in MOVES[1]):
    the 1-based attempt of the schedule that proved non-halting, or 0. plan: a schedule of
    (window n, history k, log2 of the configurations allowed) instead of the build's.
    at_cap: the costlier attempts a build adds at the cap (numbered after the others).
    packed: False runs every attempt on the word-array sets (the same fixed point, slower).
    bitsets: False never uses the bit masks of binary plain-window attempts (the same fixed
    point again), so a test can compare all three. stage: "early" or "cap", what the 1D search
    tries at its early step or at the cap (for binary machines not the schedule above: see
    ctm_cps1d_search), numbered within that stage."""
    cdef ctm_machine mc
    cdef int rc, i
    cdef int steps[64][3]
    if n < 1 or m < 2 or n * m > CTM_MAX_ENTRIES:
        raise ValueError("a machine needs 1 or more states, 2 or more symbols, and at most 64 entries")
    if defined.shape[0] != n * m or wr.shape[0] != n * m or mv.shape[0] != n * m or nx.shape[0] != n * m:
        raise ValueError("transition arrays must have n*m entries")
    mc.n = n
    mc.m = m
    mc.def_ = &defined[0]
    mc.wr = &wr[0]
    mc.mv = &mv[0]
    mc.nx = &nx[0]
    cdef ctm_cps_ws *ws = _ws()
    ctm_cps_ws_packed(ws, packed)
    ctm_cps_ws_bitsets(ws, bitsets)
    if stage not in (None, "early", "cap"):
        raise ValueError("stage is 'early' or 'cap'")
    if stage is not None:
        rc = ctm_cps1d_search(ws, &mc, stage == "cap")
    elif plan is not None:
        if len(plan) > 64:
            raise ValueError("a CPS schedule has at most 64 attempts")
        for i in range(len(plan)):
            steps[i][0], steps[i][1], steps[i][2] = plan[i]
        rc = ctm_cps1d_plan(ws, &mc, steps, len(plan))
    elif at_cap:
        rc = ctm_cps1d_at_cap(ws, &mc)
    else:
        rc = ctm_cps1d(ws, &mc, attempts if attempts >= 0 else ctm_cps_attempts())
    if rc < 0:
        _check(rc)
    return rc

