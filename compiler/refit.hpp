// Refit: fine-tune a model's weights for a cheaper solver. The continuous
// blocks get the new solver line; every weight and bias is then trained with
// Adam on mini-batches so that the model under the new solver matches the
// reference (the original weights under a tight Dormand-Prince, rtol = atol =
// 1e-12: distillation on the user's unlabelled inputs) or fits labels.
// Gradients come from runtime/gradient.hpp, the discrete way by default.
// Rows are split into training and held-out parts; training stops early when
// the held-out loss has not improved for `patience` epochs, keeping the best
// weights. Per-row gradients are computed on threads and summed in row order,
// so a seed gives the same weights whatever the thread count.
#pragma once

#include <atomic>
#include <functional>
#include <optional>
#include <string>
#include <vector>

#include "../runtime/gradient.hpp"
#include "../runtime/model.hpp"
#include "labels.hpp"
#include "source.hpp"
#include "weights.hpp"

namespace meander {

struct RefitProgress {
    int epoch = 0;                  // 1-based, finished
    int epochs = 0;                 // the most that will run
    double train_loss = 0.0;
    double holdout_loss = 0.0;
    double seconds = 0.0;           // since the start
};

struct RefitOptions {
    std::vector<std::string> blocks;    // continuous blocks to give `solver`; empty: every one
    SolverSpec solver;
    std::vector<std::vector<double>> inputs;
    std::optional<Labels> labels;       // of `inputs`: reported, and fitted when fit_labels
    // Rows for the before/after figures, not trained on (default: `inputs` and `labels`).
    std::vector<std::vector<double>> check_inputs;
    std::optional<Labels> check_labels;
    bool fit_labels = false;
    bool classification = false;        // softmax head: cross-entropy loss
    GradientWay way = GradientWay::discrete;
    int epochs = 300;
    int batch = 16;
    double rate = 1e-5;                 // Adam step size (a fine-tune: small)
    double holdout = 0.25;              // fraction of rows held out
    int patience = 30;
    int diverge_epochs = 5;             // training loss above ten times its start this many epochs in a row: diverged
    unsigned seed = 1;
    int threads = 0;                    // 0: the hardware's count
    bool float32_weights = true;        // round the result to float32 (the weights file's type) before the after-figures
    std::function<void(const RefitProgress&)> progress;
    const std::atomic<bool>* stop = nullptr;  // set (Ctrl-C): stop at the next batch, report interrupted
};

// A model over every row, as reported before and after.
struct RefitFigures {
    bool ok = true;
    std::string failure;            // "step_limit in block heat on row 3"
    double deviation = 0.0;         // largest |out - ref| / max(1, |ref|), ref: the original weights, tight solver
    long worst_field_evals = 0;     // per inference, summed over continuous blocks
    std::optional<TaskMetric> metric;
};

struct RefitReport {
    enum class End { finished, early_stop, diverged, interrupted };
    End end = End::finished;
    std::string message;            // why it diverged
    int epochs_run = 0;
    int best_epoch = 0;
    double start_holdout_loss = 0.0;
    double best_holdout_loss = 0.0;
    int train_rows = 0;
    int holdout_rows = 0;
    int check_rows = 0;             // rows of the figures
    bool separate_check = false;    // the figures come from rows not trained on
    RefitFigures deployed;          // original weights, deployed solvers
    RefitFigures before;            // original weights, new solver
    RefitFigures after;             // refitted weights, new solver
    Model model;                    // the refitted model (new solver lines, trained-with the same)
};

// The model with `solver` given to the named continuous blocks (all when
// empty), also as their trained-with; nullopt with a usage diagnostic naming
// an unknown or non-continuous block.
std::optional<Model> with_solver(const Model& model, const std::vector<std::string>& blocks, const SolverSpec& solver,
                                 Diagnostics& diags);

// `model` bound and checked. nullopt only for bad options.
std::optional<RefitReport> refit_model(const Model& model, const RefitOptions& opts, Diagnostics& diags);

// The figures of `model` over `rows` against reference outputs.
RefitFigures model_figures(const Model& model, const std::vector<Eigen::VectorXd>& rows,
                           const std::vector<Eigen::VectorXd>& refs, const std::optional<Labels>& labels, bool classification);

// The description text for the refitted model: the original's text with the
// refitted blocks' solver and trained-with lines replaced (or trained-with
// added), the weights line pointing at `weights_file`, and a first comment
// line saying where it came from.
std::string refit_description(const Source& original_src, const Model& original, const Model& refitted,
                              const std::string& weights_file, const std::string& note);

// The refitted model's tensors, named as the description binds them.
TensorSet refit_tensors(const Model& refitted);

std::string render_refit(const RefitReport& r, const Model& original, bool labelled, bool classification);

}  // namespace meander
