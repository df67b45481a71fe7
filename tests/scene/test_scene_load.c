/* Tests of the scene loader (scene_load.c, obj.c, json_pos.c) on valid scenes: what lands in
 * brm_scene, transforms, bounds, defaults, hashes, positions in messages. The broken inputs
 * are in tests/corpus (test_corpus.c). */
#include <stdlib.h>
#include <string.h>

#include "check.h"
#include "base/sha256.h"
#include "scene/light.h"
#include "scene/media.h"
#include "scene/obj.h"
#include "scene/scene.h"

static const char *data_dir;

/* Meshes served from memory: the loader never touches the disk through this. */
typedef struct mem_file {
    const char *path, *text;
} mem_file;

static int mem_read(void *user, const char *path, char **data, size_t *len)
{
    for (const mem_file *f = user; f->path; f++)
        if (strcmp(f->path, path) == 0) {
            *len = strlen(f->text);
            *data = malloc(*len + 1);
            memcpy(*data, f->text, *len + 1);
            return 0;
        }
    return 2; /* ENOENT */
}

static brm_scene *load_text(const char *json, const mem_file *files, brm_diag *d)
{
    brm_scene_load_opts o = {mem_read, (void *)files};
    brm_scene *s = NULL;
    brm_diag_init(d);
    brm_status st = brm_scene_load_ex(json, strlen(json), "scenes/t.json", &o, &s, d);
    if (st != BRM_OK) print_error("load failed: %s\n", d->message);
    return s;
}

static const char *minimal_target =
    "\"targets\": [{\"name\": \"t\", \"grid\": \"world\", \"min\": [0,0,0], \"max\": [1,1,1], \"cells\": [2,2,2]}]";

