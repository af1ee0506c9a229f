/* Composite line models: construction, parameter table, constraint syntax, evaluation, Jacobian.
 *
 * Evaluation. In CS_MODEL_SUM every component's eval_jac adds its values and derivatives straight
 * into y and into its own block of J (zeroed once per call), and the baseline fills its columns.
 *
 * In CS_MODEL_TRANSMISSION, y = T0(x) exp(-S(x)), S = sum_k OD_k g_k(x)/h_k, where g_k is the
 * profile with unit area and h_k = CS_PROFILE_HEIGHT of that unit-area profile, so that g_k/h_k
 * has unit peak. Each component is evaluated once with its area set to a_k = OD_k/h_k:
 *     value added to S:          a_k g_k(x)                       (the term of S itself)
 *     d/d(area) column:          g_k(x)                           (f is linear in the area)
 *     d/d(theta) columns:        a_k dg_k/dtheta                  (h_k held fixed)
 * and the missing parts of dS/dtheta = OD_k [(dg/dtheta)/h - g (dh/dtheta)/h^2] and
 * dS/dOD_k = g/h are then added point by point from the area column and the gradient of h_k.
 * Finally dy/dp = -y dS/dp for the component columns and dy/dc = exp(-S) dT0/dc for the
 * baseline. The scratch `work` holds S; nothing is allocated while evaluating. */
#include <collshift/model.h>

#include <ctype.h>
#include <errno.h>
#include <math.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

/* ---------------------------------------------------------------- baselines */

static const char *const base_names[] = {"none", "const", "linear", "quad", "cubic", "exp"};
static const size_t base_np[] = {0, 1, 2, 3, 4, 2};

int cs_baseline_parse(const char *name, cs_baseline_kind *kind)
{
    if (!name || !kind)
        return CS_EINVAL;
    for (size_t i = 0; i < sizeof base_names / sizeof base_names[0]; i++)
        if (strcmp(name, base_names[i]) == 0) {
            *kind = (cs_baseline_kind)i;
            return CS_OK;
        }
    return CS_EINVAL;
}

const char *cs_baseline_name(cs_baseline_kind kind)
{
    if ((unsigned)kind > (unsigned)CS_BASELINE_EXP)
        return "";
    return base_names[kind];
}

size_t cs_baseline_nparams(cs_baseline_kind kind)
{
    if ((unsigned)kind > (unsigned)CS_BASELINE_EXP)
        return 0;
    return base_np[kind];
}

/* ---------------------------------------------------------------- construction */

static int is_width_name(const char *pname)
{
    return strncmp(pname, "fwhm", 4) == 0;
}

/* The default bounds of parameter i (widths: [0, inf), eta: [0, 1], otherwise unbounded). */
static void default_bounds(const cs_model *m, size_t i, double *lo, double *hi)
{
    const char *dot = strchr(m->par[i].name, '.');
    const char *pname = dot ? dot + 1 : m->par[i].name;
    *lo = -INFINITY;
    *hi = INFINITY;
    if (i >= m->base_first)
        return;
    if (is_width_name(pname))
        *lo = 0.0;
    else if (strcmp(pname, "eta") == 0) {
        *lo = 0.0;
        *hi = 1.0;
    }
}

static int has_user_bounds(const cs_model *m, size_t i)
{
    double lo, hi;
    default_bounds(m, i, &lo, &hi);
    return m->par[i].lo != lo || m->par[i].hi != hi;
}

/* Space-separated list of the known profiles, into buf. */
static void known_profiles(char *buf, size_t n)
{
    size_t len = 0;
    buf[0] = '\0';
    for (size_t i = 0; i < cs_profile_count(); i++) {
        const cs_profile_type *t = cs_profile_get(i);
        int w = snprintf(buf + len, n - len, "%s%s", i ? " " : "", t->name);
        if (w < 0 || (size_t)w >= n - len)
            break;
        len += (size_t)w;
    }
}

static void init_param(cs_param *p, cs_param_kind kind, double value)
{
    p->kind = kind;
    p->value = value;
    p->user_start = 0;
    p->fixed = 0;
    p->lo = -INFINITY;
    p->hi = INFINITY;
    p->tie = -1;
    p->tie_factor = 1.0;
    p->tie_offset = 0.0;
}

