// The emitted code of every sample builds as C++11, C++14, C++17 and C++20
// under the strict flags (DEVELOPERS.md, "The emitted API"), with its C header
// glue where a model has one, and gives the same bits under each: a driver's
// whole output (result codes, counters, every output in hex) is compared with
// the C++17 build's. The C++17 build itself is checked against the reference
// evaluator: float64 bit for bit (DEVELOPERS.md, "Operation order"), float32
// and streaming models within 1e-4 * max(1, |eval|).
#include <unistd.h>

#include <fmt/format.h>
#include <gtest/gtest.h>

#include <cmath>
#include <string>
#include <vector>

#include "compiler/load.hpp"
#include "compiler/sequence.hpp"
#include "emit_support.hpp"

namespace fs = std::filesystem;
using namespace meander;
using namespace meander::test;

namespace {

const fs::path kSamples = fs::path(MEANDER_SOURCE_DIR) / "samples";

std::string flags(const std::string& standard) {
    std::string f = strict_flags();
    const std::string from = "-std=c++17";
    f.replace(f.find(from), from.size(), "-std=" + standard);
    return f;
}

// A driver over a streaming model's sequence rows: reset where a sequence
// begins, observe with the row's gap; prints what driver_source prints.
std::string stream_driver(const std::string& n, const std::vector<SequenceRow>& rows) {
    std::string o = fmt::format("#include <cstdio>\n#include \"{}.hpp\"\n", n);
    o += fmt::format("static const double rows[{}][{}] = {{\n", rows.size(), 2 + rows.front().values.size());
    for (const SequenceRow& r : rows) {
        o += fmt::format("    {{{}, {}", r.first ? 1 : 0, hex_literal(r.gap));
        for (double v : r.values) o += ", " + hex_literal(v);
        o += "},\n";
    }
    o += "};\n";
    o += fmt::format(R"(int main() {{
    static {0}::context ctx;
    std::printf("M {0}\n");
    for (std::size_t k = 0; k < sizeof rows / sizeof rows[0]; ++k) {{
        if (rows[k][0] > 0.5) {0}::reset(ctx);
        {0}::real in[{0}::input_size];
        {0}::real out[{0}::output_size] = {{}};
        for (std::size_t i = 0; i < {0}::input_size; ++i) in[i] = static_cast<{0}::real>(rows[k][2 + i]);
        const {0}::result r = {0}::observe(ctx, in, static_cast<{0}::real>(rows[k][1]), out);
        std::printf("R %d 0 0 0", static_cast<int>(r));
        for (std::size_t i = 0; i < {0}::output_size; ++i) std::printf(" %a", static_cast<double>(out[i]));
        std::printf("\n");
    }}
    return 0;
}}
)",
                     n);
    return o;
}

struct Built {
    std::string error;              // empty when it built and ran
    std::string output;             // the driver's output
};

// Emits `m` in precision `p` into a fresh folder, builds it with the driver
// under `standard`, and runs it.
Built build_and_run(const LoadedModel& l, Precision p, const std::string& standard, const std::string& driver) {
    EmitOptions eo;
    eo.precision = p;
    eo.content_hash = l.content_hash;
    eo.meander_version = "test";
    eo.c_header = true;  // the C glue is C++ of the source, so it is built under each standard too
    const auto files = l.model.stream ? emit_stream(l.model, eo) : emit_model(l.model, eo);
    const fs::path dir =
        scratch_dir("emit-standards", fmt::format("{}-{}-{}-{}", l.model.name, p == Precision::float32 ? "f32" : "f64", standard,
                                                 ::getpid()));  // per test process: ctest runs the standards in parallel
    write_files(dir, files);
    write_text(dir / "driver.cpp", driver);
    // The driver (hexadecimal literals: C++17) is built as C++17; the model's source, and with
    // it the header, under `standard`.
    const std::string cmd = fmt::format("cd '{0}' && '{1}' {2} -c {3}.cpp -o model.o && '{1}' {4} -c driver.cpp -o driver.o && "
                                        "'{1}' -o app driver.o model.o",
                                        dir.string(), MEANDER_CXX, flags(standard), l.model.name, strict_flags());
    const RunResult b = run(cmd);
    if (b.status != 0) return {standard + ": " + cmd + "\n" + b.output, {}};
    const RunResult r = run((dir / "app").string());
    if (r.status != 0) return {standard + ": the driver failed: " + r.output, {}};
    fs::remove_all(dir);
    return {{}, r.output};
}

