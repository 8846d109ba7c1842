/*
 * log.c -- logging and progress reporting through caller-installed callbacks.
 *
 * The stages never print: the command layer (src/command/) installs
 * handlers that print to the error stream it was given (and draw a progress
 * bar only when that stream is a terminal).
 * Progress may be reported from worker threads, so calls are serialised.
 */
#include "core/internal.h"

#include <pthread.h>
#include <stdarg.h>
#include <stdio.h>

static gl_log_fn log_fn;
static void *log_user;
static gl_log_level log_max = GL_LOG_INFO;

static gl_progress_fn progress_fn;
static void *progress_user;
static pthread_mutex_t progress_lock = PTHREAD_MUTEX_INITIALIZER;

void gl_log_set_handler(gl_log_fn fn, void *user, gl_log_level max_level)
{
    log_fn = fn;
    log_user = user;
    log_max = max_level;
}

void gl_log_get_handler(gl_log_fn *fn, void **user, gl_log_level *max_level)
{
    *fn = log_fn;
    *user = log_user;
    *max_level = log_max;
}

void gl_progress_get_handler(gl_progress_fn *fn, void **user)
{
    *fn = progress_fn;
    *user = progress_user;
}

void gl_log(gl_log_level level, const char *fmt, ...)
{
    if (!log_fn || level > log_max)
        return;
    char buf[1024];
    va_list ap;
    va_start(ap, fmt);
    vsnprintf(buf, sizeof buf, fmt, ap);
    va_end(ap);
    log_fn(level, buf, log_user);
}

void gl_progress_set_handler(gl_progress_fn fn, void *user)
{
    progress_fn = fn;
    progress_user = user;
}

void gl_progress(const char *task, long done, long total)
{
    if (!progress_fn)
        return;
    pthread_mutex_lock(&progress_lock);
    progress_fn(task, done, total, progress_user);
    pthread_mutex_unlock(&progress_lock);
}
