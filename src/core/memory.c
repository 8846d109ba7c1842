/*
 * memory.c -- the library's allocator: 64-byte aligned blocks (so SIMD loops
 * and FFTW see aligned rows) with optional fault injection for tests that make
 * the n-th allocation fail on purpose.
 */
#include "gloam/core.h"
#include "core/internal.h"

#include <stdatomic.h>
#include <stdlib.h>
#include <string.h>

static atomic_long fail_countdown;

void gl_malloc_fail_after(long countdown)
{
    atomic_store(&fail_countdown, countdown);
}

static int should_fail(void)
{
    long c = atomic_load(&fail_countdown);
    while (c > 0) {
        if (atomic_compare_exchange_weak(&fail_countdown, &c, c - 1))
            return c == 1;
    }
    return 0;
}

void *gl_malloc(size_t size)
{
    if (size == 0 || should_fail())
        return NULL;
    size_t rounded = (size + 63) & ~(size_t)63;
    if (rounded < size)
        return NULL;
    return aligned_alloc(64, rounded);
}

void *gl_calloc(size_t n, size_t size)
{
    if (n != 0 && size > SIZE_MAX / n)
        return NULL;
    void *p = gl_malloc(n * size);
    if (p)
        memset(p, 0, n * size);
    return p;
}

void gl_free(void *p)
{
    free(p);
}

char *gl_strdup(const char *s)
{
    size_t n = strlen(s) + 1;
    char *d = gl_malloc(n);
    if (d)
        memcpy(d, s, n);
    return d;
}
