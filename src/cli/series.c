/* `collshift series`: a campaign of files at known densities, slopes against density, theory. */
#include "cli.h"
#include "series_out.h"

#include <collshift/report.h>
#include <collshift/series.h>
#include <collshift/theory.h>

#include <errno.h>
#include <math.h>
#include <signal.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

const char *const cmd_series_usage[] = {
    "usage: collshift series MANIFEST [--line NAME] [--threads N] [--json FILE] [--table FILE]\n"
    "                        [--theory-table FILE] [--shard K/N] [--resume] [options]\n"
    "\n"
    "Analyses every file of a measurement campaign and fits straight lines against density: the\n"
    "centre (the shift, when every file has a reference frequency) and the FWHM of each era, by\n"
    "weighted least squares (GSL gsl_fit_wlinear, weights 1/error^2). Slopes are in Hz cm^3 (Hz per\n"
    "cm^-3), intercepts in Hz. With --line the slopes are compared with the Lorentz-Lorenz shift, the\n"
    "slab LL + cooperative Lamb shift (with a thickness) and the self-broadening coefficient, as the\n"
    "ratio measured/theory and the difference in standard errors (measured - theory)/error.\n"
    "\n"
    "The manifest is CSV (RFC 4180: a name with a comma or a quote in double quotes, inner quotes\n"
    "doubled) with a header row: 'file' (relative to the manifest's folder) and\n"
    "'density' (unit in the header, density_cm^-3, or in the value, 3e13 cm^-3); optional columns\n"
    "temperature (180 degC), thickness (250 nm), shot (0-based), era (burst or tail: the file\n"
    "measures that era only) and reference (9.1 GHz). Without a density the file's 'density'\n"
    "metadata is used, or the vapour density at the manifest's or the file's temperature\n"
    "(Alcock et al. 1984, with --element or the line's element). Reference: the manifest, else\n"
    "--ref, else the file's 'reference' metadata.\n"
    "\n"
    "Time records are analysed as by 'collshift split' (burst era and tail era; several shots are\n"
    "combined by their weighted mean). Spectra are fitted as by 'collshift fit' with --model: the\n"
    "BROADEST component is taken as the burst era's line and the NARROWEST as the tail era's (a\n"
    "one-component model gives the tail era, or the era of the manifest's 'era' column).\n"
    "\n",
    "Options:\n"
    "  --line NAME           compare with the estimates for this line (see 'collshift predict')\n"
    "  --thickness LENGTH    slab thickness for the LL + CLS estimate (default: the manifest's\n"
    "                        thickness when every row gives the same one)\n"
    "  --element EL          element of the vapour-pressure formula (Rb Cs K Na)\n"
    "  --threads N           analyse N entries at a time (OpenMP; default 1); results do not\n"
    "                        depend on N\n"
    "  --model LIST          plain model of spectra (default lorentz+lorentz)\n"
    "  --baseline KIND       baseline of spectra: none const linear quad cubic exp (default linear)\n"
    "  --ref FREQ            reference frequency for shifts\n"
    "  --gate early=SPEC     records: the burst era's gate (as for 'split'); also late=SPEC\n"
    "  --burst-model LIST    records: burst-era model (default burst)\n"
    "  --tail-model LIST     records: tail-era model (default decay)\n"
    "  --through-origin      fit y = slope x density (no intercept; gsl_fit_wmul)\n"
    "  --inflate             multiply the slope errors by sqrt(chi2/dof) when chi2/dof > 1 (noted)\n"
    "\n"
    "Output:\n"
    "  --json FILE           entries, regressions and theory as JSON ('-' for standard output)\n"
    "  --table FILE          CSV, one row per entry and era sorted by density: density_cm3, era,\n"
    "                        file, status, center_hz, shift_hz, fwhm_hz, area and their errors\n"
    "                        (empty when undefined), fit_status (of the era's fit, the worst\n"
    "                        over the shots; 'not fitted' when none ran) and at_bound (parameters\n"
    "                        stuck at a bound, e.g. 1.eta:lower); regressions leave out points\n"
    "                        whose error is undefined and say how many\n"
    "  --theory-table FILE   CSV (needs --line), one row per measured slope and estimate: era,\n"
    "                        quantity, y, estimate, label, theory_hz_cm3, slope_hz_cm3,\n"
    "                        slope_hz_cm3_err, ratio (measured/theory), nsigma ((measured -\n"
    "                        theory)/error), source\n"
    "  --quiet               no summary on standard output\n"
    "  --plot-shift FILE     figure of shift (centre - reference; without references, centre -\n"
    "                        the fitted intercept) against density with error bars, the weighted\n"
    "                        regression and, with --line, the Lorentz-Lorenz and slab (LL + CLS)\n"
    "                        estimates as lines; PNG, SVG or PDF from the extension\n"
    "  --plot-fwhm FILE      figure of FWHM against density with the regression and, with --line,\n"
    "                        the self-broadening estimate (drawn from the fitted intercept)\n"
    "                        One figure per era: FILE for the tail era, FILE_burst.EXT for the\n"
    "                        burst era (each when the era has points); a figure that cannot be\n"
    "                        drawn gives exit 3 after the other outputs are written\n"
    "A progress line is shown on standard error when it is a terminal.\n"
    "\n"
    "More than one machine:\n"
    "  --shard K/N           analyse only every N-th manifest entry starting at the K-th (K from 1\n"
    "                        to N; entries counted from 1 in manifest order), e.g. in a Slurm job\n"
    "                        array: --shard $SLURM_ARRAY_TASK_ID/N with --array=1-N. Write each\n"
    "                        shard with --json and combine them with 'collshift merge': the\n"
    "                        merged table, regressions and theory equal those of one run over the\n"
    "                        whole manifest. The JSON's 'run' object holds a fingerprint of the\n"
    "                        manifest's bytes and of the options that change results (all but\n"
    "                        --threads, --shard, the outputs and the journal options); merge\n"
    "                        refuses shards whose fingerprints differ. A shard's own summary\n"
    "                        and regressions cover its entries only.\n"
    "\n",
    "Interruptions (nothing finished is lost):\n"
    "  --journal FILE        keep each finished entry's result in FILE, written and flushed to\n"
    "                        disk as soon as the entry is done (default: the first of --json,\n"
    "                        --table, --theory-table that names a file, plus '.journal'; none\n"
    "                        when no output names a file). Its first line holds the run's\n"
    "                        fingerprint; each further line one entry as in the JSON's 'entries'.\n"
    "                        The journal is removed when every entry was measured and the outputs\n"
    "                        were written, and kept otherwise.\n"
    "  --resume              continue an interrupted run: entries in the journal keep their\n"
    "                        results, the others are analysed, and the outputs equal those of\n"
    "                        one uninterrupted run (the CSV tables byte for byte). The journal\n"
    "                        must come from the same manifest bytes and result-changing options\n"
    "                        (the fingerprint; --threads may differ), else it is refused. A last\n"
    "                        line cut short (a killed process) is ignored: that entry is redone.\n"
    "                        Without a journal the run starts from the beginning.\n"
    "  --retry-failed        with --resume: analyse again the entries the journal has as failed\n"
    "                        or partial (e.g. after replacing a bad file)\n"
    "SIGINT (Ctrl-C) or SIGTERM (e.g. a batch system's time limit) stops the run: no new entry\n"
    "starts, the entries being analysed finish and are journaled, the outputs are written for the\n"
    "finished entries with the others marked 'pending' (JSON: run.complete false), and the command\n"
    "says how to resume. The same signal again stops at once (the journal keeps every finished\n"
    "entry).\n"
    "\n",
    CLI_LOAD_OPTIONS_HELP,
    "\n"
    "Conventions: " CS_THEORY_CONVENTIONS ".\n"
    "Exit codes: 0 every entry measured; 1 some entry failed or was only partly measured (it is\n"
    "marked, the others are reported and fitted); 2 usage; 3 the manifest cannot be used, or the\n"
    "journal cannot be written or belongs to another run; 130 stopped by SIGINT, 143 stopped by\n"
    "SIGTERM (outputs hold the finished entries; continue with --resume).\n",
    NULL,
};

