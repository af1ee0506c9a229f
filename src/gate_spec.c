/* Gates: the gate grammar (NAME=START:LENGTH[:WINDOW]), its parser, formatter and resolution. */
#include <collshift/gate.h>
#include <collshift/units.h>

#include "gate_impl.h"

#include <ctype.h>
#include <errno.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

/* ---------------------------------------------------------------- gates */

static int valid_name(const char *name)
{
    size_t n = name ? strlen(name) : 0;
    if (n == 0 || n >= CS_GATE_NAME_MAX)
        return 0;
    for (size_t i = 0; i < n; i++) {
        unsigned char c = (unsigned char)name[i];
        if (!isalnum(c) && c != '_' && c != '.' && c != '-')
            return 0;
    }
    return 1;
}

int gate_window_or_hann(const cs_window *w, cs_window *out, cs_error *err)
{
    if (!w)
        return cs_window_init(out, &cs_window_hann, 0.0, err);
    cs_window tmp;
    int rc = cs_window_init(&tmp, w->type, w->param, err);
    if (rc == CS_OK)
        *out = tmp;
    return rc;
}

int cs_gate_init(cs_gate *g, const char *name, double start_s, double length_s,
                 const cs_window *w, int periodic, cs_error *err)
{
    if (!g)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "no gate");
    memset(g, 0, sizeof *g);
    if (!valid_name(name))
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1,
                            "gate name '%s' must be 1 to %d characters from A-Z a-z 0-9 _ . -",
                            name ? name : "", CS_GATE_NAME_MAX - 1);
    if (!(start_s >= 0) || !isfinite(start_s))
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "gate '%s': start %g s must be >= 0",
                            name, start_s);
    if (!(length_s > 0) || !isfinite(length_s))
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "gate '%s': length %g s must be > 0",
                            name, length_s);
    cs_window win;
    int rc = gate_window_or_hann(w, &win, err);
    if (rc != CS_OK)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "gate '%s': invalid window", name);
    snprintf(g->name, sizeof g->name, "%s", name);
    g->start_s = start_s;
    g->length_s = length_s;
    g->window = win;
    g->periodic = periodic ? CS_WINDOW_PERIODIC : CS_WINDOW_SYMMETRIC;
    g->t_start_s = NAN;
    return CS_OK;
}

/* Samples j with a <= j dt < b (times from the first sample), with a tolerance of 1e-6 dt. */
static void time_to_index(double a, double b, double dt, double *i0, double *i1)
{
    *i0 = ceil(a / dt - 1e-6);
    *i1 = ceil(b / dt - 1e-6);
}

int cs_gate_samples(const cs_gate *g, const cs_record *rec, size_t *first, size_t *count,
                    cs_error *err)
{
    if (!g || !rec || !first || !count)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "gate: NULL argument");
    if (!(rec->dt_s > 0) || !isfinite(rec->dt_s))
        return cs_error_set(err, CS_EDATA, rec->source, -1, -1, "sample interval must be > 0");
    if (!(g->start_s >= 0) || !(g->length_s > 0) || !isfinite(g->start_s + g->length_s))
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "gate '%s': invalid start or length",
                            g->name);
    double i0, i1;
    time_to_index(g->start_s, g->start_s + g->length_s, rec->dt_s, &i0, &i1);
    if (i1 > (double)rec->n)
        return cs_error_set(err, CS_ERANGE, rec->source, -1, -1,
                            "gate '%s' (%g s + %g s) reaches beyond the record (%zu samples, %g s)",
                            g->name, g->start_s, g->length_s, rec->n, (double)rec->n * rec->dt_s);
    if (i1 - i0 < 2)
        return cs_error_set(err, CS_ERANGE, rec->source, -1, -1,
                            "gate '%s' holds fewer than 2 samples", g->name);
    *first = (size_t)i0;
    *count = (size_t)(i1 - i0);
    return CS_OK;
}

/* ---- specification parser */

static const struct {
    const char *word;
    cs_gate_anchor anchor;
} anchors[] = {
    {"zero", CS_GATE_ANCHOR_ZERO}, {"onset", CS_GATE_ANCHOR_ONSET}, {"peak", CS_GATE_ANCHOR_PEAK},
    {"end", CS_GATE_ANCHOR_END},   {"tail", CS_GATE_ANCHOR_TAIL},   {"fade", CS_GATE_ANCHOR_FADE},
};

