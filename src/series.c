/* Running a campaign: every manifest entry loaded and analysed (split or fit), in parallel. */
#include <collshift/series.h>

#include <gsl/gsl_errno.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#ifdef _OPENMP
#include <omp.h>
#endif

const char *cs_series_status_name(cs_series_status s)
{
    switch (s) {
    case CS_SERIES_PENDING: return "pending";
    case CS_SERIES_OK: return "ok";
    case CS_SERIES_PARTIAL: return "partial";
    case CS_SERIES_FAILED: return "failed";
    }
    return "unknown";
}

const char *cs_series_density_source_name(cs_series_density_source s)
{
    switch (s) {
    case CS_SERIES_DENSITY_NONE: return "none";
    case CS_SERIES_DENSITY_MANIFEST: return "manifest";
    case CS_SERIES_DENSITY_TEMPERATURE: return "manifest temperature";
    case CS_SERIES_DENSITY_META: return "file metadata";
    case CS_SERIES_DENSITY_META_TEMPERATURE: return "file temperature";
    }
    return "unknown";
}

void cs_series_params_default(cs_series_params *p)
{
    if (!p)
        return;
    memset(p, 0, sizeof *p);
    p->model = "lorentz+lorentz";
    p->baseline = CS_BASELINE_LINEAR;
    p->fit = cs_fit_default_parameters();
    cs_split_params_default(&p->split);
    cs_load_options_init(&p->load);
    p->ref_hz = NAN;
    p->element = NULL;
    p->threads = 1;
}

int cs_series_parallel_available(void)
{
#ifdef _OPENMP
    return 1;
#else
    return 0;
#endif
}

/* Not measured: numbers NaN (what is known of the fits stays). */
static void line_nan(cs_series_line *l)
{
    l->ok = 0;
    l->center_hz = l->center_hz_err = l->shift_hz = l->shift_hz_err = NAN;
    l->fwhm_hz = l->fwhm_hz_err = l->area = l->area_err = NAN;
}

static void line_reset(cs_series_line *l)
{
    line_nan(l);
    l->nfits = 0;
    l->fit_status = CS_FIT_CONVERGED;
    l->at_bound[0] = '\0';
}

/* Order of badness of fit statuses (worst wins when shots are combined). */
static int status_rank(cs_fit_status s)
{
    switch (s) {
    case CS_FIT_CONVERGED: return 0;
    case CS_FIT_SINGULAR: return 1;
    case CS_FIT_NOT_CONVERGED: return 2;
    case CS_FIT_MODEL_NAN: return 3;
    case CS_FIT_BAD_INPUT: return 4;
    }
    return 5;
}

static void note_status(cs_series_line *l, cs_fit_status s)
{
    if (l->nfits == 0 || status_rank(s) > status_rank(l->fit_status))
        l->fit_status = s;
    l->nfits++;
}

/* Add "NAME:lower" or "NAME:upper" to l->at_bound unless the name is there already. */
static void note_bound(cs_series_line *l, const char *name, int at)
{
    char item[64];
    snprintf(item, sizeof item, "%s:%s", name, at == 1 ? "lower" : "upper");
    size_t n = strlen(l->at_bound), k = strlen(item);
    for (const char *p = l->at_bound; (p = strstr(p, item)) != NULL; p += k)
        if ((p == l->at_bound || p[-1] == ';') && (p[k] == ';' || p[k] == '\0'))
            return;
    if (n >= 3 && strcmp(l->at_bound + n - 3, "...") == 0)
        return;   /* full */
    if (n + (n ? 1 : 0) + k + 4 > sizeof l->at_bound) {
        snprintf(l->at_bound + n, sizeof l->at_bound - n, "%s...", n ? ";" : "");
        return;
    }
    snprintf(l->at_bound + n, sizeof l->at_bound - n, "%s%s", n ? ";" : "", item);
}

