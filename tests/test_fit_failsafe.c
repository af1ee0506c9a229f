/* Check suite: fits that fail safely. Each of the four failure kinds of a fit (no convergence,
 * singular covariance, a parameter stuck at a bound, a model that is not finite) is forced through
 * the library API, and the result must say so in its status or flags and leave undefined numbers
 * NaN, never a made-up error bar (include/collshift/fit.h states the contract; issue 9, section 3).
 * The contract itself is checked by one helper, check_contract(), on every result. */
#include <collshift/fit.h>
#include <collshift/report.h>

#include "testutil.h"

#include <check.h>

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

/* ---------------------------------------------------------------- helpers */

/* One line at 150 MHz, FWHM 20 MHz, area 1e7 (peak about 0.32) on a 0.1 floor, with a
 * deterministic ripple of 0.01 standing in for noise (so chi2 > 0); sigma 0.01. */
static void one_line(double *x, double *y, double *s, int n)
{
    for (int i = 0; i < n; i++) {
        x[i] = 1e6 * i;
        y[i] = tu_lorentz(x[i], 150e6, 20e6, 1e7) + 0.1 + 0.01 * sin(0.71 * i);
        s[i] = 0.01;
    }
}

static cs_fit_parameters params(cs_fit_weighting w)
{
    cs_fit_parameters p = cs_fit_default_parameters();
    p.weighting = w;
    p.guess = 0;
    return p;
}

/* The documented contract of fit.h, whatever the status (common practice for fail-safe
 * reporting: an undefined number is NaN and its reason is stated, never a guessed value):
 *   - fixed parameters have error 0 exactly;
 *   - NOT_CONVERGED and MODEL_NAN: every free parameter's error, covariance and correlation is
 *     NaN, as are bootstrap and Monte-Carlo errors;
 *   - a parameter flagged at_bound has a NaN error and NaN covariances with everything;
 *   - an error that is not NaN is finite and > 0 (or 0 for a fixed parameter): never Inf,
 *     never negative;
 *   - a finite error only when the status is CONVERGED or SINGULAR. */
static void check_contract(const cs_model *m, const cs_fit_result *r)
{
    const size_t np = r->nparams;
    int failed = r->status == CS_FIT_NOT_CONVERGED || r->status == CS_FIT_MODEL_NAN;
    for (size_t k = 0; k < np; k++) {
        const cs_param *p = &m->par[k];
        int fixed = p->fixed || (p->tie >= 0 && m->par[p->tie].fixed);
        double e = r->err[k];
        if (fixed) {
            ck_assert_msg(e == 0.0, "%s fixed: error %g", p->name, e);
            continue;
        }
        ck_assert_msg(isnan(e) || (isfinite(e) && e > 0.0), "%s: error %g is neither NaN nor > 0", p->name, e);
        if (failed)
            ck_assert_msg(isnan(e), "%s: error %g after a failed fit (%s)", p->name, e,
                          cs_fit_status_name(r->status));
        if (r->at_bound[k]) {
            ck_assert_msg(isnan(e), "%s at a bound: error %g", p->name, e);
            for (size_t j = 0; j < np; j++) {
                int jfixed = m->par[j].fixed;
                if (!jfixed)
                    ck_assert_msg(isnan(r->cov[k * np + j]), "cov(%s, %s) = %g at a bound", p->name,
                                  m->par[j].name, r->cov[k * np + j]);
                ck_assert_msg(isnan(r->corr[k * np + j]), "corr(%s, %s) = %g at a bound", p->name,
                              m->par[j].name, r->corr[k * np + j]);
            }
        }
        if (isnan(e))
            for (size_t j = 0; j < np; j++)
                ck_assert_msg(isnan(r->corr[k * np + j]), "corr(%s, %s) = %g with an undefined error",
                              p->name, m->par[j].name, r->corr[k * np + j]);
        if (r->boot_err && failed)
            ck_assert(isnan(r->boot_err[k]));
        if (r->mc_err && failed)
            ck_assert(isnan(r->mc_err[k]));
    }
    for (size_t c = 0; c < r->ncomp; c++)
        for (int q = 0; q < CS_PROFILE_NQTY; q++)
            if (r->derived[c].status[q] == CS_OK && failed)
                ck_assert_msg(isnan(r->derived[c].err[q]), "derived %d of component %zu: error %g", q, c + 1,
                              r->derived[c].err[q]);
}

