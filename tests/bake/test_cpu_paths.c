/* The baker's vector paths (AVX2, chosen at run time) against its baseline paths (SSE2): a
 * scene with every kind of light, medium and target baked both ways must give the same bytes,
 * so a bake does not depend on the processor it ran on (base/cpu.h). */
#include "bake_util.h"
#include "every_kind_scene.h"

#include "base/cpu.h"

static unsigned char *slurp(const char *path, size_t *len)
{
    FILE *f = fopen(path, "rb");
    assert_non_null(f);
    assert_int_equal(fseek(f, 0, SEEK_END), 0);
    long n = ftell(f);
    assert_true(n > 0);
    rewind(f);
    unsigned char *b = malloc((size_t)n);
    assert_non_null(b);
    assert_int_equal(fread(b, 1, (size_t)n, f), (size_t)n);
    fclose(f);
    *len = (size_t)n;
    return b;
}

static void bake_both_ways_should_give_the_same_bytes(void **state)
{
    (void)state;
    if (!__builtin_cpu_supports("avx2")) skip(); /* one path only on this processor: nothing to compare */
    brm_scene *s = load_json(SCENE);
    for (uint32_t t = 0; t < 3; t++) {
        char a[256], b[256];
        snprintf(a, sizeof a, "%s/vector-%u.brv", dir, t);
        snprintf(b, sizeof b, "%s/baseline-%u.brv", dir, t);
        brm_cpu_set_baseline(false);
        assert_true(brm_cpu_avx2());
        brv_free(bake_to(s, t, 2, false, a));
        brm_cpu_set_baseline(true);
        assert_false(brm_cpu_avx2());
        brv_free(bake_to(s, t, 2, false, b));
        brm_cpu_set_baseline(false);
        size_t la, lb;
        unsigned char *x = slurp(a, &la), *y = slurp(b, &lb);
        if (la != lb || memcmp(x, y, la) != 0) print_error("target %u: %zu and %zu bytes differ\n", t, la, lb);
        assert_int_equal(la, lb);
        assert_memory_equal(x, y, la);
        free(x);
        free(y);
    }
    brm_scene_free(s);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(bake_both_ways_should_give_the_same_bytes),
    };
    return cmocka_run_group_tests(tests, setup, teardown);
}