/* Copy s[0..len) into a new NUL-terminated string without the surrounding white space. */
static char *dup_trim(const char *s, size_t len)
{
    while (len > 0 && isspace((unsigned char)*s)) {
        s++;
        len--;
    }
    while (len > 0 && isspace((unsigned char)s[len - 1]))
        len--;
    char *d = malloc(len + 1);
    if (d) {
        memcpy(d, s, len);
        d[len] = '\0';
    }
    return d;
}

cs_model *cs_model_alloc(const char *text, cs_baseline_kind baseline, cs_model_mode mode,
                         cs_error *err)
{
    if (!text)
        text = "";
    if ((unsigned)baseline > (unsigned)CS_BASELINE_EXP) {
        cs_error_set(err, CS_EINVAL, NULL, -1, -1, "unknown baseline kind %d", (int)baseline);
        return NULL;
    }
    if (mode != CS_MODEL_SUM && mode != CS_MODEL_TRANSMISSION) {
        cs_error_set(err, CS_EINVAL, NULL, -1, -1, "unknown model mode %d", (int)mode);
        return NULL;
    }
    cs_model *m = calloc(1, sizeof *m);
    if (!m)
        goto nomem;
    m->mode = mode;
    m->baseline = baseline;
    m->x_ref = 0.0;
    m->text = dup_trim(text, strlen(text));
    if (!m->text)
        goto nomem;

    /* Components: count the '+'-separated tokens, then look each up. */
    const char *body = m->text;
    int empty = body[0] == '\0' || strcmp(body, "none") == 0;
    size_t ncomp = 0;
    if (!empty) {
        ncomp = 1;
        for (const char *c = body; *c; c++)
            ncomp += *c == '+';
    }
    if (ncomp) {
        m->comp = calloc(ncomp, sizeof *m->comp);
        if (!m->comp)
            goto nomem;
    }
    size_t np = 0;
    const char *tok = body;
    for (size_t k = 0; k < ncomp; k++) {
        const char *end = strchr(tok, '+');
        size_t len = end ? (size_t)(end - tok) : strlen(tok);
        char *name = dup_trim(tok, len);
        if (!name)
            goto nomem;
        const cs_profile_type *t = cs_profile_find(name);
        if (!t) {
            char known[256];
            known_profiles(known, sizeof known);
            if (name[0] == '\0')
                cs_error_set(err, CS_EINVAL, NULL, -1, -1,
                             "model '%s': empty component %zu: known profiles are %s", m->text,
                             k + 1, known);
            else
                cs_error_set(err, CS_EINVAL, NULL, -1, -1,
                             "unknown profile '%s': known profiles are %s", name, known);
            free(name);
            cs_model_free(m);
            return NULL;
        }
        free(name);
        m->comp[k].type = t;
        m->comp[k].first = np;
        np += t->nparams;
        tok = end ? end + 1 : tok + len;
    }
    m->ncomp = ncomp;
    m->base_first = np;
    m->nparams = np + cs_baseline_nparams(baseline);
    if (m->nparams == 0) {
        cs_error_set(err, CS_EINVAL, NULL, -1, -1,
                     "model '%s' with baseline 'none' has no parameters", m->text);
        cs_model_free(m);
        return NULL;
    }
    m->par = calloc(m->nparams, sizeof *m->par);
    if (!m->par)
        goto nomem;

    /* The parameter table. */
    for (size_t k = 0; k < ncomp; k++) {
        const cs_profile_type *t = m->comp[k].type;
        size_t ai = cs_profile_area_index(t);
        for (size_t j = 0; j < t->nparams; j++) {
            cs_param *p = &m->par[m->comp[k].first + j];
            const char *pname = t->param_names[j];
            const char *unit = t->param_units[j];
            cs_param_kind kind = CS_PARAM_DIMENSIONLESS;
            if (strcmp(unit, "Hz") == 0)
                kind = CS_PARAM_FREQUENCY;
            else if (strcmp(unit, "area") == 0)
                kind = CS_PARAM_AREA;
            double v = 0.0;
            if (is_width_name(pname))
                v = 1.0;
            else if (strcmp(pname, "eta") == 0)
                v = 0.5;
            else if (strcmp(pname, "q") == 0)
                v = 5.0;
            if (j == ai && mode == CS_MODEL_TRANSMISSION) {
                pname = "od";
                kind = CS_PARAM_DIMENSIONLESS;
            }
            init_param(p, kind, v);
            char nm[64];
            snprintf(nm, sizeof nm, "%zu.%.20s", k + 1, pname);
            size_t len = strlen(nm) < sizeof p->name - 1 ? strlen(nm) : sizeof p->name - 1;
            memcpy(p->name, nm, len);
            p->name[len] = '\0';
            default_bounds(m, m->comp[k].first + j, &p->lo, &p->hi);
        }
    }
    for (size_t j = 0; j < cs_baseline_nparams(baseline); j++) {
        cs_param *p = &m->par[np + j];
        /* In transmission the baseline is the unabsorbed level: start it at 1, not 0. */
        double v = (mode == CS_MODEL_TRANSMISSION && j == 0) ? 1.0 : 0.0;
        init_param(p, CS_PARAM_BASELINE, v);
        if (baseline == CS_BASELINE_EXP)
            snprintf(p->name, sizeof p->name, "base.%s", j == 0 ? "amp" : "rate");
        else
            snprintf(p->name, sizeof p->name, "base.c%zu", j);
    }
    cs_error_clear(err);
    return m;

nomem:
    cs_model_free(m);
    cs_error_set(err, CS_ENOMEM, NULL, -1, -1, "out of memory building a model");
    return NULL;
}

