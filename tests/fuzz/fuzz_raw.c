/* libFuzzer harness: the raw-binary loader. The first 4 input bytes choose the options
 * (sample type, endianness, offset, number of shots, sample rate given or not, kind); the rest
 * is the file. */
#include <collshift/io.h>
#include "fuzz_common.h"

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size);

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
    if (size < 4)
        return 0;
    cs_load_options o;
    cs_load_options_init(&o);
    o.format = CS_FORMAT_RAW;
    o.raw_type = (cs_raw_type)(1 + data[0] % 10);      /* CS_RAW_I8 .. CS_RAW_CF64 */
    o.big_endian = data[1] & 1;
    if (data[1] & 2)
        o.sample_rate_hz = 1e6;
    if (data[1] & 4)
        o.kind = CS_KIND_RECORD;
    if (data[1] & 8)
        o.kind = CS_KIND_SPECTRUM;                        /* contradictory: must be refused */
    if (data[1] & 16)
        o.scale = 0.5;
    o.offset_bytes = (data[1] & 32) ? -(long long)(data[2] % 8) : (long long)data[2];
    o.records = data[3] % 5;
    if (data[1] & 64)
        o.min_points = data[3];
    const char *path = fuzz_write_tmp(data + 4, size - 4, ".bin");
    fuzz_assert(fuzz_load_and_check(path, &o) <= CS_OK);   /* OK or a failure code, never positive */
    return 0;
}
