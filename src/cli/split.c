/* `collshift split`: burst-era and tail-era lines of time records, their shifts, cross-checks,
 * shot statistics and the gate sweep. */
#include "cli.h"
#include "plotcli.h"

#include <collshift/plot.h>
#include <collshift/report.h>
#include <collshift/split.h>

#include <errno.h>
#include <jansson.h>
#include <math.h>
#include <stdarg.h>
#include <stdlib.h>
#include <string.h>

const char *const cmd_split_usage[] = {
    "usage: collshift split RECORD... [--ref FREQ] [options] [file options]\n"
    "\n"
    "Finds the burst in each time record (shot), places an early gate on the burst and a late gate\n"
    "on the tail, fits each era's line and reports its centre, FWHM and area with standard errors,\n"
    "the shift of each era against the reference frequency and the era shift (burst - tail; the\n"
    "gates are disjoint, so the two errors add in quadrature). By default each era is fitted\n"
    "through its own gate (gate-aware: the model is gated exactly as the data, with the exact\n"
    "likelihood): the burst era as a hyperbolic-secant burst, the tail era as a damped exponential.\n"
    "Two independent estimates are checked against them: the spectrum of the whole record fitted\n"
    "with a broad + narrow model, and the matrix pencil of the tail gate; agreement is reported as\n"
    "|difference| / combined standard error and flagged above 3. With several shots (several files,\n"
    "or shots in one file) the report adds the weighted mean per era, the scatter and chi2/dof.\n"
    "\n"
    "Gates (default: early = burst peak +- 2 burst widths, hann; late = from 3 widths after the\n"
    "burst's end to the end of the record, rectangular: the decaying tail sits at the gate's start,\n"
    "where a taper would suppress it):\n"
    "  --gate early=SPEC     the burst era's gate, SPEC = START:LENGTH[:WINDOW] as for 'gate'\n"
    "                        (e.g. early=peak-1w:3w:hann, early=0.9us:250ns)\n"
    "  --gate late=SPEC      the tail era's gate (e.g. late=end+4w:rest:rect, late=2us:10us)\n"
    "  --window NAME         window of the early gate (default hann)\n"
    "  --late-window NAME    window of the late gate (default rect)\n"
    "  --pad K               zero-padding factor of every spectrum (default 2)\n"
    "  --lo FREQ             local-oscillator frequency (default: the record's 'lo' metadata, else 0)\n"
    "  --ref FREQ            reference frequency for shifts (default: the 'reference' metadata)\n"
    "\n"
    "Models:\n"
    "  --burst-model LIST    burst era (default burst); gate-aware components burst, decay joined\n"
    "                        by '+' (e.g. burst+decay), or plain profiles (sech2, lorentz, voigt, ...)\n"
    "                        fitted with a constant floor to the gated power spectrum\n"
    "  --tail-model LIST     tail era (default decay), likewise\n"
    "  --whole-model LIST    plain model of the whole record's spectrum (default sech2+lorentz;\n"
    "                        none = no whole-record estimate); its broadest component is compared\n"
    "                        with the burst era, its narrowest with the tail era\n"
    "  --whole-window NAME   window of the whole-record spectrum (default rect: the signal starts\n"
    "                        and ends inside the record, and a taper would reshape the tail)\n"
    "  --whole-block K       bins averaged into one fitted point of the whole-record band (default\n"
    "                        auto: about 1024 points, each at most 1/12 of the narrowest line;\n"
    "                        1 = every bin); the model is averaged over each block\n"
    "  --noise KIND          noise level of the gate-aware fits: residuals (default: the fit's own\n"
    "                        scatter, errors scaled), floor (the record's quiet stretch), record\n"
    "                        (robust estimate over the record), or a number (per I or Q component)\n"
    "  --no-pencil           skip the matrix-pencil estimate\n"
    "  --agree-nsigma X      flag estimates that differ by more than X combined errors (default 3)\n"
    "\n",
    "Several shots:\n"
    "  --power-average       also average the shots' gated power spectra (through the first shot's\n"
    "                        gates) and fit them with plain profiles (sech2 and lorentz unless the\n"
    "                        era models are plain); a gate-aware time-domain fit needs single shots\n"
    "\n"
    "Gate sweep:\n"
    "  --sweep SPEC          refit while stepping the late gate's start (from the burst's end) and the\n"
    "                        early gate's width (centred as the early gate): SPEC is 'auto'\n"
    "                        (late-start=1w:6w:6,early-width=2w:6w:5) or items KEY=FROM:TO:N joined by\n"
    "                        ',' with KEY late-start or early-width and FROM, TO in burst widths (2w)\n"
    "                        or times (50ns). Deviations are in the step's own standard errors\n"
    "  --sweep-table FILE    the sweep as CSV (one row per step)\n"
    "\n"
    "Output:\n"
    "  --json FILE           everything as JSON, with every choice that shaped the answer ('-' for\n"
    "                        standard output)\n"
    "  --table FILE          CSV, one row per shot and era (center_hz, center_hz_err, fwhm_hz, ...,\n"
    "                        shift_hz, era_shift_hz, cross-checks)\n"
    "  --quiet               no summary on standard output\n"
    "  --plot FILE           figure of the first shot's smoothed envelope (logarithmic axis) with\n"
    "                        its early and late gates; PNG, SVG or PDF from the extension (a\n"
    "                        figure that cannot be drawn gives exit 3 after the other outputs)\n"
    "\n",
    CLI_LOAD_OPTIONS_HELP,
    "\n"
    "Areas are energies, the integral of the line's power spectrum = the time integral of its\n"
    "intensity, in (signal unit)^2 s: 2 A^2 tau for a burst, A^2/Gamma for a decay from the gate's\n"
    "start (complex records; half that for real ones); for plain profiles the window-weighted energy\n"
    "of the line in the gate.\n"
    "Exit codes: 0 both eras measured in every shot; 1 no burst, no line above the noise, or a fit\n"
    "that did not converge; 2 usage; 3 a file that cannot be used (e.g. a spectrum).\n",
    NULL,
};

typedef struct split_opts {
    cs_split_params p;
    const char *early_spec, *late_spec;
    char early_buf[CS_SPLIT_TEXT_MAX], late_buf[CS_SPLIT_TEXT_MAX];
    const char *noise_text, *sweep_text;
    const char *json, *table, *sweep_table, *plot;
    int quiet;
} split_opts;

enum {
    S_GATE = 1, S_WINDOW, S_LATE_WINDOW, S_WHOLE_WINDOW, S_PAD, S_LO, S_REF, S_BURST_MODEL, S_TAIL_MODEL,
    S_WHOLE_MODEL, S_NOISE, S_NO_PENCIL, S_AGREE, S_POWER, S_SWEEP, S_SWEEP_TABLE, S_JSON, S_TABLE, S_QUIET, S_PLOT,
    S_WHOLE_BLOCK
};

static int usage_error(const char *fmt, ...)
#if defined(__GNUC__)
    __attribute__((format(printf, 1, 2)))
#endif
    ;
static int usage_error(const char *fmt, ...)
{
    char buf[1024];
    va_list ap;
    va_start(ap, fmt);
    vsnprintf(buf, sizeof buf, fmt, ap);
    va_end(ap);
    cli_errorf("%s", buf);
    return CLI_EXIT_USAGE;
}

static int parse_window(const char *opt, const char *arg, cs_window *w)
{
    cs_error err;
    if (cs_window_parse(arg, w, &err) != CS_OK)
        return usage_error("--%s '%s': %s", opt, arg, err.msg);
    return 0;
}

static int parse_freq(const char *opt, const char *arg, double *v)
{
    cs_error err;
    if (cs_quantity_parse(arg, CS_DIM_FREQUENCY, NULL, v, NULL, NULL, &err) != CS_OK)
        return usage_error("--%s '%s': %s", opt, arg, err.msg);
    return 0;
}

