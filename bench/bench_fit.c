/* Benchmark: fits per second of a Voigt + Lorentzian + linear baseline on 2048 points, on 1 and 2
 * threads, with the median time and iteration count; with and without automatic starting values.
 *
 * usage: bench_fit [--fits N] [--smoke] [--start generic|guess] [--threads 1|2] [--verbose]
 * Prints one JSON object per line (--start and --threads run only that case, e.g. under
 * callgrind; --verbose prints every fit that did not converge to stderr). The spectra are synthetic (fixed seed): a broad Voigt and a
 * narrow Lorentzian 60 MHz apart on a sloping baseline with Gaussian noise of known sigma.
 * A last line ("fit_floor", when one thread ran) measures what no fit with these engines goes
 * below: one evaluation of the model with its Jacobian at the 2048 points, the model alone,
 * libcerf's w_of_z at the Voigt's 2048 arguments, and the median number of evaluations (each with
 * its Jacobian) the fits took times the first. */
#include <collshift/fit.h>
#include <collshift/model.h>

#include <cerf.h>
#include <complex.h>
#include <gsl/gsl_randist.h>
#include <gsl/gsl_rng.h>
#include <math.h>
#include <pthread.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

#define NPTS 2048

static double now(void)
{
    struct timespec ts;
    clock_gettime(CLOCK_MONOTONIC, &ts);
    return (double)ts.tv_sec + 1e-9 * (double)ts.tv_nsec;
}

static int cmp(const void *a, const void *b)
{
    double x = *(const double *)a, y = *(const double *)b;
    return (x > y) - (x < y);
}

typedef struct job {
    size_t nfits;
    int guess;              /* 1: automatic starting values for every fit */
    const double *start;    /* guess=0: this generic start (from one guess on another spectrum) */
    unsigned long seed;
    double *times;          /* nfits */
    double *iters;
    double *evals;          /* model evaluations (each with its Jacobian) per fit */
    int failed;
    int verbose;
} job;

static void make_spectrum(gsl_rng *r, double *x, double *y, double *s)
{
    const cs_profile_type *v = cs_profile_find("voigt"), *l = cs_profile_find("lorentz");
    double pv[4] = {-30e6, 150e6, 200e6, 1.0e9}, pl[3] = {30e6, 25e6, 0.3e9};
    for (size_t i = 0; i < NPTS; i++) {
        x[i] = -1.5e9 + 3e9 * (double)i / (NPTS - 1);
        y[i] = 20.0 + 2e-9 * x[i];
    }
    cs_profile_eval(v, pv, x, NPTS, y);
    cs_profile_eval(l, pl, x, NPTS, y);
    for (size_t i = 0; i < NPTS; i++) {
        s[i] = 1.0;
        y[i] += gsl_ran_gaussian(r, s[i]);
    }
}

/* One spectrum from its own generator with this seed. */
static void seeded_spectrum(unsigned long seed, double *x, double *y, double *s)
{
    gsl_rng *r = gsl_rng_alloc(gsl_rng_mt19937);
    gsl_rng_set(r, seed);
    make_spectrum(r, x, y, s);
    gsl_rng_free(r);
}

static void *run(void *arg)
{
    job *j = arg;
    double y[NPTS], s[NPTS], xs[NPTS];
    gsl_rng *r = gsl_rng_alloc(gsl_rng_mt19937);
    gsl_rng_set(r, j->seed);
    cs_fit_workspace *ws = cs_fit_alloc(NPTS, 16);
    cs_error err;
    cs_fit_parameters par = cs_fit_default_parameters();
    par.guess = j->guess;
    for (size_t k = 0; k < j->nfits; k++) {
        make_spectrum(r, xs, y, s);
        cs_model *m = cs_model_alloc("voigt+lorentz", CS_BASELINE_LINEAR, CS_MODEL_SUM, &err);
        if (!j->guess)
            cs_model_set_values(m, j->start);
        cs_fit_result *res = NULL;
        double t0 = now();
        int rc = cs_fit_run(ws, m, xs, y, s, NULL, NPTS, &par, &res, &err);
        j->times[k] = now() - t0;
        j->iters[k] = res ? (double)res->niter : 0;
        j->evals[k] = res ? (double)res->nfev : 0;
        if (rc != CS_OK || !res || res->status != CS_FIT_CONVERGED) {
            j->failed++;
            if (j->verbose)
                fprintf(stderr, "bench_fit: seed %lu fit %zu: %s (%s after %zu iterations)\n", j->seed, k,
                        res ? cs_fit_status_name(res->status) : "no result", res ? cs_fit_stop_name(res->stop) : "-",
                        res ? res->niter : (size_t)0);
        }
        cs_fit_result_free(res);
        cs_model_free(m);
    }
    cs_fit_free(ws);
    gsl_rng_free(r);
    return NULL;
}

