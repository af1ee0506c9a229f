/* Era fits of the split pipeline (split.h): gate-aware fits through a gate, plain profiles on
 * gated power spectra, the whole-record estimate, the matrix pencil and their agreement.
 *
 * The whole-record spectrum uses a RECTANGULAR window by default. A record of this kind starts
 * in the noise (before the burst) and ends in the noise (after the tail has faded), so the
 * signal is not truncated and a rectangular window leaks nothing. A taper instead multiplies the
 * signal by a slowly varying weight: for a hann window over a record whose burst sits near its
 * start the weight rises roughly as t^2 across the tail, which slows the tail's apparent decay
 * and narrows its line (on the bundled demo record the tail's line is no longer found), and it
 * weights the burst down by more than an order of magnitude. A taper is still available
 * (whole_window).
 *
 * The gate-aware fits' noise level is by default the fit's own residual scatter (gatefit.h):
 * an early gate that also holds part of the tail, which the burst model does not describe,
 * then gets correspondingly larger errors instead of errors that pretend the model is exact.
 *
 * The whole-record fit covers only the BAND of the spectrum that holds the lines (whole_band),
 * not the whole axis: the whole record's spectrum has many more bins than the gates' (2^18 for a
 * record of 2^17 samples padded twice), nearly all of them floor, and fitting them all several
 * times (the equal-weight pass and the reweighted passes) dominated the run. The band is found
 * from the PSD itself: block means of 16-64 bins, their median as the floor and 1.4826 x their
 * median absolute deviation as the noise unit; the blocks more than 6 noise units above the floor
 * span the excess, which is widened on each side by the largest of 20 ENBWs (no line is narrower
 * than the resolution), 256 bins and the excess's own span, then clipped to the axis. Below the
 * excess the lines' tails are lost in the noise, and the widening leaves at least as many floor
 * bins as line bins to fix the floor and the profiles' wings; on a 2^17-sample record the fitted
 * lines move by <= 0.1 of their errors against a fit of the whole axis. The whole axis is still
 * fitted when the spectrum has fewer than 4096 bins, nothing stands out of the floor, or the band
 * would cover more than half the axis (the bundled demo record). fmin_hz/fmax_hz report the band
 * fitted.
 *
 * The band is then fitted as MEANS OF BLOCKS of K adjacent bins (about 1024 blocks; K = 21 on a
 * 2^17-sample record), with the model averaged over each block (cs_fit_parameters.bin_width,
 * two-point Gauss-Legendre matched to the mean of K samples) so that no block width biases a
 * line, and every block at most 1/12 of the narrowest line: of the era fits' lines before the
 * fit, of the fitted lines after it (a fit with a narrower line, or one that does not converge,
 * is repeated with blocks short enough, at most 4 times shorter per refit, single bins in the
 * end). The weights follow the block
 * mean's variance: a bin's variance times g(K)/K, where g(K) sums the correlation of
 * neighbouring bins of the padded, windowed transform (cs_gate_block_variance; exact where the
 * floor dominates a block, within ~20 % next to a strong line), and the errors are scaled by
 * sqrt(ginf / g(K)) for what correlation is left between blocks (ginf = enbw/df for the
 * rectangular window). Where the model describes
 * the spectrum this gives the single-bin fit's values and errors (within 0.06 of its errors and
 * 0.3 % in tests/test_split.c) at a fraction of the cost (the whole-record estimate went from
 * ~1.2 G to ~0.1 G instructions per 2^17-sample record); where it does not (burst and tail
 * interfere in one spectrum), the block means show the misfit that the exponential scatter of
 * single bins hides, chi2/dof grows and so do the errors. --whole-block 1 fits every bin.
 *
 * The weights of the reweighted passes come from the model of the pass before (floor and line,
 * plain_passes), except the first weighted pass's floor: that is the band search's median floor,
 * because the equal-weight pass's floor is pulled by the lines' residuals (to twice the final
 * floor, or below 0, on the synthetic records of bench/compare), and a floor below 0 used to make
 * every bin count as the model's pure exponential scatter, which let a narrow component collapse. */
#include "split_impl.h"

#include <collshift/profile.h>

#include <gsl/gsl_statistics_double.h>

#include <math.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

/* Most weighted passes of a plain fit of a spectrum (see plain_fit). */
#define SPLIT_PASSES 4

/* ---------------------------------------------------------------- shared helpers */

void cs_split_impl_fit_fail(cs_split_fit *f, cs_split_status st, const char *fmt, ...)
{
    f->status = st;
    va_list ap;
    va_start(ap, fmt);
    vsnprintf(f->message, sizeof f->message, fmt, ap);
    va_end(ap);
    cs_split_impl_line_nan(&f->line);
}

/* sqrt(2 ln(m / p)): the significance that noise alone reaches with probability ~ p among m
 * trial frequencies (see split.h). */
double cs_split_impl_min_significance(size_t m, double fap)
{
    double mm = m > 1 ? (double)m : 2.0;
    return sqrt(2.0 * log(mm / fap));
}

void cs_split_impl_set_shift(cs_split_line *l, double ref_hz)
{
    if (l->ok && isfinite(ref_hz)) {
        l->shift_hz = l->center_hz - ref_hz;
        l->shift_hz_err = l->center_hz_err;
    } else {
        l->shift_hz = l->shift_hz_err = NAN;
    }
}

/* ---------------------------------------------------------------- gate-aware era fits */

