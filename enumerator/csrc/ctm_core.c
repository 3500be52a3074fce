/* The tree-normal-form enumerator (DESIGN.md section 2) and the one-machine
 * simulator. The search itself is ctm_search.inc, compiled for 1D and 2D.
 *
 * Weights: a node with u undefined entries stands for O^u machines times the
 * number of unused states each time a move into the lowest unused state stands
 * for all of them, times the symmetry factor of its class (u->ws.factor[u->ws.sym]):
 * 1D 2 under the first move R (mirror images); 2D 4 under the first move E
 * (rotations) and 8 under the first vertical move N (and the N-S flip).
 * With opt.relabel a write of the lowest unused non-blank symbol stands
 * for every unused one too, as new states do; the tally splits the weight over
 * the injections of the symbols in use. */
#include "ctm_core.h"

#include <stdlib.h>
#include <string.h>

#define CTM_CAT2(a, b) a##b
#define CTM_CAT(a, b) CTM_CAT2(a, b)

const char *ctm_strerror(int code) {
    switch (code) {
    case CTM_OK: return "ok";
    case CTM_ENOMEM: return "out of memory";
    case CTM_EINVAL: return "invalid argument (space, cap or work-unit prefix)";
    case CTM_EOVERFLOW: return "a weight does not fit 128 bits";
    case CTM_ESTOP: return "stopped by the caller";
    default: return "unknown error";
    }
}

void ctm_free(void *p) { free(p); }

const char *ctm_decider_name(int d) {
    /* the names of enumerator/deciders.py DECIDERS (tests/test_enumerator.py compares them) */
    static const char *const names[CTM_DEC_COUNT] = {
        [CTM_DECIDER_FULL_TABLE] = "full-table",
        [CTM_DECIDER_ESCAPEE] = "escapee",
        [CTM_DECIDER_CYCLER] = "cycler",
        [CTM_DECIDER_TRANSLATED_CYCLER] = "translated-cycler",
        [CTM_DECIDER_NGRAM_CPS] = "ngram-cps",
    };
    return d >= 0 && d < CTM_DEC_COUNT ? names[d] : NULL;
}

/* ---------------------------------------------------------------- setup */

int ctm_unit_init(ctm_unit *u) {
    /* results and workspace start from zero: every owned pointer is NULL before any early
     * return, so ctm_unit_free is always safe */
    memset(&u->res, 0, sizeof u->res);
    memset(&u->ws, 0, sizeof u->ws);
    const ctm_options *o = &u->opt;
    if ((unsigned)o->mode > CTM_MODE_SAMPLE || (o->deciders & ~CTM_DEC_ALL)) return CTM_EINVAL;
    if (o->dims != 1 && o->dims != 2) return CTM_EINVAL;
    if (o->n < 1 || o->m < 2 || o->cap < 1 || o->n * o->m > CTM_MAX_ENTRIES || o->m > 255)
        return CTM_EINVAL;
    if (o->relabel && o->m > 64) return CTM_EINVAL; /* usym fits 6 bits */
    if (o->dims == 2 && o->cap > CTM_MAX_CAP_2D) return CTM_EINVAL;
    if (o->prefix_len < 0 || o->prefix_len > o->n * o->m) return CTM_EINVAL;
    /* a run-on box stays inside the grid (the cap's), and its halts inside the kept sizes */
    if (o->settle_size < 0 || o->settle_size > o->cap
        || (o->settle_size > 0 && o->keep_size > 0 && o->settle_size > o->keep_size))
        return CTM_EINVAL;
    u->ws.dec = o->deciders;
    u->ws.cps_at = o->mode == CTM_MODE_SAMPLE ? 0 : o->cps_at; /* samples: few reach the cap, none is weighted */
    u->ws.nent = o->n * o->m;
    u->ws.used = 1;
    for (int s = 0; s < o->n; s++) u->ws.sb_state[s * o->m] = (uint8_t)s;
    int ndir = o->dims == 1 ? 2 : 4;
    ctm_count opts = (ctm_count)(ndir * o->n * o->m + o->m);
    ctm_count limit = ~(ctm_count)0 / (16 * (ctm_count)o->m); /* room for symmetry and blanks */
    u->ws.pow_opts[0] = 1;
    /* exhaustive weights need opts^nent in 128 bits; sampling counts samples and does not */
    for (int k = 1; k <= u->ws.nent; k++) {
        if (u->ws.pow_overflow || u->ws.pow_opts[k - 1] > limit / opts) {
            u->ws.pow_overflow = 1;
            u->ws.pow_opts[k] = 0;
            continue;
        }
        u->ws.pow_opts[k] = u->ws.pow_opts[k - 1] * opts;
    }
    u->ws.factor[0] = 1;
    if (o->dims == 1) {
        /* the tape has CTM_REC_WINDOW cells of padding for the record windows */
        u->ws.tape_len = 2 * o->cap + 3 + 2 * CTM_REC_WINDOW;
        u->ws.stride = 0;
        u->ws.origin_x = o->cap + 1 + CTM_REC_WINDOW;
        u->ws.origin_y = 0;
        u->ws.factor[1] = 2;
        u->ws.dx[CTM_R] = 1; u->ws.dx[CTM_L] = -1;
        u->ws.dh[CTM_R] = 1; u->ws.dh[CTM_L] = -1;
    } else {
        u->ws.stride = 2 * o->cap + 3;
        u->ws.tape_len = u->ws.stride * u->ws.stride;
        u->ws.origin_x = u->ws.origin_y = o->cap + 1;
        u->ws.factor[1] = 4;
        u->ws.factor[2] = 8;
        int64_t s = u->ws.stride;
        u->ws.dx[CTM_N] = 0;  u->ws.dy[CTM_N] = -1; u->ws.dh[CTM_N] = -s;
        u->ws.dx[CTM_E] = 1;  u->ws.dy[CTM_E] = 0;  u->ws.dh[CTM_E] = 1;
        u->ws.dx[CTM_S] = 0;  u->ws.dy[CTM_S] = 1;  u->ws.dh[CTM_S] = s;
        u->ws.dx[CTM_W] = -1; u->ws.dy[CTM_W] = 0;  u->ws.dh[CTM_W] = -1;
    }
    /* splitmix64 of the seed: nearby seeds give unrelated streams */
    uint64_t z = o->seed + 0x9e3779b97f4a7c15ull;
    z = (z ^ (z >> 30)) * 0xbf58476d1ce4e5b9ull;
    z = (z ^ (z >> 27)) * 0x94d049bb133111ebull;
    u->ws.rng = (z ^ (z >> 31)) | 1u;
    u->ws.probe_factor = 1.0;
    u->ws.tape = calloc((size_t)u->ws.tape_len, 1);
    u->ws.snap = calloc((size_t)u->ws.tape_len, 1);
    u->ws.scratch_cap = 4096;
    u->ws.scratch = malloc(u->ws.scratch_cap);
    u->res.hist_steps = calloc((size_t)o->cap + 1, sizeof(ctm_count));
    u->res.hist_len = calloc((size_t)o->cap + 2, sizeof(ctm_count));
    int rc = ctm_map_init(&u->res.raw); /* u->res.undec is made at the first undecided node */
    if (rc || !u->ws.tape || !u->ws.snap || !u->ws.scratch || !u->res.hist_steps || !u->res.hist_len) {
        ctm_unit_free(u);
        return CTM_ENOMEM;
    }
    return CTM_OK;
}

