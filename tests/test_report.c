/* Tests of the report module: value(error) notation, atomic output files, SHA-256 checksums and
 * the Markdown / JSON run reports. */
#include <check.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>

#include <jansson.h>

#include <collshift/report.h>
#include "testutil.h"

typedef struct {
    double value, err;
    cs_dim dim;
    const char *want;
    const char *source;
} fmt_case;

static const fmt_case fmt_cases[] = {
    /* JCGM 100:2008 (GUM) 7.2.2: "m_s = 100.021 47(35) g" (concise form; from memory) */
    {100.02147, 0.00035, CS_DIM_DIMENSIONLESS, "100.02147(35)", "GUM 7.2.2"},
    /* CODATA 2018 fine-structure constant 7.297 352 5693(11) x 10^-3 (from memory) */
    {7.2973525693e-3, 1.1e-12, CS_DIM_DIMENSIONLESS, "0.0072973525693(11)", "CODATA 2018 alpha"},
    /* CODATA 2018 Rydberg constant 10 973 731.568 160(21) m^-1, shown per cm (from memory) */
    {10973731.568160, 0.000021, CS_DIM_WAVENUMBER, "1.0973731568160(21)e+05 cm^-1", "CODATA 2018 R_inf"},
    /* The notation rules themselves (common practice): two digits of the error, same decimal place */
    {-1234567.0, 15000.0, CS_DIM_FREQUENCY, "-1.235(15) MHz", "rounding"},
    {1.0, 0.0996, CS_DIM_FREQUENCY, "1.00(10) Hz", "carry into a third digit"},
    {0.5e6, 1.2e6, CS_DIM_FREQUENCY, "0.5(12) MHz", "error larger than value"},
    {123.4, 25.0, CS_DIM_FREQUENCY, "123(25) Hz", "integer places"},
    {123.0, 250.0, CS_DIM_FREQUENCY, "120(250) Hz", "error of hundreds of units"},
    {384230484468500.0, 1200.0, CS_DIM_FREQUENCY, "384.2304844685(12) THz", "optical frequency: prefix from the value"},
    {2.5e-8, 3.1e-10, CS_DIM_TIME, "25.00(31) ns", "time prefix"},
    {3.2e19, 1.5e18, CS_DIM_DENSITY, "3.20(15)e+13 cm^-3", "density in cm^-3"},
    {1e6, 0.0, CS_DIM_FREQUENCY, "1 MHz (no error)", "no error"},
    /* decay rates get a power of ten, not a prefix: "Gs^-1" would read as (Gs)^-1 */
    {2.79e9, 0.42e9, CS_DIM_RATE, "2.79(42)e+09 s^-1", "rate"},
};

START_TEST(test_format_value_err)
{
    const fmt_case *c = &fmt_cases[_i];
    char buf[96];
    cs_format_value_err(c->value, c->err, c->dim, buf, sizeof buf);
    ck_assert_msg(strcmp(buf, c->want) == 0, "%s: got '%s', want '%s'", c->source, buf, c->want);
}
END_TEST

/* Numbers that could not be computed never print as "nan"/"inf" (issue 9, section 3; common
 * practice for fail-safe outputs): the value reads "undefined", an undefined error
 * "(error undefined)", unlike the "(no error)" of an exact (fixed) value. */
START_TEST(test_format_nan)
{
    char buf[64];
    cs_format_value_err(0.0 / 0.0, 1.0, CS_DIM_FREQUENCY, buf, sizeof buf);
    ck_assert_str_eq(buf, "undefined");
    cs_format_value_err(-1.0 / 0.0, 1.0, CS_DIM_DIMENSIONLESS, buf, sizeof buf);
    ck_assert_str_eq(buf, "undefined");
    cs_format_value_err(1.5e6, 0.0 / 0.0, CS_DIM_FREQUENCY, buf, sizeof buf);
    ck_assert_str_eq(buf, "1.5 MHz (error undefined)");
}
END_TEST

