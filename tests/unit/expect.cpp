// check --input --expect: every sample agrees with the outputs its trainer
// wrote (samples/*/expected.csv: PyTorch for parcel_chill, read from its
// torch.save file; the NumPy trainer of samples/trainlib.py for the others,
// boiler_ahead read from safetensors; samples/check_expected.py recomputes them
// all with an independent forward pass), and deliberately mis-exported copies
// of a sample are diagnosed: the note names the layer, its line in the
// description and the option to add, and with that option added the copy
// agrees again.
#include <fmt/format.h>
#include <gtest/gtest.h>

#include <algorithm>
#include <filesystem>
#include <functional>
#include <sstream>
#include <string>

#include "compiler/npz_writer.hpp"
#include "compiler/weights.hpp"
#include "test_support.hpp"

namespace fs = std::filesystem;
using namespace meander;
using namespace meander::test;

namespace {

const fs::path kSamples = fs::path(MEANDER_SOURCE_DIR) / "samples";

RunResult check_expect(const fs::path& mnd, const fs::path& input, const fs::path& expect, const std::string& extra = "") {
    return run(fmt::format("'{}' check '{}' --input '{}' --expect '{}' {}", MEANDER_BINARY, mnd.string(), input.string(),
                           expect.string(), extra));
}

// The 1-based line of the first line of `text` that holds `needle`.
int line_of(const std::string& text, const std::string& needle) {
    const std::size_t at = text.find(needle);
    if (at == std::string::npos) return 0;
    return 1 + static_cast<int>(std::count(text.begin(), text.begin() + static_cast<std::ptrdiff_t>(at), '\n'));
}

std::string replace_once(std::string text, const std::string& from, const std::string& to) {
    const std::size_t at = text.find(from);
    EXPECT_NE(at, std::string::npos) << from;
    if (at != std::string::npos) text.replace(at, from.size(), to);
    return text;
}

TEST(Expect, EverySampleAgreesWithItsTrainer) {
    int samples = 0;
    for (const auto& entry : fs::directory_iterator(kSamples)) {
        const std::string name = entry.path().filename().string();
        const fs::path mnd = entry.path() / (name + ".mnd");
        if (!fs::exists(mnd)) continue;
        ++samples;
        const RunResult r = check_expect(mnd, entry.path() / "inputs.csv", entry.path() / "expected.csv");
        EXPECT_EQ(r.status, 0) << name << ": " << r.output;
        EXPECT_NE(r.output.find("expected.csv: agrees with the reference evaluation"), std::string::npos) << r.output;
        EXPECT_NE(r.output.find("tolerance 0.0001"), std::string::npos) << r.output;
    }
    EXPECT_GE(samples, 4);
}

// The samples read the frameworks' own files, with no converter.
TEST(Expect, SamplesReadTorchSaveAndSafetensors) {
    EXPECT_NE(read_text(kSamples / "parcel_chill/parcel_chill.mnd").find("weights \"parcel_chill.pt\""), std::string::npos);
    EXPECT_NE(read_text(kSamples / "boiler_ahead/boiler_ahead.mnd").find("weights \"boiler_ahead.safetensors\""), std::string::npos);
    EXPECT_EQ(read_text(kSamples / "parcel_chill/parcel_chill.pt").substr(0, 2), "PK");  // torch.save's zip
}

// A copy of fan_balance whose weights file has one tensor changed by `edit`.
struct Copy {
    fs::path dir, mnd;
    std::string text;
};

Copy misexported(const std::string& stem, const std::string& tensor, const std::function<void(Tensor&)>& edit) {
    Copy c;
    c.dir = scratch_dir("expect", stem);
    c.mnd = c.dir / "fan_balance.mnd";
    Diagnostics diags;
    auto set = read_weights((kSamples / "fan_balance/fan_balance.npz").string(), diags);
    EXPECT_TRUE(set) << diags.render();
    bool found = false;
    for (Tensor& t : set->tensors)
        if (t.name == tensor) edit(t), found = true;
    EXPECT_TRUE(found) << tensor;
    auto bytes = npz_bytes(*set, "float32");
    EXPECT_TRUE(bytes);
    write_text(c.dir / "fan_balance.npz", *bytes);
    c.text = read_text(kSamples / "fan_balance/fan_balance.mnd");
    write_text(c.mnd, c.text);
    return c;
}

const fs::path kInputs = kSamples / "fan_balance/inputs.csv";
const fs::path kExpected = kSamples / "fan_balance/expected.csv";

TEST(Expect, SquareWeightStoredInOutIsNamed) {
    // r1 is 14 x 14: stored (in, out) it still binds, and the model is another one.
    Copy c = misexported("transposed", "r1.weight", [](Tensor& t) {
        ASSERT_EQ(t.shape, (std::vector<std::size_t>{14, 14}));
        std::vector<double> v(t.values.size());
        for (std::size_t i = 0; i < 14; ++i)
            for (std::size_t j = 0; j < 14; ++j) v[j * 14 + i] = t.values[i * 14 + j];
        t.values = v;
    });
    const RunResult r = check_expect(c.mnd, kInputs, kExpected);
    EXPECT_EQ(r.status, 1) << r.output;
    EXPECT_NE(r.output.find("error: the reference evaluation disagrees with the expected outputs"), std::string::npos)
        << r.output;
    const int line = line_of(c.text, "dense r1:");
    EXPECT_NE(r.output.find(fmt::format("fan_balance.mnd:{}:9: note: layer 'r1': its weight 'r1.weight' is stored (in, out)",
                                        line)),
              std::string::npos)
        << r.output;
    EXPECT_NE(r.output.find("add ', transposed' to the layer"), std::string::npos) << r.output;
    EXPECT_EQ(r.output.find("time column"), std::string::npos) << "only the one mistake agrees:\n" << r.output;
    // The advice, taken as written, makes them agree.
    write_text(c.mnd, replace_once(c.text, "dense r1: 14 -> 14, tanh", "dense r1: 14 -> 14, tanh, transposed"));
    const RunResult fixed = check_expect(c.mnd, kInputs, kExpected);
    EXPECT_EQ(fixed.status, 0) << fixed.output;
}

TEST(Expect, TimeColumnFirstIsNamed) {
    // f1: 14 + t -> 16, weight (16, 15); the file has the time column first.
    Copy c = misexported("time-first", "f1.weight", [](Tensor& t) {
        ASSERT_EQ(t.shape, (std::vector<std::size_t>{16, 15}));
        std::vector<double> v(t.values.size());
        for (std::size_t r = 0; r < 16; ++r) {
            v[r * 15] = t.values[r * 15 + 14];
            for (std::size_t j = 0; j < 14; ++j) v[r * 15 + 1 + j] = t.values[r * 15 + j];
        }
        t.values = v;
    });
    const RunResult r = check_expect(c.mnd, kInputs, kExpected);
    EXPECT_EQ(r.status, 1) << r.output;
    const int line = line_of(c.text, "dense f1:");
    EXPECT_NE(r.output.find(fmt::format("fan_balance.mnd:{}:9: note: layer 'f1': the time column of 'f1.weight' is its "
                                        "first: add ', time-first' to the layer",
                                        line)),
              std::string::npos)
        << r.output;
    write_text(c.mnd, replace_once(c.text, "dense f1: 14 + t -> 16, softplus", "dense f1: 14 + t -> 16, softplus, time-first"));
    const RunResult fixed = check_expect(c.mnd, kInputs, kExpected);
    EXPECT_EQ(fixed.status, 0) << fixed.output;
}

// A trainer that wrote its network's logits (the softmax left to the loss): the
// logits come from samples/check_expected.py's own forward pass of fan_balance,
// stopped before the softmax.
TEST(Expect, LogitsInsteadOfProbabilitiesIsNamed) {
    if (!fs::exists(MEANDER_SCIPY_PYTHON)) GTEST_SKIP() << MEANDER_SCIPY_PYTHON << " not found";
    const fs::path dir = scratch_dir("expect", "logits");
    const std::string script = fmt::format(
        "import sys; sys.path.insert(0, '{0}')\n"
        "import numpy as np, check_expected as ce\n"
        "m = ce.Model('{0}/fan_balance/fan_balance.mnd')\n"
        "_, x = ce.read_csv('{0}/fan_balance/inputs.csv')\n"
        "z = np.array([m.seq(m.m['blocks'], r) for r in x])\n"
        "np.savetxt('{1}', z, delimiter=',', fmt='%.17g')\n",
        kSamples.string(), (dir / "logits.csv").string());
    write_text(dir / "logits.py", script);
    const RunResult py = run(fmt::format("'{}' '{}'", MEANDER_SCIPY_PYTHON, (dir / "logits.py").string()));
    ASSERT_EQ(py.status, 0) << py.output;
    const RunResult r = check_expect(kSamples / "fan_balance/fan_balance.mnd", kInputs, dir / "logits.csv");
    EXPECT_EQ(r.status, 1) << r.output;
    const int line = line_of(read_text(kSamples / "fan_balance/fan_balance.mnd"), "dense head:");
    EXPECT_NE(r.output.find("note: they agree with logits written instead of probabilities:"), std::string::npos) << r.output;
    EXPECT_NE(r.output.find(fmt::format("fan_balance.mnd:{}:7: note: layer 'head': the expected file holds its values "
                                        "before the softmax (logits)",
                                        line)),
              std::string::npos)
        << r.output;
}

TEST(Expect, UnexplainedDisagreementListsWhatWasTried) {
    // A bias off by 0.5: no usual mistake explains it.
    Copy c = misexported("bias", "head.bias", [](Tensor& t) { t.values[0] += 0.5; });
    const RunResult r = check_expect(c.mnd, kInputs, kExpected);
    EXPECT_EQ(r.status, 1) << r.output;
    EXPECT_NE(r.output.find("note: none of the usual export mistakes explains it, alone or two together (tried: the square weight of layer 'r1' "
                            "transposed; the square weight of layer 'r2' transposed; all 2 square weights transposed; "
                            "the time column of layer 'f1' first; logits written instead of probabilities)"),
              std::string::npos)
        << r.output;
    // The first disagreeing value is shown at its line of the expected file.
    EXPECT_NE(r.output.find("expected.csv:"), std::string::npos) << r.output;
}

TEST(Expect, WrongShapeNamesBothShapes) {
    const fs::path dir = scratch_dir("expect", "shape");
    // Three of fan_balance's four probabilities per row.
    std::string cut;
    std::istringstream in(read_text(kExpected));
    std::string line;
    while (std::getline(in, line)) cut += line.substr(0, line.rfind(',')) + "\n";
    write_text(dir / "three.csv", cut);
    const RunResult r = check_expect(kSamples / "fan_balance/fan_balance.mnd", kInputs, dir / "three.csv");
    EXPECT_EQ(r.status, 1) << r.output;
    EXPECT_NE(r.output.find("three.csv: error: holds 40 rows of 3 values; the model gives 40 rows of 4 outputs for the "
                            "40 input rows of"),
              std::string::npos)
        << r.output;
    // One row short.
    write_text(dir / "short.csv", read_text(kExpected).substr(0, read_text(kExpected).rfind('\n', read_text(kExpected).size() - 2) + 1));
    const RunResult s = check_expect(kSamples / "fan_balance/fan_balance.mnd", kInputs, dir / "short.csv");
    EXPECT_EQ(s.status, 1) << s.output;
    EXPECT_NE(s.output.find("holds 39 rows of 4 values; the model gives 40 rows of 4 outputs"), std::string::npos) << s.output;
}

// The expected file's header against the output's declared names, as input rows are against the
// input's (tests/unit/csv.cpp): soil_probe's expected.csv with its header changed; the values are
// those its trainer wrote, so only the header can be refused.
TEST(Expect, HeaderIsCheckedAgainstTheOutputNames) {
    const fs::path dir = scratch_dir("expect", "header");
    const fs::path mnd = kSamples / "soil_probe/soil_probe.mnd", inputs = kSamples / "soil_probe/inputs.csv";
    const std::string rows = read_text(kSamples / "soil_probe/expected.csv");
    const std::string body = rows.substr(rows.find('\n') + 1);
    const auto checked = [&](const std::string& header) {
        write_text(dir / "expected.csv", header + "\n" + body);
        return check_expect(mnd, inputs, dir / "expected.csv");
    };
    // Refused with exit status 1 and `diagnostic` at line 1 of the file, its line and caret.
    const auto refused = [&](const std::string& header, const std::string& diagnostic) {
        const RunResult r = checked(header);
        EXPECT_EQ(r.status, 1) << r.output;
        EXPECT_NE(r.output.find((dir / "expected.csv").string() + ":1:" + diagnostic), std::string::npos) << r.output;
    };
    refused("pore_ec_dsm,water_pct", "1: error: column 1 is named 'pore_ec_dsm', but output 'estimate' takes 'water_pct' "
                                     "there: 'pore_ec_dsm' is its column 2\npore_ec_dsm,water_pct\n^\n");
    refused("water_pct (%),pore_ec_dms", "15: error: column 2 is named 'pore_ec_dms', but output 'estimate' takes "
                                         "'pore_ec_dsm' there: did you mean 'pore_ec_dsm'?\nwater_pct (%),pore_ec_dms\n"
                                         "              ^\n");
    refused("moisture,salinity", "1: error: the header names none of output 'estimate''s values: it takes water_pct, "
                                 "pore_ec_dsm, in this order (a line of other names can stand as a '#' comment)\n"
                                 "moisture,salinity\n^\n");
    // eval's own header, the vector's value names, or none: the values decide.
    for (const char* header : {"water_pct (%),pore_ec_dsm (dS/m)", "estimate.0,estimate.1", "# no header"}) {
        const RunResult ok = checked(header);
        EXPECT_EQ(ok.status, 0) << header << "\n" << ok.output;
    }
    // A classifier's columns are its classes (fan_balance: balanced, light, moderate, severe).
    std::string classes = read_text(kExpected);
    classes.replace(0, classes.find('\n'), "balanced,moderate,light,severe");
    write_text(dir / "classes.csv", classes);
    const RunResult r = check_expect(kSamples / "fan_balance/fan_balance.mnd", kInputs, dir / "classes.csv");
    EXPECT_EQ(r.status, 1) << r.output;
    EXPECT_NE(r.output.find("classes.csv:1:10: error: column 2 is named 'moderate', but output 'grade' takes 'light' there: "
                            "'moderate' is its column 3"),
              std::string::npos)
        << r.output;
}

TEST(Expect, ToleranceIsStatedAndSettable) {
    // fan_balance agrees to about 2e-15 (samples/check_expected.py); a tolerance below that fails.
    const fs::path mnd = kSamples / "fan_balance/fan_balance.mnd";
    const RunResult loose = check_expect(mnd, kInputs, kExpected, "--tolerance 1e-9");
    EXPECT_EQ(loose.status, 0) << loose.output;
    EXPECT_NE(loose.output.find("tolerance 1e-09"), std::string::npos) << loose.output;
    const RunResult tight = check_expect(mnd, kInputs, kExpected, "--tolerance 1e-30");
    EXPECT_EQ(tight.status, 1) << tight.output;
    // --expect and --input go together; --tolerance needs --expect.
    EXPECT_EQ(run(fmt::format("'{}' check '{}' --expect '{}'", MEANDER_BINARY, mnd.string(), kExpected.string())).status, 2);
    EXPECT_EQ(run(fmt::format("'{}' check '{}' --input '{}'", MEANDER_BINARY, mnd.string(), kInputs.string())).status, 2);
    EXPECT_EQ(run(fmt::format("'{}' check '{}' --tolerance 1e-3", MEANDER_BINARY, mnd.string())).status, 2);
}

}  // namespace
