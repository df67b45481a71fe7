/* Tests of the ray caster (src/voxel/bvh.c): closed forms for the primitive tests, and the
 * tree against brute force over every primitive. */
#include "check.h"
#include "fixture.h"
#include "voxel/bvh.h"

/* Brute force: every primitive, the same primitive tests and the same tie rule (lowest
 * triangle index, then spheres by object) as the tree. */
static int brute_intersect(const brm_scene *s, brm_vec3 o, brm_vec3 d, double tmin, double tmax, double *bt,
                           uint32_t *btri, uint32_t *bobj)
{
    int found = 0;
    for (uint32_t i = 0; i < s->tri_count; i++) {
        double t;
        double lim = found ? nextafter(*bt, HUGE_VAL) : tmax;
        if (brm_ray_triangle(o, d, s->tris[i].v, tmin, lim, &t, NULL) && (!found || t < *bt)) {
            *bt = t;
            *btri = i;
            *bobj = s->tris[i].object;
            found = 1;
        }
    }
    for (uint32_t i = 0; i < s->object_count; i++) {
        const brm_object *ob = &s->objects[i];
        if (ob->shape != BRM_SHAPE_SPHERE) continue;
        double t;
        if (brm_ray_sphere(o, d, ob->center, ob->radius, tmin, found ? *bt : tmax, &t, NULL)) {
            *bt = t;
            *btri = UINT32_MAX;
            *bobj = i;
            found = 1;
        }
    }
    return found;
}

static void build_mixed(fx_scene *f, uint64_t *rng)
{
    fx_init(f);
    /* A soup of 3000 random small triangles in [-10, 10]³, a few spheres, a box and a closed
     * triangulated sphere: enough depth for the tree to matter. */
    uint32_t soup = fx_object(f, BRM_SHAPE_MESH);
    f->s.objects[soup].closed = false;
    for (int i = 0; i < 3000; i++) {
        brm_vec3 a = fx_point(rng, -10, 10);
        fx_tri(f, soup, a, brm_add(a, fx_point(rng, -1.5, 1.5)), brm_add(a, fx_point(rng, -1.5, 1.5)));
    }
    for (int i = 0; i < 6; i++) fx_sphere(f, fx_point(rng, -8, 8), fx_range(rng, 1.0, 3.0));
    fx_box(f, brm_v3(-3, -1, 2), brm_v3(1, 4, 5));
    fx_uv_sphere(f, brm_v3(4, 4, -4), 2.5, 24);
}

static void bvh_should_match_brute_force_on_random_rays(void **state)
{
    (void)state;
    uint64_t rng = 12345;
    fx_scene f;
    build_mixed(&f, &rng);
    brm_bvh *b = NULL;
    brm_diag d;
    brm_diag_init(&d);
    assert_int_equal(brm_bvh_build(&f.s, &b, &d), BRM_OK);
    int hits = 0, sphere_hits = 0, limited = 0;
    for (int r = 0; r < 6000; r++) {
        brm_vec3 o = fx_point(&rng, -11, 11), dir = fx_dir(&rng);
        double tmax = (r % 3 == 0) ? fx_range(&rng, 0.5, 10) : HUGE_VAL;
        double tmin = (r % 5 == 0) ? fx_range(&rng, 0.0, 2.0) : 0.0;
        brm_hit h;
        double bt = 0;
        uint32_t btri = 0, bobj = 0;
        int got = brm_bvh_intersect(b, o, dir, tmin, tmax, &h);
        int want = brute_intersect(&f.s, o, dir, tmin, tmax, &bt, &btri, &bobj);
        assert_int_equal(got, want);
        /* Any-hit agrees with closest-hit over the same interval. */
        assert_int_equal(brm_bvh_occluded(b, o, dir, tmin, tmax), want);
        if (!want) continue;
        hits++;
        if (tmax < HUGE_VAL) limited++;
        assert_true(h.t == bt);
        assert_int_equal(h.tri, btri);
        assert_int_equal(h.object, bobj);
        if (btri == UINT32_MAX) sphere_hits++;
        /* The normal faces against the ray and is unit length. */
        assert_true(brm_dot(h.normal, dir) <= 0.0);
        assert_near(brm_len(h.normal), 1.0, 1e-12, 0);
        /* Nothing lies strictly before the closest hit. */
        assert_false(brm_bvh_occluded(b, o, dir, tmin, bt));
    }
    /* The sample is not trivial: most rays hit, spheres and short rays included. */
    assert_true(hits > 2500);
    assert_true(sphere_hits > 200);
    assert_true(limited > 600);
    brm_bvh_free(b);
    fx_free(&f);
}

