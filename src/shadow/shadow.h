/* Light visibility and transmittance for one target: what the lighting kernel asks per sample.
 *
 * Fast path: a CPU-rasterized depth map per shadow-casting light (orthographic fitted to the
 * target for directional lights, reaching toward the light far enough to catch every occluder;
 * perspective for spots; six faces for points), slope-scaled bias, percentage-closer filtered
 * lookups; and an optical-depth structure per light for transmittance through the media up to
 * where the path leaves the fog bounds.
 * Reference path (opts.reference): visibility by rays through the BVH and transmittance by a
 * fine march. Built once per target, read-only afterwards: safe from any number of threads. */
#ifndef BRM_SHADOW_H
#define BRM_SHADOW_H

#include "scene/scene.h"
#include "voxel/bvh.h"

/* Default texels per cell edge. A texel as large as a cell would do for smooth shadows, but
 * light shafts through openings a few cells wide (windows, skylights) lose their edges to the
 * filter and to the map's texel quantisation: on the demo hall the fast bake's RMSE against the
 * BVH reference was 7 % of the mean at 8 texels per cell, 3.1 % at 16 and 2.1 % at 24
 * (tests/bake/test_reference.c; common practice, no source). */
#define BRM_SHADOW_TEXELS_PER_CELL 24.0

typedef struct brm_shadow_opts {
    brm_aabb bounds;        /* what the target needs lit (world: its box; frustum: its pyramid) */
    double cell_size;       /* the target's smallest cell edge, for default map resolution */
    int threads;
    bool reference;
    const brm_bvh *bvh;     /* the scene's ray caster (required for the reference path; when
                               NULL and needed — reference, sky over geometry — the set
                               builds its own) */
    bool no_sky_cache;      /* callers that never ask brm_sky_incident skip its cache */
    double od_budget_scale; /* scales each optical-depth grid's node budget (0 means 1); a
                               smaller grid builds faster and marches more of its lookups —
                               the same accuracy checks apply, only the balance moves (previews) */
} brm_shadow_opts;

typedef struct brm_shadow_set brm_shadow_set;

brm_status brm_shadows_build(const brm_scene *s, const brm_shadow_opts *o, brm_shadow_set **out, brm_diag *d);
void brm_shadows_free(brm_shadow_set *ss);
/* Bytes brm_shadows_build will allocate (for the memory estimate): exact for the maps; the
 * grids' columns are counted whole, where the build stores each only as far as the fog
 * bounds reach along it (on the demo's frustum about half); refinement blocks for
 * optical-depth cells that interpolate poorly are counted up to their cap (one grid cell in
 * 8), of which a build typically uses a few per cent, so this is an upper bound. Default map resolution: a texel of opts.cell_size /
 * BRM_SHADOW_TEXELS_PER_CELL at the far side of the target, capped at 4096 texels per side
 * (BRM_SHADOW_AUTO_MAX_CUBE = 1024 per cube face); a light's
 * shadow.resolution overrides it (16..16384). */
size_t brm_shadows_memory(const brm_scene *s, const brm_shadow_opts *o);

/* What every point of box b sees of light l, from the maps alone: 1 when brm_shadow_visibility
 * is exactly 1 everywhere in b, 0 when it is exactly 0 everywhere, −1 when mixed or unknown
 * (the reference path, a box across cube faces or the near plane). Lets the kernel skip the
 * per-sample lookups of whole bricks without changing a single result. */
int brm_shadow_classify(const brm_shadow_set *ss, uint32_t l, brm_aabb b);

/* Geometric visibility of light l from p, in [0, 1] (filtered). 1 when the light casts no shadow. */
double brm_shadow_visibility(const brm_shadow_set *ss, uint32_t l, brm_vec3 p);

/* The same for a point p on a surface of unit normal n (facing the light): the fast path is
 * brm_shadow_visibility (the maps' slope-scaled bias keeps a lit surface from shadowing itself);
 * the reference spreads its filter over the surface's plane, where for a point in the fog it
 * spreads it across the light's rays. */
