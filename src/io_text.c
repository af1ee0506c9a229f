/* Delimited text (CSV, TSV, ';', blanks): streaming loader into spectra and records; writers. */
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
 * What the table holds: the kind decision
 * ---------------------------------------
 * The first rule that applies decides whether the file is a spectrum or a record:
 *   1. o->kind;
 *   2. column options: t/i/q columns mean a record, x/sigma columns a spectrum (both: CS_EINVAL);
 *   3. the first column's header: base name "time"/"t" or a time unit means a record; base name
 *      frequency, freq, nu, detuning, wavelength, lambda, wavenumber or a spectral unit (frequency,
 *      wavenumber, length) means a spectrum;
 *   4. metadata "kind = record | spectrum";
 *   5. metadata sample_rate, sample_interval or dt, with 1 or 2 columns: a record;
 *   6. the dimension of o->t_unit (a record) or o->x_unit (a time: a record; else a spectrum);
 *   7. a single column: a record (one column can only be samples);
 *   8. otherwise a spectrum with its axis in Hz (x_unit_assumed = 1, and a note says so).
 * The decision is taken at the first data row, with the metadata seen so far. Metadata that
 * would have changed it but comes later (a "kind" line, or a sample rate after 1- or 2-column
 * data that rules 6-8 took as a spectrum) is refused, naming its line, not quietly ignored.
 *
 * Spectrum: x = column 1 (or x_col), sigma = sigma_col or a column named sigma, err, error or
 * uncertainty, y = y_col or the first other column. The axis unit comes from o->x_unit or the
 * header (the option wins; a note says so when they differ). The axis must be strictly monotonic
 * in the file: checked row by row on the values as written (the unit conversions are monotonic),
 * so the error names the line where the direction changes, or both lines of a repeated value.
 * At the end the axis is converted to Hz (cs_axis_to_hz, with the Jacobian when y is a density)
 * and, when it came out decreasing (wavelengths), all arrays are reversed to ascending order.
 *
 * Record: a time column (t_col, or the first column named time/t or with a time unit, or -
 * when no sample rate is known at the first data row, and the file has no header or a time unit
 * option was given - column 1), and samples: i_col/q_col,
 * or a header pair named i/q, re/im or real/imag (complex), else y_col or the first other column
 * (real). Without a time column: one column is real samples, two unnamed columns are I and Q;
 * the sample rate then comes from o->sample_rate_hz, else metadata sample_rate (a frequency),
 * sample_interval or dt (a time); t0 from o->t0_s when non-zero, else metadata t0, else 0.
 * With a time column, the column gives t0 and dt; a metadata sample rate that disagrees by more
 * than 1 % only earns a note.
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
 * The file is read in 4 MiB chunks into one buffer; lines are found with memchr and handled in
 * place. A partial last line is moved to the front of the buffer before the next read (since a
 * line is at most 1 MiB, there is always room). Fields are found one at a time, and a field in
 * use is NUL-terminated in place and converted by num_fast() - the one place to swap in a
 * faster number parser later. Nothing is allocated per line or per field: values go straight
 * into arrays grown geometrically with realloc and shrunk to size at the end, which become the
 * arrays of the spectrum or record without a copy. Slow work (messages, decimal-comma and
 * quote handling) happens only when a field fails the fast path.
 * strtod follows LC_NUMERIC: collshift keeps the "C" locale, where the decimal point is '.'.
 */
#include <collshift/io.h>

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
#define TXT_STEP_TOL 0.01               /* uniform sampling: relative tolerance of each step */
#define TXT_FIRST_CAP ((size_t)4096)    /* first array capacity, rows */
#define NOCOL ((size_t)-1)

/* Roles of columns. */
enum { R_NONE = 0, R_X, R_Y, R_SIGMA, R_T, R_I, R_Q, R_COUNT };

/* How the kind was decided (the rule number of the file comment). */
enum { BY_KIND = 1, BY_OPTIONS, BY_HEADER, BY_META_KIND, BY_META_RATE, BY_UNIT_OPTION,
       BY_ONE_COLUMN, BY_DEFAULT };

typedef struct col_name {
    char *name;            /* as in the header, trimmed, quotes removed */
    char *base;            /* name without its unit */
    const cs_unit *unit;   /* unit of the name, or NULL */
} col_name;

typedef struct txt {
    const char *path;
    const cs_load_options *o;
    cs_loaded *out;
    cs_error *err;

    /* reader */
    FILE *f;
    char *buf;             /* TXT_BUF_BYTES + 1 */
    size_t len, pos, scan; /* valid bytes, start of the next line, where to resume memchr */
    int eof;
    long line;             /* physical line number of the current line */

    /* table shape */
    char delim;            /* 0 undecided; ' ' runs of blanks */
    size_t ncols;          /* 0 until the first non-comment line */
    long header_line;      /* 0 when the file has no header */
    col_name *hdr;
    char *hdr_block;
    unsigned char *role;   /* ncols roles */

    /* decision */
    int decided, by;
    cs_kind kind;
    size_t cx, cy, cs, ct, ci, cq;
    int is_complex, has_time;
    const cs_unit *xunit;
    int x_assumed, x_positive;
    double tscale, toffset;
    const cs_unit *tunit;
    int meta_note_done;
    cs_meta meta;

    /* data */
    size_t n, cap;
    double *a, *b, *c;     /* spectrum: x, y, sigma; record: samples (a) */
    long first_data_line, last_data_line;
    double prev_x;
    long prev_line;
    int dir;               /* spectrum axis direction: +1, -1, 0 unknown yet */
    double t_first, t_prev, step1, dmin, dmax;
    long step1_line, dmin_line, dmax_line;
} txt;

/* ---------------------------------------------------------------- small helpers */

static char *dup_cstr(const char *s)
{
    size_t n = strlen(s) + 1;
    char *d = malloc(n);
    if (d)
        memcpy(d, s, n);
    return d;
}

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

static int fail(txt *c, int code, long line, const char *fmt, ...)
#if defined(__GNUC__)
    __attribute__((format(printf, 4, 5)))
#endif
    ;

