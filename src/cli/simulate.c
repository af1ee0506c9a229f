/* `collshift simulate`: write a synthetic density series of an invented scenario with its truth. */
#include "cli.h"

#include <collshift/gatefit.h>
#include <collshift/simulate.h>

#include <errno.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

const char *const cmd_simulate_usage[] = {
    "usage: collshift simulate --out DIR (--densities LIST | --density-range A:B:N) [options]\n"
    "\n"
    "Writes SYNTHETIC data of an invented scenario - a dense vapour of an alkali-like two-level\n"
    "emitter at 384.2304844685 THz, not a measurement - for a density series: heterodyne time\n"
    "records (a sech burst, then an exponentially decaying tail, plus white noise) or spectra (a\n"
    "broad burst-era line plus a narrow tail-era line on a baseline, plus Gaussian noise of known\n"
    "sigma). Line centres and widths grow linearly with density. Every file name starts with\n"
    "'synthetic_' and every text file says '# synthetic = yes' and carries its true values as\n"
    "'# true_... = value unit' lines. DIR also receives manifest.csv (file, density_cm^-3,\n"
    "reference_hz, ...; read by 'collshift series') and truth.csv (one row per file: density_cm^-3,\n"
    "burst_center_hz, burst_fwhm_hz, tail_center_hz, tail_fwhm_hz, shifts, tau, Gamma, ...).\n"
    "The same seed gives identical files.\n"
    "\n"
    "Series and output:\n"
    "  --out DIR               output folder (created); existing files are never replaced\n"
    "  --force                 replace existing files of the same names\n"
    "  --densities LIST        comma-separated densities, cm^-3 unless a unit is given\n"
    "                          (e.g. 1e13,3e13,1e14 or 3e19m^-3,1e20m^-3)\n"
    "  --density-range A:B:N   N densities evenly spaced from A to B (e.g. 1e13:3e14:5)\n"
    "  --kind record|spectrum  what to write (default record)\n"
    "  --shots N               records per density (default 1); text: one file per shot\n"
    "  --format text|npy       text CSV (default) or NumPy .npy (records only; one file per density\n"
    "                          holding every shot; the metadata are then only in manifest and truth)\n"
    "  --seed N                seed of the random numbers, GSL mt19937 (default 1)\n"
    "  --temperature T         add a temperature column to the manifest (e.g. 493K)\n"
    "  --thickness L           add a thickness column to the manifest (e.g. 150nm)\n"
    "  --quiet                 no summary on standard output\n"
    "\n"
    "Lines (centre = reference + shift + shift slope x density; FWHM = width + width slope x\n"
    "density; slopes in Hz cm^3):\n"
    "  --reference FREQ        unperturbed line (default 384.2304844685THz)\n"
    "  --burst-shift FREQ      burst-line shift at zero density (default 0)\n"
    "  --burst-shift-slope X   burst shift per density, Hz cm^3 (default -6e-7)\n"
    "  --burst-fwhm FREQ       burst-line FWHM at zero density (default 4MHz)\n"
    "  --burst-width-slope X   burst FWHM per density, Hz cm^3 (default 1.2e-7)\n"
    "  --burst-tau TIME        instead: the same sech time constant at every density\n"
    "                          (burst FWHM = 0.178604/tau, width slope 0)\n"
    "  --tail-shift FREQ       tail-line shift at zero density (default 0)\n"
    "  --tail-shift-slope X    tail shift per density, Hz cm^3 (default -1.5e-7)\n"
    "  --tail-fwhm FREQ        tail-line FWHM at zero density (default 1.1MHz)\n"
    "  --tail-width-slope X    tail FWHM per density, Hz cm^3 (default 1e-8)\n"
    "\n",
    "Records (z = A_b sech((t - t_p)/tau) e^(2 pi i f_b t) + A_t e^(-Gamma (t - t_s)/2)\n"
    "e^(2 pi i f_t t) for t >= t_s, f = centre - LO, Gamma = 2 pi x tail FWHM: the tail's\n"
    "intensity decays at Gamma; random phases per shot):\n"
    "  --lo FREQ               local oscillator (default reference - 250MHz)\n"
    "  --sample-rate FREQ      sample rate (default 1GHz)\n"
    "  --samples N             samples per record, or points per spectrum (default 4096)\n"
    "  --real                  real records (Re z) instead of complex I/Q\n"
    "  --burst-peak TIME       burst peak time t_p (default 0.6us)\n"
    "  --burst-amplitude X     A_b (default 1)\n"
    "  --tail-delay TIME       t_s - t_p, when the tail starts (default 0: at the burst peak)\n"
    "  --tail-amplitude X      A_t (default 0.3)\n"
    "  --noise X               noise SD per quadrature (records, default 0.01) or sigma of the\n"
    "                          spectra (default 1)\n"
    "\n"
    "Spectra (y = baseline + H_b P_b + H_t L + noise; L Lorentzian, P_b Lorentzian or sech^2,\n"
    "both of peak 1):\n"
    "  --span FREQ             width of the frequency axis (default 800MHz)\n"
    "  --center-offset FREQ    axis centre minus reference (default -100MHz)\n"
    "  --broad-shape lorentz|sech2   shape of the burst-era line (default lorentz)\n"
    "  --burst-height X        H_b (default 100)\n"
    "  --tail-height X         H_t (default 50)\n"
    "  --baseline X            constant baseline (default 10)\n"
    "\n"
    "Exit code 2 for a usage error (including lines outside the band the sample rate holds),\n"
    "3 when a file exists (nothing is written then) or cannot be written.\n",
    NULL,
};

