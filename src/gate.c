/* Gates and gated spectra: FFTW plan cache and wisdom, gate specifications, windowed transforms.
 *
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
 * One pass to window and pad. The forward plans are out-of-place with FFTW_PRESERVE_INPUT, so
 * the zeros of the padding survive a transform: the workspace remembers from where its input
 * buffer is known to be zero and only clears what the previous gate dirtied. The windowing pass
 * reads the gate once and writes x_j w_j dt (-1)^j: the factor dt makes X the Riemann sum of
 * the continuous transform, and (-1)^j = exp(i pi j) shifts the output by N/2 bins, so for even
 * N the transform's output is already in ascending (fftshifted) frequency order and goes straight
 * into the caller's array (X_k' = X_{k - N/2}, exactly, no extra pass). Odd N takes one extra
 * rotating copy. The same pass multiplies each sample by 0 into an accumulator, which stays 0
 * unless a sample is NaN or infinite, so non-finite input is caught without a second pass.
 * Windows are sampled once per (window, length, form) and kept in a small cache, since a
 * 2^20-point Hann window costs several times a memory pass in cos() calls.
 *
 * Normalisation (see gate.h for the formulas and their checks): S = |X|^2 / (dt sum w^2), two-
 * sided for complex input, doubled except at DC and Nyquist for real input (one-sided), so that
 * sum S df equals the window-weighted mean power (Parseval's theorem). The gated spectrum's
 * frequency axis is only rewritten when its length, dt, LO or side changed.
 *
 * Transform length: the smallest even 2^a 3^b 5^c 7^d at or above pad * m. FFTW handles every
 * length, but lengths with large prime factors are several times slower; the factors up to 7
 * have FFTW codelets. Evenness keeps the (-1)^j shift exact and gives one-sided spectra a
 * Nyquist bin. */
#include <collshift/gate.h>
#include <collshift/report.h>
#include <collshift/units.h>

#include <complex.h>
#include <fftw3.h>

#include <ctype.h>
#include <errno.h>
#include <limits.h>
#include <math.h>
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

#define WIN_CACHE 4

struct plan_entry {
    size_t n;
    int kind;
    int in_place;
    fftw_plan plan;
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
    size_t nplans, plan_cap;
    cs_gate_effort effort;
    double *in;            /* fftw_malloc'ed scratch, in_cap doubles */
    size_t in_cap;
    size_t in_zero_from;   /* in[in_zero_from .. in_cap) is known to be zero */
    double *out;           /* fftw_malloc'ed scratch, out_cap doubles */
    size_t out_cap;
    struct win_entry win[WIN_CACHE];
    unsigned long long tick;
};

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
static int grow(double **buf, size_t *cap, size_t need)
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

static int grow_in(cs_gate_workspace *ws, size_t need)
{
    if (ws->in_cap >= need)
        return CS_OK;
    int rc = grow(&ws->in, &ws->in_cap, need);
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

static fftw_plan get_plan(cs_gate_workspace *ws, size_t n, int kind, int in_place, cs_error *err)
{
    for (size_t i = 0; i < ws->nplans; i++)
        if (ws->plans[i].n == n && ws->plans[i].kind == kind && ws->plans[i].in_place == in_place)
            return ws->plans[i].plan;
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
    if (ws->nplans == ws->plan_cap) {
        size_t cap = ws->plan_cap ? 2 * ws->plan_cap : 8;
        struct plan_entry *p = realloc(ws->plans, cap * sizeof *p);
        if (!p) {
            cs_error_set(err, CS_ENOMEM, NULL, -1, -1, "out of memory for the plan cache");
            return NULL;
        }
        ws->plans = p;
        ws->plan_cap = cap;
    }
    if (grow_in(ws, in_place ? (nin > nout ? nin : nout) : nin) != CS_OK ||
        (!in_place && grow(&ws->out, &ws->out_cap, nout) != CS_OK)) {
        cs_error_set(err, CS_ENOMEM, NULL, -1, -1, "out of memory for a transform of %zu points", n);
        return NULL;
    }
    double *out = in_place ? ws->in : ws->out;
    unsigned keep = in_place ? 0u : (kind == CS_GATE_FFT_C2R ? FFTW_DESTROY_INPUT : FFTW_PRESERVE_INPUT);
    unsigned effort = ws->effort == CS_GATE_EFFORT_PATIENT   ? FFTW_PATIENT
                      : ws->effort == CS_GATE_EFFORT_MEASURE ? FFTW_MEASURE
                                                             : FFTW_ESTIMATE;
    cs_gate_planner_lock();
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
    ws->plans[ws->nplans].n = n;
    ws->plans[ws->nplans].kind = kind;
    ws->plans[ws->nplans].in_place = in_place;
    ws->plans[ws->nplans].plan = p;
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
    fftw_plan p = get_plan(ws, n, (int)kind, in_place != 0, err);
    return (const void *)p;
}

static void execute(fftw_plan p, int kind, double *in, double *out)
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

static int aligned(const double *p) { return fftw_alignment_of((double *)(uintptr_t)p) == 0; }

int cs_gate_fft(cs_gate_workspace *ws, cs_gate_fft_kind kind, size_t n, const double *in,
                double *out, cs_error *err)
{
    if (!ws || !in || !out || n == 0)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "invalid transform arguments");
    int in_place = in == out;
    fftw_plan p = get_plan(ws, n, (int)kind, in_place, err);
    if (!p)
        return err ? err->code : CS_EUNSUP;
    size_t nin, nout;
    kind_sizes((int)kind, n, in_place, &nin, &nout);
    if (in_place) {
        if (aligned(out)) {
            execute(p, (int)kind, out, out);
        } else {
            memcpy(ws->in, in, nin * sizeof(double));
            execute(p, (int)kind, ws->in, ws->in);
            memcpy(out, ws->in, nout * sizeof(double));
            ws->in_zero_from = ws->in_cap;
        }
        return CS_OK;
    }
    double *src = (double *)(uintptr_t)in;  /* preserved by FFTW_PRESERVE_INPUT */
    if (kind == CS_GATE_FFT_C2R || !aligned(in)) {
        memcpy(ws->in, in, nin * sizeof(double));
        ws->in_zero_from = ws->in_cap;
        src = ws->in;
    }
    if (aligned(out)) {
        execute(p, (int)kind, src, out);
    } else {
        execute(p, (int)kind, src, ws->out);
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

/* ---------------------------------------------------------------- gates */

static int valid_name(const char *name)
{
    size_t n = name ? strlen(name) : 0;
    if (n == 0 || n >= CS_GATE_NAME_MAX)
        return 0;
    for (size_t i = 0; i < n; i++) {
        unsigned char c = (unsigned char)name[i];
        if (!isalnum(c) && c != '_' && c != '.' && c != '-')
            return 0;
    }
    return 1;
}

static int window_or_hann(const cs_window *w, cs_window *out, cs_error *err)
{
    if (!w)
        return cs_window_init(out, &cs_window_hann, 0.0, err);
    cs_window tmp;
    int rc = cs_window_init(&tmp, w->type, w->param, err);
    if (rc == CS_OK)
        *out = tmp;
    return rc;
}

int cs_gate_init(cs_gate *g, const char *name, double start_s, double length_s,
                 const cs_window *w, int periodic, cs_error *err)
{
    if (!g)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "no gate");
    memset(g, 0, sizeof *g);
    if (!valid_name(name))
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1,
                            "gate name '%s' must be 1 to %d characters from A-Z a-z 0-9 _ . -",
                            name ? name : "", CS_GATE_NAME_MAX - 1);
    if (!(start_s >= 0) || !isfinite(start_s))
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "gate '%s': start %g s must be >= 0",
                            name, start_s);
    if (!(length_s > 0) || !isfinite(length_s))
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "gate '%s': length %g s must be > 0",
                            name, length_s);
    cs_window win;
    int rc = window_or_hann(w, &win, err);
    if (rc != CS_OK)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "gate '%s': invalid window", name);
    snprintf(g->name, sizeof g->name, "%s", name);
    g->start_s = start_s;
    g->length_s = length_s;
    g->window = win;
    g->periodic = periodic ? CS_WINDOW_PERIODIC : CS_WINDOW_SYMMETRIC;
    g->t_start_s = NAN;
    return CS_OK;
}

