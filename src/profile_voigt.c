/* Voigt profile: value and analytic derivatives from one Faddeeva evaluation; exact and approximate FWHM.
 *
 * The profile. With u = x - center, s = fwhm_g/(2 sqrt(ln 2)) (sqrt 2 times the Gaussian
 * standard deviation) and gamma = fwhm_l/2 (the Lorentzian HWHM), the unit-area Voigt profile is
 *     V(u) = Re w(z) / (s sqrt(pi)),   z = (u + i gamma)/s = zeta/s,
 * w(z) = exp(-z^2) erfc(-iz) the Faddeeva function (guide/physics.md section 9, after the
 * Voigt-profile article cited there; libcerf's w_of_z computes w).
 *
 * Derivatives. w'(z) = -2z w(z) + 2i/sqrt(pi) (DLMF section 7.10; from memory), and with
 * dz/dcenter = -1/s, dz/dgamma = i/s, dz/ds = -z/s:
 *     dV/dcenter = -Re w'/(s^2 sqrt pi),   dV/dgamma = -Im w'/(s^2 sqrt pi),
 *     dV/ds      = -Re q /(s^2 sqrt pi),   q = z w' + w = (1 - 2z^2) w + 2iz/sqrt(pi).
 * So one w_of_z call per point gives the value and all four derivatives.
 *
 * Large |z|. w' and q are differences of nearly equal terms when |z| is large: w' ~ 1/z^2
 * and q ~ 1/z^3 while their parts are ~1, so w_of_z's own rounding is amplified by about
 * |z|^2 and |z|^4; and as fwhm_g -> 0 at fixed fwhm_l (z -> infinity everywhere) dV/ds would be
 * rounding noise divided by s^2. For |z| >= 8 the derivatives therefore come from the
 * asymptotic series w(z) ~ (i/sqrt pi) sum_n (2n-1)!!/2^n z^-(2n+1) (DLMF 7.12.1 for erfc,
 * from memory), written in zeta and t = s^2/zeta^2 so that s = 0 is allowed and nothing
 * overflows:
 *     dV/dcenter = Re(i S1/zeta^2)/pi,  dV/dgamma = Re(S1/zeta^2)/pi,  dV/ds = Re(i s S2/zeta^3)/pi,
 *     S1 = sum_k (2k+1)!!/2^k t^k,  S2 = sum_k (k+1)(2k+1)!!/2^k t^k,
 * summed to the term counts of series_terms(). The series misses the exponentially small
 * exp(-z^2) part of w near the real axis; it is added back with its Stokes multiplier, which
 * numerically is erfc(sqrt(2) Im z) to about 2 % (checked here against mpmath; the smooth
 * switch is Berry's Stokes-line smoothing, from memory). Measured against 50-digit mpmath
 * values of w, w' and q on |z| from 0.5 to 100, all arguments in the first quadrant (angles
 * down to 1e-9 rad), while writing this file: V <= 1e-14 relative to |w|, dV/dcenter and
 * dV/dgamma <= 1e-12 relative to |w'|, dV/ds <= 1.1e-11 relative to |q| (worst just below
 * |z| = 6, where w_of_z's error times |z|^4 meets the series' truncation error). The switch
 * was later moved from |z| = 6 to 8: between them the series needs 24 to 40 terms in four
 * Horner chains plus the Stokes term, while w_of_z there takes its short continued fraction
 * (for |x| > 6), so the kernel costs about 10 % less per point on the spectra of
 * bench/bench_fit.c. The direct route's |z|^4 amplification stays within the 3e-11 of the mpmath
 * grid test (tests/test_profile.c, test_voigt_jacobian_grid: worst 2.0e-11 relative, at one of
 * its 14 points in 6 <= |z| < 8), and a fit's Jacobian needs far less. Moving it further (10,
 * 12, 14) saved nothing: w_of_z costs about as much there as the series.
 *
 * Value in the asymptotic region. With S0 = sum_n (2n-1)!!/2^n t^n = 1 + t S1/2, V =
 * -Im(S0/zeta)/pi comes free with the derivatives' S1 and replaces w_of_z wherever the missing
 * exp(-z^2) part is below 1e-17 of V (it is at most exp(-|z|^2), and Re w >~ y/(sqrt(pi) |z|^2):
 * exp(-|z|^2) |z|^2 < 5e-18 y); without derivatives only from |z| = 10, where its two Horner
 * chains are cheaper than w_of_z. Checked against 40-digit mpmath on |z| from 5.5 to 60, y from
 * 1e-8 to 5: at most 6e-16 relative to V itself, never worse than w_of_z at the same points.
 *
 * Limits. fwhm_g = 0 (s = 0) is the Lorentzian: t = 0, S1 = S2 = 1, dV/ds = 0. fwhm_l = 0 is
 * the Gaussian: w_of_z accepts real z, and no formula divides by gamma. The value uses w_of_z
 * whenever s > 0 and |z| <= 1e8; beyond, V = -Im((1 + t/2)/zeta)/pi, exact to double precision.
 *
 * FWHM. The exact width solves V(h) = V(0)/2 for the half width h by Newton steps kept inside
 * a bisection bracket (max(f_G, f_L) <= f_V <= f_G + f_L); its gradient follows from implicit
 * differentiation of that equation. The Olivero-Longbothum formula is the usual approximation. */