/* Every error the result defines, printed the way outputs print it, never reads "nan" or "inf"
 * (report.h: undefined numbers print as "undefined" or "(error undefined)"). */
static void check_printed(const cs_fit_result *r)
{
    char buf[128];
    for (size_t k = 0; k < r->nparams; k++) {
        cs_format_value_err(r->value[k], r->err[k], CS_DIM_FREQUENCY, buf, sizeof buf);
        ck_assert_msg(!strstr(buf, "nan") && !strstr(buf, "inf"), "printed '%s'", buf);
        if (isnan(r->err[k]))
            ck_assert_msg(strstr(buf, "error undefined") || strcmp(buf, "undefined") == 0, "printed '%s'", buf);
    }
}

/* ---------------------------------------------------------------- non-convergence */

/* _i = 0: an iteration limit of 1 from a poor start; _i = 1: tolerances of zero (the solver can
 * stop only at the iteration limit or when it makes no progress). */
START_TEST(test_not_converged)
{
    enum { N = 300 };
    double x[N], y[N], s[N];
    one_line(x, y, s, N);
    cs_model *m = tu_model("lorentz", CS_BASELINE_CONST, CS_MODEL_SUM);
    tu_start(m, "1.center", 120e6);
    tu_start(m, "1.fwhm", 60e6);
    tu_start(m, "1.area", 3e6);
    tu_start(m, "base.c0", 0.0);
    cs_fit_parameters par = params(CS_WEIGHT_SIGMA);
    par.bootstrap = 5;
    par.montecarlo = 5;
    if (_i == 0) {
        par.max_iter = 1;
    } else {
        par.xtol = par.gtol = par.ftol = 0.0;
        par.max_iter = 3;
    }
    cs_fit_result *r = NULL;
    cs_error err;
    cs_error_clear(&err);
    int rc = cs_fit_run(NULL, m, x, y, s, NULL, N, &par, &r, &err);
    ck_assert_int_eq(rc, CS_ENOCONV);
    ck_assert_ptr_nonnull(r);
    ck_assert_int_eq(r->status, CS_FIT_NOT_CONVERGED);
    ck_assert_str_eq(cs_fit_status_name(r->status), "not converged");
    ck_assert_msg(strstr(err.msg, "did not converge") != NULL, "message '%s'", err.msg);
    for (size_t k = 0; k < r->nparams; k++)
        ck_assert_msg(isnan(r->err[k]), "%s: error %g", m->par[k].name, r->err[k]);
    ck_assert(isfinite(r->chi2)); /* the last point reached has a cost */
    check_contract(m, r);
    check_printed(r);
    cs_fit_result_free(r);
    cs_model_free(m);
}
END_TEST

/* ---------------------------------------------------------------- singular covariance */

/* _i = 0: two identical Gaussian components (centre and width tied, areas free): only the sum of
 * the areas is determined (two equal columns of the Jacobian; common practice).
 * _i = 1: a parameter with no influence: the exponential baseline's rate with its amplitude
 * fixed at 0. */
