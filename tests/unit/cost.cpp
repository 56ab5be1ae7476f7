// `meander cost`: the figures against hand counts, the solver's counting rule,
// SciPy's own evaluation count, the emitted header, and the cross tools.
#include "compiler/cost.hpp"

#include <fmt/format.h>
#include <gtest/gtest.h>

#include <cmath>
#include <cstdio>
#include <cstdlib>
#include <filesystem>
#include <fstream>
#include <nlohmann/json.hpp>
#include <random>
#include <regex>
#include <sstream>
#include <string>
#include <unistd.h>

#include "compiler/emit.hpp"
#include "compiler/lower.hpp"
#include "compiler/quantise.hpp"
#include "test_support.hpp"

namespace meander {
namespace {

namespace fs = std::filesystem;
using test::adaptive_solver;
using test::capture;
using test::continuous;
using test::dense_block;
using test::fixed_solver;
using test::read_text;

Dense dense(const std::string& name, int in, int out, Activation act, std::mt19937& rng, double scale,
            bool time_input = false) {
    Dense d = test::dense_layer(name, in, out, act, time_input);
    std::uniform_real_distribution<double> u(-scale, scale);
    d.weight.resize(out, d.in_total());
    for (int i = 0; i < out; ++i)
        for (int j = 0; j < d.in_total(); ++j) d.weight(i, j) = u(rng);
    d.bias.resize(out);
    for (int i = 0; i < out; ++i) d.bias(i) = u(rng);
    return d;
}

// input x[3]
// dense lift: 3 -> 5, tanh
// continuous flow: 5, t in [0, 1] { dense f1: 5 + t -> 8, tanh; dense f2: 8 -> 5; solver rk4, steps 6 }
// residual polish: 5 { dense r1: 5 -> 5, relu; dense r2: 5 -> 5 }
// continuous settle: 5, t in [0, 0.5] { dense g1: 5 -> 6, softplus; dense g2: 6 -> 5;
//                                       solver dormand-prince, rtol 1e-3, atol 1e-6, max-steps 20 }
// dense head: 5 -> 2
// output y[2]
Model mixed_model() {
    std::mt19937 rng(20261201);
    Model m = test::model("mixed", 3, 2);
    m.blocks.push_back(dense_block(dense("lift", 3, 5, Activation::tanh, rng, 0.8)));
    std::vector<Block> f;
    f.push_back(dense_block(dense("f1", 5, 8, Activation::tanh, rng, 0.6, true)));
    f.push_back(dense_block(dense("f2", 8, 5, Activation::identity, rng, 0.6)));
    m.blocks.push_back(continuous("flow", 5, 0, 0.0, 1.0, std::move(f), fixed_solver("rk4", 6)));
    std::vector<Block> body;
    body.push_back(dense_block(dense("r1", 5, 5, Activation::relu, rng, 0.5)));
    body.push_back(dense_block(dense("r2", 5, 5, Activation::identity, rng, 0.5)));
    m.blocks.push_back(test::residual("polish", 5, std::move(body)));
    std::vector<Block> g;
    g.push_back(dense_block(dense("g1", 5, 6, Activation::softplus, rng, 0.7)));
    g.push_back(dense_block(dense("g2", 6, 5, Activation::identity, rng, 0.7)));
    m.blocks.push_back(
        continuous("settle", 5, 0, 0.0, 0.5, std::move(g), adaptive_solver("dormand-prince", 1e-3, 1e-6, 20)));
    m.blocks.push_back(dense_block(dense("head", 5, 2, Activation::identity, rng, 0.5)));
    return m;
}

CostOptions no_tools() {
    CostOptions o;
    o.cross_prefix.clear();  // estimate code bytes; the counts do not depend on it
    return o;
}

bool have(const std::string& tool) {
    return std::system(("command -v " + tool + " > /dev/null 2>&1").c_str()) == 0;
}

TEST(Cost, CountsAgreeWithAHandCount) {
    Diagnostics diags;
    const auto rep = measure_cost(mixed_model(), no_tools(), diags);
    ASSERT_TRUE(rep) << diags.render();
    ASSERT_EQ(rep->blocks.size(), 5u);

    // Parameters, by hand: out * (in [+1 for t]) + out per dense layer.
    EXPECT_EQ(rep->blocks[0].parameters, 5 * 3 + 5);                  // lift
    EXPECT_EQ(rep->blocks[1].parameters, (8 * 6 + 8) + (5 * 8 + 5));  // f1 (5 + t), f2
    EXPECT_EQ(rep->blocks[2].parameters, 2 * (5 * 5 + 5));            // r1, r2
    EXPECT_EQ(rep->blocks[3].parameters, (6 * 5 + 6) + (5 * 6 + 5));  // g1, g2
    EXPECT_EQ(rep->blocks[4].parameters, 2 * 5 + 2);                  // head
    EXPECT_EQ(rep->parameters, 20 + 101 + 60 + 71 + 12);
    EXPECT_EQ(rep->weight_bytes, 4 * rep->parameters);                // float32
    EXPECT_EQ(rep->blocks[1].weight_bytes, 4 * 101);

    // MACs, by hand: out * (in [+1]) per dense layer.
    EXPECT_EQ(rep->blocks[1].macs_per_field_eval, 8 * 6 + 5 * 8);
    EXPECT_EQ(rep->blocks[3].macs_per_field_eval, 6 * 5 + 5 * 6);
    EXPECT_EQ(rep->macs_per_field_eval, 88 + 60);
    EXPECT_EQ(rep->macs_outside_fields, 15 + 50 + 10);

    // Field evaluations, by the rules of DEVELOPERS.md ("Integrator semantics"):
    // fixed step N * stages (rk4: 4 stages, HNW I, II.1); dormand-prince is
    // FSAL with 7 stages: 1 + 1 (automatic first step) + max-steps * 6.
    EXPECT_EQ(rep->blocks[1].field_evals, 6 * 4);
    EXPECT_FALSE(rep->blocks[1].adaptive);
    EXPECT_EQ(rep->blocks[3].field_evals, 1 + 1 + 20 * 6);
    EXPECT_TRUE(rep->blocks[3].adaptive);
    EXPECT_EQ(rep->field_evals, 24 + 122);
    EXPECT_EQ(rep->blocks[1].macs, 88 * 24);
    EXPECT_EQ(rep->blocks[3].macs, 60 * 122);
    EXPECT_EQ(rep->macs, 15 + 88 * 24 + 50 + 60 * 122 + 10);

    // Exp-based activations: lift 5 (tanh), f1 8 per evaluation (tanh),
    // g1 6 per evaluation (softplus); relu and identity cost none.
    EXPECT_EQ(rep->activations, 5 + 8 * 24 + 6 * 122);

    EXPECT_FALSE(rep->code_measured);
    EXPECT_GT(rep->code_bytes, 0);
}

TEST(Cost, WorkspaceIsTheEmittedHeaderConstant) {
    for (Precision p : {Precision::float32, Precision::float64}) {
        const Model m = mixed_model();
        CostOptions o = no_tools();
        o.precision = p;
        Diagnostics diags;
        const auto rep = measure_cost(m, o, diags);
        ASSERT_TRUE(rep) << diags.render();
        EmitOptions eo;
        eo.precision = p;
        std::string header;
        for (const auto& f : emit_model(m, eo))
            if (f.name == "mixed.hpp") header = f.text;
        std::smatch match;
        ASSERT_TRUE(std::regex_search(header, match, std::regex(R"(workspace_size\s*=\s*(\d+))")));
        const long reals = std::stol(match[1].str());
        const long real_bytes = p == Precision::float32 ? 4 : 8;
        EXPECT_EQ(rep->workspace_bytes, reals * real_bytes);
        EXPECT_EQ(static_cast<std::size_t>(rep->workspace_bytes), lower_model(m, p).workspace_bytes);
        // Per-block RAM: rk4's state, 4 stages and the stage argument (6 x 5
        // reals) plus its field's one buffer between f1 and f2 (8 reals).
        EXPECT_EQ(rep->blocks[1].workspace_bytes, (6 * 5 + 8) * real_bytes);
        // dormand-prince: state, 7 stages, argument, y_new (10 x 5), field buffer 6.
        EXPECT_EQ(rep->blocks[3].workspace_bytes, (10 * 5 + 6) * real_bytes);
        EXPECT_EQ(rep->weight_bytes, rep->parameters * real_bytes);
        // The other resource constants the emitted header states agree too.
        auto constant = [&](const char* name) {
            std::smatch c;
            const std::regex re(std::string(name) + R"(\s*=\s*(\d+)u?;)");
            return std::regex_search(header, c, re) ? std::stol(c[1].str()) : -1L;
        };
        EXPECT_EQ(rep->parameters, constant("parameter_count"));
        EXPECT_EQ(rep->macs_per_field_eval, constant("macs_per_field_eval"));
        EXPECT_EQ(rep->field_evals, constant("worst_field_evals"));
        EXPECT_EQ(rep->macs, constant("worst_macs"));
    }
}

TEST(Cost, CyclesFollowTheStatedFigures) {
    CostOptions o = no_tools();
    o.core = "cortex-m0";
    Diagnostics diags;
    const auto rep = measure_cost(mixed_model(), o, diags);
    ASSERT_TRUE(rep) << diags.render();
    ASSERT_EQ(rep->cycles.size(), 4u);
    EXPECT_EQ(rep->cycles[0].core, CoreClass::cortex_m0);
    // Cortex-M0 software float (project brief, secondary sources): fmul ~170 +
    // fadd ~100 per MAC, expf ~1,930 per exp-based activation.
    EXPECT_DOUBLE_EQ(rep->cycles[0].worst, static_cast<double>(rep->macs) * 270.0 + static_cast<double>(rep->activations) * 1930.0);
    // The Cortex-M4F figures are measured ones (compiler/cost.cpp; target.*.cost-estimate
    // holds them within 20% of the emulated board): every activation of the mixed
    // model counts by kind (the hand count above: tanh 5 + 8 x 24, softplus 6 x 122),
    // and the solver's share is evaluations x state width (5 in both fields).
    const CoreFigures& m4 = core_figures(CoreClass::cortex_m4f);
    for (const CoreCycles& c : rep->cycles)
        if (c.core == CoreClass::cortex_m4f)
            EXPECT_DOUBLE_EQ(c.worst, static_cast<double>(rep->macs) * m4.cycles_per_mac +
                                          (5.0 + 8.0 * 24.0) * m4.activation_cycles.at("tanh") +
                                          6.0 * 122.0 * m4.activation_cycles.at("softplus") +
                                          static_cast<double>(rep->field_evals) * 5.0 * m4.cycles_per_state_eval);

    o.cycles_per_mac = 12.5;
    const auto over = measure_cost(mixed_model(), o, diags);
    ASSERT_TRUE(over);
    EXPECT_TRUE(over->cycles_per_mac_overridden);
    EXPECT_DOUBLE_EQ(over->cycles[0].worst, static_cast<double>(over->macs) * 12.5 + static_cast<double>(over->activations) * 1930.0);
    EXPECT_NE(render_cost_text(*over).find("given by the user"), std::string::npos);

    // float64 has no sourced figure: no estimate unless one is given.
    CostOptions d = no_tools();
    d.precision = Precision::float64;
    const auto dbl = measure_cost(mixed_model(), d, diags);
    ASSERT_TRUE(dbl);
    for (const CoreCycles& c : dbl->cycles) EXPECT_FALSE(c.estimated);
}

// Integer-weight layers' MACs are counted apart and priced at the core's integer
// figure. The mixed model with every layer asked for as int16: lift (15 weights)
// and head (10) stay float, below the 16-weight threshold (DEVELOPERS.md,
// "Integer weights"); the rest are integers. By hand, per inference: flow's rk4,
// 6 steps, takes 24 evaluations of f1 ((5 + t) x 8 = 48) and f2 (8 x 5 = 40),
// polish r1 and r2 25 each, settle's g1 and g2 30 each per evaluation.
TEST(Cost, IntegerLayersArePricedAtTheirOwnFigure) {
    Model m = mixed_model();
    quantise_model(m, Precision::float32, WeightStorage::int16);
    Diagnostics diags;
    const auto rep = measure_cost(m, no_tools(), diags);
    ASSERT_TRUE(rep) << diags.render();
    ASSERT_EQ(rep->blocks.size(), 5u);
    EXPECT_EQ(rep->blocks[0].int_macs, 0);
    EXPECT_EQ(rep->blocks[1].int_macs_per_field_eval, 48 + 40);
    EXPECT_EQ(rep->blocks[1].int_macs, 24 * (48 + 40));
    EXPECT_EQ(rep->blocks[2].int_macs, 50);
    EXPECT_EQ(rep->blocks[3].int_macs, rep->blocks[3].field_evals * 60);
    EXPECT_EQ(rep->blocks[4].int_macs, 0);
    EXPECT_EQ(rep->int_macs, 24 * 88 + 50 + rep->blocks[3].field_evals * 60);
    const CoreFigures& m4 = core_figures(CoreClass::cortex_m4f);
    ASSERT_GT(m4.cycles_per_int_mac, m4.cycles_per_mac);
    for (const CoreCycles& c : rep->cycles)
        if (c.core == CoreClass::cortex_m4f)
            EXPECT_DOUBLE_EQ(c.worst, static_cast<double>(rep->macs - rep->int_macs) * m4.cycles_per_mac +
                                          static_cast<double>(rep->int_macs) * m4.cycles_per_int_mac +
                                          (5.0 + 8.0 * 24.0) * m4.activation_cycles.at("tanh") +
                                          6.0 * 122.0 * m4.activation_cycles.at("softplus") +
                                          static_cast<double>(rep->field_evals) * 5.0 * m4.cycles_per_state_eval);
    const std::string text = render_cost_text(*rep);
    EXPECT_NE(text.find("cycles/int MAC"), std::string::npos) << text;
    EXPECT_NE(text.find(fmt::format("{} of the {} MACs in integer-weight layers", rep->int_macs, rep->macs)),
              std::string::npos)
        << text;
    const nlohmann::json j = nlohmann::json::parse(render_cost_json(*rep));
    EXPECT_EQ(j["total"]["int_macs"], rep->int_macs);
    EXPECT_EQ(j["cycles"][0]["cycles_per_int_mac"], rep->cycles[0].cycles_per_int_mac);

    // A float model prints no integer column.
    const auto plain = measure_cost(mixed_model(), no_tools(), diags);
    ASSERT_TRUE(plain);
    EXPECT_EQ(plain->int_macs, 0);
    EXPECT_EQ(render_cost_text(*plain).find("int MAC"), std::string::npos);
}

TEST(Cost, CoreNamesRoundTrip) {
    for (CoreClass c : all_cores()) EXPECT_EQ(core_from_name(core_name(c)), c);
    EXPECT_FALSE(core_from_name("cortex-m55"));
}

TEST(Cost, RejectsAnUnknownCore) {
    CostOptions o = no_tools();
    o.core = "cortex-m55";
    Diagnostics diags;
    EXPECT_FALSE(measure_cost(mixed_model(), o, diags));
    EXPECT_EQ(diags.render(),
              "cost: error: unknown core class 'cortex-m55' (known: cortex-m0, cortex-m3, cortex-m4f, cortex-m7)\n");
}

TEST(Cost, RejectsAnInputRowOfTheWrongWidth) {
    CostOptions o = no_tools();
    o.inputs = {{0.1, 0.2, 0.3}, {0.1, 0.2}};
    Diagnostics diags;
    EXPECT_FALSE(measure_cost(mixed_model(), o, diags));
    EXPECT_EQ(diags.render(), "cost: error: an input row has 2 values, the model's input has 3\n");
}

// input x[3]; dense a: 3 -> 4, tanh;
// continuous c: 4, t in [0, 1] { dense g1: 4 + t -> 6, tanh; dense g2: 6 -> 4;
//                                solver dormand-prince, rtol 1e-6, atol 1e-8, max-steps 500 }
// output y[4]
Model adaptive_model() {
    std::mt19937 rng(4711);
    Model m = test::model("drift", 3, 4);
    m.blocks.push_back(dense_block(dense("a", 3, 4, Activation::tanh, rng, 1.0)));
    std::vector<Block> g;
    g.push_back(dense_block(dense("g1", 4, 6, Activation::tanh, rng, 1.5, true)));
    g.push_back(dense_block(dense("g2", 6, 4, Activation::identity, rng, 1.5)));
    m.blocks.push_back(
        continuous("c", 4, 0, 0.0, 1.0, std::move(g), adaptive_solver("dormand-prince", 1e-6, 1e-8, 500)));
    return m;
}

std::string matrix_json(const Eigen::MatrixXd& w) {
    nlohmann::json rows = nlohmann::json::array();
    for (Eigen::Index i = 0; i < w.rows(); ++i) {
        std::vector<double> r;
        for (Eigen::Index j = 0; j < w.cols(); ++j) r.push_back(w(i, j));
        rows.push_back(r);
    }
    return rows.dump();
}

TEST(Cost, MeasuredEvaluationsMatchSciPy) {
    // SciPy 1.10 solve_ivp RK45 (Dormand-Prince, FSAL, automatic first step
    // of HNW I, II.4) counts field evaluations in nfev the way DEVELOPERS.md
    // states; the spread over the rows must be SciPy's.
    const Model m = adaptive_model();
    const std::vector<std::vector<double>> rows = {
        {0.5, -1.0, 0.25}, {1.5, 2.0, -0.5}, {-0.25, 0.75, 1.0}, {2.0, -2.0, 0.0}, {0.0, 0.0, 0.0}, {-1.0, 0.3, 0.9}};
    const Dense& a = m.blocks[0].dense;
    const Dense& g1 = m.blocks[1].continuous.field[0].dense;
    const Dense& g2 = m.blocks[1].continuous.field[1].dense;
    nlohmann::json spec;
    spec["rows"] = rows;
    spec["a_w"] = nlohmann::json::parse(matrix_json(a.weight));
    spec["a_b"] = std::vector<double>(a.bias.data(), a.bias.data() + a.bias.size());
    spec["g1_w"] = nlohmann::json::parse(matrix_json(g1.weight));
    spec["g1_b"] = std::vector<double>(g1.bias.data(), g1.bias.data() + g1.bias.size());
    spec["g2_w"] = nlohmann::json::parse(matrix_json(g2.weight));
    spec["g2_b"] = std::vector<double>(g2.bias.data(), g2.bias.data() + g2.bias.size());
    const fs::path dir = fs::temp_directory_path() / ("meander-test-cost-" + std::to_string(getpid()));
    fs::create_directories(dir);
    {
        std::ofstream(dir / "spec.json") << spec.dump();
        std::ofstream(dir / "nfev.py") << R"(import json, sys
import numpy as np
from scipy.integrate import solve_ivp
s = json.load(open(sys.argv[1]))
A, a, G1, g1, G2, g2 = (np.array(s[k]) for k in ("a_w", "a_b", "g1_w", "g1_b", "g2_w", "g2_b"))
def f(t, h):
    return G2 @ np.tanh(G1 @ np.append(h, t) + g1) + g2
for x in s["rows"]:
    h0 = np.tanh(A @ np.array(x) + a)
    r = solve_ivp(f, (0.0, 1.0), h0, method="RK45", rtol=1e-6, atol=1e-8)
    print(r.nfev)
)";
    }
    const std::string out = capture(std::string(MEANDER_SCIPY_PYTHON) + " " + (dir / "nfev.py").string() + " " +
                                    (dir / "spec.json").string());
    fs::remove_all(dir);
    std::vector<long> nfev;
    std::istringstream lines(out);
    long v;
    while (lines >> v) nfev.push_back(v);
    if (nfev.size() != rows.size()) GTEST_SKIP() << "SciPy is not available through " << MEANDER_SCIPY_PYTHON;
    std::vector<long> sorted = nfev;
    std::sort(sorted.begin(), sorted.end());