class EmittedStandard : public ::testing::TestWithParam<const char*> {};

TEST_P(EmittedStandard, EverySampleBuildsWithTheSameBits) {
    const std::string standard = GetParam();
    int samples = 0;
    for (const auto& entry : fs::directory_iterator(kSamples)) {
        const fs::path mnd = entry.path() / (entry.path().filename().string() + ".mnd");
        if (!fs::exists(mnd)) continue;
        ++samples;
        for (Precision p : {Precision::float32, Precision::float64}) {
            const std::string what = fmt::format("{} {}", mnd.filename().string(), p == Precision::float32 ? "float32" : "float64");
            Diagnostics diags;
            auto l = load_model(mnd.string(), p, diags);
            ASSERT_TRUE(l) << diags.render();
            const std::string inputs = (entry.path() / "inputs.csv").string();
            std::string driver;
            std::vector<EvalResult> ref;
            if (l->model.stream) {
                auto rows = read_sequence_file(inputs, l->model.input_size, l->model.stream->largest_gap, diags);
                ASSERT_TRUE(rows) << diags.render();
                driver = stream_driver(l->model.name, *rows);
                ref = evaluate_sequences(l->model, *rows);
            } else {
                auto rows = read_csv_rows(inputs, l->model.input_size, diags);
                ASSERT_TRUE(rows) << diags.render();
                driver = driver_source({l->model.name}, *rows, l->model.input_size);
                for (const auto& r : *rows)
                    ref.push_back(evaluate(l->model, Eigen::Map<const Eigen::VectorXd>(r.data(), static_cast<Eigen::Index>(r.size()))));
            }
            const Built got = build_and_run(*l, p, standard, driver);
            ASSERT_TRUE(got.error.empty()) << what << ": " << got.error;
            if (standard != "c++17") {
                const Built base = build_and_run(*l, p, "c++17", driver);
                ASSERT_TRUE(base.error.empty()) << what << ": " << base.error;
                EXPECT_TRUE(got.output == base.output) << what << ": " << standard << " gives other bits than c++17";
                continue;
            }
            // The C++17 build computes the model.
            const auto models = parse_driver(got.output);
            ASSERT_EQ(models.size(), 1u) << what;
            ASSERT_EQ(models[0].size(), ref.size()) << what;
            const bool exact = p == Precision::float64 && !l->model.stream;
            for (std::size_t k = 0; k < ref.size(); ++k) {
                ASSERT_EQ(ref[k].status, EvalStatus::ok) << what << " row " << k;
                ASSERT_EQ(models[0][k].result, 0) << what << " row " << k;
                ASSERT_EQ(models[0][k].out.size(), static_cast<std::size_t>(ref[k].output.size()));
                for (Eigen::Index i = 0; i < ref[k].output.size(); ++i) {
                    const double want = ref[k].output[i], have = models[0][k].out[static_cast<std::size_t>(i)];
                    if (exact)
                        EXPECT_EQ(hex_literal(have), hex_literal(want)) << what << " row " << k << " output " << i;
                    else
                        EXPECT_LE(std::fabs(have - want), 1e-4 * std::max(1.0, std::fabs(want)))
                            << what << " row " << k << " output " << i;
                }
            }
        }
    }
    EXPECT_GE(samples, 4);
}

INSTANTIATE_TEST_SUITE_P(Cxx, EmittedStandard, ::testing::Values("c++11", "c++14", "c++17", "c++20"),
                         [](const ::testing::TestParamInfo<const char*>& info) {
                             std::string s = info.param;
                             return s.replace(s.find("++"), 2, "xx");
                         });

}  // namespace
