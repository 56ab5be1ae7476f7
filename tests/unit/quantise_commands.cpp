// Integer weight storage from the command line: the layers kept real and
// why, a row of zeros, a non-finite weight, a storage that does not exist,
// eval's arithmetic, the statement and option of the description language,
// and the reports of verify, cost and tune.
#include <gtest/gtest.h>

#include <cmath>
#include <sstream>
#include <string>

#include <fmt/format.h>

#include "test_support.hpp"

using namespace meander::test;

namespace {

meander::test::RunResult meander_run(const std::string& args) { return run(std::string(MEANDER_BINARY) + " " + args); }

// tiny: 2 -> 3 (6 weights, under the 16 below which a layer stays real);
// big: 3 -> 8 with its row 2 all zero; weights invented: w = (i + 2 j) / 10 - 1.
const char* kListing = R"(meander-weights 1
tensor tiny.weight float32 3 2
-1 -0.8
-0.9 -0.7
-0.8 -0.6
tensor tiny.bias float32 3
0.1 0.2 0.3
tensor big.weight float32 8 3
-1 -0.8 -0.6
-0.9 -0.7 -0.5
0 0 0
-0.7 -0.5 -0.3
-0.6 -0.4 -0.2
-0.5 -0.3 -0.1
-0.4 -0.2 0
-0.3 -0.1 0.1
tensor big.bias float32 8
0 0 0 0 0 0 0 0
)";

std::filesystem::path small_model(const std::string& name, const std::string& storage_lines, const std::string& listing = kListing) {
    const auto dir = scratch_dir("quantise_commands", name);
    write_text(dir / "w.mnw", listing);
    write_text(dir / "m.mnd", "model small\nweights \"w.mnw\"\n" + storage_lines +
                                  "input x[2]\ndense tiny: 2 -> 3, tanh\ndense big: 3 -> 8\noutput y[8]\n");
    write_text(dir / "in.csv", "0.5,-0.25\n1,2\n-3,0.125\n");
    return dir;
}

}  // namespace

TEST(QuantiseCommands, SmallLayerAndZeroRowAreStated) {
    const auto dir = small_model("notes", "");
    const auto r = meander_run("compile " + (dir / "m.mnd").string() + " -o " + (dir / "out").string() + " --weights-as int8");
    EXPECT_EQ(r.status, 0) << r.output;
    EXPECT_NE(r.output.find("m.mnd:4:7: note: layer 'tiny': kept in float32: 6 weights, fewer than the 16 below which int8 "
                            "scales and code take more flash than they save"),
              std::string::npos)
        << r.output;
    EXPECT_NE(r.output.find("m.mnd:5:7: note: layer 'big': row 2 all zero: scale 0, stored exactly"), std::string::npos)
        << r.output;
    const std::string cpp = read_text(dir / "out" / "small.cpp");
    EXPECT_NE(cpp.find("const real w_tiny[6]"), std::string::npos);
    EXPECT_NE(cpp.find("const std::int8_t w_big[24]"), std::string::npos);
    // Row 2's scale is 0; row 0's is 1/127 (its largest magnitude is 1), printed shortest for float.
    EXPECT_NE(cpp.find("const real s_big[8]"), std::string::npos);
    EXPECT_NE(cpp.find("0.007874016f"), std::string::npos);
}

TEST(QuantiseCommands, NonFiniteWeightIsRefusedAtBinding) {
    std::string listing = kListing;
    listing.replace(listing.find("-0.7 -0.5 -0.3"), 4, "nan ");
    const auto dir = small_model("nan", "", listing);
    const auto r = meander_run("compile " + (dir / "m.mnd").string() + " -o " + (dir / "out").string() + " --weights-as int8");
    EXPECT_EQ(r.status, 1) << r.output;
    EXPECT_NE(r.output.find("layer 'big': tensor 'big.weight' holds NaN at flat index 9 [3, 0]"), std::string::npos) << r.output;
    EXPECT_FALSE(std::filesystem::exists(dir / "out" / "small.cpp"));
}

TEST(QuantiseCommands, UnknownStorageIsAUsageError) {
    const auto dir = small_model("usage", "");
    const auto r = meander_run("compile " + (dir / "m.mnd").string() + " -o " + (dir / "out").string() + " --weights-as int4");
    EXPECT_EQ(r.status, 2) << r.output;
    EXPECT_NE(r.output.find("int4"), std::string::npos) << r.output;
}

