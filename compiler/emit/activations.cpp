// Emit, math and activation kernels. float32: meander's own kernels, copied
// from runtime/math_float.inc (one text for the tests and the emitted code),
// only the sections the model needs. float64: one inline function per
// activation in the same stable forms as runtime/activation.cpp.
#include <fmt/format.h>

#include <set>
#include <sstream>

#include "math_kernels_text.hpp"
#include "render.hpp"

namespace meander::emit_detail {

namespace {

// The kernel sections of runtime/math_float.inc and runtime/math_lanes.inc, in
// file order: each starts with "// kernel NAME: needs A B"; "// end of kernels"
// ends one without starting another (the text up to the next is dropped).
struct KernelSection {
    std::string name;
    std::vector<std::string> needs;
    std::string text;
};

std::vector<KernelSection> kernel_sections() {
    std::vector<KernelSection> sections;
    std::istringstream in{std::string(kMathFloatText)};
    const std::string mark = "// kernel ";
    bool inside = false;
    for (std::string line; std::getline(in, line);) {
        if (line == "// end of kernels") {
            inside = false;
            continue;
        }
        if (line.compare(0, mark.size(), mark) == 0) {
            inside = true;
            KernelSection s;
            const std::size_t colon = line.find(':');
            s.name = line.substr(mark.size(), colon - mark.size());
            std::istringstream needs(line.substr(line.find("needs", colon) + 5));
            for (std::string n; needs >> n;) s.needs.push_back(n);
            sections.push_back(std::move(s));
        }
        if (inside) sections.back().text += line + "\n";
    }
    return sections;
}

const char* kernel_of(Activation a) {
    switch (a) {
    case Activation::identity: return nullptr;
    case Activation::softmax: return "exp";
    case Activation::relu: return "relu";
    case Activation::leaky_relu: return "leaky_relu";
    case Activation::tanh: return "tanh";
    case Activation::sigmoid: return "sigmoid";
    case Activation::softplus: return "softplus";
    case Activation::silu: return "silu";
    case Activation::gelu: return "gelu";
    case Activation::elu: return "elu";
    }
    return nullptr;
}

// The four-lane section of an activation (runtime/math_lanes.inc), if any.
const char* lanes_section_of(Activation a) {
    switch (a) {
    case Activation::tanh: return "tanh_lanes";
    case Activation::sigmoid: return "sigmoid_lanes";
    case Activation::softplus: return "softplus_lanes";
    case Activation::silu: return "silu_lanes";
    default: return nullptr;
    }
}

bool has_adaptive_block(const Emission& e) {
    for (const ContinuousPlan* cp : continuous_plans(e.low))
        if (cp->adaptive) return true;
    return false;
}

std::string float_kernels(std::set<std::string> wanted) {
    if (wanted.empty()) return "";
    const std::vector<KernelSection> sections = kernel_sections();
    // What the wanted sections need, and what that needs (a section only
    // needs sections before it, so one pass from the end closes the set).
    for (auto s = sections.rbegin(); s != sections.rend(); ++s)
        if (wanted.count(s->name)) wanted.insert(s->needs.begin(), s->needs.end());
    std::string o = "// meander's float math kernels (runtime/math_float.inc), the sections this model uses.\n\n";
    for (const KernelSection& s : sections) {
        if (!wanted.count(s.name)) continue;
        std::string text = s.text;
        while (text.size() > 1 && text[text.size() - 2] == '\n') text.pop_back();  // one newline at the end
        o += text + "\n";
    }
    return o;
}

}  // namespace

const char* four_lane_kernel(Precision p, const Dense& d) {
    return p == Precision::float32 && d.out >= 4 ? lanes_section_of(d.act) : nullptr;
}

std::string render_activation_kernels(Precision p, const std::set<Activation>& used, bool step_controller,
                                      bool log, const std::set<Activation>& four_lanes) {
    if (p == Precision::float32) {
        std::set<std::string> wanted;
        for (Activation a : used)
            if (const char* k = kernel_of(a)) wanted.insert(k);
        for (Activation a : four_lanes)
            if (const char* k = lanes_section_of(a)) wanted.insert(k);
        if (step_controller) {
            wanted.insert("pow");
            wanted.insert("nextafter");
        }
        if (log) wanted.insert("log");
        return float_kernels(std::move(wanted));
    }
    auto l = [&](double v) { return real_literal(v, p); };
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
                             "0.7978845608028654", "0.7978845608028654",
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

std::string render_activations(const Emission& e) {
    std::set<Activation> used, four_lanes;
    for_each_model_dense(e.model, [&](const Dense& d) {
        used.insert(d.act);
        if (four_lane_kernel(e.p, d)) four_lanes.insert(d.act);
    });
    if (e.model.stream) {
        // A GRU cell's gates, a blend's mix.
        if (e.model.stream->update == Stream::Update::gated) used.insert({Activation::sigmoid, Activation::tanh});
        if (e.model.stream->evolve.blend) used.insert(Activation::sigmoid);
    }
    const std::set<Activation> extra = learn_kernel_needs(e);
    used.insert(extra.begin(), extra.end());
    // The cross-entropy loss takes a logarithm (float32: the log kernel's section).
    return render_activation_kernels(e.p, used, has_adaptive_block(e), learn_needs_log(e), four_lanes);
}

std::string apply_activation(const Emission& e, const Dense& d, const std::string& x) {
    return apply_activation(e.p, d, x);
}

std::string apply_activation(Precision p, const Dense& d, const std::string& x) {
    switch (d.act) {
    case Activation::identity:
    case Activation::softmax: return x;
    case Activation::relu: return "act_relu(" + x + ")";
    case Activation::leaky_relu: return fmt::format("act_leaky_relu({}, {})", x, real_literal(d.act_param, p));
    case Activation::tanh: return "act_tanh(" + x + ")";
    case Activation::sigmoid: return "act_sigmoid(" + x + ")";
    case Activation::softplus: return "act_softplus(" + x + ")";
    case Activation::silu: return "act_silu(" + x + ")";
    case Activation::gelu: return "act_gelu(" + x + ")";
    case Activation::elu: return fmt::format("act_elu({}, {})", x, real_literal(d.act_param, p));
    }
    return x;
}

}  // namespace meander::emit_detail
