/* Tests of src/base: hashes, sample sequences, diagnostics, atomic files. */
#include <string.h>
#include <stdlib.h>
#include <sys/stat.h>
#include <unistd.h>

#include "check.h"
#include "base/atomic_file.h"
#include "base/diag.h"
#include "base/lds.h"
#include "base/sha256.h"
#include "base/threads.h"

static void sha256_should_match_fips_examples(void **state)
{
    (void)state;
    uint8_t d[32];
    char hex[65];
    /* Source: FIPS 180-2, Appendix B.1 and B.2 (one-block and multi-block messages). */
    brm_sha256_buf("abc", 3, d);
    brm_sha256_hex(d, hex);
    assert_string_equal(hex, "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad");
    const char *m2 = "abcdbcdecdefdefgefghfghighijhijkijkljklmklmnlmnomnopnopq";
    brm_sha256_buf(m2, strlen(m2), d);
    brm_sha256_hex(d, hex);
    assert_string_equal(hex, "248d6a61d20638b8e5c026930c3e6039a33ce45964ff2167f6ecedd419db06c1");
    /* Source: FIPS 180-2, Appendix B.3 (one million 'a'), fed in uneven pieces. */
    brm_sha256 c;
    brm_sha256_init(&c);
    char buf[997];
    memset(buf, 'a', sizeof buf);
    size_t left = 1000000;
    while (left) {
        size_t n = left < sizeof buf ? left : sizeof buf;
        brm_sha256_update(&c, buf, n);
        left -= n;
    }
    brm_sha256_final(&c, d);
    brm_sha256_hex(d, hex);
    assert_string_equal(hex, "cdc76e5c9914fb9281a1c7e284d73e67f1809a48a497200e046d39ccc7112cd0");
}

static void sample3_should_be_uniform_and_deterministic(void **state)
{
    (void)state;
    double a[3], b[3], mean[3] = {0, 0, 0};
    const int n = 4096;
    for (int i = 0; i < n; i++) {
        brm_sample3(42, (uint32_t)i, a);
        brm_sample3(42, (uint32_t)i, b);
        for (int k = 0; k < 3; k++) {
            assert_true(a[k] >= 0.0 && a[k] < 1.0);
            assert_true(a[k] == b[k]);
            mean[k] += a[k] / n;
        }
    }
    /* A low-discrepancy sequence's mean converges like 1/n: far tighter than random's 1/sqrt(n). */
    for (int k = 0; k < 3; k++) assert_near(mean[k], 0.5, 2e-3, 0);
}

static void diag_should_keep_first_error_and_map_exit_codes(void **state)
{
    (void)state;
    brm_diag d;
    brm_diag_init(&d);
    assert_int_equal(brm_diag_error(&d, BRM_E_INPUT, "first %d", 1), BRM_E_INPUT);
    brm_diag_error(&d, BRM_E_IO, "second");
    assert_string_equal(d.message, "first 1");
    assert_int_equal(d.status, BRM_E_INPUT);
    assert_int_equal(brm_status_exit_code(BRM_E_INPUT), 1);
    assert_int_equal(brm_status_exit_code(BRM_E_USAGE), 2);
    assert_int_equal(brm_status_exit_code(BRM_E_BUDGET), 3);
    assert_int_equal(brm_status_exit_code(BRM_E_CHECK), 4);
}

static void atomic_abort_should_keep_previous_file(void **state)
{
    (void)state;
    char dir[] = "/tmp/brume-test-XXXXXX";
    assert_non_null(mkdtemp(dir));
    char path[256];
    snprintf(path, sizeof path, "%s/out.bin", dir);
    brm_diag d;
    brm_diag_init(&d);
    assert_int_equal(brm_write_file_atomic(path, "old", 3, &d), BRM_OK);
    brm_atomic_file af;
    assert_int_equal(brm_atomic_open(&af, path, &d), BRM_OK);
    fputs("new and partial", af.f);
    brm_atomic_abort(&af);
    char *text = NULL;
    size_t len = 0;
    assert_int_equal(brm_read_file(path, &text, &len, &d), BRM_OK);
    assert_int_equal(len, 3);
    assert_memory_equal(text, "old", 3);
    free(text);
    struct stat st;
    assert_int_not_equal(stat(af.tmp_path, &st), 0);
    assert_int_equal(brm_atomic_open(&af, path, &d), BRM_OK);
    fputs("new", af.f);
    assert_int_equal(brm_atomic_commit(&af, &d), BRM_OK);
    assert_int_equal(brm_read_file(path, &text, &len, &d), BRM_OK);
    assert_string_equal(text, "new");
    free(text);
    unlink(path);
    rmdir(dir);
}

static void count_item(void *ctx, uint32_t item, int worker)
{
    (void)worker;
    atomic_int *hits = ctx;
    atomic_fetch_add(&hits[item], 1);
}

static void parallel_for_should_run_every_item_once(void **state)
{
    (void)state;
    static atomic_int hits[1000];
    for (int i = 0; i < 1000; i++) atomic_init(&hits[i], 0);
    assert_int_equal(brm_parallel_for(1000, 3, count_item, hits, NULL), 1000);
    for (int i = 0; i < 1000; i++) assert_int_equal(atomic_load(&hits[i]), 1);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(sha256_should_match_fips_examples),
        cmocka_unit_test(sample3_should_be_uniform_and_deterministic),
        cmocka_unit_test(diag_should_keep_first_error_and_map_exit_codes),
        cmocka_unit_test(atomic_abort_should_keep_previous_file),
        cmocka_unit_test(parallel_for_should_run_every_item_once),
    };
    return cmocka_run_group_tests_name("base", tests, NULL, NULL);
}
