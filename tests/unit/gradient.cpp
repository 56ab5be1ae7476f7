// Reverse mode through the whole model (runtime/gradient.hpp), both ways,
// against outside references:
// - PyTorch autograd in float64 through the same fixed steps
//   (tests/torch/autograd_gradients.py; run live when /usr/bin/python3 has
//   torch, else its committed output tests/data/torch_gradients.json);
// - central differences;
// - for a linear field, the Frechet derivative of the matrix exponential
//   from Eigen's MatrixFunctions expm of the 2n x 2n block matrix
//   [[X, E], [0, X]] (Van Loan 1978; Higham, Functions of Matrices, 2008, 3.2);
// - discrete and adjoint against each other as the step shrinks.
#include <gtest/gtest.h>
#include <nlohmann/json.hpp>
#include <unsupported/Eigen/MatrixFunctions>

#include <cmath>
#include <filesystem>
#include <fstream>
#include <random>

#include "runtime/adjoint.hpp"
#include "runtime/gradient.hpp"
#include "runtime/parameters.hpp"
#include "test_support.hpp"

using namespace meander;
using namespace meander::test;
using json = nlohmann::json;

namespace {

// Layers of tests/torch/autograd_gradients.py, weights left empty.
Model torch_case_model(const SolverSpec& solver) {
    Dense elu = dense_layer("p1", 6, 6, Activation::elu);
    elu.act_param = 0.7;
    Dense leaky = dense_layer("p2", 6, 6, Activation::leaky_relu);
    leaky.act_param = 0.1;
    return model("torch_case", 3, 3,
                 {dense_block(dense_layer("lift", 3, 4, Activation::tanh)),
                  continuous("flow", 4, 2, 0.0, 1.5,
                             {dense_block(dense_layer("f1", 6, 8, Activation::gelu, true)),
                              residual("r", 8, {dense_block(dense_layer("r1", 8, 8, Activation::silu))}),
                              dense_block(dense_layer("f2", 8, 6, Activation::identity, false, false))},
                             solver),
                  residual("polish", 6, {dense_block(elu), dense_block(leaky)}),
                  dense_block(dense_layer("mid", 6, 5, Activation::sigmoid)),
                  dense_block(dense_layer("mid2", 5, 5, Activation::softplus)),
                  dense_block(dense_layer("head", 5, 3, Activation::softmax))});
}

Eigen::VectorXd vec(const json& j) {
    Eigen::VectorXd v(static_cast<Eigen::Index>(j.size()));
    for (std::size_t i = 0; i < j.size(); ++i) v[static_cast<Eigen::Index>(i)] = j[i].get<double>();
    return v;
}

Eigen::MatrixXd mat(const json& j) {
    Eigen::MatrixXd m(static_cast<Eigen::Index>(j.size()), static_cast<Eigen::Index>(j[0].size()));
    for (std::size_t r = 0; r < j.size(); ++r)
        for (std::size_t c = 0; c < j[r].size(); ++c)
            m(static_cast<Eigen::Index>(r), static_cast<Eigen::Index>(c)) = j[r][c].get<double>();
    return m;
}

template <class F>
void for_each_dense_mut(std::vector<Block>& blocks, F&& f) {
    for (Block& b : blocks) {
        if (b.kind == Block::Kind::dense) f(b.dense);
        if (b.kind == Block::Kind::residual) for_each_dense_mut(b.residual.body, f);
        if (b.kind == Block::Kind::continuous) for_each_dense_mut(b.continuous.field, f);
    }
}

void bind_from_json(Model& m, const json& weights) {
    for_each_dense_mut(m.blocks, [&](Dense& d) {
        d.weight = mat(weights.at(d.name + ".weight"));
        if (d.has_bias) d.bias = vec(weights.at(d.name + ".bias"));
    });
}

// The torch reference: live when the interpreter has torch, else the committed file.
const json& torch_reference() {
    static const json doc = [] {
    namespace fs = std::filesystem;
    const fs::path live = fs::path(MEANDER_BINARY_DIR) / "torch_gradients.json";
    const std::string cmd = std::string(MEANDER_SCIPY_PYTHON) + " -c 'import torch' 2>/dev/null && " +
                            MEANDER_SCIPY_PYTHON + " " + MEANDER_SOURCE_DIR + "/tests/torch/autograd_gradients.py " +
                            live.string();
    fs::path path = fs::path(MEANDER_SOURCE_DIR) / "tests/data/torch_gradients.json";
    if (run(cmd).status == 0 && fs::exists(live)) path = live;
    std::ifstream f(path);
    return json::parse(f);
    }();
    return doc;
}

// Every entry of `got` within rel * (largest |reference| of the tensor) of the reference.
void expect_close(const Eigen::VectorXd& got, const Eigen::VectorXd& ref, double rel, const std::string& what) {
    ASSERT_EQ(got.size(), ref.size()) << what;
    const double scale = std::max(ref.cwiseAbs().maxCoeff(), 1e-300);
    for (Eigen::Index i = 0; i < got.size(); ++i)
        EXPECT_LE(std::fabs(got[i] - ref[i]), rel * scale) << what << " [" << i << "] " << got[i] << " vs " << ref[i];
}

// A tensor's slice of the flat gradient, row by row as param_layout lays it out.
Eigen::VectorXd slice(const Model& m, const Eigen::VectorXd& flat, const std::string& tensor) {
    for (const ParamSlot& s : param_layout(m)) {
        if (tensor == s.layer + ".weight") return flat.segment(s.weight_offset, static_cast<Eigen::Index>(s.rows) * s.cols);
        if (tensor == s.layer + ".bias") return flat.segment(s.bias_offset, s.rows);
    }
    ADD_FAILURE() << "no tensor " << tensor;
    return {};
}

Eigen::VectorXd flatten_rows(const Eigen::MatrixXd& m) {
    Eigen::Matrix<double, Eigen::Dynamic, Eigen::Dynamic, Eigen::RowMajor> r = m;
    return Eigen::Map<const Eigen::VectorXd>(r.data(), r.size());
}

Eigen::VectorXd tensor_ref(const json& j) {
    if (j[0].is_array()) return flatten_rows(mat(j));
    return vec(j);
}

}  // namespace

