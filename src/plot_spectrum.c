/* Line figures: a spectrum with its fitted components and residuals, and a burst envelope with gates. */
#include <collshift/plot.h>
#include "plot_impl.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>

#include <plplot.h>

#define CS_PLOT_MAXCOMP 12

/* Draw the finite runs of (x, y) as lines (NaN breaks the line). */
static void cs_plot_polyline(const double *x, const double *y, size_t n)
{
    size_t i = 0;
    while (i < n) {
        while (i < n && !(isfinite(x[i]) && isfinite(y[i])))
            i++;
        size_t j = i;
        while (j < n && isfinite(x[j]) && isfinite(y[j]))
            j++;
        if (j - i >= 2)
            plline((PLINT)(j - i), x + i, y + i);
        i = j;
    }
}

/* ---------------------------------------------------------------- spectrum */

typedef struct cs_spec_job {
    const cs_plot_spectrum_data *d;
    double *buf;  /* 6n scratch */
} cs_spec_job;

static int cs_plot_spectrum_draw(const cs_plot_ctx *c, const void *data, cs_error *err)
{
    (void)err;
    const cs_spec_job *job = data;
    const cs_plot_spectrum_data *d = job->d;
    size_t n = d->n;
    double *x = job->buf, *y = x + n, *lo = y + n, *hi = lo + n, *r = hi + n, *u = r + n;
    const char *qty = d->y_quantity && *d->y_quantity ? d->y_quantity : "intensity";

    double flo = d->freq_hz[0], fhi = d->freq_hz[n - 1];
    cs_plot_axis ax, ay, ar;
    cs_plot_axis_si(&ax, "frequency", "Hz", flo, fhi, 1);
    double ylo, yhi;
    cs_plot_minmax(d->y, d->sigma, n, &ylo, &yhi);
    if (d->total) {
        double a, b;
        if (cs_plot_minmax(d->total, NULL, n, &a, &b)) {
            ylo = fmin(ylo, a);
            yhi = fmax(yhi, b);
        }
    }
    for (size_t k = 0; k < d->ncomp; k++) {
        double a, b;
        if (cs_plot_minmax(d->comp[k], NULL, n, &a, &b)) {
            ylo = fmin(ylo, a);
            yhi = fmax(yhi, b);
        }
    }
    cs_plot_axis_plain(&ay, qty, d->y_unit, ylo, yhi);
    for (size_t i = 0; i < n; i++)
        x[i] = cs_plot_map(&ax, d->freq_hz[i]);
    double xmin = x[0], xmax = x[n - 1];
    double wlo = cs_plot_map(&ay, ylo), whi = cs_plot_map(&ay, yhi);
    cs_plot_pad(&wlo, &whi, 0.05);
    whi += 0.12 * (whi - wlo);  /* room for the legend */

    double top = c->title ? 7 : 3, left = 15, right = 3, bottom = 10;
    double avail = c->height_mm - top - bottom;
    double split = d->total ? c->height_mm - top - 0.7 * avail : bottom;

    /* main panel */
    cs_plot_viewport(c, left, right, split + (d->total ? 1 : 0), top);
    plwind(xmin, xmax, wlo, whi);
    cs_plot_frame(c, d->total ? "bcst" : "bcnst", "bcnstv");
    cs_plot_title(c);
    plmtex("l", 4.6, 0.5, 0.5, ay.label);
    if (!d->total)
        plmtex("b", 2.9, 0.5, 0.5, ax.label);

    int dots = n <= 600, bars = n <= 80;
    for (size_t i = 0; i < n; i++) {
        y[i] = cs_plot_map(&ay, d->y[i]);
        double s = d->sigma && isfinite(d->sigma[i]) ? d->sigma[i] / ay.scale : 0;
        lo[i] = y[i] - s;
        hi[i] = y[i] + s;
    }
    plcol0(dots ? CS_PC_BLACK : CS_PC_GREY);
    cs_plot_width(c, dots ? 0.5 : 0.6);
    if (d->sigma && bars)
        plerry((PLINT)n, x, lo, hi);
    if (dots) {
        cs_plot_text(c, bars ? 0.8 : 0.45);
        plstring((PLINT)n, x, y, "●");
        cs_plot_text(c, 1.0);
    } else {
        cs_plot_polyline(x, y, n);
    }

    cs_plot_legend_entry le[CS_PLOT_MAXCOMP + 2];
    size_t nle = 0;
    le[nle++] = (cs_plot_legend_entry){"data", dots ? CS_PC_BLACK : CS_PC_GREY, dots ? 0 : 1, 0.6,
                                       dots};
    char names[CS_PLOT_MAXCOMP][32];
    size_t ncomp = d->ncomp < CS_PLOT_MAXCOMP ? d->ncomp : CS_PLOT_MAXCOMP;
    for (size_t k = 0; k < ncomp; k++) {
        for (size_t i = 0; i < n; i++)
            u[i] = cs_plot_map(&ay, d->comp[k][i]);
        int col = cs_plot_series_color(k + 1);
        plcol0(col);
        cs_plot_dash(c, 2);
        cs_plot_width(c, 0.9);
        cs_plot_polyline(x, u, n);
        cs_plot_dash(c, 1);
        const char *lab = d->comp_label && d->comp_label[k] ? d->comp_label[k] : NULL;
        if (!lab) {
            snprintf(names[k], sizeof names[k], "component %zu", k + 1);
            lab = names[k];
        }
        le[nle++] = (cs_plot_legend_entry){lab, col, 2, 0.9, 0};
    }
    if (d->total) {
        for (size_t i = 0; i < n; i++)
            u[i] = cs_plot_map(&ay, d->total[i]);
        plcol0(CS_PC_BLUE);
        cs_plot_width(c, 1.2);
        cs_plot_polyline(x, u, n);
        le[nle++] = (cs_plot_legend_entry){"total fit", CS_PC_BLUE, 1, 1.2, 0};
    }
    cs_plot_legend(c, le, nle, 0);
    if (!d->total)
        return CS_OK;

    /* residual panel */
    for (size_t i = 0; i < n; i++) {
        r[i] = d->y[i] - d->total[i];
        u[i] = d->sigma && isfinite(d->sigma[i]) ? d->sigma[i] : 0;
    }
    double rlo, rhi;
    if (!cs_plot_minmax(r, d->sigma ? u : NULL, n, &rlo, &rhi))
        rlo = -1, rhi = 1;
    double rm = fmax(fabs(rlo), fabs(rhi));
    if (!(rm > 0))
        rm = fabs(yhi - ylo) > 0 ? 0.01 * fabs(yhi - ylo) : 1;
    cs_plot_axis_plain(&ar, "residual", d->y_unit, -rm, rm);
    /* residuals in the main panel's power of ten when it is close, so the panels compare */
    if (fabs(log10(ar.scale / ay.scale)) <= 2) {
        ar.scale = ay.scale;
        const char *p = strchr(ay.label, '(');
        snprintf(ar.label, sizeof ar.label, "resid. %s", p ? p : "");
    }
    for (size_t i = 0; i < n; i++) {
        y[i] = r[i] / ar.scale;
        lo[i] = y[i] - u[i] / ar.scale;
        hi[i] = y[i] + u[i] / ar.scale;
    }
    double rw = 1.15 * rm / ar.scale;
    cs_plot_viewport(c, left, right, bottom, c->height_mm - split);
    plwind(xmin, xmax, -rw, rw);
    cs_plot_frame(c, "bcnst", "bcnstv");
    plmtex("l", 4.6, 0.5, 0.5, ar.label);
    plmtex("b", 2.9, 0.5, 0.5, ax.label);
    plcol0(CS_PC_GREY);
    cs_plot_width(c, 0.5);
    pljoin(xmin, 0, xmax, 0);
    plcol0(dots ? CS_PC_BLACK : CS_PC_GREY);
    if (d->sigma && bars)
        plerry((PLINT)n, x, lo, hi);
    if (dots) {
        cs_plot_text(c, bars ? 0.8 : 0.45);
        plstring((PLINT)n, x, y, "●");
        cs_plot_text(c, 1.0);
    } else {
        cs_plot_width(c, 0.6);
        cs_plot_polyline(x, y, n);
    }
    return CS_OK;
}

