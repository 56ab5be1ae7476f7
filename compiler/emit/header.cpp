// Emit, banner and header contract: the lines every emitted file opens with,
// and NAME.hpp (sizes, resources, result codes, counters, context, infer).
#include <fmt/format.h>

#include <algorithm>
#include <cmath>

#include "../../runtime/integrate.hpp"
#include "../../runtime/math_kernels.hpp"
#include "../../runtime/stream.hpp"
#include "../format.hpp"
#include "../source.hpp"
#include "render.hpp"

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

// `largest_gap`: a streaming model's, for its evolution (over [0, gap]).
void banner_block(std::string& o, const Continuous& c, double largest_gap) {
    {
        const SolverSpec& s = c.solver;
        const Tableau* tb = find_tableau(s.method);
        if (tb == nullptr) return;
        const bool adaptive = tb->adaptive() && s.steps == 0;
        if (c.over_gap)
            o += fmt::format("// continuous {}: state {}, t from 0 to the gap (at most {})\n", c.name, c.state(),
                             format_double(largest_gap));
        else
            o += fmt::format("// continuous {}: state {} ({} + augment {}), t from {} to {}\n", c.name, c.state(), c.width,
                             c.augment, format_double(c.t0), format_double(c.t1));
        o += fmt::format("//   method: {} (`{}`); coefficients from {}\n", tb->title, tb->key, tb->source);
        if (tb->adaptive())
            o += fmt::format("//   order {}, embedded order {}, {} stages, {}\n", tb->order, tb->embedded_order,
                             tb->stages, tb->fsal ? "FSAL (last stage = f(t + h, y_new))" : "not FSAL");
        else
            o += fmt::format("//   order {}, {} stages, not FSAL\n", tb->order, tb->stages);
        if (!adaptive && c.over_gap) {
            const long most = gap_steps(s, largest_gap);
            o += fmt::format("//   fixed step: ceil({} * gap) steps, h = gap/steps; step i starts at t_i = i*h\n",
                             format_double(s.steps_per_unit));
            o += fmt::format("//   (from the index, never accumulated); at most {} steps, {} field evaluations\n", most,
                             most * tb->stages);
        } else if (!adaptive) {
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
            o += fmt::format("//   worst case: {} field evaluations{}\n", worst_field_evals(s), c.over_gap ? " per gap" : "");
        }
        if (c.trained) {
            // The whole training discretisation, so a review can see it is the deployed one.
            const bool same = format_solver(*c.trained) == format_solver(s);
            o += fmt::format("//   trained with: {}\n//     ({})\n", format_solver(*c.trained),
                             same ? "the deployed solver" : "DIFFERS from the deployed solver");
        }
    }
}

void banner_blocks(std::string& o, const std::vector<Block>& blocks) {
    for (const Block& b : blocks)
        if (b.kind == Block::Kind::continuous) banner_block(o, b.continuous, 0.0);
}

void banner_stream(std::string& o, const Model& m) {
    const Stream& st = *m.stream;
    o += fmt::format("// streaming: state {}[{}] carried between observations; gaps from 0 to {}\n", st.state_name,
                     st.state_size, format_double(st.largest_gap));
    if (st.evolve.blend)
        o += fmt::format("// blend {}: the closed-form continuous-time cell (Hasani et al. 2022), no solver\n",
                         st.evolve.name);
    else
        banner_block(o, st.evolve, st.largest_gap);
    o += fmt::format("// update {}: {}\n", st.update_name,
                     st.update == Stream::Update::gated ? "a GRU cell (PyTorch GRUCell, gates r, z, n)"
                                                        : "a dense layer on [state; observation]");
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
    if (opts.precision == Precision::float32) {
        o += "// math: meander's own float kernels (runtime/math_float.inc), no C library maths;\n";
        o += "//   largest error in ulp against MPFR:";
        for (const KernelBound& b : kFloatKernelBounds) o += fmt::format(" {} {:.1f}", b.name, b.ulp);
        o += "\n";
    }
    if (opts.precision == Precision::float32) {
        o += "// bits: the same outputs on every core when built with -ffp-contract=off (no FMA\n";
        o += "//   contraction), without -ffast-math, rounding to nearest, subnormals kept;\n";
    } else {
        o += "// math: the C++ library's <cmath>, as meander eval uses it: with the same library, built\n";
        o += "//   with -ffp-contract=off, without -ffast-math, rounding to nearest, subnormals kept,\n";
        o += "//   outputs and counters equal eval's bit for bit (the same operations in the same order);\n";
    }
    o += "//   build_conditions_hold() checks a build, the self-test reports it\n";
    if (model.stream) banner_stream(o, model);
    banner_blocks(o, model.blocks);
    o += "// Caution: this code is not certified for use in safety functions. Where its outputs can\n";
    o += "// hurt people, follow the applicable functional safety standard and have it qualified and\n";
    o += "// reviewed.\n";
    return o;
}

