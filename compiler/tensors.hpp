// The `tensors` command's table: what a weights file holds, so that writing
// the bindings of a description is copying names.
#pragma once

#include <string>
#include <vector>

#include "weights.hpp"

namespace meander {

// One line per tensor: name, dtype, shape, smallest and largest value (NaN
// and infinities named), and with `binding` (one entry per tensor, from
// bind_weights) the layer of the description that binds it, "ignored", or "-".
std::string render_tensor_table(const TensorSet& set, const std::vector<std::string>* binding);

}  // namespace meander
