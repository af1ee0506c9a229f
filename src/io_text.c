/* Delimited text (CSV, TSV, ';', blanks): the streaming reader of lines, fields and rows. */
/*
 * The format
 * ----------
 * A table of numbers, one row per line, as written by spreadsheets, instrument software and
 * scripts. What the loader accepts:
 *   - Line endings LF or CRLF; an optional UTF-8 byte-order mark at the start of the file.
 *     (UTF-16 files and lone-CR endings are refused with a message that says so.)
 *   - Blank lines anywhere. Lines whose first non-blank character is '#' are comments, anywhere.
 *     A comment holding '=' is a metadata line "# key = value [unit]" (cs_meta_parse_line); one
 *     whose key is not a valid metadata key stays a plain comment (and a note says so once).
 *     A key given again replaces its earlier value (the last one wins; a note says so once);
 *     more than CS_META_MAX_KEYS (10000) different keys is an error.
 *   - One delimiter for the whole file: ',', tab, ';' or runs of blanks. It is chosen from the
 *     first line that is not a comment (header or data): a tab if there is one, else ';', else
 *     ',', else blanks. One exception: when splitting at ',' (or tab or ';') leaves a field with
 *     blanks inside while the blank-separated words are all numbers if ',' is read as a decimal
 *     point ("1,5 2,3"), the delimiter is blanks, so that the decimal comma is caught (below).
 *     o->delimiter forces one (' ' means runs of blanks). Fields are trimmed of blanks; a field
 *     wrapped in double quotes is unwrapped.
 *   - An optional header row: the first non-comment line, when none of its fields is a number
 *     (empty fields aside).
 *     A first line that mixes numbers and words is refused (a typo in the first data row must
 *     not silently turn it into a header). Names may carry a unit: "frequency_mhz", "time_us",
 *     "wavelength [nm]", "t (ns)" (cs_unit_from_column_name).
 *   - Numbers are decimal, with '.' as the decimal point ("1.5", "-2e-3"). A decimal comma is
 *     refused ("decimal commas are not accepted; convert them to '.'"), never misread; so are
 *     hexadecimal numbers, NaN and infinities.
 *   - Every row must have as many fields as the first row. Only the columns in use are converted.
 *
 * Limits (bounded memory whatever the input): a field longer than 1 KiB or a line longer than
 * 1 MiB is refused; o->max_samples bounds the number of rows.
 *
 * What the table holds (spectrum or record, which columns) is decided in io_text_columns.c, whose
 * comment gives the rules; the arrays read become a spectrum or record in io_text_finish.c;
 * io_text_write.c writes both back as CSV.
 *
 * Uniform sampling. The time column is not stored. While streaming, each step d_k = t_k - t_(k-1)
 * must be positive and within 1 % of the first step d_1 (this stops early, at the first offending
 * line); the smallest and largest steps are kept with their lines. At the end, with the mean step
 * m = (t_last - t_first) / (n - 1), both extremes must lie within 1 % of m - which is the rule
 * "every step within 1 % of the mean step", checked without storing the column. So a time axis is
 * accepted when every step is within 1 % of both the first and the mean step. Then t0 = t_first
 * and dt = m.
 *
 * Parsing strategy
 * ----------------
 * The file is read in 4 MiB chunks into one buffer, followed by TXT_PAD zero bytes; lines are
 * handled in place. A partial last line is moved to the front of the buffer before the next read
 * (since a line is at most 1 MiB, there is always room).
 * Once the columns are decided (the first data row), each line is first tried the fast way
 * (fast_rows, fast_line): read straight from the buffer, field after field, each field in use by
 * io_decimal_scan_padded (its eight-byte loads may run past the line into the padding, which is
 * why it is there), the delimiters and the line end ("\n" or "\r\n") checked in passing. A line
 * it takes has exactly the values, checks and counts the general way below gives it; any other
 * line (comment, blank, quoted or undecided field, wrong field count, partial line at the end of
 * the buffer) goes the general way, and is taken or refused there as before. fast_line's comment
 * says why both ways agree. When more than 64 data rows, and more than a quarter of them, came
 * the general way, the fast way is no longer tried (it would only cost a failed try per row).
 * The general way: lines are found with memchr and NUL-terminated, and fields are taken one at
 * a time. A field in use is first tried by num_field(): the number at its start is read by
 * io_decimal_scan (inline, io_number_impl.h: the digits after the point eight at a time, then
 * Clinger's fast path or Eisel-Lemire), and when only blanks follow it up to the delimiter, that
 * is the field - its end is found by the number's own scan, with no separate search for the
 * delimiter. Any other field (quoted, long, not plain decimal, or not decided there) goes the
 * slow way: next_field() finds it, it is
 * NUL-terminated in place and converted by num_fast() (the same exact parser, then strtod),
 * and field_value() explains a refusal. Both ways accept the same fields with the same values
 * (see num_field). Nothing is allocated per line or per field: values go straight into arrays
 * grown geometrically with realloc and shrunk to size at the end, which become the arrays of the
 * spectrum or record without a copy. Slow work (messages, decimal-comma and quote handling)
 * happens only when a field fails the fast path.
 * strtod follows LC_NUMERIC: collshift keeps the "C" locale, where the decimal point is '.'.
 */
