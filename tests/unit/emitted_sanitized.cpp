// The emitted code of every sample, built with AddressSanitizer and
// UndefinedBehaviorSanitizer (-fno-sanitize-recover: the first report stops
// the program), run on random inputs over many magnitudes and on extreme
// ones (zeros, the float and double limits, subnormals, infinities, NaN).
// Whatever the input, infer must return one of its result codes, touch no
// memory it does not own, do no undefined arithmetic, and on ok give finite
// outputs. Expected values: the result codes of the emitted API (DEVELOPERS.md).
#include <gtest/gtest.h>

#include <filesystem>
#include <fstream>
#include <string>
#include <vector>

#include "test_support.hpp"

namespace fs = std::filesystem;

namespace {

// Streaming models (a `state` statement) have observe(ctx, input, gap, output)
// and reset(ctx); they get the streaming driver below.
bool is_streaming(const fs::path& mnd) {
    std::ifstream in(mnd);
    for (std::string line; std::getline(in, line);) {
        const auto start = line.find_first_not_of(" \t");
        if (start != std::string::npos && line.compare(start, 6, "state ") == 0) return true;
    }
    return false;
}

std::vector<fs::path> samples() {
    std::vector<fs::path> out;
    for (const auto& dir : fs::directory_iterator(fs::path(MEANDER_SOURCE_DIR) / "samples"))
        if (dir.is_directory())
            for (const auto& f : fs::directory_iterator(dir.path()))
                if (f.path().extension() == ".mnd") out.push_back(f.path());
    std::sort(out.begin(), out.end());
    return out;
}

// NAME is the model's namespace; the driver prints one line per input: the result code.
const char* kDriver = R"(#include "MODEL.hpp"
#include <cfloat>
#include <cmath>
#include <cstdint>
#include <cstdio>
#include <limits>
using R = MODEL::real;
static MODEL::context ctx;
static std::uint32_t state = 2463534242u;
static std::uint32_t next() { state ^= state << 13; state ^= state >> 17; state ^= state << 5; return state; }
static int run(const R* in) {
    R out[MODEL::output_size];
    const MODEL::result r = MODEL::infer(ctx, in, out);
    const int code = static_cast<int>(r);
    if (code < 0 || code > 4) { std::printf("bad result code %d\n", code); return 1; }
    if (r == MODEL::result::ok)
        for (std::size_t i = 0; i < MODEL::output_size; ++i)
            if (!std::isfinite(out[i])) { std::printf("ok with a non-finite output\n"); return 1; }
    return 0;
}
int main() {
    const R lim = std::numeric_limits<R>::max(), tiny = std::numeric_limits<R>::denorm_min();
    const R inf = std::numeric_limits<R>::infinity(), nan = std::numeric_limits<R>::quiet_NaN();
    const R extremes[] = {R(0), -R(0), R(1), R(-1), lim, -lim, tiny, -tiny, std::numeric_limits<R>::min(),
                          R(1e30), R(-1e30), R(1e15), R(-1e15), inf, -inf, nan};
    const std::size_t n_ext = sizeof extremes / sizeof extremes[0];
    R in[MODEL::input_size];
    int bad = 0, counts[5] = {0, 0, 0, 0, 0};
    // Every extreme value in every position, the rest zero or one.
    for (std::size_t e = 0; e < n_ext; ++e)
        for (std::size_t pos = 0; pos < MODEL::input_size; ++pos)
            for (int rest = 0; rest < 2; ++rest) {
                for (std::size_t i = 0; i < MODEL::input_size; ++i) in[i] = static_cast<R>(rest);
                in[pos] = extremes[e];
                bad += run(in);
            }
    // All inputs extreme at once, and random ones over 2^-40 .. 2^40 with random signs.
    for (int k = 0; k < 4000; ++k) {
        for (std::size_t i = 0; i < MODEL::input_size; ++i) {
            if (k < 400) { in[i] = extremes[next() % n_ext]; continue; }
            const int e = static_cast<int>(next() % 81u) - 40;
            const R m = static_cast<R>(next() % 1000000u) / R(1000000);
            in[i] = std::ldexp(m, e) * ((next() & 1u) ? R(1) : R(-1));
        }
        bad += run(in);
        R out[MODEL::output_size];
        counts[static_cast<int>(MODEL::infer(ctx, in, out))]++;
    }
    std::printf("bad %d ok %d input_not_finite %d state_not_finite %d step_limit %d step_too_small %d\n", bad, counts[0],
                counts[1], counts[2], counts[3], counts[4]);
    return bad == 0 ? 0 : 1;
}
)";

