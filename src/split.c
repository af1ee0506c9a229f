/* The burst-era / tail-era pipeline (split.h): burst, gates, the run over shots and the
 * statistics of several shots; the fits themselves are in split_fit.c, the sweep in
 * split_sweep.c.
 *
 * The era shift's error adds the two eras' errors in quadrature: the gates are disjoint, so
 * their noise is independent and the two fitted centres are uncorrelated. */
#include "split_impl.h"

#include <gsl/gsl_cdf.h>

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

/* ---------------------------------------------------------------- names and defaults */

const char *cs_split_era_name(cs_split_era e)
{
    return e == CS_SPLIT_BURST ? "burst" : e == CS_SPLIT_TAIL ? "tail" : "unknown";
}

const char *cs_split_status_name(cs_split_status s)
{
    switch (s) {
    case CS_SPLIT_OK: return "ok";
    case CS_SPLIT_NO_BURST: return "no burst";
    case CS_SPLIT_NO_GATE: return "no gate";
    case CS_SPLIT_NO_LINE: return "no line above noise";
    case CS_SPLIT_NOT_CONVERGED: return "not converged";
    case CS_SPLIT_FAILED: return "failed";
    }
    return "unknown";
}

void cs_split_params_default(cs_split_params *p)
{
    if (!p)
        return;
    memset(p, 0, sizeof *p);
    cs_window_parse("hann", &p->early_window, NULL);
    cs_window_parse("rect", &p->late_window, NULL);
    cs_window_parse("rect", &p->whole_window, NULL);
    p->pad = 2;
    p->lo_hz = NAN;
    p->ref_hz = NAN;
    p->burst_model = "burst";
    p->tail_model = "decay";
    p->burst_plain = "sech2";
    p->tail_plain = "lorentz";
    p->whole_model = "sech2+lorentz";
    p->baseline = CS_BASELINE_CONST;
    p->noise = CS_GATEFIT_NOISE_RESIDUALS;
    p->noise_sd = 0.0;
    p->burst_min_rise = 0.4;
    p->pencil = 1;
    p->power_average = 0;
    p->agree_nsigma = 3.0;
    p->detect_fap = 1e-3;
    cs_envelope_params_default(&p->envelope);
    cs_burst_params_default(&p->burst);
}

void cs_split_impl_line_nan(cs_split_line *l)
{
    l->ok = 0;
    l->center_hz = l->center_hz_err = l->fwhm_hz = l->fwhm_hz_err = NAN;
    l->area = l->area_err = l->shift_hz = l->shift_hz_err = NAN;
}

/* ---------------------------------------------------------------- statistics */

double cs_split_agreement(double a, double ea, double b, double eb)
{
    if (!isfinite(a) || !isfinite(b) || !isfinite(ea) || !isfinite(eb))
        return NAN;
    double s = sqrt(ea * ea + eb * eb);
    return s > 0 ? fabs(a - b) / s : NAN;
}

int cs_split_combine(const double *x, const double *err, size_t n, cs_split_stat *st)
{
    if (!st)
        return CS_EINVAL;
    st->n = st->dof = 0;
    st->mean = st->mean_err = st->sd = st->chi2 = st->redchi2 = st->p_value = NAN;
    if ((!x || !err) && n > 0)
        return CS_EINVAL;
    double sw = 0.0, swx = 0.0, s1 = 0.0;
    size_t k = 0;
    for (size_t i = 0; i < n; i++) {
        if (!isfinite(x[i]) || !isfinite(err[i]) || !(err[i] > 0))
            continue;
        double w = 1.0 / (err[i] * err[i]);
        sw += w;
        swx += w * x[i];
        s1 += x[i];
        k++;
    }
    if (k == 0)
        return CS_EDATA;
    st->n = k;
    st->mean = swx / sw;
    st->mean_err = 1.0 / sqrt(sw);
    if (k < 2)
        return CS_OK;
    double mu = s1 / (double)k, ss = 0.0, chi2 = 0.0;
    for (size_t i = 0; i < n; i++) {
        if (!isfinite(x[i]) || !isfinite(err[i]) || !(err[i] > 0))
            continue;
        ss += (x[i] - mu) * (x[i] - mu);
        double z = (x[i] - st->mean) / err[i];
        chi2 += z * z;
    }
    st->sd = sqrt(ss / (double)(k - 1));
    st->chi2 = chi2;
    st->dof = k - 1;
    st->redchi2 = chi2 / (double)(k - 1);
    st->p_value = gsl_cdf_chisq_Q(chi2, (double)(k - 1));
    return CS_OK;
}

/* ---------------------------------------------------------------- releasing */