TEST(GradientTorch, WholeModelThroughRk4StepsMatchesAutograd) {
    const json& ref = torch_reference();
    const json& cs = ref["cases"][0];
    ASSERT_EQ(cs["method"], "rk4");
    Model m = torch_case_model(fixed_solver("rk4", 5));
    bind_from_json(m, ref["weights"]);
    const ForwardRecord rec = forward_record(m, vec(cs["input"]), GradientWay::discrete);
    ASSERT_EQ(rec.status, EvalStatus::ok);
    expect_close(rec.output, vec(cs["output"]), 1e-13, "output");
    // The recorded steps are the ones the script took.
    const auto& steps = rec.blocks[1].steps;
    ASSERT_EQ(steps.size(), cs["steps"].size());
    for (std::size_t i = 0; i < steps.size(); ++i) {
        EXPECT_DOUBLE_EQ(steps[i].t, cs["steps"][i][0].get<double>());
        EXPECT_DOUBLE_EQ(steps[i].h, cs["steps"][i][1].get<double>());
    }
    const Gradient g = backward(m, rec, vec(cs["loss_weights"]), GradientWay::discrete);
    ASSERT_EQ(g.status, EvalStatus::ok);
    expect_close(g.input, vec(cs["input_grad"]), 1e-10, "input");
    int tensors = 0;
    for (const auto& [name, value] : cs["grads"].items()) {
        expect_close(slice(m, g.params, name), tensor_ref(value), 1e-10, name);
        ++tensors;
    }
    EXPECT_EQ(tensors, 17);  // every weight and bias of the model
}

TEST(GradientTorch, BlockThroughUnevenDormandPrinceStepsMatchesAutograd) {
    const json& ref = torch_reference();
    const json& cs = ref["cases"][1];
    ASSERT_EQ(cs["method"], "dormand-prince");
    Model m = torch_case_model(adaptive_solver("dormand-prince", 1e-6, 1e-9, 100));
    bind_from_json(m, ref["weights"]);
    const Continuous& c = m.blocks[1].continuous;
    std::vector<StepPlan> plan;
    for (const auto& s : cs["steps"]) plan.push_back(StepPlan{s[0].get<double>(), s[1].get<double>(), s[2].get<double>()});
    Eigen::VectorXd y0bar;
    Eigen::VectorXd grad = Eigen::VectorXd::Zero(sequence_param_count(c.field));
    backprop_steps(c, vec(cs["input"]), plan, vec(cs["loss_weights"]), y0bar, grad);
    expect_close(y0bar, vec(cs["input_grad"]), 1e-10, "state");
    // The field's parameters sit after lift's in the model's layout.
    const Eigen::Index lift = block_param_count(m.blocks[0]);
    Eigen::VectorXd flat = Eigen::VectorXd::Zero(param_count(m));
    flat.segment(lift, grad.size()) = grad;
    for (const auto& [name, value] : cs["grads"].items()) expect_close(slice(m, flat, name), tensor_ref(value), 1e-10, name);
}

