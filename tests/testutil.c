/* Helpers shared by the Check suites: temporary files, reference-data paths, tolerances. */
#include "testutil.h"

#include <check.h>

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

static char tmpdir[256];
static char paths[64][512];
static unsigned slot;

static void cleanup(void)
{
    if (tmpdir[0]) {
        char cmd[300];
        snprintf(cmd, sizeof cmd, "rm -rf '%s'", tmpdir);
        if (system(cmd) != 0) { /* nothing more to do */ }
    }
}

static const char *dir(void)
{
    if (!tmpdir[0]) {
        const char *base = getenv("TMPDIR");
        snprintf(tmpdir, sizeof tmpdir, "%s/cs_test_XXXXXX", base && *base ? base : "/tmp");
        if (!mkdtemp(tmpdir))
            ck_abort_msg("cannot make a temporary folder under %s", base && *base ? base : "/tmp");
        atexit(cleanup);
    }
    return tmpdir;
}

const char *tu_tmp_path(const char *name)
{
    char *p = paths[slot++ % 64];
    snprintf(p, 512, "%s/%s", dir(), name);
    return p;
}

const char *tu_write_file(const char *name, const void *data, size_t len)
{
    const char *p = tu_tmp_path(name);
    FILE *f = fopen(p, "wb");
    int ok = f && (!len || fwrite(data, 1, len, f) == len);
    if (f)
        ok &= fclose(f) == 0;
    ck_assert_msg(ok, "cannot write the test file %s", p);
    return p;
}

const char *tu_write_text(const char *name, const char *text)
{
    return tu_write_file(name, text, strlen(text));
}

const char *tu_data_path(const char *name)
{
    const char *d = getenv("CS_TEST_DATA");
    char *p = paths[slot++ % 64];
    snprintf(p, 512, "%s/%s", d ? d : "tests/data", name);
    return p;
}

const char *tu_reference_path(const char *rel)
{
    const char *d = getenv("CS_SHARED_DIR");
    char *p = paths[slot++ % 64];
    snprintf(p, 512, "%s/reference/%s", d ? d : "../shared", rel);
    return access(p, R_OK) == 0 ? p : NULL;
}

int tu_close(double a, double b, double rtol)
{
    if (b == 0.0)
        return fabs(a) <= rtol;
    return fabs(a - b) <= rtol * fabs(b);
}

cs_model *tu_model(const char *text, cs_baseline_kind b, cs_model_mode mode)
{
    cs_error err;
    cs_model *m = cs_model_alloc(text, b, mode, &err);
    ck_assert_msg(m != NULL, "model '%s': %s", text, err.msg);
    return m;
}

long tu_param(const cs_model *m, const char *name)
{
    long i = cs_model_param_index(m, name);
    ck_assert_msg(i >= 0, "no parameter '%s'", name);
    return i;
}

void tu_start(cs_model *m, const char *name, double v)
{
    long i = tu_param(m, name);
    m->par[i].value = v;
    m->par[i].user_start = 1;
}

void tu_constrain(cs_model *m, int (*fn)(cs_model *, const char *, cs_error *), const char *text)
{
    cs_error err;
    int rc = fn(m, text, &err);
    ck_assert_msg(rc == CS_OK, "constraint '%s': %s", text, err.msg);
}

double tu_lorentz(double x, double c, double fwhm, double area)
{
    double h = 0.5 * fwhm, u = x - c;
    return area * (h / 3.14159265358979323846) / (u * u + h * h);
}
