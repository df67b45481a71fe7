/* Private to src/shadow: the per-light views (one orthographic or perspective projection each),
 * their depth maps and optical-depth grids, and the media summary the integrators use.
 * Tests include it to check the pieces one by one. */
#ifndef BRM_SHADOW_INTERNAL_H
#define BRM_SHADOW_INTERNAL_H

#include <stdatomic.h>
#include <stddef.h>
#include <stdint.h>
#include <string.h>

#include "scene/media.h"
#include "shadow/shadow.h"

/* Automatic shadow-map resolution never exceeds this many texels per side (per cube face): a
 * 4096² float map is 64 MiB. A target whose cells are finer than its extent / 4096 gets texels
 * larger than a cell (common practice, no source: the cap keeps memory bounded). */
#define BRM_SHADOW_AUTO_MAX 4096u
#define BRM_SHADOW_AUTO_MAX_CUBE 1024u  /* per face: six 1024² faces are 24 MiB */
#define BRM_SHADOW_MIN_RES 16u
#define BRM_SHADOW_TILE 16u     /* texels per side of a depth-range tile */
#define BRM_SHADOW_MAX_RES 16384u
/* Nodes per optical-depth grid (per view: a point light's six faces get it each): 2 floats
 * each, 4 MiB. */
#define BRM_OD_MAX_NODES (1u << 19)
/* A directional light has one view, not six: four times the nodes (16 MiB). Its columns
 * cross the whole fog, so a coarse lateral spacing flagged cells by the thousand and sent
 * 12–17 % of the demo's sun lookups to the march (about 0.5 µs a lookup on average); at
 * 2^21 it is under 1 % and about 0.08 µs, for a build about 0.3 s longer (bench_shadow,
 * hall and frustum cases, measured). */
#define BRM_OD_MAX_NODES_ORTHO (1u << 21)
/* Optical-depth error the grid may make before a cell falls back to the exact march: 0.003
 * checked at cell centres keeps the worst case (a kink anywhere in the cell, at most about
 * twice the centre error) under 1 % in transmittance. */
#define BRM_OD_CHECK_TAU 0.003
/* Depth nodes per grid column at most (point and spot lights; directional: 512). */
#define BRM_OD_MAX_DEPTH_NODES 1024u
#define BRM_OD_REFINE 4u
#define BRM_OD_UNFILLED 2u      /* od_bad / blk_bad value of intervals past a column's reach */
#define BRM_OD_BLOCK_SHARE 32u  /* at most one lateral cell in 32 gets a block (what is left marches) */
/* Cell corrections (5·og_n[2] floats + og_n[2] bytes each): a one-view light gets one per
 * BRM_OD_CORR_SHARE lateral cells, a cube's faces together one per BRM_OD_CORR_SHARE_CUBE of
 * all their cells, reserved by the estimate. Common practice, no source: the caps bound the
 * memory estimate; flagged cells beyond them (and beyond the blocks) keep marching. */
#define BRM_OD_CORR_SHARE 8u
#define BRM_OD_CORR_SHARE_CUBE 12u
#define BRM_OD_CORR_PTS 5u     /* misses stored per node: centre and four edge midpoints */
/* Spots wider than this (outer half-angle, degrees) use six cube faces instead of one
 * perspective map, whose texels would stretch too much toward the rim. */
#define BRM_SPOT_CUBE_DEG 60.0
/* Sky rays per brm_sky_incident call: fast path and reference. */
#define BRM_SKY_RAYS 8u
#define BRM_SKY_RAYS_REFERENCE 256u

typedef enum shadow_view_kind {
    BRM_VIEW_ORTHO = 0,     /* directional: x = u·p, y = v·p, depth = f·p */
    BRM_VIEW_PERSP          /* spot, cube face: tan coordinates (u·d/f·d, v·d/f·d), d = p − origin */
} shadow_view_kind;

