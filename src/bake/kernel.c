#include "bake/kernel.h"

#include <string.h>

#include "base/cpu.h"
#include "base/sh.h"
#include "scene/light.h"
#include "scene/phase.h"
#include "shadow/shadowmap.h"
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

/* What one pass knows about its samples that scatter ("live"), structure of arrays so the
 * stage loops below vectorize: positions, view directions, and per medium of the scene the
 * sample's extinction share (0 where the medium is absent). */
typedef struct batch_soa {
    uint32_t n;                         /* live samples */
    uint32_t idx[BATCH_CHUNK];          /* their places in the caller's array */
    double px[BATCH_CHUNK], py[BATCH_CHUNK], pz[BATCH_CHUNK];
    double vx[BATCH_CHUNK], vy[BATCH_CHUNK], vz[BATCH_CHUNK];
    double ux[BATCH_CHUNK], uy[BATCH_CHUNK], uz[BATCH_CHUNK]; /* out of the falloff stage: toward the light */
    uint32_t media_mask;                /* media present at some live sample */
    bool dense;                         /* every live sample lists its media in rising index
                                           order: the dense phase sum below adds them in the
                                           order brm_media_scatter_phase does */
    double sig[BRM_MAX_MEDIA][BATCH_CHUNK];
} batch_soa;

/* The stage loops: a plain version, and AVX versions of the two arithmetic stages chosen at
 * run time, four samples at a time. Both do the same IEEE operations in the same order (the
 * vector square root and division are correctly rounded like the scalar ones; no fused
 * multiply-add anywhere), so they give the same bits. */

/* Falloff of a point or spot light at every live sample (brm_light_illuminance_local without
 * branches: the same terms, a zero where the call returns early) and the cosine between the
 * view and the direction toward the light, for samples [t0, b->n). */
static void falloff_plain(const brm_light *l, batch_soa *b, uint32_t t0, double *E, double *CV)
{
    const double lx = l->position.x, ly = l->position.y, lz = l->position.z;
    const double I = l->intensity_cd, range = l->range_m;
    const bool ranged = range > 0.0, spot = l->type == BRM_LIGHT_SPOT;
    for (uint32_t t = t0; t < b->n; t++) {
        double x = lx - b->px[t], y = ly - b->py[t], z = lz - b->pz[t];
        double d2 = x * x + y * y + z * z, d = sqrt(d2);
        double inv = 1.0 / d;
        double ux = x * inv, uy = y * inv, uz = z * inv;
        double e = I / d2;
        if (ranged) e = d >= range ? 0.0 : e * brm_light_range_window(d, range);
        if (spot) {
            double cos_a = -(ux * l->direction.x + uy * l->direction.y + uz * l->direction.z);
            e = cos_a <= l->cos_outer ? 0.0 : e * brm_smoothstep(l->cos_outer, l->cos_inner, cos_a);
        }
        E[t] = d > 0.0 ? e : 0.0;
        CV[t] = b->vx[t] * ux + b->vy[t] * uy + b->vz[t] * uz;
        b->ux[t] = ux, b->uy[t] = uy, b->uz[t] = uz;
    }
}

/* The blended phase toward the camera times sigma_s (brm_media_scatter_phase) for the m lit
 * samples on[] from t0 on, medium by medium in rising index: an absent medium adds
 * albedo·(0·p) = +0, which leaves each sum's bits as they are. */
static void phase_plain(const brm_scene *s, const batch_soa *b, const brm_phase_prepared *ph, uint32_t md,
                        const uint32_t *on, const double *CV, uint32_t t0, uint32_t m, double *spx, double *spy,
                        double *spz)
{
    const double ax = s->media[md].albedo.x, ay = s->media[md].albedo.y, az = s->media[md].albedo.z;
    for (uint32_t t = t0; t < m; t++) {
        double w = b->sig[md][on[t]] * brm_phase_eval_prepared(&ph[md], CV[t]);
        spx[t] = spx[t] + ax * w, spy[t] = spy[t] + ay * w, spz[t] = spz[t] + az * w;
    }
}

#if defined(__x86_64__) && defined(__GNUC__)
#include <immintrin.h>
#define KERNEL_AVX2 1
#define AVX_FN __attribute__((target("avx2")))

/* c ? a : b per lane. */
AVX_FN static inline __m256d sel(__m256d c, __m256d a, __m256d b) { return _mm256_blendv_pd(b, a, c); }