void ctm_unit_free(ctm_unit *u) {
    free(u->ws.tape); free(u->ws.snap); free(u->ws.scratch);
    free(u->res.hist_steps); free(u->res.hist_len); free(u->res.cuts); free(u->res.cut_weights);
    for (int d = 0; d <= CTM_MAX_ENTRIES; d++) {
        free(u->ws.save_buf[d]);
        u->ws.save_buf[d] = NULL;
    }
    u->ws.tape = u->ws.snap = u->ws.scratch = NULL;
    u->res.hist_steps = u->res.hist_len = NULL;
    u->res.cuts = NULL;
    u->res.cut_weights = NULL;
    if (u->res.raw.hashes) ctm_map_free(&u->res.raw);
    if (u->res.undec.hashes) ctm_map_free(&u->res.undec);
    if (u->res.cut.hashes) ctm_map_free(&u->res.cut);
    if (u->res.late.hashes) ctm_map_free(&u->res.late);
    free(u->res.holdouts);
    u->res.holdouts = NULL;
    ctm_cps_ws_free(u->ws.cps);
    u->ws.cps = NULL;
}

/* ---------------------------------------------------------------- helpers shared by both dimensions */

typedef struct {
    int state;
    int64_t head, x, y;           /* cell index and coordinates */
    int64_t xlo, xhi, ylo, yhi;   /* the box of every cell the head occupied */
    int64_t step;
    ctm_count mult;               /* the new-state factors collected on the path */
} config;

static inline int64_t cell(const ctm_unit *u, int64_t x, int64_t y) { return y * u->ws.stride + x; }

static uint64_t next_rand(ctm_unit *u) { /* xorshift64* */
    u->ws.rng ^= u->ws.rng >> 12;
    u->ws.rng ^= u->ws.rng << 25;
    u->ws.rng ^= u->ws.rng >> 27;
    return u->ws.rng * 0x2545f4914f6cdd1dull;
}

static int grow(uint8_t **buf, size_t *cap, size_t need) {
    if (need <= *cap) return CTM_OK;
    size_t ncap = *cap ? *cap : 256;
    while (ncap < need) ncap *= 2;
    uint8_t *p = realloc(*buf, ncap);
    if (!p) return CTM_ENOMEM;
    *buf = p;
    *cap = ncap;
    return CTM_OK;
}

static void set_touch(ctm_unit *u, const config *c) {
    u->ws.t_xlo = c->xlo; u->ws.t_xhi = c->xhi; u->ws.t_ylo = c->ylo; u->ws.t_yhi = c->yhi;
}

/* Head on fresh blank grid, having just moved in direction dir: does the
 * chain of blank-reading entries from state sb / m keep moving that way and close
 * into a cycle? Then every cell ahead is fresh and the head runs off forever.
 * sb = state * m indexes the entry words (set_tr) at the blank symbol 0. */
static int escapes(const ctm_unit *u, uint32_t sb, uint32_t dir) {
    uint64_t seen = 0;
    for (;;) {
        if (seen & (1ull << sb)) return 1;
        seen |= 1ull << sb;
        const uint32_t t = u->ws.tr[sb];
        if ((t & 3u) != CTM_ENTRY_MOVE || (t >> 2 & 3u) != dir) return 0;
        sb = t >> 16;
    }
}

