// Learning on the device (compiler/learn.cpp, compiler/emit/learn.cpp): the
// emitted gradient, built with the host compiler under the strict flags,
// against the runtime's reverse mode (runtime/gradient.hpp: itself checked
// against PyTorch autograd, central differences and the Frechet derivative of
// expm in tests/unit/gradient.cpp), against central differences of the
// emitted loss, and its bad-input contract.
#include <fmt/format.h>
#include <gtest/gtest.h>

#include <cmath>
#include <map>

#include "compiler/learn.hpp"
#include "compiler/load.hpp"
#include "emit_support.hpp"
#include "runtime/gradient.hpp"
#include "runtime/parameters.hpp"

namespace meander {
namespace {

using test::Rng;

LearnSpec spec_of(LearnSpec::What what, LearnSpec::Way way = LearnSpec::Way::steps, std::vector<std::string> layers = {}) {
    LearnSpec s;
    s.what = what;
    s.way = way;
    s.layers = std::move(layers);
    return s;
}

LearnPlan plan_of(const Model& m, const LearnSpec& s) {
    Diagnostics diags;
    auto plan = plan_learning(m, s, nullptr, "test", diags);
    EXPECT_TRUE(plan.has_value()) << diags.render();
    return *plan;
}

// The learnable values' positions in the runtime's flat parameter vector
// (runtime/parameters.hpp param_layout), in the emitted block's order.
std::vector<Eigen::Index> runtime_index(const Model& m, const LearnPlan& plan) {
    const std::vector<ParamSlot> slots = param_layout(m);
    std::vector<Eigen::Index> idx(plan.count, -1);
    std::size_t layer = 0;
    for (const LearnLayer& l : plan.layers) {
        const ParamSlot& s = slots[layer++];
        EXPECT_EQ(s.layer, l.dense->name);
        if (l.weight)
            for (int i = 0; i < s.rows * s.cols; ++i) idx[l.weight_at + static_cast<std::size_t>(i)] = s.weight_offset + i;
        if (l.bias)
            for (int i = 0; i < s.rows; ++i) idx[l.bias_at + static_cast<std::size_t>(i)] = s.bias_offset + i;
    }
    return idx;
}

struct Case {
    std::vector<double> x, target;
};

std::vector<Case> cases(std::uint64_t seed, int count, int in, int out, bool probabilities) {
    Rng rng(seed);
    std::vector<Case> v(static_cast<std::size_t>(count));
    for (Case& c : v) {
        for (int i = 0; i < in; ++i) c.x.push_back(rng.uniform(-1.5, 1.5));
        double sum = 0.0;
        for (int i = 0; i < out; ++i) {
            c.target.push_back(probabilities ? rng.uniform(0.0, 1.0) : rng.uniform(-1.0, 1.0));
            sum += c.target.back();
        }
        if (probabilities)
            for (double& t : c.target) t /= sum;
    }
    return v;
}

// What the emitted code printed for one case: result, loss, field evaluations,
// the gradient, and central differences of the loss for the first `fd` values.
struct Got {
    int result = -1;
    double loss = 0.0;
    long field_evals = 0;
    std::vector<double> grad, fd;
};

std::string array_of(const std::vector<double>& v) {
    std::string o = "{";
    for (double x : v) o += test::hex_literal(x) + ", ";
    return o + "}";
}

// Builds NAME.cpp with a driver that runs gradient() on every case (and the
// central differences of its loss on the first `fd` values with step `eps`).
std::vector<Got> run_gradient(const Model& m, const LearnPlan& plan, Precision p, const std::vector<Case>& cs,
                              const std::string& tag, int fd = 0, double eps = 1e-6) {
    EmitOptions o;
    o.precision = p;
    o.learn = plan;
    const auto dir = test::scratch_dir("learn", tag);
    test::write_files(dir, emit_model(m, o));
    const std::string& n = m.name;
    std::string d = fmt::format("#include <cstdio>\n#include \"{}.hpp\"\nusing namespace {};\n", n, n);
    d += fd > 0 ? "static learn_context ctx;\nstatic parameters p, g, q;\n" : "static learn_context ctx;\nstatic parameters p, g;\n";
    d += "int main() {\n    init_parameters(p);\n";
    for (const Case& c : cs) {
        d += "    {\n";
        d += fmt::format("        const double xd[] = {};\n        const double td[] = {};\n", array_of(c.x), array_of(c.target));
        d += "        real x[input_size], t[output_size];\n";
        d += "        for (std::size_t i = 0; i < input_size; ++i) x[i] = static_cast<real>(xd[i]);\n";
        d += "        for (std::size_t i = 0; i < output_size; ++i) t[i] = static_cast<real>(td[i]);\n";
        d += "        real loss = 0;\n";
        d += "        const learn_result r = gradient(ctx, p, x, t, g, loss);\n";
        d += "        std::printf(\"G %d %a %lu\", static_cast<int>(r), static_cast<double>(loss), "
             "static_cast<unsigned long>(ctx.count.field_evals));\n";
        d += "        for (std::size_t i = 0; i < learnable_count; ++i) std::printf(\" %a\", static_cast<double>(g.value[i]));\n";
        d += "        std::printf(\"\\n\");\n";
        if (fd > 0) {
            d += "        std::printf(\"F\");\n";
            d += fmt::format("        for (std::size_t i = 0; i < {} && i < learnable_count; ++i) {{\n", fd);
            d += fmt::format("            const real e = static_cast<real>({});\n", test::hex_literal(eps));
            d += "            real lp = 0, lm = 0;\n";
            d += "            q = p; q.value[i] = p.value[i] + e; gradient(ctx, q, x, t, g, lp);\n";
            d += "            q = p; q.value[i] = p.value[i] - e; gradient(ctx, q, x, t, g, lm);\n";
            d += "            std::printf(\" %a\", static_cast<double>((lp - lm) / (q.value[i] + e - (q.value[i] - e))));\n";
            d += "        }\n        std::printf(\"\\n\");\n";
        }
        d += "    }\n";
    }
    d += "    return 0;\n}\n";
    test::write_text(dir / "driver.cpp", d);
    const std::string err = test::build(dir, {n + ".cpp", "driver.cpp"}, "driver");
    EXPECT_EQ(err, "");
    const test::RunResult rr = test::run((dir / "driver").string());
    EXPECT_EQ(rr.status, 0) << rr.output;
    std::vector<Got> out;
    std::istringstream in(rr.output);
    for (std::string line; std::getline(in, line);) {
        std::istringstream ls(line);
        std::string tagc;
        ls >> tagc;
        if (tagc == "G") {
            Got g;
            std::string loss;
            ls >> g.result >> loss >> g.field_evals;
            g.loss = std::strtod(loss.c_str(), nullptr);
            for (std::string v; ls >> v;) g.grad.push_back(std::strtod(v.c_str(), nullptr));
            out.push_back(g);
        } else if (tagc == "F" && !out.empty()) {
            for (std::string v; ls >> v;) out.back().fd.push_back(std::strtod(v.c_str(), nullptr));
        }
    }
    EXPECT_EQ(out.size(), cs.size()) << rr.output;
    return out;
}

struct Want {
    double loss = 0.0;
    std::vector<double> grad;
};

// The runtime's gradient of the same loss: squared error, or cross-entropy
// through the softmax head (dL/doutput = -target / output).
Want runtime_gradient(const Model& m, const LearnPlan& plan, const Case& c) {
    const GradientWay way = plan.way == LearnSpec::Way::steps ? GradientWay::discrete : GradientWay::adjoint;
    const Eigen::VectorXd x = Eigen::Map<const Eigen::VectorXd>(c.x.data(), static_cast<Eigen::Index>(c.x.size()));
    const Eigen::VectorXd t = Eigen::Map<const Eigen::VectorXd>(c.target.data(), static_cast<Eigen::Index>(c.target.size()));
    const ForwardRecord rec = forward_record(m, x, way);
    EXPECT_EQ(rec.status, EvalStatus::ok);
    Eigen::VectorXd bar(t.size());
    Want w;
    if (plan.loss == LearnLoss::squared_error) {
        bar = rec.output - t;
        w.loss = bar.squaredNorm() / 2.0;
    } else {
        for (Eigen::Index i = 0; i < t.size(); ++i) {
            bar[i] = -t[i] / rec.output[i];
            w.loss -= t[i] * std::log(rec.output[i]);
        }
    }
    const Gradient g = backward(m, rec, bar, way);
    EXPECT_EQ(g.status, EvalStatus::ok);
    for (Eigen::Index i : runtime_index(m, plan)) w.grad.push_back(g.params[i]);
    return w;
}

// Largest |got - want| over the largest |want| (a norm-wise relative error);
// the largest seen is printed at the end of each test.
double g_worst = 0.0;
double relative_error(const std::vector<double>& got, const std::vector<double>& want) {
    EXPECT_EQ(got.size(), want.size());
    double err = 0.0, scale = 0.0;
    for (std::size_t i = 0; i < got.size() && i < want.size(); ++i) {
        err = std::max(err, std::fabs(got[i] - want[i]));
        scale = std::max(scale, std::fabs(want[i]));
    }
    EXPECT_GT(scale, 0.0);  // a gradient of zeros would prove nothing
    g_worst = std::max(g_worst, err / std::max(scale, 1e-300));
    return err / std::max(scale, 1e-300);
}

struct PrintWorst : ::testing::EmptyTestEventListener {
    void OnTestStart(const ::testing::TestInfo&) override { g_worst = 0.0; }
    void OnTestEnd(const ::testing::TestInfo& info) override {
        if (g_worst > 0.0) std::printf("  %s: largest norm-wise relative error %.3g\n", info.name(), g_worst);
    }
};
const bool kListening = [] {
    ::testing::UnitTest::GetInstance()->listeners().Append(new PrintWorst);
    return true;
}();

Model dense_model() {
    Rng rng(11);
    std::vector<Block> body;
    body.push_back(test::dense(rng, "r1", 6, 6, Activation::silu));
    body.push_back(test::dense(rng, "r2", 6, 6, Activation::gelu));
    std::vector<Block> blocks;
    blocks.push_back(test::dense(rng, "lift", 3, 6, Activation::tanh));
    blocks.push_back(test::residual("polish", 6, std::move(body)));
    blocks.push_back(test::dense(rng, "mid", 6, 5, Activation::softplus));
    blocks.push_back(test::dense(rng, "act", 5, 7, Activation::elu));
    blocks.push_back(test::dense(rng, "act2", 7, 5, Activation::leaky_relu));
    blocks.push_back(test::dense(rng, "act3", 5, 5, Activation::sigmoid));
    blocks.push_back(test::dense(rng, "head", 5, 2));
    return test::model("learn_dense", 3, 2, std::move(blocks));
}

// Float64: the same operations as the runtime's except the sums the runtime
// leaves to Eigen (W^T g, softmax's dot product), so 1e-14 norm-wise (seen: 2e-16); the head's
// weight gradient (dL/dy times the recorded input, one product each) to the bit.
TEST(Learn, DenseLayersFloat64MatchRuntime) {
    const Model m = dense_model();
    const LearnPlan plan = plan_of(m, spec_of(LearnSpec::What::all));
    const auto cs = cases(5, 6, 3, 2, false);
    const auto got = run_gradient(m, plan, Precision::float64, cs, "dense64");
    const LearnLayer* head = plan.find(m.blocks.back().dense);
    ASSERT_NE(head, nullptr);
    for (std::size_t k = 0; k < got.size(); ++k) {
        const Want w = runtime_gradient(m, plan, cs[k]);
        EXPECT_EQ(got[k].result, 0);
        EXPECT_EQ(got[k].loss, w.loss);  // the forward pass is eval's, bit for bit
        EXPECT_LT(relative_error(got[k].grad, w.grad), 1e-14) << "case " << k;
        for (std::size_t i = head->weight_at; i < head->weight_at + 10; ++i) EXPECT_EQ(got[k].grad[i], w.grad[i]);
    }
}

// Only what is named learns; the gradient stops at the first learnable layer.
TEST(Learn, BiasesHeadAndNamedLayers) {
    const Model m = dense_model();
    for (const LearnSpec& s : {spec_of(LearnSpec::What::biases), spec_of(LearnSpec::What::head),
                               spec_of(LearnSpec::What::layers, LearnSpec::Way::steps, {"polish", "act2"})}) {
        const LearnPlan plan = plan_of(m, s);
        const auto cs = cases(9, 3, 3, 2, false);
        const auto got = run_gradient(m, plan, Precision::float64, cs, fmt::format("sel{}", static_cast<int>(s.what)));
        for (std::size_t k = 0; k < got.size(); ++k)
            EXPECT_LT(relative_error(got[k].grad, runtime_gradient(m, plan, cs[k]).grad), 1e-14);
    }
    EXPECT_EQ(plan_of(m, spec_of(LearnSpec::What::head)).count, 12u);            // 2 x 5 + 2
    EXPECT_EQ(plan_of(m, spec_of(LearnSpec::What::head)).first_block, 6u);
    EXPECT_EQ(plan_of(m, spec_of(LearnSpec::What::biases)).count, 6u + 6 + 6 + 5 + 7 + 5 + 5 + 2);
}

// The sample fan_balance: rk4 with 8 steps, augment 2, time in the field, a
// residual block and a softmax head (cross-entropy), both ways.
Model fan_balance() {
    Diagnostics diags;
    auto l = load_model(std::string(MEANDER_SOURCE_DIR) + "/samples/fan_balance/fan_balance.mnd", Precision::float64, diags);
    EXPECT_TRUE(l.has_value()) << diags.render();
    return l->model;
}

TEST(Learn, ContinuousThroughStepsFloat64MatchesRuntimeDiscrete) {
    const Model m = fan_balance();
    const LearnPlan plan = plan_of(m, spec_of(LearnSpec::What::all, LearnSpec::Way::steps));
    const auto cs = cases(21, 4, 8, 4, true);
    const auto got = run_gradient(m, plan, Precision::float64, cs, "fan_steps64");
    for (std::size_t k = 0; k < got.size(); ++k) {
        const Want w = runtime_gradient(m, plan, cs[k]);
        EXPECT_EQ(got[k].result, 0);
        EXPECT_NEAR(got[k].loss, w.loss, 1e-14 * std::fabs(w.loss));
        EXPECT_LT(relative_error(got[k].grad, w.grad), 1e-14) << "case " << k;  // seen: 5e-16
    }
}

TEST(Learn, ContinuousByAdjointFloat64MatchesRuntimeAdjoint) {
    const Model m = fan_balance();
    const LearnPlan plan = plan_of(m, spec_of(LearnSpec::What::all, LearnSpec::Way::adjoint));
    const auto cs = cases(22, 4, 8, 4, true);
    const auto got = run_gradient(m, plan, Precision::float64, cs, "fan_adjoint64");
    const LearnPlan steps = plan_of(m, spec_of(LearnSpec::What::all, LearnSpec::Way::steps));
    for (std::size_t k = 0; k < got.size(); ++k) {
        const Want w = runtime_gradient(m, plan, cs[k]);
        EXPECT_EQ(got[k].result, 0);
        EXPECT_LT(relative_error(got[k].grad, w.grad), 1e-14) << "case " << k;
        // rk4 with 8 steps: the adjoint is within the discretisation of the exact gradient (seen: 1.0e-4).
        EXPECT_LT(relative_error(got[k].grad, runtime_gradient(m, steps, cs[k]).grad), 1e-3) << "case " << k;
    }
}

// Central differences of the emitted float64 loss (step 1e-6; truncation
// O(1e-12), rounding O(1e-10)) against the emitted gradient.
TEST(Learn, Float64GradientMatchesCentralDifferences) {
    const Model m = fan_balance();
    for (auto way : {LearnSpec::Way::steps}) {
        const LearnPlan plan = plan_of(m, spec_of(LearnSpec::What::layers, way, {"settle", "head"}));
        const auto cs = cases(23, 2, 8, 4, true);
        const auto got = run_gradient(m, plan, Precision::float64, cs, "fan_fd64", 40, 1e-6);
        for (const Got& g : got) {
            ASSERT_EQ(g.fd.size(), 40u);
            double scale = 0.0;
            for (double v : g.grad) scale = std::max(scale, std::fabs(v));
            for (std::size_t i = 0; i < g.fd.size(); ++i) EXPECT_NEAR(g.fd[i], g.grad[i], 1e-7 * scale) << i;
        }
    }
}

// float32 (meander's float kernels) against the runtime in double: the
// gradient within 2e-5 norm-wise (float32 through 8 rk4 steps and back; seen: 1.2e-6).
TEST(Learn, Float32WithinToleranceOfRuntime) {
    const Model m = fan_balance();
    for (auto way : {LearnSpec::Way::steps, LearnSpec::Way::adjoint}) {
        const LearnPlan plan = plan_of(m, spec_of(LearnSpec::What::all, way));
        const auto cs = cases(24, 4, 8, 4, true);
        const auto got = run_gradient(m, plan, Precision::float32, cs, fmt::format("fan32_{}", learn_way_name(way)));
        for (std::size_t k = 0; k < got.size(); ++k) {
            const Want w = runtime_gradient(m, plan, cs[k]);
            EXPECT_EQ(got[k].result, 0);
            EXPECT_LT(relative_error(got[k].grad, w.grad), 2e-5) << learn_way_name(way) << " case " << k;
        }
    }
}

}  // namespace
}  // namespace meander

