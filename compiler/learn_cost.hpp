// cost --learn: cycles of one learning step (and of its forward part) measured
// on the emulated Cortex-M4F, M3 and M7, the way `cost` measures inference
// (compiler/cost_cycles.cpp) but with tests/target/board_learn_main.cpp as the
// driver: per row, the learning infer and then one learn_step, each between the
// row marks, over the input rows with their targets.
#pragma once

#include <optional>
#include <string>
#include <vector>

#include "cost.hpp"
#include "emit.hpp"
#include "labels.hpp"

namespace meander {

struct LearnCycles {
    std::vector<MeasuredCycles> measured;   // per emulated core; cycles and instructions per learning step
    std::string not_measured;               // why nothing was measured (empty when measured)
    std::string targets;                    // where the targets came from
    bool rows_of_zeros = false;             // no input rows were given: one row of zeros
    double rate = 0.01;                     // learn_step's rate and clip in the measured steps
    double clip = 1.0;
};

// `learning` is the emitted model's options with `learn` set. Without labels the
// targets are the reference evaluation's outputs of the same rows (the loss then
// starts near its least; a step's cycles do not depend on how far it is). Returns
// nothing (with a diagnostic) when a build or run fails.
std::optional<LearnCycles> measure_learn_cycles(const Model& model, const EmitOptions& learning,
                                                const std::vector<std::vector<double>>& inputs,
                                                const std::optional<Labels>& labels, const CostOptions& opts,
                                                Diagnostics& diags);

// The text lines (after cost's "learning on the device" section) and the JSON members.
std::string render_learn_cycles_text(const LearnCycles& c);
std::string render_learn_cycles_json(const LearnCycles& c);  // {"measured": [...], ...} without the braces

}  // namespace meander