namespace {

// L = w . output
double loss_of(const Model& m, const Eigen::VectorXd& x, const Eigen::VectorXd& w) {
    const EvalResult r = evaluate(m, x);
    EXPECT_EQ(r.status, EvalStatus::ok);
    return w.dot(r.output);
}

// Central differences, step rule h_i = eps^(1/3) * max(1, |v_i|) with eps =
// 2^-52 (truncation error O(h^2) and rounding O(eps/h) balance there;
// Nocedal & Wright, Numerical Optimization, 2nd ed., 8.1).
Eigen::VectorXd central_params(Model m, const Eigen::VectorXd& x, const Eigen::VectorXd& w) {
    const Eigen::VectorXd theta = get_params(m);
    Eigen::VectorXd g(theta.size());
    const double e3 = std::cbrt(std::ldexp(1.0, -52));
    for (Eigen::Index i = 0; i < theta.size(); ++i) {
        const double h = e3 * std::max(1.0, std::fabs(theta[i]));
        Eigen::VectorXd p = theta;
        p[i] = theta[i] + h;
        set_params(m, p);
        const double up = loss_of(m, x, w);
        p[i] = theta[i] - h;
        set_params(m, p);
        const double down = loss_of(m, x, w);
        g[i] = (up - down) / (2 * h);
    }
    return g;
}

Eigen::VectorXd central_input(const Model& m, const Eigen::VectorXd& x, const Eigen::VectorXd& w) {
    Eigen::VectorXd g(x.size());
    const double e3 = std::cbrt(std::ldexp(1.0, -52));
    for (Eigen::Index i = 0; i < x.size(); ++i) {
        const double h = e3 * std::max(1.0, std::fabs(x[i]));
        Eigen::VectorXd p = x;
        p[i] = x[i] + h;
        const double up = loss_of(m, p, w);
        p[i] = x[i] - h;
        g[i] = (up - loss_of(m, p, w)) / (2 * h);
    }
    return g;
}

void fill_random(Model& m, unsigned seed, double scale) {
    std::mt19937 rng(seed);
    std::uniform_real_distribution<double> u(-1.0, 1.0);
    for_each_dense_mut(m.blocks, [&](Dense& d) {
        d.weight = Eigen::MatrixXd::NullaryExpr(d.out, d.in_total(), [&] { return u(rng) * scale / std::sqrt(d.in_total()); });
        if (d.has_bias) d.bias = Eigen::VectorXd::NullaryExpr(d.out, [&] { return 0.3 * u(rng); });
    });
}

Gradient gradient_of(const Model& m, const Eigen::VectorXd& x, const Eigen::VectorXd& w, GradientWay way) {
    const ForwardRecord rec = forward_record(m, x, way);
    EXPECT_EQ(rec.status, EvalStatus::ok);
    return backward(m, rec, w, way);
}

}  // namespace

// The discrete way is the exact derivative of what the fixed-step evaluator
// computes, so central differences agree to their own accuracy (~eps^(2/3)).
TEST(GradientCentral, EveryActivationAndBlockKindFixedStep) {
    for (Activation act : {Activation::identity, Activation::relu, Activation::leaky_relu, Activation::tanh,
                           Activation::sigmoid, Activation::softplus, Activation::silu, Activation::gelu,
                           Activation::elu}) {
        Dense a = dense_layer("a", 5, 5, act);
        a.act_param = act == Activation::elu ? 1.3 : 0.05;
        Dense f = dense_layer("f1", 5, 7, act, true);
        f.act_param = a.act_param;
        Model m = model("m", 4, 3,
                        {dense_block(dense_layer("in", 4, 3, act)),
                         continuous("c", 3, 2, 0.25, 1.25,
                                    {dense_block(f), residual("rr", 7, {dense_block(dense_layer("r1", 7, 7, Activation::tanh))}),
                                     dense_block(dense_layer("f2", 7, 5))},
                                    fixed_solver("heun", 6)),
                         residual("res", 5, {dense_block(a)}), dense_block(dense_layer("out", 5, 3, Activation::softmax))});
        fill_random(m, 7, 1.5);
        const Eigen::VectorXd x = (Eigen::VectorXd(4) << 0.3, -0.7, 1.1, 0.2).finished();
        const Eigen::VectorXd w = (Eigen::VectorXd(3) << 1.0, -2.0, 0.5).finished();
        const Gradient g = gradient_of(m, x, w, GradientWay::discrete);
        const std::string what(activation_name(act));
        expect_close(g.params, central_params(m, x, w), 1e-7, what + " params");
        expect_close(g.input, central_input(m, x, w), 1e-7, what + " input");
    }
}

