/* Preview pictures: plain shading, the fog composite against Beer–Lambert closed forms,
 * probe spheres against Ramamoorthi–Hanrahan values, determinism, volume checks, names.
 * Scenes are built by hand (no JSON loader involved) and baked with the project's baker. */
#include "check.h"

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <fcntl.h>
#include <stdarg.h>
#include <sys/stat.h>
#include <unistd.h>

#include "bake/bake.h"
#include "base/sh.h"
#include "brume/brv.h"
#include "brume/brv_write.h"
#include "cli/cli.h"
#include "scene/media.h"
#include "scene/scene.h"
#include "view/preview.h"
#include "base/atomic_file.h"
#include "view/tone.h"
#include "voxel/grid.h"
#include "view_test_util.h"

/* ---- hand-built scenes ------------------------------------------------------------------ */

static brm_scene *new_scene(void)
{
    brm_scene *s = calloc(1, sizeof *s);
    assert_non_null(s);
    snprintf(s->name, sizeof s->name, "preview-test");
    s->objects = calloc(16, sizeof *s->objects);
    s->tris = calloc(16 * 12, sizeof *s->tris);
    s->lights = calloc(4, sizeof *s->lights);
    s->media = calloc(BRM_MAX_MEDIA, sizeof *s->media);
    s->targets = calloc(4, sizeof *s->targets);
    assert_true(s->objects && s->tris && s->lights && s->media && s->targets);
    return s;
}

static void ready(brm_scene *s)
{
    brm_diag d;
    brm_diag_init(&d);
    assert_int_equal(brm_media_prepare(s, &d), BRM_OK);
}

static brm_vec3 corner(brm_vec3 lo, brm_vec3 hi, int i)
{
    return brm_v3(i & 1 ? hi.x : lo.x, i & 2 ? hi.y : lo.y, i & 4 ? hi.z : lo.z);
}

/* A box primitive as 12 triangles, counter-clockwise seen from outside. */
static void add_box(brm_scene *s, brm_vec3 lo, brm_vec3 hi, double albedo)
{
    static const int q[6][4] = {{0, 4, 6, 2}, {1, 3, 7, 5}, {0, 1, 5, 4}, {2, 6, 7, 3}, {0, 2, 3, 1}, {4, 5, 7, 6}};
    uint32_t oi = s->object_count++;
    brm_object *o = &s->objects[oi];
    o->shape = BRM_SHAPE_BOX;
    o->bounds.min = lo, o->bounds.max = hi;
    o->albedo = brm_v3(albedo, albedo, albedo);
    o->first_tri = s->tri_count;
    o->closed = true;
    for (int k = 0; k < 6; k++) {
        brm_vec3 a = corner(lo, hi, q[k][0]), b = corner(lo, hi, q[k][1]);
        brm_vec3 c = corner(lo, hi, q[k][2]), dd = corner(lo, hi, q[k][3]);
        brm_tri *t = &s->tris[s->tri_count++];
        t->v[0] = a, t->v[1] = b, t->v[2] = c, t->object = oi;
        t = &s->tris[s->tri_count++];
        t->v[0] = a, t->v[1] = c, t->v[2] = dd, t->object = oi;
        o->tri_count += 2;
    }
}

static void add_sphere(brm_scene *s, brm_vec3 c, double r, double albedo)
{
    brm_object *o = &s->objects[s->object_count++];
    o->shape = BRM_SHAPE_SPHERE;
    o->center = c;
    o->radius = r;
    o->bounds.min = brm_sub(c, brm_v3(r, r, r));
    o->bounds.max = brm_add(c, brm_v3(r, r, r));
    o->albedo = brm_v3(albedo, albedo, albedo);
    o->closed = true;
}

static brm_light *add_directional(brm_scene *s, brm_vec3 travel, double lux, bool shadow)
{
    brm_light *l = &s->lights[s->light_count];
    l->type = BRM_LIGHT_DIRECTIONAL;
    l->direction = brm_norm(travel);
    l->illuminance_lux = lux;
    l->color = brm_v3(1, 1, 1);
    l->shadow = shadow;
    l->softness_texels = 1.5;
    snprintf(l->json_path, sizeof l->json_path, "lights[%u]", s->light_count);
    s->light_count++;
    return l;
}

static void add_uniform(brm_scene *s, double sigma_t, double albedo)
{
    brm_medium *m = &s->media[s->medium_count++];
    m->type = BRM_MEDIUM_UNIFORM;
    m->sigma_t = sigma_t;
    m->albedo = brm_v3(albedo, albedo, albedo);
    m->phase.model = BRM_PHASE_ISOTROPIC;
}

static brm_target *add_target(brm_scene *s, const char *name, brm_grid_kind kind)
{
    brm_target *t = &s->targets[s->target_count];
    snprintf(t->name, sizeof t->name, "%s", name);
    snprintf(t->json_path, sizeof t->json_path, "targets[%u]", s->target_count);
    t->grid = kind;
    t->samples = 8;
    t->rays = 64;
    t->encoding = BRM_ENCODING_F32;
    t->compression_level = 3;
    s->target_count++;
    return t;
}

static void set_camera(brm_target *t, brm_vec3 pos, brm_vec3 look, double fov, double aspect, double near,
                       double far, uint32_t nx, uint32_t ny, uint32_t nz)
{
    t->camera.position = pos;
    t->camera.look_at = look;
    t->camera.up = brm_v3(0, 1, 0);
    t->camera.fov_y_deg = fov;
    t->camera.aspect = aspect;
    t->camera.near = near;
    t->camera.far = far;
    t->cells[0] = nx, t->cells[1] = ny, t->cells[2] = nz;
}

static char tmp_dir[64];

static void path_in_tmp(char *buf, size_t cap, const char *name)
{
    if (!tmp_dir[0]) {
        snprintf(tmp_dir, sizeof tmp_dir, "/tmp/brume-preview-XXXXXX");
        assert_non_null(mkdtemp(tmp_dir));
    }
    snprintf(buf, cap, "%s/%s", tmp_dir, name);
}

