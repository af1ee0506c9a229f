/* What the loaders share once data are read: a spectrum's axis in ascending Hz, record lists. */
#include "io_internal.h"

#include <stdio.h>
#include <stdlib.h>
#include <string.h>

char *io_strdup(const char *s)
{
    size_t n = strlen(s) + 1;
    char *d = malloc(n);
    if (d)
        memcpy(d, s, n);
    return d;
}

void io_records_free(cs_record **recs, size_t n)
{
    if (!recs)
        return;
    for (size_t i = 0; i < n; i++)
        cs_record_free(recs[i]);
    free(recs);
}

void io_reverse(double *v, size_t n)
{
    if (!v || n < 2)
        return;
    for (size_t i = 0, j = n - 1; i < j; i++, j--) {
        double t = v[i];
        v[i] = v[j];
        v[j] = t;
    }
}

int io_spectrum_finish(cs_spectrum *sp, const cs_unit *u, int assumed, const cs_load_options *o,
                       const char *path, io_spectrum_fault *fault, size_t *at, cs_error *err)
{
    const size_t n = sp->n;
    if (sp->sigma)
        for (size_t i = 0; i < n; i++)
            if (!(sp->sigma[i] > 0.0)) {
                *fault = IO_SPECTRUM_SIGMA;
                *at = i;
                return CS_EDATA;
            }
    sp->conv.air = o->air;
    sp->conv.y_is_density = o->y_is_density;
    int rc = cs_axis_to_hz(sp->freq_hz, sp->y, sp->sigma, n, u, &sp->conv, err);
    if (rc != CS_OK) {
        if (err)
            snprintf(err->file, sizeof err->file, "%s", path);
        return rc;
    }
    /* strictly monotonic in file order, either way */
    double dir = sp->freq_hz[1] > sp->freq_hz[0] ? 1.0 : -1.0;
    for (size_t i = 1; i < n; i++) {
        double d = sp->freq_hz[i] - sp->freq_hz[i - 1];
        if (!(d * dir > 0.0)) {
            *fault = d == 0.0 ? IO_SPECTRUM_REPEAT : IO_SPECTRUM_BACK;
            *at = i;
            return CS_EDATA;
        }
    }
    if (dir < 0.0) {
        io_reverse(sp->freq_hz, n);
        io_reverse(sp->y, n);
        io_reverse(sp->sigma, n);
        sp->conv.reversed = 1;
    }
    snprintf(sp->x_unit, sizeof sp->x_unit, "%s", u->name);
    sp->x_unit_assumed = assumed;
    return CS_OK;
}

void io_spectrum_notes(cs_loaded *out, const cs_spectrum *sp, const cs_unit *u, int assumed,
                       int air, int name_sigma)
{
    if (assumed)
        cs_loaded_note(out, "no axis unit given: x taken as Hz");
    else if (u->dim != CS_DIM_FREQUENCY || u->scale != 1.0)
        cs_loaded_note(out, "axis in %s converted to Hz%s", u->name,
                       u->dim != CS_DIM_LENGTH ? ""
                       : air                   ? " (air wavelengths)"
                                               : " (vacuum)");
    if (sp->conv.jacobian_applied)
        cs_loaded_note(out, "Jacobian applied to y%s", name_sigma && sp->sigma ? " and sigma" : "");
    if (sp->conv.reversed)
        cs_loaded_note(out, "axis reversed to ascending frequency");
}
