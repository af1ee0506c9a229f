/* The gate sweep of the split pipeline (split.h): its syntax, and each era refitted while the
 * late gate's start and the early gate's width are stepped. */
#include "split_impl.h"

#include <collshift/units.h>

#include <errno.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

const char *cs_split_sweep_kind_name(cs_split_sweep_kind k)
{
    return k == CS_SPLIT_SWEEP_LATE_START ? "late_start" : k == CS_SPLIT_SWEEP_EARLY_WIDTH ? "early_width" : "unknown";
}

void cs_split_sweep_default(cs_split_sweep *s)
{
    if (!s)
        return;
    s->late_start.from = 1.0;
    s->late_start.to = 6.0;
    s->late_start.in_w = 1;
    s->late_start.n = 6;
    s->early_width.from = 2.0;
    s->early_width.to = 6.0;
    s->early_width.in_w = 1;
    s->early_width.n = 5;
}

/* One bound: NUMBERw or a time with its unit. */
static int parse_bound(const char *t, double *v, int *in_w, const char *item, cs_error *err)
{
    size_t len = strlen(t);
    if (len > 1 && t[len - 1] == 'w') {
        char buf[64];
        if (len >= sizeof buf)
            return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "--sweep '%s': '%s' is too long", item, t);
        memcpy(buf, t, len - 1);
        buf[len - 1] = '\0';
        char *end;
        errno = 0;
        double x = strtod(buf, &end);
        if (end == buf || *end || errno == ERANGE || !isfinite(x))
            return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "--sweep '%s': '%s' is not NUMBERw", item, t);
        *v = x;
        *in_w = 1;
        return CS_OK;
    }
    cs_error e2;
    int rc = cs_quantity_parse(t, CS_DIM_TIME, NULL, v, NULL, NULL, &e2);
    if (rc != CS_OK)
        return cs_error_set(err, rc == CS_EUNIT ? CS_EUNIT : CS_EINVAL, NULL, -1, -1,
                            "--sweep '%s': '%s' is neither NUMBERw nor a time with a unit (%s)", item, t, e2.msg);
    *in_w = 0;
    return CS_OK;
}

static int parse_item(const char *item, cs_split_sweep *s, cs_error *err)
{
    const char *eq = strchr(item, '=');
    if (!eq)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1,
                            "--sweep '%s': expected late-start=FROM:TO:N or early-width=FROM:TO:N", item);
    size_t kl = (size_t)(eq - item);
    cs_split_range *r;
    if (kl == 10 && strncmp(item, "late-start", kl) == 0)
        r = &s->late_start;
    else if (kl == 11 && strncmp(item, "early-width", kl) == 0)
        r = &s->early_width;
    else
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "--sweep '%s': unknown key (late-start, early-width)", item);
    char buf[128];
    if (strlen(eq + 1) >= sizeof buf)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "--sweep '%s': too long", item);
    strcpy(buf, eq + 1);
    char *c1 = strchr(buf, ':'), *c2 = c1 ? strchr(c1 + 1, ':') : NULL;
    if (!c1 || !c2 || strchr(c2 + 1, ':'))
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "--sweep '%s': expected FROM:TO:N", item);
    *c1 = *c2 = '\0';
    int w1, w2;
    double a, b;
    int rc = parse_bound(buf, &a, &w1, item, err);
    if (rc == CS_OK)
        rc = parse_bound(c1 + 1, &b, &w2, item, err);
    if (rc != CS_OK)
        return rc;
    if (w1 != w2)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "--sweep '%s': FROM and TO must both be in w or both times",
                            item);
    char *end;
    errno = 0;
    long long n = strtoll(c2 + 1, &end, 10);
    if (end == c2 + 1 || *end || errno == ERANGE || n < 1 || n > 1000)
        return cs_error_set(err, CS_ERANGE, NULL, -1, -1, "--sweep '%s': N must be a whole number from 1 to 1000", item);
    if (a > b)
        return cs_error_set(err, CS_ERANGE, NULL, -1, -1, "--sweep '%s': FROM is larger than TO", item);
    if (r == &s->early_width && !(a > 0))
        return cs_error_set(err, CS_ERANGE, NULL, -1, -1, "--sweep '%s': widths must be positive", item);
    r->from = a;
    r->to = b;
    r->in_w = w1;
    r->n = (size_t)n;
    return CS_OK;
}

int cs_split_sweep_parse(const char *text, cs_split_sweep *s, cs_error *err)
{
    if (!text || !s)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "no sweep text");
    if (strcmp(text, "auto") == 0) {
        cs_split_sweep_default(s);
        return CS_OK;
    }
    cs_split_sweep t;
    memset(&t, 0, sizeof t);
    if (!*text)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "--sweep: empty");
    const char *p = text;
    while (*p) {
        const char *q = strchr(p, ',');
        size_t len = q ? (size_t)(q - p) : strlen(p);
        char item[160];
        if (len == 0 || len >= sizeof item)
            return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "--sweep '%s': empty or overlong item", text);
        memcpy(item, p, len);
        item[len] = '\0';
        int rc = parse_item(item, &t, err);
        if (rc != CS_OK)
            return rc;
        p += len;
        if (*p == ',')
            p++;
    }
    *s = t;
    return CS_OK;
}

static void format_range(char *buf, size_t n, const char *key, const cs_split_range *r)
{
    if (r->in_w)
        snprintf(buf, n, "%s=%.17gw:%.17gw:%zu", key, r->from, r->to, r->n);
    else
        snprintf(buf, n, "%s=%.17gs:%.17gs:%zu", key, r->from, r->to, r->n);
}

