/*
 * figures.c -- the two figures a run makes for its report (cairo PNG): the
 * north-up residual image, in a diverging colour scale of our own (deep
 * blue below zero, near-black at zero, copper to pale gold above) with an
 * asinh stretch set by the robust noise of the image (Lupton et al. 1999,
 * AJ 118, 1406: asinh keeps faint structure and bright cores visible at
 * once), the star marked; and the star positions found by `align` frame by
 * frame, rejected frames marked.
 */
#include "run/internal.h"

#include "core/internal.h"
#include "gloam/io.h"

#include <cairo.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

static void diverging(double v, double *r, double *g, double *b)
{
    /* v in [-1, 1] */
    if (v < 0) {
        double f = -v;
        *r = 0.06 + f * (0.16 - 0.06);
        *g = 0.07 + f * (0.40 - 0.07);
        *b = 0.09 + f * (0.78 - 0.09);
    } else {
        double f = v;
        *r = 0.06 + f * (0.98 - 0.06);
        *g = 0.07 + f * f * (0.86 - 0.07) + (1 - f) * f * 0.35;
        *b = 0.09 + f * f * (0.55 - 0.09);
    }
}

gl_status run_png_finish(cairo_surface_t *s, const char *path)
{
    cairo_status_t cs = cairo_surface_write_to_png(s, path);
    cairo_surface_destroy(s);
    if (cs != CAIRO_STATUS_SUCCESS)
        return gl_error_set(GL_ERR_IO, "%s: cannot write the figure: %s", path,
                            cairo_status_to_string(cs));
    return GL_OK;
}

/* A figure as a product of the run folder: written under a temporary name
 * and renamed into place only when whole (gl_outset). */
static gl_status png_product(cairo_surface_t *s, const char *path)
{
    gl_outset *os = NULL;
    const char *tmp = NULL;
    gl_status st = gl_outset_new(1, &os);
    if (!st)
        st = gl_outset_add(os, path, NULL, &tmp);
    if (st)
        cairo_surface_destroy(s);
    else if (!(st = run_png_finish(s, tmp)))
        st = gl_outset_commit(os);
    gl_outset_free(os);
    return st ? gl_outset_error_names(st) : GL_OK;
}

/* The robust noise (1.4826 MAD) of each 2-px ring about the star, so that
 * the stretch shows a faint companion far out as well as near the star;
 * rings with fewer than 8 values take the noise of the whole image. */
static gl_status ring_noise(const gl_cube *c, double **out)
{
    const long nx = c->nx, ny = c->ny;
    const size_t np = (size_t)nx * (size_t)ny;
    const double cxp = (double)(nx / 2), cyp = (double)(ny / 2);
    const int nbins = (int)(hypot((double)nx, (double)ny) / 4) + 2;
    gl_status st = GL_OK;
    double *sig_ring = calloc((size_t)nbins, sizeof *sig_ring);
    float *vals = malloc(sizeof *vals * np);
    double *work = malloc(sizeof *work * np);
    size_t *start = calloc((size_t)nbins + 1, sizeof *start);
    *out = NULL;
    if (!sig_ring || !vals || !work || !start) {
        st = gl_error_nomem("residual figure");
        goto cleanup;
    }
    double med, sig;
    size_t nfin = gl_stats_robust_float(c->data, np, work, &med, &sig);
    if (nfin == 0 || !(sig > 0))
        sig = 1;
    /* pixels grouped by ring (a counting sort) */
    for (long y = 0; y < ny; y++)
        for (long x = 0; x < nx; x++)
            start[(int)(hypot((double)x - cxp, (double)y - cyp) / 2) + 1]++;
    for (int b = 0; b < nbins; b++)
        start[b + 1] += start[b];
    for (long y = 0; y < ny; y++)
        for (long x = 0; x < nx; x++) {
            int b = (int)(hypot((double)x - cxp, (double)y - cyp) / 2);
            vals[start[b]++] = c->data[(size_t)y * (size_t)nx + (size_t)x];
        }
    for (int b = nbins; b > 0; b--) /* back to the ring starts */
        start[b] = start[b - 1];
    start[0] = 0;
    for (int b = 0; b < nbins; b++) {
        size_t n = start[b + 1] - start[b];
        double m, sg;
        int ok = n >= 8 && gl_stats_robust_float(vals + start[b], n, work, &m, &sg) >= 8 && sg > 0;
        sig_ring[b] = ok ? sg : sig;
    }
    *out = sig_ring;
    sig_ring = NULL;
cleanup:
    free(start);
    free(work);
    free(vals);
    free(sig_ring);
    return st;
}

