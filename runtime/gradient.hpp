// Reverse mode for the whole model: dL/dinput and dL/dtheta for every weight
// and bias, given dL/doutput. A forward pass records what the reverse pass
// needs; continuous blocks go back either through their steps
// (runtime/backprop.hpp) or by the adjoint method (runtime/adjoint.hpp).
#pragma once

#include <Eigen/Dense>
#include <string>
#include <vector>

#include "backprop.hpp"
#include "evaluate.hpp"
#include "model.hpp"
#include "vjp.hpp"

namespace meander {

enum class GradientWay { discrete, adjoint };

// What the forward pass of one top-level block keeps.
struct BlockRecord {
    Eigen::VectorXd x;              // input (a continuous block: its state at t0, augmented)
    Eigen::VectorXd y;              // output (a continuous block: its state at t1)
    LayerTape tape;                 // dense and residual blocks
    std::vector<StepPlan> steps;    // continuous blocks, discrete way: the accepted steps
};

struct ForwardRecord {
    EvalStatus status = EvalStatus::ok;
    std::string block;              // the failing block, when status != ok
    Eigen::VectorXd output;         // as `evaluate` returns it
    IntegrateStats stats;
    std::vector<BlockRecord> blocks;
};

struct Gradient {
    EvalStatus status = EvalStatus::ok;  // the adjoint's backward integration can fail
    std::string block;
    Eigen::VectorXd input;          // dL/dinput
    Eigen::VectorXd params;         // dL/dtheta in param_layout order (runtime/parameters.hpp)
    IntegrateStats backward_stats;  // adjoint way: the backward integrations
};

// The forward pass: the same values and status as evaluate(model, input).
ForwardRecord forward_record(const Model& model, const Eigen::VectorXd& input, GradientWay way);

// The reverse pass from output_bar = dL/doutput. `record` must be ok.
Gradient backward(const Model& model, const ForwardRecord& record, const Eigen::VectorXd& output_bar, GradientWay way);

}  // namespace meander
