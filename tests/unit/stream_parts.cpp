// Streaming models whose parts hold blocks and whose evolution is adaptive
// (tests/data/stream_parts: a dormand-prince evolution whose field has a residual
// block; a readout with a residual and a continuous block): eval against an outside
// reference, the emitted code against eval (float64 bit for bit, float32 within
// verify's rules), the step limit, the step count over a gap, and the self-test and
// dumps of streaming models.
#include <gtest/gtest.h>

#include <fmt/format.h>

#include <cmath>
#include <sstream>
#include <string>
#include <vector>

#include "compiler/weights.hpp"
#include "test_support.hpp"

namespace {

using meander::test::run;

const std::string kData = std::string(MEANDER_SOURCE_DIR) + "/tests/data/stream_parts";
const std::string kModel = kData + "/stream_parts.mnd";
const std::string kInputs = kData + "/inputs.csv";

std::vector<std::vector<double>> csv_numbers(const std::string& text) {
    std::vector<std::vector<double>> rows;
    std::istringstream in(text);
    for (std::string line; std::getline(in, line);) {
        if (line.empty() || !(std::isdigit(static_cast<unsigned char>(line[0])) || line[0] == '-')) continue;
        std::vector<double> row;
        std::istringstream fields(line);
        for (std::string f; std::getline(fields, f, ',');) row.push_back(std::stod(f));
        rows.push_back(row);
    }
    return rows;
}

std::string strict_build(const std::string& out, const std::string& sources, const std::string& include) {
    return fmt::format("{} -std=c++17 -O2 -ffp-contract=off -Wall -Wextra -Wpedantic -Wconversion -Wdouble-promotion -Wshadow "
                       "-Wfloat-equal -Werror -fno-exceptions -fno-rtti -I{} -o {} {}",
                       MEANDER_CXX, include, out, sources);
}

// expected.csv is tests/scipy/stream_parts.py's forward pass: SciPy 1.10 solve_ivp RK45
// at the description's tolerances over each gap (SciPy's RK45 takes the steps of
// meander's dormand-prince rules), GRU, residual, rk4 and head written out in NumPy.
TEST(StreamParts, EvalAgreesWithScipyAndNumpy) {
    const auto r = meander::test::run_shell(fmt::format("{} eval {} --input {}", MEANDER_BINARY, kModel, kInputs));
    ASSERT_EQ(r.status, 0) << r.output;
    const auto got = csv_numbers(r.output);
    const auto want = csv_numbers(meander::test::read_text(kData + "/expected.csv"));
    ASSERT_EQ(got.size(), want.size());
    ASSERT_EQ(got.size(), 20u);
    for (std::size_t i = 0; i < got.size(); ++i) {
        ASSERT_EQ(got[i].size(), 2u);
        for (std::size_t j = 0; j < 2; ++j)
            EXPECT_LE(std::fabs(got[i][j] - want[i][j]), 1e-10 * std::max(1.0, std::fabs(want[i][j])))
                << "row " << i << " output " << j << ": eval " << got[i][j] << ", SciPy " << want[i][j];
    }
}

// float64: eval's operations in eval's order, so verify demands equal bits and counters;
// float32: within verify's tolerance (a row may take other adaptive steps).
TEST(StreamParts, EmittedAgreesWithEval) {
    for (const char* precision : {"float64", "float32"}) {
        const auto r = run(fmt::format("{} verify {} --input {} --precision {}", MEANDER_BINARY, kModel, kInputs, precision));
        EXPECT_EQ(r.status, 0) << precision << "\n" << r.output;
        EXPECT_NE(r.output.find("verdict              agrees"), std::string::npos) << precision << "\n" << r.output;
        if (std::string(precision) == "float64")
            EXPECT_NE(r.output.find("equal bits for every output, equal counters"), std::string::npos) << r.output;
    }
}

// The header's worst case covers the evolution at the largest gap (dormand-prince,
// max-steps 60: 2 + 60 x 6 evaluations, DEVELOPERS.md "Integrator semantics") and the
// readout's rk4 block (3 steps x 4 stages); a step limit leaves the state as it was.
TEST(StreamParts, StepLimitLeavesTheStateAsItWas) {
    const auto dir = meander::test::temp_dir("stream_parts_limit");
    std::string text = meander::test::read_text(kModel);
    const std::string from = "max-steps 60";
    text.replace(text.find(from), from.size(), "max-steps 4");
    text.replace(text.find("stream_parts.npz"), 16, kData + "/stream_parts.npz");
    meander::test::write_text(dir / "m.mnd", text);
    const auto c = run(fmt::format("{} compile {} -o {} --precision float64", MEANDER_BINARY, (dir / "m.mnd").string(), dir.string()));
    ASSERT_EQ(c.status, 0) << c.output;
    const std::string header = meander::test::read_text(dir / "stream_parts.hpp");
    EXPECT_NE(header.find("worst_field_evals = 38u"), std::string::npos) << "2 + 4 x 6 + 12";
    meander::test::write_text(dir / "driver.cpp", R"(#include "stream_parts.hpp"
#include <cstdio>
#include <cstring>
namespace sp = stream_parts;
int main() {
    static sp::context ctx;
    sp::reset(ctx);
    sp::real out[sp::output_size];
    const sp::real x[sp::input_size] = {0.5, -0.25};
    if (sp::observe(ctx, x, 0.0, out) != sp::result::ok) return 1;
    if (sp::observe(ctx, x, 0.05, out) != sp::result::ok) return 2;
    sp::real before[sp::state_size];
    std::memcpy(before, ctx.state, sizeof before);
    const sp::result r = sp::observe(ctx, x, sp::largest_gap, out);
    std::printf("%s %u\n", sp::result_name(r), static_cast<unsigned>(ctx.count.steps_accepted + ctx.count.steps_rejected));
    if (std::memcmp(before, ctx.state, sizeof before) != 0) return 3;
    if (ctx.count.field_evals > sp::worst_field_evals) return 4;
    return 0;
}
)");
    const auto b = run(strict_build((dir / "driver").string(), (dir / "driver.cpp").string() + " " + (dir / "stream_parts.cpp").string(),
                                    dir.string()));
    ASSERT_EQ(b.status, 0) << b.output;
    const auto g = run((dir / "driver").string());
    EXPECT_EQ(g.status, 0) << g.output;
    EXPECT_EQ(g.output, "step_limit 4\n");
}

// The emitted step count over a gap is eval's ceil(rate * gap) (runtime/stream.cpp),
// checked against std::ceil of the product in double: for a float gap and a rate that
// is a float the double product is exact, so this is the ceiling of the exact product;
// float64 code rounds the product as eval does. Gaps on a fine grid and the floats
// next to k / rate, where the product is an integer or just beside one.
TEST(StreamParts, StepCountIsEvalsCeiling) {
    const auto dir = meander::test::temp_dir("stream_parts_steps");
    meander::TensorSet set;
    set.path = "w.mnw";
    auto tensor = [&](const std::string& name, std::vector<std::size_t> shape, double v) {
        std::size_t n = 1;
        for (std::size_t d : shape) n *= d;
        set.tensors.push_back(meander::Tensor{name, std::move(shape), std::vector<double>(n, v), "float64"});
    };
    tensor("f.weight", {2, 2}, -0.1);
    tensor("f.bias", {2}, 0.0);
    tensor("cell.weight", {2, 3}, 0.2);
    tensor("cell.bias", {2}, 0.0);
    meander::test::write_text(dir / "w.mnw", meander::write_listing(set));
    for (const char* rate : {"3", "2.5", "0.1"}) {
        meander::test::write_text(dir / "m.mnd", fmt::format("model steps_m\nweights \"w.mnw\"\ninput x[1]\nstate h[2], largest-gap 50\n"
                                                             "continuous e: 2, t in [0, gap] {{\n  dense f: 2 -> 2\n"
                                                             "  solver euler, steps-per-unit {}\n}}\nmerge cell: 2 + 1 -> 2\noutput y[2]\n",
                                                             rate));
        for (const char* precision : {"float32", "float64"}) {
            const auto c = run(fmt::format("{} compile {} -o {} --precision {}", MEANDER_BINARY, (dir / "m.mnd").string(),
                                           dir.string(), precision));
            ASSERT_EQ(c.status, 0) << c.output;
            meander::test::write_text(dir / "driver.cpp", fmt::format(R"(#include "steps_m.hpp"
#include <cmath>
#include <cstdio>
namespace sm = steps_m;
int main() {{
    static sm::context ctx;
    sm::real out[sm::output_size];
    const sm::real x[1] = {{1}};
    const double rate = {0};
    const sm::real rate_r = static_cast<sm::real>(rate);
    unsigned checked = 0, bad = 0;
    auto check = [&](sm::real gap) {{
        if (!(gap > 0) || gap > sm::largest_gap) return;
        sm::reset(ctx);
        if (sm::observe(ctx, x, gap, out) != sm::result::ok) {{ ++bad; return; }}
        // eval: ceil(gap * rate) in double, at least 1.
        double want = std::ceil(static_cast<double>(gap) * rate);
        if (want < 1) want = 1;
        ++checked;
        if (ctx.count.steps_accepted != static_cast<unsigned>(want)) {{
            if (bad < 5) std::printf("gap %a: %u steps, eval %.0f\n", static_cast<double>(gap), ctx.count.steps_accepted, want);
            ++bad;
        }}
    }};
    for (int i = 1; i <= 4000; ++i) check(static_cast<sm::real>(i) / static_cast<sm::real>(97));
    for (int k = 1; k <= 400; ++k) {{
        sm::real g = static_cast<sm::real>(k) / rate_r;
        check(g);
        check(std::nextafter(g, static_cast<sm::real>(0)));
        check(std::nextafter(g, static_cast<sm::real>(100)));
    }}
    std::printf("%u checked, %u differ\n", checked, bad);
    return bad == 0 && checked > 4000 ? 0 : 1;
}}
)",
                                                                                   rate));
            const auto b = run(strict_build((dir / "driver").string(),
                                            (dir / "driver.cpp").string() + " " + (dir / "steps_m.cpp").string(), dir.string()) +
                               " -Wno-double-promotion -Wno-conversion");
            ASSERT_EQ(b.status, 0) << b.output;
            const auto g = run((dir / "driver").string());
            // A rate that is not a float (0.1): float32 code takes the ceiling of the float product.
            if (std::string(rate) == "0.1" && std::string(precision) == "float32") continue;
            EXPECT_EQ(g.status, 0) << "rate " << rate << ", " << precision << "\n" << g.output;
        }
    }
}