/* A report of a failed fit: an undefined value, an undefined error, a table cell printed from a
 * NaN. Markdown and JSON must say "undefined" / null, never "nan" or "inf" (issue 9, section 3;
 * common practice). */
START_TEST(test_report_undefined)
{
    cs_report *r = cs_report_alloc("Failed fit");
    ck_assert_ptr_nonnull(r);
    ck_assert_int_eq(cs_report_section(r, "Fit"), CS_OK);
    ck_assert_int_eq(cs_report_field(r, "status", "not converged"), CS_OK);
    ck_assert_int_eq(cs_report_field(r, "chi2", "nan"), CS_OK);
    ck_assert_int_eq(cs_report_value(r, "1.center", 1.5e6, 0.0 / 0.0, CS_DIM_FREQUENCY), CS_OK);
    ck_assert_int_eq(cs_report_value(r, "1.fwhm", 0.0 / 0.0, 0.0 / 0.0, CS_DIM_FREQUENCY), CS_OK);
    const char *cols[] = {"parameter", "value", "error"};
    ck_assert_int_eq(cs_report_table(r, NULL, 3, cols), CS_OK);
    const char *row1[] = {"1.area", "-nan", "inf"};
    const char *row2[] = {"1.width", "nano", "infrared"}; /* words that only start alike stay */
    ck_assert_int_eq(cs_report_row(r, row1), CS_OK);
    ck_assert_int_eq(cs_report_row(r, row2), CS_OK);
    char *md = cs_report_markdown(r);
    char *js = cs_report_json(r);
    ck_assert_ptr_nonnull(md);
    ck_assert_ptr_nonnull(js);
    ck_assert_msg(strstr(md, "- **1.center**: 1.5 MHz (error undefined)") != NULL, "%s", md);
    ck_assert_msg(strstr(md, "- **1.fwhm**: undefined") != NULL, "%s", md);
    ck_assert_msg(strstr(md, "- **chi2**: undefined") != NULL, "%s", md);
    ck_assert_msg(strstr(md, "| 1.area | undefined | undefined |") != NULL, "%s", md);
    ck_assert_msg(strstr(md, "| 1.width | nano | infrared |") != NULL, "%s", md);
    const char *texts[] = {md, js};
    for (int t = 0; t < 2; t++) {
        const char *p = texts[t];
        for (const char *q = p; (q = strstr(q, "nan")) != NULL; q++)
            ck_assert_msg(q[3] == 'o', "'nan' in %s", p);
        for (const char *q = p; (q = strstr(q, "inf")) != NULL; q++)
            ck_assert_msg(q[3] == 'r', "'inf' in %s", p);
    }
    json_error_t je;
    json_t *root = json_loads(js, 0, &je);
    ck_assert_ptr_nonnull(root);
    json_t *items = json_object_get(json_array_get(json_object_get(root, "sections"), 0), "items");
    json_t *v = json_array_get(items, 2);
    ck_assert(json_real_value(json_object_get(v, "value")) == 1.5e6);
    ck_assert(json_is_null(json_object_get(v, "error")));
    ck_assert(json_is_null(json_object_get(json_array_get(items, 3), "value")));
    json_decref(root);
    free(md);
    free(js);
    cs_report_free(r);
}
END_TEST

/* An output that cannot be written (its folder is a regular file, so neither chmod nor root
 * matter): CS_EIO naming the path, and nothing left behind (common practice for atomic writes). */
START_TEST(test_atomic_write_fails)
{
    cs_error err;
    cs_error_clear(&err);
    const char *file = tu_write_text("plain_file", "x");
    char path[4096];
    snprintf(path, sizeof path, "%s/out.json", file);
    ck_assert_int_eq(cs_write_atomic(path, "{}", 2, &err), CS_EIO);
    ck_assert_msg(strstr(err.file, "out.json") != NULL || strstr(err.msg, "out.json") != NULL, "%s: %s", err.file,
                  err.msg);
    struct stat st;
    ck_assert_int_eq(stat(file, &st), 0);
    ck_assert(S_ISREG(st.st_mode));
    ck_assert_int_eq((int)st.st_size, 1);
}
END_TEST

