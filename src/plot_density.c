/* Map and scatter figures: the spectrogram with gates, and shift or FWHM against density. */
#include <collshift/plot.h>
#include "plot_impl.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>

#include <plplot.h>

/* ---------------------------------------------------------------- spectrogram */

#define CS_PLOT_MAXCELLS 400

typedef struct cs_map_job {
    const cs_plot_spectrogram_data *d;
    size_t mt, mf;       /* cells after averaging */
    PLFLT **z;           /* mt rows of mf dB values */
    double zmin, zmax;
} cs_map_job;

static int cs_plot_spectrogram_draw(const cs_plot_ctx *c, const void *data, cs_error *err)
{
    (void)err;
    const cs_map_job *job = data;
    const cs_plot_spectrogram_data *d = job->d;
    size_t nt = d->ntime, nf = d->nfreq;
    /* cell edges: half a step beyond the first and last centres */
    double dt = nt > 1 ? (d->time_s[nt - 1] - d->time_s[0]) / (double)(nt - 1) : 1e-6;
    double df = nf > 1 ? (d->freq_hz[nf - 1] - d->freq_hz[0]) / (double)(nf - 1) : 1;
    double t0 = d->time_s[0] - dt / 2, t1 = d->time_s[nt - 1] + dt / 2;
    double f0 = d->freq_hz[0] - df / 2, f1 = d->freq_hz[nf - 1] + df / 2;
    cs_plot_axis ax, ay;
    cs_plot_axis_si(&ax, "time", "s", t0, t1, 0);
    cs_plot_axis_si(&ay, "frequency", "Hz", f0, f1, 1);
    double x0 = cs_plot_map(&ax, t0), x1 = cs_plot_map(&ax, t1);
    double y0 = cs_plot_map(&ay, f0), y1 = cs_plot_map(&ay, f1);

    double top = c->title ? 9 : (d->ngates ? 5 : 3);
    cs_plot_viewport(c, 15, 17, 10, top);
    plwind(x0, x1, y0, y1);
    plimage((PLFLT_MATRIX)job->z, (PLINT)job->mt, (PLINT)job->mf, x0, x1, y0, y1, job->zmin, job->zmax,
            x0, x1, y0, y1);
    if (d->ngates)
        cs_plot_gates(c, d->gates, d->ngates, &ax, y0, y1, 0, CS_PC_WHITE);
    cs_plot_frame(c, "bcnst", "bcnstv");
    plmtex("l", 4.6, 0.5, 0.5, ay.label);
    plmtex("b", 2.9, 0.5, 0.5, ax.label);
    if (c->title) {
        plcol0(CS_PC_BLACK);
        cs_plot_text(c, 1.1);
        plmtex("t", d->ngates ? 2.0 : 1.2, 0.5, 0.5, c->title);
        cs_plot_text(c, 1.0);
    }

    /* colour bar: a gradient image with its own axis */
    enum { NB = 128 };
    PLFLT bar[NB], *rows[2] = {bar, bar};
    for (int i = 0; i < NB; i++)
        bar[i] = job->zmin + (job->zmax - job->zmin) * (i + 0.5) / NB;
    cs_plot_viewport(c, c->width_mm - 13.5, 11.5, 10, top);
    plwind(0, 1, job->zmin, job->zmax);
    plimage((PLFLT_MATRIX)rows, 2, NB, 0, 1, job->zmin, job->zmax, job->zmin, job->zmax, 0, 1,
            job->zmin, job->zmax);
    cs_plot_frame(c, "bc", "bcmstv");
    plmtex("r", 4.2, 0.5, 0.5, "PSD (dB rel. max.)");
    return CS_OK;
}

