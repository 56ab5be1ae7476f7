// --labels on eval and tune (compiler/labels.cpp): the task metric against
// NumPy's arithmetic on the same files, and bad labels files.
#include <gtest/gtest.h>
#include <nlohmann/json.hpp>

#include <cmath>
#include <string>
#include <vector>

#include "test_support.hpp"

using namespace meander::test;

namespace {

const std::string kBin = MEANDER_BINARY;
const std::string kSamples = std::string(MEANDER_SOURCE_DIR) + "/samples/";

std::string sample(const std::string& name, const std::string& file) { return kSamples + name + "/" + file; }

// A number NumPy 1.24 computes from the sample's files (expected.csv is the
// reference forward pass that samples/check_expected.py recomputes independently).
double numpy(const std::string& expr, const std::string& name) {
    const std::string py = "import numpy as np\n"
                           "out = np.loadtxt('" + sample(name, "expected.csv") + "', delimiter=',', skiprows=1, ndmin=2)\n"
                           "lab = np.loadtxt('" + sample(name, "labels.csv") + "', delimiter=',', skiprows=1, ndmin=2)\n"
                           "print(repr(float(" + expr + ")))\n";
    const auto dir = temp_dir("labels-py");
    write_text(dir / "m.py", py);
    const RunResult r = run(std::string(MEANDER_SCIPY_PYTHON) + " " + (dir / "m.py").string());
    EXPECT_EQ(r.status, 0) << r.output;
    return std::stod(r.output);
}

// The number after `key ` in `text`.
double number_after(const std::string& text, const std::string& key) {
    const auto at = text.find(key + " ");
    EXPECT_NE(at, std::string::npos) << key << " in " << text;
    if (at == std::string::npos) return NAN;
    return std::stod(text.substr(at + key.size() + 1));
}

}  // namespace

TEST(EvalLabels, RegressionRmseAndMaeAsNumpy) {
    const RunResult r = run(kBin + " eval " + sample("boiler_ahead", "boiler_ahead.mnd") + " --input " +
                            sample("boiler_ahead", "inputs.csv") + " --labels " + sample("boiler_ahead", "labels.csv") +
                            " --output /dev/null");
    ASSERT_EQ(r.status, 0) << r.output;
    // Printed with 4 significant digits.
    EXPECT_NEAR(number_after(r.output, "RMSE"), numpy("np.sqrt(np.mean((out - lab) ** 2))", "boiler_ahead"), 5e-4 * 5);
    EXPECT_NEAR(number_after(r.output, "ahead.0"), numpy("np.sqrt(np.mean((out[:, 0] - lab[:, 0]) ** 2))", "boiler_ahead"),
                1e-3);
    const auto mae_at = r.output.find("MAE");
    ASSERT_NE(mae_at, std::string::npos);
    EXPECT_NEAR(number_after(r.output.substr(mae_at), "ahead.1"), numpy("np.mean(np.abs(out[:, 1] - lab[:, 1]))", "boiler_ahead"),
                1e-3);
}

TEST(EvalLabels, ClassifierAccuracyAndCrossEntropyAsNumpy) {
    const RunResult r = run(kBin + " eval " + sample("fan_balance", "fan_balance.mnd") + " --input " +
                            sample("fan_balance", "inputs.csv") + " --labels " + sample("fan_balance", "labels.csv") +
                            " --output /dev/null");
    ASSERT_EQ(r.status, 0) << r.output;
    EXPECT_NEAR(number_after(r.output, "accuracy"),
                100 * numpy("np.mean(np.argmax(out, axis=1) == lab[:, 0])", "fan_balance"), 0.006);
    EXPECT_NEAR(number_after(r.output, "cross-entropy"),
                numpy("-np.mean(np.log(out[np.arange(len(out)), lab[:, 0].astype(int)]))", "fan_balance"), 1e-3);
}

TEST(EvalLabels, BadFilesNameFileLineAndShape) {
    const auto dir = temp_dir("labels-bad");
    const std::string base = kBin + " eval " + sample("boiler_ahead", "boiler_ahead.mnd") + " --input " +
                             sample("boiler_ahead", "inputs.csv") + " --output " + (dir / "out.csv").string() + " --labels ";
    std::string good = read_text(sample("boiler_ahead", "labels.csv"));
    // One row short: points past the last row.
    write_text(dir / "short.csv", good.substr(0, good.rfind('\n', good.size() - 2) + 1));
    RunResult r = run(base + (dir / "short.csv").string());
    EXPECT_EQ(r.status, 1);
    EXPECT_NE(r.output.find("short.csv:41:1: error: the labels hold 39 rows, the inputs 40: expected 40 rows of 2 values"),
              std::string::npos)
        << r.output;
    // A row of three values.
    std::string wide = good;
    wide.insert(wide.find('\n', wide.find('\n') + 1), ",1.5");
    write_text(dir / "wide.csv", wide);
    r = run(base + (dir / "wide.csv").string());
    EXPECT_EQ(r.status, 1);
    EXPECT_NE(r.output.find("wide.csv:2:1: error: row has 3 values, expected 2"), std::string::npos) << r.output;
    EXPECT_NE(r.output.find("expected 40 rows of 2 values"), std::string::npos) << r.output;
    // NaN in the second column of line 4.
    std::string nan = good;
    std::size_t line4 = 0;
    for (int i = 0; i < 3; ++i) line4 = nan.find('\n', line4) + 1;
    const std::size_t comma = nan.find(',', line4);
    nan.replace(comma + 1, nan.find('\n', comma) - comma - 1, "nan");
    write_text(dir / "nan.csv", nan);
    r = run(base + (dir / "nan.csv").string());
    EXPECT_EQ(r.status, 1);
    EXPECT_NE(r.output.find("nan.csv:4:" + std::to_string(comma - line4 + 2) + ": error: a label must be a finite number"),
              std::string::npos)
        << r.output;
    // A class index out of range for the softmax head.
    write_text(dir / "class.csv", "grade\n4\n");
    r = run(kBin + " eval " + sample("fan_balance", "fan_balance.mnd") + " --input " + sample("fan_balance", "inputs.csv") +
            " --labels " + (dir / "class.csv").string());
    EXPECT_EQ(r.status, 1);
    EXPECT_NE(r.output.find("class.csv:2:1: error: class index 4 is not one of 0..3"), std::string::npos) << r.output;
    EXPECT_FALSE(std::filesystem::exists(dir / "out.csv"));
}

