// Tensor naming and binding: the tensor names of a layer from its options, and
// what the numbered and layout statements of the blocks around it add.
#pragma once

#include <string_view>

#include "state.hpp"

namespace meander::parse_detail {

// The tensor names of the layer just read, from its options.
void resolve_tensors(State& s);

// The layer's place in its body: its default tensor prefix in a numbered body, and the
// layouts of the blocks around it.
void body_naming(State& s);

// How a block's layers name and lay out their tensors: statements before the block's layers.
Frame* naming_frame(State& s, Loc stmt, std::string_view keyword);

}  // namespace meander::parse_detail