static brv_volume *bake(const brm_scene *s, uint32_t t, const char *file)
{
    char path[256];
    path_in_tmp(path, sizeof path, file);
    brm_bake_opts o;
    memset(&o, 0, sizeof o);
    o.threads = 2;
    brm_diag d;
    brm_diag_init(&d);
    brm_status st = brm_bake_target(s, t, &o, path, NULL, &d);
    if (st != BRM_OK) print_error("bake failed: %s\n", d.message);
    assert_int_equal(st, BRM_OK);
    brv_volume *v = NULL;
    assert_int_equal(brv_open_file(path, NULL, &v), BRV_OK);
    return v;
}

static void render(const brm_scene *s, uint32_t t, const brv_volume *vol, const brm_preview_opts *o, brm_preview *p)
{
    brm_diag d;
    brm_diag_init(&d);
    brm_status st = brm_preview_render(s, t, vol, "test.brv", o, p, &d);
    if (st != BRM_OK) print_error("preview failed: %s\n", d.message);
    assert_int_equal(st, BRM_OK);
}

/* The fog scene of the composite tests: uniform fog (sigma_t, albedo, isotropic) in a box whose
 * top is at y = FOG_TOP, lit by a directional light travelling along (0, −1, −1)/√2 that casts
 * no shadow, no sky; a wall (albedo 0.5) whose face is the plane z = −wall_d, facing the camera
 * at the origin looking down −z. */
#define FOG_SIGMA 0.05
#define FOG_ALBEDO 0.8
#define FOG_TOP 10.0
#define LUX 1000.0

static brm_scene *fog_wall_scene(double wall_d, bool fog)
{
    brm_scene *s = new_scene();
    s->fog_bounds.min = brm_v3(-60, -10, -wall_d - 5);
    s->fog_bounds.max = brm_v3(60, FOG_TOP, 30);
    s->fog_bounds_given = true;
    add_box(s, brm_v3(-50, -50, -wall_d - 1), brm_v3(50, 50, -wall_d), 0.5);
    add_directional(s, brm_v3(0, -1, -1), LUX, false);
    if (fog) add_uniform(s, FOG_SIGMA, FOG_ALBEDO);
    ready(s);
    return s;
}

/* The closed form for one pixel ray (unit dir from the origin) that meets the wall at distance
 * d: the light's path through the fog from the point at t is ℓ(t) = √2·(FOG_TOP − t·dir.y) (it
 * leaves through the top), so with ℓ0 = √2·FOG_TOP and a = −√2·dir.y (REFERENCES.md §6a, the
 * linearly growing light path; Beer–Lambert for every attenuation):
 *   S = sigma_s·p·E·e^(−sigma_t·ℓ0)·(1 − e^(−sigma_t·(1 + a)·d))/(sigma_t·(1 + a)), p = 1/(4π)
 *   T = e^(−sigma_t·d)
 * and the wall itself (Lambert, n = +z, cos = 1/√2): L = albedo/π·E·cos·e^(−sigma_t·ℓ(d)). */
static void closed_form(brm_vec3 dir, double d, double *S, double *T, double *wall)
{
    double l0 = sqrt(2.0) * FOG_TOP, a = -sqrt(2.0) * dir.y;
    double ss = FOG_SIGMA * FOG_ALBEDO;
    *S = ss / (4.0 * BRM_PI) * LUX * exp(-FOG_SIGMA * l0) * (1.0 - exp(-FOG_SIGMA * (1.0 + a) * d)) /
         (FOG_SIGMA * (1.0 + a));
    *T = exp(-FOG_SIGMA * d);
    *wall = 0.5 / BRM_PI * LUX * sqrt(0.5) * exp(-FOG_SIGMA * sqrt(2.0) * (FOG_TOP - d * dir.y));
}

/* The unit ray of pixel (x, y) for a camera at the origin looking down −z with up +y. */
static brm_vec3 pixel_ray(uint32_t x, uint32_t y, uint32_t w, uint32_t h, double fov, double aspect)
{
    double ty = tan(fov * BRM_PI / 360.0), tx = aspect * ty;
    double u = (x + 0.5) / w, v = 1.0 - (y + 0.5) / h;
    return brm_norm(brm_v3((2 * u - 1) * tx, (2 * v - 1) * ty, -1.0));
}

/* ---- plain shading ------------------------------------------------------------------------ */

/* A scene with a floor, a sphere, a light with shadows and a sky, and no media. */
static brm_scene *clear_scene(void)
{
    brm_scene *s = new_scene();
    add_box(s, brm_v3(-20, -1, -20), brm_v3(20, 0, 20), 0.6);
    add_sphere(s, brm_v3(0, 1.5, -6), 1.5, 0.8);
    add_directional(s, brm_v3(0.3, -1, -0.4), 5000.0, true);
    s->sky.present = true;
    s->sky.zenith = brm_v3(400, 600, 1000);
    s->sky.horizon = brm_v3(800, 800, 900);
    s->sky.ground = brm_v3(100, 100, 100);
    ready(s);
    brm_target *f = add_target(s, "view", BRM_GRID_FRUSTUM);
    set_camera(f, brm_v3(0, 2, 4), brm_v3(0, 1, -6), 50, 1.5, 0.3, 40, 24, 16, 32);
    brm_target *w = add_target(s, "yard", BRM_GRID_WORLD);
    w->box.min = brm_v3(-8, 0, -12), w->box.max = brm_v3(8, 6, 4);
    w->cells[0] = 16, w->cells[1] = 6, w->cells[2] = 16;
    return s;
}

