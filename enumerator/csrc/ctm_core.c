/* The tree-normal-form enumerator (DESIGN.md section 2) and the one-machine
 * simulator. The search itself is ctm_search.inc, compiled for 1D and 2D.
 *
 * Weights: a node with u undefined entries stands for O^u machines times the
 * number of unused states each time a move into the lowest unused state stands
 * for all of them, times the symmetry factor of its class (u->factor[u->sym]):
 * 1D 2 under the first move R (mirror images); 2D 4 under the first move E
 * (rotations) and 8 under the first vertical move N (and the N-S flip).
 * With CTM_SEARCH_RELABEL a write of the lowest unused non-blank symbol stands
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

/* ---------------------------------------------------------------- setup */

int ctm_unit_init(ctm_unit *u) {
    /* every owned pointer is NULL before any early return, so ctm_unit_free is always safe */
    u->tape = u->snap = u->scratch = NULL;
    u->hist_steps = u->hist_len = NULL;
    u->cuts = NULL;
    u->cut_weights = NULL;
    u->holdouts = NULL;
    u->n_holdouts = u->holdouts_cap = 0;
    u->cps_ws = NULL;
    memset(&u->raw, 0, sizeof u->raw);
    memset(&u->undec, 0, sizeof u->undec);
    memset(&u->cut, 0, sizeof u->cut);
    memset(&u->late, 0, sizeof u->late);
    u->late_halting = u->late_proven = 0;
    memset(u->late_nodes, 0, sizeof u->late_nodes);
    u->late_steps = 0;
    u->past_cap = 0;
    memset(u->save_buf, 0, sizeof u->save_buf);
    memset(u->save_cap, 0, sizeof u->save_cap);
    memset(u->proven, 0, sizeof u->proven);
    memset(u->proven_nodes, 0, sizeof u->proven_nodes);
    if (u->dims != 1 && u->dims != 2) return CTM_EINVAL;
    if (u->n < 1 || u->m < 2 || u->cap < 1 || u->n * u->m > CTM_MAX_ENTRIES || u->m > 255)
        return CTM_EINVAL;
    if ((u->deciders & CTM_SEARCH_RELABEL) && u->m > 64) return CTM_EINVAL; /* usym fits 6 bits */
    if (u->dims == 2 && u->cap > CTM_MAX_CAP_2D) return CTM_EINVAL;
    if (u->prefix_len < 0 || u->prefix_len > u->n * u->m) return CTM_EINVAL;
    /* a run-on box stays inside the grid (the cap's), and its halts inside the kept sizes */
    if (u->settle_size < 0 || u->settle_size > u->cap
        || (u->settle_size > 0 && u->keep_size > 0 && u->settle_size > u->keep_size))
        return CTM_EINVAL;
    u->nent = u->n * u->m;
    u->used = 1;
    u->usym = 0;
    u->ndef = 0;
    u->sym = 0;
    memset(u->def, 0, sizeof u->def);
    memset(u->tr, 0, sizeof u->tr);
    for (int s = 0; s < u->n; s++) u->sb_state[s * u->m] = (uint8_t)s;
    int ndir = u->dims == 1 ? 2 : 4;
    ctm_count opts = (ctm_count)(ndir * u->n * u->m + u->m);
    ctm_count limit = ~(ctm_count)0 / (16 * (ctm_count)u->m); /* room for symmetry and blanks */
    u->pow_opts[0] = 1;
    /* exhaustive weights need opts^nent in 128 bits; sampling counts samples and does not */
    u->pow_overflow = 0;
    for (int k = 1; k <= u->nent; k++) {
        if (u->pow_overflow || u->pow_opts[k - 1] > limit / opts) {
            u->pow_overflow = 1;
            u->pow_opts[k] = 0;
            continue;
        }
        u->pow_opts[k] = u->pow_opts[k - 1] * opts;
    }
    u->factor[0] = 1;
    if (u->dims == 1) {
        /* the tape has CTM_REC_WINDOW cells of padding for the record windows */
        u->tape_len = 2 * u->cap + 3 + 2 * CTM_REC_WINDOW;
        u->stride = 0;
        u->origin_x = u->cap + 1 + CTM_REC_WINDOW;
        u->origin_y = 0;
        u->factor[1] = 2;
        u->dx[0] = 1; u->dx[1] = -1;
        u->dh[0] = 1; u->dh[1] = -1;
        u->dy[0] = u->dy[1] = 0;
    } else {
        u->stride = 2 * u->cap + 3;
        u->tape_len = u->stride * u->stride;
        u->origin_x = u->origin_y = u->cap + 1;
        u->factor[1] = 4;
        u->factor[2] = 8;
        int64_t s = u->stride;
        u->dx[CTM_N] = 0;  u->dy[CTM_N] = -1; u->dh[CTM_N] = -s;
        u->dx[CTM_E] = 1;  u->dy[CTM_E] = 0;  u->dh[CTM_E] = 1;
        u->dx[CTM_S] = 0;  u->dy[CTM_S] = 1;  u->dh[CTM_S] = s;
        u->dx[CTM_W] = -1; u->dy[CTM_W] = 0;  u->dh[CTM_W] = -1;
    }
    u->halting = u->non_halting = u->undecided = 0;
    u->halting_nodes = 0;
    u->undecided_nodes = 0;
    u->longest_run = 0;
    u->most_nonblank = 0;
    u->steps = 0;
    u->n_cuts = u->cuts_cap = 0;
    u->cuts = NULL;
    u->cut_weights = NULL;
    u->est_nodes = u->est_steps = 0.0;
    /* splitmix64 of the seed: nearby seeds give unrelated streams */
    uint64_t z = u->probe_seed + 0x9e3779b97f4a7c15ull;
    z = (z ^ (z >> 30)) * 0xbf58476d1ce4e5b9ull;
    z = (z ^ (z >> 27)) * 0x94d049bb133111ebull;
    u->rng = (z ^ (z >> 31)) | 1u;
    u->probe_factor = 1.0;
    memset(u->save_buf, 0, sizeof u->save_buf);
    memset(u->save_cap, 0, sizeof u->save_cap);
    u->tape = calloc((size_t)u->tape_len, 1);
    u->snap = calloc((size_t)u->tape_len, 1);
    u->scratch_cap = 4096;
    u->scratch = malloc(u->scratch_cap);
    u->hist_steps = calloc((size_t)u->cap + 1, sizeof(ctm_count));
    u->hist_len = calloc((size_t)u->cap + 2, sizeof(ctm_count));
    int rc = ctm_map_init(&u->raw); /* u->undec is made at the first undecided node */
    if (rc || !u->tape || !u->snap || !u->scratch || !u->hist_steps || !u->hist_len) {
        ctm_unit_free(u);
        return CTM_ENOMEM;
    }
    return CTM_OK;
}

