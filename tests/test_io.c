/*
 * test_io.c -- angle lists, all-or-nothing product writing, provenance
 * checksums, header round trips through FITS, the robust statistics, and
 * allocation failures on every read path (run under ASan they must leak
 * nothing). Files live in a fresh folder under /tmp, removed at the end.
 */
#include "gloam/gloam.h"
#include "check.h"

#include <dirent.h>
#include <fitsio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <unistd.h>

static char dir[256];

static const char *path_in(const char *name)
{
    static char buf[4][512];
    static int k;
    k = (k + 1) % 4;
    snprintf(buf[k], sizeof buf[k], "%s/%s", dir, name);
    return buf[k];
}

static void write_text(const char *path, const char *text)
{
    FILE *fp = fopen(path, "wb");
    fputs(text, fp);
    fclose(fp);
}

/* Number of entries in a folder, "." and ".." excluded. */
static int count_entries(const char *d)
{
    DIR *dp = opendir(d);
    int n = 0;
    if (!dp)
        return -1;
    for (struct dirent *e; (e = readdir(dp));)
        if (strcmp(e->d_name, ".") && strcmp(e->d_name, ".."))
            n++;
    closedir(dp);
    return n;
}

/* A 1-D (or any shape) float FITS image written with cfitsio directly. */
static void write_fits(const char *path, int naxis, long *naxes, const float *data)
{
    fitsfile *f = NULL;
    int status = 0;
    unlink(path);
    fits_create_diskfile(&f, path, &status);
    fits_create_img(f, FLOAT_IMG, naxis, naxes, &status);
    long n = 1;
    for (int i = 0; i < naxis; i++)
        n *= naxes[i];
    fits_write_img(f, TFLOAT, 1, n, (void *)data, &status);
    fits_close_file(f, &status);
    CHECK(status == 0, "cfitsio wrote %s (status %d)", path, status);
}

static void test_angles(void)
{
    double *a = NULL;
    long n = 0;
    const char *p = path_in("angles.txt");
    /* comments, blank lines, CRLF line ends, leading blanks, exponents */
    write_text(p, "# parallactic angles\r\n\r\n  -10.5\r\n1e1 # ten\r\n\n+20\r\n");
    CHECK(gl_angles_read(p, 0, &a, &n) == GL_OK, "%s", gl_error_message());
    CHECK(n == 3 && a && a[0] == -10.5 && a[1] == 10 && a[2] == 20, "values read (n=%ld)", n);
    gl_free(a);
    CHECK(gl_angles_read(p, 3, &a, &n) == GL_OK, "count equal to the frame count");
    gl_free(a);
    CHECK(gl_angles_read(p, 4, &a, &n) == GL_ERR_INPUT && a == NULL, "count mismatch refused");
    CHECK(strstr(gl_error_message(), "holds 3 angles but the cube has 4 frames") != NULL, "%s",
          gl_error_message());

    write_text(p, "1\n2\n# c\nthree\n4\n");
    CHECK(gl_angles_read(p, 0, &a, &n) == GL_ERR_INPUT && a == NULL, "bad line refused");
    CHECK(strstr(gl_error_message(), "line 4") && strstr(gl_error_message(), "'three'"),
          "message names line 4 and its text: %s", gl_error_message());
    write_text(p, "1\r\n2x\r\n");
    CHECK(gl_angles_read(p, 0, &a, &n) == GL_ERR_INPUT, "trailing junk refused");
    CHECK(strstr(gl_error_message(), "line 2: '2x'") != NULL, "no CR in the message: %s",
          gl_error_message());
    write_text(p, "1\nnan\n");
    CHECK(gl_angles_read(p, 0, &a, &n) == GL_ERR_INPUT, "NaN angle refused");
    write_text(p, "# nothing\n\n");
    CHECK(gl_angles_read(p, 0, &a, &n) == GL_ERR_INPUT, "empty list refused");
    CHECK(gl_angles_read(path_in("missing.txt"), 0, &a, &n) == GL_ERR_IO, "missing file");

    /* 1-D FITS image of angles */
    const char *pf = path_in("angles.fits");
    float v[4] = {-3.25f, -1.0f, 2.5f, 7.0f};
    long ax1[1] = {4};
    write_fits(pf, 1, ax1, v);
    CHECK(gl_angles_read(pf, 4, &a, &n) == GL_OK, "1-D FITS angles: %s", gl_error_message());
    CHECK(n == 4 && a && a[0] == -3.25 && a[3] == 7.0, "FITS angle values");
    gl_free(a);
    CHECK(gl_angles_read(pf, 5, &a, &n) == GL_ERR_INPUT, "FITS count mismatch");
    float img[6] = {0};
    long ax2[2] = {3, 2};
    write_fits(pf, 2, ax2, img);
    CHECK(gl_angles_read(pf, 0, &a, &n) == GL_ERR_INPUT, "2-D FITS is not an angle list");
    v[2] = NAN;
    write_fits(pf, 1, ax1, v);
    CHECK(gl_angles_read(pf, 0, &a, &n) == GL_ERR_INPUT && strstr(gl_error_message(), "angle 3"),
          "NaN in FITS angles named: %s", gl_error_message());
}

