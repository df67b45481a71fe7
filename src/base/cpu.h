/* Which instruction-set paths the baker takes.
 *
 * The baker's vector paths (AVX2, chosen at run time) give the same bits as its baseline paths
 * (SSE2, which every x86-64 processor has): the same IEEE operations in the same order, no
 * contraction into fused multiply-adds. So a bake is the same bytes on any processor. Tests
 * check that claim by baking with the vector paths switched off and comparing the bytes. */
#ifndef BRM_BASE_CPU_H
#define BRM_BASE_CPU_H

#include <stdbool.h>

/* True when the processor has AVX2 and the vector paths are not switched off. */
bool brm_cpu_avx2(void);

/* Switches the vector paths off (true) or back on (false). For tests and diagnosis; set it
 * while no bake runs (it is read without synchronisation). */
void brm_cpu_set_baseline(bool baseline_only);

#endif
