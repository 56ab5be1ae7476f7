// Shared by test_emit and test_golden: hand-built models with weights from a
// fixed-seed generator, and building emitted code with the host compiler
// (general model, file and process helpers are in test_support.hpp).
#pragma once

#include <fmt/format.h>
#include <gtest/gtest.h>

#include <array>
#include <cstdint>
#include <cstdio>
#include <cstdlib>
#include <filesystem>
#include <fstream>
#include <sstream>
#include <string>
#include <vector>

#include "compiler/emit.hpp"
#include "runtime/evaluate.hpp"
#include "runtime/model.hpp"
#include "test_support.hpp"

namespace meander::test {

// splitmix64 (Steele, Lea & Flood 2014): the same numbers on every platform,
// unlike std:: distributions.
struct Rng {
    std::uint64_t s;
    explicit Rng(std::uint64_t seed) : s(seed) {}
    std::uint64_t next() {
        std::uint64_t z = (s += 0x9e3779b97f4a7c15ULL);
        z = (z ^ (z >> 30)) * 0xbf58476d1ce4e5b9ULL;
        z = (z ^ (z >> 27)) * 0x94d049bb133111ebULL;
        return z ^ (z >> 31);
    }
    double uniform(double lo, double hi) { return lo + (hi - lo) * static_cast<double>(next() >> 11) * 0x1.0p-53; }
};

inline Block dense(Rng& rng, const std::string& name, int in, int out, Activation act = Activation::identity,
                   bool time_input = false, double scale = 1.0, bool bias = true) {
    Dense d = dense_layer(name, in, out, act, time_input, bias);
    if (act == Activation::leaky_relu) d.act_param = 0.01;
    if (act == Activation::elu) d.act_param = 1.0;
    d.weight_tensor = name + ".weight";
    d.bias_tensor = bias ? name + ".bias" : "";
    // Glorot-like range keeps activations of order 1 through the layers.
    const double r = scale / std::sqrt(static_cast<double>(d.in_total()));
    d.weight.resize(out, d.in_total());
    for (int i = 0; i < out; ++i)
        for (int j = 0; j < d.in_total(); ++j) d.weight(i, j) = rng.uniform(-r, r);
    if (bias) {
        d.bias.resize(out);
        for (int i = 0; i < out; ++i) d.bias[i] = rng.uniform(-0.5, 0.5);
    }
    return dense_block(std::move(d));
}

// input 3 -> dense lift (tanh) -> continuous settle (state 4 + augment 1,
// field with time input) -> dense head -> output 2.
inline Model ode_model(const std::string& name, const SolverSpec& solver, std::uint64_t seed, double field_scale = 1.5,
                       double t0 = 0.0, double t1 = 1.0, bool time_input = true) {
    Rng rng(seed);
    std::vector<Block> field;
    field.push_back(dense(rng, "f1", 5, 8, Activation::softplus, time_input, field_scale));
    field.push_back(dense(rng, "f2", 8, 5, Activation::tanh, false, field_scale));
    std::vector<Block> blocks;
    blocks.push_back(dense(rng, "lift", 3, 4, Activation::tanh));
    blocks.push_back(continuous("settle", 4, 1, t0, t1, std::move(field), solver));
    blocks.push_back(dense(rng, "head", 5, 2));
    return model(name, 3, 2, std::move(blocks));
}

inline std::vector<std::vector<double>> random_inputs(std::uint64_t seed, int count, int width, double r = 2.0) {
    Rng rng(seed);
    std::vector<std::vector<double>> v(static_cast<std::size_t>(count));
    for (auto& x : v)
        for (int i = 0; i < width; ++i) x.push_back(rng.uniform(-r, r));
    return v;
}

// --- building emitted code ------------------------------------------------

// The flags every emitted file must pass (DEVELOPERS.md, "The emitted API").
inline std::string strict_flags() {
    return "-std=c++17 -O2 -ffp-contract=off -Wall -Wextra -Wpedantic -Wconversion -Wdouble-promotion -Wshadow "
           "-Wfloat-equal -Werror -fno-exceptions -fno-rtti";
}

inline void write_files(const std::filesystem::path& dir, const std::vector<EmittedFile>& files) {
    for (const EmittedFile& f : files) write_text(dir / f.name, f.text);
}

// Compiles the .cpp files in `dir` named in `sources` into dir/name; returns
// the compiler's output on failure (empty on success).
inline std::string build(const std::filesystem::path& dir, const std::vector<std::string>& sources,
                         const std::string& exe, const std::string& extra = "") {
    std::string cmd = fmt::format("cd '{}' && '{}' {} {} -o {}", dir.string(), MEANDER_CXX, strict_flags(), extra, exe);
    for (const std::string& s : sources) cmd += " " + s;
    const RunResult r = run(cmd);
    return r.status == 0 ? std::string() : ("compile failed: " + cmd + "\n" + r.output);
}

// Exact text of a double for a C++ source (hex float).
inline std::string hex_literal(double v) { return fmt::format("{:a}", v); }

// Driver lines: per vector "R <result> <field_evals> <steps_accepted> <steps_rejected> <outputs in %a>".
struct Row {
    int result = -1;
    long field_evals = 0, steps_accepted = 0, steps_rejected = 0;
    std::vector<double> out;
};

// Source of a driver running `inputs` through NAME::infer for every model name.
inline std::string driver_source(const std::vector<std::string>& names, const std::vector<std::vector<double>>& inputs,
                                 int input_size) {
    std::string o = "#include <cstdio>\n#include <cmath>\n";
    for (const auto& n : names) o += fmt::format("#include \"{}.hpp\"\n", n);
    o += fmt::format("static const double inputs[{}][{}] = {{\n", inputs.size(), input_size);
    for (const auto& x : inputs) {
        o += "    {";
        for (double v : x) o += (std::isnan(v) ? std::string("__builtin_nan(\"\")") : hex_literal(v)) + ", ";
        o += "},\n";
    }
    o += "};\n";
    for (const auto& n : names) {
        o += fmt::format(R"(static void run_{0}() {{
    static {0}::context ctx;
    for (const auto& row : inputs) {{
        {0}::real in[{0}::input_size];
        {0}::real out[{0}::output_size] = {{}};
        for (std::size_t i = 0; i < {0}::input_size; ++i) in[i] = static_cast<{0}::real>(row[i]);
        const {0}::result r = {0}::infer(ctx, in, out);
        std::printf("R %d %lu %lu %lu", static_cast<int>(r), static_cast<unsigned long>(ctx.count.field_evals),
                    static_cast<unsigned long>(ctx.count.steps_accepted), static_cast<unsigned long>(ctx.count.steps_rejected));
        for (std::size_t i = 0; i < {0}::output_size; ++i) std::printf(" %a", static_cast<double>(out[i]));
        std::printf("\n");
    }}
}}
)",
                         n);
    }
    o += "int main() {\n";
    for (const auto& n : names) o += fmt::format("    std::printf(\"M {}\\n\");\n    run_{}();\n", n, n);
    o += "    return 0;\n}\n";
    return o;
}

// Parses the driver's output into rows per model, in order.
inline std::vector<std::vector<Row>> parse_driver(const std::string& text) {
    std::vector<std::vector<Row>> models;
    std::istringstream in(text);
    std::string line;
    while (std::getline(in, line)) {
        if (line.rfind("M ", 0) == 0) {
            models.emplace_back();
            continue;
        }
        if (line.rfind("R ", 0) != 0 || models.empty()) continue;
        std::istringstream ls(line.substr(2));
        Row r;
        ls >> r.result >> r.field_evals >> r.steps_accepted >> r.steps_rejected;
        std::string tok;
        while (ls >> tok) r.out.push_back(std::strtod(tok.c_str(), nullptr));
        models.back().push_back(r);
    }
    return models;
}

inline int status_code(EvalStatus s) {
    switch (s) {
    case EvalStatus::ok: return 0;
    case EvalStatus::input_not_finite: return 1;
    case EvalStatus::state_not_finite: return 2;
    case EvalStatus::step_limit: return 3;
    case EvalStatus::step_too_small: return 4;
    case EvalStatus::gap_out_of_range: return 5;  // streaming models only
    }
    return -1;
}

}  // namespace meander::test