/* The parameters of component c of m (and of its baseline) that r has at a bound. */
static void note_bounds(cs_series_line *l, const cs_model *m, const cs_fit_result *r, size_t c)
{
    if (!m || !r || !r->at_bound || c >= m->ncomp)
        return;
    const cs_model_component *mc = &m->comp[c];
    for (size_t i = 0; i < m->nparams && i < r->nparams; i++) {
        int mine = (i >= mc->first && i < mc->first + mc->type->nparams) || i >= m->base_first;
        if (mine && (r->at_bound[i] == 1 || r->at_bound[i] == 2))
            note_bound(l, m->par[i].name, r->at_bound[i]);
    }
}

static void entry_reset(cs_series_entry *e)
{
    e->status = CS_SERIES_PENDING;
    e->message[0] = '\0';
    e->error_code = CS_OK;
    e->kind = CS_KIND_AUTO;
    e->nshots = 0;
    e->density_used_m3 = NAN;
    e->density_source = CS_SERIES_DENSITY_NONE;
    e->ref_used_hz = NAN;
    for (int k = 0; k < CS_SPLIT_NERA; k++)
        line_reset(&e->era_line[k]);
}

static void entry_fail(cs_series_entry *e, const cs_error *err, int code)
{
    char buf[CS_ERROR_MSG_MAX + CS_ERROR_FILE_MAX + 64];
    e->status = CS_SERIES_FAILED;
    e->error_code = code;
    snprintf(e->message, sizeof e->message, "%s", cs_error_format(err, buf, sizeof buf));
}

/* The entry's density from the manifest or the file's metadata (see series.h). */
static int entry_density(cs_series_entry *e, const cs_meta *meta, const char *element, cs_error *err)
{
    if (isfinite(e->density_m3)) {
        e->density_used_m3 = e->density_m3;
        e->density_source = CS_SERIES_DENSITY_MANIFEST;
        return CS_OK;
    }
    double T = e->temperature_K;
    cs_series_density_source src = CS_SERIES_DENSITY_TEMPERATURE;
    if (!isfinite(T)) {
        double n;
        if (meta && cs_meta_get_si(meta, "density", CS_DIM_DENSITY, &n, NULL) == CS_OK && n > 0) {
            e->density_used_m3 = n;
            e->density_source = CS_SERIES_DENSITY_META;
            return CS_OK;
        }
        if (!meta || cs_meta_get_si(meta, "temperature", CS_DIM_TEMPERATURE, &T, NULL) != CS_OK)
            return cs_error_set(err, CS_EDATA, e->path, -1, -1,
                                "no density: give it in the manifest, as a temperature, or as the file's "
                                "'density' or 'temperature' metadata");
        src = CS_SERIES_DENSITY_META_TEMPERATURE;
    }
    if (!element)
        return cs_error_set(err, CS_EINVAL, e->path, -1, -1,
                            "density from temperature needs the element (--element or a line's element)");
    double n = cs_vapour_density(element, T);
    if (!(n > 0))
        return cs_error_set(err, CS_EDATA, e->path, -1, -1,
                            "no vapour density of '%s' at %g K", element, T);
    e->density_used_m3 = n;
    e->density_source = src;
    return CS_OK;
}

static void set_ref(cs_series_entry *e, const cs_series_params *p, const cs_meta *meta)
{
    double r = NAN;
    if (isfinite(e->ref_hz))
        r = e->ref_hz;
    else if (isfinite(p->ref_hz))
        r = p->ref_hz;
    else if (meta && cs_meta_get_si(meta, "reference", CS_DIM_FREQUENCY, &r, NULL) != CS_OK)
        r = NAN;
    e->ref_used_hz = r;
}

static void finish_shift(cs_series_line *l, double ref)
{
    if (l->ok && isfinite(ref)) {
        l->shift_hz = l->center_hz - ref;
        l->shift_hz_err = l->center_hz_err;
    } else {
        l->shift_hz = l->shift_hz_err = NAN;
    }
}

