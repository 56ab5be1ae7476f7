// Emit, dense kernels: y = act(W x + b) per layer (softmax over the layer's
// outputs after the loop).
#include <fmt/format.h>

#include "render.hpp"

namespace meander::emit_detail {

std::string render_dense_layers(const Emission& e) {
    std::string o;
    for_each_dense(e.model.blocks, [&](const Dense& d) {
        const int cols = d.in_total();
        o += fmt::format("// dense {}: {}{} -> {}, {}\n", d.name, d.in, d.time_input ? " + t" : "", d.out,
                         activation_name(d.act));
        o += fmt::format("void dense_{}(const real* x, {}real* y) noexcept {{\n", d.name,
                         d.time_input ? "real t, " : "");
        o += fmt::format("    for (std::size_t o = 0; o < {}; ++o) {{\n", d.out);
        o += fmt::format("        const real* w = w_{} + o * {};\n", d.name, cols);
        o += fmt::format("        real acc = {};\n", e.L(0));
        o += fmt::format("        for (std::size_t i = 0; i < {}; ++i) acc += w[i] * x[i];\n", d.in);
        if (d.time_input) o += fmt::format("        acc += w[{}] * t;\n", d.in);
        if (d.has_bias) o += fmt::format("        acc += b_{}[o];\n", d.name);
        o += fmt::format("        y[o] = {};\n", apply_activation(e, d, "acc"));
        o += "    }\n";
        if (d.act == Activation::softmax) {
            o += "    // Max-subtracted: exp never overflows and the largest term is 1.\n";
            o += "    real top = y[0];\n";
            o += fmt::format("    for (std::size_t o = 1; o < {}; ++o)\n        if (y[o] > top) top = y[o];\n",
                             d.out);
            o += fmt::format("    real sum = {};\n", e.L(0));
            o += fmt::format("    for (std::size_t o = 0; o < {}; ++o) {{\n", d.out);
            o += fmt::format("        y[o] = {}(y[o] - top);\n        sum += y[o];\n    }}\n", e.math("exp"));
            o += fmt::format("    for (std::size_t o = 0; o < {}; ++o) y[o] = y[o] / sum;\n", d.out);
        }
        o += "}\n\n";
    });
    return o;
}

}  // namespace meander::emit_detail
