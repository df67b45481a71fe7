/* Participating media: the one place that says how much fog is where.
 *
 * Every stage (the bakers, shadow optical-depth maps, the exact reference, probes) asks these
 * functions, so the density model is written once. Media exist only inside the scene's fog
 * bounds; outside them every coefficient is zero. Media add up; noise multiplies the sum of
 * the others by max(0, 1 + strength·n(p/scale_m)). */
#ifndef BRM_MEDIA_H
#define BRM_MEDIA_H

#include "scene/scene.h"

typedef struct brm_media_point {
    double sigma_t;                     /* total extinction, 1/m */
    brm_vec3 sigma_s;                   /* total scattering per RGB channel, 1/m */
    uint32_t count;                     /* media that contribute here (scattering media only) */
    uint16_t medium[BRM_MAX_MEDIA];     /* their indices in brm_scene.media */
    double sigma_t_each[BRM_MAX_MEDIA]; /* each one's extinction here (noise factor applied) */
} brm_media_point;

/* Precomputes what the media functions need (reciprocals, the noise permutation tables, and
 * for the batch fBm a 256 KiB hash table per noise medium) and sets s->media_ready. The loader calls it; a scene assembled by hand (tests, tools) must call
 * it after filling s->media and s->fog_bounds and before any other function here. Frees and
 * rebuilds the noise table when called again. Returns BRM_E_NOMEM on allocation failure. */
brm_status brm_media_prepare(brm_scene *s, brm_diag *d);

/* Extinction (1/m) for a meteorological optical range of visibility_m metres (5 % contrast):
 * sigma_t = ln(20)/V. The loader uses it for `visibility_m`. */
double brm_media_extinction_from_visibility(double visibility_m);

/* Extinction sigma_t (1/m) at p: the fast call for optical depth and the extinction channel. */
double brm_media_extinction(const brm_scene *s, brm_vec3 p);

/* Extinction, scattering and the per-medium split at p (for phase blending). */
void brm_media_eval(const brm_scene *s, brm_vec3 p, brm_media_point *out);

/* brm_media_eval at n points: out[i] gets exactly (bit for bit) what brm_media_eval(s, p[i])
 * gives. The density media point by point, then each noise medium's fBm over all the points
 * that need it, four at a time with AVX2 where the processor has it (the same operations in the
 * same order, no fused multiply-add; the scalar fbm otherwise). */
void brm_media_eval_batch(const brm_scene *s, const brm_vec3 *p, uint32_t n, brm_media_point *out);
/* The same with the path chosen: simd 0 the scalar fBm, 1 AVX2 where the processor has it.
 * Returns 1 when AVX2 ran (tests compare the paths bit for bit). */
int brm_media_eval_batch_simd(const brm_scene *s, const brm_vec3 *p, uint32_t n, brm_media_point *out, int simd);

/* The noise factor max(0, 1 + strength·n) of all noise media at p (1 when there are none). */
double brm_media_noise_factor(const brm_scene *s, brm_vec3 p);

/* The deterministic fBm of gradient noise behind the noise medium: values in about [−1, 1],
 * `octaves` octaves, seeded. Exposed for tests. */
double brm_noise_fbm(const brm_scene *s, uint32_t medium_index, brm_vec3 p_scaled);

/* Scattering weighted by phase: for each channel c, Σ_i sigma_s,i,c · p_i(cos_theta), the
 * sigma_s-weighted blend of the overlapping media's phase functions times sigma_s.
 * cos_theta = dot(view direction, direction toward the light) (SPEC.md). */
brm_vec3 brm_media_scatter_phase(const brm_scene *s, const brm_media_point *mp, double cos_theta);

/* Whether any medium can have fog inside box b (conservative: false means none anywhere). */
bool brm_media_any_in(const brm_scene *s, brm_aabb b);


/* Sum of the media other than noise at p (what the noise factor multiplies); 0 outside the
 * fog bounds. Cheap: no noise is evaluated. */
double brm_media_density_sum(const brm_scene *s, brm_vec3 p);

/* The noise factor tabulated on a lattice over the fog bounds, for the fast path's optical-depth
 * integrals (thousands of evaluations per path family): spacing a third of the finest
 * octave's wavelength, interpolated trilinearly, at most BRM_NOISE_GRID_MAX_NODES nodes. The
 * other media stay analytic, so hard box edges stay hard. The exact reference never uses it. */