/* --gate NAME=SPEC: the name says the era (early/burst, late/tail). */
static int parse_gate(const char *arg, split_opts *so)
{
    const char *eq = strchr(arg, '=');
    size_t nl = eq ? (size_t)(eq - arg) : 0;
    int early = eq && ((nl == 5 && strncmp(arg, "early", 5) == 0) || (nl == 5 && strncmp(arg, "burst", 5) == 0));
    int late = eq && ((nl == 4 && strncmp(arg, "late", 4) == 0) || (nl == 4 && strncmp(arg, "tail", 4) == 0));
    if (!early && !late)
        return usage_error("--gate '%s': expected early=START:LENGTH[:WINDOW] or late=START:LENGTH[:WINDOW]", arg);
    if (strlen(arg) >= CS_SPLIT_TEXT_MAX)
        return usage_error("--gate '%s': too long", arg);
    cs_gate_spec spec;
    cs_error err;
    if (cs_gate_spec_parse(arg, NULL, &spec, &err) != CS_OK)
        return usage_error("--gate '%s': %s", arg, err.msg);
    if (early) {
        snprintf(so->early_buf, sizeof so->early_buf, "%s", arg);
        so->early_spec = so->early_buf;
    } else {
        snprintf(so->late_buf, sizeof so->late_buf, "%s", arg);
        so->late_spec = so->late_buf;
    }
    return 0;
}

static int parse_model(const char *opt, const char *arg, const char **out)
{
    /* accepted when either the gate-aware parser or the plain model parser takes it */
    cs_gatefit_kind kinds[CS_GATEFIT_MAX_COMP];
    size_t nc;
    cs_error e1, e2;
    if (cs_gatefit_parse(arg, kinds, CS_GATEFIT_MAX_COMP, &nc, &e1) == CS_OK) {
        *out = arg;
        return 0;
    }
    cs_model *m = cs_model_alloc(arg, CS_BASELINE_CONST, CS_MODEL_SUM, &e2);
    if (!m)
        return usage_error("--%s '%s': neither gate-aware components (burst, decay) nor plain profiles: %s", opt, arg,
                           e2.msg);
    cs_model_free(m);
    *out = arg;
    return 0;
}

static int parse_args(int argc, char **argv, split_opts *so, cs_load_options *lo)
{
    static const struct option own[] = {
        {"gate", required_argument, NULL, S_GATE},
        {"window", required_argument, NULL, S_WINDOW},
        {"late-window", required_argument, NULL, S_LATE_WINDOW},
        {"whole-window", required_argument, NULL, S_WHOLE_WINDOW},
        {"pad", required_argument, NULL, S_PAD},
        {"lo", required_argument, NULL, S_LO},
        {"ref", required_argument, NULL, S_REF},
        {"burst-model", required_argument, NULL, S_BURST_MODEL},
        {"tail-model", required_argument, NULL, S_TAIL_MODEL},
        {"whole-model", required_argument, NULL, S_WHOLE_MODEL},
        {"whole-block", required_argument, NULL, S_WHOLE_BLOCK},
        {"noise", required_argument, NULL, S_NOISE},
        {"no-pencil", no_argument, NULL, S_NO_PENCIL},
        {"agree-nsigma", required_argument, NULL, S_AGREE},
        {"power-average", no_argument, NULL, S_POWER},
        {"sweep", required_argument, NULL, S_SWEEP},
        {"sweep-table", required_argument, NULL, S_SWEEP_TABLE},
        {"json", required_argument, NULL, S_JSON},
        {"table", required_argument, NULL, S_TABLE},
        {"quiet", no_argument, NULL, S_QUIET},
        {"plot", required_argument, NULL, S_PLOT},
        {NULL, 0, NULL, 0},
    };
    struct option longopts[64];
    cli_merge_options(own, longopts, 64);
    cs_split_params *p = &so->p;
    int c, rc = 0;
    optind = 1;
    opterr = 0;
    while (rc == 0 && (c = getopt_long(argc, argv, ":", longopts, NULL)) != -1) {
        char *end;
        switch (c) {
        case S_GATE: rc = parse_gate(optarg, so); break;
        case S_WINDOW: rc = parse_window("window", optarg, &p->early_window); break;
        case S_LATE_WINDOW: rc = parse_window("late-window", optarg, &p->late_window); break;
        case S_WHOLE_WINDOW: rc = parse_window("whole-window", optarg, &p->whole_window); break;
        case S_PAD: {
            errno = 0;
            long long v = strtoll(optarg, &end, 10);
            if (end == optarg || *end || errno == ERANGE || v < 1 || v > 64)
                rc = usage_error("--pad '%s': expected a whole number from 1 to 64", optarg);
            else
                p->pad = (size_t)v;
            break;
        }
        case S_WHOLE_BLOCK: {
            errno = 0;
            long long v = strcmp(optarg, "auto") == 0 ? 0 : strtoll(optarg, &end, 10);
            if (v == 0 && strcmp(optarg, "auto") != 0)
                v = -1;
            else if (v != 0 && (end == optarg || *end || errno == ERANGE))
                v = -1;
            if (v < 0 || v > 65536)
                rc = usage_error("--whole-block '%s': expected auto or a whole number from 1 to 65536", optarg);
            else
                p->whole_block = (size_t)v;
            break;
        }
        case S_LO: rc = parse_freq("lo", optarg, &p->lo_hz); break;
        case S_REF: rc = parse_freq("ref", optarg, &p->ref_hz); break;
        case S_BURST_MODEL: rc = parse_model("burst-model", optarg, &p->burst_model); break;
        case S_TAIL_MODEL: rc = parse_model("tail-model", optarg, &p->tail_model); break;
        case S_WHOLE_MODEL:
            if (strcmp(optarg, "none") == 0) {
                p->whole_model = "";
            } else {
                cs_error err;
                cs_model *m = cs_model_alloc(optarg, CS_BASELINE_CONST, CS_MODEL_SUM, &err);
                if (!m)
                    rc = usage_error("--whole-model '%s': %s", optarg, err.msg);
                cs_model_free(m);
                p->whole_model = optarg;
            }
            break;
        case S_NOISE:
            so->noise_text = optarg;
            if (strcmp(optarg, "residuals") == 0) {
                p->noise = CS_GATEFIT_NOISE_RESIDUALS;
            } else if (strcmp(optarg, "floor") == 0) {
                p->noise = CS_GATEFIT_NOISE_GIVEN;
                p->noise_sd = 0.0;
            } else if (strcmp(optarg, "record") == 0) {
                p->noise = CS_GATEFIT_NOISE_RECORD;
            } else {
                errno = 0;
                double v = strtod(optarg, &end);
                if (end == optarg || *end || errno == ERANGE || !(v > 0) || !isfinite(v))
                    rc = usage_error("--noise '%s': expected residuals, floor, record or a positive number", optarg);
                p->noise = CS_GATEFIT_NOISE_GIVEN;
                p->noise_sd = v;
            }
            break;
        case S_NO_PENCIL: p->pencil = 0; break;
        case S_AGREE: {
            errno = 0;
            double v = strtod(optarg, &end);
            if (end == optarg || *end || errno == ERANGE || !(v > 0) || !isfinite(v))
                rc = usage_error("--agree-nsigma '%s': expected a positive number", optarg);
            else
                p->agree_nsigma = v;
            break;
        }
        case S_POWER: p->power_average = 1; break;
        case S_SWEEP: {
            cs_error err;
            so->sweep_text = optarg;
            if (cs_split_sweep_parse(optarg, &p->sweep, &err) != CS_OK)
                rc = usage_error("%s", err.msg);
            break;
        }
        case S_SWEEP_TABLE: so->sweep_table = optarg; break;
        case S_JSON: so->json = optarg; break;
        case S_TABLE: so->table = optarg; break;
        case S_QUIET: so->quiet = 1; break;
        case S_PLOT: so->plot = optarg; break;
        case ':': rc = usage_error("split: option '%s' needs a value", argv[optind - 1]); break;
        case '?': rc = usage_error("split: unknown option '%s'; see 'collshift split --help'", argv[optind - 1]); break;
        default: rc = cli_load_option(c, optarg, lo); break;
        }
    }
    if (rc)
        return rc;
    if (optind >= argc)
        return usage_error("split: no record given; see 'collshift split --help'");
    if (so->sweep_table && !so->sweep_text)
        return usage_error("split: --sweep-table needs --sweep");
    p->gate_early = so->early_spec;
    p->gate_late = so->late_spec;
    return 0;
}