// The same for a streaming model: observations as above, each after a gap drawn
// from [0, largest_gap] or an extreme one (negative, beyond largest_gap, NaN,
// infinite), with a reset every 50 calls. Result codes 0 .. 5 (gap_out_of_range).
const char* kStreamDriver = R"(#include "MODEL.hpp"
#include <cmath>
#include <cstdint>
#include <cstdio>
#include <limits>
using R = MODEL::real;
static MODEL::context ctx;
static std::uint32_t state = 2463534242u;
static std::uint32_t next() { state ^= state << 13; state ^= state >> 17; state ^= state << 5; return state; }
static int counts[6] = {0, 0, 0, 0, 0, 0};
static int run(const R* in, R gap) {
    R out[MODEL::output_size];
    const MODEL::result r = MODEL::observe(ctx, in, gap, out);
    const int code = static_cast<int>(r);
    if (code < 0 || code > 5) { std::printf("bad result code %d\n", code); return 1; }
    ++counts[code];
    if (r == MODEL::result::ok)
        for (std::size_t i = 0; i < MODEL::output_size; ++i)
            if (!std::isfinite(out[i])) { std::printf("ok with a non-finite output\n"); return 1; }
    return 0;
}
int main() {
    const R lim = std::numeric_limits<R>::max(), tiny = std::numeric_limits<R>::denorm_min();
    const R inf = std::numeric_limits<R>::infinity(), nan = std::numeric_limits<R>::quiet_NaN();
    const R extremes[] = {R(0), -R(0), R(1), R(-1), lim, -lim, tiny, -tiny, std::numeric_limits<R>::min(),
                          R(1e30), R(-1e30), R(1e15), R(-1e15), inf, -inf, nan};
    const R gaps[] = {R(0), tiny, MODEL::largest_gap, MODEL::largest_gap * R(2), R(-1), -tiny, inf, -inf, nan, lim};
    const std::size_t n_ext = sizeof extremes / sizeof extremes[0], n_gap = sizeof gaps / sizeof gaps[0];
    R in[MODEL::input_size];
    int bad = 0;
    MODEL::reset(ctx);
    for (std::size_t e = 0; e < n_ext; ++e)
        for (std::size_t g = 0; g < n_gap; ++g) {
            for (std::size_t i = 0; i < MODEL::input_size; ++i) in[i] = extremes[e];
            bad += run(in, gaps[g]);
        }
    for (int k = 0; k < 4000; ++k) {
        if (k % 50 == 0) MODEL::reset(ctx);
        for (std::size_t i = 0; i < MODEL::input_size; ++i) {
            if (k < 400) { in[i] = extremes[next() % n_ext]; continue; }
            const int e = static_cast<int>(next() % 81u) - 40;
            const R m = static_cast<R>(next() % 1000000u) / R(1000000);
            in[i] = std::ldexp(m, e) * ((next() & 1u) ? R(1) : R(-1));
        }
        const R gap = (k % 7 == 0) ? gaps[next() % n_gap]
                                   : MODEL::largest_gap * static_cast<R>(next() % 1000001u) / R(1000000);
        bad += run(in, gap);
    }
    std::printf("bad %d ok %d input_not_finite %d state_not_finite %d step_limit %d step_too_small %d gap_out_of_range %d\n",
                bad, counts[0], counts[1], counts[2], counts[3], counts[4], counts[5]);
    return bad == 0 ? 0 : 1;
}
)";

class EmittedUnderSanitizers : public ::testing::TestWithParam<std::tuple<fs::path, const char*>> {};

TEST_P(EmittedUnderSanitizers, RandomAndExtremeInputs) {
    const auto& [mnd, precision] = GetParam();
    const std::string name = mnd.stem().string();
    const fs::path d = meander::test::scratch_dir("sanitized", name + "-" + precision);
    auto c = meander::test::run(std::string(MEANDER_BINARY) + " compile '" + mnd.string() + "' -o '" + d.string() +
                                "' --precision " + precision);
    ASSERT_EQ(c.status, 0) << c.output;
    std::string driver = is_streaming(mnd) ? kStreamDriver : kDriver;
    for (std::size_t at; (at = driver.find("MODEL")) != std::string::npos;) driver.replace(at, 5, name);
    meander::test::write_text(d / "driver.cpp", driver);
    const std::string build = "cd '" + d.string() + "' && '" + MEANDER_CXX +
                              "' -std=c++17 -O1 -g -fsanitize=address,undefined -fno-sanitize-recover=all "
                              "-fno-omit-frame-pointer driver.cpp " + name + ".cpp -o driver";
    auto b = meander::test::run(build);
    ASSERT_EQ(b.status, 0) << build << "\n" << b.output;
    auto r = meander::test::run("cd '" + d.string() + "' && ASAN_OPTIONS=detect_leaks=0 ./driver");
    EXPECT_EQ(r.status, 0) << r.output;
    EXPECT_EQ(r.output.find("runtime error"), std::string::npos) << r.output;
    EXPECT_NE(r.output.find("bad 0 "), std::string::npos) << r.output;
}

INSTANTIATE_TEST_SUITE_P(Samples, EmittedUnderSanitizers,
                         ::testing::Combine(::testing::ValuesIn(samples()), ::testing::Values("float32", "float64")),
                         [](const auto& info) {
                             return std::get<0>(info.param).stem().string() + "_" + std::get<1>(info.param);
                         });

}  // namespace
