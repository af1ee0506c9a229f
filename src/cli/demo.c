/* `collshift demo`: the whole chain on the bundled synthetic data, into a report and figures. */
#include "cli.h"
#include "demo.h"

#include <dirent.h>
#include <errno.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <time.h>
#include <unistd.h>

#include <collshift/fit.h>
#include <collshift/gate.h>
#include <collshift/io.h>
#include <collshift/model.h>
#include <collshift/plot.h>
#include <collshift/report.h>
#include <collshift/split.h>
#include <collshift/theory.h>

const char *const cmd_demo_usage[] = {
    "usage: collshift demo [--out DIR] [--force]\n"
    "\n"
    "Runs the whole chain on the bundled synthetic data (spectra/ in the source tree, or\n"
    "share/collshift/spectra beside an installed tool): describes the two example files, fits the\n"
    "broad and narrow lines of the example spectrum (lorentz+lorentz, compared with one line), splits\n"
    "the example time record into its burst era and tail era, analyses the two density series of the\n"
    "demo campaign (records and spectra) with --line rb87-d2, prints the estimates for rb87-d2 at the\n"
    "campaign's middle density and 150 nm, and compares the recovered slopes with the campaign's true\n"
    "values. Writes report.md and report.json (inputs with SHA-256 checksums, options, gates,\n"
    "parameters with errors, model comparison, regressions, theory, truth, figure links), tables\n"
    "(CSV) and figures (PNG, and PDF of the density plots) into DIR, every file atomically.\n"
    "\n"
    "Options:\n"
    "  --out DIR     output folder (default collshift-demo); created when missing\n"
    "  --force       write into DIR even when it is not empty (files of the same name are replaced)\n"
    "\n"
    "The data folder is the first that holds the demo files of: $COLLSHIFT_DATA, <tool's folder>/\n"
    "../spectra, <tool's folder>/../share/collshift/spectra, ./spectra. Exit code 3 when DIR is not\n"
    "empty (without --force), the data are not found or a stage fails on its data.\n",
    NULL,
};

#define SPECTRUM_FILE "synthetic_broad_narrow_spectrum.csv"
#define RECORD_FILE "synthetic_burst_record.csv"

char *demo_join(char *buf, size_t n, const char *dir, const char *name)
{
    size_t a = strlen(dir), b = strlen(name);
    if (a + 1 + b + 1 > n)
        return NULL;
    memcpy(buf, dir, a);
    buf[a] = '/';
    memcpy(buf + a + 1, name, b + 1);
    return buf;
}

char *demo_num(double x, char *buf, size_t n)
{
    if (isfinite(x))
        snprintf(buf, n, "%.6g", x);
    else
        snprintf(buf, n, "-");
    return buf;
}

void demo_fail(demo_ctx *c, const char *stage, const cs_error *err)
{
    char buf[CS_ERROR_MSG_MAX + CS_ERROR_FILE_MAX + 64];
    cli_errorf("demo: %s: %s", stage, cs_error_format(err, buf, sizeof buf));
    c->failures++;
    cs_report_text(c->rep, "**Not completed**: %s.", err->msg[0] ? err->msg : cs_strerror(err->code));
}

int demo_write(demo_ctx *c, const char *rel, const char *text)
{
    char path[DEMO_PATH_MAX];
    cs_error err;
    cs_error_clear(&err);
    if (!demo_join(path, sizeof path, c->out, rel)) {
        cli_errorf("demo: output path too long");
        return -1;
    }
    if (!text || cs_report_check_output(c->rep, path, &err) != CS_OK ||
        cs_write_atomic(path, text, strlen(text), &err) != CS_OK) {
        if (!text)
            cs_error_set(&err, CS_ENOMEM, path, -1, -1, "out of memory");
        demo_fail(c, "writing", &err);
        return -1;
    }
    return 0;
}

void demo_figure(demo_ctx *c, const char *rel)
{
    if (c->nfig < sizeof c->figs / sizeof c->figs[0])
        snprintf(c->figs[c->nfig++], sizeof c->figs[0], "%s", rel);
}

/* ---------------------------------------------------------------- folders */

