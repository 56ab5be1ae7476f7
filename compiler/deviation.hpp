// Deviation: what integer weight storage costs in accuracy. The quantised model
// against the same model with its weights as reals, both through the reference
// evaluator on the same input rows: the largest deviation per output and, with
// labels, the task metric of each.
#pragma once

#include <optional>
#include <string>
#include <vector>

#include "../runtime/evaluate.hpp"
#include "../runtime/model.hpp"
#include "labels.hpp"
#include "quantise.hpp"

namespace meander {

struct StorageDeviation {
    struct Layer {
        std::string name;
        WeightStorage storage = WeightStorage::real;
        long weights = 0;
        long bytes = 0, real_bytes = 0;      // the layer's weight table (with scales) as stored, and as reals
        std::string note;                    // kept real: why; zero rows
    };
    std::vector<Layer> layers;               // every dense layer, in description order
    int rows = 0;                            // rows both models evaluated
    int failed_rows = 0;                     // rows one of them did not evaluate
    std::vector<double> max_abs, max_rel;    // per output: largest |q - f|, and |q - f| / max(1, |f|)
    std::vector<int> max_abs_row;            // 0-based
    std::optional<TaskMetric> metric_real, metric_quantised;
    bool any_integer() const;
};

// `quantised` and `real` are the same description loaded with and without integer
// storage (load_model's storage argument); `notes` are quantise_model's.
StorageDeviation measure_storage_deviation(const Model& quantised, const Model& real, const std::vector<StorageNote>& notes,
                                           Precision p, const std::vector<std::vector<double>>& inputs,
                                           const std::optional<Labels>& labels);

// The same for results already computed: `quantised` and `real` hold one result per
// row (a streaming model's observations through evaluate_sequences).
StorageDeviation storage_deviation_of(const Model& quantised, const std::vector<StorageNote>& notes, Precision p,
                                      const std::vector<EvalResult>& quantised_results,
                                      const std::vector<EvalResult>& real_results, const std::optional<Labels>& labels);

std::string render_storage_deviation(const StorageDeviation& d, const Model& model);

}  // namespace meander
