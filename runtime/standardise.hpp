// Standardisation of the input and output vectors (a `standardised` option of
// the `input` or `output` statement): the network reads (x - mean) / scale and
// its last layer's y leaves as y * scale + mean. One division and one
// multiply-add per value, in this order, in eval and in the emitted code
// (DEVELOPERS.md, "Operation order"); not folded into the first or last layer,
// which would change the bits.
#pragma once

#include <Eigen/Dense>

#include "model.hpp"

namespace meander {

// x_i = (x_i - mean_i) / scale_i when the input is standardised.
void standardise_input(const Model& model, Eigen::VectorXd& x);

// y_i = y_i * scale_i + mean_i when the output is standardised.
void unstandardise_output(const Model& model, Eigen::VectorXd& y);

// The two without their vectors' standardisation: for a model cut into parts
// (the part that does not start at the input, or does not end at the output).
void drop_input_standardisation(Model& model);
void drop_output_standardisation(Model& model);

}  // namespace meander