#define MAX_DENSITIES 10000

enum {
    O_OUT = 1, O_FORCE, O_DENS, O_RANGE, O_KIND, O_SHOTS, O_FORMAT, O_SEED, O_TEMP, O_THICK,
    O_QUIET, O_REF, O_BSHIFT, O_BSLOPE, O_BFWHM, O_BWSLOPE, O_BTAU, O_TSHIFT, O_TSLOPE, O_TFWHM,
    O_TWSLOPE, O_LO, O_RATE, O_SAMPLES, O_REAL, O_BPEAK, O_BAMP, O_TDELAY, O_TAMP, O_NOISE,
    O_SPAN, O_COFF, O_SHAPE, O_BHEIGHT, O_THEIGHT, O_BASE
};

typedef struct sim_opts {
    const char *out;
    int quiet;
    double dens[MAX_DENSITIES];
    size_t ndens;
    int have_lo, have_noise, have_samples, have_tau, have_bfwhm, have_bwslope;
    double tau, noise;
    size_t samples;
} sim_opts;

static int parse_qty(const char *opt, const char *arg, cs_dim dim, const char *def, double *out)
{
    cs_error err;
    cs_error_clear(&err);
    if (cs_quantity_parse(arg, dim, def, out, NULL, NULL, &err) != CS_OK) {
        cli_errorf("--%s '%s': %s", opt, arg, err.msg);
        return CLI_EXIT_USAGE;
    }
    return 0;
}

static int parse_num(const char *opt, const char *arg, double *out)
{
    char *end;
    errno = 0;
    double v = strtod(arg, &end);
    if (end == arg || *end || errno == ERANGE || !isfinite(v)) {
        cli_errorf("--%s '%s': expected a number", opt, arg);
        return CLI_EXIT_USAGE;
    }
    *out = v;
    return 0;
}

static int parse_count(const char *opt, const char *arg, size_t lo, size_t hi, size_t *out)
{
    char *end;
    errno = 0;
    long long v = strtoll(arg, &end, 10);
    if (end == arg || *end || errno == ERANGE || v < (long long)lo || v > (long long)hi) {
        cli_errorf("--%s '%s': expected a whole number from %zu to %zu", opt, arg, lo, hi);
        return CLI_EXIT_USAGE;
    }
    *out = (size_t)v;
    return 0;
}