/* Energy of component c of r (see split.h) and its standard error. */
static void gatefit_energy(const cs_gatefit_result *r, const cs_gatefit_component *c, double *E, double *Eerr)
{
    const size_t np = r->nparams;
    double half = r->is_complex ? 1.0 : 0.5, A = c->amplitude;
    size_t ia, ir;
    double e, gr;
    if (c->kind == CS_GATEFIT_DECAY) {
        ia = c->first + 2;
        ir = c->first + 1;
        e = half * A * A / c->gamma_per_s;
        gr = -e / c->gamma_per_s;
    } else {
        ia = c->first + 3;
        ir = c->first + 1;
        e = half * 2.0 * A * A * c->tau_s;
        gr = e / c->tau_s;
    }
    double ga = A != 0 ? 2.0 * e / A : 0.0;
    double v = ga * ga * r->cov[ia * np + ia] + gr * gr * r->cov[ir * np + ir] + 2.0 * ga * gr * r->cov[ia * np + ir];
    *E = e;
    *Eerr = v >= 0 ? sqrt(v) : NAN;
}

static int gatefit_era(const split_ctx *cx, const cs_record *rec, cs_split_era era, const cs_gate *g,
                       const char *model, double lo_hz, double ref_hz, double floor_sd,
                       const cs_gatefit_result *from, const cs_gatefit_start *hint, cs_split_fit *f,
                       cs_error *err)
{
    const cs_split_params *p = cx->p;
    cs_gatefit_options o;
    cs_gatefit_options_default(&o);
    cs_gatefit_start st[CS_GATEFIT_MAX_COMP];
    if (from && from->ncomp <= CS_GATEFIT_MAX_COMP) {
        for (size_t k = 0; k < from->ncomp; k++) {
            const cs_gatefit_component *c = &from->comp[k];
            cs_gatefit_start_init(&st[k]);
            st[k].center_hz = c->center_hz;
            if (c->kind == CS_GATEFIT_DECAY) {
                st[k].gamma_per_s = c->gamma_per_s;
            } else {
                st[k].tau_s = c->tau_s;
                st[k].t_peak_s = c->t_peak_s;
            }
        }
        o.start = st;
        o.nstart = from->ncomp;
    } else if (hint) {
        cs_gatefit_kind kinds[CS_GATEFIT_MAX_COMP];
        size_t nc = 0;
        if (cs_gatefit_parse(model, kinds, CS_GATEFIT_MAX_COMP, &nc, NULL) == CS_OK && nc == 1) {
            st[0] = *hint;
            o.start = st;
            o.nstart = 1;
        }
    }
    o.noise = p->noise;
    if (p->noise == CS_GATEFIT_NOISE_GIVEN) {
        o.noise_sd = p->noise_sd > 0 ? p->noise_sd : floor_sd;
        if (!(o.noise_sd > 0)) {
            cs_split_impl_fit_fail(f, CS_SPLIT_FAILED, "gate '%s': the record's noise floor is zero or unknown", g->name);
            return CS_OK;
        }
    }
    cs_error e2;
    cs_error_clear(&e2);
    int rc = cs_gatefit_run(cx->ws, rec, g, model, lo_hz, &o, &f->gfit, &e2);
    if (rc == CS_ENOMEM || rc == CS_EUNSUP || rc == CS_EINVAL) {
        if (err)
            *err = e2;
        return rc;
    }
    if (rc == CS_ERANGE) {
        cs_split_impl_fit_fail(f, CS_SPLIT_NO_GATE, "gate '%s': %s", g->name, e2.msg);
        return CS_OK;
    }
    if (rc == CS_EDATA) {
        cs_split_impl_fit_fail(f, CS_SPLIT_FAILED, "gate '%s': %s", g->name, e2.msg);
        return CS_OK;
    }
    const cs_gatefit_result *r = f->gfit;
    if (!r) {
        cs_split_impl_fit_fail(f, CS_SPLIT_FAILED, "gate '%s': %s", g->name, e2.msg);
        return CS_OK;
    }
    f->first = r->first;
    f->m = r->m;
    f->nshots = 1;
    if (rc == CS_ENOCONV) {
        cs_split_impl_fit_fail(f, CS_SPLIT_NOT_CONVERGED, "%s", e2.msg);
        return CS_OK;
    }
    /* the era's component: preferred kind, largest energy */
    cs_gatefit_kind want = era == CS_SPLIT_BURST ? CS_GATEFIT_BURST : CS_GATEFIT_DECAY;
    int have_want = 0;
    for (size_t k = 0; k < r->ncomp; k++)
        have_want |= r->comp[k].kind == want;
    size_t best = 0;
    double bestE = -INFINITY, E = NAN, Eerr = NAN;
    for (size_t k = 0; k < r->ncomp; k++) {
        if (have_want && r->comp[k].kind != want)
            continue;
        double ek, eke;
        gatefit_energy(r, &r->comp[k], &ek, &eke);
        if (bestE == -INFINITY || (isfinite(ek) && ek > bestE)) {
            best = k;
            bestE = isfinite(ek) ? ek : bestE;
            E = ek;
            Eerr = eke;
        }
    }
    const cs_gatefit_component *c = &r->comp[best];
    f->component = best;
    f->significance = c->amplitude_err > 0 ? c->amplitude / c->amplitude_err : NAN;
    f->significance_min = cs_split_impl_min_significance(r->nused, p->detect_fap);
    if (isfinite(f->significance) && f->significance < f->significance_min) {
        cs_split_impl_fit_fail(f, CS_SPLIT_NO_LINE, "gate '%s': no line above the noise (amplitude/error %.3g < %.3g)", g->name,
                 f->significance, f->significance_min);
        return CS_OK;
    }
    if (!isfinite(c->center_hz_err) || !isfinite(c->fwhm_hz_err) || !isfinite(f->significance)) {
        cs_split_impl_fit_fail(f, CS_SPLIT_NOT_CONVERGED, "gate '%s': the fit of '%s' leaves the line's errors undetermined", g->name,
                 model);
        return CS_OK;
    }
    cs_split_line *l = &f->line;
    l->ok = 1;
    l->center_hz = c->center_hz;
    l->center_hz_err = c->center_hz_err;
    l->fwhm_hz = c->fwhm_hz;
    l->fwhm_hz_err = c->fwhm_hz_err;
    l->area = E;
    l->area_err = Eerr;
    cs_split_impl_set_shift(l, ref_hz);
    f->status = CS_SPLIT_OK;
    f->message[0] = '\0';
    return CS_OK;
}