#include <collshift/io.h>

#include "io_number_impl.h"
#include "io_text_impl.h"

#include <errno.h>
#include <math.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <strings.h>

#define TXT_BUF_BYTES ((size_t)4 << 20) /* read chunk and line buffer */
#define TXT_MAX_LINE ((size_t)1 << 20)  /* longest accepted line, bytes */
#define TXT_MAX_FIELD ((size_t)1024)    /* longest accepted field, bytes */
#define TXT_FIRST_CAP ((size_t)4096)    /* first array capacity, rows */
#define TXT_PAD ((size_t)16)            /* zero bytes after the buffer's valid bytes */

/* ---------------------------------------------------------------- small helpers */

static int is_blank(char ch)
{
    return ch == ' ' || ch == '\t';
}

/* Quote [b, e) for a message: at most 40 bytes, control characters shown as '?'. */
static const char *quote(const char *b, const char *e, char *out, size_t n)
{
    size_t k = 0, len = (size_t)(e - b), lim = len > 40 ? 40 : len;
    while (lim < len && lim > 0 && ((unsigned char)b[lim] & 0xC0) == 0x80)
        lim--; /* do not cut a UTF-8 sequence */
    for (size_t i = 0; i < lim && k + 4 < n; i++) {
        unsigned char ch = (unsigned char)b[i];
        out[k++] = (ch < 0x20 || ch == 0x7f) ? '?' : (char)ch;
    }
    if (lim < len && k + 4 < n) {
        memcpy(out + k, "...", 3);
        k += 3;
    }
    out[k] = '\0';
    return out;
}

int io_text_fail(txt *c, int code, long line, const char *fmt, ...)
{
    char msg[CS_ERROR_MSG_MAX];
    va_list ap;
    va_start(ap, fmt);
    vsnprintf(msg, sizeof msg, fmt, ap);
    va_end(ap);
    return cs_error_set(c->err, code, c->path, line, -1, "%s", msg);
}

/* An error from another module (no file, maybe no line): add ours. */
int io_text_adopt(txt *c, int rc, long line)
{
    if (c->err) {
        snprintf(c->err->file, sizeof c->err->file, "%s", c->path);
        if (c->err->line <= 0)
            c->err->line = line;
    }
    return rc;
}

/* ---------------------------------------------------------------- reading lines */

/* Next physical line: 1 with [*lb, *le) NUL-terminated at *le (CR of CRLF removed), 0 at end of
 * file, or an error code. */
static int next_line(txt *c, char **lb, char **le)
{
    for (;;) {
        char *nl = memchr(c->buf + c->scan, '\n', c->len - c->scan);
        if (nl || (c->eof && c->pos < c->len)) {
            char *b = c->buf + c->pos, *e = nl ? nl : c->buf + c->len;
            c->line++;
            if ((size_t)(e - b) > TXT_MAX_LINE)
                return io_text_fail(c, CS_EFORMAT, c->line, "line longer than %zu bytes (1 MiB)",
                                    TXT_MAX_LINE);
            *e = '\0';
            c->pos = c->scan = nl ? (size_t)(nl - c->buf) + 1 : c->len;
            if (e > b && e[-1] == '\r')
                *--e = '\0';
            *lb = b;
            *le = e;
            return 1;
        }
        if (c->eof)
            return 0;
        c->scan = c->len;
        if (c->len - c->pos > TXT_MAX_LINE)
            return io_text_fail(c, CS_EFORMAT, c->line + 1, "line longer than %zu bytes (1 MiB)",
                                TXT_MAX_LINE);
        /* keep the partial line, read more behind it */
        size_t keep = c->len - c->pos;
        memmove(c->buf, c->buf + c->pos, keep);
        c->scan -= c->pos;
        c->len = keep;
        c->pos = 0;
        size_t want = TXT_BUF_BYTES - c->len;
        size_t got = fread(c->buf + c->len, 1, want, c->f);
        c->len += got;
        memset(c->buf + c->len, 0, TXT_PAD); /* the padding fast_line's scans rely on */
        if (got < want) {
            if (ferror(c->f))
                return io_text_fail(c, CS_EIO, c->line + 1, "read error: %s", strerror(errno));
            c->eof = 1;
        }
    }
}

