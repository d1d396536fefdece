# Compile flags for our own targets. Kept in one place so that the library, the CLI,
# the tests and the benchmarks agree.
add_library(apsides_flags INTERFACE)
target_compile_options(apsides_flags INTERFACE -Wall -Wextra -Wpedantic)
if(APSIDES_WERROR)
  target_compile_options(apsides_flags INTERFACE -Werror)
endif()
if(APSIDES_NATIVE)
  target_compile_options(apsides_flags INTERFACE -march=native)
endif()
if(APSIDES_SANITIZE)
  target_compile_options(apsides_flags INTERFACE -fsanitize=address,undefined -fno-omit-frame-pointer -fno-sanitize-recover=undefined)
  target_link_options(apsides_flags INTERFACE -fsanitize=address,undefined)
endif()

# Flags for the numerical kernels only (src/kernels/*.cpp): fast-math lets GCC call
# glibc's vector math library (libmvec) for sin/cos/pow inside loops. Accuracy of each
# kernel is proved in tests against a plain scalar reference; nothing else in the
# project is compiled this way.
set(APSIDES_KERNEL_FLAGS -O3 -ffast-math)
