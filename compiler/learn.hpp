// Learning on the device: which parameters the emitted code may change, checked
// against the model, and where each sits in the emitted parameter block.
// compiler/emit/learn.cpp renders the code from this plan; `cost` reads it.
#pragma once

#include <cstddef>
#include <optional>
#include <string>
#include <vector>

#include "../runtime/model.hpp"
#include "source.hpp"

namespace meander {

// One dense layer (every layer, in for_each_dense order) and what of it learns.
// Offsets are in reals in the parameter block: the weight row by row
// (out x in_total, PyTorch's Linear layout), then the bias.
struct LearnLayer {
    const Dense* dense = nullptr;
    bool weight = false;
    bool bias = false;
    std::size_t weight_at = 0;
    std::size_t bias_at = 0;
    bool any() const { return weight || bias; }
};

enum class LearnLoss { squared_error, cross_entropy };

struct LearnPlan {
    LearnSpec::Way way = LearnSpec::Way::steps;
    std::vector<LearnLayer> layers;
    std::size_t count = 0;          // learnable reals
    std::size_t first_block = 0;    // the first top-level block holding a learnable layer
    LearnLoss loss = LearnLoss::squared_error;  // cross-entropy for a softmax head

    const LearnLayer* find(const Dense& d) const {
        for (const LearnLayer& l : layers)
            if (l.dense == &d) return &l;
        return nullptr;
    }
};

// The spec checked against the model. `src` is the description when the spec
// came from its `learn` statement (diagnostics then point into it), else null
// and `file` names where the spec came from (the command line).
std::optional<LearnPlan> plan_learning(const Model& model, const LearnSpec& spec, const Source* src,
                                       const std::string& file, Diagnostics& diags);

// compile --learn WHAT [--learn-by WAY]: WHAT is `biases`, `head`, `all` or a
// comma-separated list of layer names; WAY `steps` or `adjoint`.
std::optional<LearnSpec> learn_spec_from_option(const std::string& what, const std::string& by, Diagnostics& diags);

const char* learn_way_name(LearnSpec::Way w);

}  // namespace meander
