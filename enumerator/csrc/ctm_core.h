/* ctm_core: the exhaustive tree-normal-form enumerator and the single-machine
 * simulator. Plain C99 plus the unsigned __int128 extension of gcc/clang; no
 * Python.h. Every function returns 0 or a negative CTM_E* code. */
#ifndef CTM_CORE_H
#define CTM_CORE_H

#include <stddef.h>
#include <stdint.h>

#define CTM_API_VERSION 10 /* enumerator/native.py refuses a module built with another */

#define CTM_OK 0
#define CTM_ENOMEM (-1)    /* an allocation failed */
#define CTM_EINVAL (-2)    /* bad argument: space, cap, mode or prefix */
#define CTM_EOVERFLOW (-3) /* a weight does not fit 128 bits */
#define CTM_ESTOP (-4)     /* the caller asked to stop */

#define CTM_MAX_ENTRIES 64 /* n*m, the number of transition-table entries */
#define CTM_MAX_CAP_2D 4096 /* the 2D grid is (2 cap + 3)^2 bytes */

/* A head move is a direction index everywhere in the core (the search, ctm_machine, the holdout
 * records and ctm_run1d), stored in int8_t arrays. 1D uses R and L only. */
typedef enum { CTM_R = 0, CTM_L = 1 } ctm_dir1;                      /* 1D */
typedef enum { CTM_N = 0, CTM_E = 1, CTM_S = 2, CTM_W = 3 } ctm_dir2; /* 2D */

/* What a transition-table entry holds (def[e] in int8_t arrays). The search only defines MOVEs
 * (a HALT is a leaf of the branch point, never stored); sampled machines have HALT entries. */
typedef enum {
    CTM_ENTRY_UNDEF = 0, /* not yet chosen: a branch point, or for the provers a possible halt */
    CTM_ENTRY_MOVE = 1,  /* write wr, move mv, go to state nx */
    CTM_ENTRY_HALT = 2,  /* write wr and halt */
} ctm_entry;

/* The deciders, in the order of ctm_results.proven[]. Each has one bit in ctm_options.deciders;
 * enumerator/deciders.py names the bits for Python (the name each maps to is in the comment;
 * ctm_decider_name gives it, and a test checks that both tables agree). */
typedef enum {
    CTM_DECIDER_FULL_TABLE,        /* "full-table": fully defined table, no HALT entry */
    CTM_DECIDER_ESCAPEE,           /* "escapee": runs off on fresh blank tape */
    CTM_DECIDER_CYCLER,            /* "cycler": a configuration repeats */
    CTM_DECIDER_TRANSLATED_CYCLER, /* "translated-cycler": a record configuration repeats shifted */
    CTM_DECIDER_NGRAM_CPS,         /* "ngram-cps": n-gram closed position set (1D; 2D runs still in
                                      one row at the cap) */
    CTM_DEC_COUNT                  /* the number of deciders */
} ctm_decider;
#define CTM_DEC_BIT(d) (1u << (d))
#define CTM_DEC_FULL_TABLE CTM_DEC_BIT(CTM_DECIDER_FULL_TABLE)                 /* 1 */
#define CTM_DEC_ESCAPEE CTM_DEC_BIT(CTM_DECIDER_ESCAPEE)                       /* 2 */
#define CTM_DEC_CYCLER CTM_DEC_BIT(CTM_DECIDER_CYCLER)                         /* 4 */
#define CTM_DEC_TRANSLATED_CYCLER CTM_DEC_BIT(CTM_DECIDER_TRANSLATED_CYCLER)   /* 8 */
#define CTM_DEC_NGRAM_CPS CTM_DEC_BIT(CTM_DECIDER_NGRAM_CPS)                   /* 16 */
#define CTM_DEC_ALL (CTM_DEC_BIT(CTM_DEC_COUNT) - 1u)
const char *ctm_decider_name(int d); /* the Python name of decider d, NULL past the last */

/* How a segment ends without reaching a branch point: undecided, or proven by one decider. */
typedef enum {
    CTM_OUTCOME_UNDECIDED = 0,
    CTM_OUTCOME_FULL_TABLE = 1 + CTM_DECIDER_FULL_TABLE,
    CTM_OUTCOME_ESCAPEE = 1 + CTM_DECIDER_ESCAPEE,
    CTM_OUTCOME_CYCLER = 1 + CTM_DECIDER_CYCLER,
    CTM_OUTCOME_TRANSLATED_CYCLER = 1 + CTM_DECIDER_TRANSLATED_CYCLER,
    CTM_OUTCOME_NGRAM_CPS = 1 + CTM_DECIDER_NGRAM_CPS,
} ctm_outcome;
#define CTM_OUTCOME_DECIDER(o) ((int)(o) - 1) /* the proof's index in proven[] */

