/* Gates: the workspace, its FFTW plan cache and transforms, FFTW wisdom files. */
/*
 * Plan cache. FFTW plans are expensive to make and cheap to run, and making them is not
 * thread-safe. A workspace keeps every plan it made in a small table keyed by (length, kind,
 * in-place) and runs them with the new-array functions (fftw_execute_dft, _dft_r2c, _dft_c2r),
 * which FFTW allows from any thread on arrays whose alignment (fftw_alignment_of) equals that of
 * the arrays the plan was made with. Plans are made on the workspace's scratch buffers, which
 * come from fftw_malloc, so any fftw_malloc'ed array fits; other arrays are detected and copied
 * through scratch. All planner calls (plan creation and destruction, wisdom import/export and
 * forgetting) hold one process-wide mutex, because the FFTW planner keeps global state.
 * Planning first asks for wisdom only (FFTW_WISDOM_ONLY with FFTW_MEASURE rigour: any wisdom
 * from MEASURE or better is reused without timing anything), then plans with the workspace's
 * effort, FFTW_ESTIMATE by default: at 2^21 points MEASURE took about 10 s here and ran no
 * faster than ESTIMATE.
 *
 * What runs on the workspace: gate_spec.c turns gate specifications into sample ranges,
 * gate_spectrum.c windows, pads and transforms them into gated power spectra.
 */
#include <collshift/gate.h>
#include <collshift/report.h>

#include "gate_impl.h"

#include <errno.h>
#include <limits.h>
#include <pthread.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>

/* ---------------------------------------------------------------- planner lock */

static pthread_mutex_t planner_mutex = PTHREAD_MUTEX_INITIALIZER;

void cs_gate_planner_lock(void) { pthread_mutex_lock(&planner_mutex); }
void cs_gate_planner_unlock(void) { pthread_mutex_unlock(&planner_mutex); }

/* ---------------------------------------------------------------- workspace */

cs_gate_workspace *cs_gate_alloc(void)
{
    cs_gate_workspace *ws = calloc(1, sizeof *ws);
    if (ws)
        ws->effort = CS_GATE_EFFORT_ESTIMATE;
    return ws;
}

void cs_gate_free(cs_gate_workspace *ws)
{
    if (!ws)
        return;
    if (ws->nplans) {
        cs_gate_planner_lock();
        for (size_t i = 0; i < ws->nplans; i++)
            fftw_destroy_plan(ws->plans[i].plan);
        cs_gate_planner_unlock();
    }
    free(ws->plans);
    fftw_free(ws->in);
    fftw_free(ws->out);
    for (int i = 0; i < WIN_CACHE; i++)
        free(ws->win[i].w);
    free(ws);
}

int cs_gate_set_effort(cs_gate_workspace *ws, cs_gate_effort effort)
{
    if (!ws || (effort != CS_GATE_EFFORT_ESTIMATE && effort != CS_GATE_EFFORT_MEASURE &&
                effort != CS_GATE_EFFORT_PATIENT))
        return CS_EINVAL;
    ws->effort = effort;
    return CS_OK;
}

size_t cs_gate_plan_count(const cs_gate_workspace *ws) { return ws ? ws->nplans : 0; }

/* Grow a scratch buffer to at least `need` doubles (contents are lost). */
int gate_grow(double **buf, size_t *cap, size_t need)
{
    if (*cap >= need)
        return CS_OK;
    if (need > SIZE_MAX / sizeof(double))
        return CS_ENOMEM;
    double *p = fftw_malloc(need * sizeof(double));
    if (!p)
        return CS_ENOMEM;
    fftw_free(*buf);
    *buf = p;
    *cap = need;
    return CS_OK;
}

int gate_grow_in(cs_gate_workspace *ws, size_t need)
{
    if (ws->in_cap >= need)
        return CS_OK;
    int rc = gate_grow(&ws->in, &ws->in_cap, need);
    ws->in_zero_from = ws->in_cap;   /* fresh memory: nothing known to be zero */
    return rc;
}

