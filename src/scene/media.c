/* Participating media: density, scattering, phase blending and the noise modulation.
 *
 * These functions run per sample in every inner loop, so they allocate nothing, never divide
 * by a scene constant (brm_media_prepare stores the reciprocals) and test the fog bounds
 * first. The formulas are those of SPEC.md ("Media"). */
#include "scene/media.h"

#include "base/cpu.h"
#include "base/threads.h"

#include <assert.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "base/lds.h"
#include "scene/phase.h"

#if (defined(__x86_64__) || defined(__i386__)) && defined(__GNUC__)
#include <immintrin.h>
#endif

/* Per scene: which media are densities and which are noise, and one permutation table per
 * noise medium (Perlin's improved noise keeps a doubled 256-entry table). */
/* A density medium's coefficients, packed for the density sums (the same values as in its
 * brm_medium, contiguous so the inner loops read a few cache lines). */
typedef struct density_term {
    brm_medium_type type;
    double sigma_t, base_y, inv_scale_height, inv_edge_fade;
    brm_aabb box;
} density_term;

struct brm_noise_table {
    uint32_t density_count, noise_count;
    density_term term[BRM_MAX_MEDIA];       /* the density media, in density_idx order */
    uint8_t density_idx[BRM_MAX_MEDIA];
    uint8_t noise_idx[BRM_MAX_MEDIA];
    double fbm_norm[BRM_MAX_MEDIA];         /* 1 / Σ amplitudes, per medium index */
    uint8_t perm[BRM_MAX_MEDIA][512];       /* per medium index (only noise media filled) */
    /* For the vectorized fBm of brm_media_eval_batch: per entry i the gradient of hash perm[i]
     * coded as three 2-bit indices (g + 1) into {−1, 0, 1}, one per byte (x, y, z), 32 bits
     * for the gathers. */
    int32_t gcode[BRM_MAX_MEDIA][512];
    /* The first two hash levels of each noise medium's cells, for the same fBm: per (X, Y),
     * index X + 256·Y, the bytes perm[A], perm[A + 1], perm[B], perm[B + 1] with A = perm[X] + Y
     * and B = perm[X + 1] + Y (low byte first), so a cell's four z hashes take one lookup.
     * hash2 + hash2_at[mi]·65536 for medium mi; 256 KiB per noise medium. */
    uint32_t hash2_at[BRM_MAX_MEDIA];
    uint32_t hash2[];
};

/* ---- gradient noise -------------------------------------------------------------------- */

/* Perlin 2002, "Improving Noise", SIGGRAPH: quintic fade 6t⁵ − 15t⁴ + 10t³ and twelve edge
 * gradients picked by the low four hash bits. */
static inline double fade(double t) { return t * t * t * (t * (t * 6.0 - 15.0) + 10.0); }

/* The gradient of hash h: u = (h < 8 ? x : y), v = (h < 4 ? y : h is 12 or 14 ? x : z), the
 * result (h & 1 ? −u : u) + (h & 2 ? −v : v), written as a dot product with a table of 0 and ±1
 * so it takes no branch on the hash. Multiplying by ±1 or 0 and adding 0 are exact, and the
 * two terms that remain are added in either order, so the value is the same (up to the sign
 * of a zero, which 1 + strength·n does not keep). */
static const double grad_tab[16][3] = {
    {1, 1, 0},  {-1, 1, 0},  {1, -1, 0},  {-1, -1, 0}, {1, 0, 1},  {-1, 0, 1},  {1, 0, -1},  {-1, 0, -1},
    {0, 1, 1},  {0, -1, 1},  {0, 1, -1},  {0, -1, -1}, {1, 1, 0},  {0, -1, 1},  {-1, 1, 0},  {0, -1, -1}};

static inline double grad(unsigned h, double x, double y, double z)
{
    const double *g = grad_tab[h & 15u];
    return g[0] * x + g[1] * y + g[2] * z;
}

static inline double lerp(double t, double a, double b) { return a + t * (b - a); }

/* Gradient noise has period 256 in each axis (the permutation's size); coordinates far out
 * are folded back into one period so the integer conversions below stay in range. fmod by
 * 256 is exact in binary floating point. */
static inline double fold(double x) { return fabs(x) < 1e9 ? x : fmod(x, 256.0); }

/* One lattice axis of gradient noise at coordinate x: the cell (masked to the period), the
 * offset inside it and its fade. Separate so a lattice of points can compute it once per row. */
typedef struct noise_axis {
    unsigned cell;
    double t, fade;
} noise_axis;

static inline noise_axis noise_axis_at(double x)
{
    int ix = (int)x;
    ix -= x < ix;   /* floor */
    noise_axis a;
    a.cell = (unsigned)ix & 255u;
    a.t = x - ix;
    a.fade = fade(a.t);
    return a;
}

static inline double gradient_noise_axes(const uint8_t *perm, noise_axis ax, noise_axis ay, noise_axis az)
{
    const unsigned X = ax.cell, Y = ay.cell, Z = az.cell;
    const double x = ax.t, y = ay.t, z = az.t, u = ax.fade, v = ay.fade, w = az.fade;
    unsigned A = perm[X] + Y, AA = perm[A] + Z, AB = perm[A + 1] + Z;
    unsigned B = perm[X + 1] + Y, BA = perm[B] + Z, BB = perm[B + 1] + Z;
    return lerp(w,
                lerp(v, lerp(u, grad(perm[AA], x, y, z), grad(perm[BA], x - 1, y, z)),
                     lerp(u, grad(perm[AB], x, y - 1, z), grad(perm[BB], x - 1, y - 1, z))),
                lerp(v, lerp(u, grad(perm[AA + 1], x, y, z - 1), grad(perm[BA + 1], x - 1, y, z - 1)),
                     lerp(u, grad(perm[AB + 1], x, y - 1, z - 1), grad(perm[BB + 1], x - 1, y - 1, z - 1))));
}

/* gradient_noise_axes in two steps, for lattices: the eight corner gradients of cell
 * (X, Y, Z), then the noise at offsets (t, fade) inside it — the same operations, the same
 * value. */
static inline void cell_gradients(const uint8_t *perm, unsigned X, unsigned Y, unsigned Z, const double *gr[8])
{
    unsigned A = perm[X] + Y, AA = perm[A] + Z, AB = perm[A + 1] + Z;
    unsigned B = perm[X + 1] + Y, BA = perm[B] + Z, BB = perm[B + 1] + Z;
    gr[0] = grad_tab[perm[AA] & 15u], gr[1] = grad_tab[perm[BA] & 15u];
    gr[2] = grad_tab[perm[AB] & 15u], gr[3] = grad_tab[perm[BB] & 15u];
    gr[4] = grad_tab[perm[AA + 1] & 15u], gr[5] = grad_tab[perm[BA + 1] & 15u];
    gr[6] = grad_tab[perm[AB + 1] & 15u], gr[7] = grad_tab[perm[BB + 1] & 15u];
}

static inline double grad_dot(const double *g, double x, double y, double z) { return g[0] * x + g[1] * y + g[2] * z; }

