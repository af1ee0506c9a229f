/* `collshift fit`: fit a sum of line profiles plus a baseline to one or more spectra. */
#include "cli.h"
#include "plotcli.h"

#include <collshift/fit.h>
#include <collshift/model.h>
#include <collshift/plot.h>
#include <collshift/report.h>

#include <errno.h>
#include <jansson.h>
#include <math.h>
#include <stdarg.h>
#include <stdlib.h>
#include <string.h>

const char *const cmd_fit_usage[] = {
    "usage: collshift fit SPECTRUM... --model LIST [--baseline KIND] [options] [file options]\n"
    "\n"
    "Fits each spectrum with the same model: line profiles joined by '+' plus a baseline, by\n"
    "weighted least squares (GSL trust region, Levenberg-Marquardt) with analytic derivatives, and\n"
    "prints centres, widths (FWHM) and areas with standard errors, chi2/dof, AIC and BIC.\n"
    "\n"
    "Model:\n"
    "  --model LIST          profiles joined by '+': lorentz gauss voigt pvoigt fano sech2\n"
    "                        (e.g. voigt+lorentz); parameters are named 1.center, 1.fwhm_g, 2.area,\n"
    "                        base.c0 ... in the order written\n"
    "  --baseline KIND       none const linear quad cubic exp (default linear); polynomial in\n"
    "                        (frequency - x_ref) with x_ref the middle of the data, or amp*exp(-rate*u)\n"
    "  --transmission        fit transmission T = baseline * exp(-sum OD_k g_k), g_k at unit peak\n"
    "                        (Beer-Lambert); components then have a peak optical depth 'od'\n"
    "  --start NAME=VALUE    starting value, e.g. --start 2.fwhm=40MHz (others are found from the data)\n"
    "  --fix NAME[=VALUE]    hold a parameter fixed, e.g. --fix 2.fwhm_g=1.2GHz\n"
    "  --bound NAME=LO:HI    keep a parameter within bounds, e.g. --bound 1.fwhm=0:2GHz\n"
    "  --tie NAME=EXPR       make a parameter follow another: 2.center=1.center, 2.fwhm_g=1.fwhm_g,\n"
    "                        2.fwhm=0.1*1.fwhm, 2.center=1.center+50MHz\n"
    "  --range LO:HI         fit only this frequency range, e.g. 384.229THz:384.232THz\n"
    "  --exclude LO:HI       leave out a window (repeatable)\n"
    "  --ref FREQ            reference frequency for shifts (default: the file's 'reference' metadata)\n"
    "\n"
    "Solver and errors:\n"
    "  --weights KIND        auto (sigma column if any, else noise), sigma, noise (errors scaled by\n"
    "                        chi2/dof), poisson (counts, sigma^2 = max(y,1)), cash (Poisson likelihood)\n"
    "  --geodesic            geodesic acceleration\n"
    "  --max-iter N          iteration limit (default 200)\n"
    "  --multistart N        N extra starting points; the best fit wins\n"
    "  --bootstrap N         residual-bootstrap errors from N replicas (fixed seed)\n"
    "  --montecarlo N        Monte-Carlo errors from N replicas (fixed seed)\n"
    "  --seed N              seed for multistart, bootstrap and Monte Carlo (default 1)\n"
    "  --compare LIST        also fit this model (repeatable) and compare by BIC and F-test\n"
    "\n"
    "Output:\n"
    "  --json FILE           results as JSON ('-' for standard output)\n"
    "  --table FILE          one CSV row per spectrum and component (center_hz, center_hz_err, ...,\n"
    "                        status, at_bound, stop_reason)\n"
    "  --residuals FILE      CSV of frequency_hz, data, model and residual per point\n"
    "  --plot FILE           figure of the spectrum with each fitted component (drawn on the\n"
    "                        baseline), the total and a residual panel; PNG, SVG or PDF from the\n"
    "                        extension; with several spectra FILE_STEM.EXT per spectrum\n"
    "                        (fit.png -> fit_run1.png); an unknown extension is an error (exit 3)\n"
    "                        reported after the other outputs are written\n"
    "  --quiet               no summary on standard output\n"
    "\n",
    CLI_LOAD_OPTIONS_HELP,
    "\n"
    "Values are printed as value(error) in units of the last digits, e.g. -1.234(15) MHz.\n"
    "A fit that fails says so in every output: status 'not converged', 'singular covariance' or\n"
    "'model not finite', and parameters stuck at a bound are named (at_bound: lower/upper). Numbers\n"
    "that could not be computed are null in JSON, empty in CSV and 'undefined' in the summary.\n"
    "Exit code 1 when a fit did not converge, 3 when a file cannot be used.\n",
    NULL,
};

#define MAX_LIST 64

typedef struct fit_opts {
    const char *model;
    cs_baseline_kind baseline;
    int transmission;
    const char *start[MAX_LIST], *fix[MAX_LIST], *bound[MAX_LIST], *tie[MAX_LIST];
    size_t nstart, nfix, nbound, ntie;
    double range_lo, range_hi;
    double excl_lo[MAX_LIST], excl_hi[MAX_LIST];
    size_t nexcl;
    int have_ref;
    double ref_hz;
    cs_fit_parameters par;
    const char *compare[MAX_LIST];
    size_t ncompare;
    const char *json, *table, *residuals, *plot;
    int quiet;
} fit_opts;

static int parse_freq_range(const char *opt, const char *arg, double *lo, double *hi)
{
    const char *colon = strchr(arg, ':');
    if (!colon) {
        cli_errorf("--%s '%s': expected LO:HI, e.g. 384.229THz:384.232THz", opt, arg);
        return CLI_EXIT_USAGE;
    }
    char a[128], b[128];
    size_t la = (size_t)(colon - arg);
    if (la >= sizeof a || strlen(colon + 1) >= sizeof b) {
        cli_errorf("--%s '%s': too long", opt, arg);
        return CLI_EXIT_USAGE;
    }
    memcpy(a, arg, la);
    a[la] = '\0';
    strcpy(b, colon + 1);
    cs_error err;
    cs_error_clear(&err);
    *lo = -INFINITY;
    *hi = INFINITY;
    if (a[0] && cs_quantity_parse(a, CS_DIM_FREQUENCY, "Hz", lo, NULL, NULL, &err) != CS_OK) {
        cli_errorf("--%s '%s': %s", opt, arg, err.msg);
        return CLI_EXIT_USAGE;
    }
    if (b[0] && cs_quantity_parse(b, CS_DIM_FREQUENCY, "Hz", hi, NULL, NULL, &err) != CS_OK) {
        cli_errorf("--%s '%s': %s", opt, arg, err.msg);
        return CLI_EXIT_USAGE;
    }
    if (!(*lo < *hi)) {
        cli_errorf("--%s '%s': the lower end must be below the upper end", opt, arg);
        return CLI_EXIT_USAGE;
    }
    return 0;
}

