/* NumPy .npy files: the magic, version and header dictionary, parsed as a Python literal. */
/*
 * The header is a Python literal dictionary (see io_npy.c for the format). It is parsed, not
 * evaluated: a small recursive-descent reader of the Python literal syntax that allows any key
 * order, any whitespace, a trailing comma, single or double quotes and Python 2's "L" suffix on
 * integers, and rejects anything else with the byte offset of the fault. A version 3.0 header
 * must be well-formed UTF-8 (RFC 3629); versions 1.0 and 2.0 are latin-1, where every byte is
 * valid.
 */
#include <collshift/io.h>

#include "io_npy_impl.h"

#include <errno.h>
#include <stdarg.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/types.h>

#define NPY_MAX_HEADER ((size_t)1 << 20)   /* larger headers are refused as implausible */

const unsigned char io_npy_magic[6] = {0x93, 'N', 'U', 'M', 'P', 'Y'};

/* ---------------------------------------------------------------- header parser */

typedef struct hparse {
    const unsigned char *s;   /* header text */
    size_t n, i;              /* length, cursor */
    long long base;           /* file offset of s[0] */
    const char *path;
    cs_error *err;
} hparse;

static int hp_fail(hparse *p, size_t at, int code, const char *fmt, ...)
#if defined(__GNUC__)
    __attribute__((format(printf, 4, 5)))
#endif
    ;

static int hp_fail(hparse *p, size_t at, int code, const char *fmt, ...)
{
    char msg[CS_ERROR_MSG_MAX - 32];
    va_list ap;
    va_start(ap, fmt);
    vsnprintf(msg, sizeof msg, fmt, ap);
    va_end(ap);
    return cs_error_set(p->err, code, p->path, -1, p->base + (long long)at, "npy header: %s", msg);
}

static int hp_is_space(unsigned char c)
{
    return c == ' ' || c == '\t' || c == '\n' || c == '\r' || c == '\f' || c == '\v';
}

static void hp_ws(hparse *p)
{
    while (p->i < p->n && hp_is_space(p->s[p->i]))
        p->i++;
}

static int hp_peek(const hparse *p)
{
    return p->i < p->n ? p->s[p->i] : -1;
}

/* Describe the byte at the cursor for a message. */
static const char *hp_what(const hparse *p, char *buf, size_t n)
{
    int c = hp_peek(p);
    if (c < 0)
        snprintf(buf, n, "the end of the header");
    else if (c >= 0x20 && c < 0x7f)
        snprintf(buf, n, "'%c'", c);
    else
        snprintf(buf, n, "byte 0x%02x", (unsigned)c);
    return buf;
}

/* A quoted string at the cursor: sets [*b, *e) to its contents and moves past it. */
static int hp_string(hparse *p, size_t *b, size_t *e)
{
    size_t start = p->i;
    unsigned char q = p->s[p->i++];
    *b = p->i;
    while (p->i < p->n && p->s[p->i] != q) {
        if (p->s[p->i] == '\n')
            break;
        if (p->s[p->i] == '\\')
            p->i++;
        p->i++;
    }
    if (p->i >= p->n || p->s[p->i] != q)
        return hp_fail(p, start, CS_EFORMAT, "unterminated string");
    *e = p->i++;
    return CS_OK;
}

static int hp_is_word(unsigned char c)
{
    return (c >= 'A' && c <= 'Z') || (c >= 'a' && c <= 'z') || (c >= '0' && c <= '9') ||
           c == '_' || c == '.' || c == '+' || c == '-';
}

/* Skip any Python literal (string, word or number, bracketed structure). */
static int hp_skip(hparse *p, int depth)
{
    char what[32];
    if (depth > 32)
        return hp_fail(p, p->i, CS_EFORMAT, "nesting too deep");
    int c = hp_peek(p);
    if (c == '\'' || c == '"') {
        size_t b = 0, e = 0;
        return hp_string(p, &b, &e);
    }
    if (c == '(' || c == '[' || c == '{') {
        int close = c == '(' ? ')' : c == '[' ? ']' : '}';
        size_t start = p->i++;
        for (;;) {
            hp_ws(p);
            int d = hp_peek(p);
            if (d == close) {
                p->i++;
                return CS_OK;
            }
            if (d < 0)
                return hp_fail(p, start, CS_EFORMAT, "'%c' is never closed", c);
            if (d == ',' || d == ':') {
                p->i++;
                continue;
            }
            int rc = hp_skip(p, depth + 1);
            if (rc != CS_OK)
                return rc;
        }
    }
    size_t start = p->i;
    while (p->i < p->n && hp_is_word(p->s[p->i]))
        p->i++;
    if (p->i == start)
        return hp_fail(p, start, CS_EFORMAT, "expected a value, found %s",
                       hp_what(p, what, sizeof what));
    return CS_OK;
}