/* Spectra: fit the plain model; broadest component = burst era, narrowest = tail era. */
static int run_spectrum(cs_series_entry *e, const cs_spectrum *sp, const cs_series_params *p,
                        cs_fit_workspace *fws, cs_error *err)
{
    cs_model *m = cs_model_alloc(p->model, p->baseline, CS_MODEL_SUM, err);
    if (!m)
        return err ? err->code : CS_EINVAL;
    cs_fit_result *r = NULL;
    int rc = cs_fit_run(fws, m, sp->freq_hz, sp->y, sp->sigma, NULL, sp->n, &p->fit, &r, err);
    if (!r) {
        cs_model_free(m);
        return rc == CS_OK ? CS_EDATA : rc;
    }
    for (int k = 0; k < CS_SPLIT_NERA; k++) {
        int want = e->era < 0 ? (m->ncomp >= 2 || k == CS_SPLIT_TAIL) : e->era == k;
        if (want)
            note_status(&e->era_line[k], r->status);
    }
    if (r->status != CS_FIT_CONVERGED && r->status != CS_FIT_SINGULAR) {
        rc = cs_error_set(err, CS_ENOCONV, e->path, -1, -1, "fit of '%s': %s", p->model,
                          cs_fit_status_name(r->status));
    } else {
        size_t ib = 0, it = 0;
        double wmax = -INFINITY, wmin = INFINITY;
        double fw[64] = {0};
        for (size_t c = 0; c < m->ncomp && c < 64; c++) {
            const cs_profile_derived *d = &r->derived[c];
            fw[c] = d->status[CS_PROFILE_FWHM] == CS_OK ? d->value[CS_PROFILE_FWHM] : NAN;
            if (fw[c] > wmax) { wmax = fw[c]; ib = c; }
            if (fw[c] < wmin) { wmin = fw[c]; it = c; }
        }
        size_t pick[CS_SPLIT_NERA] = {ib, it};
        for (int k = 0; k < CS_SPLIT_NERA; k++) {
            int want = e->era < 0 ? (m->ncomp >= 2 || k == CS_SPLIT_TAIL) : e->era == k;
            if (!want)
                continue;
            size_t c = m->ncomp >= 2 ? pick[k] : 0;
            const cs_profile_derived *d = &r->derived[c];
            size_t first = m->comp[c].first, np = m->comp[c].type->nparams;
            cs_series_line *l = &e->era_line[k];
            l->center_hz = r->value[first + CS_PROFILE_CENTER];
            l->center_hz_err = r->err[first + CS_PROFILE_CENTER];
            l->fwhm_hz = fw[c];
            l->fwhm_hz_err = d->err[CS_PROFILE_FWHM];
            l->area = r->value[first + np - 1];
            l->area_err = r->err[first + np - 1];
            note_bounds(l, m, r, c);
            l->ok = isfinite(l->center_hz) && l->center_hz_err > 0 && isfinite(l->fwhm_hz) &&
                    l->fwhm_hz_err > 0;
            if (!l->ok) {
                line_nan(l);
                if (rc == CS_OK)
                    rc = cs_error_set(err, CS_ENOCONV, e->path, -1, -1,
                                      "%s era: the fit does not determine the line (%s%s%s)",
                                      cs_split_era_name((cs_split_era)k), cs_fit_status_name(r->status),
                                      l->at_bound[0] ? "; at a bound: " : "", l->at_bound);
            }
        }
    }
    cs_fit_result_free(r);
    cs_model_free(m);
    return rc;
}

/* Combine one quantity of the shots' era lines. */
static void combine(const cs_split_result *res, int k, size_t off_v, size_t off_e, double *v, double *ve,
                    double *x, double *xe)
{
    size_t n = 0;
    for (size_t i = 0; i < res->nshots; i++) {
        const cs_split_line *l = &res->shots[i].era[k].line;
        if (!l->ok)
            continue;
        x[n] = *(const double *)(const void *)((const char *)l + off_v);
        xe[n] = *(const double *)(const void *)((const char *)l + off_e);
        n++;
    }
    cs_split_stat st;
    if (cs_split_combine(x, xe, n, &st) == CS_OK) {
        *v = st.mean;
        *ve = st.mean_err;
    } else {
        *v = *ve = NAN;
    }
}

