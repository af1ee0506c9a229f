/* `collshift series` output: summary, per-density table, regressions, theory, JSON and CSV. */
#include "cli.h"
#include "series_out.h"
#include "plotcli.h"

#include <collshift/plot.h>
#include <collshift/report.h>

#include <jansson.h>
#include <math.h>
#include <stdarg.h>
#include <stdlib.h>
#include <string.h>

typedef struct sbuf {
    char *s;
    size_t n, cap;
    int failed;
} sbuf;

#if defined(__GNUC__)
__attribute__((format(printf, 2, 3)))
#endif
static void sb_printf(sbuf *b, const char *fmt, ...)
{
    if (b->failed)
        return;
    for (;;) {
        va_list ap;
        va_start(ap, fmt);
        int k = vsnprintf(b->s ? b->s + b->n : NULL, b->s ? b->cap - b->n : 0, fmt, ap);
        va_end(ap);
        if (k < 0) {
            b->failed = 1;
            return;
        }
        if (b->s && b->n + (size_t)k < b->cap) {
            b->n += (size_t)k;
            return;
        }
        size_t nc = (b->cap ? 2 * b->cap : 4096) + (size_t)k;
        char *ns = realloc(b->s, nc);
        if (!ns) {
            b->failed = 1;
            return;
        }
        b->s = ns;
        b->cap = nc;
    }
}

static void sb_num(sbuf *b, double v)
{
    if (isfinite(v))
        sb_printf(b, ",%.12g", v);
    else
        sb_printf(b, ",");
}

/* A number cell at full precision; empty when undefined. */
static void sb_num17(sbuf *b, double v)
{
    if (isfinite(v))
        sb_printf(b, ",%.17g", v);
    else
        sb_printf(b, ",");
}

unsigned long long series_fnv1a(unsigned long long h, const void *data, size_t n)
{
    const unsigned char *p = data;
    for (size_t i = 0; i < n; i++) {
        h ^= p[i];
        h *= 0x100000001b3ull;
    }
    return h;
}

/* A CSV text field, quoted when it holds a comma, a quote or a line break. */
static void sb_text(sbuf *b, const char *t)
{
    if (!t)
        t = "";
    if (!strpbrk(t, ",\"\r\n")) {
        sb_printf(b, ",%s", t);
        return;
    }
    sb_printf(b, ",\"");
    for (const char *p = t; *p; p++)
        sb_printf(b, *p == '"' ? "\"\"" : "%c", *p);
    sb_printf(b, "\"");
}

typedef struct order_item {
    double d;
    long line;
    size_t i;
} order_item;

static int order_cmp(const void *a, const void *b)
{
    const order_item *x = a, *y = b;
    int xn = !isfinite(x->d), yn = !isfinite(y->d);
    if (xn != yn)
        return xn - yn;
    if (!xn && x->d != y->d)
        return x->d < y->d ? -1 : 1;
    return (x->line > y->line) - (x->line < y->line);
}

static json_t *line_json(const cs_series_line *l)
{
    if (!l->ok)
        return json_null();
    json_t *o = json_object();
    json_object_set_new(o, "center_hz", cli_jnum(l->center_hz));
    json_object_set_new(o, "center_hz_err", cli_jnum(l->center_hz_err));
    json_object_set_new(o, "shift_hz", cli_jnum(l->shift_hz));
    json_object_set_new(o, "shift_hz_err", cli_jnum(l->shift_hz_err));
    json_object_set_new(o, "fwhm_hz", cli_jnum(l->fwhm_hz));
    json_object_set_new(o, "fwhm_hz_err", cli_jnum(l->fwhm_hz_err));
    json_object_set_new(o, "area", cli_jnum(l->area));
    json_object_set_new(o, "area_err", cli_jnum(l->area_err));
    return o;
}

/* The fit status of an era for outputs: cs_fit_status_name, or "not fitted" when no fit ran. */
static const char *series_fit_status_word(const cs_series_line *l)
{
    return l->nfits ? cs_fit_status_name(l->fit_status) : "not fitted";
}

/* at_bound text ("1.eta:lower;base.c0:upper", possibly ending in "...") as a JSON array of
 * {"name", "bound"} objects, as in the JSON of 'collshift fit'. */
