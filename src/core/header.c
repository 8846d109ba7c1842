/*
 * header.c -- FITS header material carried with a cube: the input's
 * non-structural cards verbatim, plus typed keywords and HISTORY lines that a
 * product adds. Cards are parsed with cfitsio's own card parser; nothing here
 * formats FITS values by hand (the writer passes typed values to cfitsio).
 */
#include "core/internal.h"

#include <ctype.h>
#include <fitsio.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

static const char *const structural[] = {
    "SIMPLE",  "BITPIX", "NAXIS",    "EXTEND", "BSCALE", "BZERO",   "BLANK",  "CHECKSUM",
    "DATASUM", "END",    "XTENSION", "PCOUNT", "GCOUNT", "TFIELDS", "ZIMAGE", NULL};

int gl_header_is_structural(const char *key)
{
    for (int i = 0; structural[i]; i++)
        if (strcmp(key, structural[i]) == 0)
            return 1;
    /* NAXISn */
    if (strncmp(key, "NAXIS", 5) == 0)
        return 1;
    return 0;
}

gl_header *gl_header_new(void)
{
    return gl_calloc(1, sizeof(gl_header));
}

void gl_header_free(gl_header *h)
{
    if (!h)
        return;
    gl_free(h->cards);
    gl_free(h->keys);
    gl_free(h->history);
    gl_free(h);
}

/* Grows an array of elements of `elem` bytes to hold at least `need`. */
static int grow(void **arr, int *cap, int need, size_t elem)
{
    if (need <= *cap)
        return 0;
    int ncap = *cap ? *cap * 2 : 32;
    while (ncap < need)
        ncap *= 2;
    void *p = gl_malloc((size_t)ncap * elem);
    if (!p)
        return -1;
    if (*arr)
        memcpy(p, *arr, (size_t)*cap * elem);
    gl_free(*arr);
    *arr = p;
    *cap = ncap;
    return 0;
}

gl_header *gl_header_copy(const gl_header *h)
{
    gl_header *c = gl_header_new();
    if (!c || !h)
        return c;
    if (grow((void **)&c->cards, &c->capcards, h->ncards, sizeof *c->cards) ||
        grow((void **)&c->keys, &c->capkeys, h->nkeys, sizeof *c->keys) ||
        grow((void **)&c->history, &c->caphistory, h->nhistory, sizeof *c->history)) {
        gl_header_free(c);
        return NULL;
    }
    if (h->ncards)
        memcpy(c->cards, h->cards, (size_t)h->ncards * sizeof *c->cards);
    if (h->nkeys)
        memcpy(c->keys, h->keys, (size_t)h->nkeys * sizeof *c->keys);
    if (h->nhistory)
        memcpy(c->history, h->history, (size_t)h->nhistory * sizeof *c->history);
    c->ncards = h->ncards;
    c->nkeys = h->nkeys;
    c->nhistory = h->nhistory;
    return c;
}

/* Keyword name of a card (empty for blank/commentary-without-name cards).
 * cfitsio writes up to FLEN_KEYWORD bytes (a card without blanks). */
static void card_name(const char *card, char name[FLEN_KEYWORD])
{
    int len = 0, status = 0;
    name[0] = '\0';
    char tmp[81];
    snprintf(tmp, sizeof tmp, "%s", card);
    if (fits_get_keyname(tmp, name, &len, &status))
        name[0] = '\0';
}

gl_status gl_header_add_card(gl_header *h, const char *card)
{
    if (grow((void **)&h->cards, &h->capcards, h->ncards + 1, sizeof *h->cards))
        return gl_error_nomem("header card");
    char *dst = h->cards[h->ncards++];
    snprintf(dst, 81, "%-80.80s", card);
    return GL_OK;
}

static void remove_cards(gl_header *h, const char *key)
{
    int j = 0;
    char name[FLEN_KEYWORD];
    for (int i = 0; i < h->ncards; i++) {
        card_name(h->cards[i], name);
        if (strcmp(name, key) != 0) {
            if (i != j)
                memcpy(h->cards[j], h->cards[i], sizeof h->cards[i]);
            j++;
        }
    }
    h->ncards = j;
}

static gl_key *key_slot(gl_header *h, const char *key)
{
    for (int i = 0; i < h->nkeys; i++)
        if (strcmp(h->keys[i].name, key) == 0)
            return &h->keys[i];
    if (grow((void **)&h->keys, &h->capkeys, h->nkeys + 1, sizeof *h->keys))
        return NULL;
    gl_key *k = &h->keys[h->nkeys++];
    memset(k, 0, sizeof *k);
    snprintf(k->name, sizeof k->name, "%s", key);
    return k;
}

static gl_status set_key(gl_header *h, const char *key, gl_key_type t, const char *s, double d,
                         long i, const char *comment)
{
    if (!key || !*key || strlen(key) > 68)
        return gl_error_set(GL_ERR_INTERNAL, "bad header keyword name");
    remove_cards(h, key);
    gl_key *k = key_slot(h, key);
    if (!k)
        return gl_error_nomem("header keyword");
    k->type = t;
    snprintf(k->sval, sizeof k->sval, "%s", s ? s : "");
    k->dval = d;
    k->ival = i;
    snprintf(k->comment, sizeof k->comment, "%s", comment ? comment : "");
    return GL_OK;
}