static void preview_should_equal_plain_shading_when_scene_has_no_media(void **state)
{
    (void)state;
    brm_scene *s = clear_scene();
    for (uint32_t t = 0; t < 2; t++) {
        brv_volume *vol = bake(s, t, t == 0 ? "clear-view.brv" : "clear-yard.brv");
        brm_preview_opts o;
        memset(&o, 0, sizeof o);
        o.width = 96;
        o.threads = 2;
        if (t == 1) {
            o.camera_set = true;
            o.from = brm_v3(0, 2, 4), o.look_at = brm_v3(0, 1, -6);
        }
        brm_preview with, without;
        render(s, t, vol, &o, &with);
        render(s, t, NULL, &o, &without);
        assert_true(with.fogged);
        assert_false(without.fogged);
        assert_int_equal(with.w, without.w);
        assert_int_equal(with.h, without.h);
        size_t n = (size_t)with.w * with.h * 3;
        /* Identical pixels: the fog step over an empty-media bake changes nothing. */
        assert_memory_equal(with.fog, without.plain, n * sizeof(float));
        assert_memory_equal(with.plain, without.plain, n * sizeof(float));
        /* And the picture is not empty: the lit sphere and floor are there. */
        double mx = 0;
        for (size_t i = 0; i < n; i++) mx = fmax(mx, with.fog[i]);
        assert_true(mx > 100.0);
        brm_preview_free(&with);
        brm_preview_free(&without);
        brv_free(vol);
    }
    brm_scene_free(s);
}

/* A wall lit at normal incidence by a directional light, open sky of uniform radiance Ls and no
 * fog: L = albedo/π·(E + π·Ls) (Lambert; the sky irradiance on a plane open to a uniform sky is
 * π·Ls, Ramamoorthi & Hanrahan 2001 constant environment, REFERENCES.md §3). */
static void preview_should_shade_a_wall_by_lambert_with_sky(void **state)
{
    (void)state;
    brm_scene *s = new_scene();
    add_box(s, brm_v3(-50, -50, -21), brm_v3(50, 50, -20), 0.5);
    add_directional(s, brm_v3(0, 0, -1), LUX, true);
    s->sky.present = true;
    s->sky.zenith = s->sky.horizon = s->sky.ground = brm_v3(100, 100, 100);
    ready(s);
    brm_target *w = add_target(s, "box", BRM_GRID_WORLD);
    w->box.min = brm_v3(-4, -4, -22), w->box.max = brm_v3(4, 4, 2);
    w->cells[0] = w->cells[1] = w->cells[2] = 8;
    brm_preview_opts o;
    memset(&o, 0, sizeof o);
    o.width = 32, o.height = 32;
    o.camera_set = true;
    o.from = brm_v3(0, 0, 0), o.look_at = brm_v3(0, 0, -1);
    o.aspect = 1.0;
    brm_preview p;
    render(s, 0, NULL, &o, &p);
    double want = 0.5 / BRM_PI * (LUX + BRM_PI * 100.0);
    for (uint32_t y = 0; y < 32; y += 7)
        for (uint32_t x = 0; x < 32; x += 5) assert_rel(p.plain[3 * ((size_t)y * 32 + x)], want, 1e-3);
    brm_preview_free(&p);
    brm_scene_free(s);
}

/* Sky irradiance by direct quadrature: E(n) = ∫ L_sky(ω)·max(n·ω, 0) dω (the definition of
 * irradiance; midpoint rule on 400 × 800 cells of θ, φ), L_sky the gradient of SPEC.md. */
static double sky_quadrature(const brm_sky *sky, brm_vec3 n, int ch)
{
    const int NT = 400, NP = 800;
    double sum = 0.0;
    for (int i = 0; i < NT; i++) {
        double th = BRM_PI * (i + 0.5) / NT;
        for (int k = 0; k < NP; k++) {
            double ph = 2.0 * BRM_PI * (k + 0.5) / NP;
            brm_vec3 w = brm_v3(sin(th) * cos(ph), cos(th), sin(th) * sin(ph));
            double c = brm_dot(w, n);
            if (c <= 0.0) continue;
            brm_vec3 L = brm_sky_radiance(sky, w);
            sum += (ch == 0 ? L.x : ch == 1 ? L.y : L.z) * c * sin(th);
        }
    }
    return sum * (BRM_PI / NT) * (2.0 * BRM_PI / NP);
}

/* Surfaces open to a gradient sky (no lights): L = albedo/π·E(n), E by quadrature above, for a
 * floor (n = +y, seen from straight above) and a wall (n = +z). */
static void preview_should_light_open_surfaces_by_the_sky_gradient(void **state)
{
    (void)state;
    brm_scene *s = new_scene();
    add_box(s, brm_v3(-50, -50, -50), brm_v3(50, 0, -20), 0.5);
    s->sky.present = true;
    s->sky.zenith = brm_v3(1000, 2000, 4000);
    s->sky.horizon = brm_v3(3000, 3000, 3000);
    s->sky.ground = brm_v3(200, 300, 100);
    ready(s);
    brm_target *w = add_target(s, "box", BRM_GRID_WORLD);
    w->box.min = brm_v3(-4, -4, -22), w->box.max = brm_v3(4, 4, 2);
    w->cells[0] = w->cells[1] = w->cells[2] = 8;
    const brm_vec3 from[2] = {{0, 10, -35}, {0, -10, 0}}, look[2] = {{0, 0, -35}, {0, -10, -1}};
    const brm_vec3 normal[2] = {{0, 1, 0}, {0, 0, 1}};
    for (int v = 0; v < 2; v++) {
        brm_preview_opts o;
        memset(&o, 0, sizeof o);
        o.width = 16, o.height = 16, o.aspect = 1.0, o.fov_y_deg = 30;
        o.camera_set = true;
        o.from = from[v], o.look_at = look[v];
        brm_preview p;
        render(s, 0, NULL, &o, &p);
        for (int c = 0; c < 3; c++) {
            double want = 0.5 / BRM_PI * sky_quadrature(&s->sky, normal[v], c);
            for (size_t i = 0; i < 256; i += 17) assert_rel(p.plain[3 * i + (size_t)c], want, 1e-4);
        }
        brm_preview_free(&p);
    }
    brm_scene_free(s);
}

