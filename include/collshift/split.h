/* The burst-era / tail-era pipeline: from one or more time records to two fitted lines, their
 * collective shift, independent cross-checks, shot statistics and a gate sweep.
 *
 * ---------------------------------------------------------------------------------------------
 * What cs_split_run does with each record (shot):
 *   1. envelope and burst detection (gate.h); without a significant burst there are no automatic
 *      gates and the shot's status is CS_SPLIT_NO_BURST (never invented numbers);
 *   2. the early (burst-era) and late (tail-era) gates: automatic (cs_gate_auto: early =
 *      "peak-2w:4w" with the early window, hann by default; late = "end+3w:rest" with the late
 *      window, RECTANGULAR by default, because the decaying tail sits at the late gate's start,
 *      where a taper would weight it down to nothing), or given as gate specifications in the
 *      grammar of gate.h ("early=peak-1w:3w:hann", "late=2us:rest:rect");
 *   3. each era fitted with its model. A model made of gate-aware components ("burst",
 *      "decay", "burst+decay"; gatefit.h) is fitted to the gate's samples with the exact
 *      Gaussian likelihood of the gated spectrum (default: burst era "burst", tail era "decay");
 *      a model made of plain profiles ("sech2", "lorentz", "voigt+lorentz"; model.h) is fitted,
 *      plus a constant floor, to the gated power spectral density (cs_split_fit.gate_aware says
 *      which). The era's line is one component of the model (see "which component" below);
 *   4. the shifts: each era's centre minus the reference frequency (when one is known), and the
 *      era shift = burst centre - tail centre. The two eras come from disjoint gates, i.e.
 *      independent samples of white noise, so the errors add in quadrature:
 *          era_shift_hz_err = sqrt(burst.center_hz_err^2 + tail.center_hz_err^2);
 *   5. independent estimates: (a) the power spectrum of the WHOLE record fitted with a
 *      broad + narrow plain model (default "sech2+lorentz" plus a constant floor): its broadest
 *      component stands for the burst era and its narrowest for the tail era; (b) the matrix
 *      pencil (pencil.h) of the tail gate's samples up to the point where the envelope fades
 *      into the noise (automatic order up to CS_SPLIT_PENCIL_MAX), whose strongest decaying
 *      component stands for the tail era and also starts the tail era's gate-aware fit when
 *      that is a single decay (its starting values only: the fit's optimum is its own). For the
 *      centre and the FWHM of each era the agreement with the gated fit is reported as
 *          z = |x1 - x2| / sqrt(s1^2 + s2^2)
 *      (the difference in combined standard errors), flagged when z > agree_nsigma (3). The
 *      whole record shares its samples with the gates, so z is a conservative (small) measure of
 *      disagreement: a large z means a real inconsistency of the methods, not noise;
 *   6. the gate sweep (optional): the late gate's start stepped from end + a to end + b, and the
 *      early gate's width stepped from c to d (centred where the early gate is centred), each era
 *      refitted at every step (a gate-aware fit starting from the default gates' values, and from
 *      automatic starting values when that does not converge); the deviation of each step from
 *      the default gates is reported in the step's own standard errors,
 *      (x_step - x_default) / s_step. The fits share most of their samples, so deviations beyond
 *      1 - 2 mean the answer depends on the gate.
 * With several shots the per-shot lines are combined per era (cs_split_stat: weighted mean,
 * its error, the unweighted scatter and chi2/dof about the weighted mean). With power_average
 * the shots' gated spectra are also averaged (cs_gate_spectrum_shots, power) through the first
 * shot's gates and the averaged spectra fitted with plain profiles (a gate-aware time-domain fit
 * needs the samples of one shot), reported as cs_split_result.average.
 *
 * ---------------------------------------------------------------------------------------------
 * Area. For every method the area of a line is an ENERGY, the integral of the component's power
 * spectrum, which by Parseval's theorem is the time integral of its intensity, in
 * (signal unit)^2 s:
 *   gate-aware decay  E = integral_{t_g}^{inf} |m(t)|^2 dt = A^2 / Gamma (complex record;
 *                     A^2 / (2 Gamma) for a real one: the mean of cos^2 is 1/2), the energy
 *                     from the gate's first sample on, A the amplitude there;
 *   gate-aware burst  E = integral |A sech((t - t_p)/tau)|^2 dt = 2 A^2 tau (complex;
 *                     A^2 tau real), the burst's whole energy;
 *   plain profiles    E = (area of the fitted profile on the gated PSD) * dt * sum w^2: the PSD
 *                     integrates to the window-weighted mean power (gate.h), so this is the
 *                     window-weighted energy sum_j w_j^2 |x_j|^2 dt of the line in the gate
 *                     (for a rectangular gate, the line's energy in the gate).
 * The error is first-order propagation through the fit's covariance (gate-aware:
 * dE/dA = 2 E / A, dE/dGamma = -E / Gamma, dE/dtau = E / tau, with the A-Gamma or A-tau
 * covariance; plain: the area's error times dt sum w^2).
 *
 * ---------------------------------------------------------------------------------------------
 * Which component is the era's line. Burst era: among the components of kind "burst" (plain:
 * profile "sech2"), or all components when there is none, the one of largest energy. Tail era:
 * likewise among "decay" components (plain: "lorentz"). Whole record: the broadest component is
 * the burst era's, the narrowest the tail era's.
 *
 * A line is "found" only when it stands out of the noise: its significance, amplitude / error
 * (gate-aware) or area / error (plain), must reach sqrt(2 ln(m / p)) with m the samples in the
 * gate and p = detect_fap (default 1e-3): for white noise alone the largest of m independent
 * periodogram bins exceeds that level with probability about p (the squared significance of a
 * tone fitted to noise is 2 x an exponential variate per trial frequency; common practice).
 *
 * ---------------------------------------------------------------------------------------------
 * Plain profile fits of power spectra (the whole record, power-averaged gates, plain era
 * models). A bin of the periodogram of a line plus white noise scatters like a noncentral
 * chi-square variate of two degrees of freedom: with F the noise floor and S the line's power in
 * the bin its variance is F^2 + 2 F S (F^2 alone, SD = mean, on the floor), divided by k for a
 * power average of k shots. The fit therefore runs first with equal weights (the fit module's
 * noise weighting) and then with sigma_i^2 = (F_i^2 + 2 F_i S_i) / k taken from the previous
 * pass's floor (the fitted baseline) and lines, renewed until the floor settles (at most four
 * weighted passes). A taper and zero-padding correlate neighbouring bins, so the covariance is
 * multiplied by enbw / df, the number of (padded) bins per independent bin (pad x 1 for rect,
 * pad x 1.5 for hann; common practice), and, when chi2/dof of the last pass exceeds 1 (the
 * profiles do not describe the gated spectrum), by chi2/dof as well (err_scale holds the product
 * of the square roots). These errors are approximate, and a plain profile fitted to a gated
 * spectrum also carries the gate's bias (a taper over a burst that fills its gate broadens the
 * line; a rectangular gate that cuts a decay adds its sinc^2): the gate-aware fits have neither.

 * ---------------------------------------------------------------------------------------------
 * Ownership: a cs_split_result comes from cs_split_run and is released with
 * cs_split_result_free (NULL-safe); everything inside belongs to it. Records, parameters and
 * the workspace are borrowed. Nothing here prints or exits. Every function that takes a
 * `cs_error *err` accepts NULL. */