START_TEST(test_atomic_write)
{
    const char *p = tu_tmp_path("out.json");
    cs_error err;
    cs_error_clear(&err);
    ck_assert_int_eq(cs_write_atomic(p, "first\n", 6, &err), CS_OK);
    ck_assert_int_eq(cs_write_atomic(p, "second\n", 7, &err), CS_OK);
    FILE *f = fopen(p, "r");
    ck_assert_ptr_nonnull(f);
    char line[32] = "";
    ck_assert_ptr_nonnull(fgets(line, sizeof line, f));
    fclose(f);
    ck_assert_str_eq(line, "second\n");
    struct stat st;
    ck_assert_int_eq(stat(p, &st), 0);
    ck_assert_msg((st.st_mode & 0044) != 0, "output should be readable by others like any new file");
    /* a folder that does not exist: CS_EIO with the path in the report */
    ck_assert_int_eq(cs_write_atomic("/nonexistent-dir/x.json", "x", 1, &err), CS_EIO);
    ck_assert_str_eq(err.file, "/nonexistent-dir/x.json");
}
END_TEST


/* FIPS 180-2, Appendix B.1 and B.2: SHA-256 of "abc" and of the 448-bit two-block message. */
START_TEST(test_sha256_vectors)
{
    char hex[65];
    cs_error err;
    cs_error_clear(&err);
    ck_assert_int_eq(cs_sha256_hex("abc", 3, hex, &err), CS_OK);
    ck_assert_str_eq(hex, "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad");
    const char *m2 = "abcdbcdecdefdefgefghfghighijhijkijkljklmklmnlmnomnopnopq";
    ck_assert_int_eq(cs_sha256_hex(m2, strlen(m2), hex, &err), CS_OK);
    ck_assert_str_eq(hex, "248d6a61d20638b8e5c026930c3e6039a33ce45964ff2167f6ecedd419db06c1");
    /* a file gives the digest of its bytes */
    const char *p = tu_tmp_path("abc.txt");
    ck_assert_int_eq(cs_write_atomic(p, "abc", 3, &err), CS_OK);
    ck_assert_int_eq(cs_sha256_file(p, hex, &err), CS_OK);
    ck_assert_str_eq(hex, "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad");
    ck_assert_int_eq(cs_sha256_file("/nonexistent-dir/x", hex, &err), CS_EIO);
}
END_TEST

/* The Markdown writer: title, inputs table with checksums, sections, fields and values in the
 * value(error) notation, pipe tables (with '|' escaped), figure links; the JSON holds the same. */
