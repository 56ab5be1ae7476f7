// Solver options: each option once, then the finished solver or trained-with line
// stored on its continuous block.
#pragma once

#include <string_view>

#include "order.hpp"
#include "state.hpp"

namespace meander::parse_detail {

bool first_time(State& s, Loc loc, std::string_view key);

template <typename Input>
void real_option(const Input& in, State& s, std::string_view key, double SolverSpec::*field) {
    double v = to_real(in, s);
    if (first_time(s, loc_of(in, s), key)) s.spec.*field = v;
}

template <typename Input>
void int_option(const Input& in, State& s, std::string_view key, int SolverSpec::*field) {
    int v = to_int(in, s);
    if (first_time(s, loc_of(in, s), key)) s.spec.*field = v;
}

template <typename Input>
void solver_done(const Input& in, State& s, bool trained) {
    std::string_view keyword = trained ? "trained-with" : "solver";
    Loc stmt = loc_of(in, s);
    Frame* f = continuous_frame(s, stmt, keyword);
    if (!f) return;
    Loc& seen = trained ? f->trained_loc : f->solver_loc;
    if (seen.line > 0) {
        s.error(stmt, fmt::format("continuous '{}' already has a {} line (line {})", f->block.continuous.name, keyword, seen.line));
        return;
    }
    seen = stmt;
    f->any_statement = true;
    if (trained)
        f->block.continuous.trained = s.spec;
    else
        f->block.continuous.solver = s.spec;
}

}  // namespace meander::parse_detail