/* Doubles read and written by a transform of kind and length n. */
static void kind_sizes(int kind, size_t n, int in_place, size_t *nin, size_t *nout)
{
    size_t half = 2 * (n / 2 + 1);
    switch (kind) {
    case CS_GATE_FFT_R2C: *nin = in_place ? half : n; *nout = half; break;
    case CS_GATE_FFT_C2R: *nin = half; *nout = in_place ? half : n; break;
    default: *nin = 2 * n; *nout = 2 * n; break;
    }
}

static const char *kind_name(int kind)
{
    switch (kind) {
    case CS_GATE_FFT_FORWARD: return "forward complex";
    case CS_GATE_FFT_BACKWARD: return "backward complex";
    case CS_GATE_FFT_R2C: return "real-to-complex";
    case CS_GATE_FFT_C2R: return "complex-to-real";
    default: return "unknown";
    }
}

static fftw_plan make_plan(int kind, int n, double *in, double *out, unsigned flags)
{
    fftw_complex *ci = (fftw_complex *)(void *)in, *co = (fftw_complex *)(void *)out;
    switch (kind) {
    case CS_GATE_FFT_FORWARD: return fftw_plan_dft_1d(n, ci, co, FFTW_FORWARD, flags);
    case CS_GATE_FFT_BACKWARD: return fftw_plan_dft_1d(n, ci, co, FFTW_BACKWARD, flags);
    case CS_GATE_FFT_R2C: return fftw_plan_dft_r2c_1d(n, in, co, flags);
    default: return fftw_plan_dft_c2r_1d(n, ci, out, flags);
    }
}

fftw_plan gate_get_plan(cs_gate_workspace *ws, size_t n, int kind, int in_place, cs_error *err)
{
    ws->plan_tick++;
    for (size_t i = 0; i < ws->nplans; i++)
        if (ws->plans[i].n == n && ws->plans[i].kind == kind && ws->plans[i].in_place == in_place) {
            ws->plans[i].used = ws->plan_tick;
            return ws->plans[i].plan;
        }
    if (n == 0 || kind < CS_GATE_FFT_FORWARD || kind > CS_GATE_FFT_C2R) {
        cs_error_set(err, CS_EINVAL, NULL, -1, -1, "invalid transform: length %zu, kind %d", n, kind);
        return NULL;
    }
    if (n > INT_MAX) {
        cs_error_set(err, CS_ERANGE, NULL, -1, -1,
                     "transform length %zu exceeds FFTW's limit of %d", n, INT_MAX);
        return NULL;
    }
    size_t nin, nout;
    kind_sizes(kind, n, in_place, &nin, &nout);
    if (ws->nplans == ws->plan_cap && ws->plan_cap < CS_GATE_PLAN_MAX) {
        size_t cap = ws->plan_cap ? 2 * ws->plan_cap : 8;
        struct plan_entry *p = realloc(ws->plans, cap * sizeof *p);
        if (!p) {
            cs_error_set(err, CS_ENOMEM, NULL, -1, -1, "out of memory for the plan cache");
            return NULL;
        }
        ws->plans = p;
        ws->plan_cap = cap;
    }
    size_t slot = ws->nplans;
    if (slot == CS_GATE_PLAN_MAX) {   /* full: the least recently used plan makes room */
        slot = 0;
        for (size_t i = 1; i < ws->nplans; i++)
            if (ws->plans[i].used < ws->plans[slot].used)
                slot = i;
    }
    if (gate_grow_in(ws, in_place ? (nin > nout ? nin : nout) : nin) != CS_OK ||
        (!in_place && gate_grow(&ws->out, &ws->out_cap, nout) != CS_OK)) {
        cs_error_set(err, CS_ENOMEM, NULL, -1, -1, "out of memory for a transform of %zu points", n);
        return NULL;
    }
    double *out = in_place ? ws->in : ws->out;
    unsigned keep = in_place ? 0u : (kind == CS_GATE_FFT_C2R ? FFTW_DESTROY_INPUT : FFTW_PRESERVE_INPUT);
    unsigned effort = ws->effort == CS_GATE_EFFORT_PATIENT   ? FFTW_PATIENT
                      : ws->effort == CS_GATE_EFFORT_MEASURE ? FFTW_MEASURE
                                                             : FFTW_ESTIMATE;
    cs_gate_planner_lock();
    if (slot < ws->nplans) {
        fftw_destroy_plan(ws->plans[slot].plan);
        ws->plans[slot] = ws->plans[--ws->nplans];   /* compact; the slot is refilled below */
        slot = ws->nplans;
    }
    fftw_plan p = make_plan(kind, (int)n, ws->in, out, keep | FFTW_WISDOM_ONLY | FFTW_MEASURE);
    if (!p)
        p = make_plan(kind, (int)n, ws->in, out, keep | effort);
    cs_gate_planner_unlock();
    ws->in_zero_from = ws->in_cap;   /* measuring planners scribble on the arrays */
    if (!p) {
        cs_error_set(err, CS_EUNSUP, NULL, -1, -1, "FFTW could not plan a %s transform of %zu points",
                     kind_name(kind), n);
        return NULL;
    }
    ws->plans[slot].n = n;
    ws->plans[slot].kind = kind;
    ws->plans[slot].in_place = in_place;
    ws->plans[slot].plan = p;
    ws->plans[slot].used = ws->plan_tick;
    ws->nplans++;
    return p;
}