/* The bit beside the decider bits in the search word of the binding and of plan files (Python
 * SEARCH_RELABEL): the binding turns it into ctm_options.relabel; the core never reads it. */
#define CTM_SEARCH_RELABEL 256u

#define CTM_PROBE_RUN 65536 /* probe walks simulate at most this many steps per segment */
#define CTM_QUIET_AT 131072 /* 1D: no cycler checks past this step (see SEGMENT) */
#define CTM_REC_RING 32    /* records kept per side for the translated-cycler check */
#define CTM_REC_WINDOW 64  /* cells kept behind each record */
#define CTM_REC2_RING 32   /* 2D: records kept, all sides together */
#define CTM_REC2_W 16      /* 2D: the square of cells kept around each record */

typedef unsigned __int128 ctm_count;

/* One partial 1D machine for the provers: entry e = state*m + symbol; def[e]
 * CTM_ENTRY_MOVE (wr, mv CTM_R / CTM_L, nx), any other kind may halt. */
typedef struct {
    int n, m;
    const int8_t *def;
    const uint8_t *wr;
    const int8_t *mv;
    const uint8_t *nx;
} ctm_machine;

/* n-gram CPS over a fixed schedule of window lengths and history depths:
 * the 1-based attempt that proved non-halting, 0 if none did, or an error. */
typedef struct ctm_cps_ws ctm_cps_ws; /* reusable CPS workspace; NULL: one per call */
ctm_cps_ws *ctm_cps_ws_new(void);
void ctm_cps_ws_free(ctm_cps_ws *ws);
int ctm_cps1d(ctm_cps_ws *ws, const ctm_machine *mc, int max_attempts);
/* The same over a schedule of the caller's: plan[i] = {n, k, log2 limit}. */
#define CTM_CPS_MAX_WINDOW 16
#define CTM_CPS_MAX_LOG2 24
int ctm_cps1d_plan(ctm_cps_ws *ws, const ctm_machine *mc, const int (*plan)[3], int len);
int ctm_cps_attempts(void);
/* 0: every attempt on the word-array sets, never the packed ones (tests compare the two) */
void ctm_cps_ws_packed(ctm_cps_ws *ws, int on);
void ctm_cps_ws_bitsets(ctm_cps_ws *ws, int on); /* tests: off = never the bitset attempt */
/* The attempts tried at the cap after those, numbered on from ctm_cps_attempts() + 1. */
int ctm_cps1d_at_cap(ctm_cps_ws *ws, const ctm_machine *mc);
/* What the 1D search tries at its early step (at_cap 0) and at the cap (1): the two above for
 * 3 or more symbols; for 2, the plain windows early and the history attempts at the cap. */
int ctm_cps1d_search(ctm_cps_ws *ws, const ctm_machine *mc, int at_cap);

const char *ctm_strerror(int code);

/* ---- byte-string -> count map (exact 128-bit values) ---- */
typedef struct {
    uint64_t *hashes; /* 0 = empty slot */
    uint64_t *offs;
    uint32_t *lens;
    ctm_count *vals;
    size_t cap, size;
    uint8_t *arena;
    size_t arena_len, arena_cap;
} ctm_map;

int ctm_map_init(ctm_map *map);
void ctm_map_free(ctm_map *map);
int ctm_map_add(ctm_map *map, const uint8_t *key, uint32_t len, ctm_count val);

/* ---- the enumeration of one work unit ---- */

/* What a unit's search does. */
typedef enum {
    CTM_MODE_FULL = 0, /* ctm_unit_run: the whole subtree below the prefix, every leaf tallied */
    CTM_MODE_PLAN,     /* ctm_unit_run: as FULL above cut_depth, but each branch point at that depth
                          is listed in cuts (a unit of its own), not explored */
    CTM_MODE_PROBE,    /* ctm_unit_run: one random root-to-leaf walk per call, into est_nodes and
                          est_steps (Knuth's estimate); nothing is tallied */
    CTM_MODE_SAMPLE,   /* ctm_sample: complete machines drawn uniformly, each run and tallied */
} ctm_mode;

