// Near misses: how far apart two names are, and which known names a
// misspelled one is close to (for "did you mean" in diagnostics).
#pragma once

#include <cstddef>
#include <string>
#include <vector>

namespace meander {

// Levenshtein distance: insertions, deletions and substitutions of one character.
std::size_t edit_distance(const std::string& a, const std::string& b);

// The known names within `limit` edits of `name`, nearest first (ties in the given order).
std::vector<std::string> close_names(const std::string& name, const std::vector<std::string>& known, std::size_t limit);

}  // namespace meander
