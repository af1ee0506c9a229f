/* libFuzzer harness: the series manifest parser (cs_series_manifest_parse on the input text). */
#include <collshift/series.h>
#include "fuzz_common.h"

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size);

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
    char *text = fuzz_cstr(data, size);
    cs_series *s = NULL;
    cs_error err;
    cs_error_clear(&err);
    int rc = cs_series_manifest_parse(text, "fuzz.csv", "/nonexistent", &s, &err);
    fuzz_assert_error(rc, err);
    if (rc == CS_OK) {
        /* every entry names a file (touching it also shows bad pointers) */
        for (size_t i = 0; i < s->n; i++)
            fuzz_assert(s->e[i].file && strlen(s->e[i].file) > 0);
    }
    cs_series_free(s);
    free(text);
    return 0;
}
