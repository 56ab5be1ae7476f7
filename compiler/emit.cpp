// Emit: renders NAME.hpp and NAME.cpp from the lowered plan. Every choice of
// the emitted integrator mirrors runtime/integrate.cpp step for step (same
// order of operations where it matters for accept/reject decisions), so the
// counters of emitted code equal the reference evaluator's in double mode.
#include "emit.hpp"

#include <fmt/format.h>

#include <algorithm>
#include <cmath>
#include <iterator>
#include <set>

#include "../runtime/integrate.hpp"
#include "format.hpp"
#include "lower.hpp"
#include "selftest.hpp"
#include "source.hpp"

#ifndef MEANDER_VERSION
#define MEANDER_VERSION "unknown"
#endif

namespace meander {

namespace emit_detail {

std::string real_literal(double v, Precision p) {
    std::string s;
    if (p == Precision::float32) {
        const float f = static_cast<float>(v);
        if (std::isinf(f)) return f > 0 ? "HUGE_VALF" : "(-HUGE_VALF)";
        s = fmt::format("{}", f);
    } else {
        if (std::isinf(v)) return v > 0 ? "HUGE_VAL" : "(-HUGE_VAL)";
        s = fmt::format("{}", v);
    }
    // "1" is an integer literal and "1f" no literal at all: make it "1.0".
    if (s.find_first_of(".eE") == std::string::npos) s += ".0";
    if (p == Precision::float32) s += 'f';
    return s;
}

std::string macro_prefix(const std::string& model_name) {
    std::string s;
    for (char ch : model_name) s += (ch >= 'a' && ch <= 'z') ? static_cast<char>(ch - 'a' + 'A') : ch;
    return s;
}

std::string real_type(Precision p) { return p == Precision::float32 ? "float" : "double"; }

std::string version_of(const EmitOptions& opts) {
    return opts.meander_version.empty() ? std::string(MEANDER_VERSION) : opts.meander_version;
}

std::string array_rows(const std::vector<double>& values, Precision p, int per_row) {
    std::string out;
    for (std::size_t i = 0; i < values.size(); ++i) {
        if (i % static_cast<std::size_t>(per_row) == 0) out += "    ";
        out += real_literal(values[i], p);
        out += ',';
        const bool end_of_row = (i + 1) % static_cast<std::size_t>(per_row) == 0 || i + 1 == values.size();
        out += end_of_row ? '\n' : ' ';
    }
    return out;
}

namespace {

void banner_blocks(std::string& o, const std::vector<Block>& blocks) {
    for (const Block& b : blocks) {
        if (b.kind != Block::Kind::continuous) continue;
        const Continuous& c = b.continuous;
        const SolverSpec& s = c.solver;
        const Tableau* tb = find_tableau(s.method);
        if (tb == nullptr) continue;
        const bool adaptive = tb->adaptive() && s.steps == 0;
        o += fmt::format("// continuous {}: state {} ({} + augment {}), t from {} to {}\n", c.name, c.state(), c.width,
                         c.augment, format_double(c.t0), format_double(c.t1));
        o += fmt::format("//   method: {} (`{}`); coefficients from {}\n", tb->title, tb->key, tb->source);
        if (tb->adaptive())
            o += fmt::format("//   order {}, embedded order {}, {} stages, {}\n", tb->order, tb->embedded_order,
                             tb->stages, tb->fsal ? "FSAL (last stage = f(t + h, y_new))" : "not FSAL");
        else
            o += fmt::format("//   order {}, {} stages, not FSAL\n", tb->order, tb->stages);
        if (!adaptive) {
            o += fmt::format("//   fixed step: {} steps, h = (T1 - T0)/{} = {}; step i starts at t_i = T0 + i*h\n",
                             s.steps, s.steps, format_double((c.t1 - c.t0) / s.steps));
            o += fmt::format("//   (from the index, never accumulated); {} field evaluations\n",
                             static_cast<long>(s.steps) * tb->stages);
        } else {
            const int k = tb->embedded_order + 1;
            o += fmt::format("//   adaptive: rtol {}, atol {}, max-steps {} (attempted steps: accepted + rejected)\n",
                             format_double(s.rtol), format_double(s.atol), s.max_steps);
            if (s.first_step > 0.0)
                o += fmt::format("//   first step: {} (given)\n", format_double(s.first_step));
            else
                o += "//   first step: automatic (HNW I, II.4; SciPy 1.10 select_initial_step), 1 field evaluation\n";
            o += "//   error norm: err = rms_i(e_i / sc_i), e = h*sum_j E_j k_j (E = b - b_hat),\n";
            o += "//     sc_i = atol + rtol*max(|y_i|, |y_new_i|); accept when err < 1\n";
            o += "//   each step starts with |h| raised to 10*|nextafter(t, T1) - t| at least\n";
            if (s.controller == Controller::integral)
                o += fmt::format("//   controller: integral, factor = min(max-factor, safety*err^(-1/{})), max-factor "
                                 "when err = 0\n",
                                 k);
            else
                o += fmt::format("//   controller: PI, factor = safety*err^(-pi-alpha/{})*err_prev^(pi-beta/{}) in "
                                 "[min-factor, max-factor]; err_prev = max(err, 1e-4), from 1e-4; pi-alpha {}, "
                                 "pi-beta {}\n",
                                 k, k, format_double(s.pi_alpha), format_double(s.pi_beta));
            o += fmt::format("//   safety {}, min-factor {}, max-factor {}; after a rejection in the same step the\n",
                             format_double(s.safety), format_double(s.min_factor), format_double(s.max_factor));
            o += fmt::format("//   factor is at most 1; a rejection scales |h| by max(min-factor, safety*err^(-1/{}))\n",
                             k);
            o += fmt::format("//   worst case: {} field evaluations\n", worst_field_evals(s));
        }
        if (c.trained) {
            // The whole training discretisation, so a review can see it is the deployed one.
            const bool same = format_solver(*c.trained) == format_solver(s);
            o += fmt::format("//   trained with: {}\n//     ({})\n", format_solver(*c.trained),
                             same ? "the deployed solver" : "DIFFERS from the deployed solver");
        }
    }
}

}  // namespace

std::string banner(const Model& model, const EmitOptions& opts, std::string_view file_name) {
    std::string o;
    o += fmt::format("// {}: generated by meander {}. Do not edit: regenerate from the description.\n", file_name,
                     version_of(opts));
    o += fmt::format("// model: {}\n", model.name);
    o += fmt::format("// content hash (description and weights): {}\n",
                     opts.content_hash.empty() ? std::string("not given") : opts.content_hash);
    o += fmt::format("// precision: {} (real = {})\n", opts.precision == Precision::float32 ? "float32" : "float64",
                     real_type(opts.precision));
    banner_blocks(o, model.blocks);
    o += "// Caution: this code is not certified for use in safety functions. Where its outputs can\n";
    o += "// hurt people, follow the applicable functional safety standard and have it qualified and\n";
    o += "// reviewed.\n";
    return o;
}

}  // namespace emit_detail

namespace {

using emit_detail::real_literal;

bool chain_uses_work(const Chain& c) {
    for (const ChainOp& op : c.ops) {
        if (op.src.kind == Slot::Kind::work || op.dst.kind == Slot::Kind::work) return true;
        if (op.block->kind == Block::Kind::residual && chain_uses_work(op.body)) return true;
        if (op.block->kind == Block::Kind::continuous) return true;
    }
    return false;
}

bool blocks_use_time(const std::vector<Block>& blocks) {
    bool uses = false;
    for_each_dense(blocks, [&](const Dense& d) { uses = uses || d.time_input; });
    return uses;
}

// ---------------------------------------------------------------------------

class Emitter {
public:
    Emitter(const Model& m, const EmitOptions& o) : model_(m), opts_(o), p_(o.precision), low_(lower_model(m, p_)) {}