/* A floor beside a tall, long wall (no lights, uniform sky of radiance Ls): every direction
 * of the floor's hemisphere on the wall's side meets the wall, so the floor sees the sky over
 * exactly half its hemisphere and E = π·Ls/2 (cosine-weighted half hemisphere by symmetry; the
 * view factor from a floor element to an infinite perpendicular half-plane is 1/2, Howell's
 * catalogue of configuration factors, from memory). The wall here is 2000 m high and 4000 m
 * long at 1–3.4 m from the pixels seen: what it misses of the half is under 1e-5. The fast
 * estimate (8 rays at every other pixel, filtered) against the closed form: unbiased (the
 * signed mean within 1 %), within 2 % on average and 15 % at every pixel; a converged one
 * (256 rays at every pixel) within 1 % on average and 3 % at every pixel (4 rays of 256 on
 * the wrong side of the stratified set is 1.6 %). */
static void preview_should_estimate_the_sky_under_a_wall_by_its_view_factor(void **state)
{
    (void)state;
    brm_scene *s = new_scene();
    add_box(s, brm_v3(-50, -1, -50), brm_v3(50, 0, 50), 0.5);
    add_box(s, brm_v3(1, 0, -2000), brm_v3(2, 2000, 2000), 0.5);
    s->sky.present = true;
    s->sky.zenith = s->sky.horizon = s->sky.ground = brm_v3(100, 100, 100);
    ready(s);
    brm_target *w = add_target(s, "box", BRM_GRID_WORLD);
    w->box.min = brm_v3(-4, 0, -4), w->box.max = brm_v3(1, 4, 4);
    w->cells[0] = w->cells[1] = w->cells[2] = 4;
    const double want = 0.5 / BRM_PI * (BRM_PI * 100.0 / 2.0);
    for (int converged = 0; converged < 2; converged++) {
        brm_preview_opts o;
        memset(&o, 0, sizeof o);
        o.width = 48, o.height = 48, o.aspect = 1.0, o.fov_y_deg = 30;
        o.camera_set = true;
        o.from = brm_v3(-1, 5, 0), o.look_at = brm_v3(-1, 0, 0.001);
        o.sky_rays = converged ? 256 : 0;
        brm_preview p;
        render(s, 0, NULL, &o, &p);
        double sum = 0.0, signed_sum = 0.0, worst = 0.0;
        const size_t n = (size_t)p.w * p.h;
        for (size_t i = 0; i < n; i++) {
            double e = p.plain[3 * i] / want - 1.0;
            sum += fabs(e);
            signed_sum += e;
            worst = fmax(worst, fabs(e));
        }
        print_message("sky under a wall (%s): mean error %.3f %%, mean |error| %.3f %%, largest %.3f %%\n",
                      converged ? "256 rays a pixel" : "fast", 100.0 * signed_sum / n, 100.0 * sum / n, 100.0 * worst);
        assert_true(fabs(signed_sum / n) < 0.01);
        assert_true(sum / n < (converged ? 0.01 : 0.02));
        assert_true(worst < (converged ? 0.03 : 0.15));
        brm_preview_free(&p);
    }
    brm_scene_free(s);
}

/* ---- the fog composite ---------------------------------------------------------------------- */

static void preview_frustum_should_match_beer_lambert_composite_at_wall(void **state)
{
    (void)state;
    /* Put the wall exactly on a depth-slice boundary, so no froxel is part wall, part fog. */
    brm_scene *probe = new_scene();
    brm_target *pt = add_target(probe, "intro", BRM_GRID_FRUSTUM);
    set_camera(pt, brm_v3(0, 0, 0), brm_v3(0, 0, -1), 40, 1.0, 0.5, 60, 16, 16, 48);
    brm_grid g;
    brm_diag d;
    brm_diag_init(&d);
    assert_int_equal(brm_grid_init(&g, pt, &d), BRM_OK);
    double wall_d = g.slice_depths[37];
    brm_grid_free(&g);
    assert_true(wall_d > 15.0 && wall_d < 30.0);

    brm_scene *s = fog_wall_scene(wall_d, true);
    memcpy(s->targets, pt, sizeof *pt);
    s->target_count = 1;
    brm_scene_free(probe);
    brv_volume *vol = bake(s, 0, "fog-intro.brv");
    brm_preview_opts o;
    memset(&o, 0, sizeof o);
    o.width = 64;
    brm_preview p;
    render(s, 0, vol, &o, &p);
    assert_int_equal(p.h, 64);
    const uint32_t px[][2] = {{32, 32}, {31, 31}, {20, 40}, {45, 25}};
    for (size_t i = 0; i < sizeof px / sizeof px[0]; i++) {
        uint32_t x = px[i][0], y = px[i][1];
        brm_vec3 dir = pixel_ray(x, y, 64, 64, 40, 1.0);
        double dist = wall_d / -dir.z, S, T, wall;
        closed_form(dir, dist, &S, &T, &wall);
        size_t k = 3 * ((size_t)y * 64 + x);
        /* Source: Lambert's cosine law and Beer–Lambert toward the light (REFERENCES.md §1). */
        print_message("frustum pixel (%u, %u): wall %.6g vs %.6g, fogged %.6g vs %.6g\n", x, y, p.plain[k], wall,
                      p.fog[k], wall * T + S);
        assert_rel(p.plain[k], wall, 0.01);
        /* Source: colour·T + S with the closed forms above (REFERENCES.md §1, §6a). */
        assert_rel(p.fog[k], p.plain[k] * T + S, 0.01);
        assert_rel(p.fog[k], wall * T + S, 0.01);
    }
    brm_preview_free(&p);
    brv_free(vol);
    brm_scene_free(s);
}