START_TEST(test_singular)
{
    enum { N = 300 };
    double x[N], y[N], s[N];
    one_line(x, y, s, N);
    cs_model *m;
    if (_i == 0) {
        m = tu_model("gauss+gauss", CS_BASELINE_CONST, CS_MODEL_SUM);
        tu_constrain(m, cs_model_tie, "2.center=1.center");
        tu_constrain(m, cs_model_tie, "2.fwhm=1.fwhm");
        tu_start(m, "1.center", 151e6);
        tu_start(m, "1.fwhm", 22e6);
        tu_start(m, "1.area", 5e6);
        tu_start(m, "2.area", 5e6);
        tu_start(m, "base.c0", 0.1);
    } else {
        m = tu_model("lorentz", CS_BASELINE_EXP, CS_MODEL_SUM);
        tu_start(m, "1.center", 151e6);
        tu_start(m, "1.fwhm", 22e6);
        tu_start(m, "1.area", 1e7);
        tu_constrain(m, cs_model_fix, "base.amp=0");
        tu_start(m, "base.rate", 1e-9);
        /* the floor of the data is then not modelled; subtract it */
        for (int i = 0; i < N; i++)
            y[i] -= 0.1;
    }
    cs_fit_parameters par = params(CS_WEIGHT_SIGMA);
    cs_fit_result *r = NULL;
    cs_error err;
    cs_error_clear(&err);
    int rc = cs_fit_run(NULL, m, x, y, s, NULL, N, &par, &r, &err);
    ck_assert_msg(rc == CS_OK, "rc %d: %s", rc, err.msg); /* documented: SINGULAR returns CS_OK */
    ck_assert_ptr_nonnull(r);
    ck_assert_msg(r->status == CS_FIT_SINGULAR, "status %s", cs_fit_status_name(r->status));
    ck_assert_str_eq(cs_fit_status_name(r->status), "singular covariance");
    if (_i == 0) {
        ck_assert(isnan(r->err[tu_param(m, "1.area")]) && isnan(r->err[tu_param(m, "2.area")]));
        ck_assert(isfinite(r->err[tu_param(m, "base.c0")]) && r->err[tu_param(m, "base.c0")] > 0);
    } else {
        long k = tu_param(m, "base.rate");
        ck_assert(isnan(r->err[k]));
        ck_assert(isnan(r->cov[k * r->nparams + k]));
        ck_assert_double_eq(r->err[tu_param(m, "base.amp")], 0.0);
        double ec = r->err[tu_param(m, "1.center")];
        ck_assert_msg(isfinite(ec) && ec > 0, "centre error %g", ec); /* still determined */
    }
    check_contract(m, r);
    check_printed(r);
    cs_fit_result_free(r);
    cs_model_free(m);
}
END_TEST

/* ---------------------------------------------------------------- stuck at a bound */

/* The true FWHM is 20 MHz. _i = 0: lower bound 35 MHz; _i = 1: upper bound 10 MHz; the best fit
 * runs into the bound. _i = 2: the area bounded below by a value above the truth. _i = 3: as 0,
 * from the automatic starting values (a width found below the bound, moved inside it): the
 * solver then crawls along the bound, and the fit must still end converged with the width
 * pinned there (src/fit.c, resolve_at_bounds), not "not converged". */
START_TEST(test_at_bound)
{
    enum { N = 300 };
    double x[N], y[N], s[N];
    one_line(x, y, s, N);
    static const char *bound[4] = {"1.fwhm=35MHz:200MHz", "1.fwhm=1MHz:10MHz", "1.area=2e7:1e9",
                                   "1.fwhm=35MHz:200MHz"};
    static const char *which[4] = {"1.fwhm", "1.fwhm", "1.area", "1.fwhm"};
    static const int side[4] = {1, 2, 1, 1};
    cs_model *m = tu_model("lorentz", CS_BASELINE_CONST, CS_MODEL_SUM);
    tu_start(m, "1.center", 151e6);
    tu_start(m, "1.fwhm", _i == 1 ? 8e6 : 40e6);
    tu_start(m, "1.area", _i == 2 ? 3e7 : 1e7);
    tu_start(m, "base.c0", 0.1);
    if (_i == 3) /* no starting values: all from cs_model_guess */
        for (size_t k = 0; k < m->nparams; k++)
            m->par[k].user_start = 0;
    tu_constrain(m, cs_model_bound, bound[_i]);
    cs_fit_parameters par = params(CS_WEIGHT_SIGMA);
    par.guess = _i == 3;
    par.bootstrap = 8;
    cs_fit_result *r = NULL;
    cs_error err;
    cs_error_clear(&err);
    int rc = cs_fit_run(NULL, m, x, y, s, NULL, N, &par, &r, &err);
    ck_assert_msg(rc == CS_OK, "%s: %s", bound[_i], err.msg);
    ck_assert_msg(r->status == CS_FIT_CONVERGED, "%s: %s (%s)", bound[_i], cs_fit_status_name(r->status),
                  cs_fit_stop_name(r->stop));
    long k = tu_param(m, which[_i]);
    ck_assert_msg(r->at_bound[k] == side[_i], "%s: at_bound %d, value %g", bound[_i], r->at_bound[k], r->value[k]);
    ck_assert(isnan(r->err[k]));
    /* the centre is still determined (conditional on the bound) */
    double ec = r->err[tu_param(m, "1.center")];
    ck_assert_msg(isfinite(ec) && ec > 0, "centre error %g", ec);
    /* a derived quantity that needs the bounded parameter has no error: the FWHM for a width */
    if (_i != 2)
        ck_assert(isnan(r->derived[0].err[CS_PROFILE_FWHM]));
    check_contract(m, r);
    check_printed(r);
    cs_fit_result_free(r);
    cs_model_free(m);
}
END_TEST

