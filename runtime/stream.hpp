// Streaming models in double precision: one observation at a time, the state
// carried between calls (the reference for the emitted observe()).
// Per observation, after a gap dt since the previous one:
//   h = evolve(h, dt)    an ODE over [0, dt] (ODE-RNN, Rubanova et al. 2019) or the
//                        closed-form continuous-time cell (Hasani et al. 2022)
//   h = update(h, x)     a GRU cell (PyTorch GRUCell) or a dense layer on [h; x]
//   y = readout(h)
#pragma once

#include <Eigen/Dense>

#include "evaluate.hpp"
#include "model.hpp"

namespace meander {

// Equal steps a fixed-step method takes over a gap: ceil(gap * steps-per-unit), at least 1
// when gap > 0, none when gap == 0.
long gap_steps(const SolverSpec& spec, double gap);

// The evolution's solver over one gap: a fixed-step method with its step count for that gap.
SolverSpec solver_for_gap(const SolverSpec& spec, double gap);

// Field evaluations of one evolution at the largest gap (the worst case per observation).
long worst_evolve_field_evals(const Stream& stream);

// Multiply-accumulates per observation at the largest gap: evolution, update and readout.
long double worst_observation_macs(const Model& model);

// PyTorch GRUCell (gate order r, z, n): h = (1 - z) * n + z * h with
//   r = sigmoid(Wir x + bir + Whr h + bhr), z = sigmoid(Wiz x + biz + Whz h + bhz),
//   n = tanh(Win x + bin + r * (Whn h + bhn)).
void gated_update(const Dense& ih, const Dense& hh, const Eigen::VectorXd& x, Eigen::VectorXd& h);

// The closed-form cell over a gap: backbone, then heads f, g, k (the block's last three layers);
// h = s * g + (1 - s) * k with s = sigmoid(-f * gap).
void blend_evolve(const Continuous& blend, double gap, Eigen::VectorXd& h);

// One observation: checks the gap (finite, 0 <= gap <= largest-gap) and the observation,
// standardises the observation (a `standardised` input), evolves, updates, reads out and
// restores the readout's units (a `standardised` output), each standardised vector checked
// for finiteness. On any status but ok, `state` is left as it was.
EvalResult observe(const Model& model, Eigen::VectorXd& state, const Eigen::VectorXd& obs, double gap);

}  // namespace meander