static void preview_world_should_match_beer_lambert_composite_at_wall(void **state)
{
    (void)state;
    const double wall_d = 20.0; /* a cell boundary of the box below (z from −24, 1 m cells) */
    brm_scene *s = fog_wall_scene(wall_d, true);
    brm_target *w = add_target(s, "yard", BRM_GRID_WORLD);
    w->box.min = brm_v3(-8, -4, -24), w->box.max = brm_v3(8, 4, 8);
    w->cells[0] = 16, w->cells[1] = 16, w->cells[2] = 32;
    brv_volume *vol = bake(s, 0, "fog-yard.brv");
    brm_preview_opts o;
    memset(&o, 0, sizeof o);
    o.width = 48, o.height = 48, o.aspect = 1.0, o.fov_y_deg = 30;
    o.camera_set = true;
    o.from = brm_v3(0, 0, 0), o.look_at = brm_v3(0, 0, -1);
    brm_preview p;
    render(s, 0, vol, &o, &p);
    const uint32_t px[][2] = {{24, 24}, {23, 23}, {12, 30}, {36, 18}};
    for (size_t i = 0; i < sizeof px / sizeof px[0]; i++) {
        uint32_t x = px[i][0], y = px[i][1];
        brm_vec3 dir = pixel_ray(x, y, 48, 48, 30, 1.0);
        double dist = wall_d / -dir.z, S, T, wall;
        closed_form(dir, dist, &S, &T, &wall);
        size_t k = 3 * ((size_t)y * 48 + x);
        /* Source: Beer–Lambert and the single-scattering closed form (REFERENCES.md §1, §6a). */
        print_message("world pixel (%u, %u): wall %.6g vs %.6g, fogged %.6g vs %.6g\n", x, y, p.plain[k], wall,
                      p.fog[k], p.plain[k] * T + S);
        assert_rel(p.plain[k], wall, 0.01);
        assert_rel(p.fog[k], p.plain[k] * T + S, 0.01);
    }
    brm_preview_free(&p);
    brv_free(vol);
    brm_scene_free(s);
}

/* ---- determinism ---------------------------------------------------------------------------- */

static void preview_should_give_the_same_pixels_whatever_the_thread_count(void **state)
{
    (void)state;
    brm_scene *s = clear_scene();
    add_uniform(s, 0.03, 0.9);
    s->media[0].phase.model = BRM_PHASE_HENYEY_GREENSTEIN;
    s->media[0].phase.g = 0.4;
    s->fog_bounds.min = brm_v3(-20, -1, -20), s->fog_bounds.max = brm_v3(20, 8, 20);
    s->fog_bounds_given = true;
    ready(s);
    brv_volume *vol = bake(s, 1, "det-yard.brv");
    brm_preview_opts o;
    memset(&o, 0, sizeof o);
    o.width = 80;
    o.camera_set = true;
    o.from = brm_v3(0, 2, 4), o.look_at = brm_v3(0, 1, -6);
    brm_preview a, b;
    o.threads = 1;
    render(s, 1, vol, &o, &a);
    o.threads = 2;
    render(s, 1, vol, &o, &b);
    size_t n = (size_t)a.w * a.h * 3 * sizeof(float);
    assert_memory_equal(a.fog, b.fog, n);
    assert_memory_equal(a.plain, b.plain, n);
    assert_true(a.exposure_ev == b.exposure_ev);
    /* The fog is there: it brightens the sky-less dark side and dims the far floor. */
    double diff = 0;
    for (size_t i = 0; i < n / sizeof(float); i++) diff += fabs(a.fog[i] - a.plain[i]);
    assert_true(diff > 0.0);
    uint8_t *pa, *pb;
    size_t la, lb;
    brm_diag d;
    brm_diag_init(&d);
    assert_int_equal(brm_preview_encode(&a, true, &pa, &la, &d), BRM_OK);
    assert_int_equal(brm_preview_encode(&b, true, &pb, &lb, &d), BRM_OK);
    assert_int_equal(la, lb);
    assert_memory_equal(pa, pb, la);
    free(pa);
    free(pb);
    brm_preview_free(&a);
    brm_preview_free(&b);
    brv_free(vol);
    brm_scene_free(s);
}

/* ---- exposure and encoding -------------------------------------------------------------------- */

static void preview_encode_should_apply_exposure_tone_and_srgb(void **state)
{
    (void)state;
    brm_scene *s = clear_scene();
    brm_preview_opts o;
    memset(&o, 0, sizeof o);
    o.width = 40;
    o.camera_set = true;
    o.from = brm_v3(0, 2, 4), o.look_at = brm_v3(0, 1, -6);
    brm_preview p;
    render(s, 1, NULL, &o, &p);
    /* Automatic: k = 4/p99 of the brightest channel per pixel (view/tone.h). */
    size_t n = (size_t)p.w * p.h;
    float *m = malloc(n * sizeof *m);
    for (size_t i = 0; i < n; i++) m[i] = fmaxf(p.fog[3 * i], fmaxf(p.fog[3 * i + 1], p.fog[3 * i + 2]));
    assert_near(p.exposure_ev, log2(brm_auto_exposure(m, n)), 1e-12, 0);
    free(m);
    uint8_t *ppm;
    size_t len;
    brm_diag d;
    brm_diag_init(&d);
    assert_int_equal(brm_preview_encode(&p, false, &ppm, &len, &d), BRM_OK);
    char head[32];
    int hl = snprintf(head, sizeof head, "P6\n%u %u\n255\n", p.w, p.h);
    /* Source: Netpbm ppm(5): header, one whitespace, rows top to bottom. */
    assert_int_equal(len, (size_t)hl + n * 3);
    assert_memory_equal(ppm, head, (size_t)hl);
    double k = exp2(p.exposure_ev);
    for (size_t i = 0; i < n; i += 37)
        for (int c = 0; c < 3; c++)
            assert_int_equal(ppm[hl + 3 * i + (size_t)c], brm_srgb_byte(brm_tone(k * p.plain[3 * i + (size_t)c])));
    free(ppm);
    brm_preview_free(&p);
    /* A given EV is used as it is. */
    o.exposure_set = true, o.exposure_ev = -9.5;
    render(s, 1, NULL, &o, &p);
    assert_true(p.exposure_ev == -9.5);
    brm_preview_free(&p);
    brm_scene_free(s);
}

/* ---- probes --------------------------------------------------------------------------------- */