enum {
    O_LINE = 1, O_THICK, O_ELEMENT, O_THREADS, O_MODEL, O_BASELINE, O_REF, O_GATE, O_BURST_MODEL,
    O_TAIL_MODEL, O_ORIGIN, O_INFLATE, O_JSON, O_TABLE, O_QUIET, O_SHARD, O_THEORY_TABLE, O_PLOT_SHIFT,
    O_PLOT_FWHM, O_JOURNAL, O_RESUME, O_RETRY_FAILED
};

/* Journal and resume options (not part of series_opts: only this file uses them). */
typedef struct resume_opts {
    const char *journal;      /* --journal FILE, or NULL: derived from the outputs */
    int resume;               /* --resume */
    int retry_failed;         /* --retry-failed */
} resume_opts;
static resume_opts g_resume;

/* 1 when an output option names a file (not absent, not standard output). */
static int names_file(const char *path)
{
    return path && path[0] && strcmp(path, "-") != 0;
}

/* Append "--name[=value]\n" to the options text (the fingerprint's input). */
static int add_option_text(char **text, size_t *len, const char *name, const char *value)
{
    size_t need = strlen(name) + (value ? strlen(value) + 1 : 0) + 4;
    char *t = realloc(*text, *len + need);
    if (!t)
        return -1;
    *text = t;
    *len += (size_t)snprintf(t + *len, need, "--%s%s%s\n", name, value ? "=" : "", value ? value : "");
    return 0;
}