/* ---------------------------------------------------------------- text buffers */


static void sb_num(cli_buf *b, double v)
{
    if (isfinite(v))
        cli_bprintf(b, ",%.15g", v);
    else
        cli_bprintf(b, ",");
}

/* CSV field: quoted when it holds a comma, quote or newline. */
static void sb_field(cli_buf *b, const char *s, int lead_comma)
{
    if (lead_comma)
        cli_bprintf(b, ",");
    if (!strpbrk(s, ",\"\n")) {
        cli_bprintf(b, "%s", s);
        return;
    }
    cli_bprintf(b, "\"");
    for (const char *q = s; *q; q++)
        cli_bprintf(b, *q == '"' ? "\"\"" : "%c", *q);
    cli_bprintf(b, "\"");
}

/* ---------------------------------------------------------------- JSON */

static json_t *line_json(const cs_split_line *l, int with_area)
{
    json_t *o = json_object();
    json_object_set_new(o, "center_hz", cli_jnum(l->center_hz));
    json_object_set_new(o, "center_hz_err", cli_jnum(l->center_hz_err));
    json_object_set_new(o, "fwhm_hz", cli_jnum(l->fwhm_hz));
    json_object_set_new(o, "fwhm_hz_err", cli_jnum(l->fwhm_hz_err));
    if (with_area) {
        json_object_set_new(o, "area", cli_jnum(l->area));
        json_object_set_new(o, "area_err", cli_jnum(l->area_err));
    }
    json_object_set_new(o, "shift_hz", cli_jnum(l->shift_hz));
    json_object_set_new(o, "shift_hz_err", cli_jnum(l->shift_hz_err));
    return o;
}

static json_t *burst_json(const cs_burst *b)
{
    json_t *o = json_object();
    json_object_set_new(o, "found", json_boolean(b->status == CS_BURST_FOUND));
    json_object_set_new(o, "snr", cli_jnum(b->snr));
    json_object_set_new(o, "floor", cli_jnum(b->floor));
    if (b->status == CS_BURST_FOUND) {
        json_object_set_new(o, "peak_time_s", cli_jnum(b->peak_time_s));
        json_object_set_new(o, "peak", cli_jnum(b->peak));
        json_object_set_new(o, "fwhm_s", cli_jnum(b->fwhm_s));
        json_object_set_new(o, "half_rise_s", cli_jnum(b->half_rise_s));
        json_object_set_new(o, "half_fall_s", cli_jnum(b->half_fall_s));
        json_object_set_new(o, "onset_s", cli_jnum(b->onset_s));
        json_object_set_new(o, "end_s", cli_jnum(b->end_s));
        json_object_set_new(o, "tail_start_s", cli_jnum(b->tail_start_s));
        json_object_set_new(o, "fade_s", cli_jnum(b->fade_s));
        json_object_set_new(o, "onset_clipped", json_boolean(b->onset_clipped));
        json_object_set_new(o, "end_clipped", json_boolean(b->end_clipped));
    }
    return o;
}

static json_t *gate_json(const cs_split_fit *f, const char *era)
{
    json_t *o = json_object();
    char wb[CS_WINDOW_SPEC_MAX];
    json_object_set_new(o, "era", json_string(era));
    json_object_set_new(o, "spec", json_string(f->spec));
    if (f->gate_ok) {
        json_object_set_new(o, "name", json_string(f->gate.name));
        json_object_set_new(o, "start_s", json_real(f->gate.start_s));
        json_object_set_new(o, "length_s", json_real(f->gate.length_s));
        json_object_set_new(o, "t_start_s", json_real(f->gate.t_start_s));
        json_object_set_new(o, "window", json_string(cs_window_format(&f->gate.window, wb, sizeof wb)));
        json_object_set_new(o, "periodic", json_boolean(f->gate.periodic == CS_WINDOW_PERIODIC));
        json_object_set_new(o, "clipped", json_boolean(f->gate.clipped));
    } else {
        json_object_set_new(o, "name", json_null());
    }
    return o;
}

/* The fit behind an era (or the whole record): every component, goodness, what was fitted. */
static json_t *fit_json(const cs_split_fit *f)
{
    json_t *o = json_object();
    json_object_set_new(o, "method", json_string(f->gate_aware ? "gate-aware" : "plain profiles on the gated PSD"));
    json_object_set_new(o, "model", json_string(f->model));
    json_object_set_new(o, "line_component", json_integer((json_int_t)f->component + 1));
    json_t *comps = json_array();
    if (f->gfit) {
        const cs_gatefit_result *r = f->gfit;
        json_object_set_new(o, "status", json_string(cs_fit_status_name(r->status)));
        json_object_set_new(o, "stop", json_string(cs_fit_stop_name(r->stop)));
        json_object_set_new(o, "chi2", cli_jnum(r->chi2));
        json_object_set_new(o, "dof", json_integer((json_int_t)r->dof));
        json_object_set_new(o, "redchi2", cli_jnum(r->redchi2));
        json_object_set_new(o, "noise", json_string(cs_gatefit_noise_name(r->noise)));
        json_object_set_new(o, "noise_sd", cli_jnum(r->noise_sd));
        json_object_set_new(o, "errors_scaled", json_boolean(r->errors_scaled));
        json_object_set_new(o, "niter", json_integer((json_int_t)r->niter));
        json_t *fr = json_object();
        json_object_set_new(fr, "first_sample", json_integer((json_int_t)r->first));
        json_object_set_new(fr, "samples", json_integer((json_int_t)r->m));
        json_object_set_new(fr, "samples_used", json_integer((json_int_t)r->nused));
        json_object_set_new(fr, "t_from_s", cli_jnum(r->t_gate_s));
        json_object_set_new(fr, "t_to_s", cli_jnum(r->t_gate_s + (double)r->m * r->dt_s));
        json_object_set_new(o, "fit_range", fr);
        for (size_t k = 0; k < r->ncomp; k++) {
            const cs_gatefit_component *c = &r->comp[k];
            json_t *jc = json_object();
            cli_gatefit_component_json(c, jc);
            json_array_append_new(comps, jc);
        }
    } else if (f->pfit && f->pmodel) {
        const cs_fit_result *r = f->pfit;
        const cs_model *m = f->pmodel;
        json_object_set_new(o, "status", json_string(cs_fit_status_name(r->status)));
        json_object_set_new(o, "stop", json_string(cs_fit_stop_name(r->stop)));
        json_object_set_new(o, "baseline", json_string(cs_baseline_name(m->baseline)));
        json_object_set_new(o, "chi2", cli_jnum(r->chi2));
        json_object_set_new(o, "dof", json_integer((json_int_t)r->dof));
        json_object_set_new(o, "redchi2", cli_jnum(r->redchi2));
        json_object_set_new(o, "weights", json_string(f->block > 1 ? "sigma = first-pass model x sqrt(g(K) / (K shots)), K bins per block"
                                                                   : "sigma = first-pass model / sqrt(shots)"));
        json_object_set_new(o, "error_scale", cli_jnum(f->err_scale));
        json_object_set_new(o, "energy_scale_s", cli_jnum(f->energy_scale));
        json_object_set_new(o, "niter", json_integer((json_int_t)r->niter));
        json_t *fr = json_object();
        json_object_set_new(fr, "f_from_hz", cli_jnum(f->fmin_hz));
        json_object_set_new(fr, "f_to_hz", cli_jnum(f->fmax_hz));
        json_object_set_new(fr, "nfft", json_integer((json_int_t)f->nfft));
        json_object_set_new(fr, "df_hz", cli_jnum(f->df_hz));
        json_object_set_new(fr, "enbw_hz", cli_jnum(f->enbw_hz));
        json_object_set_new(fr, "block_bins", json_integer((json_int_t)f->block));
        json_object_set_new(fr, "block_hz", cli_jnum((double)f->block * f->df_hz));
        json_object_set_new(fr, "shots", json_integer((json_int_t)f->nshots));
        json_object_set_new(fr, "first_sample", json_integer((json_int_t)f->first));
        json_object_set_new(fr, "samples", json_integer((json_int_t)f->m));
        json_object_set_new(o, "fit_range", fr);
        for (size_t k = 0; k < m->ncomp; k++) {
            const cs_model_component *mc = &m->comp[k];
            size_t ai = mc->first + mc->type->nparams - 1;
            json_t *jc = json_object();
            json_object_set_new(jc, "profile", json_string(mc->type->name));
            json_object_set_new(jc, "center_hz", cli_jnum(r->value[mc->first]));
            json_object_set_new(jc, "center_hz_err", cli_jnum(r->err[mc->first]));
            json_object_set_new(jc, "fwhm_hz", cli_jnum(r->derived[k].value[CS_PROFILE_FWHM]));
            json_object_set_new(jc, "fwhm_hz_err", cli_jnum(r->derived[k].err[CS_PROFILE_FWHM]));
            json_object_set_new(jc, "area", cli_jnum(r->value[ai] * f->energy_scale));
            json_object_set_new(jc, "area_err", cli_jnum(r->err[ai] * f->energy_scale));
            json_object_set_new(jc, "psd_area", cli_jnum(r->value[ai]));
            json_array_append_new(comps, jc);
        }
    } else {
        json_object_set_new(o, "status", json_string("not fitted"));
    }
    json_object_set_new(o, "components", comps);
    return o;
}

