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
    if (cs_series_manifest_parse(text, "fuzz.csv", "/nonexistent", &s, &err) == CS_OK) {
        /* touch every entry so bad pointers show up */
        size_t sum = 0;
        for (size_t i = 0; i < s->n; i++)
            sum += strlen(s->e[i].file);
        (void)sum;
    }
    cs_series_free(s);
    free(text);
    return 0;
}