AVX_FN static void falloff_avx2(const brm_light *l, batch_soa *b, double *E, double *CV)
{
    const __m256d lx = _mm256_set1_pd(l->position.x), ly = _mm256_set1_pd(l->position.y),
                  lz = _mm256_set1_pd(l->position.z);
    const __m256d I = _mm256_set1_pd(l->intensity_cd), range = _mm256_set1_pd(l->range_m);
    const __m256d one = _mm256_set1_pd(1.0), zero = _mm256_setzero_pd(), neg = _mm256_set1_pd(-0.0);
    const __m256d dx = _mm256_set1_pd(l->direction.x), dy = _mm256_set1_pd(l->direction.y),
                  dz = _mm256_set1_pd(l->direction.z);
    const __m256d co = _mm256_set1_pd(l->cos_outer), span = _mm256_set1_pd(l->cos_inner - l->cos_outer);
    const __m256d three = _mm256_set1_pd(3.0), two = _mm256_set1_pd(2.0);
    const bool ranged = l->range_m > 0.0, spot = l->type == BRM_LIGHT_SPOT;
    uint32_t t = 0;
    for (; t + 4 <= b->n; t += 4) {
        __m256d x = _mm256_sub_pd(lx, _mm256_loadu_pd(b->px + t));
        __m256d y = _mm256_sub_pd(ly, _mm256_loadu_pd(b->py + t));
        __m256d z = _mm256_sub_pd(lz, _mm256_loadu_pd(b->pz + t));
        __m256d d2 = _mm256_add_pd(_mm256_add_pd(_mm256_mul_pd(x, x), _mm256_mul_pd(y, y)), _mm256_mul_pd(z, z));
        __m256d d = _mm256_sqrt_pd(d2);
        __m256d inv = _mm256_div_pd(one, d);
        __m256d ux = _mm256_mul_pd(x, inv), uy = _mm256_mul_pd(y, inv), uz = _mm256_mul_pd(z, inv);
        __m256d e = _mm256_div_pd(I, d2);
        if (ranged) {
            /* brm_light_range_window */
            __m256d r = _mm256_div_pd(d, range), r2 = _mm256_mul_pd(r, r);
            __m256d w = _mm256_sub_pd(one, _mm256_mul_pd(r2, r2));
            __m256d ww = sel(_mm256_cmp_pd(w, zero, _CMP_GT_OQ), _mm256_mul_pd(w, w), zero);
            e = sel(_mm256_cmp_pd(d, range, _CMP_GE_OQ), zero, _mm256_mul_pd(e, ww));
        }
        if (spot) {
            __m256d dot = _mm256_add_pd(_mm256_add_pd(_mm256_mul_pd(ux, dx), _mm256_mul_pd(uy, dy)), _mm256_mul_pd(uz, dz));
            __m256d cos_a = _mm256_xor_pd(dot, neg);
            /* brm_smoothstep(cos_outer, cos_inner, cos_a) */
            __m256d u = _mm256_div_pd(_mm256_sub_pd(cos_a, co), span);
            u = sel(_mm256_cmp_pd(u, one, _CMP_GT_OQ), one, u);
            u = sel(_mm256_cmp_pd(u, zero, _CMP_LT_OQ), zero, u);
            __m256d sm = _mm256_mul_pd(_mm256_mul_pd(u, u), _mm256_sub_pd(three, _mm256_mul_pd(two, u)));
            e = sel(_mm256_cmp_pd(cos_a, co, _CMP_LE_OQ), zero, _mm256_mul_pd(e, sm));
        }
        _mm256_storeu_pd(E + t, sel(_mm256_cmp_pd(d, zero, _CMP_GT_OQ), e, zero));
        __m256d cv = _mm256_add_pd(_mm256_add_pd(_mm256_mul_pd(_mm256_loadu_pd(b->vx + t), ux),
                                                 _mm256_mul_pd(_mm256_loadu_pd(b->vy + t), uy)),
                                   _mm256_mul_pd(_mm256_loadu_pd(b->vz + t), uz));
        _mm256_storeu_pd(CV + t, cv);
        _mm256_storeu_pd(b->ux + t, ux), _mm256_storeu_pd(b->uy + t, uy), _mm256_storeu_pd(b->uz + t, uz);
    }
    falloff_plain(l, b, t, E, CV);
}