// eval --weights-as int8 by hand for row 0 of big (tiny stays real): the row
// [-1, -0.8, -0.6] has scale 1/127, q = [-127, -102 (-101.6), -76 (-76.2)].
TEST(QuantiseCommands, EvalUsesTheIntegers) {
    const auto dir = small_model("eval", "");
    const auto r = meander_run("eval " + (dir / "m.mnd").string() + " --input " + (dir / "in.csv").string() +
                               " --weights-as int8");
    ASSERT_EQ(r.status, 0) << r.output;
    // Row 1 of in.csv: x = (0.5, -0.25); tiny: tanh(W x + b) with the real weights.
    // The listing's values are float32: the weights are those floats.
    const auto f = [](float v) { return static_cast<double>(v); };
    const double h0 = std::tanh((f(-1.0f) * 0.5 + f(-0.8f) * -0.25) + f(0.1f)),
                 h1 = std::tanh((f(-0.9f) * 0.5 + f(-0.7f) * -0.25) + f(0.2f)),
                 h2 = std::tanh((f(-0.8f) * 0.5 + f(-0.6f) * -0.25) + f(0.3f));
    const double s = 1.0 / 127;
    const double y0 = ((-127 * s) * h0 + (-102 * s) * h1) + (-76 * s) * h2;
    std::istringstream lines(r.output);
    std::string header, first;
    std::getline(lines, header);
    std::getline(lines, first);
    EXPECT_NEAR(std::stod(first.substr(0, first.find(','))), y0, 1e-15);
}

TEST(QuantiseCommands, StatementAndOptionInTheDescription) {
    // The model's statement; the option on a layer wins over it.
    {
        const auto dir = small_model("statement", "weights-as int16\n");
        const auto r = meander_run("compile " + (dir / "m.mnd").string() + " -o " + (dir / "out").string());
        EXPECT_EQ(r.status, 0) << r.output;
        EXPECT_NE(read_text(dir / "out" / "small.cpp").find("const std::int16_t w_big[24]"), std::string::npos);
        // format keeps it
        const auto f = meander_run("format " + (dir / "m.mnd").string());
        EXPECT_NE(f.output.find("weights-as int16\n"), std::string::npos) << f.output;
    }
    {
        const auto dir = scratch_dir("quantise_commands", "option");
        write_text(dir / "w.mnw", kListing);
        write_text(dir / "m.mnd", "model small\nweights \"w.mnw\"\nweights-as int8\ninput x[2]\ndense tiny: 2 -> 3, tanh\n"
                                  "dense big: 3 -> 8, weights-as float\noutput y[8]\n");
        const auto r = meander_run("compile " + (dir / "m.mnd").string() + " -o " + (dir / "out").string());
        EXPECT_EQ(r.status, 0) << r.output;
        EXPECT_NE(read_text(dir / "out" / "small.cpp").find("const real w_big[24]"), std::string::npos);
        const auto f = meander_run("format " + (dir / "m.mnd").string());
        EXPECT_NE(f.output.find("dense big: 3 -> 8, weights-as float\n"), std::string::npos) << f.output;
        // --weights-as overrides the description.
        const auto o = meander_run("compile " + (dir / "m.mnd").string() + " -o " + (dir / "out2").string() + " --weights-as int16");
        EXPECT_EQ(o.status, 0) << o.output;
        EXPECT_NE(read_text(dir / "out2" / "small.cpp").find("const std::int16_t w_big[24]"), std::string::npos);
    }
}

TEST(QuantiseCommands, DescriptionMistakes) {
    struct Case {
        std::string text, message;
    };
    const std::vector<Case> cases{
        {"model m\nweights-as int4\ninput x[2]\ndense a: 2 -> 2\noutput y[2]\n",
         "m.mnd:2:12: error: expected a weight storage: 'float', 'int8' or 'int16' (integers with one scale per output row)"},
        {"model m\ninput x[2]\ndense a: 2 -> 2\nweights-as int8\ndense b: 2 -> 2\noutput y[2]\n",
         "m.mnd:4:1: error: 'weights-as' for the whole model must come before the first layer or block"},
        {"model m\nweights-as int8\nweights-as int16\ninput x[2]\ndense a: 2 -> 2\noutput y[2]\n",
         "m.mnd:3:1: error: model 'm' already has a 'weights-as' statement (line 2)"},
        {"model m\ninput x[2]\nresidual r: 2 {\n  dense a: 2 -> 2\n  weights-as int8\n}\noutput y[2]\n",
         "m.mnd:5:3: error: 'weights-as' must come before the layers of residual 'r'"},
        {"model m\ninput x[2]\ndense a: 2 -> 2, weights-as int8, weights-as int16\noutput y[2]\n",
         "m.mnd:3:35: error: 'weights-as' is given twice for layer 'a'"},
    };
    int i = 0;
    for (const Case& c : cases) {
        const auto dir = scratch_dir("quantise_commands", "mistake" + std::to_string(i++));
        write_text(dir / "m.mnd", c.text);
        const auto r = meander_run("format " + (dir / "m.mnd").string());
        EXPECT_EQ(r.status, 1) << c.text;
        EXPECT_NE(r.output.find(c.message), std::string::npos) << r.output;
    }
}