/* One projection of one light, with its optional depth map and optical-depth grid. */
typedef struct shadow_view {
    shadow_view_kind kind;
    brm_vec3 origin;            /* persp: the light position; ortho: world origin */
    brm_vec3 u, v, f;           /* right-handed orthonormal basis, f the way light travels */

    /* depth map: texel (i, j) covers lateral [lo + i·texel, lo + (i+1)·texel) */
    uint32_t res;               /* texels per side, 0 = no map */
    double lo[2];               /* ortho: metres; persp: tan units */
    double texel;               /* ortho: metres per texel; persp: tan units per texel */
    double z_near;              /* ortho: depth of the near plane (f·p); persp: clip distance */
    float *tile_min, *tile_max; /* per BRM_SHADOW_TILE² block of the map: its depth range, for
                                   classifying whole boxes at once (brm_shadow_classify) */
    uint32_t tiles;             /* blocks per side */
    float *depth;               /* res², first occluder depth plus bias: ortho f·p − z_near,
                                   persp view depth f·d; +inf where nothing is */

    /* optical-depth grid: node (i, j, k) at lateral og_lo + (i, j)·og_step, depth param
     * og_lo[2] + k·og_step[2] (ortho: f·p; persp: distance from the light) */
    uint32_t og_n[3];           /* nodes per axis, 0 = no grid */
    double og_lo[3], og_step[3];
    double og_inv[3];           /* 1 / og_step */
    float *od;                  /* 2 floats per node (G, sigma), k fastest, then i, then j;
                                   packed: a column keeps only its filled nodes od_first..
                                   od_last (below), node k of column c at od_col[c] + k */
    int64_t *od_col;            /* per column: its node 0's index in od (may be negative: only
                                   k in [od_first, od_last] is stored) */
    size_t od_nodes;            /* nodes stored in od */
    /* ortho only: P_a(i, j) per axis a whose fog-bounds face the light can enter through */
    float *prefix;              /* 3 · og_n[0] · og_n[1], axis-major; NULL for persp */
    bool prefix_axis[3];
    double f_inv[3];            /* ortho: 1 / f's components (0 where a component is 0) */
    /* per lateral cell and depth interval: 1 where the build found interpolation off by more
     * than BRM_OD_CHECK_TAU (paths grazing a fade or an edge): lookups there march instead;
     * cleared where a cell correction (below) passed its re-check; BRM_OD_UNFILLED beyond
     * the depth up to which the cell's columns were filled (below): those march too */
    uint8_t *od_bad;            /* (og_n[0] − 1) · (og_n[1] − 1) · (og_n[2] − 1) */
    /* per column: the last depth node filled (brm_od_plan_reach). Lookups come only from
     * points inside the fog bounds, so a column is filled up to where the paths of the cells
     * around it leave the bounds, one node of margin beyond; the nodes after it are not
     * stored (od_col) and the intervals they bound are flagged BRM_OD_UNFILLED (a point
     * found there anyway marches, exactly as in a flagged cell) */
    uint16_t *od_last;          /* og_n[0] · og_n[1] */
    uint16_t *od_first;         /* per column: the first depth node filled (ortho; 0 persp) */
    double cone_tan;            /* a one-view spot: tan of its outer half-angle (cells wholly
                                   outside the cone are left unfilled: the kernel never asks
                                   there); HUGE_VAL otherwise */
    /* Cells still flagged after the corrections (below) get a block of (R+1)² columns,
     * R = BRM_OD_REFINE per side, checked again at their sub-cell centres; up to blk_cap
     * blocks (a fixed share of the cells: the memory estimate counts them all, the build
     * allocates the ones used); what stays flagged marches. A cell's block, when it has
     * one, is all its lookups read. */
    int32_t *refine;            /* per lateral cell: its block, or −1 */
    uint32_t blk_cap, blk_count;
    uint32_t *blk_cell;         /* per block: its lateral cell */
    float *blk_od;              /* blk_cap · (R+1)² columns · og_n[2] · 2 */
    float *blk_pre;             /* ortho: blk_cap · 3 · (R+1)² */
    uint8_t *blk_bad;           /* blk_cap · R² · (og_n[2] − 1) */
    /* Flagged cells get a correction first (brm_od_fill_correction): per depth node what
     * bilinear interpolation misses at the cell's centre and edge midpoints, interpolated
     * biquadratically across the cell and added at lookup in the flagged intervals where it
     * passed a re-check at the four quarter points; those are cleared in od_bad, the others
     * stay flagged (for a block, or the march). Up to corr_cap (what the light's pool has
     * left when the view's turn comes). */
    int32_t *corr;              /* per lateral cell: its correction, or −1 */
    uint32_t corr_cap, corr_count;
    uint32_t *corr_cell;        /* per correction: its lateral cell */
    int8_t *corr_face;          /* ortho: the entry face the correction was taken with (−1 persp) */
    float *corr_dg;             /* corr_count · og_n[2] · BRM_OD_CORR_PTS, the points fastest */
    uint8_t *corr_on;           /* corr_count · (og_n[2] − 1): 1 where the correction applies */
    /* Per lateral cell, set once the build is done (brm_od_finish): the run [lo, hi) of
     * its depth intervals, from its first filled one, that need nothing but the four base
     * columns (no block, no correction, no flag), so most lookups read this and the
     * columns alone; NULL when out of memory (every lookup takes the general path) */
    uint16_t *cell_clean;       /* 2 · (og_n[0] − 1) · (og_n[1] − 1): lo, hi */
    /* The same run with the od index of node 0 of the cell's four columns (od_col of
     * columns (i, j), (i+1, j), (i, j+1), (i+1, j+1)), one 32-byte record a lateral cell, so
     * a batch lookup finds all it needs in one cache line: 8 int32 per cell, the four
     * indices, lo, hi, two unused; NULL when out of memory (the batch takes the general path) */
    int32_t *cell_quad;
    /* The media's hard box faces (media_info.hard of the set): G has a kink where a column
     * crosses one, which the Hermite steps along depth cannot follow (off by up to about
     * jump · step / 10 in tau) and the build's checks at the nodes cannot see, so a lookup
     * whose depth interval may hold such a crossing in any of its cell's columns marches. */
    uint32_t hard_count;
    const brm_aabb *hard;
} shadow_view;
/* The grids store G = ∫ sigma~ along the path from the column's first filled depth node
 * (ortho: od_first) or from the light (persp), where sigma~(q) = sigma_t(q clamped into the fog bounds): sigma_t continued
 * outside the bounds so G stays smooth across the place a path leaves them (a kink there
 * would spoil the interpolation right where targets often touch the bounds). The true
 * optical depth of p is then a difference of smooth terms taken at p's exact entry into the
 * fog (a ray–box test at lookup):
 *   ortho: tau = P_a(x, y) + G(x, y, z), P_a = ∫ sigma~ from face a's plane to the column's
 *          first filled node, a the axis of the face p's path enters through (a column's start
 *          moves P_a and G by opposite constants, so their sum interpolates the same);
 *   persp: tau = G(a, b, r) − G(a, b, r_entry). */

