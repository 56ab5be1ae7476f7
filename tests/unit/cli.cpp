// End-to-end tests of the meander command line on every sample: check, eval
// against the trainer's own NumPy forward pass, compile (deterministic bytes),
// verify (emitted code built under strict warnings agrees with eval), and the
// guarantees about output files and exit codes.
#include <gtest/gtest.h>

#include <cmath>
#include <cstdio>
#include <filesystem>
#include <fstream>
#include <sstream>
#include <string>
#include <vector>

#include "test_support.hpp"

namespace fs = std::filesystem;

namespace {

using Outcome = meander::test::RunResult;
using meander::test::read_text;

// The meander binary with `args`; its standard output and standard error together.
Outcome run(const std::string& args) { return meander::test::run(std::string(MEANDER_BINARY) + " " + args); }

std::vector<std::vector<double>> read_csv(const std::string& text) {
    std::vector<std::vector<double>> rows;
    std::istringstream lines(text);
    std::string line;
    bool header = true;
    while (std::getline(lines, line)) {
        if (line.empty() || line[0] == '#') continue;
        if (header) {  // both files start with a line of names
            header = false;
            continue;
        }
        std::vector<double> row;
        std::istringstream fields(line);
        std::string f;
        while (std::getline(fields, f, ',')) row.push_back(std::strtod(f.c_str(), nullptr));
        rows.push_back(row);
    }
    return rows;
}

std::vector<fs::path> samples() {
    std::vector<fs::path> out;
    for (const auto& dir : fs::directory_iterator(fs::path(MEANDER_SOURCE_DIR) / "samples")) {
        if (!dir.is_directory()) continue;
        for (const auto& f : fs::directory_iterator(dir.path()))
            if (f.path().extension() == ".mnd") out.push_back(f.path());
    }
    std::sort(out.begin(), out.end());
    return out;
}

fs::path scratch(const std::string& name) { return meander::test::scratch_dir("cli-scratch", name); }

TEST(Samples, ThereAreAtLeastTwo) { EXPECT_GE(samples().size(), 2u); }

class SampleTest : public ::testing::TestWithParam<fs::path> {};

TEST_P(SampleTest, ChecksClean) {
    Outcome r = run("check " + GetParam().string());
    EXPECT_EQ(r.status, 0) << r.output;
    EXPECT_EQ(r.output.find("warning"), std::string::npos) << r.output;
}

// expected.csv comes from the sample's trainer (its own float64 NumPy forward
// pass, samples/*/train.py), independent of meander's evaluator.
TEST_P(SampleTest, EvalMatchesTrainerForwardPass) {
    fs::path dir = GetParam().parent_path();
    Outcome r = run("eval " + GetParam().string() + " --input " + (dir / "inputs.csv").string());
    ASSERT_EQ(r.status, 0) << r.output;
    auto got = read_csv(r.output);
    auto want = read_csv(read_text(dir / "expected.csv"));
    ASSERT_EQ(got.size(), want.size());
    for (std::size_t i = 0; i < got.size(); ++i) {
        ASSERT_EQ(got[i].size(), want[i].size()) << "row " << i;
        for (std::size_t j = 0; j < got[i].size(); ++j)
            EXPECT_NEAR(got[i][j], want[i][j], 1e-9 * std::max(1.0, std::fabs(want[i][j]))) << "row " << i << " col " << j;
    }
}

TEST_P(SampleTest, CompileIsByteIdenticalTwice) {
    std::string stem = GetParam().stem().string();
    fs::path a = scratch(stem + "-a"), b = scratch(stem + "-b");
    ASSERT_EQ(run("compile " + GetParam().string() + " -o " + a.string()).status, 0);
    ASSERT_EQ(run("compile " + GetParam().string() + " -o " + b.string()).status, 0);
    int files = 0;
    for (const auto& f : fs::directory_iterator(a)) {
        ++files;
        EXPECT_EQ(read_text(f.path()), read_text(b / f.path().filename())) << f.path().filename();
    }
    EXPECT_GE(files, 2);
}

// verify builds the emitted code and compares it with eval on the sample's inputs.
void expect_verify_agrees(const fs::path& mnd, const std::string& options) {
    Outcome r = run("verify " + mnd.string() + options + " --input " + (mnd.parent_path() / "inputs.csv").string());
    EXPECT_EQ(r.status, 0) << r.output;
    EXPECT_NE(r.output.find("agrees"), std::string::npos) << r.output;
}

TEST_P(SampleTest, VerifyFloat32) { expect_verify_agrees(GetParam(), ""); }

TEST_P(SampleTest, VerifyFloat64) { expect_verify_agrees(GetParam(), " --precision float64"); }

TEST_P(SampleTest, FormatIsIdempotent) {
    std::string stem = GetParam().stem().string();
    Outcome once = run("format " + GetParam().string());
    ASSERT_EQ(once.status, 0) << once.output;
    fs::path f = scratch(stem + "-fmt") / (stem + ".mnd");
    std::ofstream(f) << once.output;
    Outcome twice = run("format " + f.string());
    ASSERT_EQ(twice.status, 0) << twice.output;
    EXPECT_EQ(once.output, twice.output);
}

INSTANTIATE_TEST_SUITE_P(All, SampleTest, ::testing::ValuesIn(samples()),
                         [](const ::testing::TestParamInfo<fs::path>& info) { return info.param.stem().string(); });

// A failing compile leaves an existing output untouched and writes nothing new.
TEST(Outputs, FailedCompileLeavesExistingFilesAlone) {
    fs::path d = scratch("atomic");
    fs::path mnd = d / "broken.mnd";
    std::ofstream(mnd) << "model broken\nweights \"none.npz\"\ninput x[2]\ndense a: 3 -> 2\noutput y[2]\n";
    fs::create_directories(d / "out");
    std::ofstream(d / "out" / "broken.hpp") << "previous contents\n";
    Outcome r = run("compile " + mnd.string() + " -o " + (d / "out").string());
    EXPECT_EQ(r.status, 1) << r.output;
    EXPECT_EQ(read_text(d / "out" / "broken.hpp"), "previous contents\n");
    int entries = 0;
    for ([[maybe_unused]] const auto& e : fs::directory_iterator(d / "out")) ++entries;
    EXPECT_EQ(entries, 1);
}

TEST(Outputs, FailedEvalLeavesExistingCsvAlone) {
    auto all = samples();
    ASSERT_FALSE(all.empty());
    fs::path d = scratch("atomic-eval");
    std::ofstream(d / "in.csv") << "1,2\n";  // wrong width for every sample
    std::ofstream(d / "out.csv") << "previous\n";
    Outcome r = run("eval " + all.front().string() + " --input " + (d / "in.csv").string() + " --output " +
                (d / "out.csv").string());
    EXPECT_EQ(r.status, 1) << r.output;
    EXPECT_EQ(read_text(d / "out.csv"), "previous\n");
}

TEST(ExitCodes, UsageErrorIsTwo) {
    EXPECT_EQ(run("compile").status, 2);
    EXPECT_EQ(run("frobnicate x.mnd").status, 2);
    EXPECT_EQ(run("eval x.mnd --input a.csv --no-such-option").status, 2);
}

TEST(ExitCodes, MissingFileIsOneWithDiagnostic) {
    Outcome r = run("check /nonexistent/model.mnd");
    EXPECT_EQ(r.status, 1);
    EXPECT_EQ(r.output, "/nonexistent/model.mnd: error: cannot read file: No such file or directory\n");
}

TEST(Version, PrintsName) {
    Outcome r = run("--version");
    EXPECT_EQ(r.status, 0);
    EXPECT_EQ(r.output.rfind("meander ", 0), 0u) << r.output;
}

}  // namespace

