// AVX-512 copy of the uniform-coupling lock-step kernel (compiled with -mavx512f -mavx512dq
// -mavx512bw -mavx512vl; used only when the CPU has all four); see sampler_uniform_groups.inc.
#define SPINFER_GROUP(name) group_##name##_avx512
#include "sampler_uniform_groups.inc"
