/* libFuzzer harness: the unit and quantity parsers. Byte 0 picks the wanted dimension and the
 * column-name buffer size; the rest of the first line is the text, an optional second line the
 * default unit. */
#include <collshift/units.h>
#include <math.h>
#include "fuzz_common.h"

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size);

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
    if (size < 1)
        return 0;
    cs_dim want = (cs_dim)(data[0] % (CS_DIM_DIMENSIONLESS + 1));
    size_t bufn = (size_t)(data[0] >> 4);              /* 0 .. 15 */
    char *text = fuzz_cstr(data + 1, size - 1);
    char *def = NULL;
    char *nl = strchr(text, '\n');
    if (nl) {
        *nl = '\0';
        def = nl + 1;
    }
    double si = 0;
    const cs_unit *u = NULL;
    cs_dim dim = CS_DIM_UNKNOWN;
    cs_error err;
    cs_error_clear(&err);
    int rc = cs_quantity_parse(text, want, def, &si, &u, &dim, &err);
    fuzz_assert_error(rc, err);
    /* a parsed quantity is a finite number of the wanted dimension */
    fuzz_assert(rc != 0 || (isfinite(si) && (want == CS_DIM_UNKNOWN || dim == want)));
    (void)cs_quantity_parse(text, want, NULL, &si, NULL, NULL, NULL);
    (void)cs_quantity_parse(text, CS_DIM_UNKNOWN, def, &si, &u, &dim, NULL);

    char big[256];
    (void)cs_unit_from_column_name(text, big, sizeof big);
    char *small = malloc(bufn ? bufn : 1);
    if (!small)
        abort();
    (void)cs_unit_from_column_name(text, bufn ? small : NULL, bufn);
    free(small);

    u = cs_unit_find_dim(text, want);
    if (u) {
        volatile double x = cs_unit_from_si(u, cs_unit_to_si(u, 1.0));
        (void)x;
    }
    free(text);
    return 0;
}