static int is_file(const char *path)
{
    struct stat st;
    return stat(path, &st) == 0 && S_ISREG(st.st_mode);
}

static int has_demo_files(const char *dir)
{
    char p[DEMO_PATH_MAX];
    return demo_join(p, sizeof p, dir, SPECTRUM_FILE) && is_file(p) &&
           demo_join(p, sizeof p, dir, RECORD_FILE) && is_file(p) &&
           demo_join(p, sizeof p, dir, "campaign/records/manifest.csv") && is_file(p) &&
           demo_join(p, sizeof p, dir, "campaign/spectra/manifest.csv") && is_file(p);
}

/* The data folder and where it came from; 0, or -1 when none holds the demo files. */
static int find_data(char *out, size_t n, const char **how)
{
    const char *env = getenv("COLLSHIFT_DATA");
    if (env && *env) {
        if (has_demo_files(env)) {
            snprintf(out, n, "%s", env);
            *how = "$COLLSHIFT_DATA";
            return 0;
        }
        cli_errorf("demo: COLLSHIFT_DATA='%s' does not hold the demo files; trying the others", env);
    }
    char exe[DEMO_PATH_MAX];
    ssize_t len = readlink("/proc/self/exe", exe, sizeof exe - 1);
    if (len > 0) {
        exe[len] = '\0';
        char *slash = strrchr(exe, '/');
        if (slash) {
            *slash = '\0';
            const char *rel[] = {"../spectra", "../share/collshift/spectra"};
            const char *what[] = {"<tool's folder>/../spectra", "<tool's folder>/../share/collshift/spectra"};
            for (size_t i = 0; i < 2; i++) {
                char cand[DEMO_PATH_MAX];
                if (demo_join(cand, sizeof cand, exe, rel[i]) && has_demo_files(cand)) {
                    snprintf(out, n, "%s", cand);
                    *how = what[i];
                    return 0;
                }
            }
        }
    }
    if (has_demo_files("spectra")) {
        snprintf(out, n, "spectra");
        *how = "./spectra";
        return 0;
    }
    return -1;
}

/* mkdir -p; 0 or -1 with errno. */
static int make_dirs(const char *path)
{
    char buf[DEMO_PATH_MAX];
    snprintf(buf, sizeof buf, "%s", path);
    for (char *p = buf + 1; *p; p++) {
        if (*p != '/')
            continue;
        *p = '\0';
        if (mkdir(buf, 0777) != 0 && errno != EEXIST)
            return -1;
        *p = '/';
    }
    if (mkdir(buf, 0777) != 0 && errno != EEXIST)
        return -1;
    struct stat st;
    if (stat(buf, &st) != 0 || !S_ISDIR(st.st_mode)) {
        errno = ENOTDIR;
        return -1;
    }
    return 0;
}

/* 1 when path is a folder with entries, 0 when empty or missing, -1 when not a folder. */
static int dir_nonempty(const char *path)
{
    struct stat st;
    if (stat(path, &st) != 0)
        return 0;
    if (!S_ISDIR(st.st_mode))
        return -1;
    DIR *d = opendir(path);
    if (!d)
        return 1;
    int any = 0;
    struct dirent *e;
    while (!any && (e = readdir(d)) != NULL)
        any = strcmp(e->d_name, ".") != 0 && strcmp(e->d_name, "..") != 0;
    closedir(d);
    return any;
}

/* ---------------------------------------------------------------- stage 1: the files */

