/* Figure sessions through PLplot's cairo driver: format, atomic temporary file, silence, palette, axes. */
#define _POSIX_C_SOURCE 200809L
#include <collshift/plot.h>
#include "plot_impl.h"

#include <errno.h>
#include <fcntl.h>
#include <math.h>
#include <pthread.h>
#include <setjmp.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <strings.h>
#include <sys/stat.h>
#include <unistd.h>

#include <plplot.h>

/* ---------------------------------------------------------------- options and formats */

void cs_plot_options_init(cs_plot_options *o)
{
    if (!o)
        return;
    o->width_cm = 8.5;
    o->height_cm = 0;
    o->dpi = 300;
    o->font_scale = 1;
    o->title = NULL;
}

const char *cs_plot_format_name(cs_plot_format f)
{
    switch (f) {
    case CS_PLOT_PNG: return "png";
    case CS_PLOT_SVG: return "svg";
    case CS_PLOT_PDF: return "pdf";
    }
    return "?";
}

int cs_plot_format_from_path(const char *path, cs_plot_format *fmt, cs_error *err)
{
    if (!path || !*path || !fmt)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "no figure file name given");
    const char *slash = strrchr(path, '/');
    const char *dot = strrchr(slash ? slash + 1 : path, '.');
    if (!dot || dot[1] == '\0')
        return cs_error_set(err, CS_EINVAL, path, -1, -1,
                            "figure file has no extension; use .png, .svg or .pdf");
    static const char *const ext[] = {".png", ".svg", ".pdf"};
    for (int i = 0; i < 3; i++)
        if (strcasecmp(dot, ext[i]) == 0) {
            *fmt = (cs_plot_format)i;
            return CS_OK;
        }
    return cs_error_set(err, CS_EINVAL, path, -1, -1,
                        "unknown figure format '%s'; use .png, .svg or .pdf", dot + 1);
}

/* ---------------------------------------------------------------- the locked session */

static pthread_mutex_t cs_plot_lock = PTHREAD_MUTEX_INITIALIZER;
static jmp_buf cs_plot_jmp;
static char cs_plot_msg[256];

/* PLplot calls this on a fatal error and would then exit: jump back to the session instead. */
static int cs_plot_on_exit(const char *msg)
{
    snprintf(cs_plot_msg, sizeof cs_plot_msg, "%s", msg ? msg : "");
    longjmp(cs_plot_jmp, 1);
}

/* PLplot's non-fatal "abort" of one call: keep the first message. */
static void cs_plot_on_abort(const char *msg)
{
    if (!cs_plot_msg[0])
        snprintf(cs_plot_msg, sizeof cs_plot_msg, "%s", msg ? msg : "");
}

/* Okabe & Ito (2008) plus neutral greys; index 0 is the background. */
static const int cs_plot_rgb[CS_PC_COUNT][3] = {
    {255, 255, 255}, {0, 0, 0}, {230, 159, 0}, {86, 180, 233}, {0, 158, 115}, {240, 228, 66},
    {0, 114, 178}, {213, 94, 0}, {204, 121, 167}, {120, 120, 120}, {220, 220, 220}, {255, 255, 255}};

int cs_plot_series_color(size_t i)
{
    static const int order[] = {CS_PC_BLUE, CS_PC_ORANGE, CS_PC_GREEN, CS_PC_VERMILLION,
                                CS_PC_PURPLE, CS_PC_SKY};
    return order[i % (sizeof order / sizeof order[0])];
}

/* Viridis-like map (blue - green - yellow): control points for cmap1. */
static void cs_plot_set_cmap1(void)
{
    PLFLT pos[] = {0.0, 0.25, 0.5, 0.75, 1.0};
    PLFLT r[] = {68 / 255.0, 59 / 255.0, 33 / 255.0, 94 / 255.0, 253 / 255.0};
    PLFLT g[] = {1 / 255.0, 82 / 255.0, 145 / 255.0, 201 / 255.0, 231 / 255.0};
    PLFLT b[] = {84 / 255.0, 139 / 255.0, 140 / 255.0, 98 / 255.0, 37 / 255.0};
    plscmap1n(256);
    plscmap1l(1, 5, pos, r, g, b, NULL);
}

/* Silence fds 1 and 2 (PLplot and its libraries write to them directly). */
typedef struct cs_plot_quiet { int saved[2]; } cs_plot_quiet;

