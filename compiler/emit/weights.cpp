// Emit, weight tables: each dense layer's weights and bias as constant arrays,
// in the section the firmware chooses. The weights are laid out the way the
// dense kernels (dense.cpp) read them: rows in blocks of kDenseBlockRows,
// interleaved within a block (column by column, the block's rows side by
// side); the rows left over form a last, smaller block interleaved alike.
// An integer layer's table holds its int8 or int16 values in the same order,
// followed by one scale per output row (compiler/quantise.hpp).
#include <fmt/format.h>

#include <algorithm>

#include "../source.hpp"
#include "render.hpp"

namespace meander::emit_detail {

namespace {

// Integer tables: 16 values a line.
std::string integer_rows(const std::vector<double>& values) {
    std::string out;
    for (std::size_t i = 0; i < values.size(); ++i) {
        if (i % 16 == 0) out += "    ";
        out += fmt::format("{},", static_cast<long>(values[i]));
        out += (i + 1) % 16 == 0 || i + 1 == values.size() ? '\n' : ' ';
    }
    return out;
}

}  // namespace

std::string layer_symbol(const Model& m, const Dense& d) {
    if (!m.stream || m.stream->update != Stream::Update::gated || m.stream->update_layers.size() != 2) return d.name;
    const bool ih = &d == &m.stream->update_layers[0].dense;
    if (!ih && &d != &m.stream->update_layers[1].dense) return d.name;
    std::string sym = d.name + (ih ? "_ih" : "_hh");
    for (bool taken = true; taken;) {
        taken = false;
        for_each_model_dense(m, [&](const Dense& other) { taken = taken || other.name == sym; });
        if (taken) sym += '_';
    }
    return sym;
}

std::string render_weights(const Emission& e) {
    std::string o;
    const std::string M_ = e.M();
    for_each_model_dense(e.model, [&](const Dense& d) {
        const std::string sym = layer_symbol(e.model, d);
        const int cols = d.in_total();
        const bool ints = d.storage != WeightStorage::real;
        std::vector<double> w;
        w.reserve(static_cast<std::size_t>(d.out * cols));
        auto at = [&](int r, int c) {
            if (ints) return static_cast<double>(d.qweight[static_cast<std::size_t>(r * cols + c)]);
            return d.weight.size() == 0 ? 0.0 : d.weight(r, c);
        };
        const int R = kDenseBlockRows;
        const int blocked = d.out / R * R;
        const int rest = d.out - blocked;
        for (int r0 = 0; r0 < d.out; r0 += R)
            for (int c = 0; c < cols; ++c)
                for (int r = r0; r < std::min(r0 + R, d.out); ++r) w.push_back(at(r, c));
        o += fmt::format("// {}: weight {} x {} (y = W x{} + b){}\n", sym, d.out, cols,
                         d.time_input ? " with t as the last column of x" : "",
                         d.weight_tensor.empty() ? "" : ", tensor " + escape_controls(quote_string(d.weight_tensor)));
        if (blocked > 0)
            o += fmt::format("//   W[{0}b + r][c] at {0}*{1}*b + {0}*c + r for rows below {2}\n", R, cols, blocked);
        if (rest > 0 && blocked > 0)
            o += fmt::format("//   W[{} + r][c] at {} + {}*c + r after them\n", blocked, blocked * cols, rest);
        else if (rest > 0)
            o += fmt::format("//   W[r][c] at {}*c + r\n", rest);
        if (ints) {
            o += fmt::format("//   as {}: W[j][i] = real(q[j][i]) * s_{}[j], q rounded to nearest (ties away from zero)\n",
                             weight_storage_name(d.storage), sym);
            o += fmt::format("{}_WEIGHTS_ATTR const std::{}_t w_{}[{}] = {{\n", M_, weight_storage_name(d.storage), sym,
                             w.size());
            o += integer_rows(w);
            o += "};\n";
            o += fmt::format("// {}: scale per row {}\n", sym, d.out);
            o += fmt::format("{}_WEIGHTS_ATTR const real s_{}[{}] = {{\n", M_, sym, d.qscale.size());
            o += array_rows(d.qscale, e.p);
            o += "};\n";
        } else {
            o += fmt::format("{}_WEIGHTS_ATTR const real w_{}[{}] = {{\n", M_, sym, w.size());
            o += array_rows(w, e.p);
            o += "};\n";
        }
        if (d.has_bias) {
            std::vector<double> b(d.bias.data(), d.bias.data() + d.bias.size());
            if (b.empty()) b.assign(static_cast<std::size_t>(d.out), 0.0);
            o += fmt::format("// {}: bias {}{}\n", sym, d.out,
                             d.bias_tensor.empty() ? "" : ", tensor " + escape_controls(quote_string(d.bias_tensor)));
            o += fmt::format("{}_WEIGHTS_ATTR const real b_{}[{}] = {{\n", M_, sym, b.size());
            o += array_rows(b, e.p);
            o += "};\n";
        }
        o += "\n";
    });
    return o;
}

}  // namespace meander::emit_detail