static const char *anchor_word(cs_gate_anchor a)
{
    for (size_t i = 0; i < sizeof anchors / sizeof anchors[0]; i++)
        if (anchors[i].anchor == a)
            return anchors[i].word;
    return a == CS_GATE_ANCHOR_REST ? "rest" : "";
}

/* Copy s[0..len) into buf without surrounding blanks. */
static void trim_copy(char *buf, size_t n, const char *s, size_t len)
{
    while (len && isspace((unsigned char)*s)) {
        s++;
        len--;
    }
    while (len && isspace((unsigned char)s[len - 1]))
        len--;
    if (len >= n)
        len = n - 1;
    memcpy(buf, s, len);
    buf[len] = '\0';
}

/* "2w", "0.5 w" -> 1 and *k; otherwise 0. */
static int parse_widths(const char *s, double *k)
{
    char *end;
    errno = 0;
    double v = strtod(s, &end);
    if (end == s || errno || !isfinite(v))
        return 0;
    while (isspace((unsigned char)*end))
        end++;
    if (*end != 'w' || end[1] != '\0')
        return 0;
    *k = v;
    return 1;
}

/* OFFSET or LENGTH amount: a time with a unit or a number of widths. */
static int parse_amount(const char *s, const char *spec, const char *what, double *sec,
                        double *widths, cs_error *err)
{
    *sec = 0.0;
    *widths = 0.0;
    if (!*s)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "gate '%s': empty %s", spec, what);
    if (parse_widths(s, widths))
        return CS_OK;
    cs_error e;
    int rc = cs_quantity_parse(s, CS_DIM_TIME, NULL, sec, NULL, NULL, &e);
    if (rc != CS_OK)
        return cs_error_set(err, rc, NULL, -1, -1,
                            "gate '%s': %s '%s' is neither a time with a unit (20us) nor a number "
                            "of burst widths (2w): %s",
                            spec, what, s, e.msg);
    return CS_OK;
}

/* ANCHOR [(+|-) OFFSET]; returns 1 when s starts with an anchor word (then *rc is the status). */
static int parse_anchor_point(const char *s, const char *spec, const char *what, cs_gate_point *pt,
                              int *rc, cs_error *err)
{
    size_t k = 0;
    while (isalpha((unsigned char)s[k]))
        k++;
    if (k == 0)
        return 0;
    int found = -1;
    for (size_t i = 0; i < sizeof anchors / sizeof anchors[0]; i++)
        if (strlen(anchors[i].word) == k && strncmp(anchors[i].word, s, k) == 0)
            found = (int)i;
    if (found < 0) {
        *rc = cs_error_set(err, CS_EINVAL, NULL, -1, -1,
                           "gate '%s': unknown %s '%.*s' (expected a time with a unit, or zero, "
                           "onset, peak, end, tail or fade, optionally +/- an offset)",
                           spec, what, (int)k, s);
        return 1;
    }
    pt->anchor = anchors[found].anchor;
    pt->offset_s = pt->offset_w = 0.0;
    const char *r = s + k;
    while (isspace((unsigned char)*r))
        r++;
    if (!*r) {
        *rc = CS_OK;
        return 1;
    }
    if (*r != '+' && *r != '-') {
        *rc = cs_error_set(err, CS_EINVAL, NULL, -1, -1,
                           "gate '%s': expected '+' or '-' after '%s' in %s '%s'", spec,
                           anchors[found].word, what, s);
        return 1;
    }
    double sign = *r == '-' ? -1.0 : 1.0;
    r++;
    while (isspace((unsigned char)*r))
        r++;
    if (*r == '+' || *r == '-') {
        *rc = cs_error_set(err, CS_EINVAL, NULL, -1, -1, "gate '%s': two signs in %s '%s'", spec,
                           what, s);
        return 1;
    }
    *rc = parse_amount(r, spec, "offset", &pt->offset_s, &pt->offset_w, err);
    pt->offset_s *= sign;
    pt->offset_w *= sign;
    return 1;
}