static void loader_should_fill_the_scene_from_a_full_file(void **state)
{
    (void)state;
    char path[4200];
    snprintf(path, sizeof path, "%s/good.json", data_dir);
    brm_diag d;
    brm_diag_init(&d);
    brm_scene *s = NULL;
    assert_int_equal(brm_scene_load(path, &s, &d), BRM_OK);
    assert_string_equal(s->name, "test-yard");
    assert_int_equal(s->object_count, 3);
    assert_int_equal(s->light_count, 4);
    assert_int_equal(s->medium_count, 4);
    assert_int_equal(s->target_count, 3);
    /* Box: 12 triangles; the cube mesh: 6 quads = 12 triangles, one degenerate face dropped. */
    assert_int_equal(s->objects[0].tri_count, 12);
    assert_int_equal(s->objects[2].tri_count, 12);
    assert_int_equal(s->tri_count, 24);
    assert_int_equal(s->degenerate_dropped, 1);
    assert_true(s->objects[2].closed);
    assert_int_equal(d.warning_count, 1);
    assert_non_null(strstr(d.warnings[0], "dropped 1 degenerate"));
    /* Mesh: scale 2, rotate y by 90° (x → −z), translate x by 10: the unit cube [0,1]³ lands
     * on x ∈ [10, 12], y ∈ [0, 2], z ∈ [−2, 0]. */
    brm_aabb mb = s->objects[2].bounds;
    assert_near(mb.min.x, 10.0, 1e-12, 0);
    assert_near(mb.max.x, 12.0, 1e-12, 0);
    assert_near(mb.max.y, 2.0, 1e-12, 0);
    assert_near(mb.min.z, -2.0, 1e-12, 0);
    assert_near(mb.max.z, 0.0, 1e-12, 0);
    /* The file is referenced by content: SHA-256 of its bytes (FIPS 180-4, src/base). */
    assert_int_equal(s->file_count, 1);
    assert_non_null(strstr(s->files[0].path, "meshes/cube.obj"));
    FILE *f = fopen(s->files[0].path, "rb");
    assert_non_null(f);
    char buf[4096];
    size_t n = fread(buf, 1, sizeof buf, f);
    fclose(f);
    uint8_t h[32];
    brm_sha256_buf(buf, n, h);
    assert_memory_equal(h, s->files[0].sha256, 32);
    /* Lights: direction normalised; flux to intensity (REFERENCES §7: 1000 lm point → 79.5774715459
     * cd; 1000 lm in a 30° cone → 1187.94866779 cd); defaults: white, shadows on, 1.5 texels. */
    assert_near(s->lights[0].direction.y, -1.0, 1e-15, 0);
    assert_near(s->lights[1].intensity_cd, 79.5774715459, 0, 1e-11);
    assert_near(s->lights[2].intensity_cd, 1187.94866779, 0, 1e-11);
    assert_near(s->lights[2].cos_outer, cos(30.0 * BRM_PI / 180.0), 1e-15, 0);
    assert_int_equal(s->lights[2].shadow_resolution, 512);
    assert_near(s->lights[2].softness_texels, 2.0, 0, 0);
    assert_true(s->lights[0].shadow);
    assert_false(s->lights[3].shadow);
    assert_near(s->lights[3].intensity_cd, 50.0, 0, 0);
    assert_near(s->lights[0].color.z, 1.0, 0, 0);
    assert_near(s->lights[1].range_m, 20.0, 0, 0);
    assert_near(s->lights[3].range_m, 0.0, 0, 0);
    assert_string_equal(s->lights[2].json_path, "lights[2]");
    /* Media: visibility 200 m → ln(20)/200 = 0.0149786614 /m (REFERENCES §4), default albedo 0.9. */
    assert_near(s->media[0].sigma_t, 0.0149786614, 0, 5e-9);
    assert_near(s->media[0].albedo.x, 0.9, 0, 0);
    assert_int_equal(s->media[0].phase.model, BRM_PHASE_HENYEY_GREENSTEIN);
    assert_near(s->media[0].phase.g, 0.3, 0, 0);
    assert_int_equal(s->media[1].phase.model, BRM_PHASE_ISOTROPIC);
    assert_int_equal(s->media[2].phase.model, BRM_PHASE_TWO_LOBE);
    assert_near(s->media[2].phase.g_back, -0.3, 0, 0);
    assert_int_equal(s->media[3].octaves, 4);
    assert_int_equal(s->media[3].seed, 7);
    assert_true(s->media_ready);
    assert_true(s->sky.present);
    /* Targets: defaults samples 4, rays given, encoding f16 / compact, level 9 / 3. */
    assert_int_equal(s->targets[0].samples, 8);
    assert_int_equal(s->targets[1].samples, 4);
    assert_int_equal(s->targets[0].encoding, BRM_ENCODING_F16);
    assert_int_equal(s->targets[1].encoding, BRM_ENCODING_COMPACT);
    assert_int_equal(s->targets[0].compression_level, 9);
    assert_int_equal(s->targets[2].compression_level, 3);
    assert_int_equal(s->targets[2].rays, 64);
    assert_string_equal(s->targets[1].json_path, "targets[1]");
    assert_int_equal(brm_scene_find_target(s, "probes"), 2);
    assert_int_equal(brm_scene_find_target(s, "nope"), -1);
    /* Fog bounds: none given, so geometry and targets; the frustum's pyramid reaches its far
     * plane: camera at z = 20 looking to −z, far 40 → z down to −20, half-height 40·tan 30°. */
    assert_false(s->fog_bounds_given);
    assert_near(s->fog_bounds.max.z, 20.0, 1e-9, 0);
    /* The camera's right vector is exactly +x here (view (0, −1, −20), up +y), so the x extent
     * is the far plane's half-width 1.5 · 40 tan 30° exactly; its tilt only widens y and z. */
    double hh = 40.0 * tan(30.0 * BRM_PI / 180.0), w = 1.5 * hh;
    assert_near(s->fog_bounds.max.x, w, 1e-9, 0);
    assert_near(s->fog_bounds.min.x, -w, 1e-9, 0);
    assert_true(s->fog_bounds.min.z < -19.9);
    /* Top far corners: y = 2 + 40·f.y + hh·u.y with f = (0, −1, −20)/√401, u = (0, 20, −1)/√401. */
    assert_near(s->fog_bounds.max.y, 2.0 - 40.0 / sqrt(401.0) + hh * 20.0 / sqrt(401.0), 1e-9, 0);
    /* Canonical JSON: compact, targets apart. */
    assert_non_null(strstr(s->shared_json_text, "\"name\":\"test-yard\""));
    assert_null(strstr(s->shared_json_text, "\"targets\""));
    assert_string_equal(s->targets[0].json_text,
                        "{\"name\":\"yard\",\"grid\":\"world\",\"min\":[-8,0,-8],\"max\":[8,4,8],\"cells\":[32,8,32],\"samples\":8}");
    brm_scene_free(s);
}