    CostOptions o = no_tools();
    o.inputs = rows;
    Diagnostics diags;
    const auto rep = measure_cost(m, o, diags);
    ASSERT_TRUE(rep) << diags.render();
    ASSERT_TRUE(rep->measured);
    EXPECT_EQ(rep->measured->rows, 6);
    EXPECT_EQ(rep->measured->failed_rows, 0);
    EXPECT_EQ(rep->measured->min, sorted.front());
    EXPECT_EQ(rep->measured->max, sorted.back());
    EXPECT_DOUBLE_EQ(rep->measured->median, 0.5 * static_cast<double>(sorted[2] + sorted[3]));
    ASSERT_TRUE(rep->blocks[1].measured);
    EXPECT_EQ(rep->blocks[1].measured->min, sorted.front());
    EXPECT_EQ(rep->blocks[1].measured->max, sorted.back());
    EXPECT_FALSE(rep->blocks[0].measured);
    EXPECT_LE(rep->measured->max, rep->field_evals);  // within the worst case max-steps allows
    EXPECT_GT(sorted.front(), 2 * 6);                  // the field makes the solver work
    EXPECT_LT(sorted.front(), sorted.back());          // and the rows differ, so the spread means something

    const std::string text = render_cost_text(*rep);
    EXPECT_NE(text.find("measured over 6 input rows"), std::string::npos) << text;
}

TEST(Cost, JsonCarriesTheReport) {
    Diagnostics diags;
    const auto rep = measure_cost(mixed_model(), no_tools(), diags);
    ASSERT_TRUE(rep);
    const auto j = nlohmann::json::parse(render_cost_json(*rep));
    EXPECT_EQ(j["model"], "mixed");
    EXPECT_EQ(j["core"], "cortex-m4f");
    ASSERT_EQ(j["blocks"].size(), 5u);
    EXPECT_EQ(j["blocks"][3]["name"], "settle");
    EXPECT_EQ(j["blocks"][3]["field_evals"], 122);
    EXPECT_EQ(j["total"]["macs"], rep->macs);
    EXPECT_EQ(j["total"]["workspace_bytes"], rep->workspace_bytes);
    EXPECT_EQ(j["total"]["code_measured"], false);
    EXPECT_EQ(render_cost_json(*rep), render_cost_json(*measure_cost(mixed_model(), no_tools(), diags)));
    const std::string text = render_cost_text(*rep);
    EXPECT_NE(text.find("estimated"), std::string::npos);
    for (const char* name : {"lift", "flow", "polish", "settle", "head"}) EXPECT_NE(text.find(name), std::string::npos);
}

TEST(Cost, CodeAndStackAreWhatTheCrossToolsSay) {
    if (!have("arm-none-eabi-g++") || !have("arm-none-eabi-size"))
        GTEST_SKIP() << "arm-none-eabi tools are not installed (scripts/install-target-tools)";
    const fs::path dir = fs::temp_directory_path() / ("meander-test-cost-obj-" + std::to_string(getpid()));
    CostOptions o;
    o.keep_dir = dir.string();
    o.measure_cycles = false;  // the emulator runs belong to the target tests
    Diagnostics diags;
    const auto rep = measure_cost(mixed_model(), o, diags);
    ASSERT_TRUE(rep) << diags.render();
    EXPECT_TRUE(rep->code_measured);
    EXPECT_NE(rep->code_tool.find("-mcpu=cortex-m4"), std::string::npos);

    // arm-none-eabi-size -A on the same object: the .text sections' sizes.
    const std::string sizes = capture("arm-none-eabi-size -A " + (dir / "mixed.o").string());
    long text = 0, rodata = 0;
    std::istringstream lines(sizes);
    std::string name;
    long bytes = 0;
    std::string line;
    while (std::getline(lines, line)) {
        std::istringstream f(line);
        if (!(f >> name >> bytes)) continue;
        if (name.rfind(".text", 0) == 0) text += bytes;
        if (name.rfind(".rodata", 0) == 0) rodata += bytes;
    }
    EXPECT_GT(text, 0);
    EXPECT_EQ(rep->code_bytes, text);
    EXPECT_EQ(rep->rodata_bytes, rodata);
    EXPECT_GE(rodata, rep->weight_bytes);  // the weights are const data in flash
    EXPECT_EQ(rep->data_bytes, 0);         // emitted code keeps no mutable globals
    long sum = 0;
    for (const FunctionSize& f : rep->functions) sum += f.code_bytes;
    EXPECT_EQ(sum, text);

    // The .su line of mixed::infer.
    const std::string su = read_text(dir / "mixed.su");
    std::smatch m;
    ASSERT_TRUE(std::regex_search(su, m, std::regex(R"(mixed::infer\([^\t]*\t(\d+)\t)"))) << su;
    EXPECT_EQ(rep->entry_stack_bytes, std::stol(m[1].str()));
    EXPECT_GE(rep->stack_bytes, rep->entry_stack_bytes);
    ASSERT_FALSE(rep->stack_chain.empty());
    EXPECT_NE(rep->stack_chain.front().find("mixed::infer("), std::string::npos);

    // The context size, as the cross compiler lays the struct out.
    std::ofstream(dir / "size_check.cpp") << "#include \"mixed.hpp\"\nstatic_assert(sizeof(mixed::context) == "
                                          << rep->context_bytes << "u, \"context size\");\n";
    EXPECT_EQ(std::system(("arm-none-eabi-g++ -std=c++17 -mcpu=cortex-m4 -mthumb -mfpu=fpv4-sp-d16 -mfloat-abi=hard "
                           "-fsyntax-only " + (dir / "size_check.cpp").string()).c_str()),
              0);
    fs::remove_all(dir);
}

// The name tables are constants in flash, counted in .rodata: the same model with names and
// units for its values takes what a hand count of the tables says more (the C++ ABI of the
// 32-bit cores: 4-byte pointers, each string its characters and a NUL; the strings of one
// object share a section of byte alignment).
TEST(Cost, NameTablesCountInTheConstants) {
    if (!have("arm-none-eabi-g++") || !have("arm-none-eabi-size"))
        GTEST_SKIP() << "arm-none-eabi tools are not installed (scripts/install-target-tools)";
    CostOptions o;
    o.measure_cycles = false;
    Diagnostics diags;
    const auto plain = measure_cost(mixed_model(), o, diags);
    Model named = mixed_model();
    named.input_info.names = {"current", "supply", "speed"};
    named.input_info.units = {"A", "V", ""};
    named.output_info.names = {"efficiency", "power"};
    named.output_info.units = {"", ""};
    const auto with = measure_cost(named, o, diags);
    ASSERT_TRUE(plain && with) << diags.render();
    ASSERT_TRUE(plain->code_measured && with->code_measured);
    // Without names: input_names {"x.0", "x.1", "x.2"}, output_names {"y.0", "y.1"}: 12 + 8 bytes of strings.
    // With them: "current", "supply", "speed" (8 + 7 + 6), "efficiency", "power" (11 + 6), and an
    // input_units table of 3 pointers (12) with "A", "V", "" (2 + 2 + 1); no output_units (no unit given).
    const long without_bytes = 12 + 8;
    const long with_bytes = (8 + 7 + 6) + (11 + 6) + 12 + (2 + 2 + 1);
    EXPECT_EQ(with->rodata_bytes - plain->rodata_bytes, with_bytes - without_bytes);
    EXPECT_EQ(with->code_bytes, plain->code_bytes);
}

TEST(Cost, WithoutTheEmulatorTheEstimateStandsAlone) {
    // No measurement when qemu is missing: the report says why and keeps the estimate.
    CostOptions o;
    o.qemu = "/nonexistent/qemu-system-arm";
    Diagnostics diags;
    const auto rep = measure_cost(mixed_model(), o, diags);
    ASSERT_TRUE(rep) << diags.render();
    EXPECT_TRUE(rep->measured_cycles.empty());
    EXPECT_FALSE(rep->cycles_not_measured.empty());
    EXPECT_NE(render_cost_text(*rep).find("static estimate only"), std::string::npos);
    EXPECT_NE(render_cost_json(*rep).find("\"measured_skipped\""), std::string::npos);
    CostOptions off = no_tools();
    off.measure_cycles = false;
    const auto rep2 = measure_cost(mixed_model(), off, diags);
    ASSERT_TRUE(rep2);
    EXPECT_NE(rep2->cycles_not_measured.find("--estimate-only"), std::string::npos);
}

}  // namespace
}  // namespace meander