int cs_gate_spec_parse(const char *text, const cs_window *default_window, cs_gate_spec *spec,
                       cs_error *err)
{
    if (!text || !spec)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "gate: NULL argument");
    memset(spec, 0, sizeof *spec);
    const char *eq = strchr(text, '=');
    if (!eq)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1,
                            "gate '%s': expected NAME=START:LENGTH[:WINDOW]", text);
    char name[CS_GATE_NAME_MAX + 8];
    trim_copy(name, sizeof name, text, (size_t)(eq - text));
    if (!valid_name(name) || (size_t)(eq - text) >= sizeof name)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1,
                            "gate '%s': the name must be 1 to %d characters from A-Z a-z 0-9 _ . -",
                            text, CS_GATE_NAME_MAX - 1);
    memcpy(spec->name, name, strlen(name) + 1);   /* valid_name: < CS_GATE_NAME_MAX */
    const char *a = eq + 1;
    const char *c1 = strchr(a, ':');
    if (!c1)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1,
                            "gate '%s': expected START:LENGTH after '=' (e.g. 20us:200us or peak-2w:4w)",
                            text);
    const char *b = c1 + 1;
    const char *c2 = strchr(b, ':');
    char sstart[128], slen[128], swin[128];
    if ((size_t)(c1 - a) >= sizeof sstart || strlen(b) >= sizeof slen + sizeof swin)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "gate '%s': too long", text);
    trim_copy(sstart, sizeof sstart, a, (size_t)(c1 - a));
    trim_copy(slen, sizeof slen, b, c2 ? (size_t)(c2 - b) : strlen(b));
    trim_copy(swin, sizeof swin, c2 ? c2 + 1 : "", c2 ? strlen(c2 + 1) : 0);
    if (c2 && (size_t)(c2 - b) >= sizeof slen)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "gate '%s': too long", text);

    /* START */
    int rc = CS_OK;
    if (!sstart[0])
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "gate '%s': empty start", text);
    if (!parse_anchor_point(sstart, text, "start", &spec->start, &rc, err)) {
        double w;
        if (parse_widths(sstart, &w))
            return cs_error_set(err, CS_EINVAL, NULL, -1, -1,
                                "gate '%s': start '%s' counts burst widths from nothing; write "
                                "e.g. peak-%s",
                                text, sstart, sstart);
        cs_error e;
        rc = cs_quantity_parse(sstart, CS_DIM_TIME, NULL, &spec->start.offset_s, NULL, NULL, &e);
        if (rc != CS_OK)
            return cs_error_set(err, rc, NULL, -1, -1,
                                "gate '%s': start '%s' is not a time with a unit (20us) nor an "
                                "anchor (peak-2w): %s",
                                text, sstart, e.msg);
        spec->start.anchor = CS_GATE_ANCHOR_FIRST;
        if (spec->start.offset_s < 0)
            return cs_error_set(err, CS_ERANGE, NULL, -1, -1,
                                "gate '%s': start %s is before the record's first sample", text,
                                sstart);
    }
    if (rc != CS_OK)
        return rc;

    /* LENGTH */
    if (!slen[0])
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "gate '%s': empty length", text);
    if (strcmp(slen, "rest") == 0) {
        spec->until = 1;
        spec->stop.anchor = CS_GATE_ANCHOR_REST;
    } else if (parse_anchor_point(slen, text, "length", &spec->stop, &rc, err)) {
        if (rc != CS_OK)
            return rc;
        spec->until = 1;
    } else {
        rc = parse_amount(slen, text, "length", &spec->length_s, &spec->length_w, err);
        if (rc != CS_OK)
            return rc;
        if (!(spec->length_s > 0) && !(spec->length_w > 0))
            return cs_error_set(err, CS_ERANGE, NULL, -1, -1, "gate '%s': length '%s' must be > 0",
                                text, slen);
        if (spec->length_s < 0 || spec->length_w < 0)
            return cs_error_set(err, CS_ERANGE, NULL, -1, -1, "gate '%s': length '%s' must be > 0",
                                text, slen);
    }

    /* WINDOW[,periodic|,symmetric] */
    spec->periodic = CS_WINDOW_DEFAULT_FORM;
    if (swin[0]) {
        char *comma = strrchr(swin, ',');
        if (comma) {
            *comma = '\0';
            if (strcmp(comma + 1, "periodic") == 0)
                spec->periodic = CS_WINDOW_PERIODIC;
            else if (strcmp(comma + 1, "symmetric") == 0)
                spec->periodic = CS_WINDOW_SYMMETRIC;
            else
                return cs_error_set(err, CS_EINVAL, NULL, -1, -1,
                                    "gate '%s': window form '%s' must be periodic or symmetric",
                                    text, comma + 1);
        }
        cs_error e;
        rc = cs_window_parse(swin, &spec->window, &e);
        if (rc != CS_OK)
            return cs_error_set(err, rc, NULL, -1, -1, "gate '%s': %s", text, e.msg);
        spec->window_given = 1;
    } else {
        rc = gate_window_or_hann(default_window, &spec->window, err);
        if (rc != CS_OK)
            return rc;
    }
    return CS_OK;
}