/* ---------------------------------------------------------------- plain fits of spectra */

/* Block means of a spectrum for the band search (whole_band): block width in bins. */
#define BAND_BLOCK_MIN 16
#define BAND_BLOCK_MAX 64
/* Noise units (robust scatter of the block means) above the median floor that mark a block as
 * part of the lines. */
#define BAND_NSIGMA 6.0
/* The band is widened on each side by the largest of: BAND_WIDTHS narrowest plausible widths
 * (the window's ENBW: no line is narrower than the resolution), BAND_MIN_BINS bins, and
 * BAND_SPAN_FRAC times the span of the excess. */
#define BAND_WIDTHS 20.0
#define BAND_MIN_BINS 256
#define BAND_SPAN_FRAC 1.0
/* Spectra shorter than this, or a band longer than half the axis: fit the whole axis. */
#define BAND_MIN_AXIS 4096
/* Blocks of the whole-record band: about BLOCK_TARGET of them when the band holds at least
 * BLOCK_MIN_BINS bins, and no longer than 1/BLOCK_PER_FWHM of the narrowest fitted line. */
#define BLOCK_TARGET 1024
#define BLOCK_MIN_BINS 4096
#define BLOCK_PER_FWHM 12.0
#define BLOCK_STEP 4   /* a refit's blocks are at most this many times shorter */

/* The band of bins [*i0, *i0 + *nb) of a PSD that holds its lines (see the comment at the top):
 * block means of w bins, their median as the floor and 1.4826 x their median absolute deviation
 * as the noise unit; the blocks more than BAND_NSIGMA noise units above the floor span the
 * excess, which is widened (see BAND_WIDTHS) and clipped to the axis. The whole axis when the
 * spectrum is short, nothing stands out, the floor is not positive or the band would cover more
 * than half the axis. *floor: that median of block means (the noise floor), NaN when the
 * spectrum is too short for it. Returns CS_OK or CS_ENOMEM. */
static int whole_band(const cs_gated_spectrum *gs, size_t *i0, size_t *nb, double *floor)
{
    const cs_spectrum *s = gs->psd;
    const size_t n = s->n;
    *i0 = 0;
    *nb = n;
    *floor = NAN;
    if (n < BAND_MIN_AXIS)
        return CS_OK;
    size_t w = n / 1024;
    w = w < BAND_BLOCK_MIN ? BAND_BLOCK_MIN : w > BAND_BLOCK_MAX ? BAND_BLOCK_MAX : w;
    const size_t nblk = n / w;
    double *bm = malloc(nblk * sizeof *bm), *tmp = malloc(nblk * sizeof *tmp);
    if (!bm || !tmp) {
        free(bm);
        free(tmp);
        return CS_ENOMEM;
    }
    for (size_t b = 0; b < nblk; b++) {
        double sum = 0.0;
        for (size_t i = b * w; i < (b + 1) * w; i++)
            sum += s->y[i];
        bm[b] = sum / (double)w;
    }
    /* the element of rank nblk / 2 (the upper median), selected without a full sort
       (gsl_stats_select: quickselect, reorders tmp) */
    memcpy(tmp, bm, nblk * sizeof *tmp);
    double floor_med = gsl_stats_select(tmp, 1, nblk, nblk / 2);
    *floor = floor_med;
    for (size_t b = 0; b < nblk; b++)
        tmp[b] = fabs(bm[b] - floor_med);
    double unit = 1.4826 * gsl_stats_select(tmp, 1, nblk, nblk / 2);
    free(tmp);
    size_t lo = nblk, hi = 0;
    if (floor_med > 0 && unit > 0 && isfinite(floor_med) && isfinite(unit)) {
        double thr = floor_med + BAND_NSIGMA * unit;
        for (size_t b = 0; b < nblk; b++)
            if (bm[b] > thr) {
                lo = b < lo ? b : lo;
                hi = b;
            }
    }
    free(bm);
    if (lo > hi)
        return CS_OK;   /* nothing stands out: the whole axis */
    double first = (double)(lo * w), last = (double)((hi + 1) * w);   /* bins [first, last) */
    double margin = fmax(fmax(BAND_WIDTHS * gs->enbw_hz / gs->df_hz, (double)BAND_MIN_BINS),
                         BAND_SPAN_FRAC * (last - first));
    first = fmax(first - margin, 0.0);
    last = fmin(last + margin, (double)n);
    if (!(last - first < 0.5 * (double)n))
        return CS_OK;
    *i0 = (size_t)first;
    *nb = (size_t)last - *i0;
    return CS_OK;
}

static int plain_fit_bins(const split_ctx *cx, const cs_gated_spectrum *gs, const char *model, const double *fx,
                          const double *fy, size_t n, int blocks, double hint_hz, double floor_hint, cs_split_fit *f,
                          cs_error *err);

/* Fit `model` plus the floor to a gated PSD in two passes (split.h), errors scaled for the
 * correlation of neighbouring bins (cs_gate_block_variance). band: fit only the bins that hold
 * the lines (whole_band; the whole-record estimate) as block means, with hint_hz (NaN: none) the
 * narrowest line width known beforehand; else the whole axis bin by bin. Leaves the fit in
 * f->pmodel, f->pfit and sets the spectrum fields; the status is set to OK or a failure (the
 * caller then chooses the component). */