// The tour in README.md must stay a valid description.
TEST(Readme, TourExampleParses) {
    std::string readme = read_text(fs::path(MEANDER_SOURCE_DIR) / "README.md");
    std::size_t start = readme.find("```\n# Bearing-wear");
    ASSERT_NE(start, std::string::npos);
    start += 4;
    std::size_t end = readme.find("```", start);
    fs::path f = scratch("readme") / "tour.mnd";
    std::ofstream(f) << readme.substr(start, end - start);
    Outcome r = run("format " + f.string());
    EXPECT_EQ(r.status, 0) << r.output;
}

// diff exits like the diff tool: 0 for the same model, 1 when something changed.
TEST(Diff, ExitStatusAndTheOneChange) {
    const fs::path src = fs::path(MEANDER_SOURCE_DIR) / "samples" / "fan_balance";
    const fs::path d = scratch("diff");
    fs::copy_file(src / "fan_balance.npz", d / "fan_balance.npz");
    std::string text = read_text(src / "fan_balance.mnd");
    const std::string deployed = "solver rk4, steps 8\n";
    ASSERT_NE(text.find(deployed), std::string::npos);
    text.replace(text.find(deployed), deployed.size(), "solver rk4, steps 12\n");
    meander::test::write_text(d / "fan_balance.mnd", text);

    Outcome same = run("diff " + (src / "fan_balance.mnd").string() + " " + (src / "fan_balance.mnd").string());
    EXPECT_EQ(same.status, 0) << same.output;
    Outcome changed = run("diff " + (src / "fan_balance.mnd").string() + " " + (d / "fan_balance.mnd").string());
    EXPECT_EQ(changed.status, 1) << changed.output;
    // rk4 evaluates the field 4 times a step (HNW I, II.1): 8 -> 12 steps is 32 -> 48 evaluations.
    EXPECT_NE(changed.output.find("32 -> 48 (+16), worst case"), std::string::npos) << changed.output;
    Outcome json = run("diff --json " + (src / "fan_balance.mnd").string() + " " + (d / "fan_balance.mnd").string());
    EXPECT_EQ(json.status, 1);
    // The trained-with warning goes to standard error first; then the JSON object.
    EXPECT_NE(json.output.find("warning: block 'settle' is deployed with rk4, steps 12 but was trained with rk4, steps 8"),
              std::string::npos) << json.output;
    EXPECT_NE(json.output.find("\n{\n"), std::string::npos) << json.output;
}