/* Samples j with a <= j dt < b (times from the first sample), with a tolerance of 1e-6 dt. */
static void time_to_index(double a, double b, double dt, double *i0, double *i1)
{
    *i0 = ceil(a / dt - 1e-6);
    *i1 = ceil(b / dt - 1e-6);
}

int cs_gate_samples(const cs_gate *g, const cs_record *rec, size_t *first, size_t *count,
                    cs_error *err)
{
    if (!g || !rec || !first || !count)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "gate: NULL argument");
    if (!(rec->dt_s > 0) || !isfinite(rec->dt_s))
        return cs_error_set(err, CS_EDATA, rec->source, -1, -1, "sample interval must be > 0");
    if (!(g->start_s >= 0) || !(g->length_s > 0) || !isfinite(g->start_s + g->length_s))
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "gate '%s': invalid start or length",
                            g->name);
    double i0, i1;
    time_to_index(g->start_s, g->start_s + g->length_s, rec->dt_s, &i0, &i1);
    if (i1 > (double)rec->n)
        return cs_error_set(err, CS_ERANGE, rec->source, -1, -1,
                            "gate '%s' (%g s + %g s) reaches beyond the record (%zu samples, %g s)",
                            g->name, g->start_s, g->length_s, rec->n, (double)rec->n * rec->dt_s);
    if (i1 - i0 < 2)
        return cs_error_set(err, CS_ERANGE, rec->source, -1, -1,
                            "gate '%s' holds fewer than 2 samples", g->name);
    *first = (size_t)i0;
    *count = (size_t)(i1 - i0);
    return CS_OK;
}

/* ---- specification parser */

static const struct {
    const char *word;
    cs_gate_anchor anchor;
} anchors[] = {
    {"zero", CS_GATE_ANCHOR_ZERO}, {"onset", CS_GATE_ANCHOR_ONSET}, {"peak", CS_GATE_ANCHOR_PEAK},
    {"end", CS_GATE_ANCHOR_END},   {"tail", CS_GATE_ANCHOR_TAIL},   {"fade", CS_GATE_ANCHOR_FADE},
};

static const char *anchor_word(cs_gate_anchor a)
{
    for (size_t i = 0; i < sizeof anchors / sizeof anchors[0]; i++)
        if (anchors[i].anchor == a)
            return anchors[i].word;
    return a == CS_GATE_ANCHOR_REST ? "rest" : "";
}

/* Copy s[0..len) into buf without surrounding blanks. */
static void trim_copy(char *buf, size_t n, const char *s, size_t len)
{
    while (len && isspace((unsigned char)*s)) {
        s++;
        len--;
    }
    while (len && isspace((unsigned char)s[len - 1]))
        len--;
    if (len >= n)
        len = n - 1;
    memcpy(buf, s, len);
    buf[len] = '\0';
}

/* "2w", "0.5 w" -> 1 and *k; otherwise 0. */
static int parse_widths(const char *s, double *k)
{
    char *end;
    errno = 0;
    double v = strtod(s, &end);
    if (end == s || errno || !isfinite(v))
        return 0;
    while (isspace((unsigned char)*end))
        end++;
    if (*end != 'w' || end[1] != '\0')
        return 0;
    *k = v;
    return 1;
}

/* OFFSET or LENGTH amount: a time with a unit or a number of widths. */
static int parse_amount(const char *s, const char *spec, const char *what, double *sec,
                        double *widths, cs_error *err)
{
    *sec = 0.0;
    *widths = 0.0;
    if (!*s)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "gate '%s': empty %s", spec, what);
    if (parse_widths(s, widths))
        return CS_OK;
    cs_error e;
    int rc = cs_quantity_parse(s, CS_DIM_TIME, NULL, sec, NULL, NULL, &e);
    if (rc != CS_OK)
        return cs_error_set(err, rc, NULL, -1, -1,
                            "gate '%s': %s '%s' is neither a time with a unit (20us) nor a number "
                            "of burst widths (2w): %s",
                            spec, what, s, e.msg);
    return CS_OK;
}