/* The tree's traversal (both children's boxes tested at once) against the reference one (one
 * box at a time): the same boolean for every any-hit ray and the same closest hit, to the
 * bit, on rays chosen to sit on the boundaries where rounding decides: through vertices and
 * edges, starting on a surface, grazing a triangle's plane, axis-aligned along box faces, and
 * with tmin or tmax at a hit's distance. Same-answer check, no outside source needed. */
static void same_hit(const brm_bvh *b, brm_vec3 o, brm_vec3 d, double tmin, double tmax, int *blocked)
{
    brm_hit h1, h2;
    int a = brm_bvh_intersect(b, o, d, tmin, tmax, &h1);
    int c = brm_bvh_intersect_reference(b, o, d, tmin, tmax, &h2);
    assert_int_equal(a, c);
    if (a) {
        assert_true(h1.t == h2.t);
        assert_int_equal(h1.tri, h2.tri);
        assert_int_equal(h1.object, h2.object);
        assert_int_equal(h1.back_face, h2.back_face);
        assert_true(h1.normal.x == h2.normal.x && h1.normal.y == h2.normal.y && h1.normal.z == h2.normal.z);
    }
    int occ = brm_bvh_occluded(b, o, d, tmin, tmax);
    assert_int_equal(occ, brm_bvh_occluded_reference(b, o, d, tmin, tmax));
    /* A hint changes no answer: none, the leaf the last blocked ray left (of another ray: the
     * case the hint is for), numbers that may or may not name a leaf, and the leaf this very
     * ray is blocked by, which a blocked ray must store. */
    static uint32_t carried = BRM_BVH_NO_HINT;
    static uint64_t hr = 99;
    uint32_t h = BRM_BVH_NO_HINT;
    assert_int_equal(brm_bvh_occluded_hint(b, o, d, tmin, tmax, &h), occ);
    if (occ) {
        assert_true(h != BRM_BVH_NO_HINT);
        uint32_t again = h;
        assert_int_equal(brm_bvh_occluded_hint(b, o, d, tmin, tmax, &again), 1);
        assert_int_equal(again, h);    /* found in the hinted leaf: left as it was */
        /* The hinted leaf's blocker lies at or past the closest hit: short of that, the ray is
         * open, and the hint must not say otherwise. */
        double short_of = nextafter(h1.t, -HUGE_VAL);
        assert_true(a);
        if (short_of > tmin) {
            again = h;
            assert_int_equal(brm_bvh_occluded_hint(b, o, d, tmin, short_of, &again),
                             brm_bvh_occluded(b, o, d, tmin, short_of));
        }
    } else {
        assert_true(h == BRM_BVH_NO_HINT);
    }
    assert_int_equal(brm_bvh_occluded_hint(b, o, d, tmin, tmax, &carried), occ);
    for (int k = 0; k < 3; k++) {
        hr = hr * 6364136223846793005ull + 1442695040888963407ull;
        uint32_t g = (uint32_t)(hr >> 33) % (k == 2 ? UINT32_MAX : 4096u);
        assert_int_equal(brm_bvh_occluded_hint(b, o, d, tmin, tmax, &g), occ);
    }
    *blocked = occ;
}

