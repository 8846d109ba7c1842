/*
 * gloam/core.h -- status codes, error reporting, logging, progress and the
 * image cube type shared by every pipeline stage.
 *
 * The library never prints, exits or aborts. Every fallible function returns a
 * gl_status; on failure it has also recorded a one-line message (naming the
 * file, HDU or parameter at fault) that gl_error_message() returns. Messages
 * are kept per thread. Logging and progress go through callbacks that the
 * caller installs (the command line prints them; a library user may not).
 */
#ifndef GLOAM_CORE_H
#define GLOAM_CORE_H

#include <stddef.h>
#include <stdint.h>

#ifdef __cplusplus
extern "C" {
#endif

#if defined(GL_BUILDING_LIBRARY)
#define GL_API __attribute__((visibility("default")))
#else
#define GL_API
#endif

/* Status codes. 0 is success; every other value has a message attached. */
typedef enum gl_status {
    GL_OK = 0,
    GL_ERR_USAGE,   /* a parameter or option value is invalid */
    GL_ERR_INPUT,   /* an input file exists but its content is unusable */
    GL_ERR_IO,      /* a file cannot be opened, read, written or renamed */
    GL_ERR_EXISTS,  /* an output exists and overwriting was not allowed */
    GL_ERR_NOMEM,   /* an allocation failed */
    GL_ERR_NUMERIC, /* a computation failed (singular matrix, no convergence) */
    GL_ERR_INTERNAL /* a bug: an invariant of the library did not hold */
} gl_status;

/* Records status and a printf-style message for the calling thread; returns
 * status so that callers can write `return gl_error_set(...)`. */
GL_API gl_status gl_error_set(gl_status status, const char *fmt, ...)
    __attribute__((format(printf, 2, 3)));
/* The last message recorded on this thread ("" when none). */
GL_API const char *gl_error_message(void);
/* Forgets the last message. */
GL_API void gl_error_clear(void);
/* A short name for a status ("bad input", ...). */
GL_API const char *gl_status_name(gl_status status);
/* Process exit status for a status: 0 ok, 1 bad input or usage, 2 internal. */
GL_API int gl_status_exit_code(gl_status status);

/* Convenience: records "out of memory (what)" and returns GL_ERR_NOMEM. */
GL_API gl_status gl_error_nomem(const char *what);

/* The smallest PSF FWHM accepted anywhere, in pixels: below it the PSF is
 * not sampled and aperture counts per ring grow without bound. */
#define GL_FWHM_MIN_PX 0.5

/* Version string of the library, e.g. "0.1.0". */
GL_API const char *gl_version(void);

/* ---- logging ----------------------------------------------------------- */

typedef enum gl_log_level {
    GL_LOG_ERROR = 0,
    GL_LOG_WARN = 1,
    GL_LOG_INFO = 2,
    GL_LOG_DEBUG = 3
} gl_log_level;

typedef void (*gl_log_fn)(gl_log_level level, const char *message, void *user);

/* Installs the log sink (NULL: discard) and the most verbose level passed on. */
GL_API void gl_log_set_handler(gl_log_fn fn, void *user, gl_log_level max_level);
GL_API void gl_log(gl_log_level level, const char *fmt, ...) __attribute__((format(printf, 2, 3)));

/* ---- progress ---------------------------------------------------------- */

/* Called with the task name, units done and units in all. done == total marks
 * the end of a task. Calls come from one thread at a time. */
typedef void (*gl_progress_fn)(const char *task, long done, long total, void *user);

/* Installs the progress sink (NULL: progress is not reported). */
GL_API void gl_progress_set_handler(gl_progress_fn fn, void *user);
/* Reports progress; cheap when no handler is installed. Thread-safe: calls
 * from several threads are serialised. */
GL_API void gl_progress(const char *task, long done, long total);

/* ---- memory ------------------------------------------------------------ */

/* Allocation used everywhere in the library: 64-byte aligned, NULL on failure
 * (and for size 0). Tests may make the n-th allocation fail on purpose. */
GL_API void *gl_malloc(size_t size);
GL_API void *gl_calloc(size_t n, size_t size);
GL_API void gl_free(void *p);
/* Fault injection: the countdown-th allocation from now fails (0: off). */
GL_API void gl_malloc_fail_after(long countdown);

/* ---- header ------------------------------------------------------------ */

/* FITS header material carried alongside an image. `cards` are the 80-char
 * cards of the input, minus the structural ones (SIMPLE, BITPIX, NAXISn,
 * EXTEND, BSCALE, BZERO, BLANK, CHECKSUM, DATASUM, END); products add typed
 * keywords and HISTORY lines, written after the carried cards. */
typedef struct gl_header gl_header;

/* An empty header; NULL when out of memory. */
GL_API gl_header *gl_header_new(void);
/* Frees a header; NULL is a no-op. */
GL_API void gl_header_free(gl_header *h);
/* A deep copy (an empty header for h == NULL); NULL when out of memory. */
GL_API gl_header *gl_header_copy(const gl_header *h);
/* Appends one raw card (up to 80 characters). */
GL_API gl_status gl_header_add_card(gl_header *h, const char *card);
/* Sets a typed keyword (replacing a carried card of the same name). */
GL_API gl_status gl_header_set_str(gl_header *h, const char *key, const char *value,
                                   const char *comment);
GL_API gl_status gl_header_set_dbl(gl_header *h, const char *key, double value,
                                   const char *comment);
GL_API gl_status gl_header_set_int(gl_header *h, const char *key, long value, const char *comment);
GL_API gl_status gl_header_set_bool(gl_header *h, const char *key, int value, const char *comment);
/* Appends HISTORY text; long text is split over several cards. */
GL_API gl_status gl_header_add_history(gl_header *h, const char *text);
/* Removes a carried or typed keyword; no-op when absent. */
GL_API void gl_header_remove(gl_header *h, const char *key);

/* Look-ups over carried cards and typed keys (typed ones win). Return 1 when
 * found and parsed, 0 otherwise. */
GL_API int gl_header_get_dbl(const gl_header *h, const char *key, double *value);
GL_API int gl_header_get_str(const gl_header *h, const char *key, char *value, size_t size);

/* Number of carried cards and access to them (for writers and inspect). */
GL_API int gl_header_ncards(const gl_header *h);
GL_API const char *gl_header_card(const gl_header *h, int i);

/* ---- cube -------------------------------------------------------------- */

/* A stack of float32 images, row-major [frame][channel][y][x], x fastest,
 * exactly as FITS stores (x, y, channel, frame). NaN marks missing data.
 * naxis records the dimensionality the data had on disk (2, 3 or 4): 3-D data
 * have nchan == 1; 2-D data have nchan == nframe == 1. */
typedef struct gl_cube {
    float *data;
    long nx, ny, nchan, nframe;
    int naxis;
    int bitpix;        /* BITPIX on disk (products are written as -32) */
    gl_header *header; /* never NULL for a cube made by gl_cube_new */
} gl_cube;

/* New zero-filled cube; nchan and nframe >= 1. naxis is set from the shape
 * (4 when nchan > 1, else 3 when nframe > 1, else 2). */
GL_API gl_status gl_cube_new(long nx, long ny, long nchan, long nframe, gl_cube **out);
GL_API void gl_cube_free(gl_cube *c);
/* Pixels in one image plane. */
static inline size_t gl_cube_plane_size(const gl_cube *c)
{
    return (size_t)c->nx * (size_t)c->ny;
}
/* Pointer to plane (channel, frame). */
static inline float *gl_cube_plane(const gl_cube *c, long chan, long frame)
{
    return c->data + ((size_t)frame * (size_t)c->nchan + (size_t)chan) * gl_cube_plane_size(c);
}
/* Total number of pixels. */
static inline size_t gl_cube_size(const gl_cube *c)
{
    return gl_cube_plane_size(c) * (size_t)c->nchan * (size_t)c->nframe;
}

/* ---- robust statistics ------------------------------------------------- */

/* Median and robust standard deviation (1.4826 * median absolute deviation,
 * Hampel 1974) of the finite values among x[0..n-1]; NaN and infinities are
 * skipped. work must hold n doubles (owned by the caller, reusable across
 * calls, so hot loops do not allocate). Returns the number of values used;
 * with none, *median and *sigma are NaN. Never fails. */
GL_API size_t gl_stats_robust_float(const float *x, size_t n, double *work, double *median,
                                    double *sigma);
GL_API size_t gl_stats_robust(const double *x, size_t n, double *work, double *median,
                              double *sigma);

#ifdef __cplusplus
}
#endif
#endif