    std::vector<EmittedFile> run() {
        const std::string hpp = header();
        const std::string cpp = source(stamp_of(hpp));
        std::vector<EmittedFile> files;
        files.push_back({model_.name + ".hpp", finish_header(hpp)});
        files.push_back({model_.name + ".cpp", cpp});
        return files;
    }

private:
    const Model& model_;
    const EmitOptions& opts_;
    Precision p_;
    Lowered low_;

    std::string L(double v) const { return real_literal(v, p_); }
    std::string M() const { return emit_detail::macro_prefix(model_.name); }
    std::string real_name() const { return emit_detail::real_type(p_); }

    // The header carries a stamp that the source checks, so a header and a
    // source from different runs never build together. The stamp hashes the
    // header's own text, taken with kStampHole standing where the stamp then goes.
    static constexpr const char* kStampHole = "@STAMP@";
    static std::string stamp_of(const std::string& hpp) { return fmt::format("0x{:016x}ULL", fnv1a64(hpp)); }
    std::string finish_header(std::string hpp) const {
        const std::string stamp = stamp_of(hpp);
        hpp.replace(hpp.find(kStampHole), std::string(kStampHole).size(), stamp);
        return hpp;
    }

    std::size_t context_bytes() const {
        const std::size_t r = p_ == Precision::float32 ? 4 : 8;
        const std::size_t work = std::max<std::size_t>(low_.workspace_size, 1) * r;
        const std::size_t raw = work + 3 * 4;  // counters: three uint32
        return (raw + r - 1) / r * r;
    }

