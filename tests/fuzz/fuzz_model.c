/* libFuzzer harness: the model syntax. Byte 0 picks the baseline and the mode; the first line is
 * the model text; every further line is a constraint whose first character picks the operation
 * ('f' fix, 'b' bound, 't' tie, anything else start) and the rest is its text. */
#include <collshift/model.h>
#include "fuzz_common.h"

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size);

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
    if (size < 1)
        return 0;
    cs_baseline_kind base = (cs_baseline_kind)(data[0] % 6);
    cs_model_mode mode = (data[0] & 0x80) ? CS_MODEL_TRANSMISSION : CS_MODEL_SUM;
    char *text = fuzz_cstr(data + 1, size - 1);
    char *rest = strchr(text, '\n');
    if (rest)
        *rest++ = '\0';
    cs_error err;
    cs_error_clear(&err);
    cs_model *m = cs_model_alloc(text, base, mode, &err);
    if (m) {
        while (rest) {
            char *line = rest;
            rest = strchr(rest, '\n');
            if (rest)
                *rest++ = '\0';
            if (!*line)
                continue;
            cs_error_clear(&err);
            int rc;
            switch (line[0]) {
            case 'f': rc = cs_model_fix(m, line + 1, &err); break;
            case 'b': rc = cs_model_bound(m, line + 1, &err); break;
            case 't': rc = cs_model_tie(m, line + 1, &err); break;
            default: rc = cs_model_start(m, line + 1, &err); break;
            }
            fuzz_assert_error(rc, err);
        }
        double *p = calloc(m->nparams ? m->nparams : 1, sizeof *p);
        if (!p)
            abort();
        for (size_t i = 0; i < m->nparams; i++)
            p[i] = m->par[i].value;
        cs_model_apply_ties(m, p);
        (void)cs_model_param_index(m, "1.center");
        free(p);
    }
    cs_model_free(m);
    free(text);
    return 0;
}
