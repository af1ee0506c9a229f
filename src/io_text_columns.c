/* Delimited text: what the table holds - header names and units, columns, spectrum or record. */
/*
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
 */
#include <collshift/io.h>

#include "io_text_impl.h"

#include <errno.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <strings.h>

/* ---------------------------------------------------------------- header names */

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
                return io_text_fail(c, CS_EINVAL, hl,
                                    "column %s (%s) does not exist: the file has %zu column%s: %s",
                                    spec, what, c->ncols, c->ncols == 1 ? "" : "s",
                                    header_list(c, list, sizeof list));
            return io_text_fail(c, CS_EINVAL, hl,
                                "column %s (%s) does not exist: the file has %zu column%s", spec,
                                what, c->ncols, c->ncols == 1 ? "" : "s");
        }
        *col = (size_t)k - 1;
        return CS_OK;
    }
    if (!c->header_line)
        return io_text_fail(c, CS_EINVAL, hl,
                            "column '%s' (%s): the file has no header row, so give a column "
                            "number 1..%zu", spec, what, c->ncols);
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
            return io_text_fail(c, CS_EINVAL, hl,
                                "column '%s' (%s) is ambiguous: it matches '%s' and '%s'", spec,
                                what, c->hdr[found].name, c->hdr[k].name);
        found = k;
    }
    if (found == NOCOL)
        return io_text_fail(c, CS_EINVAL, hl, "no column '%s' (%s): the header has %s", spec, what,
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
    return io_text_fail(c, CS_EUNIT, c->header_line, "unknown unit '%.*s' in the %s column '%s'",
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
int io_text_meta_kind(const txt *c, long *line)
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
        return io_text_fail(c, CS_EUNIT, -1, "unknown unit '%s' given for the %s", name, what);
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
        return io_text_fail(c, CS_EFORMAT, line,
                            "a spectrum needs 2 columns (axis and values); the file has 1");
    if (!o->sigma_col && c->header_line)
        for (size_t k = 0; k < c->ncols && c->cs == NOCOL; k++)
            if (k != c->cx && k != c->cy && name_in(c->hdr[k].base, sigma_names))
                c->cs = k;
    for (size_t k = 0; k < c->ncols && c->cy == NOCOL; k++)
        if (k != c->cx && k != c->cs)
            c->cy = k;
    if (c->cy == NOCOL)
        return io_text_fail(c, CS_EINVAL, line, "no column left for y");
    if (c->cx == c->cy || c->cx == c->cs || c->cy == c->cs) {
        size_t dup = c->cx == c->cy || c->cx == c->cs ? c->cx : c->cy;
        return io_text_fail(c, CS_EINVAL, line, "column %s is given two roles (x, y, sigma)",
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
        return io_text_fail(c, CS_EUNIT, ox ? -1 : c->header_line,
                            "the axis unit '%s' measures %s; a spectrum axis needs a frequency, "
                            "wavenumber or wavelength unit", u->name, cs_dim_name(u->dim));
    if (!u) {
        if (c->header_line && name_in(c->hdr[c->cx].base, needs_unit_names))
            return io_text_fail(c, CS_EUNIT, c->header_line,
                                "the axis column '%s' has no unit: write it as '%s_nm' (or "
                                "similar), or give the axis unit", c->hdr[c->cx].name,
                                c->hdr[c->cx].base);
        u = cs_unit_find("Hz");
        if (!u)
            return io_text_fail(c, CS_EUNIT, -1, "the unit table has no Hz");
        c->x_assumed = 1;
        cs_loaded_note(c->out, "no axis unit given: Hz assumed");
    }
    if (o->air && u->dim != CS_DIM_LENGTH)
        return io_text_fail(c, CS_EINVAL, -1,
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
            return io_text_fail(c, CS_EINVAL, -1, "give both the I and the Q column, or neither");
        if ((rc = resolve_col(c, o->i_col, "I", &c->ci)) ||
            (rc = resolve_col(c, o->q_col, "Q", &c->cq)))
            return rc;
    }
    if (o->y_col && (rc = resolve_col(c, o->y_col, "y", &c->cy)))
        return rc;
    if (c->cy != NOCOL && c->ci != NOCOL)
        return io_text_fail(c, CS_EINVAL, -1,
                            "give either a y column or I and Q columns, not both");
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
            return io_text_fail(c, CS_EFORMAT, line, "the file has only a time column: no samples");
        if (c->ct == NOCOL && !c->header_line && c->ncols == 2) {
            c->ci = 0;
            c->cq = 1;
            cs_loaded_note(c->out,
                           "2 unnamed columns without a time axis: read as I and Q samples");
        } else if (c->ct == NOCOL && !c->header_line && c->ncols > 2) {
            return io_text_fail(c, CS_EINVAL, line,
                                "%zu unnamed columns and no time column: say which hold the "
                                "samples (y, or I and Q)", c->ncols);
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
                return io_text_fail(c, CS_EINVAL, line,
                                    "column %s is given two roles (time, y, I, Q)",
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
            return io_text_fail(c, CS_EUNIT, ot ? -1 : c->header_line,
                                "the time column %s has unit '%s', which measures %s, not time",
                                col_label(c, c->ct, l1, sizeof l1), u->name, cs_dim_name(u->dim));
        if (!u) {
            u = cs_unit_find("s");
            if (!u)
                return io_text_fail(c, CS_EUNIT, -1, "the unit table has no s");
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
int io_text_decide(txt *c, long line)
{
    const cs_load_options *o = c->o;
    const cs_unit *ox, *ot;
    int rc;
    if ((rc = option_unit(c, o->x_unit, "axis", &ox)) ||
        (rc = option_unit(c, o->t_unit, "time axis", &ot)))
        return rc;
    if (ot && ot->dim != CS_DIM_TIME)
        return io_text_fail(c, CS_EUNIT, -1, "the time unit '%s' measures %s, not time", ot->name,
                            cs_dim_name(ot->dim));
    int want_rec = o->t_col || o->i_col || o->q_col, want_spec = o->x_col || o->sigma_col;
    cs_kind k = CS_KIND_AUTO;
    long ml = -1;
    int mk = io_text_meta_kind(c, &ml);
    if (mk < 0)
        return io_text_fail(c, CS_EFORMAT, ml, "metadata 'kind' must be 'record' or 'spectrum'");
    if (o->kind == CS_KIND_SPECTRUM || o->kind == CS_KIND_RECORD) {
        k = o->kind;
        c->by = BY_KIND;
        if ((k == CS_KIND_SPECTRUM && want_rec) || (k == CS_KIND_RECORD && want_spec))
            return io_text_fail(c, CS_EINVAL, -1, "a %s was requested, but %s columns were given",
                                cs_kind_name(k), want_rec ? "time/I/Q" : "x/sigma");
    } else if (want_rec && want_spec) {
        return io_text_fail(c, CS_EINVAL, -1,
                            "time/I/Q columns and x/sigma columns were both given: a file is a "
                            "record or a spectrum");
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
        return io_text_fail(c, CS_ENOMEM, line, "out of memory");
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
