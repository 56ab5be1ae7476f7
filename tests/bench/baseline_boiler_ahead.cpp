// samples/boiler_ahead written by hand, the way a competent engineer would
// without meander: Eigen fixed-size matrices with Eigen's vectorised array
// functions for the activations, Boost.Odeint's runge_kutta_dopri5 stepper
// under the description's step rules (rtol 1e-3, atol 1e-4, at most 24
// attempts, integral controller, safety 0.9, factors 0.2 to 10, initial step
// selected) written out in baseline_stepping.hpp, float32 like the emitted
// float32 code. The weights come from the sample's weights file through the
// compiler's reader.
#include <Eigen/Core>
#include <boost/numeric/odeint.hpp>
#include <boost/numeric/odeint/external/eigen/eigen.hpp>

#include "baseline_stepping.hpp"
#include "baseline_support.hpp"

namespace meander_bench::baseline {

namespace {

namespace odeint = boost::numeric::odeint;

using State = Eigen::Matrix<float, 10, 1>;
using Hidden = Eigen::Matrix<float, 12, 1>;

struct BoilerAhead {
    Eigen::Matrix<float, 10, 6> lift_w;
    State lift_b;
    Eigen::Matrix<float, 12, 10> g1_w;  // the field's first layer; time is its 11th input
    Hidden g1_t, g1_b;
    Eigen::Matrix<float, 12, 12> m1_w, m2_w;
    Hidden m1_b, m2_b;
    Eigen::Matrix<float, 10, 12> g2_w;
    State g2_b;
    Eigen::Matrix<float, 2, 10> head_w;
    Eigen::Matrix<float, 2, 1> head_b;
    mutable odeint::runge_kutta_dopri5<State, float, State, float, odeint::vector_space_algebra> dopri5;  // scratch stages only

    explicit BoilerAhead(const Weights& w) {
        w.get("lift.weight", lift_w);
        w.get("lift.bias", lift_b);
        Eigen::Matrix<float, 12, 11> g1;
        w.get("g1.weight", g1);
        g1_w = g1.leftCols<10>();
        g1_t = g1.col(10);
        w.get("g1.bias", g1_b);
        w.get("m1.weight", m1_w);
        w.get("m1.bias", m1_b);
        w.get("m2.weight", m2_w);
        w.get("m2.bias", m2_b);
        w.get("g2.weight", g2_w);
        w.get("g2.bias", g2_b);
        w.get("head.weight", head_w);
        w.get("head.bias", head_b);
    }

    // dh/dt = g2(mix(tanh(g1([h; t])))), mix(u) = u + m2(softplus(m1 u)).
    void field(const State& h, State& dh, float t) const {
        const Hidden u = (g1_w * h + g1_t * t + g1_b).array().tanh().matrix();
        const Eigen::Array<float, 12, 1> z = (m1_w * u + m1_b).array();
        const Hidden a = (z.max(0.0f) + (-z.abs()).exp().log1p()).matrix();
        const Hidden mixed = u + m2_w * a + m2_b;
        dh.noalias() = g2_w * mixed + g2_b;
    }

    bool infer(const float* input, float* output, std::uint32_t& field_evals) const {
        const Eigen::Map<const Eigen::Matrix<float, 6, 1>> x(input);
        State h = (lift_w * x + lift_b).array().tanh().matrix();

        std::uint32_t evals = 0;
        auto rhs = [&](const State& y, State& dy, float t) {
            field(y, dy, t);
            ++evals;
        };
        auto attempt = [&](const State& y, const State& k, float t, float dt, State& y_new, State& k_new, State& err) {
            dopri5.do_step(rhs, y, k, t, y_new, k_new, dt, err);
        };
        const StepRules rules{1e-3f, 1e-4f, 24, 0.0f, 0.9f, 0.2f, 10.0f, 4};
        const bool ok = integrate_adaptive(rhs, attempt, 0.0f, 1.0f, h, rules);
        field_evals = evals;

        Eigen::Map<Eigen::Matrix<float, 2, 1>> y(output);
        y = head_w * h + head_b;
        return ok;
    }
};

}  // namespace

void register_boiler_ahead(const Sample& s, const Weights& w) {
    const auto model = std::make_shared<const BoilerAhead>(w);
    // MACs: 540 per field evaluation (g1 11 x 12, m1 and m2 12 x 12, g2 12 x 10); lift 60 and head 20 outside.
    register_inference<float>(s, "baseline/" + s.name, 6, 2, 11 * 12 + 2 * 12 * 12 + 12 * 10, 6 * 10 + 10 * 2,
                              [model](const float* in, float* out, std::uint32_t& evals) {
                                  return model->infer(in, out, evals);
                              });
}

}  // namespace meander_bench::baseline