double brm_shadow_visibility_surface(const brm_shadow_set *ss, uint32_t l, brm_vec3 p, brm_vec3 n);

/* The same with the narrowest filter (bilinear over the four nearest texels): for surfaces
 * lit by a bounce, where the penumbra's width matters little and the lookup count does. The
 * reference path traces one ray. */
double brm_shadow_visibility_sharp(const brm_shadow_set *ss, uint32_t l, brm_vec3 p);
/* brm_shadow_visibility_sharp for a point p of a surface of unit normal n, moved toward the
 * light as brm_shadow_visibility_surface does (bounce light off lit surfaces). */
double brm_shadow_visibility_surface_sharp(const brm_shadow_set *ss, uint32_t l, brm_vec3 p, brm_vec3 n);

/* Transmittance exp(−∫sigma_t) from p toward light l, up to the light or to where the path
 * leaves the fog bounds. Within 1 % of the reference march. */
double brm_shadow_transmittance(const brm_shadow_set *ss, uint32_t l, brm_vec3 p);
/* (Fast path: per light, a light-space grid of optical depth along the light's paths — an
 * orthographic column per lateral node for directional lights, rays in (cube-face or spot)
 * projection × distance for point and spot lights — with Hermite steps along paths, the
 * fog-bounds entry solved exactly per query, cells checked at build time, corrected (or
 * refined 4 × 4) where interpolation is off by more than 0.003 and marched where even that
 * is not enough.
 * Lookups: tens to a few hundred nanoseconds; see bench/bench_shadow.c.) */

/* brm_shadow_transmittance at p[0..n), the same values bit for bit, for kernels that ask
 * many samples about one light at once: the optical-depth grid's reads are fetched a batch
 * ahead instead of one lookup at a time (bench/bench_shadow.c compares the two). */
void brm_shadow_transmittance_batch(const brm_shadow_set *ss, uint32_t l, const brm_vec3 *p, uint32_t n, double *out);

/* Texel size (m) of light l's map near p; 0 for lights without a map (for warnings). */
double brm_shadow_texel_size(const brm_shadow_set *ss, uint32_t l);

/* The reference transmittance (a fine composite-Simpson march to the light or the fog-bounds
 * exit), whatever opts.reference says: what the fast path is checked against. */
double brm_shadow_transmittance_march(const brm_shadow_set *ss, uint32_t l, brm_vec3 p);

/* Wall-clock seconds brm_shadows_build took, and the bytes it allocated (reports, benches). */
double brm_shadows_build_seconds(const brm_shadow_set *ss);
size_t brm_shadows_bytes(const brm_shadow_set *ss);

/* ---- sky ---------------------------------------------------------------------------- */

/* Sky light reaching p, blocked by all the scene's geometry (not dimmed by fog: an ambient
 * approximation, SPEC.md), projected onto real SH bands 0–1 with the basis of SPEC.md:
 * out[c][m] = ∫ L_sky,c(ω) V(p, ω) Y_m(ω) dω for m = 0..3 (Y00, Y1−1, Y10, Y11), ω toward
 * the sky. sample_index picks the deterministic ray set (different per sample decorrelates
 * cells). With no sky everything is 0 and nothing is traced. */
void brm_sky_incident(const brm_shadow_set *ss, brm_vec3 p, uint32_t sample_index, double out[3][4]);

/* Rays per brm_sky_incident call (default 8, reference 32; 1..4096). With 4 samples a cell, 8
 * rays leave about 9 % noise per cell where half the sky is hidden, 32 about 4.5 %. Call
 * right after the build, before the set is shared between threads. */
void brm_shadows_set_sky_rays(brm_shadow_set *ss, uint32_t rays);


/* Drops the sky cache so brm_sky_incident traces its rays per call (tests of the estimator). */
void brm_shadows_drop_sky_cache(brm_shadow_set *ss);

#endif
