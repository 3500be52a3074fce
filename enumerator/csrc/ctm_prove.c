/* Proofs of non-halting that run after the cap, on undecided nodes only, from
 * the blank tape. A proof must hold for every completion of the partial
 * machine, so an undefined entry counts as a possible halt, as does a HALT.
 *
 * n-gram closed position set (CPS), 1D. An abstract configuration is the
 * state, the n cells on each side of the head and the head cell; beyond the
 * windows only the sets L and R of n-grams that may occur on the left and on
 * the right half-tape are kept. Starting from the blank tape, the reachable
 * abstract configurations and the two sets are grown to a fixed point. Every
 * real configuration is covered by one of them (by induction on the steps), so
 * if none of them reads an entry that may halt, the machine never halts.
 *
 * History: a cell may also carry the tags of the last k transitions that wrote
 * it. The transitions read only the symbol, so the augmented machine runs in
 * lockstep with the plain one and halts exactly when it does; the richer cells
 * let the fixed point separate tape regions that plain n-grams merge.
 *
 * Two representations reach the same fixed point: words of uint16 cells
 * (cps_once, any size) and, where a configuration fits 128 bits, packed
 * integers (cps_packed), where a move is a shift and narrow sets index their
 * slots directly. The packed one is about twice as fast on the 1D (6,2) nodes;
 * a test checks that both give the same attempt on every node. */
#include "ctm_core.h"

#include <stdlib.h>
#include <string.h>

#define NOT_PROVEN 0
#define PROVEN 1

/* A set of fixed-length words of uint16 cells, kept in insertion order. The
 * slots carry a generation stamp, so a reused set is cleared in O(1). */
typedef struct {
    int len;
    uint16_t *keys;
    int32_t *slots;
    uint32_t *gens;
    uint32_t *tags;   /* per slot: high bits of the key's hash, checked before the key */
    uint32_t gen;
    size_t count, cap, nslots, limit;
} wset;

#ifdef __SIZEOF_INT128__
#define CPS_PACKED 1
typedef unsigned __int128 pkey;
/* A set of words packed into one 128-bit integer, in insertion order. Narrow words index
 * their slot directly; wider ones hash. A slot holds the reset's stamp above the index, so a
 * reset clears nothing. */
#define PSET_IDX_BITS 17
#define PSET_SLOTS (1u << PSET_IDX_BITS)
#define PSET_DIRECT_BITS 16
typedef struct {
    pkey *keys;
    uint32_t *slots;    /* PSET_SLOTS: stamp << PSET_IDX_BITS | index */
    uint32_t stamp;
    size_t count, limit, cap;
    int direct, shift;  /* direct: the word is its slot; else slot = hash >> shift */
    uint32_t mask;      /* slots in use - 1 */
} pset;
#endif

struct ctm_cps_ws {
    wset sets[5];           /* L, R, configurations, the two waiting keys */
#ifdef CPS_PACKED
    pset psets[5];          /* the same five for packed words */
    pkey *base;             /* per configuration: its successor without the incoming cell */
    size_t base_cap;
#endif
    int word_arrays_only;   /* tests: never the packed sets */
    int no_bitsets;         /* tests: never the bitset attempt */
    int32_t *first[2], *next; /* per waiting key its first configuration; per configuration the next */
    int32_t *gfirst[2], *gnext[2]; /* per key its first matching n-gram; per n-gram the next */
    size_t links_cap;
};

static int wset_init(wset *s) {
    s->cap = 64 * 34;  /* uint16 cells: 64 keys of the longest length */
    s->nslots = 256;
    s->gen = 0;
    s->keys = malloc(s->cap * sizeof *s->keys);
    s->slots = malloc(s->nslots * sizeof *s->slots);
    s->gens = calloc(s->nslots, sizeof *s->gens);
    s->tags = malloc(s->nslots * sizeof *s->tags);
    return s->keys && s->slots && s->gens && s->tags ? CTM_OK : CTM_ENOMEM;
}

static void wset_free(wset *s) {
    free(s->keys);
    free(s->slots);
    free(s->gens);
    free(s->tags);
    s->keys = NULL;
    s->slots = NULL;
    s->gens = NULL;
    s->tags = NULL;
}

static void wset_reset(wset *s, int len, size_t limit) {
    s->len = len;
    s->limit = limit;
    s->count = 0;
    if (++s->gen == 0) { /* wrapped: clear the stamps once */
        memset(s->gens, 0, s->nslots * sizeof *s->gens);
        s->gen = 1;
    }
}