int cs_plot_spectrum(const char *path, const cs_plot_spectrum_data *d, const cs_plot_options *o,
                     cs_error *err)
{
    cs_plot_format f;
    int rc = cs_plot_format_from_path(path, &f, err);
    if (rc)
        return rc;
    if (!d || !d->freq_hz || !d->y || d->n < 2 || (d->ncomp && !d->comp))
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "spectrum figure: missing data");
    for (size_t k = 0; k < d->ncomp; k++)
        if (!d->comp[k])
            return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "spectrum figure: component %zu missing",
                                k + 1);
    for (size_t i = 0; i < d->n; i++)
        if (!isfinite(d->freq_hz[i]) || (i && d->freq_hz[i] <= d->freq_hz[i - 1]))
            return cs_error_set(err, CS_EDATA, NULL, -1, -1,
                                "spectrum figure: frequency axis not finite and ascending at point %zu",
                                i + 1);
    double a, b;
    if (!cs_plot_minmax(d->y, NULL, d->n, &a, &b))
        return cs_error_set(err, CS_EDATA, NULL, -1, -1, "spectrum figure: no finite values");
    cs_spec_job job = {d, malloc(6 * d->n * sizeof(double))};
    if (!job.buf)
        return cs_error_set(err, CS_ENOMEM, NULL, -1, -1, "out of memory");
    rc = cs_plot_render(path, o, d->total ? 7.5 : 6.0, cs_plot_spectrum_draw, &job, err);
    free(job.buf);
    return rc;
}