/* ---------------------------------------------------------------- fields and numbers */

/* Next field of [*pp, le): 1 and the trimmed field [*fb, *fe); 0 when the line has no more.
 * Does not write to the line. */
static inline int next_field(char d, char **pp, char *le, char **fb, char **fe)
{
    char *p = *pp;
    if (!p)
        return 0;
    if (d == ' ') {
        while (p < le && is_blank(*p))
            p++;
        if (p == le)
            return 0;
        char *b = p;
        while (p < le && !is_blank(*p))
            p++;
        *fb = b;
        *fe = p;
        *pp = p < le ? p + 1 : le;
        return 1;
    }
    char *q = memchr(p, d, (size_t)(le - p));
    char *e = q ? q : le, *b = p;
    while (b < e && is_blank(*b))
        b++;
    while (e > b && is_blank(e[-1]))
        e--;
    *fb = b;
    *fe = e;
    *pp = q ? q + 1 : NULL;
    return 1;
}

/* The fast path: [b, e) with *e == '\0' is a finite decimal number. Plain decimals are
 * converted by cs_decimal_to_double (io_number.c, bit-identical to strtod); whatever it leaves
 * undecided goes to strtod, so what is accepted or refused does not depend on it. The slow path
 * (field_value) explains every refusal. */
static inline int num_fast(const char *b, const char *e, double *v)
{
    if (cs_decimal_to_double(b, e, v))
        return 1;
    char *end;
    *v = strtod(b, &end);
    if (end != e || b == e || !isfinite(*v))
        return 0;
    const char *h = b + (*b == '-' || *b == '+');
    return !(h[0] == '0' && (h[1] == 'x' || h[1] == 'X'));
}

/* The fast path of a field in use, tried before next_field: the field at *pp (of the line
 * [*pp, le)) is a plain decimal number that io_decimal_scan decides, with only blanks between
 * it and the delimiter or the end of the line. Then 1, with *v and *pp as next_field and
 * num_fast would leave them; else 0 with *pp unchanged, and the general path takes the field.
 * Why both paths agree: the field next_field would cut is [p, s) - the delimiter is never a
 * character of a number (cs_io_text_load refuses digits, letters, '.', '+' and '-' as
 * delimiters), so the first one after p is the one after s's blanks, and trimming stops at s -
 * and io_decimal_scan(p, le) == s exactly when cs_decimal_to_double decides [p, s), with the
 * same value (io_number_impl.h), which is num_fast's first step. The length limit is the
 * general path's. */
static inline int num_field(char d, char **pp, char *le, double *v)
{
    char *p = *pp, *s;
    if (!p)
        return 0;
    if (d == ' ') {
        while (p < le && is_blank(*p))
            p++;
        s = (char *)io_decimal_scan(p, le, v);
        if (!s || (size_t)(s - p) > TXT_MAX_FIELD || (s < le && !is_blank(*s)))
            return 0;
        *pp = s < le ? s + 1 : le;
        return 1;
    }
    while (p < le && *p != d && is_blank(*p))
        p++;
    s = (char *)io_decimal_scan(p, le, v);
    if (!s || (size_t)(s - p) > TXT_MAX_FIELD)
        return 0;
    while (s < le && *s != d && is_blank(*s))
        s++;
    if (s < le && *s != d)
        return 0;
    *pp = s < le ? s + 1 : NULL;
    return 1;
}

/* Copy [b, e) to a terminated buffer (n bytes); 0 if it does not fit. */
static int copy_field(const char *b, const char *e, char *out, size_t n)
{
    size_t len = (size_t)(e - b);
    if (len + 1 > n)
        return 0;
    memcpy(out, b, len);
    out[len] = '\0';
    return 1;
}

/* Remove one pair of double quotes around [*b, *e). */
static void unquote(const char **b, const char **e)
{
    if (*e - *b >= 2 && **b == '"' && (*e)[-1] == '"')
        (*b)++, (*e)--;
}

/* [b, e) is entirely a number for strtod: finite or not, decimal or hexadecimal. */
static int parses_fully(const char *b, const char *e, double *v)
{
    char tmp[TXT_MAX_FIELD + 1], *end;
    if (b == e || !copy_field(b, e, tmp, sizeof tmp))
        return 0;
    *v = strtod(tmp, &end);
    return end == tmp + (e - b);
}

/* [b, e) is a number written with one decimal comma ("1,5", "-0,25e3"). */
static int is_decimal_comma_number(const char *b, const char *e)
{
    char tmp[80];
    const char *comma = memchr(b, ',', (size_t)(e - b));
    if (!comma || memchr(comma + 1, ',', (size_t)(e - comma - 1)) ||
        !copy_field(b, e, tmp, sizeof tmp))
        return 0;
    tmp[comma - b] = '.';
    double v;
    return num_fast(tmp, tmp + (e - b), &v);
}