char *cs_split_sweep_format(const cs_split_sweep *s, char *buf, size_t n)
{
    if (!buf || n == 0)
        return buf;
    buf[0] = '\0';
    if (!s)
        return buf;
    char a[96] = "", b[96] = "";
    if (s->late_start.n > 0)
        format_range(a, sizeof a, "late-start", &s->late_start);
    if (s->early_width.n > 0)
        format_range(b, sizeof b, "early-width", &s->early_width);
    snprintf(buf, n, "%s%s%s", a, a[0] && b[0] ? "," : "", b);
    return buf;
}

/* ---------------------------------------------------------------- running it */

static double step_value(const cs_split_range *r, size_t i)
{
    return r->n > 1 ? r->from + (r->to - r->from) * (double)i / (double)(r->n - 1) : r->from;
}

/* A copy of `base` moved to [start_s, end_s) (from the first sample), cut to the record.
 * Returns 1 when the gate holds at least 2 samples. */
static int place_gate(const cs_gate *base, const cs_record *rec, double start_s, double end_s, cs_gate *g)
{
    double rec_len = (double)rec->n * rec->dt_s;
    *g = *base;
    g->clipped = 0;
    if (start_s < 0) {
        start_s = 0;
        g->clipped = 1;
    }
    if (end_s > rec_len) {
        end_s = rec_len;
        g->clipped = 1;
    }
    g->start_s = start_s;
    g->length_s = end_s - start_s;
    g->t_start_s = rec->t0_s + start_s;
    size_t first, count;
    return g->length_s > 0 && cs_gate_samples(g, rec, &first, &count, NULL) == CS_OK;
}

int cs_split_impl_sweep(const split_ctx *cx, const cs_record *rec, cs_split_shot *sh, cs_error *err)
{
    const cs_split_params *p = cx->p;
    const cs_burst *b = &sh->burst;
    size_t total = p->sweep.late_start.n + p->sweep.early_width.n;
    free(sh->sweep);
    sh->nsweep = 0;
    sh->sweep = calloc(total ? total : 1, sizeof *sh->sweep);
    if (!sh->sweep)
        return cs_error_set(err, CS_ENOMEM, NULL, -1, -1, "out of memory");
    double floor_sd = sqrt(sh->noise_floor / 2.0);
    cs_split_fit tmp;
    memset(&tmp, 0, sizeof tmp);
    for (int kind = 0; kind < 2; kind++) {
        const cs_split_range *r = kind == 0 ? &p->sweep.late_start : &p->sweep.early_width;
        cs_split_era era = kind == 0 ? CS_SPLIT_TAIL : CS_SPLIT_BURST;
        const cs_split_fit *def = &sh->era[era];
        for (size_t i = 0; i < r->n; i++) {
            cs_split_sweep_row *row = &sh->sweep[sh->nsweep++];
            row->kind = (cs_split_sweep_kind)kind;
            row->era = era;
            row->value = step_value(r, i);
            row->in_w = r->in_w;
            row->status = CS_SPLIT_NO_GATE;
            row->dev_center = row->dev_fwhm = NAN;
            cs_split_impl_line_nan(&row->line);
            if (!def->gate_ok)
                continue;
            double v = row->value * (r->in_w ? b->fwhm_s : 1.0);
            double start, end;
            if (kind == 0) {
                start = b->end_s - rec->t0_s + v;
                end = def->gate.start_s + def->gate.length_s;
            } else {
                double mid = def->gate.start_s + 0.5 * def->gate.length_s;
                start = mid - 0.5 * v;
                end = mid + 0.5 * v;
            }
            if (!place_gate(&def->gate, rec, start, end, &row->gate))
                continue;
            /* started from the default gate's fit: the sweep asks whether that optimum moves */
            const cs_gatefit_result *from =
                def->status == CS_SPLIT_OK && def->gfit && def->gfit->status == CS_FIT_CONVERGED ? def->gfit : NULL;
            int rc = cs_split_impl_fit_era(cx, rec, NULL, 1, era, &row->gate, def->model, def->gate_aware, sh->lo_hz,
                                           sh->ref_hz, floor_sd, from, NULL, &tmp, err);
            if (rc == CS_OK && from && tmp.status == CS_SPLIT_NOT_CONVERGED)   /* then from scratch */
                rc = cs_split_impl_fit_era(cx, rec, NULL, 1, era, &row->gate, def->model, def->gate_aware, sh->lo_hz,
                                           sh->ref_hz, floor_sd, NULL, NULL, &tmp, err);
            if (rc != CS_OK) {
                cs_split_impl_fit_release(&tmp);
                return rc;
            }
            row->status = tmp.status;
            row->line = tmp.line;
            cs_split_impl_fit_release(&tmp);
            const cs_split_line *d = &def->line, *l = &row->line;
            if (d->ok && l->ok) {
                row->dev_center = (l->center_hz - d->center_hz) / l->center_hz_err;
                row->dev_fwhm = (l->fwhm_hz - d->fwhm_hz) / l->fwhm_hz_err;
                double *mx = sh->sweep_max_dev[era];
                if (isfinite(row->dev_center) && (!isfinite(mx[0]) || fabs(row->dev_center) > mx[0]))
                    mx[0] = fabs(row->dev_center);
                if (isfinite(row->dev_fwhm) && (!isfinite(mx[1]) || fabs(row->dev_fwhm) > mx[1]))
                    mx[1] = fabs(row->dev_fwhm);
            }
        }
    }
    return CS_OK;
}
