#include "bake/kernel.h"

#include <string.h>

#include "base/sh.h"
#include "scene/light.h"
#include "scene/phase.h"

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

void brm_kernel_eval_view_batch(const brm_kernel *k, brm_kernel_view_sample *smp, uint32_t n, const uint32_t *lights,
                                uint32_t light_count, brm_media_point *mp)
{
    const brm_scene *s = k->scene;
    for (uint32_t i = 0; i < n; i++) {
        brm_kernel_view_sample *q = &smp[i];
        brm_media_eval(s, q->p, &mp[i]);
        q->sigma_t = mp[i].sigma_t;
        q->light_evals = 0;
        q->toward_view[0] = q->toward_view[1] = q->toward_view[2] = 0.0;
    }
    /* A sample without scattering takes no light (kernel_eval returns early there). */
#define BATCH_DARK(i) (mp[i].sigma_s.x <= 0.0 && mp[i].sigma_s.y <= 0.0 && mp[i].sigma_s.z <= 0.0)
    for (uint32_t li = 0; li < light_count; li++) {
        const uint32_t index = lights[li] & ~BRM_KERNEL_LIT;
        const bool lit = (lights[li] & BRM_KERNEL_LIT) != 0;
        const brm_light *l = &s->lights[index];
        for (uint32_t i = 0; i < n; i++) {
            if (BATCH_DARK(i)) continue;
            brm_kernel_view_sample *q = &smp[i];
            brm_vec3 to_light;
            double dist;
            double e = brm_light_illuminance(l, q->p, &to_light, &dist);
            q->light_evals++;
            if (e <= 0.0) continue;
            if (!lit) {
                double v = brm_shadow_visibility(k->shadows, index, q->p);
                if (v <= 0.0) continue;
                e *= v;
            }
            e *= brm_shadow_transmittance(k->shadows, index, q->p);
            if (e <= 0.0) continue;
            const double rgb[3] = {e * l->color.x, e * l->color.y, e * l->color.z};
            brm_vec3 sp = brm_media_scatter_phase(s, &mp[i], brm_dot(q->view, to_light));
            q->toward_view[0] += sp.x * rgb[0];
            q->toward_view[1] += sp.y * rgb[1];
            q->toward_view[2] += sp.z * rgb[2];
        }
    }
    if (!s->sky.present) return;
    for (uint32_t i = 0; i < n; i++) {
        if (BATCH_DARK(i)) continue;
        brm_kernel_view_sample *q = &smp[i];
        double sky[3][4];
        brm_sky_incident(k->shadows, q->p, q->sample_index, sky);
        /* As in kernel_eval (Funk–Hecke, REFERENCES.md §2). */
        double y[4];
        brm_sh4(q->view, y);
        for (uint32_t m = 0; m < mp[i].count; m++) {
            const brm_medium *md = &s->media[mp[i].medium[m]];
            double g1 = brm_phase_moment(&md->phase, 1);
            const double alb[3] = {md->albedo.x, md->albedo.y, md->albedo.z};
            for (int c = 0; c < 3; c++) {
                double band0 = sky[c][0] * y[0];
                double band1 = sky[c][1] * y[1] + sky[c][2] * y[2] + sky[c][3] * y[3];
                q->toward_view[c] += mp[i].sigma_t_each[m] * alb[c] * (band0 + g1 * band1);
            }
        }
    }
#undef BATCH_DARK
}