static json_t *era_json(const cs_split_fit *f)
{
    json_t *o = line_json(&f->line, 1);
    json_object_set_new(o, "status", json_string(cs_split_status_name(f->status)));
    if (f->message[0])
        json_object_set_new(o, "message", cli_jstring(f->message));
    json_object_set_new(o, "method", json_string(f->gate_aware ? "gate-aware" : "plain profiles on the gated PSD"));
    json_object_set_new(o, "model", json_string(f->model));
    json_object_set_new(o, "significance", cli_jnum(f->significance));
    json_object_set_new(o, "significance_min", cli_jnum(f->significance_min));
    json_object_set_new(o, "gate", json_string(f->gate_ok ? f->gate.name : ""));
    json_object_set_new(o, "fit", fit_json(f));
    return o;
}

static json_t *agree_json(const cs_split_agree *a)
{
    json_t *o = json_object();
    json_object_set_new(o, "z_center", cli_jnum(a->z_center));
    json_object_set_new(o, "z_fwhm", cli_jnum(a->z_fwhm));
    json_object_set_new(o, "flagged", json_boolean(a->flagged));
    return o;
}

static json_t *shot_json(const cs_split_shot *s, int averaged, size_t nshots)
{
    json_t *o = json_object();
    cli_json_set_path(o, "file", s->source);
    json_object_set_new(o, "shot", json_integer((json_int_t)s->shot));
    if (averaged)
        json_object_set_new(o, "power_average_of_shots", json_integer((json_int_t)nshots));
    json_object_set_new(o, "status", json_string(cs_split_status_name(s->status)));
    if (s->message[0])
        json_object_set_new(o, "message", cli_jstring(s->message));
    json_object_set_new(o, "lo_hz", json_real(s->lo_hz));
    json_object_set_new(o, "lo_from", json_string(s->lo_from_meta ? "metadata" : "option or 0"));
    json_object_set_new(o, "reference_hz", cli_jnum(s->ref_hz));
    json_object_set_new(o, "reference_from",
                        json_string(isfinite(s->ref_hz) ? (s->ref_from_meta ? "metadata" : "option") : "none"));
    json_object_set_new(o, "noise_floor", cli_jnum(s->noise_floor));
    json_object_set_new(o, "burst_detect", burst_json(&s->burst));
    json_t *g = json_array();
    json_array_append_new(g, gate_json(&s->era[CS_SPLIT_BURST], "burst"));
    json_array_append_new(g, gate_json(&s->era[CS_SPLIT_TAIL], "tail"));
    json_object_set_new(o, "gates", g);
    json_object_set_new(o, "burst", era_json(&s->era[CS_SPLIT_BURST]));
    json_object_set_new(o, "tail", era_json(&s->era[CS_SPLIT_TAIL]));
    json_object_set_new(o, "era_shift_hz", cli_jnum(s->era_shift_hz));
    json_object_set_new(o, "era_shift_hz_err", cli_jnum(s->era_shift_hz_err));
    json_object_set_new(o, "era_shift_note", json_string("burst centre minus tail centre; the gates are disjoint "
                                                         "(independent noise), so the errors add in quadrature"));
    /* independent estimates */
    json_t *w = json_object();
    json_object_set_new(w, "status", json_string(cs_split_status_name(s->whole.status)));
    if (s->whole.message[0])
        json_object_set_new(w, "message", cli_jstring(s->whole.message));
    json_object_set_new(w, "gate", gate_json(&s->whole, "whole"));
    json_object_set_new(w, "burst", line_json(&s->whole_line[CS_SPLIT_BURST], 1));
    json_object_set_new(w, "tail", line_json(&s->whole_line[CS_SPLIT_TAIL], 1));
    json_object_set_new(w, "fit", fit_json(&s->whole));
    json_object_set_new(o, "whole_record", w);
    if (!averaged) {
        json_t *pj = json_object();
        json_object_set_new(pj, "status", json_string(s->pencil_status == CS_OK ? "ok" : cs_strerror(s->pencil_status)));
        json_object_set_new(pj, "first_sample", json_integer((json_int_t)s->pencil_first));
        json_object_set_new(pj, "samples", json_integer((json_int_t)s->pencil_count));
        json_object_set_new(pj, "order", json_integer((json_int_t)s->pencil_order));
        json_t *pc = json_array();
        for (size_t k = 0; k < s->npencil; k++)
            json_array_append_new(pc, line_json(&s->pencil[k], 0));
        json_object_set_new(pj, "components", pc);
        json_object_set_new(pj, "note", json_string("decaying components of the tail gate up to the envelope's fade, "
                                                    "strongest first; the first stands for the tail era"));
        json_object_set_new(o, "pencil", pj);
    }
    json_t *ag = json_object(), *ab = json_object(), *at = json_object();
    json_object_set_new(ab, "whole_record", agree_json(&s->agree_whole[CS_SPLIT_BURST]));
    json_object_set_new(at, "whole_record", agree_json(&s->agree_whole[CS_SPLIT_TAIL]));
    if (!averaged)
        json_object_set_new(at, "pencil", agree_json(&s->agree_pencil));
    json_object_set_new(ag, "burst", ab);
    json_object_set_new(ag, "tail", at);
    json_object_set_new(ag, "definition", json_string("z = |x1 - x2| / sqrt(s1^2 + s2^2) against the gated fit"));
    json_object_set_new(o, "agreement", ag);
    if (s->nsweep) {
        json_t *sw = json_object(), *rows = json_array();
        for (size_t i = 0; i < s->nsweep; i++) {
            const cs_split_sweep_row *r = &s->sweep[i];
            json_t *jr = line_json(&r->line, 1);
            json_object_set_new(jr, "step", json_string(cs_split_sweep_kind_name(r->kind)));
            json_object_set_new(jr, "era", json_string(cs_split_era_name(r->era)));
            json_object_set_new(jr, "value", json_real(r->value));
            json_object_set_new(jr, "value_unit", json_string(r->in_w ? "w" : "s"));
            json_object_set_new(jr, "gate_start_s", json_real(r->gate.start_s));
            json_object_set_new(jr, "gate_length_s", json_real(r->gate.length_s));
            json_object_set_new(jr, "status", json_string(cs_split_status_name(r->status)));
            json_object_set_new(jr, "dev_center_sigma", cli_jnum(r->dev_center));
            json_object_set_new(jr, "dev_fwhm_sigma", cli_jnum(r->dev_fwhm));
            json_array_append_new(rows, jr);
        }
        json_object_set_new(sw, "rows", rows);
        json_t *mx = json_object();
        for (int e = 0; e < CS_SPLIT_NERA; e++) {
            json_t *me = json_object();
            json_object_set_new(me, "center_sigma", cli_jnum(s->sweep_max_dev[e][0]));
            json_object_set_new(me, "fwhm_sigma", cli_jnum(s->sweep_max_dev[e][1]));
            json_object_set_new(mx, cs_split_era_name((cs_split_era)e), me);
        }
        json_object_set_new(sw, "max_deviation", mx);
        json_object_set_new(sw, "definition", json_string("deviation = (step - default gates) / step's standard "
                                                          "error; the steps share samples with the default gates"));
        json_object_set_new(o, "sweep", sw);
    }
    return o;
}