static void cs_plot_quiet_on(cs_plot_quiet *q)
{
    fflush(stdout);
    fflush(stderr);
    int null = open("/dev/null", O_WRONLY | O_CLOEXEC);
    for (int k = 0; k < 2; k++) {
        q->saved[k] = null >= 0 ? fcntl(k + 1, F_DUPFD_CLOEXEC, 3) : -1;
        if (q->saved[k] >= 0)
            dup2(null, k + 1);
    }
    if (null >= 0)
        close(null);
}

static void cs_plot_quiet_off(cs_plot_quiet *q)
{
    fflush(stdout);
    fflush(stderr);
    for (int k = 0; k < 2; k++)
        if (q->saved[k] >= 0) {
            dup2(q->saved[k], k + 1);
            close(q->saved[k]);
        }
}

static int cs_plot_check_options(const cs_plot_options *o, double hdef, cs_plot_ctx *c,
                                 cs_error *err)
{
    double w = o->width_cm, h = o->height_cm > 0 ? o->height_cm : hdef;
    if (!(w >= 2 && w <= 100) || !(h >= 2 && h <= 100) || !(o->height_cm >= 0))
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1,
                            "figure size %g x %g cm is outside 2 .. 100 cm", w, h);
    if (!(o->dpi >= 30 && o->dpi <= 2400))
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "dpi %g is outside 30 .. 2400", o->dpi);
    if (!(o->font_scale >= 0.2 && o->font_scale <= 5))
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "font scale %g is outside 0.2 .. 5",
                            o->font_scale);
    c->width_mm = 10 * w;
    c->height_mm = 10 * h;
    c->font = o->font_scale;
    c->title = o->title && *o->title ? o->title : NULL;
    return CS_OK;
}

int cs_plot_render(const char *path, const cs_plot_options *o, double default_height_cm,
                   cs_plot_draw_fn draw, const void *data, cs_error *err)
{
    cs_plot_options def;
    if (!o) {
        cs_plot_options_init(&def);
        o = &def;
    }
    cs_plot_ctx c;
    memset(&c, 0, sizeof c);
    int rc = cs_plot_format_from_path(path, &c.fmt, err);
    if (rc)
        return rc;
    if ((rc = cs_plot_check_options(o, default_height_cm, &c, err)))
        return rc;

    double inch_w = c.width_mm / 25.4, inch_h = c.height_mm / 25.4;
    PLINT pw, ph;
    PLFLT dpi;
    if (c.fmt == CS_PLOT_PNG) {
        pw = (PLINT)lround(inch_w * o->dpi);
        ph = (PLINT)lround(inch_h * o->dpi);
        c.s = o->dpi / 72.0;
        dpi = o->dpi;
    } else {  /* cairo's vector surfaces are sized in points */
        pw = (PLINT)lround(inch_w * 72);
        ph = (PLINT)lround(inch_h * 72);
        c.s = 1;
        dpi = 72;
    }

    size_t plen = strlen(path);
    char *tmp = malloc(plen + 16);
    if (!tmp)
        return cs_error_set(err, CS_ENOMEM, NULL, -1, -1, "out of memory");
    memcpy(tmp, path, plen);
    memcpy(tmp + plen, ".tmp.XXXXXX", 12);

    pthread_mutex_lock(&cs_plot_lock);
    int fd = mkstemp(tmp);
    if (fd < 0) {
        rc = cs_error_set(err, CS_EIO, path, -1, -1, "cannot write the figure: %s", strerror(errno));
        pthread_mutex_unlock(&cs_plot_lock);
        free(tmp);
        return rc;
    }
    close(fd);

    static const char *const dev[] = {"pngcairo", "svgcairo", "pdfcairo"};
    cs_plot_quiet q;
    cs_plot_quiet_on(&q);
    cs_plot_msg[0] = '\0';
    volatile int started = 0, failed = 0;
    volatile int drc = CS_OK;
    PLINT strm = 0, old = 0;
    plgstrm(&old);
    plsexit(cs_plot_on_exit);
    plsabort(cs_plot_on_abort);
    if (setjmp(cs_plot_jmp) == 0) {
        plmkstrm(&strm);
        started = 1;
        plsdev(dev[c.fmt]);
        plsfnam(tmp);
        plspage(dpi, dpi, pw, ph, 0, 0);
        PLINT r[CS_PC_COUNT], g[CS_PC_COUNT], b[CS_PC_COUNT];
        for (int i = 0; i < CS_PC_COUNT; i++) {
            r[i] = cs_plot_rgb[i][0];
            g[i] = cs_plot_rgb[i][1];
            b[i] = cs_plot_rgb[i][2];
        }
        plscmap0(r, g, b, CS_PC_COUNT);
        cs_plot_set_cmap1();
        plinit();
        pladv(0);
        plfont(1);
        drc = draw(&c, data, err);
        started = 0;
        plend1();
    } else {
        failed = 1;
        if (started && setjmp(cs_plot_jmp) == 0)
            plend1();
    }
    plsstrm(old);
    plsexit(NULL);
    plsabort(NULL);
    cs_plot_quiet_off(&q);

    if (failed)
        rc = cs_error_set(err, CS_EIO, path, -1, -1, "plotting failed: %s",
                          cs_plot_msg[0] ? cs_plot_msg : "PLplot error");
    else
        rc = drc;
    if (rc == CS_OK) {
        struct stat st;
        if (stat(tmp, &st) != 0 || st.st_size == 0)
            rc = cs_error_set(err, CS_EIO, path, -1, -1, "cannot write the figure%s%s",
                              cs_plot_msg[0] ? ": " : "", cs_plot_msg);
    }
    if (rc == CS_OK) {
        mode_t um = umask(0);
        umask(um);
        chmod(tmp, 0666 & ~um);
        if (rename(tmp, path) != 0)
            rc = cs_error_set(err, CS_EIO, path, -1, -1, "cannot write the figure: %s",
                              strerror(errno));
    }
    if (rc != CS_OK)
        unlink(tmp);
    pthread_mutex_unlock(&cs_plot_lock);
    free(tmp);
    return rc;
}

