/* A measurement campaign: a manifest of files at known densities, each analysed by split (records)
 * or fit (spectra), weighted straight-line fits of centre (shift) and FWHM against density per era,
 * and the comparison of the slopes with the theory module's estimates.
 *
 * ---------------------------------------------------------------------------------------------
 * The manifest is comma-separated text with a header row. Columns (case-insensitive names; the
 * order is free; unknown columns are ignored; '#' lines and blank lines are skipped):
 *   file          required: the data file, relative to the manifest's folder (or absolute)
 *   density       number density: a unit in the header suffix ("density_cm^-3") or in the value
 *                 ("3e13 cm^-3"); the value's unit wins
 *   temperature   cell temperature ("temperature_degC", or "180 degC", "453 K")
 *   thickness     slab (cell) thickness ("thickness_um", or "250 nm")
 *   shot          0-based shot index inside a file of several records (default: every shot)
 *   era           "burst" or "tail": the entry measures that era only (see below)
 *   reference     reference frequency for shifts ("reference_GHz", or "9.1 GHz")
 * An empty cell means "not given". Fields follow RFC 4180: a field in double quotes may hold
 * commas and doubled quotes ("a,""b"".csv" is the name a,"b".csv); spaces around an unquoted
 * field are trimmed, those inside quotes kept. A line break inside quotes is refused (a file
 * name cannot hold one), as are text after a closing quote and a quote inside an unquoted field.
 * The density of an entry is, in this order: the manifest's density; the vapour density at the
 * manifest's temperature (cs_vapour_density, element from cs_series_params.element); the file's
 * 'density' metadata; the vapour density at the file's 'temperature' metadata. Without any of
 * them the entry fails. The reference: the manifest's column, else params.ref_hz, else the file's
 * 'reference' metadata, else none (shifts NaN).
 *
 * How an entry is analysed. Records: cs_split_run on the file's records (or the one shot named),
 * per era the weighted mean over the shots (cs_split_combine) of centre, shift, FWHM and area.
 * Spectra: cs_fit_run with the plain model params.model (default "lorentz+lorentz") plus the
 * baseline; the BROADEST component stands for the burst era and the NARROWEST for the tail era
 * (a one-component model gives the tail era, or the era of the manifest's column). With an 'era'
 * column the entry keeps only that era.
 *
 * ---------------------------------------------------------------------------------------------
 * Regression (cs_series_linfit): y = a + b x by weighted least squares (GSL gsl_fit_wlinear,
 * weights 1/sigma^2), or y = b x through the origin (gsl_fit_wmul). The errors are those the
 * stated sigma imply ((X^T W X)^-1); chi2/dof says whether those sigma explain the scatter. With
 * CS_SERIES_FIT_INFLATE the errors are multiplied by sqrt(chi2/dof) when chi2/dof > 1 (inflated
 * = 1 says it was done). Without sigma (NULL) the fit is unweighted and the errors come from the
 * scatter of the residuals (s^2 = RSS/dof), as in an ordinary least-squares fit.
 * cs_series_regress fits, per era, centre (or shift, when every point has a reference) against
 * density in cm^-3, so slopes are in Hz cm^3 and intercepts in Hz, and FWHM against density.
 *
 * Threads: cs_series_run analyses entries in parallel with OpenMP (params.threads), each thread
 * with its own gate and fit workspaces; the results do not depend on the number of threads.
 * Ownership: a cs_series comes from cs_series_manifest_load / _parse and is released with
 * cs_series_free (NULL-safe). Nothing here prints or exits. Every `cs_error *err` may be NULL. */
#ifndef CS_SERIES_H
#define CS_SERIES_H

#include <stddef.h>
#include <collshift/error.h>
#include <collshift/fit.h>
#include <collshift/io.h>
#include <collshift/model.h>
#include <collshift/split.h>
#include <collshift/theory.h>

