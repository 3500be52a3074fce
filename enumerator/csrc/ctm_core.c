/* The 1D tree-normal-form enumerator (see DESIGN.md section 2).
 *
 * A depth-first search over partial machines. A segment simulates from a
 * configuration until the run needs an undefined entry (a branch point), hits
 * the cap, or a decider proves it never halts. A branch point tallies its m
 * HALT leaves and recurses into every MOVE option from the same configuration,
 * so no run is restarted. Weights: a node with u undefined entries stands for
 * O^u machines times the new-state factors collected on its path; the mirror
 * image of every run under the first move R is counted by the factor 2. */
#include "ctm_core.h"

#include <stdlib.h>
#include <string.h>

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

/* ---------------------------------------------------------------- map */

static uint64_t hash_bytes(const uint8_t *k, uint32_t len) {
    uint64_t h = 0xcbf29ce484222325ull ^ len;
    for (uint32_t i = 0; i < len; i++) h = (h ^ k[i]) * 0x100000001b3ull;
    h ^= h >> 29;
    h *= 0xbf58476d1ce4e5b9ull;
    h ^= h >> 32;
    return h | 1u; /* 0 marks an empty slot */
}

int ctm_map_init(ctm_map *map) {
    memset(map, 0, sizeof *map);
    map->cap = 1024;
    map->hashes = calloc(map->cap, sizeof *map->hashes);
    map->offs = malloc(map->cap * sizeof *map->offs);
    map->lens = malloc(map->cap * sizeof *map->lens);
    map->vals = malloc(map->cap * sizeof *map->vals);
    map->arena_cap = 1 << 16;
    map->arena = malloc(map->arena_cap);
    if (!map->hashes || !map->offs || !map->lens || !map->vals || !map->arena) {
        ctm_map_free(map);
        return CTM_ENOMEM;
    }
    return CTM_OK;
}

void ctm_map_free(ctm_map *map) {
    free(map->hashes);
    free(map->offs);
    free(map->lens);
    free(map->vals);
    free(map->arena);
    memset(map, 0, sizeof *map);
}

static int map_grow(ctm_map *map) {
    size_t ncap = map->cap * 2;
    uint64_t *h = calloc(ncap, sizeof *h);
    uint64_t *o = malloc(ncap * sizeof *o);
    uint32_t *l = malloc(ncap * sizeof *l);
    ctm_count *v = malloc(ncap * sizeof *v);
    if (!h || !o || !l || !v) {
        free(h); free(o); free(l); free(v);
        return CTM_ENOMEM;
    }
    for (size_t i = 0; i < map->cap; i++) {
        if (!map->hashes[i]) continue;
        size_t j = map->hashes[i] & (ncap - 1);
        while (h[j]) j = (j + 1) & (ncap - 1);
        h[j] = map->hashes[i];
        o[j] = map->offs[i];
        l[j] = map->lens[i];
        v[j] = map->vals[i];
    }
    free(map->hashes); free(map->offs); free(map->lens); free(map->vals);
    map->hashes = h; map->offs = o; map->lens = l; map->vals = v;
    map->cap = ncap;
    return CTM_OK;
}

int ctm_map_add(ctm_map *map, const uint8_t *key, uint32_t len, ctm_count val) {
    uint64_t h = hash_bytes(key, len);
    size_t j = h & (map->cap - 1);
    while (map->hashes[j]) {
        if (map->hashes[j] == h && map->lens[j] == len &&
            memcmp(map->arena + map->offs[j], key, len) == 0) {
            map->vals[j] += val;
            return CTM_OK;
        }
        j = (j + 1) & (map->cap - 1);
    }
    if (map->arena_cap - map->arena_len < len) {
        size_t ncap = map->arena_cap * 2;
        while (ncap - map->arena_len < len) ncap *= 2;
        uint8_t *a = realloc(map->arena, ncap);
        if (!a) return CTM_ENOMEM;
        map->arena = a;
        map->arena_cap = ncap;
    }
    memcpy(map->arena + map->arena_len, key, len);
    map->hashes[j] = h;
    map->offs[j] = map->arena_len;
    map->lens[j] = len;
    map->vals[j] = val;
    map->arena_len += len;
    map->size++;
    if (map->size * 2 > map->cap) return map_grow(map);
    return CTM_OK;
}