static void describe(demo_ctx *c, const char *name, const char *role)
{
    char path[DEMO_PATH_MAX], b1[48], b2[48], b3[48];
    cs_error err;
    cs_error_clear(&err);
    demo_join(path, sizeof path, c->data, name);
    cs_loaded l;
    cs_loaded_init(&l);
    if (cs_io_load(path, NULL, &l, &err) != CS_OK) {
        demo_fail(c, "info", &err);
        cs_loaded_release(&l);
        return;
    }
    char line[512];
    if (l.kind == CS_KIND_SPECTRUM) {
        const cs_spectrum *s = l.spectrum;
        snprintf(line, sizeof line, "%s spectrum, %zu points, %s .. %s (axis given in %s), noise %.4g",
                 cs_format_name(l.format), s->n,
                 cs_quantity_format(s->freq_hz[0], CS_DIM_FREQUENCY, 10, b1, sizeof b1),
                 cs_quantity_format(s->freq_hz[s->n - 1], CS_DIM_FREQUENCY, 10, b2, sizeof b2),
                 s->x_unit, cs_spectrum_noise(s));
    } else {
        const cs_record *r = l.records[0];
        snprintf(line, sizeof line, "%s record, %zu shot(s) of %zu %s samples, step %s from %s, noise %.4g",
                 cs_format_name(l.format), l.nrecords, r->n, r->is_complex ? "complex (I/Q)" : "real",
                 cs_quantity_format(r->dt_s, CS_DIM_TIME, 6, b1, sizeof b1),
                 cs_quantity_format(r->t0_s, CS_DIM_TIME, 6, b2, sizeof b2), cs_record_noise(r));
    }
    printf("  %s: %s\n", name, line);
    const cs_meta *m = l.kind == CS_KIND_SPECTRUM ? &l.spectrum->meta : &l.records[0]->meta;
    const cs_meta_entry *syn = cs_meta_find(m, "synthetic");
    snprintf(b3, sizeof b3, "%zu entries%s", m->n, syn ? ", synthetic" : "");
    cs_report_field(c->rep, name, line);
    cs_report_field(c->rep, "metadata", b3);
    if (cs_report_add_input(c->rep, role, path, &err) != CS_OK)
        demo_fail(c, "checksum", &err);
    cs_loaded_release(&l);
}

/* ---------------------------------------------------------------- stage 2: the spectrum fit */

static cs_fit_result *fit_model(const cs_spectrum *s, const char *text, cs_model **mout, cs_error *err)
{
    cs_model *m = cs_model_alloc(text, CS_BASELINE_LINEAR, CS_MODEL_SUM, err);
    if (!m)
        return NULL;
    cs_fit_parameters par = cs_fit_default_parameters();
    cs_fit_result *r = NULL;
    int rc = cs_fit_run(NULL, m, s->freq_hz, s->y, s->sigma, NULL, s->n, &par, &r, err);
    if (rc != CS_OK && rc != CS_ENOCONV) {
        cs_model_free(m);
        return NULL;
    }
    *mout = m;
    return r;
}

static cs_dim param_dim(const cs_param *p)
{
    return p->kind == CS_PARAM_FREQUENCY ? CS_DIM_FREQUENCY : CS_DIM_DIMENSIONLESS;
}

