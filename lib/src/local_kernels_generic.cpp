// Baseline (SSE2) copy of the elementwise kernels; see local_kernels.inc.
#define SPINFER_KERNEL(name) name##_generic
#include "local_kernels.inc"
