/* Hand-built scenes for the shadow room's tests (no JSON loader involved). */
#ifndef BRM_TEST_SHADOW_FIXTURE_H
#define BRM_TEST_SHADOW_FIXTURE_H

#include <stdlib.h>
#include <string.h>

#include "check.h"
#include "scene/media.h"
#include "scene/scene.h"
#include "shadow/shadow.h"
#include "voxel/bvh.h"

/* splitmix64: the same points on every run. */
static inline uint64_t sf_next(uint64_t *s)
{
    uint64_t z = (*s += 0x9E3779B97F4A7C15ull);
    z = (z ^ (z >> 30)) * 0xBF58476D1CE4E5B9ull;
    z = (z ^ (z >> 27)) * 0x94D049BB133111EBull;
    return z ^ (z >> 31);
}
static inline double sf_unif(uint64_t *s) { return (double)(sf_next(s) >> 11) * (1.0 / 9007199254740992.0); }
static inline brm_vec3 sf_in_box(uint64_t *s, brm_aabb b)
{
    double x = b.min.x + (b.max.x - b.min.x) * sf_unif(s);
    double y = b.min.y + (b.max.y - b.min.y) * sf_unif(s);
    return brm_v3(x, y, b.min.z + (b.max.z - b.min.z) * sf_unif(s));
}

static inline brm_scene *sf_scene(brm_aabb fog)
{
    brm_scene *s = calloc(1, sizeof *s);
    assert_non_null(s);
    s->fog_bounds = fog;
    s->fog_bounds_given = true;
    s->objects = calloc(256, sizeof *s->objects);
    s->tris = calloc(4096, sizeof *s->tris);
    s->lights = calloc(16, sizeof *s->lights);
    s->media = calloc(BRM_MAX_MEDIA, sizeof *s->media);
    assert_true(s->objects && s->tris && s->lights && s->media);
    return s;
}

/* Call once the media are in: the density code needs its tables. */
static inline void sf_ready(brm_scene *s)
{
    brm_diag d;
    brm_diag_init(&d);
    assert_int_equal(brm_media_prepare(s, &d), BRM_OK);
}

static inline uint32_t sf_object(brm_scene *s, brm_shape shape)
{
    assert_true(s->object_count < 256);
    uint32_t i = s->object_count++;
    brm_object *o = &s->objects[i];
    memset(o, 0, sizeof *o);
    o->shape = shape;
    o->albedo = brm_v3(0.5, 0.5, 0.5);
    o->bounds = brm_aabb_empty();
    o->first_tri = s->tri_count;
    o->closed = true;
    return i;
}

static inline void sf_tri(brm_scene *s, uint32_t obj, brm_vec3 a, brm_vec3 b, brm_vec3 c)
{
    assert_true(s->tri_count < 4096);
    brm_tri *t = &s->tris[s->tri_count++];
    t->v[0] = a, t->v[1] = b, t->v[2] = c;
    t->object = obj;
    brm_object *o = &s->objects[obj];
    o->tri_count++;
    brm_aabb_grow(&o->bounds, a);
    brm_aabb_grow(&o->bounds, b);
    brm_aabb_grow(&o->bounds, c);
}

static inline brm_vec3 sf_corner(brm_vec3 lo, brm_vec3 hi, int i)
{
    return brm_v3(i & 1 ? hi.x : lo.x, i & 2 ? hi.y : lo.y, i & 4 ? hi.z : lo.z);
}

/* A box as 12 triangles, counter-clockwise seen from outside. mesh: as an open-or-closed mesh
 * object rather than a box primitive (same triangles). */