/* The error for a field that is not a usable number; `extra` is appended to the generic
 * message. Always returns an error code. */
static int bad_field(txt *c, const char *b, const char *e, size_t col, long line,
                     const char *extra)
{
    char q[64];
    double x;
    if (b == e)
        return io_text_fail(c, CS_EFORMAT, line, "column %zu is empty", col + 1);
    quote(b, e, q, sizeof q);
    if (memchr(b, '\r', (size_t)(e - b)))
        return io_text_fail(c, CS_EFORMAT, line,
                            "column %zu: '%s' holds a carriage return: the file seems to use lone "
                            "CR line endings; convert them to LF or CRLF", col + 1, q);
    unquote(&b, &e);
    if (is_decimal_comma_number(b, e))
        return io_text_fail(c, CS_EFORMAT, line,
                            "column %zu: '%s' has a decimal comma: decimal commas are not "
                            "accepted; convert them to '.'", col + 1, q);
    if (parses_fully(b, e, &x)) {
        const char *h = b + (*b == '-' || *b == '+');
        if (h[0] == '0' && (h[1] == 'x' || h[1] == 'X'))
            return io_text_fail(c, CS_EFORMAT, line,
                                "column %zu: '%s' is hexadecimal: only decimal numbers are "
                                "accepted", col + 1, q);
        if (isnan(x))
            return io_text_fail(c, CS_EDATA, line, "column %zu: '%s' is NaN (not a number)",
                                col + 1, q);
        if (memchr(b, 'i', (size_t)(e - b)) || memchr(b, 'I', (size_t)(e - b)))
            return io_text_fail(c, CS_EDATA, line, "column %zu: '%s' is infinite", col + 1, q);
        return io_text_fail(c, CS_EDATA, line,
                            "column %zu: '%s' is too large for a double (infinite)", col + 1, q);
    }
    return io_text_fail(c, CS_EFORMAT, line, "column %zu: '%s' is not a number%s", col + 1, q,
                        extra);
}

/* The slow path of a used field that failed num_fast: a quoted number is accepted. */
static int field_value(txt *c, const char *b, const char *e, size_t col, long line, double *v)
{
    const char *ub = b, *ue = e;
    char tmp[TXT_MAX_FIELD + 1];
    unquote(&ub, &ue);
    if (ue - ub < e - b && copy_field(ub, ue, tmp, sizeof tmp) && num_fast(tmp, tmp + (ue - ub), v))
        return CS_OK;
    return bad_field(c, b, e, col, line, "");
}

/* ---------------------------------------------------------------- delimiter */

/* All blank-separated words of [b, e) are numbers when ',' is read as '.'. */
static int words_are_comma_numbers(char *b, char *e)
{
    char *p = b, *fb, *fe;
    int k = 0;
    while (next_field(' ', &p, e, &fb, &fe)) {
        double v;
        if (!parses_fully(fb, fe, &v) && !is_decimal_comma_number(fb, fe))
            return 0;
        k++;
    }
    return k >= 2;
}

static char detect_delimiter(char *b, char *e)
{
    static const char cand[] = {'\t', ';', ','};
    for (size_t i = 0; i < sizeof cand; i++) {
        if (!memchr(b, cand[i], (size_t)(e - b)))
            continue;
        char *p = b, *fb, *fe;
        int inner_blank = 0;
        while (next_field(cand[i], &p, e, &fb, &fe))
            for (char *s = fb; s < fe; s++)
                if (is_blank(*s))
                    inner_blank = 1;
        if (inner_blank && words_are_comma_numbers(b, e))
            return ' ';
        return cand[i];
    }
    return ' ';
}

/* ---------------------------------------------------------------- header row */

/* Store the header row [b, e) of count fields. */
static int store_header(txt *c, char *b, char *e, size_t count, long line)
{
    size_t len = (size_t)(e - b) + 1;
    c->hdr = calloc(count, sizeof *c->hdr);
    c->hdr_block = malloc(2 * len + 2 * count);
    if (!c->hdr || !c->hdr_block)
        return io_text_fail(c, CS_ENOMEM, line, "out of memory for the header");
    char *w = c->hdr_block, *p = b, *fb, *fe;
    size_t k = 0;
    while (k < count && next_field(c->delim, &p, e, &fb, &fe)) {
        if (fe - fb >= 2 && *fb == '"' && fe[-1] == '"')
            fb++, fe--;
        size_t n = (size_t)(fe - fb);
        col_name *h = &c->hdr[k++];
        h->name = w;
        memcpy(w, fb, n);
        w[n] = '\0';
        w += n + 1;
        h->base = w;
        h->unit = cs_unit_from_column_name(h->name, h->base, n + 1);
        w += n + 1;
    }
    c->header_line = line;
    return CS_OK;
}