static uint64_t whash(const uint16_t *w, int len) {
    /* four cells per 64-bit word, then one multiply-xorshift round each */
    uint64_t h = 0x9e3779b97f4a7c15ull ^ (uint64_t)len;
    int i = 0;
    for (; i + 4 <= len; i += 4) {
        uint64_t x;
        memcpy(&x, w + i, sizeof x);
        h = (h ^ x) * 0xbf58476d1ce4e5b9ull;
        h ^= h >> 29;
    }
    uint64_t x = 0;
    for (int k = 0; i < len; i++, k += 16) x |= (uint64_t)w[i] << k;
    h = (h ^ x) * 0x94d049bb133111ebull;
    h ^= h >> 31;
    return h * 0xbf58476d1ce4e5b9ull;
}

/* Words are a few cells long: a plain loop beats a call to memcmp. */
static inline int weq(const uint16_t *a, const uint16_t *b, int len) {
    for (int i = 0; i < len; i++)
        if (a[i] != b[i]) return 0;
    return 1;
}

static int wset_rehash(wset *s, size_t ns) {
    int32_t *sl = malloc(ns * sizeof *sl);
    uint32_t *gn = calloc(ns, sizeof *gn), *tg = malloc(ns * sizeof *tg);
    if (!sl || !gn || !tg) { free(sl); free(gn); free(tg); return CTM_ENOMEM; }
    for (size_t i = 0; i < s->count; i++) {
        uint64_t h = whash(s->keys + i * (size_t)s->len, s->len);
        size_t q = (size_t)(h >> 20) & (ns - 1);
        while (gn[q] == s->gen) q = (q + 1) & (ns - 1);
        sl[q] = (int32_t)i;
        gn[q] = s->gen;
        tg[q] = (uint32_t)(h >> 32);
    }
    free(s->slots);
    free(s->gens);
    free(s->tags);
    s->slots = sl;
    s->gens = gn;
    s->tags = tg;
    s->nslots = ns;
    return CTM_OK;
}

/* 1: inserted, 0: present, 2: the set reached its limit, <0: error; *index: the word's index
 * (new or present) */
static int wset_put(wset *s, const uint16_t *w, int32_t *index) {
    const uint64_t h = whash(w, s->len);
    const uint32_t tag = (uint32_t)(h >> 32);
    size_t mask = s->nslots - 1, j = (size_t)(h >> 20) & mask;
    for (; s->gens[j] == s->gen; j = (j + 1) & mask)
        if (s->tags[j] == tag && weq(s->keys + (size_t)s->slots[j] * (size_t)s->len, w, s->len)) {
            *index = s->slots[j];
            return 0;
        }
    if (s->count >= s->limit) return 2;
    if ((s->count + 1) * (size_t)s->len > s->cap) {
        uint16_t *k = realloc(s->keys, s->cap * 2 * sizeof *k);
        if (!k) return CTM_ENOMEM;
        s->keys = k;
        s->cap *= 2;
    }
    memcpy(s->keys + s->count * (size_t)s->len, w, (size_t)s->len * sizeof *w);
    *index = (int32_t)s->count;
    s->slots[j] = (int32_t)s->count++;
    s->gens[j] = s->gen;
    s->tags[j] = tag;
    if (s->count * 2 > s->nslots) return wset_rehash(s, s->nslots * 2) ? CTM_ENOMEM : 1;
    return 1;
}

static inline int wset_add(wset *s, const uint16_t *w) {
    int32_t index;
    return wset_put(s, w, &index);
}

ctm_cps_ws *ctm_cps_ws_new(void) {
    ctm_cps_ws *ws = calloc(1, sizeof *ws);
    if (!ws) return NULL;
    for (int i = 0; i < 5; i++)
        if (wset_init(&ws->sets[i])) { ctm_cps_ws_free(ws); return NULL; }
    return ws;
}

void ctm_cps_ws_free(ctm_cps_ws *ws) {
    if (!ws) return;
#ifdef CPS_PACKED
    for (int i = 0; i < 5; i++) { free(ws->psets[i].keys); free(ws->psets[i].slots); }
    free(ws->base);
#endif
    for (int i = 0; i < 5; i++) wset_free(&ws->sets[i]);
    free(ws->first[0]);
    free(ws->first[1]);
    free(ws->next);
    for (int i = 0; i < 2; i++) { free(ws->gfirst[i]); free(ws->gnext[i]); }
    free(ws);
}

/* The abstract step of configuration cfg: the entry, what it writes (with its
 * history) and where it goes. */
typedef struct {
    int n, m, nent;
    uint32_t period;
    const ctm_machine *mc;
} cps_ctx;

