/* Writing results: value(error) notation with SI prefixes, atomic output files, SHA-256 checksums
 * of inputs, and run reports in Markdown and JSON. */
#ifndef CS_REPORT_H
#define CS_REPORT_H

#include <stddef.h>
#include <collshift/error.h>
#include <collshift/units.h>

#ifdef __cplusplus
extern "C" {
#endif

/* Format a value with its standard uncertainty in the concise notation of the GUM (JCGM 100:2008,
 * 7.2.2): the uncertainty is rounded to two significant digits, the value to the same decimal place,
 * and the uncertainty is written in parentheses in units of the last digit, e.g.
 * -1234567 Hz +- 15000 Hz -> "-1.235(15) MHz". The SI prefix is chosen from the larger of |value|
 * and err (densities are shown in cm^-3 with a power of ten: "3.20(15)e+13 cm^-3").
 * dim == CS_DIM_DIMENSIONLESS or CS_DIM_UNKNOWN prints no unit (and a power of ten when needed).
 * A zero or negative err prints the value with 6 significant digits followed by " (no error)"
 * (e.g. a fixed parameter); a NaN or infinite err (an error that could not be computed: a fit
 * that did not converge, a singular covariance, a parameter at a bound) prints it followed by
 * " (error undefined)". A NaN or infinite value prints "undefined": the words "nan" and "inf"
 * never appear in an output. Returns buf. */
char *cs_format_value_err(double value, double err, cs_dim dim, char *buf, size_t n);

/* Write len bytes to path atomically: a temporary file in the same folder (same name plus
 * ".tmp.XXXXXX"), flushed, then renamed over path, so an interrupted run never leaves a
 * half-written file. The new file gets the usual permissions (0666 less the umask).
 * Returns CS_OK or CS_EIO (message names the path and the system's reason). */
int cs_write_atomic(const char *path, const void *data, size_t len, cs_error *err);


/* ---------------------------------------------------------------- checksums (src/report_hash.c) */

/* SHA-256 (FIPS 180-4) of len bytes, through OpenSSL's libcrypto (EVP interface), as 64 lowercase
 * hexadecimal digits and a terminating NUL in hex. Returns CS_OK, CS_EINVAL (NULL hex, or NULL
 * data with len > 0) or CS_EUNSUP (libcrypto failed). */
int cs_sha256_hex(const void *data, size_t len, char hex[65], cs_error *err);
/* SHA-256 of a file's contents, read in blocks. Returns CS_OK, CS_EIO (message names the path and
 * the system's reason), CS_EINVAL, CS_EUNSUP. */
int cs_sha256_file(const char *path, char hex[65], cs_error *err);

/* ---------------------------------------------------------------- run reports (src/report_md.c) */

/* A report of one run, built item by item and rendered as Markdown or as JSON with the same
 * content. It holds a title, the run's inputs (path, size and SHA-256), and sections; a section
 * holds, in order, paragraphs, named fields (text), named values with errors (rendered in the
 * value(error) notation of cs_format_value_err, and in JSON as numbers in SI units), tables and
 * links to figures. Text is copied. Items added before any section go into an untitled first
 * section.
 *
 * Markdown layout: "# TITLE", then "## Inputs" (a table: role, file, bytes, SHA-256), then each
 * section as "## HEADING" with paragraphs, "- **name**: text" lines, pipe tables and figure links
 * ("![caption](path)" for PNG and SVG images, "[caption](path)" otherwise).
 * JSON layout: {"title", "inputs": [{"role", "path", "bytes", "sha256"}], "sections":
 * [{"heading", "items": [{"type": "text", "text"} | {"type": "field", "name", "text"} |
 * {"type": "value", "name", "value", "error", "unit", "text"} | {"type": "table", "caption",
 * "columns": [...], "rows": [[...], ...]} | {"type": "figure", "caption", "path"}]}]}.
 *
 * Functions that add return CS_OK, CS_EINVAL (NULL arguments, a row before its table, a row of
 * another width) or CS_ENOMEM. Nothing here prints. */
typedef struct cs_report cs_report;

cs_report *cs_report_alloc(const char *title);
void cs_report_free(cs_report *r);
/* Record an input file: its size and SHA-256 are computed now. role: e.g. "spectrum".
 * Returns as cs_sha256_file, or CS_ENOMEM. */
int cs_report_add_input(cs_report *r, const char *role, const char *path, cs_error *err);
/* The SHA-256 recorded for input i (NULL when i is out of range), and the number of inputs. */
size_t cs_report_ninputs(const cs_report *r);
const char *cs_report_input_sha256(const cs_report *r, size_t i);
/* Start a new section. */
int cs_report_section(cs_report *r, const char *heading);
/* A paragraph (printf-formatted). */
int cs_report_text(cs_report *r, const char *fmt, ...)
#if defined(__GNUC__)
    __attribute__((format(printf, 2, 3)))
#endif
    ;
/* A named field with a text value. */
int cs_report_field(cs_report *r, const char *name, const char *text);
/* A named value in SI units with its standard error (err <= 0 or NaN: no error), of dimension
 * dim (CS_DIM_DIMENSIONLESS: no unit; `unit` of the JSON is then "" ). */
int cs_report_value(cs_report *r, const char *name, double value, double err, cs_dim dim);
/* Start a table of ncol columns with header texts; caption may be NULL. */
int cs_report_table(cs_report *r, const char *caption, size_t ncol, const char *const *columns);
/* Append a row of ncol cells to the table just started ('|' in a cell is escaped in Markdown).
 * A cell (or a field's text) that is only a printed non-finite number ("nan", "-inf", "inf Hz",
 * ...) is stored as "undefined". */
int cs_report_row(cs_report *r, const char *const *cells);
/* A link to a figure, path as it should appear (relative to the report, usually). */
int cs_report_figure(cs_report *r, const char *caption, const char *path);

/* Render as Markdown or JSON (indented, keys in the order above). Return a malloc'd, NUL-terminated
 * text the caller frees, or NULL on allocation failure. */
char *cs_report_markdown(const cs_report *r);
char *cs_report_json(const cs_report *r);

/* CS_OK when writing to path cannot overwrite one of the report's inputs (same file by device and
 * inode, or the same path text); CS_EINVAL naming the input otherwise. */
int cs_report_check_output(const cs_report *r, const char *path, cs_error *err);
/* Write the Markdown to md_path and the JSON to json_path (either may be NULL), each atomically
 * (cs_write_atomic), after cs_report_check_output. Returns CS_OK, CS_EINVAL, CS_ENOMEM, CS_EIO. */
int cs_report_write(const cs_report *r, const char *md_path, const char *json_path, cs_error *err);

#ifdef __cplusplus
}
#endif
#endif /* CS_REPORT_H */