static int parse_args(int argc, char **argv, series_opts *so, char **opt_text)
{
    static const struct option own[] = {
        {"line", required_argument, NULL, O_LINE},
        {"thickness", required_argument, NULL, O_THICK},
        {"element", required_argument, NULL, O_ELEMENT},
        {"threads", required_argument, NULL, O_THREADS},
        {"model", required_argument, NULL, O_MODEL},
        {"baseline", required_argument, NULL, O_BASELINE},
        {"ref", required_argument, NULL, O_REF},
        {"gate", required_argument, NULL, O_GATE},
        {"burst-model", required_argument, NULL, O_BURST_MODEL},
        {"tail-model", required_argument, NULL, O_TAIL_MODEL},
        {"through-origin", no_argument, NULL, O_ORIGIN},
        {"inflate", no_argument, NULL, O_INFLATE},
        {"json", required_argument, NULL, O_JSON},
        {"table", required_argument, NULL, O_TABLE},
        {"quiet", no_argument, NULL, O_QUIET},
        {"shard", required_argument, NULL, O_SHARD},
        {"theory-table", required_argument, NULL, O_THEORY_TABLE},
        {"plot-shift", required_argument, NULL, O_PLOT_SHIFT},
        {"plot-fwhm", required_argument, NULL, O_PLOT_FWHM},
        {"journal", required_argument, NULL, O_JOURNAL},
        {"resume", no_argument, NULL, O_RESUME},
        {"retry-failed", no_argument, NULL, O_RETRY_FAILED},
        {NULL, 0, NULL, 0},
    };
    struct option longopts[64];
    cli_merge_options(own, longopts, 64);
    int c, rc = 0, li = -1;
    size_t tlen = 0;
    cs_error err;
    cs_error_clear(&err);
    optind = 1;
    opterr = 0;
    *opt_text = calloc(1, 1);
    if (!*opt_text)
        return CLI_EXIT_DATA;
    while (rc == 0 && (li = -1, c = getopt_long(argc, argv, ":", longopts, &li)) != -1) {
        /* the fingerprint's options: all but those that cannot change a result */
        int neutral = c == O_THREADS || c == O_JSON || c == O_TABLE || c == O_QUIET || c == O_SHARD ||
                      c == O_THEORY_TABLE || c == O_PLOT_SHIFT || c == O_PLOT_FWHM || c == O_JOURNAL ||
                      c == O_RESUME || c == O_RETRY_FAILED;
        if (li >= 0 && !neutral &&
            add_option_text(opt_text, &tlen, longopts[li].name, longopts[li].has_arg ? optarg : NULL)) {
            cli_errorf("series: out of memory");
            return CLI_EXIT_DATA;
        }
        switch (c) {
        case O_LINE:
            so->line = cs_line_find(optarg);
            if (!so->line) {
                cli_errorf("--line '%s': unknown line; see 'collshift predict --help'", optarg);
                rc = CLI_EXIT_USAGE;
            }
            break;
        case O_THICK:
            if (cs_quantity_parse(optarg, CS_DIM_LENGTH, NULL, &so->thickness_m, NULL, NULL, &err) != CS_OK ||
                !(so->thickness_m > 0)) {
                cli_errorf("--thickness '%s': %s", optarg, err.msg[0] ? err.msg : "must be positive");
                rc = CLI_EXIT_USAGE;
            }
            break;
        case O_ELEMENT:
            if (!(cs_vapour_density(optarg, 400.0) > 0)) {
                cli_errorf("--element '%s': expected Rb, Cs, K or Na", optarg);
                rc = CLI_EXIT_USAGE;
            }
            so->p.element = optarg;
            break;
        case O_THREADS: {
            char *end;
            errno = 0;
            long v = strtol(optarg, &end, 10);
            if (end == optarg || *end || errno == ERANGE || v < 1 || v > 1024) {
                cli_errorf("--threads '%s': expected a whole number from 1 to 1024", optarg);
                rc = CLI_EXIT_USAGE;
            }
            so->p.threads = (int)v;
            break;
        }
        case O_MODEL: so->p.model = optarg; break;
        case O_BASELINE:
            if (cs_baseline_parse(optarg, &so->p.baseline) != CS_OK) {
                cli_errorf("--baseline '%s': expected none, const, linear, quad, cubic or exp", optarg);
                rc = CLI_EXIT_USAGE;
            }
            break;
        case O_REF:
            if (cs_quantity_parse(optarg, CS_DIM_FREQUENCY, NULL, &so->p.ref_hz, NULL, NULL, &err) != CS_OK) {
                cli_errorf("--ref '%s': %s", optarg, err.msg);
                rc = CLI_EXIT_USAGE;
            }
            break;
        case O_GATE:
            if (strncmp(optarg, "early=", 6) == 0)
                so->p.split.gate_early = optarg + 6;
            else if (strncmp(optarg, "late=", 5) == 0)
                so->p.split.gate_late = optarg + 5;
            else {
                cli_errorf("--gate '%s': expected early=SPEC or late=SPEC", optarg);
                rc = CLI_EXIT_USAGE;
            }
            break;
        case O_BURST_MODEL: so->p.split.burst_model = optarg; break;
        case O_TAIL_MODEL: so->p.split.tail_model = optarg; break;
        case O_ORIGIN: so->flags |= CS_SERIES_FIT_ORIGIN; break;
        case O_INFLATE: so->flags |= CS_SERIES_FIT_INFLATE; break;
        case O_JSON: so->json = optarg; break;
        case O_TABLE: so->table = optarg; break;
        case O_QUIET: so->quiet = 1; break;
        case O_THEORY_TABLE: so->theory_table = optarg; break;
        case O_PLOT_SHIFT: so->plot_shift = optarg; break;
        case O_PLOT_FWHM: so->plot_fwhm = optarg; break;
        case O_JOURNAL: g_resume.journal = optarg; break;
        case O_RESUME: g_resume.resume = 1; break;
        case O_RETRY_FAILED: g_resume.retry_failed = 1; break;
        case O_SHARD:
            if (cs_series_shard_parse(optarg, &so->shard_k, &so->shard_n, &err) != CS_OK) {
                cli_errorf("--shard '%s': %s", optarg, err.msg);
                rc = CLI_EXIT_USAGE;
            }
            break;
        case ':':
            cli_errorf("series: option '%s' needs a value", argv[optind - 1]);
            rc = CLI_EXIT_USAGE;
            break;
        case '?':
            cli_errorf("series: unknown option '%s'; see 'collshift series --help'", argv[optind - 1]);
            rc = CLI_EXIT_USAGE;
            break;
        default:
            rc = cli_load_option(c, optarg, &so->p.load);
            break;
        }
    }
    if (rc)
        return rc;
    if (argc - optind != 1) {
        cli_errorf("series: expected one manifest, got %d; see 'collshift series --help'", argc - optind);
        return CLI_EXIT_USAGE;
    }
    so->manifest = argv[optind];
    if (so->theory_table && !so->line) {
        cli_errorf("series: --theory-table needs --line (the line whose estimates are compared)");
        return CLI_EXIT_USAGE;
    }
    if (g_resume.retry_failed && !g_resume.resume) {
        cli_errorf("series: --retry-failed needs --resume (it re-analyses entries of the journal)");
        return CLI_EXIT_USAGE;
    }
    if (g_resume.journal && (!g_resume.journal[0] || strcmp(g_resume.journal, "-") == 0)) {
        cli_errorf("series: --journal needs a file name (not standard output)");
        return CLI_EXIT_USAGE;
    }
    if (g_resume.resume && !g_resume.journal && !names_file(so->json) && !names_file(so->table) &&
        !names_file(so->theory_table)) {
        cli_errorf("series: --resume needs the journal: --journal FILE, or --json/--table naming a file");
        return CLI_EXIT_USAGE;
    }
    if (!so->p.element && so->line)
        so->p.element = so->line->element;
    return 0;
}

