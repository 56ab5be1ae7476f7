// samples/fan_balance written by hand, the way a competent engineer would
// without meander: Eigen fixed-size matrices with Eigen's vectorised array
// functions for the activations, Boost.Odeint's runge_kutta4 with the
// description's 8 steps over [0, 1], float32 like the emitted float32 code.
// The weights come from the sample's .npz through the compiler's reader.
#include <Eigen/Core>
#include <boost/numeric/odeint.hpp>
#include <boost/numeric/odeint/external/eigen/eigen.hpp>

#include "baseline_support.hpp"

namespace meander_bench::baseline {

namespace {

namespace odeint = boost::numeric::odeint;

using State = Eigen::Matrix<float, 14, 1>;  // 12 lifted values and 2 augmented zeros

struct FanBalance {
    Eigen::Matrix<float, 12, 8> lift_w;
    Eigen::Matrix<float, 12, 1> lift_b;
    Eigen::Matrix<float, 16, 14> f1_w;  // the field's first layer; time is its 15th input
    Eigen::Matrix<float, 16, 1> f1_t, f1_b;
    Eigen::Matrix<float, 14, 16> f2_w;
    Eigen::Matrix<float, 14, 1> f2_b;
    Eigen::Matrix<float, 14, 14> r1_w, r2_w;
    Eigen::Matrix<float, 14, 1> r1_b, r2_b;
    Eigen::Matrix<float, 4, 14> head_w;
    Eigen::Matrix<float, 4, 1> head_b;
    mutable odeint::runge_kutta4<State, float, State, float, odeint::vector_space_algebra> rk4;  // scratch stages only

    explicit FanBalance(const Weights& w) {
        w.get("lift.weight", lift_w);
        w.get("lift.bias", lift_b);
        Eigen::Matrix<float, 16, 15> f1;
        w.get("f1.weight", f1);
        f1_w = f1.leftCols<14>();
        f1_t = f1.col(14);
        w.get("f1.bias", f1_b);
        w.get("f2.weight", f2_w);
        w.get("f2.bias", f2_b);
        w.get("r1.weight", r1_w);
        w.get("r1.bias", r1_b);
        w.get("r2.weight", r2_w);
        w.get("r2.bias", r2_b);
        w.get("head.weight", head_w);
        w.get("head.bias", head_b);
    }

    // dh/dt = f2(softplus(f1([h; t]))); softplus as max(z, 0) + log1p(exp(-|z|)).
    void field(const State& h, State& dh, float t) const {
        const Eigen::Array<float, 16, 1> z = (f1_w * h + f1_t * t + f1_b).array();
        const Eigen::Matrix<float, 16, 1> a = (z.max(0.0f) + (-z.abs()).exp().log1p()).matrix();
        dh.noalias() = f2_w * a + f2_b;
    }

    bool infer(const float* input, float* output, std::uint32_t& field_evals) const {
        const Eigen::Map<const Eigen::Matrix<float, 8, 1>> x(input);
        State h;
        h.head<12>() = (lift_w * x + lift_b).array().tanh().matrix();
        h.tail<2>().setZero();

        std::uint32_t evals = 0;
        auto rhs = [&](const State& y, State& dy, float t) {
            field(y, dy, t);
            ++evals;
        };
        odeint::integrate_n_steps(boost::ref(rk4), rhs, h, 0.0f, 1.0f / 8.0f, 8);
        field_evals = evals;

        const Eigen::Matrix<float, 14, 1> r1 = (r1_w * h + r1_b).array().tanh().matrix();
        const State tidy = h + r2_w * r1 + r2_b;
        const Eigen::Array<float, 4, 1> logits = (head_w * tidy + head_b).array();
        const Eigen::Array<float, 4, 1> e = (logits - logits.maxCoeff()).exp();
        Eigen::Map<Eigen::Matrix<float, 4, 1>> y(output);
        y = (e / e.sum()).matrix();
        return h.allFinite() && tidy.allFinite();
    }
};

}  // namespace

void register_fan_balance(const Sample& s, const Weights& w) {
    const auto model = std::make_shared<const FanBalance>(w);
    // MACs: 464 per field evaluation (f1 15 x 16, f2 16 x 14); lift 96, tidy 392 and head 56 outside.
    register_inference<float>(s, "baseline/" + s.name, 8, 4, 15 * 16 + 16 * 14, 8 * 12 + 2 * 14 * 14 + 14 * 4,
                              [model](const float* in, float* out, std::uint32_t& evals) {
                                  return model->infer(in, out, evals);
                              });
}

}  // namespace meander_bench::baseline
