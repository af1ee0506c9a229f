/* Automatic starting values, step 2: noise, smoothing, peaks and shoulders of the signal. */
/*
 * See the top of model_guess.c for the whole strategy. The noise sigma_n comes from first
 * differences (or the given sigma); the signal is smoothed with a Gaussian kernel of 0 to 3
 * points; peaks are local maxima whose topographic prominence clears a threshold set by the noise
 * of the smoothed signal, and shoulders, wanted when there are fewer peaks than components, are
 * minima of the second difference deeper than five of its noise standard deviations.
 */
#include <collshift/model.h>

#include "model_guess_impl.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>

/* ---------------------------------------------------------------- peaks */

static int cmp_cand_prom(const void *a, const void *b)
{
    double x = ((const cand *)a)->prom, y = ((const cand *)b)->prom;
    return (x < y) - (x > y);
}

/* Second derivative of s at i by divided differences over +-h points (0 near the ends). */
static double second_diff(const double *x, const double *s, size_t n, size_t i, size_t h)
{
    if (i < h || i + h >= n)
        return 0.0;
    double dl = (s[i] - s[i - h]) / (x[i] - x[i - h]);
    double dr = (s[i + h] - s[i]) / (x[i + h] - x[i]);
    return 2.0 * (dr - dl) / (x[i + h] - x[i - h]);
}

/* Peaks of s with prominence >= thr, into out (room for n/2 + 1); returns their number. */
static size_t find_peaks(const double *x, const double *s, size_t n, double thr, size_t h,
                         cand *out)
{
    size_t nc = 0;
    for (size_t i = 1; i + 1 < n; i++) {
        if (!(s[i] > s[i - 1]))
            continue;
        size_t j = i;
        while (j + 1 < n && s[j + 1] == s[i])
            j++;
        if (j + 1 >= n || !(s[j + 1] < s[i])) {
            i = j;
            continue;
        }
        size_t pk = (i + j) / 2;
        double minl = s[pk], minr = s[pk];
        size_t l = pk, r = j;
        while (l > 0 && s[l - 1] <= s[pk])
            if (s[--l] < minl)
                minl = s[l];
        while (r + 1 < n && s[r + 1] <= s[pk])
            if (s[++r] < minr)
                minr = s[r];
        double prom = s[pk] - (minl > minr ? minl : minr);
        i = j;
        if (!(prom >= thr))
            continue;
        double level = s[pk] - 0.5 * prom, xl = x[0], xr = x[n - 1];
        for (size_t a = pk; a > 0; a--)
            if (s[a - 1] <= level) {
                xl = x[a - 1] + (level - s[a - 1]) * (x[a] - x[a - 1]) / (s[a] - s[a - 1]);
                break;
            }
        for (size_t b = pk; b + 1 < n; b++)
            if (s[b + 1] <= level) {
                xr = x[b] + (s[b] - level) * (x[b + 1] - x[b]) / (s[b] - s[b + 1]);
                break;
            }
        /* vertex of the parabola through the three points around the maximum */
        double x0 = x[pk - 1], x1 = x[pk], x2 = x[pk + 1];
        double d1 = (s[pk] - s[pk - 1]) / (x1 - x0), d2 = (s[pk + 1] - s[pk]) / (x2 - x1);
        double c2 = (d2 - d1) / (x2 - x0), xc = x1;
        if (c2 < 0.0) {
            xc = 0.5 * (x0 + x1) - d1 / (2.0 * c2);
            if (xc < x0 || xc > x2)
                xc = x1;
        }
        double curv = -second_diff(x, s, n, pk, h);
        double ws = 2.0 * (xc - xl < xr - xc ? xc - xl : xr - xc);
        cand c = {xc, xr - xl, ws, ws, prom, pk};
        if (curv > 0.0) {
            double wc = sqrt(8.0 * prom / curv);
            if (wc < c.wc)
                c.wc = wc;
        }
        out[nc++] = c;
    }
    return nc;
}

/* Shoulders: minima of s'' (inside the signal, clear of the peaks already found) deeper than
 * thr2 (five standard deviations of s'' from noise alone). Appends to c (room for n/2 more);
 * d2: n doubles of scratch. */