static int parse_size(const char *opt, const char *arg, size_t lo, size_t *out)
{
    char *end;
    errno = 0;
    long long v = strtoll(arg, &end, 10);
    if (end == arg || *end || errno == ERANGE || v < (long long)lo || v > 100000000LL) {
        cli_errorf("--%s '%s': expected a whole number >= %zu", opt, arg, lo);
        return CLI_EXIT_USAGE;
    }
    *out = (size_t)v;
    return 0;
}

static int push(const char **list, size_t *n, const char *opt, const char *arg)
{
    if (*n >= MAX_LIST) {
        cli_errorf("--%s: at most %d times", opt, MAX_LIST);
        return CLI_EXIT_USAGE;
    }
    list[(*n)++] = arg;
    return 0;
}

enum {
    O_MODEL = 1, O_BASELINE, O_TRANS, O_START, O_FIX, O_BOUND, O_TIE, O_RANGE, O_EXCLUDE, O_REF,
    O_WEIGHTS, O_GEODESIC, O_MAXITER, O_MULTI, O_BOOT, O_MC, O_SEED, O_COMPARE, O_JSON, O_TABLE,
    O_RESID, O_QUIET, O_PLOT
};

static int parse_args(int argc, char **argv, fit_opts *fo, cs_load_options *lo)
{
    static const struct option own[] = {
        {"model", required_argument, NULL, O_MODEL},
        {"baseline", required_argument, NULL, O_BASELINE},
        {"transmission", no_argument, NULL, O_TRANS},
        {"start", required_argument, NULL, O_START},
        {"fix", required_argument, NULL, O_FIX},
        {"bound", required_argument, NULL, O_BOUND},
        {"tie", required_argument, NULL, O_TIE},
        {"range", required_argument, NULL, O_RANGE},
        {"exclude", required_argument, NULL, O_EXCLUDE},
        {"ref", required_argument, NULL, O_REF},
        {"weights", required_argument, NULL, O_WEIGHTS},
        {"geodesic", no_argument, NULL, O_GEODESIC},
        {"max-iter", required_argument, NULL, O_MAXITER},
        {"multistart", required_argument, NULL, O_MULTI},
        {"bootstrap", required_argument, NULL, O_BOOT},
        {"montecarlo", required_argument, NULL, O_MC},
        {"seed", required_argument, NULL, O_SEED},
        {"compare", required_argument, NULL, O_COMPARE},
        {"json", required_argument, NULL, O_JSON},
        {"table", required_argument, NULL, O_TABLE},
        {"residuals", required_argument, NULL, O_RESID},
        {"quiet", no_argument, NULL, O_QUIET},
        {"plot", required_argument, NULL, O_PLOT},
        {NULL, 0, NULL, 0},
    };
    struct option longopts[64];
    cli_merge_options(own, longopts, 64);
    int c, rc = 0;
    size_t sz;
    optind = 1;
    opterr = 0;
    while (rc == 0 && (c = getopt_long(argc, argv, ":", longopts, NULL)) != -1) {
        switch (c) {
        case O_MODEL: fo->model = optarg; break;
        case O_BASELINE:
            if (cs_baseline_parse(optarg, &fo->baseline) != CS_OK) {
                cli_errorf("--baseline '%s': expected none, const, linear, quad, cubic or exp", optarg);
                rc = CLI_EXIT_USAGE;
            }
            break;
        case O_TRANS: fo->transmission = 1; break;
        case O_START: rc = push(fo->start, &fo->nstart, "start", optarg); break;
        case O_FIX: rc = push(fo->fix, &fo->nfix, "fix", optarg); break;
        case O_BOUND: rc = push(fo->bound, &fo->nbound, "bound", optarg); break;
        case O_TIE: rc = push(fo->tie, &fo->ntie, "tie", optarg); break;
        case O_RANGE: rc = parse_freq_range("range", optarg, &fo->range_lo, &fo->range_hi); break;
        case O_EXCLUDE:
            if (fo->nexcl >= MAX_LIST) {
                cli_errorf("--exclude: at most %d windows", MAX_LIST);
                rc = CLI_EXIT_USAGE;
                break;
            }
            rc = parse_freq_range("exclude", optarg, &fo->excl_lo[fo->nexcl], &fo->excl_hi[fo->nexcl]);
            fo->nexcl++;
            break;
        case O_REF: {
            cs_error err;
            cs_error_clear(&err);
            if (cs_quantity_parse(optarg, CS_DIM_FREQUENCY, NULL, &fo->ref_hz, NULL, NULL, &err) != CS_OK) {
                cli_errorf("--ref '%s': %s", optarg, err.msg);
                rc = CLI_EXIT_USAGE;
            }
            fo->have_ref = 1;
            break;
        }
        case O_WEIGHTS: {
            static const struct { const char *name; cs_fit_weighting w; } wt[] = {
                {"auto", CS_WEIGHT_AUTO}, {"sigma", CS_WEIGHT_SIGMA}, {"noise", CS_WEIGHT_NOISE},
                {"poisson", CS_WEIGHT_POISSON}, {"cash", CS_WEIGHT_CASH}};
            size_t k;
            for (k = 0; k < sizeof wt / sizeof wt[0]; k++)
                if (strcmp(optarg, wt[k].name) == 0)
                    break;
            if (k == sizeof wt / sizeof wt[0]) {
                cli_errorf("--weights '%s': expected auto, sigma, noise, poisson or cash", optarg);
                rc = CLI_EXIT_USAGE;
            } else {
                fo->par.weighting = wt[k].w;
            }
            break;
        }
        case O_GEODESIC: fo->par.geodesic = 1; break;
        case O_MAXITER: rc = parse_size("max-iter", optarg, 1, &fo->par.max_iter); break;
        case O_MULTI: rc = parse_size("multistart", optarg, 0, &fo->par.multistart); break;
        case O_BOOT: rc = parse_size("bootstrap", optarg, 0, &fo->par.bootstrap); break;
        case O_MC: rc = parse_size("montecarlo", optarg, 0, &fo->par.montecarlo); break;
        case O_SEED:
            rc = parse_size("seed", optarg, 0, &sz);
            fo->par.seed = (unsigned long)sz;
            break;
        case O_COMPARE: rc = push(fo->compare, &fo->ncompare, "compare", optarg); break;
        case O_JSON: fo->json = optarg; break;
        case O_TABLE: fo->table = optarg; break;
        case O_RESID: fo->residuals = optarg; break;
        case O_QUIET: fo->quiet = 1; break;
        case O_PLOT: fo->plot = optarg; break;
        case ':':
            cli_errorf("fit: option '%s' needs a value", argv[optind - 1]);
            rc = CLI_EXIT_USAGE;
            break;
        case '?':
            cli_errorf("fit: unknown option '%s'; see 'collshift fit --help'", argv[optind - 1]);
            rc = CLI_EXIT_USAGE;
            break;
        default:
            rc = cli_load_option(c, optarg, lo);
            break;
        }
    }
    if (rc)
        return rc;
    if (!fo->model) {
        cli_errorf("fit: --model is required, e.g. --model voigt+lorentz; see 'collshift fit --help'");
        return CLI_EXIT_USAGE;
    }
    if (optind >= argc) {
        cli_errorf("fit: no spectrum given; see 'collshift fit --help'");
        return CLI_EXIT_USAGE;
    }
    return 0;
}