static inline double gradient_noise_cell(const double *const gr[8], noise_axis ax, noise_axis ay, noise_axis az)
{
    const double x = ax.t, y = ay.t, z = az.t, u = ax.fade, v = ay.fade, w = az.fade;
    return lerp(w,
                lerp(v, lerp(u, grad_dot(gr[0], x, y, z), grad_dot(gr[1], x - 1, y, z)),
                     lerp(u, grad_dot(gr[2], x, y - 1, z), grad_dot(gr[3], x - 1, y - 1, z))),
                lerp(v, lerp(u, grad_dot(gr[4], x, y, z - 1), grad_dot(gr[5], x - 1, y, z - 1)),
                     lerp(u, grad_dot(gr[6], x, y - 1, z - 1), grad_dot(gr[7], x - 1, y - 1, z - 1))));
}

static inline double gradient_noise(const uint8_t *perm, double x, double y, double z)
{
    return gradient_noise_axes(perm, noise_axis_at(x), noise_axis_at(y), noise_axis_at(z));
}

/* A seeded permutation of 0..255 (Fisher-Yates driven by the splitmix64 hash of seed and
 * step: the same table on every platform), repeated once so indices up to 511 need no mask. */
static void build_permutation(uint8_t perm[512], uint32_t seed)
{
    for (unsigned i = 0; i < 256; i++) perm[i] = (uint8_t)i;
    for (unsigned i = 255; i > 0; i--) {
        uint64_t h = brm_hash64(((uint64_t)seed << 32) | i);
        unsigned j = (unsigned)(h % (i + 1u));
        uint8_t t = perm[i];
        perm[i] = perm[j];
        perm[j] = t;
    }
    memcpy(perm + 256, perm, 256);
}

/* Octave offsets keep the octaves' lattice points (where gradient noise is 0) apart. */
static const double octave_offset[12][3] = {
    {0.0, 0.0, 0.0},       {17.31, 3.77, 41.13},  {5.19, 29.71, 11.47},  {37.93, 23.11, 2.63},
    {13.57, 47.29, 31.41}, {53.83, 7.97, 19.23},  {2.39, 61.07, 43.67},  {71.53, 37.19, 59.03},
    {29.87, 83.41, 67.61}, {89.27, 53.59, 79.37}, {97.13, 73.03, 89.89}, {43.31, 101.17, 103.79}};

static double fbm(const brm_noise_table *t, uint32_t mi, uint32_t octaves, brm_vec3 p)
{
    const uint8_t *perm = t->perm[mi];
    double sum = 0.0, amp = 1.0, freq = 1.0;
    if (octaves > 12) octaves = 12;
    p = brm_v3(fold(p.x), fold(p.y), fold(p.z));
    for (uint32_t o = 0; o < octaves; o++) {
        sum += amp * gradient_noise(perm, fold(p.x * freq + octave_offset[o][0]), fold(p.y * freq + octave_offset[o][1]),
                                    fold(p.z * freq + octave_offset[o][2]));
        amp *= 0.5;
        freq *= 2.0;
    }
    return sum * t->fbm_norm[mi];
}

double brm_noise_fbm(const brm_scene *s, uint32_t medium_index, brm_vec3 p_scaled)
{
    assert(s->media_ready && medium_index < s->medium_count);
    const brm_medium *m = &s->media[medium_index];
    return fbm(s->noise, medium_index, m->octaves, p_scaled);
}

/* ---- preparation ----------------------------------------------------------------------- */

brm_status brm_media_prepare(brm_scene *s, brm_diag *d)
{
    if (s->medium_count > BRM_MAX_MEDIA)
        return brm_diag_error(d, BRM_E_INPUT, "%s: %u media; at most %d are allowed", s->path, s->medium_count,
                              BRM_MAX_MEDIA);
    free(s->noise);
    uint32_t noise_media = 0;
    for (uint32_t i = 0; i < s->medium_count; i++) noise_media += s->media[i].type == BRM_MEDIUM_NOISE;
    s->noise = calloc(1, sizeof *s->noise + (size_t)noise_media * 65536u * sizeof s->noise->hash2[0]);
    s->media_ready = false;
    if (!s->noise) return brm_diag_error(d, BRM_E_NOMEM, "out of memory preparing the media");
    brm_noise_table *t = s->noise;
    for (uint32_t i = 0; i < s->medium_count; i++) {
        brm_medium *m = &s->media[i];
        m->inv_scale_height = m->scale_height_m > 0.0 ? 1.0 / m->scale_height_m : 0.0;
        m->inv_scale_m = m->scale_m > 0.0 ? 1.0 / m->scale_m : 0.0;
        m->inv_edge_fade = m->edge_fade_m > 0.0 ? 1.0 / m->edge_fade_m : 0.0;
        if (m->type == BRM_MEDIUM_NOISE) {
            t->noise_idx[t->noise_count++] = (uint8_t)i;
            build_permutation(t->perm[i], m->seed);
            for (unsigned j = 0; j < 512; j++) {
                const double *g = grad_tab[t->perm[i][j] & 15u];
                t->gcode[i][j] = (int32_t)(g[0] + 1.0) | (int32_t)(g[1] + 1.0) << 8 | (int32_t)(g[2] + 1.0) << 16;
            }
            t->hash2_at[i] = t->noise_count - 1;
            uint32_t *h2 = t->hash2 + (size_t)t->hash2_at[i] * 65536u;
            const uint8_t *pm = t->perm[i];
            for (unsigned y = 0; y < 256; y++)
                for (unsigned x = 0; x < 256; x++) {
                    const unsigned A = pm[x] + y, B = pm[x + 1] + y;
                    h2[x + 256 * y] = (uint32_t)pm[A] | (uint32_t)pm[A + 1] << 8 | (uint32_t)pm[B] << 16 |
                                      (uint32_t)pm[B + 1] << 24;
                }
            uint32_t oct = m->octaves < 1 ? 1 : m->octaves > 12 ? 12 : m->octaves;
            /* Σ_{o<n} 0.5^o = 2 − 2^{1−n} */
            t->fbm_norm[i] = 1.0 / (2.0 - ldexp(1.0, 1 - (int)oct));
        } else if (m->type != BRM_MEDIUM_INVALID) {
            t->term[t->density_count] = (density_term){m->type, m->sigma_t, m->base_y, m->inv_scale_height,
                                                       m->inv_edge_fade, m->box};
            t->density_idx[t->density_count++] = (uint8_t)i;
        }
    }
    s->media_ready = true;
    return BRM_OK;
}

/* ---- density --------------------------------------------------------------------------- */

/* One density medium's extinction at p (before the noise factor); p is inside the fog. The
 * minima are plain comparisons (the coordinates are finite), not calls to fmin. */
static inline double min2(double a, double b) { return b < a ? b : a; }

static inline double density(const density_term *m, brm_vec3 p)
{
    switch (m->type) {
    case BRM_MEDIUM_UNIFORM: return m->sigma_t;
    case BRM_MEDIUM_HEIGHT: {
        double dy = p.y - m->base_y;
        return dy <= 0.0 ? m->sigma_t : m->sigma_t * exp(-dy * m->inv_scale_height);
    }
    case BRM_MEDIUM_BOX: {
        if (!brm_aabb_contains(m->box, p)) return 0.0;
        if (m->inv_edge_fade <= 0.0) return m->sigma_t;
        double e = min2(min2(min2(p.x - m->box.min.x, m->box.max.x - p.x), min2(p.y - m->box.min.y, m->box.max.y - p.y)),
                        min2(p.z - m->box.min.z, m->box.max.z - p.z));
        double f = e * m->inv_edge_fade;
        if (f >= 1.0) return m->sigma_t;
        return m->sigma_t * f * f * (3.0 - 2.0 * f);   /* smoothstep(0, edge_fade_m, e) */
    }
    default: return 0.0;
    }
}