TEST(QuantiseCommands, VerifyAndCostReportTheStorage) {
    const auto dir = small_model("reports", "");
    const auto v = meander_run("verify " + (dir / "m.mnd").string() + " --input " + (dir / "in.csv").string() +
                               " --weights-as int8 --precision float64");
    EXPECT_EQ(v.status, 0) << v.output;
    EXPECT_NE(v.output.find("required             equal bits for every output, equal counters"), std::string::npos);
    EXPECT_NE(v.output.find("verdict              agrees"), std::string::npos) << v.output;
    // big as int8: 24 weights and 8 float64 scales, 88 B against 192 B as reals; tiny stays real (48 B).
    EXPECT_NE(v.output.find("weights and scales 136 B, as reals 240 B: 104 B saved (43.3%)"), std::string::npos) << v.output;
    const auto c = meander_run("cost " + (dir / "m.mnd").string() + " --weights-as int8 --estimate-only");
    EXPECT_EQ(c.status, 0) << c.output;
    EXPECT_NE(c.output.find("weight tables per dense layer"), std::string::npos) << c.output;
    EXPECT_NE(c.output.find("tiny: kept in float32: 6 weights"), std::string::npos) << c.output;
}

// tune over the storage: three sweeps, each against the real-weight reference,
// and a table whose weight bytes fall from float to int16 to int8.
TEST(QuantiseCommands, TuneSweepsTheStorage) {
    const std::string sample = std::string(MEANDER_SOURCE_DIR) + "/samples/boiler_ahead/boiler_ahead.mnd";
    const std::string inputs = std::string(MEANDER_SOURCE_DIR) + "/samples/boiler_ahead/inputs.csv";
    const auto r = meander_run("tune " + sample + " --input " + inputs +
                               " --method rk4 --max-steps-sweep 4 --target 1e-2 --weights-sweep --threads 1");
    ASSERT_EQ(r.status, 0) << r.output;
    long bytes[3] = {0, 0, 0};
    const char* names[3] = {"float", "int16", "int8"};
    for (int i = 0; i < 3; ++i) {
        const std::string head = fmt::format("==== weights as {} (", names[i]);
        const auto at = r.output.find(head);
        ASSERT_NE(at, std::string::npos) << r.output;
        bytes[i] = std::stol(r.output.substr(at + head.size()));
    }
    EXPECT_GT(bytes[0], bytes[1]);
    EXPECT_GT(bytes[1], bytes[2]);
    EXPECT_NE(r.output.find("weight storage and solver (each storage against the reference of the model with real weights; "
                            "cycles: the estimate of one inference on the cortex-m4f at worst, with the solvers chosen)"),
              std::string::npos);
    EXPECT_NE(r.output.find("recommended: "), std::string::npos);
    // int8 moves boiler_ahead's outputs by up to 0.06 of max(1, |output|) (README): it cannot meet 1e-2.
    EXPECT_NE(r.output.find(fmt::format("  {:<8} {:>12} {:>12} {:>12}  no\n", "int8", bytes[2], "-", "-")), std::string::npos)
        << r.output;
    // float and int16 meet it with the same field evaluations; the integer layers cost more cycles
    // per MAC on the Cortex-M4F (each weight converted and scaled: README, "Smaller weights").
    long evals[2] = {0, 0};
    double cycles[2] = {0, 0};
    for (int i = 0; i < 2; ++i) {
        std::istringstream row(r.output.substr(r.output.find(fmt::format("\n  {:<8} {:>12} ", names[i], bytes[i])) + 1));
        std::string name;
        long b = 0;
        row >> name >> b >> evals[i] >> cycles[i];
        ASSERT_TRUE(row) << r.output;
    }
    EXPECT_EQ(evals[0], evals[1]) << r.output;
    EXPECT_GT(cycles[1], 1.5 * cycles[0]) << r.output;
}
