/* Sky light at a point, blocked by geometry, projected on SH bands 0–1.
 *
 * The unoccluded sky's projection is exact (closed form below). Occlusion is estimated with a
 * few rays per call against the scene's BVH: a blocked ray subtracts its share of the
 * projection, so an open point costs nothing in noise and a point with every ray blocked
 * (inside a closed room) gets exactly zero. */
#include <math.h>
#include <string.h>

#include "base/lds.h"
#include "base/sh.h"
#include "shadow/shadow_internal.h"

/* SPEC.md: L(ω) = H + (Z − H)·max(y, 0) + (G − H)·max(−y, 0). With a = Z − H, b = G − H and the
 * hemisphere integrals ∫_{y>0} dω = 2π, ∫_{y>0} y dω = π, ∫_{y>0} y² dω = 2π/3 (elementary:
 * dω = dy dφ for y the polar cosine), the projections on Y00 = C0 and Y1,−1 = C1·y are
 *   ∫ L Y00 dω  = C0·(4πH + πa + πb)
 *   ∫ L Y1−1 dω = C1·(2π/3)·(a − b)
 * and those on C1·z, C1·x vanish by symmetry about the y axis. */
void brm_sky_projection(const brm_sky *sky, double out[3][4])
{
    memset(out, 0, sizeof(double) * 12);
    if (!sky->present) return;
    double H[3] = {sky->horizon.x, sky->horizon.y, sky->horizon.z};
    double Z[3] = {sky->zenith.x, sky->zenith.y, sky->zenith.z};
    double G[3] = {sky->ground.x, sky->ground.y, sky->ground.z};
    for (int c = 0; c < 3; c++) {
        double a = Z[c] - H[c], b = G[c] - H[c];
        out[c][0] = BRM_SH_C0 * BRM_PI * (4.0 * H[c] + a + b);
        out[c][1] = BRM_SH_C1 * (2.0 * BRM_PI / 3.0) * (a - b);
    }
}

/* Ray k of n for one call: a spherical Fibonacci set (one ray per equal-area band in y, the
 * golden angle apart in azimuth), shifted by a per-call Cranley–Patterson offset from the R2
 * sequence so successive sample_index values cover the sphere evenly and deterministically. */
static brm_vec3 sky_dir(uint32_t k, uint32_t n, const double shift[2])
{
    static const double golden = 0.61803398874989484820; /* (√5 − 1)/2 */
    double u = ((double)k + shift[0]) / (double)n;
    double w = shift[1] + golden * (double)k;
    w -= floor(w);
    double y = 1.0 - 2.0 * u, r = sqrt(fmax(0.0, 1.0 - y * y)), phi = 2.0 * BRM_PI * w;
    return brm_v3(r * cos(phi), y, r * sin(phi));
}

void brm_sky_incident(const brm_shadow_set *ss, brm_vec3 p, uint32_t sample_index, double out[3][4])
{
    if (!ss->sky_present) {
        memset(out, 0, sizeof(double) * 12);
        return;
    }
    memcpy(out, ss->sky_proj, sizeof(double) * 12);
    if (!ss->sky_trace) return;
    const brm_sky *sky = &ss->scene->sky;
    uint32_t n = ss->sky_rays, blocked = 0;
    double shift[2];
    brm_sample2(0x736b79ull /* "sky" */, sample_index, shift);
    double share = 4.0 * BRM_PI / (double)n;
    for (uint32_t k = 0; k < n; k++) {
        brm_vec3 d = sky_dir(k, n, shift);
        if (!brm_bvh_occluded(ss->bvh, p, d, ss->eps, HUGE_VAL)) continue;
        blocked++;
        brm_vec3 L = brm_sky_radiance(sky, d);
        double y[4];
        brm_sh4(d, y);
        double Lc[3] = {L.x, L.y, L.z};
        for (int c = 0; c < 3; c++)
            for (int m = 0; m < 4; m++) out[c][m] -= share * Lc[c] * y[m];
    }
    if (blocked == n) memset(out, 0, sizeof(double) * 12);
}
