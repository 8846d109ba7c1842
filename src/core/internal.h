/*
 * core/internal.h -- declarations shared inside the library, not exported.
 */
#ifndef GLOAM_CORE_INTERNAL_H
#define GLOAM_CORE_INTERNAL_H

#include "gloam/core.h"

typedef enum gl_key_type { GL_KEY_STR, GL_KEY_DBL, GL_KEY_INT, GL_KEY_BOOL } gl_key_type;

/* A keyword set by a product (written after the carried cards). */
typedef struct gl_key {
    char name[72];
    gl_key_type type;
    char sval[72];
    double dval;
    long ival;
    char comment[72];
} gl_key;

struct gl_header {
    char (*cards)[81];
    int ncards, capcards;
    gl_key *keys;
    int nkeys, capkeys;
    char (*history)[73];
    int nhistory, caphistory;
};

/* 1 for keywords that describe the data layout and are never carried. */
int gl_header_is_structural(const char *key);

/* The mean over channels of each frame, NaN ignored (NaN where every channel
 * is NaN): *out gets nframe planes of nx * ny (gl_malloc). Each pixel is
 * summed by one thread in channel order, so any thread count gives the same
 * result. Errors: GL_ERR_NOMEM. */
gl_status gl_cube_channels_average(const gl_cube *c, float **out);

/* Median of v[0..n-1] (no NaN expected: callers drop them first); NaN when
 * n <= 0. The double version selects by Hoare's method and reorders v; the
 * float version (the hot per-pixel medians of subtract) selects by radix on
 * the float bits and leaves v overwritten (scratch). Both are exact; the
 * float one averages the two middle values of an even count in float. */
double gl_stats_median_inplace(double *v, long n);
float gl_stats_median_inplace_float(float *v, long n);

#define GL_MIN(a, b) ((a) < (b) ? (a) : (b))
#define GL_MAX(a, b) ((a) > (b) ? (a) : (b))

/* A copy of s in gl_malloc'ed memory (free with gl_free); NULL when out of
 * memory. */
char *gl_strdup(const char *s);

/* The log and progress handlers now installed (gl_log_set_handler,
 * gl_progress_set_handler), so that a caller that installs its own for a
 * while (gl_command_exec) can put them back. */
void gl_log_get_handler(gl_log_fn *fn, void **user, gl_log_level *max_level);
void gl_progress_get_handler(gl_progress_fn *fn, void **user);

#endif