namespace meander {
namespace {

// Builds `driver` (a main body) with the emitted code and returns its output.
std::string run_driver(const Model& m, const LearnPlan& plan, Precision p, const std::string& tag, const std::string& body) {
    EmitOptions o;
    o.precision = p;
    o.learn = plan;
    const auto dir = test::scratch_dir("learn", tag);
    test::write_files(dir, emit_model(m, o));
    std::string d = fmt::format("#include <cstdio>\n#include <cstring>\n#include <cmath>\n#include <limits>\n#include \"{0}.hpp\"\n"
                                "using namespace {0};\nstatic learn_context lctx;\nstatic context ctx;\n"
                                "static parameters p, g, before;\nint main() {{\n{1}\n    return 0;\n}}\n",
                                m.name, body);
    test::write_text(dir / "driver.cpp", d);
    const std::string err = test::build(dir, {m.name + ".cpp", "driver.cpp"}, "driver");
    EXPECT_EQ(err, "");
    const test::RunResult rr = test::run((dir / "driver").string());
    EXPECT_EQ(rr.status, 0) << rr.output;
    return rr.output;
}

// fan_balance's inputs and a target, in the driver's terms.
const char* kFanRow = R"(
    real x[input_size] = {0.3f, -0.2f, 0.5f, 0.1f, -0.7f, 0.25f, 0.0f, 0.9f};
    real t[output_size] = {0.1f, 0.2f, 0.3f, 0.4f};
    real out[output_size], out2[output_size];
    real loss = 0;
    init_parameters(p);
    before = p;
    const auto same = [&]() { return std::memcmp(&p, &before, sizeof p) == 0; };
    const real nan = std::numeric_limits<real>::quiet_NaN();
    const real inf = std::numeric_limits<real>::infinity();
)";

// A non-finite input, target or gradient and a refused rate or clip return
// their codes and leave the parameters bit for bit as they were.
TEST(Learn, BadInputLeavesParametersAsTheyWere) {
    const Model m = fan_balance();
    for (auto way : {LearnSpec::Way::steps, LearnSpec::Way::adjoint}) {
        const LearnPlan plan = plan_of(m, spec_of(LearnSpec::What::all, way));
        const std::string out = run_driver(m, plan, Precision::float32, fmt::format("bad_{}", learn_way_name(way)), std::string(kFanRow) + R"(
    std::printf("rate0 %d %d\n", static_cast<int>(learn_step(lctx, p, x, t, 0.0f, 0.0f, loss)), same());
    std::printf("rateneg %d %d\n", static_cast<int>(learn_step(lctx, p, x, t, -0.1f, 0.0f, loss)), same());
    std::printf("ratenan %d %d\n", static_cast<int>(learn_step(lctx, p, x, t, nan, 0.0f, loss)), same());
    std::printf("rateinf %d %d\n", static_cast<int>(learn_step(lctx, p, x, t, inf, 0.0f, loss)), same());
    std::printf("clipneg %d %d\n", static_cast<int>(learn_step(lctx, p, x, t, 0.1f, -1.0f, loss)), same());
    std::printf("clipnan %d %d\n", static_cast<int>(learn_step(lctx, p, x, t, 0.1f, nan, loss)), same());
    x[3] = nan;
    std::printf("xnan %d %d\n", static_cast<int>(learn_step(lctx, p, x, t, 0.1f, 0.0f, loss)), same());
    x[3] = 0.1f;
    t[2] = inf;
    std::printf("tinf %d %d\n", static_cast<int>(learn_step(lctx, p, x, t, 0.1f, 0.0f, loss)), same());
    t[2] = 0.3f;
    // A target far beyond float's range in the softmax's gradient: y * sum(t) overflows.
    t[0] = 3e38f; t[1] = 3e38f;
    std::printf("gradinf %d %d\n", static_cast<int>(learn_step(lctx, p, x, t, 0.1f, 0.0f, loss)), same());
    t[0] = 0.1f; t[1] = 0.2f;
    // The learning infer with the shipped parameters is infer, bit for bit.
    const int r1 = static_cast<int>(infer(ctx, x, out));
    const int r2 = static_cast<int>(infer(lctx, p, x, out2));
    std::printf("infer %d %d %d\n", r1, r2, std::memcmp(out, out2, sizeof out) == 0);
    // One step: p - rate * g, value by value; the counters as the header says.
    gradient(lctx, p, x, t, g, loss);
    std::printf("evals %lu %lu\n", static_cast<unsigned long>(lctx.count.field_evals), static_cast<unsigned long>(learn_field_evals));
    const int rs = static_cast<int>(learn_step(lctx, p, x, t, 0.05f, 0.0f, loss));
    bool exact = true;
    for (std::size_t i = 0; i < learnable_count; ++i) {
        const real want = before.value[i] - 0.05f * g.value[i];
        exact = exact && std::memcmp(&p.value[i], &want, sizeof want) == 0;
    }
    std::printf("step %d %d\n", rs, exact);
    // Clipped to norm 1e-3: the change has that norm.
    p = before;
    learn_step(lctx, p, x, t, 1.0f, 1e-3f, loss);
    double sq = 0;
    for (std::size_t i = 0; i < learnable_count; ++i) sq += static_cast<double>(p.value[i] - before.value[i]) * static_cast<double>(p.value[i] - before.value[i]);
    std::printf("clip %.6g\n", std::sqrt(sq));
)");
        const std::string w = learn_way_name(way);
        EXPECT_NE(out.find("rate0 7 1\n"), std::string::npos) << out;
        EXPECT_NE(out.find("rateneg 7 1\n"), std::string::npos) << out;
        EXPECT_NE(out.find("ratenan 7 1\n"), std::string::npos) << out;
        EXPECT_NE(out.find("rateinf 7 1\n"), std::string::npos) << out;
        EXPECT_NE(out.find("clipneg 7 1\n"), std::string::npos) << out;
        EXPECT_NE(out.find("clipnan 7 1\n"), std::string::npos) << out;
        EXPECT_NE(out.find("xnan 1 1\n"), std::string::npos) << out;
        EXPECT_NE(out.find("tinf 5 1\n"), std::string::npos) << out;
        EXPECT_NE(out.find("gradinf 6 1\n"), std::string::npos) << out;
        EXPECT_NE(out.find("infer 0 0 1\n"), std::string::npos) << out;
        EXPECT_NE(out.find("step 0 1\n"), std::string::npos) << out;
        // The change's norm is the clip, up to float32's rounding of each p - s g (|p| < 2: 1.2e-7 each).
        const std::size_t at = out.find("clip ");
        ASSERT_NE(at, std::string::npos) << out;
        EXPECT_NEAR(std::strtod(out.c_str() + at + 5, nullptr), 1e-3, 2e-5) << out;
        // steps: 8 x 4 forward, 8 x 3 again and 8 x 4 recorded back; adjoint: 8 x 4 each way
        EXPECT_NE(out.find(way == LearnSpec::Way::steps ? "evals 88 88\n" : "evals 64 64\n"), std::string::npos) << out;
    }
}

std::string plan_errors(const Model& m, const LearnSpec& s) {
    Diagnostics diags;
    EXPECT_FALSE(plan_learning(m, s, nullptr, "--learn", diags).has_value());
    return diags.render();
}

TEST(Learn, RefusedSpecs) {
    const Model m = fan_balance();
    EXPECT_NE(plan_errors(m, spec_of(LearnSpec::What::layers, LearnSpec::Way::steps, {"haed"}))
                  .find("--learn: error: 'learn': no layer or block named 'haed'; did you mean 'head'?"),
              std::string::npos);
    EXPECT_NE(plan_errors(m, spec_of(LearnSpec::What::layers, LearnSpec::Way::steps, {"head", "head"})).find("named twice"),
              std::string::npos);
    Model tail = m;
    tail.blocks.pop_back();
    EXPECT_NE(plan_errors(tail, spec_of(LearnSpec::What::head)).find("'tidy' is a residual block"), std::string::npos);
    Model adaptive = m;
    adaptive.blocks[1].continuous.solver = test::adaptive_solver("dormand-prince", 1e-3, 1e-4, 24);
    const std::string a = plan_errors(adaptive, spec_of(LearnSpec::What::all, LearnSpec::Way::adjoint));
    EXPECT_NE(a.find("'learn ... by adjoint': the gradient goes back through continuous block 'settle', whose solver "
                     "dormand-prince is adaptive"),
              std::string::npos)
        << a;
    // After the adaptive block, the head can learn: the gradient stops before it.
    Diagnostics diags;
    EXPECT_TRUE(plan_learning(adaptive, spec_of(LearnSpec::What::head), nullptr, "--learn", diags).has_value());
}

// The command line: --learn and --learn-by, their refusals, no output on error.
TEST(Learn, CompileOption) {
    const auto dir = test::scratch_dir("learn", "cli");
    const std::string mnd = std::string(MEANDER_SOURCE_DIR) + "/samples/fan_balance/fan_balance.mnd";
    auto run = [&](const std::string& args) {
        return test::run(fmt::format("'{}' compile '{}' -o '{}' {}", MEANDER_BINARY, mnd, (dir / "out").string(), args));
    };
    test::RunResult r = run("--learn haed");
    EXPECT_EQ(r.status, 1);
    EXPECT_NE(r.output.find("did you mean 'head'?"), std::string::npos) << r.output;
    EXPECT_FALSE(std::filesystem::exists(dir / "out" / "fan_balance.hpp"));
    r = run("--learn head --learn-by sideways");
    EXPECT_EQ(r.status, 2);
    EXPECT_NE(r.output.find("--learn-by: error: 'sideways': expected steps or adjoint"), std::string::npos) << r.output;
    r = run("--learn-by adjoint");
    EXPECT_EQ(r.status, 2);
    r = run("--learn lift,settle --learn-by adjoint");
    EXPECT_EQ(r.status, 0) << r.output;
    const std::string hpp = test::read_text(dir / "out" / "fan_balance.hpp");
    // lift 12 x 8 + 12, f1 16 x 15 + 16, f2 14 x 16 + 14
    EXPECT_NE(hpp.find("constexpr std::size_t learnable_count = 602;"), std::string::npos);
    // cost states what the header states: the same plan, the same figures.
    const auto grab = [](const std::string& text, const std::string& key) {
        const std::size_t at = text.find(key);
        return at == std::string::npos ? -1L : std::strtol(text.c_str() + at + key.size(), nullptr, 10);
    };
    const test::RunResult c = test::run(fmt::format("'{}' cost '{}' --estimate-only --learn lift,settle --learn-by adjoint",
                                                    MEANDER_BINARY, mnd));
    EXPECT_EQ(c.status, 0) << c.output;
    EXPECT_EQ(grab(c.output, "learnable values        "), 602);
    EXPECT_EQ(grab(c.output, "learning workspace      "), grab(hpp, "learn_workspace_size = "));
    EXPECT_EQ(grab(c.output, "field evaluations       "), grab(hpp, "learn_field_evals = "));
    EXPECT_EQ(grab(c.output, "MACs                    "), grab(hpp, "learn_macs = "));
    EXPECT_NE(c.output.find("independent of the step count"), std::string::npos) << c.output;
    EXPECT_NE(c.output.find("cycles                  not measured: measurement turned off (--estimate-only)"),
              std::string::npos)
        << c.output;
    // --labels gives the measured learning steps' targets: nothing to give them to without learning.
    const test::RunResult nl = test::run(fmt::format("'{}' cost '{}' --estimate-only --input '{}' --labels '{}'",
                                                     MEANDER_BINARY, mnd, std::string(MEANDER_SOURCE_DIR) + "/samples/fan_balance/inputs.csv",
                                                     std::string(MEANDER_SOURCE_DIR) + "/samples/fan_balance/expected.csv"));
    EXPECT_EQ(nl.status, 2) << nl.output;
    EXPECT_NE(nl.output.find("--labels: error: gives the targets of the measured learning steps"), std::string::npos)
        << nl.output;
}

}  // namespace
}  // namespace meander

