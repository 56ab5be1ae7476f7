// Table-driven Runge-Kutta integrators in double precision: the reference
// that emitted code is checked against. The algorithm is spelled out in
// DEVELOPERS.md ("Integrator semantics"); the emitter implements the same.
#pragma once

#include <Eigen/Dense>
#include <functional>
#include <vector>

#include "model.hpp"
#include "tableau.hpp"

namespace meander {

// dy = f(t, y)
using Field = std::function<void(double t, const Eigen::VectorXd& y, Eigen::VectorXd& dy)>;

enum class IntegrateStatus { ok, state_not_finite, step_limit, step_too_small };

struct IntegrateStats {
    long field_evals = 0;
    long steps_accepted = 0;           // accepted steps
    long steps_rejected = 0;
    double h_min = 0.0;             // smallest and largest |h| of accepted steps (0 when none)
    double h_max = 0.0;
};

struct StepRecord {
    double t = 0.0;                 // time at the start of the attempt
    double h = 0.0;                 // signed step attempted
    double err = 0.0;               // scaled error norm (0 for fixed-step)
    bool accepted = true;
};

// Integrates y from t0 to t1 in place with the solver of `spec` (method looked up in tableaux()).
// `trace`, when given, receives every attempted step in order.
IntegrateStatus integrate(const Field& f, double t0, double t1, Eigen::VectorXd& y, const SolverSpec& spec,
                          IntegrateStats& stats, std::vector<StepRecord>* trace = nullptr);

// Largest number of field evaluations one integration with `spec` can take:
// exact for fixed step, the bound that max-steps implies for adaptive methods.
long worst_field_evals(const SolverSpec& spec);

// Initial step of HNW I, II.4 (as SciPy 1.10 select_initial_step), for an
// embedded order q. f0 = f(t0, y0). Costs one field evaluation (counted in stats).
double initial_step(const Field& f, double t0, const Eigen::VectorXd& y0, const Eigen::VectorXd& f0,
                    double direction, int q, double rtol, double atol, IntegrateStats& stats);

}  // namespace meander
