/* libFuzzer target for the scene loader: any bytes as a scene file, loaded from memory with
 * every mesh served from memory (a closed cube), so the harness never touches the disk. A load
 * either succeeds with a consistent scene or fails with a status and a one-line message that
 * names a place; nothing may crash, leak, overread or hit undefined behaviour.
 *
 * Recipe (clang, from the repository root):
 *   CC=clang meson setup build-fuzz -Dfuzz=true -Db_sanitize=address,undefined -Db_lundef=false
 *   ninja -C build-fuzz tests/fuzz/scene/fuzz_scene
 *   mkdir -p fuzz-scene && cp -r tests/fuzz/scene/corpus/. fuzz-scene/
 *   build-fuzz/tests/fuzz/scene/fuzz_scene -dict=tests/fuzz/scene/scene.dict -max_len=8192 \
 *       -max_total_time=600 fuzz-scene
 * The test suite replays tests/fuzz/scene/corpus/ through the same function (replay.c). */
#include <stdint.h>
#include <stdlib.h>
#include <string.h>

#include "scene/media.h"
#include "scene/scene.h"

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size);

static const char cube[] = "v 0 0 0\nv 1 0 0\nv 1 1 0\nv 0 1 0\nv 0 0 1\nv 1 0 1\nv 1 1 1\nv 0 1 1\n"
                           "f 1 4 3 2\nf 5 6 7 8\nf 1 2 6 5\nf 2 3 7 6\nf 3 4 8 7\nf 1 5 8 4\n";

static int mem_read(void *user, const char *path, char **out, size_t *len)
{
    (void)user;
    if (strstr(path, "missing")) return 2;   /* ENOENT, to exercise that path too */
    *len = sizeof cube - 1;
    *out = malloc(sizeof cube);
    if (!*out) return 12;
    memcpy(*out, cube, sizeof cube);
    return 0;
}

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
    brm_scene_load_opts o = {mem_read, NULL};
    brm_diag d;
    brm_diag_init(&d);
    brm_scene *s = NULL;
    brm_status st = brm_scene_load_ex((const char *)data, size, "fuzz/scene.json", &o, &s, &d);
    if (st != BRM_OK) {
        if (s != NULL || d.status != st || d.message[0] == '\0' || strchr(d.message, '\n') || !strchr(d.message, ':')) abort();
        return 0;
    }
    if (!s || s->target_count == 0 || !s->media_ready || !s->shared_json_text) abort();
    uint32_t tris = 0;
    for (uint32_t i = 0; i < s->object_count; i++) {
        if (s->objects[i].first_tri != tris && s->objects[i].tri_count) abort();
        tris += s->objects[i].tri_count;
    }
    if (tris != s->tri_count) abort();
    for (uint32_t i = 0; i < s->target_count; i++)
        if (!s->targets[i].json_text || brm_scene_find_target(s, s->targets[i].name) != (int)i) abort();
    /* The density functions must hold up on whatever media were accepted. */
    brm_vec3 c = brm_scale(brm_add(s->fog_bounds.min, s->fog_bounds.max), 0.5);
    brm_media_point mp;
    brm_media_eval(s, c, &mp);
    volatile double sink = brm_media_extinction(s, c) + mp.sigma_t;
    if (!(sink >= 0.0)) abort();
    brm_scene_free(s);
    return 0;
}
