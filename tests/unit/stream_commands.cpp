// cost and tune on a streaming model (the parcel_chill sample): the worst case per
// observation at the largest gap, and the measured spread over its sequence file.
// Expected counts are worked out by hand from the description:
//   field: 8*16 + 16*8 = 256 MACs per evaluation; rk4, 2 steps per unit, largest gap 4:
//   ceil(8) = 8 steps of 4 stages = 32 evaluations; GRU cell: 24*1 + 24*8 = 216 MACs;
//   head: 8 MACs. Worst case: 32*256 + 216 + 8 = 8416 MACs per observation.
#include <gtest/gtest.h>

#include <fmt/format.h>

#include <cmath>
#include <nlohmann/json.hpp>
#include <sstream>
#include <string>

#include "test_support.hpp"

namespace {

const std::string kSample = std::string(MEANDER_SOURCE_DIR) + "/samples/parcel_chill";

nlohmann::json run_json(const std::string& args) {
    const auto r = meander::test::run_shell(fmt::format("{} {}", MEANDER_BINARY, args));
    EXPECT_EQ(r.status, 0) << r.output;
    return nlohmann::json::parse(r.output, nullptr, false);
}

TEST(StreamCommands, CostPerObservationAtTheLargestGap) {
    const auto j = run_json(fmt::format("cost {}/parcel_chill.mnd --json --estimate-only", kSample));
    EXPECT_EQ(j["streaming"], true);
    EXPECT_EQ(j["macs_per_field_eval"], 256);
    EXPECT_EQ(j["worst_field_evals_per_observation"], 32);
    EXPECT_EQ(j["worst_macs_per_observation"], 8416.0);
    EXPECT_EQ(j["parameters"], 8 * 16 + 16 + 16 * 8 + 8 + 24 + 24 * 8 + 24 + 24 + 8 + 1);
}

TEST(StreamCommands, CostMeasuredOverASequenceFile) {
    const auto j = run_json(fmt::format("cost {0}/parcel_chill.mnd --input {0}/inputs.csv --json --estimate-only", kSample));
    const auto& m = j["measured_field_evals"];
    EXPECT_EQ(m["rows"], 96);
    EXPECT_EQ(m["failed_rows"], 0);
    EXPECT_EQ(m["min"], 0.0);       // the first report of a trip comes with gap 0
    EXPECT_LE(m["max"].get<double>(), 32.0);
    EXPECT_GE(m["max"].get<double>(), 28.0);  // the file's largest gap is 3.92 h: ceil(7.84) = 8 steps
    EXPECT_EQ(j["measured_macs"]["max"], m["max"].get<double>() * 256 + 216 + 8);
}

// Flash, RAM and stack of the emitted code, and cycles measured on the emulated cores over
// the first 8 observations and at the largest gap. RAM by hand: the context holds the state
// (8 floats), the workspace the header states and three 32-bit counters. The outside
// values: arm-none-eabi-size and -fstack-usage on the object built here with the flags
// cost states, and the driver's row count.
TEST(StreamCommands, CostMeasuresCodeAndCycles) {
    for (const char* tool : {"arm-none-eabi-g++", "arm-none-eabi-size", "qemu-system-arm"})
        if (meander::test::run_shell(fmt::format("command -v {} > /dev/null", tool)).status != 0) GTEST_SKIP() << tool << " is not installed";
    const auto dir = meander::test::temp_dir("stream_cost_code");
    std::string head;
    {
        std::istringstream in(meander::test::read_text(kSample + "/inputs.csv"));
        std::string line;
        for (int i = 0; i < 9 && std::getline(in, line); ++i) head += line + "\n";
    }
    meander::test::write_text(dir / "rows.csv", head);
    const auto j = run_json(fmt::format("cost {}/parcel_chill.mnd --input {} --json", kSample, (dir / "rows.csv").string()));
    const auto c = meander::test::run(fmt::format("{} compile {}/parcel_chill.mnd -o {}", MEANDER_BINARY, kSample, dir.string()));
    ASSERT_EQ(c.status, 0) << c.output;
    const std::string header = meander::test::read_text(dir / "parcel_chill.hpp");
    const auto at = header.find("workspace_size = ");
    ASSERT_NE(at, std::string::npos);
    const long reals = std::stol(header.substr(at + 17));
    EXPECT_EQ(j["workspace_bytes"], reals * 4);
    EXPECT_EQ(j["context_bytes"], (8 + reals) * 4 + 12);
    ASSERT_EQ(j["code_measured"], true) << j.dump(1);
    const std::string tool = j["code_tool"];
    const std::string flags = tool.substr(tool.find(" -") + 1);
    const auto b = meander::test::run(fmt::format("cd {} && arm-none-eabi-g++ {} -fstack-usage -c parcel_chill.cpp -o p.o && "
                                                  "arm-none-eabi-size -A p.o | awk '$1 ~ /^\\.text/ {{ s += $2 }} END {{ print s + 0 }}'",
                                                  dir.string(), flags));
    ASSERT_EQ(b.status, 0) << b.output;
    EXPECT_EQ(j["code_bytes"].get<long>(), std::stol(b.output));
    const std::string su = meander::test::read_text(dir / "p.su");
    const auto f = su.find("parcel_chill::observe(");
    ASSERT_NE(f, std::string::npos) << su;
    const auto tab = su.find('\t', f);
    EXPECT_EQ(j["entry_stack_bytes"].get<long>(), std::stol(su.substr(tab + 1)));
    EXPECT_GE(j["stack_bytes"].get<long>(), j["entry_stack_bytes"].get<long>());
    ASSERT_EQ(j["measured"].size(), 3u) << j.dump(1);
    for (const auto& m : j["measured"]) {
        EXPECT_EQ(m["rows"], 8);
        EXPECT_EQ(m["failed_rows"], 0);
        EXPECT_LE(m["cycles"]["min"].get<double>(), m["cycles"]["median"].get<double>());
        EXPECT_LE(m["cycles"]["median"].get<double>(), m["cycles"]["max"].get<double>());
        ASSERT_EQ(m["blocks"].size(), 3u) << m.dump(1);
        EXPECT_EQ(m["blocks"][0]["name"], "drift");
        EXPECT_EQ(m["blocks"][1]["name"], "cell");
        EXPECT_EQ(m["blocks"][2]["name"], "head");
    }
    // The largest gap takes the most rk4 steps (8): more cycles than the median row (the
    // kernels' cycles depend on the values, so not necessarily more than every row).
    ASSERT_EQ(j["measured_at_largest_gap"].size(), 3u);
    for (std::size_t i = 0; i < 3; ++i)
        EXPECT_GT(j["measured_at_largest_gap"][i]["cycles"].get<double>(), j["measured"][i]["cycles"]["median"].get<double>());
}

TEST(StreamCommands, TuneSweepsStepsPerUnit) {
    const auto j = run_json(fmt::format("tune {0}/parcel_chill.mnd --input {0}/inputs.csv --target 1e-3 --json", kSample));
    EXPECT_EQ(j["streaming"], true);
    EXPECT_EQ(j["deployed"]["solver"], "rk4, steps-per-unit 2");
    EXPECT_EQ(j["deployed"]["worst_field_evals_per_observation"], 32);
    ASSERT_TRUE(j.contains("recommended")) << j.dump(1);
    // Candidates are costed at the largest gap: ceil(4 X) steps of 4 stages.
    for (const auto& c : j["candidates"]) {
        const std::string s = c["solver"];
        const double rate = std::stod(s.substr(s.rfind(' ') + 1));
        EXPECT_EQ(c["worst_field_evals_per_observation"].get<long>(), 4 * static_cast<long>(std::ceil(4 * rate))) << s;
    }
}

// Each budget's cycles per observation at worst on --core: for the deployed solver, the
// `worst` that `meander cost` estimates for the same model on that core; more steps, more cycles.
TEST(StreamCommands, TuneCyclesAreCostsWorstEstimate) {
    for (const char* core : {"cortex-m4f", "cortex-m3"}) {
        SCOPED_TRACE(core);
        const auto t = run_json(
            fmt::format("tune {0}/parcel_chill.mnd --input {0}/inputs.csv --target 1e-3 --core {1} --json", kSample, core));
        const auto c = run_json(fmt::format("cost {0}/parcel_chill.mnd --input {0}/inputs.csv --estimate-only --json", kSample));
        EXPECT_EQ(t["core"], core);
        double worst = -1;
        for (const auto& e : c["cycles"])
            if (e["core"] == core) worst = e["worst"].get<double>();
        EXPECT_DOUBLE_EQ(t["deployed"]["worst_cycles_per_observation"].get<double>(), worst);
        double previous = 0;
        for (const auto& k : t["candidates"]) {
            EXPECT_GT(k["worst_cycles_per_observation"].get<double>(), previous) << k.dump();
            previous = k["worst_cycles_per_observation"].get<double>();
        }
    }
}

}  // namespace