static void take_snapshot(ctm_unit *u, const config *b) {
    size_t w = (size_t)(b->xhi - b->xlo + 1);
    for (int64_t y = b->ylo; y <= b->yhi; y++)
        memcpy(u->ws.snap + cell(u, b->xlo, y), u->ws.tape + cell(u, b->xlo, y), w);
    u->ws.s_xlo = b->xlo; u->ws.s_xhi = b->xhi; u->ws.s_ylo = b->ylo; u->ws.s_yhi = b->yhi;
}

static int zero_run(const uint8_t *p, int64_t n) {
    for (int64_t i = 0; i < n; i++)
        if (p[i]) return 0;
    return 1;
}

/* Is the grid on box b the snapshot (blank outside the snapshot's box)? */
static int same_region(const ctm_unit *u, const config *b) {
    for (int64_t y = b->ylo; y <= b->yhi; y++) {
        const uint8_t *row = u->ws.tape + cell(u, 0, y);
        if (y < u->ws.s_ylo || y > u->ws.s_yhi) {
            if (!zero_run(row + b->xlo, b->xhi - b->xlo + 1)) return 0;
            continue;
        }
        if (!zero_run(row + b->xlo, u->ws.s_xlo - b->xlo)) return 0;
        if (!zero_run(row + u->ws.s_xhi + 1, b->xhi - u->ws.s_xhi)) return 0;
        if (memcmp(row + u->ws.s_xlo, u->ws.snap + cell(u, u->ws.s_xlo, y), (size_t)(u->ws.s_xhi - u->ws.s_xlo + 1)))
            return 0;
    }
    return 1;
}

static int save_region(ctm_unit *u, int d, const config *c) {
    size_t w = (size_t)(c->xhi - c->xlo + 1), h = (size_t)(c->yhi - c->ylo + 1);
    int rc = grow(&u->ws.save_buf[d], &u->ws.save_cap[d], w * h);
    if (rc) return rc;
    for (size_t r = 0; r < h; r++)
        memcpy(u->ws.save_buf[d] + r * w, u->ws.tape + cell(u, c->xlo, c->ylo + (int64_t)r), w);
    return CTM_OK;
}

/* Blank what the finished child touched, then put back this branch point's box. */
static void restore_region(ctm_unit *u, int d, const config *c) {
    size_t tw = (size_t)(u->ws.t_xhi - u->ws.t_xlo + 1);
    for (int64_t y = u->ws.t_ylo; y <= u->ws.t_yhi; y++) memset(u->ws.tape + cell(u, u->ws.t_xlo, y), 0, tw);
    size_t w = (size_t)(c->xhi - c->xlo + 1), h = (size_t)(c->yhi - c->ylo + 1);
    for (size_t r = 0; r < h; r++)
        memcpy(u->ws.tape + cell(u, c->xlo, c->ylo + (int64_t)r), u->ws.save_buf[d] + r * w, w);
}

static int record_cut(ctm_unit *u, const config *c) {
    const int d = u->ws.ndef;
    if (u->res.n_cuts == u->ws.cuts_cap) {
        size_t ncap = u->ws.cuts_cap ? u->ws.cuts_cap * 2 : 256;
        uint16_t *p = realloc(u->res.cuts, ncap * (size_t)(d ? d : 1) * sizeof *p);
        if (!p) return CTM_ENOMEM;
        u->res.cuts = p;
        ctm_count *w = realloc(u->res.cut_weights, ncap * sizeof *w);
        if (!w) return CTM_ENOMEM;
        u->res.cut_weights = w;
        u->ws.cuts_cap = ncap;
    }
    memcpy(u->res.cuts + u->res.n_cuts * (size_t)d, u->ws.path, (size_t)d * sizeof *u->ws.path);
    u->res.cut_weights[u->res.n_cuts] = c->mult * u->ws.pow_opts[u->ws.nent - d] * u->ws.factor[u->ws.sym];
    u->res.n_cuts++;
    return CTM_OK;
}

/* Write the output key of configuration c into u->ws.scratch: the symmetry class
 * byte, in 2D rows and cols (uint16 LE each), then the cells row-major. Sets
 * *len, the head cell's offset *at within the cells, and the non-blank count
 * outside the head cell. */
static int output_key(ctm_unit *u, const config *c, int cls, size_t *len, size_t *at, int64_t *nonblank) {
    int64_t cols = c->xhi - c->xlo + 1, rows = c->yhi - c->ylo + 1;
    size_t hdr = u->opt.dims == 2 ? 4 : 0;
    *len = 1 + hdr + (size_t)(rows * cols);
    int rc = grow(&u->ws.scratch, &u->ws.scratch_cap, *len);
    if (rc) return rc;
    uint8_t *key = u->ws.scratch;
    key[0] = (uint8_t)cls;
    if (hdr) {
        key[1] = (uint8_t)(rows & 0xff); key[2] = (uint8_t)(rows >> 8);
        key[3] = (uint8_t)(cols & 0xff); key[4] = (uint8_t)(cols >> 8);
    }
    uint8_t *cells = key + 1 + hdr;
    for (int64_t r = 0; r < rows; r++)
        memcpy(cells + r * cols, u->ws.tape + cell(u, c->xlo, c->ylo + r), (size_t)cols);
    *at = 1 + hdr + (size_t)((c->y - c->ylo) * cols + (c->x - c->xlo));
    int64_t nb = 0;
    for (int64_t i = 0; i < rows * cols; i++) nb += cells[i] != 0;
    *nonblank = nb - (key[*at] != 0);
    return CTM_OK;
}