void cs_model_free(cs_model *m)
{
    if (!m)
        return;
    free(m->comp);
    free(m->par);
    free(m->text);
    free(m);
}

long cs_model_param_index(const cs_model *m, const char *name)
{
    if (!m || !name)
        return -1;
    for (size_t i = 0; i < m->nparams; i++)
        if (strcmp(m->par[i].name, name) == 0)
            return (long)i;
    return -1;
}

/* Bring the stored values of tied parameters in line with their masters. */
static void sync_tied_values(cs_model *m)
{
    for (size_t i = 0; i < m->nparams; i++)
        if (m->par[i].tie >= 0)
            m->par[i].value = m->par[i].tie_factor * m->par[m->par[i].tie].value +
                              m->par[i].tie_offset;
}

/* ---------------------------------------------------------------- constraint syntax */

/* "1.center 1.fwhm ... base.c1" into buf (shortened with " ..." when it does not fit). */
static void list_params(const cs_model *m, char *buf, size_t n)
{
    size_t len = 0;
    buf[0] = '\0';
    for (size_t i = 0; i < m->nparams; i++) {
        size_t need = strlen(m->par[i].name) + 1;
        if (len + need + 5 >= n) {
            snprintf(buf + len, n - len, " ...");
            return;
        }
        len += (size_t)snprintf(buf + len, n - len, "%s%s", i ? " " : "", m->par[i].name);
    }
}

/* A constraint being parsed: its verb and whole text, for messages. */
typedef struct cons {
    const cs_model *m;
    const char *verb;   /* "fix", "bound", "tie", "start" */
    const char *text;
    cs_error *err;
} cons;

/* Fail with "VERB 'TEXT': " and the formatted detail. */
static int cons_fail(const cons *c, const char *fmt, ...)
#if defined(__GNUC__)
    __attribute__((format(printf, 2, 3)))
#endif
    ;

static int cons_fail(const cons *c, const char *fmt, ...)
{
    char what[400];
    va_list ap;
    va_start(ap, fmt);
    vsnprintf(what, sizeof what, fmt, ap);
    va_end(ap);
    return cs_error_set(c->err, CS_EINVAL, NULL, -1, -1, "%s '%s': %s", c->verb, c->text, what);
}

