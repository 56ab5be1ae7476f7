// The reference evaluator and integrators against Boost.Odeint 1.74, an
// independent implementation of the same methods: a neural field integrated
// adaptively (runge_kutta_dopri5, controlled and dense output) and with fixed
// steps (euler, runge_kutta4, runge_kutta_dopri5, runge_kutta_cash_karp54).
// Odeint's step control differs from ours (max norm, other growth rules), so
// adaptive results agree to the tolerance, fixed steps to rounding.

#include <gtest/gtest.h>

#ifdef MEANDER_HAVE_BOOST

#include <boost/numeric/odeint.hpp>
// Required with Eigen states: without it odeint compiles and then crashes.
#include <boost/numeric/odeint/external/eigen/eigen.hpp>
#include <cmath>
#include <cstdint>
#include <string>

#include "runtime/evaluate.hpp"
#include "runtime/integrate.hpp"
#include "runtime/model.hpp"
#include "test_support.hpp"

namespace {

namespace ode = boost::numeric::odeint;
using State = Eigen::VectorXd;

constexpr int kWidth = 4;    // incoming state
constexpr int kAugment = 1;  // one zero-filled extra dimension
constexpr int kState = kWidth + kAugment;
constexpr int kHidden1 = 10;
constexpr int kHidden2 = 7;
constexpr double kT0 = 0.0;
constexpr double kT1 = 1.5;

// Deterministic weights without <random>'s implementation-defined distributions
// (splitmix64, Steele et al. 2014), uniform in [-scale, scale).
struct Weights {
    std::uint64_t s = 0x6d65616e646572ULL;
    double next(double scale) {
        std::uint64_t z = (s += 0x9e3779b97f4a7c15ULL);
        z = (z ^ (z >> 30)) * 0xbf58476d1ce4e5b9ULL;
        z = (z ^ (z >> 27)) * 0x94d049bb133111ebULL;
        z ^= z >> 31;
        return scale * (static_cast<double>(z >> 11) * 0x1.0p-53 * 2.0 - 1.0);
    }
    Eigen::MatrixXd matrix(int rows, int cols, double scale) {
        Eigen::MatrixXd m(rows, cols);
        for (int i = 0; i < rows; ++i)
            for (int j = 0; j < cols; ++j) m(i, j) = next(scale);
        return m;
    }
};

// The network, written here without the runtime: tanh(W1 [h; t] + b1),
// softplus(W2 . + b2), W3 . + b3.
struct Net {
    Eigen::MatrixXd w1, w2, w3;
    Eigen::VectorXd b1, b2, b3;
};

Net make_net() {
    Weights g;
    Net n;
    n.w1 = g.matrix(kHidden1, kState + 1, 1.2);
    n.b1 = g.matrix(kHidden1, 1, 0.4);
    n.w2 = g.matrix(kHidden2, kHidden1, 0.9);
    n.b2 = g.matrix(kHidden2, 1, 0.4);
    n.w3 = g.matrix(kState, kHidden2, 0.8);
    n.b3 = g.matrix(kState, 1, 0.3);
    return n;
}

const Net& net() {
    static const Net n = make_net();
    return n;
}

void net_field(double t, const State& h, State& dh) {
    const Net& n = net();
    State x(h.size() + 1);
    x << h, t;
    const State a = (n.w1 * x + n.b1).unaryExpr([](double v) { return std::tanh(v); });
    const State s = (n.w2 * a + n.b2).unaryExpr([](double v) {
        return std::max(v, 0.0) + std::log1p(std::exp(-std::fabs(v)));
    });
    dh = n.w3 * s + n.b3;
}

// Odeint's system signature: (x, dxdt, t).
void odeint_system(const State& x, State& dxdt, double t) { net_field(t, x, dxdt); }

State incoming() {
    State v(kWidth);
    v << 0.3, -0.7, 1.1, 0.05;
    return v;
}

State initial_state() {
    State y = State::Zero(kState);
    y.head(kWidth) = incoming();
    return y;
}

meander::Block dense(const std::string& name, int in, bool time, const Eigen::MatrixXd& w, const Eigen::VectorXd& b,
                     meander::Activation act) {
    meander::Block blk;
    blk.kind = meander::Block::Kind::dense;
    blk.dense.name = name;
    blk.dense.in = in;
    blk.dense.time_input = time;
    blk.dense.out = static_cast<int>(w.rows());
    blk.dense.act = act;
    blk.dense.weight = w;
    blk.dense.bias = b;
    return blk;
}

// The same network as a meander model: one continuous block, augmented by one.
meander::Model model_with(const meander::SolverSpec& spec) {
    std::vector<meander::Block> field;
    field.push_back(dense("f1", kState, true, net().w1, net().b1, meander::Activation::tanh));
    field.push_back(dense("f2", kHidden1, false, net().w2, net().b2, meander::Activation::softplus));
    field.push_back(dense("f3", kHidden2, false, net().w3, net().b3, meander::Activation::identity));
    std::vector<meander::Block> blocks;
    blocks.push_back(meander::test::continuous("flow", kWidth, kAugment, kT0, kT1, std::move(field), spec));
    return meander::test::model("odeint_check", kWidth, kState, std::move(blocks));
}

meander::SolverSpec adaptive(const std::string& method, double tol) {
    return meander::test::adaptive_solver(method, tol, tol, 100000);
}

// n equal steps of an odeint stepper over [kT0, kT1] from the initial state,
// at the times ours uses: t_i = t0 + i h from the index (DEVELOPERS.md).
template <class Stepper>
State odeint_fixed_steps(Stepper stepper, int n) {
    const double h = (kT1 - kT0) / n;
    State x = initial_state();
    for (int i = 0; i < n; ++i) stepper.do_step(odeint_system, x, kT0 + i * h, h);
    return x;
}

double max_diff(const State& a, const State& b) { return (a - b).cwiseAbs().maxCoeff(); }

TEST(OdeintAgreement, FieldOfTheEvaluatorIsTheHandWrittenOne) {
    // eval_field must compute W [h; t] + b layer by layer with time as the last column.
    const meander::Model m = model_with(adaptive("dormand-prince", 1e-6));
    const State y = initial_state();
    State ours, theirs;
    for (double t : {0.0, 0.4, 1.5}) {
        meander::eval_field(m.blocks[0].continuous, t, y, ours);
        net_field(t, y, theirs);
        EXPECT_LE(max_diff(ours, theirs), 1e-15) << "t = " << t;
    }
}

TEST(OdeintAgreement, DormandPrinceAgreesWithOdeintAt1e12) {
    // Odeint 1.74 integrate_adaptive(make_controlled(1e-12, 1e-12, runge_kutta_dopri5)).
    State x = initial_state();
    const std::size_t odeint_steps = ode::integrate_adaptive(
        ode::make_controlled(1e-12, 1e-12, ode::runge_kutta_dopri5<State>()), odeint_system, x, kT0, kT1, 1e-3);
    EXPECT_GT(odeint_steps, 20u);

    const meander::EvalResult r = meander::evaluate(model_with(adaptive("dormand-prince", 1e-12)), incoming());
    ASSERT_EQ(r.status, meander::EvalStatus::ok);
    ASSERT_EQ(r.output.size(), kState);
    // Both solutions carry global errors of order 1e-12 (tolerance-proportional,
    // HNW I, II.4); measured difference 2.4e-13. 1e-10 is the order implied.
    EXPECT_LT(max_diff(r.output, x), 1e-10);

    // Odeint's dense-output driver interpolates to t1 (4th-order Dormand-Prince
    // continuous extension, HNW I, II.6): the same bound (measured 2.4e-13).
    State xd = initial_state();
    ode::integrate_adaptive(ode::make_dense_output(1e-12, 1e-12, ode::runge_kutta_dopri5<State>()), odeint_system, xd,
                            kT0, kT1, 1e-3);
    EXPECT_LT(max_diff(r.output, xd), 1e-10);

    // The other fifth-order pairs converge to the same solution (measured
    // 2.5e-13 tsitouras, 1.6e-12 cash-karp).
    for (const char* method : {"tsitouras", "cash-karp"}) {
        const meander::EvalResult o = meander::evaluate(model_with(adaptive(method, 1e-12)), incoming());
        ASSERT_EQ(o.status, meander::EvalStatus::ok) << method;
        EXPECT_LT(max_diff(o.output, x), 1e-10) << method;
    }
    // A loose run is measurably off (2.6e-2): the comparison is not blind.
    const meander::EvalResult loose = meander::evaluate(model_with(adaptive("dormand-prince", 1e-3)), incoming());
    ASSERT_EQ(loose.status, meander::EvalStatus::ok);
    EXPECT_GT(max_diff(loose.output, x), 1e-8);
}

TEST(OdeintAgreement, Rk4FixedStepsMatchOdeintsRungeKutta4) {
    const int n = 60;
    const State x = odeint_fixed_steps(ode::runge_kutta4<State>(), n);

    meander::SolverSpec spec = meander::test::fixed_solver("rk4", n);
    const meander::EvalResult r = meander::evaluate(model_with(spec), incoming());
    ASSERT_EQ(r.status, meander::EvalStatus::ok);
    EXPECT_EQ(r.stats.field_evals, 4L * n);
    EXPECT_EQ(r.stats.steps_accepted, n);
    // Only the order of floating-point sums differs: ~1e-16 per step (measured 1.6e-15 after 60).
    EXPECT_LT(max_diff(r.output, x), 1e-14);

    // rk4 with half the steps is off by far more than that (measured 1.3e-7).
    spec.steps = n / 2;
    const meander::EvalResult other = meander::evaluate(model_with(spec), incoming());
    EXPECT_GT(max_diff(other.output, x), 1e-11);
}

// One step of each tableau against odeint's own coefficients: integrate()
// over [t_i, t_i+1] with a first step beyond the interval (clipped to it) and
// tolerances so loose that the single attempt is accepted.
template <class Stepper>
double worst_single_step_diff(const std::string& method, Stepper stepper, int n) {
    const double h = (kT1 - kT0) / n;
    const meander::Field f = [](double t, const State& y, State& dy) { net_field(t, y, dy); };
    State ours = initial_state(), theirs = initial_state();
    double worst = 0.0;
    for (int i = 0; i < n; ++i) {
        const double ta = kT0 + i * h, tb = kT0 + (i + 1) * h;
        meander::SolverSpec spec;
        spec.method = method;
        spec.rtol = spec.atol = 1e30;
        spec.max_steps = 1;
        spec.first_step = 2 * h;
        meander::IntegrateStats stats;
        if (meander::integrate(f, ta, tb, ours, spec, stats) != meander::IntegrateStatus::ok || stats.steps_accepted != 1)
            return HUGE_VAL;
        stepper.do_step(odeint_system, theirs, ta, tb - ta);
        worst = std::max(worst, max_diff(ours, theirs));
        theirs = ours;  // compare one step at a time
    }
    return worst;
}

TEST(OdeintAgreement, SingleStepsMatchOdeintsTableaux) {
    // runge_kutta_dopri5 and runge_kutta_cash_karp54 hold the published
    // coefficients independently of runtime/tableau.cpp; one step of each
    // agrees to rounding (measured 2.2e-16 and 4.4e-16 at h = 0.05).
    EXPECT_LT(worst_single_step_diff("dormand-prince", ode::runge_kutta_dopri5<State>(), 30), 2e-15);
    EXPECT_LT(worst_single_step_diff("cash-karp", ode::runge_kutta_cash_karp54<State>(), 30), 2e-15);
    // Fixed-step methods through evaluate, stepped as odeint steps them.
    const State x = odeint_fixed_steps(ode::euler<State>(), 30);
    const meander::EvalResult r = meander::evaluate(model_with(meander::test::fixed_solver("euler", 30)), incoming());
    ASSERT_EQ(r.status, meander::EvalStatus::ok);
    EXPECT_LT(max_diff(r.output, x), 1e-14);  // measured: bit for bit
}

TEST(OdeintAgreement, SingleStepComparisonCatchesAWrongMethod) {
    // Cash-Karp's step set against odeint's Dormand-Prince: both fifth order,
    // different truncation errors, so they differ by far more than rounding
    // (measured 9.2e-10 per step).
    EXPECT_GT(worst_single_step_diff("cash-karp", ode::runge_kutta_dopri5<State>(), 30), 1e-12);
}

}  // namespace

#else

TEST(OdeintAgreement, NeedsBoost) { GTEST_SKIP() << "Boost headers not found: Boost.Odeint comparison not built"; }

#endif