static json_t *at_bound_json(const char *t)
{
    json_t *a = json_array();
    while (t && *t) {
        const char *end = strchr(t, ';');
        size_t n = end ? (size_t)(end - t) : strlen(t);
        char item[CS_SERIES_AT_BOUND_MAX];
        snprintf(item, sizeof item, "%.*s", (int)n, t);
        char *colon = strrchr(item, ':');
        json_t *x = json_object();
        if (colon) {
            *colon = '\0';
            json_object_set_new(x, "name", cli_jstring(item));
            json_object_set_new(x, "bound", cli_jstring(colon + 1));
        } else {   /* "...": the list was cut short */
            json_object_set_new(x, "name", cli_jstring(item));
            json_object_set_new(x, "bound", json_null());
        }
        json_array_append_new(a, x);
        t = end ? end + 1 : NULL;
    }
    return a;
}

json_t *series_entry_json(const cs_series_entry *e)
{
    json_t *o = json_object();
    json_object_set_new(o, "index", json_integer((json_int_t)e->index));
    json_object_set_new(o, "line", json_integer(e->line));
    cli_json_set_path(o, "file", e->file);
    json_object_set_new(o, "status", json_string(cs_series_status_name(e->status)));
    json_object_set_new(o, "message", cli_jstring(e->message));
    json_object_set_new(o, "kind", json_string((e->status == CS_SERIES_FAILED || e->status == CS_SERIES_PENDING) &&
                                                       e->kind == CS_KIND_AUTO
                                                   ? "unknown" : cs_kind_name(e->kind)));
    json_object_set_new(o, "shots", json_integer((json_int_t)e->nshots));
    json_object_set_new(o, "density_cm3", cli_jnum(e->density_used_m3 * 1e-6));
    json_object_set_new(o, "density_m3", cli_jnum(e->density_used_m3));   /* exact, for merge */
    json_object_set_new(o, "density_source", json_string(cs_series_density_source_name(e->density_source)));
    json_object_set_new(o, "temperature_k", cli_jnum(e->temperature_K));
    json_object_set_new(o, "thickness_m", cli_jnum(e->thickness_m));
    json_object_set_new(o, "reference_hz", cli_jnum(e->ref_used_hz));
    if (e->era >= 0)
        json_object_set_new(o, "era", json_string(cs_split_era_name((cs_split_era)e->era)));
    for (int k = 0; k < CS_SPLIT_NERA; k++)
        json_object_set_new(o, cs_split_era_name((cs_split_era)k), line_json(&e->era_line[k]));
    /* per era: the status of the fit(s) behind it (null: none ran) and the parameters at a bound */
    json_t *jfs = json_object(), *jab = json_object();
    for (int k = 0; k < CS_SPLIT_NERA; k++) {
        const cs_series_line *l = &e->era_line[k];
        const char *name = cs_split_era_name((cs_split_era)k);
        json_object_set_new(jfs, name, l->nfits ? json_string(cs_fit_status_name(l->fit_status)) : json_null());
        json_object_set_new(jab, name, at_bound_json(l->at_bound));
    }
    json_object_set_new(o, "fit_status", jfs);
    json_object_set_new(o, "at_bound", jab);
    return o;
}

static json_t *regression_json(const cs_series_regression *r)
{
    json_t *o = json_object();
    json_object_set_new(o, "era", json_string(cs_split_era_name(r->era)));
    json_object_set_new(o, "quantity", json_string(cs_series_quantity_name(r->quantity)));
    json_object_set_new(o, "y", json_string(r->quantity == CS_SERIES_Q_FWHM ? "fwhm_hz"
                                            : r->relative ? "shift_hz" : "center_hz"));
    json_object_set_new(o, "status", json_string(r->status == CS_OK ? "ok" : "too few points"));
    json_object_set_new(o, "through_origin", json_boolean(r->fit.through_origin));
    json_object_set_new(o, "slope_hz_cm3", cli_jnum(r->fit.slope));
    json_object_set_new(o, "slope_hz_cm3_err", cli_jnum(r->fit.slope_err));
    json_object_set_new(o, "intercept_hz", cli_jnum(r->fit.intercept));
    json_object_set_new(o, "intercept_hz_err", cli_jnum(r->fit.intercept_err));
    json_object_set_new(o, "chi2", cli_jnum(r->fit.chi2));
    json_object_set_new(o, "dof", json_integer((json_int_t)r->fit.dof));
    json_object_set_new(o, "chi2_dof", cli_jnum(r->fit.redchi2));
    json_object_set_new(o, "n", json_integer((json_int_t)r->fit.n));
    json_object_set_new(o, "left_out_error_undefined", json_integer((json_int_t)r->left_out));
    json_object_set_new(o, "errors_inflated", json_boolean(r->fit.inflated));
    return o;
}