static void progress(size_t done, size_t total, void *ctx)
{
    (void)ctx;
    fprintf(stderr, "\rseries: %zu/%zu entries", done, total);
    if (done == total)
        fputc('\n', stderr);
    fflush(stderr);
}

/* Fingerprint of the manifest's bytes and the options text into so->fingerprint. Returns 0, or
 * prints a message and returns CLI_EXIT_DATA when the manifest cannot be read. */
static int fingerprint(series_opts *so)
{
    FILE *fp = fopen(so->manifest, "rb");
    if (!fp) {
        cli_errorf("'%s': %s", so->manifest, strerror(errno));
        return CLI_EXIT_DATA;
    }
    unsigned long long h = SERIES_FNV_SEED;
    char buf[8192];
    size_t k;
    while ((k = fread(buf, 1, sizeof buf, fp)) > 0)
        h = series_fnv1a(h, buf, k);
    int bad = ferror(fp);
    fclose(fp);
    if (bad) {
        cli_errorf("'%s': read error", so->manifest);
        return CLI_EXIT_DATA;
    }
    h = series_fnv1a(h, "", 1);
    h = series_fnv1a(h, so->options, strlen(so->options));
    snprintf(so->fingerprint, sizeof so->fingerprint, "fnv1a64:%016llx", h);
    return 0;
}