static void stage_fit(demo_ctx *c)
{
    cs_report_section(c->rep, "Spectrum fit");
    printf("\n== spectrum fit: %s, lorentz+lorentz + linear baseline\n", SPECTRUM_FILE);
    char path[DEMO_PATH_MAX], buf[128], b2[64];
    cs_error err;
    cs_error_clear(&err);
    demo_join(path, sizeof path, c->data, SPECTRUM_FILE);
    cs_loaded l;
    cs_loaded_init(&l);
    cs_model *m = NULL, *m1 = NULL;
    cs_fit_result *r = NULL, *r1 = NULL;
    double *comp = NULL, *total = NULL, *p = NULL;
    if (cs_io_load(path, NULL, &l, &err) != CS_OK || l.kind != CS_KIND_SPECTRUM) {
        if (err.code == CS_OK)
            cs_error_set(&err, CS_EDATA, path, -1, -1, "not a spectrum");
        demo_fail(c, "fit", &err);
        goto done;
    }
    const cs_spectrum *s = l.spectrum;
    cs_report_field(c->rep, "options", "--model lorentz+lorentz --baseline linear (weights from the sigma column)");
    if (!(r = fit_model(s, "lorentz+lorentz", &m, &err))) {
        demo_fail(c, "fit", &err);
        goto done;
    }
    cs_report_field(c->rep, "status", cs_fit_status_name(r->status));
    printf("  status %s, chi2/dof %.4g (%zu dof)\n", cs_fit_status_name(r->status), r->redchi2, r->dof);
    cs_report_value(c->rep, "chi2/dof", r->redchi2, NAN, CS_DIM_DIMENSIONLESS);
    const char *cols[] = {"parameter", "value", "at bound"};
    cs_report_table(c->rep, "Fitted parameters (standard errors in parentheses):", 3, cols);
    char *csv = NULL;
    size_t cap = 4096, len = 0;
    csv = malloc(cap);
    if (csv)
        len = (size_t)snprintf(csv, cap, "parameter,value,error,at_bound\n");
    for (size_t i = 0; i < m->nparams; i++) {
        const cs_param *pp = &m->par[i];
        cs_format_value_err(r->value[i], r->err[i], param_dim(pp), buf, sizeof buf);
        const char *row[] = {pp->name, buf, r->at_bound[i] ? "yes" : "no"};
        cs_report_row(c->rep, row);
        printf("  %-10s %s\n", pp->name, buf);
        if (csv && len + 200 < cap)
            len += (size_t)snprintf(csv + len, cap - len, "%s,%.17g,%.17g,%d\n", pp->name, r->value[i],
                                    r->err[i], r->at_bound[i]);
    }
    if (csv) {
        demo_write(c, "tables/fit_parameters.csv", csv);
        free(csv);
    }
    /* model comparison: one line against two */
    if ((r1 = fit_model(s, "lorentz", &m1, &err)) != NULL) {
        double F = NAN, pv = NAN;
        cs_fit_ftest(r1, r, &F, &pv);
        const char *mc[] = {"model", "free parameters", "chi2/dof", "AIC", "BIC"};
        cs_report_table(c->rep, "Model comparison (F-test of the nested models below the table):", 5, mc);
        const cs_fit_result *rr[] = {r1, r};
        const cs_model *mm[] = {m1, m};
        for (size_t k = 0; k < 2; k++) {
            char nf[16], rc2[32], aic[32], bic[32];
            snprintf(nf, sizeof nf, "%zu", rr[k]->nfree);
            const char *row[] = {mm[k]->text, nf, demo_num(rr[k]->redchi2, rc2, sizeof rc2),
                                 demo_num(rr[k]->aic, aic, sizeof aic), demo_num(rr[k]->bic, bic, sizeof bic)};
            cs_report_row(c->rep, row);
        }
        cs_report_text(c->rep, "F = %s, p = %s: %s.", demo_num(F, buf, sizeof buf), demo_num(pv, b2, sizeof b2),
                       pv < 1e-3 ? "the second line is needed" : "the second line is not clearly needed");
        printf("  against one line: F = %.4g, p = %.3g\n", F, pv);
    } else {
        cs_report_text(c->rep, "Model comparison: the one-line fit failed (%s).", err.msg);
        cs_error_clear(&err);
    }
    /* figure: components drawn on the baseline, their total, residuals */
    size_t n = s->n, nc = m->ncomp;
    comp = malloc(n * (nc ? nc : 1) * sizeof *comp);
    total = malloc(n * sizeof *total);
    p = malloc(m->nparams * sizeof *p);
    if (!comp || !total || !p)
        goto done;
    cs_model_eval(m, r->value, s->freq_hz, n, total, NULL);
    const double *cptr[8];
    const char *clab[8];
    char labels[8][32];
    size_t ndraw = 0;
    for (size_t k = 0; k < nc && k < 8; k++) {
        memcpy(p, r->value, m->nparams * sizeof *p);
        for (size_t j = 0; j < nc; j++) {
            char nm[32];
            snprintf(nm, sizeof nm, "%zu.area", j + 1);
            long idx = cs_model_param_index(m, nm);
            if (j != k && idx >= 0)
                p[idx] = 0.0;
        }
        cs_model_eval(m, p, s->freq_hz, n, comp + ndraw * n, NULL);
        snprintf(labels[ndraw], sizeof labels[0], "%s %zu", k == 0 ? "broad" : "narrow", k + 1);
        cptr[ndraw] = comp + ndraw * n;
        clab[ndraw] = labels[ndraw];
        ndraw++;
    }
    cs_plot_spectrum_data d = {.n = n, .freq_hz = s->freq_hz, .y = s->y, .sigma = s->sigma, .total = total,
                               .ncomp = ndraw, .comp = cptr, .comp_label = clab, .y_quantity = "counts",
                               .y_unit = NULL};
    cs_plot_options o;
    cs_plot_options_init(&o);
    char fig[DEMO_PATH_MAX];
    demo_join(fig, sizeof fig, c->out, "figures/fit_spectrum.png");
    if (cs_plot_spectrum(fig, &d, &o, &err) == CS_OK) {
        demo_figure(c, "figures/fit_spectrum.png");
        cs_report_figure(c->rep, "Spectrum with the fitted lines and residuals", "figures/fit_spectrum.png");
    } else {
        demo_fail(c, "figure", &err);
    }
done:
    free(comp);
    free(total);
    free(p);
    cs_fit_result_free(r);
    cs_fit_result_free(r1);
    cs_model_free(m);
    cs_model_free(m1);
    cs_loaded_release(&l);
}