void ctm_unit_free(ctm_unit *u) {
    free(u->tape); free(u->snap); free(u->scratch);
    free(u->hist_steps); free(u->hist_len); free(u->cuts); free(u->cut_weights);
    for (int d = 0; d <= CTM_MAX_ENTRIES; d++) {
        free(u->save_buf[d]);
        u->save_buf[d] = NULL;
    }
    u->tape = u->snap = u->scratch = NULL;
    u->hist_steps = u->hist_len = NULL;
    u->cuts = NULL;
    u->cut_weights = NULL;
    if (u->raw.hashes) ctm_map_free(&u->raw);
    if (u->undec.hashes) ctm_map_free(&u->undec);
    if (u->cut.hashes) ctm_map_free(&u->cut);
    if (u->late.hashes) ctm_map_free(&u->late);
    free(u->holdouts);
    u->holdouts = NULL;
    ctm_cps_ws_free(u->cps_ws);
    u->cps_ws = NULL;
}

/* ---------------------------------------------------------------- helpers shared by both dimensions */

typedef struct {
    int state;
    int64_t head, x, y;           /* cell index and coordinates */
    int64_t xlo, xhi, ylo, yhi;   /* the box of every cell the head occupied */
    int64_t step;
    ctm_count mult;               /* the new-state factors collected on the path */
} config;

