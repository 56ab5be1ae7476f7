// Emit, dense kernels: y = act(W x + b) per layer (softmax over the layer's
// outputs after the loop). Each output's sum keeps the contract's order
// (DEVELOPERS.md, "Operation order": from zero, inputs ascending, time last,
// then the bias); around it the outputs go in blocks of kDenseBlockRows with
// one accumulator each and each input loaded once per block, over weights that
// weights.cpp interleaves per block (the rows left over stay plain, one
// accumulator each). A block's loop over the inputs is written out in full
// when the layer has at most kUnrollInputs input columns: straight-line code
// that GCC turns into packed multiplies on x86-64 and that saves the loop
// overhead on a Cortex-M (DEVELOPERS.md states the measured trade).
#include <fmt/format.h>

#include "render.hpp"

namespace meander::emit_detail {

namespace {

std::string acc_name(int r) { return fmt::format("a{}", r); }

}  // namespace

std::string render_dense_layers(const Emission& e) {
    std::string o;
    const int R = kDenseBlockRows;
    for_each_model_dense(e.model, [&](const Dense& d) {
        const std::string sym = layer_symbol(e.model, d);
        const int cols = d.in_total();
        const int blocks = d.out / R;
        const int rest = d.out % R;
        const bool unroll = cols <= kUnrollInputs;
        o += fmt::format("// dense {}: {}{} -> {}, {}; {} block{} of {} outputs{}{}\n", sym, d.in,
                         d.time_input ? " + t" : "", d.out, activation_name(d.act), blocks, blocks == 1 ? "" : "s", R,
                         rest ? fmt::format(", {} output{} alone", rest, rest == 1 ? "" : "s") : "",
                         unroll && blocks ? ", inputs written out" : "");
        o += fmt::format("void dense_{}(const real* __restrict x, {}real* __restrict y) noexcept {{\n", sym,
                         d.time_input ? "real t, " : "");
        // Through volatile copies of the addresses: where the indices are
        // constants (inputs written out, a single block) the compiler would
        // otherwise fold weights and biases into the code, out of their
        // arrays and the NAME_WEIGHTS_ATTR section.
        o += fmt::format("    const real* const volatile w_at = w_{};\n", sym);
        o += "    const real* __restrict w = w_at;\n";
        if (d.has_bias) {
            o += fmt::format("    const real* const volatile b_at = b_{};\n", sym);
            o += "    const real* __restrict b = b_at;\n";
        }
        if (blocks > 0) {
            o += fmt::format("    for (std::size_t o = 0; o < {}; o += {}) {{\n", blocks * R, R);
            o += "        real";
            for (int r = 0; r < R; ++r) o += fmt::format("{} {} = {}", r ? "," : "", acc_name(r), e.L(0));
            o += ";\n";
            if (unroll) {
                for (int i = 0; i < d.in; ++i) {
                    o += fmt::format("        {{\n            const real xi = x[{}];\n", i);
                    for (int r = 0; r < R; ++r)
                        o += fmt::format("            {} += w[{}] * xi;\n", acc_name(r), i * R + r);
                    o += "        }\n";
                }
                if (d.time_input)
                    for (int r = 0; r < R; ++r) o += fmt::format("        {} += w[{}] * t;\n", acc_name(r), d.in * R + r);
                o += fmt::format("        w += {};\n", cols * R);
            } else {
                o += fmt::format("        for (std::size_t i = 0; i < {}; ++i, w += {}) {{\n", d.in, R);
                o += "            const real xi = x[i];\n";
                for (int r = 0; r < R; ++r) o += fmt::format("            {} += w[{}] * xi;\n", acc_name(r), r);
                o += "        }\n";
                if (d.time_input) {
                    for (int r = 0; r < R; ++r) o += fmt::format("        {} += w[{}] * t;\n", acc_name(r), r);
                    o += fmt::format("        w += {};\n", R);
                }
            }
            if (d.has_bias)
                for (int r = 0; r < R; ++r)
                    o += fmt::format("        {} += b[o{}];\n", acc_name(r), r ? fmt::format(" + {}", r) : "");
            for (int r = 0; r < R; ++r)
                o += fmt::format("        y[o{}] = {};\n", r ? fmt::format(" + {}", r) : "",
                                 apply_activation(e, d, acc_name(r)));
            o += "    }\n";
        }
        if (rest > 0) {
            o += fmt::format("    for (std::size_t o = {}; o < {}; ++o, w += {}) {{\n", blocks * R, d.out, cols);
            o += fmt::format("        real acc = {};\n", e.L(0));
            o += fmt::format("        for (std::size_t i = 0; i < {}; ++i) acc += w[i] * x[i];\n", d.in);
            if (d.time_input) o += fmt::format("        acc += w[{}] * t;\n", d.in);
            if (d.has_bias) o += "        acc += b[o];\n";
            o += fmt::format("        y[o] = {};\n", apply_activation(e, d, "acc"));
            o += "    }\n";
        }
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
