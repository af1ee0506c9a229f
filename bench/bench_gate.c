/* Benchmark: early + late gated spectra of a complex record (Hann gates, x2 zero padding) against
 * one bare FFTW transform of the padded length, measured in the same run.
 *
 * usage: bench_gate [--log2n K] [--reps N] [--smoke]
 * Prints one JSON object per line. The record is synthetic: a sech burst and a decaying tail. */
#include <collshift/gate.h>

#include <complex.h>
#include <fftw3.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

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

int main(int argc, char **argv)
{
    int log2n = 20, reps = 15;
    for (int i = 1; i < argc; i++) {
        if (strcmp(argv[i], "--smoke") == 0) {
            log2n = 12;
            reps = 2;
        } else if (strcmp(argv[i], "--log2n") == 0 && i + 1 < argc) {
            log2n = atoi(argv[++i]);
        } else if (strcmp(argv[i], "--reps") == 0 && i + 1 < argc) {
            reps = atoi(argv[++i]);
        }
    }
    size_t n = (size_t)1 << log2n;
    cs_record *rec = cs_record_alloc(n, 1);
    if (!rec)
        return 1;
    rec->dt_s = 2e-9;
    double tp = 0.02 * (double)n * rec->dt_s, tau = 40e-9;
    for (size_t j = 0; j < n; j++) {
        double t = (double)j * rec->dt_s;
        double complex z = cexp(2.0 * 3.14159265358979 * I * 70e6 * t) / cosh((t - tp) / tau);
        if (t > tp)
            z += 0.3 * exp(-3e6 * (t - tp)) * cexp(2.0 * 3.14159265358979 * I * 205e6 * t);
        rec->data[2 * j] = creal(z) + 1e-3 * sin(0.37 * (double)j);
        rec->data[2 * j + 1] = cimag(z) + 1e-3 * cos(0.41 * (double)j);
    }
    cs_gate_workspace *ws = cs_gate_alloc();
    cs_window hann;
    cs_window_parse("hann", &hann, NULL);
    cs_gate g[2];
    double T = (double)n * rec->dt_s;
    cs_gate_init(&g[0], "early", tp - 4 * tau, 8 * tau, &hann, CS_WINDOW_PERIODIC, NULL);
    cs_gate_init(&g[1], "late", tp + 10 * tau, T - (tp + 10 * tau) - rec->dt_s, &hann, CS_WINDOW_PERIODIC, NULL);
    cs_gate_options o;
    cs_gate_options_default(&o);
    o.pad = 2;
    cs_gated_spectrum *out[2] = {NULL, NULL};
    cs_error err;
    if (cs_gate_spectra(ws, rec, g, 2, &o, out, &err) != CS_OK) { /* plans, window, outputs */
        fprintf(stderr, "bench_gate: %s\n", err.msg);
        return 1;
    }
    size_t nfft = out[1]->nfft;
    double *tg = malloc((size_t)reps * sizeof *tg), *tf = malloc((size_t)reps * sizeof *tf);
    fftw_complex *a = fftw_malloc(nfft * sizeof *a), *b = fftw_malloc(nfft * sizeof *b);
    cs_gate_planner_lock();
    fftw_plan p = fftw_plan_dft_1d((int)nfft, a, b, FFTW_FORWARD, FFTW_ESTIMATE);
    cs_gate_planner_unlock();
    for (size_t k = 0; k < nfft; k++)
        a[k] = k < n ? rec->data[2 * k] + I * rec->data[2 * k + 1] : 0;
    int rc = 0;
    for (int r = 0; r < reps; r++) { /* interleaved, so both see the same machine load */
        double t0 = now();
        rc |= cs_gate_spectra(ws, rec, g, 2, &o, out, &err) != CS_OK;
        tg[r] = now() - t0;
        t0 = now();
        fftw_execute(p);
        tf[r] = now() - t0;
    }
    qsort(tg, (size_t)reps, sizeof *tg, cmp);
    qsort(tf, (size_t)reps, sizeof *tf, cmp);
    printf("{\"bench\":\"gate\",\"samples\":%zu,\"gates\":\"early+late hann\",\"pad\":2,\"nfft_late\":%zu,"
           "\"gated_ms_median\":%.3f,\"bare_fft_ms_median\":%.3f,\"ratio_median\":%.3f,\"ratio_min\":%.3f,"
           "\"records_per_s\":%.2f}\n",
           n, nfft, 1e3 * tg[reps / 2], 1e3 * tf[reps / 2], tg[reps / 2] / tf[reps / 2], tg[0] / tf[0],
           1.0 / tg[reps / 2]);
    fftw_destroy_plan(p);
    fftw_free(a);
    fftw_free(b);
    free(tg);
    free(tf);
    cs_gated_spectrum_free(out[0]);
    cs_gated_spectrum_free(out[1]);
    cs_gate_free(ws);
    cs_record_free(rec);
    return rc;
}