/* Records: split each record (or the shot named) and combine the shots per era. */
static int run_records(cs_series_entry *e, const cs_loaded *l, const cs_series_params *p,
                       cs_gate_workspace *gws, cs_error *err)
{
    cs_record *const *recs = l->records;
    size_t nrec = l->nrecords;
    if (e->shot >= 0) {
        if ((size_t)e->shot >= nrec)
            return cs_error_set(err, CS_EDATA, e->path, -1, -1, "shot %ld: the file holds %zu shots",
                                e->shot, nrec);
        recs = &l->records[e->shot];
        nrec = 1;
    }
    e->nshots = nrec;
    cs_split_params sp = p->split;
    if (isfinite(e->ref_used_hz))
        sp.ref_hz = e->ref_used_hz;
    cs_split_result *res = NULL;
    int rc = cs_split_run(gws, recs, nrec, &sp, &res, err);
    if (!res)
        return rc == CS_OK ? CS_EDATA : rc;
    double *x = malloc(2 * nrec * sizeof *x);
    if (!x) {
        cs_split_result_free(res);
        return cs_error_set(err, CS_ENOMEM, e->path, -1, -1, "out of memory");
    }
    int missing = 0;
    for (int k = 0; k < CS_SPLIT_NERA; k++) {
        if (e->era >= 0 && e->era != k)
            continue;
        cs_series_line *ln = &e->era_line[k];
        for (size_t i = 0; i < res->nshots; i++) {
            const cs_split_fit *f = &res->shots[i].era[k];
            if (f->gfit) {
                note_status(ln, f->gfit->status);
            } else if (f->pfit) {
                note_status(ln, f->pfit->status);
                note_bounds(ln, f->pmodel, f->pfit, f->component);
            }
        }
        combine(res, k, offsetof(cs_split_line, center_hz), offsetof(cs_split_line, center_hz_err),
                &ln->center_hz, &ln->center_hz_err, x, x + nrec);
        combine(res, k, offsetof(cs_split_line, fwhm_hz), offsetof(cs_split_line, fwhm_hz_err),
                &ln->fwhm_hz, &ln->fwhm_hz_err, x, x + nrec);
        combine(res, k, offsetof(cs_split_line, area), offsetof(cs_split_line, area_err), &ln->area,
                &ln->area_err, x, x + nrec);
        ln->ok = isfinite(ln->center_hz) && isfinite(ln->fwhm_hz);
        if (!ln->ok) {
            line_nan(ln);
            missing = 1;
        }
    }
    if (missing && rc == CS_OK)
        rc = cs_error_set(err, CS_ENOCONV, e->path, -1, -1, "an era was not measured in any shot");
    else if (!missing)
        rc = CS_OK;   /* every era wanted was measured in some shot */
    free(x);
    cs_split_result_free(res);
    return rc;
}

static void run_entry(cs_series_entry *e, const cs_series_params *p, cs_gate_workspace *gws,
                      cs_fit_workspace *fws)
{
    entry_reset(e);
    cs_error err;
    cs_error_clear(&err);
    cs_loaded l;
    cs_loaded_init(&l);
    int rc = cs_io_load(e->path, &p->load, &l, &err);
    if (rc != CS_OK) {
        entry_fail(e, &err, rc);
        return;
    }
    e->kind = l.kind;
    const cs_meta *meta = l.kind == CS_KIND_SPECTRUM ? &l.spectrum->meta
                        : (l.nrecords ? &l.records[0]->meta : NULL);
    rc = entry_density(e, meta, p->element, &err);
    if (rc == CS_OK) {
        set_ref(e, p, meta);
        if (l.kind == CS_KIND_SPECTRUM)
            rc = run_spectrum(e, l.spectrum, p, fws, &err);
        else
            rc = run_records(e, &l, p, gws, &err);
    }
    cs_loaded_release(&l);
    for (int k = 0; k < CS_SPLIT_NERA; k++)
        finish_shift(&e->era_line[k], e->ref_used_hz);
    int any = e->era_line[0].ok || e->era_line[1].ok;
    if (rc == CS_OK) {
        e->status = CS_SERIES_OK;
    } else if (any) {
        char buf[CS_ERROR_MSG_MAX + CS_ERROR_FILE_MAX + 64];
        e->status = CS_SERIES_PARTIAL;
        e->error_code = rc;
        snprintf(e->message, sizeof e->message, "%s", cs_error_format(&err, buf, sizeof buf));
    } else {
        if (!err.file[0])
            snprintf(err.file, sizeof err.file, "%s", e->path);
        entry_fail(e, &err, rc);
    }
}