static size_t find_shoulders(const double *x, const double *s, size_t n, double thr, size_t h,
                             double thr2, cand *c, size_t nc, double *d2)
{
    for (size_t i = 0; i < n; i++)
        d2[i] = second_diff(x, s, n, i, h);
    size_t n0 = nc;
    for (size_t i = h + 1; i + h + 1 < n; i++) {
        if (!(d2[i] < d2[i - 1] && d2[i] <= d2[i + 1] && -d2[i] > thr2 && s[i] > thr))
            continue;
        int near = 0;
        for (size_t k = 0; k < n0; k++)
            if (fabs(x[i] - c[k].xc) < 0.25 * c[k].ws)
                near = 1;
        if (near)
            continue;
        size_t l = i, r = i;
        while (l > 0 && d2[l - 1] < 0.0)
            l--;
        while (r + 1 < n && d2[r + 1] < 0.0)
            r++;
        double w = 1.5 * (x[r] - x[l]);
        if (!(w > 0.0))
            continue;
        cand sh = {x[i], w, w, w, -d2[i] * w * w / 8.0, i};
        c[nc++] = sh;
    }
    return nc;
}

/* Gaussian smoothing weights w[0..K] (w[j] for offsets +-j, normalised) of a kernel of sk
 * points; returns K. */
static size_t kernel(double sk, double w[64])
{
    if (sk <= 0.0) {
        w[0] = 1.0;
        return 0;
    }
    size_t K = (size_t)ceil(3.0 * sk);
    if (K > 63)
        K = 63;
    double sum = 0.0;
    for (size_t j = 0; j <= K; j++) {
        w[j] = exp(-0.5 * (double)(j * j) / (sk * sk));
        sum += j ? 2.0 * w[j] : w[j];
    }
    for (size_t j = 0; j <= K; j++)
        w[j] /= sum;
    return K;
}

/* Standard deviations, per unit white-noise sigma, of the smoothed signal (*nf) and of its
 * second difference s[i+h] - 2 s[i] + s[i-h] (*nf2, when not NULL): norms of the filters. */
static void noise_factors(double sk, size_t h, double *nf, double *nf2)
{
    double w[64];
    long K = (long)kernel(sk, w), H = (long)h;
    double a = 0.0, b = 0.0;
    for (long j = -K - H; j <= K + H; j++) {
        long aj = j < 0 ? -j : j, ap = labs(j + H), am = labs(j - H);
        double wj = aj <= K ? w[aj] : 0.0;
        double f = (am <= K ? w[am] : 0.0) - 2.0 * wj + (ap <= K ? w[ap] : 0.0);
        a += wj * wj;
        b += f * f;
    }
    *nf = sqrt(a);
    if (nf2)
        *nf2 = sqrt(b);
}

/* Gaussian smoothing of r with a kernel of sk points (0: copy) into s; near the ends the
 * weights are renormalised. */
static void smooth(const double *r, size_t n, double sk, double *s)
{
    double w[64];
    size_t K = kernel(sk, w);
    /* interior points (all offsets inside): the same sums in the same order, without tests */
    double wsi = w[0];
    for (size_t j = 1; j <= K; j++) {
        wsi += w[j];
        wsi += w[j];
    }
    for (size_t i = K; i + K < n; i++) {
        double a = w[0] * r[i];
        for (size_t j = 1; j <= K; j++) {
            a += w[j] * r[i - j];
            a += w[j] * r[i + j];
        }
        s[i] = a / wsi;
    }
    for (size_t i = 0; i < n; i++) {
        if (i == K && i + K < n) {
            i = n - K; /* the interior is done */
            if (i >= n)
                break; /* K == 0: the interior was everything */
        }
        double a = w[0] * r[i], ws = w[0];
        for (size_t j = 1; j <= K; j++) {
            if (i >= j) {
                a += w[j] * r[i - j];
                ws += w[j];
            }
            if (i + j < n) {
                a += w[j] * r[i + j];
                ws += w[j];
            }
        }
        s[i] = a / ws;
    }
}

