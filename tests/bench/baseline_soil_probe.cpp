// samples/soil_probe written by hand, the way a competent engineer would
// without meander: Eigen fixed-size matrices with Eigen's vectorised array
// functions for the activations, Bogacki-Shampine 3(2) as Boost.Odeint's
// explicit_error_generic_rk with the tableau (Appl. Math. Lett. 2(4), 1989),
// integrated backwards from t = 1 to 0 under the description's step rules
// (rtol 1e-3, atol 1e-4, at most 40 attempts, first step 0.1, integral
// controller, safety 0.9, factors 0.2 to 10) written out in
// baseline_stepping.hpp, float32 like the emitted float32 code. The weights
// come from the sample's weights file through the compiler's reader, with the
// standardisation the description states: (x - x_mean) / x_std in,
// y * y_std + y_mean out.
//
// The generic stepper is not first-same-as-last: it evaluates the fourth stage
// at (t + h, y_new) but does not hand it back. The field keeps its last
// result, which after a step is exactly that stage, so an accepted step reuses
// it as the next step's first stage, as the method intends (3 evaluations per
// attempt, like the emitted code).
#include <Eigen/Core>
#include <boost/numeric/odeint.hpp>
#include <boost/numeric/odeint/external/eigen/eigen.hpp>

#include "baseline_stepping.hpp"
#include "baseline_support.hpp"

namespace meander_bench::baseline {

namespace {

namespace odeint = boost::numeric::odeint;

using Lifted = Eigen::Matrix<float, 10, 1>;
using State = Eigen::Matrix<float, 12, 1>;  // 10 lifted values and 2 augmented zeros
using Hidden = Eigen::Matrix<float, 14, 1>;
using BogackiShampine = odeint::explicit_error_generic_rk<4, 3, 3, 2, State, float, State, float, odeint::vector_space_algebra>;

BogackiShampine bogacki_shampine() {
    const BogackiShampine::coef_a_type a = boost::fusion::make_vector(
        boost::array<float, 1>{{1.0f / 2}}, boost::array<float, 2>{{0.0f, 3.0f / 4}},
        boost::array<float, 3>{{2.0f / 9, 1.0f / 3, 4.0f / 9}});
    const BogackiShampine::coef_b_type b = {{2.0f / 9, 1.0f / 3, 4.0f / 9, 0.0f}};
    // The stepper's error weights are b - b_hat (b_hat = 7/24, 1/4, 1/3, 1/8), as odeint's own
    // Cash-Karp passes them: err = dt * sum (b_i - b_hat_i) k_i.
    const BogackiShampine::coef_b_type e = {{-5.0f / 72, 1.0f / 12, 1.0f / 9, -1.0f / 8}};
    const BogackiShampine::coef_c_type c = {{0.0f, 1.0f / 2, 3.0f / 4, 1.0f}};
    return BogackiShampine(a, b, e, c);
}

struct SoilProbe {
    Eigen::Matrix<float, 5, 1> x_mean, x_std;
    Eigen::Matrix<float, 2, 1> y_mean, y_std;
    Eigen::Matrix<float, 10, 5> lift_w;
    Lifted lift_b;
    Eigen::Matrix<float, 10, 10> p1_w, p2_w;
    Lifted p1_b, p2_b;
    Eigen::Matrix<float, 14, 12> s1_w;  // the field's first layer; time is its 13th input
    Hidden s1_t, s1_b;
    Eigen::Matrix<float, 12, 14> s2_w;
    State s2_b;
    Eigen::Matrix<float, 2, 12> head_w;
    Eigen::Matrix<float, 2, 1> head_b;
    mutable BogackiShampine stepper = bogacki_shampine();  // scratch stages only

    explicit SoilProbe(const Weights& w) {
        w.get("x_mean", x_mean);
        w.get("x_std", x_std);
        w.get("y_mean", y_mean);
        w.get("y_std", y_std);
        w.get("lift.weight", lift_w);
        w.get("lift.bias", lift_b);
        w.get("p1.weight", p1_w);
        w.get("p1.bias", p1_b);
        w.get("p2.weight", p2_w);
        w.get("p2.bias", p2_b);
        Eigen::Matrix<float, 14, 13> s1;
        w.get("s1.weight", s1);
        s1_w = s1.leftCols<12>();
        s1_t = s1.col(12);
        w.get("s1.bias", s1_b);
        w.get("s2.weight", s2_w);
        w.get("s2.bias", s2_b);
        w.get("head.weight", head_w);
        w.get("head.bias", head_b);
    }

    // dh/dt = s2(softplus(s1([h; t]))); softplus as max(z, 0) + log1p(exp(-|z|)).
    void field(const State& h, State& dh, float t) const {
        const Eigen::Array<float, 14, 1> z = (s1_w * h + s1_t * t + s1_b).array();
        const Hidden a = (z.max(0.0f) + (-z.abs()).exp().log1p()).matrix();
        dh.noalias() = s2_w * a + s2_b;
    }

    bool infer(const float* input, float* output, std::uint32_t& field_evals) const {
        const Eigen::Matrix<float, 5, 1> x =
            ((Eigen::Map<const Eigen::Matrix<float, 5, 1>>(input) - x_mean).array() / x_std.array()).matrix();
        const Lifted lifted = (lift_w * x + lift_b).array().tanh().matrix();
        // silu(z) = z / (1 + exp(-z))
        const Eigen::Array<float, 10, 1> z = (p1_w * lifted + p1_b).array();
        const Lifted pre = lifted + p2_w * (z / (1.0f + (-z).exp())).matrix() + p2_b;
        State h;
        h.head<10>() = pre;
        h.tail<2>().setZero();

        std::uint32_t evals = 0;
        State last;  // the field's last result
        auto rhs = [&](const State& y, State& dy, float t) {
            field(y, dy, t);
            last = dy;
            ++evals;
        };
        auto attempt = [&](const State& y, const State& k, float t, float dt, State& y_new, State& k_new, State& err) {
            stepper.do_step(rhs, y, k, t, y_new, dt, err);
            k_new = last;  // the fourth stage, f(t + dt, y_new)
        };
        const StepRules rules{1e-3f, 1e-4f, 40, 0.1f, 0.9f, 0.2f, 10.0f, 2};
        const bool ok = integrate_adaptive(rhs, attempt, 1.0f, 0.0f, h, rules);
        field_evals = evals;

        Eigen::Map<Eigen::Matrix<float, 2, 1>> y(output);
        y = ((head_w * h + head_b).array() * y_std.array()).matrix() + y_mean;
        return ok;
    }
};

}  // namespace

void register_soil_probe(const Sample& s, const Weights& w) {
    const auto model = std::make_shared<const SoilProbe>(w);
    // MACs: 350 per field evaluation (s1 13 x 14, s2 14 x 12); lift 50, pre 200 and head 24 outside.
    register_inference<float>(s, "baseline/" + s.name, 5, 2, 13 * 14 + 14 * 12, 5 * 10 + 2 * 10 * 10 + 12 * 2,
                              [model](const float* in, float* out, std::uint32_t& evals) {
                                  return model->infer(in, out, evals);
                              });
}

}  // namespace meander_bench::baseline