static void report(const char *label, int threads, job *jobs, double wall, double *median_evals)
{
    size_t total = 0;
    int failed = 0;
    for (int t = 0; t < threads; t++) {
        total += jobs[t].nfits;
        failed += jobs[t].failed;
    }
    double *all = malloc(total * sizeof *all), *it = malloc(total * sizeof *it), *ev = malloc(total * sizeof *ev);
    size_t k = 0;
    for (int t = 0; t < threads; t++)
        for (size_t i = 0; i < jobs[t].nfits; i++, k++) {
            all[k] = jobs[t].times[i];
            it[k] = jobs[t].iters[i];
            ev[k] = jobs[t].evals[i];
        }
    qsort(all, total, sizeof *all, cmp);
    qsort(it, total, sizeof *it, cmp);
    qsort(ev, total, sizeof *ev, cmp);
    printf("{\"bench\":\"fit\",\"model\":\"voigt+lorentz+linear\",\"points\":%d,\"start\":\"%s\",\"threads\":%d,"
           "\"fits\":%zu,\"failed\":%d,\"median_ms\":%.3f,\"fits_per_s\":%.1f,\"median_iterations\":%.0f,"
           "\"median_evaluations\":%.0f}\n",
           NPTS, label, threads, total, failed, 1e3 * all[total / 2], (double)total / wall, it[total / 2], ev[total / 2]);
    if (threads == 1)
        *median_evals = ev[total / 2];
    free(all);
    free(it);
    free(ev);
}

/* Median over `reps` batches of the seconds one call of what `what` selects takes: 0 the model with
 * its Jacobian (what every evaluation of a fit computes), 1 the model alone, 2 libcerf's w_of_z at
 * the Voigt's 2048 arguments z = (x - center + i fwhm_l/2) / s (s = fwhm_g / (2 sqrt(ln 2))). */
static double time_eval(int what, const cs_model *m, const double *p, const double *x, double *y, double *J, int reps)
{
    double *t = malloc((size_t)reps * sizeof *t), acc = 0.0;
    const double s = p[1] / (2.0 * sqrt(log(2.0))), g = 0.5 * p[2];
    for (int r = 0; r < reps; r++) {
        double t0 = now();
        if (what == 0)
            cs_model_eval_jac(m, p, x, NPTS, y, J, m->nparams, NULL);
        else if (what == 1)
            cs_model_eval(m, p, x, NPTS, y, NULL);
        else
            for (size_t i = 0; i < NPTS; i++)
                acc += creal(w_of_z(((x[i] - p[0]) + I * g) / s));
        t[r] = now() - t0;
    }
    qsort(t, (size_t)reps, sizeof *t, cmp);
    double med = t[reps / 2];
    free(t);
    if (acc == 12345.678) /* keep the w_of_z loop */
        med += 1e-12;
    return med;
}

/* What the fit cannot go below with these engines: the seconds of one model evaluation with its
 * Jacobian at 2048 points (at the fitted values of one spectrum), of the model alone, and of
 * libcerf's Faddeeva function at the Voigt's arguments, and the median number of evaluations a fit
 * took (from each start) times the first. */
