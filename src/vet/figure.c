/*
 * figure.c -- the figure of one vetted candidate, drawn with cairo to PNG and
 * SVG: along the top the data around the fitted position, the forward model
 * of the fitted companion and the data after the negative companion, on one
 * diverging colour scale (so a good fit leaves a noise-like third panel);
 * below, the S/N at each mode count against the threshold, the S/N of the
 * halves and with wrong angles against what a planet would give, and the
 * table of tests with the caution that they reduce, not remove, the chance
 * of a false claim.
 */
#include "core/internal.h"
#include "gloam/vet.h"

#include <cairo-svg.h>
#include <cairo.h>
#include <math.h>
#include <stdio.h>
#include <string.h>

#define FIG_W 1000.0
#define FIG_H 640.0

enum { PAPER = 0xf5f3ee, INK = 0x252b33, GRID = 0xd6d0c2, PASS = 0x2d7d46, FAIL = 0xb23a2e };

static void rgb(cairo_t *cr, unsigned hex)
{
    cairo_set_source_rgb(cr, ((hex >> 16) & 255) / 255.0, ((hex >> 8) & 255) / 255.0,
                         (hex & 255) / 255.0);
}

static void text(cairo_t *cr, double x, double y, const char *s, double ax)
{
    cairo_text_extents_t e;
    cairo_text_extents(cr, s, &e);
    cairo_move_to(cr, x - ax * e.width - e.x_bearing, y);
    cairo_show_text(cr, s);
}

/* Diverging map of our own: deep blue - paper - ember, v in [-1, 1]. */
static void colour(cairo_t *cr, double v)
{
    if (!isfinite(v)) {
        cairo_set_source_rgb(cr, 0.8, 0.8, 0.8);
        return;
    }
    v = GL_MAX(-1.0, GL_MIN(1.0, v));
    double a = fabs(v);
    if (v < 0)
        cairo_set_source_rgb(cr, 0.96 - 0.80 * a, 0.95 - 0.62 * a, 0.93 - 0.30 * a);
    else
        cairo_set_source_rgb(cr, 0.96 - 0.20 * a, 0.95 - 0.62 * a, 0.93 - 0.78 * a);
}

static void stamp(cairo_t *cr, const float *s, long n, double x0, double y0, double size,
                  double scale, const char *label, double rad)
{
    double c = size / (double)n;
    for (long j = 0; j < n; j++)
        for (long i = 0; i < n; i++) {
            colour(cr, s[j * n + i] / scale);
            /* north up: row 0 at the bottom */
            cairo_rectangle(cr, x0 + (double)i * c, y0 + size - (double)(j + 1) * c, c + 0.3,
                            c + 0.3);
            cairo_fill(cr);
        }
    rgb(cr, INK);
    cairo_set_line_width(cr, 1);
    cairo_rectangle(cr, x0, y0, size, size);
    cairo_stroke(cr);
    cairo_arc(cr, x0 + size / 2, y0 + size / 2, rad * c, 0, 2 * M_PI);
    cairo_set_dash(cr, (double[]){3, 3}, 2, 0);
    cairo_stroke(cr);
    cairo_set_dash(cr, NULL, 0, 0);
    cairo_set_font_size(cr, 13);
    text(cr, x0 + size / 2, y0 - 8, label, 0.5);
}