/* Look up a parameter name (s[0..len), trimmed). */
static int cons_lookup(const cons *c, const char *s, size_t len, size_t *idx)
{
    char *name = dup_trim(s, len);
    if (!name)
        return cs_error_set(c->err, CS_ENOMEM, NULL, -1, -1, "out of memory");
    long i = cs_model_param_index(c->m, name);
    if (i < 0) {
        char list[300];
        list_params(c->m, list, sizeof list);
        int rc = name[0] == '\0'
                     ? cons_fail(c, "no parameter name given: the model has %s", list)
                     : cons_fail(c, "unknown parameter '%.40s': the model has %s", name, list);
        free(name);
        return rc;
    }
    free(name);
    *idx = (size_t)i;
    return CS_OK;
}

static const char *kind_phrase(cs_param_kind k)
{
    switch (k) {
    case CS_PARAM_AREA: return "an area";
    case CS_PARAM_DIMENSIONLESS: return "a dimensionless parameter";
    case CS_PARAM_BASELINE: return "a baseline coefficient";
    default: return "a frequency";
    }
}

/* Parse the value text s[0..len) for parameter i: a frequency with an optional unit (Hz by
 * default), anything else a plain number. */
static int cons_value(const cons *c, size_t i, const char *s, size_t len, double *v)
{
    char *t = dup_trim(s, len);
    if (!t)
        return cs_error_set(c->err, CS_ENOMEM, NULL, -1, -1, "out of memory");
    int rc = CS_OK;
    const cs_param *p = &c->m->par[i];
    if (t[0] == '\0') {
        rc = cons_fail(c, "no value given for %s", p->name);
    } else if (p->kind == CS_PARAM_FREQUENCY) {
        cs_error e;
        cs_error_clear(&e);
        if (cs_quantity_parse(t, CS_DIM_FREQUENCY, "Hz", v, NULL, NULL, &e) != CS_OK)
            rc = cons_fail(c, "%s", e.msg);
    } else {
        char *end;
        errno = 0;
        double d = strtod(t, &end);
        const char *q = t + strspn(t, " \t+-");
        end += strspn(end, " \t");
        int unit = isalpha((unsigned char)*end) || *end == '%' || *end == '/' ||
                   (unsigned char)*end >= 0x80;
        if (end == t || (q[0] == '0' && (q[1] == 'x' || q[1] == 'X')))
            rc = cons_fail(c, "expected a number, got '%s'", t);
        else if (unit)
            rc = cons_fail(c, "%s is a plain number without a unit, got '%s'", p->name, t);
        else if (*end != '\0')
            rc = cons_fail(c, "unexpected text after the number in '%s'", t);
        else if (errno == ERANGE || !isfinite(d))
            rc = cons_fail(c, "number out of range in '%s'", t);
        else
            *v = d;
    }
    free(t);
    return rc;
}

static int cons_check_inside(const cons *c, size_t i, double v, double lo, double hi)
{
    if (v < lo || v > hi)
        return cons_fail(c, "the value %.10g of %s is outside its bounds [%.10g, %.10g]", v,
                         c->m->par[i].name, lo, hi);
    return CS_OK;
}

static int cons_not_tied(const cons *c, size_t i)
{
    const cs_param *p = &c->m->par[i];
    if (p->tie >= 0)
        return cons_fail(c, "%s is tied to %s and cannot be %s", p->name, c->m->par[p->tie].name,
                         strcmp(c->verb, "fix") == 0     ? "fixed"
                         : strcmp(c->verb, "bound") == 0 ? "bounded"
                                                         : "given a starting value");
    return CS_OK;
}

static int cons_begin(cons *c, cs_model *m, const char *verb, const char *text, cs_error *err)
{
    c->m = m;
    c->verb = verb;
    c->text = text ? text : "";
    c->err = err;
    if (!m || !text)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "%s: no model or no text given", verb);
    cs_error_clear(err);
    return CS_OK;
}