#include <collshift/profile.h>

#include "profile_impl.h"

#include <cerf.h>
#include <complex.h>
#include <math.h>
#include <string.h>

#define ASYM_Z 8.0          /* |z| from which derivatives use the asymptotic series */
#define VALUE_SERIES_Z 1e8  /* |z| from which the value uses it as well */

/* (2k+1)!!/2^k and (k+1)(2k+1)!!/2^k, k = 0..39 (exact rationals rounded to double). */
#define SER_MAX 40
static const double ser_a[SER_MAX] = {
    1.0, 1.5, 3.75, 13.125, 59.0625, 324.84375, 2111.484375, 15836.1328125, 134607.12890625,
    1278767.724609375, 13427061.108398438, 154411202.74658203, 1930140034.3322754,
    26056890463.485718, 377824911720.5429, 5856286131668.415, 96628721172528.84,
    1691002620519254.8, 3.1283548479606216e+16, 6.100291953523212e+17, 1.2505598504722584e+19,
    2.6887036785153556e+20, 6.04958327665955e+21, 1.4216520700149944e+23, 3.483047571536736e+24,
    8.881771307418676e+25, 2.3536693964659492e+27, 6.472590840281361e+28, 1.8446883894801877e+30,
    5.441830748966554e+31, 1.659758378434799e+33, 5.228238892069617e+34, 1.6991776399226255e+36,
    5.692245093740795e+37, 1.9638245573405744e+39, 6.971577178559039e+40, 2.5446256701740492e+42,
    9.542346263152684e+43, 3.6738033113137836e+45, 1.4511523079689445e+47};
static const double ser_b[SER_MAX] = {
    1.0, 3.0, 11.25, 52.5, 295.3125, 1949.0625, 14780.390625, 126689.0625, 1211464.16015625,
    12787677.24609375, 147697672.1923828, 1852934432.9589844, 25091820446.31958,
    364796466488.80005, 5667373675808.144, 93700578106694.64, 1642688259932990.5,
    3.0438047169346588e+16, 5.943874211125181e+17, 1.2200583907046425e+19, 2.6261756859917428e+20,
    5.915148092733782e+21, 1.3914041536316966e+23, 3.411964968035986e+24, 8.70761892884184e+25,
    2.3092605399288559e+27, 6.3549073704580634e+28, 1.812325435278781e+30, 5.349596329492544e+31,
    1.632549224689966e+33, 5.145250973147877e+34, 1.6730364454622773e+36, 5.607286211744664e+37,
    1.9353633318718703e+39, 6.87338595069201e+40, 2.509767784281254e+42, 9.415114979643981e+43,
    3.62609157999802e+45, 1.4327832914123756e+47, 5.804609231875778e+48};

/* re + i im without the rounding traps of re + im*I. CMPLX is C11 but not every compiler and C
 * library pairing defines it; C11 6.2.5p13 lays a complex out as double[2], so copy one in. */
static inline double complex make_complex(double re, double im)
{
    double part[2] = {re, im};
    double complex z;
    memcpy(&z, part, sizeof z);
    return z;
}

/* Terms for |z| >= az: enough that the first omitted term, (2M+1)!!/(2|z|^2)^M (times M+1 for
 * S2), is below 1e-17, or, below |z| = 7, the count where the terms stop falling (M ~ |z|^2). */