    // -----------------------------------------------------------------------
    std::string header() const {
        const std::string M_ = M();
        const std::string real = real_name();
        std::string o = emit_detail::banner(model_, opts_, model_.name + ".hpp");
        o += fmt::format("#ifndef MEANDER_GENERATED_{}_HPP\n#define MEANDER_GENERATED_{}_HPP\n\n", M_, M_);
        o += "// Shared by this header and its source from the same meander run; the source refuses\n";
        o += "// any other header.\n";
        o += fmt::format("#define {}_MEANDER_STAMP {}\n\n", M_, kStampHole);
        if (opts_.c_api) {
            o += "// For C callers: the context is an opaque block of this many bytes, aligned to\n";
            o += fmt::format("// {}_CONTEXT_ALIGN (the source checks both against sizeof/alignof(context)).\n", M_);
            o += fmt::format("#define {}_CONTEXT_BYTES {}u\n", M_, context_bytes());
            o += fmt::format("#define {}_CONTEXT_ALIGN {}u\n\n", M_, p_ == Precision::float32 ? 4 : 8);
            o += "#ifdef __cplusplus\n";
        }
        o += "#include <cstddef>\n#include <cstdint>\n\n";
        o += fmt::format("namespace {} {{\n\n", model_.name);
        o += fmt::format("using real = {};\n\n", real);
        o += "// Sizes of one input and one output vector, in reals.\n";
        o += fmt::format("inline constexpr std::size_t input_size = {};\n", model_.input_size);
        o += fmt::format("inline constexpr std::size_t output_size = {};\n\n", model_.output_size);
        o += "// Resources, as compile-time constants for static_assert in firmware.\n";
        o += "// workspace: reals in context::work (RAM); parameters: weights and biases (constant\n";
        o += "// data, flash); MACs: multiply-accumulates of the dense layers only; field evaluations:\n";
        o += "// over all continuous blocks, for the worst case the step limits allow.\n";
        o += fmt::format("inline constexpr std::size_t workspace_size = {};\n", low_.workspace_size);
        o += "inline constexpr std::size_t workspace_bytes = workspace_size * sizeof(real);\n";
        o += fmt::format("inline constexpr std::uint32_t parameter_count = {}u;\n", low_.parameter_count);
        o += "inline constexpr std::size_t parameter_bytes = parameter_count * sizeof(real);\n";
        o += fmt::format("inline constexpr std::uint32_t macs_per_field_eval = {}u;  // one evaluation of every field\n",
                         low_.macs_per_field_eval);
        o += fmt::format("inline constexpr std::uint32_t worst_field_evals = {}u;\n", low_.worst_field_evals);
        o += fmt::format("inline constexpr std::uint64_t worst_macs = {}u;  // one inference, worst case\n\n",
                         low_.worst_macs);
        o += R"(// What infer returns. Only with ok does the output hold the model's result;
// with any other code its contents are unspecified (it may be partly written).
//   ok                the output holds the model's result.
//   input_not_finite  an input value is NaN or infinite; nothing was computed.
//   state_not_finite  a layer's result or a continuous block's state became NaN or
//                     infinite (checked after every top-level layer, every fixed step
//                     and every accepted adaptive step).
//   step_limit        an adaptive block used up its max-steps attempts before reaching
//                     the end of its interval. max-steps counts attempted steps:
//                     accepted plus rejected.
//   step_too_small    an adaptive block's step fell below 10 units in the last place
//                     of t: the field is too stiff or too rough for the tolerances.
enum class result : std::uint8_t { ok = 0, input_not_finite = 1, state_not_finite = 2, step_limit = 3, step_too_small = 4 };

// Work done by the last call of infer, summed over the continuous blocks
// (reset at the start of every call; valid whatever the result).
//   field_evals     evaluations of a field f(h, t), including the evaluation at the
//                   start and, for an automatic first step, the one that chooses it.
//   steps_taken     accepted steps (for a fixed-step block: every step).
//   steps_rejected  attempted adaptive steps whose error norm was not below 1.
struct counters {
    std::uint32_t field_evals;
    std::uint32_t steps_taken;
    std::uint32_t steps_rejected;
};

// Everything infer writes: owned by the caller (static, on the stack or in a
// pool). No heap, no global state: infer is reentrant with one context per
// caller (thread, task, interrupt level). It uses FPU registers: an interrupt
// handler that calls it must have the FPU context saved (lazy stacking on a
// Cortex-M4F does this when enabled). Build without -ffast-math: the
// non-finite checks rely on IEEE comparisons. Cores that flush denormals to
// zero may differ from the host in the last bits near zero.
struct context {
    real work[workspace_size > 0 ? workspace_size : 1];
    counters count;
};

// Runs the model on input[0 .. input_size) into output[0 .. output_size).
// input and output must not overlap.
result infer(context& ctx, const real* input, real* output) noexcept;

// "ok", "input_not_finite", ... (the enumerator's name).
const char* result_name(result r) noexcept;

)";
        o += fmt::format("}}  // namespace {}\n", model_.name);
        if (opts_.c_api) {
            o += "\nextern \"C\" {\n";
            o += "#define " + M_ + "_NOEXCEPT noexcept\n";
            o += "#else\n";
            o += "#define " + M_ + "_NOEXCEPT\n";
            o += "#endif\n\n";
            o += fmt::format("// C entry point: `context` points to {0}_CONTEXT_BYTES bytes aligned to\n", M_);
            o += fmt::format("// {}_CONTEXT_ALIGN, owned by the caller. Returns the result code as an int\n", M_);
            o += "// (0 ok, 1 input_not_finite, 2 state_not_finite, 3 step_limit, 4 step_too_small).\n";
            o += fmt::format("int {}_infer(void* context, const {}* input, {}* output) {}_NOEXCEPT;\n", model_.name,
                             real, real, M_);
            o += "\n#ifdef __cplusplus\n}  // extern \"C\"\n#endif\n";
        }
        o += fmt::format("\n#endif  // MEANDER_GENERATED_{}_HPP\n", M_);
        return o;
    }