void cs_split_impl_fit_release(cs_split_fit *f)
{
    cs_gatefit_result_free(f->gfit);
    cs_fit_result_free(f->pfit);
    cs_model_free(f->pmodel);
    f->gfit = NULL;
    f->pfit = NULL;
    f->pmodel = NULL;
}

static void shot_release(cs_split_shot *sh)
{
    if (!sh)
        return;
    for (int e = 0; e < CS_SPLIT_NERA; e++)
        cs_split_impl_fit_release(&sh->era[e]);
    cs_split_impl_fit_release(&sh->whole);
    free(sh->sweep);
    free(sh->source);
    sh->sweep = NULL;
    sh->source = NULL;
}

void cs_split_result_free(cs_split_result *r)
{
    if (!r)
        return;
    for (size_t i = 0; i < r->nshots; i++)
        shot_release(&r->shots[i]);
    free(r->shots);
    shot_release(r->average);
    free(r->average);
    free(r);
}

/* ---------------------------------------------------------------- small helpers */

static void fit_init(cs_split_fit *f)
{
    memset(f, 0, sizeof *f);
    f->status = CS_SPLIT_FAILED;
    cs_split_impl_line_nan(&f->line);
    f->significance = f->significance_min = NAN;
    f->fmin_hz = f->fmax_hz = f->df_hz = f->enbw_hz = f->err_scale = f->energy_scale = NAN;
    f->block = 1;
}

/* 1 when text is a gate-aware model, 0 when it is a plain one, -1 when neither. */
static int model_kind(const char *text)
{
    cs_gatefit_kind kinds[CS_GATEFIT_MAX_COMP];
    size_t nc;
    if (cs_gatefit_parse(text, kinds, CS_GATEFIT_MAX_COMP, &nc, NULL) == CS_OK)
        return 1;
    cs_model *m = cs_model_alloc(text, CS_BASELINE_CONST, CS_MODEL_SUM, NULL);
    if (m) {
        cs_model_free(m);
        return 0;
    }
    return -1;
}

/* ---------------------------------------------------------------- one shot */

/* Whether the detected burst counts as one (split.h, burst_min_rise); why not into msg. */
static int burst_usable(const cs_split_params *p, const cs_burst *b, char *msg, size_t n)
{
    if (b->status != CS_BURST_FOUND) {
        snprintf(msg, n, "no burst: the envelope's peak is %.3g noise sigmas above the floor (a burst needs %.3g)",
                 b->snr, p->burst.min_snr);
        return 0;
    }
    if (p->burst_min_rise > 0 && b->onset_clipped) {
        snprintf(msg, n, "no burst: the emission is strongest at the record's start (no rise before the peak at %.6g s)",
                 b->peak_time_s);
        return 0;
    }
    double rise = b->peak_time_s - b->half_rise_s, fall = b->half_fall_s - b->peak_time_s;
    if (p->burst_min_rise > 0 && fall > 0 && rise < p->burst_min_rise * fall) {
        snprintf(msg, n,
                 "no burst: the emission steps up and decays (half-maximum rise %.3g of the fall; a burst needs %.3g)",
                 rise / fall, p->burst_min_rise);
        return 0;
    }
    return 1;
}

static const char *era_model(const cs_split_params *p, cs_split_era e, int averaged, int *gate_aware)
{
    const char *m = e == CS_SPLIT_BURST ? p->burst_model : p->tail_model;
    *gate_aware = model_kind(m) == 1;
    if (averaged && *gate_aware) {
        *gate_aware = 0;
        m = e == CS_SPLIT_BURST ? p->burst_plain : p->tail_plain;
    }
    return m;
}

/* Analyse rec into sh. With nshots > 1 (the power average) the gated spectra of all shots are
 * averaged and fitted with plain profiles; no pencil, no sweep. */
