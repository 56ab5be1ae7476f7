// The input's and output's values: standardisation ('standardised mean ...
// scale ...' from tensors or written in the description), names and units,
// classes and most_probable in the emitted code; and the layouts that apply to
// a whole model or a gated layer.
// Outside values: tests/data/framework_standardise.py (PyTorch 1.13's own
// forward pass of two networks saved with torch.save, the standardisation
// written out there: (x - x_mean) / x_std in, y * y_std + y_mean out, and
// torch.argmax of the classifier's probabilities); tests/data/bindings
// (tests/data/framework_bindings.py: a NumPy forward pass); parcel_chill's
// expected.csv (its PyTorch trainer).
#include <cstring>

#include <nlohmann/json.hpp>

#include "compiler/format.hpp"
#include "compiler/load.hpp"
#include "compiler/parse.hpp"
#include "compiler/refit.hpp"
#include "compiler/sequence.hpp"
#include "compiler/weights.hpp"
#include "emit_support.hpp"
#include "runtime/gradient.hpp"

namespace meander::test {
namespace {

namespace fs = std::filesystem;

const fs::path kData = fs::path(MEANDER_SOURCE_DIR) / "tests" / "data" / "standardise";

nlohmann::json expected(const std::string& net) {
    std::ifstream in(kData / "standardise.json");
    return nlohmann::json::parse(in)[net];
}

fs::path write_description(const std::string& name, const std::string& text) {
    const fs::path dir = scratch_dir("test_standardise", name);
    write_text(dir / (name + ".mnd"), text);
    return dir / (name + ".mnd");
}

std::uint64_t bits(double v) {
    std::uint64_t u = 0;
    std::memcpy(&u, &v, sizeof u);
    return u;
}

Eigen::VectorXd vec(const std::vector<double>& v) {
    return Eigen::Map<const Eigen::VectorXd>(v.data(), static_cast<Eigen::Index>(v.size()));
}

// The PyTorch regressor: raw readings in, standardised inside, targets' units out.
const std::string kRegressor =
    "model regressor\n"
    "weights \"{}\" under \"model\"\n"
    "input reading[4], names [current_a in \"A\", supply_v in \"V\", speed_rpm in \"rpm\", winding_c in \"degC\"],\n"
    "      standardised mean \"x_mean\" scale \"x_std\"\n"
    "dense lift: 4 -> 6, tanh\n"
    "continuous settle: 6, t in [0, 1] {{\n"
    "  numbered \"func.net\"\n"
    "  dense f1: 6 -> 8, tanh\n"
    "  dense f2: 8 -> 6\n"
    "  solver rk4, steps 4\n"
    "}}\n"
    "dense head: 6 -> 2\n"
    "output forecast[2], names [efficiency_pct in \"%\", power_factor], standardised mean \"y_mean\" scale \"y_std\"\n";

std::string regressor_text() { return fmt::format(kRegressor, (kData / "regressor.pt").string()); }

// The same model with the four buffers written into the description (their float32 values, exact in decimal).
std::string written_regressor_text() {
    const auto buf = expected("regressor")["buffers"];
    auto list = [](const nlohmann::json& v) {
        std::string s = "[";
        for (std::size_t i = 0; i < v.size(); ++i) s += fmt::format("{}{}", i ? ", " : "", v[i].get<double>());
        return s + "]";
    };
    std::string text = regressor_text();
    text.replace(text.find("input"), 0, "ignore \"x_mean\", \"x_std\", \"y_mean\", \"y_std\"\n");
    text.replace(text.find("mean \"x_mean\" scale \"x_std\""), std::string("mean \"x_mean\" scale \"x_std\"").size(),
                 "mean " + list(buf["x_mean"]) + " scale " + list(buf["x_std"]));
    text.replace(text.find("mean \"y_mean\" scale \"y_std\""), std::string("mean \"y_mean\" scale \"y_std\"").size(),
                 "mean " + list(buf["y_mean"]) + " scale " + list(buf["y_std"]));
    return text;
}

LoadedModel load(const fs::path& mnd) {
    Diagnostics diags;
    auto loaded = load_model(mnd.string(), Precision::float64, diags);
    EXPECT_TRUE(diags.all().empty()) << diags.render();
    if (!loaded) {
        std::fprintf(stderr, "%s does not load:\n%s", mnd.string().c_str(), diags.render().c_str());
        std::abort();  // every test here needs the model
    }
    return std::move(*loaded);
}

// eval in double against PyTorch's float64 forward pass of the same float32 values: only rounding differs.
void expect_agrees_with_torch(const Model& m, const nlohmann::json& want) {
    const auto inputs = want["inputs"].get<std::vector<std::vector<double>>>();
    const auto outputs = want["outputs"].get<std::vector<std::vector<double>>>();
    for (std::size_t r = 0; r < inputs.size(); ++r) {
        const EvalResult got = evaluate(m, vec(inputs[r]));
        ASSERT_EQ(got.status, EvalStatus::ok) << "row " << r;
        for (std::size_t i = 0; i < outputs[r].size(); ++i)
            EXPECT_NEAR(got.output[static_cast<Eigen::Index>(i)], outputs[r][i], 1e-12 * std::max(1.0, std::fabs(outputs[r][i])))
                << "row " << r << " output " << i;
    }
}

TEST(Standardise, TensorsFromTorchSaveAgreeWithPyTorch) {
    const LoadedModel l = load(write_description("regressor", regressor_text()));
    ASSERT_TRUE(l.model.input_info.standardised);
    EXPECT_EQ(l.model.input_info.standardised->scale.size(), 4);
    expect_agrees_with_torch(l.model, expected("regressor"));
    // The row at the means (row 4) reaches the first layer as zeros: the network's own zero-input answer.
    // Without standardisation the same model would read 1480 rpm as 1480: far from PyTorch.
    Model raw = l.model;
    raw.input_info.standardised.reset();
    raw.output_info.standardised.reset();
    const auto in = expected("regressor")["inputs"][0].get<std::vector<double>>();
    const double want = expected("regressor")["outputs"][0][0].get<double>();
    EXPECT_GT(std::fabs(evaluate(raw, vec(in)).output[0] - want), 1.0);
}

TEST(Standardise, ValuesWrittenInTheDescriptionAgreeWithPyTorch) {
    const LoadedModel l = load(write_description("written", written_regressor_text()));
    ASSERT_TRUE(l.model.input_info.standardised);
    EXPECT_TRUE(l.model.input_info.standardised->mean_tensor.empty());
    expect_agrees_with_torch(l.model, expected("regressor"));
}

TEST(Standardise, FormatKeepsTheOptionsAndIsStable) {
    const fs::path mnd = write_description("format", written_regressor_text());
    Diagnostics diags;
    const auto once = format_description(Source(mnd.string(), read_text(mnd)), diags);
    ASSERT_TRUE(once) << diags.render();
    EXPECT_NE(once->find("input reading[4], names [current_a in \"A\", supply_v in \"V\", speed_rpm in \"rpm\", winding_c in "
                         "\"degC\"], standardised mean [12.5, 231, 1480, 61] scale [3.200000047683716, 4.099999904632568, "
                         "220, 9.5]\n"),
              std::string::npos)
        << *once;
    const auto twice = format_description(Source(mnd.string(), *once), diags);
    ASSERT_TRUE(twice) << diags.render();
    EXPECT_EQ(*once, *twice);
}

// dL/dinput through (x - mean) / scale and y * scale + mean, against central differences of eval.
TEST(Standardise, GradientCarriesTheScales) {
    const LoadedModel l = load(write_description("gradient", regressor_text()));
    const Eigen::VectorXd x = vec(expected("regressor")["inputs"][1].get<std::vector<double>>());
    const ForwardRecord rec = forward_record(l.model, x, GradientWay::discrete);
    ASSERT_EQ(rec.status, EvalStatus::ok);
    Eigen::VectorXd bar(2);
    bar << 1.0, -3.0;
    const Gradient g = backward(l.model, rec, bar, GradientWay::discrete);
    for (Eigen::Index i = 0; i < x.size(); ++i) {
        const double h = 1e-6 * std::max(1.0, std::fabs(x[i]));
        Eigen::VectorXd up = x, down = x;
        up[i] += h;
        down[i] -= h;
        const double diff = (bar.dot(evaluate(l.model, up).output) - bar.dot(evaluate(l.model, down).output)) / (2 * h);
        EXPECT_NEAR(g.input[i], diff, 1e-6 * std::max(1.0, std::fabs(diff))) << "input " << i;
    }
}

// Float64 emitted code gives eval's bits, standardisation included (DEVELOPERS.md "Operation order").
TEST(Standardise, EmittedFloat64EqualsEvalBitForBit) {
    const LoadedModel l = load(write_description("regressor", regressor_text()));
    EmitOptions eo;
    eo.precision = Precision::float64;
    eo.meander_version = "test";
    eo.content_hash = "0000000000000000";
    const fs::path dir = temp_dir("standardise_bits");
    write_files(dir, emit_model(l.model, eo));
    auto inputs = expected("regressor")["inputs"].get<std::vector<std::vector<double>>>();
    inputs.push_back({3.0, 180.0, 400.0, 110.0});
    inputs.push_back({1e300, 231.0, 1480.0, 61.0});  // standardised: finite; the network then saturates
    write_text(dir / "driver.cpp", driver_source({"regressor"}, inputs, 4));
    const std::string error = build(dir, {"regressor.cpp", "driver.cpp"}, "driver", "-ffp-contract=off");
    ASSERT_TRUE(error.empty()) << error;
    const RunResult r = run((dir / "driver").string());
    ASSERT_EQ(r.status, 0) << r.output;
    const auto rows = parse_driver(r.output);
    ASSERT_EQ(rows.size(), 1u);
    ASSERT_EQ(rows[0].size(), inputs.size());
    for (std::size_t i = 0; i < inputs.size(); ++i) {
        const EvalResult ref = evaluate(l.model, vec(inputs[i]));
        ASSERT_EQ(rows[0][i].result, status_code(ref.status)) << "row " << i;
        if (ref.status != EvalStatus::ok) continue;
        for (int c = 0; c < 2; ++c)
            EXPECT_EQ(bits(rows[0][i].out[static_cast<std::size_t>(c)]), bits(ref.output[c]))
                << "row " << i << " output " << c;
    }
    fs::remove_all(dir);
}

const std::string kClassifier =
    "model sorter\n"
    "weights \"{}\" under \"model\"\n"
    "input probe[3], standardised mean \"x_mean\" scale \"x_std\"\n"
    "dense lift: 3 -> 5, tanh\n"
    "dense head: 5 -> 4, softmax\n"
    "output grade[4], classes [clean, dusty, wet, cracked]\n";

// The classes head eval's CSV and the emitted tables; most_probable picks torch.argmax's class, and the
// lowest index among equal values.
TEST(Standardise, ClassesAndMostProbableInTheEmittedCode) {
    const fs::path mnd = write_description("sorter", fmt::format(kClassifier, (kData / "classifier.pt").string()));
    const LoadedModel l = load(mnd);
    const nlohmann::json want = expected("classifier");
    expect_agrees_with_torch(l.model, want);
    const auto inputs = want["inputs"].get<std::vector<std::vector<double>>>();
    const auto argmax = want["argmax"].get<std::vector<int>>();

    std::string csv = "a,b,c\n";
    for (const auto& x : inputs) csv += fmt::format("{},{},{}\n", x[0], x[1], x[2]);
    write_text(mnd.parent_path() / "in.csv", csv);
    const RunResult e = run(fmt::format("{} eval {} --input {}", MEANDER_BINARY, mnd.string(), (mnd.parent_path() / "in.csv").string()));
    ASSERT_EQ(e.status, 0) << e.output;
    EXPECT_EQ(e.output.substr(0, e.output.find('\n')), "clean,dusty,wet,cracked");

    for (Precision p : {Precision::float32, Precision::float64}) {
        EmitOptions eo;
        eo.precision = p;
        eo.meander_version = "test";
        eo.content_hash = "0000000000000000";
        const fs::path dir = temp_dir(p == Precision::float32 ? "sorter32" : "sorter64");
        write_files(dir, emit_model(l.model, eo));
        std::string drv = "#include <cstdio>\n#include \"sorter.hpp\"\nint main() {\n    static sorter::context ctx;\n";
        drv += fmt::format("    static const double rows[{}][3] = {{", inputs.size());
        for (const auto& x : inputs) drv += fmt::format("{{{}, {}, {}}}, ", hex_literal(x[0]), hex_literal(x[1]), hex_literal(x[2]));
        drv += "};\n";
        drv += "    for (const auto& row : rows) {\n"
               "        sorter::real in[3], out[4];\n"
               "        for (int i = 0; i < 3; ++i) in[i] = static_cast<sorter::real>(row[i]);\n"
               "        if (sorter::infer(ctx, in, out) != sorter::result::ok) return 1;\n"
               "        const std::size_t k = sorter::most_probable(out);\n"
               "        std::printf(\"%zu %s\\n\", k, sorter::class_names[k]);\n"
               "    }\n"
               "    const sorter::real tie[4] = {static_cast<sorter::real>(0.25), static_cast<sorter::real>(0.375),\n"
               "                                 static_cast<sorter::real>(0.375), static_cast<sorter::real>(0.0)};\n"
               "    std::printf(\"tie %zu\\n\", sorter::most_probable(tie));\n"
               "    std::printf(\"%s %s\\n\", sorter::output_names[3], sorter::input_names[1]);\n"
               "    return 0;\n}\n";
        write_text(dir / "driver.cpp", drv);
        const std::string error = build(dir, {"sorter.cpp", "driver.cpp"}, "driver", "-ffp-contract=off");
        ASSERT_TRUE(error.empty()) << error;
        const RunResult r = run((dir / "driver").string());
        ASSERT_EQ(r.status, 0) << r.output;
        static const char* const names[] = {"clean", "dusty", "wet", "cracked"};
        std::string expect;
        for (int k : argmax) expect += fmt::format("{} {}\n", k, names[k]);
        expect += "tie 1\ncracked probe.1\n";
        EXPECT_EQ(r.output, expect);
        fs::remove_all(dir);
    }
}

TEST(Standardise, EvalHeaderNamesTheOutputsWithUnits) {
    const fs::path mnd = write_description("header", regressor_text());
    std::string csv = "current_a,supply_v,speed_rpm,winding_c\n";
    const nlohmann::json want = expected("regressor");
    for (const auto& x : want["inputs"]) csv += fmt::format("{},{},{},{}\n", x[0].get<double>(),
                                                                         x[1].get<double>(), x[2].get<double>(), x[3].get<double>());
    write_text(mnd.parent_path() / "in.csv", csv);
    const RunResult r = run(fmt::format("{} eval {} --input {}", MEANDER_BINARY, mnd.string(), (mnd.parent_path() / "in.csv").string()));
    ASSERT_EQ(r.status, 0) << r.output;
    EXPECT_EQ(r.output.substr(0, r.output.find('\n')), "efficiency_pct (%),power_factor");
    const RunResult c = run(fmt::format("{} check {}", MEANDER_BINARY, mnd.string()));
    ASSERT_EQ(c.status, 0) << c.output;
    EXPECT_NE(c.output.find("  input reading: names current_a (A), supply_v (V), speed_rpm (rpm), winding_c (degC); "
                            "standardised, mean 'x_mean', scale 'x_std'\n"
                            "  output forecast: names efficiency_pct (%), power_factor; standardised, mean 'y_mean', scale "
                            "'y_std'\n"),
              std::string::npos)
        << c.output;
}

// refit writes a weights file with only the tensors the model binds, the standardisation included: the
// ignore statement of the original would match nothing there (and warn), so the new description keeps it as
// a comment.
TEST(Standardise, RefitDescriptionDropsTheIgnoreStatement) {
    const fs::path mnd = write_description("refit", written_regressor_text());
    const LoadedModel l = load(mnd);
    Model refitted = l.model;  // refit sets the block's trained-with line
    refitted.blocks[1].continuous.trained = refitted.blocks[1].continuous.solver;
    const std::string text = refit_description(l.source, l.model, refitted, "regressor_rk4.npz", "note");
    EXPECT_NE(text.find("\n# regressor_rk4.npz holds only the tensors the model binds; no tensor is left to ignore:\n"
                        "# ignore \"x_mean\", \"x_std\", \"y_mean\", \"y_std\"\n"),
              std::string::npos)
        << text;
    Diagnostics diags;
    const auto again = parse_description(Source("again.mnd", text), diags);
    ASSERT_TRUE(again) << diags.render();
    EXPECT_TRUE(again->ignore.empty());
    const TensorSet set = refit_tensors(l.model);
    std::vector<std::string> names;
    for (const Tensor& t : set.tensors) names.push_back(t.name);
    EXPECT_EQ(names, (std::vector<std::string>{"lift.weight", "lift.bias", "func.net.0.weight", "func.net.0.bias",
                                               "func.net.2.weight", "func.net.2.bias", "head.weight", "head.bias"}));
    // From tensors, the standardisation goes into the new file too.
    const LoadedModel t = load(write_description("refit_tensors", regressor_text()));
    std::vector<std::string> with;
    for (const Tensor& x : refit_tensors(t.model).tensors) with.push_back(x.name);
    EXPECT_EQ(with.size(), 12u);
    EXPECT_EQ(with.back(), "y_std");
}

// ---- bad input: the exact first diagnostic ----

// A small model over a weight listing written beside it (the tensors as given).
std::string first_error(const std::string& name, const std::string& options_in, const std::string& options_out,
                        const std::string& extra_tensors = "") {
    const fs::path dir = scratch_dir("test_standardise", name);
    write_text(dir / "w.mnw", "meander-weights 1\n"
                              "tensor d.weight float32 2 2\n1 0\n0 1\n"
                              "tensor d.bias float32 2\n0 0\n" + extra_tensors);
    write_text(dir / (name + ".mnd"), "model m\nweights \"w.mnw\"\ninput x[2]" + options_in +
                                          "\ndense d: 2 -> 2\noutput y[2]" + options_out + "\n");
    const RunResult r = run(fmt::format("{} check {}", MEANDER_BINARY, (dir / (name + ".mnd")).string()));
    EXPECT_EQ(r.status, 1) << r.output;
    const std::string prefix = (dir / (name + ".mnd")).string() + ":";
    const std::size_t at = r.output.find(prefix);
    if (at == std::string::npos) return r.output;
    return r.output.substr(at + prefix.size(), r.output.find('\n', at) - at - prefix.size());
}

TEST(Standardise, BadInputGetsItsDiagnostic) {
    EXPECT_EQ(first_error("zero", ", standardised mean [0, 0] scale [1, 0]", ""),
              "3:48: error: scale of input 'x', entry 2, is zero: standardising divides by it");
    EXPECT_EQ(first_error("count", "", ", standardised mean [1, 2, 3] scale [1, 1]"),
              "5:32: error: 'mean' lists 3 entries, but output 'y' has 2 values");
    EXPECT_EQ(first_error("tensor_zero", ", standardised mean \"mu\" scale \"sd\"", "",
                          "tensor mu float32 2\n1 2\ntensor sd float32 2\n0.5 0\n"),
              "3:42: error: input 'x': tensor 'sd' holds 0 at index 1; a scale must be finite and not zero");
    EXPECT_EQ(first_error("tensor_nan", ", standardised mean \"mu\" scale \"sd\"", "",
                          "tensor mu float32 2\nnan 2\ntensor sd float32 2\n0.5 1\n"),
              "3:31: error: input 'x': tensor 'mu' holds nan at index 0; a mean must be finite");
    EXPECT_EQ(first_error("tensor_shape", ", standardised mean \"mu\" scale \"sd\"", "",
                          "tensor mu float32 3\n1 2 3\ntensor sd float32 2\n0.5 1\n"),
              "3:31: error: input 'x': tensor 'mu' has shape (3,), expected (2,) for its 2 values");
    EXPECT_EQ(first_error("tensor_missing", ", standardised mean \"mu\" scale \"sd\"", ""),
              fmt::format("3:31: error: input 'x': no tensor 'mu' in {} (it holds 2 tensors)",
                          (fs::path(MEANDER_BINARY_DIR) / "test_standardise" / "tensor_missing" / "w.mnw").string()));
    EXPECT_EQ(first_error("names", ", names [a, b, c]", ""), "3:13: error: 'names' lists 3 entries, but input 'x' has 2 values");
    EXPECT_EQ(first_error("dup", ", names [a, a]", ""), "3:23: error: the name 'a' is given twice in input 'x' (first as entry 1)");
    EXPECT_EQ(first_error("unit", ", names [a in \"m,s\", b]", ""),
              "3:20: error: the unit of 'a' holds a comma; a unit may not hold a comma or a control character (it heads a CSV "
              "column)");
    EXPECT_EQ(first_error("classes_in", ", classes [a, b]", ""), "3:13: error: 'classes' names the output's values; the input "
                                                                   "takes 'names'");
    EXPECT_EQ(first_error("both", "", ", names [a, b], classes [c, d]"),
              "5:28: error: output 'y' has both 'names' and 'classes'; the classes name its values");
    EXPECT_EQ(first_error("scale_missing", ", standardised mean [1, 2]", ""),
              "4:1: error: expected 'scale' and a quoted tensor name or '[' and the values");
    EXPECT_EQ(first_error("option", ", units [a, b]", ""),
              "3:13: error: expected an option of the vector's values: 'names [...]', 'classes [...]' or 'standardised mean "
              "... scale ...'");
}

TEST(Standardise, SoftmaxOutputIsNotStandardised) {
    const fs::path dir = scratch_dir("test_standardise", "softmax");
    write_text(dir / "s.mnd", fmt::format("model s\nweights \"{}\" under \"model\"\ninput probe[3]\n"
                                          "dense lift: 3 -> 5, tanh\ndense head: 5 -> 4, softmax\n"
                                          "output grade[4], standardised mean [0, 0, 0, 0] scale [1, 1, 1, 1]\n",
                                          (kData / "classifier.pt").string()));
    const RunResult r = run(fmt::format("{} check {}", MEANDER_BINARY, (dir / "s.mnd").string()));
    EXPECT_EQ(r.status, 1);
    EXPECT_NE(r.output.find("s.mnd:6:18: error: output 'grade' comes from softmax (probabilities): it cannot be "
                            "'standardised'"),
              std::string::npos)
        << r.output;
}

// ---- layouts for a whole model and for a gated layer ----

// tests/data/bindings/in_out.npz stores every weight (in, out) and f1's time column first; a model-wide
// layout says so once. NumPy's forward pass: bindings.json "in_out".
TEST(Layout, ModelWideLayoutBindsNumpyInOutWeights) {
    const fs::path bindings = fs::path(MEANDER_SOURCE_DIR) / "tests" / "data" / "bindings";
    const fs::path mnd = write_description(
        "model_layout", fmt::format("model io\n"
                                    "weights \"{}\"\n"
                                    "layout transposed, time-first\n"
                                    "input x[3]\n"
                                    "dense enc: 3 -> 4, weight \"enc.kernel\"\n"
                                    "continuous c: 4, t in [0, 0.5] {{\n"
                                    "  dense f1: 4 + t -> 6, tanh, weight \"f1.kernel\"\n"
                                    "  dense f2: 6 -> 4, weight \"f2.kernel\"\n"
                                    "  solver rk4, steps 5\n"
                                    "}}\n"
                                    "dense dec: 4 -> 2, weight \"dec.kernel\"\n"
                                    "output y[2]\n",
                                    (bindings / "in_out.npz").string()));
    const LoadedModel l = load(mnd);
    std::ifstream in(bindings / "bindings.json");
    const nlohmann::json want = nlohmann::json::parse(in)["in_out"];
    expect_agrees_with_torch(l.model, want);
    // The canonical form keeps the model-wide statement and adds nothing to the layers.
    Diagnostics diags;
    const auto text = format_description(Source(mnd.string(), read_text(mnd)), diags);
    ASSERT_TRUE(text) << diags.render();
    EXPECT_NE(text->find("\nlayout transposed, time-first\ninput x[3]\ndense enc: 3 -> 4, weight \"enc.kernel\"\n"),
              std::string::npos)
        << *text;
}

// parcel_chill's GRU cell with its two weights stored (in, 3H): 'transposed' on the gated layer gives the
// PyTorch trainer's outputs (expected.csv) again.
TEST(Layout, TransposedGatedLayerGivesTheTrainersOutputs) {
    const fs::path sample = fs::path(MEANDER_SOURCE_DIR) / "samples" / "parcel_chill";
    // The sample's own weights file, whatever its format (the description names it).
    std::string text = read_text(sample / "parcel_chill.mnd");
    const std::size_t first = text.find("weights \"") + 9, last = text.find('"', first);
    const std::string weights = text.substr(first, last - first);
    Diagnostics diags;
    auto set = read_weights((sample / weights).string(), diags);
    ASSERT_TRUE(set) << diags.render();
    for (Tensor& t : set->tensors) {
        if (t.name != "cell.weight_ih" && t.name != "cell.weight_hh") continue;
        const std::size_t rows = t.shape[0], cols = t.shape[1];
        std::vector<double> v(t.values.size());
        for (std::size_t r = 0; r < rows; ++r)
            for (std::size_t c = 0; c < cols; ++c) v[c * rows + r] = t.values[r * cols + c];
        t.values = v;
        t.shape = {cols, rows};
    }
    const fs::path dir = scratch_dir("test_standardise", "gated");
    write_text(dir / "p.mnw", write_listing(*set));
    text.replace(first, last - first, "p.mnw");
    text.replace(text.find("gated cell: 1 -> 8"), std::string("gated cell: 1 -> 8").size(), "gated cell: 1 -> 8, transposed");
    write_text(dir / "p.mnd", text);
    const LoadedModel l = load(dir / "p.mnd");
    auto rows = read_sequence_file((sample / "inputs.csv").string(), 1, l.model.stream->largest_gap, diags);
    ASSERT_TRUE(rows) << diags.render();
    const auto results = evaluate_sequences(l.model, *rows);
    std::ifstream want_in(sample / "expected.csv");
    std::string line;
    std::getline(want_in, line);  // header
    std::size_t i = 0;
    while (std::getline(want_in, line)) {
        ASSERT_LT(i, results.size());
        ASSERT_EQ(results[i].status, EvalStatus::ok);
        const double want = std::stod(line);
        EXPECT_NEAR(results[i].output[0], want, 1e-9 * std::max(1.0, std::fabs(want))) << "row " << i;
        ++i;
    }
    EXPECT_EQ(i, results.size());
    // Without 'transposed' the (in, 3H) weight does not fit the layer: the shape error names the fix.
    text.replace(text.find(", transposed"), std::string(", transposed").size(), "");
    write_text(dir / "q.mnd", text);
    Diagnostics d2;
    EXPECT_FALSE(load_model((dir / "q.mnd").string(), Precision::float64, d2));
    EXPECT_NE(d2.render().find("it looks transposed"), std::string::npos) << d2.render();
}

}  // namespace
}  // namespace meander::test