/* ANCHOR [(+|-) OFFSET]; returns 1 when s starts with an anchor word (then *rc is the status). */
static int parse_anchor_point(const char *s, const char *spec, const char *what, cs_gate_point *pt,
                              int *rc, cs_error *err)
{
    size_t k = 0;
    while (isalpha((unsigned char)s[k]))
        k++;
    if (k == 0)
        return 0;
    int found = -1;
    for (size_t i = 0; i < sizeof anchors / sizeof anchors[0]; i++)
        if (strlen(anchors[i].word) == k && strncmp(anchors[i].word, s, k) == 0)
            found = (int)i;
    if (found < 0) {
        *rc = cs_error_set(err, CS_EINVAL, NULL, -1, -1,
                           "gate '%s': unknown %s '%.*s' (expected a time with a unit, or zero, "
                           "onset, peak, end, tail or fade, optionally +/- an offset)",
                           spec, what, (int)k, s);
        return 1;
    }
    pt->anchor = anchors[found].anchor;
    pt->offset_s = pt->offset_w = 0.0;
    const char *r = s + k;
    while (isspace((unsigned char)*r))
        r++;
    if (!*r) {
        *rc = CS_OK;
        return 1;
    }
    if (*r != '+' && *r != '-') {
        *rc = cs_error_set(err, CS_EINVAL, NULL, -1, -1,
                           "gate '%s': expected '+' or '-' after '%s' in %s '%s'", spec,
                           anchors[found].word, what, s);
        return 1;
    }
    double sign = *r == '-' ? -1.0 : 1.0;
    r++;
    while (isspace((unsigned char)*r))
        r++;
    if (*r == '+' || *r == '-') {
        *rc = cs_error_set(err, CS_EINVAL, NULL, -1, -1, "gate '%s': two signs in %s '%s'", spec,
                           what, s);
        return 1;
    }
    *rc = parse_amount(r, spec, "offset", &pt->offset_s, &pt->offset_w, err);
    pt->offset_s *= sign;
    pt->offset_w *= sign;
    return 1;
}

int cs_gate_spec_parse(const char *text, const cs_window *default_window, cs_gate_spec *spec,
                       cs_error *err)
{
    if (!text || !spec)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "gate: NULL argument");
    memset(spec, 0, sizeof *spec);
    const char *eq = strchr(text, '=');
    if (!eq)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1,
                            "gate '%s': expected NAME=START:LENGTH[:WINDOW]", text);
    char name[CS_GATE_NAME_MAX + 8];
    trim_copy(name, sizeof name, text, (size_t)(eq - text));
    if (!valid_name(name) || (size_t)(eq - text) >= sizeof name)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1,
                            "gate '%s': the name must be 1 to %d characters from A-Z a-z 0-9 _ . -",
                            text, CS_GATE_NAME_MAX - 1);
    memcpy(spec->name, name, strlen(name) + 1);   /* valid_name: < CS_GATE_NAME_MAX */
    const char *a = eq + 1;
    const char *c1 = strchr(a, ':');
    if (!c1)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1,
                            "gate '%s': expected START:LENGTH after '=' (e.g. 20us:200us or peak-2w:4w)",
                            text);
    const char *b = c1 + 1;
    const char *c2 = strchr(b, ':');
    char sstart[128], slen[128], swin[128];
    if ((size_t)(c1 - a) >= sizeof sstart || strlen(b) >= sizeof slen + sizeof swin)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "gate '%s': too long", text);
    trim_copy(sstart, sizeof sstart, a, (size_t)(c1 - a));
    trim_copy(slen, sizeof slen, b, c2 ? (size_t)(c2 - b) : strlen(b));
    trim_copy(swin, sizeof swin, c2 ? c2 + 1 : "", c2 ? strlen(c2 + 1) : 0);
    if (c2 && (size_t)(c2 - b) >= sizeof slen)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "gate '%s': too long", text);

    /* START */
    int rc = CS_OK;
    if (!sstart[0])
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "gate '%s': empty start", text);
    if (!parse_anchor_point(sstart, text, "start", &spec->start, &rc, err)) {
        double w;
        if (parse_widths(sstart, &w))
            return cs_error_set(err, CS_EINVAL, NULL, -1, -1,
                                "gate '%s': start '%s' counts burst widths from nothing; write "
                                "e.g. peak-%s",
                                text, sstart, sstart);
        cs_error e;
        rc = cs_quantity_parse(sstart, CS_DIM_TIME, NULL, &spec->start.offset_s, NULL, NULL, &e);
        if (rc != CS_OK)
            return cs_error_set(err, rc, NULL, -1, -1,
                                "gate '%s': start '%s' is not a time with a unit (20us) nor an "
                                "anchor (peak-2w): %s",
                                text, sstart, e.msg);
        spec->start.anchor = CS_GATE_ANCHOR_FIRST;
        if (spec->start.offset_s < 0)
            return cs_error_set(err, CS_ERANGE, NULL, -1, -1,
                                "gate '%s': start %s is before the record's first sample", text,
                                sstart);
    }
    if (rc != CS_OK)
        return rc;

    /* LENGTH */
    if (!slen[0])
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "gate '%s': empty length", text);
    if (strcmp(slen, "rest") == 0) {
        spec->until = 1;
        spec->stop.anchor = CS_GATE_ANCHOR_REST;
    } else if (parse_anchor_point(slen, text, "length", &spec->stop, &rc, err)) {
        if (rc != CS_OK)
            return rc;
        spec->until = 1;
    } else {
        rc = parse_amount(slen, text, "length", &spec->length_s, &spec->length_w, err);
        if (rc != CS_OK)
            return rc;
        if (!(spec->length_s > 0) && !(spec->length_w > 0))
            return cs_error_set(err, CS_ERANGE, NULL, -1, -1, "gate '%s': length '%s' must be > 0",
                                text, slen);
        if (spec->length_s < 0 || spec->length_w < 0)
            return cs_error_set(err, CS_ERANGE, NULL, -1, -1, "gate '%s': length '%s' must be > 0",
                                text, slen);
    }

    /* WINDOW[,periodic|,symmetric] */
    spec->periodic = CS_WINDOW_DEFAULT_FORM;
    if (swin[0]) {
        char *comma = strrchr(swin, ',');
        if (comma) {
            *comma = '\0';
            if (strcmp(comma + 1, "periodic") == 0)
                spec->periodic = CS_WINDOW_PERIODIC;
            else if (strcmp(comma + 1, "symmetric") == 0)
                spec->periodic = CS_WINDOW_SYMMETRIC;
            else
                return cs_error_set(err, CS_EINVAL, NULL, -1, -1,
                                    "gate '%s': window form '%s' must be periodic or symmetric",
                                    text, comma + 1);
        }
        cs_error e;
        rc = cs_window_parse(swin, &spec->window, &e);
        if (rc != CS_OK)
            return cs_error_set(err, rc, NULL, -1, -1, "gate '%s': %s", text, e.msg);
        spec->window_given = 1;
    } else {
        rc = window_or_hann(default_window, &spec->window, err);
        if (rc != CS_OK)
            return rc;
    }
    return CS_OK;
}

