#include "base/cpu.h"

static bool baseline_only;

bool brm_cpu_avx2(void)
{
#if defined(__x86_64__) && (defined(__GNUC__) || defined(__clang__))
    return !baseline_only && __builtin_cpu_supports("avx2");
#else
    return false;
#endif
}

void brm_cpu_set_baseline(bool only)
{
    baseline_only = only;
}
