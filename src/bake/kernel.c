#include "bake/kernel.h"

#include <string.h>

#include "base/sh.h"
#include "scene/light.h"
#include "scene/phase.h"
#include "shadow/sky.h"

/* iso: fill inscatter and dir (the view-independent outputs). */
static inline void kernel_eval(const brm_kernel *k, brm_vec3 p, const uint32_t *lights, uint32_t light_count,
                               uint32_t sample_index, const brm_vec3 *view, bool iso, brm_kernel_out *out)
{
    memset(out, 0, sizeof *out);
    const brm_scene *s = k->scene;
    brm_media_point mp;
    brm_media_eval(s, p, &mp);
    out->sigma_t = mp.sigma_t;
    out->sigma_s = mp.sigma_s;
    if (mp.sigma_s.x <= 0.0 && mp.sigma_s.y <= 0.0 && mp.sigma_s.z <= 0.0) return;
    const double ss[3] = {mp.sigma_s.x, mp.sigma_s.y, mp.sigma_s.z};

    for (uint32_t li = 0; li < light_count; li++) {
        const uint32_t index = lights[li] & ~BRM_KERNEL_LIT;
        const brm_light *l = &s->lights[index];
        brm_vec3 to_light;
        double dist;
        double e = brm_light_illuminance(l, p, &to_light, &dist);
        out->light_evals++;
        if (e <= 0.0) continue;
        if (!(lights[li] & BRM_KERNEL_LIT)) {
            double v = brm_shadow_visibility(k->shadows, index, p);
            if (v <= 0.0) continue;
            e *= v;
        }
        e *= brm_shadow_transmittance(k->shadows, index, p);
        if (e <= 0.0) continue;
        /* A light is a delta in direction: its radiance integrates to its illuminance e, and its
         * projection onto Y_lm is e·Y_lm(toward the light). */
        const double rgb[3] = {e * l->color.x, e * l->color.y, e * l->color.z};
        if (iso) {
            double y[4];
            brm_sh4(to_light, y);
            for (int c = 0; c < 3; c++) {
                double a = ss[c] * rgb[c];
                out->inscatter[c] += a * (1.0 / (4.0 * BRM_PI));
                for (int m = 0; m < 4; m++) out->dir[c][m] += a * y[m];
            }
        }
        if (view) {
            brm_vec3 sp = brm_media_scatter_phase(s, &mp, brm_dot(*view, to_light));
            out->toward_view[0] += sp.x * rgb[0];
            out->toward_view[1] += sp.y * rgb[1];
            out->toward_view[2] += sp.z * rgb[2];
        }
    }

    if (s->sky.present) {
        double sky[3][4];
        brm_sky_incident(k->shadows, p, sample_index, sky);
        for (int c = 0; iso && c < 3; c++) {
            /* ∫ L dω = L_00 / Y00, so sigma_s/(4π)·∫L dω = sigma_s·L_00·Y00 (4π·Y00² = 1). */
            out->inscatter[c] += ss[c] * sky[c][0] * BRM_SH_C0;
            for (int m = 0; m < 4; m++) out->dir[c][m] += ss[c] * sky[c][m];
        }
        if (view) {
            /* Funk–Hecke: ∫ p(v·ω) L(ω) dω = Σ_l g_l Σ_m L_lm Y_lm(v), g_l the phase's Legendre
             * moments (REFERENCES.md §2), per medium weighted by its sigma_s. */
            double y[4];
            brm_sh4(*view, y);
            for (uint32_t i = 0; i < mp.count; i++) {
                const brm_medium *m = &s->media[mp.medium[i]];
                double g1 = brm_phase_moment(&m->phase, 1);
                const double alb[3] = {m->albedo.x, m->albedo.y, m->albedo.z};
                for (int c = 0; c < 3; c++) {
                    double band0 = sky[c][0] * y[0];
                    double band1 = sky[c][1] * y[1] + sky[c][2] * y[2] + sky[c][3] * y[3];
                    out->toward_view[c] += mp.sigma_t_each[i] * alb[c] * (band0 + g1 * band1);
                }
            }
        }
    }
}

