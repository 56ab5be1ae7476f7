// Format: the canonical layout of a description (comments kept, idempotent).
#pragma once

#include <optional>
#include <string>

#include "source.hpp"

namespace meander {

std::optional<std::string> format_description(const Source& src, Diagnostics& diags);

}  // namespace meander