// The adjoint approximates the gradient of the exact flow; with rk4 at 64
// steps the flow's discretisation error is far below the tolerance used.
TEST(GradientCentral, AdjointWithFineSteps) {
    Model m = model("m", 3, 2,
                    {continuous("c", 3, 1, 0.0, 2.0,
                                {dense_block(dense_layer("f1", 4, 6, Activation::tanh, true)),
                                 dense_block(dense_layer("f2", 6, 4))},
                                fixed_solver("rk4", 64)),
                     dense_block(dense_layer("out", 4, 2, Activation::sigmoid))});
    fill_random(m, 11, 1.2);
    const Eigen::VectorXd x = (Eigen::VectorXd(3) << 0.5, -0.2, 0.9).finished();
    const Eigen::VectorXd w = (Eigen::VectorXd(2) << 1.5, -0.5).finished();
    const Gradient g = gradient_of(m, x, w, GradientWay::adjoint);
    ASSERT_EQ(g.status, EvalStatus::ok);
    EXPECT_EQ(g.backward_stats.steps_accepted, 64);
    expect_close(g.params, central_params(m, x, w), 1e-7, "params");
    expect_close(g.input, central_input(m, x, w), 1e-7, "input");
}

// Adaptive: discrete holds the accepted steps fixed while central differences
// let the controller move them, so the two agree only to the solver's
// tolerance; the adjoint too.
TEST(GradientCentral, AdaptiveBothWaysToTolerance) {
    Model m = model("m", 2, 2,
                    {continuous("c", 2, 0, 0.0, 1.0,
                                {dense_block(dense_layer("f1", 2, 5, Activation::softplus, true)),
                                 dense_block(dense_layer("f2", 5, 2))},
                                adaptive_solver("dormand-prince", 1e-10, 1e-12, 1000))});
    fill_random(m, 3, 1.0);
    const Eigen::VectorXd x = (Eigen::VectorXd(2) << 0.4, -0.6).finished();
    const Eigen::VectorXd w = (Eigen::VectorXd(2) << 1.0, 1.0).finished();
    const Eigen::VectorXd cd = central_params(m, x, w);
    expect_close(gradient_of(m, x, w, GradientWay::discrete).params, cd, 1e-6, "discrete");
    expect_close(gradient_of(m, x, w, GradientWay::adjoint).params, cd, 1e-6, "adjoint");
}

namespace {

// dh/dt = A h on [0, T]: y1 = expm(A T) y0. For L = w . y1, dL/dA = T * L_exp(X^T, w y0^T)
// with X = A T, where L_exp(X, E) is the Frechet derivative of expm, the upper right
// block of expm([[X, E], [0, X]]) (Van Loan 1978; Higham 2008, 3.2); the transpose
// comes from <E', L(X, E)> = <L(X^T, E'), E>.
Eigen::MatrixXd frechet_reference(const Eigen::MatrixXd& a, double T, const Eigen::VectorXd& y0, const Eigen::VectorXd& w) {
    const Eigen::Index n = a.rows();
    Eigen::MatrixXd big = Eigen::MatrixXd::Zero(2 * n, 2 * n);
    big.topLeftCorner(n, n) = (a * T).transpose();
    big.bottomRightCorner(n, n) = (a * T).transpose();
    big.topRightCorner(n, n) = w * y0.transpose();
    const Eigen::MatrixXd e = big.exp();
    return T * e.topRightCorner(n, n);
}

struct LinearCase {
    Model m;
    Eigen::VectorXd x, w;
    Eigen::MatrixXd ref;
};

LinearCase linear_case(const SolverSpec& solver) {
    LinearCase lc;
    lc.m = model("lin", 4, 4, {continuous("c", 4, 0, 0.0, 1.5, {dense_block(dense_layer("a", 4, 4, Activation::identity, false, false))}, solver)});
    const Eigen::MatrixXd a = (Eigen::MatrixXd(4, 4) << -0.5, 1.0, 0.2, 0.0,  //
                               -1.0, -0.3, 0.0, 0.4,                           //
                               0.3, 0.0, -0.8, 0.9,                            //
                               0.0, -0.2, -0.6, 0.1)
                                  .finished();
    lc.m.blocks[0].continuous.field[0].dense.weight = a;
    lc.x = (Eigen::VectorXd(4) << 1.0, -0.5, 0.25, 2.0).finished();
    lc.w = (Eigen::VectorXd(4) << 0.3, 1.0, -0.7, 0.5).finished();
    lc.ref = frechet_reference(a, 1.5, lc.x, lc.w);
    return lc;
}

double max_error(const Eigen::VectorXd& flat, const Eigen::MatrixXd& ref) { return (flat - flatten_rows(ref)).cwiseAbs().maxCoeff(); }

}  // namespace

