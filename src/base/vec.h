/* Small 3-vector math used by every stage. Doubles throughout: the scene is in metres and
 * the bake accumulates many small terms, so double keeps the physics checks tight. */
#ifndef BRM_VEC_H
#define BRM_VEC_H

#include <math.h>

typedef struct brm_vec3 {
    double x, y, z;
} brm_vec3;

typedef struct brm_aabb {
    brm_vec3 min, max;
} brm_aabb;

#define BRM_PI 3.14159265358979323846

static inline brm_vec3 brm_v3(double x, double y, double z) { brm_vec3 r = {x, y, z}; return r; }
static inline brm_vec3 brm_add(brm_vec3 a, brm_vec3 b) { return brm_v3(a.x + b.x, a.y + b.y, a.z + b.z); }
static inline brm_vec3 brm_sub(brm_vec3 a, brm_vec3 b) { return brm_v3(a.x - b.x, a.y - b.y, a.z - b.z); }
static inline brm_vec3 brm_mul(brm_vec3 a, brm_vec3 b) { return brm_v3(a.x * b.x, a.y * b.y, a.z * b.z); }
static inline brm_vec3 brm_scale(brm_vec3 a, double s) { return brm_v3(a.x * s, a.y * s, a.z * s); }
static inline brm_vec3 brm_madd(brm_vec3 a, brm_vec3 b, double s) { return brm_v3(a.x + b.x * s, a.y + b.y * s, a.z + b.z * s); }
static inline double brm_dot(brm_vec3 a, brm_vec3 b) { return a.x * b.x + a.y * b.y + a.z * b.z; }
static inline brm_vec3 brm_cross(brm_vec3 a, brm_vec3 b)
{
    return brm_v3(a.y * b.z - a.z * b.y, a.z * b.x - a.x * b.z, a.x * b.y - a.y * b.x);
}
static inline double brm_len(brm_vec3 a) { return sqrt(brm_dot(a, a)); }
static inline brm_vec3 brm_norm(brm_vec3 a)
{
    double l = brm_len(a);
    return l > 0.0 ? brm_scale(a, 1.0 / l) : a;
}
static inline brm_vec3 brm_vmin(brm_vec3 a, brm_vec3 b)
{
    return brm_v3(a.x < b.x ? a.x : b.x, a.y < b.y ? a.y : b.y, a.z < b.z ? a.z : b.z);
}
static inline brm_vec3 brm_vmax(brm_vec3 a, brm_vec3 b)
{
    return brm_v3(a.x > b.x ? a.x : b.x, a.y > b.y ? a.y : b.y, a.z > b.z ? a.z : b.z);
}
static inline double brm_vget(brm_vec3 a, int axis) { return axis == 0 ? a.x : axis == 1 ? a.y : a.z; }
static inline double brm_clamp(double x, double lo, double hi) { return x < lo ? lo : x > hi ? hi : x; }

/* smoothstep(a, b, x) = t^2 (3 - 2t), t = clamp((x - a)/(b - a), 0, 1), as SPEC.md defines it. */
static inline double brm_smoothstep(double a, double b, double x)
{
    double t = brm_clamp((x - a) / (b - a), 0.0, 1.0);
    return t * t * (3.0 - 2.0 * t);
}

static inline brm_aabb brm_aabb_empty(void)
{
    brm_aabb b = {{HUGE_VAL, HUGE_VAL, HUGE_VAL}, {-HUGE_VAL, -HUGE_VAL, -HUGE_VAL}};
    return b;
}
static inline void brm_aabb_grow(brm_aabb *b, brm_vec3 p)
{
    b->min = brm_vmin(b->min, p);
    b->max = brm_vmax(b->max, p);
}
static inline void brm_aabb_union(brm_aabb *b, brm_aabb o)
{
    b->min = brm_vmin(b->min, o.min);
    b->max = brm_vmax(b->max, o.max);
}
static inline int brm_aabb_contains(brm_aabb b, brm_vec3 p)
{
    return p.x >= b.min.x && p.x <= b.max.x && p.y >= b.min.y && p.y <= b.max.y && p.z >= b.min.z &&
           p.z <= b.max.z;
}
static inline int brm_aabb_overlaps(brm_aabb a, brm_aabb b)
{
    return a.min.x <= b.max.x && a.max.x >= b.min.x && a.min.y <= b.max.y && a.max.y >= b.min.y &&
           a.min.z <= b.max.z && a.max.z >= b.min.z;
}

/* Ray against box (slab method). Returns 1 and the parametric interval [*t0, *t1] clipped to
 * [tmin, tmax] when the ray p + t·d meets the box. inv_d may hold infinities. */
static inline int brm_ray_aabb(brm_vec3 p, brm_vec3 inv_d, brm_aabb b, double tmin, double tmax, double *t0,
                               double *t1)
{
    for (int a = 0; a < 3; a++) {
        double o = brm_vget(p, a), id = brm_vget(inv_d, a);
        double lo = (brm_vget(b.min, a) - o) * id, hi = (brm_vget(b.max, a) - o) * id;
        if (lo != lo) lo = -HUGE_VAL; /* 0 * inf on the slab plane */
        if (hi != hi) hi = HUGE_VAL;
        if (lo > hi) { double t = lo; lo = hi; hi = t; }
        if (lo > tmin) tmin = lo;
        if (hi < tmax) tmax = hi;
        if (tmin > tmax) return 0;
    }
    *t0 = tmin;
    *t1 = tmax;
    return 1;
}

#endif
