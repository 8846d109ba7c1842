/*
 * plot.c -- the contrast-curve figure, drawn with cairo to PNG and SVG.
 *
 * One drawing routine renders to any cairo surface: separation (px) along the
 * bottom, arcsec along the top when the pixel scale is known, contrast on a
 * logarithmic left axis and the matching magnitude difference on the right.
 * Curves are drawn as lines with their points marked; the assumptions that
 * make the curve meaningful are printed in a box on the figure itself, so the
 * figure cannot travel without them.
 */
#include "core/internal.h"
#include "gloam/limits.h"

#include <cairo-svg.h>
#include <cairo.h>
#include <math.h>
#include <stdio.h>
#include <string.h>

#define FIG_W 900.0
#define FIG_H 620.0
#define M_LEFT 92.0
#define M_RIGHT 78.0
#define M_TOP 78.0
#define M_BOTTOM 66.0

typedef struct frame {
    double x0, x1;   /* separation range, px */
    double ly0, ly1; /* log10 contrast range */
    double pw, ph;   /* plot width and height */
} frame;

static double px_x(const frame *f, double sep)
{
    return M_LEFT + (sep - f->x0) / (f->x1 - f->x0) * f->pw;
}
static double px_y(const frame *f, double c)
{
    return M_TOP + (f->ly1 - log10(c)) / (f->ly1 - f->ly0) * f->ph;
}

/* A tick step of 1, 2 or 5 times a power of ten giving about `want` ticks. */
static double nice_step(double range, int want)
{
    double raw = range / want, p = pow(10, floor(log10(raw)));
    double m = raw / p;
    return (m < 1.5 ? 1 : m < 3.5 ? 2 : m < 7.5 ? 5 : 10) * p;
}

static void text_at(cairo_t *cr, double x, double y, const char *s, double ax, double ay)
{
    cairo_text_extents_t e;
    cairo_text_extents(cr, s, &e);
    cairo_move_to(cr, x - ax * e.width - e.x_bearing, y - ay * e.height - e.y_bearing);
    cairo_show_text(cr, s);
}

static void set_rgb(cairo_t *cr, unsigned hex)
{
    cairo_set_source_rgb(cr, ((hex >> 16) & 255) / 255.0, ((hex >> 8) & 255) / 255.0,
                         (hex & 255) / 255.0);
}

/* Palette of our own: warm paper, slate ink, teal and ember curves. */
enum { PAPER = 0xf7f4ec, INK = 0x2b3440, GRID = 0xd9d3c4, GRID_MINOR = 0xebe6da };
static const unsigned curve_colour[] = {0x1f7a74, 0xc4572a, 0x6b5b95, 0x8a8a2e};

