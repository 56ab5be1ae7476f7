// Emit: a checked, bound model -> standalone C++ (a header and a source).
#pragma once

#include <optional>
#include <string>
#include <vector>

#include "../runtime/model.hpp"
#include "learn.hpp"

namespace meander {

struct EmitOptions {
    Precision precision = Precision::float32;
    bool c_header = false;          // also NAME.h, a plain C header, and extern "C" entry points in NAME.cpp
    std::string content_hash;       // hex, of description and weights; printed in the banner
    std::string meander_version;    // printed in the banner
    // Self-test vectors: inputs and the outputs eval gives for them (empty: no self-test source).
    std::vector<std::vector<double>> self_test_inputs;
    std::vector<std::vector<double>> self_test_outputs;
    // A streaming model's golden observations: each one's gap, and whether its sequence begins there.
    std::vector<double> self_test_gaps;
    std::vector<bool> self_test_first;
    // Learning on the device (compiler/learn.hpp): the parameter block, gradient and SGD step.
    std::optional<LearnPlan> learn;
};

struct EmittedFile {
    std::string name;               // file name only: "<model>.hpp", "<model>.cpp", "<model>.h", ...
    std::string text;
};

std::vector<EmittedFile> emit_model(const Model& model, const EmitOptions& opts);

// What one learning step of the emitted code takes (opts.learn must be set): the
// learnable values, the learning workspace in reals, field evaluations and dense
// MACs per gradient, and whether the gradient goes back through a continuous block.
struct LearnFigures {
    std::size_t learnable_count = 0;
    std::size_t workspace_size = 0;
    long field_evals = 0;
    long macs = 0;
    bool through_continuous = false;
};
LearnFigures learn_figures(const Model& model, const EmitOptions& opts);

// A streaming model (compiler/emit/stream.cpp): NAME.hpp and NAME.cpp with a context that
// holds the state, reset(ctx) and observe(ctx, input, gap, output).
std::vector<EmittedFile> emit_stream(const Model& model, const EmitOptions& opts);

}  // namespace meander