static void report_floor(int reps, double evals_generic, double evals_guess)
{
    double x[NPTS], y[NPTS], s[NPTS];
    double *J = malloc((size_t)NPTS * 16 * sizeof *J);
    seeded_spectrum(7, x, y, s);
    cs_error err;
    cs_model *m = cs_model_alloc("voigt+lorentz", CS_BASELINE_LINEAR, CS_MODEL_SUM, &err);
    cs_fit_parameters par = cs_fit_default_parameters();
    par.guess = 1;
    cs_fit_result *res = NULL;
    if (!m || !J || cs_fit_run(NULL, m, x, y, s, NULL, NPTS, &par, &res, &err) != CS_OK) {
        fprintf(stderr, "bench_fit: floor: %s\n", err.msg);
        cs_fit_result_free(res);
        cs_model_free(m);
        free(J);
        return;
    }
    const double *p = res->value; /* voigt center, fwhm_g, fwhm_l, area first */
    double te = time_eval(0, m, p, x, y, J, reps), tv = time_eval(1, m, p, x, y, J, reps);
    double tw = time_eval(2, m, p, x, y, J, reps);
    /* (null for a start that did not run) */
    char eg[32] = "null", eu[32] = "null", fg[32] = "null", fu[32] = "null";
    if (isfinite(evals_generic)) {
        snprintf(eg, sizeof eg, "%.0f", evals_generic);
        snprintf(fg, sizeof fg, "%.3f", 1e3 * te * evals_generic);
    }
    if (isfinite(evals_guess)) {
        snprintf(eu, sizeof eu, "%.0f", evals_guess);
        snprintf(fu, sizeof fu, "%.3f", 1e3 * te * evals_guess);
    }
    printf("{\"bench\":\"fit_floor\",\"points\":%d,\"eval_jac_us\":%.2f,\"eval_us\":%.2f,\"faddeeva_us\":%.2f,"
           "\"median_evaluations_generic\":%s,\"median_evaluations_guess\":%s,\"floor_generic_ms\":%s,"
           "\"floor_guess_ms\":%s}\n",
           NPTS, 1e6 * te, 1e6 * tv, 1e6 * tw, eg, eu, fg, fu);
    cs_fit_result_free(res);
    cs_model_free(m);
    free(J);
}

int main(int argc, char **argv)
{
    size_t nfits = 200;
    int guess_lo = 0, guess_hi = 1, th_lo = 1, th_hi = 2, verbose = 0;
    for (int i = 1; i < argc; i++) {
        if (strcmp(argv[i], "--smoke") == 0)
            nfits = 3;
        else if (strcmp(argv[i], "--fits") == 0 && i + 1 < argc)
            nfits = (size_t)strtoull(argv[++i], NULL, 10);
        else if (strcmp(argv[i], "--start") == 0 && i + 1 < argc)
            guess_lo = guess_hi = strcmp(argv[++i], "guess") == 0;
        else if (strcmp(argv[i], "--threads") == 0 && i + 1 < argc)
            th_lo = th_hi = atoi(argv[++i]) == 2 ? 2 : 1;
        else if (strcmp(argv[i], "--verbose") == 0)
            verbose = 1;
        else {
            fprintf(stderr, "usage: bench_fit [--fits N] [--smoke] [--start generic|guess] [--threads 1|2] [--verbose]\n");
            return 2;
        }
    }
    /* a generic start: the automatic guess on one spectrum, reused for all */
    double x[NPTS], y[NPTS], s[NPTS], start[16];
    seeded_spectrum(99, x, y, s);
    cs_error err;
    cs_model *m = cs_model_alloc("voigt+lorentz", CS_BASELINE_LINEAR, CS_MODEL_SUM, &err);
    if (!m || cs_model_guess(m, x, y, s, NPTS, &err) != CS_OK) {
        fprintf(stderr, "bench_fit: guess failed: %s\n", err.msg);
        return 1;
    }
    cs_model_get_values(m, start);
    cs_model_free(m);

    int rc = 0;
    double med_evals[2] = {NAN, NAN};
    for (int guess = guess_lo; guess <= guess_hi; guess++) {
        for (int threads = th_lo; threads <= th_hi; threads++) {
            job jobs[2];
            pthread_t th[2];
            for (int t = 0; t < threads; t++) {
                jobs[t] = (job){nfits, guess, start, 1000u + (unsigned long)t, malloc(nfits * sizeof(double)),
                                malloc(nfits * sizeof(double)), malloc(nfits * sizeof(double)), 0, verbose};
            }
            double t0 = now();
            for (int t = 0; t < threads; t++)
                pthread_create(&th[t], NULL, run, &jobs[t]);
            for (int t = 0; t < threads; t++)
                pthread_join(th[t], NULL);
            double wall = now() - t0;
            report(guess ? "automatic guess" : "generic start", threads, jobs, wall, &med_evals[guess]);
            for (int t = 0; t < threads; t++) {
                rc |= jobs[t].failed > 0 && nfits <= 3;
                free(jobs[t].times);
                free(jobs[t].iters);
                free(jobs[t].evals);
            }
        }
    }
    if (th_lo == 1)
        report_floor(nfits <= 3 ? 3 : 200, med_evals[0], med_evals[1]);
    return rc;
}