static void tally_halt(ctm_unit *u, const config *c, ctm_count total, int64_t nonblank) {
    int64_t cols = c->xhi - c->xlo + 1, rows = c->yhi - c->ylo + 1;
    u->res.halting += total;
    u->res.hist_steps[c->step + 1] += total;
    u->res.hist_len[cols > rows ? cols : rows] += total;
    if (c->step + 1 > u->res.longest_run) u->res.longest_run = c->step + 1;
    if (nonblank > u->res.most_nonblank) u->res.most_nonblank = nonblank;
}

/* The HALT(write) leaves of a branch point: m of them, or under the
 * relabelling the symbols in use and one new symbol standing for the rest. */
static int halt_leaves(ctm_unit *u, const config *c) {
    size_t len, at;
    int64_t nonblank;
    if (!u->ws.past_cap) u->res.halting_nodes++;
    ctm_count w = c->mult * u->ws.pow_opts[u->ws.nent - u->ws.ndef - 1];
    const int relabel = u->opt.relabel != 0;
    const int flag = u->ws.sym | (relabel ? u->ws.usym << 2 : 0);
    int rc = output_key(u, c, flag, &len, &at, &nonblank);
    if (rc) return rc;
    const int writes = relabel && u->ws.usym + 1 < u->opt.m ? u->ws.usym + 1 : u->opt.m;
    const uint32_t size[2] = {(uint32_t)(c->yhi - c->ylo + 1), (uint32_t)(c->xhi - c->xlo + 1)};
    /* past the cap (a run-on): the halts go to their own map; counts and histograms stay the cap's */
    ctm_map *to = &u->res.raw;
    if (u->ws.past_cap) {
        if (!u->res.late.hashes && ctm_map_init(&u->res.late)) return CTM_ENOMEM;
        to = &u->res.late;
    } else if (u->opt.keep_size > 0 && (int64_t)(size[0] > size[1] ? size[0] : size[1]) > u->opt.keep_size) {
        /* past the size kept: only the weight, by class and size (the images share both sides) */
        uint8_t key[9];
        key[0] = (uint8_t)u->ws.sym;
        memcpy(key + 1, size, sizeof size); /* little-endian hosts only, as the rest of the core */
        if (!u->res.cut.hashes && ctm_map_init(&u->res.cut)) return CTM_ENOMEM;
        ctm_count all = w * (ctm_count)writes + (writes < u->opt.m ? w * (ctm_count)(u->opt.m - 1 - u->ws.usym) : 0);
        rc = ctm_map_add(&u->res.cut, key, sizeof key, all);
        if (rc) return rc;
        tally_halt(u, c, w * (ctm_count)u->opt.m * u->ws.factor[u->ws.sym], nonblank + 1);
        return CTM_OK;
    }
    for (int s = 0; s < writes; s++) {
        u->ws.scratch[at] = (uint8_t)s;
        rc = ctm_map_add(to, u->ws.scratch, (uint32_t)len, w);
        if (rc) return rc;
    }
    if (writes < u->opt.m) { /* the new symbol usym + 1, for the m - 1 - usym unused ones */
        u->ws.scratch[0] = (uint8_t)(u->ws.sym | (u->ws.usym + 1) << 2);
        u->ws.scratch[at] = (uint8_t)(u->ws.usym + 1);
        rc = ctm_map_add(to, u->ws.scratch, (uint32_t)len, w * (ctm_count)(u->opt.m - 1 - u->ws.usym));
        if (rc) return rc;
    }
    if (u->ws.past_cap) {
        u->res.late_halting += w * (ctm_count)u->opt.m * u->ws.factor[u->ws.sym];
        u->res.late_nodes[0]++;
        return CTM_OK;
    }
    tally_halt(u, c, w * (ctm_count)u->opt.m * u->ws.factor[u->ws.sym], nonblank + 1);
    return CTM_OK;
}

/* Translated cycler. At a new record cell p (side 0: rightmost, side 1:
 * leftmost, everything beyond it blank) in state q, compare with an earlier
 * record j in state q at p_j, d = |p - p_j|. Let r be the farthest the head
 * went back (away from the edge) since record j. If the cells from r to p_j
 * then equal the cells from r + d to p now (shifted towards the edge), the run
 * from j to now repeats forever, each time shifted by d: it never halts.
 * `reach` is the farthest-back position since the previous record. */
