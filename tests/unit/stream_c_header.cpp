// The plain C header of a streaming model (compile --c-header): a C99 and a C11
// program, built with gcc's pedantic warnings as errors, runs the sequence file
// through NAME_reset and NAME_observe; in float64 its readouts and counters are
// the reference evaluator's (evaluate_sequences, what `meander eval` prints) bit
// for bit (DEVELOPERS.md, "Operation order"). The header's constants are the C++
// header's, a gap out of range comes back as NAME_GAP_OUT_OF_RANGE, and the
// source refuses a C header from another run.
#include <fmt/format.h>
#include <gtest/gtest.h>

#include <cctype>
#include <cstdlib>
#include <cstring>
#include <sstream>
#include <string>
#include <vector>

#include "compiler/load.hpp"
#include "compiler/sequence.hpp"
#include "emit_support.hpp"

namespace fs = std::filesystem;
using namespace meander;
using namespace meander::test;

namespace {

struct Case {
    std::string mnd, inputs;
};

const std::vector<Case>& cases() {
    static const std::vector<Case> c = {
        {std::string(MEANDER_SOURCE_DIR) + "/samples/parcel_chill/parcel_chill.mnd",
         std::string(MEANDER_SOURCE_DIR) + "/samples/parcel_chill/inputs.csv"},
        {std::string(MEANDER_SOURCE_DIR) + "/tests/data/stream_parts/stream_parts.mnd",
         std::string(MEANDER_SOURCE_DIR) + "/tests/data/stream_parts/inputs.csv"},
    };
    return c;
}

std::string upper(std::string s) {
    for (char& ch : s) ch = static_cast<char>(std::toupper(static_cast<unsigned char>(ch)));
    return s;
}

// A C program over the rows (hexadecimal literals, C99): reset where a sequence
// begins, observe with the row's gap; one line per row with the result code, the
// counters and every readout in hex. Then a gap beyond the largest, which must be
// refused, and the constants.
std::string c_driver(const std::string& n, const std::vector<SequenceRow>& rows) {
    const std::string M = upper(n);
    std::string o = fmt::format("#include \"{}.h\"\n#include <stdio.h>\n#include <string.h>\n", n);
    o += fmt::format("static const double rows[{}][{}] = {{\n", rows.size(), 2 + rows.front().values.size());
    for (const SequenceRow& r : rows) {
        o += fmt::format("    {{{}, {}", r.first ? 1 : 0, hex_literal(r.gap));
        for (double v : r.values) o += ", " + hex_literal(v);
        o += "},\n";
    }
    o += "};\n";
    o += fmt::format(R"(static {0}_context ctx;
int main(void) {{
    {0}_real in[{1}_INPUT_SIZE];
    {0}_real out[{1}_OUTPUT_SIZE];
    unsigned char kept[{1}_STATE_SIZE * sizeof({0}_real)];
    {0}_counters c;
    size_t k, i;
    int r;
    for (k = 0; k < sizeof rows / sizeof rows[0]; ++k) {{
        if (rows[k][0] != 0.0) {0}_reset(&ctx);
        for (i = 0; i < {1}_INPUT_SIZE; ++i) in[i] = ({0}_real)rows[k][2 + i];
        r = {0}_observe(&ctx, in, ({0}_real)rows[k][1], out);
        c = {0}_counters_of(&ctx);
        printf("R %d %u %u %u", r, (unsigned)c.field_evals, (unsigned)c.steps_accepted, (unsigned)c.steps_rejected);
        for (i = 0; i < {1}_OUTPUT_SIZE; ++i) printf(" %a", (double)out[i]);
        printf("\n");
    }}
    /* The state leads the C++ context; a refused call leaves it as it was. */
    memcpy(kept, ctx.bytes, sizeof kept);
    r = {0}_observe(&ctx, in, {1}_LARGEST_GAP * 2, out);
    printf("G %d %s %d %s %s\n", r, {0}_result_name(r), memcmp(kept, ctx.bytes, sizeof kept) == 0,
           {0}_result_name({1}_GAP_OUT_OF_RANGE + 1), {0}_result_name({1}_STEP_TOO_SMALL));
    printf("K %u %u %u %a %u %u %llu %d\n", (unsigned){1}_STATE_SIZE, (unsigned){1}_WORKSPACE_SIZE,
           (unsigned){1}_PARAMETER_COUNT, (double){1}_LARGEST_GAP, (unsigned){1}_MACS_PER_FIELD_EVAL,
           (unsigned){1}_WORST_FIELD_EVALS, (unsigned long long){1}_WORST_MACS, {0}_build_conditions_hold());
    return 0;
}}
)",
                     n, M);
    return o;
}

// The C++ header's value of `constexpr ... NAME = VALUE;`.
std::string cxx_constant(const std::string& hpp, const std::string& name) {
    const std::size_t at = hpp.find(" " + name + " = ");
    if (at == std::string::npos) return "missing";
    const std::size_t from = at + name.size() + 4;
    return hpp.substr(from, hpp.find(';', from) - from);
}

