// AVX2 copy of the lock-step sampler kernels (compiled with -mavx2; used only when the CPU has
// it); see sampler_groups.inc.
#define SPINFER_GROUP(name) group_##name##_avx2
#include "sampler_groups.inc"
