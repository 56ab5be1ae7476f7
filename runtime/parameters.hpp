// Every weight and bias of a model as one flat vector, and back. Gradients,
// the optimiser and the adjoint's dL/dtheta all use this one layout.
#pragma once

#include <Eigen/Dense>
#include <string>
#include <vector>

#include "model.hpp"

namespace meander {

// Where one dense layer's tensors sit in the flat vector: the weight row by
// row (out x in_total), then the bias (out values, absent without a bias).
struct ParamSlot {
    std::string layer;
    Eigen::Index weight_offset = 0;
    int rows = 0;
    int cols = 0;
    Eigen::Index bias_offset = 0;
    bool has_bias = true;
};

// Every dense layer in for_each_dense order (description order, through
// residual bodies and fields).
std::vector<ParamSlot> param_layout(const Model& model);
Eigen::Index param_count(const Model& model);

Eigen::VectorXd get_params(const Model& model);
void set_params(Model& model, const Eigen::VectorXd& theta);

// Parameters a list of blocks holds (a field's, a residual body's).
Eigen::Index sequence_param_count(const std::vector<Block>& blocks);
Eigen::Index block_param_count(const Block& block);

}  // namespace meander