// --self-test (golden observations with their gaps and resets) and --dump for a streaming model.
TEST(StreamParts, SelfTestCEntryAndDumps) {
    const auto dir = meander::test::temp_dir("stream_parts_selftest");
    const auto c = run(fmt::format("{} compile {} -o {} --self-test {} --dump lower", MEANDER_BINARY, kModel, dir.string(),
                                   kInputs));
    ASSERT_EQ(c.status, 0) << c.output;
    EXPECT_NE(c.output.find("evolution drift: h -> h over [0, gap] (dormand-prince; adaptive)"), std::string::npos) << c.output;
    EXPECT_NE(c.output.find("residual polish"), std::string::npos) << c.output;
    const auto p = run(fmt::format("{} compile {} -o {} --dump parse", MEANDER_BINARY, kModel, (dir / "parse").string()));
    ASSERT_EQ(p.status, 0) << p.output;
    EXPECT_NE(p.output.find("gated cell @19:7"), std::string::npos) << p.output;
    EXPECT_NE(p.output.find("continuous drift @11:12  width 4  t in [0, gap]"), std::string::npos) << p.output;

    meander::test::write_text(dir / "selftest_main.cpp", R"(#include "stream_parts_selftest.hpp"
#include <cstdio>
int main() {
    static stream_parts::context ctx;
    const auto rep = stream_parts::self_test(ctx, 1e-4f);
    std::printf("%u %u %d %d\n", rep.vectors_run, rep.failures, rep.first_failure, rep.build_conditions_hold ? 1 : 0);
    return rep.failures == 0 ? 0 : 1;
}
)");
    const auto b = run(strict_build((dir / "st").string(),
                                    fmt::format("{0}/selftest_main.cpp {0}/stream_parts.cpp {0}/stream_parts_selftest.cpp", dir.string()),
                                    dir.string()));
    ASSERT_EQ(b.status, 0) << b.output;
    const auto s = run((dir / "st").string());
    EXPECT_EQ(s.status, 0) << s.output;
    EXPECT_EQ(s.output, "20 0 -1 1\n");

}

}  // namespace