/* ---------------------------------------------------------------- drawing helpers */

#define CS_PLOT_TEXT_MM 1.75  /* base character height, physical mm (about 8 pt text) */

void cs_plot_viewport(const cs_plot_ctx *c, double left_mm, double right_mm, double bottom_mm,
                      double top_mm)
{
    plvpor(left_mm / c->width_mm, 1 - right_mm / c->width_mm, bottom_mm / c->height_mm,
           1 - top_mm / c->height_mm);
}

void cs_plot_text(const cs_plot_ctx *c, double rel)
{
    plschr(CS_PLOT_TEXT_MM * c->s * c->font * rel, 1.0);
}

void cs_plot_width(const cs_plot_ctx *c, double pt)
{
    plwidth(pt * c->s);
}

void cs_plot_dash(const cs_plot_ctx *c, int style)
{
    /* mark / space lengths in physical mm: solid, dashed, dotted, dash-dot, long dash */
    static const double pat[][4] = {{0, 0, 0, 0}, {0, 0, 0, 0}, {2.0, 1.0, 0, 0}, {0.4, 0.8, 0, 0},
                                    {2.0, 0.8, 0.4, 0.8}, {3.5, 1.2, 0, 0}};
    int k = style >= 1 && style <= 5 ? style : 2 + (style % 4);
    PLINT mark[2], space[2], nms = pat[k][0] == 0 ? 0 : pat[k][2] == 0 ? 1 : 2;
    for (int i = 0; i < 2; i++) {
        mark[i] = (PLINT)lround(pat[k][2 * i] * 1000 * c->s);
        space[i] = (PLINT)lround(pat[k][2 * i + 1] * 1000 * c->s);
    }
    if (nms == 0)
        pllsty(1);
    else
        plstyl(nms, mark, space);
}

void cs_plot_frame(const cs_plot_ctx *c, const char *xopt, const char *yopt)
{
    plcol0(CS_PC_BLACK);
    pllsty(1);
    cs_plot_width(c, 0.6);
    plsmaj(1.4 * c->s, 1.0);
    plsmin(0.7 * c->s, 1.0);
    cs_plot_text(c, 1.0);
    plsxax(8, 0);  /* the axes carry their own power of ten: no automatic "x10^n" */
    plsyax(8, 0);
    plbox(xopt, 0, 0, yopt, 0, 0);
}

void cs_plot_title(const cs_plot_ctx *c)
{
    if (!c->title)
        return;
    plcol0(CS_PC_BLACK);
    cs_plot_text(c, 1.1);
    plmtex("t", 2.2, 0.5, 0.5, c->title);
    cs_plot_text(c, 1.0);
}

