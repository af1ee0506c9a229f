/* `collshift demo`, the campaign: both density series of the bundled data, their regressions and
 * theory comparison, figures against density, and the recovered slopes against truth.csv. */
#include "cli.h"
#include "demo.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>

#include <collshift/plot.h>
#include <collshift/report.h>
#include <collshift/series.h>
#include <collshift/theory.h>

/* Growing text for the CSV tables. */
typedef struct text {
    char *s;
    size_t len, cap;
} text;

static void tx_add(text *t, const char *fmt, ...)
#if defined(__GNUC__)
    __attribute__((format(printf, 2, 3)))
#endif
    ;

#include <stdarg.h>
static void tx_add(text *t, const char *fmt, ...)
{
    va_list ap;
    va_start(ap, fmt);
    int len = vsnprintf(NULL, 0, fmt, ap);
    va_end(ap);
    if (len < 0)
        return;
    if (t->len + (size_t)len + 1 > t->cap) {
        size_t cap = (t->cap ? t->cap * 2 : 4096) + (size_t)len;
        char *s = realloc(t->s, cap);
        if (!s)
            return;
        t->s = s;
        t->cap = cap;
    }
    va_start(ap, fmt);
    vsnprintf(t->s + t->len, (size_t)len + 1, fmt, ap);
    va_end(ap);
    t->len += (size_t)len;
}

/* True slope (Hz cm^3) of column col against density_cm^-3 in truth.csv, by least squares over
 * its rows; NaN when the file or the column is missing. */
static double truth_slope(const char *path, const char *col)
{
    FILE *f = fopen(path, "r");
    if (!f)
        return NAN;
    char line[4096];
    int ic = -1, id = -1;
    double x[256], y[256];
    size_t n = 0;
    if (fgets(line, sizeof line, f)) {
        int k = 0;
        for (char *tok = strtok(line, ",\r\n"); tok; tok = strtok(NULL, ",\r\n"), k++) {
            if (strcmp(tok, col) == 0)
                ic = k;
            if (strcmp(tok, "density_cm^-3") == 0)
                id = k;
        }
    }
    while (ic >= 0 && id >= 0 && n < 256 && fgets(line, sizeof line, f)) {
        double xv = NAN, yv = NAN;
        int k = 0;
        char *p = line;
        for (;;) {
            char *comma = strchr(p, ',');
            if (comma)
                *comma = '\0';
            char *end;
            double v = strtod(p, &end);
            if (end == p)
                v = NAN;
            if (k == id)
                xv = v;
            if (k == ic)
                yv = v;
            if (!comma)
                break;
            p = comma + 1;
            k++;
        }
        if (isfinite(xv) && isfinite(yv)) {
            x[n] = xv;
            y[n] = yv;
            n++;
        }
    }
    fclose(f);
    cs_series_linear lin;
    if (n < 2 || cs_series_linfit(x, y, NULL, n, 0, &lin, NULL) != CS_OK)
        return NAN;
    return lin.slope;
}

