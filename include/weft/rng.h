/* weft: the explicit random number generator every seeded computation uses. */
#ifndef WEFT_RNG_H
#define WEFT_RNG_H

#include <stddef.h>
#include <stdint.h>

/**
 * xoshiro256** (Blackman & Vigna 2018), seeded through splitmix64. Not for cryptography.
 * One generator per thread; the state is plain data and may be copied.
 */
typedef struct weft_rng {
    uint64_t s[4];
} weft_rng;

/** Seed @p rng from @p seed; the same seed always gives the same sequence. */
void weft_rng_seed(weft_rng *rng, uint64_t seed);
/** Next 64 uniformly distributed bits. */
uint64_t weft_rng_next(weft_rng *rng);
/** Uniform integer in [0, n); n must be > 0. Unbiased (Lemire 2019). */
uint32_t weft_rng_below(weft_rng *rng, uint32_t n);
/** Uniform float in [0, 1) with 24 random bits. */
float weft_rng_float(weft_rng *rng);
/** Uniform double in [0, 1) with 53 random bits. */
double weft_rng_double(weft_rng *rng);
/** 0 .. n - 1 into @p perm (n < 2^32), its first @p m (<= n) a uniform sample without
 *  replacement in random order: the first m steps of a Fisher-Yates shuffle. */
void weft_rng_sample(weft_rng *rng, uint32_t *perm, size_t n, size_t m);

#endif