static json_t *stat_json(const cs_split_stat *st)
{
    json_t *o = json_object();
    json_object_set_new(o, "n", json_integer((json_int_t)st->n));
    json_object_set_new(o, "weighted_mean", cli_jnum(st->mean));
    json_object_set_new(o, "weighted_mean_err", cli_jnum(st->mean_err));
    json_object_set_new(o, "sd", cli_jnum(st->sd));
    json_object_set_new(o, "chi2", cli_jnum(st->chi2));
    json_object_set_new(o, "dof", json_integer((json_int_t)st->dof));
    json_object_set_new(o, "chi2_dof", cli_jnum(st->redchi2));
    json_object_set_new(o, "p_value", cli_jnum(st->p_value));
    return o;
}

static json_t *settings_json(const split_opts *so)
{
    const cs_split_params *p = &so->p;
    json_t *o = json_object();
    char wb[CS_WINDOW_SPEC_MAX], sb[256];
    json_object_set_new(o, "gate_early", json_string(p->gate_early ? p->gate_early : "auto"));
    json_object_set_new(o, "gate_late", json_string(p->gate_late ? p->gate_late : "auto"));
    json_object_set_new(o, "early_window", json_string(cs_window_format(&p->early_window, wb, sizeof wb)));
    json_object_set_new(o, "late_window", json_string(cs_window_format(&p->late_window, wb, sizeof wb)));
    json_object_set_new(o, "whole_window", json_string(cs_window_format(&p->whole_window, wb, sizeof wb)));
    if (p->whole_block)
        json_object_set_new(o, "whole_block", json_integer((json_int_t)p->whole_block));
    else
        json_object_set_new(o, "whole_block", json_string("auto"));
    json_object_set_new(o, "pad", json_integer((json_int_t)p->pad));
    json_object_set_new(o, "lo_hz", cli_jnum(p->lo_hz));
    json_object_set_new(o, "ref_hz", cli_jnum(p->ref_hz));
    json_object_set_new(o, "burst_model", json_string(p->burst_model));
    json_object_set_new(o, "tail_model", json_string(p->tail_model));
    json_object_set_new(o, "burst_plain_model", json_string(p->burst_plain));
    json_object_set_new(o, "tail_plain_model", json_string(p->tail_plain));
    json_object_set_new(o, "whole_model", json_string(p->whole_model && *p->whole_model ? p->whole_model : "none"));
    json_object_set_new(o, "baseline", json_string(cs_baseline_name(p->baseline)));
    json_object_set_new(o, "noise", json_string(so->noise_text ? so->noise_text : "residuals"));
    json_object_set_new(o, "noise_sd", p->noise == CS_GATEFIT_NOISE_GIVEN && p->noise_sd > 0 ? json_real(p->noise_sd)
                                                                                          : json_null());
    json_object_set_new(o, "pencil", json_boolean(p->pencil));
    json_object_set_new(o, "power_average", json_boolean(p->power_average));
    json_object_set_new(o, "sweep", so->sweep_text ? json_string(cs_split_sweep_format(&p->sweep, sb, sizeof sb))
                                                   : json_null());
    json_object_set_new(o, "agree_nsigma", json_real(p->agree_nsigma));
    json_object_set_new(o, "detect_fap", json_real(p->detect_fap));
    json_object_set_new(o, "burst_min_snr", json_real(p->burst.min_snr));
    json_object_set_new(o, "burst_min_rise", json_real(p->burst_min_rise));
    return o;
}

/* ---------------------------------------------------------------- summary */

/* The status of the fit behind an era (cs_fit_status_name: "converged", "not converged",
 * "singular covariance", "model not finite"), or "not fitted" when no fit ran. */
static const char *era_fit_status(const cs_split_fit *f)
{
    if (f->gfit)
        return cs_fit_status_name(f->gfit->status);
    if (f->pfit)
        return cs_fit_status_name(f->pfit->status);
    return "not fitted";
}

static const char *fmt_f(double v, double e, char *b, size_t n)
{
    return cs_format_value_err(v, e, CS_DIM_FREQUENCY, b, n);
}

static void print_era(const cs_split_shot *s, cs_split_era e)
{
    const cs_split_fit *f = &s->era[e];
    char b1[96], b2[96], b3[96];
    printf("  %s era", cs_split_era_name(e));
    if (f->gate_ok)
        printf(": gate %s %s + %s (%s)", f->gate.name, cs_quantity_format(f->gate.start_s, CS_DIM_TIME, 5, b1, sizeof b1),
               cs_quantity_format(f->gate.length_s, CS_DIM_TIME, 5, b2, sizeof b2),
               cs_window_format(&f->gate.window, b3, sizeof b3));
    printf(", %s (%s)\n", f->model, f->gate_aware ? "gate-aware fit" : "plain profiles on the gated PSD");
    if (f->status != CS_SPLIT_OK) {
        printf("    %s: %s (fit: %s)\n", cs_split_status_name(f->status), f->message, era_fit_status(f));
        return;
    }
    const cs_split_line *l = &f->line;
    printf("    centre  %s  (LO %+.6g MHz)\n", fmt_f(l->center_hz, l->center_hz_err, b1, sizeof b1),
           (l->center_hz - s->lo_hz) / 1e6);
    printf("    FWHM    %s\n", fmt_f(l->fwhm_hz, l->fwhm_hz_err, b1, sizeof b1));
    printf("    area    %s (signal^2 s)\n", cs_format_value_err(l->area, l->area_err, CS_DIM_DIMENSIONLESS, b1, sizeof b1));
    if (l->ok && isfinite(l->shift_hz))
        printf("    shift   %s vs reference\n", fmt_f(l->shift_hz, l->shift_hz_err, b1, sizeof b1));
    double floor_sd = sqrt(s->noise_floor / 2.0);
    if (f->gfit && f->gfit->errors_scaled)
        printf("    noise   %.3g per %s from the fit's residuals (quiet stretch: %.3g)%s\n", f->gfit->noise_sd,
               s->is_complex ? "I/Q component" : "sample", floor_sd,
               f->gfit->noise_sd > 1.5 * floor_sd ? ": the model leaves signal in the gate, errors widened" : "");
    else if (f->gfit)
        printf("    noise   %.3g per %s (%s), chi2/dof %.3g%s\n", f->gfit->noise_sd,
               s->is_complex ? "I/Q component" : "sample", cs_gatefit_noise_name(f->gfit->noise), f->gfit->redchi2,
               f->gfit->redchi2 > 2 ? ": the model does not describe the gate" : "");
    else if (f->pfit)
        printf("    fit     chi2/dof %.3g, errors x %.3g (correlated %s%s)\n", f->pfit->redchi2, f->err_scale,
               f->block > 1 ? "blocks" : "bins", f->pfit->redchi2 > 1 ? " and chi2/dof" : "");
}

