// check --expect and the standardisation mistakes: a description that leaves
// out the standardisation the trained network does, one that makes it with the
// wrong tensors, one whose rows were standardised already, and a normalisation
// layer's variance. Each time the note names the statement to write (or the
// option to drop), and the statement, taken as written, makes them agree.
// Outside values: tests/data/framework_standardise.py (PyTorch 1.13's own
// forward pass of two networks saved with torch.save with their x_mean, x_std,
// y_mean, y_std buffers: standardise.json holds its inputs and outputs).
#include <fmt/format.h>
#include <gtest/gtest.h>

#include <algorithm>
#include <cmath>
#include <filesystem>
#include <fstream>
#include <string>

#include <nlohmann/json.hpp>

#include "compiler/expect.hpp"
#include "compiler/load.hpp"
#include "compiler/npz_writer.hpp"
#include "compiler/weights.hpp"
#include "test_support.hpp"

namespace fs = std::filesystem;
using namespace meander;
using namespace meander::test;

namespace {

const fs::path kData = fs::path(MEANDER_SOURCE_DIR) / "tests" / "data" / "standardise";

nlohmann::json expected(const std::string& net) {
    std::ifstream in(kData / "standardise.json");
    return nlohmann::json::parse(in)[net];
}

std::string csv(const nlohmann::json& rows) {
    std::string out;
    for (const auto& row : rows) {
        for (std::size_t i = 0; i < row.size(); ++i) out += fmt::format("{}{:.17g}", i ? "," : "", row[i].get<double>());
        out += "\n";
    }
    return out;
}

// The PyTorch regressor of framework_standardise.py; `in` and `out` end the input's and output's statements.
std::string regressor(const std::string& weights, const std::string& in, const std::string& out) {
    return fmt::format(
        "model regressor\n"
        "weights \"{}\"\n"
        "ignore \"x_*\", \"y_*\"\n"
        "input reading[4], names [current_a in \"A\", supply_v in \"V\", speed_rpm in \"rpm\", winding_c in \"degC\"]{}\n"
        "dense lift: 4 -> 6, tanh\n"
        "continuous settle: 6, t in [0, 1] {{\n"
        "  numbered \"func.net\"\n"
        "  dense f1: 6 -> 8, tanh\n"
        "  dense f2: 8 -> 6\n"
        "  solver rk4, steps 4\n"
        "}}\n"
        "dense head: 6 -> 2\n"
        "output forecast[2], names [efficiency_pct in \"%\", power_factor]{}\n",
        weights, in, out);
}

const std::string kTorch = (kData / "regressor.pt").string() + "\" under \"model";
const std::string kInputNames = "input reading[4], names [current_a in \"A\", supply_v in \"V\", speed_rpm in \"rpm\", winding_c in \"degC\"]";
const std::string kOutputNames = "output forecast[2], names [efficiency_pct in \"%\", power_factor]";

struct Case {
    fs::path dir, mnd, inputs, outputs;
    std::string text;
};

// A description with PyTorch's inputs and outputs beside it.
Case write_case(const std::string& name, const std::string& text, const std::string& net = "regressor") {
    Case c;
    c.dir = scratch_dir("expect_standardise", name);
    c.mnd = c.dir / (net + ".mnd");
    c.inputs = c.dir / "inputs.csv";
    c.outputs = c.dir / "outputs.csv";
    c.text = text;
    write_text(c.mnd, text);
    write_text(c.inputs, csv(expected(net)["inputs"]));
    write_text(c.outputs, csv(expected(net)["outputs"]));
    return c;
}

RunResult check_expect(const Case& c) {
    return run(fmt::format("'{}' check '{}' --input '{}' --expect '{}'", MEANDER_BINARY, c.mnd.string(), c.inputs.string(),
                           c.outputs.string()));
}

int line_of(const std::string& text, const std::string& needle) {
    const std::size_t at = text.find(needle);
    if (at == std::string::npos) return 0;
    return 1 + static_cast<int>(std::count(text.begin(), text.begin() + static_cast<std::ptrdiff_t>(at), '\n'));
}

// The statement a note tells to write: the text between "write '" and the next "'" that ends it.
std::string advised_statement(const std::string& output, const std::string& starts) {
    const std::size_t at = output.find("write '" + starts);
    if (at == std::string::npos) return {};
    const std::size_t from = at + 7;
    const std::size_t end = std::min(output.find("'\n", from), output.find("', in place", from));
    return output.substr(from, end - from);
}

std::string replace_once(std::string text, const std::string& from, const std::string& to) {
    const std::size_t at = text.find(from);
    EXPECT_NE(at, std::string::npos) << from;
    if (at != std::string::npos) text.replace(at, from.size(), to);
    return text;
}

// regressor.pt's tensors as a normalisation layer keeps them: x_mean renamed `mean`, x_std
// squared and renamed `variance`; written as an .npz in a scratch folder `name`.
TensorSet variance_weights(const std::string& name, const std::string& mean, const std::string& variance) {
    Diagnostics diags;
    auto set = read_weights((kData / "regressor.pt").string(), diags, "model");
    EXPECT_TRUE(set) << diags.render();
    TensorSet out;
    out.path = (scratch_dir("expect_standardise", name) / "regressor.npz").string();
    if (!set) return out;
    for (Tensor t : set->tensors) {
        if (t.name == "x_mean") t.name = mean;
        if (t.name == "x_std") {
            t.name = variance;
            for (double& v : t.values) v = v * v;
        }
        out.tensors.push_back(t);
    }
    auto bytes = npz_bytes(out, "float64");
    EXPECT_TRUE(bytes);
    if (bytes) write_text(out.path, *bytes);
    return out;
}

TEST(ExpectStandardise, BothMissingAreNamedWithTheStatementsToWrite) {
    // The buffers are ignored and the statements have no 'standardised': the trained network
    // standardises its input and de-standardises its output, so no one of them alone agrees.
    Case c = write_case("both", regressor(kTorch, "", ""));
    const RunResult r = check_expect(c);
    EXPECT_EQ(r.status, 1) << r.output;
    EXPECT_NE(r.output.find("error: the reference evaluation disagrees with the expected outputs"), std::string::npos) << r.output;
    EXPECT_NE(r.output.find("note: they agree with the input 'reading' standardised with mean 'x_mean' and scale 'x_std' and "
                            "the output 'forecast' standardised with mean 'y_mean' and scale 'y_std' together:"),
              std::string::npos)
        << r.output;
    const std::string in_statement = kInputNames + ", standardised mean \"x_mean\" scale \"x_std\"";
    const std::string out_statement = kOutputNames + ", standardised mean \"y_mean\" scale \"y_std\"";
    EXPECT_NE(r.output.find(fmt::format("regressor.mnd:{}:7: note: input 'reading': the trained network standardises it with "
                                        "the mean 'x_mean' and the scale 'x_std': write '{}'\n",
                                        line_of(c.text, "input reading"), in_statement)),
              std::string::npos)
        << r.output;
    EXPECT_NE(r.output.find(fmt::format("regressor.mnd:{}:8: note: output 'forecast': the trained network gives it as y * "
                                        "scale + mean with the mean 'y_mean' and the scale 'y_std': write '{}'\n",
                                        line_of(c.text, "output forecast"), out_statement)),
              std::string::npos)
        << r.output;
    // Only the right pairing is named (not x_std as a mean, nor the output's tensors on the input).
    EXPECT_EQ(r.output.find("mean 'x_std'"), std::string::npos) << r.output;
    // The statements, as the notes write them, make them agree.
    EXPECT_EQ(advised_statement(r.output, "input"), in_statement);
    EXPECT_EQ(advised_statement(r.output, "output"), out_statement);
    std::string fixed = replace_once(c.text, kInputNames, advised_statement(r.output, "input"));
    fixed = replace_once(fixed, kOutputNames, advised_statement(r.output, "output"));
    write_text(c.mnd, fixed);
    const RunResult again = check_expect(c);
    EXPECT_EQ(again.status, 0) << again.output;
    EXPECT_NE(again.output.find("agrees with the reference evaluation"), std::string::npos) << again.output;
}

TEST(ExpectStandardise, MissingInputStandardisationAloneIsNamed) {
    // The classifier: a softmax head, so only the input can be standardised; its buffers are x_mean and x_std.
    const std::string text = fmt::format(
        "model classifier\n"
        "weights \"{}\" under \"model\"\n"
        "ignore \"x_mean\", \"x_std\"\n"
        "input reading[3]\n"
        "dense lift: 3 -> 5, tanh\n"
        "dense head: 5 -> 4, softmax\n"
        "output grade[4]\n",
        (kData / "classifier.pt").string());
    Case c = write_case("classifier", text, "classifier");
    const RunResult r = check_expect(c);
    EXPECT_EQ(r.status, 1) << r.output;
    EXPECT_NE(r.output.find("note: they agree with the input 'reading' standardised with mean 'x_mean' and scale 'x_std':"),
              std::string::npos)
        << r.output;
    EXPECT_NE(r.output.find("classifier.mnd:4:7: note: input 'reading': the trained network standardises it with the mean "
                            "'x_mean' and the scale 'x_std': write 'input reading[3], standardised mean \"x_mean\" scale "
                            "\"x_std\"'"),
              std::string::npos)
        << r.output;
    write_text(c.mnd, replace_once(text, "input reading[3]", advised_statement(r.output, "input")));
    EXPECT_EQ(check_expect(c).status, 0);
}

TEST(ExpectStandardise, StandardisationWithSwappedTensorsIsNamed) {
    // Mean and scale written the wrong way round; the output's is right.
    Case c = write_case("swapped", regressor(kTorch, ", standardised mean \"x_std\" scale \"x_mean\"",
                                             ", standardised mean \"y_mean\" scale \"y_std\""));
    const RunResult r = check_expect(c);
    EXPECT_EQ(r.status, 1) << r.output;
    EXPECT_NE(r.output.find("note: they agree with the input 'reading' standardised with mean 'x_mean' and scale 'x_std' in "
                            "place of the description's:"),
              std::string::npos)
        << r.output;
    const std::string statement = kInputNames + ", standardised mean \"x_mean\" scale \"x_std\"";
    EXPECT_NE(r.output.find(fmt::format("write '{}', in place of 'standardised mean \"x_std\" scale \"x_mean\"'", statement)),
              std::string::npos)
        << r.output;
    EXPECT_EQ(advised_statement(r.output, "input"), statement);
    write_text(c.mnd, replace_once(c.text, kInputNames + ", standardised mean \"x_std\" scale \"x_mean\"", statement));
    EXPECT_EQ(check_expect(c).status, 0);
}

TEST(ExpectStandardise, RowsStandardisedTwiceAreNamed) {
    // The description is right, but the rows given to --input were standardised already (the
    // trainer's test split after its scaler): meander standardises them a second time.
    const std::string text = regressor(kTorch, ", standardised mean \"x_mean\" scale \"x_std\"",
                                       ", standardised mean \"y_mean\" scale \"y_std\"");
    Case c = write_case("twice", text);
    const auto want = expected("regressor");
    const auto mean = want["buffers"]["x_mean"].get<std::vector<double>>();
    const auto scale = want["buffers"]["x_std"].get<std::vector<double>>();
    nlohmann::json z = nlohmann::json::array();
    for (const auto& row : want["inputs"]) {
        nlohmann::json zr = nlohmann::json::array();
        for (std::size_t i = 0; i < row.size(); ++i) zr.push_back((row[i].get<double>() - mean[i]) / scale[i]);
        z.push_back(zr);
    }
    write_text(c.inputs, csv(z));
    const RunResult r = check_expect(c);
    EXPECT_EQ(r.status, 1) << r.output;
    EXPECT_NE(r.output.find("note: they agree with the input 'reading' not standardised:"), std::string::npos) << r.output;
    const std::size_t keyword = text.find("standardised mean \"x_mean\"");
    const int line = line_of(text, "standardised mean \"x_mean\"");
    const int col = static_cast<int>(keyword - text.rfind('\n', keyword));
    EXPECT_NE(r.output.find(fmt::format("regressor.mnd:{}:{}: note: input 'reading': the expected outputs are the network's "
                                        "for the rows as they stand, not standardised: if the trained network takes them "
                                        "so, drop 'standardised mean \"x_mean\" scale \"x_std\"' from the statement; if "
                                        "the rows were standardised already, give --input the raw ones",
                                        line, col)),
              std::string::npos)
        << r.output;
    // The raw rows agree.
    write_text(c.inputs, csv(want["inputs"]));
    EXPECT_EQ(check_expect(c).status, 0);
}

TEST(ExpectStandardise, OutputDestandardisedTwiceIsNamed) {
    // The expected file holds the head's standardised values ((y - y_mean) / y_std, from PyTorch's
    // outputs): the output's de-standardisation dropped explains it.
    Case c = write_case("output", regressor(kTorch, ", standardised mean \"x_mean\" scale \"x_std\"",
                                            ", standardised mean \"y_mean\" scale \"y_std\""));
    const auto want = expected("regressor");
    const auto mean = want["buffers"]["y_mean"].get<std::vector<double>>();
    const auto scale = want["buffers"]["y_std"].get<std::vector<double>>();
    nlohmann::json z = nlohmann::json::array();
    for (const auto& row : want["outputs"])
        z.push_back({(row[0].get<double>() - mean[0]) / scale[0], (row[1].get<double>() - mean[1]) / scale[1]});
    write_text(c.outputs, csv(z));
    const RunResult r = check_expect(c);
    EXPECT_EQ(r.status, 1) << r.output;
    EXPECT_NE(r.output.find("note: they agree with the output 'forecast' not standardised:"), std::string::npos) << r.output;
    EXPECT_NE(r.output.find("note: output 'forecast': the expected outputs are the last layer's values, not brought back to "
                            "the output's units: if the trained network gives them so, drop 'standardised mean \"y_mean\" "
                            "scale \"y_std\"' from the statement"),
              std::string::npos)
        << r.output;
}

TEST(ExpectStandardise, VarianceGivesItsSquareRootAsTheScale) {
    // A normalisation layer's buffers: running_mean and running_var (= x_std squared) in an .npz.
    TensorSet out = variance_weights("variance_weights", "norm.running_mean", "norm.running_var");
    std::string text = regressor(out.path, "", ", standardised mean \"y_mean\" scale \"y_std\"");
    text = replace_once(text, "ignore \"x_*\", \"y_*\"", "ignore \"norm.*\"");
    Case c = write_case("variance", text);
    const RunResult r = check_expect(c);
    EXPECT_EQ(r.status, 1) << r.output;
    EXPECT_NE(r.output.find("note: they agree with the input 'reading' standardised with mean 'norm.running_mean' and scale "
                            "the square root of 'norm.running_var':"),
              std::string::npos)
        << r.output;
    const std::string statement = kInputNames + ", standardised mean \"norm.running_mean\" scale \"norm.running_std\"";
    EXPECT_NE(r.output.find(fmt::format("input 'reading': the trained network standardises it with the mean "
                                        "'norm.running_mean' and a scale that is the square root of the variance "
                                        "'norm.running_var' (tried without any eps a normalisation layer adds): save "
                                        "sqrt(norm.running_var + eps) as a tensor, say 'norm.running_std', and write '{}'",
                                        statement)),
              std::string::npos)
        << r.output;
    // Saved as advised (the square root, eps 0), the statement agrees.
    for (Tensor& t : out.tensors)
        if (t.name == "norm.running_var") {
            Tensor s = t;
            s.name = "norm.running_std";
            for (double& v : s.values) v = std::sqrt(v);
            out.tensors.push_back(s);
            break;
        }
    write_text(out.path, *npz_bytes(out, "float64"));
    write_text(c.mnd, replace_once(text, kInputNames, advised_statement(r.output, "input")));
    const RunResult again = check_expect(c);
    EXPECT_EQ(again.status, 0) << again.output;
}

// The tensors' names read whatever their case: a normalisation layer's buffers saved as
// 'Norm.Running_Mean' and 'Norm.Running_Var', all in capitals, or in camelCase. The file is made as in
// VarianceGivesItsSquareRootAsTheScale (variance_weights): framework_standardise.py's
// regressor.pt (PyTorch 1.13), x_mean renamed, x_std renamed and squared, written as an .npz.
TEST(ExpectStandardise, TensorNamesAreMatchedWhateverTheirCase) {
    struct Names {
        const char* mean;
        const char* variance;
        const char* root;   // the name the note suggests for the square root
    };
    for (const Names n : {Names{"Norm.Running_Mean", "Norm.Running_Var", "Norm.Running_Std"},
                          Names{"NORM.RUNNING_MEAN", "NORM.RUNNING_VAR", "NORM.RUNNING_STD"},
                          Names{"x_Mean", "x_Variance", "x_Std"},
                          // camelCase: the words split at the hump
                          Names{"norm.runningMean", "norm.runningVar", "norm.runningStd"}}) {
        SCOPED_TRACE(n.variance);
        const TensorSet out = variance_weights(std::string("case_weights_") + n.variance, n.mean, n.variance);
        std::string text = regressor(out.path, "", ", standardised mean \"y_mean\" scale \"y_std\"");
        text = replace_once(text, "ignore \"x_*\", \"y_*\"", fmt::format("ignore \"{}\", \"{}\"", n.mean, n.variance));
        Case c = write_case(std::string("case_") + n.variance, text);
        const RunResult r = check_expect(c);
        EXPECT_EQ(r.status, 1) << r.output;
        EXPECT_NE(r.output.find(fmt::format("note: they agree with the input 'reading' standardised with mean '{}' and scale "
                                            "the square root of '{}':",
                                            n.mean, n.variance)),
                  std::string::npos)
            << r.output;
        EXPECT_NE(r.output.find(fmt::format("save sqrt({} + eps) as a tensor, say '{}', and write '{}, standardised mean "
                                            "\"{}\" scale \"{}\"'",
                                            n.variance, n.root, kInputNames, n.mean, n.root)),
                  std::string::npos)
            << r.output;
    }
}

// The library entry point sees the same: the loaded model carries the loose vectors.
TEST(ExpectStandardise, LoadedModelCarriesTheLooseVectors) {
    Case c = write_case("loose", regressor(kTorch, "", ", standardised mean \"y_mean\" scale \"y_std\""));
    Diagnostics diags;
    auto loaded = load_model(c.mnd.string(), Precision::float64, diags);
    ASSERT_TRUE(loaded) << diags.render();
    std::vector<std::string> names;
    for (const Tensor& t : loaded->loose_vectors) names.push_back(t.name);
    // framework_standardise.py registers x_mean, x_std, y_mean, y_std: the first two ignored, the others bound
    // by the output's standardisation; no layer's weight or bias is among them.
    EXPECT_EQ(names, (std::vector<std::string>{"x_mean", "x_std", "y_mean", "y_std"}));
    std::string summary;
    Diagnostics check;
    EXPECT_FALSE(check_expected(*loaded, c.inputs.string(), c.outputs.string(), kExpectTolerance, check, summary));
    EXPECT_NE(check.render().find("they agree with the input 'reading' standardised with mean 'x_mean' and scale 'x_std':"),
              std::string::npos)
        << check.render();
}

}  // namespace