static void test_crc(void)
{
    /* The CRC-32 check value of "123456789" is 0xCBF43926 (the standard
     * check value of CRC-32/ISO-HDLC as used by zlib and PNG; the
     * "Catalogue of parametrised CRC algorithms", R. Williams 1993 / Cook). */
    const char *p = path_in("crc.txt");
    write_text(p, "123456789");
    unsigned long crc = 0;
    CHECK(gl_file_crc32(p, &crc) == GL_OK && crc == 0xCBF43926UL, "CRC-32: %08lx", crc);
    gl_provenance prov = {0};
    CHECK(gl_provenance_add_input(&prov, p) == GL_OK && prov.ninputs == 1 &&
              prov.crc32[0] == 0xCBF43926UL,
          "provenance input CRC");
    CHECK(gl_provenance_add_input(&prov, path_in("nope")) == GL_ERR_IO, "missing input");
}

static void test_outset(void)
{
    const char *sub = path_in("out");
    mkdir(sub, 0755);
    char dest[512], dest2[512];
    snprintf(dest, sizeof dest, "%s/a.txt", sub);
    snprintf(dest2, sizeof dest2, "%s/b.txt", sub);

    /* abort: temporary files vanish, nothing appears */
    gl_outset *s = NULL;
    const char *tmp = NULL, *tmp2 = NULL;
    CHECK(gl_outset_new(0, &s) == GL_OK, "new set");
    CHECK(gl_outset_add(s, dest, NULL, &tmp) == GL_OK, "%s", gl_error_message());
    CHECK(gl_outset_add(s, dest2, NULL, &tmp2) == GL_OK, "%s", gl_error_message());
    CHECK(gl_outset_add(s, dest, NULL, &tmp2) == GL_ERR_USAGE, "same output twice refused");
    write_text(tmp, "partial");
    CHECK(count_entries(sub) == 1, "one temporary file while writing");
    gl_outset_free(s);
    CHECK(count_entries(sub) == 0, "abort leaves nothing (%d entries)", count_entries(sub));

    /* commit of two products */
    gl_outset_new(0, &s);
    gl_outset_add(s, dest, NULL, &tmp);
    gl_outset_add(s, dest2, NULL, &tmp2);
    write_text(tmp, "one");
    CHECK(gl_outset_commit(s) == GL_ERR_INTERNAL, "commit refuses an unwritten product");
    write_text(tmp2, "two");
    CHECK(gl_outset_commit(s) == GL_OK, "commit: %s", gl_error_message());
    gl_outset_free(s);
    CHECK(count_entries(sub) == 2 && access(dest, F_OK) == 0 && access(dest2, F_OK) == 0,
          "both products in place, no temporaries");

    /* an existing product: refused without overwrite, replaced with it */
    gl_outset_new(0, &s);
    CHECK(gl_outset_add(s, dest, NULL, &tmp) == GL_ERR_EXISTS, "existing output refused");
    CHECK(strstr(gl_error_message(), "--overwrite") != NULL, "message names --overwrite");
    gl_outset_free(s);
    gl_outset_new(1, &s);
    CHECK(gl_outset_add(s, dest, NULL, &tmp) == GL_OK, "overwrite allowed");
    write_text(tmp, "new");
    CHECK(gl_outset_commit(s) == GL_OK, "overwrite commit");
    gl_outset_free(s);
    FILE *fp = fopen(dest, "r");
    char buf[16] = "";
    CHECK(fp && fgets(buf, sizeof buf, fp) && strcmp(buf, "new") == 0, "replaced content");
    if (fp)
        fclose(fp);

    /* an output that is an input, even overwriting */
    gl_provenance prov = {0};
    gl_provenance_add_input(&prov, dest);
    gl_outset_new(1, &s);
    CHECK(gl_outset_add(s, dest, &prov, &tmp) == GL_ERR_USAGE, "output naming an input refused");
    gl_outset_free(s);

    /* folders that do not exist or cannot be written */
    gl_outset_new(0, &s);
    char bad[600];
    snprintf(bad, sizeof bad, "%s/no/such/folder/x.fits", sub);
    CHECK(gl_outset_add(s, bad, NULL, &tmp) == GL_ERR_IO, "missing folder refused");
    CHECK(gl_outset_add(s, sub, NULL, &tmp) == GL_ERR_IO, "a folder as the output refused");
    if (geteuid() != 0) { /* root writes everywhere: only testable as a user */
        char ro[512], rof[600];
        snprintf(ro, sizeof ro, "%s/readonly", dir);
        mkdir(ro, 0555);
        snprintf(rof, sizeof rof, "%s/x.fits", ro);
        CHECK(gl_outset_add(s, rof, NULL, &tmp) == GL_ERR_IO, "unwritable folder refused");
        rmdir(ro);
    }
    gl_outset_free(s);
    unlink(dest);
    unlink(dest2);
    rmdir(sub);
}