static int point_needs_burst(const cs_gate_point *p)
{
    return p->offset_w != 0 || (p->anchor != CS_GATE_ANCHOR_FIRST && p->anchor != CS_GATE_ANCHOR_ZERO &&
                                p->anchor != CS_GATE_ANCHOR_REST);
}

int cs_gate_spec_needs_burst(const cs_gate_spec *spec)
{
    if (!spec)
        return 0;
    return point_needs_burst(&spec->start) || (spec->until && point_needs_burst(&spec->stop)) ||
           (!spec->until && spec->length_w != 0);
}

static size_t format_point(const cs_gate_point *p, char *buf, size_t n)
{
    int w;
    if (p->anchor == CS_GATE_ANCHOR_FIRST)
        w = snprintf(buf, n, "%.17gs", p->offset_s);
    else if (p->anchor == CS_GATE_ANCHOR_REST)
        w = snprintf(buf, n, "rest");
    else if (p->offset_w != 0)
        w = snprintf(buf, n, "%s%+.17gw", anchor_word(p->anchor), p->offset_w);
    else if (p->offset_s != 0)
        w = snprintf(buf, n, "%s%+.17gs", anchor_word(p->anchor), p->offset_s);
    else
        w = snprintf(buf, n, "%s", anchor_word(p->anchor));
    return w < 0 ? 0 : (size_t)w;
}

char *cs_gate_spec_format(const cs_gate_spec *spec, char *buf, size_t n)
{
    if (!buf || n == 0)
        return buf;
    buf[0] = '\0';
    if (!spec)
        return buf;
    char st[96], ln[96], win[CS_WINDOW_SPEC_MAX];
    format_point(&spec->start, st, sizeof st);
    if (spec->until)
        format_point(&spec->stop, ln, sizeof ln);
    else if (spec->length_w != 0)
        snprintf(ln, sizeof ln, "%.17gw", spec->length_w);
    else
        snprintf(ln, sizeof ln, "%.17gs", spec->length_s);
    cs_window_format(&spec->window, win, sizeof win);
    snprintf(buf, n, "%s=%s:%s:%s%s", spec->name, st, ln, win,
             spec->periodic == CS_WINDOW_SYMMETRIC ? ",symmetric" : "");
    return buf;
}

/* The time of p measured from the first sample, or NaN with *why set. */
static double point_time(const cs_gate_point *p, const cs_record *rec, const cs_burst *b,
                         const char **why)
{
    int have = b && b->status == CS_BURST_FOUND;
    double base;
    switch (p->anchor) {
    case CS_GATE_ANCHOR_FIRST: base = 0.0; break;
    case CS_GATE_ANCHOR_ZERO: base = -rec->t0_s; break;
    case CS_GATE_ANCHOR_REST: base = (double)rec->n * rec->dt_s; break;
    case CS_GATE_ANCHOR_ONSET: base = have ? b->onset_s - rec->t0_s : NAN; break;
    case CS_GATE_ANCHOR_PEAK: base = have ? b->peak_time_s - rec->t0_s : NAN; break;
    case CS_GATE_ANCHOR_END: base = have ? b->end_s - rec->t0_s : NAN; break;
    case CS_GATE_ANCHOR_TAIL: base = have ? b->tail_start_s - rec->t0_s : NAN; break;
    case CS_GATE_ANCHOR_FADE: base = have ? b->fade_s - rec->t0_s : NAN; break;
    default: base = NAN; break;
    }
    if (!have && (point_needs_burst(p))) {
        *why = "needs a detected burst, and none was found";
        return NAN;
    }
    if (!isfinite(base)) {
        *why = "refers to a burst feature that was not found";
        return NAN;
    }
    double t = base + p->offset_s;
    if (p->offset_w != 0)
        t += p->offset_w * b->fwhm_s;
    return t;
}