int cs_model_fix(cs_model *m, const char *text, cs_error *err)
{
    cons c;
    int rc = cons_begin(&c, m, "fix", text, err);
    if (rc)
        return rc;
    const char *eq = strchr(text, '=');
    size_t i;
    if ((rc = cons_lookup(&c, text, eq ? (size_t)(eq - text) : strlen(text), &i)))
        return rc;
    if ((rc = cons_not_tied(&c, i)))
        return rc;
    cs_param *p = &m->par[i];
    double v = p->value;
    if (eq) {
        if ((rc = cons_value(&c, i, eq + 1, strlen(eq + 1), &v)))
            return rc;
        if ((rc = cons_check_inside(&c, i, v, p->lo, p->hi)))
            return rc;
        p->value = v;
        p->user_start = 1;
    }
    p->fixed = 1;
    sync_tied_values(m);
    return CS_OK;
}

int cs_model_start(cs_model *m, const char *text, cs_error *err)
{
    cons c;
    int rc = cons_begin(&c, m, "start", text, err);
    if (rc)
        return rc;
    const char *eq = strchr(text, '=');
    if (!eq)
        return cons_fail(&c, "expected NAME=VALUE");
    size_t i;
    if ((rc = cons_lookup(&c, text, (size_t)(eq - text), &i)))
        return rc;
    if ((rc = cons_not_tied(&c, i)))
        return rc;
    double v;
    if ((rc = cons_value(&c, i, eq + 1, strlen(eq + 1), &v)))
        return rc;
    if ((rc = cons_check_inside(&c, i, v, m->par[i].lo, m->par[i].hi)))
        return rc;
    m->par[i].value = v;
    m->par[i].user_start = 1;
    sync_tied_values(m);
    return CS_OK;
}

int cs_model_bound(cs_model *m, const char *text, cs_error *err)
{
    cons c;
    int rc = cons_begin(&c, m, "bound", text, err);
    if (rc)
        return rc;
    const char *eq = strchr(text, '=');
    const char *colon = eq ? strchr(eq + 1, ':') : NULL;
    if (!eq || !colon)
        return cons_fail(&c, "expected NAME=LO:HI (either side may be empty)");
    size_t i;
    if ((rc = cons_lookup(&c, text, (size_t)(eq - text), &i)))
        return rc;
    if ((rc = cons_not_tied(&c, i)))
        return rc;
    double dlo, dhi;
    default_bounds(m, i, &dlo, &dhi);
    double lo = dlo, hi = dhi;
    const char *ls = eq + 1, *hs = colon + 1;
    size_t llen = (size_t)(colon - ls), hlen = strlen(hs);
    if (strspn(ls, " \t") < llen && (rc = cons_value(&c, i, ls, llen, &lo)))
        return rc;
    if (strspn(hs, " \t") < hlen && (rc = cons_value(&c, i, hs, hlen, &hi)))
        return rc;
    if (lo < dlo || hi > dhi)
        return cons_fail(&c, "the bounds of %s must lie within [%g, %g]", m->par[i].name, dlo, dhi);
    if (lo > hi)
        return cons_fail(&c, "lower bound %.10g is above upper bound %.10g", lo, hi);
    if (m->par[i].user_start && (rc = cons_check_inside(&c, i, m->par[i].value, lo, hi)))
        return rc;
    m->par[i].lo = lo;
    m->par[i].hi = hi;
    return CS_OK;
}

static int is_name_char(char ch)
{
    return isalnum((unsigned char)ch) || ch == '.' || ch == '_';
}