static int point_needs_burst(const cs_gate_point *p)
{
    return p->offset_w != 0 || (p->anchor != CS_GATE_ANCHOR_FIRST && p->anchor != CS_GATE_ANCHOR_ZERO &&
                                p->anchor != CS_GATE_ANCHOR_REST);
}

int cs_gate_spec_needs_burst(const cs_gate_spec *spec)
{
    if (!spec)
        return 0;
    return point_needs_burst(&spec->start) || (spec->until && point_needs_burst(&spec->stop)) ||
           (!spec->until && spec->length_w != 0);
}

static size_t format_point(const cs_gate_point *p, char *buf, size_t n)
{
    int w;
    if (p->anchor == CS_GATE_ANCHOR_FIRST)
        w = snprintf(buf, n, "%.17gs", p->offset_s);
    else if (p->anchor == CS_GATE_ANCHOR_REST)
        w = snprintf(buf, n, "rest");
    else if (p->offset_w != 0)
        w = snprintf(buf, n, "%s%+.17gw", anchor_word(p->anchor), p->offset_w);
    else if (p->offset_s != 0)
        w = snprintf(buf, n, "%s%+.17gs", anchor_word(p->anchor), p->offset_s);
    else
        w = snprintf(buf, n, "%s", anchor_word(p->anchor));
    return w < 0 ? 0 : (size_t)w;
}

char *cs_gate_spec_format(const cs_gate_spec *spec, char *buf, size_t n)
{
    if (!buf || n == 0)
        return buf;
    buf[0] = '\0';
    if (!spec)
        return buf;
    char st[96], ln[96], win[CS_WINDOW_SPEC_MAX];
    format_point(&spec->start, st, sizeof st);
    if (spec->until)
        format_point(&spec->stop, ln, sizeof ln);
    else if (spec->length_w != 0)
        snprintf(ln, sizeof ln, "%.17gw", spec->length_w);
    else
        snprintf(ln, sizeof ln, "%.17gs", spec->length_s);
    cs_window_format(&spec->window, win, sizeof win);
    snprintf(buf, n, "%s=%s:%s:%s%s", spec->name, st, ln, win,
             spec->periodic == CS_WINDOW_SYMMETRIC ? ",symmetric" : "");
    return buf;
}

/* The time of p measured from the first sample, or NaN with *why set. */
static double point_time(const cs_gate_point *p, const cs_record *rec, const cs_burst *b,
                         const char **why)
{
    int have = b && b->status == CS_BURST_FOUND;
    double base;
    switch (p->anchor) {
    case CS_GATE_ANCHOR_FIRST: base = 0.0; break;
    case CS_GATE_ANCHOR_ZERO: base = -rec->t0_s; break;
    case CS_GATE_ANCHOR_REST: base = (double)rec->n * rec->dt_s; break;
    case CS_GATE_ANCHOR_ONSET: base = have ? b->onset_s - rec->t0_s : NAN; break;
    case CS_GATE_ANCHOR_PEAK: base = have ? b->peak_time_s - rec->t0_s : NAN; break;
    case CS_GATE_ANCHOR_END: base = have ? b->end_s - rec->t0_s : NAN; break;
    case CS_GATE_ANCHOR_TAIL: base = have ? b->tail_start_s - rec->t0_s : NAN; break;
    case CS_GATE_ANCHOR_FADE: base = have ? b->fade_s - rec->t0_s : NAN; break;
    default: base = NAN; break;
    }
    if (!have && (point_needs_burst(p))) {
        *why = "needs a detected burst, and none was found";
        return NAN;
    }
    if (!isfinite(base)) {
        *why = "refers to a burst feature that was not found";
        return NAN;
    }
    double t = base + p->offset_s;
    if (p->offset_w != 0)
        t += p->offset_w * b->fwhm_s;
    return t;
}

int cs_gate_resolve(const cs_gate_spec *spec, const cs_record *rec, const cs_burst *burst,
                    cs_gate *g, cs_error *err)
{
    if (!spec || !rec || !g)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "gate: NULL argument");
    if (!(rec->dt_s > 0) || !isfinite(rec->dt_s) || rec->n < 2)
        return cs_error_set(err, CS_EDATA, rec->source, -1, -1, "record too short or without a sample interval");
    const char *why = NULL;
    double a = point_time(&spec->start, rec, burst, &why);
    double b = NAN;
    if (!why) {
        if (spec->until)
            b = point_time(&spec->stop, rec, burst, &why);
        else if (spec->length_w != 0 && !(burst && burst->status == CS_BURST_FOUND))
            why = "needs a detected burst, and none was found";
        else
            b = a + spec->length_s + (spec->length_w != 0 ? spec->length_w * burst->fwhm_s : 0.0);
    }
    if (why)
        return cs_error_set(err, CS_EDATA, rec->source, -1, -1, "gate '%s' %s", spec->name, why);
    if (!(b > a))
        return cs_error_set(err, CS_ERANGE, rec->source, -1, -1,
                            "gate '%s' ends (%g s) before it starts (%g s)", spec->name, b, a);
    double total = (double)rec->n * rec->dt_s;
    int clipped = 0;
    if (a < 0) {
        a = 0;
        clipped = 1;
    }
    if (b > total + 1e-6 * rec->dt_s) {
        b = total;
        clipped = 1;
    }
    if (!(b > a))
        return cs_error_set(err, CS_ERANGE, rec->source, -1, -1,
                            "gate '%s' lies outside the record (0 .. %g s)", spec->name, total);
    int rc = cs_gate_init(g, spec->name, a, b - a, &spec->window, spec->periodic, err);
    if (rc != CS_OK)
        return rc;
    g->clipped = clipped;
    g->t_start_s = rec->t0_s + a;
    size_t first, count;
    return cs_gate_samples(g, rec, &first, &count, err);
}