/* ---------------------------------------------------------------- comments and metadata */

static int comment(txt *c, char *content, long line)
{
    if (!strchr(content, '='))
        return CS_OK;
    cs_error e;
    cs_error_clear(&e);
    size_t nkeys = c->meta.n;
    int rc = cs_meta_parse_line(&c->meta, content, c->path, line, &e);
    if (rc == CS_ENOMEM)
        return io_text_fail(c, CS_ENOMEM, line, "out of memory");
    if (rc == CS_ERANGE)
        return io_text_fail(c, CS_EFORMAT, line, "%s", e.msg);
    int repeated = rc == CS_OK && c->meta.n == nkeys;
    if (rc != CS_OK) {
        if (!c->meta_note_done)
            cs_loaded_note(c->out, "line %ld: comment with '=' not read as metadata (%s)", line,
                           e.msg);
        c->meta_note_done = 1;
        return CS_OK;
    }
    /* the key, as cs_meta_parse_line trims it */
    char *eq = strchr(content, '='), *kb = content, *ke = eq;
    while (kb < ke && is_blank(*kb))
        kb++;
    while (ke > kb && is_blank(ke[-1]))
        ke--;
    size_t kn = (size_t)(ke - kb);
    if (repeated && !c->meta_repeat_note_done) {
        /* a key given again: the last value wins (documented at the top); said once per file */
        cs_loaded_note(c->out, "line %ld: metadata '%.*s' given again: the last value wins", line,
                       (int)(kn > 64 ? 64 : kn), kb);
        c->meta_repeat_note_done = 1;
    }
#define KEY_IS(s) (kn == sizeof(s) - 1 && strncasecmp(kb, s, kn) == 0)
    if (KEY_IS("kind")) {
        long ml = line;
        int mk = io_text_meta_kind(c, &ml);
        if (mk < 0)
            return io_text_fail(c, CS_EFORMAT, line,
                                "metadata 'kind' must be 'record' or 'spectrum'");
        if (c->decided && c->by >= BY_META_KIND && (cs_kind)mk != c->kind)
            return io_text_fail(c, CS_EFORMAT, line,
                                "metadata 'kind = %s' comes after the first data row (line %ld), "
                                "which was read as a %s: move it above the data",
                                cs_kind_name((cs_kind)mk), c->first_data_line,
                                cs_kind_name(c->kind));
    } else if ((KEY_IS("sample_rate") || KEY_IS("sample_interval") || KEY_IS("dt")) &&
               c->decided &&
               c->by > BY_META_RATE && c->kind == CS_KIND_SPECTRUM && c->ncols <= 2) {
        return io_text_fail(c, CS_EFORMAT, line,
                            "metadata '%.*s' comes after the first data row (line %ld), which was "
                            "read as a spectrum: move it above the data", (int)kn, kb,
                            c->first_data_line);
    }
#undef KEY_IS
    return CS_OK;
}

/* ---------------------------------------------------------------- rows */

static int grow(txt *c)
{
    size_t cap = c->cap ? 2 * c->cap : TXT_FIRST_CAP;
    if (cap > (size_t)-1 / (2 * sizeof(double)))
        return io_text_fail(c, CS_ENOMEM, c->line, "too many rows");
    size_t wa = c->kind == CS_KIND_RECORD && c->is_complex ? 2 : 1;
    double *na = realloc(c->a, cap * wa * sizeof(double));
    if (!na)
        return io_text_fail(c, CS_ENOMEM, c->line, "out of memory after %zu rows", c->n);
    c->a = na;
    if (c->kind == CS_KIND_SPECTRUM) {
        double *nb = realloc(c->b, cap * sizeof(double));
        if (!nb)
            return io_text_fail(c, CS_ENOMEM, c->line, "out of memory after %zu rows", c->n);
        c->b = nb;
        if (c->cs != NOCOL) {
            double *nc = realloc(c->c, cap * sizeof(double));
            if (!nc)
                return io_text_fail(c, CS_ENOMEM, c->line, "out of memory after %zu rows", c->n);
            c->c = nc;
        }
    }
    c->cap = cap;
    return CS_OK;
}