static int series_terms(double az)
{
    static const struct {
        double from;
        int terms;
    } tiers[] = {{1e5, 3}, {1e3, 4}, {100.0, 6}, {40.0, 8}, {28.0, 9}, {20.0, 11}, {16.0, 12},
                 {14.0, 13}, {11.0, 16}, {10.0, 18}, {9.0, 20}, {8.0, 24}, {7.5, 28}, {7.0, 38},
                 {6.5, 40}};
    for (size_t i = 0; i < sizeof tiers / sizeof tiers[0]; i++)
        if (az >= tiers[i].from)
            return tiers[i].terms;
    return 34;
}

/* Unit-area Voigt at u with s = fwhm_g/(2 sqrt ln 2) >= 0 and gamma = fwhm_l/2 >= 0, not both 0.
 * *v = V(u). When dv is not NULL: dv[0] = dV/dcenter, dv[1] = dV/ds, dv[2] = dV/dgamma. */
static void voigt_kernel(double u, double s, double gamma, double *v, double *dv)
{
    double r2 = u * u + gamma * gamma;
    double r = (r2 > 1e-300 && r2 < 1e300) ? sqrt(r2) : hypot(u, gamma);   /* |zeta| */
    if (!(r < ASYM_Z * s)) {
        /* asymptotic region (always when s == 0) */
        double ri = 1.0 / r;
        double er = u * ri * ri, ei = -gamma * ri * ri;        /* 1/zeta */
        double sr = s * er, si = s * ei;                       /* s/zeta */
        double tr = sr * sr - si * si, ti = 2.0 * sr * si;     /* t = (s/zeta)^2 */
        /* The value from the series as well, V = -Im(S0/zeta)/pi with S0 = sum_n (2n-1)!!/2^n
         * t^n = 1 + t S1/2, wherever the exp(-z^2) part it misses is negligible: that part is
         * at most exp(-|z|^2) (erfc(sqrt 2 y) <= exp(-2 y^2)) and Re w >~ y/(sqrt(pi) |z|^2),
         * so exp(-|z|^2) |z|^2 < 5e-18 y keeps it below 1e-17 of V. Elsewhere V = Re w_of_z. */
        int series_v = !(s > 0.0 && r <= VALUE_SERIES_Z * s), far = series_v;
        if (!series_v && gamma > 0.0 && (dv || r >= 10.0 * s)) {
            /* (value only: where its two Horner chains are shorter than w_of_z) */
            double az2 = (r / s) * (r / s), y = gamma / s;
            series_v = az2 > 80.0 ? y > 1e-15 : exp(-az2) * az2 < 5e-18 * y;
        }
        if (!series_v) {
            double complex w = w_of_z(make_complex(u / s, gamma / s));
            *v = creal(w) / (s * SQRT_PI_);
            if (!dv)
                return;
        } else if (far) {
            /* V = Re(i (1 + t/2)/zeta)/pi = -Im((1 + t/2)/zeta)/pi */
            double fr = 1.0 + 0.5 * tr, fi = 0.5 * ti;
            *v = -(fr * ei + fi * er) / PI_;
            if (!dv)
                return;
        }
        /* S = E(t^2) + t O(t^2): four independent Horner chains in t^2 instead of two in t
         * (only the two of S1 when no derivatives are wanted) */
        int m = series_terms(s > 0.0 ? r / s : INFINITY);
        int h = (m + 1) / 2;                                     /* pairs of terms */
        double t2r = tr * tr - ti * ti, t2i = 2.0 * tr * ti;     /* t^2 */
        double aer = 0.0, aei = 0.0, aor = 0.0, aoi = 0.0;       /* S1 even and odd parts */
        double ber = 0.0, bei = 0.0, bor = 0.0, boi = 0.0;       /* S2 even and odd parts */
        if (dv) {
            for (int j = h; j-- > 0;) {
                double n;
                n = aer * t2r - aei * t2i + ser_a[2 * j];
                aei = aer * t2i + aei * t2r;
                aer = n;
                n = aor * t2r - aoi * t2i + ser_a[2 * j + 1];
                aoi = aor * t2i + aoi * t2r;
                aor = n;
                n = ber * t2r - bei * t2i + ser_b[2 * j];
                bei = ber * t2i + bei * t2r;
                ber = n;
                n = bor * t2r - boi * t2i + ser_b[2 * j + 1];
                boi = bor * t2i + boi * t2r;
                bor = n;
            }
        } else {
            for (int j = h; j-- > 0;) {
                double n;
                n = aer * t2r - aei * t2i + ser_a[2 * j];
                aei = aer * t2i + aei * t2r;
                aer = n;
                n = aor * t2r - aoi * t2i + ser_a[2 * j + 1];
                aoi = aor * t2i + aoi * t2r;
                aor = n;
            }
        }
        double s1r = aer + (aor * tr - aoi * ti), s1i = aei + (aor * ti + aoi * tr);
        if (series_v && !far) {
            double fr = 1.0 + 0.5 * (tr * s1r - ti * s1i), fi = 0.5 * (tr * s1i + ti * s1r);
            *v = -(fr * ei + fi * er) / PI_;
            if (!dv)
                return;
        }
        double s2r = ber + (bor * tr - boi * ti), s2i = bei + (bor * ti + boi * tr);
        double e2r = er * er - ei * ei, e2i = 2.0 * er * ei;   /* 1/zeta^2 */
        double e3r = sr * e2r - si * e2i, e3i = sr * e2i + si * e2r;   /* s/zeta^3 */
        double pr = s1r * e2r - s1i * e2i, pim = s1r * e2i + s1i * e2r;   /* S1/zeta^2 */
        double qi = s2r * e3i + s2i * e3r;                                 /* Im(s S2/zeta^3) */
        dv[0] = -pim / PI_;
        dv[1] = s > 0.0 ? -qi / PI_ : 0.0;
        dv[2] = pr / PI_;
        if (s > 0.0) {
            double x = u / s, y = gamma / s, ex = x * x - y * y;
            /* (for y < 3, |z|^2 = ex + 2 y^2 < ex + 18, and exp(-ex) (ex + 18)^1.5 < 6e-24 once
             * ex > 60: the test below would skip it, so exp is not even called) */
            int negligible = ex > 60.0 && y > 1e-5;
            double mag = (y < 3.0 && ex < 745.0 && !negligible) ? exp(-ex) : 0.0;
            /* skip it when below 1e-18 of the series' real part (~ y/|z|^3 relative to |w'|) */
            if (mag > 0.0 && !(y > 0.0 && mag * r * r * r < 1e-18 * y * s * s * s)) {
                /* the exp(-z^2) part of w near the real axis, with its Stokes multiplier
                 * erfc(sqrt(2) y): w' += -2z E, q += (1 - 2z^2) E, E = erfc(sqrt 2 y) exp(-z^2) */
                mag *= erfc(1.41421356237309504880 * y);
                double ang = -2.0 * x * y;
                double Er = mag * cos(ang), Ei = mag * sin(ang);
                double wpr = -2.0 * (x * Er - y * Ei), wpi = -2.0 * (x * Ei + y * Er);
                double ar = 1.0 - 2.0 * ex, ai = -4.0 * x * y;
                double qr = ar * Er - ai * Ei;
                double c = 1.0 / (s * s * SQRT_PI_);
                dv[0] -= wpr * c;
                dv[2] -= wpi * c;
                dv[1] -= qr * c;
            }
        }
        return;
    }
    /* direct region: |z| < ASYM_Z, s > 0 */
    double x = u / s, y = gamma / s;
    double complex w = w_of_z(make_complex(x, y));
    double wr = creal(w), wi = cimag(w);
    *v = wr / (s * SQRT_PI_);
    if (!dv)
        return;
    double wpr = -2.0 * (x * wr - y * wi);                          /* w' = -2zw + 2i/sqrt(pi) */
    double wpi = -2.0 * (x * wi + y * wr) + 2.0 / SQRT_PI_;
    double qr = x * wpr - y * wpi + wr;                             /* Re(z w' + w) */
    double c = 1.0 / (s * s * SQRT_PI_);
    dv[0] = -wpr * c;
    dv[1] = -qr * c;
    dv[2] = -wpi * c;
}