/* Σ density over the density media at p, p inside the fog bounds. */
static inline double density_sum_inside(const brm_noise_table *t, brm_vec3 p)
{
    double sum = 0.0;
    for (uint32_t k = 0; k < t->density_count; k++) sum += density(&t->term[k], p);
    return sum;
}

static inline double noise_factor(const brm_scene *s, brm_vec3 p)
{
    const brm_noise_table *t = s->noise;
    double f = 1.0;
    for (uint32_t k = 0; k < t->noise_count; k++) {
        uint32_t i = t->noise_idx[k];
        const brm_medium *m = &s->media[i];
        double n = fbm(t, i, m->octaves, brm_scale(p, m->inv_scale_m));
        double v = 1.0 + m->strength * n;
        f *= v > 0.0 ? v : 0.0;
    }
    return f;
}

double brm_media_noise_factor(const brm_scene *s, brm_vec3 p)
{
    assert(s->media_ready);
    return noise_factor(s, p);
}

double brm_media_extinction(const brm_scene *s, brm_vec3 p)
{
    assert(s->media_ready);
    if (!brm_aabb_contains(s->fog_bounds, p)) return 0.0;
    const brm_noise_table *t = s->noise;
    double sum = density_sum_inside(t, p);
    if (sum <= 0.0 || t->noise_count == 0) return sum;
    return sum * noise_factor(s, p);
}

/* brm_media_eval's density part at p: out filled as it fills it before the noise factor, the
 * sum of the media present returned. */
static inline double eval_densities(const brm_scene *s, brm_vec3 p, brm_media_point *out)
{
    out->sigma_t = 0.0;
    out->sigma_s = brm_v3(0.0, 0.0, 0.0);
    out->count = 0;
    if (!brm_aabb_contains(s->fog_bounds, p)) return 0.0;
    const brm_noise_table *t = s->noise;
    double sum = 0.0;
    for (uint32_t k = 0; k < t->density_count; k++) {
        uint32_t i = t->density_idx[k];
        double st = density(&t->term[k], p);
        if (st > 0.0) {
            out->medium[out->count] = (uint16_t)i;
            out->sigma_t_each[out->count] = st;
            out->count++;
            sum += st;
        }
    }
    return sum;
}

/* brm_media_eval's last step: the noise factor f applied. */
static inline void eval_finish(const brm_scene *s, double sum, double f, brm_media_point *out)
{
    brm_vec3 ss = brm_v3(0.0, 0.0, 0.0);
    for (uint32_t k = 0; k < out->count; k++) {
        double st = out->sigma_t_each[k] * f;
        out->sigma_t_each[k] = st;
        ss = brm_madd(ss, s->media[out->medium[k]].albedo, st);
    }
    out->sigma_t = sum * f;
    out->sigma_s = ss;
}

void brm_media_eval(const brm_scene *s, brm_vec3 p, brm_media_point *out)
{
    assert(s->media_ready);
    double sum = eval_densities(s, p, out);
    if (out->count == 0) return;
    eval_finish(s, sum, s->noise->noise_count ? noise_factor(s, p) : 1.0, out);
}

brm_vec3 brm_media_scatter_phase(const brm_scene *s, const brm_media_point *mp, double cos_theta)
{
    brm_vec3 r = brm_v3(0.0, 0.0, 0.0);
    for (uint32_t k = 0; k < mp->count; k++) {
        const brm_medium *m = &s->media[mp->medium[k]];
        double w = mp->sigma_t_each[k] * brm_phase_eval(&m->phase, cos_theta);
        r = brm_madd(r, m->albedo, w);
    }
    return r;
}

bool brm_media_any_in(const brm_scene *s, brm_aabb b)
{
    assert(s->media_ready);
    if (!brm_aabb_overlaps(s->fog_bounds, b)) return false;
    brm_aabb c = {brm_vmax(b.min, s->fog_bounds.min), brm_vmin(b.max, s->fog_bounds.max)};
    const brm_noise_table *t = s->noise;
    for (uint32_t k = 0; k < t->density_count; k++) {
        const brm_medium *m = &s->media[t->density_idx[k]];
        if (!(m->sigma_t > 0.0)) continue;
        if (m->type == BRM_MEDIUM_BOX && !brm_aabb_overlaps(m->box, c)) continue;
        /* Uniform and height fog are positive everywhere in the bounds (exp never reaches 0);
         * noise can only scale them, and may be zero in places, so we stay conservative. */
        return true;
    }
    return false;
}

double brm_media_extinction_from_visibility(double visibility_m)
{
    /* Meteorological optical range: the path that leaves 5 % of a collimated beam (CIE
     * e-ILV 17-31-018; WMO), so exp(−sigma_t·V) = 0.05 and sigma_t = ln(20)/V. */
    return log(20.0) / visibility_m;
}

/* ---- the tabulated noise factor ------------------------------------------------------------ */

double brm_media_density_sum(const brm_scene *s, brm_vec3 p)
{
    assert(s->media_ready);
    if (!brm_aabb_contains(s->fog_bounds, p)) return 0.0;
    return density_sum_inside(s->noise, p);
}

static double noise_grid_spacing(const brm_scene *s, uint32_t n[3])
{
    const brm_noise_table *t = s->noise;
    double lambda = HUGE_VAL;
    for (uint32_t k = 0; k < t->noise_count; k++) {
        const brm_medium *m = &s->media[t->noise_idx[k]];
        uint32_t oct = m->octaves ? m->octaves : 1;
        if (oct > 30) oct = 30;
        double l = m->scale_m / (double)(1u << (oct - 1));
        if (l < lambda) lambda = l;
    }
    brm_vec3 ext = brm_sub(s->fog_bounds.max, s->fog_bounds.min);
    /* A third of the finest wavelength: gradient noise has one lattice cell per wavelength
     * and trilinear interpolation of it at h = λ/3 stays within a few percent of the finest
     * octave, whose weight in the fBm is small; optical depths average it further. */
    double h = lambda / 3.0;
    for (;;) {
        uint64_t total = 1;
        for (int a = 0; a < 3; a++) {
            double e = brm_vget(ext, a);
            uint64_t k = (uint64_t)ceil(e / h - 1e-9) + 1;
            if (k < 2) k = 2;
            n[a] = (uint32_t)(k > 0xffffffu ? 0xffffffu : k);
            total *= n[a];
        }
        if (total <= BRM_NOISE_GRID_MAX_NODES) break;
        h *= 1.25;
    }
    return h;
}

size_t brm_noise_grid_memory(const brm_scene *s)
{
    if (!s->media_ready || s->noise->noise_count == 0) return 0;
    uint32_t n[3];
    noise_grid_spacing(s, n);
    return (size_t)n[0] * n[1] * n[2] * sizeof(float);
}

typedef struct grid_job {
    const brm_scene *s;
    brm_noise_grid *g;
    brm_vec3 step;
} grid_job;

/* Noise factors of one z layer of the lattice. The fBm's per-axis work (the lattice cell, the
 * offset in it and its fade, per octave) depends on one coordinate only, so it is computed once
 * per row and column of the layer instead of once per node; the arithmetic is that of fbm(),
 * so every node holds exactly noise_factor() of its point. */