static brm_vec3 tri_point(const brm_scene *s, uint32_t t, double u, double w)
{
    const brm_vec3 *v = s->tris[t].v;
    return brm_add(v[0], brm_add(brm_scale(brm_sub(v[1], v[0]), u), brm_scale(brm_sub(v[2], v[0]), w)));
}

static void traversal_should_answer_as_the_reference_on_boundary_rays(void **state)
{
    (void)state;
    uint64_t rng = 777;
    fx_scene f;
    build_mixed(&f, &rng);
    fx_box(&f, brm_v3(-6, -6, -6), brm_v3(-4, -2, 3));
    brm_bvh *b = NULL;
    assert_int_equal(brm_bvh_build(&f.s, &b, NULL), BRM_OK);
    const brm_scene *s = &f.s;
    int blocked_count[6] = {0}, open_count[6] = {0};
    for (int r = 0; r < 24000; r++) {
        int fam = r % 6;
        uint32_t t = (uint32_t)(fx_unif(&rng) * s->tri_count) % s->tri_count;
        brm_vec3 o, d;
        double tmin = 0.0, tmax = HUGE_VAL;
        switch (fam) {
        case 0: /* random, with random limits */
            o = fx_point(&rng, -12, 12);
            d = fx_dir(&rng);
            if (r % 4 == 0) tmax = fx_range(&rng, 0.1, 8);
            if (r % 5 == 0) tmin = fx_range(&rng, 0.0, 3.0);
            break;
        case 1: { /* through a vertex or an edge's point of a triangle */
            brm_vec3 target = (r & 1) ? s->tris[t].v[r % 3] : tri_point(s, t, fx_unif(&rng), 0.0);
            o = fx_point(&rng, -12, 12);
            d = brm_norm(brm_sub(target, o));
            /* Stopping short of the target, at it or past it. */
            if (r % 4 == 1) tmax = brm_len(brm_sub(target, o)) * fx_range(&rng, 0.0, 1.5);
            break;
        }
        case 2: /* leaving a surface point: tmin 0 and a small epsilon */
            o = tri_point(s, t, 0.3 * fx_unif(&rng), 0.3 * fx_unif(&rng));
            d = fx_dir(&rng);
            tmin = (r & 1) ? 1e-9 : 0.0;
            break;
        case 3: { /* grazing: in the triangle's plane, along a mix of its edges */
            const brm_vec3 *v = s->tris[t].v;
            o = tri_point(s, t, fx_range(&rng, -0.5, 1.0), fx_range(&rng, -0.5, 1.0));
            double a = fx_range(&rng, -1, 1);
            d = brm_norm(brm_add(brm_scale(brm_sub(v[1], v[0]), a), brm_sub(v[2], v[0])));
            break;
        }
        case 4: { /* axis-aligned, from points on the box's face planes (zero components) */
            int ax = (int)(fx_unif(&rng) * 3) % 3;
            double sgn = (r & 1) ? 1.0 : -1.0;
            d = brm_v3(ax == 0 ? sgn : 0.0, ax == 1 ? sgn : 0.0, ax == 2 ? sgn : 0.0);
            o = brm_v3(fx_range(&rng, -7, -3), fx_range(&rng, -7, -1), fx_range(&rng, -7, 4));
            int face = (int)(fx_unif(&rng) * 3) % 3;
            double planes[3][2] = {{-6, -4}, {-6, -2}, {-6, 3}};
            double pv = planes[face][r & 1];
            o = brm_v3(face == 0 ? pv : o.x, face == 1 ? pv : o.y, face == 2 ? pv : o.z);
            break;
        }
        default: { /* limits at a hit's distance: tmax at it or just past it, tmin at it */
            o = fx_point(&rng, -12, 12);
            d = fx_dir(&rng);
            brm_hit h;
            if (brm_bvh_intersect_reference(b, o, d, 0.0, HUGE_VAL, &h)) {
                int k = r % 3;
                if (k == 0) tmax = h.t;
                else if (k == 1) tmax = nextafter(h.t, HUGE_VAL);
                else tmin = h.t;
            }
            break;
        }
        }
        int blocked;
        same_hit(b, o, d, tmin, tmax, &blocked);
        if (blocked) blocked_count[fam]++;
        else open_count[fam]++;
    }
    /* Every family holds both answers, so neither side of the comparison is trivial. */
    for (int fam = 0; fam < 6; fam++) {
        print_message("family %d: %d blocked, %d open\n", fam, blocked_count[fam], open_count[fam]);
        assert_true(blocked_count[fam] > 200);
        assert_true(open_count[fam] > 200);
    }
    brm_bvh_free(b);
    fx_free(&f);
}