/* Writes a probe volume of 2 × 1 × 1 probes at (−1, 0, −5) and (1, 0, −5) (spacing 2) with the
 * given SH (27 per probe, r0..r8, g0.., b0..) and validity. */
static void write_probes(const char *path, double sh[2][27], const float valid[2])
{
    brv_channel_desc cd[28];
    char names[28][16];
    for (int c = 0; c < 27; c++) {
        snprintf(names[c], sizeof names[c], "sh.%c%d", "rgb"[c / 9], c % 9);
        cd[c].name = names[c], cd[c].units = "cd/m2", cd[c].encoding = BRV_ENCODING_F32;
    }
    cd[27].name = "validity", cd[27].units = "1", cd[27].encoding = BRV_ENCODING_F32;
    brv_write_desc wd;
    memset(&wd, 0, sizeof wd);
    wd.kind = BRV_GRID_PROBES;
    wd.cells[0] = 2, wd.cells[1] = 1, wd.cells[2] = 1;
    wd.bounds_min[0] = -1, wd.bounds_min[1] = 0, wd.bounds_min[2] = -5;
    wd.bounds_max[0] = 1, wd.bounds_max[1] = 0, wd.bounds_max[2] = -5;
    wd.channel_count = 28;
    wd.channels = cd;
    FILE *f = fopen(path, "w+b");
    assert_non_null(f);
    brv_writer *w = NULL;
    assert_int_equal(brv_writer_create(f, &wd, &w), BRV_OK);
    float data[28 * 2];
    for (int c = 0; c < 27; c++)
        for (int k = 0; k < 2; k++) data[c * 2 + k] = (float)sh[k][c];
    data[27 * 2] = valid[0], data[27 * 2 + 1] = valid[1];
    assert_int_equal(brv_writer_put_brick(w, 0, data), BRV_OK);
    assert_int_equal(brv_writer_finish(w), BRV_OK);
    brv_writer_free(w);
    assert_int_equal(fclose(f), 0);
}

static void preview_should_draw_probe_spheres_shaded_by_their_irradiance(void **state)
{
    (void)state;
    brm_scene *s = new_scene();
    ready(s);
    brm_target *t = add_target(s, "probes", BRM_GRID_PROBES);
    t->box.min = brm_v3(-1, 0, -5), t->box.max = brm_v3(1, 0, -5);
    t->spacing_m = 2.0;
    /* Probe 0: constant radiance 1 (L00 = 2√π), whose irradiance is π in every direction, so a
     * white sphere shows radiance 1. Probe 1: a directional light of irradiance 1 from +z (toward
     * the camera): L_lm = Y_lm(+z), and the L2 reconstruction facing it is 17/16 (Source:
     * Ramamoorthi & Hanrahan 2001; REFERENCES.md §3 worked examples). */
    double sh[2][27];
    memset(sh, 0, sizeof sh);
    double y[9];
    brm_sh9(brm_v3(0, 0, 1), y);
    for (int c = 0; c < 3; c++) {
        sh[0][9 * c] = 2.0 * sqrt(BRM_PI);
        for (int i = 0; i < 9; i++) sh[1][9 * c + i] = y[i];
    }
    char path[256];
    path_in_tmp(path, sizeof path, "probes.brv");
    write_probes(path, sh, (const float[2]){1.0f, 1.0f});
    brv_volume *vol = NULL;
    assert_int_equal(brv_open_file(path, NULL, &vol), BRV_OK);
    brm_preview_opts o;
    memset(&o, 0, sizeof o);
    o.width = 101, o.height = 101, o.aspect = 1.0, o.fov_y_deg = 20;
    o.camera_set = true;
    o.from = brm_v3(-1, 0, 0), o.look_at = brm_v3(-1, 0, -5);
    brm_preview p;
    render(s, 0, vol, &o, &p);
    size_t mid = 3 * ((size_t)50 * 101 + 50);
    assert_rel(p.fog[mid], 1.0, 1e-6);
    /* Outside the sphere (radius 0.3 at 5 m: about 19 px here): the black sky. */
    assert_true(p.fog[3 * ((size_t)50 * 101 + 5)] == 0.0f);
    brm_preview_free(&p);
    o.from = brm_v3(1, 0, 0), o.look_at = brm_v3(1, 0, -5);
    render(s, 0, vol, &o, &p);
    /* The centre pixel's normal is within a fraction of a degree of +z. */
    assert_rel(p.fog[mid], 17.0 / 16.0 / BRM_PI, 1e-4);
    assert_int_equal(p.probes_invalid, 0);
    brm_preview_free(&p);
    brv_free(vol);

    /* An invalid probe: black, with the marker's cross through its centre. */
    write_probes(path, sh, (const float[2]){0.0f, 1.0f});
    assert_int_equal(brv_open_file(path, NULL, &vol), BRV_OK);
    o.from = brm_v3(-1, 0, 0), o.look_at = brm_v3(-1, 0, -5);
    render(s, 0, vol, &o, &p);
    assert_int_equal(p.probes_invalid, 1);
    assert_int_equal(p.marker[50 * 101 + 50], 1);
    assert_true(p.fog[mid] == 0.0f);
    uint8_t *ppm;
    size_t len;
    brm_diag d;
    brm_diag_init(&d);
    assert_int_equal(brm_preview_encode(&p, true, &ppm, &len, &d), BRM_OK);
    const uint8_t *px = ppm + (len - (size_t)101 * 101 * 3) + mid;
    assert_int_equal(px[0], BRM_PREVIEW_MARKER_R);
    assert_int_equal(px[1], BRM_PREVIEW_MARKER_G);
    assert_int_equal(px[2], BRM_PREVIEW_MARKER_B);
    free(ppm);
    brm_preview_free(&p);
    brv_free(vol);
    brm_scene_free(s);
}

/* ---- errors ------------------------------------------------------------------------------ */

