/* libFuzzer harness: the NumPy .npy loader, with default options (format forced to npy) and with
 * format auto-detected from the magic bytes. */
#include <collshift/io.h>
#include "fuzz_common.h"

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size);

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
    const char *path = fuzz_write_tmp(data, size, ".npy");
    for (int pass = 0; pass < 2; pass++) {
        cs_load_options o;
        cs_load_options_init(&o);
        o.format = pass == 0 ? CS_FORMAT_NPY : CS_FORMAT_AUTO;
        if (pass == 1)
            o.sample_rate_hz = 1e6;
        fuzz_assert(fuzz_load_and_check(path, &o) <= CS_OK);   /* OK or a failure code, never positive */
    }
    return 0;
}