int cs_model_tie(cs_model *m, const char *text, cs_error *err)
{
    static const char forms[] = "expected A=B, A=K*B, A=B+OFF, A=B-OFF or A=K*B+OFF";
    cons c;
    int rc = cons_begin(&c, m, "tie", text, err);
    if (rc)
        return rc;
    const char *eq = strchr(text, '=');
    if (!eq)
        return cons_fail(&c, "%s", forms);
    size_t a;
    if ((rc = cons_lookup(&c, text, (size_t)(eq - text), &a)))
        return rc;

    /* Right-hand side: [K*] B [(+|-) OFF] */
    const char *r = eq + 1;
    double k = 1.0;
    const char *star = strchr(r, '*');
    if (star) {
        char *kt = dup_trim(r, (size_t)(star - r));
        if (!kt)
            return cs_error_set(err, CS_ENOMEM, NULL, -1, -1, "out of memory");
        char *end;
        errno = 0;
        k = strtod(kt, &end);
        const char *q = kt + strspn(kt, "+-");
        int bad = end == kt || *end != '\0' || errno == ERANGE || !isfinite(k) ||
                  (q[0] == '0' && (q[1] == 'x' || q[1] == 'X'));
        if (bad) {
            rc = cons_fail(&c, "the factor '%s' is not a plain number", kt);
            free(kt);
            return rc;
        }
        free(kt);
        if (k == 0.0)
            return cons_fail(&c, "a factor of 0 makes a fixed parameter: use fix instead");
        r = star + 1;
    }
    while (isspace((unsigned char)*r))
        r++;
    const char *bname = r;
    while (is_name_char(*r))
        r++;
    if (r == bname)
        return cons_fail(&c, "%s", forms);
    size_t b;
    if ((rc = cons_lookup(&c, bname, (size_t)(r - bname), &b)))
        return rc;
    while (isspace((unsigned char)*r))
        r++;
    double off = 0.0;
    if (*r == '+' || *r == '-') {
        double sign = *r == '-' ? -1.0 : 1.0;
        r++;
        if (strspn(r, " \t") == strlen(r))
            return cons_fail(&c, "%s", forms);
        if ((rc = cons_value(&c, a, r, strlen(r), &off)))
            return rc;
        off *= sign;
    } else if (*r != '\0') {
        return cons_fail(&c, "%s", forms);
    }

    cs_param *pa = &m->par[a];
    if (a == b)
        return cons_fail(&c, "%s cannot be tied to itself", pa->name);
    if (pa->kind != m->par[b].kind)
        return cons_fail(&c, "%s is %s but %s is %s", pa->name, kind_phrase(pa->kind),
                         m->par[b].name, kind_phrase(m->par[b].kind));
    if (pa->tie >= 0)
        return cons_fail(&c, "%s is already tied to %s", pa->name, m->par[pa->tie].name);
    if (pa->fixed)
        return cons_fail(&c, "%s is fixed and cannot be tied as well", pa->name);
    if (has_user_bounds(m, a))
        return cons_fail(&c, "%s has bounds and cannot be tied as well", pa->name);

    /* Resolve B to its final master M: a = k (kb M + ob) + off. */
    size_t master = b;
    double f = k, o = off;
    if (m->par[b].tie >= 0) {
        master = (size_t)m->par[b].tie;
        f = k * m->par[b].tie_factor;
        o = k * m->par[b].tie_offset + off;
    }
    if (master == a)
        return cons_fail(&c, "%s already follows %s: the ties would form a cycle",
                         m->par[b].name, pa->name);
    pa->tie = (long)master;
    pa->tie_factor = f;
    pa->tie_offset = o;
    /* Parameters that followed A now follow M: p = fi (f M + o) + oi. */
    for (size_t i = 0; i < m->nparams; i++)
        if (m->par[i].tie == (long)a) {
            m->par[i].tie = (long)master;
            m->par[i].tie_offset = m->par[i].tie_factor * o + m->par[i].tie_offset;
            m->par[i].tie_factor *= f;
        }
    sync_tied_values(m);
    return CS_OK;
}

void cs_model_apply_ties(const cs_model *m, double *p)
{
    if (!m || !p)
        return;
    for (size_t i = 0; i < m->nparams; i++)
        if (m->par[i].tie >= 0)
            p[i] = m->par[i].tie_factor * p[m->par[i].tie] + m->par[i].tie_offset;
}

void cs_model_get_values(const cs_model *m, double *p)
{
    if (!m || !p)
        return;
    for (size_t i = 0; i < m->nparams; i++)
        p[i] = m->par[i].value;
}

void cs_model_set_values(cs_model *m, const double *p)
{
    if (!m || !p)
        return;
    for (size_t i = 0; i < m->nparams; i++)
        m->par[i].value = p[i];
}

/* ---------------------------------------------------------------- evaluation */

/* Validate every component's parameters (the od of a transmission component is checked as the
 * area: it must be finite). */