int cs_gate_resolve(const cs_gate_spec *spec, const cs_record *rec, const cs_burst *burst,
                    cs_gate *g, cs_error *err)
{
    if (!spec || !rec || !g)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "gate: NULL argument");
    if (!(rec->dt_s > 0) || !isfinite(rec->dt_s) || rec->n < 2)
        return cs_error_set(err, CS_EDATA, rec->source, -1, -1, "record too short or without a sample interval");
    const char *why = NULL;
    double a = point_time(&spec->start, rec, burst, &why);
    double b = NAN;
    if (!why) {
        if (spec->until)
            b = point_time(&spec->stop, rec, burst, &why);
        else if (spec->length_w != 0 && !(burst && burst->status == CS_BURST_FOUND))
            why = "needs a detected burst, and none was found";
        else
            b = a + spec->length_s + (spec->length_w != 0 ? spec->length_w * burst->fwhm_s : 0.0);
    }
    if (why)
        return cs_error_set(err, CS_EDATA, rec->source, -1, -1, "gate '%s' %s", spec->name, why);
    if (!(b > a))
        return cs_error_set(err, CS_ERANGE, rec->source, -1, -1,
                            "gate '%s' ends (%g s) before it starts (%g s)", spec->name, b, a);
    double total = (double)rec->n * rec->dt_s;
    int clipped = 0;
    if (a < 0) {
        a = 0;
        clipped = 1;
    }
    if (b > total + 1e-6 * rec->dt_s) {
        b = total;
        clipped = 1;
    }
    if (!(b > a))
        return cs_error_set(err, CS_ERANGE, rec->source, -1, -1,
                            "gate '%s' lies outside the record (0 .. %g s)", spec->name, total);
    int rc = cs_gate_init(g, spec->name, a, b - a, &spec->window, spec->periodic, err);
    if (rc != CS_OK)
        return rc;
    g->clipped = clipped;
    g->t_start_s = rec->t0_s + a;
    size_t first, count;
    return cs_gate_samples(g, rec, &first, &count, err);
}

int cs_gate_auto(const cs_record *rec, const cs_burst *burst, const cs_window *w,
                 cs_gate gates[2], size_t *ngates, cs_error *err)
{
    if (!rec || !burst || !gates || !ngates)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "gate: NULL argument");
    *ngates = 0;
    if (burst->status != CS_BURST_FOUND)
        return cs_error_set(err, CS_EDATA, rec->source, -1, -1,
                            "no burst detected: automatic gates need one (give --gate)");
    cs_gate_spec early, late;
    memset(&early, 0, sizeof early);
    snprintf(early.name, sizeof early.name, "early");
    early.start.anchor = CS_GATE_ANCHOR_PEAK;
    early.start.offset_w = -CS_GATE_AUTO_EARLY_K;
    early.length_w = 2 * CS_GATE_AUTO_EARLY_K;
    early.periodic = CS_WINDOW_DEFAULT_FORM;
    int rc = gate_window_or_hann(w, &early.window, err);
    if (rc != CS_OK)
        return rc;
    late = early;
    snprintf(late.name, sizeof late.name, "late");
    late.start.anchor = CS_GATE_ANCHOR_END;
    late.start.offset_w = CS_GATE_AUTO_LATE_M;
    late.length_w = 0;
    late.until = 1;
    late.stop.anchor = CS_GATE_ANCHOR_REST;
    rc = cs_gate_resolve(&early, rec, burst, &gates[0], err);
    if (rc != CS_OK)
        return rc;
    *ngates = 1;
    cs_error e;
    if (cs_gate_resolve(&late, rec, burst, &gates[1], &e) == CS_OK)
        *ngates = 2;
    return CS_OK;
}