static int translated(ctm_unit *u, int side, int state, int64_t pos, int64_t reach) {
    enum { W = CTM_REC_WINDOW };
    const int k = u->ws.rec_n[side] % CTM_REC_RING;
    const int have = u->ws.rec_n[side] < CTM_REC_RING ? u->ws.rec_n[side] : CTM_REC_RING;
    int found = 0;
    int64_t back = reach; /* farthest back since record j, over j = latest .. oldest */
    for (int i = 1; i <= have && !found; i++) {
        int j = (k - i + CTM_REC_RING) % CTM_REC_RING;
        int64_t pj = u->ws.rec_pos[side][j];
        if (u->ws.rec_state[side][j] == state) {
            /* rec_cells holds the W cells ending at p_j (side 0) or starting at p_j (side 1) */
            const uint8_t *old = u->ws.rec_cells[side][j];
            if (side == 0) {
                int64_t span = pj - back + 1; /* cells back..p_j, compared with back+d..p */
                found = span <= W && memcmp(u->ws.tape + pos - span + 1, old + W - span, (size_t)span) == 0;
            } else {
                int64_t span = back - pj + 1;
                found = span <= W && memcmp(u->ws.tape + pos, old, (size_t)span) == 0;
            }
        }
        int64_t rb = u->ws.rec_reach[side][j];
        if (side == 0 ? rb < back : rb > back) back = rb;
    }
    /* log this record; the tape has W cells of padding, so both windows are in bounds */
    u->ws.rec_state[side][k] = state;
    u->ws.rec_pos[side][k] = pos;
    u->ws.rec_reach[side][k] = reach;
    memcpy(u->ws.rec_cells[side][k], u->ws.tape + (side == 0 ? pos - W + 1 : pos), W);
    u->ws.rec_n[side]++;
    return found;
}

/* 2D translated cycler. At a record (the head has just grown the box on
 * `side`, so every cell beyond that edge is blank) in state q at h2, take an
 * earlier record on the same side in state q at h1, v = h2 - h1, and B the box
 * of head positions since then. If the cells of B held at h1's time what the
 * cells of B + v hold now, and at both times the head lay on every edge of the
 * box that v points past, the stretch from h1 to h2 repeats forever, shifted by
 * v each time: it reads only B; B + kv lies in B + (k-1)v, whose cells the
 * stretch before rewrote just as it found them, and beyond those edges, which
 * are blank then; so by induction each stretch finds the cells the last one did.
 * `run` is the box of head positions since the latest record. */
static int translated2(ctm_unit *u, int side, int state, int64_t x, int64_t y, const int64_t run[4],
                       const int64_t box[4]) {
    enum { W = CTM_REC2_W, H = CTM_REC2_W / 2 };
    const unsigned edges = (y == box[2] ? 1u : 0u) | (x == box[1] ? 2u : 0u) | (y == box[3] ? 4u : 0u) |
                           (x == box[0] ? 8u : 0u);
    const int k = u->ws.rec2_n % CTM_REC2_RING;
    const int have = u->ws.rec2_n < CTM_REC2_RING ? u->ws.rec2_n : CTM_REC2_RING;
    const int64_t lim = u->ws.stride; /* coordinates run over 0 .. stride-1 */
    int64_t b[4] = {run[0], run[1], run[2], run[3]};
    int found = 0;
    for (int i = 1; i <= have && !found; i++) {
        int j = (k - i + CTM_REC2_RING) % CTM_REC2_RING;
        if (u->ws.rec2_side[j] == side && u->ws.rec2_state[j] == state) {
            int64_t x1 = u->ws.rec2_x[j], y1 = u->ws.rec2_y[j], vx = x - x1, vy = y - y1;
            /* the head must lie on every edge that v points past, at both times: then each
             * later stretch meets, outside the cells the one before it wrote, only cells
             * beyond those edges, which are blank (a diagonal v needs both edges) */
            unsigned need = (vy < 0 ? 1u : 0u) | (vx > 0 ? 2u : 0u) | (vy > 0 ? 4u : 0u) | (vx < 0 ? 8u : 0u);
            int fits = (u->ws.rec2_edges[j] & need) == need && (edges & need) == need &&
                       b[0] >= x1 - H && b[1] < x1 - H + W && b[2] >= y1 - H && b[3] < y1 - H + W &&
                       b[0] + vx >= 0 && b[1] + vx < lim && b[2] + vy >= 0 && b[3] + vy < lim;
            if (fits) {
                const uint8_t *old = u->ws.rec2_cells[j];
                int same = 1;
                for (int64_t cy = b[2]; cy <= b[3] && same; cy++) {
                    const uint8_t *now = u->ws.tape + cell(u, b[0] + vx, cy + vy);
                    const uint8_t *was = old + (cy - (y1 - H)) * W + (b[0] - (x1 - H));
                    same = memcmp(now, was, (size_t)(b[1] - b[0] + 1)) == 0;
                }
                found = same;
            }
        }
        const int64_t *rb = u->ws.rec2_box[j];
        if (rb[0] < b[0]) b[0] = rb[0];
        if (rb[1] > b[1]) b[1] = rb[1];
        if (rb[2] < b[2]) b[2] = rb[2];
        if (rb[3] > b[3]) b[3] = rb[3];
    }
    /* log this record when its square lies inside the grid */
    if (x - H < 0 || x - H + W > lim || y - H < 0 || y - H + W > lim) {
        u->ws.rec2_n = 0; /* a gap in the ring would break the boxes' chain */
        return found;
    }
    u->ws.rec2_side[k] = (int8_t)side;
    u->ws.rec2_edges[k] = (uint8_t)edges;
    u->ws.rec2_state[k] = state;
    u->ws.rec2_x[k] = x;
    u->ws.rec2_y[k] = y;
    memcpy(u->ws.rec2_box[k], run, sizeof u->ws.rec2_box[k]);
    for (int r = 0; r < W; r++)
        memcpy(u->ws.rec2_cells[k] + r * W, u->ws.tape + cell(u, x - H, y - H + r), W);
    u->ws.rec2_n++;
    return found;
}