static void grid_slice(void *ctx, uint32_t k, int worker)
{
    (void)worker;
    grid_job *j = ctx;
    brm_noise_grid *g = j->g;
    const brm_scene *s = j->s;
    const brm_noise_table *t = s->noise;
    const uint32_t nx = g->n[0], ny = g->n[1];
    float *out = g->f + (size_t)nx * ny * k;
    uint32_t oct_total = 0;
    for (uint32_t q = 0; q < t->noise_count; q++) {
        uint32_t oc = s->media[t->noise_idx[q]].octaves;
        oct_total += oc > 12 ? 12 : oc;
    }
    noise_axis *tab = malloc(sizeof *tab * ((size_t)oct_total * (nx + ny + 1) + 1));
    if (!tab) {
        for (uint32_t y = 0; y < ny; y++)
            for (uint32_t x = 0; x < nx; x++)
                out[x + (size_t)nx * y] = (float)noise_factor(s, brm_add(g->lo, brm_mul(j->step, brm_v3(x, y, k))));
        return;
    }
    /* tab: per noise medium and octave, nx x-axes, then ny y-axes, then the z-axis. */
    const size_t per_oct = (size_t)nx + ny + 1;
    size_t at = 0;
    for (uint32_t q = 0; q < t->noise_count; q++) {
        const brm_medium *m = &s->media[t->noise_idx[q]];
        uint32_t oc = m->octaves > 12 ? 12 : m->octaves;
        double freq = 1.0;
        for (uint32_t o = 0; o < oc; o++, at += per_oct) {
            for (uint32_t x = 0; x < nx; x++)
                tab[at + x] = noise_axis_at(fold(fold((g->lo.x + j->step.x * x) * m->inv_scale_m) * freq + octave_offset[o][0]));
            for (uint32_t y = 0; y < ny; y++)
                tab[at + nx + y] = noise_axis_at(fold(fold((g->lo.y + j->step.y * y) * m->inv_scale_m) * freq + octave_offset[o][1]));
            tab[at + nx + ny] = noise_axis_at(fold(fold((g->lo.z + j->step.z * k) * m->inv_scale_m) * freq + octave_offset[o][2]));
            freq *= 2.0;
        }
    }
    /* A row at a time, octave by octave: the nodes of a row that share a lattice cell (three
     * and more, the spacing being a third of the finest wavelength) share its eight hashed
     * gradients, taken once per cell. Per node the sums and products run in fbm()'s order. */
    double *fr = malloc(2 * sizeof *fr * nx), *sr = fr ? fr + nx : NULL;
    if (!fr) {
        for (uint32_t y = 0; y < ny; y++)
            for (uint32_t x = 0; x < nx; x++)
                out[x + (size_t)nx * y] = (float)noise_factor(s, brm_add(g->lo, brm_mul(j->step, brm_v3(x, y, k))));
        free(tab);
        return;
    }
    for (uint32_t y = 0; y < ny; y++) {
        for (uint32_t x = 0; x < nx; x++) fr[x] = 1.0;
        const noise_axis *oa = tab;
        for (uint32_t q = 0; q < t->noise_count; q++) {
            const uint32_t mi = t->noise_idx[q];
            const brm_medium *m = &s->media[mi];
            const uint8_t *perm = t->perm[mi];
            uint32_t oc = m->octaves > 12 ? 12 : m->octaves;
            for (uint32_t x = 0; x < nx; x++) sr[x] = 0.0;
            double amp = 1.0;
            for (uint32_t o = 0; o < oc; o++, oa += per_oct) {
                const noise_axis ay = oa[nx + y], az = oa[nx + ny];
                const double *gr[8] = {NULL};
                unsigned cell = UINT32_MAX;
                for (uint32_t x = 0; x < nx; x++) {
                    const noise_axis ax = oa[x];
                    if (ax.cell != cell) {
                        cell = ax.cell;
                        cell_gradients(perm, ax.cell, ay.cell, az.cell, gr);
                    }
                    sr[x] += amp * gradient_noise_cell(gr, ax, ay, az);
                }
                amp *= 0.5;
            }
            for (uint32_t x = 0; x < nx; x++) {
                double v = 1.0 + m->strength * (sr[x] * t->fbm_norm[mi]);
                fr[x] *= v > 0.0 ? v : 0.0;
            }
        }
        for (uint32_t x = 0; x < nx; x++) out[x + (size_t)nx * y] = (float)fr[x];
    }
    free(fr);
    free(tab);
}

brm_status brm_noise_grid_build(const brm_scene *s, int threads, brm_noise_grid *g, brm_diag *d)
{
    memset(g, 0, sizeof *g);
    assert(s->media_ready);
    if (s->noise->noise_count == 0) return BRM_OK;
    noise_grid_spacing(s, g->n);
    brm_vec3 ext = brm_sub(s->fog_bounds.max, s->fog_bounds.min);
    brm_vec3 step = brm_v3(ext.x / (g->n[0] - 1), ext.y / (g->n[1] - 1), ext.z / (g->n[2] - 1));
    g->lo = s->fog_bounds.min;
    g->inv_step = brm_v3(step.x > 0 ? 1.0 / step.x : 0.0, step.y > 0 ? 1.0 / step.y : 0.0, step.z > 0 ? 1.0 / step.z : 0.0);
    size_t nodes = (size_t)g->n[0] * g->n[1] * g->n[2];
    g->f = malloc(nodes * sizeof *g->f);
    if (!g->f) {
        memset(g, 0, sizeof *g);
        return brm_diag_error(d, BRM_E_NOMEM, "media: out of memory for the noise table (%zu nodes)", nodes);
    }
    grid_job j = {s, g, step};
    brm_parallel_for(g->n[2], threads, grid_slice, &j, NULL);
    return BRM_OK;
}

void brm_noise_grid_free(brm_noise_grid *g)
{
    free(g->f);
    memset(g, 0, sizeof *g);
}

/* One axis of the trilinear lookup: the node below x (clamped into the lattice) and the
 * fraction past it. */
static inline uint32_t lattice_axis(double x, uint32_t n, double *frac)
{
    const double hi = (double)(n - 1);
    if (!(x > 0.0)) x = 0.0;
    if (x > hi) x = hi;
    uint32_t i = (uint32_t)x;
    if (i >= n - 1) i = n - 2;
    *frac = x - i;
    return i;
}

double brm_media_extinction_tabulated(const brm_scene *s, const brm_noise_grid *g, brm_vec3 p)
{
    if (!g || !g->f) return brm_media_extinction(s, p);
    if (!brm_aabb_contains(s->fog_bounds, p)) return 0.0;
    double sum = density_sum_inside(s->noise, p);
    if (sum <= 0.0) return 0.0;
    double cx, cy, cz;
    const uint32_t ix = lattice_axis((p.x - g->lo.x) * g->inv_step.x, g->n[0], &cx);
    const uint32_t iy = lattice_axis((p.y - g->lo.y) * g->inv_step.y, g->n[1], &cy);
    const uint32_t iz = lattice_axis((p.z - g->lo.z) * g->inv_step.z, g->n[2], &cz);
    const size_t sy = g->n[0], sz = (size_t)g->n[0] * g->n[1];
    const float *b = g->f + ix + sy * iy + sz * iz;
    double x00 = b[0] + cx * (b[1] - b[0]);
    double x10 = b[sy] + cx * (b[sy + 1] - b[sy]);
    double x01 = b[sz] + cx * (b[sz + 1] - b[sz]);
    double x11 = b[sz + sy] + cx * (b[sz + sy + 1] - b[sz + sy]);
    double y0 = x00 + cy * (x10 - x00), y1 = x01 + cy * (x11 - x01);
    return sum * (y0 + cz * (y1 - y0));
}

