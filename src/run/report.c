/*
 * report.c -- the HTML report of a run: one self-contained page (styles
 * inline, images embedded as base64 data URIs per RFC 2397 and RFC 4648, no
 * script or font fetched from anywhere), so that it opens offline and can be
 * archived or mailed as a single file. The page is built piece by piece by
 * the run stage: sections, text, cautions, facts, PNG figures and CSV tables
 * read from the run folder. A short inline script marks on <body> how many
 * of the embedded images decoded (data-images="loaded/total"), which the
 * browser test reads.
 *
 * CSV tables are read here as text, not with gl_csv_read, because a report
 * shows text columns (methods, reasons for rejecting a frame, pass/fail)
 * that the numeric reader turns into NaN.
 */
#include "gloam/run.h"

#include "core/internal.h"

#include <errno.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

struct gl_report {
    char *buf;
    size_t len, cap;
    int failed;      /* an allocation failed: every later call reports it */
    int closed;      /* the closing tags are in buf */
    size_t body_end; /* where the closing tags start, once added */
};

static int grow(gl_report *r, size_t more)
{
    if (r->failed)
        return 0;
    if (r->len + more + 1 <= r->cap)
        return 1;
    size_t cap = r->cap ? r->cap : 1 << 16;
    while (cap < r->len + more + 1)
        cap *= 2;
    char *b = realloc(r->buf, cap);
    if (!b) {
        r->failed = 1;
        return 0;
    }
    r->buf = b;
    r->cap = cap;
    return 1;
}

static void put(gl_report *r, const char *s, size_t n)
{
    if (!grow(r, n))
        return;
    memcpy(r->buf + r->len, s, n);
    r->len += n;
    r->buf[r->len] = '\0';
}

static void puts_(gl_report *r, const char *s)
{
    put(r, s, strlen(s));
}

/* Text with the five HTML special characters escaped. */
static void put_text(gl_report *r, const char *s)
{
    for (const char *p = s; *p; p++) {
        switch (*p) {
        case '&': puts_(r, "&amp;"); break;
        case '<': puts_(r, "&lt;"); break;
        case '>': puts_(r, "&gt;"); break;
        case '"': puts_(r, "&quot;"); break;
        case '\'': puts_(r, "&#39;"); break;
        default: put(r, p, 1);
        }
    }
}

static void put_base64(gl_report *r, const unsigned char *d, size_t n)
{
    static const char a[] = "ABCDEFGHIJKLMNOPQRSTUVWXYZabcdefghijklmnopqrstuvwxyz0123456789+/";
    if (!grow(r, 4 * ((n + 2) / 3)))
        return;
    char *o = r->buf + r->len;
    size_t i = 0;
    for (; i + 2 < n; i += 3) {
        unsigned v = (unsigned)d[i] << 16 | (unsigned)d[i + 1] << 8 | d[i + 2];
        *o++ = a[v >> 18];
        *o++ = a[(v >> 12) & 63];
        *o++ = a[(v >> 6) & 63];
        *o++ = a[v & 63];
    }
    if (i < n) {
        unsigned v = (unsigned)d[i] << 16 | (i + 1 < n ? (unsigned)d[i + 1] << 8 : 0);
        *o++ = a[v >> 18];
        *o++ = a[(v >> 12) & 63];
        *o++ = i + 1 < n ? a[(v >> 6) & 63] : '=';
        *o++ = '=';
    }
    r->len = (size_t)(o - r->buf);
    r->buf[r->len] = '\0';
}

static gl_status status_of(const gl_report *r)
{
    return r->failed ? gl_error_nomem("report") : GL_OK;
}

/* Styles of our own: a warm paper page, slate headings, figures in cards. */
static const char style[] =
    "<style>\n"
    "body{margin:0;background:#f6f3ec;color:#23262b;font:15px/1.5 system-ui,sans-serif}\n"
    "header{background:#2f3a45;color:#f6f3ec;padding:18px 32px}\n"
    "header h1{margin:0;font-size:22px;font-weight:600}\n"
    "header p{margin:4px 0 0;opacity:.8;font-size:13px}\n"
    "main{max-width:1100px;margin:0 auto;padding:8px 32px 48px}\n"
    "h2{font-size:18px;color:#2f3a45;border-bottom:2px solid #c9b98f;padding-bottom:2px;"
    "margin-top:32px}\n"
    "figure{display:inline-block;vertical-align:top;background:#fff;border:1px solid #ddd4bf;"
    "border-radius:6px;padding:10px;margin:8px 12px 8px 0;max-width:100%}\n"
    "figure img{max-width:100%;height:auto;display:block}\n"
    "figcaption{font-size:13px;color:#555;margin-top:6px;max-width:520px}\n"
    "table{border-collapse:collapse;font-size:13px;background:#fff;margin:8px 0}\n"
    "th,td{border:1px solid #ddd4bf;padding:3px 8px;text-align:right;white-space:nowrap}\n"
    "th{background:#ece5d3}\n"
    "caption{text-align:left;padding:2px 0}\n"
    "code{font:12px/1.4 ui-monospace,monospace;background:#ece5d3;padding:1px 4px;"
    "border-radius:3px;word-break:break-all}\n"
    ".wide{overflow-x:auto;max-width:100%}\n"
    ".caution{background:#fbeedd;border-left:4px solid #c0752a;padding:8px 14px;margin:10px 0}\n"
    "dl.facts{display:grid;grid-template-columns:max-content auto;gap:2px 18px}\n"
    "dl.facts dt{color:#555}dl.facts dd{margin:0;font-variant-numeric:tabular-nums}\n"
    ".note{font-size:13px;color:#555}\n"
    "</style>\n";