static int plain_fit(const split_ctx *cx, const cs_gated_spectrum *gs, const char *model, int band, double hint_hz,
                     cs_split_fit *f, cs_error *err)
{
    const cs_spectrum *s = gs->psd;
    size_t i0 = 0, n = s->n;
    double floor_hint = NAN;
    if (band && whole_band(gs, &i0, &n, &floor_hint) != CS_OK)
        return cs_error_set(err, CS_ENOMEM, NULL, -1, -1, "out of memory");
    const double *fx = s->freq_hz + i0, *fy = s->y + i0;   /* the bins fitted */
    f->fmin_hz = fx[0];
    f->fmax_hz = fx[n - 1];
    f->nfft = gs->nfft;
    f->nshots = gs->nshots;
    f->df_hz = gs->df_hz;
    f->enbw_hz = gs->enbw_hz;
    f->err_scale = NAN;   /* set by plain_fit_bins */
    f->energy_scale = gs->dt_s * gs->sum_w2;
    f->first = gs->first;
    f->m = gs->m;
    return plain_fit_bins(cx, gs, model, fx, fy, n, band, hint_hz, floor_hint, f, err);
}

/* Means of blocks of K bins of fx, fy (n bins; the last n % K dropped) into bx, by; the number of
 * blocks. */
static size_t make_blocks(const double *fx, const double *fy, size_t n, size_t K, double *bx, double *by)
{
    size_t nb = n / K;
    for (size_t b = 0; b < nb; b++) {
        double sx = 0.0, sy = 0.0;
        for (size_t i = b * K; i < (b + 1) * K; i++) {
            sx += fx[i];
            sy += fy[i];
        }
        bx[b] = sx / (double)K;
        by[b] = sy / (double)K;
    }
    return nb;
}

/* The narrowest line of a fit, converged or not: per component the largest of its width
 * parameters (the FWHM itself, or for a Voigt a lower bound of it), then the smallest over the
 * components. NaN when none is finite. */
static double narrowest_width(const cs_model *m, const cs_fit_result *r)
{
    double w = NAN;
    for (size_t c = 0; c < m->ncomp; c++) {
        const cs_model_component *mc = &m->comp[c];
        double wc = NAN;
        for (size_t k = 1; k < mc->type->nparams; k++)   /* parameter 0 is the centre */
            if (m->par[mc->first + k].kind == CS_PARAM_FREQUENCY && !(r->value[mc->first + k] <= wc))
                wc = r->value[mc->first + k];
        if (isfinite(wc) && wc > 0 && !(wc >= w))
            w = wc;
    }
    return w;
}

/* The passes of plain_fit_bins on the nx points x, y (bins, or blocks of K bins whose variance
 * factor is gK): the equal-weight pass, then weighted passes. Leaves the fit in f->pfit (or
 * NULL) and returns the last cs_fit_run code; e2 holds its message. */
static int plain_passes(cs_fit_workspace *fw, cs_model *bmod, const cs_gated_spectrum *gs, cs_split_fit *f,
                        const double *x, const double *y, size_t nx, size_t K, double gK, double floor_hint,
                        double *pv, double *sig, double *base, cs_error *e2)
{
    cs_fit_parameters par = cs_fit_default_parameters();
    /* the block is the mean of K samples df apart: the two nodes +-(width/2)/sqrt(3) match its
       second moment (K^2 - 1) df^2 / 12 when width = df sqrt(K^2 - 1), so the rule is exact
       for cubics over the K samples, and 0 for single bins */
    par.bin_width = K > 1 ? gs->df_hz * sqrt((double)K * (double)K - 1.0) : 0.0;
    par.weighting = CS_WEIGHT_NOISE;
    /* the equal-weight pass only starts the weighted ones: when it does not converge (it can
       crawl along a valley of a periodogram, whose scatter grows with the level, until the
       iteration limit), the weighted passes go on from where it stopped */
    cs_fit_result *r1 = NULL;
    int rc = cs_fit_run(fw, f->pmodel, x, y, NULL, NULL, nx, &par, &r1, e2);
    if (r1 && rc == CS_ENOCONV && r1->status == CS_FIT_NOT_CONVERGED)
        rc = CS_OK;
    if (!r1 || rc != CS_OK) {
        f->pfit = r1;
        return rc == CS_OK ? CS_EINVAL : rc;
    }
    cs_fit_result_free(r1);
    /* weighted passes: the variance of a periodogram bin of a line plus white noise, with F the
       noise floor (the fitted baseline) and S the line's part (model - floor), is F^2 + 2 F S
       (the noncentral chi-square of two degrees of freedom), divided by the number of shots of a
       power average, and for a block of K bins multiplied by g(K) / K (cs_gate_block_variance:
       exact where the floor dominates, within ~20 % next to a strong line, where the line's part
       of the variance is correlated differently between bins). The
       floor of the equal-weight pass can be far off when a strong line dominates the residuals,
       so the weights are renewed from each pass's model, up to SPLIT_PASSES times, until the
       floor settles within 1 %. */
    double kshots = (gs->nshots > 1 ? (double)gs->nshots : 1.0) * (double)K / gK, prev_floor = NAN;
    par.guess = 0;
    par.weighting = CS_WEIGHT_SIGMA;
    for (int pass = 0; pass < SPLIT_PASSES; pass++) {
        cs_model_get_values(f->pmodel, pv);
        int erc = cs_model_eval(f->pmodel, pv, x, nx, sig, NULL);
        if (erc == CS_OK && bmod) {   /* the floor alone: the baseline's own model (bmod) */
            bmod->x_ref = f->pmodel->x_ref;
            cs_model_eval(bmod, pv + f->pmodel->base_first, x, nx, base, NULL);
        } else if (erc == CS_OK && f->pmodel->baseline == CS_BASELINE_NONE) {
            for (size_t i = 0; i < nx; i++)
                base[i] = 0.0;
        } else {   /* the same floor as the model with every area 0 (NaN where the model is) */
            for (size_t k = 0; k < f->pmodel->ncomp; k++) {
                const cs_model_component *mc = &f->pmodel->comp[k];
                pv[mc->first + mc->type->nparams - 1] = 0.0;
            }
            cs_model_eval(f->pmodel, pv, x, nx, base, NULL);
        }
        double top = 0.0, floor_mid = base[nx / 2];
        for (size_t i = 0; i < nx; i++)
            top = fmax(top, fabs(sig[i]));
        if (pass > 0 && fabs(floor_mid - prev_floor) <= 0.01 * fabs(prev_floor))
            break;
        /* the floor these weights are built from (the first pass's: the median floor) */
        prev_floor = pass == 0 && floor_hint > 0 ? floor_hint : floor_mid;
        for (size_t i = 0; i < nx; i++) {
            /* the first weights take the median floor of the spectrum (whole_band's block
               means) when there is one: the equal-weight pass's floor is pulled by the lines'
               residuals, on the seed-8 records to twice the final floor or below 0 (then every
               bin would count as the model's pure exponential scatter); later passes take the
               fitted floor, or the median one where the fitted floor is not positive */
            double F = (pass > 0 && base[i] > 0) || !(floor_hint > 0) ? base[i] : floor_hint;
            double S = fmax(sig[i] - base[i], 0.0);
            double v = F > 0 ? F * F + 2.0 * F * S : sig[i] * sig[i];   /* no floor: exponential scatter */
            sig[i] = fmax(sqrt(v / kshots), 1e-6 * top);
        }
        cs_fit_result *next = NULL;
        rc = cs_fit_run(fw, f->pmodel, x, y, sig, NULL, nx, &par, &next, e2);
        if (!f->pfit && next && rc == CS_ENOCONV && next->stop == CS_FIT_STOP_NO_PROGRESS) {
            /* the trust region stalled next to the equal-weight optimum: once more from the
               automatic starting values under the same weights */
            cs_fit_result_free(next);
            next = NULL;
            par.guess = 1;
            rc = cs_fit_run(fw, f->pmodel, x, y, sig, NULL, nx, &par, &next, e2);
            par.guess = 0;
        }
        if (f->pfit && (!next || rc != CS_OK)) {
            /* a renewed pass that cannot move from where the previous one converged (the
               trust region reports no progress): keep the previous pass */
            cs_fit_result_free(next);
            cs_model_set_values(f->pmodel, f->pfit->value);
            rc = CS_OK;
            break;
        }
        cs_fit_result_free(f->pfit);
        f->pfit = next;
        if (!next || rc != CS_OK)
            break;
    }
    return rc;
}