static void ray_triangle_should_give_plane_distance_and_winding(void **state)
{
    (void)state;
    /* Source: closed form — the ray (0.2, 0.3, 5) + t·(0, 0, −1) meets the plane z = 1 at t = 4;
     * the point (0.2, 0.3) is inside the triangle (0,0) (1,0) (0,1) since 0.2 + 0.3 < 1. */
    brm_vec3 v[3] = {{0, 0, 1}, {1, 0, 1}, {0, 1, 1}};
    double t = 0;
    int ne = -1;
    assert_true(brm_ray_triangle(brm_v3(0.2, 0.3, 5), brm_v3(0, 0, -1), v, 0, HUGE_VAL, &t, &ne));
    assert_near(t, 4.0, 1e-15, 0);
    assert_int_equal(ne, 0);
    /* Outside: 0.6 + 0.6 > 1. */
    assert_false(brm_ray_triangle(brm_v3(0.6, 0.6, 5), brm_v3(0, 0, -1), v, 0, HUGE_VAL, &t, NULL));
    /* The open interval: t = 4 is excluded by tmax = 4 and by tmin = 4. */
    assert_false(brm_ray_triangle(brm_v3(0.2, 0.3, 5), brm_v3(0, 0, -1), v, 0, 4.0, &t, NULL));
    assert_false(brm_ray_triangle(brm_v3(0.2, 0.3, 5), brm_v3(0, 0, -1), v, 4.0, HUGE_VAL, &t, NULL));
    /* Parallel to the plane: no hit. */
    assert_false(brm_ray_triangle(brm_v3(0.2, 0.3, 5), brm_v3(1, 0, 0), v, 0, HUGE_VAL, &t, NULL));

    /* Winding: n = (v1 − v0) × (v2 − v0) = +z here; a ray going −z sees the front. */
    fx_scene f;
    fx_init(&f);
    uint32_t o = fx_object(&f, BRM_SHAPE_MESH);
    fx_tri(&f, o, v[0], v[1], v[2]);
    brm_bvh *b = NULL;
    assert_int_equal(brm_bvh_build(&f.s, &b, NULL), BRM_OK);
    brm_hit h;
    assert_true(brm_bvh_intersect(b, brm_v3(0.2, 0.3, 5), brm_v3(0, 0, -1), 0, HUGE_VAL, &h));
    assert_false(h.back_face);
    assert_near(h.normal.z, 1.0, 1e-15, 0);
    assert_true(brm_bvh_intersect(b, brm_v3(0.2, 0.3, -5), brm_v3(0, 0, 1), 0, HUGE_VAL, &h));
    assert_true(h.back_face);
    assert_near(h.normal.z, -1.0, 1e-15, 0);
    assert_near(h.t, 6.0, 1e-15, 0);
    assert_int_equal(h.tri, 0);
    assert_int_equal(h.object, o);
    brm_bvh_free(b);
    fx_free(&f);
}