/* Build the model and apply the constraints; prints and returns an exit code on failure. */
static cs_model *build_model(const char *text, const fit_opts *fo, int *rc)
{
    cs_error err;
    cs_error_clear(&err);
    cs_model *m = cs_model_alloc(text, fo->baseline, fo->transmission ? CS_MODEL_TRANSMISSION : CS_MODEL_SUM, &err);
    if (!m) {
        cli_errorf("--model '%s': %s", text, err.msg);
        *rc = cli_exit_code(err.code) == CLI_EXIT_DATA ? CLI_EXIT_DATA : CLI_EXIT_USAGE;
        return NULL;
    }
    struct { const char *const *list; size_t n; const char *opt; int (*apply)(cs_model *, const char *, cs_error *); } steps[] = {
        {fo->start, fo->nstart, "start", cs_model_start},
        {fo->fix, fo->nfix, "fix", cs_model_fix},
        {fo->bound, fo->nbound, "bound", cs_model_bound},
        {fo->tie, fo->ntie, "tie", cs_model_tie},
    };
    for (size_t s = 0; s < sizeof steps / sizeof steps[0]; s++) {
        for (size_t i = 0; i < steps[s].n; i++) {
            if (steps[s].apply(m, steps[s].list[i], &err) != CS_OK) {
                cli_errorf("--%s '%s': %s", steps[s].opt, steps[s].list[i], err.msg);
                cs_model_free(m);
                *rc = CLI_EXIT_USAGE;
                return NULL;
            }
        }
    }
    return m;
}

/* Short parameter name without the "k." prefix. */
static const char *short_name(const char *full)
{
    const char *dot = strchr(full, '.');
    return dot ? dot + 1 : full;
}

static cs_dim param_dim(const cs_param *p)
{
    return p->kind == CS_PARAM_FREQUENCY ? CS_DIM_FREQUENCY : CS_DIM_DIMENSIONLESS;
}

/* Column / field name of a component parameter carrying its unit. */
static void field_name(const cs_param *p, char *buf, size_t n)
{
    const char *s = short_name(p->name);
    if (p->kind == CS_PARAM_FREQUENCY)
        snprintf(buf, n, "%s_hz", s);
    else
        snprintf(buf, n, "%s", s);
}

/* Derived quantities reported per component: field name, quantity, dimension. */
static const struct { const char *field; cs_profile_qty q; cs_dim dim; } derived_fields[] = {
    {"height", CS_PROFILE_HEIGHT, CS_DIM_DIMENSIONLESS},
    {"peak_hz", CS_PROFILE_POSITION, CS_DIM_FREQUENCY},
    {"hwhm_hz", CS_PROFILE_HWHM, CS_DIM_FREQUENCY},
    {"sigma_hz", CS_PROFILE_SIGMA, CS_DIM_FREQUENCY},
    {"gamma_per_s", CS_PROFILE_GAMMA, CS_DIM_RATE},
    {"fwhm_ol_hz", CS_PROFILE_FWHM_OL, CS_DIM_FREQUENCY},
    {"integral", CS_PROFILE_INTEGRAL, CS_DIM_DIMENSIONLESS},
};

typedef struct table {
    char *buf;
    size_t len, cap;
    int header_done;
} table;

static void tprintf(table *t, const char *fmt, ...)
#if defined(__GNUC__)
    __attribute__((format(printf, 2, 3)))
#endif
    ;
static void tprintf(table *t, const char *fmt, ...)
{
    va_list ap;
    for (;;) {
        va_start(ap, fmt);
        int k = vsnprintf(t->buf ? t->buf + t->len : NULL, t->buf ? t->cap - t->len : 0, fmt, ap);
        va_end(ap);
        if (k < 0)
            return;
        if (t->buf && t->len + (size_t)k < t->cap) {
            t->len += (size_t)k;
            return;
        }
        size_t cap = (t->cap ? t->cap * 2 : 4096) + (size_t)k;
        char *nb = realloc(t->buf, cap);
        if (!nb)
            return;
        t->buf = nb;
        t->cap = cap;
    }
}

/* A number cell: empty when the number is NaN or infinite (undefined: the row's status and
 * at_bound cells say why), never "nan" or "inf". */