static inline int64_t cell(const ctm_unit *u, int64_t x, int64_t y) { return y * u->stride + x; }

static uint64_t next_rand(ctm_unit *u) { /* xorshift64* */
    u->rng ^= u->rng >> 12;
    u->rng ^= u->rng << 25;
    u->rng ^= u->rng >> 27;
    return u->rng * 0x2545f4914f6cdd1dull;
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
    u->t_xlo = c->xlo; u->t_xhi = c->xhi; u->t_ylo = c->ylo; u->t_yhi = c->yhi;
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
        const uint32_t t = u->tr[sb];
        if ((t & 3u) != 1u || (t >> 2 & 3u) != dir) return 0;
        sb = t >> 16;
    }
}

static void take_snapshot(ctm_unit *u, const config *b) {
    size_t w = (size_t)(b->xhi - b->xlo + 1);
    for (int64_t y = b->ylo; y <= b->yhi; y++)
        memcpy(u->snap + cell(u, b->xlo, y), u->tape + cell(u, b->xlo, y), w);
    u->s_xlo = b->xlo; u->s_xhi = b->xhi; u->s_ylo = b->ylo; u->s_yhi = b->yhi;
}

static int zero_run(const uint8_t *p, int64_t n) {
    for (int64_t i = 0; i < n; i++)
        if (p[i]) return 0;
    return 1;
}

/* Is the grid on box b the snapshot (blank outside the snapshot's box)? */
static int same_region(const ctm_unit *u, const config *b) {
    for (int64_t y = b->ylo; y <= b->yhi; y++) {
        const uint8_t *row = u->tape + cell(u, 0, y);
        if (y < u->s_ylo || y > u->s_yhi) {
            if (!zero_run(row + b->xlo, b->xhi - b->xlo + 1)) return 0;
            continue;
        }
        if (!zero_run(row + b->xlo, u->s_xlo - b->xlo)) return 0;
        if (!zero_run(row + u->s_xhi + 1, b->xhi - u->s_xhi)) return 0;
        if (memcmp(row + u->s_xlo, u->snap + cell(u, u->s_xlo, y), (size_t)(u->s_xhi - u->s_xlo + 1)))
            return 0;
    }
    return 1;
}

static int save_region(ctm_unit *u, int d, const config *c) {
    size_t w = (size_t)(c->xhi - c->xlo + 1), h = (size_t)(c->yhi - c->ylo + 1);
    int rc = grow(&u->save_buf[d], &u->save_cap[d], w * h);
    if (rc) return rc;
    for (size_t r = 0; r < h; r++)
        memcpy(u->save_buf[d] + r * w, u->tape + cell(u, c->xlo, c->ylo + (int64_t)r), w);
    return CTM_OK;
}

/* Blank what the finished child touched, then put back this branch point's box. */
static void restore_region(ctm_unit *u, int d, const config *c) {
    size_t tw = (size_t)(u->t_xhi - u->t_xlo + 1);
    for (int64_t y = u->t_ylo; y <= u->t_yhi; y++) memset(u->tape + cell(u, u->t_xlo, y), 0, tw);
    size_t w = (size_t)(c->xhi - c->xlo + 1), h = (size_t)(c->yhi - c->ylo + 1);
    for (size_t r = 0; r < h; r++)
        memcpy(u->tape + cell(u, c->xlo, c->ylo + (int64_t)r), u->save_buf[d] + r * w, w);
}