static int step_of(const cps_ctx *x, const uint16_t *cfg, uint16_t *written, int *ns, int *right) {
    const int n = x->n, m = x->m;
    const uint16_t head = cfg[1 + n];
    const int e = cfg[0] * m + head % m;
    if (x->mc->def[e] != CTM_ENTRY_MOVE) return 0; /* an entry that may halt is reachable */
    const uint32_t hist = ((uint32_t)(head / m) * (uint32_t)(x->nent + 1) + (uint32_t)(e + 1)) % x->period;
    *written = (uint16_t)(x->mc->wr[e] + (uint32_t)m * hist);
    *ns = x->mc->nx[e];
    *right = x->mc->mv[e] == CTM_R;
    return 1;
}

/* The successor of cfg when the cell pulled into its window comes from n-gram g. */
static void successor(const cps_ctx *x, const uint16_t *cfg, const uint16_t *g, uint16_t *out) {
    const int n = x->n;
    uint16_t written = 0;
    int ns = 0, right = 0;
    step_of(x, cfg, &written, &ns, &right); /* defined: cfg was expanded before it waited */
    const uint16_t *lw = cfg + 1, *rw = cfg + 2 + n;
    out[0] = (uint16_t)ns;
    if (right) { /* left window gains the written cell; the head reads rw[0]; g[n-1] enters on the right */
        memcpy(out + 1, lw + 1, (size_t)(n - 1) * sizeof *out);
        out[n] = written;
        out[1 + n] = rw[0];
        memcpy(out + 2 + n, rw + 1, (size_t)(n - 1) * sizeof *out);
        out[1 + 2 * n] = g[n - 1];
    } else {       /* mirror image: g[0] enters on the left */
        out[1] = g[0];
        memcpy(out + 2, lw, (size_t)(n - 1) * sizeof *out);
        out[1 + n] = lw[n - 1];
        out[2 + n] = written;
        memcpy(out + 3 + n, rw, (size_t)(n - 1) * sizeof *out);
    }
}

/* The tag histories a cell may carry with k tags, (entries + 1)^k; 0 when the cell values
 * (m times that) would not fit uint16, so the attempt gives up. */
static uint32_t tag_period(const ctm_machine *mc, int k) {
    uint64_t period = 1;
    for (int i = 0; i <= k; i++) { /* check before the product can wrap */
        if (period * (uint64_t)mc->m > 65535u) return 0;
        if (i < k) period *= (uint64_t)(mc->n * mc->m + 1);
    }
    return (uint32_t)period;
}

/* The waiting lists of both representations: room for 2 limit keys, configurations, n-grams. */
static int links_fit(ctm_cps_ws *ws, size_t limit) {
    if (ws->links_cap >= 2 * limit) return CTM_OK;
    int32_t **arrays[7] = {&ws->first[0], &ws->first[1], &ws->next, &ws->gfirst[0], &ws->gfirst[1],
                           &ws->gnext[0], &ws->gnext[1]};
    for (int a = 0; a < 7; a++) {
        int32_t *p = realloc(*arrays[a], 2 * limit * sizeof *p);
        if (!p) return CTM_ENOMEM;
        *arrays[a] = p;
    }
    ws->links_cap = 2 * limit;
    return CTM_OK;
}

/* One CPS attempt with windows of n cells and cells of m period values (k history tags:
 * period = tag_period(mc, k)). A worklist
 * over the configurations; each one waits, keyed by the n-1 cells an n-gram must
 * match, for n-grams that arrive after it, so nothing is ever rescanned. */
