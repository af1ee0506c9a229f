/* libFuzzer harness: the metadata-line parser. Every input line goes through cs_meta_parse_line
 * into one cs_meta (so repeated keys exercise replacement), then lookups, conversions and copies. */
#include <collshift/io.h>
#include "fuzz_common.h"

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size);

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
    char *text = fuzz_cstr(data, size);
    cs_meta m;
    cs_meta_init(&m);
    cs_error err;
    long line = 1;
    for (char *p = text;; line++) {
        char *nl = strchr(p, '\n');
        if (nl)
            *nl = '\0';
        cs_error_clear(&err);
        int rc = cs_meta_parse_line(&m, p, "fuzz", line, &err);
        fuzz_assert_error(rc, err);
        if (!nl)
            break;
        p = nl + 1;
    }
    static const char *keys[] = {"density", "sample_rate", "temperature", "reference", "t0", ""};
    for (size_t k = 0; k < sizeof keys / sizeof keys[0]; k++) {
        double si;
        (void)cs_meta_find(&m, keys[k]);
        for (int d = CS_DIM_UNKNOWN; d <= CS_DIM_DIMENSIONLESS; d++)
            (void)cs_meta_get_si(&m, keys[k], (cs_dim)d, &si, &err);
    }
    for (size_t i = 0; i < m.n; i++) {
        double si;
        (void)cs_meta_get_si(&m, m.e[i].key, m.e[i].dim, &si, &err);
    }
    cs_meta c;
    cs_meta_init(&c);
    (void)cs_meta_copy(&c, &m);
    cs_meta_release(&c);
    cs_meta_release(&m);
    free(text);
    return 0;
}
