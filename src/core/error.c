/*
 * error.c -- the one error-reporting mechanism of the library.
 *
 * A failing function records a status and a one-line message in a per-thread
 * buffer and returns the status; callers propagate the status unchanged, so
 * the first (most specific) message is the one the user sees. A caller that
 * wants to add context re-records the message with the context prepended.
 */
#include "gloam/core.h"

#include <stdarg.h>
#include <stdio.h>

static _Thread_local char error_buf[1024];

gl_status gl_error_set(gl_status status, const char *fmt, ...)
{
    va_list ap;
    va_start(ap, fmt);
    vsnprintf(error_buf, sizeof error_buf, fmt, ap);
    va_end(ap);
    return status;
}

const char *gl_error_message(void)
{
    return error_buf;
}

void gl_error_clear(void)
{
    error_buf[0] = '\0';
}

gl_status gl_error_nomem(const char *what)
{
    return gl_error_set(GL_ERR_NOMEM, "out of memory (%s)", what);
}

const char *gl_status_name(gl_status status)
{
    switch (status) {
    case GL_OK: return "ok";
    case GL_ERR_USAGE: return "usage error";
    case GL_ERR_INPUT: return "bad input";
    case GL_ERR_IO: return "i/o error";
    case GL_ERR_EXISTS: return "output exists";
    case GL_ERR_NOMEM: return "out of memory";
    case GL_ERR_NUMERIC: return "numerical failure";
    case GL_ERR_INTERNAL: return "internal error";
    }
    return "unknown status";
}

int gl_status_exit_code(gl_status status)
{
    switch (status) {
    case GL_OK: return 0;
    case GL_ERR_USAGE:
    case GL_ERR_INPUT:
    case GL_ERR_IO:
    case GL_ERR_EXISTS: return 1;
    case GL_ERR_NOMEM:
    case GL_ERR_NUMERIC:
    case GL_ERR_INTERNAL: return 2;
    }
    return 2;
}

const char *gl_version(void)
{
    return GLOAM_VERSION;
}