static int check_components(const cs_model *m, const double *p)
{
    for (size_t k = 0; k < m->ncomp; k++) {
        int rc = cs_profile_check_params(m->comp[k].type, p + m->comp[k].first, NULL);
        if (rc != CS_OK)
            return rc;
    }
    return CS_OK;
}

static void fill_nan(const cs_model *m, size_t n, double *y, double *J, size_t ldj)
{
    for (size_t i = 0; i < n; i++) {
        if (y)
            y[i] = NAN;
        if (J)
            for (size_t k = 0; k < m->nparams; k++)
                J[i * ldj + k] = NAN;
    }
}

/* Baseline value at u; with d not NULL also its derivatives d[0..nb). */
static inline double base_eval(cs_baseline_kind kind, const double *c, double u, double *d)
{
    switch (kind) {
    case CS_BASELINE_CONST:
        if (d)
            d[0] = 1.0;
        return c[0];
    case CS_BASELINE_LINEAR:
        if (d) {
            d[0] = 1.0;
            d[1] = u;
        }
        return c[0] + c[1] * u;
    case CS_BASELINE_QUAD:
        if (d) {
            d[0] = 1.0;
            d[1] = u;
            d[2] = u * u;
        }
        return c[0] + u * (c[1] + u * c[2]);
    case CS_BASELINE_CUBIC:
        if (d) {
            d[0] = 1.0;
            d[1] = u;
            d[2] = u * u;
            d[3] = u * u * u;
        }
        return c[0] + u * (c[1] + u * (c[2] + u * c[3]));
    case CS_BASELINE_EXP: {
        double e = exp(-c[1] * u);
        if (d) {
            d[0] = e;
            d[1] = -u * c[0] * e;
        }
        return c[0] * e;
    }
    default:
        return 0.0;
    }
}

/* Height h of component k's unit-area profile (and its gradient, when grad is not NULL), and
 * the component's parameters with the area replaced by od/h, into q. */
static int trans_component(const cs_model *m, size_t k, const double *p, double *q, double *h,
                           double *grad)
{
    const cs_profile_type *t = m->comp[k].type;
    size_t ai = cs_profile_area_index(t);
    memcpy(q, p + m->comp[k].first, t->nparams * sizeof *q);
    q[ai] = 1.0;
    int rc = cs_profile_quantity(t, CS_PROFILE_HEIGHT, q, h, grad);
    if (rc != CS_OK)
        return rc;
    if (!(*h > 0.0) || !isfinite(*h))
        return CS_ERANGE;
    q[ai] = p[m->comp[k].first + ai] / *h;
    return CS_OK;
}

static int eval_args_ok(const cs_model *m, const double *p, const double *x, size_t n,
                        const double *work)
{
    if (!m || !p || (n > 0 && !x))
        return 0;
    if (m->mode == CS_MODEL_TRANSMISSION && n > 0 && !work)
        return 0;
    return 1;
}

int cs_model_eval(const cs_model *m, const double *p, const double *x, size_t n, double *y,
                  double *work)
{
    if (!eval_args_ok(m, p, x, n, work) || (n > 0 && !y))
        return CS_EINVAL;
    int rc = check_components(m, p);
    if (rc != CS_OK) {
        fill_nan(m, n, y, NULL, 0);
        return rc;
    }
    const double *c = p + m->base_first;
    const double xr = m->x_ref;
    if (m->mode == CS_MODEL_SUM) {
        for (size_t i = 0; i < n; i++)
            y[i] = 0.0;
        for (size_t k = 0; k < m->ncomp; k++)
            m->comp[k].type->eval(p + m->comp[k].first, x, n, y);
        if (m->baseline != CS_BASELINE_NONE)
            for (size_t i = 0; i < n; i++)
                y[i] += base_eval(m->baseline, c, x[i] - xr, NULL);
        return CS_OK;
    }
    for (size_t i = 0; i < n; i++)
        work[i] = 0.0;
    for (size_t k = 0; k < m->ncomp; k++) {
        double q[CS_PROFILE_MAX_PARAMS], h;
        rc = trans_component(m, k, p, q, &h, NULL);
        if (rc != CS_OK) {
            fill_nan(m, n, y, NULL, 0);
            return rc;
        }
        m->comp[k].type->eval(q, x, n, work);
    }
    for (size_t i = 0; i < n; i++) {
        double t0 = m->baseline == CS_BASELINE_NONE ? 1.0
                                                    : base_eval(m->baseline, c, x[i] - xr, NULL);
        y[i] = t0 * exp(-work[i]);
    }
    return CS_OK;
}