AVX_FN static void phase_avx2(const brm_scene *s, const batch_soa *b, const brm_phase_prepared *ph, uint32_t md,
                              const uint32_t *on, const double *CV, uint32_t m, double *spx, double *spy, double *spz)
{
    const brm_phase_prepared *pp = &ph[md];
    uint32_t t = 0;
    if (pp->model == BRM_PHASE_HENYEY_GREENSTEIN) {
        const __m256d ax = _mm256_set1_pd(s->media[md].albedo.x), ay = _mm256_set1_pd(s->media[md].albedo.y),
                      az = _mm256_set1_pd(s->media[md].albedo.z);
        const __m256d k = _mm256_set1_pd(pp->k[0]), a = _mm256_set1_pd(pp->a[0]), bb = _mm256_set1_pd(pp->b[0]);
        const __m256d lo = _mm256_set1_pd(-1.0), hi = _mm256_set1_pd(1.0);
        const double *sig = b->sig[md];
        for (; t + 4 <= m; t += 4) {
            __m256d c = _mm256_loadu_pd(CV + t);
            /* brm_clamp(c, −1, 1) */
            c = sel(_mm256_cmp_pd(c, lo, _CMP_LT_OQ), lo, sel(_mm256_cmp_pd(c, hi, _CMP_GT_OQ), hi, c));
            __m256d den = _mm256_sub_pd(a, _mm256_mul_pd(bb, c));
            __m256d p = _mm256_div_pd(k, _mm256_mul_pd(den, _mm256_sqrt_pd(den)));
            __m256d sg = _mm256_set_pd(sig[on[t + 3]], sig[on[t + 2]], sig[on[t + 1]], sig[on[t]]);
            __m256d w = _mm256_mul_pd(sg, p);
            _mm256_storeu_pd(spx + t, _mm256_add_pd(_mm256_loadu_pd(spx + t), _mm256_mul_pd(ax, w)));
            _mm256_storeu_pd(spy + t, _mm256_add_pd(_mm256_loadu_pd(spy + t), _mm256_mul_pd(ay, w)));
            _mm256_storeu_pd(spz + t, _mm256_add_pd(_mm256_loadu_pd(spz + t), _mm256_mul_pd(az, w)));
        }
    }
    phase_plain(s, b, ph, md, on, CV, t, m, spx, spy, spz);
}
#else
#define KERNEL_AVX2 0
#endif

static void stage_falloff_plain(const brm_light *l, batch_soa *b, double *E, double *CV)
{
    falloff_plain(l, b, 0, E, CV);
}
static void stage_phase_plain(const brm_scene *s, const batch_soa *b, const brm_phase_prepared *ph, uint32_t md,
                              const uint32_t *on, const double *CV, uint32_t m, double *spx, double *spy, double *spz)
{
    phase_plain(s, b, ph, md, on, CV, 0, m, spx, spy, spz);
}

typedef struct batch_stages {
    void (*falloff)(const brm_light *, batch_soa *, double *, double *);
    void (*phase)(const brm_scene *, const batch_soa *, const brm_phase_prepared *, uint32_t, const uint32_t *,
                  const double *, uint32_t, double *, double *, double *);
} batch_stages;

static batch_stages pick_stages(void)
{
    batch_stages st = {stage_falloff_plain, stage_phase_plain};
#if KERNEL_AVX2
    if (brm_cpu_avx2()) st.falloff = falloff_avx2, st.phase = phase_avx2;
#endif
    return st;
}

/* One pass of brm_kernel_eval_view_batch over n ≤ BATCH_CHUNK samples. Per light, in stages
 * over the samples still lit: falloff, then map visibility, then transmittance, then the
 * phase toward the camera — each a tight loop of one kind of work, with the terms of a stage
 * the same operations, in the same order, as kernel_eval's. ph, g1: the scene's media's
 * prepared phases and first Legendre moments. */
/* The map-visibility stage of both batches: the visibility of light `index` at the m points,
 * each sample's illuminance e scaled by it, and the lists (on, e, and cv when given)
 * compacted to the samples still lit, without branches. Returns how many are. */
static uint32_t keep_visible(const brm_kernel *k, uint32_t index, const brm_vec3 *pts, uint32_t m, uint32_t *on,
                             double *e, double *cv, double *tr)
{
    brm_shadow_visibility_batch(k->shadows, index, pts, m, tr);
    uint32_t m2 = 0;
    for (uint32_t t = 0; t < m; t++) {
        double v = tr[t];
        on[m2] = on[t], e[m2] = e[t] * v;
        if (cv) cv[m2] = cv[t];
        m2 += !(v <= 0.0);
    }
    return m2;
}