static int cps_once(ctm_cps_ws *ws, const ctm_machine *mc, int n, uint32_t period, size_t limit) {
    cps_ctx x = {n, mc->m, mc->n * mc->m, period, mc};
    const int clen = 2 * n + 2; /* state, left window, head cell, right window */
    wset *L = &ws->sets[0], *R = &ws->sets[1], *C = &ws->sets[2], *K[2] = {&ws->sets[3], &ws->sets[4]};
    wset_reset(L, n, limit);
    wset_reset(R, n, limit);
    wset_reset(C, clen, limit);
    /* keys come from configurations and from n-grams: at most the two limits together */
    wset_reset(K[0], n - 1, 2 * limit); /* right movers wait on rw[1..n-1], a prefix of R's n-grams */
    wset_reset(K[1], n - 1, 2 * limit); /* left movers wait on lw[0..n-2], a suffix of L's n-grams */
    int rc = links_fit(ws, limit);
    if (rc) return rc;
    uint16_t cfg[2 * CTM_CPS_MAX_WINDOW + 2], nxt[2 * CTM_CPS_MAX_WINDOW + 2], gram[CTM_CPS_MAX_WINDOW];
    memset(cfg, 0, sizeof cfg);
    memset(gram, 0, sizeof gram);
    int32_t key, gi;
    /* Side 0: right movers, keyed by rw[1..n-1], which R's n-grams match by their first n-1 cells.
     * Side 1: left movers, keyed by lw[0..n-2], which L's n-grams match by their last n-1 cells.
     * Each key lists the configurations waiting on it and the n-grams that match it. */
#define CPS_KEY(side, word)                                                   \
    do {                                                                      \
        rc = wset_put(K[side], (word), &key);                                 \
        if (rc < 0) return rc;                                                \
        if (rc == 2) return NOT_PROVEN;                                       \
        if (rc == 1) ws->first[side][key] = ws->gfirst[side][key] = -1;       \
    } while (0)
    /* the blank n-gram on both sides */
    for (int side = 0; side < 2; side++) {
        wset *G = side ? L : R;
        if ((rc = wset_put(G, gram, &gi)) < 0) return rc;
        CPS_KEY(side, gram);
        ws->gnext[side][gi] = ws->gfirst[side][key];
        ws->gfirst[side][key] = gi;
    }
    if ((rc = wset_add(C, cfg)) < 0) return rc;
    for (size_t i = 0; i < C->count; i++) {
        memcpy(cfg, C->keys + i * (size_t)clen, (size_t)clen * sizeof *cfg);
        uint16_t written;
        int ns, right;
        if (!step_of(&x, cfg, &written, &ns, &right)) return NOT_PROVEN;
        const uint16_t *lw = cfg + 1, *rw = cfg + 2 + n;
        /* the n-gram the move leaves behind: right, the new left window; left, the new right one */
        wset *grown = right ? L : R;
        if (right) { memcpy(gram, lw + 1, (size_t)(n - 1) * sizeof *gram); gram[n - 1] = written; }
        else { gram[0] = written; memcpy(gram + 1, rw, (size_t)(n - 1) * sizeof *gram); }
        int added = wset_put(grown, gram, &gi);
        if (added < 0) return added;
        if (added == 2) return NOT_PROVEN;
        if (added == 1) { /* index it, and wake the movers the other way that wait for it */
            const int gside = right ? 1 : 0;
            CPS_KEY(gside, right ? gram + 1 : gram);
            ws->gnext[gside][gi] = ws->gfirst[gside][key];
            ws->gfirst[gside][key] = gi;
            for (int32_t j = ws->first[gside][key]; j >= 0; j = ws->next[j]) {
                successor(&x, C->keys + (size_t)j * (size_t)clen, gram, nxt);
                if ((rc = wset_add(C, nxt)) < 0) return rc;
                if (rc == 2) return NOT_PROVEN;
            }
        }
        /* this configuration waits for the n-grams that may enter its window, and takes those known */
        const int side = right ? 0 : 1;
        const wset *pull = right ? R : L;
        CPS_KEY(side, right ? rw + 1 : lw);
        ws->next[i] = ws->first[side][key];
        ws->first[side][key] = (int32_t)i;
        for (int32_t g = ws->gfirst[side][key]; g >= 0; g = ws->gnext[side][g]) {
            successor(&x, cfg, pull->keys + (size_t)g * (size_t)n, nxt);
            if ((rc = wset_add(C, nxt)) < 0) return rc;
            if (rc == 2) return NOT_PROVEN;
        }
    }
#undef CPS_KEY
    return PROVEN;
}


#ifdef CPS_PACKED
static int pset_reset(pset *s, int width, size_t limit) {
    if (!s->slots && !(s->slots = calloc(PSET_SLOTS, sizeof *s->slots))) return CTM_ENOMEM;
    if (s->cap < limit) {
        pkey *k = realloc(s->keys, limit * sizeof *k);
        if (!k) return CTM_ENOMEM;
        s->keys = k;
        s->cap = limit;
    }
    if (++s->stamp >= (1u << (32 - PSET_IDX_BITS))) { /* wrapped: clear the stamps once */
        memset(s->slots, 0, PSET_SLOTS * sizeof *s->slots);
        s->stamp = 1;
    }
    s->count = 0;
    s->limit = limit;
    s->direct = width <= PSET_DIRECT_BITS;
    int bits = 6; /* hashed: at least twice the limit, so probes stay short */
    while (((size_t)1 << bits) < 2 * limit) bits++;
    s->shift = 64 - bits;
    s->mask = s->direct ? PSET_SLOTS - 1 : (uint32_t)(((uint64_t)1 << bits) - 1);
    return CTM_OK;
}