static int span_is(const hparse *p, size_t b, size_t e, const char *word)
{
    size_t n = strlen(word);
    return e - b == n && memcmp(p->s + b, word, n) == 0;
}

/* Copy header text [b, e) into dst (size n), shortened with "..." when too long. */
static void span_copy(const hparse *p, size_t b, size_t e, char *dst, size_t n)
{
    size_t len = e - b;
    if (len < n) {
        memcpy(dst, p->s + b, len);
        dst[len] = '\0';
    } else {
        memcpy(dst, p->s + b, n - 4);
        memcpy(dst + n - 4, "...", 4);
    }
}

static int hp_descr(hparse *p, npy_header *h)
{
    int c = hp_peek(p);
    h->descr_off = p->base + (long long)p->i;
    size_t b = p->i, e = 0;
    if (c == '\'' || c == '"') {
        int rc = hp_string(p, &b, &e);
        if (rc != CS_OK)
            return rc;
        span_copy(p, b, e, h->descr, sizeof h->descr);
        h->descr_is_string = 1;
        return CS_OK;
    }
    if (c == '[') { /* a structured dtype: kept as text for the message */
        int rc = hp_skip(p, 0);
        if (rc != CS_OK)
            return rc;
        span_copy(p, b, p->i, h->descr, sizeof h->descr);
        h->descr_is_string = 0;
        return CS_OK;
    }
    char what[32];
    return hp_fail(p, p->i, CS_EFORMAT, "'descr' must be a quoted dtype string, found %s",
                   hp_what(p, what, sizeof what));
}

static int hp_bool(hparse *p, int *v)
{
    size_t b = p->i;
    while (p->i < p->n && hp_is_word(p->s[p->i]))
        p->i++;
    if (span_is(p, b, p->i, "True"))
        *v = 1;
    else if (span_is(p, b, p->i, "False"))
        *v = 0;
    else {
        char word[32];
        if (p->i == b)
            hp_what(p, word, sizeof word);
        else
            span_copy(p, b, p->i, word, sizeof word);
        return hp_fail(p, b, CS_EFORMAT, "'fortran_order' must be True or False, found %s", word);
    }
    return CS_OK;
}

/* A non-negative integer with an optional Python 2 'L' suffix. */
static int hp_uint(hparse *p, uint64_t *v)
{
    char what[32];
    size_t b = p->i;
    if (hp_peek(p) == '-')
        return hp_fail(p, b, CS_EFORMAT, "negative dimension in 'shape'");
    uint64_t x = 0;
    while (p->i < p->n && p->s[p->i] >= '0' && p->s[p->i] <= '9') {
        unsigned d = (unsigned)(p->s[p->i] - '0');
        if (x > (UINT64_MAX - d) / 10)
            return hp_fail(p, b, CS_ERANGE, "dimension in 'shape' is too large");
        x = x * 10 + d;
        p->i++;
    }
    if (p->i == b)
        return hp_fail(p, b, CS_EFORMAT, "expected an integer dimension in 'shape', found %s",
                       hp_what(p, what, sizeof what));
    if (hp_peek(p) == 'L' || hp_peek(p) == 'l')
        p->i++;
    if (p->i < p->n && hp_is_word(p->s[p->i]))
        return hp_fail(p, p->i, CS_EFORMAT, "dimensions in 'shape' must be whole numbers, found %s",
                       hp_what(p, what, sizeof what));
    *v = x;
    return CS_OK;
}