gl_status run_figure_residual(const char *fits_path, const char *png_path, const char *title)
{
    gl_cube *c = NULL;
    double *ring_sig = NULL;
    gl_status st = gl_fits_read_cube(fits_path, 2, &c);
    if (st || (st = ring_noise(c, &ring_sig))) {
        gl_cube_free(c);
        return st;
    }
    const long nx = c->nx, ny = c->ny;
    const double cxp = (double)(nx / 2), cyp = (double)(ny / 2);
    const int zoom = nx < 200 ? 3 : nx < 400 ? 2 : 1;
    /* a band above the image for the title (the target's name), one below
     * for what the image shows */
    const int band = title && *title ? 22 : 0;
    const int W = (int)nx * zoom, H = band + (int)ny * zoom + 28;
    cairo_surface_t *s = cairo_image_surface_create(CAIRO_FORMAT_RGB24, W, H);
    unsigned char *px = cairo_image_surface_get_data(s);
    const int stride = cairo_image_surface_get_stride(s);
    cairo_surface_flush(s);
    /* asinh stretch of value / ring noise: linear within a few sigma,
     * logarithmic beyond; +-1 at 10 sigma (a 1-FWHM companion at S/N 5 peaks
     * near 2-3 sigma per pixel) */
    const double soft = 2, top = asinh(10 / soft);
    for (int y = band; y < H - 28; y++) {
        long iy = ny - 1 - (y - band) / zoom; /* FITS row 0 at the bottom */
        for (int x = 0; x < W; x++) {
            long ix = x / zoom;
            float v = c->data[(size_t)iy * (size_t)nx + (size_t)ix];
            double r = 0.5, g = 0.5, b = 0.5;
            if (!isnan(v)) {
                int bin = (int)(hypot((double)ix - cxp, (double)iy - cyp) / 2);
                double t = asinh((double)v / ring_sig[bin] / soft) / top;
                diverging(t > 1 ? 1 : t < -1 ? -1 : t, &r, &g, &b);
            }
            uint32_t *p = (uint32_t *)(px + (size_t)y * (size_t)stride) + x;
            *p = (uint32_t)(r * 255) << 16 | (uint32_t)(g * 255) << 8 | (uint32_t)(b * 255);
        }
    }
    free(ring_sig);
    cairo_surface_mark_dirty(s);
    cairo_t *cr = cairo_create(s);
    /* the star at (nx/2, ny/2): a small open cross */
    double cx = ((double)(nx / 2) + 0.5) * zoom,
           cy = band + ((double)(ny - 1 - ny / 2) + 0.5) * zoom;
    cairo_set_source_rgb(cr, 0.9, 0.9, 0.9);
    cairo_set_line_width(cr, 1);
    for (int k = 0; k < 4; k++) {
        double dx = k == 0 ? 1 : k == 1 ? -1 : 0, dy = k == 2 ? 1 : k == 3 ? -1 : 0;
        cairo_move_to(cr, cx + dx * 4 * zoom, cy + dy * 4 * zoom);
        cairo_line_to(cr, cx + dx * 8 * zoom, cy + dy * 8 * zoom);
    }
    cairo_stroke(cr);
    cairo_set_source_rgb(cr, 0.96, 0.95, 0.92);
    cairo_rectangle(cr, 0, H - 28, W, 28);
    cairo_fill(cr);
    cairo_set_source_rgb(cr, 0.14, 0.15, 0.17);
    cairo_select_font_face(cr, "sans-serif", CAIRO_FONT_SLANT_NORMAL, CAIRO_FONT_WEIGHT_NORMAL);
    cairo_set_font_size(cr, 12);
    char label[200];
    snprintf(label, sizeof label,
             "plane 1, north up, east left; asinh of value / noise of its ring");
    cairo_move_to(cr, 6, H - 10);
    cairo_show_text(cr, label);
    if (band) {
        cairo_set_source_rgb(cr, 0.96, 0.95, 0.92);
        cairo_rectangle(cr, 0, 0, W, band);
        cairo_fill(cr);
        cairo_set_source_rgb(cr, 0.14, 0.15, 0.17);
        cairo_select_font_face(cr, "sans-serif", CAIRO_FONT_SLANT_NORMAL, CAIRO_FONT_WEIGHT_BOLD);
        cairo_move_to(cr, 6, band - 6);
        cairo_show_text(cr, title);
    }
    cairo_destroy(cr);
    gl_cube_free(c);
    return png_product(s, png_path);
}

