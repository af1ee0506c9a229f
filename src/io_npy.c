/* NumPy .npy files: header parsing, streaming into records or a spectrum, writing records. */
/*
 * The format (NumPy format specification, numpy.lib.format, NEP 1)
 * -----------------------------------------------------------------
 *   bytes 0-5   magic "\x93NUMPY"
 *   byte  6, 7  format version major, minor: 1.0, 2.0 or 3.0
 *   then        HEADER_LEN: unsigned little-endian, 2 bytes in version 1.0, 4 bytes in 2.0 and 3.0
 *   then        HEADER_LEN bytes of header: a Python literal dictionary with exactly the keys
 *               'descr' (the dtype string, e.g. '<f8'), 'fortran_order' (True/False) and 'shape'
 *               (a tuple of ints: (1024,) or (3, 1024); () for a scalar), padded with spaces and
 *               ended by '\n'. Versions 1.0 and 2.0 encode the header as latin-1, 3.0 as UTF-8.
 *   then        the array data, prod(shape) items of the dtype's size, in C (row-major) order, or
 *               column-major when fortran_order is True.
 * NumPy pads the header so that the data start on a multiple of 64 bytes (ARRAY_ALIGN = 64; before
 * NumPy 1.14 it was 16). Readers must not depend on the padding; our writer follows it.
 *
 * The dtype string is a byte-order character ('<' little, '>' big, '|' not applicable, only for
 * one-byte types), a kind ('i' signed, 'u' unsigned integer, 'f' IEEE float, 'c' complex made of
 * two floats, real part first) and the item size in bytes: '<c16' is two little-endian doubles.
 *
 * What collshift reads: numeric dtypes i1 i2 i4 i8 u1 u2 u4 u8 f4 f8 c8 c16 in either byte order.
 * A 1-D array is one record; a 2-D array (shots, samples) is one record per row. Only complex
 * dtypes give complex records: a real array of shape (N, 2) is N shots of 2 samples, NOT N I/Q
 * pairs, because nothing in the file says that the two columns are I and Q (save a complex array
 * instead: x[:, 0] + 1j * x[:, 1]). With kind = spectrum, a real array (N, 2) or (N, 3) holds
 * rows (x, y[, sigma]). Fortran-ordered 2-D arrays (what np.save writes for np.array([x, y]).T)
 * are read by placing each value where it belongs, without a transposed copy.
 *
 * The header is parsed, not evaluated: a small recursive-descent reader of the Python literal
 * syntax that allows any key order, any whitespace, a trailing comma, single or double quotes and
 * Python 2's "L" suffix on integers, and rejects anything else with the byte offset of the fault.
 * Sizes are checked before anything is allocated: the element count against o->max_samples, with
 * every multiplication guarded against overflow, then the data length against the file size.
 * The data are streamed in chunks of 64 Ki elements (at most 1 MiB) and decoded straight into the
 * destination, so a file is never held in memory twice.
 */
#include <collshift/io.h>

#include <errno.h>
#include <math.h>
#include <stdarg.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <sys/types.h>

_Static_assert(sizeof(float) == 4 && sizeof(double) == 8, "IEEE 754 binary32/binary64 expected");

#define NPY_CHUNK_ELEMS ((size_t)1 << 16)  /* elements per read: <= 1 MiB of c16 */
#define NPY_MAX_HEADER ((size_t)1 << 20)   /* larger headers are refused as implausible */
#define NPY_MAX_DIMS 32                    /* NumPy's own limit (NPY_MAXDIMS) */
#define NPY_ALIGN 64                       /* data start alignment written (ARRAY_ALIGN) */

static const unsigned char npy_magic[6] = {0x93, 'N', 'U', 'M', 'P', 'Y'};

/* ---------------------------------------------------------------- dtype */