static void box_triangles_should_wind_outward(void **state)
{
    (void)state;
    char json[1024];
    snprintf(json, sizeof json, "{\"brume\": 1, \"name\": \"b\", \"geometry\": [{\"shape\": \"box\", \"min\": [1,2,3], \"max\": [2,4,7]}], %s}",
             minimal_target);
    brm_diag d;
    brm_scene *s = load_text(json, NULL, &d);
    assert_non_null(s);
    assert_int_equal(s->tri_count, 12);
    brm_vec3 c = brm_v3(1.5, 3.0, 5.0);
    double area = 0.0;
    for (uint32_t i = 0; i < 12; i++) {
        const brm_tri *t = &s->tris[i];
        brm_vec3 n = brm_cross(brm_sub(t->v[1], t->v[0]), brm_sub(t->v[2], t->v[0]));
        brm_vec3 mid = brm_scale(brm_add(brm_add(t->v[0], t->v[1]), t->v[2]), 1.0 / 3.0);
        assert_true(brm_dot(n, brm_sub(mid, c)) > 0.0);   /* counter-clockwise seen from outside */
        area += 0.5 * brm_len(n);
        assert_int_equal(t->object, 0);
    }
    /* Surface area 2(ab + bc + ca) with a = 1, b = 2, c = 4: 28. */
    assert_near(area, 28.0, 1e-12, 0);
    assert_true(s->objects[0].closed);
    brm_scene_free(s);
}

static void mesh_should_scale_then_rotate_x_y_z_then_translate(void **state)
{
    (void)state;
    /* A tetrahedron with a vertex at (0, 1, 0). SPEC.md: R = Rz·Ry·Rx after scale, before
     * translate. rotate_deg [90, 0, 90]: Rx(90°) takes (0,1,0) to (0,0,1), Rz leaves it; scale 2,
     * translate [10,0,0] → (10, 0, 2). The other order (Rx·Rz) would give (−2+10, 0, 0). */
    mem_file files[] = {{"scenes/meshes/tet.obj", "v 0 0 0\nv 1 0 0\nv 0 1 0\nv 0 0 1\nf 1 3 2\nf 1 2 4\nf 1 4 3\nf 2 3 4\n"},
                        {NULL, NULL}};
    char json[1024];
    snprintf(json, sizeof json,
             "{\"brume\": 1, \"name\": \"m\", \"geometry\": [{\"shape\": \"mesh\", \"path\": \"meshes/tet.obj\", \"scale\": 2, "
             "\"rotate_deg\": [90, 0, 90], \"translate\": [10, 0, 0]}], %s}",
             minimal_target);
    brm_diag d;
    brm_scene *s = load_text(json, files, &d);
    assert_non_null(s);
    assert_int_equal(s->tri_count, 4);
    assert_true(s->objects[0].closed);
    /* Find the image of vertex 3 (0,1,0): it is corner 1 of the first face "f 1 3 2". */
    brm_vec3 v = s->tris[0].v[1];
    assert_near(v.x, 10.0, 1e-12, 0);
    assert_near(v.y, 0.0, 1e-12, 0);
    assert_near(v.z, 2.0, 1e-12, 0);
    /* Vertex 2 (1,0,0): Rx leaves it, Rz(90°) → (0,1,0); ×2, +10 → (10, 2, 0). */
    brm_vec3 w = s->tris[0].v[2];
    assert_near(w.x, 10.0, 1e-12, 0);
    assert_near(w.y, 2.0, 1e-12, 0);
    assert_near(w.z, 0.0, 1e-12, 0);
    assert_int_equal(s->file_count, 1);
    assert_string_equal(s->files[0].path, "scenes/meshes/tet.obj");
    brm_scene_free(s);
}

static void open_mesh_should_load_as_not_closed_with_a_warning(void **state)
{
    (void)state;
    mem_file files[] = {{"scenes/open.obj", "v 0 0 0\nv 1 0 0\nv 0 1 0\nv 0 0 1\nf 1 3 2\nf 1 2 4\nf 1 4 3\n"}, {NULL, NULL}};
    char json[1024];
    snprintf(json, sizeof json, "{\"brume\": 1, \"name\": \"m\", \"geometry\": [{\"shape\": \"mesh\", \"path\": \"open.obj\"}], %s}",
             minimal_target);
    brm_diag d;
    brm_scene *s = load_text(json, files, &d);
    assert_non_null(s);
    assert_false(s->objects[0].closed);
    assert_int_equal(d.warning_count, 1);
    assert_non_null(strstr(d.warnings[0], "not closed (3 edges"));
    brm_scene_free(s);
}

