/*
 * rng.c -- independent random streams for the simulator.
 *
 * Every random quantity is drawn from a GSL Mersenne-Twister generator seeded
 * from (user seed, purpose, index) through the SplitMix64 finaliser (Steele,
 * Lea & Flood 2014, "Fast splittable pseudorandom number generators", OOPSLA),
 * so frame i always sees the same numbers, whatever the thread that computes
 * it and whatever else was drawn before. GSL's abort handler is turned off
 * first: a failed allocation returns NULL to the caller instead of aborting.
 */
#include "sim/internal.h"

#include <gsl/gsl_errno.h>

static unsigned long long splitmix64(unsigned long long x)
{
    x += 0x9e3779b97f4a7c15ULL;
    x = (x ^ (x >> 30)) * 0xbf58476d1ce4e5b9ULL;
    x = (x ^ (x >> 27)) * 0x94d049bb133111ebULL;
    return x ^ (x >> 31);
}

gsl_rng *sim_rng_new(unsigned long seed, int stream, long index)
{
    gsl_set_error_handler_off();
    gsl_rng *r = gsl_rng_alloc(gsl_rng_mt19937);
    if (!r)
        return NULL;
    unsigned long long h = splitmix64((unsigned long long)seed);
    h = splitmix64(h ^ ((unsigned long long)stream << 40));
    h = splitmix64(h ^ (unsigned long long)index);
    /* mt19937 uses 32 bits of the seed; 0 would select its default seed */
    unsigned long s = (unsigned long)(h & 0xffffffffULL);
    gsl_rng_set(r, s ? s : 1UL);
    return r;
}