gl_status gl_header_set_str(gl_header *h, const char *key, const char *value, const char *comment)
{
    return set_key(h, key, GL_KEY_STR, value, 0, 0, comment);
}

gl_status gl_header_set_dbl(gl_header *h, const char *key, double value, const char *comment)
{
    if (!isfinite(value))
        return gl_error_set(GL_ERR_INTERNAL, "keyword %s: value is not finite", key);
    return set_key(h, key, GL_KEY_DBL, NULL, value, 0, comment);
}

gl_status gl_header_set_int(gl_header *h, const char *key, long value, const char *comment)
{
    return set_key(h, key, GL_KEY_INT, NULL, 0, value, comment);
}

gl_status gl_header_set_bool(gl_header *h, const char *key, int value, const char *comment)
{
    return set_key(h, key, GL_KEY_BOOL, NULL, 0, value != 0, comment);
}

gl_status gl_header_add_history(gl_header *h, const char *text)
{
    size_t len = strlen(text), pos = 0;
    do {
        if (grow((void **)&h->history, &h->caphistory, h->nhistory + 1, sizeof *h->history))
            return gl_error_nomem("header history");
        size_t n = GL_MIN(len - pos, (size_t)70);
        memcpy(h->history[h->nhistory], text + pos, n);
        h->history[h->nhistory][n] = '\0';
        h->nhistory++;
        pos += n;
    } while (pos < len);
    return GL_OK;
}

void gl_header_remove(gl_header *h, const char *key)
{
    remove_cards(h, key);
    int j = 0;
    for (int i = 0; i < h->nkeys; i++) {
        if (strcmp(h->keys[i].name, key) != 0)
            h->keys[j++] = h->keys[i];
    }
    h->nkeys = j;
}

/* Finds the value string of a carried card named key; 1 when found. */
static int card_value(const gl_header *h, const char *key, char value[FLEN_VALUE])
{
    /* a card without "= " comes back whole as a 72-character comment */
    char name[FLEN_KEYWORD], comm[FLEN_COMMENT];
    for (int i = 0; i < h->ncards; i++) {
        card_name(h->cards[i], name);
        if (strcmp(name, key) != 0)
            continue;
        int status = 0;
        char tmp[81];
        memcpy(tmp, h->cards[i], 81);
        if (fits_parse_value(tmp, value, comm, &status) || !value[0])
            return 0;
        return 1;
    }
    return 0;
}

int gl_header_get_dbl(const gl_header *h, const char *key, double *value)
{
    if (!h)
        return 0;
    for (int i = 0; i < h->nkeys; i++) {
        const gl_key *k = &h->keys[i];
        if (strcmp(k->name, key) != 0)
            continue;
        switch (k->type) {
        case GL_KEY_DBL: *value = k->dval; return 1;
        case GL_KEY_INT:
        case GL_KEY_BOOL: *value = (double)k->ival; return 1;
        case GL_KEY_STR: break;
        }
        return 0;
    }
    char v[FLEN_VALUE];
    if (!card_value(h, key, v))
        return 0;
    if (v[0] == '\'')
        return 0;
    for (char *p = v; *p; p++)
        if (*p == 'D' || *p == 'd')
            *p = 'E';
    char *end;
    double d = strtod(v, &end);
    while (*end && isspace((unsigned char)*end))
        end++;
    if (end == v || *end)
        return 0;
    *value = d;
    return 1;
}

int gl_header_get_str(const gl_header *h, const char *key, char *value, size_t size)
{
    if (!h || size == 0)
        return 0;
    for (int i = 0; i < h->nkeys; i++) {
        if (strcmp(h->keys[i].name, key) == 0 && h->keys[i].type == GL_KEY_STR) {
            snprintf(value, size, "%s", h->keys[i].sval);
            return 1;
        }
    }
    char v[FLEN_VALUE];
    if (!card_value(h, key, v))
        return 0;
    if (v[0] != '\'') { /* a number or logical given where a string was expected */
        snprintf(value, size, "%s", v);
        return 1;
    }
    /* strip quotes, undo doubled quotes, drop trailing blanks */
    size_t o = 0;
    for (size_t i = 1; v[i] && o + 1 < size; i++) {
        if (v[i] == '\'') {
            if (v[i + 1] == '\'') {
                value[o++] = '\'';
                i++;
                continue;
            }
            break;
        }
        value[o++] = v[i];
    }
    while (o > 0 && value[o - 1] == ' ')
        o--;
    value[o] = '\0';
    return 1;
}

int gl_header_ncards(const gl_header *h)
{
    return h ? h->ncards : 0;
}

const char *gl_header_card(const gl_header *h, int i)
{
    return (h && i >= 0 && i < h->ncards) ? h->cards[i] : NULL;
}