// A copy of a sample folder with its description edited by `edit`.
fs::path edited_sample(const std::string& name, const std::string& from, const std::string& to, const std::string& tag) {
    const fs::path src = fs::path(MEANDER_SOURCE_DIR) / "samples" / name;
    const fs::path d = scratch(tag);
    for (const auto& f : fs::directory_iterator(src))
        if (f.is_regular_file()) fs::copy_file(f.path(), d / f.path().filename());
    std::string text = read_text(src / (name + ".mnd"));
    for (std::size_t at = text.find(from); at != std::string::npos; at = text.find(from, at + to.size()))
        text.replace(at, from.size(), to);
    meander::test::write_text(d / (name + ".mnd"), text);
    return d / (name + ".mnd");
}

TEST(Verify, NothingComparedIsNoAgreement) {
    // One attempted step cannot cover soil_probe's interval with first-step 0.1.
    const fs::path mnd = edited_sample("soil_probe", "max-steps 40", "max-steps 1", "verify-none");
    Outcome r = run("verify " + mnd.string() + " --show --input " + (mnd.parent_path() / "inputs.csv").string());
    EXPECT_EQ(r.status, 1) << r.output;
    EXPECT_NE(r.output.find("   1  both returned step_limit: nothing to compare"), std::string::npos) << r.output;
    EXPECT_NE(r.output.find("verdict              NOTHING COMPARED"), std::string::npos) << r.output;
}

TEST(Verify, InputsBeyondFloat32AreRefusedWithTheirPosition) {
    const fs::path d = scratch("verify-range");
    meander::test::write_text(d / "in.csv", "speed_hz,v1x_mms,v2x_mms,axial_ratio,phase_jitter_deg,res_hz,bearing_c,broadband_g\n1,2,3,4,5,6,7,8\n1,2,1e39,4,5,6,7,8\n");
    Outcome r = run("verify " + (fs::path(MEANDER_SOURCE_DIR) / "samples/fan_balance/fan_balance.mnd").string() +
                    " --input " + (d / "in.csv").string());
    EXPECT_EQ(r.status, 1);
    EXPECT_EQ(r.output, (d / "in.csv").string() +
                            ":3:5: error: 1e+39 is beyond the float32 range (largest 3.4028235e+38): the emitted "
                            "float32 code would see an infinite input\n1,2,1e39,4,5,6,7,8\n    ^\n");
}