static int take_spectrum(txt *c, const double *v, long line)
{
    double x = v[R_X];
    if (c->x_positive && !(x > 0))
        return io_text_fail(c, CS_EDATA, line,
                            "column %zu: the axis value %.17g %s is not positive", c->cx + 1, x,
                            c->xunit->name);
    if (c->cs != NOCOL && !(v[R_SIGMA] > 0))
        return io_text_fail(c, CS_EDATA, line, "column %zu: sigma %.17g is not positive", c->cs + 1,
                            v[R_SIGMA]);
    if (c->n > 0) {
        if (x == c->prev_x)
            return io_text_fail(c, CS_EDATA, line,
                                "axis value %.17g appears twice, at lines %ld and %ld", x,
                                c->prev_line, line);
        int d = x > c->prev_x ? 1 : -1;
        if (c->dir == 0)
            c->dir = d;
        else if (d != c->dir)
            return io_text_fail(c, CS_EDATA, line,
                                "the axis is not monotonic: it %s up to line %ld and %s at line "
                                "%ld", c->dir > 0 ? "increases" : "decreases", c->prev_line,
                                d > 0 ? "increases" : "decreases", line);
    }
    c->prev_x = x;
    c->prev_line = line;
    c->a[c->n] = x;
    c->b[c->n] = v[R_Y];
    if (c->c)
        c->c[c->n] = v[R_SIGMA];
    return CS_OK;
}

static inline int take_record(txt *c, const double *v, long line)
{
    if (c->has_time) {
        double t = v[R_T] * c->tscale + c->toffset;
        if (c->n == 0) {
            c->t_first = t;
        } else {
            double d = t - c->t_prev;
            if (!(d > 0))
                return io_text_fail(c, CS_EDATA, line,
                                    "time does not increase at line %ld: %.9g s after %.9g s", line,
                                    t, c->t_prev);
            if (c->n == 1) {
                c->step1 = c->dmin = c->dmax = d;
                c->step1_tol = TXT_STEP_TOL * d;
                c->step1_line = c->dmin_line = c->dmax_line = line;
            } else {
                if (fabs(d - c->step1) > c->step1_tol)
                    return io_text_fail(c, CS_EDATA, line,
                                        "non-uniform sampling at line %ld: step %.6g s, expected "
                                        "%.6g s (the first step, lines %ld-%ld; steps must agree "
                                        "within 1 %%)", line, d, c->step1, c->first_data_line,
                                        c->step1_line);
                if (d < c->dmin)
                    c->dmin = d, c->dmin_line = line;
                if (d > c->dmax)
                    c->dmax = d, c->dmax_line = line;
            }
        }
        c->t_prev = t;
    }
    if (c->is_complex) {
        c->a[2 * c->n] = v[R_I];
        c->a[2 * c->n + 1] = v[R_Q];
    } else {
        c->a[c->n] = v[R_Y];
    }
    return CS_OK;
}

/* Before a data row is read: the row limit, and room for the row. */
static inline int row_room(txt *c, long line)
{
    if (c->o->max_samples && c->n >= c->o->max_samples)
        return io_text_fail(c, CS_EDATA, line, "more than %zu rows (the max_samples limit)",
                            c->o->max_samples);
    if (c->n == c->cap)
        return grow(c);
    return CS_OK;
}

/* After a data row is read: its checks, and the row stored and counted. */
static inline int row_take(txt *c, const double *v, long line)
{
    int rc = c->kind == CS_KIND_SPECTRUM ? take_spectrum(c, v, line) : take_record(c, v, line);
    if (rc)
        return rc;
    c->n++;
    c->last_data_line = line;
    return CS_OK;
}

static int data_row(txt *c, char *lb, char *le, long line)
{
    double v[R_COUNT];
    char *p = lb, *fb, *fe;
    size_t col = 0;
    int rc;
    if ((rc = row_room(c, line)))
        return rc;
    for (;;) {
        if (col < c->ncols && c->role[col] && num_field(c->delim, &p, le, &v[c->role[col]])) {
            col++;
            continue;
        }
        if (!next_field(c->delim, &p, le, &fb, &fe))
            break;
        if ((size_t)(fe - fb) > TXT_MAX_FIELD)
            return io_text_fail(c, CS_EFORMAT, line, "column %zu: field longer than %zu bytes",
                                col + 1, TXT_MAX_FIELD);
        if (col < c->ncols && c->role[col]) {
            int r = c->role[col];
            *fe = '\0';
            if (!num_fast(fb, fe, &v[r]) && (rc = field_value(c, fb, fe, col, line, &v[r])))
                return rc;
        }
        col++;
    }
    if (col != c->ncols) {
        char hint[96] = "";
        if (c->delim == ',' && col == 2 * c->ncols)
            snprintf(hint, sizeof hint,
                     " (decimal commas? they are not accepted: convert them to '.')");
        else if (c->header_line && c->n == 0)
            snprintf(hint, sizeof hint, " (the header row, line %ld, has %zu names)",
                     c->header_line, c->ncols);
        return io_text_fail(c, CS_EFORMAT, line, "expected %zu column%s, found %zu%s", c->ncols,
                            c->ncols == 1 ? "" : "s", col, hint);
    }
    return row_take(c, v, line);
}