const void *cs_gate_plan(cs_gate_workspace *ws, size_t n, cs_gate_fft_kind kind, int in_place,
                         cs_error *err)
{
    if (!ws) {
        cs_error_set(err, CS_EINVAL, NULL, -1, -1, "no workspace");
        return NULL;
    }
    fftw_plan p = gate_get_plan(ws, n, (int)kind, in_place != 0, err);
    return (const void *)p;
}

void gate_execute(fftw_plan p, int kind, double *in, double *out)
{
    switch (kind) {
    case CS_GATE_FFT_R2C:
        fftw_execute_dft_r2c(p, in, (fftw_complex *)(void *)out);
        break;
    case CS_GATE_FFT_C2R:
        fftw_execute_dft_c2r(p, (fftw_complex *)(void *)in, out);
        break;
    default:
        fftw_execute_dft(p, (fftw_complex *)(void *)in, (fftw_complex *)(void *)out);
        break;
    }
}

int gate_aligned(const double *p) { return fftw_alignment_of((double *)(uintptr_t)p) == 0; }

int cs_gate_fft(cs_gate_workspace *ws, cs_gate_fft_kind kind, size_t n, const double *in,
                double *out, cs_error *err)
{
    if (!ws || !in || !out || n == 0)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "invalid transform arguments");
    int in_place = in == out;
    fftw_plan p = gate_get_plan(ws, n, (int)kind, in_place, err);
    if (!p)
        return err ? err->code : CS_EUNSUP;
    size_t nin, nout;
    kind_sizes((int)kind, n, in_place, &nin, &nout);
    if (in_place) {
        if (gate_aligned(out)) {
            gate_execute(p, (int)kind, out, out);
        } else {
            memcpy(ws->in, in, nin * sizeof(double));
            gate_execute(p, (int)kind, ws->in, ws->in);
            memcpy(out, ws->in, nout * sizeof(double));
            ws->in_zero_from = ws->in_cap;
        }
        return CS_OK;
    }
    double *src = (double *)(uintptr_t)in;  /* preserved by FFTW_PRESERVE_INPUT */
    if (kind == CS_GATE_FFT_C2R || !gate_aligned(in)) {
        memcpy(ws->in, in, nin * sizeof(double));
        ws->in_zero_from = ws->in_cap;
        src = ws->in;
    }
    if (gate_aligned(out)) {
        gate_execute(p, (int)kind, src, out);
    } else {
        gate_execute(p, (int)kind, src, ws->out);
        memcpy(out, ws->out, nout * sizeof(double));
    }
    return CS_OK;
}

size_t cs_gate_fast_size(size_t n)
{
    if (n == 0 || n > (size_t)1 << 62)
        return 0;
    size_t best = SIZE_MAX;
    for (size_t p7 = 1; p7 < 2 * n + 14; p7 *= 7)
        for (size_t p5 = p7; p5 < 2 * n + 14; p5 *= 5)
            for (size_t p3 = p5; p3 < 2 * n + 14; p3 *= 3) {
                size_t v = 2 * p3;   /* at least one factor 2 */
                while (v < n)
                    v *= 2;
                if (v < best)
                    best = v;
            }
    return best;
}

