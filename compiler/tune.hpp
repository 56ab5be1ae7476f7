// Tune: how large a solver budget a continuous block needs. Each continuous
// block in turn (the others keep their deployed solver) is run against a tight
// reference with a sweep of candidate budgets: step counts for fixed-step
// methods, decades of rtol for adaptive ones. The report gives every
// candidate's deviation from the reference and its cost, and recommends the
// cheapest candidate that meets the target.
#pragma once

#include <functional>
#include <optional>
#include <string>
#include <vector>

#include "../runtime/model.hpp"
#include "labels.hpp"
#include "source.hpp"

namespace meander {

// Where tune is, for a progress line on long runs.
struct TuneProgress {
    std::string block;
    int block_index = 0;            // 1-based, of `blocks`
    int blocks = 0;                 // continuous blocks in the model
    int done = 0;                   // candidates of this block measured so far
    int planned = 0;                // at most this many (a stopped sweep needs fewer)
    double seconds = 0.0;           // since tune_model started
};

struct TuneOptions {
    // Largest allowed deviation of a model output from the reference, as
    // |out - ref| / max(1, |ref|), over every input row and output.
    double target = 1e-4;
    // Methods to sweep (tableau keys); empty: the block's own method.
    std::vector<std::string> methods;
    // Fixed-step sweep: N = 1, 2, 3, 4, 6, 8, 12, 16, ... up to this.
    int max_steps_sweep = 256;
    // float32 stops the rtol sweep at sqrt(FLT_EPSILON), float64 at sqrt(DBL_EPSILON).
    Precision precision = Precision::float32;
    std::vector<std::vector<double>> inputs;  // rows of the model's input width
    // Held-out labels for the rows: every candidate's task metric is reported.
    std::optional<Labels> labels;
    bool classification = false;    // the model ends in softmax (is_classifier)
    // With labels: choose by "task metric no worse than the deployed solver's
    // by more than this fraction" (score <= deployed score * (1 + slack))
    // instead of by deviation.
    std::optional<double> metric_slack;
    // A fixed-step method's sweep stops two grid points after the first step
    // count that meets the target: larger counts cost more and cannot be
    // chosen. true: try every count up to max_steps_sweep (for the plot).
    bool whole_sweep = false;
    // Threads for the rows (0: every core). The report does not depend on it.
    int threads = 0;
    // The same description with real weights when `model` stores some as integers
    // (load_model's storage argument): the reference then comes from it, so each
    // candidate's deviation holds the integer weights' error beside the solver's.
    const Model* reference_model = nullptr;
    // Called after each candidate (and the reference) of each block, from the calling thread.
    std::function<void(const TuneProgress&)> progress;
    // The core whose static cycle estimate (`meander cost`'s, compiler/cost.hpp)
    // each candidate gets, in float32: a core_name(), "cortex-m4f" by default.
    std::string core = "cortex-m4f";
};

// Where a fixed-step sweep stopped early (TuneOptions::whole_sweep false).
struct SweepStop {
    std::string method;
    int first_meeting = 0;          // the smallest step count that meets the target
    int last_tried = 0;             // the largest step count tried
};

// One solver budget tried on every input row.
struct TuneCandidate {
    SolverSpec spec;                // method with steps, or rtol/atol/max-steps
    bool adaptive = false;
    bool ok = false;                // every row evaluated with result ok
    std::string failure;            // when !ok: the result name ("step_limit", ...)
    int failure_row = -1;           // when !ok: 0-based input row
    std::string failure_block;      // when !ok: the block that failed
    double deviation = 0.0;         // largest |out - ref| / max(1, |ref|) (when ok)
    int worst_row = 0;              // 0-based input row and output of that deviation
    int worst_output = 0;
    long worst_field_evals = 0;     // of this block per inference: exact for fixed step, max-steps bound for adaptive
    long measured_field_evals = 0;  // of this block: largest over the rows
    long max_attempts = 0;          // adaptive: largest accepted + rejected steps over the rows
    long long worst_macs = 0;       // field MACs x worst_field_evals
    // The whole model's estimated cycles per inference on the report's core with this
    // candidate in its block and the other blocks as deployed, at worst_field_evals
    // (float32; float64 has no figures).
    std::optional<double> worst_cycles;
    bool meets = false;             // ok and deviation <= target (or the metric rule, TuneOptions::metric_slack)
    std::optional<TaskMetric> metric;  // with labels, when ok
};

struct TuneBlock {
    std::string name;
    int state = 0;                  // width + augment
    long field_macs = 0;            // one field evaluation
    SolverSpec reference;           // dormand-prince at rtol = atol = 1e-12
    long reference_field_evals = 0; // largest over the rows
    TuneCandidate deployed;         // the block's own solver line
    std::optional<SolverSpec> trained;
    std::vector<TuneCandidate> candidates;  // in sweep order, method by method
    std::optional<std::size_t> chosen;      // index into candidates: the cheapest that meets the target
    std::optional<std::size_t> closest;     // index of the smallest deviation (when none meets)
    std::string solver_line;        // "solver rk4, steps 6" for the description (when chosen)
    std::vector<std::string> warnings;
    std::vector<SweepStop> stopped;         // fixed-step sweeps cut short, in method order
};

struct TuneReport {
    std::string model;
    double target = 0.0;
    bool labelled = false;
    bool classification = false;
    std::optional<double> metric_slack;
    std::string output_name;
    Precision precision = Precision::float32;
    std::string core;               // the core of the candidates' worst_cycles
    double rtol_floor = 0.0;        // smallest rtol swept for this precision
    int rows = 0;
    int outputs = 0;
    std::vector<TuneBlock> blocks;  // continuous blocks in model order
};

// `model` must have passed check_model and bind_weights. Returns nullopt
// (with diagnostics) for bad options or inputs, or when the reference itself
// cannot be computed. A target that no candidate meets is not an error.
std::optional<TuneReport> tune_model(const Model& model, const TuneOptions& opts, Diagnostics& diags);

// A table per block, then its recommendation.
std::string render_tune_text(const TuneReport& report);
std::string render_tune_json(const TuneReport& report);

}  // namespace meander
