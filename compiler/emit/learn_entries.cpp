// Emit, learning on the device: the entry points (gradient, gradient_from,
// learn_step) and the header's declarations (learn_render.hpp).
#include <fmt/format.h>

#include <algorithm>

#include "../../runtime/integrate.hpp"
#include "../format.hpp"
#include "learn_render.hpp"

namespace meander::emit_detail::learning {

namespace {

// The opening every entry point shares: refuse a non-finite input (and what `checks`
// refuses), then the forward pass, whose failure is the entry point's.
std::string checked_forward(std::string_view signature, std::string_view checks) {
    std::string o = fmt::format("learn_result {} noexcept {{\n", signature);
    o += "    for (std::size_t i = 0; i < input_size; ++i)\n";
    o += "        if (!std::isfinite(input[i])) return learn_result::input_not_finite;\n";
    o += checks;
    o += "    const learn_result r = learn_forward(ctx, p, input);\n";
    o += "    if (r != learn_result::ok) return r;\n";
    return o;
}

// The close of the gradient entry points: the reverse pass from `ybar` into grad, its
// failure and a non-finite gradient refused.
std::string checked_backward(std::string_view ybar, bool head_gz) {
    std::string o = fmt::format("    const learn_result rb = learn_backward(ctx, p, input, {}, {}, grad.value);\n", ybar,
                                head_gz ? "true" : "false");
    o += "    if (rb != learn_result::ok) return rb;\n";
    o += "    if (!all_finite(grad.value, learnable_count)) return learn_result::gradient_not_finite;\n";
    o += "    return learn_result::ok;\n}\n\n";
    return o;
}

}  // namespace

std::string LearnRender::render_entries() {
    const bool std_out = e_.model.output_info.standardised.has_value();
    const std::size_t out_at = std_out ? std_out_ : region_.nodes.back().y;
    const std::string out = W(out_at);
    std::string o;
    // init_parameters: the shipped values, from flash, row by row.
    o += "void init_parameters(parameters& p) noexcept {\n";
    for (const LearnLayer& l : plan_.layers) {
        const Dense& d = *l.dense;
        if (l.weight) {
            const RowAddr ra = row_addr(d, false);
            o += fmt::format("    {{  // {}: weight {} x {}, flash interleaved -> row by row\n", d.name, d.out,
                             d.in_total());
            o += fmt::format("        const real* const W = w_{};\n", d.name);
            o += fmt::format("        for (std::size_t r = 0; r < {}; ++r) {{\n", d.out);
            o += fmt::format("            const real* const wr = {};\n", ra.base);
            o += fmt::format("            const std::size_t s = {};\n", ra.step);
            o += fmt::format("            for (std::size_t c = 0; c < {}; ++c) p.value[{} + r * {} + c] = wr[c * s];\n",
                             d.in_total(), l.weight_at, d.in_total());
            o += "        }\n    }\n";
        }
        if (l.bias)
            o += fmt::format("    for (std::size_t r = 0; r < {}; ++r) p.value[{} + r] = b_{}[r];  // {}: bias\n", d.out,
                             l.bias_at, d.name, d.name);
    }
    o += "}\n\n";

    o += checked_forward("infer(learn_context& ctx, const parameters& p, const real* input, real* output)", "");
    o += fmt::format("    for (std::size_t i = 0; i < output_size; ++i) output[i] = ctx.work[{} + i];\n", out_at);
    o += "    return learn_result::ok;\n}\n\n";

    o += checked_forward("gradient(learn_context& ctx, const parameters& p, const real* input, const real* target, "
                         "parameters& grad, real& loss)",
                         "    for (std::size_t i = 0; i < output_size; ++i)\n"
                         "        if (!std::isfinite(target[i])) return learn_result::target_not_finite;\n");
    o += "    real* const w = ctx.work;\n";
    o += fmt::format("    const real* const y = {};\n", out);
    o += fmt::format("    real* const ybar = w + {};\n", obar_);
    o += fmt::format("    real sum = {};\n", L(0));
    if (plan_.loss == LearnLoss::squared_error) {
        o += "    // L = sum_i (y_i - target_i)^2 / 2, dL/dy = y - target\n";
        if (std_out) o += "    // (y = the last layer's output * scale + mean: its dL/d = (y - target) * scale)\n";
        o += "    for (std::size_t i = 0; i < output_size; ++i) {\n";
        o += "        const real d = y[i] - target[i];\n";
        o += std_out ? "        ybar[i] = d * output_scale[i];\n" : "        ybar[i] = d;\n";
        o += "        sum += d * d;\n    }\n";
        o += fmt::format("    loss = sum / {};\n", L(2));
    } else {
        o += "    // L = -sum_i target_i log y_i over the softmax head; dL/dz = y sum(target) - target\n";
        o += fmt::format("    real total = {};\n", L(0));
        o += "    for (std::size_t i = 0; i < output_size; ++i) total += target[i];\n";
        o += "    for (std::size_t i = 0; i < output_size; ++i) {\n";
        o += "        ybar[i] = y[i] * total - target[i];\n";
        o += fmt::format("        if (target[i] < {0} || target[i] > {0}) sum -= target[i] * {1}(y[i]);\n    }}\n", L(0),
                         e_.p == Precision::float32 ? "log_kernel" : "std::log");
        o += "    loss = sum;\n";
    }
    o += "    for (std::size_t i = 0; i < learnable_count; ++i) grad.value[i] = " + L(0) + ";\n";
    o += checked_backward("ybar", plan_.loss == LearnLoss::cross_entropy);

    o += checked_forward("gradient_from(learn_context& ctx, const parameters& p, const real* input, const real* output_grad, "
                         "parameters& grad)",
                         "    if (!all_finite(output_grad, output_size)) return learn_result::target_not_finite;\n");
    o += "    for (std::size_t i = 0; i < learnable_count; ++i) grad.value[i] = " + L(0) + ";\n";
    if (std_out) {
        o += "    // dL/d(the last layer's output) = dL/doutput * scale\n";
        o += fmt::format("    real* const ybar = ctx.work + {};\n", obar_);
        o += "    for (std::size_t i = 0; i < output_size; ++i) ybar[i] = output_grad[i] * output_scale[i];\n";
    }
    o += checked_backward(std_out ? "ybar" : "output_grad", false);

    o += "learn_result learn_step(learn_context& ctx, parameters& p, const real* input, const real* target, real rate, "
         "real clip, real& loss) noexcept {\n";
    o += fmt::format("    if (!std::isfinite(rate) || !(rate > {0}) || !std::isfinite(clip) || clip < {0}) return "
                     "learn_result::rate_refused;\n",
                     L(0));
    o += "    const learn_result r = gradient(ctx, p, input, target, ctx.grad, loss);\n";
    o += "    if (r != learn_result::ok) return r;\n";
    o += "    real scale = rate;\n";
    o += fmt::format("    if (clip > {}) {{\n", L(0));
    o += fmt::format("        real sq = {};\n", L(0));
    o += "        for (std::size_t i = 0; i < learnable_count; ++i) sq += ctx.grad.value[i] * ctx.grad.value[i];\n";
    o += "        const real norm = std::sqrt(sq);\n";
    o += "        if (!std::isfinite(norm)) return learn_result::gradient_not_finite;\n";
    o += "        if (norm > clip) scale = rate * (clip / norm);\n";
    o += "    }\n";
    o += "    for (std::size_t i = 0; i < learnable_count; ++i) p.value[i] -= scale * ctx.grad.value[i];\n";
    o += "    return learn_result::ok;\n}\n\n";

    o += R"(const char* learn_result_name(learn_result r) noexcept {
    switch (r) {
    case learn_result::ok: return "ok";
    case learn_result::input_not_finite: return "input_not_finite";
    case learn_result::state_not_finite: return "state_not_finite";
    case learn_result::step_limit: return "step_limit";
    case learn_result::step_too_small: return "step_too_small";
    case learn_result::target_not_finite: return "target_not_finite";
    case learn_result::gradient_not_finite: return "gradient_not_finite";
    case learn_result::rate_refused: return "rate_refused";
    }
    return "unknown";
}

)";
    return o;
}