#define BRM_NOISE_GRID_MAX_NODES (1u << 23)
typedef struct brm_noise_grid {
    uint32_t n[3];              /* nodes per axis; 0 = no grid (no noise medium) */
    brm_vec3 lo, inv_step;
    float *f;                   /* noise factor per node, x fastest */
} brm_noise_grid;

brm_status brm_noise_grid_build(const brm_scene *s, int threads, brm_noise_grid *g, brm_diag *d);
size_t brm_noise_grid_memory(const brm_scene *s);
void brm_noise_grid_free(brm_noise_grid *g);
/* Extinction at p with the noise factor from the grid (exactly brm_media_extinction when the
 * scene has no noise). */
double brm_media_extinction_tabulated(const brm_scene *s, const brm_noise_grid *g, brm_vec3 p);

/* Extinction along a line for the optical-depth integrals (thousands of paths of regularly
 * spaced samples): out[k] = brm_media_extinction_tabulated of q_k clamped into the fog bounds,
 * q_k = o + (t0 + k·dt)·d, for k < n, in chunks whose per-medium loops the compiler
 * vectorizes (each medium's invariants hoisted; AVX2 where the processor has it, the same bits
 * as the SSE2 path: no fused operations). Single precision: positions, densities, the height
 * fog's exponential (a polynomial with a stated bound, media.c) and the trilinear noise
 * factor; within 2e-6 relative (plus 1e-9 /m absolute) of the double evaluation at the same
 * point on the demo's media, away from the few points within float rounding of a hard box
 * face (tests). Rounding the position to a float is most of it, so it grows with the scene's
 * coordinates: about 1e-7 relative per metre of distance from the origin times the media's
 * relative gradient per metre. With noise but no grid (g NULL or empty) every point takes the
 * exact double path. */
void brm_media_extinction_line(const brm_scene *s, const brm_noise_grid *g, brm_vec3 o, brm_vec3 d, double t0,
                               double dt, uint32_t n, float *out);
/* The same at o + t[k]·d, t increasing (for the chunks' boxes), k < n: irregular samples. */
void brm_media_extinction_points(const brm_scene *s, const brm_noise_grid *g, brm_vec3 o, brm_vec3 d, const double *t,
                                 uint32_t n, float *out);
/* The same with the instruction set chosen: simd 0 the SSE2 baseline, 1 AVX2 where the
 * processor has it. Returns 1 when AVX2 ran (tests compare the two bit for bit). */
int brm_media_extinction_line_simd(const brm_scene *s, const brm_noise_grid *g, brm_vec3 o, brm_vec3 d, double t0,
                                   double dt, uint32_t n, float *out, int simd);

/* exp(−a) for a ≥ 0 in single precision: a degree-7 polynomial on a reduced argument and an
 * exact power of two, within 1e-6 relative of exp(−a) for a in [0, 87), 0 from 87 on (exp(−87) = 1.6e-38) — for the
 * height fog along a line (brm_media_extinction_line). Inline so loops over it vectorize
 * (a single call has a long dependency chain: scalar code is better served by libm). */
__attribute__((always_inline)) static inline float brm_exp_neg_f(float a)
{
    const float x = -(a < 87.0f ? a : 87.0f);
    /* x = n·ln2 + r, |r| ≤ ln2/2: n by the round-to-nearest of the magic constant 1.5·2^23
     * (exact for |x·log2 e| < 2^22), ln2 split so that n·ln2_hi is exact */
    const float kf = x * 1.44269504088896341f;
    const float nf = (kf + 12582912.0f) - 12582912.0f;
    const float r = (x - nf * 0.693145751953125f) - nf * 1.42860682030941723e-6f;
    /* Taylor to r^7: remainder under 0.3466^8/8! = 5.2e-9 relative */
    float p = 1.0f / 5040.0f;
    p = p * r + 1.0f / 720.0f;
    p = p * r + 1.0f / 120.0f;
    p = p * r + 1.0f / 24.0f;
    p = p * r + 1.0f / 6.0f;
    p = p * r + 0.5f;
    p = p * r + 1.0f;
    p = p * r + 1.0f;
    /* 2^n for n in [−126, 0]: the exponent field n + 127 */
    const int32_t bits = ((int32_t)nf + 127) * (1 << 23);
    union { int32_t i; float f; } sc = {bits};
    const float v = p * sc.f;
    return a < 87.0f ? v : 0.0f;
}

#endif