static int analyse_shot(const split_ctx *cx, const cs_record *rec, cs_record *const *shots, size_t nshots,
                        cs_split_shot *sh, cs_error *err)
{
    const cs_split_params *p = cx->p;
    int averaged = nshots > 1;
    const char *src = rec->source ? rec->source : "";
    sh->source = malloc(strlen(src) + 1);
    if (!sh->source)
        return cs_error_set(err, CS_ENOMEM, NULL, -1, -1, "out of memory");
    strcpy(sh->source, src);
    sh->shot = rec->shot;
    sh->is_complex = rec->is_complex;
    sh->status = CS_SPLIT_OK;
    sh->era_shift_hz = sh->era_shift_hz_err = NAN;
    for (int e = 0; e < CS_SPLIT_NERA; e++) {
        fit_init(&sh->era[e]);
        sh->agree_whole[e].z_center = sh->agree_whole[e].z_fwhm = NAN;
        sh->sweep_max_dev[e][0] = sh->sweep_max_dev[e][1] = NAN;
    }
    fit_init(&sh->whole);
    for (int e = 0; e < CS_SPLIT_NERA; e++)
        cs_split_impl_line_nan(&sh->whole_line[e]);
    for (int k = 0; k < CS_SPLIT_PENCIL_MAX; k++)
        cs_split_impl_line_nan(&sh->pencil[k]);
    sh->agree_pencil.z_center = sh->agree_pencil.z_fwhm = NAN;
    sh->pencil_status = CS_EDATA;

    /* LO and reference */
    sh->lo_hz = p->lo_hz;
    if (!isfinite(sh->lo_hz)) {
        sh->lo_from_meta = cs_meta_get_si(&rec->meta, "lo", CS_DIM_FREQUENCY, &sh->lo_hz, NULL) == CS_OK;
        if (!sh->lo_from_meta)
            sh->lo_hz = 0.0;
    }
    sh->ref_hz = p->ref_hz;
    if (!isfinite(sh->ref_hz)) {
        sh->ref_from_meta = cs_meta_get_si(&rec->meta, "reference", CS_DIM_FREQUENCY, &sh->ref_hz, NULL) == CS_OK;
        if (!sh->ref_from_meta)
            sh->ref_hz = NAN;
    }

    /* envelope and burst */
    cs_envelope *env = NULL;
    int rc = cs_envelope_compute(cx->ws, rec, &p->envelope, &env, err);
    if (rc != CS_OK)
        return rc;
    memset(&sh->burst, 0, sizeof sh->burst);
    sh->burst.status = CS_BURST_NONE;
    rc = cs_burst_detect(env, &p->burst, &sh->burst, err);
    sh->noise_floor = env->floor_raw;
    double floor_sd = sqrt(env->floor_raw / 2.0);
    cs_envelope_free(env);
    if (rc != CS_OK)
        return rc;
    char why[CS_ERROR_MSG_MAX];
    int have_burst = burst_usable(p, &sh->burst, why, sizeof why);

    /* gates */
    cs_gate autog[2];
    size_t nauto = 0;
    int auto_ok = 0;
    char auto_msg[CS_ERROR_MSG_MAX] = "";
    if (have_burst) {
        cs_error e2;
        if (cs_gate_auto(rec, &sh->burst, &p->early_window, autog, &nauto, &e2) == CS_OK) {
            auto_ok = 1;
            if (nauto == 2)
                autog[1].window = p->late_window;
        } else {
            snprintf(auto_msg, sizeof auto_msg, "%s", e2.msg);
        }
    }
    for (int e = 0; e < CS_SPLIT_NERA; e++) {
        cs_split_fit *f = &sh->era[e];
        const char *spec_text = e == CS_SPLIT_BURST ? p->gate_early : p->gate_late;
        const cs_window *dw = e == CS_SPLIT_BURST ? &p->early_window : &p->late_window;
        char wb[CS_WINDOW_SPEC_MAX];
        if (!spec_text) {
            snprintf(f->spec, sizeof f->spec, e == CS_SPLIT_BURST ? "early=peak-2w:4w:%s" : "late=end+3w:rest:%s",
                     cs_window_format(dw, wb, sizeof wb));
            if (!have_burst) {
                cs_split_impl_fit_fail(f, CS_SPLIT_NO_BURST, "%s", why);
            } else if (!auto_ok) {
                cs_split_impl_fit_fail(f, CS_SPLIT_NO_GATE, "automatic gates: %s", auto_msg);
            } else if (e == CS_SPLIT_TAIL && nauto < 2) {
                cs_split_impl_fit_fail(f, CS_SPLIT_NO_GATE,
                         "the record ends too soon after the burst for a late gate (from 3 burst widths after its end)");
            } else {
                f->gate = autog[e];
                f->gate_ok = 1;
            }
        } else {
            snprintf(f->spec, sizeof f->spec, "%s", spec_text);
            cs_gate_spec spec;
            cs_error e2;
            if (cs_gate_spec_parse(spec_text, dw, &spec, &e2) != CS_OK) {
                if (err)
                    *err = e2;
                return e2.code;
            }
            if (cs_gate_spec_needs_burst(&spec) && !have_burst) {
                cs_split_impl_fit_fail(f, CS_SPLIT_NO_BURST, "gate '%s' needs a burst; %s", spec_text, why);
            } else if (cs_gate_resolve(&spec, rec, have_burst ? &sh->burst : NULL, &f->gate, &e2) != CS_OK) {
                cs_split_impl_fit_fail(f, CS_SPLIT_NO_GATE, "gate '%s': %s", spec_text, e2.msg);
            } else {
                f->gate_ok = 1;
            }
        }
    }

    /* the matrix pencil of the tail gate first: its strongest decaying component also starts
       the tail era's gate-aware fit (which would otherwise run a pencil of its own on the same
       samples for its starting values) */
    if (p->pencil && !averaged) {
        rc = cs_split_impl_pencil(cx->ws, rec, sh, err);
        if (rc != CS_OK)
            return rc;
    }
    cs_gatefit_start tail_hint;
    const cs_gatefit_start *hint = NULL;
    if (p->pencil && !averaged && sh->npencil > 0 && sh->pencil[0].ok) {
        cs_gatefit_start_init(&tail_hint);
        tail_hint.center_hz = sh->pencil[0].center_hz;
        tail_hint.gamma_per_s = 2.0 * 3.14159265358979323846 * sh->pencil[0].fwhm_hz;
        if (isfinite(tail_hint.center_hz) && tail_hint.gamma_per_s > 0 && isfinite(tail_hint.gamma_per_s))
            hint = &tail_hint;
    }

    /* the eras */
    for (int e = 0; e < CS_SPLIT_NERA; e++) {
        cs_split_fit *f = &sh->era[e];
        int ga;
        const char *model = era_model(p, (cs_split_era)e, averaged, &ga);
        if (!f->gate_ok) {
            f->gate_aware = ga;
            snprintf(f->model, sizeof f->model, "%s", model);
            continue;
        }
        cs_gate g = f->gate;
        rc = cs_split_impl_fit_era(cx, rec, shots, nshots, (cs_split_era)e, &g, model, ga, sh->lo_hz, sh->ref_hz,
                                   floor_sd, NULL, e == CS_SPLIT_TAIL ? hint : NULL, f, err);
        if (rc != CS_OK)
            return rc;
    }
    for (int e = 0; e < CS_SPLIT_NERA; e++)
        if (sh->era[e].status != CS_SPLIT_OK && sh->status == CS_SPLIT_OK) {
            sh->status = sh->era[e].status;
            snprintf(sh->message, sizeof sh->message, "%s era: %s", cs_split_era_name((cs_split_era)e),
                     sh->era[e].message);
        }
    const cs_split_line *lb = &sh->era[CS_SPLIT_BURST].line, *lt = &sh->era[CS_SPLIT_TAIL].line;
    if (lb->ok && lt->ok) {
        sh->era_shift_hz = lb->center_hz - lt->center_hz;
        sh->era_shift_hz_err = hypot(lb->center_hz_err, lt->center_hz_err);
    }

    /* independent estimates */
    rc = cs_split_impl_whole(cx, rec, shots, nshots, sh, err);
    if (rc != CS_OK)
        return rc;
    for (int e = 0; e < CS_SPLIT_NERA; e++)
        cs_split_impl_agree(&sh->era[e].line, &sh->whole_line[e], p->agree_nsigma, &sh->agree_whole[e]);
    cs_split_impl_agree(lt, &sh->pencil[0], p->agree_nsigma, &sh->agree_pencil);

    /* gate sweep */
    if (!averaged && have_burst && (p->sweep.late_start.n > 0 || p->sweep.early_width.n > 0)) {
        rc = cs_split_impl_sweep(cx, rec, sh, err);
        if (rc != CS_OK)
            return rc;
    }
    return CS_OK;
}