static json_t *theory_json(const cs_theory_estimates *est, const cs_series_compare *cmp, size_t ncmp)
{
    json_t *o = json_object();
    json_t *jl = json_object();
    json_object_set_new(jl, "name", json_string(est->line.name));
    json_object_set_new(jl, "label", json_string(est->line.label));
    json_object_set_new(jl, "source", json_string(est->line.source));
    json_object_set_new(o, "line", jl);
    json_object_set_new(o, "conventions", json_string(CS_THEORY_CONVENTIONS));
    json_object_set_new(o, "thickness_m", cli_jnum(est->in.thickness_m));
    json_t *je = json_object();
    static const cs_theory_quantity used[] = {CS_TH_LL_COEF, CS_TH_SLAB_COEF, CS_TH_SELF_COEF};
    for (size_t i = 0; i < sizeof used / sizeof used[0]; i++) {
        const cs_estimate *e = &est->e[used[i]];
        json_t *x = json_object();
        json_object_set_new(x, "label", json_string(e->label));
        json_object_set_new(x, "value", cli_jnum(e->value));
        json_object_set_new(x, "unit", json_string(e->unit));
        json_object_set_new(x, "status", json_string(cs_estimate_status_name(e->status)));
        json_object_set_new(x, "formula", json_string(e->formula));
        json_object_set_new(x, "source", json_string(e->source));
        json_object_set_new(x, "note", json_string(e->note));
        json_object_set_new(je, e->name, x);
    }
    json_object_set_new(o, "estimates", je);
    json_t *jc = json_array();
    for (size_t i = 0; i < ncmp; i++) {
        json_t *x = json_object();
        json_object_set_new(x, "era", json_string(cs_split_era_name(cmp[i].era)));
        json_object_set_new(x, "quantity", json_string(cs_series_quantity_name(cmp[i].quantity)));
        json_object_set_new(x, "estimate", json_string(cmp[i].name));
        json_object_set_new(x, "theory_hz_cm3", cli_jnum(cmp[i].theory_hz_cm3));
        json_object_set_new(x, "slope_hz_cm3", cli_jnum(cmp[i].measured_hz_cm3));
        json_object_set_new(x, "slope_hz_cm3_err", cli_jnum(cmp[i].measured_hz_cm3_err));
        json_object_set_new(x, "ratio", cli_jnum(cmp[i].ratio));
        json_object_set_new(x, "nsigma", cli_jnum(cmp[i].nsigma));
        json_array_append_new(jc, x);
    }
    json_object_set_new(o, "comparisons", jc);
    return o;
}

/* printf-style number for the summary, or "undefined" when it could not be computed (never
 * "nan" or "inf"). */
static const char *num_text(double v, const char *fmt, char *buf, size_t n)
{
    if (!isfinite(v))
        return "undefined";
    snprintf(buf, n, fmt, v);
    return buf;
}

