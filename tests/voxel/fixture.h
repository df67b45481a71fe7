/* Hand-built scenes for the voxel room's tests (the tests do not depend on the JSON loader). */
#ifndef BRM_TEST_VOXEL_FIXTURE_H
#define BRM_TEST_VOXEL_FIXTURE_H

#include <stdlib.h>
#include <string.h>

#include "scene/scene.h"

/* splitmix64: a fixed, portable sequence, so every run tests the same cases. */
static inline uint64_t fx_next(uint64_t *s)
{
    uint64_t z = (*s += 0x9E3779B97F4A7C15ull);
    z = (z ^ (z >> 30)) * 0xBF58476D1CE4E5B9ull;
    z = (z ^ (z >> 27)) * 0x94D049BB133111EBull;
    return z ^ (z >> 31);
}
static inline double fx_unif(uint64_t *s) { return (double)(fx_next(s) >> 11) * (1.0 / 9007199254740992.0); }
static inline double fx_range(uint64_t *s, double lo, double hi) { return lo + (hi - lo) * fx_unif(s); }
static inline brm_vec3 fx_point(uint64_t *s, double lo, double hi)
{
    double x = fx_range(s, lo, hi), y = fx_range(s, lo, hi);
    return brm_v3(x, y, fx_range(s, lo, hi));
}
static inline brm_vec3 fx_dir(uint64_t *s)
{
    for (;;) {
        brm_vec3 v = fx_point(s, -1, 1);
        double l = brm_len(v);
        if (l > 1e-3 && l <= 1.0) return brm_scale(v, 1.0 / l);
    }
}

typedef struct fx_scene {
    brm_scene s;
    uint32_t obj_cap, tri_cap;
} fx_scene;

static inline void fx_init(fx_scene *f)
{
    memset(f, 0, sizeof *f);
    f->obj_cap = 64;
    f->tri_cap = 1024;
    f->s.objects = calloc(f->obj_cap, sizeof *f->s.objects);
    f->s.tris = calloc(f->tri_cap, sizeof *f->s.tris);
}

static inline void fx_free(fx_scene *f)
{
    free(f->s.objects);
    free(f->s.tris);
}

static inline uint32_t fx_object(fx_scene *f, brm_shape shape)
{
    if (f->s.object_count == f->obj_cap) {
        f->obj_cap *= 2;
        f->s.objects = realloc(f->s.objects, f->obj_cap * sizeof *f->s.objects);
    }
    uint32_t i = f->s.object_count++;
    brm_object *o = &f->s.objects[i];
    memset(o, 0, sizeof *o);
    o->shape = shape;
    o->albedo = brm_v3(0.5, 0.5, 0.5);
    o->bounds = brm_aabb_empty();
    o->first_tri = f->s.tri_count;
    o->closed = true;
    return i;
}

static inline void fx_tri(fx_scene *f, uint32_t obj, brm_vec3 a, brm_vec3 b, brm_vec3 c)
{
    if (f->s.tri_count == f->tri_cap) {
        f->tri_cap *= 2;
        f->s.tris = realloc(f->s.tris, f->tri_cap * sizeof *f->s.tris);
    }
    brm_tri *t = &f->s.tris[f->s.tri_count++];
    t->v[0] = a;
    t->v[1] = b;
    t->v[2] = c;
    t->object = obj;
    brm_object *o = &f->s.objects[obj];
    o->tri_count++;
    brm_aabb_grow(&o->bounds, a);
    brm_aabb_grow(&o->bounds, b);
    brm_aabb_grow(&o->bounds, c);
}

/* The 8 corners of [lo, hi], bit 0 = x, bit 1 = y, bit 2 = z. */
static inline brm_vec3 fx_corner(brm_vec3 lo, brm_vec3 hi, int i)
{
    return brm_v3(i & 1 ? hi.x : lo.x, i & 2 ? hi.y : lo.y, i & 4 ? hi.z : lo.z);
}

/* Six quads of a box as 12 triangles wound counter-clockwise seen from outside. */
static inline void fx_box_tris(fx_scene *f, uint32_t obj, brm_vec3 lo, brm_vec3 hi)
{
    static const int q[6][4] = {
        {0, 4, 6, 2}, /* -x */ {1, 3, 7, 5}, /* +x */ {0, 1, 5, 4}, /* -y */
        {2, 6, 7, 3}, /* +y */ {0, 2, 3, 1}, /* -z */ {4, 5, 7, 6}, /* +z */
    };
    for (int k = 0; k < 6; k++) {
        brm_vec3 a = fx_corner(lo, hi, q[k][0]), b = fx_corner(lo, hi, q[k][1]);
        brm_vec3 c = fx_corner(lo, hi, q[k][2]), d = fx_corner(lo, hi, q[k][3]);
        fx_tri(f, obj, a, b, c);
        fx_tri(f, obj, a, c, d);
    }
}

static inline uint32_t fx_box(fx_scene *f, brm_vec3 lo, brm_vec3 hi)
{
    uint32_t o = fx_object(f, BRM_SHAPE_BOX);
    fx_box_tris(f, o, lo, hi);
    f->s.objects[o].bounds.min = lo;
    f->s.objects[o].bounds.max = hi;
    return o;
}

/* A closed mesh shaped like a box (its triangles are voxelized as a mesh, not analytically). */
static inline uint32_t fx_box_mesh(fx_scene *f, brm_vec3 lo, brm_vec3 hi)
{
    uint32_t o = fx_object(f, BRM_SHAPE_MESH);
    fx_box_tris(f, o, lo, hi);
    return o;
}

static inline uint32_t fx_sphere(fx_scene *f, brm_vec3 c, double r)
{
    uint32_t o = fx_object(f, BRM_SHAPE_SPHERE);
    brm_object *ob = &f->s.objects[o];
    ob->center = c;
    ob->radius = r;
    ob->bounds.min = brm_sub(c, brm_v3(r, r, r));
    ob->bounds.max = brm_add(c, brm_v3(r, r, r));
    return o;
}

/* A closed triangulated sphere: a UV sphere with `seg` segments and `seg/2` rings, outward
 * counter-clockwise winding. */
static inline uint32_t fx_uv_sphere(fx_scene *f, brm_vec3 c, double r, int seg)
{
    uint32_t o = fx_object(f, BRM_SHAPE_MESH);
    int rings = seg / 2;
    for (int i = 0; i < rings; i++) {
        double t0 = BRM_PI * i / rings, t1 = BRM_PI * (i + 1) / rings;
        for (int j = 0; j < seg; j++) {
            double p0 = 2 * BRM_PI * j / seg, p1 = 2 * BRM_PI * (j + 1) / seg;
#define FX_SP(t, p) brm_add(c, brm_v3(r * sin(t) * cos(p), r * cos(t), -r * sin(t) * sin(p)))
            brm_vec3 a = FX_SP(t0, p0), b = FX_SP(t1, p0), cc = FX_SP(t1, p1), d = FX_SP(t0, p1);
#undef FX_SP
            if (i != 0) fx_tri(f, o, a, b, d);
            if (i != rings - 1) fx_tri(f, o, b, cc, d);
        }
    }
    return o;
}

#endif
