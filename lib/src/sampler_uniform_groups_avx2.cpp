// AVX2 copy of the uniform-coupling lock-step kernel (compiled with -mavx2; used only when the CPU
// has it); see sampler_uniform_groups.inc.
#define SPINFER_GROUP(name) group_##name##_avx2
#include "sampler_uniform_groups.inc"