static int fail(txt *c, int code, long line, const char *fmt, ...)
{
    char msg[CS_ERROR_MSG_MAX];
    va_list ap;
    va_start(ap, fmt);
    vsnprintf(msg, sizeof msg, fmt, ap);
    va_end(ap);
    return cs_error_set(c->err, code, c->path, line, -1, "%s", msg);
}

/* An error from another module (no file, maybe no line): add ours. */
static int adopt(txt *c, int rc, long line)
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
                return fail(c, CS_EFORMAT, c->line, "line longer than %zu bytes (1 MiB)",
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
            return fail(c, CS_EFORMAT, c->line + 1, "line longer than %zu bytes (1 MiB)",
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
        if (got < want) {
            if (ferror(c->f))
                return fail(c, CS_EIO, c->line + 1, "read error: %s", strerror(errno));
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

/* The fast path: [b, e) with *e == '\0' is a finite decimal number. Replace this function to
 * change the number parser; the slow path (field_value) explains every refusal. */
static inline int num_fast(const char *b, const char *e, double *v)
{
    char *end;
    *v = strtod(b, &end);
    if (end != e || b == e || !isfinite(*v))
        return 0;
    const char *h = b + (*b == '-' || *b == '+');
    return !(h[0] == '0' && (h[1] == 'x' || h[1] == 'X'));
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
        return fail(c, CS_EFORMAT, line, "column %zu is empty", col + 1);
    quote(b, e, q, sizeof q);
    if (memchr(b, '\r', (size_t)(e - b)))
        return fail(c, CS_EFORMAT, line,
                    "column %zu: '%s' holds a carriage return: the file seems to use lone CR "
                    "line endings; convert them to LF or CRLF", col + 1, q);
    unquote(&b, &e);
    if (is_decimal_comma_number(b, e))
        return fail(c, CS_EFORMAT, line,
                    "column %zu: '%s' has a decimal comma: decimal commas are not accepted; "
                    "convert them to '.'", col + 1, q);
    if (parses_fully(b, e, &x)) {
        const char *h = b + (*b == '-' || *b == '+');
        if (h[0] == '0' && (h[1] == 'x' || h[1] == 'X'))
            return fail(c, CS_EFORMAT, line,
                        "column %zu: '%s' is hexadecimal: only decimal numbers are accepted",
                        col + 1, q);
        if (isnan(x))
            return fail(c, CS_EDATA, line, "column %zu: '%s' is NaN (not a number)", col + 1, q);
        if (memchr(b, 'i', (size_t)(e - b)) || memchr(b, 'I', (size_t)(e - b)))
            return fail(c, CS_EDATA, line, "column %zu: '%s' is infinite", col + 1, q);
        return fail(c, CS_EDATA, line, "column %zu: '%s' is too large for a double (infinite)",
                    col + 1, q);
    }
    return fail(c, CS_EFORMAT, line, "column %zu: '%s' is not a number%s", col + 1, q, extra);
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

/* ---------------------------------------------------------------- header */

static int name_in(const char *s, const char *const *list)
{
    for (; *list; list++)
        if (strcasecmp(s, *list) == 0)
            return 1;
    return 0;
}

static const char *const time_names[] = {"time", "t", NULL};
static const char *const axis_names[] = {"frequency", "freq", "nu", "detuning", "wavelength",
                                         "lambda", "wavenumber", NULL};
static const char *const needs_unit_names[] = {"wavelength", "lambda", "wavenumber", NULL};
static const char *const sigma_names[] = {"sigma", "err", "error", "uncertainty", NULL};

static int spectral_dim(cs_dim d)
{
    return d == CS_DIM_FREQUENCY || d == CS_DIM_WAVENUMBER || d == CS_DIM_LENGTH;
}

/* What a column name says about the kind. */
static cs_kind name_kind(const col_name *h)
{
    if (h->unit && h->unit->dim == CS_DIM_TIME)
        return CS_KIND_RECORD;
    if (h->unit && spectral_dim(h->unit->dim))
        return CS_KIND_SPECTRUM;
    if (name_in(h->base, time_names))
        return CS_KIND_RECORD;
    if (name_in(h->base, axis_names))
        return CS_KIND_SPECTRUM;
    return CS_KIND_AUTO;
}

/* Store the header row [b, e) of count fields. */
static int store_header(txt *c, char *b, char *e, size_t count, long line)
{
    size_t len = (size_t)(e - b) + 1;
    c->hdr = calloc(count, sizeof *c->hdr);
    c->hdr_block = malloc(2 * len + 2 * count);
    if (!c->hdr || !c->hdr_block)
        return fail(c, CS_ENOMEM, line, "out of memory for the header");
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

/* "'a', 'b', 'c'" (shortened) for messages. */
static const char *header_list(const txt *c, char *out, size_t n)
{
    size_t k = 0;
    out[0] = '\0';
    for (size_t i = 0; i < c->ncols; i++) {
        int w = snprintf(out + k, n - k, "%s'%s'", i ? ", " : "", c->hdr[i].name);
        if (w < 0 || (size_t)w >= n - k || k + (size_t)w > n - 8) {
            snprintf(out + (k < n - 6 ? k : n - 6), 6, ", ...");
            break;
        }
        k += (size_t)w;
    }
    return out;
}

/* Resolve a column given as a 1-based number or a header name (exact, then without its unit). */
static int resolve_col(txt *c, const char *spec, const char *what, size_t *col)
{
    char list[320];
    long hl = c->header_line ? c->header_line : -1;
    size_t i = 0;
    while (spec[i] >= '0' && spec[i] <= '9')
        i++;
    if (i > 0 && spec[i] == '\0') {
        char *end;
        errno = 0;
        unsigned long k = strtoul(spec, &end, 10);
        if (errno || k == 0 || k > c->ncols) {
            if (c->header_line)
                return fail(c, CS_EINVAL, hl,
                            "column %s (%s) does not exist: the file has %zu column%s: %s", spec,
                            what, c->ncols, c->ncols == 1 ? "" : "s",
                            header_list(c, list, sizeof list));
            return fail(c, CS_EINVAL, hl,
                        "column %s (%s) does not exist: the file has %zu column%s", spec, what,
                        c->ncols, c->ncols == 1 ? "" : "s");
        }
        *col = (size_t)k - 1;
        return CS_OK;
    }
    if (!c->header_line)
        return fail(c, CS_EINVAL, hl,
                    "column '%s' (%s): the file has no header row, so give a column number 1..%zu",
                    spec, what, c->ncols);
    for (size_t k = 0; k < c->ncols; k++)
        if (strcasecmp(c->hdr[k].name, spec) == 0) {
            *col = k;
            return CS_OK;
        }
    size_t found = NOCOL;
    for (size_t k = 0; k < c->ncols; k++) {
        if (strcasecmp(c->hdr[k].base, spec) != 0)
            continue;
        if (found != NOCOL)
            return fail(c, CS_EINVAL, hl, "column '%s' (%s) is ambiguous: it matches '%s' and '%s'",
                        spec, what, c->hdr[found].name, c->hdr[k].name);
        found = k;
    }
    if (found == NOCOL)
        return fail(c, CS_EINVAL, hl, "no column '%s' (%s): the header has %s", spec, what,
                    header_list(c, list, sizeof list));
    *col = found;
    return CS_OK;
}

/* A unit written in brackets that the unit table does not know ("frequency [furlong]"). */
static int unknown_bracket_unit(txt *c, size_t col, const char *what)
{
    if (!c->header_line || c->hdr[col].unit)
        return CS_OK;
    const char *s = c->hdr[col].name;
    size_t n = strlen(s);
    if (n < 3 || (s[n - 1] != ']' && s[n - 1] != ')'))
        return CS_OK;
    const char *open = strrchr(s, s[n - 1] == ']' ? '[' : '(');
    if (!open || open == s)
        return CS_OK;
    return fail(c, CS_EUNIT, c->header_line, "unknown unit '%.*s' in the %s column '%s'",
                (int)(s + n - 1 - open - 1), open + 1, what, s);
}

/* ---------------------------------------------------------------- the decision */

static const char *col_label(const txt *c, size_t col, char *out, size_t n)
{
    if (c->header_line && c->hdr[col].name[0])
        snprintf(out, n, "%zu '%s'", col + 1, c->hdr[col].name);
    else
        snprintf(out, n, "%zu", col + 1);
    return out;
}

/* Metadata that gives a sample rate: sample_rate, sample_interval or dt. */
static int meta_says_rate(const txt *c)
{
    return cs_meta_find(&c->meta, "sample_rate") || cs_meta_find(&c->meta, "sample_interval") ||
           cs_meta_find(&c->meta, "dt");
}

/* Metadata "kind": CS_KIND_AUTO when absent; -1 when it holds something else. */
static int meta_kind(const txt *c, long *line)
{
    const cs_meta_entry *e = cs_meta_find(&c->meta, "kind");
    if (!e)
        return CS_KIND_AUTO;
    *line = e->line;
    if (strcasecmp(e->text, "record") == 0)
        return CS_KIND_RECORD;
    if (strcasecmp(e->text, "spectrum") == 0)
        return CS_KIND_SPECTRUM;
    return -1;
}

static int option_unit(txt *c, const char *name, const char *what, const cs_unit **u)
{
    *u = NULL;
    if (!name || !*name)
        return CS_OK;
    *u = cs_unit_find(name);
    if (!*u)
        return fail(c, CS_EUNIT, -1, "unknown unit '%s' given for the %s", name, what);
    return CS_OK;
}

static int same_unit(const cs_unit *a, const cs_unit *b)
{
    return a == b || (a->dim == b->dim && a->scale == b->scale && a->offset == b->offset);
}

static int decide_spectrum(txt *c, const cs_unit *ox, long line)
{
    const cs_load_options *o = c->o;
    char l1[96], l2[96];
    int rc;
    c->cx = 0;
    c->cy = c->cs = NOCOL;
    if (o->x_col && (rc = resolve_col(c, o->x_col, "x", &c->cx)))
        return rc;
    if (o->y_col && (rc = resolve_col(c, o->y_col, "y", &c->cy)))
        return rc;
    if (o->sigma_col && (rc = resolve_col(c, o->sigma_col, "sigma", &c->cs)))
        return rc;
    if (c->ncols < 2)
        return fail(c, CS_EFORMAT, line,
                    "a spectrum needs 2 columns (axis and values); the file has 1");
    if (!o->sigma_col && c->header_line)
        for (size_t k = 0; k < c->ncols && c->cs == NOCOL; k++)
            if (k != c->cx && k != c->cy && name_in(c->hdr[k].base, sigma_names))
                c->cs = k;
    for (size_t k = 0; k < c->ncols && c->cy == NOCOL; k++)
        if (k != c->cx && k != c->cs)
            c->cy = k;
    if (c->cy == NOCOL)
        return fail(c, CS_EINVAL, line, "no column left for y");
    if (c->cx == c->cy || c->cx == c->cs || c->cy == c->cs) {
        size_t dup = c->cx == c->cy || c->cx == c->cs ? c->cx : c->cy;
        return fail(c, CS_EINVAL, line, "column %s is given two roles (x, y, sigma)",
                    col_label(c, dup, l1, sizeof l1));
    }

    /* the axis unit */
    const cs_unit *hu = c->header_line ? c->hdr[c->cx].unit : NULL;
    if (!ox && (rc = unknown_bracket_unit(c, c->cx, "axis")))
        return rc;
    const cs_unit *u = ox ? ox : hu;
    if (ox && hu && !same_unit(ox, hu))
        cs_loaded_note(c->out, "axis unit %s (option) overrides %s from column '%s'", ox->name,
                       hu->name, c->hdr[c->cx].name);
    if (u && !spectral_dim(u->dim))
        return fail(c, CS_EUNIT, ox ? -1 : c->header_line,
                    "the axis unit '%s' measures %s; a spectrum axis needs a frequency, "
                    "wavenumber or wavelength unit", u->name, cs_dim_name(u->dim));
    if (!u) {
        if (c->header_line && name_in(c->hdr[c->cx].base, needs_unit_names))
            return fail(c, CS_EUNIT, c->header_line,
                        "the axis column '%s' has no unit: write it as '%s_nm' (or similar), or "
                        "give the axis unit", c->hdr[c->cx].name, c->hdr[c->cx].base);
        u = cs_unit_find("Hz");
        if (!u)
            return fail(c, CS_EUNIT, -1, "the unit table has no Hz");
        c->x_assumed = 1;
        cs_loaded_note(c->out, "no axis unit given: Hz assumed");
    }
    if (o->air && u->dim != CS_DIM_LENGTH)
        return fail(c, CS_EINVAL, -1,
                    "standard-air wavelengths were requested, but the axis is in %s, not a "
                    "wavelength", u->name);
    c->xunit = u;
    c->x_positive = u->dim != CS_DIM_FREQUENCY;
    c->role[c->cx] = R_X;
    c->role[c->cy] = R_Y;
    if (c->cs != NOCOL)
        c->role[c->cs] = R_SIGMA;
    size_t used = 2 + (c->cs != NOCOL);
    if (c->ncols > used)
        cs_loaded_note(c->out, "x = column %s, y = column %s; %zu other column%s not used",
                       col_label(c, c->cx, l1, sizeof l1), col_label(c, c->cy, l2, sizeof l2),
                       c->ncols - used, c->ncols - used == 1 ? "" : "s");
    return CS_OK;
}

/* The i/q pair of a header (i/q, re/im, real/imag), avoiding column skip. */
static int find_iq_pair(const txt *c, size_t skip, size_t *ci, size_t *cq)
{
    static const char *const pairs[][2] = {{"i", "q"}, {"re", "im"}, {"real", "imag"}};
    for (size_t p = 0; p < sizeof pairs / sizeof pairs[0]; p++) {
        size_t a = NOCOL, b = NOCOL;
        for (size_t k = 0; k < c->ncols; k++) {
            if (k == skip)
                continue;
            if (a == NOCOL && strcasecmp(c->hdr[k].base, pairs[p][0]) == 0)
                a = k;
            else if (b == NOCOL && strcasecmp(c->hdr[k].base, pairs[p][1]) == 0)
                b = k;
        }
        if (a != NOCOL && b != NOCOL) {
            *ci = a;
            *cq = b;
            return 1;
        }
    }
    return 0;
}

static int decide_record(txt *c, const cs_unit *ot, long line)
{
    const cs_load_options *o = c->o;
    char l1[96];
    int rc;
    int rate_known = o->sample_rate_hz > 0 || meta_says_rate(c);
    c->ct = c->ci = c->cq = c->cy = NOCOL;
    if (o->i_col || o->q_col) {
        if (!o->i_col || !o->q_col)
            return fail(c, CS_EINVAL, -1, "give both the I and the Q column, or neither");
        if ((rc = resolve_col(c, o->i_col, "I", &c->ci)) ||
            (rc = resolve_col(c, o->q_col, "Q", &c->cq)))
            return rc;
    }
    if (o->y_col && (rc = resolve_col(c, o->y_col, "y", &c->cy)))
        return rc;
    if (c->cy != NOCOL && c->ci != NOCOL)
        return fail(c, CS_EINVAL, -1, "give either a y column or I and Q columns, not both");
    if (o->t_col) {
        if ((rc = resolve_col(c, o->t_col, "time", &c->ct)))
            return rc;
    } else if (c->header_line) {
        for (size_t k = 0; k < c->ncols && c->ct == NOCOL; k++)
            if (k != c->cy && k != c->ci && k != c->cq && name_kind(&c->hdr[k]) == CS_KIND_RECORD)
                c->ct = k;
    }
    if (c->ct == NOCOL && !rate_known && c->ncols >= 2 && (!c->header_line || ot) && c->cy != 0 &&
        c->ci != 0 && c->cq != 0)
        c->ct = 0;

    /* the samples */
    int named_iq = c->ci == NOCOL && c->cy == NOCOL && c->header_line &&
                   find_iq_pair(c, c->ct, &c->ci, &c->cq);
    if (!named_iq && c->ci == NOCOL && c->cy == NOCOL) {
        size_t others = c->ncols - (c->ct != NOCOL);
        if (others == 0)
            return fail(c, CS_EFORMAT, line, "the file has only a time column: no samples");
        if (c->ct == NOCOL && !c->header_line && c->ncols == 2) {
            c->ci = 0;
            c->cq = 1;
            cs_loaded_note(c->out,
                           "2 unnamed columns without a time axis: read as I and Q samples");
        } else if (c->ct == NOCOL && !c->header_line && c->ncols > 2) {
            return fail(c, CS_EINVAL, line,
                        "%zu unnamed columns and no time column: say which hold the samples (y, "
                        "or I and Q)", c->ncols);
        } else {
            for (size_t k = 0; k < c->ncols && c->cy == NOCOL; k++)
                if (k != c->ct)
                    c->cy = k;
        }
    }
    size_t cols[4] = {c->ct, c->cy, c->ci, c->cq};
    for (size_t i = 0; i < 4; i++)
        for (size_t j = i + 1; j < 4; j++)
            if (cols[i] != NOCOL && cols[i] == cols[j])
                return fail(c, CS_EINVAL, line, "column %s is given two roles (time, y, I, Q)",
                            col_label(c, cols[i], l1, sizeof l1));
    c->is_complex = c->ci != NOCOL;
    c->has_time = c->ct != NOCOL;

    if (c->has_time) {
        const cs_unit *hu = c->header_line ? c->hdr[c->ct].unit : NULL;
        if (!ot && (rc = unknown_bracket_unit(c, c->ct, "time")))
            return rc;
        const cs_unit *u = ot ? ot : hu;
        if (ot && hu && !same_unit(ot, hu))
            cs_loaded_note(c->out, "time unit %s (option) overrides %s from column '%s'", ot->name,
                           hu->name, c->hdr[c->ct].name);
        if (u && u->dim != CS_DIM_TIME)
            return fail(c, CS_EUNIT, ot ? -1 : c->header_line,
                        "the time column %s has unit '%s', which measures %s, not time",
                        col_label(c, c->ct, l1, sizeof l1), u->name, cs_dim_name(u->dim));
        if (!u) {
            u = cs_unit_find("s");
            if (!u)
                return fail(c, CS_EUNIT, -1, "the unit table has no s");
            cs_loaded_note(c->out, "no time unit given: s assumed");
        }
        c->tunit = u;
        c->tscale = u->scale;
        c->toffset = u->offset;
        c->role[c->ct] = R_T;
    }
    if (c->is_complex) {
        c->role[c->ci] = R_I;
        c->role[c->cq] = R_Q;
    } else {
        c->role[c->cy] = R_Y;
    }
    size_t used = (size_t)c->has_time + (c->is_complex ? 2u : 1u);
    if (c->ncols > used)
        cs_loaded_note(c->out, "%zu of %zu columns not used", c->ncols - used, c->ncols);
    return CS_OK;
}

/* Decide kind and columns at the first data row. */
static int decide(txt *c, long line)
{
    const cs_load_options *o = c->o;
    const cs_unit *ox, *ot;
    int rc;
    if ((rc = option_unit(c, o->x_unit, "axis", &ox)) ||
        (rc = option_unit(c, o->t_unit, "time axis", &ot)))
        return rc;
    if (ot && ot->dim != CS_DIM_TIME)
        return fail(c, CS_EUNIT, -1, "the time unit '%s' measures %s, not time", ot->name,
                    cs_dim_name(ot->dim));
    int want_rec = o->t_col || o->i_col || o->q_col, want_spec = o->x_col || o->sigma_col;
    cs_kind k = CS_KIND_AUTO;
    long ml = -1;
    int mk = meta_kind(c, &ml);
    if (mk < 0)
        return fail(c, CS_EFORMAT, ml, "metadata 'kind' must be 'record' or 'spectrum'");
    if (o->kind == CS_KIND_SPECTRUM || o->kind == CS_KIND_RECORD) {
        k = o->kind;
        c->by = BY_KIND;
        if ((k == CS_KIND_SPECTRUM && want_rec) || (k == CS_KIND_RECORD && want_spec))
            return fail(c, CS_EINVAL, -1, "a %s was requested, but %s columns were given",
                        cs_kind_name(k), want_rec ? "time/I/Q" : "x/sigma");
    } else if (want_rec && want_spec) {
        return fail(c, CS_EINVAL, -1,
                    "time/I/Q columns and x/sigma columns were both given: a file is a record or "
                    "a spectrum");
    } else if (want_rec || want_spec) {
        k = want_rec ? CS_KIND_RECORD : CS_KIND_SPECTRUM;
        c->by = BY_OPTIONS;
    } else if (c->header_line && name_kind(&c->hdr[0]) != CS_KIND_AUTO) {
        k = name_kind(&c->hdr[0]);
        c->by = BY_HEADER;
    } else if (mk != CS_KIND_AUTO) {
        k = (cs_kind)mk;
        c->by = BY_META_KIND;
    } else if (meta_says_rate(c) && c->ncols <= 2) {
        k = CS_KIND_RECORD;
        c->by = BY_META_RATE;
    } else if (ot || ox) {
        k = ot || ox->dim == CS_DIM_TIME ? CS_KIND_RECORD : CS_KIND_SPECTRUM;
        c->by = BY_UNIT_OPTION;
    } else if (c->ncols == 1) {
        k = CS_KIND_RECORD;
        c->by = BY_ONE_COLUMN;
    } else {
        k = CS_KIND_SPECTRUM;
        c->by = BY_DEFAULT;
    }
    c->kind = k;
    c->role = calloc(c->ncols, 1);
    if (!c->role)
        return fail(c, CS_ENOMEM, line, "out of memory");
    if (k == CS_KIND_SPECTRUM)
        rc = decide_spectrum(c, ox, line);
    else
        rc = decide_record(c, ot ? ot : (ox && ox->dim == CS_DIM_TIME ? ox : NULL), line);
    if (rc)
        return rc;
    c->decided = 1;
    c->first_data_line = line;
    return CS_OK;
}

/* ---------------------------------------------------------------- comments and metadata */

static int comment(txt *c, char *content, long line)
{
    if (!strchr(content, '='))
        return CS_OK;
    cs_error e;
    cs_error_clear(&e);
    int rc = cs_meta_parse_line(&c->meta, content, c->path, line, &e);
    if (rc == CS_ENOMEM)
        return fail(c, CS_ENOMEM, line, "out of memory");
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
#define KEY_IS(s) (kn == sizeof(s) - 1 && strncasecmp(kb, s, kn) == 0)
    if (KEY_IS("kind")) {
        long ml = line;
        int mk = meta_kind(c, &ml);
        if (mk < 0)
            return fail(c, CS_EFORMAT, line, "metadata 'kind' must be 'record' or 'spectrum'");
        if (c->decided && c->by >= BY_META_KIND && (cs_kind)mk != c->kind)
            return fail(c, CS_EFORMAT, line,
                        "metadata 'kind = %s' comes after the first data row (line %ld), which "
                        "was read as a %s: move it above the data", cs_kind_name((cs_kind)mk),
                        c->first_data_line, cs_kind_name(c->kind));
    } else if ((KEY_IS("sample_rate") || KEY_IS("sample_interval") || KEY_IS("dt")) &&
               c->decided &&
               c->by > BY_META_RATE && c->kind == CS_KIND_SPECTRUM && c->ncols <= 2) {
        return fail(c, CS_EFORMAT, line,
                    "metadata '%.*s' comes after the first data row (line %ld), which was read as "
                    "a spectrum: move it above the data", (int)kn, kb, c->first_data_line);
    }
#undef KEY_IS
    return CS_OK;
}

/* ---------------------------------------------------------------- rows */

static int grow(txt *c)
{
    size_t cap = c->cap ? 2 * c->cap : TXT_FIRST_CAP;
    if (cap > (size_t)-1 / (2 * sizeof(double)))
        return fail(c, CS_ENOMEM, c->line, "too many rows");
    size_t wa = c->kind == CS_KIND_RECORD && c->is_complex ? 2 : 1;
    double *na = realloc(c->a, cap * wa * sizeof(double));
    if (!na)
        return fail(c, CS_ENOMEM, c->line, "out of memory after %zu rows", c->n);
    c->a = na;
    if (c->kind == CS_KIND_SPECTRUM) {
        double *nb = realloc(c->b, cap * sizeof(double));
        if (!nb)
            return fail(c, CS_ENOMEM, c->line, "out of memory after %zu rows", c->n);
        c->b = nb;
        if (c->cs != NOCOL) {
            double *nc = realloc(c->c, cap * sizeof(double));
            if (!nc)
                return fail(c, CS_ENOMEM, c->line, "out of memory after %zu rows", c->n);
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
        return fail(c, CS_EDATA, line, "column %zu: the axis value %.17g %s is not positive",
                    c->cx + 1, x, c->xunit->name);
    if (c->cs != NOCOL && !(v[R_SIGMA] > 0))
        return fail(c, CS_EDATA, line, "column %zu: sigma %.17g is not positive", c->cs + 1,
                    v[R_SIGMA]);
    if (c->n > 0) {
        if (x == c->prev_x)
            return fail(c, CS_EDATA, line, "axis value %.17g appears twice, at lines %ld and %ld",
                        x, c->prev_line, line);
        int d = x > c->prev_x ? 1 : -1;
        if (c->dir == 0)
            c->dir = d;
        else if (d != c->dir)
            return fail(c, CS_EDATA, line,
                        "the axis is not monotonic: it %s up to line %ld and %s at line %ld",
                        c->dir > 0 ? "increases" : "decreases", c->prev_line,
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

static int take_record(txt *c, const double *v, long line)
{
    if (c->has_time) {
        double t = v[R_T] * c->tscale + c->toffset;
        if (c->n == 0) {
            c->t_first = t;
        } else {
            double d = t - c->t_prev;
            if (!(d > 0))
                return fail(c, CS_EDATA, line,
                            "time does not increase at line %ld: %.9g s after %.9g s", line, t,
                            c->t_prev);
            if (c->n == 1) {
                c->step1 = c->dmin = c->dmax = d;
                c->step1_line = c->dmin_line = c->dmax_line = line;
            } else {
                if (fabs(d - c->step1) > TXT_STEP_TOL * c->step1)
                    return fail(c, CS_EDATA, line,
                                "non-uniform sampling at line %ld: step %.6g s, expected %.6g s "
                                "(the first step, lines %ld-%ld; steps must agree within 1 %%)",
                                line, d, c->step1, c->first_data_line, c->step1_line);
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

static int data_row(txt *c, char *lb, char *le, long line)
{
    double v[R_COUNT];
    char *p = lb, *fb, *fe;
    size_t col = 0;
    int rc;
    if (c->o->max_samples && c->n >= c->o->max_samples)
        return fail(c, CS_EDATA, line, "more than %zu rows (the max_samples limit)",
                    c->o->max_samples);
    if (c->n == c->cap && (rc = grow(c)))
        return rc;
    while (next_field(c->delim, &p, le, &fb, &fe)) {
        if ((size_t)(fe - fb) > TXT_MAX_FIELD)
            return fail(c, CS_EFORMAT, line, "column %zu: field longer than %zu bytes", col + 1,
                        TXT_MAX_FIELD);
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
        return fail(c, CS_EFORMAT, line, "expected %zu column%s, found %zu%s", c->ncols,
                    c->ncols == 1 ? "" : "s", col, hint);
    }
    rc = c->kind == CS_KIND_SPECTRUM ? take_spectrum(c, v, line) : take_record(c, v, line);
    if (rc)
        return rc;
    c->n++;
    c->last_data_line = line;
    return CS_OK;
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
            return fail(c, CS_EFORMAT, line, "column %zu: field longer than %zu bytes", count + 1,
                        TXT_MAX_FIELD);
        if (is_decimal_comma_number(fb, fe))
            return fail(c, CS_EFORMAT, line,
                        "column %zu: '%s' has a decimal comma: decimal commas are not accepted; "
                        "convert them to '.'", count + 1, quote(fb, fe, q, sizeof q));
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
        return fail(c, CS_EFORMAT, line, "the first row has only empty fields");
    if (wb && nums > 0)
        return bad_field(c, wb, we, wcol, line,
                         " (a header row must hold only names, and a data row only numbers)");
    if (*is_header)
        return store_header(c, lb, le, count, line);
    return CS_OK;
}

/* ---------------------------------------------------------------- finishing */

static double *shrink(double *p, size_t n)
{
    double *q = realloc(p, (n ? n : 1) * sizeof(double));
    return q ? q : p;
}

static void reverse(double *v, size_t n)
{
    if (!v || n < 2)
        return;
    for (size_t i = 0, j = n - 1; i < j; i++, j--) {
        double t = v[i];
        v[i] = v[j];
        v[j] = t;
    }
}

static int finish_spectrum(txt *c)
{
    const cs_load_options *o = c->o;
    cs_axis_conversion conv = {0};
    conv.air = o->air;
    conv.y_is_density = o->y_is_density;
    cs_error_clear(c->err);
    int rc = cs_axis_to_hz(c->a, c->b, c->c, c->n, c->xunit, &conv, c->err);
    if (rc)
        return adopt(c, rc, -1);
    conv.reversed = 0;
    if (c->n >= 2 && c->a[0] > c->a[c->n - 1]) {
        reverse(c->a, c->n);
        reverse(c->b, c->n);
        reverse(c->c, c->n);
        conv.reversed = 1;
    }
    for (size_t i = 1; i < c->n; i++)
        if (!(c->a[i] > c->a[i - 1]))
            return fail(c, CS_EDATA, -1,
                        "points %zu and %zu (0-based, ascending) coincide after conversion to Hz",
                        i - 1, i);
    if (c->xunit->dim != CS_DIM_FREQUENCY || c->xunit->scale != 1.0)
        cs_loaded_note(c->out, "axis in %s converted to Hz%s", c->xunit->name,
                       c->xunit->dim != CS_DIM_LENGTH ? ""
                       : o->air ? " (wavelengths in standard air, Edlen 1966)"
                                : " (vacuum wavelengths)");
    if (conv.reversed)
        cs_loaded_note(c->out, "axis was decreasing in frequency: reversed to ascending");
    if (conv.jacobian_applied)
        cs_loaded_note(c->out, "y is a density per %s: multiplied by |d%s/dnu| (Jacobian) to make "
                       "it per Hz", c->xunit->name,
                       c->xunit->dim == CS_DIM_LENGTH ? "lambda" : "x");

    cs_spectrum *s = cs_spectrum_alloc(0, 0);
    char *src = dup_cstr(c->path);
    if (!s || !src) {
        cs_spectrum_free(s);
        free(src);
        return fail(c, CS_ENOMEM, -1, "out of memory");
    }
    free(s->freq_hz);
    free(s->y);
    s->n = c->n;
    s->freq_hz = shrink(c->a, c->n);
    s->y = shrink(c->b, c->n);
    s->sigma = c->c ? shrink(c->c, c->n) : NULL;
    c->a = c->b = c->c = NULL;
    s->source = src;
    snprintf(s->x_unit, sizeof s->x_unit, "%s", c->xunit->name);
    s->x_unit_assumed = c->x_assumed;
    if (c->header_line)
        snprintf(s->y_name, sizeof s->y_name, "%s", c->hdr[c->cy].name);
    s->conv = conv;
    s->meta = c->meta;
    cs_meta_init(&c->meta);
    c->out->kind = CS_KIND_SPECTRUM;
    c->out->spectrum = s;
    return CS_OK;
}

/* The sample interval of a record without a time column. */
static int rate_from_meta(txt *c, double *dt)
{
    const cs_load_options *o = c->o;
    int rc = CS_OK;
    double v = 0;
    cs_error_clear(c->err);
    if (o->sample_rate_hz > 0) {
        v = 1.0 / o->sample_rate_hz;
    } else if (cs_meta_find(&c->meta, "sample_rate")) {
        if ((rc = cs_meta_get_si(&c->meta, "sample_rate", CS_DIM_FREQUENCY, &v, c->err)))
            return adopt(c, rc, -1);
        v = 1.0 / v;
    } else if (cs_meta_find(&c->meta, "sample_interval")) {
        if ((rc = cs_meta_get_si(&c->meta, "sample_interval", CS_DIM_TIME, &v, c->err)))
            return adopt(c, rc, -1);
    } else if (cs_meta_find(&c->meta, "dt")) {
        if ((rc = cs_meta_get_si(&c->meta, "dt", CS_DIM_TIME, &v, c->err)))
            return adopt(c, rc, -1);
    } else {
        return fail(c, CS_EINVAL, -1,
                    "no time axis and no sample rate: give --sample-rate or a "
                    "'# sample_rate = ...' line");
    }
    if (!(v > 0) || !isfinite(v))
        return fail(c, CS_EDATA, -1, "the sample interval %g s is not positive and finite", v);
    *dt = v;
    return CS_OK;
}

static int finish_record(txt *c)
{
    const cs_load_options *o = c->o;
    double t0 = 0, dt = 1;
    int rc;
    if (c->has_time) {
        if (c->n < 2)
            return fail(c, CS_EDATA, c->last_data_line,
                        "a time column needs at least 2 rows to give a sample interval");
        double mean = (c->t_prev - c->t_first) / (double)(c->n - 1);
        if (c->n > 2) {
            long bad = 0;
            double step = 0;
            if (fabs(c->dmax - mean) > TXT_STEP_TOL * mean)
                bad = c->dmax_line, step = c->dmax;
            if (fabs(c->dmin - mean) > TXT_STEP_TOL * mean &&
                (!bad || fabs(c->dmin - mean) > fabs(c->dmax - mean)))
                bad = c->dmin_line, step = c->dmin;
            if (bad)
                return fail(c, CS_EDATA, bad,
                            "non-uniform sampling at line %ld: step %.6g s, expected %.6g s (the "
                            "mean step; steps must agree within 1 %%)", bad, step, mean);
        }
        t0 = c->t_first;
        dt = mean;
        double other;
        cs_error e;
        if ((cs_meta_find(&c->meta, "sample_rate") &&
             cs_meta_get_si(&c->meta, "sample_rate", CS_DIM_FREQUENCY, &other, &e) == CS_OK &&
             fabs(1.0 / other - dt) > TXT_STEP_TOL * dt) ||
            (cs_meta_find(&c->meta, "sample_interval") &&
             cs_meta_get_si(&c->meta, "sample_interval", CS_DIM_TIME, &other, &e) == CS_OK &&
             fabs(other - dt) > TXT_STEP_TOL * dt))
            cs_loaded_note(c->out, "the time column (step %.6g s) disagrees with the metadata "
                           "sample rate: the time column is used", dt);
    } else {
        if ((rc = rate_from_meta(c, &dt)))
            return rc;
        if (o->t0_s != 0) {
            t0 = o->t0_s;
        } else if (cs_meta_find(&c->meta, "t0")) {
            cs_error_clear(c->err);
            if ((rc = cs_meta_get_si(&c->meta, "t0", CS_DIM_TIME, &t0, c->err)))
                return adopt(c, rc, -1);
        }
    }
    if (!isfinite(t0) || !isfinite(dt) || !(dt > 0))
        return fail(c, CS_EDATA, -1, "no usable time axis: t0 %g s, dt %g s", t0, dt);

    cs_record *r = cs_record_alloc(0, c->is_complex);
    cs_record **list = malloc(sizeof *list);
    char *src = dup_cstr(c->path);
    if (!r || !list || !src) {
        cs_record_free(r);
        free(list);
        free(src);
        return fail(c, CS_ENOMEM, -1, "out of memory");
    }
    free(r->data);
    r->n = c->n;
    r->data = shrink(c->a, c->n * (c->is_complex ? 2u : 1u));
    c->a = NULL;
    r->t0_s = t0;
    r->dt_s = dt;
    r->shot = 0;
    r->source = src;
    snprintf(r->t_unit, sizeof r->t_unit, "%s", c->tunit ? c->tunit->name : "s");
    r->meta = c->meta;
    cs_meta_init(&c->meta);
    list[0] = r;
    c->out->kind = CS_KIND_RECORD;
    c->out->records = list;
    c->out->nrecords = 1;
    return CS_OK;
}

static int finish(txt *c)
{
    size_t minp = c->o->min_points ? c->o->min_points : 1;
    if (!c->decided) {
        if (c->line == 0)
            return fail(c, CS_EDATA, -1, "the file is empty");
        if (c->header_line)
            return fail(c, CS_EDATA, c->header_line, "a header row but no data rows");
        return fail(c, CS_EDATA, c->line, "no data rows: only comments and blank lines");
    }
    if (c->n < minp)
        return fail(c, CS_EDATA, c->last_data_line, "%zu data row%s: at least %zu %s needed",
                    c->n, c->n == 1 ? "" : "s", minp, minp == 1 ? "is" : "are");
    return c->kind == CS_KIND_SPECTRUM ? finish_spectrum(c) : finish_record(c);
}

/* ---------------------------------------------------------------- the loader */

static int run(txt *c)
{
    char *lb = NULL, *le = NULL;
    int r;
    while ((r = next_line(c, &lb, &le)) == 1) {
        long line = c->line;
        if (line == 1) {
            if (le - lb >= 3 && memcmp(lb, "\xEF\xBB\xBF", 3) == 0)
                lb += 3;
            else if (le - lb >= 2 &&
                     (memcmp(lb, "\xFF\xFE", 2) == 0 || memcmp(lb, "\xFE\xFF", 2) == 0))
                return fail(c, CS_EFORMAT, 1,
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
        if (!c->decided && (r = decide(c, line)))
            return r;
        if ((r = data_row(c, p, le, line)))
            return r;
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
    c.buf = malloc(TXT_BUF_BYTES + 1);
    int rc = c.buf ? run(&c) : fail(&c, CS_ENOMEM, -1, "out of memory for the read buffer");
    if (rc == CS_OK)
        rc = finish(&c);
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

/* ---------------------------------------------------------------- writers */

/* Metadata text on one line: control characters become blanks. */
static void put_clean(FILE *f, const char *s)
{
    for (; s && *s; s++)
        fputc((unsigned char)*s < 0x20 ? ' ' : *s, f);
}

static void put_meta(FILE *f, const cs_meta *m)
{
    for (size_t i = 0; i < m->n; i++) {
        const cs_meta_entry *e = &m->e[i];
        fputs("# ", f);
        put_clean(f, e->key);
        fputs(" = ", f);
        put_clean(f, e->text);
        if (e->unit && *e->unit) {
            fputc(' ', f);
            put_clean(f, e->unit);
        }
        fputc('\n', f);
    }
}

static int close_checked(FILE *f, const char *path, cs_error *err)
{
    int bad = ferror(f);
    int saved = errno;
    if (fclose(f) != 0 && !bad) {
        bad = 1;
        saved = errno;
    }
    if (bad)
        return cs_error_set(err, CS_EIO, path, -1, -1, "cannot write: %s", strerror(saved));
    return CS_OK;
}

int cs_io_text_write_spectrum(const char *path, const cs_spectrum *s, cs_error *err)
{
    if (!path || !s || (s->n && (!s->freq_hz || !s->y)))
        return cs_error_set(err, CS_EINVAL, path, -1, -1, "no spectrum to write");
    for (size_t i = 0; i < s->n; i++)
        if (!isfinite(s->freq_hz[i]) || !isfinite(s->y[i]) || (s->sigma && !isfinite(s->sigma[i])))
            return cs_error_set(err, CS_EINVAL, path, -1, -1,
                                "point %zu is NaN or infinite: nothing written", i);
    FILE *f = fopen(path, "wb");
    if (!f)
        return cs_error_set(err, CS_EIO, path, -1, -1, "cannot create: %s", strerror(errno));
    put_meta(f, &s->meta);
    fputs(s->sigma ? "frequency_hz,y,sigma\n" : "frequency_hz,y\n", f);
    for (size_t i = 0; i < s->n && !ferror(f); i++) {
        if (s->sigma)
            fprintf(f, "%.17g,%.17g,%.17g\n", s->freq_hz[i], s->y[i], s->sigma[i]);
        else
            fprintf(f, "%.17g,%.17g\n", s->freq_hz[i], s->y[i]);
    }
    return close_checked(f, path, err);
}

int cs_io_text_write_record(const char *path, const cs_record *r, cs_error *err)
{
    if (!path || !r || (r->n && !r->data))
        return cs_error_set(err, CS_EINVAL, path, -1, -1, "no record to write");
    size_t w = r->is_complex ? 2 : 1;
    if (!isfinite(r->t0_s) || !isfinite(r->dt_s) || !(r->dt_s > 0))
        return cs_error_set(err, CS_EINVAL, path, -1, -1,
                            "the record's time axis (t0 %g s, dt %g s) is not usable", r->t0_s,
                            r->dt_s);
    for (size_t i = 0; i < r->n * w; i++)
        if (!isfinite(r->data[i]))
            return cs_error_set(err, CS_EINVAL, path, -1, -1,
                                "sample %zu is NaN or infinite: nothing written", i / w);
    FILE *f = fopen(path, "wb");
    if (!f)
        return cs_error_set(err, CS_EIO, path, -1, -1, "cannot create: %s", strerror(errno));
    put_meta(f, &r->meta);
    fputs(r->is_complex ? "time_s,i,q\n" : "time_s,y\n", f);
    for (size_t i = 0; i < r->n && !ferror(f); i++) {
        double t = r->t0_s + (double)i * r->dt_s;
        if (r->is_complex)
            fprintf(f, "%.17g,%.17g,%.17g\n", t, r->data[2 * i], r->data[2 * i + 1]);
        else
            fprintf(f, "%.17g,%.17g\n", t, r->data[i]);
    }
    return close_checked(f, path, err);
}