/* Write a cube with carried cards, typed keys and history; read it back. */
static void test_header_roundtrip(void)
{
    gl_cube *c = NULL, *r = NULL;
    CHECK(gl_cube_new(7, 5, 1, 3, &c) == GL_OK, "cube");
    for (size_t i = 0; i < gl_cube_size(c); i++)
        c->data[i] = (float)i * 0.5f - 3.0f;
    c->data[4] = NAN;
    gl_header_add_card(c->header, "OBJECT  = 'HD 0000 (invented)' / target");
    gl_header_add_card(c->header, "EXPTIME =                 2.25 / s");
    gl_header_add_card(c->header, "GLINP02 = 'stale.fits'         / from an earlier product");
    gl_header_set_dbl(c->header, "GAINX", 1.75, "typed double");
    gl_header_set_int(c->header, "NCOADD", 12, NULL);
    gl_header_set_str(c->header, "OBSERVER", "It's me", "quote inside");
    gl_header_set_bool(c->header, "DEROT", 1, NULL);
    gl_header_add_history(c->header, "a first step");

    const char *p = path_in("hdr.fits");
    const char *in = path_in("crc.txt");
    gl_provenance prov = {.program = "gloam test", .command = "test_io header"};
    gl_provenance_add_input(&prov, in);
    unlink(p);
    CHECK(gl_fits_write_cube(p, c, &prov) == GL_OK, "%s", gl_error_message());
    CHECK(gl_fits_read_cube(p, 3, &r) == GL_OK, "%s", gl_error_message());
    if (r) {
        double v;
        char s[72];
        CHECK(r->nx == 7 && r->ny == 5 && r->nframe == 3 && r->naxis == 3 && r->bitpix == -32,
              "shape back");
        CHECK(memcmp(r->data + 5, c->data + 5, (gl_cube_size(c) - 5) * sizeof(float)) == 0 &&
                  isnan(r->data[4]),
              "pixels and NaN back");
        CHECK(gl_header_get_str(r->header, "OBJECT", s, sizeof s) &&
                  strcmp(s, "HD 0000 (invented)") == 0,
              "carried string: %s", s);
        CHECK(gl_header_get_dbl(r->header, "EXPTIME", &v) && v == 2.25, "carried number");
        CHECK(gl_header_get_dbl(r->header, "GAINX", &v) && v == 1.75, "typed double");
        CHECK(gl_header_get_dbl(r->header, "NCOADD", &v) && v == 12, "typed int");
        CHECK(gl_header_get_str(r->header, "OBSERVER", s, sizeof s) && strcmp(s, "It's me") == 0,
              "typed string with a quote: %s", s);
        CHECK(gl_header_get_str(r->header, "GLPROG", s, sizeof s) && strcmp(s, "gloam test") == 0,
              "GLPROG");
        CHECK(gl_header_get_str(r->header, "GLINP01", s, sizeof s) && strcmp(s, in) == 0,
              "GLINP01: %s", s);
        CHECK(gl_header_get_str(r->header, "GLCRC01", s, sizeof s) && strcmp(s, "cbf43926") == 0,
              "GLCRC01: %s", s);
        CHECK(!gl_header_get_str(r->header, "GLINP02", s, sizeof s),
              "stale provenance of an earlier product not carried: %s", s);
        int hist = 0, cmd = 0;
        for (int i = 0; i < gl_header_ncards(r->header); i++) {
            const char *card = gl_header_card(r->header, i);
            hist += strncmp(card, "HISTORY a first step", 20) == 0;
            cmd += strncmp(card, "HISTORY test_io header", 22) == 0;
        }
        CHECK(hist == 1 && cmd == 1, "HISTORY lines (%d, %d)", hist, cmd);
    }
    gl_cube_free(r);
    r = NULL;
    /* a 2-D image is refused where a cube is needed and accepted otherwise */
    c->nframe = 1;
    c->naxis = 2;
    unlink(p);
    gl_fits_write_cube(p, c, NULL);
    CHECK(gl_fits_read_cube(p, 3, &r) == GL_ERR_INPUT && r == NULL, "2-D refused for a cube");
    CHECK(gl_fits_read_cube(p, 2, &r) == GL_OK && r->naxis == 2, "2-D accepted");
    gl_cube_free(r);
    gl_cube_free(c);
    unlink(p);
}