static void csv_num(table *t, double v)
{
    if (isfinite(v))
        tprintf(t, ",%.12g", v);
    else
        tprintf(t, ",");
}

/* A text cell in double quotes, quotes inside doubled (RFC 4180), so paths with commas, quotes,
 * spaces or any UTF-8 stay one cell. */
static void csv_text(table *t, const char *s)
{
    tprintf(t, "\"");
    for (const char *q = s; *q; q++) {
        if (*q == '"')
            tprintf(t, "\"\"");
        else
            tprintf(t, "%c", *q);
    }
    tprintf(t, "\"");
}

/* printf-style number for the summary, or "undefined" when it could not be computed. */
static const char *num_text(double v, const char *fmt, char *buf, size_t n)
{
    if (!isfinite(v))
        return "undefined";
    snprintf(buf, n, fmt, v);
    return buf;
}

static const char *bound_word(int at)
{
    return at == 1 ? "lower" : at == 2 ? "upper" : "no";
}

/* Number of parameters at a bound. */
static size_t count_at_bound(const cs_model *m, const cs_fit_result *r)
{
    size_t k = 0;
    for (size_t i = 0; i < m->nparams; i++)
        k += r->at_bound[i] != 0;
    return k;
}

/* The at_bound cell of component c's row: "NAME:lower;NAME:upper" over the component's
 * parameters and the baseline's (empty when none is at a bound). */
static void csv_at_bound(table *t, const cs_model *m, const cs_fit_result *r, size_t c)
{
    const cs_model_component *mc = &m->comp[c];
    int first = 1;
    tprintf(t, ",");
    for (size_t i = 0; i < m->nparams; i++) {
        int mine = (i >= mc->first && i < mc->first + mc->type->nparams) || i >= m->base_first;
        if (!mine || !r->at_bound[i])
            continue;
        tprintf(t, "%s%s:%s", first ? "" : ";", m->par[i].name, bound_word(r->at_bound[i]));
        first = 0;
    }
}

/* The value of component parameter `name` (short), or NaN. */
static double comp_param(const cs_model *m, const cs_fit_result *r, size_t c, const char *name, double *err)
{
    const cs_model_component *mc = &m->comp[c];
    for (size_t k = 0; k < mc->type->nparams; k++) {
        if (strcmp(mc->type->param_names[k], name) == 0) {
            *err = r->err[mc->first + k];
            return r->value[mc->first + k];
        }
    }
    *err = NAN;
    return NAN;
}