int cs_gate_auto(const cs_record *rec, const cs_burst *burst, const cs_window *w,
                 cs_gate gates[2], size_t *ngates, cs_error *err)
{
    if (!rec || !burst || !gates || !ngates)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "gate: NULL argument");
    *ngates = 0;
    if (burst->status != CS_BURST_FOUND)
        return cs_error_set(err, CS_EDATA, rec->source, -1, -1,
                            "no burst detected: automatic gates need one (give --gate)");
    cs_gate_spec early, late;
    memset(&early, 0, sizeof early);
    snprintf(early.name, sizeof early.name, "early");
    early.start.anchor = CS_GATE_ANCHOR_PEAK;
    early.start.offset_w = -CS_GATE_AUTO_EARLY_K;
    early.length_w = 2 * CS_GATE_AUTO_EARLY_K;
    early.periodic = CS_WINDOW_DEFAULT_FORM;
    int rc = window_or_hann(w, &early.window, err);
    if (rc != CS_OK)
        return rc;
    late = early;
    snprintf(late.name, sizeof late.name, "late");
    late.start.anchor = CS_GATE_ANCHOR_END;
    late.start.offset_w = CS_GATE_AUTO_LATE_M;
    late.length_w = 0;
    late.until = 1;
    late.stop.anchor = CS_GATE_ANCHOR_REST;
    rc = cs_gate_resolve(&early, rec, burst, &gates[0], err);
    if (rc != CS_OK)
        return rc;
    *ngates = 1;
    cs_error e;
    if (cs_gate_resolve(&late, rec, burst, &gates[1], &e) == CS_OK)
        *ngates = 2;
    return CS_OK;
}

/* ---------------------------------------------------------------- windowed transforms */

static const struct win_entry *get_window(cs_gate_workspace *ws, const cs_window *w, int periodic,
                                          size_t m, cs_error *err)
{
    periodic = periodic ? CS_WINDOW_PERIODIC : CS_WINDOW_SYMMETRIC;
    ws->tick++;
    struct win_entry *victim = &ws->win[0];
    for (int i = 0; i < WIN_CACHE; i++) {
        struct win_entry *e = &ws->win[i];
        if (e->type == w->type && e->param == w->param && e->periodic == periodic && e->m == m &&
            e->w) {
            e->used = ws->tick;
            return e;
        }
        if (e->used < victim->used)
            victim = e;
    }
    double *buf = victim->m >= m && victim->w ? victim->w : malloc(m * sizeof(double));
    if (!buf) {
        cs_error_set(err, CS_ENOMEM, NULL, -1, -1, "out of memory for a window of %zu samples", m);
        return NULL;
    }
    if (buf != victim->w) {
        free(victim->w);
        victim->w = buf;
    }
    victim->type = NULL;
    int rc = cs_window_fill(w, m, periodic, buf);
    if (rc != CS_OK) {
        cs_error_set(err, rc, NULL, -1, -1, "invalid window");
        return NULL;
    }
    double s = 0, s2 = 0;
    for (size_t j = 0; j < m; j++) {
        s += buf[j];
        s2 += buf[j] * buf[j];
    }
    if (!(s2 > 0)) {
        cs_error_set(err, CS_EDATA, NULL, -1, -1, "window of %zu samples is zero", m);
        return NULL;
    }
    victim->type = w->type;
    victim->param = w->param;
    victim->periodic = periodic;
    victim->m = m;
    victim->sum = s;
    victim->sum2 = s2;
    victim->used = ws->tick;
    return victim;
}

/* Window, pad and transform samples [first, first + m) of rec into length N. The ascending
 * spectrum (cs_gate_nfreq(N) complex values, already multiplied by dt) ends up in dest when
 * dest is not NULL, else in workspace scratch; *res points to it. */
static int transform_gate(cs_gate_workspace *ws, const cs_record *rec, size_t first, size_t m,
                          const struct win_entry *we, size_t N, int remove_mean, double *dest,
                          double **res, cs_error *err)
{
    const int cplx = rec->is_complex != 0;
    const int kind = cplx ? CS_GATE_FFT_FORWARD : CS_GATE_FFT_R2C;
    fftw_plan p = get_plan(ws, N, kind, 0, err);
    if (!p)
        return err ? err->code : CS_EUNSUP;
    size_t nin = cplx ? 2 * N : N, nfq = cs_gate_nfreq(N, cplx);
    if (grow_in(ws, nin) != CS_OK || grow(&ws->out, &ws->out_cap, 2 * nfq) != CS_OK)
        return cs_error_set(err, CS_ENOMEM, NULL, -1, -1, "out of memory for a transform of %zu points", N);
    const double *w = we->w;
    const double dt = rec->dt_s;
    double *in = ws->in;
    double bad = 0.0;
    const int shift = cplx && N % 2 == 0;
    if (cplx) {
        const double *x = rec->data + 2 * first;
        double mr = 0, mi = 0;
        if (remove_mean) {
            for (size_t j = 0; j < m; j++) {
                mr += w[j] * x[2 * j];
                mi += w[j] * x[2 * j + 1];
            }
            mr /= we->sum;
            mi /= we->sum;
        }
        const double c1 = dt, c2 = shift ? -dt : dt;
        size_t j = 0;
        for (; j + 1 < m; j += 2) {
            double a0 = w[j] * c1, a1 = w[j + 1] * c2;
            double r0 = x[2 * j] - mr, i0 = x[2 * j + 1] - mi;
            double r1 = x[2 * j + 2] - mr, i1 = x[2 * j + 3] - mi;
            in[2 * j] = r0 * a0;
            in[2 * j + 1] = i0 * a0;
            in[2 * j + 2] = r1 * a1;
            in[2 * j + 3] = i1 * a1;
            bad += (r0 + i0 + r1 + i1) * 0.0;
        }
        if (j < m) {
            double a0 = w[j] * c1;
            double r0 = x[2 * j] - mr, i0 = x[2 * j + 1] - mi;
            in[2 * j] = r0 * a0;
            in[2 * j + 1] = i0 * a0;
            bad += (r0 + i0) * 0.0;
        }
    } else {
        const double *x = rec->data + first;
        double mr = 0;
        if (remove_mean) {
            for (size_t j = 0; j < m; j++)
                mr += w[j] * x[j];
            mr /= we->sum;
        }
        for (size_t j = 0; j < m; j++) {
            double r = x[j] - mr;
            in[j] = r * (w[j] * dt);
            bad += r * 0.0;
        }
    }
    size_t used = cplx ? 2 * m : m;
    if (ws->in_zero_from > used)
        memset(in + used, 0, ((ws->in_zero_from < nin ? ws->in_zero_from : nin) - used) * sizeof(double));
    ws->in_zero_from = ws->in_zero_from > nin ? ws->in_zero_from : used;
    if (bad != 0.0 || isnan(bad))
        return cs_error_set(err, CS_EDATA, rec->source, -1, -1,
                            "non-finite sample between samples %zu and %zu", first, first + m - 1);
    if (cplx && !shift) {
        /* odd N: transform to scratch, rotate into ascending order */
        double *o = dest ? dest : ws->in;
        execute(p, kind, in, ws->out);
        size_t h = (N + 1) / 2;   /* output index 0 is DFT bin ceil(N/2) */
        memcpy(o, ws->out + 2 * h, 2 * (N - h) * sizeof(double));
        memcpy(o + 2 * (N - h), ws->out, 2 * h * sizeof(double));
        if (o == ws->in)
            ws->in_zero_from = ws->in_cap;
        *res = o;
        return CS_OK;
    }
    if (dest && aligned(dest)) {
        execute(p, kind, in, dest);
        *res = dest;
    } else {
        execute(p, kind, in, ws->out);
        if (dest)
            memcpy(dest, ws->out, 2 * nfq * sizeof(double));
        *res = dest ? dest : ws->out;
    }
    return CS_OK;
}