static inline size_t pset_slot(const pset *s, pkey w) {
    if (s->direct) return (size_t)w;
    uint64_t h = ((uint64_t)w ^ (uint64_t)(w >> 64) * 0x9e3779b97f4a7c15ull) * 0xbf58476d1ce4e5b9ull;
    return (size_t)((h ^ (h >> 31)) * 0x94d049bb133111ebull >> s->shift);
}

/* as wset_put: 1 inserted, 0 present, 2 the set reached its limit; *index the word's index */
static inline int pset_put(pset *s, pkey w, int32_t *index) {
    const uint32_t idx_mask = PSET_SLOTS - 1;
    for (size_t j = pset_slot(s, w);; j = (j + 1) & s->mask) {
        const uint32_t v = s->slots[j];
        if (v >> PSET_IDX_BITS != s->stamp) {
            if (s->count >= s->limit) return 2;
            *index = (int32_t)s->count;
            s->slots[j] = s->stamp << PSET_IDX_BITS | (uint32_t)s->count;
            s->keys[s->count++] = w;
            return 1;
        }
        if (s->keys[v & idx_mask] == w) {
            *index = (int32_t)(v & idx_mask);
            return 0;
        }
    }
}

/* Whether an attempt fits the packed sets: a configuration (state and 2n + 1 cells of m period
 * values) in 128 bits, every index in PSET_IDX_BITS. */
static int packed_fits(const ctm_machine *mc, int n, uint32_t period, size_t limit, int *cell_bits,
                       int *state_bits) {
    const uint64_t values = (uint64_t)mc->m * period;
    int b = 1, sb = 1;
    while (((uint64_t)1 << b) < values) b++;
    while ((1 << sb) < mc->n) sb++;
    if (sb + (2 * n + 1) * b > 128 || 4 * limit > PSET_SLOTS) return 0; /* K: 2 limit words, twice the slots */
    *cell_bits = b;
    *state_bits = sb;
    return 1;
}

/* cps_once on packed words. A configuration is its state in the low sb bits, then its 2n + 1
 * cells in tape order, b bits each: the left window (position 0 farthest out), the head cell
 * at position n, the right window. A move is then a shift, and the cell that enters the window
 * the only thing an n-gram adds: each configuration keeps its successor without that cell. */
