// Picks the copy of the lock-step kernels (sampler_groups.inc, sampler_uniform_groups.inc) that
// the CPU runs.
#include "sampler_groups.hpp"
#include "sampler_integer_groups.hpp"
#include "sampler_uniform_groups.hpp"

#include "draw_brackets.hpp"

#include <atomic>
#include <cstring>
#include <stdexcept>

namespace spinfer::detail {

void group_uniform_sweep_generic(GroupUniform&);
void group_uniform_unpack_generic(const UniformLine*, std::int64_t, std::int8_t*, std::int64_t);
void group_general_sweep_generic(GroupGeneral&);
#if defined(__x86_64__) && defined(__GNUC__)
void group_uniform_sweep_avx2(GroupUniform&);
void group_uniform_unpack_avx2(const UniformLine*, std::int64_t, std::int8_t*, std::int64_t);
void group_general_sweep_avx2(GroupGeneral&);
void group_uniform_sweep_avx512(GroupUniform&);
void group_integer_sweep_avx512(GroupInteger&);
void group_integer_unpack_avx512(const std::int8_t*, std::int64_t, std::int8_t*, std::int64_t);
void group_uniform_unpack_avx512(const UniformLine*, std::int64_t, std::int8_t*, std::int64_t);
void group_general_sweep_avx512(GroupGeneral&);
#endif

namespace {

enum class Isa { generic, avx2, avx512 };

Isa widest_isa() {
#if defined(__x86_64__) && defined(__GNUC__)
  static const Isa isa = __builtin_cpu_supports("avx512f") && __builtin_cpu_supports("avx512dq") &&
                                 __builtin_cpu_supports("avx512bw") && __builtin_cpu_supports("avx512vl")
                             ? Isa::avx512
                         : __builtin_cpu_supports("avx2") ? Isa::avx2
                                                          : Isa::generic;
  return isa;
#else
  return Isa::generic;
#endif
}

std::atomic<int> chosen{-1};  // use_group_kernel_isa's choice; -1: the widest

Isa cpu_isa() {
  const int c = chosen.load(std::memory_order_relaxed);
  return c < 0 ? widest_isa() : Isa(c);
}

}  // namespace

void group_uniform_sweep(GroupUniform& a) {
  switch (cpu_isa()) {
#if defined(__x86_64__) && defined(__GNUC__)
    case Isa::avx512: return group_uniform_sweep_avx512(a);
    case Isa::avx2: return group_uniform_sweep_avx2(a);
#endif
    default: return group_uniform_sweep_generic(a);
  }
}

void group_uniform_unpack(const UniformLine* x, std::int64_t n, std::int8_t* out, std::int64_t stride) {
  switch (cpu_isa()) {
#if defined(__x86_64__) && defined(__GNUC__)
    case Isa::avx512: return group_uniform_unpack_avx512(x, n, out, stride);
    case Isa::avx2: return group_uniform_unpack_avx2(x, n, out, stride);
#endif
    default: return group_uniform_unpack_generic(x, n, out, stride);
  }
}

void group_general_sweep(GroupGeneral& a) {
  const AcceptanceTable& table = acceptance_table();
  a.cells = a.gibbs ? table.logistic_cells() : table.decay_cells();
  const DrawBrackets& brackets = draw_brackets();
  a.draw_cells = a.gibbs ? brackets.heat_bath.data() : brackets.metropolis.data();
  switch (cpu_isa()) {
#if defined(__x86_64__) && defined(__GNUC__)
    case Isa::avx512: return group_general_sweep_avx512(a);
    case Isa::avx2: return group_general_sweep_avx2(a);
#endif
    default: return group_general_sweep_generic(a);
  }
}

bool group_integer_available() {
#if defined(__x86_64__) && defined(__GNUC__)
  return cpu_isa() == Isa::avx512;
#else
  return false;
#endif
}

// Integer-field groups are formed only where group_integer_available(), so their kernels have no
// portable copy.
[[noreturn]] static void no_integer_kernel() {
  throw std::logic_error("sampler: the integer-field lock-step kernel needs AVX-512");
}

void group_integer_sweep(GroupInteger& a) {
#if defined(__x86_64__) && defined(__GNUC__)
  if (cpu_isa() == Isa::avx512) return group_integer_sweep_avx512(a);
#endif
  (void)a;
  no_integer_kernel();
}

void group_integer_unpack(const std::int8_t* V, std::int64_t n, std::int8_t* out, std::int64_t stride) {
#if defined(__x86_64__) && defined(__GNUC__)
  if (cpu_isa() == Isa::avx512) return group_integer_unpack_avx512(V, n, out, stride);
#endif
  (void)V, (void)n, (void)out, (void)stride;
  no_integer_kernel();
}

const char* group_kernel_isa() {
  switch (cpu_isa()) {
    case Isa::avx512: return "avx512";
    case Isa::avx2: return "avx2";
    default: return "generic";
  }
}

bool use_group_kernel_isa(const char* name) {
  if (!name) {
    chosen = -1;
    return true;
  }
  const Isa want = std::strcmp(name, "avx512") == 0 ? Isa::avx512
                   : std::strcmp(name, "avx2") == 0 ? Isa::avx2
                   : std::strcmp(name, "generic") == 0 ? Isa::generic
                                                       : Isa(-1);
  if (int(want) < 0 || int(want) > int(widest_isa())) return false;
  chosen = int(want);
  return true;
}

}  // namespace spinfer::detail
