// Vector-Jacobian products of dense layers and residual blocks on Eigen: the
// reverse pass of one field evaluation or one plain block. The forward half
// calls the evaluator's own dense_affine and dense_activate, so the values it
// records are the ones `evaluate` computes.
#pragma once

#include <Eigen/Dense>
#include <vector>

#include "model.hpp"

namespace meander {

// d act(z) / dz, given z and y = act(z) (softmax is handled by the layer).
double activation_derivative(Activation a, double z, double y, double param);

// What the reverse pass of one dense layer or residual block needs.
struct LayerTape {
    Eigen::VectorXd x;              // input
    Eigen::VectorXd z;              // dense: W [x; t] + b, before the activation
    Eigen::VectorXd y;              // output
    std::vector<LayerTape> body;    // residual: its body's layers
};

// A dense layer or residual block (not continuous) at time t, forward with its record.
void layer_forward(const Block& b, double t, const Eigen::VectorXd& x, LayerTape& tape);

// Reverse: from ybar = dL/dy to xbar = dL/dx; adds dL/dtheta into `grad`, the
// block's own parameters in param_layout order (block_param_count values).
void layer_backward(const Block& b, double t, const LayerTape& tape, const Eigen::VectorXd& ybar, Eigen::VectorXd& xbar,
                    Eigen::Ref<Eigen::VectorXd> grad);

// The same over a list of blocks (a field or a residual body); `grad` holds
// the list's parameters (sequence_param_count values).
void sequence_forward(const std::vector<Block>& blocks, double t, const Eigen::VectorXd& x, std::vector<LayerTape>& tape,
                      Eigen::VectorXd& y);
void sequence_backward(const std::vector<Block>& blocks, double t, const std::vector<LayerTape>& tape,
                       const Eigen::VectorXd& ybar, Eigen::VectorXd& xbar, Eigen::Ref<Eigen::VectorXd> grad);

// a^T df/dy and a^T df/dtheta of a continuous block's field at (t, y): one
// recorded forward evaluation and its reverse. `grad` (the field's
// parameters) is added to; `value`, when given, receives f(t, y) itself.
void field_vjp(const Continuous& c, double t, const Eigen::VectorXd& y, const Eigen::VectorXd& a, Eigen::VectorXd& ybar,
               Eigen::Ref<Eigen::VectorXd> grad, Eigen::VectorXd* value = nullptr);

}  // namespace meander
