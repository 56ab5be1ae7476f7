// Text dumps of intermediate forms, for `--dump=STAGE`.
#pragma once

#include <string>

#include "../runtime/model.hpp"

namespace meander {

// The parsed (or bound) model as an indented tree; with weights, their shapes.
std::string dump_model(const Model& m);

}  // namespace meander
