// Text dumps of intermediate forms, for `--dump=STAGE`.
#pragma once

#include <string>

#include "../runtime/model.hpp"

namespace meander {

// The parsed (or bound) model as an indented tree; with weights, their shapes.
std::string dump_model(const Model& m);

// One line about a vector's values: their names (units in parentheses) or classes, and
// its standardisation; empty when the description says nothing about them.
std::string describe_vector(const VectorInfo& info, const std::string& vector, int size);

}  // namespace meander