START_TEST(test_markdown_structure)
{
    cs_error err;
    cs_error_clear(&err);
    const char *in = tu_tmp_path("input.csv");
    ck_assert_int_eq(cs_write_atomic(in, "abc", 3, &err), CS_OK);
    cs_report *r = cs_report_alloc("Run");
    ck_assert_ptr_nonnull(r);
    ck_assert_int_eq(cs_report_add_input(r, "spectrum", in, &err), CS_OK);
    ck_assert_int_eq(cs_report_section(r, "Fit"), CS_OK);
    ck_assert_int_eq(cs_report_field(r, "model", "lorentz+lorentz"), CS_OK);
    ck_assert_int_eq(cs_report_value(r, "2.center", -1234567.0, 15000.0, CS_DIM_FREQUENCY), CS_OK);
    const char *cols[] = {"a", "b"};
    ck_assert_int_eq(cs_report_table(r, "Table:", 2, cols), CS_OK);
    const char *row[] = {"x|y", "2"};
    ck_assert_int_eq(cs_report_row(r, row), CS_OK);
    ck_assert_int_eq(cs_report_figure(r, "spectrum", "figures/fit.png"), CS_OK);
    ck_assert_int_eq(cs_report_figure(r, "as PDF", "figures/fit.pdf"), CS_OK);
    char *md = cs_report_markdown(r);
    ck_assert_ptr_nonnull(md);
    const char *want[] = {
        "# Run\n",
        "\n## Inputs\n\n| role | file | bytes | SHA-256 |\n|---|---|---|---|\n",
        " 3 | `ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad` |\n",
        "\n## Fit\n\n- **model**: lorentz+lorentz\n- **2.center**: -1.235(15) MHz\n",
        "\nTable:\n\n| a | b |\n|---|---|\n| x\\|y | 2 |\n",
        "\n![spectrum](figures/fit.png)\n",
        "\n[as PDF](figures/fit.pdf)\n",
    };
    for (size_t i = 0; i < sizeof want / sizeof want[0]; i++)
        ck_assert_msg(strstr(md, want[i]) != NULL, "missing '%s' in:\n%s", want[i], md);
    ck_assert_msg(strstr(md, "## Inputs") < strstr(md, "## Fit"), "inputs come first");
    free(md);
    char *js = cs_report_json(r);
    ck_assert_ptr_nonnull(js);
    json_error_t je;
    json_t *root = json_loads(js, 0, &je);
    ck_assert_ptr_nonnull(root);
    ck_assert_str_eq(json_string_value(json_object_get(root, "title")), "Run");
    json_t *in0 = json_array_get(json_object_get(root, "inputs"), 0);
    ck_assert_str_eq(json_string_value(json_object_get(in0, "sha256")),
                     "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad");
    json_t *items = json_object_get(json_array_get(json_object_get(root, "sections"), 0), "items");
    ck_assert_int_eq((int)json_array_size(items), 5);
    json_t *v = json_array_get(items, 1);
    ck_assert_str_eq(json_string_value(json_object_get(v, "text")), "-1.235(15) MHz");
    ck_assert(json_real_value(json_object_get(v, "value")) == -1234567.0);
    ck_assert(json_real_value(json_object_get(v, "error")) == 15000.0);
    ck_assert_str_eq(json_string_value(json_object_get(v, "unit")), "Hz");
    json_decref(root);
    free(js);
    /* outputs: never over an input, both files written */
    ck_assert_int_eq(cs_report_write(r, in, NULL, &err), CS_EINVAL);
    FILE *f = fopen(in, "r");
    char buf[8] = "";
    ck_assert_ptr_nonnull(f);
    ck_assert_ptr_nonnull(fgets(buf, sizeof buf, f));
    fclose(f);
    ck_assert_str_eq(buf, "abc");
    ck_assert_int_eq(cs_report_write(r, tu_tmp_path("r.md"), tu_tmp_path("r.json"), &err), CS_OK);
    struct stat st;
    ck_assert_int_eq(stat(tu_tmp_path("r.md"), &st), 0);
    ck_assert_int_eq(stat(tu_tmp_path("r.json"), &st), 0);
    /* a row needs its table */
    ck_assert_int_eq(cs_report_section(r, "Empty"), CS_OK);
    ck_assert_int_eq(cs_report_row(r, row), CS_EINVAL);
    cs_report_free(r);
}
END_TEST

static Suite *report_suite(void)
{
    Suite *s = suite_create("report");
    TCase *t = tcase_create("value_err");
    tcase_add_loop_test(t, test_format_value_err, 0, (int)(sizeof fmt_cases / sizeof fmt_cases[0]));
    tcase_add_test(t, test_format_nan);
    tcase_add_test(t, test_report_undefined);
    tcase_add_test(t, test_atomic_write_fails);
    suite_add_tcase(s, t);
    t = tcase_create("atomic");
    tcase_add_test(t, test_atomic_write);
    suite_add_tcase(s, t);
    t = tcase_create("checksums_and_reports");
    tcase_add_test(t, test_sha256_vectors);
    tcase_add_test(t, test_markdown_structure);
    suite_add_tcase(s, t);
    return s;
}

int main(void)
{
    SRunner *r = srunner_create(report_suite());
    srunner_run_all(r, CK_NORMAL);
    int failed = srunner_ntests_failed(r);
    srunner_free(r);
    return failed ? 1 : 0;
}
