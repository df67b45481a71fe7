/* Preview pictures: what a target's camera sees — the scene's opaque geometry, lit, with the
 * baked fog laid over it — as linear radiance (cd/m²), then exposed, tone-mapped and written
 * as PPM with the view room's curve and encoder.
 *
 * What each pixel shows (pixel (x, y), y down, at image position ((x + ½)/W, (y + ½)/H)):
 * - Primary visibility by the scene's BVH ray caster (voxel/bvh.h): exact for triangles, spheres
 *   analytic. A ray that hits nothing shows the sky radiance in its direction (SPEC.md "Sky").
 * - Surfaces are Lambertian: L = albedo/π · (Σ_lights E·max(0, n·l)·V·T_light·colour + E_sky),
 *   E the light's illuminance at the point (scene/light.h), V its shadow-map visibility and
 *   T_light its transmittance through the fog toward the light (shadow/shadow.h, from a shadow
 *   set built for the preview over the scene's geometry), and E_sky the sky irradiance:
 *   the open sky's in closed form, E_open(n) = π·H + (Z − H)·I(n_y) + (G − H)·I(−n_y) with
 *   I(c) = (2/3)·((π − θ)·c + sin θ), θ = acos c (the overlap of two clamped cosines), minus
 *   what geometry blocks, B = (π/8)·Σ L_sky(ω_k) over the blocked ones of 8 cosine-distributed
 *   rays (stratified, rotated per pixel by a hashed offset), E_sky = max(0, E_open − B̄). Exact
 *   for a surface open to the sky, unbiased under occluders. (brm_sky_incident's bands 0–1
 *   were tried first: its rays into the surface's own half-space left errors of 15 % per
 *   pixel on an open wall.) B is traced at the pixels of even x and even y only, and B̄ is its
 *   average over those within 8 pixels (a 17 × 17 window, up to 81 estimates) on the same
 *   object with nearly the same normal and distance (a cross-bilateral box filter); a pixel
 *   with none traces its own. Open surfaces keep their exact value. (On the demo's doorway
 *   picture this is a quarter of the rays of 8 at every pixel filtered over 7 × 7, and closer
 *   to a converged picture: 1.26 against 1.56 levels of 255 on average, whose clamp per
 *   pixel before the filter also brightened occluded surfaces by about 1 level.) With
 *   opts.sky_rays, that many rays at every pixel and no filter.
 * - Fog (the "fogged" picture): L' = L·T + S along the pixel's ray up to the surface (or, for a
 *   ray that misses, to the far plane / through the whole volume):
 *   frustum targets: T and S from the baked `transmittance` and `scatter.*` channels at the
 *     pixel's view depth: bilinear across the four nearest columns (clamped at the image edge),
 *     and in depth between the two slice boundaries around it by the closed form of a slab
 *     with constant extinction and source: with (S_a, T_a), (S_b, T_b) at the boundaries,
 *     q = T_b/T_a and f the fraction of the way through, T = T_a·q^f and
 *     S = S_a + (S_b − S_a)·(1 − q^f)/(1 − q) (→ f as q → 1). Boundary 0 is the camera (S = 0,
 *     T = 1); the first stored boundary is slice_depths[1]. Beyond the far plane nothing more
 *     is added (the bake holds no fog there).
 *   world targets: a march through the baked volume's box, steps of at most half the smallest
 *     cell edge, each step a slab of the extinction and in-scatter at its midpoint integrated
 *     in closed form (S·(1 − e^(−σ·h))/σ, the frustum baker's slab integral). The in-scatter
 *     toward the viewer is rebuilt from the dir.* channels with the phase of the medium:
 *     S_c = Y00·dir_c0 + χ1,c·Σ_m dir_c,1m·Y1m(v), χ1 the phase's first Legendre moment
 *     (g for Henyey–Greenstein; brm_phase_moment) blended over the media at each cell centre
 *     by their scattering (read from the scene, which the volume does not store); v the view
 *     direction. Values are trilinear between cell centres over the free part of the cells
 *     only (each weight times 1 − occupancy, then renormalised): the ray travels through free
 *     space, so a wall's solid cells do not thin the fog in front of it.
 *   probe targets: the volume holds no fog for a camera; the picture is not fogged. Instead a
 *     sphere of radius BRM_PREVIEW_PROBE_RADIUS × spacing is drawn at every probe, showing the
 *     radiance of a white Lambertian sphere lit by the probe, max(0, E(n))/π with E(n) the
 *     probe's irradiance from its sh.* channels (brm_sh9_irradiance). Probes with validity
 *     below ½ are drawn black with a cross of the marker colour BRM_PREVIEW_MARKER.
 * - Exposure: k = 2^EV given, or automatic from the fogged picture: brm_auto_exposure over the
 *   brightest channel of every pixel (its 99th percentile maps to tone 0.8). Both pictures use
 *   the same k, so they compare directly. Then the tone curve x/(1 + x) per channel and sRGB
 *   encoding (view/tone.h), one byte per sample.
 * Deterministic: every pixel depends only on its own index, whatever the thread count. */