/* Describe one fit: summary to stdout, JSON object, CSV rows. */
static json_t *report_fit(const char *path, const cs_model *m, const cs_fit_result *r, const fit_opts *fo,
                          int have_ref, double ref_hz, table *tab)
{
    char b1[96], b2[96];
    int trans = m->mode == CS_MODEL_TRANSMISSION;
    if (!fo->quiet) {
        printf("%s: %s + %s baseline%s, %zu points, weights %s%s\n", path, m->text, cs_baseline_name(m->baseline),
               trans ? " (transmission)" : "", r->n,
               r->weighting == CS_WEIGHT_SIGMA ? "1/sigma^2" : r->weighting == CS_WEIGHT_NOISE ? "equal" :
               r->weighting == CS_WEIGHT_POISSON ? "Poisson (1/max(y,1))" : r->weighting == CS_WEIGHT_CASH ? "Poisson likelihood (Cash)" : "auto",
               r->errors_scaled ? ", errors scaled by sqrt(chi2/dof)" : ", errors not scaled");
        size_t nab = count_at_bound(m, r);
        printf("  status: %s (%s), %zu iterations", cs_fit_status_name(r->status), cs_fit_stop_name(r->stop), r->niter);
        if (nab)
            printf(", %zu parameter%s at a bound", nab, nab == 1 ? "" : "s");
        printf("\n");
        if (r->status == CS_FIT_NOT_CONVERGED || r->status == CS_FIT_MODEL_NAN)
            printf("  errors undefined: the fit did not reach a minimum (values are the last point reached)\n");
        else if (r->status == CS_FIT_SINGULAR)
            printf("  errors undefined for parameters the data do not determine (singular covariance)\n");
        for (size_t k = 0; k < m->nparams; k++)
            if (r->at_bound[k])
                printf("  at %s bound: %s (its error is undefined; the other errors hold it there)\n",
                       bound_word(r->at_bound[k]), m->par[k].name);
        char n1[32], n2[32], n3[32], n4[32], n5[32];
        printf("  chi2 = %s, dof = %zu, chi2/dof = %s, AIC = %s, BIC = %s, rms residual = %s\n",
               num_text(r->chi2, "%.6g", n1, sizeof n1), r->dof, num_text(r->redchi2, "%.4g", n2, sizeof n2),
               num_text(r->aic, "%.6g", n3, sizeof n3), num_text(r->bic, "%.6g", n4, sizeof n4),
               num_text(r->rms, "%.4g", n5, sizeof n5));
    }
    json_t *o = json_object();
    cli_json_set_path(o, "file", path);
    json_object_set_new(o, "status", json_string(cs_fit_status_name(r->status)));
    json_object_set_new(o, "stop_reason", json_string(cs_fit_stop_name(r->stop)));
    json_object_set_new(o, "model", json_string(m->text));
    json_object_set_new(o, "mode", json_string(trans ? "transmission" : "sum"));
    json_object_set_new(o, "n", json_integer((json_int_t)r->n));
    json_object_set_new(o, "chi2", cli_jnum(r->chi2));
    json_object_set_new(o, "dof", json_integer((json_int_t)r->dof));
    json_object_set_new(o, "redchi2", cli_jnum(r->redchi2));
    json_object_set_new(o, "aic", cli_jnum(r->aic));
    json_object_set_new(o, "bic", cli_jnum(r->bic));
    json_object_set_new(o, "rms", cli_jnum(r->rms));
    json_object_set_new(o, "iterations", json_integer((json_int_t)r->niter));
    json_object_set_new(o, "errors_scaled", json_boolean(r->errors_scaled));
    json_t *jab = json_array();
    for (size_t k = 0; k < m->nparams; k++)
        if (r->at_bound[k]) {
            json_t *e = json_object();
            json_object_set_new(e, "name", json_string(m->par[k].name));
            json_object_set_new(e, "bound", json_string(bound_word(r->at_bound[k])));
            json_array_append_new(jab, e);
        }
    json_object_set_new(o, "at_bound", jab);
    if (have_ref)
        json_object_set_new(o, "reference_hz", json_real(ref_hz));

    json_t *comps = json_array();
    for (size_t c = 0; c < m->ncomp; c++) {
        const cs_model_component *mc = &m->comp[c];
        json_t *jc = json_object();
        json_object_set_new(jc, "index", json_integer((json_int_t)(c + 1)));
        json_object_set_new(jc, "profile", json_string(mc->type->name));
        if (!fo->quiet)
            printf("  %zu %s\n", c + 1, mc->type->name);
        if (!tab->header_done) {
            tprintf(tab, "file,component,profile,status,center_hz,center_hz_err,fwhm_hz,fwhm_hz_err,%s,%s_err,"
                         "shift_hz,shift_hz_err,fwhm_g_hz,fwhm_g_hz_err,fwhm_l_hz,fwhm_l_hz_err,eta,eta_err,q,q_err,"
                         "height,height_err,gamma_per_s,gamma_per_s_err,chi2,dof,redchi2,errors_scaled,at_bound,stop_reason\n",
                    trans ? "od" : "area", trans ? "od" : "area");
            tab->header_done = 1;
        }
        for (size_t k = 0; k < mc->type->nparams; k++) {
            const cs_param *p = &m->par[mc->first + k];
            double v = r->value[mc->first + k], e = r->err[mc->first + k];
            char fname[48], ename[56];
            field_name(p, fname, sizeof fname);
            snprintf(ename, sizeof ename, "%s_err", fname);
            json_object_set_new(jc, fname, cli_jnum(v));
            json_object_set_new(jc, ename, cli_jnum(e));
            if (!fo->quiet) {
                const char *flag = p->fixed ? "  (fixed)" : p->tie >= 0 ? "  (tied)" :
                                   r->at_bound[mc->first + k] == 1 ? "  (at lower bound)" :
                                   r->at_bound[mc->first + k] == 2 ? "  (at upper bound)" : "";
                printf("      %-8s %s%s\n", short_name(p->name),
                       cs_format_value_err(v, e, param_dim(p), b1, sizeof b1), flag);
            }
        }
        const cs_profile_derived *d = &r->derived[c];
        for (size_t q = 0; q < sizeof derived_fields / sizeof derived_fields[0]; q++) {
            cs_profile_qty qq = derived_fields[q].q;
            if (d->status[qq] != CS_OK)
                continue;
            if (trans && (qq == CS_PROFILE_HEIGHT || qq == CS_PROFILE_INTEGRAL))
                continue;
            char ename[56];
            snprintf(ename, sizeof ename, "%s_err", derived_fields[q].field);
            json_object_set_new(jc, derived_fields[q].field, cli_jnum(d->value[qq]));
            json_object_set_new(jc, ename, cli_jnum(d->err[qq]));
        }
        /* the reported FWHM: the width parameter, or for a Voigt the exact total FWHM */
        double fwhm, fwhm_err;
        fwhm = comp_param(m, r, c, "fwhm", &fwhm_err);
        if (!isfinite(fwhm) && d->status[CS_PROFILE_FWHM] == CS_OK) {
            fwhm = d->value[CS_PROFILE_FWHM];
            fwhm_err = d->err[CS_PROFILE_FWHM];
            json_object_set_new(jc, "fwhm_hz", cli_jnum(fwhm));
            json_object_set_new(jc, "fwhm_hz_err", cli_jnum(fwhm_err));
            if (!fo->quiet)
                printf("      %-8s %s  (total, exact; Olivero-Longbothum %s)\n", "fwhm",
                       cs_format_value_err(fwhm, fwhm_err, CS_DIM_FREQUENCY, b1, sizeof b1),
                       cs_format_value_err(d->value[CS_PROFILE_FWHM_OL], d->err[CS_PROFILE_FWHM_OL],
                                           CS_DIM_FREQUENCY, b2, sizeof b2));
        }
        double cerr, center = comp_param(m, r, c, "center", &cerr);
        double shift = NAN, shift_err = NAN;
        if (have_ref) {
            shift = center - ref_hz;
            shift_err = cerr;
            json_object_set_new(jc, "shift_hz", cli_jnum(shift));
            json_object_set_new(jc, "shift_hz_err", cli_jnum(shift_err));
            if (!fo->quiet)
                printf("      %-8s %s  (centre minus reference)\n", "shift",
                       cs_format_value_err(shift, shift_err, CS_DIM_FREQUENCY, b1, sizeof b1));
        }
        if (!fo->quiet && d->status[CS_PROFILE_GAMMA] == CS_OK)
            printf("      %-8s %s  (2 pi x Lorentzian FWHM)\n", "gamma",
                   cs_format_value_err(d->value[CS_PROFILE_GAMMA], d->err[CS_PROFILE_GAMMA], CS_DIM_RATE, b1, sizeof b1));
        json_array_append_new(comps, jc);

        /* CSV row */
        double e_area, area = comp_param(m, r, c, trans ? "od" : "area", &e_area);
        double eg, fg = comp_param(m, r, c, "fwhm_g", &eg), el, fl = comp_param(m, r, c, "fwhm_l", &el);
        double eeta, eta = comp_param(m, r, c, "eta", &eeta), eq, q = comp_param(m, r, c, "q", &eq);
        csv_text(tab, path);
        tprintf(tab, ",%zu,%s,%s", c + 1, mc->type->name, cs_fit_status_name(r->status));
        csv_num(tab, center); csv_num(tab, cerr); csv_num(tab, fwhm); csv_num(tab, fwhm_err);
        csv_num(tab, area); csv_num(tab, e_area); csv_num(tab, shift); csv_num(tab, shift_err);
        csv_num(tab, fg); csv_num(tab, eg); csv_num(tab, fl); csv_num(tab, el);
        csv_num(tab, eta); csv_num(tab, eeta); csv_num(tab, q); csv_num(tab, eq);
        int hok = d->status[CS_PROFILE_HEIGHT] == CS_OK && !trans;
        csv_num(tab, hok ? d->value[CS_PROFILE_HEIGHT] : NAN);
        csv_num(tab, hok ? d->err[CS_PROFILE_HEIGHT] : NAN);
        int gok = d->status[CS_PROFILE_GAMMA] == CS_OK;
        csv_num(tab, gok ? d->value[CS_PROFILE_GAMMA] : NAN);
        csv_num(tab, gok ? d->err[CS_PROFILE_GAMMA] : NAN);
        csv_num(tab, r->chi2);
        tprintf(tab, ",%zu", r->dof);
        csv_num(tab, r->redchi2);
        tprintf(tab, ",%d", r->errors_scaled);
        csv_at_bound(tab, m, r, c);
        tprintf(tab, ",%s\n", cs_fit_stop_name(r->stop));
    }
    json_object_set_new(o, "components", comps);

    /* baseline */
    json_t *jb = json_object();
    json_object_set_new(jb, "kind", json_string(cs_baseline_name(m->baseline)));
    json_object_set_new(jb, "x_ref_hz", json_real(r->x_ref));
    json_t *names = json_array(), *vals = json_array(), *errs = json_array();
    if (!fo->quiet && m->baseline != CS_BASELINE_NONE)
        printf("  baseline %s (u = frequency - %s)\n", cs_baseline_name(m->baseline),
               cs_quantity_format(r->x_ref, CS_DIM_FREQUENCY, 12, b2, sizeof b2));
    for (size_t k = m->base_first; k < m->nparams; k++) {
        json_array_append_new(names, json_string(short_name(m->par[k].name)));
        json_array_append_new(vals, cli_jnum(r->value[k]));
        json_array_append_new(errs, cli_jnum(r->err[k]));
        if (!fo->quiet)
            printf("      %-8s %s%s\n", short_name(m->par[k].name),
                   cs_format_value_err(r->value[k], r->err[k], CS_DIM_DIMENSIONLESS, b1, sizeof b1),
                   m->par[k].fixed ? "  (fixed)" : r->at_bound[k] == 1 ? "  (at lower bound)" :
                   r->at_bound[k] == 2 ? "  (at upper bound)" : "");
    }
    json_object_set_new(jb, "names", names);
    json_object_set_new(jb, "params", vals);
    json_object_set_new(jb, "params_err", errs);
    json_object_set_new(o, "baseline", jb);

    /* every parameter, with flags, and the correlation matrix */
    json_t *params = json_array(), *corr = json_array();
    for (size_t k = 0; k < m->nparams; k++) {
        const cs_param *p = &m->par[k];
        json_t *jp = json_object();
        json_object_set_new(jp, "name", json_string(p->name));
        json_object_set_new(jp, "value", cli_jnum(r->value[k]));
        json_object_set_new(jp, "err", cli_jnum(r->err[k]));
        json_object_set_new(jp, "unit", json_string(p->kind == CS_PARAM_FREQUENCY ? "Hz" : p->kind == CS_PARAM_AREA ? "area" : "1"));
        json_object_set_new(jp, "fixed", json_boolean(p->fixed));
        json_object_set_new(jp, "tied_to", p->tie >= 0 ? json_string(m->par[p->tie].name) : json_null());
        json_object_set_new(jp, "at_bound", json_string(r->at_bound[k] == 1 ? "lower" : r->at_bound[k] == 2 ? "upper" : "no"));
        if (isfinite(p->lo))
            json_object_set_new(jp, "lo", json_real(p->lo));
        if (isfinite(p->hi))
            json_object_set_new(jp, "hi", json_real(p->hi));
        if (r->boot_err)
            json_object_set_new(jp, "err_bootstrap", cli_jnum(r->boot_err[k]));
        if (r->mc_err)
            json_object_set_new(jp, "err_montecarlo", cli_jnum(r->mc_err[k]));
        json_array_append_new(params, jp);
        json_t *row = json_array();
        for (size_t j = 0; j < m->nparams; j++)
            json_array_append_new(row, cli_jnum(r->corr[k * m->nparams + j]));
        json_array_append_new(corr, row);
    }
    json_object_set_new(o, "parameters", params);
    json_object_set_new(o, "correlation", corr);
    if (!fo->quiet && (r->boot_err || r->mc_err)) {
        printf("  errors from %s:\n", r->boot_err && r->mc_err ? "bootstrap / Monte Carlo" : r->boot_err ? "bootstrap" : "Monte Carlo");
        for (size_t k = 0; k < m->nparams; k++)
            if (!m->par[k].fixed && m->par[k].tie < 0) {
                char e1[32], e2[32];
                printf("      %-10s %s%s%s\n", m->par[k].name,
                       num_text(r->boot_err ? r->boot_err[k] : r->mc_err[k], "%.4g", e1, sizeof e1),
                       r->boot_err && r->mc_err ? " / " : "",
                       r->boot_err && r->mc_err ? num_text(r->mc_err[k], "%.4g", e2, sizeof e2) : "");
            }
    }
    return o;
}