/* ---- extinction along a line --------------------------------------------------------------- */

/* Samples per chunk: the per-medium loops run over fixed-length arrays, which gcc vectorizes
 * at -O2 (its cheap cost model wants a known trip count). */
#define LINE_CHUNK 64

/* gcc if-converts the selects below (and so vectorizes their loops) only when it need not
 * keep floating-point exceptions where the source has them: they are never read here, and
 * the values are IEEE's either way (no contraction, no reassociation). */
#if defined(__GNUC__) && !defined(__clang__)
#define LINE_OPTIMIZE __attribute__((optimize("no-trapping-math")))
#else
#define LINE_OPTIMIZE
#endif

/* Loads the eight corners of each sample's noise-table cell: c[q][i] = f[base[i] + offset q]
 * (offsets 0, 1, o1, o1 + 1, o2, o2 + 1, o3, o3 + 1). NULL: the scalar loop. */
typedef void (*corner_fn)(const float *f, size_t o1, size_t o2, size_t o3, const uint32_t *base,
                          float c[8][LINE_CHUNK], uint32_t len);

/* One chunk of brm_media_extinction_line: len ≤ LINE_CHUNK samples from index k0 (the caller
 * pads the last chunk; len a constant where it is inlined, so the loops' counts are known). Every loop is branch-free per sample so it if-converts and vectorizes;
 * compiled twice below, for the SSE2 baseline and for AVX2 (whose gathers serve the noise
 * table's corners). Same operations in the same order on IEEE singles and doubles, no fused
 * multiply-add (ISO C mode keeps contraction off, and the AVX2 copy does not enable FMA): the
 * two give the same bits. */
__attribute__((always_inline)) static inline void line_chunk_body(const brm_noise_table *t, const brm_noise_grid *g,
                                                                  const double o[3], const double d[3],
                                                                  const double lo[3], const double hi[3], double t0,
                                                                  double dt, const double *tv, uint32_t k0,
                                                                  float *out, corner_fn gather8, const uint32_t len)
{
    float px[LINE_CHUNK], py[LINE_CHUNK], pz[LINE_CHUNK], sum[LINE_CHUNK];
    double tt[LINE_CHUNK];
    if (tv)
        for (uint32_t i = 0; i < len; i++) tt[i] = tv[k0 + i];
    else
        for (uint32_t i = 0; i < len; i++) tt[i] = t0 + dt * (double)(k0 + i);
    for (uint32_t i = 0; i < len; i++) {
        double x = o[0] + tt[i] * d[0], y = o[1] + tt[i] * d[1], z = o[2] + tt[i] * d[2];
        x = x < lo[0] ? lo[0] : x, y = y < lo[1] ? lo[1] : y, z = z < lo[2] ? lo[2] : z;
        x = x > hi[0] ? hi[0] : x, y = y > hi[1] ? hi[1] : y, z = z > hi[2] ? hi[2] : z;
        px[i] = (float)x, py[i] = (float)y, pz[i] = (float)z;
        sum[i] = 0.0f;
    }
    /* The chunk's box: each coordinate is a clamped linear function of t, monotone, so with
     * t increasing along the chunk (both callers' order) its extremes are at the chunk's
     * ends. A box medium the chunk's box misses adds nothing. */
    const float bx0 = px[0] < px[len - 1] ? px[0] : px[len - 1], bx1 = px[0] < px[len - 1] ? px[len - 1] : px[0];
    const float by0 = py[0] < py[len - 1] ? py[0] : py[len - 1], by1 = py[0] < py[len - 1] ? py[len - 1] : py[0];
    const float bz0 = pz[0] < pz[len - 1] ? pz[0] : pz[len - 1], bz1 = pz[0] < pz[len - 1] ? pz[len - 1] : pz[0];
    for (uint32_t m = 0; m < t->density_count; m++) {
        const density_term *dm = &t->term[m];
        const float st = (float)dm->sigma_t;
        switch (dm->type) {
        case BRM_MEDIUM_UNIFORM:
            for (uint32_t i = 0; i < len; i++) sum[i] += st;
            break;
        case BRM_MEDIUM_HEIGHT: {
            const float base = (float)dm->base_y, ih = (float)dm->inv_scale_height;
            for (uint32_t i = 0; i < len; i++) {
                const float dy = py[i] - base;
                const float a = dy > 0.0f ? dy * ih : 0.0f;
                sum[i] += st * brm_exp_neg_f(a);
            }
            break;
        }
        case BRM_MEDIUM_BOX: {
            const float x0 = (float)dm->box.min.x, y0 = (float)dm->box.min.y, z0 = (float)dm->box.min.z;
            const float x1 = (float)dm->box.max.x, y1 = (float)dm->box.max.y, z1 = (float)dm->box.max.z;
            if (bx1 < x0 || bx0 > x1 || by1 < y0 || by0 > y1 || bz1 < z0 || bz0 > z1) break;
            if (dm->inv_edge_fade <= 0.0) {
                for (uint32_t i = 0; i < len; i++) {
                    const int in = (px[i] >= x0) & (px[i] <= x1) & (py[i] >= y0) & (py[i] <= y1) & (pz[i] >= z0) &
                                   (pz[i] <= z1);
                    sum[i] += in ? st : 0.0f;
                }
                break;
            }
            const float ie = (float)dm->inv_edge_fade;
            for (uint32_t i = 0; i < len; i++) {
                const float ex0 = px[i] - x0, ex1 = x1 - px[i], ey0 = py[i] - y0, ey1 = y1 - py[i];
                const float ez0 = pz[i] - z0, ez1 = z1 - pz[i];
                float e = ex0 < ex1 ? ex0 : ex1;
                e = ey0 < e ? ey0 : e;
                e = ey1 < e ? ey1 : e;
                e = ez0 < e ? ez0 : e;
                e = ez1 < e ? ez1 : e;
                /* e < 0 outside the box; smoothstep(0, edge_fade_m, e) inside */
                float f = e * ie;
                f = f < 1.0f ? f : 1.0f;
                const float v = st * (f * f * (3.0f - 2.0f * f));
                sum[i] += e >= 0.0f ? v : 0.0f;
            }
            break;
        }
        default:
            break;
        }
    }
    if (!g) {
        for (uint32_t i = 0; i < len; i++) out[i] = sum[i];
        return;
    }
    /* The trilinear noise factor: lattice coordinates in a vectorized loop, the eight corner
     * loads per sample in a scalar one, the interpolation vectorized again. */
    uint32_t base[LINE_CHUNK];
    float cx[LINE_CHUNK], cy[LINE_CHUNK], cz[LINE_CHUNK];
    float c[8][LINE_CHUNK]; /* the corners, x fastest: one base register for all eight rows */
    const float gx = (float)g->lo.x, gy = (float)g->lo.y, gz = (float)g->lo.z;
    const float ix = (float)g->inv_step.x, iy = (float)g->inv_step.y, iz = (float)g->inv_step.z;
    const float hx = (float)(g->n[0] - 1), hy = (float)(g->n[1] - 1), hz = (float)(g->n[2] - 1);
    const int32_t mx = (int32_t)g->n[0] - 2, my = (int32_t)g->n[1] - 2, mz = (int32_t)g->n[2] - 2;
    const int32_t sy = (int32_t)g->n[0], sz = (int32_t)(g->n[0] * g->n[1]);
    const float fsy = (float)sy, fsz = (float)sz;
    for (uint32_t i = 0; i < len; i++) {
        float fx = (px[i] - gx) * ix, fy = (py[i] - gy) * iy, fz = (pz[i] - gz) * iz;
        /* clamps one at a time: max and min instructions, not blends */
        fx = fx > 0.0f ? fx : 0.0f, fy = fy > 0.0f ? fy : 0.0f, fz = fz > 0.0f ? fz : 0.0f;
        fx = fx < hx ? fx : hx, fy = fy < hy ? fy : hy, fz = fz < hz ? fz : hz;
        int32_t jx = (int32_t)fx, jy = (int32_t)fy, jz = (int32_t)fz;
        jx = jx < mx ? jx : mx, jy = jy < my ? jy : my, jz = jz < mz ? jz : mz;
        const float gjx = (float)jx, gjy = (float)jy, gjz = (float)jz;
        cx[i] = fx - gjx, cy[i] = fy - gjy, cz[i] = fz - gjz;
        /* the node index in single precision is exact: the table has under 2^23 nodes */
        base[i] = (uint32_t)(int32_t)(gjx + fsy * gjy + fsz * gjz);
    }
    const float *f = g->f;
    const size_t o1 = (size_t)sy, o2 = (size_t)sz, o3 = (size_t)sy + (size_t)sz;
    if (gather8) {
        gather8(f, o1, o2, o3, base, c, len);
    } else {
        for (uint32_t i = 0; i < len; i++) {
            const float *b = f + base[i];
            c[0][i] = b[0], c[1][i] = b[1], c[2][i] = b[o1], c[3][i] = b[o1 + 1];
            c[4][i] = b[o2], c[5][i] = b[o2 + 1], c[6][i] = b[o3], c[7][i] = b[o3 + 1];
        }
    }
    for (uint32_t i = 0; i < len; i++) {
        const float x00 = c[0][i] + cx[i] * (c[1][i] - c[0][i]), x10 = c[2][i] + cx[i] * (c[3][i] - c[2][i]);
        const float x01 = c[4][i] + cx[i] * (c[5][i] - c[4][i]), x11 = c[6][i] + cx[i] * (c[7][i] - c[6][i]);
        const float y0 = x00 + cy[i] * (x10 - x00), y1 = x01 + cy[i] * (x11 - x01);
        out[i] = sum[i] * (y0 + cz[i] * (y1 - y0));
    }
}