// The header carries a stamp that the source checks, so a header and a
// source from different runs never build together. The stamp hashes the
// header's own text, taken with kStampHole standing where the stamp then goes.
const char* const kStampHole = "@STAMP@";

std::string stamp_of(const std::string& hpp) { return fmt::format("0x{:016x}ULL", fnv1a64(hpp)); }

std::string finish_header(std::string hpp) {
    const std::string stamp = stamp_of(hpp);
    hpp.replace(hpp.find(kStampHole), std::string(kStampHole).size(), stamp);
    return hpp;
}

std::string render_header(const Emission& e) {
    const std::string M_ = e.M();
    const std::string real = e.real_name();
    std::string o = emit_detail::banner(e.model, e.opts, e.model.name + ".hpp");
    o += fmt::format("#ifndef MEANDER_GENERATED_{}_HPP\n#define MEANDER_GENERATED_{}_HPP\n\n", M_, M_);
    o += "// Shared by this header and its source from the same meander run; the source refuses\n";
    o += "// any other header.\n";
    o += fmt::format("#define {}_MEANDER_STAMP {}\n\n", M_, kStampHole);
    o += "#include <cstddef>\n#include <cstdint>\n\n";
    o += fmt::format("namespace {} {{\n\n", e.model.name);
    o += fmt::format("using real = {};\n\n", real);
    o += "// Sizes of one input and one output vector, in reals.\n";
    o += fmt::format("constexpr std::size_t input_size = {};\n", e.model.input_size);
    o += fmt::format("constexpr std::size_t output_size = {};\n\n", e.model.output_size);
    o += "// Resources, as compile-time constants for static_assert in firmware.\n";
    o += "// workspace: reals in context::work (RAM); parameters: weights and biases (constant\n";
    o += "// data, flash); MACs: multiply-accumulates of the dense layers only; field evaluations:\n";
    o += "// over all continuous blocks, for the worst case the step limits allow.\n";
    o += fmt::format("constexpr std::size_t workspace_size = {};\n", e.low.workspace_size);
    o += "constexpr std::size_t workspace_bytes = workspace_size * sizeof(real);\n";
    o += fmt::format("constexpr std::uint32_t parameter_count = {}u;\n", e.low.parameter_count);
    if (e.low.integer_weights)
        o += fmt::format("constexpr std::size_t parameter_bytes = {};  // integer weights with their scales, the rest real\n",
                         e.low.parameter_bytes);
    else
        o += "constexpr std::size_t parameter_bytes = parameter_count * sizeof(real);\n";
    o += fmt::format("constexpr std::uint32_t macs_per_field_eval = {}u;  // one evaluation of every field\n",
                     e.low.macs_per_field_eval);
    o += fmt::format("constexpr std::uint32_t worst_field_evals = {}u;\n", e.low.worst_field_evals);
    o += fmt::format("constexpr std::uint64_t worst_macs = {}u;  // one inference, worst case\n\n",
                     e.low.worst_macs);
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
//   steps_accepted  accepted steps (for a fixed-step block: every step).
//   steps_rejected  attempted adaptive steps whose error norm was not below 1.
struct counters {
    std::uint32_t field_evals;
    std::uint32_t steps_accepted;
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

// True when this build keeps the conditions the banner states for identical
// bits (no FMA contraction, rounding to nearest, subnormals kept); the
// self-test reports it.
bool build_conditions_hold() noexcept;

)";
    o += render_vector_declarations(e);
    o += render_learn_header(e);
    o += fmt::format("}}  // namespace {}\n", e.model.name);
    o += fmt::format("\n#endif  // MEANDER_GENERATED_{}_HPP\n", M_);
    return o;
}

}  // namespace emit_detail

}  // namespace meander