static void view_batch_chunk(const brm_kernel *k, brm_kernel_view_sample *smp, uint32_t n, const uint32_t *lights,
                             uint32_t light_count, brm_media_point *mp, const brm_phase_prepared *ph,
                             const double *g1, const batch_stages *st, batch_soa *b)
{
    const brm_scene *s = k->scene;
    b->n = 0;
    b->media_mask = 0;
    b->dense = true;
    /* The media at every sample at once (brm_media_eval's bits, the noise vectorized). */
    brm_vec3 pts[BATCH_CHUNK];
    for (uint32_t i = 0; i < n; i++) pts[i] = smp[i].p;
    brm_media_eval_batch(s, pts, n, mp);
    for (uint32_t i = 0; i < n; i++) {
        brm_kernel_view_sample *q = &smp[i];
        q->sigma_t = mp[i].sigma_t;
        q->light_evals = 0;
        q->toward_view[0] = q->toward_view[1] = q->toward_view[2] = 0.0;
        /* A sample without scattering takes no light (kernel_eval returns early there). */
        if (mp[i].sigma_s.x <= 0.0 && mp[i].sigma_s.y <= 0.0 && mp[i].sigma_s.z <= 0.0) continue;
        /* Every light is evaluated at a sample that scatters (kernel_eval counts each). */
        q->light_evals = light_count;
        uint32_t t = b->n++;
        b->idx[t] = i;
        b->px[t] = q->p.x, b->py[t] = q->p.y, b->pz[t] = q->p.z;
        b->vx[t] = q->view.x, b->vy[t] = q->view.y, b->vz[t] = q->view.z;
        for (uint32_t c = 0; c < mp[i].count; c++) {
            b->media_mask |= 1u << mp[i].medium[c];
            if (c > 0 && mp[i].medium[c] <= mp[i].medium[c - 1]) b->dense = false;
        }
    }
    const uint32_t nlive = b->n;
    if (b->dense)
        for (uint32_t md = 0; md < BRM_MAX_MEDIA; md++) {
            if (!(b->media_mask >> md & 1u)) continue;
            for (uint32_t t = 0; t < nlive; t++) b->sig[md][t] = 0.0;
        }
    if (b->dense)
        for (uint32_t t = 0; t < nlive; t++) {
            const brm_media_point *pt = &mp[b->idx[t]];
            for (uint32_t c = 0; c < pt->count; c++) b->sig[pt->medium[c]][t] = pt->sigma_t_each[c];
        }
    uint32_t on[BATCH_CHUNK];
    double E[BATCH_CHUNK], CV[BATCH_CHUNK], e[BATCH_CHUNK], cv[BATCH_CHUNK];
    double spx[BATCH_CHUNK], spy[BATCH_CHUNK], spz[BATCH_CHUNK], tr[BATCH_CHUNK];
    for (uint32_t li = 0; li < light_count; li++) {
        const uint32_t index = lights[li] & ~BRM_KERNEL_LIT;
        const bool lit = (lights[li] & BRM_KERNEL_LIT) != 0;
        const brm_light *l = &s->lights[index];
        uint32_t m = 0;
        /* Falloff and the cosine toward the camera (brm_light_illuminance); on[] holds live
         * sample numbers from here on. The lists are compacted without branches: every slot is
         * written, and the count moves on only for the samples kept. */
        if (l->type == BRM_LIGHT_DIRECTIONAL) {
            const brm_vec3 to_light = brm_scale(l->direction, -1.0);
            const double e0 = l->illuminance_lux;
            if (e0 <= 0.0) continue;
            for (uint32_t t = 0; t < nlive; t++) {
                on[m] = t;
                e[m] = e0;
                cv[m] = b->vx[t] * to_light.x + b->vy[t] * to_light.y + b->vz[t] * to_light.z;
                m++;
            }
        } else {
            st->falloff(l, b, E, CV);
            for (uint32_t t = 0; t < nlive; t++) {
                on[m] = t, e[m] = E[t], cv[m] = CV[t];
                m += !(E[t] <= 0.0);
            }
        }
        /* Map visibility (skipped for a light the maps called lit over the whole tile). */
        if (!lit) {
            for (uint32_t t = 0; t < m; t++) pts[t] = smp[b->idx[on[t]]].p;
            m = keep_visible(k, index, pts, m, on, e, cv, tr);
        }
        /* Transmittance toward the light, for the samples still lit all at once (the batch
         * lookup gives brm_shadow_transmittance's bits). */
        for (uint32_t t = 0; t < m; t++) pts[t] = smp[b->idx[on[t]]].p;
        brm_shadow_transmittance_batch(k->shadows, index, pts, m, tr);
        uint32_t m2 = 0;
        for (uint32_t t = 0; t < m; t++) {
            double ee = e[t] * tr[t];
            on[m2] = on[t], e[m2] = ee, cv[m2] = cv[t];
            m2 += !(ee <= 0.0);
        }
        m = m2;
        if (m == 0) continue;
        /* Colour and the blended phase toward the camera (brm_media_scatter_phase). */
        const double col[3] = {l->color.x, l->color.y, l->color.z};
        if (b->dense) {
            for (uint32_t t = 0; t < m; t++) spx[t] = spy[t] = spz[t] = 0.0;
            for (uint32_t md = 0; md < BRM_MAX_MEDIA; md++)
                if (b->media_mask >> md & 1u) st->phase(s, b, ph, md, on, cv, m, spx, spy, spz);
        } else {
            for (uint32_t t = 0; t < m; t++) {
                const brm_media_point *pt = &mp[b->idx[on[t]]];
                brm_vec3 sp = brm_v3(0.0, 0.0, 0.0);
                for (uint32_t c = 0; c < pt->count; c++) {
                    const uint32_t md = pt->medium[c];
                    double w = pt->sigma_t_each[c] * brm_phase_eval_prepared(&ph[md], cv[t]);
                    sp = brm_madd(sp, s->media[md].albedo, w);
                }
                spx[t] = sp.x, spy[t] = sp.y, spz[t] = sp.z;
            }
        }
        for (uint32_t t = 0; t < m; t++) {
            brm_kernel_view_sample *q = &smp[b->idx[on[t]]];
            const double rgb[3] = {e[t] * col[0], e[t] * col[1], e[t] * col[2]};
            q->toward_view[0] += spx[t] * rgb[0];
            q->toward_view[1] += spy[t] * rgb[1];
            q->toward_view[2] += spz[t] * rgb[2];
        }
    }
    if (!s->sky.present) return;
    brm_sky_cursor cur;
    brm_sky_cursor_init(&cur);
    for (uint32_t t = 0; t < nlive; t++) {
        const uint32_t i = b->idx[t];
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
    const batch_stages st = pick_stages();
    batch_soa b;
    for (uint32_t i0 = 0; i0 < n; i0 += BATCH_CHUNK) {
        uint32_t c = n - i0 < BATCH_CHUNK ? n - i0 : BATCH_CHUNK;
        view_batch_chunk(k, smp + i0, c, lights, light_count, mp + i0, ph, g1, &st, &b);
    }
}

/* One pass of brm_kernel_eval_iso_batch over n ≤ BATCH_CHUNK samples: the stages of
 * view_batch_chunk up to the transmittance, then kernel_eval's view-independent sums. */
static void iso_batch_chunk(const brm_kernel *k, brm_kernel_iso_sample *smp, uint32_t n, const uint32_t *lights,
                            uint32_t light_count, brm_media_point *mp, const batch_stages *st, batch_soa *b)
{
    const brm_scene *s = k->scene;
    b->n = 0;
    brm_vec3 pts[BATCH_CHUNK]; /* as in view_batch_chunk */
    for (uint32_t i = 0; i < n; i++) pts[i] = smp[i].p;
    brm_media_eval_batch(s, pts, n, mp);
    for (uint32_t i = 0; i < n; i++) {
        brm_kernel_iso_sample *q = &smp[i];
        q->sigma_t = mp[i].sigma_t;
        q->light_evals = 0;
        memset(q->inscatter, 0, sizeof q->inscatter);
        memset(q->dir, 0, sizeof q->dir);
        if (mp[i].sigma_s.x <= 0.0 && mp[i].sigma_s.y <= 0.0 && mp[i].sigma_s.z <= 0.0) continue;
        q->light_evals = light_count; /* as in view_batch_chunk */
        uint32_t t = b->n++;
        b->idx[t] = i;
        b->px[t] = q->p.x, b->py[t] = q->p.y, b->pz[t] = q->p.z;
        b->vx[t] = b->vy[t] = b->vz[t] = 0.0; /* no view: the cosines go unused */
    }
    const uint32_t nlive = b->n;
    uint32_t on[BATCH_CHUNK];
    double E[BATCH_CHUNK], CV[BATCH_CHUNK], e[BATCH_CHUNK], tr[BATCH_CHUNK];
    for (uint32_t li = 0; li < light_count; li++) {
        const uint32_t index = lights[li] & ~BRM_KERNEL_LIT;
        const bool lit = (lights[li] & BRM_KERNEL_LIT) != 0;
        const brm_light *l = &s->lights[index];
        const bool directional = l->type == BRM_LIGHT_DIRECTIONAL;
        const brm_vec3 sun = brm_scale(l->direction, -1.0);
        uint32_t m = 0;
        if (directional) {
            const double e0 = l->illuminance_lux;
            if (e0 <= 0.0) continue;
            for (uint32_t t = 0; t < nlive; t++) on[m] = t, e[m] = e0, m++;
        } else {
            st->falloff(l, b, E, CV);
            for (uint32_t t = 0; t < nlive; t++) {
                on[m] = t, e[m] = E[t];
                m += !(E[t] <= 0.0);
            }
        }
        if (!lit) {
            for (uint32_t t = 0; t < m; t++) pts[t] = smp[b->idx[on[t]]].p;
            m = keep_visible(k, index, pts, m, on, e, NULL, tr);
        }
        for (uint32_t t = 0; t < m; t++) pts[t] = smp[b->idx[on[t]]].p;
        brm_shadow_transmittance_batch(k->shadows, index, pts, m, tr);
        const double col[3] = {l->color.x, l->color.y, l->color.z};
        for (uint32_t t = 0; t < m; t++) {
            const uint32_t i = b->idx[on[t]];
            brm_kernel_iso_sample *q = &smp[i];
            double ee = e[t] * tr[t];
            if (ee <= 0.0) continue;
            /* As in kernel_eval: a light's projection onto Y_lm is e·Y_lm(toward the light). */
            const double rgb[3] = {ee * col[0], ee * col[1], ee * col[2]};
            const double ss[3] = {mp[i].sigma_s.x, mp[i].sigma_s.y, mp[i].sigma_s.z};
            const brm_vec3 u = directional ? sun : brm_v3(b->ux[on[t]], b->uy[on[t]], b->uz[on[t]]);
            double y[4];
            brm_sh4(u, y);
            for (int c = 0; c < 3; c++) {
                double a = ss[c] * rgb[c];
                q->inscatter[c] += a * (1.0 / (4.0 * BRM_PI));
                for (int mm = 0; mm < 4; mm++) q->dir[c][mm] += a * y[mm];
            }
        }
    }
    if (!s->sky.present) return;
    brm_sky_cursor cur;
    brm_sky_cursor_init(&cur);
    for (uint32_t t = 0; t < nlive; t++) {
        const uint32_t i = b->idx[t];
        brm_kernel_iso_sample *q = &smp[i];
        double sky[3][4];
        brm_sky_incident_cursor(k->shadows, &cur, q->p, q->sample_index, sky);
        const double ss[3] = {mp[i].sigma_s.x, mp[i].sigma_s.y, mp[i].sigma_s.z};
        for (int c = 0; c < 3; c++) {
            /* As in kernel_eval: sigma_s/(4π)·∫L dω = sigma_s·L_00·Y00. */
            q->inscatter[c] += ss[c] * sky[c][0] * BRM_SH_C0;
            for (int mm = 0; mm < 4; mm++) q->dir[c][mm] += ss[c] * sky[c][mm];
        }
    }
}

void brm_kernel_eval_iso_batch(const brm_kernel *k, brm_kernel_iso_sample *smp, uint32_t n, const uint32_t *lights,
                               uint32_t light_count, brm_media_point *mp)
{
    const batch_stages st = pick_stages();
    batch_soa b;
    for (uint32_t i0 = 0; i0 < n; i0 += BATCH_CHUNK) {
        uint32_t c = n - i0 < BATCH_CHUNK ? n - i0 : BATCH_CHUNK;
        iso_batch_chunk(k, smp + i0, c, lights, light_count, mp + i0, &st, &b);
    }
}