static void preview_should_refuse_a_volume_that_does_not_match_the_target(void **state)
{
    (void)state;
    brm_scene *s = clear_scene();
    brv_volume *vol = bake(s, 1, "mismatch-yard.brv");
    brm_diag d;
    brm_diag_init(&d);
    /* A world volume offered for the frustum target. */
    assert_int_equal(brm_preview_check_volume(s, 0, vol, "yard.brv", &d), BRM_E_INPUT);
    assert_non_null(strstr(d.message, "yard.brv"));
    assert_non_null(strstr(d.message, "does not match"));
    assert_non_null(strstr(d.message, "brume bake"));
    /* The same kind with other cells. */
    s->targets[1].cells[0] = 17;
    brm_diag_init(&d);
    assert_int_equal(brm_preview_check_volume(s, 1, vol, "yard.brv", &d), BRM_E_INPUT);
    assert_non_null(strstr(d.message, "16 x 6 x 16"));
    s->targets[1].cells[0] = 16;
    /* And other bounds. */
    s->targets[1].box.max.x = 9;
    brm_diag_init(&d);
    assert_int_equal(brm_preview_check_volume(s, 1, vol, "yard.brv", &d), BRM_E_INPUT);
    assert_non_null(strstr(d.message, "bounds"));
    s->targets[1].box.max.x = 8;
    brm_diag_init(&d);
    assert_int_equal(brm_preview_check_volume(s, 1, vol, "yard.brv", &d), BRM_OK);
    brv_free(vol);
    brm_scene_free(s);
}

static void preview_should_ask_for_a_camera_only_where_one_is_needed(void **state)
{
    (void)state;
    brm_scene *s = clear_scene();
    brm_preview_opts o;
    memset(&o, 0, sizeof o);
    o.width = 16;
    brm_preview p;
    brm_diag d;
    brm_diag_init(&d);
    assert_int_equal(brm_preview_render(s, 1, NULL, NULL, &o, &p, &d), BRM_E_USAGE);
    assert_non_null(strstr(d.message, "--from"));
    assert_null(p.fog);
    o.camera_set = true;
    o.from = o.look_at = brm_v3(1, 1, 1);
    brm_diag_init(&d);
    assert_int_equal(brm_preview_render(s, 1, NULL, NULL, &o, &p, &d), BRM_E_USAGE);
    o.look_at = brm_v3(0, 0, 0);
    brm_diag_init(&d);
    assert_int_equal(brm_preview_render(s, 0, NULL, NULL, &o, &p, &d), BRM_E_USAGE);
    assert_non_null(strstr(d.message, "own camera"));
    brm_scene_free(s);
}

static void preview_beside_path_should_put_the_suffix_before_ppm(void **state)
{
    (void)state;
    char b[64];
    assert_true(brm_preview_beside_path("out/intro.ppm", b, sizeof b));
    assert_string_equal(b, "out/intro-nofog.ppm");
    assert_true(brm_preview_beside_path("pic", b, sizeof b));
    assert_string_equal(b, "pic-nofog");
    assert_false(brm_preview_beside_path("a-very-long-name.ppm", b, 8));
    brm_scene *s = clear_scene();
    assert_true(brm_preview_default_volume(s, 0, b, sizeof b));
    assert_string_equal(b, "out/preview-test/view.brv");
    brm_scene_free(s);
}

/* ---- the command ------------------------------------------------------------------------------ */

static const char *SCENE_JSON =
    "{\n"
    "  \"brume\": 1,\n"
    "  \"name\": \"lane\",\n"
    "  \"fog_bounds\": { \"min\": [-10, 0, -20], \"max\": [10, 6, 4] },\n"
    "  \"geometry\": [\n"
    "    { \"shape\": \"box\", \"min\": [-10, -0.5, -20], \"max\": [10, 0, 4] },\n"
    "    { \"shape\": \"sphere\", \"center\": [0, 1, -8], \"radius\": 1 }\n"
    "  ],\n"
    "  \"lights\": [ { \"type\": \"directional\", \"direction\": [0.3, -1, -0.2], \"illuminance_lux\": 2000 } ],\n"
    "  \"media\": [ { \"type\": \"uniform\", \"visibility_m\": 40 } ],\n"
    "  \"sky\": { \"zenith\": [200, 300, 500], \"horizon\": [400, 400, 450], \"ground\": [50, 50, 50] },\n"
    "  \"targets\": [\n"
    "    { \"name\": \"intro\", \"grid\": \"frustum\", \"camera\": { \"position\": [0, 1.6, 2], \"look_at\": [0, 1, -8],\n"
    "      \"up\": [0, 1, 0], \"fov_y_deg\": 50, \"aspect\": 1.7778, \"near\": 0.3, \"far\": 24 }, \"cells\": [16, 9, 16] },\n"
    "    { \"name\": \"yard\", \"grid\": \"world\", \"min\": [-4, 0, -12], \"max\": [4, 4, 2], \"cells\": [8, 4, 14] }\n"
    "  ]\n"
    "}\n";

static char err_text[8192];

/* Runs brume preview with the NULL-terminated arguments; stderr goes to err_text. */
static int run_cmd(const char *first, ...)
{
    va_list ap;
    va_start(ap, first);
    int rc = run_command_v(brm_cmd_preview, "preview", "stderr.txt", err_text, sizeof err_text, first, ap);
    va_end(ap);
    return rc;
}

static bool exists(const char *p)
{
    struct stat st;
    return stat(p, &st) == 0;
}