#define LINE_ARGS                                                                                             \
    const brm_noise_table *t, const brm_noise_grid *g, const double o[3], const double d[3], const double lo[3], \
        const double hi[3], double t0, double dt, const double *tv, uint32_t k0, float *out, uint32_t len
/* Two lengths: LINE_CHUNK, and LINE_TAIL for what is left (less padding on short lines). */
#define LINE_TAIL 16
#define LINE_BOTH(gather)                                                                    \
    if (len == LINE_CHUNK)                                                                   \
        line_chunk_body(t, g, o, d, lo, hi, t0, dt, tv, k0, out, gather, LINE_CHUNK);        \
    else                                                                                     \
        line_chunk_body(t, g, o, d, lo, hi, t0, dt, tv, k0, out, gather, LINE_TAIL)
LINE_OPTIMIZE static void line_chunk_sse2(LINE_ARGS) { LINE_BOTH(NULL); }
#if (defined(__x86_64__) || defined(__i386__)) && defined(__GNUC__)
#define LINE_HAVE_AVX2 1
/* The corners by AVX2 gathers, eight samples at a time (the same values as the scalar loads;
 * the table has at most 2^23 nodes, so the indices fit the gathers' signed 32 bits). */
__attribute__((target("avx2"))) static void corners_avx2(const float *f, size_t o1, size_t o2, size_t o3,
                                                          const uint32_t *base, float c[8][LINE_CHUNK], uint32_t len)
{
    /* Each corner pair along x (c000 and c100, ...) is adjacent in the table: one 64-bit
     * gather element fetches both, four samples a gather, then the pairs are split into
     * their two rows and put back in sample order. */
    const double *src[4] = {(const double *)(const void *)f, (const double *)(const void *)(f + o1),
                            (const double *)(const void *)(f + o2), (const double *)(const void *)(f + o3)};
    for (uint32_t i = 0; i < len; i += 8) {
        const __m128i b0 = _mm_loadu_si128((const __m128i *)(const void *)(base + i));
        const __m128i b1 = _mm_loadu_si128((const __m128i *)(const void *)(base + i + 4));
        for (int r = 0; r < 4; r++) {
            const __m256 a = _mm256_castpd_ps(_mm256_i32gather_pd(src[r], b0, 4));
            const __m256 b = _mm256_castpd_ps(_mm256_i32gather_pd(src[r], b1, 4));
            /* a = (x0 y0 x1 y1 | x2 y2 x3 y3), b the same for samples 4..7 */
            const __m256 lo = _mm256_shuffle_ps(a, b, 0x88), hi = _mm256_shuffle_ps(a, b, 0xDD);
            /* (s0 s1 s4 s5 | s2 s3 s6 s7) -> (s0 .. s7) */
            _mm256_storeu_ps(&c[2 * r][i], _mm256_castpd_ps(_mm256_permute4x64_pd(_mm256_castps_pd(lo), 0xD8)));
            _mm256_storeu_ps(&c[2 * r + 1][i], _mm256_castpd_ps(_mm256_permute4x64_pd(_mm256_castps_pd(hi), 0xD8)));
        }
    }
}
__attribute__((target("avx2"))) LINE_OPTIMIZE static void line_chunk_avx2(LINE_ARGS)
{
    LINE_BOTH(corners_avx2);
}
#endif

/* Both public calls: samples at t0 + k·dt, or at tv[k] when tv is not NULL. */
static int extinction_batch(const brm_scene *s, const brm_noise_grid *g, brm_vec3 o, brm_vec3 d, double t0, double dt,
                            const double *tv, uint32_t n, float *out, int simd)
{
    assert(s->media_ready);
    const brm_noise_table *t = s->noise;
    if (t->noise_count > 0 && (!g || !g->f)) { /* exact noise: per point */
        for (uint32_t k = 0; k < n; k++) {
            brm_vec3 q = brm_madd(o, d, tv ? tv[k] : t0 + dt * (double)k);
            out[k] = (float)brm_media_extinction(s, brm_vmin(brm_vmax(q, s->fog_bounds.min), s->fog_bounds.max));
        }
        return 0;
    }
    if (t->noise_count == 0) g = NULL;
    const double oo[3] = {o.x, o.y, o.z}, dd[3] = {d.x, d.y, d.z};
    const double lo[3] = {s->fog_bounds.min.x, s->fog_bounds.min.y, s->fog_bounds.min.z};
    const double hi[3] = {s->fog_bounds.max.x, s->fog_bounds.max.y, s->fog_bounds.max.z};
    void (*chunk)(LINE_ARGS) = line_chunk_sse2;
    int used = 0;
#ifdef LINE_HAVE_AVX2
    if (simd && brm_cpu_avx2()) chunk = line_chunk_avx2, used = 1;
#else
    (void)simd;
#endif
    uint32_t k = 0;
    for (; k + LINE_CHUNK <= n; k += LINE_CHUNK) chunk(t, g, oo, dd, lo, hi, t0, dt, tv, k, out + k, LINE_CHUNK);
    for (; k + LINE_TAIL <= n; k += LINE_TAIL) chunk(t, g, oo, dd, lo, hi, t0, dt, tv, k, out + k, LINE_TAIL);
    if (k < n) {
        float tail[LINE_TAIL];
        double ttail[LINE_TAIL];
        if (tv) { /* pad by repeating the last point: the chunk's box stays the points' */
            for (uint32_t i = 0; i < LINE_TAIL; i++) ttail[i] = tv[k + i < n ? k + i : n - 1];
            chunk(t, g, oo, dd, lo, hi, t0, dt, ttail, 0, tail, LINE_TAIL);
        } else {
            chunk(t, g, oo, dd, lo, hi, t0, dt, NULL, k, tail, LINE_TAIL);
        }
        memcpy(out + k, tail, (n - k) * sizeof *out);
    }
    return used;
}

