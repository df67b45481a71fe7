/* The bake revision (BRM_BAKE_REVISION, bake.h) against what the baker does: a fixed scene with
 * every kind of light, medium and target, plus a closed mesh, baked at two threads; a SHA-256
 * over every target's decoded channels (names and float values, so the zstd version does not
 * matter) must be the digest recorded for the current revision. When it is not, the baker's
 * values changed: raise BRM_BAKE_REVISION (so that incremental builds re-bake what now comes out
 * differently), note why beside it, and record the new digest here. The values are those of
 * this platform's C library (Debian 12's glibc); the AVX2 and baseline paths agree
 * (test_cpu_paths.c). */
#include "bake_util.h"
#include "every_kind_scene.h"

#include "base/sha256.h"

#ifndef MESH_DIR
#error "MESH_DIR must name the demo's mesh folder"
#endif

/* The digest of each revision since this test began (the current one last). */
static const struct {
    int revision;
    const char *digest;
} recorded[] = {
    {2, "f96b4b51105fdc477439ef65d28ba7220d059228f02f790c4795bb78ab55960e"},
};

static void digest_target(brm_sha256 *c, const brv_volume *v)
{
    const brv_grid_info *g = brv_grid(v);
    brm_sha256_update(c, g->cells, sizeof g->cells);
    for (uint32_t k = 0; k < g->channel_count; k++) {
        const brv_channel_info *ch = brv_channel(v, k);
        brm_sha256_update(c, ch->name, strlen(ch->name) + 1);
        float *x = read_channel(v, ch->name);
        size_t n = brv_channel_size(v);
        for (size_t i = 0; i < n; i++) {
            uint32_t b;
            memcpy(&b, &x[i], sizeof b);
            uint8_t le[4] = {(uint8_t)b, (uint8_t)(b >> 8), (uint8_t)(b >> 16), (uint8_t)(b >> 24)};
            brm_sha256_update(c, le, sizeof le);
        }
        free(x);
    }
}

static void baked_values_should_match_the_digest_of_the_bake_revision(void **state)
{
    (void)state;
    /* The scene with the demo's boiler drum (a closed mesh) standing in its fog. */
    const char *geom = "\"geometry\":[";
    const char *at = strstr(SCENE, geom);
    assert_non_null(at);
    size_t head = (size_t)(at - SCENE) + strlen(geom);
    char *json = malloc(strlen(SCENE) + 512);
    assert_non_null(json);
    memcpy(json, SCENE, head);
    int k = snprintf(json + head, 512,
                     "{\"shape\":\"mesh\",\"path\":\"%s/boiler.obj\",\"translate\":[9.5,0,2],\"scale\":0.8},", MESH_DIR);
    assert_true(k > 0 && k < 512);
    strcpy(json + head + (size_t)k, SCENE + head);
    brm_scene *s = load_json(json);
    free(json);
    brm_sha256 c;
    brm_sha256_init(&c);
    for (uint32_t t = 0; t < s->target_count; t++) {
        char p[256];
        snprintf(p, sizeof p, "%s/revision-%u.brv", dir, t);
        brv_volume *v = bake_to(s, t, 2, false, p);
        digest_target(&c, v);
        brv_free(v);
    }
    brm_scene_free(s);
    uint8_t d[32];
    char hex[65];
    brm_sha256_final(&c, d);
    brm_sha256_hex(d, hex);
    const size_t last = sizeof recorded / sizeof recorded[0] - 1;
    assert_int_equal(recorded[last].revision, BRM_BAKE_REVISION);
    if (strcmp(hex, recorded[last].digest) != 0)
        print_error("the baked values changed: digest %s, recorded for revision %d: %s.\n"
                    "Raise BRM_BAKE_REVISION in src/bake/bake.h (saying why) and record this digest "
                    "for it in tests/bake/test_revision.c.\n",
                    hex, recorded[last].revision, recorded[last].digest);
    assert_string_equal(hex, recorded[last].digest);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(baked_values_should_match_the_digest_of_the_bake_revision),
    };
    return cmocka_run_group_tests(tests, setup, teardown);
}