static void print_summary(const cs_series *s, const series_opts *so, const order_item *ord,
                          const cs_series_regression *reg, const cs_theory_estimates *est,
                          const cs_series_compare *cmp, size_t ncmp)
{
    size_t nok = cs_series_count(s, CS_SERIES_OK), nfail = cs_series_count(s, CS_SERIES_FAILED);
    size_t npart = cs_series_count(s, CS_SERIES_PARTIAL), npend = cs_series_count(s, CS_SERIES_PENDING);
    printf("%s: %zu entries: %zu ok, %zu partial, %zu failed", s->manifest, s->n, nok, npart, nfail);
    if (npend)
        printf(", %zu not analysed (interrupted: incomplete)", npend);
    printf(" (spectra: model %s; %d thread%s)\n", so->p.model, so->p.threads, so->p.threads == 1 ? "" : "s");
    printf("\nPer density and era (shift = centre minus reference):\n");
    printf("  %-18s %-5s %-24s %-24s %-24s %s\n", "density", "era", "centre", "shift", "FWHM", "file");
    char b1[64], b2[64], b3[64], b4[64];
    for (size_t j = 0; j < s->n; j++) {
        const cs_series_entry *e = &s->e[ord[j].i];
        cs_quantity_format(e->density_used_m3, CS_DIM_DENSITY, 4, b1, sizeof b1);
        if (e->status == CS_SERIES_FAILED || e->status == CS_SERIES_PENDING) {
            char fits[2 * CS_SERIES_AT_BOUND_MAX + 128] = "";
            for (int k = 0; k < CS_SPLIT_NERA; k++) {
                const cs_series_line *l = &e->era_line[k];
                size_t n = strlen(fits);
                if (l->nfits)
                    snprintf(fits + n, sizeof fits - n, "; %s fit: %s%s%s", cs_split_era_name((cs_split_era)k),
                             cs_fit_status_name(l->fit_status), l->at_bound[0] ? ", at a bound: " : "",
                             l->at_bound);
            }
            printf("  %-18s %-5s %-74s %s  [%s%s]\n", isfinite(e->density_used_m3) ? b1 : "-", "-", "-", e->file,
                   e->status == CS_SERIES_FAILED ? "failed, skipped" : "not analysed (interrupted)", fits);
            continue;
        }
        for (int k = 0; k < CS_SPLIT_NERA; k++) {
            const cs_series_line *l = &e->era_line[k];
            char note[CS_SERIES_AT_BOUND_MAX + 96] = "";
            if (l->nfits && (l->fit_status != CS_FIT_CONVERGED || l->at_bound[0]))
                snprintf(note, sizeof note, "  [fit: %s%s%s]", cs_fit_status_name(l->fit_status),
                         l->at_bound[0] ? "; at a bound: " : "", l->at_bound);
            if (!l->ok) {
                if (l->nfits)
                    printf("  %-18s %-5s %-74s %s%s\n", b1, cs_split_era_name((cs_split_era)k),
                           "not measured", e->file, note);
                continue;
            }
            printf("  %-18s %-5s %-24s %-24s %-24s %s%s\n", b1, cs_split_era_name((cs_split_era)k),
                   cs_format_value_err(l->center_hz, l->center_hz_err, CS_DIM_FREQUENCY, b2, sizeof b2),
                   isfinite(l->shift_hz) ? cs_format_value_err(l->shift_hz, l->shift_hz_err, CS_DIM_FREQUENCY,
                                                               b3, sizeof b3) : "-",
                   cs_format_value_err(l->fwhm_hz, l->fwhm_hz_err, CS_DIM_FREQUENCY, b4, sizeof b4), e->file,
                   note);
        }
    }
    printf("\nRegressions against density (y = intercept + slope x density, density in cm^-3%s):\n",
           (so->flags & CS_SERIES_FIT_ORIGIN) ? ", through the origin" : "");
    for (size_t i = 0; i < CS_SPLIT_NERA * CS_SERIES_NQ; i++) {
        const cs_series_regression *r = &reg[i];
        const char *y = r->quantity == CS_SERIES_Q_FWHM ? "fwhm" : r->relative ? "shift" : "centre";
        char left[96] = "";
        if (r->left_out)
            snprintf(left, sizeof left, " (%zu left out: error undefined)", r->left_out);
        if (r->status != CS_OK) {
            printf("  %-5s %-6s  too few points (%zu)%s\n", cs_split_era_name(r->era), y, r->fit.n, left);
            continue;
        }
        printf("  %-5s %-6s  slope %s Hz cm^3, intercept %s, chi2/dof %s, n %zu%s%s\n",
               cs_split_era_name(r->era), y,
               cs_format_value_err(r->fit.slope, r->fit.slope_err, CS_DIM_DIMENSIONLESS, b1, sizeof b1),
               cs_format_value_err(r->fit.intercept, r->fit.intercept_err, CS_DIM_FREQUENCY, b2, sizeof b2),
               num_text(r->fit.redchi2, "%.3g", b3, sizeof b3), r->fit.n, left,
               r->fit.inflated ? "  (errors inflated by sqrt(chi2/dof))"
               : r->fit.dof == 0 ? "  (no degrees of freedom: chi2/dof undefined)" : "");
    }
    if (!est)
        return;
    printf("\nTheory: %s (%s); %s\n", est->line.label, est->line.source, CS_THEORY_CONVENTIONS);
    for (size_t i = 0; i < ncmp; i++) {
        const cs_estimate *e = &est->e[cmp[i].estimate];
        printf("  %-5s %-6s vs %-30s %s Hz cm^3: ratio %s, (measured - theory)/error %s  [%s]\n",
               cs_split_era_name(cmp[i].era), cs_series_quantity_name(cmp[i].quantity), e->label,
               num_text(cmp[i].theory_hz_cm3, "%.4g", b1, sizeof b1), num_text(cmp[i].ratio, "%.3g", b2, sizeof b2),
               num_text(cmp[i].nsigma, "%+.2f", b3, sizeof b3), e->cite);
    }
    for (size_t q = CS_TH_LL_COEF; q <= CS_TH_SELF_COEF; q++)
        if ((q == CS_TH_LL_COEF || q == CS_TH_SLAB_COEF || q == CS_TH_SELF_COEF) &&
            est->e[q].status != CS_EST_OK)
            printf("  %s: %s (%s)\n", est->e[q].label, cs_estimate_status_name(est->e[q].status), est->e[q].note);
}