/* Step 2: noise, smoothing and the candidate peaks (most prominent first). */
void guess_step_peaks(gctx *c, const double *sigma)
{
    const size_t n = c->n;
    double *r = c->r, *s = c->s, *a = c->a;
    for (size_t i = 0; i + 1 < n; i++)
        a[i] = r[i + 1] - r[i];
    double md = guess_median(a, n - 1, c->scratch);
    for (size_t i = 0; i + 1 < n; i++)
        a[i] = fabs(a[i] - md);
    double sn = 1.4826 * guess_median(a, n - 1, c->scratch) / sqrt(2.0);
    if (sigma && !c->trans) {
        size_t k = 0;
        for (size_t i = 0; i < n; i++)
            if (isfinite(sigma[i]) && sigma[i] > 0.0)
                a[k++] = sigma[i];
        if (k > 0)
            sn = guess_median(a, k, c->scratch);
    }
    double amp = 0.0;
    for (size_t i = 0; i < n; i++)
        amp = fabs(r[i]) > amp ? fabs(r[i]) : amp;
    double rho = amp > 0.0 ? sn / amp : 0.0;
    double sk = rho < 0.002 ? 0.0 : (1.0 + 40.0 * rho < 3.0 ? 1.0 + 40.0 * rho : 3.0);
    if (sk > (double)n / 60.0)
        sk = (double)n / 60.0 < 0.5 ? 0.0 : (double)n / 60.0;
    smooth(r, n, sk, s);
    double smax = s[0], smin = s[0];
    for (size_t i = 1; i < n; i++) {
        smax = s[i] > smax ? s[i] : smax;
        smin = s[i] < smin ? s[i] : smin;
    }
    const int flip = smax < -smin;
    c->flip = flip;
    if (flip) { /* dips: look for peaks of -r */
        for (size_t i = 0; i < n; i++)
            s[i] = -s[i];
        smax = -smin;
    }
    size_t h = sk >= 1.5 ? (size_t)lround(sk) : 1;
    double nf;
    noise_factors(sk, h, &nf, NULL);
    double thr = 8.0 * sn * nf > 0.02 * smax ? 8.0 * sn * nf : 0.02 * smax;
    size_t npk = find_peaks(c->x, s, n, thr, h, c->cd);
    if (c->trans) { /* the absorbance's noise grows as 1/T: a dip must stand out of its own */
        size_t keep = 0;
        for (size_t k = 0; k < npk; k++) {
            size_t i = c->cd[k].i;
            double t = c->y[i] / c->t0w[i];
            if (c->cd[k].prom * (t > 0.03 ? t : 0.03) >= 8.0 * sn * nf)
                c->cd[keep++] = c->cd[k];
        }
        npk = keep;
    }
    qsort(c->cd, npk, sizeof *c->cd, cmp_cand_prom);
    c->ncd = c->npk = npk;
    if (npk < c->m->ncomp) {
        /* shoulders, at the scale of the main peak (a sixth of its width) and four times it */
        double sk0 = npk > 0 ? c->cd[0].w / c->dx / 6.0 : sk, prev = -1.0;
        double *s2 = c->scratch + n;
        for (int sc = 0; sc < 2; sc++) {
            double sk2 = (sk0 > sk ? sk0 : sk) * (sc ? 4.0 : 1.0);
            sk2 = sk2 > 21.0 ? 21.0 : sk2;
            sk2 = sk2 > (double)n / 20.0 ? (double)n / 20.0 : sk2;
            size_t h2 = sk2 >= 1.5 ? (size_t)lround(sk2) : 1;
            if (!(sk2 > prev) || n < 2 * h2 + 3)
                break;
            prev = sk2;
            smooth(r, n, sk2, s2);
            for (size_t i = 0; flip && i < n; i++)
                s2[i] = -s2[i];
            double nfa, nfb;
            noise_factors(sk2, h2, &nfa, &nfb);
            double thr2b = 5.0 * sn * nfb / ((double)(h2 * h2) * c->dx * c->dx);
            c->ncd = find_shoulders(c->x, s2, n, thr, h2, thr2b, c->cd, c->ncd, a);
        }
        qsort(c->cd + npk, c->ncd - npk, sizeof *c->cd, cmp_cand_prom);
    }
    for (size_t k = 0; k < c->ncd; k++) {
        cand *d = &c->cd[k];
        d->w = d->w < c->wmin ? c->wmin : d->w > c->wmax ? c->wmax : d->w;
        d->ws = d->ws < c->wmin ? c->wmin : d->ws > d->w ? d->w : d->ws;
        d->wc = d->wc < c->wmin ? c->wmin : d->wc > d->ws ? d->ws : d->wc;
    }
}