/* A z-score for the summary, "undefined" when it could not be computed. */
static const char *z_text(double z, char *b, size_t n)
{
    if (!isfinite(z))
        return "undefined";
    snprintf(b, n, "%.2f", z);
    return b;
}

static void print_check(const char *what, const cs_split_line *l, double z_c, double z_w, double thr)
{
    char b1[96], b2[96];
    if (!l->ok) {
        printf("    %-22s not available\n", what);
        return;
    }
    char z1[32], z2[32];
    printf("    %-22s centre %s, FWHM %s: %s and %s%s\n", what, fmt_f(l->center_hz, l->center_hz_err, b1, sizeof b1),
           fmt_f(l->fwhm_hz, l->fwhm_hz_err, b2, sizeof b2), z_text(z_c, z1, sizeof z1), z_text(z_w, z2, sizeof z2),
           (z_c > thr || z_w > thr) ? "  DISAGREE" : "");
}

static void print_shot(const cs_split_shot *s, const cs_split_params *p, int averaged, size_t nshots)
{
    char b1[96], b2[96];
    if (averaged)
        printf("power average of %zu shots (plain profiles fitted to the averaged gated spectra, through the first\n"
               "shot's gates; a gate-aware time-domain fit needs the samples of single shots):\n", nshots);
    else
        printf("%s, shot %zu: LO %s, reference %s\n", s->source, s->shot,
               cs_quantity_format(s->lo_hz, CS_DIM_FREQUENCY, 12, b1, sizeof b1),
               isfinite(s->ref_hz) ? cs_quantity_format(s->ref_hz, CS_DIM_FREQUENCY, 12, b2, sizeof b2) : "none");
    const cs_burst *b = &s->burst;
    if (!averaged) {
        if (b->status == CS_BURST_FOUND)
            printf("  burst: peak at %s, FWHM %s (SNR %.3g)\n", cs_quantity_format(b->peak_time_s, CS_DIM_TIME, 6, b1, sizeof b1),
                   cs_quantity_format(b->fwhm_s, CS_DIM_TIME, 4, b2, sizeof b2), b->snr);
        else if (isfinite(b->snr))
            printf("  burst: none found (SNR %.3g)\n", b->snr);
        else
            printf("  burst: none found (SNR undefined)\n");
    }
    print_era(s, CS_SPLIT_BURST);
    print_era(s, CS_SPLIT_TAIL);
    if (isfinite(s->era_shift_hz))
        printf("  era shift (burst - tail): %s  (disjoint gates: errors added in quadrature)\n",
               fmt_f(s->era_shift_hz, s->era_shift_hz_err, b1, sizeof b1));
    printf("  independent estimates (|difference| / combined error for centre and FWHM; > %.3g flagged):\n",
           p->agree_nsigma);
    if (s->whole.status == CS_SPLIT_OK || s->whole_line[0].ok || s->whole_line[1].ok) {
        print_check("burst: whole record", &s->whole_line[CS_SPLIT_BURST], s->agree_whole[CS_SPLIT_BURST].z_center,
                    s->agree_whole[CS_SPLIT_BURST].z_fwhm, p->agree_nsigma);
        print_check("tail: whole record", &s->whole_line[CS_SPLIT_TAIL], s->agree_whole[CS_SPLIT_TAIL].z_center,
                    s->agree_whole[CS_SPLIT_TAIL].z_fwhm, p->agree_nsigma);
    } else {
        printf("    whole record: %s\n", s->whole.message[0] ? s->whole.message : cs_split_status_name(s->whole.status));
    }
    if (!averaged && p->pencil) {
        if (s->npencil > 0)
            print_check("tail: matrix pencil", &s->pencil[0], s->agree_pencil.z_center, s->agree_pencil.z_fwhm,
                        p->agree_nsigma);
        else
            printf("    tail: matrix pencil    no decaying component found in the tail gate\n");
    }
    if (s->nsweep) {
        size_t n[CS_SPLIT_NERA] = {0, 0}, ok[CS_SPLIT_NERA] = {0, 0};
        for (size_t i = 0; i < s->nsweep; i++) {
            n[s->sweep[i].era]++;
            ok[s->sweep[i].era] += s->sweep[i].status == CS_SPLIT_OK;
        }
        printf("  gate sweep (deviation from the default gates in the step's standard errors):\n");
        if (n[CS_SPLIT_BURST])
            printf("    early width, burst era: %zu of %zu steps measured, max |dev| centre %.2f, FWHM %.2f\n",
                   ok[CS_SPLIT_BURST], n[CS_SPLIT_BURST], s->sweep_max_dev[CS_SPLIT_BURST][0],
                   s->sweep_max_dev[CS_SPLIT_BURST][1]);
        if (n[CS_SPLIT_TAIL])
            printf("    late start, tail era:   %zu of %zu steps measured, max |dev| centre %.2f, FWHM %.2f\n",
                   ok[CS_SPLIT_TAIL], n[CS_SPLIT_TAIL], s->sweep_max_dev[CS_SPLIT_TAIL][0],
                   s->sweep_max_dev[CS_SPLIT_TAIL][1]);
    }
}

static void print_stat(const char *what, const cs_split_stat *st)
{
    char b1[96], b2[96];
    if (st->n == 0)
        return;
    printf("  %-14s %s (n = %zu)", what, fmt_f(st->mean, st->mean_err, b1, sizeof b1), st->n);
    if (st->n >= 2)
        printf(", SD %s, chi2/dof %.3g (p = %.2g)%s", cs_quantity_format(st->sd, CS_DIM_FREQUENCY, 3, b2, sizeof b2),
               st->redchi2, st->p_value, st->p_value < 1e-3 ? "  <- scatter not explained by the errors" : "");
    printf("\n");
}

/* ---------------------------------------------------------------- tables */

static void table_header(cli_buf *t)
{
    cli_bprintf(t, "file,shot,kind,era,status,method,model,gate_start_s,gate_length_s,center_hz,center_hz_err,fwhm_hz,"
                 "fwhm_hz_err,area,area_err,shift_hz,shift_hz_err,era_shift_hz,era_shift_hz_err,whole_center_hz,"
                 "whole_center_hz_err,whole_fwhm_hz,whole_fwhm_hz_err,z_whole_center,z_whole_fwhm,pencil_center_hz,"
                 "pencil_center_hz_err,pencil_fwhm_hz,pencil_fwhm_hz_err,z_pencil_center,z_pencil_fwhm,fit_status\n");
}