/* ---------------------------------------------------------------- model not finite */

/* _i = 0: an exponential baseline whose fixed rate makes exp(-rate u) overflow to Inf over the
 * data (rate -10 per Hz, u = x - x_ref up to 299 Hz with x_ref = 0 as a baseline parameter is
 * user-set: exp(2990) > DBL_MAX, which is about exp(709.8), IEEE 754 binary64, common practice).
 * _i = 1: a fixed negative width (profiles are NaN there).
 * _i = 2: data of huge dynamic range (1e300 next to 1e-300): the residuals' squares overflow. */
START_TEST(test_model_not_finite)
{
    enum { N = 300 };
    double x[N], y[N], s[N];
    cs_model *m;
    cs_fit_parameters par = params(CS_WEIGHT_NOISE);
    if (_i == 0) {
        for (int i = 0; i < N; i++) {
            x[i] = i;
            y[i] = 1.0 + 0.01 * sin(0.3 * i);
        }
        m = tu_model("lorentz", CS_BASELINE_EXP, CS_MODEL_SUM);
        tu_start(m, "1.center", 150.0);
        tu_start(m, "1.fwhm", 10.0);
        tu_start(m, "1.area", 1.0);
        tu_start(m, "base.amp", 1.0);
        tu_constrain(m, cs_model_fix, "base.rate=-10");
    } else if (_i == 1) {
        one_line(x, y, s, N);
        m = tu_model("lorentz", CS_BASELINE_CONST, CS_MODEL_SUM);
        long w = tu_param(m, "1.fwhm");
        m->par[w].value = -1.0;
        m->par[w].fixed = 1;
        tu_start(m, "1.center", 150e6);
        tu_start(m, "1.area", 1e7);
        tu_start(m, "base.c0", 0.1);
    } else {
        for (int i = 0; i < N; i++) {
            x[i] = 1e6 * i;
            y[i] = (i % 2) ? 1e300 : 1e-300;
        }
        m = tu_model("lorentz", CS_BASELINE_CONST, CS_MODEL_SUM);
        tu_start(m, "1.center", 150e6);
        tu_start(m, "1.fwhm", 20e6);
        tu_start(m, "1.area", 1e7);
        tu_start(m, "base.c0", 0.0);
    }
    par.bootstrap = 4;
    cs_fit_result *r = NULL;
    cs_error err;
    cs_error_clear(&err);
    int rc = cs_fit_run(NULL, m, x, y, NULL, NULL, N, &par, &r, &err);
    if (_i < 2) {
        ck_assert_int_eq(rc, CS_ENOCONV);
        ck_assert_ptr_nonnull(r);
        ck_assert_msg(r->status == CS_FIT_MODEL_NAN, "status %s", cs_fit_status_name(r->status));
        ck_assert_str_eq(cs_fit_status_name(r->status), "model not finite");
        ck_assert_int_eq(r->stop, CS_FIT_STOP_MODEL_NAN);
        ck_assert_msg(strstr(err.msg, "not finite") != NULL, "message '%s'", err.msg);
        ck_assert(isnan(r->chi2));
    } else {
        /* whatever the outcome, it is explicit: a status other than CONVERGED with CS_ENOCONV,
         * or a converged fit whose numbers are all finite (common practice) */
        ck_assert_ptr_nonnull(r);
        if (r->status == CS_FIT_CONVERGED || r->status == CS_FIT_SINGULAR) {
            ck_assert_int_eq(rc, CS_OK);
            ck_assert(isfinite(r->chi2));
        } else {
            ck_assert_int_eq(rc, CS_ENOCONV);
        }
    }
    check_contract(m, r);
    check_printed(r);
    cs_fit_result_free(r);
    cs_model_free(m);
}
END_TEST

/* ---------------------------------------------------------------- model comparison */

/* The F test of a nested pair where one fit stopped at its iteration limit: refused (fit.h), no
 * p-value from a chi2 that is not a minimum (common practice: the extra-sum-of-squares test
 * compares minima). The same pair, both converged, is accepted. */