/*
 * The fast way through a data line, straight from the read buffer: the line at c->pos, when it
 * is complete in the buffer and its fields are what the general way (next_line, then data_row)
 * takes without a question - the fields in use plain decimal numbers that io_decimal_scan
 * decides, possibly with blanks around them, the others anything up to the delimiter - with
 * exactly c->ncols fields. Then it returns the line's '\n', with the values in v as data_row
 * would set them; else NULL, having changed nothing, and the general way takes the line (and
 * says what is wrong with it, if anything).
 * Why both ways agree. The number of a field in use is read by io_decimal_scan_padded, which
 * returns what io_decimal_scan on the NUL-terminated line returns (io_number_impl.h: the line's
 * NUL and this '\n' both end a number), and the blanks around it and the delimiters are
 * checked as num_field checks them; the leading blanks of the line are skipped as run() skips
 * them. A line that would be blank, a comment, too long, or end in a lone '\r' or at the end of
 * the valid bytes (where the padding's NUL stops every scan) is left to the general way; so is
 * an unused field holding '\r' or NUL, or longer than TXT_MAX_FIELD. The line end is "\n" or
 * "\r\n", as next_line cuts it.
 * The buffer holds TXT_PAD zero bytes after its valid ones, so that the eight-byte loads of the
 * scan stay inside it and read only written bytes.
 */
static inline const char *fast_line(const char *b, char d, const unsigned char *role, size_t last,
                                    double *v)
{
    const char *p = b, *s;
    while (is_blank(*p))
        p++;
    if (*p == '#' || *p == '\r' || *p == '\n' || !*p)
        return NULL; /* a comment or a blank line, even when the first column is unused */
    for (size_t col = 0;; col++) {
        int r = role[col];
        if (r) {
            s = io_decimal_scan_padded(p, &v[r]);
            if (!s || (size_t)(s - p) > TXT_MAX_FIELD)
                return NULL;
        } else {
            s = p;
            if (d == ' ') {
                while (*s && *s != '\n' && *s != '\r' && !is_blank(*s))
                    s++;
                if (s == p)
                    return NULL;
            } else {
                while (*s && *s != '\n' && *s != '\r' && *s != d)
                    s++;
            }
            if ((size_t)(s - p) > TXT_MAX_FIELD)
                return NULL;
        }
        if (col == last)
            break;
        /* s: the field's end; then blanks (skipped by num_field as by next_field) and the
         * delimiter */
        if (*s != d) {
            if (d == ' ') {
                if (!is_blank(*s))
                    return NULL;
            } else {
                while (*s != d && is_blank(*s))
                    s++;
                if (*s != d)
                    return NULL;
            }
        }
        p = s + 1;
        if ((unsigned char)*p <= ' ') { /* blanks before the next field (or no field) */
            if (d == ' ')
                while (is_blank(*p))
                    p++;
            else
                while (*p != d && is_blank(*p))
                    p++;
        }
    }
    /* s: the last field's end; then blanks and the line end */
    if (*s != '\n') {
        if (d == ' ')
            while (is_blank(*s))
                s++;
        else
            while (*s != d && is_blank(*s))
                s++;
        s += *s == '\r';
        if (*s != '\n')
            return NULL;
    }
    if ((size_t)(s - b) > TXT_MAX_LINE)
        return NULL;
    return s;
}

/* Data lines the fast way (fast_line), as many as follow: each is counted, checked and stored
 * as data_row does it. CS_OK when the next line is for the general way, or an error code. */
static int fast_rows(txt *c)
{
    const char d = c->delim;
    const unsigned char *role = c->role;
    const size_t last = c->ncols - 1, max = c->o->max_samples;
    const char *buf = c->buf;
    size_t pos = c->pos;
    long line = c->line;
    int rc = CS_OK;
    /* below this row count row_room has nothing to do: n < cap, and n < max when max is set */
    size_t stop = max && max < c->cap ? max : c->cap;
    for (;;) {
        double v[R_COUNT];
        const char *nl = fast_line(buf + pos, d, role, last, v);
        if (!nl)
            break;
        line++;
        pos = (size_t)(nl - buf) + 1;
        if (c->n >= stop) {
            c->line = line; /* grow() names it */
            if ((rc = row_room(c, line)))
                break;
            stop = max && max < c->cap ? max : c->cap;
        }
        if ((rc = row_take(c, v, line)))
            break;
    }
    c->line = line;
    c->pos = c->scan = pos;
    return rc;
}

