// The reference evaluator and the activations (runtime/evaluate.cpp,
// runtime/activation.cpp) against values from outside the code: the
// activation table of the reference sheet (computed with NumPy/SciPy),
// Eigen's matrix exponential, and the same model computed again here with
// plain loops and a hand-written classic RK4.
#include <gtest/gtest.h>

#include <unsupported/Eigen/MatrixFunctions>

#include <cfloat>
#include <cmath>
#include <cstdint>
#include <limits>
#include <string>
#include <vector>

#include "runtime/activation.hpp"
#include "runtime/evaluate.hpp"
#include "test_support.hpp"

namespace meander {
namespace {

// ---- activations -----------------------------------------------------------

struct ActRow {
    Activation act;
    double param;
    double at_m1, at_0, at_1, at_2;  // f(-1), f(0), f(1), f(2)
};

// Reference sheet, "Activations (double, computed)"; gelu is the tanh form
// (Hendrycks & Gimpel 2016), elu with alpha 1.
const ActRow kActTable[] = {
    {Activation::tanh, 0.0, -0.76159415595576485, 0.0, 0.76159415595576485, 0.9640275800758169},
    {Activation::sigmoid, 0.0, 0.2689414213699951, 0.5, 0.7310585786300049, 0.88079707797788231},
    {Activation::softplus, 0.0, 0.31326168751822286, 0.69314718055994529, 1.3132616875182228, 2.1269280110429727},
    {Activation::gelu, 0.0, -0.15880800939172324, 0.0, 0.84119199060827676, 1.954597694087775},
    {Activation::silu, 0.0, -0.2689414213699951, 0.0, 0.7310585786300049, 1.7615941559557646},
    {Activation::elu, 1.0, -0.63212055882855767, 0.0, 1.0, 2.0},
};

TEST(Activation, DoubleMatchesReferenceTable) {
    for (const ActRow& r : kActTable) {
        SCOPED_TRACE(std::string(activation_name(r.act)));
        const double xs[] = {-1.0, 0.0, 1.0, 2.0};
        const double want[] = {r.at_m1, r.at_0, r.at_1, r.at_2};
        for (int i = 0; i < 4; ++i) {
            // A few ulps: the table is correctly rounded, libm need not be.
            EXPECT_NEAR(activate(r.act, xs[i], r.param), want[i], 4e-16 * std::max(1.0, std::fabs(want[i])));
        }
    }
}

TEST(Activation, FloatMatchesReferenceTable) {
    for (const ActRow& r : kActTable) {
        SCOPED_TRACE(std::string(activation_name(r.act)));
        const float xs[] = {-1.0f, 0.0f, 1.0f, 2.0f};
        const double want[] = {r.at_m1, r.at_0, r.at_1, r.at_2};
        for (int i = 0; i < 4; ++i) {
            const float got = activate(r.act, xs[i], static_cast<float>(r.param));
            EXPECT_NEAR(static_cast<double>(got), want[i], 4.0 * double{FLT_EPSILON} * std::max(1.0, std::fabs(want[i])));
        }
    }
}

TEST(Activation, PiecewiseLinear) {
    // Definitions (LANGUAGE.md): relu max(x, 0); leaky-relu slope*x below 0; identity.
    EXPECT_EQ(activate(Activation::relu, -2.0, 0.0), 0.0);
    EXPECT_EQ(activate(Activation::relu, 3.5, 0.0), 3.5);
    EXPECT_DOUBLE_EQ(activate(Activation::leaky_relu, -2.0, 0.01), -0.02);
    EXPECT_EQ(activate(Activation::leaky_relu, 2.0, 0.01), 2.0);
    EXPECT_FLOAT_EQ(activate(Activation::leaky_relu, -2.0f, 0.2f), -0.4f);
    EXPECT_EQ(activate(Activation::identity, -7.25, 0.0), -7.25);
    // elu alpha scales the negative side: alpha*(e^x - 1).
    EXPECT_NEAR(activate(Activation::elu, -1.0, 0.5), 0.5 * -0.63212055882855767, 1e-16);
}

TEST(Activation, ExtremesStayFinite) {
    // Stable forms (reference sheet): softplus(100) = 100 + log1p(e^-100) rounds to 100;
    // sigmoid(-100) = e^-100/(1+e^-100) = 3.7200759760208361e-44 (e^-100, exact to double).
    EXPECT_EQ(activate(Activation::softplus, 100.0, 0.0), 100.0);
    EXPECT_EQ(activate(Activation::softplus, 100.0f, 0.0f), 100.0f);
    EXPECT_NEAR(activate(Activation::softplus, -100.0, 0.0), 3.7200759760208361e-44, 1e-58);
    EXPECT_EQ(activate(Activation::sigmoid, 100.0, 0.0), 1.0);
    EXPECT_EQ(activate(Activation::sigmoid, 100.0f, 0.0f), 1.0f);
    EXPECT_NEAR(activate(Activation::sigmoid, -100.0, 0.0), 3.7200759760208361e-44, 1e-58);
    EXPECT_EQ(activate(Activation::elu, -100.0, 1.0), -1.0);
    EXPECT_EQ(activate(Activation::gelu, 100.0, 0.0), 100.0);
    EXPECT_EQ(activate(Activation::silu, 100.0, 0.0), 100.0);
    EXPECT_NEAR(activate(Activation::tanh, 20.0f, 0.0f), 1.0f, FLT_EPSILON);

    const Activation all[] = {Activation::identity, Activation::relu,     Activation::leaky_relu,
                              Activation::tanh,     Activation::sigmoid,  Activation::softplus,
                              Activation::silu,     Activation::gelu,     Activation::elu};
    for (Activation a : all) {
        SCOPED_TRACE(std::string(activation_name(a)));
        for (double x = -1000.0; x <= 1000.0; x += 0.75) {
            EXPECT_TRUE(std::isfinite(activate(a, x, 0.5)));
            EXPECT_TRUE(std::isfinite(activate(a, static_cast<float>(x), 0.5f)));
        }
        // Bounded activations stay in range at both ends, in float too.
        if (a == Activation::sigmoid) {
            for (float x : {-100.0f, -88.0f, 88.0f, 100.0f}) {
                const float s = activate(a, x, 0.0f);
                EXPECT_GE(s, 0.0f);
                EXPECT_LE(s, 1.0f);
            }
        }
        if (a == Activation::softplus) {
            EXPECT_GE(activate(a, -100.0f, 0.0f), 0.0f);
            EXPECT_LT(activate(a, -100.0f, 0.0f), 1e-40f);
        }
    }
}

// ---- models built by hand --------------------------------------------------

// Deterministic weights in [-0.5, 0.5) from a 64-bit LCG (Knuth, MMIX constants).
struct Lcg {
    std::uint64_t s = 0x2545F4914F6CDD1DULL;
    double next() {
        s = s * 6364136223846793005ULL + 1442695040888963407ULL;
        return static_cast<double>(s >> 11) / 9007199254740992.0 - 0.5;
    }
};

Block dense_block(const std::string& name, int in, int out, Activation act, Lcg& rng, bool time = false,
                  bool bias = true, double scale = 1.0) {
    Dense d = test::dense_layer(name, in, out, act, time, bias);
    d.act_param = act == Activation::elu ? 1.0 : 0.01;
    d.weight.resize(out, d.in_total());
    for (int i = 0; i < out; ++i)
        for (int j = 0; j < d.in_total(); ++j) d.weight(i, j) = scale * rng.next();
    if (bias) {
        d.bias.resize(out);
        for (int i = 0; i < out; ++i) d.bias[i] = rng.next();
    }
    return test::dense_block(std::move(d));
}

SolverSpec rk4_steps(int n) { return test::fixed_solver("rk4", n); }

const auto adaptive = test::adaptive_solver;

// ---- the same computation with plain loops -----------------------------------

using Vec = std::vector<double>;

double plain_act(Activation a, double x, double p) {
    // Textbook forms, deliberately not the stable ones (inputs here are moderate).
    switch (a) {
    case Activation::identity: return x;
    case Activation::relu: return x > 0 ? x : 0;
    case Activation::leaky_relu: return x > 0 ? x : p * x;
    case Activation::tanh: return std::tanh(x);
    case Activation::sigmoid: return 1 / (1 + std::exp(-x));
    case Activation::softplus: return std::log(1 + std::exp(x));
    case Activation::silu: return x / (1 + std::exp(-x));
    case Activation::gelu: return 0.5 * x * (1 + std::tanh(std::sqrt(2 / M_PI) * (x + 0.044715 * x * x * x)));
    case Activation::elu: return x > 0 ? x : p * (std::exp(x) - 1);
    case Activation::softmax: return x;
    }
    return x;
}

Vec plain_dense(const Dense& d, double t, const Vec& x) {
    Vec in = x;
    if (d.time_input) in.push_back(t);
    Vec y(static_cast<std::size_t>(d.out));
    for (int i = 0; i < d.out; ++i) {
        double s = d.has_bias ? d.bias[i] : 0.0;
        for (int j = 0; j < d.in_total(); ++j) s += d.weight(i, j) * in[static_cast<std::size_t>(j)];
        y[static_cast<std::size_t>(i)] = plain_act(d.act, s, d.act_param);
    }
    if (d.act == Activation::softmax) {
        double sum = 0;
        for (double& v : y) sum += (v = std::exp(v));
        for (double& v : y) v /= sum;
    }
    return y;
}

Vec plain_sequence(const std::vector<Block>& blocks, double t, Vec x) {
    for (const Block& b : blocks) {
        if (b.kind == Block::Kind::dense) {
            x = plain_dense(b.dense, t, x);
        } else {
            const Vec g = plain_sequence(b.residual.body, t, x);
            for (std::size_t i = 0; i < x.size(); ++i) x[i] += g[i];
        }
    }
    return x;
}

// Classic RK4 (Kutta 1901) written out, N equal steps.
Vec plain_rk4(const Continuous& c, Vec y) {
    const int n = c.solver.steps;
    const double h = (c.t1 - c.t0) / n;
    auto f = [&](double t, const Vec& v) { return plain_sequence(c.field, t, v); };
    auto axpy = [](const Vec& a, double s, const Vec& b) {
        Vec r = a;
        for (std::size_t i = 0; i < r.size(); ++i) r[i] += s * b[i];
        return r;
    };
    for (int i = 0; i < n; ++i) {
        const double t = c.t0 + i * h;
        const Vec k1 = f(t, y);
        const Vec k2 = f(t + h / 2, axpy(y, h / 2, k1));
        const Vec k3 = f(t + h / 2, axpy(y, h / 2, k2));
        const Vec k4 = f(t + h, axpy(y, h, k3));
        for (std::size_t j = 0; j < y.size(); ++j) y[j] += h / 6 * (k1[j] + 2 * k2[j] + 2 * k3[j] + k4[j]);
    }
    return y;
}

Vec plain_model(const Model& m, Vec x) {
    for (const Block& b : m.blocks) {
        if (b.kind == Block::Kind::continuous) {
            x.resize(static_cast<std::size_t>(b.continuous.state()), 0.0);
            x = plain_rk4(b.continuous, x);
        } else {
            x = plain_sequence({b}, 0.0, x);
        }
    }
    return x;
}

// input 3 -> lift 3->4 tanh -> continuous settle: 4 + augment 2, t in [0, 1.5],
// field {f1: 6 + t -> 5 softplus; f2: 5 -> 6; residual fr {fr1: 6 -> 6 tanh}}, rk4 8 steps
// -> residual polish {p1: 6 -> 6 relu; p2: 6 -> 6 no-bias} -> head 6 -> 3 softmax.
Model sample_model() {
    Lcg rng;
    Model m;
    m.name = "sample";
    m.input_size = 3;
    m.output_size = 3;
    m.blocks.push_back(dense_block("lift", 3, 4, Activation::tanh, rng));
    std::vector<Block> inner;
    inner.push_back(dense_block("fr1", 6, 6, Activation::tanh, rng));
    std::vector<Block> field;
    field.push_back(dense_block("f1", 6, 5, Activation::softplus, rng, true));
    field.push_back(dense_block("f2", 5, 6, Activation::identity, rng));
    field.push_back(test::residual("fr", 6, std::move(inner)));
    m.blocks.push_back(test::continuous("settle", 4, 2, 0.0, 1.5, std::move(field), rk4_steps(8)));
    std::vector<Block> body;
    body.push_back(dense_block("p1", 6, 6, Activation::relu, rng));
    body.push_back(dense_block("p2", 6, 6, Activation::identity, rng, false, false));
    m.blocks.push_back(test::residual("polish", 6, std::move(body)));
    m.blocks.push_back(dense_block("head", 6, 3, Activation::softmax, rng));
    return m;
}

TEST(Evaluate, HandBuiltModelMatchesPlainLoops) {
    const Model m = sample_model();
    for (const Vec& in : {Vec{0.3, -1.2, 0.8}, Vec{-2.0, 0.0, 1.5}, Vec{5.0, 4.0, -3.0}}) {
        const EvalResult r = evaluate(m, Eigen::Map<const Eigen::VectorXd>(in.data(), 3));
        ASSERT_EQ(r.status, EvalStatus::ok);
        const Vec want = plain_model(m, in);
        ASSERT_EQ(r.output.size(), 3);
        double sum = 0;
        for (int i = 0; i < 3; ++i) {
            EXPECT_NEAR(r.output[i], want[static_cast<std::size_t>(i)], 1e-14);
            sum += r.output[i];
        }
        EXPECT_NEAR(sum, 1.0, 1e-15);  // softmax output
        // rk4, 8 steps: 8 * 4 field evaluations (DEVELOPERS.md).
        EXPECT_EQ(r.stats.field_evals, 32);
        EXPECT_EQ(r.stats.steps_accepted, 8);
        EXPECT_EQ(r.stats.steps_rejected, 0);
        EXPECT_DOUBLE_EQ(r.stats.h_min, 1.5 / 8);
    }
}

TEST(Evaluate, FieldMatchesPlainLoopsIncludingTime) {
    const Model m = sample_model();
    const Continuous& c = m.blocks[1].continuous;
    const Vec y = {0.1, -0.2, 0.3, 0.4, -0.5, 0.6};
    for (double t : {0.0, 0.7, 1.5}) {
        Eigen::VectorXd dy;
        eval_field(c, t, Eigen::Map<const Eigen::VectorXd>(y.data(), 6), dy);
        const Vec want = plain_sequence(c.field, t, y);
        ASSERT_EQ(dy.size(), 6);
        for (int i = 0; i < 6; ++i) EXPECT_NEAR(dy[i], want[static_cast<std::size_t>(i)], 1e-15);
    }
    // Time enters: the field at t = 0 and t = 1.5 differ.
    Eigen::VectorXd a, b;
    eval_field(c, 0.0, Eigen::Map<const Eigen::VectorXd>(y.data(), 6), a);
    eval_field(c, 1.5, Eigen::Map<const Eigen::VectorXd>(y.data(), 6), b);
    EXPECT_GT((a - b).norm(), 1e-6);
}

TEST(Evaluate, MacsCountWeights) {
    // out * in_total per dense layer, biases not counted; the field's nested residual counts.
    const Model m = sample_model();
    EXPECT_EQ(dense_macs(m.blocks[0].dense), 12);
    EXPECT_EQ(dense_macs(m.blocks[1].continuous.field[0].dense), 5 * 7);  // 6 + t
    EXPECT_EQ(field_macs(m.blocks[1].continuous), 5 * 7 + 6 * 5 + 6 * 6);
}

// Continuous block whose field is a dense layer without bias or activation:
// y(t1) = exp((t1 - t0) A) y(t0) (exact solution; Eigen's matrix exponential).
Model linear_model(const Eigen::MatrixXd& a, int augment, double t0, double t1, SolverSpec solver) {
    Model m;
    m.name = "linear";
    const int state = static_cast<int>(a.rows());
    m.input_size = state - augment;
    m.output_size = state;
    Dense d = test::dense_layer("a", state, state, Activation::identity, false, false);
    d.weight = a;
    std::vector<Block> field;
    field.push_back(test::dense_block(d));
    m.blocks.push_back(test::continuous("flow", state - augment, augment, t0, t1, std::move(field), solver));
    return m;
}

Eigen::MatrixXd sample_matrix(int n) {
    Lcg rng;
    Eigen::MatrixXd a(n, n);
    for (int i = 0; i < n; ++i)
        for (int j = 0; j < n; ++j) a(i, j) = 2.0 * rng.next();
    a.diagonal().array() -= 0.5;  // mildly damped
    return a;
}

TEST(Evaluate, LinearBlockMatchesMatrixExponential) {
    const Eigen::MatrixXd a = sample_matrix(5);
    Eigen::VectorXd x(3);
    x << 0.7, -0.4, 1.1;
    Eigen::VectorXd y0 = Eigen::VectorXd::Zero(5);
    y0.head(3) = x;  // augment 2: zeros after the incoming state
    for (const auto& [t0, t1] : {std::pair{0.0, 1.5}, std::pair{2.0, 0.5}}) {
        const Eigen::VectorXd exact = ((t1 - t0) * a).exp() * y0;
        for (const char* method : {"dormand-prince", "tsitouras", "cash-karp", "bogacki-shampine"}) {
            SCOPED_TRACE(method);
            const double rtol = 1e-8, atol = 1e-10;
            const EvalResult r = evaluate(linear_model(a, 2, t0, t1, adaptive(method, rtol, atol, 100000)), x);
            ASSERT_EQ(r.status, EvalStatus::ok);
            ASSERT_EQ(r.output.size(), 5);
            // The controller keeps each step's error estimate below atol + rtol*|y|; on this
            // non-stiff problem over an interval of 1.5 the global error stays within 10
            // times that (measured here: 2 to 100 times below the bound).
            const double bound = 10.0 * (atol + rtol * exact.cwiseAbs().maxCoeff());
            EXPECT_LT((r.output - exact).cwiseAbs().maxCoeff(), bound);
            EXPECT_GT(r.stats.steps_accepted, 1);
        }
        // Fixed-step RK4, 60 steps: error O(h^4) with h = 0.025.
        const EvalResult r = evaluate(linear_model(a, 2, t0, t1, rk4_steps(60)), x);
        ASSERT_EQ(r.status, EvalStatus::ok);
        EXPECT_LT((r.output - exact).cwiseAbs().maxCoeff(), 1e-6);
    }
}

TEST(Evaluate, LinearProblemExactSolution) {
    // A = [[-1, 1], [0, -1]], y0 = (0, 1): y(2) = e^-2 (2, 1) (exact solution).
    Eigen::MatrixXd a(2, 2);
    a << -1, 1, 0, -1;
    Eigen::VectorXd x(2);
    x << 0.0, 1.0;
    const EvalResult r = evaluate(linear_model(a, 0, 0.0, 2.0, adaptive("dormand-prince", 1e-10, 1e-12, 10000)), x);
    ASSERT_EQ(r.status, EvalStatus::ok);
    EXPECT_NEAR(r.output[0], 0.27067056647322538, 1e-8);
    EXPECT_NEAR(r.output[1], 0.13533528323661269, 1e-8);
}

TEST(Evaluate, StatusesAndFailingBlock) {
    Model m = sample_model();
    // Any NaN or infinity in the input.
    for (double bad : {std::nan(""), std::numeric_limits<double>::infinity()}) {
        Eigen::VectorXd in(3);
        in << 0.1, bad, 0.2;
        EXPECT_EQ(evaluate(m, in).status, EvalStatus::input_not_finite);
    }
    Eigen::VectorXd in(3);
    in << 0.3, -1.2, 0.8;

    // A residual whose body overflows: 1e308 weights on inputs of size ~1.
    Model big = m;
    big.blocks[2].residual.body[1].dense.weight.setConstant(1e308);
    const EvalResult r1 = evaluate(big, in);
    EXPECT_EQ(r1.status, EvalStatus::state_not_finite);
    EXPECT_EQ(r1.block, "polish");
    EXPECT_EQ(eval_status_name(r1.status), "state_not_finite");

    // The continuous block runs out of attempts.
    Model limited = m;
    limited.blocks[1].continuous.solver = adaptive("dormand-prince", 1e-12, 1e-14, 2);
    const EvalResult r2 = evaluate(limited, in);
    EXPECT_EQ(r2.status, EvalStatus::step_limit);
    EXPECT_EQ(r2.block, "settle");
    EXPECT_EQ(r2.stats.steps_accepted + r2.stats.steps_rejected, 2);
    EXPECT_EQ(r2.stats.field_evals, 2 + 2 * 6);

    // A field that overflows: y' = 1e4 y with RK4 at h = 1 multiplies y by
    // R(1e4) ~ 4e14 per step (stability polynomial), past 1e308 within 40 steps.
    const Eigen::MatrixXd grow = 1e4 * Eigen::MatrixXd::Identity(2, 2);
    Eigen::VectorXd x(2);
    x << 1.0, 1.0;
    const EvalResult r3 = evaluate(linear_model(grow, 0, 0.0, 40.0, rk4_steps(40)), x);
    EXPECT_EQ(r3.status, EvalStatus::state_not_finite);
    EXPECT_EQ(r3.block, "flow");

    EXPECT_EQ(eval_status_name(EvalStatus::ok), "ok");
    EXPECT_EQ(eval_status_name(EvalStatus::input_not_finite), "input_not_finite");
    EXPECT_EQ(eval_status_name(EvalStatus::step_limit), "step_limit");
    EXPECT_EQ(eval_status_name(EvalStatus::step_too_small), "step_too_small");
}

TEST(Evaluate, StatsSumOverContinuousBlocks) {
    // Two linear blocks in a row: counts add (rk4 8 steps = 32 evaluations; Euler
    // 5 steps = 5), h_min and h_max span both.
    const Eigen::MatrixXd a = sample_matrix(3);
    Model m = linear_model(a, 0, 0.0, 1.0, rk4_steps(8));
    Model second = linear_model(a, 0, 0.0, 2.0, SolverSpec{});
    second.blocks[0].continuous.solver.method = "euler";
    second.blocks[0].continuous.solver.steps = 5;
    second.blocks[0].continuous.name = "flow2";
    m.blocks.push_back(second.blocks[0]);
    Eigen::VectorXd x(3);
    x << 0.2, 0.1, -0.3;
    const EvalResult r = evaluate(m, x);
    ASSERT_EQ(r.status, EvalStatus::ok);
    EXPECT_EQ(r.stats.field_evals, 32 + 5);
    EXPECT_EQ(r.stats.steps_accepted, 13);
    EXPECT_DOUBLE_EQ(r.stats.h_min, 0.125);
    EXPECT_DOUBLE_EQ(r.stats.h_max, 0.4);
    // exp(A) then (I + 0.4 A)^5 (Euler's stability function R(z) = 1 + z per step).
    const Eigen::MatrixXd euler_step = Eigen::MatrixXd::Identity(3, 3) + 0.4 * a;
    const Eigen::VectorXd want = euler_step * euler_step * euler_step * euler_step * euler_step * a.exp() * x;
    EXPECT_LT((r.output - want).cwiseAbs().maxCoeff(), 1e-4);  // rk4 at h = 1/8 against exp(A)
}

}  // namespace
}  // namespace meander