int cs_plot_spectrogram(const char *path, const cs_plot_spectrogram_data *d,
                        const cs_plot_options *o, cs_error *err)
{
    cs_plot_format f;
    int rc = cs_plot_format_from_path(path, &f, err);
    if (rc)
        return rc;
    if (!d || !d->time_s || !d->freq_hz || !d->psd || d->ntime < 1 || d->nfreq < 2 ||
        (d->ngates && !d->gates))
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "spectrogram figure: missing data");
    if (!(d->range_db >= 0) || d->range_db > 400)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1,
                            "spectrogram figure: range %g dB is outside 0 .. 400", d->range_db);
    for (size_t i = 1; i < d->ntime; i++)
        if (!(d->time_s[i] > d->time_s[i - 1]))
            return cs_error_set(err, CS_EDATA, NULL, -1, -1, "spectrogram figure: times not ascending");
    for (size_t k = 1; k < d->nfreq; k++)
        if (!(d->freq_hz[k] > d->freq_hz[k - 1]))
            return cs_error_set(err, CS_EDATA, NULL, -1, -1,
                                "spectrogram figure: frequencies not ascending");
    if (!isfinite(d->time_s[0]) || !isfinite(d->time_s[d->ntime - 1]) || !isfinite(d->freq_hz[0]) ||
        !isfinite(d->freq_hz[d->nfreq - 1]))
        return cs_error_set(err, CS_EDATA, NULL, -1, -1, "spectrogram figure: axis not finite");

    cs_map_job job = {d, 0, 0, NULL, 0, 0};
    size_t ft = (d->ntime + CS_PLOT_MAXCELLS - 1) / CS_PLOT_MAXCELLS;
    size_t ff = (d->nfreq + CS_PLOT_MAXCELLS - 1) / CS_PLOT_MAXCELLS;
    job.mt = (d->ntime + ft - 1) / ft;
    job.mf = (d->nfreq + ff - 1) / ff;
    job.z = malloc(job.mt * sizeof *job.z);
    PLFLT *cells = malloc(job.mt * job.mf * sizeof *cells);
    if (!job.z || !cells) {
        free(job.z);
        free(cells);
        return cs_error_set(err, CS_ENOMEM, NULL, -1, -1, "out of memory");
    }
    double top = 0;
    for (size_t i = 0; i < job.mt; i++) {
        job.z[i] = cells + i * job.mf;
        for (size_t k = 0; k < job.mf; k++) {
            double s = 0;
            size_t cnt = 0;
            for (size_t a = i * ft; a < (i + 1) * ft && a < d->ntime; a++)
                for (size_t b = k * ff; b < (k + 1) * ff && b < d->nfreq; b++) {
                    double v = d->psd[a * d->nfreq + b];
                    if (isfinite(v) && v >= 0)
                        s += v, cnt++;
                }
            job.z[i][k] = cnt ? s / (double)cnt : NAN;
            if (cnt && job.z[i][k] > top)
                top = job.z[i][k];
        }
    }
    if (!(top > 0) || !isfinite(top)) {
        free(job.z);
        free(cells);
        return cs_error_set(err, CS_EDATA, NULL, -1, -1, "spectrogram figure: no positive PSD values");
    }
    double range = d->range_db > 0 ? d->range_db : 50;
    job.zmax = 0;
    job.zmin = -range;
    for (size_t i = 0; i < job.mt * job.mf; i++) {
        double v = cells[i];
        v = v > 0 ? 10 * log10(v / top) : -range;
        cells[i] = isfinite(v) ? fmax(v, -range) : -range;
    }
    rc = cs_plot_render(path, o, 6.0, cs_plot_spectrogram_draw, &job, err);
    free(job.z);
    free(cells);
    return rc;
}

/* ---------------------------------------------------------------- quantity against density */

typedef struct cs_dens_job {
    const cs_plot_density_data *d;
    const char *quantity;
    double *buf;   /* 5n */
} cs_dens_job;

static void cs_plot_draw_line(const cs_plot_line *l, const cs_plot_axis *ax, const cs_plot_axis *ay,
                              double x0, double x1)
{
    PLFLT xs[2] = {x0, x1}, ys[2];
    for (int k = 0; k < 2; k++) {
        double n_m3 = xs[k] * ax->scale + ax->offset;
        ys[k] = cs_plot_map(ay, l->intercept_hz + l->slope_hz_m3 * n_m3);
    }
    plline(2, xs, ys);
}

