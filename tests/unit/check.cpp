// check_model: shapes and solver settings. Each expected message follows the
// rules of grammar/LANGUAGE.md; the precision limits come from FLT_EPSILON and
// DBL_EPSILON (<cfloat>), the warning text for a changed discretisation from
// the project brief (Ott et al., "ResNet After All?", ICLR 2021).
#include <gtest/gtest.h>

#include <cfloat>
#include <cmath>
#include <limits>

#include "compiler/check.hpp"
#include "compiler/parse.hpp"

namespace meander {
namespace {

struct Result {
    bool ok;
    std::string text;
};

Result check(const std::string& description, Precision p = Precision::float32) {
    Source src("m.mnd", description);
    Diagnostics diags;
    auto model = parse_description(src, diags);
    EXPECT_TRUE(model.has_value()) << diags.render();
    if (!model) return {false, diags.render()};
    CheckOptions opts;
    opts.precision = p;
    bool ok = check_model(*model, src, opts, diags);
    EXPECT_EQ(ok, diags.ok());
    return {ok, diags.render()};
}

// Accepted with no diagnostic at all.
void expect_clean(const Result& r) {
    EXPECT_TRUE(r.ok) << r.text;
    EXPECT_EQ(r.text, "");
}

// Accepted (or not) with a diagnostic that contains `part`.
void expect_mentions(const Result& r, bool ok, const std::string& part) {
    EXPECT_EQ(r.ok, ok) << r.text;
    EXPECT_NE(r.text.find(part), std::string::npos) << r.text;
}

// A continuous block of width 3 with the given solver lines.
std::string with_solver(const std::string& lines) {
    return "model m\ninput x[3]\ncontinuous c: 3, t in [0, 1] {\n  dense f: 3 + t -> 3, tanh\n" + lines + "}\noutput y[3]\n";
}

TEST(Check, CleanModelHasNoDiagnostics) {
    Result r = check(
        "model orchard\ninput leaf[4]\ndense lift: 4 -> 6, relu\n"
        "continuous grow: 6, t in [0, 1] {\n  augment 2\n  dense f1: 8 + t -> 10, softplus\n  dense f2: 10 -> 8\n"
        "  solver rk4, steps 6\n}\n"
        "residual tidy: 8 {\n  dense r1: 8 -> 8, tanh\n  residual deeper: 8 {\n    dense r2: 8 -> 8\n  }\n}\n"
        "dense head: 8 -> 2, softmax\noutput kind[2]\n");
    expect_clean(r);
}

TEST(Check, AdaptiveSolverWithAllOptions) {
    Result r = check(with_solver("  solver tsitouras, rtol 1e-3, atol 1e-6, max-steps 100, first-step 0.01, controller pi, "
                                 "safety 0.8, min-factor 0.25, max-factor 5, pi-alpha 0.6, pi-beta 0.3\n"));
    expect_clean(r);
}

TEST(Check, Float32RtolFloorIsAWarning) {
    // sqrt(FLT_EPSILON) = 3.4526698e-4 > 1e-4 >= 100 * FLT_EPSILON = 1.1920929e-5
    ASSERT_GT(std::sqrt(static_cast<double>(FLT_EPSILON)), 1e-4);
    ASSERT_LT(100 * static_cast<double>(FLT_EPSILON), 1e-4);
    Result r = check(with_solver("  solver dormand-prince, rtol 1e-4, atol 1e-7, max-steps 64\n"));
    EXPECT_TRUE(r.ok);
    EXPECT_EQ(r.text,
              "m.mnd:5:10: warning: solver line of continuous 'c': rtol 1e-4 is below sqrt(float32 epsilon) = 3.45e-4; "
              "the error control may not reach it in float32\n"
              "  solver dormand-prince, rtol 1e-4, atol 1e-7, max-steps 64\n"
              "         ^\n");
}

TEST(Check, Float64AcceptsTighterRtol) {
    Result r = check(with_solver("  solver dormand-prince, rtol 1e-10, atol 1e-12, max-steps 500\n"), Precision::float64);
    expect_clean(r);
    // 100 * DBL_EPSILON = 2.22e-14 > 1e-14
    ASSERT_GT(100 * DBL_EPSILON, 1e-14);
    Result tight = check(with_solver("  solver dormand-prince, rtol 1e-14, atol 1e-12, max-steps 500\n"), Precision::float64);
    EXPECT_FALSE(tight.ok);
    EXPECT_EQ(tight.text,
              "m.mnd:5:10: error: solver line of continuous 'c': rtol 1e-14 is below what float64 arithmetic can deliver "
              "(100 x epsilon = 2.22e-14)\n"
              "  solver dormand-prince, rtol 1e-14, atol 1e-12, max-steps 500\n"
              "         ^\n");
}

TEST(Check, Float32RtolBelowHundredEpsilonIsAnError) {
    Result r = check(with_solver("  solver bogacki-shampine, rtol 1e-5, atol 1e-6, max-steps 64\n"));
    expect_mentions(r, false,
                    "error: solver line of continuous 'c': rtol 1e-5 is below what float32 arithmetic can deliver "
                    "(100 x epsilon = 1.19e-5)");
}

TEST(Check, TrainedWithAnotherSolverWarns) {
    Result r = check(with_solver("  solver rk4, steps 8\n  trained-with rk38, steps 8\n"));
    EXPECT_TRUE(r.ok);
    EXPECT_EQ(r.text,
              "m.mnd:5:10: warning: block 'c' is deployed with rk4, steps 8 but was trained with rk38, steps 8; "
              "a model can lose accuracy under another discretisation (Ott et al., ICLR 2021)\n"
              "  solver rk4, steps 8\n"
              "         ^\n");
}

TEST(Check, TrainedWithOtherSettingsWarns) {
    Result r = check(with_solver("  solver dormand-prince, rtol 1e-3, atol 1e-6, max-steps 50\n"
                                 "  trained-with dormand-prince, rtol 1e-3, atol 1e-6, max-steps 50, safety 0.8\n"));
    expect_mentions(r, true,
                    "warning: block 'c' is deployed with dormand-prince, rtol 1e-3, atol 1e-6, max-steps 50, controller "
                    "integral, safety 0.9, min-factor 0.2, max-factor 10 but was trained with dormand-prince, rtol 1e-3, "
                    "atol 1e-6, max-steps 50, controller integral, safety 0.8, min-factor 0.2, max-factor 10;");
}

TEST(Check, TrainedWithTheSameSolverIsQuiet) {
    // Writing a default explicitly does not change the discretisation.
    Result r = check(with_solver("  solver dormand-prince, rtol 1e-3, atol 1e-6, max-steps 50\n"
                                 "  trained-with dormand-prince, max-steps 50, atol 1e-6, rtol 1e-3, safety 0.9\n"));
    expect_clean(r);
}

TEST(Check, TrainedWithFollowsTheSolverRules) {
    Result r = check(with_solver("  solver rk4, steps 8\n  trained-with rk4, steps 0, rtol 1e-3\n"));
    EXPECT_FALSE(r.ok);
    EXPECT_EQ(r.text,
              "m.mnd:6:16: error: trained-with line of continuous 'c': steps must be at least 1, got 0\n"
              "  trained-with rk4, steps 0, rtol 1e-3\n"
              "               ^\n"
              "m.mnd:6:16: error: trained-with line of continuous 'c': fixed-step method 'rk4' takes no 'rtol' option "
              "(it applies to adaptive methods)\n"
              "  trained-with rk4, steps 0, rtol 1e-3\n"
              "               ^\n"
              "m.mnd:5:10: warning: block 'c' is deployed with rk4, steps 8 but was trained with rk4, steps 0, rtol 1e-3; "
              "a model can lose accuracy under another discretisation (Ott et al., ICLR 2021)\n"
              "  solver rk4, steps 8\n"
              "         ^\n");
}

TEST(Check, PiExponentsWithIntegralControllerWarn) {
    Result r = check(with_solver("  solver cash-karp, rtol 1e-3, atol 1e-6, max-steps 50, pi-beta 0.3\n"));
    expect_mentions(r, true,
                    "warning: solver line of continuous 'c': 'pi-beta' has no effect with the integral controller");
}

TEST(Check, EveryFixedStepMethodOfTheTableIsKnown) {
    for (const char* method : {"euler", "midpoint", "heun", "rk4", "rk38"}) {
        Result r = check(with_solver(std::string("  solver ") + method + ", steps 2\n"));
        EXPECT_TRUE(r.ok) << method << "\n" << r.text;
    }
    for (const char* method : {"bogacki-shampine", "dormand-prince", "tsitouras", "cash-karp"}) {
        Result r = check(with_solver(std::string("  solver ") + method + ", rtol 1e-3, atol 1e-6, max-steps 9\n"));
        EXPECT_TRUE(r.ok) << method << "\n" << r.text;
    }
}

// Values the grammar cannot spell (infinities, NaN, negative augment) may still reach
// check_model from a Model built in code.
TEST(Check, NonFiniteNumbersAndNegativeAugment) {
    Source src("m.mnd", with_solver("  solver dormand-prince, rtol 1e-3, atol 1e-6, max-steps 50\n"));
    Diagnostics diags;
    auto model = parse_description(src, diags);
    ASSERT_TRUE(model.has_value()) << diags.render();
    Continuous& c = model->blocks[0].continuous;
    c.t1 = std::numeric_limits<double>::infinity();
    c.solver.atol = std::numeric_limits<double>::quiet_NaN();
    c.augment = -1;
    c.field[0].dense.in = 2;  // keeps the field consistent with the state of width 3 - 1
    c.field[0].dense.out = 2;
    c.field[0].dense.act = Activation::elu;
    c.field[0].dense.act_param = -std::numeric_limits<double>::infinity();
    EXPECT_FALSE(check_model(*model, src, CheckOptions{}, diags));
    std::vector<std::string> messages;
    for (const auto& d : diags.all()) messages.push_back(d.message);
    const std::vector<std::string> expected = {
        "continuous 'c' has augment -1; it must be 0 or more",
        "the end time of continuous 'c' is not finite",
        "the elu parameter of layer 'f' is not finite",
        "solver line of continuous 'c': atol is not finite",
        "solver line of continuous 'c': atol must be greater than 0, got nan",
        "output 'y' has size 3, but continuous 'c' gives 2",
    };
    EXPECT_EQ(messages, expected);
}

TEST(Check, ReportsEveryProblemInOneRun) {
    Result r = check(
        "model m\ninput x[3]\n"
        "continuous c: 3, t in [0, 0] {\n  augment 1\n  dense f: 3 + t -> 3\n"
        "  solver dormand-prince, atol 0, safety 1.5, min-factor 2, max-factor 0.5\n}\n"
        "dense g: 3 + t -> 4\noutput y[4]\n");
    EXPECT_FALSE(r.ok);
    EXPECT_EQ(r.text,
              "m.mnd:3:23: error: continuous 'c' integrates over the empty interval [0, 0]; t0 and t1 must differ\n"
              "continuous c: 3, t in [0, 0] {\n"
              "                      ^\n"
              "m.mnd:5:9: error: layer 'f' takes 3 inputs, but the state of continuous 'c' (3 + augment 1) gives 4\n"
              "  dense f: 3 + t -> 3\n"
              "        ^\n"
              "m.mnd:3:12: error: the field of continuous 'c' must map width 4 (3 + augment 1) to width 4, but ends with "
              "width 3 (layer 'f')\n"
              "continuous c: 3, t in [0, 0] {\n"
              "           ^\n"
              "m.mnd:6:10: error: solver line of continuous 'c': adaptive method 'dormand-prince' needs 'rtol X'\n"
              "  solver dormand-prince, atol 0, safety 1.5, min-factor 2, max-factor 0.5\n"
              "         ^\n"
              "m.mnd:6:10: error: solver line of continuous 'c': atol must be greater than 0, got 0\n"
              "  solver dormand-prince, atol 0, safety 1.5, min-factor 2, max-factor 0.5\n"
              "         ^\n"
              "m.mnd:6:10: error: solver line of continuous 'c': adaptive method 'dormand-prince' needs 'max-steps N': "
              "without a step limit an inference has no time bound\n"
              "  solver dormand-prince, atol 0, safety 1.5, min-factor 2, max-factor 0.5\n"
              "         ^\n"
              "m.mnd:6:10: error: solver line of continuous 'c': safety must lie strictly between 0 and 1, got 1.5\n"
              "  solver dormand-prince, atol 0, safety 1.5, min-factor 2, max-factor 0.5\n"
              "         ^\n"
              "m.mnd:6:10: error: solver line of continuous 'c': min-factor must satisfy 0 < min-factor <= 1, got 2\n"
              "  solver dormand-prince, atol 0, safety 1.5, min-factor 2, max-factor 0.5\n"
              "         ^\n"
              "m.mnd:6:10: error: solver line of continuous 'c': max-factor must be at least 1, got 0.5\n"
              "  solver dormand-prince, atol 0, safety 1.5, min-factor 2, max-factor 0.5\n"
              "         ^\n"
              "m.mnd:8:7: error: layer 'g' takes 3 inputs, but continuous 'c' gives 4\n"
              "dense g: 3 + t -> 4\n"
              "      ^\n"
              "m.mnd:8:7: error: layer 'g' uses '+ t', but time exists only inside a continuous block\n"
              "dense g: 3 + t -> 4\n"
              "      ^\n");
}

// The emitted field-evaluation counters are std::uint32_t (largest value 2^32 - 1 =
// 4294967295). Counts by hand from the tableaux: Dormand-Prince has 7 stages and
// reuses the last (FSAL), so with a first step given it costs 1 + 6 x max-steps; an
// Euler step costs 1.
TEST(Check, FieldEvaluationsJustInsideTheCounters) {
    ASSERT_EQ(1 + 6 * 715827882LL, 4294967293LL);
    expect_clean(check(with_solver("  solver dormand-prince, rtol 1e-3, atol 1e-6, max-steps 715827882, first-step 0.1\n")));
    // 1 + 6 x 715827883 = 4294967299: one step more is refused.
    expect_mentions(check(with_solver("  solver dormand-prince, rtol 1e-3, atol 1e-6, max-steps 715827883, first-step 0.1\n")),
                    false, "up to 4294967299 field evaluations per inference");
    // The model's sum may reach 2^32 - 1 exactly: 4294967293 + 2 Euler steps.
    const std::string two_blocks =
        "model m\ninput x[3]\ncontinuous c: 3, t in [0, 1] {\n  dense f: 3 -> 3\n"
        "  solver dormand-prince, rtol 1e-3, atol 1e-6, max-steps 715827882, first-step 0.1\n}\n"
        "continuous d: 3, t in [0, 1] {\n  dense g: 3 -> 3\n  solver euler, steps ";
    expect_clean(check(two_blocks + "2\n}\noutput y[3]\n"));
    expect_mentions(check(two_blocks + "3\n}\noutput y[3]\n"), false, "together need up to 4294967296 field evaluations");
}

// Widths up to 2^20 = 1048576 pass; 2^20 + 1 is refused.
TEST(Check, WidthsJustInsideTheLimit) {
    // Narrow layers between the wide ones keep the parameter count within the
    // emitted 32-bit constant (ParameterCountMustFitTheEmittedConstant).
    expect_clean(check("model m\ninput x[1048576]\ndense a: 1048576 -> 1\ndense b: 1 -> 1048576\n"
                       "dense c: 1048576 -> 1\noutput y[1]\n"));
    expect_clean(check("model m\ninput x[4]\ncontinuous c: 4, t in [0, 1] {\n  augment 1048572\n"
                       "  dense f: 1048576 -> 1\n  dense g: 1 -> 1048576\n  solver rk4, steps 2\n}\n"
                       "dense h: 1048576 -> 2\noutput y[2]\n"));
    expect_clean(check("model m\ninput x[1048576]\nresidual r: 1048576 {\n  dense a: 1048576 -> 1\n"
                       "  dense b: 1 -> 1048576\n}\ndense c: 1048576 -> 1\noutput y[1]\n"));
    expect_mentions(check("model m\ninput x[1048577]\ndense a: 1048577 -> 1\noutput y[1]\n"), false,
                    "input 'x' has size 1048577; sizes must be at most 1048576");
    expect_mentions(check("model m\ninput x[4]\nresidual r: 1048577 {\n  dense a: 1048577 -> 1048577\n}\noutput y[4]\n"), false,
                    "residual 'r' has width 1048577; widths must be at most 1048576");
}

// A state too wide for int is reported once; the field is not compared against it.
TEST(Check, HugeAugmentIsOneError) {
    Result r = check("model m\ninput x[4]\ncontinuous c: 4, t in [0, 1] {\n  augment 2147483647\n"
                     "  dense f: 4 -> 4\n  solver rk4, steps 2\n}\noutput y[4]\n");
    EXPECT_FALSE(r.ok);
    EXPECT_EQ(r.text,
              "m.mnd:3:12: error: continuous 'c' has augment 2147483647; it must be at most 1048576\n"
              "continuous c: 4, t in [0, 1] {\n"
              "           ^\n");
}

// Interval limits in float32: FLT_MAX = 3.4028234663852886e38 (<cfloat>); the float
// next to 1 is 1 + 2^-23 = 1.00000011920928955 (FLT_EPSILON).
TEST(Check, IntervalsJustInsideFloat32) {
    auto block = [](const std::string& interval) {
        return "model m\ninput x[3]\ncontinuous c: 3, t in " + interval +
               " {\n  dense f: 3 -> 3\n  solver rk4, steps 2\n}\noutput y[3]\n";
    };
    ASSERT_EQ(static_cast<double>(FLT_MAX), 3.4028234663852886e38);
    ASSERT_NE(static_cast<float>(1.0000001), 1.0f);
    ASSERT_EQ(static_cast<float>(1.00000001), 1.0f);
    expect_clean(check(block("[1, 1.0000001]")));
    expect_clean(check(block("[0, 3.4028234663852886e38]")));
    expect_clean(check(block("[-1.7e38, 1.7e38]")));  // length 3.4e38 < FLT_MAX
    expect_mentions(check(block("[0, 3.402823466385289e38]")), false, "the end time 3.402823466385289e38 is beyond");
    // float64 keeps what float32 cannot tell apart, and lengths up to DBL_MAX.
    expect_clean(check(block("[1e300, 1.0000000000000002e300]"), Precision::float64));
    expect_clean(check(block("[1, 1.00000001]"), Precision::float64));
    expect_clean(check(block("[-8e307, 8e307]"), Precision::float64));
    expect_mentions(check(block("[-1e308, 1e308]"), Precision::float64), false,
                    "whose length t1 - t0 is not finite in float64");
}

// Every class of refused model name, and names close to them that are fine.
TEST(Check, ModelNamesOfTheCLibrary) {
    auto named = [](const std::string& n) { return check("model " + n + "\ninput x[2]\ndense a: 2 -> 2\noutput y[2]\n"); };
    for (const char* n : {"HUGE_VALF", "FP_SUBNORMAL", "math_errhandling", "M_PI", "NULL", "INT8_MIN", "UINT64_MAX",
                          "INT_FAST32_MIN", "UINTPTR_MAX", "INTMAX_C", "SIZE_MAX", "PTRDIFF_MIN", "INT_MAX", "ULLONG_MAX"})
        expect_mentions(named(n), false, "is a macro of the C library");
    for (const char* n : {"uint8_t", "int_least64_t", "uintmax_t", "size_t", "nullptr_t", "float_t", "byte"})
        expect_mentions(named(n), false, "is a type of the C library");
    for (const char* n : {"sin", "cosf", "tanhl", "sqrt", "fmax", "nextafterf", "log1p", "signbit", "isunordered", "abs"})
        expect_mentions(named(n), false, "is a function of the C library");
    expect_mentions(named("pump_t"), false, "names ending in '_t' are reserved for types by POSIX");
    for (const char* n : {"sine", "int32", "INT8", "INT8_MAXIMUM", "UINT128_MAX", "M_PIE", "logs", "sqrt_pump", "t", "pump_t1"})
        expect_clean(named(n));
}

// The emitted header's uint32 constants: parameters 70000 x 70001 = 4900070000
// > 2^32 - 1 = 4294967295; 65535 x 65535 + 65535 = 4294901760 fits.
TEST(Check, ParameterCountMustFitTheEmittedConstant) {
    expect_mentions(check("model m\ninput x[70000]\ndense a: 70000 -> 70000\noutput y[70000]\n"), false,
                    "model 'm' has 4900070000 parameters, more than the emitted 32-bit constant holds (4294967295)");
    expect_clean(check("model m\ninput x[65535]\ndense a: 65535 -> 65535, no-bias\ndense b: 65535 -> 1, no-bias\n"
                       "output y[1]\n"));
}

}  // namespace
}  // namespace meander
