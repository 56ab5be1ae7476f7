// The discrete reverse pass of a continuous block: backpropagation through
// exactly the Runge-Kutta steps the integrator took. Fixed-step methods replay
// their N steps; adaptive methods replay their accepted steps with the step
// sizes held fixed (the controller's choices are constants, as the emitted
// code's branch taken), so the result is the exact gradient of the computed
// map y(t0) -> y(t1). Memory grows with the number of steps: every stage's
// argument is kept.
#pragma once

#include <Eigen/Dense>
#include <vector>

#include "integrate.hpp"
#include "model.hpp"

namespace meander {

// One accepted step: from t with step h, ending at t_new (for adaptive
// methods t_new is where the integrator put the end, not t + h rounded).
struct StepPlan {
    double t = 0.0;
    double h = 0.0;
    double t_new = 0.0;
};

// Integrates the block's state y from c.t0 to c.t1 with its solver (the same
// call `evaluate` makes) and, when `steps` is given, returns the accepted steps there.
IntegrateStatus integrate_recording(const Continuous& c, Eigen::VectorXd& y, std::vector<StepPlan>* steps,
                                    IntegrateStats& stats);

// Given the state y0 at c.t0, the steps, and y1bar = dL/dy(t1): y0bar =
// dL/dy(t0), and dL/dtheta added into `grad` (the field's parameters).
void backprop_steps(const Continuous& c, const Eigen::VectorXd& y0, const std::vector<StepPlan>& steps,
                    const Eigen::VectorXd& y1bar, Eigen::VectorXd& y0bar, Eigen::Ref<Eigen::VectorXd> grad);

}  // namespace meander
