// Line endings do not change what meander makes: a description (or weight
// listing) with CRLF or lone-CR line endings has the same content hash and
// compiles to the same bytes as the LF original, and its diagnostics point at
// the same line and column without printing the CR.
// The expected values are the LF original's own outputs (an LF file is read
// byte for byte as before) and positions counted by hand in the texts below.
#include <gtest/gtest.h>

#include <algorithm>
#include <filesystem>
#include <string>
#include <vector>

#include "compiler/source.hpp"
#include "test_support.hpp"

namespace fs = std::filesystem;

namespace {

using meander::test::read_text;
using meander::test::write_text;

meander::test::RunResult run(const std::string& args) {
    return meander::test::run(std::string(MEANDER_BINARY) + " " + args);
}

std::string with_crlf(const std::string& lf) {
    std::string out;
    for (char c : lf) {
        if (c == '\n') out += '\r';
        out += c;
    }
    return out;
}

std::string with_cr(const std::string& lf) {
    std::string out = lf;
    std::replace(out.begin(), out.end(), '\n', '\r');
    return out;
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

// The files of a folder, by name.
std::vector<std::pair<std::string, std::string>> folder_files(const fs::path& dir) {
    std::vector<std::pair<std::string, std::string>> out;
    for (const auto& f : fs::directory_iterator(dir)) out.emplace_back(f.path().filename().string(), read_text(f.path()));
    std::sort(out.begin(), out.end());
    return out;
}

TEST(NormaliseLineEndings, EveryEndingBecomesLf) {
    EXPECT_EQ(meander::normalise_line_endings("a\r\nb\rc\nd\r\r\n"), "a\nb\nc\nd\n\n");
    EXPECT_EQ(meander::normalise_line_endings("no ending"), "no ending");
    EXPECT_EQ(meander::normalise_line_endings("\r"), "\n");
}

class SampleLineEndings : public ::testing::TestWithParam<fs::path> {};

// Compiles the sample as it is and as CRLF and lone-CR copies beside copies of
// its weights: every emitted file must be byte-identical, content hash included.
TEST_P(SampleLineEndings, CompileOutputIgnoresLineEndings) {
    const fs::path mnd = GetParam();
    const std::string stem = mnd.stem().string();
    const fs::path root = meander::test::scratch_dir("line-endings", stem);
    const std::string lf = read_text(mnd);
    ASSERT_EQ(lf.find('\r'), std::string::npos) << "the sample itself should use LF";
    struct Variant {
        const char* name;
        std::string text;
    };
    const std::vector<Variant> variants = {{"lf", lf}, {"crlf", with_crlf(lf)}, {"cr", with_cr(lf)}};
    std::vector<std::vector<std::pair<std::string, std::string>>> outputs;
    for (const auto& v : variants) {
        const fs::path dir = root / v.name;
        fs::create_directories(dir);
        for (const auto& f : fs::directory_iterator(mnd.parent_path()))
            if (f.path().extension() == ".npz" || f.path().extension() == ".pt" || f.path().extension() == ".safetensors")
                fs::copy_file(f.path(), dir / f.path().filename());
        write_text(dir / mnd.filename(), v.text);
        const auto r = run("compile " + (dir / mnd.filename()).string() + " -o " + (dir / "out").string());
        ASSERT_EQ(r.status, 0) << v.name << ": " << r.output;
        outputs.push_back(folder_files(dir / "out"));
    }
    ASSERT_GE(outputs[0].size(), 2u);
    for (std::size_t i = 1; i < outputs.size(); ++i) {
        ASSERT_EQ(outputs[i].size(), outputs[0].size()) << variants[i].name;
        for (std::size_t f = 0; f < outputs[0].size(); ++f) {
            EXPECT_EQ(outputs[i][f].first, outputs[0][f].first);
            EXPECT_TRUE(outputs[i][f].second == outputs[0][f].second)
                << variants[i].name << ": " << outputs[0][f].first << " differs from the LF original's";
        }
    }
}

INSTANTIATE_TEST_SUITE_P(All, SampleLineEndings, ::testing::ValuesIn(samples()),
                         [](const ::testing::TestParamInfo<fs::path>& info) { return info.param.stem().string(); });

// A diagnostic in a CRLF description: line 3, column 12 (the '2' after "4 "),
// counted in the LF text; the source line is printed without its CR.
TEST(LineEndings, DiagnosticOnCrlfFileKeepsLineAndColumn) {
    const fs::path dir = meander::test::scratch_dir("line-endings", "diagnostic");
    const std::string lf = "model m\n# a comment\ndense a: 4 2\n";
    const std::string want = "bad.mnd:3:12: error: expected '->'\ndense a: 4 2\n           ^\n";
    for (const std::string& text : {with_crlf(lf), with_cr(lf)}) {
        write_text(dir / "bad.mnd", text);
        const auto r = meander::test::run("cd " + dir.string() + " && " + MEANDER_BINARY + " check bad.mnd");
        EXPECT_EQ(r.status, 1);
        EXPECT_EQ(r.output, want);
        EXPECT_EQ(r.output.find('\r'), std::string::npos);
    }
}

// A comment on a lone-CR line ends at the CR, as an editor shows it, so the
// statement on the next line is read.
TEST(LineEndings, CommentEndsAtLoneCr) {
    const fs::path dir = meander::test::scratch_dir("line-endings", "comment");
    write_text(dir / "m.mnd", with_cr("model m # first\ninput x[2] # second\ndense a: 2 -> 1\noutput y[1]\n"));
    const auto r = run("format " + (dir / "m.mnd").string());
    EXPECT_EQ(r.status, 0) << r.output;
    EXPECT_EQ(r.output, "model m  # first\ninput x[2]  # second\ndense a: 2 -> 1\noutput y[1]\n");
}

// A weight listing is text too: its CRLF copy gives the same content hash.
TEST(LineEndings, WeightListingHashIgnoresCrlf) {
    const fs::path dir = meander::test::scratch_dir("line-endings", "listing");
    const std::string listing = "meander-weights 1\n\ntensor a.weight float32 1 2\n0.5 -1.25\n\ntensor a.bias float32 1\n0.125\n";
    const std::string description = "model m\nweights \"w.mnw\"\ninput x[2]\ndense a: 2 -> 1\noutput y[1]\n";
    std::vector<std::string> outputs;
    for (const std::string& sub : {"lf", "crlf"}) {
        fs::create_directories(dir / sub);
        write_text(dir / sub / "w.mnw", sub == std::string("lf") ? listing : with_crlf(listing));
        write_text(dir / sub / "m.mnd", description);
        const auto r = meander::test::run("cd " + (dir / sub).string() + " && " + MEANDER_BINARY + " check m.mnd");
        ASSERT_EQ(r.status, 0) << r.output;
        outputs.push_back(r.output);
    }
    EXPECT_EQ(outputs[0], outputs[1]);
    EXPECT_NE(outputs[0].find("content fnv1a64:"), std::string::npos) << outputs[0];
}

}  // namespace