static void messages_should_give_exact_line_and_column(void **state)
{
    (void)state;
    /* Columns count code points (checked with Python str.index + 1): "é" (2 bytes) is one column. */
    const char *json = "{\n  \"brume\": 1,\n  \"name\": \"x\",\n  \"sky\": {\"zenith\": [1,1,1], \"horizon\": [1,1,1], \"ground\": [1,1,1]},\n"
                       "  \"targets\": [\n    {\"name\": \"t\", \"grid\": \"world\", \"min\": [0,0,0], \"max\": [1,1,1], \"cells\": [2, 2, -3]}\n  ]\n}\n";
    brm_diag d;
    brm_diag_init(&d);
    brm_scene *s = NULL;
    assert_int_equal(brm_scene_load_memory(json, strlen(json), "bad.json", &s, &d), BRM_E_INPUT);
    assert_null(s);
    assert_non_null(strstr(d.message, "bad.json:6:84: targets[0].cells[2]: cell count -3 is out of range"));
    const char *j2 = "{\"brume\": 1, \"name\": \"x\", \"sky\": {\"zénith\": [1,1,1]}, \"targets\": []}";
    brm_diag_init(&d);
    assert_int_equal(brm_scene_load_memory(j2, strlen(j2), "u.json", &s, &d), BRM_E_INPUT);
    assert_string_equal(d.message, "u.json:1:35: sky.zénith: unknown key \"zénith\"; did you mean \"zenith\"?");
    /* An error in a scene does not depend on earlier state: a fresh diag every time. */
    const char *j3 = "{\"brume\": 1, \"name\": \"x\", \"targets\": [{\"name\": \"t\", \"grid\": \"wrold\"}]}";
    brm_diag_init(&d);
    assert_int_equal(brm_scene_load_memory(j3, strlen(j3), "g.json", &s, &d), BRM_E_INPUT);
    assert_string_equal(d.message, "g.json:1:61: targets[0].grid: unknown grid \"wrold\"; did you mean \"world\"?");
}

static void missing_scene_file_should_be_an_io_error(void **state)
{
    (void)state;
    brm_diag d;
    brm_diag_init(&d);
    brm_scene *s = (brm_scene *)0x1;   /* untouched on failure */
    assert_int_equal(brm_scene_load("no/such/scene.json", &s, &d), BRM_E_IO);
    assert_int_equal(brm_status_exit_code(d.status), 3);
    assert_true(s == (brm_scene *)0x1);
    assert_non_null(strstr(d.message, "no/such/scene.json: cannot read"));
}

static void given_fog_bounds_and_media_should_drive_extinction(void **state)
{
    (void)state;
    char json[1024];
    snprintf(json, sizeof json,
             "{\"brume\": 1, \"name\": \"f\", \"fog_bounds\": {\"min\": [0,0,0], \"max\": [10,5,10]}, \"media\": [{\"type\": "
             "\"uniform\", \"extinction_per_m\": 0.05, \"albedo\": [0.5, 0.6, 0.7]}], %s}",
             minimal_target);
    brm_diag d;
    brm_scene *s = load_text(json, NULL, &d);
    assert_non_null(s);
    assert_true(s->fog_bounds_given);
    assert_near(brm_media_extinction(s, brm_v3(5, 2, 5)), 0.05, 0, 0);
    assert_near(brm_media_extinction(s, brm_v3(5, 6, 5)), 0.0, 0, 0);
    brm_media_point mp;
    brm_media_eval(s, brm_v3(1, 1, 1), &mp);
    assert_near(mp.sigma_s.z, 0.035, 1e-15, 0);
    brm_scene_free(s);
}