int cs_model_eval_jac(const cs_model *m, const double *p, const double *x, size_t n, double *y,
                      double *J, size_t ldj, double *work)
{
    if (!eval_args_ok(m, p, x, n, work) || (n > 0 && !J) || ldj < m->nparams)
        return CS_EINVAL;
    int rc = check_components(m, p);
    if (rc != CS_OK) {
        fill_nan(m, n, y, J, ldj);
        return rc;
    }
    const size_t np = m->nparams, bf = m->base_first, nb = np - bf;
    const double *c = p + bf;
    const double xr = m->x_ref;
    if (ldj == np) { /* the profiles add into J: one pass of zeros (not one call per row) */
        memset(J, 0, n * np * sizeof *J);
    } else {
        for (size_t i = 0; i < n; i++) {
            double *row = J + i * ldj;
            for (size_t k = 0; k < np; k++)
                row[k] = 0.0;
        }
    }

    if (m->mode == CS_MODEL_SUM) {
        if (y)
            for (size_t i = 0; i < n; i++)
                y[i] = 0.0;
        for (size_t k = 0; k < m->ncomp; k++) {
            cs_profile_jac jac = {J + m->comp[k].first, ldj, 1, NULL};
            m->comp[k].type->eval_jac(p + m->comp[k].first, x, n, y, &jac);
        }
        if (nb > 0)
            for (size_t i = 0; i < n; i++) {
                double b = base_eval(m->baseline, c, x[i] - xr, J + i * ldj + bf);
                if (y)
                    y[i] += b;
            }
        return CS_OK;
    }

    /* Transmission: S into work, component blocks of J hold dS/dp. */
    for (size_t i = 0; i < n; i++)
        work[i] = 0.0;
    for (size_t k = 0; k < m->ncomp; k++) {
        const cs_profile_type *t = m->comp[k].type;
        const size_t first = m->comp[k].first, ai = cs_profile_area_index(t), npk = t->nparams;
        double q[CS_PROFILE_MAX_PARAMS], dh[CS_PROFILE_MAX_PARAMS], h;
        rc = trans_component(m, k, p, q, &h, dh);
        if (rc != CS_OK) {
            fill_nan(m, n, y, J, ldj);
            return rc;
        }
        cs_profile_jac jac = {J + first, ldj, 1, NULL};
        t->eval_jac(q, x, n, work, &jac);
        const double od = p[first + ai];
        /* Correction coefficients -od dh_j / h^2 for the non-area parameters with dh_j != 0. */
        size_t idx[CS_PROFILE_MAX_PARAMS], nc = 0;
        double corr[CS_PROFILE_MAX_PARAMS];
        for (size_t j = 0; j < npk; j++)
            if (j != ai && dh[j] != 0.0) {
                idx[nc] = first + j;
                corr[nc++] = -od * dh[j] / (h * h);
            }
        const double inv_h = 1.0 / h;
        for (size_t i = 0; i < n; i++) {
            double *row = J + i * ldj;
            double g = row[first + ai];
            for (size_t j = 0; j < nc; j++)
                row[idx[j]] += corr[j] * g;
            row[first + ai] = g * inv_h;
        }
    }
    for (size_t i = 0; i < n; i++) {
        double *row = J + i * ldj;
        double e = exp(-work[i]);
        double t0 = 1.0;
        if (nb > 0) {
            t0 = base_eval(m->baseline, c, x[i] - xr, row + bf);
            for (size_t j = bf; j < np; j++)
                row[j] *= e;
        }
        double yi = t0 * e;
        for (size_t j = 0; j < bf; j++)
            row[j] *= -yi;
        if (y)
            y[i] = yi;
    }
    return CS_OK;
}