static char *make_table(const cs_series *s, const order_item *ord)
{
    sbuf t = {0};
    sb_printf(&t, "density_cm3,era,file,line,status,center_hz,center_hz_err,shift_hz,shift_hz_err,"
                  "fwhm_hz,fwhm_hz_err,area,area_err,fit_status,at_bound\n");
    for (size_t j = 0; j < s->n; j++) {
        const cs_series_entry *e = &s->e[ord[j].i];
        for (int k = 0; k < CS_SPLIT_NERA; k++) {
            const cs_series_line *l = &e->era_line[k];
            if (e->status != CS_SERIES_FAILED && !l->ok && e->era >= 0 && e->era != k)
                continue;
            if (isfinite(e->density_used_m3))
                sb_printf(&t, "%.10g", e->density_used_m3 * 1e-6);
            sb_printf(&t, ",%s", cs_split_era_name((cs_split_era)k));
            sb_text(&t, e->file);
            sb_printf(&t, ",%ld,%s", e->line,
                      l->ok ? "ok" : e->status == CS_SERIES_FAILED ? "failed"
                               : e->status == CS_SERIES_PENDING ? "pending" : "not measured");
            sb_num(&t, l->center_hz); sb_num(&t, l->center_hz_err);
            sb_num(&t, l->shift_hz); sb_num(&t, l->shift_hz_err);
            sb_num(&t, l->fwhm_hz); sb_num(&t, l->fwhm_hz_err);
            sb_num(&t, l->area); sb_num(&t, l->area_err);
            sb_text(&t, series_fit_status_word(l));
            sb_text(&t, l->at_bound);
            sb_printf(&t, "\n");
        }
    }
    if (t.failed) {
        free(t.s);
        return NULL;
    }
    return t.s;
}