static int cps_packed(ctm_cps_ws *ws, const ctm_machine *mc, int n, uint32_t period, size_t limit, int b, int sb) {
    const int m = mc->m, nent = mc->n * mc->m;
    const pkey one = 1, cm = (one << b) - 1, sm = (one << sb) - 1;
    const pkey win = (one << ((2 * n + 1) * b)) - 1;   /* the cells of a configuration */
    const pkey gmask = (one << (n * b)) - 1;           /* an n-gram */
    const pkey kmask = (one << ((n - 1) * b)) - 1;     /* a waiting key: n - 1 cells */
    const int head_at = n * b, top_at = 2 * n * b;
    pset *L = &ws->psets[0], *R = &ws->psets[1], *C = &ws->psets[2], *K[2] = {&ws->psets[3], &ws->psets[4]};
    int rc;
    if ((rc = pset_reset(L, n * b, limit)) || (rc = pset_reset(R, n * b, limit))
        || (rc = pset_reset(C, sb + (2 * n + 1) * b, limit)) || (rc = pset_reset(K[0], (n - 1) * b, 2 * limit))
        || (rc = pset_reset(K[1], (n - 1) * b, 2 * limit)))
        return rc;
    if ((rc = links_fit(ws, limit))) return rc;
    if (ws->base_cap < limit) {
        pkey *p = realloc(ws->base, limit * sizeof *p);
        if (!p) return CTM_ENOMEM;
        ws->base = p;
        ws->base_cap = limit;
    }
    int32_t key, gi = 0, ci;
    /* side 0: right movers, keyed by rw[1..n-1], the first n - 1 cells of R's n-grams; the
     * incoming cell is the n-gram's last. Side 1: left movers, keyed by lw[0..n-2], the last
     * n - 1 cells of L's n-grams; the incoming cell is the n-gram's first. */
#define PCPS_KEY(side, word)                                                  \
    do {                                                                      \
        rc = pset_put(K[side], (word), &key);                                 \
        if (rc == 2) return NOT_PROVEN;                                       \
        if (rc == 1) ws->first[side][key] = ws->gfirst[side][key] = -1;       \
    } while (0)
#define PCPS_IN(side, g) ((side) ? ((g) & cm) << sb : ((g) >> ((n - 1) * b)) << (sb + top_at))
#define PCPS_ADD(word)                                                        \
    do {                                                                      \
        rc = pset_put(C, (word), &ci);                                        \
        if (rc == 2) return NOT_PROVEN;                                       \
    } while (0)
    for (int side = 0; side < 2; side++) { /* the blank n-gram on both sides */
        pset *G = side ? L : R;
        pset_put(G, 0, &gi);
        PCPS_KEY(side, 0);
        ws->gnext[side][gi] = ws->gfirst[side][key];
        ws->gfirst[side][key] = gi;
    }
    PCPS_ADD(0);
    for (size_t i = 0; i < C->count; i++) {
        const pkey cfg = C->keys[i];
        const pkey cells = cfg >> sb;
        const uint32_t head = (uint32_t)(cells >> head_at & cm);
        const uint32_t sym = m == 2 ? head & 1u : head % (uint32_t)m;
        const int e = (int)(cfg & sm) * m + (int)sym;
        if (mc->def[e] != CTM_ENTRY_MOVE) return NOT_PROVEN; /* an entry that may halt is reachable */
        uint32_t written = mc->wr[e];
        if (period > 1) {
            const uint32_t hist = m == 2 ? head >> 1 : head / (uint32_t)m;
            written += (uint32_t)m * ((hist * (uint32_t)(nent + 1) + (uint32_t)(e + 1)) % period);
        }
        const pkey put = (cells & ~(cm << head_at)) | (pkey)written << head_at;
        const int right = mc->mv[e] == CTM_R;
        pkey moved, gram;
        if (right) { moved = put >> b; gram = moved & gmask; }
        else { moved = (put << b) & win; gram = moved >> ((n + 1) * b); }
        ws->base[i] = moved << sb | (pkey)mc->nx[e];
        /* the n-gram the move leaves behind: right, the new left window; left, the new right one */
        pset *grown = right ? L : R;
        int added = pset_put(grown, gram, &gi);
        if (added == 2) return NOT_PROVEN;
        if (added == 1) { /* index it, and wake the movers the other way that wait for it */
            const int gside = right ? 1 : 0;
            PCPS_KEY(gside, right ? gram >> b : gram & kmask);
            ws->gnext[gside][gi] = ws->gfirst[gside][key];
            ws->gfirst[gside][key] = gi;
            const pkey in = PCPS_IN(gside, gram);
            for (int32_t j = ws->first[gside][key]; j >= 0; j = ws->next[j]) PCPS_ADD(ws->base[j] | in);
        }
        /* this configuration waits for the n-grams that may enter its window, and takes those known */
        const int side = right ? 0 : 1;
        const pset *pull = right ? R : L;
        PCPS_KEY(side, right ? (cells >> ((n + 2) * b)) & kmask : cells & kmask);
        ws->next[i] = ws->first[side][key];
        ws->first[side][key] = (int32_t)i;
        const pkey base = ws->base[i];
        for (int32_t g = ws->gfirst[side][key]; g >= 0; g = ws->gnext[side][g]) PCPS_ADD(base | PCPS_IN(side, pull->keys[g]));
    }
#undef PCPS_KEY
#undef PCPS_IN
#undef PCPS_ADD
    return PROVEN;
}
#endif

/* cps_once for binary machines with plain cells (no history) where every configuration fits
 * a bitset: the state and 2n + 1 bits, packed as in cps_packed. The sets are bit masks, so
 * the first attempts of the schedule, which nearly every node reaching the CPS meets, cost a
 * few hundred cycles instead of a set's setup. Used only where the configurations, n-grams
 * and keys can never reach the attempt's limit, so it reaches the same verdict as the
 * others: proven exactly when no configuration of the least fixed point may halt. */
#define CPS_BITS_MAX 4096
static int bits_fit(const ctm_machine *mc, int n, uint32_t period, size_t limit) {
    if (mc->m != 2 || period != 1 || n < 1 || n > 5) return 0;
    const size_t configs = (size_t)mc->n << (2 * n + 1);
    return configs <= CPS_BITS_MAX && configs <= limit && ((size_t)1 << n) <= limit;
}

/* Where configuration cf goes: 0 if it may halt; else its successor without the incoming
 * cell, whether it moves right, and the key an incoming n-gram must match. */
