// The `tensors` command's table: what a weights file holds, so that writing
// the bindings of a description is copying names.
#pragma once

#include <string>
#include <vector>

#include "weights.hpp"

namespace meander {

// One line per tensor: name, dtype, shape, smallest and largest value (NaN
// and infinities named), and with `bound` (one flag per tensor) whether a
// layer of the description binds it.
std::string render_tensor_table(const TensorSet& set, const std::vector<bool>* bound);

}  // namespace meander
