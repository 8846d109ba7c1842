/*
 * plot.c -- the contrast-curve figure, drawn with cairo to PNG and SVG.
 *
 * One drawing routine renders to any cairo surface: separation (px) along the
 * bottom, arcsec along the top when the pixel scale is known, contrast on a
 * logarithmic left axis and the matching magnitude difference on the right.
 * Curves are drawn as lines with their points marked, candidates as numbered
 * open diamonds; the assumptions that make the curve meaningful are printed
 * on the figure itself, so the figure cannot travel without them. The PDF
 * is the journal version: one column wide (3.5 in), fonts of 7-8 pt, the
 * notes in small print under the plot.
 */
#include "core/internal.h"
#include "gloam/limits.h"

#include <cairo-pdf.h>
#include <cairo-svg.h>
#include <cairo.h>
#include <math.h>
#include <stdio.h>
#include <string.h>

/* Sizes of one rendering: the screen figure (PNG/SVG, in pixels) or the
 * journal figure (PDF, in points, one column of 3.5 in = 252 pt, with fonts
 * of 7-8 pt as journals ask for; the notes go under the plot in 6 pt). */
typedef struct layout {
    double w, h;           /* the whole figure */
    double ml, mr, mt, mb; /* margins around the plot */
    double f_tick, f_axis, f_title, f_legend;
    double lw_grid, lw_frame, lw_curve, dot, tick, line_h;
    int notes_below; /* notes under the plot instead of in the legend box */
} layout;

static const layout screen = {900, 620, 92,  78,  78,  66, 13, 14, 17,
                              12,  0.8, 1.2, 2.2, 2.6, 5,  16, 0};
static const layout column = {252, 0,   38,  30,  48,  28,  7, 7.5, 8,
                              6.5, 0.3, 0.6, 1.0, 1.1, 2.5, 8, 1};

#define FIG_W (L->w)
#define FIG_H (L->h)
#define M_LEFT (L->ml)
#define M_RIGHT (L->mr)
#define M_TOP (L->mt)
#define M_BOTTOM (L->mb)

typedef struct frame {
    double x0, x1;   /* separation range, px */
    double ly0, ly1; /* log10 contrast range */
    double pw, ph;   /* plot width and height */
    double left, top;
} frame;