static void obj_parser_should_handle_forms_and_polygons(void **state)
{
    (void)state;
    const char *t = "# c\r\nv 0 0 0\r\nv 1 0 0 1\r\nv 1 1 0 0.5 0.5 0.5\r\nv 0 1 0\r\nvt 0 0\r\nvn 0 0 1\r\n"
                    "g grp\r\ns 1\r\nf 1/1/1 2/1/1 3/1/1 4/1/1 # quad\r\nf -4//1 -2//1 -1//1\r\nf 1/1 2/1 3/1\r\n";
    brm_obj_mesh m;
    brm_diag d;
    brm_diag_init(&d);
    assert_int_equal(brm_obj_parse(t, strlen(t), "t.obj", &m, &d), BRM_OK);
    assert_int_equal(m.vert_count, 4);
    assert_int_equal(m.face_count, 4);   /* quad → 2 fan triangles, then 2 */
    assert_int_equal(m.faces[1][0], 0);
    assert_int_equal(m.faces[1][1], 2);
    assert_int_equal(m.faces[1][2], 3);
    assert_int_equal(m.faces[2][0], 0);
    assert_int_equal(m.faces[2][1], 2);
    assert_int_equal(m.faces[2][2], 3);
    brm_obj_free(&m);
    const char *bad = "v 0 0 0\nv 1 0 0\nv 1 1 0\nv 0 1 0\nv 0 0 1\nv 1 0 1\nv 1 1 1\nv 0 1 1\nf 1 2 9\n";
    brm_diag_init(&d);
    assert_int_equal(brm_obj_parse(bad, strlen(bad), "m.obj", &m, &d), BRM_E_INPUT);
    assert_string_equal(d.message, "m.obj:9: face index 9 out of range: 8 vertices defined so far; expected 1..8 or -8..-1");
}

static void loader_visibility_should_give_ln20_over_v(void **state)
{
    (void)state;
    /* Source: REFERENCES §4 table (MOR, 5 % contrast: sigma = ln(20)/V), through the loader:
     * 50 m → 0.0599146455, 200 m → 0.0149786614, 1000 m → 0.00299573227 per metre. */
    const double vis[] = {50.0, 200.0, 1000.0}, sigma[] = {0.0599146455, 0.0149786614, 0.00299573227};
    for (int i = 0; i < 3; i++) {
        char json[1024];
        snprintf(json, sizeof json, "{\"brume\": 1, \"name\": \"v\", \"media\": [{\"type\": \"uniform\", \"visibility_m\": %g}], %s}",
                 vis[i], minimal_target);
        brm_diag d;
        brm_scene *s = load_text(json, NULL, &d);
        assert_non_null(s);
        assert_near(s->media[0].sigma_t, sigma[i], 0, 5e-9);
        /* and it is what the density function returns inside the fog (bounds = the target box) */
        assert_near(brm_media_extinction(s, brm_v3(0.5, 0.5, 0.5)), sigma[i], 0, 5e-9);
        brm_scene_free(s);
    }
}

static void collinear_mesh_faces_should_be_dropped_and_counted(void **state)
{
    (void)state;
    /* A closed tetrahedron plus two zero-area faces: one collinear after a rotation (rounding
     * leaves a tiny cross product), one with coincident corners at different indices. */
    mem_file files[] = {{"scenes/t.obj", "v 0 0 0\nv 1 0 0\nv 0 1 0\nv 0 0 1\nv 2 0 0\nv 1 0 0\n"
                                         "f 1 3 2\nf 1 2 4\nf 1 4 3\nf 2 3 4\nf 1 2 5\nf 2 6 3\n"},
                        {NULL, NULL}};
    char json[1024];
    snprintf(json, sizeof json,
             "{\"brume\": 1, \"name\": \"m\", \"geometry\": [{\"shape\": \"mesh\", \"path\": \"t.obj\", \"rotate_deg\": [33, 12, 71]}], %s}",
             minimal_target);
    brm_diag d;
    brm_scene *s = load_text(json, files, &d);
    assert_non_null(s);
    assert_int_equal(s->tri_count, 4);
    assert_int_equal(s->degenerate_dropped, 2);
    assert_true(s->objects[0].closed);   /* vertices 2 and 6 weld: still watertight */
    assert_int_equal(d.warning_count, 1);
    assert_non_null(strstr(d.warnings[0], "dropped 2 degenerate (zero-area) triangles"));
    brm_scene_free(s);
}

int main(int argc, char **argv)
{
    data_dir = argc > 1 ? argv[1] : "tests/scene/data";
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(loader_should_fill_the_scene_from_a_full_file),
        cmocka_unit_test(box_triangles_should_wind_outward),
        cmocka_unit_test(mesh_should_scale_then_rotate_x_y_z_then_translate),
        cmocka_unit_test(open_mesh_should_load_as_not_closed_with_a_warning),
        cmocka_unit_test(messages_should_give_exact_line_and_column),
        cmocka_unit_test(missing_scene_file_should_be_an_io_error),
        cmocka_unit_test(given_fog_bounds_and_media_should_drive_extinction),
        cmocka_unit_test(obj_parser_should_handle_forms_and_polygons),
        cmocka_unit_test(loader_visibility_should_give_ln20_over_v),
        cmocka_unit_test(collinear_mesh_faces_should_be_dropped_and_counted),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