static int write_residuals(table *rt, const char *path, const cs_model *m, const cs_spectrum *s, const unsigned char *mask)
{
    double *model = malloc(s->n * sizeof *model), *work = malloc(s->n * sizeof *work);
    double *p = malloc(m->nparams * sizeof *p);
    if (!model || !work || !p) {
        free(model); free(work); free(p);
        return CLI_EXIT_DATA;
    }
    cs_model_get_values(m, p);
    cs_model_eval(m, p, s->freq_hz, s->n, model, work);
    if (!rt->header_done) {
        tprintf(rt, "file,frequency_hz,data,model,residual,used\n");
        rt->header_done = 1;
    }
    for (size_t i = 0; i < s->n; i++) {
        csv_text(rt, path);
        tprintf(rt, ",%.17g,%.12g", s->freq_hz[i], s->y[i]);
        csv_num(rt, model[i]);   /* empty where the model is not finite */
        csv_num(rt, s->y[i] - model[i]);
        tprintf(rt, ",%d\n", mask[i] ? 1 : 0);
    }
    free(model); free(work); free(p);
    return 0;
}

/* The --plot figure of one spectrum: data, each component on the baseline, the total and the
 * residuals. Returns 0 (the figure's name appended to `figures`) or an exit code. */
static int plot_fit(const char *file, const cs_model *m, const cs_fit_result *r, const cs_spectrum *s,
                    json_t *figures)
{
    size_t n = s->n, nc = m->ncomp;
    double *p = malloc(m->nparams * sizeof *p), *q = malloc(m->nparams * sizeof *q);
    double *total = malloc(n * sizeof *total), *work = malloc(n * sizeof *work);
    double *comp = malloc((nc ? nc : 1) * n * sizeof *comp);
    const double **cptr = malloc((nc ? nc : 1) * sizeof *cptr);
    char (*labels)[96] = malloc((nc ? nc : 1) * sizeof *labels);
    const char **lptr = malloc((nc ? nc : 1) * sizeof *lptr);
    int rc = 0;
    cs_error err;
    cs_error_clear(&err);
    if (!p || !q || !total || !work || !comp || !cptr || !labels || !lptr) {
        cli_errorf("'%s': out of memory", file);
        rc = CLI_EXIT_DATA;
        goto done;
    }
    cs_model_get_values(m, p);
    cs_model_eval(m, p, s->freq_hz, n, total, work);
    for (size_t k = 0; k < nc; k++) {
        /* component k alone: every other component's area (or optical depth) set to zero */
        memcpy(q, p, m->nparams * sizeof *q);
        for (size_t j = 0; j < nc; j++)
            if (j != k)
                q[m->comp[j].first + cs_profile_area_index(m->comp[j].type)] = 0.0;
        cs_model_eval(m, q, s->freq_hz, n, comp + k * n, work);
        cptr[k] = comp + k * n;
        snprintf(labels[k], sizeof labels[k], "%zu: %s%s", k + 1, m->comp[k].type->name,
                 r->status == CS_FIT_CONVERGED ? "" : " (fit failed)");
        lptr[k] = labels[k];
    }
    cs_plot_spectrum_data d;
    memset(&d, 0, sizeof d);
    d.n = n;
    d.freq_hz = s->freq_hz;
    d.y = s->y;
    d.sigma = s->sigma;
    d.total = total;
    d.ncomp = nc;
    d.comp = cptr;
    d.comp_label = lptr;
    d.y_quantity = m->mode == CS_MODEL_TRANSMISSION ? "transmission" : NULL;
    cs_plot_options o;
    cs_plot_options_init(&o);
    /* a figure of a fit that failed, or of one with parameters at bounds, says so above the plot */
    char title[160] = "";
    size_t nab = count_at_bound(m, r);
    if (r->status != CS_FIT_CONVERGED)
        snprintf(title, sizeof title, "fit status: %s (%s)", cs_fit_status_name(r->status),
                 r->status == CS_FIT_SINGULAR ? "some errors undefined" : "last point reached, no errors");
    else if (nab)
        snprintf(title, sizeof title, "%zu parameter%s at a bound", nab, nab == 1 ? "" : "s");
    if (title[0])
        o.title = title;
    if (cs_plot_spectrum(file, &d, &o, &err) != CS_OK)
        rc = cli_plot_failed(file, &err);
    else
        json_array_append_new(figures, cli_jstring(file));
done:
    free(p); free(q); free(total); free(work); free(comp); free(cptr); free(labels); free(lptr);
    return rc;
}

