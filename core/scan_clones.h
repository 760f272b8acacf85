// PLUMB_SCAN_CLONES: the scan kernels (core/float_kernel.cc, core/int8_kernel.cc) compiled
// twice, one clone for AVX2 machines (x86-64-v3) and one for baseline x86-64; the dynamic
// loader picks one at start-up, so a generic build still uses the wide registers where they
// exist. FMA contraction is off for those files (see core/CMakeLists.txt), so both clones
// round identically. Internal to core/.
//
// Not under the sanitizers: the loader runs the clones' resolver before the sanitizer's
// runtime is set up, and an instrumented resolver can crash there (every Tsan test binary
// did).
#pragma once

#if defined(__x86_64__) && defined(__GNUC__) && !defined(__clang__) && \
    !defined(__SANITIZE_ADDRESS__) && !defined(__SANITIZE_THREAD__)
#define PLUMB_SCAN_CLONES __attribute__((target_clones("arch=x86-64-v3", "default")))
#else
#define PLUMB_SCAN_CLONES
#endif