static int record_cut(ctm_unit *u, const config *c) {
    const int d = u->ndef;
    if (u->n_cuts == u->cuts_cap) {
        size_t ncap = u->cuts_cap ? u->cuts_cap * 2 : 256;
        uint16_t *p = realloc(u->cuts, ncap * (size_t)(d ? d : 1) * sizeof *p);
        if (!p) return CTM_ENOMEM;
        u->cuts = p;
        ctm_count *w = realloc(u->cut_weights, ncap * sizeof *w);
        if (!w) return CTM_ENOMEM;
        u->cut_weights = w;
        u->cuts_cap = ncap;
    }
    memcpy(u->cuts + u->n_cuts * (size_t)d, u->path, (size_t)d * sizeof *u->path);
    u->cut_weights[u->n_cuts] = c->mult * u->pow_opts[u->nent - d] * u->factor[u->sym];
    u->n_cuts++;
    return CTM_OK;
}

/* Write the output key of configuration c into u->scratch: the symmetry class
 * byte, in 2D rows and cols (uint16 LE each), then the cells row-major. Sets
 * *len, the head cell's offset *at within the cells, and the non-blank count
 * outside the head cell. */
static int output_key(ctm_unit *u, const config *c, int cls, size_t *len, size_t *at, int64_t *nonblank) {
    int64_t cols = c->xhi - c->xlo + 1, rows = c->yhi - c->ylo + 1;
    size_t hdr = u->dims == 2 ? 4 : 0;
    *len = 1 + hdr + (size_t)(rows * cols);
    int rc = grow(&u->scratch, &u->scratch_cap, *len);
    if (rc) return rc;
    uint8_t *key = u->scratch;
    key[0] = (uint8_t)cls;
    if (hdr) {
        key[1] = (uint8_t)(rows & 0xff); key[2] = (uint8_t)(rows >> 8);
        key[3] = (uint8_t)(cols & 0xff); key[4] = (uint8_t)(cols >> 8);
    }
    uint8_t *cells = key + 1 + hdr;
    for (int64_t r = 0; r < rows; r++)
        memcpy(cells + r * cols, u->tape + cell(u, c->xlo, c->ylo + r), (size_t)cols);
    *at = 1 + hdr + (size_t)((c->y - c->ylo) * cols + (c->x - c->xlo));
    int64_t nb = 0;
    for (int64_t i = 0; i < rows * cols; i++) nb += cells[i] != 0;
    *nonblank = nb - (key[*at] != 0);
    return CTM_OK;
}

static void tally_halt(ctm_unit *u, const config *c, ctm_count total, int64_t nonblank) {
    int64_t cols = c->xhi - c->xlo + 1, rows = c->yhi - c->ylo + 1;
    u->halting += total;
    u->hist_steps[c->step + 1] += total;
    u->hist_len[cols > rows ? cols : rows] += total;
    if (c->step + 1 > u->longest_run) u->longest_run = c->step + 1;
    if (nonblank > u->most_nonblank) u->most_nonblank = nonblank;
}

/* The HALT(write) leaves of a branch point: m of them, or under the
 * relabelling the symbols in use and one new symbol standing for the rest. */