void brm_kernel_eval(const brm_kernel *k, brm_vec3 p, const uint32_t *lights, uint32_t light_count,
                     uint32_t sample_index, const brm_vec3 *view, brm_kernel_out *out)
{
    kernel_eval(k, p, lights, light_count, sample_index, view, true, out);
}

void brm_kernel_eval_view(const brm_kernel *k, brm_vec3 p, const uint32_t *lights, uint32_t light_count,
                          uint32_t sample_index, brm_vec3 view, brm_kernel_out *out)
{
    kernel_eval(k, p, lights, light_count, sample_index, &view, false, out);
}

/* Samples a batch handles per pass (the stage arrays below live on the stack). */
enum { BATCH_CHUNK = 256 };

/* One pass of brm_kernel_eval_view_batch over n ≤ BATCH_CHUNK samples. Per light, in stages
 * over the samples still lit: falloff, then map visibility, then transmittance, then the
 * phase toward the camera — each a tight loop of one kind of lookup, with the terms of a
 * stage the same operations, in the same order, as kernel_eval's. ph, g1: the scene's media's
 * prepared phases and first Legendre moments. */
static void view_batch_chunk(const brm_kernel *k, brm_kernel_view_sample *smp, uint32_t n, const uint32_t *lights,
                             uint32_t light_count, brm_media_point *mp, const brm_phase_prepared *ph,
                             const double *g1)
{
    const brm_scene *s = k->scene;
    uint32_t live[BATCH_CHUNK], nlive = 0;
    for (uint32_t i = 0; i < n; i++) {
        brm_kernel_view_sample *q = &smp[i];
        brm_media_eval(s, q->p, &mp[i]);
        q->sigma_t = mp[i].sigma_t;
        q->light_evals = 0;
        q->toward_view[0] = q->toward_view[1] = q->toward_view[2] = 0.0;
        /* A sample without scattering takes no light (kernel_eval returns early there). */
        if (!(mp[i].sigma_s.x <= 0.0 && mp[i].sigma_s.y <= 0.0 && mp[i].sigma_s.z <= 0.0)) live[nlive++] = i;
    }
    uint32_t on[BATCH_CHUNK];
    double e[BATCH_CHUNK], cv[BATCH_CHUNK];
    for (uint32_t li = 0; li < light_count; li++) {
        const uint32_t index = lights[li] & ~BRM_KERNEL_LIT;
        const bool lit = (lights[li] & BRM_KERNEL_LIT) != 0;
        const brm_light *l = &s->lights[index];
        uint32_t m = 0;
        for (uint32_t t = 0; t < nlive; t++) smp[live[t]].light_evals++;
        /* Falloff and the cosine toward the camera (brm_light_illuminance). */
        if (l->type == BRM_LIGHT_DIRECTIONAL) {
            const brm_vec3 to_light = brm_scale(l->direction, -1.0);
            const double e0 = l->illuminance_lux;
            if (e0 <= 0.0) continue;
            for (uint32_t t = 0; t < nlive; t++) {
                on[m] = live[t];
                e[m] = e0;
                cv[m] = brm_dot(smp[live[t]].view, to_light);
                m++;
            }
        } else {
            for (uint32_t t = 0; t < nlive; t++) {
                const brm_kernel_view_sample *q = &smp[live[t]];
                brm_vec3 to_light;
                double dist;
                double ee = brm_light_illuminance_local(l, q->p, &to_light, &dist);
                if (ee <= 0.0) continue;
                on[m] = live[t];
                e[m] = ee;
                cv[m] = brm_dot(q->view, to_light);
                m++;
            }
        }
        /* Map visibility (skipped for a light the maps called lit over the whole tile). */
        if (!lit) {
            uint32_t m2 = 0;
            for (uint32_t t = 0; t < m; t++) {
                double v = brm_shadow_visibility(k->shadows, index, smp[on[t]].p);
                if (v <= 0.0) continue;
                on[m2] = on[t], e[m2] = e[t] * v, cv[m2] = cv[t];
                m2++;
            }
            m = m2;
        }
        /* Transmittance toward the light. */
        uint32_t m2 = 0;
        for (uint32_t t = 0; t < m; t++) {
            double ee = e[t] * brm_shadow_transmittance(k->shadows, index, smp[on[t]].p);
            if (ee <= 0.0) continue;
            on[m2] = on[t], e[m2] = ee, cv[m2] = cv[t];
            m2++;
        }
        m = m2;
        /* Colour and the blended phase toward the camera (brm_media_scatter_phase). */
        const double col[3] = {l->color.x, l->color.y, l->color.z};
        for (uint32_t t = 0; t < m; t++) {
            const uint32_t i = on[t];
            const brm_media_point *pt = &mp[i];
            const double rgb[3] = {e[t] * col[0], e[t] * col[1], e[t] * col[2]};
            brm_vec3 sp = brm_v3(0.0, 0.0, 0.0);
            for (uint32_t c = 0; c < pt->count; c++) {
                const uint32_t md = pt->medium[c];
                double w = pt->sigma_t_each[c] * brm_phase_eval_prepared(&ph[md], cv[t]);
                sp = brm_madd(sp, s->media[md].albedo, w);
            }
            brm_kernel_view_sample *q = &smp[i];
            q->toward_view[0] += sp.x * rgb[0];
            q->toward_view[1] += sp.y * rgb[1];
            q->toward_view[2] += sp.z * rgb[2];
        }
    }
    if (!s->sky.present) return;
    brm_sky_cursor cur;
    brm_sky_cursor_init(&cur);
    for (uint32_t t = 0; t < nlive; t++) {
        const uint32_t i = live[t];
        brm_kernel_view_sample *q = &smp[i];
        double sky[3][4];
        brm_sky_incident_cursor(k->shadows, &cur, q->p, q->sample_index, sky);
        /* As in kernel_eval (Funk–Hecke, REFERENCES.md §2). */
        double y[4];
        brm_sh4(q->view, y);
        for (uint32_t m = 0; m < mp[i].count; m++) {
            const uint32_t md = mp[i].medium[m];
            const brm_vec3 albv = s->media[md].albedo;
            const double alb[3] = {albv.x, albv.y, albv.z};
            for (int c = 0; c < 3; c++) {
                double band0 = sky[c][0] * y[0];
                double band1 = sky[c][1] * y[1] + sky[c][2] * y[2] + sky[c][3] * y[3];
                q->toward_view[c] += mp[i].sigma_t_each[m] * alb[c] * (band0 + g1[md] * band1);
            }
        }
    }
}

void brm_kernel_eval_view_batch(const brm_kernel *k, brm_kernel_view_sample *smp, uint32_t n, const uint32_t *lights,
                                uint32_t light_count, brm_media_point *mp)
{
    const brm_scene *s = k->scene;
    brm_phase_prepared ph[BRM_MAX_MEDIA];
    double g1[BRM_MAX_MEDIA];
    const uint32_t nm = s->medium_count < BRM_MAX_MEDIA ? s->medium_count : BRM_MAX_MEDIA;
    for (uint32_t m = 0; m < nm; m++) {
        brm_phase_prepare(&s->media[m].phase, &ph[m]);
        g1[m] = brm_phase_moment(&s->media[m].phase, 1);
    }
    for (uint32_t i0 = 0; i0 < n; i0 += BATCH_CHUNK) {
        uint32_t c = n - i0 < BATCH_CHUNK ? n - i0 : BATCH_CHUNK;
        view_batch_chunk(k, smp + i0, c, lights, light_count, mp + i0, ph, g1);
    }
}