/* A small panel of points: values y[k] at x positions 0..n-1 with labels. */
static void points(cairo_t *cr, double X, double Y, double W, double H, int n, const double *y,
                   const double *expect, const char *const *labels, double limit, const char *title)
{
    double ymax = limit > 0 ? limit : 1;
    for (int k = 0; k < n; k++) {
        if (isfinite(y[k]))
            ymax = GL_MAX(ymax, y[k]);
        if (expect && isfinite(expect[k]))
            ymax = GL_MAX(ymax, expect[k]);
    }
    ymax *= 1.15;
    double ymin = 0;
    for (int k = 0; k < n; k++)
        if (isfinite(y[k]))
            ymin = GL_MIN(ymin, y[k] * 1.15);
    rgb(cr, GRID);
    cairo_set_line_width(cr, 0.8);
    cairo_rectangle(cr, X, Y, W, H);
    cairo_stroke(cr);
#define PY(v) (Y + H - ((v)-ymin) / (ymax - ymin) * H)
    cairo_move_to(cr, X, PY(0));
    cairo_line_to(cr, X + W, PY(0));
    cairo_stroke(cr);
    rgb(cr, INK);
    cairo_set_font_size(cr, 12);
    text(cr, X + W / 2, Y - 8, title, 0.5);
    char buf[32];
    snprintf(buf, sizeof buf, "%.0f", ymax / 1.15);
    text(cr, X - 4, PY(ymax / 1.15) + 4, buf, 1);
    text(cr, X - 4, PY(0) + 4, "0", 1);
    if (limit > 0) {
        rgb(cr, FAIL);
        cairo_set_dash(cr, (double[]){5, 3}, 2, 0);
        cairo_move_to(cr, X, PY(limit));
        cairo_line_to(cr, X + W, PY(limit));
        cairo_stroke(cr);
        cairo_set_dash(cr, NULL, 0, 0);
    }
    for (int k = 0; k < n; k++) {
        double x = X + W * ((double)k + 0.5) / (double)n;
        if (expect && isfinite(expect[k])) {
            rgb(cr, 0x8a8a8a);
            cairo_move_to(cr, x - 9, PY(expect[k]));
            cairo_line_to(cr, x + 9, PY(expect[k]));
            cairo_stroke(cr);
        }
        rgb(cr, 0x1d5f8a);
        if (isfinite(y[k])) {
            cairo_arc(cr, x, PY(y[k]), 4, 0, 2 * M_PI);
            cairo_fill(cr);
        }
        rgb(cr, INK);
        cairo_set_font_size(cr, 10);
        text(cr, x, Y + H + 14, labels[k], 0.5);
    }
#undef PY
}