/* One shift or FWHM figure (PNG and PDF) of one era. */
static void density_figure(demo_ctx *c, const char *kind, const cs_series *s, const cs_series_regression *reg,
                           const cs_series_compare *cmp, size_t ncmp, cs_split_era era, cs_series_quantity q)
{
    size_t n = 0;
    double *x = malloc((s->n + 1) * sizeof *x), *y = malloc((s->n + 1) * sizeof *y),
           *e = malloc((s->n + 1) * sizeof *e);
    if (!x || !y || !e)
        goto done;
    for (size_t i = 0; i < s->n; i++) {
        const cs_series_line *ln = &s->e[i].era_line[era];
        if (!ln->ok || !isfinite(s->e[i].density_used_m3))
            continue;
        x[n] = s->e[i].density_used_m3;
        if (q == CS_SERIES_Q_FWHM) {
            y[n] = ln->fwhm_hz;
            e[n] = ln->fwhm_hz_err;
        } else {
            y[n] = reg->relative ? ln->shift_hz : ln->center_hz;
            e[n] = reg->relative ? ln->shift_hz_err : ln->center_hz_err;
        }
        n++;
    }
    if (n == 0)
        goto done;
    cs_plot_line th[3];
    size_t nth = 0;
    for (size_t k = 0; k < ncmp && nth < 3; k++) {
        if (cmp[k].era != era || cmp[k].quantity != q)
            continue;
        th[nth].label = cmp[k].estimate == CS_TH_LL_COEF     ? "Lorentz-Lorenz"
                        : cmp[k].estimate == CS_TH_SLAB_COEF ? "slab LL + CLS"
                                                             : "self-broadening";
        th[nth].slope_hz_m3 = cmp[k].theory_hz_cm3 * 1e-6;
        th[nth].intercept_hz = q == CS_SERIES_Q_FWHM && isfinite(reg->fit.intercept) ? reg->fit.intercept : 0.0;
        nth++;
    }
    cs_plot_density_data d = {.n = n, .density_m3 = x, .value_hz = y, .err_hz = e, .data_label = "measured",
                              .has_fit = reg->status == CS_OK,
                              .fit = {"weighted fit", reg->fit.slope * 1e-6, reg->fit.intercept},
                              .ntheory = nth, .theory = th};
    cs_plot_options o;
    cs_plot_options_init(&o);
    const char *ext[] = {"png", "pdf"};
    for (size_t k = 0; k < 2; k++) {
        char rel[256], path[DEMO_PATH_MAX];
        snprintf(rel, sizeof rel, "figures/%s_%s_%s.%s", kind, cs_split_era_name(era),
                 q == CS_SERIES_Q_FWHM ? "fwhm" : "shift", ext[k]);
        demo_join(path, sizeof path, c->out, rel);
        cs_error err;
        cs_error_clear(&err);
        int rc = q == CS_SERIES_Q_FWHM ? cs_plot_fwhm_density(path, &d, &o, &err)
                                       : cs_plot_shift_density(path, &d, &o, &err);
        if (rc != CS_OK) {
            demo_fail(c, "figure", &err);
            continue;
        }
        demo_figure(c, rel);
    }
done:
    free(x);
    free(y);
    free(e);
}

