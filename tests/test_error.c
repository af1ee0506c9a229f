/* Tests of the error module: status names and the "FILE: line N: message" report format. */
#include <check.h>
#include <string.h>

#include <collshift/error.h>

START_TEST(test_format_line)
{
    cs_error e;
    cs_error_clear(&e);
    ck_assert_int_eq(cs_error_set(&e, CS_EFORMAT, "run42.csv", 17, -1, "expected %d columns, found %d", 2, 3),
                     CS_EFORMAT);
    char buf[256];
    /* the message form of the project's style guide (common practice for command-line tools) */
    ck_assert_str_eq(cs_error_format(&e, buf, sizeof buf), "'run42.csv': line 17: expected 2 columns, found 3");
}
END_TEST

START_TEST(test_format_offset_and_plain)
{
    cs_error e;
    char buf[256];
    cs_error_set(&e, CS_EFORMAT, "shot.bin", -1, 4096, "truncated sample");
    ck_assert_str_eq(cs_error_format(&e, buf, sizeof buf), "'shot.bin': byte 4096: truncated sample");
    cs_error_set(&e, CS_EINVAL, NULL, -1, -1, "bad option");
    ck_assert_str_eq(cs_error_format(&e, buf, sizeof buf), "bad option");
    ck_assert_int_eq(cs_error_set(NULL, CS_ENOMEM, NULL, -1, -1, "x"), CS_ENOMEM);  /* NULL-safe */
}
END_TEST

START_TEST(test_strerror)
{
    int codes[] = {CS_OK, CS_EINVAL, CS_ENOMEM, CS_EIO, CS_EFORMAT, CS_EDATA, CS_EUNIT, CS_ENOCONV,
                   CS_ERANGE, CS_EUNSUP};
    for (size_t i = 0; i < sizeof codes / sizeof codes[0]; i++) {
        ck_assert_ptr_nonnull(cs_strerror(codes[i]));
        for (size_t j = 0; j < i; j++)
            ck_assert_str_ne(cs_strerror(codes[i]), cs_strerror(codes[j]));
    }
    ck_assert_str_eq(cs_strerror(12345), "unknown error");
}
END_TEST

int main(void)
{
    Suite *s = suite_create("error");
    TCase *t = tcase_create("report");
    tcase_add_test(t, test_format_line);
    tcase_add_test(t, test_format_offset_and_plain);
    tcase_add_test(t, test_strerror);
    suite_add_tcase(s, t);
    SRunner *r = srunner_create(s);
    srunner_run_all(r, CK_NORMAL);
    int failed = srunner_ntests_failed(r);
    srunner_free(r);
    return failed ? 1 : 0;
}
