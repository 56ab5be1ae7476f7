// A streaming model with a standardised observation and readout
// (tests/data/stream_standardised: parcel_chill's network, invented mean and scale):
// eval against an outside forward pass (tests/scipy/stream_standardised.py: NumPy,
// run live when /usr/bin/python3 has NumPy and SciPy, else its committed output
// expected.csv); the emitted code against eval (float64 bit for bit and float32 within
// verify's rules, through verify), its self-test, and a standardised observation that
// overflows: state_not_finite with the state kept, in eval and in the emitted code.
#include <gtest/gtest.h>

#include <fmt/format.h>

#include <cmath>
#include <cstdlib>
#include <sstream>
#include <string>
#include <vector>

#include "test_support.hpp"

namespace {

using meander::test::run;

const std::string kData = std::string(MEANDER_SOURCE_DIR) + "/tests/data/stream_standardised";
const std::string kModel = kData + "/stream_standardised.mnd";
const std::string kInputs = std::string(MEANDER_SOURCE_DIR) + "/samples/parcel_chill/inputs.csv";

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

void expect_agree(const std::vector<std::vector<double>>& got, const std::vector<std::vector<double>>& want, const char* what) {
    ASSERT_EQ(got.size(), want.size()) << what;
    for (std::size_t i = 0; i < got.size(); ++i) {
        ASSERT_EQ(got[i].size(), 1u) << what;
        EXPECT_LE(std::fabs(got[i][0] - want[i][0]), 1e-10 * std::max(1.0, std::fabs(want[i][0])))
            << what << ", row " << i << ": eval " << got[i][0] << ", NumPy " << want[i][0];
    }
}

TEST(StreamStandardised, EvalAgreesWithNumpy) {
    const auto r = meander::test::run_shell(fmt::format("{} eval {} --input {}", MEANDER_BINARY, kModel, kInputs));
    ASSERT_EQ(r.status, 0) << r.output;
    const auto got = csv_numbers(r.output);
    ASSERT_EQ(got.size(), 96u);
    expect_agree(got, csv_numbers(meander::test::read_text(kData + "/expected.csv")), "committed expected.csv");
    const std::string py = MEANDER_SCIPY_PYTHON;
    if (std::system(fmt::format("\"{}\" -c \"import numpy, scipy\" > /dev/null 2>&1", py).c_str()) != 0) return;
    const auto dir = meander::test::temp_dir("stream_standardised_live");
    const auto live = run(fmt::format("\"{}\" {}/tests/scipy/stream_standardised.py --out {}/live.csv", py, MEANDER_SOURCE_DIR,
                                      dir.string()));
    ASSERT_EQ(live.status, 0) << live.output;
    expect_agree(got, csv_numbers(meander::test::read_text(dir / "live.csv")), "live NumPy pass");
    // The standardisation is not a no-op here: parcel_chill's own outputs differ.
    const auto plain = csv_numbers(meander::test::read_text(std::string(MEANDER_SOURCE_DIR) + "/samples/parcel_chill/expected.csv"));
    ASSERT_EQ(plain.size(), got.size());
    EXPECT_GT(std::fabs(plain[5][0] - got[5][0]), 0.1);
}

TEST(StreamStandardised, EmittedCodeAgreesWithEval) {
    for (const char* precision : {"float64", "float32"}) {
        const auto r = run(fmt::format("{} verify {} --input {} --precision {}", MEANDER_BINARY, kModel, kInputs, precision));
        EXPECT_EQ(r.status, 0) << precision << "\n" << r.output;
        EXPECT_NE(r.output.find("verdict              agrees"), std::string::npos) << precision << "\n" << r.output;
        if (std::string(precision) == "float64")
            EXPECT_NE(r.output.find("required             equal bits for every output, equal counters"), std::string::npos)
                << r.output;
    }
}

TEST(StreamStandardised, SelfTestPasses) {
    const auto dir = meander::test::temp_dir("stream_standardised_selftest");
    const auto c = run(fmt::format("{} compile {} -o {} --self-test {}", MEANDER_BINARY, kModel, dir.string(), kInputs));
    ASSERT_EQ(c.status, 0) << c.output;
    const std::string src = meander::test::read_text(dir / "stream_standardised.cpp");
    EXPECT_NE(src.find("(input[i] - input_mean[i]) / input_scale[i]"), std::string::npos);
    EXPECT_NE(src.find("output[i] * output_scale[i] + output_mean[i]"), std::string::npos);
    meander::test::write_text(dir / "selftest_main.cpp", R"(#include "stream_standardised_selftest.hpp"
#include <cstdio>
int main() {
    static stream_standardised::context ctx;
    const auto rep = stream_standardised::self_test(ctx, 1e-4f);
    std::printf("%u %u %d\n", rep.vectors_run, rep.failures, rep.first_failure);
    return rep.failures == 0 ? 0 : 1;
}
)");
    const auto b = run(fmt::format("{0} -std=c++17 -O2 -ffp-contract=off -Wall -Wextra -Wpedantic -Wconversion -Wdouble-promotion "
                                   "-Wshadow -Wfloat-equal -Werror -fno-exceptions -fno-rtti -I{1} -o {1}/st {1}/selftest_main.cpp "
                                   "{1}/stream_standardised.cpp {1}/stream_standardised_selftest.cpp",
                                   MEANDER_CXX, dir.string()));
    ASSERT_EQ(b.status, 0) << b.output;
    const auto s = run((dir / "st").string());
    EXPECT_EQ(s.status, 0) << s.output;
    EXPECT_EQ(s.output, "96 0 -1\n");
}

// A scale of 1e-300 sends an observation of 1e10 past the largest double: the standardised
// value is not finite, so the observation is refused with state_not_finite in eval, and the
// emitted observe returns it with the state bit for bit as before.
TEST(StreamStandardised, OverflowingObservationIsRefusedWithTheStateKept) {
    const auto dir = meander::test::temp_dir("stream_standardised_overflow");
    std::string text = meander::test::read_text(kModel);
    const std::string from = "standardised mean [8.5] scale [4.25]";
    text.replace(text.find(from), from.size(), "standardised mean [8.5] scale [1e-300]");
    const std::string weights = "\"../../../samples/parcel_chill/parcel_chill.pt\"";
    text.replace(text.find(weights), weights.size(),
                 fmt::format("\"{}/samples/parcel_chill/parcel_chill.pt\"", MEANDER_SOURCE_DIR));
    meander::test::write_text(dir / "m.mnd", text);
    meander::test::write_text(dir / "s.csv", "id,t,surface\n1,0,8.5\n1,1,1e10\n");
    const auto e = meander::test::run_shell(
        fmt::format("{} eval {} --input {} --keep-going 2>&1", MEANDER_BINARY, (dir / "m.mnd").string(), (dir / "s.csv").string()));
    EXPECT_EQ(e.status, 0) << e.output;
    EXPECT_NE(e.output.find("nan,state_not_finite"), std::string::npos) << e.output;
    const auto c = run(fmt::format("{} compile {} -o {} --precision float64", MEANDER_BINARY, (dir / "m.mnd").string(), dir.string()));
    ASSERT_EQ(c.status, 0) << c.output;
    meander::test::write_text(dir / "driver.cpp", R"(#include "stream_standardised.hpp"
#include <cstring>
namespace m = stream_standardised;
int main() {
    static m::context ctx;
    m::reset(ctx);
    m::real out[m::output_size];
    const m::real first[m::input_size] = {8.5};
    if (m::observe(ctx, first, 0.0, out) != m::result::ok) return 1;
    m::real before[m::state_size];
    std::memcpy(before, ctx.state, sizeof before);
    const m::real huge[m::input_size] = {1e10};
    if (m::observe(ctx, huge, 1.0, out) != m::result::state_not_finite) return 2;
    if (std::memcmp(before, ctx.state, sizeof before) != 0) return 3;
    return 0;
}
)");
    const auto b = run(fmt::format("{0} -std=c++17 -O2 -ffp-contract=off -Wall -Wextra -Werror -I{1} -o {1}/drv {1}/driver.cpp "
                                   "{1}/stream_standardised.cpp",
                                   MEANDER_CXX, dir.string()));
    ASSERT_EQ(b.status, 0) << b.output;
    const auto d = run((dir / "drv").string());
    EXPECT_EQ(d.status, 0) << d.output;
}

}  // namespace
