#include "vjp.hpp"

#include <cmath>

#include "evaluate.hpp"
#include "parameters.hpp"

namespace meander {

namespace {

using RowMajor = Eigen::Matrix<double, Eigen::Dynamic, Eigen::Dynamic, Eigen::RowMajor>;

double sigmoid(double x) {
    if (x >= 0.0) return 1.0 / (1.0 + std::exp(-x));
    const double ex = std::exp(x);
    return ex / (1.0 + ex);
}

void dense_backward(const Dense& d, double t, const LayerTape& tape, const Eigen::VectorXd& ybar, Eigen::VectorXd& xbar,
                    Eigen::Ref<Eigen::VectorXd> grad) {
    Eigen::VectorXd gz(d.out);
    if (d.act == Activation::softmax) {
        // y_i = e_i / sum e: dL/dz_i = y_i (ybar_i - ybar . y)
        gz = tape.y.cwiseProduct((ybar.array() - ybar.dot(tape.y)).matrix());
    } else {
        for (Eigen::Index i = 0; i < gz.size(); ++i)
            gz[i] = ybar[i] * activation_derivative(d.act, tape.z[i], tape.y[i], d.act_param);
    }
    const Eigen::Index nw = static_cast<Eigen::Index>(d.out) * d.in_total();
    Eigen::Map<RowMajor> gw(grad.data(), d.out, d.in_total());
    gw.leftCols(d.in).noalias() += gz * tape.x.transpose();
    if (d.time_input) gw.col(d.in) += t * gz;
    if (d.has_bias) grad.segment(nw, d.out) += gz;
    xbar.noalias() = d.weight.leftCols(d.in).transpose() * gz;
}

}  // namespace

double activation_derivative(Activation a, double z, double y, double param) {
    switch (a) {
    case Activation::identity:
    case Activation::softmax: return 1.0;
    case Activation::relu: return z > 0.0 ? 1.0 : 0.0;
    case Activation::leaky_relu: return z >= 0.0 ? 1.0 : param;
    case Activation::tanh: return 1.0 - y * y;
    case Activation::sigmoid: return y * (1.0 - y);
    case Activation::softplus: return sigmoid(z);
    case Activation::silu: {
        const double s = sigmoid(z);
        return s * (1.0 + z * (1.0 - s));
    }
    case Activation::gelu: {
        // y = z/2 (1 + tanh u), u = k (z + 0.044715 z^3), k = sqrt(2/pi)
        const double k = 0.7978845608028654;
        const double th = std::tanh(k * (z + 0.044715 * z * z * z));
        return 0.5 * (1.0 + th) + 0.5 * z * (1.0 - th * th) * k * (1.0 + 3.0 * 0.044715 * z * z);
    }
    case Activation::elu: return z > 0.0 ? 1.0 : param * std::exp(z);
    }
    return 1.0;
}

void layer_forward(const Block& b, double t, const Eigen::VectorXd& x, LayerTape& tape) {
    tape.x = x;
    if (b.kind == Block::Kind::residual) {
        Eigen::VectorXd g;
        sequence_forward(b.residual.body, t, x, tape.body, g);
        tape.y = x + g;
        return;
    }
    // The evaluator's own two halves, so the recorded output is evaluate's.
    dense_affine(b.dense, t, x, tape.z);
    tape.y = tape.z;
    dense_activate(b.dense, tape.y);
}

void layer_backward(const Block& b, double t, const LayerTape& tape, const Eigen::VectorXd& ybar, Eigen::VectorXd& xbar,
                    Eigen::Ref<Eigen::VectorXd> grad) {
    if (b.kind == Block::Kind::residual) {
        Eigen::VectorXd gbar;
        sequence_backward(b.residual.body, t, tape.body, ybar, gbar, grad);
        xbar = ybar + gbar;  // y = x + g(x)
        return;
    }
    dense_backward(b.dense, t, tape, ybar, xbar, grad);
}

void sequence_forward(const std::vector<Block>& blocks, double t, const Eigen::VectorXd& x, std::vector<LayerTape>& tape,
                      Eigen::VectorXd& y) {
    tape.resize(blocks.size());
    const Eigen::VectorXd* cur = &x;
    for (std::size_t i = 0; i < blocks.size(); ++i) {
        layer_forward(blocks[i], t, *cur, tape[i]);
        cur = &tape[i].y;
    }
    y = *cur;
}

void sequence_backward(const std::vector<Block>& blocks, double t, const std::vector<LayerTape>& tape,
                       const Eigen::VectorXd& ybar, Eigen::VectorXd& xbar, Eigen::Ref<Eigen::VectorXd> grad) {
    std::vector<Eigen::Index> offset(blocks.size() + 1, 0);
    for (std::size_t i = 0; i < blocks.size(); ++i) offset[i + 1] = offset[i] + block_param_count(blocks[i]);
    Eigen::VectorXd bar = ybar;
    Eigen::VectorXd prev;
    for (std::size_t i = blocks.size(); i-- > 0;) {
        layer_backward(blocks[i], t, tape[i], bar, prev, grad.segment(offset[i], offset[i + 1] - offset[i]));
        bar.swap(prev);
    }
    xbar = bar;
}

void field_vjp(const Continuous& c, double t, const Eigen::VectorXd& y, const Eigen::VectorXd& a, Eigen::VectorXd& ybar,
               Eigen::Ref<Eigen::VectorXd> grad, Eigen::VectorXd* value) {
    std::vector<LayerTape> tape;
    Eigen::VectorXd out;
    sequence_forward(c.field, t, y, tape, out);
    sequence_backward(c.field, t, tape, a, ybar, grad);
    if (value) *value = out;
}

}  // namespace meander