/* A positive quantity. */
static int parse_pos(const char *opt, const char *arg, cs_dim dim, const char *def, double *out)
{
    double v;
    int rc = parse_qty(opt, arg, dim, def, &v);
    if (rc)
        return rc;
    if (!(v > 0)) {
        cli_errorf("--%s '%s': must be positive", opt, arg);
        return CLI_EXIT_USAGE;
    }
    *out = v;
    return 0;
}

static int parse_densities(const char *arg, sim_opts *so)
{
    size_t n = strlen(arg);
    char *copy = malloc(n + 1);
    if (!copy) {
        cli_errorf("out of memory");
        return CLI_EXIT_DATA;
    }
    memcpy(copy, arg, n + 1);
    int rc = 0;
    so->ndens = 0;
    for (char *tok = copy, *next; tok && rc == 0; tok = next) {
        next = strchr(tok, ',');
        if (next)
            *next++ = '\0';
        if (so->ndens >= MAX_DENSITIES) {
            cli_errorf("--densities: at most %d densities", MAX_DENSITIES);
            rc = CLI_EXIT_USAGE;
            break;
        }
        double v;
        rc = parse_qty("densities", tok, CS_DIM_DENSITY, "cm^-3", &v);
        if (rc == 0 && !(v >= 0)) {
            cli_errorf("--densities '%s': a density must be >= 0", tok);
            rc = CLI_EXIT_USAGE;
        }
        if (rc == 0)
            so->dens[so->ndens++] = v;
    }
    free(copy);
    return rc;
}

static int parse_range(const char *arg, sim_opts *so)
{
    const char *c1 = strchr(arg, ':');
    const char *c2 = c1 ? strchr(c1 + 1, ':') : NULL;
    char a[128], b[128];
    if (!c1 || !c2 || strchr(c2 + 1, ':') || (size_t)(c1 - arg) >= sizeof a ||
        (size_t)(c2 - c1 - 1) >= sizeof b) {
        cli_errorf("--density-range '%s': expected A:B:N, e.g. 1e13:3e14:5", arg);
        return CLI_EXIT_USAGE;
    }
    memcpy(a, arg, (size_t)(c1 - arg));
    a[c1 - arg] = '\0';
    memcpy(b, c1 + 1, (size_t)(c2 - c1 - 1));
    b[c2 - c1 - 1] = '\0';
    double lo, hi;
    size_t n;
    int rc = parse_qty("density-range", a, CS_DIM_DENSITY, "cm^-3", &lo);
    if (!rc)
        rc = parse_qty("density-range", b, CS_DIM_DENSITY, "cm^-3", &hi);
    if (!rc)
        rc = parse_count("density-range", c2 + 1, 1, MAX_DENSITIES, &n);
    if (rc)
        return rc;
    if (!(lo >= 0) || !(hi >= 0)) {
        cli_errorf("--density-range '%s': densities must be >= 0", arg);
        return CLI_EXIT_USAGE;
    }
    for (size_t i = 0; i < n; i++)
        so->dens[i] = n == 1 ? lo : lo + (hi - lo) * (double)i / (double)(n - 1);
    so->ndens = n;
    return 0;
}