/* The fit of plain_fit on the n bins fx, fy (the spectrum fields of f already set). blocks: the
 * whole-record band, fitted as means of blocks of bins (see the comment at the top): about
 * BLOCK_TARGET blocks, none longer than 1/BLOCK_PER_FWHM of hint_hz; when a fitted line comes
 * out narrower than BLOCK_PER_FWHM blocks, or the fit does not converge, again with blocks short
 * enough, at most BLOCK_STEP times shorter per refit (single bins at the end). */
static int plain_fit_bins(const split_ctx *cx, const cs_gated_spectrum *gs, const char *model, const double *fx,
                          const double *fy, size_t n, int blocks, double hint_hz, double floor_hint, cs_split_fit *f,
                          cs_error *err)
{
    cs_error e2;
    cs_error_clear(&e2);
    f->pmodel = cs_model_alloc(model, cx->p->baseline, CS_MODEL_SUM, &e2);
    if (!f->pmodel) {
        if (err)
            *err = e2;
        return e2.code ? e2.code : CS_ENOMEM;
    }
    const size_t np = f->pmodel->nparams;
    const size_t Kset = blocks ? cx->p->whole_block : 1;   /* 0: automatic */
    size_t K = Kset ? Kset : n >= BLOCK_MIN_BINS ? n / BLOCK_TARGET : 1;
    if (!Kset && hint_hz > 0 && (double)K > hint_hz / (BLOCK_PER_FWHM * gs->df_hz))
        K = (size_t)(hint_hz / (BLOCK_PER_FWHM * gs->df_hz));
    size_t kmax = n / (4 * np > 8 ? 4 * np : 8);   /* at least 4 points per parameter, and 8 */
    K = K > kmax ? kmax : K;
    K = K < 1 ? 1 : K;
    double *pv = malloc(np * sizeof *pv), *sig = malloc(n * sizeof *sig), *base = malloc(n * sizeof *base);
    double *bx = K > 1 ? malloc(n * sizeof *bx) : NULL;   /* 2 (n / K) <= n for every K >= 2 */
    /* one fit workspace for every pass (it grows when a refit goes to shorter blocks), and the
       baseline as a model of its own for the floor of the weights (plain_passes): the same
       values as the whole model with every area 0, without evaluating the profiles */
    cs_fit_workspace *fw = cs_fit_alloc((K > 1 ? n / K : n), np);
    cs_model *bmod = NULL;
    if (f->pmodel->baseline != CS_BASELINE_NONE && f->pmodel->mode == CS_MODEL_SUM)
        bmod = cs_model_alloc("none", f->pmodel->baseline, CS_MODEL_SUM, &e2);
    int rc = !pv || !sig || !base || (K > 1 && !bx) || !fw ||
                     (f->pmodel->baseline != CS_BASELINE_NONE && f->pmodel->mode == CS_MODEL_SUM && !bmod)
                 ? CS_ENOMEM : CS_OK;
    double ginf = NAN;
    if (rc == CS_OK)
        rc = cs_gate_block_variance(&gs->gate.window, gs->gate.periodic, gs->m, gs->nfft, 1, NULL, &ginf);
    while (rc == CS_OK || rc == CS_ENOCONV || rc == CS_EINVAL) {
        const double *x = fx, *y = fy;
        size_t nx = n;
        if (K > 1) {
            nx = make_blocks(fx, fy, n, K, bx, bx + n / K);
            x = bx;
            y = bx + n / K;
        }
        double gK = 1.0;
        if (K > 1 && (rc = cs_gate_block_variance(&gs->gate.window, gs->gate.periodic, gs->m, gs->nfft, K, &gK,
                                                  NULL)) != CS_OK)
            break;
        cs_fit_result_free(f->pfit);
        f->pfit = NULL;
        f->block = K;
        f->fmax_hz = fx[nx * K - 1];   /* the last bin fitted */
        f->err_scale = sqrt(fmax(ginf / gK, 1.0));
        rc = plain_passes(fw, bmod, gs, f, x, y, nx, K, gK, floor_hint, pv, sig, base, &e2);
        if ((rc != CS_OK && rc != CS_ENOCONV) || K == 1 || Kset)
            break;
        double wmin = f->pfit ? narrowest_width(f->pmodel, f->pfit) : NAN;
        size_t K2 = rc == CS_ENOCONV ? 1 : wmin < BLOCK_PER_FWHM * (double)K * gs->df_hz
                                               ? (size_t)(wmin / (BLOCK_PER_FWHM * gs->df_hz)) : K;
        if (K2 >= K)
            break;
        /* at most BLOCK_STEP times shorter blocks per refit: a component that collapsed (a
           width of a few Hz and an area consistent with 0) or a fit that strayed at K is often
           fine at K / 4, which costs a quarter of single bins */
        K2 = K2 > K / BLOCK_STEP ? K2 : K / BLOCK_STEP;
        K = K2 > 1 ? K2 : 1;
    }
    cs_fit_free(fw);
    cs_model_free(bmod);
    free(pv);
    free(base);
    free(sig);
    free(bx);
    if (rc == CS_ENOMEM)
        return cs_error_set(err, CS_ENOMEM, NULL, -1, -1, "out of memory");
    if (!f->pfit) {
        cs_split_impl_fit_fail(f, CS_SPLIT_FAILED, "gate '%s': %s", gs->gate.name, e2.msg);
        return CS_OK;
    }
    if (rc != CS_OK) {
        cs_split_impl_fit_fail(f, CS_SPLIT_NOT_CONVERGED, "gate '%s': fit of '%s' to the gated spectrum did not converge",
                 gs->gate.name, model);
        return CS_OK;
    }
    /* correlated bins: every error (and the covariance) is scaled by sqrt(ginf / g(K)) (the
       correlation left between the fitted points: between single bins ginf, which is enbw/df for
       a rectangular window, little between long blocks); and when the profiles do not describe
       the spectrum (chi2/dof > 1 with these weights) by sqrt(chi2/dof) too, so that a misfit
       widens the errors instead of hiding (common practice) */
    cs_fit_result *r = f->pfit;
    if (r->redchi2 > 1 && isfinite(r->redchi2)) {
        f->err_scale *= sqrt(r->redchi2);
        r->errors_scaled = 1;
    }
    double sc = f->err_scale, sc2 = sc * sc;
    for (size_t i = 0; i < r->nparams; i++)
        r->err[i] *= sc;
    for (size_t i = 0; i < r->nparams * r->nparams; i++)
        r->cov[i] *= sc2;
    for (size_t c = 0; c < r->ncomp; c++)
        for (int q = 0; q < CS_PROFILE_NQTY; q++)
            r->derived[c].err[q] *= sc;
    f->status = CS_SPLIT_OK;
    return CS_OK;
}

