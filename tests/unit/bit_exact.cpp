// Float64 emitted code against the reference evaluator, bit for bit: the two
// share one operation order (DEVELOPERS.md, "Operation order") and the C
// library's maths, so on the host every output and every counter must be
// equal, at tolerances tight enough that the error norm often lands near 1.
// The reference values are the evaluator's (runtime/evaluate.cpp), computed
// in this process; the code under test is the emitted C++, built by the host
// compiler with -ffp-contract=off and run as a separate program.
#include <cstring>

#include "compiler/verify.hpp"
#include "emit_support.hpp"
#include "runtime/tableau.hpp"

namespace meander::test {
namespace {

namespace fs = std::filesystem;

std::uint64_t bits(double v) {
    std::uint64_t u = 0;
    std::memcpy(&u, &v, sizeof u);
    return u;
}

// input 3 -> lift -> residual -> continuous (state 5 + augment 1, a field
// with time input and three layers) -> head (softmax). Weights and biases from
// the fixed-seed generator of emit_support.hpp; activations vary with the seed
// so that every activation the evaluator knows passes through a field, and
// the field's last layer has a kink (relu, leaky relu): steps across it are
// rejected, so the controller's rejection branch is exercised too.
Model exact_model(const std::string& name, const SolverSpec& solver, std::uint64_t seed) {
    static const Activation field_acts[][3] = {
        {Activation::softplus, Activation::tanh, Activation::relu},
        {Activation::gelu, Activation::sigmoid, Activation::leaky_relu},
        {Activation::silu, Activation::elu, Activation::relu},
        {Activation::leaky_relu, Activation::tanh, Activation::relu},
    };
    const auto& acts = field_acts[seed % 4];
    Rng rng(seed);
    std::vector<Block> body;
    body.push_back(dense(rng, "r1", 5, 7, Activation::relu));
    body.push_back(dense(rng, "r2", 7, 5));
    std::vector<Block> field;
    field.push_back(dense(rng, "f1", 6, 9, acts[0], true, 1.5));
    field.push_back(dense(rng, "f2", 9, 7, acts[1], false, 1.5));
    field.push_back(dense(rng, "f3", 7, 6, acts[2], false, 1.5, false));
    std::vector<Block> blocks;
    blocks.push_back(dense(rng, "lift", 3, 5, Activation::tanh));
    blocks.push_back(residual("polish", 5, std::move(body)));
    blocks.push_back(continuous("settle", 5, 1, 0.0, 1.5, std::move(field), solver));
    blocks.push_back(dense(rng, "head", 6, 4, Activation::softmax));
    return model(name, 3, 4, std::move(blocks));
}

std::string id_of(std::string_view key) {
    std::string s(key);
    for (char& c : s)
        if (c == '-') c = '_';
    return s;
}

EmitOptions float64_options() {
    EmitOptions eo;
    eo.precision = Precision::float64;
    eo.meander_version = "test";
    eo.content_hash = "0000000000000000";
    return eo;
}

// Every adaptive method of the table with both controllers, 400 random rows
// each, rtol 1e-12 and atol 1e-14 (the setting of issue 13's report, where one
// row took 848 field evaluations in the emitted code and 842 in eval).
TEST(BitExact, EveryAdaptiveMethodAndControllerEqualsEval) {
    std::vector<Model> models;
    std::uint64_t seed = 1300;
    for (const Tableau& t : tableaux()) {
        if (!t.adaptive()) continue;
        for (Controller ctl : {Controller::integral, Controller::pi}) {
            SolverSpec s = adaptive_solver(std::string(t.key), 1e-12, 1e-14, 20000);
            s.controller = ctl;
            models.push_back(exact_model(fmt::format("x_{}_{}", id_of(t.key), ctl == Controller::pi ? "pi" : "integral"),
                                         s, ++seed));
        }
    }
    ASSERT_EQ(models.size(), 8u);  // bogacki-shampine, dormand-prince, tsitouras, cash-karp; two controllers

    const std::vector<std::vector<double>> inputs = random_inputs(4242, 400, 3, 2.5);
    const fs::path dir = temp_dir("bit_exact");
    std::vector<std::string> names, sources;
    for (const Model& m : models) {
        write_files(dir, emit_model(m, float64_options()));
        names.push_back(m.name);
        sources.push_back(m.name + ".cpp");
    }
    write_text(dir / "driver.cpp", driver_source(names, inputs, 3));
    sources.push_back("driver.cpp");
    const std::string error = build(dir, sources, "driver", "-ffp-contract=off");
    ASSERT_TRUE(error.empty()) << error;
    const RunResult r = run((dir / "driver").string());
    ASSERT_EQ(r.status, 0) << r.output;
    const auto rows = parse_driver(r.output);
    ASSERT_EQ(rows.size(), models.size());

    for (std::size_t m = 0; m < models.size(); ++m) {
        ASSERT_EQ(rows[m].size(), inputs.size());
        long evals = 0, rejected = 0, ok = 0;
        for (std::size_t i = 0; i < inputs.size(); ++i) {
            const Eigen::VectorXd x = Eigen::Map<const Eigen::VectorXd>(inputs[i].data(), 3);
            const EvalResult ref = evaluate(models[m], x);
            const Row& row = rows[m][i];
            const std::string what = fmt::format("{} row {}", models[m].name, i);
            ASSERT_EQ(row.result, status_code(ref.status)) << what;
            ASSERT_EQ(row.field_evals, ref.stats.field_evals) << what;
            ASSERT_EQ(row.steps_accepted, ref.stats.steps_accepted) << what;
            ASSERT_EQ(row.steps_rejected, ref.stats.steps_rejected) << what;
            evals += row.field_evals;
            rejected += row.steps_rejected;
            if (ref.status != EvalStatus::ok) continue;
            ++ok;
            ASSERT_EQ(row.out.size(), 4u) << what;
            for (int c = 0; c < 4; ++c)
                ASSERT_EQ(bits(row.out[static_cast<std::size_t>(c)]), bits(ref.output[c]))
                    << what << " output " << c << ": emitted " << fmt::format("{:a}", row.out[static_cast<std::size_t>(c)])
                    << ", eval " << fmt::format("{:a}", ref.output[c]);
        }
        // The rows must run to the end and the controller must have rejected
        // steps somewhere, or the accept/reject decisions went untested.
        EXPECT_EQ(ok, 400) << models[m].name;
        EXPECT_GT(rejected, 0) << models[m].name;
        EXPECT_GT(evals, 400 * 20) << models[m].name;
    }
    fs::remove_all(dir);
}

// A compiler wrapper that nudges one weight of the emitted source by one ulp
// before building: verify must report the outputs whose bits changed, with
// the row, the output and both values in hex. Without the nudge the same
// rows agree (the check is not vacuous either way).
TEST(BitExact, VerifyReportsAWeightOneUlpOff) {
    SolverSpec s = adaptive_solver("tsitouras", 1e-12, 1e-14, 20000);
    const Model m = exact_model("nudged", s, 77);
    const std::vector<std::vector<double>> inputs = random_inputs(99, 12, 3, 2.0);

    VerifyOptions plain;
    plain.cxx = MEANDER_CXX;
    Diagnostics d0;
    const auto good = verify_model(m, float64_options(), inputs, plain, d0);
    ASSERT_TRUE(good.has_value());
    EXPECT_TRUE(good->bits_must_match);
    EXPECT_EQ(good->bit_mismatches, 0);
    EXPECT_EQ(good->counter_mismatches, 0);
    EXPECT_TRUE(good->passed()) << render_verify(*good, Precision::float64);

    // head's first weight, as the emitted table spells it, and its successor.
    const Dense& head = m.blocks.back().dense;
    const double w = head.weight(0, 0);
    std::string from = fmt::format("{}", w);
    const std::string to = fmt::format("{}", std::nextafter(w, 2.0));
    ASSERT_NE(from, to);
    std::string pattern;
    for (char ch : from) pattern += ch == '.' ? std::string("\\.") : std::string(1, ch);
    const fs::path dir = temp_dir("bit_exact_nudge");
    const fs::path wrapper = dir / "nudging-cxx";
    write_text(wrapper, fmt::format("#!/bin/sh\nfor a in \"$@\"; do case \"$a\" in *nudged.cpp) "
                                    "sed -i 's/\\([ {{]\\){},/\\1{},/' \"$a\";; esac; done\nexec '{}' \"$@\"\n",
                                    pattern, to, MEANDER_CXX));
    fs::permissions(wrapper, fs::perms::owner_all);
    VerifyOptions nudging;
    nudging.cxx = wrapper.string();
    Diagnostics d1;
    const auto bad = verify_model(m, float64_options(), inputs, nudging, d1);
    ASSERT_TRUE(bad.has_value());
    EXPECT_FALSE(bad->passed());
    EXPECT_GT(bad->bit_mismatches, 0);
    EXPECT_GE(bad->first_bits_row, 0);
    EXPECT_GE(bad->first_bits_col, 0);
    const std::string text = render_verify(*bad, Precision::float64);
    EXPECT_NE(text.find(fmt::format("0x{:016x}", bits(bad->first_bits_emitted))), std::string::npos) << text;
    EXPECT_NE(text.find(fmt::format("0x{:016x}", bits(bad->first_bits_eval))), std::string::npos) << text;
    EXPECT_NE(text.find("outputs with other bits"), std::string::npos) << text;
    EXPECT_NE(bits(bad->first_bits_emitted), bits(bad->first_bits_eval));
    fs::remove_all(dir);
}

// Issue 13's report, on the sample it was made with: fan_balance deployed with
// tsitouras at rtol 1e-12, atol 1e-14. Before the two sides shared one
// operation order, rows 20 and 37 of its inputs took 728 and 584 field
// evaluations in the emitted code against 716 and 590 in eval (measured with
// meander verify on 2026-12-02); now every row must give equal counters and bits.
TEST(BitExact, FanBalanceWithTsitourasAtTightTolerances) {
    const fs::path src = fs::path(MEANDER_SOURCE_DIR) / "samples" / "fan_balance";
    const fs::path dir = temp_dir("bit_exact_fan");
    std::string mnd = read_text(src / "fan_balance.mnd");
    const std::size_t at = mnd.find("solver rk4, steps 8");
    ASSERT_NE(at, std::string::npos) << "the sample's solver line changed";
    mnd.replace(at, std::string("solver rk4, steps 8").size(), "solver tsitouras, rtol 1e-12, atol 1e-14, max-steps 4000");
    write_text(dir / "fan_balance.mnd", mnd);
    fs::copy_file(src / "fan_balance.npz", dir / "fan_balance.npz");
    const RunResult r = run(fmt::format("{} verify {} --input {} --precision float64", MEANDER_BINARY,
                                        (dir / "fan_balance.mnd").string(), (src / "inputs.csv").string()));
    EXPECT_EQ(r.status, 0) << r.output;
    EXPECT_NE(r.output.find("required             equal bits for every output, equal counters"), std::string::npos)
        << r.output;
    EXPECT_NE(r.output.find("verdict              agrees"), std::string::npos) << r.output;
    fs::remove_all(dir);
}

}  // namespace
}  // namespace meander::test
