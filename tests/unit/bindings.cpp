// Binding tensors named and laid out the way training code saves them: a
// numbered block (`numbered "net"` binds net.0, net.2, ... as nn.Sequential
// names its modules), `ignore` patterns for the tensors a model carries but does
// not use, and weights stored (in, out) or with the time column first
// (`transposed`, `time-first`, per layer or per block with `layout`).
// The weight files and the framework's own outputs come from
// tests/data/framework_bindings.py (PyTorch 1.13's torch.save and forward pass;
// NumPy's savez and a NumPy forward pass); the glob cases are the answers of
// Python's fnmatch.fnmatchcase.
#include <gtest/gtest.h>
#include <fmt/format.h>
#include <nlohmann/json.hpp>

#include <filesystem>
#include <fstream>

#include "compiler/format.hpp"
#include "compiler/load.hpp"
#include "compiler/parse.hpp"
#include "compiler/weights.hpp"
#include "runtime/evaluate.hpp"
#include "test_support.hpp"

namespace fs = std::filesystem;
using namespace meander;

namespace {

const fs::path kData = fs::path(MEANDER_SOURCE_DIR) / "tests" / "data" / "bindings";

nlohmann::json expected_values() {
    std::ifstream in(kData / "bindings.json");
    return nlohmann::json::parse(in);
}

// The description, written beside nothing: its weights path is absolute.
fs::path write_description(const std::string& name, const std::string& text) {
    const fs::path dir = test::scratch_dir("test_bindings", name);
    test::write_text(dir / (name + ".mnd"), text);
    return dir / (name + ".mnd");
}

// eval of every input row agrees with the framework's forward pass (float64 both;
// the same float32 weights widened, the same RK4 steps: only rounding differs).
void expect_agrees(const fs::path& mnd, const nlohmann::json& want) {
    Diagnostics diags;
    auto loaded = load_model(mnd.string(), Precision::float64, diags);
    ASSERT_TRUE(loaded) << diags.render();
    const auto inputs = want["inputs"].get<std::vector<std::vector<double>>>();
    const auto outputs = want["outputs"].get<std::vector<std::vector<double>>>();
    ASSERT_EQ(inputs.size(), outputs.size());
    for (std::size_t r = 0; r < inputs.size(); ++r) {
        auto got = evaluate(loaded->model, Eigen::Map<const Eigen::VectorXd>(inputs[r].data(),
                                                                             static_cast<Eigen::Index>(inputs[r].size())));
        ASSERT_EQ(got.status, EvalStatus::ok);
        ASSERT_EQ(static_cast<std::size_t>(got.output.size()), outputs[r].size());
        for (std::size_t i = 0; i < outputs[r].size(); ++i)
            EXPECT_NEAR(got.output(static_cast<Eigen::Index>(i)), outputs[r][i], 1e-12) << "row " << r << " output " << i;
    }
}

const std::string kSequential =
    "model seq\n"
    "weights \"{}\" under \"model\"\n"
    "ignore \"mean\", \"std\", \"*.running_*\", \"*.num_batches_tracked\"\n"
    "input x[3]\n"
    "dense lift: 3 -> 5, tanh\n"
    "continuous flow: 5, t in [0, 1] {{\n"
    "  numbered \"func.net\"\n"
    "  dense f1: 5 -> 7, tanh\n"
    "  dense f2: 7 -> 5\n"
    "  solver rk4, steps 6\n"
    "}}\n"
    "residual polish: 5 {{\n"
    "  numbered \"polish\"\n"
    "  dense r1: 5 -> 5, relu\n"
    "  dense r2: 5 -> 5\n"
    "}}\n"
    "dense head: 5 -> 2\n"
    "output y[2]\n";

TEST(Bindings, NumberedBlocksBindTorchSequentialNames) {
    const fs::path mnd = write_description("sequential", fmt::format(kSequential, (kData / "sequential.pt").string()));
    expect_agrees(mnd, expected_values()["sequential"]);

    // The tensors command says which layer binds each tensor and which are ignored.
    auto listed = test::run(fmt::format("{} tensors {}", MEANDER_BINARY, mnd.string()));
    EXPECT_EQ(listed.status, 0) << listed.output;
    for (const char* row : {"func.net.0.weight", "func.net.2.bias", "polish.2.weight"})
        EXPECT_NE(listed.output.find(row), std::string::npos) << row;
    EXPECT_NE(listed.output.find("f1 weight"), std::string::npos) << listed.output;
    EXPECT_NE(listed.output.find("r2 bias"), std::string::npos) << listed.output;
    EXPECT_NE(listed.output.find("ignored"), std::string::npos) << listed.output;
    // sequential.pt's "model" holds 17 tensors (bindings.json "keys"): 12 bound, 5 buffers ignored.
    EXPECT_EQ(expected_values()["sequential"]["keys"].size(), 17u);
    EXPECT_NE(listed.output.find("17 tensors in"), std::string::npos) << listed.output;
    EXPECT_NE(listed.output.find("; 12 bound by the description, 5 ignored"), std::string::npos) << listed.output;
}

TEST(Bindings, UnusedTensorsAreListedWithoutIgnore) {
    std::string text = fmt::format(kSequential, (kData / "sequential.pt").string());
    text.erase(text.find("ignore"), text.find("input") - text.find("ignore"));
    const fs::path mnd = write_description("unused", text);
    Diagnostics diags;
    EXPECT_FALSE(load_model(mnd.string(), Precision::float64, diags));
    ASSERT_FALSE(diags.all().empty());
    EXPECT_EQ(diags.all()[0].loc.line, 2);
    EXPECT_EQ(diags.all()[0].message,
              fmt::format("5 tensors in {} are not used by any layer: 'mean', 'std', 'stats.running_mean', "
                          "'stats.running_var', 'stats.num_batches_tracked'; a tensor the model does not need goes in an "
                          "'ignore' statement",
                          (kData / "sequential.pt").string()));
}

TEST(Bindings, IgnorePatternThatMatchesNothingWarns) {
    std::string text = fmt::format(kSequential, (kData / "sequential.pt").string());
    text.replace(text.find("\"std\""), 5, "\"std\", \"optimiser.*\"");
    const fs::path mnd = write_description("nomatch", text);
    Diagnostics diags;
    ASSERT_TRUE(load_model(mnd.string(), Precision::float64, diags)) << diags.render();
    ASSERT_EQ(diags.all().size(), 1u) << diags.render();
    EXPECT_EQ(Diagnostics::render(diags.all()[0]),
              fmt::format("{}:3:23: warning: ignore pattern 'optimiser.*' matches no tensor in {}\n"
                          "ignore \"mean\", \"std\", \"optimiser.*\", \"*.running_*\", \"*.num_batches_tracked\"\n"
                          "                      ^\n",
                          mnd.string(), (kData / "sequential.pt").string()));
}

TEST(Bindings, TransposedAndTimeFirstBindNumpyInOutWeights) {
    const fs::path mnd = write_description(
        "in_out", fmt::format("model io\n"
                              "weights \"{}\"\n"
                              "input x[3]\n"
                              "dense enc: 3 -> 4, weight \"enc.kernel\", transposed\n"
                              "continuous c: 4, t in [0, 0.5] {{\n"
                              "  layout transposed, time-first\n"
                              "  dense f1: 4 + t -> 6, tanh, weight \"f1.kernel\"\n"
                              "  dense f2: 6 -> 4, weight \"f2.kernel\"\n"
                              "  solver rk4, steps 5\n"
                              "}}\n"
                              "dense dec: 4 -> 2, weight \"dec.kernel\", transposed\n"
                              "output y[2]\n",
                              (kData / "in_out.npz").string()));
    expect_agrees(mnd, expected_values()["in_out"]);
}

// Without the layout options the (in, out) weights are refused with a hint, not bound silently.
TEST(Bindings, MissingTransposedIsNamed) {
    const fs::path mnd = write_description(
        "no_layout", fmt::format("model io\nweights \"{}\"\nignore \"f*\", \"dec.*\"\ninput x[3]\n"
                                 "dense enc: 3 -> 4, weight \"enc.kernel\"\noutput y[4]\n",
                                 (kData / "in_out.npz").string()));
    Diagnostics diags;
    EXPECT_FALSE(load_model(mnd.string(), Precision::float64, diags));
    ASSERT_FALSE(diags.all().empty());
    EXPECT_EQ(diags.all()[0].message,
              "layer 'enc': tensor 'enc.kernel' has shape (3, 4), expected (4, 3): it looks transposed (a weight is "
              "(out, in); write 'transposed' for a file that stores (in, out))");
}

// The tensor names a numbered body gives its layers, as nn.Sequential counts
// modules: a Linear, then its activation as a module of its own; a nested block is one module.
TEST(Bindings, NumberedCountsActivationsAndBlocksAsModules) {
    Source src("n.mnd",
               "model n\ninput x[2]\nresidual r: 2 {\n  numbered \"body\"\n  dense a: 2 -> 2, tanh\n  dense b: 2 -> 2\n"
               "  residual inner: 2 {\n    dense c: 2 -> 2\n  }\n  dense d: 2 -> 2, relu, from \"other\"\n"
               "  dense e: 2 -> 2, softplus\n}\noutput y[2]\n");
    Diagnostics diags;
    auto m = parse_description(src, diags);
    ASSERT_TRUE(m) << diags.render();
    const auto& body = m->blocks[0].residual.body;
    EXPECT_EQ(body[0].dense.weight_tensor, "body.0.weight");   // Linear 0, Tanh 1
    EXPECT_EQ(body[1].dense.weight_tensor, "body.2.weight");   // Linear 2
    EXPECT_EQ(body[2].residual.body[0].dense.weight_tensor, "c.weight");  // the nested block is module 3
    EXPECT_EQ(body[3].dense.weight_tensor, "other.weight");    // module 4 (and ReLU 5), named by 'from'
    EXPECT_EQ(body[4].dense.weight_tensor, "body.6.weight");
    EXPECT_EQ(body[4].dense.bias_tensor, "body.6.bias");
}

// format keeps the statements and drops layer options that the block already says.
TEST(Bindings, FormatKeepsNumberedLayoutAndIgnore) {
    const std::string text =
        "model f\nweights \"w.npz\"\nignore   \"a.*\" ,\"b?\"\ninput x[2]\n"
        "continuous c: 2, t in [0, 1] {\n  augment 1\n  numbered  \"net\"\n  layout time-first,transposed\n"
        "  dense a: 3 + t -> 3, tanh, transposed, time-first\n  dense b: 3 -> 3, from \"net.2\"\n  solver rk4, steps 2\n}\n"
        "dense h: 3 -> 1, transposed, weight \"h.kernel\"\noutput y[1]\n";
    const std::string want =
        "model f\nweights \"w.npz\"\nignore \"a.*\", \"b?\"\ninput x[2]\n"
        "continuous c: 2, t in [0, 1] {\n  augment 1\n  numbered \"net\"\n  layout transposed, time-first\n"
        "  dense a: 3 + t -> 3, tanh\n  dense b: 3 -> 3\n  solver rk4, steps 2\n}\n"
        "dense h: 3 -> 1, weight \"h.kernel\", transposed\noutput y[1]\n";
    Diagnostics diags;
    auto once = format_description(Source("f.mnd", text), diags);
    ASSERT_TRUE(once) << diags.render();
    EXPECT_EQ(*once, want);
    auto twice = format_description(Source("f.mnd", *once), diags);
    ASSERT_TRUE(twice) << diags.render();
    EXPECT_EQ(*twice, *once);
}

TEST(Bindings, GlobMatchesAsFnmatchcase) {
    struct Case {
        const char* pattern;
        const char* name;
        bool match;     // fnmatch.fnmatchcase(name, pattern), Python 3.11
    };
    const Case cases[] = {
        {"*.running_*", "stats.running_mean", true}, {"*.running_*", "running_mean", false},
        {"optimizer.*", "optimizer.state.0", true},  {"optimizer.*", "optimizer", false},
        {"mean", "mean", true},                      {"mean", "mean2", false},
        {"?ean", "mean", true},                      {"*", "x", true},
        {"a*b*c", "aXbYc", true},                    {"a*b*c", "aXcYb", false},
        {"l?ft.*", "lift.weight", true},             {"**x", "x", true},
    };
    for (const auto& c : cases) EXPECT_EQ(name_matches(c.pattern, c.name), c.match) << c.pattern << " " << c.name;
}

}  // namespace