/* ---------------------------------------------------------------- stage 3: burst and tail */

static void report_line(demo_ctx *c, const char *era, const cs_split_fit *f)
{
    char b1[96], b2[96], b3[96];
    if (f->status != CS_SPLIT_OK) {
        cs_report_field(c->rep, era, cs_split_status_name(f->status));
        printf("  %-5s %s\n", era, cs_split_status_name(f->status));
        return;
    }
    const cs_split_line *ln = &f->line;
    cs_format_value_err(ln->center_hz, ln->center_hz_err, CS_DIM_FREQUENCY, b1, sizeof b1);
    cs_format_value_err(ln->fwhm_hz, ln->fwhm_hz_err, CS_DIM_FREQUENCY, b2, sizeof b2);
    cs_format_value_err(ln->shift_hz, ln->shift_hz_err, CS_DIM_FREQUENCY, b3, sizeof b3);
    printf("  %-5s centre %s, FWHM %s, shift %s (model %s, gate %s)\n", era, b1, b2,
           isfinite(ln->shift_hz) ? b3 : "-", f->model, f->spec);
    const char *row[] = {era, f->spec, f->model, b1, b2, isfinite(ln->shift_hz) ? b3 : "-"};
    cs_report_row(c->rep, row);
}

static void stage_split(demo_ctx *c)
{
    cs_report_section(c->rep, "Burst and tail eras");
    printf("\n== split: %s into burst era and tail era\n", RECORD_FILE);
    char path[DEMO_PATH_MAX], fig[DEMO_PATH_MAX], buf[128];
    cs_error err;
    cs_error_clear(&err);
    demo_join(path, sizeof path, c->data, RECORD_FILE);
    cs_loaded l;
    cs_loaded_init(&l);
    cs_split_result *res = NULL;
    cs_envelope *env = NULL;
    cs_spectrogram *sg = NULL;
    cs_gate_workspace *ws = cs_gate_alloc();
    if (!ws) {
        cs_error_set(&err, CS_ENOMEM, NULL, -1, -1, "out of memory");
        demo_fail(c, "split", &err);
        goto done;
    }
    if (cs_io_load(path, NULL, &l, &err) != CS_OK || l.kind != CS_KIND_RECORD) {
        if (err.code == CS_OK)
            cs_error_set(&err, CS_EDATA, path, -1, -1, "not a time record");
        demo_fail(c, "split", &err);
        goto done;
    }
    cs_split_params sp;
    cs_split_params_default(&sp);
    cs_report_field(c->rep, "options", "automatic gates; burst era 'burst', tail era 'decay' (gate-aware fits); "
                                       "whole record 'sech2+lorentz'; matrix pencil of the tail");
    int rc = cs_split_run(ws, l.records, l.nrecords, &sp, &res, &err);
    if (rc != CS_OK && rc != CS_ENOCONV) {
        demo_fail(c, "split", &err);
        goto done;
    }
    const cs_split_shot *sh = &res->shots[0];
    cs_report_field(c->rep, "status", cs_split_status_name(res->status));
    cs_report_value(c->rep, "burst peak", sh->burst.peak_time_s, NAN, CS_DIM_TIME);
    cs_report_value(c->rep, "burst FWHM duration", sh->burst.fwhm_s, NAN, CS_DIM_TIME);
    const char *gc[] = {"gate", "start", "length"};
    cs_report_table(c->rep, "Gates (absolute times):", 3, gc);
    cs_plot_gate gates[CS_SPLIT_NERA];
    size_t ng = 0;
    for (size_t e = 0; e < CS_SPLIT_NERA; e++) {
        const cs_split_fit *f = &sh->era[e];
        if (!f->gate_ok)
            continue;
        char b1[48], b2[48];
        const char *row[] = {f->spec, cs_quantity_format(f->gate.t_start_s, CS_DIM_TIME, 6, b1, sizeof b1),
                             cs_quantity_format(f->gate.length_s, CS_DIM_TIME, 6, b2, sizeof b2)};
        cs_report_row(c->rep, row);
        gates[ng].name = f->gate.name;
        gates[ng].start_s = f->gate.t_start_s;
        gates[ng].length_s = f->gate.length_s;
        ng++;
    }
    const char *lc[] = {"era", "gate", "model", "centre", "FWHM", "shift"};
    cs_report_table(c->rep, "Lines of the two eras:", 6, lc);
    report_line(c, "burst", &sh->era[CS_SPLIT_BURST]);
    report_line(c, "tail", &sh->era[CS_SPLIT_TAIL]);
    cs_report_value(c->rep, "era shift (burst - tail)", sh->era_shift_hz, sh->era_shift_hz_err, CS_DIM_FREQUENCY);
    cs_format_value_err(sh->era_shift_hz, sh->era_shift_hz_err, CS_DIM_FREQUENCY, buf, sizeof buf);
    printf("  era shift (burst - tail) %s\n", buf);
    {
        char csv[2048];
        size_t len = (size_t)snprintf(csv, sizeof csv, "era,gate,center_hz,center_hz_err,fwhm_hz,fwhm_hz_err,"
                                                       "shift_hz,shift_hz_err\n");
        for (size_t e = 0; e < CS_SPLIT_NERA && len < sizeof csv; e++) {
            const cs_split_line *ln = &sh->era[e].line;
            len += (size_t)snprintf(csv + len, sizeof csv - len, "%s,%s,%.17g,%.17g,%.17g,%.17g,%.17g,%.17g\n",
                                    cs_split_era_name((cs_split_era)e), sh->era[e].spec, ln->center_hz,
                                    ln->center_hz_err, ln->fwhm_hz, ln->fwhm_hz_err, ln->shift_hz, ln->shift_hz_err);
        }
        demo_write(c, "tables/split_eras.csv", csv);
    }
    /* figures: envelope with gates, spectrogram with gates */
    cs_plot_options o;
    cs_plot_options_init(&o);
    const cs_record *rec = l.records[0];
    if (cs_envelope_compute(ws, rec, NULL, &env, &err) == CS_OK) {
        double *t = malloc(env->n * sizeof *t);
        if (t) {
            for (size_t i = 0; i < env->n; i++)
                t[i] = env->t0_s + (double)i * env->dt_s;
            cs_plot_envelope_data d = {.n = env->n, .t_s = t, .intensity = env->smooth, .log_y = 1,
                                       .ngates = ng, .gates = gates, .y_quantity = "intensity",
                                       .y_unit = NULL};
            demo_join(fig, sizeof fig, c->out, "figures/burst_envelope.png");
            if (cs_plot_envelope(fig, &d, &o, &err) == CS_OK) {
                demo_figure(c, "figures/burst_envelope.png");
                cs_report_figure(c->rep, "Burst envelope with the gates", "figures/burst_envelope.png");
            } else {
                demo_fail(c, "figure", &err);
            }
            free(t);
        }
    } else {
        demo_fail(c, "envelope", &err);
    }
    cs_spectrogram_params gp;
    cs_spectrogram_params_default(&gp);
    gp.lo_hz = sh->lo_hz;
    if (cs_spectrogram_compute(ws, rec, &gp, &sg, &err) == CS_OK) {
        cs_plot_spectrogram_data d = {.ntime = sg->ntime, .nfreq = sg->nfreq, .time_s = sg->time_s,
                                      .freq_hz = sg->freq_hz, .psd = sg->psd, .range_db = 50, .ngates = ng,
                                      .gates = gates};
        demo_join(fig, sizeof fig, c->out, "figures/burst_spectrogram.png");
        if (cs_plot_spectrogram(fig, &d, &o, &err) == CS_OK) {
            demo_figure(c, "figures/burst_spectrogram.png");
            cs_report_figure(c->rep, "Spectrogram with the gates", "figures/burst_spectrogram.png");
        } else {
            demo_fail(c, "figure", &err);
        }
    } else {
        demo_fail(c, "spectrogram", &err);
    }
done:
    cs_spectrogram_free(sg);
    cs_envelope_free(env);
    cs_split_result_free(res);
    cs_loaded_release(&l);
    cs_gate_free(ws);
}