static int parse_args(int argc, char **argv, sim_opts *so, cs_simulate_params *p)
{
    static const struct option longopts[] = {
        {"out", required_argument, NULL, O_OUT},
        {"force", no_argument, NULL, O_FORCE},
        {"densities", required_argument, NULL, O_DENS},
        {"density-range", required_argument, NULL, O_RANGE},
        {"kind", required_argument, NULL, O_KIND},
        {"shots", required_argument, NULL, O_SHOTS},
        {"format", required_argument, NULL, O_FORMAT},
        {"seed", required_argument, NULL, O_SEED},
        {"temperature", required_argument, NULL, O_TEMP},
        {"thickness", required_argument, NULL, O_THICK},
        {"quiet", no_argument, NULL, O_QUIET},
        {"reference", required_argument, NULL, O_REF},
        {"burst-shift", required_argument, NULL, O_BSHIFT},
        {"burst-shift-slope", required_argument, NULL, O_BSLOPE},
        {"burst-fwhm", required_argument, NULL, O_BFWHM},
        {"burst-width-slope", required_argument, NULL, O_BWSLOPE},
        {"burst-tau", required_argument, NULL, O_BTAU},
        {"tail-shift", required_argument, NULL, O_TSHIFT},
        {"tail-shift-slope", required_argument, NULL, O_TSLOPE},
        {"tail-fwhm", required_argument, NULL, O_TFWHM},
        {"tail-width-slope", required_argument, NULL, O_TWSLOPE},
        {"lo", required_argument, NULL, O_LO},
        {"sample-rate", required_argument, NULL, O_RATE},
        {"samples", required_argument, NULL, O_SAMPLES},
        {"real", no_argument, NULL, O_REAL},
        {"burst-peak", required_argument, NULL, O_BPEAK},
        {"burst-amplitude", required_argument, NULL, O_BAMP},
        {"tail-delay", required_argument, NULL, O_TDELAY},
        {"tail-amplitude", required_argument, NULL, O_TAMP},
        {"noise", required_argument, NULL, O_NOISE},
        {"span", required_argument, NULL, O_SPAN},
        {"center-offset", required_argument, NULL, O_COFF},
        {"broad-shape", required_argument, NULL, O_SHAPE},
        {"burst-height", required_argument, NULL, O_BHEIGHT},
        {"tail-height", required_argument, NULL, O_THEIGHT},
        {"baseline", required_argument, NULL, O_BASE},
        {NULL, 0, NULL, 0},
    };
    int c, rc = 0, have_dens = 0;
    double v;
    size_t sz;
    optind = 1;
    opterr = 0;
    while (rc == 0 && (c = getopt_long(argc, argv, ":", longopts, NULL)) != -1) {
        switch (c) {
        case O_OUT: so->out = optarg; break;
        case O_FORCE: p->force = 1; break;
        case O_DENS:
        case O_RANGE:
            if (have_dens) {
                cli_errorf("simulate: give the densities once (--densities or --density-range)");
                rc = CLI_EXIT_USAGE;
                break;
            }
            have_dens = 1;
            rc = c == O_DENS ? parse_densities(optarg, so) : parse_range(optarg, so);
            break;
        case O_KIND:
            if (strcmp(optarg, "record") == 0) {
                p->kind = CS_SIMULATE_RECORD;
            } else if (strcmp(optarg, "spectrum") == 0) {
                p->kind = CS_SIMULATE_SPECTRUM;
            } else {
                cli_errorf("--kind '%s': expected record or spectrum", optarg);
                rc = CLI_EXIT_USAGE;
            }
            break;
        case O_SHOTS: rc = parse_count("shots", optarg, 1, 100000, &p->shots); break;
        case O_FORMAT:
            if (strcmp(optarg, "text") == 0) {
                p->format = CS_SIMULATE_TEXT;
            } else if (strcmp(optarg, "npy") == 0) {
                p->format = CS_SIMULATE_NPY;
            } else {
                cli_errorf("--format '%s': expected text or npy", optarg);
                rc = CLI_EXIT_USAGE;
            }
            break;
        case O_SEED:
            rc = parse_count("seed", optarg, 0, 4294967295u, &sz);
            p->seed = (unsigned long)sz;
            break;
        case O_TEMP: rc = parse_pos("temperature", optarg, CS_DIM_TEMPERATURE, "K", &p->temperature_k); break;
        case O_THICK: rc = parse_pos("thickness", optarg, CS_DIM_LENGTH, NULL, &p->thickness_m); break;
        case O_QUIET: so->quiet = 1; break;
        case O_REF: rc = parse_pos("reference", optarg, CS_DIM_FREQUENCY, NULL, &p->reference_hz); break;
        case O_BSHIFT: rc = parse_qty("burst-shift", optarg, CS_DIM_FREQUENCY, NULL, &p->burst_shift0_hz); break;
        case O_BSLOPE:
            rc = parse_num("burst-shift-slope", optarg, &v);
            p->burst_shift_slope_hz_m3 = v * 1e-6;
            break;
        case O_BFWHM:
            rc = parse_pos("burst-fwhm", optarg, CS_DIM_FREQUENCY, NULL, &p->burst_fwhm0_hz);
            so->have_bfwhm = 1;
            break;
        case O_BWSLOPE:
            rc = parse_num("burst-width-slope", optarg, &v);
            p->burst_fwhm_slope_hz_m3 = v * 1e-6;
            so->have_bwslope = 1;
            break;
        case O_BTAU:
            rc = parse_pos("burst-tau", optarg, CS_DIM_TIME, NULL, &so->tau);
            so->have_tau = 1;
            break;
        case O_TSHIFT: rc = parse_qty("tail-shift", optarg, CS_DIM_FREQUENCY, NULL, &p->tail_shift0_hz); break;
        case O_TSLOPE:
            rc = parse_num("tail-shift-slope", optarg, &v);
            p->tail_shift_slope_hz_m3 = v * 1e-6;
            break;
        case O_TFWHM: rc = parse_pos("tail-fwhm", optarg, CS_DIM_FREQUENCY, NULL, &p->tail_fwhm0_hz); break;
        case O_TWSLOPE:
            rc = parse_num("tail-width-slope", optarg, &v);
            p->tail_fwhm_slope_hz_m3 = v * 1e-6;
            break;
        case O_LO:
            rc = parse_pos("lo", optarg, CS_DIM_FREQUENCY, NULL, &p->lo_hz);
            so->have_lo = 1;
            break;
        case O_RATE: rc = parse_pos("sample-rate", optarg, CS_DIM_FREQUENCY, NULL, &p->sample_rate_hz); break;
        case O_SAMPLES:
            rc = parse_count("samples", optarg, 16, (size_t)1 << 26, &so->samples);
            so->have_samples = 1;
            break;
        case O_REAL: p->is_complex = 0; break;
        case O_BPEAK: rc = parse_qty("burst-peak", optarg, CS_DIM_TIME, NULL, &p->burst_peak_s); break;
        case O_BAMP: rc = parse_num("burst-amplitude", optarg, &p->burst_amplitude); break;
        case O_TDELAY: rc = parse_qty("tail-delay", optarg, CS_DIM_TIME, NULL, &p->tail_delay_s); break;
        case O_TAMP: rc = parse_num("tail-amplitude", optarg, &p->tail_amplitude); break;
        case O_NOISE:
            rc = parse_num("noise", optarg, &so->noise);
            so->have_noise = 1;
            break;
        case O_SPAN: rc = parse_pos("span", optarg, CS_DIM_FREQUENCY, NULL, &p->span_hz); break;
        case O_COFF: rc = parse_qty("center-offset", optarg, CS_DIM_FREQUENCY, NULL, &p->spectrum_offset_hz); break;
        case O_SHAPE:
            if (strcmp(optarg, "lorentz") == 0) {
                p->broad_shape = CS_SIMULATE_LORENTZ;
            } else if (strcmp(optarg, "sech2") == 0) {
                p->broad_shape = CS_SIMULATE_SECH2;
            } else {
                cli_errorf("--broad-shape '%s': expected lorentz or sech2", optarg);
                rc = CLI_EXIT_USAGE;
            }
            break;
        case O_BHEIGHT: rc = parse_num("burst-height", optarg, &p->burst_height); break;
        case O_THEIGHT: rc = parse_num("tail-height", optarg, &p->tail_height); break;
        case O_BASE: rc = parse_num("baseline", optarg, &p->baseline0); break;
        case ':':
            cli_errorf("simulate: option '%s' needs a value", argv[optind - 1]);
            rc = CLI_EXIT_USAGE;
            break;
        default:
            cli_errorf("simulate: unknown option '%s'; see 'collshift simulate --help'", argv[optind - 1]);
            rc = CLI_EXIT_USAGE;
            break;
        }
    }
    if (rc)
        return rc;
    if (optind < argc) {
        cli_errorf("simulate: unexpected argument '%s'; see 'collshift simulate --help'", argv[optind]);
        return CLI_EXIT_USAGE;
    }
    if (!so->out) {
        cli_errorf("simulate: --out DIR is required; see 'collshift simulate --help'");
        return CLI_EXIT_USAGE;
    }
    if (!have_dens) {
        cli_errorf("simulate: no densities: give --densities LIST or --density-range A:B:N");
        return CLI_EXIT_USAGE;
    }
    if (so->have_tau && (so->have_bfwhm || so->have_bwslope)) {
        cli_errorf("simulate: --burst-tau fixes the burst width: give it without --burst-fwhm "
                   "and --burst-width-slope");
        return CLI_EXIT_USAGE;
    }
    if (so->have_noise && !(so->noise >= 0 && (p->kind == CS_SIMULATE_RECORD || so->noise > 0))) {
        cli_errorf("--noise: must be >= 0 (records) or > 0 (spectra)");
        return CLI_EXIT_USAGE;
    }
    return 0;
}