typedef struct light_shadow {
    bool active;                /* the light reaches the target */
    bool has_map;               /* shadows on and there is geometry */
    bool has_od;                /* media present */
    bool cube;                  /* six faces (point lights, wide spots) */
    uint32_t corr_pool;         /* cell corrections the estimate reserves for the light's
                                   views (the build adds what unused blocks leave) */
    uint32_t view_count;
    double softness;            /* PCF radius in texels */
    double texel_size;          /* world size of a texel near the target (m) */
    shadow_view views[6];
} light_shadow;

/* What the optical-depth integrators need to know about the media. */
typedef struct media_info {
    bool any;                   /* some medium can be non-zero inside the fog bounds */
    bool only_uniform;
    double feature;             /* smallest length over which sigma_t varies smoothly (m), HUGE_VAL
                                   when it is piecewise constant: the march step follows it */
    double feature_lateral;     /* the same for how fast optical depth varies across paths: the
                                   finest noise octaves average out along a path, so only the
                                   coarser ones count (optical-depth grid spacing) */
    uint32_t box_count;         /* places where sigma_t has a kink or a jump: box faces */
    brm_aabb boxes[2 * BRM_MAX_MEDIA];
    uint32_t plane_count;       /* and horizontal planes (height fog's base) */
    double plane_y[BRM_MAX_MEDIA];
    const brm_noise_grid *noise_grid; /* fast path: the tabulated noise factor; NULL = exact */
    uint32_t hard_count;        /* box media without an edge fade: sigma_t jumps at their faces */
    brm_aabb hard[BRM_MAX_MEDIA];
} media_info;

/* The sky: visible-sky SH (bands 0–1, 3 colours) on a lattice over the target, each
 * node traced with BRM_SKY_CACHE_RAYS rays, interpolated trilinearly between the nodes that lie
 * in free space (nodes inside solids are left out and the weights renormalised). */
#define BRM_SKY_CACHE_RAYS 64u
#define BRM_SKY_CACHE_MAX_PER_AXIS 96u
/* Openings in buildings are a metre or two across: half a metre between nodes resolves them
 * (common practice, no source). */
#define BRM_SKY_CACHE_SPACING_M 0.5
typedef struct sky_cache {
    uint32_t n[3];              /* nodes per axis; 0 = no cache */
    brm_vec3 lo, step;          /* node (i, j, k) at lo + (i, j, k)·step */
    float *sh;                  /* 12 per node: colour-major, 4 coefficients each */
    uint8_t *ok;                /* 1 where the node is in free space */
    /* Nodes are traced when a lookup first needs them (sky.c): per node 0 = not yet, 1 = being
     * traced, 2 = sh and ok set. A node's values depend on the node alone, so the cache reads
     * the same whichever thread traces it, and nodes no lookup needs are never traced. */
    atomic_uchar *state;
    struct brm_solid_index *solid;  /* for the nodes' ok, until the cache is freed */
} sky_cache;