static void ray_from_inside_sphere_should_report_back_face(void **state)
{
    (void)state;
    fx_scene f;
    fx_init(&f);
    brm_vec3 c = brm_v3(1, -2, 3);
    double r = 2.5;
    uint32_t o = fx_sphere(&f, c, r);
    brm_bvh *b = NULL;
    assert_int_equal(brm_bvh_build(&f.s, &b, NULL), BRM_OK);
    uint64_t rng = 7;
    for (int i = 0; i < 200; i++) {
        /* Source: closed form — from the centre every ray leaves at t = r; from an inner point
         * p the exit is t = −b + sqrt(b² − (|p − c|² − r²)), b = (p − c)·d. */
        brm_vec3 dir = fx_dir(&rng);
        brm_hit h;
        assert_true(brm_bvh_intersect(b, c, dir, 0, HUGE_VAL, &h));
        assert_near(h.t, r, 1e-12, 0);
        assert_true(h.back_face);
        assert_int_equal(h.object, o);
        assert_int_equal(h.tri, UINT32_MAX);
        assert_true(brm_dot(h.normal, dir) < 0.0);
        brm_vec3 p = brm_add(c, brm_scale(fx_dir(&rng), 0.9 * r * fx_unif(&rng)));
        brm_vec3 pc = brm_sub(p, c);
        double bb = brm_dot(pc, dir);
        double want = -bb + sqrt(bb * bb - (brm_dot(pc, pc) - r * r));
        assert_true(brm_bvh_intersect(b, p, dir, 0, HUGE_VAL, &h));
        assert_near(h.t, want, 1e-12, 0);
        assert_true(h.back_face);
    }
    /* From outside, aimed at the centre: front face at distance |p − c| − r. */
    brm_hit h;
    assert_true(brm_bvh_intersect(b, brm_v3(1, -2, 13), brm_v3(0, 0, -1), 0, HUGE_VAL, &h));
    assert_near(h.t, 10 - r, 1e-12, 0);
    assert_false(h.back_face);
    assert_near(h.normal.z, 1.0, 1e-12, 0);
    brm_bvh_free(b);
    fx_free(&f);
}

static void rays_through_shared_edges_and_vertices_should_hit(void **state)
{
    (void)state;
    /* A closed box mesh: rays aimed exactly at every vertex and every edge midpoint from
     * outside must hit (a leak between the two triangles of an edge would let light through). */
    fx_scene f;
    fx_init(&f);
    brm_vec3 lo = brm_v3(-1.3, -0.7, 0.1), hi = brm_v3(2.1, 1.9, 3.7);
    fx_box_mesh(&f, lo, hi);
    brm_bvh *b = NULL;
    assert_int_equal(brm_bvh_build(&f.s, &b, NULL), BRM_OK);
    brm_vec3 centre = brm_scale(brm_add(lo, hi), 0.5);
    int tested = 0;
    for (int i = 0; i < 8; i++) {
        for (int j = i; j < 8; j++) {
            int diff = i ^ j;
            if (diff != 0 && diff != 1 && diff != 2 && diff != 4) continue;   /* vertex or edge */
            brm_vec3 target = brm_scale(brm_add(fx_corner(lo, hi, i), fx_corner(lo, hi, j)), 0.5);
            /* From outside, along the line from the box centre through the target. */
            brm_vec3 from = brm_add(target, brm_scale(brm_sub(target, centre), 1.7));
            brm_vec3 dir = brm_norm(brm_sub(target, from));
            brm_hit h;
            assert_true(brm_bvh_intersect(b, from, dir, 0, HUGE_VAL, &h));
            assert_near(h.t, brm_len(brm_sub(target, from)), 1e-9, 1e-12);
            assert_false(h.back_face);
            tested++;
        }
    }
    assert_int_equal(tested, 8 + 12);
    /* Rays along the diagonal shared by the two triangles of each face, hitting head-on. */
    uint64_t rng = 99;
    for (int n = 0; n < 500; n++) {
        double s = fx_unif(&rng);
        /* +z face: triangles (4,5,7) and (4,7,6) share the diagonal 4–7. */
        brm_vec3 p = brm_add(fx_corner(lo, hi, 4), brm_scale(brm_sub(fx_corner(lo, hi, 7), fx_corner(lo, hi, 4)), s));
        brm_hit h;
        assert_true(brm_bvh_intersect(b, brm_add(p, brm_v3(0, 0, 5)), brm_v3(0, 0, -1), 0, HUGE_VAL, &h));
        assert_near(h.t, 5.0, 1e-12, 0);
        assert_false(h.back_face);
    }
    brm_bvh_free(b);
    fx_free(&f);
}