/* Robust statistics against values worked out by hand (median of 1..9 is 5;
 * absolute deviations 4,3,2,1,0,1,2,3,4 have median 2; times 1.482602218505602
 * = 1/Phi^-1(3/4), scipy.stats.median_abs_deviation scale="normal"). */
static void test_stats(void)
{
    float x[11] = {9, 1, 8, 2, NAN, 7, 3, 6, 4, 5, INFINITY};
    double work[11], med, sig;
    CHECK(gl_stats_robust_float(x, 11, work, &med, &sig) == 9, "finite count");
    CHECK_CLOSE(med, 5.0, 0, "median of 1..9");
    CHECK_CLOSE(sig, 2.0 * 1.482602218505602, 1e-15, "scaled MAD of 1..9");
    double y[4] = {1, 2, 3, 10};
    CHECK(gl_stats_robust(y, 4, work, &med, &sig) == 4, "count");
    CHECK_CLOSE(med, 2.5, 0, "even count: mean of the middle two");
    CHECK_CLOSE(sig, 1.0 * 1.482602218505602, 1e-15, "deviations 1.5,.5,.5,7.5 -> median 1");
    CHECK(gl_stats_robust(y, 0, work, &med, &sig) == 0 && isnan(med) && isnan(sig), "empty: NaN");
}

/* Every allocation on the read paths fails in turn: each failure must come
 * back as GL_ERR_NOMEM with nothing returned (ASan reports any leak). */
