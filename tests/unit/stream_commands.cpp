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
    const auto j = run_json(fmt::format("cost {}/parcel_chill.mnd --json", kSample));
    EXPECT_EQ(j["streaming"], true);
    EXPECT_EQ(j["macs_per_field_eval"], 256);
    EXPECT_EQ(j["worst_field_evals_per_observation"], 32);
    EXPECT_EQ(j["worst_macs_per_observation"], 8416.0);
    EXPECT_EQ(j["parameters"], 8 * 16 + 16 + 16 * 8 + 8 + 24 + 24 * 8 + 24 + 24 + 8 + 1);
}

TEST(StreamCommands, CostMeasuredOverASequenceFile) {
    const auto j = run_json(fmt::format("cost {0}/parcel_chill.mnd --input {0}/inputs.csv --json", kSample));
    const auto& m = j["measured_field_evals"];
    EXPECT_EQ(m["rows"], 96);
    EXPECT_EQ(m["failed_rows"], 0);
    EXPECT_EQ(m["min"], 0.0);       // the first report of a trip comes with gap 0
    EXPECT_LE(m["max"].get<double>(), 32.0);
    EXPECT_GE(m["max"].get<double>(), 28.0);  // the file's largest gap is 3.92 h: ceil(7.84) = 8 steps
    EXPECT_EQ(j["measured_macs"]["max"], m["max"].get<double>() * 256 + 216 + 8);
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

}  // namespace