typedef struct npy_dtype {
    char kind;       /* 'i', 'u', 'f', 'c' */
    size_t size;     /* bytes per item (complex: both parts) */
    size_t scalar;   /* bytes per real number */
    int big;         /* big-endian */
    int is_complex;
} npy_dtype;

/* Parse a dtype string; 1 when supported. */
static int dtype_parse(const char *d, npy_dtype *t)
{
    char order = d[0];
    if (order != '<' && order != '>' && order != '|')
        return 0;
    char kind = d[1];
    if (kind != 'i' && kind != 'u' && kind != 'f' && kind != 'c')
        return 0;
    const char *p = d + 2;
    if (*p < '1' || *p > '9')
        return 0;
    size_t size = 0;
    for (; *p >= '0' && *p <= '9'; p++) {
        size = size * 10 + (size_t)(*p - '0');
        if (size > 64)
            return 0;
    }
    if (*p)
        return 0;
    int ok = 0;
    switch (kind) {
    case 'i':
    case 'u': ok = size == 1 || size == 2 || size == 4 || size == 8; break;
    case 'f': ok = size == 4 || size == 8; break;
    case 'c': ok = size == 8 || size == 16; break;
    }
    if (!ok || (order == '|' && size != 1))
        return 0;
    t->kind = kind;
    t->size = size;
    t->is_complex = kind == 'c';
    t->scalar = t->is_complex ? size / 2 : size;
    t->big = order == '>';
    return 1;
}

/* ---------------------------------------------------------------- decoding */

static uint64_t rd_le_be(const unsigned char *p, size_t size, int big)
{
    uint64_t u = 0;
    for (size_t i = 0; i < size; i++)
        u = u << 8 | p[big ? i : size - 1 - i];
    return u;
}

static double v_i8(const unsigned char *p, int big)
{
    (void)big;
    int8_t s;
    memcpy(&s, p, 1);
    return s;
}
static double v_u8(const unsigned char *p, int big)
{
    (void)big;
    return p[0];
}
static double v_i16(const unsigned char *p, int big)
{
    uint16_t u = (uint16_t)rd_le_be(p, 2, big);
    int16_t s;
    memcpy(&s, &u, 2);
    return s;
}
static double v_u16(const unsigned char *p, int big)
{
    return (double)rd_le_be(p, 2, big);
}
static double v_i32(const unsigned char *p, int big)
{
    uint32_t u = (uint32_t)rd_le_be(p, 4, big);
    int32_t s;
    memcpy(&s, &u, 4);
    return s;
}
static double v_u32(const unsigned char *p, int big)
{
    return (double)rd_le_be(p, 4, big);
}
static double v_i64(const unsigned char *p, int big)
{
    uint64_t u = rd_le_be(p, 8, big);
    int64_t s;
    memcpy(&s, &u, 8);
    return (double)s; /* rounds beyond 2^53 */
}
static double v_u64(const unsigned char *p, int big)
{
    return (double)rd_le_be(p, 8, big);
}
static double v_f32(const unsigned char *p, int big)
{
    uint32_t u = (uint32_t)rd_le_be(p, 4, big);
    float f;
    memcpy(&f, &u, 4);
    return f;
}
static double v_f64(const unsigned char *p, int big)
{
    uint64_t u = rd_le_be(p, 8, big);
    double d;
    memcpy(&d, &u, 8);
    return d;
}

/* Decode n real numbers of type t from src into dst; index of the first non-finite, or n. */
static size_t npy_decode(const unsigned char *src, size_t n, const npy_dtype *t, double *dst)
{
    size_t i, sc = t->scalar;
    int big = t->big;
#define NPY_LOOP(FN)                          \
    for (i = 0; i < n; i++) {                 \
        double v = FN(src + i * sc, big);     \
        dst[i] = v;                           \
        if (!isfinite(v))                     \
            return i;                         \
    }                                         \
    return n
    if (t->kind == 'f' || t->kind == 'c') {
        if (sc == 4) {
            NPY_LOOP(v_f32);
        }
        NPY_LOOP(v_f64);
    }
    int s = t->kind == 'i';
    switch (sc) {
    case 1: if (s) { NPY_LOOP(v_i8); } NPY_LOOP(v_u8);
    case 2: if (s) { NPY_LOOP(v_i16); } NPY_LOOP(v_u16);
    case 4: if (s) { NPY_LOOP(v_i32); } NPY_LOOP(v_u32);
    default: if (s) { NPY_LOOP(v_i64); } NPY_LOOP(v_u64);
    }
#undef NPY_LOOP
}