/* psd[k] = c_k |X_k|^2 / (dt sum w^2), c_k = 2 inside a one-sided spectrum, else 1. */
static void power_from_X(const double *X, size_t nfq, size_t N, int cplx, double scale, double *psd)
{
    for (size_t k = 0; k < nfq; k++)
        psd[k] = (X[2 * k] * X[2 * k] + X[2 * k + 1] * X[2 * k + 1]) * scale;
    if (!cplx) {
        size_t last = N % 2 == 0 ? nfq - 1 : nfq;   /* Nyquist bin stays single */
        for (size_t k = 1; k < last; k++)
            psd[k] *= 2.0;
    }
}

size_t cs_gate_nfreq(size_t nfft, int is_complex) { return is_complex ? nfft : nfft / 2 + 1; }

void cs_gate_freq_axis(size_t nfft, double dt_s, int is_complex, double lo_hz, double *freq_hz)
{
    if (!freq_hz || nfft == 0)
        return;
    double df = 1.0 / ((double)nfft * dt_s);
    size_t nfq = cs_gate_nfreq(nfft, is_complex);
    double k0 = is_complex ? -(double)(nfft / 2) : 0.0;
    for (size_t k = 0; k < nfq; k++)
        freq_hz[k] = lo_hz + (k0 + (double)k) * df;
}

static int check_record(const cs_record *rec, cs_error *err)
{
    if (!rec || !rec->data)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "no record");
    if (!(rec->dt_s > 0) || !isfinite(rec->dt_s))
        return cs_error_set(err, CS_EDATA, rec->source, -1, -1, "sample interval must be > 0");
    return CS_OK;
}

int cs_gate_psd_samples(cs_gate_workspace *ws, const cs_record *rec, size_t first, size_t m,
                        const cs_window *w, int periodic, size_t nfft, int remove_mean,
                        double *psd, double *X, double *sum_w, double *sum_w2, cs_error *err)
{
    if (!ws)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "no workspace");
    int rc = check_record(rec, err);
    if (rc != CS_OK)
        return rc;
    if (m < 2 || first > rec->n || m > rec->n - first)
        return cs_error_set(err, CS_ERANGE, rec->source, -1, -1,
                            "samples %zu + %zu outside the record (%zu samples) or fewer than 2",
                            first, m, rec->n);
    if (nfft < m)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "transform length %zu below the %zu samples",
                            nfft, m);
    cs_window win;
    rc = window_or_hann(w, &win, err);
    if (rc != CS_OK)
        return rc;
    const struct win_entry *we = get_window(ws, &win, periodic, m, err);
    if (!we)
        return err ? err->code : CS_ENOMEM;
    double *res;
    rc = transform_gate(ws, rec, first, m, we, nfft, remove_mean, X, &res, err);
    if (rc != CS_OK)
        return rc;
    if (psd)
        power_from_X(res, cs_gate_nfreq(nfft, rec->is_complex), nfft, rec->is_complex,
                     1.0 / (rec->dt_s * we->sum2), psd);
    if (sum_w)
        *sum_w = we->sum;
    if (sum_w2)
        *sum_w2 = we->sum2;
    return CS_OK;
}

/* ---------------------------------------------------------------- gated spectra */

void cs_gate_options_default(cs_gate_options *o)
{
    if (!o)
        return;
    memset(o, 0, sizeof *o);
    o->pad = 1;
    o->keep_complex = 1;
    o->average = CS_GATE_AVERAGE_POWER;
}

void cs_gated_spectrum_free(cs_gated_spectrum *s)
{
    if (!s)
        return;
    cs_spectrum_free(s->psd);
    fftw_free(s->X);
    free(s);
}

/* Make *out fit nfq frequencies (reusing arrays when possible). *fresh_axis = 1 when the axis
 * must be written. On failure a new object is freed and *out restored to NULL. */
