/* Helpers shared by the Check suites: temporary files, reference-data paths, tolerances. */
#ifndef CS_TESTUTIL_H
#define CS_TESTUTIL_H

#include <stddef.h>

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

#endif
