// Format: the canonical layout of a description (comments kept, idempotent).
#pragma once

#include <optional>
#include <string>

#include "source.hpp"

namespace meander {

std::optional<std::string> format_description(const Source& src, Diagnostics& diags);

// Shortest text that reads back to the same double, as descriptions write
// numbers ("1e-4", "0.01", "2.5", "16").
std::string format_number(double v);

// A solver line's method and its written options in canonical order, as the
// formatter prints them after `solver `: "rk4, steps 8".
std::string format_solver(const SolverSpec& spec);

}  // namespace meander