static void test_fault_injection(void)
{
    gl_cube *c = NULL;
    CHECK(gl_cube_new(6, 4, 2, 3, &c) == GL_OK, "cube");
    for (int i = 0; i < 8; i++)
        gl_header_add_card(c->header, "COMMENT filler card to make the header grow");
    const char *p = path_in("fault.fits");
    unlink(p);
    CHECK(gl_fits_write_cube(p, c, NULL) == GL_OK, "fixture");
    gl_cube_free(c);
    const char *pa = path_in("fault.txt");
    write_text(pa, "1\n2\n3\n");

    int ok = 0, fails = 0;
    for (long k = 1; k < 200 && !ok; k++) {
        gl_cube *r = NULL;
        gl_malloc_fail_after(k);
        gl_status st = gl_fits_read_cube(p, 3, &r);
        gl_malloc_fail_after(0);
        if (st == GL_OK) {
            ok = 1;
            CHECK(r && r->nchan == 2 && r->nframe == 3, "read after %ld failures", k - 1);
        } else {
            fails++;
            CHECK(st == GL_ERR_NOMEM && r == NULL, "allocation %ld: status %d (%s)", k, st,
                  gl_error_message());
        }
        gl_cube_free(r);
    }
    CHECK(ok && fails >= 3, "cube read: %d failure paths exercised", fails);

    ok = fails = 0;
    for (long k = 1; k < 50 && !ok; k++) {
        double *a = NULL;
        long n = 0;
        gl_malloc_fail_after(k);
        gl_status st = gl_angles_read(pa, 3, &a, &n);
        gl_malloc_fail_after(0);
        if (st == GL_OK)
            ok = 1;
        else {
            fails++;
            CHECK(st == GL_ERR_NOMEM && a == NULL, "angles allocation %ld: %s", k,
                  gl_error_message());
        }
        gl_free(a);
    }
    CHECK(ok && fails >= 1, "angle read: %d failure paths", fails);

    ok = fails = 0;
    gl_inspect_params ip;
    gl_inspect_params_init(&ip);
    for (long k = 1; k < 200 && !ok; k++) {
        gl_inspect_report *rep = NULL;
        gl_malloc_fail_after(k);
        gl_status st = gl_inspect_report_new(p, pa, &ip, &rep);
        gl_malloc_fail_after(0);
        if (st == GL_OK)
            ok = 1;
        else {
            fails++;
            CHECK(st == GL_ERR_NOMEM && rep == NULL, "inspect allocation %ld: %s", k,
                  gl_error_message());
        }
        gl_inspect_report_free(rep);
    }
    CHECK(ok && fails >= 3, "inspect: %d failure paths", fails);
    unlink(p);
    unlink(pa);
}

/* Rotation of an unwrapped sequence crossing +-180 (a target transiting on
 * the pole side of zenith): 170 -> 180 -> -170 is 20 degrees, not 340. */
static void test_rotation(void)
{
    double a[4] = {170, 178, -178, -170};
    CHECK_CLOSE(gl_inspect_rotation_total(a, 4), 20.0, 1e-12, "wrap at 180");
    double b[3] = {-10, 30, 25};
    CHECK_CLOSE(gl_inspect_rotation_total(b, 3), 40.0, 1e-12, "range, not last - first");
    CHECK_CLOSE(gl_inspect_rotation_total(b, 1), 0.0, 0, "one frame: no rotation");
}

/* A cube whose WCS gives a CD matrix for the celestial axes only, with a
 * third (frame) axis named by CTYPE3: wcslib leaves CD3_3 at 0, so the
 * matrix is singular unless the unit diagonal is filled in. The pixel scale
 * must still be found (12.25 mas: CD = 3.4027...e-6 deg). */
static void test_obsinfo_cube_wcs(void)
{
    gl_header *h = gl_header_new();
    const double s = 12.25 / 3600e3;
    gl_header_add_card(h, "CTYPE1  = 'RA---TAN'");
    gl_header_add_card(h, "CTYPE2  = 'DEC--TAN'");
    gl_header_add_card(h, "CTYPE3  = 'FRAME   '");
    gl_header_add_card(h, "CRPIX1  = 32.0");
    gl_header_add_card(h, "CRPIX2  = 32.0");
    gl_header_add_card(h, "CRVAL1  = 150.0");
    gl_header_add_card(h, "CRVAL2  = -30.0");
    char card[81];
    snprintf(card, sizeof card, "CD1_1   = %.15g", -s);
    gl_header_add_card(h, card);
    snprintf(card, sizeof card, "CD2_2   = %.15g", s);
    gl_header_add_card(h, card);
    gl_obsinfo info;
    gl_obsinfo_from_header(h, &info);
    CHECK(info.has_wcs, "celestial WCS of a cube with a 2x2 CD matrix found");
    CHECK_CLOSE(info.pixscale_mas, 12.25, 1e-9, "pixel scale of a cube's WCS");
    gl_header_free(h);
}