/* The first non-comment line: delimiter, header or not, column count. */
static int first_line(txt *c, char *lb, char *le, long line, int *is_header)
{
    char q[64];
    c->delim = c->o->delimiter ? c->o->delimiter : detect_delimiter(lb, le);
    char *p = lb, *fb, *fe, *wb = NULL, *we = NULL;
    size_t count = 0, nums = 0, wcol = 0;
    while (next_field(c->delim, &p, le, &fb, &fe)) {
        double v;
        if ((size_t)(fe - fb) > TXT_MAX_FIELD)
            return io_text_fail(c, CS_EFORMAT, line, "column %zu: field longer than %zu bytes",
                                count + 1, TXT_MAX_FIELD);
        if (is_decimal_comma_number(fb, fe))
            return io_text_fail(c, CS_EFORMAT, line,
                                "column %zu: '%s' has a decimal comma: decimal commas are not "
                                "accepted; convert them to '.'", count + 1,
                                quote(fb, fe, q, sizeof q));
        const char *ub = fb, *ue = fe;
        unquote(&ub, &ue);
        if (parses_fully(ub, ue, &v))
            nums++;
        else if (fe > fb && !wb)
            wb = fb, we = fe, wcol = count;
        count++;
    }
    c->ncols = count;
    *is_header = nums == 0;
    if (!wb && nums == 0)
        return io_text_fail(c, CS_EFORMAT, line, "the first row has only empty fields");
    if (wb && nums > 0)
        return bad_field(c, wb, we, wcol, line,
                         " (a header row must hold only names, and a data row only numbers)");
    if (*is_header)
        return store_header(c, lb, le, count, line);
    return CS_OK;
}

/* ---------------------------------------------------------------- the loader */

static int run(txt *c)
{
    char *lb = NULL, *le = NULL;
    int r;
    for (;;) {
        if (c->decided && !c->no_fast && (r = fast_rows(c)))
            return r;
        if ((r = next_line(c, &lb, &le)) != 1)
            break;
        long line = c->line;
        if (line == 1) {
            if (le - lb >= 3 && memcmp(lb, "\xEF\xBB\xBF", 3) == 0)
                lb += 3;
            else if (le - lb >= 2 &&
                     (memcmp(lb, "\xFF\xFE", 2) == 0 || memcmp(lb, "\xFE\xFF", 2) == 0))
                return io_text_fail(c, CS_EFORMAT, 1,
                                    "the file is UTF-16 text: save it as UTF-8 (or ASCII) text");
        }
        char *p = lb;
        while (p < le && is_blank(*p))
            p++;
        if (p == le)
            continue;
        if (*p == '#') {
            if ((r = comment(c, p + 1, line)))
                return r;
            continue;
        }
        if (!c->ncols) {
            int is_header = 0;
            if ((r = first_line(c, p, le, line, &is_header)))
                return r;
            if (is_header)
                continue;
        }
        if (!c->decided && (r = io_text_decide(c, line)))
            return r;
        if ((r = data_row(c, p, le, line)))
            return r;
        /* a data row the fast way did not take (or the first one): when such rows are not rare
         * (quoted fields, numbers of more than 19 digits), the fast way would only add a failed
         * try to every row, and it is given up */
        if (++c->slow_rows > 64 && c->slow_rows > c->n / 4)
            c->no_fast = 1;
    }
    return r;
}

int cs_io_text_load(const char *path, const cs_load_options *o, cs_loaded *out, cs_error *err)
{
    cs_load_options defaults;
    if (!o) {
        cs_load_options_init(&defaults);
        o = &defaults;
    }
    if (!path || !out)
        return cs_error_set(err, CS_EINVAL, path, -1, -1, "no file given");
    char d = o->delimiter;
    if (d && (d == '#' || d == '.' || d == '-' || d == '+' || d == '"' || d == '\n' || d == '\r' ||
              (d >= '0' && d <= '9') || (d >= 'a' && d <= 'z') || (d >= 'A' && d <= 'Z')))
        return cs_error_set(err, CS_EINVAL, path, -1, -1,
                            "the character '%c' cannot be a delimiter", d);
    txt c;
    memset(&c, 0, sizeof c);
    c.path = path;
    c.o = o;
    c.out = out;
    c.err = err;
    cs_meta_init(&c.meta);
    c.f = fopen(path, "rb");
    if (!c.f)
        return cs_error_set(err, CS_EIO, path, -1, -1, "cannot open: %s", strerror(errno));
    c.buf = malloc(TXT_BUF_BYTES + TXT_PAD);
    int rc = c.buf ? run(&c) : io_text_fail(&c, CS_ENOMEM, -1, "out of memory for the read buffer");
    if (rc == CS_OK)
        rc = io_text_finish(&c);
    fclose(c.f);
    free(c.buf);
    free(c.hdr);
    free(c.hdr_block);
    free(c.role);
    free(c.a);
    free(c.b);
    free(c.c);
    cs_meta_release(&c.meta);
    if (rc == CS_OK)
        out->format = CS_FORMAT_TEXT;
    return rc;
}
