// format_description: one canonical layout, comments kept, idempotent.
// The canonical texts below are written out by hand from the layout rules of
// grammar/LANGUAGE.md ("Canonical layout").
#include <gtest/gtest.h>

#include <charconv>
#include <cmath>
#include <limits>
#include <tuple>

#include "compiler/format.hpp"
#include "compiler/parse.hpp"

namespace meander {
namespace {

std::string format_ok(const std::string& text) {
    Source src("f.mnd", text);
    Diagnostics diags;
    auto out = format_description(src, diags);
    EXPECT_TRUE(out.has_value()) << diags.render();
    EXPECT_EQ(diags.render(), "");
    return out.value_or("");
}

const char* kMessy =
    "   # Frost warning for a greenhouse vent (invented scenario)\n"
    "model   frost_vent    # namespace of the emitted code\n"
    "weights \"frost_vent.mnw\"\n"
    "\n\n\n"
    "input air [ 4 ]\n"
    "dense lift:4->8,tanh,weight \"lift.weight\"\n"
    "# the slow part\n"
    "continuous cool : 8 , t in [ 0.0 , 2.50 ] {   # integrates the air state\n"
    "augment 2\n"
    "      dense f1: 10+t -> 16, softplus, from \"f1\"\n"
    "   dense f2: 16 -> 10,\n"
    "      leaky-relu 0.010,   # the default slope, written out\n"
    "      from \"ode.f2\"\n"
    "\n"
    "\n"
    "  solver dormand-prince, max-steps 64, atol 1e-06, rtol 0.0001, controller integral\n"
    "  trained-with dormand-prince,max-steps 64,atol 1E-6,rtol 1e-4\n"
    "  # end of the field\n"
    "} # cool\n"
    "residual calm: 10 { dense r1: 10 -> 10, elu 0.50, no-bias dense r2: 10 -> 10, weight \"W\", bias \"r2.bias\" # r2\n"
    "}\n"
    "\n"
    "dense head: 10 -> 2, softmax, from \"head\"\n"
    "output risk[2]\n"
    "# trailing words\n";

const char* kCanonical =
    "# Frost warning for a greenhouse vent (invented scenario)\n"
    "model frost_vent  # namespace of the emitted code\n"
    "weights \"frost_vent.mnw\"\n"
    "\n"
    "input air[4]\n"
    "dense lift: 4 -> 8, tanh\n"
    "# the slow part\n"
    "continuous cool: 8, t in [0, 2.5] {  # integrates the air state\n"
    "  augment 2\n"
    "  dense f1: 10 + t -> 16, softplus\n"
    "  # the default slope, written out\n"
    "  dense f2: 16 -> 10, leaky-relu, from \"ode.f2\"\n"
    "\n"
    // Step-size control is spelled out in full, defaults included.
    "  solver dormand-prince, rtol 1e-4, atol 1e-6, max-steps 64, controller integral, safety 0.9, min-factor 0.2, "
    "max-factor 10\n"
    "  trained-with dormand-prince, rtol 1e-4, atol 1e-6, max-steps 64, controller integral, safety 0.9, "
    "min-factor 0.2, max-factor 10\n"
    "  # end of the field\n"
    "}  # cool\n"
    "residual calm: 10 {\n"
    "  dense r1: 10 -> 10, elu 0.5, no-bias\n"
    "  dense r2: 10 -> 10, weight \"W\"  # r2\n"
    "}\n"
    "\n"
    "dense head: 10 -> 2, softmax\n"
    "output risk[2]\n"
    "# trailing words\n";

TEST(Format, MessyInputGivesTheCanonicalLayout) {
    EXPECT_EQ(format_ok(kMessy), kCanonical);
}

TEST(Format, CanonicalInputIsUnchanged) {
    EXPECT_EQ(format_ok(kCanonical), kCanonical);
}

TEST(Format, Idempotent) {
    const char* inputs[] = {
        kMessy,
        "model a input x[2] dense d: 2 -> 2 residual r: 2 { dense e: 2 -> 2 } output y[2]",
        "# only\n# comments\n\n\n# before\nmodel a\n\n\n\ninput x[2]\n\n# lonely\n\ndense d: 2 -> 2 # t\noutput y[2]\n\n\n",
        "model a\r\ninput x[2]\r\ncontinuous c: 2, t in [1, -0.5] {\r\n  residual r: 2 {\r\n    dense g: 2 + t -> 2 # g\r\n"
        "  } # r\r\n  solver rk4, steps 3 # s\r\n}\r\noutput y[2]",
        "model a\ninput x[2]\ndense d: 2 # mid-statement\n -> 2 # end\n, relu\noutput y[2]\n",
    };
    for (const char* text : inputs) {
        std::string once = format_ok(text);
        std::string twice = format_ok(once);
        EXPECT_EQ(once, twice) << "input:\n" << text;
    }
}

TEST(Format, CommentsAreKept) {
    std::string out = format_ok(
        "# a\nmodel m # b\n# c\ninput x[2] # d\ncontinuous k: 2, t in [0, 1] { # e\n# f\n"
        "dense f: 2 -> 2 # g\n# h\nsolver euler, steps 2 # i\n# j\n} # k\n# l\noutput y[2] # m\n# n\n");
    for (const char* c : {"# a", "# b", "# c", "# d", "# e", "# f", "# g", "# h", "# i", "# j", "# k", "# l", "# m", "# n"})
        EXPECT_NE(out.find(c), std::string::npos) << c << " missing from\n" << out;
    EXPECT_EQ(out,
              "# a\n"
              "model m  # b\n"
              "# c\n"
              "input x[2]  # d\n"
              "continuous k: 2, t in [0, 1] {  # e\n"
              "  # f\n"
              "  dense f: 2 -> 2  # g\n"
              "  # h\n"
              "  solver euler, steps 2  # i\n"
              "  # j\n"
              "}  # k\n"
              "# l\n"
              "output y[2]  # m\n"
              "# n\n");
}

TEST(Format, TensorNamesInTheirShortestSpelling) {
    std::string out = format_ok(
        "model m\ninput x[2]\n"
        "dense a: 2 -> 2, weight \"a.weight\", bias \"a.bias\"\n"
        "dense b: 2 -> 2, weight \"enc.weight\", bias \"enc.bias\"\n"
        "dense c: 2 -> 2, from \"c\", no-bias\n"
        "dense d: 2 -> 2, from \"p\", no-bias\n"
        "dense e: 2 -> 2, weight \"E\", no-bias\n"
        "dense f: 2 -> 2, bias \"B\"\n"
        "output y[2]\n");
    EXPECT_EQ(out,
              "model m\n"
              "input x[2]\n"
              "dense a: 2 -> 2\n"
              "dense b: 2 -> 2, from \"enc\"\n"
              "dense c: 2 -> 2, no-bias\n"
              "dense d: 2 -> 2, from \"p\", no-bias\n"
              "dense e: 2 -> 2, weight \"E\", no-bias\n"
              "dense f: 2 -> 2, bias \"B\"\n"
              "output y[2]\n");
}

// The layout changes, the model does not: every field the parser fills reads the same
// from the formatted text (the solver's `written` list aside, which follows the text).
void expect_same_blocks(const std::vector<Block>& a, const std::vector<Block>& b) {
    ASSERT_EQ(a.size(), b.size());
    for (std::size_t i = 0; i < a.size(); ++i) {
        ASSERT_EQ(a[i].kind, b[i].kind);
        const Dense &da = a[i].dense, &db = b[i].dense;
        EXPECT_EQ(std::tie(da.name, da.in, da.time_input, da.out, da.act, da.act_param, da.weight_tensor, da.bias_tensor, da.has_bias),
                  std::tie(db.name, db.in, db.time_input, db.out, db.act, db.act_param, db.weight_tensor, db.bias_tensor, db.has_bias));
        EXPECT_EQ(a[i].residual.width, b[i].residual.width);
        expect_same_blocks(a[i].residual.body, b[i].residual.body);
        const Continuous &ca = a[i].continuous, &cb = b[i].continuous;
        EXPECT_EQ(std::tie(ca.name, ca.width, ca.augment, ca.t0, ca.t1), std::tie(cb.name, cb.width, cb.augment, cb.t0, cb.t1));
        EXPECT_EQ(format_solver(ca.solver), format_solver(cb.solver));
        EXPECT_EQ(ca.trained.has_value(), cb.trained.has_value());
        if (ca.trained && cb.trained) EXPECT_EQ(format_solver(*ca.trained), format_solver(*cb.trained));
        expect_same_blocks(ca.field, cb.field);
    }
}

TEST(Format, KeepsTheModel) {
    Source before("f.mnd", kMessy);
    Source after("f.mnd", format_ok(kMessy));
    Diagnostics diags;
    auto a = parse_description(before, diags);
    auto b = parse_description(after, diags);
    ASSERT_TRUE(a && b) << diags.render();
    EXPECT_EQ(std::tie(a->name, a->weights_path, a->input_name, a->input_size, a->output_name, a->output_size),
              std::tie(b->name, b->weights_path, b->input_name, b->input_size, b->output_name, b->output_size));
    expect_same_blocks(a->blocks, b->blocks);
}

TEST(Format, InvalidInputGivesDiagnosticsAndNoOutput) {
    Source src("f.mnd", "model m\ninput x[2]\ndense a: 2 -> 2, tanhh\noutput y[2]\n");
    Diagnostics diags;
    EXPECT_FALSE(format_description(src, diags).has_value());
    EXPECT_EQ(diags.error_count(), 1);
    EXPECT_EQ(diags.all()[0].loc.line, 3);
    EXPECT_EQ(diags.all()[0].loc.col, 18);
}

TEST(FormatNumber, ShortestTextThatReadsBack) {
    // Expected spellings: the shortest decimal that rounds to the same double (fmt's
    // shortest form), with plain exponents.
    const std::pair<double, const char*> cases[] = {
        {0.0, "0"},       {1.0, "1"},          {2.5, "2.5"},        {-0.5, "-0.5"},  {1e-4, "1e-4"},
        {1e-6, "1e-6"},   {1.5e-7, "1.5e-7"},  {0.001, "1e-3"},     {0.01, "0.01"},  {0.1, "0.1"},
        {0.25, "0.25"},   {1234.5, "1234.5"},  {1e20, "1e20"},      {-2e-5, "-2e-5"}, {0.3, "0.3"},
        {0.1 + 0.2, "0.30000000000000004"},    {1e16, "1e16"},      {0.00012, "1.2e-4"},
    };
    for (const auto& [value, text] : cases) {
        EXPECT_EQ(format_number(value), text);
        double back = 0;
        std::string s = format_number(value);
        std::from_chars(s.data(), s.data() + s.size(), back);
        EXPECT_EQ(back, value) << s;
    }
}

TEST(FormatSolver, CanonicalOrderOfWrittenOptions) {
    SolverSpec s;
    s.method = "tsitouras";
    s.written = {"pi-beta", "controller", "max-steps", "atol", "rtol", "first-step"};
    s.rtol = 1e-3;
    s.atol = 1e-7;
    s.max_steps = 200;
    s.first_step = 0.05;
    s.controller = Controller::pi;
    s.pi_beta = 0.35;
    EXPECT_EQ(format_solver(s), "tsitouras, rtol 1e-3, atol 1e-7, max-steps 200, first-step 0.05, controller pi, safety 0.9, "
              "min-factor 0.2, max-factor 10, pi-alpha 0.7, pi-beta 0.35");
    SolverSpec f;
    f.method = "heun";
    f.steps = 12;
    f.written = {"steps"};
    EXPECT_EQ(format_solver(f), "heun, steps 12");
}

}  // namespace
}  // namespace meander
