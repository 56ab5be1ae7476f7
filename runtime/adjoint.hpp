// The adjoint reverse pass of a continuous block (Chen et al., NeurIPS 2018;
// Pontryagin's adjoint): with a(t) = dL/dy(t), the augmented system
//     dy/dt = f(y, t),   da/dt = -a^T df/dy,   dg/dt = -a^T df/dtheta
// is integrated backwards from t1 (y = y(t1), a = dL/dy(t1), g = 0) to t0,
// recomputing the state on the way; then a(t0) = dL/dy(t0) and g(t0) =
// dL/dtheta. Memory does not grow with the number of steps. The result
// approximates the gradient of the exact flow, to the solver's accuracy.
#pragma once

#include <Eigen/Dense>

#include "integrate.hpp"
#include "model.hpp"

namespace meander {

// The solver the backward integration uses: the block's own method and
// settings (the same steps N, or rtol and atol), with max-steps raised
// tenfold since the augmented system is larger and less smooth.
SolverSpec adjoint_solver(const SolverSpec& forward);

// y1 = the state at c.t1, y1bar = dL/dy(t1). On ok: y0bar = dL/dy(t0), and
// dL/dtheta added into `grad` (the field's parameters). `stats` counts the
// backward integration (each evaluation of the augmented field is one).
IntegrateStatus adjoint_pass(const Continuous& c, const Eigen::VectorXd& y1, const Eigen::VectorXd& y1bar,
                             Eigen::VectorXd& y0bar, Eigen::Ref<Eigen::VectorXd> grad, IntegrateStats& stats,
                             const SolverSpec& solver);

}  // namespace meander