/* ds/dfwhm_g */
#define DS_DFG (1.0 / (2.0 * SQRT_LN2_))

static const char *const voigt_names[] = {"center", "fwhm_g", "fwhm_l", "area"};
static const char *const voigt_units[] = {"Hz", "Hz", "Hz", "area"};

static int voigt_check(const double *p, size_t *bad, const char **why)
{
    int rc = prof_check_finite(p, 4, bad, why);
    if (rc)
        return rc;
    for (size_t k = 1; k <= 2; k++)
        if (p[k] < 0.0) {
            if (bad)
                *bad = k;
            if (why)
                *why = "must be >= 0";
            return CS_ERANGE;
        }
    if (p[1] == 0.0 && p[2] == 0.0) {
        if (bad)
            *bad = 1;
        if (why)
            *why = "must be > 0 when fwhm_l is 0";
        return CS_ERANGE;
    }
    return CS_OK;
}

static void voigt_eval(const double *p, const double *x, size_t n, double *y)
{
    if (voigt_check(p, NULL, NULL) != CS_OK) {
        prof_jw w;
        prof_jw_init(&w, NULL, 4);
        prof_fill_nan(y, &w, n);
        return;
    }
    double x0 = p[0], s = p[1] * DS_DFG, g = 0.5 * p[2], a = p[3];
    for (size_t i = 0; i < n; i++) {
        double v;
        voigt_kernel(x[i] - x0, s, g, &v, NULL);
        y[i] += a * v;
    }
}

