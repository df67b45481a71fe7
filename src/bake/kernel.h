/* The lighting kernel: in-scattered light at one sample point, written once and shared by
 * every target kind and by the exact reference (which differs only in the shadow set it is
 * given). Per light: falloff × shadow-map visibility × transmittance toward the light × colour;
 * plus sky light blocked by geometry. */
#ifndef BRM_KERNEL_H
#define BRM_KERNEL_H

#include "scene/media.h"
#include "shadow/shadow.h"

typedef struct brm_kernel {
    const brm_scene *scene;
    const brm_shadow_set *shadows;
} brm_kernel;

typedef struct brm_kernel_out {
    double sigma_t;             /* extinction at p */
    brm_vec3 sigma_s;           /* scattering at p */
    double inscatter[3];        /* sigma_s/(4π) ∫ L_in dω per channel (isotropic in-scatter) */
    double dir[3][4];           /* sigma_s · bands 0–1 projection of L_in, per channel */
    double toward_view[3];      /* only with a view direction: ∫ Σ_i sigma_s,i p_i(v·ω) L_in dω */
    uint32_t light_evals;       /* lights evaluated (for throughput figures) */
} brm_kernel_out;

/* A light index with this bit set is known to be unshadowed at p (brm_shadow_classify said so
 * for the whole brick): its shadow lookup is skipped. */
#define BRM_KERNEL_LIT 0x80000000u

/* Evaluates the kernel at p for the lights listed (culled by the caller per brick).
 * view: unit direction from the camera toward p, or NULL for view-independent output only.
 * sample_index decorrelates the sky rays between samples. */
void brm_kernel_eval(const brm_kernel *k, brm_vec3 p, const uint32_t *lights, uint32_t light_count,
                     uint32_t sample_index, const brm_vec3 *view, brm_kernel_out *out);

/* The same with a view direction, filling only sigma_t, sigma_s, toward_view and light_evals
 * (inscatter and dir stay 0): what the frustum baker reads. Same bits in those fields. */
void brm_kernel_eval_view(const brm_kernel *k, brm_vec3 p, const uint32_t *lights, uint32_t light_count,
                          uint32_t sample_index, brm_vec3 view, brm_kernel_out *out);

/* One sample of a batch for brm_kernel_eval_view_batch: p, view and sample_index in; the
 * rest out. */
typedef struct brm_kernel_view_sample {
    brm_vec3 p;
    brm_vec3 view;              /* unit direction from the camera toward p */
    uint32_t sample_index;
    uint32_t light_evals;       /* out: as brm_kernel_out */
    double sigma_t;             /* out */
    double toward_view[3];      /* out */
} brm_kernel_view_sample;

/* brm_kernel_eval_view for n samples that share one light list, light by light over all the
 * samples (the lookups of one light's maps then follow each other). Each sample's fields get
 * the same bits as brm_kernel_eval_view gives them: the sums run in the same order. mp: n
 * media points of scratch. */
void brm_kernel_eval_view_batch(const brm_kernel *k, brm_kernel_view_sample *smp, uint32_t n, const uint32_t *lights,
                                uint32_t light_count, brm_media_point *mp);

/* One sample of a batch for brm_kernel_eval_iso_batch: p and sample_index in; the rest out,
 * the view-independent fields of brm_kernel_out (what the world baker reads). */
typedef struct brm_kernel_iso_sample {
    brm_vec3 p;
    uint32_t sample_index;
    uint32_t light_evals;       /* out: as brm_kernel_out */
    double sigma_t;             /* out */
    double inscatter[3];        /* out */
    double dir[3][4];           /* out */
} brm_kernel_iso_sample;

/* brm_kernel_eval(k, p, lights, light_count, sample_index, NULL, out) for n samples that share
 * one light list, light by light as brm_kernel_eval_view_batch does: each sample's fields get
 * the bits the single call gives them. mp: n media points of scratch. */
void brm_kernel_eval_iso_batch(const brm_kernel *k, brm_kernel_iso_sample *smp, uint32_t n, const uint32_t *lights,
                               uint32_t light_count, brm_media_point *mp);

#endif
