/* Deterministic sample sequences. A sample depends only on (key, index), never on which
 * thread computes it or in which order, so bakes are the same bytes at any -j. */
#ifndef BRM_LDS_H
#define BRM_LDS_H

#include <stdint.h>

/* splitmix64 finaliser (Steele, Lea & Flood 2014): a well-mixed 64-bit hash. */
static inline uint64_t brm_hash64(uint64_t x)
{
    x += 0x9e3779b97f4a7c15ull;
    x = (x ^ (x >> 30)) * 0xbf58476d1ce4e5b9ull;
    x = (x ^ (x >> 27)) * 0x94d049bb133111ebull;
    return x ^ (x >> 31);
}

/* Uniform double in [0, 1) from a key. */
static inline double brm_hash_unit(uint64_t key) { return (double)(brm_hash64(key) >> 11) * 0x1.0p-53; }

/* Point i of the R3 sequence (Roberts 2018, "The unreasonable effectiveness of quasirandom
 * sequences": additive recurrence on the generalised golden ratio), shifted by a per-key
 * Cranley-Patterson rotation, in [0, 1)^3. */
void brm_sample3(uint64_t key, uint32_t i, double out[3]);

/* The same in 2-D (R2). */
void brm_sample2(uint64_t key, uint32_t i, double out[2]);

#endif

/* Samples of one cell: S points in [0, 1)^3 forming a centred Latin hypercube (McKay, Beckman
 * & Conover 1979): on each axis exactly one point sits at the centre of each of the S strata,
 * so a quantity that varies along one axis (height fog, attenuation along a light) is
 * integrated with the midpoint rule's O(1/S²) accuracy, while the per-cell random pairing of
 * the axes breaks up the pattern a fixed lattice would print on shadow edges. (Jitter inside
 * the strata was tried: its noise, f'·h/√(12·S), cost half a percent on 0.5 m cells of 2 m
 * height fog.) The permutations depend only on key. out must hold S points; S <= BRM_MAX_CELL_SAMPLES. */
#define BRM_MAX_CELL_SAMPLES 1024
void brm_cell_samples(uint64_t key, uint32_t S, double (*out)[3]);
