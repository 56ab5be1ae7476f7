// Diff: what changed between two models, for the review of a retrained or
// edited model. Compares two checked and bound models: their interface, the
// blocks and layers (matched by name, which is unique in a model), every
// layer's and block's settings, the deployed and trained-with solvers and
// what they cost, and the weights value by value.
#pragma once

#include <optional>
#include <string>
#include <vector>

#include "../runtime/model.hpp"
#include "source.hpp"

namespace meander {

struct DiffOptions {
    double weight_tolerance = 0.0;  // |delta| at or below it counts as unchanged
};

// One setting whose value differs, each side as a description writes it
// ("vib[8]", "leaky-relu 0.01", "[0, 1]", "rk4, steps 8"); "none" when absent.
struct SettingChange {
    std::string what;               // "name", "input", "output", "input width", "activation", "solver", ...
    std::string before;
    std::string after;
    std::vector<std::string> settings;  // solver and trained-with: which options differ ("method", "steps", "rtol", ...)
};

// The values of one tensor of a dense layer present in both models.
struct TensorDiff {
    std::string role;               // "weight" or "bias"
    std::string name_before;        // tensor names in the weights files
    std::string name_after;
    std::vector<long> shape_before; // (out, in_total) or (out,)
    std::vector<long> shape_after;
    bool shape_changed = false;     // then no value is compared
    long values = 0;                // number of values (same shape only)
    long changed = 0;               // values with |delta| above the tolerance
    bool bit_identical = true;      // every value has the same bits (0 and -0 differ)
    double max_abs_change = 0.0;    // largest |delta|, first in C order on a tie
    std::vector<long> max_index;    // its index tuple (empty when every delta is 0)
    double max_before = 0.0;        // the two values there
    double max_after = 0.0;
    double rel_frobenius = 0.0;     // ||after - before|| / ||before||; inf when before is all zero and after is not

    bool reported() const { return shape_changed || changed > 0; }
};

// A block or layer, matched by name between the two models.
struct ItemDiff {
    enum class Presence { both, added, removed };
    std::string name;
    Presence presence = Presence::both;
    std::string path_before;        // "settle/f1"; empty on the side it is missing from
    std::string path_after;
    std::string kind_before;        // "dense", "residual", "continuous"; empty when missing
    std::string kind_after;
    std::string summary_before;     // one-line description ("dense 16 -> 14, tanh"); empty when missing
    std::string summary_after;
    bool moved = false;             // another parent, or out of order among the siblings both models share

    std::vector<SettingChange> settings;  // same kind only
    std::vector<TensorDiff> tensors;      // dense layers of the same kind in both

    // Continuous blocks in both: cost of the deployed solver.
    bool continuous = false;
    long field_evals_before = 0;    // worst case (exact for fixed step)
    long field_evals_after = 0;
    long field_macs_before = 0;     // MACs of one field evaluation
    long field_macs_after = 0;

    bool kind_changed() const { return presence == Presence::both && kind_before != kind_after; }
    bool changed() const;
};

struct ModelDiff {
    std::string name_before;
    std::string name_after;
    double tolerance = 0.0;
    std::vector<SettingChange> model;   // name, input, output
    std::vector<ItemDiff> items;        // every block and layer of either model, in description order
    long parameters_before = 0;         // weights and biases
    long parameters_after = 0;
    long weight_bytes_before = 0;       // as float32
    long weight_bytes_after = 0;

    bool same() const;
};

// `a` and `b` must have passed check_model and bind_weights; a model whose
// matrices do not match its layers, or a negative or non-finite tolerance, is
// reported and gives nullopt.
std::optional<ModelDiff> diff_models(const Model& a, const Model& b, const DiffOptions& opts, Diagnostics& diags);

// Only what changed; a single "no changes" line when nothing did.
std::string render_diff_text(const ModelDiff& d);
std::string render_diff_json(const ModelDiff& d);

}  // namespace meander