/* n-gram CPS on the partial machine: > 0 proven, 0 not, < 0 an error. */
static int try_cps(ctm_unit *u, int at_cap) {
    if (!u->ws.cps && !(u->ws.cps = ctm_cps_ws_new())) return CTM_ENOMEM;
    ctm_machine mc = {u->opt.n, u->opt.m, u->ws.def, u->ws.wr, u->ws.mv, u->ws.nx};
    return ctm_cps1d_search(u->ws.cps, &mc, at_cap);
}

/* 2D: the CPS of the 1D machine made of the E (R) and W (L) moves, every N or S move
 * counting as a possible halt. From the blank grid the head stays in the first row until
 * it takes an N or S move, so if that 1D machine never reaches an entry that may halt, the
 * 2D run never leaves the row and never halts. Tried on runs still in one row at the cap. */
static int try_cps_row(ctm_unit *u) {
    if (!u->ws.cps && !(u->ws.cps = ctm_cps_ws_new())) return CTM_ENOMEM;
    int8_t def[CTM_MAX_ENTRIES], mv[CTM_MAX_ENTRIES];
    for (int e = 0; e < u->ws.nent; e++) {
        int row = u->ws.def[e] == CTM_ENTRY_MOVE && (u->ws.mv[e] == CTM_E || u->ws.mv[e] == CTM_W);
        def[e] = (int8_t)(row ? CTM_ENTRY_MOVE : CTM_ENTRY_UNDEF);
        mv[e] = (int8_t)(row && u->ws.mv[e] == CTM_W ? CTM_L : CTM_R);
    }
    ctm_machine mc = {u->opt.n, u->opt.m, def, u->ws.wr, mv, u->ws.nx};
    return ctm_cps1d(u->ws.cps, &mc, ctm_cps_attempts());
}

/* An undecided node at the cap: its weight by the size its output has
 * reached (outputs only grow, so it can never produce a smaller key), and,
 * when asked for, the node itself for other provers. */
static int give_up(ctm_unit *u, const config *box, int64_t step, ctm_count weight) {
    uint32_t size[2] = {(uint32_t)(box->yhi - box->ylo + 1), (uint32_t)(box->xhi - box->xlo + 1)};
    uint8_t key[8];
    if (!u->res.undec.hashes && ctm_map_init(&u->res.undec)) return CTM_ENOMEM;
    memcpy(key, size, sizeof key); /* little-endian hosts only, as the rest of the core */
    int rc = ctm_map_add(&u->res.undec, key, sizeof key, weight);
    if (rc || !u->opt.keep_holdouts) return rc;
    const size_t rec = CTM_HOLDOUT_BYTES(u->ws.nent);
    if (u->res.n_holdouts == u->ws.holdouts_cap) {
        size_t ncap = u->ws.holdouts_cap ? u->ws.holdouts_cap * 2 : 64;
        uint8_t *p = realloc(u->res.holdouts, ncap * rec);
        if (!p) return CTM_ENOMEM;
        u->res.holdouts = p;
        u->ws.holdouts_cap = ncap;
    }
    uint8_t *r = u->res.holdouts + u->res.n_holdouts++ * rec;
    const int ne = u->ws.nent;
    memcpy(r, u->ws.def, (size_t)ne);
    memcpy(r + ne, u->ws.wr, (size_t)ne);
    memcpy(r + 2 * ne, u->ws.mv, (size_t)ne);
    memcpy(r + 3 * ne, u->ws.nx, (size_t)ne);
    r += 4 * ne;
    for (int i = 0; i < 16; i++) r[i] = (uint8_t)(weight >> (8 * i));
    int64_t tail[3] = {step, (int64_t)size[0], (int64_t)size[1]};
    memcpy(r + 16, tail, sizeof tail);
    return CTM_OK;
}

/* A sampled machine halts: tally one run under its full symmetry class (every
 * image of a uniform sample is itself a uniform sample), weight 1. */
static int sample_halt(ctm_unit *u, const config *c, int e) {
    size_t len, at;
    int64_t nonblank;
    int rc = output_key(u, c, u->opt.dims == 1 ? 1 : 2, &len, &at, &nonblank);
    if (rc) return rc;
    u->ws.scratch[at] = u->ws.wr[e];
    rc = ctm_map_add(&u->res.raw, u->ws.scratch, (uint32_t)len, 1);
    if (rc) return rc;
    tally_halt(u, c, 1, nonblank + (u->ws.wr[e] != 0));
    set_touch(u, c);
    return CTM_OK;
}

/* ---------------------------------------------------------------- the search, per dimension */

/* An entry's direction and the steps it takes, looked up once when the entry is set. */
static inline void set_move(ctm_unit *u, int e, int dir) {
    u->ws.mv[e] = (int8_t)dir;
    u->ws.eh[e] = u->ws.dh[dir];
    u->ws.ex[e] = u->ws.dx[dir];
    u->ws.ey[e] = u->ws.dy[dir];
}

