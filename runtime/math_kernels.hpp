// meander's own math kernels (runtime/math_float.inc, and on SSE2 their
// four-lane versions runtime/math_lanes.inc), compiled as C++ for
// the tests and the error measurement. The emitter copies the same text into
// the emitted source (compiler/emit/activations.cpp), so both see one code.
#pragma once

#include <cmath>
#include <cstdint>
#include <cstring>
#if defined(__SSE2__)
#include <emmintrin.h>
#endif

namespace meander::kernels_float {
#include "math_float.inc"
#include "math_lanes.inc"
}  // namespace meander::kernels_float

namespace meander {

// The largest error of each float kernel in units in the last place of the
// exact value, as the emitted banner and README.md state it; checked against
// MPFR by tests/unit/math_kernels.cpp (sampled in CI, every input on demand).
struct KernelBound {
    const char* name;
    double ulp;
};
inline constexpr KernelBound kFloatKernelBounds[] = {
    {"exp", 1.0}, {"expm1", 1.5}, {"tanh", 2.5}, {"sigmoid", 2.5},
    {"softplus", 2.0}, {"silu", 2.5}, {"gelu", 2.5},
};

inline double float_kernel_bound(const char* name) {
    for (const KernelBound& b : kFloatKernelBounds)
        if (std::strcmp(b.name, name) == 0) return b.ulp;
    return 0.0;
}

}  // namespace meander
