// The reference evaluator: the whole model in double precision on Eigen.
#pragma once

#include <Eigen/Dense>
#include <string>

#include "integrate.hpp"
#include "model.hpp"

namespace meander {

enum class EvalStatus { ok, input_not_finite, state_not_finite, step_limit, step_too_small, gap_out_of_range };
std::string_view eval_status_name(EvalStatus s);
EvalStatus eval_status_of(IntegrateStatus s);  // the integrator's status as the model's result  // "ok", "step_limit", ... (the emitted result names)

struct EvalResult {
    EvalStatus status = EvalStatus::ok;
    Eigen::VectorXd output;         // valid when status == ok
    IntegrateStats stats;           // summed over every continuous block of the model
    std::string block;              // name of the block that failed, when status != ok
};

// `model` must have passed check_model and bind_weights.
EvalResult evaluate(const Model& model, const Eigen::VectorXd& input);

// One dense layer, y = act(W [x; t] + b), in two halves: the affine map
// (z = W [x; t] + b) and the activation applied to z in place. The gradient
// passes (runtime/vjp.cpp) call the same two, so forward values agree bit for bit.
void dense_affine(const Dense& d, double t, const Eigen::VectorXd& x, Eigen::VectorXd& z);
void dense_activate(const Dense& d, Eigen::VectorXd& y);
void apply_dense(const Dense& d, double t, const Eigen::VectorXd& x, Eigen::VectorXd& y);

// The blocks of a model (or a streaming model's readout) applied to x, which must be finite.
EvalResult evaluate_blocks(const std::vector<Block>& blocks, const Eigen::VectorXd& x);

// Layers and residual blocks in order (a residual body, a field, a backbone), at time t.
void apply_sequence(const std::vector<Block>& blocks, double t, const Eigen::VectorXd& x, Eigen::VectorXd& y);

// Adds the counters of one integration to a total (smallest and largest step over both).
void add_stats(IntegrateStats& total, const IntegrateStats& s);

// One field evaluation of a continuous block: dy = f(t, y), y of size block.state().
void eval_field(const Continuous& block, double t, const Eigen::VectorXd& y, Eigen::VectorXd& dy);

// Multiply-accumulates of one field evaluation, and of a dense layer.
long dense_macs(const Dense& d);
long field_macs(const Continuous& block);

}  // namespace meander