static void bvh_should_hit_at_box_edges_that_floats_cannot_hold(void **state)
{
    (void)state;
    /* Tiles whose edges lie at decimal coordinates no float holds exactly (0.1 rounds up to
     * 0.10000000149 in float): rays straight down within 1e-12 m inside a tile's edge must hit
     * it, so the tree's float boxes have to round outward. Every hit is checked against brute
     * force. */
    fx_scene f;
    fx_init(&f);
    uint32_t o = fx_object(&f, BRM_SHAPE_MESH);
    for (int i = 0; i < 40; i++)
        for (int k = 0; k < 4; k++) {
            double x0 = 0.1 + 0.3 * i, x1 = x0 + 0.2, z0 = 0.7 + 1.1 * k, z1 = z0 + 0.9, y = 0.3 + 0.01 * k;
            fx_tri(&f, o, brm_v3(x0, y, z0), brm_v3(x0, y, z1), brm_v3(x1, y, z1));
            fx_tri(&f, o, brm_v3(x0, y, z0), brm_v3(x1, y, z1), brm_v3(x1, y, z0));
        }
    brm_bvh *b = NULL;
    assert_int_equal(brm_bvh_build(&f.s, &b, NULL), BRM_OK);
    int hits = 0;
    for (int i = 0; i < 40; i++)
        for (int k = 0; k < 4; k++)
            for (int e = 0; e < 4; e++) {
                double x0 = 0.1 + 0.3 * i, x1 = x0 + 0.2, z0 = 0.7 + 1.1 * k, z1 = z0 + 0.9;
                brm_vec3 p = e == 0 ? brm_v3(x0 + 1e-12, 5, z0 + 0.45) : e == 1 ? brm_v3(x1 - 1e-12, 5, z0 + 0.45)
                           : e == 2 ? brm_v3(x0 + 0.1, 5, z0 + 1e-12) : brm_v3(x0 + 0.1, 5, z1 - 1e-12);
                brm_hit h;
                double bt = 0;
                uint32_t btri = 0, bobj = 0;
                assert_int_equal(brute_intersect(&f.s, p, brm_v3(0, -1, 0), 0, HUGE_VAL, &bt, &btri, &bobj), 1);
                assert_int_equal(brm_bvh_intersect(b, p, brm_v3(0, -1, 0), 0, HUGE_VAL, &h), 1);
                assert_true(h.t == bt);
                assert_int_equal(h.tri, btri);
                assert_true(brm_bvh_occluded(b, p, brm_v3(0, -1, 0), 0, HUGE_VAL));
                hits++;
            }
    assert_int_equal(hits, 640);
    brm_bvh_free(b);
    fx_free(&f);
}