static int hp_shape(hparse *p, npy_header *h)
{
    char what[32];
    h->shape_off = p->base + (long long)p->i;
    if (hp_peek(p) != '(')
        return hp_fail(p, p->i, CS_EFORMAT, "'shape' must be a tuple such as (1024,), found %s",
                       hp_what(p, what, sizeof what));
    size_t open = p->i++;
    size_t commas = 0;
    h->ndim = 0;
    hp_ws(p);
    if (hp_peek(p) == ')') {
        p->i++;
        return CS_OK;
    }
    for (;;) {
        if (h->ndim == NPY_MAX_DIMS)
            return hp_fail(p, p->i, CS_EFORMAT, "more than %d dimensions", NPY_MAX_DIMS);
        int rc = hp_uint(p, &h->shape[h->ndim]);
        if (rc != CS_OK)
            return rc;
        h->ndim++;
        hp_ws(p);
        if (hp_peek(p) == ',') {
            commas++;
            p->i++;
            hp_ws(p);
            if (hp_peek(p) == ')') {
                p->i++;
                return CS_OK;
            }
            continue;
        }
        if (hp_peek(p) == ')') {
            if (h->ndim == 1 && commas == 0)
                return hp_fail(p, open, CS_EFORMAT,
                               "'shape' (%llu) is a number, not a tuple: a 1-D shape is "
                               "written (%llu,)",
                               (unsigned long long)h->shape[0], (unsigned long long)h->shape[0]);
            p->i++;
            return CS_OK;
        }
        return hp_fail(p, p->i, CS_EFORMAT, "expected ',' or ')' in 'shape', found %s",
                       hp_what(p, what, sizeof what));
    }
}

/* Parse the whole header dictionary. */
static int hp_dict(hparse *p, npy_header *h)
{
    char what[32];
    int seen[3] = {0, 0, 0};
    static const char *const keys[3] = {"descr", "fortran_order", "shape"};
    hp_ws(p);
    if (hp_peek(p) != '{')
        return hp_fail(p, p->i, CS_EFORMAT, "expected '{' to open the dictionary, found %s",
                       hp_what(p, what, sizeof what));
    p->i++;
    for (;;) {
        hp_ws(p);
        int c = hp_peek(p);
        if (c == '}')
            break;
        if (c != '\'' && c != '"')
            return hp_fail(p, p->i, CS_EFORMAT, "expected a quoted key or '}', found %s",
                           hp_what(p, what, sizeof what));
        size_t kb = 0, ke = 0, kat = p->i;
        int rc = hp_string(p, &kb, &ke);
        if (rc != CS_OK)
            return rc;
        int k = -1;
        for (int j = 0; j < 3; j++)
            if (span_is(p, kb, ke, keys[j]))
                k = j;
        if (k < 0) {
            char key[48];
            span_copy(p, kb, ke, key, sizeof key);
            return hp_fail(p, kat, CS_EFORMAT,
                           "unexpected key '%s': a .npy header has exactly 'descr', "
                           "'fortran_order' and 'shape'", key);
        }
        if (seen[k]++)
            return hp_fail(p, kat, CS_EFORMAT, "key '%s' given twice", keys[k]);
        hp_ws(p);
        if (hp_peek(p) != ':')
            return hp_fail(p, p->i, CS_EFORMAT, "expected ':' after '%s', found %s", keys[k],
                           hp_what(p, what, sizeof what));
        p->i++;
        hp_ws(p);
        rc = k == 0 ? hp_descr(p, h) : k == 1 ? hp_bool(p, &h->fortran) : hp_shape(p, h);
        if (rc != CS_OK)
            return rc;
        hp_ws(p);
        if (hp_peek(p) == ',') {
            p->i++;
            continue;
        }
        if (hp_peek(p) != '}')
            return hp_fail(p, p->i, CS_EFORMAT,
                           "expected ',' or '}' after the value of '%s', found %s", keys[k],
                           hp_what(p, what, sizeof what));
    }
    size_t close = p->i++;
    for (int j = 0; j < 3; j++)
        if (!seen[j])
            return hp_fail(p, close, CS_EFORMAT, "the dictionary has no '%s'", keys[j]);
    hp_ws(p);
    if (p->i < p->n)
        return hp_fail(p, p->i, CS_EFORMAT, "unexpected %s after the dictionary",
                       hp_what(p, what, sizeof what));
    return CS_OK;
}

