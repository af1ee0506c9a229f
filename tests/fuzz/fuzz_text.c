/* libFuzzer harness: the delimited-text loader (cs_io_load with format text), with default
 * options (kind auto) or with kind forced to spectrum or to record: the input's length modulo 3
 * chooses, so every input is reproducible and one load per input keeps the harness fast (each
 * load allocates the loader's 4 MiB read buffer, which is slow under ASan). */
#include <collshift/io.h>
#include "fuzz_common.h"

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size);

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
    const char *path = fuzz_write_tmp(data, size, ".csv");
    static const cs_kind kinds[] = {CS_KIND_AUTO, CS_KIND_SPECTRUM, CS_KIND_RECORD};
    {
        size_t k = size % (sizeof kinds / sizeof kinds[0]);
        cs_load_options o;
        cs_load_options_init(&o);
        o.format = CS_FORMAT_TEXT;
        o.kind = kinds[k];
        fuzz_assert(fuzz_load_and_check(path, &o) <= CS_OK);   /* OK or a failure code, never positive */
    }
    return 0;
}
