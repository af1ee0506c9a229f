/* Internals shared by the plot sources: the locked render session, sizes, palette, axes, legends. */
#ifndef CS_PLOT_IMPL_H
#define CS_PLOT_IMPL_H

#include <stddef.h>
#include <collshift/plot.h>

/* One figure being drawn. PLplot's cairo devices work at 72 "dots" per inch whatever the PNG
 * resolution, so every length is multiplied by `s` (PLplot mm per physical mm). */
typedef struct cs_plot_ctx {
    cs_plot_format fmt;
    double width_mm, height_mm;  /* physical page */
    double s;                    /* PLplot mm per physical mm */
    double font;                 /* user font scale */
    const char *title;
} cs_plot_ctx;

/* Okabe-Ito colours as PLplot cmap0 indices (0 is the white background). */
enum {
    CS_PC_BLACK = 1, CS_PC_ORANGE, CS_PC_SKY, CS_PC_GREEN, CS_PC_YELLOW, CS_PC_BLUE,
    CS_PC_VERMILLION, CS_PC_PURPLE, CS_PC_GREY, CS_PC_SHADE, CS_PC_WHITE, CS_PC_COUNT
};
/* Colour of the i-th of several curves (skips black and yellow, which is weak on white). */
int cs_plot_series_color(size_t i);

typedef int (*cs_plot_draw_fn)(const cs_plot_ctx *c, const void *data, cs_error *err);

/* Lock, check the extension, open a temporary file beside path, set up PLplot (device, size,
 * palette, silent handlers), call draw, finish and rename. */
int cs_plot_render(const char *path, const cs_plot_options *o, double default_height_cm,
                   cs_plot_draw_fn draw, const void *data, cs_error *err);

/* Drawing helpers (call only inside draw). */
void cs_plot_viewport(const cs_plot_ctx *c, double left_mm, double right_mm, double bottom_mm,
                      double top_mm);
void cs_plot_text(const cs_plot_ctx *c, double rel);     /* text height: rel x the base size */
void cs_plot_width(const cs_plot_ctx *c, double pt);     /* line width in points */
/* Line style scaled to the page: 1 solid, 2 dashed, 3 dotted, 4 dash-dot, 5 long dashes. */
void cs_plot_dash(const cs_plot_ctx *c, int style);
void cs_plot_frame(const cs_plot_ctx *c, const char *xopt, const char *yopt);
void cs_plot_title(const cs_plot_ctx *c);

/* An axis: shown value = (v - offset) / scale, and its label. */
typedef struct cs_plot_axis {
    double offset, scale;
    char label[224];
} cs_plot_axis;

static inline double cs_plot_map(const cs_plot_axis *a, double v) { return (v - a->offset) / a->scale; }

/* Quantity in an SI unit ("Hz", "s") with a prefix; allow_offset: values on a large common
 * offset are shown relative to it ("frequency − 384.230 THz (MHz)"). */
void cs_plot_axis_si(cs_plot_axis *a, const char *quantity, const char *unit, double lo, double hi,
                     int allow_offset);
/* Quantity in a non-SI unit ("" = arbitrary units) scaled by a power of ten when needed. */
void cs_plot_axis_plain(cs_plot_axis *a, const char *quantity, const char *unit, double lo, double hi);
/* Density given in m^-3, shown in cm^-3 with a power of ten. */
void cs_plot_axis_density(cs_plot_axis *a, double lo_m3, double hi_m3);

/* Finite minimum and maximum of v (and v +- e when e is not NULL); 0 when none is finite. */
int cs_plot_minmax(const double *v, const double *e, size_t n, double *lo, double *hi);
/* Widen [lo, hi] by frac of its span on both sides (a span of zero gets a sensible width). */
void cs_plot_pad(double *lo, double *hi, double frac);

/* A legend entry: a line (style 1 solid, 2 dashed, 3 dotted ...) or a symbol, or both. */
typedef struct cs_plot_legend_entry {
    const char *text;
    int color;
    int line_style;      /* 0 = no line */
    double line_pt;
    int symbol;          /* 0 = no symbol, else 1: filled circle */
} cs_plot_legend_entry;
/* Legend inside the current viewport; corner: 0 top right, 1 top left, 2 bottom right, 3 bottom left. */
void cs_plot_legend(const cs_plot_ctx *c, const cs_plot_legend_entry *e, size_t n, int corner);

/* Gates on the current viewport (world x in ax's display units, y from ylo to yhi): shaded spans
 * (shade = 1) or boundary lines of colour line_color, with the names above the frame. */
void cs_plot_gates(const cs_plot_ctx *c, const cs_plot_gate *g, size_t n, const cs_plot_axis *ax,
                   double ylo, double yhi, int shade, int line_color);

#endif
