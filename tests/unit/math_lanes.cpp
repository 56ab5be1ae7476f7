// The four-lane SSE2 kernels (runtime/math_lanes.inc) against the float
// kernels they stand for (runtime/math_float.inc, whose errors
// tests/unit/math_kernels.cpp measures against MPFR): the same bits in every
// lane, whatever the other lanes hold. CI runs a sample: every float32 bit
// pattern with a fixed stride, four neighbours to a group, and groups that mix
// the vector path with NaN, infinities, the saturation ranges and the
// subnormals; DISABLED_Exhaustive runs all 2^32 patterns
// (`build/tests/test_math_lanes --gtest_also_run_disabled_tests`, about a
// minute per kernel on one core).
#include <gtest/gtest.h>

#include <cmath>
#include <cstdint>
#include <cstdio>
#include <limits>
#include <random>
#include <string>
#include <vector>

#include "runtime/math_kernels.hpp"

namespace {

namespace k = meander::kernels_float;

#if defined(__SSE2__)

struct LaneKernel {
    const char* name;
    float (*scalar)(float);
    void (*lanes)(float*);
};

const std::vector<LaneKernel>& lane_kernels() {
    static const std::vector<LaneKernel> all = {
        {"tanh", [](float x) { return k::act_tanh(x); }, [](float* y) { k::act_tanh4(y); }},
        {"sigmoid", [](float x) { return k::act_sigmoid(x); }, [](float* y) { k::act_sigmoid4(y); }},
        {"softplus", [](float x) { return k::act_softplus(x); }, [](float* y) { k::act_softplus4(y); }},
        {"silu", [](float x) { return k::act_silu(x); }, [](float* y) { k::act_silu4(y); }},
    };
    return all;
}

// Runs one group through the lanes and compares each lane with the scalar
// kernel; returns the number of lanes that differ (the first few are reported).
int compare_group(const LaneKernel& kern, const float (&in)[4], int& reported) {
    float y[4] = {in[0], in[1], in[2], in[3]};
    kern.lanes(y);
    int bad = 0;
    for (int i = 0; i < 4; ++i) {
        const float want = kern.scalar(in[i]);
        if (k::bits_of(y[i]) != k::bits_of(want)) {
            ++bad;
            if (reported++ < 5)
                ADD_FAILURE() << kern.name << " lane " << i << ": input bits 0x" << std::hex << k::bits_of(in[i])
                              << " gives 0x" << k::bits_of(y[i]) << ", the scalar kernel 0x" << k::bits_of(want);
        }
    }
    return bad;
}

TEST(MathLanes, SameBitsAsScalarOnAStride) {
    for (const LaneKernel& kern : lane_kernels()) {
        int reported = 0, bad = 0;
        // Groups of four neighbouring patterns, every 509th group: about 8.4 million inputs.
        for (std::uint64_t g = 0; g < (std::uint64_t{1} << 30); g += 509) {
            const std::uint32_t b = static_cast<std::uint32_t>(g * 4);
            const float in[4] = {k::float_of(b), k::float_of(b + 1), k::float_of(b + 2), k::float_of(b + 3)};
            bad += compare_group(kern, in, reported);
        }
        EXPECT_EQ(bad, 0) << kern.name;
    }
}

TEST(MathLanes, SameBitsInMixedGroups) {
    const float inf = std::numeric_limits<float>::infinity();
    const float nan = std::numeric_limits<float>::quiet_NaN();
    const float den = std::numeric_limits<float>::denorm_min();
    // Values on each side of every kernel's vector range (0.55, 9.1, 16, 20,
    // 87), the special values, and ordinary ones.
    const std::vector<float> pool = {0.0f,  -0.0f,  den,    -den,   1e-30f, -1e-30f, 0.3f,   -0.3f,  0.5499999f,
                                     0.55f, -0.55f, 1.0f,   -1.0f,  3.7f,   -3.7f,   9.0999f, 9.1f,  -9.1f,
                                     15.9f, 16.0f,  -16.0f, 19.99f, 20.0f,  -20.0f,  86.9f,  87.0f,  -87.0f,
                                     100.0f, -100.0f, inf,  -inf,   nan,    -nan,    3e38f,  -3e38f};
    std::mt19937 rng(7);
    std::uniform_int_distribution<std::size_t> pick(0, pool.size() - 1);
    std::normal_distribution<float> wide(0.0f, 6.0f);
    for (const LaneKernel& kern : lane_kernels()) {
        int reported = 0, bad = 0;
        for (int g = 0; g < 200000; ++g) {
            float in[4];
            for (float& v : in) v = g % 3 == 0 ? wide(rng) : pool[pick(rng)];
            bad += compare_group(kern, in, reported);
        }
        EXPECT_EQ(bad, 0) << kern.name;
    }
}

TEST(MathLanes, DISABLED_Exhaustive) {
    for (const LaneKernel& kern : lane_kernels()) {
        int reported = 0;
        std::uint64_t bad = 0;
        for (std::uint64_t g = 0; g < (std::uint64_t{1} << 30); ++g) {
            const std::uint32_t b = static_cast<std::uint32_t>(g * 4);
            const float in[4] = {k::float_of(b), k::float_of(b + 1), k::float_of(b + 2), k::float_of(b + 3)};
            bad += static_cast<std::uint64_t>(compare_group(kern, in, reported));
        }
        EXPECT_EQ(bad, 0u) << kern.name;
        std::printf("%s: all 2^32 inputs, %llu lanes differ\n", kern.name, static_cast<unsigned long long>(bad));
    }
}

#else

TEST(MathLanes, NotOnThisTarget) { GTEST_SKIP() << "the four-lane kernels are SSE2 only"; }

#endif

}  // namespace
