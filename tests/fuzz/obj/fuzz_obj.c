/* libFuzzer target for the OBJ parser: any bytes as a mesh, parsed directly and then loaded
 * through a fixed scene that references it (transform, degenerate triangles, the closed-mesh
 * test, bounds), served from memory. Nothing may crash, leak, overread or hit undefined
 * behaviour; a failure must be a status with a one-line "file:line: ..." message.
 *
 * Recipe (clang, from the repository root):
 *   CC=clang meson setup build-fuzz -Dfuzz=true -Db_sanitize=address,undefined -Db_lundef=false
 *   ninja -C build-fuzz tests/fuzz/obj/fuzz_obj
 *   mkdir -p fuzz-obj && cp -r tests/fuzz/obj/corpus/. fuzz-obj/
 *   build-fuzz/tests/fuzz/obj/fuzz_obj -dict=tests/fuzz/obj/obj.dict -max_len=4096 \
 *       -max_total_time=600 fuzz-obj
 * The test suite replays tests/fuzz/obj/corpus/ through the same function (replay.c). */
#include <stdint.h>
#include <stdlib.h>
#include <string.h>

#include "scene/obj.h"
#include "scene/scene.h"

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size);

typedef struct blob {
    const uint8_t *data;
    size_t size;
} blob;

static int mem_read(void *user, const char *path, char **out, size_t *len)
{
    (void)path;
    const blob *b = user;
    *out = malloc(b->size ? b->size : 1);
    if (!*out) return 12;
    if (b->size) memcpy(*out, b->data, b->size);
    *len = b->size;
    return 0;
}

static const char scene[] =
    "{\"brume\": 1, \"name\": \"f\", \"geometry\": [{\"shape\": \"mesh\", \"path\": \"m.obj\", \"scale\": 0.5, "
    "\"rotate_deg\": [10, 20, 30], \"translate\": [1, 2, 3]}], \"targets\": [{\"name\": \"t\", \"grid\": \"world\", "
    "\"min\": [0, 0, 0], \"max\": [1, 1, 1], \"cells\": [2, 2, 2]}]}";

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
    brm_obj_mesh m;
    brm_diag d;
    brm_diag_init(&d);
    brm_status st = brm_obj_parse((const char *)data, size, "fuzz.obj", &m, &d);
    if (st == BRM_OK) {
        for (uint32_t i = 0; i < m.face_count; i++)
            for (int k = 0; k < 3; k++)
                if (m.faces[i][k] >= m.vert_count) abort();
        brm_obj_free(&m);
    } else if (d.message[0] == '\0' || strchr(d.message, '\n') || strncmp(d.message, "fuzz.obj:", 9) != 0) {
        abort();
    }
    blob b = {data, size};
    brm_scene_load_opts o = {mem_read, &b};
    brm_scene *s = NULL;
    brm_diag_init(&d);
    st = brm_scene_load_ex(scene, sizeof scene - 1, "fuzz/scene.json", &o, &s, &d);
    if (st == BRM_OK) {
        if (!s || s->object_count != 1 || s->objects[0].tri_count != s->tri_count || s->tri_count == 0) abort();
        brm_scene_free(s);
    } else if (s || d.message[0] == '\0' || strchr(d.message, '\n')) {
        abort();
    }
    return 0;
}