/* ---------------------------------------------------------------- axes */

static const char *cs_plot_prefix(int e3)
{
    static const char *const p[] = {"f", "p", "n", "µ", "m", "", "k", "M", "G", "T", "P"};
    int i = e3 / 3 + 5;
    return i >= 0 && i <= 10 ? p[i] : "";
}

/* Exponent (multiple of 3, -15 .. 15) that brings m into [1, 1000). */
static int cs_plot_e3(double m)
{
    if (!(m > 0) || !isfinite(m))
        return 0;
    int e = (int)floor(log10(m) / 3.0 + 1e-9) * 3;
    return e < -15 ? -15 : e > 15 ? 15 : e;
}

/* "10⁻¹³ unit" with Unicode superscripts (cairo's text is cleaner than PLplot's #u / #d). */
static void cs_plot_unit_power(char *buf, size_t n, int p, const char *unit)
{
    static const char *const sup[] = {"⁰", "¹", "²", "³", "⁴", "⁵", "⁶", "⁷", "⁸", "⁹"};
    if (p == 0) {
        snprintf(buf, n, "%s", unit);
        return;
    }
    char digits[64] = "";
    char tmp[16];
    int a = p < 0 ? -p : p;
    snprintf(tmp, sizeof tmp, "%d", a);
    if (p < 0)
        strcat(digits, "⁻");
    for (const char *q = tmp; *q; q++)
        strcat(digits, sup[*q - '0']);
    snprintf(buf, n, "10%s %s", digits, unit);
}

void cs_plot_axis_si(cs_plot_axis *a, const char *quantity, const char *unit, double lo, double hi,
                     int allow_offset)
{
    a->offset = 0;
    double span = fabs(hi - lo), mid = 0.5 * (lo + hi);
    char off[64] = "";
    if (allow_offset && isfinite(span) && span > 0 && fabs(mid) > 1e3 * span) {
        int k = (int)floor(log10(span));           /* offset to the span's decade */
        double q = pow(10, k);
        a->offset = round(mid / q) * q;
        int e3 = cs_plot_e3(fabs(a->offset));
        int dec = e3 - k > 0 ? e3 - k : 0;
        snprintf(off, sizeof off, " − %.*f %s%s", dec, a->offset / pow(10, e3), cs_plot_prefix(e3),
                 unit);
    }
    double m = fmax(fabs(lo - a->offset), fabs(hi - a->offset));
    int e3 = cs_plot_e3(m);
    a->scale = pow(10, e3);
    snprintf(a->label, sizeof a->label, "%s%s (%s%s)", quantity, off, cs_plot_prefix(e3), unit);
}

void cs_plot_axis_plain(cs_plot_axis *a, const char *quantity, const char *unit, double lo, double hi)
{
    double m = fmax(fabs(lo), fabs(hi));
    int p = 0;
    if (m > 0 && isfinite(m) && (m >= 1e4 || m < 1e-2))
        p = (int)floor(log10(m));
    a->offset = 0;
    a->scale = pow(10, p);
    char u[96];
    cs_plot_unit_power(u, sizeof u, p, unit && *unit ? unit : "arb. u.");
    snprintf(a->label, sizeof a->label, "%s (%s)", quantity, u);
}

void cs_plot_axis_density(cs_plot_axis *a, double lo_m3, double hi_m3)
{
    double m = fmax(fabs(lo_m3), fabs(hi_m3)) * 1e-6;
    int p = m > 0 && isfinite(m) ? (int)floor(log10(m)) : 0;
    a->offset = 0;
    a->scale = 1e6 * pow(10, p);
    char u[96];
    cs_plot_unit_power(u, sizeof u, p, "cm⁻³");
    snprintf(a->label, sizeof a->label, "density (%s)", u);
}

int cs_plot_minmax(const double *v, const double *e, size_t n, double *lo, double *hi)
{
    int any = 0;
    double a = 0, b = 0;
    for (size_t i = 0; i < n; i++) {
        if (!isfinite(v[i]))
            continue;
        double d = e && isfinite(e[i]) ? fabs(e[i]) : 0;
        double l = v[i] - d, h = v[i] + d;
        if (!any || l < a)
            a = l;
        if (!any || h > b)
            b = h;
        any = 1;
    }
    *lo = a;
    *hi = b;
    return any;
}

