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
        cs_loaded l;
        cs_loaded_init(&l);
        cs_error err;
        cs_error_clear(&err);
        int rc = cs_io_load(path, &o, &l, &err);
        fuzz_assert_load(rc, &l, &err, o.min_points);
        cs_loaded_release(&l);
    }
    return 0;
}
