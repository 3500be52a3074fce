/* Split a 128-bit count into 64-bit halves for the binding layer. */
#ifndef CTM_COUNT_H
#define CTM_COUNT_H
#include "ctm_core.h"
static inline uint64_t ctm_count_lo(const ctm_count *x) { return (uint64_t)*x; }
static inline uint64_t ctm_count_hi(const ctm_count *x) { return (uint64_t)(*x >> 64); }
#endif
