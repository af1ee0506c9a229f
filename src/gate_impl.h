/* Private interface of the gate sources: the workspace, its plan cache and scratch, the window. */
#ifndef CS_GATE_IMPL_H
#define CS_GATE_IMPL_H

#include <collshift/gate.h>

#include <complex.h>
#include <fftw3.h>

#include <stddef.h>

/* Functions shared between the gate sources but not part of the library's interface. */
#if defined(__GNUC__)
#define CS_GATE_INTERNAL __attribute__((visibility("hidden")))
#else
#define CS_GATE_INTERNAL
#endif

#define WIN_CACHE 4

struct plan_entry {
    size_t n;
    int kind;
    int in_place;
    fftw_plan plan;
    unsigned long long used;   /* ws->plan_tick at the last use */
};

struct win_entry {
    const cs_window_type *type;  /* NULL: empty slot */
    double param;
    int periodic;
    size_t m;
    double *w;
    double sum, sum2;
    unsigned long long used;
};

struct cs_gate_workspace {
    struct plan_entry *plans;
    size_t nplans, plan_cap;   /* nplans <= CS_GATE_PLAN_MAX */
    unsigned long long plan_tick;
    cs_gate_effort effort;
    double *in;            /* fftw_malloc'ed scratch, in_cap doubles */
    size_t in_cap;
    size_t in_zero_from;   /* in[in_zero_from .. in_cap) is known to be zero */
    double *out;           /* fftw_malloc'ed scratch, out_cap doubles */
    size_t out_cap;
    struct win_entry win[WIN_CACHE];
    unsigned long long tick;
};

/* ---------------------------------------------------------------- gate.c */

/* Grow a scratch buffer (fftw_malloc'ed) to at least `need` doubles (contents are lost).
 * CS_OK or CS_ENOMEM. */
CS_GATE_INTERNAL int gate_grow(double **buf, size_t *cap, size_t need);

/* gate_grow for ws->in, which then has nothing known to be zero. */
CS_GATE_INTERNAL int gate_grow_in(cs_gate_workspace *ws, size_t need);

/* The cached plan of a transform of kind (CS_GATE_FFT_*) and length n, made on the workspace's
 * scratch buffers when new (under the planner lock); NULL with err set on failure. */
CS_GATE_INTERNAL fftw_plan gate_get_plan(cs_gate_workspace *ws, size_t n, int kind, int in_place,
                                         cs_error *err);

/* Run plan p of kind on the arrays in, out (aligned like the workspace's scratch). */
CS_GATE_INTERNAL void gate_execute(fftw_plan p, int kind, double *in, double *out);

/* 1 when p has the alignment of fftw_malloc'ed memory, so plans may run on it. */
CS_GATE_INTERNAL int gate_aligned(const double *p);

/* ---------------------------------------------------------------- gate_spec.c */

/* A validated copy of window w into *out, or the Hann window when w is NULL. */
CS_GATE_INTERNAL int gate_window_or_hann(const cs_window *w, cs_window *out, cs_error *err);

#endif /* CS_GATE_IMPL_H */