/* ---------------------------------------------------------------- envelope */

typedef struct cs_env_job {
    const cs_plot_envelope_data *d;
    double *x, *y;    /* decimated, display units */
    size_t m;
} cs_env_job;

static int cs_plot_envelope_draw(const cs_plot_ctx *c, const void *data, cs_error *err)
{
    (void)err;
    const cs_env_job *job = data;
    const cs_plot_envelope_data *d = job->d;
    const char *qty = d->y_quantity && *d->y_quantity ? d->y_quantity : "intensity";
    cs_plot_axis ax, ay;
    cs_plot_axis_si(&ax, "time", "s", d->t_s[0], d->t_s[d->n - 1], 0);
    double ylo, yhi;
    size_t m = 0;
    if (d->log_y) {
        double top = -INFINITY;
        for (size_t i = 0; i < d->n; i++)
            if (isfinite(d->intensity[i]) && d->intensity[i] > top)
                top = d->intensity[i];
        double floor_v = top * 1e-6, bot = top;
        for (size_t i = 0; i < d->n; i++)
            if (d->intensity[i] > floor_v && d->intensity[i] < bot)
                bot = d->intensity[i];
        ay.offset = 0;
        ay.scale = 1;
        snprintf(ay.label, sizeof ay.label, "%s (%s)", qty,
                 d->y_unit && *d->y_unit ? d->y_unit : "arb. u.");
        ylo = floor(log10(bot) * 5) / 5;
        yhi = log10(top) + 0.1;
        if (!(yhi > ylo))
            ylo = yhi - 1;
    } else {
        cs_plot_minmax(d->intensity, NULL, d->n, &ylo, &yhi);
        cs_plot_axis_plain(&ay, qty, d->y_unit, ylo, yhi);
        ylo /= ay.scale;
        yhi /= ay.scale;
        cs_plot_pad(&ylo, &yhi, 0.05);
    }
    /* min/max per bin keeps peaks visible when there are far more samples than pixels */
    size_t bins = d->n > 4000 ? 1500 : d->n;
    for (size_t b = 0; b < bins; b++) {
        size_t i0 = b * d->n / bins, i1 = (b + 1) * d->n / bins;
        double lo = INFINITY, hi = -INFINITY;
        size_t ilo = i0, ihi = i0;
        for (size_t i = i0; i < i1; i++) {
            double v = d->intensity[i];
            if (d->log_y)
                v = v > 0 ? log10(v) : NAN;
            else
                v /= ay.scale;
            if (!isfinite(v))
                continue;
            if (v < lo)
                lo = v, ilo = i;
            if (v > hi)
                hi = v, ihi = i;
        }
        if (!isfinite(lo)) {
            job->x[m] = NAN;
            job->y[m++] = NAN;
            continue;
        }
        size_t first = ilo < ihi ? ilo : ihi, second = ilo < ihi ? ihi : ilo;
        job->x[m] = cs_plot_map(&ax, d->t_s[first]);
        job->y[m++] = first == ilo ? lo : hi;
        if (second != first) {
            job->x[m] = cs_plot_map(&ax, d->t_s[second]);
            job->y[m++] = second == ilo ? lo : hi;
        }
    }
    double xmin = cs_plot_map(&ax, d->t_s[0]), xmax = cs_plot_map(&ax, d->t_s[d->n - 1]);
    double top = c->title ? 9 : (d->ngates ? 5 : 3);
    cs_plot_viewport(c, 15, 3, 10, top);
    plwind(xmin, xmax, ylo, yhi);
    if (d->ngates)
        cs_plot_gates(c, d->gates, d->ngates, &ax, ylo, yhi, 1, CS_PC_BLUE);
    cs_plot_frame(c, "bcnst", d->log_y ? "bcnstvl" : "bcnstv");
    plmtex("l", 4.6, 0.5, 0.5, ay.label);
    plmtex("b", 2.9, 0.5, 0.5, ax.label);
    if (c->title) {
        plcol0(CS_PC_BLACK);
        cs_plot_text(c, 1.1);
        plmtex("t", d->ngates ? 2.0 : 1.2, 0.5, 0.5, c->title);
        cs_plot_text(c, 1.0);
    }
    plcol0(CS_PC_BLACK);
    cs_plot_width(c, 0.8);
    /* clip to the window: log values below the axis are cut at its bottom */
    for (size_t i = 0; i < m; i++)
        if (isfinite(job->y[i]) && job->y[i] < ylo)
            job->y[i] = ylo;
    cs_plot_polyline(job->x, job->y, m);
    return CS_OK;
}