static int run_series(series_opts *so);

int cmd_series(int argc, char **argv)
{
    series_opts so;
    memset(&so, 0, sizeof so);
    memset(&g_resume, 0, sizeof g_resume);
    cs_series_params_default(&so.p);
    so.thickness_m = NAN;
    so.command = "series";
    char *opt_text = NULL;
    int rc = parse_args(argc, argv, &so, &opt_text);
    so.options = opt_text;
    if (!rc)
        rc = run_series(&so);
    free(opt_text);
    return rc;
}

static int run_series(series_opts *so_)
{
    series_opts so = *so_;
    int rc;
    cs_error err;
    cs_error_clear(&err);
    cs_model *probe = cs_model_alloc(so.p.model, so.p.baseline, CS_MODEL_SUM, &err);
    if (!probe) {
        cli_errorf("--model '%s': %s", so.p.model, err.msg);
        return CLI_EXIT_USAGE;
    }
    cs_model_free(probe);
    cs_series *s = NULL;
    if (cs_series_manifest_load(so.manifest, &s, &err) != CS_OK) {
        cli_report(&err);
        return CLI_EXIT_DATA;   /* a manifest that cannot be read or parsed is an input error */
    }
    if ((rc = fingerprint(&so)) != 0) {
        cs_series_free(s);
        return rc;
    }
    if (so.shard_n && cs_series_shard(s, so.shard_k, so.shard_n, &err) != CS_OK) {
        cli_report(&err);
        cs_series_free(s);
        return CLI_EXIT_USAGE;
    }
    series_journal j = {NULL, -1, 0, 0, 0, 0};
    if ((rc = series_journal_open(&j, &so, s, g_resume.journal, g_resume.resume, g_resume.retry_failed)) != 0) {
        series_journal_close(&j);
        free(j.path);
        cs_series_free(s);
        return rc;
    }
    series_journal_test_hook(&j);
    so.p.keep_finished = 1;   /* entries taken from the journal (all others are pending) */
    so.p.on_entry = series_journal_entry;
    so.p.entry_ctx = &j;
    so.p.stop = series_stop_requested;
    if (isatty(STDERR_FILENO))
        so.p.progress = progress;
    if (so.p.threads > 1 && !cs_series_parallel_available())
        cli_errorf("series: this build has no OpenMP; --threads %d runs one entry at a time", so.p.threads);
    cs_error_clear(&err);
    series_signals_catch();
    int run = cs_series_run(s, &so.p, &err);
    series_signals_release();
    series_journal_close(&j);
    int sig = series_signal_received();
    size_t pending = cs_series_count(s, CS_SERIES_PENDING);
    if (run != CS_OK && run != CS_ENOCONV) {
        cli_report(&err);
        cs_series_free(s);
        free(j.path);
        return run == CS_EINVAL ? CLI_EXIT_USAGE : CLI_EXIT_DATA;
    }
    for (size_t i = 0; i < s->n; i++)
        if (s->e[i].status != CS_SERIES_OK && s->e[i].status != CS_SERIES_PENDING)
            cli_errorf("'%s': line %ld: %s: %s", s->manifest, s->e[i].line,
                       cs_series_status_name(s->e[i].status), s->e[i].message);
    rc = series_output(s, &so);
    size_t nbad = s->n - pending - cs_series_count(s, CS_SERIES_OK), ntot = s->n;
    cs_series_free(s);
    if (pending) {
        cli_errorf("series: stopped by %s: %zu of %zu entries finished, %zu not analysed; the outputs hold "
                   "the finished ones (the others are marked pending)",
                   sig == SIGTERM ? "SIGTERM" : sig == SIGINT ? "SIGINT" : "a stop request", ntot - pending,
                   ntot, pending);
        if (j.path && !j.failed)
            cli_errorf("series: to continue, run the same command with --resume (journal '%s')", j.path);
        else
            cli_errorf("series: no journal was kept (give --journal FILE or an output file to be able to "
                       "resume)");
        free(j.path);
        return sig ? 128 + sig : CLI_EXIT_ANALYSIS;
    }
    if (j.path && !j.failed) {
        if (rc == 0 && nbad == 0)
            (void)unlink(j.path);   /* complete, written: nothing to resume */
        else if (rc)
            cli_errorf("series: the journal '%s' keeps the results: --resume writes the outputs again "
                       "without analysing", j.path);
        else
            cli_errorf("series: the journal '%s' is kept: after replacing the failed files, "
                       "--resume --retry-failed analyses only them again", j.path);
    }
    free(j.path);
    if (rc)
        return rc;
    return run == CS_OK ? CLI_EXIT_OK : CLI_EXIT_ANALYSIS;
}