static double px_x(const frame *f, double sep)
{
    return f->left + (sep - f->x0) / (f->x1 - f->x0) * f->pw;
}
static double px_y(const frame *f, double c)
{
    return f->top + (f->ly1 - log10(c)) / (f->ly1 - f->ly0) * f->ph;
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
static const unsigned curve_colour[] = {0x1f7a74, 0xc4572a, 0x6b5b95, 0x8a8a2e, 0x2b6f9e,
                                        0xa33b61, 0x5f7f3a, 0x9a6a1f, 0x4d4d8f, 0x7a4a3a};
enum { NCOLOURS = sizeof curve_colour / sizeof curve_colour[0] };

/* The height of the journal figure: the plot, plus one line per note. */
static double column_height(const gl_limits_plot *p)
{
    return 200 + column.line_h * p->nnotes;
}

static void draw(cairo_t *cr, const gl_limits_plot *p, const layout *L)
{
    frame f;
    double plot_h = L->notes_below ? 200 : FIG_H; /* the notes' lines come below */
    f.left = M_LEFT;
    f.top = M_TOP;
    f.pw = FIG_W - M_LEFT - M_RIGHT;
    f.ph = plot_h - M_TOP - M_BOTTOM;
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
    for (int k = 0; k < p->nmarks; k++)
        if (p->mark_contrast[k] > 0 && isfinite(p->mark_contrast[k]) &&
            isfinite(p->mark_sep_px[k])) {
            xmax = GL_MAX(xmax, p->mark_sep_px[k]);
            cmin = GL_MIN(cmin, p->mark_contrast[k]);
            cmax = GL_MAX(cmax, p->mark_contrast[k]);
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
    cairo_set_line_width(cr, L->lw_grid);
    for (double d = f.ly0; d < f.ly1; d += 1)
        for (int k = 2; k <= 9; k++) {
            double y = px_y(&f, k * pow(10, d));
            set_rgb(cr, GRID_MINOR);
            cairo_move_to(cr, M_LEFT, y);
            cairo_line_to(cr, M_LEFT + f.pw, y);
            cairo_stroke(cr);
        }
    char buf[64];
    cairo_set_font_size(cr, L->f_tick);
    for (double d = f.ly0; d <= f.ly1 + 1e-9; d += 1) {
        double y = px_y(&f, pow(10, d));
        set_rgb(cr, GRID);
        cairo_move_to(cr, M_LEFT, y);
        cairo_line_to(cr, M_LEFT + f.pw, y);
        cairo_stroke(cr);
        set_rgb(cr, INK);
        snprintf(buf, sizeof buf, "1e%+d", (int)d);
        text_at(cr, M_LEFT - L->tick - 3, y, buf, 1.0, 0.5);
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
        text_at(cr, X, M_TOP + f.ph + L->tick + 3, buf, 0.5, 0.0);
    }
    /* top axis: arcsec */
    if (p->pixscale_mas > 0) {
        double amax = f.x1 * p->pixscale_mas / 1000, as = nice_step(amax, 7);
        for (double a = 0; a <= amax + 1e-12; a += as) {
            double X = px_x(&f, a * 1000 / p->pixscale_mas);
            cairo_move_to(cr, X, M_TOP);
            cairo_line_to(cr, X, M_TOP - L->tick);
            cairo_stroke(cr);
            snprintf(buf, sizeof buf, "%g", a);
            text_at(cr, X, M_TOP - L->tick - 3, buf, 0.5, 1.0);
        }
        text_at(cr, M_LEFT + f.pw / 2, M_TOP - L->tick - 6 - 1.4 * L->f_tick, "separation (arcsec)",
                0.5, 1.0);
    }
    /* right axis: magnitude difference */
    double m0 = -2.5 * f.ly1, m1 = -2.5 * f.ly0, ms = nice_step(m1 - m0, 8);
    for (double m = ceil(m0 / ms) * ms; m <= m1 + 1e-9; m += ms) {
        double y = px_y(&f, pow(10, -m / 2.5));
        cairo_move_to(cr, M_LEFT + f.pw, y);
        cairo_line_to(cr, M_LEFT + f.pw + L->tick, y);
        cairo_stroke(cr);
        snprintf(buf, sizeof buf, "%g", m);
        text_at(cr, M_LEFT + f.pw + L->tick + 3, y, buf, 0.0, 0.5);
    }
    /* frame and axis titles */
    cairo_set_line_width(cr, L->lw_frame);
    cairo_rectangle(cr, M_LEFT, M_TOP, f.pw, f.ph);
    cairo_stroke(cr);
    cairo_set_font_size(cr, L->f_axis);
    text_at(cr, M_LEFT + f.pw / 2, plot_h - M_BOTTOM / 5, "separation (px)", 0.5, 1.0);
    cairo_save(cr);
    cairo_translate(cr, M_LEFT / 4, M_TOP + f.ph / 2);
    cairo_rotate(cr, -M_PI / 2);
    text_at(cr, 0, 0, "contrast (companion / star)", 0.5, 0.5);
    cairo_restore(cr);
    cairo_save(cr);
    cairo_translate(cr, FIG_W - M_RIGHT / 4.5, M_TOP + f.ph / 2);
    cairo_rotate(cr, M_PI / 2);
    text_at(cr, 0, 0, "magnitude difference", 0.5, 0.5);
    cairo_restore(cr);
    cairo_set_font_size(cr, L->f_title);
    cairo_select_font_face(cr, "sans-serif", CAIRO_FONT_SLANT_NORMAL, CAIRO_FONT_WEIGHT_BOLD);
    text_at(cr, M_LEFT, p->pixscale_mas > 0 ? M_TOP * 0.15 : M_TOP * 0.4,
            p->title ? p->title : "detection limits", 0.0, 0.0);
    cairo_select_font_face(cr, "sans-serif", CAIRO_FONT_SLANT_NORMAL, CAIRO_FONT_WEIGHT_NORMAL);

    /* curves, clipped to the plot */
    cairo_save(cr);
    cairo_rectangle(cr, M_LEFT, M_TOP, f.pw, f.ph);
    cairo_clip(cr);
    for (int s = 0; s < p->ncurves; s++) {
        set_rgb(cr, curve_colour[s % NCOLOURS]);
        cairo_set_line_width(cr, L->lw_curve);
        if (s % 2)
            cairo_set_dash(cr, (double[]){3.2 * L->lw_curve, 1.8 * L->lw_curve}, 2, 0);
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
            cairo_arc(cr, px_x(&f, p->sep_px[i]), px_y(&f, c), L->dot, 0, 2 * M_PI);
            cairo_fill(cr);
        }
    }
    /* candidates: an open diamond at their separation and contrast, numbered */
    cairo_set_font_size(cr, L->f_legend);
    for (int k = 0; k < p->nmarks; k++) {
        double c = p->mark_contrast[k], sep = p->mark_sep_px[k];
        if (!(c > 0) || !isfinite(c) || !isfinite(sep))
            continue;
        double X = px_x(&f, sep), Y = px_y(&f, c), r = 2.2 * L->dot + 1;
        set_rgb(cr, INK);
        cairo_set_line_width(cr, 0.6 * L->lw_curve);
        cairo_move_to(cr, X, Y - r);
        cairo_line_to(cr, X + r, Y);
        cairo_line_to(cr, X, Y + r);
        cairo_line_to(cr, X - r, Y);
        cairo_close_path(cr);
        cairo_stroke(cr);
        if (p->mark_labels && p->mark_labels[k])
            text_at(cr, X + r + 2, Y - r, p->mark_labels[k], 0.0, 1.0);
    }
    cairo_restore(cr);

    /* legend and assumptions, upper right inside the plot (curves fall from
     * the upper left, so that corner is the emptiest) */
    cairo_set_font_size(cr, L->f_legend);
    const double lh = L->line_h, seg = 1.75 * lh;
    const int nboxed = L->notes_below ? 0 : p->nnotes;
    double bw = 0;
    for (int s = 0; s < p->ncurves; s++) {
        cairo_text_extents_t e;
        cairo_text_extents(cr, p->curves[s].label, &e);
        bw = GL_MAX(bw, e.width + seg + 0.75 * lh);
    }
    for (int k = 0; k < nboxed; k++) {
        cairo_text_extents_t e;
        cairo_text_extents(cr, p->notes[k], &e);
        bw = GL_MAX(bw, e.width + 0.75 * lh);
    }
    double lx = M_LEFT + f.pw - bw - 1.4 * lh, ly = M_TOP + 1.6 * lh;
    cairo_set_source_rgba(cr, 1, 1, 1, 0.85);
    cairo_rectangle(cr, lx - lh / 2, ly - 0.9 * lh, bw + lh,
                    lh * (p->ncurves + nboxed) + 0.75 * lh);
    cairo_fill(cr);
    for (int s = 0; s < p->ncurves; s++, ly += lh) {
        set_rgb(cr, curve_colour[s % NCOLOURS]);
        cairo_set_line_width(cr, L->lw_curve);
        if (s % 2)
            cairo_set_dash(cr, (double[]){3.2 * L->lw_curve, 1.8 * L->lw_curve}, 2, 0);
        cairo_move_to(cr, lx, ly - lh / 4);
        cairo_line_to(cr, lx + seg, ly - lh / 4);
        cairo_stroke(cr);
        cairo_set_dash(cr, NULL, 0, 0);
        set_rgb(cr, INK);
        cairo_move_to(cr, lx + seg + lh / 2, ly);
        cairo_show_text(cr, p->curves[s].label);
    }
    set_rgb(cr, INK);
    if (L->notes_below) {
        cairo_set_font_size(cr, 6);
        ly = plot_h + 2;
        lx = 4;
    }
    for (int k = 0; k < p->nnotes; k++, ly += lh) {
        if (L->notes_below) { /* a long note is set smaller to fit the column */
            cairo_text_extents_t e;
            cairo_set_font_size(cr, 6);
            cairo_text_extents(cr, p->notes[k], &e);
            if (e.x_advance > FIG_W - 8)
                cairo_set_font_size(cr, 6 * (FIG_W - 8) / e.x_advance);
        }
        cairo_move_to(cr, lx, ly);
        cairo_show_text(cr, p->notes[k]);
    }
}

gl_status gl_limits_plot_write(const char *png_path, const char *svg_path, const gl_limits_plot *p)
{
    gl_status st = GL_OK;
    const layout *L = &screen;
    if (png_path) {
        cairo_surface_t *s = cairo_image_surface_create(CAIRO_FORMAT_RGB24, (int)FIG_W, (int)FIG_H);
        cairo_t *cr = cairo_create(s);
        draw(cr, p, L);
        cairo_destroy(cr);
        if (cairo_surface_write_to_png(s, png_path) != CAIRO_STATUS_SUCCESS)
            st = gl_error_set(GL_ERR_IO, "%s: cannot write the PNG plot", png_path);
        cairo_surface_destroy(s);
    }
    if (!st && svg_path) {
        cairo_surface_t *s = cairo_svg_surface_create(svg_path, FIG_W, FIG_H);
        cairo_t *cr = cairo_create(s);
        draw(cr, p, L);
        cairo_destroy(cr);
        cairo_surface_finish(s);
        if (cairo_surface_status(s) != CAIRO_STATUS_SUCCESS)
            st = gl_error_set(GL_ERR_IO, "%s: cannot write the SVG plot", svg_path);
        cairo_surface_destroy(s);
    }
    return st;
}

gl_status gl_limits_plot_write_pdf(const char *pdf_path, const gl_limits_plot *p)
{
    layout col = column;
    col.h = column_height(p);
    cairo_surface_t *s = cairo_pdf_surface_create(pdf_path, col.w, col.h);
    cairo_pdf_surface_set_metadata(s, CAIRO_PDF_METADATA_TITLE,
                                   p->title ? p->title : "detection limits");
    cairo_pdf_surface_set_metadata(s, CAIRO_PDF_METADATA_CREATOR, "gloam limits");
    cairo_t *cr = cairo_create(s);
    draw(cr, p, &col);
    cairo_destroy(cr);
    cairo_surface_finish(s);
    gl_status st = GL_OK;
    if (cairo_surface_status(s) != CAIRO_STATUS_SUCCESS)
        st = gl_error_set(GL_ERR_IO, "%s: cannot write the PDF figure", pdf_path);
    cairo_surface_destroy(s);
    return st;
}
