// The solver-budget tuner (compiler/tune.cpp) on linear continuous blocks,
// whose fixed-step results have a closed form: one step of a Runge-Kutta
// method on y' = A y multiplies y by its stability polynomial R(hA) (HNW I,
// IV.2; references.md "Stability polynomials"), and the exact solution is
// expm(A T) y0 (Eigen's MatrixFunctions) or exp(a T) y0 for a scalar. The
// adaptive sweep is checked against SciPy 1.10 solve_ivp RK45, and the
// sample fan_balance against its own description.
#include "compiler/load.hpp"
#include "compiler/tune.hpp"

#include <gtest/gtest.h>

#include <unsupported/Eigen/MatrixFunctions>

#include <algorithm>
#include <cfloat>
#include <cmath>
#include <cstdio>
#include <filesystem>
#include <fstream>
#include <nlohmann/json.hpp>
#include <sstream>
#include <string>
#include <unistd.h>
#include <vector>

#include "compiler/check.hpp"
#include "compiler/cost.hpp"
#include "compiler/parse.hpp"
#include "compiler/weights.hpp"
#include "runtime/model.hpp"
#include "test_support.hpp"

namespace meander {
namespace {

namespace fs = std::filesystem;

// ---- hand-built linear models ----------------------------------------------

Block dense_block(const std::string& name, const Eigen::MatrixXd& w, const Eigen::VectorXd* bias) {
    Block b;
    b.kind = Block::Kind::dense;
    b.dense.name = name;
    b.dense.in = static_cast<int>(w.cols());
    b.dense.out = static_cast<int>(w.rows());
    b.dense.weight = w;
    b.dense.has_bias = bias != nullptr;
    if (bias) b.dense.bias = *bias;
    return b;
}

// As a description would write them: the tuner reads which options were written.
SolverSpec fixed(const std::string& method, int steps) {
    SolverSpec s = test::fixed_solver(method, steps);
    s.written = {"steps"};
    return s;
}

SolverSpec adaptive(const std::string& method, double rtol, double atol, int max_steps) {
    SolverSpec s = test::adaptive_solver(method, rtol, atol, max_steps);
    s.written = {"rtol", "atol", "max-steps"};
    return s;
}

// dh/dt = A h on [t0, t1], the field one dense layer without bias or activation.
Block linear_continuous(const Eigen::MatrixXd& a, int width, double t0, double t1, const SolverSpec& solver) {
    std::vector<Block> field;
    field.push_back(dense_block("f1", a, nullptr));
    return test::continuous("settle", width, static_cast<int>(a.rows()) - width, t0, t1, std::move(field), solver);
}

Model scalar_model(double a, double t0, double t1, const SolverSpec& solver) {
    Model m = test::model("scalar", 1, 1);
    m.blocks.push_back(linear_continuous(Eigen::MatrixXd::Constant(1, 1, a), 1, t0, t1, solver));
    return m;
}

TuneOptions options(double target, std::vector<std::vector<double>> inputs, Precision p = Precision::float64) {
    TuneOptions o;
    o.target = target;
    o.precision = p;
    o.inputs = std::move(inputs);
    o.whole_sweep = true;  // most tests check every grid point against a closed form
    o.threads = 1;
    return o;
}

// ---- closed forms ----------------------------------------------------------

// Stability polynomials (references.md; HNW I, IV.2): every method matches
// sum z^k / k! up to its order, and these explicit ones stop there.
double stability(const std::string& method, double z) {
    if (method == "euler") return 1.0 + z;
    if (method == "midpoint" || method == "heun") return 1.0 + z + z * z / 2.0;
    return 1.0 + z + z * z / 2.0 + z * z * z / 6.0 + z * z * z * z / 24.0;  // rk4, rk38
}

Eigen::MatrixXd rk4_matrix(const Eigen::MatrixXd& z) {
    const Eigen::MatrixXd i = Eigen::MatrixXd::Identity(z.rows(), z.cols());
    const Eigen::MatrixXd z2 = z * z;
    return i + z + z2 / 2.0 + z2 * z / 6.0 + z2 * z2 / 24.0;
}

// Scaled deviation of N fixed steps on the scalar model from the exact solution, worst over the rows.
double scalar_deviation(const std::string& method, double a, double span, int n, const std::vector<std::vector<double>>& rows) {
    double worst = 0.0;
    const double exact = std::exp(a * span);
    const double numeric = std::pow(stability(method, a * span / n), n);
    for (const auto& r : rows) {
        const double ref = r[0] * exact;
        worst = std::max(worst, std::fabs(r[0] * numeric - ref) / std::max(1.0, std::fabs(ref)));
    }
    return worst;
}

const TuneCandidate* fixed_candidate(const TuneBlock& b, const std::string& method, int steps) {
    for (const TuneCandidate& k : b.candidates)
        if (k.spec.method == method && k.spec.steps == steps) return &k;
    return nullptr;
}

// The sweep the brief asks for: powers of two and 1.5 times them.
const std::vector<int> kGrid = {1, 2, 3, 4, 6, 8, 12, 16, 24, 32, 48, 64, 96, 128, 192, 256};

// ---- fixed step ------------------------------------------------------------

TEST(TuneFixed, Rk4DeviationIsTheStabilityPolynomialError) {
    const double a = -2.0;
    const std::vector<std::vector<double>> rows = {{1.0}, {-2.5}};
    const Model m = scalar_model(a, 0.0, 1.0, fixed("rk4", 8));
    Diagnostics diags;
    const auto rep = tune_model(m, options(1e-6, rows), diags);
    ASSERT_TRUE(rep) << diags.render();
    ASSERT_EQ(rep->blocks.size(), 1u);
    const TuneBlock& b = rep->blocks[0];
    ASSERT_EQ(b.candidates.size(), kGrid.size());
    for (std::size_t i = 0; i < kGrid.size(); ++i) {
        const TuneCandidate& k = b.candidates[i];
        SCOPED_TRACE(k.spec.steps);
        EXPECT_EQ(k.spec.method, "rk4");
        EXPECT_EQ(k.spec.steps, kGrid[i]);
        ASSERT_TRUE(k.ok);
        // |R(aT/N)^N - exp(aT)| times the largest |h0| (|ref| < 1 here: absolute); the
        // reference (dormand-prince at 1e-12) is within ~1e-12 of the exact solution.
        EXPECT_NEAR(k.deviation, scalar_deviation("rk4", a, 1.0, kGrid[i], rows), 1e-11);
        EXPECT_EQ(k.worst_row, 1);
        // Classic RK4 has 4 stages (HNW I, II.1): exactly 4N evaluations, one MAC each.
        EXPECT_EQ(k.worst_field_evals, 4L * kGrid[i]);
        EXPECT_EQ(k.measured_field_evals, 4L * kGrid[i]);
        EXPECT_EQ(k.worst_macs, 4LL * kGrid[i]);
    }
    // The deployed line is reported on its own with the same closed form.
    EXPECT_EQ(b.deployed.spec.steps, 8);
    EXPECT_NEAR(b.deployed.deviation, scalar_deviation("rk4", a, 1.0, 8, rows), 1e-11);
}

TEST(TuneFixed, GrowthIsScaledByTheReference) {
    // y' = 1.5 y on [0.5, 2.5]: exp(3) ~ 20; a row whose outputs pass 1 is measured relatively.
    const double a = 1.5;
    const std::vector<std::vector<double>> rows = {{0.01}, {4.0}, {-0.03}};
    const Model m = scalar_model(a, 0.5, 2.5, fixed("rk4", 4));
    Diagnostics diags;
    const auto rep = tune_model(m, options(1e-6, rows), diags);
    ASSERT_TRUE(rep) << diags.render();
    const TuneBlock& b = rep->blocks[0];
    for (int n : kGrid) {
        SCOPED_TRACE(n);
        const TuneCandidate* k = fixed_candidate(b, "rk4", n);
        ASSERT_NE(k, nullptr);
        const double want = scalar_deviation("rk4", a, 2.0, n, rows);
        EXPECT_NEAR(k->deviation, want, 1e-11 + 1e-9 * want);
        EXPECT_EQ(k->worst_row, 1);  // 4 e^3 ~ 80: the relative error there
    }
}

TEST(TuneFixed, ChoosesTheSmallestStepCountMeetingTheTarget) {
    const double a = -2.0;
    const std::vector<std::vector<double>> rows = {{1.0}, {0.5}};
    for (double target : {1e-2, 1e-4, 1e-6, 1e-8}) {
        SCOPED_TRACE(target);
        int want = 0;
        for (int n : kGrid) {
            const double d = scalar_deviation("rk4", a, 1.0, n, rows);
            // Keep clear of the boundary, where the reference's own error could decide.
            ASSERT_FALSE(std::fabs(d - target) < 0.05 * target) << n;
            if (d <= target) {
                want = n;
                break;
            }
        }
        ASSERT_GT(want, 0);
        Diagnostics diags;
        const auto rep = tune_model(scalar_model(a, 0.0, 1.0, fixed("rk4", 8)), options(target, rows), diags);
        ASSERT_TRUE(rep) << diags.render();
        const TuneBlock& b = rep->blocks[0];
        ASSERT_TRUE(b.chosen);
        EXPECT_EQ(b.candidates[*b.chosen].spec.steps, want);
        EXPECT_EQ(b.solver_line, "solver rk4, steps " + std::to_string(want));
        const std::string text = render_tune_text(*rep);
        EXPECT_NE(text.find("recommended: solver rk4, steps " + std::to_string(want) + "\n"), std::string::npos) << text;
    }
}

TEST(TuneFixed, ChoosesTheCheapestAcrossMethods) {
    // Euler costs 1 evaluation a step, RK4 4: the cheaper of the two that meets the target wins.
    const double a = -2.0;
    const std::vector<std::vector<double>> rows = {{1.0}};
    for (double target : {3e-2, 1e-2, 1e-5}) {
        SCOPED_TRACE(target);
        long best_cost = -1;
        std::string best_method;
        int best_n = 0;
        for (const std::string method : {"euler", "rk4"}) {
            const long stages = method == "euler" ? 1 : 4;
            for (int n : kGrid) {
                if (scalar_deviation(method, a, 1.0, n, rows) <= target) {
                    if (best_cost < 0 || stages * n < best_cost) {
                        best_cost = stages * n;
                        best_method = method;
                        best_n = n;
                    }
                    break;
                }
            }
        }
        ASSERT_GT(best_cost, 0);
        TuneOptions o = options(target, rows);
        o.methods = {"euler", "rk4"};
        Diagnostics diags;
        const auto rep = tune_model(scalar_model(a, 0.0, 1.0, fixed("rk4", 8)), o, diags);
        ASSERT_TRUE(rep) << diags.render();
        const TuneBlock& b = rep->blocks[0];
        EXPECT_EQ(b.candidates.size(), 2 * kGrid.size());
        ASSERT_TRUE(b.chosen);
        EXPECT_EQ(b.candidates[*b.chosen].spec.method, best_method);
        EXPECT_EQ(b.candidates[*b.chosen].spec.steps, best_n);
        EXPECT_EQ(b.candidates[*b.chosen].worst_field_evals, best_cost);
    }
}

TEST(TuneFixed, ErrorsFallAtTheMethodsOrder) {
    // Orders from HNW I, II.1: Euler 1, midpoint and Heun 2, RK4 and the 3/8 rule 4.
    // references.md ("Convergence"): halving h divides the error by about 2^p.
    const struct {
        const char* method;
        int order;
    } methods[] = {{"euler", 1}, {"midpoint", 2}, {"heun", 2}, {"rk4", 4}, {"rk38", 4}};
    TuneOptions o = options(1e-6, {{1.0}});
    for (const auto& m : methods) o.methods.push_back(m.method);
    Diagnostics diags;
    const auto rep = tune_model(scalar_model(-1.0, 0.0, 1.0, fixed("rk4", 8)), o, diags);
    ASSERT_TRUE(rep) << diags.render();
    const TuneBlock& b = rep->blocks[0];
    for (const auto& m : methods) {
        for (int n : {8, 16, 32}) {
            SCOPED_TRACE(std::string(m.method) + " " + std::to_string(n));
            const TuneCandidate* coarse = fixed_candidate(b, m.method, n);
            const TuneCandidate* fine = fixed_candidate(b, m.method, 2 * n);
            ASSERT_TRUE(coarse && fine);
            ASSERT_GT(fine->deviation, 1e-10);  // well above the reference's own error
            const double observed = std::log2(coarse->deviation / fine->deviation);
            EXPECT_NEAR(observed, m.order, 0.25);
        }
    }
}

TEST(TuneFixed, MatrixFieldWithAugmentAndLayersAround) {
    // lift (2 -> 2, bias) -> continuous (state 3: width 2 + augment 1) -> head (3 -> 2, bias).
    Eigen::MatrixXd wl(2, 2);
    wl << 0.8, -0.3, 0.2, 1.1;
    Eigen::VectorXd bl(2);
    bl << 0.05, -0.1;
    Eigen::MatrixXd a(3, 3);
    a << -0.5, 2.0, 0.1, -2.0, -0.5, 0.3, 0.2, 0.0, -1.0;
    Eigen::MatrixXd wh(2, 3);
    wh << 1.5, -0.4, 2.0, 0.3, 0.9, -1.2;
    Eigen::VectorXd bh(2);
    bh << 0.25, 3.0;  // the second output sits above 1: relative there
    const double t0 = 0.25, t1 = 1.75;

    Model m = test::model("linear3", 2, 2);
    m.blocks.push_back(dense_block("lift", wl, &bl));
    m.blocks.push_back(linear_continuous(a, 2, t0, t1, fixed("rk4", 6)));
    m.blocks.push_back(dense_block("head", wh, &bh));

    const std::vector<std::vector<double>> rows = {{1.0, -0.5}, {-2.0, 0.75}, {0.3, 2.2}};
    Diagnostics diags;
    const auto rep = tune_model(m, options(1e-5, rows), diags);
    ASSERT_TRUE(rep) << diags.render();
    ASSERT_EQ(rep->blocks.size(), 1u);
    const TuneBlock& b = rep->blocks[0];
    EXPECT_EQ(b.state, 3);
    EXPECT_EQ(b.field_macs, 9);

    const Eigen::MatrixXd exact = (a * (t1 - t0)).exp();  // Eigen MatrixFunctions
    int want_chosen = 0;
    for (int n : kGrid) {
        SCOPED_TRACE(n);
        const Eigen::MatrixXd step = rk4_matrix(a * ((t1 - t0) / n));
        Eigen::MatrixXd power = Eigen::MatrixXd::Identity(3, 3);
        for (int i = 0; i < n; ++i) power = step * power;
        double worst = 0.0;
        for (const auto& r : rows) {
            Eigen::VectorXd h0 = Eigen::VectorXd::Zero(3);
            h0.head(2) = wl * Eigen::Vector2d(r[0], r[1]) + bl;
            const Eigen::VectorXd ref = wh * (exact * h0) + bh;
            const Eigen::VectorXd got = wh * (power * h0) + bh;
            for (int i = 0; i < 2; ++i) worst = std::max(worst, std::fabs(got[i] - ref[i]) / std::max(1.0, std::fabs(ref[i])));
        }
        const TuneCandidate* k = fixed_candidate(b, "rk4", n);
        ASSERT_NE(k, nullptr);
        EXPECT_NEAR(k->deviation, worst, 1e-11 + 1e-8 * worst);
        EXPECT_EQ(k->worst_macs, 9LL * 4 * n);
        if (want_chosen == 0 && worst <= 1e-5) want_chosen = n;
    }
    ASSERT_TRUE(b.chosen);
    EXPECT_EQ(b.candidates[*b.chosen].spec.steps, want_chosen);
}

TEST(TuneFixed, EachBlockIsTunedWithTheOthersAtTheirDeployedSolver) {
    // settle: y' = -y with rk4, steps 2 deployed; soak: y' = 0.5 y with euler, steps 4 deployed.
    const double a1 = -1.0, a2 = 0.5;
    Model m = scalar_model(a1, 0.0, 1.0, fixed("rk4", 2));
    m.blocks.push_back(linear_continuous(Eigen::MatrixXd::Constant(1, 1, a2), 1, 0.0, 1.0, fixed("euler", 4)));
    m.blocks[1].continuous.name = "soak";
    const std::vector<std::vector<double>> rows = {{1.0}, {-0.7}};
    TuneOptions o = options(1e-6, rows);
    o.methods = {"heun"};
    Diagnostics diags;
    const auto rep = tune_model(m, o, diags);
    ASSERT_TRUE(rep) << diags.render();
    ASSERT_EQ(rep->blocks.size(), 2u);
    EXPECT_EQ(rep->blocks[0].name, "settle");
    EXPECT_EQ(rep->blocks[1].name, "soak");
    const double settle_deployed = std::pow(stability("rk4", a1 / 2), 2);   // R(z)^N, references.md
    const double soak_deployed = std::pow(stability("euler", a2 / 4), 4);
    for (int n : kGrid) {
        SCOPED_TRACE(n);
        const double heun1 = std::pow(stability("heun", a1 / n), n);
        const double heun2 = std::pow(stability("heun", a2 / n), n);
        double want1 = 0.0, want2 = 0.0;
        for (const auto& r : rows) {
            // All outputs stay below 1 in magnitude: absolute deviations.
            want1 = std::max(want1, std::fabs(r[0] * (heun1 - std::exp(a1)) * soak_deployed));
            want2 = std::max(want2, std::fabs(r[0] * settle_deployed * (heun2 - std::exp(a2))));
        }
        EXPECT_NEAR(fixed_candidate(rep->blocks[0], "heun", n)->deviation, want1, 1e-11);
        EXPECT_NEAR(fixed_candidate(rep->blocks[1], "heun", n)->deviation, want2, 1e-11);
    }
}

// Each candidate's cycles are `meander cost`'s static estimate of the whole model with
// that candidate in its block and the other block deployed, on the chosen core; none
// in float64 (the figures are float32's).
TEST(TuneReport, CandidateCyclesAreCostsEstimateOfTheModelWithIt) {
    Model m = scalar_model(-1.0, 0.0, 1.0, fixed("rk4", 2));
    m.blocks.push_back(linear_continuous(Eigen::MatrixXd::Constant(1, 1, 0.5), 1, 0.0, 1.0, fixed("euler", 4)));
    m.blocks[1].continuous.name = "soak";
    TuneOptions o = options(1e-6, {{1.0}, {-0.7}}, Precision::float32);
    o.methods = {"heun"};
    o.max_steps_sweep = 16;
    for (const char* core : {"cortex-m4f", "cortex-m3"}) {
        SCOPED_TRACE(core);
        o.core = core;
        Diagnostics diags;
        const auto rep = tune_model(m, o, diags);
        ASSERT_TRUE(rep) << diags.render();
        EXPECT_EQ(rep->core, core);
        for (std::size_t b = 0; b < 2; ++b) {
            for (int n : {1, 4, 16}) {
                const TuneCandidate* k = fixed_candidate(rep->blocks[b], "heun", n);
                ASSERT_TRUE(k && k->worst_cycles);
                Model with = m;
                with.blocks[b].continuous.solver = k->spec;
                CostOptions co;
                co.core = core;
                co.cross_prefix.clear();
                co.measure_cycles = false;
                const auto cost = measure_cost(with, co, diags);
                ASSERT_TRUE(cost) << diags.render();
                EXPECT_DOUBLE_EQ(*k->worst_cycles, cost->cycles[0].worst) << "block " << b << ", heun " << n;
            }
        }
        const std::string text = render_tune_text(*rep);
        EXPECT_NE(text.find("cycles (worst)"), std::string::npos) << text;
        EXPECT_NE(text.find(std::string("one inference on the ") + core), std::string::npos) << text;
    }
    Diagnostics diags;
    const auto r64 = tune_model(m, options(1e-6, {{1.0}}, Precision::float64), diags);
    ASSERT_TRUE(r64) << diags.render();
    for (const TuneCandidate& k : r64->blocks[0].candidates) EXPECT_FALSE(k.worst_cycles);
    EXPECT_EQ(render_tune_text(*r64).find("cycles (worst)"), std::string::npos);
    o.core = "cortex-m55";
    EXPECT_FALSE(tune_model(m, o, diags));
    EXPECT_NE(diags.render().find("unknown core class 'cortex-m55'"), std::string::npos) << diags.render();
}

// ---- adaptive --------------------------------------------------------------

TEST(TuneAdaptive, MatchesSciPyRK45) {
    // SciPy 1.10 solve_ivp RK45 follows the same rules (DEVELOPERS.md): its nfev is
    // 2 + 6 * attempts, and its y(T) is what the tuner's candidate computes.
    const double a = -2.0;
    const std::vector<double> y0s = {1.0, -2.5, 0.4};
    const fs::path dir = fs::temp_directory_path() / ("meander_tune_" + std::to_string(getpid()));
    fs::create_directories(dir);
    {
        std::ofstream py(dir / "rk45.py");
        py << "import numpy as np\n"
              "from scipy.integrate import solve_ivp\n"
              "for rtol in [1e-1, 1e-2, 1e-3, 1e-4, 1e-5, 1e-6, 1e-7]:\n"
              "    for y0 in [1.0, -2.5, 0.4]:\n"
              "        s = solve_ivp(lambda t, y: -2.0 * y, (0.0, 1.0), [y0], method='RK45', rtol=rtol, atol=rtol * 1e-2)\n"
              "        print(repr(rtol), s.nfev, repr(float(s.y[0, -1])))\n";
    }
    const std::string out =
        test::capture(std::string(MEANDER_SCIPY_PYTHON) + " " + (dir / "rk45.py").string() + " 2>/dev/null");
    fs::remove_all(dir);
    std::istringstream in(out);
    std::vector<double> rtols;
    std::vector<long> nfev;
    std::vector<double> yend;
    double rt = 0.0, y = 0.0;
    long nf = 0;
    while (in >> rt >> nf >> y) {
        rtols.push_back(rt);
        nfev.push_back(nf);
        yend.push_back(y);
    }
    if (nfev.size() != 21) GTEST_SKIP() << "SciPy is not available through " << MEANDER_SCIPY_PYTHON;

    std::vector<std::vector<double>> rows;
    for (double v : y0s) rows.push_back({v});
    Diagnostics diags;
    const auto rep = tune_model(scalar_model(a, 0.0, 1.0, adaptive("dormand-prince", 1e-3, 1e-5, 40)),
                                options(1e-6, rows, Precision::float64), diags);
    ASSERT_TRUE(rep) << diags.render();
    const TuneBlock& b = rep->blocks[0];
    ASSERT_EQ(b.candidates.size(), 7u);
    for (std::size_t d = 0; d < 7; ++d) {
        const TuneCandidate& k = b.candidates[d];
        SCOPED_TRACE(k.spec.rtol);
        EXPECT_TRUE(k.adaptive);
        EXPECT_EQ(k.spec.rtol, rtols[d * 3]);
        EXPECT_DOUBLE_EQ(k.spec.atol, rtols[d * 3] * 1e-2);
        long most = 0;
        double worst = 0.0;
        for (std::size_t r = 0; r < 3; ++r) {
            most = std::max(most, nfev[d * 3 + r]);
            const double exact = y0s[r] * std::exp(a);  // exact solution; |ref| < 1
            worst = std::max(worst, std::fabs(yend[d * 3 + r] - exact));
        }
        const long attempts = (most - 2) / 6;
        EXPECT_EQ(k.measured_field_evals, most);
        EXPECT_EQ(k.max_attempts, attempts);
        // max-steps: the most attempts plus 25%, rounded up; worst case 2 + 6 * max-steps.
        EXPECT_EQ(k.spec.max_steps, static_cast<int>(std::ceil(1.25 * static_cast<double>(attempts))));
        EXPECT_EQ(k.worst_field_evals, 2 + 6L * k.spec.max_steps);
        EXPECT_NEAR(k.deviation, worst, 1e-11 + 1e-6 * worst);
    }
    // The text gives the solver line in the description's syntax.
    ASSERT_TRUE(b.chosen);
    const TuneCandidate& c = b.candidates[*b.chosen];
    EXPECT_LE(c.deviation, 1e-6);
    EXPECT_EQ(b.solver_line.rfind("solver dormand-prince, rtol ", 0), 0u) << b.solver_line;
    EXPECT_NE(b.solver_line.find(", max-steps " + std::to_string(c.spec.max_steps)), std::string::npos);
}

TEST(TuneAdaptive, Float32StopsAtTheSquareRootOfEpsilon) {
    const Model m = scalar_model(-2.0, 0.0, 1.0, adaptive("bogacki-shampine", 1e-3, 1e-5, 60));
    Diagnostics diags;
    const auto r32 = tune_model(m, options(1e-3, {{1.0}}, Precision::float32), diags);
    const auto r64 = tune_model(m, options(1e-3, {{1.0}}, Precision::float64), diags);
    ASSERT_TRUE(r32 && r64) << diags.render();
    // sqrt(FLT_EPSILON) = 3.45e-4 (<cfloat>): 1e-1, 1e-2, 1e-3 stay, 1e-4 is below it.
    const double floor32 = std::sqrt(double{FLT_EPSILON});
    ASSERT_EQ(r32->blocks[0].candidates.size(), 3u);
    for (const TuneCandidate& k : r32->blocks[0].candidates) EXPECT_GE(k.spec.rtol, floor32);
    EXPECT_EQ(r32->blocks[0].candidates.back().spec.rtol, 1e-3);
    EXPECT_EQ(r64->blocks[0].candidates.size(), 7u);
    EXPECT_EQ(r64->blocks[0].candidates.back().spec.rtol, 1e-7);
}

// ---- report ----------------------------------------------------------------

TEST(TuneReport, UnreachableTargetIsReportedNotAnError) {
    Diagnostics diags;
    const auto rep = tune_model(scalar_model(-2.0, 0.0, 1.0, fixed("rk4", 8)), options(1e-30, {{1.0}}), diags);
    ASSERT_TRUE(rep) << diags.render();
    EXPECT_TRUE(diags.ok());
    const TuneBlock& b = rep->blocks[0];
    EXPECT_FALSE(b.chosen);
    ASSERT_TRUE(b.closest);
    const std::string text = render_tune_text(*rep);
    EXPECT_NE(text.find("no candidate meets the target 1e-30"), std::string::npos) << text;
    const auto j = nlohmann::json::parse(render_tune_json(*rep));
    EXPECT_TRUE(j["blocks"][0]["chosen"].is_null());
    EXPECT_EQ(j["blocks"][0]["candidates"].size(), kGrid.size());
}

TEST(TuneReport, WarnsWhenTheRecommendationLeavesTheTrainedSolver) {
    Model m = scalar_model(-2.0, 0.0, 1.0, fixed("rk4", 8));
    m.blocks[0].continuous.trained = fixed("rk4", 8);
    Diagnostics diags;
    const auto rep = tune_model(m, options(1e-2, {{1.0}}), diags);
    ASSERT_TRUE(rep) << diags.render();
    const TuneBlock& b = rep->blocks[0];
    ASSERT_TRUE(b.chosen);
    // R(-1)^2 = (3/8)^2 = 0.140625 against e^-2 = 0.1353: within 1e-2, so fewer than 8 steps.
    EXPECT_LT(b.candidates[*b.chosen].spec.steps, 8);
    ASSERT_EQ(b.warnings.size(), 1u);
    EXPECT_NE(b.warnings[0].find("Ott et al., ICLR 2021"), std::string::npos);
    EXPECT_NE(render_tune_text(*rep).find("warning: "), std::string::npos);

    // Trained with what it recommends: nothing to warn about.
    m.blocks[0].continuous.trained = b.candidates[*b.chosen].spec;
    const auto again = tune_model(m, options(1e-2, {{1.0}}), diags);
    ASSERT_TRUE(again);
    EXPECT_TRUE(again->blocks[0].warnings.empty());
}

TEST(TuneReport, BadOptionsAreDiagnosed) {
    const Model m = scalar_model(-2.0, 0.0, 1.0, fixed("rk4", 8));
    {
        Diagnostics diags;
        TuneOptions o = options(1e-4, {{1.0}});
        o.methods = {"rk5"};
        EXPECT_FALSE(tune_model(m, o, diags));
        EXPECT_NE(diags.render().find("unknown solver method 'rk5'"), std::string::npos) << diags.render();
    }
    {
        Diagnostics diags;
        EXPECT_FALSE(tune_model(m, options(1e-4, {{1.0, 2.0}}), diags));
        EXPECT_NE(diags.render().find("input row 1 has 2 values"), std::string::npos) << diags.render();
    }
    {
        Diagnostics diags;
        EXPECT_FALSE(tune_model(m, options(0.0, {{1.0}}), diags));
        EXPECT_NE(diags.render().find("target"), std::string::npos);
    }
    {
        Diagnostics diags;
        EXPECT_FALSE(tune_model(m, options(1e-4, {}), diags));
        EXPECT_EQ(diags.error_count(), 1);
    }
}

TEST(TuneReport, DeployedSolverThatFailsIsShownNotFatal) {
    // max-steps 1 cannot reach t1 = 1 from an automatic first step: step_limit.
    Diagnostics diags;
    const auto rep = tune_model(scalar_model(-2.0, 0.0, 1.0, adaptive("dormand-prince", 1e-6, 1e-8, 1)),
                                options(1e-4, {{1.0}}), diags);
    ASSERT_TRUE(rep) << diags.render();
    const TuneBlock& b = rep->blocks[0];
    EXPECT_FALSE(b.deployed.ok);
    EXPECT_EQ(b.deployed.failure, "step_limit");
    EXPECT_EQ(b.deployed.failure_block, "settle");
    EXPECT_EQ(b.deployed.failure_row, 0);
    EXPECT_FALSE(b.deployed.meets);
    EXPECT_NE(render_tune_text(*rep).find("fails: step_limit in settle on row 1"), std::string::npos)
        << render_tune_text(*rep);
    EXPECT_TRUE(b.chosen);
}

TEST(TuneReport, ReferenceThatCannotFinishIsAnError) {
    // y' = -1e80 y: far too stiff for an explicit reference within its step limit.
    Diagnostics diags;
    EXPECT_FALSE(tune_model(scalar_model(-1e80, 0.0, 1.0, fixed("rk4", 8)), options(1e-4, {{1.0}}), diags));
    EXPECT_NE(diags.render().find("the reference for block settle"), std::string::npos) << diags.render();
}

// ---- a sample ----------------------------------------------------------------

struct Sample {
    Source src;
    Model model;
    std::vector<std::vector<double>> rows;
};

// A sample's description, bound weights and inputs, as `meander tune` reads them.
std::optional<Sample> load_sample(const std::string& name, Diagnostics& diags) {
    const fs::path dir = fs::path(MEANDER_SOURCE_DIR) / "samples" / name;
    auto loaded = load_model((dir / (name + ".mnd")).string(), Precision::float32, diags);
    if (!loaded) return std::nullopt;
    auto rows = read_csv_rows((dir / "inputs.csv").string(), loaded->model.input_size, diags);
    if (!rows) return std::nullopt;
    return Sample{loaded->source, loaded->model, *rows};
}

TEST(TuneSample, FanBalanceListsItsDeployedSteps) {
    Diagnostics diags;
    auto sample = load_sample("fan_balance", diags);
    ASSERT_TRUE(sample) << diags.render();
    const Model* model = &sample->model;

    TuneOptions o = options(1e-4, sample->rows, Precision::float32);
    const auto rep = tune_model(*model, o, diags);
    ASSERT_TRUE(rep) << diags.render();
    ASSERT_EQ(rep->blocks.size(), 1u);
    const TuneBlock& b = rep->blocks[0];
    EXPECT_EQ(b.name, "settle");
    // The description says `solver rk4, steps 8`.
    EXPECT_EQ(b.deployed.spec.method, "rk4");
    EXPECT_EQ(b.deployed.spec.steps, 8);
    EXPECT_EQ(b.deployed.worst_field_evals, 32);
    ASSERT_TRUE(b.deployed.ok);
    // The deployed line and the sweep's N = 8 are the same computation.
    const TuneCandidate* eight = fixed_candidate(b, "rk4", 8);
    ASSERT_NE(eight, nullptr);
    EXPECT_EQ(eight->deviation, b.deployed.deviation);
    // Fourth order: from 8 to 16 steps the deviation falls by roughly 16.
    const TuneCandidate* sixteen = fixed_candidate(b, "rk4", 16);
    ASSERT_NE(sixteen, nullptr);
    EXPECT_GT(eight->deviation / sixteen->deviation, 8.0);

    const std::string text = render_tune_text(*rep);
    EXPECT_NE(text.find("rk4, steps 8  (deployed)"), std::string::npos) << text;
    const auto j = nlohmann::json::parse(render_tune_json(*rep));
    EXPECT_EQ(j["blocks"][0]["deployed"]["steps"], 8);
    EXPECT_EQ(j["blocks"][0]["deployed"]["solver"], "rk4, steps 8");
    if (b.chosen) {
        EXPECT_LE(b.candidates[*b.chosen].deviation, 1e-4);
        // Trained with rk4, steps 8: another step count warns.
        EXPECT_EQ(b.warnings.empty(), b.candidates[*b.chosen].spec.steps == 8);
    }
}

TEST(TuneSample, RecommendedLinePastesIntoTheDescription) {
    // boiler_ahead deploys dormand-prince; the recommended line, put in place of its
    // solver line, must parse and check, and give back the candidate's budget.
    Diagnostics diags;
    auto sample = load_sample("boiler_ahead", diags);
    ASSERT_TRUE(sample) << diags.render();
    TuneOptions o = options(1e-3, sample->rows, Precision::float32);
    o.methods = {"dormand-prince", "dormand-prince"};  // a method named twice is swept once
    const auto rep = tune_model(sample->model, o, diags);
    ASSERT_TRUE(rep) << diags.render();
    for (const TuneBlock& b : rep->blocks) {
        EXPECT_EQ(b.candidates.size(), 3u);  // float32: rtol 1e-1 .. 1e-3
        ASSERT_TRUE(b.chosen);
        const TuneCandidate& k = b.candidates[*b.chosen];
        ASSERT_TRUE(k.adaptive);
        std::string text = sample->src.text;
        const std::string deployed = "solver " + std::string("dormand-prince, rtol 1e-3, atol 1e-4, max-steps 24");
        const std::size_t at = text.find(deployed);
        ASSERT_NE(at, std::string::npos);
        text.replace(at, text.find('\n', at) - at, b.solver_line);  // the whole solver line
        Diagnostics d2;
        const Source edited(sample->src.path, text);
        auto model = parse_description(edited, d2);
        ASSERT_TRUE(model) << d2.render() << b.solver_line;
        ASSERT_TRUE(check_model(*model, edited, CheckOptions{}, d2)) << d2.render() << b.solver_line;
        const SolverSpec& got = model->blocks[1].continuous.solver;
        EXPECT_EQ(got.method, k.spec.method);
        EXPECT_EQ(got.steps, k.spec.steps);
        EXPECT_EQ(got.rtol, k.spec.rtol);
        EXPECT_EQ(got.atol, k.spec.atol);
        EXPECT_EQ(got.max_steps, k.spec.max_steps);
    }
}

}  // namespace

// ---- a stopped sweep and threads ------------------------------------------

TEST(TuneFixed, StoppedSweepChoosesWhatTheClosedFormChooses) {
    // y' = a y with rk4: the deviation of N steps is |R(aT/N)^N - e^(aT)| |h0| (HNW I, IV.2),
    // so the cheapest N that meets each target is known without tune.
    const double a = -2.0;
    const std::vector<std::vector<double>> rows = {{1.0}, {-2.5}};
    for (double target : {1e-2, 1e-4, 1e-6, 1e-8}) {
        SCOPED_TRACE(target);
        int want = 0;
        for (int n : kGrid)
            if (scalar_deviation("rk4", a, 1.0, n, rows) <= target) {
                want = n;
                break;
            }
        ASSERT_GT(want, 0);
        TuneOptions o = options(target, rows);
        o.whole_sweep = false;
        Diagnostics diags;
        const auto rep = tune_model(scalar_model(a, 0.0, 1.0, fixed("rk4", 8)), o, diags);
        ASSERT_TRUE(rep) << diags.render();
        const TuneBlock& b = rep->blocks[0];
        ASSERT_TRUE(b.chosen);
        EXPECT_EQ(b.candidates[*b.chosen].spec.steps, want);
        // Two grid points past the first that meets, then the sweep stops and says so.
        const auto at = std::find(kGrid.begin(), kGrid.end(), want) - kGrid.begin();
        const std::size_t tried = std::min<std::size_t>(static_cast<std::size_t>(at) + 3, kGrid.size());
        ASSERT_EQ(b.candidates.size(), tried);
        for (std::size_t i = 0; i < tried; ++i) EXPECT_EQ(b.candidates[i].spec.steps, kGrid[i]);
        if (tried < kGrid.size()) {
            ASSERT_EQ(b.stopped.size(), 1u);
            EXPECT_EQ(b.stopped[0].first_meeting, want);
            EXPECT_EQ(b.stopped[0].last_tried, kGrid[tried - 1]);
            EXPECT_NE(render_tune_text(*rep).find("the rk4 sweep stopped at"), std::string::npos);
        }
    }
}

TEST(TuneFixed, MethodThatNeverMeetsIsSweptToTheEnd) {
    // Euler at 1e-8 on y' = -2y needs far more than 256 steps (error ~ 1/N): nothing to stop on.
    TuneOptions o = options(1e-8, {{1.0}});
    o.whole_sweep = false;
    o.methods = {"euler", "rk4"};
    Diagnostics diags;
    const auto rep = tune_model(scalar_model(-2.0, 0.0, 1.0, fixed("rk4", 8)), o, diags);
    ASSERT_TRUE(rep) << diags.render();
    const TuneBlock& b = rep->blocks[0];
    const auto euler = std::count_if(b.candidates.begin(), b.candidates.end(),
                                     [](const TuneCandidate& k) { return k.spec.method == "euler"; });
    EXPECT_EQ(static_cast<std::size_t>(euler), kGrid.size());
    ASSERT_EQ(b.stopped.size(), 1u);
    EXPECT_EQ(b.stopped[0].method, "rk4");
}

TEST(TuneSample, ThreadCountDoesNotChangeTheReport) {
    // Rows run on threads and are reduced in row order: the same report, byte for byte.
    for (const char* name : {"fan_balance", "boiler_ahead"}) {
        SCOPED_TRACE(name);
        Diagnostics diags;
        auto sample = load_sample(name, diags);
        ASSERT_TRUE(sample) << diags.render();
        std::string first;
        for (int threads : {1, 2, 5}) {
            TuneOptions o = options(1e-4, sample->rows, Precision::float32);
            o.whole_sweep = false;
            o.threads = threads;
            int calls = 0;
            o.progress = [&calls](const TuneProgress& g) {
                ++calls;
                EXPECT_LE(g.done, g.planned);
            };
            const auto rep = tune_model(sample->model, o, diags);
            ASSERT_TRUE(rep) << diags.render();
            EXPECT_EQ(static_cast<std::size_t>(calls), rep->blocks[0].candidates.size());
            const std::string j = render_tune_json(*rep);
            if (first.empty()) first = j;
            EXPECT_EQ(j, first) << "threads " << threads;
        }
    }
}

}  // namespace meander