gl_status run_figure_star_positions(const char *csv_path, const char *png_path)
{
    gl_csv *t = NULL;
    gl_status st = gl_csv_read(csv_path, &t);
    if (st)
        return st;
    int cf = gl_csv_column(t, "frame"), cx = gl_csv_column(t, "x"), cy = gl_csv_column(t, "y"),
        ck = gl_csv_column(t, "kept");
    if (cf < 0 || cx < 0 || cy < 0 || t->nrows == 0) {
        gl_csv_free(t);
        return gl_error_set(GL_ERR_INPUT, "%s: no frame,x,y columns", csv_path);
    }
    /* offsets from the median position of the kept frames */
    double *w = malloc(sizeof *w * (size_t)t->nrows * 2);
    if (!w) {
        gl_csv_free(t);
        return gl_error_nomem("star positions");
    }
    double mx, my, sx, sy;
    for (long r = 0; r < t->nrows; r++) {
        w[r] = t->data[(size_t)r * (size_t)t->ncols + cx];
        w[t->nrows + r] = t->data[(size_t)r * (size_t)t->ncols + cy];
    }
    gl_stats_robust(w, (size_t)t->nrows, w + t->nrows, &mx, &sx);
    for (long r = 0; r < t->nrows; r++)
        w[r] = t->data[(size_t)r * (size_t)t->ncols + cy];
    gl_stats_robust(w, (size_t)t->nrows, w + t->nrows, &my, &sy);
    double span = 0;
    for (long r = 0; r < t->nrows; r++) {
        const double *row = t->data + (size_t)r * (size_t)t->ncols;
        double ax = fabs(row[cx] - mx), ay = fabs(row[cy] - my);
        if (isfinite(ax) && ax > span)
            span = ax;
        if (isfinite(ay) && ay > span)
            span = ay;
    }
    free(w);
    if (!(span > 0))
        span = 0.05;
    span *= 1.15;
    const int W = 640, H = 310, L = 64, R = 16, T = 18, B = 52;
    cairo_surface_t *s = cairo_image_surface_create(CAIRO_FORMAT_RGB24, W, H);
    cairo_t *cr = cairo_create(s);
    cairo_set_source_rgb(cr, 1, 1, 1);
    cairo_paint(cr);
    double last_frame = t->data[(size_t)(t->nrows - 1) * (size_t)t->ncols + cf];
    if (!(last_frame > 0))
        last_frame = 1;
#define PX(f) (L + (W - L - R) * (f) / last_frame)
#define PY(d) (T + (H - T - B) * (0.5 - 0.5 * (d) / span))
    cairo_set_source_rgb(cr, 0.8, 0.78, 0.72);
    cairo_set_line_width(cr, 1);
    cairo_rectangle(cr, L, T, W - L - R, H - T - B);
    cairo_move_to(cr, L, PY(0));
    cairo_line_to(cr, W - R, PY(0));
    cairo_stroke(cr);
    /* frame ticks: 1, 2 or 5 times a power of ten, about eight of them */
    cairo_select_font_face(cr, "sans-serif", CAIRO_FONT_SLANT_NORMAL, CAIRO_FONT_WEIGHT_NORMAL);
    cairo_set_font_size(cr, 11);
    {
        double raw = last_frame / 8, p10 = pow(10, floor(log10(raw > 1 ? raw : 1))), m = raw / p10;
        double step = fmax(1, (m < 1.5 ? 1 : m < 3.5 ? 2 : m < 7.5 ? 5 : 10) * p10);
        for (double fr = 0; fr <= last_frame + 1e-9; fr += step) {
            char lab[32];
            snprintf(lab, sizeof lab, "%.0f", fr);
            cairo_set_source_rgb(cr, 0.8, 0.78, 0.72);
            cairo_move_to(cr, PX(fr), H - B);
            cairo_line_to(cr, PX(fr), H - B + 4);
            cairo_stroke(cr);
            cairo_set_source_rgb(cr, 0.14, 0.15, 0.17);
            cairo_move_to(cr, PX(fr) - 6, H - B + 15);
            cairo_show_text(cr, lab);
        }
    }
    for (int axis = 0; axis < 2; axis++) {
        int col = axis ? cy : cx;
        double m = axis ? my : mx;
        for (long r = 0; r < t->nrows; r++) {
            const double *row = t->data + (size_t)r * (size_t)t->ncols;
            double d = row[col] - m;
            if (!isfinite(d))
                continue;
            int kept = ck < 0 || row[ck] == 1;
            double x = PX(row[cf]), y = PY(d);
            if (kept) {
                if (axis)
                    cairo_set_source_rgb(cr, 0.75, 0.46, 0.16);
                else
                    cairo_set_source_rgb(cr, 0.18, 0.23, 0.27);
                cairo_arc(cr, x, y, 2.2, 0, 2 * M_PI);
                cairo_fill(cr);
            } else {
                cairo_set_source_rgb(cr, 0.75, 0.1, 0.1);
                cairo_move_to(cr, x - 4, y - 4);
                cairo_line_to(cr, x + 4, y + 4);
                cairo_move_to(cr, x - 4, y + 4);
                cairo_line_to(cr, x + 4, y - 4);
                cairo_stroke(cr);
            }
        }
    }
#undef PX
#undef PY
    cairo_set_source_rgb(cr, 0.14, 0.15, 0.17);
    cairo_select_font_face(cr, "sans-serif", CAIRO_FONT_SLANT_NORMAL, CAIRO_FONT_WEIGHT_NORMAL);
    cairo_set_font_size(cr, 12);
    char label[200];
    snprintf(label, sizeof label, "+%.3g px", span);
    cairo_move_to(cr, 6, T + 10);
    cairo_show_text(cr, label);
    snprintf(label, sizeof label, "-%.3g px", span);
    cairo_move_to(cr, 6, H - B);
    cairo_show_text(cr, label);
    snprintf(label, sizeof label, "frame 0 .. %.0f: star x (slate) and y (copper) minus their",
             last_frame);
    cairo_move_to(cr, L, H - 17);
    cairo_show_text(cr, label);
    snprintf(label, sizeof label, "median (%.2f, %.2f) px; rejected frames: red cross", mx, my);
    cairo_move_to(cr, L, H - 4);
    cairo_show_text(cr, label);
    cairo_destroy(cr);
    gl_csv_free(t);
    return png_product(s, png_path);
}
