// Parse: description text -> Model (names, sizes, locations; no weights yet).
// The grammar is grammar/meander.hpp; the actions live in parse/ (driver: parse.cpp).
#pragma once

#include <optional>

#include "../runtime/model.hpp"
#include "source.hpp"

namespace meander {

// Limits that bound the memory a description can take (README, "Limits"): a
// longer text is refused before it is parsed, and parsing stops at the layer
// or block past the count. Real models for a microcontroller are far smaller.
inline constexpr std::size_t kMaxDescriptionBytes = 8u << 20;  // 8 MiB
inline constexpr int kMaxLayersAndBlocks = 65536;

std::optional<Model> parse_description(const Source& src, Diagnostics& diags);

}  // namespace meander