static int prepare_result(cs_gated_spectrum **out, size_t nfq, int with_sigma, int keep_complex,
                          int *fresh_axis, int *created, cs_error *err)
{
    cs_gated_spectrum *s = *out;
    *created = 0;
    if (!s) {
        s = calloc(1, sizeof *s);
        if (!s)
            return cs_error_set(err, CS_ENOMEM, NULL, -1, -1, "out of memory for a gated spectrum");
        *created = 1;
        *out = s;
    }
    *fresh_axis = 0;
    if (!s->psd || s->psd->n != nfq || (s->psd->sigma != NULL) != (with_sigma != 0)) {
        cs_spectrum *p = cs_spectrum_alloc(nfq, with_sigma);
        if (!p)
            goto nomem;
        if (s->psd && s->psd->n == nfq) {   /* keep the axis, only the sigma changed */
            memcpy(p->freq_hz, s->psd->freq_hz, nfq * sizeof(double));
        } else {
            *fresh_axis = 1;
        }
        cs_spectrum_free(s->psd);
        s->psd = p;
        snprintf(p->y_name, sizeof p->y_name, "psd");
    }
    if (keep_complex) {
        if (!s->X || s->psd->n != nfq || *fresh_axis) {
            fftw_free(s->X);
            s->X = fftw_malloc(2 * nfq * sizeof(double));
            if (!s->X)
                goto nomem;
        }
    } else {
        fftw_free(s->X);
        s->X = NULL;
    }
    return CS_OK;
nomem:
    if (*created) {
        cs_gated_spectrum_free(s);
        *out = NULL;
    }
    return cs_error_set(err, CS_ENOMEM, NULL, -1, -1, "out of memory for a gated spectrum of %zu points", nfq);
}

static int set_meta(cs_gated_spectrum *s, const cs_record *rec)
{
    cs_meta *m = &s->psd->meta;
    char win[CS_WINDOW_SPEC_MAX], buf[64];
    cs_window_format(&s->gate.window, win, sizeof win);
    int rc = cs_meta_set_text(m, "psd_convention", s->one_sided ? "one-sided" : "two-sided");
    if (rc == CS_OK)
        rc = cs_meta_set_text(m, "psd_unit", "signal^2/Hz");
    if (rc == CS_OK)
        rc = cs_meta_set_text(m, "gate", s->gate.name);
    if (rc == CS_OK)
        rc = cs_meta_set_si(m, "gate_start", s->gate.start_s, CS_DIM_TIME);
    if (rc == CS_OK)
        rc = cs_meta_set_si(m, "gate_length", s->gate.length_s, CS_DIM_TIME);
    if (rc == CS_OK)
        rc = cs_meta_set_text(m, "window", win);
    if (rc == CS_OK)
        rc = cs_meta_set_text(m, "window_form", s->gate.periodic ? "periodic" : "symmetric");
    snprintf(buf, sizeof buf, "%zu", s->pad);
    if (rc == CS_OK)
        rc = cs_meta_set_text(m, "pad", buf);
    snprintf(buf, sizeof buf, "%zu", s->nfft);
    if (rc == CS_OK)
        rc = cs_meta_set_text(m, "nfft", buf);
    if (rc == CS_OK)
        rc = cs_meta_set_si(m, "enbw", s->enbw_hz, CS_DIM_FREQUENCY);
    if (rc == CS_OK)
        rc = cs_meta_set_si(m, "lo", s->lo_hz, CS_DIM_FREQUENCY);
    snprintf(buf, sizeof buf, "%zu", s->nshots);
    if (rc == CS_OK)
        rc = cs_meta_set_text(m, "nshots", buf);
    if (rc == CS_OK)
        rc = cs_meta_set_text(m, "average", s->average == CS_GATE_AVERAGE_COHERENT ? "coherent" : "power");
    if (rc == CS_OK && rec->source && (!s->psd->source || strcmp(s->psd->source, rec->source) != 0)) {
        char *src = malloc(strlen(rec->source) + 1);
        if (!src)
            return CS_ENOMEM;
        strcpy(src, rec->source);
        free(s->psd->source);
        s->psd->source = src;
    }
    return rc;
}

/* Common checks and sizes of a gated spectrum. */
static int plan_gate(const cs_record *rec, const cs_gate *g, const cs_gate_options *o,
                     size_t *first, size_t *m, size_t *N, cs_error *err)
{
    int rc = check_record(rec, err);
    if (rc != CS_OK)
        return rc;
    if (!g)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "no gate");
    if (o->pad == 0)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "padding factor must be >= 1");
    rc = cs_gate_samples(g, rec, first, m, err);
    if (rc != CS_OK)
        return rc;
    if (*m > SIZE_MAX / o->pad)
        return cs_error_set(err, CS_ERANGE, NULL, -1, -1, "padded gate too long");
    size_t want = *m * o->pad;
    *N = o->exact_length ? want : cs_gate_fast_size(want);
    if (*N == 0 || *N > INT_MAX)
        return cs_error_set(err, CS_ERANGE, NULL, -1, -1,
                            "gate '%s': transform of %zu points exceeds FFTW's limit", g->name, want);
    return CS_OK;
}

static void fill_header(cs_gated_spectrum *s, const cs_record *rec, const cs_gate *g,
                        const cs_gate_options *o, size_t first, size_t m, size_t N,
                        const struct win_entry *we, size_t nshots, int fresh_axis)
{
    int cplx = rec->is_complex != 0;
    if (fresh_axis || s->nfft != N || s->dt_s != rec->dt_s || s->lo_hz != o->lo_hz ||
        s->one_sided != !cplx)
        cs_gate_freq_axis(N, rec->dt_s, cplx, o->lo_hz, s->psd->freq_hz);
    s->gate = *g;
    s->gate.t_start_s = rec->t0_s + (double)first * rec->dt_s;
    s->first = first;
    s->m = m;
    s->nfft = N;
    s->pad = o->pad;
    s->dt_s = rec->dt_s;
    s->t_gate_s = rec->t0_s + (double)first * rec->dt_s;
    s->df_hz = 1.0 / ((double)N * rec->dt_s);
    s->sum_w = we->sum;
    s->sum_w2 = we->sum2;
    s->enbw_hz = we->sum2 / (we->sum * we->sum * rec->dt_s);
    s->lo_hz = o->lo_hz;
    s->one_sided = !cplx;
    s->nshots = nshots;
    s->average = o->average;
}