int cmd_fit(int argc, char **argv)
{
    fit_opts fo;
    memset(&fo, 0, sizeof fo);
    fo.baseline = CS_BASELINE_LINEAR;
    fo.range_lo = -INFINITY;
    fo.range_hi = INFINITY;
    fo.par = cs_fit_default_parameters();
    cs_load_options lo;
    cs_load_options_init(&lo);
    int rc = parse_args(argc, argv, &fo, &lo);
    if (rc)
        return rc;
    /* check the model text and constraints once before touching files */
    cs_model *probe = build_model(fo.model, &fo, &rc);
    if (!probe)
        return rc;
    cs_model_free(probe);
    for (size_t k = 0; k < fo.ncompare; k++) {
        cs_error err;
        cs_model *cm = cs_model_alloc(fo.compare[k], fo.baseline, fo.transmission ? CS_MODEL_TRANSMISSION : CS_MODEL_SUM, &err);
        if (!cm) {
            cli_errorf("--compare '%s': %s", fo.compare[k], err.msg);
            return CLI_EXIT_USAGE;
        }
        cs_model_free(cm);
    }

    int worst = CLI_EXIT_OK;
    json_t *fits = json_array(), *figures = json_array();
    int several = argc - optind > 1, plot_rc = 0;
    table tab = {0}, resid = {0};
    cs_fit_workspace *ws = NULL;
    for (int a = optind; a < argc; a++) {
        const char *path = argv[a];
        cs_loaded l;
        cs_error err;
        cs_error_clear(&err);
        if (cs_io_load(path, &lo, &l, &err) != CS_OK) {
            int code = cli_report(&err);
            if (worst == CLI_EXIT_OK || code > worst)
                worst = code;
            continue;
        }
        if (l.kind != CS_KIND_SPECTRUM) {
            cli_errorf("'%s': holds a time record, not a spectrum; make spectra from records with 'collshift gate'", path);
            cs_loaded_release(&l);
            worst = CLI_EXIT_DATA;
            continue;
        }
        cs_spectrum *s = l.spectrum;
        unsigned char *mask = malloc(s->n);
        if (!mask) {
            cs_loaded_release(&l);
            worst = CLI_EXIT_DATA;
            break;
        }
        for (size_t i = 0; i < s->n; i++) {
            double x = s->freq_hz[i];
            int use = x >= fo.range_lo && x <= fo.range_hi;
            for (size_t k = 0; use && k < fo.nexcl; k++)
                if (x >= fo.excl_lo[k] && x <= fo.excl_hi[k])
                    use = 0;
            mask[i] = (unsigned char)use;
        }
        int have_ref = fo.have_ref;
        double ref = fo.ref_hz;
        if (!have_ref && cs_meta_get_si(&s->meta, "reference", CS_DIM_FREQUENCY, &ref, NULL) == CS_OK)
            have_ref = 1;
        if (!ws)
            ws = cs_fit_alloc(s->n, 64);

        size_t nmodels = 1 + fo.ncompare;
        json_t *cmp = fo.ncompare ? json_array() : NULL;
        cs_fit_result *first = NULL;
        for (size_t mi = 0; mi < nmodels; mi++) {
            const char *text = mi == 0 ? fo.model : fo.compare[mi - 1];
            int brc = 0;
            cs_model *m = build_model(text, &fo, &brc);
            if (!m) { /* constraints that name parameters the compared model lacks */
                worst = brc;
                continue;
            }
            cs_fit_result *r = NULL;
            cs_error_clear(&err);
            int frc = cs_fit_run(ws, m, s->freq_hz, s->y, s->sigma, mask, s->n, &fo.par, &r, &err);
            if (!r) {
                if (!err.file[0])
                    snprintf(err.file, sizeof err.file, "%s", path);
                int code = cli_report(&err);
                if (worst == CLI_EXIT_OK || code > worst)
                    worst = code;
                cs_model_free(m);
                continue;
            }
            if (frc != CS_OK && worst == CLI_EXIT_OK)
                worst = CLI_EXIT_ANALYSIS;
            if (mi == 0) {
                json_t *o = report_fit(path, m, r, &fo, have_ref, ref, &tab);
                if (fo.residuals)
                    write_residuals(&resid, path, m, s, mask);
                if (fo.plot) {
                    char name[1024];
                    cli_plot_name_for(name, sizeof name, fo.plot, path, several);
                    int w = plot_fit(name, m, r, s, figures);
                    if (w && !plot_rc)
                        plot_rc = w;
                }
                if (cmp)
                    json_object_set_new(o, "comparison", cmp);
                json_array_append_new(fits, o);
                first = r;
                r = NULL;
            }
            if (cmp) {
                const cs_fit_result *rr = mi == 0 ? first : r;
                json_t *jc = json_object();
                json_object_set_new(jc, "model", json_string(text));
                json_object_set_new(jc, "status", json_string(cs_fit_status_name(rr->status)));
                json_object_set_new(jc, "nfree", json_integer((json_int_t)rr->nfree));
                json_object_set_new(jc, "chi2", cli_jnum(rr->chi2));
                json_object_set_new(jc, "dof", json_integer((json_int_t)rr->dof));
                json_object_set_new(jc, "aic", cli_jnum(rr->aic));
                json_object_set_new(jc, "bic", cli_jnum(rr->bic));
                if (mi > 0 && first) {
                    double F = NAN, pv = NAN;
                    const cs_fit_result *simple = rr->nfree < first->nfree ? rr : first;
                    const cs_fit_result *full = rr->nfree < first->nfree ? first : rr;
                    if (cs_fit_ftest(simple, full, &F, &pv) == CS_OK) {
                        json_object_set_new(jc, "f_statistic", cli_jnum(F));
                        json_object_set_new(jc, "f_p_value", cli_jnum(pv));
                    }
                    /* BIC of a fit that did not reach its minimum compares nothing: null */
                    int usable = (rr->status == CS_FIT_CONVERGED || rr->status == CS_FIT_SINGULAR) &&
                                 (first->status == CS_FIT_CONVERGED || first->status == CS_FIT_SINGULAR);
                    json_object_set_new(jc, "delta_bic", usable ? cli_jnum(rr->bic - first->bic) : json_null());
                    if (!fo.quiet) {
                        char c1[32], c2[32], c3[32];
                        printf("  compare %s: %s, chi2/dof = %s, BIC = %s (%s vs %s)\n", text,
                               cs_fit_status_name(rr->status), num_text(rr->redchi2, "%.4g", c1, sizeof c1),
                               num_text(rr->bic, "%.6g", c2, sizeof c2),
                               usable ? num_text(rr->bic - first->bic, "%+.3g", c3, sizeof c3) : "undefined",
                               fo.model);
                    }
                    if (!fo.quiet && isfinite(pv))
                        printf("          F-test (%s nested in %s): F = %.4g, p = %.3g\n",
                               simple == rr ? text : fo.model, simple == rr ? fo.model : text, F, pv);
                }
                json_array_append_new(cmp, jc);
            }
            cs_fit_result_free(r);
            cs_model_free(m);
        }
        if (!fo.quiet && fo.ncompare && first)
            printf("  (lower BIC is better; a difference above 10 is strong evidence)\n");
        if (!first && cmp)
            json_decref(cmp);
        cs_fit_result_free(first);
        free(mask);
        cs_loaded_release(&l);
    }
    cs_fit_free(ws);

    if (fo.table && tab.buf) {
        int w = cli_write_text(fo.table, tab.buf);
        if (w && worst == CLI_EXIT_OK)
            worst = w;
    }
    if (fo.residuals && resid.buf) {
        int w = cli_write_text(fo.residuals, resid.buf);
        if (w && worst == CLI_EXIT_OK)
            worst = w;
    }
    free(tab.buf);
    free(resid.buf);
    if (fo.json) {
        json_t *root = json_object();
        json_object_set_new(root, "command", json_string("fit"));
        json_object_set_new(root, "conventions", json_string("frequencies in cyclic Hz; widths are FWHM in Hz; "
                                                             "decay rates in s^-1 (gamma = 2 pi x Lorentzian FWHM); "
                                                             "shift = centre minus reference"));
        json_object_set_new(root, "fits", fits);
        json_object_set_new(root, "figures", figures);
        figures = NULL;
        char *text = json_dumps(root, JSON_INDENT(2) | JSON_REAL_PRECISION(15));
        json_decref(root);
        if (text) {
            int w = cli_write_text(fo.json, text);
            if (w == 0 && strcmp(fo.json, "-") == 0)
                fputc('\n', stdout);
            if (w && worst == CLI_EXIT_OK)
                worst = w;
            free(text);
        }
    } else {
        json_decref(fits);
    }
    json_decref(figures);
    if (plot_rc > worst)
        worst = plot_rc;
    return worst;
}