#define BRM_SHADOW_PHASES 9
/* "noise table", "plan", "rasterize", "grid rows", "grid checks", "map tiles", "blocks",
 * "corrections", "sky" */
extern const char *const brm_shadow_phase_names[BRM_SHADOW_PHASES];

struct brm_shadow_set {
    const brm_scene *scene;
    brm_shadow_opts opts;
    brm_bvh *own_bvh;           /* built here when the caller gave none and one is needed */
    const brm_bvh *bvh;
    media_info media;
    double ref_step;            /* reference march step (m) */
    double fast_step;           /* fast path's fallback march step (m) */
    double eps;                 /* ray offset (m) */
    light_shadow *lights;
    uint32_t light_count;
    bool sky_present, sky_trace;
    uint32_t sky_rays;
    double sky_proj[3][4];      /* unoccluded sky, bands 0–1 */
    sky_cache sky_grid;
    brm_noise_grid noise_grid;  /* fast path only (media.noise_grid points here) */         /* both paths: the reference checks lights, not the sky */
    size_t bytes;
    double build_seconds;
    /* wall seconds of the build's phases, in the order of brm_shadow_phase_names */
    double phase_seconds[BRM_SHADOW_PHASES];
    /* CPU seconds of the whole process over the same phases (at one thread: the phase's own
     * cost, the figure a shared machine disturbs least) */
    double phase_cpu[BRM_SHADOW_PHASES];
};

/* ---- exp(−tau) for the transmittance lookups ---- */
/* 2^(j/32), j = 0..31 (shadow.c). */
extern const double brm_exp2_32[32];
/* exp(−tau) for tau ≥ 0 with a short dependency chain (the lookups' latency is the cost, and
 * libm's exp was a third of a grid lookup): −tau = (32e + j)·ln2/32 + r, |r| ≤ ln2/64, so
 * exp(−tau) = 2^e · 2^(j/32) · e^r with 2^e put into the table value's exponent field and
 * e^r by its Taylor polynomial to r^4 (remainder under (ln2/64)^5/5! = 1.3e-12). Within 1e-11
 * relative of exp (tests); 0 for tau ≥ 700 (exp(−700) = 1e-304). */
static inline double brm_exp_neg(double tau)
{
    if (!(tau < 700.0)) return 0.0;
    const double x = -tau;
    /* round(x·32/ln2) by the magic constant 1.5·2^52: its low 32 bits hold the integer */
    const double kd = x * 46.166241308446828 + 0x1.8p52;
    uint64_t kb;
    memcpy(&kb, &kd, sizeof kb);
    const double n = kd - 0x1.8p52;
    const double r = x - n * 0.021660849392498290; /* ln2/32 */
    const uint32_t uk = (uint32_t)kb, j = uk & 31u;
    const int64_t e = (int64_t)(int32_t)(uk - j) / 32;
    const double p = 1.0 + r + (r * r) * (0.5 + r * (1.0 / 6.0 + r * (1.0 / 24.0)));
    uint64_t sb;
    memcpy(&sb, &brm_exp2_32[j], sizeof sb);
    sb += (uint64_t)e << 52;
    double sc;
    memcpy(&sc, &sb, sizeof sc);
    return sc * p;
}

/* ---- media integration (optical_depth.c) ---- */
void brm_media_info_init(const brm_scene *s, media_info *mi);
/* ∫ sigma_t over p + t·d, t in [t0, t1], d unit: composite Simpson with panels ≤ h, split at
 * the fog bounds and at every box face and base plane the path crosses. */
double brm_optical_depth_segment(const brm_scene *s, const media_info *mi, brm_vec3 p, brm_vec3 d, double t0,
                                 double t1, double h);
/* Plans a light's optical-depth grids (dimensions only), sets has_od. Returns bytes. */
size_t brm_od_plan(const brm_scene *s, const brm_shadow_opts *o, const media_info *mi, light_shadow *ls,
                   const brm_light *l);
/* Sets v->od_first and v->od_last (allocated by the caller) from where the paths of each
 * lateral cell enter (ortho) and leave the fog bounds. */
void brm_od_plan_reach(const brm_scene *s, shadow_view *v);
/* After brm_od_plan_reach: sets od_col and od_nodes (the packed layout) and allocates od.
 * Returns 0 when out of memory. */
int brm_od_alloc(shadow_view *v);
/* Fills row j of view v's grid. */
void brm_od_fill_row(const brm_scene *s, const media_info *mi, shadow_view *v, uint32_t j);
/* Flags the cells of row j (between node rows j and j + 1) whose interpolation is off;
 * scratch holds 2·og_n[2] floats. Needs rows j and j + 1 filled. */
