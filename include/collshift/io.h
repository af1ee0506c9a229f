/* Loading lab files: delimited text, raw digitizer binary, NumPy .npy and HDF5, into two types:
 * a spectrum (frequency axis in Hz, values, optional sigma, metadata) and a record (start time,
 * sample interval, real or complex samples, metadata).
 *
 * Ownership: every cs_spectrum / cs_record / cs_loaded is created by the library and released by
 * the matching _free (NULL-safe). Arrays inside belong to the object. Nothing here prints. */
#ifndef CS_IO_H
#define CS_IO_H

#include <stddef.h>
#include <collshift/error.h>
#include <collshift/units.h>

#ifdef __cplusplus
extern "C" {
#endif

/* ---------------------------------------------------------------- metadata */

/* One "# key = value [unit]" line (or an HDF5 attribute, or a value set by an option). */
typedef struct cs_meta_entry {
    char *key;        /* as written, trimmed */
    char *text;       /* the value as written, trimmed, without the unit */
    char *unit;       /* unit as written ("" when none) */
    int has_number;   /* 1 when text parsed as a finite number */
    double value;     /* the number in the unit as written (valid when has_number) */
    double si;        /* the number converted to SI (valid when has_number and dim != UNKNOWN) */
    cs_dim dim;       /* dimension of the unit; CS_DIM_UNKNOWN when no or unknown unit */
    long line;        /* 1-based source line, or -1 */
} cs_meta_entry;

typedef struct cs_meta {
    size_t n, cap;
    cs_meta_entry *e;
} cs_meta;

/* Parse the inside of a metadata comment ("density = 3.2e13 cm^-3", "sample_rate = 50 MHz",
 * "shot = 7", "note = cell B, 2nd fill") and append it. Returns CS_OK; CS_EFORMAT when there is
 * no '=' or the key is empty (then nothing is appended); CS_ENOMEM. A value whose trailing word is
 * not a known unit is kept as plain text (has_number = 0 unless the whole text is a number).
 * A key given again replaces the earlier entry (the last one wins, keys compared without regard
 * to case), so repeated keys do not grow memory. At most CS_META_MAX_KEYS different keys are
 * kept: one more is CS_ERANGE ("more than 10000 different metadata keys"), which bounds both the
 * memory and the time (lookups are linear) of a hostile file. `file` and `line` only go into
 * error messages. */
#define CS_META_MAX_KEYS 10000
int cs_meta_parse_line(cs_meta *m, const char *content, const char *file, long line, cs_error *err);

/* Append or replace key with a number already in SI units of dimension dim. CS_OK, CS_ENOMEM, or
 * CS_ERANGE when a new key would exceed CS_META_MAX_KEYS (likewise cs_meta_set_text). */
int cs_meta_set_si(cs_meta *m, const char *key, double si, cs_dim dim);
/* Append or replace key with plain text. */
int cs_meta_set_text(cs_meta *m, const char *key, const char *text);

/* Find an entry by key (case-insensitive); NULL when absent. */
const cs_meta_entry *cs_meta_find(const cs_meta *m, const char *key);

/* The SI value of key, requiring dimension dim. CS_OK and *si set; CS_EDATA when absent or not a
 * number (message says which); CS_EUNIT when the unit has another dimension or is missing.
 * A number without unit is accepted only when dim is CS_DIM_DIMENSIONLESS. */
int cs_meta_get_si(const cs_meta *m, const char *key, cs_dim dim, double *si, cs_error *err);

void cs_meta_init(cs_meta *m);
void cs_meta_release(cs_meta *m);     /* frees the entries, not m itself */
int cs_meta_copy(cs_meta *dst, const cs_meta *src);   /* dst must be initialised and empty */

/* ---------------------------------------------------------------- spectrum and record */

typedef struct cs_spectrum {
    size_t n;
    double *freq_hz;     /* ascending, strictly increasing, cyclic Hz */
    double *y;           /* values in the file's unit (after a Jacobian, per Hz) */
    double *sigma;       /* per-point standard deviation, or NULL */
    char *source;        /* file name, for messages */
    char x_unit[32];     /* the unit the axis was given in, e.g. "nm" */
    int x_unit_assumed;  /* 1 when no unit was given and Hz was assumed */
    char y_name[64];     /* column name or "" */
    cs_axis_conversion conv; /* how the axis was converted */
    cs_meta meta;
} cs_spectrum;

typedef struct cs_record {
    size_t n;            /* number of samples */
    double t0_s;         /* time of the first sample, s */
    double dt_s;         /* sample interval, s (> 0) */
    int is_complex;      /* 0: data holds n reals; 1: data holds n (re, im) pairs, interleaved,
                            layout-compatible with C99 double complex and fftw_complex */
    double *data;
    size_t shot;         /* 0-based index of this shot within its file */
    char *source;
    char t_unit[32];     /* the unit the time axis was given in */
    cs_meta meta;
} cs_record;

/* Allocate a spectrum of n points (sigma allocated when with_sigma). Arrays are zeroed.
 * Returns NULL on allocation failure. */
cs_spectrum *cs_spectrum_alloc(size_t n, int with_sigma);
void cs_spectrum_free(cs_spectrum *s);

/* Allocate a record of n samples (2n doubles when is_complex), zeroed, dt_s = 1, t0_s = 0. */
cs_record *cs_record_alloc(size_t n, int is_complex);
void cs_record_free(cs_record *r);

/* Robust noise estimate: sigma = 1.4826 * MAD(first differences) / sqrt(2), which is insensitive
 * to smooth lines and outliers (common practice). For complex records the real and imaginary parts
 * are pooled. Returns NaN when n < 3. */
double cs_spectrum_noise(const cs_spectrum *s);
double cs_record_noise(const cs_record *r);

/* ---------------------------------------------------------------- loading */

typedef enum cs_format {
    CS_FORMAT_AUTO = 0,  /* by magic bytes, then extension, else delimited text */
    CS_FORMAT_TEXT,
    CS_FORMAT_RAW,
    CS_FORMAT_NPY,
    CS_FORMAT_HDF5
} cs_format;

typedef enum cs_kind {
    CS_KIND_AUTO = 0,    /* decided by the axis unit or column names; binary data are records */
    CS_KIND_SPECTRUM,
    CS_KIND_RECORD
} cs_kind;

/* Sample types of raw binary records. */
typedef enum cs_raw_type {
    CS_RAW_NONE = 0,
    CS_RAW_I8, CS_RAW_I16, CS_RAW_I32, CS_RAW_F32, CS_RAW_F64,
    CS_RAW_CI8, CS_RAW_CI16, CS_RAW_CI32, CS_RAW_CF32, CS_RAW_CF64   /* interleaved I/Q */
} cs_raw_type;

/* "i16" -> CS_RAW_I16, "cf32" -> CS_RAW_CF32, ...; CS_RAW_NONE if unknown. */
cs_raw_type cs_raw_type_parse(const char *name);
const char *cs_raw_type_name(cs_raw_type t);
size_t cs_raw_type_size(cs_raw_type t);   /* bytes per sample (both I and Q for complex) */

typedef struct cs_load_options {
    cs_format format;
    cs_kind kind;
    /* delimited text */
    char delimiter;          /* 0 = detect (',', '\t', ';' or whitespace) */
    const char *x_col, *y_col, *sigma_col;  /* spectrum: header name or 1-based index; NULL = default */
    const char *t_col, *i_col, *q_col;      /* record: time, in-phase, quadrature columns */
    const char *x_unit;      /* overrides the axis unit of a spectrum */
    const char *t_unit;      /* overrides the time unit of a record */
    int air;                 /* wavelengths are in standard air */
    int y_is_density;        /* y is a spectral density per unit of the axis */
    /* raw binary */
    cs_raw_type raw_type;
    int big_endian;
    long long offset_bytes;
    double scale;            /* multiply samples by this (default 1) */
    size_t records;          /* number of back-to-back shots; 0 = 1 */
    double sample_rate_hz;   /* 0 = take from file/metadata */
    double t0_s;             /* start time when the file has no time axis */
    /* HDF5 */
    const char *dataset;     /* dataset path, e.g. "/shots/ch1" */
    const char *x_dataset;   /* HDF5 spectrum: frequency dataset (then `dataset` holds y) */
    /* limits */
    size_t min_points;       /* fewer points is an error (default 3) */
    size_t max_samples;      /* refuse declared sizes above this many samples (default 2^31) */
} cs_load_options;

void cs_load_options_init(cs_load_options *o);

/* What one file held: one spectrum, or one or more records (shots). */
typedef struct cs_loaded {
    cs_kind kind;
    cs_format format;
    cs_spectrum *spectrum;   /* kind == CS_KIND_SPECTRUM */
    cs_record **records;     /* kind == CS_KIND_RECORD */
    size_t nrecords;
    char notes[512];         /* what the loader did that the user should know, one per line
                                ("axis in nm converted to Hz (vacuum)", "Jacobian applied") */
} cs_loaded;

void cs_loaded_init(cs_loaded *l);
void cs_loaded_release(cs_loaded *l);    /* frees contents, not l itself */
/* Append a line to l->notes (truncates silently when full). */
void cs_loaded_note(cs_loaded *l, const char *fmt, ...)
#if defined(__GNUC__)
    __attribute__((format(printf, 2, 3)))
#endif
    ;

/* Load any supported file. o may be NULL for defaults. On success fills *out (which the caller
 * initialised with cs_loaded_init and later releases). Errors: CS_EIO (cannot open/read),
 * CS_EFORMAT (malformed: ragged rows, non-numeric field, decimal comma, bad header, truncated
 * binary, unknown dtype), CS_EDATA (NaN/Inf, empty, too few points, non-monotonic or duplicated
 * axis, non-uniform sampling), CS_EUNIT (unknown unit), CS_EINVAL (contradictory options),
 * CS_EUNSUP, CS_ENOMEM. err names the file and the line or byte offset. */
int cs_io_load(const char *path, const cs_load_options *o, cs_loaded *out, cs_error *err);

/* Which format cs_io_load would use for path (reads at most 8 bytes). */
cs_format cs_io_detect_format(const char *path, const cs_load_options *o);
const char *cs_format_name(cs_format f);
const char *cs_kind_name(cs_kind k);

/* Format-specific loaders (cs_io_load dispatches to these); same contract as cs_io_load. */
int cs_io_text_load(const char *path, const cs_load_options *o, cs_loaded *out, cs_error *err);
int cs_io_raw_load(const char *path, const cs_load_options *o, cs_loaded *out, cs_error *err);
int cs_io_npy_load(const char *path, const cs_load_options *o, cs_loaded *out, cs_error *err);
int cs_io_hdf5_load(const char *path, const cs_load_options *o, cs_loaded *out, cs_error *err);

/* ---------------------------------------------------------------- writing */

/* Write a spectrum as comma-separated text: metadata lines "# key = value unit", a header
 * "frequency_hz,y[,sigma]" and one row per point with 17 significant digits (round-trips exactly). */
int cs_io_text_write_spectrum(const char *path, const cs_spectrum *s, cs_error *err);
/* Write a record as text: "time_s,y" or "time_s,i,q". */
int cs_io_text_write_record(const char *path, const cs_record *r, cs_error *err);
/* Write records (all the same length and kind) as a .npy file, version 1.0, little-endian
 * '<f8' or '<c16'; 1-D for one record, 2-D (shots x samples) for several. The sample rate is not
 * part of the format: callers keep it alongside. */
int cs_io_npy_write_records(const char *path, cs_record *const *recs, size_t nrec, cs_error *err);

#ifdef __cplusplus
}
#endif
#endif /* CS_IO_H */