TEST(Outputs, CompileWritesAllFilesOrNone) {
    const fs::path mnd = fs::path(MEANDER_SOURCE_DIR) / "samples/fan_balance/fan_balance.mnd";
    const fs::path d = scratch("all-or-none");
    fs::create_directories(d / "fan_balance.cpp");  // the source cannot be written
    meander::test::write_text(d / "fan_balance.hpp", "previous\n");
    Outcome r = run("compile " + mnd.string() + " -o " + d.string());
    EXPECT_EQ(r.status, 1) << r.output;
    EXPECT_EQ(read_text(d / "fan_balance.hpp"), "previous\n");  // the header that would pair with it is not written
}

TEST(Outputs, AStaleSelfTestIsRemoved) {
    const fs::path dir = fs::path(MEANDER_SOURCE_DIR) / "samples/fan_balance";
    const fs::path d = scratch("stale-selftest");
    Outcome a = run("compile " + (dir / "fan_balance.mnd").string() + " -o " + d.string() + " --self-test " +
                    (dir / "inputs.csv").string());
    ASSERT_EQ(a.status, 0) << a.output;
    ASSERT_TRUE(fs::exists(d / "fan_balance_selftest.cpp"));
    Outcome b = run("compile " + (dir / "fan_balance.mnd").string() + " -o " + d.string());
    EXPECT_EQ(b.status, 0) << b.output;
    EXPECT_FALSE(fs::exists(d / "fan_balance_selftest.cpp"));
    EXPECT_FALSE(fs::exists(d / "fan_balance_selftest.hpp"));
    EXPECT_NE(b.output.find("warning: removed: a self-test from an earlier compile"), std::string::npos) << b.output;
}

TEST(Diff, AModelThatDoesNotLoadIsTroubleNotADifference) {
    // As the diff tool: 0 same, 1 different, 2 trouble.
    Outcome r = run("diff " + (fs::path(MEANDER_SOURCE_DIR) / "samples/fan_balance/fan_balance.mnd").string() +
                    " /nonexistent/other.mnd");
    EXPECT_EQ(r.status, 2) << r.output;
}

TEST(ExitCodes, NotANumberIsAUsageError) {
    const std::string s = fs::path(MEANDER_SOURCE_DIR / fs::path("samples/fan_balance")).string();
    Outcome r = run("verify " + s + "/fan_balance.mnd --input " + s + "/inputs.csv --tolerance nan");
    EXPECT_EQ(r.status, 2) << r.output;
    EXPECT_NE(r.output.find("--tolerance: expected a finite number above 0, not nan"), std::string::npos) << r.output;
    Outcome m = run("tune " + s + "/fan_balance.mnd --input " + s + "/inputs.csv --method rk5");
    EXPECT_EQ(m.status, 2) << m.output;
}

TEST(Eval, AFailingRowIsNamedByItsLine) {
    const fs::path d = scratch("eval-row");
    meander::test::write_text(d / "in.csv", "speed_hz,v1x_mms,v2x_mms,axial_ratio,phase_jitter_deg,res_hz,bearing_c,broadband_g\n1,2,3,4,5,6,7,8\n\n1,nan,3,4,5,6,7,8\n");
    Outcome r = run("eval " + (fs::path(MEANDER_SOURCE_DIR) / "samples/fan_balance/fan_balance.mnd").string() +
                    " --input " + (d / "in.csv").string());
    EXPECT_EQ(r.status, 1);
    EXPECT_EQ(r.output, (d / "in.csv").string() +
                            ":4:1: error: the model returns input_not_finite for this row\n1,nan,3,4,5,6,7,8\n^\n");
}

