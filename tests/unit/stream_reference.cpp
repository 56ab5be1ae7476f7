// Streaming models against outside references (tests/scipy/stream_reference.py,
// run live when /usr/bin/python3 has NumPy, SciPy and PyTorch, else read from the
// committed tests/data/stream_reference.json):
// - the gated layer against PyTorch's nn.GRUCell;
// - the blend against the closed-form cell's formula (Hasani et al. 2022, eq. 10) in NumPy;
// - a whole ODE-RNN sequence against SciPy's solve_ivp (DOP853, rtol = atol = 1e-12) over
//   each gap, with the GRU update and the readout in NumPy.
// And one check against meander's own fixed-interval continuous block (already
// checked against SciPy and Boost.Odeint): over a constant gap the evolution is
// that block.

#include <gtest/gtest.h>

#include <fmt/format.h>

#include <cstdio>
#include <cstdlib>
#include <fstream>
#include <nlohmann/json.hpp>
#include <optional>
#include <string>
#include <unistd.h>

#include "compiler/check.hpp"
#include "compiler/parse.hpp"
#include "compiler/sequence.hpp"
#include "compiler/weights.hpp"
#include "runtime/stream.hpp"

namespace {

using nlohmann::json;
using namespace meander;

const std::string kCommitted = std::string(MEANDER_SOURCE_DIR) + "/tests/data/stream_reference.json";
const std::string kScript = std::string(MEANDER_SOURCE_DIR) + "/tests/scipy/stream_reference.py";

json read_json(const std::string& path) {
    std::ifstream in(path);
    if (!in) return json();
    return json::parse(in, nullptr, /*allow_exceptions=*/false);
}

bool python_has(const char* module) {
    return std::system(fmt::format("\"{}\" -c \"import {}\" > /dev/null 2>&1", MEANDER_SCIPY_PYTHON, module).c_str()) == 0;
}

// Live when NumPy, SciPy and torch are all there (the committed copy was written so), else committed.
const json& reference() {
    static const json doc = []() {
        if (python_has("scipy.integrate") && python_has("torch")) {
            const std::string live = fmt::format("{}/stream_reference_live.{}.json", MEANDER_BINARY_DIR, ::getpid());
            const std::string cmd = fmt::format("\"{}\" \"{}\" --out \"{}\"", MEANDER_SCIPY_PYTHON, kScript, live);
            if (std::system(cmd.c_str()) != 0) return json();
            json d = read_json(live);
            std::remove(live.c_str());
            return d;
        }
        return read_json(kCommitted);
    }();
    return doc;
}

TensorSet tensors_of(const json& part, const std::string& prefix = "") {
    TensorSet set;
    set.path = "reference";
    for (const auto& [name, t] : part["tensors"].items()) {
        Tensor tensor;
        tensor.name = prefix + name;
        for (const auto& d : t["shape"]) tensor.shape.push_back(d.get<std::size_t>());
        tensor.values = t["values"].get<std::vector<double>>();
        tensor.dtype = "float64";
        set.tensors.push_back(std::move(tensor));
    }
    return set;
}

// Layers the check does not look at still need tensors to bind: zeros.
void add_zeros(TensorSet& set, const std::string& name, std::vector<std::size_t> shape) {
    std::size_t n = 1;
    for (std::size_t d : shape) n *= d;
    set.tensors.push_back(Tensor{name, std::move(shape), std::vector<double>(n, 0.0), "float64"});
}

Eigen::VectorXd vec(const json& j) {
    const auto v = j.get<std::vector<double>>();
    return Eigen::Map<const Eigen::VectorXd>(v.data(), static_cast<Eigen::Index>(v.size()));
}

// A description parsed, checked (float64) and bound.
std::optional<Model> load(const std::string& text, const TensorSet& set) {
    Source src("stream.mnd", text);
    Diagnostics diags;
    auto model = parse_description(src, diags);
    if (model) {
        CheckOptions opts;
        opts.precision = Precision::float64;
        if (!check_model(*model, src, opts, diags) || !bind_weights(*model, src, set, diags)) model.reset();
    }
    EXPECT_TRUE(diags.ok()) << diags.render();
    return model;
}

double max_abs_diff(const Eigen::VectorXd& a, const Eigen::VectorXd& b) {
    return a.size() == b.size() ? (a - b).cwiseAbs().maxCoeff() : 1e300;
}

TEST(StreamReference, GatedLayerIsPyTorchGRUCell) {
    const json& doc = reference();
    if (!doc.contains("gru")) GTEST_SKIP() << "no PyTorch reference (neither live nor committed)";
    const json& part = doc["gru"];
    // PyTorch's own tensor names (weight_ih, weight_hh, bias_ih, bias_hh) under a module prefix.
    TensorSet set = tensors_of(part, "rnn.");
    add_zeros(set, "f.weight", {5, 5});
    add_zeros(set, "f.bias", {5});
    auto model = load("model g\ninput x[3]\nstate h[5], largest-gap 1\ncontinuous e: 5, t in [0, gap] {\n"
                      "  dense f: 5 -> 5\n  solver euler, steps-per-unit 1\n}\ngated cell: 3 -> 5, from \"rnn\"\noutput y[5]\n",
                      set);
    ASSERT_TRUE(model);
    const Dense& ih = model->stream->update_layers[0].dense;
    const Dense& hh = model->stream->update_layers[1].dense;
    int n = 0;
    for (const json& c : part["cases"]) {
        Eigen::VectorXd h = vec(c["h"]);
        gated_update(ih, hh, vec(c["x"]), h);
        EXPECT_LE(max_abs_diff(h, vec(c["h_next"])), 1e-14) << part["source"] << ", case " << n;
        ++n;
    }
    EXPECT_EQ(n, 4);
}

TEST(StreamReference, BlendIsTheClosedFormCell) {
    const json& part = reference()["blend"];
    TensorSet set = tensors_of(part);
    add_zeros(set, "u.weight", {4, 6});
    add_zeros(set, "u.bias", {4});
    auto model = load("model c\ninput x[2]\nstate h[4], largest-gap 5\nblend cell: 4 {\n  dense b1: 4 -> 8, tanh\n"
                      "  dense rate: 8 -> 4\n  dense start: 8 -> 4, tanh\n  dense end: 8 -> 4, tanh\n}\n"
                      "merge u: 4 + 2 -> 4\noutput y[4]\n",
                      set);
    ASSERT_TRUE(model);
    int n = 0;
    for (const json& c : part["cases"]) {
        Eigen::VectorXd h = vec(c["h"]);
        blend_evolve(model->stream->evolve, c["gap"].get<double>(), h);
        EXPECT_LE(max_abs_diff(h, vec(c["h_next"])), 1e-14) << part["source"] << ", gap " << c["gap"];
        ++n;
    }
    EXPECT_EQ(n, 4);
}

// The ODE-RNN of the reference with the solver line `solver`.
std::string odernn(const std::string& solver) {
    return "model ode\ninput x[3]\nstate h[4], largest-gap 2\ncontinuous drift: 4, t in [0, gap] {\n"
           "  dense f1: 4 -> 8, tanh\n  dense f2: 8 -> 4\n  solver " + solver + "\n}\ngated cell: 3 -> 4\n"
           "dense head: 4 -> 2\noutput y[2]\n";
}

std::vector<SequenceRow> rows_of(const json& part) {
    std::vector<SequenceRow> rows;
    std::string last;
    for (const json& r : part["rows"]) {
        SequenceRow row;
        row.id = r["sequence"].get<std::string>();
        row.time = r["time"].get<double>();
        row.gap = r["gap"].get<double>();
        row.first = row.id != last;
        row.values = r["x"].get<std::vector<double>>();
        last = row.id;
        rows.push_back(std::move(row));
    }
    return rows;
}

void expect_sequence(const std::string& solver, double tol) {
    const json& part = reference()["odernn"];
    auto model = load(odernn(solver), tensors_of(part));
    ASSERT_TRUE(model);
    const auto rows = rows_of(part);
    const auto results = evaluate_sequences(*model, rows);
    ASSERT_EQ(results.size(), part["rows"].size());
    ASSERT_EQ(results.size(), 11u);
    for (std::size_t i = 0; i < results.size(); ++i) {
        ASSERT_EQ(results[i].status, EvalStatus::ok) << "row " << i;
        EXPECT_LE(max_abs_diff(results[i].output, vec(part["rows"][i]["y"])), tol) << part["source"] << ", row " << i;
    }
}

TEST(StreamReference, OdeRnnSequenceAgreesWithSolveIvpAdaptive) {
    expect_sequence("dormand-prince, rtol 1e-11, atol 1e-13, max-steps 100000", 1e-9);
}

TEST(StreamReference, OdeRnnSequenceAgreesWithSolveIvpFixedStep) {
    // RK4 at 400 steps per unit: local error O(h^5) with h = 1/400.
    expect_sequence("rk4, steps-per-unit 400", 1e-9);
}

// Over a constant gap of 0.5 with 4 steps per unit, each evolution is exactly the
// fixed-interval block over [0, 0.5] with 2 steps: same steps, same arithmetic.
TEST(StreamReference, ConstantGapIsTheFixedIntervalBlock) {
    const json& part = reference()["odernn"];
    auto model = load(odernn("rk4, steps-per-unit 4"), tensors_of(part));
    TensorSet fixed_set = tensors_of(part);
    auto fixed = load("model fixed\ninput h[4]\ncontinuous drift: 4, t in [0, 0.5] {\n  dense f1: 4 -> 8, tanh\n"
                      "  dense f2: 8 -> 4\n  solver rk4, steps 2\n}\noutput y[4]\n",
                      [&] {
                          TensorSet s;
                          for (const Tensor& t : fixed_set.tensors)
                              if (t.name.rfind("f", 0) == 0) s.tensors.push_back(t);
                          return s;
                      }());
    ASSERT_TRUE(model && fixed);
    const Dense& ih = model->stream->update_layers[0].dense;
    const Dense& hh = model->stream->update_layers[1].dense;
    Eigen::VectorXd state = Eigen::VectorXd::Zero(4);
    Eigen::VectorXd h = state;
    for (int k = 0; k < 6; ++k) {
        const Eigen::VectorXd x = vec(part["rows"][k]["x"]);
        const double gap = k == 0 ? 0.0 : 0.5;
        EvalResult r = observe(*model, state, x, gap);
        ASSERT_EQ(r.status, EvalStatus::ok);
        if (k > 0) h = evaluate(*fixed, h).output;
        gated_update(ih, hh, x, h);
        for (Eigen::Index i = 0; i < 4; ++i) EXPECT_EQ(state[i], h[i]) << "observation " << k << ", state " << i;
        EXPECT_EQ(r.stats.field_evals, k == 0 ? 0 : 8);  // 2 RK4 steps of 4 stages
    }
}

}  // namespace