static int halt_leaves(ctm_unit *u, const config *c) {
    size_t len, at;
    int64_t nonblank;
    if (!u->past_cap) u->halting_nodes++;
    ctm_count w = c->mult * u->pow_opts[u->nent - u->ndef - 1];
    const int relabel = (u->deciders & CTM_SEARCH_RELABEL) != 0;
    const int flag = u->sym | (relabel ? u->usym << 2 : 0);
    int rc = output_key(u, c, flag, &len, &at, &nonblank);
    if (rc) return rc;
    const int writes = relabel && u->usym + 1 < u->m ? u->usym + 1 : u->m;
    const uint32_t size[2] = {(uint32_t)(c->yhi - c->ylo + 1), (uint32_t)(c->xhi - c->xlo + 1)};
    /* past the cap (a run-on): the halts go to their own map; counts and histograms stay the cap's */
    ctm_map *to = &u->raw;
    if (u->past_cap) {
        if (!u->late.hashes && ctm_map_init(&u->late)) return CTM_ENOMEM;
        to = &u->late;
    } else if (u->keep_size > 0 && (int64_t)(size[0] > size[1] ? size[0] : size[1]) > u->keep_size) {
        /* past the size kept: only the weight, by class and size (the images share both sides) */
        uint8_t key[9];
        key[0] = (uint8_t)u->sym;
        memcpy(key + 1, size, sizeof size); /* little-endian hosts only, as the rest of the core */
        if (!u->cut.hashes && ctm_map_init(&u->cut)) return CTM_ENOMEM;
        ctm_count all = w * (ctm_count)writes + (writes < u->m ? w * (ctm_count)(u->m - 1 - u->usym) : 0);
        rc = ctm_map_add(&u->cut, key, sizeof key, all);
        if (rc) return rc;
        tally_halt(u, c, w * (ctm_count)u->m * u->factor[u->sym], nonblank + 1);
        return CTM_OK;
    }
    for (int s = 0; s < writes; s++) {
        u->scratch[at] = (uint8_t)s;
        rc = ctm_map_add(to, u->scratch, (uint32_t)len, w);
        if (rc) return rc;
    }
    if (writes < u->m) { /* the new symbol usym + 1, for the m - 1 - usym unused ones */
        u->scratch[0] = (uint8_t)(u->sym | (u->usym + 1) << 2);
        u->scratch[at] = (uint8_t)(u->usym + 1);
        rc = ctm_map_add(to, u->scratch, (uint32_t)len, w * (ctm_count)(u->m - 1 - u->usym));
        if (rc) return rc;
    }
    if (u->past_cap) {
        u->late_halting += w * (ctm_count)u->m * u->factor[u->sym];
        u->late_nodes[0]++;
        return CTM_OK;
    }
    tally_halt(u, c, w * (ctm_count)u->m * u->factor[u->sym], nonblank + 1);
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
    const int k = u->rec_n[side] % CTM_REC_RING;
    const int have = u->rec_n[side] < CTM_REC_RING ? u->rec_n[side] : CTM_REC_RING;
    int found = 0;
    int64_t back = reach; /* farthest back since record j, over j = latest .. oldest */
    for (int i = 1; i <= have && !found; i++) {
        int j = (k - i + CTM_REC_RING) % CTM_REC_RING;
        int64_t pj = u->rec_pos[side][j];
        if (u->rec_state[side][j] == state) {
            /* rec_cells holds the W cells ending at p_j (side 0) or starting at p_j (side 1) */
            const uint8_t *old = u->rec_cells[side][j];
            if (side == 0) {
                int64_t span = pj - back + 1; /* cells back..p_j, compared with back+d..p */
                found = span <= W && memcmp(u->tape + pos - span + 1, old + W - span, (size_t)span) == 0;
            } else {
                int64_t span = back - pj + 1;
                found = span <= W && memcmp(u->tape + pos, old, (size_t)span) == 0;
            }
        }
        int64_t rb = u->rec_reach[side][j];
        if (side == 0 ? rb < back : rb > back) back = rb;
    }
    /* log this record; the tape has W cells of padding, so both windows are in bounds */
    u->rec_state[side][k] = state;
    u->rec_pos[side][k] = pos;
    u->rec_reach[side][k] = reach;
    memcpy(u->rec_cells[side][k], u->tape + (side == 0 ? pos - W + 1 : pos), W);
    u->rec_n[side]++;
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
    const int k = u->rec2_n % CTM_REC2_RING;
    const int have = u->rec2_n < CTM_REC2_RING ? u->rec2_n : CTM_REC2_RING;
    const int64_t lim = u->stride; /* coordinates run over 0 .. stride-1 */
    int64_t b[4] = {run[0], run[1], run[2], run[3]};
    int found = 0;
    for (int i = 1; i <= have && !found; i++) {
        int j = (k - i + CTM_REC2_RING) % CTM_REC2_RING;
        if (u->rec2_side[j] == side && u->rec2_state[j] == state) {
            int64_t x1 = u->rec2_x[j], y1 = u->rec2_y[j], vx = x - x1, vy = y - y1;
            /* the head must lie on every edge that v points past, at both times: then each
             * later stretch meets, outside the cells the one before it wrote, only cells
             * beyond those edges, which are blank (a diagonal v needs both edges) */
            unsigned need = (vy < 0 ? 1u : 0u) | (vx > 0 ? 2u : 0u) | (vy > 0 ? 4u : 0u) | (vx < 0 ? 8u : 0u);
            int fits = (u->rec2_edges[j] & need) == need && (edges & need) == need && b[0] >= x1 - H && b[1] < x1 - H + W && b[2] >= y1 - H && b[3] < y1 - H + W &&
                       b[0] + vx >= 0 && b[1] + vx < lim && b[2] + vy >= 0 && b[3] + vy < lim;
            if (fits) {
                const uint8_t *old = u->rec2_cells[j];
                int same = 1;
                for (int64_t cy = b[2]; cy <= b[3] && same; cy++) {
                    const uint8_t *now = u->tape + cell(u, b[0] + vx, cy + vy);
                    const uint8_t *was = old + (cy - (y1 - H)) * W + (b[0] - (x1 - H));
                    same = memcmp(now, was, (size_t)(b[1] - b[0] + 1)) == 0;
                }
                found = same;
            }
        }
        const int64_t *rb = u->rec2_box[j];
        if (rb[0] < b[0]) b[0] = rb[0];
        if (rb[1] > b[1]) b[1] = rb[1];
        if (rb[2] < b[2]) b[2] = rb[2];
        if (rb[3] > b[3]) b[3] = rb[3];
    }
    /* log this record when its square lies inside the grid */
    if (x - H < 0 || x - H + W > lim || y - H < 0 || y - H + W > lim) {
        u->rec2_n = 0; /* a gap in the ring would break the boxes' chain */
        return found;
    }
    u->rec2_side[k] = (int8_t)side;
    u->rec2_edges[k] = (uint8_t)edges;
    u->rec2_state[k] = state;
    u->rec2_x[k] = x;
    u->rec2_y[k] = y;
    memcpy(u->rec2_box[k], run, sizeof u->rec2_box[k]);
    for (int r = 0; r < W; r++)
        memcpy(u->rec2_cells[k] + r * W, u->tape + cell(u, x - H, y - H + r), W);
    u->rec2_n++;
    return found;
}