static void preview_command_should_write_both_pictures_and_report_errors(void **state)
{
    (void)state;
    char dir[256], cwd[4096];
    path_in_tmp(dir, sizeof dir, "cmd");
    assert_int_equal(mkdir(dir, 0755), 0);
    assert_non_null(getcwd(cwd, sizeof cwd));
    assert_int_equal(chdir(dir), 0);
    FILE *f = fopen("lane.json", "wb");
    assert_non_null(f);
    fputs(SCENE_JSON, f);
    assert_int_equal(fclose(f), 0);
    brm_scene *s = NULL;
    brm_diag d;
    brm_diag_init(&d);
    assert_int_equal(brm_scene_load("lane.json", &s, &d), BRM_OK);
    /* Bake where brume bake puts a single scene's volumes: out/<scene name>/. */
    assert_int_equal(brm_mkdirs("out/lane", &d), BRM_OK);
    brm_bake_opts bo;
    memset(&bo, 0, sizeof bo);
    bo.threads = 2;
    assert_int_equal(brm_bake_target(s, 0, &bo, "out/lane/intro.brv", NULL, &d), BRM_OK);
    assert_int_equal(brm_bake_target(s, 1, &bo, "out/lane/yard.brv", NULL, &d), BRM_OK);
    brm_scene_free(s);

    /* A frustum target from its own camera, the default volume, both pictures. */
    assert_int_equal(run_cmd("lane.json", "--target", "intro", "-o", "intro.ppm", "--width", "64", "-j", "2", NULL), 0);
    f = fopen("intro.ppm", "rb");
    assert_non_null(f);
    char head[16];
    /* 64 / 1.7778 = 36 rows. Source: Netpbm ppm(5) header. */
    assert_int_equal(fread(head, 1, 13, f), 13);
    head[13] = '\0';
    assert_string_equal(head, "P6\n64 36\n255\n");
    fclose(f);
    assert_true(exists("intro-nofog.ppm"));
    assert_int_equal(run_cmd("lane.json", "--target", "yard", "-o", "yard.ppm", "--width", "32", "--from", "0,1.6,2",
                             "--look-at", "0,1,-8", "--fov", "45", "--exposure", "-8", "--no-fog-beside", NULL),
                     0);
    assert_true(exists("yard.ppm"));
    assert_false(exists("yard-nofog.ppm"));

    /* Unknown target: exit 2, the targets listed. */
    assert_int_equal(run_cmd("lane.json", "--target", "nope", "-o", "x.ppm", NULL), 2);
    assert_non_null(strstr(err_text, "the targets are: intro, yard"));
    /* A volume that is not there: exit 3 and what to do. */
    assert_int_equal(run_cmd("lane.json", "--target", "intro", "-o", "x.ppm", "--volume", "none.brv", NULL), 3);
    assert_non_null(strstr(err_text, "none.brv"));
    assert_non_null(strstr(err_text, "bake it first: brume bake lane.json"));
    /* Another target's volume: exit 1, the mismatch named, nothing written. */
    assert_int_equal(run_cmd("lane.json", "--target", "intro", "-o", "x.ppm", "--volume", "out/lane/yard.brv", NULL), 1);
    assert_non_null(strstr(err_text, "does not match"));
    assert_false(exists("x.ppm"));
    /* Cameras: world targets need one, frustum targets refuse one. */
    assert_int_equal(run_cmd("lane.json", "--target", "yard", "-o", "x.ppm", NULL), 2);
    assert_non_null(strstr(err_text, "--from"));
    assert_int_equal(run_cmd("lane.json", "--target", "intro", "-o", "x.ppm", "--from", "0,1,2", "--look-at", "0,1,0", NULL), 2);
    /* Bad flags. */
    assert_int_equal(run_cmd("lane.json", "--target", "intro", "-o", "x.ppm", "--width", "0", NULL), 2);
    assert_int_equal(run_cmd("lane.json", "--target", "intro", "-o", "x.ppm", "--exposure", "bright", NULL), 2);
    assert_int_equal(run_cmd("lane.json", "--target", "intro", "-o", "x.png", NULL), 2);
    assert_int_equal(run_cmd("lane.json", "--target", "yard", "-o", "x.ppm", "--from", "1,2", "--look-at", "0,0,0", NULL), 2);
    assert_non_null(strstr(err_text, "--from '1,2'"));
    assert_int_equal(run_cmd("lane.json", "--target", "intro", "-o", "x.ppm", "-j", "0", NULL), 2);
    assert_int_equal(run_cmd("lane.json", "-o", "x.ppm", NULL), 2);
    assert_int_equal(run_cmd("lane.json", "--target", "intro", "-o", "x.ppm", "--bogus", NULL), 2);
    assert_false(exists("x.ppm"));
    /* A scene that does not load: exit 1, the file named. */
    f = fopen("bad.json", "wb");
    fputs("{ \"brume\": 1, ", f);
    fclose(f);
    assert_int_equal(run_cmd("bad.json", "--target", "intro", "-o", "x.ppm", NULL), 1);
    assert_non_null(strstr(err_text, "bad.json"));
    assert_int_equal(chdir(cwd), 0);
}

static int cleanup(void **state)
{
    (void)state;
    if (tmp_dir[0]) {
        char cmd[128];
        snprintf(cmd, sizeof cmd, "rm -rf '%s'", tmp_dir);
        if (system(cmd) != 0) return 1;
    }
    return 0;
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(preview_should_equal_plain_shading_when_scene_has_no_media),
        cmocka_unit_test(preview_should_shade_a_wall_by_lambert_with_sky),
        cmocka_unit_test(preview_should_light_open_surfaces_by_the_sky_gradient),
        cmocka_unit_test(preview_should_estimate_the_sky_under_a_wall_by_its_view_factor),
        cmocka_unit_test(preview_frustum_should_match_beer_lambert_composite_at_wall),
        cmocka_unit_test(preview_world_should_match_beer_lambert_composite_at_wall),
        cmocka_unit_test(preview_should_give_the_same_pixels_whatever_the_thread_count),
        cmocka_unit_test(preview_encode_should_apply_exposure_tone_and_srgb),
        cmocka_unit_test(preview_should_draw_probe_spheres_shaded_by_their_irradiance),
        cmocka_unit_test(preview_should_refuse_a_volume_that_does_not_match_the_target),
        cmocka_unit_test(preview_should_ask_for_a_camera_only_where_one_is_needed),
        cmocka_unit_test(preview_beside_path_should_put_the_suffix_before_ppm),
        cmocka_unit_test(preview_command_should_write_both_pictures_and_report_errors),
    };
    return cmocka_run_group_tests_name("view_preview", tests, NULL, cleanup);
}