TEST(GradientFrechet, LinearFieldBothWaysMatchExpmFrechetDerivative) {
    LinearCase fine = linear_case(fixed_solver("rk4", 200));
    const double scale = fine.ref.cwiseAbs().maxCoeff();
    EXPECT_LT(max_error(gradient_of(fine.m, fine.x, fine.w, GradientWay::discrete).params, fine.ref), 1e-9 * scale);
    EXPECT_LT(max_error(gradient_of(fine.m, fine.x, fine.w, GradientWay::adjoint).params, fine.ref), 1e-9 * scale);
    LinearCase tight = linear_case(adaptive_solver("dormand-prince", 1e-11, 1e-13, 5000));
    EXPECT_LT(max_error(gradient_of(tight.m, tight.x, tight.w, GradientWay::adjoint).params, tight.ref), 1e-8 * scale);
    EXPECT_LT(max_error(gradient_of(tight.m, tight.x, tight.w, GradientWay::discrete).params, tight.ref), 1e-8 * scale);
}

// Halving rk4's step divides each way's error against the Frechet derivative,
// and their difference, by about 2^4 (the method's order, HNW I, II.3).
TEST(GradientConvergence, DiscreteAndAdjointMeetAtTheSolversOrder) {
    std::vector<double> e_disc, e_adj, diff;
    for (int n : {4, 8, 16, 32}) {
        LinearCase lc = linear_case(fixed_solver("rk4", n));
        const Eigen::VectorXd d = gradient_of(lc.m, lc.x, lc.w, GradientWay::discrete).params;
        const Eigen::VectorXd a = gradient_of(lc.m, lc.x, lc.w, GradientWay::adjoint).params;
        e_disc.push_back(max_error(d, lc.ref));
        e_adj.push_back(max_error(a, lc.ref));
        diff.push_back((d - a).cwiseAbs().maxCoeff());
    }
    for (std::size_t i = 1; i < diff.size(); ++i) {
        for (const auto* e : {&e_disc, &e_adj, &diff}) {
            const double order = std::log2((*e)[i - 1] / (*e)[i]);
            EXPECT_GT(order, 3.6) << i;
            EXPECT_LT(order, 4.4) << i;
        }
    }
    // Adaptive: as rtol tightens by 10^3, the two ways approach each other.
    double prev = 0;
    for (double rtol : {1e-4, 1e-7, 1e-10}) {
        LinearCase lc = linear_case(adaptive_solver("dormand-prince", rtol, rtol * 1e-2, 10000));
        const double d = (gradient_of(lc.m, lc.x, lc.w, GradientWay::discrete).params -
                          gradient_of(lc.m, lc.x, lc.w, GradientWay::adjoint).params)
                             .cwiseAbs()
                             .maxCoeff();
        if (prev > 0) EXPECT_LT(d, prev / 50) << rtol;
        prev = d;
    }
}

// The adjoint keeps no per-step record: its forward record has no steps,
// however many the solver takes.
TEST(GradientAdjoint, RecordsNoSteps) {
    LinearCase lc = linear_case(fixed_solver("rk4", 500));
    const ForwardRecord rec = forward_record(lc.m, lc.x, GradientWay::adjoint);
    EXPECT_TRUE(rec.blocks[0].steps.empty());
    const ForwardRecord disc = forward_record(lc.m, lc.x, GradientWay::discrete);
    EXPECT_EQ(disc.blocks[0].steps.size(), 500u);
}

TEST(GradientForward, SameOutputAndStatusAsEvaluate) {
    Model m = torch_case_model(adaptive_solver("tsitouras", 1e-5, 1e-8, 200));
    fill_random(m, 5, 1.0);
    const Eigen::VectorXd x = (Eigen::VectorXd(3) << 0.1, 0.2, -0.3).finished();
    const EvalResult r = evaluate(m, x);
    for (GradientWay way : {GradientWay::discrete, GradientWay::adjoint}) {
        const ForwardRecord rec = forward_record(m, x, way);
        ASSERT_EQ(rec.status, r.status);
        EXPECT_EQ(rec.output, r.output);  // bit for bit: the same code computes both
        EXPECT_EQ(rec.stats.field_evals, r.stats.field_evals);
    }
    Eigen::VectorXd bad = x;
    bad[1] = std::nan("");
    EXPECT_EQ(forward_record(m, bad, GradientWay::discrete).status, EvalStatus::input_not_finite);
}