/* A segment at step `stop`, short of the cap: the CPS due there (the early attempts at cps_at,
 * the costlier ones at quiet_at), the cycler checks off from quiet_at, and the next stop.
 * 1: proven, 0: run on to *stop, < 0: an error. */
static int reach_stop(ctm_unit *u, int64_t step, int64_t cap, int64_t quiet_at, unsigned *dec, int *cps_due,
                      int *cps_cap_due, int64_t *stop) {
    if (*cps_due && step >= u->ws.cps_at) {
        int rc = try_cps(u, 0);
        if (rc < 0) return rc;
        *cps_due = 0;
        if (rc > 0) return 1;
    }
    if (step >= quiet_at) {
        *dec &= ~(CTM_DEC_CYCLER | CTM_DEC_TRANSLATED_CYCLER);
        if (*cps_cap_due) {
            int rc = try_cps(u, 1);
            if (rc < 0) return rc;
            *cps_cap_due = 0;
            if (rc > 0) return 1;
        }
    }
    *stop = cap;
    if (*cps_due && u->ws.cps_at > step && u->ws.cps_at < *stop) *stop = u->ws.cps_at;
    if (quiet_at > step && quiet_at < *stop) *stop = quiet_at;
    return 0;
}

/* The 1D step loop's state; cl, cc, cr: the cells left of, under and right of the head. */
typedef struct {
    uint32_t sb, cl, cc, cr;  /* sb: state * m */
    int64_t head, step, xlo, xhi, back_r, back_l, lam, power;
    uint32_t snap_sb;         /* the cycler snapshot's state * m and head */
    int64_t snap_head;
} loop1d;

#define RUN1_STOP 0  /* reached step `stop` */
#define RUN1_UNDEF 1 /* the next entry is not a MOVE: nothing done */
#define RUN1_EVENT 2 /* a step was taken onto a record cell, onto the snapshot's state and
                        head, or on the step that takes a snapshot: the caller finishes it */

/* Plain 1D steps until stop or an event. A small function of its own, so that its state stays
 * in registers: the cells around the head are kept there too (every write is still stored, so
 * the tape stays current), and a step waits on one load, the entry word, instead of two. */
static int __attribute__((noinline)) run_1d(const uint32_t *restrict tr, uint8_t *restrict tape, loop1d *r,
                                            int64_t stop, int cyc) {
    uint32_t sb = r->sb, cl = r->cl, cc = r->cc, cr = r->cr;
    int64_t head = r->head, step = r->step, back_r = r->back_r, back_l = r->back_l, lam = r->lam;
    const int64_t xlo = r->xlo, xhi = r->xhi, snap_head = r->snap_head;
    const int64_t last = cyc ? r->power - 1 : INT64_MAX; /* lam reaching power is an event */
    const uint32_t snap_sb = cyc ? r->snap_sb : UINT32_MAX;
    int ev = RUN1_STOP;
    while (step < stop) {
        const uint32_t t = tr[sb + cc];
        if ((t & 3u) != CTM_ENTRY_MOVE) { ev = RUN1_UNDEF; break; }
        const uint32_t w = t >> 8 & 0xffu, left = (t >> 2 & 1u) == CTM_L;
        tape[head] = (uint8_t)w;
        sb = t >> 16;
        step++;
        head += left ? -1 : 1;
        const uint32_t nl = tape[head - 1], nr = tape[head + 1];
        cc = left ? cl : cr;
        cl = left ? nl : w;
        cr = left ? w : nr;
        if (head < xlo || head > xhi || (sb == snap_sb && head == snap_head) || lam == last) {
            ev = RUN1_EVENT;
            break;
        }
        back_r = head < back_r ? head : back_r;
        back_l = head > back_l ? head : back_l;
        lam += cyc;
    }
    r->sb = sb; r->cl = cl; r->cc = cc; r->cr = cr;
    r->head = head; r->step = step; r->back_r = back_r; r->back_l = back_l; r->lam = lam;
    return ev;
}

/* The entry word of entry e (the 1D loop and escapes), after its def, wr, mv and nx changed. */
static inline void set_tr(ctm_unit *u, int e) {
    const ctm_work *w = &u->ws;
    const uint32_t d = (uint32_t)w->def[e] & 3u;
    u->ws.tr[e] = d == CTM_ENTRY_MOVE ? CTM_ENTRY_MOVE | ((uint32_t)w->mv[e] & 3u) << 2 | (uint32_t)w->wr[e] << 8
                                            | (uint32_t)(w->nx[e] * u->opt.m) << 16
                                      : d;
}

#define DIM 1
#include "ctm_search.inc"
#undef DIM
#define DIM 2
#include "ctm_search.inc"
#undef DIM

/* Draw `count` machines uniformly from the full space (every entry uniform over
 * its options) and run each from blank 0 with the deciders; the stream comes
 * from opt.seed, so a unit's samples depend on its seed alone. */