void brm_od_check_row(const brm_scene *s, const media_info *mi, shadow_view *v, uint32_t j, float *scratch);
/* After the corrections are filled: hands blocks to the cells still flagged, in row order
 * (deterministic), and sets refine (−1 for the others). */
void brm_od_assign_blocks(shadow_view *v);
/* Fills and checks block b. scratch holds 2·og_n[2] floats. */
void brm_od_fill_block(const brm_scene *s, const media_info *mi, shadow_view *v, uint32_t b, float *scratch);
/* After every row is checked: hands up to corr_cap corrections to the flagged cells (those
 * with refine[c] ≥ 0 excepted; the build sets refine to −1 first), in row order
 * (deterministic), and allocates them. Returns 0 when out of memory. */
int brm_od_assign_corrections(shadow_view *v);
/* Fills and re-checks correction c (clears the od_bad intervals it fixes). scratch holds
 * 3·og_n[2] floats. */
void brm_od_fill_correction(const brm_scene *s, const media_info *mi, shadow_view *v, uint32_t c, float *scratch);
/* Bytes one correction takes. */
size_t brm_od_corr_bytes(const shadow_view *v);
/* After the blocks and corrections: allocates and sets v->cell_clean (left NULL when out of
 * memory, which only slows lookups). */
void brm_od_finish(shadow_view *v);
/* Optical depth at p from the grid; returns 0 and leaves *tau when p is outside it. */
int brm_od_lookup(const brm_scene *s, const shadow_view *v, brm_vec3 p, double *tau);
/* The same for light ls, the view picked as brm_shadow_pick_view does (a cube's face by the
 * major axis of p − light) from the vector the projection needs anyway. */
int brm_od_lookup_light(const brm_scene *s, const light_shadow *ls, brm_vec3 p, double *tau);

/* Transmittance of light ls at n points from the grids' clean cells, their reads fetched a
 * batch ahead: out[i] as brm_shadow_transmittance gives it, bit for bit, where slow[i] is
 * 0; slow[i] = 1 where the point needs the general path (outside the grid, a flagged or
 * refined cell, a light outside the fog, hard box faces). */
void brm_od_transmittance_batch(const brm_scene *s, const light_shadow *ls, const brm_vec3 *p, uint32_t n,
                                double *out, uint8_t *slow);
/* The same with the instruction set chosen: simd = 0 takes the base x86-64 code, 1 the AVX2
 * code where brm_cpu_avx2 allows it (what brm_od_transmittance_batch takes); the two give
 * the same bits (tests). */
void brm_od_transmittance_batch_isa(const brm_scene *s, const light_shadow *ls, const brm_vec3 *p, uint32_t n,
                                    double *out, uint8_t *slow, int simd);

/* ---- depth maps (shadowmap.c) ---- */
/* Plans the views and the map resolution of light l for the target (no allocation). */
void brm_shadowmap_plan(const brm_scene *s, const brm_shadow_opts *o, light_shadow *ls, const brm_light *l);
/* Rasterizes all geometry into rows [row0, row1) of view v's depth map. */
void brm_shadowmap_raster_rows(const brm_scene *s, shadow_view *v, uint32_t row0, uint32_t row1);
/* The view of light ls that sees p (cube: by major axis). */
const shadow_view *brm_shadow_pick_view(const light_shadow *ls, brm_vec3 p);
/* Filtered visibility of p in one view's map, radius r texels. */
double brm_shadowmap_pcf(const shadow_view *v, brm_vec3 p, double r);
/* Builds the view's depth-range tiles (after rasterization). Returns 0 when out of memory. */
int brm_shadowmap_tiles(shadow_view *v);
/* 1: brm_shadowmap_pcf returns exactly 1 for every point of box b; 0: exactly 0; −1: unknown. */
int brm_shadowmap_classify(const shadow_view *v, brm_aabb b, double r);

/* ---- sky (sky.c) ---- */
/* Bands 0–1 of the unoccluded sky of SPEC.md, in closed form. */
void brm_sky_projection(const brm_sky *sky, double out[3][4]);
/* Builds ss->sky_grid over ss->opts.bounds (fast path; needs ss->bvh and the sky fields set). */
brm_status brm_sky_cache_build(brm_shadow_set *ss, int threads, brm_diag *d);
/* Bytes the cache takes for these options. */
size_t brm_sky_cache_memory(const brm_scene *s, const brm_shadow_opts *o);
void brm_sky_cache_free(sky_cache *c);

#endif