static inline uint32_t sf_box(brm_scene *s, brm_vec3 lo, brm_vec3 hi, bool mesh)
{
    static const int q[6][4] = {{0, 4, 6, 2}, {1, 3, 7, 5}, {0, 1, 5, 4}, {2, 6, 7, 3}, {0, 2, 3, 1}, {4, 5, 7, 6}};
    uint32_t o = sf_object(s, mesh ? BRM_SHAPE_MESH : BRM_SHAPE_BOX);
    for (int k = 0; k < 6; k++) {
        brm_vec3 a = sf_corner(lo, hi, q[k][0]), b = sf_corner(lo, hi, q[k][1]);
        brm_vec3 c = sf_corner(lo, hi, q[k][2]), d = sf_corner(lo, hi, q[k][3]);
        sf_tri(s, o, a, b, c);
        sf_tri(s, o, a, c, d);
    }
    return o;
}

static inline uint32_t sf_sphere(brm_scene *s, brm_vec3 c, double r)
{
    uint32_t o = sf_object(s, BRM_SHAPE_SPHERE);
    brm_object *ob = &s->objects[o];
    ob->center = c;
    ob->radius = r;
    ob->bounds.min = brm_sub(c, brm_v3(r, r, r));
    ob->bounds.max = brm_add(c, brm_v3(r, r, r));
    return o;
}

static inline brm_light *sf_light(brm_scene *s, brm_light_type type)
{
    assert_true(s->light_count < 16);
    brm_light *l = &s->lights[s->light_count];
    memset(l, 0, sizeof *l);
    l->type = type;
    l->color = brm_v3(1, 1, 1);
    l->shadow = true;
    l->softness_texels = 1.5;
    l->illuminance_lux = 1000.0;
    l->intensity_cd = 1000.0;
    snprintf(l->json_path, sizeof l->json_path, "lights[%u]", s->light_count);
    s->light_count++;
    return l;
}

static inline brm_light *sf_sun(brm_scene *s, brm_vec3 dir)
{
    brm_light *l = sf_light(s, BRM_LIGHT_DIRECTIONAL);
    l->direction = brm_norm(dir);
    return l;
}

static inline brm_light *sf_point(brm_scene *s, brm_vec3 pos)
{
    brm_light *l = sf_light(s, BRM_LIGHT_POINT);
    l->position = pos;
    return l;
}

static inline brm_light *sf_spot(brm_scene *s, brm_vec3 pos, brm_vec3 dir, double inner, double outer)
{
    brm_light *l = sf_light(s, BRM_LIGHT_SPOT);
    l->position = pos;
    l->direction = brm_norm(dir);
    l->inner_deg = inner, l->outer_deg = outer;
    l->cos_inner = cos(inner * BRM_PI / 180.0), l->cos_outer = cos(outer * BRM_PI / 180.0);
    return l;
}

static inline brm_medium *sf_medium(brm_scene *s, brm_medium_type type, double sigma_t)
{
    assert_true(s->medium_count < BRM_MAX_MEDIA);
    brm_medium *m = &s->media[s->medium_count++];
    memset(m, 0, sizeof *m);
    m->type = type;
    m->sigma_t = sigma_t;
    m->albedo = brm_v3(0.9, 0.9, 0.9);
    m->phase.model = BRM_PHASE_ISOTROPIC;
    return m;
}

static inline brm_shadow_set *sf_build(const brm_scene *s, brm_aabb bounds, double cell, bool reference,
                                       const brm_bvh *bvh, int threads)
{
    brm_shadow_opts o = {bounds, cell, threads, reference, bvh, false, 1.0};
    brm_shadow_set *ss = NULL;
    brm_diag d;
    brm_diag_init(&d);
    brm_status st = brm_shadows_build(s, &o, &ss, &d);
    if (st != BRM_OK) print_error("%s\n", d.message);
    assert_int_equal(st, BRM_OK);
    assert_non_null(ss);
    return ss;
}

static inline brm_bvh *sf_bvh(const brm_scene *s)
{
    brm_bvh *b = NULL;
    brm_diag d;
    brm_diag_init(&d);
    assert_int_equal(brm_bvh_build(s, &b, &d), BRM_OK);
    return b;
}

#endif