/* ---------------------------------------------------------------- stage 5: predictions */

static void stage_predict(demo_ctx *c, const char *line_name)
{
    cs_report_section(c->rep, "Predictions");
    const cs_line *line = cs_line_find(line_name);
    cs_theory_inputs in;
    cs_theory_inputs_init(&in);
    in.density_m3 = isfinite(c->mid_density_m3) ? c->mid_density_m3 : 1.1e20;
    in.thickness_m = 150e-9;
    cs_theory_estimates est;
    cs_error err;
    cs_error_clear(&err);
    char b1[64];
    printf("\n== predictions for %s at %s and 150 nm\n", line_name,
           cs_quantity_format(in.density_m3, CS_DIM_DENSITY, 4, b1, sizeof b1));
    if (!line || cs_theory_predict(line, &in, &est, &err) != CS_OK) {
        if (!line)
            cs_error_set(&err, CS_EINVAL, NULL, -1, -1, "unknown line '%s'", line_name);
        demo_fail(c, "predict", &err);
        return;
    }
    cs_report_text(c->rep, "%s (%s) at the campaign's middle density %s and a 150 nm slab.", line->label,
                   line_name, b1);
    const char *cols[] = {"estimate", "value", "unit", "source"};
    cs_report_table(c->rep, NULL, 4, cols);
    char csv[8192];
    size_t len = (size_t)snprintf(csv, sizeof csv, "name,value,unit,status\n");
    for (size_t q = 0; q < CS_TH_COUNT; q++) {
        const cs_estimate *e = &est.e[q];
        if (len < sizeof csv)
            len += (size_t)snprintf(csv + len, sizeof csv - len, "%s,%.10g,%s,%s\n", e->name, e->value, e->unit,
                                    cs_estimate_status_name(e->status));
        if (e->status != CS_EST_OK)
            continue;
        char v[32];
        snprintf(v, sizeof v, "%.5g", e->value);
        printf("  %-40s %12s %s\n", e->label, v, e->unit);
        const char *row[] = {e->label, v, e->unit, e->cite ? e->cite : ""};
        cs_report_row(c->rep, row);
    }
    demo_write(c, "tables/predictions.csv", csv);
}