int cs_gate_spectrum(cs_gate_workspace *ws, const cs_record *rec, const cs_gate *g,
                     const cs_gate_options *o, cs_gated_spectrum **out, cs_error *err)
{
    cs_gate_options def;
    if (!o) {
        cs_gate_options_default(&def);
        o = &def;
    }
    if (!ws || !out)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "gated spectrum: NULL argument");
    size_t first, m, N;
    int rc = plan_gate(rec, g, o, &first, &m, &N, err);
    if (rc != CS_OK)
        return rc;
    const struct win_entry *we = get_window(ws, &g->window, g->periodic, m, err);
    if (!we)
        return err ? err->code : CS_EINVAL;
    int cplx = rec->is_complex != 0;
    size_t nfq = cs_gate_nfreq(N, cplx);
    int fresh, created;
    rc = prepare_result(out, nfq, 0, o->keep_complex, &fresh, &created, err);
    if (rc != CS_OK)
        return rc;
    cs_gated_spectrum *s = *out;
    double *res;
    rc = transform_gate(ws, rec, first, m, we, N, o->remove_mean, s->X, &res, err);
    if (rc == CS_OK) {
        power_from_X(res, nfq, N, cplx, 1.0 / (rec->dt_s * we->sum2), s->psd->y);
        fill_header(s, rec, g, o, first, m, N, we, 1, fresh);
        s->average = CS_GATE_AVERAGE_POWER;
        if (set_meta(s, rec) != CS_OK)
            rc = cs_error_set(err, CS_ENOMEM, NULL, -1, -1, "out of memory for metadata");
    }
    if (rc != CS_OK && created) {
        cs_gated_spectrum_free(s);
        *out = NULL;
    }
    return rc;
}

int cs_gate_spectra(cs_gate_workspace *ws, const cs_record *rec, const cs_gate *gates,
                    size_t ngates, const cs_gate_options *o, cs_gated_spectrum **out,
                    cs_error *err)
{
    if (!gates || !out)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "gated spectra: NULL argument");
    for (size_t i = 0; i < ngates; i++) {
        int rc = cs_gate_spectrum(ws, rec, &gates[i], o, &out[i], err);
        if (rc != CS_OK)
            return rc;
    }
    return CS_OK;
}

int cs_gate_spectrum_shots(cs_gate_workspace *ws, cs_record *const *recs, size_t nrec,
                           const cs_gate *g, const cs_gate_options *o, cs_gated_spectrum **out,
                           cs_error *err)
{
    cs_gate_options def;
    if (!o) {
        cs_gate_options_default(&def);
        o = &def;
    }
    if (!ws || !out || !recs || nrec == 0)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "gated spectrum: no shots");
    const cs_record *r0 = recs[0];
    size_t first, m, N;
    int rc = plan_gate(r0, g, o, &first, &m, &N, err);
    if (rc != CS_OK)
        return rc;
    for (size_t i = 1; i < nrec; i++) {
        const cs_record *r = recs[i];
        rc = check_record(r, err);
        if (rc != CS_OK)
            return rc;
        if ((r->is_complex != 0) != (r0->is_complex != 0) ||
            fabs(r->dt_s - r0->dt_s) > 1e-9 * r0->dt_s)
            return cs_error_set(err, CS_EDATA, r->source, -1, -1,
                                "shot %zu differs from shot 0 in kind or sample interval", i);
        size_t f2, m2;
        rc = cs_gate_samples(g, r, &f2, &m2, err);
        if (rc != CS_OK)
            return rc;
        if (f2 != first || m2 != m)
            return cs_error_set(err, CS_EDATA, r->source, -1, -1, "shot %zu: gate holds other samples", i);
    }
    const struct win_entry *we = get_window(ws, &g->window, g->periodic, m, err);
    if (!we)
        return err ? err->code : CS_EINVAL;
    int cplx = r0->is_complex != 0;
    size_t nfq = cs_gate_nfreq(N, cplx);
    int with_sigma = nrec >= 2 && o->average == CS_GATE_AVERAGE_POWER;
    int fresh, created;
    rc = prepare_result(out, nfq, with_sigma, 1, &fresh, &created, err);
    if (rc != CS_OK)
        return rc;
    cs_gated_spectrum *s = *out;
    double *Xs = s->X, *y = s->psd->y, *q = s->psd->sigma;
    memset(Xs, 0, 2 * nfq * sizeof(double));
    memset(y, 0, nfq * sizeof(double));
    if (q)
        memset(q, 0, nfq * sizeof(double));
    for (size_t i = 0; i < nrec && rc == CS_OK; i++) {
        double *res;
        rc = transform_gate(ws, recs[i], first, m, we, N, o->remove_mean, NULL, &res, err);
        if (rc != CS_OK)
            break;
        for (size_t k = 0; k < nfq; k++) {
            double re = res[2 * k], im = res[2 * k + 1], p = re * re + im * im;
            Xs[2 * k] += re;
            Xs[2 * k + 1] += im;
            y[k] += p;
            if (q)
                q[k] += p * p;
        }
    }
    if (rc == CS_OK) {
        double inv_n = 1.0 / (double)nrec, scale = 1.0 / (r0->dt_s * we->sum2);
        for (size_t k = 0; k < 2 * nfq; k++)
            Xs[k] *= inv_n;
        if (o->average == CS_GATE_AVERAGE_COHERENT) {
            power_from_X(Xs, nfq, N, cplx, scale, y);
        } else {
            size_t last = N % 2 == 0 ? nfq - 1 : nfq;
            for (size_t k = 0; k < nfq; k++) {
                double c = (!cplx && k > 0 && k < last) ? 2.0 * scale : scale;
                double mean = y[k] * inv_n;
                if (q) {
                    double var = (q[k] * inv_n - mean * mean) * (double)nrec / (double)(nrec - 1);
                    q[k] = c * sqrt((var > 0 ? var : 0.0) * inv_n);
                }
                y[k] = c * mean;
            }
        }
        fill_header(s, r0, g, o, first, m, N, we, nrec, fresh);
        if (set_meta(s, r0) != CS_OK)
            rc = cs_error_set(err, CS_ENOMEM, NULL, -1, -1, "out of memory for metadata");
    }
    if (!o->keep_complex && rc == CS_OK) {
        fftw_free(s->X);
        s->X = NULL;
    }
    if (rc != CS_OK && created) {
        cs_gated_spectrum_free(s);
        *out = NULL;
    }
    return rc;
}