// The labels' header against the output's declared names (boiler_ahead: water_30s_c and wall_30s_c,
// both in degC), as input rows are against the input's (tests/unit/csv.cpp); a column of class
// indices may be headed freely.
TEST(EvalLabels, HeaderIsCheckedAgainstTheOutputNames) {
    const auto dir = temp_dir("labels-header");
    const std::string base = kBin + " eval " + sample("boiler_ahead", "boiler_ahead.mnd") + " --input " +
                             sample("boiler_ahead", "inputs.csv") + " --output " + (dir / "out.csv").string() + " --labels ";
    const std::string good = read_text(sample("boiler_ahead", "labels.csv"));
    const auto headed = [&](const std::string& header) {
        write_text(dir / "labels.csv", header + good.substr(good.find('\n')));
        return run(base + (dir / "labels.csv").string());
    };
    // Refused with exit status 1 and `diagnostics` at line 1 of the file.
    const auto refused = [&](const std::string& header, const std::vector<std::string>& diagnostics) {
        const RunResult r = headed(header);
        EXPECT_EQ(r.status, 1) << r.output;
        for (const std::string& d : diagnostics)
            EXPECT_NE(r.output.find((dir / "labels.csv").string() + ":1:" + d), std::string::npos) << r.output;
        // The rows are fine: no note of the shape they must have.
        EXPECT_EQ(r.output.find("note: expected"), std::string::npos) << r.output;
    };
    refused("wall_30s_c,water_30s_c", {"1: error: column 1 is named 'wall_30s_c', but output 'ahead' takes 'water_30s_c' "
                                       "there: 'wall_30s_c' is its column 2\nwall_30s_c,water_30s_c\n^\n"});
    refused("water_30s_c (degF),wall_30s",
            {"1: error: column 1 gives 'water_30s_c' in 'degF', but output 'ahead' takes it in 'degC'\n",
             "20: error: column 2 is named 'wall_30s', but output 'ahead' takes 'wall_30s_c' there: did you mean "
             "'wall_30s_c'?\n"});
    refused("boiler,wall", {"1: error: the header names none of output 'ahead''s values: it takes water_30s_c, wall_30s_c, "
                            "in this order"});
    EXPECT_FALSE(std::filesystem::exists(dir / "out.csv"));
    RunResult r = headed("water_30s_c (degC),wall_30s_c (degC)");
    EXPECT_EQ(r.status, 0) << r.output;
    // fan_balance's labels: one class index a row under the header 'grade', not a class's name.
    r = run(kBin + " eval " + sample("fan_balance", "fan_balance.mnd") + " --input " + sample("fan_balance", "inputs.csv") +
            " --output /dev/null --labels " + sample("fan_balance", "labels.csv"));
    EXPECT_EQ(r.status, 0) << r.output;
}

TEST(TuneLabels, MetricPerCandidateAndChoiceByMetric) {
    const std::string base = kBin + " tune " + sample("fan_balance", "fan_balance.mnd") + " --input " +
                             sample("fan_balance", "inputs.csv") + " --labels " + sample("fan_balance", "labels.csv");
    const RunResult r = run(base + " --metric-slack 0.05 --json");
    ASSERT_EQ(r.status, 0) << r.output;
    const auto j = nlohmann::json::parse(r.output);
    EXPECT_EQ(j["metric"], "cross-entropy");
    const auto& b = j["blocks"][0];
    const double deployed = b["deployed"]["metric"]["score"].get<double>();
    EXPECT_NEAR(deployed, numpy("-np.mean(np.log(out[np.arange(len(out)), lab[:, 0].astype(int)]))", "fan_balance"), 1e-12);
    ASSERT_FALSE(b["chosen"].is_null());
    long cheapest = -1;
    for (const auto& k : b["candidates"]) {
        ASSERT_TRUE(k.contains("metric") || !k["ok"].get<bool>());
        if (!k["ok"].get<bool>()) continue;
        const bool within = k["metric"]["score"].get<double>() <= deployed * 1.05;
        EXPECT_EQ(k["meets_target"].get<bool>(), within);
        if (within && (cheapest < 0 || k["worst_field_evals"].get<long>() < cheapest)) cheapest = k["worst_field_evals"];
    }
    EXPECT_EQ(b["candidates"][b["chosen"].get<std::size_t>()]["worst_field_evals"].get<long>(), cheapest);
    // Slack without labels: a usage error.
    EXPECT_EQ(run(kBin + " tune " + sample("fan_balance", "fan_balance.mnd") + " --input " +
                  sample("fan_balance", "inputs.csv") + " --metric-slack 0.05")
                  .status,
              2);
    const RunResult text = run(base);
    EXPECT_NE(text.output.find("cross-entropy"), std::string::npos) << text.output;
}
