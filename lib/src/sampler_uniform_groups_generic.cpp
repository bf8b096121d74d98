// Baseline copy of the uniform-coupling lock-step kernel; see sampler_uniform_groups.inc.
#define SPINFER_GROUP(name) group_##name##_generic
#include "sampler_uniform_groups.inc"