static void bvh_should_handle_empty_and_degenerate_scenes(void **state)
{
    (void)state;
    fx_scene f;
    fx_init(&f);
    brm_bvh *b = NULL;
    assert_int_equal(brm_bvh_build(&f.s, &b, NULL), BRM_OK);
    brm_hit h;
    assert_false(brm_bvh_intersect(b, brm_v3(0, 0, 0), brm_v3(1, 0, 0), 0, HUGE_VAL, &h));
    assert_false(brm_bvh_occluded(b, brm_v3(0, 0, 0), brm_v3(1, 0, 0), 0, HUGE_VAL));
    brm_bvh_free(b);
    /* 200 copies of one triangle: all centroids coincide, SAH cannot split; the lowest index
     * wins the tie. */
    uint32_t o = fx_object(&f, BRM_SHAPE_MESH);
    for (int i = 0; i < 200; i++) fx_tri(&f, o, brm_v3(0, 0, 0), brm_v3(1, 0, 0), brm_v3(0, 1, 0));
    assert_int_equal(brm_bvh_build(&f.s, &b, NULL), BRM_OK);
    assert_true(brm_bvh_intersect(b, brm_v3(0.25, 0.25, 1), brm_v3(0, 0, -1), 0, HUGE_VAL, &h));
    assert_int_equal(h.tri, 0);
    assert_near(h.t, 1.0, 1e-15, 0);
    brm_bvh_free(b);
    assert_true(brm_bvh_memory(&f.s) > 200 * sizeof(brm_tri));
    fx_free(&f);
}

typedef struct count_ctx {
    int n, back;
} count_ctx;

static void count_visit(void *ctx, const brm_hit *h, int near_edge)
{
    count_ctx *c = ctx;
    (void)near_edge;
    c->n++;
    c->back += h->back_face;
}

static void all_hits_should_cross_closed_shapes_twice(void **state)
{
    (void)state;
    fx_scene f;
    fx_init(&f);
    fx_sphere(&f, brm_v3(0, 0, 0), 1.0);
    fx_uv_sphere(&f, brm_v3(5, 0, 0), 1.0, 16);
    fx_box(&f, brm_v3(9, -1, -1), brm_v3(11, 1, 1));
    brm_bvh *b = NULL;
    assert_int_equal(brm_bvh_build(&f.s, &b, NULL), BRM_OK);
    /* A line through all three closed shapes, off their symmetry planes: two crossings each,
     * one entering (front) and one leaving (back). */
    count_ctx c = {0, 0};
    brm_bvh_all_hits(b, brm_v3(-5, 0.113, 0.071), brm_v3(1, 0, 0), 0, HUGE_VAL, count_visit, &c);
    assert_int_equal(c.n, 6);
    assert_int_equal(c.back, 3);
    /* The subset over the box only. */
    brm_bvh *bs = NULL;
    uint8_t mask[3] = {0, 0, 1};
    assert_int_equal(brm_bvh_build_subset(&f.s, mask, &bs, NULL), BRM_OK);
    c.n = c.back = 0;
    brm_bvh_all_hits(bs, brm_v3(-5, 0.113, 0.071), brm_v3(1, 0, 0), 0, HUGE_VAL, count_visit, &c);
    assert_int_equal(c.n, 2);
    assert_int_equal(c.back, 1);
    /* From inside the sphere only the exit remains. */
    c.n = c.back = 0;
    brm_bvh_all_hits(b, brm_v3(0, 0.113, 0.071), brm_v3(1, 0, 0), 0, 3.0, count_visit, &c);
    assert_int_equal(c.n, 1);
    assert_int_equal(c.back, 1);
    brm_bvh_free(bs);
    brm_bvh_free(b);
    fx_free(&f);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(ray_triangle_should_give_plane_distance_and_winding),
        cmocka_unit_test(ray_from_inside_sphere_should_report_back_face),
        cmocka_unit_test(bvh_should_match_brute_force_on_random_rays),
        cmocka_unit_test(traversal_should_answer_as_the_reference_on_boundary_rays),
        cmocka_unit_test(rays_through_shared_edges_and_vertices_should_hit),
        cmocka_unit_test(bvh_should_hit_at_box_edges_that_floats_cannot_hold),
        cmocka_unit_test(bvh_should_handle_empty_and_degenerate_scenes),
        cmocka_unit_test(all_hits_should_cross_closed_shapes_twice),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