int cs_series_run(cs_series *s, const cs_series_params *p, cs_error *err)
{
    if (!s || !p || p->threads < 1 || !p->model)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "series: no manifest, no parameters or threads < 1");
    cs_model *probe = cs_model_alloc(p->model, p->baseline, CS_MODEL_SUM, err);
    if (!probe)
        return CS_EINVAL;
    cs_model_free(probe);
    /* GSL's handler is process-wide: turn it off once before the threads start, so that modules
       saving and restoring it never restore the aborting default in another thread */
    gsl_set_error_handler_off();
    size_t done = 0;
    int nomem = 0, stopped = 0;
    long n = (long)s->n;
    /* entries to analyse start from "pending" with NaN results, so that those a stop leaves
       behind never show stale numbers */
    for (size_t i = 0; i < s->n; i++) {
        if (p->keep_finished && s->e[i].status != CS_SERIES_PENDING)
            done++;
        else
            entry_reset(&s->e[i]);
    }
#ifdef _OPENMP
#pragma omp parallel num_threads(p->threads)
#endif
    {
        cs_gate_workspace *gws = cs_gate_alloc();
        cs_fit_workspace *fws = cs_fit_alloc(1024, 64);
        if (!gws || !fws) {
#ifdef _OPENMP
#pragma omp atomic write
#endif
            nomem = 1;
        }
#ifdef _OPENMP
#pragma omp for schedule(dynamic, 1)
#endif
        for (long i = 0; i < n; i++) {
            cs_series_entry *e = &s->e[i];
            if (e->status != CS_SERIES_PENDING)
                continue;   /* kept from an earlier run (keep_finished) */
            int halt;
#ifdef _OPENMP
#pragma omp atomic read
#endif
            halt = stopped;
            if (!halt && p->stop && p->stop(p->stop_ctx)) {
                halt = 1;
#ifdef _OPENMP
#pragma omp atomic write
#endif
                stopped = 1;
            }
            if (halt || !gws || !fws)
                continue;   /* stays pending */
            run_entry(e, p, gws, fws);
#ifdef _OPENMP
#pragma omp critical(cs_series_progress)
#endif
            {
                done++;
                if (p->on_entry)
                    p->on_entry(e, p->entry_ctx);
                if (p->progress)
                    p->progress(done, s->n, p->progress_ctx);
            }
        }
        cs_fit_free(fws);
        cs_gate_free(gws);
    }
    if (nomem)
        return cs_error_set(err, CS_ENOMEM, NULL, -1, -1, "series: out of memory for the workspaces");
    size_t pending = cs_series_count(s, CS_SERIES_PENDING);
    if (pending)
        return cs_error_set(err, CS_ENOCONV, s->manifest, -1, -1,
                            "stopped: %zu of %zu entries not analysed", pending, s->n);
    for (size_t i = 0; i < s->n; i++)
        if (s->e[i].status != CS_SERIES_OK) {
            return cs_error_set(err, CS_ENOCONV, s->manifest, s->e[i].line, -1, "%.400s", s->e[i].message);
        }
    return CS_OK;
}

size_t cs_series_count(const cs_series *s, cs_series_status st)
{
    size_t k = 0;
    for (size_t i = 0; s && i < s->n; i++)
        k += s->e[i].status == st;
    return k;
}
