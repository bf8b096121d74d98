// AVX2 + FMA copy of the elementwise kernels (compiled with -mavx2 -mfma; called only when the
// CPU reports both); see local_kernels.inc.
#define SPINFER_KERNEL(name) name##_avx2
#include "local_kernels.inc"
