// parse_description: what the Model holds after parsing. Expected values are
// read off the description text in each test (positions are 1-based line and
// byte column of the name token) or are the language's documented defaults
// (grammar/LANGUAGE.md).
#include <gtest/gtest.h>

#include <tao/pegtl/contrib/analyze.hpp>

#include "compiler/parse.hpp"
#include "grammar/meander.hpp"

namespace meander {
namespace {

// Soil-moisture trend for a vineyard irrigation valve (invented scenario).
const char* kVineyard =
    "# soil moisture trend, invented scenario\n"                          // 1
    "model vine_trend\n"                                                   // 2
    "weights \"vine_trend.npz\"\n"                                         // 3
    "\n"                                                                   // 4
    "input probe[5]\n"                                                     // 5
    "dense lift: 5 -> 12, tanh\n"                                          // 6
    "continuous drift: 12, t in [0, 2.5] {\n"                              // 7
    "  augment 2\n"                                                        // 8
    "  dense f1: 14 + t -> 24, softplus   # time joins this layer\n"       // 9
    "  dense f2: 24 -> 14, leaky-relu, from \"ode.out\"\n"                 // 10
    "  solver dormand-prince, rtol 1e-4, atol 1e-6, max-steps 80, controller pi\n"  // 11
    "  trained-with rk38, steps 8\n"                                       // 12
    "}\n"                                                                  // 13
    "residual smooth: 14 {\n"                                              // 14
    "  dense r1: 14 -> 14, elu 0.5, no-bias\n"                             // 15
    "  dense r2: 14 -> 14, weight \"W_r2\", bias \"b_r2\"\n"               // 16
    "}\n"                                                                  // 17
    "dense head: 14 -> 3, softmax\n"                                       // 18
    "output valve[3]\n";                                                   // 19

Model parse_ok(const std::string& text) {
    Source src("test.mnd", text);
    Diagnostics diags;
    auto m = parse_description(src, diags);
    EXPECT_TRUE(m.has_value()) << diags.render();
    EXPECT_EQ(diags.render(), "");
    return m ? *m : Model{};
}

void expect_loc(Loc loc, int line, int col) {
    EXPECT_EQ(loc.line, line);
    EXPECT_EQ(loc.col, col);
}

TEST(Grammar, AnalyzeFindsNoProblems) {
    // PEGTL's analysis: no rule can loop forever without consuming input.
    EXPECT_EQ(tao::pegtl::analyze<grammar::description>(), 0u);
}

TEST(Parse, ModelStatements) {
    Model m = parse_ok(kVineyard);
    EXPECT_EQ(m.name, "vine_trend");
    expect_loc(m.loc, 2, 7);
    EXPECT_EQ(m.weights_path, "vine_trend.npz");
    expect_loc(m.weights_loc, 3, 9);
    EXPECT_EQ(m.input_name, "probe");
    EXPECT_EQ(m.input_size, 5);
    expect_loc(m.input_loc, 5, 7);
    EXPECT_EQ(m.output_name, "valve");
    EXPECT_EQ(m.output_size, 3);
    expect_loc(m.output_loc, 19, 8);
    ASSERT_EQ(m.blocks.size(), 4u);
    EXPECT_EQ(m.blocks[0].kind, Block::Kind::dense);
    EXPECT_EQ(m.blocks[1].kind, Block::Kind::continuous);
    EXPECT_EQ(m.blocks[2].kind, Block::Kind::residual);
    EXPECT_EQ(m.blocks[3].kind, Block::Kind::dense);
}

TEST(Parse, DenseLayers) {
    Model m = parse_ok(kVineyard);
    const Dense& lift = m.blocks[0].dense;
    EXPECT_EQ(lift.name, "lift");
    expect_loc(lift.loc, 6, 7);
    EXPECT_EQ(lift.in, 5);
    EXPECT_EQ(lift.out, 12);
    EXPECT_FALSE(lift.time_input);
    EXPECT_EQ(lift.act, Activation::tanh);
    EXPECT_EQ(lift.weight_tensor, "lift.weight");
    EXPECT_EQ(lift.bias_tensor, "lift.bias");
    EXPECT_TRUE(lift.has_bias);

    const Dense& head = m.blocks[3].dense;
    EXPECT_EQ(head.act, Activation::softmax);
    expect_loc(head.loc, 18, 7);
}

TEST(Parse, ContinuousBlock) {
    Model m = parse_ok(kVineyard);
    const Continuous& c = m.blocks[1].continuous;
    EXPECT_EQ(c.name, "drift");
    expect_loc(c.loc, 7, 12);
    EXPECT_EQ(c.width, 12);
    EXPECT_EQ(c.augment, 2);
    EXPECT_EQ(c.state(), 14);
    EXPECT_EQ(c.t0, 0.0);
    EXPECT_EQ(c.t1, 2.5);
    expect_loc(c.interval_loc, 7, 28);
    ASSERT_EQ(c.field.size(), 2u);

    const Dense& f1 = c.field[0].dense;
    EXPECT_EQ(f1.name, "f1");
    expect_loc(f1.loc, 9, 9);
    EXPECT_EQ(f1.in, 14);
    EXPECT_TRUE(f1.time_input);
    EXPECT_EQ(f1.in_total(), 15);
    EXPECT_EQ(f1.out, 24);
    EXPECT_EQ(f1.act, Activation::softplus);

    const Dense& f2 = c.field[1].dense;
    EXPECT_EQ(f2.act, Activation::leaky_relu);
    EXPECT_EQ(f2.act_param, 0.01);  // documented default slope
    EXPECT_EQ(f2.weight_tensor, "ode.out.weight");
    EXPECT_EQ(f2.bias_tensor, "ode.out.bias");

    const SolverSpec& s = c.solver;
    EXPECT_EQ(s.method, "dormand-prince");
    expect_loc(s.loc, 11, 10);
    EXPECT_EQ(s.rtol, 1e-4);
    EXPECT_EQ(s.atol, 1e-6);
    EXPECT_EQ(s.max_steps, 80);
    EXPECT_EQ(s.controller, Controller::pi);
    EXPECT_EQ(s.written, (std::vector<std::string>{"rtol", "atol", "max-steps", "controller"}));
    // Options not written keep the documented defaults.
    EXPECT_EQ(s.first_step, 0.0);
    EXPECT_EQ(s.safety, 0.9);
    EXPECT_EQ(s.min_factor, 0.2);
    EXPECT_EQ(s.max_factor, 10.0);
    EXPECT_EQ(s.pi_alpha, 0.7);
    EXPECT_EQ(s.pi_beta, 0.4);

    ASSERT_TRUE(c.trained.has_value());
    EXPECT_EQ(c.trained->method, "rk38");
    EXPECT_EQ(c.trained->steps, 8);
    expect_loc(c.trained->loc, 12, 16);
    EXPECT_EQ(c.trained->written, (std::vector<std::string>{"steps"}));
}

TEST(Parse, ResidualBlockAndTensorOptions) {
    Model m = parse_ok(kVineyard);
    const Residual& r = m.blocks[2].residual;
    EXPECT_EQ(r.name, "smooth");
    expect_loc(r.loc, 14, 10);
    EXPECT_EQ(r.width, 14);
    ASSERT_EQ(r.body.size(), 2u);
    const Dense& r1 = r.body[0].dense;
    EXPECT_EQ(r1.act, Activation::elu);
    EXPECT_EQ(r1.act_param, 0.5);
    EXPECT_FALSE(r1.has_bias);
    EXPECT_EQ(r1.weight_tensor, "r1.weight");
    EXPECT_EQ(r1.bias_tensor, "");
    const Dense& r2 = r.body[1].dense;
    EXPECT_EQ(r2.act, Activation::identity);
    EXPECT_EQ(r2.weight_tensor, "W_r2");
    EXPECT_EQ(r2.bias_tensor, "b_r2");
}

TEST(Parse, ActivationDefaultsAndParameters) {
    Model m = parse_ok(
        "model a\ninput x[2]\n"
        "dense l1: 2 -> 2, elu\n"
        "dense l2: 2 -> 2, leaky-relu 0.2\n"
        "dense l3: 2 -> 2, elu -1.5\n"
        "dense l4: 2 -> 2, gelu\n"
        "dense l5: 2 -> 2, silu, from \"enc.l5\", no-bias\n"
        "output y[2]\n");
    EXPECT_EQ(m.blocks[0].dense.act_param, 1.0);   // documented default alpha
    EXPECT_EQ(m.blocks[1].dense.act_param, 0.2);
    EXPECT_EQ(m.blocks[2].dense.act_param, -1.5);
    EXPECT_EQ(m.blocks[3].dense.act, Activation::gelu);
    const Dense& l5 = m.blocks[4].dense;
    EXPECT_EQ(l5.act, Activation::silu);
    EXPECT_EQ(l5.weight_tensor, "enc.l5.weight");
    EXPECT_FALSE(l5.has_bias);
    EXPECT_EQ(l5.bias_tensor, "");
}

TEST(Parse, RealSpellings) {
    // Each spelling must give the double the C++ compiler makes of the same literal.
    const std::pair<const char*, double> cases[] = {
        {"1", 1.0},     {"-0.5", -0.5},   {"1e-4", 1e-4},     {"2.5E+3", 2.5E+3}, {".5", .5},
        {"5.", 5.},     {"+2", 2.0},      {"0.1", 0.1},       {"-1e-300", -1e-300}, {"1.7976931348623157e308", 1.7976931348623157e308},
        {"3.141592653589793238", 3.141592653589793238},
    };
    for (const auto& [text, value] : cases) {
        std::string d = std::string("model a\ninput x[2]\ncontinuous c: 2, t in [") + text + ", 7] {\n"
                        "  dense f: 2 -> 2\n  solver euler, steps 1\n}\noutput y[2]\n";
        Model m = parse_ok(d);
        ASSERT_EQ(m.blocks.size(), 1u) << text;
        EXPECT_EQ(m.blocks[0].continuous.t0, value) << text;
    }
}

TEST(Parse, FreeLayoutCommentsTabsAndCrlf) {
    // One statement across lines, comments between tokens, tabs and CRLF line ends.
    Model m = parse_ok(
        "model a # name\r\n"
        "input x[3]\r\n"
        "\tdense  first :\t3\r\n"
        "   -> 4 # half way\r\n"
        "   , relu\r\n"
        "output y[4]");
    ASSERT_EQ(m.blocks.size(), 1u);
    const Dense& d = m.blocks[0].dense;
    EXPECT_EQ(d.name, "first");
    expect_loc(d.loc, 3, 9);  // a tab counts as one byte
    EXPECT_EQ(d.in, 3);
    EXPECT_EQ(d.out, 4);
    EXPECT_EQ(d.act, Activation::relu);
}

TEST(Parse, SeveralStatementsOnOneLine) {
    Model m = parse_ok("model a input x[2] dense d: 2 -> 2 residual r: 2 { dense e: 2 -> 2 } output y[2]");
    ASSERT_EQ(m.blocks.size(), 2u);
    EXPECT_EQ(m.blocks[1].residual.body.size(), 1u);
    expect_loc(m.blocks[1].residual.loc, 1, 45);
}

TEST(Parse, NestedResidualInsideField) {
    Model m = parse_ok(
        "model a\ninput x[2]\n"
        "continuous c: 2, t in [1, 0] {\n"
        "  residual inner: 2 {\n"
        "    dense g: 2 + t -> 2, tanh\n"
        "  }\n"
        "  solver rk4, steps 3\n"
        "}\n"
        "output y[2]\n");
    const Continuous& c = m.blocks[0].continuous;
    EXPECT_EQ(c.t0, 1.0);
    EXPECT_EQ(c.t1, 0.0);
    ASSERT_EQ(c.field.size(), 1u);
    ASSERT_EQ(c.field[0].kind, Block::Kind::residual);
    EXPECT_TRUE(c.field[0].residual.body[0].dense.time_input);
    EXPECT_FALSE(c.trained.has_value());
    EXPECT_EQ(c.solver.steps, 3);
}

TEST(Parse, ErrorsGiveNoModel) {
    Source src("bad.mnd", "model a\ninput x[2]\ndense d 2 -> 2\noutput y[2]\n");
    Diagnostics diags;
    EXPECT_FALSE(parse_description(src, diags).has_value());
    EXPECT_EQ(diags.error_count(), 1);
    EXPECT_EQ(diags.render(), "bad.mnd:3:9: error: expected ':'\ndense d 2 -> 2\n        ^\n");
}

TEST(Parse, KeywordsNeedAWordBoundary) {
    // "denser" is not "dense": it is an unknown statement.
    Source src("bad.mnd", "model a\ninput x[2]\ndenser d: 2 -> 2\noutput y[2]\n");
    Diagnostics diags;
    EXPECT_FALSE(parse_description(src, diags).has_value());
    ASSERT_EQ(diags.error_count(), 1);
    EXPECT_EQ(diags.all()[0].message, "expected a statement: weights, weights-as, ignore, learn, input, state, dense, residual, continuous, blend, gated, merge or output");
    expect_loc(diags.all()[0].loc, 3, 1);
}

}  // namespace
}  // namespace meander