static void voigt_eval_jac(const double *p, const double *x, size_t n, double *y, const cs_profile_jac *jac)
{
    prof_jw w;
    prof_jw_init(&w, jac, 4);
    if (voigt_check(p, NULL, NULL) != CS_OK) {
        prof_fill_nan(y, &w, n);
        return;
    }
    double x0 = p[0], s = p[1] * DS_DFG, g = 0.5 * p[2], a = p[3];
    for (size_t i = 0; i < n; i++) {
        double v, dv[3], d[4];
        voigt_kernel(x[i] - x0, s, g, &v, dv);
        if (y)
            y[i] += a * v;
        d[0] = a * dv[0];
        d[1] = a * dv[1] * DS_DFG;
        d[2] = a * dv[2] * 0.5;
        d[3] = v;
        prof_jw_add(&w, i, d);
    }
}

/* Unit-area V(u) and its derivatives with respect to u, fwhm_g, fwhm_l. */
static void voigt_unit(double u, double fg, double fl, double *v, double *dv_du, double *dv_dfg, double *dv_dfl)
{
    double dv[3];
    voigt_kernel(u, fg * DS_DFG, 0.5 * fl, v, dv);
    *dv_du = -dv[0];
    *dv_dfg = dv[1] * DS_DFG;
    *dv_dfl = dv[2] * 0.5;
}

int cs_profile_voigt_fwhm(double fwhm_g, double fwhm_l, double *fwhm, double grad[2])
{
    if (!fwhm)
        return CS_EINVAL;
    *fwhm = NAN;
    if (grad)
        grad[0] = grad[1] = NAN;
    if (!isfinite(fwhm_g) || !isfinite(fwhm_l))
        return CS_EINVAL;
    if (fwhm_g < 0.0 || fwhm_l < 0.0 || (fwhm_g == 0.0 && fwhm_l == 0.0))
        return CS_ERANGE;

    double v0, d0u, d0g, d0l;
    voigt_unit(0.0, fwhm_g, fwhm_l, &v0, &d0u, &d0g, &d0l);
    double half = 0.5 * v0;
    double h, v, du, dg, dl;
    if (fwhm_g == 0.0 || fwhm_l == 0.0) {
        /* pure Lorentzian or Gaussian: the half width is known exactly */
        h = 0.5 * (fwhm_g + fwhm_l);
        voigt_unit(h, fwhm_g, fwhm_l, &v, &du, &dg, &dl);
    } else {
        /* bracket: max(f_G, f_L) <= f_V <= f_G + f_L, widened if rounding disagrees */
        double lo = 0.5 * fmax(fwhm_g, fwhm_l) * (1.0 - 1e-6);
        double hi = 0.5 * (fwhm_g + fwhm_l) * (1.0 + 1e-6);
        voigt_unit(lo, fwhm_g, fwhm_l, &v, &du, &dg, &dl);
        for (int k = 0; k < 60 && !(v > half); k++) {
            lo *= 0.5;
            voigt_unit(lo, fwhm_g, fwhm_l, &v, &du, &dg, &dl);
        }
        if (!(v > half))
            return CS_ENOCONV;
        voigt_unit(hi, fwhm_g, fwhm_l, &v, &du, &dg, &dl);
        for (int k = 0; k < 60 && !(v < half); k++) {
            hi *= 2.0;
            voigt_unit(hi, fwhm_g, fwhm_l, &v, &du, &dg, &dl);
        }
        if (!(v < half))
            return CS_ENOCONV;
        h = 0.5 * cs_profile_voigt_fwhm_ol(fwhm_g, fwhm_l);
        if (!(h > lo && h < hi))
            h = 0.5 * (lo + hi);
        int ok = 0;
        for (int it = 0; it < 200 && !ok; it++) {
            voigt_unit(h, fwhm_g, fwhm_l, &v, &du, &dg, &dl);
            double f = v - half;
            if (f == 0.0) {
                ok = 1;
                break;
            }
            if (f > 0.0)
                lo = h;
            else
                hi = h;
            double hn = h - f / du;
            if (!(hn > lo && hn < hi))
                hn = 0.5 * (lo + hi);
            if (fabs(hn - h) <= 1e-15 * h || hi - lo <= 4e-16 * h)
                ok = 1;
            h = hn;
        }
        if (!ok)
            return CS_ENOCONV;
        voigt_unit(h, fwhm_g, fwhm_l, &v, &du, &dg, &dl);
    }
    if (!(du < 0.0) || !isfinite(h))
        return CS_ENOCONV;
    *fwhm = 2.0 * h;
    if (grad) {
        /* V(h; f) - V(0; f)/2 = 0  =>  dh/df = -(dV(h)/df - dV(0)/df / 2) / (dV/du at h) */
        grad[0] = -2.0 * (dg - 0.5 * d0g) / du;
        grad[1] = -2.0 * (dl - 0.5 * d0l) / du;
    }
    return CS_OK;
}

