/* Delimited text: the arrays read become a spectrum (axis in ascending Hz) or a record (t0, dt). */
/*
 * A spectrum's axis was checked to be strictly monotonic row by row while streaming; here it is
 * converted to Hz and, when it came out decreasing (wavelengths), every array is reversed. A
 * record's time column was checked step by step against the first step while streaming; here the
 * extreme steps are checked against the mean step (see "Uniform sampling" in io_text.c), or,
 * without a time column, the sample interval comes from the options or the metadata.
 */
#include <collshift/io.h>

#include "io_text_impl.h"

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

/* ---------------------------------------------------------------- finishing */

static double *shrink(double *p, size_t n)
{
    double *q = realloc(p, (n ? n : 1) * sizeof(double));
    return q ? q : p;
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
        return io_text_adopt(c, rc, -1);
    conv.reversed = 0;
    if (c->n >= 2 && c->a[0] > c->a[c->n - 1]) {
        io_reverse(c->a, c->n);
        io_reverse(c->b, c->n);
        io_reverse(c->c, c->n);
        conv.reversed = 1;
    }
    for (size_t i = 1; i < c->n; i++)
        if (!(c->a[i] > c->a[i - 1]))
            return io_text_fail(c, CS_EDATA, -1,
                                "points %zu and %zu (0-based, ascending) coincide after "
                                "conversion to Hz", i - 1, i);
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
    char *src = io_strdup(c->path);
    if (!s || !src) {
        cs_spectrum_free(s);
        free(src);
        return io_text_fail(c, CS_ENOMEM, -1, "out of memory");
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
            return io_text_adopt(c, rc, -1);
        v = 1.0 / v;
    } else if (cs_meta_find(&c->meta, "sample_interval")) {
        if ((rc = cs_meta_get_si(&c->meta, "sample_interval", CS_DIM_TIME, &v, c->err)))
            return io_text_adopt(c, rc, -1);
    } else if (cs_meta_find(&c->meta, "dt")) {
        if ((rc = cs_meta_get_si(&c->meta, "dt", CS_DIM_TIME, &v, c->err)))
            return io_text_adopt(c, rc, -1);
    } else {
        return io_text_fail(c, CS_EINVAL, -1,
                            "no time axis and no sample rate: give --sample-rate or a "
                            "'# sample_rate = ...' line");
    }
    if (!(v > 0) || !isfinite(v))
        return io_text_fail(c, CS_EDATA, -1, "the sample interval %g s is not positive and finite",
                            v);
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
            return io_text_fail(c, CS_EDATA, c->last_data_line,
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
                return io_text_fail(c, CS_EDATA, bad,
                                    "non-uniform sampling at line %ld: step %.6g s, expected %.6g "
                                    "s (the mean step; steps must agree within 1 %%)", bad, step,
                                    mean);
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
                return io_text_adopt(c, rc, -1);
        }
    }
    if (!isfinite(t0) || !isfinite(dt) || !(dt > 0))
        return io_text_fail(c, CS_EDATA, -1, "no usable time axis: t0 %g s, dt %g s", t0, dt);

    cs_record *r = cs_record_alloc(0, c->is_complex);
    cs_record **list = malloc(sizeof *list);
    char *src = io_strdup(c->path);
    if (!r || !list || !src) {
        cs_record_free(r);
        free(list);
        free(src);
        return io_text_fail(c, CS_ENOMEM, -1, "out of memory");
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

int io_text_finish(txt *c)
{
    size_t minp = c->o->min_points ? c->o->min_points : 1;
    if (!c->decided) {
        if (c->line == 0)
            return io_text_fail(c, CS_EDATA, -1, "the file is empty");
        if (c->header_line)
            return io_text_fail(c, CS_EDATA, c->header_line, "a header row but no data rows");
        return io_text_fail(c, CS_EDATA, c->line, "no data rows: only comments and blank lines");
    }
    if (c->n < minp)
        return io_text_fail(c, CS_EDATA, c->last_data_line,
                            "%zu data row%s: at least %zu %s needed", c->n, c->n == 1 ? "" : "s",
                            minp, minp == 1 ? "is" : "are");
    return c->kind == CS_KIND_SPECTRUM ? finish_spectrum(c) : finish_record(c);
}
