// The command line's shared pieces (compiler/main.cpp and the commands kept in
// files of their own, command_tune.cpp and command_refit.cpp): exit statuses,
// printing diagnostics, loading a model with its input rows.
#pragma once

#include <atomic>
#include <optional>
#include <string>
#include <string_view>
#include <vector>

#include "compiler/load.hpp"
#include "compiler/refit.hpp"
#include "compiler/source.hpp"

namespace meander::cli {

constexpr int kModelError = 1;
constexpr int kUsageError = 2;
constexpr int kDiffTrouble = 2;

// Prints what was collected; returns true when there were no errors.
bool flush(const Diagnostics& diags);

Precision precision_of(const std::string& s);

// `--weights-as`: empty keeps what the description asks for.
using StorageOverride = std::optional<WeightStorage>;
StorageOverride storage_of(const std::string& s);

// Commands that do not handle streaming models yet refuse them plainly.
bool refuse_stream(const LoadedModel& l, const std::string& path, std::string_view command, Diagnostics& diags);

// The model and the rows of an input CSV of its input width.
struct LoadedWithRows {
    LoadedModel loaded;
    std::vector<std::vector<double>> rows;
    std::vector<int> lines;         // the CSV line of each row
};

// `float32_inputs`: the rows feed emitted float32 code, so they must fit a float.
std::optional<LoadedWithRows> load_with_rows(const std::string& path, Precision p, const std::string& input,
                                             Diagnostics& diags, std::string_view command, bool float32_inputs = false,
                                             StorageOverride storage = std::nullopt);

// command_tune.cpp
int cmd_tune(const std::string& model_path, const std::string& input, const std::string& precision, double target,
             const std::vector<std::string>& methods, int sweep, bool json, const std::string& labels_path,
             std::optional<double> metric_slack, const std::string& plot_path, bool whole_sweep, int threads,
             StorageOverride storage, bool storage_sweep, const std::string& core);

// command_refit.cpp. Ctrl-C during refit's training sets g_interrupted (on_interrupt).
extern std::atomic<bool> g_interrupted;
extern "C" void on_interrupt(int);
struct RefitArgs {
    std::string method;
    int steps = 0;
    double rtol = 0, atol = 0;
    int max_steps = 0;
    std::vector<std::string> blocks;
    std::string labels, fit = "reference", way = "discrete", check_input, check_labels;
    RefitOptions o;
};
int cmd_refit(const std::string& model_path, const std::string& input, const std::string& out_path, RefitArgs& a);

}  // namespace meander::cli