static char *make_theory_table(const cs_series_regression *reg, const cs_theory_estimates *est,
                               const cs_series_compare *cmp, size_t ncmp)
{
    sbuf t = {0};
    sb_printf(&t, "era,quantity,y,estimate,label,theory_hz_cm3,slope_hz_cm3,slope_hz_cm3_err,ratio,nsigma,"
                  "source\n");
    for (size_t i = 0; est && i < ncmp; i++) {
        const cs_estimate *e = &est->e[cmp[i].estimate];
        sb_printf(&t, "%s,%s", cs_split_era_name(cmp[i].era), cs_series_quantity_name(cmp[i].quantity));
        sb_text(&t, cmp[i].quantity == CS_SERIES_Q_FWHM ? "fwhm_hz"
                    : reg[cmp[i].era * CS_SERIES_NQ + cmp[i].quantity].relative ? "shift_hz" : "center_hz");
        sb_text(&t, cmp[i].name);
        sb_text(&t, e->label);
        sb_num17(&t, cmp[i].theory_hz_cm3);
        sb_num17(&t, cmp[i].measured_hz_cm3);
        sb_num17(&t, cmp[i].measured_hz_cm3_err);
        sb_num(&t, cmp[i].ratio);
        sb_num(&t, cmp[i].nsigma);
        sb_text(&t, e->cite);
        sb_printf(&t, "\n");
    }
    if (t.failed) {
        free(t.s);
        return NULL;
    }
    return t.s;
}

static json_t *run_json(const cs_series *s, const series_opts *so)
{
    json_t *o = json_object();
    json_object_set_new(o, "fingerprint", json_string(so->fingerprint));
    json_object_set_new(o, "options", cli_jstring(so->options ? so->options : ""));
    json_object_set_new(o, "entries_total", json_integer((json_int_t)s->total));
    size_t npend = cs_series_count(s, CS_SERIES_PENDING);
    json_object_set_new(o, "complete", json_boolean(npend == 0));   /* false: interrupted */
    json_object_set_new(o, "entries_pending", json_integer((json_int_t)npend));
    if (so->shard_n) {
        char b[64];
        snprintf(b, sizeof b, "%zu/%zu", so->shard_k, so->shard_n);
        json_object_set_new(o, "shard", json_string(b));
    } else {
        json_object_set_new(o, "shard", json_null());
    }
    if (so->merged)
        json_object_set_new(o, "merged_shards", json_integer((json_int_t)so->merged));
    json_object_set_new(o, "line", so->line ? json_string(so->line->name) : json_null());
    json_object_set_new(o, "thickness_m", cli_jnum(so->thickness_m));
    json_object_set_new(o, "through_origin", json_boolean(so->flags & CS_SERIES_FIT_ORIGIN));
    json_object_set_new(o, "inflate", json_boolean(so->flags & CS_SERIES_FIT_INFLATE));
    return o;
}

/* One density figure (shift or FWHM) of one era; nothing when the era has no points. Returns 0
 * or an exit code; the figure's name is appended to `figures`. */