/* n-gram CPS on the partial machine: > 0 proven, 0 not, < 0 an error. */
static int try_cps(ctm_unit *u, int at_cap) {
    if (!u->cps_ws && !(u->cps_ws = ctm_cps_ws_new())) return CTM_ENOMEM;
    ctm_machine mc = {u->n, u->m, u->def, u->wr, u->mv, u->nx};
    return ctm_cps1d_search(u->cps_ws, &mc, at_cap);
}

/* 2D: the CPS of the 1D machine made of the E (R) and W (L) moves, every N or S move
 * counting as a possible halt. From the blank grid the head stays in the first row until
 * it takes an N or S move, so if that 1D machine never reaches an entry that may halt, the
 * 2D run never leaves the row and never halts. Tried on runs still in one row at the cap. */
static int try_cps_row(ctm_unit *u) {
    if (!u->cps_ws && !(u->cps_ws = ctm_cps_ws_new())) return CTM_ENOMEM;
    int8_t def[CTM_MAX_ENTRIES], mv[CTM_MAX_ENTRIES];
    for (int e = 0; e < u->nent; e++) {
        int row = u->def[e] == 1 && (u->mv[e] == CTM_E || u->mv[e] == CTM_W);
        def[e] = (int8_t)(row ? 1 : 0);
        mv[e] = (int8_t)(row && u->mv[e] == CTM_W ? 1 : 0);
    }
    ctm_machine mc = {u->n, u->m, def, u->wr, mv, u->nx};
    return ctm_cps1d(u->cps_ws, &mc, ctm_cps_attempts());
}