TEST(StreamCHeader, C99ProgramGivesEvalsBitsOverTheSequenceFile) {
    if (run("gcc --version").status != 0) GTEST_SKIP() << "gcc (a C compiler) not installed";
    for (const Case& cs : cases()) {
        Diagnostics diags;
        auto l = load_model(cs.mnd, Precision::float64, diags);
        ASSERT_TRUE(l) << diags.render();
        ASSERT_TRUE(l->model.stream);
        auto rows = read_sequence_file(cs.inputs, l->model.input_size, l->model.stream->largest_gap, diags);
        ASSERT_TRUE(rows) << diags.render();
        const std::vector<EvalResult> ref = evaluate_sequences(l->model, *rows);
        EmitOptions eo;
        eo.precision = Precision::float64;
        eo.c_header = true;
        const auto files = emit_stream(l->model, eo);
        ASSERT_EQ(files.size(), 3u);
        const std::string& n = l->model.name;
        ASSERT_EQ(files[2].name, n + ".h");
        const fs::path dir = temp_dir("stream-c-" + n);
        write_files(dir, files);
        write_text(dir / "use.c", c_driver(n, *rows));
        const RunResult obj = run(fmt::format("cd '{}' && '{}' {} -c {}.cpp -o model.o", dir.string(), MEANDER_CXX, strict_flags(), n));
        ASSERT_EQ(obj.status, 0) << obj.output;
        for (const char* standard : {"c99", "c11"}) {
            const RunResult cc = run(fmt::format("cd '{}' && gcc -std={} -Wall -Wextra -pedantic -Werror -c use.c -o use.o",
                                                 dir.string(), standard));
            ASSERT_EQ(cc.status, 0) << standard << ": " << cc.output;
            const std::string err = build(dir, {"model.o", "use.o"}, "capi");
            ASSERT_TRUE(err.empty()) << err;
            const RunResult r = run((dir / "capi").string());
            ASSERT_EQ(r.status, 0) << r.output;
            std::istringstream in(r.output);
            std::string tag;
            std::size_t k = 0;
            while (in >> tag && tag == "R") {
                ASSERT_LT(k, ref.size());
                int code = -1;
                unsigned evals = 0, accepted = 0, rejected = 0;
                in >> code >> evals >> accepted >> rejected;
                EXPECT_EQ(code, 0) << n << " row " << k;
                EXPECT_EQ(static_cast<long>(evals), ref[k].stats.field_evals) << n << " row " << k;
                EXPECT_EQ(static_cast<long>(accepted), ref[k].stats.steps_accepted) << n << " row " << k;
                EXPECT_EQ(static_cast<long>(rejected), ref[k].stats.steps_rejected) << n << " row " << k;
                for (Eigen::Index i = 0; i < ref[k].output.size(); ++i) {
                    std::string hex;
                    in >> hex;
                    const double got = std::strtod(hex.c_str(), nullptr);
                    EXPECT_EQ(std::memcmp(&got, &ref[k].output[i], sizeof got), 0)
                        << n << " row " << k << " output " << i << ": C " << hex << ", eval " << hex_literal(ref[k].output[i]);
                }
                ++k;
            }
            EXPECT_EQ(k, rows->size()) << n << " " << standard;
            ASSERT_EQ(tag, "G") << r.output;
            int code = -1, unchanged = -1;
            std::string name, unknown, too_small;
            in >> code >> name >> unchanged >> unknown >> too_small;
            EXPECT_EQ(code, 5);
            EXPECT_EQ(name, "gap_out_of_range");
            EXPECT_EQ(unchanged, 1) << "a refused observation changed the context's state";
            EXPECT_EQ(unknown, "unknown");
            EXPECT_EQ(too_small, "step_too_small");
            // The C header's constants are the C++ header's.
            const std::string& hpp = files[0].text;
            std::string state, work, params, gap, macs, evals, worst;
            int conditions = -1;
            in >> tag >> state >> work >> params >> gap >> macs >> evals >> worst >> conditions;
            ASSERT_EQ(tag, "K");
            EXPECT_EQ(state, cxx_constant(hpp, "state_size"));
            EXPECT_EQ(work, cxx_constant(hpp, "workspace_size"));
            EXPECT_EQ(params + "u", cxx_constant(hpp, "parameter_count"));
            EXPECT_EQ(std::strtod(gap.c_str(), nullptr), l->model.stream->largest_gap);
            EXPECT_EQ(macs + "u", cxx_constant(hpp, "macs_per_field_eval"));
            EXPECT_EQ(evals + "u", cxx_constant(hpp, "worst_field_evals"));
            EXPECT_EQ(worst + "u", cxx_constant(hpp, "worst_macs"));
            EXPECT_EQ(conditions, 1);
        }
        // A C header from another run (float32) is refused by the float64 source.
        EmitOptions other = eo;
        other.precision = Precision::float32;
        write_files(dir, {emit_stream(l->model, other)[2]});
        const RunResult mixed = run(fmt::format("cd '{}' && '{}' -std=c++17 -c {}.cpp -o mixed.o", dir.string(), MEANDER_CXX, n));
        EXPECT_NE(mixed.status, 0);
        EXPECT_NE(mixed.output.find(n + ".h is not the C header generated with this source"), std::string::npos) << mixed.output;
        fs::remove_all(dir);
    }
}

// `meander compile --c-header` writes the three files for a streaming model.
TEST(StreamCHeader, CompileWritesTheCHeader) {
    const fs::path dir = temp_dir("stream-c-cli");
    const RunResult r = run(fmt::format("{} compile {} --c-header -o {}", MEANDER_BINARY, cases()[0].mnd, dir.string()));
    ASSERT_EQ(r.status, 0) << r.output;
    const std::string h = read_text(dir / "parcel_chill.h");
    EXPECT_NE(h.find("int parcel_chill_observe(parcel_chill_context* context, const parcel_chill_real* input, "
                     "parcel_chill_real gap, parcel_chill_real* output);"),
              std::string::npos)
        << h;
    EXPECT_NE(h.find("void parcel_chill_reset(parcel_chill_context* context);"), std::string::npos) << h;
    EXPECT_NE(h.find("#define PARCEL_CHILL_GAP_OUT_OF_RANGE 5\n"), std::string::npos) << h;
    EXPECT_NE(read_text(dir / "parcel_chill.cpp").find("extern \"C\" int parcel_chill_observe("), std::string::npos);
    fs::remove_all(dir);
}

}  // namespace