static int cs_plot_density_draw(const cs_plot_ctx *c, const void *data, cs_error *err)
{
    (void)err;
    const cs_dens_job *job = data;
    const cs_plot_density_data *d = job->d;
    size_t n = d->n;
    double *x = job->buf, *y = x + n, *lo = y + n, *hi = lo + n, *w = hi + n;

    double nlo, nhi, vlo, vhi;
    cs_plot_minmax(d->density_m3, d->density_err_m3, n, &nlo, &nhi);
    nlo = fmin(nlo, 0);  /* densities start at zero: the intercept is part of the story */
    cs_plot_pad(&nlo, &nhi, 0.04);
    nlo = fmax(nlo, 0);
    cs_plot_minmax(d->value_hz, d->err_hz, n, &vlo, &vhi);
    /* lines over the plotted density range */
    const cs_plot_line *lines[17];
    size_t nl = 0;
    if (d->has_fit)
        lines[nl++] = &d->fit;
    for (size_t k = 0; k < d->ntheory && nl < 17; k++)
        lines[nl++] = &d->theory[k];
    for (size_t k = 0; k < nl; k++)
        for (int e = 0; e < 2; e++) {
            double v = lines[k]->intercept_hz + lines[k]->slope_hz_m3 * (e ? nhi : nlo);
            if (isfinite(v)) {
                vlo = fmin(vlo, v);
                vhi = fmax(vhi, v);
            }
        }
    if (strcmp(job->quantity, "FWHM") == 0)
        vlo = fmin(vlo, 0);
    cs_plot_axis ax, ay;
    cs_plot_axis_density(&ax, nlo, nhi);
    cs_plot_axis_si(&ay, job->quantity, "Hz", vlo, vhi, 0);
    double wlo = cs_plot_map(&ay, vlo), whi = cs_plot_map(&ay, vhi);
    cs_plot_pad(&wlo, &whi, 0.06);
    whi += 0.25 * (whi - wlo) * (nl > 2 ? 1.5 : 1);   /* room for the legend */
    double xmin = cs_plot_map(&ax, nlo), xmax = cs_plot_map(&ax, nhi);

    cs_plot_viewport(c, 15, 3, 10, c->title ? 7 : 3);
    plwind(xmin, xmax, wlo, whi);
    cs_plot_frame(c, "bcnst", "bcnstv");
    cs_plot_title(c);
    plmtex("l", 4.6, 0.5, 0.5, ay.label);
    plmtex("b", 2.9, 0.5, 0.5, ax.label);
    plcol0(CS_PC_GREY);
    cs_plot_width(c, 0.4);
    if (wlo < 0 && whi > 0)
        pljoin(xmin, 0, xmax, 0);

    cs_plot_legend_entry le[18];
    size_t ne = 0;
    static const int styles[] = {2, 3, 4, 5, 6, 7, 8};
    for (size_t k = 0; k < nl; k++) {
        int fit = d->has_fit && k == 0;
        int col = fit ? CS_PC_BLACK : cs_plot_series_color(k - (size_t)d->has_fit);
        int sty = fit ? 1 : styles[(k - (size_t)d->has_fit) % 7];
        double pt = fit ? 1.0 : 1.1;
        plcol0(col);
        cs_plot_dash(c, sty);
        cs_plot_width(c, pt);
        cs_plot_draw_line(lines[k], &ax, &ay, xmin, xmax);
        cs_plot_dash(c, 1);
        const char *lab = lines[k]->label;
        if (!lab)
            lab = fit ? "weighted fit" : "estimate";
        le[ne++] = (cs_plot_legend_entry){lab, col, sty, pt, 0};
    }

    size_t m = 0;
    for (size_t i = 0; i < n; i++) {
        if (!isfinite(d->density_m3[i]) || !isfinite(d->value_hz[i]))
            continue;
        x[m] = cs_plot_map(&ax, d->density_m3[i]);
        y[m] = cs_plot_map(&ay, d->value_hz[i]);
        double e = d->err_hz && isfinite(d->err_hz[i]) ? fabs(d->err_hz[i]) / ay.scale : 0;
        lo[m] = y[m] - e;
        hi[m] = y[m] + e;
        m++;
    }
    plcol0(CS_PC_BLACK);
    cs_plot_width(c, 0.7);
    plerry((PLINT)m, x, lo, hi);
    if (d->density_err_m3) {
        size_t j = 0;
        for (size_t i = 0; i < n; i++) {
            if (!isfinite(d->density_m3[i]) || !isfinite(d->value_hz[i]))
                continue;
            double e = isfinite(d->density_err_m3[i]) ? fabs(d->density_err_m3[i]) / ax.scale : 0;
            lo[j] = x[j] - e;
            w[j] = x[j] + e;
            j++;
        }
        plerrx((PLINT)m, lo, w, y);
    }
    cs_plot_text(c, 0.9);
    plstring((PLINT)m, x, y, "●");
    cs_plot_text(c, 1.0);
    cs_plot_legend_entry all[18];
    all[0] = (cs_plot_legend_entry){d->data_label ? d->data_label : "measured", CS_PC_BLACK, 0, 0, 1};
    memcpy(all + 1, le, ne * sizeof *le);
    cs_plot_legend(c, all, ne + 1, 1);
    return CS_OK;
}

static int cs_plot_density(const char *path, const cs_plot_density_data *d, const cs_plot_options *o,
                           const char *quantity, cs_error *err)
{
    cs_plot_format f;
    int rc = cs_plot_format_from_path(path, &f, err);
    if (rc)
        return rc;
    if (!d || !d->density_m3 || !d->value_hz || d->n < 1 || (d->ntheory && !d->theory))
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "%s figure: missing data", quantity);
    if (d->ntheory > 16)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "%s figure: more than 16 estimates",
                            quantity);
    size_t ok = 0;
    for (size_t i = 0; i < d->n; i++)
        ok += isfinite(d->density_m3[i]) && isfinite(d->value_hz[i]);
    if (!ok)
        return cs_error_set(err, CS_EDATA, NULL, -1, -1, "%s figure: no finite points", quantity);
    cs_dens_job job = {d, quantity, malloc(5 * d->n * sizeof(double))};
    if (!job.buf)
        return cs_error_set(err, CS_ENOMEM, NULL, -1, -1, "out of memory");
    rc = cs_plot_render(path, o, 6.0, cs_plot_density_draw, &job, err);
    free(job.buf);
    return rc;
}

int cs_plot_shift_density(const char *path, const cs_plot_density_data *d,
                          const cs_plot_options *o, cs_error *err)
{
    return cs_plot_density(path, d, o, "shift", err);
}

int cs_plot_fwhm_density(const char *path, const cs_plot_density_data *d,
                         const cs_plot_options *o, cs_error *err)
{
    return cs_plot_density(path, d, o, "FWHM", err);
}