/* An undecided node at the cap: its weight by the size its output has
 * reached (outputs only grow, so it can never produce a smaller key), and,
 * when asked for, the node itself for other provers. */
static int give_up(ctm_unit *u, const config *box, int64_t step, ctm_count weight) {
    uint32_t size[2] = {(uint32_t)(box->yhi - box->ylo + 1), (uint32_t)(box->xhi - box->xlo + 1)};
    uint8_t key[8];
    if (!u->undec.hashes && ctm_map_init(&u->undec)) return CTM_ENOMEM;
    memcpy(key, size, sizeof key); /* little-endian hosts only, as the rest of the core */
    int rc = ctm_map_add(&u->undec, key, sizeof key, weight);
    if (rc || !u->keep_holdouts) return rc;
    const size_t rec = CTM_HOLDOUT_BYTES(u->nent);
    if (u->n_holdouts == u->holdouts_cap) {
        size_t ncap = u->holdouts_cap ? u->holdouts_cap * 2 : 64;
        uint8_t *p = realloc(u->holdouts, ncap * rec);
        if (!p) return CTM_ENOMEM;
        u->holdouts = p;
        u->holdouts_cap = ncap;
    }
    uint8_t *r = u->holdouts + u->n_holdouts++ * rec;
    const int ne = u->nent;
    memcpy(r, u->def, (size_t)ne);
    memcpy(r + ne, u->wr, (size_t)ne);
    memcpy(r + 2 * ne, u->mv, (size_t)ne);
    memcpy(r + 3 * ne, u->nx, (size_t)ne);
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
    int rc = output_key(u, c, u->dims == 1 ? 1 : 2, &len, &at, &nonblank);
    if (rc) return rc;
    u->scratch[at] = u->wr[e];
    rc = ctm_map_add(&u->raw, u->scratch, (uint32_t)len, 1);
    if (rc) return rc;
    tally_halt(u, c, 1, nonblank + (u->wr[e] != 0));
    set_touch(u, c);
    return CTM_OK;
}

/* ---------------------------------------------------------------- the search, per dimension */

/* An entry's direction and the steps it takes, looked up once when the entry is set. */
static inline void set_move(ctm_unit *u, int e, int dir) {
    u->mv[e] = (int8_t)dir;
    u->eh[e] = u->dh[dir];
    u->ex[e] = u->dx[dir];
    u->ey[e] = u->dy[dir];
}

/* A segment at step `stop`, short of the cap: the CPS due there (the early attempts at cps_at,
 * the costlier ones at quiet_at), the cycler checks off from quiet_at, and the next stop.
 * 1: proven, 0: run on to *stop, < 0: an error. */
static int reach_stop(ctm_unit *u, int64_t step, int64_t cap, int64_t quiet_at, unsigned *dec, int *cps_due,
                      int *cps_cap_due, int64_t *stop) {
    if (*cps_due && step >= u->cps_at) {
        int rc = try_cps(u, 0);
        if (rc < 0) return rc;
        *cps_due = 0;
        if (rc > 0) return 1;
    }
    if (step >= quiet_at) {
        *dec &= ~(CTM_DEC_CYCLE | CTM_DEC_SHIFT);
        if (*cps_cap_due) {
            int rc = try_cps(u, 1);
            if (rc < 0) return rc;
            *cps_cap_due = 0;
            if (rc > 0) return 1;
        }
    }
    *stop = cap;
    if (*cps_due && u->cps_at > step && u->cps_at < *stop) *stop = u->cps_at;
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
        if ((t & 3u) != 1u) { ev = RUN1_UNDEF; break; }
        const uint32_t w = t >> 8 & 0xffu, left = t >> 2 & 1u; /* 1D directions: 0 R, 1 L */
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
    const uint32_t d = (uint32_t)u->def[e] & 3u;
    u->tr[e] = d == 1 ? 1u | ((uint32_t)u->mv[e] & 3u) << 2 | (uint32_t)u->wr[e] << 8 | (uint32_t)(u->nx[e] * u->m) << 16 : d;
}