START_TEST(test_ftest_needs_minima)
{
    enum { N = 300 };
    double x[N], y[N], s[N];
    one_line(x, y, s, N);
    cs_fit_result *r[2] = {NULL, NULL};
    cs_model *m[2];
    for (int pass = 0; pass < 2; pass++) {
        for (int k = 0; k < 2; k++) {
            /* nested: a constant baseline is a linear one with zero slope */
            m[k] = tu_model("lorentz", k == 0 ? CS_BASELINE_CONST : CS_BASELINE_LINEAR, CS_MODEL_SUM);
            tu_start(m[k], "1.center", 140e6);
            tu_start(m[k], "1.fwhm", 40e6);
            tu_start(m[k], "1.area", 5e6);
            tu_start(m[k], "base.c0", 0.0);
            cs_fit_parameters par = params(CS_WEIGHT_SIGMA);
            if (pass == 0 && k == 1)
                par.max_iter = 1;
            cs_error err;
            cs_fit_run(NULL, m[k], x, y, s, NULL, N, &par, &r[k], &err);
            ck_assert_ptr_nonnull(r[k]);
        }
        double F = 0.0, p = 0.0;
        int rc = cs_fit_ftest(r[0], r[1], &F, &p);
        if (pass == 0) {
            ck_assert_int_eq(r[1]->status, CS_FIT_NOT_CONVERGED);
            ck_assert_int_eq(rc, CS_EINVAL);
            ck_assert(isnan(F) && isnan(p));
        } else {
            ck_assert_msg(r[1]->status == CS_FIT_CONVERGED || r[1]->status == CS_FIT_SINGULAR, "%s",
                          cs_fit_status_name(r[1]->status));
            ck_assert_int_eq(rc, CS_OK);
            ck_assert(isfinite(F) && p >= 0.0 && p <= 1.0);
        }
        for (int k = 0; k < 2; k++) {
            cs_fit_result_free(r[k]);
            cs_model_free(m[k]);
        }
    }
}
END_TEST

/* ---------------------------------------------------------------- the printed forms */

/* report.h: NaN value -> "undefined"; NaN error -> "(error undefined)"; zero error (fixed) ->
 * "(no error)" (common practice: a fixed parameter has no uncertainty, an undetermined one has
 * an undefined uncertainty; the two must not read alike). */
START_TEST(test_printed_forms)
{
    char buf[96];
    cs_format_value_err(NAN, NAN, CS_DIM_FREQUENCY, buf, sizeof buf);
    ck_assert_str_eq(buf, "undefined");
    cs_format_value_err(INFINITY, 1.0, CS_DIM_FREQUENCY, buf, sizeof buf);
    ck_assert_str_eq(buf, "undefined");
    cs_format_value_err(2e6, NAN, CS_DIM_FREQUENCY, buf, sizeof buf);
    ck_assert_str_eq(buf, "2 MHz (error undefined)");
    cs_format_value_err(2e6, INFINITY, CS_DIM_FREQUENCY, buf, sizeof buf);
    ck_assert_str_eq(buf, "2 MHz (error undefined)");
    cs_format_value_err(2e6, 0.0, CS_DIM_FREQUENCY, buf, sizeof buf);
    ck_assert_str_eq(buf, "2 MHz (no error)");
}
END_TEST

static Suite *suite(void)
{
    Suite *s = suite_create("fit_failsafe");
    TCase *tc = tcase_create("failures");
    tcase_set_timeout(tc, 120);
    tcase_add_loop_test(tc, test_not_converged, 0, 2);
    tcase_add_loop_test(tc, test_singular, 0, 2);
    tcase_add_loop_test(tc, test_at_bound, 0, 4);
    tcase_add_loop_test(tc, test_model_not_finite, 0, 3);
    tcase_add_test(tc, test_ftest_needs_minima);
    tcase_add_test(tc, test_printed_forms);
    suite_add_tcase(s, tc);
    return s;
}

int main(void)
{
    SRunner *sr = srunner_create(suite());
    srunner_run_all(sr, CK_NORMAL);
    int failed = srunner_ntests_failed(sr);
    srunner_free(sr);
    return failed ? EXIT_FAILURE : EXIT_SUCCESS;
}