/* ---------------------------------------------------------------- the command */

int cmd_demo(int argc, char **argv)
{
    static const struct option opts[] = {
        {"out", required_argument, NULL, 'o'},
        {"force", no_argument, NULL, 'f'},
        {NULL, 0, NULL, 0},
    };
    const char *out = "collshift-demo";
    int force = 0, ch;
    optind = 1;
    opterr = 0;
    while ((ch = getopt_long(argc, argv, ":", opts, NULL)) != -1) {
        switch (ch) {
        case 'o': out = optarg; break;
        case 'f': force = 1; break;
        case ':': cli_errorf("demo: option '%s' needs a value", argv[optind - 1]); return CLI_EXIT_USAGE;
        default: cli_errorf("demo: unknown option '%s' (see 'collshift demo --help')", argv[optind - 1]); return CLI_EXIT_USAGE;
        }
    }
    if (optind < argc) {
        cli_errorf("demo: unexpected argument '%s' (see 'collshift demo --help')", argv[optind]);
        return CLI_EXIT_USAGE;
    }
    if (!*out) {
        cli_errorf("demo: --out needs a folder");
        return CLI_EXIT_USAGE;
    }
    struct timespec t0, t1;
    clock_gettime(CLOCK_MONOTONIC, &t0);
    demo_ctx *c = calloc(1, sizeof *c);
    if (!c) {
        cli_errorf("out of memory");
        return CLI_EXIT_DATA;
    }
    c->mid_density_m3 = NAN;
    int rc = CLI_EXIT_OK;
    const char *how = NULL;
    if (find_data(c->data, sizeof c->data, &how) != 0) {
        cli_errorf("demo: the bundled data (spectra/) were not found: set COLLSHIFT_DATA to the folder "
                   "that holds %s", SPECTRUM_FILE);
        free(c);
        return CLI_EXIT_DATA;
    }
    int ne = dir_nonempty(out);
    if (ne < 0) {
        cli_errorf("demo: '%s' exists and is not a folder", out);
        free(c);
        return CLI_EXIT_DATA;
    }
    if (ne > 0 && !force) {
        cli_errorf("demo: '%s' is not empty; choose another --out or add --force", out);
        free(c);
        return CLI_EXIT_DATA;
    }
    snprintf(c->out, sizeof c->out, "%s", out);
    char sub[DEMO_PATH_MAX];
    if (make_dirs(out) != 0 || !demo_join(sub, sizeof sub, out, "figures") || make_dirs(sub) != 0 ||
        !demo_join(sub, sizeof sub, out, "tables") || make_dirs(sub) != 0) {
        cli_errorf("demo: cannot create '%s': %s", out, strerror(errno));
        free(c);
        return CLI_EXIT_DATA;
    }
    c->rep = cs_report_alloc("collshift demo: the whole chain on synthetic data");
    if (!c->rep) {
        free(c);
        cli_errorf("out of memory");
        return CLI_EXIT_DATA;
    }
    printf("collshift demo: data from %s (%s), output into %s\n", c->data, how, out);
    printf("\n== files\n");
    cs_report_section(c->rep, "Files");
    cs_report_text(c->rep, "Everything here is synthetic: an invented scenario, not a measurement "
                           "(see spectra/README.md). Data folder: `%s` (found as %s).", c->data, how);
    describe(c, SPECTRUM_FILE, "spectrum");
    describe(c, RECORD_FILE, "time record");

    stage_fit(c);
    stage_split(c);
    demo_series(c, "rb87-d2");
    stage_predict(c, "rb87-d2");

    clock_gettime(CLOCK_MONOTONIC, &t1);
    double secs = (double)(t1.tv_sec - t0.tv_sec) + 1e-9 * (double)(t1.tv_nsec - t0.tv_nsec);
    cs_report_section(c->rep, "Figures");
    for (size_t i = 0; i < c->nfig; i++)
        cs_report_figure(c->rep, c->figs[i], c->figs[i]);
    cs_report_section(c->rep, "Run");
    cs_report_field(c->rep, "command", force ? "collshift demo --out DIR --force" : "collshift demo --out DIR");
    cs_report_field(c->rep, "version", CS_VERSION_STRING);
    char b[64];
    snprintf(b, sizeof b, "%.1f s", secs);
    cs_report_field(c->rep, "run time", b);
    snprintf(b, sizeof b, "%d", c->failures);
    cs_report_field(c->rep, "stages not completed", b);

    char md[DEMO_PATH_MAX], js[DEMO_PATH_MAX];
    cs_error err;
    cs_error_clear(&err);
    demo_join(md, sizeof md, out, "report.md");
    demo_join(js, sizeof js, out, "report.json");
    if (cs_report_write(c->rep, md, js, &err) != CS_OK) {
        demo_fail(c, "report", &err);
    } else {
        printf("\nreport: %s and %s\n", md, js);
        printf("figures (%zu) in %s/figures/, tables in %s/tables/ (%.1f s)\n", c->nfig, out, out, secs);
    }
    if (c->failures)
        rc = CLI_EXIT_DATA;
    cs_report_free(c->rep);
    free(c);
    return rc;
}