static void table_rows(cli_buf *t, const cs_split_shot *s, const char *kind)
{
    for (int e = 0; e < CS_SPLIT_NERA; e++) {
        const cs_split_fit *f = &s->era[e];
        const cs_split_line *l = &f->line, *w = &s->whole_line[e];
        sb_field(t, s->source, 0);
        cli_bprintf(t, ",%zu,%s,%s,", s->shot, kind, cs_split_era_name((cs_split_era)e));
        sb_field(t, cs_split_status_name(f->status), 0);
        cli_bprintf(t, ",%s,", f->gate_aware ? "gate-aware" : "plain");
        sb_field(t, f->model, 0);
        sb_num(t, f->gate_ok ? f->gate.start_s : NAN);
        sb_num(t, f->gate_ok ? f->gate.length_s : NAN);
        sb_num(t, l->center_hz); sb_num(t, l->center_hz_err); sb_num(t, l->fwhm_hz); sb_num(t, l->fwhm_hz_err);
        sb_num(t, l->area); sb_num(t, l->area_err); sb_num(t, l->shift_hz); sb_num(t, l->shift_hz_err);
        sb_num(t, s->era_shift_hz); sb_num(t, s->era_shift_hz_err);
        sb_num(t, w->center_hz); sb_num(t, w->center_hz_err); sb_num(t, w->fwhm_hz); sb_num(t, w->fwhm_hz_err);
        sb_num(t, s->agree_whole[e].z_center); sb_num(t, s->agree_whole[e].z_fwhm);
        const cs_split_line *pl = e == CS_SPLIT_TAIL && s->npencil ? &s->pencil[0] : NULL;
        sb_num(t, pl ? pl->center_hz : NAN); sb_num(t, pl ? pl->center_hz_err : NAN);
        sb_num(t, pl ? pl->fwhm_hz : NAN); sb_num(t, pl ? pl->fwhm_hz_err : NAN);
        sb_num(t, pl ? s->agree_pencil.z_center : NAN); sb_num(t, pl ? s->agree_pencil.z_fwhm : NAN);
        cli_bprintf(t, ",%s\n", era_fit_status(f));
    }
}

static void table_mean_rows(cli_buf *t, const cs_split_result *r)
{
    for (int e = 0; e < CS_SPLIT_NERA; e++) {
        cli_bprintf(t, ",,weighted_mean,%s,%s,,", cs_split_era_name((cs_split_era)e), r->center[e].n ? "ok" : "none");
        cli_bprintf(t, ",,");
        sb_num(t, r->center[e].mean); sb_num(t, r->center[e].mean_err);
        sb_num(t, r->fwhm[e].mean); sb_num(t, r->fwhm[e].mean_err);
        cli_bprintf(t, ",,");
        sb_num(t, r->shift[e].mean); sb_num(t, r->shift[e].mean_err);
        sb_num(t, r->era_shift.mean); sb_num(t, r->era_shift.mean_err);
        cli_bprintf(t, ",,,,,,,,,,,,,\n");
    }
}

static void sweep_rows(cli_buf *t, const cs_split_shot *s)
{
    for (size_t i = 0; i < s->nsweep; i++) {
        const cs_split_sweep_row *r = &s->sweep[i];
        sb_field(t, s->source, 0);
        cli_bprintf(t, ",%zu,%s,%s,%.12g,%s", s->shot, cs_split_sweep_kind_name(r->kind), cs_split_era_name(r->era),
                  r->value, r->in_w ? "w" : "s");
        sb_num(t, r->gate.start_s);
        sb_num(t, r->gate.length_s);
        cli_bprintf(t, ",%s", cs_split_status_name(r->status));
        const cs_split_line *l = &r->line;
        sb_num(t, l->center_hz); sb_num(t, l->center_hz_err); sb_num(t, l->fwhm_hz); sb_num(t, l->fwhm_hz_err);
        sb_num(t, r->dev_center); sb_num(t, r->dev_fwhm);
        cli_bprintf(t, "\n");
    }
}

/* ---------------------------------------------------------------- the command */

static int worse(int a, int b)
{
    return b > a ? b : a;
}

/* --plot: the first shot's envelope with its early and late gates. Returns 0 or an exit code. */
static int plot_split(const char *file, cs_gate_workspace *ws, const cs_record *rec, const cs_split_shot *shot,
                      json_t *figures)
{
    cs_error err;
    cs_error_clear(&err);
    cs_envelope *env = NULL;
    if (cs_envelope_compute(ws, rec, NULL, &env, &err) != CS_OK)
        return cli_plot_failed(file, &err);
    static const char *const names[CS_SPLIT_NERA] = {"early", "late"};
    cs_plot_gate pg[CS_SPLIT_NERA];
    size_t ng = 0;
    for (int e = 0; shot && e < CS_SPLIT_NERA; e++) {
        const cs_split_fit *f = &shot->era[e];
        if (!f->gate_ok)
            continue;
        pg[ng].name = names[e];
        pg[ng].start_s = f->gate.t_start_s;
        pg[ng].length_s = f->gate.length_s;
        ng++;
    }
    int rc = cli_plot_envelope(file, env, pg, ng, figures);
    cs_envelope_free(env);
    return rc;
}

