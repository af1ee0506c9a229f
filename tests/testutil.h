/* Helpers shared by the Check suites: temporary files, reference-data paths, tolerances. */
#ifndef CS_TESTUTIL_H
#define CS_TESTUTIL_H

#include <stddef.h>

#include <collshift/model.h>

/* Write `len` bytes to a new file in a private temporary folder; returns its path (static storage
 * per call slot, valid until the process exits; the folder is removed at exit). */
const char *tu_write_file(const char *name, const void *data, size_t len);
/* Same for a NUL-terminated text. */
const char *tu_write_text(const char *name, const char *text);
/* Path of a file in the temporary folder (not created). */
const char *tu_tmp_path(const char *name);
/* Path of a file in tests/data (CS_TEST_DATA). */
const char *tu_data_path(const char *name);
/* Path of a file under ../shared/reference, or NULL when ../shared is absent (the caller skips). */
const char *tu_reference_path(const char *rel);
/* |a - b| <= rtol * |b| (or <= rtol when b == 0). */
int tu_close(double a, double b, double rtol);

/* Models for the fit suites; each fails the test with the library's message when refused. */
cs_model *tu_model(const char *text, cs_baseline_kind b, cs_model_mode mode);
/* Index of a parameter by name ("1.fwhm", "base.c0"). */
long tu_param(const cs_model *m, const char *name);
/* Starting value given by the user. */
void tu_start(cs_model *m, const char *name, double v);
/* Apply a constraint (cs_model_fix, cs_model_bound, cs_model_tie, ...) given as text. */
void tu_constrain(cs_model *m, int (*fn)(cs_model *, const char *, cs_error *), const char *text);
/* Area-normalised Lorentzian: area (h/pi) / (u^2 + h^2), h = fwhm/2 (profile.h's convention; the
 * Cauchy density, common practice). */
double tu_lorentz(double x, double c, double fwhm, double area);

#endif