static void draw(cairo_t *cr, const gl_vet_result *r, const char *title)
{
    rgb(cr, PAPER);
    cairo_paint(cr);
    cairo_select_font_face(cr, "sans-serif", CAIRO_FONT_SLANT_NORMAL, CAIRO_FONT_WEIGHT_NORMAL);
    rgb(cr, INK);
    cairo_set_font_size(cr, 15);
    text(cr, 24, 28, title ? title : "candidate", 0);
    char buf[256];
    cairo_set_font_size(cr, 12);
    if (isfinite(r->sep_mas))
        snprintf(buf, sizeof buf,
                 "sep %.2f +- %.2f px (%.1f +- %.1f mas)   PA %.2f +- %.2f deg   contrast %.3g +- "
                 "%.2g (dmag %.2f +- %.2f)   S/N %.1f",
                 r->sep_px, r->sep_err, r->sep_mas, r->sep_err_mas, r->pa_deg, r->pa_err,
                 r->contrast, r->contrast_err, r->dmag, r->dmag_err, r->snr);
    else
        snprintf(buf, sizeof buf,
                 "sep %.2f +- %.2f px   PA %.2f +- %.2f deg   contrast %.3g +- %.2g (dmag %.2f +- "
                 "%.2f)   S/N %.1f",
                 r->sep_px, r->sep_err, r->pa_deg, r->pa_err, r->contrast, r->contrast_err, r->dmag,
                 r->dmag_err, r->snr);
    text(cr, 24, 48, buf, 0);

    /* stamps on one scale: the largest |data| */
    long n = r->stamp_n, nn = n * n;
    double scale = 0;
    for (long k = 0; k < nn; k++)
        if (isfinite(r->stamp_data[k]))
            scale = GL_MAX(scale, fabs(r->stamp_data[k]));
    if (!(scale > 0))
        scale = 1;
    const double S = 190, Y0 = 92;
    stamp(cr, r->stamp_data, n, 24, Y0, S, scale, "data (north up)", r->merit_radius_px);
    stamp(cr, r->stamp_model, n, 24 + S + 24, Y0, S, scale, "forward model of the fit",
          r->merit_radius_px);
    stamp(cr, r->stamp_resid, n, 24 + 2 * (S + 24), Y0, S, scale, "data - model",
          r->merit_radius_px);
    cairo_set_font_size(cr, 10);
    rgb(cr, INK);
    snprintf(buf, sizeof buf, "colour: -%.3g .. +%.3g (same for the three); circle: merit aperture",
             scale, scale);
    text(cr, 24, Y0 + S + 18, buf, 0);

    /* S/N per mode count */
    const char *ml[GL_SUBTRACT_MAX_MODES];
    char mlbuf[GL_SUBTRACT_MAX_MODES][16];
    int nm = GL_MIN(r->nmodes, 12);
    for (int k = 0; k < nm; k++) {
        snprintf(mlbuf[k], sizeof mlbuf[k], "%ld", r->modes[k]);
        ml[k] = mlbuf[k];
    }
    if (nm > 0)
        points(cr, 60, 360, 250, 170, nm, r->snr_modes, r->fake_snr_modes, ml,
               r->tests[GL_VET_TEST_SNR].limit,
               "S/N per mode count (bar: fakes; dashed: threshold)");
    /* halves and wrong angles */
    double v[5] = {r->snr, r->snr_half[0], r->snr_half[1], r->snr_negated, r->snr_scrambled};
    double e[5] = {NAN, r->fake_snr_half[0], r->fake_snr_half[1], r->fake_snr_negated,
                   r->fake_snr_scrambled};
    const char *hl[5] = {"all", "half 1", "half 2", "negated", "scrambled"};
    for (int k = 1; k < 5; k++)
        if (!r->tests[k == 1 || k == 2 ? GL_VET_TEST_HALVES
                      : k == 3         ? GL_VET_TEST_NEGATED
                                       : GL_VET_TEST_SCRAMBLED]
                 .possible)
            v[k] = e[k] = NAN;
    points(cr, 370, 360, 260, 170, 5, v, e, hl, 0, "S/N by frames and angles (bar: a planet)");

    /* the tests */
    double tx = 690, ty = 100;
    rgb(cr, INK);
    cairo_set_font_size(cr, 13);
    snprintf(buf, sizeof buf, "tests: %d of %d possible passed", r->npassed, r->npossible);
    text(cr, tx, ty, buf, 0);
    ty += 22;
    cairo_set_font_size(cr, 11);
    for (int k = 0; k < GL_VET_NTESTS; k++, ty += 31) {
        const gl_vet_test *t = &r->tests[k];
        rgb(cr, !t->possible ? 0x8a8a8a : t->passed ? PASS : FAIL);
        snprintf(buf, sizeof buf, "%-9s %s", gl_vet_test_name((gl_vet_test_id)k),
                 !t->possible ? "not possible"
                 : t->passed  ? "pass"
                              : "FAIL");
        text(cr, tx, ty, buf, 0);
        rgb(cr, INK);
        if (t->possible)
            snprintf(buf, sizeof buf, "value %.3g, planet %.3g, limit %.3g", t->value, t->expected,
                     t->limit);
        else
            snprintf(buf, sizeof buf, "%.60s", t->note);
        cairo_set_font_size(cr, 10);
        text(cr, tx + 12, ty + 14, buf, 0);
        cairo_set_font_size(cr, 11);
    }
    cairo_set_font_size(cr, 10);
    rgb(cr, INK);
    const char *caution[] = {
        "Caution: these tests reduce, and do not remove, the chance of a false claim.",
        "Errors: injection-recovery scatter at this separation plus the centring, north and",
        "scale errors given; the PSF calibration and orbital motion carry no error here.",
        "All numbers come from the subtraction limited to the candidate's annulus."};
    for (int k = 0; k < 4; k++)
        text(cr, 24, FIG_H - 58 + 14 * k, caution[k], 0);
}

gl_status gl_vet_figure_write(const char *png_path, const char *svg_path, const gl_vet_result *r,
                              const char *title)
{
    gl_status st = GL_OK;
    if (!r->stamp_data)
        return gl_error_set(GL_ERR_USAGE, "vet figure: the result has no stamps");
    if (png_path) {
        cairo_surface_t *s = cairo_image_surface_create(CAIRO_FORMAT_RGB24, (int)FIG_W, (int)FIG_H);
        cairo_t *cr = cairo_create(s);
        draw(cr, r, title);
        cairo_destroy(cr);
        if (cairo_surface_write_to_png(s, png_path) != CAIRO_STATUS_SUCCESS)
            st = gl_error_set(GL_ERR_IO, "%s: cannot write the PNG figure", png_path);
        cairo_surface_destroy(s);
    }
    if (!st && svg_path) {
        cairo_surface_t *s = cairo_svg_surface_create(svg_path, FIG_W, FIG_H);
        cairo_t *cr = cairo_create(s);
        draw(cr, r, title);
        cairo_destroy(cr);
        cairo_surface_finish(s);
        if (cairo_surface_status(s) != CAIRO_STATUS_SUCCESS)
            st = gl_error_set(GL_ERR_IO, "%s: cannot write the SVG figure", svg_path);
        cairo_surface_destroy(s);
    }
    return st;
}