#ifdef __cplusplus
extern "C" {
#endif

/* Outcome of one entry. */
typedef enum cs_series_status {
    CS_SERIES_PENDING = 0,    /* not analysed yet */
    CS_SERIES_OK,             /* every era the entry should measure was measured */
    CS_SERIES_PARTIAL,        /* some era was not measured (message says why) */
    CS_SERIES_FAILED          /* nothing measured: unreadable file, no density, fit error */
} cs_series_status;
/* "pending", "ok", "partial", "failed". */
const char *cs_series_status_name(cs_series_status s);

/* Where an entry's density came from. */
typedef enum cs_series_density_source {
    CS_SERIES_DENSITY_NONE = 0,
    CS_SERIES_DENSITY_MANIFEST,       /* the manifest's density column */
    CS_SERIES_DENSITY_TEMPERATURE,    /* vapour density at the manifest's temperature */
    CS_SERIES_DENSITY_META,           /* the file's 'density' metadata */
    CS_SERIES_DENSITY_META_TEMPERATURE /* vapour density at the file's 'temperature' metadata */
} cs_series_density_source;
/* "none", "manifest", "manifest temperature", "file metadata", "file temperature". */
const char *cs_series_density_source_name(cs_series_density_source s);

/* Longest at_bound text kept (longer lists end in "..."). */
#define CS_SERIES_AT_BOUND_MAX 160

/* One era's line of one entry. Numbers are NaN unless ok; an error is NaN (with ok = 1) when the
 * fit does not determine it (fit_status and at_bound say why). */
typedef struct cs_series_line {
    int ok;
    double center_hz, center_hz_err;
    double shift_hz, shift_hz_err;    /* centre - reference; NaN without a reference */
    double fwhm_hz, fwhm_hz_err;
    double area, area_err;            /* split: energy; fit: the component's area */
    /* the fit(s) behind the era, also when the era was not measured */
    size_t nfits;                     /* fits that ran: 1 for a spectrum, one per shot for records
                                         (0: none ran, fit_status is then meaningless) */
    cs_fit_status fit_status;         /* the worst of them: converged < singular covariance <
                                         not converged < model not finite */
    char at_bound[CS_SERIES_AT_BOUND_MAX]; /* parameters of the era's component (and the
                                         baseline) at a bound, "NAME:lower;NAME:upper" in model
                                         order, each name once over the shots; "" when none */
} cs_series_line;

/* One manifest row and its results. */
typedef struct cs_series_entry {
    long line;                        /* 1-based line of the manifest */
    char *file;                       /* as written */
    char *path;                       /* resolved against the manifest's folder */
    /* from the manifest (NaN / -1 when not given) */
    double density_m3;
    double temperature_K;
    double thickness_m;
    double ref_hz;
    long shot;                        /* -1: every shot */
    int era;                          /* -1: both; CS_SPLIT_BURST or CS_SPLIT_TAIL */
    /* results (cs_series_run) */
    cs_series_status status;
    char message[CS_ERROR_MSG_MAX + 64];
    int error_code;                   /* CS_* of the failure (CS_OK when none) */
    cs_kind kind;                     /* what the file held */
    size_t nshots;                    /* records analysed (0 for a spectrum) */
    double density_used_m3;           /* the density of the regression, m^-3 (NaN when none) */
    cs_series_density_source density_source;
    double ref_used_hz;               /* NaN without a reference */
    cs_series_line era_line[CS_SPLIT_NERA];
    size_t index;                     /* 0-based position among the manifest's entries */
} cs_series_entry;

/* A manifest and its entries. */
typedef struct cs_series {
    char *manifest;                   /* the manifest's path (or name), for messages */
    char *dir;                        /* folder the file names are relative to */
    size_t n;
    cs_series_entry *e;
    size_t total;                     /* entries the manifest lists (n is less after cs_series_shard) */
} cs_series;

/* Parse manifest text. name: used in messages (may be NULL); dir: folder the file names are
 * relative to (NULL: "."). Returns CS_OK and *out (caller frees with cs_series_free);
 * CS_EFORMAT (no header, no 'file' column, a row with more fields than the header, an empty file
 * name, no data rows, a quote not closed on its line, text after a closing quote, a quote inside an
 * unquoted field: then err->offset is the byte offset of the quote or text), CS_EUNIT (a value without or with a wrong unit), CS_EINVAL (a bad number,
 * shot or era; NULL text or out), CS_ERANGE (a non-positive density, temperature or thickness),
 * CS_ENOMEM. The message names the manifest and err->line its line. */
int cs_series_manifest_parse(const char *text, const char *name, const char *dir, cs_series **out,
                             cs_error *err);
/* Read and parse the manifest at path (file names relative to its folder). As above, plus CS_EIO
 * when it cannot be read. */
int cs_series_manifest_load(const char *path, cs_series **out, cs_error *err);
void cs_series_free(cs_series *s);

/* Called after each entry (from one thread at a time): done of total entries finished. */
typedef void (*cs_series_progress_fn)(size_t done, size_t total, void *ctx);
/* Called with each entry as soon as it is finished (from one thread at a time, before the
 * progress call), e.g. to journal its result; not called for entries kept (keep_finished). */
typedef void (*cs_series_entry_fn)(const cs_series_entry *e, void *ctx);
/* Asked before each entry starts; nonzero stops the run: no further entry starts (entries
 * already running finish and are reported), the rest stay CS_SERIES_PENDING. Must be cheap and
 * safe to call from several threads (e.g. reading a volatile sig_atomic_t set by a handler). */
typedef int (*cs_series_stop_fn)(void *ctx);

/* Tunables (start from cs_series_params_default). Text fields are borrowed. */
typedef struct cs_series_params {
    const char *model;                /* spectra: plain model (default "lorentz+lorentz") */
    cs_baseline_kind baseline;        /* spectra: baseline (default CS_BASELINE_LINEAR) */
    cs_fit_parameters fit;            /* spectra: solver settings (cs_fit_default_parameters) */
    cs_split_params split;            /* records (cs_split_params_default) */
    cs_load_options load;             /* loading (cs_load_options_init) */
    double ref_hz;                    /* NaN (default): manifest column or file metadata */
    const char *element;              /* vapour-pressure element ("Rb"...); NULL: none */
    int threads;                      /* >= 1 (default 1) */
    cs_series_progress_fn progress;   /* NULL: none */
    void *progress_ctx;
    cs_series_entry_fn on_entry;      /* NULL: none */
    void *entry_ctx;
    cs_series_stop_fn stop;           /* NULL: never stop */
    void *stop_ctx;
    int keep_finished;                /* 1: entries whose status is not CS_SERIES_PENDING keep
                                         their results and are not analysed again (resuming) */
} cs_series_params;

void cs_series_params_default(cs_series_params *p);

/* 1 when this build runs entries in parallel (OpenMP), else 0 (threads are then ignored). */
int cs_series_parallel_available(void);

/* Analyse every entry (their results are overwritten; with p->keep_finished only the entries
 * still CS_SERIES_PENDING). Returns CS_OK when every entry is CS_SERIES_OK; CS_ENOCONV when some
 * entry is partial or failed (its status, error_code and message say why; the others hold their
 * results), or when p->stop stopped the run (the entries not analysed are CS_SERIES_PENDING with
 * NaN results; the message says how many); CS_EINVAL (NULL s or p, threads < 1, a model that
 * cannot be built); CS_ENOMEM. */
int cs_series_run(cs_series *s, const cs_series_params *p, cs_error *err);

/* Number of entries of s whose status is st (0 for NULL s). */
size_t cs_series_count(const cs_series *s, cs_series_status st);

/* ---- shards: one campaign over several machines ------------------------------------------ */

/* Parse "K/N" (whole numbers, 1 <= K <= N <= 1000000) into *k and *n. Returns CS_OK or CS_EINVAL
 * (with a message saying what is wrong). */
int cs_series_shard_parse(const char *text, size_t *k, size_t *n, cs_error *err);
/* Keep shard K of N: the entries whose 0-based manifest position i has i % N == K - 1 (every N-th
 * entry starting at the K-th), in manifest order; the others are released. s->total is kept. A
 * shard may be empty (K > s->total). Returns CS_OK or CS_EINVAL (NULL s, K < 1, K > N). */
int cs_series_shard(cs_series *s, size_t k, size_t n, cs_error *err);
/* Combine shards (each a cs_series whose entries carry their manifest position 'index' and whose
 * 'total' is the manifest's number of entries) into one series with every entry, in manifest
 * order, as an unsharded run holds them (entries are deep-copied; manifest and dir from parts[0]).
 * Returns CS_OK and *out (caller frees); CS_EDATA when the parts disagree on total, an entry is in
 * two parts, an index is out of range, or some entry is in no part (the message names the first
 * few missing entries and their manifest lines when known); CS_EINVAL (NULL arguments, no
 * parts); CS_ENOMEM. */
int cs_series_merge(const cs_series *const *parts, size_t nparts, cs_series **out, cs_error *err);

/* ---- straight lines ----------------------------------------------------------------------- */

#define CS_SERIES_FIT_ORIGIN 1u   /* y = b x (no intercept) */
#define CS_SERIES_FIT_INFLATE 2u  /* errors x sqrt(chi2/dof) when chi2/dof > 1 */

typedef struct cs_series_linear {
    size_t n;                         /* points used */
    size_t dof;                       /* n - 2 (n - 1 through the origin) */
    int through_origin;
    int weighted;                     /* 0: sigma was NULL (errors from the scatter) */
    int inflated;                     /* 1: errors were multiplied by sqrt(chi2/dof) */
    double slope, slope_err;
    double intercept, intercept_err;  /* 0 and 0 through the origin */
    double cov;                       /* covariance of intercept and slope (errors as reported) */
    double chi2;                      /* weighted sum of squared residuals (unweighted: RSS) */
    double redchi2;                   /* chi2 / dof; NaN when dof = 0 */
} cs_series_linear;

/* Fit n points (x, y, sigma); points with a non-finite x or y, or (weighted) a sigma that is not
 * finite and > 0, are left out. sigma NULL: unweighted (see the top). flags: CS_SERIES_FIT_*.
 * Returns CS_OK; CS_EDATA when fewer than 2 usable points (1 through the origin) or x does not
 * vary (then *out has n set and NaN numbers); CS_EINVAL for NULL x, y or out; CS_ENOMEM. */
int cs_series_linfit(const double *x, const double *y, const double *sigma, size_t n,
                     unsigned flags, cs_series_linear *out, cs_error *err);

/* What a regression fits against density. */
typedef enum cs_series_quantity {
    CS_SERIES_Q_CENTER = 0,           /* centre, or shift when every point has a reference */
    CS_SERIES_Q_FWHM = 1
} cs_series_quantity;
#define CS_SERIES_NQ 2
/* "center", "fwhm". */
const char *cs_series_quantity_name(cs_series_quantity q);

/* One regression: era x quantity, x = density in cm^-3, slope in Hz cm^3, intercept in Hz. */
typedef struct cs_series_regression {
    cs_split_era era;
    cs_series_quantity quantity;
    int relative;                     /* 1: y was the shift (centre - reference), 0: the centre */
    int status;                       /* CS_OK, or CS_EDATA (too few points: numbers NaN) */
    size_t left_out;                  /* measured points left out because their error is undefined
                                         (weighted fits never give them a made-up weight) */
    cs_series_linear fit;
} cs_series_regression;

/* Fill out[era * CS_SERIES_NQ + quantity] (CS_SPLIT_NERA x CS_SERIES_NQ entries) from the
 * entries' results: every measured line (ok) with a density; one whose error of the fitted
 * quantity is not finite and > 0 is left out and counted in left_out. flags: CS_SERIES_FIT_*. Returns CS_OK (also when some regression has too few
 * points: its status says so) or CS_EINVAL. */
int cs_series_regress(const cs_series *s, unsigned flags, cs_series_regression *out);

/* ---- theory comparison -------------------------------------------------------------------- */

/* A measured slope beside an estimate. */
typedef struct cs_series_compare {
    cs_split_era era;
    cs_series_quantity quantity;
    cs_theory_quantity estimate;      /* CS_TH_LL_COEF, CS_TH_SLAB_COEF or CS_TH_SELF_COEF */
    const char *name;                 /* its JSON name, e.g. "lorentz_lorenz_coefficient_hz_cm3" */
    double theory_hz_cm3;             /* the estimate */
    double measured_hz_cm3, measured_hz_cm3_err;
    double ratio;                     /* measured / theory */
    double nsigma;                    /* (measured - theory) / measured error */
} cs_series_compare;

#define CS_SERIES_COMPARE_MAX (CS_SPLIT_NERA * 3)

/* Compare the slopes of reg (CS_SPLIT_NERA x CS_SERIES_NQ, from cs_series_regress) with the
 * estimates est (cs_theory_predict): each era's centre slope with the Lorentz-Lorenz and (when
 * est has it, i.e. a thickness was given) the slab LL+CLS coefficient, each era's FWHM slope with
 * the self-broadening coefficient. Regressions without numbers and estimates that are not
 * CS_EST_OK are left out. Writes up to CS_SERIES_COMPARE_MAX rows to out; returns their number. */
size_t cs_series_compare_theory(const cs_series_regression *reg, const cs_theory_estimates *est,
                                cs_series_compare *out);

#ifdef __cplusplus
}
#endif
#endif /* CS_SERIES_H */