gl_status gl_report_new(const char *title, gl_report **out)
{
    *out = NULL;
    gl_report *r = calloc(1, sizeof *r);
    if (!r)
        return gl_error_nomem("report");
    puts_(r, "<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n"
             "<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">\n<title>");
    put_text(r, title);
    puts_(r, "</title>\n");
    puts_(r, style);
    puts_(r, "</head>\n<body>\n<header><h1>");
    put_text(r, title);
    puts_(r, "</h1><p>gloam ");
    put_text(r, gl_version());
    puts_(r, "</p></header>\n<main>\n");
    gl_status st = status_of(r);
    if (st) {
        gl_report_free(r);
        return st;
    }
    *out = r;
    return GL_OK;
}

void gl_report_free(gl_report *r)
{
    if (!r)
        return;
    free(r->buf);
    free(r);
}

/* Drops the closing tags added by gl_report_html, so that more can follow. */
static void reopen(gl_report *r)
{
    if (r->closed) {
        r->len = r->body_end;
        r->buf[r->len] = '\0';
        r->closed = 0;
    }
}

gl_status gl_report_section(gl_report *r, const char *heading)
{
    reopen(r);
    puts_(r, "<h2>");
    put_text(r, heading);
    puts_(r, "</h2>\n");
    return status_of(r);
}

gl_status gl_report_text(gl_report *r, const char *text)
{
    reopen(r);
    puts_(r, "<p>");
    put_text(r, text);
    puts_(r, "</p>\n");
    return status_of(r);
}

gl_status gl_report_caution(gl_report *r, const char *text)
{
    reopen(r);
    puts_(r, "<div class=\"caution\">");
    put_text(r, text);
    puts_(r, "</div>\n");
    return status_of(r);
}

gl_status gl_report_facts(gl_report *r, const char *const *names, const char *const *values, int n)
{
    reopen(r);
    puts_(r, "<dl class=\"facts\">\n");
    for (int i = 0; i < n; i++) {
        puts_(r, "<dt>");
        put_text(r, names[i]);
        puts_(r, "</dt><dd>");
        put_text(r, values[i] ? values[i] : "");
        puts_(r, "</dd>\n");
    }
    puts_(r, "</dl>\n");
    return status_of(r);
}

gl_status gl_report_link(gl_report *r, const char *href, const char *text)
{
    reopen(r);
    puts_(r, "<p><a href=\"");
    put_text(r, href);
    puts_(r, "\">");
    put_text(r, text);
    puts_(r, "</a></p>\n");
    return status_of(r);
}

/* The whole file at path into *data (caller frees). */
static gl_status slurp(const char *path, const char *what, unsigned char **data, size_t *n)
{
    *data = NULL;
    *n = 0;
    FILE *f = fopen(path, "rb");
    if (!f)
        return gl_error_set(GL_ERR_IO, "%s: cannot open the %s: %s", path, what, strerror(errno));
    gl_status st = GL_OK;
    long size = -1;
    if (fseek(f, 0, SEEK_END) == 0)
        size = ftell(f);
    if (size < 0 || fseek(f, 0, SEEK_SET) != 0) {
        st = gl_error_set(GL_ERR_IO, "%s: cannot read the %s", path, what);
        goto cleanup;
    }
    if (!(*data = malloc((size_t)size + 1))) {
        st = gl_error_nomem(what);
        goto cleanup;
    }
    if (fread(*data, 1, (size_t)size, f) != (size_t)size) {
        st = gl_error_set(GL_ERR_IO, "%s: cannot read the %s", path, what);
        goto cleanup;
    }
    (*data)[size] = '\0';
    *n = (size_t)size;
cleanup:
    if (st) {
        free(*data);
        *data = NULL;
    }
    fclose(f);
    return st;
}

gl_status gl_report_image(gl_report *r, const char *path, const char *caption)
{
    static const unsigned char png_magic[8] = {0x89, 'P', 'N', 'G', '\r', '\n', 0x1a, '\n'};
    unsigned char *d;
    size_t n;
    gl_status st = slurp(path, "figure", &d, &n);
    if (st)
        return st;
    if (n < 8 || memcmp(d, png_magic, 8) != 0) {
        free(d);
        return gl_error_set(GL_ERR_INPUT, "%s: not a PNG image", path);
    }
    reopen(r);
    puts_(r, "<figure><img alt=\"");
    put_text(r, caption);
    puts_(r, "\" src=\"data:image/png;base64,");
    put_base64(r, d, n);
    puts_(r, "\"><figcaption>");
    put_text(r, caption);
    puts_(r, "</figcaption></figure>\n");
    free(d);
    return status_of(r);
}

/* Splits one CSV line in place (RFC 4180 quotes; "" inside quotes is a
 * quote); returns the field count, at most max. */
static int split_csv(char *line, char **fields, int max)
{
    int n = 0;
    char *p = line;
    while (n < max) {
        char *start = p, *o = p;
        if (*p == '"') {
            p++;
            while (*p) {
                if (*p == '"' && p[1] == '"') {
                    *o++ = '"';
                    p += 2;
                } else if (*p == '"') {
                    p++;
                    break;
                } else {
                    *o++ = *p++;
                }
            }
            while (*p && *p != ',')
                p++;
        } else {
            while (*p && *p != ',')
                p++;
            o = p;
        }
        int last = *p != ',';
        *o = '\0';
        fields[n++] = start;
        if (last)
            break;
        p++;
    }
    return n;
}

gl_status gl_report_table(gl_report *r, const char *path, const char *caption, long max_rows)
{
    enum { MAXF = 256 };
    unsigned char *d;
    size_t n;
    gl_status st = slurp(path, "table", &d, &n);
    if (st)
        return st;
    char *fields[MAXF];
    char *save = NULL, *line = strtok_r((char *)d, "\r\n", &save);
    if (!line) {
        free(d);
        return gl_error_set(GL_ERR_INPUT, "%s: the table is empty (no header line)", path);
    }
    reopen(r);
    puts_(r, "<div class=\"wide\"><table>\n<caption class=\"note\">");
    put_text(r, caption);
    puts_(r, "</caption>\n<tr>");
    int ncol = split_csv(line, fields, MAXF);
    for (int k = 0; k < ncol; k++) {
        puts_(r, "<th>");
        put_text(r, fields[k]);
        puts_(r, "</th>");
    }
    puts_(r, "</tr>\n");
    long rows = 0, more = 0;
    while ((line = strtok_r(NULL, "\r\n", &save))) {
        if (rows >= max_rows) {
            more++;
            continue;
        }
        int nf = split_csv(line, fields, MAXF);
        puts_(r, "<tr>");
        for (int k = 0; k < ncol; k++) {
            puts_(r, "<td>");
            if (k < nf)
                put_text(r, fields[k]);
            puts_(r, "</td>");
        }
        puts_(r, "</tr>\n");
        rows++;
    }
    puts_(r, "</table></div>\n");
    if (rows == 0)
        puts_(r, "<p class=\"note\">(no rows)</p>\n");
    if (more) {
        char note[128];
        snprintf(note, sizeof note, "<p class=\"note\">%ld more row%s in the file.</p>\n", more,
                 more == 1 ? "" : "s");
        puts_(r, note);
    }
    free(d);
    return status_of(r);
}

/* The closing tags: the image check and the end of the page. */
static void close_page(gl_report *r)
{
    if (r->closed)
        return;
    r->body_end = r->len;
    puts_(r, "</main>\n<script>\n"
             "window.addEventListener('load', function () {\n"
             "  var im = document.images, ok = 0;\n"
             "  for (var i = 0; i < im.length; i++) if (im[i].complete && im[i].naturalWidth > 0) "
             "ok++;\n"
             "  document.body.setAttribute('data-images', ok + '/' + im.length);\n"
             "});\n</script>\n</body>\n</html>\n");
    r->closed = 1;
}

const char *gl_report_html(gl_report *r)
{
    close_page(r);
    return r->failed ? NULL : r->buf;
}

gl_status gl_report_write(const gl_report *r, const char *path)
{
    gl_report *w = (gl_report *)r; /* closing the page changes no content */
    const char *html = gl_report_html(w);
    if (!html)
        return gl_error_nomem("report");
    FILE *f = fopen(path, "wb");
    if (!f)
        return gl_error_set(GL_ERR_IO, "%s: cannot write the report: %s", path, strerror(errno));
    size_t n = strlen(html);
    int bad = fwrite(html, 1, n, f) != n;
    bad |= fclose(f) != 0;
    if (bad)
        return gl_error_set(GL_ERR_IO, "%s: cannot write the report", path);
    return GL_OK;
}