std::string LearnRender::header() {
    layout();
    std::string o;
    o += "// ---- Learning on the device ----\n";
    o += fmt::format("// learn: {} learnable values; the gradient goes back {} continuous blocks.\n", plan_.count,
                     plan_.way == LearnSpec::Way::steps
                         ? "through the steps of fixed-step (exact: the derivative of the computed map; memory grows "
                           "with the steps) of"
                         : "by the adjoint method (memory independent of the steps; accurate to the solver's "
                           "discretisation) through");
    o += "// Frozen weights stay const in flash. The learnable ones live in a parameter block in RAM\n";
    o += "// that the caller owns: init_parameters copies the shipped values into it from flash, and a\n";
    o += "// firmware may store it and restore it as plain bytes (learnable_bytes). Offsets, in reals:\n";
    for (const LearnLayer& l : plan_.layers) {
        const Dense& d = *l.dense;
        if (l.weight)
            o += fmt::format("//   {:<24} {:>6}  weight {} x {}, row by row (W[r][c] at r*{} + c){}\n", d.name, l.weight_at,
                             d.out, d.in_total(), d.in_total(), d.time_input ? ", t the last column" : "");
        if (l.bias) o += fmt::format("//   {:<24} {:>6}  bias {}\n", d.name, l.bias_at, d.out);
    }
    o += fmt::format("constexpr std::size_t learnable_count = {};\n", plan_.count);
    o += "constexpr std::size_t learnable_bytes = learnable_count * sizeof(real);\n";
    for (const LearnLayer& l : plan_.layers) {
        if (l.weight) o += fmt::format("constexpr std::size_t {}_weight_at = {};\n", l.dense->name, l.weight_at);
        if (l.bias) o += fmt::format("constexpr std::size_t {}_bias_at = {};\n", l.dense->name, l.bias_at);
    }
    o += "// learn_workspace: reals in learn_context::work (the record of the forward pass, the reverse\n";
    o += "// pass's buffers";
    bool has_cont = false;
    for (const LNode& nd : region_.nodes) has_cont = has_cont || nd.b->kind == Block::Kind::continuous;
    if (has_cont)
        o += plan_.way == LearnSpec::Way::steps ? "; grows with the steps: the state at every step is kept"
                                                : "; independent of the steps";
    o += ").\n";
    o += "// One learning step (gradient or learn_step): field evaluations and dense MACs, forward and back.\n";
    o += fmt::format("constexpr std::size_t learn_workspace_size = {};\n", top_);
    o += "constexpr std::size_t learn_workspace_bytes = learn_workspace_size * sizeof(real);\n";
    o += fmt::format("constexpr std::uint32_t learn_field_evals = {}u;\n", field_evals_);
    o += fmt::format("constexpr std::uint64_t learn_macs = {}u;\n\n", macs_);
    o += "struct parameters {\n    real value[learnable_count];\n};\n\n";
    o += R"(// What the learning entry points return; 0 to 4 as infer's result.
//   target_not_finite    a target (or a given dL/doutput) value is NaN or infinite.
//   gradient_not_finite  the gradient (or the adjoint's backward state) became NaN or infinite.
//   rate_refused         learn_step's rate is not finite or not positive, or its clip is
//                        not finite or negative.
// On any code but ok, learn_step leaves the parameters exactly as they were.
enum class learn_result : std::uint8_t {
    ok = 0, input_not_finite = 1, state_not_finite = 2, step_limit = 3, step_too_small = 4,
    target_not_finite = 5, gradient_not_finite = 6, rate_refused = 7
};

// Everything the learning entry points write, owned by the caller: the inference
// context for the blocks before the first learnable layer, the workspace, the
// gradient of learn_step, and the counters of the last call.
struct learn_context {
    context run;
    real work[learn_workspace_size];
    parameters grad;
    counters count;
};

// The shipped (flash) values of the learnable parameters.
void init_parameters(parameters& p) noexcept;

// infer with the learnable parameters from p (frozen ones from flash).
learn_result infer(learn_context& ctx, const parameters& p, const real* input, real* output) noexcept;

)";
    if (plan_.loss == LearnLoss::squared_error)
        o += "// The loss: L = sum_i (output_i - target_i)^2 / 2 (squared error), dL/doutput = output - target.\n";
    else
        o += "// The loss: L = -sum_i target_i log(output_i) (cross-entropy of the softmax head; target a\n"
             "// probability vector), dL/dz of the head = output * sum(target) - target.\n";
    o += R"(// gradient: runs the model on input, sets loss and grad = dL/dparameters (same layout as p).
// grad must not be p.
learn_result gradient(learn_context& ctx, const parameters& p, const real* input, const real* target,
                      parameters& grad, real& loss) noexcept;
// The same from a dL/doutput the caller gives (output_size values) instead of a loss.
learn_result gradient_from(learn_context& ctx, const parameters& p, const real* input, const real* output_grad,
                           parameters& grad) noexcept;
// One plain gradient step: p -= rate * g, g = dL/dp, scaled to norm clip when its norm is
// above clip (clip = 0: no clipping). rate must be finite and positive, clip finite and >= 0.
learn_result learn_step(learn_context& ctx, parameters& p, const real* input, const real* target, real rate,
                        real clip, real& loss) noexcept;
const char* learn_result_name(learn_result r) noexcept;

)";
    return o;
}


}  // namespace meander::emit_detail::learning