#ifndef BRM_VIEW_PREVIEW_H
#define BRM_VIEW_PREVIEW_H

#include <stdbool.h>
#include <stddef.h>
#include <stdint.h>

#include "base/diag.h"
#include "brume/brv.h"
#include "scene/scene.h"

#define BRM_PREVIEW_DEFAULT_WIDTH 1280u
#define BRM_PREVIEW_DEFAULT_FOV 60.0        /* degrees, vertical, for --from/--look-at cameras */
#define BRM_PREVIEW_DEFAULT_ASPECT (16.0 / 9.0)
#define BRM_PREVIEW_PROBE_RADIUS 0.15       /* probe spheres: radius as a fraction of the spacing */
#define BRM_PREVIEW_MARKER_R 255u           /* invalid probes' cross */
#define BRM_PREVIEW_MARKER_G 48u
#define BRM_PREVIEW_MARKER_B 48u

typedef struct brm_preview_opts {   /* zero = defaults */
    uint32_t width;                 /* pixels; 0 = BRM_PREVIEW_DEFAULT_WIDTH */
    uint32_t height;                /* 0 = width / aspect, rounded (at least 1) */
    /* The camera for world and probe targets (required there; frustum targets use their own
     * and refuse one given here): */
    bool camera_set;
    brm_vec3 from, look_at;
    double fov_y_deg;               /* 0 = BRM_PREVIEW_DEFAULT_FOV */
    double aspect;                  /* width/height when height is 0; 0 = 16:9 */
    int threads;                    /* 0 = all cores */
    bool exposure_set;              /* else automatic */
    double exposure_ev;
    bool reference;                 /* surfaces lit through the exact shadow path (visibility by
                                       rays, transmittance marched): slow, for checks and benches */
    uint32_t sky_rays;              /* 0: the sky's occlusion from 8 rays at every other pixel of
                                       every other row, filtered; else this many rays at every
                                       pixel, unfiltered (converged pictures for checks) */
} brm_preview_opts;

typedef struct brm_preview {
    uint32_t w, h;
    float *fog;                     /* w·h·3 linear RGB radiance (cd/m²), rows top to bottom */
    float *plain;                   /* the same without the fog between surface and camera */
    uint8_t *marker;                /* w·h: 1 where an invalid probe's cross is drawn */
    bool fogged;                    /* a volume's fog was applied (false: fog == plain) */
    double exposure_ev;             /* the EV used (given or automatic) */
    double seconds;                 /* wall time of brm_preview_render */
    double setup_seconds;           /* of which the ray caster, shadow set and volume decoding */
    double cpu_seconds;             /* process CPU time (every thread) over brm_preview_render */
    double setup_cpu_seconds;       /* of which the setup's */
    uint32_t probes_invalid;        /* probe targets: probes drawn as invalid */
} brm_preview;

/* Checks that vol was baked for target t of s: same grid kind and cells (probes per axis), and
 * for world and probe grids the same bounds, for frustum grids the same camera and slice
 * depths (to 1e-6 relative), and the channels the preview reads. Errors (BRM_E_INPUT) name
 * vol_path, the target and what differs, and say to bake again. */
brm_status brm_preview_check_volume(const brm_scene *s, uint32_t t, const brv_volume *vol, const char *vol_path,
                                    brm_diag *d);

/* Renders target t of s. vol: its baked volume (checked with brm_preview_check_volume first),
 * or NULL for the plain picture only (fog == plain). Errors: BRM_E_USAGE for a missing or
 * unwanted camera, a bad size or field of view; BRM_E_INPUT for a volume that does not
 * match; BRM_E_NOMEM; BRM_E_INTERRUPTED when brm_interrupted is raised. On failure *out is
 * zeroed. */
brm_status brm_preview_render(const brm_scene *s, uint32_t t, const brv_volume *vol, const char *vol_path,
                              const brm_preview_opts *o, brm_preview *out, brm_diag *d);

/* Frees the pictures; accepts a zeroed struct. */
void brm_preview_free(brm_preview *p);

/* One of the pictures (fogged or plain) as an 8-bit image with p->exposure_ev, encoded as P6
 * (view/image.h). *bytes is malloc'd. */
brm_status brm_preview_encode(const brm_preview *p, bool fogged, uint8_t **bytes, size_t *len, brm_diag *d);

/* Where `brume bake` puts target t's volume when run on this scene alone:
 * "out/<scene name>/<target>.brv". Returns 0 when it does not fit in cap. */
int brm_preview_default_volume(const brm_scene *s, uint32_t t, char *buf, size_t cap);

/* The fog-free picture's name beside out: "OUT.ppm" → "OUT-nofog.ppm" (the suffix goes before
 * a final ".ppm", else at the end). Returns 0 when it does not fit in cap. */
int brm_preview_beside_path(const char *out, char *buf, size_t cap);

#endif