int cs_plot_envelope(const char *path, const cs_plot_envelope_data *d, const cs_plot_options *o,
                     cs_error *err)
{
    cs_plot_format f;
    int rc = cs_plot_format_from_path(path, &f, err);
    if (rc)
        return rc;
    if (!d || !d->t_s || !d->intensity || d->n < 2 || (d->ngates && !d->gates))
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "envelope figure: missing data");
    if (!(d->t_s[d->n - 1] > d->t_s[0]) || !isfinite(d->t_s[0]) || !isfinite(d->t_s[d->n - 1]))
        return cs_error_set(err, CS_EDATA, NULL, -1, -1, "envelope figure: time axis not ascending");
    int any = 0;
    for (size_t i = 0; i < d->n && !any; i++)
        any = isfinite(d->intensity[i]) && (!d->log_y || d->intensity[i] > 0);
    if (!any)
        return cs_error_set(err, CS_EDATA, NULL, -1, -1, "envelope figure: no %svalues to plot",
                            d->log_y ? "positive " : "finite ");
    cs_env_job job = {d, malloc(4 * d->n * sizeof(double)), NULL, 0};
    if (!job.x)
        return cs_error_set(err, CS_ENOMEM, NULL, -1, -1, "out of memory");
    job.y = job.x + 2 * d->n;
    rc = cs_plot_render(path, o, 6.0, cs_plot_envelope_draw, &job, err);
    free(job.x);
    return rc;
}