/* ---------------------------------------------------------------- wisdom */

int cs_gate_wisdom_default_path(char *buf, size_t n, cs_error *err)
{
    const char *xdg = getenv("XDG_CACHE_HOME");
    int w;
    if (xdg && xdg[0] == '/') {
        w = snprintf(buf, n, "%s/collshift/fftw-wisdom", xdg);
    } else {
        const char *home = getenv("HOME");
        if (!home || !*home)
            return cs_error_set(err, CS_EINVAL, NULL, -1, -1,
                                "no default wisdom file: neither XDG_CACHE_HOME nor HOME is set");
        w = snprintf(buf, n, "%s/.cache/collshift/fftw-wisdom", home);
    }
    if (!buf || w < 0 || (size_t)w >= n)
        return cs_error_set(err, CS_ERANGE, NULL, -1, -1, "wisdom path too long");
    return CS_OK;
}

/* Create every missing folder above path (mkdir -p of its dirname). */
static int make_parents(char *path, cs_error *err)
{
    for (char *s = path + 1; *s; s++) {
        if (*s != '/')
            continue;
        *s = '\0';
        int rc = mkdir(path, 0777);
        int e = errno;
        *s = '/';
        if (rc != 0 && e != EEXIST)
            return cs_error_set(err, CS_EIO, path, -1, -1, "cannot create folder: %s", strerror(e));
    }
    return CS_OK;
}

int cs_gate_wisdom_load(const char *path, cs_error *err)
{
    char def[4096];
    if (!path) {
        int rc = cs_gate_wisdom_default_path(def, sizeof def, err);
        if (rc != CS_OK)
            return rc;
        path = def;
    }
    FILE *f = fopen(path, "rb");
    if (!f)
        return cs_error_set(err, CS_EIO, path, -1, -1, "cannot read wisdom: %s", strerror(errno));
    size_t cap = 4096, len = 0;
    char *s = malloc(cap);
    int rc = s ? CS_OK : CS_ENOMEM;
    while (rc == CS_OK) {
        if (len + 1 >= cap) {
            char *t = cap < ((size_t)1 << 28) ? realloc(s, cap * 2) : NULL;
            if (!t) {
                rc = CS_ENOMEM;
                break;
            }
            s = t;
            cap *= 2;
        }
        size_t got = fread(s + len, 1, cap - 1 - len, f);
        len += got;
        if (got == 0) {
            if (ferror(f))
                rc = CS_EIO;
            break;
        }
    }
    fclose(f);
    if (rc != CS_OK) {
        free(s);
        return cs_error_set(err, rc, path, -1, -1, rc == CS_EIO ? "cannot read wisdom" : "out of memory");
    }
    s[len] = '\0';
    cs_gate_planner_lock();
    int ok = fftw_import_wisdom_from_string(s);
    cs_gate_planner_unlock();
    free(s);
    if (!ok)
        return cs_error_set(err, CS_EFORMAT, path, -1, -1, "not FFTW wisdom for this FFTW version");
    return CS_OK;
}

int cs_gate_wisdom_save(const char *path, cs_error *err)
{
    char def[4096];
    if (!path) {
        int rc = cs_gate_wisdom_default_path(def, sizeof def, err);
        if (rc == CS_OK)
            rc = make_parents(def, err);
        if (rc != CS_OK)
            return rc;
        path = def;
    }
    cs_gate_planner_lock();
    char *s = fftw_export_wisdom_to_string();
    cs_gate_planner_unlock();
    if (!s)
        return cs_error_set(err, CS_ENOMEM, path, -1, -1, "out of memory exporting wisdom");
    int rc = cs_write_atomic(path, s, strlen(s), err);
    free(s);
    return rc;
}

void cs_gate_wisdom_forget(void)
{
    cs_gate_planner_lock();
    fftw_forget_wisdom();
    cs_gate_planner_unlock();
}