static int plot_era(const char *file, const cs_series *s, cs_split_era era, cs_series_quantity q,
                    const cs_series_regression *reg, const cs_theory_estimates *est, json_t *figures)
{
    const cs_series_regression *r = &reg[era * CS_SERIES_NQ + q];
    int fit_ok = r->status == CS_OK && isfinite(r->fit.slope);
    /* without references the centres are shown against the fitted low-density limit */
    double offset = (q == CS_SERIES_Q_CENTER && !r->relative && fit_ok) ? r->fit.intercept : 0.0;
    double *x = malloc((s->n ? s->n : 1) * 3 * sizeof *x);
    if (!x) {
        cli_errorf("'%s': out of memory", file);
        return CLI_EXIT_DATA;
    }
    double *y = x + s->n, *ey = y + s->n;
    size_t n = 0;
    for (size_t i = 0; i < s->n; i++) {
        const cs_series_entry *e = &s->e[i];
        const cs_series_line *l = &e->era_line[era];
        if (e->status == CS_SERIES_FAILED || !l->ok || !isfinite(e->density_used_m3))
            continue;
        double v, dv;
        if (q == CS_SERIES_Q_FWHM) {
            v = l->fwhm_hz;
            dv = l->fwhm_hz_err;
        } else if (r->relative || (isfinite(l->shift_hz) && !fit_ok)) {
            v = l->shift_hz;
            dv = l->shift_hz_err;
        } else {
            v = l->center_hz - offset;
            dv = l->center_hz_err;
        }
        if (!isfinite(v))
            continue;
        x[n] = e->density_used_m3;
        y[n] = v;
        ey[n] = dv;
        n++;
    }
    if (n == 0) {
        free(x);
        return 0;
    }
    cs_plot_line th[2];
    size_t nth = 0;
    if (est) {
        static const cs_theory_quantity shift_q[] = {CS_TH_LL_COEF, CS_TH_SLAB_COEF};
        if (q == CS_SERIES_Q_CENTER) {
            for (size_t k = 0; k < 2; k++) {
                const cs_estimate *te = &est->e[shift_q[k]];
                if (te->status != CS_EST_OK || !isfinite(te->value))
                    continue;
                th[nth].label = k == 0 ? "Lorentz-Lorenz" : "slab (LL + CLS)";
                th[nth].slope_hz_m3 = te->value * 1e-6;
                th[nth].intercept_hz = 0.0;
                nth++;
            }
        } else {
            const cs_estimate *te = &est->e[CS_TH_SELF_COEF];
            if (te->status == CS_EST_OK && isfinite(te->value)) {
                th[nth].label = "self-broadening";
                th[nth].slope_hz_m3 = te->value * 1e-6;
                th[nth].intercept_hz = fit_ok ? r->fit.intercept : 0.0;
                nth++;
            }
        }
    }
    cs_plot_density_data d;
    memset(&d, 0, sizeof d);
    d.n = n;
    d.density_m3 = x;
    d.value_hz = y;
    d.err_hz = ey;
    d.data_label = era == CS_SPLIT_BURST ? "burst era" : "tail era";
    d.has_fit = fit_ok;
    d.fit.label = "weighted fit";
    d.fit.slope_hz_m3 = r->fit.slope * 1e-6;
    d.fit.intercept_hz = r->fit.intercept - offset;
    d.ntheory = nth;
    d.theory = nth ? th : NULL;
    cs_plot_options o;
    cs_plot_options_init(&o);
    cs_error err;
    cs_error_clear(&err);
    int rc = q == CS_SERIES_Q_FWHM ? cs_plot_fwhm_density(file, &d, &o, &err)
                                   : cs_plot_shift_density(file, &d, &o, &err);
    free(x);
    if (rc != CS_OK)
        return cli_plot_failed(file, &err);
    json_array_append_new(figures, cli_jstring(file));
    return 0;
}

/* --plot-shift and --plot-fwhm: FILE for the tail era, FILE_burst.EXT for the burst era. */
static int series_plots(const cs_series *s, const series_opts *so, const cs_series_regression *reg,
                        const cs_theory_estimates *est, json_t *figures)
{
    int rc = 0;
    const char *files[CS_SERIES_NQ] = {so->plot_shift, so->plot_fwhm};
    for (int q = 0; q < CS_SERIES_NQ; q++) {
        if (!files[q])
            continue;
        size_t before = json_array_size(figures);
        int failed = 0;
        for (int e = CS_SPLIT_NERA - 1; e >= 0; e--) {
            char name[1024];
            if (e == CS_SPLIT_BURST)
                cli_plot_name(name, sizeof name, files[q], "burst");
            else
                snprintf(name, sizeof name, "%s", files[q]);
            int w = plot_era(name, s, (cs_split_era)e, (cs_series_quantity)q, reg, est, figures);
            if (w) {
                failed = 1;
                rc = rc > w ? rc : w;
            }
        }
        if (!failed && json_array_size(figures) == before) {
            cli_errorf("'%s': no measured points to plot", files[q]);
            rc = rc > CLI_EXIT_DATA ? rc : CLI_EXIT_DATA;
        }
    }
    return rc;
}