static inline int bits_step(const ctm_machine *mc, int n, uint32_t cf, uint32_t *base, int *right,
                            uint32_t *key) {
    const int cb = 2 * n + 1;
    const uint32_t cells = cf & ((1u << cb) - 1), kmask = (1u << (n - 1)) - 1;
    const int e = (int)(cf >> cb) * 2 + (int)(cells >> n & 1u);
    if (mc->def[e] != CTM_ENTRY_MOVE) return 0;
    const uint32_t put = (cells & ~(1u << n)) | (uint32_t)mc->wr[e] << n;
    *right = mc->mv[e] == CTM_R;
    const uint32_t moved = *right ? put >> 1 : (put << 1) & ((1u << cb) - 1);
    *base = (uint32_t)mc->nx[e] << cb | moved;
    *key = *right ? (cells >> (n + 2)) & kmask : cells & kmask;
    return 1;
}

static int cps_bits(const ctm_machine *mc, int n) {
    const int cb = 2 * n + 1, top = 2 * n;
    uint64_t in_c[CPS_BITS_MAX / 64];
    uint16_t order[CPS_BITS_MAX]; /* configurations in the order found; [0, done) expanded */
    uint16_t succ[CPS_BITS_MAX];  /* per expanded one: its successor's base */
    int16_t later[CPS_BITS_MAX];  /* the expanded one before it that waits on the same key and side */
    int16_t last[64];             /* by key << 1 | side: the last expanded one waiting on it, or -1 */
    memset(in_c, 0, (((size_t)mc->n << cb) + 63) / 64 * sizeof *in_c);
    memset(last, 0xff, sizeof last);
    size_t found = 0, done = 0;
    uint32_t gl = 1, gr = 1; /* bit g: n-gram g may occur on the left, on the right (blank: 0) */
#define BITS_ADD(word)                                                        \
    do {                                                                      \
        const uint32_t w_ = (word);                                           \
        if (!(in_c[w_ >> 6] >> (w_ & 63) & 1u)) {                             \
            in_c[w_ >> 6] |= (uint64_t)1 << (w_ & 63);                        \
            order[found++] = (uint16_t)w_;                                    \
        }                                                                     \
    } while (0)
    BITS_ADD(0);
    while (done < found) {
        uint32_t base, key;
        int right;
        if (!bits_step(mc, n, order[done], &base, &right, &key)) return NOT_PROVEN;
        const uint32_t kw = key << 1 | (uint32_t)right;
        succ[done] = (uint16_t)base;
        later[done] = last[kw];
        last[kw] = (int16_t)done++;
        /* the n-gram the move leaves behind: right, the new left window; left, the new right one */
        const uint32_t gram = right ? base & ((1u << n) - 1) : (base >> (n + 1)) & ((1u << n) - 1);
        uint32_t *grown = right ? &gl : &gr;
        if (!(*grown >> gram & 1u)) { /* new: wake the expanded movers the other way that match it */
            *grown |= 1u << gram;
            const uint32_t want = (right ? gram >> 1 : gram & ((1u << (n - 1)) - 1)) << 1 | (uint32_t)!right;
            const uint32_t in = right ? (gram & 1u) : (gram >> (n - 1)) << top;
            for (int j = last[want]; j >= 0; j = later[j])
                BITS_ADD(succ[j] | in);
        }
        /* the known n-grams that may enter this configuration's window */
        for (uint32_t c = 0; c < 2; c++) {
            if (right ? (gr >> (key | c << (n - 1)) & 1u) : (gl >> (c | key << 1) & 1u))
                BITS_ADD(base | (right ? c << top : c));
        }
    }
#undef BITS_ADD
    return PROVEN;
}

/* The CPS schedule: cheap plain windows first, then short windows with history,
 * ordered by what each proves per unit of work on the 1D (5,2) holdouts.
 * {window n, history k, log2 of the abstract configurations allowed} */
static const int cps_plan[][3] = {
    {1, 0, 9}, {2, 0, 10}, {3, 0, 11}, {2, 1, 11}, {2, 2, 11}, {2, 3, 12}, {3, 2, 12}, {2, 4, 12},
};
#define CPS_PLAN_LEN ((int)(sizeof cps_plan / sizeof cps_plan[0]))