int brm_media_extinction_line_simd(const brm_scene *s, const brm_noise_grid *g, brm_vec3 o, brm_vec3 d, double t0,
                                   double dt, uint32_t n, float *out, int simd)
{
    return extinction_batch(s, g, o, d, t0, dt, NULL, n, out, simd);
}

void brm_media_extinction_line(const brm_scene *s, const brm_noise_grid *g, brm_vec3 o, brm_vec3 d, double t0,
                               double dt, uint32_t n, float *out)
{
    extinction_batch(s, g, o, d, t0, dt, NULL, n, out, 1);
}

void brm_media_extinction_points(const brm_scene *s, const brm_noise_grid *g, brm_vec3 o, brm_vec3 d, const double *t,
                                 uint32_t n, float *out)
{
    extinction_batch(s, g, o, d, 0.0, 0.0, t, n, out, 1);
}

/* ---- exact media at many points ------------------------------------------------------------ */

/* Points per pass of brm_media_eval_batch (its stage arrays live on the stack), padded by up
 * to three copies of the last point for the four-wide fBm. */
#define EVAL_CHUNK 128

/* The fBm of noise medium mi (octaves clamped as fbm() clamps them) at the scaled points
 * (x[j], y[j], z[j]), j < m: out[j] = fbm(t, mi, octaves, (x, y, z)[j]). The arrays hold m
 * rounded up to four entries. */
typedef void (*fbm_batch_fn)(const brm_noise_table *t, uint32_t mi, uint32_t octaves, const double *x,
                             const double *y, const double *z, uint32_t m, double *out);

static void fbm_batch_scalar(const brm_noise_table *t, uint32_t mi, uint32_t octaves, const double *x,
                             const double *y, const double *z, uint32_t m, double *out)
{
    for (uint32_t j = 0; j < m; j++) out[j] = fbm(t, mi, octaves, brm_v3(x[j], y[j], z[j]));
}

#if (defined(__x86_64__) || defined(__i386__)) && defined(__GNUC__)
#define EVAL_HAVE_AVX2 1
#define EVAL_AVX2 __attribute__((target("avx2")))

/* Four points' lattice axis (noise_axis_at): the floor fl as a double (the exact integer
 * (int)x − (x < (int)x), so x − fl is the scalar x − ix), the cell masked to the period, the
 * offset and its fade, by the same operations. */
EVAL_AVX2 static inline void axis4(__m256d x, __m128i *cell, __m256d *t, __m256d *fd)
{
    const __m256d tr = _mm256_cvtepi32_pd(_mm256_cvttpd_epi32(x));
    const __m256d fl = _mm256_add_pd(tr, _mm256_and_pd(_mm256_cmp_pd(x, tr, _CMP_LT_OQ), _mm256_set1_pd(-1.0)));
    *cell = _mm_and_si128(_mm256_cvttpd_epi32(fl), _mm_set1_epi32(255));
    const __m256d a = _mm256_sub_pd(x, fl);
    /* fade: a·a·a·(a·(a·6 − 15) + 10), left to right as in C */
    const __m256d inner = _mm256_add_pd(
        _mm256_mul_pd(a, _mm256_sub_pd(_mm256_mul_pd(a, _mm256_set1_pd(6.0)), _mm256_set1_pd(15.0))),
        _mm256_set1_pd(10.0));
    *t = a;
    *fd = _mm256_mul_pd(_mm256_mul_pd(_mm256_mul_pd(a, a), a), inner);
}

/* tab[i] and tab[i + 1] for four indices by one 64-bit gather: *lo the first, *hi the second. */
EVAL_AVX2 static inline void gather_pair(const int32_t *tab, __m128i i, __m128i *lo, __m128i *hi)
{
    const __m256i g = _mm256_i32gather_epi64((const long long *)(const void *)tab, i, 4);
    const __m256i s = _mm256_permutevar8x32_epi32(g, _mm256_setr_epi32(0, 2, 4, 6, 1, 3, 5, 7));
    *lo = _mm256_castsi256_si128(s);
    *hi = _mm256_extracti128_si256(s, 1);
}

/* grad_dot of the coded gradient c (gcode) and (x, y, z): the components −1, 0 or 1 exactly,
 * then g0·x + g1·y + g2·z in that order. */
EVAL_AVX2 static inline __m256d grad4(__m128i c, __m256d x, __m256d y, __m256d z)
{
    const __m128 tab = _mm_setr_ps(-1.0f, 0.0f, 1.0f, 0.0f);
    const __m256d gx = _mm256_cvtps_pd(_mm_permutevar_ps(tab, c));
    const __m256d gy = _mm256_cvtps_pd(_mm_permutevar_ps(tab, _mm_srli_epi32(c, 8)));
    const __m256d gz = _mm256_cvtps_pd(_mm_permutevar_ps(tab, _mm_srli_epi32(c, 16)));
    return _mm256_add_pd(_mm256_add_pd(_mm256_mul_pd(gx, x), _mm256_mul_pd(gy, y)), _mm256_mul_pd(gz, z));
}

EVAL_AVX2 static inline __m256d lerp4(__m256d t, __m256d a, __m256d b)
{
    return _mm256_add_pd(a, _mm256_mul_pd(t, _mm256_sub_pd(b, a)));
}

/* fold() for four values: 1 when all are already inside (|v| < 1e9, the common case), else 0
 * (the caller then takes the scalar path for these points). */
EVAL_AVX2 static inline int inside4(__m256d v)
{
    const __m256d a = _mm256_andnot_pd(_mm256_set1_pd(-0.0), v);
    return _mm256_movemask_pd(_mm256_cmp_pd(a, _mm256_set1_pd(1e9), _CMP_LT_OQ)) == 0xF;
}

/* fbm() four points at a time: the same IEEE operations in the same order (gradient_noise_axes
 * corner by corner, lerps in its nesting), the hashes read by gathers (hash2, gcode). No fused
 * multiply-add: the target enables AVX2 only, and the products and sums are separate
 * intrinsics. Octave by octave over all the points, each in two passes: the lattice cells and
 * the gathers of their hashes (short independent iterations, so many gathers are in flight),
 * then the arithmetic. */
