# Compile flags for our own targets. Kept in one place so that the library, the CLI,
# the tests and the benchmarks agree.
#
#   apsides_flags_base  warnings, -Werror (APSIDES_WERROR), sanitizers (APSIDES_SANITIZE):
#                       every target of ours.
#   apsides_flags       the base plus -march=native when APSIDES_NATIVE (default ON): the
#                       library's ordinary code, the CLI, tests and benchmarks.
#
# The SIMD kernels (the object library apsides_kernels in src/CMakeLists.txt: Kepler
# solve, likelihood, exact periodogram) take only the base flags plus
# APSIDES_KERNEL_FLAGS, never -march=native: Highway compiles them once per instruction
# set (AVX-512, AVX2 + FMA, SSE4, scalar; NEON / SVE on ARM), each function with its own
# target attribute, and picks one at run time. -march=native there would let the
# compiler put the build machine's instructions into the lower targets (GCC adds a
# function's target attribute to the command-line ISA) and would drop the lower targets
# from the build altogether, so one binary would again run only where it was built. The
# kernels are therefore the same in the native and the portable build; what
# APSIDES_NATIVE changes is everything else (Eigen, the samplers' bookkeeping, ...).
add_library(apsides_flags_base INTERFACE)
target_compile_options(apsides_flags_base INTERFACE -Wall -Wextra -Wpedantic)
if(APSIDES_WERROR)
  target_compile_options(apsides_flags_base INTERFACE -Werror)
endif()
if(APSIDES_SANITIZE)
  target_compile_options(apsides_flags_base INTERFACE -fsanitize=address,undefined -fno-omit-frame-pointer -fno-sanitize-recover=undefined)
  target_link_options(apsides_flags_base INTERFACE -fsanitize=address,undefined)
endif()

add_library(apsides_flags INTERFACE)
target_link_libraries(apsides_flags INTERFACE apsides_flags_base)
if(APSIDES_NATIVE)
  target_compile_options(apsides_flags INTERFACE -march=native)
endif()

# Flags for the SIMD kernels only. No -ffast-math: the vector code is written with
# Highway's explicit operations and needs no licence from the compiler to vectorise, and
# fast-math would let GCC assume no NaN/inf (a NaN parameter must give a NaN likelihood
# that the samplers reject, not whatever the folded code gives). HWY_DISABLED_TARGETS
# drops SSSE3 (a CPU with SSSE3 but not SSE4.2 is 2008-vintage; it gets the scalar
# code), which saves one compilation of every kernel.
set(APSIDES_KERNEL_FLAGS -O3)
set(APSIDES_KERNEL_DEFINITIONS HWY_DISABLED_TARGETS=HWY_SSSE3)
