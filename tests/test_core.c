/*
 * test_core.c -- status messages, header keywords, cube allocation and the
 * allocator's fault injection. Invariants only; no outside data needed.
 */
#include "gloam/gloam.h"
#include "check.h"
#include "core/internal.h"

#include <math.h>
#include <stdlib.h>

#include <string.h>

static void test_errors(void)
{
    gl_status st = gl_error_set(GL_ERR_INPUT, "%s: bad %d", "x.fits", 3);
    CHECK(st == GL_ERR_INPUT, "status returned unchanged");
    CHECK(strcmp(gl_error_message(), "x.fits: bad 3") == 0, "message: %s", gl_error_message());
    CHECK(gl_status_exit_code(GL_ERR_INPUT) == 1, "bad input exits 1");
    CHECK(gl_status_exit_code(GL_ERR_EXISTS) == 1, "existing output exits 1");
    CHECK(gl_status_exit_code(GL_ERR_INTERNAL) == 2, "internal failure exits 2");
    CHECK(gl_status_exit_code(GL_OK) == 0, "success exits 0");
}

static void test_header(void)
{
    gl_header *h = gl_header_new();
    CHECK(h != NULL, "header allocated");
    gl_header_add_card(h, "EXPTIME =                  1.5 / seconds");
    gl_header_add_card(h, "OBJECT  = 'Star O''Neil'");
    gl_header_add_card(h, "GAIN    =               2.0D+0");
    double v = 0;
    char s[72];
    CHECK(gl_header_get_dbl(h, "EXPTIME", &v) && v == 1.5, "carried number: %g", v);
    CHECK(gl_header_get_dbl(h, "GAIN", &v) && v == 2.0, "D exponent: %g", v);
    CHECK(gl_header_get_str(h, "OBJECT", s, sizeof s) && strcmp(s, "Star O'Neil") == 0,
          "quoted string with doubled quote: %s", s);
    CHECK(!gl_header_get_dbl(h, "OBJECT", &v), "string is not a number");
    CHECK(!gl_header_get_dbl(h, "MISSING", &v), "absent key");
    gl_header_set_dbl(h, "EXPTIME", 3.0, "replaced");
    CHECK(gl_header_get_dbl(h, "EXPTIME", &v) && v == 3.0, "typed key replaces card: %g", v);
    CHECK(gl_header_ncards(h) == 2, "replaced card removed: %d", gl_header_ncards(h));
    gl_header *c = gl_header_copy(h);
    gl_header_remove(h, "EXPTIME");
    CHECK(!gl_header_get_dbl(h, "EXPTIME", &v), "removed");
    CHECK(gl_header_get_dbl(c, "EXPTIME", &v) && v == 3.0, "copy independent");
    gl_header_free(c);
    gl_header_free(h);
    gl_header_free(NULL);
}

/* Malformed cards: a named card without "= " (cfitsio then returns its 72
 * characters as a comment) and a card of 75 characters without a blank (a
 * keyword name of up to 74). Both used to overflow the parser's buffers
 * (caught by ASan); now they read as "no value". */
static void test_header_malformed_cards(void)
{
    gl_header *h = gl_header_new();
    char card[81];
    memset(card, 'x', 80);
    memcpy(card, "OBJECT  ", 8);
    card[80] = '\0';
    gl_header_add_card(h, card);
    memset(card, 'Y', 80);
    gl_header_add_card(h, card);
    char s[72];
    double v;
    CHECK(!gl_header_get_str(h, "OBJECT", s, sizeof s), "no value indicator: no value");
    CHECK(!gl_header_get_dbl(h, "OBJECT", &v), "no value indicator: no number");
    CHECK(!gl_header_get_dbl(h, "MISSING", &v), "long name card skipped");
    gl_header_remove(h, "MISSING");
    CHECK(gl_header_ncards(h) == 2, "cards kept: %d", gl_header_ncards(h));
    gl_header_free(h);
}

static void test_cube(void)
{
    gl_cube *c = NULL;
    CHECK(gl_cube_new(5, 4, 1, 3, &c) == GL_OK, "cube allocated");
    CHECK(c->naxis == 3 && gl_cube_size(c) == 60, "3-D cube shape");
    CHECK(gl_cube_plane(c, 0, 2) == c->data + 40, "plane offset");
    gl_cube_free(c);
    CHECK(gl_cube_new(0, 4, 1, 1, &c) != GL_OK && c == NULL, "empty cube refused");
    gl_cube_free(NULL);
    /* fault injection: the second allocation (the data) fails */
    gl_malloc_fail_after(2);
    CHECK(gl_cube_new(5, 4, 1, 1, &c) == GL_ERR_NOMEM && c == NULL, "allocation failure reported");
    gl_malloc_fail_after(0);
}

static int cmp_float(const void *a, const void *b)
{
    float x = *(const float *)a, y = *(const float *)b;
    return x < y ? -1 : x > y;
}

/* The float median (radix selection) against the definition: sort with qsort
 * (C library) and take the middle value or the mean of the two middle ones.
 * Sizes 1..401 odd and even, random values of both signs over many binades,
 * heavy duplicates, signed zeros. */
static void test_median_float(void)
{
    srand(7);
    int bad = 0;
    float *v = malloc(1000 * sizeof *v), *s = malloc(1000 * sizeof *s);
    for (int trial = 0; trial < 600; trial++) {
        long n = 1 + trial % 401;
        for (long i = 0; i < n; i++) {
            double u = rand() / (double)RAND_MAX - 0.5;
            switch (trial % 4) {
            case 0: v[i] = (float)u; break;
            case 1: v[i] = (float)(u * pow(10.0, rand() % 12 - 6)); break;
            case 2: v[i] = (float)(rand() % 5 - 2); break; /* duplicates */
            default: v[i] = (rand() % 3) ? 0.0f : -0.0f;   /* signed zeros */
            }
        }
        memcpy(s, v, (size_t)n * sizeof *s);
        qsort(s, (size_t)n, sizeof *s, cmp_float);
        float ref = n % 2 ? s[n / 2] : 0.5f * (s[n / 2 - 1] + s[n / 2]);
        float got = gl_stats_median_inplace_float(v, n);
        if (got != ref)
            bad++;
    }
    CHECK(bad == 0, "float median equals the sorted definition (%d of 600 differ)", bad);
    CHECK(isnan(gl_stats_median_inplace_float(v, 0)), "median of nothing is NaN");
    free(v);
    free(s);
}

int main(void)
{
    test_median_float();
    test_errors();
    test_header();
    test_header_malformed_cards();
    test_cube();
    CHECK_DONE();
}
