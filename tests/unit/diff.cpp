// `meander diff`: pairs of hand-made models with known differences, the
// one-ulp edge of the tolerance, and a sample against an edited copy.
#include "compiler/diff.hpp"

#include <fmt/format.h>
#include <gtest/gtest.h>

#include <cmath>
#include <filesystem>
#include <limits>
#include <nlohmann/json.hpp>
#include <optional>
#include <string>
#include <utility>
#include <vector>

#include "compiler/format.hpp"
#include "compiler/load.hpp"
#include "test_support.hpp"

namespace meander {
namespace {

namespace fs = std::filesystem;
using test::continuous;
using test::dense_block;

// Weights k/8 - 1 and biases -k/16 (exact in float32), different per layer through `seed`.
Dense layer(const std::string& name, int in, int out, Activation act, int seed, bool time_input = false,
            bool has_bias = true) {
    Dense d = test::dense_layer(name, in, out, act, time_input, has_bias);
    d.weight_tensor = name + ".weight";
    d.bias_tensor = has_bias ? name + ".bias" : "";
    d.weight.resize(out, d.in_total());
    for (int i = 0; i < out; ++i)
        for (int j = 0; j < d.in_total(); ++j) d.weight(i, j) = ((i * 5 + j * 3 + seed) % 17) / 8.0 - 1.0;
    d.bias.resize(has_bias ? out : 0);
    for (int i = 0; i < d.bias.size(); ++i) d.bias(i) = -((i + seed) % 7) / 16.0;
    return d;
}

SolverSpec rk4(int steps) {
    SolverSpec s = test::fixed_solver("rk4", steps);
    s.written = {"steps"};
    return s;
}

// input x[3]
// dense lift: 3 -> 5, tanh
// continuous flow: 5, t in [0, 1] { augment 1; dense f1: 6 + t -> 8, softplus; dense f2: 8 -> 6;
//                                   solver rk4, steps 6; trained-with rk4, steps 6 }
// residual polish: 6 { dense r1: 6 -> 6, relu; dense r2: 6 -> 6 }
// dense head: 6 -> 2, leaky-relu 0.01
// output y[2]
Model base() {
    Model m = test::model("tiny", 3, 2);
    m.blocks.push_back(dense_block(layer("lift", 3, 5, Activation::tanh, 1)));
    std::vector<Block> f;
    f.push_back(dense_block(layer("f1", 6, 8, Activation::softplus, 2, true)));
    f.push_back(dense_block(layer("f2", 8, 6, Activation::identity, 3)));
    m.blocks.push_back(continuous("flow", 5, 1, 0.0, 1.0, std::move(f), rk4(6)));
    m.blocks.back().continuous.trained = rk4(6);
    std::vector<Block> body;
    body.push_back(dense_block(layer("r1", 6, 6, Activation::relu, 4)));
    body.push_back(dense_block(layer("r2", 6, 6, Activation::identity, 5)));
    m.blocks.push_back(test::residual("polish", 6, std::move(body)));
    Dense head = layer("head", 6, 2, Activation::leaky_relu, 6);
    head.act_param = 0.01;
    m.blocks.push_back(dense_block(head));
    return m;
}

Continuous& flow(Model& m) { return m.blocks[1].continuous; }
Residual& polish(Model& m) { return m.blocks[2].residual; }
Dense& lift(Model& m) { return m.blocks[0].dense; }
Dense& head(Model& m) { return m.blocks[3].dense; }

ModelDiff diff(const Model& a, const Model& b, double tolerance = 0.0) {
    Diagnostics diags;
    DiffOptions o;
    o.weight_tolerance = tolerance;
    auto d = diff_models(a, b, o, diags);
    EXPECT_TRUE(d.has_value()) << diags.render();
    EXPECT_EQ(diags.render(), "");
    return d ? *d : ModelDiff{};
}

const ItemDiff* item(const ModelDiff& d, const std::string& name) {
    for (const ItemDiff& i : d.items)
        if (i.name == name) return &i;
    return nullptr;
}

std::vector<std::string> changed_names(const ModelDiff& d) {
    std::vector<std::string> out;
    for (const ItemDiff& i : d.items)
        if (i.changed()) out.push_back(i.name);
    return out;
}

using Changes = std::vector<std::pair<std::string, std::pair<std::string, std::string>>>;
Changes settings_of(const ItemDiff& i) {
    Changes out;
    for (const SettingChange& s : i.settings) out.push_back({s.what, {s.before, s.after}});
    return out;
}

TEST(Diff, IdenticalModelsAreTheSameInOneLine) {
    ModelDiff d = diff(base(), base());
    EXPECT_TRUE(d.same());
    EXPECT_TRUE(changed_names(d).empty());
    for (const ItemDiff& i : d.items)
        for (const TensorDiff& t : i.tensors) {
            EXPECT_TRUE(t.bit_identical) << t.name_before;
            EXPECT_EQ(t.changed, 0);
            EXPECT_EQ(t.rel_frobenius, 0.0);
        }
    // Parameters by hand: lift 3*5+5, f1 8*7+8, f2 6*8+6, r1 and r2 6*6+6, head 2*6+2.
    EXPECT_EQ(d.parameters_before, 20 + 64 + 54 + 42 + 42 + 14);
    EXPECT_EQ(d.weight_bytes_after, 236 * 4);
    EXPECT_EQ(render_diff_text(d), "tiny: no changes (236 parameters, weight tolerance 0)\n");
    auto j = nlohmann::json::parse(render_diff_json(d));
    EXPECT_TRUE(j["same"].get<bool>());
    EXPECT_TRUE(j["items"].empty());
}

TEST(Diff, WeightChangesWithTheirLargestAndRelativeSize) {
    Model a = base(), b = base();
    // By construction: two changes in head.weight, the larger (0.5) at row 1, column 3.
    head(b).weight(0, 0) += 0.25;
    head(b).weight(1, 3) += 0.5;
    flow(b).field[1].dense.bias(4) -= 0.125;
    ModelDiff d = diff(a, b);
    EXPECT_FALSE(d.same());
    EXPECT_EQ(changed_names(d), (std::vector<std::string>{"f2", "head"}));
    const ItemDiff* h = item(d, "head");
    ASSERT_NE(h, nullptr);
    EXPECT_TRUE(h->settings.empty());
    ASSERT_EQ(h->tensors.size(), 2u);
    const TensorDiff& w = h->tensors[0];
    EXPECT_EQ(w.role, "weight");
    EXPECT_EQ(w.name_before, "head.weight");
    EXPECT_EQ(w.shape_before, (std::vector<long>{2, 6}));
    EXPECT_EQ(w.values, 12);
    EXPECT_EQ(w.changed, 2);
    EXPECT_FALSE(w.bit_identical);
    EXPECT_EQ(w.max_abs_change, 0.5);
    EXPECT_EQ(w.max_index, (std::vector<long>{1, 3}));
    EXPECT_EQ(w.max_before, head(a).weight(1, 3));
    EXPECT_EQ(w.max_after, head(a).weight(1, 3) + 0.5);
    // Independently: Eigen's Frobenius norm of the difference over that of the original.
    EXPECT_DOUBLE_EQ(w.rel_frobenius, (head(b).weight - head(a).weight).norm() / head(a).weight.norm());
    EXPECT_DOUBLE_EQ(w.rel_frobenius, std::sqrt(0.25 * 0.25 + 0.5 * 0.5) / head(a).weight.norm());
    EXPECT_TRUE(h->tensors[1].bit_identical);
    EXPECT_FALSE(h->tensors[1].reported());

    const ItemDiff* f2 = item(d, "f2");
    ASSERT_NE(f2, nullptr);
    EXPECT_EQ(f2->path_after, "flow/f2");
    const TensorDiff& bias = f2->tensors[1];
    EXPECT_EQ(bias.role, "bias");
    EXPECT_EQ(bias.changed, 1);
    EXPECT_EQ(bias.max_index, (std::vector<long>{4}));
    EXPECT_EQ(bias.max_abs_change, 0.125);
    EXPECT_DOUBLE_EQ(bias.rel_frobenius, 0.125 / flow(a).field[1].dense.bias.norm());
    EXPECT_EQ(d.parameters_before, d.parameters_after);

    const std::string text = render_diff_text(d);
    EXPECT_NE(text.find("tiny: 2 of 8 blocks and layers changed"), std::string::npos) << text;
    EXPECT_NE(text.find("~ flow/f2  dense"), std::string::npos) << text;
    // The relative change to four digits, from the Eigen norms above.
    const std::string rel = fmt::format("{:.4g}", (head(b).weight - head(a).weight).norm() / head(a).weight.norm());
    EXPECT_NE(text.find("head.weight  2x6  2/12 changed  largest 0.5 at [1, 3] (-0.625 -> -0.125)  relative " + rel +
                        "\n"),
              std::string::npos)
        << text;
    auto j = nlohmann::json::parse(render_diff_json(d));
    EXPECT_FALSE(j["same"].get<bool>());
    ASSERT_EQ(j["items"].size(), 2u);
    EXPECT_EQ(j["items"][1]["name"], "head");
    EXPECT_EQ(j["items"][1]["tensors"].size(), 1u);
    EXPECT_EQ(j["items"][1]["tensors"][0]["max_index"], nlohmann::json::parse("[1, 3]"));
    EXPECT_EQ(j["items"][1]["tensors"][0]["max_abs_change"].get<double>(), 0.5);
}

TEST(Diff, OneUlpIsFoundAtToleranceZeroAndHiddenAtTolerance) {
    Model a = base(), b = base();
    const double x = lift(a).weight(2, 1);
    lift(b).weight(2, 1) = std::nextafter(x, std::numeric_limits<double>::infinity());
    const double ulp = lift(b).weight(2, 1) - x;

    ModelDiff d0 = diff(a, b, 0.0);
    EXPECT_FALSE(d0.same());
    EXPECT_EQ(changed_names(d0), (std::vector<std::string>{"lift"}));
    const TensorDiff& w = item(d0, "lift")->tensors[0];
    EXPECT_EQ(w.changed, 1);
    EXPECT_EQ(w.max_abs_change, ulp);
    EXPECT_EQ(w.max_index, (std::vector<long>{2, 1}));
    EXPECT_FALSE(w.bit_identical);

    ModelDiff d1 = diff(a, b, 1e-12);
    EXPECT_TRUE(d1.same());
    const TensorDiff& w1 = item(d1, "lift")->tensors[0];
    EXPECT_EQ(w1.changed, 0);
    EXPECT_FALSE(w1.bit_identical);  // still known, just below the tolerance
    EXPECT_EQ(render_diff_text(d1), "tiny: no changes (236 parameters, weight tolerance 1e-12)\n");
}

TEST(Diff, ZeroAndNegativeZeroAreEqualButNotBitIdentical) {
    Model a = base(), b = base();
    lift(a).weight(0, 0) = 0.0;
    lift(b).weight(0, 0) = -0.0;
    ModelDiff d = diff(a, b);
    EXPECT_TRUE(d.same());
    const TensorDiff& w = item(d, "lift")->tensors[0];
    EXPECT_FALSE(w.bit_identical);
    EXPECT_EQ(w.changed, 0);
    EXPECT_TRUE(w.max_index.empty());
}

TEST(Diff, ModelNameAndPorts) {
    Model a = base(), b = base();
    b.name = "tiny2";
    b.input_name = "probe";
    b.output_size = 3;  // the interface alone; the layers are not re-checked by the diff
    ModelDiff d = diff(a, b);
    EXPECT_FALSE(d.same());
    EXPECT_TRUE(changed_names(d).empty());
    Changes want = {{"name", {"tiny", "tiny2"}}, {"input", {"x[3]", "probe[3]"}}, {"output", {"y[2]", "y[3]"}}};
    Changes got;
    for (const SettingChange& s : d.model) got.push_back({s.what, {s.before, s.after}});
    EXPECT_EQ(got, want);
    EXPECT_NE(render_diff_text(d).find("tiny -> tiny2: 0 of 8"), std::string::npos);
}

TEST(Diff, AddedAndRemovedLayersInDescriptionOrder) {
    Model a = base(), b = base();
    polish(b).body.pop_back();                                                     // r2 removed
    polish(b).body.push_back(dense_block(layer("r3", 6, 6, Activation::tanh, 7))); // r3 added
    polish(b).body.push_back(dense_block(layer("r4", 6, 6, Activation::identity, 8, false, false)));
    ModelDiff d = diff(a, b);
    EXPECT_EQ(changed_names(d), (std::vector<std::string>{"r2", "r3", "r4"}));
    std::vector<std::string> order;
    for (const ItemDiff& i : d.items) order.push_back(i.name);
    EXPECT_EQ(order, (std::vector<std::string>{"lift", "flow", "f1", "f2", "polish", "r1", "r2", "r3", "r4", "head"}));
    const ItemDiff* r2 = item(d, "r2");
    EXPECT_EQ(r2->presence, ItemDiff::Presence::removed);
    EXPECT_EQ(r2->path_before, "polish/r2");
    EXPECT_EQ(r2->path_after, "");
    const ItemDiff* r4 = item(d, "r4");
    EXPECT_EQ(r4->presence, ItemDiff::Presence::added);
    EXPECT_EQ(r4->path_after, "polish/r4");
    EXPECT_EQ(r4->summary_after, "dense 6 -> 6, identity, no-bias");
    EXPECT_FALSE(item(d, "r1")->moved);
    // r2 out (42), r3 in (42), r4 in without bias (36).
    EXPECT_EQ(d.parameters_before, 236);
    EXPECT_EQ(d.parameters_after, 236 + 36);
    EXPECT_EQ(d.weight_bytes_after - d.weight_bytes_before, 36 * 4);
    const std::string text = render_diff_text(d);
    EXPECT_NE(text.find("- polish/r2  dense 6 -> 6, identity\n"), std::string::npos) << text;
    EXPECT_NE(text.find("+ polish/r3  dense 6 -> 6, tanh\n"), std::string::npos) << text;
    EXPECT_NE(text.find("parameters    236 -> 272 (+36)\n"), std::string::npos) << text;
    EXPECT_NE(text.find("weight bytes  944 -> 1088 (+144), float32\n"), std::string::npos) << text;
}

TEST(Diff, RemovedFirstLayerStaysFirst) {
    Model a = base(), b = base();
    b.blocks.erase(b.blocks.begin());
    ModelDiff d = diff(a, b);
    ASSERT_FALSE(d.items.empty());
    EXPECT_EQ(d.items[0].name, "lift");
    EXPECT_EQ(d.items[0].presence, ItemDiff::Presence::removed);
    EXPECT_EQ(changed_names(d), (std::vector<std::string>{"lift"}));
}

TEST(Diff, SwappedSiblingsMoveOneLayer) {
    Model a = base(), b = base();
    std::swap(polish(b).body[0], polish(b).body[1]);
    ModelDiff d = diff(a, b);
    // Keeping r2 in place and moving r1 after it is one move; so is the reverse. One of them, not both.
    const int moved = int(item(d, "r1")->moved) + int(item(d, "r2")->moved);
    EXPECT_EQ(moved, 1);
    EXPECT_EQ(changed_names(d).size(), 1u);
    for (const ItemDiff& i : d.items) EXPECT_TRUE(i.settings.empty());
}

TEST(Diff, LayerMovedToAnotherBlock) {
    Model a = base(), b = base();
    Block r2 = polish(b).body[1];
    polish(b).body.pop_back();
    b.blocks.insert(b.blocks.begin() + 3, r2);  // after polish, at the top level
    ModelDiff d = diff(a, b);
    EXPECT_EQ(changed_names(d), (std::vector<std::string>{"r2"}));
    const ItemDiff* i = item(d, "r2");
    EXPECT_TRUE(i->moved);
    EXPECT_EQ(i->path_before, "polish/r2");
    EXPECT_EQ(i->path_after, "r2");
    EXPECT_NE(render_diff_text(d).find("~ r2  dense\n    moved  from polish/r2\n"), std::string::npos) << render_diff_text(d);
}

TEST(Diff, KindChange) {
    Model a = base(), b = base();
    std::vector<Block> body;
    body.push_back(dense_block(layer("h1", 6, 6, Activation::identity, 9)));
    b.blocks[3] = test::residual("head", 6, std::move(body));
    b.output_size = 6;
    ModelDiff d = diff(a, b);
    const ItemDiff* h = item(d, "head");
    EXPECT_TRUE(h->kind_changed());
    EXPECT_EQ(h->kind_before, "dense");
    EXPECT_EQ(h->kind_after, "residual");
    EXPECT_TRUE(h->tensors.empty());
    EXPECT_EQ(item(d, "h1")->presence, ItemDiff::Presence::added);
    EXPECT_EQ(item(d, "h1")->path_after, "head/h1");
    EXPECT_EQ(changed_names(d), (std::vector<std::string>{"head", "h1"}));
    EXPECT_NE(render_diff_text(d).find("~ head  residual\n"
                                        "    kind was  dense 6 -> 2, leaky-relu 0.01\n"
                                        "    kind now  residual 6\n"), std::string::npos)
        << render_diff_text(d);
}

TEST(Diff, DenseSettings) {
    Model a = base(), b = base();
    polish(b).body[0].dense.act = Activation::tanh;               // r1: relu -> tanh
    polish(b).body[0].dense.weight_tensor = "polish_r1_w";        // and a renamed tensor
    polish(b).body[1].dense.has_bias = false;                     // r2: bias dropped
    polish(b).body[1].dense.bias.resize(0);
    polish(b).body[1].dense.bias_tensor.clear();
    head(b).act_param = 0.2;                                      // head: slope 0.01 -> 0.2
    Dense& f1 = flow(b).field[0].dense;                           // f1: time input dropped, 8 -> 9 wide
    f1 = layer("f1", 6, 9, Activation::softplus, 2, false);
    Dense& f2 = flow(b).field[1].dense;
    f2 = layer("f2", 9, 6, Activation::identity, 3);
    ModelDiff d = diff(a, b);

    EXPECT_EQ(settings_of(*item(d, "r1")), (Changes{{"activation", {"relu", "tanh"}},
                                                    {"weight tensor", {"r1.weight", "polish_r1_w"}}}));
    EXPECT_FALSE(item(d, "r1")->tensors[0].reported());  // same values under another name
    EXPECT_EQ(settings_of(*item(d, "r2")), (Changes{{"bias", {"yes", "no-bias"}}}));
    EXPECT_EQ(item(d, "r2")->tensors.size(), 1u);         // no bias to compare
    EXPECT_EQ(settings_of(*item(d, "head")), (Changes{{"activation parameter", {"0.01", "0.2"}}}));
    EXPECT_EQ(settings_of(*item(d, "f1")),
              (Changes{{"time input", {"yes", "no"}}, {"output width", {"8", "9"}}}));
    const TensorDiff& w1 = item(d, "f1")->tensors[0];
    EXPECT_TRUE(w1.shape_changed);
    EXPECT_EQ(w1.shape_before, (std::vector<long>{8, 7}));
    EXPECT_EQ(w1.shape_after, (std::vector<long>{9, 6}));
    EXPECT_TRUE(item(d, "f1")->tensors[1].shape_changed);  // bias 8 -> 9
    EXPECT_EQ(settings_of(*item(d, "f2")), (Changes{{"input width", {"8", "9"}}}));
    // MACs of one field evaluation by hand: 8*7 + 6*8 before, 9*6 + 6*9 after.
    const ItemDiff* fl = item(d, "flow");
    EXPECT_TRUE(fl->settings.empty());
    EXPECT_EQ(fl->field_macs_before, 104);
    EXPECT_EQ(fl->field_macs_after, 108);
    EXPECT_TRUE(fl->changed());
    // Parameters: r2 loses 6 biases; f1 64 -> 63; f2 54 -> 60.
    EXPECT_EQ(d.parameters_after - d.parameters_before, -6 - 1 + 6);

    const std::string text = render_diff_text(d);
    EXPECT_NE(text.find("~ polish/r1  dense\n"
                        "    activation     relu -> tanh\n"
                        "    weight tensor  r1.weight -> polish_r1_w\n"),
              std::string::npos)
        << text;
    EXPECT_NE(text.find("f1.weight  8x7 -> 9x6  shape changed; values not compared\n"), std::string::npos) << text;
    EXPECT_NE(text.find("MACs per eval  104 -> 108 (+4)\n"), std::string::npos) << text;
}

TEST(Diff, ContinuousSettingsAndSolverCost) {
    Model a = base(), b = base();
    Continuous& c = flow(b);
    c.t1 = 0.5;
    c.augment = 2;  // the field's widths are the caller's business here: only the block is compared
    c.solver = test::adaptive_solver("dormand-prince", 1e-3, 1e-6, 20);
    c.solver.written = {"rtol", "atol", "max-steps"};
    c.trained.reset();
    ModelDiff d = diff(a, b);
    const ItemDiff* f = item(d, "flow");
    ASSERT_EQ(f->settings.size(), 4u);
    EXPECT_EQ(f->settings[0].what, "augment");
    EXPECT_EQ(f->settings[0].before, "1");
    EXPECT_EQ(f->settings[0].after, "2");
    EXPECT_EQ(f->settings[1].what, "interval");
    EXPECT_EQ(f->settings[1].before, "[0, 1]");
    EXPECT_EQ(f->settings[1].after, "[0, 0.5]");
    EXPECT_EQ(f->settings[2].what, "solver");
    EXPECT_EQ(f->settings[2].before, "rk4, steps 6");
    EXPECT_EQ(f->settings[2].after, format_solver(c.solver));
    EXPECT_EQ(f->settings[2].settings, (std::vector<std::string>{"method", "steps", "rtol", "atol", "max-steps"}));
    EXPECT_EQ(f->settings[3].what, "trained-with");
    EXPECT_EQ(f->settings[3].before, "rk4, steps 6");
    EXPECT_EQ(f->settings[3].after, "none");
    EXPECT_TRUE(f->settings[3].settings.empty());
    // Worst case by the counting rule of DEVELOPERS.md: rk4 6 steps x 4 stages; Dormand-Prince
    // (7 stages, FSAL, automatic first step): 1 + 1 + 20 x 6.
    EXPECT_EQ(f->field_evals_before, 24);
    EXPECT_EQ(f->field_evals_after, 122);
    EXPECT_NE(render_diff_text(d).find("field evals   24 -> 122 (+98), worst case\n"), std::string::npos)
        << render_diff_text(d);

    Model e = base();
    flow(e).trained->steps = 10;
    flow(e).solver.pi_beta = 0.3;  // unused by the integral controller, but a different setting
    ModelDiff d2 = diff(a, e);
    const ItemDiff* f2 = item(d2, "flow");
    ASSERT_EQ(f2->settings.size(), 2u);
    EXPECT_EQ(f2->settings[0].settings, (std::vector<std::string>{"pi-beta"}));
    EXPECT_EQ(f2->settings[1].what, "trained-with");
    EXPECT_EQ(f2->settings[1].after, "rk4, steps 10");
    EXPECT_EQ(f2->settings[1].settings, (std::vector<std::string>{"steps"}));
    EXPECT_EQ(f2->field_evals_after, 24);
}

TEST(Diff, BlockWidthsAndBiasTensorName) {
    Model a = base(), b = base();
    polish(b).width = 7;
    flow(b).width = 4;  // the block's settings only; the diff does not re-check shapes
    head(b).bias_tensor = "head_b";
    ModelDiff d = diff(a, b);
    EXPECT_EQ(settings_of(*item(d, "polish")), (Changes{{"width", {"6", "7"}}}));
    EXPECT_EQ(settings_of(*item(d, "flow")), (Changes{{"width", {"5", "4"}}}));
    EXPECT_EQ(settings_of(*item(d, "head")), (Changes{{"bias tensor", {"head.bias", "head_b"}}}));
    EXPECT_EQ(item(d, "head")->tensors[1].name_after, "head_b");
    EXPECT_TRUE(item(d, "head")->tensors[1].bit_identical);
}

TEST(Diff, JsonOfAddedAndRemoved) {
    Model a = base(), b = base();
    polish(b).body[1].dense.name = "r5";  // a rename is a removal and an addition
    polish(b).body[1].dense.weight_tensor = "r5.weight";
    polish(b).body[1].dense.bias_tensor = "r5.bias";
    auto j = nlohmann::json::parse(render_diff_json(diff(a, b)));
    // The removal stands where the layer stood, before the addition that follows it.
    ASSERT_EQ(j["items"].size(), 2u);
    EXPECT_EQ(j["items"][0]["name"], "r2");
    EXPECT_EQ(j["items"][0]["presence"], "removed");
    EXPECT_EQ(j["items"][0]["summary_before"], "dense 6 -> 6, identity");
    EXPECT_TRUE(j["items"][0]["kind_after"].is_null());
    EXPECT_EQ(j["items"][1]["name"], "r5");
    EXPECT_EQ(j["items"][1]["presence"], "added");
    EXPECT_TRUE(j["items"][1]["path_before"].is_null());
    EXPECT_EQ(j["items"][1]["path_after"], "polish/r5");
    EXPECT_EQ(j["parameters_before"], 236);
    EXPECT_EQ(j["parameters_after"], 236);
}

TEST(Diff, UnboundWeightsAreReported) {
    Model a = base(), b = base();
    head(b).weight.resize(0, 0);
    Diagnostics diags;
    EXPECT_FALSE(diff_models(a, b, DiffOptions{}, diags).has_value());
    EXPECT_EQ(diags.render(), "error: diff: layer 'head' of the second model 'tiny' has no weights bound to its shape\n");
}

TEST(Diff, ToleranceMustBeFiniteAndNotNegative) {
    for (double tol : {-1e-9, std::numeric_limits<double>::quiet_NaN(), std::numeric_limits<double>::infinity()}) {
        Diagnostics diags;
        DiffOptions o;
        o.weight_tolerance = tol;
        EXPECT_FALSE(diff_models(base(), base(), o, diags).has_value());
        EXPECT_EQ(diags.render(), "error: diff: the weight tolerance must be a finite number at or above 0, not " +
                                      format_double(tol) + "\n");
    }
}

// --- a sample and an edited copy -------------------------------------------

// As the command line loads a model (compiler/load.hpp).
std::optional<Model> load(const fs::path& mnd) {
    Diagnostics diags;
    auto loaded = load_model(mnd.string(), Precision::float32, diags);
    EXPECT_TRUE(loaded.has_value()) << diags.render();
    if (!loaded) return std::nullopt;
    return std::move(loaded->model);
}

TEST(Diff, SampleAgainstItself) {
    const fs::path mnd = fs::path(MEANDER_SOURCE_DIR) / "samples/fan_balance/fan_balance.mnd";
    auto a = load(mnd), b = load(mnd);
    ASSERT_TRUE(a && b);
    ModelDiff d = diff(*a, *b);
    EXPECT_TRUE(d.same());
    EXPECT_NE(render_diff_text(d).find("fan_balance: no changes"), std::string::npos);
}

// A copy of a sample's description (and its weights) in a scratch folder, each
// (from, to) replacing the first `from`; empty when a `from` is not there.
std::optional<fs::path> edited_sample(const std::string& sample, const std::string& scratch_name,
                                      const std::vector<std::pair<std::string, std::string>>& edits) {
    const fs::path dir = fs::path(MEANDER_SOURCE_DIR) / "samples" / sample;
    const fs::path scratch = test::scratch_dir("diff", scratch_name);
    std::string text = test::read_text(dir / (sample + ".mnd"));
    for (const auto& [from, to] : edits) {
        const auto at = text.find(from);
        if (at == std::string::npos) return std::nullopt;
        text.replace(at, from.size(), to);
    }
    test::write_text(scratch / (sample + ".mnd"), text);
    fs::copy_file(dir / (sample + ".npz"), scratch / (sample + ".npz"));
    return scratch / (sample + ".mnd");
}

// soil_probe restores its outputs' units with y_mean and y_std; a copy that
// drops that (and renames an output) computes other numbers with the same
// layers: diff says so (the values are the sample's own tensors, the change the edit's).
TEST(Diff, StandardisationAndNamesOfTheValues) {
    const auto copy = edited_sample("soil_probe", "soil_probe_values",
                                    {{", standardised mean \"y_mean\" scale \"y_std\"", ""},
                                     {"weights \"soil_probe.npz\"\n", "weights \"soil_probe.npz\"\nignore \"y_*\"\n"},
                                     {"pore_ec_dsm in", "pore_ec in"}});
    ASSERT_TRUE(copy);
    auto a = load(fs::path(MEANDER_SOURCE_DIR) / "samples/soil_probe/soil_probe.mnd"), b = load(*copy);
    ASSERT_TRUE(a && b);
    ModelDiff d = diff(*a, *b);
    EXPECT_FALSE(d.same());
    EXPECT_TRUE(changed_names(d).empty());
    Changes want = {{"output names", {"water_pct in \"%\", pore_ec_dsm in \"dS/m\"", "water_pct in \"%\", pore_ec in \"dS/m\""}},
                    {"output standardisation", {"mean \"y_mean\" scale \"y_std\"", "none"}}};
    Changes got;
    for (const SettingChange& c : d.model) got.push_back({c.what, {c.before, c.after}});
    EXPECT_EQ(got, want);

    // The same standardisation with other values: the largest change is named.
    Model c = *a;
    c.input_info.standardised->mean(2) += 0.25;
    ModelDiff e = diff(*a, c);
    ASSERT_EQ(e.model.size(), 1u);
    EXPECT_EQ(e.model[0].what, "input standardisation values");
    EXPECT_EQ(e.model[0].after, "largest change of a mean 0.25, of a scale 0");
}

TEST(Diff, SampleWithMoreSteps) {
    const auto copy = edited_sample("fan_balance", "fan_balance_steps", {{"  solver rk4, steps 8\n", "  solver rk4, steps 12\n"}});
    ASSERT_TRUE(copy);
    auto a = load(fs::path(MEANDER_SOURCE_DIR) / "samples/fan_balance/fan_balance.mnd"), b = load(*copy);
    ASSERT_TRUE(a && b);
    ModelDiff d = diff(*a, *b);
    EXPECT_FALSE(d.same());
    EXPECT_TRUE(d.model.empty());
    EXPECT_EQ(changed_names(d), (std::vector<std::string>{"settle"}));
    const ItemDiff* s = item(d, "settle");
    ASSERT_EQ(s->settings.size(), 1u);
    EXPECT_EQ(s->settings[0].what, "solver");
    EXPECT_EQ(s->settings[0].before, "rk4, steps 8");
    EXPECT_EQ(s->settings[0].after, "rk4, steps 12");
    EXPECT_EQ(s->settings[0].settings, (std::vector<std::string>{"steps"}));
    // rk4 evaluates the field 4 times a step: 8 x 4 and 12 x 4.
    EXPECT_EQ(s->field_evals_before, 32);
    EXPECT_EQ(s->field_evals_after, 48);
    EXPECT_EQ(s->field_macs_before, s->field_macs_after);
    for (const ItemDiff& i : d.items)
        for (const TensorDiff& t : i.tensors) EXPECT_TRUE(t.bit_identical) << t.name_before;
    // The whole report; the parameters by hand from the description: lift 8*12+12, f1 16*15+16,
    // f2 14*16+14, r1 and r2 14*14+14, head 4*14+4.
    EXPECT_EQ(d.parameters_before, 108 + 256 + 238 + 210 + 210 + 60);
    EXPECT_EQ(render_diff_text(d),
              "fan_balance: 1 of 8 blocks and layers changed (weight tolerance 0)\n"
              "\n"
              "~ settle  continuous\n"
              "    solver       rk4, steps 8 -> rk4, steps 12  (steps)\n"
              "    field evals  32 -> 48 (+16), worst case\n"
              "\n"
              "parameters    1082 (unchanged)\n"
              "weight bytes  4328 (unchanged), float32\n");
    auto j = nlohmann::json::parse(render_diff_json(d));
    ASSERT_EQ(j["items"].size(), 1u);
    EXPECT_EQ(j["items"][0]["settings"][0]["settings"], nlohmann::json::parse(R"(["steps"])"));
    EXPECT_EQ(j["items"][0]["field_evals_worst_before"], 32);
    EXPECT_EQ(j["items"][0]["field_evals_worst_after"], 48);
}

}  // namespace
}  // namespace meander