/* An image with more axes than the reader's axis buffer (9 > 8) is refused
 * with a message, not read past the buffer (ASan caught the old loop). */
static void test_many_axes(void)
{
    long naxes[9] = {4, 4, 1, 1, 1, 1, 1, 1, 1};
    float data[16] = {0};
    const char *p = path_in("axes9.fits");
    write_fits(p, 9, naxes, data);
    gl_cube *c = NULL;
    gl_status st = gl_fits_read_cube(p, 2, &c);
    CHECK(st == GL_ERR_INPUT && !c, "9-axis image refused (status %d)", (int)st);
    CHECK(strstr(gl_error_message(), "axes9.fits") != NULL, "message names the file: %s",
          gl_error_message());
    unlink(p);
}

/* CSV tables: what gl_table_write_csv writes, gl_csv_read reads back (NaN
 * as an empty field); a row with another field count is refused with its
 * line number. */
static void test_csv_roundtrip(void)
{
    const double a[] = {1, 2.5, NAN}, b[] = {-3e-7, 0.1, 42};
    const char *names[] = {"sep_px", "contrast"};
    const double *cols[] = {a, b};
    gl_table t = {2, 3, names, NULL, cols, NULL};
    const char *path = path_in("t.csv");
    CHECK(gl_table_write_csv(path, &t) == GL_OK, "csv written");
    gl_csv *r = NULL;
    CHECK(gl_csv_read(path, &r) == GL_OK && r, "csv read: %s", gl_error_message());
    if (r) {
        CHECK(r->ncols == 2 && r->nrows == 3, "shape %d x %ld", r->ncols, r->nrows);
        CHECK(gl_csv_column(r, "contrast") == 1 && gl_csv_column(r, "x") == -1, "columns");
        CHECK(r->data[2] == 2.5 && r->data[3] == 0.1 && isnan(r->data[4]) && r->data[5] == 42 &&
                  r->data[1] == -3e-7,
              "values read back");
    }
    gl_csv_free(r);
    gl_csv_free(NULL);
    FILE *fp = fopen(path, "w");
    fputs("a,b\n1,2\n3\n", fp);
    fclose(fp);
    r = NULL;
    CHECK(gl_csv_read(path, &r) == GL_ERR_INPUT && !r && strstr(gl_error_message(), "line 3"),
          "short row refused: %s", gl_error_message());
}

/* A CSV product brings its ECSV twin (NAME.ecsv): both committed together,
 * an existing twin refused like the CSV itself, none left after an abort,
 * and a stale twin removed when the CSV is replaced without one. */
static void test_outset_twin(void)
{
    const char *sub = path_in("twin");
    mkdir(sub, 0755);
    char dest[512], twin[512];
    snprintf(dest, sizeof dest, "%s/t.csv", sub);
    snprintf(twin, sizeof twin, "%s/t.ecsv", sub);
    const double a[] = {1, 2};
    const char *names[] = {"sep_px"}, *units[] = {"pix"};
    const double *cols[] = {a};
    gl_table t = {1, 2, names, units, cols, NULL};

    gl_outset *s = NULL;
    const char *tmp = NULL;
    gl_outset_new(0, &s);
    CHECK(gl_outset_add(s, dest, NULL, &tmp) == GL_OK, "%s", gl_error_message());
    CHECK(gl_table_write_csv(tmp, &t) == GL_OK, "table written");
    CHECK(count_entries(sub) == 2, "CSV and twin under temporary names");
    gl_outset_free(s);
    CHECK(count_entries(sub) == 0, "abort leaves neither (%d entries)", count_entries(sub));

    gl_outset_new(0, &s);
    gl_outset_add(s, dest, NULL, &tmp);
    gl_table_write_csv(tmp, &t);
    CHECK(gl_outset_commit(s) == GL_OK, "commit: %s", gl_error_message());
    gl_outset_free(s);
    CHECK(access(dest, F_OK) == 0 && access(twin, F_OK) == 0 && count_entries(sub) == 2,
          "CSV and ECSV in place");
    FILE *fp = fopen(twin, "r");
    char line[128] = "";
    CHECK(fp && fgets(line, sizeof line, fp) && strcmp(line, "# %ECSV 1.0\n") == 0,
          "twin starts with the ECSV signature: %s", line);
    if (fp)
        fclose(fp);

    unlink(dest); /* the twin alone is still refused without --overwrite */
    gl_outset_new(0, &s);
    CHECK(gl_outset_add(s, dest, NULL, &tmp) == GL_ERR_EXISTS &&
              strstr(gl_error_message(), "t.ecsv"),
          "existing twin named: %s", gl_error_message());
    gl_outset_free(s);

    gl_outset_new(1, &s); /* replaced by a CSV written without a twin */
    gl_outset_add(s, dest, NULL, &tmp);
    write_text(tmp, "sep_px\n3\n");
    CHECK(gl_outset_commit(s) == GL_OK, "commit: %s", gl_error_message());
    gl_outset_free(s);
    CHECK(access(dest, F_OK) == 0 && access(twin, F_OK) != 0, "no stale twin beside the CSV");
    unlink(dest);
    rmdir(sub);
}