/* Fill line from component c of a successful plain fit. */
static void plain_line(const cs_split_fit *f, size_t c, double ref_hz, cs_split_line *l)
{
    const cs_model *m = f->pmodel;
    const cs_fit_result *r = f->pfit;
    const cs_model_component *mc = &m->comp[c];
    size_t ai = mc->first + mc->type->nparams - 1;
    l->center_hz = r->value[mc->first];
    l->center_hz_err = r->err[mc->first];
    l->fwhm_hz = r->derived[c].value[CS_PROFILE_FWHM];
    l->fwhm_hz_err = r->derived[c].err[CS_PROFILE_FWHM];
    l->area = r->value[ai] * f->energy_scale;
    l->area_err = r->err[ai] * f->energy_scale;
    l->ok = isfinite(l->center_hz) && isfinite(l->center_hz_err) && isfinite(l->fwhm_hz) &&
            isfinite(l->fwhm_hz_err);
    if (!l->ok)
        cs_split_impl_line_nan(l);
    cs_split_impl_set_shift(l, ref_hz);
}

/* Significance check of component c of a plain fit; 1 when it passes (else f is marked). */
static int plain_significant(cs_split_fit *f, size_t c)
{
    const cs_model_component *mc = &f->pmodel->comp[c];
    size_t ai = mc->first + mc->type->nparams - 1;
    double a = f->pfit->value[ai], ae = f->pfit->err[ai];
    f->significance = ae > 0 ? a / ae : NAN;
    if (isfinite(f->significance) && f->significance < f->significance_min) {
        cs_split_impl_fit_fail(f, CS_SPLIT_NO_LINE, "gate '%s': no line above the noise (area/error %.3g < %.3g)", f->gate.name,
                 f->significance, f->significance_min);
        return 0;
    }
    return 1;
}