EVAL_AVX2 static void fbm_batch_avx2(const brm_noise_table *t, uint32_t mi, uint32_t octaves, const double *x,
                                     const double *y, const double *z, uint32_t m, double *out)
{
    enum { G = (EVAL_CHUNK + 3) / 4 };
    const uint32_t *h2 = t->hash2 + (size_t)t->hash2_at[mi] * 65536u;
    const int32_t *gc = t->gcode[mi];
    if (octaves > 12) octaves = 12;
    const uint32_t groups = (m + 3) / 4;
    assert(groups <= G);
    const __m256d one = _mm256_set1_pd(1.0), norm = _mm256_set1_pd(t->fbm_norm[mi]);
    const __m128i byte = _mm_set1_epi32(255);
    __m256d sum[G], ax[G][6]; /* per group: the offsets x, y, z and their fades u, v, w */
    __m128i code[G][8];       /* the eight corners' coded gradients, gradient_noise_axes's order */
    int ok[G];
    for (uint32_t g = 0; g < groups; g++) {
        ok[g] = inside4(_mm256_loadu_pd(x + 4 * g)) & inside4(_mm256_loadu_pd(y + 4 * g)) &
                inside4(_mm256_loadu_pd(z + 4 * g));
        sum[g] = _mm256_setzero_pd();
    }
    double amp = 1.0, freq = 1.0;
    for (uint32_t o = 0; o < octaves; o++) {
        const __m256d f = _mm256_set1_pd(freq);
        const __m256d ox = _mm256_set1_pd(octave_offset[o][0]), oy = _mm256_set1_pd(octave_offset[o][1]),
                      oz = _mm256_set1_pd(octave_offset[o][2]);
        for (uint32_t g = 0; g < groups; g++) {
            const __m256d cx = _mm256_add_pd(_mm256_mul_pd(_mm256_loadu_pd(x + 4 * g), f), ox);
            const __m256d cy = _mm256_add_pd(_mm256_mul_pd(_mm256_loadu_pd(y + 4 * g), f), oy);
            const __m256d cz = _mm256_add_pd(_mm256_mul_pd(_mm256_loadu_pd(z + 4 * g), f), oz);
            ok[g] &= inside4(cx) & inside4(cy) & inside4(cz);
            __m128i X, Y, Z;
            axis4(cx, &X, &ax[g][0], &ax[g][3]);
            axis4(cy, &Y, &ax[g][1], &ax[g][4]);
            axis4(cz, &Z, &ax[g][2], &ax[g][5]);
            /* A = perm[X] + Y, B = perm[X + 1] + Y; AA = perm[A] + Z, AB = perm[A + 1] + Z, BA =
             * perm[B] + Z, BB = perm[B + 1] + Z: the four bytes of hash2 at (X, Y) */
            const __m128i h = _mm_i32gather_epi32((const int *)(const void *)h2,
                                                  _mm_add_epi32(X, _mm_slli_epi32(Y, 8)), 4);
            const __m128i AA = _mm_add_epi32(_mm_and_si128(h, byte), Z);
            const __m128i AB = _mm_add_epi32(_mm_and_si128(_mm_srli_epi32(h, 8), byte), Z);
            const __m128i BA = _mm_add_epi32(_mm_and_si128(_mm_srli_epi32(h, 16), byte), Z);
            const __m128i BB = _mm_add_epi32(_mm_srli_epi32(h, 24), Z);
            gather_pair(gc, AA, &code[g][0], &code[g][4]);
            gather_pair(gc, BA, &code[g][1], &code[g][5]);
            gather_pair(gc, AB, &code[g][2], &code[g][6]);
            gather_pair(gc, BB, &code[g][3], &code[g][7]);
        }
        const __m256d a = _mm256_set1_pd(amp);
        for (uint32_t g = 0; g < groups; g++) {
            const __m256d tx = ax[g][0], ty = ax[g][1], tz = ax[g][2], u = ax[g][3], v = ax[g][4], w = ax[g][5];
            const __m128i *c = code[g];
            const __m256d x1 = _mm256_sub_pd(tx, one), y1 = _mm256_sub_pd(ty, one), z1 = _mm256_sub_pd(tz, one);
            const __m256d n = lerp4(
                w,
                lerp4(v, lerp4(u, grad4(c[0], tx, ty, tz), grad4(c[1], x1, ty, tz)),
                      lerp4(u, grad4(c[2], tx, y1, tz), grad4(c[3], x1, y1, tz))),
                lerp4(v, lerp4(u, grad4(c[4], tx, ty, z1), grad4(c[5], x1, ty, z1)),
                      lerp4(u, grad4(c[6], tx, y1, z1), grad4(c[7], x1, y1, z1))));
            sum[g] = _mm256_add_pd(sum[g], _mm256_mul_pd(a, n));
        }
        amp *= 0.5;
        freq *= 2.0;
    }
    for (uint32_t g = 0; g < groups; g++) {
        if (ok[g]) {
            _mm256_storeu_pd(out + 4 * g, _mm256_mul_pd(sum[g], norm));
        } else { /* a coordinate needs fold()'s fmod: these four the scalar way */
            for (uint32_t q = 4 * g; q < 4 * g + 4; q++) out[q] = fbm(t, mi, octaves, brm_v3(x[q], y[q], z[q]));
        }
    }
}
#endif

int brm_media_eval_batch_simd(const brm_scene *s, const brm_vec3 *p, uint32_t n, brm_media_point *out, int simd)
{
    assert(s->media_ready);
    const brm_noise_table *t = s->noise;
    fbm_batch_fn fb = fbm_batch_scalar;
    int used = 0;
#ifdef EVAL_HAVE_AVX2
    if (simd && brm_cpu_avx2()) fb = fbm_batch_avx2, used = 1;
#else
    (void)simd;
#endif
    uint32_t need[EVAL_CHUNK];
    double sum[EVAL_CHUNK], f[EVAL_CHUNK];
    double x[EVAL_CHUNK + 3], y[EVAL_CHUNK + 3], z[EVAL_CHUNK + 3], nv[EVAL_CHUNK + 3];
    for (uint32_t i0 = 0; i0 < n; i0 += EVAL_CHUNK) {
        const uint32_t len = n - i0 < EVAL_CHUNK ? n - i0 : EVAL_CHUNK;
        uint32_t m = 0;
        for (uint32_t i = i0; i < i0 + len; i++) {
            const double sm = eval_densities(s, p[i], &out[i]);
            if (out[i].count == 0) continue;
            if (t->noise_count == 0) {
                eval_finish(s, sm, 1.0, &out[i]);
                continue;
            }
            need[m] = i, sum[m] = sm, f[m] = 1.0;
            m++;
        }
        if (m == 0) continue;
        /* noise_factor, medium by medium over the points that need it */
        for (uint32_t k = 0; k < t->noise_count; k++) {
            const uint32_t mi = t->noise_idx[k];
            const brm_medium *md = &s->media[mi];
            for (uint32_t j = 0; j < m; j++) {
                const brm_vec3 q = brm_scale(p[need[j]], md->inv_scale_m);
                x[j] = q.x, y[j] = q.y, z[j] = q.z;
            }
            for (uint32_t j = m; j < (m + 3u) / 4u * 4u; j++) x[j] = x[m - 1], y[j] = y[m - 1], z[j] = z[m - 1];
            fb(t, mi, md->octaves, x, y, z, m, nv);
            for (uint32_t j = 0; j < m; j++) {
                const double v = 1.0 + md->strength * nv[j];
                f[j] *= v > 0.0 ? v : 0.0;
            }
        }
        for (uint32_t j = 0; j < m; j++) eval_finish(s, sum[j], f[j], &out[need[j]]);
    }
    return used;
}

void brm_media_eval_batch(const brm_scene *s, const brm_vec3 *p, uint32_t n, brm_media_point *out)
{
    brm_media_eval_batch_simd(s, p, n, out, 1);
}