void cs_plot_pad(double *lo, double *hi, double frac)
{
    double span = *hi - *lo;
    if (!(span > 0)) {
        span = fabs(*lo) > 0 ? 0.1 * fabs(*lo) : 1;
        *lo -= 0.5 * span;
        *hi += 0.5 * span;
        return;
    }
    *lo -= frac * span;
    *hi += frac * span;
}

/* ---------------------------------------------------------------- legend and gates */

void cs_plot_legend(const cs_plot_ctx *c, const cs_plot_legend_entry *e, size_t n, int corner)
{
    if (n == 0 || n > 16)
        return;
    PLINT opt[16], tcol[16], lcol[16], lsty[16], scol[16], snum[16];
    PLFLT lw[16], ssc[16];
    const char *text[16], *sym[16];
    for (size_t i = 0; i < n; i++) {
        opt[i] = (e[i].line_style ? PL_LEGEND_LINE : 0) | (e[i].symbol ? PL_LEGEND_SYMBOL : 0);
        if (!opt[i])
            opt[i] = PL_LEGEND_NONE;
        tcol[i] = CS_PC_BLACK;
        lcol[i] = scol[i] = e[i].color;
        lsty[i] = e[i].line_style ? e[i].line_style : 1;
        lw[i] = (e[i].line_pt > 0 ? e[i].line_pt : 1) * c->s;
        ssc[i] = 0.7;
        snum[i] = 1;
        text[i] = e[i].text;
        sym[i] = "●";
    }
    static const PLINT pos[] = {
        PL_POSITION_TOP | PL_POSITION_RIGHT, PL_POSITION_TOP | PL_POSITION_LEFT,
        PL_POSITION_BOTTOM | PL_POSITION_RIGHT, PL_POSITION_BOTTOM | PL_POSITION_LEFT};
    PLFLT w, h;
    cs_plot_text(c, 0.85);
    cs_plot_width(c, 0.4);
    pllegend(&w, &h, PL_LEGEND_BACKGROUND | PL_LEGEND_BOUNDING_BOX, pos[corner & 3] | PL_POSITION_INSIDE,
             0.02, 0.03, 0.07, 0, CS_PC_GREY, 1, 0, 0, (PLINT)n, opt, 0.6, 1.0, 1.5, 0.0, tcol,
             (const char *const *)text, NULL, NULL, NULL, NULL, lcol, lsty, lw, scol, ssc, snum,
             (const char *const *)sym);
    cs_plot_text(c, 1.0);
}

void cs_plot_gates(const cs_plot_ctx *c, const cs_plot_gate *g, size_t n, const cs_plot_axis *ax,
                   double ylo, double yhi, int shade, int line_color)
{
    PLFLT xmin, xmax, ymin, ymax;
    plgvpw(&xmin, &xmax, &ymin, &ymax);
    for (size_t i = 0; i < n; i++) {
        double x0 = cs_plot_map(ax, g[i].start_s), x1 = cs_plot_map(ax, g[i].start_s + g[i].length_s);
        if (!isfinite(x0) || !isfinite(x1))
            continue;
        x0 = fmax(x0, xmin);
        x1 = fmin(x1, xmax);
        if (x1 <= x0)
            continue;
        if (shade) {
            PLFLT px[4] = {x0, x1, x1, x0}, py[4] = {ylo, ylo, yhi, yhi};
            plscol0a(CS_PC_SHADE, cs_plot_rgb[CS_PC_SKY][0], cs_plot_rgb[CS_PC_SKY][1],
                     cs_plot_rgb[CS_PC_SKY][2], 0.25);
            plcol0(CS_PC_SHADE);
            plfill(4, px, py);
        }
        plcol0(line_color);
        cs_plot_dash(c, 2);
        cs_plot_width(c, 0.7);
        pljoin(x0, ylo, x0, yhi);
        pljoin(x1, ylo, x1, yhi);
        cs_plot_dash(c, 1);
        if (g[i].name && *g[i].name) {
            plcol0(CS_PC_BLACK);
            cs_plot_text(c, 0.8);
            plmtex("t", 0.9, ((x0 + x1) / 2 - xmin) / (xmax - xmin), 0.5, g[i].name);
            cs_plot_text(c, 1.0);
        }
    }
}