static int plain_era(const split_ctx *cx, const cs_record *rec, cs_record *const *shots, size_t nshots,
                     cs_split_era era, const cs_gate *g, const char *model, double lo_hz, double ref_hz,
                     cs_split_fit *f, cs_error *err)
{
    cs_gate_options go;
    cs_gate_options_default(&go);
    go.pad = cx->p->pad;
    go.lo_hz = lo_hz;
    go.keep_complex = 0;
    go.average = CS_GATE_AVERAGE_POWER;
    cs_gated_spectrum *gs = NULL;
    cs_error e2;
    cs_error_clear(&e2);
    int rc = nshots > 1 ? cs_gate_spectrum_shots(cx->ws, shots, nshots, g, &go, &gs, &e2)
                        : cs_gate_spectrum(cx->ws, rec, g, &go, &gs, &e2);
    if (rc == CS_ERANGE) {
        cs_split_impl_fit_fail(f, CS_SPLIT_NO_GATE, "gate '%s': %s", g->name, e2.msg);
        return CS_OK;
    }
    if (rc != CS_OK) {
        if (err)
            *err = e2;
        return rc;
    }
    rc = plain_fit(cx, gs, model, 0, NAN, f, err);
    cs_gated_spectrum_free(gs);
    if (rc != CS_OK || f->status != CS_SPLIT_OK)
        return rc;
    /* the era's component: preferred profile, largest area */
    const char *want = era == CS_SPLIT_BURST ? "sech2" : "lorentz";
    const cs_model *m = f->pmodel;
    int have_want = 0;
    for (size_t k = 0; k < m->ncomp; k++)
        have_want |= strcmp(m->comp[k].type->name, want) == 0;
    size_t best = 0;
    double bestA = -INFINITY;
    for (size_t k = 0; k < m->ncomp; k++) {
        if (have_want && strcmp(m->comp[k].type->name, want) != 0)
            continue;
        double a = f->pfit->value[m->comp[k].first + m->comp[k].type->nparams - 1];
        if (bestA == -INFINITY || a > bestA) {
            best = k;
            bestA = a;
        }
    }
    f->component = best;
    f->significance_min = cs_split_impl_min_significance(f->m, cx->p->detect_fap);
    if (!plain_significant(f, best))
        return CS_OK;
    plain_line(f, best, ref_hz, &f->line);
    if (!f->line.ok)
        cs_split_impl_fit_fail(f, CS_SPLIT_NOT_CONVERGED, "gate '%s': the fit of '%s' leaves the line's errors undetermined",
                 g->name, model);
    return CS_OK;
}

int cs_split_impl_fit_era(const split_ctx *cx, const cs_record *rec, cs_record *const *shots, size_t nshots,
                          cs_split_era era, const cs_gate *g, const char *model, int gate_aware, double lo_hz,
                          double ref_hz, double noise_floor_sd, const cs_gatefit_result *from,
                          const cs_gatefit_start *hint, cs_split_fit *f, cs_error *err)
{
    cs_split_impl_fit_release(f);
    f->status = CS_SPLIT_FAILED;
    f->message[0] = '\0';
    cs_split_impl_line_nan(&f->line);
    f->significance = f->significance_min = NAN;
    f->gate_aware = gate_aware;
    snprintf(f->model, sizeof f->model, "%s", model);
    f->gate = *g;
    f->gate_ok = 1;
    if (gate_aware)
        return gatefit_era(cx, rec, era, g, model, lo_hz, ref_hz, noise_floor_sd, from, hint, f, err);
    return plain_era(cx, rec, shots, nshots, era, g, model, lo_hz, ref_hz, f, err);
}

/* ---------------------------------------------------------------- independent estimates */

int cs_split_impl_whole(const split_ctx *cx, const cs_record *rec, cs_record *const *shots, size_t nshots,
                        cs_split_shot *sh, cs_error *err)
{
    const cs_split_params *p = cx->p;
    cs_split_fit *f = &sh->whole;
    for (int e = 0; e < CS_SPLIT_NERA; e++)
        cs_split_impl_line_nan(&sh->whole_line[e]);
    if (!p->whole_model || !*p->whole_model) {
        cs_split_impl_fit_fail(f, CS_SPLIT_NO_GATE, "whole-record estimate switched off");
        return CS_OK;
    }
    snprintf(f->model, sizeof f->model, "%s", p->whole_model);
    char wb[CS_WINDOW_SPEC_MAX];
    snprintf(f->spec, sizeof f->spec, "whole=0s:rest:%s", cs_window_format(&p->whole_window, wb, sizeof wb));
    cs_error e2;
    if (cs_gate_init(&f->gate, "whole", 0.0, (double)rec->n * rec->dt_s, &p->whole_window, CS_WINDOW_PERIODIC,
                     &e2) != CS_OK) {
        cs_split_impl_fit_fail(f, CS_SPLIT_FAILED, "whole record: %s", e2.msg);
        return CS_OK;
    }
    f->gate.t_start_s = rec->t0_s;
    f->gate_ok = 1;
    cs_gate_options go;
    cs_gate_options_default(&go);
    go.pad = p->pad;
    go.lo_hz = sh->lo_hz;
    go.keep_complex = 0;
    cs_gated_spectrum *gs = NULL;
    int rc = nshots > 1 ? cs_gate_spectrum_shots(cx->ws, shots, nshots, &f->gate, &go, &gs, &e2)
                        : cs_gate_spectrum(cx->ws, rec, &f->gate, &go, &gs, &e2);
    if (rc == CS_ERANGE || rc == CS_EDATA) {
        cs_split_impl_fit_fail(f, CS_SPLIT_FAILED, "whole record: %s", e2.msg);
        return CS_OK;
    }
    if (rc != CS_OK) {
        if (err)
            *err = e2;
        return rc;
    }
    /* the narrowest era line measured so far seeds the blocks' length */
    double hint = NAN;
    for (int e = 0; e < CS_SPLIT_NERA; e++) {
        const cs_split_line *l = &sh->era[e].line;
        if (l->ok && l->fwhm_hz > 0 && !(l->fwhm_hz >= hint))
            hint = l->fwhm_hz;
    }
    rc = plain_fit(cx, gs, p->whole_model, 1, hint, f, err);
    cs_gated_spectrum_free(gs);
    if (rc != CS_OK || f->status != CS_SPLIT_OK)
        return rc;
    /* burst era: the sech2 component when the model has one (else the broadest); tail era: the
       lorentz component when it has one (else the narrowest) */
    const cs_model *m = f->pmodel;
    size_t ib = 0, it = 0;
    int hb = 0, ht = 0;
    for (size_t k = 0; k < m->ncomp; k++) {
        hb |= strcmp(m->comp[k].type->name, "sech2") == 0;
        ht |= strcmp(m->comp[k].type->name, "lorentz") == 0;
    }
    int fb = 1, ft = 1;
    for (size_t k = 0; k < m->ncomp; k++) {
        double w = f->pfit->derived[k].value[CS_PROFILE_FWHM];
        if (!hb || strcmp(m->comp[k].type->name, "sech2") == 0)
            if (fb || w > f->pfit->derived[ib].value[CS_PROFILE_FWHM]) { ib = k; fb = 0; }
        if (!ht || strcmp(m->comp[k].type->name, "lorentz") == 0)
            if (ft || w < f->pfit->derived[it].value[CS_PROFILE_FWHM]) { it = k; ft = 0; }
    }
    f->significance_min = cs_split_impl_min_significance(rec->n, p->detect_fap);
    size_t idx[CS_SPLIT_NERA] = {ib, it};
    for (int e = 0; e < CS_SPLIT_NERA; e++) {
        const cs_model_component *mc = &m->comp[idx[e]];
        size_t ai = mc->first + mc->type->nparams - 1;
        double a = f->pfit->value[ai], ae = f->pfit->err[ai];
        if (ae > 0 && a / ae >= f->significance_min)
            plain_line(f, idx[e], sh->ref_hz, &sh->whole_line[e]);
    }
    f->component = it;
    f->line = sh->whole_line[CS_SPLIT_TAIL];
    return CS_OK;
}

