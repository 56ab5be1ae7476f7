// Golden files: the emitted text of a few small models, byte for byte.
// Regenerate with MEANDER_UPDATE_GOLDEN=1 (then review the diff).
#include "emit_support.hpp"

namespace meander::test {
namespace {

namespace fs = std::filesystem;

const fs::path kGoldenDir = fs::path(MEANDER_SOURCE_DIR) / "tests" / "golden" / "emit";

// The banner's version is fixed here so that a version bump alone does not
// change the golden files.
EmitOptions golden_options(Precision p) {
    EmitOptions eo;
    eo.precision = p;
    eo.meander_version = "0.0.0";
    eo.content_hash = "0123456789abcdef";
    return eo;
}

struct GoldenCase {
    Model m;
    EmitOptions eo;
};

std::vector<GoldenCase> golden_cases() {
    std::vector<GoldenCase> cases;
    {
        // Fixed-step rk4, float32, a residual block, the C entry point.
        Rng rng(901);
        std::vector<Block> field;
        field.push_back(dense(rng, "f1", 3, 4, Activation::tanh, true));
        field.push_back(dense(rng, "f2", 4, 3));
        std::vector<Block> blocks;
        blocks.push_back(dense(rng, "lift", 2, 3, Activation::relu));
        blocks.push_back(continuous("glide", 3, 0, 0.0, 1.0, std::move(field), fixed_solver("rk4", 4)));
        blocks.push_back(residual("tidy", 3, {dense(rng, "r1", 3, 3, Activation::silu)}));
        blocks.push_back(dense(rng, "head", 3, 2, Activation::softmax));
        GoldenCase c{model("tiny_fixed", 2, 2, std::move(blocks)), golden_options(Precision::float32)};
        c.eo.c_header = true;
        cases.push_back(std::move(c));
    }
    {
        // Adaptive Dormand-Prince, float32, PI controller, augment, a self-test.
        SolverSpec s = adaptive_solver("dormand-prince", 1e-4, 1e-6, 32);
        s.controller = Controller::pi;
        Rng rng(902);
        std::vector<Block> field;
        field.push_back(dense(rng, "g1", 3, 5, Activation::softplus, true));
        field.push_back(dense(rng, "g2", 5, 3, Activation::identity, false, 1.0, false));
        std::vector<Block> blocks;
        blocks.push_back(continuous("drift", 2, 1, 0.0, 0.5, std::move(field), s));
        GoldenCase c{model("tiny_adaptive", 2, 3, std::move(blocks)), golden_options(Precision::float32)};
        // Fixed expected values (not eval's): these files test the emitter's
        // text, and must not change when the reference's last bits do.
        c.eo.self_test_inputs = {{0.5, -0.25}, {1.0, 2.0}};
        c.eo.self_test_outputs = {{0.125, -1.5, 3.0}, {1e-3, 250.0, -0.0625}};
        cases.push_back(std::move(c));
    }
    {
        // Non-FSAL Cash-Karp in float64, integrating backwards.
        Rng rng(903);
        std::vector<Block> field;
        field.push_back(dense(rng, "h1", 2, 2, Activation::elu));
        std::vector<Block> blocks;
        blocks.push_back(continuous("rewind", 2, 0, 1.0, 0.0, std::move(field),
                                    adaptive_solver("cash-karp", 1e-8, 1e-10, 100)));
        cases.push_back({model("tiny_backward", 2, 2, std::move(blocks)), golden_options(Precision::float64)});
    }
    return cases;
}

// The first differing line, with its neighbours, for the failure message.
std::string diff_hint(const std::string& want, const std::string& got) {
    std::istringstream a(want), b(got);
    std::string la, lb;
    int line = 0;
    while (true) {
        const bool ha = static_cast<bool>(std::getline(a, la));
        const bool hb = static_cast<bool>(std::getline(b, lb));
        ++line;
        if (!ha && !hb) return "texts differ only in the final newline";
        if (!ha || !hb || la != lb)
            return fmt::format("first difference at line {}:\n  expected: {}\n  emitted:  {}", line,
                               ha ? la : "<end of file>", hb ? lb : "<end of file>");
    }
}

TEST(golden_emit, EmittedFilesMatch) {
    const bool update = std::getenv("MEANDER_UPDATE_GOLDEN") != nullptr &&
                        std::string(std::getenv("MEANDER_UPDATE_GOLDEN")) == "1";
    int compared = 0;
    for (const GoldenCase& c : golden_cases()) {
        const fs::path dir = kGoldenDir / c.m.name;
        for (const EmittedFile& f : emit_model(c.m, c.eo)) {
            const fs::path p = dir / f.name;
            if (update) {
                fs::create_directories(dir);
                write_text(p, f.text);
                continue;
            }
            ASSERT_TRUE(fs::exists(p)) << p << " is missing; run with MEANDER_UPDATE_GOLDEN=1 to create it";
            const std::string want = read_text(p);
            EXPECT_TRUE(want == f.text) << p.string() << " differs from the emitted text. " << diff_hint(want, f.text)
                                        << "\nIf the change is intended: MEANDER_UPDATE_GOLDEN=1 ctest -R golden, "
                                           "then review `git diff tests/golden`.";
            ++compared;
        }
    }
    if (!update) EXPECT_EQ(compared, 9);  // (2 + the C header) + (2 + 2 self-test) + 2 files
}

// The golden files themselves build with the strict flags and run.
TEST(golden_emit, GoldenFilesBuildAndRun) {
    const fs::path dir = temp_dir("golden");
    std::vector<std::string> sources;
    std::string driver = "#include <cstdio>\n";
    std::string body;
    for (const GoldenCase& c : golden_cases()) {
        for (const auto& entry : fs::directory_iterator(kGoldenDir / c.m.name)) {
            fs::copy_file(entry.path(), dir / entry.path().filename(), fs::copy_options::overwrite_existing);
            if (entry.path().extension() == ".cpp") sources.push_back(entry.path().filename().string());
        }
        driver += fmt::format("#include \"{}.hpp\"\n", c.m.name);
        body += fmt::format(
            "    {{\n        static {0}::context ctx;\n        {0}::real in[{0}::input_size] = {{}};\n"
            "        {0}::real out[{0}::output_size] = {{}};\n"
            "        if ({0}::infer(ctx, in, out) != {0}::result::ok) return 1;\n    }}\n",
            c.m.name);
    }
    driver += "int main() {\n" + body + "    std::printf(\"ok\\n\");\n    return 0;\n}\n";
    write_text(dir / "driver.cpp", driver);
    sources.push_back("driver.cpp");
    const std::string err = build(dir, sources, "golden_driver");
    ASSERT_TRUE(err.empty()) << err;
    const RunResult r = run((dir / "golden_driver").string());
    EXPECT_EQ(r.status, 0) << r.output;
    EXPECT_EQ(r.output, "ok\n");
    fs::remove_all(dir);
}

}  // namespace
}  // namespace meander::test