TEST(Check, AByteOrderMarkIsAccepted) {
    const fs::path mnd = edited_sample("fan_balance", "model fan_balance", "model fan_balance", "bom");
    std::string text = read_text(mnd);
    meander::test::write_text(mnd, "\xEF\xBB\xBF" + text);
    Outcome r = run("check " + mnd.string());
    EXPECT_EQ(r.status, 0) << r.output;
}

// The firmware snippet in README.md compiles against the emitted header under the strict flags.
TEST(Readme, UsageSnippetCompiles) {
    std::string readme = read_text(fs::path(MEANDER_SOURCE_DIR) / "README.md");
    std::size_t start = readme.find("```cpp\n#include \"fan_balance.hpp\"");
    ASSERT_NE(start, std::string::npos);
    start += 7;
    const std::string snippet = readme.substr(start, readme.find("```", start) - start);
    const fs::path d = scratch("readme-snippet");
    ASSERT_EQ(run("compile " + (fs::path(MEANDER_SOURCE_DIR) / "samples/fan_balance/fan_balance.mnd").string() +
                  " -o " + d.string()).status, 0);
    meander::test::write_text(d / "snippet.cpp", snippet);
    Outcome cc = meander::test::run("cd '" + d.string() + "' && '" + MEANDER_CXX +
                                    "' -std=c++17 -Wall -Wextra -Wconversion -Wdouble-promotion -Wshadow -Werror "
                                    "-fno-exceptions -fno-rtti -c snippet.cpp fan_balance.cpp");
    EXPECT_EQ(cc.status, 0) << cc.output;
}

// A misspelled command names the one it is close to; a word close to none lists them all. Exit 2: usage.
TEST(Cli, MisspelledCommandGetsASuggestion) {
    struct Case {
        const char* word;
        const char* want;
    } cases[] = {{"evl", "unknown command 'evl'; did you mean 'eval'?"},
                 {"compil", "did you mean 'compile'?"},
                 {"tunne", "did you mean 'tune'?"},
                 {"frobnicate", "unknown command 'frobnicate' (commands: check, eval, compile,"}};
    for (const Case& c : cases) {
        SCOPED_TRACE(c.word);
        Outcome r = run(std::string(c.word) + " x 2>&1");
        EXPECT_EQ(r.status, 2);
        EXPECT_NE(r.output.find(c.want), std::string::npos) << r.output;
    }
}

// --check only reads; with --in-place it is a usage error and the file stays as it was.
TEST(Cli, FormatCheckWithInPlaceIsAUsageError) {
    const fs::path d = scratch("format-check-in-place");
    const std::string messy = "model   m\ninput x[2]\ndense d: 2 -> 1\noutput y[1]\n";
    meander::test::write_text(d / "m.mnd", messy);
    Outcome r = run("format --check --in-place " + (d / "m.mnd").string() + " 2>&1");
    EXPECT_EQ(r.status, 2) << r.output;
    EXPECT_NE(r.output.find("excludes"), std::string::npos) << r.output;
    EXPECT_EQ(read_text(d / "m.mnd"), messy);
}

// A NaN row reaches the emitted code (which must answer input_not_finite, as eval does):
// verify's own driver spells it through numeric_limits instead of failing to build.
TEST(Cli, VerifyTakesANonFiniteRow) {
    const fs::path d = scratch("verify-nan-row");
    const fs::path s = fs::path(MEANDER_SOURCE_DIR) / "samples/fan_balance";
    std::string rows = read_text(s / "inputs.csv");
    rows = rows.substr(0, rows.find('\n', rows.find('\n') + 1) + 1) + "nan,1,2,3,4,5,6,7\n-nan,1,2,3,4,5,6,7\n";
    meander::test::write_text(d / "rows.csv", rows);
    for (const char* p : {"float32", "float64"}) {
        SCOPED_TRACE(p);
        Outcome r = run("verify " + (s / "fan_balance.mnd").string() + " --input " + (d / "rows.csv").string() +
                        " --precision " + p);
        EXPECT_EQ(r.status, 0) << r.output;
        EXPECT_NE(r.output.find("2 with the same result other than ok in both"), std::string::npos) << r.output;
    }
}