/* Matrix pencil of the tail gate's samples up to the fade of the envelope. */
int cs_split_impl_pencil(cs_gate_workspace *ws, const cs_record *rec, cs_split_shot *sh, cs_error *err)
{
    sh->npencil = 0;
    sh->pencil_order = 0;
    sh->pencil_first = sh->pencil_count = 0;
    for (int k = 0; k < CS_SPLIT_PENCIL_MAX; k++)
        cs_split_impl_line_nan(&sh->pencil[k]);
    const cs_split_fit *tf = &sh->era[CS_SPLIT_TAIL];
    size_t first, count;
    if (!tf->gate_ok || cs_gate_samples(&tf->gate, rec, &first, &count, NULL) != CS_OK) {
        sh->pencil_status = CS_ERANGE;
        return CS_OK;
    }
    /* samples after the envelope has faded into the noise add nothing but noise */
    if (sh->burst.status == CS_BURST_FOUND && isfinite(sh->burst.fade_s)) {
        double tf_s = (sh->burst.fade_s - rec->t0_s) / rec->dt_s;
        if (tf_s > (double)first && tf_s < (double)(first + count))
            count = (size_t)tf_s - first + 1;
    }
    sh->pencil_first = first;
    sh->pencil_count = count;
    if (count < 16) {
        sh->pencil_status = CS_EDATA;
        return CS_OK;
    }
    /* the automatic order goes up to the components a shot keeps (CS_SPLIT_PENCIL_MAX; twice
       that for a real record, whose lines come as +- pairs): the block Krylov iteration that
       finds the pencil's subspace then needs K = max_order + 1 singular vectors instead of the
       default 9, which halves its cost on a tail gate */
    cs_pencil_parameters pp = cs_pencil_default_parameters();
    size_t keep = rec->is_complex ? CS_SPLIT_PENCIL_MAX : 2 * CS_SPLIT_PENCIL_MAX;
    if (keep < pp.max_order)
        pp.max_order = keep;
    cs_pencil_result pr;
    cs_pencil_result_init(&pr);
    const double *x = rec->data + (rec->is_complex ? 2 * first : first);
    cs_error e2;
    int rc = cs_pencil_estimate_ws(ws, x, count, rec->is_complex, rec->dt_s, &pp, &pr, &e2);
    if (rc == CS_ENOMEM) {
        if (err)
            *err = e2;
        return rc;
    }
    sh->pencil_status = rc;
    if (rc == CS_OK || rc == CS_ENOCONV) {
        sh->pencil_order = pr.order;
        for (size_t k = 0; k < pr.order && sh->npencil < CS_SPLIT_PENCIL_MAX; k++) {
            const cs_pencil_component *c = &pr.comp[k];
            if (!rec->is_complex && c->freq_hz < 0)
                continue;  /* real records: components come in +- pairs */
            if (!(c->gamma_per_s > 0))
                continue;  /* growing: part of a shape, not a line */
            cs_split_line *l = &sh->pencil[sh->npencil++];
            if (isfinite(c->freq_hz_err) && isfinite(c->fwhm_hz_err)) {
                l->ok = 1;
                l->center_hz = c->freq_hz + sh->lo_hz;
                l->center_hz_err = c->freq_hz_err;
                l->fwhm_hz = c->fwhm_hz;
                l->fwhm_hz_err = c->fwhm_hz_err;
            }
            cs_split_impl_set_shift(l, sh->ref_hz);
        }
        if (sh->npencil == 0)
            sh->pencil_status = CS_EDATA;
    }
    cs_pencil_result_release(&pr);
    return CS_OK;
}

void cs_split_impl_agree(const cs_split_line *a, const cs_split_line *b, double thr, cs_split_agree *g)
{
    g->z_center = g->z_fwhm = NAN;
    g->flagged = 0;
    if (!a->ok || !b->ok)
        return;
    g->z_center = cs_split_agreement(a->center_hz, a->center_hz_err, b->center_hz, b->center_hz_err);
    g->z_fwhm = cs_split_agreement(a->fwhm_hz, a->fwhm_hz_err, b->fwhm_hz, b->fwhm_hz_err);
    g->flagged = (isfinite(g->z_center) && g->z_center > thr) || (isfinite(g->z_fwhm) && g->z_fwhm > thr);
}