namespace meander {
namespace {

// The description's `learn` statement: parsed, checked with carets, kept by format.
TEST(Learn, Statement) {
    const auto dir = test::scratch_dir("learn", "statement");
    const std::string sample = std::string(MEANDER_SOURCE_DIR) + "/samples/fan_balance/";
    std::filesystem::copy_file(sample + "fan_balance.npz", dir / "fan_balance.npz");
    const std::string text = test::read_text(sample + "fan_balance.mnd");
    auto with = [&](const std::string& line) {
        std::string t = text;
        t.insert(t.find("input vib"), line + "\n");
        test::write_text(dir / "m.mnd", t);
        const int at = static_cast<int>(std::count(t.begin(), t.begin() + static_cast<long>(t.find(line)), '\n')) + 1;
        return std::make_pair(test::run(fmt::format("'{}' check '{}'", MEANDER_BINARY, (dir / "m.mnd").string())), at);
    };
    auto [r, line] = with("learn layers settle, hed by adjoint");
    EXPECT_EQ(r.status, 1);
    EXPECT_NE(r.output.find(fmt::format("m.mnd:{}:22: error: 'learn': no layer or block named 'hed'; did you mean 'head'?", line)),
              std::string::npos)
        << r.output;
    std::tie(r, line) = with("learn all by sideways");
    EXPECT_NE(r.output.find(fmt::format("m.mnd:{}:14: error: expected how the gradient goes back after 'by': steps or adjoint", line)),
              std::string::npos)
        << r.output;
    std::tie(r, line) = with("learn everything");
    EXPECT_NE(r.output.find(fmt::format("m.mnd:{}:7: error: expected what learns after 'learn'", line)), std::string::npos)
        << r.output;
    std::tie(r, line) = with("learn head\nlearn biases");
    EXPECT_NE(r.output.find("a second 'learn' statement"), std::string::npos) << r.output;
    std::tie(r, line) = with("learn layers lift, head by adjoint");
    EXPECT_EQ(r.status, 0) << r.output;
    const test::RunResult f = test::run(fmt::format("'{}' format '{}'", MEANDER_BINARY, (dir / "m.mnd").string()));
    EXPECT_NE(f.output.find("\nlearn layers lift, head by adjoint\n"), std::string::npos) << f.output;
    const test::RunResult c = test::run(fmt::format("'{}' compile '{}' -o '{}'", MEANDER_BINARY, (dir / "m.mnd").string(),
                                                    (dir / "out").string()));
    EXPECT_EQ(c.status, 0) << c.output;
    EXPECT_NE(test::read_text(dir / "out" / "fan_balance.hpp").find("lift_weight_at = 0;"), std::string::npos);
    // An adaptive block on the way back: the caret at the way.
    Diagnostics diags;
    Source src("m.mnd", "model m\nlearn all by steps\n");
    Model m = fan_balance();
    m.blocks[1].continuous.solver = test::adaptive_solver("dormand-prince", 1e-3, 1e-4, 24);
    LearnSpec s = spec_of(LearnSpec::What::all);
    s.loc = Loc{2, 1};
    s.way_loc = Loc{2, 14};
    s.way_written = true;
    EXPECT_FALSE(plan_learning(m, s, &src, "m.mnd", diags).has_value());
    EXPECT_NE(diags.render().find("m.mnd:2:14: error: 'learn ... by steps'"), std::string::npos) << diags.render();
}

// A model whose input and output are standardised (infer: (x - mean) / scale before the
// first layer, y * scale + mean after the last): the loss is on the output in its own
// units, as the runtime's gradient (runtime/gradient.cpp) takes it.
Model standardised_model() {
    Model m = dense_model();
    Standardised in, out;
    in.mean = Eigen::Vector3d(0.5, -2.0, 10.0);
    in.scale = Eigen::Vector3d(2.0, 0.25, 4.0);
    out.mean = Eigen::Vector2d(20.0, -1.0);
    out.scale = Eigen::Vector2d(3.0, 0.5);
    m.input_info.standardised = in;
    m.output_info.standardised = out;
    return m;
}

TEST(Learn, StandardisedInputAndOutputFloat64MatchRuntime) {
    const Model m = standardised_model();
    for (const LearnSpec& s : {spec_of(LearnSpec::What::all), spec_of(LearnSpec::What::head)}) {
        const LearnPlan plan = plan_of(m, s);
        std::vector<Case> cs = cases(31, 4, 3, 2, false);
        for (Case& c : cs) {  // inputs and targets in the vectors' own units
            for (int i = 0; i < 3; ++i) c.x[i] = c.x[i] * (*m.input_info.standardised).scale[i] + (*m.input_info.standardised).mean[i];
            for (int i = 0; i < 2; ++i) c.target[i] = c.target[i] * (*m.output_info.standardised).scale[i] + (*m.output_info.standardised).mean[i];
        }
        const auto got = run_gradient(m, plan, Precision::float64, cs, fmt::format("std{}", static_cast<int>(s.what)));
        for (std::size_t k = 0; k < got.size(); ++k) {
            const Want w = runtime_gradient(m, plan, cs[k]);
            EXPECT_EQ(got[k].result, 0);
            EXPECT_NEAR(got[k].loss, w.loss, 1e-13 * std::fabs(w.loss)) << "case " << k;
            EXPECT_LT(relative_error(got[k].grad, w.grad), 1e-14) << "case " << k;
        }
    }
}

// The learning infer of soil_probe (standardised input and output, an adaptive block before
// the head) with the shipped parameters is infer, bit for bit, in float32.
TEST(Learn, StandardisedLearningInferIsInfer) {
    Diagnostics diags;
    auto l = load_model(std::string(MEANDER_SOURCE_DIR) + "/samples/soil_probe/soil_probe.mnd", Precision::float32, diags);
    ASSERT_TRUE(l.has_value()) << diags.render();
    const LearnPlan plan = plan_of(l->model, spec_of(LearnSpec::What::head));
    const std::string out = run_driver(l->model, plan, Precision::float32, "soil_infer", R"(
    // The first three rows of samples/soil_probe/inputs.csv.
    const real rows[3][input_size] = {{4.31603f, 3.93541f, 4.09405f, 0.0152529f, 15.4979f},
                                      {4.26192f, 4.09584f, 4.09063f, 0.0177307f, 11.4128f},
                                      {20.6395f, 12.2083f, 11.5143f, 0.204461f, 12.1579f}};
    init_parameters(p);
    static_cast<void>(g);
    static_cast<void>(before);
    for (int r = 0; r < 3; ++r) {
        real out[output_size], out2[output_size];
        const int r1 = static_cast<int>(infer(ctx, rows[r], out));
        const int r2 = static_cast<int>(infer(lctx, p, rows[r], out2));
        std::printf("infer %d %d %d %g\n", r1, r2, std::memcmp(out, out2, sizeof out) == 0, static_cast<double>(out[0]));
    }
)");
    std::size_t n = 0;
    for (std::size_t at = out.find("infer 0 0 1 "); at != std::string::npos; at = out.find("infer 0 0 1 ", at + 1)) ++n;
    EXPECT_EQ(n, 3u) << out;
}

}  // namespace
}  // namespace meander