/* The angle table of a product: written after the image, read back the
 * same; radian-looking and constant lists (issue 10). */
static void test_angle_table(void)
{
    const char *p = path_in("with_angles.fits");
    gl_cube *c = NULL;
    CHECK(gl_cube_new(8, 8, 1, 3, &c) == GL_OK, "cube");
    c->naxis = 3;
    double in[3] = {-10.25, 0.5, 12.75}, *a = NULL;
    long n = 0;
    CHECK(gl_fits_write_cube(p, c, NULL) == GL_OK, "%s", gl_error_message());
    CHECK(gl_angles_table_read(p, 3, &a, &n) == GL_OK && a == NULL, "no table yet: not an error");
    CHECK(gl_angles_table_append(p, in, 3) == GL_OK, "%s", gl_error_message());
    CHECK(gl_angles_table_read(p, 3, &a, &n) == GL_OK && n == 3, "%s", gl_error_message());
    for (int i = 0; a && i < 3; i++)
        CHECK(a[i] == in[i], "angle %d read back", i);
    gl_free(a);
    CHECK(gl_angles_table_read(p, 4, &a, &n) == GL_ERR_INPUT && a == NULL, "wrong count");
    gl_cube *back = NULL;
    CHECK(gl_fits_read_cube(p, 3, &back) == GL_OK && back->nframe == 3, "image still read");
    gl_cube_free(back);
    gl_cube_free(c);
    unlink(p);

    double rad[4] = {-0.31, -0.12, 0.07, 0.26}, deg[4] = {-17.8, -6.9, 4.0, 14.9};
    double whole[4] = {0, 1, 2, 3}, flat[3] = {5, 5, 365};
    CHECK(gl_angles_look_like_radians(rad, 4), "radians recognised");
    CHECK(!gl_angles_look_like_radians(deg, 4), "degrees are degrees");
    CHECK(!gl_angles_look_like_radians(whole, 4), "whole degrees are degrees");
    CHECK(gl_angles_constant(flat, 3) && !gl_angles_constant(rad, 4), "constant modulo 360");
}

int main(void)
{
    snprintf(dir, sizeof dir, "/tmp/gloam-test-io-XXXXXX");
    if (!mkdtemp(dir)) {
        perror("mkdtemp");
        return 2;
    }
    test_angles();
    test_crc();
    test_outset();
    test_header_roundtrip();
    test_stats();
    test_fault_injection();
    test_rotation();
    test_obsinfo_cube_wcs();
    test_many_axes();
    test_csv_roundtrip();
    test_outset_twin();
    test_angle_table();
    /* remove what is left */
    DIR *dp = opendir(dir);
    for (struct dirent *e; dp && (e = readdir(dp));)
        if (strcmp(e->d_name, ".") && strcmp(e->d_name, ".."))
            unlink(path_in(e->d_name));
    if (dp)
        closedir(dp);
    rmdir(dir);
    CHECK_DONE();
}