int cmd_simulate(int argc, char **argv)
{
    static sim_opts so;   /* large: the density list */
    memset(&so, 0, sizeof so);
    cs_simulate_params p = cs_simulate_default_params();
    int rc = parse_args(argc, argv, &so, &p);
    if (rc)
        return rc;
    if (!so.have_lo)
        p.lo_hz = p.reference_hz - 250e6;
    if (so.have_tau) {
        p.burst_fwhm0_hz = CS_GATEFIT_SECH_FWHM_TAU / so.tau;
        p.burst_fwhm_slope_hz_m3 = 0;
    }
    if (so.have_samples)
        p.samples = p.points = so.samples;
    if (so.have_noise) {
        if (p.kind == CS_SIMULATE_RECORD)
            p.noise_sigma = so.noise;
        else
            p.spectrum_sigma = so.noise;
    }
    p.densities_m3 = so.dens;
    p.ndensities = so.ndens;
    cs_error err;
    cs_error_clear(&err);
    if (cs_simulate_check(&p, &err) != CS_OK) {
        cli_errorf("simulate: %s", err.msg);
        return CLI_EXIT_USAGE;
    }
    size_t nfiles = 0;
    if (cs_simulate_campaign(so.out, &p, &nfiles, &err) != CS_OK) {
        rc = cli_report(&err);
        if (err.code == CS_EIO && strstr(err.msg, "already exists"))
            cli_errorf("simulate: choose another --out folder, or give --force to replace");
        return rc;
    }
    if (!so.quiet) {
        printf("wrote %zu synthetic %s file%s (invented scenario, seed %lu), manifest.csv and "
               "truth.csv to %s\n", nfiles, p.kind == CS_SIMULATE_RECORD ? "record" : "spectrum",
               nfiles == 1 ? "" : "s", p.seed, so.out);
        printf("%-14s %16s %16s %14s %14s\n", "density_cm^-3", "burst_shift_hz", "tail_shift_hz",
               "burst_fwhm_hz", "tail_fwhm_hz");
        for (size_t i = 0; i < p.ndensities; i++) {
            cs_simulate_truth t;
            cs_simulate_truth_at(&p, p.densities_m3[i], &t);
            printf("%-14.6g %16.9g %16.9g %14.9g %14.9g\n", t.density_m3 * 1e-6, t.burst_shift_hz,
                   t.tail_shift_hz, t.burst_fwhm_hz, t.tail_fwhm_hz);
        }
    }
    return 0;
}
