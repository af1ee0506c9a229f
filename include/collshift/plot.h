/* Publication figures through PLplot's cairo driver: spectra with fits, burst envelopes, spectrograms,
 * and shift / FWHM against density, written atomically as PNG, SVG or PDF.
 *
 * Conventions. The format comes from the output file's extension (.png, .svg, .pdf, any case).
 * Figures are sized for a journal column (default 8.5 cm wide) with text of about 8 pt; PNG files
 * are rendered at `dpi` (default 300), so a PNG is lround(width_cm / 2.54 * dpi) pixels wide and
 * lround(height_cm / 2.54 * dpi) high. Axes carry quantity and unit with an SI prefix chosen from
 * the data ("frequency − 384.230 THz (MHz)" when the values sit on a large offset; densities in
 * cm^-3 with a power of ten). Colours are the colour-blind-safe palette of M. Okabe and K. Ito,
 * "Color Universal Design" (2008); the spectrogram uses a perceptually ordered blue-green-yellow
 * map that stays readable in grey scale.
 *
 * Inputs are SI: frequencies in Hz, times in s, densities in m^-3, slopes in Hz m^3. Arrays are
 * borrowed. Every figure is rendered into a temporary file beside the target and renamed over it,
 * so an interrupted run never leaves a half-written figure. Nothing here prints or exits: PLplot's
 * messages are captured (its standard streams are silenced while it draws) and its fatal errors
 * come back as CS_EIO with PLplot's message. PLplot is not thread-safe, so figures are drawn one at
 * a time under a lock (other threads' writes to stdout/stderr during a figure are discarded).
 *
 * Errors: CS_EINVAL (unknown extension, NULL or inconsistent arguments, bad options: no file is
 * created), CS_EDATA (no finite data to plot), CS_EIO (the folder is not writable, PLplot failed),
 * CS_ENOMEM. */
#ifndef CS_PLOT_H
#define CS_PLOT_H

#include <stddef.h>
#include <collshift/error.h>

#ifdef __cplusplus
extern "C" {
#endif

typedef enum cs_plot_format {
    CS_PLOT_PNG = 0,
    CS_PLOT_SVG,
    CS_PLOT_PDF
} cs_plot_format;

/* The format for path's extension: CS_OK, or CS_EINVAL (message names the extension). */
int cs_plot_format_from_path(const char *path, cs_plot_format *fmt, cs_error *err);
/* "png", "svg", "pdf". */
const char *cs_plot_format_name(cs_plot_format f);

typedef struct cs_plot_options {
    double width_cm;     /* default 8.5 (one journal column) */
    double height_cm;    /* 0 = the figure's default (6 cm; 7.5 cm for a spectrum with residuals) */
    double dpi;          /* PNG resolution, default 300 (SVG and PDF are vector) */
    double font_scale;   /* multiplies every text size, default 1 */
    const char *title;   /* drawn above the plot, or NULL / "" for none (journals prefer none) */
} cs_plot_options;

void cs_plot_options_init(cs_plot_options *o);

/* A named time span on the record's absolute time axis (cs_gate.t_start_s, cs_gate.length_s). */
typedef struct cs_plot_gate {
    const char *name;
    double start_s;
    double length_s;
} cs_plot_gate;

/* 1. Spectrum with fitted components and their total, and a residual panel (data − total) below
 * on the same frequency axis. */
typedef struct cs_plot_spectrum_data {
    size_t n;
    const double *freq_hz;          /* n, ascending */
    const double *y;                /* n, measured values */
    const double *sigma;            /* n standard deviations (error bars), or NULL */
    const double *total;            /* n, the fitted model, or NULL (then no residual panel) */
    size_t ncomp;
    const double *const *comp;      /* ncomp arrays of n: each component as drawn */
    const char *const *comp_label;  /* ncomp labels, or NULL ("component 1", ...) */
    const char *y_quantity;         /* e.g. "signal"; NULL = "intensity" */
    const char *y_unit;             /* e.g. "V"; NULL or "" = arbitrary units */
} cs_plot_spectrum_data;

int cs_plot_spectrum(const char *path, const cs_plot_spectrum_data *d, const cs_plot_options *o,
                     cs_error *err);

/* 2. Burst envelope: intensity against time, optionally on a logarithmic axis (non-positive
 * values are then left out), with the gates shaded and named. */
typedef struct cs_plot_envelope_data {
    size_t n;
    const double *t_s;              /* n, ascending, absolute times */
    const double *intensity;        /* n */
    int log_y;
    size_t ngates;
    const cs_plot_gate *gates;      /* ngates, or NULL */
    const char *y_quantity;         /* NULL = "intensity" */
    const char *y_unit;             /* NULL or "" = arbitrary units */
} cs_plot_envelope_data;

int cs_plot_envelope(const char *path, const cs_plot_envelope_data *d, const cs_plot_options *o,
                     cs_error *err);

/* 3. Spectrogram: time (x) against frequency (y), the PSD as colour in dB relative to its
 * maximum over range_db decibels, with gate boundaries and names overlaid. Large maps are
 * averaged down to at most 400 x 400 cells. */
typedef struct cs_plot_spectrogram_data {
    size_t ntime, nfreq;
    const double *time_s;           /* ntime, ascending (segment centres) */
    const double *freq_hz;          /* nfreq, ascending */
    const double *psd;              /* ntime x nfreq, row-major: psd[i * nfreq + k] */
    double range_db;                /* colour range below the maximum; 0 = 50 dB */
    size_t ngates;
    const cs_plot_gate *gates;
} cs_plot_spectrogram_data;

int cs_plot_spectrogram(const char *path, const cs_plot_spectrogram_data *d,
                        const cs_plot_options *o, cs_error *err);

/* A straight line y = intercept + slope * density (a theoretical estimate or a regression). */
typedef struct cs_plot_line {
    const char *label;
    double slope_hz_m3;
    double intercept_hz;
} cs_plot_line;

/* 4./5. A measured quantity (Hz) against density, with error bars, the regression line and
 * theoretical estimates as lines, and a legend. */
typedef struct cs_plot_density_data {
    size_t n;
    const double *density_m3;       /* n */
    const double *value_hz;         /* n: shifts or FWHM */
    const double *err_hz;           /* n standard errors, or NULL (non-finite: no bar) */
    const double *density_err_m3;   /* n horizontal error bars, or NULL */
    const char *data_label;         /* legend entry of the points; NULL = "measured" */
    int has_fit;                    /* 1: draw `fit` as the regression line */
    cs_plot_line fit;               /* label NULL = "weighted fit" */
    size_t ntheory;
    const cs_plot_line *theory;     /* ntheory estimates */
} cs_plot_density_data;

/* Shift (centre against the low-density limit, "shift" axis) against density. */
int cs_plot_shift_density(const char *path, const cs_plot_density_data *d,
                          const cs_plot_options *o, cs_error *err);
/* FWHM against density. */
int cs_plot_fwhm_density(const char *path, const cs_plot_density_data *d,
                         const cs_plot_options *o, cs_error *err);

#ifdef __cplusplus
}
#endif
#endif /* CS_PLOT_H */