int ctm_cps1d_plan(ctm_cps_ws *ws, const ctm_machine *mc, const int (*plan)[3], int len) {
    if (mc->n < 1 || mc->m < 2 || mc->n * mc->m > CTM_MAX_ENTRIES) return CTM_EINVAL;
    for (int e = 0; e < mc->n * mc->m; e++)
        if (mc->def[e] == CTM_ENTRY_MOVE
            && (mc->wr[e] >= mc->m || mc->nx[e] >= mc->n || (mc->mv[e] != CTM_R && mc->mv[e] != CTM_L)))
            return CTM_EINVAL;
    for (int i = 0; i < len; i++) /* windows fit the fixed buffers of cps_once; limits fit int32 links */
        if (plan[i][0] < 1 || plan[i][0] > CTM_CPS_MAX_WINDOW || plan[i][1] < 0 || plan[i][2] < 1
            || plan[i][2] > CTM_CPS_MAX_LOG2) return CTM_EINVAL;
    ctm_cps_ws *own = NULL;
    if (!ws && !(ws = own = ctm_cps_ws_new())) return CTM_ENOMEM;
    int found = 0;
#ifdef CPS_PACKED
    int b, sb;
#endif
    for (int i = 0; i < len && !found; i++) {
        const size_t limit = (size_t)1 << plan[i][2];
        const uint32_t period = tag_period(mc, plan[i][1]);
        if (!period) continue; /* the cells would not fit uint16: not proven */
        int rc;
        if (!ws->word_arrays_only && !ws->no_bitsets && bits_fit(mc, plan[i][0], period, limit))
            rc = cps_bits(mc, plan[i][0]);
        else
#ifdef CPS_PACKED
        if (!ws->word_arrays_only && packed_fits(mc, plan[i][0], period, limit, &b, &sb))
            rc = cps_packed(ws, mc, plan[i][0], period, limit, b, sb);
        else
#endif
            rc = cps_once(ws, mc, plan[i][0], period, limit);
        if (rc < 0) { found = rc; break; }
        if (rc == PROVEN) found = i + 1;
    }
    ctm_cps_ws_free(own);
    return found;
}

int ctm_cps1d(ctm_cps_ws *ws, const ctm_machine *mc, int max_attempts) {
    return ctm_cps1d_plan(ws, mc, cps_plan, max_attempts < CPS_PLAN_LEN ? max_attempts : CPS_PLAN_LEN);
}

int ctm_cps_attempts(void) { return CPS_PLAN_LEN; }

void ctm_cps_ws_packed(ctm_cps_ws *ws, int on) { ws->word_arrays_only = !on; }

void ctm_cps_ws_bitsets(ctm_cps_ws *ws, int on) { ws->no_bitsets = !on; }

/* Tried at the cap only, on nodes the schedule above left: longer windows and deeper history,
 * which cost more but see only the few nodes that reach the cap undecided. On the 1D (5,2)
 * cap-500 holdouts they prove 42% of the weight for about 0.24 ms a node. */
static const int cps_cap_plan[][3] = {{3, 4, 13}, {4, 4, 14}, {4, 2, 14}};
#define CPS_CAP_PLAN_LEN ((int)(sizeof cps_cap_plan / sizeof cps_cap_plan[0]))

int ctm_cps1d_at_cap(ctm_cps_ws *ws, const ctm_machine *mc) {
    int rc = ctm_cps1d_plan(ws, mc, cps_cap_plan, CPS_CAP_PLAN_LEN);
    return rc > 0 ? CPS_PLAN_LEN + rc : rc;
}

/* The 1D search on binary machines splits its attempts otherwise: the plain windows 1-4 run on
 * bit masks in a few thousand cycles, so they alone are tried at the early step; the attempts
 * with history wait for the cap, which most of the nodes they would meet never reach (they
 * halt, branch or cycle first). On three 1D (6,2) units at cap 1,000 this saved about a fifth
 * of the CPU time and left fewer nodes undecided; on (5,2) at cap 500, 9% and 19 nodes fewer.
 * The late attempts come in the order that proves the nodes meeting them soonest: measured
 * per attempt (cycles, proven or not) on 930,000 such nodes of six (6,2) units and ordered by
 * a local search, it costs 19% less than the order by window size on the half of them held
 * out. The order changes no verdict: a node is proven when any attempt proves it, and the
 * nodes none proves pay for every attempt in any order. */
static const int cps_binary_early[][3] = {{1, 0, 9}, {2, 0, 10}, {3, 0, 11}, {4, 0, 12}};
static const int cps_binary_late[][3] = {
    {3, 4, 13}, {2, 1, 11}, {2, 3, 12}, {4, 4, 14}, {2, 2, 11}, {3, 2, 12}, {4, 2, 14}, {2, 4, 12},
};

int ctm_cps1d_search(ctm_cps_ws *ws, const ctm_machine *mc, int at_cap) {
    if (mc->m != 2) return at_cap ? ctm_cps1d_at_cap(ws, mc) : ctm_cps1d(ws, mc, CPS_PLAN_LEN);
    if (!at_cap)
        return ctm_cps1d_plan(ws, mc, cps_binary_early, (int)(sizeof cps_binary_early / sizeof *cps_binary_early));
    return ctm_cps1d_plan(ws, mc, cps_binary_late, (int)(sizeof cps_binary_late / sizeof *cps_binary_late));
}
