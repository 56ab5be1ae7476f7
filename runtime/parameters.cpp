#include "parameters.hpp"

namespace meander {

namespace {

using RowMajor = Eigen::Matrix<double, Eigen::Dynamic, Eigen::Dynamic, Eigen::RowMajor>;

// for_each_dense with a mutable layer.
template <class F>
void for_each_dense_mut(std::vector<Block>& blocks, F&& f) {
    for (Block& b : blocks) {
        switch (b.kind) {
        case Block::Kind::dense: f(b.dense); break;
        case Block::Kind::residual: for_each_dense_mut(b.residual.body, f); break;
        case Block::Kind::continuous: for_each_dense_mut(b.continuous.field, f); break;
        }
    }
}

Eigen::Index layer_count(const Dense& d) { return static_cast<Eigen::Index>(d.out) * (d.in_total() + (d.has_bias ? 1 : 0)); }

}  // namespace

std::vector<ParamSlot> param_layout(const Model& model) {
    std::vector<ParamSlot> slots;
    Eigen::Index at = 0;
    for_each_dense(model.blocks, [&](const Dense& d) {
        ParamSlot s;
        s.layer = d.name;
        s.weight_offset = at;
        s.rows = d.out;
        s.cols = d.in_total();
        s.bias_offset = at + static_cast<Eigen::Index>(d.out) * d.in_total();
        s.has_bias = d.has_bias;
        at += layer_count(d);
        slots.push_back(s);
    });
    return slots;
}

Eigen::Index sequence_param_count(const std::vector<Block>& blocks) {
    Eigen::Index n = 0;
    for_each_dense(blocks, [&](const Dense& d) { n += layer_count(d); });
    return n;
}

Eigen::Index block_param_count(const Block& block) {
    switch (block.kind) {
    case Block::Kind::residual: return sequence_param_count(block.residual.body);
    case Block::Kind::continuous: return sequence_param_count(block.continuous.field);
    case Block::Kind::dense: break;
    }
    return layer_count(block.dense);
}

Eigen::Index param_count(const Model& model) { return sequence_param_count(model.blocks); }

Eigen::VectorXd get_params(const Model& model) {
    Eigen::VectorXd theta(param_count(model));
    Eigen::Index at = 0;
    for_each_dense(model.blocks, [&](const Dense& d) {
        const Eigen::Index nw = static_cast<Eigen::Index>(d.out) * d.in_total();
        Eigen::Map<RowMajor>(theta.data() + at, d.out, d.in_total()) = d.weight;
        at += nw;
        if (d.has_bias) {
            theta.segment(at, d.out) = d.bias;
            at += d.out;
        }
    });
    return theta;
}

void set_params(Model& model, const Eigen::VectorXd& theta) {
    Eigen::Index at = 0;
    for_each_dense_mut(model.blocks, [&](Dense& d) {
        const Eigen::Index nw = static_cast<Eigen::Index>(d.out) * d.in_total();
        d.weight = Eigen::Map<const RowMajor>(theta.data() + at, d.out, d.in_total());
        at += nw;
        if (d.has_bias) {
            d.bias = theta.segment(at, d.out);
            at += d.out;
        }
    });
}

}  // namespace meander