/* ---------------------------------------------------------------- the run */

static int check_params(const cs_split_params *p, cs_error *err)
{
    if (p->pad < 1)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "pad must be at least 1");
    if (!(p->agree_nsigma > 0))
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "agreement threshold must be positive");
    if (!(p->detect_fap > 0 && p->detect_fap < 1))
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "false-alarm probability must lie in (0, 1)");
    if (!(p->noise_sd >= 0) || !(p->burst_min_rise >= 0))
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "noise_sd and burst_min_rise must not be negative");
    const char *models[] = {p->burst_model, p->tail_model, p->burst_plain, p->tail_plain};
    const char *what[] = {"burst model", "tail model", "burst plain model", "tail plain model"};
    for (int i = 0; i < 4; i++) {
        if (!models[i] || model_kind(models[i]) < 0)
            return cs_error_set(err, CS_EINVAL, NULL, -1, -1,
                                "%s '%s': neither gate-aware components (decay, burst) nor plain profiles", what[i],
                                models[i] ? models[i] : "(null)");
    }
    for (int i = 2; i < 4; i++)
        if (model_kind(models[i]) != 0)
            return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "%s '%s': must be made of plain profiles", what[i],
                                models[i]);
    if (p->whole_model && *p->whole_model && model_kind(p->whole_model) != 0)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "whole-record model '%s': must be made of plain profiles",
                            p->whole_model);
    const char *gates[] = {p->gate_early, p->gate_late};
    for (int i = 0; i < 2; i++) {
        cs_gate_spec spec;
        cs_error e2;
        if (gates[i] && cs_gate_spec_parse(gates[i], NULL, &spec, &e2) != CS_OK)
            return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "gate '%s': %s", gates[i], e2.msg);
    }
    return CS_OK;
}