static int host_is_little_endian(void)
{
    const uint16_t one = 1;
    unsigned char b;
    memcpy(&b, &one, 1);
    return b == 1;
}

/* ---------------------------------------------------------------- header parser */

typedef struct npy_header {
    int major, minor;
    long long data_off;           /* file offset of the data */
    char descr[96];               /* the dtype string, or the text of a non-string descr */
    int descr_is_string;
    long long descr_off;
    int fortran;
    size_t ndim;
    uint64_t shape[NPY_MAX_DIMS];
    long long shape_off;
} npy_header;

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
static int read_header(FILE *f, const char *path, long long fsize, npy_header *h, cs_error *err)
{
    unsigned char pre[12];
    size_t got = fread(pre, 1, sizeof pre, f);
    for (size_t i = 0; i < 6; i++) {
        if (i >= got)
            return cs_error_set(err, CS_EFORMAT, path, -1, (long long)i,
                                "not a .npy file: too short for the magic string");
        if (pre[i] != npy_magic[i])
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
static void shape_text(const npy_header *h, char *buf, size_t n)
{
    size_t k = (size_t)snprintf(buf, n, "(");
    for (size_t d = 0; d < h->ndim && k < n; d++)
        k += (size_t)snprintf(buf + k, n - k, "%llu%s", (unsigned long long)h->shape[d],
                              h->ndim == 1 ? "," : d + 1 < h->ndim ? ", " : "");
    if (k < n)
        snprintf(buf + k, n - k, ")");
}

/* ---------------------------------------------------------------- streaming the data */

/* Where flat element e of the file lands: row and column of the 2-D array (rows x cols). */
static void place(size_t e, size_t rows, size_t cols, int fortran, size_t *row, size_t *col)
{
    if (fortran) {
        *col = e / rows;
        *row = e % rows;
    } else {
        *row = e / cols;
        *col = e % cols;
    }
}

typedef struct npy_stream {
    FILE *f;
    const char *path;
    cs_error *err;
    const npy_dtype *t;
    long long data_off;
    size_t comps;
    int direct;              /* f8/c16 little-endian on a little-endian host: no decoding */
    unsigned char *buf;      /* NPY_CHUNK_ELEMS items */
} npy_stream;

/* Read m elements (starting at flat element e0) and decode into dst (m * comps doubles).
 * On a non-finite value returns CS_EDATA with *bad = the scalar index within this chunk,
 * leaving the message to the caller. */
static int stream_read(npy_stream *s, size_t e0, size_t m, double *dst, size_t *bad)
{
    unsigned char *into = s->direct ? (unsigned char *)dst : s->buf;
    size_t got = fread(into, s->t->size, m, s->f);
    if (got != m)
        return cs_error_set(s->err, CS_EIO, s->path, -1,
                            s->data_off + (long long)((e0 + got) * s->t->size), "read failed: %s",
                            ferror(s->f) ? strerror(errno) : "file shrank while reading");
    size_t nsc = m * s->comps;
    size_t k = nsc;
    if (s->direct) {
        for (size_t i = 0; i < nsc; i++)
            if (!isfinite(dst[i])) {
                k = i;
                break;
            }
    } else {
        k = npy_decode(s->buf, nsc, s->t, dst);
    }
    if (k < nsc) {
        *bad = k;
        return CS_EDATA;
    }
    return CS_OK;
}

static long long scalar_offset(const npy_stream *s, size_t e0, size_t bad)
{
    return s->data_off + (long long)(e0 * s->t->size + bad * s->t->scalar);
}

static int bad_value(const npy_stream *s, long long off, double v, const char *where)
{
    return cs_error_set(s->err, CS_EDATA, s->path, -1, off, "%s is %s", where,
                        isnan(v) ? "NaN" : "infinite");
}

static void free_records(cs_record **recs, size_t n)
{
    if (!recs)
        return;
    for (size_t i = 0; i < n; i++)
        cs_record_free(recs[i]);
    free(recs);
}

/* Records: rows shots of cols samples. */
static int load_records(npy_stream *s, const npy_header *h, size_t rows, size_t cols,
                        const cs_load_options *o, cs_loaded *out)
{
    const size_t comps = s->comps;
    const int scatter = h->fortran && rows > 1 && cols > 1;
    double *scratch = NULL;
    int rc = CS_OK;
    cs_record **recs = calloc(rows, sizeof *recs);
    if (!recs)
        goto nomem;
    if (scatter && !(scratch = malloc(NPY_CHUNK_ELEMS * comps * sizeof *scratch)))
        goto nomem;
    for (size_t r = 0; r < rows; r++) {
        cs_record *rec = cs_record_alloc(cols, s->t->is_complex);
        if (!rec)
            goto nomem;
        recs[r] = rec;
        rec->shot = r;
        rec->t0_s = o->t0_s;
        rec->dt_s = 1.0 / o->sample_rate_hz;
        rec->source = malloc(strlen(s->path) + 1);
        if (!rec->source)
            goto nomem;
        strcpy(rec->source, s->path);
    }
    const size_t total = rows * cols;
    for (size_t e = 0; e < total;) {
        size_t m = total - e < NPY_CHUNK_ELEMS ? total - e : NPY_CHUNK_ELEMS;
        double *dst;
        if (scatter) {
            dst = scratch;
        } else {
            size_t row = e / cols, col = e % cols;
            if (m > cols - col)
                m = cols - col; /* stay within one shot */
            dst = recs[row]->data + col * comps;
        }
        size_t bad = 0;
        rc = stream_read(s, e, m, dst, &bad);
        if (rc == CS_EDATA) {
            size_t row, col;
            place(e + bad / comps, rows, cols, h->fortran, &row, &col);
            char where[96];
            snprintf(where, sizeof where, "sample %zu%s of shot %zu", col,
                     comps == 1 ? "" : bad % 2 ? " (imaginary part)" : " (real part)", row);
            rc = bad_value(s, scalar_offset(s, e, bad), dst[bad], where);
        }
        if (rc != CS_OK)
            goto fail;
        if (scatter)
            for (size_t j = 0; j < m; j++) {
                size_t row, col;
                place(e + j, rows, cols, 1, &row, &col);
                for (size_t c = 0; c < comps; c++)
                    recs[row]->data[col * comps + c] = scratch[j * comps + c];
            }
        e += m;
    }
    free(scratch);
    out->kind = CS_KIND_RECORD;
    out->records = recs;
    out->nrecords = rows;
    return CS_OK;
nomem:
    rc = cs_error_set(s->err, CS_ENOMEM, s->path, -1, -1, "out of memory for %zu x %zu samples",
                      rows, cols);
fail:
    free(scratch);
    free_records(recs, rows);
    return rc;
}

/* Spectrum: rows of (x, y[, sigma]). */
static int load_spectrum(npy_stream *s, const npy_header *h, size_t rows, size_t cols,
                         const cs_load_options *o, cs_loaded *out)
{
    const cs_unit *u = NULL;
    int assumed = o->x_unit == NULL || !*o->x_unit;
    u = cs_unit_find(assumed ? "Hz" : o->x_unit);
    if (!u)
        return cs_error_set(s->err, CS_EUNIT, s->path, -1, -1, "unknown axis unit '%s'", o->x_unit);
    cs_spectrum *sp = cs_spectrum_alloc(rows, cols == 3);
    double *scratch = malloc(NPY_CHUNK_ELEMS * sizeof *scratch);
    int rc = CS_OK;
    if (!sp || !scratch) {
        rc = cs_error_set(s->err, CS_ENOMEM, s->path, -1, -1, "out of memory for %zu points", rows);
        goto fail;
    }
    double *colv[3] = {sp->freq_hz, sp->y, sp->sigma};
    static const char *const names[3] = {"x", "y", "sigma"};
    const size_t total = rows * cols;
    for (size_t e = 0; e < total;) {
        size_t m = total - e < NPY_CHUNK_ELEMS ? total - e : NPY_CHUNK_ELEMS;
        size_t bad = 0;
        rc = stream_read(s, e, m, scratch, &bad);
        if (rc == CS_EDATA) {
            size_t row, col;
            place(e + bad, rows, cols, h->fortran, &row, &col);
            char where[64];
            snprintf(where, sizeof where, "%s in row %zu", names[col], row);
            rc = bad_value(s, scalar_offset(s, e, bad), scratch[bad], where);
        }
        if (rc != CS_OK)
            goto fail;
        for (size_t j = 0; j < m; j++) {
            size_t row, col;
            place(e + j, rows, cols, h->fortran, &row, &col);
            colv[col][row] = scratch[j];
        }
        e += m;
    }
    free(scratch);
    scratch = NULL;
    /* byte offset of element (row, col) */
#define ELEM_OFF(row, col)                                                                  \
    (s->data_off + (long long)((h->fortran ? (col) * rows + (row) : (row) * cols + (col)) * \
                               s->t->size))
    if (sp->sigma)
        for (size_t i = 0; i < rows; i++)
            if (!(sp->sigma[i] > 0.0)) {
                rc = cs_error_set(s->err, CS_EDATA, s->path, -1, ELEM_OFF(i, 2),
                                  "sigma in row %zu is %g: it must be positive", i, sp->sigma[i]);
                goto fail;
            }
    sp->conv.air = o->air;
    sp->conv.y_is_density = o->y_is_density;
    rc = cs_axis_to_hz(sp->freq_hz, sp->y, sp->sigma, rows, u, &sp->conv, s->err);
    if (rc != CS_OK) {
        if (s->err)
            snprintf(s->err->file, sizeof s->err->file, "%s", s->path);
        goto fail;
    }
    /* strictly monotonic in file order, either way */
    double dir = sp->freq_hz[1] > sp->freq_hz[0] ? 1.0 : -1.0;
    for (size_t i = 1; i < rows; i++) {
        double d = sp->freq_hz[i] - sp->freq_hz[i - 1];
        if (!(d * dir > 0.0)) {
            rc = cs_error_set(s->err, CS_EDATA, s->path, -1, ELEM_OFF(i, 0),
                              d == 0.0 ? "x in row %zu repeats the previous row's value"
                                       : "x is not monotonic: row %zu goes back",
                              i);
            goto fail;
        }
    }
#undef ELEM_OFF
    if (dir < 0.0) {
        for (size_t i = 0, j = rows - 1; i < j; i++, j--)
            for (size_t c = 0; c < cols; c++) {
                double t = colv[c][i];
                colv[c][i] = colv[c][j];
                colv[c][j] = t;
            }
        sp->conv.reversed = 1;
    }
    snprintf(sp->x_unit, sizeof sp->x_unit, "%s", u->name);
    sp->x_unit_assumed = assumed;
    sp->source = malloc(strlen(s->path) + 1);
    if (!sp->source) {
        rc = cs_error_set(s->err, CS_ENOMEM, s->path, -1, -1, "out of memory");
        goto fail;
    }
    strcpy(sp->source, s->path);
    out->kind = CS_KIND_SPECTRUM;
    out->spectrum = sp;
    if (assumed)
        cs_loaded_note(out, "no axis unit given: x taken as Hz");
    else if (u->dim != CS_DIM_FREQUENCY || u->scale != 1.0)
        cs_loaded_note(out, "axis in %s converted to Hz%s", u->name,
                       u->dim != CS_DIM_LENGTH ? ""
                       : o->air                ? " (air wavelengths)"
                                               : " (vacuum)");
    if (sp->conv.jacobian_applied)
        cs_loaded_note(out, "Jacobian applied to y%s", sp->sigma ? " and sigma" : "");
    if (sp->conv.reversed)
        cs_loaded_note(out, "axis reversed to ascending frequency");
    return CS_OK;
fail:
    free(scratch);
    cs_spectrum_free(sp);
    return rc;
}

int cs_io_npy_load(const char *path, const cs_load_options *o, cs_loaded *out, cs_error *err)
{
    cs_load_options defaults;
    if (!o) {
        cs_load_options_init(&defaults);
        o = &defaults;
    }
    if (!path || !out)
        return cs_error_set(err, CS_EINVAL, path, -1, -1, "no file given");
    FILE *f = fopen(path, "rb");
    if (!f)
        return cs_error_set(err, CS_EIO, path, -1, -1, "cannot open: %s", strerror(errno));
    int rc;
    struct stat st;
    if (fstat(fileno(f), &st) != 0 || !S_ISREG(st.st_mode)) {
        rc = cs_error_set(err, CS_EIO, path, -1, -1, "not a regular file");
        goto done;
    }
    const long long fsize = (long long)st.st_size;
    npy_header h;
    memset(&h, 0, sizeof h);
    rc = read_header(f, path, fsize, &h, err);
    if (rc != CS_OK)
        goto done;

    npy_dtype t;
    if (!h.descr_is_string) {
        rc = cs_error_set(err, CS_EFORMAT, path, -1, h.descr_off,
                          "structured dtype %s is not supported: save a plain numeric array",
                          h.descr);
        goto done;
    }
    if (!dtype_parse(h.descr, &t)) {
        rc = cs_error_set(err, CS_EFORMAT, path, -1, h.descr_off,
                          "unsupported dtype '%s': expected i1 i2 i4 i8 u1 u2 u4 u8 f4 f8 c8 c16 "
                          "with byte order '<' or '>' ('|' for one-byte types)", h.descr);
        goto done;
    }
    char shp[96];
    shape_text(&h, shp, sizeof shp);
    if (h.ndim == 0) {
        rc = cs_error_set(err, CS_EDATA, path, -1, h.shape_off,
                          "the array is a single value (shape ()), not a record");
        goto done;
    }
    if (h.ndim > 2) {
        rc = cs_error_set(err, CS_EUNSUP, path, -1, h.shape_off,
                          "%zu-D array %s: only 1-D (one record) or 2-D (shots x samples) arrays "
                          "are read", h.ndim, shp);
        goto done;
    }
    /* sizes, before allocating */
    const size_t max_samples = o->max_samples ? o->max_samples : (size_t)1 << 31;
    uint64_t rows = h.ndim == 1 ? 1 : h.shape[0], cols = h.shape[h.ndim - 1];
    if ((rows && cols > UINT64_MAX / rows) || rows * cols > (uint64_t)max_samples ||
        rows * cols > SIZE_MAX / (2 * sizeof(double))) {
        rc = cs_error_set(err, CS_ERANGE, path, -1, h.shape_off,
                          "shape %s declares more than the limit of %zu samples", shp, max_samples);
        goto done;
    }
    const size_t total = (size_t)(rows * cols);
    const unsigned long long need = (unsigned long long)total * t.size;
    const unsigned long long found =
        fsize > h.data_off ? (unsigned long long)(fsize - h.data_off) : 0;
    if (found < need) {
        rc = cs_error_set(err, CS_EFORMAT, path, -1, h.data_off + (long long)found,
                          "truncated: expected %llu bytes of data, found %llu (shape %s of '%s')",
                          need, found, shp, h.descr);
        goto done;
    }
    if (total == 0) {
        rc = cs_error_set(err, CS_EDATA, path, -1, h.data_off, "empty array: shape %s", shp);
        goto done;
    }
    if (fseeko(f, (off_t)h.data_off, SEEK_SET) != 0) {
        rc = cs_error_set(err, CS_EIO, path, -1, h.data_off, "cannot seek: %s", strerror(errno));
        goto done;
    }
    npy_stream s = {f, path, err, &t, h.data_off, t.is_complex ? 2 : 1,
                    t.kind != 'i' && t.kind != 'u' && t.scalar == 8 && !t.big &&
                        host_is_little_endian(),
                    NULL};
    if (!s.direct && !(s.buf = malloc(NPY_CHUNK_ELEMS * t.size))) {
        rc = cs_error_set(err, CS_ENOMEM, path, -1, -1, "out of memory");
        goto done;
    }
    const size_t min_points = o->min_points ? o->min_points : 1;
    if (o->kind == CS_KIND_SPECTRUM) {
        if (t.is_complex || h.ndim != 2 || (cols != 2 && cols != 3)) {
            rc = cs_error_set(err, CS_EFORMAT, path, -1, h.shape_off,
                              "a spectrum needs a real 2-D array of shape (N, 2) or (N, 3) holding "
                              "x, y[, sigma]; this one is %s of '%s'", shp, h.descr);
        } else if (rows < min_points || rows < 2) {
            rc = cs_error_set(err, CS_EDATA, path, -1, h.shape_off,
                              "%llu points, fewer than the %zu needed", (unsigned long long)rows,
                              min_points < 2 ? 2 : min_points);
        } else {
            rc = load_spectrum(&s, &h, (size_t)rows, (size_t)cols, o, out);
        }
    } else if (!(o->sample_rate_hz > 0.0) || !isfinite(o->sample_rate_hz)) {
        rc = cs_error_set(err, CS_EINVAL, path, -1, -1,
                          "a .npy file does not store the sample rate: give --sample-rate");
    } else if (cols < min_points) {
        rc = cs_error_set(err, CS_EDATA, path, -1, h.shape_off,
                          "shape %s gives %llu samples per shot, fewer than the %zu needed%s", shp,
                          (unsigned long long)cols, min_points,
                          cols == 2 && !t.is_complex
                              ? " (two real columns are not read as I/Q: save a complex array)"
                              : "");
    } else {
        rc = load_records(&s, &h, (size_t)rows, (size_t)cols, o, out);
    }
    free(s.buf);
    if (rc != CS_OK)
        goto done;

    cs_loaded_note(out, "npy v%d.%d '%s' shape %s%s", h.major, h.minor, h.descr, shp,
                   h.fortran && rows > 1 && cols > 1 ? " in Fortran order" : "");
    if (out->kind == CS_KIND_RECORD) {
        char rate[64];
        cs_quantity_format(o->sample_rate_hz, CS_DIM_FREQUENCY, 6, rate, sizeof rate);
        cs_loaded_note(out, "%zu shot%s of %zu %s samples at %s", (size_t)rows,
                       rows == 1 ? "" : "s", (size_t)cols, t.is_complex ? "complex" : "real", rate);
    }
    if (found > need)
        cs_loaded_note(out, "%llu bytes after the array ignored", found - need);
done:
    fclose(f);
    return rc;
}

/* ---------------------------------------------------------------- writing */

static void put_le64(unsigned char *p, uint64_t u)
{
    for (int i = 0; i < 8; i++)
        p[i] = (unsigned char)(u >> (8 * i));
}

int cs_io_npy_write_records(const char *path, cs_record *const *recs, size_t nrec, cs_error *err)
{
    if (!path)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "no file given");
    if (!recs || nrec == 0)
        return cs_error_set(err, CS_EINVAL, path, -1, -1, "no records to write");
    for (size_t i = 0; i < nrec; i++) {
        if (!recs[i] || (recs[i]->n && !recs[i]->data))
            return cs_error_set(err, CS_EINVAL, path, -1, -1, "record %zu is missing", i);
        if (recs[i]->n != recs[0]->n || recs[i]->is_complex != recs[0]->is_complex)
            return cs_error_set(err, CS_EINVAL, path, -1, -1,
                                "record %zu (%zu %s samples) differs from record 0 (%zu %s): a "
                                ".npy array needs records of one length and kind", i, recs[i]->n,
                                recs[i]->is_complex ? "complex" : "real", recs[0]->n,
                                recs[0]->is_complex ? "complex" : "real");
    }
    const size_t n = recs[0]->n;
    const int cx = recs[0]->is_complex != 0;
    const size_t comps = cx ? 2 : 1;
    if (n > SIZE_MAX / (comps * 8) / nrec)
        return cs_error_set(err, CS_ERANGE, path, -1, -1, "too many samples to write");

    /* header: magic, version 1.0, u16 length, dictionary, spaces, '\n'; data start % 64 == 0 */
    char dict[160];
    int dl = nrec == 1 ? snprintf(dict, sizeof dict,
                                  "{'descr': '%s', 'fortran_order': False, 'shape': (%zu,), }",
                                  cx ? "<c16" : "<f8", n)
                       : snprintf(dict, sizeof dict,
                                  "{'descr': '%s', 'fortran_order': False, 'shape': (%zu, %zu), }",
                                  cx ? "<c16" : "<f8", nrec, n);
    size_t used = 10 + (size_t)dl + 1;
    size_t hlen = (size_t)dl + 1 + (NPY_ALIGN - used % NPY_ALIGN) % NPY_ALIGN;
    unsigned char head[10 + 256];
    memcpy(head, npy_magic, 6);
    head[6] = 1;
    head[7] = 0;
    head[8] = (unsigned char)(hlen & 0xFF);
    head[9] = (unsigned char)(hlen >> 8);
    memcpy(head + 10, dict, (size_t)dl);
    memset(head + 10 + dl, ' ', hlen - (size_t)dl - 1);
    head[10 + hlen - 1] = '\n';

    FILE *f = fopen(path, "wb");
    if (!f)
        return cs_error_set(err, CS_EIO, path, -1, -1, "cannot create: %s", strerror(errno));
    int ok = fwrite(head, 1, 10 + hlen, f) == 10 + hlen;
    const int little = host_is_little_endian();
    unsigned char *buf = NULL;
    if (ok && !little)
        ok = (buf = malloc(NPY_CHUNK_ELEMS * 8)) != NULL;
    for (size_t r = 0; ok && r < nrec; r++) {
        const double *d = recs[r]->data;
        size_t m = n * comps;
        if (little) {
            ok = fwrite(d, sizeof *d, m, f) == m;
            continue;
        }
        for (size_t k = 0; ok && k < m; k += NPY_CHUNK_ELEMS) {
            size_t c = m - k < NPY_CHUNK_ELEMS ? m - k : NPY_CHUNK_ELEMS;
            for (size_t j = 0; j < c; j++) {
                uint64_t u;
                memcpy(&u, d + k + j, 8);
                put_le64(buf + 8 * j, u);
            }
            ok = fwrite(buf, 8, c, f) == c;
        }
    }
    free(buf);
    int saved = errno;
    if (fclose(f) != 0 && ok) {
        ok = 0;
        saved = errno;
    }
    if (!ok) {
        remove(path);
        return cs_error_set(err, CS_EIO, path, -1, -1, "write failed: %s", strerror(saved));
    }
    return CS_OK;
}
