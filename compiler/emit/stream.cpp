// Emit for streaming models: NAME.hpp and NAME.cpp with a context that holds
// the state, reset(ctx) and observe(ctx, input, gap, output). Built from the
// plain emitter's parts over the lowered plan (compiler/lower.cpp, StreamPlan):
// the same weight tables, dense kernels, activation kernels, chains (residual
// and continuous blocks) and integrators (fixed-step or adaptive, the interval
// [0, gap] given at run time); this file adds the header's streaming contract,
// the blend and the GRU cell, and observe. DEVELOPERS.md "Streaming emitted
// API" lists the contract.
#include <fmt/format.h>

#include <iterator>

#include "../../runtime/stream.hpp"
#include "render.hpp"

namespace meander {

namespace emit_detail {

namespace {

std::string stream_header(const Emission& e) {
    const Model& m = e.model;
    const Stream& st = *m.stream;
    const std::string M_ = e.M();
    const std::string real = e.real_name();
    std::string o = banner(m, e.opts, m.name + ".hpp");
    o += fmt::format("#ifndef MEANDER_GENERATED_{0}_HPP\n#define MEANDER_GENERATED_{0}_HPP\n\n", M_);
    o += "// Shared by this header and its source from the same meander run; the source refuses\n";
    o += "// any other header.\n";
    o += fmt::format("#define {}_MEANDER_STAMP {}\n\n", M_, kStampHole);
    o += "#include <cstddef>\n#include <cstdint>\n\n";
    o += fmt::format("namespace {} {{\n\n", m.name);
    o += fmt::format("using real = {};\n\n", real);
    o += "// A streaming model: per observation, the state evolves over the gap since the previous\n";
    o += "// observation, is updated by the observation, and is read out.\n";
    o += fmt::format("constexpr std::size_t input_size = {};   // one observation\n", m.input_size);
    o += fmt::format("constexpr std::size_t output_size = {};\n", m.output_size);
    o += fmt::format("constexpr std::size_t state_size = {};   // carried between observations\n", st.state_size);
    o += fmt::format("constexpr real largest_gap = {};   // a gap outside [0, largest_gap] is refused\n\n",
                     e.L(st.largest_gap));
    o += "// Resources per observation, at the largest gap (the worst case), for static_assert in firmware.\n";
    o += "// workspace: reals in context::work (RAM, besides the state); parameters: weights and biases\n";
    o += "// (constant data, flash); MACs: multiply-accumulates of the dense layers only.\n";
    o += fmt::format("constexpr std::size_t workspace_size = {};\n", e.low.workspace_size);
    o += "constexpr std::size_t workspace_bytes = workspace_size * sizeof(real);\n";
    o += fmt::format("constexpr std::uint32_t parameter_count = {}u;\n", e.low.parameter_count);
    o += "constexpr std::size_t parameter_bytes = parameter_count * sizeof(real);\n";
    o += fmt::format("constexpr std::uint32_t macs_per_field_eval = {}u;   // one evaluation of every field\n",
                     e.low.macs_per_field_eval);
    o += fmt::format("constexpr std::uint32_t worst_field_evals = {}u;   // per observation\n",
                     e.low.worst_field_evals);
    o += fmt::format("constexpr std::uint64_t worst_macs = {}u;   // per observation\n\n", e.low.worst_macs);
    o += R"(// What observe returns. Only with ok does the output hold the model's result and the
// state move on; with any other code the state is exactly as before the call.
//   ok                the output holds the readout of the updated state.
//   input_not_finite  an observation value is NaN or infinite.
//   state_not_finite  the state or a layer's result became NaN or infinite.
//   step_limit        an adaptive evolution (or readout block) used up its max-steps
//                     attempts (accepted plus rejected) before the end of its interval.
//   step_too_small    an adaptive step fell below 10 units in the last place of t.
//   gap_out_of_range  the gap is negative, larger than largest_gap, or not finite.
enum class result : std::uint8_t { ok = 0, input_not_finite = 1, state_not_finite = 2, step_limit = 3, step_too_small = 4, gap_out_of_range = 5 };

// Work done by the last call of observe (reset at the start of every call), over the
// evolution and the readout's continuous blocks.
struct counters {
    std::uint32_t field_evals;
    std::uint32_t steps_accepted;
    std::uint32_t steps_rejected;
};

// Owned by the caller, one per stream (sensor, task). No heap, no global state.
struct context {
    real state[state_size];
    real work[workspace_size > 0 ? workspace_size : 1];
    counters count;
};

// Starts a new sequence: the state becomes zero.
void reset(context& ctx) noexcept;

// One observation input[0 .. input_size), `gap` time units after the previous one
// (0 for the first observation after reset), into output[0 .. output_size).
// input and output must not overlap.
result observe(context& ctx, const real* input, real gap, real* output) noexcept;

// "ok", "gap_out_of_range", ... (the enumerator's name).
const char* result_name(result r) noexcept;

// True when this build keeps the conditions for identical bits on every core (no FMA
// contraction, rounding to nearest, subnormals kept).
bool build_conditions_hold() noexcept;

)";
    if (const auto& s = m.input_info.standardised)
        o += fmt::format("// observe standardises the observation before the update: (input[i] - mean[i]) / scale[i],\n"
                         "// mean and scale from {}; the cell sees only standardised values. A standardised\n"
                         "// value that is not finite returns state_not_finite.\n",
                         s->mean_tensor.empty() ? "the description" : "the weights file");
    if (const auto& s = m.output_info.standardised)
        o += fmt::format("// observe writes the readout's y[i] as y[i] * scale[i] + mean[i] into output[i] (mean\n"
                         "// and scale from {}): the output is in the units of the training targets (checked\n"
                         "// for finiteness like a layer's result).\n",
                         s->mean_tensor.empty() ? "the description" : "the weights file");
    if (m.input_info.standardised || m.output_info.standardised) o += "\n";
    o += fmt::format("}}  // namespace {}\n", m.name);
    o += fmt::format("\n#endif  // MEANDER_GENERATED_{}_HPP\n", M_);
    return o;
}

std::string call_dense(const Emission& e, const Dense& d, const std::string& x, const std::string& y) {
    return fmt::format("    dense_{}({}, {}{});\n", layer_symbol(e.model, d), x, d.time_input ? "t, " : "", y);
}

// The closed-form cell (Hasani et al. 2022, eq. 10): h = s g + (1 - s) k,
// s = sigmoid(-f gap), the heads reading the backbone's output; as
// runtime/stream.cpp blend_evolve (the layers see t = 0).
std::string blend_function(const Emission& e) {
    const StreamPlan& sp = *e.low.stream;
    const Continuous& c = e.model.stream->evolve;
    const std::size_t heads = c.field.size() - 3;
    bool with_t = false;
    for_each_dense(c.field, [&](const Dense& d) { with_t = with_t || d.time_input; });
    std::string o = "// The closed-form cell (Hasani et al. 2022, eq. 10): h = s g + (1 - s) k, s = sigmoid(-f gap).\n";
    o += "void blend(real* work, real* h, real gap) noexcept {\n";
    if (with_t) o += fmt::format("    constexpr real t = {};\n", e.L(0));
    const std::string bb = heads == 0 ? "h" : fmt::format("work + {}", sp.bb);
    render_chain(e, o, sp.backbone, "h", bb, "    ", false);
    o += fmt::format("    real* const f = work + {};\n    real* const g = work + {};\n    real* const k = work + {};\n", sp.f,
                     sp.g, sp.k);
    o += call_dense(e, c.field[heads].dense, bb, "f");
    o += call_dense(e, c.field[heads + 1].dense, bb, "g");
    o += call_dense(e, c.field[heads + 2].dense, bb, "k");
    o += fmt::format("    for (std::size_t i = 0; i < state_size; ++i) {{\n");
    o += "        const real s = act_sigmoid(-f[i] * gap);\n";
    o += fmt::format("        h[i] = s * g[i] + ({} - s) * k[i];\n    }}\n", e.L(1));
    return o + "}\n\n";
}

std::string observe_function(const Emission& e) {
    const Model& m = e.model;
    const Stream& st = *m.stream;
    const StreamPlan& sp = *e.low.stream;
    const std::string M_ = e.M();
    std::string o;
    o += fmt::format("void reset(context& ctx) noexcept {{\n    for (std::size_t i = 0; i < state_size; ++i) ctx.state[i] = {};\n}}\n\n",
                     e.L(0));
    o += "result observe(context& ctx, const real* input, real gap, real* output) noexcept {\n";
    o += "    ctx.count = counters{0u, 0u, 0u};\n";
    o += fmt::format("    if (!(gap >= {}) || !(gap <= largest_gap)) return result::gap_out_of_range;  // NaN fails both\n",
                     e.L(0));
    o += "    for (std::size_t i = 0; i < input_size; ++i)\n";
    o += "        if (!std::isfinite(input[i])) return result::input_not_finite;\n";
    // Standardisation as DEVELOPERS.md "Operation order" states it, where runtime/stream does it.
    std::string in = "input";
    if (m.input_info.standardised) {
        in = "standardised";
        o += "    real standardised[input_size];\n";
        o += "    for (std::size_t i = 0; i < input_size; ++i) standardised[i] = (input[i] - input_mean[i]) / input_scale[i];\n";
        o += "    if (!all_finite(standardised, input_size)) return result::state_not_finite;\n";
    }
    o += "    // The new state is built in the workspace and copied to the context only when the\n";
    o += "    // call succeeds: on any other result the state is as it was.\n";
    o += "    real* const work = ctx.work;\n";
    o += fmt::format("    real* const h = work + {};\n", sp.h);
    o += "    for (std::size_t i = 0; i < state_size; ++i) h[i] = ctx.state[i];\n";
    const Continuous& c = st.evolve;
    o += fmt::format("    {}_BLOCK_HOOK(\"{}\", 0);\n", M_, c.name);
    if (c.blend) {
        o += "    blend(work, h, gap);\n";
    } else {
        o += fmt::format("    if (gap > {}) {{  // no step over a gap of 0, as eval\n", e.L(0));
        o += fmt::format("        const result r = block_{}(work, h, h, gap, ctx.count);\n        if (r != result::ok) return r;\n", c.name);
        o += "    }\n";
    }
    o += fmt::format("    {}_BLOCK_HOOK(\"{}\", 1);\n", M_, c.name);
    o += "    if (!all_finite(h, state_size)) return result::state_not_finite;\n";
    o += fmt::format("    {}_BLOCK_HOOK(\"{}\", 0);\n", M_, st.update_name);
    if (st.update == Stream::Update::gated) {
        o += "    // GRU cell (PyTorch GRUCell; gates r, z, n).\n";
        o += fmt::format("    real* const gi = work + {};\n    real* const gh = work + {};\n", sp.gi, sp.gh);
        o += call_dense(e, st.update_layers[0].dense, in, "gi");
        o += call_dense(e, st.update_layers[1].dense, "h", "gh");
        o += "    for (std::size_t i = 0; i < state_size; ++i) {\n";
        o += "        const real rg = act_sigmoid(gi[i] + gh[i]);\n";
        o += "        const real zg = act_sigmoid(gi[state_size + i] + gh[state_size + i]);\n";
        o += "        const real ng = act_tanh(gi[2 * state_size + i] + rg * gh[2 * state_size + i]);\n";
        o += fmt::format("        h[i] = ({} - zg) * ng + zg * h[i];\n    }}\n", e.L(1));
    } else {
        o += "    // Merge: a dense layer on [h; input].\n";
        o += fmt::format("    real* const hx = work + {};\n", sp.hx);
        o += "    for (std::size_t i = 0; i < state_size; ++i) hx[i] = h[i];\n";
        o += fmt::format("    for (std::size_t i = 0; i < input_size; ++i) hx[state_size + i] = {}[i];\n", in);
        o += call_dense(e, st.update_layers[0].dense, "hx", "h");
    }
    o += fmt::format("    {}_BLOCK_HOOK(\"{}\", 1);\n", M_, st.update_name);
    o += "    if (!all_finite(h, state_size)) return result::state_not_finite;\n";
    if (e.low.top.ops.empty()) o += "    for (std::size_t i = 0; i < output_size; ++i) output[i] = h[i];\n";
    render_chain(e, o, e.low.top, "h", "output", "    ", true);
    if (m.output_info.standardised) {
        o += "    for (std::size_t i = 0; i < output_size; ++i) output[i] = output[i] * output_scale[i] + output_mean[i];\n";
        o += "    if (!all_finite(output, output_size)) return result::state_not_finite;\n";
    }
    o += "    for (std::size_t i = 0; i < state_size; ++i) ctx.state[i] = h[i];\n";
    o += "    return result::ok;\n}\n\n";
    return o;
}

std::string stream_source(const Emission& e, const std::string& stamp, const std::string& c_stamp) {
    const Model& m = e.model;
    const std::string M_ = e.M();
    std::string o = banner(m, e.opts, m.name + ".cpp");
    o += fmt::format("#include \"{}.hpp\"\n\n#include <cmath>\n#include <cstddef>\n#include <cstdint>\n{}\n", m.name,
                     e.p == Precision::float32 ? "#include <cstring>\n" : "");
    o += render_dense_includes(e);
    o += fmt::format("#if !defined({0}_MEANDER_STAMP) || {0}_MEANDER_STAMP != {1}\n", M_, stamp);
    o += fmt::format("#error \"{}.hpp is not the header generated with this source: regenerate both\"\n#endif\n\n", m.name);
    o += fmt::format("static_assert(sizeof({}::real) == {}, \"real has the width this code was generated for\");\n",
                     m.name, e.p == Precision::float32 ? 4 : 8);
    o += "\n";
    o += fmt::format("// Weights are constant data (flash); define {0}_WEIGHTS_ATTR to place them in a section,\n"
                     "// e.g. -D'{0}_WEIGHTS_ATTR=__attribute__((section(\".rodata.{1}\")))'\n"
                     "#ifndef {0}_WEIGHTS_ATTR\n#define {0}_WEIGHTS_ATTR\n#endif\n\n",
                     M_, m.name);
    o += fmt::format("// Called around the evolution, the update and every top-level readout block of observe\n"
                     "// with the part's name (a string literal) and phase 0 before, 1 after it (not after a\n"
                     "// part that fails), e.g. to read a cycle counter on the target.\n"
                     "#ifndef {0}_BLOCK_HOOK\n#define {0}_BLOCK_HOOK(name, phase) static_cast<void>(0)\n#endif\n\n",
                     M_);
    o += fmt::format("namespace {} {{\n\nnamespace {{\n\n", m.name);
    o += render_weights(e);
    o += render_standardisation_tables(e);
    o += render_activations(e);
    o += "bool all_finite(const real* v, std::size_t n) noexcept {\n"
         "    for (std::size_t i = 0; i < n; ++i)\n"
         "        if (!std::isfinite(v[i])) return false;\n"
         "    return true;\n"
         "}\n\n";
    o += render_dense_layers(e);
    for (const ContinuousPlan* cp : continuous_plans(e.low)) o += render_continuous(e, *cp);
    if (m.stream->evolve.blend) o += blend_function(e);
    o += "}  // namespace\n\n";
    o += observe_function(e);
    o += render_result_name(true);
    o += render_build_check(e.p);
    o += fmt::format("}}  // namespace {}\n", m.name);
    if (e.opts.c_header) o += render_c_entry(e, c_stamp);
    return o;
}

}  // namespace

}  // namespace emit_detail

std::vector<EmittedFile> emit_stream(const Model& model, const EmitOptions& opts) {
    using namespace emit_detail;
    const Emission e(model, opts);
    const std::string hpp = stream_header(e);
    const std::string h = opts.c_header ? render_c_header(e) : std::string();
    std::vector<EmittedFile> files;
    files.push_back({model.name + ".hpp", finish_header(hpp)});
    files.push_back({model.name + ".cpp", stream_source(e, stamp_of(hpp), opts.c_header ? stamp_of(h) : std::string())});
    if (opts.c_header) files.push_back({model.name + ".h", finish_header(h)});
    if (!opts.self_test_inputs.empty()) {
        std::vector<EmittedFile> st = emit_self_test(model, opts);
        files.insert(files.end(), std::make_move_iterator(st.begin()), std::make_move_iterator(st.end()));
    }
    return files;
}

}  // namespace meander