/* ---------------------------------------------------------------- enumerator */

int ctm_unit_init(ctm_unit *u) {
    if (u->n < 1 || u->m < 2 || u->cap < 1 || u->n * u->m > CTM_MAX_ENTRIES || u->m > 255)
        return CTM_EINVAL;
    if (u->prefix_len < 0 || u->prefix_len > u->n * u->m) return CTM_EINVAL;
    u->nent = u->n * u->m;
    u->used = 1;
    u->ndef = 0;
    memset(u->def, 0, sizeof u->def);
    ctm_count opts = (ctm_count)(2 * u->n * u->m + u->m);
    ctm_count limit = ~(ctm_count)0 / (4 * (ctm_count)u->m); /* room for mirror and blanks */
    u->pow_opts[0] = 1;
    for (int k = 1; k <= u->nent; k++) {
        if (u->pow_opts[k - 1] > limit / opts) return CTM_EOVERFLOW;
        u->pow_opts[k] = u->pow_opts[k - 1] * opts;
    }
    u->tape_len = 2 * u->cap + 3 + 2 * CTM_REC_WINDOW; /* padding for record windows */
    u->halting = u->non_halting = u->undecided = 0;
    u->halting_nodes = 0;
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
    u->tape = calloc((size_t)u->tape_len, 1);
    u->snap = calloc((size_t)u->tape_len, 1);
    u->scratch = calloc((size_t)u->tape_len + 1, 1);
    u->saves = malloc((size_t)u->tape_len * (size_t)(u->nent + 1));
    u->hist_steps = calloc((size_t)u->cap + 1, sizeof(ctm_count));
    u->hist_len = calloc((size_t)u->cap + 2, sizeof(ctm_count));
    int rc = ctm_map_init(&u->raw);
    if (rc || !u->tape || !u->snap || !u->scratch || !u->saves || !u->hist_steps || !u->hist_len) {
        ctm_unit_free(u);
        return CTM_ENOMEM;
    }
    return CTM_OK;
}

void ctm_unit_free(ctm_unit *u) {
    free(u->tape); free(u->snap); free(u->scratch); free(u->saves);
    free(u->hist_steps); free(u->hist_len); free(u->cuts); free(u->cut_weights);
    u->tape = u->snap = u->scratch = u->saves = NULL;
    u->hist_steps = u->hist_len = NULL;
    u->cuts = NULL;
    u->cut_weights = NULL;
    if (u->raw.hashes) ctm_map_free(&u->raw);
}

static uint64_t next_rand(ctm_unit *u) { /* xorshift64* */
    u->rng ^= u->rng >> 12;
    u->rng ^= u->rng << 25;
    u->rng ^= u->rng >> 27;
    return u->rng * 0x2545f4914f6cdd1dull;
}

/* On fresh blank tape, does the chain of blank-reading entries from `state`
 * keep moving in direction `dir` and close into a cycle? Then the head runs
 * off forever. */
static int escapes(const ctm_unit *u, int state, int dir) {
    uint64_t seen = 0;
    for (;;) {
        if (seen & (1ull << state)) return 1;
        seen |= 1ull << state;
        int e = state * u->m;
        if (!u->def[e] || u->mv[e] != dir) return 0;
        state = u->nx[e];
    }
}