int ctm_sample(ctm_unit *u, uint64_t count) {
    if (u->opt.mode != CTM_MODE_SAMPLE) return CTM_EINVAL;
    const int ndir = u->opt.dims == 1 ? 2 : 4;
    const uint64_t opts = (uint64_t)(ndir * u->opt.n * u->opt.m + u->opt.m);
    const unsigned dec = u->opt.deciders;
    config root = {0, 0, u->ws.origin_x, u->ws.origin_y, u->ws.origin_x, u->ws.origin_x,
                   u->ws.origin_y, u->ws.origin_y, 0, 1};
    root.head = cell(u, root.x, root.y);
    for (uint64_t i = 0; i < count; i++) {
        int halts = 0;
        for (int e = 0; e < u->ws.nent; e++) {
            uint64_t o = next_rand(u) % opts;
            if (o < (uint64_t)u->opt.m) { /* HALT(write o) */
                u->ws.def[e] = CTM_ENTRY_HALT; u->ws.wr[e] = (uint8_t)o; u->ws.mv[e] = CTM_R; u->ws.nx[e] = 0;
                set_tr(u, e);
                halts = 1;
            } else {
                o -= (uint64_t)u->opt.m;
                u->ws.def[e] = CTM_ENTRY_MOVE;
                u->ws.wr[e] = (uint8_t)(o / (uint64_t)(ndir * u->opt.n));
                set_move(u, e, (int)((o / (uint64_t)u->opt.n) % (uint64_t)ndir));
                u->ws.nx[e] = (uint8_t)(o % (uint64_t)u->opt.n);
                set_tr(u, e);
            }
        }
        u->ws.ndef = u->ws.nent;
        u->ws.sym = 0;
        /* "fully defined, no HALT" is a proof only when the table really has no HALT */
        u->ws.dec = halts ? (dec & ~CTM_DEC_FULL_TABLE) : dec;
        int rc = u->opt.dims == 1 ? segment_1(u, root) : segment_2(u, root);
        u->ws.dec = dec;
        int64_t tw = u->ws.t_xhi - u->ws.t_xlo + 1;
        for (int64_t y = u->ws.t_ylo; y <= u->ws.t_yhi; y++)
            memset(u->ws.tape + cell(u, u->ws.t_xlo, y), 0, (size_t)tw);
        if (rc) return rc;
    }
    memset(u->ws.def, 0, sizeof u->ws.def);
    memset(u->ws.tr, 0, sizeof u->ws.tr);
    u->ws.ndef = 0;
    return CTM_OK;
}

int ctm_unit_run(ctm_unit *u) {
    if (u->opt.mode == CTM_MODE_SAMPLE) return CTM_EINVAL;
    if (u->ws.pow_overflow) return CTM_EOVERFLOW;
    u->ws.probe_factor = 1.0; /* a probe walk's product starts anew */
    config root = {0, 0, u->ws.origin_x, u->ws.origin_y, u->ws.origin_x, u->ws.origin_x,
                   u->ws.origin_y, u->ws.origin_y, 0, 1};
    root.head = cell(u, root.x, root.y);
    u->ws.sym = 0;
    u->ws.usym = 0;
    return u->opt.dims == 1 ? segment_1(u, root) : segment_2(u, root);
}

/* ---------------------------------------------------------------- one machine */

int ctm_run1d(int n, int m, const uint8_t *wr, const int8_t *mv, const int16_t *nx,
              uint8_t blank, uint64_t max_steps, ctm_run_result *res) {
    if (n < 1 || m < 2 || m > 256 || blank >= m || n * m > CTM_MAX_ENTRIES) return CTM_EINVAL;
    for (int e = 0; e < n * m; e++) {
        if (wr[e] >= m || nx[e] >= n || nx[e] < CTM_NX_UNDEF) return CTM_EINVAL;
        if (nx[e] >= 0 && mv[e] != CTM_R && mv[e] != CTM_L) return CTM_EINVAL;
    }
    size_t len = 1 << 12;
    uint8_t *tape = malloc(len);
    if (!tape) return CTM_ENOMEM;
    memset(tape, blank, len);
    size_t head = len / 2, lo = head, hi = head;
    int state = 0;
    uint64_t steps = 0;
    int status;
    for (;;) {
        if (steps >= max_steps) { status = CTM_RUN_CAPPED; break; }
        int e = state * m + tape[head];
        int to = nx[e];
        if (to < 0) {
            if (to == CTM_NX_HALT) {
                tape[head] = wr[e];
                steps++;
                status = CTM_RUN_HALTED;
            } else {
                status = CTM_RUN_UNDEFINED;
            }
            break;
        }
        tape[head] = wr[e];
        head = mv[e] == CTM_L ? head - 1 : head + 1;
        state = to;
        steps++;
        if (head < lo) {
            lo = head;
            if (head == 0) { /* grow on the left: double and shift */
                uint8_t *t = malloc(len * 2);
                if (!t) { free(tape); return CTM_ENOMEM; }
                memset(t, blank, len);
                memcpy(t + len, tape, len);
                free(tape);
                tape = t;
                head += len; lo += len; hi += len;
                len *= 2;
            }
        } else if (head > hi) {
            hi = head;
            if (head == len - 1) {
                uint8_t *t = realloc(tape, len * 2);
                if (!t) { free(tape); return CTM_ENOMEM; }
                tape = t;
                memset(tape + len, blank, len);
                len *= 2;
            }
        }
    }
    res->status = status;
    res->steps = steps;
    res->state = state;
    res->output_len = hi - lo + 1;
    res->head = (int64_t)(head - lo);
    res->nonblank = 0;
    for (size_t i = lo; i <= hi; i++) res->nonblank += tape[i] != blank;
    memmove(tape, tape + lo, res->output_len);
    res->output = tape;
    return CTM_OK;
}
