// Parse: description text -> Model (names, sizes, locations; no weights yet).
// The grammar is grammar/meander.hpp; the actions live in parse.cpp.
#pragma once

#include <optional>

#include "../runtime/model.hpp"
#include "source.hpp"

namespace meander {

std::optional<Model> parse_description(const Source& src, Diagnostics& diags);

}  // namespace meander
