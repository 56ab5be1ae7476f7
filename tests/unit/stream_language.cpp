// Streaming models in the language: parse, canonical form, the checks'
// diagnostics, and the sequence file's diagnostics (grammar/LANGUAGE.md,
// "Streaming models" and "Sequence files"). Expected texts are written out
// by hand from those rules.
#include <gtest/gtest.h>

#include <fmt/format.h>

#include <sstream>
#include <string>
#include <vector>

#include "compiler/check.hpp"
#include "compiler/format.hpp"
#include "compiler/parse.hpp"
#include "compiler/sequence.hpp"
#include "compiler/weights.hpp"
#include "runtime/stream.hpp"
#include "test_support.hpp"

namespace meander {
namespace {

const char* kOdeRnn =
    "# Footfall timing (a sketch)\n"
    "model gait\n"
    "weights \"gait.npz\"\n"
    "\n"
    "input step[3]\n"
    "state h[8], largest-gap 4  # zero after a reset\n"
    "continuous drift: 8, t in [0, gap] {\n"
    "  dense f1: 8 -> 16, tanh\n"
    "  dense f2: 16 -> 8\n"
    "  solver rk4, steps-per-unit 8\n"
    "}\n"
    "gated cell: 3 -> 8, from \"rnn.cell\"\n"
    "dense head: 8 -> 2\n"
    "output phase[2]\n";

const char* kBlend =
    "model tap\n"
    "input x[2]\n"
    "state h[4], largest-gap 0.5\n"
    "blend cell: 4 {\n"
    "  dense b1: 4 -> 8, tanh\n"
    "  dense rate: 8 -> 4\n"
    "  dense start: 8 -> 4, tanh\n"
    "  dense end: 8 -> 4, tanh\n"
    "}\n"
    "merge u: 4 + 2 -> 4, tanh, from \"upd\"\n"
    "output y[4]\n";

Diagnostics run(const std::string& text, std::optional<Model>* out = nullptr) {
    test::save_fuzz_seed("description", text);
    Source src("s.mnd", text);
    Diagnostics diags;
    auto model = parse_description(src, diags);
    if (model) check_model(*model, src, CheckOptions{}, diags);
    if (out) *out = std::move(model);
    return diags;
}

std::string first_error(const Diagnostics& diags) {
    for (const auto& d : diags.all())
        if (d.severity == Severity::error) return Diagnostics::render(d);
    return "(no error)";
}

TEST(StreamLanguage, OdeRnnParsesIntoStateEvolutionUpdateReadout) {
    std::optional<Model> m;
    Diagnostics d = run(kOdeRnn, &m);
    ASSERT_TRUE(d.ok()) << d.render();
    ASSERT_TRUE(m && m->stream);
    const Stream& st = *m->stream;
    EXPECT_EQ(st.state_name, "h");
    EXPECT_EQ(st.state_size, 8);
    EXPECT_EQ(st.largest_gap, 4.0);
    EXPECT_TRUE(st.evolve.over_gap);
    EXPECT_FALSE(st.evolve.blend);
    EXPECT_EQ(st.evolve.solver.steps_per_unit, 8.0);
    EXPECT_EQ(st.update, Stream::Update::gated);
    ASSERT_EQ(st.update_layers.size(), 2u);
    EXPECT_EQ(st.update_layers[0].dense.weight_tensor, "rnn.cell.weight_ih");
    EXPECT_EQ(st.update_layers[0].dense.bias_tensor, "rnn.cell.bias_ih");
    EXPECT_EQ(st.update_layers[1].dense.weight_tensor, "rnn.cell.weight_hh");
    EXPECT_EQ(st.update_layers[1].dense.bias_tensor, "rnn.cell.bias_hh");
    EXPECT_EQ(st.update_layers[0].dense.out, 24);
    EXPECT_EQ(st.update_layers[0].dense.in, 3);
    EXPECT_EQ(st.update_layers[1].dense.in, 8);
    ASSERT_EQ(m->blocks.size(), 1u);
    EXPECT_EQ(m->blocks[0].dense.name, "head");
    // 32 RK4 steps of 4 stages at the largest gap
    EXPECT_EQ(worst_evolve_field_evals(st), 128);
}

TEST(StreamLanguage, BlendAndMergeParse) {
    std::optional<Model> m;
    Diagnostics d = run(kBlend, &m);
    ASSERT_TRUE(d.ok()) << d.render();
    ASSERT_TRUE(m && m->stream);
    EXPECT_TRUE(m->stream->evolve.blend);
    EXPECT_EQ(m->stream->evolve.field.size(), 4u);
    EXPECT_EQ(m->stream->update, Stream::Update::merge);
    EXPECT_EQ(m->stream->update_layers[0].dense.in, 6);
    EXPECT_EQ(m->stream->update_layers[0].dense.weight_tensor, "upd.weight");
    EXPECT_EQ(worst_evolve_field_evals(*m->stream), 0);
    EXPECT_TRUE(m->blocks.empty());
}

std::string format_ok(const std::string& text) {
    Source src("f.mnd", text);
    Diagnostics diags;
    auto out = format_description(src, diags);
    EXPECT_TRUE(out.has_value()) << diags.render();
    return out.value_or("");
}

TEST(StreamLanguage, CanonicalFormIsStableAndKeepsComments) {
    EXPECT_EQ(format_ok(kOdeRnn), kOdeRnn);
    EXPECT_EQ(format_ok(kBlend), kBlend);
    EXPECT_EQ(format_ok("model  m\ninput x[1]\nstate   s [ 2 ] ,largest-gap  2.50\ncontinuous e:2,t in[0.0,gap]{\n"
                        "dense f: 2->2\nsolver dormand-prince,rtol 1e-4,atol 1e-6,max-steps 40\n}\n"
                        "merge u:2+1->2,weight \"w\",bias \"b\"\noutput y[2]\n"),
              "model m\ninput x[1]\nstate s[2], largest-gap 2.5\ncontinuous e: 2, t in [0, gap] {\n  dense f: 2 -> 2\n"
              "  solver dormand-prince, rtol 1e-4, atol 1e-6, max-steps 40, controller integral, safety 0.9, min-factor 0.2, "
              "max-factor 10\n}\nmerge u: 2 + 1 -> 2, weight \"w\", bias \"b\"\noutput y[2]\n");
}

struct Row {
    const char* name;
    std::string text;
    const char* first_error;
};

std::string with(std::string text, const std::string& from, const std::string& to) {
    const std::size_t at = text.find(from);
    EXPECT_NE(at, std::string::npos) << from;
    if (at != std::string::npos) text.replace(at, from.size(), to);
    return text;
}

TEST(StreamLanguage, Diagnostics) {
    const std::vector<Row> rows = {
        {"gap interval without a state",
         "model m\ninput x[2]\ncontinuous e: 2, t in [0, gap] {\n  dense f: 2 -> 2\n  solver rk4, steps-per-unit 2\n}\noutput y[2]\n",
         "s.mnd:3:1: error: continuous 'e' evolves over the gap between observations, which needs a 'state' statement before "
         "it (a streaming model)\ncontinuous e: 2, t in [0, gap] {\n^\n"},
        {"state before input",
         "model m\nstate h[2], largest-gap 1\ninput x[2]\noutput y[2]\n",
         "s.mnd:2:1: error: 'state' must come after 'input'\nstate h[2], largest-gap 1\n^\n"},
        {"state without largest-gap",
         "model m\ninput x[2]\nstate h[2]\noutput y[2]\n",
         "s.mnd:4:1: error: expected ','\noutput y[2]\n^\n"},
        {"update before evolution",
         "model m\ninput x[3]\nstate h[2], largest-gap 1\ngated g: 3 -> 2\noutput y[2]\n",
         "s.mnd:4:1: error: 'gated' comes before the evolution; a streaming model evolves over the gap first (a continuous "
         "block over [0, gap] or a blend), then updates\ngated g: 3 -> 2\n^\n"},
        {"no update",
         with(kOdeRnn, "gated cell: 3 -> 8, from \"rnn.cell\"\n", ""),
         "s.mnd:12:1: error: layer 'head' comes before the update of the streaming model; the readout follows the evolution and "
         "the update ('gated' or 'merge')\ndense head: 8 -> 2\n^\n"},
        {"fixed steps over a gap",
         with(kOdeRnn, "steps-per-unit 8", "steps 8"),
         "s.mnd:10:10: error: solver line of continuous 'drift': over a run-time gap a fixed-step method takes "
         "'steps-per-unit X' (steps per unit of time), not 'steps'\n  solver rk4, steps 8\n         ^\n"},
        {"steps-per-unit on a fixed interval",
         "model m\ninput x[2]\ncontinuous e: 2, t in [0, 1] {\n  dense f: 2 -> 2\n  solver rk4, steps-per-unit 2\n}\noutput y[2]\n",
         "s.mnd:5:10: error: solver line of continuous 'e': 'steps-per-unit' applies only to a fixed-step method over a "
         "run-time gap (t in [0, gap])\n  solver rk4, steps-per-unit 2\n         ^\n"},
        {"largest gap zero",
         with(kOdeRnn, "largest-gap 4", "largest-gap 0"),
         "s.mnd:6:25: error: largest-gap must be a finite number above 0, got 0\n"
         "state h[8], largest-gap 0  # zero after a reset\n                        ^\n"},
        {"gated input width",
         with(kOdeRnn, "gated cell: 3 -> 8", "gated cell: 4 -> 8"),
         "s.mnd:12:7: error: gated layer 'cell' takes 4 inputs, but input 'step' gives 3\n"
         "gated cell: 4 -> 8, from \"rnn.cell\"\n      ^\n"},
        {"gated output width",
         with(kOdeRnn, "gated cell: 3 -> 8", "gated cell: 3 -> 6"),
         "s.mnd:12:7: error: gated layer 'cell' gives 6, but state 'h' has width 8\n"
         "gated cell: 3 -> 6, from \"rnn.cell\"\n      ^\n"},
        {"merge observation width",
         with(kBlend, "4 + 2 -> 4", "4 + 3 -> 4"),
         "s.mnd:10:7: error: merge layer 'u' reads 3 observation values, but input 'x' gives 2\n"
         "merge u: 4 + 3 -> 4, tanh, from \"upd\"\n      ^\n"},
        {"blend with two layers",
         with(kBlend, "  dense b1: 4 -> 8, tanh\n  dense rate: 8 -> 4\n", ""),
         "s.mnd:4:7: error: blend 'cell' needs at least three layers: its last three are the heads f, g and k\n"
         "blend cell: 4 {\n      ^\n"},
        {"blend head width",
         with(kBlend, "dense end: 8 -> 4", "dense end: 8 -> 3"),
         "s.mnd:8:9: error: blend 'cell': head k (the end) 'end' gives 3, but the state has width 4\n"
         "  dense end: 8 -> 3, tanh\n        ^\n"},
        {"solver in a blend",
         with(kBlend, "  dense end: 8 -> 4, tanh\n", "  dense end: 8 -> 4, tanh\n  solver rk4, steps 2\n"),
         "s.mnd:9:3: error: 'solver' is not allowed in blend 'cell': the blend is a closed form and needs no solver\n"
         "  solver rk4, steps 2\n  ^\n"},
        {"augment in the evolution",
         with(with(kOdeRnn, "  dense f1: 8 -> 16", "  augment 2\n  dense f1: 10 -> 16"), "dense f2: 16 -> 8", "dense f2: 16 -> 10"),
         "s.mnd:7:12: error: continuous 'drift': augment is not allowed in the evolution of a streaming model (the state "
         "carries no extra dimensions between observations); widen the state instead\n"
         "continuous drift: 8, t in [0, gap] {\n           ^\n"},
        {"second state",
         with(kOdeRnn, "state h[8], largest-gap 4  # zero after a reset\n", "state h[8], largest-gap 4\nstate k[2], largest-gap 1\n"),
         "s.mnd:7:1: error: a second 'state' statement (the first is on line 6)\nstate k[2], largest-gap 1\n^\n"},
        {"evolution not at zero",
         with(kOdeRnn, "[0, gap]", "[1, gap]"),
         "s.mnd:7:27: error: continuous 'drift' runs over [1, gap]; an evolution over the gap starts at 0\n"
         "continuous drift: 8, t in [1, gap] {\n                          ^\n"},
    };
    for (const Row& r : rows) EXPECT_EQ(first_error(run(r.text)), r.first_error) << r.name;
}

// ---- sequence files --------------------------------------------------------

std::string sequence_error(const std::string& text, double largest_gap = 2.0) {
    const auto dir = test::temp_dir("stream_seq");
    const auto path = (dir / "seq.csv").string();
    test::write_text(path, text);
    Diagnostics diags;
    auto rows = read_sequence_file(path, 2, largest_gap, diags);
    std::string out = first_error(diags);
    const std::string prefix = path + ":";
    if (out.compare(0, prefix.size(), prefix) == 0) out = "seq.csv:" + out.substr(prefix.size());
    return out;
}

TEST(StreamLanguage, SequenceFileRows) {
    const auto dir = test::temp_dir("stream_seq_ok");
    const auto path = (dir / "seq.csv").string();
    test::write_text(path, "sequence,time,a,b\n# walk 1\nw1, 0.5, 1, 2\nw1, 1.0, 3, 4\n\nw2, 7, 5, 6\nw2, 9, 7, 8\n");
    Diagnostics diags;
    auto rows = read_sequence_file(path, 2, 2.0, diags);
    ASSERT_TRUE(rows) << diags.render();
    ASSERT_EQ(rows->size(), 4u);
    EXPECT_TRUE((*rows)[0].first);
    EXPECT_EQ((*rows)[0].gap, 0.0);
    EXPECT_FALSE((*rows)[1].first);
    EXPECT_EQ((*rows)[1].gap, 0.5);
    EXPECT_EQ((*rows)[1].line, 4);
    EXPECT_TRUE((*rows)[2].first);
    EXPECT_EQ((*rows)[2].id, "w2");
    EXPECT_EQ((*rows)[3].gap, 2.0);
    EXPECT_EQ((*rows)[3].values, (std::vector<double>{7, 8}));
}

TEST(StreamLanguage, SequenceFileDiagnostics) {
    EXPECT_EQ(sequence_error("a,0,1,2\na,1,3\n"),
              "seq.csv:2:1: error: row has 3 columns, expected 4: a sequence id, a time stamp and 2 observation values\n"
              "a,1,3\n^\n");
    EXPECT_EQ(sequence_error("a,0,1,2\na,nan,3,4\n"), "seq.csv:2:3: error: time stamp nan is not finite\na,nan,3,4\n  ^\n");
    EXPECT_EQ(sequence_error("a,1,1,2\na,0.5,3,4\n"),
              "seq.csv:2:3: error: time goes backwards within sequence 'a': time stamp 0.5 after 1 (line 1)\na,0.5,3,4\n  ^\n");
    EXPECT_EQ(sequence_error("a,1,1,2\na,1,3,4\n"),
              "seq.csv:2:3: error: time stamp 1 repeats the previous row's (line 1); time stamps must increase within a "
              "sequence\na,1,3,4\n  ^\n");
    EXPECT_EQ(sequence_error("a,1,1,2\na,3.5,3,4\n"),
              "seq.csv:2:3: error: gap 2.5 since the previous row (time stamp 3.5 after 1 (line 1)) is larger than the "
              "model's largest gap 2\na,3.5,3,4\n  ^\n");
    EXPECT_EQ(sequence_error("a,0,1,2\nb,0,1,2\na,5,1,2\n"),
              "seq.csv:3:1: error: sequence 'a' returns after another began (its rows start on line 1); the rows of a "
              "sequence must be together\na,5,1,2\n^\n");
    EXPECT_EQ(sequence_error("a,0,1,x\n"), "seq.csv:1:7: error: expected a number in column 4, not 'x'\na,0,1,x\n      ^\n");
    // One diagnostic per distinct problem, with the count of the rows like it; a wrong separator named.
    EXPECT_EQ(sequence_error("a,0,1,2\na,1,3\na,2,3\na,3,3\n"),
              "seq.csv:2:1: error: row has 3 columns, expected 4: a sequence id, a time stamp and 2 observation values (and "
              "2 more rows like it, the last on line 4)\na,1,3\n^\n");
    EXPECT_EQ(sequence_error("id;t;x1;x2\na;0;1;2\na;1;3;4\n"),
              "seq.csv:1:1: error: the values are separated by semicolons (';'), not commas: meander reads comma-separated "
              "values (and 2 more rows like it, the last on line 3)\nid;t;x1;x2\n^\n");
    EXPECT_EQ(sequence_error(",0,1,2\n"), "seq.csv:1:1: error: expected a sequence id\n,0,1,2\n^\n");
}

// eval over a sequence file: one row per observation, the state reset at each new sequence
// (the same first observation gives the same output in every sequence), a bad row named by its line.
TEST(StreamLanguage, EvalReadsASequenceFile) {
    const auto dir = test::temp_dir("stream_eval");
    TensorSet set;
    set.path = "w.mnw";
    auto tensor = [&](const std::string& name, std::vector<std::size_t> shape, std::vector<double> v) {
        set.tensors.push_back(Tensor{name, std::move(shape), std::move(v), "float64"});
    };
    tensor("f.weight", {2, 2}, {-0.5, 0.2, -0.1, -0.3});
    tensor("f.bias", {2}, {0.1, -0.2});
    tensor("u.weight", {2, 3}, {0.9, 0.1, 0.5, -0.2, 0.8, -0.7});
    tensor("u.bias", {2}, {0.0, 0.1});
    test::write_text(dir / "w.mnw", write_listing(set));
    test::write_text(dir / "m.mnd", "model m\nweights \"w.mnw\"\ninput x[1]\nstate h[2], largest-gap 3\n"
                                    "continuous e: 2, t in [0, gap] {\n  dense f: 2 -> 2, tanh\n  solver rk4, steps-per-unit 4\n}\n"
                                    "merge u: 2 + 1 -> 2, tanh\noutput y[2]\n");
    test::write_text(dir / "s.csv", "sequence,time,x\na,0,1\na,0.5,2\nb,10,1\nb,13,2\n");
    const auto r = test::run(fmt::format("{} eval {} --input {}", MEANDER_BINARY, (dir / "m.mnd").string(), (dir / "s.csv").string()));
    ASSERT_EQ(r.status, 0) << r.output;
    std::vector<std::string> lines;
    std::istringstream in(r.output);
    for (std::string l; std::getline(in, l);) lines.push_back(l);
    ASSERT_EQ(lines.size(), 5u) << r.output;
    EXPECT_EQ(lines[0], "y.0,y.1");
    EXPECT_EQ(lines[1], lines[3]);  // reset: same first observation, same output
    EXPECT_NE(lines[2], lines[4]);  // gaps 0.5 and 3 evolve differently
    test::write_text(dir / "bad.csv", "a,0,1\na,4,2\n");
    const auto bad = test::run(fmt::format("{} eval {} --input {}", MEANDER_BINARY, (dir / "m.mnd").string(), (dir / "bad.csv").string()));
    EXPECT_EQ(bad.status, 1);
    EXPECT_NE(bad.output.find("bad.csv:2:3: error: gap 4 since the previous row (time stamp 4 after 0 (line 1)) is larger "
                              "than the model's largest gap 3"), std::string::npos) << bad.output;
    const auto compile = test::run(fmt::format("{} compile {} -o {}", MEANDER_BINARY, (dir / "m.mnd").string(), (dir / "out").string()));
    EXPECT_EQ(compile.status, 0) << compile.output;
    EXPECT_TRUE(std::filesystem::exists(dir / "out" / "m.hpp"));
}

}  // namespace
}  // namespace meander