/* Inputs: set by the caller before ctm_unit_init, never written by the core. */
typedef struct {
    int dims;           /* 1 or 2 */
    int n, m;           /* states, symbols */
    int64_t cap;        /* step cap T */
    ctm_mode mode;
    unsigned deciders;  /* CTM_DEC_* bits */
    int relabel;        /* != 0: write the non-blank symbols in first-use order (relabelling them
                           maps runs onto runs), the new one standing for every unused symbol. Raw
                           keys then carry the symbols in use. Needs m <= 64 */
    int cut_depth;      /* CTM_MODE_PLAN: the depth of the branch points listed */
    int prefix_len;     /* > 0: follow prefix[] through the first prefix_len branch points */
    const uint16_t *prefix;
    uint64_t seed;      /* CTM_MODE_PROBE and CTM_MODE_SAMPLE: the random stream's seed */
    int64_t keep_size;  /* > 0: a halting output longer (2D: on its longer side) than this adds
                           only its weight to `cut`, never its cells to `raw` */
    int64_t settle_size; /* > 0: run on every node undecided at the cap whose box (2D: both sides)
                            is at most this, past the cap, until it halts, repeats a configuration
                            or outgrows it (the run-on; at most keep_size when both are set) */
    int keep_holdouts;  /* != 0: list every undecided node in holdouts */
    int64_t cps_at;     /* 1D: try CPS once when a segment reaches this step (0: only at the cap;
                           samples always try it at the cap only) */
} ctm_options;

/* Outputs: weights count machines on blank 0, mirror images included. ctm_unit_init zeroes them;
 * the maps and arrays are owned by the unit and freed by ctm_unit_free. */
typedef struct {
    ctm_map raw;         /* key = flag byte (class | symbols in use << 2) + output symbols */
    ctm_map cut;         /* keep_size: key = class byte, uint32 rows, uint32 cols -> raw weight */
    ctm_count halting, non_halting, undecided;
    ctm_count proven[CTM_DEC_COUNT]; /* non-halting weight by the decider (ctm_decider) that proved it */
    uint64_t proven_nodes[CTM_DEC_COUNT]; /* tree nodes each proof closed */
    ctm_map undec;       /* undecided weight by size at the cap: key uint32 rows, uint32 cols;
                            with settle_size, a node run on is recorded where it outgrew it */
    ctm_map late;        /* settle_size: halting outputs found past the cap, keyed as raw */
    ctm_count late_halting, late_proven; /* run-on weight that halted / repeated or closed */
    uint64_t late_nodes[3]; /* run-on tree nodes: halting leaves, proven, outgrown */
    uint64_t late_steps; /* steps simulated past the cap */
    uint8_t *holdouts;   /* keep_holdouts: records of CTM_HOLDOUT_BYTES(nent) bytes */
    size_t n_holdouts;
    ctm_count *hist_steps; /* [cap + 1], index = halting step */
    ctm_count *hist_len;   /* [cap + 2], index = output length */
    uint64_t halting_nodes;
    uint64_t undecided_nodes; /* tree nodes left undecided at the cap */
    int64_t longest_run;
    int64_t most_nonblank;
    uint64_t steps;      /* simulated steps, for speed figures */
    uint16_t *cuts;      /* CTM_MODE_PLAN: the paths of the listed units, cut_depth entries each */
    ctm_count *cut_weights; /* machines each listed unit stands for */
    size_t n_cuts;
    double est_nodes, est_steps; /* CTM_MODE_PROBE: summed over the walks */
} ctm_results;

