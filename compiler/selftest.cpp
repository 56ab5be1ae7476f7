// Self-test source: golden vectors and a function that replays them, so a
// firmware unit test can check the deployed model on the target itself.
#include "selftest.hpp"

#include <fmt/format.h>

#include <algorithm>

namespace meander {

std::vector<EmittedFile> emit_self_test(const Model& model, const EmitOptions& opts) {
    using emit_detail::real_literal;
    const Precision p = opts.precision;
    const std::string& name = model.name;
    const std::string M = emit_detail::macro_prefix(name);
    // A streaming model's vectors are observations, each with its gap and whether its sequence begins there.
    const bool stream = model.stream.has_value();
    std::size_t vectors = std::min(opts.self_test_inputs.size(), opts.self_test_outputs.size());
    if (stream) vectors = std::min({vectors, opts.self_test_gaps.size(), opts.self_test_first.size()});
    auto L = [&](double v) { return real_literal(v, p); };

    std::string h = emit_detail::banner(model, opts, name + "_selftest.hpp");
    h += fmt::format("#ifndef MEANDER_GENERATED_{0}_SELFTEST_HPP\n#define MEANDER_GENERATED_{0}_SELFTEST_HPP\n\n", M);
    h += fmt::format("#include \"{}.hpp\"\n\n", name);
    h += fmt::format("namespace {} {{\n\n", name);
    h += "// Golden vectors: inputs, and the outputs the reference evaluator (meander eval, double)\n";
    h += stream ? "// gave for them, rounded to real; observations of sequences, each with its gap.\n"
                : "// gave for them, rounded to real.\n";
    h += fmt::format("constexpr std::size_t self_test_vectors = {};\n\n", vectors);
    h += fmt::format(R"(// A deviation |got - want| fails when it exceeds tolerance * max(1, |want|);
// a NaN or infinite output fails, and so does a vector whose result is not ok.
struct self_test_report {{
    std::uint32_t vectors_run;
    std::uint32_t failures;           // vectors with a failing output or a result other than ok
    std::int32_t first_failure;       // index of the first failing vector, -1 when none
    real max_abs_deviation;           // largest |got - want| over finite deviations
    real max_rel_deviation;           // largest |got - want| / max(1, |want|) over finite deviations
    result first_bad_result;          // the first result other than ok, ok when none
    bool build_conditions_hold;       // build_conditions_hold(): false means this build's bits may
                                      // differ from other targets' (FMA contraction, fast-math, ...)
}};

{}
self_test_report self_test(context& ctx, real tolerance) noexcept;

)",
                     stream ? "// Runs every golden observation through observe with `ctx` (resetting it where a\n"
                              "// golden sequence begins; overwriting its state, work and counters). A sensible\n"
                              "// tolerance on a target: 1e-4 for float32, 1e-10 for float64."
                            : "// Runs every golden vector through infer with `ctx` (overwriting its work and\n"
                              "// counters). A sensible tolerance on a target: 1e-4 for float32 (the target's\n"
                              "// math library and FMA contraction change the last bits), 1e-10 for float64.");
    h += fmt::format("}}  // namespace {}\n\n#endif  // MEANDER_GENERATED_{}_SELFTEST_HPP\n", name, M);

    std::vector<double> in, out;
    for (std::size_t v = 0; v < vectors; ++v) {
        const auto& x = opts.self_test_inputs[v];
        const auto& y = opts.self_test_outputs[v];
        for (int i = 0; i < model.input_size; ++i)
            in.push_back(static_cast<std::size_t>(i) < x.size() ? x[static_cast<std::size_t>(i)] : 0.0);
        for (int i = 0; i < model.output_size; ++i)
            out.push_back(static_cast<std::size_t>(i) < y.size() ? y[static_cast<std::size_t>(i)] : 0.0);
    }

    std::string c = emit_detail::banner(model, opts, name + "_selftest.cpp");
    c += fmt::format("#include \"{}_selftest.hpp\"\n\n#include <cmath>\n#include <cstddef>\n#include <cstdint>\n\n",
                     name);
    c += "// Constant data like the weights (see the attribute macro in " + name + ".cpp).\n";
    c += fmt::format("#ifndef {0}_WEIGHTS_ATTR\n#define {0}_WEIGHTS_ATTR\n#endif\n\n", M);
    c += fmt::format("namespace {} {{\n\nnamespace {{\n\n", name);
    c += fmt::format("// {} vectors x {} inputs\n", vectors, model.input_size);
    c += fmt::format("{}_WEIGHTS_ATTR const real golden_input[{}] = {{\n", M, in.size());
    c += emit_detail::array_rows(in, p);
    c += "};\n\n";
    c += fmt::format("// {} vectors x {} outputs\n", vectors, model.output_size);
    c += fmt::format("{}_WEIGHTS_ATTR const real golden_output[{}] = {{\n", M, out.size());
    c += emit_detail::array_rows(out, p);
    c += "};\n\n";
    std::string call = "infer(ctx, golden_input + v * input_size, got)";
    if (stream) {
        std::vector<double> gaps(opts.self_test_gaps.begin(), opts.self_test_gaps.begin() + static_cast<long>(vectors));
        c += fmt::format("// {} gaps, each since the observation before it (0 where a sequence begins)\n", vectors);
        c += fmt::format("{}_WEIGHTS_ATTR const real golden_gap[{}] = {{\n", M, vectors);
        c += emit_detail::array_rows(gaps, p);
        c += "};\n\n";
        c += "// where a sequence begins: observe after reset\n";
        c += fmt::format("{}_WEIGHTS_ATTR const bool golden_first[{}] = {{\n", M, vectors);
        for (std::size_t v = 0; v < vectors; ++v)
            c += fmt::format("{}{}{}", v % 8 == 0 ? "    " : "", opts.self_test_first[v] ? "true," : "false,",
                             (v + 1) % 8 == 0 || v + 1 == vectors ? "\n" : " ");
        c += "};\n\n";
        call = "observe(ctx, golden_input + v * input_size, golden_gap[v], got)";
    }
    c += "}  // namespace\n\n";
    c += fmt::format(R"(self_test_report self_test(context& ctx, real tolerance) noexcept {{
    self_test_report rep{{0u, 0u, -1, {0}, {0}, result::ok, build_conditions_hold()}};
    real got[output_size] = {{}};
    for (std::size_t v = 0; v < self_test_vectors; ++v) {{
        ++rep.vectors_run;{3}
        const result r = {4};
        bool failed = r != result::ok;
        if (failed && rep.first_bad_result == result::ok) rep.first_bad_result = r;
        for (std::size_t i = 0; i < output_size && r == result::ok; ++i) {{
            const real want = golden_output[v * output_size + i];
            const real dev = std::fabs(got[i] - want);
            const real scale = std::fabs(want) > {1} ? std::fabs(want) : {1};
            const real rel = dev / scale;
            if (dev > rep.max_abs_deviation) rep.max_abs_deviation = dev;
            if (rel > rep.max_rel_deviation) rep.max_rel_deviation = rel;
            if (!(dev <= tolerance * scale)) failed = true;  // NaN fails too
        }}
        if (failed) {{
            ++rep.failures;
            if (rep.first_failure < 0) rep.first_failure = static_cast<std::int32_t>(v);
        }}
    }}
    return rep;
}}

}}  // namespace {2}
)",
                     L(0), L(1), name, stream ? "\n        if (golden_first[v]) reset(ctx);" : "", call);
    return {EmittedFile{name + "_selftest.hpp", h}, EmittedFile{name + "_selftest.cpp", c}};
}

}  // namespace meander
