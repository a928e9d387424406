/* xoshiro256** seeded by splitmix64 (Blackman & Vigna 2018, "Scrambled linear
 * pseudorandom number generators"); bounded integers by Lemire 2019. */
#include "weft/rng.h"

static uint64_t splitmix64(uint64_t *x)
{
    uint64_t z = (*x += 0x9e3779b97f4a7c15ULL);
    z = (z ^ (z >> 30)) * 0xbf58476d1ce4e5b9ULL;
    z = (z ^ (z >> 27)) * 0x94d049bb133111ebULL;
    return z ^ (z >> 31);
}

static uint64_t rotl(uint64_t x, int k)
{
    return (x << k) | (x >> (64 - k));
}

void weft_rng_seed(weft_rng *rng, uint64_t seed)
{
    uint64_t x = seed;
    for (int i = 0; i < 4; i++)
        rng->s[i] = splitmix64(&x);
}

uint64_t weft_rng_next(weft_rng *rng)
{
    uint64_t *s = rng->s;
    uint64_t result = rotl(s[1] * 5, 7) * 9;
    uint64_t t = s[1] << 17;
    s[2] ^= s[0];
    s[3] ^= s[1];
    s[1] ^= s[2];
    s[0] ^= s[3];
    s[2] ^= t;
    s[3] = rotl(s[3], 45);
    return result;
}

uint32_t weft_rng_below(weft_rng *rng, uint32_t n)
{
    uint64_t m = (uint64_t)(uint32_t)(weft_rng_next(rng) >> 32) * n;
    uint32_t low = (uint32_t)m;
    if (low < n) {
        uint32_t threshold = (uint32_t)(-n) % n;
        while (low < threshold) {
            m = (uint64_t)(uint32_t)(weft_rng_next(rng) >> 32) * n;
            low = (uint32_t)m;
        }
    }
    return (uint32_t)(m >> 32);
}

float weft_rng_float(weft_rng *rng)
{
    return (float)(weft_rng_next(rng) >> 40) * (1.0f / 16777216.0f);
}

double weft_rng_double(weft_rng *rng)
{
    return (double)(weft_rng_next(rng) >> 11) * (1.0 / 9007199254740992.0);
}

void weft_rng_sample(weft_rng *rng, uint32_t *perm, size_t n, size_t m)
{
    for (size_t i = 0; i < n; i++)
        perm[i] = (uint32_t)i;
    for (size_t i = 0; i < m; i++) {
        size_t j = i + weft_rng_below(rng, (uint32_t)(n - i));
        uint32_t t = perm[i];
        perm[i] = perm[j];
        perm[j] = t;
    }
}