#ifndef CS_SPLIT_H
#define CS_SPLIT_H

#include <stddef.h>
#include <collshift/error.h>
#include <collshift/fit.h>
#include <collshift/gate.h>
#include <collshift/gatefit.h>
#include <collshift/io.h>
#include <collshift/model.h>
#include <collshift/pencil.h>
#include <collshift/window.h>

#ifdef __cplusplus
extern "C" {
#endif

/* The two eras. */
typedef enum cs_split_era {
    CS_SPLIT_BURST = 0,   /* early gate: the superradiant burst */
    CS_SPLIT_TAIL = 1     /* late gate: the slow tail */
} cs_split_era;
#define CS_SPLIT_NERA 2
/* "burst" / "tail". */
const char *cs_split_era_name(cs_split_era e);

/* Longest model text and gate text kept. */
#define CS_SPLIT_TEXT_MAX 128
/* Most pencil components kept per shot; the pencil's automatic order is capped at this many
 * (twice this for real records, whose lines come as +- pairs). */
#define CS_SPLIT_PENCIL_MAX 4

/* Outcome of one era, of one shot, or of a whole run (the worst of its parts). */
typedef enum cs_split_status {
    CS_SPLIT_OK = 0,          /* measured */
    CS_SPLIT_NO_BURST,        /* no significant burst: no automatic gates, nothing measured */
    CS_SPLIT_NO_GATE,         /* the gate cannot be placed (the record ends too soon after the
                                 burst, a gate outside the record) */
    CS_SPLIT_NO_LINE,         /* the fit found no line above the noise in the gate */
    CS_SPLIT_NOT_CONVERGED,   /* the fit did not converge (or its errors are undetermined) */
    CS_SPLIT_FAILED           /* the data could not be analysed (message says why) */
} cs_split_status;
/* "ok", "no burst", "no gate", "no line above noise", "not converged", "failed". */
const char *cs_split_status_name(cs_split_status s);

/* One line as one method measured it. Every number is NaN unless `ok`. */
typedef struct cs_split_line {
    int ok;                              /* 1: the numbers were measured */
    double center_hz, center_hz_err;     /* absolute centre (LO included) */
    double fwhm_hz, fwhm_hz_err;         /* FWHM of the line's power spectrum */
    double area, area_err;               /* energy, (signal unit)^2 s (see the top) */
    double shift_hz, shift_hz_err;       /* center - reference; NaN without a reference */
} cs_split_line;

/* A stepped range of the gate sweep: n values from `from` to `to` (n = 1: `from` only; n = 0:
 * off), in burst widths (in_w = 1: multiples of the burst's FWHM duration) or seconds. */
typedef struct cs_split_range {
    double from, to;
    int in_w;
    size_t n;
} cs_split_range;

typedef struct cs_split_sweep {
    cs_split_range late_start;    /* the late gate's start, measured from the burst's end */
    cs_split_range early_width;   /* the early gate's length, centred on its centre */
} cs_split_sweep;

/* Defaults used by "auto": late start 1w .. 6w in 6 steps, early width 2w .. 6w in 5 steps. */
void cs_split_sweep_default(cs_split_sweep *s);
/* Parse "auto", or comma-separated items KEY=FROM:TO:N with KEY late-start or early-width and
 * FROM, TO either NUMBERw (burst widths) or times with a unit ("50ns"), both of the same kind;
 * N from 1 to 1000. An item not given is off (n = 0), except in "auto". Example:
 * "late-start=1w:6w:11,early-width=2w:6w:5". Returns CS_OK; CS_EINVAL (syntax: the message quotes
 * the item), CS_EUNIT (a time without unit), CS_ERANGE (N out of range, a non-positive width,
 * FROM > TO). */
int cs_split_sweep_parse(const char *text, cs_split_sweep *s, cs_error *err);
/* Write s back in the syntax above (parses to the same sweep). Returns buf. */
char *cs_split_sweep_format(const cs_split_sweep *s, char *buf, size_t n);

/* Tunables (start from cs_split_params_default). Text fields are borrowed and may be NULL. */
typedef struct cs_split_params {
    const char *gate_early;       /* early gate specification (gate.h grammar, any NAME); NULL:
                                     automatic */
    const char *gate_late;        /* late gate specification; NULL: automatic */
    cs_window early_window;       /* window of the automatic early gate and of specifications
                                     that name none (default hann) */
    cs_window late_window;        /* window of the automatic late gate and of a late
                                     specification that names none (default rect) */
    cs_window whole_window;       /* window of the whole-record spectrum (default rect: see
                                     the note in src/split.c) */
    size_t pad;                   /* zero padding of every spectrum, >= 1 (default 2) */
    double lo_hz;                 /* NaN (default): the record's 'lo' metadata, else 0 */
    double ref_hz;                /* NaN (default): the record's 'reference' metadata, else
                                     no reference (shifts NaN) */
    const char *burst_model;      /* burst era (default "burst") */
    const char *tail_model;       /* tail era (default "decay") */
    const char *burst_plain;      /* plain model of the burst era when spectra must be fitted
                                     (power average) and burst_model is gate-aware (default
                                     "sech2") */
    const char *tail_plain;       /* likewise for the tail era (default "lorentz") */
    const char *whole_model;      /* whole-record model (default "sech2+lorentz"); NULL or ""
                                     = no whole-record estimate */
    size_t whole_block;           /* bins averaged into one fitted point of the whole-record
                                     band: 0 (default) automatic (about 1024 blocks, each at
                                     most 1/12 of the narrowest fitted line; src/split_fit.c),
                                     1 every bin, K blocks of K bins */
    cs_baseline_kind baseline;    /* floor of every plain fit (default CS_BASELINE_CONST) */
    cs_gatefit_noise noise;       /* gate-aware fits' noise (gatefit.h; default residuals) */
    double noise_sd;              /* CS_GATEFIT_NOISE_GIVEN: sigma per real component; 0 = the
                                     record's noise floor, sqrt(floor_raw / 2) of its envelope
                                     (the quiet stretch) */
    double burst_min_rise;        /* a burst must rise: (peak - half_rise) >= this x
                                     (half_fall - peak), and its onset must not be clipped at the
                                     record's start; else the shot has no burst (a step-on
                                     decay or a record that starts at its brightest is a tail
                                     without a burst; its ratio comes out near 0.25). Default 0.4
                                     (sech^2: 1); 0 = off */
    int pencil;                   /* 1 (default): matrix-pencil estimate of the tail gate */
    int power_average;            /* 1: also power-average the shots' gated spectra */
    cs_split_sweep sweep;         /* default: off (n = 0 for both) */
    double agree_nsigma;          /* agreement flag threshold (default 3) */
    double detect_fap;            /* false-alarm probability of a line (default 1e-3), (0, 1) */
    cs_envelope_params envelope;  /* defaults of gate.h */
    cs_burst_params burst;        /* defaults of gate.h */
} cs_split_params;

void cs_split_params_default(cs_split_params *p);

/* One era's fit. */
typedef struct cs_split_fit {
    cs_split_status status;
    char message[CS_ERROR_MSG_MAX];       /* why, when status is not OK ("" otherwise) */
    int gate_aware;                       /* 1: gatefit.h; 0: plain profiles on the gated PSD */
    char model[CS_SPLIT_TEXT_MAX];        /* the model as fitted */
    char spec[CS_SPLIT_TEXT_MAX];         /* the gate as specified ("early=peak-2w:4w:hann") */
    int gate_ok;                          /* 1 when `gate` was resolved */
    cs_gate gate;                         /* the gate as resolved */
    size_t first, m;                      /* the gate's samples in the record */
    size_t component;                     /* 0-based index of the era's line in the model */
    cs_split_line line;
    double significance;                  /* amplitude / error or area / error of the line */
    double significance_min;              /* the level it had to reach */
    /* plain fits: the spectrum fitted */
    double fmin_hz, fmax_hz;              /* frequency range fitted (whole record: the band around the lines, see split_fit.c) */
    size_t nfft, nshots;
    double df_hz, enbw_hz, err_scale;     /* bin, ENBW, factor applied to the errors
                                             (sqrt(enbw/df) x sqrt(chi2/dof) when > 1) */
    double energy_scale;                  /* dt sum w^2: PSD area -> energy */
    size_t block;                         /* bins averaged into one fitted point (the whole
                                             record's band, see split_fit.c); 1: none */
    /* the fit itself (owned; at most one of the two, NULL when no fit ran) */
    cs_gatefit_result *gfit;
    cs_model *pmodel;
    cs_fit_result *pfit;
} cs_split_fit;

/* Agreement of an independent estimate with the gated fit of an era. */
typedef struct cs_split_agree {
    double z_center;                      /* |dc| / sqrt(s1^2 + s2^2); NaN when not computable */
    double z_fwhm;
    int flagged;                          /* 1 when either z exceeds agree_nsigma */
} cs_split_agree;

/* One step of the gate sweep. */
typedef enum cs_split_sweep_kind {
    CS_SPLIT_SWEEP_LATE_START = 0,
    CS_SPLIT_SWEEP_EARLY_WIDTH = 1
} cs_split_sweep_kind;
/* "late_start" / "early_width". */
const char *cs_split_sweep_kind_name(cs_split_sweep_kind k);

typedef struct cs_split_sweep_row {
    cs_split_sweep_kind kind;
    cs_split_era era;                     /* the era refitted (late_start: tail; early_width:
                                             burst) */
    double value;                         /* the stepped value, in w or s as given */
    int in_w;
    cs_gate gate;                         /* the gate of this step (start_s 0 etc. when the
                                             status says it could not be placed) */
    cs_split_status status;
    cs_split_line line;
    double dev_center, dev_fwhm;          /* (x - x_default) / s_step; NaN when not computable */
} cs_split_sweep_row;

/* The results of one record. */
typedef struct cs_split_shot {
    char *source;                         /* the record's source (file name) or "" */
    size_t shot;                          /* its shot index in the file */
    cs_split_status status;               /* the worst of the eras' */
    char message[CS_ERROR_MSG_MAX + 64];  /* the first failure's message, "" when OK */
    int is_complex;
    double lo_hz, ref_hz;                 /* ref_hz NaN when unknown */
    int lo_from_meta, ref_from_meta;      /* 1 when taken from the record's metadata */
    cs_burst burst;
    double noise_floor;                   /* envelope floor_raw: E|noise|^2 in the quiet region */
    cs_split_fit era[CS_SPLIT_NERA];
    double era_shift_hz, era_shift_hz_err;   /* burst - tail; NaN unless both eras OK */
    /* independent estimates */
    cs_split_fit whole;                   /* whole-record fit (status NO_GATE when switched off) */
    cs_split_line whole_line[CS_SPLIT_NERA];  /* its broadest and narrowest components */
    int pencil_status;                    /* CS_OK, or why the pencil gave nothing (CS_EDATA
                                             also when it found no decaying component) */
    size_t pencil_first, pencil_count;    /* samples analysed */
    size_t pencil_order;
    size_t npencil;
    cs_split_line pencil[CS_SPLIT_PENCIL_MAX];  /* decaying components, strongest first; [0]
                                             stands for the tail era (areas NaN) */
    cs_split_agree agree_whole[CS_SPLIT_NERA];
    cs_split_agree agree_pencil;          /* tail era only */
    /* gate sweep */
    size_t nsweep;
    cs_split_sweep_row *sweep;
    double sweep_max_dev[CS_SPLIT_NERA][2];   /* max |dev| per era of centre [0] and FWHM [1];
                                                 NaN without steps */
} cs_split_shot;

/* Shots combined: weighted mean (weights 1/err^2), its error 1/sqrt(sum of weights), the
 * unweighted standard deviation of the values (n - 1 in the denominator) and
 * chi2 = sum ((x - mean)/err)^2 with n - 1 degrees of freedom. redchi2 >> 1 says the quoted
 * errors do not explain the shot-to-shot scatter. Fields are NaN (n, dof 0) when fewer than one
 * (two, for sd and chi2) shots have the quantity. */
typedef struct cs_split_stat {
    size_t n;
    double mean, mean_err;
    double sd;
    double chi2;
    size_t dof;
    double redchi2;
    double p_value;                       /* upper tail of chi2 with dof degrees of freedom */
} cs_split_stat;

/* Combine n values with their standard errors (entries with a non-finite value or an error
 * that is not finite and > 0 are skipped). Returns CS_OK; CS_EDATA when none is usable (*st
 * then has n = 0 and NaN fields); CS_EINVAL for NULL arguments. */
int cs_split_combine(const double *x, const double *err, size_t n, cs_split_stat *st);

/* |a - b| / sqrt(ea^2 + eb^2); NaN when a value or error is not finite or both errors are 0. */
double cs_split_agreement(double a, double ea, double b, double eb);

typedef struct cs_split_result {
    cs_split_status status;               /* the worst over the shots (and the average) */
    size_t nshots;
    cs_split_shot *shots;
    /* combined over the shots with status OK for that quantity */
    cs_split_stat center[CS_SPLIT_NERA];
    cs_split_stat fwhm[CS_SPLIT_NERA];
    cs_split_stat shift[CS_SPLIT_NERA];   /* n = 0 without a reference */
    cs_split_stat era_shift;
    /* power average (NULL unless params.power_average): plain fits of the averaged gated
       spectra through the first shot's gates; its pencil and sweep are not computed */
    cs_split_shot *average;
} cs_split_result;

void cs_split_result_free(cs_split_result *r);

/* Run the pipeline on nrec >= 1 records (borrowed; several shots of a file, or of several
 * files). ws: a gate workspace (borrowed; NULL: a temporary one). p NULL = defaults.
 * On return *out holds a result whenever the return is CS_OK or CS_ENOCONV (caller frees).
 * Returns
 *   CS_OK       every shot measured both eras (status CS_SPLIT_OK);
 *   CS_ENOCONV  some shot (or the average) was not measured: no burst, no gate, no line above
 *               the noise, a fit that did not converge; the statuses and messages say which,
 *               and the numbers of what was not measured are NaN;
 *   CS_EINVAL   NULL records or out, nrec 0, invalid parameters (a model that is neither
 *               gate-aware nor plain, a bad gate text, pad 0, agree_nsigma <= 0, detect_fap
 *               outside (0, 1), a negative noise_sd or burst_min_rise);
 *   CS_EDATA    a record that cannot be analysed at all (fewer than 16 samples, non-finite
 *               samples, dt <= 0); with power_average, shots of different kind or dt;
 *   CS_ENOMEM; CS_EUNSUP (FFTW could not plan).
 * *err describes the first failure (for CS_ENOCONV: of the first shot that failed). */
int cs_split_run(cs_gate_workspace *ws, cs_record *const *recs, size_t nrec,
                 const cs_split_params *p, cs_split_result **out, cs_error *err);

#ifdef __cplusplus
}
#endif
#endif /* CS_SPLIT_H */
