/* Byte-string -> exact 128-bit count map: open addressing, keys in one arena. */
#include "ctm_core.h"

#include <stdlib.h>
#include <string.h>

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