/* Index of the first byte that is not well-formed UTF-8 (RFC 3629), or n. */
static size_t utf8_invalid_at(const unsigned char *s, size_t n)
{
    size_t i = 0;
    while (i < n) {
        unsigned c = s[i];
        size_t len;
        uint32_t cp, min;
        if (c < 0x80) {
            i++;
            continue;
        } else if ((c & 0xE0) == 0xC0) {
            len = 2, cp = c & 0x1F, min = 0x80;
        } else if ((c & 0xF0) == 0xE0) {
            len = 3, cp = c & 0x0F, min = 0x800;
        } else if ((c & 0xF8) == 0xF0) {
            len = 4, cp = c & 0x07, min = 0x10000;
        } else {
            return i;
        }
        if (i + len > n)
            return i;
        for (size_t k = 1; k < len; k++) {
            if ((s[i + k] & 0xC0) != 0x80)
                return i;
            cp = cp << 6 | (s[i + k] & 0x3F);
        }
        if (cp < min || cp > 0x10FFFF || (cp >= 0xD800 && cp <= 0xDFFF))
            return i;
        i += len;
    }
    return n;
}

/* Read magic, version and header; fills h (data_off included). */
int io_npy_read_header(FILE *f, const char *path, long long fsize, npy_header *h, cs_error *err)
{
    unsigned char pre[12];
    size_t got = fread(pre, 1, sizeof pre, f);
    for (size_t i = 0; i < 6; i++) {
        if (i >= got)
            return cs_error_set(err, CS_EFORMAT, path, -1, (long long)i,
                                "not a .npy file: too short for the magic string");
        if (pre[i] != io_npy_magic[i])
            return cs_error_set(err, CS_EFORMAT, path, -1, (long long)i,
                                "not a .npy file: the magic string \\x93NUMPY is missing");
    }
    if (got < 8)
        return cs_error_set(err, CS_EFORMAT, path, -1, (long long)got,
                            "truncated .npy file: no format version");
    h->major = pre[6];
    h->minor = pre[7];
    if (h->major < 1 || h->major > 3 || h->minor != 0)
        return cs_error_set(err, CS_EUNSUP, path, -1, 6,
                            ".npy format version %d.%d is not supported (1.0, 2.0 and 3.0 are)",
                            h->major, h->minor);
    size_t lenbytes = h->major == 1 ? 2 : 4;
    if (got < 8 + lenbytes)
        return cs_error_set(err, CS_EFORMAT, path, -1, (long long)got,
                            "truncated .npy file: no header length");
    size_t hlen = 0;
    for (size_t i = 0; i < lenbytes; i++)
        hlen |= (size_t)pre[8 + i] << (8 * i);
    long long hstart = (long long)(8 + lenbytes);
    if (hlen > NPY_MAX_HEADER)
        return cs_error_set(err, CS_EFORMAT, path, -1, 8,
                            "npy header length of %zu bytes is implausible", hlen);
    if (hstart + (long long)hlen > fsize)
        return cs_error_set(err, CS_EFORMAT, path, -1, fsize,
                            "truncated .npy file: the header of %zu bytes runs past the end of the "
                            "file (%lld bytes)", hlen, fsize);
    unsigned char *text = malloc(hlen + 1);
    if (!text)
        return cs_error_set(err, CS_ENOMEM, path, -1, -1, "out of memory");
    int rc = CS_OK;
    if (fseeko(f, (off_t)hstart, SEEK_SET) != 0 || fread(text, 1, hlen, f) != hlen) {
        rc = cs_error_set(err, CS_EIO, path, -1, hstart, "cannot read the header: %s",
                          strerror(errno));
        goto done;
    }
    if (h->major == 3) {
        size_t bad = utf8_invalid_at(text, hlen);
        if (bad < hlen) {
            rc = cs_error_set(err, CS_EFORMAT, path, -1, hstart + (long long)bad,
                              "npy header: invalid UTF-8 (a version 3.0 header is UTF-8)");
            goto done;
        }
    }
    hparse p = {text, hlen, 0, hstart, path, err};
    rc = hp_dict(&p, h);
    h->data_off = hstart + (long long)hlen;
done:
    free(text);
    return rc;
}

/* "(3, 1024)" */
void io_npy_shape_text(const npy_header *h, char *buf, size_t n)
{
    size_t k = (size_t)snprintf(buf, n, "(");
    for (size_t d = 0; d < h->ndim && k < n; d++)
        k += (size_t)snprintf(buf + k, n - k, "%llu%s", (unsigned long long)h->shape[d],
                              h->ndim == 1 ? "," : d + 1 < h->ndim ? ", " : "");
    if (k < n)
        snprintf(buf + k, n - k, ")");
}
