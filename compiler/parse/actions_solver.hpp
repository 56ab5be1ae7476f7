// Actions of the solver and trained-with lines.
#pragma once

#include <fmt/format.h>

#include "actions.hpp"
#include "solver.hpp"
#include "state.hpp"

namespace meander::parse_detail {

// Solver lines
template <> struct action<g::kw_solver> {
    template <typename Input>
    static void apply(const Input&, State& s) { s.spec = SolverSpec{}; }
};
template <> struct action<g::kw_trained_with> : action<g::kw_solver> {};
template <> struct action<g::solver_method> {
    template <typename Input>
    static void apply(const Input& in, State& s) {
        s.spec.method = in.string();
        s.spec.loc = loc_of(in, s);
    }
};
template <> struct action<g::steps_per_unit_value> {
    template <typename Input>
    static void apply(const Input& in, State& s) { real_option(in, s, "steps-per-unit", &SolverSpec::steps_per_unit); }
};
template <> struct action<g::steps_value> {
    template <typename Input>
    static void apply(const Input& in, State& s) { int_option(in, s, "steps", &SolverSpec::steps); }
};
template <> struct action<g::max_steps_value> {
    template <typename Input>
    static void apply(const Input& in, State& s) { int_option(in, s, "max-steps", &SolverSpec::max_steps); }
};
template <> struct action<g::rtol_value> {
    template <typename Input>
    static void apply(const Input& in, State& s) { real_option(in, s, "rtol", &SolverSpec::rtol); }
};
template <> struct action<g::atol_value> {
    template <typename Input>
    static void apply(const Input& in, State& s) { real_option(in, s, "atol", &SolverSpec::atol); }
};
template <> struct action<g::first_step_value> {
    template <typename Input>
    static void apply(const Input& in, State& s) { real_option(in, s, "first-step", &SolverSpec::first_step); }
};
template <> struct action<g::safety_value> {
    template <typename Input>
    static void apply(const Input& in, State& s) { real_option(in, s, "safety", &SolverSpec::safety); }
};
template <> struct action<g::min_factor_value> {
    template <typename Input>
    static void apply(const Input& in, State& s) { real_option(in, s, "min-factor", &SolverSpec::min_factor); }
};
template <> struct action<g::max_factor_value> {
    template <typename Input>
    static void apply(const Input& in, State& s) { real_option(in, s, "max-factor", &SolverSpec::max_factor); }
};
template <> struct action<g::pi_alpha_value> {
    template <typename Input>
    static void apply(const Input& in, State& s) { real_option(in, s, "pi-alpha", &SolverSpec::pi_alpha); }
};
template <> struct action<g::pi_beta_value> {
    template <typename Input>
    static void apply(const Input& in, State& s) { real_option(in, s, "pi-beta", &SolverSpec::pi_beta); }
};
template <> struct action<g::controller_kind> {
    template <typename Input>
    static void apply(const Input& in, State& s) {
        if (first_time(s, loc_of(in, s), "controller"))
            s.spec.controller = in.string_view() == "pi" ? Controller::pi : Controller::integral;
    }
};
template <> struct action<g::solver_line> {
    template <typename Input>
    static void apply(const Input& in, State& s) { solver_done(in, s, false); }
};
template <> struct action<g::trained_line> {
    template <typename Input>
    static void apply(const Input& in, State& s) { solver_done(in, s, true); }
};

}  // namespace meander::parse_detail
