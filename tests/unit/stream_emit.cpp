// The emitted code of streaming models: built under the strict flags users are
// told to use, run on sequence files and compared with eval on every observation
// (meander verify); a gap out of range or not finite, and an observation that is
// not finite, return their result codes and leave the state bit for bit as before.
#include <gtest/gtest.h>

#include <fmt/format.h>

#include <string>
#include <vector>

#include "compiler/weights.hpp"
#include "test_support.hpp"

namespace {

using meander::test::run;

const std::string kSample = std::string(MEANDER_SOURCE_DIR) + "/samples/parcel_chill";

TEST(StreamEmit, SampleAgreesWithEvalOnEveryObservation) {
    for (const char* precision : {"float32", "float64"}) {
        const auto r = run(fmt::format("{0} verify {1}/parcel_chill.mnd --input {1}/inputs.csv --precision {2}", MEANDER_BINARY,
                                       kSample, precision));
        EXPECT_EQ(r.status, 0) << r.output;
        EXPECT_NE(r.output.find("rows                 96\n"), std::string::npos) << r.output;
        EXPECT_NE(r.output.find("verdict              agrees"), std::string::npos) << r.output;
        // float64: eval's operations in eval's order, so verify demands equal bits and counters.
        if (std::string(precision) == "float64")
            EXPECT_NE(r.output.find("required             equal bits for every output, equal counters"), std::string::npos)
                << r.output;
    }
}

// A blend evolution and a merge update, with weights of our own: emitted code against
// eval (double, the C++ library's maths): equal bits and counters in float64, verify's
// tolerance 1e-4 in float32 (meander's own sigmoid, tanh and exp kernels).
TEST(StreamEmit, BlendAndMergeAgreeWithEval) {
    const auto dir = meander::test::temp_dir("stream_emit_blend");
    meander::TensorSet set;
    set.path = "w.mnw";
    unsigned seed = 12345u;
    auto next = [&] {  // a small linear congruential sequence: weights in [-0.8, 0.8]
        seed = seed * 1103515245u + 12345u;
        return (static_cast<double>((seed >> 8) & 0xffff) / 65535.0 - 0.5) * 1.6;
    };
    auto tensor = [&](const std::string& name, std::vector<std::size_t> shape) {
        std::size_t n = 1;
        for (std::size_t d : shape) n *= d;
        std::vector<double> v(n);
        for (double& x : v) x = next();
        set.tensors.push_back(meander::Tensor{name, std::move(shape), std::move(v), "float64"});
    };
    tensor("b1.weight", {6, 3});
    tensor("b1.bias", {6});
    for (const char* head : {"rate", "start", "end"}) {
        tensor(std::string(head) + ".weight", {3, 6});
        tensor(std::string(head) + ".bias", {3});
    }
    tensor("u.weight", {3, 5});
    tensor("u.bias", {3});
    tensor("out.weight", {2, 3});
    tensor("out.bias", {2});
    meander::test::write_text(dir / "w.mnw", meander::write_listing(set));
    meander::test::write_text(dir / "m.mnd",
                              "model blendy\nweights \"w.mnw\"\ninput x[2]\nstate h[3], largest-gap 10\nblend cell: 3 {\n"
                              "  dense b1: 3 -> 6, tanh\n  dense rate: 6 -> 3\n  dense start: 6 -> 3, tanh\n  dense end: 6 -> 3, tanh\n}\n"
                              "merge u: 3 + 2 -> 3, tanh\ndense out: 3 -> 2, softmax\noutput y[2]\n");
    meander::test::write_text(dir / "s.csv", "id,t,a,b\n1,0,0.5,-1\n1,0.01,1,2\n1,0.4,-0.3,0.2\n1,9.9,2,2\n2,100,0.5,-1\n2,101,0,0\n");
    for (const char* precision : {"float64", "float32"}) {
        const auto r = run(fmt::format("{} verify {} --input {} --precision {}", MEANDER_BINARY, (dir / "m.mnd").string(),
                                       (dir / "s.csv").string(), precision));
        EXPECT_EQ(r.status, 0) << precision << "\n" << r.output;
        EXPECT_NE(r.output.find("verdict              agrees"), std::string::npos) << precision << "\n" << r.output;
        if (std::string(precision) == "float64")
            EXPECT_NE(r.output.find("required             equal bits for every output, equal counters"), std::string::npos)
                << r.output;
    }
}

// A float32 streaming source computes its activations, its GRU cell, softmax and the step
// count with meander's own code: no call of the C library's maths (the image test of
// tests/target checks the linked Cortex-M4F image the same way).
TEST(StreamEmit, Float32SourceCallsNoLibraryMaths) {
    const auto dir = meander::test::temp_dir("stream_emit_nolibm");
    const auto c = run(fmt::format("{} compile {}/parcel_chill.mnd -o {}", MEANDER_BINARY, kSample, dir.string()));
    ASSERT_EQ(c.status, 0) << c.output;
    const std::string text = meander::test::read_text(dir / "parcel_chill.cpp");
    for (const char* call : {"std::exp", "std::tanh", "std::log", "std::ceil", "std::floor", "std::fmax", "std::pow"})
        EXPECT_EQ(text.find(call), std::string::npos) << call;
    EXPECT_NE(text.find("act_tanh("), std::string::npos);
    EXPECT_NE(text.find("act_sigmoid("), std::string::npos);
    EXPECT_NE(text.find("bool build_conditions_hold() noexcept"), std::string::npos);
}

TEST(StreamEmit, RefusedCallsLeaveTheStateAsItWas) {
    const auto dir = meander::test::temp_dir("stream_emit_gap");
    const auto c = run(fmt::format("{} compile {}/parcel_chill.mnd -o {}", MEANDER_BINARY, kSample, dir.string()));
    ASSERT_EQ(c.status, 0) << c.output;
    meander::test::write_text(dir / "gap_driver.cpp", R"(#include "parcel_chill.hpp"
#include <cstdio>
#include <cstring>
#include <limits>
namespace pc = parcel_chill;
int main() {
    static pc::context ctx;
    pc::reset(ctx);
    pc::real out[pc::output_size];
    const pc::real reading[pc::input_size] = {12.5f};
    if (pc::observe(ctx, reading, 0.0f, out) != pc::result::ok) return 1;
    if (pc::observe(ctx, reading, 1.5f, out) != pc::result::ok) return 2;
    pc::real before[pc::state_size];
    std::memcpy(before, ctx.state, sizeof before);
    const pc::real gaps[] = {-0.001f, pc::largest_gap * 1.001f, std::numeric_limits<pc::real>::quiet_NaN(),
                             std::numeric_limits<pc::real>::infinity(), -std::numeric_limits<pc::real>::infinity()};
    for (pc::real g : gaps) {
        if (pc::observe(ctx, reading, g, out) != pc::result::gap_out_of_range) return 3;
        if (std::memcmp(before, ctx.state, sizeof before) != 0) return 4;
    }
    const pc::real bad[pc::input_size] = {std::numeric_limits<pc::real>::quiet_NaN()};
    if (pc::observe(ctx, bad, 1.0f, out) != pc::result::input_not_finite) return 5;
    if (std::memcmp(before, ctx.state, sizeof before) != 0) return 6;
    // The largest gap itself is in range: 8 rk4 steps, 32 field evaluations (the stated worst case).
    if (pc::observe(ctx, reading, pc::largest_gap, out) != pc::result::ok) return 7;
    if (ctx.count.field_evals != pc::worst_field_evals || pc::worst_field_evals != 32u) return 8;
    std::printf("%s\n", pc::result_name(pc::result::gap_out_of_range));
    return 0;
}
)");
    const auto b = run(fmt::format("{} -std=c++17 -O2 -Wall -Wextra -Wpedantic -Wconversion -Wdouble-promotion -Wshadow -Wfloat-equal "
                                   "-Werror -fno-exceptions -fno-rtti -I{} -o {} {} {}",
                                   MEANDER_CXX, dir.string(), (dir / "gap_driver").string(), (dir / "gap_driver.cpp").string(),
                                   (dir / "parcel_chill.cpp").string()));
    ASSERT_EQ(b.status, 0) << b.output;
    const auto g = run((dir / "gap_driver").string());
    EXPECT_EQ(g.status, 0) << g.output;
    EXPECT_EQ(g.output, "gap_out_of_range\n");
}

}  // namespace
