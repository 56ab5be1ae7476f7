// Solver options (parse/solver.hpp).
#include "solver.hpp"

#include <fmt/format.h>

namespace meander::parse_detail {

bool first_time(State& s, Loc loc, std::string_view key) {
    for (const auto& k : s.spec.written)
        if (k == key) {
            s.error(loc, fmt::format("solver option '{}' is given twice", key));
            return false;
        }
    s.spec.written.emplace_back(key);
    return true;
}

}  // namespace meander::parse_detail