#define DIM 1
#include "ctm_search.inc"
#undef DIM
#define DIM 2
#include "ctm_search.inc"
#undef DIM

/* Draw `count` machines uniformly from the full space (every entry uniform over
 * its options) and run each from blank 0 with the deciders; the stream comes
 * from probe_seed, so a unit's samples depend on its seed alone. */
int ctm_sample(ctm_unit *u, uint64_t count) {
    const int ndir = u->dims == 1 ? 2 : 4;
    const uint64_t opts = (uint64_t)(ndir * u->n * u->m + u->m);
    const unsigned dec = u->deciders;
    config root = {0, 0, u->origin_x, u->origin_y, u->origin_x, u->origin_x,
                   u->origin_y, u->origin_y, 0, 1};
    root.head = cell(u, root.x, root.y);
    u->probe_seed = 0; /* init seeded the stream from it; the runs are tallied, not probed */
    u->cps_at = 0;     /* samples try the CPS at the cap only: few reach it, and none is weighted */
    for (uint64_t i = 0; i < count; i++) {
        int halts = 0;
        for (int e = 0; e < u->nent; e++) {
            uint64_t o = next_rand(u) % opts;
            if (o < (uint64_t)u->m) { /* HALT(write o) */
                u->def[e] = 2; u->wr[e] = (uint8_t)o; u->mv[e] = -1; u->nx[e] = 0;
                set_tr(u, e);
                halts = 1;
            } else {
                o -= (uint64_t)u->m;
                u->def[e] = 1;
                u->wr[e] = (uint8_t)(o / (uint64_t)(ndir * u->n));
                set_move(u, e, (int)((o / (uint64_t)u->n) % (uint64_t)ndir));
                u->nx[e] = (uint8_t)(o % (uint64_t)u->n);
                set_tr(u, e);
            }
        }
        u->ndef = u->nent;
        u->sym = 0;
        /* "fully defined, no HALT" is a proof only when the table really has no HALT */
        u->deciders = halts ? (dec & ~CTM_DEC_FULL) : dec;
        int rc = u->dims == 1 ? segment_1(u, root) : segment_2(u, root);
        u->deciders = dec;
        int64_t tw = u->t_xhi - u->t_xlo + 1;
        for (int64_t y = u->t_ylo; y <= u->t_yhi; y++) memset(u->tape + cell(u, u->t_xlo, y), 0, (size_t)tw);
        if (rc) return rc;
    }
    memset(u->def, 0, sizeof u->def);
    memset(u->tr, 0, sizeof u->tr);
    u->ndef = 0;
    return CTM_OK;
}

int ctm_unit_run(ctm_unit *u) {
    if (u->pow_overflow) return CTM_EOVERFLOW;
    config root = {0, 0, u->origin_x, u->origin_y, u->origin_x, u->origin_x,
                   u->origin_y, u->origin_y, 0, 1};
    root.head = cell(u, root.x, root.y);
    u->sym = 0;
    u->usym = 0;
    return u->dims == 1 ? segment_1(u, root) : segment_2(u, root);
}

/* ---------------------------------------------------------------- one machine */

int ctm_run1d(int n, int m, const uint8_t *wr, const int8_t *mv, const int16_t *nx,
              uint8_t blank, uint64_t max_steps, ctm_run_result *res) {
    if (n < 1 || m < 2 || m > 256 || blank >= m || n * m > CTM_MAX_ENTRIES) return CTM_EINVAL;
    for (int e = 0; e < n * m; e++) {
        if (wr[e] >= m || nx[e] >= n || nx[e] < CTM_NX_UNDEF) return CTM_EINVAL;
        if (nx[e] >= 0 && mv[e] != 1 && mv[e] != -1) return CTM_EINVAL;
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
        head += (size_t)(ptrdiff_t)mv[e];
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
