// Emit, math and activation kernels: one inline function per activation the
// model's layers use, in the same stable forms as runtime/activation.cpp.
#include <fmt/format.h>

#include <set>

#include "render.hpp"

namespace meander::emit_detail {

std::string render_activations(const Emission& e) {
    std::set<Activation> used;
    for_each_dense(e.model.blocks, [&](const Dense& d) { used.insert(d.act); });
    const bool f = e.p == Precision::float32;
    auto l = [&](double v) { return e.L(v); };
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

std::string apply_activation(const Emission& e, const Dense& d, const std::string& x) {
    switch (d.act) {
    case Activation::identity:
    case Activation::softmax: return x;
    case Activation::relu: return "act_relu(" + x + ")";
    case Activation::leaky_relu: return fmt::format("act_leaky_relu({}, {})", x, e.L(d.act_param));
    case Activation::tanh: return "act_tanh(" + x + ")";
    case Activation::sigmoid: return "act_sigmoid(" + x + ")";
    case Activation::softplus: return "act_softplus(" + x + ")";
    case Activation::silu: return "act_silu(" + x + ")";
    case Activation::gelu: return "act_gelu(" + x + ")";
    case Activation::elu: return fmt::format("act_elu({}, {})", x, e.L(d.act_param));
    }
    return x;
}

}  // namespace meander::emit_detail