static void combine_shots(cs_split_result *r)
{
    size_t n = r->nshots;
    double *x = malloc((n ? n : 1) * sizeof *x), *e = malloc((n ? n : 1) * sizeof *e);
    if (!x || !e) {
        free(x);
        free(e);
        return;
    }
    for (int era = 0; era < CS_SPLIT_NERA; era++) {
        for (int q = 0; q < 3; q++) {
            for (size_t i = 0; i < n; i++) {
                const cs_split_line *l = &r->shots[i].era[era].line;
                x[i] = q == 0 ? l->center_hz : q == 1 ? l->fwhm_hz : l->shift_hz;
                e[i] = q == 0 ? l->center_hz_err : q == 1 ? l->fwhm_hz_err : l->shift_hz_err;
            }
            cs_split_stat *st = q == 0 ? &r->center[era] : q == 1 ? &r->fwhm[era] : &r->shift[era];
            cs_split_combine(x, e, n, st);
        }
    }
    for (size_t i = 0; i < n; i++) {
        x[i] = r->shots[i].era_shift_hz;
        e[i] = r->shots[i].era_shift_hz_err;
    }
    cs_split_combine(x, e, n, &r->era_shift);
    free(x);
    free(e);
}

int cs_split_run(cs_gate_workspace *ws, cs_record *const *recs, size_t nrec, const cs_split_params *p,
                 cs_split_result **out, cs_error *err)
{
    if (!out)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "no place for the result");
    *out = NULL;
    if (!recs || nrec == 0)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "no record given");
    for (size_t i = 0; i < nrec; i++)
        if (!recs[i])
            return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "record %zu is NULL", i);
    cs_split_params defp;
    if (!p) {
        cs_split_params_default(&defp);
        p = &defp;
    }
    int rc = check_params(p, err);
    if (rc != CS_OK)
        return rc;
    cs_gate_workspace *own = NULL;
    if (!ws) {
        ws = own = cs_gate_alloc();
        if (!ws)
            return cs_error_set(err, CS_ENOMEM, NULL, -1, -1, "out of memory");
    }
    split_ctx cx = {ws, p};
    cs_split_result *r = calloc(1, sizeof *r);
    if (r)
        r->shots = calloc(nrec, sizeof *r->shots);
    if (!r || !r->shots) {
        free(r);
        cs_gate_free(own);
        return cs_error_set(err, CS_ENOMEM, NULL, -1, -1, "out of memory");
    }
    r->nshots = nrec;
    for (size_t i = 0; i < nrec && rc == CS_OK; i++) {
        rc = analyse_shot(&cx, recs[i], recs + i, 1, &r->shots[i], err);
        if (rc != CS_OK && err && recs[i]->source && !err->file[0])
            snprintf(err->file, sizeof err->file, "%s", recs[i]->source);
    }
    if (rc == CS_OK && p->power_average) {
        r->average = calloc(1, sizeof *r->average);
        if (!r->average)
            rc = cs_error_set(err, CS_ENOMEM, NULL, -1, -1, "out of memory");
        else
            rc = analyse_shot(&cx, recs[0], recs, nrec, r->average, err);
    }
    cs_gate_free(own);
    if (rc != CS_OK) {
        cs_split_result_free(r);
        return rc;
    }
    combine_shots(r);
    r->status = CS_SPLIT_OK;
    const cs_split_shot *bad = NULL;
    for (size_t i = 0; i < nrec && !bad; i++)
        if (r->shots[i].status != CS_SPLIT_OK)
            bad = &r->shots[i];
    if (!bad && r->average && r->average->status != CS_SPLIT_OK)
        bad = r->average;
    *out = r;
    if (bad) {
        r->status = bad->status;
        cs_error_set(err, CS_ENOCONV, bad->source[0] ? bad->source : NULL, -1, -1, "%s%s", bad == r->average ? "power average: " : "",
                     bad->message);
        return CS_ENOCONV;
    }
    if (err)
        cs_error_clear(err);
    return CS_OK;
}