#define OL_A 0.5346
#define OL_B 0.2166

double cs_profile_voigt_fwhm_ol(double fwhm_g, double fwhm_l)
{
    if (!isfinite(fwhm_g) || !isfinite(fwhm_l) || fwhm_g < 0.0 || fwhm_l < 0.0 ||
        (fwhm_g == 0.0 && fwhm_l == 0.0))
        return NAN;
    /* J. J. Olivero, R. L. Longbothum, JQSRT 17, 233 (1977) */
    return OL_A * fwhm_l + sqrt(OL_B * fwhm_l * fwhm_l + fwhm_g * fwhm_g);
}

static int voigt_quantity(cs_profile_qty q, const double *p, double *value, double *grad)
{
    int rc = voigt_check(p, NULL, NULL);
    if (rc)
        return prof_qty_fail(rc, 4, value, grad);
    double fg = p[1], fl = p[2], a = p[3];
    prof_grad_zero(grad, 4);
    switch (q) {
    case CS_PROFILE_HEIGHT: {
        double v0, du, dg, dl;
        voigt_unit(0.0, fg, fl, &v0, &du, &dg, &dl);
        *value = a * v0;
        if (grad) {
            grad[1] = a * dg;
            grad[2] = a * dl;
            grad[3] = v0;
        }
        return CS_OK;
    }
    case CS_PROFILE_POSITION:
        *value = p[0];
        if (grad)
            grad[0] = 1.0;
        return CS_OK;
    case CS_PROFILE_FWHM:
    case CS_PROFILE_HWHM: {
        double g2[2], f;
        rc = cs_profile_voigt_fwhm(fg, fl, &f, g2);
        if (rc)
            return prof_qty_fail(rc, 4, value, grad);
        double m = (q == CS_PROFILE_HWHM) ? 0.5 : 1.0;
        *value = m * f;
        if (grad) {
            grad[1] = m * g2[0];
            grad[2] = m * g2[1];
        }
        return CS_OK;
    }
    case CS_PROFILE_SIGMA:
        *value = fg / (2.0 * SQRT_2LN2_);
        if (grad)
            grad[1] = 1.0 / (2.0 * SQRT_2LN2_);
        return CS_OK;
    case CS_PROFILE_GAMMA:
        *value = 2.0 * PI_ * fl;
        if (grad)
            grad[2] = 2.0 * PI_;
        return CS_OK;
    case CS_PROFILE_FWHM_OL: {
        double r = sqrt(OL_B * fl * fl + fg * fg);
        *value = OL_A * fl + r;
        if (grad) {
            grad[1] = fg / r;
            grad[2] = OL_A + OL_B * fl / r;
        }
        return CS_OK;
    }
    case CS_PROFILE_INTEGRAL:
        *value = a;
        if (grad)
            grad[3] = 1.0;
        return CS_OK;
    default:
        return prof_qty_fail(CS_EUNSUP, 4, value, grad);
    }
}

const cs_profile_type cs_profile_voigt = {
    "voigt",
    "Voigt: Gaussian (fwhm_g) convolved with Lorentzian (fwhm_l), via the Faddeeva function",
    4, voigt_names, voigt_units,
    voigt_check, voigt_eval, voigt_eval_jac, voigt_quantity};