static void draw(cairo_t *cr, const gl_limits_plot *p)
{
    frame f;
    f.pw = FIG_W - M_LEFT - M_RIGHT;
    f.ph = FIG_H - M_TOP - M_BOTTOM;
    /* ranges from the data */
    double xmax = 0, cmin = INFINITY, cmax = 0;
    for (int s = 0; s < p->ncurves; s++)
        for (long i = 0; i < p->n; i++) {
            double c = p->curves[s].contrast[i];
            if (!(c > 0) || !isfinite(c))
                continue;
            xmax = GL_MAX(xmax, p->sep_px[i]);
            cmin = GL_MIN(cmin, c);
            cmax = GL_MAX(cmax, c);
        }
    if (!(cmax > 0)) {
        cmin = 1e-6;
        cmax = 1e-2;
        xmax = 10;
    }
    f.x0 = 0;
    f.x1 = xmax * 1.05;
    f.ly0 = floor(log10(cmin) - 0.05);
    f.ly1 = ceil(log10(cmax) + 0.05);
    if (f.ly1 - f.ly0 < 1)
        f.ly1 = f.ly0 + 1;

    set_rgb(cr, PAPER);
    cairo_paint(cr);
    cairo_select_font_face(cr, "sans-serif", CAIRO_FONT_SLANT_NORMAL, CAIRO_FONT_WEIGHT_NORMAL);

    /* grid: minor decades, major decades, separation steps */
    cairo_set_line_width(cr, 0.8);
    for (double d = f.ly0; d < f.ly1; d += 1)
        for (int k = 2; k <= 9; k++) {
            double y = px_y(&f, k * pow(10, d));
            set_rgb(cr, GRID_MINOR);
            cairo_move_to(cr, M_LEFT, y);
            cairo_line_to(cr, M_LEFT + f.pw, y);
            cairo_stroke(cr);
        }
    char buf[64];
    cairo_set_font_size(cr, 13);
    for (double d = f.ly0; d <= f.ly1 + 1e-9; d += 1) {
        double y = px_y(&f, pow(10, d));
        set_rgb(cr, GRID);
        cairo_move_to(cr, M_LEFT, y);
        cairo_line_to(cr, M_LEFT + f.pw, y);
        cairo_stroke(cr);
        set_rgb(cr, INK);
        snprintf(buf, sizeof buf, "1e%+d", (int)d);
        text_at(cr, M_LEFT - 8, y, buf, 1.0, 0.5);
    }
    double xs = nice_step(f.x1 - f.x0, 8);
    for (double x = 0; x <= f.x1 + 1e-9; x += xs) {
        double X = px_x(&f, x);
        set_rgb(cr, GRID);
        cairo_move_to(cr, X, M_TOP);
        cairo_line_to(cr, X, M_TOP + f.ph);
        cairo_stroke(cr);
        set_rgb(cr, INK);
        snprintf(buf, sizeof buf, "%g", x);
        text_at(cr, X, M_TOP + f.ph + 8, buf, 0.5, 0.0);
    }
    /* top axis: arcsec */
    if (p->pixscale_mas > 0) {
        double amax = f.x1 * p->pixscale_mas / 1000, as = nice_step(amax, 7);
        for (double a = 0; a <= amax + 1e-12; a += as) {
            double X = px_x(&f, a * 1000 / p->pixscale_mas);
            cairo_move_to(cr, X, M_TOP);
            cairo_line_to(cr, X, M_TOP - 5);
            cairo_stroke(cr);
            snprintf(buf, sizeof buf, "%g", a);
            text_at(cr, X, M_TOP - 8, buf, 0.5, 1.0);
        }
        text_at(cr, M_LEFT + f.pw / 2, M_TOP - 28, "separation (arcsec)", 0.5, 1.0);
    }
    /* right axis: magnitude difference */
    double m0 = -2.5 * f.ly1, m1 = -2.5 * f.ly0, ms = nice_step(m1 - m0, 8);
    for (double m = ceil(m0 / ms) * ms; m <= m1 + 1e-9; m += ms) {
        double y = px_y(&f, pow(10, -m / 2.5));
        cairo_move_to(cr, M_LEFT + f.pw, y);
        cairo_line_to(cr, M_LEFT + f.pw + 5, y);
        cairo_stroke(cr);
        snprintf(buf, sizeof buf, "%g", m);
        text_at(cr, M_LEFT + f.pw + 8, y, buf, 0.0, 0.5);
    }
    /* frame and axis titles */
    cairo_set_line_width(cr, 1.2);
    cairo_rectangle(cr, M_LEFT, M_TOP, f.pw, f.ph);
    cairo_stroke(cr);
    cairo_set_font_size(cr, 14);
    text_at(cr, M_LEFT + f.pw / 2, FIG_H - 14, "separation (px)", 0.5, 1.0);
    cairo_save(cr);
    cairo_translate(cr, 22, M_TOP + f.ph / 2);
    cairo_rotate(cr, -M_PI / 2);
    text_at(cr, 0, 0, "contrast (companion / star)", 0.5, 0.5);
    cairo_restore(cr);
    cairo_save(cr);
    cairo_translate(cr, FIG_W - 18, M_TOP + f.ph / 2);
    cairo_rotate(cr, M_PI / 2);
    text_at(cr, 0, 0, "magnitude difference", 0.5, 0.5);
    cairo_restore(cr);
    cairo_set_font_size(cr, 17);
    cairo_select_font_face(cr, "sans-serif", CAIRO_FONT_SLANT_NORMAL, CAIRO_FONT_WEIGHT_BOLD);
    text_at(cr, M_LEFT, p->pixscale_mas > 0 ? 12 : 30, p->title ? p->title : "detection limits",
            0.0, 0.0);
    cairo_select_font_face(cr, "sans-serif", CAIRO_FONT_SLANT_NORMAL, CAIRO_FONT_WEIGHT_NORMAL);

    /* curves, clipped to the plot */
    cairo_save(cr);
    cairo_rectangle(cr, M_LEFT, M_TOP, f.pw, f.ph);
    cairo_clip(cr);
    for (int s = 0; s < p->ncurves; s++) {
        set_rgb(cr, curve_colour[s % 4]);
        cairo_set_line_width(cr, 2.2);
        if (s % 2)
            cairo_set_dash(cr, (double[]){7, 4}, 2, 0);
        int pen = 0;
        for (long i = 0; i < p->n; i++) {
            double c = p->curves[s].contrast[i];
            if (!(c > 0) || !isfinite(c)) {
                pen = 0;
                continue;
            }
            double X = px_x(&f, p->sep_px[i]), Y = px_y(&f, c);
            if (pen)
                cairo_line_to(cr, X, Y);
            else
                cairo_move_to(cr, X, Y);
            pen = 1;
        }
        cairo_stroke(cr);
        cairo_set_dash(cr, NULL, 0, 0);
        for (long i = 0; i < p->n; i++) {
            double c = p->curves[s].contrast[i];
            if (!(c > 0) || !isfinite(c))
                continue;
            cairo_arc(cr, px_x(&f, p->sep_px[i]), px_y(&f, c), 2.6, 0, 2 * M_PI);
            cairo_fill(cr);
        }
    }
    cairo_restore(cr);

    /* legend and assumptions, upper right inside the plot (curves fall from
     * the upper left, so that corner is the emptiest) */
    cairo_set_font_size(cr, 12);
    double bw = 0;
    for (int s = 0; s < p->ncurves; s++) {
        cairo_text_extents_t e;
        cairo_text_extents(cr, p->curves[s].label, &e);
        bw = GL_MAX(bw, e.width + 40);
    }
    for (int k = 0; k < p->nnotes; k++) {
        cairo_text_extents_t e;
        cairo_text_extents(cr, p->notes[k], &e);
        bw = GL_MAX(bw, e.width + 12);
    }
    double lx = M_LEFT + f.pw - bw - 22, ly = M_TOP + 26;
    cairo_set_source_rgba(cr, 1, 1, 1, 0.85);
    cairo_rectangle(cr, lx - 8, ly - 14, bw + 16, 16.0 * (p->ncurves + p->nnotes) + 12);
    cairo_fill(cr);
    for (int s = 0; s < p->ncurves; s++, ly += 16) {
        set_rgb(cr, curve_colour[s % 4]);
        cairo_set_line_width(cr, 2.2);
        if (s % 2)
            cairo_set_dash(cr, (double[]){7, 4}, 2, 0);
        cairo_move_to(cr, lx, ly - 4);
        cairo_line_to(cr, lx + 28, ly - 4);
        cairo_stroke(cr);
        cairo_set_dash(cr, NULL, 0, 0);
        set_rgb(cr, INK);
        cairo_move_to(cr, lx + 36, ly);
        cairo_show_text(cr, p->curves[s].label);
    }
    set_rgb(cr, INK);
    for (int k = 0; k < p->nnotes; k++, ly += 16) {
        cairo_move_to(cr, lx, ly);
        cairo_show_text(cr, p->notes[k]);
    }
}

gl_status gl_limits_plot_write(const char *png_path, const char *svg_path, const gl_limits_plot *p)
{
    gl_status st = GL_OK;
    if (png_path) {
        cairo_surface_t *s = cairo_image_surface_create(CAIRO_FORMAT_RGB24, (int)FIG_W, (int)FIG_H);
        cairo_t *cr = cairo_create(s);
        draw(cr, p);
        cairo_destroy(cr);
        if (cairo_surface_write_to_png(s, png_path) != CAIRO_STATUS_SUCCESS)
            st = gl_error_set(GL_ERR_IO, "%s: cannot write the PNG plot", png_path);
        cairo_surface_destroy(s);
    }
    if (!st && svg_path) {
        cairo_surface_t *s = cairo_svg_surface_create(svg_path, FIG_W, FIG_H);
        cairo_t *cr = cairo_create(s);
        draw(cr, p);
        cairo_destroy(cr);
        cairo_surface_finish(s);
        if (cairo_surface_status(s) != CAIRO_STATUS_SUCCESS)
            st = gl_error_set(GL_ERR_IO, "%s: cannot write the SVG plot", svg_path);
        cairo_surface_destroy(s);
    }
    return st;
}