int series_output(const cs_series *s, const series_opts *so)
{
    int rc = 0;
    order_item *ord = malloc((s->n ? s->n : 1) * sizeof *ord);
    if (!ord) {
        cli_errorf("series: out of memory");
        return CLI_EXIT_DATA;
    }
    double dsum = 0, thick = so->thickness_m;
    size_t nd = 0;
    int thick_common = 1;
    double thick_first = NAN;
    for (size_t i = 0; i < s->n; i++) {
        ord[i].d = s->e[i].density_used_m3;
        ord[i].line = s->e[i].line;
        ord[i].i = i;
        if (isfinite(ord[i].d)) {
            dsum += ord[i].d;
            nd++;
        }
        double t = s->e[i].thickness_m;
        if (i == 0)
            thick_first = t;
        else if (!(t == thick_first))
            thick_common = 0;
    }
    qsort(ord, s->n, sizeof *ord, order_cmp);
    if (!isfinite(thick) && thick_common && isfinite(thick_first))
        thick = thick_first;

    cs_series_regression reg[CS_SPLIT_NERA * CS_SERIES_NQ];
    cs_series_regress(s, so->flags, reg);

    cs_theory_estimates est;
    cs_series_compare cmp[CS_SERIES_COMPARE_MAX];
    size_t ncmp = 0;
    int have_theory = 0;
    if (so->line) {
        cs_theory_inputs in;
        cs_theory_inputs_init(&in);
        if (nd)
            in.density_m3 = dsum / (double)nd;
        if (isfinite(thick))
            in.thickness_m = thick;
        cs_error err;
        cs_error_clear(&err);
        if (cs_theory_predict(so->line, &in, &est, &err) == CS_OK) {
            have_theory = 1;
            ncmp = cs_series_compare_theory(reg, &est, cmp);
        } else {
            cli_errorf("series: theory: %s", err.msg);
        }
    }
    if (!so->quiet)
        print_summary(s, so, ord, reg, have_theory ? &est : NULL, cmp, ncmp);
    json_t *figures = json_array();
    int plot_rc = (so->plot_shift || so->plot_fwhm)
                      ? series_plots(s, so, reg, have_theory ? &est : NULL, figures) : 0;

    if (so->json) {
        json_t *root = json_object();
        json_object_set_new(root, "command", json_string(so->command ? so->command : "series"));
        cli_json_set_path(root, "manifest", s->manifest);
        json_object_set_new(root, "conventions", json_string(CS_THEORY_CONVENTIONS));
        json_object_set_new(root, "model", json_string(so->p.model));
        json_object_set_new(root, "spectrum_eras", json_string("broadest component = burst, narrowest = tail"));
        json_object_set_new(root, "threads", json_integer(so->p.threads));
        json_object_set_new(root, "run", run_json(s, so));
        json_t *je = json_array();
        for (size_t i = 0; i < s->n; i++)
            json_array_append_new(je, series_entry_json(&s->e[i]));
        json_object_set_new(root, "entries", je);
        json_t *jr = json_array();
        int inflated = 0;
        for (size_t i = 0; i < CS_SPLIT_NERA * CS_SERIES_NQ; i++) {
            json_array_append_new(jr, regression_json(&reg[i]));
            inflated |= reg[i].fit.inflated;
        }
        json_object_set_new(root, "regressions", jr);
        json_object_set_new(root, "regression_note",
                            json_string(inflated ? "errors multiplied by sqrt(chi2/dof) where chi2/dof > 1 (--inflate)"
                                                 : "errors from the stated errors of the points"));
        json_object_set_new(root, "theory", have_theory ? theory_json(&est, cmp, ncmp) : json_null());
        json_object_set_new(root, "figures", figures);
        figures = NULL;
        char *text = json_dumps(root, JSON_INDENT(2) | JSON_REAL_PRECISION(17));
        json_decref(root);
        if (!text) {
            cli_errorf("series: out of memory");
            rc = CLI_EXIT_DATA;
        } else {
            size_t n = strlen(text);
            char *t2 = realloc(text, n + 2);
            if (t2) {
                text = t2;
                strcpy(text + n, "\n");
            }
            int w = cli_write_text(so->json, text);
            if (w)
                rc = w;
            free(text);
        }
    }
    if (so->table) {
        char *t = make_table(s, ord);
        if (!t) {
            cli_errorf("series: out of memory");
            rc = CLI_EXIT_DATA;
        } else {
            int w = cli_write_text(so->table, t);
            if (w)
                rc = w;
            free(t);
        }
    }
    if (so->theory_table) {
        char *t = make_theory_table(reg, have_theory ? &est : NULL, cmp, ncmp);
        if (!t) {
            cli_errorf("series: out of memory");
            rc = CLI_EXIT_DATA;
        } else {
            int w = cli_write_text(so->theory_table, t);
            if (w)
                rc = w;
            free(t);
        }
    }
    json_decref(figures);
    free(ord);
    return plot_rc > rc ? plot_rc : rc;
}