    // -----------------------------------------------------------------------
    std::string source(const std::string& stamp) const {
        const std::string M_ = M();
        std::string o = emit_detail::banner(model_, opts_, model_.name + ".cpp");
        o += fmt::format("#include \"{}.hpp\"\n\n#include <cmath>\n#include <cstddef>\n#include <cstdint>\n\n",
                         model_.name);
        o += fmt::format("#if !defined({}_MEANDER_STAMP) || {}_MEANDER_STAMP != {}\n", M_, M_, stamp);
        o += fmt::format("#error \"{}.hpp is not the header generated with this source: regenerate both\"\n#endif\n\n",
                         model_.name);
        if (p_ == Precision::float32) {
            o += "static_assert(sizeof(float) == 4, \"this code needs a 32-bit IEEE float\");\n";
            o += fmt::format("static_assert(sizeof({}::real) == 4, \"real must be float\");\n", model_.name);
        } else {
            o += "static_assert(sizeof(double) == 8, \"this code needs a 64-bit IEEE double\");\n";
            o += fmt::format("static_assert(sizeof({}::real) == 8, \"real must be double\");\n", model_.name);
        }
        if (opts_.c_api) {
            o += fmt::format("static_assert(sizeof({}::context) == {}_CONTEXT_BYTES, \"context size\");\n",
                             model_.name, M_);
            o += fmt::format("static_assert(alignof({}::context) <= {}_CONTEXT_ALIGN, \"context alignment\");\n",
                             model_.name, M_);
        }
        o += "\n";
        o += "// Weights are constant data: with no attribute the linker keeps them in flash. Define\n";
        o += fmt::format("// {}_WEIGHTS_ATTR to place them in a section of your own, e.g.\n", M_);
        o += fmt::format("//   -D'{}_WEIGHTS_ATTR=__attribute__((section(\".rodata.{}\")))'\n", M_, model_.name);
        o += fmt::format("#ifndef {}_WEIGHTS_ATTR\n#define {}_WEIGHTS_ATTR\n#endif\n\n", M_, M_);
        // A zero-cost default; firmware defines it to read a cycle counter per block.
        o += fmt::format("// Called around every top-level block of infer with the block's name (a string\n"
                         "// literal) and phase 0 before, 1 after it (not after a block that fails). Define\n"
                         "// it to measure each block on the target, e.g. with the DWT cycle counter of a\n"
                         "// Cortex-M3/M4/M7: -D'{0}_BLOCK_HOOK(name, phase)=my_cycle_mark(name, phase)'\n"
                         "#ifndef {0}_BLOCK_HOOK\n#define {0}_BLOCK_HOOK(name, phase) static_cast<void>(0)\n#endif\n\n",
                         M_);
        o += fmt::format("namespace {} {{\n\nnamespace {{\n\n", model_.name);
        o += weights();
        o += activations();
        if (needs_all_finite())
            o += "bool all_finite(const real* v, std::size_t n) noexcept {\n"
                 "    for (std::size_t i = 0; i < n; ++i)\n"
                 "        if (!std::isfinite(v[i])) return false;\n"
                 "    return true;\n"
                 "}\n\n";
        o += layers();
        for (const ContinuousPlan* cp : continuous_plans(low_)) o += continuous(*cp);
        o += "}  // namespace\n\n";
        o += infer_function();
        o += R"(const char* result_name(result r) noexcept {
    switch (r) {
    case result::ok: return "ok";
    case result::input_not_finite: return "input_not_finite";
    case result::state_not_finite: return "state_not_finite";
    case result::step_limit: return "step_limit";
    case result::step_too_small: return "step_too_small";
    }
    return "unknown";
}

)";
        o += fmt::format("}}  // namespace {}\n", model_.name);
        if (opts_.c_api) {
            const std::string real = real_name();
            o += fmt::format("\nextern \"C\" int {0}_infer(void* context, const {1}* input, {1}* output) noexcept {{\n"
                             "    return static_cast<int>({0}::infer(*static_cast<{0}::context*>(context), input, "
                             "output));\n}}\n",
                             model_.name, real);
        }
        return o;
    }

    bool needs_all_finite() const { return !model_.blocks.empty(); }

    // -----------------------------------------------------------------------
    std::string weights() const {
        std::string o;
        const std::string M_ = M();
        for_each_dense(model_.blocks, [&](const Dense& d) {
            const int cols = d.in_total();
            std::vector<double> w;
            w.reserve(static_cast<std::size_t>(d.out * cols));
            for (int r = 0; r < d.out; ++r)
                for (int c = 0; c < cols; ++c)
                    w.push_back(d.weight.size() == 0 ? 0.0 : d.weight(r, c));
            o += fmt::format("// {}: weight {} x {} (row-major, y = W x{} + b){}\n", d.name, d.out, cols,
                             d.time_input ? " with t as the last column of x" : "",
                             d.weight_tensor.empty() ? "" : fmt::format(", tensor \"{}\"", d.weight_tensor));
            o += fmt::format("{}_WEIGHTS_ATTR const real w_{}[{}] = {{\n", M_, d.name, w.size());
            o += emit_detail::array_rows(w, p_);
            o += "};\n";
            if (d.has_bias) {
                std::vector<double> b(d.bias.data(), d.bias.data() + d.bias.size());
                if (b.empty()) b.assign(static_cast<std::size_t>(d.out), 0.0);
                o += fmt::format("// {}: bias {}{}\n", d.name, d.out,
                                 d.bias_tensor.empty() ? "" : fmt::format(", tensor \"{}\"", d.bias_tensor));
                o += fmt::format("{}_WEIGHTS_ATTR const real b_{}[{}] = {{\n", M_, d.name, b.size());
                o += emit_detail::array_rows(b, p_);
                o += "};\n";
            }
            o += "\n";
        });
        return o;
    }

    std::string activations() const {
        std::set<Activation> used;
        for_each_dense(model_.blocks, [&](const Dense& d) { used.insert(d.act); });
        const bool f = p_ == Precision::float32;
        auto l = [&](double v) { return L(v); };
        std::string o;
        // The same stable forms as runtime/activation.cpp.
        for (Activation a : used) {
            switch (a) {
            case Activation::identity:
            case Activation::softmax: break;
            case Activation::relu:
                o += fmt::format("inline real act_relu(real x) noexcept {{ return x > {0} ? x : {0}; }}\n", l(0));
                break;
            case Activation::leaky_relu:
                o += fmt::format("inline real act_leaky_relu(real x, real slope) noexcept {{ return x >= {} ? x : "
                                 "slope * x; }}\n",
                                 l(0));
                break;
            case Activation::tanh: o += "inline real act_tanh(real x) noexcept { return std::tanh(x); }\n"; break;
            case Activation::sigmoid:
                o += fmt::format("// exp of a non-positive argument only: no overflow at either end.\n"
                                 "inline real act_sigmoid(real x) noexcept {{\n"
                                 "    if (x >= {0}) return {1} / ({1} + std::exp(-x));\n"
                                 "    const real ex = std::exp(x);\n"
                                 "    return ex / ({1} + ex);\n"
                                 "}}\n",
                                 l(0), l(1));
                break;
            case Activation::softplus:
                o += fmt::format("// max(x, 0) + log1p(exp(-|x|)): no overflow for large x.\n"
                                 "inline real act_softplus(real x) noexcept {{\n"
                                 "    return (x > {0} ? x : {0}) + std::log1p(std::exp(-std::fabs(x)));\n"
                                 "}}\n",
                                 l(0));
                break;
            case Activation::silu:
                o += fmt::format("inline real act_silu(real x) noexcept {{\n"
                                 "    if (x >= {0}) return x / ({1} + std::exp(-x));\n"
                                 "    const real ex = std::exp(x);\n"
                                 "    return x * ex / ({1} + ex);\n"
                                 "}}\n",
                                 l(0), l(1));
                break;
            case Activation::gelu:
                o += fmt::format("// tanh form (Hendrycks & Gimpel 2016); {} = sqrt(2/pi).\n"
                                 "inline real act_gelu(real x) noexcept {{\n"
                                 "    const real inner = {} * (x + {} * x * x * x);\n"
                                 "    return {} * x * ({} + std::tanh(inner));\n"
                                 "}}\n",
                                 f ? "0.7978845608f" : "0.7978845608028654", f ? "0.7978845608f" : "0.7978845608028654",
                                 l(0.044715), l(0.5), l(1));
                break;
            case Activation::elu:
                o += fmt::format("inline real act_elu(real x, real alpha) noexcept {{ return x > {} ? x : alpha * "
                                 "std::expm1(x); }}\n",
                                 l(0));
                break;
            }
        }
        if (!o.empty()) o += "\n";
        return o;
    }

    std::string apply_act(const Dense& d, const std::string& x) const {
        switch (d.act) {
        case Activation::identity:
        case Activation::softmax: return x;
        case Activation::relu: return "act_relu(" + x + ")";
        case Activation::leaky_relu: return fmt::format("act_leaky_relu({}, {})", x, L(d.act_param));
        case Activation::tanh: return "act_tanh(" + x + ")";
        case Activation::sigmoid: return "act_sigmoid(" + x + ")";
        case Activation::softplus: return "act_softplus(" + x + ")";
        case Activation::silu: return "act_silu(" + x + ")";
        case Activation::gelu: return "act_gelu(" + x + ")";
        case Activation::elu: return fmt::format("act_elu({}, {})", x, L(d.act_param));
        }
        return x;
    }

    std::string layers() const {
        std::string o;
        for_each_dense(model_.blocks, [&](const Dense& d) {
            const int cols = d.in_total();
            o += fmt::format("// dense {}: {}{} -> {}, {}\n", d.name, d.in, d.time_input ? " + t" : "", d.out,
                             activation_name(d.act));
            o += fmt::format("void dense_{}(const real* x, {}real* y) noexcept {{\n", d.name,
                             d.time_input ? "real t, " : "");
            o += fmt::format("    for (std::size_t o = 0; o < {}; ++o) {{\n", d.out);
            o += fmt::format("        const real* w = w_{} + o * {};\n", d.name, cols);
            o += d.has_bias ? fmt::format("        real acc = b_{}[o];\n", d.name)
                            : fmt::format("        real acc = {};\n", L(0));
            o += fmt::format("        for (std::size_t i = 0; i < {}; ++i) acc += w[i] * x[i];\n", d.in);
            if (d.time_input) o += fmt::format("        acc += w[{}] * t;\n", d.in);
            o += fmt::format("        y[o] = {};\n", apply_act(d, "acc"));
            o += "    }\n";
            if (d.act == Activation::softmax) {
                o += "    // Max-subtracted: exp never overflows and the largest term is 1.\n";
                o += "    real top = y[0];\n";
                o += fmt::format("    for (std::size_t o = 1; o < {}; ++o)\n        if (y[o] > top) top = y[o];\n",
                                 d.out);
                o += fmt::format("    real sum = {};\n", L(0));
                o += fmt::format("    for (std::size_t o = 0; o < {}; ++o) {{\n", d.out);
                o += "        y[o] = std::exp(y[o] - top);\n        sum += y[o];\n    }\n";
                o += fmt::format("    const real inv_sum = {} / sum;\n", L(1));
                o += fmt::format("    for (std::size_t o = 0; o < {}; ++o) y[o] *= inv_sum;\n", d.out);
            }
            o += "}\n\n";
        });
        return o;
    }

    // -----------------------------------------------------------------------
    // A chain's statements. `in`/`out` are the pointer expressions of the
    // chain's own input and output.
    static std::string slot_ptr(const Slot& s, const std::string& in, const std::string& out) {
        switch (s.kind) {
        case Slot::Kind::chain_in: return in;
        case Slot::Kind::chain_out: return out;
        case Slot::Kind::work: return fmt::format("work + {}", s.offset);
        }
        return in;
    }
    static std::string slot_at(const Slot& s, const std::string& in, const std::string& out) {
        switch (s.kind) {
        case Slot::Kind::chain_in: return in + "[i]";
        case Slot::Kind::chain_out: return out + "[i]";
        case Slot::Kind::work: return fmt::format("work[{} + i]", s.offset);
        }
        return in;
    }

    // `top`: the model's own chain (checks finiteness after every layer, as the
    // reference evaluator does, and runs continuous blocks).
    void chain(std::string& o, const Chain& c, const std::string& in, const std::string& out, const std::string& pad,
               bool top) const {
        for (const ChainOp& op : c.ops) {
            const std::string src = slot_ptr(op.src, in, out);
            const std::string dst = slot_ptr(op.dst, in, out);
            const Block& b = *op.block;
            const std::string& name = block_name(b);
            if (top) o += fmt::format("{}{}_BLOCK_HOOK(\"{}\", 0);\n", pad, M(), name);
            switch (b.kind) {
            case Block::Kind::dense:
                o += fmt::format("{}dense_{}({}, {}{});\n", pad, b.dense.name, src, b.dense.time_input ? "t, " : "",
                                 dst);
                break;
            case Block::Kind::residual:
                o += fmt::format("{}// residual {}: {} = x + g(x)\n", pad, b.residual.name, dst);
                chain(o, op.body, src, dst, pad, false);
                o += fmt::format("{}for (std::size_t i = 0; i < {}; ++i) {} += {};\n", pad, b.residual.width,
                                 slot_at(op.dst, in, out), slot_at(op.src, in, out));
                break;
            case Block::Kind::continuous:
                o += fmt::format("{}if (const result r = block_{}(work, {}, {}, ctx.count); r != result::ok) return r;\n",
                                 pad, b.continuous.name, src, dst);
                break;
            }
            if (top) o += fmt::format("{}{}_BLOCK_HOOK(\"{}\", 1);\n", pad, M(), name);
            if (top && b.kind != Block::Kind::continuous)
                o += fmt::format("{}if (!all_finite({}, {})) return result::state_not_finite;\n", pad, dst,
                                 op.out_width);
        }
    }

    std::string infer_function() const {
        std::string o;
        o += "result infer(context& ctx, const real* input, real* output) noexcept {\n";
        o += "    ctx.count = counters{0u, 0u, 0u};\n";
        o += "    for (std::size_t i = 0; i < input_size; ++i)\n";
        o += "        if (!std::isfinite(input[i])) return result::input_not_finite;\n";
        if (chain_uses_work(low_.top)) o += "    real* const work = ctx.work;\n";
        if (low_.top.ops.empty()) o += "    for (std::size_t i = 0; i < output_size; ++i) output[i] = input[i];\n";
        chain(o, low_.top, "input", "output", "    ", true);
        o += "    return result::ok;\n}\n\n";
        return o;
    }

    // -----------------------------------------------------------------------
    // Continuous blocks.

    static std::string coef_comment(const Coefficient& c) { return std::string(c.text); }

    // "c * k1[j] + d * k2[j]" over the non-zero weights w[offset .. offset+count).
    static std::string weighted_sum(const std::vector<std::string>& names, const std::vector<bool>& nonzero) {
        std::string s;
        for (std::size_t j = 0; j < names.size(); ++j) {
            if (!nonzero[j]) continue;
            if (!s.empty()) s += " + ";
            s += fmt::format("{} * k{}[j]", names[j], j + 1);
        }
        return s;
    }

    std::string continuous(const ContinuousPlan& cp) const {
        const Continuous& c = *cp.block;
        // check_model rejects unknown methods; should one get here, the output must not build.
        if (cp.tableau == nullptr)
            return fmt::format("#error \"continuous {}: unknown solver method '{}'\"\n\n", c.name, c.solver.method);
        const Tableau& tb = *cp.tableau;
        const std::string name = c.name;
        const std::size_t s = static_cast<std::size_t>(tb.stages);
        const bool field_work = chain_uses_work(cp.field);
        const bool field_time = blocks_use_time(c.field);
        std::string o;

        // The field.
        o += fmt::format("// The field of {}: dx = f(x, t); one call is one field evaluation.\n", name);
        o += fmt::format("void field_{}({}real {}, const real* x, real* dx, counters& count) noexcept {{\n", name,
                         field_work ? "real* work, " : "", field_time ? "t" : "/*t*/");
        o += "    ++count.field_evals;\n";
        chain(o, cp.field, "x", "dx", "    ", false);
        o += "}\n\n";
        auto call = [&](const std::string& t, const std::string& x, const std::string& dx) {
            return fmt::format("field_{}({}{}, {}, {}, count);", name, field_work ? "work, " : "", t, x, dx);
        };

        o += fmt::format("// continuous {}: {} ({}), state {} = {} + augment {}, t from {} to {}\n", name, tb.title,
                         tb.key, cp.n, c.width, c.augment, format_double(c.t0), format_double(c.t1));
        o += fmt::format("result block_{}(real* work, const real* in, real* out, counters& count) noexcept {{\n", name);
        o += fmt::format("    constexpr std::size_t n = {};\n", cp.n);
        o += fmt::format("    real* const y = work + {};\n", cp.y);
        for (std::size_t i = 0; i < s; ++i) o += fmt::format("    real* const k{} = work + {};\n", i + 1, cp.k[i]);
        // arg holds stage arguments, the automatic first step's Euler step and,
        // for an FSAL tableau run with fixed steps, the new state.
        bool arg_used = (cp.adaptive && c.solver.first_step <= 0.0) || (!cp.adaptive && tb.fsal && s > 1);
        for (std::size_t i = 1; i < s; ++i)
            for (std::size_t j = 0; j < i && !(tb.fsal && i == s - 1); ++j)
                arg_used = arg_used || tb.a_at(static_cast<int>(i), static_cast<int>(j)) != 0.0;
        if (arg_used) o += fmt::format("    real* const arg = work + {};\n", cp.arg);
        if (cp.adaptive) o += fmt::format("    real* const y_new = work + {};\n", cp.y_new);
        o += fmt::format("    constexpr real t0 = {};\n", L(c.t0));
        if (cp.adaptive) o += fmt::format("    constexpr real t1 = {};\n", L(c.t1));

        // Coefficients, exactly as runtime/tableau.hpp holds them.
        std::vector<std::string> bnames(s), enames(s);
        std::vector<bool> bnz(s), enz(s);
        o += fmt::format("    // {} coefficients ({}); zero entries are left out\n", tb.title, tb.source);
        for (std::size_t i = 1; i < s; ++i) {
            const bool last_fsal = tb.fsal && i == s - 1;
            // An FSAL method's last stage sits at t_new = t + h: no c needed.
            if (!last_fsal)
                o += fmt::format("    constexpr real c{} = {};  // {}\n", i + 1, L(tb.c[i].value), coef_comment(tb.c[i]));
            if (last_fsal) continue;  // the last row of A is b
            for (std::size_t j = 0; j < i; ++j) {
                const Coefficient& a = tb.a_coef(static_cast<int>(i), static_cast<int>(j));
                if (a.value != 0.0)
                    o += fmt::format("    constexpr real a{}{} = {};  // {}\n", i + 1, j + 1, L(a.value),
                                     coef_comment(a));
            }
        }
        for (std::size_t i = 0; i < s; ++i) {
            bnames[i] = fmt::format("b{}", i + 1);
            bnz[i] = tb.b[i].value != 0.0;
            if (bnz[i])
                o += fmt::format("    constexpr real b{} = {};  // {}\n", i + 1, L(tb.b[i].value), coef_comment(tb.b[i]));
        }
        if (cp.adaptive) {
            for (std::size_t i = 0; i < s; ++i) {
                enames[i] = fmt::format("e{}", i + 1);
                enz[i] = tb.e[i].value != 0.0;
                if (enz[i])
                    o += fmt::format("    constexpr real e{} = {};  // {} (b - b_hat)\n", i + 1, L(tb.e[i].value),
                                     coef_comment(tb.e[i]));
            }
        }
        o += fmt::format("    for (std::size_t i = 0; i < {}; ++i) y[i] = in[i];\n", c.width);
        if (c.augment > 0)
            o += fmt::format("    for (std::size_t i = {}; i < n; ++i) y[i] = {};  // augmented dimensions\n", c.width,
                             L(0));

        // Stages 2..s of one step from (t, y), k1 filled. Mirrors rk_step in
        // runtime/integrate.cpp: an FSAL method's last stage is f(t_new, y_new).
        auto stages = [&](const std::string& pad, const std::string& t_new, const std::string& y_new_buf) {
            std::string st;
            for (std::size_t i = 1; i < s; ++i) {
                const bool last_fsal = tb.fsal && i == s - 1;
                if (last_fsal) {
                    std::vector<std::string> names(bnames.begin(), bnames.begin() + static_cast<long>(s - 1));
                    std::vector<bool> nz(bnz.begin(), bnz.begin() + static_cast<long>(s - 1));
                    st += fmt::format("{}for (std::size_t j = 0; j < n; ++j) {}[j] = y[j] + h * ({});\n", pad,
                                      y_new_buf, weighted_sum(names, nz));
                    st += fmt::format("{}{}\n", pad, call(t_new, y_new_buf, fmt::format("k{}", s)));
                    continue;
                }
                std::vector<std::string> names;
                std::vector<bool> nz;
                for (std::size_t j = 0; j < i; ++j) {
                    names.push_back(fmt::format("a{}{}", i + 1, j + 1));
                    nz.push_back(tb.a_at(static_cast<int>(i), static_cast<int>(j)) != 0.0);
                }
                const std::string sum = weighted_sum(names, nz);
                std::string x = "arg";
                if (sum.empty())
                    x = "y";  // y + h*0 is y
                else
                    st += fmt::format("{}for (std::size_t j = 0; j < n; ++j) arg[j] = y[j] + h * ({});\n", pad, sum);
                st += fmt::format("{}{}\n", pad, call(fmt::format("t + c{} * h", i + 1), x, fmt::format("k{}", i + 1)));
            }
            return st;
        };

        if (!cp.adaptive) {
            const int N = c.solver.steps;
            o += fmt::format("    constexpr std::uint32_t steps = {}u;\n", N);
            o += fmt::format("    constexpr real h = {};  // (t1 - t0) / {}\n", L((c.t1 - c.t0) / N), N);
            o += "    for (std::uint32_t i = 0; i < steps; ++i) {\n";
            o += "        // From the index, never accumulated: no drift over many steps.\n";
            o += "        const real t = t0 + static_cast<real>(i) * h;\n";
            o += "        " + call("t", "y", "k1") + "\n";
            o += stages("        ", "t + h", "arg");
            if (tb.fsal && s > 1)
                o += "        for (std::size_t j = 0; j < n; ++j) y[j] = arg[j];\n";
            else
                o += fmt::format("        for (std::size_t j = 0; j < n; ++j) y[j] = y[j] + h * ({});\n",
                                 weighted_sum(bnames, bnz));
            o += "        ++count.steps_taken;\n";
            o += "        if (!all_finite(y, n)) return result::state_not_finite;\n";
            o += "    }\n";
        } else {
            adaptive_body(o, cp, stages, call, bnames, bnz, enames, enz);
        }
        o += "    for (std::size_t i = 0; i < n; ++i) out[i] = y[i];\n";
        o += "    return result::ok;\n}\n\n";
        return o;
    }

    template <class Stages, class Call>
    void adaptive_body(std::string& o, const ContinuousPlan& cp, Stages& stages, Call& call,
                       const std::vector<std::string>& bnames, const std::vector<bool>& bnz,
                       const std::vector<std::string>& enames, const std::vector<bool>& enz) const {
        const Continuous& c = *cp.block;
        const SolverSpec& sp = c.solver;
        const Tableau& tb = *cp.tableau;
        const std::size_t s = static_cast<std::size_t>(tb.stages);
        const int q = tb.embedded_order;
        const bool forward = c.t1 > c.t0;
        const bool pi = sp.controller == Controller::pi;
        const std::string plus = forward ? "+" : "-";

        o += fmt::format("    constexpr real rtol = {};\n", L(sp.rtol));
        o += fmt::format("    constexpr real atol = {};\n", L(sp.atol));
        o += fmt::format("    constexpr std::uint32_t max_steps = {}u;  // attempted steps\n", sp.max_steps);
        o += fmt::format("    constexpr real inv_n = {};  // 1/n, for the rms norm\n", L(1.0 / static_cast<double>(cp.n)));
        o += fmt::format("    constexpr real safety = {};\n", L(sp.safety));
        o += fmt::format("    constexpr real min_factor = {};\n", L(sp.min_factor));
        o += fmt::format("    constexpr real max_factor = {};\n", L(sp.max_factor));
        o += fmt::format("    constexpr real exponent = {};  // -1/(q+1), q = {}\n", L(-1.0 / (q + 1)), q);
        if (pi) {
            o += fmt::format("    constexpr real pi_err_exp = {};  // -pi-alpha/(q+1)\n",
                             L(-sp.pi_alpha / static_cast<double>(q + 1)));
            o += fmt::format("    constexpr real pi_prev_exp = {};  // pi-beta/(q+1)\n",
                             L(sp.pi_beta / static_cast<double>(q + 1)));
        }
        o += "    real t = t0;\n";
        o += "    " + call("t", "y", "k1") + "\n";
        if (sp.first_step > 0.0) {
            o += fmt::format("    real h_abs = {};  // first-step\n", L(sp.first_step));
        } else {
            o += "    real h_abs;\n";
            o += "    {\n";
            o += "        // Initial step: HNW I, II.4 (SciPy 1.10 select_initial_step).\n";
            o += fmt::format("        real s0 = {0};\n        real s1 = {0};\n", L(0));
            o += "        for (std::size_t j = 0; j < n; ++j) {\n";
            o += "            const real inv_sc = " + L(1) + " / (std::fabs(y[j]) * rtol + atol);\n";
            o += "            const real q0 = y[j] * inv_sc;\n";
            o += "            const real q1 = k1[j] * inv_sc;\n";
            o += "            s0 += q0 * q0;\n            s1 += q1 * q1;\n        }\n";
            o += "        const real d0 = std::sqrt(s0 * inv_n);\n";
            o += "        const real d1 = std::sqrt(s1 * inv_n);\n";
            o += fmt::format("        const real h0 = (d0 < {0} || d1 < {0}) ? {1} : {2} * d0 / d1;\n", L(1e-5),
                             L(1e-6), L(0.01));
            o += fmt::format("        for (std::size_t j = 0; j < n; ++j) arg[j] = y[j] {} h0 * k1[j];\n", plus);
            o += "        " + call("t " + plus + " h0", "arg", "k2") + "\n";
            o += fmt::format("        real s2 = {};\n", L(0));
            o += "        for (std::size_t j = 0; j < n; ++j) {\n";
            o += "            const real q2 = (k2[j] - k1[j]) / (std::fabs(y[j]) * rtol + atol);\n";
            o += "            s2 += q2 * q2;\n        }\n";
            o += "        const real d2 = std::sqrt(s2 * inv_n) / h0;\n";
            o += "        const real dmax = d1 < d2 ? d2 : d1;\n";
            o += fmt::format("        const real h1 = (d1 <= {0} && d2 <= {0})\n", L(1e-15));
            o += fmt::format("                            ? ({0} < h0 * {1} ? h0 * {1} : {0})\n", L(1e-6), L(1e-3));
            o += fmt::format("                            : std::pow({} / dmax, {});\n", L(0.01), L(1.0 / (q + 1)));
            o += fmt::format("        h_abs = h1 < {0} * h0 ? h1 : {0} * h0;\n", L(100));
            o += "    }\n";
        }
        if (pi) o += fmt::format("    real err_prev = {};\n", L(1e-4));
        o += "    std::uint32_t attempts = 0u;\n";
        // t never passes t1 (the last step is clipped to it), so an ordered
        // comparison says "not there yet" without float equality (-Wfloat-equal).
        const std::string not_there = forward ? "t < t1" : "t > t1";
        o += "    while (" + not_there + ") {\n";
        o += "        // nextafter toward t1 is nextafter toward the direction of integration (t != t1).\n";
        o += fmt::format("        const real min_step = {} * std::fabs(std::nextafter(t, t1) - t);\n", L(10));
        o += "        if (h_abs < min_step) h_abs = min_step;  // as SciPy: only rejections end in step_too_small\n";
        o += "        bool rejected = false;\n";
        o += "        for (;;) {\n";
        o += "            if (attempts == max_steps) return result::step_limit;\n";
        o += "            if (h_abs < min_step) return result::step_too_small;\n";
        o += fmt::format("            real t_new = t {} h_abs;\n", plus);
        o += fmt::format("            if (t_new {} t1) t_new = t1;\n", forward ? ">" : "<");
        o += "            const real h = t_new - t;\n";
        o += "            h_abs = std::fabs(h);\n";
        o += stages("            ", "t_new", "y_new");
        if (!tb.fsal)
            o += fmt::format("            for (std::size_t j = 0; j < n; ++j) y_new[j] = y[j] + h * ({});\n",
                             weighted_sum(bnames, bnz));
        o += fmt::format("            real sum = {};\n", L(0));
        o += "            for (std::size_t j = 0; j < n; ++j) {\n";
        o += fmt::format("                const real e = h * ({});\n", weighted_sum(enames, enz));
        o += "                const real ay = std::fabs(y[j]);\n";
        o += "                const real ay_new = std::fabs(y_new[j]);\n";
        o += "                const real q = e / (atol + rtol * (ay < ay_new ? ay_new : ay));\n";
        o += "                sum += q * q;\n";
        o += "            }\n";
        o += "            const real err = std::sqrt(sum * inv_n);\n";
        o += "            ++attempts;\n";
        o += fmt::format("            if (!(err < {})) {{  // reject (a NaN error too: it shrinks by min-factor)\n",
                         L(1));
        o += "                const real shrink = safety * std::pow(err, exponent);\n";
        o += "                h_abs *= shrink > min_factor ? shrink : min_factor;\n";
        o += "                ++count.steps_rejected;\n";
        o += "                rejected = true;\n";
        o += "                continue;\n";
        o += "            }\n";
        o += "            real factor = max_factor;\n";
        if (!pi) {
            o += fmt::format("            if (err > {}) {{\n", L(0));  // err >= 0 here
            o += "                const real grow = safety * std::pow(err, exponent);\n";
            o += "                factor = grow < max_factor ? grow : max_factor;\n";
            o += "            }\n";
        } else {
            o += fmt::format("            if (err > {}) {{\n", L(0));  // err >= 0 here
            o += "                factor = safety * std::pow(err, pi_err_exp) * std::pow(err_prev, pi_prev_exp);\n";
            o += "                factor = factor < min_factor ? min_factor : (max_factor < factor ? max_factor : factor);\n";
            o += "            }\n";
            o += fmt::format("            err_prev = err < {0} ? {0} : err;\n", L(1e-4));
        }
        o += fmt::format("            if (rejected && !(factor < {0})) factor = {0};\n", L(1));
        o += "            h_abs *= factor;\n";
        o += "            ++count.steps_taken;\n";
        o += "            t = t_new;\n";
        o += "            for (std::size_t j = 0; j < n; ++j) y[j] = y_new[j];\n";
        o += "            if (!all_finite(y, n)) return result::state_not_finite;\n";
        if (tb.fsal)
            o += fmt::format("            for (std::size_t j = 0; j < n; ++j) k1[j] = k{}[j];  // FSAL\n", s);
        else  // the next step's first stage; none after the last step
            o += "            if (" + not_there + ") " + call("t", "y", "k1") + "\n";
        o += "            break;\n";
        o += "        }\n";
        o += "    }\n";
    }
};

}  // namespace

std::vector<EmittedFile> emit_model(const Model& model, const EmitOptions& opts) {
    std::vector<EmittedFile> files = Emitter(model, opts).run();
    if (!opts.self_test_inputs.empty()) {
        std::vector<EmittedFile> st = emit_self_test(model, opts);
        files.insert(files.end(), std::make_move_iterator(st.begin()), std::make_move_iterator(st.end()));
    }
    return files;
}

}  // namespace meander