static void campaign(demo_ctx *c, const char *kind, const cs_line *line, text *truth_csv)
{
    char heading[128], path[DEMO_PATH_MAX], rel[128], b1[96], b2[96];
    snprintf(heading, sizeof heading, "Density series: %s", kind);
    cs_report_section(c->rep, heading);
    printf("\n== density series: campaign/%s/manifest.csv, --line %s\n", kind, line->name);
    snprintf(rel, sizeof rel, "campaign/%s/manifest.csv", kind);
    demo_join(path, sizeof path, c->data, rel);
    cs_error err;
    cs_error_clear(&err);
    cs_series *s = NULL;
    if (cs_series_manifest_load(path, &s, &err) != CS_OK) {
        demo_fail(c, "series", &err);
        return;
    }
    cs_report_add_input(c->rep, "manifest", path, NULL);
    for (size_t i = 0; i < s->n; i++)
        cs_report_add_input(c->rep, kind, s->e[i].path, NULL);
    cs_series_params sp;
    cs_series_params_default(&sp);
    sp.threads = cs_series_parallel_available() ? 2 : 1;
    int rc = cs_series_run(s, &sp, &err);
    if (rc != CS_OK && rc != CS_ENOCONV) {
        demo_fail(c, "series", &err);
        cs_series_free(s);
        return;
    }
    cs_report_field(c->rep, "options", strcmp(kind, "records") == 0
                                           ? "split of every record (automatic gates, gate-aware fits)"
                                           : "fit of every spectrum: lorentz+lorentz + linear baseline");
    double dmin = INFINITY, dmax = -INFINITY, dsum = 0, thick = NAN;
    size_t nd = 0, nok = 0;
    for (size_t i = 0; i < s->n; i++) {
        const cs_series_entry *e = &s->e[i];
        if (e->status == CS_SERIES_OK)
            nok++;
        if (isfinite(e->density_used_m3)) {
            dmin = fmin(dmin, e->density_used_m3);
            dmax = fmax(dmax, e->density_used_m3);
            dsum += e->density_used_m3;
            nd++;
        }
        if (isfinite(e->thickness_m))
            thick = e->thickness_m;
    }
    if (!isfinite(c->mid_density_m3) && nd)
        c->mid_density_m3 = 0.5 * (dmin + dmax);
    snprintf(b1, sizeof b1, "%zu of %zu entries measured", nok, s->n);
    cs_report_field(c->rep, "entries", b1);
    printf("  %s\n", b1);
    /* per entry and era */
    text t = {0};
    tx_add(&t, "density_cm3,era,file,status,center_hz,center_hz_err,shift_hz,shift_hz_err,fwhm_hz,fwhm_hz_err\n");
    for (size_t i = 0; i < s->n; i++)
        for (size_t era = 0; era < CS_SPLIT_NERA; era++) {
            const cs_series_entry *e = &s->e[i];
            const cs_series_line *ln = &e->era_line[era];
            tx_add(&t, "%.10g,%s,%s,%s,%.17g,%.17g,%.17g,%.17g,%.17g,%.17g\n", e->density_used_m3 * 1e-6,
                   cs_split_era_name((cs_split_era)era), e->file, cs_series_status_name(e->status), ln->center_hz,
                   ln->center_hz_err, ln->shift_hz, ln->shift_hz_err, ln->fwhm_hz, ln->fwhm_hz_err);
        }
    snprintf(rel, sizeof rel, "tables/series_%s.csv", kind);
    demo_write(c, rel, t.s);
    free(t.s);
    /* regressions */
    cs_series_regression reg[CS_SPLIT_NERA * CS_SERIES_NQ];
    cs_series_regress(s, 0, reg);
    const char *rc_cols[] = {"era", "quantity", "slope (Hz cm^3)", "intercept", "chi2/dof"};
    cs_report_table(c->rep, "Weighted straight lines against density (cm^-3):", 5, rc_cols);
    for (size_t k = 0; k < CS_SPLIT_NERA * CS_SERIES_NQ; k++) {
        const cs_series_regression *r = &reg[k];
        const char *qn = r->quantity == CS_SERIES_Q_FWHM ? "fwhm" : (r->relative ? "shift" : "center");
        char b3[32];
        cs_format_value_err(r->fit.slope, r->fit.slope_err, CS_DIM_DIMENSIONLESS, b1, sizeof b1);
        cs_format_value_err(r->fit.intercept, r->fit.intercept_err, CS_DIM_FREQUENCY, b2, sizeof b2);
        const char *row[] = {cs_split_era_name(r->era), qn, r->status == CS_OK ? b1 : "too few points",
                             r->status == CS_OK ? b2 : "-", demo_num(r->fit.redchi2, b3, sizeof b3)};
        cs_report_row(c->rep, row);
        printf("  %-5s %-6s slope %s Hz cm^3, intercept %s\n", row[0], qn, row[2], row[3]);
    }
    /* theory */
    cs_theory_inputs in;
    cs_theory_inputs_init(&in);
    in.density_m3 = nd ? dsum / (double)nd : NAN;
    in.thickness_m = thick;
    cs_theory_estimates est;
    cs_series_compare cmp[CS_SERIES_COMPARE_MAX];
    size_t ncmp = 0;
    if (cs_theory_predict(line, &in, &est, &err) == CS_OK) {
        ncmp = cs_series_compare_theory(reg, &est, cmp);
        const char *tc[] = {"era", "quantity", "estimate", "theory (Hz cm^3)", "measured (Hz cm^3)", "ratio",
                            "difference (sigma)"};
        cs_report_table(c->rep, "Measured slopes beside the estimates for the line:", 7, tc);
        for (size_t k = 0; k < ncmp; k++) {
            char th[32], me[96], ra[32], ns[32];
            snprintf(th, sizeof th, "%.4g", cmp[k].theory_hz_cm3);
            cs_format_value_err(cmp[k].measured_hz_cm3, cmp[k].measured_hz_cm3_err, CS_DIM_DIMENSIONLESS, me,
                                sizeof me);
            const char *row[] = {cs_split_era_name(cmp[k].era), cs_series_quantity_name(cmp[k].quantity),
                                 cmp[k].name, th, me, demo_num(cmp[k].ratio, ra, sizeof ra),
                                 demo_num(cmp[k].nsigma, ns, sizeof ns)};
            cs_report_row(c->rep, row);
        }
    } else {
        demo_fail(c, "theory", &err);
    }
    /* against the truth */
    snprintf(rel, sizeof rel, "campaign/%s/truth.csv", kind);
    demo_join(path, sizeof path, c->data, rel);
    cs_report_add_input(c->rep, "truth", path, NULL);
    const char *tr_cols[] = {"campaign", "era", "quantity", "recovered (Hz cm^3)", "truth (Hz cm^3)",
                             "difference (sigma)"};
    cs_report_table(c->rep, "Recovered slopes against the true values (truth.csv, least squares over its rows):",
                    6, tr_cols);
    for (size_t k = 0; k < CS_SPLIT_NERA * CS_SERIES_NQ; k++) {
        const cs_series_regression *r = &reg[k];
        char col[64], tv[32], zs[32];
        snprintf(col, sizeof col, "%s_%s_hz", cs_split_era_name(r->era),
                 r->quantity == CS_SERIES_Q_FWHM ? "fwhm" : "center");
        double truth = truth_slope(path, col);
        double z = (r->fit.slope - truth) / r->fit.slope_err;
        cs_format_value_err(r->fit.slope, r->fit.slope_err, CS_DIM_DIMENSIONLESS, b1, sizeof b1);
        snprintf(tv, sizeof tv, "%.4g", truth);
        snprintf(zs, sizeof zs, isfinite(z) ? "%+.2f" : "-", z);
        const char *qn = r->quantity == CS_SERIES_Q_FWHM ? "fwhm" : "shift";
        const char *row[] = {kind, cs_split_era_name(r->era), qn, b1, tv, zs};
        cs_report_row(c->rep, row);
        printf("  %-5s %-5s recovered %s, truth %s Hz cm^3 (%s sigma)\n", row[1], qn, b1, tv, zs);
        tx_add(truth_csv, "%s,%s,%s,%.10g,%.10g,%.10g,%.4f\n", kind, row[1], qn, r->fit.slope, r->fit.slope_err,
               truth, z);
    }
    /* figures */
    for (size_t era = 0; era < CS_SPLIT_NERA; era++)
        for (size_t q = 0; q < CS_SERIES_NQ; q++)
            density_figure(c, kind, s, &reg[era * CS_SERIES_NQ + q], cmp, ncmp, (cs_split_era)era,
                           (cs_series_quantity)q);
    cs_series_free(s);
}

void demo_series(demo_ctx *c, const char *line_name)
{
    const cs_line *line = cs_line_find(line_name);
    if (!line) {
        cs_error err;
        cs_error_set(&err, CS_EINVAL, NULL, -1, -1, "unknown line '%s'", line_name);
        demo_fail(c, "series", &err);
        return;
    }
    text t = {0};
    tx_add(&t, "campaign,era,quantity,slope_hz_cm3,slope_hz_cm3_err,true_slope_hz_cm3,nsigma\n");
    campaign(c, "records", line, &t);
    campaign(c, "spectra", line, &t);
    demo_write(c, "tables/slopes_vs_truth.csv", t.s);
    free(t.s);
}
