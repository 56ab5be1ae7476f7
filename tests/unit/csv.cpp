// CSV input a person can fix: one diagnostic per distinct problem with a count
// of the rows like it, a wrong separator named, subnormal numbers and
// everything eval writes read back, a header checked against the input's name,
// and `eval --keep-going`.
// Expected numbers come from outside the reader: IEEE 754 binary64 facts
// (std::numeric_limits, the compiler's own reading of decimal literals) and the
// sample's expected.csv (samples/check_expected.py, an independent NumPy
// forward pass); diagnostics are the texts meander promises (grammar/LANGUAGE.md
// and README).
#include <gtest/gtest.h>

#include <cmath>
#include <cstring>
#include <filesystem>
#include <limits>
#include <sstream>
#include <utility>

#include "compiler/sequence.hpp"
#include "compiler/source.hpp"
#include "test_support.hpp"

namespace fs = std::filesystem;
using namespace meander;

namespace {

fs::path scratch(const std::string& name) { return test::scratch_dir("test_csv", name); }

// The diagnostics of reading `text` as rows of `width`, rendered, with the path shortened to "in.csv".
std::string problems(const std::string& name, const std::string& text, int width, std::string_view vector = {},
                     const VectorInfo* info = nullptr, std::string_view role = "input") {
    const fs::path dir = scratch(name);
    test::write_text(dir / "in.csv", text);
    Diagnostics d;
    std::vector<int> lines;
    EXPECT_FALSE(read_csv_rows((dir / "in.csv").string(), width, d, false, &lines, vector, info, role));
    std::string out = d.render();
    const std::string path = (dir / "in.csv").string();
    for (std::size_t at; (at = out.find(path)) != std::string::npos;) out.replace(at, path.size(), "in.csv");
    return out;
}

std::uint64_t bits(double v) {
    std::uint64_t b;
    std::memcpy(&b, &v, sizeof b);
    return b;
}

TEST(CsvNumbers, SubnormalsReadAsThemselves) {
    const fs::path dir = scratch("subnormal");
    test::write_text(dir / "in.csv", "a,b,c,d,e\n5e-324,-5e-324,1e-310,2.2250738585072009e-308,1e-400\n");
    Diagnostics d;
    auto rows = read_csv_rows((dir / "in.csv").string(), 5, d);
    ASSERT_TRUE(rows) << d.render();
    const auto& r = (*rows)[0];
    EXPECT_EQ(r[0], std::numeric_limits<double>::denorm_min());   // IEEE 754: 2^-1074 is the least subnormal
    EXPECT_EQ(r[1], -std::numeric_limits<double>::denorm_min());
    EXPECT_EQ(r[2], 1e-310);                                      // the compiler's rounding of the literal
    EXPECT_EQ(r[3], 2.2250738585072009e-308);                     // the largest subnormal
    EXPECT_LT(r[3], std::numeric_limits<double>::min());
    EXPECT_EQ(bits(r[4]), bits(0.0));                             // below half the least subnormal: rounds to +0
}

// Whatever format_double writes (eval's outputs), parse_number reads back to the same bits.
TEST(CsvNumbers, EverythingEvalWritesReadsBack) {
    const double values[] = {0.1,
                             -0.0,
                             std::numeric_limits<double>::denorm_min(),
                             std::numeric_limits<double>::min(),
                             std::numeric_limits<double>::max(),
                             -std::numeric_limits<double>::max(),
                             std::numeric_limits<double>::infinity(),
                             -std::numeric_limits<double>::infinity(),
                             1.0 / 3.0};
    for (double v : values) {
        double back = 0;
        ASSERT_TRUE(parse_number(format_double(v), back)) << format_double(v);
        EXPECT_EQ(bits(back), bits(v)) << format_double(v);
    }
    for (double v : {std::numeric_limits<double>::quiet_NaN(), -std::numeric_limits<double>::quiet_NaN()}) {
        double back = 0;
        ASSERT_TRUE(parse_number(format_double(v), back)) << format_double(v);
        EXPECT_TRUE(std::isnan(back)) << format_double(v);
    }
}

TEST(CsvProblems, OverflowIsNamed) {
    EXPECT_EQ(problems("overflow", "1,2\n1e400,2\n", 2),
              "in.csv:2:1: error: 1e400 in column 1 is beyond the range of a double\n1e400,2\n^\n");
}

TEST(CsvProblems, SemicolonsAreNamedOnceWithACount) {
    EXPECT_EQ(problems("semicolon", "a;b;c\n1,5;2;3\n4;5;6\n7;8;9\n", 3),
              "in.csv:1:1: error: the values are separated by semicolons (';'), not commas: meander reads comma-separated "
              "values (and 3 more rows like it, the last on line 4)\na;b;c\n^\n");
    // Decimal commas are the usual reason; the message then says which decimal point is read.
    EXPECT_EQ(problems("decimal-comma", "1,5;2,25\n", 2),
              "in.csv:1:1: error: the values are separated by semicolons (';'), not commas: meander reads comma-separated "
              "values with '.' as the decimal point\n1,5;2,25\n^\n");
}

TEST(CsvProblems, TabsAreNamed) {
    EXPECT_EQ(problems("tab", "1\t2\n3\t4\n", 2),
              "in.csv:1:1: error: the values are separated by tabs, not commas: meander reads comma-separated values (and 1 "
              "more row like it, the last on line 2)\n1\t2\n^\n");
}

TEST(CsvProblems, OneDiagnosticPerDistinctProblem) {
    std::string text = "a,b,c\n";
    for (int i = 0; i < 40; ++i) text += "1,2\n";      // lines 2-41: too few values
    text += "1,x,3\n1,y,3\n1,2,3,4\n1,,3\n";           // lines 42-45
    EXPECT_EQ(problems("grouped", text, 3),
              "in.csv:2:1: error: row has 2 values, expected 3 (and 39 more rows like it, the last on line 41)\n1,2\n^\n"
              "in.csv:42:3: error: expected a number in column 2, not 'x' (and 1 more row like it, the last on line 43)\n"
              "1,x,3\n  ^\n"
              "in.csv:44:1: error: row has 4 values, expected 3\n1,2,3,4\n^\n"
              "in.csv:45:3: error: column 2 is empty: expected a number\n1,,3\n  ^\n");
}

TEST(CsvProblems, HeaderIsCheckedAgainstTheInputName) {
    EXPECT_EQ(problems("header-order", "vib.0,vib[2],vib.1\n1,2,3\n", 3, "vib"),
              "in.csv:1:7: error: column 2 is named 'vib[2]', but input 'vib' takes its values in order: column 2 holds "
              "vib.1\nvib.0,vib[2],vib.1\n      ^\n"
              "in.csv:1:14: error: column 3 is named 'vib.1', but input 'vib' takes its values in order: column 3 holds "
              "vib.2\nvib.0,vib[2],vib.1\n             ^\n");
    EXPECT_EQ(problems("header-repeat", "amps,volts,amps\n1,2,3\n", 3),
              "in.csv:1:12: error: column 3 repeats the name 'amps' of column 1\namps,volts,amps\n           ^\n");
    EXPECT_EQ(problems("header-count", "amps,volts\n1,2,3\n", 3),
              "in.csv:1:1: error: header names 2 columns, expected 3\namps,volts\n^\n");
    // Names in order, or names of the user's own, pass.
    const fs::path dir = scratch("header-ok");
    test::write_text(dir / "in.csv", "vib.0,vib.1,rpm\n1,2,3\n");
    Diagnostics d;
    EXPECT_TRUE(read_csv_rows((dir / "in.csv").string(), 3, d, false, nullptr, "vib")) << d.render();
}

// An input with `names [amps in "A", volts in "V", rpm]`.
VectorInfo motor_names() {
    VectorInfo info;
    info.names = {"amps", "volts", "rpm"};
    info.units = {"A", "V", ""};
    return info;
}

TEST(CsvProblems, HeaderIsCheckedAgainstTheDeclaredNames) {
    const VectorInfo info = motor_names();
    // A declared name in another column: where it belongs is named.
    EXPECT_EQ(problems("names-swapped", "amps,rpm,volts\n1,2,3\n", 3, "x", &info),
              "in.csv:1:6: error: column 2 is named 'rpm', but input 'x' takes 'volts' there: 'rpm' is its column 3\n"
              "amps,rpm,volts\n     ^\n"
              "in.csv:1:10: error: column 3 is named 'volts', but input 'x' takes 'rpm' there: 'volts' is its column 2\n"
              "amps,rpm,volts\n         ^\n");
    // A misspelt name: the declared one close to it.
    EXPECT_EQ(problems("names-misspelt", "amps,vlots,rpm\n1,2,3\n", 3, "x", &info),
              "in.csv:1:6: error: column 2 is named 'vlots', but input 'x' takes 'volts' there: did you mean 'volts'?\n"
              "amps,vlots,rpm\n     ^\n");
    // Close to a name of another column, and unknown altogether.
    EXPECT_EQ(problems("names-unknown", "amps,rpn,torque\n1,2,3\n", 3, "x", &info),
              "in.csv:1:6: error: column 2 is named 'rpn', but input 'x' takes 'volts' there, and names no value 'rpn': did "
              "you mean 'rpm' (its column 3)?\namps,rpn,torque\n     ^\n"
              "in.csv:1:10: error: column 3 is named 'torque', but input 'x' takes 'rpm' there, and names no value "
              "'torque'\namps,rpn,torque\n         ^\n");
    // A header of other names altogether: one problem, with the names to write.
    EXPECT_EQ(problems("names-foreign", "a,b,c\n1,2,3\n", 3, "x", &info),
              "in.csv:1:1: error: the header names none of input 'x''s values: it takes amps, volts, rpm, in this order (a "
              "line of other names can stand as a '#' comment)\na,b,c\n^\n");
    // eval's own header form, "name (unit)": a unit other than the declared one is named.
    EXPECT_EQ(problems("names-unit", "amps (mA),volts (V),rpm\n1,2,3\n", 3, "x", &info),
              "in.csv:1:1: error: column 1 gives 'amps' in 'mA', but input 'x' takes it in 'A'\n"
              "amps (mA),volts (V),rpm\n^\n");
    // A repeated name is one problem, not two.
    EXPECT_EQ(problems("names-repeat", "amps,volts,volts\n1,2,3\n", 3, "x", &info),
              "in.csv:1:12: error: column 3 repeats the name 'volts' of column 2\namps,volts,volts\n           ^\n");
    // The declared names, with or without their units (as eval writes them), or the vector's own
    // value names in order, read.
    for (const char* header : {"amps,volts,rpm", "amps (A),volts (V),rpm", " amps , volts (V), rpm", "x.0,x[1],x.2"}) {
        const fs::path dir = scratch("names-ok");
        test::write_text(dir / "in.csv", std::string(header) + "\n1,2,3\n");
        Diagnostics d;
        auto rows = read_csv_rows((dir / "in.csv").string(), 3, d, false, nullptr, "x", &info);
        ASSERT_TRUE(rows) << header << "\n" << d.render();
        EXPECT_EQ((*rows)[0], (std::vector<double>{1, 2, 3}));
    }
    // A vector of one value may be named after the vector.
    VectorInfo one;
    one.names = {"surface"};
    one.units = {"degC"};
    const fs::path dir = scratch("names-one");
    test::write_text(dir / "in.csv", "surface_c\n1\n");
    Diagnostics d;
    EXPECT_TRUE(read_csv_rows((dir / "in.csv").string(), 1, d, false, nullptr, "surface_c", &one)) << d.render();
}

// The output's files (check --expect, --labels) are checked the same way, the output named as such;
// a classifier's output without names is named by its classes.
TEST(CsvProblems, OutputHeaderIsCheckedAgainstTheDeclaredNames) {
    const auto output_problems = [](const std::string& name, const std::string& text, const VectorInfo& info) {
        return problems(name, text, 3, "y", &info, "output");
    };
    const VectorInfo info = motor_names();
    EXPECT_EQ(output_problems("output-swapped", "amps,rpm,volts\n1,2,3\n", info),
              "in.csv:1:6: error: column 2 is named 'rpm', but output 'y' takes 'volts' there: 'rpm' is its column 3\n"
              "amps,rpm,volts\n     ^\n"
              "in.csv:1:10: error: column 3 is named 'volts', but output 'y' takes 'rpm' there: 'volts' is its column 2\n"
              "amps,rpm,volts\n         ^\n");
    EXPECT_EQ(output_problems("output-misspelt", "amps (A),vlots,rpm\n1,2,3\n", info),
              "in.csv:1:10: error: column 2 is named 'vlots', but output 'y' takes 'volts' there: did you mean 'volts'?\n"
              "amps (A),vlots,rpm\n         ^\n");
    EXPECT_EQ(output_problems("output-foreign", "a,b,c\n1,2,3\n", info),
              "in.csv:1:1: error: the header names none of output 'y''s values: it takes amps, volts, rpm, in this order (a "
              "line of other names can stand as a '#' comment)\na,b,c\n^\n");
    EXPECT_EQ(output_problems("output-order", "y.0,y.2,y.1\n1,2,3\n", info),
              "in.csv:1:5: error: column 2 is named 'y.2', but output 'y' takes its values in order: column 2 holds y.1\n"
              "y.0,y.2,y.1\n    ^\n"
              "in.csv:1:9: error: column 3 is named 'y.1', but output 'y' takes its values in order: column 3 holds y.2\n"
              "y.0,y.2,y.1\n        ^\n");
    VectorInfo classes;
    classes.classes = {"idle", "worn", "broken"};
    EXPECT_EQ(output_problems("output-classes", "idle,broken,worn\n0.5,0.25,0.25\n", classes),
              "in.csv:1:6: error: column 2 is named 'broken', but output 'y' takes 'worn' there: 'broken' is its column 3\n"
              "idle,broken,worn\n     ^\n"
              "in.csv:1:13: error: column 3 is named 'worn', but output 'y' takes 'broken' there: 'worn' is its column 2\n"
              "idle,broken,worn\n            ^\n");
    // In order they read.
    for (const auto& [header, vinfo] : {std::pair<std::string, const VectorInfo*>{"amps (A),volts,rpm", &info},
                                        {"idle,worn,broken", &classes}}) {
        const fs::path dir = scratch("output-ok");
        test::write_text(dir / "in.csv", header + "\n1,2,3\n");
        Diagnostics d;
        EXPECT_TRUE(read_csv_rows((dir / "in.csv").string(), 3, d, false, nullptr, "y", vinfo, "output")) << header << "\n"
                                                                                                            << d.render();
    }
}

// A streaming model's sequence file: the id and time columns are free, the observation's are checked.
TEST(CsvProblems, SequenceHeaderIsCheckedAgainstTheDeclaredNames) {
    const VectorInfo info = motor_names();
    const fs::path dir = scratch("sequence-names");
    test::write_text(dir / "in.csv", "trip,hour,amps,rpm,volts\na,0,1,2,3\na,1,1,2,3\n");
    Diagnostics d;
    EXPECT_FALSE(read_sequence_file((dir / "in.csv").string(), 3, 4.0, d, false, "x", &info));
    std::string out = d.render();
    const std::string path = (dir / "in.csv").string();
    for (std::size_t at; (at = out.find(path)) != std::string::npos;) out.replace(at, path.size(), "in.csv");
    EXPECT_EQ(out,
              "in.csv:1:16: error: column 4 is named 'rpm', but input 'x' takes 'volts' there: 'rpm' is its column 5\n"
              "trip,hour,amps,rpm,volts\n               ^\n"
              "in.csv:1:20: error: column 5 is named 'volts', but input 'x' takes 'rpm' there: 'volts' is its column 4\n"
              "trip,hour,amps,rpm,volts\n                   ^\n");
    test::write_text(dir / "in.csv", "trip,hour,amps (A),volts,rpm\na,0,1,2,3\na,1,1,2,3\n");
    Diagnostics ok;
    EXPECT_TRUE(read_sequence_file((dir / "in.csv").string(), 3, 4.0, ok, false, "x", &info)) << ok.render();
}

// Through the binary: eval's output of one model, fed back as the input of a model whose input
// takes those names, reads; in another order it is refused with exit status 1.
TEST(CsvProblems, EvalOutputFeedsAModelThatTakesItsNames) {
    const fs::path sample = fs::path(MEANDER_SOURCE_DIR) / "samples" / "soil_probe";
    const fs::path dir = scratch("eval-feeds");
    const auto first = test::run(std::string(MEANDER_BINARY) + " eval " + (sample / "soil_probe.mnd").string() + " --input " +
                                 (sample / "inputs.csv").string() + " --output " + (dir / "estimate.csv").string());
    ASSERT_EQ(first.status, 0) << first.output;
    ASSERT_EQ(test::read_text(dir / "estimate.csv").substr(0, 33), "water_pct (%),pore_ec_dsm (dS/m)\n");
    // A model that reads the estimate: its input takes water_pct in % and pore_ec_dsm in dS/m.
    test::write_text(dir / "w.mnw", "meander-weights 1\ntensor d.weight float64 1 2\n1 -1\ntensor d.bias float64 1\n0\n");
    test::write_text(dir / "next.mnd", "model next\nweights \"w.mnw\"\n"
                                       "input estimate[2], names [water_pct in \"%\", pore_ec_dsm in \"dS/m\"]\n"
                                       "dense d: 2 -> 1\noutput y[1]\n");
    const std::string eval = std::string(MEANDER_BINARY) + " eval " + (dir / "next.mnd").string() + " --input ";
    const auto fed = test::run(eval + (dir / "estimate.csv").string());
    EXPECT_EQ(fed.status, 0) << fed.output;
    std::string swapped = test::read_text(dir / "estimate.csv");
    swapped.replace(0, swapped.find('\n'), "pore_ec_dsm (dS/m),water_pct (%)");
    test::write_text(dir / "swapped.csv", swapped);
    const auto refused = test::run(eval + (dir / "swapped.csv").string());
    EXPECT_EQ(refused.status, 1) << refused.output;
    EXPECT_NE(refused.output.find("swapped.csv:1:1: error: column 1 is named 'pore_ec_dsm (dS/m)', but input 'estimate' "
                                  "takes 'water_pct' there: 'pore_ec_dsm' is its column 2"),
              std::string::npos)
        << refused.output;
}

// eval --keep-going on soil_probe's inputs with two rows made non-finite: the other rows
// equal expected.csv, the two carry nan and their result.
TEST(EvalKeepGoing, WritesAResultColumn) {
    const fs::path sample = fs::path(MEANDER_SOURCE_DIR) / "samples" / "soil_probe";
    const fs::path dir = scratch("keep-going");
    std::istringstream in(test::read_text(sample / "inputs.csv"));
    std::string line, text;
    for (int i = 0; std::getline(in, line) && i < 6; ++i) {
        if (i == 2) line = "nan" + line.substr(line.find(','));
        if (i == 4) line = line.substr(0, line.rfind(',')) + ",inf";
        text += line + "\n";
    }
    test::write_text(dir / "in.csv", text);
    const std::string cmd = std::string(MEANDER_BINARY) + " eval " + (sample / "soil_probe.mnd").string() + " --input " +
                            (dir / "in.csv").string();
    const auto failed = test::run(cmd);
    EXPECT_EQ(failed.status, 1);
    EXPECT_NE(failed.output.find(":3:1: error: the model returns input_not_finite for this row (and 1 more row like it, "
                                 "the last on line 5)"),
              std::string::npos)
        << failed.output;

    const auto r = test::run(cmd + " --keep-going --output " + (dir / "out.csv").string());
    EXPECT_EQ(r.status, 0) << r.output;
    EXPECT_NE(r.output.find("warning: 2 of 5 rows did not evaluate: their outputs are nan and the result column says why"),
              std::string::npos)
        << r.output;
    std::istringstream got(test::read_text(dir / "out.csv"));
    std::istringstream want(test::read_text(sample / "expected.csv"));
    std::getline(got, line);
    EXPECT_EQ(line, "water_pct (%),pore_ec_dsm (dS/m),result");  // the description's names and units
    std::getline(want, line);  // its own header
    for (int row = 1; row <= 5; ++row) {
        std::string g, w;
        ASSERT_TRUE(std::getline(got, g));
        ASSERT_TRUE(std::getline(want, w));
        if (row == 2 || row == 4) {
            EXPECT_EQ(g, "nan,nan,input_not_finite");
            continue;
        }
        ASSERT_EQ(g.substr(g.rfind(',')), ",ok") << g;
        double g0 = 0, g1 = 0, w0 = 0, w1 = 0;
        ASSERT_TRUE(parse_number(g.substr(0, g.find(',')), g0));
        ASSERT_TRUE(parse_number(g.substr(g.find(',') + 1, g.rfind(',') - g.find(',') - 1), g1));
        ASSERT_TRUE(parse_number(w.substr(0, w.find(',')), w0));
        ASSERT_TRUE(parse_number(w.substr(w.find(',') + 1), w1));
        EXPECT_NEAR(g0, w0, 1e-9 * std::max(1.0, std::fabs(w0))) << "row " << row;
        EXPECT_NEAR(g1, w1, 1e-9 * std::max(1.0, std::fabs(w1))) << "row " << row;
    }
}

}  // namespace