/* Is the tape on [lo, hi] the one snapshotted on [slo, shi] (blank outside)? */
static int same_tape(const ctm_unit *u, int64_t lo, int64_t hi, int64_t slo, int64_t shi) {
    for (int64_t i = lo; i < slo; i++)
        if (u->tape[i]) return 0;
    for (int64_t i = shi + 1; i <= hi; i++)
        if (u->tape[i]) return 0;
    return memcmp(u->tape + slo, u->snap + slo, (size_t)(shi - slo + 1)) == 0;
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

typedef struct {
    int state;
    int64_t head, lo, hi, step;
    ctm_count mult; /* the new-state factors collected on the path */
} config;

static int segment(ctm_unit *u, config c);

static int branch(ctm_unit *u, config c) {
    const int d = u->ndef;
    const int following = u->prefix_len > d;
    if (!following && u->cut_depth == d && !u->probe_seed) {
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
        u->cut_weights[u->n_cuts] = c.mult * u->pow_opts[u->nent - d] * (u->mirror_flag ? 2 : 1);
        u->n_cuts++;
        u->touch_lo = c.lo;
        u->touch_hi = c.hi;
        return CTM_OK;
    }
    const int m = u->m;
    const int root = d == 0;
    const int ndirs = root ? 1 : 2;
    const int nnext = u->used + (u->used < u->n);
    const int nmoves = m * ndirs * nnext;
    const int e = c.state * m + u->tape[c.head];
    int first = 0, last = nmoves - 1;

    if (following) {
        if (u->prefix[d] >= nmoves) return CTM_EINVAL;
        first = last = u->prefix[d];
    } else if (u->probe_seed) {
        u->est_nodes += u->probe_factor;
        int k = m + nmoves;
        int pick = (int)(next_rand(u) % (uint64_t)k);
        u->probe_factor *= k;
        if (pick < m) {
            u->touch_lo = c.lo;
            u->touch_hi = c.hi;
            return CTM_OK;
        }
        first = last = pick - m;
    } else {
        /* the m HALT leaves of this branch point */
        u->halting_nodes++;
        ctm_count w = c.mult * u->pow_opts[u->nent - d - 1];
        int64_t len = c.hi - c.lo + 1;
        uint8_t *key = u->scratch;
        key[0] = (uint8_t)u->mirror_flag;
        memcpy(key + 1, u->tape + c.lo, (size_t)len);
        int64_t nonblank = 0;
        for (int64_t i = 0; i < len; i++) nonblank += key[1 + i] != 0;
        nonblank -= key[1 + c.head - c.lo] != 0;
        for (int s = 0; s < m; s++) {
            key[1 + c.head - c.lo] = (uint8_t)s;
            int rc = ctm_map_add(&u->raw, key, (uint32_t)(len + 1), w);
            if (rc) return rc;
        }
        ctm_count total = w * (ctm_count)m * (u->mirror_flag ? 2 : 1);
        u->halting += total;
        u->hist_steps[c.step + 1] += total;
        u->hist_len[len] += total;
        if (c.step + 1 > u->longest_run) u->longest_run = c.step + 1;
        if (nonblank + 1 > u->most_nonblank) u->most_nonblank = nonblank + 1;
    }

    uint8_t *save = u->saves + (size_t)d * (size_t)u->tape_len;
    memcpy(save + c.lo, u->tape + c.lo, (size_t)(c.hi - c.lo + 1));
    const int used = u->used;
    for (int k = first; k <= last; k++) {
        int w = k / (ndirs * nnext);
        int r = k % (ndirs * nnext);
        int dir = (r / nnext == 0) ? 1 : -1;
        int nxt = r % nnext;
        config child = c;
        if (nxt == used) {
            child.mult *= (ctm_count)(u->n - used);
            u->used = used + 1;
        }
        u->def[e] = 1;
        u->wr[e] = (uint8_t)w;
        u->mv[e] = (int8_t)dir;
        u->nx[e] = (uint8_t)nxt;
        u->ndef = d + 1;
        u->path[d] = (uint16_t)k;
        if (root) u->mirror_flag = 1;
        int rc = segment(u, child);
        if (root) u->mirror_flag = 0;
        u->def[e] = 0;
        u->ndef = d;
        u->used = used;
        /* put the tape back to this branch point's configuration */
        if (u->touch_lo < c.lo) memset(u->tape + u->touch_lo, 0, (size_t)(c.lo - u->touch_lo));
        if (u->touch_hi > c.hi) memset(u->tape + c.hi + 1, 0, (size_t)(u->touch_hi - c.hi));
        memcpy(u->tape + c.lo, save + c.lo, (size_t)(c.hi - c.lo + 1));
        if (rc) return rc;
    }
    u->touch_lo = c.lo;
    u->touch_hi = c.hi;
    return CTM_OK;
}

static int segment(ctm_unit *u, config c) {
    const int m = u->m;
    const unsigned dec = u->deciders;
    const int64_t cap = u->cap;
    const int64_t start = c.step;
    ctm_count weight = c.mult * u->pow_opts[u->nent - u->ndef] * (u->mirror_flag ? 2 : 1);
    int outcome; /* 0 undecided, 1 proven non-halting */
    int state = c.state;
    int64_t head = c.head, lo = c.lo, hi = c.hi, step = c.step;
    /* Brent's cycle detection; the first snapshot waits 8 steps, since most
     * segments reach a branch point sooner and would only pay for the copy */
    int snap_state = -1;
    int64_t snap_head = 0, snap_lo = lo, snap_hi = hi, power = 8, lam = 0;

    if ((dec & CTM_DEC_FULL) && u->ndef == u->nent) {
        outcome = 1;
        goto done;
    }
    int64_t back_r = head, back_l = head; /* farthest back from each edge since its last record */
    u->rec_n[0] = u->rec_n[1] = 0;
    for (;;) {
        if (step >= cap) {
            outcome = 0;
            break;
        }
        int e = state * m + u->tape[head];
        if (!u->def[e]) {
            u->steps += (uint64_t)(step - start);
            if (u->probe_seed && u->ndef >= u->prefix_len)
                u->est_steps += u->probe_factor * (double)(step - start);
            config b = {state, head, lo, hi, step, c.mult};
            return branch(u, b);
        }
        u->tape[head] = u->wr[e];
        head += u->mv[e];
        state = u->nx[e];
        step++;
        if (head < lo) {
            lo = head;
            if ((dec & CTM_DEC_ESCAPE) && escapes(u, state, -1)) { outcome = 1; break; }
            if (dec & CTM_DEC_SHIFT) {
                if (translated(u, 1, state, head, back_l)) { outcome = 1; break; }
                back_l = head;
            }
        } else if (head > hi) {
            hi = head;
            if ((dec & CTM_DEC_ESCAPE) && escapes(u, state, 1)) { outcome = 1; break; }
            if (dec & CTM_DEC_SHIFT) {
                if (translated(u, 0, state, head, back_r)) { outcome = 1; break; }
                back_r = head;
            }
        }
        if (head < back_r) back_r = head;
        if (head > back_l) back_l = head;
        if (dec & CTM_DEC_CYCLE) {
            if (state == snap_state && head == snap_head &&
                same_tape(u, lo, hi, snap_lo, snap_hi)) {
                outcome = 1;
                break;
            }
            if (++lam == power) { /* Brent: a fresh snapshot at doubling intervals */
                snap_state = state;
                snap_head = head;
                snap_lo = lo;
                snap_hi = hi;
                memcpy(u->snap + lo, u->tape + lo, (size_t)(hi - lo + 1));
                power <<= 1;
                lam = 0;
            }
        }
    }
done:
    u->steps += (uint64_t)(step - start);
    u->touch_lo = lo;
    u->touch_hi = hi;
    if (u->probe_seed) {
        if (u->ndef >= u->prefix_len) u->est_steps += u->probe_factor * (double)(step - start);
        return CTM_OK;
    }
    if (u->prefix_len > u->ndef) return CTM_EINVAL; /* the prefix names no branch point */
    if (outcome) u->non_halting += weight;
    else u->undecided += weight;
    return CTM_OK;
}

int ctm_unit_run(ctm_unit *u) {
    const int64_t origin = u->cap + 1 + CTM_REC_WINDOW;
    config root = {0, origin, origin, origin, 0, 1};
    u->mirror_flag = 0;
    return segment(u, root);
}

/* ---------------------------------------------------------------- one machine */

int ctm_run1d(int n, int m, const uint8_t *wr, const int8_t *mv, const int16_t *nx,
              uint8_t blank, uint64_t max_steps, ctm_run_result *res) {
    if (n < 1 || m < 2 || blank >= m) return CTM_EINVAL;
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
