// Tensor naming and binding (parse/naming.hpp).
#include "naming.hpp"

#include <fmt/format.h>

#include <string>

namespace meander::parse_detail {

// The tensor names of the layer just read, from its options.
void resolve_tensors(State& s) {
    Dense& d = s.dense;
    if (s.from_given && s.weight_given)
        s.error(d.loc, fmt::format("layer '{}' names its weight tensor twice ('from' and 'weight')", d.name));
    if (s.from_given && s.bias_given)
        s.error(d.loc, fmt::format("layer '{}' names its bias tensor twice ('from' and 'bias')", d.name));
    if (s.no_bias_given && s.bias_given)
        s.error(d.loc, fmt::format("layer '{}' has both 'bias' and 'no-bias'", d.name));
    if (d.tensor_prefix.empty()) d.tensor_prefix = d.name;
    const std::string& prefix = s.from_given ? s.from : d.tensor_prefix;
    if (!s.weight_given) d.weight_tensor = prefix + ".weight";
    if (!s.bias_given) d.bias_tensor = prefix + ".bias";
    if (s.no_bias_given) {
        d.has_bias = false;
        d.bias_tensor.clear();
    }
}

// The layer's place in its body: its default tensor prefix in a numbered body, and the
// layouts of the blocks around it.
void body_naming(State& s) {
    Dense& d = s.dense;
    d.transposed = s.transposed_given || s.model.tensors.transposed;
    d.time_first = s.time_first_given || (s.model.tensors.time_first && d.time_input);
    for (Frame& f : s.open) {
        const BodyTensors& t = body_tensors(f.block);
        d.transposed = d.transposed || t.transposed;
        d.time_first = d.time_first || (t.time_first && d.time_input);
    }
    if (s.open.empty()) return;
    Frame& f = s.open.back();
    const BodyTensors& t = body_tensors(f.block);
    if (!t.numbered.empty()) d.tensor_prefix = fmt::format("{}.{}", t.numbered, f.next_module);
    // The affine map is one module; an activation is a parameter-free module of its own.
    f.next_module += d.act == Activation::identity ? 1 : 2;
}

// How a block's layers name and lay out their tensors: statements before the block's layers.
Frame* naming_frame(State& s, Loc stmt, std::string_view keyword) {
    if (s.open.empty()) {
        s.error(stmt, fmt::format("'{}' is allowed only inside a residual or continuous block (it applies to the block's layers)",
                                  keyword));
        return nullptr;
    }
    Frame& f = s.open.back();
    if (f.any_layer) {
        s.error(stmt, fmt::format("'{}' must come before the layers of {} '{}'", keyword, kind_name(f.block), block_name(f.block)));
        return nullptr;
    }
    f.any_statement = true;
    return &f;
}

}  // namespace meander::parse_detail