namespace meander {
namespace {

// A streaming sample against an edited copy: the evolution's steps-per-unit (its worst
// case at the largest gap, 4: ceil(2 x 4) = 8 rk4 steps, 32 evaluations, and ceil(3 x 4)
// = 12, 48), one weight of the GRU cell's hidden half, and the largest gap.
TEST(Diff, StreamingSampleParts) {
    const fs::path dir = fs::path(MEANDER_SOURCE_DIR) / "samples/parcel_chill";
    const fs::path scratch = test::scratch_dir("diff", "parcel_chill_edit");
    std::string text = test::read_text(dir / "parcel_chill.mnd");
    for (const auto& [from, to] : std::vector<std::pair<std::string, std::string>>{
             {"  solver rk4, steps-per-unit 2", "  solver rk4, steps-per-unit 3"}, {"largest-gap 4 ", "largest-gap 4.5 "}}) {
        const auto at = text.find(from);
        ASSERT_NE(at, std::string::npos) << from;
        text.replace(at, from.size(), to);
    }
    test::write_text(scratch / "parcel_chill.mnd", text);
    fs::copy_file(dir / "parcel_chill.pt", scratch / "parcel_chill.pt", fs::copy_options::overwrite_existing);
    auto a = load(dir / "parcel_chill.mnd"), b = load(scratch / "parcel_chill.mnd");
    ASSERT_TRUE(a && b);
    b->stream->update_layers[1].dense.weight(2, 1) += 0.25;

    ModelDiff d = diff(*a, *b);
    EXPECT_FALSE(d.same());
    ASSERT_EQ(d.model.size(), 1u);
    EXPECT_EQ(d.model[0].what, "state");
    EXPECT_EQ(d.model[0].before, "h[8], largest-gap 4");
    EXPECT_EQ(d.model[0].after, "h[8], largest-gap 4.5");
    EXPECT_EQ(changed_names(d), (std::vector<std::string>{"drift", "cell.hh"}));
    const ItemDiff* drift = item(d, "drift");
    ASSERT_NE(drift, nullptr);
    EXPECT_EQ(drift->settings[0].before, "rk4, steps-per-unit 2");
    EXPECT_EQ(drift->settings[0].settings, (std::vector<std::string>{"steps-per-unit"}));
    EXPECT_EQ(drift->field_evals_before, 32);
    EXPECT_EQ(drift->field_evals_after, 4 * 14);  // ceil(3 x 4.5) = 14 steps
    const ItemDiff* hh = item(d, "cell.hh");
    ASSERT_NE(hh, nullptr);
    ASSERT_EQ(hh->tensors.size(), 2u);
    EXPECT_EQ(hh->tensors[0].name_before, "cell.weight_hh");
    EXPECT_EQ(hh->tensors[0].changed, 1);
    EXPECT_EQ(hh->tensors[0].max_index, (std::vector<long>{2, 1}));
    EXPECT_DOUBLE_EQ(hh->tensors[0].max_abs_change, 0.25);
    // Parameters: f1 16*8+16, f2 8*16+8, the cell 24*1+24 + 24*8+24, head 8+1.
    EXPECT_EQ(d.parameters_before, 144 + 136 + 48 + 216 + 9);
    EXPECT_NE(render_diff_text(d).find("~ drift  continuous\n"), std::string::npos) << render_diff_text(d);
}

// A plain model against a streaming one: the state appears, the parts are added.
TEST(Diff, PlainAgainstStreaming) {
    const fs::path plain = fs::path(MEANDER_SOURCE_DIR) / "samples/fan_balance/fan_balance.mnd";
    const fs::path stream = fs::path(MEANDER_SOURCE_DIR) / "samples/parcel_chill/parcel_chill.mnd";
    auto a = load(plain), b = load(stream);
    ASSERT_TRUE(a && b);
    ModelDiff d = diff(*a, *b);
    bool state = false;
    for (const SettingChange& s : d.model)
        if (s.what == "state") state = s.before == "none (not streaming)" && s.after == "h[8], largest-gap 4";
    EXPECT_TRUE(state) << render_diff_text(d);
    const ItemDiff* drift = item(d, "drift");
    ASSERT_NE(drift, nullptr);
    EXPECT_EQ(drift->presence, ItemDiff::Presence::added);
    EXPECT_EQ(drift->summary_after, "continuous 8, t in [0, gap], augment 0, solver rk4, steps-per-unit 2");
}

}  // namespace
}  // namespace meander
