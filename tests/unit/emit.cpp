// The emitted code, built alone with strict warnings and run, against the
// reference evaluator (runtime/evaluate.hpp), for every Runge-Kutta method.
#include <cinttypes>
#include <cstring>
#include <regex>
#include <set>

#include "compiler/lower.hpp"
#include "compiler/selftest.hpp"
#include "emit_support.hpp"
#include "runtime/integrate.hpp"
#include "runtime/tableau.hpp"

namespace meander::test {
namespace {

namespace fs = std::filesystem;

struct Case {
    Model m;
    std::vector<std::vector<double>> inputs;
    double tol = 0.0;               // > 0: this case's own tolerance (reason given where it is set)
};

std::string method_id(std::string_view key) {
    std::string s(key);
    for (char& c : s)
        if (c == '-') c = '_';
    return s;
}

// One model per method: fixed-step methods with 8 steps, adaptive ones with
// tolerances that make them take a few steps and reject some.
std::vector<Case> every_method(double rtol, double atol) {
    std::vector<Case> cases;
    std::uint64_t seed = 100;
    for (const Tableau& t : tableaux()) {
        const SolverSpec s = t.adaptive() ? adaptive_solver(std::string(t.key), rtol, atol, 400)
                                          : fixed_solver(std::string(t.key), 8);
        Case c{ode_model("m_" + method_id(t.key), s, ++seed), random_inputs(seed * 7, 4, 3)};
        cases.push_back(std::move(c));
    }
    return cases;
}

struct Built {
    std::vector<std::vector<Row>> rows;  // per case, per input
    std::string error;
};

// Emits every case, builds them with one driver, runs it.
Built build_and_run(const std::vector<Case>& cases, Precision p, const std::string& tag) {
    Built b;
    const fs::path dir = temp_dir(tag);
    std::vector<std::string> names, sources;
    EmitOptions eo;
    eo.precision = p;
    eo.meander_version = "test";
    eo.content_hash = "0000000000000000";
    for (const Case& c : cases) {
        write_files(dir, emit_model(c.m, eo));
        names.push_back(c.m.name);
        sources.push_back(c.m.name + ".cpp");
    }
    // Every case shares the driver's inputs: all models here take 3 inputs.
    write_text(dir / "driver.cpp", driver_source(names, cases.front().inputs, cases.front().m.input_size));
    sources.push_back("driver.cpp");
    b.error = build(dir, sources, "driver");
    if (!b.error.empty()) return b;
    const RunResult r = run((dir / "driver").string());
    if (r.status != 0) {
        b.error = "driver failed: " + r.output;
        return b;
    }
    b.rows = parse_driver(r.output);
    fs::remove_all(dir);
    return b;
}

// |got - want| <= tol * max(1, |want|): relative for large values, absolute
// near zero (outputs pass through zero).
void expect_close(const std::vector<double>& got, const Eigen::VectorXd& want, double tol, const std::string& what) {
    ASSERT_EQ(got.size(), static_cast<std::size_t>(want.size())) << what;
    for (std::size_t i = 0; i < got.size(); ++i) {
        const double w = want[static_cast<Eigen::Index>(i)];
        EXPECT_LE(std::fabs(got[i] - w), tol * std::max(1.0, std::fabs(w)))
            << what << " output " << i << ": got " << got[i] << ", eval " << w;
    }
}

void compare_with_eval(const std::vector<Case>& cases, const Built& b, double tol, bool counters) {
    ASSERT_EQ(b.rows.size(), cases.size());
    for (std::size_t c = 0; c < cases.size(); ++c) {
        const auto& inputs = cases.front().inputs;
        ASSERT_EQ(b.rows[c].size(), inputs.size());
        for (std::size_t r = 0; r < inputs.size(); ++r) {
            const Eigen::VectorXd x =
                Eigen::Map<const Eigen::VectorXd>(inputs[r].data(), static_cast<Eigen::Index>(inputs[r].size()));
            const EvalResult ref = evaluate(cases[c].m, x);
            const Row& row = b.rows[c][r];
            const std::string what = fmt::format("{} input {}", cases[c].m.name, r);
            ASSERT_EQ(row.result, status_code(ref.status)) << what;
            // tol 0 (float64): equal values, whatever the case's own tolerance.
            const double t = cases[c].tol > 0.0 && tol > 0.0 ? std::max(tol, cases[c].tol) : tol;
            if (ref.status == EvalStatus::ok) expect_close(row.out, ref.output, t, what);
            if (counters) {
                EXPECT_EQ(row.field_evals, ref.stats.field_evals) << what;
                EXPECT_EQ(row.steps_accepted, ref.stats.steps_accepted) << what;
                EXPECT_EQ(row.steps_rejected, ref.stats.steps_rejected) << what;
            }
        }
    }
}

// ---------------------------------------------------------------------------

TEST(Emit, EveryMethodDoubleAgreesWithEvalAndCounters) {
    const std::vector<Case> cases = every_method(1e-7, 1e-9);
    const Built b = build_and_run(cases, Precision::float64, "double");
    ASSERT_TRUE(b.error.empty()) << b.error;
    // The same operations in the same order (DEVELOPERS.md, "Operation order")
    // and the same C library: equal values (tolerance 0); tests/unit/bit_exact.cpp
    // compares the bits at tight tolerances.
    compare_with_eval(cases, b, 0.0, true);
    // The adaptive cases must exercise rejections somewhere, or the controller is untested.
    long rejected = 0;
    for (const auto& rows : b.rows)
        for (const Row& r : rows) rejected += r.steps_rejected;
    EXPECT_GT(rejected, 0);
}

TEST(Emit, EveryMethodFloatAgreesWithEval) {
    // float32 carries 24 bits (eps 6e-8); rounding grows through three layers,
    // the stages and the steps to ~1e-6, and the adaptive methods may choose
    // slightly different steps in float, which moves the result by about the
    // local error allowed by rtol 1e-5. 1e-4 leaves a margin over both.
    const std::vector<Case> cases = every_method(1e-5, 1e-7);
    const Built b = build_and_run(cases, Precision::float32, "float");
    ASSERT_TRUE(b.error.empty()) << b.error;
    compare_with_eval(cases, b, 1e-4, false);
}

// Features beside the methods: PI controller, a backward interval, a given
// first step, an adaptive method run with fixed steps, residual blocks (also
// nested, also inside a field), every activation, layers without bias,
// softmax, two continuous blocks whose counters add up.
std::vector<Case> variants() {
    std::vector<Case> cases;
    const auto inputs = random_inputs(77, 4, 3);
    {
        SolverSpec s = adaptive_solver("dormand-prince", 1e-7, 1e-9, 300);
        s.controller = Controller::pi;
        cases.push_back({ode_model("v_pi", s, 11), inputs});
    }
    {
        SolverSpec s = adaptive_solver("bogacki-shampine", 1e-6, 1e-8, 500);
        cases.push_back({ode_model("v_backward", s, 12, 1.5, 1.0, -0.5), inputs});
    }
    {
        SolverSpec s = adaptive_solver("cash-karp", 1e-7, 1e-9, 300);
        s.first_step = 0.05;
        s.safety = 0.8;
        s.min_factor = 0.3;
        s.max_factor = 4.0;
        cases.push_back({ode_model("v_first_step", s, 13), inputs});
    }
    {
        // A relu field: steps across its kinks are rejected and the retry's
        // error is far below 1, where the factor after a rejection is capped
        // at 1 (asymptotically, with err ~ h^5, that cap never bites). Kept
        // short: over many kinks the step sequence becomes chaotic in the last
        // bits of the arithmetic, and any two correct implementations part.
        Rng rng(18);
        std::vector<Block> field;
        field.push_back(dense(rng, "k1", 5, 8, Activation::relu, true, 2.0));
        field.push_back(dense(rng, "k2", 8, 5, Activation::identity, false, 2.0));
        std::vector<Block> blocks;
        blocks.push_back(dense(rng, "kin", 3, 5));
        blocks.push_back(continuous("kinks", 5, 0, 0.0, 0.3, std::move(field),
                                    adaptive_solver("dormand-prince", 1e-8, 1e-10, 2000)));
        // Tolerance 1e-9 for a build that sums in another order: a step across
        // a kink commits a local error of the order of rtol (1e-8) that moves
        // with where the kink falls inside the step, so last-bit differences of
        // the dense sums reach the output at ~1e-11. float64 emitted code
        // shares eval's order and is compared exactly.
        cases.push_back({model("v_kinks", 3, 5, std::move(blocks)), inputs, 1e-9});
    }
    {
        SolverSpec s = fixed_solver("dormand-prince", 5);  // adaptive pair run with fixed steps
        cases.push_back({ode_model("v_dp_fixed", s, 14), inputs});
    }
    {
        SolverSpec s = adaptive_solver("tsitouras", 1e-7, 1e-9, 300);
        s.controller = Controller::pi;
        s.pi_alpha = 0.6;
        s.pi_beta = 0.2;
        cases.push_back({ode_model("v_tsit_pi", s, 15, 1.5, -1.0, 2.0), inputs});
    }
    {
        Rng rng(16);
        std::vector<Block> field;
        field.push_back(dense(rng, "g1", 4, 6, Activation::silu, true));
        field.push_back(residual("g_res", 6,
                                 {dense(rng, "g2", 6, 6, Activation::gelu),
                                  residual("g_inner", 6, {dense(rng, "g3", 6, 6, Activation::elu, true)}),
                                  dense(rng, "g4", 6, 6, Activation::sigmoid, false, 1.0, false)}));
        field.push_back(dense(rng, "g5", 6, 4, Activation::leaky_relu));
        std::vector<Block> blocks;
        blocks.push_back(dense(rng, "in1", 3, 4, Activation::relu));
        blocks.push_back(residual("polish", 4,
                                  {dense(rng, "p1", 4, 5, Activation::softplus),
                                   residual("deep", 5, {dense(rng, "p2", 5, 5, Activation::tanh)}),
                                   dense(rng, "p3", 5, 4, Activation::identity, false, 1.0, false)}));
        blocks.push_back(continuous("flow_a", 4, 0, 0.0, 0.5, std::move(field),
                                    adaptive_solver("dormand-prince", 1e-8, 1e-10, 300)));
        std::vector<Block> field_b;
        field_b.push_back(dense(rng, "h1", 6, 6, Activation::tanh, true));
        blocks.push_back(continuous("flow_b", 4, 2, 0.0, 2.0, std::move(field_b), fixed_solver("rk38", 6)));
        blocks.push_back(dense(rng, "out1", 6, 3, Activation::softmax));
        cases.push_back({model("v_mixed", 3, 3, std::move(blocks)), inputs});
    }
    {
        // Odd shapes: a continuous block first (it reads the caller's input),
        // a field that is one residual block, a residual that writes the output.
        Rng rng(19);
        std::vector<Block> field;
        field.push_back(residual("loop", 4, {dense(rng, "l1", 4, 4, Activation::tanh, true)}));
        std::vector<Block> blocks;
        blocks.push_back(continuous("first", 3, 1, 0.0, 1.0, std::move(field), fixed_solver("midpoint", 3)));
        blocks.push_back(residual("last", 4, {dense(rng, "z1", 4, 4, Activation::sigmoid)}));
        cases.push_back({model("v_shapes", 3, 4, std::move(blocks)), inputs});
    }
    {
        // A continuous block last: its state is the model's output.
        Rng rng(20);
        std::vector<Block> field;
        field.push_back(dense(rng, "q1", 3, 3, Activation::gelu));
        std::vector<Block> blocks;
        blocks.push_back(continuous("only_flow", 3, 0, 0.0, 1.0, std::move(field),
                                    adaptive_solver("bogacki-shampine", 1e-6, 1e-9, 200)));
        cases.push_back({model("v_flow_last", 3, 3, std::move(blocks)), inputs});
    }
    {
        // No continuous block at all.
        Rng rng(17);
        std::vector<Block> blocks;
        blocks.push_back(dense(rng, "only", 3, 3, Activation::gelu));
        cases.push_back({model("v_plain", 3, 3, std::move(blocks)), inputs});
    }
    return cases;
}

TEST(Emit, VariantsDoubleAgreeWithEvalAndCounters) {
    const std::vector<Case> cases = variants();
    const Built b = build_and_run(cases, Precision::float64, "variants");
    ASSERT_TRUE(b.error.empty()) << b.error;
    compare_with_eval(cases, b, 0.0, true);  // equal values, as in EveryMethodDoubleAgreesWithEvalAndCounters
}

TEST(Emit, VariantsFloatAgreeWithEval) {
    const std::vector<Case> cases = variants();
    const Built b = build_and_run(cases, Precision::float32, "variants-f");
    ASSERT_TRUE(b.error.empty()) << b.error;
    compare_with_eval(cases, b, 1e-4, false);  // reasons as in EveryMethodFloatAgreesWithEval
}

// Result codes: the emitted code returns the evaluator's status, with the
// same counters, and never exceeds worst_field_evals.
TEST(Emit, ResultCodesMatchEval) {
    std::vector<Case> cases;
    std::vector<std::vector<double>> inputs = random_inputs(5, 3, 3);
    inputs.push_back({0.5, std::nan(""), 1.0});
    // step_limit: 3 attempts cannot cover the interval at this tolerance.
    cases.push_back({ode_model("r_limit", adaptive_solver("dormand-prince", 1e-10, 1e-12, 3), 21), inputs});
    {
        // step_too_small: near t = 1e15 one unit in the last place is 0.125,
        // so the smallest step is 1.25; a fast field at tight tolerances
        // rejects it and the next shrink falls below the minimum.
        cases.push_back({ode_model("r_small", adaptive_solver("bogacki-shampine", 1e-12, 1e-12, 100), 22, 40.0, 1e15,
                                   1e15 + 1000.0, false),
                         inputs});
    }
    {
        // state_not_finite: y' = W y with |W| ~ 1e60 overflows a double within a few Euler steps.
        Rng rng(23);
        std::vector<Block> field;
        field.push_back(dense(rng, "blow", 2, 2, Activation::identity, false, 1e60, false));
        std::vector<Block> blocks;
        blocks.push_back(dense(rng, "pre", 3, 2));
        blocks.push_back(continuous("boom", 2, 0, 0.0, 1.0, std::move(field), fixed_solver("euler", 20)));
        cases.push_back({model("r_boom", 3, 2, std::move(blocks)), inputs});
    }
    {
        // state_not_finite from a top-level layer: 1e200 * 1e200 overflows.
        Rng rng(24);
        std::vector<Block> blocks;
        blocks.push_back(dense(rng, "big1", 3, 2, Activation::identity, false, 1e200));
        blocks.push_back(dense(rng, "big2", 2, 2, Activation::identity, false, 1e200));
        cases.push_back({model("r_overflow", 3, 2, std::move(blocks)), inputs});
    }
    const Built b = build_and_run(cases, Precision::float64, "codes");
    ASSERT_TRUE(b.error.empty()) << b.error;
    compare_with_eval(cases, b, 1e-12, true);
    // Each case must really produce its code (else the test proves nothing).
    const int expect[] = {3, 4, 2, 2};
    for (std::size_t c = 0; c < cases.size(); ++c) {
        EXPECT_EQ(b.rows[c][0].result, expect[c]) << cases[c].m.name;
        EXPECT_EQ(b.rows[c].back().result, 1) << cases[c].m.name << ": a NaN input";
        const Lowered low = lower_model(cases[c].m, Precision::float64);
        for (const Row& r : b.rows[c]) EXPECT_LE(r.field_evals, low.worst_field_evals) << cases[c].m.name;
    }
    // At the step limit every attempt was made: 1 + 1 + 3*(7 - 1) evaluations
    // (FSAL Dormand-Prince, automatic first step: DEVELOPERS.md).
    EXPECT_EQ(b.rows[0][0].field_evals, 20);
    EXPECT_EQ(b.rows[0][0].steps_accepted + b.rows[0][0].steps_rejected, 3);
}

// y' = lambda*y as a model: one continuous block whose field is a 1 x 1
// dense layer without bias.
Model linear_decay(const std::string& name, double lambda, double t1, SolverSpec s) {
    Block f;
    f.kind = Block::Kind::dense;
    f.dense.name = "rate";
    f.dense.in = 1;
    f.dense.out = 1;
    f.dense.has_bias = false;
    f.dense.weight = Eigen::MatrixXd::Constant(1, 1, lambda);
    std::vector<Block> blocks;
    blocks.push_back(continuous("decay", 1, 0, 0.0, t1, {f}, std::move(s)));
    return model(name, 1, 1, std::move(blocks));
}

TEST(Emit, MatchesSciPyCheckValues) {
    // Check values computed with SciPy 1.10 (shared reference sheet): y' = -y,
    // y(0) = 1, rtol 1e-3, atol 1e-6, to t = 10: RK45 gives y = 4.5723138338e-5
    // with nfev 74 (12 steps); RK23 nfev 74 (24 steps). nfev = 2 + stages*attempts
    // for FSAL pairs, our field_evals. y' = +y from 0 to -10 is the same problem
    // mirrored in t and must give the same numbers.
    std::vector<Case> cases;
    const std::vector<std::vector<double>> one = {{1.0}};
    cases.push_back({linear_decay("s_rk45", -1.0, 10.0, adaptive_solver("dormand-prince", 1e-3, 1e-6, 100)), one});
    cases.push_back({linear_decay("s_rk45_back", 1.0, -10.0, adaptive_solver("dormand-prince", 1e-3, 1e-6, 100)), one});
    cases.push_back({linear_decay("s_rk23", -1.0, 10.0, adaptive_solver("bogacki-shampine", 1e-3, 1e-6, 100)), one});
    const Built b = build_and_run(cases, Precision::float64, "scipy");
    ASSERT_TRUE(b.error.empty()) << b.error;
    ASSERT_EQ(b.rows.size(), 3u);
    for (int c = 0; c < 2; ++c) {
        const Row& r = b.rows[static_cast<std::size_t>(c)][0];
        ASSERT_EQ(r.result, 0);
        EXPECT_NEAR(r.out[0], 4.5723138338e-5, 1e-15) << cases[static_cast<std::size_t>(c)].m.name;
        EXPECT_EQ(r.field_evals, 74);
        EXPECT_EQ(r.steps_accepted + r.steps_rejected, 12);
    }
    const Row& r23 = b.rows[2][0];
    EXPECT_EQ(r23.field_evals, 74);
    EXPECT_EQ(r23.steps_accepted + r23.steps_rejected, 24);
}

// ---------------------------------------------------------------------------
// The text itself.

TEST(Emit, SameModelSameBytes) {
    const Model m = ode_model("twice", adaptive_solver("dormand-prince", 1e-6, 1e-8, 64), 31);
    const Model copy = m;
    for (Precision p : {Precision::float32, Precision::float64}) {
        EmitOptions eo;
        eo.precision = p;
        eo.c_header = true;
        eo.self_test_inputs = random_inputs(3, 2, 3);
        eo.self_test_outputs = {{0.5, 0.25}, {1.0, -2.0}};
        const auto a = emit_model(m, eo);
        const auto b = emit_model(copy, eo);
        ASSERT_EQ(a.size(), 5u);
        ASSERT_EQ(a.size(), b.size());
        for (std::size_t i = 0; i < a.size(); ++i) {
            EXPECT_EQ(a[i].name, b[i].name);
            EXPECT_TRUE(a[i].text == b[i].text) << a[i].name << " differs between two runs";
        }
    }
}

TEST(Emit, FloatLiteralsAreSuffixedAndRoundTrip) {
    const Model m = ode_model("lits", fixed_solver("rk4", 4), 32);
    EmitOptions eo;
    const auto files = emit_model(m, eo);
    const std::string& cpp = files[1].text;
    // Every weight of every layer appears, in the order DEVELOPERS.md states
    // (rows in blocks of 4, interleaved column by column; the remaining rows
    // a last block interleaved alike), as a literal that reads back (strtof, the C
    // library's own parser) to the same float bits.
    std::vector<float> expected;
    for (const Block& b : m.blocks) {
        auto add = [&](const Dense& d) {
            const int blocked = d.out - d.out % 4;
            for (int r0 = 0; r0 < blocked; r0 += 4)
                for (int c = 0; c < d.in_total(); ++c)
                    for (int r = r0; r < r0 + 4; ++r) expected.push_back(static_cast<float>(d.weight(r, c)));
            for (int c = 0; c < d.in_total(); ++c)
                for (int r = blocked; r < d.out; ++r) expected.push_back(static_cast<float>(d.weight(r, c)));
            for (int r = 0; r < d.out; ++r) expected.push_back(static_cast<float>(d.bias[r]));
        };
        if (b.kind == Block::Kind::dense) add(b.dense);
        if (b.kind == Block::Kind::continuous)
            for (const Block& f : b.continuous.field) add(f.dense);
    }
    std::vector<float> found;
    std::istringstream in(cpp);
    std::string line;
    bool in_array = false;
    const std::regex lit(R"(^-?(\d+\.\d*|\d+)(e[-+]?\d+)?f$)");
    while (std::getline(in, line)) {
        if (line.find("_WEIGHTS_ATTR const real") != std::string::npos) {
            in_array = true;
            continue;
        }
        if (line == "};") in_array = false;
        if (!in_array) continue;
        std::istringstream ls(line);
        std::string tok;
        int per_line = 0;
        while (ls >> tok) {
            ASSERT_EQ(tok.back(), ',');
            tok.pop_back();
            EXPECT_TRUE(std::regex_match(tok, lit)) << tok;
            found.push_back(std::strtof(tok.c_str(), nullptr));
            ++per_line;
        }
        EXPECT_LE(per_line, 8);
    }
    ASSERT_EQ(found.size(), expected.size());
    for (std::size_t i = 0; i < found.size(); ++i) {
        std::uint32_t a = 0, b = 0;
        std::memcpy(&a, &found[i], 4);
        std::memcpy(&b, &expected[i], 4);
        EXPECT_EQ(a, b) << "weight " << i;
    }
    // Integers print as valid float literals.
    EXPECT_EQ(emit_detail::real_literal(1.0, Precision::float32), "1.0f");
    EXPECT_EQ(emit_detail::real_literal(-3e-8, Precision::float32), "-3e-08f");
    EXPECT_EQ(emit_detail::real_literal(0.1, Precision::float32), "0.1f");
    EXPECT_EQ(emit_detail::real_literal(0.1, Precision::float64), "0.1");
    EXPECT_EQ(emit_detail::real_literal(16777216.0, Precision::float32), "16777216.0f");
}

// Code lines of a source without comments.
std::string code_only(const std::string& text) {
    std::string code;
    std::istringstream src(text);
    std::string line;
    while (std::getline(src, line))
        if (line.rfind("//", 0) != 0) code += line.substr(0, line.find("//")) + "\n";
    return code;
}

TEST(Emit, NoUnsuffixedFloatingLiteralInFloatCode) {
    // A double literal would promote the float arithmetic around it.
    const std::regex unsuffixed(R"([^\w.](\d+\.\d*|\d*\.\d+)(e[-+]?\d+)?(?![\w.]))");
    const std::regex suffixed(R"([^\w.](\d+\.\d*|\d*\.\d+)(e[-+]?\d+)?f(?![\w.]))");
    int files = 0;
    for (const Case& c : variants()) {
        EmitOptions eo;
        eo.c_header = true;
        eo.self_test_inputs = {{0.5, 1.0, -2.0}};
        eo.self_test_outputs = {std::vector<double>(static_cast<std::size_t>(c.m.output_size), 0.25)};
        for (const EmittedFile& f : emit_model(c.m, eo)) {
            if (f.name.size() < 4 || f.name.substr(f.name.size() - 4) != ".cpp") continue;
            const std::string code = code_only(f.text);
            std::smatch mt;
            EXPECT_FALSE(std::regex_search(code, mt, unsuffixed)) << f.name << ": unsuffixed literal " << mt.str();
            EXPECT_TRUE(std::regex_search(code, suffixed)) << f.name;  // the scan does see literals
            ++files;
        }
    }
    EXPECT_EQ(files, 2 * static_cast<int>(variants().size()));
    // Control: the scan does find the unsuffixed literals of float64 code.
    EmitOptions d;
    d.precision = Precision::float64;
    EXPECT_TRUE(std::regex_search(code_only(emit_model(variants().front().m, d)[1].text), unsuffixed));
}

TEST(Emit, BannerStatesSolverAndCaution) {
    SolverSpec s = adaptive_solver("dormand-prince", 1e-4, 1e-6, 64);
    const Model m = ode_model("banner_m", s, 33);
    EmitOptions eo;
    eo.meander_version = "9.8.7";
    eo.content_hash = "feedc0de12345678";
    const auto files = emit_model(m, eo);
    for (const EmittedFile& f : files) {
        const std::string head = f.text.substr(0, f.text.find("#ifndef") < f.text.find("#include")
                                                      ? f.text.find("#ifndef")
                                                      : f.text.find("#include"));
        EXPECT_NE(head.find("generated by meander 9.8.7"), std::string::npos) << f.name;
        EXPECT_NE(head.find("model: banner_m"), std::string::npos);
        EXPECT_NE(head.find("feedc0de12345678"), std::string::npos);
        // Title and source as runtime/tableau.hpp states them, order, stages, FSAL.
        EXPECT_NE(head.find("Dormand-Prince 5(4)"), std::string::npos);
        EXPECT_NE(head.find("J. Comput. Appl. Math. 6(1):19-26, 1980"), std::string::npos);
        EXPECT_NE(head.find("order 5, embedded order 4, 7 stages, FSAL"), std::string::npos);
        EXPECT_NE(head.find("rtol 0.0001, atol 1e-06, max-steps 64"), std::string::npos);
        EXPECT_NE(head.find("safety 0.9, min-factor 0.2, max-factor 10"), std::string::npos);
        // 1 + 1 + 64*6 (DEVELOPERS.md, worst case for FSAL with an automatic first step)
        EXPECT_NE(head.find("worst case: 386 field evaluations"), std::string::npos);
        EXPECT_NE(head.find("not certified for use in safety functions"), std::string::npos);
        EXPECT_NE(head.find("functional safety standard"), std::string::npos);
        EXPECT_EQ(head.find("/tmp"), std::string::npos);
        EXPECT_EQ(head.find(MEANDER_SOURCE_DIR), std::string::npos);
    }
    const std::string& hpp = files[0].text;
    EXPECT_NE(hpp.find("constexpr std::uint32_t worst_field_evals = 386u;"), std::string::npos);
    EXPECT_NE(files[1].text.find("static_assert(sizeof(float) == 4"), std::string::npos);
}

// Workspace layout of a small model, worked out by hand from the rules in
// compiler/lower.hpp: top chain [lift 3->4, settle (state 5, rk4), head 5->2]
// has 2 intermediate results of widths 4 and 5: ping0 [0,5), ping1 [5,10);
// settle: state [10,15), k1..k4 [15,35), arg [35,40); its field
// [f1 5+t->8, f2 8->5] has one intermediate: [40,48). Total 48 reals.
TEST(Lower, WorkspaceLayoutByHand) {
    const Model m = ode_model("layout", fixed_solver("rk4", 10), 34);
    const Lowered low = lower_model(m, Precision::float32);
    EXPECT_EQ(low.workspace_size, 48u);
    EXPECT_EQ(low.workspace_bytes, 48u * 4u);
    std::vector<std::pair<std::string, std::size_t>> got;
    for (const Buffer& b : low.buffers) got.emplace_back(b.name, b.offset);
    const std::vector<std::pair<std::string, std::size_t>> want = {
        {"top.ping0", 0},  {"top.ping1", 5},  {"settle.state", 10}, {"settle.k1", 15},         {"settle.k2", 20},
        {"settle.k3", 25}, {"settle.k4", 30}, {"settle.arg", 35},   {"settle.field.ping0", 40}};
    EXPECT_EQ(got, want);
    // parameters: lift 4*3+4, f1 8*6+8, f2 5*8+5, head 2*5+2 = 16+56+45+12
    EXPECT_EQ(low.parameter_count, 129);
    // MACs: field 8*6 + 5*8 = 88 per evaluation; outside 12 + 10;
    // 10 steps * 4 stages = 40 evaluations.
    EXPECT_EQ(low.macs_per_field_eval, 88);
    EXPECT_EQ(low.macs_outside_fields, 22);
    EXPECT_EQ(low.worst_field_evals, 40);
    EXPECT_EQ(low.worst_macs, 22 + 88 * 40);
    const std::string dump = dump_lowered(low);
    EXPECT_NE(dump.find("workspace: 48 reals, 192 bytes"), std::string::npos) << dump;
    EXPECT_NE(dump.find("dense f1: point -> work[40]"), std::string::npos) << dump;
}

// ---------------------------------------------------------------------------
// Self-test source and the C entry point.

std::string selftest_driver(const std::string& name, double tol) {
    return fmt::format(R"(#include <cstdio>
#include "{0}_selftest.hpp"
int main() {{
    static {0}::context ctx;
    const {0}::self_test_report r = {0}::self_test(ctx, static_cast<{0}::real>({1}));
    std::printf("%lu %lu %ld %d %a %a\n", static_cast<unsigned long>(r.vectors_run),
                static_cast<unsigned long>(r.failures), static_cast<long>(r.first_failure),
                static_cast<int>(r.first_bad_result), static_cast<double>(r.max_abs_deviation),
                static_cast<double>(r.max_rel_deviation));
    return 0;
}}
)",
                       name, hex_literal(tol));
}

struct SelfTestRun {
    unsigned long run = 0, failures = 0;
    long first = -2;
    int bad = -1;
    double max_abs = -1, max_rel = -1;
    std::string error;
};

SelfTestRun run_self_test(const Model& m, const EmitOptions& eo, double tol, const std::string& tag) {
    SelfTestRun s;
    const fs::path dir = temp_dir(tag);
    write_files(dir, emit_model(m, eo));
    write_text(dir / "st_driver.cpp", selftest_driver(m.name, tol));
    s.error = build(dir, {m.name + ".cpp", m.name + "_selftest.cpp", "st_driver.cpp"}, "st");
    if (!s.error.empty()) return s;
    const RunResult r = run((dir / "st").string());
    std::istringstream in(r.output);
    std::string a, b;
    in >> s.run >> s.failures >> s.first >> s.bad >> a >> b;
    s.max_abs = std::strtod(a.c_str(), nullptr);
    s.max_rel = std::strtod(b.c_str(), nullptr);
    fs::remove_all(dir);
    return s;
}

TEST(SelfTest, PassesWithEvalOutputsAndCatchesAPerturbedOne) {
    const Model m = ode_model("golden_st", adaptive_solver("dormand-prince", 1e-6, 1e-8, 200), 41);
    EmitOptions eo;  // float32
    eo.self_test_inputs = random_inputs(42, 5, 3);
    for (const auto& x : eo.self_test_inputs) {
        const EvalResult r = evaluate(m, Eigen::Map<const Eigen::VectorXd>(x.data(), 3));
        ASSERT_EQ(r.status, EvalStatus::ok);
        eo.self_test_outputs.emplace_back(r.output.data(), r.output.data() + r.output.size());
    }
    const SelfTestRun good = run_self_test(m, eo, 1e-4, "st-good");
    ASSERT_TRUE(good.error.empty()) << good.error;
    EXPECT_EQ(good.run, 5u);
    EXPECT_EQ(good.failures, 0u);
    EXPECT_EQ(good.first, -1);
    EXPECT_EQ(good.bad, 0);
    EXPECT_LE(good.max_rel, 1e-4);
    EXPECT_GT(good.max_abs, 0.0);  // float really differs from eval's double a little

    // The test perturbs one expected value (vector 3, output 1) by 1e-2 relative.
    EmitOptions bad = eo;
    bad.self_test_outputs[3][1] += 1e-2 * std::max(1.0, std::fabs(bad.self_test_outputs[3][1]));
    const SelfTestRun caught = run_self_test(m, bad, 1e-4, "st-bad");
    ASSERT_TRUE(caught.error.empty()) << caught.error;
    EXPECT_EQ(caught.run, 5u);
    EXPECT_EQ(caught.failures, 1u);
    EXPECT_EQ(caught.first, 3);
    EXPECT_EQ(caught.bad, 0);
    EXPECT_GE(caught.max_rel, 0.9e-2);
}

TEST(SelfTest, ReportsAResultCode) {
    // max-steps 2 cannot finish: every vector fails with step_limit (3).
    const Model m = ode_model("golden_lim", adaptive_solver("dormand-prince", 1e-10, 1e-12, 2), 43);
    EmitOptions eo;
    eo.precision = Precision::float64;
    eo.self_test_inputs = random_inputs(44, 2, 3);
    eo.self_test_outputs = {{0.0, 0.0}, {0.0, 0.0}};
    const SelfTestRun s = run_self_test(m, eo, 1e-10, "st-code");
    ASSERT_TRUE(s.error.empty()) << s.error;
    EXPECT_EQ(s.failures, 2u);
    EXPECT_EQ(s.first, 0);
    EXPECT_EQ(s.bad, 3);
}

// The plain C header: a C99 (and C11) program, built with gcc's pedantic
// warnings as errors, calls the emitted C++ through NAME.h; its outputs and
// counters are the C++ entry's (the reference evaluator's counters, and its
// outputs to float32's accuracy).
TEST(Emit, CHeaderFromC99AndC11WithWeightsSection) {
    if (run("gcc --version").status != 0) GTEST_SKIP() << "gcc (a C compiler) not installed";
    const Model m = ode_model("c_side", fixed_solver("heun", 6), 51);
    EmitOptions eo;
    eo.c_header = true;
    const fs::path dir = temp_dir("capi");
    const auto files = emit_model(m, eo);
    ASSERT_EQ(files.size(), 3u);
    EXPECT_EQ(files[2].name, "c_side.h");
    write_files(dir, files);
    write_text(dir / "use.c", R"(#include "c_side.h"
#include <stdio.h>
static c_side_context ctx;
int main(void) {
    const c_side_real in[C_SIDE_INPUT_SIZE] = {0.25f, -0.5f, 1.0f};
    c_side_real out[C_SIDE_OUTPUT_SIZE] = {0.0f, 0.0f};
    c_side_counters n;
    const int r = c_side_infer(&ctx, in, out);
    n = c_side_counters_of(&ctx);
    printf("%d %s %a %a %u %u %u %d %s %s\n", r, c_side_result_name(r), (double)out[0], (double)out[1],
           (unsigned)n.field_evals, (unsigned)n.steps_accepted, (unsigned)n.steps_rejected,
           c_side_build_conditions_hold(), c_side_result_name(C_SIDE_STEP_LIMIT), c_side_result_name(9));
    return 0;
}
)");
    const RunResult obj =
        run(fmt::format("cd '{}' && '{}' {} -D'C_SIDE_WEIGHTS_ATTR=__attribute__((section(\".rodata.c_side_w\")))' "
                        "-c c_side.cpp -o c_side.o",
                        dir.string(), MEANDER_CXX, strict_flags()));
    ASSERT_EQ(obj.status, 0) << obj.output;
    // The weights went to the named section (the linker later merges it into .rodata).
    const RunResult sec = run(fmt::format("objdump -h '{}'", (dir / "c_side.o").string()));
    if (sec.status == 0) EXPECT_NE(sec.output.find(".rodata.c_side_w"), std::string::npos) << sec.output;
    const EvalResult ref = evaluate(m, Eigen::Vector3d(0.25, -0.5, 1.0));
    for (const char* standard : {"c99", "c11"}) {
        const RunResult cc = run(fmt::format("cd '{}' && gcc -std={} -Wall -Wextra -pedantic -Werror -c use.c -o use.o",
                                             dir.string(), standard));
        ASSERT_EQ(cc.status, 0) << standard << ": " << cc.output;
        const std::string err = build(dir, {"c_side.o", "use.o"}, "capi");
        ASSERT_TRUE(err.empty()) << err;
        const RunResult r = run((dir / "capi").string());
        ASSERT_EQ(r.status, 0) << r.output;
        std::istringstream in(r.output);
        int code = -1, conditions = -1;
        unsigned evals = 0, accepted = 0, rejected = 0;
        std::string name, a, b, limit, unknown;
        in >> code >> name >> a >> b >> evals >> accepted >> rejected >> conditions >> limit >> unknown;
        EXPECT_EQ(code, 0) << standard;
        EXPECT_EQ(name, "ok");
        EXPECT_EQ(limit, "step_limit");
        EXPECT_EQ(unknown, "unknown");
        EXPECT_EQ(conditions, 1);
        EXPECT_EQ(static_cast<long>(evals), ref.stats.field_evals);
        EXPECT_EQ(static_cast<long>(accepted), ref.stats.steps_accepted);
        EXPECT_EQ(static_cast<long>(rejected), ref.stats.steps_rejected);
        EXPECT_EQ(accepted, 6u);  // heun, 6 fixed steps
        expect_close({std::strtod(a.c_str(), nullptr), std::strtod(b.c_str(), nullptr)}, ref.output, 1e-4, "C header");
    }
    // A C header from another run is refused by the source.
    const Model other = ode_model("c_side", fixed_solver("heun", 7), 51);
    write_files(dir, {emit_model(other, eo)[2]});
    const RunResult mixed = run(fmt::format("cd '{}' && '{}' -std=c++17 -c c_side.cpp -o mixed.o", dir.string(), MEANDER_CXX));
    EXPECT_NE(mixed.status, 0);
    EXPECT_NE(mixed.output.find("c_side.h is not the C header generated with this source"), std::string::npos) << mixed.output;
    fs::remove_all(dir);
}

// On a Cortex-M4F (single-precision FPU) hidden double arithmetic becomes
// calls to software helpers (__aeabi_d*) or to double math (tanh instead of
// tanhf). The float32 code must call only float functions.
TEST(Emit, Float32CodeCallsOnlyFloatFunctionsOnCortexM4F) {
    if (run("arm-none-eabi-g++ --version").status != 0) GTEST_SKIP() << "arm-none-eabi-g++ not installed";
    const fs::path dir = temp_dir("m4f");
    EmitOptions eo;
    eo.c_header = true;
    std::vector<std::string> objects;
    for (const Case& c : variants()) {
        write_files(dir, emit_model(c.m, eo));
        const RunResult r = run(fmt::format(
            "cd '{}' && arm-none-eabi-g++ -mcpu=cortex-m4 -mthumb -mfpu=fpv4-sp-d16 -mfloat-abi=hard -Os -fstack-usage "
            "{} -c {}.cpp",
            dir.string(), strict_flags(), c.m.name));
        ASSERT_EQ(r.status, 0) << r.output;
        const RunResult nm = run(fmt::format("arm-none-eabi-nm -u '{}'", (dir / (c.m.name + ".o")).string()));
        ASSERT_EQ(nm.status, 0) << nm.output;
        const std::set<std::string> allowed = {"expf", "expm1f", "log1pf", "nextafterf", "powf", "sqrtf", "tanhf"};
        std::istringstream in(nm.output);
        std::string u, sym;
        while (in >> u >> sym) EXPECT_TRUE(allowed.count(sym) == 1) << c.m.name << " calls " << sym;
        // Every function's stack use is bounded ("static" in GCC's .su file:
        // no recursion, no variable-length arrays) and small.
        std::istringstream su(read_text(dir / (c.m.name + ".su")));
        std::string line;
        int functions = 0;
        while (std::getline(su, line)) {
            ++functions;
            EXPECT_NE(line.find("\tstatic"), std::string::npos) << line;
            const std::size_t tab = line.rfind('\t', line.rfind('\t') - 1);
            EXPECT_LE(std::stol(line.substr(tab + 1)), 512) << line;
        }
        EXPECT_GT(functions, 2) << c.m.name;
    }
    fs::remove_all(dir);
}

TEST(Emit, MismatchedHeaderIsRefused) {
    // The header of one run with the source of another must not build.
    const Model a = ode_model("stamp", fixed_solver("rk4", 4), 61);
    const Model b = ode_model("stamp", fixed_solver("rk4", 5), 61);
    EmitOptions eo;
    const fs::path dir = temp_dir("stamp");
    write_files(dir, {emit_model(a, eo)[0]});
    write_files(dir, {emit_model(b, eo)[1]});
    const RunResult r = run(fmt::format("cd '{}' && '{}' -std=c++17 -c stamp.cpp -o stamp.o", dir.string(), MEANDER_CXX));
    EXPECT_NE(r.status, 0);
    EXPECT_NE(r.output.find("regenerate both"), std::string::npos) << r.output;
    fs::remove_all(dir);
}

// The block hook is called around every top-level block, in description order,
// and the model still agrees with the evaluator when it is defined.
TEST(Emit, BlockHookSeesEveryTopLevelBlockInOrder) {
    const Model m = ode_model("hooked", fixed_solver("rk4", 4), 52);
    const fs::path dir = temp_dir("hook");
    write_files(dir, emit_model(m, EmitOptions{}));
    write_text(dir / "use.cpp", R"(#include <cstdio>
void mark(const char* name, int phase) { std::printf("%s:%d ", name, phase); }
#include "hooked.hpp"
int main() {
    static hooked::context ctx;
    const float in[3] = {0.25f, -0.5f, 1.0f};
    float out[2] = {0.0f, 0.0f};
    const hooked::result r = hooked::infer(ctx, in, out);
    std::printf("| %d %a %a\n", static_cast<int>(r), static_cast<double>(out[0]), static_cast<double>(out[1]));
    return 0;
}
)");
    write_text(dir / "hook.hpp", "void mark(const char* name, int phase);\n");
    const std::string err =
        build(dir, {"use.cpp", "hooked.cpp"}, "hook", "-include hook.hpp -D'HOOKED_BLOCK_HOOK(n, p)=mark(n, p)'");
    ASSERT_TRUE(err.empty()) << err;
    const RunResult r = run((dir / "hook").string());
    ASSERT_EQ(r.status, 0) << r.output;
    const std::size_t bar = r.output.find("| ");
    ASSERT_NE(bar, std::string::npos) << r.output;
    // ode_model's blocks: lift, settle, head (emit_support.hpp).
    EXPECT_EQ(r.output.substr(0, bar), "lift:0 lift:1 settle:0 settle:1 head:0 head:1 ");
    std::istringstream in(r.output.substr(bar + 2));
    int code = -1;
    std::string a, b;
    in >> code >> a >> b;
    EXPECT_EQ(code, 0);
    const EvalResult ref = evaluate(m, Eigen::Vector3d(0.25, -0.5, 1.0));
    expect_close({std::strtod(a.c_str(), nullptr), std::strtod(b.c_str(), nullptr)}, ref.output, 1e-4, "hooked");
    fs::remove_all(dir);
}

}  // namespace
}  // namespace meander::test