int cmd_split(int argc, char **argv)
{
    split_opts so;
    memset(&so, 0, sizeof so);
    cs_split_params_default(&so.p);
    cs_load_options lo;
    cs_load_options_init(&lo);
    int rc = parse_args(argc, argv, &so, &lo);
    if (rc)
        return rc;

    /* load every file; all their shots go into one run */
    int nfiles = argc - optind, worst = CLI_EXIT_OK;
    cs_loaded *files = calloc((size_t)nfiles, sizeof *files);
    size_t nrec = 0, cap = 0;
    cs_record **recs = NULL;
    json_t *jfiles = json_array(), *figures = json_array();
    if (!files) {
        json_decref(figures);
        cli_errorf("out of memory");
        json_decref(jfiles);
        return CLI_EXIT_DATA;
    }
    for (int a = 0; a < nfiles; a++) {
        const char *path = argv[optind + a];
        cs_error err;
        cs_error_clear(&err);
        cs_loaded_init(&files[a]);
        json_t *jf = json_object();
        cli_json_set_path(jf, "file", path);
        json_array_append_new(jfiles, jf);
        if (cs_io_load(path, &lo, &files[a], &err) != CS_OK) {
            worst = worse(worst, cli_report(&err));
            json_object_set_new(jf, "status", cli_jstring(err.msg));
            continue;
        }
        if (files[a].kind != CS_KIND_RECORD) {
            cli_errorf("'%s': holds a spectrum, not a time record; fit spectra with 'collshift fit'", path);
            worst = worse(worst, CLI_EXIT_DATA);
            json_object_set_new(jf, "status", json_string("not a time record"));
            continue;
        }
        json_object_set_new(jf, "status", json_string("loaded"));
        json_object_set_new(jf, "format", json_string(cs_format_name(files[a].format)));
        json_object_set_new(jf, "shots", json_integer((json_int_t)files[a].nrecords));
        if (files[a].nrecords) {
            const cs_record *r0 = files[a].records[0];
            json_object_set_new(jf, "samples", json_integer((json_int_t)r0->n));
            json_object_set_new(jf, "dt_s", json_real(r0->dt_s));
            json_object_set_new(jf, "t0_s", json_real(r0->t0_s));
            json_object_set_new(jf, "complex", json_boolean(r0->is_complex));
        }
        for (size_t k = 0; k < files[a].nrecords; k++) {
            if (nrec == cap) {
                cap = cap ? 2 * cap : 16;
                cs_record **nr = realloc(recs, cap * sizeof *nr);
                if (!nr) {
                    cli_errorf("out of memory");
                    worst = worse(worst, CLI_EXIT_DATA);
                    break;
                }
                recs = nr;
            }
            recs[nrec++] = files[a].records[k];
        }
    }

    cs_split_result *res = NULL;
    if (nrec > 0) {
        cs_gate_wisdom_load(NULL, NULL);   /* cached wisdom, if any; a missing file is normal */
        cs_gate_workspace *ws = cs_gate_alloc();
        cs_error err;
        cs_error_clear(&err);
        int src = ws ? cs_split_run(ws, recs, nrec, &so.p, &res, &err) : CS_ENOMEM;
        if (so.plot && ws)
            worst = worse(worst, plot_split(so.plot, ws, recs[0], res && res->nshots ? &res->shots[0] : NULL,
                                            figures));
        cs_gate_free(ws);
        if (src == CS_ENOCONV) {
            worst = worse(worst, CLI_EXIT_ANALYSIS);
        } else if (src != CS_OK) {
            if (src == CS_ENOMEM && !ws)
                cli_errorf("out of memory");
            else
                worst = worse(worst, cli_report(&err));
        }
    }

    if (res) {
        if (!so.quiet) {
            for (size_t i = 0; i < res->nshots; i++)
                print_shot(&res->shots[i], &so.p, 0, 1);
            if (res->nshots > 1) {
                printf("shots combined (weighted mean, SD of the shots, chi2/dof about the mean):\n");
                print_stat("burst centre", &res->center[CS_SPLIT_BURST]);
                print_stat("burst FWHM", &res->fwhm[CS_SPLIT_BURST]);
                print_stat("tail centre", &res->center[CS_SPLIT_TAIL]);
                print_stat("tail FWHM", &res->fwhm[CS_SPLIT_TAIL]);
                print_stat("era shift", &res->era_shift);
            }
            if (res->average)
                print_shot(res->average, &so.p, 1, res->nshots);
        }
        for (size_t i = 0; i < res->nshots; i++)
            if (res->shots[i].status != CS_SPLIT_OK)
                cli_errorf("'%s': shot %zu: %s", res->shots[i].source, res->shots[i].shot, res->shots[i].message);
        if (res->average && res->average->status != CS_SPLIT_OK)
            cli_errorf("power average: %s", res->average->message);
    }

    /* tables */
    if (so.table && res) {
        cli_buf t = {0};
        table_header(&t);
        for (size_t i = 0; i < res->nshots; i++)
            table_rows(&t, &res->shots[i], "shot");
        if (res->nshots > 1)
            table_mean_rows(&t, res);
        if (res->average)
            table_rows(&t, res->average, "power_average");
        worst = worse(worst, t.p ? cli_write_text(so.table, t.p) : CLI_EXIT_DATA);
        free(t.p);
    }
    if (so.sweep_table && res) {
        cli_buf t = {0};
        cli_bprintf(&t, "file,shot,step,era,value,value_unit,gate_start_s,gate_length_s,status,center_hz,center_hz_err,"
                      "fwhm_hz,fwhm_hz_err,dev_center_sigma,dev_fwhm_sigma\n");
        for (size_t i = 0; i < res->nshots; i++)
            sweep_rows(&t, &res->shots[i]);
        worst = worse(worst, t.p ? cli_write_text(so.sweep_table, t.p) : CLI_EXIT_DATA);
        free(t.p);
    }

    if (so.json) {
        json_t *root = json_object();
        json_object_set_new(root, "command", json_string("split"));
        json_object_set_new(root, "conventions",
                            json_string("frequencies in cyclic Hz with the LO added; widths are FWHM of the line's "
                                        "power spectrum; shift = centre minus reference; areas are energies "
                                        "(signal unit^2 s); times in s on the record's axis, gate start_s from the "
                                        "first sample"));
        json_object_set_new(root, "settings", settings_json(&so));
        json_object_set_new(root, "files", jfiles);
        jfiles = NULL;
        json_object_set_new(root, "figures", figures);
        figures = NULL;
        json_object_set_new(root, "status", json_string(res ? cs_split_status_name(res->status) : "failed"));
        if (res) {
            json_t *shots = json_array();
            for (size_t i = 0; i < res->nshots; i++)
                json_array_append_new(shots, shot_json(&res->shots[i], 0, 1));
            /* the headline: the single shot, or the weighted means of several */
            if (res->nshots == 1) {
                json_t *s0 = json_array_get(shots, 0);
                const char *keys[] = {"burst", "tail", "era_shift_hz", "era_shift_hz_err", "gates", "burst_detect"};
                for (size_t k = 0; k < sizeof keys / sizeof keys[0]; k++)
                    json_object_set(root, keys[k], json_object_get(s0, keys[k]));
                json_object_set_new(root, "headline", json_string("the only shot"));
            } else {
                for (int e = 0; e < CS_SPLIT_NERA; e++) {
                    json_t *o = json_object();
                    json_object_set_new(o, "center_hz", cli_jnum(res->center[e].mean));
                    json_object_set_new(o, "center_hz_err", cli_jnum(res->center[e].mean_err));
                    json_object_set_new(o, "fwhm_hz", cli_jnum(res->fwhm[e].mean));
                    json_object_set_new(o, "fwhm_hz_err", cli_jnum(res->fwhm[e].mean_err));
                    json_object_set_new(o, "area", json_null());
                    json_object_set_new(o, "area_err", json_null());
                    json_object_set_new(o, "shift_hz", cli_jnum(res->shift[e].mean));
                    json_object_set_new(o, "shift_hz_err", cli_jnum(res->shift[e].mean_err));
                    json_object_set_new(o, "fit", json_string("weighted mean over shots (see 'shots' and 'combined')"));
                    json_object_set_new(root, cs_split_era_name((cs_split_era)e), o);
                }
                json_object_set_new(root, "era_shift_hz", cli_jnum(res->era_shift.mean));
                json_object_set_new(root, "era_shift_hz_err", cli_jnum(res->era_shift.mean_err));
                json_t *s0 = json_array_get(shots, 0);
                json_object_set(root, "gates", json_object_get(s0, "gates"));
                json_object_set(root, "burst_detect", json_object_get(s0, "burst_detect"));
                json_object_set_new(root, "headline", json_string("weighted means of the shots; gates and "
                                                                  "burst_detect of the first shot"));
                json_t *cb = json_object();
                const char *qn[] = {"center_hz", "fwhm_hz", "shift_hz"};
                for (int e = 0; e < CS_SPLIT_NERA; e++) {
                    json_t *ce = json_object();
                    json_object_set_new(ce, qn[0], stat_json(&res->center[e]));
                    json_object_set_new(ce, qn[1], stat_json(&res->fwhm[e]));
                    json_object_set_new(ce, qn[2], stat_json(&res->shift[e]));
                    json_object_set_new(cb, cs_split_era_name((cs_split_era)e), ce);
                }
                json_object_set_new(cb, "era_shift_hz", stat_json(&res->era_shift));
                json_object_set_new(root, "combined", cb);
            }
            json_object_set_new(root, "shots", shots);
            if (res->average) {
                json_t *av = shot_json(res->average, 1, res->nshots);
                json_object_set_new(av, "note", json_string("plain profiles fitted to the power-averaged gated "
                                                            "spectra through the first shot's gates; gate-aware "
                                                            "time-domain fits need single shots"));
                json_object_set_new(root, "power_average", av);
            }
        }
        char *text = json_dumps(root, JSON_INDENT(2) | JSON_REAL_PRECISION(15));
        json_decref(root);
        if (text) {
            int w = cli_write_text(so.json, text);
            if (w == 0 && strcmp(so.json, "-") == 0)
                fputc('\n', stdout);
            worst = worse(worst, w);
            free(text);
        } else {
            worst = worse(worst, CLI_EXIT_DATA);
        }
    }
    json_decref(jfiles);
    json_decref(figures);
    cs_split_result_free(res);
    free(recs);
    for (int a = 0; a < nfiles; a++)
        cs_loaded_release(&files[a]);
    free(files);
    return worst;
}
