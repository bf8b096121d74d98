// Baseline copy of the lock-step sampler kernels; see sampler_groups.inc.
#define SPINFER_GROUP(name) group_##name##_generic
#include "sampler_groups.inc"