/* Private to the core: the search's state. */
typedef struct {
    unsigned dec;                /* the deciders in force (a sample with a HALT drops full-table) */
    int64_t cps_at;              /* the CPS step in force (samples: 0) */
    int nent, used, ndef;
    int past_cap;                /* inside a run-on */
    int usym;                    /* relabel: non-blank symbols written so far (1..usym) */
    int pow_overflow;            /* opts^nent passes 128 bits: sampling only */
    int sym;                     /* symmetry class of the path: 0 none yet, 1, 2 (2D) */
    ctm_count factor[3];         /* machines per class member: 1, 2 (1D) or 1, 4, 8 (2D) */
    int8_t def[CTM_MAX_ENTRIES]; /* ctm_entry */
    uint8_t wr[CTM_MAX_ENTRIES];
    int8_t mv[CTM_MAX_ENTRIES];  /* direction index: ctm_dir1 or ctm_dir2 */
    uint8_t nx[CTM_MAX_ENTRIES];
    uint32_t tr[CTM_MAX_ENTRIES]; /* an entry in one word, def | mv << 2 | wr << 8 | nx * m << 16
                                     (set_tr), so the 1D loop loads one word per step */
    uint8_t sb_state[CTM_MAX_ENTRIES]; /* 1D: state * m -> state */
    ctm_count pow_opts[CTM_MAX_ENTRIES + 1];
    uint16_t path[CTM_MAX_ENTRIES];
    int64_t dx[4], dy[4], dh[4]; /* per direction: coordinate and cell-index steps */
    int64_t eh[CTM_MAX_ENTRIES], ex[CTM_MAX_ENTRIES], ey[CTM_MAX_ENTRIES]; /* per MOVE entry: its
                                   steps, so a step loads them with the entry (set_move) */
    uint8_t *tape, *snap, *scratch;
    size_t scratch_cap;
    uint8_t *save_buf[CTM_MAX_ENTRIES + 1]; /* per depth: the box at the branch point */
    size_t save_cap[CTM_MAX_ENTRIES + 1];
    size_t holdouts_cap, cuts_cap; /* room in the results' holdouts and cuts */
    ctm_cps_ws *cps;             /* the CPS workspace, made at the first use */
    int64_t tape_len, stride, origin_x, origin_y;
    int64_t s_xlo, s_xhi, s_ylo, s_yhi; /* the cycler snapshot's box */
    int64_t t_xlo, t_xhi, t_ylo, t_yhi; /* the box a finished subtree left dirty */
    uint64_t rng;
    double probe_factor;         /* CTM_MODE_PROBE: the product of the branchings on the walk */
    /* translated-cycler records (1D), per side (0 right, 1 left): a ring of the latest */
    int rec_n[2];
    int rec_state[2][CTM_REC_RING];
    int64_t rec_pos[2][CTM_REC_RING];
    int64_t rec_reach[2][CTM_REC_RING]; /* farthest back the head went since the record before */
    uint8_t rec_cells[2][CTM_REC_RING][CTM_REC_WINDOW];
    /* 2D translated-cycler records: one ring over the four sides, each with the
     * box of head positions since the record before and the cells around it */
    int rec2_n;
    int8_t rec2_side[CTM_REC2_RING];
    uint8_t rec2_edges[CTM_REC2_RING]; /* the box edges the head was on: 1 N, 2 E, 4 S, 8 W */
    int rec2_state[CTM_REC2_RING];
    int64_t rec2_x[CTM_REC2_RING], rec2_y[CTM_REC2_RING];
    int64_t rec2_box[CTM_REC2_RING][4]; /* xlo, xhi, ylo, yhi */
    uint8_t rec2_cells[CTM_REC2_RING][CTM_REC2_W * CTM_REC2_W];
} ctm_work;

typedef struct {
    ctm_options opt;
    ctm_results res;
    ctm_work ws;
} ctm_unit;

/* A holdout record: def, wr, mv, nx (nent bytes each), the weight (16 bytes
 * LE), the step reached, rows and cols of the box (int64 LE each). */
#define CTM_HOLDOUT_BYTES(nent) (4 * (size_t)(nent) + 16 + 3 * 8)

int ctm_unit_init(ctm_unit *u);   /* after u->opt is set; any u->res and u->ws are overwritten */
int ctm_unit_run(ctm_unit *u);    /* CTM_MODE_FULL, CTM_MODE_PLAN, CTM_MODE_PROBE */
int ctm_sample(ctm_unit *u, uint64_t count); /* CTM_MODE_SAMPLE: `count` more machines */
void ctm_unit_free(ctm_unit *u);

/* ---- one machine, 1D ----
 * Entry e = state*m + symbol (states 0-based). nx[e] >= 0: MOVE to that state in direction
 * mv[e] (CTM_R or CTM_L);
 * nx[e] == CTM_NX_HALT: HALT(wr[e]); nx[e] == CTM_NX_UNDEF: undefined. */
#define CTM_NX_HALT (-1)
#define CTM_NX_UNDEF (-2)
#define CTM_RUN_HALTED 0
#define CTM_RUN_CAPPED 1
#define CTM_RUN_UNDEFINED 2

typedef struct {
    int status;
    uint64_t steps;
    int state;          /* final state (0-based) */
    uint64_t nonblank;
    uint8_t *output;    /* visited span, caller frees with ctm_free */
    size_t output_len;
    int64_t head;       /* head position relative to the output's first cell */
} ctm_run_result;

int ctm_run1d(int n, int m, const uint8_t *wr, const int8_t *mv, const int16_t *nx,
              uint8_t blank, uint64_t max_steps, ctm_run_result *res);
void ctm_free(void *p);

#endif
